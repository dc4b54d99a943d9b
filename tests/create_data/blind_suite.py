"""Generate the blind suite: noisy gated soundings computed with empymod, not with tem.

Run from the repository root::

    python tests/create_data/blind_suite.py          # writes tests/data/blind_suite.npz

empymod (Werthmueller 2017, Geophysics 82(6), WB9-WB19) is run quasi-statically
(epermH = epermV = 0), source and receivers 1e-4 m below the surface, default
Hankel (key_201_2009) and Fourier (key_201_2012, lagged convolution) filters,
21 points along the wire. Its step-off responses are turned into what a gated
file holds (docs/data-model.md, "Gated sounding file") independently of
tem.forward:

* the periodic bipolar waveform (base frequency 0.25 Hz, duty 0.5, linear
  ramps on 1 ms and off 0.1 ms, time zero at the end of the switch-off ramp)
  by superposition: the response to a current I(t) measured in the off-time is
  ``-int I'(tau) s(t - tau) dtau`` (s: step-off response), summed over 40
  past half-cycles of alternating sign, the last two partial sums averaged;
  ramps by 8-point Gauss-Legendre quadrature;
* boxcar gate averages by 8-point Gauss-Legendre quadrature in log time;
* the step-off response between the empymod times by a cubic spline in
  log time (64 times per decade).

Geometry (ours: x east, y north, z up): a 1.5 km grounded wire from (-750, 0)
to (750, 0) m; each sounding has one receiver point with Ex (a point dipole)
and dBz/dt, broadside (on the perpendicular through the wire's centre) at
distance ``offset`` from the centre. At the short offsets (0.5-0.8 km) Ex
reverses sign during the decay for the models with a conductive layer over a
resistor (subsalt, basalt, cover); the clay cap's does not. Noise: 3 % of |value| plus a floor per
component, seeded (``numpy.random.default_rng(20261202)``); the stated error is
``sqrt((0.03 |true|)^2 + floor^2)``; gates whose true value is below the floor
are marked not usable (as a gate stage would).

The file holds only numeric and string arrays (read with allow_pickle=False).
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline

MU0 = 4e-7 * np.pi
Z = 1e-4                       # source and receivers below the surface, m
SEED = 20261202
REL_NOISE = 0.03
FLOOR = {"ex": 2e-11, "dbzdt": 2e-13}   # per ampere: V/m/A and T/s/A (~1 nV/m, 10 pT/s at 40 A)
WIRE = ((-750.0, 0.0), (750.0, 0.0))
AZIMUTH = 90.0                 # degrees from the wire (x axis): broadside
WAVE = dict(base_frequency=0.25, duty_cycle=0.5, ramp_on=1e-3, ramp_off=1e-4)
N_GATES, T_FIRST, T_LAST = 32, 1e-4, 1.0
N_HALF = 40
COMPONENTS = ("ex", "dbzdt")

# name: (thickness m, resistivity ohm-m, target layer, target kind, offset m)
# target kind "top": depth to the top of the target layer and its resistivity;
# "base": depth to the base of the target layer (a cap's base) and its resistivity.
MODELS = {
    "subsalt":          ([300.0, 700.0, 400.0], [20.0, 1000.0, 2.0, 50.0], 2, "top"),
    "basalt_thin_near": ([100.0, 800.0, 200.0], [10.0, 500.0, 5.0, 1000.0], 2, "top"),
    "basalt_thin_doi":  ([100.0, 1500.0, 250.0], [10.0, 500.0, 4.0, 1000.0], 2, "top"),
    "clay_cap":         ([100.0, 300.0], [50.0, 3.0, 30.0], 1, "base"),
    "cover":            ([50.0, 500.0], [5.0, 200.0, 10.0], 2, "top"),
    "basement":         ([100.0, 800.0], [20.0, 3.0, 1000.0], 1, "base"),
}
CASES = [
    ("subsalt", 800.0), ("subsalt", 1500.0),
    ("basalt_thin_near", 600.0), ("basalt_thin_near", 1500.0), ("basalt_thin_near", 2500.0),
    ("basalt_thin_doi", 1500.0), ("basalt_thin_doi", 2500.0),
    ("clay_cap", 400.0), ("clay_cap", 1500.0),
    ("cover", 600.0), ("cover", 2500.0),
    ("basement", 1500.0), ("basement", 2500.0),
]


def gates():
    edges = np.geomspace(T_FIRST, T_LAST, N_GATES + 1)
    return edges[:-1], edges[1:]


def step_off(thickness, resistivity, rx, t):
    """empymod step-off Ex (V/m/A) and dBz/dt (T/s/A) at receiver rx (ours) and times t."""
    import empymod

    depth = np.r_[0.0, np.cumsum(thickness)]
    res = np.r_[2e14, resistivity]
    common = dict(depth=depth, res=res, freqtime=t, strength=1, verb=0, srcpts=21,
                  epermH=np.zeros(res.size), epermV=np.zeros(res.size))
    (ax, ay), (bx, by) = WIRE
    src = [ax, bx, -ay, -by, Z, Z]          # ours (x, y, z) = empymod (x, -y, -z)
    x, y = rx[0], -rx[1]
    ex = np.asarray(empymod.bipole(src, [x, y, Z, 0.0, 0.0], signal=-1, **common)).real
    dbz = MU0 * np.asarray(empymod.bipole(src, [x, y, Z, 0.0, 90.0], signal=0, mrec=True,
                                          **common)).real   # -(-mu0 h_impulse), z flipped
    return {"ex": ex, "dbzdt": dbz}


def waveform_gates(s_of, go, gc):
    """Gate averages of the bipolar-waveform response from a step-off function s_of(t)."""
    xg, wg = np.polynomial.legendre.leggauss(8)
    sg = 0.5 * (xg + 1.0)
    la, lb = np.log(go)[:, None], np.log(gc)[:, None]
    tn = np.exp(la + sg[None, :] * (lb - la))                # gate nodes (n_gate, 8)
    wn = tn * 0.5 * wg[None, :]
    wn = wn / wn.sum(axis=1, keepdims=True)
    hp = 0.5 / WAVE["base_frequency"]
    on = WAVE["duty_cycle"] * hp
    r_on, r_off = WAVE["ramp_on"], WAVE["ramp_off"]

    def pulse(t):
        # one positive pulse ending (end of ramp off) at time 0, observed at t > 0:
        # -int I' s(t - tau): ramp off (I' = -1/r_off on [-r_off, 0]) and ramp on
        # (I' = 1/r_on on [-on, -on + r_on])
        u_off = r_off * sg                                 # tau = -u
        u_on = on - r_on * sg
        a = (s_of(t[..., None] + u_off) * 0.5 * wg).sum(-1)
        b = (s_of(t[..., None] + u_on) * 0.5 * wg).sum(-1)
        return a - b

    partial = []
    total = np.zeros_like(tn)
    for k in range(N_HALF + 1):
        total = total + (-1.0) ** k * pulse(tn + k * hp)
        partial.append(total.copy())
    resp = 0.5 * (partial[-1] + partial[-2])
    return (resp * wn).sum(axis=1)


def receiver(offset):
    a = np.deg2rad(AZIMUTH)
    return (offset * np.cos(a), offset * np.sin(a))


def sounding(thickness, resistivity, offset):
    """Noise-free gate values (n_component, n_gate) of one model and offset."""
    go, gc = gates()
    hp = 0.5 / WAVE["base_frequency"]
    t_lo = go[0] * 0.5
    t_hi = gc[-1] + (N_HALF + 1) * hp + 1.0
    n = int(np.ceil(np.log10(t_hi / t_lo) * 64)) + 1
    tgrid = np.geomspace(t_lo, t_hi, n)
    s = step_off(thickness, resistivity, receiver(offset), tgrid)
    out = []
    for c in COMPONENTS:
        spl = CubicSpline(np.log(tgrid), s[c])
        out.append(waveform_gates(lambda t, spl=spl: spl(np.log(t)), go, gc))
    return np.array(out)


def add_noise(d, rng):
    """The suite's noise on noise-free gate values d (n_component, n_gate): returns the noisy
    values, the stated errors ``sqrt((0.03 |d|)^2 + floor^2)`` and the usable mask (|d| > floor)."""
    floor = np.array([FLOOR[c] for c in COMPONENTS])[:, None]
    err = np.sqrt((REL_NOISE * np.abs(d)) ** 2 + floor ** 2)
    noisy = d + err * rng.standard_normal(d.shape)
    return noisy, err, np.abs(d) > floor


def main(path="tests/data/blind_suite.npz"):
    rng = np.random.default_rng(SEED)
    go, gc = gates()
    names, offsets, values, errors, usable, truth = [], [], [], [], [], []
    rx_xy = []
    maxl = max(len(m[1]) for m in MODELS.values())
    res_arr, thk_arr, tgt = [], [], []
    for name, off in CASES:
        thk, rho, layer, kind = MODELS[name]
        d = sounding(thk, rho, off)
        noisy, err, use = add_noise(d, rng)
        names.append(name)
        offsets.append(off)
        rx_xy.append(receiver(off))
        values.append(noisy)
        errors.append(err)
        usable.append(use)
        truth.append(d)
        res_arr.append(np.pad(np.asarray(rho, float), (0, maxl - len(rho)), constant_values=np.nan))
        thk_arr.append(np.pad(np.asarray(thk, float), (0, maxl - len(rho)), constant_values=np.nan))
        z = np.r_[0.0, np.cumsum(thk)]
        depth = z[layer] if kind == "top" else z[layer + 1]
        tgt.append((layer, 0 if kind == "top" else 1, depth, rho[layer]))
        sgn = np.sign(d[0])
        print(f"{name:18s} {off:6.0f} m  Ex sign changes {int(np.sum(sgn[1:] != sgn[:-1]))}, "
              f"usable {int(usable[-1].sum())}/{d.size}", file=sys.stderr)
    tgt = np.array(tgt)
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    np.savez_compressed(
        path, case=np.array(names), offset=np.array(offsets), rx_xy=np.array(rx_xy),
        value=np.array(values), error=np.array(errors), usable=np.array(usable),
        noise_free=np.array(truth), gate_open=go, gate_close=gc, component=np.array(COMPONENTS),
        tx_points=np.ravel(WIRE).astype(float), waveform=np.array(
            [WAVE["base_frequency"], WAVE["duty_cycle"], WAVE["ramp_on"], WAVE["ramp_off"]]),
        true_resistivity=np.array(res_arr), true_thickness=np.array(thk_arr),
        target_layer=tgt[:, 0].astype(int), target_is_base=tgt[:, 1].astype(bool),
        target_depth=tgt[:, 2], target_resistivity=tgt[:, 3], seed=np.array(SEED))
    print(f"wrote {path} ({Path(path).stat().st_size} bytes)", file=sys.stderr)


if __name__ == "__main__":
    main(*sys.argv[1:])
