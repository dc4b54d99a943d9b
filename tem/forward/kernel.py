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

Time dependence exp(+i omega t). The kernels used are ``rte = R_TE`` and
``btm = Z - rho_1 lambda - i omega mu0/(2 lambda)``: both decay at large
lambda, the subtracted parts are handled in closed form by the caller.
:func:`fused_spectra` evaluates them and integrates them against the
caller's wavenumber-coefficient matrices in one compiled pass. Derivatives with respect to ln(resistivity) of every layer and
ln(thickness) come from one reverse sweep through the recursion, so the
cost of all derivatives is a small multiple of one kernel evaluation.
"""
from __future__ import annotations

import numba as nb
import numpy as np

MU0 = 4e-7 * np.pi

__all__ = ["MU0", "fused_spectra"]


@nb.njit(cache=True, fastmath=True)
def _reverse_sweep(K, dK, dT, dTh, tnh, X, nb, L, jac_thk, scale, out):  # pragma: no cover
    """Reverse-mode derivatives of X_0 through X_n = f(K_n, T_n, X_{n+1}).

    f(K, T, X) = K (X + K T)/(K + X T); ``dK``, ``dT`` are d/d ln rho_n of K_n
    and T_n, ``dTh`` d T_n/d ln h_n; results (times ``scale``) into ``out``:
    ln rho_0..nb at 0..nb, ln h_n at L + n.
    """
    a = scale
    for n in range(nb):
        k = K[n]
        t = tnh[n]
        x = X[n + 1]
        D = k + x * t
        D2 = D * D
        fK = t * (x * x + k * k + 2.0 * k * x * t) / D2
        fT = k * (k * k - x * x) / D2
        fX = k * k * (1.0 - t * t) / D2
        out[n] = a * (fK * dK[n] + fT * dT[n])
        if jac_thk:
            out[L + n] = a * fT * dTh[n]
        a = a * fX
    out[nb] = a * dK[nb]


@nb.njit(cache=True, fastmath=True)
def _point(lm, iwm, res, sig, thk, need_tm, jac, jac_thk, gam, tnh, X, Z, K,
           dR, dB, W):  # pragma: no cover - compiled
    """Kernels at one (omega, lambda); derivatives into dR, dB (length 2L)."""
    L = res.size
    l2 = lm * lm
    # layers below an accumulated attenuation exp(-40) do not affect the
    # surface: end the stack there with a half-space (exact to 1e-17)
    nb = L - 1
    att = 0.0
    for n in range(L):
        gam[n] = np.sqrt(l2 + iwm * sig[n])
        if n < L - 1:
            att += gam[n].real * thk[n]
            if att > 20.0:
                gam[n + 1] = np.sqrt(l2 + iwm * sig[n + 1])
                nb = n + 1
                break
    for n in range(nb):
        # tanh via exp(-2z): Re(z) > 0, so no overflow for thick layers
        e2 = np.exp(-2.0 * gam[n] * thk[n])
        tnh[n] = (1.0 - e2) / (1.0 + e2)
    # TE recursion
    X[nb] = gam[nb]
    for n in range(nb - 1, -1, -1):
        g = gam[n]
        t = tnh[n]
        X[n] = g * (X[n + 1] + g * t) / (g + X[n + 1] * t)
    Y = X[0]
    den = lm + Y
    rte = (lm - Y) / den
    btm = 0.0 + 0.0j
    if need_tm:
        for n in range(nb + 1):
            K[n] = gam[n] * res[n]
        Z[nb] = K[nb]
        for n in range(nb - 1, -1, -1):
            k = K[n]
            t = tnh[n]
            Z[n] = k * (Z[n + 1] + k * t) / (k + Z[n + 1] * t)
        btm = Z[0] - res[0] * lm - iwm / (2.0 * lm)
    if jac:
        for n in range(dR.size):
            dR[n] = 0.0
            dB[n] = 0.0
        # derivatives of Gamma_n and T_n with respect to ln rho_n and ln h_n
        for n in range(nb + 1):
            dg = -iwm * sig[n] / (2.0 * gam[n])
            W[0, n] = dg
            if n < nb:
                s = thk[n] * (1.0 - tnh[n] * tnh[n])
                W[1, n] = s * dg
                W[2, n] = s * gam[n]
        # TE: intrinsic value Gamma_n, dR_TE/dY = -2 lambda/(lambda + Y)^2
        _reverse_sweep(gam, W[0], W[1], W[2], tnh, X, nb, L, jac_thk, -2.0 * lm / (den * den), dR)
        if need_tm:
            # TM: intrinsic value Gamma_n rho_n, d/d ln rho = Gamma rho + rho dGamma
            for n in range(nb + 1):
                W[3, n] = K[n] + res[n] * W[0, n]
            _reverse_sweep(K, W[3], W[1], W[2], tnh, Z, nb, L, jac_thk, 1.0 + 0.0j, dB)
            dB[0] -= res[0] * lm
    return rte, btm


@nb.njit(cache=True)
def _fused(lam, omega, res, thk, need_tm, jac, jac_thk, Gr, Ga, Gb,
           F, dF):  # pragma: no cover - compiled
    """F[w, r] = sum_l rte (Gr + i w mu0 Ga) + btm Gb, and the same for derivatives."""
    nw = omega.size
    nl = lam.size
    L = res.size
    nr = Gr.shape[0]
    sig = 1.0 / res
    gam = np.empty(L, np.complex128)
    tnh = np.empty(L, np.complex128)
    X = np.empty(L, np.complex128)
    Z = np.empty(L, np.complex128)
    K = np.empty(L, np.complex128)
    dR = np.zeros(2 * L, np.complex128)
    dB = np.zeros(2 * L, np.complex128)
    W = np.zeros((4, L), np.complex128)
    npar = dF.shape[0]
    for iw in range(nw):
        iwm = 1j * omega[iw] * 4e-7 * np.pi
        for il in range(nl):
            r, b = _point(lam[il], iwm, res, sig, thk, need_tm, jac, jac_thk,
                          gam, tnh, X, Z, K, dR, dB, W)
            for ir in range(nr):
                ga = Gr[ir, il] + iwm * Ga[ir, il]
                gb = Gb[ir, il]
                F[iw, ir] += r * ga + b * gb
                if jac:
                    for p in range(npar):
                        dF[p, iw, ir] += dR[p] * ga + dB[p] * gb


def _param_index(L, jac_thk):
    """Slots of the derivative vector: ln rho_0..L-1, then ln h_0..L-2."""
    return np.r_[np.arange(L), L + np.arange(L - 1)] if jac_thk else np.arange(L)


def fused_spectra(lam, omega, resistivity, thickness, Gr, Ga, Gb, need_tm=True, jac=False,
                  jac_thk=False):
    """Wavenumber integrals of the kernels against coefficient matrices, for every omega.

    Returns F (nw, nr) = sum_l R_TE (Gr + i omega mu0 Ga) + B_TM Gb, and with ``jac`` its
    derivatives dF (npar, nw, nr) with respect to ln(resistivity) (and ln(thickness)).
    """
    lam = np.ascontiguousarray(lam, dtype=float)
    omega = np.ascontiguousarray(omega, dtype=float)
    res = np.ascontiguousarray(resistivity, dtype=float)
    thk = np.ascontiguousarray(np.r_[np.asarray(thickness, float), 0.0])
    L = res.size
    nr = Gr.shape[0]
    F = np.zeros((omega.size, nr), np.complex128)
    dF = np.zeros((2 * L if jac else 0, omega.size, nr), np.complex128)
    _fused(lam, omega, res, thk, bool(need_tm), bool(jac), bool(jac_thk),
           np.ascontiguousarray(Gr, float), np.ascontiguousarray(Ga, float),
           np.ascontiguousarray(Gb, float), F, dF)
    if not jac:
        return F, None
    return F, dF[_param_index(L, jac_thk)]
