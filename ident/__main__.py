"""``python -m ident`` runs the rigfit command line."""

from ident.cli import main

if __name__ == "__main__":
    main()
