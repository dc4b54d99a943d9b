"""Files of the forward command: layered-model CSV in, response CSV and figure out."""
from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np

from ..errors import TemInputError, input_error
from ..io import checks
from .model import LayeredModel

__all__ = ["read_model_csv", "response_csv_text", "response_figure", "UNITS"]

UNITS = {"ex": "V/m/A", "ey": "V/m/A", "bz": "T/A", "dbxdt": "T/s/A", "dbydt": "T/s/A",
         "dbzdt": "T/s/A"}


#: Most layers of one model in a model CSV.
MAX_LAYERS = 1000


def read_model_csv(path) -> dict:
    """Layered model(s) from CSV: ``thickness_m,resistivity_ohmm`` per layer, half-space last
    with an empty thickness. An optional ``station`` column gives per-station models; the
    result maps station id (or ``"*"`` for all stations) to a :class:`LayeredModel`.

    Refused with one line naming the file and the line or column: non-UTF-8
    bytes or NUL characters, a missing column, a row with more fields than
    the header, text where a number belongs, resistivity outside
    1e-6..1e12 ohm-m, thickness not in (0, 1e6] m, more than 1000 layers in
    one model, a station id with control characters.
    """
    path = Path(path)
    text = checks.read_text(path, "model")
    rows = checks.csv_rows(text, path, ("thickness_m", "resistivity_ohmm"), field="model")
    if not rows:
        raise input_error("model", "no layers", path)
    lim = checks.LIMITS
    groups: dict = {}
    for i, r in rows:
        key = r.get("station") or "*"
        if key != "*":
            checks.text(key, f"line {i}: station", path)
        rho = checks.number(r["resistivity_ohmm"], f"line {i}: resistivity_ohmm", path,
                            parse_text=True, minimum=lim["resistivity_min"],
                            maximum=lim["resistivity_max"])
        thk = r["thickness_m"]
        thk = checks.number(thk, f"line {i}: thickness_m", path, parse_text=True, positive=True,
                            maximum=lim["thickness"]) if thk else None
        layers = groups.setdefault(key, [])
        if len(layers) >= MAX_LAYERS:
            raise input_error("model", f"model {key!r}: more than {MAX_LAYERS} layers", path)
        layers.append((thk, rho))
    out = {}
    for key, layers in groups.items():
        if layers[-1][0] is not None:
            raise input_error("thickness_m", f"model {key!r}: the last row (half-space) must have "
                              "an empty thickness", path)
        if any(t is None for t, _ in layers[:-1]):
            raise input_error("thickness_m", f"model {key!r}: only the last row may have an empty "
                              "thickness", path)
        try:
            out[key] = LayeredModel([t for t, _ in layers[:-1]], [r for _, r in layers])
        except ValueError as exc:
            raise TemInputError(f"{path}: {exc}") from None
    return out


def response_csv_text(rows, header_lines=()) -> str:
    """CSV text: station, component, unit, gate_open_s, gate_close_s, time_s, value."""
    buf = io.StringIO()
    for h in header_lines:
        buf.write(f"# {h}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["station", "component", "unit", "gate_open_s", "gate_close_s", "time_s", "value"])
    for r in rows:
        w.writerow([r["station"], r["component"], UNITS[r["component"]],
                    f"{r['open']:.6e}", f"{r['close']:.6e}", f"{r['time']:.6e}", f"{r['value']:.8e}"])
    return buf.getvalue()


def response_figure(curves, title=""):
    """Log-log figure of |response| against time; negative values drawn with open markers.

    ``curves``: list of dicts with station, component, time (s), value (per A).
    One panel per component family (E, B, dB/dt).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fams = []
    for c in curves:
        fam = {"ex": "E", "ey": "E", "bz": "B"}.get(c["component"], "dB/dt")
        if fam not in fams:
            fams.append(fam)
    fig = Figure(figsize=(5.2 * len(fams), 4.4), constrained_layout=True)
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, len(fams), squeeze=False)[0]
    labels = {"E": "|E| per ampere (V/m/A)", "B": "|B| per ampere (T/A)",
              "dB/dt": "|dB/dt| per ampere (T/s/A)"}
    for ax, fam in zip(axes, fams):
        sel = [c for c in curves if ({"ex": "E", "ey": "E", "bz": "B"}.get(c["component"], "dB/dt")
                                     == fam)]
        for k, c in enumerate(sel):
            t, v = np.asarray(c["time"]), np.asarray(c["value"])
            line, = ax.loglog(t, np.abs(v), "-", lw=1.2, label=f"{c['station']} {c['component']}")
            neg = v < 0
            ax.loglog(t[~neg], np.abs(v[~neg]), "o", ms=3, color=line.get_color())
            ax.loglog(t[neg], np.abs(v[neg]), "o", ms=4, mfc="none", color=line.get_color())
        ax.set_xlabel("time after switch-off (s)")
        ax.set_ylabel(labels[fam])
        ax.grid(True, which="both", alpha=0.3)
        if len(sel) <= 14:
            ax.legend(fontsize=7, ncol=2)
        ax.set_title(f"{title} {fam} (open markers: negative)".strip(), fontsize=9)
    return fig
