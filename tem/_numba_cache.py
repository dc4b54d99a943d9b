"""Where numba keeps the compiled kernels (``cache=True``), decided before they are compiled.

numba caches a compiled function in the ``__pycache__`` folder beside its source, else in
the user's cache folder (``~/.cache/numba``). When neither can be written (a shared,
read-only install run by a user whose home is read-only, a container) numba raises
``RuntimeError: cannot cache function ...`` on import, and every command, even
``tem --version``, ended in a traceback. :func:`numba_cache` then points
``NUMBA_CACHE_DIR`` at a private folder of this user under the temporary folder, or, if
even that cannot be used, turns caching off (the kernels are compiled in each process).
A ``NUMBA_CACHE_DIR`` the user set is left alone.

Import this module, and call :func:`numba_cache`, before any ``@numba.njit(cache=...)``.
"""
from __future__ import annotations

import functools
import os
import stat
import sys
import tempfile
from pathlib import Path

__all__ = ["numba_cache", "cache_setting"]


def _writable(folder: Path) -> bool:
    """Whether ``folder`` exists or can be made and a file can be created in it (numba's own
    test of a cache folder)."""
    try:
        os.makedirs(folder, exist_ok=True)
        tempfile.TemporaryFile(dir=folder).close()
    except OSError:
        return False
    return True


def _private_folder(folder: Path) -> bool:
    """Make ``folder`` (mode 0700) or accept it if it exists, is a folder (not a link) of
    this user that no one else can write, and can be written: a shared temporary folder
    must not hand this user's compiled code to another user's folder."""
    try:
        os.makedirs(folder, mode=0o700, exist_ok=True)
        st = os.lstat(folder)
        if not stat.S_ISDIR(st.st_mode) or (hasattr(os, "getuid") and st.st_uid != os.getuid()):
            return False
        if st.st_mode & 0o077:
            os.chmod(folder, 0o700)
    except OSError:
        return False
    return _writable(folder)


def _user_cache_dir() -> Path:
    from numba.misc.appdirs import AppDirs

    return Path(AppDirs(appname="numba", appauthor=False).user_cache_dir)


def cache_setting(environ, source_dir, user_cache_dir, temp_dir) -> tuple[str | None, bool]:
    """``(folder for NUMBA_CACHE_DIR or None to leave it, whether to cache)`` for kernels
    whose source is in ``source_dir``.

    Unchanged when the user set ``NUMBA_CACHE_DIR`` or numba can cache on its own
    (``source_dir/__pycache__`` or ``user_cache_dir`` writable); else
    ``temp_dir/tem-numba-<user>`` when it can be made private; else no caching.
    """
    if environ.get("NUMBA_CACHE_DIR"):
        return None, True
    if _writable(Path(source_dir) / "__pycache__"):
        return None, True
    if user_cache_dir is not None and _writable(Path(user_cache_dir)):
        return None, True
    user = os.getuid() if hasattr(os, "getuid") else (environ.get("USERNAME") or "user")
    own = Path(temp_dir) / f"tem-numba-{user}"
    if _private_folder(own):
        return str(own), True
    return None, False


@functools.lru_cache(maxsize=None)
def numba_cache(source_file: str) -> bool:
    """Whether the kernels of ``source_file`` may use ``cache=True``; sets
    ``NUMBA_CACHE_DIR`` (and numba's loaded configuration) when a folder of this user
    under the temporary folder is needed (:func:`cache_setting`)."""
    try:
        user_dir = _user_cache_dir()
    except Exception:  # noqa: BLE001 - no home folder at all: only the other places
        user_dir = None
    folder, cache = cache_setting(os.environ, Path(source_file).parent, user_dir,
                                  tempfile.gettempdir())
    if folder is not None:
        os.environ["NUMBA_CACHE_DIR"] = folder      # also for worker processes started later
        config = sys.modules.get("numba.core.config")
        if config is not None:                      # numba read the environment already
            config.CACHE_DIR = folder
    return cache
