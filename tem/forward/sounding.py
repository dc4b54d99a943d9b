"""The one converter from survey descriptions and gated soundings to forward objects.

A gated file (docs/data-model.md) stores the transmitter, receivers,
waveform, gate windows and receiver filter; the forward model must average
and filter the same way, so it is rebuilt from exactly those attributes
(:func:`simulation_from_sounding`). A survey (tem.survey) is converted by
:func:`survey_source`, :func:`survey_receiver`, :func:`survey_waveform` and
:func:`survey_lowpass`; both paths share the same builders.
"""
from __future__ import annotations

import numpy as np

from ..errors import TemInputError, input_error

__all__ = ["source_from_attrs", "receivers_from_sounding", "waveform_from_attrs",
           "simulation_from_sounding", "survey_source", "survey_receiver", "survey_waveform",
           "survey_lowpass", "response_of", "FILE_RESPONSES", "SAMPLINGS"]


def survey_source(tx, source=None):
    """Forward source (Wire or PolygonLoop) of a survey's :class:`tem.survey.Transmitter`."""
    return source_from_attrs({"tx_kind": tx.kind, "tx_points": np.ravel(tx.points).tolist()}, source)


def survey_receiver(rx, station):
    """Forward receiver of a survey channel: its E dipole, or the station point for a coil."""
    from .geometry import Receiver

    if rx.dipole is not None:
        return Receiver(rx.component, dipole=rx.dipole)
    return Receiver(rx.component, (station.x, station.y))


def survey_waveform(tx, source=None):
    """Periodic bipolar waveform of a survey's transmitter (base frequency, duty, ramps)."""
    return waveform_from_attrs({"base_frequency": tx.base_frequency, "duty_cycle": tx.duty_cycle,
                                "ramp_on": tx.ramp_on, "ramp_off": tx.ramp_off}, source)


def survey_lowpass(survey):
    """Receiver low-pass ``(order, cutoff Hz)`` of a survey, or None."""
    return (survey.lowpass_order, survey.lowpass_cutoff) if survey.lowpass_order > 0 else None


def source_from_attrs(attrs, source=None):
    """Wire or loop from ``tx_kind`` and ``tx_points`` (flat x0, y0, x1, y1, ...)."""
    from .geometry import PolygonLoop, Wire

    try:
        kind = str(attrs["tx_kind"])
        pts = np.asarray(attrs["tx_points"], float).reshape(-1, 2)
    except KeyError as exc:
        raise input_error(str(exc.args[0]), "missing transmitter attribute", source) from None
    except ValueError:
        raise input_error("tx_points", "expected a flat list of x, y pairs (m)", source) from None
    try:
        if kind == "wire":
            if len(pts) < 2:
                raise input_error("tx_points", "a wire needs at least its two end points", source)
            return Wire(a=tuple(pts[0]), b=tuple(pts[-1]), via=[tuple(p) for p in pts[1:-1]])
        if kind == "loop":
            return PolygonLoop(vertices=[tuple(p) for p in pts])
    except TemInputError:
        raise
    except ValueError as exc:
        raise input_error("tx_points", str(exc), source) from None
    raise input_error("tx_kind", f"unknown transmitter kind {kind!r}; valid: wire, loop", source)


def receivers_from_sounding(ds, channels=None, source=None):
    """Receivers per channel: E dipoles where the two electrodes differ, else points."""
    from .geometry import Receiver

    chans = range(ds.sizes["channel"]) if channels is None else channels
    out = []
    try:
        for c in chans:
            comp = str(ds["component"].values[c])
            p0 = (float(ds["rx_x0"].values[c]), float(ds["rx_y0"].values[c]))
            p1 = (float(ds["rx_x1"].values[c]), float(ds["rx_y1"].values[c]))
            if comp in ("ex", "ey") and np.hypot(p1[0] - p0[0], p1[1] - p0[1]) > 0:
                out.append(Receiver(comp, dipole=(p0, p1)))
            else:
                out.append(Receiver(comp, (0.5 * (p0[0] + p1[0]), 0.5 * (p0[1] + p1[1]))))
    except KeyError as exc:
        raise input_error(str(exc.args[0]), "missing receiver variable", source) from None
    except ValueError as exc:
        raise input_error("component", str(exc), source) from None
    return out


#: Responses a gated file may declare in its ``response`` attribute (format 1.2; absent: waveform).
FILE_RESPONSES = ("waveform", "step-off", "step-on", "impulse")
#: Time sampling of a gated file's ``sampling`` attribute (format 1.2; absent: window).
SAMPLINGS = ("window", "point")


def waveform_from_attrs(attrs, source=None):
    """The file's waveform: its piecewise-linear table, else the bipolar square wave.

    A table (``waveform_times`` [s, last 0 = end of switch-off ramp],
    ``waveform_current`` [relative, peak 1], ``waveform_half_period`` [s, 0:
    one pulse, else bipolar repetition]) takes precedence over
    ``base_frequency``, ``duty_cycle``, ``ramp_on``, ``ramp_off``.
    """
    from .waveform import Waveform

    try:
        if "waveform_times" in attrs:
            hp = float(attrs.get("waveform_half_period", 0.0) or 0.0)
            return Waveform(np.asarray(attrs["waveform_times"], float).ravel(),
                            np.asarray(attrs["waveform_current"], float).ravel(),
                            half_period=hp if hp > 0 else None)
        return Waveform.bipolar(base_frequency=float(attrs["base_frequency"]),
                                duty_cycle=float(attrs.get("duty_cycle", 0.5)),
                                ramp_on=float(attrs.get("ramp_on", 0.0)),
                                ramp_off=float(attrs.get("ramp_off", 0.0)))
    except KeyError as exc:
        raise input_error(str(exc.args[0]), "missing waveform attribute", source) from None
    except ValueError as exc:
        raise input_error("waveform", str(exc), source) from None


def response_of(attrs, source=None):
    """``(response, sampling)`` of a gated file; files before format 1.2: waveform, window."""
    def text(name, default):
        v = attrs.get(name, default)
        if isinstance(v, np.ndarray) and v.size == 1:
            v = v.reshape(-1)[0]
        if isinstance(v, np.str_):
            v = str(v)
        if not isinstance(v, str):
            raise input_error(name, f"expected text, got {type(v).__name__}", source)
        return v or default

    response, sampling = text("response", "waveform"), text("sampling", "window")
    if response not in FILE_RESPONSES:
        raise input_error("response", f"unknown {response!r}; valid: {', '.join(FILE_RESPONSES)}",
                          source)
    if sampling not in SAMPLINGS:
        raise input_error("sampling", f"unknown {sampling!r}; valid: {', '.join(SAMPLINGS)}", source)
    return response, sampling


def simulation_from_sounding(cls, ds, channels=None, source=None, **kw):
    """``cls(...)`` (a Simulation) with the sounding's geometry, waveform, gates and filter.

    ``response`` other than ``waveform`` models the step or impulse response
    itself (no waveform); ``sampling = "point"`` models the values at the
    ``gate_centre`` times instead of window averages.
    """
    a = ds.attrs
    response, sampling = response_of(a, source)
    src = source_from_attrs(a, source)
    rxs = receivers_from_sounding(ds, channels, source)
    wf = waveform_from_attrs(a, source) if response == "waveform" else None
    order = int(a.get("lowpass_order", 0) or 0)
    lowpass = (order, float(a.get("lowpass_cutoff", 0.0))) if order > 0 else None
    try:
        if sampling == "point":
            where = {"times": np.asarray(ds["gate_centre"].values, float)}
        else:
            where = {"gates": (np.asarray(ds["gate_open"].values, float),
                               np.asarray(ds["gate_close"].values, float)),
                     "gate_shape": str(a.get("gate_shape", "boxcar"))}
    except KeyError as exc:
        raise input_error(str(exc.args[0]), "missing gate table", source) from None
    try:
        return cls(src, rxs, waveform=wf, response=response, lowpass=lowpass, **where, **kw)
    except TemInputError:
        raise
    except ValueError as exc:
        raise input_error("geometry", str(exc), source) from None
