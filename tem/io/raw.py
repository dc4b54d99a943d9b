"""Raw recordings: a header plus samples read in chunks, readers by format.

Formats (``docs/recordings.md``):

``npy``
    One ``.npy`` file per channel (1-D, int32 or float32 counts, never
    pickled) and a TOML sidecar of the same stem (``ex.npy`` -> ``ex.toml``)
    holding ``sample_rate`` (Hz), ``volts_per_count`` (V) and ``start_time``
    (ISO-8601 UTC). Samples are memory-mapped and read one chunk at a time;
    each chunk maps only its own byte range, so a day never has to fit in
    memory (and never stays resident).
``mseed``
    MiniSEED (FDSN) through ObsPy (tem.io.mseed): sample rate and start time
    from the records, the channel chosen by the survey's ``channel``, gaps and
    overlaps refused; ``volts_per_count`` (and ``full_scale``) in a sidecar
    TOML of the same stem.
``text``
    Plain text: ``# key = value`` header lines (same keys as the sidecar),
    then whitespace- or comma-separated numeric columns, one row per sample.
    Read whole (text recordings are small).

Readers live in a small table (:data:`FORMATS`): ``sniff(path)``,
``open(path, column)`` and ``write(path, counts, header)``. An explicit format
wins; sniffing by content and suffix is the fallback; an unknown name raises
one error listing the valid ones.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from ..errors import TemInputError, input_error
from ..survey import format_time, parse_time, seconds_between
from . import checks
from .atomic import atomic_path
from .tomlfile import read_toml

__all__ = ["RawHeader", "Recording", "MultiRecording", "FORMATS", "open_recording",
           "open_receiver", "write_npy_recording", "write_text_recording",
           "write_mseed_recording", "sidecar_path"]

SIDECAR_VERSION = 1


@dataclass(frozen=True)
class RawHeader:
    """Header of one channel recording.

    sample_rate : Hz. volts_per_count : V per count. start_time : UTC instant
    of sample 0 (numpy.datetime64[ns]). full_scale : counts at which the
    digitiser clips (0 if unknown). component, station : labels (optional).
    """

    sample_rate: float
    volts_per_count: float
    start_time: np.datetime64
    full_scale: float = 0.0
    component: str = ""
    station: str = ""

    def __post_init__(self):
        for name in ("sample_rate", "volts_per_count"):
            v = checks.number(getattr(self, name), name, positive=True,
                              maximum=checks.LIMITS[name])
            object.__setattr__(self, name, v)
        object.__setattr__(self, "start_time", parse_time(self.start_time, "start_time"))
        fs = checks.number(self.full_scale or 0.0, "full_scale", minimum=0.0,
                           maximum=checks.LIMITS["full_scale"])
        object.__setattr__(self, "full_scale", fs)
        for name in ("component", "station"):
            checks.text(getattr(self, name), name, empty=True)

    def to_dict(self) -> dict:
        d = {"format_version": SIDECAR_VERSION, "sample_rate": self.sample_rate,
             "volts_per_count": self.volts_per_count, "start_time": format_time(self.start_time)}
        if self.full_scale:
            d["full_scale"] = self.full_scale
        if self.component:
            d["component"] = self.component
        if self.station:
            d["station"] = self.station
        return d

    @classmethod
    def from_dict(cls, d: dict, file=None) -> "RawHeader":
        allowed = {"format_version", "sample_rate", "volts_per_count", "start_time", "full_scale",
                   "component", "station"}
        try:
            extra = set(d) - allowed
            if extra:
                raise input_error(checks.show(sorted(extra)[0]),
                                  f"unknown key; valid: {', '.join(sorted(allowed))}")
            if checks.integer(d.get("format_version", 1), "format_version") != SIDECAR_VERSION:
                raise input_error("format_version", f"unsupported {checks.show(d['format_version'])}")
            for key in ("sample_rate", "volts_per_count", "start_time"):
                if key not in d:
                    raise input_error(key, "missing")
            return cls(sample_rate=d["sample_rate"], volts_per_count=d["volts_per_count"],
                       start_time=d["start_time"], full_scale=d.get("full_scale", 0.0),
                       component=d.get("component", ""), station=d.get("station", ""))
        except TemInputError as exc:
            raise TemInputError(f"{file}: {exc}" if file else str(exc)) from None


class Recording:
    """One channel: header plus a chunk reader returning volts (float64).

    ``read(start, stop)`` returns samples ``start:stop`` in volts; ``counts``
    gives the raw counts. Reading never writes to the file.
    """

    def __init__(self, path, header: RawHeader, n_samples: int, reader: Callable):
        self.path = Path(path)
        self.header = header
        self.n_samples = int(n_samples)
        self._reader = reader

    @property
    def sample_rate(self) -> float:
        return self.header.sample_rate

    @property
    def duration(self) -> float:
        return self.n_samples / self.header.sample_rate

    def counts(self, start: int, stop: int) -> np.ndarray:
        start, stop = max(0, int(start)), min(self.n_samples, int(stop))
        if stop <= start:
            return np.empty(0, dtype=np.float32)
        return self._reader(start, stop)

    def read(self, start: int, stop: int) -> np.ndarray:
        c = self.counts(start, stop)
        return c.astype(np.float64) * self.header.volts_per_count

    def file_at(self, index: int) -> Path:
        return self.path

    def __repr__(self):
        return f"Recording({self.path}, n={self.n_samples}, fs={self.sample_rate})"


class MultiRecording(Recording):
    """Several contiguous recordings of one channel seen as one."""

    def __init__(self, parts):
        parts = list(parts)
        first = parts[0]
        fs = first.sample_rate
        for a, b in zip(parts[:-1], parts[1:]):
            if b.header.sample_rate != fs:
                raise input_error("sample_rate", f"differs from {a.path.name}", b.path)
            if b.header.volts_per_count != first.header.volts_per_count:
                raise input_error("volts_per_count", f"differs from {a.path.name}", b.path)
            gap = seconds_between(a.header.start_time, b.header.start_time) - a.n_samples / fs
            if abs(gap) > 0.5 / fs:
                raise input_error("start_time", f"not contiguous with {a.path.name} "
                                  f"(gap {gap:+.6f} s)", b.path)
        self.parts = parts
        self.edges = np.cumsum([0] + [p.n_samples for p in parts])
        super().__init__(first.path, first.header, int(self.edges[-1]), self._read_parts)

    def _read_parts(self, start, stop):
        out = []
        for p, e0, e1 in zip(self.parts, self.edges[:-1], self.edges[1:]):
            a, b = max(start, e0), min(stop, e1)
            if b > a:
                out.append(p.counts(a - e0, b - e0))
        return np.concatenate(out)

    def file_at(self, index: int) -> Path:
        i = int(np.searchsorted(self.edges, index, side="right")) - 1
        return self.parts[min(max(i, 0), len(self.parts) - 1)].path


# ---------------------------------------------------------------------------- npy + sidecar
def sidecar_path(path) -> Path:
    return Path(path).with_suffix(".toml")


def _read_sidecar(path) -> RawHeader:
    side = sidecar_path(path)
    doc = read_toml(side, "sidecar", file=path)
    return RawHeader.from_dict(doc, file=side)


def _npy_sniff(path) -> bool:
    try:
        with open(path, "rb") as fh:
            return fh.read(6) == b"\x93NUMPY"
    except OSError:
        return False


def _npy_open(path, column: int = 0, channel=None) -> Recording:
    path = Path(path)
    header = _read_sidecar(path)
    try:
        with open(path, "rb") as fh:
            shape, dtype, offset = checks.npy_header(fh, path)
            size = os.fstat(fh.fileno()).st_size
    except FileNotFoundError:
        raise input_error("file", "not found", path) from None
    except IsADirectoryError:
        raise input_error("file", "is a folder; give the recording", path) from None
    except OSError as exc:
        raise input_error("file", f"cannot read ({exc.strerror or type(exc).__name__})",
                          path) from None
    if len(shape) != 1:
        raise input_error("shape", f"expected one channel (1-D), got {shape}", path)
    n = int(shape[0])
    need = offset + n * dtype.itemsize
    if size < need:
        have = (size - offset) // dtype.itemsize
        raise input_error("data", f"truncated: header promises {checks.show(n)} samples, file "
                          f"holds {have}", path)
    if n == 0:
        raise input_error("data", "no samples", path)
    if size > need:
        raise input_error("data", f"{checks.show(size - need)} bytes after the last of the "
                          f"{checks.show(n)} samples the header promises (two files joined, or "
                          "a header that does not describe the data?)", path)

    def reader(start, stop, _p=path, _d=dtype, _o=offset):
        # Map only this byte range; the map is dropped on return so mapped
        # pages do not accumulate in the resident set.
        mm = np.memmap(_p, dtype=_d, mode="r", offset=_o + start * _d.itemsize,
                       shape=(stop - start,))
        out = np.array(mm)
        del mm
        return out

    return Recording(path, header, n, reader)


def write_npy_recording(path, counts, header: RawHeader) -> Path:
    """Write counts (int32 or float32, 1-D) and the sidecar, each atomically."""
    counts = np.asarray(counts)
    if counts.dtype not in (np.int32, np.float32) or counts.ndim != 1:
        raise ValueError("counts: must be a 1-D int32 or float32 array")
    path = Path(path)
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:      # a file object: np.save would append .npy to a name
            np.save(fh, counts, allow_pickle=False)
    _write_sidecar(sidecar_path(path), header)
    return path


def _write_sidecar(path, header):
    import tomli_w

    from .atomic import write_text_atomic
    write_text_atomic(path, tomli_w.dumps(header.to_dict()))


# ---------------------------------------------------------------------------- plain text
def _text_sniff(path) -> bool:
    return Path(path).suffix.lower() in (".txt", ".csv", ".dat", ".asc")


def _text_open(path, column: int = 0, channel=None) -> Recording:
    path = Path(path)
    meta, seen = {}, {}
    rows_start = None
    lines = checks.read_text(path, "text").splitlines()
    for i, line in enumerate(lines):
        s = line.strip()
        if not s:            # a blank line: in the header, or between rows
            continue
        if not s.startswith("#"):
            if rows_start is None:
                rows_start = i
            continue
        body = s.lstrip("#").strip()
        if "=" not in body:  # a comment
            continue
        k, v = body.split("=", 1)
        v = v.strip().strip('"')
        k = k.strip()
        k = k if len(k) <= 40 and k.isprintable() else checks.show(k)
        if rows_start is not None:
            raise input_error(k, f"header line after the data begins (line {i + 1}; the data "
                              f"begin on line {rows_start + 1}): move it to the top", path)
        v = v if k in ("start_time", "component", "station") else checks.number(
            v, k, path, parse_text=True)
        if k in seen and meta[k] != v:     # which of the two the logger meant is a guess
            raise input_error(k, f"given twice in the header ({checks.show(meta[k])} on line "
                              f"{seen[k]}, {checks.show(v)} on line {i + 1})", path)
        seen.setdefault(k, i + 1)
        meta[k] = v
    header = RawHeader.from_dict(meta, file=path)
    values = []
    for i, line in enumerate(lines[rows_start or 0:], start=(rows_start or 0) + 1):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        parts = s.replace(",", " ").split()
        if not 0 <= column < len(parts):
            raise input_error(f"line {i}", f"has no column {column}", path)
        values.append(checks.number(parts[column], f"line {i}", path, parse_text=True))
    if not values:
        raise input_error("data", "no samples", path)
    data = np.asarray(values, dtype=np.float64)
    return Recording(path, header, data.size, lambda a, b: data[a:b].copy())


def write_text_recording(path, columns, header: RawHeader, fmt="%.9g") -> Path:
    """Write one or more columns of counts as a plain-text recording."""
    cols = np.atleast_2d(np.asarray(columns, dtype=float))
    if cols.shape[0] < cols.shape[1]:
        cols = cols.T
    head = "\n".join(f"{k} = {v}" for k, v in header.to_dict().items())
    with atomic_path(path) as tmp:
        np.savetxt(tmp, cols, fmt=fmt, header=head, comments="# ")
    return Path(path)


# ---------------------------------------------------------------------------- registry
@dataclass(frozen=True)
class Format:
    name: str
    sniff: Callable
    open: Callable
    write: Callable
    suffixes: tuple = field(default=())


def _mseed_sniff(path) -> bool:
    from .mseed import mseed_sniff
    return mseed_sniff(path)


def _mseed_open(path, column: int = 0, channel=None) -> Recording:
    from .mseed import mseed_open
    return mseed_open(path, channel)


def write_mseed_recording(path, counts, header: RawHeader, channel=None) -> Path:
    """Write counts as MiniSEED (Steim-2 int32 or float32) plus a calibration sidecar."""
    from .mseed import mseed_write
    return mseed_write(path, counts, header, channel)


FORMATS = {
    "npy": Format("npy", _npy_sniff, _npy_open, write_npy_recording, (".npy",)),
    "mseed": Format("mseed", _mseed_sniff, _mseed_open, write_mseed_recording,
                    (".mseed", ".miniseed", ".ms")),
    "text": Format("text", _text_sniff, _text_open, write_text_recording,
                   (".txt", ".csv", ".dat", ".asc")),
}


def open_recording(path, format: str | None = None, column: int = 0,
                   channel: str | None = None) -> Recording:
    """Open one recording; ``format`` wins, else sniff (npy magic, MiniSEED suffix, text).

    ``channel`` selects a MiniSEED channel (code or NET.STA.LOC.CHA id).
    """
    path = Path(path)
    checks.regular_file(path, "file")
    if format is not None:
        if format not in FORMATS:
            raise input_error("format", f"unknown {format!r}; valid: {', '.join(FORMATS)}", path)
        return FORMATS[format].open(path, column, channel)
    if not path.exists():
        raise input_error("file", "not found", path)
    for fmt in FORMATS.values():
        if fmt.sniff(path):
            return fmt.open(path, column, channel)
    raise input_error("format", f"cannot tell the format; valid: {', '.join(FORMATS)}", path)


def open_receiver(receiver, survey) -> Recording:
    """Open the recording(s) of a survey receiver and check them against it."""
    parts = [open_recording(survey.path(f), receiver.format, receiver.column,
                            getattr(receiver, "channel", None)) for f in receiver.files]
    if not parts:
        raise input_error("receiver.files", f"{receiver.component}: no recording listed")
    for p in parts:
        if abs(p.header.sample_rate - receiver.sample_rate) > 1e-9 * receiver.sample_rate:
            raise input_error("sample_rate", f"sidecar says {p.header.sample_rate:g} Hz, survey says "
                              f"{receiver.sample_rate:g} Hz", sidecar_path(p.path)
                              if p.path.suffix == ".npy" else p.path)
    return parts[0] if len(parts) == 1 else MultiRecording(parts)
