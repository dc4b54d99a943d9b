"""Settings of the apparent-resistivity stage: one table, the source of RhoaSettings,
``tem rhoa`` options and the ``[processing.rhoa]`` keys."""
from __future__ import annotations

from ..settings import Setting, SettingsTable

__all__ = ["RHOA", "RhoaSettings"]


def _range(v):
    if not v["rho_min"] < v["rho_max"]:
        return "rho_max", f"must exceed rho_min ({v['rho_min']:g} ohm-m), got {v['rho_max']:g}"
    return None


RHOA = SettingsTable("rhoa", [
    Setting("all_time", True, "bool",
            help="also compute the all-time apparent resistivity (half-space forward model)"),
    Setting("rho_min", 0.1, "float", "ohm-m", minimum=0, exclusive=True, maximum=1e9,
            help="all-time search range: lowest resistivity"),
    Setting("rho_max", 1e5, "float", "ohm-m", minimum=0, exclusive=True, maximum=1e9,
            help="all-time search range: highest resistivity"),
    Setting("rho_per_decade", 12, "int", "1/decade", minimum=2, maximum=200,
            help="resistivities per decade of the half-space table"),
    Setting("section_axis", "time", "choice", choices=("time", "depth"),
            help="pseudo-section vertical axis: gate time or diffusion pseudo-depth"),
], "RhoaSettings", doc="Apparent-resistivity parameters.", checks=[_range])

RhoaSettings = RHOA.cls
