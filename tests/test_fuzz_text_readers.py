"""Bad-input suite (issue 9), text readers: 2000 mutated inputs to each reader.

Survey TOML (with its [processing] table), recording sidecar TOML, raw .npy
header, text recording, model CSV, polyline CSV and velocity CSV. Each
mutated file is written to a temporary folder and read; only
:class:`tem.errors.TemInputError` may escape, as one line naming the file.
Named cases of each class of bad input are in tests/test_bad_input.py.
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from mutate import FUZZ, byte_mutation, one_line_naming, toml_mutation
from tem.errors import TemInputError

HDR = {"format_version": 1, "sample_rate": 1000.0, "volts_per_count": 1e-6,
       "start_time": "2025-06-02T08:00:00Z", "full_scale": 2**23, "component": "ex",
       "station": "EM01"}


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


def _expect_input_error(read, path, *names):
    try:
        read(path)
    except TemInputError as exc:
        one_line_naming(exc, path, *names)


# ---------------------------------------------------------------- survey TOML (+ [processing])
def _survey_doc():
    from tem.survey import survey_to_dict
    from tem.synth import emberline_survey

    sv, _ = emberline_survey(base_dir=".", stations=["EM01", "EM02"])
    doc = survey_to_dict(sv)
    doc["processing"] = {"gate": {"per_decade": 8.0}, "invert": {"layers": 20, "lci": False},
                         "section": {"formats": ["png"]}}
    return doc


SURVEY_DOC = _survey_doc()


def _read_survey_and_processing(path):
    from tem.pipeline.settings import read_processing, resolve_settings
    from tem.survey import read_survey

    read_survey(path)
    resolve_settings(read_processing(path), (), path)


@FUZZ
@given(data=st.one_of(toml_mutation(SURVEY_DOC),
                      byte_mutation(__import__("tomli_w").dumps(SURVEY_DOC).encode())))
def test_fuzz_survey_toml(folder, data):
    p = folder / "survey.toml"
    p.write_bytes(data)
    _expect_input_error(_read_survey_and_processing, p)


# ---------------------------------------------------------------- sidecar TOML and .npy header
@pytest.fixture(scope="module")
def npy_file(folder):
    from tem.io.raw import RawHeader, write_npy_recording

    p = folder / "rec" / "ex.npy"
    p.parent.mkdir()
    write_npy_recording(p, np.arange(-500, 500, dtype=np.int32), RawHeader.from_dict(HDR))
    return p


def _open_and_read(path):
    from tem.io.raw import open_recording

    rec = open_recording(path)
    v = rec.read(0, 64)
    assert v.dtype == np.float64 and v.size == min(64, rec.n_samples)
    rec.read(rec.n_samples - 10, rec.n_samples)


@FUZZ
@given(data=st.one_of(toml_mutation(HDR), byte_mutation(__import__("tomli_w").dumps(HDR).encode())))
def test_fuzz_sidecar_toml(npy_file, data):
    side = npy_file.with_suffix(".toml")
    side.write_bytes(data)
    _expect_input_error(_open_and_read, npy_file, side)


def _npy_bytes(descr="'<i4'", fortran="False", shape="(1000,)", n=1000, pad=True):
    body = f"{{'descr': {descr}, 'fortran_order': {fortran}, 'shape': {shape}, }}"
    head = body.encode("latin1", "replace")
    if pad:
        head += b" " * ((64 - (10 + len(head) + 1) % 64) % 64) + b"\n"
    return (b"\x93NUMPY\x01\x00" + len(head).to_bytes(2, "little") + head
            + np.arange(n, dtype=np.int32).tobytes())


NPY_FIELDS = st.builds(
    _npy_bytes,
    descr=st.sampled_from(["'<i4'", "'<f4'", "'>i4'", "'|O'", "'O'", "'<U4'", "'V8'", "'<c16'",
                           "[('a', '<i4')]", "'(2,)<i4'", "'<i8'", "'<f2'", "'S3'", "'<M8[ns]'",
                           "'bogus'", "1", "None", "'<i4' + '<i4'", "__import__('os')"]),
    fortran=st.sampled_from(["False", "True", "0", "'no'", "None"]),
    shape=st.sampled_from(["(1000,)", "(10**12,)", "(1000000000000,)", "(-1,)", "(0,)", "()",
                           "(10, 100)", "('a',)", "(1e3,)", "(2**63,)", "(9" + "9" * 400 + ",)",
                           "[1000]", "(1000, 1)", "(999,)", "(1001,)", "None"]),
    n=st.sampled_from([1000, 10, 0, 1001]), pad=st.booleans())


@FUZZ
@given(data=st.one_of(NPY_FIELDS, byte_mutation(_npy_bytes()[:200]).map(
    lambda b: b + np.arange(1000, dtype=np.int32).tobytes()), byte_mutation(_npy_bytes())))
def test_fuzz_npy_header(npy_file, data):
    p = npy_file.with_name("hdr.npy")
    if not p.with_suffix(".toml").is_file():
        p.with_suffix(".toml").write_text(__import__("tomli_w").dumps(HDR))
    p.write_bytes(data)
    _expect_input_error(_open_and_read, p, p.with_suffix(".toml"))


# ---------------------------------------------------------------- text recording
def _text_recording():
    lines = [f"# {k} = {v}" for k, v in HDR.items()]
    rows = [f"{i} {-i}, {i * 0.5:g}" for i in range(150)]
    return ("\n".join(lines + rows) + "\n").encode()


@FUZZ
@given(data=byte_mutation(_text_recording()), column=st.sampled_from([0, 1, 2, 5]))
def test_fuzz_text_recording(folder, data, column):
    from tem.io.raw import open_recording

    p = folder / "rec.txt"
    p.write_bytes(data)

    def read(path):
        rec = open_recording(path, format="text", column=column)
        assert np.all(np.isfinite(rec.read(0, rec.n_samples)))

    _expect_input_error(read, p)


# ---------------------------------------------------------------- model, polyline and velocity CSV
MODEL_CSV = (b"# Emberline test models\nstation,thickness_m,resistivity_ohmm\nEM01,20,30\n"
             b"EM01,150.5,8\nEM01,,2000\nEM02,35,60\nEM02,,500\n")
LINE_CSV = b"x,y\n-1500,0\n0,12.5\n1500,40\n3000,41\n"
VELOCITY_CSV = b"# interval velocities\ndepth_m,vp_m_per_s\n0,1800\n50,2200\n300,3000\n"


@FUZZ
@given(data=byte_mutation(MODEL_CSV))
def test_fuzz_model_csv(folder, data):
    from tem.forward.files import read_model_csv

    p = folder / "model.csv"
    p.write_bytes(data)

    def read(path):
        for m in read_model_csv(path).values():
            assert np.all(m.resistivity > 0) and np.all(np.isfinite(m.thickness))

    _expect_input_error(read, p)


@FUZZ
@given(data=byte_mutation(LINE_CSV))
def test_fuzz_line_csv(folder, data):
    from tem.section.profile import read_line_csv

    p = folder / "line.csv"
    p.write_bytes(data)

    def read(path):
        x, y = read_line_csv(path)
        assert np.all(np.abs(x) <= 1e8) and np.all(np.abs(y) <= 1e8) and x.size >= 2

    _expect_input_error(read, p)


@FUZZ
@given(data=byte_mutation(VELOCITY_CSV))
def test_fuzz_velocity_csv(folder, data):
    from tem.export.segy import read_velocity_table

    p = folder / "velocity.csv"
    p.write_bytes(data)

    def read(path):
        z, v = read_velocity_table(path)
        assert z[0] == 0 and np.all(np.diff(z) > 0) and np.all(v > 0)

    _expect_input_error(read, p)


# ---------------------------------------------------------------- tem import: decay CSV and system TOML
def _import_files():
    import tomllib

    from test_import_bad import GOOD_CSV, GOOD_TOML
    return GOOD_CSV.encode(), tomllib.loads(GOOD_TOML), GOOD_TOML.encode()


IMPORT_CSV, IMPORT_DOC, IMPORT_TOML = _import_files()


@FUZZ
@given(data=byte_mutation(IMPORT_CSV))
def test_fuzz_import_decay_csv(folder, data):
    from tem.importer.csvfile import read_decays

    p = folder / "decays.csv"
    p.write_bytes(data)
    _expect_input_error(read_decays, p)


@FUZZ
@given(data=st.one_of(toml_mutation(IMPORT_DOC), byte_mutation(IMPORT_TOML)))
def test_fuzz_import_system_toml(folder, data):
    from tem.importer.system import read_system

    p = folder / "system.toml"
    p.write_bytes(data)
    _expect_input_error(read_system, p)
