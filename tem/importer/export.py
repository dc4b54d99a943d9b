"""Gated soundings written back in the import format: a decay CSV and a system TOML.

``tem decays`` calls :func:`write_decays`; ``tem import`` of the two files
gives gated soundings with the same values, errors, usable flags, gates,
geometry and waveform (numbers written with 17 significant digits, so a
round trip is exact). All soundings must share one transmitter, waveform and
receiver filter (one system file describes one set-up).
"""
from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from ..errors import input_error

__all__ = ["decays_texts", "write_decays"]

_SYSTEM_ATTRS = ("tx_kind", "tx_points", "tx_current", "base_frequency", "duty_cycle", "ramp_on",
                 "ramp_off", "lowpass_order", "lowpass_cutoff", "gate_shape", "response",
                 "sampling", "waveform_times", "waveform_current", "waveform_half_period", "epsg")


def _g(x) -> str:
    return repr(float(x))


def _system_key(ds):
    out = []
    for k in _SYSTEM_ATTRS:
        v = ds.attrs.get(k)
        out.append(tuple(np.ravel(v).tolist()) if isinstance(v, np.ndarray) else v)
    return tuple(out)


def _waveform_table(a) -> dict:
    resp = str(a.get("response", "waveform"))
    if resp != "waveform":
        return {"kind": resp}
    if "waveform_times" in a:
        w = {"kind": "table", "times": np.ravel(a["waveform_times"]).astype(float).tolist(),
             "current": np.ravel(a["waveform_current"]).astype(float).tolist()}
        hp = float(a.get("waveform_half_period", 0.0) or 0.0)
        if hp > 0:
            w["half_period"] = hp
        return w
    return {"kind": "bipolar", "base_frequency": float(a["base_frequency"]),
            "duty_cycle": float(a.get("duty_cycle", 0.5)), "ramp_on": float(a.get("ramp_on", 0.0)),
            "ramp_off": float(a.get("ramp_off", 0.0)), "time_zero": "ramp-end"}


def decays_texts(datasets, names=None):
    """(CSV text, TOML text) of gated-sounding Datasets of one set-up."""
    import tomli_w

    names = names or [str(d.attrs.get("station", i)) for i, d in enumerate(datasets)]
    first = datasets[0]
    key = _system_key(first)
    for ds, name in zip(datasets[1:], names[1:]):
        if _system_key(ds) != key:
            raise input_error("transmitter", "differs from the first sounding's; write one "
                              "decay file per transmitter set-up", name)
    a = first.attrs
    point = str(a.get("sampling", "window")) == "point"
    buf = io.StringIO()
    buf.write("# tem decays: one row per station, component and gate (docs/import.md)\n")
    buf.write("# unit.ex = V/m/A\n# unit.ey = V/m/A\n# unit.bz = T/A\n# unit.dbxdt = T/s/A\n"
              "# unit.dbydt = T/s/A\n# unit.dbzdt = T/s/A\n")
    buf.write("station,component," + ("time_s" if point else "gate_open_s,gate_close_s")
              + ",value,error,usable\n")
    stations = []
    for ds in datasets:
        sid = str(ds.attrs["station"])
        go, gc = ds["gate_open"].values, ds["gate_close"].values
        chans = {}
        for c in range(ds.sizes["channel"]):
            comp = str(ds["component"].values[c])
            v, e = ds["value"].values[c], ds["error"].values[c]
            u = np.asarray(ds["usable"].values[c], bool)
            for g in range(go.size):
                if not (np.isfinite(v[g]) and np.isfinite(e[g])):
                    continue
                t = _g(ds["gate_centre"].values[g]) if point else f"{_g(go[g])},{_g(gc[g])}"
                buf.write(f"{sid},{comp},{t},{_g(v[g])},{_g(e[g])},{int(u[g])}\n")
            x0, y0, x1, y1 = (float(ds[k].values[c]) for k in ("rx_x0", "rx_y0", "rx_x1", "rx_y1"))
            if comp in ("ex", "ey"):
                chans[comp] = {"dipole": [[x0, y0], [x1, y1]]}
            else:
                chans[comp] = {}
                if (x0, y0) != (float(ds.attrs["x"]), float(ds.attrs["y"])):
                    chans[comp]["position"] = [x0, y0]
                area = float(ds["coil_area"].values[c]) if "coil_area" in ds else np.nan
                if np.isfinite(area):
                    chans[comp]["coil_area"] = area
        stations.append({"id": sid, "x": float(ds.attrs["x"]), "y": float(ds.attrs["y"]),
                         "z": float(ds.attrs.get("z", 0.0)), **chans})
    pts = np.asarray(a["tx_points"], float).reshape(-1, 2).tolist()
    system = {
        "epsg": int(a.get("epsg", 0) or 0),
        "transmitter": {"kind": str(a["tx_kind"]), "points": pts,
                        "current": float(a.get("tx_current", 1.0))},
        "waveform": _waveform_table(a),
        "receiver": {"normalised": True, "lowpass_order": int(a.get("lowpass_order", 0) or 0),
                     "lowpass_cutoff": float(a.get("lowpass_cutoff", 0.0) or 0.0),
                     "gate_shape": str(a.get("gate_shape", "boxcar"))},
        "station": stations,
    }
    return buf.getvalue(), tomli_w.dumps(system)


def write_decays(gated_files, csv_path, toml_path):
    """Write gated files as a decay CSV and a system TOML (atomically); returns both paths."""
    from ..io.atomic import write_text_atomic
    from ..io.stacked import read_product

    files = [Path(f) for f in gated_files]
    if not files:
        raise input_error("gated", "no gated files given")
    datasets = [read_product(f, "gated") for f in files]
    csv_text, toml_text = decays_texts(datasets, [str(f) for f in files])
    return write_text_atomic(csv_path, csv_text), write_text_atomic(toml_path, toml_text)
