"""The export stage's one door: models and section grid -> ``exports/`` (CSV, LAS, SEG-Y).

``tem export`` and ``tem run`` both call :func:`run`. It reads
``models/models.nc`` and ``sections/section.nc`` of a project (``_lci`` files
with ``models = "lci"``) and writes ``exports/models.csv``, ``exports/las/*.las``,
``exports/section_depth.sgy``, ``exports/section_twt.sgy`` and the manifest
``exports/export.json``.
"""
from __future__ import annotations

import contextlib
import json
from pathlib import Path

from ..errors import TemOutputError, input_error, output_error, shorten
from ..io.project import Project
from ..provenance import records_from_json, stage_record
from ..runtime import StageContext, StageResult
from .settings import ExportSettings, kinds_of

__all__ = ["run", "inputs_of", "to_crs"]


def inputs_of(settings: ExportSettings, project_in) -> tuple:
    """(models file, section grid file) of a project for ``settings.models``."""
    p = project_in if isinstance(project_in, Project) else Project(project_in)
    suffix = "_lci" if settings.models == "lci" else ""
    files = (p.folder("models") / f"models{suffix}.nc", p.folder("sections") / f"section{suffix}.nc")
    for f, stage in zip(files, ("invert", "section")):
        if not f.is_file():
            raise input_error("file", f"missing (run the {stage} stage first)", f)
    return files


def to_crs(ds, src, dst, file=None):
    """Copy of a models or section Dataset with x, y (and line vertices) in EPSG ``dst``."""
    from ..io.crs import transform_xy

    out = ds.copy()
    for cx, cy in (("x", "y"), ("line_x", "line_y")):
        if cx in ds and cy in ds:
            x, y = transform_xy(ds[cx].values, ds[cy].values, src, dst, "epsg", file)
            out[cx] = (ds[cx].dims, x, ds[cx].attrs)
            out[cy] = (ds[cy].dims, y, ds[cy].attrs)
    out.attrs["epsg"] = int(dst)
    return out


def _dt_us(settings):
    return int(round(settings.dt_ms * 1000.0))


def run(settings: ExportSettings, project_in, out, ctx: StageContext = StageContext()) -> StageResult:
    """Write the exports of the models and section grid of ``project_in`` into ``OUT/exports``."""
    from ..io.atomic import write_text_atomic
    from ..io.models import read_models, write_models_csv
    from ..io.sections import read_section_grid
    from ..section.profile import depth_to_twt
    from ..section.stage import section_grid, settings_of_grid
    from . import las as las_io
    from . import segy

    project = out if isinstance(out, Project) else Project(out)
    mfile, sfile = inputs_of(settings, project_in)
    what = kinds_of(settings)
    dest = project.folder("exports")
    models = read_models(mfile)
    grid = read_section_grid(sfile)
    epsg = int(models.attrs.get("epsg", 0) or 0)
    if epsg:        # models hold projected metres: a geographic code would label them wrong
        from ..io.crs import check_projected
        check_projected(epsg, "epsg", mfile)
    sp = settings_of_grid(grid, sfile)
    src_models, src_epsg = models, epsg
    if settings.epsg is not None and settings.epsg != epsg:
        from ..io.crs import check_projected
        check_projected(settings.epsg, "epsg")
        if not epsg:
            raise input_error("epsg", "the models have no CRS (epsg 0): give the survey an epsg "
                              "to export in another system", mfile)
        models = to_crs(models, epsg, settings.epsg, mfile)
        grid = to_crs(grid, epsg, settings.epsg, sfile)
        epsg = int(settings.epsg)
    table = segy.read_velocity_table(settings.velocity) if "segy-twt" in what else None
    if "segy-twt" in what and sp.vertical != "depth":
        raise input_error("vertical", "the two-way-time SEG-Y is computed from depth below surface; "
                          "make the section with vertical = depth", sfile)
    step_mm = round(float(grid.attrs["depth_step"]) * 1000.0)
    if "segy-depth" in what and (abs(float(grid.attrs["depth_step"]) * 1000.0 - step_mm) > 1e-6
                                 or not 1 <= step_mm <= 65535):
        raise input_error("depth_step", "the depth step must be a whole number of millimetres "
                          "in 1..65535 for SEG-Y (bytes 3217-3218)", sfile)
    if "segy-twt" in what:     # checked before anything is written (nothing half-exported)
        max_twt = (settings.max_twt_ms * 1e-3 if settings.max_twt_ms is not None
                   else float(depth_to_twt(float(grid["depth"].values[-1]), *table)))
        dt = _dt_us(settings) * 1e-6
        n = int(max_twt / dt + 1e-9) + 1 if dt > 0 and max_twt > 0 else 0
        if n > 65535:
            raise input_error("max_twt_ms", f"{max_twt * 1e3:g} ms at {dt * 1e3:g} ms is {n} "
                              "samples, above the SEG-Y rev 1 limit 65535 (bytes 3221-3222): "
                              "lower max_twt_ms or raise dt_ms")
    # the manifest describes the products: withdrawn before the first is rewritten, so an
    # export stopped part-way leaves none describing the earlier ones
    _withdraw(dest / "export.json")
    written, failed = [], {}

    def attempt(target, write):
        """Write one product; a failed write is noted and the others are still written (the
        earlier file at ``target`` is removed: it would pass for this export's)."""
        try:
            written.append(write())
        except TemOutputError as exc:
            failed[Path(target)] = exc.strerror
            with contextlib.suppress(OSError):
                if Path(target).is_file():
                    Path(target).unlink()

    if "csv" in what:
        attempt(dest / "models.csv", lambda: write_models_csv(models, dest / "models.csv"))
    if "las" in what:
        for path, write in las_io.las_files(models, dest / "las", settings.las_step,
                                            settings.las_bottom, settings.las_null_below_doi,
                                            source=str(mfile)):
            attempt(path, write)
    if "segy-depth" in what:
        data, first, step = segy.depth_section_traces(grid, settings.segy_value,
                                                      settings.segy_below_doi)
        text = segy.describe(grid, sp.vertical, step, settings.segy_value, settings.segy_below_doi,
                             epsg, str(mfile))
        attempt(dest / "section_depth.sgy", lambda: segy.write_segy(
            dest / "section_depth.sgy", data, grid, step_mm, first, sp.vertical, text,
            settings.line_number))
    if "segy-twt" in what:
        data, _, tgrid, doi_twt = segy.twt_section_traces(
            lambda d: to_crs(section_grid(src_models, sp, depth=d), src_epsg, epsg)
            if epsg != src_epsg else section_grid(src_models, sp, depth=d),
            table[0], table[1], dt, max_twt,
            settings.segy_value, settings.segy_below_doi)
        if models.attrs.get("stations_without_model"):
            tgrid.attrs["stations_without_model"] = models.attrs["stations_without_model"]
        text = segy.describe(tgrid, "twt", dt, settings.segy_value, settings.segy_below_doi,
                             epsg, str(mfile), settings.velocity)
        attempt(dest / "section_twt.sgy", lambda: segy.write_segy(
            dest / "section_twt.sgy", data, tgrid, _dt_us(settings), 0.0, "twt", text,
            settings.line_number, doi_twt=doi_twt))
    inputs = [mfile, sfile] + ([Path(settings.velocity)] if table is not None else [])
    record = stage_record("export", settings.as_dict(), inputs=inputs)
    manifest = {"tem_format": "export-manifest", "format_version": "1.0",
                "files": [Path(p).relative_to(dest).as_posix() for p in written],
                "failed": {Path(p).relative_to(dest).as_posix(): why for p, why in failed.items()},
                "provenance": records_from_json(models.attrs.get("provenance")) + [record]}
    written.append(write_text_atomic(dest / "export.json",
                                     json.dumps(manifest, indent=1, sort_keys=True) + "\n"))
    n_las = sum(1 for p in written if Path(p).suffix == ".las")
    others = ", ".join(k for k in what if k != "las")
    notes = [f"{len(written)} files in {dest} ({n_las} LAS; {others})"]
    from ..io.models import without_model

    without = without_model(models)
    if without:
        why = "; ".join(f"{k} ({shorten(v, 80)})" for k, v in without.items())
        full = " (in full: the models file's stations_without_model)" \
            if any(len(v) > 80 for v in without.values()) else ""
        notes.append(f"no model of {len(without)} station(s), so no LAS file and no trace of "
                     f"their own: {why}{full}")
    return StageResult(outputs=[str(p) for p in written], inputs=record["inputs"], notes=notes,
                       failed=_failed_line(failed))


def _withdraw(path: Path):
    try:
        path.unlink(missing_ok=True)
    except OSError as exc:
        raise output_error(path, exc) from None


def _failed_line(failed: dict, shown: int = 3) -> str:
    """One line naming the files an export could not write (the first ``shown`` and a count)."""
    if not failed:
        return ""
    whys = list(failed.values())
    more = f"; and {len(whys) - shown} more" if len(whys) > shown else ""
    return (f"could not write {len(whys)} file(s), the others are written and listed in "
            f"export.json: {'; '.join(whys[:shown])}{more}")

