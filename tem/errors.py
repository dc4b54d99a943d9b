"""Exceptions with one-line messages that name the file and field at fault."""

__all__ = ["TemInputError", "TemOutputError", "TemWorkersError", "input_error", "output_error",
           "workers_error", "shorten"]


class TemInputError(ValueError):
    """Bad user input: a file, field or value that cannot be used.

    The message is one line and names the file (when there is one) and the
    field. The command line prints it and exits with status 2.
    """


class TemOutputError(OSError):
    """An output could not be written (disk full, file too large, I/O error, permissions).

    The message is one line naming the file and the cause; nothing half-written
    is left behind. The command line prints it and exits with status 1.
    """


class TemWorkersError(TemOutputError):
    """Worker processes could not be started (or the pool broke before a task was taken): the
    machine, not the input. Handled like a failed write: one line, the stage stops, exit
    status 1; ``--jobs 1`` needs no workers."""


def shorten(text: str, limit: int) -> str:
    """One line of at most ``limit`` characters (control characters escaped); a longer text
    is cut at a word boundary and ends in "..." (a word longer than half the limit is cut
    where it reaches it). Where a reason is shortened, its full text is kept elsewhere."""
    text = "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))
    if len(text) <= limit:
        return text
    cut = text[:limit - 2]                 # one more: a word ending at the limit is whole
    space = cut.rfind(" ")
    cut = cut[:space] if space >= (limit - 3) // 2 else cut[:limit - 3]
    return cut.rstrip(" ,;:(-") + "..."


_short = shorten


def input_error(field: str, problem: str, file=None) -> TemInputError:
    """Build a one-line :class:`TemInputError` naming file and field.

    However a field name or a problem was built from the input (a key of
    thousands of characters, a NUL, a newline), the message stays one short
    line: the field is cut at 80 characters and the problem at 400.
    """
    where = f"{file}: " if file else ""
    return TemInputError(f"{where}{_short(field, 80)}: {_short(problem, 400)}")


def output_error(path, exc: OSError) -> TemOutputError:
    """Build a one-line :class:`TemOutputError` for a failed write of ``path``."""
    import errno
    import os

    cause = exc.strerror or os.strerror(exc.errno or 0) or type(exc).__name__
    hint = {errno.ENOSPC: "; free some space and rerun", errno.EFBIG: "; the file-size limit "
            "was reached", errno.EDQUOT: "; the disk quota is used up"}.get(exc.errno, "")
    err = TemOutputError(exc.errno, f"{path}: cannot write: {cause}{hint}")
    return err


def workers_error(exc, started: bool = False) -> TemWorkersError:
    """Build a one-line :class:`TemWorkersError` from the exception the pool raised, or a
    text (``started``: some tasks had finished, so the workers did start and then stopped)."""
    text = exc if isinstance(exc, str) else f"{type(exc).__name__}: {exc}" if str(exc) \
        else type(exc).__name__
    cause = _short(text.splitlines()[0] if text else "", 200)
    what = "worker processes stopped" if started else "cannot start worker processes"
    return TemWorkersError(getattr(exc, "errno", None) or 0,
                           f"{what} ({cause}); rerun with --jobs 1")
