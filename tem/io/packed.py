"""Tables of a parsed TOML array, packed into one JSON text and unpacked one at a time.

A parsed survey of a thousand stations is some 4 MB of small Python objects.
Objects built from it while it lives (the survey's stations, checked one by
one) are allocated among them and keep much of that memory from going back
to the system once the parse is dropped: measured on a 1000-station survey,
the process stayed 3.8 MB larger than for 250 stations where the stations
themselves hold 1.1 MB. Packed first, the parse is dropped before the first
station is built and each table lives only while its station is checked
(then 1.6 MB). Measured on reading the survey alone: the freed memory is
reused by the stages after it, and the peak of a whole run did not change
measurably (docs/scaling.md, "What the client keeps in memory").
"""
from __future__ import annotations

import json

import numpy as np

__all__ = ["PackedTables", "pack_tables"]


class PackedTables:
    """A list of tables (dicts of plain JSON values) held as one text; iterating it gives
    fresh copies of the tables, in order."""

    def __init__(self, tables):
        parts = [json.dumps(t, allow_nan=True) for t in tables]
        self.ends = np.cumsum([len(t) for t in parts], dtype=np.int64)
        self.text = "".join(parts)

    def __len__(self):
        return len(self.ends)

    def __iter__(self):
        start = 0
        for end in self.ends.tolist():
            yield json.loads(self.text[start:end])
            start = end


def pack_tables(doc: dict, key: str) -> None:
    """Pack ``doc[key]``, a list of tables of a parse the caller owns, in place; a value that
    is not a list, or holds values JSON cannot carry (a TOML date), is left as it is, to be
    refused by the usual checks."""
    tables = doc.get(key)
    if not isinstance(tables, list):
        return
    try:
        packed = PackedTables(tables)
    except (TypeError, ValueError):
        return
    del tables
    doc[key] = packed
