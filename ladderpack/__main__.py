"""Allow ``python -m ladderpack``."""

from ladderpack.cli import main

if __name__ == "__main__":
    main()
