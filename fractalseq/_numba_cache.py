"""Where numba keeps its compiled kernels when the package folder is read-only.

The kernels use ``cache=True``.  numba stores its cache next to the source
(``__pycache__`` of each package folder) or, when that is not writable, in the
user's home cache folder; for an unprivileged account whose home is not
writable either (a service user, a container), every command then fails with
numba's "cannot cache function ... no locator available".

:func:`configure` runs when this module is imported, which
``fractalseq/__init__.py`` does first, before any kernel imports numba.  When ``NUMBA_CACHE_DIR`` is unset and a
package folder's ``__pycache__`` cannot be written, it points
``NUMBA_CACHE_DIR`` at a private per-user folder under the temporary directory,
``<tempdir>/fractalseq-numba-<uid>``, created with mode 0700.  numba's cache
holds pickled data that is loaded back, so the folder is only used when it is
a real folder (not a link) owned by the user and writable by nobody else;
otherwise a fresh private folder is used for this run only (and removed at exit).
"""

from __future__ import annotations

import atexit
import logging
import os
import shutil
import stat
import sys
import tempfile
from pathlib import Path

__all__ = ["configure", "shared_cache_folder"]

_PACKAGE = Path(__file__).resolve().parent


def _writable_pycache(folder: Path) -> bool:
    cache = folder / "__pycache__"
    if cache.is_dir():
        return os.access(cache, os.W_OK | os.X_OK)
    return os.access(folder, os.W_OK | os.X_OK)


def _package_cache_writable(package: Path = _PACKAGE) -> bool:
    """Whether numba can write its cache beside the sources (the package and its family folders)."""
    folders = [package] + sorted(p for p in package.iterdir() if (p / "__init__.py").is_file())
    return all(_writable_pycache(f) for f in folders)


def shared_cache_folder(base: str | os.PathLike | None = None) -> Path | None:
    """The per-user cache folder ``<tempdir>/fractalseq-numba-<uid>``, created mode 0700 if missing.

    Parameters
    ----------
    base:
        Folder to create it in (default: :func:`tempfile.gettempdir`).

    Returns
    -------
    Path or None
        The folder, or ``None`` when it exists but is not safe to use: not a
        real folder, owned by another user, or writable by group or others.
    """
    uid = os.getuid()
    folder = Path(base if base is not None else tempfile.gettempdir()) / f"fractalseq-numba-{uid}"
    try:
        os.mkdir(folder, 0o700)
    except FileExistsError:
        pass
    except OSError:
        return None
    try:
        st = os.lstat(folder)
    except OSError:
        return None
    if not stat.S_ISDIR(st.st_mode) or st.st_uid != uid or st.st_mode & 0o022:
        return None
    return folder


def _private_folder() -> str:
    folder = tempfile.mkdtemp(prefix=f"fractalseq-numba-{os.getuid()}-")
    atexit.register(shutil.rmtree, folder, True)
    return folder


def configure() -> str | None:
    """Point numba's cache at a private per-user folder when the package folder is read-only.

    Leaves everything alone when ``NUMBA_CACHE_DIR`` is set or numba can write
    beside the sources.

    Returns
    -------
    str or None
        The folder now in ``NUMBA_CACHE_DIR``, or ``None`` when nothing was changed.
    """
    if os.environ.get("NUMBA_CACHE_DIR") or not hasattr(os, "getuid"):
        return None
    try:
        if _package_cache_writable():
            return None
    except OSError:
        pass
    folder = shared_cache_folder()
    if folder is None:
        logging.getLogger("fractalseq").warning(
            "The numba cache folder %s is not a private folder of this user, so compiled kernels are kept "
            "for this run only.", Path(tempfile.gettempdir()) / f"fractalseq-numba-{os.getuid()}")
        chosen = _private_folder()
    else:
        chosen = str(folder)
    os.environ["NUMBA_CACHE_DIR"] = chosen
    if "numba" in sys.modules:  # imported before fractalseq: make numba read the setting again
        from numba.core import config

        config.reload_config()
    return chosen


#: the folder chosen when the package was imported (``None``: numba's own choice)
CHOSEN = configure()
