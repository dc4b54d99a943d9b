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
* target resistivity within a factor 1.5; for a thin target (thickness under 0.3 of
  its depth) its conductance h/rho instead: the resistivity and thickness of a thin
  conductor are not resolved separately, only their ratio (the equivalence of thin
  layers, e.g. Kaufman & Keller 1983, "Frequency and transient soundings", from memory).

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
    """(chi2, fitted depth, true depth, fitted value, true value, value kind) of a case."""
    z_true = c["target_depth"]
    z = few["depth_top"]
    k = 1 + int(np.argmin(np.abs(z[1:] - z_true)))       # nearest fitted interface
    layer = k - 1 if c["target_is_base"] else k
    rho = few["resistivity"]
    t_thk = c["thickness"][c["target_layer"]] if c["target_layer"] < c["thickness"].size else np.inf
    t_top = float(np.r_[0.0, np.cumsum(c["thickness"])][c["target_layer"]])
    if t_thk < 0.3 * max(t_top, 1.0):
        # thin target: conductance h/rho of the fitted target layer
        h = few["thickness"][layer] if layer < few["thickness"].size else np.inf
        value, truth, kind = float(h / rho[layer]), t_thk / c["target_resistivity"], "S"
    else:
        value, truth, kind = float(rho[layer]), c["target_resistivity"], "ohm-m"
    return float(few["chi2"]), float(z[k]), z_true, value, truth, kind


def check(c):
    res = invert_station(station_data(c["ds"]), InversionSettings(kind="few-layer"))
    chi2, z, z_true, v, v_true, kind = judge(c, res.few)
    assert chi2 <= 1.5, f"chi2 {chi2:.2f}"
    assert abs(z / z_true - 1) <= 0.10, f"depth {z:.0f} m against {z_true:.0f} m"
    assert 1 / 1.5 <= v / v_true <= 1.5, f"{kind} {v:.3g} against {v_true:.3g}"
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
