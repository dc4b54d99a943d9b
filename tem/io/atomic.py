"""Atomic output: write to a temporary name in the target folder, then rename."""
from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

__all__ = ["atomic_path", "write_text_atomic"]


@contextlib.contextmanager
def atomic_path(target, suffix=None):
    """Yield a temporary path beside ``target``; rename onto it on success.

    On an exception the temporary file is removed and ``target`` is left as
    it was, so a failed run never leaves a half-written product.
    """
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=suffix or target.suffix or ".tmp",
                               dir=target.parent)
    os.close(fd)
    tmp = Path(tmp)
    try:
        yield tmp
        # mkstemp makes the file private (0600); products get the usual umask mode
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_text_atomic(target, text: str) -> Path:
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(target)
