"""Window sources for the stacker: consecutive half-period windows of a record.

:class:`ArraySource` serves an in-memory array; :class:`RecordingSource` cuts
a :class:`tem.io.raw.Recording`, memory-mapping chunks of ``.npy`` files
directly (no copy). :func:`clip_level` says which counts are clipped.
"""
from __future__ import annotations

import mmap

import numpy as np

from ..errors import TemInputError

__all__ = ["WindowSource", "ArraySource", "RecordingSource", "clip_level"]


def clip_level(full_scale: float) -> float:
    """Smallest abs(count) treated as clipped for a digitiser of ``full_scale`` counts.

    A two's complement digitiser of full scale F counts saturates at -F and at
    F - 1, so both rails are caught by abs(count) >= F - 1 (F >= 2). Below 2
    (a scale that is not in whole counts) abs(count) >= F. 0: no clipping.
    """
    f = float(full_scale or 0.0)
    return f - 1.0 if f >= 2.0 else f


# ---------------------------------------------------------------------------- window sources
class WindowSource:
    """Consecutive half-period windows.

    ``get(k0, k1)`` -> ((k1-k0, M) float64 new array, bool mask of
    digitiser-clipped samples or None). ``view(k0, k1)`` -> (rows as stored,
    e.g. int32 counts, no copy where possible; factor to volts; clip level
    ``|x| >= full_scale`` or 0; bool clip mask or None) feeds the compiled
    kernels. ``polarity0``: polarity of window 0.
    """

    n_windows: int
    m: int
    polarity0: int = 1

    def get(self, k0, k1):  # pragma: no cover - interface
        raise NotImplementedError

    def locate_nan(self, k0, k1):
        return None

    def view(self, k0, k1):
        d, clip = self.get(k0, k1)
        return d, 1.0, 0.0, clip

    @property
    def itemsize(self) -> int:
        return 8


class ArraySource(WindowSource):
    """Windows from an in-memory (n, M) array (never modified)."""

    def __init__(self, windows, polarity0: int = 1, clip_mask=None):
        self._d = np.asarray(windows)
        if self._d.ndim != 2:
            raise TemInputError("windows: expected a 2-D (n_windows, samples) array")
        if not np.issubdtype(self._d.dtype, np.number) or np.iscomplexobj(self._d):
            self._d = self._d.astype(np.float64)
        self.n_windows, self.m = self._d.shape
        self.polarity0 = 1 if polarity0 >= 0 else -1
        self._clip = None if clip_mask is None else np.asarray(clip_mask, bool)

    def get(self, k0, k1):
        clip = None if self._clip is None else self._clip[k0:k1]
        return np.array(self._d[k0:k1], dtype=np.float64), clip

    def view(self, k0, k1):
        clip = None if self._clip is None else np.ascontiguousarray(self._clip[k0:k1])
        return np.ascontiguousarray(self._d[k0:k1]), 1.0, 0.0, clip

    @property
    def itemsize(self) -> int:
        return self._d.dtype.itemsize

    def locate_nan(self, k0, k1):
        bad = np.flatnonzero(~np.isfinite(self._d[k0:k1]).ravel())
        return None if bad.size == 0 else ("windows", k0 * self.m + int(bad[0]))


def _npy_layout(rec):
    """Parts of an npy-backed recording as (first sample, samples, path, dtype, byte offset).

    None if any part is not a plain 1-D native-endian ``.npy`` file (then
    samples are read through the recording). Headers are parsed by
    ``np.load(mmap_mode="r")`` (never unpickles); nothing is read here.
    """
    parts = getattr(rec, "parts", None) or [rec]
    out, first = [], 0
    for p in parts:
        try:
            arr = np.load(p.path, mmap_mode="r", allow_pickle=False)
        except (OSError, ValueError, EOFError):
            return None
        ok = (isinstance(arr, np.memmap) and arr.ndim == 1 and arr.shape[0] == p.n_samples
              and arr.dtype.isnative and arr.dtype.kind in "if")
        layout = (first, p.n_samples, p.path, arr.dtype, int(arr.offset)) if ok else None
        del arr
        if layout is None:
            return None
        out.append(layout)
        first += p.n_samples
    return out


def _map_rows(path, dtype, start: int, count: int):
    """Read-only map of ``count`` items of ``dtype`` at byte ``start`` of ``path`` (no copy).

    Pages are faulted in by one call where the system allows it (MAP_POPULATE,
    Linux); the map is released when the returned array is dropped.
    """
    if not hasattr(mmap, "MAP_SHARED"):      # no POSIX mmap flags (Windows)
        return np.memmap(path, dtype=dtype, mode="r", offset=start, shape=(count,))
    base = start - start % mmap.ALLOCATIONGRANULARITY
    flags = mmap.MAP_SHARED | getattr(mmap, "MAP_POPULATE", 0)
    with open(path, "rb") as fh:
        mm = mmap.mmap(fh.fileno(), start - base + count * dtype.itemsize, flags=flags,
                       prot=mmap.PROT_READ, offset=base)
    return np.frombuffer(mm, dtype=dtype, count=count, offset=start - base)


class RecordingSource(WindowSource):
    """Windows cut from a :class:`tem.io.raw.Recording` at sample ``first`` (int).

    ``view`` maps the byte range of a chunk of an ``.npy`` recording directly
    (no copy; the map is released with the returned array, so mapped pages do
    not accumulate in the resident set).
    """

    def __init__(self, recording, first: int, m: int, n_windows: int, polarity0: int = 1):
        self.rec, self.first, self.m, self.n_windows = recording, int(first), int(m), int(n_windows)
        self.polarity0 = polarity0
        self._vpc = recording.header.volts_per_count
        self._fs = clip_level(recording.header.full_scale)
        self._layout = _npy_layout(recording)

    def _counts(self, k0, k1):
        a = self.first + k0 * self.m
        return self.rec.counts(a, a + (k1 - k0) * self.m).reshape(k1 - k0, self.m)

    def view(self, k0, k1):
        a = self.first + k0 * self.m
        z = a + (k1 - k0) * self.m
        for first, n, path, dtype, offset in self._layout or ():
            if first <= a and z <= first + n:
                x = _map_rows(path, dtype, offset + (a - first) * dtype.itemsize, z - a)
                return x.reshape(k1 - k0, self.m), self._vpc, self._fs, None
        c = self._counts(k0, k1)
        if not (c.dtype.isnative and c.dtype.kind in "if"):
            c = c.astype(np.float64)
        return c, self._vpc, self._fs, None

    @property
    def itemsize(self) -> int:
        return self._layout[0][3].itemsize if self._layout else 8

    def get(self, k0, k1):
        c = self._counts(k0, k1)
        mask = None
        if self._fs and (c.max() >= self._fs or c.min() <= -self._fs):     # both rails
            mask = np.abs(c) >= self._fs
            if c.dtype.kind == "f":
                mask &= np.isfinite(c)      # an infinite sample is corrupt, refused, not clipped
        out = c.astype(np.float64)
        out *= self._vpc
        return out, mask

    def locate_nan(self, k0, k1):
        c = self._counts(k0, k1).ravel()
        bad = np.flatnonzero(~np.isfinite(c))
        if bad.size == 0:
            return None
        idx = self.first + k0 * self.m + int(bad[0])
        return (self.rec.file_at(idx), idx)
