"""Station stages of ``tem run``: stack, gate, apparent resistivity, inversion.

Each stage is ``stage(survey, project, params, ctx) -> StageResult``: it
processes the stations in ``ctx.stations`` (in a process pool when
``ctx.executor`` is set), writes one product per station atomically into its
folder of the project, and returns per-station outcomes. A station that fails
is reported and the others go on. The per-station work functions are plain
top-level functions so that they can run in worker processes.
"""
from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from ..provenance import file_sha256, stage_record
from .project import StageResult, StationOutcome, map_stations

__all__ = ["stage_stack", "stage_gate", "stage_rhoa", "stage_invert", "inversion_settings"]


def _checksums(paths):
    return [{"file": str(p), "sha256": file_sha256(p)} for p in paths if Path(p).is_file()]


def _save_png(fig, path):
    from ..section.plot import save_figure
    return save_figure(fig, Path(path).with_suffix(""), formats=("png",), dpi=110)[0]


# ---------------------------------------------------------------------------- stack
def _stack_one(survey, sid, settings_kw, survey_file, out_path, fig_path):
    from ..io.stacked import stacked_dataset, write_dataset
    from ..qc import qc_rows, raw_vs_stacked_figure
    from ..stack import StackSettings, stack_station

    st = survey.station(sid)
    settings = StackSettings(**settings_kw)
    chans, timing = stack_station(survey, st, settings)
    inputs = ([survey_file] if survey_file else []) + [survey.path(f) for rx in st.receivers
                                                        for f in rx.files]
    rec = stage_record("stack", {"station": sid, **settings.as_dict(), "timing": timing["source"]},
                       inputs=inputs)
    ds = stacked_dataset(survey, st, chans, timing, settings, [rec])
    write_dataset(ds, out_path)
    outputs = [str(out_path)]
    if fig_path:
        outputs.append(str(_save_png(raw_vs_stacked_figure(ds), fig_path)))
    rows = qc_rows(ds)
    used = sum(r["used"] for r in rows)
    total = sum(r["total"] for r in rows)
    info = {"transients": f"{used}/{total}",
            "timing_residual_us": float(timing["residual_rms"]) * 1e6}
    return StationOutcome(sid, "ok", outputs=outputs, inputs=rec["inputs"], info=info)


def stage_stack(survey, project, params, ctx) -> StageResult:
    """Stack every station's raw recordings into ``stacked/<station>.nc``."""
    from ..survey import replace

    if params.get("timing"):
        survey = replace(survey, transmitter=replace(survey.transmitter, timing=params["timing"]))
    kw = {"estimator": params["estimator"], "huber_k": params["huber_k"], "trim": params["trim"],
          "reject_sigma": params["reject_sigma"], "transient_rms": params["transient_rms"],
          "n_batches": params["batches"], "detrend": params["detrend"]}
    from ..stack import StackSettings
    StackSettings(**kw)  # check once, before any station (TemInputError names the field)
    figs = ctx.params["report"]["station_figures"]
    jobs = [(sid, (survey, sid, kw, ctx.survey_file, project.station_file("stacked", sid),
                   project.station_figure(sid, "raw") if figs else None))
            for sid in ctx.stations]
    res = StageResult(stations=map_stations(_stack_one, jobs, ctx))
    ok, _ = survey.mains_rule()
    if not ok:
        res.notes.append(f"mains {survey.mains_frequency:g} Hz / (2 x base "
                         f"{survey.transmitter.base_frequency:g} Hz) is not a whole number: the "
                         "stack does not null the mains (docs/stacking.md)")
    return res


# ---------------------------------------------------------------------------- gate
def _worst_qc(rows):
    bad = [f"{r['status']} {r['channel']}" for r in rows if r["status"] != "ok"]
    return ", ".join(bad) if bad else "ok"


def _gate_one(sid, in_path, out_path, params, fig_path):
    from ..gate.windows import gate_stacked
    from ..io.stacked import read_product, write_dataset
    from ..qc import decay_figure, qc_rows

    st = read_product(in_path, "stacked")
    g = gate_stacked(st, params["per_decade"], params["shape"], params["t_min"], params["t_max"],
                     params["snr_min"])
    write_dataset(g, out_path)
    outputs = [str(out_path)]
    if fig_path:
        outputs.append(str(_save_png(decay_figure(g, st), fig_path)))
    rows = qc_rows(st, g)
    usable = int(np.asarray(g["usable"].values).sum())
    info = {"usable_gates": usable, "gates": int(g["usable"].size), "qc": _worst_qc(rows)}
    status = "ok" if usable else "failed"
    msg = "" if usable else f"{out_path}: usable: no gate above the noise"
    return StationOutcome(sid, status, msg, outputs=outputs, inputs=_checksums([in_path]), info=info)


def stage_gate(survey, project, params, ctx) -> StageResult:
    """Gate every stacked station into ``gated/<station>.nc`` (docs/data-model.md)."""
    figs = ctx.params["report"]["station_figures"]
    jobs = [(sid, (sid, project.station_file("stacked", sid), project.station_file("gated", sid),
                   params, project.station_figure(sid, "decay") if figs else None))
            for sid in ctx.stations]
    return StageResult(stations=map_stations(_gate_one, jobs, ctx))


# ---------------------------------------------------------------------------- rhoa
def _rhoa_one(sid, in_path, out_path, params, fig_path):
    from ..io.stacked import read_product, write_dataset
    from ..rhoa.sounding import sounding_rhoa, table_rows

    ds = read_product(in_path, "gated")
    res = sounding_rhoa(ds, all_time=params["all_time"], rho_min=params["rho_min"],
                        rho_max=params["rho_max"], points_per_decade=params["per_decade"],
                        source=str(in_path))
    write_dataset(res, out_path)
    outputs = [str(out_path)]
    if fig_path:
        from ..rhoa.plot import sounding_figure
        outputs.append(str(_save_png(sounding_figure(res, title=f"station {sid}: apparent "
                                                     "resistivity"), fig_path)))
    key = "rhoa" if params["all_time"] else "rhoa_late"
    rho = res[key].values
    info = {"rhoa_converted": int(np.isfinite(rho).sum())}
    return StationOutcome(sid, "ok", outputs=outputs, inputs=_checksums([in_path]), info=info,
                          payload=table_rows(res))


def _write_rows_csv(path, columns, rows):
    from ..io.atomic import atomic_path

    with atomic_path(path, suffix=".csv") as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh, lineterminator="\n")
            w.writerow(columns)
            for r in rows:
                w.writerow(["" if isinstance(v, float) and not np.isfinite(v) else
                            (repr(v) if isinstance(v, float) else v) for v in r])
    return Path(path)


def stage_rhoa(survey, project, params, ctx) -> StageResult:
    """All-time and late-time apparent resistivity into ``rhoa/<station>.nc`` and ``rhoa.csv``."""
    from ..rhoa.sounding import TABLE_COLUMNS

    figs = ctx.params["report"]["station_figures"]
    jobs = [(sid, (sid, project.station_file("gated", sid), project.station_file("rhoa", sid),
                   params, project.station_figure(sid, "rhoa") if figs else None))
            for sid in ctx.stations]
    res = StageResult(stations=map_stations(_rhoa_one, jobs, ctx))
    rows = [r for oc in res.stations.values() if oc.status == "ok" for r in oc.payload]
    for oc in res.stations.values():
        oc.payload = None
    res.outputs.append(str(_write_rows_csv(project.folder("rhoa") / "rhoa.csv", TABLE_COLUMNS, rows)))
    return res


# ---------------------------------------------------------------------------- invert
def inversion_settings(params):
    """:class:`tem.invert.station.InversionSettings` and error floors from invert parameters."""
    from ..errors import input_error
    from ..invert.data import parse_floors
    from ..invert.station import InversionSettings

    try:
        settings = InversionSettings(
            n_layers=params["layers"], depth_min=params["depth_min"], depth_max=params["depth_max"],
            target=params["target"], max_iter=params["max_iter"],
            ref_resistivity=params["ref_resistivity"], ref_weight=params["ref_weight"],
            doi_method=params["doi_method"], doi_threshold=params["doi_threshold"])
    except ValueError as exc:
        field, _, problem = str(exc).partition(":")
        raise input_error(f"processing.invert.{field.strip()}", problem.strip() or str(exc)) from None
    return settings, parse_floors(params["floor"])


def _invert_one(sid, in_path, settings, floors, fig_path):
    from ..invert.batch import StationFailure, invert_file

    r = invert_file(in_path, settings, floors)
    if isinstance(r, StationFailure):
        return StationOutcome(sid, "failed", r.message.splitlines()[0])
    outputs = []
    if fig_path:
        from ..invert.plot import save_figure, station_figure
        outputs.append(str(save_figure(station_figure(r), fig_path, dpi=110)))
    info = {"chi2": float(r.chi2), "doi": float(r.doi), "converged": bool(r.converged),
            "invert_message": "" if r.converged else str(r.message)}
    return StationOutcome(sid, "ok", outputs=outputs, inputs=_checksums([in_path]), info=info,
                          payload=r)


def stage_invert(survey, project, params, ctx) -> StageResult:
    """Smooth 1D inversion per station (``models/models.nc``), optionally LCI of the profile."""
    from ..invert.batch import models_from_results, write_fit_csv
    from ..io.models import write_models, write_models_csv

    settings, floors = inversion_settings(params)
    figs = ctx.params["report"]["station_figures"]
    jobs = [(sid, (sid, project.station_file("gated", sid), settings, floors,
                   project.station_figure(sid, "fit") if figs else None))
            for sid in ctx.stations]
    res = StageResult(stations=map_stations(_invert_one, jobs, ctx))
    results = [oc.payload for oc in res.stations.values() if oc.status == "ok"]
    for oc in res.stations.values():
        oc.payload = None
    res.inputs = [i for oc in res.stations.values() for i in oc.inputs]
    folder = project.folder("models")
    if not results:
        from .products import prune
        prune(folder, ["models*.nc", "*.csv"], [])   # no stale models for later stages
        res.failed = "no station could be inverted"
        return res
    record = stage_record("invert", params)
    record["inputs"] = res.inputs
    epsg = int(survey.epsg or 0)
    ds = models_from_results(results, kind="smooth", epsg=epsg)
    res.outputs += [str(write_models(ds, folder / "models.nc", record=record)),
                    str(write_models_csv(ds, folder / "models.csv")),
                    str(write_fit_csv(results, folder / "fit.csv"))]
    if params["lci"]:
        res.outputs += _lci(results, project, params, settings, floors, record, epsg, res)
    from .products import prune
    prune(folder, ["models*.nc", "*.csv"], res.outputs)
    return res


def _lci(results, project, params, settings, floors, record, epsg, res):
    """Laterally constrained inversion of the stations with a smooth model."""
    from ..errors import TemInputError
    from ..invert.batch import load_station, models_from_results, write_fit_csv
    from ..invert.station import lci_profile
    from ..io.models import write_models

    if len(results) < 2:
        res.failed = "laterally constrained inversion needs two or more inverted stations"
        return []
    try:
        sds = [load_station(project.station_file("gated", r.station), floors) for r in results]
        lres = lci_profile(sds, settings, lateral_weight=params["lateral_weight"])
        ds = models_from_results(lres, kind="lci", epsg=epsg)
    except (TemInputError, ValueError, np.linalg.LinAlgError, FloatingPointError) as exc:
        res.failed = f"laterally constrained inversion failed: {exc}".splitlines()[0]
        return []
    folder = project.folder("models")
    chi2 = np.array([r.chi2 for r in lres])
    res.notes.append(f"laterally constrained inversion: {len(lres)} stations, chi2 per station "
                     f"{chi2.min():.2f}-{chi2.max():.2f}")
    return [str(write_models(ds, folder / "models_lci.nc", record=dict(record, stage="invert-lci"))),
            str(write_fit_csv(lres, folder / "fit_lci.csv"))]
