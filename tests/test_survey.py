"""Survey description: TOML round trip, checks naming the field, Emberline geometry."""
import numpy as np
import pytest

from tem.errors import TemInputError
from tem.survey import parse_time, read_survey, seconds_between, write_survey
from tem.synth import emberline_survey


def test_round_trip(tmp_path):
    sv, _ = emberline_survey(base_dir=tmp_path)
    write_survey(sv, tmp_path / "survey.toml")
    back = read_survey(tmp_path / "survey.toml")
    assert back.transmitter == sv.transmitter
    assert back.stations == sv.stations
    assert back.mains_frequency == 50.0


def test_emberline_geometry():
    # scenario text (issue 3): 12 stations, 1 km spacing, wire 800 m north, offsets ~0.8-5 km
    sv, models = emberline_survey()
    xs = np.array([s.x for s in sv.stations])
    assert xs.size == 12 and np.allclose(np.diff(xs), 1000.0) and xs[-1] - xs[0] == 11000.0
    off = np.hypot(xs, 800.0)
    assert off.min() == pytest.approx(943.4, abs=1) and off.max() < 5600
    assert models["EM01"].thickness[1] == 900.0 and models["EM12"].thickness[1] == 1600.0
    tx = sv.transmitter
    assert tx.off_time == pytest.approx(1.0)  # duty 0.5 at 0.25 Hz: 1 s off per half-period


def test_time_parsing_nanoseconds():
    t0 = parse_time("2025-06-02T07:29:59.999875Z")
    t1 = parse_time("2025-06-02T09:30:00.000000+02:00")
    assert seconds_between(t0, t1) == pytest.approx(0.000125, abs=1e-12)


@pytest.mark.parametrize("edit, field", [
    (("current = 40.0", "current = -4.0"), "transmitter.current"),
    (("duty_cycle = 0.5", "duty_cycle = 1.5"), "transmitter.duty_cycle"),
    (('kind = "wire"', 'kind = "coil"'), "transmitter.kind"),
    (("sample_rate = 4000.0", "sample_rat = 4000.0"), "sample_rat"),
])
def test_bad_survey_names_file_and_field(tmp_path, edit, field):
    sv, _ = emberline_survey(base_dir=tmp_path, stations=["EM01"])
    p = write_survey(sv, tmp_path / "s.toml")
    text = p.read_text().replace(*edit, 1)
    p.write_text(text)
    with pytest.raises(TemInputError) as exc:
        read_survey(p)
    msg = str(exc.value)
    assert str(p) in msg and field in msg and "\n" not in msg


@pytest.mark.parametrize("edit, field", [
    (("[transmitter]", "[transmiter]"), "transmiter"),
    (("[survey]", "[procesing.gate]\nper_decade = 8\n\n[survey]"), "procesing"),
])
def test_unknown_top_level_table_is_refused(tmp_path, edit, field):
    # a typo'd table name must not be ignored silently (its settings would be lost)
    sv, _ = emberline_survey(base_dir=tmp_path, stations=["EM01"])
    p = write_survey(sv, tmp_path / "s.toml")
    p.write_text(p.read_text().replace(*edit, 1))
    with pytest.raises(TemInputError, match="unknown table") as exc:
        read_survey(p)
    assert str(p) in str(exc.value) and field in str(exc.value)


def test_processing_table_is_accepted(tmp_path):
    sv, _ = emberline_survey(base_dir=tmp_path, stations=["EM01"])
    p = write_survey(sv, tmp_path / "s.toml")
    p.write_text(p.read_text() + "\n[processing.gate]\nper_decade = 8.0\n")
    assert read_survey(p).stations[0].id == "EM01"


def test_folder_or_binary_survey_is_one_line_error(tmp_path):
    with pytest.raises(TemInputError, match="survey: is a folder") as exc:
        read_survey(tmp_path)
    assert str(tmp_path) in str(exc.value)
    b = tmp_path / "ex.npy"
    b.write_bytes(b"\x93NUMPY\x01\x00v\x00{'descr': '<i4'}")
    with pytest.raises(TemInputError, match="toml: not a text file") as exc:
        read_survey(b)
    assert str(b) in str(exc.value)
