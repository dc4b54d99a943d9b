"""tem gate: stacked transients -> gated soundings (docs/data-model.md) and the evening QC."""
from __future__ import annotations

from . import common

HELP = "gate stacked transients into log-spaced windows with errors; evening QC verdicts"


def add_parser(sub):
    from ..gate.settings import GATE
    from ..qc.verdict import QC_TABLE

    p = sub.add_parser("gate", help=HELP, description=HELP + ". Reads stacked files "
                       "(OUT/stacked/<station>.nc of 'tem stack') and writes OUT/gated/<station>.nc, "
                       "OUT/figures/stations/<station>_decay.png and the verdict per station "
                       "OUT/qc/stations.csv (docs/qc.md).")
    p.add_argument("stacked", nargs="+", help="stacked files, or folders of them")
    common.add_out(p)
    common.add_run_options(p)
    GATE.add_options(p, group_title="gates")
    QC_TABLE.add_options(p, group_title="evening QC thresholds (docs/qc.md)")
    return p


def run(args) -> int:
    from rich.console import Console

    from ..gate.settings import GATE
    from ..gate.stage import run as gate_run
    from ..io.project import check_output
    from ..qc import qc_table
    from ..qc.verdict import QC_TABLE

    settings = GATE.from_command_line(args)
    qc = QC_TABLE.from_command_line(args)
    files = common.input_files(args.stacked, "stacked")
    check_output(args.out, ["gate"], inputs=files)
    with common.stage_context(args, "gate", len(files)) as ctx:
        res = gate_run(settings, files, args.out, ctx, qc=qc)
    rows = [r for oc in res.stations.values() if oc.payload for r in oc.payload]
    failed = [(sid, oc.message) for sid, oc in res.stations.items()
              if oc.status != "ok" and not oc.payload]
    console = Console()
    qc_table(rows, failed, title="Gate QC", console=console)
    common.verdict_table(res, console)
    return common.finish("gate", res, args.out)
