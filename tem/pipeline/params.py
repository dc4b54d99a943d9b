"""Processing parameters of ``tem run``: defaults, the survey's ``[processing]`` table, overrides.

Every stage reads one table of ``[processing]`` in the survey TOML
(``[processing.stack]``, ``[processing.gate]``, ...); keys not given keep the
defaults below. ``tem.survey`` accepts the ``[processing]`` table but leaves it
to this module (read with tem.io.tomlfile). Unknown stages or keys and values
of the wrong type are refused with one line naming the file and the field.
Relative paths (``section.line``, ``export.velocity``) are relative to the
survey file. docs/pipeline.md lists every key.
"""
from __future__ import annotations

import copy
import math
import tomllib
from pathlib import Path

from ..errors import input_error
from ..io.tomlfile import read_toml
from ..survey import COIL_COMPONENTS, E_COMPONENTS

__all__ = ["STAGES", "SPEC", "default_parameters", "read_processing", "resolve_parameters",
           "parse_assignment"]

#: Stages of the chain, in order.
STAGES = ("stack", "gate", "rhoa", "invert", "section", "export", "report")

# key -> (default, kind, choices). Kinds: float, float?, int, bool, str, str?, path?, floor,
# list. A "?" kind may be left unset (None; in TOML: omit the key).
SPEC = {
    "stack": {
        "estimator": ("huber", "str", ("huber", "mean", "median", "trimmed")),
        "huber_k": (1.5, "float", None),
        "trim": (0.1, "float", None),
        "reject_sigma": (6.0, "float", None),
        "transient_rms": (2.5, "float", None),
        "batches": (32, "int", None),
        "detrend": (True, "bool", None),
        "timing": (None, "str?", ("survey", "current")),
    },
    "gate": {
        "per_decade": (9.0, "float", None),
        "shape": ("boxcar", "str", ("boxcar", "taper")),
        "t_min": (None, "float?", None),
        "t_max": (None, "float?", None),
        "snr_min": (2.0, "float", None),
    },
    "rhoa": {
        "all_time": (True, "bool", None),
        "rho_min": (0.1, "float", None),
        "rho_max": (1e5, "float", None),
        "per_decade": (12, "int", None),
        "section_axis": ("time", "str", ("time", "depth")),
    },
    "invert": {
        "layers": (30, "int", None),
        "floor": (0.03, "floor", None),
        "target": (1.0, "float", None),
        "max_iter": (20, "int", None),
        "ref_resistivity": (None, "float?", None),
        "ref_weight": (0.01, "float", None),
        "doi_method": ("sensitivity", "str", ("sensitivity", "two-reference")),
        "doi_threshold": (None, "float?", None),
        "depth_min": (None, "float?", None),
        "depth_max": (None, "float?", None),
        "lci": (False, "bool", None),
        "lateral_weight": (1.0, "float", None),
    },
    "section": {
        "depth_step": (5.0, "float", None),
        "max_depth": (None, "float?", None),
        "trace_spacing": (None, "float?", None),
        "lateral": ("linear", "str", ("linear", "nearest")),
        "max_gap": (None, "float?", None),
        "vertical": ("depth", "str", ("depth", "elevation")),
        "order": ("given", "str", ("given", "principal")),
        "line": (None, "path?", None),
        "below_doi": ("shade", "str", ("shade", "hide")),
        "vmin": (None, "float?", None),
        "vmax": (None, "float?", None),
        "formats": (["png", "pdf"], "list", ("png", "pdf", "svg")),
        "title": (None, "str?", None),
    },
    "export": {
        "what": (None, "list", ("csv", "las", "segy-depth", "segy-twt")),
        "models": ("smooth", "str", ("smooth", "lci")),
        "las_step": (1.0, "float", None),
        "las_bottom": (None, "float?", None),
        "las_null_below_doi": (False, "bool", None),
        "segy_value": ("resistivity", "str", ("resistivity", "log10")),
        "segy_below_doi": ("zero", "str", ("zero", "keep")),
        "line_number": (1, "int", None),
        "velocity": (None, "path?", None),
        "dt_ms": (2.0, "float", None),
        "max_twt_ms": (None, "float?", None),
    },
    "report": {
        "title": (None, "str?", None),
        "chi2_limit": (2.0, "float", None),
        "embed": (False, "bool", None),
        "station_figures": (True, "bool", None),
    },
}

# Components a per-component error floor may name (data channels of a gated file).
_FLOOR_COMPONENTS = E_COMPONENTS + ("bz",) + COIL_COMPONENTS
_POSITIVE = {"huber_k", "reject_sigma", "transient_rms", "per_decade", "rho_min", "rho_max",
             "layers", "target", "max_iter", "depth_step", "las_step", "dt_ms", "chi2_limit",
             "max_depth", "trace_spacing", "max_gap", "las_bottom", "max_twt_ms", "t_min",
             "t_max", "depth_min", "depth_max", "ref_resistivity", "lateral_weight", "batches"}


def default_parameters() -> dict:
    """A fresh dict ``{stage: {key: default}}`` of every stage's parameters."""
    return {stage: {k: copy.deepcopy(v[0]) for k, v in keys.items()} for stage, keys in SPEC.items()}


def _coerce(stage, key, value, file):
    default, kind, choices = SPEC[stage][key]
    field = f"processing.{stage}.{key}"
    if value is None:
        if kind.endswith("?") or default is None:
            return None
        raise input_error(field, "cannot be unset", file)
    base = kind.rstrip("?")
    if base == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise input_error(field, f"expected a number, got {value!r}", file)
        value = float(value)
        if not math.isfinite(value):
            raise input_error(field, f"must be finite, got {value!r}", file)
    elif base == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and value.is_integer():
                value = int(value)
            else:
                raise input_error(field, f"expected a whole number, got {value!r}", file)
    elif base == "bool":
        if not isinstance(value, bool):
            raise input_error(field, f"expected true or false, got {value!r}", file)
    elif base in ("str", "path"):
        if not isinstance(value, str) or not value:
            raise input_error(field, f"expected a text value, got {value!r}", file)
    elif base == "floor":
        if isinstance(value, dict):
            out = {}
            for comp, v in value.items():
                if comp not in _FLOOR_COMPONENTS:
                    raise input_error(f"{field}.{comp}", "unknown component; valid: "
                                      f"{', '.join(_FLOOR_COMPONENTS)}", file)
                if isinstance(v, bool) or not isinstance(v, (int, float)) or not 0 <= v < 1:
                    raise input_error(f"{field}.{comp}", f"relative floor must be in [0, 1), got {v!r}",
                                      file)
                out[str(comp)] = float(v)
            return out
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 <= value < 1:
            raise input_error(field, f"relative floor must be in [0, 1) or a table per component, "
                              f"got {value!r}", file)
        return float(value)
    elif base == "list":
        if isinstance(value, str):
            value = [v.strip() for v in value.split(",") if v.strip()]
        if not isinstance(value, (list, tuple)) or not value:
            raise input_error(field, f"expected a non-empty list, got {value!r}", file)
        bad = [v for v in value if v not in choices]
        if bad:
            raise input_error(field, f"unknown {bad[0]!r}; valid: {', '.join(choices)}", file)
        return list(value)
    if choices and base != "list" and value not in choices:
        raise input_error(field, f"unknown {value!r}; valid: {', '.join(choices)}", file)
    if key in _POSITIVE and isinstance(value, (int, float)) and not value > 0:
        raise input_error(field, f"must be positive, got {value!r}", file)
    return value


def read_processing(survey_path) -> dict:
    """The raw ``[processing]`` table of a survey TOML file ({} when absent)."""
    path = Path(survey_path)
    doc = read_toml(path, "survey")
    table = doc.get("processing", {})
    if not isinstance(table, dict):
        raise input_error("processing", "expected a table", path)
    return table


def parse_assignment(text: str):
    """``"stage.key=value"`` (value in TOML syntax, or bare text) -> (stage, key, value)."""
    head, sep, raw = text.partition("=")
    stage, dot, key = head.strip().partition(".")
    if not sep or not dot or not key:
        raise input_error("--set", f"expected STAGE.KEY=VALUE, got {text!r}")
    raw = raw.strip()
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw
    if raw.lower() == "none":
        value = None
    return stage.strip(), key.strip(), value


def resolve_parameters(processing: dict | None = None, overrides=(), survey_file=None) -> dict:
    """Defaults updated by the survey's ``[processing]`` table, then by overrides.

    Parameters
    ----------
    processing : dict
        The ``[processing]`` table (``{stage: {key: value}}``).
    overrides : sequence of (stage, key, value)
        Command-line settings; they win over the table.
    survey_file : path, optional
        For error messages, and to resolve relative paths (``section.line``,
        ``export.velocity``) against the survey's folder.

    Returns
    -------
    dict
        ``{stage: {key: value}}`` for every stage of :data:`STAGES`, checked.
    """
    params = default_parameters()
    items = []
    for stage, table in (processing or {}).items():
        if stage not in SPEC:
            raise input_error(f"processing.{stage}", f"unknown stage; valid: {', '.join(STAGES)}",
                              survey_file)
        if not isinstance(table, dict):
            raise input_error(f"processing.{stage}", "expected a table", survey_file)
        items += [(stage, k, v, survey_file) for k, v in table.items()]
    items += [(s, k, v, None) for s, k, v in overrides]
    base = Path(survey_file).parent if survey_file else None
    for stage, key, value, where in items:
        if stage not in SPEC:
            raise input_error(f"processing.{stage}", f"unknown stage; valid: {', '.join(STAGES)}", where)
        if key not in SPEC[stage]:
            raise input_error(f"processing.{stage}.{key}",
                              f"unknown key; valid: {', '.join(SPEC[stage])}", where)
        value = _coerce(stage, key, value, where)
        if SPEC[stage][key][1] == "path?" and value is not None and where is not None and base:
            p = Path(value)
            value = str(p if p.is_absolute() else base / p)
        params[stage][key] = value
    ex = params["export"]
    if ex["what"] is None:
        ex["what"] = ["csv", "las", "segy-depth"] + (["segy-twt"] if ex["velocity"] else [])
    if "segy-twt" in ex["what"] and not ex["velocity"]:
        raise input_error("processing.export.velocity", "the two-way-time SEG-Y needs a velocity "
                          "table (export.velocity or --velocity)", survey_file)
    if ex["models"] == "lci" and not params["invert"]["lci"]:
        raise input_error("processing.export.models", "'lci' needs the laterally constrained "
                          "inversion (invert.lci = true or --lci)", survey_file)
    r = params["rhoa"]
    if not r["rho_min"] < r["rho_max"]:
        raise input_error("processing.rhoa.rho_max", "must exceed rho_min", survey_file)
    if params["section"]["formats"] and "png" not in params["section"]["formats"]:
        raise input_error("processing.section.formats", "the report links PNG figures; include png",
                          survey_file)
    return params
