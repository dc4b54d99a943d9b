"""Few-layer inversion of the blind suite with the tool's defaults (never started from the truth).

The suite (tests/data/blind_suite.npz, tests/create_data/blind_suite.py) was
computed with empymod (Werthmueller 2017, Geophysics 82(6), WB9-WB19) through an
independent waveform and gate superposition, with 3 % noise plus a floor; each
sounding is read as a gated file (tests/blind_data.py -> tem.invert.data.station_data)
and inverted with ``InversionSettings(kind="few-layer")``.

Acceptance (the inversion issue's criteria; common practice, no source):
* chi-square per datum <= 1.5;
* depth of the target's top (or a cap's base) within 10 % of the truth, the target
  being the layer below (above) the fitted interface nearest that depth;
* target resistivity within a factor 1.5, with a resistivity range (chi2 profile,
  tem/invert/equivalence.py) narrower than a factor 1.5**2; for a thin target (thickness under 0.3 of its
  depth) its conductance h/rho within a factor 1.5 instead: the resistivity and thickness
  of a thin conductor are not resolved separately, only their ratio (the equivalence of
  thin layers, e.g. Kaufman & Keller 1983, "Frequency and transient soundings", from
  memory). Measured: the 95 % range of a thin target's resistivity spans more than a
  factor 1.5**2, and holds the truth in 4 of the 5 thin soundings (not at
  basalt_thin_doi at 2.5 km: the truth's profile misfit is about 5.4 above the fit's).

The normal run inverts two representative soundings (a short offset where Ex reverses
sign, and a far one); the whole suite runs under -m slow (table in docs/inversion.md).
"""
import numpy as np
import pytest

from blind_data import load
from tem.invert.data import station_data
from tem.invert.station import InversionSettings, invert_station

CASES = load()
FAST = ["basalt_thin_near@600", "basement@2500"]


def case_id(c):
    return f"{c['name']}@{c['offset']:.0f}"


def judge(c, few):
    """The numbers of a case: ``chi2``, fitted and true depth ``z``, ``z_true``; the target
    layer's fitted and true ``rho``, ``h`` (inf for a half-space) and conductance ``S`` (h/rho),
    its resistivity range ``lo``-``hi`` (chi2 profile) and whether the true target is ``thin``."""
    z_true = c["target_depth"]
    z = few["depth_top"]
    k = 1 + int(np.argmin(np.abs(z[1:] - z_true)))       # nearest fitted interface
    layer = k - 1 if c["target_is_base"] else k
    rho = few["resistivity"]
    t_thk = c["thickness"][c["target_layer"]] if c["target_layer"] < c["thickness"].size else np.inf
    t_top = float(np.r_[0.0, np.cumsum(c["thickness"])][c["target_layer"]])
    h = few["thickness"][layer] if layer < few["thickness"].size else np.inf
    lo, hi = few["resistivity_range"][layer]
    return dict(chi2=float(few["chi2"]), z=float(z[k]), z_true=z_true, rho=float(rho[layer]),
                rho_true=c["target_resistivity"], h=float(h), h_true=float(t_thk),
                S=float(h / rho[layer]), S_true=float(t_thk / c["target_resistivity"]),
                lo=float(lo), hi=float(hi), thin=bool(t_thk < 0.3 * max(t_top, 1.0)))


def within(v, v_true, factor=1.5):
    return 1 / factor <= v / v_true <= factor


# thin targets whose true resistivity lies outside the 95 % range (measured; docs/inversion.md)
OUTSIDE = {"basalt_thin_doi@2500"}


def check(c):
    res = invert_station(station_data(c["ds"]), InversionSettings(kind="few-layer"))
    j = judge(c, res.few)
    assert j["chi2"] <= 1.5, f"chi2 {j['chi2']:.2f}"
    assert abs(j["z"] / j["z_true"] - 1) <= 0.10, f"depth {j['z']:.0f} m against {j['z_true']:.0f} m"
    if not j["thin"]:
        assert within(j["rho"], j["rho_true"]), f"{j['rho']:.3g} against {j['rho_true']:.3g} ohm-m"
        # a thick target's resistivity is determined: its range is narrower than 1.5**2
        assert j["lo"] <= j["rho"] <= j["hi"] and j["hi"] / j["lo"] < 1.5 ** 2
        return res
    # thin: the conductance is resolved, the resistivity is not; the range says so
    assert within(j["S"], j["S_true"]), f"{j['S']:.3g} against {j['S_true']:.3g} S"
    assert j["hi"] / j["lo"] > 1.5 ** 2, f"range {j['lo']:.3g}-{j['hi']:.3g} ohm-m"
    assert (j["lo"] <= j["rho_true"] <= j["hi"]) == (case_id(c) not in OUTSIDE)
    return res


@pytest.mark.parametrize("cid", FAST)
def test_blind_fewlayer_representative(cid):
    check(next(c for c in CASES if case_id(c) == cid))


@pytest.mark.slow
@pytest.mark.parametrize("cid", [case_id(c) for c in CASES if case_id(c) not in FAST])
def test_blind_fewlayer_whole_suite(cid):
    check(next(c for c in CASES if case_id(c) == cid))


def test_suite_file_is_small_and_plain():
    """The suite loads without pickles and holds >= 12 soundings at short, near and far offsets."""
    z = np.load(__import__("blind_data").PATH, allow_pickle=False)
    assert z["value"].shape[0] >= 12 and __import__("blind_data").PATH.stat().st_size < 1e6
    off = z["offset"]
    assert off.min() <= 800 and np.any(np.abs(off - 1500) < 100) and off.max() >= 2500
    # Ex reverses sign during the decay at some short offset
    short = np.flatnonzero(off <= 800)
    assert any(np.any(np.diff(np.sign(z["noise_free"][i, 0])) != 0) for i in short)


def test_suite_agrees_with_tem_forward_on_the_truth():
    """The empymod-made suite and tem.forward agree on the true models (2e-3 of the value,
    floor 1e-3 of the channel's peak; empymod as the independent reference, docs/forward.md)."""
    from tem.forward import LayeredModel

    z = np.load(__import__("blind_data").PATH, allow_pickle=False)
    for i in (0, 7):
        c = CASES[i]
        sd = station_data(c["ds"], build_simulation=True)
        d = sd.sim.predict(LayeredModel(c["thickness"], c["resistivity"]))
        ref = z["noise_free"][i]
        den = np.maximum(np.abs(ref), 1e-3 * np.abs(ref).max(axis=1, keepdims=True))
        assert np.max(np.abs(d - ref) / den) < 2e-3


@pytest.mark.slow
@pytest.mark.parametrize("thickness, offset", [(600.0, 600.0), (100.0, 1500.0)])
def test_thin_sweep_resolution(thickness, offset):
    """The thickness sweep of docs/inversion.md ("Where a conductor's resistivity is
    resolved"; tests/create_data/thin_sweep.py): the basalt conductor (5 ohm-m, top at
    900 m) remade with empymod and inverted with the defaults. 600 m thick (0.67 of its
    depth): its resistivity is within a factor 1.5 with a range narrower than 1.5**2
    (measured 5.09, 4.59-5.53 ohm-m). 100 m (0.11): only its conductance is within 1.5
    (measured 20.5 S against 20) and the range is wider than 1.5**2 (measured 0.1-24.5 ohm-m):
    the equivalence of thin layers (Kaufman & Keller 1983, from memory; the factors 1.5 and
    1.5**2 are the suite's acceptance, common practice, no source). The rule here is the
    sweep's measured limit for this model, thickness at least 0.5 of the depth."""
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).parent / "create_data"))
    from thin_sweep import case, invert

    j = invert(case(thickness, offset))
    assert j["chi2"] <= 1.5, f"chi2 {j['chi2']:.2f}"
    if thickness / j["z_true"] >= 0.5:
        assert j["rho_ok"], f"{j['rho']:.3g} against {j['rho_true']:.3g} ohm-m"
        assert j["narrow"] and j["lo"] <= j["rho"] <= j["hi"], f"range {j['lo']:.3g}-{j['hi']:.3g}"
    else:
        assert j["S_ok"], f"{j['S']:.3g} against {j['S_true']:.3g} S"
        assert not j["narrow"], f"range {j['lo']:.3g}-{j['hi']:.3g} ohm-m"
