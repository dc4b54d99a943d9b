"""Synthetic Emberline Plateau soundings for inversion studies, tests and benchmarks.

The fictional Emberline Plateau survey: a 1.5 km east-west grounded wire
from (-750, 800) to (750, 800) m, 40 A, bipolar with off-time (duty 0.5) at
0.25 Hz; stations every 1 km on an east-west profile y = 0, x = -5500..5500
m; Ex and dBz/dt. Earth: 20 m of 30 ohm-m, 500 ohm-m basalt thickening from
900 m (west end) to 1600 m (east end), 600 m of 8 ohm-m sediments, 2000 ohm-m
basement. Gated responses come straight from :mod:`tem.forward` with seeded
Gaussian noise (relative to each value); no stacking stage involved.
"""
from __future__ import annotations

import numpy as np

__all__ = ["EMBERLINE", "emberline_model", "emberline_gates", "emberline_simulation",
           "gated_dataset", "emberline_station", "emberline_profile_x", "basalt_thickness"]

EMBERLINE = dict(
    wire=((-750.0, 800.0), (750.0, 800.0)), current=40.0, base_frequency=0.25, duty_cycle=0.5,
    ramp_on=1e-3, ramp_off=5e-4, x_west=-5500.0, x_east=5500.0, top=(20.0, 30.0),
    basalt=(500.0, 900.0, 1600.0), sediment=(8.0, 600.0), basement=2000.0,
)


def emberline_profile_x(spacing=1000.0):
    """Station positions x (m) on the profile, west to east."""
    return np.arange(EMBERLINE["x_west"], EMBERLINE["x_east"] + 0.5 * spacing, spacing)


def basalt_thickness(x):
    """Basalt thickness (m) at profile position x (m): 900 m west to 1600 m east, linear."""
    e = EMBERLINE
    f = (np.asarray(x, float) - e["x_west"]) / (e["x_east"] - e["x_west"])
    return e["basalt"][1] + f * (e["basalt"][2] - e["basalt"][1])


def emberline_model(x):
    """True layered model (thickness m, resistivity ohm-m) at position x (m)."""
    from ..forward import LayeredModel
    e = EMBERLINE
    return LayeredModel(thickness=[e["top"][0], float(basalt_thickness(x)), e["sediment"][1]],
                        resistivity=[e["top"][1], e["basalt"][0], e["sediment"][0], e["basement"]])


def emberline_gates(n_gates=31, t_first=1e-3, t_last=1.0):
    """Log-spaced contiguous boxcar gates: (open, close) arrays in s."""
    edges = np.geomspace(t_first, t_last, n_gates + 1)
    return edges[:-1], edges[1:]


def emberline_simulation(x, components=("ex", "dbzdt"), gates=None, waveform=True):
    """Forward simulation of one station (per ampere): the Emberline waveform, or a step-off."""
    from ..forward import Receiver, Simulation, Waveform, Wire
    e = EMBERLINE
    gates = emberline_gates() if gates is None else gates
    rx = [Receiver(c, (float(x), 0.0)) for c in components]
    src = Wire(a=e["wire"][0], b=e["wire"][1])
    if waveform:
        wf = Waveform.bipolar(base_frequency=e["base_frequency"], duty_cycle=e["duty_cycle"],
                              ramp_on=e["ramp_on"], ramp_off=e["ramp_off"])
        return Simulation(src, rx, gates=gates, gate_shape="boxcar", waveform=wf)
    return Simulation(src, rx, gates=gates, gate_shape="boxcar", response="step-off")


def gated_dataset(station, x, y, value, error, components, gates, usable=None, waveform=True):
    """A gated-sounding Dataset per docs/data-model.md (synthetic: no stacking record)."""
    import xarray as xr

    from .. import __version__
    from ..provenance import records_to_json, stage_record
    e = EMBERLINE
    value = np.asarray(value, float)
    nch, ng = value.shape
    go, gc = (np.asarray(g, float) for g in gates)
    usable = np.ones(value.shape, bool) if usable is None else np.asarray(usable, bool)
    comps = np.array(list(components), dtype=str)
    coil = np.array([np.nan if c.startswith("e") else 1.0 for c in comps])
    ds = xr.Dataset(
        {
            "value": (("channel", "gate"), value),
            "error": (("channel", "gate"), np.asarray(error, float)),
            "usable": (("channel", "gate"), usable),
            "noise_floor": ("channel", np.zeros(nch)),
            "gate_open": ("gate", go), "gate_close": ("gate", gc), "gate_centre": ("gate", np.sqrt(go * gc)),
            "component": ("channel", comps),
            "rx_x0": ("channel", np.full(nch, float(x))), "rx_y0": ("channel", np.full(nch, float(y))),
            "rx_x1": ("channel", np.full(nch, float(x))), "rx_y1": ("channel", np.full(nch, float(y))),
            "coil_area": ("channel", coil),
        },
        attrs=dict(
            station=str(station), x=float(x), y=float(y), z=0.0, epsg=0, gate_shape="boxcar",
            time_reference="end of switch-off ramp", normalisation="per ampere",
            tx_kind="wire", tx_points=np.array([*e["wire"][0], *e["wire"][1]], float),
            tx_current=e["current"],
            base_frequency=e["base_frequency"] if waveform else 0.0,
            duty_cycle=e["duty_cycle"] if waveform else 0.0,
            ramp_on=e["ramp_on"] if waveform else 0.0, ramp_off=e["ramp_off"] if waveform else 0.0,
            lowpass_order=0, lowpass_cutoff=0.0,
            response="waveform" if waveform else "step-off", sampling="window",
            tem_format="gated", format_version="1.2", tem_version=__version__,
            provenance=records_to_json([stage_record("synthetic", {"scenario": "Emberline Plateau"})]),
        ),
    )
    return ds


def emberline_station(x, noise=0.03, seed=0, components=("ex", "dbzdt"), gates=None, model=None,
                      sim=None, error=None):
    """Noisy gated data of one Emberline station.

    Returns (value, error, simulation, true model); ``value`` and ``error``
    have shape (n_components, n_gates), per ampere. The stated error is
    ``error |true|`` (``error`` defaults to ``noise``, or 3 % for noise-free
    data) and the added noise is ``noise |true| N(0, 1)`` (seeded).
    """
    gates = emberline_gates() if gates is None else gates
    sim = emberline_simulation(x, components, gates) if sim is None else sim
    model = emberline_model(x) if model is None else model
    d = sim.predict(model)
    rng = np.random.default_rng(seed)
    rel = (noise if noise > 0 else 0.03) if error is None else error
    noisy = d + noise * np.abs(d) * rng.standard_normal(d.shape)
    return noisy, rel * np.abs(d), sim, model


def lci_vs_stitched(xs=None, n_gates=31, noise=0.03, seed=100, settings=None,
                    progress=None):
    """Laterally constrained vs stitched independent smooth inversions on the Emberline profile.

    Both use one shared mesh (the LCI mesh) and the same noisy data
    (station ``i`` seeded with ``seed + i``); the LCI starts from the
    stitched models (``time_lci`` is the joint part only). The top of the
    sediments is picked on every smooth model where ln(rho), going up from
    the most conductive point between 50 m and the station's LCI DOI, rises
    above the geometric mean of basalt and sediment resistivity
    (sqrt(500 * 8) = 63 ohm-m) (:func:`tem.invert.lci.pick_depth`).

    Returns a dict: ``x``, ``true_depth``, ``pick_lci``, ``pick_stitched``,
    ``rms_lci``, ``rms_stitched`` (m, over the stations where both picks
    exist), ``chi2_lci``, ``chi2_stitched``, ``doi_lci``, ``mesh``, the two
    log-resistivity sections and timings (s).
    """
    import time

    from .data import station_data_from_arrays
    from .lci import pick_depth
    from .station import InversionSettings, lci_mesh, lci_profile, smooth_station

    settings = settings or InversionSettings()
    xs = emberline_profile_x() if xs is None else np.asarray(xs, float)
    gates = emberline_gates(n_gates)
    centre = np.sqrt(gates[0] * gates[1])
    sds = []
    for i, x in enumerate(xs):
        v, e, sim, _ = emberline_station(x, noise=noise, seed=seed + i, gates=gates)
        sds.append(station_data_from_arrays(sim, v, e, ["ex", "dbzdt"], station=f"E{i:02d}", x=x,
                                            gate_centre=centre))
    e = EMBERLINE
    thr = np.sqrt(e["basalt"][0] * e["sediment"][0])
    t0 = time.perf_counter()
    h, _ = lci_mesh(sds, settings)
    ind = []
    for sd in sds:
        ind.append(smooth_station(sd, settings, h=h)[0])
        if progress:
            progress({"station": sd.station, "chi2": ind[-1].chi2})
    t_ind = time.perf_counter() - t0
    t0 = time.perf_counter()
    lres = lci_profile(sds, settings, callback=progress,
                       m0=np.array([r.m for r in ind]), mesh=h)
    t_lci = time.perf_counter() - t0
    true = e["top"][0] + basalt_thickness(xs)
    p_l = np.array([pick_depth(h, np.log(r.resistivity), thr, below=50.0, max_depth=r.doi)
                    for r in lres])
    p_s = np.array([pick_depth(h, r.m, thr, below=50.0, max_depth=d)
                    for r, d in zip(ind, [q.doi for q in lres])])
    both = np.isfinite(p_l) & np.isfinite(p_s)

    def rms(p):
        return float(np.sqrt(np.mean((p[both] - true[both]) ** 2))) if both.any() else float("nan")

    return dict(x=xs, true_depth=true, pick_lci=p_l, pick_stitched=p_s, rms_lci=rms(p_l),
                rms_stitched=rms(p_s), n_compared=int(both.sum()),
                chi2_lci=np.array([r.chi2 for r in lres]), chi2_stitched=np.array([r.chi2 for r in ind]),
                doi_lci=np.array([r.doi for r in lres]), mesh=h,
                log_rho_lci=np.array([np.log(r.resistivity) for r in lres]),
                log_rho_stitched=np.array([r.m for r in ind]), time_lci=t_lci, time_stitched=t_ind)


__all__ += ["lci_vs_stitched"]
