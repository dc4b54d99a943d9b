"""Reading TOML files (surveys, sidecars) with one-line errors naming the file."""
from __future__ import annotations

import tomllib
from pathlib import Path

from ..errors import input_error

__all__ = ["read_toml"]


def read_toml(path, what: str, file=None) -> dict:
    """Parse a TOML file; every failure is a :class:`TemInputError` naming it.

    ``what`` names the file's role in messages (``survey``, ``sidecar``);
    ``file`` is the name reported for a missing file (default: ``path``).
    """
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        if file is not None:
            raise input_error(what, f"missing {path.name}", file) from None
        raise input_error(what, "file not found", path) from None
    except IsADirectoryError:
        raise input_error(what, "is a folder; give the TOML file", path) from None
    except UnicodeDecodeError:
        raise input_error("toml", "not a text file (UTF-8 TOML expected)", path) from None
    except OSError as exc:
        raise input_error(what, f"cannot read ({exc.strerror or exc.__class__.__name__})",
                          path) from None
    except tomllib.TOMLDecodeError as exc:
        raise input_error("toml", str(exc).splitlines()[0], path) from None
