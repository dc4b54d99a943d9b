"""tem's forward engine at an earlier commit against the working tree, in one process.

    python benchmarks/forward_compare.py COMMIT

Extracts ``tem/`` of COMMIT (git archive) into a temporary folder as package
``temold`` and times ``predict`` and ``jacobian`` of both on the soundings of
benchmarks/forward.py (31 gates, 6 nodes each; 4-, 5- and 30-layer models;
wire Ex, wire dBz/dt, loop dBz/dt), calls interleaved (``_common.alternate``)
so that load from other users of the machine affects both alike. One JSON
line per case: CPU ms, the ratios, and the largest change of the prediction
relative to the curve's peak.
"""
import os

for _v in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "OMP_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import io  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tarfile  # noqa: E402
import tempfile  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import forward as fw  # noqa: E402
from _common import alternate, emit  # noqa: E402

import tem.forward as new  # noqa: E402


def load_old(commit, tmp):
    data = subprocess.run(["git", "-C", str(HERE.parent), "archive", commit, "tem"],
                          check=True, capture_output=True).stdout
    with tarfile.open(fileobj=io.BytesIO(data)) as tar:
        tar.extractall(tmp, filter="data")
    (Path(tmp) / "tem").rename(Path(tmp) / "temold")
    sys.path.insert(0, tmp)
    import temold.forward as old
    return old


def sim_for(mod, geom, comp):
    src = mod.Wire(fw.A, fw.B) if geom == "wire" else mod.PolygonLoop(fw.LOOP)
    pos = fw.RX if geom == "wire" else (0.0, 0.0)
    return mod.Simulation(src, [mod.Receiver(comp, pos)], gates=(fw.G0, fw.G1),
                          gate_nodes=fw.NODES)


def main():
    commit = sys.argv[1] if len(sys.argv) > 1 else "HEAD"
    with tempfile.TemporaryDirectory() as tmp:
        old = load_old(commit, tmp)
        for geom, comp in fw.CASES:
            sims = {"before": (old, sim_for(old, geom, comp)), "after": (new, sim_for(new, geom, comp))}
            for mname, m in fw.models().items():
                ms = {k: mod.LayeredModel(m.thickness, m.resistivity) for k, (mod, _) in sims.items()}
                fns = {}
                for k, (_, sim) in sims.items():
                    fns[f"{k}_predict"] = (lambda sim=sim, mm=ms[k]: sim.predict(mm))
                    fns[f"{k}_jacobian"] = (lambda sim=sim, mm=ms[k]: sim.jacobian(mm))
                a = sims["after"][1].predict(ms["after"])
                b = sims["before"][1].predict(ms["before"])
                t = alternate(fns)
                emit({"case": f"{mname}_{geom}_{comp}", "before": commit,
                      **{f"{k}_ms": round(v * 1e3, 3) for k, v in t.items()},
                      "jac_over_fwd_before": round(t["before_jacobian"] / t["before_predict"], 2),
                      "jac_over_fwd_after": round(t["after_jacobian"] / t["after_predict"], 2),
                      "predict_speedup": round(t["before_predict"] / t["after_predict"], 2),
                      "jacobian_speedup": round(t["before_jacobian"] / t["after_jacobian"], 2),
                      "max_abs_change_over_peak":
                          float(f"{np.max(np.abs(a - b)) / np.max(np.abs(b)):.1e}")})


if __name__ == "__main__":
    main()
