"""The output folder of every stage: its layout, and the rule that no input is ever written.

Every stage command (``tem stack``, ``tem gate``, ...) and ``tem run`` write
into the same layout under ``--out`` (docs/pipeline.md)::

    OUT/
      run.json                 stage records of ``tem run``
      report.html              QC report                      (report)
      stacked/<station>.nc     stacked transients             (stack)
      gated/<station>.nc       gated soundings                (gate)
      rhoa/<station>.nc        apparent resistivity           (rhoa)
      rhoa/rhoa.csv            one row per station, channel and gate
      models/models.nc         1D models, models.csv, fit.csv (invert)
      sections/section.nc      stitched section grid          (section)
      exports/...              CSV, LAS, SEG-Y, export.json   (export)
      figures/...              profile figures (section, models, pseudo-sections)
      figures/stations/...     per-station figures (<station>_<kind>.png)

so a product has the same name whichever door made it. :func:`check_output`
refuses, before anything is written, an output folder that is or lies inside
the survey's folder or a recording folder, that is an input file or the
folder holding one (``tem gate stacked/EM01.nc --out stacked``, ``tem forward
model.csv ... --out .``), or whose stage folders hold an input that the stage
could overwrite or prune.
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import json
import os
import socket
from pathlib import Path

from ..errors import input_error
from .checks import real_path

__all__ = ["Project", "STAGE_FOLDERS", "check_output", "ProjectLock", "LOCK_NAME"]

#: The lock file of an output folder (held while a command writes into it).
LOCK_NAME = ".tem-lock"

#: Folders (relative to the output folder) each stage writes, replaces or prunes.
STAGE_FOLDERS = {
    "stack": ("stacked", "figures/stations"),
    "gate": ("gated", "figures/stations", "qc"),
    "import": ("gated",),
    "rhoa": ("rhoa", "figures/stations", "figures"),
    "invert": ("models", "figures/stations"),
    "section": ("sections", "figures"),
    "export": ("exports",),
    "report": ("figures",),
    "forward": (),
    "synth": (),
}


class Project:
    """Paths of an output folder (nothing is created until a stage writes)."""

    def __init__(self, root):
        self.root = Path(root)

    @property
    def run_json(self) -> Path:
        return self.root / "run.json"

    @property
    def report(self) -> Path:
        return self.root / "report.html"

    def folder(self, name: str) -> Path:
        """``stacked``, ``gated``, ``rhoa``, ``models``, ``sections``, ``exports``, ``figures``, ``qc``."""
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


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def check_output(out, stages, inputs=(), read_only=(), planned=(), option="--out"):
    """Refuse an output folder that would write into or over an input (before any write).

    Parameters
    ----------
    out : path
        The output folder.
    stages : sequence of str
        Stages that will write into it (:data:`STAGE_FOLDERS`).
    inputs : sequence of path
        Input files (and folders) of this run.
    read_only : sequence of path
        Folders never written into: the survey's folder, recording folders.
    planned : sequence of path
        Files the command writes directly under ``out`` (e.g. response.csv).
    option : str
        What the user typed for the output (named in the error).
    """
    o = real_path(out)
    if o.exists() and not o.is_dir():
        raise input_error(option, "exists and is not a folder", out)
    for d in read_only:
        d = real_path(d)
        if _inside(o, d):
            raise input_error(option, f"is or lies inside the input folder {d} (raw data and the "
                              "survey are read-only); choose a separate output folder", out)
    folders = [o / f for s in stages for f in STAGE_FOLDERS.get(s, ())]
    targets = {real_path(o / p) for p in planned} | {o / "run.json", o / "report.html"}
    for f in inputs:
        f = real_path(f)
        if f == o or _inside(o, f) and f.is_file():
            raise input_error(option, f"is the input {f}; choose a separate output folder", out)
        if f in targets or any(_inside(f, d) for d in folders):
            raise input_error(option, f"would overwrite or remove the input {f}; choose a separate "
                              "output folder", out)
        if f.is_file() and o == f.parent:
            raise input_error(option, f"is the folder of the input {f.name}; products never go "
                              "beside their inputs: choose a separate output folder", out)


class ProjectLock:
    """Exclusive use of an output folder while a command writes into it.

    An advisory lock (``flock``) on ``OUT/.tem-lock``, which also names the
    holder (process id, host, start time). The operating system releases it
    when the holder ends in any way (even ``kill -9``), so a stale lock of a
    dead process is simply taken over; :attr:`took_over` then names it.
    A second command into the same folder is refused with one line naming
    the holder. Entering also removes the temporary files of interrupted
    writes (``*.tem-part``), and leaving removes them again.
    """

    def __init__(self, root, command="tem"):
        self.root = Path(root)
        self.path = self.root / LOCK_NAME
        self.command = command
        self.took_over = ""
        self.cleaned = 0
        self._fd = None
        self._created = []

    def _holder(self) -> dict:
        with contextlib.suppress(OSError, ValueError, UnicodeDecodeError, RecursionError):
            info = json.loads(self.path.read_text(encoding="utf-8") or "{}")
            if isinstance(info, dict):
                return info
        return {}

    def __enter__(self):
        import fcntl

        from .atomic import clean_partials

        try:
            self._created = [p for p in [self.root, *self.root.parents] if not p.exists()]
            self.root.mkdir(parents=True, exist_ok=True)
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise input_error("--out", f"cannot use the folder ({exc.strerror})", self.root) from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            h = self._holder()
            raise input_error("--out", f"in use by {h.get('command', 'another tem command')} "
                              f"(pid {h.get('pid', '?')} on {h.get('host', '?')}, started "
                              f"{h.get('started_utc', '?')}); wait for it to finish or choose "
                              "another folder", self.root) from None
        old = self._holder()
        if old.get("pid") and old.get("pid") != os.getpid():
            self.took_over = (f"took over the lock of pid {old['pid']} (started "
                              f"{old.get('started_utc', '?')}), which ended without releasing it")
        info = {"pid": os.getpid(), "host": socket.gethostname(), "command": self.command,
                "started_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")}
        os.ftruncate(fd, 0)
        os.pwrite(fd, (json.dumps(info) + "\n").encode(), 0)
        self._fd = fd
        self.cleaned = clean_partials(self.root)
        return self

    def __exit__(self, *exc):
        import fcntl

        from .atomic import clean_partials

        clean_partials(self.root)
        with contextlib.suppress(OSError):
            os.ftruncate(self._fd, 0)
        fcntl.flock(self._fd, fcntl.LOCK_UN)
        os.close(self._fd)
        self._fd = None
        # a command that wrote nothing leaves no folder behind
        if self._created and [p.name for p in self.root.iterdir()] == [LOCK_NAME]:
            with contextlib.suppress(OSError):
                self.path.unlink()
                for p in self._created:
                    p.rmdir()
        return False
