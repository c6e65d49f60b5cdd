"""``python -m fractalseq`` runs the command line."""

from fractalseq.cli.__main__ import entry

if __name__ == "__main__":
    entry()
