"""End-to-end tests of `tem section` and `tem export` on a synthetic profile, and of
the models file, CSV, LAS and SEG-Y writers.

Sources of the checks:
* LAS 2.0: Canadian Well Logging Society, "LAS Version 2.0: a digital standard for
  logging data" (1992, from memory): ~Well mnemonics STRT STOP STEP NULL WELL;
  the file is reread with lasio, an independent reader.
* SEG-Y rev 1: SEG Technical Standards Committee, "SEG Y rev 1 Data Exchange
  format" (2002, from memory): format code 5 = IEEE float (bytes 3225-3226),
  revision 0x0100 (3501-3502), coordinate scalar at trace bytes 71-72 (negative
  divides, positive multiplies), CDP X/Y at 181-188. Reread with segyio.
* Two-way time: t(z) = 2 sum h_i / v_i for vertical rays through interval
  velocities (closed form, hand computation).
* The expected models are the fixture's layers, looked up by an independent loop.
"""
from __future__ import annotations

import csv

import numpy as np
import pytest

from profile_fixture import DOI, N_LAYERS, X, Y, Z, LinkCollector, synthetic_models
from profile_fixture import layer_lookup as _lookup
from tem.cli import main
from tem.errors import TemInputError
from tem.io.models import CSV_COLUMNS, read_models, write_models
from tem.export.segy import apply_scalar, coordinate_scalar, read_velocity_table

H1, V1, V2 = 150.0, 2000.0, 3000.0  # two-layer velocity model of the TWT test


@pytest.fixture(scope="module")
def profile(tmp_path_factory):
    """Run section, export and report once on the synthetic profile (two projects)."""
    root = tmp_path_factory.mktemp("profile")
    models_path = write_models(synthetic_models(), root / "in" / "models.nc")
    vel = root / "vel.csv"
    vel.write_text(f"# two-layer test model\ndepth_m,vp_m_per_s\n0,{V1}\n{H1},{V2}\n")
    p1, p2 = root / "p1", root / "p2"
    for p in (p1, p2):
        (p / "models").mkdir(parents=True)
        (p / "models" / "models.nc").write_bytes(models_path.read_bytes())
    assert main(["section", str(p1 / "models"), "--out", str(p1), "--depth-step", "2.5",
                 "--max-depth", "450", "--below-doi", "hide", "--no-progress"]) == 0
    assert main(["export", str(p1), "--out", str(p1), "--velocity", str(vel), "--las-step", "2",
                 "--dt-ms", "4", "--no-progress"]) == 0
    assert main(["report", str(p1), "--out", str(p1)]) == 0
    assert main(["section", str(p2 / "models" / "models.nc"), "--out", str(p2), "--trace-spacing",
                 "100", "--depth-step", "10", "--no-figures", "--no-progress"]) == 0
    assert main(["export", str(p2), "--out", str(p2), "--what", "segy-depth", "--segy-below-doi",
                 "keep", "--segy-value", "log10", "--no-progress"]) == 0
    return root, read_models(models_path)


def test_las_reread_equals_models(profile):
    import lasio

    root, m = profile
    files = sorted((root / "p1" / "exports" / "las").glob("*.las"))
    assert [f.stem for f in files] == list(m.station.values)
    for i, f in enumerate(files):
        las = lasio.read(f)
        assert las.version["VERS"].value == 2.0 and las.version["WRAP"].value == "NO"
        assert las.well["WELL"].value == m.station.values[i]
        assert las.well["NULL"].value == -999.25
        assert las.params["XCOORD"].value == pytest.approx(X[i])
        assert las.params["YCOORD"].value == pytest.approx(Y[i])
        assert las.params["EGL"].value == pytest.approx(Z[i])
        assert las.params["CRS"].value == "EPSG:32735"
        depth = las["DEPT"]
        np.testing.assert_allclose(np.diff(depth), 2.0)
        assert las.well["STEP"].value == 2.0 and depth[0] == 0.0
        assert depth[-1] == pytest.approx(np.floor(1.25 * DOI[i] / 2) * 2)
        top, res, std = m.depth_top.values[i], m.resistivity.values[i], m.log10_res_std.values[i]
        want_r = [_lookup(top, res, z) for z in depth]
        want_s = [_lookup(top, std, z) for z in depth]
        # %.6g text: 6 significant digits.
        np.testing.assert_allclose(las["RES"], want_r, rtol=5e-6)
        np.testing.assert_allclose(las["RSTD"], want_s, rtol=5e-6)
        np.testing.assert_array_equal(las["BDOI"], (depth > DOI[i]).astype(float))


def test_segy_depth_traces_coordinates_samples(profile):
    import segyio

    root, m = profile
    with segyio.open(root / "p1" / "exports" / "section_depth.sgy", ignore_geometry=True) as f:
        assert f.tracecount == 5  # one trace per station by default
        assert f.format == 5 or str(f.format).startswith("4-byte IEEE")
        raw = f.bin
        assert raw[segyio.BinField.Format] == 5
        assert raw[segyio.BinField.SEGYRevision] == 1 and raw[segyio.BinField.SEGYRevisionMinor] == 0
        assert raw[segyio.BinField.Interval] == 2500  # 2.5 m stored in mm
        np.testing.assert_allclose(f.samples, np.arange(181) * 2.5)  # read as ms: 1 ms = 1 m
        text = f.text[0].decode("ascii", "replace")
        assert "DEPTH BELOW GROUND IN M" in text and "INTERVAL 2.5 M" in text
        T = segyio.TraceField
        for i in range(5):
            h = f.header[i]
            sc = h[T.SourceGroupScalar]
            assert sc == -100
            assert apply_scalar(h[T.CDP_X], sc) == pytest.approx(X[i], abs=0.005)
            assert apply_scalar(h[T.CDP_Y], sc) == pytest.approx(Y[i], abs=0.005)
            assert apply_scalar(h[T.SourceX], sc) == pytest.approx(X[i], abs=0.005)
            assert apply_scalar(h[T.ReceiverGroupElevation], h[T.ElevationScalar]) == pytest.approx(Z[i])
            assert h[T.CDP] == i + 1 and h[T.CROSSLINE_3D] == i + 1 and h[T.INLINE_3D] == 1
            assert h[T.UnassignedInt1] == round(DOI[i] * 100)
            depth = f.samples  # m
            want = np.array([_lookup(m.depth_top.values[i], m.resistivity.values[i], z) for z in depth])
            want[depth > DOI[i]] = 0.0
            np.testing.assert_allclose(f.trace[i], want, rtol=1e-6)


def test_segy_twt_against_two_layer_closed_form(profile):
    import segyio

    root, m = profile
    with segyio.open(root / "p1" / "exports" / "section_twt.sgy", ignore_geometry=True) as f:
        dt = 4e-3
        assert f.bin[segyio.BinField.Interval] == 4000
        # one data trace and no auxiliary trace per ensemble (SEG-Y rev 1, 2002, binary
        # header bytes 3213-3216; the trace count once stood in 3215)
        assert f.bin[segyio.BinField.Traces] == 1 and f.bin[segyio.BinField.AuxTraces] == 0
        t = np.arange(len(f.samples)) * dt
        # Last time: TWT of the 450 m section bottom, 2 (150/2000 + 300/3000) = 0.35 s.
        assert t[-1] == pytest.approx(np.floor(0.35 / dt + 1e-9) * dt)
        # Depth of each time by hand inversion of the closed form.
        t1 = 2 * H1 / V1
        z = np.where(t <= t1, V1 * t / 2, H1 + V2 * (t - t1) / 2)
        for i in range(5):
            want = np.array([_lookup(m.depth_top.values[i], m.resistivity.values[i], zz) for zz in z])
            want[z > DOI[i]] = 0.0
            np.testing.assert_allclose(f.trace[i], want, rtol=1e-6)
            doi_twt = 2 * (H1 / V1 + (DOI[i] - H1) / V2)
            # DOI on the file's sample axis: two-way time in us, bytes 233-236
            assert f.header[i][segyio.TraceField.UnassignedInt1] == round(doi_twt * 1e6)
            # no verdicts in this models file: code -1 and chi2 -1 (two int16 in 237-240)
            assert f.header[i][segyio.TraceField.UnassignedInt2] == -1


def test_segy_resampled_along_profile(profile):
    import segyio

    root, m = profile
    with segyio.open(root / "p2" / "exports" / "section_depth.sgy", ignore_geometry=True) as f:
        assert f.tracecount == 11  # 0..1000 m every 100 m
        h = f.header[6]  # 600 m: on the second leg, 100 m past the bend at (512500, 7421000)
        sc = h[segyio.TraceField.SourceGroupScalar]
        assert apply_scalar(h[segyio.TraceField.CDP_X], sc) == pytest.approx(512500 + 100 / np.sqrt(2), abs=0.01)
        assert apply_scalar(h[segyio.TraceField.CDP_Y], sc) == pytest.approx(7421000 + 100 / np.sqrt(2), abs=0.01)
        tr = f.trace[0]  # station EP-01, log10 values kept below the DOI
        depth = f.samples
        want = [np.log10(_lookup(m.depth_top.values[0], m.resistivity.values[0], z)) for z in depth]
        np.testing.assert_allclose(tr, want, rtol=1e-6)


def test_csv_layer_table(profile):
    root, m = profile
    with open(root / "p1" / "exports" / "models.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert tuple(rows[0].keys()) == CSV_COLUMNS
    assert len(rows) == 5 * N_LAYERS
    for r in rows:
        i = list(m.station.values).index(r["station"])
        k = int(r["layer"]) - 1
        assert float(r["resistivity_ohmm"]) == m.resistivity.values[i, k]
        assert float(r["depth_top_m"]) == m.depth_top.values[i, k]
        assert int(r["below_doi"]) == int(m.depth_top.values[i, k] >= DOI[i])
        if k == N_LAYERS - 1:
            assert r["thickness_m"] == "" and r["depth_bottom_m"] == ""
        else:
            assert float(r["depth_bottom_m"]) == pytest.approx(m.depth_top.values[i, k + 1])


def test_section_outputs_figures_and_report(profile):
    import xarray as xr

    root, m = profile
    p1 = root / "p1"
    for name in ("section.png", "section.pdf", "models.png", "models.pdf"):
        assert (p1 / "figures" / name).stat().st_size > 1000
    assert not (root / "p2" / "figures").exists()     # --no-figures
    with xr.open_dataset(p1 / "sections" / "section.nc", engine="h5netcdf") as g:
        assert g.attrs["tem_format"] == "section"
        below = g["below_doi"].values.astype(bool)
        assert below.any() and np.isnan(g["log10_resistivity"].values[below]).all()
        assert np.isfinite(g["log10_resistivity"].values[~below & np.isfinite(g["log10_resistivity_full"].values)]).all()
        assert g.sizes["distance"] == 5  # one column per station by default
    with xr.open_dataset(root / "p2" / "sections" / "section.nc", engine="h5netcdf") as g:
        assert g.sizes["distance"] == 11  # 0..1000 m every 100 m
    parser = LinkCollector()
    parser.feed((p1 / "report.html").read_text(encoding="utf-8"))
    assert "figures/section.png" in parser.links and "figures/models.png" in parser.links
    for link in parser.links:
        assert (p1 / link).is_file(), link


def test_coordinate_scalar_choice():
    # UTM-size coordinates fit centimetres in int32; 3e7 m does not (2^31 - 1 = 2147483647).
    assert coordinate_scalar(np.array([7.4e6])) == -100
    assert coordinate_scalar(np.array([3.0e7])) == -10
    assert coordinate_scalar(np.array([3.0e8])) == 1
    assert apply_scalar(123456, -100) == 1234.56 and apply_scalar(12, 10) == 120


# ------------------------------------------------------------------ bad input
def test_models_file_errors_name_file_and_field(tmp_path):
    m = synthetic_models()
    path = write_models(m, tmp_path / "ok.nc")
    assert read_models(path).sizes["station"] == 5
    bad = m.drop_vars("doi")
    bad.to_netcdf(tmp_path / "nodoi.nc", engine="h5netcdf")
    with pytest.raises(TemInputError, match=r"nodoi\.nc: doi: required variable missing"):
        read_models(tmp_path / "nodoi.nc")
    v2 = m.copy()
    v2.attrs["format_version"] = "2.0"
    v2.to_netcdf(tmp_path / "v2.nc", engine="h5netcdf")
    with pytest.raises(TemInputError, match=r"v2\.nc: format_version: version '2\.0' not supported"):
        read_models(tmp_path / "v2.nc")
    other = m.copy()
    other.attrs["tem_format"] = "gated"
    other.to_netcdf(tmp_path / "gated.nc", engine="h5netcdf")
    with pytest.raises(TemInputError, match=r"gated\.nc: tem_format"):
        read_models(tmp_path / "gated.nc")


def _project(tmp_path, models=None, section=True, **section_opts):
    """A project folder with models/models.nc (and a section grid made by tem section)."""
    p = tmp_path / "proj"
    write_models(models if models is not None else synthetic_models(), p / "models" / "models.nc")
    if section:
        opts = [x for k, v in section_opts.items() for x in (f"--{k.replace('_', '-')}", v)]
        assert main(["section", str(p / "models"), "--out", str(p), "--no-figures",
                     "--no-progress"] + opts) == 0
    return p


def test_cli_bad_input_exits_2(tmp_path, capsys):
    p = _project(tmp_path)
    vel = tmp_path / "vel.csv"
    vel.write_text("depth_m,vp_m_per_s\n0,2000\n300,2500\n200,3000\n")
    capsys.readouterr()
    assert main(["export", str(p), "--out", str(tmp_path / "o"), "--velocity", str(vel)]) == 2
    err = capsys.readouterr().err
    assert "vel.csv: depth_m" in err and err.count("\n") == 1
    vel.write_text("depth_m,vp_m_per_s\n0,2000\n300,-5\n")
    with pytest.raises(TemInputError, match=r"vel\.csv: line 3: vp_m_per_s"):
        read_velocity_table(vel)
    vel.write_text("depth,vp\n0,2000\n")
    with pytest.raises(TemInputError, match=r"vel\.csv: depth_m: column missing"):
        read_velocity_table(vel)
    bad = synthetic_models().drop_vars("chi2")
    bad.to_netcdf(tmp_path / "models_bad.nc", engine="h5netcdf")
    assert main(["section", str(tmp_path / "models_bad.nc"), "--out", str(tmp_path / "s")]) == 2
    assert "models_bad.nc: chi2" in capsys.readouterr().err
    assert main(["export", str(p), "--out", str(tmp_path / "o"), "--what", "segy-twt"]) == 2
    assert "--velocity" in capsys.readouterr().err
    q = _project(tmp_path / "q", depth_step="0.0005", max_depth="10")
    capsys.readouterr()
    assert main(["export", str(q), "--out", str(tmp_path / "o"), "--what", "segy-depth"]) == 2
    assert "section.nc: depth_step" in capsys.readouterr().err
    assert main(["export", str(tmp_path / "nowhere"), "--out", str(tmp_path / "o")]) == 2
    assert "models.nc: file: missing (run the invert stage first)" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()  # options are checked before anything is written


def test_cli_bad_options_and_line_exit_2_before_writing(tmp_path, capsys):
    # each of these used to write outputs (or a traceback) instead of one error line
    path = write_models(synthetic_models(), tmp_path / "in" / "models.nc")
    line = tmp_path / "line.csv"
    line.write_text(f"x,y\n{X[0]},{Y[0]}\nnan,{Y[-1]}\n")
    vel = tmp_path / "vel.csv"
    vel.write_text(f"depth_m,vp_m_per_s\n0,{V1}\n{H1},{V2}\n")
    p = _project(tmp_path)
    capsys.readouterr()
    cases = [
        (["section", path, "--vmin", "-1"], "--vmin: must be positive"),        # was a traceback
        (["section", path, "--vmin", "100", "--vmax", "10"], "--vmax: must exceed"),  # accepted
        (["section", path, "--line", str(line)], "line.csv: line 3: x: must be finite"),  # traceback
        (["section", path, "--formats", "pdf"], "--formats: the report links PNG"),
        (["export", p, "--las-bottom", "-3"], "--las-bottom: must be positive"),  # empty LAS logs
        (["export", p, "--dt-ms", "0.0001", "--velocity", str(line)], "--dt-ms: must be a whole"),
        (["export", p, "--what", "csv,bogus"], "--what: unknown 'bogus'"),
        # wrote the CSV, the LAS files and the depth SEG-Y, then refused the TWT one
        (["export", p, "--velocity", str(vel), "--dt-ms", "1", "--max-twt-ms", "100000"],
         "100001 samples, above the SEG-Y rev 1 limit 65535"),
    ]
    for (cmd, src, *opts), msg in cases:
        out = tmp_path / f"o_{cmd}"
        assert main([cmd, str(src), "--out", str(out)] + opts) == 2
        err = capsys.readouterr().err
        assert msg in err and err.count("\n") == 1, (opts, err)
        assert not out.exists(), opts


def test_export_stopped_at_one_file_leaves_no_stale_manifest(tmp_path, capsys):
    """One LAS path blocked (a folder in its place): the old manifest is withdrawn first, the
    other products are written, the failed file is named on one line with exit status 1, and
    the new export.json lists exactly what was written and what failed."""
    import json
    import os

    p = _project(tmp_path)
    assert main(["export", str(p), "--out", str(p), "--no-progress"]) == 0
    ex = p / "exports"
    old = json.loads((ex / "export.json").read_text())
    las = sorted((ex / "las").glob("*.las"))
    blocked, other = las[1], las[0]
    blocked.unlink()
    blocked.mkdir()
    os.utime(other, (0, 0))
    capsys.readouterr()
    assert main(["export", str(p), "--out", str(p), "--no-progress", "--what", "csv,las"]) == 1
    out, err = capsys.readouterr()
    assert "Traceback" not in err
    lines = [ln for ln in err.splitlines() if "could not write" in ln]
    assert lines == [f"tem export: could not write 1 file(s), the others are written and listed "
                     f"in export.json: {blocked}: cannot write: Is a directory"]
    new = json.loads((ex / "export.json").read_text())
    rel = f"las/{blocked.name}"
    assert rel in old["files"] and rel not in new["files"]
    assert new["failed"] == {rel: f"{blocked}: cannot write: Is a directory"}
    assert sorted(new["files"]) == sorted(f.relative_to(ex).as_posix()
                                          for f in [ex / "models.csv", *las] if f != blocked)
    assert other.stat().st_mtime > 0               # rewritten, not left from before


def test_export_withdraws_manifest_before_writing(tmp_path, monkeypatch, capsys):
    """A write that stops the export (here the manifest itself cannot be written) leaves no
    export.json describing the earlier products."""
    from tem.errors import TemOutputError

    p = _project(tmp_path)
    assert main(["export", str(p), "--out", str(p), "--no-progress", "--what", "csv"]) == 0
    assert (p / "exports" / "export.json").is_file()

    def full(path, text):
        raise TemOutputError(28, f"{path}: cannot write: No space left on device")
    monkeypatch.setattr("tem.io.atomic.write_text_atomic", full)
    capsys.readouterr()
    assert main(["export", str(p), "--out", str(p), "--no-progress", "--what", "csv"]) == 1
    assert capsys.readouterr().err.strip().splitlines()[-1] == \
        f"tem export: error: {p / 'exports' / 'export.json'}: cannot write: No space left on device"
    assert not (p / "exports" / "export.json").exists()


def test_shorten_cuts_at_a_word_with_dots():
    from tem.errors import shorten

    why = "failed gate: proj/gated/L1.nc: usable: no gate above the noise (POOR dbzdt, POOR ex)"
    assert shorten(why, 80) == "failed gate: proj/gated/L1.nc: usable: no gate above the noise " \
                               "(POOR dbzdt..."
    assert shorten(why, len(why)) == why
    assert shorten("x" * 100, 20) == "x" * 17 + "..."
    for n in range(10, 90):
        cut = shorten(why, n)
        assert len(cut) <= n and (cut == why or (cut.endswith("...") and
                                                 why.startswith(cut[:-3])))


def test_export_note_shortens_reasons_at_a_word(tmp_path, capsys):
    """The closing note names the stations without a model with their reasons cut at a word
    and marked '...'; the models file keeps them whole."""
    import json

    why = "failed gate: proj/gated/L1.nc: usable: no gate above the noise (POOR dbzdt, POOR ex)"
    ds = synthetic_models()
    ds.attrs["stations_without_model"] = json.dumps({"L1": why})
    p = _project(tmp_path, models=ds)
    capsys.readouterr()
    assert main(["export", str(p), "--out", str(p), "--no-progress", "--what", "csv"]) == 0
    note = [ln for ln in capsys.readouterr().err.splitlines() if "no model of" in ln]
    assert note == ["tem export: no model of 1 station(s), so no LAS file and no trace of their "
                    "own: L1 (failed gate: proj/gated/L1.nc: usable: no gate above the noise "
                    "(POOR dbzdt...) (in full: the models file's stations_without_model)"]
    assert json.loads(read_models(p / "models" / "models.nc").attrs["stations_without_model"]) \
        == {"L1": why}


def test_docs_name_the_las_sections_as_written(tmp_path):
    from pathlib import Path

    from tem.export.las import las_for_station, write_las

    text = write_las(las_for_station(synthetic_models(), 0, 10.0), tmp_path / "a.las").read_text()
    sections = {ln.split()[0] for ln in text.splitlines() if ln.startswith("~")}
    doc = (Path(__file__).resolve().parents[1] / "docs" / "exports.md").read_text()
    assert "~Params" in sections and "`~Params" in doc and "~Parameter" not in doc


def test_las_of_a_model_with_doi_zero_holds_the_whole_model():
    # a misfit model with a DOI of 0 m once gave a one-row log (STRT = STOP = 0) while
    # models.csv had every layer: the log now runs below the deepest interface, every row
    # flagged below the DOI
    from tem.export.las import las_for_station

    models = synthetic_models()
    models["doi"].values[0] = 0.0
    las = las_for_station(models, 0, 10.0)
    depth = las.index
    tops = models["depth_top"].values[0]
    assert depth.size > 10 and depth[-1] > np.nanmax(tops)


def test_las_values_keep_their_words_apart():
    # a colon ends a LAS value, so reasons lose theirs; "record short: 7 estimates" read
    # "record short  7 estimates" (two words run together); now "record short - 7 estimates"
    from tem.export.las import las_value
    assert las_value("misfit: chi2 31.4; DOI unreliable: it comes") == \
        "misfit - chi2 31.4; DOI unreliable - it comes"
    assert ":" not in las_value("a:b: c")
