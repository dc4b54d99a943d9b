"""Settings of ``tem forward``: one table for its options (gate times, shape, response)."""
from __future__ import annotations

from ..settings import Setting, SettingsTable
from .gatewindow import SHAPES

__all__ = ["FORWARD", "ForwardSettings", "RESPONSES"]

RESPONSES = ("waveform", "step-off", "step-on", "impulse")


def _range(v):
    if not v["t_min"] < v["t_max"]:
        return "t_max", f"must exceed t_min ({v['t_min']:g} s), got {v['t_max']:g} s"
    return None


FORWARD = SettingsTable("forward", [
    Setting("t_min", 1e-4, "float", "s", minimum=0, exclusive=True, maximum=1e4,
            help="first gate opens at this time after switch-off"),
    Setting("t_max", 1.0, "float", "s", minimum=0, exclusive=True, maximum=1e4,
            help="last gate closes at this time"),
    Setting("gates", 31, "int", minimum=1, maximum=2000, help="number of log-spaced gates"),
    Setting("shape", "boxcar", "choice", choices=SHAPES,
            help="gate window: boxcar, or taper (Hann flanks)"),
    Setting("response", "waveform", "choice", choices=RESPONSES,
            help="the survey's periodic bipolar current with its ramps, or an ideal step or "
            "impulse"),
], "ForwardSettings", doc="Settings of a forward run.", checks=[_range])

ForwardSettings = FORWARD.cls
