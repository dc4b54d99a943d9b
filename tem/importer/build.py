"""From a decay CSV and a system TOML to gated soundings (docs/data-model.md, format 1.2).

One station's channels share one gate axis: the union of the gates (or point
times) of its components; a component without a row at a gate holds NaN
there, not usable. Values are brought to SI per ampere (receiver volts are
divided by gain, current and dipole length or coil area when the system says
they are not normalised), times are moved so that time zero is the end of the
switch-off ramp.
"""
from __future__ import annotations

import numpy as np

from .. import __version__
from ..errors import input_error
from ..io.stacked import GATED_VERSION
from ..provenance import records_to_json

__all__ = ["station_datasets", "sounding_dataset"]

_UNIT = {"ex": "V/m/A", "ey": "V/m/A", "bz": "T/A", "dbxdt": "T/s/A", "dbydt": "T/s/A",
         "dbzdt": "T/s/A"}


def _times(ch, sampling):
    return (ch["time"], ch["time"]) if sampling == "point" else (ch["open"], ch["close"])


def _scale(spec, comp, system, sid):
    """Factor from receiver volts to the normalised field (per A, per m or m^2)."""
    if comp == "bz":
        raise input_error(f"station.{sid}.bz", "bz must be given normalised (T/A)", system.file)
    if comp in ("ex", "ey"):
        (x0, y0), (x1, y1) = spec.dipole
        return 1.0 / (spec.gain * np.hypot(x1 - x0, y1 - y0) * system.current)
    return 1.0 / (spec.gain * spec.coil_area * system.current)


def sounding_dataset(sid, decays, system, provenance, snr_min):
    """The gated-sounding Dataset of one station (raises TemInputError)."""
    import xarray as xr

    if sid not in system.stations:
        line = next(ch["line"][0] for (s, _), ch in decays.channels.items() if s == sid)
        raise input_error("station", f"{sid} is not a [[station]] of {system.file}",
                          f"{decays.file}:{line}")
    st = system.stations[sid]
    comps = [c for (s, c) in decays.channels if s == sid]
    shift = system.time_shift()
    pairs = sorted({(a, b) for c in comps for a, b in zip(*_times(decays.channels[(sid, c)],
                                                                   decays.sampling))})
    t0 = np.array([p[0] for p in pairs]) - shift
    t1 = np.array([p[1] for p in pairs]) - shift
    if decays.sampling == "window" and np.any(t0[1:] < t1[:-1] * (1 - 1e-9)):
        raise input_error("gate_open", f"{sid}: the components' gates overlap one another; "
                          "one gate table per station", decays.file)
    bad = t0 <= 0 if decays.sampling == "point" else t0 < 0
    if np.any(bad) or (decays.sampling == "window" and np.any(t0 == 0)):
        raise input_error("time" if decays.sampling == "point" else "gate_open",
                          f"{sid}: times must be after the end of the switch-off ramp "
                          f"({shift:g} s on the file's clock)", decays.file)
    index = {p: i for i, p in enumerate(pairs)}
    n, ng = len(comps), len(pairs)
    value = np.full((n, ng), np.nan)
    error = np.full((n, ng), np.nan)
    usable = np.zeros((n, ng), bool)
    geo = np.zeros((n, 4))
    area = np.full(n, np.nan)
    for i, comp in enumerate(comps):
        ch = decays.channels[(sid, comp)]
        spec = st.channels.get(comp)
        if comp in ("ex", "ey") and spec is None:
            raise input_error(f"station.{sid}.{comp}", "E channel in the decays without a "
                              "dipole in the system file", system.file)
        if spec is None:
            from .system import ChannelSpec
            if decays.raw:
                raise input_error(f"station.{sid}.{comp}", "missing: receiver volts need the "
                                  "coil's coil_area and gain", system.file)
            spec = ChannelSpec(comp)
        fac = _scale(spec, comp, system, sid) if decays.raw else 1.0
        cols = [index[p] for p in zip(*_times(ch, decays.sampling))]
        value[i, cols] = ch["value"] * fac
        error[i, cols] = ch["error"] * fac
        ok = ch["usable"].copy()
        if snr_min > 0:
            ok &= np.abs(ch["value"]) >= snr_min * ch["error"]
        usable[i, cols] = ok
        if spec.dipole is not None:
            geo[i] = [*spec.dipole[0], *spec.dipole[1]]
        else:
            px, py = spec.position or (st.x, st.y)
            geo[i] = [px, py, px, py]
            area[i] = spec.coil_area if spec.coil_area is not None else np.nan
    centre = np.sqrt(t0 * t1)
    attrs = {
        "station": sid, "x": st.x, "y": st.y, "z": st.z, "epsg": system.epsg,
        "gate_shape": system.gate_shape, "time_reference": "end of switch-off ramp",
        "normalisation": "per ampere of peak current; E: V/m/A; dB/dt: T/s/A; B: T/A",
        "tx_kind": system.tx_kind, "tx_points": np.asarray(system.tx_points, float).ravel(),
        "tx_current": system.current, "lowpass_order": system.lowpass_order,
        "lowpass_cutoff": system.lowpass_cutoff, "sampling": decays.sampling,
        **system.waveform_attrs(),
        "tem_format": "gated", "format_version": GATED_VERSION, "tem_version": __version__,
        "provenance": records_to_json(provenance),
    }
    return xr.Dataset({
        "value": (("channel", "gate"), value),
        "error": (("channel", "gate"), error),
        "usable": (("channel", "gate"), usable),
        "noise_floor": ("channel", np.full(n, np.nan), {"long_name": "not measured (imported)"}),
        "gate_open": ("gate", t0, {"units": "s"}),
        "gate_close": ("gate", t1, {"units": "s"}),
        "gate_centre": ("gate", centre, {"units": "s"}),
        "component": ("channel", np.array(comps)),
        "unit": ("channel", np.array([_UNIT[c] for c in comps])),
        "rx_x0": ("channel", geo[:, 0]), "rx_y0": ("channel", geo[:, 1]),
        "rx_x1": ("channel", geo[:, 2]), "rx_y1": ("channel", geo[:, 3]),
        "coil_area": ("channel", area),
        "dead": ("channel", np.zeros(n, bool)),
    }, attrs=attrs)


def station_datasets(decays, system, provenance, snr_min):
    """``{station: Dataset}`` for every station of the decays, in file order."""
    return {sid: sounding_dataset(sid, decays, system, provenance, snr_min)
            for sid in decays.stations}
