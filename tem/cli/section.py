"""tem section: models file -> section grid (netCDF), section and model figures, QC report."""
from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from ..errors import input_error
from ..section import read_line_csv

HELP = "stitch 1D models along the profile: section grid, figures, QC report"


def add_profile_options(p):
    """Options shared with ``tem export``: the profile line and the grid."""
    g = p.add_argument_group("profile and grid")
    g.add_argument("--line", metavar="CSV", help="profile polyline: CSV with columns x,y (m), one "
                   "vertex per row in profile order (default: through the stations)")
    g.add_argument("--order", choices=("given", "principal"), default="given",
                   help="station order of the default polyline (default: given)")
    g.add_argument("--depth-step", type=float, default=5.0, metavar="M",
                   help="vertical sample interval in m (default 5)")
    g.add_argument("--max-depth", type=float, metavar="M",
                   help="section bottom in m (default 1.25 x deepest DOI)")
    g.add_argument("--trace-spacing", type=float, metavar="M",
                   help="resample along the profile every M metres (default: one column per station)")
    g.add_argument("--lateral", choices=("linear", "nearest"), default="linear",
                   help="interpolation between stations (default linear in log10 resistivity)")
    g.add_argument("--max-gap", type=float, metavar="M",
                   help="leave a gap between stations farther apart than M metres")
    g.add_argument("--vertical", choices=("depth", "elevation"), default="depth",
                   help="vertical axis: depth below surface, or elevation (default depth)")
    return g


def profile_kwargs(args):
    """Keyword arguments for :func:`tem.section.stitch_models` from parsed options."""
    kw = {"order": args.order, "lateral": args.lateral, "max_gap": args.max_gap,
          "vertical": args.vertical, "max_depth": args.max_depth}
    if args.line:
        kw["line"] = read_line_csv(args.line)
    if args.trace_spacing is not None:
        if not args.trace_spacing > 0:
            raise input_error("--trace-spacing", f"must be positive, got {args.trace_spacing}")
        kw["spacing"] = args.trace_spacing
    return kw


def regular_positions(models, kw):
    """Regular column chainages from the first to the last station."""
    from ..section import polyline_chainage, station_line

    x, y = models["x"].values, models["y"].values
    if "line" in kw:
        lx, ly = kw["line"]
    else:
        lx, ly, _ = station_line(x, y, kw["order"])
    s, _ = polyline_chainage(x, y, lx, ly)
    # A 1 mm tolerance keeps the last station when the span is a whole number of
    # spacings up to rounding of the coordinates.
    n = int(np.floor((s.max() - s.min() + 1e-3) / kw["spacing"])) + 1
    return np.minimum(s.min() + np.arange(n) * kw["spacing"], s.max())


def build_grid(models, args, depth=None):
    """Section grid from parsed options; ``depth`` (m) overrides the depth axis (TWT)."""
    from ..section import stitch_models

    kw = profile_kwargs(args)
    spacing = kw.pop("spacing", None)
    if spacing is not None:
        kw["positions"] = regular_positions(models, dict(kw, spacing=spacing))
    return stitch_models(models, args.depth_step, depth=depth, **kw)


def png_of(files):
    """The PNG among written figure files (the report links PNGs)."""
    for f in files:
        if f.suffix == ".png":
            return f
    raise input_error("--formats", "the report links PNG figures; include png")


def add_parser(subparsers):
    p = subparsers.add_parser("section", help=HELP, description=HELP + ".")
    p.add_argument("models", help="models file (netCDF, from tem invert)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created)")
    add_profile_options(p)
    f = p.add_argument_group("figures")
    f.add_argument("--below-doi", choices=("shade", "hide"), default="shade",
                   help="below the DOI: veil and hatch the model, or hide it (default shade)")
    f.add_argument("--vmin", type=float, metavar="OHMM", help="colour scale minimum, ohm-m")
    f.add_argument("--vmax", type=float, metavar="OHMM", help="colour scale maximum, ohm-m")
    f.add_argument("--formats", default="png,pdf", help="figure formats, comma separated (default png,pdf)")
    f.add_argument("--title", default=None, help="section figure title")
    f.add_argument("--rhoa-csv", metavar="CSV", help="apparent resistivity table (columns "
                   "station,time_s,rhoa_ohmm, or the rhoa.csv of 'tem rhoa') for a "
                   "pseudo-section figure")
    f.add_argument("--rhoa-component", metavar="COMP", help="component of a rhoa.csv with "
                   "several (default: the first listed)")
    f.add_argument("--report", action="store_true", help="also write report.html linking the figures")
    return p


def read_rhoa_csv(path, component=None):
    """Per-station (time, rho_a) arrays from a CSV ``station,time_s,rhoa_ohmm``.

    The table written by ``tem rhoa`` (``rhoa.csv``) is read as well: its gate
    centre ``t_centre_s`` is the time, rows flagged ``usable = 0`` or without a
    converted ``rhoa_ohmm`` are left out, and with a ``component`` column only
    the rows of ``component`` (default: the first listed) are used. Returns
    ``({station: (time_s, rhoa_ohmm)}, component or None)``.
    """
    path = Path(path)
    if not path.is_file():
        raise input_error("rhoa", "file not found", path)
    table = {}
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            reader = csv.DictReader(ln for ln in fh if ln.strip() and not ln.startswith("#"))
            fields = [f.strip() for f in reader.fieldnames or []]
            tcol = "time_s" if "time_s" in fields or "t_centre_s" not in fields else "t_centre_s"
            for need in ("station", tcol, "rhoa_ohmm"):
                if need not in fields:
                    raise input_error(need, "column missing", path)
            for k, row in enumerate(reader, start=2):
                row = {(key or "").strip(): (v or "").strip() for key, v in row.items()}
                comp = row.get("component") if "component" in fields else None
                if comp is not None:
                    component = component or comp
                    if comp != component:
                        continue
                if row.get("usable", "1") in ("0", "false", "False") or not row["rhoa_ohmm"]:
                    continue
                try:
                    t, r = float(row[tcol]), float(row["rhoa_ohmm"])
                except ValueError:
                    raise input_error(tcol, f"line {k}: not a number", path) from None
                if not (np.isfinite(t) and t > 0 and np.isfinite(r) and r > 0):
                    continue
                table.setdefault(row["station"], ([], []))
                table[row["station"]][0].append(t)
                table[row["station"]][1].append(r)
    except UnicodeDecodeError:
        raise input_error("rhoa", "not a UTF-8 text file", path) from None
    if "component" in fields and component is not None and not table:
        raise input_error("component", f"no usable apparent resistivity for {component!r}", path)
    return {k: (np.array(v[0]), np.array(v[1])) for k, v in table.items()}, component


def _check_colour_range(vmin, vmax):
    for name, v in (("--vmin", vmin), ("--vmax", vmax)):
        if v is not None and not (np.isfinite(v) and v > 0):
            raise input_error(name, f"must be a positive resistivity (ohm-m), got {v}")
    if vmin is not None and vmax is not None and not vmin < vmax:
        raise input_error("--vmax", f"must exceed --vmin, got {vmin}, {vmax}")


def run(args) -> int:
    from ..io.models import export_record, read_models
    from ..io.sections import write_section_grid
    from ..section.plot import model_figure, pseudo_section_figure, save_figure, section_figure
    from ..provenance import records_from_json
    from ..report.html import write_report
    from ..section import pseudo_section_grid

    models = read_models(args.models)
    out = Path(args.out)
    if out.resolve() == Path(args.models).resolve().parent:
        raise input_error("--out", "must not be the folder of the input models file", args.out)
    formats = tuple(s.strip() for s in args.formats.split(",") if s.strip())
    if args.report and "png" not in formats:
        raise input_error("--formats", "the report links PNG figures; include png")
    _check_colour_range(args.vmin, args.vmax)
    # Read every input before writing anything.
    if args.rhoa_csv:
        table, rhoa_comp = read_rhoa_csv(args.rhoa_csv, args.rhoa_component)
    grid = build_grid(models, args)
    if args.rhoa_csv:
        ids = grid["station"].values.astype(str)
        missing = [s for s in ids if s not in table]
        if missing:
            raise input_error("station", f"no apparent resistivity for {', '.join(missing)}", args.rhoa_csv)
    params = {k: v for k, v in vars(args).items() if not k.startswith("_") and k != "command"}
    records = records_from_json(models.attrs.get("provenance"))
    records.append(export_record("section", params, args.models))
    write_section_grid(grid, out / "section.nc", records)
    fig = section_figure(grid, title=args.title, vmin=args.vmin, vmax=args.vmax,
                         below_doi=args.below_doi)
    section_files = save_figure(fig, out / "figures" / "section", formats)
    model_files = save_figure(model_figure(models, max_depth=args.max_depth),
                              out / "figures" / "models", formats)
    figures = [(section_files, "Resistivity section along the profile")]
    if args.rhoa_csv:
        t_all = np.concatenate([table[s][0] for s in ids])
        t_all = t_all[t_all > 0]
        axis = np.logspace(np.log10(t_all.min()), np.log10(t_all.max()), 60)
        pos = grid["distance"].values
        val = pseudo_section_grid(grid["station_distance"].values, [table[s][0] for s in ids],
                                  [table[s][1] for s in ids], pos, axis, lateral=args.lateral,
                                  max_gap=args.max_gap)
        pfig = pseudo_section_figure(pos, axis, val, grid["station_distance"].values, ids,
                                     title=f"{rhoa_comp} apparent resistivity" if rhoa_comp else None)
        pfiles = save_figure(pfig, out / "figures" / "pseudosection", formats)
        figures.append((pfiles, "Apparent resistivity pseudo-section"))
    print(f"section: {grid.sizes['distance']} columns x {grid.sizes[grid['log10_resistivity'].dims[1]]} "
          f"samples -> {out / 'section.nc'}")
    if args.report:
        path = write_report(out / "report.html", models,
                            section_figures=[(png_of(f), c) for f, c in figures],
                            model_figures=[(png_of(model_files), "1D models with DOI")])
        print(f"report: {path}")
    return 0
