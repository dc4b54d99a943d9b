"""Emberline Plateau: full synthetic days through stack and gate, scored against the truth.

For each seed, writes a 12-station, 15-minute-per-station raw day (one noisy
station, one dead channel) into a temporary folder (or --out), stacks and
gates it, and compares the gated values with the forward engine's gated
response (same windows and shape). The normalised residuals
z = (gate - truth) / error of the usable gates are summarised:

* pooled: sd of z and the share within 2 errors (honest errors: about 1 and
  95 %), per channel (sd, mean, share) and per gate (rms over channels);
* ``before``: the same stacks with errors from 32 batches without the
  correlation correction (the estimator before docs/stacking.md section 5
  was changed), for comparison in the same run;
* the rms error of the robust default against the plain mean.

Usage: python examples/emberline/check_stack.py [--out DIR] [--seeds 2025,1,2]
       [--duration S] [--shape boxcar|taper]
Prints one JSON line per seed and one for all seeds pooled.
"""
from __future__ import annotations

import argparse
import json
import shutil
import tempfile
from pathlib import Path

import numpy as np

from tem.forward import Simulation
from tem.gate.windows import GateTable, gate_matrix, gate_stacked
from tem.io.stacked import stacked_dataset
from tem.stack import StackSettings, stack_station
from tem.stack.batchvar import linear_variance
from tem.forward.sounding import survey_receiver, survey_source, survey_waveform
from tem.synth import emberline_survey, synth_survey


def score_day(out, seed, duration, shape, verbose):
    sv, models = emberline_survey(base_dir=out)
    synth_survey(sv, models, out, seed=seed, duration=duration, noisy_station="EM09",
                 dead_channel=("EM04", "ex"))
    z = {"after": [], "before": []}
    rms = {"huber": [], "mean": []}
    rows, gates = [], []
    for st in sv.stations:
        chans, timing = stack_station(sv, st, StackSettings())
        old, _ = stack_station(sv, st, StackSettings(batches=32))
        mean, _ = stack_station(sv, st, StackSettings(estimator="mean"))
        ds = stacked_dataset(sv, st, chans, timing, StackSettings(), [])
        g = gate_stacked(ds, 9.0, shape, None, None, 2.0)
        table = GateTable(g["gate_open"].values, g["gate_close"].values, shape)
        W = gate_matrix(ds["time"].values, table)
        for ci, c in enumerate(chans):
            if c.dead:
                continue
            sim = Simulation(survey_source(sv.transmitter), [survey_receiver(c.receiver, st)],
                             gates=(table.open, table.close), gate_shape=shape,
                             waveform=survey_waveform(sv.transmitter), response="waveform")
            st_truth = sim.predict(models[st.id])[0]
            u = g["usable"].values[ci]
            v = g["value"].values[ci]
            e_new = g["error"].values[ci]
            r_old = old[ci].result
            e_old = np.sqrt(linear_variance(W, r_old.influence, ()))
            v_old = W @ r_old.value
            za = ((v - st_truth) / e_new)[u]
            zb = ((v_old - st_truth) / e_old)[u]
            z["after"].append(za)
            z["before"].append(zb)
            gates.append(np.where(u, (v - st_truth) / e_new, np.nan))
            tt = W @ mean[ci].result.value
            for est, vv in (("huber", v), ("mean", tt)):
                rms[est].append(float(np.sqrt(np.mean((vv - st_truth) ** 2))
                                      / np.sqrt(np.mean(st_truth ** 2))))
            rows.append({"channel": f"{st.id} {c.receiver.component}", "usable": int(u.sum()),
                         "sd_before": round(float(zb.std()), 2),
                         "sd_after": round(float(za.std()), 2),
                         "mean_after": round(float(za.mean()), 2),
                         "within2_after": round(float(np.mean(np.abs(za) < 2)), 2)})
    if verbose:
        for r in rows:
            print("  %(channel)-11s usable %(usable)2d  sd before %(sd_before).2f after "
                  "%(sd_after).2f  mean %(mean_after)+.2f  within 2 %(within2_after).2f" % r)
        gz = np.array(gates)
        tc = np.sqrt(np.asarray(table.open) * np.asarray(table.close))
        print("  per gate (rms of z over channels, after):")
        print("   " + " ".join(f"{t * 1e3:.3g}ms:{np.sqrt(np.nanmean(col ** 2)):.2f}"
                               for t, col in zip(tc, gz.T) if np.isfinite(col).any()))
    return z, rms


def summary(z):
    z = np.concatenate(z)
    return {"gates": int(z.size), "sd": round(float(np.sqrt(np.mean(z ** 2))), 3),
            "within_2": round(float(np.mean(np.abs(z) < 2)), 3)}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out")
    ap.add_argument("--seeds", default="2025")
    ap.add_argument("--duration", type=float, default=900.0)
    ap.add_argument("--shape", default="boxcar", choices=("boxcar", "taper"))
    ap.add_argument("--quiet", action="store_true")
    args = ap.parse_args()
    seeds = [int(s) for s in args.seeds.split(",")]
    pooled = {"after": [], "before": []}
    for seed in seeds:
        out = (Path(args.out) / str(seed) if args.out
               else Path(tempfile.mkdtemp(prefix="emberline-")))
        try:
            if not args.quiet:
                print(f"seed {seed}:")
            z, rms = score_day(out, seed, args.duration, args.shape, not args.quiet)
        finally:
            if not args.out:
                shutil.rmtree(out, ignore_errors=True)
        for k in pooled:
            pooled[k] += z[k]
        print(json.dumps({"seed": seed, "after": summary(z["after"]),
                          "before": summary(z["before"]),
                          "rel_rms_huber_median": round(float(np.median(rms["huber"])), 5),
                          "rel_rms_mean_median": round(float(np.median(rms["mean"])), 5)}),
              flush=True)
    if len(seeds) > 1:
        print(json.dumps({"seeds": seeds, "after": summary(pooled["after"]),
                          "before": summary(pooled["before"])}))


if __name__ == "__main__":
    main()
