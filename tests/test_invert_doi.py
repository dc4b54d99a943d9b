"""Depth-of-investigation measures.

Cumulative sensitivity: Christiansen & Auken 2012, Geophysics 77(4), WB171-WB177
(thresholds from memory, UNVERIFIED). Two-reference index:
Oldenburg & Li 1999, Geophysics 64(2), 403-416. The checks below are exact
consequences of the definitions on hand-made sensitivities.
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
