"""Inversion products: station results -> the models file (docs/data-model.md) and the fit table.
"""
from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np

from ..errors import input_error
from .data import station_data

__all__ = ["load_station", "model_row", "models_from_results", "models_from_rows", "add_verdicts",
           "fit_text", "write_fit_csv", "write_fit_text", "FIT_COLUMNS"]

FIT_COLUMNS = ("station", "channel", "component", "time_s", "observed", "std", "predicted",
               "normalised_residual", "model_kind", "verdict", "unit")


def unit_of(component) -> str:
    """Unit of a component's values per ampere: E fields V/m/A, B T/A, dB/dt T/s/A."""
    from ..forward.geometry import B_COMPONENTS, E_COMPONENTS
    c = str(component)
    return "V/m/A" if c in E_COMPONENTS else "T/A" if c in B_COMPONENTS else "T/s/A"


def load_station(path, floors=None):
    """Read one gated-sounding file into a :class:`StationData` (raises TemInputError)."""
    from ..io.stacked import read_product

    path = Path(path)
    if not path.is_file():
        raise input_error("gated sounding", "file not found", path)
    ds = read_product(path, "gated")      # refuses stacked, rhoa or other product files
    return station_data(ds, floors=floors, file=str(path))


def _list(a) -> list:
    return np.asarray(a, float).tolist()


def _verdict_row(v) -> dict | None:
    return None if v is None else {"code": int(v.code), "summary": v.summary,
                                   "chi2": float(v.chi2), "tolerance": float(v.tolerance)}


def verdict_kinds(kind) -> tuple:
    """The models whose verdicts a models file of ``kind`` carries (besides its own)."""
    return ("lci",) if kind == "lci" else ("smooth", "few-layer")


def model_row(r, kind) -> dict:
    """One station's part of a models file of ``kind`` (see :func:`models_from_results`), as
    plain JSON values: what the survey-wide products need of a station result, so the result
    itself can go as soon as it arrives (tem.invert.stage keeps these rows on disk)."""
    if kind == "few-layer":
        if r.few is None:
            raise ValueError("models: few-layer requested but a station has no few-layer model")
        f = r.few
        row = {"resistivity": _list(f["resistivity"]),
               "thickness": _list(np.append(f["thickness"], np.nan)),
               "log10_res_std": _list(f["log10_res_std"]), "chi2": float(f["chi2"]),
               "thickness_std": _list(np.append(f["thickness_std"], np.nan)),
               "depth_std": _list(f["depth_std"])}
        if "resistivity_range" in f:
            row["resistivity_low"] = _list(f["resistivity_range"][:, 0])
            row["resistivity_high"] = _list(f["resistivity_range"][:, 1])
    else:
        row = {"resistivity": _list(r.resistivity),
               "thickness": _list(np.append(r.thickness, np.nan)),
               "log10_res_std": _list(r.log10_res_std), "chi2": float(r.chi2)}
        if getattr(r, "resolution", None) is not None:
            row["resolution"] = _list(r.resolution)
    row.update(station=str(r.station), x=float(r.x), y=float(r.y), z=float(r.z),
               doi=float(r.doi), halfspace=float(r.halfspace),
               verdict=_verdict_row(r.verdict_for(kind)),
               verdicts={k: _verdict_row(r.verdict_for(k)) for k in verdict_kinds(kind)})
    return row


def models_from_results(results, kind, provenance=(), epsg=0):
    """Models Dataset (docs/data-model.md) from station results.

    ``kind="smooth"`` uses the smooth models (std from the roughness prior),
    ``"few-layer"`` the few-layer models (linearised posterior std) with the
    smooth model's DOI; ``"lci"`` expects smooth-type results from the LCI.
    Extra per-layer variables ``thickness_std`` and ``depth_std`` (m) are
    added for few-layer models.
    """
    return models_from_rows([model_row(r, kind) for r in results], kind, provenance, epsg)


def models_from_rows(rows, kind, provenance=(), epsg=0):
    """Models Dataset from :func:`model_row` rows, in their order.

    ``rows`` is a sequence read twice, one row at a time (a list, or rows kept on disk by
    :class:`tem.io.spool.SpooledList`): only the survey-wide arrays are in memory.
    """
    from ..io.models import models_dataset

    n = len(rows)
    if not n:
        raise ValueError("models: no station was inverted")
    L, every = 0, None
    for row in rows:
        L = max(L, len(row["resistivity"]))
        have = {k for k in ("resistivity_low", "resolution") if k in row}
        have |= {f"verdict:{k}" for k, v in row["verdicts"].items() if v is not None}
        have |= {"verdict"} if row["verdict"] is not None else set()
        every = have if every is None else every & have
    layer_vars = ["resistivity", "thickness", "log10_res_std"]
    if kind == "few-layer":
        layer_vars += ["thickness_std", "depth_std"]
        layer_vars += ["resistivity_low", "resistivity_high"] if "resistivity_low" in every else []
    elif "resolution" in every:
        layer_vars.append("resolution")
    station_vars = ("x", "y", "z", "doi", "chi2", "halfspace")
    kinds = [k for k in verdict_kinds(kind) if f"verdict:{k}" in every]
    own = "verdict" in every
    lay = {k: np.full((n, L), np.nan) for k in layer_vars}
    col = {k: np.empty(n) for k in station_vars}
    names = []
    verdicts = {k: {"code": np.empty(n, np.int8), "summary": [], "chi2": np.empty(n),
                    "tolerance": np.empty(n)} for k in (["verdict"] if own else []) + kinds}
    for i, row in enumerate(rows):
        names.append(row["station"])
        for k in layer_vars:
            lay[k][i, : len(row[k])] = row[k]
        for k in station_vars:
            col[k][i] = row[k]
        for k, out in verdicts.items():
            v = row["verdict"] if k == "verdict" else row["verdicts"][k]
            out["code"][i], out["chi2"][i], out["tolerance"][i] = v["code"], v["chi2"], \
                v["tolerance"]
            out["summary"].append(v["summary"])
    ds = models_dataset(
        station=names, resistivity=lay["resistivity"], thickness=lay["thickness"],
        x=col["x"], y=col["y"], z=col["z"], doi=col["doi"], chi2=col["chi2"],
        log10_res_std=lay["log10_res_std"], model_kind=kind, epsg=epsg, provenance=provenance)
    if kind == "few-layer":
        ds["thickness_std"] = (("station", "layer"), lay["thickness_std"],
                               {"units": "m", "long_name": "posterior std of layer thickness"})
        ds["depth_std"] = (("station", "layer"), lay["depth_std"],
                           {"units": "m", "long_name": "posterior std of depth to layer top"})
        for name in ("resistivity_low", "resistivity_high"):
            if name in lay:
                ds[name] = (("station", "layer"), lay[name],
                            {"units": "ohm-m", "long_name": f"{name[12:]} end of the resistivity "
                             "range the data allow (chi2 profile)",
                             "comment": "chi2 profile, docs/inversion.md (Few-layer inversion)"})
    if "resolution" in lay:
        # six decimals: the diagonal is a fraction in [0, 1]; digits beyond are round-off
        # (values of 1e-15 below the DOI differed by 2e-9 relative between two processes)
        ds["resolution"] = (("station", "layer"), np.round(lay["resolution"], 6), {
            "units": "1", "long_name": "diagonal of the smooth model's resolution matrix",
            "comment": "1: decided by the data; below 0.1 filled by the regularisation even "
                       "above the DOI (docs/inversion.md, Depth of investigation)"})
    ds["halfspace_resistivity"] = ("station", col["halfspace"],
                                   {"units": "ohm-m", "long_name": "best-fitting half-space"})
    _add_verdict_vars(ds, verdicts, kind)
    return ds


def _verdict_vars(v, prefix, what):
    from ..io.models import text_column
    from .verdict import STATUSES, flag_meanings

    return {
        f"{prefix}verdict_code": ("station", v["code"], {
            "long_name": f"verdict on the {what}", "flag_values": np.arange(len(STATUSES),
                                                                            dtype=np.int8),
            "flag_meanings": flag_meanings(),
            "comment": "0 fitted; 1 misfit and 2 stalled are failures; 3 parameter at a bound "
                       "and 4 degenerate layer are warnings (docs/inversion.md, Verdicts)"}),
        f"{prefix}verdict": ("station", text_column(v["summary"]),
                             {"long_name": f"verdict on the {what}, in words"}),
        f"{prefix}chi2": ("station", np.asarray(v["chi2"], float),
                          {"units": "1", "long_name": f"final chi-square per datum of the {what}"}),
    }


def _add_verdict_vars(ds, verdicts, kind):
    if "verdict" not in verdicts:
        return ds
    for name, var in _verdict_vars(verdicts["verdict"], "", f"{kind} model").items():
        if name != "chi2":
            ds[name] = var
    ds["verdict_tolerance"] = ("station", verdicts["verdict"]["tolerance"],
                               {"units": "1", "long_name": "largest chi-square per datum "
                                "counted as fitted"})
    for k, v in verdicts.items():
        if k != "verdict":
            for name, var in _verdict_vars(v, k.replace("-", "_") + "_", f"{k} model").items():
                ds[name] = var
    return ds


def add_verdicts(ds, results, kind):
    """Per-station verdict variables (in place).

    ``verdict_code`` and ``verdict`` judge the file's own model (``kind``);
    ``<kind>_verdict_code``, ``<kind>_verdict`` and ``<kind>_chi2`` (kind
    ``smooth``, ``few_layer``, ``lci``) every model computed for the station,
    so the chosen model's file also says how the others fared. Codes carry
    CF ``flag_values`` and ``flag_meanings``.
    """
    own = [r.verdict_for(kind) for r in results]
    if any(v is None for v in own):
        return ds
    verdicts = {"verdict": _columns(own)}
    for k in verdict_kinds(kind):
        vs = [r.verdict_for(k) for r in results]
        if not any(v is None for v in vs):
            verdicts[k] = _columns(vs)
    return _add_verdict_vars(ds, verdicts, kind)


def _columns(vs):
    return {"code": np.array([v.code for v in vs], np.int8), "summary": [v.summary for v in vs],
            "chi2": np.array([v.chi2 for v in vs], float),
            "tolerance": np.array([v.tolerance for v in vs], float)}


def fit_text(r, kind) -> str:
    """One station's rows of the fit table (:data:`FIT_COLUMNS`), as CSV text."""
    buf = io.StringIO()
    w = csv.writer(buf)
    pred = r.few["d_pred"] if (kind == "few-layer" and r.few) else r.d_pred
    nres = (r.d_obs - pred) / r.std
    # the model's verdict on every row: a misfit's rows must not read like a fitted model's
    v = r.verdict_for(kind) if hasattr(r, "verdict_for") else None
    status = v.status if v is not None else ""
    for i in range(r.d_obs.size):
        w.writerow([r.station, int(r.channel[i]), r.component[i], repr(float(r.times[i])),
                    repr(float(r.d_obs[i])), repr(float(r.std[i])), repr(float(pred[i])),
                    repr(float(nres[i])), kind, status, unit_of(r.component[i])])
    return buf.getvalue()


def write_fit_csv(results, path, kind):
    """Observed and predicted data of every station (one row per datum), atomically."""
    return write_fit_text((fit_text(r, kind) for r in results), path)


def write_fit_text(texts, path):
    """The fit table from each station's :func:`fit_text` (an iterable, read once), atomically."""
    from ..io.atomic import atomic_path

    with atomic_path(path) as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            csv.writer(fh).writerow(FIT_COLUMNS)
            fh.writelines(texts)
    return Path(path)
