"""Depth-of-investigation measures.

Cumulative sensitivity: Christiansen & Auken 2012, Geophysics 77(4), WB171-WB177.
Two-reference index: Oldenburg & Li 1999, Geophysics 64(2), 403-416. The first checks
are exact consequences of the definitions on hand-made sensitivities; the last ones
test the station DOI against truth on empymod soundings (thresholds calibrated there).
"""
import numpy as np
import pytest

from tem.invert.doi import cumulative_sensitivity, cumulative_sensitivity_doi, two_reference_doi


def test_cumulative_sensitivity_sums_from_bottom():
    J = np.array([[1.0, -2.0, 0.5], [0.0, 1.0, 0.5]])
    S, C = cumulative_sensitivity(J, np.array([1.0, 0.5]), [10.0, 10.0])
    assert S == pytest.approx([0.5, 2.0, 0.75])        # mean over the 2 data
    assert C == pytest.approx([3.25, 2.75, 0.75])


def test_doi_interpolates_linearly_inside_a_layer():
    # per-layer sensitivities 4, 2, 0.2 (half-space) ; thickness 100, 100
    J = np.array([[4.0, 2.0, 0.2]])
    # threshold 1.2: C at top of layer 1 is 2.2, at its bottom 0.2 -> half way down layer 1
    assert cumulative_sensitivity_doi(J, np.ones(1), [100.0, 100.0], threshold=1.2) == pytest.approx(150.0)
    # threshold 0.1 < half-space sensitivity: DOI is the top of the half-space (mesh too shallow)
    assert cumulative_sensitivity_doi(J, np.ones(1), [100.0, 100.0], threshold=0.1) == pytest.approx(200.0)
    # larger errors mean less sensitivity and a shallower DOI
    assert (cumulative_sensitivity_doi(J, np.full(1, 2.0), [100.0, 100.0], threshold=1.2)
            < cumulative_sensitivity_doi(J, np.ones(1), [100.0, 100.0], threshold=1.2))


def test_two_reference_index():
    h = [100.0, 100.0, 100.0]
    ma = np.log([50.0, 50.0, 80.0, 100.0])
    mb = np.log([50.0, 50.0, 20.0, 10.0])
    doi, R = two_reference_doi(ma, mb, np.log(100.0), np.log(10.0), h, cutoff=0.2)
    assert R == pytest.approx([0.0, 0.0, np.log(4.0) / np.log(10.0), 1.0])
    # R crosses 0.2 between centres of layers 1 (150 m, R=0) and 2 (250 m, R=0.602)
    assert doi == pytest.approx(150.0 + 100.0 * 0.2 / (np.log(4.0) / np.log(10.0)))


def test_two_reference_ignores_unresolved_surface_layer():
    # a thin, poorly resolved top layer (R = 0.5) over resolved layers: the DOI is where
    # the reference takes over for good, not the top layer (Oldenburg & Li 1999 index)
    h = [10.0, 100.0, 100.0]
    R_target = np.array([0.5, 0.0, 0.5, 1.0])
    ma = np.log(10.0) * R_target
    doi, R = two_reference_doi(ma, np.zeros(4), np.log(10.0), 0.0, h, cutoff=0.2)
    assert R == pytest.approx(R_target)
    # centres 60 m (R=0) and 160 m (R=0.5): crossing at 60 + 100 * 0.2/0.5
    assert doi == pytest.approx(100.0)


# --------------------------------------------------------------------------- against truth
# Independent data: empymod (Werthmueller 2017, Geophysics 82(6), WB9-WB19) step-off Ex and
# dBz/dt of a 1.5 km grounded wire, 3 % Gaussian noise with 3 % stated errors (seeded), inverted
# with the tool's default settings (never started from the truth).
#
# Criterion (ours, stated in docs/inversion.md): what a DOI claims is that the model above it
# is data-driven. In the lower half of the column above the reported DOI, every layer that the
# station result reports as resolved (diagonal of the model resolution matrix at least RES_MIN,
# Menke 2012, "Geophysical Data Analysis: Discrete Inverse Theory", 3rd ed., ch. 4) must have a
# log10(rho) within TOL decades of the truth's range over a depth window of a factor 10**WINDOW
# either side (the "depth-smoothed truth": a smooth model cannot place a boundary better than a
# fraction of its depth). The shallower half is a matter of vertical resolution (e.g. the smeared
# top of a resistive salt layer), not of depth of investigation; a layer with a resolution below
# RES_MIN is reported as filled by the regularisation, whatever its depth.
WINDOW = 0.15        # log10 depth: factor 1.41 either side (our choice, no source)
TOL = 0.5            # decades (our choice, no source)
RES_MIN = 0.1        # resolution diagonal: calibrated on this suite (docs/inversion.md), no source
WIRE = ((-750.0, 800.0), (750.0, 800.0))
TIMES = np.geomspace(1e-3, 1.0, 31)
CASES = {   # thickness (m), resistivity (ohm-m), receiver (x, y) m; ~1.5 km from the wire
    "resistive basement under a thick conductor":
        ([200.0, 1500.0], [100.0, 8.0, 2000.0], (2000.0, 0.0)),
    "sub-salt conductor": ([300.0, 1200.0, 400.0], [10.0, 2000.0, 2.0, 50.0], (2000.0, 0.0)),
    "basalt over sediments over basement (Emberline-like)":
        ([20.0, 1200.0, 600.0], [30.0, 500.0, 8.0, 2000.0], (2000.0, 0.0)),
    "same, 4.5 km from the wire": ([20.0, 1500.0, 600.0], [30.0, 500.0, 8.0, 2000.0], (5000.0, 0.0)),
    # a dead Ex channel leaves dB/dt alone (the demo's EM04): from the half-space of the
    # asinh-scaled data alone (6.7 ohm-m) a fitting model missed by 2.4 decades at 0.5-1 DOI
    "dB/dt only, Emberline-like, 2.6 km from the wire":
        ([20.0, 1100.0, 600.0], [30.0, 500.0, 8.0, 2000.0], (-2500.0, 0.0), ("dbzdt",)),
}


def truth_on_mesh(thickness, resistivity, h):
    """Thickness-averaged log10(rho) of the truth in each mesh layer (the half-space: from its
    top to 1.5 times that depth)."""
    top = np.concatenate([[0.0], np.cumsum(h)])
    bot = np.concatenate([top[1:], [1.5 * top[-1]]])
    ttop = np.concatenate([[0.0], np.cumsum(thickness)])
    out = []
    for a, b in zip(top, bot):
        z = a + (b - a) * (np.arange(400) + 0.5) / 400
        out.append(np.mean(np.log10(np.asarray(resistivity, float)[np.searchsorted(ttop, z, "right") - 1])))
    return np.array(out)


def truth_range(thickness, resistivity, z):
    """log10(rho) range of the truth over [z / 10**WINDOW, z * 10**WINDOW] at each depth z."""
    top = np.concatenate([[0.0], np.cumsum(thickness)])
    lo, hi = [], []
    for zz in z:
        k = np.searchsorted(top, zz * 10 ** np.linspace(-WINDOW, WINDOW, 81), side="right") - 1
        v = np.log10(np.asarray(resistivity, float)[k])
        lo.append(v.min())
        hi.append(v.max())
    return np.array(lo), np.array(hi)


def invert_case(name, seed):
    """Invert the noisy empymod sounding of ``CASES[name]`` (noise seed ``seed``)."""
    pytest.importorskip("empymod")
    from empymod_ref import wire_response

    from tem.forward import Receiver, Simulation, Wire
    from tem.invert.data import station_data_from_arrays
    from tem.invert.doi import model_resolution
    from tem.invert.smooth import roughness_matrix
    from tem.invert.station import InversionSettings, invert_station

    th, rho, rx, *rest = CASES[name]
    comps = list(rest[0]) if rest else ["ex", "dbzdt"]
    d = np.array([wire_response(th, rho, *WIRE, [rx], c, TIMES)[0] for c in comps])
    noisy = d + 0.03 * np.abs(d) * np.random.default_rng(seed).standard_normal(d.shape)
    sim = Simulation(Wire(a=WIRE[0], b=WIRE[1]), [Receiver(c, rx) for c in comps], times=TIMES,
                     response="step-off")
    sd = station_data_from_arrays(sim, noisy, 0.03 * np.abs(d), comps, gate_centre=TIMES)
    r = invert_station(sd, InversionSettings())          # defaults: the shallower DOI
    top = np.concatenate([[0.0], np.cumsum(r.thickness)])
    zc = top[:-1] + 0.5 * r.thickness
    lo, hi = truth_range(th, rho, zc)
    m = np.log10(r.resistivity[:-1])
    miss = np.where(m < lo, m - lo, np.where(m > hi, m - hi, 0.0))
    # the truth seen through the resolution matrix at the final model (linearised:
    # m_est = R m_true + (I - R) m_ref; Aster, Borchers & Thurber 2013, sec. 4.4)
    M = r.resistivity.size
    Rm = model_resolution(sd.jacobian(r.resistivity, r.thickness)[1], sd.std,
                          roughness_matrix(M), r.mu, InversionSettings().ref_weight)
    mt = truth_on_mesh(th, rho, r.thickness)
    seen = Rm @ mt + (np.eye(M) - Rm) @ np.full(M, np.log10(r.halfspace))
    return dict(chi2=r.chi2, doi=r.doi, z=zc, miss=miss, parts=r.doi_parts,
                res=r.resolution[:-1], res_check=np.diag(Rm)[:-1], miss_seen=(m - seen[:-1]))


@pytest.fixture(scope="module")
def suite():
    return {name: invert_case(name, 10 + i) for i, name in enumerate(CASES)}


def judged(c, doi):
    """Layers the criterion judges for a claimed ``doi``: lower half above it, resolved."""
    return (c["z"] >= 0.5 * doi) & (c["z"] < doi) & (c["res"] >= RES_MIN)


@pytest.mark.slow      # the module's empymod suite and its inversions take about 35 s once
@pytest.mark.parametrize("name", list(CASES))
def test_model_above_the_doi_follows_the_truth(suite, name):
    c = suite[name]
    assert c["chi2"] <= 1.5                      # a fitted model (target chi2 1)
    sel = judged(c, c["doi"])
    assert sel.sum() >= 3                        # the check judges layers, not an empty set
    worst = float(np.abs(c["miss"][sel]).max())
    assert worst <= TOL, f"{name}: DOI {c['doi']:.0f} m, worst miss {worst:.2f} decades"


@pytest.mark.slow
def test_subsalt_conductor_top_is_not_smeared(suite):
    # from the half-space of the linear data (0.1-1e5 ohm-m bounds reached on ordinary
    # soundings) the sub-salt smooth model ramped the conductor's top up into the salt: the
    # layer near 1.1 km missed the depth-smoothed truth by more than TOL above the DOI, and
    # only the resolution flag said so (not on every noise draw). From the asinh-scaled
    # start no layer of the lower half above the DOI misses, resolved or not
    c = suite["sub-salt conductor"]
    lower = (c["z"] > 0.5 * c["doi"]) & (c["z"] < c["doi"])
    assert lower.sum() >= 3 and np.abs(c["miss"][lower]).max() <= TOL
    # ... and the conductor itself (1.5-1.9 km) is resolved and followed
    k = int(np.argmin(np.abs(c["z"] - 1750.0)))
    assert c["res"][k] > 0.5 and abs(c["miss"][k]) <= TOL


@pytest.mark.slow
@pytest.mark.parametrize("seed", [101, 102, 103])
def test_subsalt_on_other_noise(seed):
    # the same criterion on other noise realisations of the sub-salt sounding (seed 102
    # failed it from the former start: a smeared layer at 1.06 km, 130 ohm-m against 2000)
    c = invert_case("sub-salt conductor", seed)
    sel = judged(c, c["doi"])
    assert c["chi2"] <= 1.5 and sel.sum() >= 3
    assert np.abs(c["miss"][sel]).max() <= TOL


@pytest.mark.slow
def test_reported_resolution_is_that_of_the_final_model(suite):
    # the station result's diagonal equals the one recomputed from the final model's Jacobian
    for c in suite.values():
        assert c["res"] == pytest.approx(c["res_check"], abs=1e-6)
        assert np.all((c["res"] > -0.05) & (c["res"] < 1.05))   # a diagonal of R lies in [0, 1]


@pytest.mark.slow
def test_a_doi_set_too_deep_fails_the_criterion(suite):
    # the criterion can fail: claiming twice the reported DOI puts resolved layers that miss
    # the truth (the basement under the sediments) into the judged half on the basalt cases
    failing = []
    for name, c in suite.items():
        sel = judged(c, 2.0 * c["doi"])
        if sel.any() and np.abs(c["miss"][sel]).max() > TOL:
            failing.append(name)
    assert "same, 4.5 km from the wire" in failing


@pytest.mark.slow
def test_each_method_alone_can_claim_too_much(suite):
    # why the default takes the shallower DOI: on the Emberline-like sounding the
    # two-reference index alone claims depth below where the model first misses the truth
    # by more than TOL
    c = suite["basalt over sediments over basement (Emberline-like)"]
    bad = np.flatnonzero((np.abs(c["miss"]) > TOL) & (c["z"] >= 200.0))
    assert bad.size and c["parts"]["two-reference"] > c["z"][bad[0]] > c["doi"]
    # 4.5 km from the wire a reference inversion does not fit the data: no index is read
    # (NaN) and the sensitivity DOI stands, above the first miss
    c = suite["same, 4.5 km from the wire"]
    bad = np.flatnonzero((np.abs(c["miss"]) > TOL) & (c["z"] >= 200.0))
    assert np.isnan(c["parts"]["two-reference"])
    assert c["doi"] == c["parts"]["sensitivity"] and bad.size and c["z"][bad[0]] > c["doi"]


@pytest.mark.slow
def test_doi_report(suite, capsys):
    """Prints the numbers quoted in docs/inversion.md (not a check)."""
    with capsys.disabled():
        for name, c in suite.items():
            bad = np.flatnonzero((np.abs(c["miss"]) > TOL) & (c["z"] >= 200.0))
            first = c["z"][bad[0]] if bad.size else float("nan")
            sel = judged(c, c["doi"])
            low = np.flatnonzero(c["res"] < RES_MIN)
            lower = (c["z"] >= 0.5 * c["doi"]) & (c["z"] < c["doi"])
            deep = {f: np.abs(c["miss"][judged(c, f * c["doi"])]).max(initial=0.0) for f in (1.5, 2)}
            print(f"\n{name}: chi2 {c['chi2']:.2f}, DOI {c['doi']:.0f} m (two-reference "
                  f"{c['parts']['two-reference']:.0f}, sensitivity {c['parts']['sensitivity']:.0f}), "
                  f"worst miss in the lower half {np.abs(c['miss'][sel]).max():.2f} (resolved layers; all "
                  f"{np.abs(c['miss'][lower]).max():.2f}), first miss > "
                  f"{TOL} below 200 m at {first:.0f} m; layers with resolution < {RES_MIN}: "
                  f"{np.round(c['z'][low]).astype(int).tolist()}")
            print(f"  against R m_true: worst miss in the lower half "
                  f"{np.abs(c['miss_seen'][lower]).max():.2f}; worst miss judged at 1.5x and 2x the "
                  f"DOI {deep[1.5]:.2f}, {deep[2]:.2f}")
