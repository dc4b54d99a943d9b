"""tem gate: stacked transients -> gated soundings (docs/data-model.md) + QC."""
from __future__ import annotations

from . import common

HELP = "gate stacked transients into log-spaced windows with errors and a noise floor"


def add_parser(sub):
    from ..gate.settings import GATE

    p = sub.add_parser("gate", help=HELP, description=HELP + ". Reads stacked files "
                       "(OUT/stacked/<station>.nc of 'tem stack') and writes OUT/gated/<station>.nc "
                       "and OUT/figures/stations/<station>_decay.png.")
    p.add_argument("stacked", nargs="+", help="stacked files, or folders of them")
    common.add_out(p)
    common.add_run_options(p)
    GATE.add_options(p, group_title="gates")
    return p


def run(args) -> int:
    from rich.console import Console

    from ..gate.settings import GATE
    from ..gate.stage import run as gate_run
    from ..io.project import check_output
    from ..qc import qc_table

    settings = GATE.from_command_line(args)
    files = common.input_files(args.stacked, "stacked")
    check_output(args.out, ["gate"], inputs=files)
    with common.stage_context(args, "gate", len(files)) as ctx:
        res = gate_run(settings, files, args.out, ctx)
    rows = [r for oc in res.stations.values() if oc.payload for r in oc.payload]
    failed = [(sid, oc.message) for sid, oc in res.stations.items()
              if oc.status != "ok" and not oc.payload]
    qc_table(rows, failed, title="Gate QC", console=Console())
    return common.finish("gate", res, args.out)
