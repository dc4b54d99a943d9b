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
    from ..qc import channel_measures, decay_figure, qc_rows
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
            # channel flags (dead, clipped, ...), not the evening verdict (qc_verdict): a
            # recording to re-occupy once read "qc: ok" beside "qc_verdict: reoccupy"
            "channel_flags": ", ".join(bad) if bad else "none"}
    inputs = [{"file": str(in_path), "sha256": file_sha256(in_path)}]
    payload = {"rows": rows, "measures": channel_measures(st, g)}
    if not usable:
        # why, when a channel flag says it (e.g. DEAD ex: the evening verdict re-occupies)
        why = f" ({info['channel_flags']})" if bad else ""
        return StationOutcome(sid, "failed", f"{out_path}: usable: no gate above the noise{why}",
                              inputs=inputs, info=info, payload=payload, products=products)
    return StationOutcome(sid, "ok", inputs=inputs, info=info, payload=payload, products=products)


def _measures_of(stacked_file, gated_file):
    """QC measures of a station whose products are on disk (kept from an earlier run)."""
    from ..io.stacked import read_product
    from ..qc import channel_measures

    g = read_product(gated_file, "gated") if Path(gated_file).is_file() else None
    return channel_measures(read_product(stacked_file, "stacked"), g)


def _drop_rows(oc):
    """Within ``tem run`` nobody reads a station's QC table rows: only its measures stay, as
    JSON text (kept on disk with the outcome, not in memory; :class:`tem.runtime.Outcomes`)."""
    if isinstance(oc.payload, dict):
        oc.payload = _measures_text(oc.payload["measures"])


def _measures_text(measures) -> str:
    import json

    return json.dumps([m.as_dict() for m in measures])


def _measures_from(payload):
    """A station's measures from its payload: the stage's dict, or JSON text
    (:func:`_drop_rows`)."""
    import json

    from ..qc import ChannelMeasures

    if isinstance(payload, dict):
        return payload["measures"]
    return [ChannelMeasures(**d) for d in json.loads(payload)]


def evening_verdicts(res, files, project, qc, failed=None):
    """Verdicts of every station from the stage's QC measures; writes ``qc/stations.csv``.

    ``failed`` maps stations that did not reach this stage (e.g. a corrupt
    recording) to their one-line reason; they get a verdict too. Each
    outcome's ``info`` gains ``qc_verdict``, ``qc_reasons`` and ``extra_minutes``.
    The survey is read station by station, twice (the survey medians, then each
    station's rules), never held whole: a station whose products were kept from an
    earlier run is measured from its files once, and its measures kept with its outcome.
    """
    from ..qc import verdicts_of_stations, write_stations_csv
    from ..qc.verdict import whole_minutes

    broken = dict(failed or {})
    for sid, oc in res.stations.items():
        if oc.payload is None and sid in files and (oc.status == "ok" or oc.outputs):
            gated = project.station_file("gated", sid)
            oc.payload = _measures_text(_measures_of(files[sid], gated))
            res.stations[sid] = oc
        elif oc.payload is None and oc.status != "ok" and not oc.outputs:
            broken[sid] = oc.message

    def stations():
        for sid in res.stations:
            payload = res.stations[sid].payload
            if payload is not None:
                yield sid, _measures_from(payload)

    verdicts = verdicts_of_stations(stations, qc, broken)
    for v in verdicts:
        oc = res.stations.get(v.station)
        if oc is not None:
            minutes = whole_minutes(v.extra_minutes)     # as stations.csv and the report
            oc.info.update(qc_verdict=v.verdict, qc_reasons="; ".join(v.reasons),
                           extra_minutes=int(minutes) if minutes else None)
            res.stations[v.station] = oc          # an outcome read is a copy
    res.outputs.append(str(write_stations_csv(project.root, verdicts)))
    return verdicts


def _mark_decay_figures(verdicts, files, project):
    """Redraw the decay figure of every station the evening QC did not call good, with its
    verdict and reasons over the panels (the figure is drawn per station before the
    survey-wide verdicts exist; a station to re-occupy looked like a good one)."""
    from ..io.atomic import write_bytes_atomic
    from ..io.figures import figure_bytes
    from ..io.stacked import read_product
    from ..qc import decay_figure

    for v in verdicts:
        gated = project.station_file("gated", v.station)
        if v.verdict == "good" or v.station not in files or not gated.is_file():
            continue
        fig = decay_figure(read_product(gated, "gated"), read_product(files[v.station], "stacked"),
                           verdict=v)
        write_bytes_atomic(project.station_figure(v.station, "decay"), figure_bytes(fig))


def run(settings: GateSettings, stacked_files, out, ctx: StageContext = StageContext(), qc=None,
        failed=None) -> StageResult:
    """Gate each stacked file into ``OUT/gated/<name>.nc``; the evening QC into ``OUT/qc``.

    Parameters
    ----------
    settings : GateSettings
    stacked_files : sequence of path
        Stacked-transient files (``stacked/<station>.nc``); a product is named
        after its file.
    out : path or Project
    ctx : StageContext
    qc : tem.qc.QCSettings, optional
        Thresholds of the evening verdicts (default: the table's defaults).
    failed : dict, optional
        Stations that did not reach this stage -> one-line reason (they get a
        verdict in ``qc/stations.csv`` too).

    Returns
    -------
    StageResult
        One outcome per file (keyed by file name without suffix) with the
        station's verdict in ``info``; ``payload`` holds the QC table rows.
    """
    project = out if isinstance(out, Project) else Project(out)
    jobs = []
    for f in map(Path, stacked_files):
        sid = f.stem
        jobs.append((sid, (sid, f, settings, project.station_file("gated", sid),
                           project.station_figure(sid, "decay") if ctx.figures else None)))
    res = StageResult(stations=map_stations(
        gate_one, jobs, ctx, consume=_drop_rows if ctx.run_state is not None else None))
    if res.stations or failed:
        verdicts = evening_verdicts(res, {Path(f).stem: Path(f) for f in stacked_files},
                                    project, qc, failed)
        if ctx.figures:
            _mark_decay_figures(verdicts, {Path(f).stem: Path(f) for f in stacked_files},
                                project)
    for sid, oc in res.stations.items():
        if oc.payload is not None:            # the QC table rows stay (a stage command)
            oc.payload = oc.payload.get("rows") if isinstance(oc.payload, dict) else None
            res.stations[sid] = oc
    return res
