"""tem run end to end on a small synthetic profile (issue 6), and processing-table checks.

The synthetic day is a shortened Emberline Plateau (fictional) profile: four
stations, 60 s of Ex and dBz/dt at 1 kHz each, one station with a truncated
(corrupt) recording. The whole chain runs once through ``tem.cli.main`` (one
test function: under ``pytest -n 2`` a module fixture would run once per
worker); the checks compare the exports, reread with lasio and segyio, with
the models file reread with xarray, using only the definitions of the file
formats (LAS 2.0, SEG-Y rev 1 scalars) and of a layered model (a depth belongs
to the layer whose top is at or above it), not tem's own samplers.
"""
from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest

from profile_fixture import LinkCollector

from tem.cli import main

STATIONS = ["EM02", "EM05", "EM08", "EM11"]
CORRUPT = "EM08"

PROCESSING = """
[processing.gate]
per_decade = 5.0

[processing.rhoa]
all_time = false

[processing.invert]
layers = 12
max_iter = 6

[processing.section]
depth_step = 10.0

[processing.export]
velocity = "velocity.csv"
dt_ms = 4.0
las_step = 5.0
"""

VELOCITY = "depth_m,vp_m_per_s\n0,2000\n500,3000\n"


def _write_day(d: Path):
    import tomli_w

    d.mkdir(parents=True, exist_ok=True)
    from tem.survey import survey_to_dict
    from tem.synth import emberline_survey, synth_survey

    sv, models = emberline_survey(base_dir=d, sample_rate=1000.0, stations=STATIONS,
                                  current_channel=False)
    (d / "survey.toml").write_text(tomli_w.dumps(survey_to_dict(sv)) + PROCESSING)
    (d / "velocity.csv").write_text(VELOCITY)
    synth_survey(sv, models, d, seed=7, duration=60.0)
    bad = d / "raw" / CORRUPT / "dbzdt.npy"
    bad.write_bytes(bad.read_bytes()[:4000])   # header promises more samples than the file holds
    return d / "survey.toml"


def _layer_of(depth_top, depth):
    """Index of the layer holding each depth (a depth on a boundary belongs to the lower layer)."""
    top = np.asarray(depth_top, float)
    top = top[np.isfinite(top)]
    return np.searchsorted(top, depth, side="right") - 1


def _segy_scaled(stored, scalar):
    # SEG-Y rev 1, bytes 71-72: a negative scalar divides, a positive one multiplies
    stored = np.asarray(stored, float)
    return stored / -scalar if scalar < 0 else stored * (scalar or 1)


def _check_las(proj, models):
    import lasio

    files = sorted((proj / "exports" / "las").glob("*.las"))
    assert [f.stem for f in files] == sorted(models["station"].values.astype(str))
    for i, sid in enumerate(models["station"].values.astype(str)):
        las = lasio.read(proj / "exports" / "las" / f"{sid}.las")
        assert las.version["VERS"].value == 2.0
        depth = las["DEPT"]
        assert depth[0] == 0.0 and np.allclose(np.diff(depth), 5.0)   # processing las_step
        k = _layer_of(models["depth_top"].values[i], depth)
        want = models["resistivity"].values[i][k]
        # LAS numbers are written with 6 significant digits: relative error <= 5e-6
        np.testing.assert_allclose(las["RES"], want, rtol=1e-5)
        doi = float(models["doi"].values[i])
        np.testing.assert_array_equal(las["BDOI"], (depth > doi).astype(float))
        assert las.params["XCOORD"].value == pytest.approx(float(models["x"].values[i]))
        assert las.params["DOI"].value == pytest.approx(doi, abs=0.05)   # written to 0.1 m


def _check_segy(proj, models):
    import segyio

    grid_x = models["x"].values.astype(float)
    order = np.argsort(grid_x)                  # the profile runs west to east through the stations
    with segyio.open(proj / "exports" / "section_depth.sgy", ignore_geometry=True) as f:
        assert f.tracecount == models.sizes["station"]      # one trace per station (no resampling)
        assert f.bin[segyio.BinField.Format] == 5
        step_mm = f.bin[segyio.BinField.Interval]
        assert step_mm == 10000                  # 10 m depth step stored in millimetres
        ns = len(f.samples)
        depth = np.arange(ns) * step_mm / 1000.0
        for t, i in enumerate(order):
            h = f.header[t]
            sc = h[segyio.TraceField.SourceGroupScalar]
            assert _segy_scaled(h[segyio.TraceField.CDP_X], sc) == pytest.approx(grid_x[i], abs=0.01)
            assert _segy_scaled(h[segyio.TraceField.CDP_Y], sc) == pytest.approx(
                float(models["y"].values[i]), abs=0.01)
            k = _layer_of(models["depth_top"].values[i], depth)
            want = models["resistivity"].values[i][k]
            want = np.where(depth > float(models["doi"].values[i]), 0.0, want)   # zero below DOI
            np.testing.assert_allclose(f.trace[t], want, rtol=1e-6)           # float32 samples
        assert depth[-1] >= float(np.nanmax(models["doi"].values))           # section reaches the DOI
    with segyio.open(proj / "exports" / "section_twt.sgy", ignore_geometry=True) as f:
        assert f.tracecount == models.sizes["station"]
        assert f.bin[segyio.BinField.Interval] == 4000                       # dt_ms = 4 -> us


def _check_section(proj, models):
    from tem.io.sections import read_section_grid

    for ext in ("png", "pdf"):
        p = proj / "figures" / f"section.{ext}"
        assert p.is_file() and p.stat().st_size > 1000
    assert (proj / "figures" / "section.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    g = read_section_grid(proj / "sections" / "section.nc")
    below = g["below_doi"].values
    depth = g["depth"].values
    expect = depth[None, :] > g["doi"].values[:, None]
    np.testing.assert_array_equal(below, expect)
    assert below.any() and (~below).any()
    # the masked section is NaN exactly below the DOI; the unmasked one is complete there
    np.testing.assert_array_equal(np.isnan(g["log10_resistivity"].values), below)
    assert np.isfinite(g["log10_resistivity_full"].values).all()




def _check_report(proj):
    text = (proj / "report.html").read_text(encoding="utf-8")
    parser = LinkCollector()
    parser.feed(text)
    parser.close()
    assert parser.links
    for link in parser.links:
        assert (proj / link).is_file(), link
    assert "figures/section.png" in parser.links
    for sid in STATIONS:
        if sid != CORRUPT:
            assert f"figures/stations/{sid}_fit.png" in parser.links
    # the evening verdicts (header + every station, the corrupt one too), then the model
    # table (header + stations with a model)
    assert parser.rows == (1 + len(STATIONS)) + (1 + len(STATIONS) - 1)
    assert "figures/qc_map.png" in parser.links and "figures/qc_noise.png" in parser.links
    assert f"Station {CORRUPT} failed at stage stack" in text


def _mtimes(proj, folders):
    return {p: p.stat().st_mtime_ns for f in folders for p in sorted((proj / f).rglob("*"))
            if p.is_file()}


def test_run_end_to_end(tmp_path, capsys):
    import xarray as xr

    survey = _write_day(tmp_path / "day")
    proj = tmp_path / "project"
    status = main(["run", str(survey), "--out", str(proj), "--jobs", "2", "--no-progress"])
    out = capsys.readouterr()
    assert status == 2, out.err                 # one station's recording refused, the others completed
    state = json.loads((proj / "run.json").read_text())
    st = state["stations"]
    assert st[CORRUPT]["failed_stage"] == "stack" and "dbzdt.npy" in st[CORRUPT]["message"]
    good = [s for s in STATIONS if s != CORRUPT]
    for sid in good:
        assert "failed_stage" not in st[sid], st[sid]
        assert np.isfinite(st[sid]["chi2"]) and st[sid]["doi"] > 0 and st[sid]["usable_gates"] > 5
    assert not (proj / "gated" / f"{CORRUPT}.nc").exists()
    assert CORRUPT in out.out and "failed stack" in out.out     # closing summary table
    # the failure line on stderr is one line, however long (rich wrapped it at 80 columns)
    line = [ln for ln in out.err.splitlines() if ln.startswith(f"stack: station {CORRUPT} failed")]
    assert len(line) == 1 and line[0].endswith(st[CORRUPT]["message"])
    # parameters from the survey's [processing] table are recorded
    assert state["stages"]["invert"]["parameters"]["layers"] == 12
    assert state["stages"]["stack"]["inputs"][0]["sha256"]
    with xr.open_dataset(proj / "models" / "models.nc", engine="h5netcdf") as ds:
        models = ds.load()
    assert list(models["station"].values.astype(str)) == good
    _check_las(proj, models)
    _check_segy(proj, models)
    _check_section(proj, models)
    _check_report(proj)

    # --from invert with new parameters and the laterally constrained inversion exported:
    # earlier stages' files untouched, later ones rewritten
    early = _mtimes(proj, ["stacked", "gated", "rhoa"])
    late = _mtimes(proj, ["models", "exports"])
    stack_record = state["stages"]["stack"]
    status = main(["run", str(survey), "--out", str(proj), "--from", "invert", "--jobs", "1",
                   "--no-progress", "--set", "invert.lci=true", "--set", "invert.layers=10",
                   "--set", "export.models=lci"])
    assert status == 2                          # the corrupt station still has no model
    assert _mtimes(proj, ["stacked", "gated", "rhoa"]) == early
    assert all(p.stat().st_mtime_ns > t for p, t in late.items())
    state2 = json.loads((proj / "run.json").read_text())
    assert state2["stages"]["stack"] == stack_record
    assert state2["stages"]["invert"]["parameters"]["layers"] == 10
    with xr.open_dataset(proj / "models" / "models_lci.nc", engine="h5netcdf") as ds:
        lci = ds.load()
    assert lci.attrs["model_kind"] == "lci" and lci.sizes["layer"] == 10
    _check_las(proj, lci)                       # the exports now hold the LCI models
    _check_segy(proj, lci)
    _check_report(proj)
    assert "figures/section_lci.png" in (proj / "report.html").read_text()


def test_bad_processing_table(tmp_path, capsys):
    from tem.survey import write_survey
    from tem.synth import emberline_survey

    sv, _ = emberline_survey(base_dir=tmp_path, stations=["EM01"])
    write_survey(sv, tmp_path / "survey.toml")
    with open(tmp_path / "survey.toml", "a") as fh:
        fh.write("\n[processing.gate]\nper_decad = 8\n")
    status = main(["run", str(tmp_path / "survey.toml"), "--out", str(tmp_path.parent / "p")])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2 and len(err) == 1
    assert "survey.toml" in err[0] and "processing.gate.per_decad: unknown key" in err[0]
    assert not (tmp_path.parent / "p").exists()


def test_parameter_overrides_and_checks(tmp_path):
    from tem.errors import TemInputError
    from tem.export.settings import kinds_of
    from tem.pipeline import resolve_settings
    from tem.settings import parse_assignment

    p = resolve_settings({"invert": {"layers": 20}, "export": {"velocity": "v.csv"}},
                         [parse_assignment("invert.layers=24")], tmp_path / "s.toml")
    assert p["invert"].layers == 24                           # command line wins over the table
    assert p["export"].velocity == str(tmp_path / "v.csv")    # relative to the survey file
    assert "segy-twt" in kinds_of(p["export"])                # a velocity table adds the TWT SEG-Y
    for bad, field in [({"gate": {"shape": "round"}}, "processing.gate.shape"),
                       ({"invert": {"layers": 2.5}}, "processing.invert.layers"),
                       ({"section": {"depth_step": -5.0}}, "processing.section.depth_step"),
                       ({"export": {"models": "lci"}}, "processing.export.models"),
                       ({"invert": {"floor": {"exx": 0.05}}}, "processing.invert.floor: unknown "
                        "component 'exx'"),
                       ({"plot": {}}, "processing.plot")]:
        with pytest.raises(TemInputError, match=field.replace(".", r"\.")):
            resolve_settings(bad, survey_file=tmp_path / "s.toml")
    with pytest.raises(TemInputError, match=r"^--set invert\.layers: expected a whole number"):
        resolve_settings({}, [parse_assignment("invert.layers=many")])


def test_from_needs_an_earlier_run(tmp_path, capsys):
    from tem.survey import write_survey
    from tem.synth import emberline_survey

    sv, _ = emberline_survey(base_dir=tmp_path, stations=["EM01"])
    write_survey(sv, tmp_path / "survey.toml")
    status = main(["run", str(tmp_path / "survey.toml"), "--out", str(tmp_path.parent / "q"),
                   "--from", "invert"])
    err = capsys.readouterr().err
    assert status == 2 and "run.json" in err
    assert os.path.exists(tmp_path / "survey.toml")
