"""``python -m fractalseq.cli``: the same command line as the ``fractalseq`` script.

:func:`entry` imports the command line inside its own guard, so a Ctrl-C while
the commands are still being imported (numba, scipy: about a second) is one line
and exit status 130 like any other interruption, never a traceback.
"""

import sys


def entry() -> None:
    """Run the command line; exit with its status."""
    try:
        from fractalseq.cli.app import main
    except KeyboardInterrupt:
        main = None
    if main is None:
        sys.stderr.write("interrupted: nothing was written.\n")
        sys.stderr.flush()
        # a module interrupted half-way through its import can leave the interpreter's shutdown to end the
        # process by SIGINT (status -2): run the exit handlers here, then leave with 130 directly
        import atexit
        import os

        try:
            atexit._run_exitfuncs()
        except BaseException:  # noqa: BLE001 - nothing was written; leaving is all that is left to do
            pass
        os._exit(130)
    sys.exit(main())


if __name__ == "__main__":
    entry()
