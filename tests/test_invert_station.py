"""Station inversion on synthetic Emberline Plateau data (tem.forward as the engine).

Sources beside each check:
* chi-square per datum, target 1: Constable, Parker & Constable 1987, Geophysics 52(3),
  289-300 (Occam).
* linearised posterior std from (J^T W J)^-1: Marquardt 1963, J. SIAM 11(2), 431-441 /
  Gauss-Markov.
* DOI from cumulative sensitivity: Christiansen & Auken 2012 (threshold from memory, UNVERIFIED).
* tolerances 25 % / 10 % / 2 sigma / chi2 <= 1.2: the acceptance criteria of the inversion issue
  (common practice, no source).
"""
import numpy as np
import pytest

from tem.errors import TemInputError
from tem.invert.data import station_data, station_data_from_arrays
from tem.invert.smooth import best_halfspace, occam
from tem.invert.station import InversionSettings, invert_station, mesh_for, _problem
from tem.invert.synthetic import (basalt_thickness, emberline_gates,
                                  emberline_simulation, emberline_station, gated_dataset)

X = 1500.0
GATES = emberline_gates(24, 1e-3, 1.0)
CENTRE = np.sqrt(GATES[0] * GATES[1])


@pytest.fixture(scope="module")
def emberline_result():
    v, e, sim, model = emberline_station(X, noise=0.03, seed=0, gates=GATES)
    sd = station_data_from_arrays(sim, v, e, ["ex", "dbzdt"], x=X, gate_centre=CENTRE)
    return invert_station(sd, InversionSettings(kind="few-layer", few_layers=4)), model


def test_emberline_fewlayer_recovers_sediment_target(emberline_result):
    res, model = emberline_result
    f = res.few
    true_rho, true_top = 8.0, 20.0 + basalt_thickness(X)
    # sediment = the most conductive layer below 100 m (the 20 m surface layer is resolved
    # only by its conductance: 1 m of 1.6 ohm-m fits as well as 20 m of 30 ohm-m)
    deep = f["depth_top"] > 100.0
    k = int(np.flatnonzero(deep)[np.argmin(f["resistivity"][deep])])
    assert abs(f["resistivity"][k] / true_rho - 1) < 0.25
    assert abs(f["depth_top"][k] / true_top - 1) < 0.10
    assert f["chi2"] < 1.5
    # true values inside 2 posterior std for the well-resolved parameters
    # (std of the ln parameter < 0.4, i.e. better than a factor 1.5; common practice, no source)
    true_p = np.log(np.concatenate([model.resistivity, model.thickness]))
    est_p = np.log(np.concatenate([f["resistivity"], f["thickness"]]))
    well = (f["ln_std"] > 0) & (f["ln_std"] < 0.4)
    assert well[k] and well[4 + k - 1]          # sediment resistivity and basalt thickness
    assert np.all(np.abs(est_p[well] - true_p[well]) <= 2 * f["ln_std"][well])
    assert abs(f["depth_top"][k] - true_top) <= 2 * f["depth_std"][k]
    # resistivity ranges (chi2 profile, 95 % profile interval for one parameter; Press et al.
    # 2007, Numerical Recipes 3rd ed., sec. 15.6): every true resistivity inside its layer's
    # range; the thin surface layer's spans more than a factor 10 (only its conductance is
    # seen), the sediment's less than a factor 1.5
    lo, hi = f["resistivity_range"].T
    assert np.all((lo <= model.resistivity) & (model.resistivity <= hi))
    assert hi[0] / lo[0] > 10 and hi[k] / lo[k] < 1.5


def test_emberline_smooth_reaches_target_and_sees_conductor(emberline_result):
    res, _ = emberline_result
    assert res.chi2 <= 1.2
    assert res.thickness.size == 29                 # 30 layers incl. half-space
    ztop = np.concatenate([[0.0], np.cumsum(res.thickness)])
    k = int(np.argmin(res.resistivity[:-1]))
    z_conductor = ztop[k] + 0.5 * res.thickness[k]
    assert res.resistivity[k] < 20.0                 # the 8 ohm-m sediments show as a conductor
    assert z_conductor < res.doi
    # posterior band widens below the DOI (less information there)
    below = ztop >= res.doi
    assert np.median(res.log10_res_std[below]) > np.median(res.log10_res_std[~below])


def test_noise_free_halfspace_recovered_within_one_percent():
    sim = emberline_simulation(X, gates=emberline_gates(10, 2e-3, 0.5))
    from tem.forward import LayeredModel
    d = sim.predict(LayeredModel.halfspace(100.0))
    g = emberline_gates(10, 2e-3, 0.5)
    sd = station_data_from_arrays(sim, d, 0.03 * np.abs(d), ["ex", "dbzdt"], x=X,
                                  gate_centre=np.sqrt(g[0] * g[1]))
    rho, c = best_halfspace(lambda x: sd.predict(np.array([np.exp(x)]), np.array([])), sd.d_obs, sd.std)
    assert rho == pytest.approx(100.0, rel=0.01)
    h = mesh_for(sd, rho, InversionSettings())
    fwd, pred = _problem(sd, h)
    r = occam(fwd, sd.d_obs, sd.std, np.full(h.size + 1, np.log(10.0)), predict=pred, target=1.0,
              max_iter=20, misfit_drop=0.3)
    assert np.exp(r.m) == pytest.approx(np.full(h.size + 1, 100.0), rel=0.01)


def _gated(**kw):
    gates = emberline_gates(6, 2e-3, 0.5)
    v = np.ones((2, 6)) * 1e-9
    args = dict(station="B", x=X, y=0.0, value=v, error=0.03 * v, components=["ex", "dbzdt"],
                gates=gates)
    args.update(kw)
    return gated_dataset(**args)


def test_bad_input_is_reported_clearly():
    with pytest.raises(TemInputError, match="f.nc: usable: no usable gates"):
        station_data(_gated(usable=np.zeros((2, 6), bool)), file="f.nc")
    with pytest.raises(TemInputError, match="error: all standard errors"):
        station_data(_gated(error=np.zeros((2, 6))), file="f.nc")
    # a usable gate with a NaN error or value was dropped in silence (independent review)
    err = 0.03 * np.ones((2, 6)) * 1e-9
    err[1, 4] = np.nan
    with pytest.raises(TemInputError, match=r"f.nc: error: 1 usable gate\(s\) with a NaN, "
                       r"infinite or negative error, first dbzdt gate 4"):
        station_data(_gated(error=err), file="f.nc")
    val = np.ones((2, 6)) * 1e-9
    val[0, 0] = np.inf
    with pytest.raises(TemInputError, match="f.nc: value: 1 usable gate.*ex gate 0"):
        station_data(_gated(value=val), file="f.nc")
    # ... and one marked unusable is no datum at all
    sd = station_data(_gated(error=err, usable=np.isfinite(err)), file="f.nc",
                      build_simulation=False)
    assert sd.n_data == 11
    ds = _gated()
    ds.attrs["tx_points"] = np.array([-750.0, 800.0, 750.0])
    with pytest.raises(TemInputError, match="tx_points"):
        station_data(ds, file="f.nc")
    ds = _gated(x=0.0, y=800.0)          # receiver on the wire
    with pytest.raises(TemInputError, match="within 1 m of the transmitter"):
        station_data(ds, file="f.nc")
    ds = _gated()
    ds["rx_x1"].values[1] = X + 5.0      # coil with two ends
    with pytest.raises(TemInputError, match="coil"):
        station_data(ds, file="f.nc")


def test_smooth_start_is_not_the_search_bound_on_ordinary_layered_earths():
    """Two-layer earths computed with empymod (Werthmueller 2017, Geophysics 82(6),
    WB9-WB19; quasi-static, tests/empymod_ref.py), 3 % noise: the best half-space was
    picked on linear data, where an under-prediction costs at most 1/floor^2 per datum,
    so the search ran to 0.1 or 1e5 ohm-m and Occam, on a mesh sized for it, ended
    misfit (an independent review: 6 of 8 soundings). The start now comes from the
    asinh-scaled data and every case fits (target 1, chi2 <= 1.2: the issue's criterion)."""
    from empymod_ref import wire_response

    from tem.forward import Receiver, Simulation, Wire
    from tem.invert.station import smooth_station

    t = np.geomspace(3e-4, 1.0, 30)
    rng = np.random.default_rng(20261205)
    w2 = ((-1000.0, 0.0), (1000.0, 0.0))
    ex_dbz = ("ex", "dbzdt")
    for thk, rho, rx, (a, b), comps in (
            ([500.0], [40.0, 400.0], (0.0, -1000.0), w2, ex_dbz),
            ([400.0, 800.0], [100.0, 10.0, 500.0], (300.0, -3000.0), w2, ex_dbz)):
        d = np.vstack([wire_response(thk, rho, a, b, [rx], comp, t, srcpts=11)
                       for comp in comps])
        floor = np.array([[2e-11 if c == "ex" else 2e-13] for c in comps])
        err = np.sqrt((0.03 * np.abs(d)) ** 2 + floor ** 2)
        obs = d + err * rng.standard_normal(d.shape)
        sim = Simulation(Wire(a, b), [Receiver(c, rx) for c in comps], times=t)
        sd = station_data_from_arrays(sim, obs, err, list(comps), x=rx[0], y=rx[1],
                                      gate_centre=t)
        res, h, rho_hs = smooth_station(sd, InversionSettings())
        assert 0.1 < rho_hs < 1e5, (rho, rho_hs)       # not at a bound of the search
        assert res.chi2 <= 1.2, (rho, res.chi2, res.message)


@pytest.mark.parametrize("seed", [1, 2, 5])
def test_smooth_fits_an_ex_alone_that_reverses_sign_twice(seed):
    """Ex alone, 3.5 km broadside of a 3 km wire over a geothermal profile (400 ohm-m over
    a 3 ohm-m cap, 30, 80, 300 ohm-m), computed with empymod (Werthmueller 2017), 3 % noise,
    gates within 2 errors of zero unusable: no channel keeps one sign. The start was the
    0.1 ohm-m bound and Occam ended at chi2 925-1070 on these three noise draws (an
    independent review's case); the start now ranks half-spaces on the data's magnitudes
    and, when a fit misses, tries a decade either side."""
    from empymod_ref import wire_response

    from tem.forward import Receiver, Simulation, Wire
    from tem.invert.station import smooth_station

    t = np.geomspace(1e-4, 1.0, 36)
    a, b = (-1500.0, 0.0), (1500.0, 0.0)
    thk, rho, rx = [150.0, 350.0, 700.0, 600.0], [400.0, 3.0, 30.0, 80.0, 300.0], (0.0, -3500.0)
    d = wire_response(thk, rho, a, b, [rx], "ex", t, srcpts=11)
    err = np.sqrt((0.03 * np.abs(d)) ** 2 + 2e-11 ** 2)
    obs = d + err * np.random.default_rng(seed).standard_normal(d.shape)
    assert np.unique(np.sign(obs[np.abs(obs) > 3 * err])).size == 2
    sim = Simulation(Wire(a, b), [Receiver("ex", rx)], times=t)
    sd = station_data_from_arrays(sim, obs, err, ["ex"], x=rx[0], y=rx[1], gate_centre=t,
                                  usable=np.abs(obs) > 2 * err)
    res, h, rho_hs = smooth_station(sd, InversionSettings())
    assert res.chi2 <= 1.2, (seed, rho_hs, res.chi2, res.message)


def test_few_layer_counts_stop_below_the_number_of_data():
    # 3 usable data: a 3-layer model (5 parameters) fitted them to 2.5e-21 and read "fitted"
    usable = np.zeros((2, 6), bool)
    usable[0, :2] = usable[1, 0] = True
    sd = station_data(_gated(usable=usable), file="f.nc")
    with pytest.raises(TemInputError, match="f.nc: usable: 3 usable data cannot determine a "
                       "few-layer model"):
        invert_station(sd, InversionSettings(kind="few-layer"))
    with pytest.raises(TemInputError, match="3 usable data cannot determine the 5 parameters"):
        invert_station(sd, InversionSettings(kind="few-layer", few_layers=3))


def test_a_few_layer_verdict_says_when_its_doi_comes_from_a_misfit():
    # a few-layer model "fitted" carried the DOI of a smooth model at chi2 4.40, said nowhere
    # but in the smooth verdict (independent review): the finding is added, the status kept
    from tem.invert.station import _doi_caveat
    from tem.invert.verdict import Verdict

    few = Verdict("fitted", 0.77, 1.0, 1.5, 36, ("chi2 0.77 within tolerance 1.50",), "few-layer")
    bad = Verdict("misfit", 4.4, 1.0, 1.5, 36, ("chi2 4.40 above tolerance 1.50",), "smooth")
    out = _doi_caveat(few, bad)
    assert out.status == "fitted" and out.reasons[0] == few.reasons[0]
    assert out.reasons[-1] == ("DOI unreliable: it comes from the smooth model, a misfit at "
                               "chi2 4.40 (tolerance 1.50)")
    assert _doi_caveat(few, dataclasses_replace(bad, status="fitted", chi2=1.1)) is few


def dataclasses_replace(v, **kw):
    import dataclasses
    return dataclasses.replace(v, **kw)


def test_a_doi_at_the_mesh_bottom_is_said_to_be_a_lower_bound(emberline_result, monkeypatch):
    # 16 of 34 stations of an independent review had their DOI at the top of the mesh
    # half-space, said in no product: the verdicts now carry it as a finding
    import tem.invert.station as station

    res, _ = emberline_result
    mark = "is the top of the mesh half-space"
    assert (res.doi >= res.thickness.sum() * (1 - 1e-9)) == any(mark in r for r in res.verdict.reasons)
    # a DOI at the bottom (as the cumulative sensitivity gives when it never falls below
    # its threshold on the mesh)
    monkeypatch.setattr(station, "station_doi",
                        lambda sd, settings, r, h, rho: (float(np.sum(h)), {"sensitivity": 0.0}))
    v, e, sim, _ = emberline_station(X, noise=0.03, seed=0, gates=GATES)
    sd = station_data_from_arrays(sim, v, e, ["ex", "dbzdt"], x=X, gate_centre=CENTRE)
    deep = invert_station(sd, InversionSettings())
    assert deep.doi == pytest.approx(deep.thickness.sum())
    assert any(f"DOI {deep.doi:.0f} m {mark}" in r for r in deep.verdict.reasons)
