"""Split R-hat and effective sample size (tem.invert.diagnostics) against chains whose answer is
known, and the adaptive Metropolis sampler on a linear-Gaussian problem.

References: Vehtari et al. (2021), "Rank-normalization, folding, and localization: an
improved R-hat for assessing convergence of MCMC", Bayesian Analysis 16(2), 667-718 (the
estimators); the integrated autocorrelation time of a stationary AR(1) process
x_t = phi x_{t-1} + e_t is tau = (1 + phi) / (1 - phi), so ESS = S (1 - phi) / (1 + phi)
(from memory; it follows from rho_k = phi^k and tau = 1 + 2 sum rho_k). Linear-Gaussian
posterior: Tarantola (2005), "Inverse problem theory", eqs. 3.37-3.38 (from memory):
C = (G^T C_D^-1 G + C_M^-1)^-1, m = C (G^T C_D^-1 d + C_M^-1 m_prior).
"""
import numpy as np
import pytest

from tem.invert.diagnostics import ess, ess_bulk, ess_tail, rhat, split_chains
from tem.invert.mcmc import adaptive_metropolis


def ar1(phi, chains, n, seed, shift=None):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal((chains, n))
    x = np.empty((chains, n))
    x[:, 0] = e[:, 0] / np.sqrt(1 - phi ** 2)      # stationary start
    for t in range(1, n):
        x[:, t] = phi * x[:, t - 1] + e[:, t]
    if shift is not None:
        x += np.asarray(shift)[:, None]
    return x


@pytest.mark.parametrize("phi", [0.0, 0.5, 0.9])
def test_ess_of_an_ar1_chain(phi):
    x = ar1(phi, 4, 20000, seed=11)
    expected = x.size * (1 - phi) / (1 + phi)      # AR(1) autocorrelation time (from memory)
    # the estimator's relative error is a few % at this length (common practice, no source)
    assert ess(x) == pytest.approx(expected, rel=0.12)
    assert ess_bulk(x) == pytest.approx(expected, rel=0.12)
    # indicators of a Gaussian AR(1) are less correlated than the process (their correlation is
    # below |rho| at every lag; from memory): tail ESS between the process ESS and S
    assert 0.88 * expected < ess_tail(x) < 1.12 * x.size


def test_rhat_near_one_for_mixed_chains_and_large_for_stuck_ones():
    x = ar1(0.5, 4, 4000, seed=3)
    assert rhat(x) < 1.01                            # Vehtari et al. 2021 recommend < 1.01
    stuck = ar1(0.5, 4, 4000, seed=3, shift=[0.0, 0.0, 0.0, 1.5])
    assert rhat(stuck) > 1.1
    # a trend within every chain is caught by splitting (the halves differ)
    trend = x + np.linspace(0, 3, x.shape[1])[None, :]
    assert rhat(trend) > 1.1
    # a chain whose spread differs is caught by the folded version
    wide = x.copy()
    wide[0] *= 4.0
    assert rhat(wide) > 1.05
    assert split_chains(x).shape == (8, 2000)


def test_adaptive_metropolis_recovers_a_linear_gaussian_posterior():
    rng = np.random.default_rng(5)
    P = 4
    G = rng.standard_normal((12, P))
    G[:, 1] *= 0.2                                   # badly scaled: the adaptation must learn it
    m_true = np.array([1.0, -2.0, 0.5, 3.0])
    sd_d = 0.3
    d = G @ m_true + sd_d * rng.standard_normal(12)
    m_pr, sd_m = np.zeros(P), 2.0
    # Tarantola (2005) eqs. 3.37-3.38
    C = np.linalg.inv(G.T @ G / sd_d ** 2 + np.eye(P) / sd_m ** 2)
    mean = C @ (G.T @ d / sd_d ** 2 + m_pr / sd_m ** 2)

    def logp(q):
        r = (d - G @ q) / sd_d
        return -0.5 * (r @ r) - 0.5 * np.sum(((q - m_pr) / sd_m) ** 2)

    starts = mean + 3.0 * rng.standard_normal((4, P))   # far off, and a wrong start covariance
    res = adaptive_metropolis(logp, starts, np.eye(P), n_draws=3000, n_burn=2000, seed=1,
                              lower=np.full(P, -50.0), upper=np.full(P, 50.0))
    flat = res.draws.reshape(-1, P)
    sd = np.sqrt(np.diag(C))
    # Monte Carlo error of the mean is sd / sqrt(ESS), ESS ~ 1000 here: 0.15 sd is > 4 errors
    assert np.all(np.abs(flat.mean(axis=0) - mean) < 0.15 * sd)
    assert np.allclose(flat.std(axis=0), sd, rtol=0.1)
    assert np.allclose(np.corrcoef(flat.T), C / np.outer(sd, sd), atol=0.1)
    assert np.all((res.accept_rate > 0.1) & (res.accept_rate < 0.5))
    assert max(rhat(res.draws[:, :, k]) for k in range(P)) < 1.02


def test_same_seed_same_draws():
    def logp(q):
        return -0.5 * float(q @ q)

    kw = dict(n_draws=100, n_burn=100, lower=np.full(2, -9.0), upper=np.full(2, 9.0))
    a = adaptive_metropolis(logp, np.zeros((2, 2)), np.eye(2), seed=4, **kw)
    b = adaptive_metropolis(logp, np.zeros((2, 2)), np.eye(2), seed=4, **kw)
    c = adaptive_metropolis(logp, np.zeros((2, 2)), np.eye(2), seed=5, **kw)
    assert np.array_equal(a.draws, b.draws) and not np.array_equal(a.draws, c.draws)


def test_annealed_burn_in_leaves_a_minor_mode():
    """Two well separated narrow modes (weights 0.05 at -5 and 0.95 at +5, sd 0.1): chains
    started in the minor one stay there without annealing and reach the major one with it
    (at beta = 0.01 the modes have sd 1 and the barrier is exp(-12) instead of exp(-1250))."""
    def parts(q):
        x = float(q[0])
        return (float(np.logaddexp(np.log(0.05) - 50 * (x + 5) ** 2,
                                   np.log(0.95) - 50 * (x - 5) ** 2)), 0.0)

    def logp(q):
        return sum(parts(q))

    kw = dict(n_draws=400, n_burn=1000, seed=2, lower=np.array([-20.0]), upper=np.array([20.0]))
    starts = np.full((4, 1), -5.0)
    stay = adaptive_metropolis(logp, starts, np.eye(1) * 0.01, **kw)
    move = adaptive_metropolis(logp, starts, np.eye(1) * 0.01, anneal=0.4, log_parts=parts, **kw)
    assert stay.draws.mean() < -4.5
    assert move.draws.mean() > 4.5
