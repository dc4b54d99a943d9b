"""Few-layer inversion: Levenberg-Marquardt in log parameters, with bounds, priors
and fixed parameters, and linearised posterior uncertainty.

Parameters of an N-layer model over a half-space: ``p = [ln rho_0 .. ln rho_N,
ln h_0 .. ln h_{N-1}]`` (resistivity in ohm-m, thickness in m).

Method: Levenberg (1944, Quart. Appl. Math. 2, 164-168) and Marquardt (1963,
J. SIAM 11, 431-441): solve ``(A^T A + lambda diag(A^T A)) dq = A^T r`` on the
stacked, error-weighted data and prior rows, shrink ``lambda`` after a step
that lowers the objective and grow it after one that does not. Bounds are kept
by clipping each trial step into the box (projected step). Fixed parameters
are removed from the parameter vector. Priors (from a well or a seismic
horizon) are extra weighted rows ``(g(p) - value) / sigma``; a depth prior is
nonlinear in the thicknesses (depth = sum of thicknesses above) and is
linearised at each step. A fixed depth is imposed as a prior with a
standard deviation of 0.1 % of the depth (a stiff constraint, not an exact
one).

Posterior covariance (linearised, Gaussian): ``C = (A^T A)^-1`` over the free
parameters at the solution, ``A`` including the prior rows (e.g. Tarantola
2005, "Inverse problem theory", ch. 3, from memory). Standard deviations are
mapped to log10(rho), to thickness (``std h = h std(ln h)``, first order) and
to depth to each layer top (``z_k = sum_{i<k} h_i``, gradient ``h_i``).
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from ..errors import TemInputError

__all__ = [
    "prior_terms",
    "Prior",
    "LMResult",
    "FewLayerResult",
    "levenberg_marquardt",
    "fewlayer_inversion",
    "block_smooth_model",
    "starting_models",
    "gradient_blocks",
]

KINDS = ("resistivity", "thickness", "depth")


@dataclass(frozen=True)
class Prior:
    """A prior on one parameter of a few-layer model.

    Parameters
    ----------
    kind : {"resistivity", "thickness", "depth"}
        ``depth`` is the depth (m) to the top of layer ``layer`` (layer >= 1).
    layer : int
        Layer index (0 = top layer; the half-space is index N).
    value : float
        Prior value: ohm-m, m or m.
    std : float or None
        Standard deviation: of ln(value) for resistivity and thickness
        (e.g. 0.1 = about 10 %), in m for depth. ``None`` fixes the parameter.
    """

    kind: str
    layer: int
    value: float
    std: float | None = None

    def __post_init__(self):
        if self.kind not in KINDS:
            raise ValueError(f"prior kind: unknown {self.kind!r}; valid: {', '.join(KINDS)}")
        if not (np.isfinite(self.value) and self.value > 0):
            raise ValueError(f"prior value: must be positive and finite, got {self.value}")
        if self.std is not None and not (np.isfinite(self.std) and self.std > 0):
            raise ValueError(f"prior std: must be positive and finite or None (fixed), got {self.std}")


@dataclass
class LMResult:
    q: np.ndarray
    d_pred: np.ndarray
    A: np.ndarray          # weighted Jacobian (data rows then prior rows) at q
    objective: float       # ||r||^2 (data + priors)
    chi2: float            # data chi-square per datum
    n_iter: int
    converged: bool
    message: str
    history: list = field(default_factory=list)


def levenberg_marquardt(fwd, d_obs, std, q0, *, lower=None, upper=None, prior_rows=None,
                        max_iter=50, lam0=1e-2, tol=1e-4, max_step=2.0, callback=None,
                        predict=None) -> LMResult:
    """Levenberg-Marquardt with box bounds on a generic problem.

    Parameters
    ----------
    fwd : callable
        ``fwd(q) -> (d, J)`` with ``J = dd/dq`` (N, P).
    d_obs, std : ndarray (N,)
        Data and standard errors.
    q0 : ndarray (P,)
        Start.
    lower, upper : ndarray (P,), optional
        Box bounds on ``q``.
    prior_rows : callable, optional
        ``prior_rows(q) -> (r, G)``, weighted prior residuals ``(g(q) - value)/sigma``
        and their gradient (K, P).
    max_step : float
        Largest change of any log parameter in one step (2 = a factor e^2);
        trial models whose prediction fails or is not finite count as failed steps.
    predict : callable, optional
        ``predict(q) -> d`` without the Jacobian, for trial steps (the Jacobian
        is then computed only at accepted models).
    """
    d_obs = np.asarray(d_obs, float)
    w = 1.0 / np.asarray(std, float)
    q = np.asarray(q0, float).copy()
    P = q.size
    lower = np.full(P, -np.inf) if lower is None else np.asarray(lower, float)
    upper = np.full(P, np.inf) if upper is None else np.asarray(upper, float)
    q = np.clip(q, lower, upper)

    def evaluate(qq, jac=True):
        if jac or predict is None:
            d, J = fwd(qq)
        else:
            d, J = predict(qq), None
        rd = (d_obs - d) * w
        if prior_rows is not None:
            rp, G = prior_rows(qq)
            r = np.concatenate([rd, -rp])
            A = np.vstack([J * w[:, None], G]) if jac else None
        else:
            r, A = rd, (J * w[:, None] if jac else None)
        return d, r, A, float(rd @ rd) / rd.size

    d, r, A, chi2 = evaluate(q)
    obj = float(r @ r)
    lam = lam0
    history = []
    converged, message = False, "maximum number of iterations reached"
    it = 0
    for it in range(1, max_iter + 1):
        g = A.T @ r
        H = A.T @ A
        dH = np.diag(H).copy()
        dH[dH <= 0] = 1.0
        accepted = False
        for _ in range(12):
            try:
                dq = np.linalg.solve(H + lam * np.diag(dH), g)
            except np.linalg.LinAlgError:
                lam *= 10
                continue
            big = float(np.max(np.abs(dq)))
            if big > max_step:          # trust region on the log parameters
                dq *= max_step / big
            q_try = np.clip(q + dq, lower, upper)
            try:
                with warnings.catch_warnings():   # a wild trial model may overflow: judged below
                    warnings.simplefilter("ignore", RuntimeWarning)
                    d_t, r_t, A_t, chi2_t = evaluate(q_try, jac=predict is None)
                obj_t = float(r_t @ r_t)
            except (FloatingPointError, ValueError, np.linalg.LinAlgError):
                obj_t = np.inf
            if np.isfinite(obj_t) and obj_t < obj:
                accepted = True
                break
            lam *= 10
        if not accepted:
            message = "no descent step found (local minimum)"
            converged = True
            break
        rel = (obj - obj_t) / max(obj, 1e-300)
        step = float(np.max(np.abs(q_try - q)))
        if A_t is None:
            d_t, r_t, A_t, chi2_t = evaluate(q_try)
        q, d, r, A, chi2, obj = q_try, d_t, r_t, A_t, chi2_t, obj_t
        lam = max(lam / 10, 1e-9)
        rec = dict(iteration=it, chi2=chi2, objective=obj, lam=lam)
        history.append(rec)
        if callback is not None:
            callback(rec)
        if rel < tol or step < 1e-5:
            converged, message = True, "objective stopped decreasing"
            break
    return LMResult(q=q, d_pred=d, A=A, objective=obj, chi2=chi2, n_iter=it,
                    converged=converged, message=message, history=history)


@dataclass
class FewLayerResult:
    """Few-layer model with linearised posterior uncertainty.

    Attributes
    ----------
    resistivity : ndarray (N+1,), ohm-m
    thickness : ndarray (N,), m
    depth_top : ndarray (N+1,), m (0 for the top layer)
    log10_res_std : ndarray (N+1,), posterior std of log10(rho) (0 if fixed)
    thickness_std : ndarray (N,), m
    depth_std : ndarray (N+1,), m (0 at the surface)
    ln_std : ndarray (2N+1,), std of every ln parameter (0 if fixed)
    correlation : ndarray (2N+1, 2N+1), posterior correlation of the ln parameters
    chi2 : float, data chi-square per datum
    """

    resistivity: np.ndarray
    thickness: np.ndarray
    depth_top: np.ndarray
    log10_res_std: np.ndarray
    thickness_std: np.ndarray
    depth_std: np.ndarray
    ln_std: np.ndarray
    correlation: np.ndarray
    chi2: float
    d_pred: np.ndarray
    lm: LMResult

    @property
    def names(self):
        n = self.thickness.size
        return [f"ln_rho{k}" for k in range(n + 1)] + [f"ln_h{k}" for k in range(n)]


def _split(p, n):
    return np.exp(p[: n + 1]), np.exp(p[n + 1:])


def prior_terms(priors, n, p0):
    """Fixed parameters and soft terms of ``priors`` for a model of ``n`` thicknesses.

    ``p0`` is the ln parameter vector (ln rho_0..n, ln h_0..n-1); a prior
    without ``std`` fixes its parameter there (in place). Returns ``(free,
    soft)``: the mask of free parameters and the soft terms ``(kind, index or
    layer, ln value or depth, sigma)``.
    """
    free = np.ones(p0.size, bool)
    soft = []
    for pr in priors:
        if pr.kind == "depth":
            if not 1 <= pr.layer <= n:
                raise TemInputError(f"prior depth: layer must be 1..{n}, got {pr.layer}")
            sig = pr.std if pr.std is not None else 1e-3 * pr.value
            soft.append(("depth", pr.layer, pr.value, sig))
            continue
        k = pr.layer if pr.kind == "resistivity" else n + 1 + pr.layer
        top = n if pr.kind == "resistivity" else n - 1
        if not 0 <= pr.layer <= top:
            raise TemInputError(f"prior {pr.kind}: layer must be 0..{top}, got {pr.layer}")
        if pr.std is None:
            free[k] = False
            p0[k] = np.log(pr.value)
        else:
            soft.append((pr.kind, k, np.log(pr.value), pr.std))
    return free, soft


def fewlayer_inversion(layer_fwd, d_obs, std, resistivity0, thickness0, *, priors=(),
                       res_bounds=(0.1, 1e5), thk_bounds=(1.0, 2e4), max_iter=50,
                       callback=None, layer_predict=None) -> FewLayerResult:
    """Few-layer inversion of one station.

    Parameters
    ----------
    layer_fwd : callable
        ``layer_fwd(resistivity, thickness) -> (d, J)`` with ``J`` the
        derivatives with respect to ``[ln rho_0..ln rho_N, ln h_0..ln h_{N-1}]``.
    d_obs, std : ndarray (N_data,)
    resistivity0 : array (N+1,), ohm-m; thickness0 : array (N,), m
        Starting model (e.g. from :func:`block_smooth_model`, or the user's).
    priors : sequence of :class:`Prior`
        ``std=None`` fixes the parameter (a fixed depth becomes a stiff prior).
    res_bounds, thk_bounds : (float, float)
        Bounds on resistivity (ohm-m) and thickness (m).
    layer_predict : callable, optional
        ``layer_predict(resistivity, thickness) -> d`` without the Jacobian, for
        trial steps.
    """
    rho0 = np.asarray(resistivity0, float)
    h0 = np.asarray(thickness0, float)
    n = h0.size
    if rho0.size != n + 1:
        raise ValueError("starting model: need one more resistivity than thicknesses")
    if np.any(~np.isfinite(rho0)) or np.any(rho0 <= 0) or np.any(~np.isfinite(h0)) or np.any(h0 <= 0):
        raise ValueError("starting model: resistivity and thickness must be positive and finite")
    p0 = np.log(np.concatenate([rho0, h0]))
    P = p0.size
    lo = np.concatenate([np.full(n + 1, np.log(res_bounds[0])), np.full(n, np.log(thk_bounds[0]))])
    hi = np.concatenate([np.full(n + 1, np.log(res_bounds[1])), np.full(n, np.log(thk_bounds[1]))])

    free, soft = prior_terms(priors, n, p0)
    # start consistent with depth priors: rescale thicknesses above each prior depth
    for kind, layer, val, _ in soft:
        if kind == "depth":
            h = np.exp(p0[n + 1:])
            z = h[:layer].sum()
            scale = val / z
            idx = [n + 1 + i for i in range(layer) if free[n + 1 + i]]
            if idx:
                p0[idx] += np.log(scale)
    p0 = np.clip(p0, lo, hi)
    fixed_vals = p0.copy()
    fi = np.flatnonzero(free)

    def full(q):
        p = fixed_vals.copy()
        p[fi] = q
        return p

    def fwd(q):
        p = full(q)
        rho, h = _split(p, n)
        d, J = layer_fwd(rho, h)
        return d, J[:, fi]

    def _prior_rows(q):
        p = full(q)
        r = np.empty(len(soft))
        G = np.zeros((len(soft), P))
        for i, (kind, idx, val, sig) in enumerate(soft):
            if kind == "depth":
                h = np.exp(p[n + 1: n + 1 + idx])
                r[i] = (h.sum() - val) / sig
                G[i, n + 1: n + 1 + idx] = h / sig
            else:
                r[i] = (p[idx] - val) / sig
                G[i, idx] = 1.0 / sig
        return r, G[:, fi]

    prior_rows = _prior_rows if soft else None

    def predict(q):
        return layer_predict(*_split(full(q), n))

    lm = levenberg_marquardt(fwd, d_obs, std, p0[fi], lower=lo[fi], upper=hi[fi],
                             prior_rows=prior_rows, max_iter=max_iter, callback=callback,
                             predict=None if layer_predict is None else predict)
    p = full(lm.q)
    rho, h = _split(p, n)
    # posterior covariance over the free parameters
    H = lm.A.T @ lm.A
    try:
        Cf = np.linalg.inv(H)
    except np.linalg.LinAlgError:
        Cf = np.linalg.pinv(H)
    C = np.zeros((P, P))
    C[np.ix_(fi, fi)] = Cf
    ln_std = np.sqrt(np.clip(np.diag(C), 0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = C / np.outer(ln_std, ln_std)
    corr[~np.isfinite(corr)] = 0.0
    np.fill_diagonal(corr, np.where(ln_std > 0, 1.0, 0.0))
    # a parameter the data do not constrain has a linearised std of anything (288 decades
    # once reached a product); no spread can exceed that of a uniform distribution over the
    # search bounds, (hi - lo) / sqrt(12) in log units (1.73 decades for 0.1-1e5 ohm-m), so
    # that is the cap; the chi2-profile ranges (tem.invert.equivalence) tell the rest
    # and a parameter the data do not see at all (the inverse fell back to the pseudo-inverse,
    # which gives it no variance) is not "known exactly": it gets the cap too
    cap = (hi - lo) / np.sqrt(12.0)
    seen = np.zeros(P, bool)
    dh = np.sqrt(np.clip(np.diag(H), 0.0, None))
    seen[fi] = dh > 1e-6 * max(float(dh.max(initial=0.0)), 1e-300)
    ln_std = np.where(seen, np.minimum(ln_std, cap), np.where(free, cap, 0.0))
    Ch = C[n + 1:, n + 1:]
    depth_std = np.zeros(n + 1)
    for k in range(1, n + 1):
        g = h[:k]
        depth_std[k] = np.sqrt(max(g @ Ch[:k, :k] @ g, 0.0))
    return FewLayerResult(
        resistivity=rho, thickness=h, depth_top=np.concatenate([[0.0], np.cumsum(h)]),
        log10_res_std=ln_std[: n + 1] / np.log(10), thickness_std=h * ln_std[n + 1:],
        depth_std=depth_std, ln_std=ln_std, correlation=corr, chi2=lm.chi2, d_pred=lm.d_pred, lm=lm)


def block_smooth_model(m_smooth, thickness, n_layers, max_depth=None):
    """Few-layer starting model from a smooth model.

    The mesh layers above ``max_depth`` (e.g. the DOI) are split into
    ``n_layers`` contiguous blocks that minimise the summed squared deviation
    of ln(rho) from each block mean (optimal segmentation by dynamic
    programming; mesh layers below ``max_depth`` join the last block). Each
    block's resistivity is the geometric mean of its mesh layers.

    Returns (resistivity (n_layers,), thickness (n_layers-1,)).
    """
    m = np.asarray(m_smooth, float)
    h = np.asarray(thickness, float)
    if n_layers < 2:
        raise ValueError("n_layers: need at least 2")
    ztop = np.concatenate([[0.0], np.cumsum(h)])     # top of each mesh layer (M entries)
    M = m.size
    n_use = M if max_depth is None else int(np.clip(np.searchsorted(ztop, max_depth, "right"), n_layers, M))
    x = m[:n_use]
    cs = np.concatenate([[0.0], np.cumsum(x)])
    cs2 = np.concatenate([[0.0], np.cumsum(x * x)])

    def cost(a, b):       # squared deviation of x[a:b] from its mean
        n = b - a
        s = cs[b] - cs[a]
        return cs2[b] - cs2[a] - s * s / n

    K = n_layers
    best = np.full((K + 1, n_use + 1), np.inf)
    arg = np.zeros((K + 1, n_use + 1), int)
    best[0, 0] = 0.0
    for k in range(1, K + 1):
        for b in range(k, n_use + 1):
            for a in range(k - 1, b):
                c = best[k - 1, a] + cost(a, b)
                if c < best[k, b] - 1e-12:
                    best[k, b], arg[k, b] = c, a
    edges = [n_use]
    for k in range(K, 0, -1):
        edges.append(arg[k, edges[-1]])
    edges = edges[::-1]          # 0 = e0 < e1 < ... < eK = n_use
    edges[-1] = M
    rho = np.array([np.exp(np.mean(m[a:b])) for a, b in zip(edges[:-1], edges[1:])])
    thick = np.diff(ztop[edges[:-1]])[:] if K > 1 else np.array([])
    thick = np.diff(np.concatenate([ztop[edges[1:-1]]]), prepend=0.0)
    return rho, thick


def starting_models(m_smooth, thickness, n_layers, max_depth=None):
    """Candidate few-layer starts from a smooth model (the caller keeps the best fit).

    1. optimal segmentation of the smooth model into ``n_layers`` blocks
       (:func:`block_smooth_model`);
    2. interfaces at the largest steps of ln(rho) (:func:`gradient_blocks`);
    3. and 4. the first mesh layer kept as a thin top layer over 1. or 2. of the
       rest with ``n_layers - 1`` blocks (smooth models blur a thin
       near-surface layer into the one below, so neither rule isolates it).
    Duplicates are dropped.
    """
    m = np.asarray(m_smooth, float)
    h = np.asarray(thickness, float)
    cands = [block_smooth_model(m, h, n_layers, max_depth),
             gradient_blocks(m, h, n_layers, max_depth)]
    if n_layers >= 3 and m.size > n_layers:
        sub = None if max_depth is None else max_depth - h[0]
        for fn in (block_smooth_model, gradient_blocks):
            rho_r, h_r = fn(m[1:], h[1:], n_layers - 1, sub)
            cands.append((np.concatenate([[np.exp(m[0])], rho_r]), np.concatenate([[h[0]], h_r])))
    out = []
    for c in cands:
        if not any(o[1].shape == c[1].shape and np.allclose(o[1], c[1]) for o in out):
            out.append(c)
    return out


def gradient_blocks(m_smooth, thickness, n_layers, max_depth=None):
    """Few-layer model with interfaces at the largest ln(rho) steps of a smooth model.

    The ``n_layers - 1`` largest jumps between neighbouring mesh layers above
    ``max_depth`` (no two on adjacent interfaces) become interfaces; block
    resistivities are the geometric means of their mesh layers.
    """
    m = np.asarray(m_smooth, float)
    h = np.asarray(thickness, float)
    ztop = np.concatenate([[0.0], np.cumsum(h)])
    cand = np.arange(1, m.size)
    jumps = np.abs(np.diff(m))
    if max_depth is not None:
        keep = ztop[cand] <= max_depth
        cand, jumps = cand[keep], jumps[keep]
    chosen = []
    for idx in np.argsort(-jumps):
        k = int(cand[idx])
        if all(abs(k - c) > 1 for c in chosen):
            chosen.append(k)
        if len(chosen) == n_layers - 1:
            break
    if len(chosen) < n_layers - 1:
        return block_smooth_model(m, h, n_layers, max_depth)
    edges = [0] + sorted(chosen) + [m.size]
    rho = np.array([np.exp(np.mean(m[a:b])) for a, b in zip(edges[:-1], edges[1:])])
    return rho, np.diff(np.concatenate([[0.0], ztop[edges[1:-1]]]))
