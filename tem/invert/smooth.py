"""Smooth (Occam) inversion on a fixed many-layer mesh.

The model vector is the natural logarithm of layer resistivity, ``m = ln rho``
(layers then the half-space). The misfit is chi-square per datum,
``chi2 = (1/N) sum ((d_i - F_i(m)) / s_i)^2`` with per-datum standard errors
``s_i``; the target is 1.

Method: Occam inversion (Constable, Parker & Constable 1987, "Occam's
inversion: a practical algorithm for generating smooth models from
electromagnetic sounding data", Geophysics 52(3), 289-300). At every
linearised step the Lagrange multiplier ``mu`` of the roughness term is
searched with the true (nonlinear) misfit: the largest ``mu`` (smoothest
model) whose misfit reaches the target is taken; while the target is out of
reach, the ``mu`` of least misfit is taken.

Everything here works on a generic forward callable ``fwd(m) -> (d, J)``
(``J = dd/dm``, shape ``(N, M)``) and an optional cheaper ``predict(m) -> d``,
so the algorithm is tested on toy problems independently of the EM kernel.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import sparse
from scipy.sparse.linalg import spsolve

__all__ = [
    "OccamResult",
    "chi2_per_datum",
    "roughness_matrix",
    "log_mesh",
    "diffusion_depth",
    "best_halfspace",
    "occam",
    "solve_regularised",
    "focusing_operator",
]

#: Bounds on ln(resistivity) during the search: 1e-3 .. 1e6 ohm-m (numerical guard only).
LN_RHO_MIN = np.log(1e-3)
LN_RHO_MAX = np.log(1e6)


def chi2_per_datum(d_obs, d_pred, std) -> float:
    """Chi-square divided by the number of data (target 1 for Gaussian errors).

    Parameters
    ----------
    d_obs, d_pred, std : array_like, shape (N,)
        Observed and predicted data and one standard error, in the data's unit.
    """
    r = (np.asarray(d_obs) - np.asarray(d_pred)) / np.asarray(std)
    return float(np.dot(r, r) / r.size)


def roughness_matrix(n: int, weights=None) -> np.ndarray:
    """First-difference operator ``R`` (shape ``(n-1, n)``), ``(R m)_k = m_{k+1} - m_k``.

    ``weights`` (length n-1) scales each row; default 1.
    """
    if n < 2:
        return np.zeros((0, max(n, 0)))
    R = np.zeros((n - 1, n))
    idx = np.arange(n - 1)
    R[idx, idx] = -1.0
    R[idx, idx + 1] = 1.0
    if weights is not None:
        R *= np.asarray(weights, float)[:, None]
    return R


def diffusion_depth(rho, t):
    """Diffusion depth ``sqrt(2 t rho / mu0)`` in m (Ward & Hohmann 1988, from memory).

    Parameters
    ----------
    rho : float or array, ohm-m
    t : float or array, s
    """
    mu0 = 4e-7 * np.pi
    return np.sqrt(2.0 * np.asarray(t, float) * np.asarray(rho, float) / mu0)


def log_mesh(n_layers: int, depth_min: float, depth_max: float) -> np.ndarray:
    """Thicknesses (m) of ``n_layers - 1`` layers above a half-space.

    The first layer is ``depth_min`` thick and thicknesses grow by a constant
    factor so that the half-space starts at ``depth_max``.
    """
    from scipy.optimize import brentq

    if n_layers < 2:
        raise ValueError("n_layers: need at least 2 (one layer over a half-space)")
    if not (0 < depth_min < depth_max) or not np.isfinite(depth_max):
        raise ValueError("mesh depth: need 0 < depth_min < depth_max")
    n = n_layers - 1
    if n == 1:
        return np.array([float(depth_max)])
    if depth_min * n >= depth_max:     # cannot grow: uniform layers
        return np.full(n, depth_max / n)

    def total(q):
        return depth_min * (q ** n - 1.0) / (q - 1.0) - depth_max

    q = brentq(total, 1.0 + 1e-9, 10.0)
    h = depth_min * q ** np.arange(n)
    return h * (depth_max / h.sum())


def best_halfspace(predict_uniform, d_obs, std, rho_range=(0.1, 1e5), where=None,
                   scale="asinh"):
    """Half-space resistivity (ohm-m) of least misfit, by grid then bounded search; returns
    (resistivity, linear chi-square per datum there).

    ``predict_uniform(ln_rho) -> d`` predicts the data of a uniform earth. The
    misfit is taken on asinh-scaled data, ``asinh(d/s)`` with errors
    ``s / sqrt(s^2 + d^2)`` (:func:`tem.invert.station.asinh_problem`: the
    logarithm of the decay where ``|d| >> s``), over the data of channels that
    keep one sign (``where``; all data when ``where`` is None): a half-space
    that over- or under-predicts a layered earth's decay by the same factor
    then costs the same. On linear data an under-prediction costs at most
    about 1/floor^2 per datum and an over-prediction without limit, so the
    search preferred a bound of the range, whose response vanishes at the
    gates: an independent review found 6 of 8 ordinary layered soundings
    started at 0.1 or 1e5 ohm-m, on a mesh sized for that resistivity, and
    ending misfit. A channel that changes sign is left out (no half-space
    reproduces it) unless every channel does, when all data are taken (still
    asinh-scaled: a grid search meets no linearisation barrier); ``scale="linear"`` takes the linear misfit of all data (the
    former rule, the second start of :func:`tem.invert.station.smooth_station`). The grid (8 points a decade) guards against the two-branch
    ambiguity of early-time E-field data (Spies & Eggers 1986); the best grid
    point is then refined with a bounded scalar search.
    """
    from scipy.optimize import minimize_scalar

    d_obs = np.asarray(d_obs, float)
    std = np.asarray(std, float)
    w = np.ones(d_obs.size, bool) if where is None else np.asarray(where, bool)
    magnitude = not w.any()
    if magnitude:
        # no channel keeps one sign (an Ex alone that reverses twice): the half-spaces are
        # ranked on the magnitudes of all data, asinh-scaled (the level of the decay; a
        # grid search meets no linearisation barrier). On linear data an independent
        # review's such station started at 0.2 ohm-m, truth 3-400, and ended misfit
        w = np.ones(d_obs.size, bool)
    if scale not in ("asinh", "linear"):
        raise ValueError(f"scale: {scale!r}, expected 'asinh' or 'linear'")
    if scale == "asinh" and w.any():
        s, d = std[w], d_obs[w]
        lvl = np.abs if magnitude else (lambda v: v)
        t_obs = np.arcsinh(lvl(d) / s)
        s_t = s / np.sqrt(s * s + d * d)

        def f(x):
            r = (np.arcsinh(lvl(np.asarray(predict_uniform(x), float)[w]) / s) - t_obs) / s_t
            return float(np.mean(r * r))
    else:
        def f(x):
            return chi2_per_datum(d_obs, predict_uniform(x), std)

    lo, hi = np.log(rho_range[0]), np.log(rho_range[1])
    grid = np.linspace(lo, hi, int(round((hi - lo) / np.log(10) * 8)) + 1)
    vals = np.array([f(x) for x in grid])
    k = int(np.argmin(vals))
    a, b = grid[max(k - 1, 0)], grid[min(k + 1, grid.size - 1)]
    res = minimize_scalar(f, bounds=(a, b), method="bounded", options={"xatol": 0.005})
    x = res.x if res.fun <= vals[k] else grid[k]
    return float(np.exp(x)), chi2_per_datum(d_obs, predict_uniform(x), std)


def focusing_operator(R0, m, beta):
    """Roughness operator of minimum-gradient-support (focusing) regularisation at ``m``.

    The stabiliser of Portniaguine & Zhdanov (1999), "Focusing geophysical
    inversion images", Geophysics 64(3), 874-887, eq. 8 (minimum gradient
    support), ``sum_k g_k^2 / (g_k^2 + beta^2)`` with ``g_k`` the difference of
    ln(rho) across row k of ``R0``, is minimised by iteratively reweighted least
    squares: at each linearised step it is replaced by ``||W R0 m||^2`` with
    ``W = diag(beta / sqrt(g_k^2 + beta^2))`` evaluated at the current model
    (their eq. 14-16, scaled by ``beta^2`` so that small differences keep the
    weight 1 of the smooth first-difference term; mu absorbs the scale). Large
    jumps cost little, so the model is pushed towards blocks with sharp
    boundaries (for TEM: Vignoli et al. 2015, "Sharp spatially constrained
    inversion with applications to transient electromagnetic data",
    Geophysical Prospecting 63, 243-255).

    Parameters
    ----------
    R0 : ndarray or sparse matrix (K, M)
        Difference operator; each row's largest absolute entry is its scale
        (spacing or lateral weights), removed before ``g_k`` is formed.
    m : ndarray (M,)
        Current model, ln(ohm-m).
    beta : float
        Focusing parameter: the ln(rho) jump at which a boundary starts to be
        cheaper than a smooth gradient (small: sharper).
    """
    if sparse.issparse(R0):
        R0 = sparse.csr_matrix(R0)
        scale = np.asarray(abs(R0).max(axis=1).todense()).ravel()
    else:
        R0 = np.asarray(R0, float)
        scale = np.abs(R0).max(axis=1) if R0.size else np.zeros(0)
    scale = np.where(scale > 0, scale, 1.0)
    g = (R0 @ m) / scale
    w = beta / np.sqrt(g * g + beta * beta)
    if sparse.issparse(R0):
        return sparse.diags(w) @ R0
    return R0 * w[:, None]


def solve_regularised(Jw, rhat, R, mu, m_ref=None, ref_weight=0.0):
    """Minimiser of ``||Jw m - rhat||^2 + mu ||R m||^2 + mu a ||m - m_ref||^2``.

    Solved as a stacked least-squares problem (better conditioned than the
    normal equations).
    """
    if sparse.issparse(Jw) or sparse.issparse(R):
        # normal equations, sparse (laterally constrained problems)
        Jw = sparse.csr_matrix(Jw)
        R = sparse.csr_matrix(R)
        n = Jw.shape[1]
        N = (Jw.T @ Jw + mu * (R.T @ R)).tocsc()
        rhs = Jw.T @ rhat
        if ref_weight > 0 and m_ref is not None:
            N = N + mu * ref_weight * sparse.identity(n, format="csc")
            rhs = rhs + mu * ref_weight * np.asarray(m_ref, float)
        return spsolve(N, rhs)
    n = Jw.shape[1]
    rows = [Jw, np.sqrt(mu) * R]
    rhs = [rhat, np.zeros(R.shape[0])]
    if ref_weight > 0 and m_ref is not None:
        rows.append(np.sqrt(mu * ref_weight) * np.eye(n))
        rhs.append(np.sqrt(mu * ref_weight) * np.asarray(m_ref, float))
    A = np.vstack(rows)
    b = np.concatenate(rhs)
    m, *_ = np.linalg.lstsq(A, b, rcond=None)
    return m


@dataclass
class OccamResult:
    """Outcome of :func:`occam`.

    Attributes
    ----------
    m : ndarray
        Final model, ln(ohm-m).
    d_pred : ndarray
        Predicted data of ``m``.
    J : ndarray
        Jacobian ``dd/dm`` at ``m`` (for DOI and uncertainty).
    chi2 : float
        Chi-square per datum of ``m``.
    mu : float
        Final Lagrange multiplier of the roughness term.
    roughness : float
        ``||R m||^2`` (with focusing: of the last reweighted operator).
    converged : bool
        Target reached and the model stopped changing.
    history : list of dict
        Per iteration: chi2, mu, roughness.
    """

    m: np.ndarray
    d_pred: np.ndarray
    J: np.ndarray
    chi2: float
    mu: float
    roughness: float
    converged: bool
    n_iter: int
    history: list = field(default_factory=list)
    message: str = ""
    R: object = None    # roughness operator of the last step (reweighted with focusing)


def _weight_rows(J, w):
    if sparse.issparse(J):
        return sparse.diags(w) @ J
    return J * w[:, None]


def _sumsq(A):
    if sparse.issparse(A):
        return float(A.multiply(A).sum())
    return float(np.sum(A * A))


def _mu_search(chi2_true, chi2_lin, mu_grid, target, chi2_now):
    """Pick ``mu``: screen a fine grid with the linearised misfit, then confirm
    with the true (nonlinear) misfit at a few values.

    The candidate is the largest mu whose linearised misfit reaches ``target``
    (else the mu of least linearised misfit). If its true misfit reaches the
    target, larger mu (smoother models) are tried while they still do; if it
    does not, smaller mu are tried while the true misfit improves.
    Returns (mu, chi2, model).
    """
    lin = np.array([chi2_lin(mu) for mu in mu_grid])
    ok = np.flatnonzero(lin <= target)
    k = int(ok.max()) if ok.size else int(np.argmin(lin))
    mu_c = float(mu_grid[k])
    c, m = chi2_true(mu_c)
    best = (mu_c, c, m)
    f = np.sqrt(10.0)
    if c <= target:
        fail = None
        for _ in range(3):
            mu_t = best[0] * f
            c2, m2 = chi2_true(mu_t)
            if c2 > target:
                fail = mu_t
                break
            best = (mu_t, c2, m2)
        lo = best[0]
        for _ in range(3 if fail is not None else 0):   # bisection in log mu towards the target
            mu_t = np.sqrt(lo * fail)
            c2, m2 = chi2_true(mu_t)
            if c2 <= target:
                best, lo = (mu_t, c2, m2), mu_t
            else:
                fail = mu_t
    else:
        for _ in range(4):
            mu_t = best[0] / f
            c2, m2 = chi2_true(mu_t)
            if c2 >= best[1]:
                break
            best = (mu_t, c2, m2)
            if c2 <= target:
                break
        if best[1] >= chi2_now and k + 1 < len(mu_grid):
            # the rough end overshoots: try smoother steps than the candidate
            for mu_t in (mu_c * f, mu_c * 10.0):
                c2, m2 = chi2_true(mu_t)
                if c2 < best[1]:
                    best = (mu_t, c2, m2)
    return best


def occam(fwd, d_obs, std, m0, R=None, *, predict=None, m_ref=None, ref_weight=0.0,
          target, max_iter, misfit_drop, mu0=None, decades=3.0, per_decade=4.0,
          bounds=(LN_RHO_MIN, LN_RHO_MAX), tol=0.01, patience=3, focusing=None,
          callback=None) -> OccamResult:
    """Occam inversion (Constable, Parker & Constable 1987).

    Parameters
    ----------
    fwd : callable
        ``fwd(m) -> (d, J)``, prediction and Jacobian ``dd/dm`` of shape (N, M).
    d_obs, std : ndarray, shape (N,)
        Observed data and their standard errors (same unit, std > 0).
    m0 : ndarray, shape (M,)
        Starting model (ln ohm-m).
    R : ndarray, shape (K, M), optional
        Roughness operator; default first differences.
    predict : callable, optional
        ``predict(m) -> d`` without the Jacobian (used in the mu search).
    m_ref, ref_weight : optional
        Reference model and its weight relative to the roughness term
        (``mu (||R m||^2 + ref_weight ||m - m_ref||^2)``); 0 disables it.
    target : float
        Target chi-square per datum (1 for correctly scaled errors).
    max_iter : int
        Maximum number of linearised steps.
    mu0 : float, optional
        Centre of the first mu search; default ``trace(Jw^T Jw) / trace(R^T R)``.
    decades, per_decade : float
        The mu grid screened (with the linearised misfit) at each step spans
        ``mu_prev * 10**(+-decades)``; the true misfit is then evaluated at a
        few mu only (forward predictions dominate the cost).
    bounds : (float, float)
        Numerical guard on ln(rho); models are clipped into it.
    tol : float
        Relative tolerance on misfit and roughness changes for convergence.
    misfit_drop : float
        Each step aims at ``max(target, misfit_drop * chi2_now)`` rather than
        the final target at once (the smoothest model reaching that
        intermediate misfit), which keeps early models smooth and the
        linearisation valid (common practice, no source); 0 = aim at the
        target from the first step (plain Occam). The factor is the most
        aggressive one: where the true misfit falls by less than a quarter
        of the linearised prediction the next step is more cautious
        (``drop -> sqrt(drop)``, up to 0.95), where it falls by more than
        three quarters bolder again (``drop -> drop^2``), a trust-region
        rule (Nocedal & Wright 2006, Algorithm 4.1). Aiming at too large a
        misfit drop on strongly nonlinear data (a thick resistor over a
        conductor seen at kilometres of offset) jumps into a rough local
        minimum the search then cannot leave.
    patience : int
        The search ends "stalled" after this many consecutive steps that
        lower the misfit by less than ``tol`` (relative); one poor step
        only makes the next one more cautious.
    focusing : float, optional
        Focusing parameter beta: minimum-gradient-support regularisation
        (:func:`focusing_operator`, reweighted from the current model at every
        step); None keeps the smooth first-difference operator ``R``.
    callback : callable, optional
        Called with the history dict after each iteration.
    """
    d_obs = np.asarray(d_obs, float)
    std = np.asarray(std, float)
    if d_obs.shape != std.shape or d_obs.ndim != 1:
        raise ValueError("data: d_obs and std must be 1-D arrays of the same length")
    if not np.all(np.isfinite(std)) or np.any(std <= 0):
        raise ValueError("error: standard errors must be positive and finite")
    m = np.clip(np.asarray(m0, float).copy(), *bounds)
    M = m.size
    if R is None:
        R = roughness_matrix(M)
    elif not sparse.issparse(R):
        R = np.asarray(R, float)
    if predict is None:
        def predict(mm):
            return fwd(mm)[0]
    w = 1.0 / std
    R0 = R

    d, J = fwd(m)
    chi2 = chi2_per_datum(d_obs, d, std)
    Jw = _weight_rows(J, w)
    if mu0 is None:
        rtr = _sumsq(R) or 1.0
        mu0 = _sumsq(Jw) / rtr or 1.0
    mu = float(mu0)
    history = []
    drop = misfit_drop if misfit_drop > 0 else 0.0
    max_drop = max(drop, 0.95) if misfit_drop > 0 else 0.0
    stalls = 0
    converged = False
    message = "maximum number of iterations reached"
    it = 0
    for it in range(1, max_iter + 1):
        rhat = (d_obs - d) * w + Jw @ m
        cache = {}
        if focusing is not None:
            R = focusing_operator(R0, m, focusing)

        def chi2_of_mu(mu_try, _rhat=rhat, _Jw=Jw, _m=m, _chi2=chi2, R=R):
            key = float(mu_try)
            if key not in cache:
                mt = np.clip(solve_regularised(_Jw, _rhat, R, mu_try, m_ref, ref_weight), *bounds)
                c = chi2_per_datum(d_obs, predict(mt), std)
                if c > _chi2:    # overshoot of the linearisation: try the half step too
                    mh = 0.5 * (_m + mt)
                    ch = chi2_per_datum(d_obs, predict(mh), std)
                    if ch < c:
                        mt, c = mh, ch
                cache[key] = (c, mt)
            return cache[key]

        def chi2_lin(mu_try, _rhat=rhat, _Jw=Jw, R=R):
            mt = np.clip(solve_regularised(_Jw, _rhat, R, mu_try, m_ref, ref_weight), *bounds)
            r = _Jw @ mt - _rhat
            return float(r @ r) / r.size

        n = int(round(2 * decades * per_decade)) + 1
        grid = mu * np.logspace(-decades, decades, n)
        step_target = max(target, drop * chi2)
        mu_new, chi2_new, m_new = _mu_search(chi2_of_mu, chi2_lin, grid, step_target, chi2)
        # trust-region control of the step size (Nocedal & Wright 2006, Numerical
        # Optimization, 2nd ed., Algorithm 4.1: shrink below a ratio of 1/4, grow above
        # 3/4): the ratio of the true to the linearised misfit reduction
        predicted = chi2 - chi2_lin(mu_new)
        ratio = (chi2 - chi2_new) / predicted if predicted > 0 else 0.0
        if ratio < 0.25:
            drop = min(max_drop, np.sqrt(drop))
        elif ratio > 0.75:
            drop = max(misfit_drop, drop * drop)

        if chi2_new > chi2 * (1 - 1e-6) and chi2 > target:
            # No mu improves the misfit with a full or half step: line search along
            # rougher directions (small mu approaches the Gauss-Newton direction of
            # chi2 alone, a descent direction for it).
            found = False
            for mu_t in (mu_new, mu_new * 1e-2, grid[0] * 1e-3):
                mt_full = np.clip(solve_regularised(Jw, rhat, R, mu_t, m_ref, ref_weight), *bounds)
                for frac in (0.25, 0.1, 0.03):
                    mt = m + frac * (mt_full - m)
                    c = chi2_per_datum(d_obs, predict(mt), std)
                    if c < chi2:
                        m_new, chi2_new, mu_new, found = mt, c, mu_t, True
                        break
                if found:
                    break
            if not found:
                message = "misfit cannot be reduced further; target not reached"
                history.append(dict(iteration=it, chi2=chi2, mu=mu, roughness=float(np.sum((R @ m) ** 2))))
                break

        rough_old = float(np.sum((R @ m) ** 2))
        rough_new = float(np.sum((R @ m_new) ** 2))
        dm = float(np.max(np.abs(m_new - m)))
        m, mu = m_new, float(mu_new)
        chi2_old, chi2 = chi2, float(chi2_new)
        d, J = fwd(m)
        chi2 = chi2_per_datum(d_obs, d, std)
        Jw = _weight_rows(J, w)
        rec = dict(iteration=it, chi2=chi2, mu=mu, roughness=rough_new)
        history.append(rec)
        if callback is not None:
            callback(rec)
        at_target = chi2 <= target * (1 + tol)
        if at_target and (abs(rough_new - rough_old) <= tol * max(rough_old, 1e-12) or dm < 1e-3):
            converged, message = True, "target misfit reached; model smoothest at target"
            break
        if not at_target and chi2 > chi2_old * (1 - tol) and it > 1:
            stalls += 1
            if stalls >= patience:
                message = "misfit stalled above target"
                break
        else:
            stalls = 0
    return OccamResult(m=m, d_pred=d, J=J, chi2=chi2, mu=mu, roughness=float(np.sum((R @ m) ** 2)),
                       converged=converged, n_iter=it, history=history, message=message, R=R)
