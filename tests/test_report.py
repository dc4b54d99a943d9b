"""Tests for tem.report: the HTML QC report.

The checks are structural (no numerical source needed): the page parses with the
standard library's html.parser, every linked file exists relative to the page,
the station table reproduces the models file, the safety caution is present.
The chi-square limit of 2 for "check fit" is common practice, no source.
"""
from __future__ import annotations

import base64
from html.parser import HTMLParser

import numpy as np
import pytest

from profile_fixture import X, synthetic_models
from tem import SAFETY_NOTE
from tem.errors import TemInputError
from tem.io.figures import save_figure
from tem.section.plot import model_figure
from tem.report.html import STATUS_MISFIT, STATUS_NONE, STATUS_OK, station_table, write_report


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.links, self.cells, self.text, self.ids = [], [], [], set()
        self._in_td = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "img":
            self.links.append(a["src"])
        elif tag == "a" and "href" in a:
            self.links.append(a["href"])
        if tag == "td":
            self._in_td = True

    def handle_endtag(self, tag):
        if tag == "td":
            self._in_td = False

    def handle_data(self, data):
        self.text.append(data)
        if self._in_td:
            self.cells.append(data)


@pytest.fixture(scope="module")
def figures(tmp_path_factory):
    root = tmp_path_factory.mktemp("report")
    m = synthetic_models()
    files = save_figure(model_figure(m, [0, 1]), root / "figs" / "models", ("png", "pdf"))
    decay = save_figure(model_figure(m, [3]), root / "elsewhere" / "EP-04_decay", ("png",))
    return root, m, files, decay


def test_station_table_status():
    m = synthetic_models()
    m["chi2"].values[1] = 3.5
    m["chi2"].values[2] = np.nan
    rows = station_table(m, {"EP-05": {"usable_gates": 17, "status": "re-occupy"}}, chi2_limit=2.0)
    assert [r["status"] for r in rows] == [STATUS_OK, STATUS_MISFIT, STATUS_NONE, STATUS_OK, "re-occupy"]
    assert rows[4]["usable_gates"] == 17 and rows[0]["usable_gates"] == ""
    assert rows[3]["x"] == X[3]


def test_report_links_resolve_and_contents(figures):
    root, m, files, decay = figures
    out = root / "out" / "report.html"
    write_report(out, m, section_figures=[(files[0], "a section")], model_figures=[files[0]],
                 station_figures={"EP-04": [(decay[0], "decay & fit <EP-04>")]},
                 station_info={"EP-01": {"usable_gates": 21}}, chi2_limit=2.0, embed=False)
    page = _Page()
    page.feed(out.read_text(encoding="utf-8"))
    page.close()
    files_linked = [ln for ln in page.links if not ln.startswith("#")]
    assert "../figs/models.png" in files_linked and "../figs/models.pdf" in files_linked
    assert "../elsewhere/EP-04_decay.png" in files_linked
    for link in files_linked:
        assert (out.parent / link).is_file(), link
    # Internal anchors point at existing ids.
    for link in page.links:
        if link.startswith("#"):
            assert link[1:] in page.ids
    text = " ".join(page.text)
    assert SAFETY_NOTE in text
    assert "decay & fit <EP-04>" in text  # escaped in the page, restored by the parser
    for sid in m.station.values:
        assert sid in page.cells
    assert "21" in page.cells


def test_report_embed_and_missing_figure(figures, tmp_path):
    root, m, files, _ = figures
    out = write_report(tmp_path / "r.html", m, model_figures=[files[0]], embed=True, chi2_limit=2.0)
    html = out.read_text(encoding="utf-8")
    data = base64.b64encode(files[0].read_bytes()).decode("ascii")
    assert f"data:image/png;base64,{data}" in html
    with pytest.raises(TemInputError, match=r"nothere\.png: figure"):
        write_report(tmp_path / "r2.html", m, section_figures=[root / "nothere.png"], chi2_limit=2.0,
                     embed=False)
    assert not (tmp_path / "r2.html").exists()


def test_chi2_limit_documented_for_models_without_verdicts(capsys):
    """--chi2-limit marks fits only in a models file without verdicts (a file with verdicts
    shows them): the help and the settings page say so."""
    from pathlib import Path

    from tem.cli import main

    with pytest.raises(SystemExit):
        main(["report", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "for a models file without verdicts only" in text
    page = (Path(__file__).resolve().parents[1] / "docs" / "settings.md").read_text()
    assert "for a models file without verdicts only" in page


def test_report_names_where_run_json_is(tmp_path):
    """'run.json beside this report' only when it is; a report written elsewhere names it."""
    import json

    from tem.cli import main
    from tem.io.models import write_models

    p = tmp_path / "proj"
    write_models(synthetic_models(), p / "models" / "models.nc")
    (p / "run.json").write_text(json.dumps({"survey": {"name": "Emberline"}, "stations": {},
                                            "stages": {}}))
    assert main(["report", str(p), "--out", str(p)]) == 0
    assert "are in run.json beside this report." in (p / "report.html").read_text()
    assert main(["report", str(p), "--out", str(tmp_path / "elsewhere")]) == 0
    page = (tmp_path / "elsewhere" / "report.html").read_text()
    assert "beside this report" not in page
    assert f"are in {(p / 'run.json').resolve()}." in page
