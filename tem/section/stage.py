"""The section stage's one door: models files -> ``sections/section*.nc`` and figures.

``tem section`` and ``tem run`` both call :func:`run`. A models file
``models<suffix>.nc`` gives ``sections/section<suffix>.nc`` and
``figures/section<suffix>.png`` (and the other formats); the first models
file also gives the model panels ``figures/models.*``.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..io.project import Project
from ..provenance import records_from_json, stage_record
from ..runtime import StageContext, StageResult
from .settings import SECTION, SectionSettings

__all__ = ["run", "profile_kwargs", "section_grid", "settings_of_grid", "check_station_positions",
           "coincident_stations"]


def profile_kwargs(models, settings: SectionSettings) -> dict:
    """Keyword arguments of :func:`tem.section.profile.stitch_models` from the settings."""
    from .profile import polyline_chainage, read_line_csv, station_line

    kw = {"order": settings.order, "lateral": settings.lateral, "max_gap": settings.max_gap,
          "vertical": settings.vertical, "max_depth": settings.max_depth}
    if settings.line:
        kw["line"] = read_line_csv(settings.line)
    if settings.trace_spacing:
        x, y = models["x"].values, models["y"].values
        lx, ly = kw["line"] if "line" in kw else station_line(x, y, settings.order)[:2]
        s, _ = polyline_chainage(x, y, lx, ly)
        # 1 mm keeps the last station when the span is a whole number of spacings
        n = int(np.floor((s.max() - s.min() + 1e-3) / settings.trace_spacing)) + 1
        if n > 100000:
            from ..errors import input_error
            raise input_error("trace_spacing", f"{n} columns; choose a larger spacing")
        kw["positions"] = np.minimum(s.min() + np.arange(n) * settings.trace_spacing, s.max())
    return kw


def section_grid(models, settings: SectionSettings, depth=None):
    """Stitched section grid of a models Dataset (``depth``: explicit sample depths, m)."""
    from .profile import stitch_models

    return stitch_models(models, settings.depth_step, depth=depth, **profile_kwargs(models, settings))


def settings_of_grid(grid, file=None) -> SectionSettings:
    """The section settings a grid file was made with (recorded by :func:`run`)."""
    from ..errors import input_error

    text = grid.attrs.get("section_settings")
    if not text:
        raise input_error("section_settings", "missing: the grid was not written by this "
                          "version's section stage; rerun it", file)
    try:
        values = json.loads(text)
    except (ValueError, RecursionError):
        raise input_error("section_settings", "not valid JSON", file) from None
    if not isinstance(values, dict):
        raise input_error("section_settings", "not a table", file)
    return SECTION.build({k: v for k, v in values.items() if k in SECTION.names})


def run(settings: SectionSettings, models_files, out, ctx: StageContext = StageContext(),
        title_prefix="") -> StageResult:
    """Section grid and figures of each models file into ``OUT/sections`` and ``OUT/figures``."""
    from ..io.figures import save_figure
    from ..io.models import read_models
    from ..io.sections import write_section_grid
    from .plot import model_figure, section_figure
    from .profile import read_line_csv

    project = out if isinstance(out, Project) else Project(out)
    res = StageResult()
    formats = tuple(settings.formats)
    figs = project.folder("figures")
    for k, mfile in enumerate(map(Path, models_files)):
        suffix = mfile.stem[len("models"):] if mfile.stem.startswith("models") else f"_{mfile.stem}"
        sname = f"section{suffix}"
        models = read_models(mfile)
        check_station_positions(models, read_line_csv(settings.line) if settings.line else None,
                                mfile, settings.line)
        grid = section_grid(models, settings)
        grid.attrs["section_settings"] = json.dumps(settings.as_dict(), sort_keys=True)
        if models.attrs.get("stations_without_model"):     # interpolated across: say so
            grid.attrs["stations_without_model"] = models.attrs["stations_without_model"]
        records = records_from_json(models.attrs.get("provenance"))
        records.append(stage_record("section", settings.as_dict(), inputs=[mfile]))
        res.inputs += records[-1]["inputs"]
        res.outputs.append(str(write_section_grid(grid, project.folder("sections") / f"{sname}.nc",
                                                  records)))
        n_below = int(np.asarray(grid["below_doi"].values).sum())
        res.notes.append(f"{sname}.nc: {grid.sizes['distance']} columns, "
                         f"{grid['log10_resistivity'].shape[1]} samples each, "
                         f"{n_below} samples below the DOI masked")
        if not ctx.figures:
            continue
        kind = str(models.attrs.get("model_kind", "smooth"))
        title = settings.title or f"{title_prefix}resistivity section ({kind} 1D models)"
        fig = section_figure(grid, title=title, vmin=settings.vmin, vmax=settings.vmax,
                             below_doi=settings.below_doi)
        res.outputs += [str(p) for p in save_figure(fig, figs / sname, formats, dpi=150)]
        if "res_p50" in models:      # posterior products (model kind posterior)
            from .posterior_plot import posterior_section_figure
            res.outputs += [str(p) for p in save_figure(
                posterior_section_figure(models, settings), figs / f"{sname}_posterior", formats,
                dpi=150)]
        if k == 0:
            res.outputs += [str(p) for p in save_figure(
                model_figure(models, max_depth=settings.max_depth), figs / "models", formats,
                dpi=150)]
    return res


def coincident_stations(x, y, ids):
    """The first two stations at the same x, y, as a pair of ``ids`` entries, or None.

    A profile (pseudo-section or section) cannot tell two such stations apart.
    """
    seen = {}
    for i, key in enumerate(zip(np.asarray(x, float).tolist(), np.asarray(y, float).tolist())):
        if key in seen:
            return ids[seen[key]], ids[i]
        seen[key] = i
    return None


def check_station_positions(models, line=None, file=None, line_file=None):
    """Refuse stations a section cannot tell apart, naming them and the file at fault.

    Two stations of ``models`` at the same x, y (``file``: the models file), or
    two stations projecting onto the same point of the profile ``line`` (off
    its ends, or on one perpendicular; ``line_file``). Without this the
    section failed with 'two consecutive polyline vertices coincide' or
    'station chainages must be strictly increasing', naming neither.
    """
    from ..errors import input_error
    from .profile import polyline_chainage

    x = np.asarray(models["x"].values, float)
    y = np.asarray(models["y"].values, float)
    ids = [str(s) for s in (models["station"].values if "station" in models.coords
                            else range(x.size))]
    same = coincident_stations(x, y, ids)
    if same:
        i = ids.index(same[0])
        raise input_error("x, y", f"stations {same[0]} and {same[1]} are at the same "
                          f"position ({x[i]:g}, {y[i]:g}); a section needs distinct "
                          "positions", file)
    if line is None or x.size < 2:
        return
    chain, _ = polyline_chainage(x, y, line[0], line[1])
    order_ = np.argsort(chain, kind="stable")
    same = np.flatnonzero(np.diff(chain[order_]) <= 1e-6)
    if same.size:
        a, b = order_[same[0]], order_[same[0] + 1]
        raise input_error("line", f"stations {ids[a]} and {ids[b]} project onto the same point "
                          f"of the line (chainage {chain[a]:.1f} m): is the line off their end, "
                          "or across the profile?", line_file)
