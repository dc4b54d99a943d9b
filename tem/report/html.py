"""Quality-control report: one HTML file linking figures beside it.

The report is a single HTML file with inline CSS and no scripts. Figures are
linked as relative paths (``<img src="figures/section.png">``), so the report
and its figure folder can be moved together; with ``embed=True`` the PNGs are
written into the page as base64 data instead. Every linked file must exist
when the report is written.

Contents: the safety caution, a station table (identifier, coordinates,
chi-square, DOI, usable gates, status), section figures, model figures, and
per-station figures supplied by earlier stages (decays and fits).
"""
from __future__ import annotations

import base64
import datetime as _dt
import html
import os
from pathlib import Path

import numpy as np

from .. import SAFETY_NOTE, __version__
from ..errors import input_error
from ..invert.verdict import FAILURES
from ..io.atomic import write_text_atomic

__all__ = ["station_table", "render_report", "write_report", "STATUS_OK", "STATUS_MISFIT",
           "STATUS_NONE"]

STATUS_OK = "ok"
STATUS_MISFIT = "check fit"
STATUS_NONE = "no model"
#: Statuses counted as a good fit in the station table.
FITTED = (STATUS_OK, "fitted")

_CSS = """
body{font-family:system-ui,sans-serif;margin:1.5em auto;max-width:1200px;color:#1d2327;padding:0 1em}
h1{font-size:1.5em;border-bottom:3px solid #b5452b;padding-bottom:.2em}
h2{font-size:1.15em;margin-top:1.8em;color:#7a2e1c}
.caution{background:#fff4e0;border-left:6px solid #d9822b;padding:.6em 1em;margin:1em 0}
table{border-collapse:collapse;font-size:.9em}
th,td{border:1px solid #c8ccd0;padding:.25em .6em;text-align:right}
th{background:#eef0f2}td.id,td.status{text-align:left}
tr.check td.status{color:#8a6d00;font-weight:600}
tr.reoccupy td.status{color:#a4281b;font-weight:700}
figure{margin:1em 0}figure img{max-width:100%;border:1px solid #dde}
figcaption{font-size:.85em;color:#555}
.meta{font-size:.8em;color:#666}
"""


def station_table(models, station_info, chi2_limit):
    """Rows of the station table.

    Parameters
    ----------
    models : xarray.Dataset
        Models file contents.
    station_info : dict or None
        Per station id, optional ``usable_gates`` (int) and ``status`` (str)
        from earlier stages; a given status replaces the derived one.
    chi2_limit : float
        For a models file without verdicts only: chi-square per datum above
        which the status is "check fit" (common practice, no source). With
        verdicts (docs/inversion.md, "Verdicts") the status is the verdict
        (fitted, misfit, stalled, parameter-at-bound, degenerate-layer).

    Returns
    -------
    list of dict
        Keys: station, x, y, z, chi2, doi, usable_gates, status, reasons, interval (the
        verdict on the posterior intervals, ``converged`` or ``unconverged``; "" for models
        without posterior sampling), interval_text and qc (the evening QC verdict the
        models file carries for the station, ``good``, ``check`` or ``reoccupy``; "" when
        it records none).
    """
    from ..io.models import interval_words, model_verdicts, qc_verdicts

    info = station_info or {}
    verdicts = model_verdicts(models)
    intervals = interval_words(models)
    qcs = qc_verdicts(models)
    interval_text = (models["interval_verdict"].values.astype(str)
                     if "interval_verdict" in models.variables else [""] * len(intervals))
    rows = []
    for i, sid in enumerate(models["station"].values.astype(str)):
        chi2 = float(models["chi2"].values[i])
        extra = info.get(sid, {})
        v = verdicts[i]
        if "status" in extra:
            status = str(extra["status"])
        elif not np.isfinite(models["resistivity"].values[i]).any():
            status = STATUS_NONE
        elif v is not None:
            status = v["status"]
        elif not np.isfinite(chi2):
            status = STATUS_NONE
        else:
            status = STATUS_OK if chi2 <= chi2_limit else STATUS_MISFIT
        rows.append({
            "station": sid,
            "x": float(models["x"].values[i]),
            "y": float(models["y"].values[i]),
            "z": float(models["z"].values[i]),
            "chi2": chi2,
            "doi": float(models["doi"].values[i]),
            "usable_gates": extra.get("usable_gates", ""),
            "status": status,
            "reasons": v["reasons"] if v is not None else "",
            "interval": intervals[i],
            "interval_text": str(interval_text[i]),
            "qc": qcs[i]["verdict"] if qcs[i] else "",
        })
    return rows


def _fmt(v, digits):
    if isinstance(v, str):
        return html.escape(v)
    return "" if v is None or not np.isfinite(v) else f"{v:.{digits}f}"


def _figure_html(path, base, caption, embed):
    path = Path(path)
    if not path.is_file():
        raise input_error("figure", "linked figure file does not exist", path)
    if embed and path.suffix.lower() == ".png":
        data = base64.b64encode(path.read_bytes()).decode("ascii")
        src = f"data:image/png;base64,{data}"
    else:
        src = Path(os.path.relpath(path.resolve(), base.resolve())).as_posix()
    links = ""
    pdf = path.with_suffix(".pdf")
    if pdf.is_file():
        rel = Path(os.path.relpath(pdf.resolve(), base.resolve())).as_posix()
        links = f' <a href="{html.escape(rel)}">PDF</a>'
    cap = html.escape(caption or path.stem)
    return (f'<figure><img src="{html.escape(src)}" alt="{cap}">'
            f"<figcaption>{cap}{links}</figcaption></figure>")


def _fits(models):
    """{station: (verdict status, chi2)} from a models file with verdicts, else {}."""
    from ..io.models import model_verdicts

    if models is None:
        return {}
    out = {}
    for sid, v, c in zip(models["station"].values.astype(str), model_verdicts(models),
                         models["chi2"].values.astype(float)):
        if v is not None:
            out[sid] = (v["status"], c)
    return out


def _verdict_section(qc_rows, qc_figures, base, embed, fits=None):
    """The evening answer: which stations to re-occupy and why, the map, noise against time.

    ``fits`` ({station: (verdict, chi2)}) adds the verdict on each station's
    model, so the first table already says which models do not fit.
    """
    fits = fits or {}
    out = []
    n = {v: sum(r["verdict"] == v for r in qc_rows) for v in ("reoccupy", "check", "good")}
    out.append(f'<h2 id="verdicts">Evening verdict: {n["reoccupy"]} to re-occupy, {n["check"]} to '
               f'check, {n["good"]} good</h2>')
    out.append('<p class="meta">From qc/stations.csv (thresholds: [processing.qc], '
               "docs/qc.md). Extra minutes: recording to add (noise) or to record anew.</p>")
    fit_head = "<th>model fit</th><th>chi2</th>" if fits else ""
    out.append("<table><thead><tr><th>station</th><th>verdict</th><th>extra minutes</th>"
               f"<th>reasons</th>{fit_head}</tr></thead><tbody>")
    for r in qc_rows:
        cls = {"reoccupy": ' class="reoccupy"', "check": ' class="check"'}.get(r["verdict"], "")
        fit = ""
        if fits:
            status, chi2 = fits.get(r["station"], ("no model", np.nan))
            fcls = "" if status == "fitted" else (
                ' style="color:#a4281b;font-weight:700"' if status in FAILURES
                else ' style="color:#8a6d00;font-weight:600"')
            fit = (f"<td class=\"status\"{fcls}>{html.escape(status)}</td>"
                   f"<td>{_fmt(chi2, 2)}</td>")
        out.append(f"<tr{cls}><td class=\"id\">{html.escape(r['station'])}</td>"
                   f"<td class=\"status\">{html.escape(r['verdict'])}</td>"
                   f"<td>{html.escape(r['extra_minutes'])}</td>"
                   f"<td class=\"id\">{html.escape(r['reasons'])}</td>{fit}</tr>")
    out.append("</tbody></table>")
    for item in qc_figures:
        path, caption = item if isinstance(item, (tuple, list)) else (item, None)
        out.append(_figure_html(path, base, caption, embed))
    return out


def render_report(base, models, *, chi2_limit, embed, section_figures=(), model_figures=(),
                  station_figures=None, station_info=None, title="TEM quality-control report",
                  notes=(), qc_rows=(), qc_figures=()):
    """HTML text of the report, with figure links relative to folder ``base``.

    Parameters
    ----------
    base : Path
        Folder the HTML file will live in.
    models : xarray.Dataset or None
        Models file contents (None: the evening part only).
    section_figures, model_figures : sequence of path or (path, caption)
        PNG figures (a PDF with the same stem is linked when present).
    station_figures : dict or None
        Station id -> sequence of path or (path, caption), e.g. decays and
        fits from the gating and inversion stages.
    station_info, chi2_limit
        See :func:`station_table`.
    embed : bool
        Embed PNGs as base64 instead of linking them.
    notes : sequence of str
        Extra paragraphs under the title (e.g. processing parameters).
    qc_rows : sequence of dict
        Rows of ``qc/stations.csv`` (station, verdict, reasons, extra_minutes):
        the report opens with them.
    qc_figures : sequence of path or (path, caption)
        Station map and noise figures shown with the verdicts.
    """
    base = Path(base)
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{html.escape(title)}</title><style>{_CSS}</style></head><body>",
        f"<h1>{html.escape(title)}</h1>",
        f'<p class="caution"><strong>Caution.</strong> {html.escape(SAFETY_NOTE)}</p>',
    ]
    for note in notes:
        out.append(f"<p>{html.escape(str(note))}</p>")
    if qc_rows or qc_figures:
        out += _verdict_section(qc_rows, qc_figures, base, embed, _fits(models))
    if models is not None:
        out += _model_section(models, station_info, chi2_limit, station_figures)
    for heading, anchor, figs in (("Sections", "sections", section_figures),
                                  ("Models", "models", model_figures)):
        if figs:
            out.append(f'<h2 id="{anchor}">{heading}</h2>')
            for item in figs:
                path, caption = item if isinstance(item, (tuple, list)) else (item, None)
                out.append(_figure_html(path, base, caption, embed))
    if station_figures:
        out.append('<h2 id="decays">Decays and fits by station</h2>')
        for sid, figs in station_figures.items():
            out.append(f'<h3 id="st-{html.escape(str(sid))}">{html.escape(str(sid))}</h3>')
            for item in figs:
                path, caption = item if isinstance(item, (tuple, list)) else (item, None)
                out.append(_figure_html(path, base, caption, embed))
    stamp = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    kind = html.escape(str(models.attrs.get("model_kind", ""))) if models is not None else "none"
    out.append(f'<p class="meta">tem {__version__}; model kind {kind}; written {stamp}.</p>')
    out.append("</body></html>")
    return "\n".join(out) + "\n"


def _model_section(models, station_info, chi2_limit, station_figures):
    rows = station_table(models, station_info, chi2_limit)
    epsg = int(models.attrs.get("epsg", 0) or 0)
    out = []
    # counted in words of the fit verdicts, not the evening verdict's ("to check" there)
    n_fail = sum(r["status"].split(";")[0] in FAILURES + (STATUS_MISFIT,) for r in rows)
    n_warn = sum(r["status"].split(";")[0] not in FITTED for r in rows) - n_fail
    sampled = any(r["interval"] for r in rows)
    n_unconv = sum(r["interval"] == "unconverged" for r in rows)
    n_unusable = sum(r["interval"] == "unusable" for r in rows)
    unconv = (f"; intervals unconverged at {n_unconv}" if n_unconv else "") + \
        (f"; intervals unusable at {n_unusable}" if n_unusable else "")
    # a fitted model on a recording to repeat is not one to hand on: the heading counts them
    n_again = sum(r["qc"] == "reoccupy" for r in rows)
    again = f"; {n_again} on a recording to re-occupy" if n_again else ""
    out.append(f'<h2 id="stations">Models by station ({len(rows)}: {len(rows) - n_fail - n_warn} '
               f'fitted, {n_warn} with a warning, {n_fail} not fitted{again}{unconv})</h2>')
    crs = f"EPSG:{epsg}" if epsg else "CRS not given"
    if any(r["reasons"] for r in rows):
        rule = ("status: the verdict on the final fit (fitted within the chi2 tolerance; misfit "
                "fails; stalled, parameter-at-bound and degenerate-layer warn; "
                "docs/inversion.md)")
    else:
        rule = f"status 'check fit' above {chi2_limit:g}"
    if sampled:
        rule += ("; intervals: converged when the chains' largest split R-hat and smallest "
                 "ESS are within the thresholds, else unconverged, a warning: the P10/P50/P90 "
                 "are not yet the posterior's; unusable when the sampled model misfits its "
                 "data (docs/inversion.md, Interval verdict)")
    out.append(f"<p class=\"meta\">Coordinates in m ({html.escape(crs)}); chi2 is chi-square "
               f"per datum of the final fit (target 1; {rule}).</p>")
    with_qc = any(r["qc"] for r in rows)
    if with_qc:
        rule += ("; QC: the evening verdict on the station's recording, which the model rests "
                 "on (reoccupy: the recording is to be repeated; docs/qc.md)")
    iv_head = "<th>intervals</th>" if sampled else ""
    qc_head = "<th>QC</th>" if with_qc else ""
    out.append("<table><thead><tr><th>station</th><th>x (m)</th><th>y (m)</th><th>z (m)</th>"
               "<th>chi2</th><th>DOI (m)</th><th>usable gates</th><th>status</th>"
               f"{iv_head}{qc_head}<th>reasons</th></tr></thead><tbody>")
    for r in rows:
        cls = "" if r["status"] in FITTED and r["qc"] != "reoccupy" else (
            ' class="reoccupy"' if r["status"].split(";")[0] in FAILURES
            or r["qc"] == "reoccupy" else ' class="check"')
        sid = html.escape(r["station"])
        link = f'<a href="#st-{sid}">{sid}</a>' if station_figures and r["station"] in station_figures else sid
        gates = html.escape(str(r["usable_gates"]))
        iv, reasons = "", r["reasons"]
        if sampled:
            style = {"unconverged": ' style="color:#8a6d00;font-weight:600"',
                     "unusable": ' style="color:#a40000;font-weight:600"'}.get(r["interval"], "")
            iv = f"<td class=\"status\"{style}>{html.escape(r['interval'])}</td>"
            if r["interval"] in ("unconverged", "unusable"):
                reasons = "; ".join(x for x in (reasons, r["interval_text"]) if x)
        qc = f"<td class=\"status\">{html.escape(r['qc'])}</td>" if with_qc else ""
        out.append(f"<tr{cls}><td class=\"id\">{link}</td><td>{_fmt(r['x'], 1)}</td>"
                   f"<td>{_fmt(r['y'], 1)}</td><td>{_fmt(r['z'], 1)}</td>"
                   f"<td>{_fmt(r['chi2'], 2)}</td><td>{_fmt(r['doi'], 0)}</td>"
                   f"<td>{gates}</td><td class=\"status\">{html.escape(r['status'])}</td>"
                   f"{iv}{qc}<td class=\"id\">{html.escape(reasons)}</td></tr>")
    out.append("</tbody></table>")
    return out


def write_report(path, models, **kwargs):
    """Write the report (see :func:`render_report`) to ``path`` atomically."""
    path = Path(path)
    text = render_report(path.parent, models, **kwargs)
    return write_text_atomic(path, text)
