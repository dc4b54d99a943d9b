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


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    """A three-station day run through the whole chain (figures on: the report draws them):
    (survey file, project)."""
    root = tmp_path_factory.mktemp("finished")
    survey = write_day(root / "day", ["EM04", "EM06", "EM08"], PROCESSING, seed=5,
                       duration=24.0)
    out = root / "p"
    rc, stdout, err = _tem("run", survey, "--out", out, "--jobs", "2", "--no-progress",
                           timeout=600)
    assert rc in (0, 1), (stdout, err)
    assert (out / "report.html").is_file()
    return survey, out


def _with_truncated(finished, tmp_path, rel, size):
    """(survey, a copy of the finished project with its file ``rel`` cut to ``size`` bytes)."""
    survey, done = finished
    proj = tmp_path / "p"
    shutil.copytree(done, proj)
    f = proj / rel
    f.write_bytes(f.read_bytes()[:size])
    return survey, proj


def test_one_unreadable_gated_file_costs_its_station_not_the_report(finished, tmp_path):
    # a truncated gated file failed its station at invert, then the report stage refused the
    # whole project for its QC figures: the run stopped without a summary and the earlier
    # report, showing the station fitted, stayed beside products without it (found by an
    # independent review of the products)
    import json

    survey, proj = _with_truncated(finished, tmp_path, "gated/EM06.nc", 3000)
    rc, stdout, err = _tem("run", survey, "--out", proj, "--from", "invert",
                           "--jobs", "1", "--no-progress", timeout=600)
    assert rc == 2, (stdout, err)
    assert "Traceback" not in err
    assert "invert: station EM06 failed" in err and "EM06.nc" in err
    report = (proj / "report.html").read_text()
    assert "Station EM06 failed at stage invert" in report
    assert "left out of the QC figures" in report and "EM06.nc" in report
    state = json.loads((proj / "run.json").read_text())
    assert not state["stages"]["report"]["failed"]
    assert state["last_run"]["failed"] == ["EM06"] and state["last_run"]["exit_status"] == 2
    # the other station's products are all there
    assert sorted(p.stem for p in (proj / "exports" / "las").glob("*.las")) == ["EM04", "EM08"]
    # the station without a model is named in the products that interpolate across it or
    # leave it out (the section said nothing and the SEG-Y header said "all stations fitted")
    import segyio
    import xarray as xr
    for f in (proj / "models" / "models.nc", proj / "sections" / "section.nc"):
        with xr.open_dataset(f, engine="h5netcdf") as ds:
            assert list(json.loads(ds.attrs["stations_without_model"])) == ["EM06"], f
    sgy = sorted((proj / "exports").glob("*.sgy"))
    assert sgy
    for f in sgy:
        with segyio.open(f, ignore_geometry=True) as sg:
            text = segyio.tools.wrap(sg.text[0])
        assert "NO MODEL (NOT IN THE SECTION): EM06" in text, (f, text)
        assert "ALL STATIONS FITTED" not in text
    assert "export: no model of 1 station(s), so no LAS file" in stdout and "EM06 (failed " \
        "invert" in stdout


def test_a_run_that_stops_leaves_no_earlier_report_and_says_where(finished, tmp_path):
    # a stage refusing its input stopped the run with the error line alone, and the earlier
    # run's report stayed, describing products the run had changed
    import json

    survey, proj = _with_truncated(finished, tmp_path, "models/models.nc", 2000)
    rc, stdout, err = _tem("run", survey, "--out", proj, "--from", "section",
                           "--jobs", "1", "--no-progress")
    assert rc == 2, (stdout, err)
    assert "Traceback" not in err and err.strip().splitlines()[-1].count("models.nc") >= 1
    assert "stopped: section: refused its input" in stdout       # the summary, before the error
    assert "EM04" in stdout and "exit status 2" in stdout
    assert not (proj / "report.html").exists()
    state = json.loads((proj / "run.json").read_text())
    assert state["last_run"]["stopped"].startswith("section: refused its input")
    assert "not_fitted" in state["last_run"] and "reoccupy" in state["last_run"]


def test_a_models_file_with_a_nan_chi2_or_doi_is_refused(models_file, tmp_path):
    # a NaN chi-square was exported as "CHI2 nan" beside "FIT FITTED", and a NaN DOI left
    # the section unveiled to its bottom (independent review of the products)
    import xarray as xr

    for field in ("chi2", "doi"):
        with xr.open_dataset(models_file, engine="h5netcdf") as ds:
            ds = ds.load()
        ds[field].values[1] = np.nan
        bad = tmp_path / f"{field}.nc"
        ds.to_netcdf(bad, engine="h5netcdf")
        rc, _, err = _tem("section", bad, "--out", tmp_path / f"s_{field}", "--no-progress")
        assert rc == 2 and f"{bad.name}: {field}: " in err and err.count("\n") == 1, err
        assert not (tmp_path / f"s_{field}").exists()
