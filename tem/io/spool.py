"""The per-station parts of a run record, kept on disk while the run goes on.

A run records, per stage and station, a status, the values the stage reports,
a fingerprint and the checksums of what it wrote, and it keeps a table of
file checksums. As Python objects that is about 10 kB per station through the
four station stages: held in memory, the ``tem run`` process would grow with
the survey (docs/scaling.md). :class:`Spool` keeps these parts in a private
temporary SQLite database instead (SQLite deletes it when it is closed; it is
never in the project folder and never outlives the process), with a page
cache of 256 KiB, and gives dict- and list-like views of them:
:class:`SpooledDict` (``stations`` of a stage record, the run's per-station
summary, the checksum table) and :class:`SpooledList` (a stage's ``inputs``).
Values are stored as JSON text (never pickled) and decoded on access, so a
value read is a copy: change a record by assigning it again.

``run.json`` is written from the views one record at a time
(the runner of `tem run`, tem.pipeline.runner), and the record of an earlier run is
moved into a spool as soon as it is read (:func:`spool_record`).
"""
from __future__ import annotations

import itertools
import json
import math
import sqlite3
from collections.abc import Mapping, MutableMapping, Sequence

__all__ = ["Spool", "SpooledDict", "SpooledList", "SpooledArrays", "KeyedView", "spool_record",
           "json_chunks"]


class Spool:
    """A private temporary SQLite database holding named sections of JSON values."""

    _ids = itertools.count()

    def __init__(self, cache_kib: int = 256):
        # "" is SQLite's private temporary database: on disk once its cache is full, removed
        # when the connection closes (and unlinked at once on POSIX, so a killed run leaves
        # nothing behind)
        self.db = sqlite3.connect("", isolation_level=None, check_same_thread=False)
        for pragma in ("journal_mode=OFF", "synchronous=OFF", f"cache_size=-{int(cache_kib)}",
                       "temp_store=FILE"):
            self.db.execute(f"PRAGMA {pragma}")
        self.execute("CREATE TABLE item (section TEXT NOT NULL, key TEXT NOT NULL, "
                        "status TEXT, value TEXT NOT NULL, UNIQUE (section, key))")

    def execute(self, sql, params=()):
        """Run one statement; a full or failing temporary disk gives a one-line
        :class:`tem.errors.TemOutputError` (exit status 1), never a traceback."""
        try:
            return self.db.execute(sql, params)
        except sqlite3.Error as exc:
            import errno
            import tempfile

            from ..errors import TemOutputError
            raise TemOutputError(errno.EIO, f"{tempfile.gettempdir()}: cannot write the run's "
                                 f"temporary spool: {exc}; free some space there (or set "
                                 "TMPDIR to a larger disk) and rerun") from None

    def section(self, name: str | None = None) -> str:
        """A new section name, unique within this spool."""
        return f"{name or 'section'}#{next(self._ids)}"

    def dict(self, name=None, items=()) -> "SpooledDict":
        """A new :class:`SpooledDict`, filled from ``items`` (a mapping or pairs)."""
        d = SpooledDict(self, self.section(name))
        d.update(items)
        return d

    def arrays(self, name=None) -> "SpooledArrays":
        """A new :class:`SpooledArrays`."""
        return SpooledArrays(self, self.section(name))

    def list(self, name=None, values=()) -> "SpooledList":
        """A new :class:`SpooledList`, filled from ``values``."""
        out = SpooledList(self, self.section(name))
        out.extend(values)
        return out

    def close(self):
        self.db.close()


def _plain(value):
    """numpy scalars and arrays as plain JSON values (anything else is refused)."""
    if hasattr(value, "tolist"):
        return value.tolist()
    raise TypeError(f"{type(value).__name__} is not a JSON value")


def _encode(value) -> str:
    return json.dumps(value, separators=(",", ":"), default=_plain)


class SpooledDict(MutableMapping):
    """A dict of JSON values kept in a :class:`Spool`; keys keep their insertion order (a key
    assigned again keeps its place). Reading a value gives a copy."""

    def __init__(self, spool: Spool, section: str):
        self.spool, self.section = spool, section

    def __getitem__(self, key):
        row = self.spool.execute("SELECT value FROM item WHERE section = ? AND key = ?",
                                    (self.section, str(key))).fetchone()
        if row is None:
            raise KeyError(key)
        return json.loads(row[0])

    def __setitem__(self, key, value):
        status = value.get("status") if isinstance(value, Mapping) else None
        self.spool.execute(
            "INSERT INTO item (section, key, status, value) VALUES (?, ?, ?, ?) "
            "ON CONFLICT (section, key) DO UPDATE SET status = excluded.status, "
            "value = excluded.value",
            (self.section, str(key), status if isinstance(status, str) else None,
             _encode(value)))

    def __delitem__(self, key):
        cur = self.spool.execute("DELETE FROM item WHERE section = ? AND key = ?",
                                    (self.section, str(key)))
        if cur.rowcount == 0:
            raise KeyError(key)

    def __contains__(self, key):
        return self.spool.execute("SELECT 1 FROM item WHERE section = ? AND key = ?",
                                     (self.section, str(key))).fetchone() is not None

    def __iter__(self):
        # a snapshot of the keys: the mapping may be changed while it is iterated
        return iter(self.keys_where())

    def __len__(self):
        return self.spool.execute("SELECT COUNT(*) FROM item WHERE section = ?",
                                     (self.section,)).fetchone()[0]

    def keys_where(self, status: str | None = None, any_status=False) -> list:
        """Keys in insertion order; with ``status``, those whose value's ``"status"`` is it;
        with ``any_status``, those whose value has a ``"status"`` (a string)."""
        if any_status:
            cur = self.spool.execute("SELECT key FROM item WHERE section = ? AND status IS "
                                        "NOT NULL ORDER BY rowid", (self.section,))
        elif status is None:
            cur = self.spool.execute("SELECT key FROM item WHERE section = ? ORDER BY rowid",
                                        (self.section,))
        else:
            cur = self.spool.execute("SELECT key FROM item WHERE section = ? AND status = ? "
                                        "ORDER BY rowid", (self.section, status))
        return [k for (k,) in cur]

    def clear(self):
        self.spool.execute("DELETE FROM item WHERE section = ?", (self.section,))

    def view(self, keys) -> "KeyedView":
        """The values of ``keys`` (a list), in that order, as a sequence read one at a time."""
        return KeyedView(self, keys)

    def __repr__(self):
        return f"SpooledDict({len(self)} items)"


class KeyedView(Sequence):
    """Values of a :class:`SpooledDict` for a list of keys, decoded one at a time."""

    def __init__(self, d: SpooledDict, keys):
        self.d, self.keys = d, list(keys)

    def __len__(self):
        return len(self.keys)

    def __getitem__(self, i):
        return self.d[self.keys[i]]

    def __iter__(self):
        for k in self.keys:
            yield self.d[k]


class SpooledArrays:
    """Float arrays by key, kept in a :class:`Spool` as raw bytes (float64, C order) with their
    shape: never pickled, read back with :func:`numpy.frombuffer`."""

    def __init__(self, spool: Spool, section: str):
        self.spool, self.section = spool, section

    def __setitem__(self, key, array):
        import numpy as np

        a = np.ascontiguousarray(array, dtype=np.float64)
        self.spool.execute(
            "INSERT INTO item (section, key, status, value) VALUES (?, ?, ?, ?) "
            "ON CONFLICT (section, key) DO UPDATE SET status = excluded.status, "
            "value = excluded.value",
            (self.section, str(key), _encode(list(a.shape)), sqlite3.Binary(a.tobytes())))

    def __getitem__(self, key):
        import numpy as np

        row = self.spool.execute("SELECT status, value FROM item WHERE section = ? AND "
                                    "key = ?", (self.section, str(key))).fetchone()
        if row is None:
            raise KeyError(key)
        return np.frombuffer(row[1], dtype=np.float64).reshape(json.loads(row[0])).copy()


class SpooledList(Sequence):
    """A list of JSON values kept in a :class:`Spool` (append and extend only)."""

    def __init__(self, spool: Spool, section: str):
        self.spool, self.section = spool, section
        self._n = 0

    def append(self, value):
        self.spool.execute("INSERT INTO item (section, key, value) VALUES (?, ?, ?)",
                              (self.section, f"{self._n:012d}", _encode(value)))
        self._n += 1

    def extend(self, values):
        for v in values:
            self.append(v)

    def __len__(self):
        return self._n

    def __getitem__(self, i):
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(self._n))]
        j = i + self._n if i < 0 else i
        if not 0 <= j < self._n:
            raise IndexError(i)
        row = self.spool.execute("SELECT value FROM item WHERE section = ? AND key = ?",
                                    (self.section, f"{j:012d}")).fetchone()
        return json.loads(row[0])

    def __iter__(self):
        for j in range(self._n):
            yield self[j]

    def __eq__(self, other):
        return isinstance(other, Sequence) and len(other) == len(self) and \
            all(a == b for a, b in zip(self, other))

    def __repr__(self):
        return f"SpooledList({self._n} items)"


#: Parts of a run record that grow with the survey: moved into a spool.
_STATE_PARTS = ("stations", "checksums")


def spool_record(state: dict, spool: Spool, name: str = "run") -> dict:
    """Move the per-station parts of a run record (``stations`` and ``inputs`` of each stage
    record, the per-station summary, the checksum table) into ``spool``, in place; returns
    ``state``. Parts already spooled stay where they are."""
    for key in _STATE_PARTS:
        part = state.get(key)
        if isinstance(part, dict):
            state[key] = spool.dict(f"{name}:{key}", part)
    for stage, rec in (state.get("stages") or {}).items():
        if not isinstance(rec, dict):
            continue
        if isinstance(rec.get("stations"), dict):
            rec["stations"] = spool.dict(f"{name}:{stage}", rec["stations"])
        if isinstance(rec.get("inputs"), list):
            rec["inputs"] = spool.list(f"{name}:{stage}:inputs", rec["inputs"])
    return state


def json_chunks(obj, level=0):
    """Strict JSON text of ``obj`` in pieces, as ``json.dumps(obj, indent=1)`` writes it but
    with non-finite floats as null (strict JSON has no NaN); nothing is copied and spooled
    parts (:mod:`tem.io.spool`) are read one record at a time, so writing the run record
    of a survey of thousands of stations needs no record in memory."""
    if isinstance(obj, SpooledDict):
        obj = _Items(obj)
    elif isinstance(obj, SpooledList):
        obj = _Values(obj)
    if isinstance(obj, (dict, list, tuple)) and _flat(obj):
        yield json.dumps(obj, indent=1, allow_nan=False).replace("\n", "\n" + " " * level)
    elif isinstance(obj, (dict, _Items)):
        pad = "\n" + " " * (level + 1)
        yield "{"
        for i, (key, value) in enumerate(obj.items()):
            yield ("," if i else "") + pad + json.dumps(str(key)) + ": "
            yield from json_chunks(value, level + 1)
        yield "\n" + " " * level + "}"
    elif isinstance(obj, (list, tuple, _Values)):
        pad = "\n" + " " * (level + 1)
        yield "["
        for i, value in enumerate(obj):
            yield ("," if i else "") + pad
            yield from json_chunks(value, level + 1)
        yield "\n" + " " * level + "]"
    elif isinstance(obj, float) and not math.isfinite(obj):
        yield "null"
    else:
        yield json.dumps(obj, allow_nan=False)


class _Items:
    """A spooled dict, read one item at a time while it is written out."""

    def __init__(self, d):
        self.d = d

    def items(self):
        return self.d.items()


class _Values:
    """A spooled list, read one value at a time while it is written out."""

    def __init__(self, values):
        self.values = values

    def __iter__(self):
        return iter(self.values)


def _flat(obj) -> bool:
    """A container of finite scalars only (string keys): one ``json.dumps`` writes it."""
    values = obj.values() if isinstance(obj, dict) else obj
    if isinstance(obj, dict) and not all(isinstance(k, str) for k in obj):
        return False
    return not any(isinstance(v, (dict, list, tuple))
                   or (isinstance(v, float) and not math.isfinite(v)) for v in values)
