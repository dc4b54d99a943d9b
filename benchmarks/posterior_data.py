"""Generator of the calibration soundings of benchmarks/posterior.py, computed with empymod.

empymod (Werthmueller 2017, "An open-source full 3D electromagnetic modeller
for 1D VTI media in Python: empymod", Geophysics 82(6), WB9-WB19) is
independent of tem's forward engine. Recipe: quasi-static (epermH = epermV =
0), source wire and receivers 1e-4 m below the surface, air 2e14 ohm-m, step-off
responses per ampere at point times (no gate integration, no waveform),
default Hankel and Fourier transforms, 11 points along the wire. empymod's
frame is right-handed with z down; ours has z up: ours (x, y, z) = empymod (x, -y, -z).

Survey: a 1.5 km grounded wire from (-750, 0) to (750, 0) m; receivers
broadside at a near (x=0, y=500 m) and a far (x=0, y=2000 m) offset; Ex and
dBz/dt at 25 times from 1 ms to 0.5 s. Eight layered models (3 and 4
layers; the cover is the top layer, the target the most conductive layer
below it). Writes the noise-free responses to benchmarks/data/posterior_calibration.npz
(plain arrays, read with allow_pickle=False); noise is drawn in the benchmark.

Run: ``python benchmarks/posterior_data.py`` (about a minute).
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

MU0 = 4e-7 * np.pi
Z = 1e-4
WIRE = ((-750.0, 0.0), (750.0, 0.0))
OFFSETS = {"near": (0.0, 500.0), "far": (0.0, 2000.0)}
TIMES = np.geomspace(1e-3, 0.5, 25)
COMPONENTS = ("ex", "dbzdt")
#: (resistivity ohm-m top to half-space, thickness m top down): the calibration earths.
MODELS = [
    ([30.0, 500.0, 8.0, 2000.0], [20.0, 900.0, 600.0]),
    ([100.0, 10.0, 1000.0], [300.0, 500.0]),
    ([50.0, 300.0, 5.0], [100.0, 700.0]),
    ([20.0, 1000.0, 3.0, 500.0], [50.0, 1200.0, 400.0]),
    ([200.0, 20.0, 300.0], [500.0, 300.0]),
    ([10.0, 100.0, 2.0, 100.0], [30.0, 400.0, 200.0]),
    ([1000.0, 50.0, 5000.0], [800.0, 600.0]),
    ([40.0, 400.0, 15.0, 1500.0], [150.0, 1500.0, 800.0]),
]
OUT = Path(__file__).resolve().parent / "data" / "posterior_calibration.npz"


def empymod_response(resistivity, thickness, receiver, component, t, srcpts=11):
    """Step-off response of the wire at one receiver (ours), per ampere, with empymod."""
    import empymod

    depth = np.r_[0.0, np.cumsum(thickness)]
    res = np.r_[2e14, resistivity]
    m = dict(depth=depth, res=res, freqtime=np.asarray(t, float), strength=1, verb=0,
             epermH=np.zeros(res.size), epermV=np.zeros(res.size), srcpts=srcpts)
    (ax, ay), (bx, by) = WIRE
    src = [ax, bx, -ay, -by, Z, Z]
    x, y = receiver[0], -receiver[1]
    if component == "ex":
        return np.asarray(empymod.bipole(src, [x, y, Z, 0.0, 0.0], signal=-1, **m)).real
    # dBz/dt (ours, z up) = -(dBz/dt in empymod's z-down frame); the impulse response of the
    # magnetic field is the time derivative of its step-on response, minus that of step-off
    return MU0 * np.asarray(empymod.bipole(src, [x, y, Z, 0.0, 90.0], signal=0, mrec=True, **m)).real


def main():
    rows = []
    for k, (rho, h) in enumerate(MODELS):
        for name, rx in OFFSETS.items():
            d = np.array([empymod_response(rho, h, rx, c, TIMES) for c in COMPONENTS])
            rows.append((k, name, d))
            print(f"model {k} {name}: done", file=sys.stderr)
    L = max(len(r) for r, _ in MODELS)
    res = np.full((len(MODELS), L), np.nan)
    thk = np.full((len(MODELS), L - 1), np.nan)
    for k, (r, h) in enumerate(MODELS):
        res[k, :len(r)] = r
        thk[k, :len(h)] = h
    OUT.parent.mkdir(exist_ok=True)
    np.savez_compressed(
        OUT, times=TIMES, components=np.array(COMPONENTS), wire=np.array(WIRE),
        offsets=np.array(list(OFFSETS)), receivers=np.array(list(OFFSETS.values())),
        resistivity=res, thickness=thk, model=np.array([r[0] for r in rows]),
        offset=np.array([r[1] for r in rows]), data=np.array([r[2] for r in rows]))
    print(f"wrote {OUT}", file=sys.stderr)


if __name__ == "__main__":
    main()
