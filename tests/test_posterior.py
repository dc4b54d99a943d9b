"""Posterior sampling of layered models (tem.invert.posterior) against the linear-Gaussian
answer where the problem is nearly linear, and seed consistency.

With small noise the forward response is nearly linear in the ln parameters over the
posterior's width, so the posterior is nearly Gaussian with covariance
C = (J^T C_D^-1 J + C_M^-1)^-1 and mean m = m0 + C (J^T C_D^-1 (d - g(m0)) + C_M^-1 (m_prior - m0))
linearised at the true model m0 (Tarantola 2005, "Inverse problem theory", eqs. 3.37-3.38,
the Gaussian linear posterior, from memory; one Gauss-Newton step from m0). Forward:
tem.forward step-off responses of a grounded wire (checked against empymod in
tests/test_forward_empymod.py).
"""
import numpy as np
import pytest

from tem.forward import LayeredModel, Receiver, Simulation, Wire
from tem.invert.fewlayer import Prior
from tem.invert.posterior import depth_tops, sample_posterior, target_layer, target_tops

TIMES = np.geomspace(1e-3, 0.3, 14)


@pytest.fixture(scope="module")
def sim():
    return Simulation(Wire(a=(-750.0, 0.0), b=(750.0, 0.0)),
                      [Receiver("ex", (0.0, 600.0)), Receiver("dbzdt", (0.0, 600.0))], times=TIMES)


def problem(sim, rho, h, rel, seed):
    true = LayeredModel(thickness=h, resistivity=rho)
    d0, J = sim.jacobian(true, thickness=len(h) > 0)
    d0, J = d0.ravel(), J.reshape(d0.size, -1)
    std = rel * np.abs(d0)
    d = d0 + std * np.random.default_rng(seed).standard_normal(d0.size)

    def predict(r, t):
        return sim.predict(LayeredModel(thickness=t, resistivity=r)).ravel()
    return predict, d, std, J, d0


def linear_gaussian(J, std, d, d0, m0, prior_rows=()):
    """Tarantola (2005) eqs. 3.37-3.38 linearised at m0; prior_rows: (index, mean, std)."""
    A = J / std[:, None]
    H = A.T @ A
    g = A.T @ ((d - d0) / std)
    for k, mu, s in prior_rows:
        H[k, k] += 1.0 / s ** 2
        g[k] += (mu - m0[k]) / s ** 2
    C = np.linalg.inv(H)
    return m0 + C @ g, C


def test_halfspace_matches_the_linear_gaussian_posterior(sim):
    rho = np.array([80.0])
    predict, d, std, J, d0 = problem(sim, rho, np.array([]), 0.005, seed=1)
    mean, C = linear_gaussian(J, std, d, d0, np.log(rho))
    # start 5 sd off with a covariance 25x too wide: the chains must find the answer
    start = np.exp(mean + 5 * np.sqrt(C[0, 0]))
    post = sample_posterior(predict, d, std, start, np.array([]), 25 * C, priors=(),
                            n_draws=1500, n_burn=800, chains=4, seed=3)
    x = post.flat[:, 0]
    sd = np.sqrt(C[0, 0])
    # Monte Carlo error of the mean sd / sqrt(ESS) with ESS > 300: 0.25 sd is > 4 errors
    assert post.min_ess > 300 and post.max_rhat < 1.02
    assert abs(x.mean() - mean[0]) < 0.25 * sd
    assert x.std() == pytest.approx(sd, rel=0.12)
    assert post.chi2_median == pytest.approx(1.0, abs=0.6)      # chi-square per datum ~ 1


def test_two_layers_with_a_prior_match_the_linear_gaussian_posterior(sim):
    rho, h = np.array([30.0, 300.0]), np.array([250.0])
    predict, d, std, J, d0 = problem(sim, rho, h, 0.005, seed=2)
    m0 = np.log(np.concatenate([rho, h]))
    prior = Prior("resistivity", 1, 250.0, 0.3)               # ln std 0.3 on the half-space
    mean, C = linear_gaussian(J, std, d, d0, m0, [(1, np.log(250.0), 0.3)])
    post = sample_posterior(predict, d, std, rho * 1.3, h * 0.8, 16 * C, priors=(prior,),
                            n_draws=2000, n_burn=1500, chains=4, seed=5)
    flat = post.flat
    sd = np.sqrt(np.diag(C))
    assert post.max_rhat < 1.05 and post.min_ess > 200
    assert np.all(np.abs(flat.mean(axis=0) - mean) < 0.3 * sd)   # > 4 Monte Carlo errors
    assert np.allclose(flat.std(axis=0), sd, rtol=0.15)
    # the prior pulls the half-space: the posterior sd is below the prior's 0.3
    assert flat[:, 1].std() < 0.3


def test_two_seeds_give_consistent_intervals_and_one_seed_the_same_draws(sim):
    rho, h = np.array([30.0, 300.0]), np.array([250.0])
    predict, d, std, J, d0 = problem(sim, rho, h, 0.02, seed=4)
    _, C = linear_gaussian(J, std, d, d0, np.log(np.concatenate([rho, h])))
    kw = dict(priors=(), n_draws=1000, n_burn=800, chains=4)
    a = sample_posterior(predict, d, std, rho, h, C, seed=1, **kw)
    b = sample_posterior(predict, d, std, rho, h, C, seed=2, **kw)
    a2 = sample_posterior(predict, d, std, rho, h, C, seed=1, **kw)
    assert np.array_equal(a.draws, a2.draws) and not np.array_equal(a.draws, b.draws)
    za, zb = depth_tops(a.flat, 2)[:, 0], depth_tops(b.flat, 2)[:, 0]
    ess = min(a.min_ess, b.min_ess)
    sd = 0.5 * (za.std() + zb.std())
    for p in (0.1, 0.5, 0.9):
        # Monte Carlo error of a quantile of a near-Gaussian: sd sqrt(p(1-p)) / phi(z_p) / sqrt(ESS)
        # (from memory); two independent runs differ by < 4 sqrt(2) of it
        zp = {0.1: -1.2816, 0.5: 0.0, 0.9: 1.2816}[p]
        mcse = sd * np.sqrt(p * (1 - p)) / (np.exp(-zp ** 2 / 2) / np.sqrt(2 * np.pi)) / np.sqrt(ess)
        assert abs(np.quantile(za, p) - np.quantile(zb, p)) < 4 * np.sqrt(2) * mcse
    # the target (most conductive below the top layer) is the half-space: its top is the interface
    k = target_layer(rho, 1)
    assert k == 1 and np.array_equal(target_tops(a.flat, 2, k), za)
    assert target_layer(np.array([30.0, 10.0, 5.0, 50.0]), 1) == 2 and target_layer(rho, 2) is None
