"""Forward-engine benchmark: tem against empymod and SimPEG on the same 31-gate soundings.

Cases: 4-, 5- and 30-layer models; a 1 km grounded wire with the receiver at
2 km (azimuth 60 degrees, so Ex and dBz/dt are both non-zero) and a 100 m x
100 m square loop with a central dBz/dt receiver; 31 log-spaced boxcar gates
from 0.1 ms to 1 s, step-off response, each gate averaged over 6
Gauss-Legendre nodes in log time (186 times) by every code.

Peers, each at the fastest of its own settings that is as accurate as tem in
that case (printed per line, with the peer's own deviation):

* empymod (Werthmueller 2017, Geophysics 82(6), WB9-WB19), quasi-static
  (epermH = epermV = 0), source and receiver at z = 1e-3 m, Fourier DLF
  key_201_2012 with lagged convolution (its default), Hankel DLF key_201_2009
  standard or lagged, wire integration srcpts 3, 5 or 11 (for the loop: per
  side, the four sides in one call). The reference every code is compared
  with is empymod at reference grade: key_401_2009 Hankel, srcpts 21.
* SimPEG (simpeg.electromagnetics.time_domain.Simulation1DLayered), magnetic
  receivers only (it has no electric receivers in 1D); its default filters
  (key_101_2009 Hankel, key_81_2009 cosine) and the fewest Gauss points per
  wire segment (1, 2, 3, 5 or 10) within 10 % of its converged deviation. The
  wire is given as two collinear segments (SimPEG 0.25 fails on a two-point
  path). For the loop, SimPEG's central circular loop of equal area is timed
  as well (its fastest path, a different geometry) and the ratio is taken
  against the faster of the two.

Times are CPU times (BLAS limited to one thread; tem's kernels are single-
threaded), medians of 7 rounds in which the codes run in turn, so that load
from other users of the machine affects all of them alike.

Prints one JSON line per case: tem_ms, jacobian_ms, empymod_ms, speedup,
max_rel_dev (over gates whose |value| exceeds 1e-3 of the largest),
jacobian_over_forward, simpeg_ms, speedup_over_simpeg, the settings of each
code; then one line for a batched predict of 1000 random 5-layer models
against 1000 single calls. ``--profile`` prints where tem's time goes instead.
"""
import os

for _v in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "OMP_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import alternate, emit  # noqa: E402

import empymod  # noqa: E402

from tem.forward import LayeredModel, PolygonLoop, Receiver, Simulation, Wire  # noqa: E402
from tem.forward.kernel import MU0, fused_spectra  # noqa: E402

A, B = (-500.0, 0.0), (500.0, 0.0)
RX = (1000.0, 1732.0508)
LOOP = [(-50.0, -50.0), (50.0, -50.0), (50.0, 50.0), (-50.0, 50.0)]
EDGES = np.geomspace(1e-4, 1.0, 32)
G0, G1 = EDGES[:-1], EDGES[1:]
NODES = 6
CASES = [("wire", "ex"), ("wire", "dbzdt"), ("loop", "dbzdt")]


def models():
    m4 = LayeredModel([20.0, 900.0, 600.0], [30.0, 500.0, 8.0, 2000.0])
    m5 = LayeredModel([20.0, 900.0, 600.0, 500.0], [30.0, 500.0, 8.0, 100.0, 2000.0])
    thk = np.geomspace(10.0, 300.0, 29)
    z = np.r_[0.0, np.cumsum(thk)]
    # a smooth version of the same earth on 30 layers
    logr = np.interp(z, [0, 20, 900, 1500, 2100, 5000],
                     np.log10([30, 300, 500, 8, 2000, 2000]))
    return {"4layer": m4, "5layer": m5, "30layer": LayeredModel(thk, 10 ** logr)}


def gate_nodes():
    xg, wg = np.polynomial.legendre.leggauss(NODES)
    s = 0.5 * (xg + 1.0)
    la, lb = np.log(G0)[:, None], np.log(G1)[:, None]
    tn = np.exp(la + s * (lb - la))
    w = tn * (lb - la) * 0.5 * wg
    return tn, w / w.sum(axis=1, keepdims=True)


TN, TW = gate_nodes()


def max_rel_dev(d, ref):
    mask = np.abs(ref) > 1e-3 * np.abs(ref).max()
    return float(np.max(np.abs(d[mask] - ref[mask]) / np.abs(ref[mask])))


def tem_simulation(geom, comp):
    src = Wire(A, B) if geom == "wire" else PolygonLoop(LOOP)
    pos = RX if geom == "wire" else (0.0, 0.0)
    return Simulation(src, [Receiver(comp, pos)], gates=(G0, G1), gate_nodes=NODES)


# ------------------------------------------------------------------------ empymod
def empymod_gates(model, geom, comp, srcpts, ht_ppd=0, hankel="key_201_2009"):
    depth = np.r_[0.0, np.cumsum(model.thickness)]
    res = np.r_[2e14, model.resistivity]
    kw = dict(depth=depth, res=res, freqtime=TN.ravel(), srcpts=srcpts, strength=1, verb=0,
              epermH=np.zeros(res.size), epermV=np.zeros(res.size),
              htarg={"dlf": hankel, "pts_per_dec": ht_ppd})
    if geom == "wire":                               # our y north = empymod -y
        src = [A[0], B[0], -A[1], -B[1], 1e-3, 1e-3]
        rx = (RX[0], -RX[1])
    else:
        v = np.array(LOOP)
        v1 = np.roll(v, -1, axis=0)
        src = [v[:, 0], v1[:, 0], -v[:, 1], -v1[:, 1], 1e-3, 1e-3]
        rx = (0.0, 0.0)
    if comp == "ex":
        out = empymod.bipole(src, [rx[0], rx[1], 1e-3, 0, 0], signal=-1, **kw)
    else:
        out = MU0 * empymod.bipole(src, [rx[0], rx[1], 1e-3, 0, 90], signal=0, mrec=True, **kw)
    out = np.asarray(out).reshape(TN.size, -1).sum(axis=1)   # sum over the loop's sides
    return (out.reshape(TN.shape) * TW).sum(axis=1)


def empymod_reference(model, geom, comp):
    return empymod_gates(model, geom, comp, srcpts=21, hankel="key_401_2009")


def empymod_fastest(model, geom, comp, ref, tol):
    """Fastest empymod setting whose deviation from the reference is at most ``tol``."""
    best = None
    for srcpts in (3, 5, 11):
        for ht_ppd in (0, -1):
            t0 = time.process_time()
            d = empymod_gates(model, geom, comp, srcpts, ht_ppd)
            t = time.process_time() - t0
            dev = max_rel_dev(d, ref)
            if dev <= tol and (best is None or t < best[0]):
                best = (t, srcpts, ht_ppd, dev)
    if best is None:              # nothing as accurate as tem: its most accurate setting
        best = (None, 11, 0, max_rel_dev(empymod_gates(model, geom, comp, 11, 0), ref))
    return best[1:]


# ------------------------------------------------------------------------- SimPEG
def simpeg_available():
    try:
        import simpeg  # noqa: F401
        return True
    except ImportError:
        return False


def simpeg_sim(model, geom, npp=None, circle=False):
    from simpeg import maps
    from simpeg.electromagnetics import time_domain as tdem

    pos = RX if geom == "wire" else (0.0, 0.0)
    rx = tdem.receivers.PointMagneticFluxTimeDerivative(np.array([[pos[0], pos[1], 0.0]]),
                                                        TN.ravel(), orientation="z")
    wave = tdem.sources.StepOffWaveform()
    if circle:
        src = tdem.sources.CircularLoop([rx], location=np.zeros(3), radius=np.sqrt(1e4 / np.pi),
                                        waveform=wave, current=1.0)
        kw = {}
    else:
        path = [A, (0.5 * (A[0] + B[0]), 0.5 * (A[1] + B[1])), B] if geom == "wire" \
            else LOOP + LOOP[:1]
        src = tdem.sources.LineCurrent([rx], location=np.c_[np.array(path), np.zeros(len(path))],
                                       waveform=wave, current=1.0)
        kw = {"n_points_per_path": npp}
    sim = tdem.Simulation1DLayered(survey=tdem.Survey([src]),
                                   thicknesses=np.array(model.thickness),
                                   sigmaMap=maps.IdentityMap(nP=model.n_layers), **kw)
    sig = 1.0 / np.array(model.resistivity)
    return sim, sig


def simpeg_gates(sim, sig):
    return (np.asarray(sim.dpred(sig)).reshape(TN.shape) * TW).sum(axis=1)


def simpeg_fewest_points(model, geom, ref):
    """Fewest points per segment within 10 % of SimPEG's converged (10-point) deviation."""
    devs = {}
    for npp in (1, 2, 3, 5, 10):
        sim, sig = simpeg_sim(model, geom, npp)
        devs[npp] = max_rel_dev(simpeg_gates(sim, sig), ref)
    npp = min(n for n in devs if devs[n] <= 1.1 * devs[10])
    return npp, devs[npp]


# ------------------------------------------------------------------------- cases
def run_case(geom, comp, mname, model):
    sim = tem_simulation(geom, comp)
    d = sim.predict(model)[0]
    ref = empymod_reference(model, geom, comp)
    dev = max_rel_dev(d, ref)
    srcpts, ht_ppd, emp_dev = empymod_fastest(model, geom, comp, ref, max(dev, 1e-6))
    fns = {"tem": lambda: sim.predict(model), "jac": lambda: sim.jacobian(model),
           "empymod": lambda: empymod_gates(model, geom, comp, srcpts, ht_ppd)}
    rec = {"case": f"{mname}_{geom}_{comp}"}
    sp_note = None
    if comp != "ex" and simpeg_available():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            npp, sp_dev = simpeg_fewest_points(model, geom, ref)
            sp_sim, sig = simpeg_sim(model, geom, npp)
            fns["simpeg"] = lambda: simpeg_gates(sp_sim, sig)
            if geom == "loop":
                sc_sim, _ = simpeg_sim(model, geom, circle=True)
                fns["simpeg_circle"] = lambda: simpeg_gates(sc_sim, sig)
            t = alternate(fns)
    else:
        t = alternate(fns)
        sp_note = ("SimPEG's 1D simulation has no electric-field receivers" if comp == "ex"
                   else "SimPEG not installed (pip install -e '.[bench]')")
    rec.update({"tem_ms": round(t["tem"] * 1e3, 3), "jacobian_ms": round(t["jac"] * 1e3, 3),
                "empymod_ms": round(t["empymod"] * 1e3, 1),
                "speedup": round(t["empymod"] / t["tem"], 1),
                "max_rel_dev": float(f"{dev:.2e}"),
                "jacobian_over_forward": round(t["jac"] / t["tem"], 2)})
    if "simpeg" in t:
        best = min(t["simpeg"], t.get("simpeg_circle", np.inf))
        rec.update({"simpeg_ms": round(t["simpeg"] * 1e3, 2),
                    "simpeg_max_rel_dev": float(f"{sp_dev:.2e}")})
        if "simpeg_circle" in t:
            rec["simpeg_circle_ms"] = round(t["simpeg_circle"] * 1e3, 2)
        rec["speedup_over_simpeg"] = round(best / t["tem"], 1)
        rec["simpeg_settings"] = (f"Simulation1DLayered, LineCurrent, n_points_per_path={npp}, "
                                  "hankel key_101_2009, time_filter key_81_2009"
                                  + ("; circle: CircularLoop of equal area (timing only)"
                                     if geom == "loop" else ""))
    else:
        rec["simpeg"] = sp_note
    rec["tem_settings"] = (f"hankel={sim.hankel_name} fourier={sim.fourier_name} "
                           f"freq_per_decade={sim.freq_per_decade} n_freq={sim.n_frequencies} "
                           f"n_lambda={sim.n_wavenumbers}")
    rec["empymod_settings"] = (f"QS (eperm=0), z=1e-3 m, key_201_2009 "
                               f"{'lagged' if ht_ppd == -1 else 'standard'} Hankel, key_201_2012 "
                               f"lagged Fourier, srcpts={srcpts}, 186 node times, "
                               f"own max_rel_dev {emp_dev:.1e}")
    rec["reference"] = "empymod QS, key_401_2009 standard Hankel, key_201_2012 lagged, srcpts=21"
    emit(rec)


def batch_line(n_models=1000, rounds=3):
    """1000 random 5-layer models: predict_many against single predict calls."""
    rng = np.random.default_rng(0)
    res = 10 ** rng.uniform(0.0, 3.5, (n_models, 5))
    thk = 10 ** rng.uniform(0.7, 2.7, (n_models, 4))
    sim = Simulation(Wire(A, B), [Receiver("ex", RX), Receiver("dbzdt", RX)], gates=(G0, G1),
                     gate_nodes=NODES)
    ms = [LayeredModel(t, r) for t, r in zip(thk, res)]
    sim.predict_many(res[:4], thk[:4])
    cpu = {"single": [], "batch": []}
    wall = {"single": [], "batch": []}
    for _ in range(rounds):
        for k, fn in (("single", lambda: [sim.predict(m) for m in ms]),
                      ("batch", lambda: sim.predict_many(res, thk))):
            c0, w0 = time.process_time(), time.perf_counter()
            fn()
            cpu[k].append((time.process_time() - c0) / n_models)
            wall[k].append((time.perf_counter() - w0) / n_models)
    same = np.max(np.abs(sim.predict_many(res[:20], thk[:20])
                         - np.array([sim.predict(m) for m in ms[:20]])))
    med = {k: float(np.median(v)) for k, v in cpu.items()}
    medw = {k: float(np.median(v)) for k, v in wall.items()}
    import numba
    emit({"case": "batch_1000x5layer_wire_ex_dbzdt",
          "single_cpu_ms_per_model": round(med["single"] * 1e3, 3),
          "batch_cpu_ms_per_model": round(med["batch"] * 1e3, 3),
          "cpu_speedup": round(med["single"] / med["batch"], 2),
          "single_wall_ms_per_model": round(medw["single"] * 1e3, 3),
          "batch_wall_ms_per_model": round(medw["batch"] * 1e3, 3),
          "wall_speedup": round(medw["single"] / medw["batch"], 2),
          "threads": numba.get_num_threads(),
          "max_abs_diff_batch_vs_single": float(f"{same:.1e}"),
          "settings": "predict_many(resistivity (1000,5), thickness (1000,4)) vs 1000 x "
                      "predict(LayeredModel); models over numba threads; medians of 3 rounds"})


# ----------------------------------------------------------------------- profile
def profile():
    """Where tem's time goes: grid sizes, kernel, time-domain assembly, Python overhead."""
    for geom, comp in CASES:
        t0 = time.perf_counter()
        sim = tem_simulation(geom, comp)
        setup = time.perf_counter() - t0
        G = sim._G
        for mname, m in models().items():
            def kern(jac=False):
                return fused_spectra(sim._lam, sim._omega, m.resistivity, m.thickness, G["r"],
                                     G["a1"], G["b"], need_tm=sim._need_tm, jac=jac)
            F = sim._spectra(m.resistivity, kern()[0])
            t = alternate({"predict": lambda: sim.predict(m), "kernel": kern,
                           "kernel_jac": lambda: kern(True),
                           "time_domain": lambda: sim._time_domain(F),
                           "jacobian": lambda: sim.jacobian(m)})
            npts = sim.n_frequencies * sim.n_wavenumbers
            emit({"profile": f"{mname}_{geom}_{comp}", "setup_ms": round(setup * 1e3, 1),
                  "n_freq": sim.n_frequencies, "n_lambda": sim.n_wavenumbers,
                  "kernel_points": npts, "tm_mode": bool(sim._need_tm),
                  **{f"{k}_ms": round(v * 1e3, 4) for k, v in t.items()},
                  "python_overhead_ms": round((t["predict"] - t["kernel"]) * 1e3, 4),
                  "ns_per_point_and_layer": round(t["kernel"] * 1e9 / npts / m.n_layers, 2)})


def main():
    if "--profile" in sys.argv:
        profile()
        return
    for mname, model in models().items():
        for geom, comp in CASES:
            run_case(geom, comp, mname, model)
    batch_line()


if __name__ == "__main__":
    main()
