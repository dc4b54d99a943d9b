"""tem invert: gated soundings -> layered models (smooth or few-layer; laterally constrained)."""
from __future__ import annotations

from . import common

HELP = "1D inversion of gated soundings (Occam smooth, few-layer, laterally constrained)"


def add_parser(sub):
    from ..invert.settings import INVERT

    p = sub.add_parser("invert", help=HELP, description="Invert gated soundings (one netCDF per "
                       "station) into layered resistivity models with depth of investigation "
                       "and uncertainty. Writes OUT/models/models.nc, models.csv, fit.csv and "
                       "OUT/figures/stations/<station>_fit.png.")
    p.add_argument("gated", nargs="+", help="gated-sounding files, or folders of them")
    common.add_out(p)
    common.add_run_options(p)
    INVERT.add_options(p, group_title="inversion")
    return p


def run(args) -> int:
    from rich.console import Console

    from ..invert.settings import INVERT
    from ..invert.stage import run as invert_run
    from ..io.project import check_output

    settings = INVERT.from_command_line(args)
    files = common.input_files(args.gated, "gated")
    check_output(args.out, ["invert"], inputs=files)
    with common.stage_context(args, "invert", len(files)) as ctx:
        res = invert_run(settings, files, args.out, ctx)
    console = Console()
    for sid, oc in res.stations.items():
        if oc.status != "ok":
            continue
        i = oc.info
        extra = f", few-layer chi2 {i['few_layer_chi2']:.2f}" if "few_layer_chi2" in i else ""
        if "rhat_max" in i:
            extra += f", R-hat {i['rhat_max']:.3f}, ESS {i['ess_min']:.0f}"
        note = f" ({i['invert_message']})" if i.get("invert_message") else ""
        console.print(f"{sid}: chi2 {i['chi2']:.2f}, DOI {i['doi']:.0f} m{extra}{note}",
                      highlight=False)
    return common.finish("invert", res, args.out)
