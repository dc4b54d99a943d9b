"""tem forward: layered model (CSV) + survey (TOML) -> modelled responses (CSV) and a figure."""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import TemInputError, input_error

HELP = "model the transient response of a layered earth for a survey's geometry"


def add_parser(sub):
    p = sub.add_parser("forward", help=HELP, description=HELP + ". Writes OUT/response.csv "
                       "and OUT/response.png (values per ampere of transmitter current, SI).")
    p.add_argument("model", help="layered model CSV: thickness_m,resistivity_ohmm (half-space "
                   "last, empty thickness); optional station column for per-station models")
    p.add_argument("survey", help="survey description TOML (docs/survey.md)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    p.add_argument("--tmin", type=float, default=1e-4, help="first gate opening, s (1e-4)")
    p.add_argument("--tmax", type=float, default=1.0, help="last gate closing, s (1.0)")
    p.add_argument("--gates", type=int, default=31, help="number of log-spaced gates (31)")
    p.add_argument("--gate-shape", choices=("boxcar", "taper"), default="boxcar")
    p.add_argument("--response", choices=("waveform", "step-off", "step-on", "impulse"),
                   default="waveform", help="waveform: the survey's periodic bipolar current "
                   "with its ramps (default); or an ideal step or impulse")
    p.add_argument("--station", action="append", help="only these station ids (repeatable)")
    return p


def run(args) -> int:
    from rich.console import Console

    from .. import provenance
    from ..forward import Receiver, Simulation
    from ..forward.files import read_model_csv, response_csv_text, response_figure
    from ..forward.sounding import source_from_attrs, waveform_from_attrs
    from ..io.atomic import atomic_path, write_text_atomic
    from ..survey import read_survey

    console = Console(stderr=True)
    if not (0 < args.tmin < args.tmax) or args.gates < 1:
        raise input_error("--tmin/--tmax/--gates", "need 0 < tmin < tmax and at least one gate")
    models = read_model_csv(args.model)
    survey = read_survey(args.survey)
    tx = survey.transmitter
    attrs = {"tx_kind": tx.kind, "tx_points": np.ravel(tx.points).tolist(),
             "base_frequency": tx.base_frequency, "duty_cycle": tx.duty_cycle,
             "ramp_on": tx.ramp_on, "ramp_off": tx.ramp_off}
    src = source_from_attrs(attrs, args.survey)
    wf = waveform_from_attrs(attrs, args.survey) if args.response == "waveform" else None
    lowpass = (survey.lowpass_order, survey.lowpass_cutoff) if survey.lowpass_order > 0 else None
    edges = np.geomspace(args.tmin, args.tmax, args.gates + 1)
    g0, g1 = edges[:-1], edges[1:]
    stations = [s for s in survey.stations if not args.station or s.id in args.station]
    if not stations:
        raise input_error("--station", "no matching station in the survey", args.survey)
    rows, curves = [], []
    for st in stations:
        model = models.get(st.id, models.get("*"))
        if model is None:
            raise input_error("station", f"no model for station {st.id!r} in the model file",
                              args.model)
        rxs, comps = [], []
        for r in st.data_receivers:
            if r.component in ("ex", "ey"):
                rxs.append(Receiver(r.component, dipole=r.dipole))
            else:
                rxs.append(Receiver(r.component, (st.x, st.y)))
            comps.append(r.component)
        if not rxs:
            continue
        try:
            sim = Simulation(src, rxs, gates=(g0, g1), gate_shape=args.gate_shape,
                             waveform=wf, response=args.response, lowpass=lowpass)
        except ValueError as exc:
            raise TemInputError(f"{args.survey}: station {st.id}: {exc}") from None
        d = sim.predict(model)
        for comp, v in zip(comps, d):
            curves.append({"station": st.id, "component": comp, "time": sim.times, "value": v})
            for a, b, tc, val in zip(g0, g1, sim.times, v):
                rows.append({"station": st.id, "component": comp, "open": a, "close": b,
                             "time": tc, "value": val})
    out = Path(args.out)
    rec = provenance.stage_record("forward", {"response": args.response, "tmin": args.tmin,
                                              "tmax": args.tmax, "gates": args.gates,
                                              "gate_shape": args.gate_shape},
                                  inputs=[args.model, args.survey])
    header = [f"tem forward: per-ampere responses ({args.response}), gate averages, "
              "time from the end of the switch-off ramp",
              "provenance: " + provenance.records_to_json([rec])]
    write_text_atomic(out / "response.csv", response_csv_text(rows, header))
    fig = response_figure(curves, title=Path(args.model).stem)
    with atomic_path(out / "response.png") as tmp:
        fig.savefig(tmp, dpi=130, format="png")
    console.print(f"wrote {out / 'response.csv'} ({len(rows)} rows) and {out / 'response.png'}")
    return 0
