"""tem rhoa: gated soundings -> apparent resistivity table, files and figures."""
from __future__ import annotations

import csv
import io
from pathlib import Path

from ..errors import TemInputError, input_error

HELP = "apparent resistivity (all-time and late-time), pseudo-depth, sounding curves, pseudo-section"


def add_parser(sub):
    p = sub.add_parser("rhoa", help=HELP, description=HELP + ". Reads gated soundings "
                       "(DIR/<station>.nc from 'tem gate') and writes OUT/rhoa.csv, "
                       "OUT/<station>.nc and figures in OUT/figures.")
    p.add_argument("gated", nargs="+", help="gated sounding files or folders of them")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    p.add_argument("--late-only", action="store_true",
                   help="skip the all-time conversion (no forward modelling; fast)")
    p.add_argument("--rho-range", nargs=2, type=float, default=(0.1, 1e5), metavar=("MIN", "MAX"),
                   help="all-time search range in ohm-m (0.1 1e5)")
    p.add_argument("--per-decade", type=int, default=12,
                   help="half-space table density, resistivities per decade (12)")
    p.add_argument("--no-figures", action="store_true", help="write no figures")
    p.add_argument("--section-axis", choices=("time", "depth"), default="time",
                   help="pseudo-section vertical axis: gate time or pseudo-depth (time)")
    p.add_argument("--component", default=None,
                   help="component for the pseudo-section (default: every component "
                   "present at two or more stations)")
    return p


def _inputs(paths):
    files = []
    for p in map(Path, paths):
        if p.is_dir():
            files += sorted(p.glob("*.nc"))
        elif p.is_file():
            files.append(p)
        else:
            raise input_error("gated", "not found", p)
    if not files:
        raise input_error("gated", "no gated .nc files found", paths[0])
    return files


def _csv_text(rows):
    from ..rhoa.sounding import TABLE_COLUMNS
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(TABLE_COLUMNS)
    for r in rows:
        w.writerow(["" if isinstance(v, float) and v != v else (f"{v:.7g}" if isinstance(v, float) else v)
                    for v in r])
    return buf.getvalue()


def run(args) -> int:
    from rich.console import Console
    from rich.progress import Progress
    from rich.table import Table

    from ..io.atomic import write_text_atomic
    from ..io.stacked import read_product, write_dataset
    from ..rhoa import rho_grid
    from ..rhoa.sounding import sounding_rhoa, table_rows

    files = _inputs(args.gated)
    out = Path(args.out)
    if any(f.parent.resolve() == out.resolve() for f in files):
        raise input_error("out", "must differ from the input folder")
    lo, hi = args.rho_range
    if not (0 < lo < hi):
        raise input_error("rho-range", "needs 0 < MIN < MAX (ohm-m)")
    console = Console(stderr=True)
    rows, failed, results = [], [], []
    n_table = 0 if args.late_only else rho_grid(lo, hi, args.per_decade).size
    with Progress(console=console, transient=True) as progress:
        task = progress.add_task("apparent resistivity", total=len(files) * max(n_table, 1))
        for f in files:
            try:
                ds = read_product(f, "gated")
                res = sounding_rhoa(ds, all_time=not args.late_only, rho_min=lo, rho_max=hi,
                                    points_per_decade=args.per_decade, source=f,
                                    progress=lambda: progress.advance(task))
                name = str(res.attrs.get("station", f.stem))
                write_dataset(res, out / f"{f.stem}.nc")
                rows += table_rows(res)
                results.append((f.stem, res))
                if args.no_figures:
                    continue
                from ..section.plot import save_figure
                from ..rhoa.plot import sounding_figure
                save_figure(sounding_figure(res, title=f"station {name}: apparent resistivity"),
                            out / "figures" / f"sounding_{f.stem}", formats=("png",))
            except TemInputError as exc:
                failed.append((f.stem, str(exc)))
                console.print(f"[red]tem rhoa: error[/]: {exc}", highlight=False, soft_wrap=True)
    if results:  # no table at all rather than a header-only one when every station failed
        write_text_atomic(out / "rhoa.csv", _csv_text(rows))
    if not args.no_figures and len(results) >= 2:
        _sections(results, args, out, console)
    _summary(results, failed, Console(), Table)
    return 1 if failed else 0


def _sections(results, args, out, console):
    import numpy as np

    from .. import rhoa as R
    from ..section.plot import save_figure
    from ..rhoa.plot import pseudo_section

    key = "rhoa_late" if args.late_only else "rhoa"
    comps = [args.component] if args.component else sorted(
        {str(c) for _, r in results for c in r["component"].values})
    for comp in comps:
        st, x, y, tt, rr, dd = [], [], [], [], [], []
        for stem, r in results:
            ch = [i for i, c in enumerate(r["component"].values) if str(c) == comp]
            if not ch:
                continue
            i = ch[0]
            st.append(str(r.attrs.get("station", stem)))
            x.append(float(r.attrs.get("x", np.nan)))
            y.append(float(r.attrs.get("y", np.nan)))
            t = r["gate_centre"].values
            rho = r[key].values[i]
            tt.append(t)
            rr.append(rho)
            dd.append(R.diffusion_depth(rho, t))
        if len(st) < 2 or not np.all(np.isfinite(x + y)):
            console.print(f"tem rhoa: no pseudo-section for {comp}: needs the component at two "
                          f"or more stations with coordinates ({len(st)} found)", highlight=False,
                          soft_wrap=True)
            continue
        try:
            fig = pseudo_section(st, x, y, tt, rr, dd, axis_kind=args.section_axis,
                                 title=f"{comp} apparent resistivity ({'late-time' if args.late_only else 'all-time'})")
        except TemInputError as exc:
            console.print(f"tem rhoa: no pseudo-section for {comp}: {exc}", highlight=False)
            continue
        save_figure(fig, out / "figures" / f"pseudosection_{comp}_{args.section_axis}", formats=("png",))


def _summary(results, failed, console, Table):
    import numpy as np

    from ..rhoa import FLAGS
    tab = Table(title="Apparent resistivity")
    for col in ("station", "channels", "gates", "converted", "two branches", "not converted",
                "late valid", "rho_a range (ohm-m)"):
        tab.add_column(col)
    for stem, r in results:
        rho = r["rhoa"].values
        use = np.isfinite(rho)
        if not use.any():
            rho = r["rhoa_late"].values
            use = np.isfinite(rho)
        two = (r["rhoa_flags"].values & FLAGS["two-branches"]) != 0
        rng = f"{np.nanmin(rho):.3g} - {np.nanmax(rho):.3g}" if use.any() else "-"
        tab.add_row(str(r.attrs.get("station", stem)), str(r.sizes["channel"]), str(r.sizes["gate"]),
                    str(int(np.isfinite(r["rhoa"].values).sum())), str(int(two.sum())),
                    str(int((~np.isfinite(r["rhoa"].values)).sum())),
                    str(int(r["rhoa_late_valid"].values.sum())), rng)
    for stem, msg in failed:
        tab.add_row(stem, "-", "-", "-", "-", "-", "-", f"failed: {msg}")
    console.print(tab)
