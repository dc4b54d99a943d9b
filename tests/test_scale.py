"""Survey-scale runs that lose nothing (issue 14): resume by content, interruption, locks,
a full disk, the dask.distributed back end.

A small synthetic day (three Emberline Plateau stations, fictional) runs
uninterrupted once (the reference); every other run must end with the same
products (tests/products_compare.py). Processes are real: ``tem run`` in a
subprocess, killed with SIGKILL at a stage, then rerun.
"""
from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from day_fixture import write_day
from products_compare import assert_same_products
from tem.cli import main

PROCESSING = """
[processing.stack]
estimator = "mean"
batches = 8

[processing.gate]
per_decade = 4.0

[processing.rhoa]
all_time = false

[processing.invert]
layers = 8
max_iter = 2
# 2 Occam iterations do not fit these data (chi2 25-100); these tests are about processes
# and products, not fits: tolerances no model misses keep the exit status about them
verdict_tolerance = 1e6
verdict_stall_margin = 1e6

[processing.section]
depth_step = 50.0
formats = ["png"]
"""

STATIONS = ["EM04", "EM06", "EM08"]


@pytest.fixture(scope="module")
def day(tmp_path_factory):
    root = tmp_path_factory.mktemp("scale")
    survey = write_day(root / "day", STATIONS, PROCESSING, seed=5, duration=24.0)
    ref = root / "reference"
    assert main(["run", str(survey), "--out", str(ref), "--jobs", "2",
                 "--no-progress"]) == 0
    return survey, ref


def _tem(*args, capture=True, **kw):
    out = subprocess.PIPE if capture else subprocess.DEVNULL
    return subprocess.Popen([sys.executable, "-m", "tem", *map(str, args)],
                            stdout=out, stderr=out, text=True, **kw)


def _wait_for(pred, proc, timeout=240.0):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if pred():
            return True
        if proc.poll() is not None:
            return False
        time.sleep(0.01)
    return False


def _descendants(pid):
    import psutil

    try:
        return psutil.Process(pid).children(recursive=True)
    except psutil.NoSuchProcess:
        return []


def _partials(root):
    return [p for p in Path(root).rglob("*.tem-part")]


def _kill_when(proc, probe):
    """SIGKILL ``proc`` once ``probe()`` holds; asserts no child of it lives 5 s later."""
    import psutil

    assert _wait_for(probe, proc), "the run ended before the kill point"
    children = _descendants(proc.pid)
    proc.send_signal(signal.SIGKILL)
    proc.wait()

    def living():
        alive = []
        for c in children:
            try:
                if c.is_running() and c.status() != psutil.STATUS_ZOMBIE:
                    alive.append(c)
            except psutil.NoSuchProcess:
                pass
        return alive

    deadline = time.monotonic() + 5.0      # no worker outlives its parent by more than 5 s
    while living() and time.monotonic() < deadline:
        time.sleep(0.05)
    alive = living()
    assert not alive, [c.cmdline() for c in alive]


def test_run_killed_during_stack_invert_and_export_resumes_to_identical_products(day, tmp_path):
    # one project killed three times (SIGKILL during the stack stage, then during the rerun's
    # invert stage, then during the next rerun's export stage), each rerun resuming what the
    # killed one left: the last rerun must end with the uninterrupted run's products and no
    # temporary file (one chain costs one run, three separate projects cost three)
    survey, ref = day
    proj = tmp_path / "p"
    probes = {"stack": lambda: len(list((proj / "stacked").glob("*.nc"))) >= 1,
              "invert": lambda: len(list((proj / "figures" / "stations").glob("*_fit.png"))) >= 1,
              "export": lambda: (proj / "exports").is_dir()}
    for point in ("stack", "invert", "export"):
        proc = _tem("run", survey, "--out", proj, "--jobs", "2", "--no-progress", capture=False)
        _kill_when(proc, probes[point])
        if point == "stack":
            assert not (proj / "gated").is_dir() or not any((proj / "gated").iterdir())
    rerun = _tem("run", survey, "--out", proj, "--jobs", "2", "--no-progress")
    out, err = rerun.communicate(timeout=600)
    assert rerun.returncode == 0, err
    assert "reused" in out
    assert not _partials(proj)
    assert_same_products(ref, proj, rtol=1e-9)


def test_rerun_reuses_unchanged_products_and_redoes_edited_ones(day, tmp_path, capsys):
    import shutil

    import xarray as xr

    survey, ref = day
    proj = tmp_path / "p"
    shutil.copytree(ref, proj)
    capsys.readouterr()
    assert main(["run", str(survey), "--out", str(proj), "--jobs", "1", "--no-progress"]) == 0
    out = capsys.readouterr().out
    assert "stack: reused 3 of 3 stations' products" in out
    state = json.loads((proj / "run.json").read_text())
    assert state["stages"]["invert"]["reused"] is True
    assert state["stages"]["section"]["reused"] is True
    # a gated file edited by hand: reported by --from invert, redone by a full rerun
    g = proj / "gated" / "EM06.nc"
    ds = xr.load_dataset(g, engine="h5netcdf")
    ds["value"][0, 3] = 2 * ds["value"][0, 3]
    ds.to_netcdf(g, engine="h5netcdf")
    assert main(["run", str(survey), "--out", str(proj), "--from", "invert", "--jobs", "1",
                 "--no-progress"]) == 0
    captured = capsys.readouterr()
    assert "gated/EM06.nc changed since the gate stage wrote it" in captured.err
    assert "gated/EM06.nc changed since the gate stage wrote it" in captured.out
    assert main(["run", str(survey), "--out", str(proj), "--jobs", "1", "--no-progress"]) == 0
    out = capsys.readouterr().out
    # the rerun redoes it, and keeps the edited file (nothing lost)
    kept = sorted((proj / "edited").glob("*/gated/EM06.nc"))
    assert len(kept) == 1 and xr.load_dataset(kept[0], engine="h5netcdf")["value"].equals(
        ds["value"])
    assert (f"gated/EM06.nc changed since the gate stage wrote it (edited by hand?); kept as "
            f"edited/{kept[0].parent.parent.name}/gated/EM06.nc, and redone") in out
    shutil.rmtree(proj / "edited")
    assert_same_products(ref, proj, rtol=1e-9)


def test_redone_stage_keeps_a_hand_edited_product(day, tmp_path, capsys):
    # --from redoes a stage whatever its record says: a models table edited by hand was
    # replaced without a word (found by an independent crash/resume check); it is kept
    import shutil

    survey, ref = day
    proj = tmp_path / "p"
    shutil.copytree(ref, proj)
    table = proj / "models" / "models.csv"
    edited = table.read_text().replace("EM06", "EM06 (picked by hand)", 1)
    table.write_text(edited)
    untouched = (proj / "models" / "fit.csv").read_bytes()
    capsys.readouterr()
    assert main(["run", str(survey), "--out", str(proj), "--from", "invert", "--jobs", "1",
                 "--no-progress"]) == 0
    out = capsys.readouterr().out
    kept = sorted((proj / "edited").glob("*/models/models.csv"))
    assert len(kept) == 1 and kept[0].read_text() == edited
    note = (f"models/models.csv changed since the invert stage wrote it (edited by hand?); "
            f"kept as edited/{kept[0].parent.parent.name}/models/models.csv, and redone")
    assert note in out
    state = json.loads((proj / "run.json").read_text())
    assert note in state["stages"]["invert"]["notes"]
    # the stage's other products were not edited: redone in place, nothing else kept;
    # the redone products are the reference run's (to round-off: the reference ran on 2
    # worker processes, this rerun in one)
    assert [p.name for p in (proj / "edited").rglob("*") if p.is_file()] == ["models.csv"]
    assert "picked by hand" not in (proj / "models" / "models.csv").read_text()
    assert (proj / "models" / "fit.csv").read_text().splitlines()[0] == \
        untouched.decode().splitlines()[0]
    shutil.rmtree(proj / "edited")
    assert_same_products(ref, proj, rtol=1e-9)


def test_hand_edited_qc_table_is_reported_and_kept(day, tmp_path, capsys):
    # qc/stations.csv is the gate stage's survey-wide product (no station owns it): an
    # edited verdict was used by --from invert and overwritten by a rerun without a word
    import shutil

    survey, ref = day
    proj = tmp_path / "p"
    shutil.copytree(ref, proj)
    table = proj / "qc" / "stations.csv"
    original = table.read_text()
    head, first, *rest = original.splitlines(keepends=True)
    sid, verdict, tail = first.split(",", 2)
    edited = "".join([head, f"{sid},{'reoccupy' if verdict != 'reoccupy' else 'good'},{tail}",
                      *rest])
    table.write_text(edited)
    capsys.readouterr()
    assert main(["run", str(survey), "--out", str(proj), "--from", "invert", "--jobs", "1",
                 "--no-progress"]) == 0
    out = capsys.readouterr().out
    assert "qc/stations.csv changed since the gate stage wrote it (edited by hand?); used as " \
        "it is now" in out
    assert main(["run", str(survey), "--out", str(proj), "--jobs", "1", "--no-progress"]) == 0
    out = capsys.readouterr().out
    kept = sorted((proj / "edited").glob("*/qc/stations.csv"))
    assert len(kept) == 1 and kept[0].read_text() == edited
    assert (f"qc/stations.csv changed since the gate stage wrote it (edited by hand?); kept as "
            f"edited/{kept[0].parent.parent.name}/qc/stations.csv, and redone") in out
    assert table.read_text() == original


def test_second_run_into_the_same_project_is_refused(day, tmp_path, capsys):
    survey, _ = day
    proj = tmp_path / "p"
    first = _tem("run", survey, "--out", proj, "--jobs", "1", "--no-progress", capture=False)
    assert _wait_for(lambda: (proj / ".tem-lock").is_file() and
                     (proj / ".tem-lock").read_text().strip(), first, 60)
    capsys.readouterr()
    assert main(["run", str(survey), "--out", str(proj), "--no-progress"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and f"pid {first.pid}" in err and "started 20" in err
    first.send_signal(signal.SIGKILL)
    first.wait()
    # the lock of a dead process is taken over, and the run completes
    assert main(["run", str(survey), "--out", str(proj), "--jobs", "1", "--no-progress"]) == 0
    captured = capsys.readouterr()
    assert f"took over the lock of pid {first.pid}" in captured.err


def test_full_disk_is_one_line_and_leaves_no_half_product(day, tmp_path):
    import resource

    import xarray as xr

    survey, _ = day
    proj = tmp_path / "p"

    def limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (200_000, 200_000))

    proc = _tem("run", survey, "--out", proj, "--jobs", "2", "--no-progress", preexec_fn=limit)
    out, err = proc.communicate(timeout=600)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert proc.returncode == 1, err
    assert len(lines) == 1 and "cannot write: File too large" in lines[0], err
    assert not _partials(proj)
    # the run record says which stage stopped and why, and the exit status
    state = json.loads((proj / "run.json").read_text())
    stopped = state["last_run"]["stopped"]
    assert state["last_run"]["exit_status"] == 1 and "could not write its products" in stopped
    stage = stopped.split(":")[0]
    assert state["stages"][stage]["failed"] == stopped
    for f in proj.rglob("*.nc"):                        # whatever exists is whole
        xr.load_dataset(f, engine="h5netcdf")


def test_local_cluster_gives_the_same_products(day, tmp_path):
    survey, ref = day
    proj = tmp_path / "p"
    assert main(["run", str(survey), "--out", str(proj), "--scheduler", "local", "--jobs", "2",
                 "--no-progress"]) == 0
    state = json.loads((proj / "run.json").read_text())
    assert state["last_run"]["scheduler"] == "local"
    assert_same_products(ref, proj, rtol=1e-9)


def monitor_length(dask_worker):
    return dask_worker.monitor.quantities["time"].maxlen


def scheduler_monitor_length(dask_scheduler):
    return dask_scheduler.monitor.quantities["time"].maxlen


def test_two_local_clusters_side_by_side_and_no_worker_profiler():
    # two runs with --scheduler local at once (or beside a user's own dask cluster) must not
    # fight over a fixed HTTP port (a warning, i.e. an error under this suite's settings), and
    # the workers' statistical profiler is off: it kept about 115 kB of call-site trees per
    # station task (measured with gc on a worker), so worker memory grew with the survey
    # (docs/scaling.md)
    import dask

    from tem.pipeline.cluster import LOCAL_QUIET, dask_client, profiling_note

    def profiling():
        return dask.config.get("distributed.worker.profile.enabled")

    with dask_client("local", 1) as a, dask_client("local", 1) as b:
        assert a.scheduler_info()["address"] != b.scheduler_info()["address"]
        assert list(a.run(profiling).values()) == [False]
        assert profiling_note(a) == ""
        # the system monitors (the scheduler's is in this process) keep two minutes of
        # samples, not dask's hour (about 180 B per 0.5 s sample, traced: docs/scaling.md)
        assert list(a.run(monitor_length).values()) == [240]
        assert a.run_on_scheduler(scheduler_monitor_length) == 240
        # and their event loops' periodic work is spaced out (it competes with the workers
        # for a small machine's cores; docs/scaling.md)
        for key, value in LOCAL_QUIET.items():
            assert list(a.run(lambda key=key: dask.config.get(key)).values()) == [value]
            assert a.run_on_scheduler(lambda key=key: dask.config.get(key)) == value
        assert a.submit(sum, [1, 2]).result() == 3 and b.submit(sum, [3, 4]).result() == 7


def test_workers_share_the_cores_instead_of_each_taking_all():
    # numba starts one thread per core in every process; N workers on N cores then ran N
    # threads each where the forward runs many models at once (the few-layer population):
    # N^2 threads on N cores (docs/scaling.md). One thread per core overall: common
    # practice, no source.
    import os

    import numba

    from tem.pipeline.cluster import dask_client
    from tem.runtime import process_pool

    share = max(1, len(os.sched_getaffinity(0)) // 2)
    pool = process_pool(2)
    try:
        assert {pool.submit(numba.get_num_threads).result() for _ in range(4)} == {share}
    finally:
        pool.shutdown()
    # on a cluster numba counts threads per thread: each task caps them where it runs
    from tem.runtime import _guarded_batch
    for jobs in (1, 2):
        with dask_client("local", jobs) as client:
            futs = [client.submit(_guarded_batch, numba.get_num_threads, [(sid, ())], None,
                                  client.worker_threads, pure=False) for sid in "abcd"]
            got = {n for out in client.gather(futs) for n in out}
            assert got == {max(1, len(os.sched_getaffinity(0)) // jobs)}


def test_workers_with_the_profiler_are_named_in_a_note():
    # a cluster started by hand keeps dask's default (profiler on): tem run says so
    from distributed import Client, LocalCluster

    from tem.pipeline.cluster import profiling_note

    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None,
                      scheduler_kwargs={"dashboard_address": ":0"}) as cluster, \
            Client(cluster) as client:
        note = profiling_note(client)
    assert note.startswith("1 dask worker(s) run the statistical profiler")
    assert "DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED=False" in note


def test_large_block_threshold_is_set_unless_the_user_set_one():
    # glibc raises its mmap threshold to the size of each mapped block freed (mallopt(3),
    # "M_MMAP_THRESHOLD": dynamic unless set), so transient buffers come from a heap that never
    # shrinks; tem run fixes it (docs/scaling.md has the measured effect on the client's heap;
    # whether one block is mapped depends on the heap's free chunks, so it is not tested here),
    # and keeps a threshold the user set in the environment. Fresh processes: the setting is
    # process-wide
    import ctypes
    import os

    if not sys.platform.startswith("linux"):
        pytest.skip("glibc's malloc on Linux only")
    try:
        ctypes.CDLL("libc.so.6").mallopt
    except (OSError, AttributeError):
        pytest.skip("not glibc")
    code = "from tem.runtime import return_large_blocks; print(return_large_blocks())"
    env = {k: v for k, v in os.environ.items() if k != "MALLOC_MMAP_THRESHOLD_"}
    out = [subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=e, timeout=60).stdout.strip()
           for e in (env, dict(env, MALLOC_MMAP_THRESHOLD_="65536"))]
    assert out == ["True", "False"]


def _square(sid, x):
    """A station task for the batching test: fails on a negative input."""
    from tem.runtime import StationOutcome

    if x < 0:
        raise ValueError(f"negative input {x}")
    return StationOutcome(sid, "ok", info={"y": x * x})


def test_cluster_tasks_carry_several_stations_and_fail_one_station_only():
    # on a cluster a task carries up to 4 stations (each task costs the client's scheduler
    # about 10 ms of CPU, docs/scaling.md); the outcomes are the same, station by station, and
    # a station that fails inside a batch fails alone
    from tem.pipeline.cluster import dask_client
    from tem.runtime import _run_windowed, batch_size

    class TwoThreads:
        def scheduler_info(self):
            return {}

        def nthreads(self):
            return {"a": 1, "b": 1}

    assert [batch_size(TwoThreads(), n) for n in (1, 15, 16, 40, 250, 1000)] == [1, 1, 1, 2, 4, 4]
    assert batch_size(object(), 1000) == 1                      # a local process pool
    todo = [(f"S{k}", (f"S{k}", k - 3)) for k in range(11)]
    with dask_client("local", 2) as client:
        runs = {}
        for batch in (1, 3):
            seen = []
            _run_windowed(client, _square, todo, None, seen.append, batch=batch)
            runs[batch] = {oc.station: (oc.status, oc.info.get("y"), oc.message) for oc in seen}
    assert runs[1] == runs[3]
    assert sorted(runs[3]) == sorted(sid for sid, _ in todo)
    assert runs[3]["S5"] == ("ok", 4, "")
    failed = {sid for sid, (status, _, _) in runs[3].items() if status == "failed"}
    assert failed == {"S0", "S1", "S2"}
    assert runs[3]["S0"][2] == "ValueError: negative input -3"
