"""The run record ``run.json`` of a project: read and checked, written, and the run's
verdict read from it (which stations failed, are not fitted, are to be re-occupied; the
exit status). The chain that writes it is :mod:`tem.pipeline.runner`."""
from __future__ import annotations

import json
import time

from ..errors import input_error
from ..io.project import Project
from ..io.spool import json_chunks
from ..provenance import stage_record

__all__ = ["FORMAT", "FORMAT_VERSION", "read_run", "write_run", "not_fitted", "to_reoccupy",
           "exit_status_of", "record_failed_write"]

FORMAT = "run"
FORMAT_VERSION = "1.0"

#: Station stages (the runner's, repeated here to keep this module free of the runner)
_STATION_STAGES = ("stack", "gate", "rhoa", "invert")


def read_run(project) -> dict:
    """The run record ``run.json`` of a project folder."""
    path = Project(project).run_json
    if not path.is_file():
        raise input_error("run.json", "not found: the project has no earlier run; run without "
                          "--from first", path)
    try:
        state = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, UnicodeDecodeError, RecursionError) as exc:
        raise input_error("run.json", f"unreadable ({type(exc).__name__})", path) from None
    if not isinstance(state, dict) or state.get("tem_format") != FORMAT \
            or str(state.get("format_version", "")).split(".")[0] != "1" \
            or not isinstance(state.get("stages"), dict):
        raise input_error("format_version", "not a tem run record of version 1.x", path)
    _check_record_parts(state, path)
    return state


def _check_record_parts(state, path):
    """The parts of a run record the runner reads have their types (a hand-damaged record is
    refused in one line, not met as a traceback later)."""
    parts = [(key, state.get(key), dict) for key in ("stations", "checksums", "survey",
                                                     "parameters", "last_run")]
    for stage, rec in state["stages"].items():
        if not isinstance(rec, dict):
            raise input_error(f"stages.{stage}", "not a table", path)
        parts += [(f"stages.{stage}.stations", rec.get("stations"), dict),
                  (f"stages.{stage}.inputs", rec.get("inputs"), list),
                  (f"stages.{stage}.checksums", rec.get("checksums"), dict),
                  (f"stages.{stage}.outputs", rec.get("outputs"), list),
                  (f"stages.{stage}.notes", rec.get("notes"), list),
                  (f"stages.{stage}.parameters", rec.get("parameters"), dict),
                  (f"stages.{stage}.failed", rec.get("failed"), str)]
        stations = rec.get("stations")
        if stations is None and stage in _STATION_STAGES:
            raise input_error(f"stages.{stage}.stations", "missing (a station stage's record "
                              "lists its stations)", path)
        if isinstance(stations, dict):
            for sid, r in stations.items():
                parts.append((f"stages.{stage}.stations.{sid}", r, dict))
                if isinstance(r, dict):
                    parts += [(f"stages.{stage}.stations.{sid}.{key}", r.get(key), kind)
                              for key, kind in (("checksums", dict), ("fingerprint", str),
                                                ("message", str))]
    for field, value, kind in parts:
        if value is not None and not isinstance(value, kind):
            raise input_error(field, "not " + {dict: "a table", list: "a list", str: "text"}[kind],
                              path)
    for field, table in [(f"stages.{stage}.checksums", rec.get("checksums"))
                         for stage, rec in state["stages"].items()] + \
            [(f"stages.{stage}.stations.{sid}.checksums", r.get("checksums"))
             for stage, rec in state["stages"].items()
             for sid, r in (rec.get("stations") or {}).items()]:
        if table and not all(isinstance(v, str) for v in table.values()):
            raise input_error(field, "a checksum that is not text", path)
    for stage, rec in state["stages"].items():
        for sid, r in (rec.get("stations") or {}).items():
            if not isinstance(r.get("status"), str):
                raise input_error(f"stages.{stage}.stations.{sid}.status", "missing (ok or "
                                  "failed)", path)


def write_run(project, state):
    """Write ``run.json`` atomically, streamed to the file (synced before the rename)."""
    import os

    from ..io.atomic import atomic_path
    with atomic_path(project.run_json) as tmp:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.writelines(json_chunks(state))
            fh.write("\n")
            fh.flush()
            os.fsync(fh.fileno())


def not_fitted(state) -> dict:
    """{station: verdict} of the stations whose chosen model is a failure (docs/inversion.md,
    "Verdicts": a misfit; a stalled model is a warning and leaves the exit status at 0)."""
    from ..invert.verdict import FAILURES

    return {sid: s["verdict"] for sid, s in state.get("stations", {}).items()
            if "failed_stage" not in s and s.get("verdict") in FAILURES}


def to_reoccupy(state) -> list:
    """Stations whose evening QC verdict is reoccupy (their recording failed QC; docs/qc.md):
    the run's exit status is 1, as for ``tem evening``, whatever their models."""
    return [sid for sid, s in state.get("stations", {}).items()
            if s.get("qc_verdict") == "reoccupy"]


def record_failed_write(project, state, stage, exc, t_run):
    """The run record of a run stopped in ``stage`` by a failed write (disk full, file-size
    limit: exit status 1) or by input the stage refuses (exit status 2). Written by the
    caller if the disk still takes it (it is small, and written atomically, so an old
    record stays whole otherwise)."""
    from ..errors import TemInputError, TemWorkersError

    bad = isinstance(exc, TemInputError)
    what = "refused its input" if bad else "stopped" if isinstance(exc, TemWorkersError) \
        else "could not write its products"
    why = f"{stage}: {what}: {exc}".splitlines()[0]
    state["stages"][stage] = dict(stage_record(stage, {}), stations={}, failed=why, outputs=[])
    state["last_run"].update(
        stopped=why, elapsed_s=round(time.perf_counter() - t_run, 2), exit_status=2 if bad else 1,
        failed=[sid for sid, s in state.get("stations", {}).items() if "failed_stage" in s],
        not_fitted=not_fitted(state), reoccupy=to_reoccupy(state))


def exit_status_of(state) -> int:
    """Exit status of a run from its record: 2 when a station failed on bad input; 1 when a
    station or a profile step failed, the run stopped, a chosen model is a misfit or a
    recording is to be re-occupied; else 0."""
    failed = any("failed_stage" in s for s in state["stations"].values())
    failed |= any(rec.get("failed") for rec in state["stages"].values())
    failed |= bool(state.get("last_run", {}).get("stopped"))
    failed |= bool(not_fitted(state)) or bool(to_reoccupy(state))
    bad = any(r.get("bad_input") for rec in state["stages"].values()
              for r in rec.get("stations", {}).values())
    return 2 if bad else 1 if failed else 0
