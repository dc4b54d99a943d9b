"""Laterally constrained inversion (LCI) of a profile of 1D soundings.

After Auken & Christiansen (2004), "Layered and laterally constrained 2D
inversion of resistivity data", Geophysics 69(3), 752-761: every station keeps
its own 1D model, all stations are inverted together, and neighbours are tied
by constraints on parameter differences. Here each station's model is the
smooth many-layer model of :mod:`tem.invert.smooth` on one shared mesh; the
joint model vector is ``m = [m_0, m_1, ...]`` (ln rho per station and layer).

Objective: ``chi2_total + mu (||R_v m||^2 + lam ||R_l m||^2)`` where ``R_v``
holds each station's vertical first differences, ``R_l`` the lateral
differences ``m_{s+1,k} - m_{s,k}`` of every layer between neighbouring
stations (rows scaled by ``sqrt(spacing_median / spacing)`` so that closer
neighbours are tied harder), and ``lam`` the lateral-to-vertical weight
ratio. The data Jacobian is block diagonal. ``mu`` is chosen by the same
Occam search as the single-station inversion, for a target chi-square per
datum over the whole profile. Everything is assembled and solved with
``scipy.sparse``.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import sparse

from .smooth import OccamResult, occam, roughness_matrix

__all__ = ["lateral_roughness", "lci_operator", "LCIResult", "lci"]


def lateral_roughness(n_stations: int, n_layers: int, positions=None) -> sparse.csr_matrix:
    """Lateral first differences between neighbouring stations, every layer.

    Parameters
    ----------
    n_stations, n_layers : int
    positions : array (n_stations,), m, optional
        Distance along the profile; rows are scaled by
        ``sqrt(median spacing / spacing)``.
    """
    S, M = n_stations, n_layers
    if S < 2:
        return sparse.csr_matrix((0, S * M))
    w = np.ones(S - 1)
    if positions is not None:
        gaps = np.abs(np.diff(np.asarray(positions, float)))
        if np.any(gaps <= 0):
            raise ValueError("station positions: neighbours must be at distinct positions")
        w = np.sqrt(np.median(gaps) / gaps)
    rows, cols, vals = [], [], []
    r = 0
    for s in range(S - 1):
        for k in range(M):
            rows += [r, r]
            cols += [s * M + k, (s + 1) * M + k]
            vals += [-w[s], w[s]]
            r += 1
    return sparse.csr_matrix((vals, (rows, cols)), shape=(r, S * M))


def lci_operator(n_stations, n_layers, lateral_weight, positions=None):
    """Stacked sparse regularisation operator ``[R_v; sqrt(lam) R_l]``."""
    Rv = sparse.block_diag([sparse.csr_matrix(roughness_matrix(n_layers))] * n_stations,
                           format="csr")
    Rl = lateral_roughness(n_stations, n_layers, positions)
    return sparse.vstack([Rv, np.sqrt(lateral_weight) * Rl], format="csr")


@dataclass
class LCIResult:
    """Per-station models of a laterally constrained inversion.

    Attributes
    ----------
    m : ndarray (S, M)
        ln(rho) per station and layer.
    chi2_station : ndarray (S,)
        Chi-square per datum of each station.
    J : list of ndarray
        Per-station Jacobians at the solution (for DOI).
    d_pred : list of ndarray
    occam : OccamResult
        The joint Occam run (joint chi2, mu, history).
    """

    m: np.ndarray
    chi2_station: np.ndarray
    J: list
    d_pred: list
    occam: OccamResult
    history: list = field(default_factory=list)


def lci(fwds, d_obs, std, m0, *, lateral_weight, target, max_iter, misfit_drop, positions=None,
        predicts=None, focusing=None, callback=None) -> LCIResult:
    """Joint smooth inversion of all stations with lateral constraints.

    Parameters
    ----------
    fwds : sequence of callables
        Per station ``fwd_s(m_s) -> (d_s, J_s)`` on the shared mesh.
    d_obs, std : sequences of ndarray
        Per station data and standard errors.
    m0 : ndarray (S, M) or (M,)
        Starting models (ln ohm-m).
    positions : array (S,), m, optional
        Position along the profile (for the lateral weights).
    lateral_weight : float
        Weight of the lateral constraints relative to the vertical roughness.
    predicts : sequence of callables, optional
        Per station ``predict_s(m_s) -> d_s``.
    focusing : float, optional
        Focusing parameter: minimum-gradient-support regularisation on the
        vertical and lateral differences alike (as in Vignoli et al. 2015;
        :func:`tem.invert.smooth.focusing_operator`); None: smooth.
    """
    S = len(fwds)
    if not (len(d_obs) == len(std) == S):
        raise ValueError("lci: need the same number of stations in fwds, d_obs and std")
    m0 = np.asarray(m0, float)
    if m0.ndim == 1:
        m0 = np.tile(m0, (S, 1))
    M = m0.shape[1]
    sizes = [np.asarray(d).size for d in d_obs]
    splits = np.cumsum(sizes)[:-1]
    if predicts is None:
        predicts = [None] * S

    def fwd(m):
        parts = [f(m[s * M:(s + 1) * M]) for s, f in enumerate(fwds)]
        d = np.concatenate([p[0] for p in parts])
        J = sparse.block_diag([sparse.csr_matrix(p[1]) for p in parts], format="csr")
        return d, J

    def predict(m):
        out = []
        for s in range(S):
            ms = m[s * M:(s + 1) * M]
            out.append(predicts[s](ms) if predicts[s] is not None else fwds[s](ms)[0])
        return np.concatenate(out)

    R = lci_operator(S, M, lateral_weight, positions)
    d_all = np.concatenate([np.asarray(d, float) for d in d_obs])
    s_all = np.concatenate([np.asarray(s, float) for s in std])
    res = occam(fwd, d_all, s_all, m0.ravel(), R, predict=predict, target=target,
                max_iter=max_iter, misfit_drop=misfit_drop, focusing=focusing, callback=callback)
    m = res.m.reshape(S, M)
    d_parts = np.split(res.d_pred, splits)
    J = res.J.tocsr()
    Js, chis, row = [], [], 0
    for s in range(S):
        n = sizes[s]
        Js.append(J[row:row + n, s * M:(s + 1) * M].toarray())
        r = (np.asarray(d_obs[s]) - d_parts[s]) / np.asarray(std[s])
        chis.append(float(r @ r / n))
        row += n
    return LCIResult(m=m, chi2_station=np.array(chis), J=Js, d_pred=d_parts, occam=res,
                     history=res.history)


def pick_depth(thickness, log_rho, rho_threshold, below=0.0, max_depth=None):
    """Depth (m) of the top of the main conductor of a smooth model.

    The most conductive point between ``below`` and ``max_depth`` (e.g. the
    DOI) anchors the search; from there upwards, the first depth where ln(rho)
    rises above ``ln(rho_threshold)`` is the top of the conductor. ln(rho) is
    interpolated linearly in depth between layer centres (the half-space is
    represented at its top). With the geometric mean of the resistivities
    above and in the conductor as threshold this picks the top of a conductor
    under a resistor (common practice, no source); anchoring at the
    conductor keeps a smeared conductive surface layer from being picked.
    NaN if the model never reaches the threshold above the conductor.
    """
    h = np.asarray(thickness, float)
    m = np.asarray(log_rho, float)
    top = np.concatenate([[0.0], np.cumsum(h)])
    zc = np.concatenate([top[:-1] + 0.5 * h, [top[-1]]])
    lt = np.log(rho_threshold)
    ok = zc >= below
    if max_depth is not None and np.isfinite(max_depth):
        ok &= zc <= max_depth
    if not ok.any():
        return float("nan")
    k0 = int(np.flatnonzero(ok)[np.argmin(m[ok])])
    if m[k0] >= lt:
        return float("nan")
    for k in range(k0, 0, -1):
        if m[k - 1] >= lt > m[k]:
            f = (m[k - 1] - lt) / (m[k - 1] - m[k])
            return float(zc[k - 1] + f * (zc[k] - zc[k - 1]))
    return float("nan")


__all__ += ["pick_depth"]
