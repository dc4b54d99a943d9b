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

import numpy as np
import pytest

from tem.invert.interval import judge_interval

from gated_fixture import write_two_stations

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


# 2 chains of 50 draws after 50 burn-in steps: far too short for a 4-layer posterior, so the
# split R-hat is large and the ESS small (deterministic: fixed seed)
TINY = ["--posterior-draws", "50", "--posterior-burn", "50", "--posterior-chains", "2"]


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    from rich.console import Console

    from tem.cli.invert import fit_table
    from tem.invert.settings import INVERT
    from tem.invert.stage import run
    from tem.runtime import StageContext

    folder = tmp_path_factory.mktemp("gated")
    write_two_stations(folder)
    out = tmp_path_factory.mktemp("proj")
    settings = INVERT.cls(kind="posterior", few_layers=3, few_search="local", posterior_draws=50,
                          posterior_burn=50, posterior_chains=2, posterior_restarts=0)
    res = run(settings, sorted(folder.glob("*.nc")), out, StageContext(figures=True))
    console = Console(record=True, width=200, file=io.StringIO())
    fit_table(res, console)
    return folder, out, res, console.export_text()


def test_unconverged_station_is_marked_everywhere(tiny):
    from tem.export.las import las_for_station, write_las
    from tem.io.models import read_models
    from tem.pipeline.summary import summary_table
    from rich.console import Console

    folder, out, res, console_text = tiny
    infos = {sid: oc.info for sid, oc in res.stations.items()}
    assert set(infos) == {"E0", "E1"}
    for sid, info in infos.items():
        assert info["interval_verdict"] == "unconverged", info
        assert info["interval_code"] == 1
        assert info["interval_text"].startswith("intervals unconverged: split R-hat ")
        assert f"R-hat {info['rhat_max']:.2f}" in info["interval_text"]
        assert info["verdict"] != "unconverged"           # the fit verdict stays its own
    # run.json: the station info goes in as plain JSON (stages.invert.stations.*, stations.*)
    state = json.loads(json.dumps({
        "survey": {"name": "Emberline"},
        "stages": {"invert": {"stations": {s: {"status": "ok", **i} for s, i in infos.items()}}},
        "stations": infos}))
    assert state["stations"]["E0"]["interval_verdict"] == "unconverged"
    # the closing summary of tem run says it in the notes column, with the numbers
    rc = Console(record=True, width=300, file=io.StringIO())
    rc.print(summary_table(state))
    text = rc.export_text()
    for sid, info in infos.items():
        row = next(ln for ln in text.splitlines() if ln.strip().startswith(sid))
        assert "intervals unconverged: split R-hat" in row and info["verdict"] in row
    # tem invert's table
    assert console_text.count("intervals unconverged") == 2
    # models.nc: CF flags like the fit verdict
    ds = read_models(out / "models" / "models.nc")
    assert list(ds["interval_verdict_code"].values) == [1, 1]
    assert list(ds["interval_verdict_code"].attrs["flag_values"]) == [0, 1]
    assert ds["interval_verdict_code"].attrs["flag_meanings"] == "converged unconverged"
    assert all(str(t).startswith("intervals unconverged") for t in ds["interval_verdict"].values)
    # the verdict is consistent with the stored numbers (R-hat > 1.1 or ESS < 100)
    assert np.all((ds["rhat_max"].values > 1.1) | (ds["ess_min"].values < 100))
    # posterior.csv and models.csv: a column with the word on every row
    for name in ("posterior.csv", "models.csv"):
        with open(out / "models" / name, encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
        assert rows and {r["interval_verdict"] for r in rows} == {"unconverged"}, name
    # LAS: INTV parameter and a warning in ~Other
    import lasio
    las = lasio.read(write_las(las_for_station(ds, 0, 10.0), out / "E0.las"))
    assert las.params["INTV"].value == "UNCONVERGED"
    assert "split R-hat" in str(las.params["INTVR"].value)
    assert "intervals UNCONVERGED" in las.other
    # the stage note names the stations; the exit status stays 0 (a warning)
    assert any("intervals unconverged at 2 of 2 station(s): E0, E1" in n for n in res.notes)
    from tem.cli.common import finish
    from tem.invert.stage import not_fitted
    # exit status: decided by failed stations and misfit fits only, never by the intervals
    assert finish("invert", res, out, not_fitted=not_fitted(res)) == (1 if not_fitted(res) else 0)
    assert all(v == "misfit" for v in not_fitted(res).values())


def test_figures_mark_unconverged_stations(tiny):
    from tem.io.models import read_models
    from tem.section.posterior_plot import posterior_section_figure
    from tem.section.settings import SectionSettings

    folder, out, res, _ = tiny
    ds = read_models(out / "models" / "models.nc")
    fig = posterior_section_figure(ds, SectionSettings())
    ax1, ax2 = fig.axes[:2]                  # the two panels; then the two colour bars
    for ax in (ax1, ax2):
        marked = [c for c in ax.collections if c.get_gid() == "interval-columns"]
        assert marked, "unconverged columns not hatched"
    labels = [t.get_text() for t in ax1.get_legend().get_texts()]
    assert "intervals unconverged (R-hat, ESS)" in labels
    assert {t.get_gid() for t in ax1.texts} >= {"interval-label-E0", "interval-label-E1"}
    # a models file whose intervals converged has no marks
    ok = ds.copy()
    ok["interval_verdict_code"] = ok["interval_verdict_code"] * 0
    fig = posterior_section_figure(ok, SectionSettings())
    assert not [c for ax in fig.axes for c in ax.collections if c.get_gid() == "interval-columns"]
    # the per-station figure was written (its title carries the verdict; checked by eye)
    assert (out / "figures" / "stations" / "E0_fit.png").stat().st_size > 20_000


def test_report_station_table_marks_unconverged(tiny):
    from tem.io.models import read_models
    from tem.report.html import render_report, station_table

    _, out, _, _ = tiny
    ds = read_models(out / "models" / "models.nc")
    rows = station_table(ds, None, 2.0)
    assert [r["interval"] for r in rows] == ["unconverged", "unconverged"]
    text = render_report(out, ds, chi2_limit=2.0, embed=False)
    assert "<th>intervals</th>" in text and "intervals unconverged at 2" in text
    assert text.count("intervals unconverged: split R-hat") == 2
