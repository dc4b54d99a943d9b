"""LAS 2.0 pseudo-wells: one file per station from a models Dataset (lasio).

Each station's layered model becomes a log sampled on a regular depth axis
(depth below the ground surface, m). Curves:

* ``DEPT`` (m): depth below ground, from 0 to the bottom in steps of ``step``.
* ``RES`` (ohm.m): resistivity of the layer holding the depth.
* ``RSTD`` (log10(ohm.m)): posterior standard deviation of log10 resistivity.
* ``BDOI`` (flag): 1 where the depth is below the depth of investigation, else 0.
* with resistivity ranges (few-layer and posterior models): ``RLOW``, ``RHIG``
  (ohm.m), the low and high ends of the layer's resistivity range the data
  allow (chi2 profile, :mod:`tem.invert.equivalence`).
* with posterior products (model kind posterior): ``RP10``, ``RP50``, ``RP90``,
  ``PIFD``, ``PTGD`` (:mod:`tem.export.las_posterior`).

Missing values are written as the null value -999.25. ~Well uses the LAS 2.0
mnemonics STRT STOP STEP NULL COMP WELL FLD LOC SRVC DATE UWI; ~Params
holds the rest (coordinates, ground elevation, CRS, DOI, misfit, model kind).
"""
from __future__ import annotations

import datetime as _dt
import textwrap
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import input_error, shorten
from ..section.profile import layer_values
from ..io.atomic import atomic_path
from ..io.checks import safe_name

__all__ = ["NULL", "station_log", "las_for_station", "las_files", "write_las", "write_las_all",
           "safe_name"]

NULL = -999.25
#: Longest text value of a ~Params line (a longer one is shortened, and whole in ~Other),
#: and the width ~Other is wrapped to: every line of the file stays within LAS 2.0's 256.
_VALUE_WIDTH = 60
_OTHER_WIDTH = 100


def las_value(text: str) -> str:
    """Text for a LAS parameter's value: a colon ends the value of a LAS line, so "a: b"
    reads "a - b" (it read "a  b", the two words run together)."""
    return str(text).replace(": ", " - ").replace(":", " ")


def station_log(depth_top, resistivity, log10_std, doi, step, bottom):
    """Sample one station's layered model on a regular depth axis.

    Parameters
    ----------
    depth_top, resistivity, log10_std : array_like, shape (L,)
        Layer tops (m), resistivities (ohm-m) and log10 standard deviations.
    doi : float
        Depth of investigation, m (NaN: unknown, no sample flagged).
    step : float
        Depth sample interval, m.
    bottom : float
        Last depth, m (rounded down to a multiple of ``step``).

    Returns
    -------
    depth, res, std, flag : ndarray
        Depth (m), resistivity (ohm-m), log10 std, below-DOI flag (0/1).
    """
    if not step > 0:
        raise input_error("step", f"depth step must be positive, got {step}")
    n = int(np.floor(bottom / step + 1e-9)) + 1
    if n > 1_000_000:
        raise input_error("las_step", f"{n} depth samples to {bottom:g} m (at most 1000000); "
                          "choose a larger step")
    depth = np.arange(n) * step
    top = np.asarray(depth_top, float)[None, :]
    res = layer_values(top, np.asarray(resistivity, float)[None, :], depth)[0]
    std = layer_values(top, np.asarray(log10_std, float)[None, :], depth)[0]
    flag = (depth > doi).astype(float) if np.isfinite(doi) else np.zeros(n)
    return depth, res, std, flag


def las_for_station(models, i, step, bottom=None, mask_below_doi=False, source=""):
    """A :class:`lasio.LASFile` for station ``i`` of a models Dataset.

    Parameters
    ----------
    models : xarray.Dataset
        Models file contents.
    i : int
        Station index.
    step : float
        Depth step, m.
    bottom : float or None
        Bottom of the log, m; default 1.25 times the station's DOI, or the
        deepest layer top plus one layer when the DOI is unknown.
    mask_below_doi : bool
        Write the null value instead of resistivity below the DOI.
    source : str
        Name of the models file, recorded in the ~Params section.
    """
    import lasio

    sid = str(models["station"].values[i])
    top = models["depth_top"].values[i].astype(float)
    res = models["resistivity"].values[i].astype(float)
    std = models["log10_res_std"].values[i].astype(float)
    doi = float(models["doi"].values[i])
    if bottom is None:
        finite_top = top[np.isfinite(top)]
        deepest = float(finite_top.max()) if finite_top.size else 0.0
        bottom = 1.25 * doi if np.isfinite(doi) else float("nan")
        if not bottom >= step:      # no DOI, or one of 0 m (a misfit): the whole model, flagged
            bottom = deepest + max(step, deepest * 0.1)
    depth, r, s, flag = station_log(top, res, std, doi, step, bottom)
    if mask_below_doi:
        r = np.where(flag > 0, np.nan, r)
    x, y, z = (float(models[c].values[i]) for c in ("x", "y", "z"))
    epsg = int(models.attrs.get("epsg", 0) or 0)
    crs = f"EPSG:{epsg}" if epsg else "unknown"

    las = lasio.LASFile()
    if "DLM" in las.version.keys():  # not a LAS 2.0 item
        del las.version["DLM"]
    las.well["NULL"].value = NULL
    las.well["COMP"].value = ""
    las.well["WELL"].value = sid
    las.well["WELL"].descr = "WELL NAME (TEM station id)"
    las.well["FLD"].value = ""
    las.well["LOC"].value = f"X={x:.2f} Y={y:.2f} {crs}"
    las.well["SRVC"].value = f"tem {__version__}"
    las.well["DATE"].value = _dt.date.today().isoformat()
    las.well["UWI"].value = sid
    for key in ("CNTY", "STAT", "CTRY", "API"):      # LAS 2.0 asks PROV or these three
        if key in las.well.keys():
            del las.well[key]
    if "PROV" in las.well.keys():
        las.well["PROV"].value = ""
    params = [
        ("XCOORD", "m", x, "Station easting (projected X)"),
        ("YCOORD", "m", y, "Station northing (projected Y)"),
        ("EGL", "m", z, "Ground level elevation"),
        ("PDAT", "", "GL", "Depth reference: ground level"),
        ("CRS", "", crs, "Coordinate reference system of XCOORD YCOORD"),
        ("EPSG", "", epsg, "EPSG code (0 = none)"),
        ("DOI", "m", round(float(doi), 1) if np.isfinite(doi) else NULL, "Depth of investigation below ground"),
        ("CHI2", "", round(float(models["chi2"].values[i]), 3), "Chi-square per datum of the model"),
        ("MKIND", "", str(models.attrs.get("model_kind", "")), "Model kind (smooth, few-layer, lci, posterior)"),
        *verdict_params(models, i),
        *qc_params(models, i),
        ("MASK", "", "YES" if mask_below_doi else "NO", "RES set to NULL below the DOI"),
        ("SRC", "", Path(source).name if source else "", "Models file"),
    ]
    if "res_p50" in models:      # posterior products (tem.export.las_posterior)
        from .las_posterior import posterior_params
        params += posterior_params(models, i, NULL)
    in_full = []
    for mnem, unit, value, descr in params:
        # LAS 2.0 lines stay within 256 characters (lasio pads every ~Params line to the
        # widest value: one long reason pushed the verdict words past column 380); a long
        # text is shortened here and given whole in ~Other. No colon in a description.
        if isinstance(value, str) and len(value) > _VALUE_WIDTH:
            in_full.append(f"{mnem} in full: {value}")
            value = shorten(value, _VALUE_WIDTH)
        las.params.append(lasio.HeaderItem(mnem, unit=unit, value=value,
                                           descr=str(descr).replace(":", " -")))
    las.other = ("Pseudo-well from a 1D TEM resistivity model; an interpretation, not a "
                 "measured log: check it against wells and other data before any decision. "
                 "Depths are below ground level.")
    fit = next((p[2] for p in params if p[0] == "FIT"), "UNKNOWN")
    if fit not in ("FITTED", "UNKNOWN"):
        las.other += f" WARNING: verdict {fit} (see FIT, FITR): {_WARNING[fit]}"
    qc = next((p[2] for p in params if p[0] == "QC"), "UNKNOWN")
    if qc in _QC_WARNING:
        las.other += f" WARNING: evening QC {qc} (see QC, QCR): {_QC_WARNING[qc]}"
    if "res_p50" in models:
        from .las_posterior import interval_warning
        las.other += interval_warning(params)
    las.other = "\n".join(textwrap.fill(t, _OTHER_WIDTH) for t in [las.other] + in_full)
    las.append_curve("DEPT", depth, unit="m", descr="Depth below ground level")
    las.append_curve("RES", r, unit="ohm.m", descr="Model resistivity")
    las.append_curve("RSTD", s, unit="log10(ohm.m)", descr="Std of log10 resistivity")
    las.append_curve("BDOI", flag, unit="", descr="1 below depth of investigation")
    if "resistivity_low" in models:     # few-layer resistivity ranges (chi2 profile)
        for mnem, var, end in (("RLOW", "resistivity_low", "Low"), ("RHIG", "resistivity_high", "High")):
            v = station_log(top, models[var].values[i].astype(float), std, doi, step, bottom)[1]
            las.append_curve(mnem, np.where(flag > 0, np.nan, v) if mask_below_doi else v,
                             unit="ohm.m", descr=f"{end} end of the resistivity range the data allow")
    if "res_p50" in models:
        from .las_posterior import posterior_curves
        for mnem, values, unit, descr in posterior_curves(models, i, depth):
            las.append_curve(mnem, values, unit=unit, descr=descr)
    return las


_WARNING = {
    "MISFIT": "the model does not fit the data; do not read it as a fitted model.",
    "STALLED": "the inversion stopped before it converged; the model is not final.",
    "PARAMETER-AT-BOUND": "a parameter sits at its bound: a limit, not an estimate.",
    "DEGENERATE-LAYER": "a layer is too thin for its depth to be resolved.",
}


_QC_WARNING = {
    "REOCCUPY": "the recording failed quality control and is to be repeated; the model rests "
                "on it.",
    "CHECK": "the recording has a quality warning; read QCR before using the model.",
}


def qc_params(models, i):
    """LAS parameter lines of the station's evening QC verdict (docs/exports.md): QC, QCR."""
    from ..io.models import qc_verdicts

    q = qc_verdicts(models)[i]
    if q is None:
        return [("QC", "", "UNKNOWN", "Evening QC verdict on the recording: none recorded")]
    return [("QC", "", q["verdict"].upper(), "Evening QC verdict on the recording: GOOD CHECK "
             "REOCCUPY"),
            ("QCR", "", las_value(q["reasons"]), "Evening QC reasons")]


def verdict_params(models, i):
    """LAS parameter lines of the station's verdict (docs/exports.md): FIT, FITC, TOL, FITR."""
    from ..io.models import model_verdicts

    v = model_verdicts(models)[i]
    if v is None:
        return [("FIT", "", "UNKNOWN", "Verdict on the model: none recorded")]
    tol = round(float(models["verdict_tolerance"].values[i]), 3) if "verdict_tolerance" in models \
        else NULL
    reasons = las_value(v["reasons"])
    return [
        ("FIT", "", v["status"].upper(), "Verdict: FITTED MISFIT STALLED PARAMETER-AT-BOUND "
         "DEGENERATE-LAYER"),
        ("FITC", "", v["code"], "Verdict code 0 fitted 1 misfit 2 stalled 3 at bound 4 thin"),
        ("TOL", "", tol, "Largest chi-square per datum counted as fitted"),
        ("FITR", "", reasons, "Verdict reasons"),
    ]


def write_las(las, path):
    """Write a LAS file as LAS 2.0, unwrapped, atomically."""
    with atomic_path(path) as tmp:
        with open(tmp, "w", encoding="ascii", errors="replace", newline="\n") as fh:
            las.write(fh, version=2.0, wrap=False, fmt="%.6g", STRT=None, STOP=None, STEP=None)
    return Path(path)


def las_files(models, out_dir, step, bottom=None, mask_below_doi=False, source=""):
    """``(path, write)`` for each station's ``<station>.las`` in ``out_dir``: ``write()``
    builds and writes the file and returns its path. Two stations that map to one file
    name are refused (TemInputError) before the first is yielded."""
    out_dir = Path(out_dir)
    seen = set()
    names = []
    for i in range(models.sizes["station"]):
        name = safe_name(models["station"].values[i])
        if name.casefold() in seen:        # the same file on a case-insensitive disk too
            raise input_error("station", f"two stations map to the file name {name}.las", source or None)
        seen.add(name.casefold())
        names.append(name)
    for i, name in enumerate(names):
        path = out_dir / f"{name}.las"
        yield path, (lambda i=i, path=path: write_las(
            las_for_station(models, i, step, bottom, mask_below_doi, source), path))


def write_las_all(models, out_dir, step, bottom=None, mask_below_doi=False, source=""):
    """Write one ``<station>.las`` per station into ``out_dir``; returns the paths."""
    return [write() for _, write in las_files(models, out_dir, step, bottom, mask_below_doi,
                                              source)]
