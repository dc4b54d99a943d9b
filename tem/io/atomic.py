"""Atomic output: write to a temporary name in the target folder, then rename.

A product is either complete under its name or absent: the bytes go to a
hidden temporary file beside the target (``.<name>.<random>.tem-part``),
which is renamed onto the target when complete. A failed write (disk full,
file-size limit, I/O error) removes the temporary file and raises
:class:`tem.errors.TemOutputError` naming the file; :func:`clean_partials`
removes the temporaries a killed process left behind.
"""
from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

from ..errors import TemOutputError, output_error

__all__ = ["atomic_path", "write_text_atomic", "write_bytes_atomic", "clean_partials", "PART"]

#: Suffix of every temporary file (never a product's suffix).
PART = ".tem-part"


@contextlib.contextmanager
def atomic_path(target):
    """Yield a temporary path beside ``target``; rename onto it on success.

    On an exception the temporary file is removed and ``target`` is left as
    it was, so a failed run never leaves a half-written product. Failed
    writes (OSError) become :class:`TemOutputError` naming ``target``.
    """
    target = Path(target)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=PART, dir=target.parent)
        os.close(fd)
    except TemOutputError:
        raise
    except OSError as exc:
        blocker = _not_a_folder(target.parent)
        if blocker is not None:       # e.g. a file named 'figures' where the folder goes
            raise TemOutputError(exc.errno, f"{blocker}: exists and is not a folder") from None
        raise output_error(target, exc) from None
    tmp = Path(tmp)
    try:
        yield tmp
        # mkstemp makes the file private (0600); products get the usual umask mode
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, target)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            tmp.unlink()
        if isinstance(exc, OSError) and not isinstance(exc, (TemOutputError, FileNotFoundError)):
            raise output_error(target, exc) from None
        raise


def _not_a_folder(folder: Path):
    """The first of ``folder`` and its parents that exists but is not a folder, else None."""
    for p in [folder, *folder.parents][::-1]:
        try:
            if not p.exists():
                return None
            if not p.is_dir():
                return p
        except OSError:
            return None
    return None


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_bytes_atomic(target, data) -> Path:
    """Write ``data`` (bytes-like) to ``target`` atomically, synced to disk before the rename."""
    with atomic_path(target) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    return Path(target)


def write_text_atomic(target, text: str) -> Path:
    return write_bytes_atomic(target, text.encode("utf-8"))


def clean_partials(root) -> int:
    """Remove the temporary files of interrupted writes under ``root``; returns how many."""
    n = 0
    root = Path(root)
    if not root.is_dir():
        return 0
    for p in root.rglob(f".*{PART}"):
        with contextlib.suppress(OSError):
            p.unlink()
            n += 1
    return n
