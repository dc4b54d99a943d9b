"""Resistivity range of a few-layer layer by a chi2 profile (tem/invert/equivalence.py).

On a toy problem whose misfit along the profile is exactly quadratic in ln(rho), the range
is known in closed form; the blind suite's thin conductors are checked in
tests/test_invert_blind.py.
"""
import numpy as np
import pytest

from tem.invert.equivalence import resistivity_profile


class Toy:
    """Two layers (rho0, h0 over rho1): data ln(h0/rho0) (the conductance), ln(rho1) and
    w ln(rho0), unit errors; the fit (10 ohm-m, 50 m, 100 ohm-m) explains them exactly."""

    def __init__(self, w):
        self.w = w
        self.d_obs = self._d(np.array([10.0, 100.0]), np.array([50.0]))
        self.std = np.ones(3)
        self.n_data = 3

    def _d(self, r, t):
        return np.array([np.log(t[0] / r[0]), np.log(r[1]), self.w * np.log(r[0])])

    def predict(self, r, t):
        return self._d(np.asarray(r, float), np.asarray(t, float))

    def jacobian(self, r, t, with_thickness=True):
        J = np.array([[-1.0, 0.0, 1.0], [0.0, 1.0, 0.0], [self.w, 0.0, 0.0]])
        return self.predict(r, t), J


FIT = dict(resistivity=np.array([10.0, 100.0]), thickness=np.array([50.0]), chi2=0.0)
KW = dict(res_bounds=(0.1, 1e5), thk_bounds=(1.0, 2e4), max_iter=50)   # the invert defaults


def test_range_of_a_quadratic_profile_is_exact():
    # with h0 and rho1 re-fitted, the rise is (w ln(rho0/10))^2: the 3.84 range is
    # 10 exp(+-sqrt(3.84)/w) (closed form of the quadratic; the profile's interpolation
    # assumes exactly this shape, so only the LM's tolerance remains)
    lo, hi, pts = resistivity_profile(Toy(1.0), FIT, 0, 3.84, **KW)
    half = np.sqrt(3.84) / 1.0
    assert lo == pytest.approx(10 * np.exp(-half), rel=1e-3)
    assert hi == pytest.approx(10 * np.exp(half), rel=1e-3)
    # along the profile the thickness follows the conductance (50 m / 10 ohm-m)
    r, h, _ = np.array(pts).T
    assert h == pytest.approx(5.0 * r, rel=1e-6)


def test_an_unconstrained_resistivity_runs_to_the_bound():
    # no datum sees rho0 apart from the conductance: the range reaches the lower bound; above
    # 4000 ohm-m the thickness bound (20 km = 5 S x 4000 ohm-m) breaks the equivalence and the
    # rise is (ln(rho0 / 4000))^2, so the upper end is 4000 exp(sqrt(3.84)) (closed form)
    lo, hi, _ = resistivity_profile(Toy(0.0), FIT, 0, 3.84, max_steps=40, **KW)
    assert lo == pytest.approx(0.1)
    assert hi == pytest.approx(4000.0 * np.exp(np.sqrt(3.84)), rel=1e-3)
