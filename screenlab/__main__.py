"""``python -m screenlab``: the same command line as the ``screenlab`` console script."""
from screenlab.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
