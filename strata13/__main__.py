"""Allow ``python -m strata13``."""

from strata13.cli.app import main

if __name__ == "__main__":
    main()
