"""SEG-Y rev 1 sections of resistivity (segyio): depth or two-way time.

Samples are 4-byte IEEE floats (data sample format code 5, allowed by SEG-Y
rev 1), big-endian. One trace per grid column of a section Dataset from
:func:`tem.section.stitch_models` (one per station, or resampled along the
profile). The sample value is resistivity in ohm-m (or log10 resistivity with
``value="log10"``); below the depth of investigation the sample is 0.0 unless
``below_doi="keep"``.

Depth files: the sample axis is depth in metres. The binary header (bytes
3217-3218) and every trace header (bytes 117-118) hold the depth interval in
millimetres in the field that a time section uses for microseconds, so that a
program reading the file as time shows 1 ms per metre. The textual header
states the depth step in plain words.

Trace header bytes used (1-based, as in the standard): 1-4 trace sequence in
line, 5-8 trace sequence in file, 9-12 field record (= CDP), 13-16 trace in
record (1), 21-24 CDP, 25-28 trace in CDP (1), 29-30 trace identification
(1), 35-36 data use (1 production; 2 for a trace made from a station whose
recording failed the evening QC, verdict reoccupy: its model rests on data to
be repeated), 41-44 receiver group elevation and 45-48 surface elevation at source
(surface at the trace, scaled by 69-70), 53-56 and 57-60 datum elevation at
group and source (top sample of elevation sections), 69-70 elevation scalar, 71-72 coordinate
scalar, 73-76/77-80 source X/Y, 81-84/85-88 group X/Y, 89-90 coordinate
units (1 = length), 109-110 delay (first sample, ms or m), 115-116 sample
count, 117-118 sample interval, 181-184/185-188 CDP X/Y, 189-192 inline
(line number), 193-196 crossline (= CDP); in the bytes rev 1 leaves unassigned
(233-240, tem's use): 233-236 int32 DOI on the file's sample axis (depth
files: cm below ground; two-way-time files: microseconds), 237-238 int16
verdict code of the models the trace is made from (0 fitted, 1 misfit, 2
stalled, 3 parameter at a bound, 4 degenerate layer, -1 none) and 239-240 int16
their chi2 x 100 (capped at 32767, -1 unknown); docs/exports.md.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import input_error
from ..section.profile import check_velocity_table, depth_to_twt, twt_to_depth
from ..section.verdicts import QC_REOCCUPY
from ..io.atomic import atomic_path

__all__ = [
    "coordinate_scalar",
    "apply_scalar",
    "read_velocity_table",
    "depth_section_traces",
    "twt_section_traces",
    "write_segy",
    "verdict_field",
    "verdict_of_field",
    "BELOW_DOI",
    "VALUES",
]

BELOW_DOI = ("zero", "keep")
VALUES = ("resistivity", "log10")
_INT32 = 2**31 - 1


def coordinate_scalar(*values):
    """SEG-Y coordinate scalar for bytes 71-72 (or elevation scalar 69-70).

    Per the SEG-Y standard a negative scalar divides the stored integer and a
    positive one multiplies it. The finest of -100 (cm), -10 (dm) and 1 (m)
    at which every value fits a signed 32-bit integer is chosen.
    """
    vmax = max((float(np.nanmax(np.abs(v))) if np.size(v) and np.isfinite(v).any() else 0.0)
               for v in values) if values else 0.0
    for scalar, factor in ((-100, 100.0), (-10, 10.0), (1, 1.0)):
        if vmax * factor < _INT32:
            return scalar
    raise input_error("x", f"coordinate {vmax:g} m too large for SEG-Y 32-bit headers")


def _scaled(v, scalar):
    """Integer to store for value ``v`` (m) under ``scalar``."""
    factor = -scalar if scalar < 0 else 1.0 / scalar
    return int(np.rint(v * factor)) if np.isfinite(v) else 0


def apply_scalar(stored, scalar):
    """Value in metres from a stored header integer and its SEG-Y scalar."""
    stored = np.asarray(stored, float)
    if scalar == 0:
        return stored
    return stored / -scalar if scalar < 0 else stored * scalar


def read_velocity_table(path):
    """Read a velocity-depth CSV: header ``depth_m,vp_m_per_s``, one row per interval.

    ``depth_m`` is the top of the interval below the surface (m, first row 0,
    strictly increasing) and ``vp_m_per_s`` its interval P velocity (m/s,
    positive); the last velocity holds below the last depth. Lines starting
    with ``#`` are comments.

    Returns
    -------
    depth, velocity : ndarray
    """
    from ..io import checks

    path = Path(path)
    rows = checks.csv_rows(checks.read_text(path, "velocity table"), path,
                           ("depth_m", "vp_m_per_s"), field="velocity table", max_rows=100_000)
    lim = checks.LIMITS
    z = [checks.number(r["depth_m"], f"line {k}: depth_m", path, parse_text=True, minimum=0.0,
                       maximum=lim["depth"]) for k, r in rows]
    v = [checks.number(r["vp_m_per_s"], f"line {k}: vp_m_per_s", path, parse_text=True,
                       minimum=lim["velocity_min"], maximum=lim["velocity_max"]) for k, r in rows]
    return check_velocity_table(np.array(z), np.array(v), path)


def _trace_values(grid, value, below_doi):
    if value not in VALUES:
        raise input_error("value", f"unknown sample value {value!r}; valid: {', '.join(VALUES)}")
    if below_doi not in BELOW_DOI:
        raise input_error("below_doi", f"unknown choice {below_doi!r}; valid: {', '.join(BELOW_DOI)}")
    full = grid["log10_resistivity_full"].values
    data = full if value == "log10" else 10.0**full
    if below_doi == "zero":
        data = np.where(grid["below_doi"].values, 0.0, data)
    return np.nan_to_num(data, nan=0.0).astype(np.float32)


def depth_section_traces(grid, value="resistivity", below_doi="zero"):
    """Trace samples of a depth (or elevation) section grid.

    Parameters
    ----------
    grid : xarray.Dataset
        From :func:`tem.section.stitch_models`.
    value : {"resistivity", "log10"}
    below_doi : {"zero", "keep"}

    Returns
    -------
    data : ndarray float32, shape (traces, samples)
        Sample values; 0.0 where no model reaches or below the DOI.
    first, step : float
        First sample and sample interval, m (depth below surface, or depth
        below the datum for elevation sections).
    """
    data = _trace_values(grid, value, below_doi)
    vname = "depth" if "depth" in grid.dims else "elevation"
    axis = grid[vname].values.astype(float)
    step = float(grid.attrs["depth_step"])
    first = float(axis[0]) if vname == "depth" else 0.0
    return data, first, step


def twt_section_traces(models_grid_fn, table_depth, table_velocity, dt, max_twt,
                       value="resistivity", below_doi="zero"):
    """Resample a section onto a regular two-way-time axis.

    Parameters
    ----------
    models_grid_fn : callable
        ``f(depth) -> grid Dataset`` evaluating the section at the given depth
        samples below surface (m), e.g. a closure over
        :func:`tem.section.stitch_models`. The model is sampled exactly at the
        depth of every time sample (no double interpolation).
    table_depth, table_velocity : array_like
        Interval velocity table, m and m/s.
    dt : float
        Time sample interval, s.
    max_twt : float
        Last time, s.

    Returns
    -------
    data : ndarray float32, shape (traces, samples)
    twt : ndarray
        Sample times, s.
    grid : xarray.Dataset
        The section evaluated at the sample depths.
    doi_twt : ndarray
        DOI of each trace as two-way time, s.
    """
    if not dt > 0 or not max_twt > 0:
        raise input_error("dt", "time step and section length must be positive")
    n = int(np.floor(max_twt / dt + 1e-9)) + 1
    twt = np.arange(n) * dt
    depth = twt_to_depth(twt, table_depth, table_velocity)
    grid = models_grid_fn(depth)
    data = _trace_values(grid, value, below_doi)
    doi = grid["doi"].values
    doi_twt = np.where(np.isfinite(doi), depth_to_twt(np.nan_to_num(doi), table_depth, table_velocity), np.nan)
    return data, twt, grid, doi_twt


def _text_header(lines):
    cards = {}
    if len(lines) > 39:      # a long survey's station lists: say where the rest is
        lines = lines[:38] + [f"... {len(lines) - 38} MORE LINES: SEE THE MODELS FILE"]
    for k, text in enumerate(lines, start=1):
        cards[k] = text[:76]
    cards[40] = "END TEXTUAL HEADER"
    import segyio

    return segyio.tools.create_text_header(cards)


CHI2_MAX = 32767      # chi2 x 100 in an int16: 327.67 and above are stored as 32767


def verdict_field(code, chi2) -> int:
    """Bytes 237-240 as the int32 segyio writes: int16 verdict code, then int16 chi2 x 100.

    Code -1 means no verdict; chi2 x 100 is rounded, capped at 32767 (chi2
    327.67 or more) and -1 when unknown. Both halves are big-endian int16.
    """
    import struct

    c = int(code) if code is not None and -1 <= int(code) <= 32767 else -1
    x = float(chi2)
    v = -1 if not np.isfinite(x) or x < 0 else min(int(round(x * 100)), CHI2_MAX)
    return struct.unpack(">i", struct.pack(">hh", c, v))[0]


def verdict_of_field(value) -> tuple:
    """(verdict code, chi2 or NaN) from the int32 of bytes 237-240 (inverse of :func:`verdict_field`)."""
    import struct

    c, v = struct.unpack(">hh", struct.pack(">i", int(value)))
    return c, (v / 100.0 if v >= 0 else float("nan"))


def write_segy(path, data, grid, interval_field, first, domain, description, line_number,
               doi_twt=None):
    """Write traces and headers as SEG-Y rev 1 (IEEE float), atomically.

    Parameters
    ----------
    path : str or Path
        Output file.
    data : ndarray float32, shape (traces, samples)
    grid : xarray.Dataset
        Section grid giving per-trace ``x``, ``y``, ``surface``, ``doi`` and
        ``distance``.
    interval_field : int
        Value for the sample-interval fields (binary 3217-3218, trace
        117-118): microseconds (time) or millimetres (depth).
    first : float
        First sample: ms (time) or m (depth); stored in bytes 109-110.
    domain : {"depth", "elevation", "twt"}
    description : sequence of str
        Lines for the textual header (after the fixed lines).
    line_number : int
        Inline number (bytes 189-192).
    doi_twt : ndarray or None
        DOI as two-way time per trace, s (TWT files).
    """
    import segyio

    if not 0 < interval_field <= 65535:
        raise input_error("sample interval", f"{interval_field} does not fit SEG-Y bytes 3217-3218 "
                          "(1..65535 us or mm)")
    ntr, ns = data.shape
    if ns > 65535:
        raise input_error("samples", f"{ns} samples exceed the SEG-Y rev 1 limit 65535")
    x = grid["x"].values.astype(float)
    y = grid["y"].values.astype(float)
    surf = grid["surface"].values.astype(float)
    doi = grid["doi"].values.astype(float)
    if doi_twt is None:      # DOI on the file's sample axis: cm (depth) or us (two-way time)
        doi_field = [int(round(v * 100)) if np.isfinite(v) else -1 for v in doi]
    else:
        doi_field = [int(round(v * 1e6)) if np.isfinite(v) else -1 for v in doi_twt]
    code = grid["verdict_code"].values.astype(int) if "verdict_code" in grid \
        else np.full(ntr, -1)
    chi2 = grid["chi2"].values.astype(float) if "chi2" in grid else np.full(ntr, np.nan)
    data_use = np.where(grid["qc_verdict_code"].values.astype(int) >= QC_REOCCUPY, 2, 1) \
        if "qc_verdict_code" in grid else np.ones(ntr, int)
    cs = coordinate_scalar(x, y)
    datum = float(np.nanmax(grid["elevation"].values)) if domain == "elevation" else np.nan
    es = coordinate_scalar(surf, np.array([0.0 if np.isnan(datum) else datum]))
    spec = segyio.spec()
    spec.samples = np.arange(ns, dtype=float)
    spec.tracecount = ntr
    spec.format = 5
    spec.sorting = None
    text = _text_header(list(description))
    with atomic_path(path) as tmp:
        with segyio.create(str(tmp), spec) as f:
            f.text[0] = text
            f.bin.update({
                segyio.BinField.JobID: 1,
                segyio.BinField.LineNumber: line_number,
                segyio.BinField.Traces: 1,
                # no auxiliary traces (segyio's create leaves the trace count here)
                segyio.BinField.AuxTraces: 0,
                segyio.BinField.Interval: int(interval_field),
                segyio.BinField.IntervalOriginal: int(interval_field),
                segyio.BinField.Samples: ns,
                segyio.BinField.SamplesOriginal: ns,
                segyio.BinField.Format: 5,
                segyio.BinField.EnsembleFold: 1,
                segyio.BinField.SortingCode: 1,
                segyio.BinField.MeasurementSystem: 1,
                segyio.BinField.SEGYRevision: 1,
                segyio.BinField.SEGYRevisionMinor: 0,
                segyio.BinField.TraceFlag: 1,
                segyio.BinField.ExtendedHeaders: 0,
            })
            T = segyio.TraceField
            for k in range(ntr):
                cdp = k + 1
                h = {
                    T.TRACE_SEQUENCE_LINE: cdp,
                    T.TRACE_SEQUENCE_FILE: cdp,
                    T.FieldRecord: cdp,
                    T.TraceNumber: 1,
                    T.CDP: cdp,
                    T.CDP_TRACE: 1,
                    T.TraceIdentificationCode: 1,
                    T.DataUse: int(data_use[k]),
                    T.ElevationScalar: es,
                    T.ReceiverGroupElevation: _scaled(surf[k], es),
                    T.SourceSurfaceElevation: _scaled(surf[k], es),
                    T.SourceGroupScalar: cs,
                    T.SourceX: _scaled(x[k], cs),
                    T.SourceY: _scaled(y[k], cs),
                    T.GroupX: _scaled(x[k], cs),
                    T.GroupY: _scaled(y[k], cs),
                    T.CoordinateUnits: 1,
                    T.DelayRecordingTime: int(round(first)),
                    T.TRACE_SAMPLE_COUNT: ns,
                    T.TRACE_SAMPLE_INTERVAL: int(interval_field),
                    T.CDP_X: _scaled(x[k], cs),
                    T.CDP_Y: _scaled(y[k], cs),
                    T.INLINE_3D: line_number,
                    T.CROSSLINE_3D: cdp,
                    T.UnassignedInt1: doi_field[k],
                    T.UnassignedInt2: verdict_field(code[k], chi2[k]),
                }
                if domain == "elevation":
                    h[T.ReceiverDatumElevation] = _scaled(datum, es)
                    h[T.SourceDatumElevation] = _scaled(datum, es)
                f.header[k] = h
                f.trace[k] = np.ascontiguousarray(data[k], dtype=np.float32)
    return Path(path)


def _wrapped(prefix, items, tail="") -> list:
    """``prefix`` and ``items`` (joined by ", ") then ``tail``, wrapped over textual-header
    lines of 76 characters (continuations indented); no item is cut."""
    lines, line = [], prefix
    parts = [f"{it}," for it in items[:-1]] + [f"{items[-1]}{tail}"] if items else [tail]
    for part in parts:
        if len(line) + len(part) + 1 > 76 and line.strip():
            lines.append(line.rstrip())
            line = "  "
        line += part + " "
    lines.append(line.rstrip())
    return [ln[:76] for ln in lines]


def _not_fitted_lines(grid) -> list:
    """Textual header lines naming the stations whose model is not fitted, with the verdict."""
    from ..invert.verdict import STATUSES

    if "station_verdict_code" not in grid:
        return ["VERDICTS: NONE RECORDED"]
    codes = grid["station_verdict_code"].values.astype(int)
    bad = [f"{sid} {STATUSES[c].upper() if 0 <= c < len(STATUSES) else c}" for sid, c in
           zip(grid["station"].values.astype(str), codes) if c > 0]
    from ..io.models import without_model

    missing = list(without_model(grid))
    lines = _wrapped("NO MODEL (NOT IN THE SECTION): ", missing) if missing else []
    if not bad:
        return ["VERDICTS: ALL MODELLED STATIONS FITTED" if missing else
                "VERDICTS: ALL STATIONS FITTED"] + lines
    fitted = int(np.sum(codes == 0))
    return _wrapped("VERDICTS: ", bad, f"; {fitted} OTHER(S) FITTED" if fitted else
                    "; NONE FITTED") + lines


def _qc_lines(grid) -> list:
    """Textual header lines naming the stations whose recording failed the evening QC."""
    if "station_qc_verdict_code" not in grid:
        return ["EVENING QC: NONE RECORDED"]
    return _stations_lines(grid, "station_qc_verdict_code", QC_REOCCUPY,
                           "EVENING QC REOCCUPY (DATA USE 2): ",
                           "EVENING QC: NO STATION TO RE-OCCUPY")


def _interval_lines(grid) -> list:
    """Textual header lines naming the stations whose posterior sampling did not converge."""
    return _stations_lines(grid, "station_interval_verdict_code", 1,
                           "POSTERIOR UNCONVERGED OR UNUSABLE: ",
                           "POSTERIOR INTERVALS: ALL CONVERGED")


def _stations_lines(grid, var, worst_from, prefix, none_text) -> list:
    """``prefix`` and the stations whose ``var`` code is ``worst_from`` or more (``none_text``
    when none is), wrapped over textual-header lines."""
    bad = [sid for sid, c in zip(grid["station"].values.astype(str),
                                 grid[var].values.astype(int)) if c >= worst_from]
    return _wrapped(prefix, bad) if bad else [none_text]


def describe(grid, domain, step, value, below_doi, epsg, source="", velocity_file=""):
    """Textual header lines (without the fixed END line) for a section file."""
    vname = {"depth": "DEPTH BELOW GROUND", "elevation": "DEPTH BELOW DATUM", "twt": "TWO-WAY TIME"}[domain]
    unit = "MS" if domain == "twt" else "M"
    interval = {"twt": f"{step * 1e3:g} MS", "depth": f"{step:g} M", "elevation": f"{step:g} M"}[domain]
    stored = ("BINARY 3217-3218 AND TRACE 117-118 IN MICROSECONDS" if domain == "twt" else
              "BINARY 3217-3218 AND TRACE 117-118 IN MM")
    lines = [
        f"TEM {__version__} RESISTIVITY SECTION FROM 1D TEM MODELS (AN INTERPRETATION)",
        "CHECK IT AGAINST WELLS AND OTHER DATA BEFORE ANY DECISION",
        "SEG-Y REV 1, DATA FORMAT CODE 5: 4-BYTE IEEE FLOAT, BIG-ENDIAN",
        f"SAMPLES: {vname} IN {unit}, FIRST 0 {unit}, INTERVAL {interval}",
        f"SAMPLE INTERVAL IN {stored}",
        *([] if domain == "twt" else ["  (A PROGRAM READING IT AS TIME SHOWS 1 MS PER M)"]),
        f"SAMPLE VALUE: {'RESISTIVITY OHM-M' if value == 'resistivity' else 'LOG10 RESISTIVITY OHM-M'}",
        ("BELOW DOI: 0.0 (NOT RESOLVED)" if below_doi == "zero" else "BELOW DOI: MODEL VALUES KEPT")
        + "; NO MODEL: 0.0",
        f"TRACES: {grid.sizes['distance']}, ONE PER COLUMN; CDP = TRACE NUMBER",
        f"CRS: {'EPSG:' + str(epsg) if epsg else 'UNKNOWN'}; COORDINATES IN M",
        "CDP X/Y 181-188, SOURCE X/Y 73-80, GROUP X/Y 81-88; SCALAR 71-72",
        "SURFACE ELEVATION 41-44 AND 45-48, SCALAR 69-70",
        "INLINE 189-192 = LINE NUMBER, CROSSLINE 193-196 = CDP",
        ("DOI TWO-WAY TIME IN MICROSECONDS" if domain == "twt" else "DOI DEPTH IN CM")
        + " IN BYTES 233-236 (-1 UNKNOWN)",
        "VERDICT INT16 237-238: 0 FITTED 1 MISFIT 2 STALLED 3 PARAMETER-AT-BOUND",
        "  4 DEGENERATE-LAYER; -1 NONE",
        "CHI2 X 100 INT16 239-240 (32767 = 327.67 OR MORE; -1 UNKNOWN)",
        "DATA USE 35-36: 1 PRODUCTION, 2 RECORDING FAILED QC (RE-OCCUPY)",
    ]
    if domain == "elevation":
        lines.append("DATUM ELEVATION (TOP SAMPLE) IN 53-56 AND 57-60, SCALAR 69-70")
    if domain == "twt":
        lines.append(f"TIME FROM INTERVAL VELOCITIES: {Path(velocity_file).name}"[:76])
    lines += _not_fitted_lines(grid)
    lines += _qc_lines(grid)
    if "station_interval_verdict_code" in grid:
        lines += _interval_lines(grid)
    d = grid["distance"].values
    if d.size:
        lines.append(f"PROFILE DISTANCE {d[0]:.1f} TO {d[-1]:.1f} M")
    if source:
        lines.append(f"MODELS FILE: {Path(source).name}"[:76])
    return lines
