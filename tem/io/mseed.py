"""MiniSEED (FDSN) recordings through ObsPy: one entry of the raw-format table (tem.io.raw).

* sample rate and start time come from the records; the channel is chosen by
  the survey's ``receiver.channel`` (a SEED code such as ``HFZ`` or a full id
  ``NET.STA.LOC.CHA``), needed when a file holds more than one;
* gaps and overlaps between records of the channel are refused, one line
  naming the file and the time;
* MiniSEED carries no calibration: ``volts_per_count`` (and optionally
  ``full_scale``, counts) are read from a sidecar TOML of the same stem
  (``ex.mseed`` -> ``ex.toml``);
* samples are read chunk by chunk: an index of the channel's fixed-length
  records (:func:`_record_index`) lets each chunk read and decode only its
  own records (else ObsPy is asked for the chunk's time span), so a day
  never has to fit in memory.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import TemInputError, input_error
from ..survey import format_time
from .atomic import atomic_path
from .tomlfile import read_toml

__all__ = ["mseed_sniff", "mseed_open", "mseed_write", "DEFAULT_CHANNELS", "SUFFIXES"]

SUFFIXES = (".mseed", ".miniseed", ".ms")
#: Channel codes written by ``tem synth`` (our choice: band H, instrument Q electric, F magnetic)
DEFAULT_CHANNELS = {"ex": "HQX", "ey": "HQY", "dbxdt": "HFX", "dbydt": "HFY", "dbzdt": "HFZ",
                    "current": "HAX"}
_SIDECAR_KEYS = {"format_version", "volts_per_count", "full_scale", "component", "station"}


def _obspy(path):
    try:
        import obspy
    except ImportError:  # pragma: no cover - obspy is a dependency
        raise input_error("format", "MiniSEED needs ObsPy (pip install obspy)", path) from None
    return obspy


def mseed_sniff(path) -> bool:
    return Path(path).suffix.lower() in SUFFIXES


def _read(path, **kw):
    import warnings

    obspy = _obspy(path)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            st = obspy.read(str(path), format="MSEED", **kw)
    except FileNotFoundError:
        raise input_error("file", "not found", path) from None
    except Exception as exc:   # ObsPy raises many kinds on a damaged file
        raise input_error("records", f"unreadable MiniSEED ({type(exc).__name__})", path) from None
    _refuse_damage(caught, path)
    return st


def _refuse_damage(caught, path):
    """ObsPy's warnings on a damaged file (a record cut short: 'Unexpected end of file ...
    The rest of the file will not be read'; bytes that are not a record) become one refusal:
    the samples after the damage would be dropped without a word (exit 0, a Python warning)."""
    for w in caught:
        if type(w.message).__name__.endswith("MSEEDWarning") or "mseed" in str(w.category).lower():
            text = " ".join(str(w.message).split())
            text = text.split("(): ", 1)[-1]
            raise input_error("records", f"damaged MiniSEED: {text}", path)


def _choose(st, channel, path):
    ids = sorted({tr.id for tr in st})
    if not ids:
        raise input_error("records", "no data records", path)
    if channel is None:
        if len(ids) > 1:
            raise input_error("channel", f"the file holds {', '.join(ids)}; name one in the "
                              "survey's receiver.channel", path)
        return ids[0]
    match = [i for i in ids if i == channel or i.split(".")[-1] == channel]
    if not match:
        raise input_error("channel", f"no channel {channel!r} in the records; found "
                          f"{', '.join(ids)}", path)
    if len(match) > 1:
        raise input_error("channel", f"{channel!r} matches {', '.join(match)}; give the full "
                          "id NET.STA.LOC.CHA", path)
    return match[0]


def _ns(utc) -> int:
    return int(utc.ns)


def _sidecar(path):
    side = Path(path).with_suffix(".toml")
    d = read_toml(side, "sidecar", file=path)
    extra = set(d) - _SIDECAR_KEYS
    if extra:
        raise input_error(sorted(extra)[0], "unknown key (sample rate and start time come from "
                          f"the records); valid: {', '.join(sorted(_SIDECAR_KEYS))}", side)
    if "volts_per_count" not in d:
        raise input_error("volts_per_count", "missing (MiniSEED holds no calibration)", side)
    return d, side


def mseed_open(path, channel=None):
    """A :class:`tem.io.raw.Recording` of one MiniSEED channel (see module docstring)."""
    from .raw import RawHeader, Recording

    path = Path(path)
    st = _read(path, headonly=True)
    cid = _choose(st, channel, path)
    traces = sorted((tr for tr in st if tr.id == cid), key=lambda tr: _ns(tr.stats.starttime))
    fs = float(traces[0].stats.sampling_rate)
    for a, b in zip(traces[:-1], traces[1:]):
        if float(b.stats.sampling_rate) != fs:
            raise input_error("sampling_rate", f"{cid} changes from {fs:g} Hz to "
                              f"{b.stats.sampling_rate:g} Hz at {b.stats.starttime}", path)
        expect = _ns(a.stats.starttime) + round(a.stats.npts * 1e9 / fs)
        step = (_ns(b.stats.starttime) - expect) * 1e-9
        if abs(step) > 0.5 / fs:
            at = format_time(np.datetime64(expect, "ns"))
            kind = "gap" if step > 0 else "overlap"
            raise input_error("records", f"{cid}: {kind} of {abs(step):.6g} s at {at}", path)
    start_ns = _ns(traces[0].stats.starttime)
    n = int(sum(tr.stats.npts for tr in traces))
    if n == 0:
        raise input_error("records", f"{cid}: no samples", path)
    d, side = _sidecar(path)
    try:
        header = RawHeader(sample_rate=fs, volts_per_count=d["volts_per_count"],
                           start_time=np.datetime64(start_ns, "ns"),
                           full_scale=d.get("full_scale", 0.0),
                           component=str(d.get("component", "")), station=str(d.get("station", "")))
    except TemInputError as exc:
        raise TemInputError(f"{side}: {exc}") from None

    index = _record_index(path, cid, n)

    def reader(a, b, _p=path, _id=cid, _t0=start_ns, _fs=fs, _ix=index):
        from obspy import UTCDateTime

        if _ix is not None:
            part = _read_records(_p, _ix, a, b)
        else:
            t_a = _t0 + round(a * 1e9 / _fs)
            t_b = _t0 + round((b - 1) * 1e9 / _fs)
            part = _read(_p, starttime=UTCDateTime(ns=t_a), endtime=UTCDateTime(ns=t_b),
                         sourcename=_id)
        out = np.empty(b - a, np.float64)
        filled = np.zeros(b - a, bool)
        for tr in part:
            if tr.id != _id:
                continue
            i0 = round((_ns(tr.stats.starttime) - _t0) * _fs * 1e-9)
            lo, hi = max(a, i0), min(b, i0 + tr.stats.npts)
            if hi > lo:
                out[lo - a:hi - a] = tr.data[lo - i0:hi - i0]
                filled[lo - a:hi - a] = True
        if not filled.all():
            raise input_error("records", f"{_id}: samples {a}..{b} missing on reading", _p)
        return out

    return Recording(path, header, n, reader)


def _record_index(path, cid, n_expected):
    """(offsets, reclen, first sample of each record) of the channel's records, or None.

    Fixed-length records only (the usual case): the 48-byte fixed headers
    (SEED Reference Manual v2.4, ch. 8: station, location, channel, network
    at bytes 8-19, number of samples at 30-31) are read with one strided view
    of the file, so each chunk then reads and decodes only its own records.
    Anything else (variable record lengths, counts that do not add up) gives
    None: each chunk then asks ObsPy for its time span instead.
    """
    from obspy.io.mseed.util import get_record_information

    try:
        info = get_record_information(str(path))
        reclen, order = int(info["record_length"]), info["byteorder"]
        size = Path(path).stat().st_size
        if reclen < 64 or size % reclen:
            return None
        raw = np.memmap(path, np.uint8, "r")
        head = np.array(raw.reshape(size // reclen, reclen)[:, :48])
        del raw
    except Exception:     # an index is an optimisation only
        return None
    kind = head[:, 6]
    data = np.isin(kind, np.frombuffer(b"DRQM", np.uint8))
    ids = [bytes(h[18:20]).decode("ascii", "replace").strip() + "."
           + bytes(h[8:13]).decode("ascii", "replace").strip() + "."
           + bytes(h[13:15]).decode("ascii", "replace").strip() + "."
           + bytes(h[15:18]).decode("ascii", "replace").strip() for h in head]
    mine = data & np.array([i == cid for i in ids])
    npts = head[:, 30:32].copy().view(np.dtype(order + "u2")).ravel().astype(np.int64)
    rec = np.nonzero(mine)[0]
    if rec.size == 0 or int(npts[rec].sum()) != n_expected:
        return None
    first = np.concatenate([[0], np.cumsum(npts[rec])])
    return rec * reclen, reclen, first


def _read_records(path, index, a, b):
    """ObsPy Stream of the records holding samples a..b-1 (reads only those bytes)."""
    import io

    from obspy import read

    offsets, reclen, first = index
    k0 = max(int(np.searchsorted(first, a, side="right")) - 1, 0)
    k1 = int(np.searchsorted(first, b, side="left"))
    buf = io.BytesIO()
    with open(path, "rb") as fh:
        for off in offsets[k0:k1]:
            fh.seek(int(off))
            buf.write(fh.read(reclen))
    buf.seek(0)
    import warnings

    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            st = read(buf, format="MSEED")
    except Exception as exc:
        raise input_error("records", f"unreadable MiniSEED ({type(exc).__name__})", path) from None
    _refuse_damage(caught, path)
    return st


def mseed_write(path, counts, header, channel=None) -> Path:
    """Write counts (int32: Steim-2; float32) as one MiniSEED channel plus its sidecar TOML."""
    import tomli_w
    from obspy import Stream, Trace, UTCDateTime

    from .atomic import write_text_atomic

    counts = np.asarray(counts)
    if counts.dtype not in (np.int32, np.float32) or counts.ndim != 1:
        raise ValueError("counts: must be a 1-D int32 or float32 array")
    code = channel or DEFAULT_CHANNELS.get(header.component, "HXX")
    net, sta, loc, cha = (["XX", (header.station or "TEM")[:5], "", code] if "." not in code
                          else code.split("."))
    start = UTCDateTime(ns=int(np.datetime64(header.start_time, "ns").astype(np.int64)))
    tr = Trace(data=counts, header={"network": net, "station": sta, "location": loc,
                                    "channel": cha, "sampling_rate": header.sample_rate,
                                    "starttime": start})
    path = Path(path)
    with atomic_path(path) as tmp:
        Stream([tr]).write(str(tmp), format="MSEED", reclen=4096,
                           encoding="STEIM2" if counts.dtype == np.int32 else "FLOAT32")
    side = {"format_version": 1, "volts_per_count": header.volts_per_count}
    if header.full_scale:
        side["full_scale"] = header.full_scale
    if header.component:
        side["component"] = header.component
    if header.station:
        side["station"] = header.station
    write_text_atomic(path.with_suffix(".toml"), tomli_w.dumps(side))
    return path
