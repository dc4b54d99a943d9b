"""tem evening: the day's check before leaving the field: stack, gate and the QC verdicts."""
from __future__ import annotations

from . import common

HELP = "evening check: stack and gate the day, then say which stations to re-occupy and for how long"


def add_parser(sub):
    p = sub.add_parser("evening", help=HELP, description=HELP + ". Runs the stack and gate "
                       "stages of 'tem run' (same settings, same project layout) and writes "
                       "OUT/qc/stations.csv (station, verdict, reasons, extra_minutes); "
                       "'tem run' on the same project later reuses these products. Exit status 1 "
                       "when a station failed or its evening QC verdict is reoccupy, 2 on bad "
                       "input.")
    p.add_argument("survey", help="survey TOML (with an optional [processing] table)")
    common.add_out(p, what="project folder (created; never an input folder)")
    p.add_argument("--set", dest="settings", action="append", default=[], metavar="STAGE.KEY=VALUE",
                   help="override one processing setting, e.g. --set qc.noise_ratio=3")
    p.add_argument("--scheduler", metavar="ADDRESS", help="as for 'tem run'")
    common.add_run_options(p)
    return p


def run(args) -> int:
    from rich.console import Console

    from ..pipeline import run_pipeline
    from ..settings import parse_assignment
    from .run import print_summary, run_summarised

    overrides = [parse_assignment(s) for s in args.settings]
    outcome = run_summarised(run_pipeline, args.survey, args.out, overrides=overrides,
                             until="gate", jobs=args.jobs or common.default_jobs(),
                             console=Console(stderr=True), progress=args.progress,
                             figures=args.figures, scheduler=args.scheduler)
    console = Console()
    print_summary(outcome, console)
    stations = outcome.state.get("stations", {})
    to_go = [sid for sid, s in stations.items() if s.get("qc_verdict") == "reoccupy"]
    check = [sid for sid, s in stations.items() if s.get("qc_verdict") == "check"]
    csv = outcome.project.root / "qc" / "stations.csv"
    console.print(f"re-occupy: {', '.join(to_go) or 'none'}; check: {', '.join(check) or 'none'}; "
                  f"table: {csv}", highlight=False)
    return outcome.exit_status or (1 if to_go else 0)
