"""Many stations: read gated soundings, invert in a process pool, collect models.

A station that fails (bad input, a failing forward set-up) is reported and the
others are still inverted. Products follow docs/data-model.md ("Models
file"); the fit table is a CSV of observed and predicted data.
"""
from __future__ import annotations

import concurrent.futures as cf
import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import TemInputError, input_error
from .data import station_data
from .station import InversionSettings, StationResult, invert_station

__all__ = ["StationFailure", "load_station", "invert_file", "invert_files", "models_from_results",
           "write_fit_csv", "FIT_COLUMNS"]

FIT_COLUMNS = ("station", "channel", "component", "time_s", "observed", "std", "predicted",
               "normalised_residual", "model_kind")


@dataclass
class StationFailure:
    """A station that could not be inverted: file and a one-line reason."""

    file: str
    message: str


def load_station(path, floors=None):
    """Read one gated-sounding file into a :class:`StationData` (raises TemInputError)."""
    from ..io.stacked import read_product

    path = Path(path)
    if not path.is_file():
        raise input_error("gated sounding", "file not found", path)
    ds = read_product(path, "gated")      # refuses stacked, rhoa or other product files
    return station_data(ds, floors=floors, file=str(path))


def invert_file(path, settings: InversionSettings, floors=None):
    """Invert one file; returns a :class:`StationResult` or a :class:`StationFailure`.

    Runs in a worker process; every error becomes a one-line failure record.
    """
    try:
        sd = load_station(path, floors)
        return invert_station(sd, settings)
    except TemInputError as exc:
        return StationFailure(str(path), str(exc))
    except (ValueError, np.linalg.LinAlgError, FloatingPointError) as exc:
        return StationFailure(str(path), f"{path}: inversion failed: {exc}".splitlines()[0])


def invert_files(paths, settings: InversionSettings, floors=None, workers=2, progress=None):
    """Invert stations in a process pool (``workers`` processes; 1 = in-process).

    Parameters
    ----------
    paths : sequence of path
    progress : callable, optional
        Called as ``progress(path, outcome)`` after each station finishes.

    Returns
    -------
    results : list of StationResult, in input order of the successful stations
    failures : list of StationFailure
    """
    paths = [str(p) for p in paths]
    outcome = {}
    if workers <= 1 or len(paths) <= 1:
        for p in paths:
            outcome[p] = invert_file(p, settings, floors)
            if progress:
                progress(p, outcome[p])
    else:
        with cf.ProcessPoolExecutor(max_workers=int(workers)) as pool:
            futs = {pool.submit(invert_file, p, settings, floors): p for p in paths}
            for fut in cf.as_completed(futs):
                p = futs[fut]
                try:
                    outcome[p] = fut.result()
                except Exception as exc:  # a crashed worker must not stop the batch
                    outcome[p] = StationFailure(p, f"{p}: worker failed: {exc.__class__.__name__}: {exc}"
                                                .splitlines()[0])
                if progress:
                    progress(p, outcome[p])
    results = [outcome[p] for p in paths if isinstance(outcome[p], StationResult)]
    failures = [outcome[p] for p in paths if isinstance(outcome[p], StationFailure)]
    return results, failures


def _pad(rows, width):
    out = np.full((len(rows), width), np.nan)
    for i, r in enumerate(rows):
        out[i, : len(r)] = r
    return out


def models_from_results(results, kind="smooth", provenance=(), epsg=0):
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
    ds["halfspace_resistivity"] = ("station", np.array([r.halfspace for r in results]),
                                   {"units": "ohm-m", "long_name": "best-fitting half-space"})
    return ds


def write_fit_csv(results, path, kind="smooth"):
    """Observed and predicted data of every station (one row per datum), atomically."""
    from ..io.atomic import atomic_path

    with atomic_path(path, suffix=".csv") as tmp:
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
