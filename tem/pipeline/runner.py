"""The chain over a project folder: run stages in order, record them in ``run.json``.

:func:`run_pipeline` reads the survey and its ``[processing]`` table, runs the
stages from the first (or from ``from_stage``, reusing the earlier stages'
files and records), writes ``run.json`` after every stage (atomically) and
returns the run record and an exit status: 0 when every station passed every
stage, 1 when a station or a profile step failed. Bad input raises
:class:`tem.errors.TemInputError` (the CLI exits 2).
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import json
import math
import time
from dataclasses import dataclass
from pathlib import Path

from .. import __version__
from ..errors import input_error
from ..provenance import file_sha256, stage_record
from .params import STAGES, read_processing, resolve_parameters
from .products import stage_export, stage_report, stage_section
from .project import Project, StageContext, process_pool
from .stations import stage_gate, stage_invert, stage_rhoa, stage_stack

__all__ = ["run_pipeline", "RunOutcome", "STAGE_FUNCTIONS", "STATION_STAGES", "read_run",
           "summary_table", "FORMAT", "FORMAT_VERSION"]

FORMAT = "run"
FORMAT_VERSION = "1.0"

STAGE_FUNCTIONS = {"stack": stage_stack, "gate": stage_gate, "rhoa": stage_rhoa,
                   "invert": stage_invert, "section": stage_section, "export": stage_export,
                   "report": stage_report}
#: Station stages: the stage whose passing stations they process, their folder, figure kind.
STATION_STAGES = {"stack": (None, "stacked", "raw"), "gate": ("stack", "gated", "decay"),
                  "rhoa": ("gate", "rhoa", "rhoa"), "invert": ("gate", None, "fit")}


@dataclass
class RunOutcome:
    """Result of :func:`run_pipeline`: the run record (run.json) and the exit status."""

    state: dict
    exit_status: int
    project: Project


def _now():
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def read_run(project) -> dict:
    """The run record ``run.json`` of a project folder."""
    path = Project(project).run_json
    if not path.is_file():
        raise input_error("run.json", "not found: the project has no earlier run; run without "
                          "--from first", path)
    try:
        state = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise input_error("run.json", f"unreadable ({type(exc).__name__})", path) from None
    if state.get("tem_format") != FORMAT or str(state.get("format_version", "")).split(".")[0] != "1":
        raise input_error("format_version", "not a tem run record of version 1.x", path)
    return state


def _plain(obj):
    """JSON-safe copy: non-finite floats become null (strict JSON has no NaN)."""
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def _write_run(project, state):
    from ..io.atomic import write_text_atomic
    text = json.dumps(_plain(state), indent=1, sort_keys=False, allow_nan=False)
    write_text_atomic(project.run_json, text + "\n")


def _ok(state, survey):
    out = {}
    for stage, rec in state["stages"].items():
        st = rec.get("stations", {})
        out[stage] = [s.id for s in survey.stations if st.get(s.id, {}).get("status") == "ok"]
    return out


def _stage_stations(stage, state, survey):
    if stage not in STATION_STAGES:
        return [s.id for s in survey.stations]
    prev = STATION_STAGES[stage][0]
    if prev is None:
        return [s.id for s in survey.stations]
    return _ok(state, survey).get(prev, [])


def _station_summary(state, survey):
    """Per-station summary from the stage records: first failure, gates, chi2, DOI, QC."""
    out = {}
    for st in survey.stations:
        s = {"x": st.x, "y": st.y, "z": st.z}
        for stage in STAGES:
            rec = state["stages"].get(stage, {}).get("stations", {}).get(st.id)
            if rec is None:
                continue
            s.update({k: v for k, v in rec.items() if k not in ("status", "message")})
            if rec["status"] == "failed" and "failed_stage" not in s:
                s["failed_stage"] = stage
                s["message"] = rec.get("message", "")
        out[st.id] = s
    return out


def _prune_station_files(project, stage, ok, survey, figures):
    """Remove a station stage's files of stations that did not pass it (earlier runs)."""
    _, folder, kind = STATION_STAGES[stage]
    keep = set(ok)
    for st in survey.stations:
        paths = []
        if st.id not in keep and folder:
            paths.append(project.station_file(folder, st.id))
        if st.id not in keep or not figures:
            paths.append(project.station_figure(st.id, kind))
        for p in paths:
            with contextlib.suppress(FileNotFoundError):
                p.unlink()


def _record(stage, params, result, project, elapsed):
    rec = stage_record(stage, params)
    rec["inputs"] = result.inputs or [i for oc in result.stations.values() for i in oc.inputs]
    outputs = list(result.outputs) + [o for oc in result.stations.values() for o in oc.outputs]
    rec["outputs"] = [project.rel(p) for p in outputs]
    rec["stations"] = {sid: {"status": oc.status, **({"message": oc.message} if oc.message else {}),
                             **oc.info} for sid, oc in result.stations.items()}
    rec["notes"] = list(result.notes)
    rec["failed"] = result.failed
    rec["elapsed_s"] = round(elapsed, 3)
    return rec


def _check_project(project, survey, survey_file):
    root = project.root.resolve()
    inputs = {Path(survey_file).resolve().parent}
    inputs |= {survey.path(f).resolve().parent for s in survey.stations for r in s.receivers
               for f in r.files}
    if root in inputs:
        raise input_error("--out", "the project folder holds input files (survey or recordings); "
                          "choose another folder", project.root)


def run_pipeline(survey_file, project_dir, from_stage=None, overrides=(), jobs=1, console=None,
                 progress=True) -> RunOutcome:
    """Run the chain stack -> gate -> rhoa -> invert -> section -> export -> report.

    Parameters
    ----------
    survey_file : path
        Survey TOML (docs/survey.md), optionally with a ``[processing]`` table
        (docs/pipeline.md).
    project_dir : path
        Project folder (created); never an input folder.
    from_stage : str or None
        Rerun from this stage, reusing the files and records of the stages
        before it (they must exist in ``run.json``).
    overrides : sequence of (stage, key, value)
        Parameters that win over the survey's table (command-line options).
    jobs : int
        Worker processes for the station stages (1: in this process).
    console : rich.console.Console or None
        Where progress is drawn (default: standard error).
    progress : bool
        Draw progress bars.

    Returns
    -------
    RunOutcome
    """
    from rich.console import Console
    from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                               TimeElapsedColumn)

    from ..survey import read_survey

    survey_file = Path(survey_file)
    survey = read_survey(survey_file)
    params = resolve_parameters(read_processing(survey_file), overrides, survey_file)
    project = Project(project_dir)
    _check_project(project, survey, survey_file)
    if from_stage is not None and from_stage not in STAGES:
        raise input_error("--from", f"unknown stage {from_stage!r}; valid: {', '.join(STAGES)}")
    start = STAGES.index(from_stage) if from_stage else 0
    if start > 0:
        state = read_run(project.root)
        missing = [s for s in STAGES[:start] if s not in state.get("stages", {})]
        if missing:
            raise input_error("--from", f"stage {missing[0]} has no record in run.json; rerun "
                              f"from {missing[0]} or earlier", project.run_json)
        for s in STAGES[start:]:
            state["stages"].pop(s, None)
    else:
        state = {"tem_format": FORMAT, "format_version": FORMAT_VERSION, "stages": {}}
    t_run = time.perf_counter()
    state.update({"tem_version": __version__,
                  "survey": {"file": str(survey_file.resolve()), "sha256": file_sha256(survey_file),
                             "name": survey.name},
                  "parameters": params,
                  "last_run": {"from": STAGES[start], "stages": list(STAGES[start:]),
                               "started_utc": _now(), "jobs": int(jobs)}})
    console = console or Console(stderr=True)
    columns = (TextColumn("[bold]{task.fields[stage]:<8}"), BarColumn(), MofNCompleteColumn(),
               TextColumn("{task.description}"), TimeElapsedColumn())
    stop = ""
    with contextlib.ExitStack() as stack:
        pool = process_pool(jobs)
        if pool is not None:
            stack.enter_context(pool)
        prog = stack.enter_context(Progress(*columns, console=console, disable=not progress,
                                            transient=False))
        for stage in STAGES[start:]:
            stations = _stage_stations(stage, state, survey)
            n = len(stations) if stage in STATION_STAGES else 1
            task = prog.add_task("", total=max(n, 1), stage=stage)
            if stop:
                prog.update(task, description=f"[yellow]not run[/]: {stop}")
                continue

            def tick(sid, status, task=task):
                mark = "ok" if status == "ok" else "[red]FAILED[/]"
                prog.update(task, advance=1, description=f"{sid} {mark}")

            ctx = StageContext(survey_file=survey_file, stations=stations, ok=_ok(state, survey),
                               params=params, executor=pool, progress=tick, state=state)
            t0 = time.perf_counter()
            try:
                result = STAGE_FUNCTIONS[stage](survey, project, params[stage], ctx)
            finally:
                _write_run(project, state)
            for sid, oc in result.stations.items():
                if oc.status != "ok":
                    prog.console.print(f"[red]{stage}: station {sid} failed[/]: {oc.message}",
                                       highlight=False, soft_wrap=True)
            if stage in STATION_STAGES:
                ok = [sid for sid, oc in result.stations.items() if oc.status == "ok"]
                _prune_station_files(project, stage, ok, survey, params["report"]["station_figures"])
            state["stages"][stage] = _record(stage, params[stage], result, project,
                                             time.perf_counter() - t0)
            state["stations"] = _station_summary(state, survey)
            _write_run(project, state)
            prog.update(task, completed=max(n, 1),
                        description="[red]" + result.failed if result.failed else "done")
            if stage in STATION_STAGES and not ok:
                stop = f"no station passed {stage}"
            elif stage == "invert" and not (project.folder("models") / "models.nc").is_file():
                stop = result.failed or "no models"
    state["last_run"]["elapsed_s"] = round(time.perf_counter() - t_run, 2)
    state["last_run"]["stopped"] = stop
    state["stations"] = _station_summary(state, survey)
    _write_run(project, state)
    failed = any("failed_stage" in s for s in state["stations"].values())
    failed |= any(rec.get("failed") for rec in state["stages"].values()) or bool(stop)
    return RunOutcome(state=state, exit_status=1 if failed else 0, project=project)


def _finite(v):
    return isinstance(v, (int, float)) and math.isfinite(v)


def summary_table(state, title=None):
    """A rich Table: per station the status of each station stage, usable gates, chi2, DOI."""
    from rich.table import Table

    t = Table(title=title or f"tem run: {state.get('survey', {}).get('name', '')}",
              header_style="bold")
    t.add_column("station")
    for stage in STATION_STAGES:
        t.add_column(stage)
    for col in ("usable gates", "chi2", "DOI (m)", "QC / message"):
        t.add_column(col, justify="right" if col != "QC / message" else "left")
    for sid, s in state.get("stations", {}).items():
        cells = []
        for stage in STATION_STAGES:
            rec = state["stages"].get(stage, {}).get("stations", {}).get(sid)
            if rec is None:
                cells.append("[dim]-[/]")
            else:
                cells.append("[green]ok[/]" if rec["status"] == "ok" else "[red]FAILED[/]")
        gates = f"{s['usable_gates']}/{s.get('gates', '?')}" if "usable_gates" in s else "-"
        chi2 = f"{s['chi2']:.2f}" if _finite(s.get("chi2")) else "-"
        doi = f"{s['doi']:.0f}" if _finite(s.get("doi")) else "-"
        note = s.get("message") or ("" if s.get("qc", "ok") == "ok" else f"QC {s['qc']}")
        if not note and s.get("invert_message"):
            note = s["invert_message"]
        t.add_row(sid, *cells, gates, chi2, doi, note[:90])
    return t
