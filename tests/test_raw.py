"""Raw recordings: npy + sidecar and text formats, chunked reads, clear errors."""
import numpy as np
import pytest

from tem.errors import TemInputError
from tem.io.raw import (FORMATS, RawHeader, open_receiver, open_recording, write_npy_recording,
                        write_text_recording)
from tem.survey import Channel, replace
from tem.synth import emberline_survey

HDR = RawHeader(sample_rate=1000.0, volts_per_count=1e-6, start_time="2025-06-02T08:00:00Z",
                full_scale=2**23)


@pytest.mark.parametrize("dtype", [np.int32, np.float32])
def test_npy_round_trip_and_chunks(tmp_path, dtype):
    c = (np.arange(10000) % 977 - 400).astype(dtype)
    write_npy_recording(tmp_path / "ex.npy", c, HDR)
    rec = open_recording(tmp_path / "ex.npy")
    assert rec.n_samples == c.size and rec.header == HDR
    np.testing.assert_array_equal(rec.counts(1234, 5678), c[1234:5678])
    np.testing.assert_allclose(rec.read(0, 10), c[:10] * 1e-6)


def test_text_reader_and_registry(tmp_path):
    cols = np.vstack([np.arange(50.0), -np.arange(50.0)])
    write_text_recording(tmp_path / "r.txt", cols, HDR)
    rec = open_recording(tmp_path / "r.txt", column=1)
    np.testing.assert_allclose(rec.read(0, 50), -np.arange(50.0) * 1e-6)
    assert set(FORMATS) == {"npy", "mseed", "text"}
    with pytest.raises(TemInputError, match="format: unknown 'seg2'; valid: npy, mseed, text"):
        open_recording(tmp_path / "r.txt", format="seg2")


def test_truncated_npy_names_file(tmp_path):
    write_npy_recording(tmp_path / "ex.npy", np.zeros(1000, np.int32), HDR)
    p = tmp_path / "ex.npy"
    p.write_bytes(p.read_bytes()[:-400])
    with pytest.raises(TemInputError) as exc:
        open_recording(p)
    assert str(p) in str(exc.value) and "data: truncated" in str(exc.value)


def test_sample_rate_disagreement(tmp_path):
    write_npy_recording(tmp_path / "ex.npy", np.zeros(1000, np.int32), HDR)
    sv, _ = emberline_survey(base_dir=tmp_path, stations=["EM01"])
    rx = Channel("ex", files=("ex.npy",), sample_rate=4000.0, dipole=((0, 0), (100, 0)))
    with pytest.raises(TemInputError) as exc:
        open_receiver(rx, sv)
    assert "ex.toml" in str(exc.value) and "sample_rate" in str(exc.value)


def test_contiguous_parts(tmp_path):
    a = np.arange(1000, dtype=np.int32)
    write_npy_recording(tmp_path / "a.npy", a[:600], HDR)
    write_npy_recording(tmp_path / "b.npy", a[600:],
                        replace(HDR, start_time=np.datetime64("2025-06-02T08:00:00.600", "ns")))
    sv, _ = emberline_survey(base_dir=tmp_path, stations=["EM01"])
    rx = Channel("ex", files=("a.npy", "b.npy"), sample_rate=1000.0, dipole=((0, 0), (1, 0)))
    rec = open_receiver(rx, sv)
    np.testing.assert_array_equal(rec.counts(550, 650), a[550:650])
    assert rec.file_at(700).name == "b.npy"


def test_reading_never_writes(tmp_path):
    write_npy_recording(tmp_path / "ex.npy", np.arange(100, dtype=np.int32), HDR)
    before = (tmp_path / "ex.npy").stat().st_mtime_ns
    rec = open_recording(tmp_path / "ex.npy")
    x = rec.read(0, 100)
    x[:] = 0
    assert (tmp_path / "ex.npy").stat().st_mtime_ns == before
    assert rec.counts(5, 6)[0] == 5


def test_text_header_may_hold_blank_lines(tmp_path):
    # a blank line ended the header: the keys after it were reported missing
    p = tmp_path / "r.txt"
    p.write_text("# sample_rate = 1000\n\n# volts_per_count = 1e-6\n# start_time = "
                 "2025-06-02T08:00:00Z\n\n3\n\n4\n")
    rec = open_recording(p)
    assert rec.header.volts_per_count == 1e-6 and rec.n_samples == 2
    np.testing.assert_allclose(rec.read(0, 2), [3e-6, 4e-6])
