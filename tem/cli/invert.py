"""tem invert: gated soundings -> layered models (smooth, few-layer or laterally constrained)."""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import TemInputError, input_error

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = subparsers.add_parser(
        "invert",
        help="1D inversion of gated soundings (Occam smooth, few-layer, laterally constrained)",
        description="Invert gated soundings (one netCDF per station) into layered resistivity "
        "models with depth of investigation and uncertainty. Writes models.nc, models.csv, "
        "fit.csv and one figure per station.")
    p.add_argument("inputs", nargs="+", help="gated-sounding files, or folders holding *.nc")
    p.add_argument("-o", "--out", default="inverted", help="output folder (default: inverted)")
    p.add_argument("--kind", choices=("smooth", "few-layer", "lci"), default="smooth",
                   help="model written to models.nc (default: smooth)")
    p.add_argument("--layers", type=int, default=30, help="smooth-mesh layers incl. half-space (default 30)")
    p.add_argument("--few-layers", type=int, default=4, metavar="N",
                   help="layers of the few-layer model incl. half-space, 2-7 (default 4)")
    p.add_argument("--start", metavar="RHO[:THK]",
                   help="few-layer start, e.g. '30,500,8,2000:20,1200,600' (ohm-m : m)")
    p.add_argument("--prior", action="append", default=[], metavar="KIND:LAYER=VALUE[/STD]",
                   help="few-layer prior or fixed value (no /STD), KIND in resistivity, thickness, "
                   "depth; layers count from 0 at the top; STD is relative (ln) for resistivity "
                   "and thickness, metres for depth, e.g. 'depth:2=1350/50'. Repeatable.")
    p.add_argument("--floor", default=None, metavar="SPEC",
                   help="relative error floor: '0.03' or per component 'ex=0.05,dbzdt=0.03' (default 0.03)")
    p.add_argument("--target", type=float, default=1.0, help="target chi-square per datum (default 1)")
    p.add_argument("--ref-resistivity", type=float, default=None, help="reference model (ohm-m)")
    p.add_argument("--ref-weight", type=float, default=0.01,
                   help="reference-model weight relative to the roughness (default 0.01; 0 = off)")
    p.add_argument("--doi", choices=("sensitivity", "two-reference"), default="sensitivity")
    p.add_argument("--doi-threshold", type=float, default=None,
                   help="cumulative-sensitivity threshold (0.8) or two-reference cut-off (0.2)")
    p.add_argument("--depth-min", type=float, default=None, help="first smooth layer thickness (m)")
    p.add_argument("--depth-max", type=float, default=None, help="top of the mesh half-space (m)")
    p.add_argument("--lateral-weight", type=float, default=1.0, help="LCI lateral/vertical weight")
    p.add_argument("--workers", type=int, default=2, help="processes for stations (default 2)")
    p.add_argument("--no-figures", action="store_true", help="skip the per-station figures")
    return p


def _floats(text, what):
    try:
        return tuple(float(v) for v in text.split(",") if v.strip())
    except ValueError:
        raise input_error(what, f"not a comma-separated list of numbers: {text!r}") from None


def _priors(specs):
    from ..invert.fewlayer import Prior

    out = []
    for spec in specs:
        try:
            head, _, val = spec.partition("=")
            kind, _, layer = head.partition(":")
            value, _, std = val.partition("/")
            out.append(Prior(kind.strip(), int(layer), float(value), float(std) if std else None))
        except ValueError as exc:
            raise input_error("--prior", f"{spec!r}: {exc}") from None
    return tuple(out)


def _inputs(items):
    files = []
    for item in items:
        p = Path(item)
        if p.is_dir():
            files += sorted(p.glob("*.nc"))
        elif p.is_file():
            files.append(p)
        else:
            raise input_error("inputs", "no such file or folder", p)
    if not files:
        raise input_error("inputs", "no gated-sounding files (*.nc) found")
    return files


def settings_from_args(args):
    from ..invert.station import InversionSettings

    start_rho = start_thk = None
    if args.start:
        a, _, b = args.start.partition(":")
        start_rho, start_thk = _floats(a, "--start"), _floats(b, "--start")
        if len(start_rho) != len(start_thk) + 1:
            raise input_error("--start", "need one more resistivity than thicknesses")
    try:
        return InversionSettings(
            n_layers=args.layers, depth_min=args.depth_min, depth_max=args.depth_max,
            target=args.target, ref_resistivity=args.ref_resistivity, ref_weight=args.ref_weight,
            doi_method=args.doi, doi_threshold=args.doi_threshold,
            few_layers=(len(start_rho) if start_rho else args.few_layers) if args.kind == "few-layer" else None,
            start_resistivity=start_rho if args.kind == "few-layer" else None,
            start_thickness=start_thk if args.kind == "few-layer" else None,
            priors=_priors(args.prior))
    except ValueError as exc:
        raise TemInputError(str(exc)) from None


def run(args) -> int:
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from ..invert.batch import (StationFailure, invert_files, load_station, models_from_results,
                                write_fit_csv)
    from ..invert.data import parse_floors
    from ..io.models import write_models, write_models_csv
    from ..provenance import stage_record

    files = _inputs(args.inputs)
    settings = settings_from_args(args)
    floors = parse_floors(args.floor)
    out = Path(args.out)
    for f in files:
        if out.resolve() == f.parent.resolve():
            raise input_error("--out", "output folder is the input folder; choose another", out)
    console = Console(stderr=True)
    failures = []
    with Progress(TextColumn("[bold]invert[/]"), BarColumn(), MofNCompleteColumn(),
                  TextColumn("{task.description}"), TimeElapsedColumn(), console=console,
                  transient=False) as prog:
        task = prog.add_task("", total=len(files))
        if args.kind == "lci":
            from ..invert.station import lci_profile
            sds = []
            for f in files:
                try:
                    sds.append(load_station(f, floors))
                except TemInputError as exc:
                    failures.append(StationFailure(str(f), str(exc)))
                prog.update(task, advance=0.5, description=f"read {Path(f).name}")
            if len(sds) < 2:
                for fl in failures:
                    console.print(f"[red]failed[/] {fl.message}", soft_wrap=True)
                raise input_error("inputs", "laterally constrained inversion needs two or more usable stations")

            def cb(rec):
                prog.update(task, description=f"joint iteration {rec['iteration']}: chi2 {rec['chi2']:.2f}")
            results = lci_profile(sds, settings, lateral_weight=args.lateral_weight, callback=cb)
            prog.update(task, completed=len(files))
        else:
            def progress(path, outcome):
                ok = not isinstance(outcome, StationFailure)
                prog.update(task, advance=1, description=f"{Path(path).name} "
                            f"{'chi2 %.2f' % outcome.chi2 if ok else 'FAILED'}")
            results, fails = invert_files(files, settings, floors, workers=args.workers, progress=progress)
            failures += fails
    for fl in failures:
        console.print(f"[red]station failed:[/] {fl.message}", soft_wrap=True)
    if not results:
        console.print("[red]no station could be inverted[/]")
        return 1
    params = {k: v for k, v in vars(args).items() if not k.startswith("_")}
    record = stage_record("invert", params, inputs=files)
    ds = models_from_results(results, kind=args.kind)
    write_models(ds, out / "models.nc", record=record)
    write_models_csv(ds, out / "models.csv")
    write_fit_csv(results, out / "fit.csv", kind=args.kind)
    if args.kind == "few-layer":
        write_models(models_from_results(results, kind="smooth"), out / "models_smooth.nc", record=record)
    if not args.no_figures:
        from ..invert.plot import save_figure, station_figure
        for r in results:
            save_figure(station_figure(r, kind="few-layer" if args.kind == "few-layer" else "smooth"),
                        out / "figures" / f"{r.station}.png")
    for r in results:
        extra = ""
        if r.few is not None:
            extra = f", few-layer chi2 {r.few['chi2']:.2f}"
        console.print(f"{r.station}: chi2 {r.chi2:.2f}, DOI {r.doi:.0f} m{extra}"
                      + ("" if r.converged else f" ({r.message})"))
    print(f"wrote {out / 'models.nc'} ({len(results)} stations, {len(failures)} failed)", file=sys.stdout)
    return 1 if failures else 0
