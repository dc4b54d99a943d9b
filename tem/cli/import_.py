"""tem import: stacked decays from another system (CSV + system TOML) -> gated soundings."""
from __future__ import annotations

from . import common

HELP = "import stacked decays of another system (decay CSV + system TOML) as gated soundings"


def add_parser(sub):
    from ..importer.settings import IMPORT

    p = sub.add_parser("import", help=HELP, description=HELP + ". Writes OUT/gated/<station>.nc "
                       "(the product of 'tem gate', docs/data-model.md), which 'tem rhoa', "
                       "'tem invert' and the later stages read. Formats: docs/import.md.")
    p.add_argument("decays", help="decay CSV: one row per station, component and gate")
    p.add_argument("system", help="system TOML: transmitter, waveform, receivers, stations")
    common.add_out(p)
    common.add_run_options(p, figures=False, jobs=False)
    IMPORT.add_options(p, group_title="import")
    return p


def run(args) -> int:
    from ..importer.settings import IMPORT
    from ..importer.stage import run as import_run
    from ..io.project import check_output

    settings = IMPORT.from_command_line(args)
    inputs = [args.decays, args.system]
    check_output(args.out, ["import"], inputs=inputs)
    with common.stage_context(args, "import", 1) as ctx:
        res = import_run(settings, inputs, args.out, ctx)
    return common.finish("import", res, args.out)
