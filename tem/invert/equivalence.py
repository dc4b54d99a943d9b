"""The resistivity range of one few-layer layer that the data allow: a profile of chi2.

A thin layer is seen through the product or ratio of its thickness and
resistivity (a conductor's conductance h/rho, a resistor's transverse
resistance h rho): along that equivalence the data hardly change, so its
resistivity alone is not resolved (e.g. Kaufman & Keller 1983, "Frequency and
transient soundings", from memory). A linearised standard deviation
describes that ridge poorly (it is curved and bounded), so the range is
measured instead: the layer's resistivity is fixed at values stepping away
from the fit, every other parameter re-fitted by Levenberg-Marquardt (each
step started from the previous one, the layer's thickness scaled to keep the
invariant; where that start ends outside the range, started again with the
thickness unscaled and the better fit kept), and the range is where the total misfit ``N chi2`` stays within
``delta`` of the fit's (the profile-likelihood interval: 3.84 for 95 % and
one parameter, Press et al. 2007, "Numerical Recipes", 3rd ed., sec. 15.6,
from memory).
"""
from __future__ import annotations

import numpy as np

from .fewlayer import Prior, fewlayer_inversion

__all__ = ["resistivity_profile", "equivalence_ranges"]


def resistivity_profile(sd, few, layer, delta, *, res_bounds, thk_bounds, max_iter, priors=(),
                        step=1.5, max_steps=12, refine=3):
    """Range of ``layer``'s resistivity within ``delta`` of the fit's total chi2.

    Parameters
    ----------
    sd : tem.invert.data.StationData
    few : dict
        A few-layer fit (``resistivity``, ``thickness``, ``chi2``), as in
        ``StationResult.few``.
    layer : int
        Layer index (the half-space included: its resistivity alone is fixed).
    delta : float
        Allowed rise of the total misfit ``N chi2``.
    res_bounds, thk_bounds, max_iter, priors
        As for the few-layer fit (the invert settings' ``few_resistivity_bounds``,
        ``few_thickness_bounds``, ``lm_max_iter``, ``priors``).
    step : float
        Factor between profile points; ``max_steps`` per direction. A crossing
        is refined by ``refine`` bisections in ln(rho), then interpolated with
        the rise taken as quadratic in ln(rho) (linear in its square root).

    Returns
    -------
    low, high : float, ohm-m
        The range (a bound of ``res_bounds`` when the profile reaches it within
        ``delta``; the last point tried when ``max_steps`` run out first).
    points : list of (resistivity, thickness or nan, chi2 per datum)
        The profile, fit included, sorted by resistivity.
    """
    rho = np.asarray(few["resistivity"], float)
    h = np.asarray(few["thickness"], float)
    if not 0 <= layer <= h.size:
        raise ValueError(f"profile: layer must be 0..{h.size}, got {layer}")
    n = sd.n_data
    base = n * float(few["chi2"])
    neighbours = rho[[k for k in (layer - 1, layer + 1) if 0 <= k < rho.size]]
    # thickness scales with rho for a conductor (h / rho kept), against it for a resistor
    power = 1.0 if rho[layer] < np.min(neighbours) else -1.0
    points = [(float(rho[layer]), float(h[layer]) if layer < h.size else np.nan, float(few["chi2"]))]

    def layer_fwd(r, t):
        return sd.jacobian(r, t, with_thickness=True)

    def refit(target, r0, h0):
        return fewlayer_inversion(layer_fwd, sd.d_obs, sd.std, r0, h0,
                                  priors=tuple(priors) + (Prior("resistivity", layer, target),),
                                  res_bounds=res_bounds, thk_bounds=thk_bounds,
                                  max_iter=max_iter, layer_predict=sd.predict)

    def fit_at(target, r0, h0):
        """Fit with the layer's resistivity fixed at ``target``, from (r0, h0).

        Started with the thickness scaled along the equivalence; where that refit leaves the
        allowed rise, also with the thickness as it was, and the better fit kept (a scaled
        start can lead Levenberg-Marquardt into a worse basin: a range once excluded a
        resistivity that fitted within 0.5 of the best when started from the fit)."""
        r0, h0 = r0.copy(), h0.copy()
        previous, r0[layer] = r0[layer], target
        scaled = h0.copy()
        if layer < h.size:
            scaled[layer] = float(np.clip(h0[layer] * (target / previous) ** power, *thk_bounds))
        fr = refit(target, r0, scaled)
        if n * fr.chi2 - base > delta and layer < h.size and \
                not np.isclose(scaled[layer], h0[layer], rtol=1e-9):
            other = refit(target, r0, h0)
            if other.chi2 < fr.chi2:
                fr = other
        points.append((target, float(fr.thickness[layer]) if layer < h.size else np.nan,
                       float(fr.chi2)))
        return fr.resistivity, fr.thickness, n * fr.chi2 - base

    ends = []
    for direction in (1.0 / step, step):
        inner = (rho.copy(), h.copy(), 0.0)           # last model within delta, its rise
        end = None
        for _ in range(max_steps):
            r_in = inner[0][layer]
            target = float(np.clip(r_in * direction, *res_bounds))
            if np.isclose(target, r_in, rtol=1e-6):
                end = target                          # at the bound and still within delta
                break
            r1, h1, rise = fit_at(target, inner[0], inner[1])
            if rise <= delta:
                inner = (r1, h1, rise)
                continue
            r_out, rise_out = target, rise
            for _ in range(refine):                   # bisect the crossing in ln(rho)
                mid = float(np.sqrt(inner[0][layer] * r_out))
                r1, h1, rise = fit_at(mid, inner[0], inner[1])
                if rise <= delta:
                    inner = (r1, h1, rise)
                else:
                    r_out, rise_out = mid, rise
            end = _crossing(inner[0][layer], inner[2], r_out, rise_out, delta)
            break
        ends.append(inner[0][layer] if end is None else end)
    points.sort()
    return float(min(ends)), float(max(ends)), points


def _crossing(r_in, rise_in, r_out, rise_out, delta):
    """Resistivity where the rise reaches ``delta``: square root of the rise linear in ln(rho)."""
    a, b = np.sqrt(max(rise_in, 0.0)), np.sqrt(max(rise_out, 0.0))
    if b <= a:
        return float(r_in)
    f = float(np.clip((np.sqrt(delta) - a) / (b - a), 0.0, 1.0))
    return float(np.exp(np.log(r_in) + f * (np.log(r_out) - np.log(r_in))))


def equivalence_ranges(sd, settings, few):
    """Resistivity range (N+1, 2) of every layer of a few-layer fit, half-space included.

    :func:`resistivity_profile` with ``settings.few_equivalence_delta`` (0: all NaN).
    """
    rho = np.asarray(few["resistivity"], float)
    out = np.full((rho.size, 2), np.nan)
    if settings.few_equivalence_delta <= 0:
        return out
    for k in range(rho.size):
        lo, hi, _ = resistivity_profile(
            sd, few, k, settings.few_equivalence_delta, priors=settings.priors,
            res_bounds=tuple(settings.few_resistivity_bounds),
            thk_bounds=tuple(settings.few_thickness_bounds), max_iter=settings.lm_max_iter)
        out[k] = lo, hi
    return out
