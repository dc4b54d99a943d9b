"""The verdict on a model: judged from its final numbers only.

Tolerance: target x max(1.5, chi2.ppf(0.95, N) / N); the 95 % quantiles used
below are from scipy.stats.chi2 and agree with printed chi-square tables
(e.g. Abramowitz & Stegun 1964, table 26.8: 18.307 for 10 degrees of freedom,
124.342 for 100).
"""
import math

import pytest

from tem.invert.settings import InversionSettings
from tem.invert.verdict import CODES, FAILURES, STATUSES, Verdict, flag_meanings, judge, tolerance

KW = dict(target=1.0, tolerance_factor=1.5, quantile=0.95, bound_margin=0.01,
          thin_fraction=0.05, stall_margin=0.1)
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
    assert judge(1.05, 40, converged=False, **kw).status == "fitted"   # within the 10 % margin
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
    assert set(FAILURES) == {"misfit", "stalled"}
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
