"""``python -m fractalseq`` runs the command line."""

from fractalseq.cli.app import entry

if __name__ == "__main__":
    entry()
