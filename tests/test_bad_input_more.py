"""Bad-input cases found by the second hunt (tem run and the stage commands, end to end).

Each case was a Python traceback or a wrong exit status before its fix; each
must now end in one line naming the file and the field, exit status 2, the
other stations done, and no input changed. One small two-station day
(tests/day_fixture.py, 12 s of recording) and its stacked and gated products
are shared by the module.
"""
from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import pytest

from day_fixture import run_captured, write_day

PROCESSING = """
[processing.stack]
estimator = "mean"
batches = 4

[processing.gate]
per_decade = 4.0
"""

RUN = ["--jobs", "1", "--no-progress", "--no-figures"]


@pytest.fixture(scope="module")
def small_day(tmp_path_factory):
    """A two-station day and the project of its ``tem run --until gate``."""
    root = tmp_path_factory.mktemp("badmore")
    survey = write_day(root / "day", ["EM05", "EM06"], PROCESSING, seed=5, duration=12.0)
    rc, _, err = run_captured(["run", str(survey), "--out", str(root / "base"), "--until", "gate",
                               *RUN])
    assert rc in (0, 1), err
    return root


def _copy_day(small_day, tmp_path) -> Path:
    day = tmp_path / "day"
    shutil.copytree(small_day / "day", day)
    return day


def _digest(folder) -> dict:
    return {str(p): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(Path(folder).rglob("*")) if p.is_file()}


def _one_error_line(err: str, *names: str) -> str:
    assert "Traceback" not in err, err
    lines = [ln for ln in err.splitlines() if "failed" in ln or "error" in ln]
    assert lines, err
    for name in names:
        assert any(name in ln for ln in lines), (name, err)
    return lines[0]


# ---------------------------------------------------------------- a recording file that is not there
@pytest.mark.parametrize("edit", ["missing", "folder"])
def test_run_with_a_missing_recording_fails_that_station_only(small_day, tmp_path, edit):
    """`tem run` checksummed every recording before stacking: a misspelt file name (or a
    folder given as a file) ended the whole run in FileNotFoundError/IsADirectoryError."""
    day = _copy_day(small_day, tmp_path)
    survey = day / "survey.toml"
    new = {"missing": "raw/EM06/nope.npy", "folder": "raw/EM06"}[edit]
    survey.write_text(survey.read_text().replace("raw/EM06/ex.npy", new, 1))
    before = _digest(day)
    out = tmp_path / "o"
    rc, stdout, err = run_captured(["run", str(survey), "--out", str(out), "--until", "stack",
                                    *RUN])
    assert rc == 2, (stdout, err)
    assert "Traceback" not in err
    assert f"{day / new}: " in (out / "run.json").read_text()   # the failed station names it
    assert (out / "stacked" / "EM05.nc").is_file()
    assert not (out / "stacked" / "EM06.nc").exists()
    assert _digest(day) == before


def test_from_with_a_removed_product_fails_that_station_only(small_day, tmp_path):
    """`tem run --from gate` after a stacked file was removed (or moved away) ended in
    FileNotFoundError from the resume checksums."""
    day = _copy_day(small_day, tmp_path)
    proj = tmp_path / "proj"
    shutil.copytree(small_day / "base", proj)
    (proj / "stacked" / "EM06.nc").unlink()
    rc, stdout, err = run_captured(["run", str(day / "survey.toml"), "--out", str(proj),
                                    "--from", "gate", "--until", "gate", *RUN])
    assert rc == 2, (stdout, err)
    assert "Traceback" not in err
    assert "netcdf: file not found" in " ".join(stdout.split())
    assert f"{proj / 'stacked' / 'EM06.nc'}: netcdf: file not found" in (proj / "run.json").read_text()
    assert (proj / "gated" / "EM05.nc").is_file()


# ---------------------------------------------------------------- gated files edited by hand
def _invert_refuses_qc_table(small_day, tmp_path, qc) -> str:
    """``tem invert --qc QC`` on the small day: refused in one line (exit 2), nothing written;
    returns the line."""
    rc, stdout, err = run_captured(["invert", str(small_day / "base" / "gated"), "--out",
                                    str(tmp_path / "o"), "--qc", str(qc), *RUN, "--layers", "6",
                                    "--max-iter", "1"])
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1, err
    assert not (tmp_path / "o").exists()
    return err


def _edit_gated(small_day, tmp_path, edit) -> Path:
    import xarray as xr

    folder = tmp_path / "gated"
    shutil.copytree(small_day / "base" / "gated", folder)
    p = folder / "EM06.nc"
    ds = xr.load_dataset(p, engine="h5netcdf")
    ds = edit(ds)
    p.unlink()
    ds.to_netcdf(p, engine="h5netcdf")
    return folder


def _reversed(ds):
    return ds.isel(gate=slice(None, None, -1))


def _repeated(ds):
    return ds.isel(gate=[0, 0] + list(range(1, ds.sizes["gate"])))


def _unknown_component(ds):
    import numpy as np

    return ds.assign(component=("channel", np.array(["ex", "hz"])))


def _nan_x(ds):
    ds.attrs["x"] = float("nan")
    return ds


def _unknown_gate_shape(ds):
    ds.attrs["gate_shape"] = "banana"
    return ds


def _clockwise_loop(ds):
    import numpy as np

    ds.attrs["tx_kind"] = "loop"
    ds.attrs["tx_points"] = np.array([-50.0, 50.0, 50.0, 50.0, 50.0, -50.0, -50.0, -50.0])
    return ds


def _nan_error(ds):
    ds["usable"].values[0, 2] = True
    ds["error"].values[0, 2] = float("nan")
    return ds


def _nan_value(ds):
    ds["usable"].values[1, 2] = True
    ds["value"].values[1, 2] = float("nan")
    return ds


@pytest.mark.parametrize("edit, message", [
    # an unknown window named no file (the forward model's message)
    (_unknown_gate_shape, "gate_shape: unknown window 'banana'; valid: boxcar, taper"),
    # gates out of time order or repeated were used as they stood (exit 0): a repeated
    # gate counts its datum twice in the inversion
    (_reversed, "gate_open: gates must go forward in time: gate 1"),
    (_repeated, "gate_open: gates must go forward in time: gate 1"),
    # the values in messages were numpy reprs: "unknown np.str_('hz')", "got np.float64(nan)"
    (_unknown_component, "component: unknown 'hz'; valid:"),
    (_nan_x, "x: must be finite, got nan"),
    # as the survey and the import: +I runs anticlockwise
    (_clockwise_loop, "tx_points: vertices run clockwise; list them anticlockwise"),
    # a usable gate with a NaN error or value: rhoa went on (exit 0) where invert refused
    (_nan_error, "error: 1 usable gate(s) with a NaN, infinite or negative error, first ex "
     "gate 2"),
    (_nan_value, "value: 1 usable gate(s) with a NaN, infinite value, first dbzdt gate 2"),
])
def test_rhoa_refuses_an_edited_gated_file(small_day, tmp_path, edit, message):
    folder = _edit_gated(small_day, tmp_path, edit)
    before = _digest(folder)
    rc, stdout, err = run_captured(["rhoa", str(folder), "--out", str(tmp_path / "o"), *RUN])
    assert rc == 2, (stdout, err)
    line = _one_error_line(err, f"{folder / 'EM06.nc'}: {message}")
    assert "np." not in line, line
    assert (tmp_path / "o" / "rhoa" / "EM05.nc").is_file()
    assert not (tmp_path / "o" / "rhoa" / "EM06.nc").exists()
    assert _digest(folder) == before


# ---------------------------------------------------------------- extra files in a product folder
def test_two_files_of_one_station_are_refused(small_day, tmp_path):
    """A copy of a gated file left in the folder was inverted twice: models.nc listed the
    station twice (refused by every later reader) and the invert exit status was 0/1."""
    folder = tmp_path / "gated"
    shutil.copytree(small_day / "base" / "gated", folder)
    shutil.copy(folder / "EM06.nc", folder / "EM06_copy.nc")
    for args in (["rhoa", str(folder), "--out", str(tmp_path / "o"), *RUN],
                 ["invert", str(folder), "--out", str(tmp_path / "o"), *RUN, "--layers", "6",
                  "--max-iter", "1"],
                 ["decays", str(folder), "--csv", str(tmp_path / "o" / "d.csv"), "--system",
                  str(tmp_path / "o" / "s.toml")]):
        rc, stdout, err = run_captured(args)
        assert rc == 2, (args, stdout, err)
        assert err.count("\n") == 1, err
        assert f"{folder / 'EM06_copy.nc'}: gated: station EM06 is in two files" in err, err
        assert not (tmp_path / "o").exists()


def test_stations_in_two_crs_are_refused(small_day, tmp_path):
    """A station whose gated file says another EPSG code was inverted with the others into
    one models file labelled with one CRS."""
    def other_crs(ds):
        ds.attrs["epsg"] = 32632
        return ds

    folder = _edit_gated(small_day, tmp_path, other_crs)
    for args in (["rhoa", str(folder), "--out", str(tmp_path / "o"), *RUN],
                 ["invert", str(folder), "--out", str(tmp_path / "o"), *RUN, "--layers", "6",
                  "--max-iter", "1"]):
        rc, stdout, err = run_captured(args)
        assert rc == 2, (args, stdout, err)
        assert err.count("\n") == 1, err
        assert f"error: {folder / 'EM06.nc'}: epsg: EPSG:32632, but {folder / 'EM05.nc'} is " \
            "EPSG:0; stations processed together share one CRS" in err, err
        assert not (tmp_path / "o").exists()


def test_hidden_appledouble_files_are_skipped(small_day, tmp_path):
    """'._EM05.nc' (Mac metadata beside a copied file) was taken for a station and failed
    it: exit status 2 for a good folder."""
    folder = tmp_path / "gated"
    shutil.copytree(small_day / "base" / "gated", folder)
    (folder / "._EM05.nc").write_bytes(b"\x00\x05\x16\x07\x00\x02\x00\x00" + b"Mac OS X" * 60)
    rc, stdout, err = run_captured(["rhoa", str(folder), "--out", str(tmp_path / "o"), *RUN])
    assert rc == 0, (stdout, err)
    assert sorted(p.name for p in (tmp_path / "o" / "rhoa").glob("*.nc")) == ["EM05.nc",
                                                                              "EM06.nc"]


# ---------------------------------------------------------------- a low-pass order without a cut-off
def test_survey_lowpass_order_needs_a_cutoff(small_day, tmp_path):
    """survey.lowpass_order = 4 with no cut-off was read, stacked and gated; every station
    then failed at rhoa and invert with 'lowpass: cut-off frequency must be positive (Hz)',
    naming neither file nor field."""
    day = _copy_day(small_day, tmp_path)
    survey = day / "survey.toml"
    survey.write_text(survey.read_text().replace("epsg = 0", "epsg = 0\nlowpass_order = 4", 1))
    rc, stdout, err = run_captured(["run", str(survey), "--out", str(tmp_path / "o"), *RUN])
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1, err
    assert f"{survey}: survey.lowpass_cutoff: must be positive with a low-pass order (4)" in err
    assert not (tmp_path / "o").exists()


def _lowpass_without_cutoff(ds):
    ds.attrs.update(lowpass_order=4, lowpass_cutoff=0.0)
    return ds


def test_gated_lowpass_order_needs_a_cutoff(small_day, tmp_path):
    folder = _edit_gated(small_day, tmp_path, _lowpass_without_cutoff)
    rc, stdout, err = run_captured(["rhoa", str(folder), "--out", str(tmp_path / "o"), *RUN])
    assert rc == 2, (stdout, err)
    _one_error_line(err, f"{folder / 'EM06.nc'}: lowpass_cutoff: must be positive with a "
                         "low-pass order (4), got 0")


# ---------------------------------------------------------------- section geometry
@pytest.fixture(scope="module")
def models_file(tmp_path_factory):
    from profile_fixture import synthetic_models
    from tem.io.models import write_models

    return write_models(synthetic_models(), tmp_path_factory.mktemp("models") / "models.nc")


def _same_position(ds):
    ds = ds.copy(deep=True)
    ds["x"].values[1], ds["y"].values[1] = ds["x"].values[0], ds["y"].values[0]
    return ds


@pytest.mark.parametrize("line, edit, where, message", [
    # each was a message naming neither file nor stations
    (None, _same_position, "models", "x, y: stations {0} and {1} are at the same position"),
    ("x,y\n0,0\n0,0\n1000,0\n", None, "line", "line 3: x, y: same vertex as line 2"),
    ("x,y\n5,5\n5,5\n", None, "line", "line 3: x, y: same vertex as line 2"),
    ("x,y\n1e7,1e7\n1.001e7,1e7\n", None, "line", "line: stations {0} and {1} project onto the "
     "same point of the line"),
])
def test_section_names_the_stations_it_cannot_place(models_file, tmp_path, line, edit, where,
                                                    message):
    import xarray as xr

    ds = xr.load_dataset(models_file, engine="h5netcdf")
    models = models_file
    if edit is not None:
        models = tmp_path / "models.nc"
        edit(ds).to_netcdf(models, engine="h5netcdf")
    args = ["section", str(models), "--out", str(tmp_path / "o"), "--no-figures", "--no-progress"]
    if line is not None:
        (tmp_path / "line.csv").write_text(line)
        args += ["--line", str(tmp_path / "line.csv")]
    rc, stdout, err = run_captured(args)
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1, err
    ids = [str(s) for s in ds["station"].values]
    named = models if where == "models" else tmp_path / "line.csv"
    assert f"{named}: {message.format(*ids[:2])}" in err, err
    assert not (tmp_path / "o").exists()


# ---------------------------------------------------------------- survey: a receiver without files
def test_receiver_with_an_empty_file_list_names_the_survey(small_day, tmp_path):
    """files = [] (a tem forward design survey, docs/forward.md) made the station fail when
    stacked with 'receiver.files: ex: no recording listed', naming neither the survey file
    nor the station; the other station is still stacked."""
    day = _copy_day(small_day, tmp_path)
    survey = day / "survey.toml"
    text = survey.read_text()
    old = '"raw/EM06/ex.npy",'
    assert old in text
    survey.write_text(text.replace(old, "", 1))
    rc, stdout, err = run_captured(["stack", str(survey), "--out", str(tmp_path / "o"), *RUN])
    assert rc == 2, (stdout, err)
    _one_error_line(err, f"{survey}: station[EM06].receiver[0].files: ex: no recording listed")
    assert (tmp_path / "o" / "stacked" / "EM05.nc").is_file()


# ---------------------------------------------------------------- the evening QC table
@pytest.mark.parametrize("minutes, message", [
    ("many", "not a number: 'many'"),      # was stored as NaN without a word
    ("-5", "must be >= 0, got -5"),         # was carried into models.nc as -5 minutes
    ("nan", "must be finite, got nan"),
])
def test_qc_table_extra_minutes_must_be_a_number(small_day, tmp_path, minutes, message):
    qc = tmp_path / "stations.csv"
    qc.write_text(f"station,verdict,reasons,extra_minutes\nEM05,check,noisy,{minutes}\n"
                  "EM06,good,,0\n")
    err = _invert_refuses_qc_table(small_day, tmp_path, qc)
    assert f"{qc}: extra_minutes: line 2 (EM05): {message}" in err, err


# ---------------------------------------------------------------- tem import
def _import(tmp_path, csv_text, *extra):
    from test_import_bad import GOOD_TOML

    (tmp_path / "d.csv").write_text(csv_text)
    (tmp_path / "s.toml").write_text(GOOD_TOML)
    return run_captured(["import", str(tmp_path / "d.csv"), str(tmp_path / "s.toml"), "--out",
                         str(tmp_path / "out"), "--no-progress", *extra])


@pytest.mark.parametrize("edit, extra, why", [
    (lambda t: t.replace(",1\n", ",0\n"), (), "every row flagged not usable"),
    (lambda t: t, ("--snr-min", "1e5"), "every row flagged not usable or below --snr-min 100000"),
])
def test_import_of_a_station_without_a_usable_gate_is_bad_input(tmp_path, edit, extra, why):
    """Exit status was 1 (a computation failure) and the line named the written output
    file, not the decay CSV whose flags made it."""
    from test_import_bad import GOOD_CSV

    rc, stdout, err = _import(tmp_path, edit(GOOD_CSV), *extra)
    assert rc == 2, (stdout, err)
    assert "Traceback" not in err
    assert f"{tmp_path / 'd.csv'}: usable: station EM01: no usable gate ({why})" in err, err


@pytest.mark.parametrize("sep, name", [(";", "semicolons"), ("\t", "tabs")])
def test_import_names_the_separator_of_a_spreadsheet_export(tmp_path, sep, name):
    """A CSV saved with semicolons (decimal-comma locales) or tabs was refused as missing
    every column, without saying why."""
    from test_import_bad import GOOD_CSV

    rc, stdout, err = _import(tmp_path, GOOD_CSV.replace(",", sep))
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1, err
    assert f"d.csv:3: columns: missing station, component, value, error, gate_open, " \
           f"gate_close; the header is separated by {name}" in err, err
    assert not (tmp_path / "out").exists()


# ---------------------------------------------------------------- tem synth options
@pytest.mark.parametrize("args, message", [
    # ended in numpy's ArrayMemoryError traceback (28 PiB asked for)
    (["--duration", "1e12"], "duration: at most 86400 s (a day) per station, got 1e+12"),
    # said 'stations: survey lists no station', naming neither the option nor the id
    (["--duration", "8", "--stations", "EM05,EM99"], "--stations: no station 'EM99' in the "
     "Emberline survey; valid: EM01"),
])
def test_synth_emberline_options(tmp_path, args, message):
    rc, stdout, err = run_captured(["synth", "--emberline", "--out", str(tmp_path / "o"), *args])
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1 and message in err, err
    assert not (tmp_path / "o").exists()


# ---------------------------------------------------------------- stacked files edited by hand
def _edit_stacked(small_day, tmp_path, edit) -> Path:
    import xarray as xr

    folder = tmp_path / "stacked"
    shutil.copytree(small_day / "base" / "stacked", folder)
    p = folder / "EM06.nc"
    ds = edit(xr.load_dataset(p, engine="h5netcdf"))
    p.unlink()
    ds.to_netcdf(p, engine="h5netcdf")
    return folder


def _first_time_negative(ds):
    t = ds["time"].values.copy()
    t[0] = -1.0
    return ds.assign_coords(time=("time", t))


def _attrs(**kw):
    def edit(ds):
        ds.attrs.update(kw)
        return ds
    return edit


@pytest.mark.parametrize("edit, message", [
    # the gate stage took the sample interval from the first two times: t_min became 16 s and
    # the station failed with 't_max: need 0 < t_min < t_max, got 16.018, 0.4994', no file
    (_first_time_negative, "time: samples not evenly spaced: 1.00113 s from sample 0 to 1"),
    # gates ran to the half-period (into the next pulse's on-time), exit 0
    (_attrs(off_time=0.0), "off_time: 0 s disagrees with duty_cycle and base_frequency"),
    (_attrs(off_time=1e3), "off_time: 1000 s disagrees with duty_cycle and base_frequency"),
    # a waveform the survey reader refuses was used as it stood, exit 0
    (_attrs(ramp_off=10.0), "ramp_off: ramps (10.001 s) longer than the on-time (1 s"),
])
def test_gate_refuses_an_edited_stacked_file(small_day, tmp_path, edit, message):
    folder = _edit_stacked(small_day, tmp_path, edit)
    rc, stdout, err = run_captured(["gate", str(folder), "--out", str(tmp_path / "o"), *RUN])
    assert rc == 2, (stdout, err)
    _one_error_line(err, f"{folder / 'EM06.nc'}: {message}")
    assert (tmp_path / "o" / "gated" / "EM05.nc").is_file()
    assert not (tmp_path / "o" / "gated" / "EM06.nc").exists()


# ---------------------------------------------------------------- settings that conflict with a default
@pytest.mark.parametrize("table, overrides, expected", [
    # blamed 'survey.toml: processing.rhoa.rho_max', a key the survey does not hold
    ({}, [("rhoa", "rho_min", 1e6)], "--set rhoa.rho_min: conflicts with rho_max = 100000.0 "
     "(its default): must exceed rho_min"),
    ({}, [("invert", "start_resistivity", [10.0, 100.0])], "--set invert.start_thickness: "
     "give both"),
    ({"rhoa": {"rho_min": 1e6}}, [], "{survey}: processing.rhoa.rho_min: conflicts with rho_max"),
])
def test_a_conflict_is_blamed_on_the_value_given(tmp_path, table, overrides, expected):
    from tem.errors import TemInputError
    from tem.pipeline.settings import resolve_settings

    survey = tmp_path / "survey.toml"
    with pytest.raises(TemInputError) as exc:
        resolve_settings(table, overrides, survey)
    msg = str(exc.value)
    assert expected.format(survey=survey) in msg, msg
    if overrides:
        assert str(survey) not in msg, msg


def test_a_stage_option_conflict_names_the_option_given(small_day, tmp_path):
    rc, stdout, err = run_captured(["rhoa", str(small_day / "base" / "gated"), "--out",
                                    str(tmp_path / "o"), "--rho-min", "1e6", *RUN])
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1, err
    assert "--rho-min: conflicts with rho_max = 100000.0 (its default)" in err, err


# ---------------------------------------------------------------- survey geometry and files
@pytest.mark.parametrize("old, new, message", [
    # EM06's ex pointing at EM05's recording stacked EM05's data as EM06's (exit 0)
    ('"raw/EM06/ex.npy"', '"raw/EM05/ex.npy"', "station[EM06].receiver.files: raw/EM05/ex.npy "
     "is also the EM05 ex recording; an .npy file holds one channel"),
    # a station 'in another CRS' was used with its numbers as they stood (exit 0): its offset
    # from the transmitter was wrong
    ('id = "EM06"', 'id = "EM06"\nepsg = 32735', "station[EM06].epsg: EPSG:32735 differs from "
     "survey.epsg (0)"),
    # a station on the wire was found by the rhoa stage, in a message that named no file
    ("x = -1500.0\ny = 0.0", "x = 0.0\ny = 800.0", "station[EM05].receiver: the dbzdt receiver "
     "at (0.0, 800.0) m lies on the transmitter (0 m from the wire, under 1.5 m)"),
    # timing from a current channel no station has: the stack failed each, naming no file
    ('timing = "survey"', 'timing = "current"', "station[EM05].receiver: transmitter.timing = "
     "\"current\" takes the switch times from a receiver with component 'current'; this "
     "station has none"),
])
def test_survey_refuses_inconsistent_station(small_day, tmp_path, old, new, message):
    day = _copy_day(small_day, tmp_path)
    survey = day / "survey.toml"
    text = survey.read_text()
    assert old in text
    survey.write_text(text.replace(old, new, 1))
    rc, stdout, err = run_captured(["stack", str(survey), "--out", str(tmp_path / "o"), *RUN])
    assert rc == 2, (stdout, err)
    assert err.count("\n") == 1, err
    assert f"{survey}: {message}" in err, err
    assert not (tmp_path / "o").exists()


def test_decays_refuses_one_file_for_csv_and_system(small_day, tmp_path):
    """--csv X --system X wrote the decays, then the system TOML over them (exit 0)."""
    target = tmp_path / "d.csv"
    rc, stdout, err = run_captured(["decays", str(small_day / "base" / "gated"), "--csv",
                                    str(target), "--system", str(target)])
    assert rc == 2, (stdout, err)
    assert f"{target}: --system: same file as --csv" in err, err
    assert not target.exists()


# ---------------------------------------------------------------- damaged MiniSEED
def _cut(p):
    p.write_bytes(p.read_bytes()[:5000])           # the second record cut short


def _junk_tail(p):
    p.write_bytes(p.read_bytes() + b"\x00junk" * 40)


def _junk_record(p):
    b = bytearray(p.read_bytes())
    b[4096:4224] = bytes(x ^ 0x5A for x in b[4096:4224])
    p.write_bytes(bytes(b))


@pytest.mark.parametrize("damage, message", [
    # ObsPy warned ('Unexpected end of file ... The rest of the file will not be read') and
    # the stack went on without the lost samples: exit 0 and a Python warning on stderr
    (_cut, "records: damaged MiniSEED: Unexpected end of file"),
    (_junk_tail, "records: damaged MiniSEED: Not a SEED record"),
    # was reported as a gap in time, not as the damaged bytes it is
    (_junk_record, "records: damaged MiniSEED: Not a SEED record. Will skip bytes 4096"),
])
def test_damaged_miniseed_is_refused(tmp_path, damage, message):
    pytest.importorskip("obspy")
    import warnings

    import numpy as np

    from tem.errors import TemInputError
    from tem.io.mseed import mseed_open
    from tem.io.raw import RawHeader, write_mseed_recording

    p = tmp_path / "dbzdt.mseed"
    counts = (np.arange(40000) % 1000 - 500).astype(np.int32)
    write_mseed_recording(p, counts, RawHeader(1000.0, 1e-6, np.datetime64(
        "2025-06-02T08:00:00", "ns"), component="dbzdt", station="EM05"))
    damage(p)
    with warnings.catch_warnings():
        warnings.simplefilter("error")          # no Python warning may get through either
        with pytest.raises(TemInputError) as exc:
            mseed_open(p)
    msg = str(exc.value)
    assert "\n" not in msg and msg.startswith(f"{p}: {message}"), msg


@pytest.mark.parametrize("data, message", [
    # a NUL in the reasons went on into models.nc (qc_verdict) and every export (exit 0)
    (b"station,verdict,reasons,extra_minutes\nEM05,good,\x00,0\n", "stations.csv: NUL character"),
    # 'unreadable (UnicodeDecodeError)' / 'unreadable (Error)' said neither where nor what
    (b"station,verdict,reasons,extra_minutes\nEM05,good,\xff,0\n",
     "stations.csv: not a text file (UTF-8 expected; byte 48)"),
    (b'station,verdict,reasons,extra_minutes\nEM05,good,"' + b"x" * 200_000 + b'",0\n',
     "stations.csv: not readable as CSV (field larger than field limit"),
])
def test_qc_table_bytes(small_day, tmp_path, data, message):
    qc = tmp_path / "stations.csv"
    qc.write_bytes(data)
    err = _invert_refuses_qc_table(small_day, tmp_path, qc)
    assert f"{qc}: {message}" in err, err


@pytest.mark.parametrize("edit, field", [
    (lambda s: s["stages"]["gate"].update(stations=["EM01"]), "stages.gate.stations: not a table"),
    (lambda s: s["stages"]["gate"]["stations"].update(EM01={"x": 1.0}),
     "stages.gate.stations.EM01.status: missing"),
    (lambda s: s["stages"]["gate"]["stations"].update(EM01=3), "stages.gate.stations.EM01: not a"),
    (lambda s: s["stages"]["stack"].update(inputs={"a": 1}), "stages.stack.inputs: not a list"),
    (lambda s: s.update(checksums=[1, 2]), "checksums: not a table"),
    (lambda s: s["stages"].update(gate="ok"), "stages.gate: not a table"),
    # these passed and were written back as they were, the record no longer one of tem's
    (lambda s: s["stages"]["stack"].update(outputs=5), "stages.stack.outputs: not a list"),
    (lambda s: s["stages"]["stack"].update(failed=["EM01"]), "stages.stack.failed: not text"),
    (lambda s: s["stages"]["gate"].update(parameters="x"), "stages.gate.parameters: not a table"),
    (lambda s: s.update(survey="zzz"), "survey: not a table"),
    (lambda s: s.update(parameters=[1]), "parameters: not a table"),
    # each of these was a traceback of the run that read the record
    (lambda s: s["stages"]["stack"].pop("stations"), "stages.stack.stations: missing"),
    (lambda s: s["stages"]["stack"]["stations"]["EM01"].update(checksums=["x"]),
     "stages.stack.stations.EM01.checksums: not a table"),
    (lambda s: s["stages"]["stack"]["stations"]["EM01"].update(checksums={"a.nc": 5}),
     "stages.stack.stations.EM01.checksums: a checksum that is not text"),
    (lambda s: s["stages"]["stack"]["stations"]["EM01"].update(fingerprint=[1]),
     "stages.stack.stations.EM01.fingerprint: not text"),
])
def test_hand_damaged_run_record_is_refused_in_one_line(tmp_path, edit, field):
    """A run.json whose per-station parts were damaged by hand: `tem run --from` refuses it in
    one line naming the field (it was a traceback when a stage's stations were a list)."""
    import json

    from tem.errors import TemInputError
    from tem.pipeline.runner import read_run

    state = {"tem_format": "run", "format_version": "1.0", "checksums": {},
             "stations": {"EM01": {"x": 0.0}},
             "stages": {"stack": {"inputs": [], "stations": {"EM01": {"status": "ok"}}},
                        "gate": {"inputs": [], "stations": {"EM01": {"status": "ok"}}}}}
    (tmp_path / "run.json").write_text(json.dumps(state))
    assert read_run(tmp_path)["stages"]["gate"]["stations"]["EM01"]["status"] == "ok"
    edit(state)
    (tmp_path / "run.json").write_text(json.dumps(state))
    with pytest.raises(TemInputError) as err:
        read_run(tmp_path)
    text = str(err.value)
    assert "\n" not in text and "run.json" in text and field in text, text


def test_text_and_toml_size_caps(tmp_path):
    # a text table or a survey larger than its cap is refused in one line naming the file;
    # one byte under the cap is read whole (the reading goes in 1 MiB pieces, never a buffer
    # of the cap's size: that was a 64 MiB allocation per 20 kB table read)
    from tem.errors import TemInputError
    from tem.io.checks import read_text
    from tem.io.tomlfile import MAX_TOML_BYTES, read_toml

    f = tmp_path / "table.csv"
    f.write_bytes(b"a" * (3 * 2**20 + 7))
    assert len(read_text(f, "table.csv", max_bytes=3 * 2**20 + 7)) == 3 * 2**20 + 7
    with pytest.raises(TemInputError, match=r"table\.csv.*larger than 3 MiB"):
        read_text(f, "table.csv", max_bytes=3 * 2**20 + 6)
    big = tmp_path / "survey.toml"
    big.write_bytes(b"# padding\n" * (MAX_TOML_BYTES // 10 + 1))
    with pytest.raises(TemInputError, match=r"survey\.toml.*larger than 16 MiB") as err:
        read_toml(big, "survey")
    assert "\n" not in str(err.value)


def test_a_run_record_nested_too_deep_is_unreadable(tmp_path):
    # json's parser gave up with a RecursionError traceback
    from tem.errors import TemInputError
    from tem.pipeline.runner import read_run

    (tmp_path / "run.json").write_text("[" * 100_000 + "]" * 100_000)
    with pytest.raises(TemInputError, match=r"run\.json: run\.json: unreadable \(RecursionError\)"):
        read_run(tmp_path)


@pytest.mark.parametrize("attr, value, message", [
    # section and export met these as JSONDecodeError / RecursionError tracebacks
    ("provenance", "{not json", "provenance: not a JSON list of stage records"),
    ("provenance", "[" * 100_000 + "]" * 100_000, "provenance: not a JSON list of stage records"),
])
def test_section_refuses_a_damaged_models_attribute(models_file, tmp_path, attr, value, message):
    import xarray as xr

    ds = xr.load_dataset(models_file, engine="h5netcdf")
    ds.attrs[attr] = value
    models = tmp_path / "models.nc"
    ds.to_netcdf(models, engine="h5netcdf")
    rc, stdout, err = run_captured(["section", str(models), "--out", str(tmp_path / "o"),
                                    "--no-figures", "--no-progress"])
    assert rc == 2, (stdout, err)
    _one_error_line(err, f"{models}: {message}")


def test_a_verdict_code_outside_its_flags_is_refused(models_file, tmp_path):
    # a code of 99 was exported as a LAS header "FIT UNKNOWN" with exit 0
    import xarray as xr

    import numpy as np

    from tem.invert.verdict import STATUSES, flag_meanings

    ds = xr.load_dataset(models_file, engine="h5netcdf")
    codes = np.full(ds.sizes["station"], 99, np.int8)
    ds["verdict_code"] = ("station", codes, {"flag_values": np.arange(len(STATUSES), dtype=np.int8),
                                             "flag_meanings": flag_meanings()})
    models = tmp_path / "models.nc"
    ds.to_netcdf(models, engine="h5netcdf")
    rc, stdout, err = run_captured(["section", str(models), "--out", str(tmp_path / "o"),
                                    "--no-figures", "--no-progress"])
    assert rc == 2, (stdout, err)
    _one_error_line(err, f"{models}: verdict_code: a code that is not one of its flag_values")


@pytest.mark.parametrize("setting, message", [
    # a folder or a missing file was found only after the stages before export had rerun
    ("export.velocity={tmp}", "export.velocity: not a file"),
    ("section.line={tmp}/none.csv", "section.line: no such file"),
    # the same component twice: the last floor won silently
    ("invert.floor=ex=0.05,ex=0.1", "--set invert.floor: ex given twice"),
])
def test_run_refuses_a_bad_setting_before_any_stage(small_day, tmp_path, setting, message):
    day = _copy_day(small_day, tmp_path)
    out = tmp_path / "p"
    rc, stdout, err = run_captured(["run", str(day / "survey.toml"), "--out", str(out), "--set",
                                    setting.format(tmp=tmp_path), *RUN])
    assert rc == 2, (stdout, err)
    _one_error_line(err, message)
    assert not (out / "run.json").exists()


def test_stack_with_an_empty_station_list_is_refused(small_day, tmp_path):
    # --stations "" stacked every station
    day = _copy_day(small_day, tmp_path)
    rc, stdout, err = run_captured(["stack", str(day / "survey.toml"), "--out", str(tmp_path / "o"),
                                    "--stations", "", "--no-progress", "--no-figures"])
    assert rc == 2, (stdout, err)
    _one_error_line(err, "--stations: no station named")


def test_stations_at_one_position_stop_the_run_at_the_section_with_a_record(small_day,
                                                                            tmp_path):
    # two stations at the same position (found by an independent review): the rhoa stage's
    # pseudo-section stopped the run with "two consecutive polyline vertices coincide",
    # naming no station, no summary and no run verdict in run.json. Now the pseudo-section
    # is left out with a note, and the section stage refuses in one line naming both
    # stations; run.json records the stop and exit status 2.
    import copy
    import tomllib

    import tomli_w

    day = _copy_day(small_day, tmp_path)
    survey = day / "survey.toml"
    text = survey.read_text()
    doc = tomllib.loads(text)
    a, b = doc["station"][0], doc["station"][1]
    b["x"], b["y"] = a["x"], a["y"]
    b["receiver"] = copy.deepcopy(a["receiver"])   # one site recorded twice
    for r in b["receiver"]:
        r["files"] = [f.replace(a["id"], b["id"]) for f in r["files"]]
    shutil.rmtree(day / "raw" / b["id"])
    shutil.copytree(day / "raw" / a["id"], day / "raw" / b["id"])
    survey.write_text(tomli_w.dumps(doc))
    proj = tmp_path / "p"
    rc, out, err = run_captured(["run", str(survey), "--out", str(proj), *RUN[:2], "--no-progress"])
    assert rc == 2, err
    line = _one_error_line(err, "EM05", "EM06", "same position")
    assert "polyline" not in err
    state = json.loads((proj / "run.json").read_text())
    assert "rhoa" in state["stages"] and not state["stages"]["rhoa"].get("failed")
    assert any("no pseudo-section" in n and "same position" in n
               for n in state["stages"]["rhoa"]["notes"])
    stopped = state["last_run"]["stopped"]
    assert stopped.startswith("section: refused its input") and "EM05" in stopped, line
    assert state["last_run"]["exit_status"] == 2
