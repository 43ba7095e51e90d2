"""``python -m screenlab``: the same command line as the ``screenlab`` console script."""
from screenlab.cli import console_main

if __name__ == "__main__":
    console_main()
