"""tem import refuses bad decay CSVs and system TOMLs: one line naming file and field, exit 2.

Each case breaks one thing of a good pair of files (docs/import.md, "What
the checks refuse"); the message must name the file (and line for a CSV row)
and the field. Common practice, no source.
"""
from __future__ import annotations

import numpy as np
import pytest

from tem.cli import main

GOOD_CSV = """# unit.dbzdt = nT/s/A
# unit.ex = uV/m/A
station,component,gate_open_ms,gate_close_ms,value,error,usable
EM01,ex,1.0,2.0,5.0,0.2,1
EM01,ex,2.0,4.0,2.0,0.1,1
EM01,dbzdt,1.0,2.0,-30.0,1.0,1
EM01,dbzdt,2.0,4.0,-8.0,0.5,0
"""

GOOD_TOML = """
[transmitter]
kind = "wire"
points = [[-750.0, 800.0], [750.0, 800.0]]
current = 40.0

[waveform]
kind = "bipolar"
base_frequency = 0.25
duty_cycle = 0.5
ramp_on = 1e-3
ramp_off = 5e-4

[[station]]
id = "EM01"
x = 0.0
y = 0.0

[station.ex]
dipole = [[-50.0, 0.0], [50.0, 0.0]]

[station.dbzdt]
coil_area = 1e4
"""


def _run(tmp_path, csv_text, toml_text, capsys):
    (tmp_path / "d.csv").write_text(csv_text)
    (tmp_path / "s.toml").write_text(toml_text)
    rc = main(["import", str(tmp_path / "d.csv"), str(tmp_path / "s.toml"),
               "--out", str(tmp_path / "out"), "--no-progress"])
    return rc, capsys.readouterr().err


def test_the_good_pair_imports(tmp_path, capsys):
    import xarray as xr

    rc, err = _run(tmp_path, GOOD_CSV, GOOD_TOML, capsys)
    assert rc == 0, err
    ds = xr.load_dataset(tmp_path / "out" / "gated" / "EM01.nc", engine="h5netcdf")
    assert list(ds["component"].values) == ["ex", "dbzdt"]
    assert ds["value"].values[0, 0] == pytest.approx(5e-6)          # uV/m/A -> V/m/A
    assert ds["value"].values[1, 1] == pytest.approx(-8e-9)         # nT/s/A -> T/s/A
    assert ds["gate_open"].values.tolist() == pytest.approx([1e-3, 2e-3])
    assert ds["usable"].values.tolist() == [[True, True], [True, False]]


def _csv(old, new):
    assert old in GOOD_CSV
    return GOOD_CSV.replace(old, new)


CSV_CASES = {
    "missing column": (_csv(",error,usable", ",err,usable").replace("0.2,1\n", "0.2,1\n"),
                       "d.csv:3: columns: missing error"),
    "no time unit": (_csv("gate_open_ms,gate_close_ms", "gate_open,gate_close"),
                     "d.csv:3: gate_open: time unit not stated"),
    "unknown time unit": (_csv("gate_open_ms", "gate_open_min"),
                          "d.csv:3: gate_open_min: unknown time unit"),
    "no value unit": (_csv("# unit.ex = uV/m/A\n", ""), "d.csv:3: unit: unit of ex not stated"),
    "wrong value unit": (_csv("# unit.ex = uV/m/A", "# unit.ex = nT/s/A"),
                         "d.csv:4: unit: 'nT/s/A' is not a unit of ex"),
    "unknown value unit": (_csv("# unit.ex = uV/m/A", "# unit.ex = furlongs"),
                           "d.csv:4: unit: unknown 'furlongs'"),
    "negative error": (_csv("5.0,0.2,1", "5.0,-0.2,1"), "d.csv:4: error: must be >= 0"),
    "NaN value": (_csv("5.0,0.2,1", "nan,0.2,1"), "d.csv:4: value: not a finite number"),
    "NaN error": (_csv("5.0,0.2,1", "5.0,NaN,1"), "d.csv:4: error: not a finite number"),
    "text value": (_csv("5.0,0.2,1", "five,0.2,1"), "d.csv:4: value: not a number"),
    "unsorted gates": (_csv("EM01,ex,1.0,2.0,5.0,0.2,1\nEM01,ex,2.0,4.0,2.0,0.1,1",
                            "EM01,ex,2.0,4.0,2.0,0.1,1\nEM01,ex,1.0,2.0,5.0,0.2,1"),
                       "d.csv:5: gate_open: EM01 ex: times must increase"),
    "duplicate row": (_csv("EM01,ex,2.0,4.0,2.0,0.1,1\n",
                           "EM01,ex,2.0,4.0,2.0,0.1,1\nEM01,ex,2.0,4.0,2.0,0.1,1\n"),
                      "d.csv:6: gate_open: duplicate of line 5"),
    "open after close": (_csv("EM01,ex,1.0,2.0", "EM01,ex,3.0,2.0"),
                         "d.csv:4: gate_close: needs 0 <= open < close"),
    "overlapping gates": (_csv("EM01,ex,2.0,4.0", "EM01,ex,1.5,4.0"),
                          "d.csv:5: gate_open: EM01 ex: gate overlaps"),
    "unknown component": (_csv("EM01,dbzdt,1.0", "EM01,hz,1.0"),
                          "d.csv:6: component: unknown 'hz'"),
    "bad usable flag": (_csv("-8.0,0.5,0", "-8.0,0.5,maybe"), "d.csv:7: usable: expected 1/0"),
    "short row": (_csv("-8.0,0.5,0", "-8.0,0.5"), "d.csv:7: columns: 6 cells, header has 7"),
    "unknown station": (_csv("EM01,dbzdt,2.0", "EM02,dbzdt,2.0"),
                        "d.csv:7: station: EM02 is not a [[station]]"),
    "volts but normalised": (_csv("# unit.ex = uV/m/A", "# unit.ex = uV")
                             .replace("# unit.dbzdt = nT/s/A", "# unit.dbzdt = uV"),
                             "d.csv: unit: receiver volts (V), but the system file says"),
    # the last of two units won silently (values 1e9 times too large)
    "unit given twice": (_csv("# unit.ex = uV/m/A\n", "# unit.ex = uV/m/A\n# unit.ex = V/m/A\n"),
                         "d.csv: unit.ex: given twice in the header ('uV/m/A' on an earlier "
                         "line, 'V/m/A' on line 3)"),
    # the unit column won silently over the header (values 1e9 times too large)
    "unit column and header disagree": (
        _csv(",error,usable\n", ",error,usable,unit\n").replace(",1\n", ",1,uV/m/A\n", 2)
        .replace("1.0,1\n", "1.0,1,T/s/A\n").replace("0.5,0\n", "0.5,0,T/s/A\n"),
        "d.csv:6: unit: 'T/s/A' in the unit column, 'nT/s/A' in the header "
        "('# unit.dbzdt = ...'): state the unit once"),
    # imported with exit 0, then refused by every later stage (what they read is checked here)
    "value beyond a gated file's range": (_csv("5.0,0.2,1", "1e308,0.2,1"),
                                          "d.csv with s.toml, station EM01: value: out of range"),
    "both time kinds": (_csv("gate_close_ms,", "gate_close_ms,time_s,")
                        .replace(",1\n", ",1,0.1\n").replace(",0\n", ",0,0.1\n"),
                        "d.csv:3: columns: give gate_open and gate_close, or time, not both"),
}


@pytest.mark.parametrize("case", sorted(CSV_CASES))
def test_bad_csv_is_one_line_naming_file_and_field(case, tmp_path, capsys):
    text, expected = CSV_CASES[case]
    rc, err = _run(tmp_path, text, GOOD_TOML, capsys)
    assert rc == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    assert expected in lines[0], lines[0]
    assert not (tmp_path / "out" / "gated").exists()     # nothing written


def _toml(old, new):
    assert old in GOOD_TOML
    return GOOD_TOML.replace(old, new)


TOML_CASES = {
    "no transmitter": (_toml("[transmitter]\nkind", "[tx]\nkind"), "s.toml: tx: unknown key"),
    "missing current": (_toml("current = 40.0\n", ""), "s.toml: transmitter.current: missing"),
    "negative current": (_toml("current = 40.0", "current = -4.0"),
                         "s.toml: transmitter.current: must be positive"),
    "unknown kind": (_toml('kind = "wire"', 'kind = "coil"'),
                     "s.toml: transmitter.kind: unknown 'coil'"),
    "one-point wire": (_toml("[[-750.0, 800.0], [750.0, 800.0]]", "[[-750.0, 800.0]]"),
                       "s.toml: transmitter.points: a wire needs two or more"),
    "unknown waveform": (_toml('kind = "bipolar"', 'kind = "square"'),
                         "s.toml: waveform.kind: unknown 'square'"),
    "no base frequency": (_toml("base_frequency = 0.25\n", ""),
                          "s.toml: waveform.base_frequency: missing"),
    "ramps too long": (_toml("ramp_off = 5e-4", "ramp_off = 1.5"),
                       "s.toml: waveform.ramp_off: ramps longer than the on-time"),
    "unit-less text": (_toml("base_frequency = 0.25", 'base_frequency = "0.25 Hz"'),
                       "s.toml: waveform.base_frequency: expected a number"),
    "bad time zero": (_toml("ramp_off = 5e-4", 'ramp_off = 5e-4\ntime_zero = "midnight"'),
                      "s.toml: waveform.time_zero: unknown 'midnight'"),
    "table not ending at zero": (_toml('kind = "bipolar"\nbase_frequency = 0.25\nduty_cycle = 0.5'
                                       '\nramp_on = 1e-3\nramp_off = 5e-4',
                                       'kind = "table"\ntimes = [-1.0, 0.0]\ncurrent = [0.0, 1.0]'),
                                 "s.toml: waveform.current: the pulse must start and end at zero"),
    "typo key": (_toml("coil_area = 1e4", "coil_aera = 1e4"),
                 "s.toml: station.EM01.dbzdt.coil_aera: unknown key"),
    "coil with a dipole": (_toml("coil_area = 1e4", "coil_area = 1e4\ndipole = [[0.0, 0.0], [1.0, 0.0]]"),
                           "s.toml: station.EM01.dbzdt.dipole: only for an electric dipole"),
    "E with a coil area": (_toml("dipole = [[-50.0, 0.0], [50.0, 0.0]]",
                                 "dipole = [[-50.0, 0.0], [50.0, 0.0]]\ncoil_area = 1.0"),
                           "s.toml: station.EM01.ex.coil_area: only for an induction coil"),
    "E without dipole": (_toml("dipole = [[-50.0, 0.0], [50.0, 0.0]]", "gain = 1.0"),
                         "s.toml: station.EM01.ex.dipole: missing"),
    "NaN coordinate": (_toml("x = 0.0", "x = nan"), "s.toml: station[0].x: must be finite"),
    "ids differing in case": (GOOD_TOML + '\n[[station]]\nid = "em01"\nx = 1.0\ny = 0.0\n',
                              "s.toml: station.id: 'EM01' and 'em01' differ only in letter case"),
    "duplicate station": (GOOD_TOML + '\n[[station]]\nid = "EM01"\nx = 1.0\ny = 0.0\n',
                          "s.toml: station[1].id: EM01 listed twice"),
    "bad lowpass": (GOOD_TOML.replace("[[station]]", "[receiver]\nlowpass_order = 2\n\n[[station]]",
                                      1),
                    "s.toml: receiver.lowpass_cutoff: must be positive with a low-pass order"),
    # a bow-tie and a clockwise loop were imported; the inversion then failed or misfit
    "loop crossing itself": (_toml('kind = "wire"\npoints = [[-750.0, 800.0], [750.0, 800.0]]',
                                   'kind = "loop"\npoints = [[100.0, 100.0], [200.0, 200.0], '
                                   '[200.0, 100.0], [100.0, 200.0]]'),
                             "s.toml: transmitter.points: loop crosses itself between segments "
                             "0 and 2"),
    "clockwise loop": (_toml('kind = "wire"\npoints = [[-750.0, 800.0], [750.0, 800.0]]',
                             'kind = "loop"\npoints = [[100.0, 200.0], [200.0, 200.0], '
                             '[200.0, 100.0], [100.0, 100.0]]'),
                       "s.toml: transmitter.points: vertices run clockwise; list them "
                       "anticlockwise"),
    "not toml": ("[transmitter\n", "s.toml: toml:"),
    "station beyond the coordinate range": (_toml("x = 0.0", "x = 2e8"),
                                            "d.csv with s.toml, station EM01: x: out of range"),
    "current beyond the range": (_toml("current = 40.0", "current = 1e300"),
                                 "d.csv with s.toml, station EM01: tx_current: out of range"),
}


@pytest.mark.parametrize("case", sorted(TOML_CASES))
def test_bad_toml_is_one_line_naming_file_and_field(case, tmp_path, capsys):
    text, expected = TOML_CASES[case]
    rc, err = _run(tmp_path, GOOD_CSV, text, capsys)
    assert rc == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    assert expected in lines[0], lines[0]


def test_a_unit_column_agreeing_with_the_header_imports(tmp_path, capsys):
    # the same unit in other words (nV/A/m2 is nT/s/A) is no disagreement
    text = (_csv(",error,usable\n", ",error,usable,unit\n").replace(",1\n", ",1,uV/m/A\n", 2)
            .replace("1.0,1\n", "1.0,1,nV/A/m2\n").replace("0.5,0\n", "0.5,0,nT/s/A\n"))
    rc, err = _run(tmp_path, text, GOOD_TOML, capsys)
    assert rc == 0, err


def test_times_before_the_ramp_end_are_refused(tmp_path, capsys):
    toml = _toml("ramp_off = 5e-4", 'ramp_off = 5e-4\ntime_zero = "ramp-start"')
    csv = _csv("EM01,ex,1.0,2.0", "EM01,ex,0.2,2.0").replace("EM01,dbzdt,1.0,2.0",
                                                             "EM01,dbzdt,0.2,2.0")
    rc, err = _run(tmp_path, csv, toml, capsys)
    assert rc == 2 and "d.csv: gate_open: EM01: times must be after the end of the switch-off " \
        "ramp (0.0005 s on the file's clock)" in err


def test_ramp_start_clock_shifts_the_gates(tmp_path, capsys):
    import xarray as xr

    toml = _toml("ramp_off = 5e-4", 'ramp_off = 5e-4\ntime_zero = "ramp-start"')
    rc, err = _run(tmp_path, GOOD_CSV, toml, capsys)
    assert rc == 0, err
    ds = xr.load_dataset(tmp_path / "out" / "gated" / "EM01.nc", engine="h5netcdf")
    assert ds["gate_open"].values.tolist() == pytest.approx([0.5e-3, 1.5e-3])


def test_a_measured_table_sets_the_time_zero_and_the_filter_is_kept(tmp_path, capsys):
    """A table on the data's clock ending at 0.5 ms: gates move by -0.5 ms, the table ends at 0."""
    import xarray as xr

    from tem.forward import Simulation
    from tem.forward.waveform import Waveform

    toml = _toml('kind = "bipolar"\nbase_frequency = 0.25\nduty_cycle = 0.5\nramp_on = 1e-3\n'
                 'ramp_off = 5e-4',
                 'kind = "table"\ntimes = [-1.9995, -1.9985, -0.0005, 0.0004, 0.0005]\n'
                 'current = [0.0, 38.0, 40.0, 4.0, 0.0]\nhalf_period = 2.0')
    toml = toml.replace("[[station]]", "[receiver]\nlowpass_order = 2\nlowpass_cutoff = 2e4\n\n"
                        "[[station]]", 1)
    rc, err = _run(tmp_path, GOOD_CSV, toml, capsys)
    assert rc == 0, err
    ds = xr.load_dataset(tmp_path / "out" / "gated" / "EM01.nc", engine="h5netcdf")
    assert ds["gate_open"].values.tolist() == pytest.approx([0.5e-3, 1.5e-3])
    assert ds.attrs["waveform_times"][-1] == 0.0
    assert ds.attrs["waveform_current"].max() == 1.0                 # normalised to the peak
    sim = Simulation.from_sounding(ds)
    assert sim.lowpass == (2, 2e4) and sim.response == "waveform"
    assert isinstance(sim.waveform, Waveform) and sim.waveform.half_period == 2.0
    np.testing.assert_allclose(sim.waveform.times, [-2.0, -1.999, -0.0010, -0.0001, 0.0],
                               atol=1e-12)


def test_decays_refuses_soundings_of_two_set_ups(tmp_path, capsys):
    import xarray as xr

    rc, err = _run(tmp_path, GOOD_CSV, GOOD_TOML, capsys)
    assert rc == 0, err
    g = tmp_path / "out" / "gated"
    other = xr.load_dataset(g / "EM01.nc", engine="h5netcdf")
    other.attrs["station"] = "EM02"
    other.attrs["tx_current"] = 20.0
    other.to_netcdf(g / "EM02.nc", engine="h5netcdf")
    rc = main(["decays", str(g), "--csv", str(tmp_path / "x.csv"), "--system",
               str(tmp_path / "x.toml")])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1
    assert "EM02.nc: transmitter: differs from the first sounding's" in err
    assert not (tmp_path / "x.csv").exists()


@pytest.mark.parametrize("half_period", [None, 0.5])
def test_a_table_waveform_imports_to_a_file_the_later_stages_read(tmp_path, capsys, half_period):
    # imported with exit 0, then refused by rhoa and invert (base_frequency 0, duty_cycle 0 of
    # a single pulse): the table is the waveform, the bipolar attributes do not apply
    from tem.io.stacked import read_product

    table = 'kind = "table"\ntimes = [-0.01, -0.009, 0.0]\ncurrent = [0.0, 1.0, 0.0]' + \
        (f"\nhalf_period = {half_period}" if half_period else "")
    toml = _toml('kind = "bipolar"\nbase_frequency = 0.25\nduty_cycle = 0.5\nramp_on = 1e-3'
                 '\nramp_off = 5e-4', table)
    rc, err = _run(tmp_path, GOOD_CSV, toml, capsys)
    assert rc == 0, err
    ds = read_product(tmp_path / "out" / "gated" / "EM01.nc", "gated")   # checked as rhoa does
    assert ds.attrs["waveform_times"].tolist() == [-0.01, -0.009, 0.0]
    rc = main(["rhoa", str(tmp_path / "out" / "gated"), "--out", str(tmp_path / "out"),
               "--no-progress", "--no-figures"])
    assert rc == 0, capsys.readouterr().err


def test_a_sample_time_that_rounds_to_zero_is_refused(tmp_path, capsys):
    # 1e-300 us is positive in the CSV and 0 s in the gated file: imported (exit 0), then
    # refused by rhoa; the example pair of docs/import.md with one time changed
    from pathlib import Path

    ex = Path(__file__).resolve().parents[1] / "examples" / "import"
    lines = (ex / "stepoff_decays.csv").read_text().splitlines()
    k = next(i for i, ln in enumerate(lines) if ln.startswith("EM07,dbzdt,"))
    cells = lines[k].split(",")
    cells[2] = "1e-300"
    lines[k] = ",".join(cells)
    (tmp_path / "d.csv").write_text("\n".join(lines) + "\n")
    rc = main(["import", str(tmp_path / "d.csv"), str(ex / "stepoff_system.toml"),
               "--out", str(tmp_path / "out"), "--no-progress"])
    err = capsys.readouterr().err
    assert rc == 2 and len(err.strip().splitlines()) == 1, err
    assert "d.csv with stepoff_system.toml, station EM07: gate_centre: must be positive" in err
    assert not (tmp_path / "out" / "gated").exists()
