"""Figures that open the report: the station map coloured by verdict, noise against time.

Object API only (``matplotlib.figure.Figure``); no pyplot state.
"""
from __future__ import annotations

import numpy as np

__all__ = ["VERDICT_STYLE", "station_map", "noise_figure"]

#: Marker colour and shape per evening verdict (and for a station that failed a stage).
VERDICT_STYLE = {
    "good": ("#2f7d4a", "o"),
    "check": ("#d4a017", "D"),
    "reoccupy": ("#b3302b", "s"),
    "failed": ("#4d4d4d", "X"),
    "": ("#8c8c8c", "o"),
}

_UNITS = {"ex": "V/m per A", "ey": "V/m per A", "bz": "T per A", "dbxdt": "T/s per A",
          "dbydt": "T/s per A", "dbzdt": "T/s per A"}


def _crs_label(epsg):
    return f"EPSG:{int(epsg)}" if epsg else "survey coordinates (no EPSG code)"


def station_map(stations, tx_kind, tx_points, epsg=0, title=None):
    """Plan view: stations coloured by verdict, the transmitter drawn, survey coordinates.

    Parameters
    ----------
    stations : sequence of (id, x, y, verdict)
        Coordinates in m; verdict ``good``, ``check``, ``reoccupy``, ``failed`` or "".
    tx_kind : {"wire", "loop"}
    tx_points : array_like, shape (n, 2)
        Wire vertices (A ... B) or loop vertices, m.
    epsg : int
        Coordinate reference of the survey (0: local coordinates).
    """
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    fig = Figure(figsize=(8.0, 5.6), layout="constrained")
    ax = fig.add_subplot()
    pts = np.asarray(tx_points, float).reshape(-1, 2)
    if tx_kind == "loop":
        closed = np.vstack([pts, pts[:1]])
        ax.plot(closed[:, 0], closed[:, 1], color="#1f3b73", lw=2.2, zorder=2)
    else:
        ax.plot(pts[:, 0], pts[:, 1], color="#1f3b73", lw=2.6, zorder=2)
        for (x, y), lab in ((pts[0], "A"), (pts[-1], "B")):
            ax.plot(x, y, "o", color="#1f3b73", ms=5, zorder=3)
            ax.annotate(lab, (x, y), xytext=(4, 4), textcoords="offset points", fontsize=8,
                        color="#1f3b73")
    ax.annotate("transmitter", tuple(pts.mean(axis=0)), xytext=(0, 8), textcoords="offset points",
                ha="center", fontsize=8, color="#1f3b73")
    seen = []
    for sid, x, y, verdict in stations:
        colour, marker = VERDICT_STYLE.get(verdict, VERDICT_STYLE[""])
        ax.plot(x, y, marker=marker, color=colour, ms=9, mec="black", mew=0.6, zorder=4,
                linestyle="none")
        ax.annotate(str(sid), (x, y), xytext=(0, -13), textcoords="offset points", ha="center",
                    fontsize=7)
        if verdict not in seen:
            seen.append(verdict)
    handles = [Line2D([], [], marker=VERDICT_STYLE.get(v, VERDICT_STYLE[""])[1], linestyle="none",
                      color=VERDICT_STYLE.get(v, VERDICT_STYLE[""])[0], mec="black", mew=0.6,
                      label=v or "no verdict") for v in seen]
    handles.append(Line2D([], [], color="#1f3b73", lw=2.4, label=f"transmitter ({tx_kind})"))
    ax.legend(handles=handles, fontsize=8, loc="best", title="evening verdict", title_fontsize=8)
    ax.set_aspect("equal", adjustable="datalim")
    ax.set_xlabel(f"easting (m), {_crs_label(epsg)}")
    ax.set_ylabel("northing (m)")
    ax.grid(True, alpha=0.3)
    ax.set_title(title or "Stations and transmitter")
    return fig


def noise_figure(series, verdicts=None, title=None):
    """Noise level against time per component: one line per station, coloured by verdict.

    Parameters
    ----------
    series : sequence of (station, component, gate_centre, error)
        Per station and channel the gate standard errors (per A, SI) at the
        gate centre times (s): the noise each gate carries.
    verdicts : dict, optional
        station -> verdict (colours).
    """
    from matplotlib.figure import Figure

    verdicts = verdicts or {}
    comps = sorted({c for _, c, _, _ in series})
    fig = Figure(figsize=(5.2 * max(len(comps), 1), 4.4), layout="constrained")
    axes = fig.subplots(1, max(len(comps), 1), squeeze=False)[0]
    for ax, comp in zip(axes, comps):
        curves = [(s, np.asarray(t, float), np.asarray(e, float)) for s, c, t, e in series
                  if c == comp]
        for sid, t, e in curves:
            ok = np.isfinite(e) & (e > 0)
            if not ok.any():
                continue
            colour = VERDICT_STYLE.get(verdicts.get(sid, ""), VERDICT_STYLE[""])[0]
            ax.plot(t[ok], e[ok], color=colour, lw=1.1, alpha=0.85)
            ax.annotate(sid, (t[ok][-1], e[ok][-1]), xytext=(3, 0), textcoords="offset points",
                        fontsize=6, color=colour, va="center")
        grid = [t for _, t, _ in curves]
        if grid and all(g.shape == grid[0].shape and np.allclose(g, grid[0]) for g in grid):
            med = np.nanmedian(np.vstack([np.where(e > 0, e, np.nan) for _, _, e in curves]), 0)
            ax.plot(grid[0], med, "k--", lw=1.0, label="survey median")
            ax.legend(fontsize=7, loc="lower left")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("time after switch-off (s)")
        ax.set_ylabel(f"{comp} gate standard error ({_UNITS.get(comp, 'per A')})")
        ax.set_title(f"{comp}: noise in each gate")
        ax.grid(True, which="both", alpha=0.25)
    if not comps:
        axes[0].text(0.5, 0.5, "no gated soundings", ha="center", va="center",
                     transform=axes[0].transAxes)
        axes[0].set_axis_off()
    if title:
        fig.suptitle(title)
    return fig
