"""Exceptions whose message is one sentence a user can act on.

The command line prints ``str(error)`` on standard error and exits with
status 2 for every :class:`FractalseqError`; no traceback is shown.  Write
messages as one sentence that names the problem and, where possible, the fix.
"""

from __future__ import annotations


class FractalseqError(Exception):
    """Base class of every error the command line reports without a traceback."""


class InputError(FractalseqError, ValueError):
    """The input data cannot be used (empty, binary, truncated, unknown symbols...)."""


class ParameterError(FractalseqError, ValueError):
    """A parameter is impossible (ratio outside (0, 1), depth beyond the address width...).

    Parameters
    ----------
    message:
        One sentence naming the problem and the fix in terms of the *parameter*
        (the library never names a command-line option).
    parameter:
        The name of the offending parameter of the public function (``depth``,
        ``n_boot``, ...); the command line maps it to its option
        (:data:`fractalseq.cli.common.OPTION_OF`) and says which option to change.
    """

    def __init__(self, message: str, parameter: str | None = None) -> None:
        super().__init__(message)
        self.parameter = parameter


class ModelFileError(FractalseqError, ValueError):
    """A saved model or count file is corrupted, truncated or does not match the data."""


class OutputError(FractalseqError, OSError):
    """An output cannot be written (exists without --force, folder is a file...)."""
