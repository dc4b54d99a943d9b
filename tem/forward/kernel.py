"""Layered-earth wavenumber-domain kernels (quasi-static, surface source and receiver).

For a horizontal current sheet on the surface of a 1D earth (air above,
sigma = 0, no displacement currents), the surface fields follow from two
input quantities, computed by the standard upward recursion through the
layers (Ward & Hohmann 1988, "Electromagnetic theory for geophysical
applications", in Nabighian (ed.), EM Methods in Applied Geophysics vol. 1,
SEG, section on layered earths; the recursion form is common practice):

* TE: Y = the earth's TE "admittance" times i omega mu0, Y_N = Gamma_N,
  Y_n = Gamma_n (Y_{n+1} + Gamma_n T_n) / (Gamma_n + Y_{n+1} T_n),
  T_n = tanh(Gamma_n h_n), Gamma_n = sqrt(lambda^2 + i omega mu0 sigma_n),
  giving the reflection coefficient R_TE = (lambda - Y)/(lambda + Y).
* TM: Z = the earth's TM input impedance, same recursion with the intrinsic
  impedance Gamma_n rho_n in place of Gamma_n.

Time dependence exp(+i omega t). The kernels returned are
``rte = R_TE`` and ``btm = Z - rho_1 lambda - i omega mu0/(2 lambda)``: both
decay at large lambda, the subtracted parts are handled in closed form by
the caller. Derivatives with respect to ln(resistivity) of every layer and
ln(thickness) come from one reverse sweep through the recursion, so the
cost of all derivatives is a small multiple of one kernel evaluation.
"""
from __future__ import annotations

import numba as nb
import numpy as np

MU0 = 4e-7 * np.pi

__all__ = ["MU0", "layered_kernels"]


@nb.njit(cache=True, fastmath=True)
def _kernels(lam, omega, res, thk, need_tm, jac, jac_thk,
             rte, btm, drte, dbtm):  # pragma: no cover - compiled
    nw = omega.size
    nl = lam.size
    L = res.size
    sig = 1.0 / res
    for iw in range(nw):
        gam = np.empty(L, np.complex128)
        tnh = np.empty(L, np.complex128)
        X = np.empty(L, np.complex128)
        Z = np.empty(L, np.complex128)
        K = np.empty(L, np.complex128)
        iwm = 1j * omega[iw] * 4e-7 * np.pi
        for il in range(nl):
            lm = lam[il]
            l2 = lm * lm
            for n in range(L):
                gam[n] = np.sqrt(l2 + iwm * sig[n])
            for n in range(L - 1):
                # tanh via exp(-2z): Re(z) > 0, so no overflow for thick layers
                e2 = np.exp(-2.0 * gam[n] * thk[n])
                tnh[n] = (1.0 - e2) / (1.0 + e2)
            # TE recursion
            X[L - 1] = gam[L - 1]
            for n in range(L - 2, -1, -1):
                g = gam[n]
                t = tnh[n]
                X[n] = g * (X[n + 1] + g * t) / (g + X[n + 1] * t)
            Y = X[0]
            den = lm + Y
            rte[iw, il] = (lm - Y) / den
            if need_tm:
                for n in range(L):
                    K[n] = gam[n] * res[n]
                Z[L - 1] = K[L - 1]
                for n in range(L - 2, -1, -1):
                    k = K[n]
                    t = tnh[n]
                    Z[n] = k * (Z[n + 1] + k * t) / (k + Z[n + 1] * t)
                btm[iw, il] = Z[0] - res[0] * lm - iwm / (2.0 * lm)
            if jac:
                dR_dY = -2.0 * lm / (den * den)
                # TE reverse sweep
                a = 1.0 + 0.0j
                for n in range(L - 1):
                    g = gam[n]
                    t = tnh[n]
                    x = X[n + 1]
                    D = g + x * t
                    D2 = D * D
                    fK = t * (x * x + g * g + 2.0 * g * x * t) / D2
                    fT = g * (g * g - x * x) / D2
                    fX = g * g * (1.0 - t * t) / D2
                    dg = -iwm * sig[n] / (2.0 * g)
                    dT = thk[n] * (1.0 - t * t) * dg
                    drte[n, iw, il] = dR_dY * a * (fK * dg + fT * dT)
                    if jac_thk:
                        drte[L + n, iw, il] = dR_dY * a * fT * g * thk[n] * (1.0 - t * t)
                    a = a * fX
                dg = -iwm * sig[L - 1] / (2.0 * gam[L - 1])
                drte[L - 1, iw, il] = dR_dY * a * dg
                if need_tm:
                    a = 1.0 + 0.0j
                    for n in range(L - 1):
                        g = gam[n]
                        k = K[n]
                        t = tnh[n]
                        z = Z[n + 1]
                        D = k + z * t
                        D2 = D * D
                        fK = t * (z * z + k * k + 2.0 * k * z * t) / D2
                        fT = k * (k * k - z * z) / D2
                        fX = k * k * (1.0 - t * t) / D2
                        dg = -iwm * sig[n] / (2.0 * g)
                        dK = k + res[n] * dg
                        dT = thk[n] * (1.0 - t * t) * dg
                        val = a * (fK * dK + fT * dT)
                        if n == 0:
                            val -= res[0] * lm
                        dbtm[n, iw, il] = val
                        if jac_thk:
                            dbtm[L + n, iw, il] = a * fT * g * thk[n] * (1.0 - t * t)
                        a = a * fX
                    g = gam[L - 1]
                    dg = -iwm * sig[L - 1] / (2.0 * g)
                    val = a * (g * res[L - 1] + res[L - 1] * dg)
                    if L == 1:
                        val -= res[0] * lm
                    dbtm[L - 1, iw, il] = val


def layered_kernels(lam, omega, resistivity, thickness, need_tm=True, jac=False,
                    jac_thk=False):
    """Evaluate R_TE and the TM remainder on a (omega, lambda) grid.

    Parameters
    ----------
    lam : ndarray (nl,)
        Horizontal wavenumbers [1/m].
    omega : ndarray (nw,)
        Angular frequencies [rad/s] (0 allowed: the DC kernels).
    resistivity : ndarray (L,)
        Layer resistivities [ohm-m], half-space last.
    thickness : ndarray (L-1,)
        Layer thicknesses [m].
    need_tm : bool
        Compute the TM remainder (needed for electric fields of grounded wires).
    jac, jac_thk : bool
        Also return derivatives with respect to ln(resistivity) (all L) and,
        with ``jac_thk``, ln(thickness) (L-1).

    Returns
    -------
    rte, btm : ndarray (nw, nl) complex
    drte, dbtm : ndarray (npar, nw, nl) complex or None
    """
    lam = np.ascontiguousarray(lam, dtype=float)
    omega = np.ascontiguousarray(omega, dtype=float)
    res = np.ascontiguousarray(resistivity, dtype=float)
    thk = np.ascontiguousarray(np.r_[np.asarray(thickness, float), 0.0])
    L = res.size
    nw, nl = omega.size, lam.size
    rte = np.empty((nw, nl), np.complex128)
    btm = np.zeros((nw, nl), np.complex128)
    npar = (2 * L - 1) if jac_thk else L
    if jac:
        drte = np.zeros((npar + (1 if jac_thk else 0), nw, nl), np.complex128)
        dbtm = np.zeros_like(drte)
    else:
        drte = np.zeros((1, 1, 1), np.complex128)
        dbtm = np.zeros((1, 1, 1), np.complex128)
    _kernels(lam, omega, res, thk, bool(need_tm), bool(jac), bool(jac_thk), rte, btm, drte, dbtm)
    if not jac:
        return rte, btm, None, None
    if jac_thk:
        # layout: [ln rho_0..ln rho_{L-1}, ln h_0..ln h_{L-2}]; slot L+L-1 unused
        keep = np.r_[np.arange(L), L + np.arange(L - 1)]
        drte, dbtm = drte[keep], dbtm[keep]
    return rte, btm, drte, dbtm
