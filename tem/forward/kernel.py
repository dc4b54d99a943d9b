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

How it is computed: with e_n = exp(-2 Gamma_n h_n), T_n = (1 - e_n)/(1 + e_n)
and the recursion becomes Y_n = Gamma_n (P + e_n M)/(P - e_n M), P = Y_{n+1} +
Gamma_n, M = Y_{n+1} - Gamma_n: one complex division per layer and no
overflow for thick layers (|e_n| <= 1). For one frequency all wavenumbers
are processed together, layer by layer, in real arithmetic, so the compiler
runs them on SIMD lanes (``tem.forward.vecmath`` supplies a vectorisable
exp and sin/cos). Layers below an accumulated attenuation
sum Re(Gamma_n) h_n > 20 cannot change the surface value (their reflection
is damped by exp(-40)): a half-space starts there. The attenuation grows
with the wavenumber, so the wavenumbers that still need layer n are always
the first ones of the ascending grid, and every loop runs over a prefix.

Derivatives with respect to ln(resistivity) of every layer and
ln(thickness) come from one reverse sweep through the recursion (reverse-mode
differentiation), so all derivatives together cost a small multiple of one
kernel evaluation.

:func:`fused_spectra` evaluates the kernels and integrates them against the
caller's wavenumber-coefficient matrices in one compiled pass;
:func:`fused_spectra_many` does it for many models (threads over models).
The compiled functions carry no input checks: ``Simulation`` validates once.
"""
from __future__ import annotations

import numba as nb
import numpy as np

from .vecmath import exp_neg, sincos

MU0 = 4e-7 * np.pi

__all__ = ["MU0", "fused_spectra", "fused_spectra_many"]

_ATT_MAX = 20.0
_JIT = dict(cache=True, fastmath=True, error_model="numpy")


@nb.njit(**_JIT)
def _top_down(l2, wm, sig, thk, gr, gi, er, ei, att, A, B):  # pragma: no cover - compiled
    """Gamma_n and e_n = exp(-2 Gamma_n h_n) for the wavenumbers that need them.

    A[n]: wavenumbers (a prefix) that reach layer n; B[n] <= A[n]: those for
    which layer n is not the bottom (they need e_n). Rows are (layer, wavenumber).
    """
    L = sig.size
    nl = l2.size
    for il in range(nl):
        att[il] = 0.0
    na = nl
    for n in range(L):
        q = wm * sig[n]
        q2 = q * q
        grn = gr[n]
        gin = gi[n]
        for il in range(na):
            x = l2[il]
            s = np.sqrt(0.5 * (np.sqrt(x * x + q2) + x))
            grn[il] = s
            gin[il] = 0.5 * q / s
        A[n] = na
        if n == L - 1:
            B[n] = 0
            break
        k = 0
        for il in range(na):
            k += att[il] <= _ATT_MAX
        B[n] = k
        h = thk[n]
        h2 = 2.0 * h
        ern = er[n]
        ein = ei[n]
        for il in range(k):
            g = grn[il]
            m = exp_neg(-h2 * g)
            sn, cs = sincos(h2 * gin[il])
            ern[il] = m * cs
            ein[il] = -m * sn
            att[il] += g * h
        na = k
        if k == 0:
            for j in range(n + 1, L):
                A[j] = 0
                B[j] = 0
            break


@nb.njit(**_JIT)
def _bottom_up(scale, gr, gi, er, ei, A, B, XR, XI, store):  # pragma: no cover - compiled
    """Upward recursion of the intrinsic values K_n = scale[n] Gamma_n.

    The surface value ends in row 0 of (XR, XI); with ``store`` row n holds
    the value at the top of layer n (needed by the reverse sweep).
    """
    L = scale.size
    for n in range(L - 1, -1, -1):
        c = scale[n]
        ro = n if store else 0
        rb = n + 1 if (store and n + 1 < L) else 0
        xro = XR[ro]
        xio = XI[ro]
        xrb = XR[rb]
        xib = XI[rb]
        grn = gr[n]
        gin = gi[n]
        for il in range(B[n], A[n]):
            xro[il] = c * grn[il]
            xio[il] = c * gin[il]
        ern = er[n]
        ein = ei[n]
        for il in range(B[n]):
            kr = c * grn[il]
            ki = c * gin[il]
            xr = xrb[il]
            xi = xib[il]
            pr = xr + kr
            pi = xi + ki
            mr = xr - kr
            mi = xi - ki
            emr = ern[il] * mr - ein[il] * mi
            emi = ern[il] * mi + ein[il] * mr
            nr = pr + emr
            ni = pi + emi
            dr = pr - emr
            di = pi - emi
            tr = kr * nr - ki * ni
            ti = kr * ni + ki * nr
            inv = 1.0 / (dr * dr + di * di)
            xro[il] = (tr * dr + ti * di) * inv
            xio[il] = (ti * dr - tr * di) * inv


@nb.njit(**_JIT)
def _reverse(scale, tm, sr, si, wm, sig, thk, gr, gi, er, ei, A, B, XR, XI, jac_thk,
             OR, OI):  # pragma: no cover - compiled
    """d(surface value)/d ln rho_n (rows n) and d/d ln h_n (rows L + n), times (sr + i si).

    Reverse sweep of X_n = f(K_n, T_n, X_{n+1}), f(K, T, X) = K (X + K T)/(K + X T),
    K_n = scale[n] Gamma_n (``tm``: scale = rho, so K_n also depends on rho_n directly);
    ``sr, si`` (per wavenumber) is the derivative of the output with respect to X_0.
    """
    L = scale.size
    nl = sr.size
    ar = sr.copy()
    ai = si.copy()
    for n in range(L):
        c = scale[n]
        q = wm * sig[n]
        grn = gr[n]
        gin = gi[n]
        orn = OR[n]
        oin = OI[n]
        ort = OR[L + n]
        oit = OI[L + n]
        for il in range(A[n], nl):
            orn[il] = 0.0
            oin[il] = 0.0
        if jac_thk:
            for il in range(B[n], nl):
                ort[il] = 0.0
                oit[il] = 0.0
        # bottom layer of these wavenumbers: X_n = K_n
        for il in range(B[n], A[n]):
            g_r = grn[il]
            g_i = gin[il]
            inv = 0.5 * q / (g_r * g_r + g_i * g_i)
            # dGamma/dln rho = -i q/(2 Gamma);  dK = c dGamma (+ K if TM: c = rho)
            dgr = -g_i * inv
            dgi = -g_r * inv
            dkr = c * dgr
            dki = c * dgi
            if tm:
                dkr += c * g_r
                dki += c * g_i
            orn[il] = ar[il] * dkr - ai[il] * dki
            oin[il] = ar[il] * dki + ai[il] * dkr
        if B[n] == 0:
            continue
        h = thk[n]
        ern = er[n]
        ein = ei[n]
        xrb = XR[n + 1]
        xib = XI[n + 1]
        for il in range(B[n]):
            g_r = grn[il]
            g_i = gin[il]
            inv = 0.5 * q / (g_r * g_r + g_i * g_i)
            dgr = -g_i * inv
            dgi = -g_r * inv
            kr = c * g_r
            ki = c * g_i
            dkr = c * dgr
            dki = c * dgi
            if tm:
                dkr += kr
                dki += ki
            # T = (1 - e)/(1 + e), 1 - T^2 = 4 e/(1 + e)^2
            e_r = ern[il]
            e_i = ein[il]
            ur = 1.0 + e_r
            inv = 1.0 / (ur * ur + e_i * e_i)
            tr = ((1.0 - e_r) * ur - e_i * e_i) * inv
            ti = (-e_i * ur - (1.0 - e_r) * e_i) * inv
            t2r = tr * tr - ti * ti
            t2i = 2.0 * tr * ti
            sr_ = h * (1.0 - t2r)
            si_ = -h * t2i
            # dT/dln rho = s dGamma, dT/dln h = s Gamma
            dtr = sr_ * dgr - si_ * dgi
            dti = sr_ * dgi + si_ * dgr
            xr = xrb[il]
            xi = xib[il]
            # D = K + X T
            Dr = kr + xr * tr - xi * ti
            Di = ki + xr * ti + xi * tr
            invD = 1.0 / (Dr * Dr + Di * Di) ** 2
            D2r = (Dr * Dr - Di * Di) * invD       # 1/D^2 = conj(D)^2/|D|^4
            D2i = -2.0 * Dr * Di * invD
            k2r = kr * kr - ki * ki
            k2i = 2.0 * kr * ki
            x2r = xr * xr - xi * xi
            x2i = 2.0 * xr * xi
            kxr = kr * xr - ki * xi
            kxi = kr * xi + ki * xr
            # fK = T (X^2 + K^2 + 2 K X T)/D^2
            ur = x2r + k2r + 2.0 * (kxr * tr - kxi * ti)
            ui = x2i + k2i + 2.0 * (kxr * ti + kxi * tr)
            vr = tr * ur - ti * ui
            vi = tr * ui + ti * ur
            fKr = vr * D2r - vi * D2i
            fKi = vr * D2i + vi * D2r
            # fT = K (K^2 - X^2)/D^2
            ur = k2r - x2r
            ui = k2i - x2i
            vr = kr * ur - ki * ui
            vi = kr * ui + ki * ur
            fTr = vr * D2r - vi * D2i
            fTi = vr * D2i + vi * D2r
            # fX = K^2 (1 - T^2)/D^2
            ur = k2r * (1.0 - t2r) + k2i * t2i
            ui = k2i * (1.0 - t2r) - k2r * t2i
            fXr = ur * D2r - ui * D2i
            fXi = ur * D2i + ui * D2r
            # out_rho = a (fK dK + fT dT)
            wr = fKr * dkr - fKi * dki + fTr * dtr - fTi * dti
            wi = fKr * dki + fKi * dkr + fTr * dti + fTi * dtr
            a_r = ar[il]
            a_i = ai[il]
            orn[il] = a_r * wr - a_i * wi
            oin[il] = a_r * wi + a_i * wr
            if jac_thk:
                # out_h = a fT s Gamma
                dhr = sr_ * g_r - si_ * g_i
                dhi = sr_ * g_i + si_ * g_r
                wr = fTr * dhr - fTi * dhi
                wi = fTr * dhi + fTi * dhr
                ort[il] = a_r * wr - a_i * wi
                oit[il] = a_r * wi + a_i * wr
            ar[il] = a_r * fXr - a_i * fXi
            ai[il] = a_r * fXi + a_i * fXr


@nb.njit(**_JIT)
def _one_model(lam, omega, res, thk, need_tm, jac, jac_thk, Gr, Ga, Gb, F, dF):  # pragma: no cover
    """F[w, r] += sum_l rte (Gr + i w mu0 Ga) + btm Gb, and the same for derivatives."""
    nw = omega.size
    nl = lam.size
    L = res.size
    nr = Gr.shape[0]
    sig = 1.0 / res
    ones = np.ones(L)
    l2 = lam * lam
    gr = np.zeros((L, nl))
    gi = np.zeros((L, nl))
    er = np.zeros((L, nl))
    ei = np.zeros((L, nl))
    att = np.empty(nl)
    A = np.zeros(L, np.int64)
    B = np.zeros(L, np.int64)
    rows = L if jac else 1
    XR = np.zeros((rows, nl))
    XI = np.zeros((rows, nl))
    ZR = np.zeros((rows, nl))
    ZI = np.zeros((rows, nl))
    rr = np.empty(nl)
    ri = np.empty(nl)
    npar = 2 * L if jac else 0
    DR = np.zeros((npar, nl))
    DI = np.zeros((npar, nl))
    BR = np.zeros((npar, nl))
    BI = np.zeros((npar, nl))
    sr = np.empty(nl)
    si = np.empty(nl)
    for iw in range(nw):
        wm = omega[iw] * MU0
        _top_down(l2, wm, sig, thk, gr, gi, er, ei, att, A, B)
        _bottom_up(ones, gr, gi, er, ei, A, B, XR, XI, jac)
        xr0 = XR[0]
        xi0 = XI[0]
        for il in range(nl):
            lm = lam[il]
            br_ = lm + xr0[il]
            bi_ = xi0[il]
            inv = 1.0 / (br_ * br_ + bi_ * bi_)
            ar_ = lm - xr0[il]
            rr[il] = (ar_ * br_ - xi0[il] * bi_) * inv
            ri[il] = (-xi0[il] * br_ - ar_ * bi_) * inv
            if jac:
                # dR/dY = -2 lambda/(lambda + Y)^2 = -2 lambda conj(b)^2/|b|^4
                f = -2.0 * lm * inv * inv
                sr[il] = f * (br_ * br_ - bi_ * bi_)
                si[il] = -f * 2.0 * br_ * bi_
        if jac:
            _reverse(ones, False, sr, si, wm, sig, thk, gr, gi, er, ei, A, B, XR, XI, jac_thk, DR, DI)
        if need_tm:
            _bottom_up(res, gr, gi, er, ei, A, B, ZR, ZI, jac)
            if jac:
                for il in range(nl):
                    sr[il] = 1.0
                    si[il] = 0.0
                _reverse(res, True, sr, si, wm, sig, thk, gr, gi, er, ei, A, B, ZR, ZI, jac_thk, BR, BI)
                for il in range(nl):
                    BR[0, il] -= res[0] * lam[il]
        for ir in range(nr):
            gri = Gr[ir]
            gai = Ga[ir]
            gbi = Gb[ir]
            s_r = 0.0
            s_i = 0.0
            for il in range(nl):
                ga = wm * gai[il]
                s_r += rr[il] * gri[il] - ri[il] * ga
                s_i += ri[il] * gri[il] + rr[il] * ga
            if need_tm:
                zr0 = ZR[0]
                zi0 = ZI[0]
                r0 = res[0]
                for il in range(nl):
                    lm = lam[il]
                    s_r += (zr0[il] - r0 * lm) * gbi[il]
                    s_i += (zi0[il] - 0.5 * wm / lm) * gbi[il]
            F[iw, ir] += complex(s_r, s_i)
            for p in range(npar):
                if p >= L and not jac_thk:
                    break
                drp = DR[p]
                dip = DI[p]
                s_r = 0.0
                s_i = 0.0
                for il in range(nl):
                    ga = wm * gai[il]
                    s_r += drp[il] * gri[il] - dip[il] * ga
                    s_i += dip[il] * gri[il] + drp[il] * ga
                if need_tm:
                    brp = BR[p]
                    bip = BI[p]
                    for il in range(nl):
                        s_r += brp[il] * gbi[il]
                        s_i += bip[il] * gbi[il]
                dF[p, iw, ir] += complex(s_r, s_i)


@nb.njit(cache=True, parallel=True)
def _many_models(lam, omega, res, thk, need_tm, Gr, Ga, Gb, F):  # pragma: no cover - compiled
    """_one_model for every row of res/thk (no derivatives), models spread over threads."""
    dummy = np.zeros((0, omega.size, Gr.shape[0]), np.complex128)
    for m in nb.prange(res.shape[0]):
        _one_model(lam, omega, res[m], thk[m], need_tm, False, False, Gr, Ga, Gb, F[m], dummy)


def _param_index(L, jac_thk):
    """Slots of the derivative vector: ln rho_0..L-1, then ln h_0..L-2."""
    return np.r_[np.arange(L), L + np.arange(L - 1)] if jac_thk else np.arange(L)


def fused_spectra(lam, omega, resistivity, thickness, Gr, Ga, Gb, need_tm=True, jac=False,
                  jac_thk=False):
    """Wavenumber integrals of the kernels against coefficient matrices, for every omega.

    ``lam`` must be ascending and positive, ``omega`` non-negative; ``Gr, Ga, Gb`` are
    C-contiguous float arrays (n_receivers, n_lambda). Returns F (nw, nr) = sum_l R_TE
    (Gr + i omega mu0 Ga) + B_TM Gb, and with ``jac`` its derivatives dF (npar, nw, nr)
    with respect to ln(resistivity) (and ln(thickness)).
    """
    res = np.ascontiguousarray(resistivity, dtype=float)
    thk = np.zeros(res.size)
    thk[:-1] = thickness
    L = res.size
    nr = Gr.shape[0]
    F = np.zeros((omega.size, nr), np.complex128)
    dF = np.zeros((2 * L if jac else 0, omega.size, nr), np.complex128)
    _one_model(lam, omega, res, thk, bool(need_tm), bool(jac), bool(jac_thk), Gr, Ga, Gb, F, dF)
    if not jac:
        return F, None
    return F, dF[_param_index(L, jac_thk)]


def fused_spectra_many(lam, omega, resistivity, thickness, Gr, Ga, Gb, need_tm=True):
    """:func:`fused_spectra` (no derivatives) for many models of equal layer count.

    ``resistivity`` (n_models, L) and ``thickness`` (n_models, L - 1); returns
    F (n_models, nw, nr). Models run in parallel on numba's threads.
    """
    res = np.ascontiguousarray(resistivity, dtype=float)
    M, L = res.shape
    thk = np.zeros((M, L))
    thk[:, :-1] = thickness
    F = np.zeros((M, omega.size, Gr.shape[0]), np.complex128)
    _many_models(lam, omega, res, thk, bool(need_tm), Gr, Ga, Gb, F)
    return F
