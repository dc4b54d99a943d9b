"""tem run: the whole chain from raw recordings to sections, exports and the QC report."""
from __future__ import annotations

import os
from pathlib import Path

HELP = "run the chain: stack, gate, rhoa, invert, section, export, report into a project folder"
STAGES = ("stack", "gate", "rhoa", "invert", "section", "export", "report")


def add_parser(sub):
    p = sub.add_parser("run", help=HELP, description=HELP + ". Parameters come from the survey's "
                       "[processing] table (docs/pipeline.md) and the options below; every "
                       "stage is recorded in PROJECT/run.json. Exit status 1 if a station failed.")
    p.add_argument("survey", help="survey TOML (with an optional [processing] table)")
    p.add_argument("--out", required=True, metavar="PROJECT", help="project folder (created)")
    p.add_argument("--from", dest="from_stage", choices=STAGES, metavar="STAGE",
                   help="rerun from this stage, reusing the files of the earlier stages "
                   f"({', '.join(STAGES)})")
    p.add_argument("--lci", action="store_true",
                   help="also run a laterally constrained inversion of the whole profile")
    p.add_argument("--velocity", metavar="CSV",
                   help="interval velocity table (depth_m,vp_m_per_s) for a two-way-time SEG-Y")
    p.add_argument("--jobs", type=int, default=None, metavar="N",
                   help="worker processes for the station stages (default: CPUs, at most 8)")
    p.add_argument("--set", dest="settings", action="append", default=[], metavar="STAGE.KEY=VALUE",
                   help="override one processing parameter, e.g. --set invert.layers=24 "
                   "(TOML value syntax; repeatable)")
    p.add_argument("--no-progress", action="store_true", help="do not draw progress bars")
    return p


def default_jobs() -> int:
    return max(1, min(8, os.cpu_count() or 1))


def run(args) -> int:
    from rich.console import Console

    from ..errors import input_error
    from ..pipeline import parse_assignment, run_pipeline

    overrides = [parse_assignment(s) for s in args.settings]
    if args.lci:
        overrides.append(("invert", "lci", True))
    if args.velocity:
        overrides.append(("export", "velocity", str(Path(args.velocity).resolve())))
    jobs = default_jobs() if args.jobs is None else args.jobs
    if jobs < 1:
        raise input_error("--jobs", f"must be at least 1, got {jobs}")
    outcome = run_pipeline(args.survey, args.out, from_stage=args.from_stage, overrides=overrides,
                           jobs=jobs, console=Console(stderr=True), progress=not args.no_progress)
    print_summary(outcome, Console())
    return outcome.exit_status


def print_summary(outcome, console):
    """Closing summary: station table, profile stages, where the outputs are."""
    from ..pipeline import summary_table

    from rich.console import Console

    state = outcome.state
    if not console.is_terminal:
        console = Console(file=console.file, width=160)
    console.print(summary_table(state))
    for stage in STAGES:
        rec = state["stages"].get(stage)
        if rec is None:
            continue
        for note in rec.get("notes", []):
            console.print(f"{stage}: {note}", highlight=False)
        if rec.get("failed"):
            console.print(f"[red]{stage}: {rec['failed']}[/]", highlight=False)
    last = state.get("last_run", {})
    if last.get("stopped"):
        console.print(f"[red]stopped: {last['stopped']}[/]", highlight=False)
    n_fail = sum("failed_stage" in s for s in state.get("stations", {}).values())
    root = outcome.project.root
    console.print(f"{len(state.get('stations', {}))} stations, {n_fail} failed; "
                  f"{last.get('elapsed_s', 0):.0f} s; record: {root / 'run.json'}", highlight=False)
    if outcome.project.report.is_file() and "report" in state["stages"]:
        console.print(f"report: {outcome.project.report}", highlight=False)
