"""Convergence diagnostics of Markov chains: rank-normalised split R-hat and effective
sample sizes (bulk and tail).

Method: Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021), "Rank-normalization,
folding, and localization: an improved R-hat for assessing convergence of MCMC",
Bayesian Analysis 16(2), 667-718:

* every chain is split in two halves (so a trend within a chain shows up as a
  difference between halves);
* draws are rank-normalised over all chains, ``z = Phi^-1((r - 3/8) / (S + 1/4))``
  with average ranks for ties (their eq. 14), so the diagnostics work for
  heavy-tailed draws;
* R-hat is the larger of the rank-normalised split R-hat of the draws and of
  the draws folded about their median, ``|theta - median|`` (their section
  4.2), each ``sqrt(var_plus / W)`` with ``var_plus = (n-1)/n W + B/n``
  (Gelman & Rubin 1992 as written in their eqs. 1-4);
* the effective sample size is ``S / tau`` with the integrated autocorrelation
  time from the multi-chain autocorrelation estimate ``rho_t = 1 - (W - mean
  autocovariance_t) / var_plus`` truncated by Geyer's (1992, "Practical
  Markov chain Monte Carlo", Statistical Science 7(4), 473-483) initial
  monotone sequence; the bulk ESS uses the rank-normalised split chains, the
  tail ESS the smaller of the ESS of the indicators ``theta <= q05`` and
  ``theta <= q95`` (their section 4.3).

No library of that name is a dependency of tem; this is our own implementation
of the published formulas, checked against an AR(1) chain whose ESS is known
(tests/test_posterior_diagnostics.py).
"""
from __future__ import annotations

import numpy as np
from scipy.special import ndtri
from scipy.stats import rankdata

__all__ = ["split_chains", "rank_normalise", "rhat", "ess", "ess_bulk", "ess_tail", "summary"]


def split_chains(x):
    """(chains, draws) -> (2 chains, draws // 2): each chain cut in halves (odd middle dropped)."""
    x = np.asarray(x, float)
    if x.ndim != 2:
        raise ValueError("draws: expected an array (chains, draws)")
    n = x.shape[1] // 2
    return np.concatenate([x[:, :n], x[:, x.shape[1] - n:]], axis=0)


def rank_normalise(x):
    """Rank-normalised draws (same shape): normal scores of the pooled ranks (eq. 14)."""
    x = np.asarray(x, float)
    r = rankdata(x, method="average", axis=None).reshape(x.shape)
    return ndtri((r - 0.375) / (x.size + 0.25))


def _rhat_plain(x):
    m, n = x.shape
    if n < 2 or m < 2:
        return np.nan
    W = np.mean(np.var(x, axis=1, ddof=1))
    B = n * np.var(np.mean(x, axis=1), ddof=1)
    if W <= 0:
        return 1.0 if B <= 0 else np.inf
    return float(np.sqrt(((n - 1) / n * W + B / n) / W))


def rhat(x):
    """Rank-normalised split R-hat: max of the bulk and the folded version (section 4.2)."""
    s = split_chains(x)
    if np.ptp(s) == 0:
        return 1.0
    bulk = _rhat_plain(rank_normalise(s))
    folded = _rhat_plain(rank_normalise(np.abs(s - np.median(s))))
    return float(max(bulk, folded))


def _autocov(x):
    """Biased autocovariance (divided by n) of every row, lags 0..n-1, by FFT."""
    m, n = x.shape
    c = x - x.mean(axis=1, keepdims=True)
    size = 1 << int(np.ceil(np.log2(2 * n)))
    f = np.fft.rfft(c, size, axis=1)
    return np.fft.irfft(f * np.conj(f), size, axis=1)[:, :n] / n


def ess(x):
    """Effective sample size of draws (chains, draws), no splitting or ranking (section 3.2)."""
    x = np.asarray(x, float)
    m, n = x.shape
    if n < 4:
        return np.nan
    if np.ptp(x) == 0:
        return float(m * n)
    acov = _autocov(x)
    W = np.mean(acov[:, 0]) * n / (n - 1.0)            # mean within-chain variance (ddof 1)
    var_plus = W * (n - 1.0) / n
    if m > 1:
        var_plus += np.var(np.mean(x, axis=1), ddof=1)
    rho = 1.0 - (W - np.mean(acov, axis=0)) / var_plus
    rho[0] = 1.0
    # Geyer's initial positive sequence on pairs (rho_2k + rho_2k+1), then monotone
    pairs = rho[: (n // 2) * 2].reshape(-1, 2).sum(axis=1)
    neg = np.flatnonzero(pairs <= 0)
    k_end = int(neg[0]) if neg.size else pairs.size
    p = np.minimum.accumulate(pairs[:k_end])
    tau = -1.0 + 2.0 * float(np.sum(p))
    tau = max(tau, 1.0 / np.log10(m * n))              # cap at S log10(S) for antithetic chains
    return float(m * n / tau)


def ess_bulk(x):
    """Bulk ESS: ESS of the rank-normalised split chains."""
    return ess(rank_normalise(split_chains(x)))


def ess_tail(x):
    """Tail ESS: the smaller ESS of the 5 % and 95 % quantile indicators (split chains)."""
    s = split_chains(x)
    out = []
    for q in np.quantile(s, [0.05, 0.95]):
        ind = (s <= q).astype(float)
        out.append(ess(ind))
    return float(min(out))


def summary(draws):
    """Per parameter of draws (chains, draws, P): dict of arrays ``rhat``, ``ess_bulk``, ``ess_tail``."""
    d = np.asarray(draws, float)
    if d.ndim != 3:
        raise ValueError("draws: expected an array (chains, draws, parameters)")
    P = d.shape[2]
    return {"rhat": np.array([rhat(d[:, :, k]) for k in range(P)]),
            "ess_bulk": np.array([ess_bulk(d[:, :, k]) for k in range(P)]),
            "ess_tail": np.array([ess_tail(d[:, :, k]) for k in range(P)])}
