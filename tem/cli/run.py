"""tem run: the whole chain from raw recordings to sections, exports and the QC report."""
from __future__ import annotations

from . import common

HELP = "run the chain: stack, gate, rhoa, invert, section, export, report into a project folder"


def add_parser(sub):
    from ..pipeline.settings import STAGES

    p = sub.add_parser("run", help=HELP, description=HELP + ". Settings come from the survey's "
                       "[processing] table (docs/pipeline.md) and --set; every stage is recorded "
                       "in OUT/run.json. Exit status 1 if a station or a stage failed, a "
                       "station's chosen model is not fitted (misfit) or a station's evening QC "
                       "verdict is reoccupy (its recording is to be repeated), 2 on bad input.")
    p.add_argument("survey", help="survey TOML (with an optional [processing] table)")
    common.add_out(p, what="project folder (created; never an input folder)")
    p.add_argument("--from", dest="from_stage", choices=STAGES, metavar="STAGE",
                   help="rerun from this stage, reusing the files of the earlier stages "
                   f"({', '.join(STAGES)})")
    p.add_argument("--until", dest="until", choices=STAGES, metavar="STAGE",
                   help="stop after this stage (e.g. gate: stacks, gates and the evening QC only)")
    p.add_argument("--set", dest="settings", action="append", default=[], metavar="STAGE.KEY=VALUE",
                   help="override one processing setting, e.g. --set invert.layers=24 or "
                   "--set invert.lci=true (TOML value syntax; repeatable)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run the station work on a "
                   "dask.distributed cluster: 'local' (a LocalCluster of --jobs workers) or a "
                   "scheduler address such as tcp://head:8786 (docs/scaling.md)")
    common.add_run_options(p)
    return p


def run(args) -> int:
    from rich.console import Console

    from ..pipeline import run_pipeline
    from ..settings import parse_assignment

    overrides = [parse_assignment(s) for s in args.settings]
    outcome = run_summarised(run_pipeline, args.survey, args.out, from_stage=args.from_stage,
                             overrides=overrides, jobs=args.jobs or common.default_jobs(),
                             console=Console(stderr=True), progress=args.progress,
                             figures=args.figures, scheduler=args.scheduler, until=args.until)
    print_summary(outcome, Console())
    return outcome.exit_status


def run_summarised(run_pipeline, *args, **kw):
    """``run_pipeline(*args, **kw)``; when a stage refuses its input or cannot write, the
    summary of what the run did finish (stations' verdicts, the stage that stopped it) is
    printed before the one-line error, which the command's caller prints."""
    from rich.console import Console

    from ..errors import TemInputError, TemOutputError

    try:
        return run_pipeline(*args, **kw)
    except (TemInputError, TemOutputError) as exc:
        if getattr(exc, "outcome", None) is not None:
            print_summary(exc.outcome, Console())
        raise


def print_summary(outcome, console):
    """Closing summary: station table, profile stages, where the outputs are."""
    from rich.console import Console

    from ..pipeline import STAGES, summary_table

    state = outcome.state
    if not console.is_terminal:
        console = Console(file=console.file, width=160)
    last = state.get("last_run", {}).get("stages") or []
    # the evening's run stops after the gate stage: its table says so
    command = "tem evening" if last and last[-1] == "gate" else "tem run"
    console.print(summary_table(state, title=f"{command}: {state.get('survey', {}).get('name', '')}"))
    for stage in STAGES:
        rec = state["stages"].get(stage)
        if rec is None:
            continue
        if rec.get("reused") is True:     # a whole stage kept: not its old result lines again
            console.print(f"{stage}: reused (inputs and settings unchanged; its products as "
                          "written before)", highlight=False)
            continue
        for note in rec.get("notes", []):
            console.print(f"{stage}: {note}", highlight=False)
        if rec.get("failed"):
            console.print(f"[red]{stage}: {rec['failed']}[/]", highlight=False)
    last = state.get("last_run", {})
    for note in last.get("notes", []):
        console.print(f"note: {note}", highlight=False)
    if last.get("stopped"):
        console.print(f"[red]stopped: {last['stopped']}[/]", highlight=False)
    from ..pipeline.runner import not_fitted, to_reoccupy
    from .common import not_fitted_line

    bad = not_fitted(state)
    if bad:
        console.print(f"[bold red]invert: {not_fitted_line(bad)}[/]", highlight=False)
    again = to_reoccupy(state)
    if again:
        console.print(f"[bold red]qc: recording failed the evening QC at {len(again)} station(s): "
                      f"{', '.join(again)} (re-occupy"
                      + ("; their models are marked in every product" if "invert" in
                         state["stages"] else "") + ")[/]", highlight=False)
    n_fail = sum("failed_stage" in s for s in state.get("stations", {}).values())
    root = outcome.project.root
    # never "0 failed" alone beside models that do not fit or recordings to repeat
    counts = [f"{n_fail} failed a stage"] + ([f"{len(bad)} not fitted"] if bad else []) + \
        ([f"{len(again)} to re-occupy"] if again else [])
    console.print(f"{len(state.get('stations', {}))} stations: {', '.join(counts)}; exit status "
                  f"{outcome.exit_status}; {last.get('elapsed_s', 0):.0f} s; record: "
                  f"{root / 'run.json'}", highlight=False)
    if outcome.project.report.is_file() and "report" in state["stages"]:
        console.print(f"report: {outcome.project.report}", highlight=False)
    from .. import SAFETY_NOTE
    console.print(f"[dim]caution: {SAFETY_NOTE}[/]", highlight=False)
