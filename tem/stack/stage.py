"""The stack stage's one door: survey + raw recordings -> ``stacked/<station>.nc`` (+ figures).

``tem stack`` and ``tem run`` both call :func:`run`.
"""
from __future__ import annotations

import functools
from pathlib import Path

from ..io.project import Project
from ..provenance import stage_record
from ..runtime import StageContext, StageResult, StationOutcome, map_stations, report_progress
from .settings import StackSettings

__all__ = ["run", "stack_one"]


def stack_one(survey, sid, settings: StackSettings, survey_file, out_path, fig_path):
    """Stack one station (runs in a worker); its product and figure ride back as bytes."""
    from ..errors import input_error
    from ..io.figures import figure_bytes
    from ..io.netcdf import netcdf_bytes
    from ..io.stacked import stacked_dataset
    from ..qc import qc_rows, raw_vs_stacked_figure
    from .station import stack_station

    st = survey.station(sid)
    for j, rx in enumerate(st.receivers):
        if not rx.files:
            # files = [] is for a design survey of tem forward (docs/forward.md); the reader's
            # own line named neither the survey nor the station
            raise input_error(f"station[{sid}].receiver[{j}].files", f"{rx.component}: no "
                              "recording listed (files = [] is for tem forward only)",
                              survey_file)
    chans, timing = stack_station(survey, st, settings, progress=report_progress)
    inputs = ([survey_file] if survey_file else []) + [survey.path(f) for rx in st.receivers
                                                        for f in rx.files]
    rec = stage_record("stack", {"station": sid, **settings.as_dict(), "timing": timing["source"]},
                       inputs=inputs)
    ds = stacked_dataset(survey, st, chans, timing, settings, [rec])
    products = [(out_path, netcdf_bytes(ds))]
    if fig_path:
        products.append((fig_path, figure_bytes(raw_vs_stacked_figure(ds))))
    rows = qc_rows(ds)
    used = sum(r["used"] for r in rows)
    total = sum(r["total"] for r in rows)
    info = {"transients": f"{used}/{total}",
            "timing_source": timing["source"],
            "timing_residual_us": float(timing["residual_rms"]) * 1e6}
    return StationOutcome(sid, "ok", inputs=rec["inputs"], info=info, payload=rows,
                          products=products)


def run(settings: StackSettings, survey, stations, out, ctx: StageContext = StageContext(),
        survey_file=None) -> StageResult:
    """Stack the raw recordings of ``stations`` into ``OUT/stacked/<station>.nc``.

    Parameters
    ----------
    settings : StackSettings
    survey : tem.survey.Survey
    stations : sequence of str
        Station ids, in survey order.
    out : path or Project
        Output folder (docs/pipeline.md layout).
    ctx : StageContext
        Pool, progress and figures.
    survey_file : path, optional
        The survey TOML (its checksum goes into the provenance).

    Returns
    -------
    StageResult
        One outcome per station; ``payload`` holds its QC table rows.
    """
    from ..survey import replace

    project = out if isinstance(out, Project) else Project(out)
    if settings.timing:
        survey = replace(survey, transmitter=replace(survey.transmitter, timing=settings.timing))
    # each task carries a survey of its own station only: with the whole survey every
    # task's arguments grow with the station count (quadratic memory on a cluster,
    # where each task is serialised on its own)
    def args(sid):
        return (replace(survey, stations=[survey.station(sid)]), sid, settings,
                Path(survey_file) if survey_file else None, project.station_file("stacked", sid),
                project.station_figure(sid, "raw") if ctx.figures else None)

    # made when each station is submitted, not all at once; within `tem run` (run_state set)
    # nobody reads the QC table rows, so they are dropped as each station arrives
    res = StageResult(stations=map_stations(
        stack_one, [(sid, functools.partial(args, sid)) for sid in stations], ctx,
        consume=_drop_payload if ctx.run_state is not None else None))
    ok, _ = survey.mains_rule()
    if not ok:
        res.notes.append(f"mains {survey.mains_frequency:g} Hz / (2 x base "
                         f"{survey.transmitter.base_frequency:g} Hz) is not a whole number: the "
                         "stack does not null the mains (docs/stacking.md)")
    return res


def _drop_payload(oc):
    oc.payload = None
