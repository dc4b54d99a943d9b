"""The chain over a project folder: run stages in order, record them in ``run.json``.

:func:`run_pipeline` reads the survey and its ``[processing]`` table, takes the
project's lock (one writer at a time; temporaries of an interrupted run are
removed), and runs the stages through each stage's one door
(``tem.<stage>.stage.run``) from the first or from ``from_stage``, on a local
process pool or a dask.distributed cluster. A rerun reuses every product whose
inputs and settings are unchanged (:mod:`tem.pipeline.resume`). ``run.json`` is
written after every stage (atomically); products an earlier run left that this
run did not make are removed. Returns the run record and an exit status: 0
when every station passed every stage, 1 when a station or a profile step
failed, a station's chosen model is a misfit, or a station's recording is to
be re-occupied (evening QC verdict reoccupy). Bad input raises :class:`tem.errors.TemInputError` (the CLI exits 2),
a failed write :class:`tem.errors.TemOutputError` (exit 1).
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import time
from dataclasses import dataclass
from pathlib import Path

from .. import __version__
from ..errors import TemInputError, TemOutputError, input_error
from ..io.checks import real_path
from ..io.project import Project, ProjectLock, check_output
from ..io.spool import Spool, SpooledDict, spool_record
from ..provenance import stage_record
from ..runtime import StageContext, StationOutcome, Tally, process_pool
from .record import (FORMAT, FORMAT_VERSION, exit_status_of, not_fitted, read_run,
                     record_failed_write, to_reoccupy, write_run)
from .resume import (Checksums, changed_products, fingerprint, keep_edited, reusable,
                     station_survey_text)
from .settings import STAGES, processing_table, resolve_settings

__all__ = ["run_pipeline", "RunOutcome", "STATION_STAGES", "read_run", "not_fitted", "to_reoccupy",
           "exit_status_of",
           "FORMAT",
           "FORMAT_VERSION",
           "OWNED"]

#: Station stages: the stage whose passing stations they process.
STATION_STAGES = {"stack": None, "gate": "stack", "rhoa": "gate", "invert": "gate"}
#: Station stages whose products are reused station by station.
_PER_STATION = {"stack": None, "gate": ("stack", "stacked"), "rhoa": ("gate", "gated")}

#: Files each stage owns in a project (globs): what an earlier run left there and this
#: run did not write is removed, so no stale product outlives a rerun.
OWNED = {
    "stack": ("stacked/*.nc", "figures/stations/*_raw.png"),
    "gate": ("gated/*.nc", "figures/stations/*_decay.png", "qc/stations.csv"),
    "rhoa": ("rhoa/*.nc", "rhoa/*.csv", "figures/stations/*_rhoa.png", "figures/pseudosection_*"),
    "invert": ("models/*.nc", "models/*.csv", "figures/stations/*_fit.png"),
    "section": ("sections/*.nc", "figures/section*.*", "figures/models.*"),
    "export": ("exports/*.csv", "exports/*.sgy", "exports/*.json", "exports/las/*.las"),
    "report": ("report.html", "figures/qc_*.png"),
}


@dataclass
class RunOutcome:
    """Result of :func:`run_pipeline`: the run record (run.json) and the exit status."""

    state: dict
    exit_status: int
    project: Project


def _now():
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def _ok(state, survey):
    """{stage: ids of the stations that passed it, in survey order}."""
    out = {}
    for stage, rec in state["stages"].items():
        st = rec.get("stations")      # spooled (tem.io.spool) in every record of a run
        ok = set(st.keys_where("ok")) if isinstance(st, SpooledDict) else set()
        out[stage] = [s.id for s in survey.stations if s.id in ok]
    return out


def _station_summary(state, survey, out, project=None):
    """Per-station summary from the stage records: first failure, gates, chi2, DOI, QC;
    written into ``out`` (a mapping, emptied first), which is returned. A station that
    failed before the gate stage has its evening verdict from ``qc/stations.csv`` (the
    gate stage judges every station; terminal, run.json and the table then agree)."""
    out.clear()
    unjudged = {}
    for st in survey.stations:
        s = {"x": st.x, "y": st.y, "z": st.z}
        for stage in STAGES:
            rec = state["stages"].get(stage, {}).get("stations", {}).get(st.id)
            if rec is None:
                continue
            s.update({k: v for k, v in rec.items() if k not in ("status", "message", "fingerprint",
                                                                  "checksums", "reused")})
            if rec["status"] == "failed" and "failed_stage" not in s:
                s["failed_stage"] = stage
                s["message"] = rec.get("message", "")
        if "qc_verdict" not in s and "failed_stage" in s:
            unjudged[st.id] = s
        out[st.id] = s
    table = _qc_table(project) if unjudged and project is not None and \
        "gate" in state["stages"] else None
    if table is not None:
        from ..qc import read_stations_csv
        with contextlib.suppress(Exception):        # a table edited by hand: left out
            for row in read_stations_csv(table):
                s = unjudged.get(row["station"])
                if s is not None:
                    minutes = row.get("extra_minutes") or ""
                    s.update(qc_verdict=row["verdict"], qc_reasons=row["reasons"],
                             extra_minutes=int(float(minutes)) if minutes else None)
                    out[row["station"]] = s
    return out


def _prune(project, stage, outputs):
    """Remove files the stage owns that this run did not write (an earlier run's products)."""
    keep = {Path(p).resolve() for p in outputs}
    for pattern in OWNED[stage]:
        for p in project.root.glob(pattern):
            if p.is_file() and p.resolve() not in keep:
                with contextlib.suppress(FileNotFoundError):
                    p.unlink()


def _user_inputs(survey, survey_file, settings):
    """Files the user gave (never written): survey, recordings, line and velocity tables."""
    files = [Path(survey_file)] + [survey.path(f) for s in survey.stations for r in s.receivers
                                   for f in r.files]
    files += [Path(p) for p in (settings["section"].line, settings["export"].velocity) if p]
    folders = {real_path(survey_file).parent}
    folders |= {real_path(survey.path(f)).parent for s in survey.stations for r in s.receivers
                for f in r.files}
    return files, folders


# ----------------------------------------------------------------------------- one stage
class _Run:
    """State of one ``tem run``: survey, settings, project, previous record, checksums."""

    def __init__(self, survey, survey_file, settings, project, state, previous, ctx_kw,
                 spool, force=(), redone=None):
        self.survey, self.survey_file, self.settings = survey, survey_file, settings
        self.project, self.state, self.previous = project, state, previous
        self.spool = spool
        self.sums = Checksums(previous.get("checksums"), table=spool.dict("checksums"))
        self.ctx_kw = ctx_kw
        self.force = set(force)          # stages recomputed whatever their fingerprints say
        # the earlier records of the forced stages: only to find their hand-edited products
        self.redone = redone or {}
        self.stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y%m%dT%H%M%SZ")

    def _keep_edited(self, stage, old, reused):
        """Keep the hand-edited products of ``old`` (the stage's earlier record) that this
        run is about to write anew (not those of stations ``reused``); notes."""
        if not old:
            return []
        recorded = dict(old.get("checksums") or {})
        for sid, st in (old.get("stations") or {}).items():
            if sid not in reused:
                recorded.update(st.get("checksums") or {})
        return keep_edited(self.project, recorded, self.sums, stage, self.stamp)

    def _station_inputs(self, stage):
        """``(station, input files, extra)`` of a per-station stage, one station at a time (the
        survey text of a station's stack is made when its fingerprint is, not all at once)."""
        if stage == "stack":
            for st in self.survey.stations:
                yield (st.id, [self.survey.path(f) for r in st.receivers for f in r.files],
                       station_survey_text(self.survey, st.id))
            return
        prev, folder = _PER_STATION[stage]
        for sid in _ok(self.state, self.survey).get(prev, []):
            yield sid, [self.project.station_file(folder, sid)], None

    def _profile_inputs(self, stage):
        ok = _ok(self.state, self.survey)
        p = self.project
        if stage == "invert":
            qc = _qc_table(p)
            return [p.station_file("gated", sid) for sid in ok.get("gate", [])] + \
                ([qc] if qc else [])
        if stage == "section":
            files = [p.folder("models") / "models.nc"]
            if self.settings["invert"].lci and (p.folder("models") / "models_lci.nc").is_file():
                files.append(p.folder("models") / "models_lci.nc")
            if not files[0].is_file():
                raise input_error("file", "missing (run the invert stage first)", files[0])
            return files + ([Path(self.settings["section"].line)] if self.settings["section"].line
                            else [])
        if stage == "export":
            from ..export.stage import inputs_of
            vel = self.settings["export"].velocity
            return list(inputs_of(self.settings["export"], p)) + ([Path(vel)] if vel else [])
        return []

    def run_stage(self, stage, tally):
        """Run (or reuse) one stage; returns (StageResult, record)."""
        s = self.settings[stage]
        prev_rec = None if stage in self.force else self.previous.get("stages", {}).get(stage)
        notes = []
        reused = {}
        fps = {}
        if stage in _PER_STATION:
            for sid, files, extra in self._station_inputs(stage):
                fps[sid] = fingerprint(stage, s.as_dict(), [self.sums.of(f) for f in files], extra)
                old = (prev_rec or {}).get("stations", {}).get(sid)
                if reusable(self.project, old, fps[sid], self.sums):
                    reused[sid] = _outcome_from_record(sid, old, self.project)
            stage_fp = None
        elif stage != "report":
            files = self._profile_inputs(stage)
            stage_fp = fingerprint(stage, s.as_dict(), [self.sums.of(f) for f in files])
            if reusable(self.project, prev_rec, stage_fp, self.sums):
                return None, dict(prev_rec, reused=True, notes=prev_rec.get("notes", []) + notes)
        else:
            stage_fp = None
        # a product edited by hand is kept, not overwritten (and said: terminal, run.json)
        notes += self._keep_edited(stage, prev_rec if prev_rec is not None
                                   else self.redone.get(stage), reused)
        ctx = StageContext(progress=tally.station, partial=tally.fraction, run_state=self.state,
                           reused=reused, **self.ctx_kw)
        t0 = time.perf_counter()
        result = _stage_call(stage, self.settings, self.survey, self.survey_file, self.project,
                             self.state, ctx)
        result.notes = notes + result.notes
        for o in result.all_outputs():       # written now: never trust an earlier checksum
            self.sums.forget(o)
        if reused:
            result.notes.append(f"reused {len(reused)} of {len(result.stations)} stations' "
                                "products (inputs and settings unchanged)")
        rec = self._record(stage, s, result, time.perf_counter() - t0, fps, stage_fp, reused)
        return result, rec

    def _record(self, stage, settings, result, elapsed, fps, stage_fp, reused):
        p = self.project
        rec = stage_record(stage, settings.as_dict())
        rec["inputs"] = self.spool.list(f"{stage}:inputs", result.inputs or
                                        (i for oc in result.stations.values() for i in oc.inputs))
        rec["outputs"] = [p.rel(o) for o in result.all_outputs()]
        rec["stations"] = self.spool.dict(stage)
        for sid, oc in result.stations.items():
            r = {"status": oc.status, **({"message": oc.message} if oc.message else {}),
                 **({"bad_input": True} if oc.bad_input else {}), **oc.info}
            if sid in fps:
                r["fingerprint"] = fps[sid]
                r["checksums"] = {p.rel(o): self.sums.of(o) for o in oc.outputs if Path(o).is_file()}
                r["reused"] = sid in reused
            rec["stations"][sid] = r
        if stage_fp is not None:
            rec["fingerprint"] = stage_fp
            rec["checksums"] = {p.rel(o): self.sums.of(o) for o in result.all_outputs()
                                if Path(o).is_file()}
        else:   # its survey-wide products (qc/stations.csv, the report): a hand edit is seen
            rec["checksums"] = {p.rel(o): self.sums.of(o) for o in result.outputs
                                if Path(o).is_file()}
        rec["notes"] = list(result.notes)
        rec["failed"] = result.failed
        rec["elapsed_s"] = round(elapsed, 3)
        return rec


def _outcome_from_record(sid, rec, project):
    """A station outcome carried over from the run record (its products are on disk)."""
    info = {k: v for k, v in rec.items() if k not in ("status", "message", "fingerprint",
                                                       "checksums", "reused")}
    return StationOutcome(sid, rec["status"], rec.get("message", ""),
                          outputs=[str(project.root / r) for r in rec.get("checksums", {})],
                          info=info)


def _qc_table(project):
    """The gate stage's evening QC table ``qc/stations.csv``, or None when there is none."""
    path = project.folder("qc") / "stations.csv"
    return path if path.is_file() else None


def _stage_call(stage, settings, survey, survey_file, project, state, ctx):
    """Call the stage's one door with its inputs from the project."""
    ok = _ok(state, survey)
    s = settings[stage]
    if stage == "stack":
        from ..stack.stage import run
        return run(s, survey, [st.id for st in survey.stations], project, ctx, survey_file)
    if stage in ("gate", "rhoa", "invert"):
        prev = {"gate": ("stack", "stacked"), "rhoa": ("gate", "gated"),
                "invert": ("gate", "gated")}[stage]
        files = [project.station_file(prev[1], sid) for sid in ok.get(prev[0], [])]
        if stage == "gate":
            from ..gate.stage import run
            failed = {sid: r.get("message", "") for sid, r in
                      state["stages"].get("stack", {}).get("stations", {}).items()
                      if r["status"] != "ok"}
            return run(s, files, project, ctx, qc=settings["qc"], failed=failed)
        if stage == "rhoa":
            from ..rhoa.stage import run
            return run(s, files, project, ctx)
        from ..invert.stage import run
        return run(s, files, project, ctx, qc=_qc_table(project))
    if stage == "section":
        from ..section.stage import run
        files = [project.folder("models") / "models.nc"]
        if settings["invert"].lci and (project.folder("models") / "models_lci.nc").is_file():
            files.append(project.folder("models") / "models_lci.nc")
        return run(s, files, project, ctx, title_prefix=f"{survey.name}: ")
    if stage == "export":
        from ..export.stage import run
        return run(s, project, project, ctx)
    from ..report.stage import run
    return run(s, project, project, ctx)


# ----------------------------------------------------------------------------- the run
@contextlib.contextmanager
def _executor(jobs, scheduler):
    """A local process pool (``jobs`` > 1), a dask.distributed client, or None."""
    if scheduler:
        from .cluster import dask_client
        with dask_client(scheduler, jobs) as client:
            yield client
        return
    pool = process_pool(jobs)
    if pool is None:
        yield None
        return
    with pool:
        yield pool


def _withdraw_report(run, stages):
    """The earlier run's report describes products this run may change: it is withdrawn
    when the run starts (a hand-edited one is kept under ``edited/``), so a run that stops
    before its report stage leaves no report contradicting the products. Notes."""
    report = run.project.report
    if "report" not in stages or not report.is_file():
        return []
    old = run.previous.get("stages", {}).get("report") or run.redone.get("report")
    notes = run._keep_edited("report", old, {})
    if report.is_file():
        report.unlink()
    return notes


def _kept_inputs_notes(project, state, stages, sums):
    """Notes for products of kept stages that changed since they were written (``--from``)."""
    notes = []
    for stage in stages:
        rec = state["stages"].get(stage, {})
        recorded = dict(rec.get("checksums") or {})
        for st in rec.get("stations", {}).values():
            recorded.update(st.get("checksums") or {})
        _, changed = changed_products(project, recorded, sums)
        notes += [f"{rel} changed since the {stage} stage wrote it (edited by hand?); used as "
                  "it is now" for rel in changed]
    return notes


def run_pipeline(survey_file, project_dir, from_stage=None, overrides=(), jobs=1, console=None,
                 progress=True, figures=True, scheduler=None, until=None) -> RunOutcome:
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
        before it (they must exist in ``run.json``). Without it, products whose
        inputs and settings are unchanged are reused.
    overrides : sequence of (stage, key, value)
        ``--set`` values; they win over the survey's table.
    jobs : int
        Worker processes for the station stages (1: in this process).
    console : rich.console.Console or None
        Where progress is drawn (default: standard error).
    progress : bool
        Draw progress bars.
    figures : bool
        Write the per-station and profile figures.
    scheduler : str or None
        ``"local"`` (a dask LocalCluster of ``jobs`` workers) or the address of a
        dask.distributed scheduler; None: a local process pool.
    until : str or None
        Stop after this stage (``"gate"``: the evening check, stack + gate + QC).

    Returns
    -------
    RunOutcome
    """
    from rich.console import Console

    from ..runtime import return_large_blocks
    from ..survey import read_survey_file

    return_large_blocks()        # transient buffers go back to the system (docs/scaling.md)
    survey_file = Path(survey_file)
    survey, processing = read_survey_file(survey_file)    # one parse of the file
    settings = resolve_settings(processing_table(processing, survey_file), overrides, survey_file)
    del processing
    project = Project(project_dir)
    files, folders = _user_inputs(survey, survey_file, settings)
    for field, path in (("section.line", settings["section"].line),
                        ("export.velocity", settings["export"].velocity)):
        if path and not Path(path).is_file():      # known now, not after the stages before
            raise input_error(field, "not a file" if Path(path).exists() else "no such file",
                              path)
    check_output(project.root, STAGES, inputs=files, read_only=folders)
    del files, folders           # a path per recording: not held for the whole run
    if from_stage is not None and from_stage not in STAGES:
        raise input_error("--from", f"unknown stage {from_stage!r}; valid: {', '.join(STAGES)}")
    start = STAGES.index(from_stage) if from_stage else 0
    if until is not None and until not in STAGES:
        raise input_error("--until", f"unknown stage {until!r}; valid: {', '.join(STAGES)}")
    end = STAGES.index(until) + 1 if until else len(STAGES)
    if end <= start:
        raise input_error("--until", f"stage {until} comes before --from {from_stage}")
    console = console or Console(stderr=True)
    with ProjectLock(project.root, "tem run") as lock:
        return _run_locked(survey, survey_file, settings, project, start, end, jobs, console,
                           progress, figures, scheduler, lock)


def _run_locked(survey, survey_file, settings, project, start, end, jobs, console, progress,
                figures, scheduler, lock):
    from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                               TimeElapsedColumn)

    # the per-station parts of the run record live in a spool on disk (tem.io.spool), not in
    # this process's memory, which would otherwise grow with the survey
    spool = Spool()
    previous = {}
    if start > 0:
        state = spool_record(read_run(project.root), spool)
        missing = [s for s in STAGES[:start] if s not in state["stages"]]
        if missing:
            raise input_error("--from", f"stage {missing[0]} has no record in run.json; rerun "
                              f"from {missing[0]} or earlier", project.run_json)
        redone = {s: state["stages"].pop(s) for s in STAGES[start:] if s in state["stages"]}
        # the stages from --from on are redone whatever their records say: of the earlier
        # record, only the file checksums are of use
        previous = {"checksums": state.get("checksums")}
    else:
        redone = {}
        if project.run_json.is_file():
            with contextlib.suppress(Exception):
                previous = spool_record(read_run(project.root), spool, "previous")
        state = {"tem_format": FORMAT, "format_version": FORMAT_VERSION, "stages": {}}
    run = _Run(survey, survey_file, settings, project, state, previous, {"figures": figures},
               spool, force=STAGES[start:] if start > 0 else (), redone=redone)
    t_run = time.perf_counter()
    state.update({"tem_version": __version__,
                  "survey": {"file": str(real_path(survey_file)), "sha256": run.sums.of(survey_file),
                             "name": survey.name},
                  "parameters": {k: v.as_dict() for k, v in settings.items()},
                  "last_run": {"from": STAGES[start], "stages": list(STAGES[start:end]),
                               "started_utc": _now(), "jobs": int(jobs), "figures": bool(figures),
                               "scheduler": scheduler or "local processes"}})
    housekeeping = [n for n in (lock.took_over,) if n]
    if lock.cleaned:
        housekeeping.append(f"removed {lock.cleaned} temporary files of an interrupted run")
    housekeeping += _kept_inputs_notes(project, state, STAGES[:start], run.sums)
    housekeeping += _withdraw_report(run, STAGES[start:end])
    state["last_run"]["notes"] = housekeeping
    for note in housekeeping:
        console.print(f"[yellow]note[/]: {note}", highlight=False, soft_wrap=True)
    columns = (TextColumn("[bold]{task.fields[stage]:<8}"), BarColumn(), MofNCompleteColumn(),
               TextColumn("{task.description}"), TimeElapsedColumn())
    stop = ""
    stations = spool.dict("stations")
    with contextlib.ExitStack() as stack:
        run.ctx_kw["executor"] = stack.enter_context(_executor(jobs, scheduler))
        if scheduler not in (None, "local") and run.ctx_kw["executor"] is not None:
            from .cluster import profiling_note
            note = profiling_note(run.ctx_kw["executor"])
            if note:
                state["last_run"]["notes"].append(note)
                console.print(f"[yellow]note[/]: {note}", highlight=False, soft_wrap=True)
        prog = stack.enter_context(Progress(*columns, console=console,
                                            disable=not progress or not console.is_terminal,
                                            transient=False))
        for stage in STAGES[start:end]:
            ok = _ok(state, survey)
            prev = STATION_STAGES.get(stage)
            n = (len(survey.stations) if prev is None else len(ok.get(prev, []))) \
                if stage in STATION_STAGES else 1
            task = prog.add_task("", total=max(n, 1), stage=stage)
            if stop:
                prog.update(task, description=f"[yellow]not run[/]: {stop}")
                continue

            tally = Tally(lambda k, text, task=task: prog.update(task, completed=k,
                                                                   description=text))
            try:
                result, rec = run.run_stage(stage, tally)
            except (TemOutputError, TemInputError) as exc:
                # a failed write (disk full, file-size limit) or input the stage refuses stops
                # the run: the record says which stage and why, and the exit status, before
                # the one-line error
                record_failed_write(project, state, stage, exc, t_run)
                # what the run did finish, for the caller's summary before the error line
                exc.outcome = RunOutcome(state=state, exit_status=state["last_run"]["exit_status"],
                                         project=project)
                raise
            finally:
                with contextlib.suppress(TemOutputError):
                    write_run(project, state)
            desc = ("reused" if result is None else
                    "[red]" + result.failed if result.failed else "done")
            if result is not None:
                for sid, oc in result.stations.items():
                    if oc.status != "ok":
                        prog.console.print(f"[red]{stage}: station {sid} failed[/]: {oc.message}",
                                           highlight=False, soft_wrap=True)
                _prune(project, stage, result.all_outputs())
            # the record holds what the run keeps of the stage: let its outcomes (payloads,
            # QC rows) go now, not when the next stage's result replaces them
            result = None
            state["stages"][stage] = rec
            state["stations"] = _station_summary(state, survey, stations, project)
            state["checksums"] = run.sums.table
            write_run(project, state)
            prog.update(task, completed=max(n, 1), description=desc)
            passed = [sid for sid, r in rec.get("stations", {}).items() if r["status"] == "ok"]
            if stage in STATION_STAGES and not passed:
                stop = f"no station passed {stage}"
            elif stage == "invert" and not (project.folder("models") / "models.nc").is_file():
                stop = rec.get("failed") or "no models"
        ex = run.ctx_kw["executor"]
        if ex is not None and hasattr(ex, "scheduler_info"):
            from .cluster import worker_peak_rss_mb
            state["last_run"]["worker_peak_rss_mb"] = round(worker_peak_rss_mb(ex), 1)
    state["last_run"]["elapsed_s"] = round(time.perf_counter() - t_run, 2)
    state["last_run"]["stopped"] = stop        # the summary is the last stage's: unchanged since
    # the run's verdict in the record itself, as the closing lines and the exit status say it
    state["last_run"].update(
        failed=[sid for sid, s in state.get("stations", {}).items() if "failed_stage" in s],
        not_fitted=not_fitted(state), reoccupy=to_reoccupy(state))
    state["last_run"]["exit_status"] = exit_status_of(state)
    write_run(project, state)
    return RunOutcome(state=state, exit_status=state["last_run"]["exit_status"], project=project)


