"""tem export: a project's models and section grid -> CSV layers, LAS pseudo-wells, SEG-Y."""
from __future__ import annotations

from pathlib import Path

from . import common

HELP = "export models: CSV layers, LAS 2.0 pseudo-wells, SEG-Y depth or two-way-time sections"


def add_parser(sub):
    from ..export.settings import EXPORT

    p = sub.add_parser("export", help=HELP, description=HELP + ". Reads PROJECT/models/models.nc "
                       "and PROJECT/sections/section.nc (the _lci files with --models lci) and "
                       "writes OUT/exports/. Exit status 1 if a station's chosen model is not fitted (misfit; "
                       "every product is still written) or a file cannot be written (the others "
                       "are; OUT/exports/export.json lists both), 2 on bad input.")
    p.add_argument("project", help="folder holding models/ and sections/ (from 'tem invert' and "
                   "'tem section', or 'tem run')")
    common.add_out(p)
    common.add_run_options(p, jobs=False, figures=False)
    EXPORT.add_options(p, group_title="exports")
    return p


def run(args) -> int:
    from ..export.settings import EXPORT
    from ..export.stage import inputs_of
    from ..export.stage import run as export_run
    from ..io.project import check_output

    settings = EXPORT.from_command_line(args)
    files = list(inputs_of(settings, Path(args.project)))
    extra = [settings.velocity] if settings.velocity else []
    check_output(args.out, ["export"], inputs=files + extra)
    with common.stage_context(args, "export", 1) as ctx:
        res = export_run(settings, Path(args.project), args.out, ctx)
    return common.finish("export", res, args.out, not_fitted=common.misfit_stations(files[:1]))
