"""tem demo: synthesise the Emberline Plateau day and run the whole chain on it."""
from __future__ import annotations

import time
from pathlib import Path

from . import common

HELP = "synthesise the fictional Emberline Plateau survey and run the whole chain on it"

#: Seconds recorded per station in the demo (the scenario records 15 min; shortened for speed).
DEMO_DURATION = 120.0
#: Faults the demo day is built with: one noisy station, one dead channel. The evening QC
#: must call both stations reoccupy; ``tem demo`` checks that it does.
NOISY_STATION = "EM09"
DEAD_CHANNEL = ("EM04", "ex")
PLANTED = (NOISY_STATION, DEAD_CHANNEL[0])

# Processing table written into the demo survey: an example of docs/pipeline.md.
PROCESSING = """
# ---------------------------------------------------------------------------
# Processing parameters for 'tem run' (docs/pipeline.md). Keys left out keep
# their defaults; 'tem run --set STAGE.KEY=VALUE' overrides any of them.
[processing.stack]
estimator = "huber"          # huber, mean, median, trimmed

[processing.gate]
per_decade = 9.0             # log-spaced gates per decade
snr_min = 2.0                # gates below 2 standard errors are not used

[processing.rhoa]
all_time = true              # all-time apparent resistivity (forward model)

[processing.invert]
layers = 30                  # smooth-model layers, half-space included
floor = 0.03                 # relative error floor
target = 1.0                 # target chi-square per datum
kind = "posterior"           # four-layer models with posterior sampling (depth intervals)
few_layers = 4
posterior_draws = 500        # kept draws per chain (capped so the demo stays quick)
posterior_burn = 500         # burn-in steps per chain

[processing.section]
trace_spacing = 100.0        # m: one section column (and SEG-Y trace) every 100 m
depth_step = 10.0            # m
below_doi = "shade"

[processing.export]
velocity = "velocity.csv"    # interval velocities for the two-way-time SEG-Y
dt_ms = 4.0
las_step = 5.0               # m
"""

# Fictional interval velocities under the plateau (cover, basalt, sediments, basement).
VELOCITY = """# Emberline Plateau (fictional) interval P velocities, for the TWT SEG-Y of the demo
depth_m,vp_m_per_s
0,2000
20,4600
1300,3100
1900,5600
"""


def add_parser(sub):
    p = sub.add_parser("demo", help=HELP, description=HELP + ": raw recordings into DIR/raw "
                       f"(12 stations, {DEMO_DURATION:g} s each instead of the scenario's 15 min), "
                       "then 'tem run' into DIR/project.")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created)")
    p.add_argument("--duration", type=float, default=DEMO_DURATION, metavar="S",
                   help=f"seconds recorded per station (default {DEMO_DURATION:g}; the scenario "
                   "day has 900)")
    p.add_argument("--seed", type=int, default=2025, help="random seed (default 2025)")
    common.add_run_options(p)
    return p


def write_demo_survey(out_raw, duration, seed, progress=None):
    """Write the Emberline raw day, its survey (with a processing table) and velocity table.

    Returns the survey file path.
    """
    import tomli_w

    from ..io.atomic import write_text_atomic
    from ..survey import survey_to_dict
    from ..synth import emberline_survey, synth_survey

    out_raw = Path(out_raw)
    survey, models = emberline_survey(base_dir=out_raw)
    head = ("# Emberline Plateau (fictional demo survey), docs/survey.md; written by 'tem demo'.\n"
            f"# Recordings: {duration:g} s per station (the scenario day records 900 s).\n")
    path = write_text_atomic(out_raw / "survey.toml",
                             head + tomli_w.dumps(survey_to_dict(survey)) + PROCESSING)
    write_text_atomic(out_raw / "velocity.csv", VELOCITY)
    synth_survey(survey, models, out_raw, seed=seed, duration=duration,
                 noisy_station=NOISY_STATION, dead_channel=DEAD_CHANNEL, progress=progress)
    return path


def run(args) -> int:
    from rich.console import Console
    from rich.progress import Progress

    from ..errors import input_error
    from ..pipeline import run_pipeline
    from .run import print_summary

    if not args.duration >= 20.0:
        raise input_error("--duration", f"needs at least 20 s of recording, got {args.duration:g}")
    out = Path(args.out)
    err = Console(stderr=True)
    t0 = time.perf_counter()
    err.print(f"Emberline Plateau (fictional): 12 stations, {args.duration:g} s of recording each "
              "(the scenario records 15 min per station; shortened so the demo runs in minutes), "
              f"one noisy station ({NOISY_STATION}) and one dead channel "
              f"({' '.join(DEAD_CHANNEL)}).", highlight=False)
    with Progress(console=err, disable=not args.progress) as prog:
        task = prog.add_task("synthesise raw day", total=12)
        survey_file = write_demo_survey(out / "raw", args.duration, args.seed,
                                        progress=lambda i, n: prog.update(task, completed=i))
    t_synth = time.perf_counter() - t0
    outcome = run_pipeline(survey_file, out / "project", jobs=args.jobs or common.default_jobs(),
                           console=err, progress=args.progress, figures=args.figures)
    console = Console()
    print_summary(outcome, console)
    p = outcome.project
    lines = [("raw day and survey", survey_file),
             ("QC report", p.report),
             ("section figure", p.folder("figures") / "section.png"),
             ("posterior section figure", p.folder("figures") / "section_posterior.png"),
             ("LAS pseudo-wells", p.folder("exports") / "las"),
             ("SEG-Y depth section", p.folder("exports") / "section_depth.sgy"),
             ("SEG-Y two-way-time section", p.folder("exports") / "section_twt.sgy"),
             ("run record", p.run_json)]
    console.print("\n[bold]Outputs[/]")
    for label, path in lines:
        mark = "" if Path(path).exists() else "  (not written)"
        console.print(f"  {label:<28} {path}{mark}", highlight=False)
    console.print(f"demo: synthesis {t_synth:.0f} s, chain {outcome.state['last_run']['elapsed_s']:.0f} s, "
                  f"total {time.perf_counter() - t0:.0f} s", highlight=False)
    return demo_status(outcome, console)


def demo_status(outcome, console) -> int:
    """Exit status of the demo: the run's, except that the stations built with a fault
    (:data:`PLANTED`) are meant to fail the evening QC. 0 when they, and only they, are to be
    re-occupied and nothing else failed; 1 when the QC missed a planted fault or anything
    else failed (2 for bad input, as the run)."""
    from ..pipeline.runner import exit_status_of, to_reoccupy

    if outcome.exit_status == 2:
        return 2
    flagged = set(to_reoccupy(outcome.state))
    missed = [sid for sid in PLANTED if sid not in flagged]
    if missed:
        console.print(f"[bold red]demo: the evening QC did not call {', '.join(missed)} "
                      "reoccupy, though the demo day was built with a fault there[/]",
                      highlight=False)
        return 1
    # the run's status without the planted stations' QC verdicts: 1 only for another failure
    stations = {sid: {k: v for k, v in s.items() if not (sid in PLANTED and k == "qc_verdict")}
                for sid, s in outcome.state["stations"].items()}
    status = exit_status_of(dict(outcome.state, stations=stations))
    console.print(f"demo: {', '.join(sorted(flagged))} to re-occupy, as the demo day was built "
                  f"(faults planted there); the run's exit status is {outcome.exit_status}, "
                  f"the demo's {status}", highlight=False)
    return status
