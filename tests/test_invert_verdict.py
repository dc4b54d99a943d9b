"""The verdict on a model: judged from its final numbers only.

Tolerance: target x max(1.5, chi2.ppf(0.95, N) / N); the 95 % quantiles used
below are from scipy.stats.chi2 and agree with printed chi-square tables
(e.g. Abramowitz & Stegun 1964, table 26.8: 18.307 for 10 degrees of freedom,
124.342 for 100).
"""
import math
import struct

import numpy as np

import pytest
from profile_fixture import synthetic_models

from tem.invert.settings import InversionSettings
from tem.invert.verdict import CODES, FAILURES, STATUSES, Verdict, flag_meanings, judge, tolerance

KW = dict(target=1.0, tolerance_factor=1.5, quantile=0.95, bound_margin=0.01,
          thin_fraction=0.05, stall_margin=0.2)
RB, TB = (0.1, 1e5), (1.0, 2e4)


def test_tolerance_is_the_chi_square_quantile_or_the_floor():
    # Abramowitz & Stegun 1964, table 26.8: chi2_0.95(10) = 18.307
    assert tolerance(1.0, 10, 1.5, 0.95) == pytest.approx(1.8307, abs=1e-4)
    # chi2_0.95(100) / 100 = 1.243 < 1.5: the floor governs (common practice, no source)
    assert tolerance(1.0, 100, 1.5, 0.95) == pytest.approx(1.5)
    assert tolerance(2.0, 100, 1.5, 0.95) == pytest.approx(3.0)


def test_a_fitted_model():
    v = judge(1.1, 31, converged=True, resistivity=[10, 100, 1000], thickness=[50, 300],
              resistivity_bounds=RB, thickness_bounds=TB, **KW)
    assert v.status == "fitted" and v.code == 0 and not v.failed
    assert v.reasons[0] == "chi2 1.1 within tolerance 1.50 (target 1, 31 data)"


def test_a_misfit_names_chi2_tolerance_target_and_data():
    v = judge(25.1, 31, converged=True, resistivity=[10, 100], thickness=[50], **KW)
    assert v.status == "misfit" and v.code == 1 and v.failed
    assert v.summary == "misfit: chi2 25.1 above tolerance 1.50 (target 1, 31 data)"
    assert judge(math.nan, 31, converged=True, resistivity=[10], **KW).status == "misfit"


def test_stalled_only_when_unconverged_and_clearly_above_target():
    kw = dict(resistivity=[10, 100], thickness=[50], **KW)
    assert judge(1.3, 40, converged=False, **kw).status == "stalled"
    assert judge(1.3, 40, converged=True, **kw).status == "fitted"
    assert judge(1.15, 40, converged=False, **kw).status == "fitted"   # within the 20 % margin
    assert judge(0.9, 40, converged=False, **kw).status == "fitted"


def test_parameter_at_bound_and_degenerate_layer_are_warnings():
    v = judge(0.9, 31, converged=True, resistivity=[10, 100, 1e5], thickness=[50, 300],
              resistivity_bounds=RB, thickness_bounds=TB, **KW)
    assert v.status == "parameter-at-bound" and v.code == 3 and not v.failed
    assert "layer 3 resistivity 1e5 ohm-m at the upper bound" in v.reasons
    v = judge(0.9, 31, converged=True, resistivity=[10, 100, 1000], thickness=[300, 1.2],
              resistivity_bounds=RB, thickness_bounds=TB, **KW)
    assert v.status == "degenerate-layer" and v.code == 4
    assert "layer 2 thickness 1.2 m is < 5 % of its depth 300 m" in v.reasons
    # a thin top layer is not degenerate (no depth to compare), only at its bound if at 1 m
    v = judge(0.9, 31, converged=True, resistivity=[10, 100], thickness=[1.0],
              resistivity_bounds=RB, thickness_bounds=TB, **KW)
    assert v.status == "parameter-at-bound" and "layer 1 thickness 1 m at the lower bound" in v.reasons
    # a parameter the user fixed is not judged against the bounds
    v = judge(0.9, 31, converged=True, resistivity=[10, 1e5], thickness=[50],
              resistivity_bounds=RB, thickness_bounds=TB, fixed=[("resistivity", 1)], **KW)
    assert v.status == "fitted"


def test_severity_order_and_all_reasons_kept():
    v = judge(3.0, 31, converged=False, resistivity=[10, 100, 1e5], thickness=[300, 1.2],
              resistivity_bounds=RB, thickness_bounds=TB, **KW)
    assert v.status == "misfit"
    assert len(v.reasons) == 3            # misfit, bound, degenerate (stalled needs chi2 <= tol)
    v = judge(1.4, 31, converged=False, resistivity=[10, 100, 1e5], thickness=[300, 1.2],
              resistivity_bounds=RB, thickness_bounds=TB, **KW)
    assert v.status == "stalled"
    v = judge(1.0, 31, converged=True, resistivity=[10, 100, 1e5], thickness=[300, 1.2],
              resistivity_bounds=RB, thickness_bounds=TB, **KW)
    assert v.status == "parameter-at-bound"


def test_codes_flags_and_round_trip():
    assert [CODES[s] for s in STATUSES] == [0, 1, 2, 3, 4]
    assert set(FAILURES) == {"misfit"}           # stalled within tolerance: a warning
    assert flag_meanings() == "fitted misfit stalled parameter_at_bound degenerate_layer"
    v = judge(2.0, 31, converged=True, resistivity=[10], kind="smooth", **KW)
    assert Verdict.from_dict(v.as_dict()) == Verdict(v.status, v.chi2, v.target,
                                                     round(v.tolerance, 4), v.n_data, v.reasons,
                                                     "smooth")
    with pytest.raises(ValueError):
        Verdict("ok", 1.0, 1.0, 1.5, 10)


def test_settings_carry_the_tolerances():
    from tem.invert.verdict import verdict_of

    s = InversionSettings(verdict_tolerance=3.0)
    assert verdict_of(s, 2.5, 31, True, [10]).status == "fitted"
    assert verdict_of(InversionSettings(), 2.5, 31, True, [10]).status == "misfit"


# ----------------------------------------------------------------------------- through the CLI
def gated_empymod(thickness, resistivity, x, gates, components=("ex", "dbzdt")):
    """Gated Emberline data (per ampere) from empymod step-off responses (tests/empymod_ref.py).

    The bipolar waveform (EMBERLINE: 0.25 Hz, duty 0.5, linear ramps) is the
    alternating sum of its pulses; a pulse is the mean of step-off responses
    over its switch-off ramp minus that over its switch-on ramp (the DC part
    cancels; superposition, e.g. Ward & Hohmann 1988, from memory), 150
    pulses back; boxcar gates are 8-point Gauss-Legendre means. The step-off
    response is computed on 500 log-spaced times and interpolated (cubic
    spline of asinh(s / (1e-4 max|s|)) in ln t).
    """
    from scipy.interpolate import CubicSpline

    from empymod_ref import wire_response
    from tem.invert.synthetic import EMBERLINE as E

    hp = 0.5 / E["base_frequency"]
    on = E["duty_cycle"] * hp
    tq = np.geomspace(1e-5, 400.0, 500)
    go, gc = gates
    xg, wg = np.polynomial.legendre.leggauss(8)
    out = []
    for comp in components:
        s = wire_response(thickness, resistivity, E["wire"][0], E["wire"][1], [(x, 0.0)], comp,
                          tq)[0]
        sc = 1e-4 * np.max(np.abs(s))
        spl = CubicSpline(np.log(tq), np.arcsinh(s / sc))

        def step(t, spl=spl, sc=sc):
            return np.where(t < tq[-1], sc * np.sinh(spl(np.log(np.clip(t, tq[0], tq[-1])))), 0.0)

        def mean_over(t, a, b, step=step):
            u = 0.5 * (b - a) * xg + 0.5 * (a + b)
            return (step(t[..., None] + u) * wg).sum(-1) / 2

        def pulse(t, mean_over=mean_over):
            return mean_over(t, 0.0, E["ramp_off"]) - mean_over(t, on - E["ramp_on"], on)

        tt = 0.5 * (gc - go)[:, None] * xg[None, :] + 0.5 * (gc + go)[:, None]
        wave = sum((-1) ** k * pulse(tt + k * hp) for k in range(150))
        out.append((wave * wg).sum(-1) / 2)
    return np.array(out)


@pytest.fixture(scope="module")
def three_layer_gated(tmp_path_factory):
    """One station 1.5 km along the Emberline profile over a clearly 3-layer earth
    (100 ohm-m, 300 m / 3 ohm-m, 200 m / 1000 ohm-m), noise-free, 3 % errors."""
    pytest.importorskip("empymod")
    from tem.invert.synthetic import emberline_gates, gated_dataset

    folder = tmp_path_factory.mktemp("h3")
    gates = emberline_gates(12, 1e-3, 1.0)
    v = gated_empymod([300.0, 200.0], [100.0, 3.0, 1000.0], 1500.0, gates)
    gated_dataset("H3", 1500.0, 0.0, v, 0.03 * np.abs(v), ["ex", "dbzdt"], gates).to_netcdf(
        folder / "H3.nc", engine="h5netcdf")
    return folder


def _invert(folder, out, layers):
    from tem.cli import main

    return main(["invert", str(folder), "--out", str(out), "--kind", "few-layer",
                 "--few-layers", str(layers), "--layers", "20", "--jobs", "1", "--no-figures",
                 "--no-progress"])


def test_a_failed_few_layer_fit_exits_1_with_the_verdict_misfit(three_layer_gated, tmp_path,
                                                                 capsys):
    import csv

    from tem.io.models import read_models

    rc = _invert(three_layer_gated, tmp_path / "two", 2)
    out = capsys.readouterr()
    assert rc == 1                         # as for a failed station
    assert "chosen model not fitted at 1 station(s): H3 (misfit)" in " ".join(out.err.split())
    row = [ln for ln in out.out.splitlines() if "H3" in ln][0]
    assert "misfit" in row and " ok " not in row
    ds = read_models(tmp_path / "two" / "models" / "models.nc")
    # two layers cannot fit three: chi2 far above tolerance (common practice, no source)
    assert ds["chi2"].values[0] > 10 * ds["verdict_tolerance"].values[0]
    assert int(ds["verdict_code"].values[0]) == 1
    assert str(ds["verdict"].values[0]).startswith("misfit: chi2 ")
    assert ds["verdict_code"].attrs["flag_meanings"].split()[1] == "misfit"
    assert int(ds["smooth_verdict_code"].values[0]) == 0    # the smooth model does fit
    with open(tmp_path / "two" / "models" / "models.csv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["verdict"] for r in rows} == {"misfit"} and {r["verdict_code"] for r in rows} == {"1"}


def test_the_same_data_with_three_layers_are_fitted(three_layer_gated, tmp_path, capsys):
    """Control: the reference data can be fitted, so the misfit above is the model's."""
    from tem.io.models import read_models

    assert _invert(three_layer_gated, tmp_path / "three", 3) == 0
    ds = read_models(tmp_path / "three" / "models" / "models.nc")
    assert ds["chi2"].values[0] < 1.0 and int(ds["verdict_code"].values[0]) == 0
    assert "fitted" in capsys.readouterr().out


def test_models_files_carry_verdicts_per_kind():
    """Variable names and CF flags of docs/data-model.md, for a few-layer and an LCI file."""
    from types import SimpleNamespace

    from tem.invert.product import add_verdicts
    from tem.io.models import model_verdicts, models_dataset

    def verdict(chi2, kind):
        return judge(chi2, 31, converged=True, resistivity=[10, 100], kind=kind, **KW)

    def result(chi2_smooth, chi2_few):
        v = {"smooth": verdict(chi2_smooth, "smooth"), "lci": verdict(chi2_smooth, "lci"),
             "few-layer": verdict(chi2_few, "few-layer")}
        return SimpleNamespace(few={"verdict": v["few-layer"]}, verdict_for=v.get)

    results = [result(1.0, 9.0), result(1.2, 1.1)]
    ds = models_dataset(station=["A", "B"], resistivity=[[10, 100], [10, 100]],
                        thickness=[[50, np.nan], [50, np.nan]], x=[0, 1], y=[0, 0], z=[0, 0],
                        doi=[100, 100], chi2=[9.0, 1.1], model_kind="few-layer")
    add_verdicts(ds, results, "few-layer")
    assert list(ds["verdict_code"].values) == [1, 0]
    assert list(ds["smooth_verdict_code"].values) == [0, 0]
    assert list(ds["few_layer_chi2"].values) == [9.0, 1.1]
    assert ds["verdict_code"].attrs["flag_meanings"] == flag_meanings()
    assert [v["status"] for v in model_verdicts(ds)] == ["misfit", "fitted"]
    lci = models_dataset(station=["A", "B"], resistivity=[[10, 100], [10, 100]],
                         thickness=[[50, np.nan], [50, np.nan]], x=[0, 1], y=[0, 0], z=[0, 0],
                         doi=[100, 100], chi2=[1.0, 1.2], model_kind="lci")
    add_verdicts(lci, results, "lci")
    assert "lci_verdict_code" in lci and "smooth_verdict_code" not in lci
    assert model_verdicts(lci)[1]["reasons"] == "chi2 1.2 within tolerance 1.50 (target 1, 31 data)"


# ----------------------------------------------------------------------------- section, LAS, SEG-Y
def _models_with_verdicts(codes):
    """The five-station profile of tests/profile_fixture.py with invented verdict codes."""
    m = synthetic_models()
    names = ["fitted", "misfit", "stalled", "parameter-at-bound", "degenerate-layer"]
    m["verdict_code"] = ("station", np.array(codes, np.int8),
                         {"flag_values": np.arange(5, dtype=np.int8),
                          "flag_meanings": flag_meanings()})
    m["verdict"] = ("station", np.array([f"{names[c]}: chi2 {x:.3g} (invented)" for c, x in
                                         zip(codes, m["chi2"].values)]))
    m["verdict_tolerance"] = ("station", np.full(5, 1.5))
    return m


def test_section_columns_take_the_more_severe_neighbour():
    from tem.section.profile import stitch_models

    m = _models_with_verdicts([0, 1, 0, 3, 0])
    s = stitch_models(m, 10.0, order="given", lateral="linear", vertical="depth")
    assert list(s["station_verdict_code"].values) == [0, 1, 0, 3, 0]
    at = s["distance"].values
    assert list(s["verdict_code"].values) == [0, 1, 0, 3, 0]        # one column per station
    between = 0.5 * (at[:-1] + at[1:])
    s = stitch_models(m, 10.0, order="given", lateral="linear", vertical="depth",
                      positions=np.sort(np.r_[at, between]))
    # columns: st0, 0|1, st1, 1|0, st2, 0|3, st3, 3|0, st4
    assert list(s["verdict_code"].values) == [0, 1, 1, 1, 0, 3, 3, 3, 0]
    assert s["chi2"].values[1] == pytest.approx(m["chi2"].values[1])
    s = stitch_models(m, 10.0, order="given", lateral="nearest", vertical="depth",
                      positions=np.sort(np.r_[at, between + 1.0]))    # just right of midpoints
    assert list(s["verdict_code"].values) == [0, 1, 1, 0, 0, 3, 3, 0, 0]
    plain = stitch_models(synthetic_models(), 10.0, order="given", lateral="linear",
                          vertical="depth")
    assert "verdict_code" not in plain and "station_verdict_code" not in plain


def test_las_verdict_parameters():
    from tem.export.las import las_for_station

    m = _models_with_verdicts([0, 1, 0, 3, 0])
    las = las_for_station(m, 1, 10.0)
    assert las.params["FIT"].value == "MISFIT" and las.params["FITC"].value == 1
    assert las.params["TOL"].value == 1.5 and "WARNING: verdict MISFIT" in las.other
    las = las_for_station(m, 3, 10.0)
    assert las.params["FIT"].value == "PARAMETER-AT-BOUND" and "a limit" in las.other
    las = las_for_station(synthetic_models(), 0, 10.0)
    assert las.params["FIT"].value == "UNKNOWN"


def test_segy_verdict_word():
    """Bytes 237-240: two big-endian int16 (code, chi2 x 100) read as one int32 by segyio."""
    from tem.export.segy import verdict_field, verdict_of_field

    w = verdict_field(1, 25.1)
    assert struct.pack(">i", w) == struct.pack(">hh", 1, 2510)
    assert verdict_of_field(w) == (1, 25.1)
    assert verdict_of_field(verdict_field(0, 1e6)) == (0, 327.67)      # capped at 32767
    code, chi = verdict_of_field(verdict_field(-1, float("nan")))
    assert code == -1 and math.isnan(chi)
    assert verdict_field(-1, float("nan")) == -1                       # 0xFFFFFFFF


def test_run_exit_status_counts_only_failures():
    # tem run's closing line and exit status (tem.pipeline.runner.not_fitted) once still
    # counted "stalled" after it became a warning (docs/pipeline.md, "Exit status")
    from tem.pipeline.runner import not_fitted

    state = {"stations": {"EM01": {"verdict": "fitted"}, "EM02": {"verdict": "stalled"},
                          "EM03": {"verdict": "misfit"}, "EM04": {"verdict": "degenerate-layer"},
                          "EM05": {"verdict": "misfit", "failed_stage": "invert"}}}
    assert not_fitted(state) == {"EM03": "misfit"}
