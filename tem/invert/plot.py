"""Inversion figures: data and response with normalised residuals; model with
DOI and uncertainty band.

Object API only (``matplotlib.figure.Figure`` + ``FigureCanvasAgg``); no
pyplot state.
"""
from __future__ import annotations

import numpy as np

__all__ = ["station_figure"]

_COLOURS = ("#1b6ca8", "#c0392b", "#2e8b57", "#8e44ad", "#d35400", "#34495e")


def _steps(top, values, z_max):
    """Staircase (value, depth) arrays of a layered profile down to z_max."""
    top = np.asarray(top, float)
    bot = np.append(top[1:], max(z_max, top[-1] * 1.05 + 1))
    z = np.column_stack([top, bot]).ravel()
    v = np.repeat(np.asarray(values, float), 2)
    return v, z


def station_figure(result, kind, true_model=None):
    """Figure of one station's fit and model.

    Parameters
    ----------
    result : tem.invert.station.StationResult
    kind : {"smooth", "few-layer"}
        Which predicted response is drawn in the data panel.
    true_model : tem.forward.LayeredModel, optional
        Drawn for synthetic studies.
    """
    from matplotlib.figure import Figure

    fig = Figure(figsize=(11, 6.5), layout="constrained")
    gs = fig.add_gridspec(3, 2, width_ratios=[1.6, 1])
    ax_d = fig.add_subplot(gs[:2, 0])
    ax_r = fig.add_subplot(gs[2, 0], sharex=ax_d)
    ax_m = fig.add_subplot(gs[:, 1])
    few = result.few if kind == "few-layer" else None
    pred = few["d_pred"] if few is not None else result.d_pred
    nres = (result.d_obs - pred) / result.std
    units = {"ex": "V/m/A", "ey": "V/m/A", "bz": "T/A"}
    for k, ch in enumerate(np.unique(result.channel)):
        sel = result.channel == ch
        comp = str(result.component[sel][0])
        col = _COLOURS[k % len(_COLOURS)]
        t, d, s, p = result.times[sel], result.d_obs[sel], result.std[sel], pred[sel]
        pos = d >= 0
        ax_d.errorbar(t[pos], d[pos], yerr=np.minimum(s[pos], 0.999 * d[pos]), fmt="o", ms=4,
                      color=col, label=f"{comp} observed ({units.get(comp, 'T/s/A')})")
        if np.any(~pos):
            ax_d.plot(t[~pos], -d[~pos], "o", mfc="none", color=col, ms=5, label=f"{comp} observed < 0")
        ax_d.plot(t, np.abs(p), "-", color=col, lw=1.4, label=f"{comp} response")
        ax_r.plot(t, nres[sel], "o-", color=col, ms=3, lw=0.8)
    ax_d.set_xscale("log")
    ax_d.set_yscale("log")
    present = sorted({units.get(str(c), "T/s/A") for c in np.unique(result.component)})
    ax_d.set_ylabel(f"|response| per ampere ({', '.join(present)})")
    v = result.verdict_for(kind) if hasattr(result, "verdict_for") else None
    status = f"; {v.status}" if v is not None else ""
    failure = v is not None and v.failed
    ax_d.set_title(f"station {result.station}: data and {kind} response "
                   f"(chi2/N = {(few['chi2'] if few else result.chi2):.2f}{status})",
                   color="#a4281b" if failure else "k",
                   fontweight="bold" if failure else "normal")
    ax_d.legend(fontsize=7, loc="lower left")
    ax_d.grid(True, which="both", alpha=0.25)
    ax_r.axhspan(-1, 1, color="0.85", zorder=0)
    ax_r.axhline(0, color="0.3", lw=0.8)
    ax_r.set_xscale("log")
    ax_r.set_xlabel("time after switch-off (s)")
    ax_r.set_ylabel("(obs - pred) / std")
    lim = max(3.0, float(np.nanmax(np.abs(nres))) * 1.1) if nres.size else 3.0
    ax_r.set_ylim(-lim, lim)

    top = np.concatenate([[0.0], np.cumsum(result.thickness)])
    z_max = 1.6 * result.doi if (np.isfinite(result.doi) and result.doi > 0) else max(top[-1], 1.0)
    if result.few is not None:
        z_max = max(z_max, 1.2 * float(result.few["depth_top"][-1]))
    v, z = _steps(top, result.resistivity, z_max)
    sd = np.repeat(result.log10_res_std, 2)
    ax_m.fill_betweenx(z, v / 10 ** sd, v * 10 ** sd, color="#f5b041", alpha=0.35,
                       label="smooth +-1 std", step=None)
    ax_m.plot(v, z, color="#b03a2e", lw=1.6, label="smooth model")
    if result.few is not None:
        f = result.few
        vf, zf = _steps(f["depth_top"], f["resistivity"], z_max)
        ax_m.plot(vf, zf, color="#1b4f72", lw=2.0, label="few-layer model")
        for k in range(1, len(f["depth_top"])):
            zt, s = f["depth_top"][k], f["depth_std"][k]
            if np.isfinite(s) and s > 0:
                ax_m.fill_between([1e-3, 1e6], zt - 2 * s, zt + 2 * s, color="#5dade2", alpha=0.25,
                                  lw=0, label="depth +-2 std" if k == 1 else None)
    if true_model is not None:
        vt, zt = _steps(true_model.depth_top, true_model.resistivity, z_max)
        ax_m.plot(vt, zt, "k--", lw=1.0, label="true model")
    if np.isfinite(result.doi):
        ax_m.axhspan(result.doi, z_max, color="0.6", alpha=0.35, lw=0, label="below DOI")
        ax_m.axhline(result.doi, color="0.3", lw=1.0, ls=":")
    ax_m.set_xscale("log")
    lo = max(np.nanmin(result.resistivity) / 5, 1e-2)
    hi = min(np.nanmax(result.resistivity) * 5, 1e6)
    ax_m.set_xlim(lo, hi)
    ax_m.set_ylim(z_max, 0)
    ax_m.set_xlabel("resistivity (ohm-m)")
    ax_m.set_ylabel("depth (m)")
    ax_m.set_title(f"model, DOI = {result.doi:.0f} m")
    ax_m.legend(fontsize=7, loc="lower left")
    ax_m.grid(True, which="both", alpha=0.25)
    return fig
