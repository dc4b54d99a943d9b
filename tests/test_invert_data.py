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
