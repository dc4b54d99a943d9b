"""Posterior section figure: a section coloured by the posterior P50 resistivity, and below it
the P10-P90 width (log10(P90 / P10), decades) on the same grid, with the target-top
percentiles of every station. Below each station's depth of investigation both panels are
veiled and hatched as in the resistivity section (:func:`tem.section.plot.veil_below_doi`):
the percentiles there come from the prior more than from the data. Columns of stations
whose posterior intervals are unconverged (``interval_verdict_code`` 1;
:mod:`tem.invert.interval`) are hatched in both panels, with a legend entry, and labelled with
their R-hat and ESS (:func:`tem.section.plot.mark_columns`): their percentiles are not yet
the posterior's. Columns of stations whose recording failed the evening QC (verdict
reoccupy) are tinted and hatched with crosses, and the station's name says so.

Both panels are stitched like the resistivity section (:func:`tem.section.stage.section_grid`)
from the models file's posterior products (:mod:`tem.invert.posterior_products`): each
station's percentile profile on the posterior depth cells is read as a layered model with one
layer per cell.
"""
from __future__ import annotations

import numpy as np

__all__ = ["posterior_grids", "posterior_section_figure"]


def _cell_models(models, values):
    from ..io.models import models_dataset

    z = np.asarray(models["post_depth"].values, float)
    cell = float(models["post_depth"].attrs.get("cell_m", z[1] - z[0] if z.size > 1 else 1.0))
    thk = np.full(np.shape(values), cell)
    thk[:, -1] = np.nan
    return models_dataset(station=models["station"].values, resistivity=values, thickness=thk,
                          x=models["x"].values, y=models["y"].values, z=models["z"].values,
                          doi=models["doi"].values, chi2=models["chi2"].values,
                          epsg=int(models.attrs.get("epsg", 0) or 0))


def posterior_grids(models, settings):
    """(P50 grid, width grid) of a models Dataset with posterior products; the width grid's
    ``log10_resistivity`` holds log10(P90 / P10)."""
    from .stage import section_grid

    p10 = np.asarray(models["res_p10"].values, float)
    p50 = np.asarray(models["res_p50"].values, float)
    p90 = np.asarray(models["res_p90"].values, float)
    g50 = section_grid(_cell_models(models, p50), settings)
    gw = section_grid(_cell_models(models, np.maximum(p90 / p10, 1.0 + 1e-9)), settings)
    return g50, gw


def posterior_section_figure(models, settings, title=None):
    """Two-panel figure (P50 section; P10-P90 width) of a models Dataset with posterior products."""
    from matplotlib.colors import Normalize

    from .plot import CMAP, _distance_scale, _edges, _new_figure, _norm, veil_below_doi

    g50, gw = posterior_grids(models, settings)
    vname = "depth" if "depth" in g50.dims else "elevation"
    d = g50["distance"].values.astype(float)
    scale, unit = _distance_scale(d, "auto")
    xe, ye = _edges(d) * scale, _edges(g50[vname].values.astype(float))
    fig = _new_figure(10.0, 7.5)
    ax1, ax2 = fig.subplots(2, 1, sharex=True)
    full = g50["log10_resistivity_full"].values
    norm = _norm(full[np.isfinite(full)] if np.isfinite(full).any() else [0.0],
                 settings.vmin, settings.vmax)
    m1 = ax1.pcolormesh(xe, ye, (10.0 ** full).T, cmap=CMAP, norm=norm, shading="flat")
    fig.colorbar(m1, ax=ax1, label="P50 resistivity (ohm-m)")
    width = gw["log10_resistivity_full"].values
    hi = float(np.nanpercentile(width, 99)) if np.isfinite(width).any() else 1.0
    m2 = ax2.pcolormesh(xe, ye, width.T, cmap="magma_r", norm=Normalize(0.0, max(hi, 0.1)),
                        shading="flat")
    fig.colorbar(m2, ax=ax2, label="P10-P90 width (decades)")
    order = np.argsort(g50["station_distance"].values)
    sd = g50["station_distance"].values[order] * scale
    sid = list(models["station"].values.astype(str))
    idx = [sid.index(s) for s in g50["station"].values.astype(str)[order]]
    t10, t50, t90 = (models[f"target_top_{q}"].values[idx] for q in ("p10", "p50", "p90"))
    for ax in (ax1, ax2):
        veil_below_doi(ax, xe, g50["doi"].values.astype(float), ye[-1], "shade", lw=1.0)
        ax.errorbar(sd, t50, yerr=[t50 - t10, t90 - t50], fmt="o", ms=3, color="k", mfc="w",
                    capsize=2, lw=0.8, label="target top P50 (P10-P90)")
        ax.set_ylim(ye[-1], ye[0])
        ax.set_ylabel("depth below surface (m)")
    _mark_unconverged((ax1, ax2), models, idx, sd, scale, (ye[0], ye[-1]), (xe[0], xe[-1]))
    fit = _mark_fit_verdicts((ax1, ax2), models, idx, sd, scale, (ye[0], ye[-1]),
                             (xe[0], xe[-1]))
    qc = _mark_failed_qc((ax1, ax2), models, idx, sd, scale, (ye[0], ye[-1]), (xe[0], xe[-1]))
    # the legend below the P50 panel, not over it (the layout makes room)
    ax1.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.03), ncols=3,
               framealpha=0.9)
    ax1.set_title(title or "posterior P50 resistivity (few-layer models)",
                  pad=14 + 10 * (any(qc) + 2 * any(fit)))   # room for station names of 2-4 lines
    ax2.set_title("posterior spread: log10(P90 / P10) of resistivity")
    from .plot import without_model_caption
    missing = without_model_caption(models)
    if missing:
        fig.suptitle(missing, fontsize="small", color="#a00000")
    ax2.set_xlabel(f"distance along profile ({unit})")
    for s, x, q, f in zip(g50["station"].values.astype(str)[order], sd, qc, fit):
        ax1.annotate(s + (f"\n{f}" if f else "") + (f"\nQC {q}" if q else ""), (x, ye[0]),
                     xytext=(0, 2),
                     textcoords="offset points", ha="center", va="bottom", fontsize=6,
                     annotation_clip=False, color="#5b2a86" if q == "reoccupy" else "k",
                     fontweight="bold" if q == "reoccupy" else "normal")
    return fig


def _hatch(axes, cls, sd, scale, yrange, xrange, gid):
    """Mark the columns of class ``cls`` (per station, profile order; 0 none) in every panel,
    each station's share from the midpoints to its neighbours, within the section's extent."""
    from .plot import mark_columns, station_edges

    if not any(cls):
        return
    edges = np.clip(station_edges(np.asarray(sd) / scale, scale), *xrange)
    for ax in axes:
        mark_columns(ax, edges, cls, yrange, gid)
        ax.set_xlim(*xrange)


def _mark_fit_verdicts(axes, models, idx, sd, scale, yrange, xrange):
    """Hatch the columns of stations whose few-layer fit is not fitted, as the section figure
    does (misfit grey and cross-hatched, the warnings dotted; gid ``verdict-columns``);
    returns each station's verdict and chi2 ("" when fitted or none), in profile order."""
    from ..invert.verdict import FAILURES
    from ..io.models import model_verdicts
    every = model_verdicts(models)
    chi2 = models["chi2"].values.astype(float)
    vs = [(every[i], chi2[i]) for i in idx]
    # status and chi2 on lines of their own: "parameter-at-bound chi2 0.7" on one line ran
    # into the next station's name
    words = ["" if v is None or v["status"] == "fitted" else f"{v['status']}\nchi2 {c:.1f}"
             for v, c in vs]
    cls = [0 if not w else (1 if v["status"] in FAILURES else 2) for w, (v, _) in zip(words, vs)]
    _hatch(axes, cls, sd, scale, yrange, xrange, "verdict-columns")
    return words


def _mark_failed_qc(axes, models, idx, sd, scale, yrange, xrange):
    """Tint and hatch the columns of stations whose recording failed the evening QC
    (reoccupy; gid ``qc-columns``); returns each station's QC word ("" when good or none),
    in profile order, for its name above the section."""
    from ..io.models import qc_verdicts
    every = qc_verdicts(models)
    qcs = [every[i] for i in idx]
    words = ["" if q is None or q["verdict"] == "good" else q["verdict"] for q in qcs]
    cls = [4 if w == "reoccupy" else 0 for w in words]
    _hatch(axes, cls, sd, scale, yrange, xrange, "qc-columns")
    return words


def _mark_unconverged(axes, models, idx, sd, scale, yrange, xrange):
    """Hatch and label the columns of stations with unconverged intervals (``idx``: models
    rows in profile order, ``sd`` their distances, already scaled; ``xrange`` the section's
    extent, which the marks do not leave)."""
    from ..io.models import interval_words
    from .plot import label_stations

    every = interval_words(models)
    words = [every[i] for i in idx]
    if not {"unconverged", "unusable"} & set(words):
        return
    cls = [3 if w in ("unconverged", "unusable") else 0 for w in words]
    _hatch(axes, cls, sd, scale, yrange, xrange, "interval-columns")
    sid = models["station"].values.astype(str)[idx]
    rhat = models["rhat_max"].values.astype(float)[idx]
    ess = models["ess_min"].values.astype(float)[idx]
    labels = [(s, f"R-hat {r:.2f}\nESS {e:.0f}" if c else "")
              for s, r, e, c in zip(sid, rhat, ess, cls)]
    label_stations(axes[0], sd, labels, yrange, "interval-label-", color="#a4281b",
                   at="bottom")
