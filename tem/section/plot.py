"""Section and model figures (matplotlib object API, no pyplot state).

Resistivity is drawn on a logarithmic colour scale with conductive (low
resistivity) in warm colours: the ``Spectral`` map runs from red (low) to
blue (high). Below the depth of investigation (DOI) the section is either
veiled and hatched with the DOI drawn as a dashed line (``below_doi="shade"``)
or left blank and hatched (``"hide"``). Every figure is returned as a
:class:`matplotlib.figure.Figure`; :func:`tem.io.figures.save_figure` writes them.
"""
from __future__ import annotations

import numpy as np
from matplotlib.artist import Artist
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LogNorm
from matplotlib.figure import Figure

from ..errors import input_error
from ..invert.verdict import FAILURES

__all__ = ["section_figure", "pseudo_section_figure", "model_figure", "mark_verdicts",
           "mark_columns", "label_stations", "station_edges", "COLUMN_MARKS",
           "CMAP", "BELOW_DOI_STYLES"]

CMAP = "Spectral"
BELOW_DOI_STYLES = ("shade", "hide")


def _new_figure(width, height):
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _edges(centres):
    """Cell edges around (possibly irregular) centres."""
    c = np.asarray(centres, float)
    if c.size == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])


def _distance_scale(distance, unit):
    span = float(np.ptp(distance)) if np.size(distance) else 0.0
    if unit == "auto":
        unit = "km" if span >= 5000.0 else "m"
    if unit not in ("m", "km"):
        raise input_error("distance_unit", f"unknown unit {unit!r}; valid: auto, m, km")
    return (1e-3 if unit == "km" else 1.0), unit


def _norm(values, vmin, vmax):
    v = np.asarray(values, float)
    finite = v[np.isfinite(v)]
    lo = 10.0 ** (np.floor(np.percentile(finite, 1) * 4) / 4) if vmin is None and finite.size else vmin
    hi = 10.0 ** (np.ceil(np.percentile(finite, 99) * 4) / 4) if vmax is None and finite.size else vmax
    lo = 1.0 if lo is None else lo
    hi = 10.0 * lo if hi is None or hi <= lo else hi
    return LogNorm(vmin=lo, vmax=hi)


def _station_labels(ax, station_d, labels, scale):
    top = ax.secondary_xaxis("top")
    top.set_xticks(np.asarray(station_d) * scale, labels=[str(s) for s in labels])
    top.tick_params(axis="x", labelsize=7, rotation=90 if len(labels) > 12 else 0, direction="in")
    top.set_xlabel("station")
    return top


def _runs(flags):
    """(first, last) index of every run of equal non-zero values in ``flags``."""
    out, k, n = [], 0, len(flags)
    while k < n:
        j = k
        while j + 1 < n and flags[j + 1] == flags[k]:
            j += 1
        if flags[k]:
            out.append((k, j))
        k = j + 1
    return out


#: Column marks of :func:`mark_columns`: class -> (legend label, face colour, edge colour,
#: hatch). 1: failed fit (misfit); 2: flagged fit (stalled, bound, thin layer); 3: posterior
#: intervals unconverged (tem.invert.interval); 4: the recording failed the evening QC
#: (verdict reoccupy; tem.qc).
COLUMN_MARKS = {
    1: ("model not fitted (misfit)", (0.45, 0.45, 0.45, 0.55), "0.15", "xx"),
    2: ("model flagged (stalled, bound, thin layer)", (1, 1, 1, 0.0), "0.3", ".."),
    # sparse and half-transparent: with every station unconverged it covers the whole section,
    # which must stay readable under it (the caption above the section says it in words)
    3: ("intervals unconverged (R-hat, ESS)", (1, 1, 1, 0.0), (0.64, 0.16, 0.11, 0.55), "\\"),
    4: ("recording failed QC: re-occupy", (0.36, 0.16, 0.52, 0.28), "#5b2a86", "+"),
}


def station_edges(station_d, scale):
    """Column edges of each station's share of the profile (midpoints to its neighbours)."""
    sd = np.asarray(station_d, float)
    return (_edges(sd) if sd.size > 1 else np.array([sd[0] - 0.5, sd[0] + 0.5])) * scale


def mark_columns(ax, edges, classes, yrange, gid):
    """Hatch every run of columns of equal non-zero class (:data:`COLUMN_MARKS`) between
    ``edges``; one legend entry per class. Patches have gid ``gid``."""
    top, bottom = yrange
    labelled = set()
    for i0, i1 in _runs(classes):
        kind, face, edge, hatch = COLUMN_MARKS[classes[i0]]
        patch = ax.fill_between(
            [edges[i0], edges[i1 + 1]], [top, top], [bottom, bottom], facecolor=face,
            edgecolor=edge, hatch=hatch, lw=0.0, label=None if kind in labelled else kind,
            zorder=3)
        labelled.add(kind)
        patch.set_gid(gid)


def label_stations(ax, xs, labels, yrange, gid_prefix, color="k", at="top"):
    """A boxed label at the top (``at="top"``) or the bottom (``"bottom"``: over the deep part,
    usually below the DOI, where it hides the least) of the section above each station with a
    non-empty label; gid ``<gid_prefix><station>``. ``labels``: (station, text) per station."""
    top, bottom = yrange
    y, va = (top + 0.04 * (bottom - top), "top") if at == "top" else \
        (bottom - 0.04 * (bottom - top), "bottom")
    texts = []
    for x, (sid, label) in zip(xs, labels):
        if not label:
            continue
        txt = ax.text(x, y, f"{sid}\n{label}", ha="center", va=va,
                      fontsize=7, zorder=4, color=color,
                      bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="0.3", alpha=0.85))
        txt.set_gid(f"{gid_prefix}{sid}")
        txt.set_in_layout(False)        # kept inside the axes by _LabelRows
        texts.append(txt)
    if texts:
        ax.add_artist(_LabelRows(texts, downward=at == "top"))


class _LabelRows(Artist):
    """Lays out station labels each time the figure is drawn (after the layout engine has
    sized the axes): a label that would leave the axes is moved in along the profile, and one
    that would overlap a neighbour goes to the next row (further into the section), so no
    label hides another. Draws nothing itself; its zorder puts it before the labels."""

    def __init__(self, texts, downward):
        super().__init__()
        self.texts, self.downward = texts, downward
        self.anchors = [t.get_position() for t in texts]
        self.set_zorder(min(t.get_zorder() for t in texts) - 0.01)
        self.set_in_layout(False)

    def draw(self, renderer):
        ax = self.axes
        box = ax.get_window_extent(renderer)
        to_data = ax.transData.inverted()
        gap = 2.0 * renderer.points_to_pixels(1.0)
        placed = []
        for t, (x, y) in zip(self.texts, self.anchors):
            t.set_position((x, y))
            t.update_bbox_position_size(renderer)
            e = t.get_bbox_patch().get_window_extent(renderer)
            dx = max(0.0, box.x0 - e.x0) - max(0.0, e.x1 - box.x1)
            placed.append((e.x0 + dx, e.x1 + dx, e.height, t, x, y, dx))
        row_ends, height = [], max(p[2] for p in placed) + gap
        for x0, x1, _, t, x, y, dx in sorted(placed, key=lambda p: p[0]):
            row = next((k for k, end in enumerate(row_ends) if x0 > end + gap), len(row_ends))
            if row == len(row_ends):
                row_ends.append(x1)
            row_ends[row] = x1
            px, py = ax.transData.transform((x, y))
            dy = -row * height if self.downward else row * height
            t.set_position(tuple(to_data.transform((px + dx, py + dy))))


def mark_verdicts(ax, grid, scale, yrange, column_edges=None):
    """Mark the columns made from a model that is not fitted or from a recording that failed
    the evening QC; label those stations.

    The columns are those whose ``verdict_code`` is not 0 (a column between
    two stations carries the more severe verdict of the two, as its SEG-Y
    trace does; docs/sections.md), or, in a grid without column verdicts,
    each such station's share of the profile (midpoints to its neighbours).
    Failures (misfit) are greyed and cross-hatched, warnings
    (stalled, parameter at a bound, degenerate layer) dotted; columns whose
    ``qc_verdict_code`` is reoccupy are tinted and hatched with crosses.
    Columns whose ``interval_verdict_code`` is unconverged (posterior
    models whose sampling did not converge) are hatched in dark red.
    Every station that is not fitted is labelled with its verdict and chi2,
    every station whose QC verdict is not good with that verdict, and every
    station with unconverged intervals says so. Patches have gid
    ``verdict-columns``, ``qc-columns`` and ``interval-columns``, labels
    ``verdict-label-<station>``.
    """
    from .verdicts import FAILURE_CODES, QC_REOCCUPY

    n = grid.sizes["station"]
    sd = grid["station_distance"].values.astype(float)
    edges = np.asarray(column_edges, float) if column_edges is not None else None
    statuses = [""] * n
    if "station_verdict_code" in grid:
        names = str(grid["station_verdict_code"].attrs.get("flag_meanings", "")).split()
        codes = grid["station_verdict_code"].values.astype(int)
        chi2 = grid["station_chi2"].values.astype(float) if "station_chi2" in grid else \
            np.full(codes.size, np.nan)
        _mark_verdict_columns(ax, grid, "verdict", edges, sd, scale, yrange,
                              lambda c: 0 if c <= 0 else (1 if c in FAILURE_CODES else 2),
                              "verdict-columns")
        for k, code in enumerate(codes):
            status = "" if code <= 0 else (names[code].replace("_", "-") if code < len(names)
                                           else f"code {code}")
            statuses[k] = status + (f"\nchi2 {chi2[k]:.1f}" if status and np.isfinite(chi2[k])
                                    else "")
    if "station_qc_verdict_code" in grid:
        names = str(grid["station_qc_verdict_code"].attrs.get("flag_meanings", "")).split()
        values = [int(v) for v in np.asarray(
            grid["station_qc_verdict_code"].attrs.get("flag_values", []))]
        codes = grid["station_qc_verdict_code"].values.astype(int)
        _mark_verdict_columns(ax, grid, "qc_verdict", edges, sd, scale, yrange,
                              lambda c: 4 if c >= QC_REOCCUPY else 0, "qc-columns")
        for k, code in enumerate(codes):
            word = names[values.index(code)] if code in values and len(names) == len(values) \
                else "unknown"
            if code > 0:
                statuses[k] = "\n".join(t for t in (statuses[k], f"QC {word}") if t)
    if "station_interval_verdict_code" in grid:
        codes = grid["station_interval_verdict_code"].values.astype(int)
        _mark_verdict_columns(ax, grid, "interval_verdict", edges, sd, scale, yrange,
                              lambda c: 3 if c >= 1 else 0, "interval-columns")
        for k, code in enumerate(codes):
            if code >= 1:
                word = "unconverged" if code == 1 else "intervals unusable"
                statuses[k] = "\n".join(t for t in (statuses[k], word) if t)
    label_stations(ax, sd * scale, list(zip(grid["station"].values.astype(str), statuses)),
                   yrange, "verdict-label-")


def _mark_verdict_columns(ax, grid, name, edges, sd, scale, yrange, mark_class, gid):
    """Mark (:func:`mark_columns`, patches with gid ``gid``) the columns
    of class ``mark_class(code)``: from the grid's per-column ``<name>_code`` when the columns'
    ``edges`` are known, else each station's share of the profile from ``station_<name>_code``."""
    if f"{name}_code" in grid and edges is not None:
        codes, xe = grid[f"{name}_code"].values.astype(int), edges
    else:
        codes, xe = grid[f"station_{name}_code"].values.astype(int), station_edges(sd, scale)
    mark_columns(ax, xe, [mark_class(c) for c in codes], yrange, gid)


def veil_below_doi(ax, xe, doi_y, bottom, style="shade", lw=1.2):
    """Veil the region below the DOI column by column (steps at the cell edges ``xe``; ``doi_y``
    one DOI per column in the axis' vertical unit; ``bottom`` the section's far edge): hatched
    white at 60 % (``style="shade"``) or opaque grey (``"hide"``), gid ``"doi-veil"``, with the
    DOI as a dashed line, gid ``"doi-line"``. Columns without a DOI are left as they are."""
    xs = np.repeat(np.asarray(xe, float), 2)[1:-1]
    ys = np.repeat(np.asarray(doi_y, float), 2)
    if np.isfinite(ys).any():
        face = (1.0, 1.0, 1.0, 0.6) if style == "shade" else (0.85, 0.85, 0.85, 1.0)
        veil = ax.fill_between(xs, np.where(np.isfinite(ys), ys, bottom), bottom,
                               where=np.isfinite(ys), facecolor=face, edgecolor="0.35",
                               hatch="//", lw=0.0, label="below DOI")
        veil.set_gid("doi-veil")
    (line,) = ax.plot(xs, ys, color="k", ls="--", lw=lw, label="depth of investigation")
    line.set_gid("doi-line")


def section_figure(grid, *, below_doi, title=None, vmin=None, vmax=None, distance_unit="auto",
                   cmap=CMAP, width=10.0, height=4.5):
    """Figure of a stitched resistivity section.

    Parameters
    ----------
    grid : xarray.Dataset
        From :func:`tem.section.stitch_models` (dims ``distance`` and
        ``depth`` or ``elevation``).
    title : str or None
    vmin, vmax : float or None
        Colour range, ohm-m; default from the 1st and 99th percentiles.
    below_doi : {"shade", "hide"}
        Veil and hatch the model below the DOI, or leave it blank and hatched.
    distance_unit : {"auto", "m", "km"}
    cmap : str
        Colour map name; low values are drawn with its first colour.

    Returns
    -------
    matplotlib.figure.Figure
        The image has gid ``"resistivity"``; the DOI veil ``"doi-veil"`` and
        the DOI line ``"doi-line"``; columns made from a model that is not
        fitted ``"verdict-columns"``, columns made from a recording that
        failed the evening QC ``"qc-columns"``, columns made from posterior
        models whose sampling did not converge ``"interval-columns"`` (see
        :func:`mark_verdicts`); then a caution under the title says how many
        stations' sampling did not converge.
    """
    if below_doi not in BELOW_DOI_STYLES:
        raise input_error("below_doi", f"unknown style {below_doi!r}; valid: {', '.join(BELOW_DOI_STYLES)}")
    vname = "depth" if "depth" in grid.dims else "elevation"
    d = grid["distance"].values.astype(float)
    v = grid[vname].values.astype(float)
    scale, unit = _distance_scale(d, distance_unit)
    full = 10.0 ** grid["log10_resistivity_full"].values
    below = grid["below_doi"].values.astype(bool)
    shown = np.ma.masked_invalid(np.where(below, np.nan, full) if below_doi == "hide" else full)
    norm = _norm(np.log10(shown.compressed()) if shown.count() else [0.0], vmin, vmax)

    fig = _new_figure(width, height)
    ax = fig.add_subplot()
    xe = _edges(d) * scale
    ye = _edges(v)
    mesh = ax.pcolormesh(xe, ye, shown.T, cmap=cmap, norm=norm, shading="flat")
    mesh.set_gid("resistivity")
    doi = grid["doi"].values.astype(float)
    doi_y = doi if vname == "depth" else grid["surface"].values.astype(float) - doi
    veil_below_doi(ax, xe, doi_y, ye[-1], below_doi)
    if vname == "elevation":
        ax.plot(d * scale, grid["surface"].values, color="0.2", lw=1.0, label="surface")
    if vname == "depth":
        ax.set_ylim(ye[-1], ye[0])
        ax.set_ylabel("depth below surface (m)")
    else:
        ax.set_ylim(ye[-1], ye[0])
        ax.set_ylabel("elevation (m)")
    ax.set_xlim(xe[0], xe[-1])
    ax.set_xlabel(f"distance along profile ({unit})")
    if "station_distance" in grid:
        _station_labels(ax, grid["station_distance"].values, grid["station"].values, scale)
    if any(f"station_{v}_code" in grid for v in ("verdict", "qc_verdict", "interval_verdict")):
        mark_verdicts(ax, grid, scale, (ye[0], ye[-1]), column_edges=xe)
    cb = fig.colorbar(mesh, ax=ax, pad=0.01)
    cb.set_label("resistivity (ohm-m)")
    ax.legend(loc="lower right", fontsize=8, framealpha=0.8)
    caution = "\n".join(c for c in (unconverged_caption(grid), without_model_caption(grid)) if c)
    if title or caution:
        fig.suptitle("\n".join(t for t in (title, caution) if t),
                     fontsize="medium" if caution else "large")
    return fig


def without_model_caption(grid):
    """One line naming the stations of the survey without a model (failed a stage): the
    section is interpolated across them ("" when none)."""
    from ..io.models import without_model

    missing = list(without_model(grid))
    if not missing:
        return ""
    names = ", ".join(missing[:8]) + (f" and {len(missing) - 8} more" if len(missing) > 8 else "")
    return f"no model (failed a stage; interpolated across): {names}"


def unconverged_caption(grid):
    """One line saying how many of the section's stations come from sampling that did not
    converge ("" when none did not, or the grid has no interval verdicts)."""
    if "station_interval_verdict_code" not in grid:
        return ""
    codes = grid["station_interval_verdict_code"].values.astype(int)
    bad = int((codes == 1).sum())
    void = int((codes >= 2).sum())
    out = []
    if bad:
        out.append(f"caution: sampling unconverged at {bad} of {codes.size} stations (hatched): "
                   "their median and intervals are not yet the posterior's")
    if void:
        out.append(f"caution: intervals unusable at {void} of {codes.size} stations (hatched): "
                   "the sampled model misfits the data")
    return "\n".join(out)


def pseudo_section_figure(positions, axis, log10_rhoa, station_distance, station_labels,
                          axis_kind="time", title=None, vmin=None, vmax=None,
                          distance_unit="auto", cmap=CMAP, width=10.0, height=4.5, marked=()):
    """Apparent-resistivity pseudo-section.

    ``marked``: labels of stations whose recording failed the evening QC (reoccupy):
    each gets a dashed purple line and "QC reoccupy" at its position, and the
    title names them (their columns are drawn from data the crew is to record again).

    Parameters
    ----------
    positions : array_like, shape (P,)
        Column chainages, m.
    axis : array_like, shape (S,)
        Gate times, s (``axis_kind="time"``, log axis) or pseudo-depths, m
        (``"depth"``).
    log10_rhoa : array_like, shape (P, S)
        From :func:`tem.section.pseudo_section_grid`.
    station_distance, station_labels : sequences
        Station chainages (m) and identifiers for the top axis.
    """
    if axis_kind not in ("time", "depth"):
        raise input_error("axis_kind", f"unknown axis {axis_kind!r}; valid: time, depth")
    p = np.asarray(positions, float)
    a = np.asarray(axis, float)
    scale, unit = _distance_scale(p, distance_unit)
    val = np.ma.masked_invalid(10.0 ** np.asarray(log10_rhoa, float))
    norm = _norm(np.log10(val.compressed()) if val.count() else [0.0], vmin, vmax)
    fig = _new_figure(width, height)
    ax = fig.add_subplot()
    if axis_kind == "time":
        la = np.log10(a)
        ye = 10.0 ** _edges(la)
    else:
        ye = _edges(a)
    mesh = ax.pcolormesh(_edges(p) * scale, ye, val.T, cmap=cmap, norm=norm, shading="flat")
    mesh.set_gid("rhoa")
    if axis_kind == "time":
        ax.set_yscale("log")
        ax.set_ylabel("time after switch-off (s)")
    else:
        ax.set_ylabel("pseudo-depth (m)")
    ax.set_ylim(ye[-1], ye[0])
    ax.set_xlabel(f"distance along profile ({unit})")
    _station_labels(ax, station_distance, station_labels, scale)
    marked = [m for m in marked if m in list(station_labels)]
    for d, lab in zip(station_distance, station_labels):
        if lab in marked:
            line = ax.axvline(float(d) * scale, color=COLUMN_MARKS[4][2], ls="--", lw=1.2)
            line.set_gid(f"qc-mark-{lab}")
            ax.text(float(d) * scale, 0.02, "QC reoccupy", transform=ax.get_xaxis_transform(),
                    rotation=90, ha="right", va="bottom", fontsize=7, color="0.1",
                    bbox=dict(boxstyle="round", fc="white", ec=COLUMN_MARKS[4][2], alpha=0.8))
    cb = fig.colorbar(mesh, ax=ax, pad=0.01)
    cb.set_label("apparent resistivity (ohm-m)")
    if marked:
        note = ("recording failed the evening QC (dashed, to re-occupy): " + ", ".join(marked))
        title = f"{title}\n{note}" if title else note
    if title:
        fig.suptitle(title)
    return fig


def model_figure(models, indices=None, max_depth=None, ncols=6, panel_width=1.8, height=4.5):
    """1D models of some stations side by side: resistivity against depth.

    Each panel shows the layered model as steps, the band
    10**(log10 rho +- log10_res_std) when known, and the DOI as a dashed
    line with the part below it greyed. A panel whose model is not fitted
    has its verdict under the station name (a misfit on grey), and
    one whose recording failed the evening QC says "QC reoccupy" (tinted).

    Parameters
    ----------
    models : xarray.Dataset
        Models file contents.
    indices : sequence of int or None
        Stations to draw; default all.
    max_depth : float or None
        Depth axis bottom, m; default 1.25 times the deepest DOI.
    """
    from ..io.models import model_verdicts, qc_verdicts
    from .profile import default_max_depth

    idx = list(range(models.sizes["station"])) if indices is None else list(indices)
    if not idx:
        raise input_error("station", "no station to draw")
    top = models["depth_top"].values.astype(float)
    res = models["resistivity"].values.astype(float)
    std = models["log10_res_std"].values.astype(float)
    doi = models["doi"].values.astype(float)
    verdicts = model_verdicts(models)
    qcs = qc_verdicts(models)
    zmax = max_depth or default_max_depth(doi[idx], top[idx])
    ncols = min(ncols, len(idx))
    nrows = int(np.ceil(len(idx) / ncols))
    fig = _new_figure(panel_width * ncols + 0.8, height * nrows)
    axes = fig.subplots(nrows, ncols, sharey=True, sharex=True, squeeze=False)
    finite = res[idx][np.isfinite(res[idx])]
    lo = 10 ** np.floor(np.log10(finite.min() / 1.5))
    hi = 10 ** np.ceil(np.log10(finite.max() * 1.5))
    for n, i in enumerate(idx):
        ax = axes[n // ncols][n % ncols]
        ok = np.isfinite(res[i]) & np.isfinite(top[i])
        t, r, sd = top[i, ok], res[i, ok], std[i, ok]
        bounds = np.append(t, max(zmax, t[-1]))
        zz = np.repeat(bounds, 2)[1:-1]
        rr = np.repeat(r, 2)
        ax.plot(rr, zz, color="k", lw=1.3)
        if np.isfinite(sd).any():
            # An unresolved layer can carry a std of hundreds of decades; the band
            # is clipped far outside the axis so 10**s2 cannot overflow.
            s2 = np.minimum(np.repeat(sd, 2), 30.0)
            ax.fill_betweenx(zz, rr / 10 ** s2, rr * 10 ** s2, color="tab:orange",
                             alpha=0.35, lw=0)
        if np.isfinite(doi[i]):
            ax.axhline(doi[i], color="k", ls="--", lw=1.0)
            ax.axhspan(doi[i], zmax, color="0.6", alpha=0.35, lw=0)
        ax.set_xscale("log")
        ax.set_xlim(lo, hi)
        ax.set_ylim(zmax, 0)
        v, q = verdicts[i], qcs[i]
        lines = [str(models["station"].values[i])]
        failure = v is not None and v["status"] in FAILURES
        if v is not None and v["status"] != "fitted":   # a model not fitted says so
            lines.append(v["status"])
        if q is not None and q["verdict"] != "good":    # so does a recording that failed QC
            lines.append(f"QC {q['verdict']}")
        reoccupy = q is not None and q["verdict"] == "reoccupy"
        colour = "#a4281b" if failure else "#5b2a86" if reoccupy else \
            "#8a6d00" if len(lines) > 1 else "k"
        ax.set_title("\n".join(lines), fontsize=9 if len(lines) == 1 else 8, color=colour,
                     fontweight="bold" if failure or reoccupy else "normal")
        if failure:
            ax.set_facecolor("0.88")
        elif reoccupy:
            ax.set_facecolor("#efe6f5")
        if n % ncols == 0:
            ax.set_ylabel("depth (m)")
        if n // ncols == nrows - 1:
            ax.set_xlabel("resistivity (ohm-m)")
    for n in range(len(idx), nrows * ncols):
        axes[n // ncols][n % ncols].set_visible(False)
    return fig
