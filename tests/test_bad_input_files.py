"""Bad input found by trying damaged copies of a survey and of a models file by hand: each
gives one line naming the file and the field, exit status 2, no traceback, no hang, the
other stations finished and the raw folder untouched.

- a named pipe (FIFO) as a recording or as its sidecar: the read blocked for ever;
- a symbolic link loop as a recording: a RuntimeError traceback from resolving the path;
- an infinite sample in a float recording: counted as a clipped sample, the record stacked
  and the run exited 0; samples of 1e300 V: numpy overflow warnings and exit 0; bytes
  after the samples an .npy header promises: ignored;
- a models file with a layer's resistivity or top removed, tops out of order or a thickness
  that disagrees with the tops: accepted, and a layer vanished from the exports;
- a section depth step of a micrometre: a 7 TiB allocation and a MemoryError traceback.
"""
from __future__ import annotations

import hashlib
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from day_fixture import write_day

PROCESSING = """
[processing.stack]
estimator = "mean"
batches = 4
"""


@pytest.fixture(scope="module")
def day(tmp_path_factory):
    root = tmp_path_factory.mktemp("badfiles")
    return write_day(root / "day", ["EM05", "EM06"], PROCESSING, seed=7, duration=12.0).parent


def _digest(folder) -> dict:
    return {str(p): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(Path(folder).rglob("*")) if p.is_file()}


def _tem(*args, timeout=240):
    r = subprocess.run([sys.executable, "-m", "tem", *map(str, args)], capture_output=True,
                       text=True, timeout=timeout)
    return r.returncode, r.stdout, r.stderr


def _fifo(path):
    path.unlink()
    os.mkfifo(path)


def _loop(path):
    path.unlink()
    path.symlink_to(path.name)          # a link to itself


def _huge(path):
    np.save(path, np.load(path).astype(np.float64) * 1e300)


def _trailing(path):
    with open(path, "ab") as fh:
        fh.write(b"\0" * 1000)


def _infinite(path):
    a = np.load(path).astype(np.float64)
    a[a.size // 2] = np.inf
    np.save(path, a)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="POSIX named pipes")
@pytest.mark.parametrize("edit, name, message", [
    (_fifo, "ex.npy", "file: not a regular file"),
    (_fifo, "ex.toml", "sidecar: not a regular file"),
    (_loop, "ex.npy", "file: cannot read"),
    (_infinite, "ex.npy", "samples: NaN or infinite value at sample"),
    (_huge, "ex.npy", "samples: "),
    (_trailing, "ex.npy", "data: 1000 bytes after the last of the"),     # then "<value> V at sample i, beyond any receiver's input"
])
def test_a_recording_that_cannot_be_read_fails_its_station_in_one_line(day, tmp_path, edit, name,
                                                                       message):
    copy = tmp_path / "day"
    shutil.copytree(day, copy, symlinks=True)
    target = copy / "raw" / "EM06" / name
    edit(target)
    before = _digest(copy)
    out = tmp_path / "o"
    # a subprocess with a time limit: the FIFO used to block the read for ever
    rc, stdout, err = _tem("run", copy / "survey.toml", "--out", out, "--until", "stack",
                           "--jobs", "1", "--no-progress", "--no-figures")
    assert rc == 2, (stdout, err)
    assert "Traceback" not in err, err
    assert f"{target}: {message}" in err, err
    assert edit is not _huge or "beyond any receiver's input (1e+06 V)" in err, err
    assert "Warning" not in err, err
    assert (out / "stacked" / "EM05.nc").is_file()          # the other station finished
    assert not (out / "stacked" / "EM06.nc").exists()
    assert _digest(copy) == before


@pytest.fixture(scope="module")
def models_file(tmp_path_factory):
    from profile_fixture import synthetic_models
    from tem.io.models import write_models

    return write_models(synthetic_models(), tmp_path_factory.mktemp("models") / "models.nc")


def _hole(ds):
    ds["resistivity"].values[0, 1] = np.nan


def _last_removed(ds):
    assert ds.sizes["layer"] == 30 and np.isfinite(ds["resistivity"].values[0]).all()
    ds["resistivity"].values[0, 29] = np.nan       # the half-space: its top stays


def _tops_swapped(ds):
    ds["depth_top"].values[0, 2] = ds["depth_top"].values[0, 3] + 1e4


def _thickness(ds):
    ds["thickness"].values[0, 1] *= 3.0


@pytest.mark.parametrize("edit, field, message", [
    (_hole, "resistivity", "layer 1 has no resistivity but a layer below it has one"),
    (_last_removed, "depth_top", "layer 29 has a top but no resistivity"),
    (_tops_swapped, "depth_top", "layer tops not increasing with depth (layer 2 at"),
    (_thickness, "thickness", "layer 1 is"),
])
def test_a_models_file_whose_layers_are_not_one_column_is_refused(models_file, tmp_path, edit,
                                                                  field, message):
    import xarray as xr

    ds = xr.load_dataset(models_file, engine="h5netcdf")
    edit(ds)
    bad = tmp_path / "models.nc"
    ds.to_netcdf(bad, engine="h5netcdf")
    sid = str(ds["station"].values[0])
    rc, stdout, err = _tem("section", bad, "--out", tmp_path / "s", "--no-progress", "--no-figures")
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1, err
    assert f"{bad}: {field}: station {sid}: {message}" in err, err
    assert not (tmp_path / "s").exists()
    # the reader every product goes through (section, export, report) refuses it the same way
    from tem.errors import TemInputError
    from tem.io.models import read_models

    with pytest.raises(TemInputError, match=f"{field}: station {sid}: "):
        read_models(bad)


def test_a_depth_step_too_fine_for_memory_is_a_range_error(models_file, tmp_path):
    rc, stdout, err = _tem("section", models_file, "--out", tmp_path / "s", "--depth-step", "1e-6",
                           "--max-depth", "1e6", "--no-progress", "--no-figures")
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1, err
    assert "depth_step: " in err and "choose a larger depth_step" in err, err
    assert not (tmp_path / "s").exists()


def test_a_station_that_failed_stack_has_its_evening_verdict_everywhere(day, tmp_path):
    # a station whose recording was refused at stack is judged by the gate stage ("check",
    # not processed) in qc/stations.csv; the terminal table showed "-" and run.json had no
    # qc_verdict (found by an independent evening-QC review)
    import csv
    import json

    copy = tmp_path / "day"
    shutil.copytree(day, copy, symlinks=True)
    _infinite(copy / "raw" / "EM06" / "ex.npy")
    out = tmp_path / "o"
    rc, stdout, err = _tem("evening", copy / "survey.toml", "--out", out, "--jobs", "1",
                           "--no-progress", "--no-figures")
    assert rc == 2, (stdout, err)
    text = (out / "qc" / "stations.csv").read_text().splitlines()
    rows = {r["station"]: r for r in csv.DictReader(text)}
    assert rows["EM06"]["verdict"] == "check" and "not processed" in rows["EM06"]["reasons"]
    st = json.loads((out / "run.json").read_text())["stations"]["EM06"]
    assert st["failed_stage"] == "stack" and st["qc_verdict"] == "check"
    assert st["qc_reasons"] == rows["EM06"]["reasons"]
    line = next(ln for ln in stdout.splitlines() if ln.startswith(("check:", "re-occupy:")))
    assert "EM06" in line, stdout
