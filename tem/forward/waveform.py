"""Transmitter current waveforms: piecewise linear pulses, bipolar repetition.

A :class:`Waveform` is one positive current pulse, piecewise linear, that
starts and ends at zero and ends at time 0 (the end of the switch-off ramp),
normalised to a peak of 1. With ``half_period`` set, the pulse repeats every
half period with alternating sign (+I, -I, ...), for ever into the past:
the bipolar square wave of land TEM. Without it, the pulse happens once.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import TemInputError

__all__ = ["Waveform"]


@dataclass(frozen=True)
class Waveform:
    """Piecewise-linear current pulse (times [s] <= 0, relative current) and repetition.

    Parameters
    ----------
    times : array_like
        Increasing times [s], the last one 0 (end of switch-off ramp).
    current : array_like
        Current relative to the peak, 0 at the first and last time.
    half_period : float or None
        Repetition half-period [s] for a bipolar periodic waveform.
    """
    times: np.ndarray
    current: np.ndarray
    half_period: float | None = None

    def __post_init__(self):
        t = np.asarray(self.times, dtype=float)
        c = np.asarray(self.current, dtype=float)
        if t.ndim != 1 or t.shape != c.shape or t.size < 2:
            raise TemInputError("waveform: times and current must be 1-D arrays of the same length >= 2")
        if not (np.all(np.isfinite(t)) and np.all(np.isfinite(c))):
            raise TemInputError("waveform: times and current must be finite")
        if np.any(np.diff(t) <= 0):
            raise TemInputError("waveform.times: must increase strictly")
        if t[-1] != 0.0:
            raise TemInputError("waveform.times: the last time must be 0 (end of the switch-off ramp)")
        if c[0] != 0.0 or c[-1] != 0.0:
            raise TemInputError("waveform.current: the pulse must start and end at zero current")
        if self.half_period is not None:
            hp = float(self.half_period)
            if not np.isfinite(hp) or hp <= 0 or -t[0] > hp + 1e-12:
                raise TemInputError("waveform.half_period: must be positive and at least the pulse length")
            object.__setattr__(self, "half_period", hp)
        object.__setattr__(self, "times", t)
        object.__setattr__(self, "current", c)

    @classmethod
    def bipolar(cls, base_frequency, duty_cycle=0.5, ramp_on=0.0, ramp_off=0.0):
        """Bipolar square wave: +I, (off), -I, (off), ...

        Parameters
        ----------
        base_frequency : float
            Repetition frequency of the full +/- cycle [Hz].
        duty_cycle : float
            Fraction of each half-period during which current flows, ramps
            included (0.5: on and off times equal; 1.0: no off-time).
        ramp_on, ramp_off : float
            Linear switch-on and switch-off ramp durations [s].
        """
        f = float(base_frequency)
        if not np.isfinite(f) or f <= 0:
            raise TemInputError("base_frequency: must be positive (Hz)")
        if not 0 < duty_cycle <= 1:
            raise TemInputError("duty_cycle: must be in (0, 1]")
        hp = 0.5 / f
        on = duty_cycle * hp
        if ramp_on < 0 or ramp_off < 0 or ramp_on + ramp_off >= on:
            raise TemInputError("ramp_on/ramp_off: must be non-negative and shorter than the on-time")
        t = [-on, -on + ramp_on, -ramp_off, 0.0]
        c = [0.0, 1.0, 1.0, 0.0]
        t, c = _drop_vertical(t, c)
        return cls(t, c, half_period=hp)

    @classmethod
    def step_off(cls, ramp_off=0.0, on_time=1e6):
        """A single long pulse that ends with a linear ramp: the step-off with ramp."""
        t, c = _drop_vertical([-on_time, -on_time, -ramp_off, 0.0], [0.0, 1.0, 1.0, 0.0])
        return cls(t, c, half_period=None)

    def segments(self):
        """Linear pieces with non-zero slope: (start times, end times, slopes [1/s])."""
        t, c = self.times, self.current
        dt = np.diff(t)
        slope = np.diff(c) / dt
        keep = slope != 0
        return t[:-1][keep], t[1:][keep], slope[keep]

    def current_at(self, t):
        """Pulse current at times t (0 outside the pulse)."""
        return np.interp(t, self.times, self.current, left=0.0, right=0.0)

    def slope_at(self, t):
        t0, t1, m = self.segments()
        t = np.asarray(t, float)[..., None]
        return np.sum(np.where((t > t0) & (t < t1), m, 0.0), axis=-1)


def _drop_vertical(t, c):
    """Replace zero-length ramps by a tiny step of 1e-9 s so times increase strictly."""
    t = list(map(float, t))
    for i in range(1, len(t)):
        if t[i] <= t[i - 1]:
            t[i] = t[i - 1] + 1e-9
    # keep the last time at 0 by shifting the whole pulse
    shift = t[-1]
    return np.array(t) - shift, np.array(c, float)
