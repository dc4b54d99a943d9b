"""Bad-input suite (issue 9), named cases: each class of bad input for each text reader.

Wrong TOML types, integers of hundreds and thousands of digits, non-UTF-8
bytes, NUL characters, malformed .npy headers and absurd values (coordinates
of 1e300, sample counts of 1e12). Each must end in one
:class:`tem.errors.TemInputError` line naming the file and the field, and at
the command line in exit status 2 (a door input) or in one failed-station
line (a per-station recording: the other stations go on). The netCDF cases
are in tests/test_fuzz_netcdf_readers.py; the hypothesis runs in
tests/test_fuzz_*.py.
"""
from __future__ import annotations

import numpy as np
import pytest
import tomli_w

from tem.cli import main
from tem.errors import TemInputError

HDR = {"format_version": 1, "sample_rate": 1000.0, "volts_per_count": 1e-6,
       "start_time": "2025-06-02T08:00:00Z"}
BIG = "9" * 400
HUGE = "9" * 5000


def _one_line(exc, path, field):
    msg = str(exc.value)
    assert "\n" not in msg and len(msg) < 400, msg
    assert str(path) in msg, msg
    assert field in msg, msg


@pytest.fixture()
def survey_text(tmp_path):
    from tem.survey import survey_to_dict
    from tem.synth import emberline_survey

    sv, _ = emberline_survey(base_dir=tmp_path, stations=["EM01"])
    return tomli_w.dumps(survey_to_dict(sv))


# ---------------------------------------------------------------- survey TOML
SURVEY_CASES = [
    # wrong TOML types
    ('[transmitter]\nkind = "wire"', 'transmitter = 5\n[transmitter_]\nkind = "wire"', "toml"),
    ('current = 40.0', 'current = "40"', "transmitter.current: expected a number, got text"),
    ('kind = "wire"', 'kind = ["wire"]', "transmitter.kind: unknown ['wire']"),
    ('[[station]]\nid = "EM01"', '[[station]]\nid = 1', "station[0].id: expected text"),
    ('sample_rate = 4000.0', 'sample_rate = [4000.0]', "sample_rate: expected a number, got a list"),
    ('gain = 1.0', 'gain = true', "gain: expected a number, got true/false"),
    ('[survey]', '[survey]\nlowpass_order = "2"', "survey.lowpass_order: expected an integer"),
    ('coil_area = 10000.0', 'coil_area = {a = 1}', "coil_area: expected a number, got a table"),
    # ids that would share product file names (only found by the export, after the inversion)
    ('[[station]]\nid = "EM01"', '[[station]]\nid = "em01"\nx = 1.0\ny = 0.0\n\n[[station]]\nid = "EM01"',
     "station.id: 'em01' and 'EM01' differ only in letter case"),
    ('[[station]]\nid = "EM01"', '[[station]]\nid = "EM 01"\nx = 1.0\ny = 0.0\n\n[[station]]\n'
     'id = "EM_01"\nx = 2.0\ny = 0.0\n\n[[station]]\nid = "EM01"',
     "station.id: 'EM 01' and 'EM_01' give the same LAS file name (EM_01.las"),
    # a key of the other kind of sensor (was ignored): a coil with a dipole, an E-dipole with an area
    ('coil_area = 10000.0', 'coil_area = 10000.0\ndipole = [[0.0, 0.0], [1.0, 0.0]]',
     "receiver.dipole: only for an electric dipole (ex, ey); the dbzdt receiver takes none"),
    ('component = "ex"', 'component = "ex"\ncoil_area = 1.0',
     "receiver.coil_area: only for an induction coil"),
    # integers of hundreds and thousands of digits
    ('current = 40.0', f'current = {BIG}', "transmitter.current: out of range"),
    ('x = -5500.0', f'x = {HUGE}', "toml: unreadable value"),
    ('epsg = 0', f'epsg = {BIG}', "epsg: must be >= 1 and <= 2147483647"),
    ('format_version = 1', f'format_version = {BIG}', "survey.format_version: unsupported"),
    # NUL and control characters in ids
    ('id = "EM01"', 'id = "EM\\u000001"', "station[0].id: holds a control or NUL character"),
    ('id = "EM01"', 'id = "EM/01"', "station.id: must be a name without '/'"),
    # absurd values
    ('x = -5500.0', 'x = 1e300', "station.x: out of range"),
    ('sample_rate = 4000.0', 'sample_rate = 1e12', "sample_rate: out of range"),
    ('base_frequency = 0.25', 'base_frequency = 1e-300', "transmitter.base_frequency: must be >="),
    ('current = 40.0', 'current = nan', "transmitter.current: must be finite"),
    ('first_switch_off = "2025', 'first_switch_off = "9999', "first_switch_off: not an ISO-8601"),
    # a gain so small the scaled volts overflow the stacked file (was written, then refused)
    ('gain = 1.0', 'gain = 1e-300', "receiver.gain: must be >= 1e-09"),
    ('current = 40.0', 'current = 1e-300', "transmitter.current: must be >= 1e-09"),
    # half a station position (was put at y = 0)
    ('x = -5500.0\ny = 0.0', 'x = -5500.0', "station[EM01].y: missing (give both x and y"),
    # a loop whose vertices enclose nothing (failed later, naming no file)
]


@pytest.mark.parametrize("old, new, field", SURVEY_CASES)
def test_survey_refuses(tmp_path, survey_text, old, new, field):
    from tem.survey import read_survey

    assert old in survey_text, old
    p = tmp_path / "survey.toml"
    p.write_text(survey_text.replace(old, new, 1))
    with pytest.raises(TemInputError) as exc:
        read_survey(p)
    _one_line(exc, p, field)


@pytest.mark.parametrize("edit, field", [
    (("-750.0", BIG), "transmitter.points: expected [longitude, latitude]"),
    (("epsg = 4326", f"epsg = {BIG}"), "survey.epsg: must be >= 1 and <= 2147483647"),
    (("projected_epsg = 32735", "projected_epsg = 4326"), "is not a projected CRS"),
    (("[[station]]", "station = 5\n[[station_]]"), "toml"),
])
def test_geographic_survey_refuses(tmp_path, survey_text, edit, field):
    pytest.importorskip("pyproj")
    from tem.survey import read_survey

    text = survey_text.replace("epsg = 0", "epsg = 4326\nprojected_epsg = 32735", 1)
    p = tmp_path / "survey.toml"
    p.write_text(text.replace(*edit, 1))
    with pytest.raises(TemInputError) as exc:
        read_survey(p)
    _one_line(exc, p, field)


@pytest.mark.parametrize("points", [[[0.0, 0.0]] * 3, [[0.0, 0.0], [10.0, 0.0], [20.0, 0.0]]])
def test_loop_enclosing_no_area(points):
    # it passed the reader and the stack, then the gate stage failed naming no file
    from tem.survey import Transmitter

    with pytest.raises(TemInputError, match="transmitter.points: the loop's vertices enclose "
                                            "no area"):
        Transmitter(kind="loop", points=points, current=10.0, base_frequency=0.25, duty_cycle=0.5,
                    ramp_on=0.0, ramp_off=0.0, first_switch_off=np.datetime64("2026-01-01"))


WIRE = ('kind = "wire"\npoints = [\n    [\n        -750.0,\n        800.0,\n    ],\n    [\n'
        '        750.0,\n        800.0,\n    ],\n]')


@pytest.mark.parametrize("points, message", [
    # a bow-tie passed the reader; the inversion then blamed a receiver on the transmitter
    ("[[-50.0, -50.0], [50.0, 50.0], [50.0, -50.0], [-50.0, 50.0]]",
     "transmitter.points: loop crosses itself between segments 0 and 2"),
    # clockwise vertices were taken as given: +I ran the other way and the inversion misfit
    ("[[-50.0, 50.0], [50.0, 50.0], [50.0, -50.0], [-50.0, -50.0]]",
     "transmitter.points: vertices run clockwise; list them anticlockwise (seen from above)"),
    ("[[-50.0, -50.0], [50.0, -50.0], [50.0, 50.0], [-50.0, 50.0], [-50.0, -50.0]]",
     "transmitter.points: the last vertex repeats the first; a loop closes by itself"),
    ("[[-50.0, -50.0], [50.0, -50.0], [50.0, 50.0], [50.0, -50.0], [-50.0, 50.0]]",
     "transmitter.points: the loop doubles back on itself at vertex 2"),
    ("[[-50.0, -50.0], [50.0, -50.0], [50.0, 50.0], [-50.0, 50.0]]", None),
])
def test_loop_that_crosses_itself_or_runs_clockwise(tmp_path, survey_text, points, message):
    from tem.survey import read_survey

    assert WIRE in survey_text
    p = tmp_path / "survey.toml"
    p.write_text(survey_text.replace(WIRE, f'kind = "loop"\npoints = {points}'))
    if message is None:
        assert read_survey(p).transmitter.kind == "loop"
        return
    with pytest.raises(TemInputError) as exc:
        read_survey(p)
    _one_line(exc, p, message)
    assert str(exc.value).startswith(f"{p}: transmitter.points: "), exc.value


def test_geographic_station_without_latitude(tmp_path, survey_text):
    # its longitude was left in degrees, at y = 0, beside projected metres: 7000 km from the
    # wire, and stack, gate and the evening QC went on
    pytest.importorskip("pyproj")
    import tomllib

    from tem.survey import read_survey

    doc = tomllib.loads(survey_text)
    doc["survey"].update(epsg=4326, projected_epsg=32735)
    doc["transmitter"]["points"] = [[27.00, -26.0], [27.01, -26.0]]
    for st in doc["station"]:
        st["x"], st["y"] = 26.95, -26.0
        for rx in st["receiver"]:
            if "dipole" in rx:
                rx["dipole"] = [[26.949, -26.0], [26.951, -26.0]]
    p = tmp_path / "survey.toml"
    p.write_text(tomli_w.dumps(doc))
    read_survey(p)                                   # as built: read
    del doc["station"][0]["y"]
    p.write_text(tomli_w.dumps(doc))
    with pytest.raises(TemInputError) as exc:
        read_survey(p)
    _one_line(exc, p, "station[0].y: missing: a geographic survey gives every station's")


def test_survey_non_utf8_and_nul_bytes(tmp_path, survey_text):
    from tem.survey import read_survey

    p = tmp_path / "survey.toml"
    for data, field in ((survey_text.encode().replace(b"Emberline", b"\xffmberline"),
                         "toml: not a text file (UTF-8 expected; byte"),
                        (survey_text.encode().replace(b"EM01", b"EM\x0001", 1), "toml: NUL")):
        p.write_bytes(data)
        with pytest.raises(TemInputError) as exc:
            read_survey(p)
        _one_line(exc, p, field)


def test_processing_table_of_the_wrong_type(tmp_path, survey_text):
    from tem.pipeline.settings import read_processing, resolve_settings

    p = tmp_path / "survey.toml"
    for extra, field in (("processing = 5\n", "processing: expected a table"),
                         ("[processing]\ngate = [1]\n", "processing.gate: expected a table"),
                         (f"[processing.gate]\nper_decade = {BIG}\n", "processing.gate.per_decade"),
                         ('[processing.invert]\nlayers = "many"\n', "processing.invert.layers")):
        p.write_text(extra + survey_text if extra.startswith("processing") else
                     survey_text + extra)
        with pytest.raises(TemInputError) as exc:
            resolve_settings(read_processing(p), (), p)
        _one_line(exc, p, field)


@pytest.mark.parametrize("cmd", ["run", "stack", "forward", "evening"])
def test_bad_survey_exits_2_at_every_command(tmp_path, survey_text, capsys, cmd):
    p = tmp_path / "survey.toml"
    p.write_text(survey_text.replace("x = -5500.0", f"x = {BIG}", 1))
    model = tmp_path / "m.csv"
    model.write_text("thickness_m,resistivity_ohmm\n100,10\n,100\n")
    args = {"forward": ["forward", str(model), str(p)]}.get(cmd, [cmd, str(p)])
    capsys.readouterr()
    assert main(args + ["--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and f"{p}: station[EM01]: station.x: out of range" in err, err
    assert not (tmp_path / "o").exists()


LOOKALIKE_IDS = [
    # 260 bytes of UTF-8 in 130 characters: the stack stopped the whole batch (File name too long)
    ('id = "EM01"', 'id = "' + "\u00e9" * 130 + '"', "station.id: '\u00e9\u00e9",
     "260 bytes in UTF-8; at most 200"),
    # a precomposed and a decomposed E acute look the same and share a file name on macOS
    ('[[station]]\nid = "EM01"', '[[station]]\nid = "\u00c9M01"\nx = 1.0\ny = 0.0\n\n[[station]]\nid = '
     '"E\u0301M01"', "station.id: '\\xc9M01' and 'E\\u0301M01' look alike", "rename one"),
    ('[[station]]\nid = "EM01"', '[[station]]\nid = "\uff25M01"\nx = 1.0\ny = 0.0\n\n[[station]]\nid = '
     '"em01"', "station.id: '\\uff25M01' and 'em01' look alike", "rename one"),
]


@pytest.mark.parametrize("old, new, field, why", LOOKALIKE_IDS)
def test_station_ids_too_long_or_alike(tmp_path, survey_text, capsys, old, new, field, why):
    p = tmp_path / "survey.toml"
    p.write_text(survey_text.replace(old, new, 1), encoding="utf-8")
    capsys.readouterr()
    assert main(["stack", str(p), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith(f"tem stack: error: {p}: ") and field in err \
        and why in err, err
    assert not (tmp_path / "o").exists()


# ---------------------------------------------------------------- sidecar and .npy header
def _npy(tmp_path, header_text=None, data=None, version=b"\x01\x00", sidecar=HDR):
    p = tmp_path / "ex.npy"
    data = np.arange(100, dtype=np.int32).tobytes() if data is None else data
    head = (header_text or "{'descr': '<i4', 'fortran_order': False, 'shape': (100,), }")
    head = head.encode("latin1")
    head += b" " * ((64 - (10 + len(head) + 1) % 64) % 64) + b"\n"
    p.write_bytes(b"\x93NUMPY" + version + len(head).to_bytes(2, "little") + head + data)
    side = p.with_suffix(".toml")
    side.write_bytes(sidecar if isinstance(sidecar, bytes) else tomli_w.dumps(sidecar).encode())
    return p


NPY_CASES = [
    ("{'descr': '|O', 'fortran_order': False, 'shape': (100,), }", "dtype: object arrays"),
    ("{'descr': [('a', '<i4')], 'fortran_order': False, 'shape': (100,), }", "dtype:"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': (10**12,), }", "npy header: unreadable"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': (1000000000000,), }", "data: truncated"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': (-1,), }", "shape: not a shape"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': (10, 10), }", "shape: expected one"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': (0,), }", "data: no samples"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': ('a',), }", "npy header: unreadable"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': (9" + "9" * 400 + ",), }",
     "data: truncated"),
    ("__import__('os').system('echo pwned')", "npy header: unreadable"),
    ("[1, 2, 3]", "npy header: unreadable"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': (100,), 'x': 1}",
     "npy header: unreadable"),
    ("{'descr': '<i4', 'fortran_order': False, 'shape': (1\x00,), }", "npy header: unreadable"),
]


@pytest.mark.parametrize("header, field", NPY_CASES)
def test_npy_header_refused(tmp_path, header, field):
    from tem.io.raw import open_recording

    p = _npy(tmp_path, header)
    with pytest.raises(TemInputError) as exc:
        open_recording(p)
    _one_line(exc, p, field)


def test_npy_version_and_truncated_header(tmp_path):
    from tem.io.raw import open_recording

    for p, field in ((_npy(tmp_path, version=b"\x09\x09"), "npy header"),
                     (_npy(tmp_path), "npy header")):
        if field and p.read_bytes()[6:8] == b"\x01\x00":
            p.write_bytes(p.read_bytes()[:40])
        with pytest.raises(TemInputError) as exc:
            open_recording(p)
        _one_line(exc, p, field)


SIDECAR_CASES = [
    (b'sample_rate = "1000"\nvolts_per_count = 1e-6\nstart_time = "2025-06-02T08:00:00Z"\n',
     "sample_rate: expected a number, got text"),
    (b"sample_rate = [1]\nvolts_per_count = 1e-6\nstart_time = 2025-06-02T08:00:00Z\n",
     "sample_rate: expected a number, got a list"),
    (f"sample_rate = {BIG}\nvolts_per_count = 1e-6\nstart_time = 2025-06-02T08:00:00Z\n"
     .encode(), "sample_rate: out of range"),
    (f"sample_rate = {HUGE}\nvolts_per_count = 1e-6\n".encode(), "toml: unreadable value"),
    (b"sample_rate = 1e12\nvolts_per_count = 1e-6\nstart_time = 2025-06-02T08:00:00Z\n",
     "sample_rate: out of range"),
    (b"sample_rate = 1000\nvolts_per_count = 1e-6\nstart_time = 2025-06-02T08:00:00Z\n"
     b'station = "EM\\u000001"\n', "station: holds a control or NUL"),
    (b"sample_rate = 1000\nvolts_per_count = 1e-6\nstart_time = 2025-06-02T08:00:00Z\n"
     b'component = "\xff"\n', "toml: not a text file"),
    (b"sample_rate = 1000\nvolts_per_count = 1e-6\nstart_time = 1e300\n",
     "start_time: expected an ISO-8601 time"),
    (b"volts_per_count = 1e-6\nstart_time = 2025-06-02T08:00:00Z\n[sample_rate]\nx = 1\n",
     "sample_rate: expected a number, got a table"),
]


@pytest.mark.parametrize("sidecar, field", SIDECAR_CASES)
def test_sidecar_refused(tmp_path, sidecar, field):
    from tem.io.raw import open_recording

    p = _npy(tmp_path, sidecar=sidecar)
    with pytest.raises(TemInputError) as exc:
        open_recording(p)
    _one_line(exc, p.with_suffix(".toml"), field)


def test_bad_recording_fails_its_station_in_one_line(tmp_path, capsys):
    """A per-station input: that station fails with one line naming the file, the rest go on."""
    from tem.survey import write_survey
    from tem.synth import emberline_survey, synth_survey

    day = tmp_path / "day"
    sv, models = emberline_survey(base_dir=day, sample_rate=1000.0,
                                  stations=["EM05", "EM06"], current_channel=False)
    synth_survey(sv, models, day, seed=1, duration=24.0)
    survey = write_survey(sv, day / "survey.toml")
    bad = day / sv.stations[1].receivers[0].files[0]
    bad.write_bytes(bad.read_bytes()[:8] + b"\xff" * 20 + bad.read_bytes()[28:])
    capsys.readouterr()
    rc = main(["stack", str(survey), "--out", str(tmp_path / "o"), "--no-figures",
               "--no-progress", "--jobs", "1"])
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert rc == 2 and (tmp_path / "o" / "stacked" / "EM05.nc").is_file(), err  # bad input: 2
    line = [ln for ln in err if "EM06" in ln]
    assert len(line) == 1 and f"{bad}: npy header: unreadable" in line[0], err


# ---------------------------------------------------------------- text recording
TEXT_CASES = [
    ("0\n1\n", b"\xff\xfe0\n", "text: not a text file"),
    ("# sample_rate = 1000", "# sample_rate = " + BIG, "sample_rate: out of range"),
    ("# sample_rate = 1000", "# sample_rate = 1e12", "sample_rate: out of range"),
    ("# sample_rate = 1000", "# sample_rate = fast", "sample_rate: not a number"),
    ("0\n1\n", "0\nnan\n", "line 6: must be finite"),
    ("0\n1\n", "0\n1e999\n", "line 6: out of range"),
    ("0\n1\n", "0\n" + HUGE + "\n", "line 6: out of range"),
    ("0\n1\n", "0\n1\x002\n", "text: NUL character"),
    ("# station = EM01", "# station = EM\x1b01", "station: holds a control"),
    # a key given twice (the last one was used) or after the data begin (it was ignored)
    ("# station = EM01", "# station = EM01\n# volts_per_count = 2e-6",
     "volts_per_count: given twice in the header (1e-06 on line 2, 2e-06 on line 5)"),
    ("0\n1\n", "0\n1\n# sample_rate = 2000\n",
     "sample_rate: header line after the data begins (line 7; the data begin on line 5)"),
]


@pytest.mark.parametrize("old, new, field", TEXT_CASES)
def test_text_recording_refused(tmp_path, old, new, field):
    from tem.io.raw import open_recording

    text = ("# sample_rate = 1000\n# volts_per_count = 1e-6\n# start_time = 2025-06-02T08:00:00Z"
            "\n# station = EM01\n0\n1\n")
    p = tmp_path / "rec.txt"
    if isinstance(new, bytes):
        p.write_bytes(text.encode().replace(old.encode(), new))
    else:
        p.write_text(text.replace(old, new))
    with pytest.raises(TemInputError) as exc:
        open_recording(p).read(0, 10)
    _one_line(exc, p, field)


# ---------------------------------------------------------------- model, polyline, velocity CSV
CSV_CASES = {
    "model": ("thickness_m,resistivity_ohmm\n20,30\n,2000\n", [
        ("20,30", "20,abc", "line 2: resistivity_ohmm: not a number"),
        ("20,30", f"20,{BIG}", "line 2: resistivity_ohmm: out of range"),
        ("20,30", "1e300,30", "line 2: thickness_m: out of range"),
        ("20,30", "20,1e-300", "line 2: resistivity_ohmm: must be >="),
        ("20,30", "20,nan", "line 2: resistivity_ohmm: must be finite"),
        ("20,30", "20,30,7", "line 2: more fields than the header"),
        ("20,30", "20", "line 2: no resistivity_ohmm field"),
        ("20,30", "2\x000,30", "model: NUL character"),
        ("20,30", "20,\"30", "model: not readable as CSV"),
        ("resistivity_ohmm", "resistivity", "resistivity_ohmm: column missing"),
    ]),
    "line": ("x,y\n0,0\n1000,50\n", [
        ("1000,50", "1e300,50", "line 3: x: out of range"),
        ("1000,50", f"{BIG},50", "line 3: x: out of range"),
        ("1000,50", "1000,inf", "line 3: y: must be finite"),
        ("1000,50", "1000", "line 3: no y field"),
        ("1000,50", "10\x0000,50", "line: NUL character"),
        ("0,0\n1000,50\n", "0,0\n", "line: a polyline needs at least two vertices"),
        ("x,y", "x,z", "y: column missing"),
    ]),
    "velocity": ("depth_m,vp_m_per_s\n0,1800\n50,2200\n", [
        ("50,2200", "1e300,2200", "line 3: depth_m: out of range"),
        ("50,2200", f"50,{BIG}", "line 3: vp_m_per_s: out of range"),
        ("50,2200", "50,-5", "line 3: vp_m_per_s: must be >="),
        ("50,2200", "50,fast", "line 3: vp_m_per_s: not a number"),
        ("0,1800\n50,2200", "0,1.8\n50,2.2", "line 2: vp_m_per_s: must be >= 100"),   # km/s
        ("50,2200", "0,2200", "depth_m: depths must increase"),
        ("1800", "18\x0000", "velocity table: NUL character"),
    ]),
}


def _csv_reader(kind):
    from tem.export.segy import read_velocity_table
    from tem.forward.files import read_model_csv
    from tem.section.profile import read_line_csv

    return {"model": read_model_csv, "line": read_line_csv, "velocity": read_velocity_table}[kind]


@pytest.mark.parametrize("kind, i", [(k, i) for k, (_, cases) in CSV_CASES.items()
                                     for i in range(len(cases))])
def test_csv_refused(tmp_path, kind, i):
    base, cases = CSV_CASES[kind]
    old, new, field = cases[i]
    assert old in base
    p = tmp_path / f"{kind}.csv"
    p.write_text(base.replace(old, new, 1))
    with pytest.raises(TemInputError) as exc:
        _csv_reader(kind)(p)
    _one_line(exc, p, field)


@pytest.mark.parametrize("kind", sorted(CSV_CASES))
def test_csv_non_utf8(tmp_path, kind):
    p = tmp_path / f"{kind}.csv"
    p.write_bytes(CSV_CASES[kind][0].encode() + b"\xc3(\n")
    with pytest.raises(TemInputError) as exc:
        _csv_reader(kind)(p)
    _one_line(exc, p, "not a text file (UTF-8 expected")


def test_bad_model_and_line_exit_2(tmp_path, survey_text, capsys):
    from profile_fixture import synthetic_models
    from tem.io.models import write_models

    survey = tmp_path / "s" / "survey.toml"
    survey.parent.mkdir()
    survey.write_text(survey_text)
    model = tmp_path / "m.csv"
    model.write_text(f"thickness_m,resistivity_ohmm\n20,{BIG}\n,100\n")
    line = tmp_path / "line.csv"
    line.write_bytes(b"x,y\n0,0\n\xff,1\n")
    models = write_models(synthetic_models(), tmp_path / "in" / "models.nc")
    for args, msg in ((["forward", model, survey], f"{model}: line 2: resistivity_ohmm"),
                      (["synth", survey, "--models", model], f"{model}: line 2: resistivity"),
                      (["section", models, "--line", line], f"{line}: line: not a text file")):
        capsys.readouterr()
        out = tmp_path / f"o_{args[0]}"
        assert main([str(a) for a in args] + ["--out", str(out)]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and msg in err, err
        assert not out.exists()
