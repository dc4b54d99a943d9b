"""The models file (``models.nc``): build, check, read, write, and CSV export.

Contract: docs/data-model.md, "Models file". netCDF through xarray with the
h5netcdf engine. ``tem_format = "models"``, ``format_version = "1.0"``;
readers accept any 1.x and refuse other major versions.

Station identifiers are the ``station`` coordinate (strings). A station
with fewer layers than the ``layer`` dimension is padded with NaN
resistivity; its last finite layer is the half-space.
"""
from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import input_error
from ..provenance import records_from_json, records_to_json, stage_record
from .atomic import atomic_path
from .netcdf import write_netcdf

__all__ = [
    "FORMAT",
    "FORMAT_VERSION",
    "CSV_COLUMNS",
    "models_dataset",
    "check_models",
    "read_models",
    "check_model_values",
    "without_model",
    "write_models",
    "text_column",
    "layer_rows",
    "iter_layer_rows",
    "write_models_csv",
    "layer_bottoms",
    "export_record",
    "model_verdicts",
    "interval_words",
    "flag_names",
    "QC_FLAGS",
    "add_qc_verdicts",
    "qc_verdicts",
]

FORMAT = "models"
FORMAT_VERSION = "1.0"
MODEL_KINDS = ("smooth", "few-layer", "lci", "posterior")

_VARIABLES = {
    "resistivity": ("station", "layer"),
    "thickness": ("station", "layer"),
    "depth_top": ("station", "layer"),
    "log10_res_std": ("station", "layer"),
    "doi": ("station",),
    "chi2": ("station",),
    "x": ("station",),
    "y": ("station",),
    "z": ("station",),
}

CSV_COLUMNS = (
    "station", "x_m", "y_m", "elevation_m", "layer", "depth_top_m", "depth_bottom_m",
    "thickness_m", "resistivity_ohmm", "log10_res_std_decades", "below_doi", "doi_m", "chi2", "epsg",
    "verdict", "verdict_code", "verdict_reasons", "qc_verdict", "qc_reasons",
)

#: Extra columns of a models file with posterior products (model kind posterior):
#: percentiles of the depth to the layer top, its linearised std, and the station's
#: target-top percentiles (tem.invert.posterior_products).
POSTERIOR_COLUMNS = (
    "depth_top_p10_m", "depth_top_p50_m", "depth_top_p90_m", "depth_top_std_linearised_m",
    "target_top_p10_m", "target_top_p50_m", "target_top_p90_m", "interval_verdict",
)
#: Extra columns of a few-layer models file with resistivity ranges (the range of each
#: layer's resistivity the data allow, from a chi2 profile: tem.invert.equivalence).
RANGE_COLUMNS = {"resistivity_low_ohmm": "resistivity_low",
                 "resistivity_high_ohmm": "resistivity_high"}
_POSTERIOR_VARS = ("depth_p10", "depth_p50", "depth_p90", "depth_std_linearised",
                   "target_top_p10", "target_top_p50", "target_top_p90")


def models_dataset(station, resistivity, thickness, x, y, z, doi, chi2,
                   log10_res_std=None, model_kind="smooth", epsg=0, provenance=()):
    """Build a models Dataset that satisfies the contract.

    Parameters
    ----------
    station : sequence of str, length n
        Station identifiers.
    resistivity : array_like, shape (n, L)
        Layer resistivity, ohm-m; the last finite value of a row is the
        half-space; NaN pads shorter models.
    thickness : array_like, shape (n, L)
        Layer thickness, m; NaN for the half-space and padding.
    x, y, z : array_like, shape (n,)
        Station coordinates, m (projected; z up).
    doi : array_like, shape (n,)
        Depth of investigation, m.
    chi2 : array_like, shape (n,)
        Chi-square per datum.
    log10_res_std : array_like, shape (n, L) or None
        Posterior standard deviation of log10 resistivity; NaN if None.
    model_kind : {"smooth", "few-layer", "lci"}
    epsg : int
        EPSG code of the coordinates, 0 if none.
    provenance : sequence of dict
        Stage records so far (:func:`tem.provenance.stage_record`).

    Returns
    -------
    xarray.Dataset
    """
    import xarray as xr

    res = np.atleast_2d(np.asarray(resistivity, float))
    thk = np.atleast_2d(np.asarray(thickness, float))
    if thk.shape != res.shape:
        raise input_error("thickness", f"shape {thk.shape} differs from resistivity {res.shape}")
    std = np.full(res.shape, np.nan) if log10_res_std is None else np.asarray(log10_res_std, float)
    top = np.zeros(res.shape)
    top[:, 1:] = np.cumsum(np.nan_to_num(thk[:, :-1], nan=0.0), axis=1)
    top[~np.isfinite(res)] = np.nan
    if model_kind not in MODEL_KINDS:
        raise input_error("model_kind", f"unknown kind {model_kind!r}; valid: {', '.join(MODEL_KINDS)}")
    sl = ("station", "layer")
    ds = xr.Dataset(
        {
            "resistivity": (sl, res, {"units": "ohm-m"}),
            "thickness": (sl, thk, {"units": "m"}),
            "depth_top": (sl, top, {"units": "m"}),
            "log10_res_std": (sl, std, {"units": "log10(ohm-m)"}),
            "doi": ("station", np.asarray(doi, float), {"units": "m"}),
            "chi2": ("station", np.asarray(chi2, float), {"units": "1"}),
            "x": ("station", np.asarray(x, float), {"units": "m"}),
            "y": ("station", np.asarray(y, float), {"units": "m"}),
            "z": ("station", np.asarray(z, float), {"units": "m"}),
        },
        coords={"station": ("station", np.asarray(station).astype(str)),
                "layer": ("layer", np.arange(res.shape[1]))},
        attrs={
            "tem_format": FORMAT,
            "format_version": FORMAT_VERSION,
            "tem_version": __version__,
            "model_kind": model_kind,
            "epsg": int(epsg),
            "provenance": records_to_json(provenance),
        },
    )
    return check_models(ds)


def check_models(ds, file=None):
    """Check a models Dataset against the contract; return it unchanged.

    Raises :class:`tem.errors.TemInputError` naming ``file`` and the field:
    wrong ``tem_format``, a major ``format_version`` other than 1, a missing
    variable or one with the wrong dimensions.
    """
    from .checks import show

    fmt = ds.attrs.get("tem_format")
    if not isinstance(fmt, str) or fmt != FORMAT:
        raise input_error("tem_format", f"expected {FORMAT!r}, found {show(fmt)} (not a models "
                          "file?)", file)
    version = str(ds.attrs.get("format_version", ""))
    major = version.split(".")[0]
    if major != FORMAT_VERSION.split(".")[0]:
        raise input_error("format_version", f"version {show(version)} not supported; this tem "
                          f"{__version__} reads {FORMAT_VERSION.split('.')[0]}.x", file)
    for name, dims in _VARIABLES.items():
        if name not in ds.variables:
            raise input_error(name, "required variable missing", file)
        if tuple(ds[name].dims) != dims:
            raise input_error(name, f"dimensions {tuple(ds[name].dims)}, expected {dims}", file)
    if "station" not in ds.coords:
        raise input_error("station", "coordinate of station identifiers missing", file)
    res = ds["resistivity"].values
    if res.dtype.kind not in "iuf":
        raise input_error("resistivity", f"expected numbers, got {res.dtype}", file)
    if np.any(res[np.isfinite(res)] <= 0):
        raise input_error("resistivity", "non-positive resistivity", file)
    return ds


def read_models(path):
    """Read and check a models file; returns an in-memory Dataset.

    Beyond :func:`check_models`, every value is checked before use
    (:func:`check_model_values`). ``path`` may also be a file object.

    Parameters
    ----------
    path : str or Path
        netCDF file written by :func:`write_models`.
    """
    from .checks import open_netcdf

    from .schema import check_provenance

    name = Path(path) if not hasattr(path, "read") else "netCDF"
    ds = open_netcdf(path, "models")
    check_provenance(ds, name)
    return check_model_values(check_models(ds, name), name)


def check_model_values(ds, file=None):
    """Types, finiteness and physical ranges of a models Dataset read from a file.

    Station ids: unique printable text; coordinates finite (|x|, |y| <= 1e8 m,
    |z| <= 1e5 m); resistivity 1e-6..1e12 ohm-m or NaN (padding), at least one
    per station; thickness in (0, 1e6] m or NaN; DOI and chi-square finite and >= 0;
    posterior standard deviations >= 0 or NaN; at most 1000 layers.
    """
    from . import checks

    lim = checks.LIMITS
    if ds.sizes.get("layer", 0) > 1000 or ds.sizes.get("layer", 0) < 1:
        raise input_error("layer", f"{ds.sizes.get('layer', 0)} layers; expected 1 to 1000", file)
    sl, st = ("station", "layer"), ("station",)
    ids = checks.variable(ds, "station", st, file, kind="U")
    for sid in ids:
        checks.text(str(sid), "station", file)
    if len(set(ids)) != len(ids):
        raise input_error("station", "a station id is listed twice", file)
    for name, maximum in (("x", lim["coordinate"]), ("y", lim["coordinate"]),
                          ("z", lim["elevation"])):
        checks.variable(ds, name, st, file, maximum=maximum)
    res = checks.variable(ds, "resistivity", sl, file, minimum=lim["resistivity_min"],
                          maximum=lim["resistivity_max"], allow_nan=True)
    if res.size and not np.all(np.isfinite(res).any(axis=1)):
        raise input_error("resistivity", "a station has no layer", file)
    checks.variable(ds, "thickness", sl, file, positive=True, maximum=lim["thickness"],
                    allow_nan=True)
    checks.variable(ds, "depth_top", sl, file, minimum=0.0, maximum=lim["depth"], allow_nan=True)
    _check_layer_geometry(ds, ids, file)
    checks.variable(ds, "log10_res_std", sl, file, minimum=0.0, maximum=1e30, allow_nan=True)
    # every model has its misfit and its DOI: a NaN (a damaged or hand-edited file) left the
    # LAS saying FITTED beside "CHI2 nan", and the section unveiled to its bottom
    checks.variable(ds, "doi", st, file, minimum=0.0, maximum=lim["depth"])
    checks.variable(ds, "chi2", st, file, minimum=0.0, maximum=1e30)
    epsg = ds.attrs.get("epsg", 0)
    if isinstance(epsg, np.ndarray) and epsg.size == 1:
        epsg = epsg.reshape(-1)[0]
    checks.integer(epsg, "epsg", file, minimum=0, maximum=lim["epsg"])
    for name in [str(v) for v in ds.data_vars if str(v).endswith("verdict_code")]:
        codes, flags = np.asarray(ds[name].values), ds[name].attrs.get("flag_values")
        if codes.dtype.kind not in "iu" or (flags is not None and not np.isin(
                codes, np.atleast_1d(np.asarray(flags))).all()):
            raise input_error(name, "a code that is not one of its flag_values (the verdict "
                              "would be unknown in every product)", file)
    kind = ds.attrs.get("model_kind", "smooth")
    if not isinstance(kind, str) or kind not in MODEL_KINDS:
        raise input_error("model_kind", f"unknown kind {checks.show(kind)}; valid: "
                          f"{', '.join(MODEL_KINDS)}", file)
    return ds


def _check_layer_geometry(ds, ids, file=None):
    """Each station's layers are one column from the surface down: resistivity given for
    its first n layers and missing (NaN padding) after them, a layer top exactly where a
    resistivity is, tops increasing with depth, and each top the one above plus its
    thickness (to 1e-6 of the depth). A hand-edited file that breaks this would lose a
    layer in the exports or draw a section from a column that is not one."""
    res = np.asarray(ds["resistivity"].values, float)
    top = np.asarray(ds["depth_top"].values, float)
    h = np.asarray(ds["thickness"].values, float)
    given = np.isfinite(res)
    n = given.sum(axis=1)
    prefix = np.arange(res.shape[1])[None, :] < n[:, None]
    holes = np.flatnonzero((given != prefix).any(axis=1))
    if holes.size:
        i = holes[0]
        k = int(np.flatnonzero(given[i] != prefix[i])[0])
        raise input_error("resistivity", f"station {ids[i]}: layer {k} has no resistivity but a "
                          "layer below it has one (missing values may only follow the last "
                          "layer)", file)
    unpaired = np.flatnonzero((np.isfinite(top) != given).any(axis=1))
    if unpaired.size:
        i = unpaired[0]
        k = int(np.flatnonzero(np.isfinite(top[i]) != given[i])[0])
        what = "a resistivity but no top" if given[i, k] else "a top but no resistivity"
        raise input_error("depth_top", f"station {ids[i]}: layer {k} has {what}", file)
    for i in range(res.shape[0]):
        m = int(n[i])
        t = top[i, :m]
        step = np.diff(t)
        if np.any(step <= 0):
            k = int(np.flatnonzero(step <= 0)[0])
            raise input_error("depth_top", f"station {ids[i]}: layer tops not increasing with "
                              f"depth (layer {k} at {t[k]:g} m, layer {k + 1} at {t[k + 1]:g} m)",
                              file)
        hk = h[i, :m - 1]
        bad = np.isfinite(hk) & (np.abs(t[:-1] + hk - t[1:]) > 1e-6 * np.maximum(1.0, t[1:]))
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            raise input_error("thickness", f"station {ids[i]}: layer {k} is {hk[k]:g} m thick "
                              f"but the next top is {t[k + 1] - t[k]:g} m below its top", file)


def text_column(texts):
    """Per-station sentences (verdicts in words) as an array of Python strings.

    Each string keeps its own length in memory; a fixed-width numpy array would pad
    every station to the longest sentence at 4 bytes per character (3.4 MB of
    1000 stations' verdicts, measured). Written to netCDF the same (variable-length
    strings: identical bytes).
    """
    out = np.empty(len(texts), dtype=object)
    out[:] = [str(t) for t in texts]
    return out


def write_models(ds, path, record=None):
    """Check and write a models Dataset atomically, appending a provenance record.

    Parameters
    ----------
    ds : xarray.Dataset
        Models Dataset (see :func:`models_dataset`).
    path : str or Path
        Output file (netCDF, h5netcdf engine).
    record : dict or None
        Stage record to append to ``provenance``.
    """
    check_models(ds)
    out = ds.copy()
    records = records_from_json(out.attrs.get("provenance"))
    if record is not None:
        records.append(record)
    out.attrs["provenance"] = records_to_json(records)
    out.attrs["tem_version"] = __version__
    write_netcdf(out, path)
    return Path(path)


def layer_bottoms(ds):
    """Bottom depth of each layer, m: top + thickness; +inf for the half-space.

    NaN for padding layers (NaN resistivity).
    """
    top = ds["depth_top"].values.astype(float)
    thk = ds["thickness"].values.astype(float)
    res = ds["resistivity"].values.astype(float)
    bottom = np.where(np.isfinite(thk), top + thk, np.inf)
    return np.where(np.isfinite(res), bottom, np.nan)


def model_verdicts(ds):
    """Per station: ``{"status", "code", "text", "reasons"}`` of the file's own model, or None.

    Read from ``verdict_code`` (decoded with its CF ``flag_meanings``) and
    ``verdict`` (one line: ``status: reason; reason``). A file without
    verdicts (written before they existed) gives None for every station.
    """
    return list(iter_model_verdicts(ds))


def iter_model_verdicts(ds):
    """:func:`model_verdicts` one station at a time."""
    for row in _iter_coded(ds, "verdict_code", "verdict", by_index=True):
        if row is None:
            yield None
            continue
        code, name, text = row
        yield {"status": name.replace("_", "-"), "code": code, "text": text,
               "reasons": verdict_reasons(text)}


def verdict_reasons(text):
    """The reasons of a one-line verdict ``status: reason; reason`` ("" when it has none)."""
    text = str(text)
    return text.split(": ", 1)[1] if ": " in text else ""


def _iter_coded(ds, code_var, text_var, by_index):
    """Per station ``(code, flag word, text)`` of a CF-flag verdict and its sentence, or None
    for every station when the file has no ``code_var`` (written before verdicts existed)."""
    n = ds.sizes["station"]
    if code_var not in ds.variables:
        yield from (None for _ in range(n))
        return
    texts = ds[text_var].values if text_var in ds.variables else ("",) * n
    for code, name, text in zip(ds[code_var].values.astype(int),
                                flag_names(ds, code_var, by_index=by_index), texts):
        yield int(code), name, str(text)


def flag_names(ds, var, by_index=True):
    """Per station, the CF ``flag_meanings`` word of the code in ``var`` ("unknown" for a code
    the attributes do not name). Codes are looked up in ``flag_values``; without them, with
    ``by_index`` a code is an index into the meanings, else every code is unknown."""
    attrs = ds[var].attrs
    names = str(attrs.get("flag_meanings", "")).split()
    if "flag_values" in attrs:
        values = [int(v) for v in np.atleast_1d(attrs["flag_values"])]
    else:
        values = list(range(len(names))) if by_index else []
    lookup = dict(zip(values, names)) if len(values) == len(names) else {}
    return [lookup.get(int(c), "unknown") for c in ds[var].values.astype(int)]


#: Codes of the evening QC verdict in a models file (``qc_verdict_code``; CF flags):
#: -1 none recorded, 0 good, 1 check, 2 reoccupy (docs/qc.md).
QC_FLAGS = ("none", "good", "check", "reoccupy")


def add_qc_verdicts(ds, rows):
    """Add each station's evening QC verdict to a models Dataset (in place); returns ``ds``.

    ``rows`` are those of ``qc/stations.csv`` (:func:`tem.qc.read_stations_csv`);
    a station without a row gets code -1 ("none"). Variables: ``qc_verdict_code``
    (int8, CF ``flag_values`` -1..2 and ``flag_meanings``), ``qc_verdict`` (one
    line: ``verdict: reason; reason``) and ``qc_extra_minutes`` (recording time
    the verdict asks for, minutes; NaN when none is stated).
    """
    by = {r["station"]: r for r in rows}
    stations = ds["station"].values.astype(str)
    codes, texts, minutes = [], [], []
    for sid in stations:
        r = by.get(sid)
        if r is None:
            codes.append(-1)
            texts.append("")
            minutes.append(np.nan)
            continue
        codes.append(QC_FLAGS.index(r["verdict"]) - 1)
        texts.append(r["verdict"] + (f": {r['reasons']}" if r["reasons"] else ""))
        try:
            minutes.append(float(r["extra_minutes"]) if r["extra_minutes"] else np.nan)
        except ValueError:
            minutes.append(np.nan)
    ds["qc_verdict_code"] = ("station", np.array(codes, np.int8), {
        "long_name": "evening QC verdict on the station's recording",
        "flag_values": np.arange(-1, len(QC_FLAGS) - 1, dtype=np.int8),
        "flag_meanings": " ".join(QC_FLAGS),
        "comment": "2 reoccupy: the recording failed QC and is to be repeated; the model rests "
                   "on it. 1 check: a warning. -1: no verdict recorded (docs/qc.md)"})
    ds["qc_verdict"] = ("station", text_column(texts),
                        {"long_name": "evening QC verdict with its reasons, in words"})
    ds["qc_extra_minutes"] = ("station", np.array(minutes, float),
                              {"units": "min", "long_name": "recording time the QC verdict asks "
                               "for (more, or anew)"})
    return ds


def qc_verdicts(ds):
    """Per station: ``{"verdict", "code", "reasons"}`` of its evening QC, or None when the
    file records none for it (no ``qc_verdict_code``, or code -1)."""
    return list(iter_qc_verdicts(ds))


def iter_qc_verdicts(ds):
    """:func:`qc_verdicts` one station at a time."""
    for row in _iter_coded(ds, "qc_verdict_code", "qc_verdict", by_index=False):
        if row is None or row[1] == "none":
            yield None
            continue
        code, name, text = row
        yield {"verdict": name, "code": code, "reasons": verdict_reasons(text)}


def interval_words(ds):
    """Per station: the verdict on its posterior intervals, ``converged`` or ``unconverged``
    (decoded from ``interval_verdict_code`` with its CF ``flag_meanings``), or "" without one."""
    n = ds.sizes["station"]
    if "interval_verdict_code" not in ds.variables:
        return [""] * n
    return flag_names(ds, "interval_verdict_code")


def layer_rows(ds):
    """One dict per present layer per station, in :data:`CSV_COLUMNS` order
    (:func:`iter_layer_rows` as a list).
    """
    return list(iter_layer_rows(ds))


def iter_layer_rows(ds):
    """The rows of :func:`layer_rows` one at a time (a survey's table is never all in memory).

    ``below_doi`` is 1 when the layer top is at or below the DOI (the whole
    layer is not resolved), else 0. ``verdict``, ``verdict_code`` and
    ``verdict_reasons`` repeat the station's verdict on every layer row
    (empty when the file has none), ``qc_verdict`` and ``qc_reasons`` its
    evening QC verdict (empty when none is recorded). Missing numbers are empty strings; the
    half-space has an empty ``depth_bottom_m`` and ``thickness_m``.
    """
    bottom = layer_bottoms(ds)
    epsg = int(ds.attrs.get("epsg", 0) or 0)
    intervals = interval_words(ds)
    for i, (sid, verdict, qc) in enumerate(zip(ds["station"].values, iter_model_verdicts(ds),
                                               iter_qc_verdicts(ds))):
        sid = str(sid)
        doi = float(ds["doi"].values[i])
        for k in range(ds.sizes["layer"]):
            rho = float(ds["resistivity"].values[i, k])
            if not np.isfinite(rho):
                continue
            top = float(ds["depth_top"].values[i, k])
            row = {
                "station": sid,
                "x_m": _num(ds["x"].values[i]),
                "y_m": _num(ds["y"].values[i]),
                "elevation_m": _num(ds["z"].values[i]),
                "layer": k + 1,
                "depth_top_m": _num(top),
                "depth_bottom_m": _num(bottom[i, k]),
                "thickness_m": _num(ds["thickness"].values[i, k]),
                "resistivity_ohmm": _num(rho),
                "log10_res_std_decades": _num(ds["log10_res_std"].values[i, k]),
                "below_doi": int(np.isfinite(doi) and top >= doi),
                "doi_m": _num(doi),
                "chi2": _num(ds["chi2"].values[i]),
                "epsg": epsg,
                "verdict": verdict["status"] if verdict else "",
                "verdict_code": verdict["code"] if verdict else "",
                "verdict_reasons": verdict["reasons"] if verdict else "",
                "qc_verdict": qc["verdict"] if qc else "",
                "qc_reasons": qc["reasons"] if qc else "",
            }
            if "resistivity_low" in ds:
                row.update({c: _num(ds[v].values[i, k]) for c, v in RANGE_COLUMNS.items()})
            if "depth_p50" in ds:
                row.update({c: _num(ds[v].values[i] if ds[v].ndim == 1 else ds[v].values[i, k])
                            for c, v in zip(POSTERIOR_COLUMNS, _POSTERIOR_VARS)})
                row["interval_verdict"] = intervals[i]
            yield row


def _num(v):
    v = float(v)
    return repr(v) if np.isfinite(v) else ""


def write_models_csv(ds, path):
    """Write the layer table (:func:`layer_rows`) as CSV, atomically.

    Columns: :data:`CSV_COLUMNS`; a header row, comma separated, UTF-8,
    numbers with full float precision.
    """
    rows = iter_layer_rows(ds)          # streamed: a dict per row, ~2 kB, never all at once
    with atomic_path(path) as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.DictWriter(fh, fieldnames=CSV_COLUMNS
                               + (tuple(RANGE_COLUMNS) if "resistivity_low" in ds else ())
                               + (POSTERIOR_COLUMNS if "depth_p50" in ds else ()))
            w.writeheader()
            w.writerows(rows)
    return Path(path)


def export_record(stage, parameters, models_path=None):
    """Stage record for an export made from a models file."""
    return stage_record(stage, parameters, inputs=[models_path] if models_path else ())


def without_model(ds) -> dict:
    """``{station: why}`` the models file (or a section grid made from it) names as having no
    model (attribute ``stations_without_model``; {} when it names none or is unreadable)."""
    try:
        out = json.loads(ds.attrs.get("stations_without_model") or "{}")
    except (ValueError, RecursionError):
        return {}
    return {str(k): str(v) for k, v in out.items()} if isinstance(out, dict) else {}
