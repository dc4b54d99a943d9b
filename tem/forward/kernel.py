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
differentiation): the upward pass stores each layer's partial derivatives,
and one downward pass per receiver, seeded with that receiver's wavenumber
coefficients, chains them and sums over wavenumbers as it goes (TE and TM
chains together), so all derivatives cost 1.6-2x one kernel evaluation.
e_n is floored at exp(-80) (``_E_ARG_MIN``) so that no product in these
passes becomes a subnormal number.

:func:`fused_spectra` evaluates the kernels and integrates them against the
caller's wavenumber-coefficient matrices in one compiled pass;
:func:`fused_spectra_many` does it for many models (threads over models).
The compiled functions carry no input checks: ``Simulation`` validates once.
"""
from __future__ import annotations

import numba as nb
import numpy as np

from .._numba_cache import numba_cache
from .vecmath import exp_neg, sincos

MU0 = 4e-7 * np.pi

__all__ = ["MU0", "fused_spectra", "fused_spectra_many"]

_ATT_MAX = 20.0
# e_n = exp(-2 Gamma_n h_n) is floored at exp(-80): below it e_n cannot change a value by
# a rounding unit, but its products (e, F = 4 e (K w)^2, chained in the reverse sweep) would
# reach subnormal numbers, which the processor handles ~100x slower
_E_ARG_MIN = -80.0
LANES = 8   # SIMD width in doubles (AVX-512, a multiple of narrower ones); callers pad to it
_CACHE = numba_cache(__file__)   # False where no cache folder can be written
_JIT = dict(cache=_CACHE, fastmath=True, error_model="numpy")


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
            m = exp_neg(max(-h2 * g, _E_ARG_MIN))
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
def _bottom_up_jac(scale, tmf, wm, sig, thk, l2, gr, gi, er, ei, A, B, XR, XI, FR, FI, GR, GI,
                   jac_thk, HR, HI):  # pragma: no cover - compiled
    """:func:`_bottom_up` plus the per-layer partial derivatives the reverse sweep chains.

    X_n = K (P + e M)/(P - e M), P = X + K, M = X - K, X = X_{n+1}, K = c Gamma_n with
    c = scale[n] (1 for TE, rho_n for TM), e = exp(-2 Gamma_n h_n), w = 1/(P - e M):
    F = dX_n/dX = 4 e (K w)^2; dX_n/dK = (X_n - X F)/K; dX_n/de = 2 K P M w^2. With
    dGamma/dln rho = -i omega mu0 sigma/(2 Gamma) = Gamma d, d = -t (q + i lambda^2),
    q = omega mu0 sigma, t = q/(2 (lambda^4 + q^2)) (as Gamma^2 = lambda^2 + i q), and
    de/dln rho = -2 h e Gamma d, de/dln h = -2 h e Gamma:
    G = dX_n/dln rho_n = d [X_n - X F - (h/c) F P M] + tmf (X_n - X F) (tmf = 1 for TM,
    where c = rho_n varies too, else 0), H = dX_n/dln h_n = -(h/c) F P M (with ``jac_thk``,
    in a loop of its own: loops that write few arrays stay vectorised). The bottom layer
    of a wavenumber has X_n = K: G = K d + tmf K.
    """
    L = scale.size
    for n in range(L - 1, -1, -1):
        c = scale[n]
        q = wm * sig[n]
        hc = thk[n] / c
        rb = n + 1 if n + 1 < L else n
        grn = gr[n]
        gin = gi[n]
        ern = er[n]
        ein = ei[n]
        xro = XR[n]
        xio = XI[n]
        xrb = XR[rb]
        xib = XI[rb]
        fro = FR[n]
        fio = FI[n]
        gro = GR[n]
        gio = GI[n]
        for il in range(B[n], A[n]):
            x = l2[il]
            t = 0.5 * q / (x * x + q * q)
            dr = -t * q + tmf
            di = -t * x
            kr = c * grn[il]
            ki = c * gin[il]
            xro[il] = kr
            xio[il] = ki
            gro[il] = dr * kr - di * ki
            gio[il] = dr * ki + di * kr
        for il in range(B[n]):
            x = l2[il]
            t = 0.5 * q / (x * x + q * q)
            dr = -t * q
            di = -t * x
            kr = c * grn[il]
            ki = c * gin[il]
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
            nr_ = pr + emr
            ni_ = pi + emi
            d_r = pr - emr
            d_i = pi - emi
            inv = 1.0 / (d_r * d_r + d_i * d_i)
            w_r = d_r * inv
            w_i = -d_i * inv
            kwr = kr * w_r - ki * w_i                  # K w
            kwi = kr * w_i + ki * w_r
            x0r = kwr * nr_ - kwi * ni_                # X_n = K w N
            x0i = kwr * ni_ + kwi * nr_
            k2r = kwr * kwr - kwi * kwi
            k2i = 2.0 * kwr * kwi
            fr = 4.0 * (e_r * k2r - e_i * k2i)         # F = 4 e (K w)^2
            fi = 4.0 * (e_r * k2i + e_i * k2r)
            ar = x0r - (xr * fr - xi * fi)             # X_n - X F
            ai = x0i - (xr * fi + xi * fr)
            pmr = pr * mr - pi * mi
            pmi = pr * mi + pi * mr
            vr = ar - hc * (fr * pmr - fi * pmi)      # X_n - X F - (h/c) F P M
            vi = ai - hc * (fr * pmi + fi * pmr)
            xro[il] = x0r
            xio[il] = x0i
            fro[il] = fr
            fio[il] = fi
            gro[il] = dr * vr - di * vi + tmf * ar
            gio[il] = dr * vi + di * vr + tmf * ai
        if jac_thk:
            hro = HR[n]
            hio = HI[n]
            for il in range(B[n]):
                kr = c * grn[il]
                ki = c * gin[il]
                pr = xrb[il] + kr
                pi = xib[il] + ki
                mr = xrb[il] - kr
                mi = xib[il] - ki
                pmr = pr * mr - pi * mi
                pmi = pr * mi + pi * mr
                hro[il] = -hc * (fro[il] * pmr - fio[il] * pmi)   # H = -(h/c) F P M
                hio[il] = -hc * (fro[il] * pmi + fio[il] * pmr)


@nb.njit(**_JIT)
def _bottom_up_jac_te(wm, sig, thk, l2, gr, gi, er, ei, A, B, XR, XI, FR, FI, GR,
                      GI):  # pragma: no cover - compiled
    """:func:`_bottom_up_jac` for TE (K = Gamma), resistivity derivatives only, written as
    G = d [X_n - F (X + h P M)]: one complex product fewer per layer and wavenumber."""
    L = sig.size
    for n in range(L - 1, -1, -1):
        q = wm * sig[n]
        h = thk[n]
        rb = n + 1 if n + 1 < L else n
        grn = gr[n]
        gin = gi[n]
        ern = er[n]
        ein = ei[n]
        xro = XR[n]
        xio = XI[n]
        xrb = XR[rb]
        xib = XI[rb]
        fro = FR[n]
        fio = FI[n]
        gro = GR[n]
        gio = GI[n]
        for il in range(B[n], A[n]):
            x = l2[il]
            t = 0.5 * q / (x * x + q * q)
            dr = -t * q
            di = -t * x
            kr = grn[il]
            ki = gin[il]
            xro[il] = kr
            xio[il] = ki
            gro[il] = dr * kr - di * ki
            gio[il] = dr * ki + di * kr
        for il in range(B[n]):
            x = l2[il]
            t = 0.5 * q / (x * x + q * q)
            dr = -t * q
            di = -t * x
            kr = grn[il]
            ki = gin[il]
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
            nr_ = pr + emr
            ni_ = pi + emi
            d_r = pr - emr
            d_i = pi - emi
            inv = 1.0 / (d_r * d_r + d_i * d_i)
            w_r = d_r * inv
            w_i = -d_i * inv
            kwr = kr * w_r - ki * w_i                  # K w
            kwi = kr * w_i + ki * w_r
            x0r = kwr * nr_ - kwi * ni_                # X_n = K w N
            x0i = kwr * ni_ + kwi * nr_
            k2r = kwr * kwr - kwi * kwi
            k2i = 2.0 * kwr * kwi
            fr = 4.0 * (e_r * k2r - e_i * k2i)         # F = 4 e (K w)^2
            fi = 4.0 * (e_r * k2i + e_i * k2r)
            yr = xr + h * (pr * mr - pi * mi)          # X + h P M
            yi = xi + h * (pr * mi + pi * mr)
            vr = x0r - (fr * yr - fi * yi)             # X_n - F (X + h P M)
            vi = x0i - (fr * yi + fi * yr)
            xro[il] = x0r
            xio[il] = x0i
            fro[il] = fr
            fio[il] = fi
            gro[il] = dr * vr - di * vi
            gio[il] = dr * vi + di * vr


@nb.njit(**_JIT)
def _reverse_sum(ar, ai, A, B, FR, FI, GR, GI, HR, HI, jac_thk, out):  # pragma: no cover
    """Chain rule from the surface down, summed over wavenumbers: out[n] += sum a_n G_n over
    the first A[n] wavenumbers, out[L + n] += sum a_n H_n over the first B[n]; a_0 = ar + i ai
    on entry (the output's derivative with respect to X_0, per wavenumber; overwritten),
    a_{n+1} = a_n F_n."""
    L = A.size
    for n in range(L):
        grn, gin, hrn, hin, frn, fin = GR[n], GI[n], HR[n], HI[n], FR[n], FI[n]
        s_r = 0.0
        s_i = 0.0
        for il in range(A[n]):
            s_r += ar[il] * grn[il] - ai[il] * gin[il]
            s_i += ar[il] * gin[il] + ai[il] * grn[il]
        out[n] += complex(s_r, s_i)
        if jac_thk:
            s_r = 0.0
            s_i = 0.0
            for il in range(B[n]):
                s_r += ar[il] * hrn[il] - ai[il] * hin[il]
                s_i += ar[il] * hin[il] + ai[il] * hrn[il]
            out[L + n] += complex(s_r, s_i)
        for il in range(B[n]):
            a_r = ar[il]
            ar[il] = a_r * frn[il] - ai[il] * fin[il]
            ai[il] = a_r * fin[il] + ai[il] * frn[il]


@nb.njit(**_JIT)
def _reverse_sum2(ar, ai, br, bi, A, B, FR, FI, GR, GI, PR, PI, QR, QI, out):  # pragma: no cover
    """:func:`_reverse_sum` of the TE (a; F, G) and TM (b; P, Q) chains in one sweep,
    resistivity derivatives only."""
    L = A.size
    for n in range(L):
        grn, gin, frn, fin = GR[n], GI[n], FR[n], FI[n]
        qrn, qin, prn, pin = QR[n], QI[n], PR[n], PI[n]
        s_r = 0.0
        s_i = 0.0
        for il in range(A[n]):
            s_r += ar[il] * grn[il] - ai[il] * gin[il] + br[il] * qrn[il] - bi[il] * qin[il]
            s_i += ar[il] * gin[il] + ai[il] * grn[il] + br[il] * qin[il] + bi[il] * qrn[il]
        out[n] += complex(s_r, s_i)
        for il in range(B[n]):
            a_r = ar[il]
            ar[il] = a_r * frn[il] - ai[il] * fin[il]
            ai[il] = a_r * fin[il] + ai[il] * frn[il]
            b_r = br[il]
            br[il] = b_r * prn[il] - bi[il] * pin[il]
            bi[il] = b_r * pin[il] + bi[il] * prn[il]


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
    XR = np.zeros((L, nl))
    XI = np.zeros((L, nl))
    ZR = np.zeros((L, nl))
    ZI = np.zeros((L, nl))
    rows = L if jac else 1
    W = np.empty((12, rows, nl))           # F, G, H of TE, then of TM (jac only)
    rr = np.empty(nl)
    ri = np.empty(nl)
    sr = np.empty(nl)
    si = np.empty(nl)
    ar = np.empty(nl)
    ai = np.empty(nl)
    br = np.empty(nl)
    bi = np.empty(nl)
    out = np.zeros(2 * L, np.complex128)
    lgb = np.zeros(nr)                     # sum_l lambda Gb: d(-rho_1 lambda)/dln rho_1 term
    for ir in range(nr):
        for il in range(nl):
            lgb[ir] += lam[il] * Gb[ir, il]
    for iw in range(nw):
        wm = omega[iw] * MU0
        _top_down(l2, wm, sig, thk, gr, gi, er, ei, att, A, B)
        if jac:
            if jac_thk:
                _bottom_up_jac(ones, 0.0, wm, sig, thk, l2, gr, gi, er, ei, A, B, XR, XI,
                               W[0], W[1], W[2], W[3], jac_thk, W[4], W[5])
            else:
                _bottom_up_jac_te(wm, sig, thk, l2, gr, gi, er, ei, A, B, XR, XI, W[0], W[1],
                                  W[2], W[3])
            if need_tm:
                _bottom_up_jac(res, 1.0, wm, sig, thk, l2, gr, gi, er, ei, A, B, ZR, ZI,
                               W[6], W[7], W[8], W[9], jac_thk, W[10], W[11])
        else:
            _bottom_up(ones, gr, gi, er, ei, A, B, XR, XI)
            if need_tm:
                _bottom_up(res, gr, gi, er, ei, A, B, ZR, ZI)
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
            if not jac:
                continue
            # reverse sweep seeded with d F[w, r]/d X_0 = dR/dY (Gr + i w mu0 Ga) per wavenumber
            for il in range(nl):
                ga = wm * gai[il]
                ar[il] = sr[il] * gri[il] - si[il] * ga
                ai[il] = si[il] * gri[il] + sr[il] * ga
            out[:] = 0.0
            if need_tm:
                for il in range(nl):
                    br[il] = gbi[il]
                    bi[il] = 0.0
                out[0] -= res[0] * lgb[ir]
            if need_tm and not jac_thk:
                _reverse_sum2(ar, ai, br, bi, A, B, W[0], W[1], W[2], W[3], W[6], W[7], W[8], W[9],
                              out)
            else:
                _reverse_sum(ar, ai, A, B, W[0], W[1], W[2], W[3], W[4], W[5], jac_thk, out)
                if need_tm:
                    _reverse_sum(br, bi, A, B, W[6], W[7], W[8], W[9], W[10], W[11], jac_thk,
                                 out)
            for p in range(2 * L if jac_thk else L):
                dF[p, iw, ir] += out[p]


@nb.njit(cache=_CACHE, parallel=True)
def _many_models(lam, omega, res, thk, need_tm, Gr, Ga, Gb, F):  # pragma: no cover - compiled
    """_one_model for every row of res/thk (no derivatives), models spread over threads."""
    dummy = np.zeros((0, omega.size, Gr.shape[0]), np.complex128)
    for m in nb.prange(res.shape[0]):
        _one_model(lam, omega, res[m], thk[m], need_tm, False, False, Gr, Ga, Gb, F[m], dummy)


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
    # slots: ln rho_0..L-1, then ln h_0..L-2 (slot 2L - 1, the half-space, is unused)
    return F, dF[:2 * L - 1 if jac_thk else L]


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
