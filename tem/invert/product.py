"""Inversion products: station results -> the models file (docs/data-model.md) and the fit table.
"""
from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from ..errors import input_error
from .data import station_data

__all__ = ["load_station", "models_from_results", "add_verdicts", "write_fit_csv", "FIT_COLUMNS"]

FIT_COLUMNS = ("station", "channel", "component", "time_s", "observed", "std", "predicted",
               "normalised_residual", "model_kind")


def load_station(path, floors=None):
    """Read one gated-sounding file into a :class:`StationData` (raises TemInputError)."""
    from ..io.stacked import read_product

    path = Path(path)
    if not path.is_file():
        raise input_error("gated sounding", "file not found", path)
    ds = read_product(path, "gated")      # refuses stacked, rhoa or other product files
    return station_data(ds, floors=floors, file=str(path))


def _pad(rows, width):
    out = np.full((len(rows), width), np.nan)
    for i, r in enumerate(rows):
        out[i, : len(r)] = r
    return out


def models_from_results(results, kind, provenance=(), epsg=0):
    """Models Dataset (docs/data-model.md) from station results.

    ``kind="smooth"`` uses the smooth models (std from the roughness prior),
    ``"few-layer"`` the few-layer models (linearised posterior std) with the
    smooth model's DOI; ``"lci"`` expects smooth-type results from the LCI.
    Extra per-layer variables ``thickness_std`` and ``depth_std`` (m) are
    added for few-layer models.
    """
    from ..io.models import models_dataset

    if not results:
        raise ValueError("models: no station was inverted")
    if kind == "few-layer":
        if any(r.few is None for r in results):
            raise ValueError("models: few-layer requested but a station has no few-layer model")
        res = [r.few["resistivity"] for r in results]
        thk = [np.append(r.few["thickness"], np.nan) for r in results]
        std = [r.few["log10_res_std"] for r in results]
        chi2 = [r.few["chi2"] for r in results]
    else:
        res = [r.resistivity for r in results]
        thk = [np.append(r.thickness, np.nan) for r in results]
        std = [r.log10_res_std for r in results]
        chi2 = [r.chi2 for r in results]
    L = max(len(r) for r in res)
    ds = models_dataset(
        station=[r.station for r in results], resistivity=_pad(res, L), thickness=_pad(thk, L),
        x=[r.x for r in results], y=[r.y for r in results], z=[r.z for r in results],
        doi=[r.doi for r in results], chi2=chi2, log10_res_std=_pad(std, L), model_kind=kind,
        epsg=epsg, provenance=provenance)
    if kind == "few-layer":
        ds["thickness_std"] = (("station", "layer"),
                               _pad([np.append(r.few["thickness_std"], np.nan) for r in results], L),
                               {"units": "m", "long_name": "posterior std of layer thickness"})
        ds["depth_std"] = (("station", "layer"), _pad([r.few["depth_std"] for r in results], L),
                           {"units": "m", "long_name": "posterior std of depth to layer top"})
        if all("resistivity_range" in r.few for r in results):
            for j, name in enumerate(("resistivity_low", "resistivity_high")):
                ds[name] = (("station", "layer"),
                            _pad([r.few["resistivity_range"][:, j] for r in results], L),
                            {"units": "ohm-m", "long_name": f"{name[12:]} end of the resistivity "
                             "range the data allow (chi2 profile)",
                             "comment": "chi2 profile, docs/inversion.md (Few-layer inversion)"})
    if kind != "few-layer" and all(getattr(r, "resolution", None) is not None for r in results):
        # six decimals: the diagonal is a fraction in [0, 1]; digits beyond are round-off
        # (values of 1e-15 below the DOI differed by 2e-9 relative between two processes)
        ds["resolution"] = (("station", "layer"), np.round(_pad([r.resolution for r in results], L), 6), {
            "units": "1", "long_name": "diagonal of the smooth model's resolution matrix",
            "comment": "1: decided by the data; below 0.1 filled by the regularisation even "
                       "above the DOI (docs/inversion.md, Depth of investigation)"})
    ds["halfspace_resistivity"] = ("station", np.array([r.halfspace for r in results]),
                                   {"units": "ohm-m", "long_name": "best-fitting half-space"})
    add_verdicts(ds, results, kind)
    return ds


def _verdict_vars(verdicts, prefix, what):
    from .verdict import STATUSES, flag_meanings

    codes = np.array([v.code for v in verdicts], np.int8)
    text = np.array([v.summary for v in verdicts], dtype=object).astype(str)
    return {
        f"{prefix}verdict_code": ("station", codes, {
            "long_name": f"verdict on the {what}", "flag_values": np.arange(len(STATUSES),
                                                                            dtype=np.int8),
            "flag_meanings": flag_meanings(),
            "comment": "0 fitted; 1 misfit and 2 stalled are failures; 3 parameter at a bound "
                       "and 4 degenerate layer are warnings (docs/inversion.md, Verdicts)"}),
        f"{prefix}verdict": ("station", text, {"long_name": f"verdict on the {what}, in words"}),
        f"{prefix}chi2": ("station", np.array([v.chi2 for v in verdicts], float),
                          {"units": "1", "long_name": f"final chi-square per datum of the {what}"}),
    }


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
    for name, var in _verdict_vars(own, "", f"{kind} model").items():
        if name != "chi2":
            ds[name] = var
    ds["verdict_tolerance"] = ("station", np.array([v.tolerance for v in own], float),
                               {"units": "1", "long_name": "largest chi-square per datum "
                                "counted as fitted"})
    kinds = ["lci"] if kind == "lci" else ["smooth"] + (
        ["few-layer"] if all(r.few is not None for r in results) else [])
    for k in kinds:
        vs = [r.verdict_for(k) for r in results]
        if any(v is None for v in vs):
            continue
        for name, var in _verdict_vars(vs, k.replace("-", "_") + "_", f"{k} model").items():
            ds[name] = var
    return ds


def write_fit_csv(results, path, kind):
    """Observed and predicted data of every station (one row per datum), atomically."""
    from ..io.atomic import atomic_path

    with atomic_path(path) as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(FIT_COLUMNS)
            for r in results:
                pred = r.few["d_pred"] if (kind == "few-layer" and r.few) else r.d_pred
                nres = (r.d_obs - pred) / r.std
                for i in range(r.d_obs.size):
                    w.writerow([r.station, int(r.channel[i]), r.component[i], repr(float(r.times[i])),
                                repr(float(r.d_obs[i])), repr(float(r.std[i])), repr(float(pred[i])),
                                repr(float(nres[i])), kind])
    return Path(path)
