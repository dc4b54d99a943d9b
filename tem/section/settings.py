"""Settings of the section stage: one table, the source of SectionSettings, ``tem section``
options and the ``[processing.section]`` keys."""
from __future__ import annotations

from ..io.figures import FIGURE_FORMATS
from ..settings import Setting, SettingsTable

__all__ = ["SECTION", "SectionSettings"]


def _checks(v):
    if v["vmin"] is not None and v["vmax"] is not None and not v["vmin"] < v["vmax"]:
        return "vmax", f"must exceed vmin ({v['vmin']:g} ohm-m), got {v['vmax']:g}"
    if "png" not in v["formats"]:
        return "formats", "the report links PNG figures; include png"
    return None


SECTION = SettingsTable("section", [
    Setting("depth_step", 5.0, "float", "m", minimum=0, exclusive=True, maximum=1e4,
            help="vertical sample interval"),
    Setting("max_depth", None, "float", "m", minimum=0, exclusive=True, maximum=1e6,
            help="section bottom (unset: 1.25 x the deepest DOI)"),
    Setting("trace_spacing", None, "float", "m", minimum=0, exclusive=True, maximum=1e6,
            help="one column every this many metres along the profile (unset: one per station)"),
    Setting("lateral", "linear", "choice", choices=("linear", "nearest"),
            help="interpolation between stations (linear in log10 resistivity, or nearest)"),
    Setting("max_gap", None, "float", "m", minimum=0, exclusive=True, maximum=1e7,
            help="leave a gap between stations farther apart than this"),
    Setting("vertical", "depth", "choice", choices=("depth", "elevation"),
            help="vertical axis: depth below surface, or elevation"),
    Setting("order", "given", "choice", choices=("given", "principal"),
            help="station order of the default profile line: as listed, or along the principal "
            "axis"),
    Setting("line", None, "path", help="profile polyline: CSV with columns x,y (m), one vertex "
            "per row in profile order (unset: through the stations)"),
    Setting("below_doi", "shade", "choice", choices=("shade", "hide"),
            help="below the DOI: veil and hatch the model, or hide it"),
    Setting("vmin", None, "float", "ohm-m", minimum=0, exclusive=True, maximum=1e9,
            help="colour scale minimum"),
    Setting("vmax", None, "float", "ohm-m", minimum=0, exclusive=True, maximum=1e9,
            help="colour scale maximum"),
    Setting("formats", ("png", "pdf"), "list", choices=FIGURE_FORMATS,
            help="figure formats of the section and model figures"),
    Setting("title", None, "text", help="section figure title (unset: survey name)"),
], "SectionSettings", doc="Section parameters.", checks=[_checks])

SectionSettings = SECTION.cls
