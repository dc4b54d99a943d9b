"""Closed-form transient responses on a homogeneous half-space (source and receiver on the surface).

Sources: Ward & Hohmann (1988), "Electromagnetic theory for geophysical
applications", in Nabighian (ed.), Electromagnetic Methods in Applied
Geophysics vol. 1, SEG (central loop eqs. 4.98/4.99, from memory; HED and
VMD forms derived from the frequency-domain expressions there). The shape
functions cancel catastrophically for small u = theta r at late times, so
below u = 0.5 they are evaluated from their Taylor series.

theta = sqrt(mu0 / (4 rho t)) [1/m]. Responses per ampere (I = 1 A) unless
a moment is given.
"""
from __future__ import annotations

from math import factorial

import numpy as np
from numpy.polynomial import polynomial as P
from scipy.special import erf

from .kernel import MU0

__all__ = ["theta", "shape_fe", "shape_fd", "shape_fb", "shape_gd", "shape_gb",
           "loop_centre_hz", "loop_centre_dbzdt", "hed_ex_stepoff", "hed_hz_stepoff",
           "hed_dbzdt_stepoff", "vmd_hz_stepoff", "vmd_dbzdt_stepoff", "wire_dc_e",
           "diffusion_depth"]

_SQPI = np.sqrt(np.pi)
_N = 40
# Taylor coefficients of erf(u) and exp(-u^2) up to u^(2N+1)
_ERF = np.zeros(2 * _N + 2)
_EXP = np.zeros(2 * _N + 2)
for _n in range(_N + 1):
    _ERF[2 * _n + 1] = 2 / _SQPI * (-1) ** _n / (factorial(_n) * (2 * _n + 1))
    _EXP[2 * _n] = (-1) ** _n / factorial(_n)
_U = np.array([0.0, 1.0])


def _series(poly, shift):
    """Coefficients of poly(u) / u**shift, dropping the (vanishing) low orders."""
    c = np.asarray(poly, float)[shift:]
    return c[: 2 * _N - 4]


_FE = _series(P.polysub(_ERF, 2 / _SQPI * P.polymul(_U, _EXP)), 0)
_FD = _series(P.polysub(3 * _ERF, 2 / _SQPI * P.polymul([0, 3, 0, 2], _EXP)), 0)
_FB = _series(P.polyadd(3 / _SQPI * P.polymul(_U, _EXP), P.polymul([-1.5, 0, 1], _ERF)), 2)
_GD = _series(P.polysub(9 * _ERF, 2 / _SQPI * P.polymul([0, 9, 0, 6, 0, 4], _EXP)), 0)
_GB = _series(P.polysub(P.polymul([4.5, 0, -1], _ERF), P.polymul([0, 9, 0, 4], _EXP) / _SQPI), 2)


def _shape(u, direct, coeffs):
    u = np.asarray(u, dtype=float)
    small = u < 0.5
    out = np.empty_like(u)
    out[small] = P.polyval(u[small], coeffs)
    ub = u[~small]
    out[~small] = direct(ub)
    return out


def shape_fe(u):
    """F_E(u) = erf(u) - (2/sqrt(pi)) u exp(-u^2)."""
    return _shape(u, lambda x: erf(x) - 2 / _SQPI * x * np.exp(-x * x), _FE)


def shape_fd(u):
    """F_D(u) = 3 erf(u) - (2/sqrt(pi)) u (3 + 2u^2) exp(-u^2)."""
    return _shape(u, lambda x: 3 * erf(x) - 2 / _SQPI * x * (3 + 2 * x * x) * np.exp(-x * x), _FD)


def shape_fb(u):
    """F_B(u) = 3 exp(-u^2)/(sqrt(pi) u) + (1 - 3/(2u^2)) erf(u)."""
    return _shape(u, lambda x: 3 * np.exp(-x * x) / (_SQPI * x) + (1 - 1.5 / (x * x)) * erf(x), _FB)


def shape_gd(u):
    """G_D(u) = 9 erf(u) - (2u/sqrt(pi)) (9 + 6u^2 + 4u^4) exp(-u^2)."""
    return _shape(u, lambda x: 9 * erf(x) - 2 * x / _SQPI * (9 + 6 * x ** 2 + 4 * x ** 4)
                  * np.exp(-x * x), _GD)


def shape_gb(u):
    """G_B(u) = (9/(2u^2) - 1) erf(u) - (9/u + 4u) exp(-u^2)/sqrt(pi)."""
    return _shape(u, lambda x: (4.5 / x ** 2 - 1) * erf(x) - (9 / x + 4 * x) * np.exp(-x * x) / _SQPI,
                  _GB)


def theta(rho, t):
    """theta = sqrt(mu0/(4 rho t)) [1/m] for resistivity rho [ohm-m] and time t [s]."""
    return np.sqrt(MU0 / (4.0 * np.asarray(rho, float) * np.asarray(t, float)))


def loop_centre_hz(rho, t, radius, current=1.0):
    """Step-off H_z [A/m] at the centre of a circular loop."""
    return current / (2 * radius) * shape_fb(theta(rho, t) * radius)


def loop_centre_dbzdt(rho, t, radius, current=1.0):
    """Step-off dB_z/dt [T/s] at the centre of a circular loop (negative: decaying field)."""
    return -current * rho / radius ** 3 * shape_fd(theta(rho, t) * radius)


def hed_ex_stepoff(rho, t, x, y, moment=1.0):
    """Step-off E_x [V/m] of an x-directed HED (moment I ds [A m]) at the origin; any azimuth."""
    r = np.hypot(x, y)
    return moment * rho / (2 * np.pi * r ** 3) * shape_fe(theta(rho, t) * r)


def hed_hz_stepoff(rho, t, x, y, moment=1.0):
    """Step-off H_z [A/m] of an x-directed HED."""
    r = np.hypot(x, y)
    return moment * y / (4 * np.pi * r ** 3) * shape_fb(theta(rho, t) * r)


def hed_dbzdt_stepoff(rho, t, x, y, moment=1.0):
    """Step-off dB_z/dt [T/s] of an x-directed HED."""
    r = np.hypot(x, y)
    return -moment * y * rho / (2 * np.pi * r ** 5) * shape_fd(theta(rho, t) * r)


def vmd_hz_stepoff(rho, t, r, moment=1.0):
    """Step-off H_z [A/m] of a vertical magnetic dipole (moment [A m^2]) at offset r."""
    return moment / (4 * np.pi * r ** 3) * shape_gb(theta(rho, t) * r)


def vmd_dbzdt_stepoff(rho, t, r, moment=1.0):
    """Step-off dB_z/dt [T/s] of a VMD at offset r."""
    return moment * rho / (2 * np.pi * r ** 5) * shape_gd(theta(rho, t) * r)


def wire_dc_e(rho, a, b, p, current=1.0):
    """DC electric field (E_x, E_y) [V/m] of a grounded wire A->B on a half-space.

    Point electrodes on a half-space, V = rho I/(2 pi R) (Telford, Geldart &
    Sheriff 1990, Applied Geophysics, ch. 8; from memory): +I enters at B.
    """
    p, a, b = (np.asarray(v, float) for v in (p, a, b))
    rb, ra = p - b, p - a
    return rho * current / (2 * np.pi) * (rb / np.hypot(*rb) ** 3 - ra / np.hypot(*ra) ** 3)


def diffusion_depth(rho, t):
    """Diffusion depth sqrt(2 t rho / mu0) = 1261.566 sqrt(rho t) [m]."""
    return np.sqrt(2 * np.asarray(t, float) * np.asarray(rho, float) / MU0)
