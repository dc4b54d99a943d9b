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
LANES = 8   # SIMD width in doubles (AVX-512, a multiple of narrower ones); callers pad to it
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
        # whole SIMD blocks: a few wavenumbers recurse deeper than they need to
        # (exact, just not required), and loops have no scalar remainder
        k = min(na, (k + LANES - 1) // LANES * LANES)
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
def _bottom_up(scale, gr, gi, er, ei, A, B, XR, XI):  # pragma: no cover - compiled
    """Upward recursion of the intrinsic values K_n = scale[n] Gamma_n.

    Row n of (XR, XI) receives the value at the top of layer n (row 0: the
    surface value); reading row n + 1 and writing row n, distinct memory,
    lets the compiler vectorise the loop.
    """
    L = scale.size
    for n in range(L - 1, -1, -1):
        c = scale[n]
        rb = n + 1 if n + 1 < L else n
        xro = XR[n]
        xio = XI[n]
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
def _bottom_up_jac(scale, tm, wm, sig, thk, gr, gi, er, ei, A, B, XR, XI, jac_thk,
                   FR, FI, GR, GI, HR, HI):  # pragma: no cover - compiled
    """:func:`_bottom_up` plus the per-layer partial derivatives the reverse sweep chains.

    X_n = K (P + e M)/(P - e M), P = X + K, M = X - K, X = X_{n+1}, K = scale[n] Gamma_n,
    e = e_n = exp(-2 Gamma_n h_n), N = P + e M, w = 1/(P - e M). Partial derivatives:
    dX_n/dX = 4 e K^2 w^2 (F), dX_n/dK = N w - 4 e X K w^2, dX_n/de = 2 K M P w^2, with
    de/dln rho = -2 h e dGamma, de/dln h = -2 h e Gamma, dGamma/dln rho = -i omega mu0
    sigma/(2 Gamma) = -(Gamma^2 - lambda^2)/(2 Gamma), dK = scale dGamma, plus K for ``tm``
    (scale = rho). Collected: G = dX_n/dln rho_n = dGamma [c N w - 4 e K w^2 (c X + h M P)]
    (+ K (N w - 4 e X K w^2) for ``tm``), H = dX_n/dln h_n = -4 h e Gamma M P K w^2.
    The bottom layer of a wavenumber has X_n = K_n: G = dK.
    """
    L = scale.size
    for n in range(L - 1, -1, -1):
        c = scale[n]
        q = wm * sig[n]
        rb = n + 1 if n + 1 < L else n
        xro = XR[n]
        xio = XI[n]
        xrb = XR[rb]
        xib = XI[rb]
        grn = gr[n]
        gin = gi[n]
        grr = GR[n]
        gri = GI[n]
        for il in range(B[n], A[n]):
            g_r = grn[il]
            g_i = gin[il]
            xro[il] = c * g_r
            xio[il] = c * g_i
            inv = 0.5 * q / (g_r * g_r + g_i * g_i)
            dkr = -c * g_i * inv
            dki = -c * g_r * inv
            if tm:
                dkr += c * g_r
                dki += c * g_i
            grr[il] = dkr
            gri[il] = dki
        h = thk[n]
        ern = er[n]
        ein = ei[n]
        frn = FR[n]
        fin = FI[n]
        for il in range(B[n]):
            g_r = grn[il]
            g_i = gin[il]
            kr = c * g_r
            ki = c * g_i
            e_r = ern[il]
            e_i = ein[il]
            xr = xrb[il]
            xi = xib[il]
            pr = xr + kr
            pi = xi + ki
            mr = xr - kr
            mi = xi - ki
            emr = e_r * mr - e_i * mi
            emi = e_r * mi + e_i * mr
            nr = pr + emr
            ni = pi + emi
            dr = pr - emr
            di = pi - emi
            inv = 1.0 / (dr * dr + di * di)
            w_r = dr * inv
            w_i = -di * inv
            nwr = nr * w_r - ni * w_i                  # N w
            nwi = nr * w_i + ni * w_r
            xro[il] = kr * nwr - ki * nwi              # X_n = K N w
            xio[il] = kr * nwi + ki * nwr
            w2r = w_r * w_r - w_i * w_i
            w2i = 2.0 * w_r * w_i
            kwr = kr * w2r - ki * w2i                  # K w^2
            kwi = kr * w2i + ki * w2r
            ekr = 4.0 * (e_r * kwr - e_i * kwi)        # 4 e K w^2
            eki = 4.0 * (e_r * kwi + e_i * kwr)
            frn[il] = ekr * kr - eki * ki              # F = 4 e K w^2 K
            fin[il] = ekr * ki + eki * kr
            mpr = h * (mr * pr - mi * pi)              # h M P
            mpi = h * (mr * pi + mi * pr)
            ur = c * xr + mpr
            ui = c * xi + mpi
            vr = c * nwr - (ekr * ur - eki * ui)       # c N w - 4 e K w^2 (c X + h M P)
            vi = c * nwi - (ekr * ui + eki * ur)
            inv = 0.5 * q / (g_r * g_r + g_i * g_i)
            dgr = -g_i * inv
            dgi = -g_r * inv
            ogr = dgr * vr - dgi * vi
            ogi = dgr * vi + dgi * vr
            if tm:
                # + K (N w - 4 e X K w^2)
                fkr = nwr - (ekr * xr - eki * xi)
                fki = nwi - (ekr * xi + eki * xr)
                ogr += kr * fkr - ki * fki
                ogi += kr * fki + ki * fkr
            grr[il] = ogr
            gri[il] = ogi
        if jac_thk:
            hrn = HR[n]
            hin = HI[n]
            for il in range(B[n]):
                # a loop of its own: each loop writes few arrays and stays vectorised
                g_r = grn[il]
                g_i = gin[il]
                kr = c * g_r
                ki = c * g_i
                e_r = ern[il]
                e_i = ein[il]
                pr = xrb[il] + kr
                pi = xib[il] + ki
                mr = xrb[il] - kr
                mi = xib[il] - ki
                dr = pr - (e_r * mr - e_i * mi)
                di = pi - (e_r * mi + e_i * mr)
                inv = 1.0 / (dr * dr + di * di)
                w_r = dr * inv
                w_i = -di * inv
                w2r = w_r * w_r - w_i * w_i
                w2i = 2.0 * w_r * w_i
                kwr = kr * w2r - ki * w2i
                kwi = kr * w2i + ki * w2r
                mpr = -4.0 * h * (mr * pr - mi * pi)   # -4 h M P
                mpi = -4.0 * h * (mr * pi + mi * pr)
                ur = e_r * g_r - e_i * g_i             # e Gamma
                ui = e_r * g_i + e_i * g_r
                vr = mpr * ur - mpi * ui
                vi = mpr * ui + mpi * ur
                hrn[il] = vr * kwr - vi * kwi
                hin[il] = vr * kwi + vi * kwr


@nb.njit(**_JIT)
def _reverse(ar, ai, A, B, FR, FI, GR, GI, HR, HI, jac_thk, OR, OI):  # pragma: no cover
    """Chain rule from the surface down: row n of (OR, OI) = a_n G_n for the first A[n]
    wavenumbers, row L + n = a_n H_n for the first B[n] (other entries are not written:
    the caller sums over those prefixes only); a_0 = ar + i ai on entry (derivative of
    the output with respect to X_0; overwritten), a_{n+1} = a_n F_n."""
    L = A.size
    for n in range(L):
        orn = OR[n]
        oin = OI[n]
        grn = GR[n]
        gin = GI[n]
        for il in range(A[n]):
            orn[il] = ar[il] * grn[il] - ai[il] * gin[il]
            oin[il] = ar[il] * gin[il] + ai[il] * grn[il]
        if jac_thk:
            ort = OR[L + n]
            oit = OI[L + n]
            hrn = HR[n]
            hin = HI[n]
            for il in range(B[n]):
                ort[il] = ar[il] * hrn[il] - ai[il] * hin[il]
                oit[il] = ar[il] * hin[il] + ai[il] * hrn[il]
        frn = FR[n]
        fin = FI[n]
        for il in range(B[n]):
            a_r = ar[il]
            ar[il] = a_r * frn[il] - ai[il] * fin[il]
            ai[il] = a_r * fin[il] + ai[il] * frn[il]


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
    XR = np.zeros((L, nl))
    XI = np.zeros((L, nl))
    ZR = np.zeros((L, nl))
    ZI = np.zeros((L, nl))
    FR = np.zeros((rows, nl))
    FI = np.zeros((rows, nl))
    GR = np.zeros((rows, nl))
    GI = np.zeros((rows, nl))
    HR = np.zeros((rows, nl))
    HI = np.zeros((rows, nl))
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
        if jac:
            _bottom_up_jac(ones, False, wm, sig, thk, gr, gi, er, ei, A, B, XR, XI, jac_thk,
                           FR, FI, GR, GI, HR, HI)
        else:
            _bottom_up(ones, gr, gi, er, ei, A, B, XR, XI)
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
            _reverse(sr, si, A, B, FR, FI, GR, GI, HR, HI, jac_thk, DR, DI)
        if need_tm:
            if jac:
                _bottom_up_jac(res, True, wm, sig, thk, gr, gi, er, ei, A, B, ZR, ZI, jac_thk,
                               FR, FI, GR, GI, HR, HI)
                for il in range(nl):
                    sr[il] = 1.0
                    si[il] = 0.0
                _reverse(sr, si, A, B, FR, FI, GR, GI, HR, HI, jac_thk, BR, BI)
                for il in range(nl):
                    BR[0, il] -= res[0] * lam[il]
            else:
                _bottom_up(res, gr, gi, er, ei, A, B, ZR, ZI)
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
                # layer p affects the first A[p] wavenumbers, its thickness the first B[p]
                m = A[p] if p < L else B[p - L]
                drp = DR[p]
                dip = DI[p]
                s_r = 0.0
                s_i = 0.0
                for il in range(m):
                    ga = wm * gai[il]
                    s_r += drp[il] * gri[il] - dip[il] * ga
                    s_i += dip[il] * gri[il] + drp[il] * ga
                if need_tm:
                    brp = BR[p]
                    bip = BI[p]
                    for il in range(m):
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
