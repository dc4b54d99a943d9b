"""Quality control: a per-station table for the terminal and QC figures.

Table rows come from stacked and gated Datasets (``qc_rows``); ``qc_table``
renders them with rich. Figures use the matplotlib object API (no pyplot):
the gated decay with error bars on log-log axes, and a raw record period
against the stacked transient.
"""
from __future__ import annotations

import numpy as np

__all__ = ["qc_rows", "qc_table", "usable_range", "decay_figure", "raw_vs_stacked_figure",
           "panel_note"]


def usable_range(t_open, t_close, usable):
    """(start, end) in s of the first contiguous run of usable gates; (nan, nan) if none."""
    u = np.asarray(usable, bool)
    if not u.any():
        return float("nan"), float("nan")
    i0 = int(np.argmax(u))
    i1 = i0
    while i1 + 1 < u.size and u[i1 + 1]:
        i1 += 1
    return float(t_open[i0]), float(t_close[i1])


def qc_rows(stacked, gated=None) -> list[dict]:
    """One dict per channel: counts, noise level, signal-to-noise, usable time range."""
    rows = []
    for c in range(stacked.sizes["channel"]):
        r = {"station": stacked.attrs["station"],
             "channel": str(stacked["component"].values[c]),
             "unit": str(stacked["unit"].values[c]),
             "used": int(stacked["transients_used"].values[c]),
             "total": int(stacked["transients_total"].values[c]),
             "noisy": int(stacked["rejected_noisy"].values[c]),
             "bad": int(stacked["rejected_bad_samples"].values[c]),
             "clipped": int(stacked["samples_clipped"].values[c]),
             "outliers": int(stacked["samples_outlier"].values[c]),
             "dead": bool(stacked["dead"].values[c])}
        if gated is not None:
            v, e = gated["value"].values[c], gated["error"].values[c]
            u = gated["usable"].values[c]
            r["noise"] = float(gated["noise_floor"].values[c])
            snr = np.abs(v) / np.where(e > 0, e, np.nan)
            r["snr"] = float(snr[0]) if np.isfinite(snr[0]) else float("nan")
            r["t_start"], r["t_end"] = usable_range(gated["gate_open"].values,
                                                    gated["gate_close"].values, u)
            r["usable"] = int(u.sum())
            r["gates"] = int(u.size)
        r["status"] = _status(r)
        rows.append(r)
    return rows


def _status(r) -> str:
    if r["dead"]:
        return "DEAD"
    if r["total"] and r["used"] < 0.5 * r["total"]:
        return "POOR"
    if "t_end" in r:
        if not np.isfinite(r["t_end"]):
            return "POOR"
        if r["t_end"] / max(r["t_start"], 1e-12) < 10.0:
            return "POOR"
    return "ok"


def qc_table(rows, failed=(), title="Stack QC", console=None):
    """Print the QC rows (and failed stations) as a rich table that fits 80 columns.

    Numbers are never cut: every column keeps its full width and the headers
    are short, with their meaning in a caption.
    """
    from rich import box
    from rich.console import Console
    from rich.table import Table
    console = console or Console()
    if not console.is_terminal:
        console = Console(file=console.file, width=100)
    t = Table(title=title, header_style="bold", box=box.SIMPLE_HEAD, pad_edge=False,
              padding=(0, 1), collapse_padding=True,
              caption="used: transients stacked/recorded; rej: rejected whole (noisy+bad); "
              "clip, spike: samples at a rail, outliers; noise: floor per A (V/m/A for E, "
              "T/s/A for dB/dt); snr: first gate; usable: time range of usable gates (s)")
    for col, just in [("station", "left"), ("ch", "left"), ("used", "right"), ("rej", "right"),
                      ("clip", "right"), ("spike", "right"), ("noise", "right"),
                      ("snr", "right"), ("usable", "right"), ("status", "left")]:
        t.add_column(col, justify=just, no_wrap=True)
    for r in rows:
        rng = "-"
        if np.isfinite(r.get("t_end", np.nan)):
            rng = f"{r['t_start']:.2g}-{r['t_end']:.2g}"
        status = {"ok": "[green]ok[/]", "POOR": "[yellow]POOR[/]", "DEAD": "[red]DEAD[/]"}.get(
            r["status"], r["status"])
        t.add_row(r["station"], r["channel"], f"{r['used']}/{r['total']}",
                  f"{r['noisy'] + r['bad']}", f"{r['clipped']}", f"{r['outliers']}",
                  f"{r['noise']:.1e}" if "noise" in r else "-",
                  f"{r['snr']:.0f}" if np.isfinite(r.get("snr", np.nan)) else "-", rng, status)
    for sid, msg in failed:
        t.add_row(sid, "-", "-", "-", "-", "-", "-", "-", "-", "[red]FAILED[/]")
    console.print(t)
    return t


def _figure(w=7.0, h=4.5):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=(w, h), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def panel_note(ax, text):
    """Write ``text`` across the middle of an axes panel (a dead or empty channel)."""
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", fontsize=9,
            color="tab:red", bbox=dict(boxstyle="round", fc="white", ec="tab:red"))


def _dead(ds, comp):
    if "dead" not in ds:
        return False
    comps = [str(x) for x in ds["component"].values]
    return comp in comps and bool(ds["dead"].values[comps.index(comp)])


def decay_figure(gated, stacked=None, verdict=None):
    """Gated decay per channel, |value| with 1-sigma bars on log-log axes.

    Filled markers: positive usable gates; open: negative usable gates;
    grey: gates flagged unusable. The dashed line is the noise floor per
    sample; the faint curve is the stacked transient (if given).
    ``verdict``: the station's evening QC verdict (a :class:`StationVerdict`);
    anything but ``good`` is written over the panels with its reasons.
    """
    n = gated.sizes["channel"]
    fig = _figure(5.0 * n, 4.2)
    axes = fig.subplots(1, n, squeeze=False)[0]
    tc = gated["gate_centre"].values
    for c, ax in enumerate(axes):
        v, e = gated["value"].values[c], gated["error"].values[c]
        u = gated["usable"].values[c]
        comp = str(gated["component"].values[c])
        unit = "V/m/A" if comp in ("ex", "ey") else "T/s/A"
        drawn = np.abs(v[np.isfinite(v) & (v != 0)])
        if stacked is not None:
            t = stacked["time"].values
            s = np.abs(stacked["value"].values[c])
            sel = (t <= gated["gate_close"].values[-1]) & np.isfinite(s) & (s > 0) & (t > 0)
            if sel.any():
                ax.plot(t[sel], s[sel], color="0.8", lw=0.6, label="stacked samples")
                drawn = np.concatenate([drawn, s[sel]])
        for mask, kw, lab in [(u & (v > 0), dict(fmt="o", color="tab:blue"), "usable, +"),
                              (u & (v <= 0), dict(fmt="o", mfc="white", color="tab:red"), "usable, -"),
                              (~u, dict(fmt="x", color="0.5"), "below noise")]:
            if mask.any():
                ax.errorbar(tc[mask], np.abs(v[mask]), yerr=e[mask], ms=4, lw=0.8, capsize=2,
                            label=lab, **kw)
        floor = float(gated["noise_floor"].values[c])
        if np.isfinite(floor) and floor > 0:
            ax.axhline(floor, ls="--", color="k", lw=0.8, label="noise floor (per sample)")
            drawn = np.append(drawn, floor)
        dead = _dead(gated, comp) or (stacked is not None and _dead(stacked, comp))
        if dead:
            panel_note(ax, "dead channel: flat record\n(peak-to-peak at most 1 count)")
        elif not drawn.size:
            panel_note(ax, "no finite value: every transient\nrejected (see the QC reasons)")
        elif not u.any():
            panel_note(ax, "no usable gate:\nevery gate below the noise")
        ax.set_xscale("log")
        if not drawn.size:       # nothing to scale a log axis on: a decade range, empty
            ax.set_xlim(float(np.nanmin(tc)), float(np.nanmax(tc)))
            ax.set_ylim(1e-12, 1e-9)
        ax.set_yscale("log")
        ax.set_xlabel("time after switch-off (s)")
        ax.set_ylabel(f"|{comp}| ({unit})")
        ax.set_title(f"{gated.attrs['station']} {comp}")
        ax.grid(True, which="both", alpha=0.3)
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize=7)
    if verdict is not None and verdict.verdict != "good":
        import textwrap

        from ..errors import shorten
        colour = "tab:red" if verdict.verdict == "reoccupy" else "#8a6d00"
        text = f"evening QC: {verdict.verdict}: " + shorten("; ".join(verdict.reasons), 300)
        fig.suptitle("\n".join(textwrap.wrap(text, 60 * n)), color=colour, fontsize=9)
    return fig


def raw_vs_stacked_figure(stacked):
    """One full period of the raw record against the stacked transient (both per A).

    The excerpt starts at the record's first positive switch-off, so the raw
    period and the stack drawn as (+s, -s) have the same sign; a dead channel
    is noted in its panel.
    """
    n = stacked.sizes["channel"]
    fig = _figure(5.0 * n, 4.2)
    axes = fig.subplots(1, n, squeeze=False)[0]
    te = stacked["excerpt_time"].values
    t = stacked["time"].values
    m = t.size
    for c, ax in enumerate(axes):
        comp = str(stacked["component"].values[c])
        raw = stacked["excerpt"].values[c]
        s = stacked["value"].values[c]
        ax.plot(te, raw - np.mean(raw), color="0.6", lw=0.5, label="raw (one period, mean removed)")
        ax.plot(te, np.concatenate([s, -s])[: te.size], color="tab:blue", lw=1.0,
                label="stacked (+, then -)")
        if bool(stacked["dead"].values[c]):
            panel_note(ax, "dead channel: flat record\n(peak-to-peak at most 1 count)")
        ax.set_xlabel("time after a positive switch-off (s)")
        ax.set_ylabel(f"{comp} ({stacked['unit'].values[c]})")
        ax.set_title(f"{stacked.attrs['station']} {comp}: raw vs stacked")
        ax.set_xlim(te[0], te[min(2 * m, te.size) - 1])
        ax.legend(fontsize=7)
    return fig
