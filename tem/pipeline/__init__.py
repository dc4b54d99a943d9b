"""The day's chain over a project folder: stack, gate, rhoa, invert, section, export, report.

Library entry point: :func:`run_pipeline`. Every stage is run through its one
door, ``tem.<stage>.stage.run`` (the same function ``tem <stage>`` calls),
writing its products atomically into the project folder (layout in
:mod:`tem.io.project` and docs/pipeline.md); :func:`run_pipeline` records every
stage (settings, input checksums, outputs, per-station status) in ``run.json``
and can rerun from any stage.
"""
from .runner import RunOutcome, read_run, run_pipeline
from .summary import summary_table
from .settings import STAGES, TABLES, read_processing, resolve_settings

__all__ = ["STAGES", "TABLES", "RunOutcome", "run_pipeline", "read_run", "summary_table",
           "read_processing", "resolve_settings"]
