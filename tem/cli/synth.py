"""tem synth: a realistic raw field day from a survey and layered models (seeded)."""
from __future__ import annotations

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
    p.add_argument("--models", metavar="CSV", help="layered models: CSV with columns "
                   "station,thickness_m,resistivity_ohmm (half-space last with an empty "
                   "thickness; without a station column one model for every station), the "
                   "format of 'tem forward'")
    p.add_argument("--emberline", action="store_true",
                   help="use the built-in Emberline Plateau scenario (survey and models); "
                   "the survey is written to DIR/survey.toml")
    p.add_argument("--noisy-station", metavar="ID", help="station with 8x random noise")
    p.add_argument("--dead", metavar="ID:COMPONENT", help="channel that records nothing")
    p.add_argument("--stations", metavar="IDS", help="comma-separated subset of stations")
    p.add_argument("--raw-format", choices=("npy", "mseed"), default="npy",
                   help="recording format with --emberline: npy + sidecar (default) or MiniSEED "
                        "(with a survey, each receiver's format or file suffix decides)")
    return p


def _dead_channel(text):
    if text is None:
        return None
    sid, sep, comp = text.partition(":")
    if not (sep and sid and comp):
        raise input_error("--dead", f"expected ID:COMPONENT, got {text!r}")
    return sid, comp


def run(args) -> int:
    from rich.progress import Progress

    from ..forward.files import read_model_csv
    from ..io.project import check_output
    from ..survey import read_survey, replace, write_survey
    from ..synth import emberline_survey, synth_survey
    out = Path(args.out)
    subset = args.stations.split(",") if args.stations else None
    dead = _dead_channel(args.dead)
    if args.emberline:
        if subset:
            ids = [st.id for st in emberline_survey(base_dir=out)[0].stations]
            unknown = [s for s in subset if s not in ids]
            if unknown:
                raise input_error("--stations", f"no station {unknown[0]!r} in the Emberline "
                                  f"survey; valid: {', '.join(ids)}")
        survey, models = emberline_survey(base_dir=out, stations=subset,
                                          raw_format=args.raw_format)
    else:
        if not args.survey:
            raise input_error("survey", "give a survey TOML or --emberline")
        src = read_survey(args.survey)
        inputs = [Path(args.survey)] + ([Path(args.models)] if args.models else [])
        planned = ["survey.toml"] + [f for st in src.stations for r in st.receivers for f in r.files]
        check_output(out, ["synth"], inputs=inputs, read_only=[Path(args.survey).parent],
                     planned=planned)
        if subset:
            unknown = [s for s in subset if s not in {st.id for st in src.stations}]
            if unknown:
                raise input_error("--stations", f"no station {unknown[0]!r} in the survey",
                                  args.survey)
        survey = replace(src, base_dir=out)
        if subset:
            survey = replace(survey, stations=[s for s in survey.stations if s.id in subset])
        if not args.models:
            raise input_error("models", "give --models CSV (or use --emberline)")
        given = read_model_csv(args.models)
        models = {st.id: given.get(st.id, given.get("*")) for st in survey.stations}
        missing = [sid for sid, m in models.items() if m is None]
        if missing:
            raise input_error("station", f"no rows for station {', '.join(missing)}", args.models)
    with Progress(transient=True) as prog:
        task = prog.add_task("synth", total=len(survey.stations))
        synth_survey(survey, models, out, seed=args.seed, duration=args.duration,
                     noisy_station=args.noisy_station, dead_channel=dead,
                     progress=lambda i, n: prog.update(task, completed=i))
    processing = None
    if not args.emberline:     # the source's [processing] table goes with it (it was dropped,
        from ..pipeline.settings import read_processing  # and `tem run` used the defaults)
        processing = read_processing(args.survey) or None
    write_survey(survey, out / "survey.toml", processing=processing)
    print(f"wrote raw recordings of {len(survey.stations)} stations under {out}; "
          f"survey: {out / 'survey.toml'}")
    return 0
