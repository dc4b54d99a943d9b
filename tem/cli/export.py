"""tem export: models file -> CSV layer table, LAS pseudo-wells, SEG-Y depth and TWT sections."""
from __future__ import annotations

import json
from pathlib import Path

from ..errors import input_error
from .section import add_profile_options, build_grid

HELP = "export models: CSV layers, LAS 2.0 pseudo-wells, SEG-Y depth or two-way-time sections"
KINDS = ("csv", "las", "segy-depth", "segy-twt")


def add_parser(subparsers):
    p = subparsers.add_parser("export", help=HELP, description=HELP + ".")
    p.add_argument("models", help="models file (netCDF, from tem invert)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created)")
    p.add_argument("--what", default=None, metavar="LIST",
                   help="comma-separated exports among csv,las,segy-depth,segy-twt "
                        "(default: csv,las,segy-depth, plus segy-twt when --velocity is given)")
    las = p.add_argument_group("LAS pseudo-wells")
    las.add_argument("--las-step", type=float, default=1.0, metavar="M",
                     help="depth step of the LAS curves in m (default 1)")
    las.add_argument("--las-bottom", type=float, metavar="M",
                     help="bottom of every log in m (default 1.25 x each station's DOI)")
    las.add_argument("--las-null-below-doi", action="store_true",
                     help="write RES as null (-999.25) below the DOI (default: keep, flag in BDOI)")
    add_profile_options(p)
    sg = p.add_argument_group("SEG-Y")
    sg.add_argument("--segy-value", choices=("resistivity", "log10"), default="resistivity",
                    help="sample value: resistivity in ohm-m or its log10 (default resistivity)")
    sg.add_argument("--segy-below-doi", choices=("zero", "keep"), default="zero",
                    help="samples below the DOI: 0.0 or the model value (default zero)")
    sg.add_argument("--line-number", type=int, default=1, help="inline number in trace headers (default 1)")
    sg.add_argument("--velocity", metavar="CSV",
                    help="interval velocity table (columns depth_m,vp_m_per_s) for the TWT section")
    sg.add_argument("--dt-ms", type=float, default=2.0, metavar="MS",
                    help="TWT sample interval in ms (default 2)")
    sg.add_argument("--max-twt-ms", type=float, metavar="MS",
                    help="TWT section length in ms (default: TWT of the section bottom)")
    return p


def _kinds(args):
    if args.what is None:
        kinds = ["csv", "las", "segy-depth"] + (["segy-twt"] if args.velocity else [])
    else:
        kinds = [k.strip() for k in args.what.split(",") if k.strip()]
        bad = [k for k in kinds if k not in KINDS]
        if bad:
            raise input_error("--what", f"unknown export {', '.join(bad)}; valid: {', '.join(KINDS)}")
    if "segy-twt" in kinds and not args.velocity:
        raise input_error("--velocity", "the TWT section needs a velocity table")
    return kinds


def _depth_interval_mm(step):
    mm = step * 1000.0
    if not 1 <= round(mm) <= 65535 or abs(mm - round(mm)) > 1e-6:
        raise input_error("--depth-step", f"{step} m cannot be stored as whole millimetres "
                          "in 1..65535 (SEG-Y bytes 3217-3218)")
    return int(round(mm))


def run(args) -> int:
    from ..export import las as las_io
    from ..export import segy
    from ..io.atomic import write_text_atomic
    from ..io.models import read_models, write_models_csv
    from ..provenance import records_from_json, stage_record
    from ..section import depth_to_twt

    kinds = _kinds(args)
    models = read_models(args.models)
    out = Path(args.out)
    if out.resolve() == Path(args.models).resolve().parent:
        raise input_error("--out", "must not be the folder of the input models file", args.out)
    epsg = int(models.attrs.get("epsg", 0) or 0)
    table = segy.read_velocity_table(args.velocity) if "segy-twt" in kinds else None
    # Check every option before writing anything.
    depth_interval = _depth_interval_mm(args.depth_step) if "segy-depth" in kinds else None
    if "segy-twt" in kinds:
        if args.vertical != "depth":
            raise input_error("--vertical", "the TWT section is computed from depth below surface; "
                              "use --vertical depth")
        time_interval = int(round(args.dt_ms * 1000))
        if abs(args.dt_ms * 1000 - time_interval) > 1e-6 or not 1 <= time_interval <= 65535:
            raise input_error("--dt-ms", "must be a whole number of microseconds in 1..65535")
        if args.max_twt_ms is not None and not args.max_twt_ms > 0:
            raise input_error("--max-twt-ms", f"must be positive, got {args.max_twt_ms}")
    if "las" in kinds and not args.las_step > 0:
        raise input_error("--las-step", f"must be positive, got {args.las_step}")
    if "las" in kinds and args.las_bottom is not None and not 0 < args.las_bottom < float("inf"):
        raise input_error("--las-bottom", f"must be a positive depth (m), got {args.las_bottom}")
    grid = build_grid(models, args) if {"segy-depth", "segy-twt"} & set(kinds) else None
    written = []
    if "csv" in kinds:
        written.append(write_models_csv(models, out / "models.csv"))
    if "las" in kinds:
        written += las_io.write_las_all(models, out / "las", args.las_step, args.las_bottom,
                                        args.las_null_below_doi, source=args.models)
    if "segy-depth" in kinds:
        data, first, step = segy.depth_section_traces(grid, args.segy_value, args.segy_below_doi)
        text = segy.describe(grid, args.vertical, step, args.segy_value, args.segy_below_doi,
                             epsg, args.models)
        written.append(segy.write_segy(out / "section_depth.sgy", data, grid, depth_interval, first,
                                       args.vertical, text, args.line_number))
    if "segy-twt" in kinds:
        dt = args.dt_ms * 1e-3
        if args.max_twt_ms is not None:
            max_twt = args.max_twt_ms * 1e-3
        else:
            bottom = float(grid[grid["log10_resistivity"].dims[1]].values[-1])
            max_twt = float(depth_to_twt(bottom, *table))
        data, twt, tgrid, doi_twt = segy.twt_section_traces(
            lambda d: build_grid(models, args, depth=d), table[0], table[1], dt, max_twt,
            args.segy_value, args.segy_below_doi)
        text = segy.describe(tgrid, "twt", dt, args.segy_value, args.segy_below_doi, epsg,
                             args.models, args.velocity)
        written.append(segy.write_segy(out / "section_twt.sgy", data, tgrid, time_interval, 0.0, "twt",
                                       text, args.line_number, doi_twt=doi_twt))
    params = {k: v for k, v in vars(args).items() if not k.startswith("_") and k != "command"}
    records = records_from_json(models.attrs.get("provenance"))
    record = stage_record("export", params, [args.models] + ([args.velocity] if args.velocity else []))
    manifest = {
        "tem_format": "export-manifest", "format_version": "1.0",
        "files": [str(Path(p).relative_to(out)) for p in written],
        "provenance": records + [record],
    }
    write_text_atomic(out / "export.json", json.dumps(manifest, indent=1, sort_keys=True) + "\n")
    n_las = sum(1 for p in written if Path(p).suffix == ".las")
    print(f"export: {len(written)} files in {out} ({n_las} LAS; "
          f"{', '.join(k for k in kinds if k != 'las') or 'no other'})")
    return 0
