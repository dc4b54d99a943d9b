"""The compiled kernel and the speed devices around it, against independent computations.

* the vectorisable exp and sin/cos against numpy's (C library) functions;
* the SIMD layered-earth kernel against a plain numpy evaluation of the textbook
  TE/TM recursion (Ward & Hohmann 1988, "Electromagnetic theory for geophysical
  applications", in Nabighian (ed.), EM Methods in Applied Geophysics vol. 1, SEG,
  layered-earth section), without depth truncation;
* the frequency grid (8 per decade, degree-7 spline) and the key_101_2012 Hankel
  filter against the reference-grade set-up (kernel at every filter frequency,
  key_401_2009 Hankel filter: Key 2009, Geophysics 74(2), F9-F20);
* the batched predict against single calls.
"""
import numba as nb
import numpy as np
import pytest

from tem.forward import (LayeredModel, PolygonLoop, Receiver, Simulation,
                         Waveform, Wire)
from tem.forward.kernel import MU0, fused_spectra
from tem.forward.vecmath import exp_neg, sincos


@nb.njit
def _apply(x, y):
    e = np.empty(x.size)
    s = np.empty(y.size)
    c = np.empty(y.size)
    for i in range(x.size):
        e[i] = exp_neg(x[i])
        s[i], c[i] = sincos(y[i])
    return e, s, c


def test_vectorisable_exp_and_sincos_match_numpy():
    # the bounds stated in tem/forward/vecmath.py (rounding of a degree-13/17 polynomial)
    x = -np.r_[np.geomspace(1e-12, 708.0, 5000), 0.0]
    y = np.r_[0.0, np.geomspace(1e-12, 1e4, 5000)]
    e, s, c = _apply(x, y)
    assert np.max(np.abs(e / np.exp(x) - 1)) < 2e-14
    assert np.max(np.abs(s - np.sin(y))) < 3e-15
    assert np.max(np.abs(c - np.cos(y))) < 3e-15


def _textbook(lam, omega, res, thk):
    """R_TE and the TM input impedance Z by the tanh recursion, plain numpy, all layers."""
    iwm = 1j * omega * MU0
    gam = np.sqrt(lam[:, None] ** 2 + iwm / res[None, :])
    Y = gam[:, -1].copy()
    Z = gam[:, -1] * res[-1]
    for n in range(res.size - 2, -1, -1):
        t = np.tanh(gam[:, n] * thk[n])
        g, k = gam[:, n], gam[:, n] * res[n]
        Y = g * (Y + g * t) / (g + Y * t)
        Z = k * (Z + k * t) / (k + Z * t)
    return (lam - Y) / (lam + Y), Z - res[0] * lam - iwm / (2 * lam)


@pytest.mark.parametrize("omega", [0.0, 1e-2, 1e2, 1e5])
def test_simd_kernel_matches_textbook_recursion(omega):
    # unit coefficient rows pick single wavenumbers out of the fused sum; lam is padded
    # to whole SIMD blocks like Simulation does. Tolerance 1e-11: rounding only (the
    # depth truncation at exp(-40) is far below it).
    lam = np.geomspace(1e-5, 0.5, 64)
    res = np.array([30.0, 500.0, 8.0, 100.0, 2000.0])
    thk = np.array([20.0, 900.0, 600.0, 500.0])
    eye = np.eye(lam.size)
    zero = np.zeros_like(eye)
    F_te, _ = fused_spectra(lam, np.array([omega]), res, thk, eye, zero, zero, need_tm=False)
    F_tm, _ = fused_spectra(lam, np.array([omega]), res, thk, zero, zero, eye, need_tm=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        rte, btm = _textbook(lam, omega, res, thk)
    np.testing.assert_allclose(F_te[0], rte, rtol=1e-11, atol=1e-14)
    np.testing.assert_allclose(F_tm[0], btm, rtol=1e-11, atol=1e-11 * np.max(np.abs(btm)))


def _close(a, b, floor):
    """Max deviation relative to max(|b|, floor * peak): relative where the signal is large."""
    peak = np.max(np.abs(b), axis=-1, keepdims=True)
    return np.max(np.abs(a - b) / np.maximum(np.abs(b), floor * peak))


MODELS = [LayeredModel([20.0, 900.0, 600.0], [30.0, 500.0, 8.0, 2000.0]),
          LayeredModel([400.0, 20.0], [200.0, 2.0, 200.0]),
          LayeredModel([50.0, 150.0], [5.0, 50.0, 3000.0])]


def test_frequency_grid_and_hankel_filter_against_reference_grade_setup():
    # Stated accuracy test of the two speed choices (docs/forward.md "Where the time goes"):
    # 8 frequencies per decade with a degree-7 spline, and the 101-point key_101_2012
    # Hankel filter, against the kernel at every Fourier-filter frequency and the
    # 401-point key_401_2009. Bound 3e-4 relative (floor 1e-3 of the peak), 15x below
    # the empymod acceptance bound of 5e-3; measured about 1e-4.
    t = np.geomspace(1e-5, 1.0, 21)
    rx = [Receiver("ex", (1000.0, 1732.0)), Receiver("ex", (0.0, 150.0)),
          Receiver("dbzdt", (1000.0, 1732.0)), Receiver("dbzdt", (0.0, 150.0))]
    fast = Simulation(Wire((-500.0, 0.0), (500.0, 0.0)), rx, times=t)
    ref = Simulation(Wire((-500.0, 0.0), (500.0, 0.0)), rx, times=t, freq_per_decade=None,
                     hankel="key_401_2009")
    loop = [(-50.0, -50.0), (50.0, -50.0), (50.0, 50.0), (-50.0, 50.0)]
    lrx = [Receiver("dbzdt", (0.0, 0.0)), Receiver("dbzdt", (150.0, 0.0))]
    lt = np.geomspace(1e-5, 1e-1, 17)
    fast_l = Simulation(PolygonLoop(loop), lrx, times=lt)
    ref_l = Simulation(PolygonLoop(loop), lrx, times=lt, freq_per_decade=None,
                       hankel="key_401_2009")
    assert fast.n_frequencies < 0.5 * ref.n_frequencies
    for m in MODELS:
        assert _close(fast.predict(m), ref.predict(m), 1e-3) < 3e-4
        assert _close(fast_l.predict(m), ref_l.predict(m), 1e-3) < 3e-4


def test_batched_predict_equals_single_calls():
    # same arithmetic model by model: equal to rounding (1e-12 relative to each curve's peak)
    rng = np.random.default_rng(3)
    res = 10 ** rng.uniform(0.0, 3.5, (7, 5))
    thk = 10 ** rng.uniform(0.7, 2.7, (7, 4))
    edges = np.geomspace(1e-4, 1.0, 12)
    wf = Waveform.bipolar(0.25, 0.5, ramp_on=1e-3, ramp_off=5e-4)
    sim = Simulation(Wire((-750, 800), (750, 800)),
                     [Receiver("ex", dipole=((2450, 0), (2550, 0))), Receiver("dbzdt", (2500, 0))],
                     gates=(edges[:-1], edges[1:]), waveform=wf)
    many = sim.predict_many(res, thk)
    single = np.array([sim.predict(LayeredModel(t, r)) for t, r in zip(thk, res)])
    assert many.shape == single.shape == (7, 2, 11)
    peak = np.max(np.abs(single), axis=-1, keepdims=True)
    assert np.max(np.abs(many - single) / peak) < 1e-12


def test_batched_predict_rejects_bad_models():
    sim = Simulation(Wire((-500, 0), (500, 0)), [Receiver("ex", (2000, 0))], times=[1e-3])
    with pytest.raises(ValueError, match="resistivity"):
        sim.predict_many([[10.0, -1.0]], [[100.0]])
    with pytest.raises(ValueError, match="thickness"):
        sim.predict_many([[10.0, 100.0]], [[np.nan]])
    with pytest.raises(ValueError, match="resistivity/thickness"):
        sim.predict_many([[10.0, 100.0, 5.0]], [[100.0]])
