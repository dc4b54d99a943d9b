"""The day's chain over a project folder: stack, gate, rhoa, invert, section, export, report.

Library entry point: :func:`run_pipeline`. Each stage is also a function
``stage(survey, project, params, ctx)`` (:data:`STAGE_FUNCTIONS`) writing its
products atomically into the project folder (layout in
:mod:`tem.pipeline.project` and docs/pipeline.md); :func:`run_pipeline`
records every stage (parameters, input checksums, outputs, per-station status)
in ``run.json`` and can rerun from any stage.
"""
from .params import STAGES, default_parameters, parse_assignment, read_processing, resolve_parameters
from .project import Project, StageContext, StageResult, StationOutcome
from .runner import STAGE_FUNCTIONS, RunOutcome, read_run, run_pipeline, summary_table

__all__ = ["STAGES", "STAGE_FUNCTIONS", "Project", "StageContext", "StageResult", "StationOutcome",
           "RunOutcome", "run_pipeline", "read_run", "summary_table", "default_parameters",
           "read_processing", "resolve_parameters", "parse_assignment"]
