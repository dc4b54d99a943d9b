"""Per-channel checks on the raw record made while stacking (pure functions, SI units).

* :func:`half_cycle_check`: the mains in the raw record (least-squares
  amplitudes of the mains and its harmonics, fitted on blocks of four
  windows spread over the record once the stacked transient and the
  period-mean baseline of the stack are taken out), and, with that mains
  removed too, positive and negative half-cycles stacked apart: their
  difference against their mean (polarity consistency of transmitter and
  receiver).
* :func:`baseline_measures`: offset and drift from the window means the
  stacker reads anyway (the mean over a full period holds no signal).
* :func:`timing_check`: switch-offs detected on the transmitter-current
  channel against the switch times the record was cut at.

These are quality measures, not estimates fed back into the stack.
"""
from __future__ import annotations

import math
import warnings

import numpy as np

__all__ = ["block_starts", "half_cycle_check", "baseline_measures", "timing_check"]


def block_starts(n_windows: int, polarity0: int, n_blocks: int = 32, length: int = 4) -> np.ndarray:
    """First windows of up to ``n_blocks`` blocks of ``length`` windows, each starting positive.

    Blocks are spread evenly over the record and do not overlap.
    """
    first_pos = 0 if polarity0 > 0 else 1
    starts = np.arange(first_pos, n_windows - length + 1, 2)
    if starts.size == 0:
        return starts
    if starts.size <= n_blocks:
        keep = starts[::2] if starts.size > 1 else starts   # no overlap: every other even start
        return keep[:n_blocks]
    idx = np.round(np.linspace(0, starts.size - 1, n_blocks)).astype(int)
    out = np.unique(starts[idx])
    return out[np.concatenate([[True], np.diff(out) >= length])]


def _baseline(means, j, n, t_frac):
    """Baseline (n, M) of windows j..j+n-1 from the record's window means (NaN-free)."""
    mu = np.asarray(means, float)
    nw = mu.size

    def bound(i):           # boundary between windows i-1 and i, extrapolated at the ends
        if 1 <= i <= nw - 1:
            return 0.5 * (mu[i - 1] + mu[i])
        if i <= 0:
            return 2 * bound(1) - bound(2) if nw >= 3 else mu[0]
        return 2 * bound(nw - 1) - bound(nw - 2) if nw >= 3 else mu[-1]

    b = np.array([bound(i) for i in range(j, j + n + 1)])
    return b[:-1, None] + (b[1:] - b[:-1])[:, None] * t_frac[None, :]


#: Shortest constant run (s) counted as a drop-out within a window (at least 8 samples).
DROPOUT_RUN_S = 0.004


def short_dropouts(raw, run_min: int, clip_volts: float = 0.0):
    """(samples in constant runs of ``run_min`` or more, samples looked at) of windows
    ``raw`` (rows) that are not constant throughout (those are :func:`flat windows
    <tem.stack.station.flat_fraction>`); samples at a full-scale rail are clipping, not
    drop-outs. A connector that reads a constant for 10-50 ms at a time leaves most
    windows partly flat: the stack cannot reject them and its gates come out tens of
    per cent off (found by an independent review)."""
    raw = np.atleast_2d(np.asarray(raw))
    found, looked = 0, 0
    for row in raw:
        if row.size < 2 or not np.isfinite(row).all() or row.min() == row.max():
            continue
        start = np.ones(row.size, bool)
        start[1:] = row[1:] != row[:-1]
        ids = np.cumsum(start) - 1
        length = np.bincount(ids)[ids]
        hit = length >= run_min
        if clip_volts > 0:
            hit &= np.abs(row) < clip_volts
        found += int(hit.sum())
        looked += row.size
    return found, looked


def half_cycle_check(read_volts, starts, m: int, means, stack_volts, clip_volts: float,
                     fs: float, mains_frequency: float, window_edges, harmonics: int = 15,
                     removed=None):
    """Half-cycle asymmetry and mains level from blocks of four windows.

    read_volts : callable (j0, j1) -> (j1-j0, M) volts of windows j0..j1-1.
    starts : first windows of the blocks (positive polarity), :func:`block_starts`.
    means : (n_windows,) window means (volts) from the stack.
    stack_volts : (M,) stacked transient in volts (positive polarity).
    clip_volts : abs(volts) at or above which a sample is clipped (0: none).
    window_edges : sample indices of log-spaced windows over the off-time on
        which the asymmetry is compared.

    Returns a dict: ``asymmetry`` (abs of the least-squares factor a in
    P - N = a (P + N) over the windows where the half-cycle mean stands 10
    noise sigmas clear; 0.01 for a transmitter that drives 2 % more current
    one way, half the difference over the mean; NaN if no window qualifies), ``asymmetry_error`` (its standard
    error from the scatter of the blocks), ``asymmetry_windows`` (how many),
    ``removed``: (j0, j1) -> volts to take out of those windows first (the mains that
    :mod:`tem.stack.mains` fitted), or None.
    ``mains`` (median amplitude over the blocks of the mains fundamental, V)
    and ``mains_rms`` (rms over the fundamental and ``harmonics - 1``
    harmonics below Nyquist, V).
    """
    t_frac = (np.arange(m) + 0.5) / m
    e = np.asarray(window_edges, int)
    asym, sym, amp1, amp_rms = [], [], [], []
    tau = np.arange(4 * m) / fs
    hs = [h for h in range(1, harmonics + 1) if h * mains_frequency < 0.5 * fs]
    # the other grid frequency too (60 Hz interference on a 50 Hz survey, e.g. from a
    # generator, once read as a 16-3900 % half-cycle difference): its columns after the
    # survey's, which alone give the reported mains level
    other = {50.0: 60.0, 60.0: 50.0}.get(float(mains_frequency))
    own = {round(h * mains_frequency, 6) for h in hs}
    hs_other = [h for h in range(1, harmonics + 1) if other and h * other < 0.5 * fs
                and round(h * other, 6) not in own]      # 300 Hz is both 6 x 50 and 5 x 60
    basis = None
    if hs and mains_frequency > 0:
        cols = []
        for f, hh in ((mains_frequency, hs), (other, hs_other)):
            for h in hh:
                cols += [np.cos(2 * np.pi * h * f * tau), np.sin(2 * np.pi * h * f * tau)]
        basis = np.column_stack(cols)
        # a block of 4 half-periods holds whole numbers of cycles of both when the base
        # frequency follows the mains rule (f_b = 5/j Hz: docs/stacking.md section 6): the
        # columns are then orthogonal, and the projections are the least-squares amplitudes
        gram = np.einsum("ij,ij->j", basis, basis)
        n_own = 2 * len(hs)
    pol = np.array([1.0, -1.0, 1.0, -1.0])
    run_min = max(8, int(round(DROPOUT_RUN_S * fs)))
    short_runs, sampled = 0, 0
    for j in starts:
        raw = read_volts(int(j), int(j) + 4)
        k, n = short_dropouts(raw, run_min, clip_volts)      # on the record as it is
        short_runs += k
        sampled += n
        d = raw - _baseline(means, int(j), 4, t_frac)
        if removed is not None:           # mains fitted off its nominal frequency, taken out
            d = d - removed(int(j), int(j) + 4)
        if clip_volts > 0:
            d[np.abs(raw) >= clip_volts] = np.nan
        if basis is not None:
            # mains (the same in every window: it would pass into P - N) fitted on the record
            # with the stacked transient taken out, then removed before the half-cycles
            r = (d - pol[:, None] * np.asarray(stack_volts)[None, :]).ravel()
            ok = np.isfinite(r)
            if ok.sum() > 0.9 * r.size:
                r = np.where(ok, r - np.mean(r[ok]), 0.0)
                coef = (r @ basis) / gram
                a = np.hypot(coef[0:n_own:2], coef[1:n_own:2])
                amp1.append(a[0])
                amp_rms.append(math.sqrt(0.5 * float(np.sum(a * a))))
                d = d - (basis @ coef).reshape(4, m)
        with warnings.catch_warnings():     # a sample clipped in both windows: NaN
            warnings.simplefilter("ignore", RuntimeWarning)
            pos = np.nanmean(d[[0, 2]], axis=0)
            neg = -np.nanmean(d[[1, 3]], axis=0)
        if e.size >= 2:
            cs_a = np.nancumsum(np.concatenate([[0.0], 0.5 * (pos - neg)]))
            cs_s = np.nancumsum(np.concatenate([[0.0], 0.5 * (pos + neg)]))
            asym.append((cs_a[e[1:]] - cs_a[e[:-1]]) / np.diff(e))
            sym.append((cs_s[e[1:]] - cs_s[e[:-1]]) / np.diff(e))
    out = {"dropout_fraction": short_runs / sampled if sampled else float("nan"),
           "asymmetry": float("nan"), "asymmetry_error": float("nan"), "asymmetry_windows": 0,
           "mains": float(np.median(amp1)) if amp1 else float("nan"),
           "mains_rms": float(np.median(amp_rms)) if amp_rms else float("nan")}
    if asym:
        a = np.array(asym)
        s = np.array(sym)
        nb = a.shape[0]
        s_med = np.median(s, axis=0)
        a_med = np.median(a, axis=0)
        # noise of a block median: MAD of the blocks, 1.4826 for Gaussian spread and
        # sqrt(pi/2) for the efficiency of a median (common practice, no source)
        sig = 1.4826 * np.median(np.abs(a - a_med), axis=0) * math.sqrt(math.pi / 2 / max(nb, 1))
        ok = np.isfinite(s_med) & (np.abs(s_med) > 10.0 * np.maximum(sig, 1e-300))
        if ok.any() and nb >= 3:
            # the part of P - N along the shape of P + N, per block (least squares): zero-mean
            # under noise, so noise does not read as asymmetry; its scatter over the blocks
            # gives the standard error of the mean
            shape = s_med[ok]
            per_block = np.nan_to_num(a[:, ok]) @ shape / float(shape @ shape)
            out["asymmetry"] = float(abs(np.mean(per_block)))
            out["asymmetry_error"] = float(np.std(per_block, ddof=1) / math.sqrt(nb))
            out["asymmetry_windows"] = int(ok.sum())
    return out


def baseline_measures(means, half_period: float) -> dict:
    """Offset (V) and drift (V/s) of a channel from its window means (volts).

    The boundary values B_j = (mu_{j-1} + mu_j)/2 hold no signal (a full
    period of a bipolar response averages to zero); ``offset`` is their
    median, ``drift`` the least-squares slope of B_j against time and
    ``wander`` the rms of B_j about that line (V). NaN means are skipped.
    """
    mu = np.asarray(means, float)
    b = 0.5 * (mu[:-1] + mu[1:])
    t = (np.arange(b.size) + 1.0) * half_period
    ok = np.isfinite(b)
    if ok.sum() < 3:
        return {"offset": float("nan"), "drift": float("nan"), "wander": float("nan")}
    b, t = b[ok], t[ok]
    slope, icpt = np.polyfit(t, b, 1)
    res = b - (icpt + slope * t)
    return {"offset": float(np.median(b)), "drift": float(slope),
            "wander": float(np.sqrt(np.mean(res * res)))}


def timing_check(current, fs: float, t_cut: float, transmitter, detect) -> dict:
    """Switch-offs on the current channel against the switch time the record was cut at.

    current : (N,) samples of the current channel (from its first sample).
    t_cut : time (s, from the current channel's first sample) of a positive
        switch-off end as used for the cut. detect : the switch-time detector
        (:func:`tem.stack.station.detect_switch_times`).
    Returns ``offset`` (s, detected minus cut, wrapped into one period) and
    ``residual`` (s, rms of the detected switch times about a straight line).
    """
    tx = transmitter
    t0, period, res, _ = detect(current, fs, tx.half_period, tx.ramp_off, tx.duty_cycle)
    p = tx.period
    off = (t0 - t_cut + 0.5 * p) % p - 0.5 * p
    return {"offset": float(off), "residual": float(res)}
