"""A station whose model does not fit is marked in every product of ``tem run`` (issue 10).

Two Emberline stations (fictional survey), 60 s of data each. EM06's Ex gain
is written into the survey as 0.2 while its recording was made at 1.0: its Ex
data come out five times too large against its dB/dt, which no 1D earth can
explain together (a calibration error; common practice, no source), so its
model must end as a misfit while EM04 fits. The checks read the products
back with their own readers (netCDF through xarray, LAS through lasio, SEG-Y
through segyio and as raw bytes, CSV, JSON, HTML) and the byte layout of
docs/exports.md.
"""
from __future__ import annotations

import csv
import json
import struct

import numpy as np
import pytest

from day_fixture import SMALL_CHAIN as PROCESSING
from day_fixture import run_captured, write_day

GOOD, BAD = "EM04", "EM06"



@pytest.fixture(scope="module")
def project(tmp_path_factory):
    def wrong_gain(d):
        for st in d["station"]:
            for rx in st["receiver"]:
                if st["id"] == BAD and rx["component"] == "ex":
                    rx["gain"] = 0.2           # recorded at gain 1: Ex five times too large

    root = tmp_path_factory.mktemp("verdicts")
    survey = write_day(root / "day", [GOOD, BAD], PROCESSING, seed=3, duration=60.0,
                       edit=wrong_gain)
    out = root / "P"
    rc, stdout, stderr = run_captured(["run", str(survey), "--out", str(out), "--jobs", "1",
                                       "--no-progress"])
    return out, rc, stdout, stderr


def test_exit_status_and_summary(project):
    out, rc, stdout, _ = project
    assert rc == 1                                     # a misfit fails the run
    rows = {ln.split()[0]: ln for ln in stdout.splitlines() if ln.strip().startswith(("EM0",))}
    assert "misfit" in rows[BAD] and "ok" not in rows[BAD].split()
    assert "fitted" in rows[GOOD] and "ok" in rows[GOOD].split()
    assert f"chosen model not fitted at 1 station(s): {BAD} (misfit)" in " ".join(stdout.split())


def test_run_json(project):
    out = project[0]
    st = json.loads((out / "run.json").read_text())["stations"]
    assert st[BAD]["verdict"] == "misfit" and st[BAD]["verdict_code"] == 1
    assert st[GOOD]["verdict"] == "fitted"
    v = st[BAD]["verdicts"]["smooth"]
    assert v["chi2"] > v["tolerance"] and v["reasons"][0].startswith("chi2 ")
    assert st[BAD]["chi2"] == pytest.approx(v["chi2"], rel=1e-5)


def test_models_and_csv(project):
    import xarray as xr

    out = project[0]
    with xr.open_dataset(out / "models" / "models.nc", engine="h5netcdf") as ds:
        m = ds.load()
    codes = dict(zip(m["station"].values.astype(str), m["verdict_code"].values.astype(int)))
    assert codes == {GOOD: 0, BAD: 1}
    assert list(m["verdict_code"].attrs["flag_values"]) == [0, 1, 2, 3, 4]
    for f in (out / "models" / "models.csv", out / "exports" / "models.csv"):
        with open(f, encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
        assert {(r["station"], r["verdict"], r["verdict_code"]) for r in rows} == \
            {(GOOD, "fitted", "0"), (BAD, "misfit", "1")}


def test_section_grid_and_figure(project):
    from tem.io.sections import read_section_grid
    from tem.section.plot import section_figure

    out = project[0]
    g = read_section_grid(out / "sections" / "section.nc")
    st = dict(zip(g["station"].values.astype(str), g["station_verdict_code"].values.astype(int)))
    assert st == {GOOD: 0, BAD: 1}
    assert list(g["verdict_code"].values.astype(int)) == [0, 1]    # one column per station
    assert g["chi2"].values[1] > 1.5
    fig = section_figure(g, below_doi="shade")
    ax = fig.axes[0]
    labels = {a.get_gid(): a.get_text() for a in ax.texts}
    assert f"verdict-label-{BAD}" in labels
    # EM04's model fits: its label, if any, is the evening QC's warning, not a fit verdict
    assert set(labels.get(f"verdict-label-{GOOD}", "").split("\n")[1:]) <= {"QC check"}
    # the hatched columns cover EM06's share of the profile and not EM04's
    d = g["distance"].values
    mid = 0.5 * (d[0] + d[1])
    patches = [a for a in ax.get_children() if a.get_gid() == "verdict-columns"]
    assert len(patches) == 1
    x = patches[0].get_paths()[0].vertices[:, 0]
    assert x.min() == pytest.approx(mid) and x.max() >= d[1]
    label = [a for a in fig.axes[0].texts if a.get_gid() == f"verdict-label-{BAD}"][0]
    assert "misfit" in label.get_text()
    assert (out / "figures" / "section.png").stat().st_size > 10_000


def test_las_parameters(project):
    import lasio

    out = project[0]
    bad = lasio.read(out / "exports" / "las" / f"{BAD}.las")
    good = lasio.read(out / "exports" / "las" / f"{GOOD}.las")
    assert bad.params["FIT"].value == "MISFIT" and int(bad.params["FITC"].value) == 1
    assert float(bad.params["CHI2"].value) > float(bad.params["TOL"].value)
    assert "above tolerance" in str(bad.params["FITR"].value)
    assert "WARNING: verdict MISFIT" in bad.other
    assert good.params["FIT"].value == "FITTED" and int(good.params["FITC"].value) == 0


def test_segy_trace_header_bytes(project):
    import segyio

    out = project[0]
    path = out / "exports" / "section_depth.sgy"
    with segyio.open(path, ignore_geometry=True) as f:
        ns = len(f.samples)
        words = [f.header[k][segyio.TraceField.UnassignedInt2] for k in range(f.tracecount)]
        text = f.text[0].decode("ascii", "replace")
    # SEG-Y rev 1: 3600-byte file header, then per trace a 240-byte header and 4-byte samples;
    # bytes 237-238 int16 verdict code, 239-240 int16 chi2 x 100, big-endian (docs/exports.md)
    raw = path.read_bytes()
    for k, word in enumerate(words):
        start = 3600 + k * (240 + 4 * ns)
        code, chi = struct.unpack(">hh", raw[start + 236:start + 240])
        assert struct.unpack(">hh", struct.pack(">i", word)) == (code, chi)
        assert code == (1 if k == 1 else 0)
    start = 3600 + 240 + 4 * ns                              # the second trace: EM06
    code, chi = struct.unpack(">hh", raw[start + 236:start + 240])
    assert code == 1 and 150 < chi <= 32767                  # chi2 above 1.5, x 100
    assert f"VERDICTS: {BAD} MISFIT" in text


def test_report_first_table(project):
    out = project[0]
    html = (out / "report.html").read_text()
    first = html[html.index("<table>"):html.index("</table>")]
    row = [r for r in first.split("<tr") if f">{BAD}<" in r][0]
    assert "misfit" in row
    stations = html[html.index('id="stations"'):]
    heading = stations[:stations.index("</h2>")]            # counted in fit verdicts' words
    assert "Models by station (2: 1 fitted, 0 with a warning, 1 not fitted)" in heading, heading
    row = [r for r in stations[:stations.index("</table>")].split("<tr") if f">{BAD}<" in r][0]
    assert "misfit" in row and "above tolerance" in row and ">ok<" not in row
    assert np.isfinite(float(row.split("<td>")[4].split("<")[0]))    # the chi2 cell


def test_stage_commands_exit_1_on_a_misfit(project, tmp_path):
    # tem section and tem export on a project with a misfit station exited 0 and said
    # nothing (an independent review of the products); tem invert already exited 1
    out = project[0]
    for cmd, src in (("section", out / "models"), ("export", out)):
        rc, stdout, stderr = run_captured([cmd, str(src), "--out", str(tmp_path / cmd),
                                           "--no-progress"])
        assert rc == 1, (cmd, stdout, stderr)
        assert f"tem {cmd}: chosen model not fitted at 1 station(s): {BAD} (misfit)" in stderr


def test_fit_table_carries_the_verdict_and_units(project):
    # a misfit station's rows of fit.csv looked like a fitted one's, and observed/predicted
    # had no unit (independent review of the products)
    out = project[0]
    with open(out / "models" / "fit.csv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["verdict"] for r in rows if r["station"] == BAD} == {"misfit"}
    assert {r["verdict"] for r in rows if r["station"] == GOOD} == {"fitted"}
    assert {(r["component"], r["unit"]) for r in rows} <= {("ex", "V/m/A"), ("dbzdt", "T/s/A")}
