"""The survey file is read with its station tables packed (tem.io.packed): the same survey and
the same refusals as a survey built from the whole parse, from one parse of the file.

The packing only changes when memory is freed (docs/scaling.md); these tests hold the
result to the plain construction from ``tomllib`` (Python's standard TOML parser).
Common practice, no source.
"""
from __future__ import annotations

import math
import tomllib
from pathlib import Path

import pytest
import tomli_w

from tem.errors import TemInputError
from tem.io.packed import PackedTables, pack_tables
from tem.survey import read_survey, read_survey_file, survey_from_dict

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "emberline" / "survey.toml"


def test_packed_tables_give_back_the_same_values():
    tables = [{"id": "A", "x": 1.0, "n": 3, "ok": True, "rx": [{"files": ["a b.npy"], "g": -0.0}]},
              {"id": "B", "x": math.inf, "big": 10**30, "deep": {"k": [[1.5, -2.25]]}},
              {}]
    packed = PackedTables(tables)
    assert len(packed) == 3
    assert list(packed) == tables
    assert list(packed) == tables                      # iterating twice gives fresh copies
    assert math.copysign(1.0, list(packed)[0]["rx"][0]["g"]) == -1.0
    nan = list(PackedTables([{"v": math.nan}]))[0]["v"]
    assert math.isnan(nan)


def test_values_json_cannot_carry_are_left_unpacked():
    import datetime

    doc = {"station": [{"id": "A", "when": datetime.date(2025, 6, 2)}]}
    pack_tables(doc, "station")
    assert isinstance(doc["station"], list)
    doc = {"station": {"id": "A"}}                     # not a list: refused later, as before
    pack_tables(doc, "station")
    assert doc["station"] == {"id": "A"}


def test_reading_the_example_equals_building_from_the_whole_parse():
    whole = survey_from_dict(tomllib.loads(EXAMPLE.read_text()), base_dir=EXAMPLE.parent)
    survey, processing = read_survey_file(EXAMPLE)
    assert survey == whole
    assert read_survey(EXAMPLE) == whole
    assert processing == tomllib.loads(EXAMPLE.read_text()).get("processing", {})


def test_a_geographic_survey_file_is_projected_as_its_parse_is(tmp_path):
    pytest.importorskip("pyproj")
    lon, d = -27.0, 0.00045
    doc = {"survey": {"epsg": 4326, "projected_epsg": 32626},
           "transmitter": {"kind": "wire", "points": [[lon - 0.01, 0.01], [lon + 0.01, 0.01]],
                           "current": 10.0, "base_frequency": 0.25,
                           "first_switch_off": "2025-06-02T08:00:00Z"},
           "station": [{"id": f"S{k}", "x": lon + 0.001 * k, "y": 0.0, "receiver": [
               {"component": "ex", "files": [f"ex{k}.npy"], "sample_rate": 1000.0,
                "dipole": [[lon + 0.001 * k - d, 0.0], [lon + 0.001 * k + d, 0.0]]}]}
               for k in range(3)]}
    path = tmp_path / "survey.toml"
    path.write_text(tomli_w.dumps(doc))
    from_file = read_survey(path)
    assert from_file == survey_from_dict(tomllib.loads(path.read_text()), base_dir=tmp_path)
    assert from_file.epsg == 32626
    assert [round(s.x) for s in from_file.stations] == [500000, 500111, 500223]


@pytest.mark.parametrize("edit, field", [
    (('id = "EM02"', 'id = "EM01"'), "stations.id: station ids must be unique"),
    (('sample_rate = 4000.0', 'sample_rate = 2025-06-02'), "sample_rate: expected a number"),
    (('x = -5500.0', 'x = nan'), "station.x: must be finite"),
])
def test_a_bad_station_is_refused_as_from_the_whole_parse(tmp_path, edit, field):
    text = EXAMPLE.read_text()
    assert edit[0] in text, edit[0]
    path = tmp_path / "survey.toml"
    path.write_text(text.replace(edit[0], edit[1], 1))
    with pytest.raises(TemInputError) as from_file:
        read_survey(path)
    with pytest.raises(TemInputError) as from_parse:
        survey_from_dict(tomllib.loads(path.read_text()), base_dir=tmp_path)
    assert str(from_file.value) == f"{path}: {from_parse.value}"
    assert field in str(from_file.value)
