"""The gate stage's one door: ``stacked/<station>.nc`` -> ``gated/<station>.nc`` (+ figures).

``tem gate`` and ``tem run`` both call :func:`run`. A product is named after
its input file (``stacked/EM01.nc`` -> ``gated/EM01.nc``).
"""
from __future__ import annotations

from pathlib import Path

from ..io.project import Project
from ..provenance import file_sha256
from ..runtime import StageContext, StageResult, StationOutcome, map_stations
from .settings import GateSettings

__all__ = ["run", "gate_one"]


def gate_one(sid, in_path, settings: GateSettings, out_path, fig_path):
    """Gate one stacked file (runs in a worker); its product and figure ride back as bytes."""
    import numpy as np

    from ..io.figures import figure_bytes
    from ..io.netcdf import netcdf_bytes
    from ..io.stacked import read_product
    from ..qc import decay_figure, qc_rows
    from .windows import gate_stacked

    st = read_product(in_path, "stacked")
    g = gate_stacked(st, settings.per_decade, settings.shape, settings.t_min, settings.t_max,
                     settings.snr_min)
    products = [(out_path, netcdf_bytes(g))]
    if fig_path:
        products.append((fig_path, figure_bytes(decay_figure(g, st))))
    rows = qc_rows(st, g)
    usable = int(np.asarray(g["usable"].values).sum())
    bad = [f"{r['status']} {r['channel']}" for r in rows if r["status"] != "ok"]
    info = {"usable_gates": usable, "gates": int(g["usable"].size),
            "qc": ", ".join(bad) if bad else "ok"}
    inputs = [{"file": str(in_path), "sha256": file_sha256(in_path)}]
    if not usable:
        return StationOutcome(sid, "failed", f"{out_path}: usable: no gate above the noise",
                              inputs=inputs, info=info, payload=rows, products=products)
    return StationOutcome(sid, "ok", inputs=inputs, info=info, payload=rows, products=products)


def run(settings: GateSettings, stacked_files, out, ctx: StageContext = StageContext()) -> StageResult:
    """Gate each stacked file into ``OUT/gated/<name>.nc``.

    Parameters
    ----------
    settings : GateSettings
    stacked_files : sequence of path
        Stacked-transient files (``stacked/<station>.nc``); a product is named
        after its file.
    out : path or Project
    ctx : StageContext

    Returns
    -------
    StageResult
        One outcome per file (keyed by file name without suffix); ``payload``
        holds the QC table rows.
    """
    project = out if isinstance(out, Project) else Project(out)
    jobs = []
    for f in map(Path, stacked_files):
        sid = f.stem
        jobs.append((sid, (sid, f, settings, project.station_file("gated", sid),
                           project.station_figure(sid, "decay") if ctx.figures else None)))
    return StageResult(stations=map_stations(gate_one, jobs, ctx))
