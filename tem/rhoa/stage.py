"""The apparent-resistivity stage's one door: ``gated/<station>.nc`` -> ``rhoa/<station>.nc``,
``rhoa/rhoa.csv``, sounding figures and pseudo-sections.

``tem rhoa`` and ``tem run`` both call :func:`run`.
"""
from __future__ import annotations

import csv
import io
import os
from pathlib import Path

import numpy as np

from ..io.project import Project
from ..provenance import file_sha256
from ..runtime import StageContext, StageResult, StationOutcome, map_stations
from .settings import RhoaSettings

__all__ = ["run", "rhoa_one", "csv_text", "csv_rows"]


def rhoa_one(sid, in_path, settings: RhoaSettings, out_path, fig_path):
    """Apparent resistivity of one gated file (runs in a worker); products ride back as bytes."""
    from ..io.figures import figure_bytes
    from ..io.netcdf import netcdf_bytes
    from ..io.stacked import read_product
    from .plot import sounding_figure
    from .sounding import sounding_rhoa, table_rows

    ds = read_product(in_path, "gated")
    res = sounding_rhoa(ds, settings, source=str(in_path))
    products = [(out_path, netcdf_bytes(res))]
    if fig_path:
        fig = sounding_figure(res, title=f"station {sid}: apparent resistivity")
        products.append((fig_path, figure_bytes(fig)))
    rho = res["rhoa" if settings.all_time else "rhoa_late"].values
    info = {"rhoa_converted": int(np.isfinite(rho).sum())}
    # the station's rows of rhoa.csv ride back as text: a survey's table is held as
    # its text (about 7 kB per station), not as Python tuples of floats (three times that)
    return StationOutcome(sid, "ok", inputs=[{"file": str(in_path), "sha256": file_sha256(in_path)}],
                          info=info, payload=csv_rows(table_rows(res)), products=products)


def _rows_of(project, sid):
    """CSV rows of a station's apparent-resistivity file (a product kept from an earlier run)."""
    from ..io.stacked import read_product
    from .sounding import table_rows

    return csv_rows(table_rows(read_product(project.station_file("rhoa", sid), "rhoa")))


def _cell(v):
    if isinstance(v, float):
        return "" if not np.isfinite(v) else f"{v:.9g}"
    return v


def csv_rows(rows) -> str:
    """Rows of the ``rhoa.csv`` table as CSV text without the header (9 significant digits)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    for r in rows:
        w.writerow([_cell(v) for v in r])
    return buf.getvalue()


def csv_text(rows) -> str:
    """The ``rhoa.csv`` table (:data:`tem.rhoa.sounding.TABLE_COLUMNS`; 9 significant digits)."""
    return _header() + csv_rows(rows)


def _header() -> str:
    from .sounding import TABLE_COLUMNS

    return ",".join(TABLE_COLUMNS) + "\n"


def _reoccupy(project: Project) -> set:
    """Stations the evening QC table of the project calls reoccupy (none without a table; an
    unreadable one is the gate stage's to refuse, not the figure's)."""
    from ..errors import TemInputError
    from ..qc.verdict import read_stations_csv

    table = project.root / "qc" / "stations.csv"
    if not table.is_file():
        return set()
    try:
        return {r["station"] for r in read_stations_csv(table) if r["verdict"] == "reoccupy"}
    except TemInputError:
        return set()


def pseudo_sections(project: Project, stations, settings: RhoaSettings):
    """One pseudo-section figure per component found at two or more stations.

    One rule for every station, stated in the title: where a gate has two
    all-time roots (Spies & Eggers 1986, Geophysics 51(7)), the figure draws
    the larger one, the branch that joins the late-time apparent resistivity.
    A station's own choice (kept in its product) follows its decay in time and
    can differ from its neighbours'; drawn side by side, such choices make
    false contrasts. Returns ``(written files, notes)``; a component that
    cannot be drawn is named in a note with the reason.
    """
    from ..io.figures import save_figure
    from ..io.stacked import read_product
    from ..section.stage import coincident_stations
    from .late_time import diffusion_depth
    from .plot import pseudo_section

    data = [(sid, read_product(project.station_file("rhoa", sid), "rhoa")) for sid in stations]
    files, notes = [], []
    again = _reoccupy(project)
    for comp in sorted({str(c) for _, r in data for c in r["component"].values}):
        rows = []
        for sid, r in data:
            ch = [i for i, c in enumerate(r["component"].values) if str(c) == comp]
            if ch:
                rows.append((sid, r, ch[0]))
        rr = [np.where(r["usable"].values[c], r["rhoa" if settings.all_time else "rhoa_late"]
                       .values[c], np.nan) for _, r, c in rows]
        if len(rows) < 2 or not any(np.isfinite(v).any() for v in rr):
            notes.append(f"no pseudo-section for {comp}: needs usable apparent resistivity at two "
                         f"or more stations ({len(rows)} with the component)")
            continue
        x = np.array([float(r.attrs["x"]) for _, r, _ in rows])
        y = np.array([float(r.attrs["y"]) for _, r, _ in rows])
        same = coincident_stations(x, y, [sid for sid, _, _ in rows])
        if same:
            # a profile cannot tell them apart: the figure is left out, the stage goes on
            notes.append(f"no pseudo-section for {comp}: stations {same[0]} and {same[1]} are at "
                         "the same position; a profile needs distinct positions")
            continue
        tt = [r["gate_centre"].values for _, r, _ in rows]
        rule = ""
        if settings.all_time:
            two = [np.asarray(r["rhoa_n_roots"].values[c]) > 1 for _, r, c in rows]
            rr = [np.where(t & np.isfinite(v), r["rhoa_high"].values[c], v)
                  for t, v, (_, r, c) in zip(two, rr, rows)]
            n_two = int(sum((t & np.isfinite(v)).sum() for t, v in zip(two, rr)))
            rule = f"; {n_two} two-root gates on the late-time branch"
        dd = [diffusion_depth(v, t) for v, t in zip(rr, tt)]
        kind = "all-time" if settings.all_time else "late-time"
        fig = pseudo_section([sid for sid, _, _ in rows], x, y, tt, rr, dd,
                             axis_kind=settings.section_axis,
                             title=f"{comp}: {kind} apparent resistivity (usable gates{rule})",
                             marked=[sid for sid, _, _ in rows if sid in again])
        files += save_figure(fig, project.folder("figures") / f"pseudosection_{comp}")
    return files, notes


def run(settings: RhoaSettings, gated_files, out, ctx: StageContext = StageContext()) -> StageResult:
    """Apparent resistivity of each gated file into ``OUT/rhoa/`` (+ table and figures).

    Writes ``rhoa/<name>.nc`` per file, ``rhoa/rhoa.csv`` (one row per
    station, channel and gate; not written when no station converts), the
    sounding figures and, with figures on, a pseudo-section per component.
    """
    from ..io.atomic import atomic_path

    project = out if isinstance(out, Project) else Project(out)
    jobs = []
    for f in map(Path, gated_files):
        sid = f.stem
        jobs.append((sid, (sid, f, settings, project.station_file("rhoa", sid),
                           project.station_figure(sid, "rhoa") if ctx.figures else None)))
    res = StageResult(stations=map_stations(rhoa_one, jobs, ctx))
    if not res.ok:
        res.failed = "no station could be converted to apparent resistivity"
        return res
    with atomic_path(project.folder("rhoa") / "rhoa.csv") as tmp:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(_header())
            for sid, oc in res.stations.items():
                if oc.status == "ok":
                    fh.write(oc.payload if oc.payload is not None else _rows_of(project, sid))
                if oc.payload is not None:
                    oc.payload = None
                    res.stations[sid] = oc        # an outcome read is a copy
            fh.flush()
            os.fsync(fh.fileno())
    res.outputs.append(str(project.folder("rhoa") / "rhoa.csv"))
    if ctx.figures:
        files, notes = pseudo_sections(project, res.ok, settings)
        res.outputs += [str(p) for p in files]
        res.notes += notes
    return res
