"""Benchmark: coverage of the posterior intervals of the target top on independent soundings.

Soundings: benchmarks/data/posterior_calibration.npz, computed with empymod by
benchmarks/posterior_data.py (8 layered earths x near and far offset, Ex and
dBz/dt step-off responses at 25 times, 1 ms - 0.5 s). Each is used with
``--repeats`` noise draws (default 3): 48 soundings. The stated error of
every datum is ``s = sqrt((0.03 d)^2 + a^2)`` with ``a`` = 1e-3 of the largest
|d| of its channel (a relative error and a noise floor), and the noise is
drawn from it, ``d_obs = d + s N(0, 1)``, with a new seed per sounding.

Each sounding goes through :func:`tem.invert.station.invert_station` with kind
posterior and the true number of layers (smooth model, Levenberg-Marquardt
few-layer fit, adaptive Metropolis chains; error floor 0 so the stated errors
are the likelihood). The target is the most conductive layer below the top
layer (``cover_layers = 1``), in the truth and draw by draw. Coverage: the
fraction of soundings whose true target top lies in the posterior 80 %
(P10-P90) and 95 % (P2.5-P97.5) interval, and in the linearised intervals
``z +- 1.2816 sigma`` and ``z +- 1.96 sigma`` of the few-layer fit (normal
quantiles).

Prints one JSON line per case: {"case", "coverage_80", "coverage_95",
"coverage_80_linearised", "coverage_95_linearised", "n_soundings",
"median_s_per_station", "max_rhat", "min_ess"} (median wall time of a whole
station: smooth, few-layer and sampling; R-hat and ESS over all parameters of
all soundings; also the median CPU time, which a loaded machine does not
inflate), and a second line for the soundings whose few-layer fit
reached chi2 <= 2 (where the sampler started in the right basin; a poor
few-layer start is the robust-start problem, not a sampling one); one line
per sounding goes to stderr.

Run: ``python benchmarks/posterior.py [--repeats 3] [--draws 2000 --burn 2000] [--jobs 1]``.
"""
from __future__ import annotations

import argparse
import json
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

DATA = Path(__file__).resolve().parent / "data" / "posterior_calibration.npz"
REL, ABS = 0.03, 1e-3
FIT_OK = 2.0                                         # chi2 per datum of a fit that found the data
Z80, Z95 = 1.2815515655446004, 1.959963984540054   # standard normal quantiles 0.9, 0.975


def load():
    with np.load(DATA, allow_pickle=False) as z:
        return {k: z[k] for k in z.files}


def true_target(res, thk, cover):
    n = int(np.isfinite(res).sum())
    k = cover + int(np.argmin(res[cover:n]))
    return float(np.concatenate([[0.0], np.cumsum(thk[:n - 1])])[k]), n


def one(job):
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from tem.forward import Receiver, Simulation, Wire
    from tem.invert.data import station_data_from_arrays
    from tem.invert.posterior import target_layer, target_tops
    from tem.invert.station import InversionSettings, invert_station

    z, i, seed, draws, burn = job[:5]
    anneal = job[5] if len(job) > 5 else 0.0
    k = int(z["model"][i])
    off = str(z["offset"][i])
    rx = tuple(z["receivers"][list(z["offsets"]).index(off)])
    d = z["data"][i]
    std = np.sqrt((REL * d) ** 2 + (ABS * np.abs(d).max(axis=1, keepdims=True)) ** 2)
    rng = np.random.default_rng(seed)
    obs = d + std * rng.standard_normal(d.shape)
    comps = [str(c) for c in z["components"]]
    sim = Simulation(Wire(a=tuple(z["wire"][0]), b=tuple(z["wire"][1])),
                     [Receiver(c, rx) for c in comps], times=z["times"])
    sd = station_data_from_arrays(sim, obs, std, comps, station=f"M{k}{off}{seed}",
                                  gate_centre=z["times"], floors=0.0)
    truth, n = true_target(z["resistivity"][k], z["thickness"][k], 1)
    settings = InversionSettings(kind="posterior", few_layers=n, posterior_draws=draws,
                                 posterior_burn=burn, posterior_seed=seed, floor=0.0,
                                 posterior_anneal=anneal)
    t0, c0 = time.perf_counter(), time.process_time()
    r = invert_station(sd, settings)
    seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    kl = target_layer(r.few["resistivity"], 1)
    tt = target_tops(r.posterior.flat, n, kl)
    q = np.quantile(tt, [0.025, 0.1, 0.9, 0.975])
    zl, sl = float(r.few["depth_top"][kl]), float(r.few["depth_std"][kl])
    from scipy.stats import norm
    pit = float(np.mean(tt < truth))                 # probability integral transform of the truth
    pit_lin = float(norm.cdf((truth - zl) / sl)) if sl > 0 else float(truth > zl)
    return dict(sounding=i, model=k, offset=off, seed=seed, truth=truth, layer=kl, pit=pit,
                pit_lin=pit_lin, p025=q[0], p10=q[1],
                p90=q[2], p975=q[3], lin=zl, lin_std=sl, in80=bool(q[1] <= truth <= q[2]),
                in95=bool(q[0] <= truth <= q[3]), in80_lin=bool(abs(truth - zl) <= Z80 * sl),
                in95_lin=bool(abs(truth - zl) <= Z95 * sl), seconds=seconds, cpu_s=cpu,
                sampling_s=r.posterior.seconds, rhat=r.posterior.max_rhat,
                ess=r.posterior.min_ess, chi2=r.few["chi2"], chi2_draws=r.posterior.chi2_median)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3, help="noise draws per sounding")
    ap.add_argument("--draws", type=int, default=2000, help="kept draws per chain")
    ap.add_argument("--burn", type=int, default=2000, help="burn-in steps per chain")
    ap.add_argument("--anneal", type=float, default=0.0, help="annealed fraction of the burn-in")
    ap.add_argument("--only", type=int, nargs="*", help="sounding indices (first noise draw only)")
    ap.add_argument("--plot", help="write a coverage figure (PNG) here")
    ap.add_argument("--jobs", type=int, default=1, help="soundings in parallel")
    ap.add_argument("--seed", type=int, default=7000, help="first noise seed")
    a = ap.parse_args(argv)
    z = load()
    jobs = [(z, i, a.seed + 100 * rep + i, a.draws, a.burn, a.anneal)
            for rep in range(a.repeats) for i in range(len(z["model"]))
            if not a.only or i in a.only]
    rows = []
    with ProcessPoolExecutor(a.jobs) as pool:
        for row in pool.map(one, jobs):
            rows.append(row)
            print(json.dumps({k: (round(v, 3) if isinstance(v, float) else v) for k, v in row.items()}),
                  file=sys.stderr, flush=True)

    if a.plot:
        coverage_figure(rows, a.plot)
    summarise(rows, f"empymod 8 earths x 2 offsets x {a.repeats} noise draws, layers known, "
              f"{a.draws}+{a.burn} steps x 4 chains, anneal {a.anneal:g}")


def coverage_figure(rows, path):
    """Empirical coverage of central intervals against their nominal level, posterior and
    linearised: the fraction of soundings with |PIT - 1/2| <= level / 2."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    level = np.linspace(0.0, 1.0, 101)
    fig = Figure(figsize=(5.5, 5), layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    n = len(rows)
    band = 1.96 * np.sqrt(level * (1 - level) / n)
    ax.fill_between(level, level - band, level + band, color="0.85", label="binomial 95 % band")
    ax.plot(level, level, color="0.4", lw=0.8)
    for key, lab, col in (("pit", "posterior", "#1b4f72"), ("pit_lin", "linearised", "#c0392b")):
        p = np.array([r[key] for r in rows])
        cov = [(np.abs(p - 0.5) <= lv / 2).mean() for lv in level]
        ax.plot(level, cov, color=col, lw=1.8, label=f"{lab} intervals")
    for lv in (0.8, 0.95):
        ax.axvline(lv, color="0.6", ls=":", lw=0.8)
    ax.set_xlabel("nominal level of the central interval")
    ax.set_ylabel("fraction of soundings whose true target top is inside")
    ax.set_title(f"target-top intervals on {n} empymod soundings")
    ax.legend(loc="upper left", fontsize=8)
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    fig.savefig(path, dpi=130)


def summarise(rows, case):
    """Print the JSON line of all soundings, then of those whose few-layer fit reached
    chi2 <= 2 (a poor fit is a failed start, not a sampling result: stated separately)."""
    for sel, label in ((rows, ""), ([r for r in rows if r["chi2"] <= FIT_OK],
                                    f"; only few-layer fits with chi2 <= {FIT_OK:g}")):
        if not sel:
            continue

        def frac(key):
            return float(np.mean([r[key] for r in sel]))

        print(json.dumps({
            "case": case + label,
            "coverage_80": frac("in80"), "coverage_95": frac("in95"),
            "coverage_80_linearised": frac("in80_lin"), "coverage_95_linearised": frac("in95_lin"),
            "n_soundings": len(sel),
            "median_s_per_station": float(np.median([r["seconds"] for r in sel])),
            "max_rhat": float(np.nanmax([r["rhat"] for r in sel])),
            "min_ess": float(np.nanmin([r["ess"] for r in sel])),
            "median_cpu_s_per_station": float(np.median([r.get("cpu_s", np.nan) for r in sel]))}),
              flush=True)

if __name__ == "__main__":
    main()
