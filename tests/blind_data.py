"""The blind suite (tests/data/blind_suite.npz, made by tests/create_data/blind_suite.py)
as gated-sounding Datasets (docs/data-model.md), read by the inversion exactly as real
gated files are (``tem.invert.data.station_data``)."""
from pathlib import Path

import numpy as np

PATH = Path(__file__).parent / "data" / "blind_suite.npz"


def gated_dataset(value, error, usable, rx_xy, gate_open, gate_close, component, waveform,
                  tx_points, station):
    """One sounding's arrays (as the suite's file holds them) as a gated-sounding Dataset."""
    import xarray as xr

    go, gc = np.asarray(gate_open), np.asarray(gate_close)
    comps = np.array([str(c) for c in component])
    nch = comps.size
    bf, duty, r_on, r_off = (float(v) for v in waveform)
    x, y = (float(v) for v in rx_xy)
    return xr.Dataset(
        {"value": (("channel", "gate"), value),
         "error": (("channel", "gate"), error),
         "usable": (("channel", "gate"), usable),
         "noise_floor": ("channel", np.zeros(nch)),
         "gate_open": ("gate", go), "gate_close": ("gate", gc),
         "gate_centre": ("gate", np.sqrt(go * gc)),
         "component": ("channel", comps),
         "rx_x0": ("channel", np.full(nch, x)), "rx_y0": ("channel", np.full(nch, y)),
         "rx_x1": ("channel", np.full(nch, x)), "rx_y1": ("channel", np.full(nch, y)),
         "coil_area": ("channel", np.array([np.nan if c.startswith("e") else 1.0
                                           for c in comps]))},
        attrs=dict(station=station, x=x, y=y, z=0.0, epsg=0, gate_shape="boxcar",
                   time_reference="end of switch-off ramp", normalisation="per ampere",
                   tx_kind="wire", tx_points=np.asarray(tx_points, float), tx_current=1.0,
                   base_frequency=bf, duty_cycle=duty, ramp_on=r_on, ramp_off=r_off,
                   lowpass_order=0, lowpass_cutoff=0.0))


def load():
    """A list of dicts: ``name``, ``offset``, ``ds`` (gated Dataset) and the truth
    (``resistivity``, ``thickness``, ``target_layer``, ``target_is_base``,
    ``target_depth``, ``target_resistivity``)."""
    z = np.load(PATH, allow_pickle=False)
    out = []
    for i, name in enumerate(z["case"]):
        ds = gated_dataset(z["value"][i], z["error"][i], z["usable"][i], z["rx_xy"][i],
                           z["gate_open"], z["gate_close"], z["component"], z["waveform"],
                           z["tx_points"], f"B{i:02d}")
        rho = z["true_resistivity"][i]
        thk = z["true_thickness"][i]
        out.append(dict(name=str(name), offset=float(z["offset"][i]), ds=ds,
                        resistivity=rho[np.isfinite(rho)], thickness=thk[np.isfinite(thk)],
                        target_layer=int(z["target_layer"][i]),
                        target_is_base=bool(z["target_is_base"][i]),
                        target_depth=float(z["target_depth"][i]),
                        target_resistivity=float(z["target_resistivity"][i])))
    return out
