"""Sections: 1D models stitched along a profile, pseudo-sections, depth to time.

Pure functions (arrays in, arrays out, no files, no plotting). The one
xarray entry point, :func:`stitch_models`, reads a models Dataset (see
docs/data-model.md, "Models file") and returns a gridded section Dataset.

Geometry: the profile is a polyline in projected metres. A station's
*chainage* is the distance along the polyline, from its first vertex, to the
station's orthogonal projection onto the nearest segment; its *offset* is
the distance from the station to that projection.

Stitching is a concatenation plus interpolation: each station's layered
model is sampled at the section depths (the value of the layer that holds
the depth), and between stations log10 resistivity is interpolated linearly
along the chainage (``lateral="linear"``) or taken from the nearer station
(``lateral="nearest"``). The depth of investigation (DOI) is interpolated the
same way, and every sample deeper than the local DOI is flagged.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import input_error

__all__ = [
    "read_line_csv",
    "station_line",
    "polyline_chainage",
    "points_at_chainage",
    "layer_values",
    "stitch_grid",
    "stitch_models",
    "pseudo_section_grid",
    "depth_to_twt",
    "twt_to_depth",
    "check_velocity_table",
    "default_max_depth",
    "LATERAL",
]

LATERAL = ("linear", "nearest")
#: Largest depth axis of a section (samples per column) and largest grid (columns x samples):
#: 1 m steps to 100 km; a grid of 5e7 values is 0.4 GB per float64 array (limits of ours).
MAX_SAMPLES = 100_000
MAX_GRID = 50_000_000


# ---------------------------------------------------------------- geometry
def station_line(x, y, order):
    """A polyline through the stations and the station order along it.

    Parameters
    ----------
    x, y : array_like, shape (n,)
        Station coordinates, m (projected, x east, y north).
    order : {"given", "principal"}
        ``"given"``: the stations in the order given. ``"principal"``: sorted
        by their projection onto the principal axis of the station cloud
        (useful when a file lists stations out of line order).

    Returns
    -------
    line_x, line_y : ndarray, shape (n,)
        Polyline vertices, m.
    index : ndarray of int, shape (n,)
        Station indices in line order (``line_x = x[index]``).
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    if order == "given":
        index = np.arange(x.size)
    elif order == "principal":
        xy = np.column_stack([x - x.mean(), y - y.mean()])
        _, _, vt = np.linalg.svd(xy, full_matrices=False)
        axis = vt[0]
        # Orient the axis so that it points east (or north if north-south).
        if axis[0] < 0 or (axis[0] == 0 and axis[1] < 0):
            axis = -axis
        index = np.argsort(xy @ axis, kind="stable")
    else:
        raise input_error("order", f"unknown station order {order!r}; valid: given, principal")
    return x[index], y[index], index


def _segments(line_x, line_y):
    lx = np.asarray(line_x, float)
    ly = np.asarray(line_y, float)
    if lx.ndim != 1 or lx.shape != ly.shape or lx.size < 2:
        raise input_error("line", "a polyline needs at least two vertices (x, y)")
    dx = np.diff(lx)
    dy = np.diff(ly)
    length = np.hypot(dx, dy)
    if np.any(length == 0):
        raise input_error("line", "two consecutive polyline vertices coincide")
    start = np.concatenate([[0.0], np.cumsum(length)])
    return lx, ly, dx, dy, length, start


def polyline_chainage(x, y, line_x, line_y):
    """Chainage and offset of points projected onto a polyline.

    Each point is projected orthogonally onto every segment (clamped to the
    segment ends); the nearest projection wins.

    Parameters
    ----------
    x, y : array_like, shape (n,)
        Point coordinates, m.
    line_x, line_y : array_like, shape (m,), m >= 2
        Polyline vertices, m, in profile order.

    Returns
    -------
    chainage : ndarray, shape (n,)
        Distance along the polyline from its first vertex, m.
    offset : ndarray, shape (n,)
        Distance from the point to its projection, m.
    """
    lx, ly, dx, dy, length, start = _segments(line_x, line_y)
    px = np.asarray(x, float)[:, None]
    py = np.asarray(y, float)[:, None]
    u = ((px - lx[:-1]) * dx + (py - ly[:-1]) * dy) / length**2
    u = np.clip(u, 0.0, 1.0)
    qx = lx[:-1] + u * dx
    qy = ly[:-1] + u * dy
    dist = np.hypot(px - qx, py - qy)
    k = np.argmin(dist, axis=1)
    rows = np.arange(px.shape[0])
    chainage = start[k] + u[rows, k] * length[k]
    return chainage, dist[rows, k]


def points_at_chainage(line_x, line_y, chainage):
    """Coordinates of the points at given chainages along a polyline.

    Parameters
    ----------
    line_x, line_y : array_like, shape (m,)
        Polyline vertices, m.
    chainage : array_like
        Distance along the polyline, m; values outside [0, length] are
        extrapolated along the first or last segment.

    Returns
    -------
    x, y : ndarray
        Coordinates, m.
    """
    lx, ly, dx, dy, length, start = _segments(line_x, line_y)
    s = np.asarray(chainage, float)
    k = np.clip(np.searchsorted(start, s, side="right") - 1, 0, length.size - 1)
    u = (s - start[k]) / length[k]
    return lx[k] + u * dx[k], ly[k] + u * dy[k]


# ---------------------------------------------------------------- stitching
def layer_values(depth_top, values, depth):
    """Sample layered models at depths: the value of the layer holding each depth.

    A layer holds depths in [top, next top). Layers whose value or top is NaN
    (padding of a shorter model) are skipped; the last valid layer is the
    half-space and holds every depth below its top.

    Parameters
    ----------
    depth_top : array_like, shape (n, L)
        Layer top depths below the surface, m (increasing along L).
    values : array_like, shape (n, L)
        Per-layer values (e.g. log10 resistivity).
    depth : array_like, shape (S,) or (n, S)
        Depths below the surface, m; negative depths give NaN.

    Returns
    -------
    ndarray, shape (n, S)
    """
    top = np.atleast_2d(np.asarray(depth_top, float))
    val = np.atleast_2d(np.asarray(values, float))
    n = top.shape[0]
    d = np.asarray(depth, float)
    d = np.broadcast_to(d, (n, d.shape[-1])) if d.ndim == 1 else d
    out = np.full(d.shape, np.nan)
    for i in range(n):
        ok = np.isfinite(top[i]) & np.isfinite(val[i])
        if not ok.any():
            continue
        t = top[i, ok]
        k = np.searchsorted(t, d[i], side="right") - 1
        good = (k >= 0) & (d[i] >= 0)
        out[i, good] = val[i, ok][k[good]]
    return out


def _lateral_weights(station_s, positions, lateral, max_gap):
    """Left index, right index and right weight for each position."""
    s = np.asarray(station_s, float)
    p = np.asarray(positions, float)
    if lateral not in LATERAL:
        raise input_error("lateral", f"unknown interpolation {lateral!r}; valid: {', '.join(LATERAL)}")
    n = s.size
    if n == 1:
        left = right = np.zeros(p.size, int)
        w = np.zeros(p.size)
        inside = np.isclose(p, s[0], rtol=0, atol=1e-6) if lateral == "linear" else np.ones(p.size, bool)
        return left, right, w, inside
    right = np.clip(np.searchsorted(s, p, side="right"), 1, n - 1)
    left = right - 1
    gap = s[right] - s[left]
    w = (p - s[left]) / gap
    at_station = np.isclose(p[:, None], s[None, :], rtol=0, atol=1e-6).any(axis=1)
    if lateral == "linear":
        inside = (w >= 0) & (w <= 1)
    else:
        # Nearest: each station holds up to the midpoint; the end stations
        # hold half the adjacent spacing beyond themselves.
        w = np.where(w < 0.5, 0.0, 1.0)
        half_first = 0.5 * (s[1] - s[0])
        half_last = 0.5 * (s[-1] - s[-2])
        inside = (p >= s[0] - half_first) & (p <= s[-1] + half_last)
    if max_gap is not None:
        inside &= (gap <= max_gap) | at_station
    return left, right, np.clip(w, 0.0, 1.0), inside


def stitch_grid(station_s, depth_top, log10_res, doi, positions, depth, lateral, max_gap=None):
    """Grid of log10 resistivity along a profile from per-station layered models.

    Parameters
    ----------
    station_s : array_like, shape (n,)
        Station chainages, m, strictly increasing.
    depth_top : array_like, shape (n, L)
        Layer tops, m below surface.
    log10_res : array_like, shape (n, L)
        log10 of layer resistivity, log10(ohm-m).
    doi : array_like, shape (n,)
        Depth of investigation, m below surface (NaN: unknown, nothing masked).
    positions : array_like, shape (P,)
        Chainages of the grid columns, m.
    depth : array_like, shape (S,) or (P, S)
        Depths below surface of the samples, m (per column when 2-D).
    lateral : {"linear", "nearest"}
        Interpolation between stations (in log10 resistivity and in DOI).
    max_gap : float or None
        Leave columns empty (NaN) between stations farther apart than this, m.

    Returns
    -------
    value : ndarray, shape (P, S)
        log10 resistivity, NaN outside the stations' reach.
    below_doi : ndarray of bool, shape (P, S)
        True where the sample is deeper than the interpolated DOI.
    doi_p : ndarray, shape (P,)
        DOI interpolated at each column, m.
    """
    s = np.asarray(station_s, float)
    if s.ndim != 1 or s.size == 0:
        raise input_error("station", "no stations to stitch")
    if s.size > 1 and np.any(np.diff(s) <= 0):
        raise input_error("chainage", "station chainages must be strictly increasing "
                                      "(two stations project onto the same point?)")
    p = np.asarray(positions, float)
    d = np.asarray(depth, float)
    d2 = np.broadcast_to(d, (p.size, d.shape[-1]))
    left, right, w, inside = _lateral_weights(s, p, lateral, max_gap)
    top = np.asarray(depth_top, float)
    lr = np.asarray(log10_res, float)
    v_left = layer_values(top[left], lr[left], d2)
    v_right = layer_values(top[right], lr[right], d2)
    value = (1.0 - w)[:, None] * v_left + w[:, None] * v_right
    value[~inside] = np.nan
    doi = np.asarray(doi, float)
    doi_p = (1.0 - w) * doi[left] + w * doi[right]
    doi_p[~inside] = np.nan
    below = d2 > doi_p[:, None]  # NaN DOI compares False: nothing flagged
    return value, below, doi_p


def default_max_depth(doi, depth_top, factor=1.25):
    """Default bottom of a section: ``factor`` times the deepest DOI, m.

    The factor 1.25 shows a band below the DOI (common practice, no source).
    Without any finite DOI, 1.1 times the deepest layer top.
    """
    doi = np.asarray(doi, float)
    if np.isfinite(doi).any():
        return float(factor * np.nanmax(doi))
    return float(1.1 * np.nanmax(np.asarray(depth_top, float)))


def _depth_setting_doi(models, idx, doi):
    """The DOIs that set a section's default depth: those of models that are not a misfit
    (a misfit's DOI means nothing; one of 8.8 km made a 22 km section of a 2 km survey),
    unless every model is one."""
    from ..invert.verdict import CODES

    if "verdict_code" not in models.variables:
        return doi
    ok = np.asarray(models["verdict_code"].values).astype(int)[idx] != CODES["misfit"]
    return doi[ok] if np.isfinite(doi[ok]).any() else doi


def stitch_models(models, depth_step, *, order, lateral, vertical, max_depth=None, positions=None,
                  line=None, max_gap=None, depth=None):
    """Section grid (chainage x depth) of log10 resistivity from a models Dataset.

    Parameters
    ----------
    models : xarray.Dataset
        Models file contents (docs/data-model.md), dims ``station``, ``layer``.
    depth_step : float
        Vertical sample interval, m.
    max_depth : float or None
        Section bottom, m below the surface (``vertical="depth"``) or below
        the highest station (``vertical="elevation"``); default
        :func:`default_max_depth`.
    positions : array_like or None
        Column chainages, m; default one column per station.
    line : tuple (line_x, line_y) or None
        Profile polyline, m; default the polyline through the stations in
        ``order``.
    order : {"given", "principal"}
        Station order for the default polyline (see :func:`station_line`).
    lateral, max_gap
        See :func:`stitch_grid`.
    vertical : {"depth", "elevation"}
        ``"depth"``: samples at depths below each station's surface.
        ``"elevation"``: samples at elevations from the highest station down
        (the models draped below the interpolated surface).
    depth : array_like or None
        Explicit sample depths below surface, m (increasing, e.g. the depths
        of regular two-way times); overrides ``depth_step`` and ``max_depth``
        and needs ``vertical="depth"``.

    Returns
    -------
    xarray.Dataset
        dims ``distance`` (columns) and ``depth`` (or ``elevation``);
        ``log10_resistivity`` (NaN below the DOI), ``log10_resistivity_full``
        (not masked), ``below_doi``, ``doi``, ``x``, ``y``, ``surface``
        per column, and per station ``station_distance``, ``station_offset``;
        with verdicts in ``models``, ``verdict_code`` and ``chi2`` per column
        and ``station_verdict_code``, ``station_verdict``, ``station_chi2``;
        with evening QC verdicts in ``models``, ``qc_verdict_code`` per column
        and ``station_qc_verdict_code``, ``station_qc_verdict``; with
        posterior interval verdicts, ``interval_verdict_code`` per column and
        ``station_interval_verdict_code``, ``station_interval_verdict``
        (:mod:`tem.section.verdicts`).
    """
    import xarray as xr

    if depth is None and not depth_step > 0:
        raise input_error("depth_step", f"must be positive, got {depth_step}")
    if depth is not None and vertical != "depth":
        raise input_error("vertical", "explicit sample depths need vertical='depth'")
    if vertical not in ("depth", "elevation"):
        raise input_error("vertical", f"unknown reference {vertical!r}; valid: depth, elevation")
    sx = models["x"].values.astype(float)
    sy = models["y"].values.astype(float)
    sz = models["z"].values.astype(float)
    if line is None:
        lx, ly, _ = station_line(sx, sy, order)
        if lx.size == 1:
            lx, ly = np.array([lx[0], lx[0] + 1.0]), np.array([ly[0], ly[0]])
    else:
        lx, ly = np.asarray(line[0], float), np.asarray(line[1], float)
    chain, offset = polyline_chainage(sx, sy, lx, ly)
    idx = np.argsort(chain, kind="stable")
    top = models["depth_top"].values.astype(float)[idx]
    res = models["resistivity"].values.astype(float)[idx]
    with np.errstate(divide="ignore", invalid="ignore"):
        lr = np.where(res > 0, np.log10(res), np.nan)
    doi = models["doi"].values.astype(float)[idx]
    s_sorted = chain[idx]
    pos = s_sorted if positions is None else np.asarray(positions, float)
    if depth is not None:
        axis = np.asarray(depth, float)
    else:
        if max_depth is None:
            max_depth = default_max_depth(_depth_setting_doi(models, idx, doi), top)
        if not max_depth > 0:
            raise input_error("max_depth", f"must be positive, got {max_depth}")
        nz = int(np.floor(max_depth / depth_step + 1e-9)) + 1
        if nz > MAX_SAMPLES or nz * max(len(pos), 1) > MAX_GRID:
            raise input_error("depth_step", f"{nz} samples per column over {max_depth:g} m (at "
                              f"most {MAX_SAMPLES} and {MAX_GRID} in the section); choose a "
                              "larger depth_step or a smaller max_depth")
        axis = np.arange(nz) * depth_step
    surface = np.interp(pos, s_sorted, sz[idx])
    if vertical == "depth":
        depth = axis
        vname, vcoord = "depth", axis
    else:
        top_elev = float(np.nanmax(sz))
        elev = top_elev - axis
        depth = surface[:, None] - elev[None, :]
        vname, vcoord = "elevation", elev
    value, below, doi_p = stitch_grid(s_sorted, top, lr, doi, pos, depth, lateral, max_gap)
    px, py = points_at_chainage(lx, ly, pos)
    station_ids = models["station"].values[idx] if "station" in models.coords else idx
    ds = xr.Dataset(
        {
            "log10_resistivity": (("distance", vname), np.where(below, np.nan, value),
                                  {"units": "log10(ohm-m)", "long_name": "log10 resistivity, NaN below DOI"}),
            "log10_resistivity_full": (("distance", vname), value,
                                       {"units": "log10(ohm-m)", "long_name": "log10 resistivity, not masked"}),
            "below_doi": (("distance", vname), below, {"long_name": "sample deeper than the DOI"}),
            "doi": ("distance", doi_p, {"units": "m", "long_name": "depth of investigation"}),
            "x": ("distance", px, {"units": "m"}),
            "y": ("distance", py, {"units": "m"}),
            "surface": ("distance", surface, {"units": "m", "long_name": "surface elevation"}),
            "station_distance": ("station", s_sorted, {"units": "m"}),
            "station_offset": ("station", offset[idx], {"units": "m", "long_name": "distance off the line"}),
            "line_x": ("vertex", lx, {"units": "m"}),
            "line_y": ("vertex", ly, {"units": "m"}),
        },
        coords={
            "distance": ("distance", pos, {"units": "m", "long_name": "distance along profile"}),
            vname: (vname, vcoord, {"units": "m"}),
            "station": ("station", np.asarray(station_ids).astype(str)),
        },
        attrs={
            "depth_step": float(depth_step) if depth_step else float("nan"),
            "lateral": lateral,
            "vertical": vertical,
            "epsg": int(models.attrs.get("epsg", 0) or 0),
            "model_kind": str(models.attrs.get("model_kind", "")),
        },
    )
    from .verdicts import add_section_intervals, add_section_qc, add_section_verdicts
    weights = _lateral_weights(s_sorted, pos, lateral, max_gap)[:3]
    add_section_verdicts(ds, models, idx, *weights)
    add_section_qc(ds, models, idx, *weights)
    add_section_intervals(ds, models, idx, *weights)
    return ds


# ---------------------------------------------------------------- pseudo-sections
def pseudo_section_grid(station_s, abscissa, rhoa, positions, axis, lateral, log_axis=True,
                        max_gap=None):
    """Grid apparent resistivity along a profile.

    Each station's curve is interpolated in log10(rho_a) against log10 of
    its abscissa (time or pseudo-depth; linear abscissa if ``log_axis`` is
    False) onto ``axis``, without extrapolation beyond the station's own
    range; then the stations are interpolated laterally as in
    :func:`stitch_grid`.

    Parameters
    ----------
    station_s : array_like, shape (n,)
        Station chainages, m, strictly increasing.
    abscissa : sequence of n arrays
        Per station gate times, s, or pseudo-depths, m.
    rhoa : sequence of n arrays
        Per station apparent resistivity, ohm-m (non-positive or NaN values
        are dropped).
    positions : array_like, shape (P,)
        Column chainages, m.
    axis : array_like, shape (S,)
        Grid abscissa (s or m).

    Returns
    -------
    ndarray, shape (P, S)
        log10 apparent resistivity, NaN where no data reach.
    """
    s = np.asarray(station_s, float)
    if len(abscissa) != s.size or len(rhoa) != s.size:
        raise input_error("rhoa", "need one abscissa array and one rho_a array per station")
    if s.size > 1 and np.any(np.diff(s) <= 0):
        raise input_error("chainage", "station chainages must be strictly increasing")
    ax = np.asarray(axis, float)
    fx = np.log10 if log_axis else (lambda v: v)
    per = np.full((s.size, ax.size), np.nan)
    for i, (t, r) in enumerate(zip(abscissa, rhoa)):
        t = np.asarray(t, float)
        r = np.asarray(r, float)
        ok = np.isfinite(t) & np.isfinite(r) & (r > 0) & ((t > 0) if log_axis else True)
        if ok.sum() == 0:
            continue
        order = np.argsort(t[ok])
        tt, rr = fx(t[ok][order]), np.log10(r[ok][order])
        if tt.size == 1:
            per[i] = np.where(np.isclose(fx(ax), tt[0]), rr[0], np.nan)
            continue
        per[i] = np.interp(fx(ax), tt, rr, left=np.nan, right=np.nan)
    left, right, w, inside = _lateral_weights(s, np.asarray(positions, float), lateral, max_gap)
    out = (1.0 - w)[:, None] * per[left] + w[:, None] * per[right]
    out[~inside] = np.nan
    return out


# ---------------------------------------------------------------- depth to time
def check_velocity_table(depth, velocity, file=None):
    """Check an interval-velocity table and return it as float arrays.

    Row i gives the interval velocity (m/s) from ``depth[i]`` down to
    ``depth[i+1]``; the last velocity holds below the last depth. The first
    depth must be 0 (the surface), depths strictly increasing, velocities
    finite and positive. Errors name ``file`` and the field.
    """
    z = np.asarray(depth, float)
    v = np.asarray(velocity, float)
    if z.ndim != 1 or z.size == 0 or z.shape != v.shape:
        raise input_error("depth_m", "velocity table needs one or more rows of depth_m, vp_m_per_s", file)
    if not np.all(np.isfinite(z)):
        raise input_error("depth_m", "non-numeric or missing depth", file)
    if z[0] != 0.0:
        raise input_error("depth_m", f"first depth must be 0 (the surface), got {z[0]:g}", file)
    if np.any(np.diff(z) <= 0):
        k = int(np.argmax(np.diff(z) <= 0)) + 1
        raise input_error("depth_m", f"depths must increase strictly (row {k + 1}: {z[k]:g})", file)
    if not np.all(np.isfinite(v)) or np.any(v <= 0):
        k = int(np.argmax(~(np.isfinite(v) & (v > 0))))
        raise input_error("vp_m_per_s", f"velocity must be positive (row {k + 1}: {v[k]:g})", file)
    return z, v


def depth_to_twt(depth, table_depth, table_velocity):
    """Two-way vertical travel time to given depths through interval velocities.

    t(z) = 2 * sum_i h_i(z) / v_i, with h_i(z) the part of interval i above z.

    Parameters
    ----------
    depth : array_like
        Depths below surface, m (>= 0).
    table_depth, table_velocity : array_like, shape (k,)
        Interval tops, m (first 0, increasing), and velocities, m/s.

    Returns
    -------
    ndarray
        Two-way time, s.
    """
    z0, v = check_velocity_table(table_depth, table_velocity)
    z = np.asarray(depth, float)
    bottom = np.append(z0[1:], np.inf)
    h = np.clip(z[..., None] - z0, 0.0, None)
    h = np.minimum(h, bottom - z0)
    return 2.0 * np.sum(h / v, axis=-1)


def twt_to_depth(twt, table_depth, table_velocity):
    """Depth reached at a given two-way time (inverse of :func:`depth_to_twt`).

    Parameters
    ----------
    twt : array_like
        Two-way time, s (>= 0).
    table_depth, table_velocity : array_like
        Interval velocity table, m and m/s.

    Returns
    -------
    ndarray
        Depth below surface, m.
    """
    z0, v = check_velocity_table(table_depth, table_velocity)
    t0 = depth_to_twt(z0, z0, v)
    t = np.asarray(twt, float)
    k = np.clip(np.searchsorted(t0, t, side="right") - 1, 0, z0.size - 1)
    return z0[k] + 0.5 * (t - t0[k]) * v[k]


def read_line_csv(path):
    """Polyline vertices from a CSV with columns ``x``, ``y`` (m).

    Refused with one line naming the file and the line: non-UTF-8 bytes, NUL
    characters, a missing column, text where a number belongs, a coordinate
    beyond 1e8 m, fewer than two or more than 100000 vertices.
    """
    from ..io import checks

    path = Path(path)
    rows = checks.csv_rows(checks.read_text(path, "line"), path, ("x", "y"), field="line",
                           max_rows=100_000)
    lim = checks.LIMITS["coordinate"]
    xs = [checks.number(r["x"], f"line {k}: x", path, parse_text=True, maximum=lim)
          for k, r in rows]
    ys = [checks.number(r["y"], f"line {k}: y", path, parse_text=True, maximum=lim)
          for k, r in rows]
    if len(xs) < 2:
        raise input_error("line", "a polyline needs at least two vertices", path)
    lines = [k for k, _ in rows]
    for i in range(1, len(xs)):
        if xs[i] == xs[i - 1] and ys[i] == ys[i - 1]:
            raise input_error(f"line {lines[i]}: x, y", f"same vertex as line {lines[i - 1]} "
                              "(two consecutive vertices coincide)", path)
    return np.array(xs), np.array(ys)
