"""The system TOML of ``tem import`` (docs/import.md): transmitter, waveform, receivers, stations.

::

    epsg = 0                                  # optional CRS of all coordinates
    [transmitter]
    kind = "wire"                             # wire (A, corners..., B) or loop (vertices)
    points = [[-750.0, 800.0], [750.0, 800.0]]   # m
    current = 40.0                            # A, peak
    [waveform]
    kind = "bipolar"                          # bipolar, table, step-off, step-on, impulse
    base_frequency = 0.25                     # Hz        (bipolar)
    duty_cycle = 0.5                          #           (bipolar)
    ramp_on = 1e-3                            # s         (bipolar)
    ramp_off = 5e-4                           # s         (bipolar)
    time_zero = "ramp-end"                    # ramp-end or ramp-start (bipolar)
    # table: times = [...] (s, the data's clock), current = [...] (relative),
    #        half_period = 2.0 (s; omit for a single pulse)
    [receiver]
    normalised = true                         # values already per A, per m / per m^2
    lowpass_order = 0                         # Butterworth order (0: none)
    lowpass_cutoff = 0.0                      # Hz
    gate_shape = "boxcar"                     # boxcar or taper (window sampling)
    [[station]]
    id = "EM01"
    x = -5500.0
    y = 0.0
    z = 0.0
    [station.ex]
    dipole = [[-5550.0, 0.0], [-5450.0, 0.0]]
    gain = 1.0
    [station.dbzdt]
    coil_area = 100.0                         # m^2, turns included
    position = [-5500.0, 0.0]                 # optional, default the station

Every refusal is one line naming the file and the dotted field.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import input_error
from ..io.checks import label, loop, number, show
from ..forward.gatewindow import SHAPES
from ..io.tomlfile import read_toml
from ..survey_rules import check_station_names

__all__ = ["System", "StationSpec", "ChannelSpec", "read_system", "WAVEFORM_KINDS", "TIME_ZEROS"]

WAVEFORM_KINDS = ("bipolar", "table", "step-off", "step-on", "impulse")
TIME_ZEROS = ("ramp-end", "ramp-start")
_E = ("ex", "ey")
_COILS = ("bz", "dbxdt", "dbydt", "dbzdt")
_TOP = {"epsg", "projected_epsg", "transmitter", "waveform", "receiver", "station", "format",
        "name"}
_TX = {"kind", "points", "current"}
_WF = {"kind", "base_frequency", "duty_cycle", "ramp_on", "ramp_off", "time_zero", "times",
       "current", "half_period"}
_RX = {"normalised", "lowpass_order", "lowpass_cutoff", "gate_shape"}
_ST = {"id", "x", "y", "z"}
_CH = {"dipole", "coil_area", "gain", "position"}


@dataclass(frozen=True)
class ChannelSpec:
    component: str
    dipole: tuple | None = None     # ((x0, y0), (x1, y1)) m, E channels
    coil_area: float | None = None  # m^2
    gain: float = 1.0
    position: tuple | None = None   # (x, y) m, coils


@dataclass(frozen=True)
class StationSpec:
    id: str
    x: float
    y: float
    z: float
    channels: dict = field(default_factory=dict)


@dataclass(frozen=True)
class System:
    """A checked system description (module docstring)."""

    file: Path
    epsg: int
    tx_kind: str
    tx_points: tuple
    current: float
    waveform: dict       # kind + its parameters, times already on the file's clock
    normalised: bool
    lowpass_order: int
    lowpass_cutoff: float
    gate_shape: str
    stations: dict

    def waveform_attrs(self) -> dict:
        """Gated-file attributes of the waveform (docs/data-model.md, format 1.2).

        Times in the file are shifted so that time zero is the end of the
        switch-off ramp; :meth:`time_shift` says by how much.
        """
        w = self.waveform
        k = w["kind"]
        if k == "bipolar":
            return {"response": "waveform", "base_frequency": w["base_frequency"],
                    "duty_cycle": w["duty_cycle"], "ramp_on": w["ramp_on"],
                    "ramp_off": w["ramp_off"]}
        if k == "table":
            hp = w["half_period"] or 0.0
            t = np.asarray(w["times"], float) - self.time_shift()
            return {"response": "waveform", "base_frequency": 0.5 / hp if hp else 0.0,
                    "duty_cycle": 0.0, "ramp_on": 0.0, "ramp_off": 0.0,
                    "waveform_times": t, "waveform_current": np.asarray(w["current"], float),
                    "waveform_half_period": float(hp)}
        return {"response": k, "base_frequency": 0.0, "duty_cycle": 0.0, "ramp_on": 0.0,
                "ramp_off": 0.0}

    def time_shift(self) -> float:
        """Time (s, on the file's clock) of the end of the switch-off ramp."""
        w = self.waveform
        if w["kind"] == "table":
            return float(w["times"][-1])
        if w["kind"] == "bipolar" and w["time_zero"] == "ramp-start":
            return float(w["ramp_off"])
        return 0.0


def _num(v, name, file, positive=False, nonneg=False):
    """A finite number (the shared reader check; ``nonneg``: at least 0)."""
    return number(v, name, file, positive=positive, minimum=0.0 if nonneg else None)


def _point(p, name, file):
    if not isinstance(p, list) or len(p) != 2:
        raise input_error(name, f"expected [x, y] in metres, got {show(p)}", file)
    return (_num(p[0], name, file), _num(p[1], name, file))


def _table(d, name, allowed, file, required=()):
    if not isinstance(d, dict):
        raise input_error(name, "expected a table", file)
    for k in d:
        if k not in allowed:
            raise input_error(f"{name}.{label(k)}" if name else label(k),
                              f"unknown key; valid: {', '.join(sorted(allowed))}", file)
    for k in required:
        if k not in d:
            raise input_error(f"{name}.{label(k)}" if name else label(k), "missing", file)
    return d


def _waveform(w, file):
    _table(w, "waveform", _WF, file, ("kind",))
    kind = w["kind"]
    if kind not in WAVEFORM_KINDS:
        raise input_error("waveform.kind", f"unknown {show(kind)}; valid: {', '.join(WAVEFORM_KINDS)}",
                          file)
    tz = w.get("time_zero", "ramp-end")
    if tz not in TIME_ZEROS:
        raise input_error("waveform.time_zero", f"unknown {show(tz)}; valid: {', '.join(TIME_ZEROS)}",
                          file)
    own = {"bipolar": {"base_frequency", "duty_cycle", "ramp_on", "ramp_off", "time_zero"},
           "table": {"times", "current", "half_period"}}.get(kind, {"time_zero"})
    for k in w:
        if k != "kind" and k not in own:
            raise input_error(f"waveform.{k}", f"not a setting of a {kind} waveform", file)
    out = {"kind": kind, "time_zero": tz}
    if kind in ("step-off", "step-on", "impulse") and tz != "ramp-end":
        raise input_error("waveform.time_zero", f"a {kind} has no ramp; use ramp-end", file)
    if kind == "bipolar":
        if "base_frequency" not in w:
            raise input_error("waveform.base_frequency", "missing (Hz)", file)
        out["base_frequency"] = _num(w["base_frequency"], "waveform.base_frequency", file, True)
        out["duty_cycle"] = _num(w.get("duty_cycle", 0.5), "waveform.duty_cycle", file, True)
        if out["duty_cycle"] > 1:
            raise input_error("waveform.duty_cycle", f"must be in (0, 1], got {out['duty_cycle']}",
                              file)
        for k in ("ramp_on", "ramp_off"):
            out[k] = _num(w.get(k, 0.0), f"waveform.{k}", file, nonneg=True)
        if out["ramp_on"] + out["ramp_off"] >= out["duty_cycle"] * 0.5 / out["base_frequency"]:
            raise input_error("waveform.ramp_off", "ramps longer than the on-time", file)
    elif kind == "table":
        for k in ("times", "current"):
            if not isinstance(w.get(k), list) or len(w[k]) < 2:
                raise input_error(f"waveform.{k}", "needs a list of at least two numbers", file)
        t = np.array([_num(v, "waveform.times", file) for v in w["times"]])
        c = np.array([_num(v, "waveform.current", file) for v in w["current"]])
        if t.size != c.size:
            raise input_error("waveform.current", f"{c.size} values for {t.size} times", file)
        if np.any(np.diff(t) <= 0):
            raise input_error("waveform.times", "must increase strictly (s)", file)
        if c[0] != 0 or c[-1] != 0:
            raise input_error("waveform.current", "the pulse must start and end at zero", file)
        peak = np.max(np.abs(c))
        if peak <= 0:
            raise input_error("waveform.current", "all zero", file)
        out["times"], out["current"] = t.tolist(), (c / peak).tolist()
        hp = w.get("half_period")
        out["half_period"] = None if hp is None else _num(hp, "waveform.half_period", file, True)
        if hp is not None and t[-1] - t[0] > out["half_period"]:
            raise input_error("waveform.half_period", "shorter than the pulse", file)
    return out


def _station(s, i, normalised, file):
    name = f"station[{i}]"
    if not isinstance(s, dict):
        raise input_error(name, "expected a table", file)
    chans = {k: v for k, v in s.items() if k in _E + _COILS}
    _table({k: v for k, v in s.items() if k not in chans}, name, _ST | set(_E + _COILS), file,
           ("id", "x", "y"))
    sid = s["id"]
    if not isinstance(sid, str) or not sid or "/" in sid:
        raise input_error(f"{name}.id", f"must be a non-empty name without '/', got {show(sid)}", file)
    x, y = (_num(s[k], f"{name}.{k}", file) for k in ("x", "y"))
    z = _num(s.get("z", 0.0), f"{name}.z", file)
    out = {}
    for comp, c in chans.items():
        cn = f"station.{sid}.{comp}"
        _table(c, cn, _CH, file)
        gain = _num(c.get("gain", 1.0), f"{cn}.gain", file, True)
        stray = sorted(set(c) & ({"coil_area", "position"} if comp in _E else {"dipole"}))
        if stray:                    # a key of the other kind of sensor: a wrong component?
            raise input_error(f"{cn}.{stray[0]}", "only for " + ("an induction coil" if comp in _E
                              else "an electric dipole") + f"; the {comp} channel takes none", file)
        if comp in _E:
            if "dipole" not in c:
                raise input_error(f"{cn}.dipole", "missing: [[x0, y0], [x1, y1]] (m)", file)
            d = c["dipole"]
            if not isinstance(d, list) or len(d) != 2:
                raise input_error(f"{cn}.dipole", "expected [[x0, y0], [x1, y1]] (m)", file)
            d = tuple(_point(p, f"{cn}.dipole", file) for p in d)
            if d[0] == d[1]:
                raise input_error(f"{cn}.dipole", "the two electrodes coincide", file)
            out[comp] = ChannelSpec(comp, dipole=d, gain=gain)
        else:
            area = c.get("coil_area")
            if area is not None:
                area = _num(area, f"{cn}.coil_area", file, True)
            elif not normalised:
                raise input_error(f"{cn}.coil_area", "missing: needed to normalise receiver "
                                  "volts (m^2)", file)
            pos = _point(c["position"], f"{cn}.position", file) if "position" in c else None
            out[comp] = ChannelSpec(comp, coil_area=area, gain=gain, position=pos)
    return StationSpec(sid, x, y, z, out)


def _projected(d, file):
    """Geographic input (``epsg`` of a lat/lon CRS; x = lon, y = lat) -> ``projected_epsg``."""
    import copy

    from ..io.crs import check_projected, is_geographic, project_to

    epsg, target = d.get("epsg", 0), d.get("projected_epsg")
    if not epsg or not is_geographic(epsg, "epsg", file):
        if target is not None and target != epsg:
            raise input_error("projected_epsg", "only for geographic input (epsg of a "
                              "latitude/longitude CRS)", file)
        return d
    if target is None:
        raise input_error("epsg", f"EPSG:{epsg} is geographic (lat/lon): state the projected "
                          "CRS to work in as projected_epsg (e.g. a UTM zone)", file)
    check_projected(target, "projected_epsg", file)
    d = copy.deepcopy(d)
    tx = d["transmitter"]
    if isinstance(tx, dict) and isinstance(tx.get("points"), list):
        tx["points"] = project_to(tx["points"], epsg, target, "transmitter.points", file).tolist()
    for i, st in enumerate(d["station"] if isinstance(d["station"], list) else []):
        if not isinstance(st, dict):
            continue
        if "x" in st and "y" in st:
            (st["x"], st["y"]), = project_to([[st["x"], st["y"]]], epsg, target,
                                             f"station[{i}].x", file)
        for comp in _E + _COILS:
            c = st.get(comp)
            if isinstance(c, dict) and isinstance(c.get("dipole"), list):
                c["dipole"] = project_to(c["dipole"], epsg, target, f"station[{i}].{comp}.dipole",
                                         file).tolist()
            if isinstance(c, dict) and isinstance(c.get("position"), list):
                c["position"] = project_to([c["position"]], epsg, target,
                                           f"station[{i}].{comp}.position", file)[0].tolist()
    d["epsg"] = int(target)
    del d["projected_epsg"]
    return d


def read_system(path) -> System:
    """Read and check a system TOML (module docstring); raises TemInputError."""
    path = Path(path)
    d = read_toml(path, "system")
    _table(d, "", _TOP, path, ("transmitter", "waveform", "station"))
    d = _projected(d, path)
    tx = _table(d["transmitter"], "transmitter", _TX, path, ("kind", "points", "current"))
    kind = tx["kind"]
    if kind not in ("wire", "loop"):
        raise input_error("transmitter.kind", f"unknown {show(kind)}; valid: wire, loop", path)
    if not isinstance(tx["points"], list):
        raise input_error("transmitter.points", "expected a list of [x, y] (m)", path)
    pts = tuple(_point(p, "transmitter.points", path) for p in tx["points"])
    if kind == "wire" and (len(pts) < 2 or any(a == b for a, b in zip(pts, pts[1:]))):
        raise input_error("transmitter.points", "a wire needs two or more distinct points", path)
    if kind == "loop" and len(set(pts)) < 3:
        raise input_error("transmitter.points", "a loop needs three or more vertices", path)
    if kind == "loop":
        loop(pts, "transmitter.points", path)
    current = _num(tx["current"], "transmitter.current", path, True)
    wf = _waveform(d["waveform"], path)
    rx = _table(d.get("receiver", {}), "receiver", _RX, path)
    normalised = rx.get("normalised", True)
    if not isinstance(normalised, bool):
        raise input_error("receiver.normalised", f"expected true or false, got {show(normalised)}",
                          path)
    order = rx.get("lowpass_order", 0)
    if isinstance(order, bool) or not isinstance(order, int) or not 0 <= order <= 8:
        raise input_error("receiver.lowpass_order", f"expected a whole number 0..8, got {show(order)}",
                          path)
    cutoff = _num(rx.get("lowpass_cutoff", 0.0), "receiver.lowpass_cutoff", path, nonneg=True)
    if order > 0 and cutoff <= 0:
        raise input_error("receiver.lowpass_cutoff", "must be positive with a low-pass order",
                          path)
    shape = rx.get("gate_shape", "boxcar")
    if shape not in SHAPES:
        raise input_error("receiver.gate_shape", f"unknown {show(shape)}; valid: {', '.join(SHAPES)}",
                          path)
    epsg = d.get("epsg", 0)
    if isinstance(epsg, bool) or not isinstance(epsg, int) or epsg < 0:
        raise input_error("epsg", f"expected a whole EPSG code, got {show(epsg)}", path)
    if not isinstance(d["station"], list) or not d["station"]:
        raise input_error("station", "expected one or more [[station]] tables", path)
    stations = {}
    for i, s in enumerate(d["station"]):
        st = _station(s, i, normalised, path)
        if st.id in stations:
            raise input_error(f"station[{i}].id", f"{st.id} listed twice", path)
        stations[st.id] = st
    check_station_names(stations, path)
    return System(path, int(epsg), kind, pts, current, wf, normalised, int(order),
                  float(cutoff), shape, stations)
