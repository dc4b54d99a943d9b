"""Pieces of the few-layer global search (tem/invert/fewglobal.py).

References beside the checks: BIC = X2 + k ln N, Schwarz 1978, Annals of Statistics 6(2),
461-464; AIC = X2 + 2k, Akaike 1974, IEEE Trans. Automatic Control 19(6), 716-723.
"""
from types import SimpleNamespace

import numpy as np
import pytest

from tem.invert.fewglobal import (choose_layer_count, global_fewlayer, information_criterion,
                                  search_box, split_starts)


def test_information_criteria_formulas():
    assert information_criterion(100.0, 62, 7, "bic") == pytest.approx(100.0 + 7 * np.log(62))
    assert information_criterion(100.0, 62, 7, "aic") == pytest.approx(114.0)
    with pytest.raises(ValueError, match="criterion"):
        information_criterion(1.0, 10, 1, "dic")


def _fake_search(chi2_by_count, calls):
    def search(n, previous):
        calls.append((n, previous is not None))
        fr = SimpleNamespace(chi2=chi2_by_count[n])
        return fr, None, {"n_free": 2 * n - 1}
    return search


def test_layer_count_by_bic_and_early_stop():
    # 60 data; X2 = 60 chi2: 3 layers fit (chi2 1.0); 4 layers gain 0.05 per datum (X2 3),
    # less than the BIC price of two more parameters (2 ln 60 = 8.2)
    chi2 = {2: 20.0, 3: 1.0, 4: 0.95, 5: 0.5}
    calls = []
    fr, _, info = choose_layer_count(_fake_search(chi2, calls), range(2, 6), 60, "bic", target=1.0)
    assert fr.chi2 == 1.0 and [n for n, _ in calls] == [2, 3, 4]     # stopped after 4
    assert calls[0][1] is False and all(p for _, p in calls[1:])    # each count from the one before
    # no early stop without a target: 5 layers (X2 30 + 9 ln 60 = 66.8) beat 3 (60 + 5 ln 60 = 80.5)
    fr, _, info = choose_layer_count(_fake_search(chi2, []), range(2, 6), 60, "bic")
    assert fr.chi2 == 0.5 and len(info["criteria"]) == 4
    # a fixed count is returned whatever the criterion
    fr, _, info = choose_layer_count(_fake_search(chi2, []), range(2, 5), 60, "bic", fixed=2)
    assert fr.chi2 == 20.0 and info["criterion"] == "fixed"


def test_split_starts_add_one_layer_everywhere():
    out = split_starts([10.0, 100.0], [50.0])
    assert len(out) == 2 * 2 * 2
    for rho, h in out:
        assert rho.size == 3 and h.size == 2 and np.all(h > 0)
    # splitting the top layer halves it; splitting the half-space adds a layer at 1.5x depth
    assert any(np.allclose(h, [25.0, 25.0]) for _, h in out)
    assert any(np.allclose(h, [50.0, 100.0]) for _, h in out)


def test_population_search_alone_finds_a_three_layer_model():
    """Noise-free 3-layer data, no starts at all: differential evolution plus the polish
    must recover the model (tem.forward as its own reference; 5 % in every parameter)."""
    from tem.forward import LayeredModel
    from tem.invert.synthetic import emberline_gates, emberline_simulation

    sim = emberline_simulation(2000.0, gates=emberline_gates(16, 1e-3, 1.0), waveform=False)
    true = LayeredModel([300.0, 500.0], [50.0, 3.0, 500.0])
    d = sim.predict(true).ravel()
    s = 0.03 * np.abs(d)

    def many(rho, h):
        return sim.predict_many(rho, h).reshape(rho.shape[0], -1)

    def layer_fwd(rho, h):
        dd, J = sim.jacobian(LayeredModel(h, rho), thickness=True)
        return dd.reshape(-1), J.reshape(dd.size, -1)

    fr, _, info = global_fewlayer(many, layer_fwd, d, s, 3, [], search_box(3, 5.0, 3000.0),
                                  population=8, evaluations=1500, seed=0, lm_max_iter=50)
    assert info["winner"].startswith("population") and info["evaluations"] <= 1500 + 40
    assert fr.chi2 < 1e-3
    assert fr.resistivity == pytest.approx([50.0, 3.0, 500.0], rel=0.05)
    assert fr.thickness == pytest.approx([300.0, 500.0], rel=0.05)


def test_priors_need_a_layer_count():
    from tem.errors import TemInputError
    from tem.invert.settings import InversionSettings

    with pytest.raises(TemInputError, match="priors.*few_layers"):
        InversionSettings(kind="few-layer", priors=("depth:2=1350/50",))
    s = InversionSettings(kind="few-layer", few_layers=4, priors=("depth:2=1350/50",))
    assert s.few_layers == 4
