"""Forward-engine benchmark: tem against empymod on the same 31-gate soundings.

Cases: 5- and 30-layer models; wire Ex and dBz/dt; 1 km wire, receiver at
2 km offset (azimuth 60 degrees, so both components are non-zero); 31
log-spaced boxcar gates from 0.1 ms to 1 s, step-off response.

empymod (Werthmueller 2017, Geophysics 82(6), WB9-WB19) is run as an
accurate quasi-static reference as described in docs/forward.md ("empymod as
the reference"): source and receiver at z = 1e-3 m,
epermH = epermV = 0, its default Hankel filter (key_201_2009, standard DLF)
and Fourier filter (key_201_2012, lagged convolution), srcpts = 11 (11 vs 21
points change the result by < 1e-7). Both codes evaluate the gate averages
at the same Gauss-Legendre nodes (6 per gate, in log time); empymod's
lagged convolution makes the extra times nearly free for it.

Prints one JSON line per case: case, tem_ms, empymod_ms, speedup,
max_rel_dev (over gates whose |value| exceeds 1e-3 of the largest),
jacobian_over_forward, plus the settings used.
"""
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import best_time, emit  # noqa: E402

import empymod  # noqa: E402

from tem.forward import LayeredModel, Receiver, Simulation, Wire  # noqa: E402
from tem.forward.kernel import MU0  # noqa: E402

A, B = (-500.0, 0.0), (500.0, 0.0)
RX = (1000.0, 1732.0508)
EDGES = np.geomspace(1e-4, 1.0, 32)
G0, G1 = EDGES[:-1], EDGES[1:]
NODES = 6


def models():
    m5 = LayeredModel([20.0, 900.0, 600.0, 500.0], [30.0, 500.0, 8.0, 100.0, 2000.0])
    thk = np.geomspace(10.0, 300.0, 29)
    z = np.r_[0.0, np.cumsum(thk)]
    # a smooth version of the same earth on 30 layers
    logr = np.interp(z, [0, 20, 900, 1500, 2100, 5000],
                     np.log10([30, 300, 500, 8, 2000, 2000]))
    m30 = LayeredModel(thk, 10 ** logr)
    return {"5layer": m5, "30layer": m30}


def gate_nodes():
    xg, wg = np.polynomial.legendre.leggauss(NODES)
    s = 0.5 * (xg + 1.0)
    la, lb = np.log(G0)[:, None], np.log(G1)[:, None]
    tn = np.exp(la + s * (lb - la))
    w = tn * (lb - la) * 0.5 * wg
    return tn, w / w.sum(axis=1, keepdims=True)


def empymod_gates(model, comp):
    tn, w = gate_nodes()
    depth = np.r_[0.0, np.cumsum(model.thickness)]
    res = np.r_[2e14, model.resistivity]
    kw = dict(depth=depth, res=res, freqtime=tn.ravel(), srcpts=11, strength=1, verb=0,
              epermH=np.zeros(res.size), epermV=np.zeros(res.size))
    src = [A[0], B[0], -A[1], -B[1], 1e-3, 1e-3]      # our y north = empymod -y
    if comp == "ex":
        v = empymod.bipole(src, [RX[0], -RX[1], 1e-3, 0, 0], signal=-1, **kw)
    else:
        v = MU0 * empymod.bipole(src, [RX[0], -RX[1], 1e-3, 0, 90], signal=0, mrec=True, **kw)
    return (np.asarray(v).reshape(tn.shape) * w).sum(axis=1)


def main():
    for mname, model in models().items():
        for comp in ("ex", "dbzdt"):
            sim = Simulation(Wire(A, B), [Receiver(comp, RX)], gates=(G0, G1), gate_nodes=NODES)
            d = sim.predict(model)[0]
            ref = empymod_gates(model, comp)
            mask = np.abs(ref) > 1e-3 * np.abs(ref).max()
            dev = float(np.max(np.abs(d[mask] - ref[mask]) / np.abs(ref[mask])))
            t_tem = best_time(lambda: sim.predict(model))
            t_jac = best_time(lambda: sim.jacobian(model))
            t_emp = best_time(lambda: empymod_gates(model, comp), repeat=3, min_total=0.0)
            emit({"case": f"{mname}_wire_{comp}", "tem_ms": round(t_tem * 1e3, 2),
                  "empymod_ms": round(t_emp * 1e3, 1), "speedup": round(t_emp / t_tem, 1),
                  "max_rel_dev": float(f"{dev:.2e}"),
                  "jacobian_over_forward": round(t_jac / t_tem, 2),
                  "tem_settings": f"hankel={sim.hankel_name} fourier={sim.fourier_name} "
                                  f"freq_per_decade={sim.freq_per_decade} "
                                  f"n_freq={sim.n_frequencies} n_lambda={sim.n_wavenumbers}",
                  "empymod_settings": "QS (eperm=0), z=1e-3 m, key_201_2009 DLF, "
                                      "key_201_2012 lagged, srcpts=11, 186 node times"})


if __name__ == "__main__":
    main()
