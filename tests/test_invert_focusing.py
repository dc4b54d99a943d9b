"""Focusing (minimum-gradient-support) regularisation of the smooth mesh and the LCI.

Method: Portniaguine & Zhdanov (1999), "Focusing geophysical inversion images",
Geophysics 64(3), 874-887 (the minimum gradient support stabiliser
sum g^2 / (g^2 + beta^2), minimised by reweighted least squares); for TEM, Vignoli et
al. (2015), Geophysical Prospecting 63, 243-255.
"""
import numpy as np
import pytest
from scipy import sparse

from tem.invert.lci import lci
from tem.invert.smooth import focusing_operator, occam, roughness_matrix
from tem.invert.station import InversionSettings

from test_invert_smooth import M, Z, toy_fwd


def test_focusing_weights_follow_the_stabiliser():
    # reweighting W = beta / sqrt(g^2 + beta^2) makes ||W R m||^2 equal beta^2 times the
    # stabiliser sum g^2/(g^2+beta^2) at the current model (Portniaguine & Zhdanov 1999)
    beta = 0.2
    m = np.array([0.0, 0.0, beta, beta + 3.0])
    R0 = 2.0 * roughness_matrix(4)           # a row scale is removed before g is formed
    W = focusing_operator(R0, m, beta)
    g = np.diff(m)
    assert np.allclose(np.abs(W).max(axis=1), 2.0 * beta / np.sqrt(g ** 2 + beta ** 2))
    assert np.abs(W[0]).max() == pytest.approx(2.0)             # flat: the smooth weight
    assert np.abs(W[1]).max() == pytest.approx(2.0 / np.sqrt(2))
    stab = np.sum(g ** 2 / (g ** 2 + beta ** 2))
    assert np.sum((W @ m / 2.0) ** 2) == pytest.approx(beta ** 2 * stab)
    Ws = focusing_operator(sparse.csr_matrix(R0), m, beta)     # sparse (LCI) path
    assert np.allclose(Ws.toarray(), W)


@pytest.fixture(scope="module")
def blocky():
    """A two-block toy model (a factor-10 step at Z = 0.5) with 1 % noise."""
    m_true = np.where(Z < 0.5, np.log(2.0), np.log(20.0))
    d0 = toy_fwd(m_true)[0]
    std = 0.01 * np.abs(d0)
    d = d0 + std * np.random.default_rng(1).standard_normal(d0.size)
    return m_true, d, std


def test_focusing_recovers_a_sharp_step(blocky):
    m_true, d, std = blocky
    kw = dict(target=1.0, max_iter=60, misfit_drop=0.8)
    smooth = occam(toy_fwd, d, std, np.full(M, m_true.mean()), **kw)
    focus = occam(toy_fwd, d, std, np.full(M, m_true.mean()), focusing=0.3, **kw)
    rms = [np.sqrt(np.mean((r.m - m_true) ** 2)) for r in (smooth, focus)]
    # both fit (target chi2 1, Constable et al. 1987); the focused model is the blocky
    # truth within 0.1 in ln(rho) rms where the smooth one smears the step (0.25)
    assert smooth.chi2 <= 1.01 and focus.chi2 <= 1.01
    assert rms[1] < 0.1 < 0.2 < rms[0]
    assert np.abs(np.diff(focus.m)).max() > 0.9 * np.log(10.0)     # one jump carries the step
    assert int(np.argmax(np.abs(np.diff(focus.m)))) == int(np.argmax(Z >= 0.5)) - 1


def test_lci_accepts_focusing(blocky):
    m_true, d, std = blocky
    res = lci([toy_fwd] * 3, [d] * 3, [std] * 3, np.full(M, m_true.mean()), lateral_weight=1.0,
              target=1.0, max_iter=60, misfit_drop=0.8, focusing=0.3)
    assert np.all(res.chi2_station <= 1.2)
    assert np.sqrt(np.mean((res.m - m_true) ** 2)) < 0.1


def test_regularisation_setting_is_checked():
    from tem.errors import TemInputError
    assert InversionSettings(regularisation="focusing").focusing_parameter > 0
    with pytest.raises(TemInputError):
        InversionSettings(regularisation="blocky")
    with pytest.raises(TemInputError):
        InversionSettings(focusing_parameter=0.0)
