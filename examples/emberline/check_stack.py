"""Emberline Plateau: a full synthetic day through stack and gate, scored against the truth.

Writes a 12-station, 15-minute-per-station raw day (one noisy station, one dead
channel) into a temporary folder (or --out), stacks and gates it, and prints
the issue-3 acceptance numbers: the share of usable gates within 2 standard
errors of the forward engine's gated truth, the sd of the normalised
residuals, and the rms error of the robust default against the plain mean.

Usage: python examples/emberline/check_stack.py [--out DIR] [--seed N] [--duration S]
"""
from __future__ import annotations

import argparse
import json
import shutil
import tempfile
from pathlib import Path

import numpy as np

from tem.forward import Simulation
from tem.gate.windows import gate_stacked
from tem.io.stacked import stacked_dataset
from tem.stack import StackSettings, stack_station
from tem.synth import (emberline_survey, forward_receiver, forward_source, survey_waveform,
                       synth_survey)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out")
    ap.add_argument("--seed", type=int, default=2025)
    ap.add_argument("--duration", type=float, default=900.0)
    ap.add_argument("--shape", default="boxcar", choices=("boxcar", "taper"))
    args = ap.parse_args()
    out = Path(args.out) if args.out else Path(tempfile.mkdtemp(prefix="emberline-"))
    try:
        sv, models = emberline_survey(base_dir=out)
        truth = synth_survey(sv, models, out, seed=args.seed, duration=args.duration,
                             noisy_station="EM09", dead_channel=("EM04", "ex"))
        z_all, rms = [], {"huber": [], "mean": []}
        per_station = []
        for st in sv.stations:
            for est in ("huber", "mean"):
                chans, timing = stack_station(sv, st, StackSettings(estimator=est))
                for c in chans:
                    tt = truth[st.id][c.receiver.component]
                    off = c.times < sv.transmitter.off_time
                    if not c.dead:
                        rel = (c.result.value[off] - tt[off]) / np.maximum(c.result.error[off], 1e-300)
                        rms[est].append(np.sqrt(np.mean((c.result.value[off] - tt[off]) ** 2))
                                        / np.sqrt(np.mean(tt[off] ** 2)))
                if est != "huber":
                    continue
                ds = stacked_dataset(sv, st, chans, timing, StackSettings(), [])
                g = gate_stacked(ds, 9.0, args.shape, None, None, 2.0)
                for ci, c in enumerate(chans):
                    u = g["usable"].values[ci]
                    if not u.any():
                        continue
                    sim = Simulation(forward_source(sv.transmitter),
                                     [forward_receiver(c.receiver, st)],
                                     gates=(g["gate_open"].values, g["gate_close"].values),
                                     gate_shape=args.shape, waveform=survey_waveform(sv.transmitter),
                                     response="waveform")
                    tg = sim.predict(models[st.id])[0]
                    z = ((g["value"].values[ci] - tg) / g["error"].values[ci])[u]
                    z_all.append(z)
                    per_station.append((st.id, c.receiver.component, int(u.sum()),
                                        float(np.mean(np.abs(z) < 2)), float(z.std())))
        z = np.concatenate(z_all)
        for row in per_station:
            print("%s %-6s usable %2d  within2se %.2f  sd %.2f" % row)
        print(json.dumps({"usable_gates": int(z.size),
                          "fraction_within_2se": round(float(np.mean(np.abs(z) < 2)), 3),
                          "normalised_residual_sd": round(float(z.std()), 3),
                          "rel_rms_error_huber_median_over_channels": float(np.median(rms["huber"])),
                          "rel_rms_error_mean_median_over_channels": float(np.median(rms["mean"])),
                          "channels_where_huber_beats_mean": int(np.sum(np.array(rms["huber"])
                                                                        < np.array(rms["mean"]))),
                          "channels": len(rms["huber"])}))
    finally:
        if not args.out:
            shutil.rmtree(out, ignore_errors=True)


if __name__ == "__main__":
    main()
