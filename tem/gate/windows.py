"""Time gates: log-spaced gate tables, gate averages with honest errors, noise floor.

A gate value is the weighted average of the stacked samples inside the gate
window, with the weights of :func:`tem.forward.gatewindow.weights` (the one
definition the forward model uses too). Gate edges fall half-way between
samples, so a boxcar gate over samples i..j is the midpoint-rule estimate
of the continuous window average the forward model computes; an
Euler-Maclaurin end correction (two extra samples, weights +-1/24n) makes
it accurate to O(h^4), which matters at early times where the decay curves
strongly within a sample interval h. Tapered (Hann) gates need no
correction: the window and its slope vanish at both ends.

The error of a gate is the error of a linear combination of correlated
samples; it is taken from the stack's batch influence sums
(:meth:`tem.stack.StackResult.linear_error`), so correlation between
neighbouring samples and between neighbouring transients is respected.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import input_error
from ..forward.gatewindow import check_shape, weights

__all__ = ["GateTable", "log_gates", "gate_matrix", "gate_values", "noise_floor", "usable_gates",
           "default_range", "gate_stacked", "last_usable_time"]


@dataclass(frozen=True)
class GateTable:
    """Gate windows: open, close, centre (s, from the end of the switch-off ramp) and shape."""

    open: np.ndarray
    close: np.ndarray
    shape: str = "boxcar"

    def __post_init__(self):
        check_shape(self.shape)
        o = np.asarray(self.open, float)
        c = np.asarray(self.close, float)
        if o.shape != c.shape or o.ndim != 1 or o.size == 0:
            raise input_error("gates", "open and close must be equal-length 1-D arrays")
        if not (np.all(c > o) and np.all(o >= 0)):
            raise input_error("gates", "each gate needs 0 <= open < close")
        object.__setattr__(self, "open", o)
        object.__setattr__(self, "close", c)

    @property
    def centre(self) -> np.ndarray:
        """Geometric centre sqrt(open * close) (arithmetic when open is 0), s."""
        return np.where(self.open > 0, np.sqrt(self.open * np.maximum(self.close, 0)),
                        0.5 * (self.open + self.close))

    def __len__(self):
        return self.open.size


def log_gates(times, t_min: float, t_max: float, per_decade: float, shape: str,
              min_samples: int = 1) -> GateTable:
    """Log-spaced gates between ``t_min`` and ``t_max`` with edges between samples.

    times : (M,) sample times (s), uniformly spaced.
    per_decade : gates per decade (about 8-10 is usual; common practice, no source).
    min_samples : narrowest gate in samples; early gates narrower than this
        are widened (so the first gates are linear in time, later ones log).
    Tapered (Hann) gates are at least 6 samples wide, so the discrete weights
    follow the continuous window (0.1 % at 4 samples per ms, t^-2.5 decay).
    """
    check_shape(shape)
    t = np.asarray(times, float)
    dt = float(t[1] - t[0])
    if not (np.isfinite(per_decade) and per_decade > 0):
        raise input_error("per_decade", f"must be positive, got {per_decade}")
    if not (np.isfinite(t_max) and t_max > t_min > 0):
        raise input_error("t_max", f"need 0 < t_min < t_max, got {t_min}, {t_max}")
    if shape == "taper":
        min_samples = max(min_samples, 6)
    # edges on half-sample positions; a tie (an edge exactly on a sample, as the default
    # t_min of 16 samples) goes up, whatever 1e-12 s of float noise in t[0] says: stations
    # of one survey once got first gates 0.5 ms apart (found by an independent review)
    def snap(x):
        return t[0] + (np.floor((x - t[0]) / dt + 1e-6) + 0.5) * dt

    n_dec = np.log10(t_max / t_min)
    n = max(1, int(np.ceil(n_dec * per_decade)))
    ideal = t_min * 10.0 ** (np.arange(n + 1) / per_decade)
    ideal = ideal[ideal <= t_max * (1 + 1e-9)]
    edges = [snap(t_min)]
    for e in ideal[1:]:
        e = snap(e)
        if e - edges[-1] >= min_samples * dt - 1e-12 * dt:
            edges.append(e)
    edges = np.asarray(edges)
    edges = edges[edges <= t[-1] + 0.5 * dt]
    if edges.size < 2:
        raise input_error("t_max", "no gate fits between t_min and t_max")
    return GateTable(edges[:-1], edges[1:], shape)


def gate_matrix(times, table: GateTable) -> np.ndarray:
    """(n_gates, M) matrix of normalised weights: gate values = W @ samples."""
    t = np.asarray(times, float)
    w = weights(table.shape, t[None, :], table.open[:, None], table.close[:, None])
    s = w.sum(axis=1, keepdims=True)
    if np.any(s == 0):
        i = int(np.flatnonzero(s[:, 0] == 0)[0])
        raise input_error("gates", f"gate {i} ({table.open[i]:.3g}-{table.close[i]:.3g} s) "
                          "contains no sample")
    w = w / s
    if table.shape == "boxcar" and t.size > 3:
        # Euler-Maclaurin end correction of the midpoint rule:
        # int_a^b f = h sum f_i + (h^2/24) (f'(b) - f'(a)) + O(h^4), with f' at
        # the half-sample edges from the two samples either side.
        for g in range(w.shape[0]):
            idx = np.flatnonzero(w[g])
            i0, i1 = idx[0], idx[-1]
            if i0 >= 1 and i1 + 1 < t.size:
                c = 1.0 / (24.0 * idx.size)
                w[g, i1 + 1] += c
                w[g, i1] -= c
                w[g, i0] -= c
                w[g, i0 - 1] += c
    return w


def gate_values(stack, times, table: GateTable):
    """Gate averages and their standard errors from a :class:`tem.stack.StackResult`.

    Returns ``(value, error)``, each (n_gates,), in the stack's units.
    """
    return _apply(gate_matrix(times, table), stack)


def _apply(W, stack):
    """``W @ value`` and its errors; a stack sample that is not a number (e.g. clipped through
    the switch-off ramp) spoils only the gates that weigh it, not every gate (matrix products
    spread a NaN to every row: a whole channel was once blanked by one NaN at t = 0, outside
    every gate)."""
    v = np.asarray(stack.value, float)
    ok = np.isfinite(v)
    err = stack.linear_error(W)
    if ok.all():
        return W @ v, err
    out = W @ np.where(ok, v, 0.0)
    spoilt = np.any(W[:, ~ok] != 0.0, axis=1)
    out[spoilt] = np.nan
    err = np.where(spoilt, np.nan, err)
    return out, err


def noise_floor(stack, times, t_start: float, t_end: float) -> float:
    """Per-sample noise level of the stack: median standard error over [t_start, t_end].

    Late-time samples are used (the stack error is close to stationary there).
    """
    t = np.asarray(times)
    sel = (t >= t_start) & (t <= t_end)
    if not sel.any():
        sel = slice(None)
    return float(np.median(stack.error[sel]))


def usable_gates(value, error, t_open, t_close, t_limit: float, snr_min: float):
    """Gates usable for interpretation: inside [0, t_limit] and |value| >= snr_min * error.

    A gate below the noise (signal-to-noise under ``snr_min``) is flagged
    unusable. ``snr_min`` = 2 is common practice, no source.
    """
    v, e = np.asarray(value), np.asarray(error)
    ok = (np.asarray(t_close) <= t_limit) & np.isfinite(v) & np.isfinite(e) & (e > 0)
    return ok & (np.abs(v) >= snr_min * e)


def last_usable_time(t_close, usable) -> float:
    """End (s) of the run of usable gates that starts at the first usable gate; NaN if none."""
    u = np.asarray(usable, bool)
    if not u.any():
        return float("nan")
    i = int(np.argmax(u))
    while i + 1 < u.size and u[i + 1]:
        i += 1
    return float(np.asarray(t_close)[i])


def default_range(times, off_time: float, half_period: float):
    """Default gate range (s): from 16 samples after time zero to the end of the off-time.

    16 samples keep the discrete gate average within about 1e-5 of the
    continuous window average the forward model computes (the boxcar
    end-corrected midpoint rule errs by O((h/t)^4)); at high signal-to-noise
    ratios earlier gates would carry discretisation errors larger than their
    statistical errors. With no off-time (duty 1) the gates run to the next switch.
    """
    t = np.asarray(times, float)
    h = float(t[1] - t[0])
    t_min = max(16.0 * h, t[0] + 2.0 * h)
    t_max = off_time if off_time > 0 else half_period
    return t_min, min(t_max, t[-1] + 0.5 * h) - 0.5 * h


def gate_stacked(stacked, per_decade: float, shape: str, t_min, t_max, snr_min: float,
                 provenance=()):
    """Gate every channel of a stacked Dataset; returns the gated-sounding Dataset.

    The gate table is shared by all channels of the station (docs/data-model.md).
    Dead channels are kept with every gate flagged unusable. Per channel the
    gated file also holds ``last_usable`` (s, :func:`last_usable_time`) and
    ``noise_slope``, how the noise of the late samples falls with the number
    of periods stacked, measured on halves, quarters and eighths of the record
    (:func:`tem.stack.batchvar.noise_by_length`; -0.5 for random noise).
    """
    from ..io.stacked import gated_dataset
    from ..stack.batchvar import noise_by_length
    from ..stack.stacking import StackResult
    from ..provenance import stage_record
    if not (np.isfinite(snr_min) and snr_min >= 0):
        raise input_error("snr_min", f"must be zero or positive, got {snr_min}")
    times = stacked["time"].values
    lo, hi = default_range(times, float(stacked.attrs.get("off_time", 0.0)),
                           0.5 / float(stacked.attrs["base_frequency"]))
    t_min = lo if t_min is None else float(t_min)
    t_max = hi if t_max is None else float(t_max)
    table = log_gates(times, t_min, t_max, per_decade, shape)
    W = gate_matrix(times, table)
    nch = stacked.sizes["channel"]
    value = np.empty((nch, len(table)))
    error = np.empty_like(value)
    usable = np.zeros_like(value, bool)
    floor = np.empty(nch)
    last = np.full(nch, np.nan)
    slope = np.full(nch, np.nan)
    late = (times >= t_max / 3.0) & (times <= t_max)
    for c in range(nch):
        res = StackResult.from_dataset(stacked, c)
        value[c], error[c] = _apply(W, res)
        floor[c] = noise_floor(res, times, t_max / 3.0, t_max)
        usable[c] = usable_gates(value[c], error[c], table.open, table.close, t_max + 1e-12,
                                 snr_min)
        if bool(stacked["dead"].values[c]):
            usable[c] = False
        last[c] = last_usable_time(table.close, usable[c])
        slope[c] = noise_by_length(res.influence, res.lag_corr, late if late.any() else None)[0]
    prov = list(provenance) or []
    from ..io.stacked import provenance_of
    prov = provenance_of(stacked) + prov + [stage_record("gate", {
        "per_decade": per_decade, "shape": shape, "t_min": t_min, "t_max": t_max,
        "snr_min": snr_min})]
    measures = {"last_usable": (last, "s", "end of the first run of usable gates"),
                "noise_slope": (slope, "1", "d log(noise) / d log(periods stacked), late samples")}
    return gated_dataset(stacked, table, value, error, usable, floor, prov, measures)
