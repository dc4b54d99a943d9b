"""Survey-scale throughput and memory: stack through invert on 1 and 2 dask workers.

Synthesises a survey of N stations on a grid (fictional: the Emberline
Plateau transmitter, a 1.5 km wire, with stations south of it from 300 m to
3 km away; short records: 40 s at 500 Hz, Ex and dBz/dt), then runs
``tem run --scheduler local --jobs W`` in a fresh subprocess for each case and
takes the summed elapsed time of the stack, gate, rhoa and invert stages
from run.json. Light settings keep the run in minutes (late-time apparent
resistivity only, 8-layer smooth inversion, 2 Occam iterations, the
sensitivity DOI (no reference inversions), no figures); the work per
station is the same in every case, so the ratios measure the back end, not
the physics. Two Occam iterations do not reach the target misfit, so the
stations are judged ``misfit`` and the run's exit status is 1, as it should
be. The run stops after the invert stage: a section or export through every
station of a grid is one column per station, a product whose size grows with
the survey by nature, so it is not part of the memory measure.

Prints one JSON line per case: ``{"case", "stations", "workers",
"stations_per_s", "speedup_over_1_worker", "peak_rss_mb_client",
"peak_rss_mb_worker", "client_cpu_s_per_station"}`` (the last: CPU seconds of
the client process, with the LocalCluster's scheduler in it, per station).
Targets (issue 14): speedup >= 1.8 on 2 workers at 1000 stations; client and
worker memory flat from 250 to 1000 stations.
Usage: ``python benchmarks/scale.py [--stations 250 1000] [--workers 1 2]``.
"""
from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

PROCESSING = """
[processing.stack]
estimator = "mean"
batches = 4

[processing.gate]
per_decade = 5.0

[processing.rhoa]
all_time = false

[processing.invert]
layers = 8
max_iter = 2
doi_method = "sensitivity"

"""

RUN = """
import json, resource, sys
from rich.console import Console
from tem.pipeline import run_pipeline
out = run_pipeline(sys.argv[1], sys.argv[2], jobs=int(sys.argv[3]), scheduler="local",
                   progress=False, figures=False, console=Console(stderr=True, quiet=True),
                   until="invert")
st = out.state
print(json.dumps({"exit": out.exit_status,
                  "elapsed": sum(st["stages"][s]["elapsed_s"] for s in ("stack", "gate", "rhoa", "invert")),
                  "client_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
                  "client_cpu_s": (lambda u: u.ru_utime + u.ru_stime)(
                      resource.getrusage(resource.RUSAGE_SELF)),
                  "worker_mb": st["last_run"].get("worker_peak_rss_mb")}))
"""


def grid_survey(folder: Path, n: int):
    """A survey of ``n`` stations on a grid south of the Emberline wire, and its models."""
    import tomli_w

    from tem.forward import LayeredModel
    from tem.survey import Channel, Station, replace, survey_to_dict
    from tem.synth import emberline_survey, synth_survey

    base, _ = emberline_survey(base_dir=folder, sample_rate=500.0, stations=["EM01"],
                               current_channel=False)
    nx = int(np.ceil(np.sqrt(n * 2.0)))
    ny = int(np.ceil(n / nx))
    xs = np.linspace(-4000.0, 4000.0, nx)
    ys = np.linspace(-300.0, -3000.0, ny) + 0.0
    stations, models = [], {}
    for k in range(n):
        x, y = float(xs[k % nx]), float(ys[k // nx])
        sid = f"G{k:04d}"
        rxs = (Channel("ex", files=(f"raw/{sid}/ex.npy",), sample_rate=500.0,
                        dipole=((x - 50.0, y), (x + 50.0, y))),
               Channel("dbzdt", files=(f"raw/{sid}/dbzdt.npy",), sample_rate=500.0,
                        coil_area=1.0e4))
        stations.append(Station(id=sid, x=x, y=y, z=1100.0, receivers=rxs))
        basalt = 900.0 + (x + 5500.0) / 11000.0 * 700.0
        models[sid] = LayeredModel(thickness=[20.0, basalt, 600.0],
                                   resistivity=[30.0, 500.0, 8.0, 2000.0])
    survey = replace(base, stations=stations, name=f"grid of {n} stations (fictional)")
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "survey.toml").write_text(tomli_w.dumps(survey_to_dict(survey)) + PROCESSING)
    synth_survey(survey, models, folder, seed=11, duration=40.0)
    return folder / "survey.toml"


def run_case(survey, project, workers):
    r = subprocess.run([sys.executable, "-c", RUN, str(survey), str(project), str(workers)],
                       capture_output=True, text=True, check=False)
    if r.returncode not in (0, 1):
        raise SystemExit(f"benchmark run failed: {r.stderr[-2000:]}")
    return json.loads(r.stdout.strip().splitlines()[-1])


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stations", type=int, nargs="+", default=[250, 1000])
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="tem-scale-") as tmp:
        for n in args.stations:
            survey = grid_survey(Path(tmp) / f"day{n}", n)
            base = None
            for w in args.workers:
                r = run_case(survey, Path(tmp) / f"p{n}_{w}", w)
                rate = n / r["elapsed"]
                base = rate if w == args.workers[0] else base
                print(json.dumps({"case": f"stack-to-invert-{n}-stations", "stations": n,
                                  "workers": w, "stations_per_s": round(rate, 3),
                                  "speedup_over_1_worker": round(rate / base, 3),
                                  "peak_rss_mb_client": round(r["client_mb"], 1),
                                  "peak_rss_mb_worker": r["worker_mb"],
                                  # the client's own CPU (with the in-process scheduler): on
                                  # 2 cores it competes with the 2 workers for the speed-up
                                  "client_cpu_s_per_station": round(r["client_cpu_s"] / n, 4),
                                  "backend": "dask.distributed LocalCluster, 1 thread per worker",
                                  "exit_status": r["exit"]}), flush=True)


if __name__ == "__main__":
    main()
