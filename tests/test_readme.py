"""The README's two set-up commands stay true, and CI runs exactly the README's test command."""
from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _code_blocks(text: str) -> list[str]:
    return [b.strip() for b in re.findall(r"```\n(.*?)```", text, flags=re.S)]


def test_readme_opens_with_the_job_then_two_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = _code_blocks(text)
    assert len(blocks) >= 2
    app_cmd, test_cmd = blocks[0], blocks[1]
    assert "screenlab demo" in app_cmd and "pip install" in app_cmd
    assert "pytest" in test_cmd and "pip install" in test_cmd
    # the job paragraph comes before the first command
    first_para = text.split("\n\n")[1]
    assert "catalys" in first_para and len(first_para) > 300


def test_ci_runs_the_readme_test_command_verbatim():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    test_cmd = _code_blocks(readme)[1]
    assert test_cmd in ci.splitlines()
    assert "chromium" in ci


def test_the_import_contract_lives_in_the_repository_and_nothing_points_outside_it():
    contract = (ROOT / "docs" / "campaign-format.md").read_text(encoding="utf-8")
    for heading in ("## campaign.toml", "## catalysts.csv", "## plates.csv", "## layout.csv", "## readings.csv",
                    "## What a bad file gets"):
        assert heading in contract
    assert (ROOT / "docs" / "check-values.md").is_file()
    shared = ROOT.parent / "shared" / "campaign-format.md"   # the team's master copy, where present
    if shared.is_file():
        missing = [ln for ln in shared.read_text(encoding="utf-8").splitlines() if ln.strip() and ln not in contract]
        assert not missing, f"docs/campaign-format.md lacks {len(missing)} lines of the contract, e.g. {missing[:3]}"
    outside = []
    for path in [*ROOT.glob("screenlab/**/*.py"), *ROOT.glob("tests/*.py"), *ROOT.glob("*.md"), *ROOT.glob("docs/*.md")]:
        if path.name == "test_readme.py":
            continue
        if "/work/shared" in path.read_text(encoding="utf-8"):
            outside.append(str(path.relative_to(ROOT)))
    assert not outside, f"files pointing outside the repository: {outside}"
