"""Benchmark: the same Occam smooth inversion with tem's forward engine (analytic
Jacobian) and with empymod as forward engine (finite-difference Jacobian).

Case: synthetic Emberline Plateau station at x = 1500 m (1.5 km grounded wire
800 m north of the profile), Ex and dBz/dt step-off responses at 31 log-spaced
times from 1 ms to 1 s, 3 % seeded Gaussian noise, 30-layer mesh. empymod is
run quasi-statically as described in docs/forward.md (source and receivers at z = 1 mm,
epermH = epermV = 0, default transforms; 5 Gauss points along the wire,
checked against 11 in the run). Both runs start from the same
half-space, use the same mesh, data, errors and Occam settings.

Prints one JSON line: {"case", "tem_s", "empymod_s", "speedup", "chi2"}
(chi2 = final chi-square per datum of the tem run); details go to stderr.

Two more cases, one JSON line each:

* ``fewlayer``: the few-layer global search with the tool's defaults
  (``InversionSettings(kind="few-layer")``: counts 2-5 by BIC, differential
  evolution, Levenberg-Marquardt polish) on the blind-suite sounding
  basalt_thin_near at 0.6 km (tests/data/blind_suite.npz, computed with empymod;
  Ex reverses sign): {"case", "cpu_s" (few-layer search only, after the smooth
  model), "chi2", "n_layers", "evaluations"}.
* ``demo``: the demo (``tem demo`` survey, 120 s per station, seed 2025) run
  through ``tem run`` up to the invert stage with 2 worker processes, no
  figures: {"case", "invert_s" (wall time of the invert stage from run.json),
  "jobs", "stations", "max_chi2"}. Target: invert_s <= 60 on 2 cores.

``demo-fewlayer`` and ``demo-posterior`` are the same with ``--set invert.kind=few-layer``
(or ``posterior``, the kind the demo ships with; the
few-layer search with the defaults on every station).

``python benchmarks/invert.py [occam] [fewlayer] [demo] [demo-fewlayer] [demo-posterior]`` runs
the named cases (the first three without arguments; the occam case takes
about 11 minutes).
"""
from __future__ import annotations

import json
import sys
import time

import numpy as np

MU0 = 4e-7 * np.pi


def empymod_forward(x, t, srcpts=5):
    """(predict, fwd) over ln(rho) for a fixed mesh, using empymod (QS recipe)."""
    import empymod

    src = [-750.0, 750.0, 800.0, 800.0, 1e-3, 1e-3]

    def predict_model(rho, h):
        depth = np.concatenate([[0.0], np.cumsum(h)])
        res = np.concatenate([[2e14], rho])
        n = res.size
        common = dict(depth=depth, res=res, freqtime=t, srcpts=srcpts, strength=1, verb=0,
                      epermH=np.zeros(n), epermV=np.zeros(n))
        ex = empymod.bipole(src, [x, 0.0, 1e-3, 0.0, 0.0], signal=-1, **common)
        dbz = -MU0 * empymod.bipole(src, [x, 0.0, 1e-3, 0.0, 90.0], signal=0, mrec=True, **common)
        return np.concatenate([np.asarray(ex).real, np.asarray(dbz).real])

    return predict_model


def fewlayer_case():
    sys.path[:0] = [".", "tests"]
    from blind_data import load

    from tem.invert.data import station_data
    from tem.invert.station import InversionSettings, fewlayer_station, smooth_station

    c = next(c for c in load() if c["name"] == "basalt_thin_near" and c["offset"] == 600.0)
    sd = station_data(c["ds"])
    settings = InversionSettings(kind="few-layer")
    res, h, rho_hs = smooth_station(sd, settings)
    from tem.invert.doi import cumulative_sensitivity_doi
    doi = cumulative_sensitivity_doi(res.J, sd.std, h, threshold=0.8)
    t0 = time.process_time()
    few = fewlayer_station(sd, settings, res.m, h, doi, rho_hs)
    cpu = time.process_time() - t0
    info = few["search"]
    print(f"few-layer search: counts {info['criteria']}, winner {info['winner']}", file=sys.stderr)
    print(json.dumps({"case": "fewlayer-global-defaults-blind-basalt_thin_near-0.6km",
                      "cpu_s": round(cpu, 2), "chi2": round(float(few["chi2"]), 3),
                      "n_layers": int(few["resistivity"].size),
                      "evaluations": int(info["evaluations"])}), flush=True)


def demo_case(jobs=2, kind="smooth"):
    import tempfile
    from pathlib import Path

    sys.path.insert(0, ".")
    from tem.cli.demo import write_demo_survey
    from tem.pipeline import run_pipeline

    with tempfile.TemporaryDirectory() as tmp:
        survey = write_demo_survey(Path(tmp) / "raw", 120.0, 2025)
        out = run_pipeline(survey, Path(tmp) / "project", jobs=jobs, progress=False,
                           figures=False, until="invert", overrides=[("invert", "kind", kind)])
        rec = out.state["stages"]["invert"]
        key = "chi2" if kind == "smooth" else "few_layer_chi2"
        chi2 = [st.get(key) for st in rec["stations"].values() if st.get(key) is not None]
        print(json.dumps({"case": f"demo-invert-stage-{kind}", "invert_s": rec["elapsed_s"],
                          "jobs": jobs,
                          "stations": len(rec["stations"]),
                          "max_chi2": round(max(chi2), 2) if chi2 else None}), flush=True)


def main(argv=()):
    cases = list(argv) or ["occam", "fewlayer", "demo"]
    if "fewlayer" in cases:
        fewlayer_case()
    if "demo" in cases:
        demo_case()
    if "demo-fewlayer" in cases:
        demo_case(kind="few-layer")
    if "demo-posterior" in cases:
        demo_case(kind="posterior")
    if "occam" in cases:
        return occam_case()
    return 0


def occam_case():
    sys.path.insert(0, ".")
    from tem.forward import Receiver, Simulation, Wire
    from tem.invert.smooth import best_halfspace, diffusion_depth, log_mesh, occam, roughness_matrix
    from tem.invert.synthetic import emberline_model

    x = 1500.0
    t = np.geomspace(1e-3, 1.0, 31)
    sim = Simulation(Wire(a=(-750.0, 800.0), b=(750.0, 800.0)),
                     [Receiver("ex", (x, 0.0)), Receiver("dbzdt", (x, 0.0))], times=t)
    true = emberline_model(x)
    d_true = sim.predict(true).ravel()
    rng = np.random.default_rng(2024)
    std = 0.03 * np.abs(d_true)
    d_obs = d_true + std * rng.standard_normal(d_true.size)

    emp = empymod_forward(x, t)
    d_emp = emp(true.resistivity, true.thickness)
    d_emp11 = empymod_forward(x, t, srcpts=11)(true.resistivity, true.thickness)
    agree = float(np.max(np.abs(d_emp - d_true) / np.abs(d_true)))
    pts = float(np.max(np.abs(d_emp - d_emp11) / np.abs(d_emp11)))
    print(f"true model: max |empymod - tem| / |tem| = {agree:.2e}; empymod srcpts 5 vs 11: {pts:.1e}",
          file=sys.stderr)

    from tem.forward import LayeredModel
    rho_hs, _ = best_halfspace(lambda lr: sim.predict(LayeredModel([], [np.exp(lr)])).ravel(), d_obs, std)
    h = log_mesh(30, 0.02 * diffusion_depth(rho_hs, t[0]), 0.3 * diffusion_depth(rho_hs, t[-1]))
    M = h.size + 1
    R = roughness_matrix(M)
    m0 = np.full(M, np.log(rho_hs))
    settings = dict(target=1.0, max_iter=20, misfit_drop=0.3)

    def tem_fwd(m):
        d, J = sim.jacobian(LayeredModel(h, np.exp(m)))
        return d.reshape(-1), J.reshape(-1, M)

    def tem_predict(m):
        return sim.predict(LayeredModel(h, np.exp(m))).ravel()

    step = 1e-3   # forward difference in ln(rho)

    def emp_predict(m):
        return emp(np.exp(m), h)

    def emp_fwd(m):
        d0 = emp_predict(m)
        J = np.empty((d0.size, M))
        for k in range(M):
            mp = m.copy()
            mp[k] += step
            J[:, k] = (emp_predict(mp) - d0) / step
        return d0, J

    t0 = time.perf_counter()
    r_tem = occam(tem_fwd, d_obs, std, m0, R, predict=tem_predict, **settings)
    tem_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    r_emp = occam(emp_fwd, d_obs, std, m0, R, predict=emp_predict, **settings)
    emp_s = time.perf_counter() - t0
    diff = float(np.max(np.abs(r_tem.m - r_emp.m)) / np.log(10))
    print(f"tem: {r_tem.n_iter} iterations, chi2 {r_tem.chi2:.3f} ({r_tem.message}); "
          f"empymod: {r_emp.n_iter} iterations, chi2 {r_emp.chi2:.3f} ({r_emp.message}); "
          f"max model difference {diff:.3f} decades", file=sys.stderr)
    print(json.dumps({"case": "occam-30-layers-31-gates-ex-dbzdt-emberline-x1500",
                      "tem_s": round(tem_s, 3), "empymod_s": round(emp_s, 3),
                      "speedup": round(emp_s / tem_s, 1), "chi2": round(r_tem.chi2, 3)}))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
