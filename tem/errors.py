"""Exceptions with one-line messages that name the file and field at fault."""

__all__ = ["TemInputError", "TemOutputError", "input_error", "output_error"]


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


def input_error(field: str, problem: str, file=None) -> TemInputError:
    """Build a one-line :class:`TemInputError` naming file and field."""
    where = f"{file}: " if file else ""
    return TemInputError(f"{where}{field}: {problem}")


def output_error(path, exc: OSError) -> TemOutputError:
    """Build a one-line :class:`TemOutputError` for a failed write of ``path``."""
    import errno
    import os

    cause = exc.strerror or os.strerror(exc.errno or 0) or type(exc).__name__
    hint = {errno.ENOSPC: "; free some space and rerun", errno.EFBIG: "; the file-size limit "
            "was reached", errno.EDQUOT: "; the disk quota is used up"}.get(exc.errno, "")
    err = TemOutputError(exc.errno, f"{path}: cannot write: {cause}{hint}")
    return err
