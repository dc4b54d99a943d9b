"""Provenance records written into every product file."""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
import platform
from pathlib import Path

from . import __version__

__all__ = ["file_sha256", "stage_record", "records_to_json", "records_from_json"]


def file_sha256(path) -> str:
    """SHA-256 hex digest of a file, read in 1 MiB blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def stage_record(stage: str, parameters: dict | None = None, inputs=()) -> dict:
    """One structured record: stage, tool version, parameters, input checksums."""
    return {
        "stage": stage,
        "tool": "tem",
        "version": __version__,
        "python": platform.python_version(),
        "time_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "parameters": _jsonable(parameters or {}),
        "inputs": [
            {"file": str(p), "sha256": file_sha256(p)} for p in inputs if Path(p).is_file()
        ],
    }


def records_to_json(records) -> str:
    return json.dumps(list(records), sort_keys=True)


def records_from_json(text: str | None) -> list:
    if not text:
        return []
    return json.loads(text)


def _jsonable(obj):
    """Parameters as plain JSON types (numpy scalars and arrays become lists)."""
    try:
        import numpy as np
    except ImportError:  # pragma: no cover
        np = None
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if np is not None and isinstance(obj, np.ndarray):
        return obj.tolist()
    if np is not None and isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, Path):
        return str(obj)
    return obj
