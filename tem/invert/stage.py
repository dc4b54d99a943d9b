"""The inversion stage's one door: ``gated/<station>.nc`` -> ``models/`` (+ fit figures).

``tem invert`` and ``tem run`` both call :func:`run`. Writes, under ``models/``:
``models.nc`` (the chosen kind: smooth or few-layer), ``models.csv`` (layer
table), ``fit.csv`` (observed and predicted data), ``models_smooth.nc`` when the
few-layer model is chosen, and with ``lci`` ``models_lci.nc`` and
``fit_lci.csv``.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..io.project import Project
from ..provenance import file_sha256, stage_record
from ..runtime import StageContext, StageResult, StationOutcome, map_stations
from .settings import InversionSettings, floors_of

__all__ = ["run", "invert_one", "verdict_info", "not_fitted", "stations_without_model"]


def invert_one(sid, in_path, settings: InversionSettings, floors, fig_path, qc=None):
    """Invert one gated file (runs in a worker process); the result rides in ``payload``.

    ``qc``: the station's evening QC verdict and reasons (``(verdict, reasons)``), written
    on its fit figure when it is not good (a model on a recording to repeat says so)."""
    from ..io.stacked import read_product
    from .data import station_data
    from .station import invert_station

    ds = read_product(in_path, "gated")
    sd = station_data(ds, floors=floors, file=str(in_path))
    r = invert_station(sd, settings)
    products = []
    if fig_path:
        from ..io.figures import figure_bytes
        from .plot import station_figure
        if settings.kind == "posterior":
            from .posterior_plot import posterior_station_figure
            fig = posterior_station_figure(r, settings.cover_layers)
        else:
            fig = station_figure(r, kind=settings.kind)
        if qc is not None and qc[0] in ("reoccupy", "check"):
            import textwrap
            # wrapped, not cut: the reasons end with the minutes asked for
            words = "\n".join(textwrap.wrap(f"evening QC {qc[0]}: {qc[1]}", 110)[:4])
            if fig._suptitle is not None:        # e.g. the posterior's interval verdict
                fig.suptitle(f"{fig._suptitle.get_text()}\n{words}", fontsize=10,
                             color=fig._suptitle.get_color())
            else:
                fig.suptitle(words, fontsize=10, color="#5b2a86" if qc[0] == "reoccupy"
                             else "#7d6608", fontweight="bold" if qc[0] == "reoccupy" else None)
        products.append((fig_path, figure_bytes(fig)))
    # the iteration log is the figure's only: the result travels to the client without it
    r.history = []
    info = {"doi": float(r.doi), "epsg": int(ds.attrs.get("epsg", 0) or 0),
            **verdict_info(r, settings.kind)}
    if r.posterior is not None:
        info.update(rhat_max=r.posterior.max_rhat, ess_min=r.posterior.min_ess,
                    posterior_s=round(r.posterior.seconds, 2))
    if r.interval is not None:
        info.update(r.interval.as_dict())
    return StationOutcome(sid, "ok", inputs=[{"file": str(in_path), "sha256": file_sha256(in_path)}],
                          info=info, payload=r, products=products)


def verdict_info(r, kind) -> dict:
    """Summary values of a station: the chosen model's chi2 and verdict, every model's verdict.

    Keys: ``chi2`` and ``model_kind`` (the chosen model), ``verdict`` (status),
    ``verdict_code``, ``verdict_text`` (one line), ``verdict_kind`` (the model
    the verdict judged: the few-layer fit for kinds built on it),
    ``smooth_chi2``, ``few_layer_chi2`` (when computed) and ``verdicts``
    ({kind: verdict as a dict}).
    """
    chosen = r.verdict_for(kind)
    info = {"model_kind": kind, "chi2": float(chosen.chi2), "verdict": chosen.status,
            "verdict_code": chosen.code, "verdict_text": chosen.summary,
            "verdict_kind": chosen.kind or kind,
            "smooth_chi2": float(r.chi2), "verdicts": {"smooth": r.verdict.as_dict()}}
    if r.few is not None:
        info["few_layer_chi2"] = float(r.few["chi2"])
        info["verdicts"]["few-layer"] = r.few["verdict"].as_dict()
    return info


def not_fitted(result: StageResult) -> dict:
    """{station: verdict status} of the stations whose chosen model is a failure (misfit)."""
    from .verdict import FAILURES

    return {sid: oc.info["verdict"] for sid, oc in result.stations.items()
            if oc.status == "ok" and oc.info.get("verdict") in FAILURES}


def _lci(stations, files, settings, floors, folder, record, epsg, res, mark):
    """Laterally constrained inversion of the stations that have a smooth model."""
    from ..errors import TemInputError
    from ..io.models import write_models
    from .product import load_station, models_from_results, write_fit_csv
    from .station import lci_profile

    if len(stations) < 2:
        res.failed = "laterally constrained inversion needs two or more inverted stations"
        return []
    try:
        sds = [load_station(files[sid], floors) for sid in stations]
        lres = lci_profile(sds, settings)
        ds = mark(models_from_results(lres, kind="lci", epsg=epsg))
    except (TemInputError, ValueError, np.linalg.LinAlgError, FloatingPointError) as exc:
        res.failed = f"laterally constrained inversion failed: {exc}".splitlines()[0]
        return []
    chi2 = np.array([r.chi2 for r in lres])
    for r in lres:
        oc = res.stations.get(r.station)
        if oc is not None:
            oc.info.setdefault("verdicts", {})["lci"] = r.verdict.as_dict()
            res.stations[r.station] = oc          # an outcome read is a copy
    res.notes.append(f"laterally constrained inversion: {len(lres)} stations, chi2 per station "
                     f"{chi2.min():.2f}-{chi2.max():.2f}")
    return [str(write_models(ds, folder / "models_lci.nc", record=dict(record, stage="invert-lci"))),
            str(write_fit_csv(lres, folder / "fit_lci.csv", kind="lci"))]


class _Collector:
    """Takes each station's result as it arrives (``map_stations(..., consume=)``): what the
    survey-wide products need of it (model rows of each kind written, its fit-table rows,
    posterior summaries and draws) goes to a spool on disk (:mod:`tem.io.spool`) and the
    result is dropped, so the client holds no station's result beyond its arrival, whatever
    the survey's size (docs/scaling.md)."""

    def __init__(self, settings: InversionSettings):
        from ..io.spool import Spool

        self.posterior = settings.kind == "posterior"
        self.chosen = "few-layer" if self.posterior else settings.kind
        kinds = [self.chosen] + (["smooth"] if settings.kind in ("few-layer", "posterior")
                                 else [])
        self.spool = Spool()
        self.rows = {k: self.spool.dict(f"rows:{k}") for k in kinds}
        self.fit = self.spool.dict("fit")
        if self.posterior:
            self.post = self.spool.dict("posterior")
            self.draws = self.spool.arrays("draws")

    def __call__(self, oc):
        from .product import fit_text, model_row

        r, oc.payload = oc.payload, None
        if oc.status != "ok" or r is None:
            return
        for kind, rows in self.rows.items():
            rows[oc.station] = model_row(r, kind)
        self.fit[oc.station] = fit_text(r, self.chosen)
        if self.posterior:
            from .posterior_products import posterior_row

            self.post[oc.station] = posterior_row(r)
            self.draws[oc.station] = r.posterior.flat

    def stations(self, order) -> list:
        """Stations with a result, in the order of ``order``."""
        rows = self.rows[self.chosen]
        return [sid for sid in order if sid in rows]


def _posterior_note(ds):
    from ..io.models import interval_words

    rhat, ess = ds["rhat_max"].values, ds["ess_min"].values
    words = list(zip(ds["station"].values.astype(str), interval_words(ds)))
    bad = [sid for sid, w in words if w == "unconverged"]
    void = [sid for sid, w in words if w == "unusable"]
    verdict = (f"; intervals unconverged at {len(bad)} of {ds.sizes['station']} station(s): "
               f"{', '.join(bad)} (a warning; run longer chains)" if bad else "")
    if void:
        verdict += (f"; intervals unusable at {len(void)} station(s): {', '.join(void)} (the "
                    "sampled model misfits the data)")
    return (f"posterior sampling: largest split R-hat {np.nanmax(rhat):.3f}, smallest ESS "
            f"{np.nanmin(ess):.0f}, {float(np.nanmedian(ds['posterior_seconds'].values)):.1f} s "
            f"per station (median){verdict}")


def run(settings: InversionSettings, gated_files, out, ctx: StageContext = StageContext(),
        qc=None) -> StageResult:
    """Invert each gated file; write the models of the stations that succeed into ``OUT/models``.

    Parameters
    ----------
    settings : InversionSettings
    gated_files : sequence of path
    out : path or Project
    ctx : StageContext
    qc : path or None
        The evening QC table (``qc/stations.csv`` of the gate stage): every
        models file then carries each station's QC verdict (``qc_verdict_code``,
        ``qc_verdict``), so a model built on a recording that failed QC is
        marked wherever it goes (section, LAS, SEG-Y, CSV).

    Returns
    -------
    StageResult
        One outcome per file; ``failed`` says why no models file was written.
    """
    from ..qc import read_stations_csv

    project = out if isinstance(out, Project) else Project(out)
    qc_rows = read_stations_csv(qc) if qc is not None else None
    floors = floors_of(settings)
    files = {Path(f).stem: Path(f) for f in gated_files}
    qc_of = {r["station"]: (r["verdict"], r["reasons"]) for r in qc_rows or ()}
    jobs = [(sid, (sid, f, settings, floors,
                   project.station_figure(sid, "fit") if ctx.figures else None, qc_of.get(sid)))
            for sid, f in files.items()]
    collect = _Collector(settings)
    try:
        return _products(settings, project, files, floors, qc, qc_rows, ctx, jobs, collect)
    finally:
        collect.spool.close()


def stations_without_model(res, run_state=None) -> dict:
    """``{station: why}`` of the stations this stage has no model of: those that failed it,
    and (in a run) those that failed an earlier stage. A section interpolates across them
    and an export has no file of them; the models file names them so that every product
    can say so (attribute ``stations_without_model``, JSON)."""
    out = {}
    if run_state is not None:
        for sid, st in (run_state.get("stations") or {}).items():
            if st.get("failed_stage") and st["failed_stage"] != "invert":
                out[sid] = f"failed {st['failed_stage']}: {st.get('message', '')}".strip()
    for sid, oc in res.stations.items():
        if oc.status != "ok":
            out[sid] = f"failed invert: {oc.message}".strip()
    return out


def _products(settings, project, files, floors, qc, qc_rows, ctx, jobs, collect):
    """Run the stations through ``collect``, then write the survey-wide products."""
    from ..io.models import add_qc_verdicts, write_models, write_models_csv
    from .product import models_from_rows, write_fit_text

    res = StageResult(stations=map_stations(invert_one, jobs, ctx, consume=collect))
    res.inputs = [i for oc in res.stations.values() for i in oc.inputs]
    folder = project.folder("models")
    stations = collect.stations(files)
    if not stations:
        res.failed = "no station could be inverted"
        return res
    without = stations_without_model(res, ctx.run_state)

    def mark(d):
        """Every models file names the stations it has no model of, and why."""
        if without:
            d.attrs["stations_without_model"] = json.dumps(without)
        return add_qc_verdicts(d, qc_rows) if qc_rows is not None else d

    if qc_rows is not None:
        res.inputs.append({"file": str(qc), "sha256": file_sha256(qc)})
    record = stage_record("invert", settings.as_dict())
    record["inputs"] = res.inputs
    epsgs = {oc.info.get("epsg", 0) for oc in res.stations.values() if oc.status == "ok"}
    epsg = epsgs.pop() if len(epsgs) == 1 else 0
    posterior = collect.posterior
    ds = models_from_rows(collect.rows[collect.chosen].view(stations), kind=collect.chosen,
                          epsg=epsg)
    if posterior:
        from .posterior_products import add_posterior_rows, write_posterior_csv
        ds = add_posterior_rows(ds, collect.post.view(stations),
                                lambda i: collect.draws[stations[i]],
                                settings.posterior_cells, settings.cover_layers)
    mark(ds)
    res.outputs += [str(write_models(ds, folder / "models.nc", record=record)),
                    str(write_models_csv(ds, folder / "models.csv")),
                    str(write_fit_text(iter(collect.fit.view(stations)), folder / "fit.csv"))]
    if posterior:
        res.outputs.append(str(write_posterior_csv(ds, folder / "posterior.csv")))
        res.notes.append(_posterior_note(ds))
    if settings.kind in ("few-layer", "posterior"):
        del ds
        smooth = mark(models_from_rows(collect.rows["smooth"].view(stations), kind="smooth",
                                       epsg=epsg))
        res.outputs.append(str(write_models(smooth, folder / "models_smooth.nc", record=record)))
    if settings.lci:
        res.outputs += _lci(stations, files, settings, floors, folder, record, epsg, res, mark)
    return res
