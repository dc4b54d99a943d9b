"""Joint data vector of one station: usable gates, per-component relative error floors.

The floor rule s = max(error, floor * |value|) is common practice, no source.
"""
import numpy as np
import pytest

from tem.errors import TemInputError
from tem.invert.data import parse_floors, station_data
from tem.invert.synthetic import emberline_gates, gated_dataset


def test_parse_floors_forms():
    assert parse_floors(0.05)["ex"] == 0.05
    f = parse_floors("ex=0.1,dbzdt=0.02")
    assert f["ex"] == 0.1 and f["dbzdt"] == 0.02 and f["ey"] == 0.03
    assert parse_floors("0.04")["bz"] == 0.04
    with pytest.raises(TemInputError, match="unknown component"):
        parse_floors("hz=0.1")
    with pytest.raises(TemInputError, match=r"\[0, 1\)"):
        parse_floors(1.5)


def test_station_data_joint_vector_and_floors():
    gates = emberline_gates(4, 1e-3, 1e-1)
    v = np.array([[1e-6, -2e-7, 3e-8, 4e-9], [5e-9, 4e-10, 3e-11, 2e-12]])
    err = np.array([[1e-9, 1e-9, 1e-9, 1e-9], [1e-10, 1e-10, 1e-10, 1e-10]])
    usable = np.array([[True, True, False, True], [True, True, True, False]])
    ds = gated_dataset("S", 1500.0, 0.0, v, err, ["ex", "dbzdt"], gates, usable=usable)
    sd = station_data(ds, floors="ex=0.1,dbzdt=0.02", build_simulation=False)
    assert sd.n_data == 6
    assert list(sd.component) == ["ex", "ex", "ex", "dbzdt", "dbzdt", "dbzdt"]
    # ex: max(1e-9, 0.1|v|); dbzdt: max(1e-10, 0.02|v|)
    assert sd.std == pytest.approx([1e-7, 2e-8, 1e-9, 1e-10, 1e-10, 1e-10])
    assert sd.d_obs == pytest.approx([1e-6, -2e-7, 4e-9, 5e-9, 4e-10, 3e-11])


def test_hankel_tolerance_follows_the_error_floor():
    """The forward accuracy an inversion asks for: 1/30 of the smallest floor, within
    1e-4..1e-3 (modelling error well below data error: common practice, no source)."""
    from tem.invert.data import hankel_tolerance_for
    assert hankel_tolerance_for(parse_floors(0.03), ["ex", "dbzdt"]) == pytest.approx(1e-3)
    assert hankel_tolerance_for(parse_floors("ex=0.06,dbzdt=0.01"), ["ex", "dbzdt"]) == \
        pytest.approx(0.01 / 30)
    # only the station's own components count
    assert hankel_tolerance_for(parse_floors("ex=0.06,dbzdt=0.0"), ["ex"]) == pytest.approx(1e-3)
    assert hankel_tolerance_for(parse_floors(0.0), ["ex", "dbzdt"]) == pytest.approx(1e-4)


def test_station_simulation_is_accurate_to_its_tolerance():
    """A demo-like station far from the wire (4.5 km, the demo's 0.25 Hz bipolar waveform,
    gates from 4 ms): the short Hankel filter misses the modeller's 1e-4 test but passes
    the 1e-3 a 3 % floor asks for. On a layered earth (not only the test's half-spaces)
    its responses stay within 1e-3 (floored at 1e-3 of the peak) of the long filter's,
    which tests/test_forward_waveform.py and test_forward_empymod.py check against empymod
    (Werthmueller 2017, Geophysics 82(6), WB9-WB19)."""
    from tem.forward import LayeredModel, Receiver, Simulation, Waveform, Wire
    gates = emberline_gates(21, 4e-3, 0.86)
    wf = Waveform.bipolar(0.25, 0.5, ramp_on=1e-3, ramp_off=5e-4)
    rx = [Receiver("ex", (-4500.0, 0.0)), Receiver("dbzdt", (-4500.0, 0.0))]
    wire = Wire((-750.0, 800.0), (750.0, 800.0))
    sims = {tol: Simulation(wire, rx, gates=gates, waveform=wf, hankel_tolerance=tol)
            for tol in (1e-4, 1e-3)}
    strict, loose = sims[1e-4], sims[1e-3]
    assert strict.hankel_name == "key_201_2012" and loose.hankel_name == "key_101_2012"
    assert 1e-4 < loose.hankel_check <= 1e-3
    for m in (LayeredModel([20.0, 900.0, 600.0], [30.0, 500.0, 8.0, 2000.0]),
              LayeredModel([400.0, 20.0], [200.0, 2.0, 200.0]),
              LayeredModel([50.0, 150.0], [5.0, 50.0, 3000.0])):
        a, b = loose.predict(m), strict.predict(m)
        peak = np.max(np.abs(b), axis=1, keepdims=True)
        dev = np.abs(a - b) / np.maximum(np.abs(b), 1e-3 * peak)
        assert dev.max() <= 1e-3, dev.max()
