"""tem stack: raw recordings -> stacked transients per station (+ QC table and figures)."""
from __future__ import annotations

from pathlib import Path

from ..errors import input_error
from ..io.checks import real_path
from . import common

HELP = "stack each station's raw recordings into half-period transients with errors"


def add_parser(sub):
    from ..stack.settings import STACK

    p = sub.add_parser("stack", help=HELP, description=HELP + ". Writes OUT/stacked/<station>.nc "
                       "and OUT/figures/stations/<station>_raw.png.")
    p.add_argument("survey", help="survey TOML (docs/survey.md)")
    common.add_out(p)
    p.add_argument("--stations", metavar="IDS", help="comma-separated subset of stations")
    common.add_run_options(p)
    STACK.add_options(p, group_title="stacking")
    return p


def run(args) -> int:
    from rich.console import Console

    from ..io.project import check_output
    from ..qc import qc_table
    from ..stack.settings import STACK
    from ..stack.stage import run as stack_run
    from ..survey import read_survey

    settings = STACK.from_command_line(args)
    survey = read_survey(args.survey)
    ids = [s.id for s in survey.stations]
    if args.stations is not None:        # "" names no station: refused, not all
        want = [s.strip() for s in args.stations.split(",") if s.strip()]
        unknown = [s for s in want if s not in ids]
        if unknown or not want:
            raise input_error("--stations", f"unknown station {unknown[0]!r}; valid: {', '.join(ids)}"
                              if unknown else "no station named")
        ids = [s for s in ids if s in want]
    inputs = [Path(args.survey)] + [survey.path(f) for s in survey.stations for r in s.receivers
                                    for f in r.files]
    read_only = {real_path(args.survey).parent} | {real_path(p).parent for p in inputs[1:]}
    check_output(args.out, ["stack"], inputs=inputs, read_only=read_only)
    with common.stage_context(args, "stack", len(ids)) as ctx:
        res = stack_run(settings, survey, ids, args.out, ctx, survey_file=args.survey)
    rows = [r for oc in res.stations.values() if oc.payload for r in oc.payload]
    failed = [(sid, oc.message) for sid, oc in res.stations.items() if oc.status != "ok"]
    qc_table(rows, failed, title=f"Stack QC: {survey.name}", console=Console())
    return common.finish("stack", res, args.out)
