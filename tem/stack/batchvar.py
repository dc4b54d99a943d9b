"""Variance of a stack from its batch influence sums, with the correlation between batches.

The three-window estimates e_k share windows, so neighbouring estimates are
correlated (lag-1 correlation 2/3 and lag-2 1/6 for noise that is white from
window to window; the baseline removal couples them up to lag 4). With long
batches the batch sums are nearly independent and the classical batch-means
variance B/(B-1) sum_b U_b^2 is honest, but it has only B - 1 degrees of
freedom: normalised residuals then follow Student's t with B - 1 degrees of
freedom (sd 1.034 and 94.6 % within 2 for B = 32), and a short record (a
2-minute demo station has 58 estimates, that is 5 batches of 10 or more)
gives error bars that are themselves uncertain by 30 % or more.

Short batches (a few estimates each) give many degrees of freedom, but
neighbouring batch sums are then correlated. This module estimates that
correlation once per channel, pooled over all time samples (the correlation
comes from the window sharing, which is the same at every sample), and
corrects the batch variance with it. For batch sums x_b with variance
sigma^2 and lag correlations rho_l (l = 1..L, zero beyond):

    Var(sum_b x_b) = sigma^2 (B F - 2 sum_l l rho_l),  F = 1 + 2 sum_l rho_l,

and for the stored, centred sums U_b = x_b - mean(x) (sum_b U_b = 0), for long
records,

    E[sum_b U_b^2]            = sigma^2 (B - F)
    E[sum_b U_b U_{b+l}]      = sigma^2 (B - l) (rho_l - F / B)

(the algebra of batch means, cf. Law & Kelton 2000, "Simulation modeling and
analysis", 3rd ed., chapter 9, and of lag-window variance estimates, cf.
Newey & West 1987, Econometrica 55(3), 703-708; both from memory; the code
uses the exact moments of the centred sums, ends included: :func:`_moments`).
The pooled ratios
of the sample cross sums are solved for rho_l, and the variance of any linear
combination u_b = w . U_b follows as

    Var = sum_b u_b^2 (B F - 2 sum_l l rho_l) / (B - F)   (long records).

With no correlation (rho = 0) this is the batch-means formula B/(B-1) sum u^2.

Few batches. The correlations cannot be estimated from a short record (8
estimates gave normalised residuals with an rms of 1.85 instead of 1): with
fewer than :data:`MIN_ESTIMATED` batches the correlations of noise that is
white from window to window are used (:func:`white_window_correlations`).
And an error bar estimated from few batches is itself uncertain: the sum of
squares has about nu = tr(CR)^2 / tr((CR)^2) degrees of freedom (C centres,
R is the batch correlation matrix; Satterthwaite 1946, Biometrics Bulletin
2(6), 110-114, from memory), and a residual divided by such an error follows
Student's t with nu degrees of freedom, whose variance is nu / (nu - 2). The
variance is multiplied by that factor (:func:`dof_factor`), so that squared
normalised residuals average 1, as a chi-square misfit assumes; nu is held at
3 or more (a factor of at most 3), and the evening QC calls a record with few
degrees of freedom short (docs/qc.md).

The correlation depends on which noise dominates a combination (at single
samples the residual of a wandering mains and spikes weigh more; an average
over hundreds of samples is dominated by 1/f noise near the base
frequency). It is therefore pooled separately over averages of 1, 4, 16,
64, ... consecutive samples tiling the record, and a linear combination w
uses the correlation of its effective width (sum |w|)^2 / sum w^2,
interpolated in log width.
"""
from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

__all__ = ["batch_lags", "lag_correlations", "variance_factor", "batch_variance",
           "pooled_lag_correlations", "linear_variance", "noise_by_length",
           "white_window_correlations", "effective_dof", "dof_factor", "MIN_ESTIMATED"]

#: Estimates e_k and e_{k+l} share raw windows, or baseline windows, for l <= 4.
CORRELATION_LENGTH = 4


def batch_lags(n_estimates: int, n_batches: int) -> int:
    """Number of batch lags L whose correlation is estimated: L b >= 4 for batch size b."""
    b = max(n_estimates / max(n_batches, 1), 1.0)
    return max(1, math.ceil(CORRELATION_LENGTH / b - 1e-9))


#: Fewest batches from which the lag correlations are estimated; fewer use those of noise
#: white from window to window (measured: 28 single-estimate batches gave residuals with an
#: rms of 1.11 with the estimate, 58 gave 1.04; docs/stacking.md section 5).
MIN_ESTIMATED = 32

#: Correlation of three-window estimates e_k, e_{k+l} (l = 0, 1, 2) for noise white from
#: window to window: weights (1, -2, 1)/4 with alternating sign (module docstring).
_WHITE = (1.0, 2.0 / 3.0, 1.0 / 6.0)


def white_window_correlations(batch_size: float, lags: int) -> np.ndarray:
    """Lag correlations rho_1..rho_L of sums of ``batch_size`` consecutive estimates for noise
    white from window to window (the baseline's weak coupling, 1/M per sample, left out)."""
    b = max(int(round(batch_size)), 1)

    def cov(l):
        return sum(_WHITE[abs(l * b + c - a)] if abs(l * b + c - a) < 3 else 0.0
                   for a in range(b) for c in range(b))

    c0 = cov(0)
    return np.array([cov(l) / c0 for l in range(1, lags + 1)])


def effective_dof(rho, nb: int) -> float:
    """Degrees of freedom of sum_b U_b^2 for centred batch sums with lag correlations ``rho``:
    tr(CR)^2 / tr((CR)^2) (module docstring); nb - 1 without correlation."""
    rho = np.asarray(rho, float).ravel()
    if nb < 2:
        return 1.0
    r = np.eye(nb)
    for l, v in enumerate(rho[:nb - 1], start=1):
        r += v * (np.eye(nb, k=l) + np.eye(nb, k=-l))
    cr = r - r.mean(axis=0, keepdims=True)          # C R with C = I - 11'/B
    t1 = float(np.trace(cr))
    t2 = float(np.sum(cr * cr.T))
    return t1 * t1 / t2 if t2 > 0 else float(nb - 1)


def dof_factor(rho, nb: int) -> float:
    """nu / (nu - 2) for the effective degrees of freedom nu (at least 3): the variance of a
    residual over an error estimated from these batches (Student's t)."""
    nu = max(effective_dof(rho, nb), 3.0)
    return nu / (nu - 2.0)


@lru_cache(maxsize=64)
def _moments(nb: int, lags: int) -> np.ndarray:
    """A[l, k] = tr(J_l C T_k C): E[sum_b U_b U_{b+l}] = sigma^2 sum_k rho_k A[l, k].

    C = I - 11'/B centres the batch sums, J_l has ones at (b, b + l), T_0 = I and
    T_k = J_k + J_k' (the covariance of stationary sums is sigma^2 sum_k rho_k T_k,
    rho_0 = 1). Exact for equal batches, including the ends of the record.
    """
    c = np.eye(nb) - 1.0 / nb
    mats = [np.eye(nb)] + [np.eye(nb, k=k) + np.eye(nb, k=-k) for k in range(1, lags + 1)]
    cmc = [c @ t @ c for t in mats]
    return np.array([[np.sum(np.eye(nb, k=l) * m) for m in cmc] for l in range(lags + 1)])


def lag_correlations(influence, lags: int) -> np.ndarray:
    """Pooled lag correlations rho_1..rho_L of the batch sums behind ``influence``.

    influence : (B, M) centred batch influence sums (any unit).
    The lag-l cross sums c_l(t) and the sums of squares c_0(t) of every
    sample t are pooled as sum_t w_t c_l(t) / sum_t w_t c_0(t), with weights
    w_t = 1 / (c_0 averaged over the 33 samples around t): every sample counts
    about equally, and a weight hardly depends on its own sample (a mean of
    ratios c_l/c_0 would be biased by a few per cent). The pooled ratios are
    set equal to the ratios of the exact expectations of the centred sums
    (:func:`_moments`), a linear system in rho. With few batches the moment
    solution can leave [-1, 1] (seen with 4 batches of a 40 s record); a
    correlation cannot, so the estimate is clipped to it. Returns (L,) floats;
    zeros if nothing is known.
    """
    u = np.asarray(influence, float)
    nb = u.shape[0]
    lags = int(min(lags, nb - 2)) if nb > 2 else 0
    if lags < 1:
        return np.zeros(0)
    c0 = np.einsum("bm,bm->m", u, u)
    if not np.any(c0 > 0):
        return np.zeros(lags)
    k = np.ones(min(33, c0.size))
    smooth = np.convolve(c0, k, "same") / np.convolve(np.ones(c0.size), k, "same")
    w = np.where(smooth > 0, 1.0 / np.where(smooth > 0, smooth, 1.0), 0.0)
    raw = np.array([np.einsum("bm,bm->m", u[l:], u[:-l]) @ w for l in range(1, lags + 1)])
    raw /= float(c0 @ w)
    a = _moments(nb, lags)
    # raw_l (A[0,0] + sum_k A[0,k] rho_k) = A[l,0] + sum_k A[l,k] rho_k
    lhs = a[1:, 1:] - raw[:, None] * a[0, 1:][None, :]
    rhs = raw * a[0, 0] - a[1:, 0]
    try:
        rho = np.linalg.solve(lhs, rhs)
    except np.linalg.LinAlgError:
        return np.zeros(lags)
    return np.clip(rho, -1.0, 1.0) if np.all(np.isfinite(rho)) else np.zeros(lags)


def variance_factor(rho, nb: int, student: bool = True) -> float:
    """Factor c with Var(sum of the batch sums) = c * sum_b U_b^2 (module docstring), times
    :func:`dof_factor` when ``student`` (an error bar for residuals to be divided by).

    Var(sum) = sigma^2 (B + 2 sum_l (B - l) rho_l) and E[sum_b U_b^2] = sigma^2
    sum_k rho_k A[0, k] (:func:`_moments`). Where the correlations do not
    describe the record (the factor would leave [0.1, B/3] times the
    uncorrelated one, e.g. with very few batches) the factor is held there.
    """
    rho = np.asarray(rho, float).ravel()
    t = dof_factor(rho, nb) if student else 1.0
    plain = nb / (nb - 1.0)
    if rho.size == 0 or nb < 3:
        return plain * t
    a = _moments(nb, rho.size)
    ell = np.arange(1, rho.size + 1)
    num = nb + 2.0 * float(np.sum((nb - ell) * rho))
    den = a[0, 0] + float(a[0, 1:] @ rho)
    if not (num > 0 and den > 0):
        return plain * t
    return float(min(max(num / den, 0.1 * plain), plain * nb / 3.0)) * t


def batch_variance(u, rho=()) -> np.ndarray:
    """Variance of a stack (or a linear combination of it) from projected influences.

    u : (..., B) influence sums projected on the weights of interest.
    rho : pooled lag correlations (:func:`lag_correlations`); empty gives the
        plain batch-means variance B/(B-1) sum u^2.
    """
    u = np.asarray(u, float)
    nb = u.shape[-1]
    return variance_factor(rho, nb) * np.sum(u * u, axis=-1)


#: Widths (samples) of the averages the lag correlations are pooled over (each a multiple
#: of the one before).
WIDTHS = (1, 4, 16, 64, 256, 1024)


def pooled_lag_correlations(influence, lags: int) -> np.ndarray:
    """(K, L) lag correlations pooled over averages of ``WIDTHS[k]`` samples (k < K).

    influence : (B, M) centred batch influence sums. Widths up to M/4 are used
    (at least the single samples); each row pools the windows tiling the record.
    """
    u = np.asarray(influence, float)
    nb, m = u.shape
    rows = []
    proj = u
    for k, w in enumerate(WIDTHS):
        if k and 4 * w > m:
            break
        if k:       # sums of WIDTHS[k] samples from sums of the previous width
            f = w // WIDTHS[k - 1]
            n = proj.shape[1] // f
            proj = proj[:, :n * f].reshape(nb, n, f).sum(axis=2)
        rows.append(lag_correlations(proj, lags))
    if not rows or rows[0].size == 0:
        return np.zeros((1, 0))
    return np.vstack(rows)


def linear_variance(weights, influence, lag_corr=()) -> np.ndarray:
    """Variance of ``weights @ value`` for weights (..., M), from the batch influence sums.

    lag_corr : (K, L) from :func:`pooled_lag_correlations` (row k for averages
    of ``WIDTHS[k]`` samples), (L,) for one set, or empty for uncorrelated
    batches.
    """
    w = np.asarray(weights, float)
    infl = np.asarray(influence, float)
    nb = infl.shape[0]
    u = (infl @ w.reshape(-1, w.shape[-1]).T).T.reshape(w.shape[:-1] + (nb,))   # (..., B)
    ss = np.sum(u * u, axis=-1)
    rho = np.asarray(lag_corr, float)
    if rho.ndim == 1 or rho.size == 0 or rho.shape[0] == 1:
        return variance_factor(rho.reshape(-1) if rho.ndim < 2 else rho[0], nb) * ss
    f = np.array([variance_factor(r, nb) for r in rho])
    with np.errstate(invalid="ignore", divide="ignore"):
        width = np.sum(np.abs(w), axis=-1) ** 2 / np.sum(w * w, axis=-1)
    x = np.log(np.nan_to_num(width, nan=1.0).clip(1.0, None))
    xs = np.log(np.asarray(WIDTHS[:f.size], float))
    return np.interp(x, xs, f) * ss


def noise_by_length(influence, lag_corr=(), sel=None, parts=(1, 2, 4, 8)):
    """Noise of stacks of 1/q of the record, measured from the batches, and its power law.

    The batches are grouped into q contiguous parts (halves, quarters, ...).
    A part's stack differs from the whole record's by D_i = (B / B_i) sum of
    its influence sums, so sum_i D_i^2 / (q - 1) estimates the variance of
    the stack of one part, per sample; for q = 1 the variance is that of the
    whole record. Averaged over the samples ``sel`` (bool (M,) or None: all)
    this gives sigma_q, the noise of a stack of N/q periods.

    Random noise falls as N^-1/2 (common practice, no source); the
    least-squares slope of log sigma_q against log(N/q) measures how this
    record's noise falls. Returns ``(slope, parts_used, sigma)``; slope NaN if
    fewer than 3 parts fit (a part needs at least 2 batches).
    """
    u = np.asarray(influence, float)
    nb = u.shape[0]
    if sel is not None:
        u = u[:, np.asarray(sel, bool)]
    if u.shape[1] == 0 or nb < 4:
        return float("nan"), (), np.zeros(0)
    used, sig = [], []
    for q in parts:
        if q == 1:
            rho = np.asarray(lag_corr, float)
            var = variance_factor(rho[0] if rho.ndim == 2 else rho.ravel(), nb,
                                  student=False) * np.sum(u * u, 0)
        elif 2 * q <= nb:
            edges = np.linspace(0, nb, q + 1).round().astype(int)
            d = np.array([u[a:z].sum(axis=0) * nb / (z - a) for a, z in zip(edges[:-1], edges[1:])])
            var = np.sum(d * d, axis=0) / (q - 1)
        else:
            continue
        used.append(q)
        sig.append(math.sqrt(float(np.mean(var))))
    sig = np.array(sig)
    if len(used) < 3 or not np.all(sig > 0):
        return float("nan"), tuple(used), sig
    x = np.log(1.0 / np.asarray(used, float))
    slope = float(np.polyfit(x, np.log(sig), 1)[0])
    return slope, tuple(used), sig
