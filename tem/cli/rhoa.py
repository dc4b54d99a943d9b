"""tem rhoa: gated soundings -> apparent resistivity table, files and figures."""
from __future__ import annotations

from . import common

HELP = "apparent resistivity (all-time and late-time), pseudo-depth, sounding curves, pseudo-sections"


def add_parser(sub):
    from ..rhoa.settings import RHOA

    p = sub.add_parser("rhoa", help=HELP, description=HELP + ". Reads gated soundings "
                       "(OUT/gated/<station>.nc of 'tem gate') and writes OUT/rhoa/<station>.nc, "
                       "OUT/rhoa/rhoa.csv, OUT/figures/stations/<station>_rhoa.png and "
                       "OUT/figures/pseudosection_<component>.png.")
    p.add_argument("gated", nargs="+", help="gated-sounding files, or folders of them")
    common.add_out(p)
    common.add_run_options(p)
    RHOA.add_options(p, group_title="apparent resistivity")
    return p


def run(args) -> int:
    from rich.console import Console

    from ..io.project import check_output
    from ..rhoa.settings import RHOA
    from ..rhoa.stage import run as rhoa_run

    settings = RHOA.from_command_line(args)
    files = common.input_files(args.gated, "gated")
    check_output(args.out, ["rhoa"], inputs=files)
    with common.stage_context(args, "rhoa", len(files)) as ctx:
        res = rhoa_run(settings, files, args.out, ctx)
    _summary(res, Console())
    return common.finish("rhoa", res, args.out)


def _summary(res, console):
    from rich.table import Table

    tab = Table(title="Apparent resistivity", header_style="bold")
    for col in ("station", "converted gates", "message"):
        tab.add_column(col)
    for sid, oc in res.stations.items():
        conv = str(oc.info.get("rhoa_converted", "-"))
        tab.add_row(sid, conv, "" if oc.status == "ok" else f"[red]failed[/]: {oc.message}")
    console.print(tab)
