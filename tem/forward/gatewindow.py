"""Gate window weights: the single definition shared by gating and forward model.

A gate value is the weighted average of the transient over [open, close]
with weight w(t). ``"boxcar"``: w = 1. ``"taper"``: w = sin^2(pi s), with
s = (t - open)/(close - open), a Hann window (common practice, no source).
"""
from __future__ import annotations

import numpy as np

from ..errors import TemInputError

__all__ = ["SHAPES", "weights", "check_shape"]

SHAPES = ("boxcar", "taper")


def check_shape(shape: str) -> str:
    if shape not in SHAPES:
        raise TemInputError(f"gate_shape: unknown window {shape!r}; valid: {', '.join(SHAPES)}")
    return shape


def weights(shape: str, t, t_open, t_close):
    """Unnormalised window weight at times ``t`` for the gate [t_open, t_close].

    Zero outside the gate. Arrays broadcast against each other.
    """
    check_shape(shape)
    t = np.asarray(t, dtype=float)
    s = (t - t_open) / (np.asarray(t_close, float) - t_open)
    inside = (s >= 0.0) & (s <= 1.0)
    if shape == "boxcar":
        w = np.ones_like(s)
    else:
        w = np.sin(np.pi * s) ** 2
    return np.where(inside, w, 0.0)
