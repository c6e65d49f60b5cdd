"""``python -m fractalseq.cli``: the same command line as the ``fractalseq`` script."""

from fractalseq.cli.app import entry

if __name__ == "__main__":
    entry()
