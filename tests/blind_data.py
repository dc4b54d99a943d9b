"""The blind suite (tests/data/blind_suite.npz, made by tests/create_data/blind_suite.py)
as gated-sounding Datasets (docs/data-model.md), read by the inversion exactly as real
gated files are (``tem.invert.data.station_data``)."""
from pathlib import Path

import numpy as np

PATH = Path(__file__).parent / "data" / "blind_suite.npz"


def load():
    """A list of dicts: ``name``, ``offset``, ``ds`` (gated Dataset) and the truth
    (``resistivity``, ``thickness``, ``target_layer``, ``target_is_base``,
    ``target_depth``, ``target_resistivity``)."""
    import xarray as xr

    z = np.load(PATH, allow_pickle=False)
    go, gc = z["gate_open"], z["gate_close"]
    comps = np.array([str(c) for c in z["component"]])
    nch = comps.size
    bf, duty, r_on, r_off = (float(v) for v in z["waveform"])
    out = []
    for i, name in enumerate(z["case"]):
        x, y = (float(v) for v in z["rx_xy"][i])
        ds = xr.Dataset(
            {"value": (("channel", "gate"), z["value"][i]),
             "error": (("channel", "gate"), z["error"][i]),
             "usable": (("channel", "gate"), z["usable"][i]),
             "noise_floor": ("channel", np.zeros(nch)),
             "gate_open": ("gate", go), "gate_close": ("gate", gc),
             "gate_centre": ("gate", np.sqrt(go * gc)),
             "component": ("channel", comps),
             "rx_x0": ("channel", np.full(nch, x)), "rx_y0": ("channel", np.full(nch, y)),
             "rx_x1": ("channel", np.full(nch, x)), "rx_y1": ("channel", np.full(nch, y)),
             "coil_area": ("channel", np.array([np.nan if c.startswith("e") else 1.0
                                               for c in comps]))},
            attrs=dict(station=f"B{i:02d}", x=x, y=y, z=0.0, epsg=0, gate_shape="boxcar",
                       time_reference="end of switch-off ramp", normalisation="per ampere",
                       tx_kind="wire", tx_points=z["tx_points"], tx_current=1.0,
                       base_frequency=bf, duty_cycle=duty, ramp_on=r_on, ramp_off=r_off,
                       lowpass_order=0, lowpass_cutoff=0.0))
        rho = z["true_resistivity"][i]
        thk = z["true_thickness"][i]
        out.append(dict(name=str(name), offset=float(z["offset"][i]), ds=ds,
                        resistivity=rho[np.isfinite(rho)], thickness=thk[np.isfinite(thk)],
                        target_layer=int(z["target_layer"][i]),
                        target_is_base=bool(z["target_is_base"][i]),
                        target_depth=float(z["target_depth"][i]),
                        target_resistivity=float(z["target_resistivity"][i])))
    return out
