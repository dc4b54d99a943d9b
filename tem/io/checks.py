"""Checks shared by every reader: types, sizes, finiteness and physical ranges.

Every reader of a user file (survey and sidecar TOML, ``.npy`` headers, text
recordings, model / polyline / velocity CSV, netCDF products, the models
file) goes through these helpers before a value is used, so a bad file ends
in one :class:`tem.errors.TemInputError` line naming the file and the field,
never in a traceback or an allocation the size of a wrong number. The limits
below are generous physical bounds (common practice, no source): they only
catch values no instrument or earth produces, such as coordinates of 1e300 m.
"""
from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from ..errors import TemInputError, input_error

__all__ = ["LIMITS", "show", "label", "safe_name", "number", "integer", "text", "table", "array", "point",
           "loop",
           "read_text", "read_capped", "csv_rows", "finite_array", "npy_header", "open_netcdf",
           "variable", "attr_number", "MAX_TEXT_BYTES", "MAX_ELEMENTS"]

#: Physical bounds (units in the key's comment); a value outside is refused.
LIMITS = {
    "coordinate": 1e8,      # m, |x| and |y| of projected coordinates (and of wire points)
    "elevation": 1e5,       # m, |z|
    "time": 1e3,            # s, gate and sample times after switch-off
    "sample_rate": 1e8,     # Hz
    "frequency": 1e6,       # Hz, base and mains frequency, filter cut-off
    "current": 1e6,         # A
    "gain": 1e12,           # 1 (or V/A for the current monitor)
    "scale_min": 1e-9,      # smallest gain (1), current (A) and coil area (m^2): a reading
                            # divided by less would pass the largest value a product stores
    "coil_area": 1e9,       # m^2, turns included
    "volts_per_count": 1e6,  # V
    "full_scale": 1e12,     # counts or V
    "resistivity_min": 1e-6,  # ohm-m
    "resistivity_max": 1e12,  # ohm-m
    "thickness": 1e6,       # m
    "velocity_min": 100.0,  # m/s: below air (330 m/s); a table in km/s reads 1.5-7
    "velocity_max": 1e5,    # m/s
    "depth": 1e6,           # m
    "epsg": 1_000_000,      # EPSG codes are below this
}
#: Largest text file read whole (text recordings, CSV tables).
MAX_TEXT_BYTES = 64 * 2**20
#: Largest number of values of one netCDF variable read into memory.
MAX_ELEMENTS = 200_000_000
#: Longest id or label text.
MAX_NAME = 200


def show(value, n: int = 40) -> str:
    """A short one-line repr of a value for a message."""
    if type(value).__module__ == "numpy" and hasattr(value, "item") and getattr(value, "ndim", 1) == 0:
        value = value.item()          # np.float64(nan) -> nan, np.str_('hz') -> 'hz'
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) >= 10**n:
        return f"an integer of {len(str(abs(value))) if abs(value) < 10**4000 else 'over 4000'} digits"
    try:
        r = repr(value)
    except Exception:  # noqa: BLE001 - a repr must never fail a message
        r = f"<{type(value).__name__}>"
    r = r.replace("\n", "\\n").replace("\r", "\\r")
    return r if len(r) <= n else r[:n - 3] + "..."


def safe_name(name) -> str:
    """File-name-safe version of an identifier (letters, digits, ``. _ -``; any other run of
    characters becomes ``_``), for files that carry a station's name (LAS pseudo-wells)."""
    import re
    return re.sub(r"[^A-Za-z0-9._-]+", "_", str(name)) or "station"


def label(key) -> str:
    """A key as typed when it is short printable text, else :func:`show` of it."""
    return key if isinstance(key, str) and len(key) <= 40 and key.isprintable() else show(key)


def _kind(value) -> str:
    return {str: "text", dict: "a table", list: "a list", bool: "true/false"}.get(
        type(value), type(value).__name__)


def number(value, field, file=None, *, minimum=None, maximum=None, positive=False,
           strict_min=False, parse_text=False) -> float:
    """A finite float within bounds; refuses text (unless ``parse_text``), booleans, lists,
    tables and integers too large for a float."""
    if isinstance(value, bool) or value is None:
        raise input_error(field, f"expected a number, got {_kind(value)}", file)
    if isinstance(value, str):
        if not parse_text:
            raise input_error(field, f"expected a number, got text {show(value)}", file)
        t = value.strip()
        try:
            if len(t) > 10_000:
                raise ValueError
            value = float(t)
        except ValueError:
            raise input_error(field, f"not a number: {show(value)}", file) from None
        if math.isinf(value) and "inf" not in t.lower():
            raise input_error(field, f"out of range: {show(t)}", file)
    if not isinstance(value, (int, float, np.integer, np.floating)):
        raise input_error(field, f"expected a number, got {_kind(value)}", file)
    try:
        v = float(value)
    except OverflowError:
        raise input_error(field, f"out of range: {show(value)}", file) from None
    if not math.isfinite(v):
        raise input_error(field, f"must be finite, got {show(value)}", file)
    if positive and not v > 0:
        raise input_error(field, f"must be positive, got {v:g}", file)
    if minimum is not None and (v < minimum or (strict_min and v == minimum)):
        raise input_error(field, f"must be {'>' if strict_min else '>='} {minimum:g}, got {v:g}",
                          file)
    if maximum is not None and (abs(v) if minimum is None else v) > maximum:
        raise input_error(field, f"out of range ({'|value|' if minimum is None else 'value'} "
                          f"<= {maximum:g}), got {v:g}", file)
    return v


def integer(value, field, file=None, *, minimum=None, maximum=None) -> int:
    """An integer within bounds (a float with an integral value is accepted)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise input_error(field, f"expected an integer, got {_kind(value)} {show(value)}", file)
    if isinstance(value, (float, np.floating)):
        if not (math.isfinite(value) and float(value).is_integer()):
            raise input_error(field, f"expected an integer, got {show(value)}", file)
    if (minimum is not None and value < minimum) or (maximum is not None and value > maximum):
        lo = "" if minimum is None else f">= {minimum}"
        hi = "" if maximum is None else f"<= {maximum}"
        raise input_error(field, f"must be {' and '.join(x for x in (lo, hi) if x)}, got "
                          f"{show(value, 24)}", file)
    return int(value)


def text(value, field, file=None, *, max_len: int = MAX_NAME, empty=False) -> str:
    """Printable text without NUL or control characters, at most ``max_len`` characters."""
    if not isinstance(value, str):
        raise input_error(field, f"expected text, got {_kind(value)} {show(value)}", file)
    if not empty and not value.strip():
        raise input_error(field, "is empty", file)
    if len(value) > max_len:
        raise input_error(field, f"longer than {max_len} characters", file)
    if not value.isprintable():
        raise input_error(field, f"holds a control or NUL character: {show(value)}", file)
    return value


def table(value, field, file=None) -> dict:
    if not isinstance(value, dict):
        raise input_error(field, f"expected a table, got {_kind(value)} {show(value)}", file)
    return value


def array(value, field, file=None, *, max_len: int = 100_000, min_len: int = 0) -> list:
    """A list (TOML array) of at most ``max_len`` items."""
    if not isinstance(value, (list, tuple)):
        raise input_error(field, f"expected a list, got {_kind(value)} {show(value)}", file)
    if len(value) > max_len:
        raise input_error(field, f"more than {max_len} items", file)
    if len(value) < min_len:
        raise input_error(field, f"needs at least {min_len} items, got {len(value)}", file)
    return list(value)


def point(value, field, file=None) -> tuple:
    """``[x, y]`` in metres within :data:`LIMITS` ``coordinate``."""
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise input_error(field, f"expected [x, y] in metres, got {show(value)}", file)
    lim = LIMITS["coordinate"]
    return (number(value[0], field, file, maximum=lim), number(value[1], field, file, maximum=lim))


def loop(points, field, file=None) -> None:
    """Refuse loop vertices (``[(x, y), ...]``, m) that make no simple anticlockwise polygon:
    vertices all on one line, two vertices in a row at one place, a side that doubles back on the one before, sides
    that cross or touch (a bow-tie: its two halves carry current in opposite senses), and
    vertices listed clockwise seen from above (+I would flow clockwise and the field at the
    centre point down; the survey and the import take loops anticlockwise)."""
    v = np.asarray(points, float).reshape(-1, 2)
    n = len(v)
    a, b = v, np.roll(v, -1, axis=0)          # side k runs from vertex k to the next
    d = b - a
    w = v - v[0]
    far = w[np.argmax(np.hypot(*w.T))]
    if not np.any(w[:, 0] * far[1] != w[:, 1] * far[0]):
        raise input_error(field, "the loop's vertices enclose no area (all at one point or on "
                          "one line)", file)
    for k in np.flatnonzero(~np.any(d != 0, axis=1)):
        raise input_error(field, "the last vertex repeats the first; a loop closes by itself: "
                          "drop it" if k == n - 1 else f"loop vertices {k} and {k + 1} coincide",
                          file)
    nxt = np.roll(d, -1, axis=0)
    back = (d[:, 0] * nxt[:, 1] - d[:, 1] * nxt[:, 0] == 0) & (np.sum(d * nxt, axis=1) < 0)
    for k in np.flatnonzero(back):
        raise input_error(field, f"the loop doubles back on itself at vertex {(k + 1) % n}", file)

    def cross(o, p, q):
        return (p[..., 0] - o[..., 0]) * (q[..., 1] - o[..., 1]) - \
            (p[..., 1] - o[..., 1]) * (q[..., 0] - o[..., 0])

    def within(p, q, r):                      # r in the box of p and q (r on the line pq)
        return np.all((np.minimum(p, q) <= r) & (r <= np.maximum(p, q)), axis=-1)

    low, high = np.minimum(a, b), np.maximum(a, b)
    idx = np.arange(n)
    for first in range(0, n, 512):            # sides i of a block against every later side j
        i = idx[first:first + 512, None]
        near = idx >= i + 2
        for x in (0, 1):                      # the two sides' boxes overlap
            near &= (low[i, x] <= high[:, x]) & (low[:, x] <= high[i, x])
        near[0, n - 1] &= first > 0           # sides 0 and n-1 meet at vertex 0
        i, j = np.nonzero(near)
        i += first
        p, q, c, e = a[i], b[i], a[j], b[j]
        d1, d2, d3, d4 = cross(p, q, c), cross(p, q, e), cross(c, e, p), cross(c, e, q)
        meet = ((d1 * d2 < 0) & (d3 * d4 < 0)) | ((d1 == 0) & within(p, q, c)) | \
            ((d2 == 0) & within(p, q, e)) | ((d3 == 0) & within(c, e, p)) | \
            ((d4 == 0) & within(c, e, q))
        if meet.any():
            k = int(np.argmax(meet))
            raise input_error(field, f"loop crosses itself between segments {i[k]} and {j[k]} "
                              "(segment k joins vertex k to the next, counted from 0)", file)
    if np.dot(v[:, 0], np.roll(v[:, 1], -1)) - np.dot(v[:, 1], np.roll(v[:, 0], -1)) < 0:
        raise input_error(field, "vertices run clockwise; list them anticlockwise (seen from "
                          "above), the sense in which +I flows (docs/survey.md)", file)


def regular_file(path, field: str, file=None) -> None:
    """Refuse, before it is opened, a path that is neither a regular file nor a folder: a
    named pipe (FIFO) would block the read for ever, a device may never end. A missing
    path and a folder are left to the caller, which names them in its own words; a path
    that cannot be looked up (a symbolic link loop, no permission) is refused here."""
    import os
    import stat

    try:
        mode = os.stat(path).st_mode
    except FileNotFoundError:
        return
    except (OSError, ValueError) as exc:
        raise input_error(field, f"cannot read ({getattr(exc, 'strerror', None) or type(exc).__name__})",
                          file or path) from None
    if not (stat.S_ISREG(mode) or stat.S_ISDIR(mode)):
        raise input_error(field, "not a regular file (a pipe, socket or device); give the file",
                          file or path)


def real_path(path) -> Path:
    """The absolute path with symbolic links resolved, as ``Path.resolve()``, but a link loop
    gives the path as it is instead of raising (the loop is reported when the file is read)."""
    import os

    return Path(os.path.realpath(path))


def read_capped(fh, max_bytes: int) -> bytes:
    """At most ``max_bytes + 1`` bytes of a binary file object (one more than allowed tells a
    file too large), read in pieces of 1 MiB: ``fh.read(n)`` allocates ``n`` bytes first, so
    reading with ``n = max_bytes + 1`` made a 64 MiB buffer for every 20 kB table."""
    pieces, n = [], 0
    while n <= max_bytes:
        piece = fh.read(min(2**20, max_bytes + 1 - n))
        if not piece:
            break
        pieces.append(piece)
        n += len(piece)
    return b"".join(pieces)


def read_text(path, field: str, max_bytes: int = MAX_TEXT_BYTES) -> str:
    """A whole UTF-8 text file; refuses a missing file, a folder, a huge file, non-UTF-8
    bytes and NUL characters."""
    path = Path(path)
    regular_file(path, field)
    try:
        with open(path, "rb") as fh:
            data = read_capped(fh, max_bytes)
    except FileNotFoundError:
        raise input_error(field, "file not found", path) from None
    except IsADirectoryError:
        raise input_error(field, "is a folder; give the file", path) from None
    except (OSError, ValueError) as exc:
        raise input_error(field, f"cannot read ({getattr(exc, 'strerror', None) or type(exc).__name__})",
                          path) from None
    return decode_text(data, field, path, max_bytes)


def decode_text(data: bytes, field: str, path=None, max_bytes: int = MAX_TEXT_BYTES) -> str:
    """UTF-8 text of ``data`` (see :func:`read_text`)."""
    if len(data) > max_bytes:
        raise input_error(field, f"larger than {max_bytes // 2**20} MiB; too large for a text "
                          "file", path)
    try:
        out = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise input_error(field, f"not a text file (UTF-8 expected; byte {exc.start})",
                          path) from None
    if "\x00" in out:
        raise input_error(field, f"NUL character at byte {data.index(0)}", path)
    return out.removeprefix("\ufeff")


def csv_rows(content: str, path, required, field: str = "csv", max_rows: int = 1_000_000):
    """Rows of a comma-separated table (``#`` lines are comments) as ``(line, dict)``.

    Header names are stripped; a row with more fields than the header or
    without a required field is refused naming its line.
    """
    lines = [(i, ln) for i, ln in enumerate(io.StringIO(content), start=1)
             if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise input_error(field, "no header row", path)
    if len(lines) > max_rows + 1:
        raise input_error(field, f"more than {max_rows} rows", path)
    try:
        parsed = list(csv.reader([ln for _, ln in lines], strict=True))
    except csv.Error as exc:
        raise input_error(field, f"not readable as CSV ({str(exc).splitlines()[0][:60]})",
                          path) from None
    header = [h.strip() for h in parsed[0]]
    for need in required:
        if need not in header:
            raise input_error(need, f"column missing (header has: {show(', '.join(header), 60)})",
                              path)
    rows = []
    for (lineno, _), fields in zip(lines[1:], parsed[1:]):
        if len(fields) > len(header):
            raise input_error(f"line {lineno}", f"more fields than the header has ({len(header)})",
                              path)
        row = {h: (f.strip() if k < len(fields) else None) for k, (h, f) in
               enumerate(zip(header, fields + [None] * (len(header) - len(fields))))}
        for need in required:
            if row.get(need) is None:
                raise input_error(f"line {lineno}", f"no {need} field", path)
        rows.append((lineno, row))
    return rows


def finite_array(a, field, file=None, *, minimum=None, maximum=None, positive=False,
                 allow_nan=False):
    """A float array whose values are finite (or NaN if ``allow_nan``) and within bounds."""
    try:
        a = np.asarray(a, dtype=float)
    except (TypeError, ValueError, OverflowError):
        raise input_error(field, "not numeric", file) from None
    ok = np.isfinite(a) | (np.isnan(a) if allow_nan else False)
    if not np.all(ok):
        raise input_error(field, "holds infinite or missing values" if allow_nan else
                          "holds non-finite values (NaN or infinity)", file)
    v = a[np.isfinite(a)]
    if v.size:
        if positive and np.any(v <= 0):
            raise input_error(field, f"must be positive, found {v[v <= 0][0]:g}", file)
        if minimum is not None and np.any(v < minimum):
            raise input_error(field, f"must be >= {minimum:g}, found {v.min():g}", file)
        if maximum is not None and np.any(np.abs(v) > maximum):
            raise input_error(field, f"out of range (|value| <= {maximum:g}), found "
                              f"{v[np.argmax(np.abs(v))]:g}", file)
    return a


# ---------------------------------------------------------------------------- npy
NPY_DTYPES = (np.dtype(np.int16), np.dtype(np.int32), np.dtype(np.float32), np.dtype(np.float64))


def npy_header(fh, path, max_header: int = 10_000):
    """``(shape, dtype, data offset)`` of an ``.npy`` file object, read safely.

    The header is a Python literal parsed by numpy without evaluation (never
    unpickles); object, structured and other non-numeric dtypes, Fortran
    order and non-integer shapes are refused.
    """
    from numpy.lib import format as npf

    try:
        version = npf.read_magic(fh)
        if version == (1, 0):
            shape, fortran, dtype = npf.read_array_header_1_0(fh, max_header_size=max_header)
        elif version in ((2, 0), (3, 0)):
            shape, fortran, dtype = npf.read_array_header_2_0(fh, max_header_size=max_header)
        else:
            raise input_error("npy header", f"unknown version {version}", path)
        offset = fh.tell()
    except TemInputError:
        raise
    except Exception as exc:  # noqa: BLE001 - numpy's header parser raises many kinds
        msg = str(exc).splitlines()[0][:80] if str(exc) else type(exc).__name__
        raise input_error("npy header", f"unreadable ({msg})", path) from None
    if dtype.hasobject:
        raise input_error("dtype", "object arrays are refused (no unpickling)", path)
    if dtype.names is not None or dtype.subdtype is not None or \
            dtype.newbyteorder("=") not in NPY_DTYPES:
        raise input_error("dtype", f"{show(str(dtype))} unsupported; use int32 or float32 "
                          "counts", path)
    if not all(isinstance(n, int) and n >= 0 for n in shape):
        raise input_error("shape", f"not a shape: {show(shape)}", path)
    if fortran and len(shape) > 1:
        raise input_error("shape", "Fortran order is not supported", path)
    return shape, dtype, offset


# ---------------------------------------------------------------------------- netCDF
def open_netcdf(path, field: str, max_elements: int = MAX_ELEMENTS):
    """Load a netCDF-4 file (h5netcdf) into memory after checking its variables' sizes.

    A file that cannot be parsed (truncated, corrupt, not netCDF) is refused
    with one line; so is a variable larger than ``max_elements`` values (a
    compressed file may promise far more than it holds).
    """
    import xarray as xr

    path = Path(path) if not hasattr(path, "read") else path
    name = path if isinstance(path, Path) else "netCDF"
    if isinstance(path, Path):
        regular_file(path, field)
        if not path.exists():
            raise input_error(field, "file not found", path)
        if path.is_dir():
            raise input_error(field, "is a folder; give the file", path)
    import h5py

    try:
        # HDF5 first: a file h5py cannot open never reaches h5netcdf (whose half-built File
        # would complain again when collected)
        with h5py.File(path, "r") as h5:
            h5.attrs.get("_nc3_strict")
            dict(h5.attrs)
            big = []
            h5.visititems(lambda n, o: _touch(n, o, max_elements, big))
        if big:
            raise input_error(big[0][0], f"{big[0][1]} values: larger than {max_elements}", name)
        if hasattr(path, "seek"):
            path.seek(0)
        ds = xr.open_dataset(path, engine="h5netcdf")
    except TemInputError:
        raise
    except Exception as exc:  # noqa: BLE001 - HDF5 raises many kinds on a corrupt file
        raise input_error(field, f"not readable as netCDF ({_why(exc)})", name) from None
    try:
        for k, v in ds.variables.items():
            if v.size > max_elements:
                raise input_error(str(k)[:40], f"{v.size} values: larger than {max_elements}",
                                  name)
        ds = ds.load()
    except TemInputError:
        ds.close()
        raise
    except Exception as exc:  # noqa: BLE001 - the data blocks of a corrupt file
        ds.close()
        raise input_error(field, f"not readable as netCDF ({_why(exc)})", name) from None
    ds.close()
    return ds


def _touch(name, obj, max_elements, big):
    """Read an HDF5 object's metadata (attributes, shape, type): a corrupt header fails here;
    a dataset of more than ``max_elements`` values is noted in ``big``."""
    dict(obj.attrs)
    if hasattr(obj, "shape"):
        obj.dtype, obj.chunks, obj.compression
        if obj.size is not None and obj.size > max_elements and not big:
            big.append((str(name)[:40], obj.size))


def _why(exc) -> str:
    """The library's reason, first line, at most 100 characters (a cut is marked with ...)."""
    msg = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
    if len(msg) > 100:
        msg = msg[:97].rstrip() + "..."
    return f"{type(exc).__name__}: {msg}" if msg else type(exc).__name__


def variable(ds, name, dims, file=None, *, kind="f", minimum=None, maximum=None,
             positive=False, allow_nan=False, check_values=True):
    """The values of a required variable with the given dimensions and kind.

    ``kind``: ``"f"`` numeric (integers and booleans accepted), ``"b"``
    boolean or integer, ``"U"`` text. Numeric values are checked with
    :func:`finite_array` unless ``check_values`` is false.
    """
    if name not in ds.variables:
        raise input_error(name, "required variable missing", file)
    v = ds[name]
    if tuple(v.dims) != tuple(dims):
        raise input_error(name, f"dimensions {show(tuple(v.dims))}, expected {tuple(dims)}", file)
    values = v.values
    dk = values.dtype.kind
    if kind == "U":
        if dk not in "USO":
            raise input_error(name, "expected text", file)
        try:
            out = values.astype(str)
        except (TypeError, ValueError, UnicodeDecodeError):
            raise input_error(name, "expected text", file) from None
        for s in out.ravel():
            text(str(s), name, file, empty=True)
        return out
    if kind == "b":
        if dk not in "biu":
            raise input_error(name, f"expected true/false values, got {values.dtype}", file)
        return values.astype(bool)
    if dk not in "biuf":
        raise input_error(name, f"expected numbers, got {show(str(values.dtype))}", file)
    if check_values:
        return finite_array(values, name, file, minimum=minimum, maximum=maximum,
                            positive=positive, allow_nan=allow_nan)
    return values.astype(float)


def attr_number(ds, name, file=None, *, required=True, default=None, **bounds):
    """A numeric global attribute checked with :func:`number` (an array of one value too)."""
    if name not in ds.attrs:
        if required:
            raise input_error(name, "required attribute missing", file)
        return default
    v = ds.attrs[name]
    if isinstance(v, np.ndarray):
        if v.size != 1:
            raise input_error(name, f"expected one number, got {v.size}", file)
        v = v.reshape(-1)[0]
    return number(v, name, file, **bounds)
