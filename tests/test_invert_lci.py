"""Laterally constrained inversion machinery on a toy profile.

Method: Auken & Christiansen 2004, Geophysics 69(3), 752-761 (LCI: 1D models
tied by constraints on neighbour differences). The checks are properties of
regularised least squares, with seeded noise.
"""
import numpy as np
import pytest

from tem.invert.lci import lateral_roughness, lci, lci_operator
from tem.invert.smooth import occam

M = 16
Z = np.linspace(0.0, 1.0, M)
T = np.linspace(0.0, 1.0, 12)
K = np.exp(-((T[:, None] - Z[None, :]) / 0.15) ** 2)
K /= K.sum(axis=1, keepdims=True)


def toy_fwd(m):
    e = np.exp(0.5 * m)
    return K @ e, K * (0.5 * e)[None, :]


def test_lateral_operator_structure():
    L = lateral_roughness(3, 2, positions=[0.0, 100.0, 300.0]).toarray()
    assert L.shape == (4, 6)
    assert np.allclose(L @ np.ones(6), 0.0)          # constants are not penalised
    # spacing 100 vs 200 m, median 150: weights sqrt(1.5) and sqrt(0.75)
    assert L[0, 0] == pytest.approx(-np.sqrt(1.5))
    assert L[2, 2] == pytest.approx(-np.sqrt(0.75))
    R = lci_operator(3, 2, 1.0)
    assert R.shape == (3 * 1 + 4, 6)


def test_lci_constant_profile_returns_constant():
    m_true = np.full(M, np.log(30.0))
    d = toy_fwd(m_true)[0]
    res = lci([toy_fwd] * 4, [d] * 4, [0.01 * d] * 4, np.full(M, np.log(3.0)), lateral_weight=1.0,
              target=1.0, max_iter=20, misfit_drop=0.3)
    assert np.allclose(res.m, m_true, atol=0.01)
    assert np.all(res.chi2_station <= 1.02)


def test_lci_beats_independent_inversions_on_smoothly_varying_truth():
    rng = np.random.default_rng(11)
    S = 8
    truths, data, stds = [], [], []
    for s in range(S):
        zc = 0.35 + 0.3 * s / (S - 1)          # conductor deepens smoothly along the profile
        mt = np.log(100.0) - 2.0 * (Z > zc)
        dt = toy_fwd(mt)[0]
        sd = 0.02 * dt
        truths.append(mt)
        data.append(dt + sd * rng.standard_normal(dt.size))
        stds.append(sd)
    m0 = np.full(M, np.log(50.0))
    indep = np.array([occam(toy_fwd, data[s], stds[s], m0, target=1.0, max_iter=20, misfit_drop=0.3).m
                      for s in range(S)])
    joint = lci([toy_fwd] * S, data, stds, m0, lateral_weight=1.0, target=1.0, max_iter=20, misfit_drop=0.3)
    err_i = np.sqrt(np.mean((indep - np.array(truths)) ** 2))
    err_j = np.sqrt(np.mean((joint.m - np.array(truths)) ** 2))
    assert joint.occam.chi2 <= 1.02
    assert err_j < err_i


def test_pick_depth_anchors_at_the_conductor():
    from tem.invert.lci import pick_depth
    h = np.full(9, 100.0)                       # centres 50, 150, ..., 850; half-space at 900
    rho = np.array([40.0, 200.0, 500.0, 500.0, 100.0, 10.0, 8.0, 50.0, 500.0, 1000.0])
    # a conductive surface layer (40 < 63) must not be picked; the conductor's top is between
    # centres 450 (100 ohm-m) and 550 (10 ohm-m): ln-linear crossing of 63 ohm-m
    z = pick_depth(h, np.log(rho), 63.0, below=0.0)
    f = (np.log(100.0) - np.log(63.0)) / (np.log(100.0) - np.log(10.0))
    assert z == pytest.approx(450.0 + 100.0 * f)
    assert np.isnan(pick_depth(h, np.log(np.full(10, 100.0)), 63.0))
