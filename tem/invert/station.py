"""One station, end to end: best half-space, mesh, Occam smooth model, DOI, and
optionally a few-layer model with linearised uncertainty.

Pure computation on a :class:`tem.invert.data.StationData`; files and progress
live in :mod:`tem.invert.stage`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .doi import cumulative_sensitivity_doi, two_reference_doi
from .fewlayer import FewLayerResult, Prior, fewlayer_inversion, starting_models
from .settings import InversionSettings
from .smooth import best_halfspace, chi2_per_datum, diffusion_depth, log_mesh, occam, roughness_matrix

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
    """Per datum: True where the datum's channel keeps one sign over all its gates."""
    out = np.zeros(sd.d_obs.size, bool)
    for ch in np.unique(sd.channel):
        sel = sd.channel == ch
        v = sd.d_obs[sel]
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


def smooth_station(sd, settings: InversionSettings, h=None, m_ref_value=None, ref_weight=None,
                   callback=None):
    """Occam smooth inversion of one station; returns (OccamResult, thickness, rho_hs)."""
    hs_fwd_cache = {}

    def predict_uniform(x):
        if x not in hs_fwd_cache:
            hs_fwd_cache[x] = sd.predict(np.array([np.exp(x)]), np.array([]))
        return hs_fwd_cache[x]

    rho_hs, _ = best_halfspace(predict_uniform, sd.d_obs, sd.std)
    if h is None:
        h = mesh_for(sd, rho_hs, settings)
    M = h.size + 1
    ref = settings.ref_resistivity if m_ref_value is None else m_ref_value
    w_ref = settings.ref_weight if ref_weight is None else ref_weight
    m_ref = np.full(M, np.log(ref if ref is not None else rho_hs))
    kw = dict(m_ref=m_ref, ref_weight=w_ref, target=settings.target, max_iter=settings.max_iter,
              callback=callback)
    lin_fwd, lin_predict = _problem(sd, h)
    # 1) asinh (log-like) data: usually converges in a few steps
    where = sign_consistent(sd)
    fwd, predict, d_t, s_t = asinh_problem(lin_fwd, lin_predict, sd.d_obs, sd.std, where)
    res = occam(fwd, d_t, s_t, np.full(M, np.log(rho_hs)), roughness_matrix(M), predict=predict, **kw)
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
    return res, h, rho_hs


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
    R = roughness_matrix(M)
    if settings.doi_method == "sensitivity":
        thr = 0.8 if settings.doi_threshold is None else settings.doi_threshold
        doi = cumulative_sensitivity_doi(res.J, sd.std, h, threshold=thr)
    else:
        thr = 0.2 if settings.doi_threshold is None else settings.doi_threshold
        wr = max(settings.ref_weight, 0.3)   # the references must govern where data do not
        ra, _, _ = smooth_station(sd, settings, h=h, m_ref_value=rho_hs * 10, ref_weight=wr)
        rb, _, _ = smooth_station(sd, settings, h=h, m_ref_value=rho_hs / 10, ref_weight=wr)
        doi, _ = two_reference_doi(ra.m, rb.m, np.log(rho_hs * 10), np.log(rho_hs / 10), h, cutoff=thr)
    out = StationResult(
        station=sd.station, x=sd.x, y=sd.y, z=sd.z, thickness=h, resistivity=np.exp(res.m),
        log10_res_std=smooth_posterior_std(res.J, sd.std, R, res.mu, settings.ref_weight), chi2=res.chi2, doi=doi,
        halfspace=rho_hs, d_obs=sd.d_obs, std=sd.std, d_pred=res.d_pred, component=sd.component,
        channel=sd.channel, times=sd.gate_centre[np.nonzero(sd.mask)[1]], mu=res.mu,
        converged=res.converged, message=res.message, history=res.history)
    if settings.kind in ("few-layer", "posterior"):
        out.few = fewlayer_station(sd, settings, res.m, h, doi)
    if settings.kind == "posterior":
        from .posterior import posterior_station, restarted_fit
        out.few = restarted_fit(sd, settings, out.few, res.m, h, doi)
        out.posterior = posterior_station(sd, settings, out.few)
    return out


def fewlayer_station(sd, settings, m_smooth=None, h_smooth=None, doi=None):
    """Few-layer inversion of one station from the smooth model or the user's start."""
    if settings.start_resistivity is not None:
        rho0 = np.asarray(settings.start_resistivity, float)
        h0 = np.asarray(settings.start_thickness if settings.start_thickness is not None else [], float)
        if rho0.size != h0.size + 1:
            raise ValueError("start model: need one more resistivity than thicknesses")
        starts = [(rho0, h0)]
    else:
        starts = starting_models(m_smooth, h_smooth, settings.few_layers, max_depth=doi)

    def layer_fwd(rho, h):
        return sd.jacobian(rho, h, with_thickness=True)

    best = None
    for rho0, h0 in starts:
        fr = fewlayer_inversion(layer_fwd, sd.d_obs, sd.std, rho0, h0, priors=tuple(settings.priors),
                                max_iter=settings.lm_max_iter)
        if best is None or fr.lm.objective < best[0].lm.objective:
            best = (fr, rho0, h0)
    return _few_dict(*best)


__all__ += ["fewlayer_station", "Prior"]


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
                                     sd.d_obs, sd.std)[0])
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
              target=target, max_iter=settings.max_iter, callback=callback)
    thr = 0.8 if settings.doi_threshold is None else settings.doi_threshold
    R = roughness_matrix(M)
    out = []
    for s, sd in enumerate(sds):
        doi = cumulative_sensitivity_doi(res.J[s], sd.std, h, threshold=thr)
        out.append(StationResult(
            station=sd.station, x=sd.x, y=sd.y, z=sd.z, thickness=h, resistivity=np.exp(res.m[s]),
            log10_res_std=smooth_posterior_std(res.J[s], sd.std, R, res.occam.mu),
            chi2=float(res.chi2_station[s]), doi=doi, halfspace=rho_hs[s], d_obs=sd.d_obs,
            std=sd.std, d_pred=res.d_pred[s], component=sd.component, channel=sd.channel,
            times=sd.gate_centre[np.nonzero(sd.mask)[1]], mu=res.occam.mu,
            converged=res.occam.converged, message=res.occam.message, history=res.history))
    return out


__all__ += ["profile_positions", "lci_profile", "lci_mesh", "sign_consistent", "asinh_problem"]
