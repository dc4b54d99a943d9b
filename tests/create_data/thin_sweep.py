"""Thickness sweep of the blind suite's basalt conductor: where is its resistivity resolved?

Run from the repository root::

    nice -n 10 python tests/create_data/thin_sweep.py     # markdown table on stdout
    nice -n 10 python tests/create_data/thin_sweep.py 300 375 450 --realisations 3

The model is basalt_thin_near of the blind suite (tests/create_data/blind_suite.py):
100 m of 10 ohm-m cover, 800 m of 500 ohm-m basalt, a 5 ohm-m conductor with its top
at 900 m and a 1000 ohm-m basement; only the conductor's thickness changes
(THICKNESSES). Each sounding (offsets 0.6 and 1.5 km broadside of the 1.5 km wire,
Ex and dBz/dt, the suite's waveform, 32 gates and noise model) is computed with the
suite's empymod machinery (``blind_suite.sounding`` and ``blind_suite.add_noise``;
empymod: Werthmueller 2017, Geophysics 82(6), WB9-WB19), with its own fixed seed
``(SEED, thickness, offset)`` (further noise realisations r: ``(SEED, thickness, offset, r)``)
so that any one case can be remade alone (the slow test
in tests/test_invert_blind.py does). Each is read as a gated file
(``blind_data.gated_dataset`` -> ``tem.invert.data.station_data``) and inverted with the
tool's defaults, ``InversionSettings(kind="few-layer")``, exactly as
tests/test_invert_blind.py does (never started from the truth); the target layer and
its numbers are those of ``test_invert_blind.judge``.

Stdout: the markdown table of docs/inversion.md ("Where a conductor's resistivity is
resolved"); stderr: one JSON line per case. Nothing is written to the repository.
Cost: about 2-3 s CPU of empymod (plus its import) and 8-25 s of inversion per case, about
4 min for the default 10 cases.
"""
from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE), str(HERE.parent)]

from blind_data import gated_dataset  # noqa: E402
from blind_suite import (COMPONENTS, MODELS, SEED, WAVE, WIRE, add_noise, gates,  # noqa: E402
                         receiver, sounding)

BASE = "basalt_thin_near"
THICKNESSES = (100.0, 200.0, 300.0, 450.0, 600.0)
OFFSETS = (600.0, 1500.0)


def model(thickness):
    """Layer thicknesses and resistivities of the base model with the conductor ``thickness`` m."""
    thk, rho, layer, _ = MODELS[BASE]
    thk = list(thk)
    thk[layer] = float(thickness)
    return thk, list(rho), layer


def case(thickness, offset, realisation=0):
    """One noisy sounding of the sweep as a case dict of tests/test_invert_blind.py; the
    noise of ``realisation`` r > 0 is seeded ``(SEED, thickness, offset, r)``."""
    thk, rho, layer = model(thickness)
    d = sounding(thk, rho, offset)
    seed = [SEED, int(thickness), int(offset)] + ([int(realisation)] if realisation else [])
    rng = np.random.default_rng(seed)
    value, error, usable = add_noise(d, rng)
    go, gc = gates()
    ds = gated_dataset(value, error, usable, receiver(offset), go, gc, COMPONENTS,
                       [WAVE["base_frequency"], WAVE["duty_cycle"], WAVE["ramp_on"],
                        WAVE["ramp_off"]], np.ravel(WIRE), f"T{int(thickness)}")
    top = float(np.r_[0.0, np.cumsum(thk)][layer])
    return dict(name=f"{BASE}_h{int(thickness)}", offset=float(offset), ds=ds,
                resistivity=np.asarray(rho, float), thickness=np.asarray(thk, float),
                target_layer=layer, target_is_base=False, target_depth=top,
                target_resistivity=float(rho[layer]))


def invert(c):
    """The sweep's numbers of one case (``test_invert_blind.judge`` plus the verdicts)."""
    from test_invert_blind import judge, within

    from tem.invert.data import station_data
    from tem.invert.station import InversionSettings, invert_station

    res = invert_station(station_data(c["ds"]), InversionSettings(kind="few-layer"))
    j = judge(c, res.few)
    j.update(layers=int(res.few["resistivity"].size),
             rho_ok=bool(within(j["rho"], j["rho_true"])),
             S_ok=bool(within(j["S"], j["S_true"])),
             narrow=bool(j["hi"] / j["lo"] < 1.5 ** 2),
             inside=bool(j["lo"] <= j["rho_true"] <= j["hi"]))
    return j


def yn(b):
    return "yes" if b else "no"


def main(argv=()):
    """``thin_sweep.py [THICKNESS ...] [--realisations N]``: the given thicknesses (default
    THICKNESSES), each with noise realisations 0..N-1 (default 1; 0 is the table's)."""
    argv = list(argv)
    n_real = 1
    if "--realisations" in argv:
        i = argv.index("--realisations")
        n_real = int(argv[i + 1])
        del argv[i:i + 2]
    thicknesses = [float(a) for a in argv] or THICKNESSES
    print("| thickness m | thickness/depth | offset km | chi2 | layers | top m (true) | "
          "resistivity ohm-m (true) | 95 % range ohm-m | range factor | thickness m (fit) | "
          "conductance S (true) | rho within 1.5x | range < 1.5^2 | CPU s |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|---|---|")
    for h, off, r in ((h, off, r) for h in thicknesses for r in range(n_real) for off in OFFSETS):
        t0 = time.process_time()
        c = case(h, off, r)
        t1 = time.process_time()
        j = invert(c)
        t2 = time.process_time()
        label = f"{h:.0f} (noise {r})" if r else f"{h:.0f}"
        print(f"| {label} | {h / c['target_depth']:.2f} | {off / 1000:.1f} | {j['chi2']:.2f} | "
              f"{j['layers']} | {j['z']:.0f} ({j['z_true']:.0f}) | {j['rho']:.3g} "
              f"({j['rho_true']:.3g}) | {j['lo']:.3g}-{j['hi']:.3g} | {j['hi'] / j['lo']:.3g} | "
              f"{j['h']:.0f} | {j['S']:.3g} ({j['S_true']:.3g}) | {yn(j['rho_ok'])} | "
              f"{yn(j['narrow'])} | {t2 - t1:.1f} |", flush=True)
        row = {k: (round(v, 4) if isinstance(v, float) else v) for k, v in j.items()}
        row.update(thickness=h, offset=off, realisation=r, cpu_empymod_s=round(t1 - t0, 1),
                   cpu_invert_s=round(t2 - t1, 1))
        print(json.dumps(row), file=sys.stderr, flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
