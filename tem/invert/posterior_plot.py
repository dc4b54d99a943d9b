"""Figure of one station's posterior: data and few-layer response, the model with the
P10-P90 resistivity band, and beside it the depth-probability panel (probability of an
interface and of the target top per depth cell).

Object API only (``matplotlib.figure.Figure``); no pyplot state.
"""
from __future__ import annotations

import numpy as np

from .plot import _COLOURS, _steps
from .posterior_products import station_products

__all__ = ["posterior_station_figure", "FIGURE_CELLS"]

#: Depth cells of the figure's probability panel.
FIGURE_CELLS = 120


def posterior_station_figure(result, cover_layers, true_model=None):
    """Figure of a :class:`tem.invert.station.StationResult` with a posterior."""
    from matplotlib.figure import Figure

    post, few = result.posterior, result.few
    fig = Figure(figsize=(13, 6.5), layout="constrained")
    gs = fig.add_gridspec(3, 3, width_ratios=[1.5, 1, 0.7])
    ax_d = fig.add_subplot(gs[:2, 0])
    ax_r = fig.add_subplot(gs[2, 0], sharex=ax_d)
    ax_m = fig.add_subplot(gs[:, 1])
    ax_p = fig.add_subplot(gs[:, 2], sharey=ax_m)
    pred = few["d_pred"]
    nres = (result.d_obs - pred) / result.std
    for k, ch in enumerate(np.unique(result.channel)):
        sel = result.channel == ch
        comp = str(result.component[sel][0])
        col = _COLOURS[k % len(_COLOURS)]
        t, d, p = result.times[sel], result.d_obs[sel], pred[sel]
        ax_d.plot(t[d >= 0], d[d >= 0], "o", ms=4, color=col, label=f"{comp} observed")
        if np.any(d < 0):
            ax_d.plot(t[d < 0], -d[d < 0], "o", mfc="none", ms=5, color=col, label=f"{comp} observed < 0")
        ax_d.plot(t, np.abs(p), "-", color=col, lw=1.4, label=f"{comp} few-layer response")
        ax_r.plot(t, nres[sel], "o-", color=col, ms=3, lw=0.8)
    ax_d.set_xscale("log")
    ax_d.set_yscale("log")
    ax_d.set_ylabel("|response| per ampere (SI)")
    # the fit's own verdict, as on the other kinds' figures (it was missing here)
    v = result.verdict_for("posterior") if hasattr(result, "verdict_for") else None
    failure = v is not None and v.failed
    ax_d.set_title(f"station {result.station}: few-layer fit chi2/N = {few['chi2']:.2f}"
                   f"{f'; {v.status}' if v is not None else ''}; "
                   f"draws median {post.chi2_median:.2f}",
                   color="#a4281b" if failure else "k",
                   fontweight="bold" if failure else "normal")
    ax_d.legend(fontsize=7, loc="lower left")
    ax_d.grid(True, which="both", alpha=0.25)
    ax_r.axhspan(-1, 1, color="0.85", zorder=0)
    ax_r.set_xscale("log")
    ax_r.set_xlabel("time after switch-off (s)")
    ax_r.set_ylabel("(obs - pred) / std")

    doi = result.doi
    z_max = 1.5 * doi if (np.isfinite(doi) and doi > 0) else 1.5 * float(few["depth_top"][-1])
    z_max = max(z_max, 1.2 * float(few["depth_top"][-1]), 1.0)
    edges = np.linspace(0.0, z_max, FIGURE_CELLS + 1)
    zc = 0.5 * (edges[1:] + edges[:-1])
    pr = station_products(post, edges, cover_layers, few)
    lo, mid, hi = pr["res_q"]
    ax_m.fill_betweenx(zc, lo, hi, color="#85c1e9", alpha=0.5, lw=0, label="P10-P90")
    ax_m.plot(mid, zc, color="#1b4f72", lw=1.2, ls="--", label="P50")
    vf, zf = _steps(few["depth_top"], few["resistivity"], z_max)
    ax_m.plot(vf, zf, color="#1b4f72", lw=2.0, label="few-layer fit")
    v, z = _steps(np.concatenate([[0.0], np.cumsum(result.thickness)]), result.resistivity, z_max)
    ax_m.plot(v, z, color="#b03a2e", lw=1.0, alpha=0.7, label="smooth model")
    if true_model is not None:
        vt, zt = _steps(true_model.depth_top, true_model.resistivity, z_max)
        ax_m.plot(vt, zt, "k:", lw=1.2, label="true model")
    ax_m.set_xscale("log")
    ax_m.set_xlim(max(np.nanmin(lo) / 3, 1e-2), min(np.nanmax(hi) * 3, 1e6))
    ax_m.set_ylim(z_max, 0)
    ax_m.set_xlabel("resistivity (ohm-m)")
    ax_m.set_ylabel("depth (m)")
    iv = getattr(result, "interval", None)
    if iv is None:
        ax_m.set_title(f"posterior: R-hat {post.max_rhat:.3f}, ESS {post.min_ess:.0f}")
    else:   # the verdict on the intervals, in words and numbers (tem.invert.interval)
        bad = not iv.converged
        ax_m.set_title(f"intervals {iv.status.upper() if bad else iv.status}:\n"
                       f"R-hat {iv.rhat:.2f}, ESS {iv.ess:.0f}", color="#a4281b" if bad else "k",
                       fontweight="bold" if bad else "normal")
        if bad:
            fig.suptitle(f"station {result.station}: {iv.text}", color="#a4281b", fontsize=10)
    cell = edges[1]
    p_if = pr["interface_density"] * cell
    p_tt = pr["target_density"] * cell
    ax_p.fill_betweenx(zc, 0, p_if, step="mid", color="0.6", alpha=0.6, label="an interface")
    ax_p.plot(p_tt, zc, color="#c0392b", lw=1.4, drawstyle="steps-mid", label="target top")
    q10, q50, q90 = pr["target_q"][1:4]
    if np.isfinite(q50):
        ax_p.axhspan(q10, q90, color="#f5b7b1", alpha=0.5, lw=0,
                     label=f"target top P10-P90\n{q10:.0f}-{q90:.0f} m")
    ax_p.set_xlim(0, max(float(np.max(p_if, initial=0)), float(np.max(p_tt, initial=0)), 0.05) * 1.05)
    ax_p.set_xlabel(f"probability per {cell:.3g} m cell")
    ax_p.set_title("depth probability")
    for ax in (ax_m, ax_p):
        if np.isfinite(doi):
            ax.axhspan(doi, z_max, color="0.6", alpha=0.25, lw=0,
                       label="below DOI" if ax is ax_m else None)
        ax.grid(True, alpha=0.25)
    ax_m.legend(fontsize=7, loc="lower left")
    ax_p.legend(fontsize=7, loc="lower right")
    return fig
