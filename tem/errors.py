"""Exceptions with messages that name the file and field at fault."""

__all__ = ["TemInputError", "input_error"]


class TemInputError(ValueError):
    """Bad user input: a file, field or value that cannot be used.

    The message is one line and names the file (when there is one) and the
    field. The command line prints it and exits with status 2.
    """


def input_error(field: str, problem: str, file=None) -> TemInputError:
    """Build a one-line :class:`TemInputError` naming file and field."""
    where = f"{file}: " if file else ""
    return TemInputError(f"{where}{field}: {problem}")
