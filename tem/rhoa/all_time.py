"""All-time apparent resistivity: the half-space that reproduces each datum.

For each gate the half-space resistivity whose full response (same geometry,
waveform, ramps, gate windows and receiver filter, from :mod:`tem.forward`)
equals the datum. The response of a half-space is not monotonic in
resistivity for E and dB/dt (Spies & Eggers 1986, "The use and misuse of
apparent resistivity in electromagnetic methods", Geophysics 51(7)), so a
gate may have two roots: both are returned, the gate is flagged, and one
curve is chosen as the smoothest path through the roots.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import input_error
from .late_time import FLAGS

__all__ = ["halfspace_match", "halfspace_table", "rho_grid", "all_time_rhoa", "choose_branches",
           "AllTimeResult"]


# --------------------------------------------------------------- all-time
@dataclass(frozen=True)
class AllTimeResult:
    """All-time apparent resistivity (arrays shaped like the data).

    Attributes
    ----------
    rho : ndarray
        Chosen branch, ohm-m (NaN where no root).
    rho_low, rho_high : ndarray
        Smallest and largest root, ohm-m (equal to ``rho`` where unique).
    n_roots : ndarray of int
        Number of half-spaces that reproduce the datum in the search range.
    rel_error : ndarray
        One standard error of the chosen rho relative to rho, from the gate
        error through d ln(datum)/d ln(rho) at the root (linearised), -.
    slope : ndarray
        d ln(response)/d ln(rho) at the chosen root, -.
    flags : ndarray of int
        Bit flags (:data:`FLAGS`).
    """

    rho: np.ndarray
    rho_low: np.ndarray
    rho_high: np.ndarray
    n_roots: np.ndarray
    rel_error: np.ndarray
    slope: np.ndarray
    flags: np.ndarray


def _unique_sorted(x, tol=1e-9):
    x = np.sort(np.asarray(x, float))
    if x.size < 2:
        return x
    return x[np.concatenate([[True], np.diff(x) > tol])]


def _peak_root(spline, tol):
    """The extremum of ``spline`` (q = response/datum - 1) closest to zero, if within ``tol``.

    A datum at the maximum of a non-monotonic response (the two branches
    merge) may lie a hair beyond the interpolated maximum; within the
    interpolation tolerance or the datum's relative error it is taken as the
    double root.
    """
    ext = spline.derivative().solve(0.0, extrapolate=False)
    if ext.size == 0:
        return np.empty(0), np.empty(0)
    q = np.abs(spline(ext))
    i = int(np.argmin(q))
    if q[i] > tol:
        return np.empty(0), np.empty(0)
    return ext[i:i + 1], np.zeros(1)


def halfspace_match(rho_grid, table, value, error=None, slope_table=None, peak_tol=1e-3):
    """Half-spaces that reproduce each datum, from a table of responses.

    The response of each datum's half-space is interpolated in ln(rho) by a
    cubic spline of response/datum - 1 (not-a-knot), and all its roots in the
    table range are returned: one on a monotonic stretch, two (or more) where
    the response has a maximum (Spies & Eggers 1986, from memory). With 16
    resistivities per decade the interpolation error of a smooth half-space
    response is below 1e-4 (measured in tests/test_rhoa.py).

    Parameters
    ----------
    rho_grid : array_like, shape (n_rho,)
        Increasing resistivities, ohm-m.
    table : array_like, shape (n_rho, ...)
        Half-space responses at ``rho_grid`` for every datum (same unit as
        ``value``); the trailing axes match ``value``, the last one is gates.
    value : array_like
        Data.
    error : array_like, optional
        One standard error of the data.
    slope_table : array_like, optional
        d(response)/d ln(rho) at ``rho_grid``, same shape as ``table``; with
        it the interpolation is a cubic Hermite spline (value and slope at
        every node) instead of a not-a-knot spline.
    peak_tol : float
        A datum beyond the extreme half-space response by at most this
        fraction (or by its own relative error, if larger) is matched to the
        extremum (double root, flagged ``two-branches``), -.

    Returns
    -------
    AllTimeResult
    """
    from scipy.interpolate import CubicHermiteSpline, CubicSpline

    rho_grid = np.asarray(rho_grid, float)
    if rho_grid.ndim != 1 or rho_grid.size < 4 or np.any(np.diff(rho_grid) <= 0) or rho_grid[0] <= 0:
        raise input_error("rho_grid", "needs at least 4 increasing positive resistivities")
    value = np.asarray(value, float)
    table = np.asarray(table, float)
    if table.shape != (rho_grid.size,) + value.shape:
        raise input_error("table", f"shape {table.shape} does not match {(rho_grid.size,) + value.shape}")
    err = np.zeros(value.shape) if error is None else np.broadcast_to(np.asarray(error, float), value.shape)
    shape = value.shape if value.ndim else (1,)
    v = value.reshape(-1)
    e = err.reshape(-1)
    tab = table.reshape(rho_grid.size, -1)
    dtab = None
    if slope_table is not None:
        dtab = np.asarray(slope_table, float)
        if dtab.shape != table.shape:
            raise input_error("slope_table", f"shape {dtab.shape} does not match {table.shape}")
        dtab = dtab.reshape(rho_grid.size, -1)
    x = np.log(rho_grid)
    flags = np.zeros(v.size, np.int64)
    peak = np.zeros(v.size, bool)
    curv = np.full(v.size, np.nan)
    roots, slopes = [], []
    for k in range(v.size):
        rk, sk = np.empty(0), np.empty(0)
        if not np.isfinite(v[k]) or v[k] == 0 or not np.isfinite(e[k]) or e[k] < 0:
            flags[k] |= FLAGS["bad-value"]
        elif not np.all(np.isfinite(tab[:, k])):
            flags[k] |= FLAGS["no-root"]
        elif np.all(tab[:, k] * v[k] <= 0):
            flags[k] |= FLAGS["wrong-sign"]
        else:
            if dtab is None:
                spline = CubicSpline(x, tab[:, k] / v[k] - 1.0)
            else:
                spline = CubicHermiteSpline(x, tab[:, k] / v[k] - 1.0, dtab[:, k] / v[k])
            rk = _unique_sorted(spline.solve(0.0, extrapolate=False))
            sk = spline(rk, 1)
            if rk.size == 0:
                rk, sk = _peak_root(spline, max(peak_tol, e[k] / abs(v[k])))
                if rk.size:
                    peak[k] = True
            if rk.size == 0:
                flags[k] |= FLAGS["no-root"]
            elif rk.size > 1 or peak[k]:
                flags[k] |= FLAGS["two-branches"]
        if peak[k]:
            curv[k] = float(spline(rk[0], 2))
        roots.append(rk)
        slopes.append(sk)
    n_roots = np.array([r.size for r in roots])
    low = np.array([np.exp(r[0]) if r.size else np.nan for r in roots])
    high = np.array([np.exp(r[-1]) if r.size else np.nan for r in roots])
    # Choose one root per datum: smoothest path along the gate (last) axis.
    n_gates = shape[-1]
    chosen = np.full(v.size, -1)
    for start in range(0, v.size, n_gates):
        sl = slice(start, start + n_gates)
        # gates with signal-to-noise below 2 do not steer the branch choice
        weak = ~(np.abs(v[sl]) > 2.0 * np.abs(e[sl]))
        mismatch = _decay_mismatch(x, tab[:, sl], v[sl], roots[sl])
        chosen[sl] = choose_branches(roots[sl], weak, mismatch)
    rho = np.full(v.size, np.nan)
    slope = np.full(v.size, np.nan)
    for k, c in enumerate(chosen):
        if c >= 0:
            rho[k] = np.exp(roots[k][c])
            slope[k] = slopes[k][c]
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.abs(e) / np.abs(v) / np.abs(slope)
        # At a peak the first-order error is infinite; use the curvature:
        # q(x) ~ q'' dx^2 / 2 = sigma  =>  dx = sqrt(2 sigma / |q''|).
        rel[peak] = np.sqrt(2 * np.abs(e[peak]) / np.abs(v[peak]) / np.abs(curv[peak]))
    out = [a.reshape(shape) for a in (rho, low, high, n_roots, rel, slope, flags)]
    return AllTimeResult(*out)


def _gate_steps(y):
    """Centred differences along the last axis (one-sided at the ends)."""
    d = np.empty_like(y)
    d[..., 1:-1] = 0.5 * (y[..., 2:] - y[..., :-2])
    d[..., 0] = y[..., 1] - y[..., 0]
    d[..., -1] = y[..., -1] - y[..., -2]
    return d


def _decay_mismatch(x, tab, v, roots):
    """Per gate and root: |observed - half-space| change of ln|response| per gate step.

    On each side of a response maximum a half-space decays differently (for
    example E_x is nearly flat on the early-time side and falls as t^-3/2 on
    the late-time side), so comparing the data's own decay with the decay of
    each candidate half-space tells the branches apart where smoothness alone
    cannot. Gates with fewer than two neighbours or a sign change give 0.
    """
    n = v.size
    out = [np.zeros(len(r)) for r in roots]
    if n < 2:
        return out
    with np.errstate(divide="ignore", invalid="ignore"):
        obs = _gate_steps(np.log(np.abs(v)))
        hs = _gate_steps(np.log(np.abs(tab)))                     # (n_rho, n_gates)
    for k, r in enumerate(roots):
        if len(r) == 0 or not np.isfinite(obs[k]):
            continue
        col = hs[:, k]
        ok = np.isfinite(col)
        if ok.sum() < 2:
            continue
        out[k] = np.abs(obs[k] - np.interp(np.asarray(r), x[ok], col[ok]))
    return out


def choose_branches(roots, weak=None, mismatch=None):
    n = len(roots)
    weak = np.zeros(n, bool) if weak is None else np.asarray(weak, bool)
    has = [i for i, r in enumerate(roots) if len(r)]
    chosen = np.full(n, -1)
    if not has:
        return chosen
    idx = [i for i in has if not weak[i]] or has
    extra = (lambda i: 0.0) if mismatch is None else (lambda i: np.asarray(mismatch[i], float))
    cost = np.zeros(len(roots[idx[0]])) + extra(idx[0])
    back = []
    for prev, cur in zip(idx[:-1], idx[1:]):
        step = np.abs(np.asarray(roots[cur])[:, None] - np.asarray(roots[prev])[None, :]) + cost[None, :]
        back.append(np.argmin(step, axis=1))
        cost = np.min(step, axis=1) + extra(cur)
    c = int(np.argmin(cost))
    chosen[idx[-1]] = c
    for pos in range(len(idx) - 1, 0, -1):
        c = int(back[pos - 1][c])
        chosen[idx[pos - 1]] = c
    on_path = np.array(idx)
    for i in has:
        if chosen[i] < 0:
            j = on_path[np.argmin(np.abs(on_path - i))]
            chosen[i] = int(np.argmin(np.abs(np.asarray(roots[i]) - roots[j][chosen[j]])))
    return chosen


def halfspace_table(sim, rho_grid, progress=None):
    """Half-space responses and their ln(rho) slopes for a Simulation.

    Parameters
    ----------
    sim : tem.forward.Simulation
        The data's simulation: geometry, waveform, ramps, gates, filter.
    rho_grid : array_like, shape (n_rho,)
        Resistivities, ohm-m.
    progress : callable, optional
        Called with no argument after each resistivity.

    Returns
    -------
    table, slope : ndarray, shape (n_rho, n_receivers, n_gates)
        Responses (per ampere, SI) and d response / d ln(rho).
    """
    from ..forward import LayeredModel

    rho_grid = np.asarray(rho_grid, float)
    table = slope = None
    for i, rho in enumerate(rho_grid):
        d, jac = sim.jacobian(LayeredModel(thickness=[], resistivity=[float(rho)]))
        if table is None:
            table = np.empty((rho_grid.size,) + d.shape)
            slope = np.empty_like(table)
        table[i] = d
        slope[i] = jac[..., 0]
        if progress is not None:
            progress()
    return table, slope


def rho_grid(rho_min, rho_max, points_per_decade):
    """Log-spaced resistivities for the all-time search, ohm-m."""
    if not (0 < rho_min < rho_max) or not np.isfinite(rho_max):
        raise input_error("rho_range", "needs 0 < minimum < maximum (ohm-m)")
    if points_per_decade < 2:
        raise input_error("points_per_decade", "needs at least 2")
    n = int(np.ceil(np.log10(rho_max / rho_min) * points_per_decade)) + 1
    return np.logspace(np.log10(rho_min), np.log10(rho_max), n)


def all_time_rhoa(sim, value, error=None, *, rho_min, rho_max, points_per_decade, progress=None):
    """All-time apparent resistivity: the half-space that reproduces each datum.

    The half-space response of ``sim`` (the same geometry, waveform, ramps,
    gates and receiver filter as the data) and its slope are tabulated on a
    log grid of resistivities and matched per datum by
    :func:`halfspace_match` (all roots, flags, smoothest branch).

    Parameters
    ----------
    sim : tem.forward.Simulation
        Simulation of the data (e.g. ``Simulation.from_sounding(ds)``).
    value : array_like, shape (n_receivers, n_gates)
        Data per ampere (V/m, T, T/s).
    error : array_like, optional
        One standard error of the data.
    rho_min, rho_max : float
        Search range, ohm-m.
    points_per_decade : int
        Grid density.
    progress : callable, optional
        Called after each grid resistivity.

    Returns
    -------
    AllTimeResult
    """
    grid = rho_grid(rho_min, rho_max, points_per_decade)
    value = np.asarray(value, float)
    table, slope = halfspace_table(sim, grid, progress)
    if table.shape[1:] != value.shape:
        raise input_error("value", f"shape {value.shape} does not match the simulation's "
                          f"{table.shape[1:]} (receivers, gates)")
    return halfspace_match(grid, table, value, error, slope_table=slope)
