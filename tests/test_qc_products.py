"""A station whose recording failed the evening QC is marked in every product of ``tem run``.

Two Emberline stations (fictional survey), 60 s of data each. EM05's Ex
channel is recorded flat (a dead channel, tem.synth.Faults): the evening QC
must call it reoccupy (docs/qc.md: a dead channel is reason enough), while
its model, built from what is left, may still fit. The verdict is computed
after the gated files are written (it needs the whole day), so this checks
that it still reaches the models file, the layer tables, the section grid and
figure, the model figure, LAS headers, SEG-Y trace headers (bytes 35-36, read
as raw bytes as SEG-Y rev 1 lays them out: 3600-byte file header, then per
trace a 240-byte header and 4-byte samples) and the exit status; and that the
stage command ``tem invert`` carries it too. Products are read back with
their own readers (xarray, csv, lasio, segyio).
"""
from __future__ import annotations

import csv
import json
import shutil
import struct

import pytest

from day_fixture import SMALL_CHAIN as PROCESSING
from day_fixture import run_captured, write_day

GOOD, DEAD = "EM04", "EM05"        # EM04 has no planted fault: good, or check (a warning)
CODES = {"good": 0, "check": 1, "reoccupy": 2}



@pytest.fixture(scope="module")
def project(tmp_path_factory):
    from tem.synth import Faults

    root = tmp_path_factory.mktemp("qcmarks")
    survey = write_day(root / "day", [GOOD, DEAD], PROCESSING, seed=5, duration=60.0,
                       faults={DEAD: Faults(dead=("ex",))})
    out = root / "P"
    rc, stdout, stderr = run_captured(["run", str(survey), "--out", str(out), "--jobs", "1",
                                       "--no-progress"])
    from tem.qc import read_stations_csv

    table = {r["station"]: r["verdict"] for r in read_stations_csv(out / "qc" / "stations.csv")}
    return out, rc, stdout, stderr, table


def _models(path):
    import xarray as xr

    with xr.open_dataset(path, engine="h5netcdf") as ds:
        return ds.load()


def test_exit_status_and_summary(project):
    out, rc, stdout, stderr, table = project
    st = json.loads((out / "run.json").read_text())["stations"]
    assert st[DEAD]["qc_verdict"] == "reoccupy" and "ex dead" in st[DEAD]["qc_reasons"]
    assert st[GOOD]["qc_verdict"] == table[GOOD] and table[GOOD] in ("good", "check")
    assert rc == 1, stderr                    # a recording to repeat fails the run
    text = " ".join(stdout.split())
    assert f"recording failed the evening QC at 1 station(s): {DEAD}" in text
    row = [ln for ln in stdout.splitlines() if ln.strip().startswith(DEAD)][0]
    assert "QC failed" in row and " ok " not in f" {row} "
    # the closing line and the record say it too (they said "0 failed" and nothing)
    assert "1 to re-occupy; exit status 1" in text
    last = json.loads((out / "run.json").read_text())["last_run"]
    assert last["exit_status"] == 1 and last["reoccupy"] == [DEAD]
    # the gate stage's channel flags are not a verdict: never "ok" beside reoccupy
    assert st[DEAD]["channel_flags"] != "ok" and "qc" not in st[DEAD]
    assert isinstance(st[DEAD]["extra_minutes"], (int, type(None)))   # whole minutes
    assert "caution: " in text and "check them against wells" in text


def test_models_file_and_tables(project):
    from tem.io.models import qc_verdicts

    out, other = project[0], project[4][GOOD]
    m = _models(out / "models" / "models.nc")
    codes = dict(zip(m["station"].values.astype(str), m["qc_verdict_code"].values.astype(int)))
    assert codes == {GOOD: CODES[other], DEAD: 2}
    assert m["qc_verdict_code"].attrs["flag_meanings"] == "none good check reoccupy"
    assert list(m["qc_verdict_code"].attrs["flag_values"]) == [-1, 0, 1, 2]
    words = {s: (q or {}).get("verdict") for s, q in
             zip(m["station"].values.astype(str), qc_verdicts(m))}
    assert words == {GOOD: other, DEAD: "reoccupy"}
    for f in (out / "models" / "models.csv", out / "exports" / "models.csv"):
        with open(f, encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
        assert {(r["station"], r["qc_verdict"]) for r in rows} == {(GOOD, other),
                                                                  (DEAD, "reoccupy")}
        assert all("ex dead" in r["qc_reasons"] for r in rows if r["station"] == DEAD)
    # the invert stage's record names the QC table among its inputs (resume by content)
    rec = json.loads((out / "run.json").read_text())["stages"]["invert"]
    assert any(i["file"].endswith("qc/stations.csv") for i in rec["inputs"])


def test_section_grid_and_figures(project):
    from tem.io.sections import read_section_grid
    from tem.section.plot import model_figure, section_figure

    out, other = project[0], project[4][GOOD]
    g = read_section_grid(out / "sections" / "section.nc")
    st = dict(zip(g["station"].values.astype(str), g["station_qc_verdict_code"].values.astype(int)))
    assert st == {GOOD: CODES[other], DEAD: 2}
    assert list(g["qc_verdict_code"].values.astype(int)) == [CODES[other], 2]   # a column each
    fig = section_figure(g, below_doi="shade")
    ax = fig.axes[0]
    patches = [a for a in ax.get_children() if a.get_gid() == "qc-columns"]
    assert len(patches) == 1
    d = g["distance"].values
    x = patches[0].get_paths()[0].vertices[:, 0]
    assert x.min() == pytest.approx(0.5 * (d[0] + d[1])) and x.max() >= d[1]
    labels = {t.get_gid(): t.get_text() for t in ax.texts}
    assert "QC reoccupy" in labels[f"verdict-label-{DEAD}"]
    if other == "check":                 # a warning: labelled, its column not hatched
        assert "QC check" in labels[f"verdict-label-{GOOD}"]
    else:
        assert "QC" not in labels.get(f"verdict-label-{GOOD}", "")
    assert "recording failed QC: re-occupy" in [t.get_text() for t in ax.get_legend().texts]
    titles = {a.get_title().split("\n")[0]: a.get_title() for a in
              model_figure(_models(out / "models" / "models.nc")).axes if a.get_visible()}
    assert "QC reoccupy" in titles[DEAD]
    assert ("QC check" in titles[GOOD]) == (other == "check") and "reoccupy" not in titles[GOOD]


def test_las_parameters(project):
    import lasio

    out, other = project[0], project[4][GOOD]
    dead = lasio.read(out / "exports" / "las" / f"{DEAD}.las")
    good = lasio.read(out / "exports" / "las" / f"{GOOD}.las")
    assert dead.params["QC"].value == "REOCCUPY" and "ex dead" in str(dead.params["QCR"].value)
    assert "WARNING: evening QC REOCCUPY" in " ".join(dead.other.split())   # wrapped text
    assert good.params["QC"].value == other.upper()
    assert ("evening QC CHECK" in " ".join(good.other.split())) == (other == "check")
    assert "REOCCUPY" not in good.other


def test_segy_data_use_bytes(project):
    import segyio

    out = project[0]
    for name in ("section_depth.sgy", "section_twt.sgy"):
        path = out / "exports" / name
        if not path.is_file():
            continue
        with segyio.open(path, ignore_geometry=True) as f:
            ns, n = len(f.samples), f.tracecount
            use = [f.header[k][segyio.TraceField.DataUse] for k in range(n)]
            text = f.text[0].decode("ascii", "replace")
        raw = path.read_bytes()
        for k in range(n):
            start = 3600 + k * (240 + 4 * ns)
            (value,) = struct.unpack(">h", raw[start + 34:start + 36])    # bytes 35-36
            assert value == use[k]
        assert use == [1, 2]                                # EM04 production, EM05 re-occupy
        assert f"EVENING QC REOCCUPY (DATA USE 2): {DEAD}" in text


def test_invert_command_carries_the_table(project, tmp_path):
    out, other = project[0], project[4][GOOD]
    gated = out / "gated"
    rc, _, err = run_captured(["invert", str(gated), "--out", str(tmp_path / "Q"), "--jobs", "1",
                               "--no-progress", "--no-figures", "--layers", "8"])
    assert rc in (0, 1), err
    m = _models(tmp_path / "Q" / "models" / "models.nc")
    assert dict(zip(m["station"].values.astype(str),
                    m["qc_verdict_code"].values.astype(int))) == {GOOD: CODES[other], DEAD: 2}
    assert f"evening QC verdicts from {out / 'qc' / 'stations.csv'}" in err
    rc, _, err = run_captured(["invert", str(gated), "--out", str(tmp_path / "R"), "--jobs", "1",
                               "--no-progress", "--no-figures", "--layers", "8", "--qc", "none"])
    assert "qc_verdict_code" not in _models(tmp_path / "R" / "models" / "models.nc")
    # a broken table is refused with one line naming the file and the field
    bad = tmp_path / "stations.csv"
    shutil.copy(out / "qc" / "stations.csv", bad)
    bad.write_text(bad.read_text().replace("reoccupy", "maybe"))
    rc, _, err = run_captured(["invert", str(gated), "--out", str(tmp_path / "S"), "--jobs", "1",
                               "--no-progress", "--no-figures", "--qc", str(bad)])
    assert rc == 2 and f"{bad}: verdict: 'maybe'" in err and len(err.strip().splitlines()) == 1


def test_demo_status_checks_the_planted_faults():
    """``tem demo`` plants two faults (EM09 noisy, EM04 dead Ex): its status is 0 only when the
    QC calls exactly those stations reoccupy and nothing else failed."""
    import io

    from rich.console import Console

    from tem.cli.demo import PLANTED, demo_status
    from tem.pipeline.runner import RunOutcome, exit_status_of

    def outcome(qc, fit=None):
        stations = {sid: {"qc_verdict": v, "verdict": (fit or {}).get(sid, "fitted")}
                    for sid, v in qc.items()}
        state = {"stations": stations, "stages": {}, "last_run": {"stopped": ""}}
        return RunOutcome(state=state, exit_status=exit_status_of(state), project=None)

    console = Console(file=io.StringIO())
    planted = {sid: "reoccupy" for sid in PLANTED}
    assert set(PLANTED) == {"EM04", "EM09"}
    assert demo_status(outcome({"EM01": "good", **planted}), console) == 0
    assert demo_status(outcome({"EM01": "good", "EM04": "reoccupy", "EM09": "check"}),
                       console) == 1                      # the noisy station was missed
    assert demo_status(outcome({"EM01": "reoccupy", **planted}), console) == 1
    assert demo_status(outcome({"EM01": "good", **planted}, fit={"EM01": "misfit"}),
                       console) == 1


def test_report_models_table(project):
    out = project[0]
    html = (out / "report.html").read_text()
    stations = html[html.index('id="stations"'):]
    table = stations[:stations.index("</table>")]
    assert "<th>QC</th>" in table
    row = [r for r in table.split("<tr") if f">{DEAD}<" in r][0]
    assert 'class="reoccupy"' in row and '<td class="status">reoccupy</td>' in row
    # the heading counts the models on a recording to repeat (it counted fit verdicts only)
    heading = stations[:stations.index("</h2>")]
    assert "; 1 on a recording to re-occupy" in heading, heading


def test_fit_figure_states_the_qc_verdict(project, monkeypatch):
    # the station's fit figure said nothing of a recording to repeat (the section, model
    # figure and every file did): its title now says the verdict and reasons
    import tem.io.figures as figures
    from tem.invert.settings import InversionSettings, floors_of
    from tem.invert.stage import invert_one

    out = project[0]
    seen = []
    monkeypatch.setattr(figures, "figure_bytes", lambda fig, *a, **k: seen.append(fig) or b"")
    st = InversionSettings(kind="smooth", layers=12, max_iter=4)
    invert_one(DEAD, out / "gated" / f"{DEAD}.nc", st, floors_of(st), out / "x.png",
               ("reoccupy", "ex dead"))
    assert seen and seen[0]._suptitle.get_text() == "evening QC reoccupy: ex dead"
    seen.clear()
    invert_one(DEAD, out / "gated" / f"{DEAD}.nc", st, floors_of(st), out / "x.png",
               ("good", ""))
    assert seen and seen[0]._suptitle is None


def test_decay_figure_states_the_qc_verdict(project, monkeypatch):
    # the decay figure is drawn per station before the survey-wide verdicts exist, so a
    # station to re-occupy looked like a good one there; the gate stage redraws the figures
    # of stations not called good with the verdict and reasons over the panels
    import tem.io.figures as figures
    from tem.gate.stage import _mark_decay_figures
    from tem.io.project import Project
    from tem.qc.verdict import StationVerdict

    out = project[0]
    seen = []
    monkeypatch.setattr(figures, "figure_bytes", lambda fig, *a, **k: seen.append(fig) or b"x")
    verdicts = [StationVerdict(DEAD, "reoccupy", ("ex dead: flat record",), 1.0),
                StationVerdict(GOOD, "good", (), 0.0)]
    files = {s: out / "stacked" / f"{s}.nc" for s in (DEAD, GOOD)}
    scratch = Project(out.parent / "redrawn")
    for s in (DEAD, GOOD):
        (scratch.root / "gated").mkdir(parents=True, exist_ok=True)
        shutil.copy(out / "gated" / f"{s}.nc", scratch.station_file("gated", s))
    _mark_decay_figures(verdicts, files, scratch)
    assert len(seen) == 1                              # the good station is left as drawn
    assert seen[0]._suptitle.get_text() == "evening QC: reoccupy: ex dead: flat record"
    assert scratch.station_figure(DEAD, "decay").read_bytes() == b"x"
    assert not scratch.station_figure(GOOD, "decay").exists()


def test_pseudo_sections_mark_the_station_to_reoccupy(project, monkeypatch):
    # the pseudo-sections drew EM05's dead channel like any station; its column is marked
    # now (a dashed line and "QC reoccupy"), and the title names it
    import tem.io.figures as figures
    from tem.io.project import Project
    from tem.rhoa.settings import RhoaSettings
    from tem.rhoa.stage import pseudo_sections

    seen = []
    monkeypatch.setattr(figures, "save_figure", lambda fig, *a, **k: seen.append(fig) or [])
    pseudo_sections(Project(project[0]), [GOOD, DEAD], RhoaSettings())
    assert seen
    for fig in seen:
        ax = fig.axes[0]
        assert [ln for ln in ax.lines if ln.get_gid() == f"qc-mark-{DEAD}"]
        assert not [ln for ln in ax.lines if ln.get_gid() == f"qc-mark-{GOOD}"]
        assert any(tx.get_text() == "QC reoccupy" for tx in ax.texts)
        assert fig._suptitle.get_text().endswith(f"to re-occupy): {DEAD}")
