"""`python -m closecall` runs the command-line interface."""

from closecall.cli.app import main

if __name__ == "__main__":
    main()
