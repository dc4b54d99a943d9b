"""Verdicts on the section: per station, and per column from the stations that make it.

A models file carries a verdict per station (``verdict_code``, CF flags;
docs/inversion.md, "Verdicts"). The section grid repeats it per station
(``station_verdict_code``, ``station_verdict``, ``station_chi2``) and gives
every column the verdict of the stations it is interpolated from: the more
severe of the two when a column lies between two stations with weight on
both (misfit > stalled > parameter at a bound > degenerate layer > fitted),
with that station's chi2. A column outside every station's reach gets the
nearest station's verdict (its values are empty anyway).
"""
from __future__ import annotations

import numpy as np

__all__ = ["add_section_verdicts", "add_section_qc", "add_section_intervals", "SEVERITY_RANK",
           "NOT_FITTED_CODES", "FAILURE_CODES", "QC_REOCCUPY"]

#: Severity rank of each verdict code (0 fitted, 1 misfit, 2 stalled, 3 at bound,
#: 4 degenerate layer; -1 none): higher is worse.
SEVERITY_RANK = {-1: -1, 0: 0, 4: 1, 3: 2, 2: 3, 1: 4}
#: Codes of models that are not fitted (anything but 0), and of failures (misfit; a stalled
#: model is a warning, as for the exit status: docs/inversion.md, "Verdicts").
NOT_FITTED_CODES = (1, 2, 3, 4)
FAILURE_CODES = (1,)
#: Evening QC verdict code of a recording to be repeated (``qc_verdict_code``; -1 none,
#: 0 good, 1 check, 2 reoccupy): higher is worse.
QC_REOCCUPY = 2


def _station_flags(models, code_var, text_var, order):
    """(CF flag attributes, int8 codes, texts) of a per-station verdict, in profile order."""
    attrs = {k: v for k, v in models[code_var].attrs.items()
             if k in ("flag_values", "flag_meanings", "comment")}
    code = models[code_var].values.astype(np.int8)[order]
    text = models[text_var].values.astype(str)[order] if text_var in models.variables \
        else np.array([""] * code.size)
    return attrs, code, text


def _worse_of_two(rank, left, right, w):
    """Station index whose verdict each column carries: of the two stations a column is
    interpolated from (weight on both), the one of higher ``rank``; else the nearer one."""
    near = np.where(w < 0.5, left, right) if np.size(w) else np.zeros(0, int)
    both = (w > 0) & (w < 1)
    worse_right = rank[right] > rank[left]
    worse_left = rank[left] > rank[right]
    return np.where(both & worse_right, right, np.where(both & worse_left, left, near))


def add_section_verdicts(ds, models, order, left, right, w):
    """Add the verdict variables to a section grid ``ds`` (in place; a no-op without verdicts).

    ``order`` sorts the models' stations by chainage; ``left``, ``right``
    and ``w`` are the lateral interpolation of each column (indices into the
    sorted stations and the weight of the right one).
    """
    if "verdict_code" not in models.variables:
        return ds
    attrs, code, text = _station_flags(models, "verdict_code", "verdict", order)
    chi2 = models["chi2"].values.astype(float)[order]
    ds["station_verdict_code"] = ("station", code, dict(attrs, long_name="verdict on the "
                                                        "station's model"))
    ds["station_verdict"] = ("station", text, {"long_name": "verdict on the station's model, "
                                                "in words"})
    ds["station_chi2"] = ("station", chi2, {"units": "1", "long_name": "final chi-square per "
                                            "datum of the station's model"})
    rank = np.array([SEVERITY_RANK.get(int(c), -1) for c in code])
    pick = _worse_of_two(rank, left, right, w)
    ds["verdict_code"] = ("distance", code[pick], dict(attrs, long_name="verdict on the models "
                          "the column is made from (the more severe of two)"))
    ds["chi2"] = ("distance", chi2[pick], {"units": "1", "long_name": "final chi-square per "
                                           "datum of the station whose verdict the column has"})
    return ds


def add_section_qc(ds, models, order, left, right, w):
    """Add the evening QC verdicts to a section grid ``ds`` (in place; a no-op without them).

    Per station ``station_qc_verdict_code`` and ``station_qc_verdict``; per
    column ``qc_verdict_code``, the worse verdict of the two stations a
    column is interpolated from (reoccupy > check > good > none), else the
    nearest station's (as for the model verdicts).
    """
    return _add_ranked(ds, models, order, (left, right, w), "qc_verdict", (
        "evening QC verdict on the station's recording",
        "evening QC verdict with its reasons, in words",
        "evening QC verdict on the recordings the column is made from (the worse of two)"))


def add_section_intervals(ds, models, order, left, right, w):
    """Add the verdicts on posterior intervals to a section grid ``ds`` (in place; a no-op for
    models without them, i.e. not from sampling).

    Per station ``station_interval_verdict_code`` and ``station_interval_verdict``
    (0 converged, 1 unconverged: the percentiles, the median the section
    shows among them, are not yet the posterior's); per column
    ``interval_verdict_code``, the worse of the two stations a column is
    interpolated from, else the nearest station's.
    """
    return _add_ranked(ds, models, order, (left, right, w), "interval_verdict", (
        "verdict on the station's posterior intervals",
        "verdict on the station's posterior intervals, in words",
        "verdict on the posterior intervals of the models the column is made from (the "
        "worse of two)"))


def _add_ranked(ds, models, order, weights, name, long_names):
    """Per station ``station_<name>_code`` and ``station_<name>``, per column ``<name>_code``
    (the higher code of the two stations a column is interpolated from; codes rise with
    severity), from the models' ``<name>_code`` and ``<name>``; a no-op without them."""
    if f"{name}_code" not in models.variables:
        return ds
    attrs, code, text = _station_flags(models, f"{name}_code", name, order)
    station_long, text_long, column_long = long_names
    ds[f"station_{name}_code"] = ("station", code, dict(attrs, long_name=station_long))
    ds[f"station_{name}"] = ("station", text, {"long_name": text_long})
    pick = _worse_of_two(code.astype(int), *weights)
    ds[f"{name}_code"] = ("distance", code[pick], dict(attrs, long_name=column_long))
    return ds
