"""Apparent resistivity of a gated sounding Dataset (docs/data-model.md).

Glue between the gated-sounding file and the kernels of :mod:`tem.rhoa`:
reads the geometry from the Dataset, runs the all-time and late-time
conversions for every channel and returns an apparent-resistivity Dataset
(``tem_format = "rhoa"``), plus flat table rows for CSV output. No files.
"""
from __future__ import annotations

import numpy as np

from .. import __version__
from . import all_time as _at
from . import late_time as _lt
from ..errors import input_error
from ..provenance import records_from_json, records_to_json, stage_record

__all__ = ["sounding_rhoa", "simulation_for_sounding", "table_rows", "TABLE_COLUMNS",
           "FORMAT_VERSION"]

FORMAT_VERSION = "1.0"

_REQUIRED_VARS = ("value", "error", "gate_open", "gate_close", "gate_centre", "component",
                  "rx_x0", "rx_y0", "rx_x1", "rx_y1")
_REQUIRED_ATTRS = ("tx_kind", "tx_points")


def _check(ds, source):
    for name in _REQUIRED_VARS:
        if name not in ds:
            raise input_error(name, "missing from the gated sounding", source)
    for name in _REQUIRED_ATTRS:
        if name not in ds.attrs:
            raise input_error(name, "missing transmitter geometry attribute", source)
    pts = np.asarray(ds.attrs["tx_points"], float).ravel()
    if pts.size < 4 or pts.size % 2 or not np.all(np.isfinite(pts)):
        raise input_error("tx_points", "needs finite x, y pairs (m)", source)
    for name in ("rx_x0", "rx_y0", "rx_x1", "rx_y1"):
        if not np.all(np.isfinite(ds[name].values)):
            raise input_error(name, "receiver geometry missing (NaN)", source)
    t = ds["gate_centre"].values
    if not np.all(np.isfinite(t) & (t > 0)):
        raise input_error("gate_centre", "gate times must be positive (s after switch-off)", source)


def simulation_for_sounding(ds, source=None):
    """The forward Simulation of a gated sounding (same geometry, waveform, gates, filter)."""
    from ..forward import Simulation

    return Simulation.from_sounding(ds, source=source)


def sounding_rhoa(ds, settings=None, sim=None, source=None, progress=None):
    """Late-time and all-time apparent resistivity of every channel of a sounding.

    Parameters
    ----------
    ds : xarray.Dataset
        Gated sounding (docs/data-model.md), values per ampere.
    settings : tem.rhoa.settings.RhoaSettings, optional
        ``all_time`` (also the all-time rho_a, which needs the forward model),
        the search range ``rho_min``/``rho_max`` (ohm-m) and the table density
        ``rho_per_decade``; default: the table's defaults.
    sim : tem.forward.Simulation, optional
        The data's simulation (default :func:`simulation_for_sounding`).
    source : str, optional
        File name for error messages and provenance.
    progress : callable, optional
        Called after each half-space of the table.

    Returns
    -------
    xarray.Dataset
        ``tem_format = "rhoa"``; variables on (channel, gate): ``rhoa``,
        ``rhoa_low``, ``rhoa_high``, ``rhoa_n_roots``, ``rhoa_rel_error``,
        ``rhoa_flags``, ``pseudo_depth``, ``rhoa_late``,
        ``rhoa_late_rel_error``, ``rhoa_late_u``, ``rhoa_late_valid``,
        ``rhoa_late_flags``, plus the input data and gate table.
    """
    import xarray as xr

    _check(ds, source)
    value = np.asarray(ds["value"].values, float)
    error = np.asarray(ds["error"].values, float)
    usable = np.asarray(ds["usable"].values, bool) if "usable" in ds else np.ones(value.shape, bool)
    t = ds["gate_centre"].values.astype(float)
    n_ch, n_g = value.shape
    nan = np.full(value.shape, np.nan)
    if settings is None:
        from .settings import RhoaSettings
        settings = RhoaSettings()
    all_time = settings.all_time
    if all_time:
        if sim is None:
            sim = simulation_for_sounding(ds, source)
        at = _at.all_time_rhoa(sim, value, error, rho_min=settings.rho_min, rho_max=settings.rho_max,
                               points_per_decade=settings.rho_per_decade, progress=progress)
    else:
        at = _at.AllTimeResult(nan, nan.copy(), nan.copy(), np.zeros(value.shape, int), nan.copy(),
                             nan.copy(), np.zeros(value.shape, np.int64))
    pts = np.asarray(ds.attrs["tx_points"], float)
    kind = str(ds.attrs["tx_kind"])
    late = {k: np.empty(value.shape) for k in ("rho", "rel", "u")}
    late_valid = np.zeros(value.shape, bool)
    late_flags = np.zeros(value.shape, np.int64)
    for c in range(n_ch):
        rx = [float(ds[k].values[c]) for k in ("rx_x0", "rx_y0", "rx_x1", "rx_y1")]
        ref = at.rho[c] if all_time else None
        lt = _lt.late_time_rhoa(str(ds["component"].values[c]), value[c], t, kind, pts, rx,
                              error=error[c], rho_ref=ref)
        late["rho"][c], late["rel"][c], late["u"][c] = lt.rho, lt.rel_error, lt.u
        late_valid[c], late_flags[c] = lt.valid, lt.flags
    flags = at.flags.copy()
    flags[~usable] |= _lt.FLAGS["unusable"]
    late_flags[~usable] |= _lt.FLAGS["unusable"]
    depth = _lt.diffusion_depth(at.rho, t[None, :])
    dims = ("channel", "gate")
    keep_attrs = {k: v for k, v in ds.attrs.items() if k not in ("tem_format", "format_version",
                                                                 "tem_version", "provenance")}
    prov = records_from_json(ds.attrs.get("provenance")) + [stage_record("rhoa", {
        **settings.as_dict(), "source": str(source or "")})]
    out = xr.Dataset(
        {
            "value": (dims, value, {"units": "per A (V/m, T or T/s)"}),
            "error": (dims, error),
            "usable": (dims, usable),
            "gate_open": ("gate", ds["gate_open"].values, {"units": "s"}),
            "gate_close": ("gate", ds["gate_close"].values, {"units": "s"}),
            "gate_centre": ("gate", t, {"units": "s"}),
            **{k: ("channel", ds[k].values) for k in ("component", "rx_x0", "rx_y0", "rx_x1", "rx_y1")},
            "rhoa": (dims, at.rho, {"units": "ohm-m", "long_name": "all-time apparent resistivity"}),
            "rhoa_low": (dims, at.rho_low, {"units": "ohm-m"}),
            "rhoa_high": (dims, at.rho_high, {"units": "ohm-m"}),
            "rhoa_n_roots": (dims, np.asarray(at.n_roots, np.int32)),
            "rhoa_rel_error": (dims, at.rel_error, {"units": "1"}),
            "rhoa_flags": (dims, flags, {"flag_masks": list(_lt.FLAGS.values()),
                                         "flag_meanings": " ".join(_lt.FLAGS)}),
            "pseudo_depth": (dims, depth, {"units": "m", "long_name": "diffusion depth of rhoa"}),
            "rhoa_late": (dims, late["rho"], {"units": "ohm-m"}),
            "rhoa_late_rel_error": (dims, late["rel"], {"units": "1"}),
            "rhoa_late_u": (dims, late["u"], {"units": "1"}),
            "rhoa_late_valid": (dims, late_valid),
            "rhoa_late_flags": (dims, late_flags, {"flag_masks": list(_lt.FLAGS.values()),
                                                   "flag_meanings": " ".join(_lt.FLAGS)}),
        },
        attrs={**keep_attrs, "tem_format": "rhoa", "format_version": FORMAT_VERSION,
               "tem_version": __version__, "provenance": records_to_json(prov)},
    )
    return out


TABLE_COLUMNS = ("station", "x", "y", "channel", "component", "gate", "t_open_s", "t_close_s",
                 "t_centre_s", "value", "error", "usable", "rhoa_ohmm", "rhoa_rel_error",
                 "rhoa_low_ohmm", "rhoa_high_ohmm", "n_roots", "pseudo_depth_m", "flags",
                 "rhoa_late_ohmm", "late_u", "late_valid", "late_flags")


def table_rows(out):
    """Flat rows (tuples in :data:`TABLE_COLUMNS` order) of an apparent-resistivity Dataset."""
    a = out.attrs
    rows = []
    for c in range(out.sizes["channel"]):
        for g in range(out.sizes["gate"]):
            def v(name):
                return out[name].values[c, g]
            rows.append((
                str(a.get("station", "")), float(a.get("x", np.nan)), float(a.get("y", np.nan)),
                c, str(out["component"].values[c]), g,
                float(out["gate_open"].values[g]), float(out["gate_close"].values[g]),
                float(out["gate_centre"].values[g]), float(v("value")), float(v("error")),
                int(bool(v("usable"))), float(v("rhoa")), float(v("rhoa_rel_error")),
                float(v("rhoa_low")), float(v("rhoa_high")), int(v("rhoa_n_roots")),
                float(v("pseudo_depth")), _lt.flag_text(v("rhoa_flags")), float(v("rhoa_late")),
                float(v("rhoa_late_u")), int(bool(v("rhoa_late_valid"))),
                _lt.flag_text(v("rhoa_late_flags")),
            ))
    return rows
