"""tem invert: gated soundings -> layered models (smooth or few-layer; laterally constrained)."""
from __future__ import annotations

from ..io.checks import real_path
from . import common

HELP = "1D inversion of gated soundings (Occam smooth, few-layer, laterally constrained)"


def add_parser(sub):
    from ..invert.settings import INVERT

    p = sub.add_parser("invert", help=HELP, description="Invert gated soundings (one netCDF per "
                       "station) into layered resistivity models with depth of investigation "
                       "and uncertainty. Writes OUT/models/models.nc, models.csv, fit.csv and "
                       "OUT/figures/stations/<station>_fit.png. Exit status 1 if a station failed or "
                       "its chosen model is not fitted (misfit; every product is "
                       "still written), 2 on bad input. With --kind posterior, stations whose "
                       "chains did not converge have their intervals marked unconverged (a "
                       "warning: exit status unchanged).")
    p.add_argument("gated", nargs="+", help="gated-sounding files, or folders of them")
    p.add_argument("--qc", metavar="FILE", default=None,
                   help="evening QC table (qc/stations.csv of 'tem gate'): every models file "
                        "then carries each station's QC verdict. Default: the qc/stations.csv "
                        "of the project the gated files are in (PROJECT/gated -> "
                        "PROJECT/qc/stations.csv) when it exists; 'none' for no QC verdicts")
    common.add_out(p)
    common.add_run_options(p)
    INVERT.add_options(p, group_title="inversion")
    return p


def run(args) -> int:
    from rich.console import Console

    from ..invert.settings import INVERT
    from ..invert.stage import not_fitted
    from ..invert.stage import run as invert_run
    from ..io.project import check_output

    settings = INVERT.from_command_line(args)
    files = common.input_files(args.gated, "gated")
    qc = qc_table(args.qc, files)
    check_output(args.out, ["invert"], inputs=files + ([qc] if qc else []))
    with common.stage_context(args, "invert", len(files)) as ctx:
        res = invert_run(settings, files, args.out, ctx, qc=qc)
    if qc is not None:
        res.notes.append(f"evening QC verdicts from {qc}")
    fit_table(res, Console())
    return common.finish("invert", res, args.out, not_fitted=not_fitted(res))


def qc_table(option, files):
    """The QC table to carry into the models: ``--qc FILE``, ``none``, or found next to the
    gated files (all in one ``PROJECT/gated`` folder, and ``PROJECT/qc/stations.csv`` exists)."""
    from pathlib import Path

    from ..errors import input_error

    if option is not None:
        if option.lower() == "none":
            return None
        path = Path(option)
        if path.is_dir():
            raise input_error("--qc", "is a folder; give the QC table (qc/stations.csv)", path)
        if not path.is_file():
            raise input_error("--qc", "not found", path)
        return path
    folders = {real_path(f).parent for f in files}
    if len(folders) != 1:
        return None
    folder = folders.pop()
    found = folder.parent / "qc" / "stations.csv"
    return found if folder.name == "gated" and found.is_file() else None


_COLOUR = {"fitted": "green", "misfit": "bold red", "stalled": "yellow",
           "parameter-at-bound": "yellow", "degenerate-layer": "yellow"}


def fit_table(res, console):
    """Per station: chosen model, verdict, final chi2 against its tolerance, DOI, reasons."""
    from rich.table import Table

    rows = [(sid, oc.info) for sid, oc in res.stations.items() if oc.status == "ok"]
    if not rows:
        return
    t = Table(title="Inversion: verdict on each station's chosen model", header_style="bold")
    for col, just in (("station", "left"), ("model", "left"), ("verdict", "left"),
                      ("chi2", "right"), ("tol", "right"), ("DOI m", "right")):
        t.add_column(col, justify=just, no_wrap=True)
    t.add_column("reasons and other models", overflow="fold")
    for sid, i in rows:
        own = i.get("verdict_kind", i["model_kind"])
        v = i["verdicts"].get(own, {})
        others = [f"{k} {o['status']} chi2 {o['chi2']:.2f}" for k, o in i["verdicts"].items()
                  if k != own and o.get("chi2") is not None]
        reasons = v.get("reasons", [])[1:] + others
        if "interval_text" in i:         # the verdict on the posterior intervals, with numbers
            colour = {"unconverged": "yellow", "unusable": "red"}.get(i.get("interval_verdict"),
                                                                     "green")
            reasons.append(f"[{colour}]{i['interval_text']}[/]")
        elif "rhat_max" in i:
            reasons.append(f"posterior R-hat {i['rhat_max']:.3f}, ESS {i['ess_min']:.0f}")
        t.add_row(sid, i["model_kind"], f"[{_COLOUR.get(i['verdict'], 'white')}]{i['verdict']}[/]",
                  f"{i['chi2']:.2f}", f"{v.get('tolerance', float('nan')):.2f}",
                  f"{i['doi']:.0f}", "; ".join(reasons))
    console.print(t)
