"""Occam smooth inversion on toy problems with known answers (no EM kernel).

Method: Constable, Parker & Constable 1987, Geophysics 52(3), 289-300 (Occam:
smoothest model at the target misfit). Chi-square statistics: for Gaussian errors
chi^2 over N data has mean N and standard deviation sqrt(2N) (textbook).
"""
import numpy as np
import pytest

from tem.invert.smooth import (best_halfspace, chi2_per_datum, diffusion_depth, log_mesh,
                               occam, roughness_matrix, solve_regularised)

M = 20
Z = np.linspace(0.0, 1.0, M)
T = np.linspace(0.0, 1.0, 25)
# smoothing kernel: each datum averages the model around its own position
K = np.exp(-((T[:, None] - Z[None, :]) / 0.12) ** 2)
K /= K.sum(axis=1, keepdims=True)


def toy_fwd(m):
    """Nonlinear toy: d = K exp(m/2); J = K diag(exp(m/2))/2."""
    e = np.exp(0.5 * m)
    return K @ e, K * (0.5 * e)[None, :]


def test_diffusion_depth_reference_value():
    # sqrt(2 t rho / mu0) (Ward & Hohmann 1988, from memory):
    # rho = 100 ohm-m, t = 1e-3 s -> 398.94 m
    assert diffusion_depth(100.0, 1e-3) == pytest.approx(398.94, abs=0.01)
    assert diffusion_depth(10.0, 1e-2) == pytest.approx(398.94, abs=0.01)


def test_log_mesh_increasing_and_spans_depths():
    h = log_mesh(30, 10.0, 3000.0)
    assert h.size == 29
    assert np.all(np.diff(h) > 0)                 # log-increasing thickness
    assert h[0] == pytest.approx(10.0)
    assert np.cumsum(h)[-1] == pytest.approx(3000.0)


def test_roughness_matrix_annihilates_constants():
    R = roughness_matrix(5)
    assert np.allclose(R @ np.full(5, 3.0), 0.0)
    assert np.allclose(R @ np.arange(5.0), 1.0)


def test_occam_constant_truth_returns_constant():
    # Noise-free data of a uniform model: the smoothest model at the target is that model
    # (zero roughness, zero misfit) -- property of the Occam objective (Constable et al. 1987).
    m_true = np.full(M, np.log(50.0))
    d = toy_fwd(m_true)[0]
    std = 0.01 * np.abs(d)
    res = occam(toy_fwd, d, std, np.full(M, np.log(5.0)), target=1.0, max_iter=20, misfit_drop=0.3)
    assert np.allclose(res.m, m_true, atol=0.01)
    assert res.chi2 <= 1.0 + 0.01


def test_occam_reaches_target_and_is_smoothest_at_target():
    rng = np.random.default_rng(1)
    m_true = np.log(20.0) + 1.5 * np.exp(-((Z - 0.5) / 0.15) ** 2)
    d_true = toy_fwd(m_true)[0]
    std = 0.01 * d_true
    d = d_true + std * rng.standard_normal(d_true.size)
    res = occam(toy_fwd, d, std, np.full(M, np.log(10.0)), target=1.0, max_iter=20, misfit_drop=0.3)
    assert res.converged, res.message
    # target chi2 = 1 reached within the stated convergence tolerance (1 %)
    assert 0.9 <= res.chi2 <= 1.01
    # smoothest at target in the final linearisation: a 20 % larger mu misses the target
    d0, J = toy_fwd(res.m)
    w = 1 / std
    rhat = (d - d0) * w + (J * w[:, None]) @ res.m
    R = roughness_matrix(M)
    m_rougher_mu = solve_regularised(J * w[:, None], rhat, R, res.mu * 1.2 ** 4)
    assert chi2_per_datum(d, toy_fwd(m_rougher_mu)[0], std) > 1.0
    # and the anomaly is recovered in shape (peak in the middle third)
    assert 0.33 < Z[np.argmax(res.m)] < 0.67


def test_occam_unreachable_target_gives_least_misfit():
    # errors far too small: target out of reach -> report, with misfit reduced
    m_true = np.log(20.0) + 1.5 * (Z > 0.5)
    d = toy_fwd(m_true)[0] * (1 + 0.05 * np.sin(40 * T))
    std = 1e-6 * d
    m0 = np.full(M, np.log(10.0))
    c0 = chi2_per_datum(d, toy_fwd(m0)[0], std)
    res = occam(toy_fwd, d, std, m0, target=1.0, max_iter=8, misfit_drop=0.3)
    assert not res.converged
    assert res.chi2 < 0.01 * c0


def test_occam_rejects_bad_errors():
    d = np.ones(3)
    with pytest.raises(ValueError, match="error"):
        occam(lambda m: (np.ones(3), np.ones((3, 2))), d, np.zeros(3), np.zeros(2), target=1.0,
              max_iter=20, misfit_drop=0.3)


def test_best_halfspace_recovers_uniform_value():
    m_true = np.full(M, np.log(123.0))
    d = toy_fwd(m_true)[0]
    rho, c = best_halfspace(lambda x: toy_fwd(np.full(M, x))[0], d, 0.01 * d)
    assert rho == pytest.approx(123.0, rel=1e-3)
    assert c < 1e-4


def test_sparse_and_dense_regularised_solves_agree():
    from scipy import sparse
    rng = np.random.default_rng(2)
    Jw = rng.normal(size=(25, M))
    rhat = rng.normal(size=25)
    R = roughness_matrix(M)
    a = solve_regularised(Jw, rhat, R, 0.3, m_ref=np.ones(M), ref_weight=0.1)
    b = solve_regularised(sparse.csr_matrix(Jw), rhat, sparse.csr_matrix(R), 0.3,
                          m_ref=np.ones(M), ref_weight=0.1)
    assert np.allclose(a, b, rtol=1e-8, atol=1e-10)


def test_posterior_std_is_bounded_by_the_reference_term():
    # Gaussian-prior reading of the regularisation (Tarantola 2005, from memory): with no
    # data sensitivity the variance is that of the prior mu (R^T R + w I); its largest
    # eigenvalue of the inverse is 1/(mu w), so std <= 1/sqrt(mu w) in ln units.
    from tem.invert.smooth import roughness_matrix
    from tem.invert.station import smooth_posterior_std
    M, mu, w = 20, 3.0, 0.01
    J = np.zeros((5, M))
    J[:, :4] = 1.0                      # data see only the top four layers
    R = roughness_matrix(M)
    R = R.toarray() if hasattr(R, "toarray") else R
    std = smooth_posterior_std(J, np.ones(5), R, mu, ref_weight=w)
    assert np.all(std <= 1 / np.sqrt(mu * w) / np.log(10) + 1e-12)
    assert std[0] < std[-1]             # resolved at the top, prior spread at depth
