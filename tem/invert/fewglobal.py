"""Few-layer global search: multi-start plus differential evolution, Levenberg-Marquardt
polish, and the choice of the layer count by an information criterion.

For each layer count the search

1. runs Levenberg-Marquardt (:func:`tem.invert.fewlayer.fewlayer_inversion`)
   from candidate starts read off the smooth model over its whole depth and
   over 1.5 times the DOI (never cut at the DOI: a target straddling it must
   still get an interface near it), and from the best half-space;
2. runs differential evolution (Storn & Price 1997, J. Global Optimization
   11, 341-359; ``scipy.optimize.differential_evolution``, seeded, strategy
   best1bin, the population seeded with the starts of 1. and a Latin
   hypercube) on the bounded few-layer objective in log parameters;
3. polishes the population's best model with Levenberg-Marquardt;

and keeps the lowest objective (data misfit plus prior terms). The
population search measures the misfit on ``asinh(d / s)``-transformed data
with errors ``s / sqrt(s^2 + d_obs^2)`` (the same transform the smooth
inversion uses, :func:`tem.invert.station.asinh_problem`; equal to the
linear chi-square to first order near the fit, log-like far from it, so that
wrong models several decades off still rank sensibly); the polish and the
reported chi-square are on the linear data.

Layer count: when the user fixes none, every count from 2 to the maximum is
searched and the count with the lowest information criterion is kept:
``BIC = X2 + k ln N`` (Schwarz 1978, "Estimating the dimension of a model",
Annals of Statistics 6(2), 461-464) or ``AIC = X2 + 2k`` (Akaike 1974, "A
new look at the statistical model identification", IEEE Trans. Automatic
Control 19(6), 716-723), with ``X2`` the summed squared error-weighted
residuals (-2 ln likelihood up to a constant for Gaussian errors of known
size), ``k`` the free parameters and ``N`` the data.
"""
from __future__ import annotations

import warnings

import numpy as np

from .fewlayer import fewlayer_inversion, starting_models

__all__ = ["CRITERIA", "information_criterion", "search_box", "global_fewlayer",
           "choose_layer_count"]

#: Information criteria for the layer count.
CRITERIA = ("bic", "aic")


def information_criterion(misfit, n_data, n_params, kind):
    """``misfit + k ln N`` (BIC, Schwarz 1978) or ``misfit + 2 k`` (AIC, Akaike 1974)."""
    if kind == "bic":
        return float(misfit + n_params * np.log(n_data))
    if kind == "aic":
        return float(misfit + 2.0 * n_params)
    raise ValueError(f"criterion: unknown {kind!r}; valid: {', '.join(CRITERIA)}")


#: Resistivity range (ohm-m) of the population search; the polish uses the wider bounds
#: of :func:`tem.invert.fewlayer.fewlayer_inversion` (from memory: the range of
#: earth materials a land TEM survey meets, brine-filled sediments to massive basalt).
SEARCH_RESISTIVITY = (0.3, 3e4)


def search_box(n_layers, first_thickness, depth_max, res_range=SEARCH_RESISTIVITY):
    """Bounds (lower, upper) of the population search in ln parameters.

    Resistivities in ``res_range``; thicknesses from ``first_thickness`` (m) to
    ``depth_max`` (m).
    """
    n = n_layers
    lo = np.log(np.r_[np.full(n, res_range[0]), np.full(n - 1, first_thickness)])
    hi = np.log(np.r_[np.full(n, res_range[1]), np.full(n - 1, depth_max)])
    return lo, hi


def _prior_penalty(priors, p, n):
    """Summed squared prior residuals of ln-parameter rows p (S, 2n-1); fixed ones excluded."""
    out = np.zeros(p.shape[0])
    for pr in priors:
        if pr.std is None and pr.kind != "depth":
            continue
        if pr.kind == "depth":
            sig = pr.std if pr.std is not None else 1e-3 * pr.value
            z = np.exp(p[:, n: n + pr.layer]).sum(axis=1)
            out += ((z - pr.value) / sig) ** 2
        else:
            k = pr.layer if pr.kind == "resistivity" else n + pr.layer
            out += ((p[:, k] - np.log(pr.value)) / pr.std) ** 2
    return out


def _fixed(priors, n):
    """{index: ln value} of fixed resistivities and thicknesses."""
    out = {}
    for pr in priors:
        if pr.std is None and pr.kind != "depth":
            out[pr.layer if pr.kind == "resistivity" else n + pr.layer] = np.log(pr.value)
    return out


def global_fewlayer(predict_many, layer_fwd, d_obs, std, n_layers, starts, box, *, population,
                    evaluations, seed, lm_max_iter, extra=(), priors=(), n_starts=None, polish=3,
                    screen_iter=10, finalists=2, layer_predict=None,
                    res_bounds=(0.1, 1e5), thk_bounds=(1.0, 2e4)):
    """Best few-layer model of ``n_layers`` layers: multi-start LM, differential evolution, LM polish.

    Parameters
    ----------
    predict_many : callable
        ``predict_many(rho (S, n), h (S, n-1)) -> (S, N)`` predicted data of many models.
    layer_fwd : callable
        ``layer_fwd(rho, h) -> (d, J)`` (see :func:`fewlayer_inversion`).
    starts : list of (rho, h)
        Starts for Levenberg-Marquardt; they also seed the population.
    extra : list of (rho, h)
        More candidate starts (e.g. :func:`split_starts` of the count before):
        ranked by the objective, the best ``n_starts`` go to Levenberg-Marquardt;
        all of them seed the population (the starts and these fill at most half
        of it).
    box : (lower, upper)
        Bounds of the population search in ``[ln rho_0..ln rho_{n-1}, ln h_0..]``.
    population : int
        Population size per free parameter.
    evaluations : int
        Largest number of forward evaluations of the population search.
    n_starts : int or None
        Extra starts (ranked by the objective) from which Levenberg-Marquardt
        runs (None: all of them).
    polish : int
        Distinct members of the final population (lowest objective first, at
        least 0.3 apart in some ln parameter) polished by Levenberg-Marquardt.
    screen_iter, finalists : int
        Every start first gets ``screen_iter`` Levenberg-Marquardt iterations;
        the ``finalists`` best and the polished population members go on for up
        to ``lm_max_iter``.
    layer_predict : callable, optional
        ``layer_predict(rho, h) -> d`` (no Jacobian) for trial steps.

    Returns
    -------
    (FewLayerResult, start (rho, h), info dict) of the lowest objective.
    """
    from scipy.optimize import differential_evolution
    from scipy.stats import qmc

    d_obs = np.asarray(d_obs, float)
    s = np.asarray(std, float)
    n = int(n_layers)
    P = 2 * n - 1
    fixed = _fixed(priors, n)
    free = np.array([i for i in range(P) if i not in fixed], int)
    base = np.zeros(P)
    for i, v in fixed.items():
        base[i] = v
    t_obs = np.arcsinh(d_obs / s)
    s_t = s / np.sqrt(s * s + d_obs * d_obs)
    n_eval = [0]

    def full(x):                      # x (S, n_free) -> p (S, P)
        p = np.repeat(base[None, :], x.shape[0], axis=0)
        p[:, free] = x
        return p

    def objective(xT):               # vectorised: xT (n_free, S)
        p = full(np.atleast_2d(xT.T))
        n_eval[0] += p.shape[0]
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            d = predict_many(np.exp(p[:, :n]), np.exp(p[:, n:]))
        r = (np.arcsinh(d / s) - t_obs) / s_t
        out = np.sum(r * r, axis=1) + _prior_penalty(priors, p, n)
        return np.where(np.isfinite(out), out, 1e300)

    def lm_from(rho0, h0, iters=None):
        try:
            return fewlayer_inversion(layer_fwd, d_obs, s, rho0, h0, priors=tuple(priors),
                                      res_bounds=res_bounds, thk_bounds=thk_bounds,
                                      max_iter=min(lm_max_iter, iters or screen_iter),
                                      layer_predict=layer_predict)
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            return None

    lo, hi = (np.asarray(b, float)[free] for b in box)
    # rank the extra starts in one batch; Levenberg-Marquardt from every start and the
    # best few extra ones
    starts = [(np.asarray(r, float), np.asarray(h, float)) for r, h in starts]
    extra = [(np.asarray(r, float), np.asarray(h, float)) for r, h in extra]
    if extra:
        xs = np.array([np.log(np.r_[r, h])[free] for r, h in extra])
        order = np.argsort(objective(xs.T))
        extra = [extra[k] for k in order]
    starts = starts + extra
    results = []
    n_extra = len(extra) if n_starts is None else min(n_starts, len(extra))
    for k, (rho0, h0) in enumerate(starts[:len(starts) - len(extra) + n_extra]):
        fr = lm_from(rho0, h0)
        if fr is not None:
            results.append((fr, (rho0, h0), f"start {k}"))
    de_info = {}
    if evaluations > 0 and free.size:
        S = max(5, int(population) * free.size)
        init = qmc.LatinHypercube(d=free.size, rng=np.random.default_rng(seed)).random(S)
        init = lo + init * (hi - lo)
        for k, (rho0, h0) in enumerate(starts[: S // 2]):
            p0 = np.log(np.r_[rho0, h0])[free]
            init[k] = np.clip(p0, lo, hi)
        maxiter = max(1, int(evaluations) // S - 1)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            de = differential_evolution(objective, list(zip(lo, hi)), init=init, maxiter=maxiter,
                                        polish=False, vectorized=True, updating="deferred",
                                        rng=np.random.default_rng(seed + 1), tol=1e-3)
        de_info = dict(de_objective=float(de.fun), de_generations=int(de.nit))
        # polish the best few distinct members (each may sit in another basin)
        order = np.argsort(de.population_energies)
        picked = []
        for j in order:
            x = de.population[j]
            if any(np.max(np.abs(x - y)) < 0.3 for y in picked):
                continue
            picked.append(x)
            if len(picked) == polish:
                break
        for j, x in enumerate(picked):
            p = base.copy()
            p[free] = x
            rho0, h0 = np.exp(p[:n]), np.exp(p[n:])
            fr = lm_from(rho0, h0)
            if fr is not None:
                results.append((fr, (rho0, h0), f"population {j}"))
    if not results:
        raise ValueError("few-layer search: no start could be evaluated")
    # the best screened fits and the population's polished members go on to convergence
    results.sort(key=lambda r: r[0].lm.objective)
    for k, (fr, start, label) in enumerate(results):
        if k >= finalists and not label.startswith("population"):
            continue
        if fr.lm.n_iter >= min(lm_max_iter, screen_iter) and lm_max_iter > screen_iter:
            fr2 = lm_from(fr.resistivity, fr.thickness, lm_max_iter)
            if fr2 is not None and fr2.lm.objective <= fr.lm.objective:
                results[k] = (fr2, start, label)
    best = min(results, key=lambda r: r[0].lm.objective)
    info = dict(winner=best[2], evaluations=int(n_eval[0]), n_layers=n, n_free=int(free.size),
                **de_info)
    return best[0], best[1], info


def choose_layer_count(search, counts, n_data, criterion, fixed=None, target=None):
    """Search every count in turn, ``search(n, previous) -> (FewLayerResult, start, info)``
    (``previous``: the result of the count before, None first); keep the lowest
    criterion, or the count ``fixed`` when given.

    Without ``fixed``, the search stops early once a count fits to ``target``
    (chi-square per datum) and the next count raises the criterion: more layers
    would only fit noise.

    Returns (result, start, info) of the chosen count; ``info["criteria"]``
    lists ``(n_layers, chi2, criterion value)`` of every count searched.
    """
    table, found, prev = [], {}, None
    for n in counts:
        fr, start, info = search(n, prev)
        prev = fr
        ic = information_criterion(fr.chi2 * n_data, n_data, int(info["n_free"]), criterion)
        table.append((int(n), float(fr.chi2), ic))
        found[int(n)] = (fr, start, info, ic)
        if fixed is None and target is not None and len(table) >= 2 \
                and table[-2][1] <= target and table[-1][2] > table[-2][2]:
            break
    n_best = fixed if fixed is not None else min(found, key=lambda k: found[k][3])
    fr, start, info, _ = found[n_best]
    info = dict(info, criterion=criterion if fixed is None else "fixed", criteria=table)
    return fr, start, info


def smooth_starts(m_smooth, h_smooth, n_layers, doi, rho_hs):
    """Starts for ``n_layers`` layers read off the smooth model, not cut at the DOI.

    The candidates of :func:`tem.invert.fewlayer.starting_models` over the whole
    mesh and over 1.5 times the DOI, plus a uniform start at the best
    half-space with interfaces log-spaced down to the DOI; duplicates dropped.
    """
    cands = list(starting_models(m_smooth, h_smooth, n_layers, max_depth=None))
    if doi is not None and np.isfinite(doi) and doi > 0:
        cands += starting_models(m_smooth, h_smooth, n_layers, max_depth=1.5 * doi)
    h = np.asarray(h_smooth, float)
    zb = doi if (doi is not None and np.isfinite(doi) and doi > 0) else h.sum()
    z = np.geomspace(max(h[0], zb / 50.0), zb, n_layers - 1) if n_layers > 1 else np.array([])
    cands.append((np.full(n_layers, float(rho_hs)), np.diff(np.r_[0.0, z])))
    out = []
    for rho, hh in cands:
        rho = np.asarray(rho, float)
        hh = np.asarray(hh, float)
        if rho.size != n_layers or np.any(hh <= 0):
            continue
        if not any(np.allclose(np.log(o[0]), np.log(rho)) and np.allclose(o[1], hh) for o in out):
            out.append((rho, hh))
    return out


def split_starts(rho, h, factors=(0.1, 10.0)):
    """Starts with one layer more: every layer of (rho, h) split in two.

    A finite layer is halved in thickness, the half-space gets a new
    interface at 1.5 times the depth of the deepest one (or 100 m); one half
    keeps the resistivity, the other takes it times each factor.
    """
    rho = np.asarray(rho, float)
    h = np.asarray(h, float)
    z_last = float(h.sum()) if h.size else 0.0
    out = []
    for j in range(rho.size):
        for f in factors:
            for first in (True, False):
                pair = [rho[j], rho[j] * f] if first else [rho[j] * f, rho[j]]
                r = np.r_[rho[:j], pair, rho[j + 1:]]
                if j < h.size:
                    hh = np.r_[h[:j], 0.5 * h[j], 0.5 * h[j], h[j + 1:]]
                else:
                    hh = np.r_[h, max(0.5 * z_last, 100.0)]
                out.append((r, hh))
    return out
