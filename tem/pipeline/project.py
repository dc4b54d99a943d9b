"""The project folder of ``tem run``: layout, stage context and per-station outcomes.

Layout (docs/pipeline.md)::

    PROJECT/
      run.json                 stage records: parameters, input checksums, outputs, statuses
      report.html              QC report (links figures/)
      stacked/<station>.nc     stacked transients            (stage stack)
      gated/<station>.nc       gated soundings               (stage gate)
      rhoa/<station>.nc        apparent resistivity          (stage rhoa)
      rhoa/rhoa.csv            one row per station, channel and gate
      models/models.nc         smooth 1D models              (stage invert)
      models/models.csv        layer table
      models/fit.csv           observed and predicted data
      models/models_lci.nc     laterally constrained models  (invert.lci)
      sections/section.nc      stitched section grid         (stage section)
      sections/section_lci.nc
      exports/...              CSV, LAS, SEG-Y, export.json  (stage export)
      figures/...              section, models, pseudo-sections (PNG + PDF)
      figures/stations/...     per-station decay, apparent resistivity, fit
"""
from __future__ import annotations

import concurrent.futures as cf
import multiprocessing as mp
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import TemInputError

__all__ = ["Project", "StageContext", "StationOutcome", "StageResult", "map_stations"]


class Project:
    """Paths of a project folder (nothing is created until a stage writes)."""

    def __init__(self, root):
        self.root = Path(root)

    @property
    def run_json(self) -> Path:
        return self.root / "run.json"

    @property
    def report(self) -> Path:
        return self.root / "report.html"

    def folder(self, name: str) -> Path:
        """``stacked``, ``gated``, ``rhoa``, ``models``, ``sections``, ``exports``, ``figures``."""
        return self.root / name

    def station_file(self, stage_folder: str, station: str) -> Path:
        return self.root / stage_folder / f"{station}.nc"

    def station_figure(self, station: str, kind: str) -> Path:
        """``figures/stations/<station>_<kind>.png`` (kind: raw, decay, rhoa, fit)."""
        return self.root / "figures" / "stations" / f"{station}_{kind}.png"

    def rel(self, path) -> str:
        """Path relative to the project root (POSIX), or the path itself if outside."""
        p = Path(path)
        try:
            return p.resolve().relative_to(self.root.resolve()).as_posix()
        except ValueError:
            return str(p)


@dataclass
class StationOutcome:
    """What one stage did for one station."""

    station: str
    status: str                      # "ok" or "failed"
    message: str = ""
    outputs: list = field(default_factory=list)
    inputs: list = field(default_factory=list)   # [{"file", "sha256"}]
    info: dict = field(default_factory=dict)     # summary values (usable_gates, chi2, doi, qc)
    payload: object = None                       # stage data for the parent (rows, results)


@dataclass
class StageResult:
    """What a stage did: per-station outcomes, profile outputs, notes and checksums."""

    stations: dict = field(default_factory=dict)  # id -> StationOutcome
    outputs: list = field(default_factory=list)
    inputs: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    failed: str = ""                              # profile-level failure (one line)


@dataclass
class StageContext:
    """Everything a stage needs besides the survey, project and its own parameters.

    survey_file : the survey TOML (provenance). stations : ids to process, in
    survey order (those that passed the previous station stage). ok : stage
    -> ids that passed it (this run or a kept earlier run). params : every
    stage's parameters (export reads the section's profile settings).
    executor : a process pool or None (in-process). progress : called as
    ``progress(station, status)`` after each station. state : the run
    record so far (run.json contents; the report reads station summaries).
    """

    survey_file: Path | None
    stations: list
    ok: dict
    params: dict
    executor: object = None
    progress: object = None
    state: dict = field(default_factory=dict)


def _guarded(task, station, args):
    """Run a station task; any failure becomes a one-line failed outcome."""
    try:
        return task(*args)
    except TemInputError as exc:
        return StationOutcome(station, "failed", str(exc).splitlines()[0])
    except Exception as exc:  # noqa: BLE001 - one station must not stop the batch
        text = f"{type(exc).__name__}: {exc}".splitlines()[0]
        return StationOutcome(station, "failed", text)


def map_stations(task, jobs, ctx: StageContext) -> dict:
    """Run ``task(*args)`` for each ``(station, args)`` in ``jobs``; returns id -> outcome.

    Uses ``ctx.executor`` when given (a crashed worker fails only its
    station), else runs in this process. Outcomes are reported through
    ``ctx.progress`` as they finish.
    """
    out = {}

    def done(oc):
        out[oc.station] = oc
        if ctx.progress:
            ctx.progress(oc.station, oc.status)

    if ctx.executor is None or len(jobs) <= 1:
        for sid, args in jobs:
            done(_guarded(task, sid, args))
    else:
        futs = {ctx.executor.submit(_guarded, task, sid, args): sid for sid, args in jobs}
        for fut in cf.as_completed(futs):
            sid = futs[fut]
            try:
                done(fut.result())
            except Exception as exc:  # noqa: BLE001 - e.g. a killed worker process
                done(StationOutcome(sid, "failed", f"worker failed: {type(exc).__name__}: {exc}"
                                    .splitlines()[0]))
    return {sid: out[sid] for sid, _ in jobs}


def process_pool(jobs: int):
    """A process pool of ``jobs`` workers (forkserver start: safe beside progress threads)."""
    if jobs <= 1:
        return None
    try:
        ctx = mp.get_context("forkserver")
    except ValueError:  # pragma: no cover - platforms without forkserver
        ctx = mp.get_context("spawn")
    return cf.ProcessPoolExecutor(max_workers=int(jobs), mp_context=ctx)
