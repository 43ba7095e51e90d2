"""Regenerate demo_campaign/ (the invented demo campaigns, their truth tables and README.md).

Usage: python scripts/make_demo.py [--seed N] [--out FOLDER]

The generator is deterministic: the same seed writes the same bytes. Only the three campaign
folders, demo_campaign/_truth/ and demo_campaign/README.md are replaced.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from screenlab.demo import DEFAULT_SEED, generate_demo


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Regenerate the demo campaign folders.")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default {DEFAULT_SEED})")
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent.parent / "demo_campaign",
                        help="output folder (default: the repository's demo_campaign/)")
    args = parser.parse_args(argv)
    written = generate_demo(args.out, seed=args.seed)
    print(f"wrote {len(written)} files under {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
