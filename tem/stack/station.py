"""Stacking one station: open its recordings, find the switch times, stack every channel.

Besides the stack (:mod:`tem.stack.stacking`) each channel gets the raw-record
checks of :mod:`tem.stack.rawchecks` (half-cycle asymmetry, mains level,
offset and drift) and, where the station records the transmitter current, a
check of the cut against the detected switch-offs. The excerpt kept for the
raw-versus-stack figure starts at a positive switch-off.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import input_error
from .rawchecks import baseline_measures, block_starts, half_cycle_check, timing_check
from .stacking import (RecordingSource, StackResult, StackSettings, clip_level, stack_source,
                       window_layout)

__all__ = ["detect_switch_times", "ChannelStack", "timing_for_station", "stack_station"]

#: Largest magnitude (V at the logger) taken for a sample: loggers' inputs are volts to
#: tens of volts; a million volts is no recording but wrong units or a corrupt file (common
#: practice, no source; the limit is set far above any input so that it refuses only that).
MAX_VOLTS = 1e6


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
    """One channel's stack, normalised per A, with its header facts and raw-record checks.

    checks : ``offset`` (V), ``drift`` (V/s), ``wander`` (V) of the baseline at
    the logger; ``asymmetry`` (fraction) and ``asymmetry_windows`` of the
    half-cycles; ``mains`` and ``mains_rms`` (V at the logger); ``duration``
    (s of record stacked); ``full_scale`` (V at the logger, NaN if unknown).
    """

    receiver: object
    result: StackResult          # normalised (V/m/A, T/s/A)
    times: np.ndarray            # (M,) s from the end of the switch-off ramp
    raw_rms: float               # rms of the raw record over the excerpt, mean removed (V)
    dead: bool
    excerpt: np.ndarray          # (2M,) one full period from a positive switch-off, normalised
    file: str
    checks: dict = field(default_factory=dict)


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
    t0, period, res, _ = detect_switch_times(_current_head(cur, tx), cur.sample_rate,
                                              tx.half_period, tx.ramp_off, tx.duty_cycle)
    if abs(period - tx.period) > 1e-4 * tx.period:
        raise input_error("base_frequency", f"current channel repeats every {period:.6g} s, survey "
                          f"says {tx.period:.6g} s", cur.path)
    offset = seconds_between(rec0.header.start_time, cur.header.start_time)
    return t0 + offset, "current", res


def _current_head(cur, tx, periods: float = 60.0):
    """The first ``periods`` transmitter periods of the current channel (volts)."""
    return cur.read(0, min(cur.n_samples, int(round(periods * tx.period * cur.sample_rate))))


def _cut_check(survey, recs, rec0, t_first):
    """Offset (s) of the detected switch-offs from the cut, or NaN without a current channel."""
    from ..survey import seconds_between
    cur = recs.get("current")
    nan = {"offset": float("nan"), "residual": float("nan")}
    if cur is None:
        return nan
    shift = seconds_between(rec0.header.start_time, cur.header.start_time)
    try:
        return timing_check(_current_head(cur, survey.transmitter), cur.sample_rate,
                            t_first - shift, survey.transmitter, detect_switch_times)
    except Exception:       # noqa: BLE001 - a current that cannot be read for edges: no check
        return nan


def stack_station(survey, station, settings: StackSettings = StackSettings(), progress=None):
    """Open, check and stack every data channel of ``station``.

    progress : callable or None, called as ``progress(fraction)`` with the
        fraction (0..1) of the station's work done; it advances with every
        chunk of every channel.

    Returns ``(channels, timing)`` with a list of :class:`ChannelStack` and a
    dict ``{"source", "residual_rms", "t_first", "delay", "cut_offset",
    "cut_residual"}`` (``cut_offset``: switch-offs detected on the current
    channel minus the switch time the record was cut at, s; NaN without a
    current channel). Raises :class:`tem.errors.TemInputError` naming file
    and field on bad input.
    """
    from ..io.raw import open_receiver
    from ..survey import seconds_between
    tx = survey.transmitter
    recs = {rx.component: open_receiver(rx, survey) for rx in station.receivers}
    if not station.data_receivers:
        raise input_error("station.receiver", f"station {station.id} has no data channel")
    t_first, source, resid = timing_for_station(survey, station, recs)
    rec0 = recs[station.data_receivers[0].component]
    cut = _cut_check(survey, recs, rec0, t_first)
    out = []
    delay = None
    n_ch = len(station.data_receivers)
    for ci, rx in enumerate(station.data_receivers):
        rec = recs[rx.component]
        shift = seconds_between(rec0.header.start_time, rec.header.start_time)
        first, m, nw, dly, k_first = window_layout(rec.n_samples, rec.sample_rate,
                                                   t_first - shift, tx.half_period, rec.path)
        delay = dly if delay is None else delay
        if abs(dly - delay) > 1e-3 / rec.sample_rate:
            raise input_error("start_time", "channels of one station are not sampled in step", rec.path)
        pol = 1 if k_first % 2 == 0 else -1
        src = RecordingSource(rec, first, m, nw, polarity0=pol)
        # one full period from the first positive switch-off (window 0 may follow a negative one)
        e0 = first + (0 if pol > 0 else m)
        probe = rec.read(e0, e0 + 2 * m)
        if not np.isfinite(probe).all():
            bad = int(np.flatnonzero(~np.isfinite(probe))[0]) + e0
            raise input_error("samples", f"NaN or infinite value at sample {bad}", rec.file_at(bad))
        if np.abs(probe).max() > MAX_VOLTS:
            bad = int(np.argmax(np.abs(probe))) + e0
            raise input_error("samples", f"{probe[bad - e0]:.3g} V at sample {bad}, beyond any "
                              f"receiver's input ({MAX_VOLTS:g} V): wrong volts_per_count or gain, "
                              "or a corrupt file", rec.file_at(bad))
        raw_rms = float(np.std(probe))
        tick = None
        if progress is not None:
            def tick(done, total, ci=ci):
                progress((ci + done / max(total, 1)) / n_ch)
        res = stack_source(src, settings, progress=tick)
        removal, stuck = [], float("nan")
        if settings.mains_removal == "auto":
            removal = _off_nominal_mains(src, rec, res, survey.mains_frequency)
            if removal:                      # stacked again without it
                from .mains import CleanedSource
                again = stack_source(CleanedSource(src, removal), settings)
                # the windows' own measures (baseline, rails, flat spans) stay those of the
                # record as recorded: a flat (dropped-out) window less a fitted mains is
                # not flat, and the channel would no longer read dead
                again.window_means, again.window_rails = res.window_means, res.window_rails
                again.window_spans = res.window_spans
                res = again
                from .mains import on_line
                stuck = on_line(removal, res.value, res.error, rec.sample_rate, m, nw)
        factor = rx.volts_to_field(tx.current)
        times = dly + np.arange(m) / rec.sample_rate
        checks = _channel_checks(src, rec, res, times, tx, survey.mains_frequency, removal)
        checks["mains_on_line"] = stuck
        # dead: flat (at most 1 count peak to peak) for most of the record, judged over
        # every window, not one period (a record dead after its first seconds was "alive")
        dead = checks["flat_fraction"] >= DEAD_FRACTION
        out.append(ChannelStack(rx, res.scaled(factor), times, raw_rms, dead, probe * factor,
                                str(rec.path), checks))
    timing = {"source": source, "residual_rms": resid, "t_first": t_first, "delay": delay,
              "cut_offset": cut["offset"], "cut_residual": cut["residual"]}
    return out, timing


#: A channel flat for at least this share of its half-period windows is dead (the rest is
#: too little to stack, and a robust stack cannot reject a majority).
DEAD_FRACTION = 0.5


def flat_fraction(spans, volts_per_count, rails=None) -> float:
    """Share of half-period windows whose samples span at most one count (peak to peak):
    a receiver, cable or logger channel that dropped out records a constant. A window
    pinned at a full-scale rail is clipped, not flat (``rails``: (n_windows, 2) samples at
    the rails, :attr:`StackResult.window_rails`)."""
    spans = np.asarray(spans, float)
    ok = np.isfinite(spans)
    if not ok.any():
        return 0.0
    flat = spans <= abs(float(volts_per_count)) * (1.0 + 1e-9)
    if rails is not None and np.size(rails):
        flat &= np.asarray(rails).reshape(-1, 2)[: spans.size].sum(axis=1) == 0
    return float(np.mean(flat[ok]))


def _reader(src, rec):
    """(j0, j1) -> (j1-j0, M) volts of the record's windows j0..j1-1 as recorded."""
    m = src.m

    def read(j0, j1):
        a = src.first + j0 * m
        return rec.read(a, a + (j1 - j0) * m).reshape(j1 - j0, m)
    return read


def _off_nominal_mains(src, rec, res, mains_frequency):
    """The fitted mains lines (:class:`tem.stack.mains.MainsRemoval`) of a record whose mains
    runs off its nominal frequency, near the survey's grid frequency and near the other one
    (50/60 Hz); [] when none does (:mod:`tem.stack.mains`)."""
    from .mains import find_mains_line, fit_removal, near_harmonics, removed_volts

    if not mains_frequency or not np.isfinite(res.window_means).any():
        return []
    raw = _reader(src, rec)
    means = np.nan_to_num(res.window_means, nan=float(np.nanmedian(res.window_means)))
    clip_volts = clip_level(rec.header.full_scale) * rec.header.volts_per_count
    nominals = [f for f in (mains_frequency, {50.0: 60.0, 60.0: 50.0}.get(float(mains_frequency)))
                if f]
    lines = find_mains_line(raw, src.n_windows, src.m, rec.sample_rate, means, res.value,
                            src.polarity0, nominals, clip_volts)
    out = []
    for line in lines:
        if not line.remove:
            continue

        def read(j0, j1):         # the record less the lines fitted so far
            return raw(j0, j1) - removed_volts(out, j0, j1) if out else raw(j0, j1)
        out.append(fit_removal(read, src.n_windows, src.m, rec.sample_rate, means, res.value,
                               src.polarity0, line.frequency, clip_volts))
        near = near_harmonics(line.frequency, rec.sample_rate, src.m, src.n_windows)
        if near:                  # harmonics close to a transmitter line: the whole record
            out.append(fit_removal(read, src.n_windows, src.m, rec.sample_rate, means,
                                   res.value, src.polarity0, line.frequency, clip_volts,
                                   harmonics=near, whole=True))
    return out


def _channel_checks(src, rec, res, times, tx, mains_frequency, removal=()):
    """Raw-record checks of one channel (volts at the logger; see :class:`ChannelStack`);
    with ``removal`` (fitted lines, :class:`tem.stack.mains.MainsRemoval`) on the record
    without them, the removed mains counted in ``mains``."""
    from .mains import removed_volts
    m = src.m
    n_off = int(np.searchsorted(times, tx.off_time)) if tx.off_time > 0 else m
    # log-spaced windows over the off-time from sample 16 on (9 per decade, as gates)
    edges = (np.unique(np.geomspace(16, n_off, max(2, int(9 * np.log10(n_off / 16)) + 1))
                       .round().astype(int)) if n_off > 32 else np.zeros(0, int))
    vpc = rec.header.volts_per_count
    read = _reader(src, rec)
    removed = (lambda j0, j1: removed_volts(removal, j0, j1)) if removal else None

    means = np.nan_to_num(res.window_means, nan=float(np.nanmedian(res.window_means))
                          if np.isfinite(res.window_means).any() else 0.0)
    checks = half_cycle_check(read, block_starts(src.n_windows, src.polarity0), m, means,
                              res.value, clip_level(rec.header.full_scale) * vpc,
                              rec.sample_rate, mains_frequency, edges, removed=removed)
    checks.update(baseline_measures(res.window_means, tx.half_period))
    # the first line removed (the survey's grid frequency when it was off nominal there)
    checks["mains_removed"] = removal[0].frequency if removal else float("nan")
    amps = [r.amplitude for r in removal if np.isfinite(r.amplitude)]
    if amps:
        checks["mains"] = max(float(np.nan_to_num(checks.get("mains"))), max(amps))
    checks["flat_fraction"] = flat_fraction(res.window_spans, vpc, res.window_rails)
    checks["duration"] = src.n_windows * tx.half_period
    fsc = float(rec.header.full_scale or 0.0)
    checks["full_scale"] = fsc * vpc if fsc > 0 else float("nan")
    return checks
