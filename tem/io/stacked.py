"""Stacked-transient and gated-sounding files (netCDF via xarray, h5netcdf engine).

``stacked/<station>.nc`` (``tem_format = "stacked"``) holds per channel the
stacked half-period transient, its standard error and the batch influence
sums from which any gate's error follows (docs/stacking.md), and the
per-channel checks of the raw record (window means, rail counts, half-cycle
asymmetry, mains, offset and drift; docs/qc.md).
``gated/<station>.nc`` (``tem_format = "gated"``) follows docs/data-model.md,
plus per-channel noise measures (docs/qc.md).

Version 1.1 (both) adds variables to 1.0; 1.0 files still read (missing
measures read as absent, errors as uncorrelated batches). Gated version 1.2
adds the optional attributes ``response`` (waveform, step-off, step-on,
impulse), ``sampling`` (window, point) and a piecewise-linear waveform table
(``waveform_times``, ``waveform_current``, ``waveform_half_period``); a file
without them reads as before (waveform response, window averages, bipolar
wave from ``base_frequency``).
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import xarray as xr

from .. import __version__
from ..errors import input_error
from ..provenance import records_from_json, records_to_json
from .netcdf import write_netcdf

__all__ = ["stacked_dataset", "write_dataset", "read_product", "check_dataset", "gated_dataset",
           "COUNT_FIELDS", "CHECK_FIELDS", "GATED_VERSION"]

COUNT_FIELDS = ("transients_total", "transients_used", "rejected_noisy", "rejected_bad_samples",
                "samples_clipped", "samples_outlier", "clipped_high", "clipped_low",
                "windows_clipped")
#: Raw-record checks per channel (tem.stack.station.ChannelStack.checks): (key, unit, meaning)
CHECK_FIELDS = (("offset", "V", "median baseline at the logger"),
                ("drift", "V/s", "slope of the baseline at the logger"),
                ("wander", "V", "rms of the baseline about its straight line"),
                ("asymmetry", "1", "half-cycle asymmetry: |a| in P - N = a (P + N), off-time"),
                ("asymmetry_error", "1", "standard error of the half-cycle asymmetry"),
                ("asymmetry_windows", "1", "off-time windows the asymmetry is taken over"),
                ("mains", "V", "mains fundamental amplitude at the logger"),
                ("mains_rms", "V", "rms of mains fundamental and harmonics at the logger"),
                ("mains_removed", "Hz", "frequency of the mains fitted and removed before "
                 "stacking (off its nominal frequency; NaN: none removed)"),
                ("mains_on_line", "Hz", "a harmonic of that mains on a line of the transmitter's "
                 "response, seen in the stack: it cannot be removed (NaN: none)"),
                ("duration", "s", "record length stacked"),
                ("flat_fraction", "1", "share of half-period windows that are flat (at most 1 "
                 "count peak to peak: the channel dropped out)"),
                ("dropout_fraction", "1", "share of samples (of blocks spread over the record) "
                 "in constant runs of 4 ms or more within windows that are not flat"),
                ("full_scale", "V", "digitiser full scale at the logger"))
_VERSION = "1.1"
#: Version of the gated files written (1.2: response, sampling, waveform table; docs/data-model.md)
GATED_VERSION = "1.2"
_MAJOR = "1"


def _rx_geometry(rx, station):
    if rx.dipole is not None:
        (x0, y0), (x1, y1) = rx.dipole
        return x0, y0, x1, y1, np.nan
    return station.x, station.y, station.x, station.y, (rx.coil_area or np.nan)


def _common_attrs(survey, station, fmt, provenance):
    tx = survey.transmitter
    return {
        "station": station.id, "x": station.x, "y": station.y, "z": station.z,
        "epsg": int(station.epsg or survey.epsg or 0),
        "time_reference": "end of switch-off ramp",
        "normalisation": "per ampere of peak current; E: volts / (gain * dipole length); "
                         "dB/dt: volts / (gain * coil effective area)",
        "tx_kind": tx.kind, "tx_points": np.asarray(tx.flat_points(), float),
        "tx_current": tx.current, "base_frequency": tx.base_frequency,
        "duty_cycle": tx.duty_cycle, "ramp_on": tx.ramp_on, "ramp_off": tx.ramp_off,
        "lowpass_order": int(survey.lowpass_order), "lowpass_cutoff": float(survey.lowpass_cutoff),
        "mains_frequency": survey.mains_frequency,
        "tem_format": fmt, "format_version": "1.0", "tem_version": __version__,
        "provenance": records_to_json(provenance),
    }


def _padded(arrays, fill, dtype=float):
    """Stack arrays of equal rank whose first dimension may differ, padding with ``fill``."""
    n = max(a.shape[0] for a in arrays)
    out = np.full((len(arrays), n) + arrays[0].shape[1:], fill, dtype)
    for i, a in enumerate(arrays):
        out[i, :a.shape[0]] = a
    return out


def stacked_dataset(survey, station, channels, timing, settings, provenance) -> xr.Dataset:
    """Dataset of one station's stacked channels (see module docstring)."""
    times = channels[0].times
    geo = np.array([_rx_geometry(c.receiver, station) for c in channels], float)
    res = [c.result for c in channels]
    rhos = [np.atleast_2d(r.lag_corr) for r in res]
    lag_corr = np.zeros((len(res), max(r.shape[0] for r in rhos), max(r.shape[1] for r in rhos)))
    for i, rho in enumerate(rhos):
        lag_corr[i, :rho.shape[0], :rho.shape[1]] = rho
        lag_corr[i, rho.shape[0]:, :rho.shape[1]] = rho[-1]
    data = {
        "value": (("channel", "time"), np.stack([c.result.value for c in channels]),
                  {"long_name": "stacked transient per ampere"}),
        "error": (("channel", "time"), np.stack([c.result.error for c in channels]),
                  {"long_name": "one standard error of value"}),
        "influence": (("channel", "batch", "time"),
                      _padded([r.influence for r in res], 0.0, np.float32),
                      {"long_name": "batch influence sums (error: tem.stack.batchvar)"}),
        "n_batches": ("channel", np.array([r.influence.shape[0] for r in res], np.int64)),
        "lag_corr": (("channel", "lag_kind", "lag"), lag_corr,
                     {"long_name": "correlation of neighbouring batch sums at lags 1..L, "
                                   "pooled over averages of 1, 4, 16, ... samples (kind 0, 1, "
                                   "2, ...)"}),
        "window_mean": (("channel", "window"), _padded([r.window_means for r in res], np.nan),
                        {"long_name": "mean of each half-period window (unclipped samples)",
                         "units": "V"}),
        "window_rails": (("channel", "window", "rail"),
                         _padded([r.window_rails for r in res], 0, np.int64),
                         {"long_name": "samples at the positive (rail 0) and negative (rail 1) "
                                       "full-scale rail"}),
        "n_used": (("channel", "time"), np.stack([c.result.n_used for c in channels])),
        "scale": (("channel", "time"), np.stack([c.result.scale for c in channels]),
                  {"long_name": "robust spread of one three-window estimate"}),
        "excerpt": (("channel", "excerpt_time"), np.stack([c.excerpt for c in channels]),
                    {"long_name": "one full period of the raw record from its first positive "
                                  "switch-off, normalised"}),
        "raw_rms": ("channel", np.array([c.raw_rms for c in channels]), {"units": "V"}),
        "dead": ("channel", np.array([c.dead for c in channels])),
        "component": ("channel", np.array([c.receiver.component for c in channels])),
        "unit": ("channel", np.array([c.receiver.unit for c in channels])),
        "rx_x0": ("channel", geo[:, 0]), "rx_y0": ("channel", geo[:, 1]),
        "rx_x1": ("channel", geo[:, 2]), "rx_y1": ("channel", geo[:, 3]),
        "coil_area": ("channel", geo[:, 4]),
        "source_file": ("channel", np.array([c.file for c in channels])),
    }
    for f in COUNT_FIELDS:
        data[f] = ("channel", np.array([c.result.counts.get(f, 0) for c in channels], np.int64))
    for key, unit, meaning in CHECK_FIELDS:
        data[key] = ("channel", np.array([float(c.checks.get(key, np.nan)) for c in channels]),
                     {"units": unit, "long_name": meaning})
    fs = 1.0 / (times[1] - times[0])
    attrs = _common_attrs(survey, station, "stacked", provenance)
    attrs.update(format_version=_VERSION, sample_rate=fs, timing_source=timing["source"],
                 timing_residual=float(timing["residual_rms"]),
                 cut_offset=float(timing.get("cut_offset", np.nan)),
                 cut_residual=float(timing.get("cut_residual", np.nan)),
                 stack_settings=json.dumps(settings.as_dict(), sort_keys=True),
                 off_time=survey.transmitter.off_time)
    return xr.Dataset(data, coords={"time": ("time", times, {"units": "s"}),
                                    "excerpt_time": ("excerpt_time",
                                                     times[0] + np.arange(2 * times.size) / fs)},
                      attrs=attrs)


def gated_dataset(stacked: xr.Dataset, table, value, error, usable, noise_floor,
                  provenance, measures=None) -> xr.Dataset:
    """Gated sounding (docs/data-model.md) from a stacked dataset and gate results.

    measures : optional dict name -> ((channel,) values, unit, meaning) of
        per-channel noise measures (tem.gate.windows.gate_stacked).
    """
    keep = ("station", "x", "y", "z", "epsg", "time_reference", "normalisation", "tx_kind",
            "tx_points", "tx_current", "base_frequency", "duty_cycle", "ramp_on", "ramp_off",
            "lowpass_order", "lowpass_cutoff", "mains_frequency")
    attrs = {k: stacked.attrs[k] for k in keep if k in stacked.attrs}
    attrs.update(gate_shape=table.shape, tem_format="gated", format_version=GATED_VERSION,
                 response="waveform", sampling="window",
                 tem_version=__version__, provenance=records_to_json(provenance))
    ch = {k: stacked[k] for k in ("component", "rx_x0", "rx_y0", "rx_x1", "rx_y1", "coil_area",
                                  "dead") if k in stacked}
    return xr.Dataset({
        "value": (("channel", "gate"), np.asarray(value, float)),
        "error": (("channel", "gate"), np.asarray(error, float)),
        "usable": (("channel", "gate"), np.asarray(usable, bool)),
        "noise_floor": ("channel", np.asarray(noise_floor, float)),
        "gate_open": ("gate", table.open, {"units": "s"}),
        "gate_close": ("gate", table.close, {"units": "s"}),
        "gate_centre": ("gate", table.centre, {"units": "s"}),
        **{k: ("channel", v.values) for k, v in ch.items()},
        **{k: ("channel", np.asarray(v, float), {"units": unit, "long_name": meaning})
           for k, (v, unit, meaning) in (measures or {}).items()},
    }, attrs=attrs)


def write_dataset(ds: xr.Dataset, path) -> Path:
    """Write a product Dataset atomically (netCDF4 via h5netcdf)."""
    return write_netcdf(ds, path)


def read_product(path, fmt: str) -> xr.Dataset:
    """Open a product file and check it with :func:`check_dataset`. ``path`` may also be a
    file object (bytes in memory)."""
    from .checks import open_netcdf

    return check_dataset(open_netcdf(path, "netcdf"), fmt,
                         Path(path) if not hasattr(path, "read") else "netCDF")


def check_dataset(ds, fmt: str, file=None) -> xr.Dataset:
    """Check ``tem_format``, the major ``format_version`` and, for ``stacked`` and ``gated``
    files, every variable and attribute a stage reads (:func:`tem.io.schema.check_product`).
    """
    from .checks import show
    from .schema import check_product

    found = ds.attrs.get("tem_format")
    if not isinstance(found, str) or found != fmt:
        raise input_error("tem_format", f"expected {fmt!r}, found "
                          f"{show(ds.attrs.get('tem_format'))}", file)
    if str(ds.attrs.get("format_version", "")).split(".")[0] != _MAJOR:
        raise input_error("format_version", f"{show(ds.attrs.get('format_version'))} not "
                          "supported", file)
    return check_product(ds, fmt, file)


def provenance_of(ds) -> list:
    return records_from_json(ds.attrs.get("provenance"))
