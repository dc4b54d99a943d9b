"""Files of the forward command: layered-model CSV in, response CSV and figure out."""
from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np

from ..errors import TemInputError, input_error
from .model import LayeredModel

__all__ = ["read_model_csv", "response_csv_text", "response_figure", "UNITS"]

UNITS = {"ex": "V/m/A", "ey": "V/m/A", "bz": "T/A", "dbxdt": "T/s/A", "dbydt": "T/s/A",
         "dbzdt": "T/s/A"}


def read_model_csv(path) -> dict:
    """Layered model(s) from CSV: ``thickness_m,resistivity_ohmm`` per layer, half-space last
    with an empty thickness. An optional ``station`` column gives per-station models; the
    result maps station id (or ``"*"`` for all stations) to a :class:`LayeredModel`.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise input_error("model", f"cannot read ({exc.__class__.__name__})", path) from None
    rows = list(csv.DictReader(line for line in io.StringIO(text) if not line.startswith("#")))
    if not rows:
        raise input_error("model", "no layers", path)
    for col in ("thickness_m", "resistivity_ohmm"):
        if col not in rows[0]:
            raise input_error(col, "missing column (need thickness_m,resistivity_ohmm)", path)
    groups: dict = {}
    for i, r in enumerate(rows, start=2):
        if None in r:  # csv.DictReader files surplus fields under the key None
            raise input_error(f"line {i}", f"more fields than the header has ({len(r) - 1})", path)
        key = (r.get("station") or "*").strip()
        try:
            rho = float(r["resistivity_ohmm"])
            thk = r["thickness_m"].strip()
            thk = float(thk) if thk else None
        except (TypeError, ValueError):
            raise input_error(f"line {i}", "thickness_m and resistivity_ohmm must be numbers",
                              path) from None
        groups.setdefault(key, []).append((thk, rho))
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
