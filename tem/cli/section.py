"""tem section: models files -> section grids (netCDF), section and model figures."""
from __future__ import annotations

from . import common

HELP = "stitch 1D models along the profile into a section grid and figures"


def add_parser(sub):
    from ..section.settings import SECTION

    p = sub.add_parser("section", help=HELP, description=HELP + ". A models file "
                       "models<suffix>.nc gives OUT/sections/section<suffix>.nc and "
                       "OUT/figures/section<suffix>.png; the first also gives OUT/figures/models.png. "
                       "Exit status 1 if a station's chosen model is not fitted (misfit; every "
                       "product is still written) or an output cannot be written, 2 on bad input.")
    p.add_argument("models", nargs="+", help="models files (OUT/models/models.nc of 'tem invert')")
    common.add_out(p)
    common.add_run_options(p, jobs=False)
    SECTION.add_options(p, group_title="profile, grid and figures")
    return p


def run(args) -> int:
    from ..io.project import check_output
    from ..section.settings import SECTION
    from ..section.stage import run as section_run

    settings = SECTION.from_command_line(args)
    files = common.input_files(args.models, "models", pattern="models*.nc")
    extra = [settings.line] if settings.line else []
    check_output(args.out, ["section"], inputs=files + extra)
    with common.stage_context(args, "section", 1) as ctx:
        res = section_run(settings, files, args.out, ctx)
    return common.finish("section", res, args.out, not_fitted=common.misfit_stations(files))
