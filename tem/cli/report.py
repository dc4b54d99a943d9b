"""tem report: a project's products -> report.html (figures linked beside it)."""
from __future__ import annotations

from pathlib import Path

from . import common

HELP = "write the quality-control report (HTML) of a project"


def add_parser(sub):
    from ..report.settings import REPORT

    p = sub.add_parser("report", help=HELP, description=HELP + ": reads PROJECT/models, the "
                       "figures and run.json when present, and writes OUT/report.html.")
    p.add_argument("project", help="project folder (from 'tem run' or the stage commands)")
    common.add_out(p, what="folder for report.html (usually the project folder itself)")
    # the report draws no progress bar; the option is taken as by every other command
    common.add_run_options(p, figures=False, jobs=False)
    REPORT.add_options(p, group_title="report")
    return p


def run(args) -> int:
    from ..io.project import ProjectLock, check_output
    from ..report.settings import REPORT
    from ..report.stage import run as report_run
    from ..runtime import StageContext

    settings = REPORT.from_command_line(args)
    models = Path(args.project) / "models" / "models.nc"
    check_output(args.out, ["report"], inputs=[models])
    with ProjectLock(args.out, "tem report"):
        res = report_run(settings, Path(args.project), args.out, StageContext())
    return common.finish("report", res, args.out)
