"""The verdict on posterior intervals (tem.invert.interval): converged when the largest split
R-hat is at most 1.1 and the smallest ESS at least 100, else unconverged, and the marking of an
unconverged station in every product of a tiny posterior run.

Thresholds: R-hat 1.1 after Gelman, Carlin, Stern, Dunson, Vehtari & Rubin (2013), "Bayesian Data
Analysis", 3rd ed., sec. 11.4; Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021),
"Rank-normalization, folding, and localization: an improved R-hat for assessing the convergence
of MCMC", Bayesian Analysis 16(2), recommend the stricter R-hat < 1.01 and ESS > 400; our
defaults are looser on purpose (a field check, docs/inversion.md, "Interval verdict").
"""
from __future__ import annotations

import csv
import io
import json
import math

import pytest

from day_fixture import run_captured, write_day
from tem.invert.interval import judge_interval

DEFAULTS = dict(rhat_max=1.1, ess_min=100)


def test_verdict_from_numbers():
    # R-hat 1.05 <= 1.1 and ESS 500 >= 100 (Gelman et al. 2013 sec. 11.4 threshold): converged
    v = judge_interval(1.05, 500, **DEFAULTS)
    assert v.status == "converged" and v.code == 0
    assert v.text == "intervals converged: split R-hat 1.05 <= 1.1, ESS 500 >= 100"
    # R-hat 1.3 > 1.1: unconverged though the ESS is large
    v = judge_interval(1.3, 500, **DEFAULTS)
    assert v.status == "unconverged" and v.code == 1
    assert "split R-hat 1.30 > 1.1" in v.text and "ESS 500 >= 100" in v.text
    assert v.text.endswith("run longer chains (posterior_draws/posterior_burn)")
    # ESS 20 < 100: unconverged though R-hat is 1.0
    v = judge_interval(1.0, 20, **DEFAULTS)
    assert v.status == "unconverged" and "ESS 20 < 100" in v.text
    # the demo's worst station: both fail, both numbers in the one line
    assert judge_interval(3.22, 4, **DEFAULTS).text == (
        "intervals unconverged: split R-hat 3.22 > 1.1, ESS 4 < 100; run longer chains "
        "(posterior_draws/posterior_burn)")
    # the thresholds are inclusive, and not-finite diagnostics never pass
    assert judge_interval(1.1, 100, **DEFAULTS).converged
    assert not judge_interval(math.nan, 500, **DEFAULTS).converged
    assert not judge_interval(1.0, math.nan, **DEFAULTS).converged
    # Vehtari et al. (2021) thresholds, when asked for, fail what ours pass
    assert not judge_interval(1.05, 300, rhat_max=1.01, ess_min=400).converged
    # a number never prints as its threshold (it read "R-hat 1.10 > 1.1", "ESS 100 < 100")
    assert "split R-hat 1.104 > 1.1" in judge_interval(1.104, 500, **DEFAULTS).text
    assert "ESS 99.6 < 100" in judge_interval(1.0, 99.6, **DEFAULTS).text


def test_misfit_model_makes_intervals_unusable():
    # well-mixed chains around a model that misfits its data give narrow intervals of the
    # wrong model: the interval verdict says unusable, with the fit's words and the numbers
    from tem.invert.interval import unusable_interval
    from tem.invert.verdict import Verdict
    iv = judge_interval(1.01, 368, **DEFAULTS)
    assert iv.converged
    misfit = Verdict(status="misfit", chi2=31.4, target=1.0, tolerance=1.75, n_data=40,
                     reasons=("chi2 31.4 above tolerance 1.75 (target 1, 40 data)",))
    out = unusable_interval(iv, misfit)
    assert out.status == "unusable" and out.code == 2 and not out.converged
    assert out.text.startswith("intervals unusable: the model is misfit (chi2 31.4 above "
                               "tolerance 1.75")
    assert "split R-hat 1.01 <= 1.1, ESS 368 >= 100" in out.text
    warned = Verdict(status="degenerate-layer", chi2=0.9, target=1.0, tolerance=1.75, n_data=40,
                     reasons=("layer 2 thin",))
    assert unusable_interval(iv, warned) is iv        # fitted (with a warning): unchanged


# 2 chains of 50 draws after 50 burn-in steps: far too short for a 3-layer posterior, so the
# split R-hat is large and the ESS small (deterministic: fixed seeds). Two Emberline stations
# (fictional survey), 60 s of data each, through the whole chain of tem run.
PROCESSING = """
[processing.gate]
per_decade = 4.0

[processing.invert]
layers = 12
kind = "posterior"
few_layers = 3
few_search = "local"
posterior_draws = 50
posterior_burn = 50
posterior_chains = 2
posterior_restarts = 0

[processing.section]
depth_step = 25.0
formats = ["png"]

[processing.export]
las_step = 10.0
"""
STATIONS = ["EM04", "EM06"]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    root = tmp_path_factory.mktemp("interval")
    survey = write_day(root / "day", STATIONS, PROCESSING, seed=3, duration=60.0)
    out = root / "P"
    rc, stdout, stderr = run_captured(["run", str(survey), "--out", str(out), "--jobs", "1",
                                       "--no-progress"])
    return out, rc, stdout, stderr


def test_run_json_summary_and_exit_status(run):
    out, rc, stdout, _ = run
    state = json.loads((out / "run.json").read_text())
    for sid in STATIONS:
        s = state["stations"][sid]
        assert s["interval_verdict"] == "unconverged" and s["interval_code"] == 1, s
        # the verdict agrees with the stored numbers: R-hat > 1.1 or ESS < 100
        assert s["rhat_max"] > 1.1 or s["ess_min"] < 100
        assert s["interval_text"].startswith("intervals unconverged: split R-hat ")
        assert f"R-hat {s['rhat_max']:.2f}" in s["interval_text"]
        assert state["stages"]["invert"]["stations"][sid]["interval_verdict"] == "unconverged"
        # the closing summary says it in the notes; the fit column keeps the fit verdict
        row = _summary_row(stdout, sid)
        assert "intervals unconverged: split R-hat" in row and s["verdict"] in row.split()[:8]
    assert "intervals unconverged at 2 of 2 station(s): EM04, EM06" in " ".join(stdout.split())
    # exit status: an unconverged interval is a warning; only a misfit fit or a failed
    # station makes it 1 (docs/inversion.md, "Verdicts")
    misfit = [sid for sid in STATIONS if state["stations"][sid]["verdict"] == "misfit"]
    assert rc == (1 if misfit else 0), (rc, misfit)


def _summary_row(stdout, sid):
    """The summary row of ``sid`` with the continuation lines of its folded notes, as one line."""
    out, inside = [], False
    for ln in stdout.splitlines():
        first = ln.split()[0] if ln.split() else ""
        if first.startswith("EM") or not ln.strip():
            inside = first == sid
        if inside:
            out.append(ln.strip())
    return " ".join(" ".join(out).split())


def test_invert_table(run):
    from rich.console import Console

    from tem.cli.invert import fit_table
    from tem.runtime import StageResult, StationOutcome

    out = run[0]
    recs = json.loads((out / "run.json").read_text())["stages"]["invert"]["stations"]
    res = StageResult(stations={sid: StationOutcome(sid, "ok", info=r) for sid, r in recs.items()})
    console = Console(record=True, width=250, file=io.StringIO())
    fit_table(res, console)
    assert console.export_text().count("intervals unconverged: split R-hat") == 2


def test_models_csv_and_las(run):
    import lasio

    from tem.io.models import read_models

    out = run[0]
    ds = read_models(out / "models" / "models.nc")
    assert list(ds["interval_verdict_code"].values) == [1, 1]
    assert list(ds["interval_verdict_code"].attrs["flag_values"]) == [0, 1, 2]
    assert ds["interval_verdict_code"].attrs["flag_meanings"] == "converged unconverged unusable"
    assert all(str(t).startswith("intervals unconverged") for t in ds["interval_verdict"].values)
    for f in (out / "models" / "posterior.csv", out / "models" / "models.csv",
              out / "exports" / "models.csv"):
        with open(f, encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
        assert rows and {r["interval_verdict"] for r in rows} == {"unconverged"}, f
        if f.name == "posterior.csv":       # the fit verdict beside the interval verdict
            assert {r["verdict"] for r in rows} <= {"fitted", "degenerate-layer",
                                                    "parameter-at-bound"}, f
    for sid in STATIONS:
        las = lasio.read(out / "exports" / "las" / f"{sid}.las")
        assert las.params["INTV"].value == "UNCONVERGED"
        assert "split R-hat" in str(las.params["INTVR"].value)
        assert "intervals UNCONVERGED" in las.other


def test_figures_mark_unconverged_stations(run):
    from tem.io.models import read_models
    from tem.section.posterior_plot import posterior_section_figure
    from tem.section.settings import SectionSettings

    out = run[0]
    assert (out / "figures" / "section_posterior.png").stat().st_size > 10_000
    ds = read_models(out / "models" / "models.nc")
    fig = posterior_section_figure(ds, SectionSettings())
    ax1, ax2 = fig.axes[:2]                  # the two panels; then the two colour bars
    for ax in (ax1, ax2):
        assert [c for c in ax.collections if c.get_gid() == "interval-columns"], "not hatched"
    labels = [t.get_text() for t in ax1.get_legend().get_texts()]
    assert "intervals unconverged (R-hat, ESS)" in labels
    assert {t.get_gid() for t in ax1.texts} >= {f"interval-label-{s}" for s in STATIONS}
    # a models file whose intervals converged has no marks
    ok = ds.copy()
    ok["interval_verdict_code"] = ok["interval_verdict_code"] * 0
    fig = posterior_section_figure(ok, SectionSettings())
    assert not [c for ax in fig.axes for c in ax.collections if c.get_gid() == "interval-columns"]
    # a station whose few-layer fit is not fitted is marked as in the section figure (it was
    # drawn like the others here): a misfit grey and cross-hatched, named with its chi2
    from tem.invert.verdict import CODES

    bad = ok.copy(deep=True)
    bad["verdict_code"].values[0] = CODES["misfit"]
    fig = posterior_section_figure(bad, SectionSettings())
    ax1 = fig.axes[0]
    assert [c for c in ax1.collections if c.get_gid() == "verdict-columns"], "misfit not marked"
    assert "model not fitted (misfit)" in [t.get_text() for t in ax1.get_legend().get_texts()]
    assert any("misfit\nchi2" in t.get_text() for t in ax1.texts)


def test_main_section_grid_and_figure_mark_unconverged(run):
    # the main section shows the posterior median; from unconverged chains it is not yet the
    # posterior's, so the grid file carries the verdict and the figure hatches and says it
    from tem.io.models import read_models
    from tem.io.sections import read_section_grid
    from tem.section.plot import section_figure
    from tem.section.stage import section_grid
    from tem.section.settings import SectionSettings

    out = run[0]
    grid = read_section_grid(out / "sections" / "section.nc")
    assert list(grid["station_interval_verdict_code"].values) == [1, 1]
    assert grid["station_interval_verdict_code"].attrs["flag_meanings"] == \
        "converged unconverged unusable"
    assert set(grid["interval_verdict_code"].values.tolist()) == {1}
    assert all(str(t).startswith("intervals unconverged") for t in
               grid["station_interval_verdict"].values)
    fig = section_figure(grid, below_doi="shade", title="t")
    ax = fig.axes[0]
    assert [c for c in ax.collections if c.get_gid() == "interval-columns"], "not hatched"
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "intervals unconverged (R-hat, ESS)" in labels
    texts = {t.get_gid(): t.get_text() for t in ax.texts}
    for sid in STATIONS:
        assert "unconverged" in texts[f"verdict-label-{sid}"]
    assert "sampling unconverged at 2 of 2 stations" in fig._suptitle.get_text()
    # the same models with converged intervals: no hatching, no caution
    ds = read_models(out / "models" / "models.nc")
    ds["interval_verdict_code"] = ds["interval_verdict_code"] * 0
    fig = section_figure(section_grid(ds, SectionSettings(depth_step=25.0)), below_doi="shade",
                         title="t")
    assert not [c for c in fig.axes[0].collections if c.get_gid() == "interval-columns"]
    assert fig._suptitle.get_text() == "t"
    # and the SEG-Y section's textual header names them (docs/exports.md)
    import segyio
    with segyio.open(out / "exports" / "section_depth.sgy", ignore_geometry=True) as f:
        text = f.text[0].decode("ascii", "replace")
    assert "POSTERIOR UNCONVERGED OR UNUSABLE: EM04, EM06" in text


def test_report_station_table(run):
    from tem.io.models import read_models
    from tem.report.html import station_table

    out = run[0]
    rows = station_table(read_models(out / "models" / "models.nc"), None, 2.0)
    assert [r["interval"] for r in rows] == ["unconverged", "unconverged"]
    text = (out / "report.html").read_text()
    assert "<th>intervals</th>" in text and "intervals unconverged at 2" in text
    stations = text[text.index('id="stations"'):]
    table = stations[:stations.index("</table>")]
    for sid in STATIONS:
        row = [r for r in table.split("<tr") if f">{sid}<" in r][0]
        assert ">unconverged<" in row and "intervals unconverged: split R-hat" in row
