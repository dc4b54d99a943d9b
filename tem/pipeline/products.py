"""Profile stages of ``tem run``: sections, exports and the QC report.

Each is ``stage(survey, project, params, ctx) -> StageResult`` like the
station stages, but works on the whole profile at once: the models file of
the invert stage, the apparent-resistivity files of the rhoa stage and the
figures of every stage. Bad parameters raise :class:`tem.errors.TemInputError`.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..errors import input_error
from ..provenance import file_sha256, records_from_json, stage_record
from .project import StageResult

__all__ = ["stage_section", "stage_export", "stage_report", "profile_kwargs", "section_grid",
           "prune"]


def _inputs(paths):
    return [{"file": str(p), "sha256": file_sha256(p)} for p in paths if Path(p).is_file()]


def prune(folder, patterns, keep):
    """Remove files in ``folder`` matching ``patterns`` that are not in ``keep`` (stale products)."""
    keep = {Path(k).resolve() for k in keep}
    for pattern in patterns:
        for p in Path(folder).glob(pattern):
            if p.is_file() and p.resolve() not in keep:
                p.unlink()


def _need(path, stage):
    if not Path(path).is_file():
        raise input_error("file", f"missing (run the stage before {stage} again)", path)
    return Path(path)


def profile_kwargs(models, sp):
    """Keyword arguments of :func:`tem.section.stitch_models` from section parameters."""
    from ..section import polyline_chainage, station_line

    kw = {"order": sp["order"], "lateral": sp["lateral"], "max_gap": sp["max_gap"],
          "vertical": sp["vertical"], "max_depth": sp["max_depth"]}
    if sp["line"]:
        from ..section import read_line_csv
        kw["line"] = read_line_csv(sp["line"])
    if sp["trace_spacing"]:
        x, y = models["x"].values, models["y"].values
        lx, ly = kw["line"] if "line" in kw else station_line(x, y, sp["order"])[:2]
        s, _ = polyline_chainage(x, y, lx, ly)
        n = int(np.floor((s.max() - s.min() + 1e-3) / sp["trace_spacing"])) + 1
        kw["positions"] = np.minimum(s.min() + np.arange(n) * sp["trace_spacing"], s.max())
    return kw


def section_grid(models, sp, depth=None):
    """Stitched section grid of a models Dataset with section parameters ``sp``."""
    from ..section import stitch_models

    return stitch_models(models, sp["depth_step"], depth=depth, **profile_kwargs(models, sp))


# ---------------------------------------------------------------------------- section
def _pseudo_sections(project, sp, rp, ok, formats):
    """Apparent-resistivity pseudo-section per component from ``rhoa/<station>.nc``."""
    from ..io.stacked import read_product
    from ..section.plot import save_figure
    from ..rhoa import diffusion_depth
    from ..rhoa.plot import pseudo_section

    data = []
    for sid in ok:
        f = project.station_file("rhoa", sid)
        if f.is_file():
            data.append((sid, read_product(f, "rhoa")))
    key = "rhoa" if rp["all_time"] else "rhoa_late"
    files = []
    comps = sorted({str(c) for _, r in data for c in r["component"].values})
    for comp in comps:
        st, x, y, tt, rr, dd = [], [], [], [], [], []
        for sid, r in data:
            ch = [i for i, c in enumerate(r["component"].values) if str(c) == comp]
            if not ch:
                continue
            t = r["gate_centre"].values
            rho = np.where(r["usable"].values[ch[0]], r[key].values[ch[0]], np.nan)
            st.append(sid)
            x.append(float(r.attrs["x"]))
            y.append(float(r.attrs["y"]))
            tt.append(t)
            rr.append(rho)
            dd.append(diffusion_depth(rho, t))
        if len(st) < 2 or not any(np.isfinite(v).any() for v in rr):
            continue
        kind = "all-time" if rp["all_time"] else "late-time"
        fig = pseudo_section(st, x, y, tt, rr, dd, axis_kind=rp["section_axis"],
                             title=f"{comp}: {kind} apparent resistivity (usable gates)")
        files.append(save_figure(fig, project.folder("figures") / f"pseudosection_{comp}", formats))
    return files


def stage_section(survey, project, params, ctx) -> StageResult:
    """Section grid, section and model figures, pseudo-sections (and the LCI section)."""
    from ..io.models import read_models
    from ..io.sections import write_section_grid
    from ..section.plot import model_figure, save_figure, section_figure

    res = StageResult()
    figs = project.folder("figures")
    formats = tuple(params["formats"])
    kinds = [("models", "section", "")]
    if ctx.params["invert"]["lci"] and (project.folder("models") / "models_lci.nc").is_file():
        kinds.append(("models_lci", "section_lci", " (laterally constrained)"))
    for mname, sname, label in kinds:
        mfile = _need(project.folder("models") / f"{mname}.nc", "section")
        models = read_models(mfile)
        grid = section_grid(models, params)
        records = records_from_json(models.attrs.get("provenance"))
        records.append(stage_record("section", params, inputs=[mfile]))
        res.inputs += records[-1]["inputs"]
        res.outputs.append(str(write_section_grid(grid, project.folder("sections") / f"{sname}.nc",
                                                  records)))
        title = params["title"] or f"{survey.name}: resistivity section{label}"
        fig = section_figure(grid, title=title, vmin=params["vmin"], vmax=params["vmax"],
                             below_doi=params["below_doi"])
        res.outputs += [str(p) for p in save_figure(fig, figs / sname, formats)]
        n_below = int(np.asarray(grid["below_doi"].values).sum())
        res.notes.append(f"{sname}: {grid.sizes['distance']} columns, "
                         f"{grid['log10_resistivity'].shape[1]} samples each, "
                         f"{n_below} samples below the DOI masked")
        if mname == "models":
            res.outputs += [str(p) for p in save_figure(
                model_figure(models, max_depth=params["max_depth"]), figs / "models", formats)]
    rhoa_ok = ctx.ok.get("rhoa", [])
    res.inputs += _inputs(project.station_file("rhoa", s) for s in rhoa_ok)
    for files in _pseudo_sections(project, params, ctx.params["rhoa"], rhoa_ok, formats):
        res.outputs += [str(p) for p in files]
    prune(figs, ["section*.*", "models.*", "pseudosection_*.*"], res.outputs)
    prune(project.folder("sections"), ["section*.nc"], res.outputs)
    return res


# ---------------------------------------------------------------------------- export
def _whole(value, lo, hi, field, what):
    n = int(round(value))
    if abs(value - n) > 1e-6 or not lo <= n <= hi:
        raise input_error(field, f"{what} must be a whole number in {lo}..{hi}, got {value:g}")
    return n


def stage_export(survey, project, params, ctx) -> StageResult:
    """CSV layer table, LAS pseudo-wells, SEG-Y depth and two-way-time sections."""
    from ..export import las as las_io
    from ..export import segy
    from ..io.atomic import write_text_atomic
    from ..io.models import read_models, write_models_csv
    from ..io.sections import read_section_grid
    from ..section import depth_to_twt

    sp = ctx.params["section"]
    what = params["what"]
    out = project.folder("exports")
    suffix = "_lci" if params["models"] == "lci" else ""
    mfile = _need(project.folder("models") / f"models{suffix}.nc", "export")
    sfile = _need(project.folder("sections") / f"section{suffix}.nc", "export")
    models = read_models(mfile)
    epsg = int(models.attrs.get("epsg", 0) or 0)
    table = segy.read_velocity_table(params["velocity"]) if "segy-twt" in what else None
    if "segy-twt" in what:
        if sp["vertical"] != "depth":
            raise input_error("processing.section.vertical", "the two-way-time SEG-Y is computed "
                              "from depth below surface; use vertical = \"depth\"")
        dt_us = _whole(params["dt_ms"] * 1000.0, 1, 65535, "processing.export.dt_ms",
                       "the sample interval in microseconds")
    written = []
    if "csv" in what:
        written.append(write_models_csv(models, out / "models.csv"))
    if "las" in what:
        written += las_io.write_las_all(models, out / "las", params["las_step"], params["las_bottom"],
                                        params["las_null_below_doi"], source=str(mfile))
    if "segy-depth" in what:
        grid = read_section_grid(sfile)
        dmm = _whole(float(grid.attrs["depth_step"]) * 1000.0, 1, 65535,
                     "processing.section.depth_step", "the depth step in millimetres")
        data, first, step = segy.depth_section_traces(grid, params["segy_value"],
                                                      params["segy_below_doi"])
        text = segy.describe(grid, sp["vertical"], step, params["segy_value"],
                             params["segy_below_doi"], epsg, str(mfile))
        written.append(segy.write_segy(out / "section_depth.sgy", data, grid, dmm, first,
                                       sp["vertical"], text, params["line_number"]))
    if "segy-twt" in what:
        dt = dt_us * 1e-6
        if params["max_twt_ms"] is not None:
            max_twt = params["max_twt_ms"] * 1e-3
        else:
            g0 = read_section_grid(sfile)
            max_twt = float(depth_to_twt(float(g0["depth"].values[-1]), *table))
        data, _, tgrid, doi_twt = segy.twt_section_traces(
            lambda d: section_grid(models, sp, depth=d), table[0], table[1], dt, max_twt,
            params["segy_value"], params["segy_below_doi"])
        text = segy.describe(tgrid, "twt", dt, params["segy_value"], params["segy_below_doi"],
                             epsg, str(mfile), params["velocity"])
        written.append(segy.write_segy(out / "section_twt.sgy", data, tgrid, dt_us, 0.0, "twt",
                                       text, params["line_number"], doi_twt=doi_twt))
    inputs = [mfile, sfile] + ([Path(params["velocity"])] if table is not None else [])
    record = stage_record("export", {**params, "section": sp}, inputs=inputs)
    manifest = {"tem_format": "export-manifest", "format_version": "1.0",
                "files": [Path(p).relative_to(out).as_posix() for p in written],
                "provenance": records_from_json(models.attrs.get("provenance")) + [record]}
    written.append(write_text_atomic(out / "export.json",
                                     json.dumps(manifest, indent=1, sort_keys=True) + "\n"))
    prune(out, ["*.csv", "*.sgy", "las/*.las"], written)
    n_las = sum(1 for p in written if Path(p).suffix == ".las")
    return StageResult(outputs=[str(p) for p in written], inputs=record["inputs"],
                       notes=[f"exports: {len(written)} files ({n_las} LAS; "
                              f"{', '.join(k for k in what if k != 'las')})"])


# ---------------------------------------------------------------------------- report
def _png(path):
    return Path(path) if Path(path).is_file() else None


def stage_report(survey, project, params, ctx) -> StageResult:
    """``report.html``: station table, section, model and per-station figures."""
    from ..io.models import read_models
    from ..report.html import STATUS_MISFIT, STATUS_NONE, STATUS_OK, write_report

    mfile = _need(project.folder("models") / "models.nc", "report")
    models = read_models(mfile)
    figs = project.folder("figures")
    sections = [(figs / "section.png", "Resistivity section (smooth 1D models stitched along the "
                 "profile; veiled and hatched below the depth of investigation)")]
    if _png(figs / "section_lci.png"):
        sections.append((figs / "section_lci.png", "Laterally constrained inversion section"))
    for p in sorted(figs.glob("pseudosection_*.png")):
        comp = p.stem.split("_", 1)[1]
        sections.append((p, f"Apparent-resistivity pseudo-section, {comp}"))
    sections = [(p, c) for p, c in sections if _png(p)]
    model_figs = [(p, "1D models with +-1 std band and DOI") for p in [figs / "models.png"] if _png(p)]
    captions = {"raw": "first raw period against the stack",
                "decay": "gated decay (error bars; crosses below the noise)",
                "rhoa": "apparent resistivity",
                "fit": "data, model response, normalised residuals; model with DOI and "
                       "uncertainty band"}
    station_figs, info = {}, {}
    stations = ctx.state.get("stations", {})
    for st in survey.stations:
        items = [(project.station_figure(st.id, k), f"{st.id}: {c}") for k, c in captions.items()]
        items = [(p, c) for p, c in items if p.is_file()]
        if items and st.id in models["station"].values.astype(str):
            station_figs[st.id] = items
        s = stations.get(st.id, {})
        entry = {}
        if "usable_gates" in s:
            entry["usable_gates"] = s["usable_gates"]
        chi2 = s.get("chi2")
        status = STATUS_NONE if chi2 is None else (STATUS_OK if chi2 <= params["chi2_limit"]
                                                   else STATUS_MISFIT)
        if s.get("qc") and s["qc"] != "ok":
            status += f"; QC {s['qc']}"
        entry["status"] = status
        info[st.id] = entry
    notes = [f"Survey: {survey.name}. Processing parameters and input checksums of every stage "
             "are in run.json beside this report."]
    failed = [(sid, s.get("failed_stage"), s.get("message", "")) for sid, s in stations.items()
              if s.get("failed_stage")]
    for sid, stage, msg in failed:
        notes.append(f"Station {sid} failed at stage {stage}: {msg}")
    title = params["title"] or f"{survey.name}: TEM quality-control report"
    path = write_report(project.report, models, section_figures=sections, model_figures=model_figs,
                        station_figures=station_figs, station_info=info, title=title,
                        chi2_limit=params["chi2_limit"], embed=params["embed"], notes=notes)
    return StageResult(outputs=[str(path)], inputs=_inputs([mfile]))
