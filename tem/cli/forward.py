"""tem forward: layered model (CSV) + survey (TOML) -> modelled responses (CSV) and a figure."""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import TemInputError, input_error
from . import common

HELP = "model the transient response of a layered earth for a survey's geometry"


def add_parser(sub):
    from ..forward.settings import FORWARD

    p = sub.add_parser("forward", help=HELP, description=HELP + ". Writes OUT/response.csv "
                       "and OUT/response.png (values per ampere of transmitter current, SI).")
    p.add_argument("model", help="layered model CSV: thickness_m,resistivity_ohmm (half-space "
                   "last, empty thickness); optional station column for per-station models")
    p.add_argument("survey", help="survey description TOML (docs/survey.md)")
    common.add_out(p, what="output folder (created)")
    p.add_argument("--stations", metavar="IDS", help="comma-separated subset of stations")
    FORWARD.add_options(p, group_title="times and response")
    return p


def run(args) -> int:
    from rich.console import Console

    from .. import provenance
    from ..forward import Simulation
    from ..forward.files import read_model_csv, response_csv_text, response_figure
    from ..forward.settings import FORWARD
    from ..forward.sounding import survey_lowpass, survey_receiver, survey_source, survey_waveform
    from ..io.atomic import write_text_atomic
    from ..io.figures import save_figure
    from ..io.project import check_output
    from ..survey import read_survey

    s = FORWARD.from_command_line(args)
    out = Path(args.out)
    check_output(out, ["forward"], inputs=[args.model, args.survey],
                 planned=["response.csv", "response.png"])
    models = read_model_csv(args.model)
    survey = read_survey(args.survey)
    src = survey_source(survey.transmitter, args.survey)
    wf = survey_waveform(survey.transmitter, args.survey) if s.response == "waveform" else None
    edges = np.geomspace(s.t_min, s.t_max, s.gates + 1)
    g0, g1 = edges[:-1], edges[1:]
    stations = survey.stations
    if args.stations is not None:        # "" names no station: refused, not all
        want = [x.strip() for x in args.stations.split(",") if x.strip()]
        stations = [st for st in survey.stations if st.id in want]
        if not stations:
            raise input_error("--stations", "no matching station in the survey", args.survey)
    rows, curves = [], []
    for st in stations:
        model = models.get(st.id, models.get("*"))
        if model is None:
            raise input_error("station", f"no model for station {st.id!r} in the model file",
                              args.model)
        recs = st.data_receivers
        if not recs:
            continue
        try:
            sim = Simulation(src, [survey_receiver(r, st) for r in recs], gates=(g0, g1),
                             gate_shape=s.shape, waveform=wf, response=s.response,
                             lowpass=survey_lowpass(survey))
        except TemInputError:
            raise
        except ValueError as exc:
            raise input_error(f"station {st.id}", str(exc).splitlines()[0], args.survey) from None
        d = sim.predict(model)
        for r, v in zip(recs, d):
            curves.append({"station": st.id, "component": r.component, "time": sim.times, "value": v})
            for a, b, tc, val in zip(g0, g1, sim.times, v):
                rows.append({"station": st.id, "component": r.component, "open": a, "close": b,
                             "time": tc, "value": val})
    rec = provenance.stage_record("forward", s.as_dict(), inputs=[args.model, args.survey])
    header = [f"tem forward: per-ampere responses ({s.response}), gate averages, "
              "time from the end of the switch-off ramp",
              "provenance: " + provenance.records_to_json([rec])]
    write_text_atomic(out / "response.csv", response_csv_text(rows, header))
    save_figure(response_figure(curves, title=Path(args.model).stem), out / "response", dpi=130)
    Console(stderr=True).print(f"wrote {out / 'response.csv'} ({len(rows)} rows) and "
                               f"{out / 'response.png'}")
    return 0
