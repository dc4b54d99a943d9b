"""One station, end to end: best half-space, mesh, Occam smooth model, DOI, and
optionally a few-layer model with linearised uncertainty.

Pure computation on a :class:`tem.invert.data.StationData`; files and progress
live in :mod:`tem.invert.stage`.
"""
from __future__ import annotations

import dataclasses

from dataclasses import dataclass, field

import numpy as np
from scipy import sparse

from .doi import cumulative_sensitivity_doi, model_resolution, two_reference_doi
from .fewlayer import FewLayerResult, Prior, fewlayer_inversion
from .settings import InversionSettings
from .smooth import (LN_RHO_MAX, LN_RHO_MIN, best_halfspace, chi2_per_datum, diffusion_depth,
                     log_mesh, occam, roughness_matrix)
from .interval import interval_verdict_of
from .verdict import Verdict, verdict_of

__all__ = ["InversionSettings", "StationResult", "mesh_for", "smooth_station", "invert_station",
           "smooth_posterior_std"]


@dataclass
class StationResult:
    """Outcome of one station (all arrays SI)."""

    station: str
    x: float
    y: float
    z: float
    thickness: np.ndarray            # smooth mesh, m
    resistivity: np.ndarray          # smooth model, ohm-m
    log10_res_std: np.ndarray        # smooth posterior std (under the roughness prior)
    chi2: float
    doi: float
    halfspace: float
    d_obs: np.ndarray
    std: np.ndarray
    d_pred: np.ndarray
    component: np.ndarray
    channel: np.ndarray
    times: np.ndarray                # gate centre of each datum, s
    mu: float
    converged: bool
    message: str
    few: dict | None = None          # few-layer model (see _few_dict)
    posterior: object | None = None  # tem.invert.posterior.PosteriorResult (kind posterior)
    history: list = field(default_factory=list)
    verdict: Verdict | None = None   # verdict on the smooth (or LCI) model
    doi_parts: dict | None = None    # DOI of each method computed, m
    resolution: np.ndarray | None = None  # diagonal of the smooth model's resolution matrix
    interval: object | None = None   # tem.invert.interval.IntervalVerdict (kind posterior)

    def verdict_for(self, kind) -> Verdict | None:
        """Verdict on the model of ``kind`` (smooth, lci: this result; few-layer and
        posterior, whose best model is the few-layer fit: ``few``)."""
        if kind in ("few-layer", "posterior"):
            return None if self.few is None else self.few.get("verdict")
        return self.verdict


def smooth_verdict(settings, chi2, n_data, converged, resistivity, model_kind) -> Verdict:
    """Verdict on a smooth-mesh model (the mesh is fixed: only resistivity bounds apply)."""
    return verdict_of(settings, chi2, n_data, converged, resistivity,
                      resistivity_bounds=(float(np.exp(LN_RHO_MIN)), float(np.exp(LN_RHO_MAX))),
                      kind=model_kind)


def few_verdict(settings, few: dict, n_data) -> Verdict:
    """Verdict on a few-layer model from its final fit."""
    n = len(few["thickness"])
    fixed = [(p.kind, p.layer) for p in settings.priors
             if p.std is None and p.kind in ("resistivity", "thickness")]
    fixed = [(k, layer) for k, layer in fixed if layer <= (n if k == "resistivity" else n - 1)]
    return verdict_of(settings, few["chi2"], n_data, few["converged"], few["resistivity"],
                      few["thickness"], resistivity_bounds=tuple(settings.few_resistivity_bounds),
                      thickness_bounds=tuple(settings.few_thickness_bounds), kind="few-layer",
                      fixed=fixed)


def source_offset(sd):
    """Largest distance (m) from the transmitter to any receiver of the station."""
    src = getattr(sd.sim, "source", None)
    if src is None:
        return 0.0
    out = 0.0
    for rx in getattr(sd.sim, "receivers", []):
        p = np.asarray(rx.position, float)
        try:
            dist = src.distance_to(p) if hasattr(src, "distance_to") else src.segments.distance_to(p)
        except (AttributeError, ValueError):
            continue
        out = max(out, float(dist))
    return out


def mesh_depths(rho_hs, t_min, t_max, offset, settings: InversionSettings):
    """(first-layer thickness, top of the mesh half-space) in m.

    ``depth_min_factor * delta(t_min)`` and the larger of
    ``depth_max_factor * delta(t_max)`` and ``offset_factor * offset``, where
    delta is the diffusion depth of the best half-space: a conductive
    half-space (the target seen at late time) would otherwise give a mesh
    shallower than the structure above the target (the offset term is a rule of
    thumb for grounded-wire soundings, common practice, no source).
    """
    zmin = settings.depth_min or settings.depth_min_factor * diffusion_depth(rho_hs, t_min)
    zmax = settings.depth_max or max(settings.depth_max_factor * diffusion_depth(rho_hs, t_max),
                                     settings.offset_factor * offset)
    return zmin, max(zmax, 3 * zmin * settings.layers)


def mesh_for(sd, rho_hs, settings: InversionSettings):
    """Layer thicknesses (m) of the smooth mesh for this station's data."""
    t = sd.gate_centre[np.unique(np.nonzero(sd.mask)[1])]
    zmin, zmax = mesh_depths(rho_hs, t.min(), t.max(), source_offset(sd), settings)
    return log_mesh(settings.layers, zmin, zmax)


def _problem(sd, h):
    def fwd(m):
        return sd.jacobian(np.exp(m), h)

    def predict(m):
        return sd.predict(np.exp(m), h)
    return fwd, predict


def sign_consistent(sd):
    """Per datum: True where the datum's channel keeps one sign over all its gates that
    stand out of their error (``|d| > 3 s``). A gate within 3 standard errors of zero takes
    no part: in the asinh domain it is linear (``asinh(d/s) ~ d/s``), so a prediction of the
    other sign there meets no barrier, and a late gate that noise flips (an independent
    review's far and gradient soundings) no longer sends the whole channel to linear data."""
    out = np.zeros(sd.d_obs.size, bool)
    for ch in np.unique(sd.channel):
        sel = sd.channel == ch
        v = sd.d_obs[sel]
        v = v[np.abs(v) > 3.0 * sd.std[sel]]
        out[sel] = bool(np.all(v > 0) or np.all(v < 0))
    return out


def asinh_problem(fwd, predict, d_obs, std, where=None):
    """The same problem in transformed data ``T(d) = asinh(d / s)``.

    For ``|d| >> s`` this is ``sign(d) ln(2|d|/s)``, i.e. the logarithm of the
    decay, which makes the response far more linear in ln(rho) over the many
    decades a transient spans. Errors map to first order,
    ``s_T = s / sqrt(s^2 + d_obs^2)``, so the transformed chi-square equals the
    linear one to first order in the residuals (common practice for data
    spanning decades, no source). A channel whose data change sign is left
    linear (``where`` False): in the asinh domain a wrong-sign prediction sits
    behind a steep barrier that linearised steps cannot cross. Returns
    (fwd_T, predict_T, d_obs_T, std_T).
    """
    s = np.asarray(std, float)
    d_obs = np.asarray(d_obs, float)
    w = np.ones(d_obs.size, bool) if where is None else np.asarray(where, bool)
    sc = np.where(w, s, 1.0)

    def tr(d):
        return np.where(w, np.arcsinh(d / sc), d)

    def fwd_t(m):
        d, J = fwd(m)
        g = np.where(w, 1.0 / np.sqrt(sc * sc + d * d), 1.0)
        return tr(d), J * g[:, None]

    def predict_t(m):
        return tr(predict(m))

    s_t = np.where(w, s / np.sqrt(sc * sc + d_obs * d_obs), s)
    return fwd_t, predict_t, tr(d_obs), s_t


def _to_linear(d_t, J_t, std, where=None):
    """Back from the asinh domain: predicted data and Jacobian."""
    w = np.ones(d_t.size, bool) if where is None else np.asarray(where, bool)
    d = np.where(w, std * np.sinh(np.where(w, d_t, 0.0)), d_t)
    g = np.where(w, np.sqrt(std * std + d * d), 1.0)
    return d, J_t * g[:, None]


def smooth_posterior_std(J, std, R, mu, ref_weight=0.0):
    """Linearised posterior std of log10(rho) under the roughness prior.

    ``C = (J^T W J + mu (R^T R + ref_weight I))^-1`` (the regularisation that
    the inversion used, read as a Gaussian prior; Tarantola 2005, from
    memory). Layers the data do not see keep the spread the prior allows, so
    the band widens below the DOI; the reference term bounds it (without it
    the roughness prior leaves the mean level free and the std can run to
    hundreds of decades on weak data).
    """
    Jw = J / std[:, None]
    H = Jw.T @ Jw + mu * (R.T @ R + ref_weight * np.eye(J.shape[1]))
    try:
        C = np.linalg.inv(H)
    except np.linalg.LinAlgError:
        C = np.linalg.pinv(H)
    return np.sqrt(np.clip(np.diag(C), 0, None)) / np.log(10)


def focusing_of(settings):
    """The focusing parameter when the regularisation is focusing, else None."""
    return settings.focusing_parameter if settings.regularisation == "focusing" else None


def smooth_station(sd, settings: InversionSettings, h=None, m_ref_value=None, ref_weight=None,
                   callback=None, start=None, rho_hs=None):
    """Occam smooth inversion of one station; returns (OccamResult, thickness, rho_hs).

    ``start`` (ln ohm-m on the mesh ``h``, with its ``mu``): a model to start from instead
    of the best half-space (``rho_hs`` then skips the half-space search).
    """
    if rho_hs is None:
        # two starts: the half-space of the decay's shape (asinh-scaled data) and that of
        # the linear data. Either can be the branch Occam cannot leave (an independent
        # review: linear data ran to 0.1 or 1e5 ohm-m on 6 of 8 layered soundings), and from
        # either a fitting model can miss the truth where the other does not (the demo's
        # dB/dt-only station EM04: 2.4 decades at 0.5-1 DOI from 6.7 ohm-m, not from 564).
        # When they differ by more than 30 % both are run (and, when neither reaches the
        # target, the first start a decade up and down); of the models that reach the
        # target the smoothest is kept (Occam's rule: the least structure the data need;
        # Constable, Parker & Constable 1987), else the one of least misfit
        hs_fwd_cache = {}

        def predict_uniform(x):
            if x not in hs_fwd_cache:
                hs_fwd_cache[x] = sd.predict(np.array([np.exp(x)]), np.array([]))
            return hs_fwd_cache[x]

        starts = [best_halfspace(predict_uniform, sd.d_obs, sd.std, where=sign_consistent(sd))[0],
                  best_halfspace(predict_uniform, sd.d_obs, sd.std, scale="linear")[0]]
        kw = dict(h=h, m_ref_value=m_ref_value, ref_weight=ref_weight, callback=callback)
        best = smooth_station(sd, settings, rho_hs=starts[0], **kw)
        tried = [starts[0]]
        # ... and when neither reaches the target, a decade either side of the first
        for rho in [starts[1], starts[0] / 10.0, starts[0] * 10.0]:
            if len(tried) > 1 and best[0].chi2 <= 1.2 * settings.target:
                break
            if min(abs(np.log(rho / r)) for r in tried) <= 0.26:
                continue
            tried.append(rho)
            other = smooth_station(sd, settings, rho_hs=rho, **kw)
            if _preferred(other[0], best[0], settings.target):
                other[0].history = best[0].history + other[0].history
                best = other
        return best
    if h is None:
        h = mesh_for(sd, rho_hs, settings)
    M = h.size + 1
    ref = settings.ref_resistivity if m_ref_value is None else m_ref_value
    w_ref = settings.ref_weight if ref_weight is None else ref_weight
    m_ref = np.full(M, np.log(ref if ref is not None else rho_hs))
    kw = dict(m_ref=m_ref, ref_weight=w_ref, target=settings.target, max_iter=settings.max_iter,
              misfit_drop=settings.misfit_drop, callback=callback)
    lin_fwd, lin_predict = _problem(sd, h)
    # 1) asinh (log-like) data: usually converges in a few steps
    where = sign_consistent(sd)
    fwd, predict, d_t, s_t = asinh_problem(lin_fwd, lin_predict, sd.d_obs, sd.std, where)
    m0, mu0 = (np.full(M, np.log(rho_hs)), None) if start is None else start
    res = occam(fwd, d_t, s_t, m0, roughness_matrix(M), predict=predict, mu0=mu0, **kw)
    res.d_pred, res.J = _to_linear(res.d_pred, res.J, sd.std, where)
    res.chi2 = chi2_per_datum(sd.d_obs, res.d_pred, sd.std)
    if res.chi2 > 1.2 * settings.target:
        # 2) target missed: continue on the linear data from that model, keep the better
        res2 = occam(lin_fwd, sd.d_obs, sd.std, res.m, roughness_matrix(M), predict=lin_predict,
                     mu0=res.mu, **kw)
        if res2.chi2 < res.chi2:
            res2.history = res.history + res2.history
            res = res2
    if res.chi2 > 1.2 * settings.target:
        # 3) still missed: linear data from the half-space (another path), keep the better
        res3 = occam(lin_fwd, sd.d_obs, sd.std, np.full(M, np.log(rho_hs)), roughness_matrix(M),
                     predict=lin_predict, **kw)
        if res3.chi2 < res.chi2:
            res = res3
    beta = focusing_of(settings)
    if beta is not None:
        res = _focus(res, fwd, predict, d_t, s_t, sd, where, M, beta, settings, kw)
    return res, h, rho_hs


def _preferred(a, b, target) -> bool:
    """Whether smooth result ``a`` is preferred to ``b``: of two models reaching the target
    (chi2 within 1.2 of it, the inversion's own "reached" margin) the smoother (least
    ``||R m||^2``), else the one of least misfit."""
    def rough(r):
        return float(np.sum(np.diff(r.m) ** 2))

    ok_a, ok_b = a.chi2 <= 1.2 * target, b.chi2 <= 1.2 * target
    if ok_a and ok_b:
        return rough(a) < rough(b)
    return ok_a if ok_a != ok_b else a.chi2 < b.chi2


def _focus(res, fwd, predict, d_t, s_t, sd, where, M, beta, settings, kw):
    """Focusing (minimum gradient support) continued from the smooth model.

    The reweighting starts from the smooth model at its misfit (a model that
    already fits), so the blocks sharpen around the structure the data
    require; started from the half-space, the first rough steps decided the
    blocks and the sediment-top picks scattered by hundreds of metres on the
    Emberline profile (docs/inversion.md). The focused model is kept unless
    it fits worse than the smooth one by more than 10 % or misses 1.2 times
    the target where the smooth model met it (then the smooth model stays
    and its message says so).
    """
    foc = occam(fwd, d_t, s_t, res.m, roughness_matrix(M), predict=predict, mu0=res.mu,
                focusing=beta, **kw)
    foc.d_pred, foc.J = _to_linear(foc.d_pred, foc.J, sd.std, where)
    foc.chi2 = chi2_per_datum(sd.d_obs, foc.d_pred, sd.std)
    limit = max(1.1 * res.chi2, 1.2 * settings.target)
    if foc.chi2 <= limit:
        foc.history = res.history + foc.history
        return foc
    res.message = (f"{res.message}; focusing missed the misfit (chi2 {foc.chi2:.2f}), smooth "
                   "model kept")
    return res


def _few_dict(fr: FewLayerResult, start_rho, start_h):
    return dict(resistivity=fr.resistivity, thickness=fr.thickness, depth_top=fr.depth_top,
                log10_res_std=fr.log10_res_std, thickness_std=fr.thickness_std,
                depth_std=fr.depth_std, ln_std=fr.ln_std, correlation=fr.correlation,
                names=fr.names, chi2=fr.chi2, d_pred=fr.d_pred, converged=fr.lm.converged,
                message=fr.lm.message, start_resistivity=np.asarray(start_rho, float),
                start_thickness=np.asarray(start_h, float))


def invert_station(sd, settings: InversionSettings = InversionSettings(), callback=None) -> StationResult:
    """Smooth inversion, DOI and (optionally) few-layer inversion of one station."""
    res, h, rho_hs = smooth_station(sd, settings, callback=callback)
    M = h.size + 1
    R = res.R if res.R is not None else roughness_matrix(M)
    doi, doi_parts = station_doi(sd, settings, res, h, rho_hs)
    out = StationResult(
        station=sd.station, x=sd.x, y=sd.y, z=sd.z, thickness=h, resistivity=np.exp(res.m),
        log10_res_std=smooth_posterior_std(res.J, sd.std, R, res.mu, settings.ref_weight), chi2=res.chi2, doi=doi,
        halfspace=rho_hs, d_obs=sd.d_obs, std=sd.std, d_pred=res.d_pred, component=sd.component,
        channel=sd.channel, times=sd.gate_centre[np.nonzero(sd.mask)[1]], mu=res.mu,
        converged=res.converged, message=res.message, history=res.history, doi_parts=doi_parts,
        verdict=smooth_verdict(settings, res.chi2, sd.d_obs.size, res.converged, np.exp(res.m),
                               "smooth"),
        resolution=np.diag(model_resolution(res.J, sd.std, R, res.mu, settings.ref_weight)).copy())
    if settings.kind in ("few-layer", "posterior"):
        out.few = fewlayer_station(sd, settings, res.m, h, doi, rho_hs)
        # judged here, from the final few-layer fit, whichever search produced it
        out.few["verdict"] = few_verdict(settings, out.few, sd.d_obs.size)
    if settings.kind == "posterior":
        from .posterior import posterior_station, restarted_fit
        refit = restarted_fit(sd, settings, out.few, res.m, h, doi)
        if refit is not out.few:
            refit["verdict"] = few_verdict(settings, refit, sd.d_obs.size)
            out.few = refit
        out.posterior = posterior_station(sd, settings, out.few)
        # judged from the final diagnostics of the kept draws
        out.interval = interval_verdict_of(settings, out.posterior)
    if out.few is not None:
        from .equivalence import equivalence_ranges
        out.few["resistivity_range"] = equivalence_ranges(sd, settings, out.few)
        out.few["verdict"] = _doi_caveat(out.few["verdict"], out.verdict)
    if out.interval is not None:        # a model that misfits: its intervals are not to be used
        from .interval import unusable_interval
        out.interval = unusable_interval(out.interval, out.few["verdict"])
    if doi >= float(np.sum(h)) * (1.0 - 1e-9):
        # the DOI is the mesh's bottom: a lower bound, not where sensitivity ends (an
        # independent review: 16 of 34 stations, said in no product)
        note = (f"DOI {doi:.0f} m is the top of the mesh half-space: the data may see deeper "
                "(a lower bound; a deeper mesh with depth_max would show)")
        out.verdict = dataclasses.replace(out.verdict, reasons=tuple(out.verdict.reasons) + (note,))
        if out.few is not None and out.few.get("verdict") is not None:
            v = out.few["verdict"]
            out.few["verdict"] = dataclasses.replace(v, reasons=tuple(v.reasons) + (note,))
    return out


def _doi_caveat(verdict, smooth):
    """The few-layer verdict with one more finding when the smooth model its DOI comes from
    is a misfit: the DOI is then no statement about the data (an independent review: two
    few-layer models "fitted" with DOIs of 5250 m and 1860 m from smooth models at chi2 4.40
    and 2.23, said nowhere but in the smooth verdict). The status is the fit's own."""
    if verdict is None or smooth is None or smooth.status != "misfit":
        return verdict
    note = (f"DOI unreliable: it comes from the smooth model, a misfit at chi2 "
            f"{smooth.chi2:.2f} (tolerance {smooth.tolerance:.2f})")
    return dataclasses.replace(verdict, reasons=tuple(verdict.reasons) + (note,))


def station_doi(sd, settings, res, h, rho_hs):
    """Depth of investigation (m) of a station's smooth model, and each method's value.

    ``doi_method``: "sensitivity" (cumulative sensitivity, threshold
    ``doi_threshold`` or 0.8), "two-reference" (Oldenburg & Li index, cut-off
    ``doi_threshold`` or 0.2), or "shallower" (both, the shallower one):
    on the empymod suite the two-reference DOI claimed 6.5 km where the model
    departs from the truth at 3.3 km (4.5 km from the wire), and on the demo
    day the sensitivity DOI claimed 3.4-4.7 km where the basement is wrong
    from 2.3-3.4 km; the shallower of the two was honest in every case
    (docs/inversion.md).
    """
    parts = {}
    if settings.doi_method in ("sensitivity", "shallower"):
        thr = 0.8 if settings.doi_threshold is None else settings.doi_threshold
        parts["sensitivity"] = cumulative_sensitivity_doi(res.J, sd.std, h, threshold=thr)
    if settings.doi_method in ("two-reference", "shallower"):
        thr = 0.2 if settings.doi_threshold is None else settings.doi_threshold
        wr = max(settings.ref_weight, 0.3)   # the references must govern where data do not
        # each starts from the station's model shifted by its reference's factor (10 or
        # 1/10): where the data constrain the model they pull it back, where they do not it
        # stays near its reference (from the half-space each took as long as the station's
        # own inversion; from the unshifted model the references barely moved it)
        kw = dict(h=h, ref_weight=wr, rho_hs=rho_hs)
        ra, _, _ = smooth_station(sd, settings, m_ref_value=rho_hs * 10,
                                  start=(res.m + np.log(10.0), res.mu), **kw)
        rb, _, _ = smooth_station(sd, settings, m_ref_value=rho_hs / 10,
                                  start=(res.m - np.log(10.0), res.mu), **kw)
        if _reference_fits(ra, res, settings) and _reference_fits(rb, res, settings):
            parts["two-reference"], _ = two_reference_doi(ra.m, rb.m, np.log(rho_hs * 10),
                                                          np.log(rho_hs / 10), h, cutoff=thr)
        else:
            # a reference inversion that does not fit the data gives no index to read (an
            # independent review: chi2 6089 at a 3 km offset, an index above the cut-off at
            # every depth, a DOI of 0 m under a model that fits): the sensitivity DOI stands,
            # and doi_parts records the two-reference one as NaN
            parts["two-reference"] = float("nan")
            if "sensitivity" not in parts:
                parts["sensitivity"] = cumulative_sensitivity_doi(res.J, sd.std, h, threshold=0.8)
    return float(min(v for v in parts.values() if np.isfinite(v))), parts


def _reference_fits(r, res, settings) -> bool:
    """Whether a reference inversion of the two-reference DOI fits the data as a model
    must to be read (chi2 within 1.5 of the target, or of the station's own chi2)."""
    return bool(np.isfinite(r.chi2) and r.chi2 <= 1.5 * max(settings.target, res.chi2))


def fewlayer_station(sd, settings, m_smooth=None, h_smooth=None, doi=None, rho_hs=None):
    """Few-layer inversion of one station from the smooth model or the user's start.

    Without a user start: the global search of :mod:`tem.invert.fewglobal`
    (multi-start from the smooth model, not cut at the DOI, differential
    evolution, Levenberg-Marquardt polish) for ``settings.few_layers`` layers,
    or for every count up to ``settings.few_layers_max`` with the count chosen
    by ``settings.few_criterion``. The search's record (counts, chi2 and
    criterion values, evaluations) is under the key ``"search"``.
    """
    from .fewglobal import (choose_layer_count, global_fewlayer, search_box, smooth_starts,
                            split_starts)

    def layer_fwd(rho, h):
        return sd.jacobian(rho, h, with_thickness=True)

    priors = tuple(settings.priors)
    if settings.start_resistivity is not None:
        rho0 = np.asarray(settings.start_resistivity, float)
        h0 = np.asarray(settings.start_thickness if settings.start_thickness is not None else [], float)
        if rho0.size != h0.size + 1:
            raise ValueError("start model: need one more resistivity than thicknesses")
        fr = fewlayer_inversion(layer_fwd, sd.d_obs, sd.std, rho0, h0, priors=priors,
                                res_bounds=tuple(settings.few_resistivity_bounds),
                                thk_bounds=tuple(settings.few_thickness_bounds),
                                max_iter=settings.lm_max_iter)
        out = _few_dict(fr, rho0, h0)
        out["search"] = dict(winner="user start", n_layers=int(rho0.size))
        return out
    if rho_hs is None:
        rho_hs = float(np.exp(np.mean(m_smooth)))
    evaluations = settings.few_evaluations if settings.few_search == "global" else 0
    depth_max = max(float(np.sum(h_smooth)), 2.0 * source_offset(sd))
    first = max(1.0, 0.5 * float(h_smooth[0]))

    def search(n, previous):
        starts = smooth_starts(m_smooth, h_smooth, n, doi, rho_hs)
        extra = [] if previous is None else split_starts(previous.resistivity, previous.thickness)
        return global_fewlayer(sd.predict_many, layer_fwd, sd.d_obs, sd.std, n, starts,
                               search_box(n, first, depth_max), extra=extra, priors=priors,
                               layer_predict=sd.predict,
                               population=settings.few_population, evaluations=evaluations,
                               seed=settings.few_seed, lm_max_iter=settings.lm_max_iter)

    if priors:        # priors name layers: only the given count
        counts = [settings.few_layers]
    else:             # every count up to the one asked for, each starting from the one before
        counts = range(2, (settings.few_layers or settings.few_layers_max) + 1)
    # a count whose free parameters (2n - 1) reach the number of data fits anything (an
    # independent review: 3 gates, 3 layers, chi2 2.5e-21, "fitted"): not searched
    fixed = settings.few_layers
    if fixed and 2 * fixed - 1 >= sd.n_data:
        from ..errors import input_error
        raise input_error("usable", f"{sd.n_data} usable data cannot determine the "
                          f"{2 * fixed - 1} parameters of a {fixed}-layer model; use fewer "
                          "layers or the smooth kind", sd.file)
    counts = [n for n in counts if 2 * n - 1 < sd.n_data]
    if not counts:
        from ..errors import input_error
        raise input_error("usable", f"{sd.n_data} usable data cannot determine a few-layer "
                          "model (2 layers have 3 parameters); use the smooth kind", sd.file)
    fr, start, info = choose_layer_count(search, counts, sd.n_data, settings.few_criterion,
                                         fixed=fixed, target=settings.target)
    out = _few_dict(fr, *start)
    out["search"] = info
    return out


__all__ += ["fewlayer_station", "Prior", "smooth_verdict", "few_verdict"]


def profile_positions(x, y):
    """Distance along the profile (m): projection on the stations' principal direction."""
    xy = np.column_stack([np.asarray(x, float), np.asarray(y, float)])
    c = xy - xy.mean(axis=0)
    if len(xy) < 2 or not np.any(c):
        return np.zeros(len(xy))
    _, _, vt = np.linalg.svd(c, full_matrices=False)
    s = c @ vt[0]
    return s - s.min()


def lci_mesh(sds, settings: InversionSettings = InversionSettings()):
    """Shared mesh of a profile: (thickness (M-1,), best half-space per station)."""
    rho_hs = []
    for sd in sds:
        rho_hs.append(best_halfspace(lambda x, sd=sd: sd.predict(np.array([np.exp(x)]), np.array([])),
                                     sd.d_obs, sd.std, where=sign_consistent(sd))[0])
    rho_med = float(np.exp(np.median(np.log(rho_hs))))
    tmin = min(s.gate_centre[np.unique(np.nonzero(s.mask)[1])].min() for s in sds)
    tmax = max(s.gate_centre[np.unique(np.nonzero(s.mask)[1])].max() for s in sds)
    offset = float(np.median([source_offset(s) for s in sds]))
    return log_mesh(settings.layers, *mesh_depths(rho_med, tmin, tmax, offset, settings)), rho_hs


def lci_profile(sds, settings: InversionSettings = InversionSettings(),
                callback=None, m0=None, mesh=None):
    """Laterally constrained smooth inversion of a profile of stations.

    Stations are ordered along the profile (principal direction of their
    coordinates); all share one mesh built from the median best half-space.
    The joint inversion starts from independent smooth inversions of every
    station on that mesh (or from ``m0``, ln ohm-m, shape (S, M), in the
    given station order, with ``mesh`` its thicknesses): starting where each
    station already fits keeps the joint linearisation valid (common
    practice, no source). Returns a list of :class:`StationResult` in profile
    order.
    """
    from .lci import lci

    if len(sds) < 2:
        raise ValueError("lci: need at least two stations")
    pos = profile_positions([s.x for s in sds], [s.y for s in sds])
    order = np.argsort(pos, kind="stable")
    sds = [sds[i] for i in order]
    pos = pos[order]
    if m0 is None or mesh is None:
        h, rho_hs = lci_mesh(sds, settings)
        m0 = np.array([smooth_station(sd, settings, h=h)[0].m for sd in sds])
    else:
        h = np.asarray(mesh, float)
        m0 = np.asarray(m0, float)[order]
        rho_hs = [float(np.exp(np.mean(m))) for m in m0]
    M = h.size + 1
    problems = [_problem(sd, h) for sd in sds]
    # joint target: the requested one, or the misfit the independent models reach if that is
    # higher (then the LCI is the smoothest profile fitting as well as the stitched models)
    d_all = np.concatenate([sd.d_obs for sd in sds])
    s_all = np.concatenate([sd.std for sd in sds])
    p_all = np.concatenate([p[1](m) for p, m in zip(problems, m0)])
    target = max(settings.target, chi2_per_datum(d_all, p_all, s_all))
    res = lci([p[0] for p in problems], [sd.d_obs for sd in sds], [sd.std for sd in sds], m0,
              positions=pos, lateral_weight=settings.lateral_weight, predicts=[p[1] for p in problems],
              target=target, max_iter=settings.max_iter, misfit_drop=settings.misfit_drop,
              focusing=focusing_of(settings), callback=callback)
    thr = 0.8 if settings.doi_threshold is None else settings.doi_threshold
    R_all = sparse.csr_matrix(res.occam.R)
    out = []
    for s, sd in enumerate(sds):
        # this station's vertical rows of the (reweighted) operator
        R = R_all[s * (M - 1):(s + 1) * (M - 1), s * M:(s + 1) * M].toarray()
        doi = cumulative_sensitivity_doi(res.J[s], sd.std, h, threshold=thr)
        out.append(StationResult(
            station=sd.station, x=sd.x, y=sd.y, z=sd.z, thickness=h, resistivity=np.exp(res.m[s]),
            log10_res_std=smooth_posterior_std(res.J[s], sd.std, R, res.occam.mu),
            chi2=float(res.chi2_station[s]), doi=doi, halfspace=rho_hs[s], d_obs=sd.d_obs,
            std=sd.std, d_pred=res.d_pred[s], component=sd.component, channel=sd.channel,
            times=sd.gate_centre[np.nonzero(sd.mask)[1]], mu=res.occam.mu,
            converged=res.occam.converged, message=res.occam.message, history=res.history,
            verdict=smooth_verdict(settings, float(res.chi2_station[s]), sd.d_obs.size,
                                   res.occam.converged, np.exp(res.m[s]), "lci")))
    return out


__all__ += ["profile_positions", "lci_profile", "lci_mesh", "sign_consistent", "asinh_problem"]
