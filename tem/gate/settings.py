"""Settings of the gate stage: one table, the source of GateSettings, ``tem gate`` options and the
``[processing.gate]`` keys."""
from __future__ import annotations

from ..forward.gatewindow import SHAPES
from ..settings import Setting, SettingsTable

__all__ = ["GATE", "GateSettings"]


def _range(v):
    if v["t_min"] is not None and v["t_max"] is not None and not v["t_min"] < v["t_max"]:
        return "t_max", f"must exceed t_min ({v['t_min']:g} s), got {v['t_max']:g} s"
    return None


GATE = SettingsTable("gate", [
    Setting("per_decade", 9.0, "float", "1/decade", minimum=0, exclusive=True, maximum=200,
            help="log-spaced gates per decade of time", source="common practice, no source"),
    Setting("shape", "boxcar", "choice", choices=SHAPES,
            help="gate window: boxcar, or taper (Hann flanks)"),
    Setting("t_min", None, "float", "s", minimum=0, exclusive=True, maximum=1e4,
            help="first gate opens at this time after switch-off (unset: 16 samples)"),
    Setting("t_max", None, "float", "s", minimum=0, exclusive=True, maximum=1e4,
            help="last gate closes by this time (unset: end of the off-time)"),
    Setting("snr_min", 2.0, "float", "", minimum=0, maximum=1e6,
            help="gates with |value| below this many standard errors are not usable",
            source="common practice, no source"),
], "GateSettings", doc="Gating parameters.", checks=[_range])

GateSettings = GATE.cls
