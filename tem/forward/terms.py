"""Set-up helpers of a Simulation: receiver terms in Hankel form and log-time quadrature.

Everything here runs once when a :class:`tem.forward.Simulation` is built.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from .geometry import CircularLoop

__all__ = ["log_gauss_many", "receiver_terms"]

_TWO_PI = 2.0 * np.pi


@lru_cache(maxsize=64)
def _leggauss(n):
    return np.polynomial.legendre.leggauss(n)


def log_gauss_many(lo, hi, tag):
    """Gauss-Legendre nodes and weights for many integrals int_lo^hi f(u) du, in log u.

    Returns (u, w, (tag, offsets)): the nodes of interval i are u[offsets[i]:offsets[i+1]].
    An interval starting at 0 (a ramp still in progress) starts at min(hi 1e-6, 1e-8)
    instead; the piece below is taken as f(start) * start (one extra node).
    """
    lo = np.asarray(lo, float)
    hi = np.asarray(hi, float)
    zero = lo <= 0
    lo_eff = np.where(zero, np.minimum(hi * 1e-6, 1e-8), lo)
    span = np.log(hi / lo_eff)
    n = np.clip(np.ceil(8 * span / np.log(10.0)) + 3, 3, 40).astype(int)
    counts = n + zero
    offsets = np.r_[0, np.cumsum(counts)]
    u = np.empty(offsets[-1])
    w = np.empty(offsets[-1])
    for nn in np.unique(n):
        sel = np.flatnonzero(n == nn)
        xg, wg = _leggauss(int(nn))
        x = np.log(lo_eff[sel])[:, None] + 0.5 * (xg + 1.0)[None, :] * span[sel, None]
        uu = np.exp(x)
        ww = 0.5 * span[sel, None] * wg[None, :] * uu
        start = offsets[sel] + zero[sel]
        idx = start[:, None] + np.arange(nn)[None, :]
        u[idx] = uu
        w[idx] = ww
    zi = np.flatnonzero(zero)
    u[offsets[zi]] = lo_eff[zi]
    w[offsets[zi]] = lo_eff[zi]
    return u, w, (tag, offsets)


def receiver_terms(src, rx):
    """Hankel terms (form, R array, coefficient array) and analytic coefficients.

    Analytic coefficients: [rho_1 (galvanic DC of the top layer),
    i omega mu0 (free-space induction), constant (free-space magnetic field)].
    """
    pts_r, w_r, e = rx.sample_points()
    terms = []
    an = np.zeros(3)
    # Gauss nodes along the source, more where a receiver is close to it
    if isinstance(src, CircularLoop):
        dmin = max(src.distance_to(pts_r[0]), 1e-3 * src.radius)
        n = int(np.clip(np.ceil(64 * src.radius / dmin), 64, 2048))
    else:
        seg = src.segments
        dmin = min(seg.distance_to(p) for p in pts_r)
        n = int(np.clip(np.ceil(8 + 12 * seg.length.max() / dmin), 12, 256))
    nodes, tang, ws = src.nodes(n)
    eq, sq = src.electrodes
    for p, wr in zip(pts_r, w_r):
        Rv = p[None, :] - nodes
        R = np.hypot(Rv[:, 0], Rv[:, 1])
        ux, uy = tang[:, 0], tang[:, 1]
        if rx.kind == "e":
            ue = tang @ e
            # TE line integral: E.e = -(1/4pi) sum w (u.e) [i w mu0 F1(R)... + i w mu0 / R]
            terms.append(("F1", R, -wr * ws * ue / (4 * np.pi)))
            an[1] += -wr * np.sum(ws * ue / R) / (4 * np.pi)
            for q, sgn in zip(eq, sq):
                Rq = p - q
                r = np.hypot(*Rq)
                re_ = (Rq @ e) / r
                an[0] += wr * sgn * re_ / (_TWO_PI * r * r)
                terms.append(("F3", np.array([r]), np.array([wr * sgn * re_ / _TWO_PI])))
                terms.append(("F2", np.array([r]), np.array([-wr * sgn * re_ / (4 * np.pi)])))
        elif rx.component in ("bz", "dbzdt"):
            cross = ux * Rv[:, 1] - uy * Rv[:, 0]
            terms.append(("F4", R, wr * ws * cross / (4 * np.pi * R)))
            an[2] += wr * _biot_savart_z(src, p)
        else:
            j = 0 if rx.component == "dbxdt" else 1
            Rj = Rv[:, j]
            dxj = 1.0 if j == 0 else 0.0
            dyj = 1.0 - dxj
            cA = ws / _TWO_PI * (uy * (dxj / R - 2 * Rj * Rv[:, 0] / R ** 3)
                                 - ux * (dyj / R - 2 * Rj * Rv[:, 1] / R ** 3))
            cB = ws / _TWO_PI * (uy * Rj * Rv[:, 0] / R ** 2 - ux * Rj * Rv[:, 1] / R ** 2)
            terms.append(("F5", R, wr * cA / 2))
            terms.append(("F6", R, wr * cB / 2))
            an[2] += wr * np.sum(cA / (2 * R))
    return terms, an


def _biot_savart_z(src, p):
    """Vertical free-space field [A/m per A] at surface point p of the source's straight pieces."""
    seg = src.segments
    d = seg.p1 - seg.p0
    length = np.hypot(d[:, 0], d[:, 1])
    u = d / length[:, None]
    r0 = p - seg.p0
    s0 = -(r0 @ np.eye(2) * u).sum(axis=1)      # along-segment coordinate of p relative to p0, negated
    a = (r0 * u).sum(axis=1)                    # projection of p on the segment axis from p0
    perp = u[:, 0] * r0[:, 1] - u[:, 1] * r0[:, 0]   # (u x r0)_z
    s1 = a - length
    del s0
    # H_z = perp/(4 pi perp^2) [a/sqrt(a^2+perp^2) - s1/sqrt(s1^2+perp^2)]
    with np.errstate(divide="ignore", invalid="ignore"):
        h = (a / np.hypot(a, perp) - s1 / np.hypot(s1, perp)) / (4 * np.pi * perp)
    return float(np.sum(np.where(perp != 0, h, 0.0)))
