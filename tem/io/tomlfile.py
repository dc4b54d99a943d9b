"""Reading TOML files (surveys, sidecars) with one-line errors naming the file."""
from __future__ import annotations

import tomllib
from pathlib import Path

from ..errors import input_error
from .checks import decode_text, read_capped, regular_file

__all__ = ["read_toml", "parse_toml"]

#: Largest TOML file read (a survey of thousands of stations is far smaller).
MAX_TOML_BYTES = 16 * 2**20


def read_toml(path, what: str, file=None) -> dict:
    """Parse a TOML file; every failure is a :class:`TemInputError` naming it.

    ``what`` names the file's role in messages (``survey``, ``sidecar``);
    ``file`` is the name reported for a missing file (default: ``path``).
    Refused: a missing file or a folder, a file over 16 MiB, non-UTF-8
    bytes, NUL characters, TOML syntax errors, integers of more than 4300
    digits and arrays nested beyond Python's recursion limit.
    """
    path = Path(path)
    regular_file(path, what)
    try:
        with open(path, "rb") as fh:
            data = read_capped(fh, MAX_TOML_BYTES)
    except FileNotFoundError:
        if file is not None:
            raise input_error(what, f"missing {path.name}", file) from None
        raise input_error(what, "file not found", path) from None
    except IsADirectoryError:
        raise input_error(what, "is a folder; give the TOML file", path) from None
    except (OSError, ValueError) as exc:
        raise input_error(what, f"cannot read ({getattr(exc, 'strerror', None) or exc.__class__.__name__})",
                          path) from None
    return parse_toml(data, path)


def parse_toml(data: bytes, path=None) -> dict:
    """Parse TOML bytes (see :func:`read_toml`); ``path`` is named in errors."""
    content = decode_text(data, "toml", path, MAX_TOML_BYTES)
    try:
        return tomllib.loads(content)
    except tomllib.TOMLDecodeError as exc:
        raise input_error("toml", str(exc).splitlines()[0][:120], path) from None
    except ValueError as exc:           # an integer beyond Python's digit limit
        raise input_error("toml", f"unreadable value ({str(exc).splitlines()[0][:60]})",
                          path) from None
    except RecursionError:
        raise input_error("toml", "arrays or tables nested too deeply", path) from None
