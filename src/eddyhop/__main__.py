"""``python -m eddyhop`` runs the command line (Ctrl-C at any moment exits 130)."""

import sys

if __name__ == "__main__":
    try:
        from eddyhop.cli import entry
    except KeyboardInterrupt:  # while the command line itself is imported
        sys.exit(130)
    entry()
