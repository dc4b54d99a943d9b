"""What a stacked or gated netCDF file must hold before a stage uses it.

:func:`check_product` checks the global attributes and variables a stage
reads (names, dimensions, types, finiteness, physical ranges); a file that
fails gives one :class:`tem.errors.TemInputError` line naming the file and the
variable or attribute. Variables added in format 1.1 are checked when present
(1.0 files still read). See docs/data-model.md, "What the readers refuse".
"""
from __future__ import annotations

import numpy as np

from ..errors import input_error
from . import checks

__all__ = ["check_product", "check_usable_gates"]

L = checks.LIMITS
#: |value| of a per-ampere field, a count or a spread above this is not a measurement
BIG = 1e30
COMPONENTS = ("ex", "ey", "dbxdt", "dbydt", "dbzdt", "current")
_CH = ("channel",)


def _attrs(ds, file):
    a = ds.attrs
    checks.text(a.get("station"), "station", file)
    if "/" in a["station"]:
        raise input_error("station", f"must be a name without '/', got {checks.show(a['station'])}",
                          file)
    checks.attr_number(ds, "x", file, maximum=L["coordinate"])
    checks.attr_number(ds, "y", file, maximum=L["coordinate"])
    checks.attr_number(ds, "z", file, maximum=L["elevation"])
    if "epsg" in a:
        checks.integer(_scalar(a["epsg"], "epsg", file), "epsg", file, minimum=0,
                       maximum=L["epsg"])
    kind = a.get("tx_kind")
    if not isinstance(kind, str) or kind not in ("wire", "loop"):
        raise input_error("tx_kind", f"expected 'wire' or 'loop', got {checks.show(kind)}", file)
    pts = a.get("tx_points")
    if pts is None:
        raise input_error("tx_points", "required attribute missing", file)
    pts = np.atleast_1d(np.asarray(pts))
    if pts.dtype.kind not in "iuf" or pts.ndim != 1 or pts.size < 4 or pts.size % 2 \
            or pts.size > 20_000:
        raise input_error("tx_points", "expected x0, y0, x1, y1, ... (m)", file)
    checks.finite_array(pts, "tx_points", file, maximum=L["coordinate"])
    if kind == "loop":
        checks.loop(pts, "tx_points", file)
    checks.attr_number(ds, "tx_current", file, positive=True, maximum=L["current"])
    # step-off, step-on and impulse soundings (gated format 1.2, tem import) have no
    # repetition: base_frequency 0; a waveform response needs a positive one
    stepped = _text(a, "response", "waveform") in ("step-off", "step-on", "impulse")
    if "gate_shape" in a:
        from ..forward.gatewindow import SHAPES
        if _text(a, "gate_shape", "") not in SHAPES:
            raise input_error("gate_shape", f"unknown window {checks.show(a['gate_shape'])}; "
                              f"valid: {', '.join(SHAPES)}", file)
    if "waveform_times" in a:
        _waveform_table(a, file)
        stepped = True     # the table rules: a single pulse has base_frequency 0, no duty cycle
    checks.attr_number(ds, "base_frequency", file, minimum=0.0 if stepped else 1e-3,
                       maximum=L["frequency"])
    checks.attr_number(ds, "duty_cycle", file, required=False, positive=not stepped,
                       minimum=0.0, maximum=1.0)
    ramps = [checks.attr_number(ds, name, file, required=False, minimum=0.0, maximum=L["time"])
             or 0.0 for name in ("ramp_on", "ramp_off")]
    duty = a.get("duty_cycle")
    freq = a.get("base_frequency")
    if not stepped and duty is not None and freq:
        # as the survey reader: ramps longer than the on-time make no waveform (a hand edit)
        on_time = float(duty) * 0.5 / float(freq)
        if sum(ramps) >= on_time:
            raise input_error("ramp_off", f"ramps ({sum(ramps):g} s) longer than the on-time "
                              f"({on_time:g} s = duty_cycle x half-period)", file)
    checks.attr_number(ds, "mains_frequency", file, required=False, positive=True,
                       maximum=L["frequency"])
    order = 0
    if "lowpass_order" in a:
        order = checks.integer(_scalar(a["lowpass_order"], "lowpass_order", file),
                               "lowpass_order", file, minimum=0, maximum=16)
    cutoff = checks.attr_number(ds, "lowpass_cutoff", file, required=False, minimum=0.0,
                                maximum=L["sample_rate"])
    if order > 0 and not (cutoff or 0.0) > 0.0:
        raise input_error("lowpass_cutoff", f"must be positive with a low-pass order "
                          f"({order}), got {cutoff or 0:g}", file)


def _text(attrs, name, default):
    """A text attribute, or ``default`` when absent; anything else (checked later) is None."""
    v = attrs.get(name, default)
    return v if isinstance(v, str) else None


def _scalar(v, name, file):
    if isinstance(v, np.ndarray):
        if v.size != 1:
            raise input_error(name, f"expected one value, got {v.size}", file)
        v = v.reshape(-1)[0]
    return v.item() if isinstance(v, np.generic) else v


def _channels(ds, file, required_dead=True):
    comp = checks.variable(ds, "component", _CH, file, kind="U")
    bad = [c for c in comp if c not in COMPONENTS]
    if bad:
        raise input_error("component", f"unknown {checks.show(bad[0])}; valid: "
                          f"{', '.join(COMPONENTS)}", file)
    if len(set(comp)) != len(comp):
        raise input_error("component", "a component is listed twice", file)
    rx = [checks.variable(ds, name, _CH, file, maximum=L["coordinate"])
          for name in ("rx_x0", "rx_y0", "rx_x1", "rx_y1")]
    # an E channel whose two ends coincide is a point receiver (imported decays of other
    # systems, empymod-style soundings: tem.forward.sounding.receivers_from_sounding), not an
    # error; the survey reader refuses a zero-length dipole of our own recordings
    del rx
    checks.variable(ds, "coil_area", _CH, file, positive=True, maximum=L["coil_area"],
                    allow_nan=True)
    if required_dead or "dead" in ds.variables:
        checks.variable(ds, "dead", _CH, file, kind="b")


def _times(ds, name, file):
    t = checks.variable(ds, name, (name,), file, maximum=L["time"])
    if t.size < 2 or np.any(np.diff(t) <= 0):
        raise input_error(name, "needs two or more strictly increasing times", file)
    return t


def _stacked(ds, file):
    from .stacked import CHECK_FIELDS, COUNT_FIELDS

    t = _times(ds, "time", file)
    if t.size < 16:
        raise input_error("time", f"{t.size} samples; a stacked transient has 16 or more", file)
    if t[-1] <= 0:
        raise input_error("time", "no sample after switch-off", file)
    _times(ds, "excerpt_time", file)
    _channels(ds, file)
    ct = ("channel", "time")
    checks.variable(ds, "value", ct, file, maximum=BIG, allow_nan=True)
    checks.variable(ds, "error", ct, file, minimum=0.0, maximum=BIG, allow_nan=True)
    checks.variable(ds, "scale", ct, file, minimum=0.0, maximum=BIG, allow_nan=True)
    checks.variable(ds, "n_used", ct, file, minimum=0.0, maximum=1e15)
    checks.variable(ds, "influence", ("channel", "batch", "time"), file, maximum=BIG,
                    allow_nan=True)
    checks.variable(ds, "excerpt", ("channel", "excerpt_time"), file, maximum=BIG,
                    allow_nan=True)
    checks.variable(ds, "unit", _CH, file, kind="U")
    checks.variable(ds, "raw_rms", _CH, file, minimum=0.0, maximum=BIG, allow_nan=True)
    for f in COUNT_FIELDS:
        checks.variable(ds, f, _CH, file, minimum=0.0, maximum=1e15)
    nb = ds.sizes.get("batch", 0)
    if nb < 2:
        raise input_error("influence", f"{nb} batch(es); errors need two or more", file)
    if "n_batches" in ds.variables:
        n = checks.variable(ds, "n_batches", _CH, file, minimum=2.0, maximum=nb)
        if not np.all(n == np.round(n)):
            raise input_error("n_batches", "expected whole numbers", file)
    if "lag_corr" in ds.variables:
        checks.variable(ds, "lag_corr", ("channel", "lag_kind", "lag"), file, maximum=1.0 + 1e-9,
                        allow_nan=True)
    if "window_mean" in ds.variables or "window_rails" in ds.variables:
        checks.variable(ds, "window_mean", ("channel", "window"), file, maximum=BIG,
                        allow_nan=True)
        checks.variable(ds, "window_rails", ("channel", "window", "rail"), file, minimum=0.0,
                        maximum=1e15)
    for key, _, _ in CHECK_FIELDS:
        if key in ds.variables:
            checks.variable(ds, key, _CH, file, maximum=BIG, allow_nan=True)
    checks.attr_number(ds, "sample_rate", file, required=False, positive=True,
                       maximum=L["sample_rate"])
    off = checks.attr_number(ds, "off_time", file, required=False, minimum=0.0,
                             maximum=L["time"])
    duty, freq = ds.attrs.get("duty_cycle"), ds.attrs.get("base_frequency")
    if off is not None and duty is not None and freq:
        # the gates end at off_time: a wrong one puts them into the next pulse's on-time
        expected = (1.0 - float(duty)) * 0.5 / float(freq)
        if abs(off - expected) > 1e-6 * max(expected, 0.5 / float(freq)):
            raise input_error("off_time", f"{off:g} s disagrees with duty_cycle and "
                              f"base_frequency ((1 - duty) x half-period = {expected:g} s)", file)
    step = np.diff(t)
    if np.any(np.abs(step - step[0]) > 1e-6 * step[0]):
        # the gate stage takes the sample interval from the first two times
        k = int(np.flatnonzero(np.abs(step - step[0]) > 1e-6 * step[0])[0])
        raise input_error("time", f"samples not evenly spaced: {step[0]:g} s from sample 0 to 1, "
                          f"{step[k]:g} s from sample {k} to {k + 1}", file)
    for name in ("cut_offset", "cut_residual", "timing_residual"):
        if name in ds.attrs and not (isinstance(ds.attrs[name], float) and np.isnan(ds.attrs[name])):
            checks.attr_number(ds, name, file, maximum=L["time"])


def _gated(ds, file):
    g = ("gate",)
    lo = checks.variable(ds, "gate_open", g, file, positive=True, maximum=L["time"])
    hi = checks.variable(ds, "gate_close", g, file, positive=True, maximum=L["time"])
    mid = checks.variable(ds, "gate_centre", g, file, positive=True, maximum=L["time"])
    if _text(ds.attrs, "sampling", "window") == "point":      # point samples: open = centre = close
        if lo.size == 0 or np.any(hi < lo) or np.any(mid < lo) or np.any(mid > hi):
            raise input_error("gate_close", "every point sample needs open <= centre <= close", file)
    elif lo.size == 0 or np.any(hi <= lo) or np.any(mid < lo) or np.any(mid > hi):
        raise input_error("gate_close", "every gate needs open < centre < close", file)
    for name, v in (("gate_open", lo), ("gate_centre", mid), ("gate_close", hi)):
        if v.size > 1 and not np.all(np.diff(v) > 0):
            i = int(np.flatnonzero(np.diff(v) <= 0)[0]) + 1
            raise input_error(name, f"gates must go forward in time: gate {i} ({v[i]:g} s) is not "
                              f"after gate {i - 1} ({v[i - 1]:g} s)", file)
    _channels(ds, file, required_dead=False)
    cg = ("channel", "gate")
    checks.variable(ds, "value", cg, file, maximum=BIG, allow_nan=True)
    checks.variable(ds, "error", cg, file, minimum=0.0, maximum=BIG, allow_nan=True)
    usable = checks.variable(ds, "usable", cg, file, kind="b")
    check_usable_gates(ds["value"].values, ds["error"].values, usable, ds["component"].values,
                       file)
    checks.variable(ds, "noise_floor", _CH, file, minimum=0.0, maximum=BIG, allow_nan=True)
    for name, v in ds.data_vars.items():
        if tuple(v.dims) == _CH and v.dtype.kind == "f":
            checks.variable(ds, str(name), _CH, file, maximum=BIG, allow_nan=True)


def check_usable_gates(value, error, usable, components, file=None):
    """A gate marked usable must carry a finite value and a finite, non-negative error: one
    that does not is a damaged or hand-edited file, named, not a datum dropped in silence
    (the readers of gated files, and :func:`tem.invert.data.station_data`)."""
    value, error = np.asarray(value, float), np.asarray(error, float)
    usable = np.asarray(usable).astype(bool)
    for field, bad in (("value", usable & ~np.isfinite(value)),
                       ("error", usable & ~(np.isfinite(error) & (error >= 0)))):
        if bad.any():
            c, g = (int(i) for i in np.argwhere(bad)[0])
            raise input_error(field, f"{int(bad.sum())} usable gate(s) with a NaN, infinite"
                              f"{' or negative' if field == 'error' else ''} {field}, first "
                              f"{components[c]} gate {g}; mark them unusable or restore the "
                              "file", file)


def _waveform_table(a, file):
    """A piecewise-linear waveform table (``waveform_times``, ``waveform_current``,
    ``waveform_half_period``, tem import) is one the forward model takes."""
    from ..errors import TemInputError
    from ..forward.sounding import waveform_from_attrs

    for name in ("waveform_times", "waveform_current"):
        v = np.atleast_1d(np.asarray(a.get(name)))
        if name not in a or v.dtype.kind not in "iuf" or v.ndim != 1 or v.size > 10_000:
            raise input_error(name, "expected a list of numbers (at most 10000)", file)
        checks.finite_array(v, name, file, maximum=L["time"] if name == "waveform_times"
                            else 1e3)
    try:
        waveform_from_attrs(a, file)
    except TemInputError as exc:
        raise input_error("waveform_times", str(exc).split(": ", 1)[-1], file) from None


def check_provenance(ds, file=None):
    """The ``provenance`` attribute of a product: absent, empty, or a JSON list of stage
    records (a damaged one is refused in one line naming the file)."""
    import json

    text = ds.attrs.get("provenance")
    if text is None or (isinstance(text, str) and not text.strip()):
        return                              # no records (tem.provenance.records_from_json)
    try:
        records = json.loads(text) if isinstance(text, str) else None
    except (ValueError, RecursionError):
        records = None
    if not isinstance(records, list) or not all(isinstance(r, dict) for r in records):
        raise input_error("provenance", "not a JSON list of stage records", file)


def check_product(ds, fmt: str, file=None):
    """Check a ``stacked`` or ``gated`` Dataset (other formats pass unchanged); return it."""
    if fmt not in ("stacked", "gated"):
        return ds
    _attrs(ds, file)
    check_provenance(ds, file)
    for dim, n in ds.sizes.items():
        if n > checks.MAX_ELEMENTS:
            raise input_error(str(dim)[:40], f"dimension of {n}: too large", file)
        if n == 0:
            raise input_error(str(dim)[:40], "dimension is empty", file)
    if ds.sizes.get("channel", 1) > 64:
        raise input_error("channel", f"{ds.sizes['channel']} channels; at most 64", file)
    if fmt == "stacked":
        _stacked(ds, file)
    elif fmt == "gated":
        _gated(ds, file)
    return ds
