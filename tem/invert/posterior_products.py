"""Products of posterior sampling: percentiles of interface depths and of resistivity versus
depth, interface and target-top probability versus depth, in the models file and as CSV.

Everything is computed from the pooled kept draws of all chains
(:class:`tem.invert.posterior.PosteriorResult`). Percentiles are the sample
quantiles (numpy's default linear interpolation). Probability versus depth is
a density (1/m) on a regular grid of cells from the surface: the fraction of
draws with an interface (or the target top) in a cell, divided by the cell
size; summed over cells and multiplied by the cell size it gives the expected
number of interfaces above the grid bottom (1 for the target top when it is
within the grid).

Variables added to the models Dataset (docs/data-model.md, "Models file",
posterior variables):

* ``depth_p10``, ``depth_p50``, ``depth_p90`` (station, layer), m: depth to each
  layer top (NaN for layer 0 and padding);
* ``depth_std_linearised`` (station, layer), m: the Levenberg-Marquardt band;
* coordinate ``post_depth`` (cell centres, m) with attribute ``cell_m``;
  ``res_p10``, ``res_p50``, ``res_p90`` (station, post_depth), ohm-m;
  ``interface_density``, ``target_density`` (station, post_depth), 1/m;
* ``target_layer`` (station,): the target, the most conductive layer below
  ``cover_layers`` in the few-layer fit (0 = top layer);
* ``target_top_p025`` .. ``target_top_p975`` (station,), m; ``target_top_linearised``
  and ``target_top_std_linearised`` (station,), m;
* ``rhat_max``, ``ess_min``, ``posterior_seconds``, ``chi2_posterior`` (station,).
* ``interval_verdict_code`` (station,), CF flags 0 converged, 1 unconverged, and
  ``interval_verdict`` (station,), the verdict in words and numbers
  (:mod:`tem.invert.interval`): whether the chains mixed well enough for the
  percentiles to be read as the posterior's.
"""
from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from .posterior import depth_tops, target_layer, target_tops

__all__ = ["QUANTILES", "TARGET_QUANTILES", "depth_edges", "edges_from", "station_products",
           "posterior_row", "add_posterior", "add_posterior_rows", "write_posterior_csv", "POSTERIOR_CSV_COLUMNS",
           "add_interval_verdicts"]

QUANTILES = (0.1, 0.5, 0.9)
TARGET_QUANTILES = (0.025, 0.1, 0.5, 0.9, 0.975)
_TQ_NAMES = ("p025", "p10", "p50", "p90", "p975")

POSTERIOR_CSV_COLUMNS = ("station", "depth_m", "res_p10_ohmm", "res_p50_ohmm", "res_p90_ohmm",
                         "interface_density_per_m", "target_density_per_m", "below_doi",
                         "interval_verdict", "verdict")


def depth_edges(results, cells):
    """Cell edges (m) shared by all stations: 0 to 1.5 times the deepest DOI (or the
    deepest few-layer interface when no DOI is known), ``cells`` cells."""
    return edges_from([_edge_depth(r.doi, r.few) for r in results], cells)


def _edge_depth(doi, few):
    if np.isfinite(doi) and doi > 0:
        return 1.5 * float(doi)
    if few is not None:
        return 1.5 * float(np.max(few["depth_top"]))
    return None


def edges_from(depths, cells):
    """Cell edges from each station's deepest depth of interest (None: none known)."""
    z = [d for d in depths if d is not None]
    z_max = max(z) if z else 1000.0
    return np.linspace(0.0, max(z_max, 1.0), int(cells) + 1)


def station_products(post, edges, cover_layers, few):
    """Products of one station's draws on the cells ``edges`` (see the module docstring).

    Returns a dict of arrays: ``depth_q`` (3, N) of layer tops 1..N,
    ``res_q`` (3, cells), ``interface_density``, ``target_density`` (cells,),
    ``target_q`` (5,), ``target_lin`` (value, std) and ``target_layer``. The
    target layer is chosen on the few-layer fit ``few`` (dict with
    ``resistivity``, ``depth_top``, ``depth_std``).
    """
    flat = post.flat
    n = post.n_layers
    S = flat.shape[0]
    edges = np.asarray(edges, float)
    dz = np.diff(edges)
    zc = 0.5 * (edges[1:] + edges[:-1])
    tops = depth_tops(flat, n)                                   # (S, n-1)
    out = {"depth_q": np.quantile(tops, QUANTILES, axis=0) if n > 1 else np.zeros((3, 0))}
    idx = np.zeros((S, zc.size), int)
    for k in range(n - 1):
        idx += zc[None, :] >= tops[:, k:k + 1]
    ln_rho_z = np.take_along_axis(flat[:, :n], idx, axis=1)
    out["res_q"] = np.exp(np.quantile(ln_rho_z, QUANTILES, axis=0))
    out["interface_density"] = np.histogram(tops.ravel(), edges)[0] / (S * dz)
    k = target_layer(few["resistivity"], cover_layers)
    out["target_layer"] = -1 if k is None else k
    tt = target_tops(flat, n, k)
    ok = np.isfinite(tt)
    out["target_density"] = np.histogram(tt[ok], edges)[0] / (S * dz)
    out["target_q"] = (np.quantile(tt[ok], TARGET_QUANTILES) if ok.any()
                       else np.full(len(TARGET_QUANTILES), np.nan))
    out["target_draws"] = tt
    out["target_lin"] = ((np.nan, np.nan) if k is None else
                         (float(few["depth_top"][k]), float(few["depth_std"][k])))
    return out


def posterior_row(r) -> dict:
    """What the posterior products need of one station result besides its draws (plain JSON
    values; the draws are ``r.posterior.flat``): the invert stage keeps these rows and the
    draws on disk as the stations arrive, not the results."""
    post, few = r.posterior, r.few
    return {"station": str(r.station), "edge_depth": _edge_depth(r.doi, few),
            "n_layers": int(post.n_layers),
            "few_resistivity": np.asarray(few["resistivity"], float).tolist(),
            "few_depth_top": np.asarray(few["depth_top"], float).tolist(),
            "few_depth_std": np.asarray(few["depth_std"], float).tolist(),
            "rhat_max": float(post.max_rhat), "ess_min": float(post.min_ess),
            "chi2_median": float(post.chi2_median), "seconds": float(post.seconds),
            "log10_res_std": (np.std(post.flat[:, :post.n_layers], axis=0) / np.log(10)).tolist(),
            "interval": None if r.interval is None else {"code": int(r.interval.code),
                                                         "text": r.interval.text}}


def add_posterior(ds, results, cells, cover_layers):
    """The models Dataset ``ds`` (few-layer models of ``results``, same station order) with the
    posterior variables added and ``model_kind = "posterior"``."""
    return add_posterior_rows(ds, [posterior_row(r) for r in results],
                              lambda i: results[i].posterior.flat, cells, cover_layers)


def add_posterior_rows(ds, rows, draws, cells, cover_layers):
    """:func:`add_posterior` from :func:`posterior_row` rows (a sequence read twice, one row at
    a time) and ``draws(i)``, the pooled draws of the i-th row's station: one station's
    draws are in memory at a time."""
    from types import SimpleNamespace

    edges = edges_from([row["edge_depth"] for row in rows], cells)
    zc = 0.5 * (edges[1:] + edges[:-1])
    n, L, C = len(rows), ds.sizes["layer"], zc.size
    depth_q = np.full((3, n, L), np.nan)
    res_q = np.empty((3, n, C))
    dens = {k: np.empty((n, C)) for k in ("interface_density", "target_density")}
    target_q = np.empty((len(TARGET_QUANTILES), n))
    target_lin = np.empty((2, n))
    target_k = np.empty(n, int)
    per = {k: np.empty(n) for k in ("rhat_max", "ess_min", "chi2_median", "seconds")}
    lay = {k: np.full((n, L), np.nan) for k in ("few_depth_std", "log10_res_std")}
    intervals = []
    for i, row in enumerate(rows):
        few = {k: np.asarray(row[f"few_{k}"], float)
               for k in ("resistivity", "depth_top", "depth_std")}
        p = station_products(SimpleNamespace(flat=draws(i), n_layers=row["n_layers"]), edges,
                             cover_layers, few)
        m = p["depth_q"].shape[1]
        depth_q[:, i, 1:1 + m] = p["depth_q"]
        res_q[:, i] = p["res_q"]
        for k in dens:
            dens[k][i] = p[k]
        target_q[:, i] = p["target_q"]
        target_lin[:, i] = p["target_lin"]
        target_k[i] = p["target_layer"]
        for k in per:
            per[k][i] = row[k]
        for k in lay:
            lay[k][i, :len(row[k])] = row[k]
        v = row["interval"]
        intervals.append(None if v is None else SimpleNamespace(**v))
    sl, sz = ("station", "layer"), ("station", "post_depth")
    ds = ds.assign_coords(post_depth=("post_depth", zc, {"units": "m", "cell_m": float(edges[1]),
                                                         "long_name": "depth cell centre"}))
    for j, q in enumerate(("p10", "p50", "p90")):
        ds[f"depth_{q}"] = (sl, depth_q[j],
                            {"units": "m", "long_name": f"posterior {q.upper()} of depth to layer top"})
        ds[f"res_{q}"] = (sz, res_q[j],
                          {"units": "ohm-m", "long_name": f"posterior {q.upper()} of resistivity"})
    ds["depth_std_linearised"] = (sl, lay["few_depth_std"],
                                  {"units": "m", "long_name": "linearised std of depth to layer top"})
    ds["interface_density"] = (sz, dens["interface_density"],
                               {"units": "1/m", "long_name": "probability density of an interface"})
    ds["target_density"] = (sz, dens["target_density"],
                            {"units": "1/m", "long_name": "probability density of the target top"})
    for j, q in enumerate(_TQ_NAMES):
        ds[f"target_top_{q}"] = ("station", target_q[j],
                                 {"units": "m", "long_name": f"posterior {q.upper()} of target top"})
    ds["target_top_linearised"] = ("station", target_lin[0],
                                   {"units": "m", "long_name": "target top of the few-layer fit"})
    ds["target_top_std_linearised"] = ("station", target_lin[1],
                                       {"units": "m", "long_name": "linearised std of target top"})
    ds["target_layer"] = ("station", target_k,
                          {"units": "1", "long_name": "target layer (0 = top; -1 none)"})
    ds["rhat_max"] = ("station", per["rhat_max"],
                      {"units": "1", "long_name": "largest split R-hat over the parameters"})
    ds["ess_min"] = ("station", per["ess_min"],
                     {"units": "1", "long_name": "smallest bulk or tail ESS over the parameters"})
    add_interval_verdicts(ds, intervals)
    ds["chi2_posterior"] = ("station", per["chi2_median"],
                            {"units": "1", "long_name": "median chi-square per datum of the draws"})
    ds["posterior_seconds"] = ("station", per["seconds"],
                               {"units": "s", "long_name": "sampling wall time"})
    # posterior spread replaces the linearised one in the standard variables
    ds["log10_res_std"] = (sl, lay["log10_res_std"],
                           {"units": "log10(ohm-m)", "long_name": "posterior std of log10 resistivity"})
    ds.attrs["model_kind"] = "posterior"
    ds.attrs["cover_layers"] = int(cover_layers)
    return ds


def add_interval_verdicts(ds, verdicts):
    """``interval_verdict_code`` (CF flags) and ``interval_verdict`` (text) per station, in place
    (a no-op when a station has no verdict)."""
    from ..io.models import text_column
    from .interval import INTERVAL_STATUSES, interval_flag_meanings

    if not verdicts or any(v is None for v in verdicts):
        return ds
    ds["interval_verdict_code"] = ("station", np.array([v.code for v in verdicts], np.int8), {
        "long_name": "verdict on the posterior intervals",
        "flag_values": np.arange(len(INTERVAL_STATUSES), dtype=np.int8),
        "flag_meanings": interval_flag_meanings(),
        "comment": "0 converged (largest split R-hat and smallest ESS within the thresholds); "
                   "1 unconverged: the percentiles are not yet the posterior's, a warning; "
                   "2 unusable: the sampled model misfits its data, the intervals are not to "
                   "be used (docs/inversion.md, Interval verdict)"})
    ds["interval_verdict"] = ("station", text_column([v.text for v in verdicts]), {
        "long_name": "verdict on the posterior intervals, in words"})
    return ds


def write_posterior_csv(ds, path):
    """Resistivity percentiles and probability densities versus depth, one row per station and
    depth cell (:data:`POSTERIOR_CSV_COLUMNS`; ``interval_verdict`` repeats the station's
    interval verdict word on every row, ``verdict`` its model's fit verdict), atomically."""
    from ..io.atomic import atomic_path

    from ..io.models import interval_words, iter_model_verdicts

    z = ds["post_depth"].values
    words = interval_words(ds)
    fits = [v["status"] if v else "" for v in iter_model_verdicts(ds)]
    with atomic_path(path) as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(POSTERIOR_CSV_COLUMNS)
            for i, sid in enumerate(ds["station"].values.astype(str)):
                doi = float(ds["doi"].values[i])
                for j, zj in enumerate(z):
                    w.writerow([sid, repr(float(zj))] +
                               [repr(float(ds[v].values[i, j])) for v in
                                ("res_p10", "res_p50", "res_p90", "interface_density",
                                 "target_density")] + [int(np.isfinite(doi) and zj >= doi),
                                                       words[i], fits[i]])
    return Path(path)
