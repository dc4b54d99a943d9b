"""tem stack: raw recordings -> stacked transients per station (+ QC table and figures)."""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import TemInputError, input_error

HELP = "stack each station's raw recordings into half-period transients with errors"


def add_parser(sub):
    p = sub.add_parser("stack", help=HELP, description=HELP + ". Writes DIR/stacked/<station>.nc.")
    p.add_argument("survey", help="survey TOML")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    p.add_argument("--estimator", default="huber", choices=("huber", "mean", "median", "trimmed"),
                   help="location estimator across transients (default huber)")
    p.add_argument("--huber-k", type=float, default=1.5, help="Huber constant in sigmas (1.5)")
    p.add_argument("--trim", type=float, default=0.1, help="trimmed-mean fraction per side (0.1)")
    p.add_argument("--reject-sigma", type=float, default=6.0,
                   help="reject sample estimates beyond this many robust sigmas (6)")
    p.add_argument("--transient-rms", type=float, default=2.5,
                   help="reject transients whose rms normalised residual exceeds this (2.5)")
    p.add_argument("--batches", type=int, default=32, help="batches for the error estimate (32)")
    p.add_argument("--no-detrend", action="store_true", help="skip the period-mean baseline removal")
    p.add_argument("--timing", choices=("survey", "current"),
                   help="switch times from the survey schedule or the current channel "
                   "(default: as the survey says)")
    p.add_argument("--stations", metavar="IDS", help="comma-separated subset of stations")
    p.add_argument("--figures", action="store_true", help="also write QC figures (PNG)")
    return p


def run(args) -> int:
    from rich.console import Console
    from rich.progress import Progress

    from ..io.stacked import stacked_dataset, write_dataset
    from ..provenance import stage_record
    from ..qc import qc_rows, qc_table, raw_vs_stacked_figure
    from ..stack import StackSettings, stack_station
    from ..survey import read_survey, replace
    survey = read_survey(args.survey)
    if args.timing:
        survey = replace(survey, transmitter=replace(survey.transmitter, timing=args.timing))
    settings = StackSettings(estimator=args.estimator, huber_k=args.huber_k, trim=args.trim,
                             reject_sigma=args.reject_sigma, transient_rms=args.transient_rms,
                             n_batches=args.batches, detrend=not args.no_detrend)
    out = Path(args.out)
    # raw data are read-only: products go to a project folder, never beside the recordings
    raw_dirs = {survey.path(f).resolve().parent for st in survey.stations for r in st.receivers
                for f in r.files}
    o = out.resolve()
    if o == Path(args.survey).resolve().parent or any(o == p or p in o.parents for p in raw_dirs):
        raise input_error("out", f"{out} is the survey's folder or inside a recording folder; "
                          "choose a separate project folder", args.survey)
    stations = survey.stations
    if args.stations:
        want = args.stations.split(",")
        stations = [survey.station(s) for s in want]
    console = Console()
    ok, _ = survey.mains_rule()
    if not ok:
        console.print(f"[yellow]warning[/]: mains {survey.mains_frequency:g} Hz / (2 x base "
                      f"{survey.transmitter.base_frequency:g} Hz) is not a whole number; the "
                      "stack does not null the mains (docs/stacking.md)")
    rows, failed = [], []
    with Progress(console=console, transient=True) as prog:
        task = prog.add_task("stack", total=len(stations))
        for st in stations:
            try:
                chans, timing = stack_station(survey, st, settings)
                inputs = [survey.path(f) for rx in st.receivers for f in rx.files]
                prov = [stage_record("stack", {"station": st.id, **settings.as_dict(),
                                               "timing": timing["source"]},
                                     inputs=[Path(args.survey)] + inputs)]
                ds = stacked_dataset(survey, st, chans, timing, settings, prov)
                write_dataset(ds, out / "stacked" / f"{st.id}.nc")
                rows += qc_rows(ds)
                if timing["source"] == "current":
                    console.print(f"{st.id}: switch times from the current channel, residual "
                                  f"{timing['residual_rms'] * 1e6:.2f} us rms")
                if args.figures:
                    fig = raw_vs_stacked_figure(ds)
                    (out / "qc").mkdir(parents=True, exist_ok=True)
                    fig.savefig(out / "qc" / f"{st.id}_raw_vs_stacked.png", dpi=110)
            except TemInputError as exc:
                failed.append((st.id, str(exc)))
                print(f"tem stack: error: {st.id}: {exc}", file=sys.stderr, flush=True)
            prog.update(task, advance=1)
    qc_table(rows, failed, title=f"Stack QC: {survey.name}", console=console)
    return 1 if failed else 0
