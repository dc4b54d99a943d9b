"""tem gate: stacked transients -> gated soundings (docs/data-model.md) + QC."""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import TemInputError, input_error

HELP = "gate stacked transients into log-spaced windows with errors and a noise floor"


def add_parser(sub):
    p = sub.add_parser("gate", help=HELP, description=HELP + ". Reads DIR/<station>.nc files "
                       "written by 'tem stack' and writes OUT/<station>.nc.")
    p.add_argument("stacked", help="folder of stacked files (or one file)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder for gated files")
    p.add_argument("--per-decade", type=float, default=9.0, help="gates per decade (9)")
    p.add_argument("--shape", choices=("boxcar", "taper"), default="boxcar",
                   help="gate window shape (default boxcar)")
    p.add_argument("--t-min", type=float, metavar="S", help="first gate opens at S seconds")
    p.add_argument("--t-max", type=float, metavar="S", help="last gate closes by S seconds")
    p.add_argument("--snr-min", type=float, default=2.0,
                   help="gates with |value| below this many standard errors are flagged (2)")
    p.add_argument("--figures", action="store_true", help="also write decay figures (PNG)")
    return p


def _check_options(args):
    """Option errors are one error (exit 2), not one failure per station."""
    import math
    if not (math.isfinite(args.per_decade) and args.per_decade > 0):
        raise input_error("--per-decade", f"must be positive, got {args.per_decade}")
    for name in ("t_min", "t_max"):
        v = getattr(args, name)
        if v is not None and not (math.isfinite(v) and v > 0):
            raise input_error(f"--{name.replace('_', '-')}", f"must be positive (s), got {v}")
    if args.t_min is not None and args.t_max is not None and not args.t_min < args.t_max:
        raise input_error("--t-max", f"must exceed --t-min, got {args.t_min}, {args.t_max}")
    if not (math.isfinite(args.snr_min) and args.snr_min >= 0):
        raise input_error("--snr-min", f"must be zero or positive, got {args.snr_min}")


def run(args) -> int:
    from rich.console import Console

    from ..gate.windows import gate_stacked
    from ..io.stacked import read_product, write_dataset
    from ..qc import decay_figure, qc_rows, qc_table
    src = Path(args.stacked)
    files = [src] if src.is_file() else sorted(src.glob("*.nc"))
    if not files:
        raise input_error("stacked", "no stacked .nc files found", src)
    out = Path(args.out)
    if src.resolve() == out.resolve():
        raise input_error("out", "must differ from the input folder")
    _check_options(args)
    console = Console()
    rows, failed = [], []
    for f in files:
        try:
            st = read_product(f, "stacked")
            g = gate_stacked(st, args.per_decade, args.shape, args.t_min, args.t_max,
                             args.snr_min)
            write_dataset(g, out / f.name)
            rows += qc_rows(st, g)
            if args.figures:
                (out / "qc").mkdir(parents=True, exist_ok=True)
                decay_figure(g, st).savefig(out / "qc" / f"{f.stem}_decay.png", dpi=110)
        except TemInputError as exc:
            failed.append((f.stem, str(exc)))
            print(f"tem gate: error: {exc}", file=sys.stderr, flush=True)
    qc_table(rows, failed, title="Gate QC", console=console)
    return 1 if failed else 0
