"""Options and helpers every command shares: one spelling and one meaning each.

``--out`` (required, the output folder), ``--jobs`` (worker processes for the
station work), ``--figures/--no-figures`` and ``--progress/--no-progress``;
input lists that accept files or folders; the progress bar and the closing
lines of a stage command.
"""
from __future__ import annotations

import argparse
import contextlib
import os
import sys
from pathlib import Path

from ..errors import input_error
from ..io.checks import real_path

__all__ = ["add_out", "add_run_options", "input_files", "default_jobs", "stage_context",
           "finish", "not_fitted_line", "verdict_table", "MAX_JOBS"]

#: Upper bound of ``--jobs``: more processes than this only add memory.
MAX_JOBS = 256


def default_jobs() -> int:
    """Worker processes when ``--jobs`` is not given: the CPUs, at most 8."""
    return max(1, min(8, os.cpu_count() or 1))


def add_out(p, what="output folder (created; products go into the layout of docs/pipeline.md)"):
    p.add_argument("--out", required=True, metavar="DIR", help=what)


def add_run_options(p, figures=True, jobs=True):
    """``--jobs``, ``--figures/--no-figures`` and ``--progress/--no-progress``."""
    if jobs:
        p.add_argument("--jobs", type=_jobs, default=None, metavar="N",
                       help="worker processes for the station work (default: the CPUs, at most 8)")
    if figures:
        p.add_argument("--figures", action=argparse.BooleanOptionalAction, default=True,
                       help="write figures (default on)")
    p.add_argument("--progress", action=argparse.BooleanOptionalAction, default=True,
                   help="draw progress bars on standard error (default on)")


def _jobs(text):
    text = str(text).strip()
    if not text.isdigit() or len(text) > 4 or not 1 <= int(text) <= MAX_JOBS:
        raise argparse.ArgumentTypeError(f"a whole number in 1..{MAX_JOBS}, got {text[:20]!r}")
    return int(text)


def input_files(items, option, pattern="*.nc"):
    """Files named on the command line; a folder stands for its ``pattern`` files (sorted,
    hidden files skipped).

    Names must be unique (products are named after their inputs), and for per-station
    products (``stacked``, ``gated``) so must the stations the files hold.
    """
    files = []
    for item in items:
        p = Path(item)
        if p.is_dir():
            # hidden files are skipped as a shell would: a Mac writes '._EM05.nc' (AppleDouble
            # metadata, not netCDF) next to every file it copies onto a FAT or exFAT stick
            found = sorted(f for f in p.glob(pattern) if not f.name.startswith("."))
            if not found:
                raise input_error(option, f"no {pattern} files in the folder", p)
            files += found
        elif p.is_file():
            files.append(p)
        else:
            raise input_error(option, "no such file or folder", p)
    seen = {}
    for f in files:
        if f.stem in seen and real_path(seen[f.stem]) != real_path(f):
            raise input_error(option, f"two inputs named {f.stem} ({seen[f.stem]} and {f}); "
                              "products are named after their inputs", f)
        seen[f.stem] = f
    files = list(dict.fromkeys(seen.values()))
    if option in ("stacked", "gated"):
        _one_file_per_station(files, option)
    return files


def _station_attributes(path):
    """The ``station`` and ``epsg`` attributes of a product file (``epsg`` 0 when absent), or
    None when they cannot be read (the stage then refuses the file itself, in one line that
    fails only its station)."""
    try:
        import h5py
        import numpy as np

        with h5py.File(path, "r") as fh:
            sid, epsg = fh.attrs.get("station"), fh.attrs.get("epsg", 0)
    except Exception:  # noqa: BLE001 - any unreadable file is the stage's to refuse
        return None
    if isinstance(sid, bytes):
        sid = sid.decode("utf-8", "replace")
    try:
        epsg = int(np.asarray(epsg).reshape(-1)[0])
    except (TypeError, ValueError, IndexError, OverflowError):
        return None
    return (sid, epsg) if isinstance(sid, str) else None


def _one_file_per_station(files, option):
    """Refuse two input files of the same station (a copy such as ``EM06_copy.nc`` left in
    the folder): both would be processed and the models file would list the station twice.
    Refuse stations in different CRSs (``epsg``): coordinates are never transformed, and
    the models file and every export carry one CRS for all stations."""
    owner, crs = {}, None
    for f in files:
        attrs = _station_attributes(f)
        if attrs is None:
            continue
        sid, epsg = attrs
        if sid in owner:
            raise input_error(option, f"station {sid} is in two files ({owner[sid]} and {f}); "
                              "keep one", f)
        owner[sid] = f
        if crs is None:
            crs = (epsg, f)
        elif epsg != crs[0]:
            raise input_error("epsg", f"EPSG:{epsg}, but {crs[1]} is EPSG:{crs[0]}; stations "
                              "processed together share one CRS (coordinates are never "
                              "transformed)", f)


@contextlib.contextmanager
def stage_context(args, stage: str, total: int):
    """A :class:`tem.runtime.StageContext` with a pool and a progress bar on standard error.

    Holds the output folder's lock (:class:`tem.io.project.ProjectLock`) while the stage runs.
    """
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from ..io.project import ProjectLock
    from ..runtime import StageContext, Tally, process_pool

    jobs = getattr(args, "jobs", None) or default_jobs()
    console = Console(stderr=True)
    with contextlib.ExitStack() as stack:
        lock = stack.enter_context(ProjectLock(args.out, f"tem {stage}"))
        if lock.took_over:
            console.print(f"note: {lock.took_over}", highlight=False)
        pool = process_pool(min(jobs, max(total, 1)))
        if pool is not None:
            stack.enter_context(pool)
        prog = stack.enter_context(Progress(
            TextColumn(f"[bold]{stage:<8}"), BarColumn(), MofNCompleteColumn(),
            TextColumn("{task.description}"), TimeElapsedColumn(), console=console,
            disable=not getattr(args, "progress", True) or not console.is_terminal,
            transient=False))
        task = prog.add_task("", total=max(total, 1))
        tally = Tally(lambda n, text: prog.update(task, completed=n, description=text))
        yield StageContext(executor=pool, progress=tally.station, partial=tally.fraction,
                           figures=getattr(args, "figures", True))
        prog.update(task, completed=max(total, 1), description="done")


def finish(stage: str, result, out, not_fitted=None) -> int:
    """Closing lines of a stage command; exit status 1 when a station or the stage failed.

    Exit status 2 when a station failed on a bad input file (the other stations
    are still done and written).

    ``not_fitted`` ({station: status}) names stations whose chosen model is a
    failure (misfit): one line names them and the exit status is 1.
    """
    for sid, oc in result.stations.items():
        if oc.status != "ok":
            print(f"tem {stage}: station {sid} failed: {oc.message}", file=sys.stderr)
    for note in result.notes:
        print(f"tem {stage}: {note}", file=sys.stderr)
    if result.failed:
        print(f"tem {stage}: {result.failed}", file=sys.stderr)
    n = len(result.stations)
    n_fail = sum(oc.status != "ok" for oc in result.stations.values())
    written = len(result.all_outputs())
    counts = f"{n} stations, {n_fail} failed" if n else ""
    if n and not_fitted:       # never "0 failed" alone beside models that do not fit
        counts += f", {len(not_fitted)} not fitted"
    counts += "; " if n else ""
    print(f"tem {stage}: {counts}{written} files written under {out}")
    if not_fitted:
        print(f"tem {stage}: {not_fitted_line(not_fitted)}", file=sys.stderr)
    if result.bad_input:
        return 2
    return 1 if result.any_failed or not_fitted else 0


def misfit_stations(models_files) -> dict:
    """``{station: status}`` of the stations whose model in ``models_files`` is a misfit (a
    failure: the exit status of ``tem section`` and ``tem export`` says so, as ``tem
    invert``'s does)."""
    from ..io.models import model_verdicts, read_models
    from ..section.verdicts import FAILURE_CODES

    out = {}
    for f in models_files:
        ds = read_models(f)
        for sid, v in zip(ds["station"].values.astype(str), model_verdicts(ds)):
            if v is not None and v["code"] in FAILURE_CODES:
                out[str(sid)] = v["status"]
    return out


def not_fitted_line(not_fitted: dict) -> str:
    """One line naming the stations whose chosen model is not fitted, e.g. ``EM03 (misfit)``."""
    names = ", ".join(f"{sid} ({status})" for sid, status in not_fitted.items())
    return f"chosen model not fitted at {len(not_fitted)} station(s): {names}"


_VERDICT_COLOUR = {"good": "green", "check": "yellow", "reoccupy": "bold red"}


def verdict_table(result, console):
    """The evening answer: verdict, extra minutes and reasons per station (80 columns wide)."""
    import math

    from rich.table import Table

    from ..qc.verdict import whole_minutes

    rows = [(sid, oc.info) for sid, oc in result.stations.items() if "qc_verdict" in oc.info]
    if not rows:
        return
    t = Table(title="Evening QC: which stations to re-occupy (qc/stations.csv)",
              header_style="bold")
    t.add_column("station", no_wrap=True)
    t.add_column("verdict", no_wrap=True)
    t.add_column("extra min", justify="right", no_wrap=True)
    t.add_column("reasons", overflow="fold")
    for sid, info in rows:
        v = info["qc_verdict"]
        m = info.get("extra_minutes")
        minutes = "" if m is None or not math.isfinite(m) or not m else whole_minutes(m)
        t.add_row(sid, f"[{_VERDICT_COLOUR.get(v, 'white')}]{v}[/]", minutes,
                  info.get("qc_reasons", ""))
    console.print(t)
