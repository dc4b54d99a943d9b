"""tem decays: gated soundings -> decay CSV + system TOML (the format 'tem import' reads)."""
from __future__ import annotations

from ..io.checks import real_path
from . import common

HELP = "write gated soundings as a decay CSV and a system TOML (the import format)"


def add_parser(sub):
    p = sub.add_parser("decays", help=HELP, description=HELP + " (docs/import.md). All soundings "
                       "must share one transmitter set-up.")
    p.add_argument("gated", nargs="+", help="gated files, or folders of them")
    p.add_argument("--csv", required=True, metavar="FILE", help="decay CSV to write")
    p.add_argument("--system", required=True, metavar="FILE", help="system TOML to write")
    return p


def run(args) -> int:
    from pathlib import Path

    from ..errors import input_error
    from ..importer.export import write_decays

    files = common.input_files(args.gated, "gated")
    for target in (args.csv, args.system):
        if any(real_path(target) == real_path(f) for f in files):
            raise input_error("--csv" if target == args.csv else "--system",
                              "would overwrite an input file", target)
    if real_path(args.csv) == real_path(args.system):
        # the system TOML was written over the decay CSV just written (exit 0, decays lost)
        raise input_error("--system", "same file as --csv; give two files", args.system)
    csv_path, toml_path = write_decays(files, args.csv, args.system)
    print(f"tem decays: {len(files)} soundings written to {csv_path} and {toml_path}")
    return 0
