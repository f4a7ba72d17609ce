"""``python -m eddyhop`` runs the command line."""

from eddyhop.cli import main

if __name__ == "__main__":
    main()
