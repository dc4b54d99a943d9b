"""Processing settings of ``tem run``: every stage's table, the survey's ``[processing]`` table and
``--set`` overrides.

Each stage declares its settings once (``tem/<stage>/settings.py``); this
module only gathers them. A survey's ``[processing.<stage>]`` table sets keys
of that stage (others keep their defaults); ``--set STAGE.KEY=VALUE`` wins over
the table. Unknown stages or keys and values of the wrong type are refused with
one line naming the file and the field (``processing.invert.layers``) or the
option (``--set invert.layers``). Relative paths (``section.line``,
``export.velocity``) are relative to the survey file.
"""
from __future__ import annotations

from pathlib import Path

from ..errors import input_error
from ..export.settings import EXPORT
from ..gate.settings import GATE
from ..invert.settings import INVERT
from ..io.tomlfile import read_toml
from ..qc.verdict import QC_TABLE
from ..report.settings import REPORT
from ..rhoa.settings import RHOA
from ..section.settings import SECTION
from ..settings import override_origin, survey_origin
from ..stack.settings import STACK

__all__ = ["TABLES", "STAGES", "read_processing", "processing_table", "resolve_settings",
           "defaults"]

#: The stages of the chain, in order.
STAGES = ("stack", "gate", "rhoa", "invert", "section", "export", "report")
#: Every settings table: one per stage, and the evening QC thresholds (used by the gate stage).
TABLES = {t.stage: t for t in (STACK, GATE, QC_TABLE, RHOA, INVERT, SECTION, EXPORT, REPORT)}


def read_processing(survey_file) -> dict:
    """The ``[processing]`` table of a survey TOML file ({} when absent)."""
    path = Path(survey_file)
    return processing_table(read_toml(path, "survey").get("processing", {}), path)


def processing_table(table, path=None) -> dict:
    """A parsed ``[processing]`` value, checked to be a table (``path`` is named in errors)."""
    if not isinstance(table, dict):
        raise input_error("processing", "expected a table", path)
    return table


def defaults() -> dict:
    """``{stage: settings object}`` with every default."""
    return {stage: t.build() for stage, t in TABLES.items()}


def resolve_settings(processing: dict | None = None, overrides=(), survey_file=None) -> dict:
    """Defaults updated by the survey's ``[processing]`` table, then by ``--set`` overrides.

    Parameters
    ----------
    processing : dict
        The ``[processing]`` table (``{stage: {key: value}}``).
    overrides : sequence of (stage, key, value)
        ``--set`` values; they win over the table.
    survey_file : path, optional
        Named in errors; relative paths are resolved against its folder.

    Returns
    -------
    dict
        ``{table: settings object}`` for every table of :data:`TABLES`.
    """
    base = Path(survey_file).parent if survey_file else None
    values = {stage: {} for stage in TABLES}
    origins = {stage: {} for stage in TABLES}
    for stage, table in (processing or {}).items():
        if stage not in TABLES:
            raise input_error(f"processing.{str(stage)[:40]}", "unknown table; valid: "
                              + ", ".join(TABLES), survey_file)
        given = TABLES[stage].from_table(table, survey_file, base)
        values[stage].update(given)
        origins[stage].update({k: survey_origin(survey_file) for k in given})
    for stage, key, value in overrides:
        if stage not in TABLES:
            raise input_error(f"--set {str(stage)[:40]}", "unknown table; valid: " + ", ".join(TABLES))
        t = TABLES[stage]
        if key not in t.names or not t.item(key).expose:
            raise input_error(f"--set {stage}.{str(key)[:40]}", t.unknown_message(key))
        values[stage][key] = value
        origins[stage][key] = override_origin()
    out = {}
    for stage, t in TABLES.items():
        out[stage] = t.build(values[stage], survey_origin(survey_file), origins[stage])
    if out["export"].models == "lci" and not out["invert"].lci:
        raise input_error("processing.export.models", "'lci' needs the laterally constrained "
                          "inversion (invert.lci = true)", survey_file)
    return out
