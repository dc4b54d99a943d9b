"""Figures of apparent resistivity: sounding curves and pseudo-sections.

Matplotlib object API only (no pyplot state). Sounding curves: one column
per channel, the decay on top (|value| with one-standard-error bars, open
markers where the value is negative, crosses on gates flagged unusable),
apparent resistivity below (all-time with error bars, the second branch as
faint diamonds where the half-space response is not monotonic, late-time as
a line, solid where its validity condition holds), all log-log. The
pseudo-section reuses :func:`tem.section.pseudo_section_grid` and
:func:`tem.section.plot.pseudo_section_figure` (log colour scale, conductive warm).
"""
from __future__ import annotations

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..errors import input_error

__all__ = ["sounding_figure", "pseudo_section", "UNITS"]

#: Axis labels of data per ampere by component.
UNITS = {"ex": "V/m per A", "ey": "V/m per A", "bz": "T per A",
         "dbxdt": "T/s per A", "dbydt": "T/s per A", "dbzdt": "T/s per A"}


def sounding_figure(ds, channels=None, title=None, panel_width=3.4, height=6.4):
    """Sounding curves of one station from an apparent-resistivity Dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        Output of :func:`tem.rhoa.sounding_rhoa`.
    channels : sequence of int, optional
        Channels to draw (default all).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    n_ch = ds.sizes["channel"]
    channels = list(range(n_ch)) if channels is None else list(channels)
    if not channels:
        raise input_error("channels", "nothing to draw")
    t = ds["gate_centre"].values
    t_lo = ds["gate_open"].values
    t_hi = ds["gate_close"].values
    fig = Figure(figsize=(panel_width * len(channels) + 0.6, height), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(2, len(channels), squeeze=False, sharex="col")
    for j, c in enumerate(channels):
        comp = str(ds["component"].values[c])
        v = ds["value"].values[c]
        e = ds["error"].values[c]
        usable = ds["usable"].values[c].astype(bool)
        ax = axes[0, j]
        pos = v > 0
        xerr = np.vstack([t - t_lo, t_hi - t])
        for sel, face, lab in ((pos, "C0", "positive"), (v < 0, "white", "negative")):
            if sel.any():
                ax.errorbar(t[sel], np.abs(v[sel]), yerr=np.minimum(e[sel], 0.999 * np.abs(v[sel])),
                            xerr=xerr[:, sel], fmt="o", ms=4, mfc=face, mec="C0", ecolor="0.5",
                            elinewidth=0.8, capsize=0, label=lab)
        bad = ~usable & np.isfinite(v) & (v != 0)
        if bad.any():
            ax.plot(t[bad], np.abs(v[bad]), "x", color="C3", ms=7, label="unusable")
        _log_axes_or_note(ax, np.isfinite(v) & (v != 0), "no data (dead or empty channel)")
        ax.set_title(f"ch {c}: {comp}", fontsize=9)
        ax.set_ylabel(f"|{comp}| ({UNITS.get(comp, '')})")
        ax.grid(True, which="major", lw=0.4, alpha=0.5)

        ax = axes[1, j]
        rho = ds["rhoa"].values[c]
        rel = ds["rhoa_rel_error"].values[c]
        ok = np.isfinite(rho)
        if ok.any():
            # log-normal error bars: rho * exp(-/+ rel)
            rel_ok = np.where(np.isfinite(rel[ok]), np.minimum(rel[ok], 3.0), 0.0)
            yerr = np.vstack([rho[ok] * (1 - np.exp(-rel_ok)), rho[ok] * (np.exp(rel_ok) - 1)])
            ax.errorbar(t[ok], rho[ok], yerr=yerr, fmt="o", ms=4, color="C1", ecolor="0.5",
                        elinewidth=0.8, label="all-time")
        lo, hi = ds["rhoa_low"].values[c], ds["rhoa_high"].values[c]
        other = np.where(np.isclose(lo, rho), hi, lo)
        two = ds["rhoa_n_roots"].values[c] >= 2
        if two.any():
            ax.plot(t[two], other[two], "D", ms=3, color="C1", alpha=0.35, label="other branch")
        late = ds["rhoa_late"].values[c]
        valid = ds["rhoa_late_valid"].values[c].astype(bool)
        if np.isfinite(late).any():
            ax.plot(t, late, "--", color="C2", lw=1.0, label="late-time")
            if valid.any():
                ax.plot(t[valid], late[valid], "-", color="C2", lw=2.0, label="late-time valid")
        no_root = ~ok
        if no_root.any() and ok.any():
            y0 = np.nanmin(rho[ok])
            ax.plot(t[no_root], np.full(no_root.sum(), y0), "v", color="C3", ms=5,
                    label="not converted")
        _log_axes_or_note(ax, ok | np.isfinite(late), "no gate converted")
        ax.set_xlabel("time after switch-off (s)")
        ax.set_ylabel("apparent resistivity (ohm-m)")
        ax.grid(True, which="major", lw=0.4, alpha=0.5)
    station = ds.attrs.get("station", "")
    fig.suptitle(title or f"station {station}")
    return fig


def _log_axes_or_note(ax, has_data, note):
    """Log-log axes with a legend when something was drawn; otherwise say why the panel is empty."""
    if np.any(has_data):
        ax.set_xscale("log")
        ax.set_yscale("log")
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize=7, loc="best")
    else:
        ax.text(0.5, 0.5, note, transform=ax.transAxes, ha="center", va="center", fontsize=9)


def pseudo_section(stations, x, y, times, rhoa, depths=None, axis_kind="time", n_columns=200,
                   title=None, marked=()):
    """Apparent-resistivity pseudo-section along the line through the stations.

    Parameters
    ----------
    stations : sequence of str
        Station labels.
    x, y : array_like, shape (n,)
        Station coordinates, m.
    times : sequence of n arrays
        Gate times per station, s.
    rhoa : sequence of n arrays
        Apparent resistivity per station and gate, ohm-m (NaN: no value).
    depths : sequence of n arrays, optional
        Pseudo-depths per station and gate, m (needed for ``axis_kind="depth"``).
    axis_kind : {"time", "depth"}
    n_columns : int
        Number of interpolated columns along the profile.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from ..section.plot import pseudo_section_figure
    from ..section.profile import polyline_chainage, pseudo_section_grid, station_line

    if axis_kind not in ("time", "depth"):
        raise input_error("axis_kind", f"unknown axis {axis_kind!r}; valid: time, depth")
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    if x.size < 2:
        raise input_error("stations", "a pseudo-section needs at least two stations")
    line_x, line_y, _ = station_line(x, y, order="principal")
    chain = np.asarray(polyline_chainage(x, y, line_x, line_y)[0], float)
    order = np.argsort(chain, kind="stable")
    s = chain[order]
    keep = np.concatenate([[True], np.diff(s) > 1e-6])  # co-located stations: keep the first
    idx = order[keep]
    s = s[keep]
    if s.size < 2:
        raise input_error("stations", "a pseudo-section needs stations at two or more places")
    absc = [np.asarray(times[i] if axis_kind == "time" else depths[i], float) for i in idx]
    vals = [np.asarray(rhoa[i], float) for i in idx]
    allx = np.concatenate([a[np.isfinite(a) & (a > 0)] for a in absc])
    if allx.size == 0:
        raise input_error("rhoa", "no apparent resistivity to draw")
    if axis_kind == "time":
        axis = np.logspace(np.log10(allx.min()), np.log10(allx.max()), 120)
    else:
        axis = np.linspace(allx.min(), allx.max(), 120)
    positions = np.linspace(s[0], s[-1], int(n_columns))
    grid = pseudo_section_grid(s, absc, vals, positions, axis, "linear",
                               log_axis=(axis_kind == "time"))
    labels = [str(stations[i]) for i in idx]
    return pseudo_section_figure(positions, axis, grid, s, labels, axis_kind=axis_kind, title=title,
                                 marked=marked)
