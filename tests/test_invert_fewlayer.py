"""Levenberg-Marquardt few-layer machinery on toy problems with known answers.

Methods: Levenberg 1944 (Quart. Appl. Math. 2); Marquardt 1963 (J. SIAM 11).
Linear-Gaussian posterior covariance (G^T W G)^-1: Gauss-Markov least squares,
e.g. Aster, Borchers & Thurber 2013, "Parameter estimation and inverse
problems", ch. 2 (from memory).
"""
import numpy as np
import pytest

from tem.invert.fewlayer import Prior, block_smooth_model, fewlayer_inversion, levenberg_marquardt

T = np.linspace(0.1, 5.0, 40)


def decay_fwd(q):
    """d = exp(q0) exp(-t / exp(q1)); parameters are logs of amplitude and time constant."""
    a, b = np.exp(q[0]), np.exp(q[1])
    e = np.exp(-T / b)
    d = a * e
    J = np.column_stack([d, d * T / b])
    return d, J


def test_lm_recovers_noise_free_parameters():
    d = decay_fwd(np.log([3.0, 1.7]))[0]
    res = levenberg_marquardt(decay_fwd, d, 0.01 * d, np.log([1.0, 0.3]))
    assert np.exp(res.q) == pytest.approx([3.0, 1.7], rel=1e-5)
    assert res.chi2 < 1e-8


def test_lm_bounds_are_respected():
    d = decay_fwd(np.log([3.0, 1.7]))[0]
    res = levenberg_marquardt(decay_fwd, d, 0.01 * d, np.log([1.0, 0.3]),
                              lower=np.log([0.1, 0.1]), upper=np.log([10.0, 1.0]))
    assert np.exp(res.q[1]) == pytest.approx(1.0, rel=1e-12)   # clamped at the upper bound


def layered_linear_fwd(G):
    """A 'layered' forward that is linear in the ln parameters: d = G p."""
    def f(rho, h):
        p = np.log(np.concatenate([rho, h]))
        return G @ p, G.copy()
    return f


def test_posterior_covariance_equals_gauss_markov_for_linear_problem():
    rng = np.random.default_rng(3)
    G = rng.normal(size=(30, 5))          # 3 resistivities, 2 thicknesses
    p_true = np.log([10.0, 100.0, 5.0, 50.0, 300.0])
    std = np.full(30, 0.05)
    d = G @ p_true + std * rng.standard_normal(30)
    res = fewlayer_inversion(layered_linear_fwd(G), d, std, [20, 20, 20], [100, 100],
                             res_bounds=(1e-3, 1e6), thk_bounds=(1e-3, 1e6))
    Gw = G / std[:, None]
    C = np.linalg.inv(Gw.T @ Gw)
    assert res.ln_std == pytest.approx(np.sqrt(np.diag(C)), rel=1e-6)
    assert res.log10_res_std == pytest.approx(np.sqrt(np.diag(C))[:3] / np.log(10), rel=1e-6)
    # depth to top of layer 2 = h0 + h1, first-order propagation with gradient (h0, h1)
    h = res.thickness
    g = h
    assert res.depth_std[2] == pytest.approx(np.sqrt(g @ C[3:, 3:] @ g), rel=1e-6)
    assert np.allclose(np.diag(res.correlation), 1.0)


def test_linearised_std_matches_monte_carlo_on_nonlinear_problem():
    # 200 noisy realisations; empirical spread of the estimates vs the linearised std
    rng = np.random.default_rng(7)
    q_true = np.log([3.0, 1.7])
    d0 = decay_fwd(q_true)[0]
    std = 0.03 * d0
    est, lin = [], None
    for _ in range(200):
        d = d0 + std * rng.standard_normal(d0.size)
        r = levenberg_marquardt(decay_fwd, d, std, np.log([2.0, 1.0]))
        est.append(r.q)
        if lin is None:
            lin = np.sqrt(np.diag(np.linalg.inv(r.A.T @ r.A)))
    emp = np.std(est, axis=0)
    # sampling error of a std from 200 samples is ~5 %; allow 20 % for nonlinearity
    assert emp == pytest.approx(lin, rel=0.2)


def test_fixed_parameter_and_prior():
    rng = np.random.default_rng(4)
    G = rng.normal(size=(30, 5))
    p_true = np.log([10.0, 100.0, 5.0, 50.0, 300.0])
    std = np.full(30, 0.05)
    d = G @ p_true
    fixed = Prior("resistivity", 1, 80.0)                 # fixed at a wrong value
    tight = Prior("thickness", 0, 60.0, std=1e-4)         # very strong prior
    res = fewlayer_inversion(layered_linear_fwd(G), d, std, [20, 20, 20], [100, 100],
                             priors=[fixed, tight], res_bounds=(1e-3, 1e6), thk_bounds=(1e-3, 1e6))
    assert res.resistivity[1] == pytest.approx(80.0, rel=1e-14)   # exp(ln 80) round-off only
    assert res.ln_std[1] == 0.0
    assert res.thickness[0] == pytest.approx(60.0, rel=1e-3)
    assert res.ln_std[3] < 2e-4


def test_depth_prior_pulls_depth():
    rng = np.random.default_rng(5)
    G = rng.normal(size=(30, 5)) * 0.01   # weak data
    std = np.full(30, 0.05)
    d = G @ np.log([10.0, 100.0, 5.0, 50.0, 300.0])
    res = fewlayer_inversion(layered_linear_fwd(G), d, std, [20, 20, 20], [100, 100],
                             priors=[Prior("depth", 2, 500.0, std=1.0)],
                             res_bounds=(1e-3, 1e6), thk_bounds=(1e-3, 1e6))
    assert res.depth_top[2] == pytest.approx(500.0, abs=3.0)
    assert res.depth_std[2] <= 1.0 + 1e-9


def test_prior_validation():
    with pytest.raises(ValueError, match="prior kind"):
        Prior("porosity", 0, 1.0)
    with pytest.raises(ValueError, match="prior value"):
        Prior("resistivity", 0, -1.0)


def test_block_smooth_model_places_interfaces_at_jumps():
    h = np.full(19, 10.0)
    m = np.log(np.r_[np.full(5, 100.0), np.full(8, 10.0), np.full(7, 1000.0)])
    rho, thk = block_smooth_model(m, h, 3)
    assert rho == pytest.approx([100.0, 10.0, 1000.0], rel=1e-9)
    assert np.cumsum(thk) == pytest.approx([50.0, 130.0])


def test_unconstrained_parameter_std_is_capped_at_the_bounds():
    # a toy linear problem in log parameters: the data see ln rho_0 and ln h_0 well and
    # ln rho_1 not at all. Its linearised std would be 0 from the pseudo-inverse of the
    # singular problem ("known exactly"), or huge when it is seen a little (an independent
    # review found 288 decades in a models file); no spread can
    # exceed that of a uniform distribution over the bounds, (hi - lo)/sqrt(12) (a textbook
    # moment of the uniform distribution), so that is what is reported
    from tem.invert.fewlayer import fewlayer_inversion
    t = np.linspace(0.0, 1.0, 12)
    cap = np.log10(1e5 / 0.1) / np.sqrt(12.0)                  # 1.73 decades
    for weak in (0.0,):
        A = np.stack([1.0 + t, weak * t, 0.5 - t], axis=1)     # d = A @ [ln r0, ln r1, ln h0]
        d = A @ np.log([30.0, 300.0, 100.0])

        def fwd(rho, h, A=A):
            p = np.log(np.concatenate([rho, h]))
            return A @ p, A
        res = fewlayer_inversion(fwd, d, np.full(t.size, 0.01), [10.0, 100.0], [50.0])
        assert res.log10_res_std[1] == pytest.approx(cap), weak
        assert res.log10_res_std[0] < 0.01 and np.isfinite(res.thickness_std).all()
