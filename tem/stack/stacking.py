"""Stacking: cut at switch times, polarity-reversal combination, robust stack, errors.

Method (docs/stacking.md, where the weights are derived):

1. The record is cut into half-period windows d_k (M samples each) starting
   at successive switch-off ends; window k has polarity p_k = (-1)^k.
2. Optional baseline removal: the mean over one full period holds no signal
   (a bipolar response obeys s(t + T/2) = -s(t)), so the means of adjacent
   window pairs sample the drift; a line through them is removed from each
   window. This cancels quadratic drift exactly after step 3.
3. Three-window combination (Macnae, Lamontagne & West 1984, Geophysics
   49(7), 934-948, from memory; docs/stacking.md section 3):
   e_k = p_k (d_k - 2 d_{k+1} + d_{k+2}) / 4. Any
   offset plus linear drift cancels exactly. The mean of all e_k is the
   sliding stack with window weights p_j [1, 3, 4, ..., 4, 3, 1] / (4 (n-2)).
4. Robust location of the e_k per sample: one-step M-estimates from a robust
   start (Bickel 1975, JASA 70, 428-434): start m0 = median, scale s0 =
   MAD of a pooled sample spread over the record; then m = m0 + s0 sum(psi(r)) /
   sum(psi'(r)), r = (e - m0) / s0. psi: identity (mean), Huber clip
   (Huber 1964), winsorising at the alpha-quantiles (trimmed mean) or sign
   (median, psi' from a density estimate).
5. Errors: the e_k are correlated (neighbours share windows). The estimates
   are split into B contiguous batches of a few estimates each; the
   per-batch influence sums U_b = s0 (sum_{k in b} psi_k - n_b mean(psi)) /
   sum(psi') give Var(m) = c sum_b U_b^2, where c corrects the batch-means
   factor B/(B-1) for the correlation between neighbouring batches, pooled
   over all samples (:mod:`tem.stack.batchvar`). The U_b and the pooled lag
   correlations are stored so that any linear combination of samples (a
   gate) gets its error the same way.

Steps 1-4 run in one compiled pass per chunk of windows
(:mod:`tem.stack.kernels`; a chunk of an ``.npy`` recording is memory-mapped,
not copied). The numpy helpers here (:func:`combine_three`, :func:`_detrend`)
state the same steps plainly. Reading and headers are apart.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from . import kernels as _kern
from .sources import ArraySource, RecordingSource, WindowSource, clip_level  # noqa: F401
from .batchvar import (MIN_ESTIMATED, batch_lags, linear_variance, pooled_lag_correlations,
                       variance_factor, white_window_correlations)
from ..errors import input_error
from .settings import ESTIMATORS, StackSettings

__all__ = ["ESTIMATORS", "StackSettings", "StackResult", "WindowSource", "ArraySource",
           "RecordingSource", "combine_three", "stack_windows", "stack_source",
           "window_layout", "plain_bipolar_stack", "clip_level", "rail_counts"]

_MAD = 1.482602218505602  # 1 / Phi^{-1}(3/4): MAD -> sigma for Gaussian data


@dataclass
class StackResult:
    """Stacked half-period transient of one channel (units of the input, e.g. V).

    value, error : (M,) stack and one standard error per sample.
    influence : (B, M) batch influence sums; error**2 = c sum_b influence**2
        with c from ``lag_corr`` (:func:`tem.stack.batchvar.variance_factor`).
    lag_corr : (K, L) correlation of neighbouring batch sums at lags 1..L, pooled
        over averages of 1, 4, 16, ... samples (row k: ``batchvar.WIDTHS[k]``;
        empty: uncorrelated batches, c = B/(B-1)).
    n_used : (M,) estimates accepted per sample. scale : (M,) robust sigma of one estimate.
    counts : what was used and rejected, and why.
    window_means : (n_windows,) mean of each half-period window over its
        unclipped samples, in the units of the source as read (volts at the
        logger; not scaled by :meth:`scaled`): the baseline (offset and drift).
    window_rails : (n_windows, 2) int, samples of each window at the positive
        and at the negative full-scale rail.
    window_spans : (n_windows,) largest minus smallest sample of each window
        (units as ``window_means``): a flat window (receiver or cable dropped
        out) spans at most one count.
    """

    value: np.ndarray
    error: np.ndarray
    influence: np.ndarray
    n_used: np.ndarray
    scale: np.ndarray
    counts: dict = field(default_factory=dict)
    lag_corr: np.ndarray = field(default_factory=lambda: np.zeros((1, 0)))
    window_means: np.ndarray = field(default_factory=lambda: np.zeros(0))
    window_rails: np.ndarray = field(default_factory=lambda: np.zeros((0, 2), np.int64))
    window_spans: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def scaled(self, factor: float) -> "StackResult":
        """The stack times ``factor`` (e.g. volts -> field per ampere); window measures kept."""
        f = float(factor)
        return StackResult(self.value * f, self.error * abs(f), self.influence * f,
                           self.n_used.copy(), self.scale * abs(f), dict(self.counts),
                           self.lag_corr.copy(), self.window_means.copy(),
                           self.window_rails.copy(), self.window_spans.copy())

    @classmethod
    def from_dataset(cls, ds, channel: int) -> "StackResult":
        """The result of one channel of a stacked-transient Dataset (``stacked/<station>.nc``).

        Version 1.0 files have no batch count, lag correlations or window
        measures: their batches are taken as uncorrelated.
        """
        from ..io.stacked import COUNT_FIELDS

        counts = {f: int(ds[f].values[channel]) for f in COUNT_FIELDS if f in ds}
        infl = ds["influence"].values[channel].astype(float)
        if "n_batches" in ds:
            infl = infl[:int(ds["n_batches"].values[channel])]
        extra = {}
        if "lag_corr" in ds:
            extra["lag_corr"] = ds["lag_corr"].values[channel].astype(float)
        if "window_mean" in ds:
            wm = ds["window_mean"].values[channel]
            n = int(counts.get("transients_total", wm.size - 2)) + 2
            extra["window_means"] = wm[:n]
            extra["window_rails"] = ds["window_rails"].values[channel][:n]
        return cls(value=ds["value"].values[channel], error=ds["error"].values[channel],
                   influence=infl, n_used=ds["n_used"].values[channel],
                   scale=ds["scale"].values[channel], counts=counts, **extra)

    def linear_error(self, weights) -> np.ndarray:
        """Standard error of ``weights @ value`` for weights (..., M), from the batches."""
        return np.sqrt(linear_variance(weights, self.influence, self.lag_corr))


# ---------------------------------------------------------------------------- kernels
def combine_three(d, polarity0: int = 1):
    """Three-window estimates e_k = p_k (d_k - 2 d_{k+1} + d_{k+2}) / 4 (docs/stacking.md).

    d : (n, M) consecutive half-period windows. Returns (n-2, M), a new array.
    """
    d = np.asarray(d, float)
    p = polarity0 * (1.0 - 2.0 * (np.arange(d.shape[0] - 2) % 2))
    e = d[:-2] - 2.0 * d[1:-1] + d[2:]
    e *= (0.25 * p)[:, None]
    return e


def plain_bipolar_stack(d, polarity0: int = 1):
    """Plain alternating stack (1/n) sum_k p_k d_k (docs/stacking.md), for comparison."""
    d = np.asarray(d, float)
    p = polarity0 * (1.0 - 2.0 * (np.arange(d.shape[0]) % 2))
    return p @ d / d.shape[0]


def _detrend(d, t_frac, clip=None):
    """Remove the period-mean baseline from every window of ``d`` (n, M); new array.

    The boundary baseline between windows j and j+1 is (mu_j + mu_{j+1}) / 2, a
    full-period mean that holds no signal. A line joins consecutive boundary
    values across each window; the outer boundaries are extrapolated linearly.
    ``t_frac`` = (i + 1/2)/M places sample i between the boundaries.
    """
    n = d.shape[0]
    if clip is None:
        mu = d.mean(axis=1)
    else:       # clipped samples do not enter the baseline
        good = ~clip
        mu = np.where(good, d, 0.0).sum(axis=1) / np.maximum(good.sum(axis=1), 1)
    bnd = 0.5 * (mu[:-1] + mu[1:])            # boundaries 1..n-1
    if n >= 4:      # quadratic extrapolation: exact for drift up to degree 2
        bnd = np.concatenate([[3 * bnd[0] - 3 * bnd[1] + bnd[2]], bnd,
                              [3 * bnd[-1] - 3 * bnd[-2] + bnd[-3]]])
    elif n == 3:
        bnd = np.concatenate([[2 * bnd[0] - bnd[1]], bnd, [2 * bnd[-1] - bnd[-2]]])
    else:
        bnd = np.concatenate([[bnd[0]], bnd, [bnd[-1]]])
    b0, b1 = bnd[:-1], bnd[1:]
    out = d - b0[:, None]
    out -= (b1 - b0)[:, None] * t_frac[None, :]
    return out


def window_layout(n_samples: int, fs: float, t_first: float, half_period: float, file=None):
    """Sample index of the first window, samples per window, number of windows, delay.

    t_first : time (s, from sample 0) of the end of a positive switch-off ramp.
    Returns ``(first, m, n_windows, delay, k_first)`` where ``delay`` is the
    time of each window's first sample after its switch-off end (s) and
    ``k_first`` the index of the first usable window counted from t_first.
    """
    m_f = fs * half_period
    m = int(round(m_f))
    if abs(m_f - m) > 1e-6 * max(1.0, m_f) or m < 2:
        raise input_error("sample_rate", f"{fs:g} Hz gives {m_f:g} samples per half-period; "
                          "it must be a whole number", file)
    k_first = 0
    if t_first < 0:
        k_first = int(math.ceil(-t_first / half_period - 1e-9))
    t0 = t_first + k_first * half_period
    first = int(math.ceil(t0 * fs - 1e-6))
    delay = first / fs - t0
    n_windows = (n_samples - first) // m if first < n_samples else 0
    if n_samples < 2 * m:
        raise input_error("n_samples", f"recording of {n_samples / fs:g} s is shorter than one "
                          f"period ({2 * half_period:g} s)", file)
    if n_windows < 4:
        raise input_error("first_switch_off", f"switch times fall outside the recording: "
                          f"{max(n_windows, 0)} half-periods of {n_samples / fs:g} s lie after the "
                          f"first switch at {t_first:+.6g} s from its start", file)
    return first, m, int(n_windows), delay, k_first


def _batches(n_est: int, n_batches: int):
    """Edges of min(n_batches, n_est) contiguous batches of estimates (sizes differ by <= 1)."""
    b = max(1, min(n_batches, n_est))
    edges = np.linspace(0, n_est, b + 1).round().astype(int)
    return edges


def _chunks(edges, per):
    """(k0, k1, batch) estimate ranges of at most ``per`` estimates; never straddle batches."""
    out = []
    for b, (a, z) in enumerate(zip(edges[:-1], edges[1:])):
        for k0 in range(a, z, per):
            out.append((k0, min(z, k0 + per), b))
    return out


def _groups(chunks, per):
    """Runs of consecutive chunks, each run accumulated in order by one worker.

    Small batches are gathered until a run holds ``per`` estimates (mapped
    once); a batch split over several chunks stays in one run (mapped chunk
    by chunk), so no two runs share a batch's accumulators.
    """
    out, cur, size = [], [], 0
    for c in chunks:
        n = c[1] - c[0]
        if cur and size + n > per and c[2] != cur[-1][2]:
            out.append(cur)
            cur, size = [], 0
        cur.append(c)
        size += n
    if cur:
        out.append(cur)
    return out


_NO_WIN = np.zeros((0, 2))
_NO_RAILS = np.zeros((0, 2), np.int64)
_NO_MASK = np.zeros((0, 0), np.bool_)
_NO_F32 = np.zeros(0, np.float32)
_NO_F64 = np.zeros((0, 0))
_NO_THR = np.zeros(3, np.float32)


def _window_span(src, k0, k1, step, detrend):
    """Windows (a, z) the estimates k0, k0+step, ... < k1 need (their baseline included)."""
    last = k0 + (len(range(k0, k1, step)) - 1) * step
    a = max(k0 - 1, 0) if detrend else k0
    z = min(last + 4, src.n_windows) if detrend else last + 3
    return a, z


def _run_kernel(src, k0, k1, step, detrend, t_frac, mode, acc=None, start=None, thr=None,
                limits=(0.0, 0.0), emit=None, windows=(_NO_WIN, _NO_RAILS), block=None):
    """Three-window estimates k0, k0+step, ... < k1 through the compiled kernels.

    Maps windows k0-1 .. last+3 (k0 .. last+2 without detrend: what the
    baseline of the estimates needs), then accumulates into ``acc`` =
    (spsi, cnt, sdpsi, tally) or writes ``emit`` = (e, bad). The mean of a
    chunk without clipped samples goes through :func:`tem.stack.kernels.mean_pass`.
    ``windows`` = (means, rails) of the whole record receive every window read.
    ``block`` = (first window, ``src.view`` of a span holding these windows)
    is used instead of mapping them again. Raises the input error of a NaN or
    infinite sample.
    """
    n_est = len(range(k0, k1, step))
    a, z = _window_span(src, k0, k1, step, detrend)
    if block is None:
        x, vpc, full_scale, clip = src.view(a, z)
    else:
        b0, (xb, vpc, full_scale, clipb) = block
        x = xb[a - b0:z - b0]
        clip = None if clipb is None else clipb[a - b0:z - b0]
    m = src.m
    if acc is None:
        acc = (np.zeros(m), np.zeros(m, np.int64), np.zeros(m, np.int64), np.zeros(6, np.int64))
    spsi, cnt, sdpsi, tally = acc
    pol = src.polarity0 * (1 if a % 2 == 0 else -1)
    done = False
    if mode == _kern.MODE_MEAN and clip is None and step == 1:
        done = _kern.mean_pass(x, float(vpc), float(full_scale), t_frac, bool(detrend), k0 - a,
                               n_est, pol, spsi, tally, a, windows[0])
        if done:
            cnt += n_est
    if not done:
        m0, inv_s, lo, hi = start if start is not None else (_NO_F32,) * 4
        e, bad = emit if emit is not None else (_NO_F64, _NO_MASK)
        _kern.chunk_pass(x, float(vpc), float(full_scale), _NO_MASK if clip is None else clip,
                         t_frac, bool(detrend), k0 - a, n_est, step, pol, mode, m0, inv_s, lo, hi,
                         _NO_THR if thr is None else thr, float(limits[0]), float(limits[1]),
                         spsi, cnt, sdpsi, e, bad, tally, a, windows[0], windows[1])
    del x
    if tally[5]:
        where = src.locate_nan(a, z)
        f, idx = where if where is not None else (None, f"in windows {a}..{z - 1}")
        raise input_error("samples", f"NaN or infinite value at sample {idx}", f)
    return acc


def _robust_start(src, edges, s, t_frac):
    """Start m0, scale s0 (and trimmed bounds lo, hi in units of s0) from a pooled sample.

    The pool holds the first estimates of every batch, every third one
    (neighbours share windows and are correlated, which would shrink the
    spread seen by the MAD), about ``start_estimates`` in all.
    """
    nb = len(edges) - 1
    n_est = src.n_windows - 2
    m = src.m
    per = max(1, min(-(-s.start_estimates // nb), -(-n_est // (3 * nb))))
    pool, pool_bad = [], []
    for b in range(nb):
        k0, k1 = edges[b], min(edges[b + 1], edges[b] + 3 * per)
        n = len(range(k0, k1, 3))
        e, bad = np.empty((n, m)), np.empty((n, m), np.bool_)
        _run_kernel(src, k0, k1, 3, s.detrend, t_frac, _kern.MODE_EMIT, emit=(e, bad))
        pool.append(e)
        pool_bad.append(bad)
    # samples along the fast axis: median and quantiles per sample are then cheap
    e = np.concatenate(pool).T.copy()
    bad = np.concatenate(pool_bad).T
    med = np.empty(m)
    mad = np.empty(m)
    rows = bad.any(axis=1)          # samples with a clipped estimate: NaN-aware (slow) median
    clean = ~rows
    med[clean] = np.median(e[clean], axis=1)
    mad[clean] = np.median(np.abs(e[clean] - med[clean, None]), axis=1)
    if rows.any():
        er = np.where(bad[rows], np.nan, e[rows])
        with warnings.catch_warnings():     # a sample clipped in every estimate: NaN, then 0
            warnings.simplefilter("ignore", RuntimeWarning)
            med[rows] = np.nanmedian(er, axis=1)
            mad[rows] = np.nanmedian(np.abs(er - med[rows, None]), axis=1)
        e[bad] = np.nan
    n = e.shape[1]
    m0 = np.nan_to_num(med)
    s0 = np.nan_to_num(mad) * _MAD * n / max(n - 0.8, 1.0)
    # floor: rounding noise of noise-free data must not reject anything
    floor = max(1e-9 * float(np.max(np.abs(m0))), 1e-30)
    s0 = np.maximum(s0, floor)
    lo = hi = None
    if s.estimator == "trimmed":
        quantile = np.nanquantile if bad.any() else np.quantile   # same values without NaN
        q = quantile(e, [s.trim, 1 - s.trim], axis=1)
        lo = (np.nan_to_num(q[0]) - m0) / s0
        hi = (np.nan_to_num(q[1]) - m0) / s0
    return m0, s0, lo, hi


def stack_source(src: WindowSource, settings: StackSettings = StackSettings(), progress=None):
    """Stack all windows of a :class:`WindowSource` (streams chunk by chunk).

    Two passes: a small one for the robust start (not for ``mean``), then one
    compiled pass over every chunk of windows (:mod:`tem.stack.kernels`) that
    reads each stored sample once and accumulates the psi sums per batch.
    Returns a :class:`StackResult` in the units of the source.
    """
    s = settings
    n_est = src.n_windows - 2
    if n_est < 2:
        raise input_error("n_windows", f"need at least 4 half-periods, got {src.n_windows}")
    m = src.m
    t_frac = (np.arange(m) + 0.5) / m
    edges = _batches(n_est, s.batches)
    nb = len(edges) - 1
    per = max(1, int(s.chunk_bytes // (src.itemsize * m)) - 3)
    chunks = _chunks(edges, per)
    groups = _groups(chunks, per)
    total_steps = len(chunks) + (0 if s.estimator == "mean" else nb)
    step = [0]

    def tick(k=1):
        step[0] += k
        if progress is not None:
            progress(step[0], total_steps)

    # ---- pass 1: robust start from a pooled sample
    h_med = max(0.1, n_est ** -0.2) if s.estimator == "median" else 0.0
    if s.estimator == "mean":
        m0, s0, lo, hi = np.zeros(m), np.ones(m), None, None
        start, thr = None, None
    else:
        m0, s0, lo, hi = _robust_start(src, edges, s, t_frac)
        tick(nb)
        f32 = np.float32
        start = (m0.astype(f32), (1.0 / s0).astype(f32),
                 lo.astype(f32) if lo is not None else np.zeros(m, f32),
                 hi.astype(f32) if hi is not None else np.zeros(m, f32))
        thr = np.array([s.huber_k, s.reject_sigma, h_med], f32)

    # ---- pass 2: psi sums per batch, one compiled pass per chunk. Every batch has its
    # own accumulators and its chunks run in order, so results do not depend on threads.
    spsi_b = np.zeros((nb, m))
    cnt_b = np.zeros((nb, m), np.int64)
    sdpsi_b = np.zeros((nb, m), np.int64)
    tally_b = np.zeros((nb, 6), np.int64)
    wmeans = np.full((src.n_windows, 2), np.nan)     # mean and span of each window
    wrails = np.zeros((src.n_windows, 2), np.int64)
    mode = _kern.MODES[s.estimator]

    def run_group(g):
        # small batches: one mapping for the run's windows; a split batch: chunk by chunk
        block = None
        if g[-1][1] - g[0][0] <= per:
            a, _ = _window_span(src, g[0][0], g[0][1], 1, s.detrend)
            _, z = _window_span(src, g[-1][0], g[-1][1], 1, s.detrend)
            block = (a, src.view(a, z))
        for k0, k1, b in g:
            _run_kernel(src, k0, k1, 1, s.detrend, t_frac, mode,
                        acc=(spsi_b[b], cnt_b[b], sdpsi_b[b], tally_b[b]), start=start, thr=thr,
                        limits=(s.transient_rms, s.bad_fraction), windows=(wmeans, wrails),
                        block=block)
        del block
        return len(g)

    if s.threads > 1:
        from concurrent.futures import ThreadPoolExecutor, as_completed
        with ThreadPoolExecutor(max_workers=s.threads) as pool:
            for fut in as_completed([pool.submit(run_group, g) for g in groups]):
                tick(fut.result())
    else:
        for g in groups:
            tick(run_group(g))
    tally = tally_b.sum(axis=0)
    sdpsi_n = sdpsi_b.sum(axis=0)
    counts = {"transients_total": int(n_est)}
    counts.update({k: int(v) for k, v in zip(_kern.TALLY_FIELDS[:5], tally[:5])})
    counts = {k: counts[k] for k in ("transients_total", "transients_used", "rejected_noisy",
                                     "rejected_bad_samples", "samples_clipped", "samples_outlier")}
    counts.update(rail_counts(wrails))
    if s.estimator == "mean":        # psi' = 1 for every accepted estimate
        sdpsi = cnt_b.sum(axis=0).astype(float)
    elif s.estimator == "median":    # box density estimate of psi'
        sdpsi = sdpsi_n / (2.0 * h_med)
    else:
        sdpsi = sdpsi_n.astype(float)
    res = _finish(s, nb, m0, s0, spsi_b, cnt_b.astype(float), sdpsi, counts)
    res.window_means, res.window_rails = wmeans[:, 0].copy(), wrails
    res.window_spans = wmeans[:, 1].copy()
    return res


def rail_counts(rails) -> dict:
    """Raw samples at the positive and negative full-scale rails and windows touching either.

    rails : (n_windows, 2) samples per window at the positive and negative rail.
    """
    r = np.asarray(rails).reshape(-1, 2)
    return {"clipped_high": int(r[:, 0].sum()), "clipped_low": int(r[:, 1].sum()),
            "windows_clipped": int(np.count_nonzero(r.sum(axis=1)))}


def _finish(s, nb, m0, s0, spsi_b, cnt_b, sdpsi, counts):
    """One-step M-estimate, batch influence sums and errors from the psi sums."""
    n_used = cnt_b.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        denom = np.where(sdpsi > 0, sdpsi, np.nan)
        mean_psi = spsi_b.sum(axis=0) / np.where(n_used > 0, n_used, np.nan)
        value = m0 + s0 * spsi_b.sum(axis=0) / denom
        infl = s0 * (spsi_b - cnt_b * mean_psi) / denom
    # no slope information (all estimates equal to rounding, e.g. noise-free data): keep the start
    flat = ~(sdpsi > 0) & (n_used > 0)
    value = np.where(flat, m0, value)
    infl = np.nan_to_num(infl)
    ss = np.sum(infl * infl, axis=0)
    lags = batch_lags(counts["transients_total"], nb)
    rho = pooled_lag_correlations(infl, lags)
    if nb < MIN_ESTIMATED and rho.size:     # too few batches to estimate them: white windows
        white = white_window_correlations(counts["transients_total"] / nb, rho.shape[1])
        rho = np.tile(white, (rho.shape[0], 1))
    err = np.sqrt(variance_factor(rho[0], nb) * ss)
    if s.estimator == "mean":       # spread of one estimate, from the plain batch variance
        scale = np.sqrt(np.maximum(nb / (nb - 1.0) * ss * n_used, 0.0))
    else:
        scale = s0
    return StackResult(value=value, error=err, influence=infl, n_used=n_used, scale=scale,
                       counts=counts, lag_corr=rho)


def stack_windows(windows, polarity0: int = 1, settings: StackSettings = StackSettings(),
                  clip_mask=None) -> StackResult:
    """Pure kernel: (n, M) half-period windows -> :class:`StackResult`. Input untouched."""
    return stack_source(ArraySource(windows, polarity0, clip_mask), settings)
