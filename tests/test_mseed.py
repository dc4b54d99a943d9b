"""MiniSEED recordings (issue 15): synth -> MiniSEED -> stack equals synth -> npy -> stack;
a gap and a wrong channel are one-line errors naming the file (and the time of the gap).

The npy chain is the reference: both formats hold the same int32 counts, so
the stacked files must agree exactly (common practice, no source).
"""
from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

pytest.importorskip("obspy")

from tem.cli import main  # noqa: E402


@pytest.fixture(scope="module")
def two_days(tmp_path_factory):
    import tomli_w

    from tem.survey import survey_to_dict
    from tem.synth import emberline_survey, synth_survey

    root = tmp_path_factory.mktemp("mseed")
    out = {}
    for fmt in ("npy", "mseed"):
        day = root / fmt
        sv, models = emberline_survey(base_dir=day, sample_rate=1000.0, stations=["EM05"],
                                      current_channel=False, raw_format=fmt)
        day.mkdir(parents=True, exist_ok=True)
        (day / "survey.toml").write_text(tomli_w.dumps(survey_to_dict(sv)))
        synth_survey(sv, models, day, seed=3, duration=24.0)
        assert main(["stack", str(day / "survey.toml"), "--out", str(root / f"out_{fmt}"),
                     "--jobs", "1", "--no-progress", "--no-figures"]) == 0
        out[fmt] = root / f"out_{fmt}"
    return root, out


def test_mseed_stack_equals_npy_stack(two_days):
    root, out = two_days
    assert (root / "mseed" / "raw" / "EM05" / "ex.mseed").is_file()
    a = xr.load_dataset(out["npy"] / "stacked" / "EM05.nc", engine="h5netcdf")
    b = xr.load_dataset(out["mseed"] / "stacked" / "EM05.nc", engine="h5netcdf")
    for k in ("value", "error", "n_used", "excerpt"):
        np.testing.assert_array_equal(b[k].values, a[k].values, err_msg=k)
    assert b.attrs["sample_rate"] == a.attrs["sample_rate"] == 1000.0


def test_mseed_reads_in_chunks_like_npy(two_days):
    from tem.io.raw import open_recording

    root, _ = two_days
    npy = open_recording(root / "npy" / "raw" / "EM05" / "dbzdt.npy")
    ms = open_recording(root / "mseed" / "raw" / "EM05" / "dbzdt.mseed", channel="HFZ")
    assert ms.n_samples == npy.n_samples == 24000
    assert ms.header.start_time == npy.header.start_time
    for a, b in ((0, 10), (4093, 9001), (23990, 24000)):
        np.testing.assert_array_equal(ms.read(a, b), npy.read(a, b))
    # chunks read only their own records (a record index of the fixed-length headers)
    from tem.io.mseed import _read_records, _record_index

    path = root / "mseed" / "raw" / "EM05" / "dbzdt.mseed"
    ix = _record_index(path, "XX.EM05..HFZ", 24000)
    assert ix is not None and ix[1] == 4096
    part = _read_records(path, ix, 5000, 5010)
    assert len(part) == 1 and part[0].stats.npts < 24000 / 4


def _write(path, pieces, fs=1000.0, cha="HFZ"):
    from obspy import Stream, Trace, UTCDateTime

    st = Stream([Trace(np.arange(n, dtype=np.int32), header={
        "network": "XX", "station": "EM05", "channel": cha, "sampling_rate": fs,
        "starttime": UTCDateTime("2025-06-02T08:00:00") + t0}) for t0, n in pieces])
    st.write(str(path), format="MSEED", reclen=512, encoding="STEIM2")
    path.with_suffix(".toml").write_text("volts_per_count = 1e-6\n")


def test_a_gap_is_one_line_naming_file_and_time(tmp_path):
    from tem.errors import TemInputError
    from tem.io.raw import open_recording

    f = tmp_path / "dbzdt.mseed"
    _write(f, [(0.0, 2000), (2.5, 1000)])
    with pytest.raises(TemInputError) as exc:
        open_recording(f)
    msg = str(exc.value)
    assert "\n" not in msg and str(f) in msg
    assert "records: XX.EM05..HFZ: gap of 0.5 s at 2025-06-02T08:00:02.000000000Z" in msg
    _write(f, [(0.0, 2000), (1.5, 1000)])
    with pytest.raises(TemInputError, match=r"overlap of 0.5 s at 2025-06-02T08:00:02"):
        open_recording(f)


def test_a_wrong_channel_is_one_line_through_the_stack_command(two_days, tmp_path, capsys):
    root, _ = two_days
    text = (root / "mseed" / "survey.toml").read_text().replace('channel = "HFZ"',
                                                                  'channel = "HHZ"')
    assert 'channel = "HHZ"' in text
    (root / "mseed" / "wrong.toml").write_text(text)
    rc = main(["stack", str(root / "mseed" / "wrong.toml"), "--out", str(tmp_path / "o"),
               "--jobs", "1", "--no-progress", "--no-figures"])
    err = capsys.readouterr().err
    assert rc == 2                       # the station fails on bad input, the stage reports it
    assert "dbzdt.mseed: channel: no channel 'HHZ' in the records; found XX.EM05..HFZ" in err
    assert "Traceback" not in err
    lines = [ln for ln in err.splitlines() if "HHZ" in ln]
    assert len(lines) == 1, err


def test_several_channels_need_a_name_and_the_calibration_is_required(tmp_path):
    from obspy import Stream, read

    from tem.errors import TemInputError
    from tem.io.raw import open_recording

    a, b = tmp_path / "a.mseed", tmp_path / "b.mseed"
    _write(a, [(0.0, 1000)], cha="HFZ")
    _write(b, [(0.0, 1000)], cha="HQX")
    both = tmp_path / "both.mseed"
    Stream(list(read(str(a))) + list(read(str(b)))).write(str(both), format="MSEED")
    both.with_suffix(".toml").write_text("volts_per_count = 1e-6\n")
    with pytest.raises(TemInputError, match=r"both.mseed: channel: the file holds "
                                            r"XX.EM05..HFZ, XX.EM05..HQX; name one"):
        open_recording(both)
    rec = open_recording(both, channel="HQX")
    np.testing.assert_array_equal(rec.counts(10, 20), np.arange(10, 20))
    a.with_suffix(".toml").write_text("sample_rate = 1000.0\nvolts_per_count = 1e-6\n")
    with pytest.raises(TemInputError, match=r"a.toml: sample_rate: unknown key"):
        open_recording(a)
    a.with_suffix(".toml").unlink()
    with pytest.raises(TemInputError, match=r"a.mseed: sidecar: missing a.toml"):
        open_recording(a)
