"""Adaptive Metropolis sampling of a log-density in a box, several chains in step.

Method: the adaptive Metropolis algorithm of Haario, Saksman & Tamminen (2001),
"An adaptive Metropolis algorithm", Bernoulli 7(2), 223-242: a Gaussian random
walk whose covariance is the empirical covariance of the chain so far,
``C_t = s_d (Cov(x_0..x_t-1) + eps I)`` with ``s_d = 2.4^2 / d`` (their eq. 2.1,
the scaling of Gelman, Roberts & Gilks 1996), and a fixed start covariance
``C_0`` during the first ``t_0`` steps. Two choices of ours on top:

* the covariance is pooled over all chains (they run in step), and a global
  scale ``lambda`` multiplying ``s_d`` is tuned towards an acceptance rate of
  0.234 by a Robbins-Monro step ``ln lambda += t^-0.6 (alpha - 0.234)``
  (Andrieu & Thoms 2008, "A tutorial on adaptive MCMC", Statistics and
  Computing 18, 343-373, Algorithm 4);
* adaptation happens only during the burn-in (whose draws are discarded);
  the covariance estimate restarts halfway through the burn-in so that the
  first transient does not inflate it. The kept draws come from a fixed
  random-walk Metropolis kernel, so each chain is an ordinary Markov chain
  with the posterior as its stationary law, and split R-hat / ESS apply.

Outside the box the log-density is minus infinity (a uniform prior on the
box); a proposal there is rejected without evaluating the model. The random
stream is ``numpy.random.default_rng(seed)``: a seed gives the same draws.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["SamplerResult", "adaptive_metropolis", "regularised_covariance"]

#: Target acceptance rate of the scale adaptation (Roberts, Gelman & Gilks 1997, "Weak
#: convergence and optimal scaling of random walk Metropolis algorithms", Ann. Appl.
#: Probab. 7(1), 110-120; the asymptotic optimum 0.234).
TARGET_ACCEPT = 0.234


@dataclass
class SamplerResult:
    draws: np.ndarray          # (chains, draws, P) kept draws
    log_density: np.ndarray    # (chains, draws)
    accept_rate: np.ndarray    # (chains,) over the kept draws
    scale: float               # final lambda
    proposal_cov: np.ndarray   # (P, P) covariance of the kept-draw proposals
    n_evaluations: int


def regularised_covariance(C, lower, upper, floor=1e-8):
    """Symmetric positive-definite version of ``C``: eigenvalues clipped to
    ``[floor, (box width / 2)^2]`` (an unresolved direction cannot propose
    steps larger than the box)."""
    C = 0.5 * (np.asarray(C, float) + np.asarray(C, float).T)
    width = np.asarray(upper, float) - np.asarray(lower, float)
    top = float(np.max(np.where(np.isfinite(width), width, 10.0)) / 2) ** 2
    try:
        w, V = np.linalg.eigh(C)
    except np.linalg.LinAlgError:
        return np.eye(C.shape[0]) * min(top, 1.0)
    w = np.clip(np.nan_to_num(w, nan=floor, posinf=top), floor, top)
    return (V * w) @ V.T


def adaptive_metropolis(log_density, starts, cov0, *, n_draws, n_burn, seed, lower, upper,
                        t0_fraction=0.1, eps=1e-10, anneal=0.0, beta0=1e-2, log_parts=None):
    """Run ``len(starts)`` chains of adaptive Metropolis in step.

    Parameters
    ----------
    log_density : callable
        ``log_density(q) -> float`` for one point inside the box (may return
        ``-inf`` for points that cannot be evaluated).
    starts : ndarray (chains, P)
        Starting points inside the box with finite log-density.
    cov0 : ndarray (P, P)
        Starting proposal covariance before ``s_d`` scaling (e.g. the
        linearised posterior covariance).
    n_draws, n_burn : int
        Kept draws per chain and burn-in (adaptation) steps per chain.
    seed : int
    lower, upper : ndarray (P,)
        The box.
    t0_fraction : float
        Fraction of the burn-in during which ``cov0`` is used before the
        empirical covariance takes over.
    eps : float
        Ridge added to the empirical covariance (Haario et al.'s epsilon).
    anneal : float
        Fraction of the burn-in (at most 0.45) spent on a tempered density
        ``beta ln L + ln prior`` with ``beta`` rising geometrically from
        ``beta0`` to 1 (simulated annealing, Kirkpatrick, Gelatt & Vecchi 1983,
        Science 220, 671-680), so chains can leave a local optimum of the
        start; at its end every chain whose density is below the best chain's
        by more than the 99 % point of chi-square(P)/2 restarts from the best
        chain's state. Needs ``log_parts``. All of it happens in the burn-in.
    log_parts : callable or None
        ``log_parts(q) -> (ln L, ln prior)``, their sum being ``log_density(q)``.
    """
    rng = np.random.default_rng(seed)
    x = np.array(starts, float)
    C, P = x.shape
    lo, hi = np.asarray(lower, float), np.asarray(upper, float)
    K = int(min(max(anneal, 0.0), 0.45) * n_burn) if log_parts is not None else 0
    if K:
        parts = np.array([log_parts(xi) for xi in x])          # (C, 2): ln L, ln prior

        def beta_at(t):
            return beta0 ** (1.0 - t / K) if t < K else 1.0
        lp = parts[:, 0] * beta_at(0) + parts[:, 1]
    else:
        lp = np.array([log_density(xi) for xi in x])
    if not np.all(np.isfinite(lp)):
        raise ValueError("starts: every chain needs a start with finite log-density")
    sd = 2.4 ** 2 / P
    cov0 = regularised_covariance(cov0, lo, hi)
    L = np.linalg.cholesky(sd * cov0)
    lam = 1.0
    t0 = max(int(t0_fraction * n_burn), 1)
    restart = n_burn // 2
    mean = np.zeros(P)
    M2 = np.zeros((P, P))
    count = 0
    draws = np.empty((C, n_draws, P))
    lps = np.empty((C, n_draws))
    accepted = np.zeros(C)
    n_eval = C
    for t in range(n_burn + n_draws):
        z = rng.standard_normal((C, P))
        u = np.log(rng.random(C))
        prop = x + np.sqrt(lam) * z @ L.T
        inside = np.all((prop >= lo) & (prop <= hi), axis=1)
        acc_step = np.zeros(C, bool)
        if K and t < K:
            beta = beta_at(t)
            lp = beta * parts[:, 0] + parts[:, 1]
        for c in range(C):
            if not inside[c]:
                continue
            if K and t < K:
                pq = log_parts(prop[c])
                lq = beta * pq[0] + pq[1]
            else:
                lq = log_density(prop[c])
            n_eval += 1
            if np.isfinite(lq) and u[c] < lq - lp[c]:
                x[c], lp[c] = prop[c], lq
                if K and t < K:
                    parts[c] = pq
                acc_step[c] = True
        if K and t == K - 1:
            # end of annealing: back to the full density; stragglers restart from the best chain
            from scipy.stats import chi2
            lp = parts[:, 0] + parts[:, 1]
            best = int(np.argmax(lp))
            lag = lp[best] - lp > 0.5 * chi2.ppf(0.99, P)
            x[lag], lp[lag] = x[best], lp[best]
            lam = 1.0
        if t < n_burn:
            # adaptation: pooled running covariance (Welford), scale by Robbins-Monro
            if t == restart:
                mean[:], M2[:], count = 0.0, 0.0, 0
            for c in range(C):
                count += 1
                delta = x[c] - mean
                mean += delta / count
                M2 += np.outer(delta, x[c] - mean)
            lam *= np.exp((t + 1) ** -0.6 * (acc_step.mean() - TARGET_ACCEPT))
            lam = float(np.clip(lam, 1e-4, 1e2))
            if t >= t0 and count > 10 * P:
                emp = M2 / (count - 1) + eps * np.eye(P)
                try:
                    L = np.linalg.cholesky(sd * emp)
                except np.linalg.LinAlgError:
                    L = np.linalg.cholesky(sd * regularised_covariance(emp, lo, hi))
        else:
            k = t - n_burn
            draws[:, k] = x
            lps[:, k] = lp
            accepted += acc_step
    return SamplerResult(draws=draws, log_density=lps, accept_rate=accepted / max(n_draws, 1),
                         scale=lam, proposal_cov=lam * (L @ L.T), n_evaluations=n_eval)
