"""Posterior curves and parameters of a LAS pseudo-well (models with kind posterior).

The models file holds the posterior products on regular depth cells
(:mod:`tem.invert.posterior_products`); a LAS depth takes the value of the
cell that holds it, and depths below the last cell are null. Curves (names
our own):

* ``RP10``, ``RP50``, ``RP90`` (ohm.m): posterior 10th, 50th and 90th
  percentile of the resistivity at the depth;
* ``PIFD`` (1/m): probability density of an interface at the depth (times a
  depth interval: the probability of an interface within it);
* ``PTGD`` (1/m): probability density of the target top at the depth.

Parameters: ``TTP10``, ``TTP50``, ``TTP90`` (m) target-top percentiles,
``TLAY`` the target layer, ``RHAT`` the largest split R-hat and ``ESS`` the
smallest effective sample size of the station's chains, ``INTV`` the verdict
on the intervals (``CONVERGED``, ``UNCONVERGED``; ``UNKNOWN`` for a models
file without one; :mod:`tem.invert.interval`) and ``INTVR`` that verdict in
words and numbers. An unconverged interval adds a warning to ``~Other``
(:func:`interval_warning`).
"""
from __future__ import annotations

import numpy as np

__all__ = ["posterior_curves", "posterior_params", "interval_warning"]

CURVES = (("RP10", "res_p10", "ohm.m", "Posterior P10 resistivity"),
          ("RP50", "res_p50", "ohm.m", "Posterior P50 resistivity"),
          ("RP90", "res_p90", "ohm.m", "Posterior P90 resistivity"),
          ("PIFD", "interface_density", "1/m", "Probability density of an interface"),
          ("PTGD", "target_density", "1/m", "Probability density of the target top"))


def posterior_curves(models, i, depth):
    """(mnemonic, values, unit, description) of station ``i`` at the LAS depths (m)."""
    z = np.asarray(models["post_depth"].values, float)
    cell = float(models["post_depth"].attrs.get("cell_m", z[1] - z[0] if z.size > 1 else 1.0))
    k = np.floor(np.asarray(depth, float) / cell + 1e-9).astype(int)
    inside = (k >= 0) & (k < z.size)
    kk = np.clip(k, 0, z.size - 1)
    out = []
    for mnem, var, unit, descr in CURVES:
        v = np.asarray(models[var].values[i], float)[kk]
        out.append((mnem, np.where(inside, v, np.nan), unit, descr))
    return out


def posterior_params(models, i, null):
    """(mnemonic, unit, value, description) of station ``i`` for the ~Params section."""
    def num(name, digits):
        v = float(models[name].values[i])
        return round(v, digits) if np.isfinite(v) else null
    return [("TTP10", "m", num("target_top_p10", 2), "Target top, posterior P10 (below ground)"),
            ("TTP50", "m", num("target_top_p50", 2), "Target top, posterior P50"),
            ("TTP90", "m", num("target_top_p90", 2), "Target top, posterior P90"),
            # numbered from 1 at the surface, as the CSV's layer column and the verdicts'
            # "layer 2" (models files keep the 0-based index, target_layer)
            ("TLAY", "", int(models["target_layer"].values[i]) + 1, "Target layer (1 = top)"),
            ("RHAT", "", num("rhat_max", 4), "Largest split R-hat of the chains"),
            ("ESS", "", num("ess_min", 1), "Smallest effective sample size"),
            *interval_params(models, i)]


def interval_params(models, i):
    """``INTV`` (verdict word in capitals) and ``INTVR`` (its text) of station ``i``."""
    from ..io.models import interval_words
    from .las import las_value

    word = interval_words(models)[i]
    if not word:
        return [("INTV", "", "UNKNOWN", "Verdict on the intervals: none recorded")]
    text = str(models["interval_verdict"].values[i]) if "interval_verdict" in models else ""
    return [("INTV", "", word.upper(), "Verdict on the posterior intervals: CONVERGED "
             "UNCONVERGED UNUSABLE"),
            ("INTVR", "", las_value(text), "Interval verdict in words and numbers")]


def interval_warning(params):
    """Sentence for ``~Other`` when the parameters say the intervals are unconverged, else ""."""
    word = next((p[2] for p in params if p[0] == "INTV"), "")
    if word == "UNUSABLE":
        return (" WARNING: intervals UNUSABLE (see INTV, INTVR, FIT): the sampled model does not "
                "fit its data; the RP10/RP50/RP90 and TTP percentiles describe a wrong model.")
    if word != "UNCONVERGED":
        return ""
    return (" WARNING: intervals UNCONVERGED (see INTV, INTVR, RHAT, ESS): the chains did not mix; "
            "the RP10/RP50/RP90 and TTP percentiles are not yet the posterior's.")
