"""Compiled (numba) kernels of the stacker: one fused pass over a chunk of windows.

A chunk is a block of consecutive half-period windows ``x`` (rows, M) as
stored -- int32 counts of a memory-mapped file, or any real array -- that
is read once, row by row, with no float64 copy of the chunk:

* window means mu_j (volts, over unclipped samples) are summed as each row
  is first touched; they give the period-mean baseline B_j = (mu_{j-1} +
  mu_j)/2 between windows (quadratic extrapolation at the record ends) that
  is removed from each window as the line B_j + (B_{j+1} - B_j) t
  (docs/stacking.md section 2);
* a three-window estimate (docs/stacking.md section 3)
  e_k = p_k (d_k - 2 d_{k+1} + d_{k+2}) / 4 is formed from the stored
  samples as p_k/4 [vpc w - (B_k - 2 B_{k+1} + B_{k+2})
  - t (S_k - 2 S_{k+1} + S_{k+2})], w = x_k - 2 x_{k+1} + x_{k+2} (exact
  for integer counts), S_j = B_{j+1} - B_j: the baseline only enters
  through per-estimate scalars;
* depending on the mode the e_k are written out (robust start), summed
  (mean, chunks with clipped samples), or turned into float32 residuals
  r = (e - m0)/s0 whose per-transient tests (rejection, rms) are made on
  the row before its psi / psi' sums are accumulated (huber, trimmed,
  median) -- two loops over one row held in cache.

:func:`mean_pass` sums a chunk without forming the e_k: sum_k e_k =
sum_j c_j d_j with c_j = p_j [1/4, 3/4, 1, ..., 1, 3/4, 1/4] (docs/stacking.md
section 3), one multiply-add per stored sample, baseline again via scalars.

Thresholds and residuals are float32 and sums float64 as in the numpy
formulation, so results agree with it to rounding. Pure kernels: arrays in,
accumulators updated in place.
"""
from __future__ import annotations

import numba as nb
import numpy as np

from .._numba_cache import numba_cache

_CACHE = numba_cache(__file__)   # False where no cache folder can be written

__all__ = ["MODE_EMIT", "MODE_MEAN", "MODE_HUBER", "MODE_TRIMMED", "MODE_MEDIAN", "MODES",
           "TALLY_FIELDS", "chunk_pass", "mean_pass"]

MODE_EMIT, MODE_MEAN, MODE_HUBER, MODE_TRIMMED, MODE_MEDIAN = 0, 1, 2, 3, 4
MODES = {"mean": MODE_MEAN, "huber": MODE_HUBER, "trimmed": MODE_TRIMMED,
         "median": MODE_MEDIAN}
# tally[i]: counters updated by the kernels (nonfinite: a NaN or infinite sample was met)
TALLY_FIELDS = ("samples_clipped", "samples_outlier", "rejected_noisy", "rejected_bad_samples",
                "transients_used", "nonfinite")


# ---------------------------------------------------------------------------- window means
@nb.njit(cache=_CACHE, fastmath={"reassoc"})
def _row_stats(r):  # pragma: no cover - compiled
    """(sum as float64, min, max) of one row (any summation order)."""
    s = 0.0
    lo = r[0]
    hi = r[0]
    for i in range(r.size):
        v = r[i]
        s += np.float64(v)
        lo = min(lo, v)
        hi = max(hi, v)
    return s, lo, hi


@nb.njit(cache=_CACHE, fastmath={"reassoc"})
def _row_stats_acc(r, c, acc):  # pragma: no cover - compiled
    """:func:`_row_stats` of one row while adding c * row to acc (one read of the row)."""
    s = 0.0
    lo = r[0]
    hi = r[0]
    for i in range(r.size):
        v = r[i]
        f = np.float64(v)
        s += f
        lo = min(lo, v)
        hi = max(hi, v)
        acc[i] += c * f
    return s, lo, hi


@nb.njit(cache=_CACHE)
def _clipped(v, full_scale):  # pragma: no cover - compiled
    # an infinite sample is corrupt, not a sample at the rail: it stays in the row's mean,
    # which becomes non-finite, and the record is refused (NaN or infinite value)
    a = abs(np.float64(v))
    return full_scale > 0 and a >= full_scale and a < np.inf


@nb.njit(cache=_CACHE)
def _row_mean(x, j, s, lo, hi, vpc, full_scale, mask, use_mask):  # pragma: no cover - compiled
    """(mean in volts of the unclipped samples of row j, number clipped, number positive).

    s, lo, hi : sum, min and max of the row (as from :func:`_row_stats`).
    A clipped sample counts as positive (at the positive rail) when its value is > 0.
    """
    m = x.shape[1]
    r = x[j]
    nclip = 0
    npos = 0
    if use_mask:
        for i in range(m):
            nclip += mask[j, i]
            npos += mask[j, i] and r[i] > 0
    elif full_scale > 0 and (_clipped(lo, full_scale) or _clipped(hi, full_scale)):
        for i in range(m):
            c = _clipped(r[i], full_scale)
            nclip += c
            npos += c and r[i] > 0
    if nclip:
        s = 0.0
        for i in range(m):
            c = mask[j, i] if use_mask else _clipped(r[i], full_scale)
            s += 0.0 if c else np.float64(r[i])
    return s * vpc / max(m - nclip, 1), nclip, npos


@nb.njit(cache=_CACHE)
def _ensure_mu(x, upto, vpc, full_scale, mask, use_mask, mu, rowclip, state, wmeans,
               wrails):  # pragma: no cover - compiled
    """Means and clip counts of rows state[0] .. upto; state[2] = 1 on a non-finite mean."""
    for j in range(state[0], upto + 1):
        s, lo, hi = _row_stats(x[j])
        _set_mu(x, j, s, lo, hi, vpc, full_scale, mask, use_mask, mu, rowclip, state, wmeans,
                wrails)


@nb.njit(cache=_CACHE)
def _set_mu(x, j, s, lo, hi, vpc, full_scale, mask, use_mask, mu, rowclip, state, wmeans,
            wrails):  # pragma: no cover - compiled
    """Mean and clip count of row j, also written to the record's window arrays.

    state[1] is the record index of row 0; wmeans (n_windows, 2) and wrails
    (n_windows, 2) receive the mean and the span (largest minus smallest sample;
    volts) and the samples at the positive and negative rail (a row read by two
    chunks gets the same values twice).
    """
    mu[j], rowclip[j], npos = _row_mean(x, j, s, lo, hi, vpc, full_scale, mask, use_mask)
    if not np.isfinite(mu[j]):
        state[2] = 1
    state[0] = j + 1
    g = state[1] + j
    if g < wmeans.shape[0]:
        wmeans[g, 0] = mu[j]
        wmeans[g, 1] = (np.float64(hi) - np.float64(lo)) * vpc
        wrails[g, 0] = npos
        wrails[g, 1] = rowclip[j] - npos


@nb.njit(cache=_CACHE)
def _bound(mu, j, nrow):  # pragma: no cover - compiled
    """Baseline at the start of row j (0 .. nrow); ends extrapolated quadratically."""
    if j == 0:
        return 3 * (0.5 * (mu[0] + mu[1])) - 3 * (0.5 * (mu[1] + mu[2])) + 0.5 * (mu[2] + mu[3])
    if j == nrow:
        n = nrow
        return (3 * (0.5 * (mu[n - 2] + mu[n - 1])) - 3 * (0.5 * (mu[n - 3] + mu[n - 2]))
                + 0.5 * (mu[n - 4] + mu[n - 3]))
    return 0.5 * (mu[j - 1] + mu[j])


@nb.njit(cache=_CACHE)
def _prepare(x, k, vpc, full_scale, mask, use_mask, detrend, mu, rowclip, state, wmeans,
             wrails):  # pragma: no cover - compiled
    """Means up to what estimate k (rows k..k+2) needs; (baseline, slope) combination."""
    nrow = x.shape[0]
    # B_{k+3} needs the mean of row k+3; an extrapolated end (row 0 at the record
    # start, row nrow at its end) needs four means, which rows 0..3 / all rows give
    last = min(k + 3, nrow - 1) if detrend else k + 2
    _ensure_mu(x, last, vpc, full_scale, mask, use_mask, mu, rowclip, state, wmeans, wrails)
    if not detrend:
        return 0.0, 0.0
    b0 = _bound(mu, k, nrow)
    b1 = _bound(mu, k + 1, nrow)
    b2 = _bound(mu, k + 2, nrow)
    b3 = _bound(mu, k + 3, nrow)
    return (b0 - 2.0 * b1) + b2, ((b1 - b0) - 2.0 * (b2 - b1)) + (b3 - b2)


# ---------------------------------------------------------------------------- estimates
@nb.njit(cache=_CACHE, nogil=True)
def chunk_pass(x, vpc, full_scale, mask, t_frac, detrend, j0, n_est, step, pol0, mode,
               m0, inv_s, lo, hi, thr, transient_rms, bad_fraction,
               spsi, cnt, sdpsi, emit_e, emit_bad, tally, row0, wmeans,
               wrails):  # pragma: no cover - compiled
    """Three-window estimates of one chunk: write them out, or accumulate psi sums.

    x : (nrow, M) stored samples of windows a .. a+nrow-1. Row 0 is the
        record start or the row before the first estimate; the last row is
        the record end or the row after the last estimate's third window
        (the baseline at row 0 / row nrow is extrapolated only where an
        estimate needs it, i.e. at the record ends).
    vpc : volts per stored unit. full_scale : clip level (|x| >= it), 0 = none.
    mask : (nrow, M) bool clip flags, or a (0, 0) array to use full_scale.
    t_frac : (M,) (i + 1/2)/M. detrend : remove the period-mean baseline.
    j0, n_est, step : estimates of local rows j0 + q step, q < n_est.
    pol0 : polarity (+-1) of row 0. mode : MODE_*.
    m0, inv_s : (M,) float32 start and inverse scale (robust modes).
    lo, hi : (M,) float32 winsorising bounds (trimmed). thr : float32
        [huber_k, reject_sigma, median box half-width].
    transient_rms, bad_fraction : per-transient rejection limits.
    spsi (M,) float64, cnt (M,) int64, sdpsi (M,) int64 : accumulators (+=)
        of psi, accepted estimates and psi' (a count; the median's box
        density divides it later).
    emit_e (n_est, M) float64, emit_bad (n_est, M) bool : MODE_EMIT output.
    tally : (6,) int64 counters, see TALLY_FIELDS (+=).
    row0 : record index of row 0. wmeans (n_windows, 2) float64, wrails
        (n_windows, 2) int64 : window means and spans (volts) and rail counts, written
        for every row read (zero-size arrays: not written).
    """
    nrow, m = x.shape
    use_mask = mask.shape[0] > 0
    mu = np.zeros(nrow)
    rowclip = np.zeros(nrow, np.int64)
    state = np.zeros(3, np.int64)          # rows with means, record index of row 0, non-finite
    state[1] = row0
    rbuf = np.empty(m, np.float32)
    obuf = np.empty(m, np.bool_)
    cnt32 = np.zeros(m, np.int32)
    sd32 = np.zeros(m, np.int32)
    k_h = thr[0]
    rej = thr[1]
    h_med = thr[2]
    for q in range(n_est):
        k = j0 + q * step
        bc, sc = _prepare(x, k, vpc, full_scale, mask, use_mask, detrend, mu, rowclip, state,
                          wmeans, wrails)
        if state[2]:
            tally[5] = 1
            return
        x0 = x[k]
        x1 = x[k + 1]
        x2 = x[k + 2]
        has_clip = rowclip[k] + rowclip[k + 1] + rowclip[k + 2] > 0
        qp = 0.25 * (pol0 if k % 2 == 0 else -pol0)
        nbad = 0
        if mode == MODE_EMIT:
            for i in range(m):
                w = (np.float64(x0[i]) - 2.0 * np.float64(x1[i])) + np.float64(x2[i])
                emit_e[q, i] = ((vpc * w - bc) - sc * t_frac[i]) * qp
                emit_bad[q, i] = False
            if has_clip:
                for i in range(m):
                    if use_mask:
                        emit_bad[q, i] = mask[k, i] or mask[k + 1, i] or mask[k + 2, i]
                    else:
                        emit_bad[q, i] = (_clipped(x0[i], full_scale) or _clipped(x1[i], full_scale)
                                          or _clipped(x2[i], full_scale))
            continue
        if has_clip:     # rare: flags of samples touching a clipped sample into obuf
            for i in range(m):
                if use_mask:
                    obuf[i] = mask[k, i] or mask[k + 1, i] or mask[k + 2, i]
                else:
                    obuf[i] = (_clipped(x0[i], full_scale) or _clipped(x1[i], full_scale)
                               or _clipped(x2[i], full_scale))
                nbad += obuf[i]
        tally[0] += nbad
        if mode == MODE_MEAN:
            if has_clip:
                for i in range(m):
                    w = (np.float64(x0[i]) - 2.0 * np.float64(x1[i])) + np.float64(x2[i])
                    e = ((vpc * w - bc) - sc * t_frac[i]) * qp
                    b = obuf[i]
                    spsi[i] += 0.0 if b else e
                    cnt32[i] += not b
            else:
                for i in range(m):
                    w = (np.float64(x0[i]) - 2.0 * np.float64(x1[i])) + np.float64(x2[i])
                    spsi[i] += ((vpc * w - bc) - sc * t_frac[i]) * qp
                    cnt32[i] += 1
            tally[4] += 1
            continue
        # robust: float32 residuals of the row and its tests ...
        ahead = k + 4 if (step == 1 and k + 4 < nrow and state[0] == k + 4) else k
        nout, sa, lo_a, hi_a = _residuals(x0, x1, x2, x[ahead], vpc, bc, sc, t_frac, qp, m0,
                                          inv_s, rej, rbuf)
        if ahead != k:
            _set_mu(x, ahead, sa, lo_a, hi_a, vpc, full_scale, mask, use_mask, mu, rowclip, state,
                    wmeans, wrails)
        ss = _sum_sq_capped(rbuf, rej)
        if has_clip:    # samples touching a clipped one are out: NaN residual
            for i in range(m):
                if obuf[i]:
                    nout += not abs(rbuf[i]) > rej
                    rbuf[i] = np.nan
        if np.sqrt(ss / m) > transient_rms:
            tally[2] += 1
            continue
        if nout / m > bad_fraction:
            tally[3] += 1
            continue
        tally[4] += 1
        tally[1] += nout - nbad
        # ... then its psi and psi' sums (out: |r| > reject_sigma or NaN)
        if mode == MODE_HUBER:
            _huber_sums(rbuf, rej, k_h, spsi, cnt32, sd32)
        elif mode == MODE_TRIMMED:
            _trimmed_sums(rbuf, rej, lo, hi, spsi, cnt32, sd32)
        else:
            _median_sums(rbuf, rej, h_med, spsi, cnt32, sd32)
    for i in range(m):
        cnt[i] += cnt32[i]
        sdpsi[i] += sd32[i]


@nb.njit(cache=_CACHE)
def _residuals(x0, x1, x2, xa, vpc, bc, sc, t_frac, qp, m0, inv_s, rej, rbuf):  # pragma: no cover
    """rbuf = float32 (e - m0)/s0 of one estimate from rows x0, x1, x2.

    Returns the count of |r| > rej and (sum, min, max) of row ``xa``, read
    in the same loop (the row a later estimate needs next: its first touch
    overlaps with the arithmetic). Integer rows are summed exactly in int64.
    """
    nout = 0
    sa = (xa[0] - xa[0]) + np.int64(0)      # int64 for integer rows, float64 otherwise
    lo = xa[0]
    hi = xa[0]
    for i in range(rbuf.size):
        w = (np.float64(x0[i]) - 2.0 * np.float64(x1[i])) + np.float64(x2[i])
        e = ((vpc * w - bc) - sc * t_frac[i]) * qp
        r = (np.float32(e) - m0[i]) * inv_s[i]
        rbuf[i] = r
        nout += abs(r) > rej
        v = xa[i]
        sa += v
        lo = min(lo, v)
        hi = max(hi, v)
    return nout, np.float64(sa), lo, hi


@nb.njit(cache=_CACHE)
def _huber_sums(rbuf, rej, k_h, spsi, cnt, sd):  # pragma: no cover - compiled
    """psi = clip(r, -k, k) (Huber 1964), psi' = [|r| <= k], of kept residuals."""
    f0 = np.float32(0.0)
    for i in range(rbuf.size):
        r = rbuf[i]
        keep = abs(r) <= rej
        psi = min(max(r, -k_h), k_h)
        spsi[i] += np.float64(psi if keep else f0)
        cnt[i] += keep
        sd[i] += keep & (abs(r) <= k_h)


@nb.njit(cache=_CACHE)
def _trimmed_sums(rbuf, rej, lo, hi, spsi, cnt, sd):  # pragma: no cover - compiled
    """psi = r winsorised at [lo, hi], psi' = [lo < psi < hi], of kept residuals."""
    f0 = np.float32(0.0)
    for i in range(rbuf.size):
        r = rbuf[i]
        keep = abs(r) <= rej
        psi = min(max(r, lo[i]), hi[i])
        spsi[i] += np.float64(psi if keep else f0)
        cnt[i] += keep
        sd[i] += keep & (psi > lo[i]) & (psi < hi[i])


@nb.njit(cache=_CACHE)
def _median_sums(rbuf, rej, h_med, spsi, cnt, sd):  # pragma: no cover - compiled
    """psi = sign(r), psi' counted in the box |r| < h, of kept residuals."""
    one = np.float32(1.0)
    f0 = np.float32(0.0)
    for i in range(rbuf.size):
        r = rbuf[i]
        keep = abs(r) <= rej
        psi = (one if r > f0 else f0) - (one if r < f0 else f0)
        spsi[i] += np.float64(psi if keep else f0)
        cnt[i] += keep
        sd[i] += keep & (min(abs(r), rej) < h_med)


@nb.njit(cache=_CACHE, fastmath={"reassoc"})
def _sum_sq_capped(r, cap):  # pragma: no cover - compiled
    """sum_i min(|r_i|, cap)^2 in float64 (r float32)."""
    s = 0.0
    for i in range(r.size):
        a = np.float64(min(abs(r[i]), cap))
        s += a * a
    return s


# ---------------------------------------------------------------------------- linear sum
@nb.njit(cache=_CACHE, nogil=True)
def mean_pass(x, vpc, full_scale, t_frac, detrend, j0, n_est, pol0, spsi, tally, row0,
              wmeans):  # pragma: no cover - compiled
    """sum_k e_k of estimates j0 .. j0+n_est-1 of a chunk, added to spsi (M,).

    Same chunk layout as :func:`chunk_pass`. Returns False, adding nothing,
    if the chunk holds a clipped sample (then each estimate needs its own
    flags: use :func:`chunk_pass`). Also counts the transients in tally and
    writes the window means and spans (volts) to wmeans[row0 + j] (rails hold no sample).
    """
    nrow, m = x.shape
    acc = np.zeros(m)
    mu = np.zeros(nrow)
    span = np.zeros(nrow)
    nonfinite = False
    clipped = False
    for j in range(nrow):
        r = x[j]
        # weight of window j in sum_k e_k: p_j (1 [k=j] + 2 [k=j-1] + 1 [k=j-2]) / 4
        a = 0
        for d, w in ((0, 1), (1, 2), (2, 1)):
            if j0 <= j - d < j0 + n_est:
                a += w
        c = (0.25 * a) * (pol0 if j % 2 == 0 else -pol0)
        s, lo, hi = _row_stats(r) if a == 0 else _row_stats_acc(r, c, acc)
        mu[j] = s * vpc / m
        span[j] = (np.float64(hi) - np.float64(lo)) * vpc
        nonfinite |= not np.isfinite(mu[j])
        clipped |= _clipped(lo, full_scale) or _clipped(hi, full_scale)
    if nonfinite:
        tally[5] = 1
        return True
    if clipped:
        return False
    for j in range(nrow):
        if row0 + j < wmeans.shape[0]:
            wmeans[row0 + j, 0] = mu[j]
            wmeans[row0 + j, 1] = span[j]
    beta = 0.0
    gamma = 0.0
    if detrend:     # sum_j c_j (B_j + (B_{j+1} - B_j) t)
        for j in range(j0, j0 + n_est + 2):
            a = 0
            for d, w in ((0, 1), (1, 2), (2, 1)):
                if j0 <= j - d < j0 + n_est:
                    a += w
            c = (0.25 * a) * (pol0 if j % 2 == 0 else -pol0)
            b0 = _bound(mu, j, nrow)
            beta += c * b0
            gamma += c * (_bound(mu, j + 1, nrow) - b0)
    for i in range(m):
        spsi[i] += (vpc * acc[i] - beta) - gamma * t_frac[i]
    tally[4] += n_est
    return True
