"""tem synth: a realistic raw field day from a survey and layered models (seeded)."""
from __future__ import annotations

import csv
from pathlib import Path

from ..errors import input_error

HELP = "write synthetic raw recordings for a survey (forward engine + realistic noise)"


def add_parser(sub):
    p = sub.add_parser("synth", help=HELP, description=HELP + ". Recordings go to the paths the "
                       "survey lists, resolved under --out (never into the survey's folder).")
    p.add_argument("survey", nargs="?", help="survey TOML; omit with --emberline")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    p.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    p.add_argument("--duration", type=float, default=900.0, metavar="S",
                   help="seconds recorded per station (default 900)")
    p.add_argument("--models", metavar="CSV", help="models per station: CSV with columns "
                   "station,thickness_m,resistivity_ohmm (half-space last, empty thickness)")
    p.add_argument("--emberline", action="store_true",
                   help="use the built-in Emberline Plateau scenario (survey and models); "
                   "the survey is written to DIR/survey.toml")
    p.add_argument("--noisy-station", metavar="ID", help="station with 8x random noise")
    p.add_argument("--dead", metavar="ID:COMPONENT", help="channel that records nothing")
    p.add_argument("--stations", metavar="IDS", help="comma-separated subset of stations")
    return p


def read_models_csv(path):
    from ..forward import LayeredModel
    path = Path(path)
    if not path.is_file():
        raise input_error("models", "file not found", path)
    rows = {}
    with open(path, newline="", encoding="utf-8") as fh:
        for k, row in enumerate(csv.DictReader(ln for ln in fh if not ln.startswith("#")), start=2):
            try:
                sid = row["station"].strip()
                th = row["thickness_m"].strip()
                rho = float(row["resistivity_ohmm"])
            except (KeyError, AttributeError, ValueError):
                raise input_error(f"line {k}", "needs station,thickness_m,resistivity_ohmm", path) \
                    from None
            rows.setdefault(sid, []).append((float(th) if th else None, rho))
    out = {}
    for sid, layers in rows.items():
        try:
            out[sid] = LayeredModel(thickness=[t for t, _ in layers[:-1]],
                                    resistivity=[r for _, r in layers])
        except ValueError as exc:
            raise input_error(f"station {sid}", str(exc), path) from None
    return out


def run(args) -> int:
    from rich.progress import Progress

    from ..survey import read_survey, replace, write_survey
    from ..synth import emberline_survey, synth_survey
    out = Path(args.out)
    subset = args.stations.split(",") if args.stations else None
    if args.emberline:
        survey, models = emberline_survey(base_dir=out, stations=subset)
        write_survey(survey, out / "survey.toml")
    else:
        if not args.survey:
            raise input_error("survey", "give a survey TOML or --emberline")
        survey = replace(read_survey(args.survey), base_dir=out)
        if subset:
            survey = replace(survey, stations=[s for s in survey.stations if s.id in subset])
        if not args.models:
            raise input_error("models", "give --models CSV (or use --emberline)")
        models = read_models_csv(args.models)
        write_survey(survey, out / "survey.toml")
    dead = tuple(args.dead.split(":", 1)) if args.dead else None
    with Progress(transient=True) as prog:
        task = prog.add_task("synth", total=len(survey.stations))
        synth_survey(survey, models, out, seed=args.seed, duration=args.duration,
                     noisy_station=args.noisy_station, dead_channel=dead,
                     progress=lambda i, n: prog.update(task, completed=i))
    print(f"wrote raw recordings of {len(survey.stations)} stations under {out}; "
          f"survey: {out / 'survey.toml'}")
    return 0
