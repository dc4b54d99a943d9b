"""Settings of the export stage: one table, the source of ExportSettings, ``tem export`` options
and the ``[processing.export]`` keys."""
from __future__ import annotations

from ..settings import Setting, SettingsTable

__all__ = ["EXPORT", "ExportSettings", "KINDS", "kinds_of"]

KINDS = ("csv", "las", "segy-depth", "segy-twt")


def _whole_units(value, scale):
    n = round(value * scale)
    return n if abs(value * scale - n) <= 1e-6 and 1 <= n <= 65535 else None


def _checks(v):
    what = kinds_of(v)
    if "segy-twt" in what and not v["velocity"]:
        return "velocity", "the two-way-time SEG-Y needs an interval velocity table"
    if "segy-twt" in what and _whole_units(v["dt_ms"], 1000.0) is None:
        return "dt_ms", (f"must be a whole number of microseconds in 1..65535 (SEG-Y bytes "
                         f"3217-3218), got {v['dt_ms']:g} ms")
    return None


def kinds_of(v) -> tuple:
    """The exports asked for (default: csv, las, segy-depth, and segy-twt with a velocity table)."""
    what = v["what"] if isinstance(v, dict) else v.what
    velocity = v["velocity"] if isinstance(v, dict) else v.velocity
    if what is None:
        return ("csv", "las", "segy-depth") + (("segy-twt",) if velocity else ())
    return tuple(what)


EXPORT = SettingsTable("export", [
    Setting("what", None, "list", choices=KINDS,
            help="exports to write (unset: csv, las, segy-depth, and segy-twt when a velocity "
            "table is given)"),
    Setting("models", "smooth", "choice", choices=("smooth", "lci"),
            help="models to export: the per-station models (models.nc) or the laterally "
            "constrained ones (models_lci.nc)"),
    Setting("las_step", 1.0, "float", "m", minimum=0, exclusive=True, maximum=1e4,
            help="depth step of the LAS curves"),
    Setting("las_bottom", None, "float", "m", minimum=0, exclusive=True, maximum=1e6,
            help="bottom of every LAS log (unset: 1.25 x each station's DOI)"),
    Setting("las_null_below_doi", False, "bool",
            help="write resistivity as null (-999.25) below the DOI (off: keep it, flagged in a "
            "curve)"),
    Setting("segy_value", "resistivity", "choice", choices=("resistivity", "log10"),
            help="SEG-Y sample value: resistivity in ohm-m or its log10"),
    Setting("segy_below_doi", "zero", "choice", choices=("zero", "keep"),
            help="SEG-Y samples below the DOI: 0.0 or the model value"),
    Setting("line_number", 1, "int", minimum=1, maximum=2**31 - 1,
            help="inline number in the SEG-Y trace headers"),
    Setting("velocity", None, "path",
            help="interval velocity table (CSV: depth_m,vp_m_per_s) for the two-way-time SEG-Y"),
    Setting("dt_ms", 2.0, "float", "ms", minimum=0, exclusive=True, maximum=65.535,
            help="two-way-time sample interval"),
    Setting("max_twt_ms", None, "float", "ms", minimum=0, exclusive=True, maximum=1e6,
            help="two-way-time section length (unset: the time of the section bottom)"),
    Setting("epsg", None, "int", minimum=1, maximum=999999,
            help="EPSG code of a projected CRS for the exported coordinates (unset: the models' "
            "own; transformed with pyproj)"),
], "ExportSettings", doc="Export parameters.", checks=[_checks])

ExportSettings = EXPORT.cls
