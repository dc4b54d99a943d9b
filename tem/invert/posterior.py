"""Posterior sampling of a few-layer model: Markov chain Monte Carlo over the log-resistivities
and log-thicknesses, started from the Levenberg-Marquardt fit.

Parameters ``p = [ln rho_0 .. ln rho_N, ln h_0 .. ln h_{N-1}]`` as in
:mod:`tem.invert.fewlayer`. The posterior density (up to a constant) is

``ln pi(p) = -1/2 sum_i ((d_i - g_i(p)) / s_i)^2 - 1/2 sum_k r_k(p)^2``

inside the box ``res_bounds`` x ``thk_bounds`` (a uniform prior on the log
parameters there, zero outside), where ``d``, ``s`` are the usable data and
their stacked standard errors (with the error floor), ``g`` the forward
response, and ``r_k`` the weighted residuals of the user's priors
(:class:`tem.invert.fewlayer.Prior`: ``(ln value - ln v0) / std`` for
resistivity and thickness, ``(depth - z0) / std`` for a depth; a fixed
parameter is left out, a fixed depth is a prior with 0.1 % std as in the
Levenberg-Marquardt fit). That is Bayes' rule with a Gaussian likelihood
(Tarantola 2005, "Inverse problem theory", ch. 1, from memory).

Sampler: :func:`tem.invert.mcmc.adaptive_metropolis` (Haario et al. 2001),
several chains started from draws of the linearised posterior of the
Levenberg-Marquardt fit (its covariance also starts the proposal). Each
chain has its own seed derived from ``seed``; the result is the same for the
same seed. Convergence: rank-normalised split R-hat and bulk / tail ESS per
parameter (:mod:`tem.invert.diagnostics`).

The *target* is the most conductive layer below ``cover_layers`` layers of
cover (counted from the top, half-space included as a candidate) in the
Levenberg-Marquardt fit; the posterior of its top is that layer's top in
every draw (:func:`target_tops`).
"""
from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from .diagnostics import summary
from .fewlayer import prior_terms
from .mcmc import adaptive_metropolis, regularised_covariance

__all__ = ["PosteriorResult", "LayeredPosterior", "sample_posterior",
           "depth_tops", "target_layer", "target_tops", "posterior_station"]

#: Box of the few-layer parameters (ohm-m, m): the bounds of the Levenberg-Marquardt fit.


class LayeredPosterior:
    """Log posterior density of an N-layer model over the free ln parameters.

    Parameters
    ----------
    predict : callable
        ``predict(resistivity, thickness) -> d`` (N_data,).
    d_obs, std : ndarray (N_data,)
    n_layers : int
        Layers, half-space included.
    priors : sequence of :class:`tem.invert.fewlayer.Prior`
    p_fixed : ndarray (2 n_layers - 1,)
        Full ln parameter vector supplying the values of fixed parameters.
    """

    def __init__(self, predict, d_obs, std, n_layers, priors, p_fixed, res_bounds, thk_bounds):
        self.predict = predict
        self.d_obs = np.asarray(d_obs, float)
        self.w = 1.0 / np.asarray(std, float)
        n = n_layers - 1
        self.n = n
        p0 = np.array(p_fixed, float)
        self.free, self.soft = prior_terms(priors, n, p0)
        self.p_fixed = p0
        self.fi = np.flatnonzero(self.free)
        lo = np.concatenate([np.full(n + 1, np.log(res_bounds[0])), np.full(n, np.log(thk_bounds[0]))])
        hi = np.concatenate([np.full(n + 1, np.log(res_bounds[1])), np.full(n, np.log(thk_bounds[1]))])
        self.lower, self.upper = lo[self.fi], hi[self.fi]
        self.n_eval = 0

    def full(self, q):
        p = self.p_fixed.copy()
        p[self.fi] = q
        return p

    def prior_term(self, p):
        s = 0.0
        n = self.n
        for kind, idx, val, sig in self.soft:
            if kind == "depth":
                r = (np.exp(p[n + 1: n + 1 + idx]).sum() - val) / sig
            else:
                r = (p[idx] - val) / sig
            s += r * r
        return -0.5 * s

    def misfit(self, p):
        """Data chi-square (sum) of the full ln parameter vector ``p``."""
        n = self.n
        d = np.asarray(self.predict(np.exp(p[: n + 1]), np.exp(p[n + 1:])), float)
        r = (self.d_obs - d) * self.w
        return float(r @ r)

    def parts(self, q):
        """(ln likelihood, ln prior) of free parameters ``q`` (-inf outside the box)."""
        if np.any(q < self.lower) or np.any(q > self.upper):
            return -np.inf, 0.0
        p = self.full(q)
        self.n_eval += 1
        try:
            with np.errstate(all="ignore"):
                chi = self.misfit(p)
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            return -np.inf, 0.0
        if not np.isfinite(chi):
            return -np.inf, 0.0
        return -0.5 * chi, self.prior_term(p)

    def __call__(self, q):
        a, b = self.parts(q)
        return a + b


@dataclass
class PosteriorResult:
    """Posterior draws of one station's few-layer model and their diagnostics.

    Attributes
    ----------
    draws : ndarray (chains, draws, 2N+1)
        Full ln parameter vectors (fixed parameters constant).
    names : list of str
    n_layers : int
    rhat, ess_bulk, ess_tail : ndarray (2N+1,)
        Per parameter (NaN for fixed parameters).
    accept_rate : ndarray (chains,)
    chi2_median : float
        Median data chi-square per datum over the draws.
    seconds : float
        Wall time of the sampling (start draws, chains, diagnostics).
    n_evaluations : int
        Forward evaluations.
    """

    draws: np.ndarray
    names: list
    n_layers: int
    rhat: np.ndarray
    ess_bulk: np.ndarray
    ess_tail: np.ndarray
    accept_rate: np.ndarray
    chi2_median: float
    seconds: float
    n_evaluations: int

    @property
    def flat(self):
        """Draws as (chains * draws, 2N+1)."""
        return self.draws.reshape(-1, self.draws.shape[-1])

    @property
    def max_rhat(self):
        v = self.rhat[np.isfinite(self.rhat)]
        return float(v.max()) if v.size else float("nan")

    @property
    def min_ess(self):
        v = np.minimum(self.ess_bulk, self.ess_tail)
        v = v[np.isfinite(v)]
        return float(v.min()) if v.size else float("nan")


def _starts(post, q_hat, C, chains, rng, tries=50):
    """Chain starts: draws of N(q_hat, C) inside the box whose posterior density is within the
    bulk of a Gaussian posterior of the best fit (``2 (ln pi_hat - ln pi) <`` the 99 % point of
    chi-square with P degrees of freedom); the covariance is halved after every 10 misses (a
    linearised covariance can be far too wide where the data do not constrain a parameter)."""
    from scipy.stats import chi2

    lp_hat = post(q_hat)
    limit = float(chi2.ppf(0.99, q_hat.size))
    L = np.linalg.cholesky(C)
    out = []
    for _ in range(chains):
        scale = 1.0
        for i in range(tries):
            if i and i % 10 == 0:
                scale *= 0.5
            q = np.clip(q_hat + scale * (L @ rng.standard_normal(q_hat.size)), post.lower, post.upper)
            lq = post(q)
            if np.isfinite(lq) and 2.0 * (lp_hat - lq) < limit:
                break
        else:
            q = q_hat.copy()
        out.append(q)
    return np.array(out)


def sample_posterior(predict, d_obs, std, resistivity, thickness, ln_cov, *, priors, n_draws,
                     n_burn, chains, seed, anneal=0.0, res_bounds=None, thk_bounds=None):
    """Sample the posterior of an N-layer model (see the module docstring).

    Parameters
    ----------
    predict : callable
        ``predict(resistivity, thickness) -> d`` for the usable data.
    d_obs, std : ndarray (N_data,)
    resistivity, thickness : ndarray (N+1,), (N,)
        The Levenberg-Marquardt model (ohm-m, m): the centre of the start draws.
    ln_cov : ndarray (2N+1, 2N+1)
        Its linearised posterior covariance of the ln parameters (zero rows
        for fixed parameters).
    priors : sequence of Prior
    n_draws, n_burn, chains, seed : int
        Kept draws per chain, burn-in steps per chain, number of chains, seed.
    anneal : float
        Fraction of the burn-in spent annealing (see
        :func:`tem.invert.mcmc.adaptive_metropolis`); 0 = none.
    res_bounds, thk_bounds : (float, float), optional
        Bounds of resistivity (ohm-m) and thickness (m); unset: those of the
        few-layer fit in the invert settings table.

    Returns
    -------
    PosteriorResult
    """
    t_start = time.perf_counter()
    rho = np.asarray(resistivity, float)
    h = np.asarray(thickness, float)
    n_layers = rho.size
    p_hat = np.log(np.concatenate([rho, h]))
    if res_bounds is None or thk_bounds is None:
        from .settings import InversionSettings
        table = InversionSettings()
        res_bounds = table.few_resistivity_bounds if res_bounds is None else res_bounds
        thk_bounds = table.few_thickness_bounds if thk_bounds is None else thk_bounds
    post = LayeredPosterior(predict, d_obs, std, n_layers, priors, p_hat, res_bounds, thk_bounds)
    fi = post.fi
    q_hat = np.clip(post.p_fixed[fi], post.lower, post.upper)
    C = regularised_covariance(np.asarray(ln_cov, float)[np.ix_(fi, fi)], post.lower, post.upper)
    ss = np.random.SeedSequence(seed)
    rng_start, rng_chain = (np.random.default_rng(s) for s in ss.spawn(2))
    if not np.isfinite(post(q_hat)):
        raise ValueError("posterior: the starting model has no finite posterior density")
    starts = _starts(post, q_hat, C, chains, rng_start)
    res = adaptive_metropolis(post, starts, C, n_draws=n_draws, n_burn=n_burn,
                              seed=int(rng_chain.integers(2 ** 63)), lower=post.lower,
                              upper=post.upper, anneal=anneal, log_parts=post.parts)
    P = p_hat.size
    draws = np.broadcast_to(post.p_fixed, (chains, n_draws, P)).copy()
    draws[:, :, fi] = res.draws
    diag = summary(res.draws)
    full = {k: np.full(P, np.nan) for k in diag}
    for k, v in diag.items():
        full[k][fi] = v
    # data chi-square per datum of the draws: ln pi = -chi/2 + prior term
    flat = draws.reshape(-1, P)
    prior = np.array([post.prior_term(p) for p in flat]) if post.soft else 0.0
    chi = -2.0 * (res.log_density.ravel() - prior)
    n = n_layers - 1
    names = [f"ln_rho{k}" for k in range(n + 1)] + [f"ln_h{k}" for k in range(n)]
    return PosteriorResult(
        draws=draws, names=names, n_layers=n_layers, rhat=full["rhat"], ess_bulk=full["ess_bulk"],
        ess_tail=full["ess_tail"], accept_rate=res.accept_rate,
        chi2_median=float(np.median(chi) / np.asarray(d_obs).size),
        seconds=time.perf_counter() - t_start, n_evaluations=post.n_eval)


def depth_tops(draws, n_layers):
    """Depth (m) to the top of layers 1..N of every draw: (..., N)."""
    d = np.asarray(draws, float)
    return np.cumsum(np.exp(d[..., n_layers:]), axis=-1)


def target_layer(resistivity, cover_layers):
    """Index of the most conductive layer below ``cover_layers`` layers (None if there is none)."""
    rho = np.asarray(resistivity, float)
    if cover_layers >= rho.size:
        return None
    return cover_layers + int(np.argmin(rho[cover_layers:]))


def target_tops(draws, n_layers, layer):
    """Depth (m) to the top of layer ``layer`` (the target, fixed for all draws), per draw.

    NaN when ``layer`` is None. The target layer is chosen once, on the
    few-layer fit (:func:`target_layer`): choosing it draw by draw would let a
    layer the data do not see (e.g. a half-space under a thick conductor,
    whose resistivity the data leave free) become the "most conductive" one.
    """
    d = np.asarray(draws, float)
    if layer is None:
        return np.full(d.shape[:-1], np.nan)
    if layer == 0:
        return np.zeros(d.shape[:-1])
    return depth_tops(d, n_layers)[..., layer - 1]


def ln_covariance(few):
    """Linearised covariance of the ln parameters from a few-layer result dict."""
    s = np.asarray(few["ln_std"], float)
    return np.asarray(few["correlation"], float) * np.outer(s, s)


def posterior_station(sd, settings, few):
    """Sample the posterior of one station's few-layer model (``few``: the LM result dict)."""
    return sample_posterior(sd.predict, sd.d_obs, sd.std, few["resistivity"], few["thickness"],
                            ln_covariance(few), priors=tuple(settings.priors),
                            n_draws=settings.posterior_draws, n_burn=settings.posterior_burn,
                            chains=settings.posterior_chains, seed=settings.posterior_seed,
                            anneal=settings.posterior_anneal,
                            res_bounds=tuple(settings.few_resistivity_bounds),
                            thk_bounds=tuple(settings.few_thickness_bounds))


def restarted_fit(sd, settings, few, m_smooth, h_smooth, doi):
    """The few-layer fit, refitted from perturbed starts when it misses the data.

    When the fit's chi2 per datum exceeds 1.5 (its target is 1), the
    Levenberg-Marquardt fit is repeated from ``settings.posterior_restarts``
    starts: the fit itself and the smooth-model candidates
    (:func:`tem.invert.fewlayer.starting_models`) with ln(rho) perturbed by
    N(0, 1) and ln(thickness) by N(0, 0.5^2) (seeded from
    ``settings.posterior_seed``); the fit with the lowest objective is kept.
    The sampler explores around its start, so a start in a wrong basin would
    otherwise give a confident posterior of the wrong model. Returns the
    few-layer dict (the given one when it already fits).
    """
    from .fewlayer import fewlayer_inversion, starting_models
    from .station import _few_dict

    if settings.posterior_restarts <= 0 or few["chi2"] <= 1.5:
        return few
    n = len(few["resistivity"])
    bases = [(np.asarray(few["resistivity"]), np.asarray(few["thickness"]))]
    if m_smooth is not None:
        bases += starting_models(m_smooth, h_smooth, n, max_depth=doi)
    rng = np.random.default_rng(np.random.SeedSequence([settings.posterior_seed, 1]))

    def layer_fwd(rho, h):
        return sd.jacobian(rho, h, with_thickness=True)

    (r_lo, r_hi), (h_lo, h_hi) = settings.few_resistivity_bounds, settings.few_thickness_bounds
    best, best_obj = few, None
    for t in range(settings.posterior_restarts):
        rho0, h0 = bases[t % len(bases)]
        rho = np.clip(rho0 * np.exp(rng.standard_normal(n)), r_lo * 1.01, r_hi / 1.01)
        h = np.clip(h0 * np.exp(0.5 * rng.standard_normal(n - 1)), h_lo * 1.01, h_hi / 1.01)
        try:
            fr = fewlayer_inversion(layer_fwd, sd.d_obs, sd.std, rho, h, priors=tuple(settings.priors),
                                    res_bounds=(r_lo, r_hi), thk_bounds=(h_lo, h_hi),
                                    max_iter=settings.lm_max_iter)
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            continue
        if fr.chi2 < best["chi2"] and (best_obj is None or fr.lm.objective < best_obj):
            best, best_obj = _few_dict(fr, rho, h), fr.lm.objective
    return best


__all__ += ["restarted_fit"]
