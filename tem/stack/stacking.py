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
   are split into B contiguous batches; the per-batch influence sums
   U_b = s0 (sum_{k in b} psi_k - n_b mean(psi)) / sum(psi') give
   Var(m) = B/(B-1) sum_b U_b^2 (batch means). Batches are long compared
   with the correlation length, so this is honest for any short-range
   correlation; the U_b are stored so that any linear combination of samples
   (a gate) gets its error the same way.

Steps 1-4 run in one compiled pass per chunk of windows
(:mod:`tem.stack.kernels`; a chunk of an ``.npy`` recording is memory-mapped,
not copied). The numpy helpers here (:func:`combine_three`, :func:`_detrend`)
state the same steps plainly. Reading and headers are apart.
"""
from __future__ import annotations

import math
import mmap
from dataclasses import dataclass, field

import numpy as np

from . import kernels as _kern
from ..errors import input_error
from .settings import ESTIMATORS, StackSettings

__all__ = ["ESTIMATORS", "StackSettings", "StackResult", "WindowSource", "ArraySource",
           "RecordingSource", "combine_three", "stack_windows", "stack_source",
           "window_layout", "detect_switch_times", "plain_bipolar_stack", "ChannelStack",
           "stack_station", "timing_for_station"]

_MAD = 1.482602218505602  # 1 / Phi^{-1}(3/4): MAD -> sigma for Gaussian data


@dataclass
class StackResult:
    """Stacked half-period transient of one channel (units of the input, e.g. V).

    value, error : (M,) stack and one standard error per sample.
    influence : (B, M) batch influence sums; error**2 = B/(B-1) sum_b influence**2.
    n_used : (M,) estimates accepted per sample. scale : (M,) robust sigma of one estimate.
    counts : what was used and rejected, and why.
    """

    value: np.ndarray
    error: np.ndarray
    influence: np.ndarray
    n_used: np.ndarray
    scale: np.ndarray
    counts: dict = field(default_factory=dict)

    def scaled(self, factor: float) -> "StackResult":
        f = float(factor)
        return StackResult(self.value * f, self.error * abs(f), self.influence * f,
                           self.n_used.copy(), self.scale * abs(f), dict(self.counts))

    @classmethod
    def from_dataset(cls, ds, channel: int) -> "StackResult":
        """The result of one channel of a stacked-transient Dataset (``stacked/<station>.nc``)."""
        from ..io.stacked import COUNT_FIELDS

        counts = {f: int(ds[f].values[channel]) for f in COUNT_FIELDS if f in ds}
        return cls(value=ds["value"].values[channel], error=ds["error"].values[channel],
                   influence=ds["influence"].values[channel], n_used=ds["n_used"].values[channel],
                   scale=ds["scale"].values[channel], counts=counts)

    def linear_error(self, weights) -> np.ndarray:
        """Standard error of ``weights @ value`` for weights (..., M), from the batches."""
        w = np.asarray(weights, float)
        u = w @ self.influence.T  # (..., B)
        b = self.influence.shape[0]
        return np.sqrt(b / (b - 1.0) * np.sum(u * u, axis=-1))


# ---------------------------------------------------------------------------- window sources
class WindowSource:
    """Consecutive half-period windows.

    ``get(k0, k1)`` -> ((k1-k0, M) float64 new array, bool mask of
    digitiser-clipped samples or None). ``view(k0, k1)`` -> (rows as stored,
    e.g. int32 counts, no copy where possible; factor to volts; clip level
    ``|x| >= full_scale`` or 0; bool clip mask or None) feeds the compiled
    kernels. ``polarity0``: polarity of window 0.
    """

    n_windows: int
    m: int
    polarity0: int = 1

    def get(self, k0, k1):  # pragma: no cover - interface
        raise NotImplementedError

    def locate_nan(self, k0, k1):
        return None

    def view(self, k0, k1):
        d, clip = self.get(k0, k1)
        return d, 1.0, 0.0, clip

    @property
    def itemsize(self) -> int:
        return 8


class ArraySource(WindowSource):
    """Windows from an in-memory (n, M) array (never modified)."""

    def __init__(self, windows, polarity0: int = 1, clip_mask=None):
        self._d = np.asarray(windows)
        if self._d.ndim != 2:
            raise ValueError("windows: expected a 2-D (n_windows, samples) array")
        if not np.issubdtype(self._d.dtype, np.number) or np.iscomplexobj(self._d):
            self._d = self._d.astype(np.float64)
        self.n_windows, self.m = self._d.shape
        self.polarity0 = 1 if polarity0 >= 0 else -1
        self._clip = None if clip_mask is None else np.asarray(clip_mask, bool)

    def get(self, k0, k1):
        clip = None if self._clip is None else self._clip[k0:k1]
        return np.array(self._d[k0:k1], dtype=np.float64), clip

    def view(self, k0, k1):
        clip = None if self._clip is None else np.ascontiguousarray(self._clip[k0:k1])
        return np.ascontiguousarray(self._d[k0:k1]), 1.0, 0.0, clip

    @property
    def itemsize(self) -> int:
        return self._d.dtype.itemsize

    def locate_nan(self, k0, k1):
        bad = np.flatnonzero(~np.isfinite(self._d[k0:k1]).ravel())
        return None if bad.size == 0 else ("windows", k0 * self.m + int(bad[0]))


def _npy_layout(rec):
    """Parts of an npy-backed recording as (first sample, samples, path, dtype, byte offset).

    None if any part is not a plain 1-D native-endian ``.npy`` file (then
    samples are read through the recording). Headers are parsed by
    ``np.load(mmap_mode="r")`` (never unpickles); nothing is read here.
    """
    parts = getattr(rec, "parts", None) or [rec]
    out, first = [], 0
    for p in parts:
        try:
            arr = np.load(p.path, mmap_mode="r", allow_pickle=False)
        except (OSError, ValueError, EOFError):
            return None
        ok = (isinstance(arr, np.memmap) and arr.ndim == 1 and arr.shape[0] == p.n_samples
              and arr.dtype.isnative and arr.dtype.kind in "if")
        layout = (first, p.n_samples, p.path, arr.dtype, int(arr.offset)) if ok else None
        del arr
        if layout is None:
            return None
        out.append(layout)
        first += p.n_samples
    return out


def _map_rows(path, dtype, start: int, count: int):
    """Read-only map of ``count`` items of ``dtype`` at byte ``start`` of ``path`` (no copy).

    Pages are faulted in by one call where the system allows it (MAP_POPULATE,
    Linux); the map is released when the returned array is dropped.
    """
    if not hasattr(mmap, "MAP_SHARED"):      # no POSIX mmap flags (Windows)
        return np.memmap(path, dtype=dtype, mode="r", offset=start, shape=(count,))
    base = start - start % mmap.ALLOCATIONGRANULARITY
    flags = mmap.MAP_SHARED | getattr(mmap, "MAP_POPULATE", 0)
    with open(path, "rb") as fh:
        mm = mmap.mmap(fh.fileno(), start - base + count * dtype.itemsize, flags=flags,
                       prot=mmap.PROT_READ, offset=base)
    return np.frombuffer(mm, dtype=dtype, count=count, offset=start - base)


class RecordingSource(WindowSource):
    """Windows cut from a :class:`tem.io.raw.Recording` at sample ``first`` (int).

    ``view`` maps the byte range of a chunk of an ``.npy`` recording directly
    (no copy; the map is released with the returned array, so mapped pages do
    not accumulate in the resident set).
    """

    def __init__(self, recording, first: int, m: int, n_windows: int, polarity0: int = 1):
        self.rec, self.first, self.m, self.n_windows = recording, int(first), int(m), int(n_windows)
        self.polarity0 = polarity0
        self._vpc = recording.header.volts_per_count
        self._fs = recording.header.full_scale
        self._layout = _npy_layout(recording)

    def _counts(self, k0, k1):
        a = self.first + k0 * self.m
        return self.rec.counts(a, a + (k1 - k0) * self.m).reshape(k1 - k0, self.m)

    def view(self, k0, k1):
        a = self.first + k0 * self.m
        z = a + (k1 - k0) * self.m
        for first, n, path, dtype, offset in self._layout or ():
            if first <= a and z <= first + n:
                x = _map_rows(path, dtype, offset + (a - first) * dtype.itemsize, z - a)
                return x.reshape(k1 - k0, self.m), self._vpc, self._fs, None
        c = self._counts(k0, k1)
        if not (c.dtype.isnative and c.dtype.kind in "if"):
            c = c.astype(np.float64)
        return c, self._vpc, self._fs, None

    @property
    def itemsize(self) -> int:
        return self._layout[0][3].itemsize if self._layout else 8

    def get(self, k0, k1):
        c = self._counts(k0, k1)
        mask = None
        if self._fs and (c.max() >= self._fs or c.min() <= -self._fs):
            mask = np.abs(c) >= self._fs
        out = c.astype(np.float64)
        out *= self._vpc
        return out, mask

    def locate_nan(self, k0, k1):
        c = self._counts(k0, k1).ravel()
        bad = np.flatnonzero(~np.isfinite(c))
        if bad.size == 0:
            return None
        idx = self.first + k0 * self.m + int(bad[0])
        return (self.rec.file_at(idx), idx)


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
    b = min(n_batches, max(n_est // 10, 4))
    edges = np.linspace(0, n_est, b + 1).round().astype(int)
    return edges


def _chunks(edges, per):
    """(k0, k1, batch) estimate ranges of at most ``per`` estimates; never straddle batches."""
    out = []
    for b, (a, z) in enumerate(zip(edges[:-1], edges[1:])):
        for k0 in range(a, z, per):
            out.append((k0, min(z, k0 + per), b))
    return out


_NO_MASK = np.zeros((0, 0), np.bool_)
_NO_F32 = np.zeros(0, np.float32)
_NO_F64 = np.zeros((0, 0))
_NO_THR = np.zeros(3, np.float32)


def _run_kernel(src, k0, k1, step, detrend, t_frac, mode, acc=None, start=None, thr=None,
                limits=(0.0, 0.0), emit=None):
    """Three-window estimates k0, k0+step, ... < k1 through the compiled kernels.

    Maps windows k0-1 .. last+3 (k0 .. last+2 without detrend: what the
    baseline of the estimates needs), then accumulates into ``acc`` =
    (spsi, cnt, sdpsi, tally) or writes ``emit`` = (e, bad). The mean of a
    chunk without clipped samples goes through :func:`tem.stack.kernels.mean_pass`.
    Raises the input error of a NaN or infinite sample.
    """
    n_est = len(range(k0, k1, step))
    last = k0 + (n_est - 1) * step
    a = max(k0 - 1, 0) if detrend else k0
    z = min(last + 4, src.n_windows) if detrend else last + 3
    x, vpc, full_scale, clip = src.view(a, z)
    m = src.m
    if acc is None:
        acc = (np.zeros(m), np.zeros(m, np.int64), np.zeros(m, np.int64), np.zeros(6, np.int64))
    spsi, cnt, sdpsi, tally = acc
    pol = src.polarity0 * (1 if a % 2 == 0 else -1)
    done = False
    if mode == _kern.MODE_MEAN and clip is None and step == 1:
        done = _kern.mean_pass(x, float(vpc), float(full_scale), t_frac, bool(detrend), k0 - a,
                               n_est, pol, spsi, tally)
        if done:
            cnt += n_est
    if not done:
        m0, inv_s, lo, hi = start if start is not None else (_NO_F32,) * 4
        e, bad = emit if emit is not None else (_NO_F64, _NO_MASK)
        _kern.chunk_pass(x, float(vpc), float(full_scale), _NO_MASK if clip is None else clip,
                         t_frac, bool(detrend), k0 - a, n_est, step, pol, mode, m0, inv_s, lo, hi,
                         _NO_THR if thr is None else thr, float(limits[0]), float(limits[1]),
                         spsi, cnt, sdpsi, e, bad, tally)
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
    if bad.any():
        e[bad] = np.nan
        med = np.nanmedian(e, axis=1)
        mad = np.nanmedian(np.abs(e - med[:, None]), axis=1)
    else:
        med = np.median(e, axis=1)
        mad = np.median(np.abs(e - med[:, None]), axis=1)
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
    chunks = _chunks(edges, max(1, int(s.chunk_bytes // (src.itemsize * m)) - 3))
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
    mode = _kern.MODES[s.estimator]
    by_batch = [[c for c in chunks if c[2] == b] for b in range(nb)]

    def run_batch(b):
        for k0, k1, _ in by_batch[b]:
            _run_kernel(src, k0, k1, 1, s.detrend, t_frac, mode,
                        acc=(spsi_b[b], cnt_b[b], sdpsi_b[b], tally_b[b]), start=start, thr=thr,
                        limits=(s.transient_rms, s.bad_fraction))
        return b

    if s.threads > 1:
        from concurrent.futures import ThreadPoolExecutor, as_completed
        with ThreadPoolExecutor(max_workers=s.threads) as pool:
            for fut in as_completed([pool.submit(run_batch, b) for b in range(nb)]):
                tick(len(by_batch[fut.result()]))
    else:
        for b in range(nb):
            tick(len(by_batch[run_batch(b)]))
    tally = tally_b.sum(axis=0)
    sdpsi_n = sdpsi_b.sum(axis=0)
    counts = {"transients_total": int(n_est)}
    counts.update({k: int(v) for k, v in zip(_kern.TALLY_FIELDS[:5], tally[:5])})
    counts = {k: counts[k] for k in ("transients_total", "transients_used", "rejected_noisy",
                                     "rejected_bad_samples", "samples_clipped", "samples_outlier")}
    if s.estimator == "mean":        # psi' = 1 for every accepted estimate
        sdpsi = cnt_b.sum(axis=0).astype(float)
    elif s.estimator == "median":    # box density estimate of psi'
        sdpsi = sdpsi_n / (2.0 * h_med)
    else:
        sdpsi = sdpsi_n.astype(float)
    return _finish(s, nb, m0, s0, spsi_b, cnt_b.astype(float), sdpsi, counts)


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
    err = np.sqrt(nb / (nb - 1.0) * np.sum(infl * infl, axis=0))
    if s.estimator == "mean":
        scale = np.sqrt(np.maximum(err ** 2 * n_used, 0.0))
    else:
        scale = s0
    return StackResult(value=value, error=err, influence=infl, n_used=n_used, scale=scale,
                       counts=counts)


def stack_windows(windows, polarity0: int = 1, settings: StackSettings = StackSettings(),
                  clip_mask=None) -> StackResult:
    """Pure kernel: (n, M) half-period windows -> :class:`StackResult`. Input untouched."""
    return stack_source(ArraySource(windows, polarity0, clip_mask), settings)


# ---------------------------------------------------------------------------- timing
def detect_switch_times(current, fs: float, half_period: float, ramp_off: float,
                        duty_cycle: float):
    """Switch-off ends of positive half-cycles detected on a transmitter-current record.

    current : (N,) samples proportional to the transmitter current (any scale).
    Duty < 1: the falling edge of each positive pulse crosses half the peak
    at the middle of the linear switch-off ramp; the end of the ramp is
    ramp_off/2 later. Duty 1: +I falls to 0 over ramp_off and the next
    pulse starts there (tem.forward.Waveform), so the zero crossing is
    time zero itself.
    Crossings are found by linear interpolation, then a straight line
    t_j = t0 + j T is fitted by least squares.

    Returns ``(t0, period, residual_rms, times)`` in s from sample 0.
    """
    x = np.asarray(current, float)
    peak = np.quantile(np.abs(x), 0.95)
    if not peak > 0:
        raise input_error("current", "transmitter-current channel is flat")
    level = 0.5 * peak if duty_cycle < 1.0 else 0.0
    a, b = x[:-1], x[1:]
    idx = np.flatnonzero((a > level) & (b <= level))
    # keep falling edges of positive pulses only (previous half period was +I)
    if idx.size < 2:
        raise input_error("current", "fewer than two switch-off edges found")
    frac = (a[idx] - level) / (a[idx] - b[idx])
    t_cross = (idx + frac) / fs + (0.5 * ramp_off if duty_cycle < 1.0 else 0.0)
    period = 2.0 * half_period
    j = np.round((t_cross - t_cross[0]) / period).astype(int)
    keep = np.concatenate([[True], np.diff(j) > 0])
    j, t_cross = j[keep], t_cross[keep]
    A = np.column_stack([np.ones_like(t_cross), j.astype(float)])
    coef, *_ = np.linalg.lstsq(A, t_cross, rcond=None)
    res = t_cross - A @ coef
    return float(coef[0]), float(coef[1]), float(np.sqrt(np.mean(res ** 2))), t_cross


# ---------------------------------------------------------------------------- station driver
@dataclass
class ChannelStack:
    """One channel's stack, normalised per A, with its header facts."""

    receiver: object
    result: StackResult          # normalised (V/m/A, T/s/A)
    times: np.ndarray            # (M,) s from the end of the switch-off ramp
    raw_rms: float               # rms of the raw record after removing its mean (V)
    dead: bool
    excerpt: np.ndarray          # (2M,) first full period of the record, normalised
    file: str


def timing_for_station(survey, station, recordings: dict):
    """Time (s, from the start of the first data recording) of a positive switch-off end.

    Returns ``(t_first, source, residual_rms)``; ``source`` says where the
    timing came from ("survey" or "current"), residual_rms (s) is the rms of
    the detected switch times about a straight line (NaN for "survey").
    """
    from ..survey import seconds_between
    tx = survey.transmitter
    rec0 = recordings[station.data_receivers[0].component]
    t_first = seconds_between(rec0.header.start_time, tx.first_switch_off)
    if tx.timing == "survey":
        return t_first, "survey", float("nan")
    cur = recordings.get("current")
    if cur is None:
        raise input_error("transmitter.timing", f"station {station.id}: timing='current' needs a "
                          "receiver with component 'current'")
    n = min(cur.n_samples, int(round(60.0 * tx.period * cur.sample_rate)))
    x = cur.read(0, n)
    t0, period, res, _ = detect_switch_times(x, cur.sample_rate, tx.half_period, tx.ramp_off,
                                              tx.duty_cycle)
    if abs(period - tx.period) > 1e-4 * tx.period:
        raise input_error("base_frequency", f"current channel repeats every {period:.6g} s, survey "
                          f"says {tx.period:.6g} s", cur.path)
    offset = seconds_between(rec0.header.start_time, cur.header.start_time)
    return t0 + offset, "current", res


def stack_station(survey, station, settings: StackSettings = StackSettings(), progress=None):
    """Open, check and stack every data channel of ``station``.

    Returns ``(channels, timing)`` with a list of :class:`ChannelStack` and a
    dict ``{"source", "residual_rms", "t_first", "delay"}``. Raises
    :class:`tem.errors.TemInputError` naming file and field on bad input.
    """
    from ..io.raw import open_receiver
    from ..survey import seconds_between
    tx = survey.transmitter
    recs = {rx.component: open_receiver(rx, survey) for rx in station.receivers}
    if not station.data_receivers:
        raise input_error("station.receiver", f"station {station.id} has no data channel")
    t_first, source, resid = timing_for_station(survey, station, recs)
    rec0 = recs[station.data_receivers[0].component]
    out = []
    delay = None
    for rx in station.data_receivers:
        rec = recs[rx.component]
        shift = seconds_between(rec0.header.start_time, rec.header.start_time)
        first, m, nw, dly, k_first = window_layout(rec.n_samples, rec.sample_rate,
                                                   t_first - shift, tx.half_period, rec.path)
        delay = dly if delay is None else delay
        if abs(dly - delay) > 1e-3 / rec.sample_rate:
            raise input_error("start_time", "channels of one station are not sampled in step", rec.path)
        pol = 1 if k_first % 2 == 0 else -1
        src = RecordingSource(rec, first, m, nw, polarity0=pol)
        probe = rec.read(first, first + min(2 * m, rec.n_samples - first))
        if not np.isfinite(probe).all():
            bad = int(np.flatnonzero(~np.isfinite(probe))[0]) + first
            raise input_error("samples", f"NaN or infinite value at sample {bad}", rec.file_at(bad))
        dead = bool(np.ptp(rec.counts(first, first + 2 * m)) <= 1)
        raw_rms = float(np.std(probe))
        res = stack_source(src, settings, progress=progress)
        factor = rx.volts_to_field(tx.current)
        excerpt = probe[:2 * m] * factor
        times = dly + np.arange(m) / rec.sample_rate
        out.append(ChannelStack(rx, res.scaled(factor), times, raw_rms, dead, excerpt,
                                str(rec.path)))
    return out, {"source": source, "residual_rms": resid, "t_first": t_first, "delay": delay}
