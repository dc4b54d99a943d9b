"""Survey description: transmitter, timing, stations and receivers (TOML in and out).

The survey file is the one place that says what was recorded where and how.
Every field, with its unit, is documented in ``docs/survey.md``. Objects are
immutable dataclasses checked when built; :func:`read_survey` adds the file
name to every error message.
"""
from __future__ import annotations

import dataclasses
import datetime as _dt
import math
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import TemInputError, input_error
from .survey_rules import check_survey, projected_doc
from .io import checks
from .io.packed import PackedTables, pack_tables
from .io.tomlfile import read_toml

__all__ = ["COMPONENTS", "E_COMPONENTS", "COIL_COMPONENTS", "Transmitter", "Channel",
           "Station", "Survey", "read_survey", "read_survey_file", "write_survey", "survey_to_dict",
           "parse_time", "format_time", "seconds_between"]

E_COMPONENTS = ("ex", "ey")
COIL_COMPONENTS = ("dbxdt", "dbydt", "dbzdt")
CURRENT_COMPONENT = "current"
COMPONENTS = E_COMPONENTS + COIL_COMPONENTS + (CURRENT_COMPONENT,)
TX_KINDS = ("wire", "loop")
TIMING_SOURCES = ("survey", "current")
#: Most stations in one survey file.
MAX_STATIONS = 100_000


# ---------------------------------------------------------------------------- time helpers
_T_MIN, _T_MAX = np.datetime64("1900-01-01"), np.datetime64("2200-01-01")


def parse_time(value, field_name: str = "time") -> np.datetime64:
    """UTC instant as ``numpy.datetime64[ns]``.

    Accepts an ISO-8601 string (``2025-06-02T08:00:00.000125Z``; a trailing
    ``Z`` or ``+00:00`` is allowed, other offsets are converted) or a
    ``datetime.datetime`` (TOML date-times arrive as these). Instants before
    1900 or after 2200 are refused (they would wrap around at nanoseconds).
    """
    if isinstance(value, np.datetime64):
        return _in_range(value, value, field_name)
    if isinstance(value, _dt.datetime):
        if value.tzinfo is not None:
            value = value.astimezone(_dt.timezone.utc).replace(tzinfo=None)
        return _in_range(np.datetime64(value.isoformat()), value, field_name)
    if isinstance(value, str):
        text = value.strip()
        if len(text) > 64 or not text.isprintable():
            raise input_error(field_name, f"not an ISO-8601 time: {_show(value)}")
        offset = None
        if text.endswith(("Z", "z")):
            text = text[:-1]
        elif len(text) > 6 and text[-6] in "+-" and text[-3] == ":":
            hh, mm = text[-5:-3], text[-2:]
            if not (hh.isdigit() and mm.isdigit() and int(hh) < 24 and int(mm) < 60):
                raise input_error(field_name, f"not an ISO-8601 time: {_show(value)}")
            sign = 1 if text[-6] == "+" else -1
            offset = sign * (int(hh) * 60 + int(mm))
            text = text[:-6]
        m = _ISO.fullmatch(text)
        if m is None or not 1900 <= int(m.group(1)) <= 2200:
            raise input_error(field_name, f"not an ISO-8601 time from 1900 to 2200 (at most "
                              f"nanoseconds): {_show(value)}")
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("error")      # a zone numpy cannot represent
                t = np.datetime64(text, "ns")
        except (ValueError, OverflowError, UserWarning, DeprecationWarning):
            raise input_error(field_name, f"not an ISO-8601 time: {_show(value)}") from None
        t = _in_range(t, value, field_name)
        if offset:
            t = t - np.timedelta64(offset, "m")
        return t
    raise input_error(field_name, f"expected an ISO-8601 time string, got {_show(value)}")


_ISO = re.compile(r"(\d{4})-\d{2}-\d{2}(?:[T ]\d{2}(?::\d{2}(?::\d{2}(?:\.\d{1,9})?)?)?)?")


def _in_range(t, value, field_name):
    try:
        ok = not np.isnat(t) and _T_MIN <= t <= _T_MAX
    except (OverflowError, ValueError, TypeError):
        ok = False
    if not ok:
        raise input_error(field_name, f"time out of range (1900 to 2200): {_show(value)}")
    return t.astype("datetime64[ns]")


def format_time(t: np.datetime64) -> str:
    """ISO-8601 UTC string with nanoseconds and a trailing ``Z``."""
    return str(np.datetime64(t, "ns")) + "Z"


def seconds_between(t0: np.datetime64, t1: np.datetime64) -> float:
    """``t1 - t0`` in seconds (float, nanosecond resolution)."""
    return float((np.datetime64(t1, "ns") - np.datetime64(t0, "ns")) / np.timedelta64(1, "ns")) * 1e-9


def _pos_finite(x, name, limit=None, floor=None):
    return checks.number(x, name, positive=True, maximum=limit, minimum=floor)


_FLOOR = checks.LIMITS["scale_min"]


def _finite(x, name, limit=None):
    return checks.number(x, name, maximum=limit)


def _point(p, name):
    return checks.point(p, name)


def _show(value) -> str:
    return checks.show(value)


# ---------------------------------------------------------------------------- transmitter
@dataclass(frozen=True)
class Transmitter:
    """Transmitter geometry, current and periodic timing.

    Parameters
    ----------
    kind : {"wire", "loop"}
    points : tuple of (x, y)
        Wire: endpoints A and B (m); +I enters the ground at B. Loop: vertices
        listed anticlockwise seen from above (m).
    current : float
        Peak current (A).
    base_frequency : float
        Repetition frequency of the full bipolar cycle (Hz).
    duty_cycle : float
        Fraction of each half-period that current flows (0.5: +I, off, -I,
        off; 1.0: no off-time).
    ramp_on, ramp_off : float
        Linear switch-on and switch-off ramp durations (s).
    first_switch_off : numpy.datetime64
        UTC instant at which the switch-off ramp of the first positive
        half-cycle ends (time zero of the first transient).
    timing : {"survey", "current"}
        Where the stacker takes the switch times from: the schedule above, or
        detection on a recorded transmitter-current channel.
    """

    kind: str
    points: tuple
    current: float
    base_frequency: float
    duty_cycle: float
    ramp_on: float
    ramp_off: float
    first_switch_off: np.datetime64
    timing: str = "survey"

    def __post_init__(self):
        if not isinstance(self.kind, str) or self.kind not in TX_KINDS:
            raise input_error("transmitter.kind", f"unknown {_show(self.kind)}; valid: "
                              f"{', '.join(TX_KINDS)}")
        pts = tuple(_point(p, "transmitter.points")
                    for p in checks.array(self.points, "transmitter.points", max_len=10_000))
        if self.kind == "wire" and len(pts) != 2:
            raise input_error("transmitter.points", f"a wire needs 2 endpoints, got {len(pts)}")
        if self.kind == "loop" and len(pts) < 3:
            raise input_error("transmitter.points", f"a loop needs at least 3 vertices, got {len(pts)}")
        if self.kind == "wire" and pts[0] == pts[1]:
            raise input_error("transmitter.points", "wire endpoints coincide")
        if self.kind == "loop":     # a simple polygon, anticlockwise
            checks.loop(pts, "transmitter.points")
        object.__setattr__(self, "points", pts)
        object.__setattr__(self, "current", _pos_finite(self.current, "transmitter.current",
                                                        checks.LIMITS["current"], _FLOOR))
        f = checks.number(self.base_frequency, "transmitter.base_frequency", minimum=1e-3,
                          maximum=checks.LIMITS["frequency"])
        object.__setattr__(self, "base_frequency", f)
        d = _pos_finite(self.duty_cycle, "transmitter.duty_cycle")
        if d > 1.0:
            raise input_error("transmitter.duty_cycle", f"must be in (0, 1], got {d}")
        object.__setattr__(self, "duty_cycle", d)
        for name in ("ramp_on", "ramp_off"):
            v = checks.number(getattr(self, name), f"transmitter.{name}", minimum=0.0)
            object.__setattr__(self, name, v)
        if self.ramp_on + self.ramp_off >= self.duty_cycle * self.half_period:
            raise input_error("transmitter.ramp_off", "ramps longer than the on-time")
        object.__setattr__(self, "first_switch_off",
                           parse_time(self.first_switch_off, "transmitter.first_switch_off"))
        if not isinstance(self.timing, str) or self.timing not in TIMING_SOURCES:
            raise input_error("transmitter.timing",
                              f"unknown {_show(self.timing)}; valid: {', '.join(TIMING_SOURCES)}")

    @property
    def period(self) -> float:
        """Full bipolar period (s)."""
        return 1.0 / self.base_frequency

    @property
    def half_period(self) -> float:
        return 0.5 / self.base_frequency

    @property
    def off_time(self) -> float:
        """Length of the current-free interval after time zero (s); 0 when duty is 1.

        Time zero is the end of the switch-off ramp; the next (opposite)
        pulse, ramps included, lasts ``duty * T/2`` and ends at ``T/2``, so
        its ramp-on starts ``(1 - duty) T/2`` after zero.
        """
        return (1.0 - self.duty_cycle) * self.half_period

    def flat_points(self) -> list:
        return [c for p in self.points for c in p]


# ---------------------------------------------------------------------------- receivers
@dataclass(frozen=True)
class Channel:
    """One recorded channel at a station.

    Parameters
    ----------
    component : str
        ``ex ey`` (electric dipole), ``dbxdt dbydt dbzdt`` (induction coil) or
        ``current`` (transmitter-current monitor).
    files : tuple of Path
        Recording files, in time order (contiguous).
    sample_rate : float
        Hz; must agree with each recording's sidecar.
    gain : float
        Amplifier gain (V at the logger per V at the sensor, dimensionless);
        for ``current`` the monitor's transfer, V per A.
    dipole : ((x0, y0), (x1, y1)) or None
        E-dipole electrodes (m). The logger records the line integral of E
        from electrode 0 to electrode 1.
    coil_area : float or None
        Effective area of the coil, turns included (m^2).
    format : str or None
        Recording format name; ``None`` sniffs from the file.
    column : int
        Column index for the text format.
    channel : str or None
        MiniSEED channel of this component: a SEED channel code (``HHZ``) or
        a full id ``NET.STA.LOC.CHA``; needed when a file holds several.
    """

    component: str
    files: tuple
    sample_rate: float
    gain: float = 1.0
    dipole: tuple | None = None
    coil_area: float | None = None
    format: str | None = None
    column: int = 0
    channel: str | None = None

    def __post_init__(self):
        if self.channel is not None and (not isinstance(self.channel, str) or not self.channel
                                         or len(self.channel) > 40):
            raise input_error("receiver.channel", f"expected a SEED channel code or id, got "
                              f"{self.channel!r}")
        if not isinstance(self.component, str) or self.component not in COMPONENTS:
            raise input_error("receiver.component",
                              f"unknown {_show(self.component)}; valid: {', '.join(COMPONENTS)}")
        object.__setattr__(self, "sample_rate", _pos_finite(self.sample_rate, "receiver.sample_rate",
                                                            checks.LIMITS["sample_rate"]))
        object.__setattr__(self, "gain", _pos_finite(self.gain, "receiver.gain",
                                                     checks.LIMITS["gain"], _FLOOR))
        files = self.files
        if isinstance(files, (str, Path)):
            files = (files,)
        files = checks.array(files, "receiver.files", max_len=100_000)
        object.__setattr__(self, "files", tuple(
            f if isinstance(f, Path) else Path(checks.text(f, "receiver.files", max_len=4096))
            for f in files))
        if self.format is not None:
            checks.text(self.format, "receiver.format")
        object.__setattr__(self, "column", checks.integer(self.column, "receiver.column",
                                                          minimum=0, maximum=10_000))
        if self.component in E_COMPONENTS:
            if self.dipole is None:
                raise input_error("receiver.dipole", f"{self.component} needs dipole endpoints")
            d = tuple(_point(p, "receiver.dipole")
                      for p in checks.array(self.dipole, "receiver.dipole", max_len=2))
            if len(d) != 2 or d[0] == d[1]:
                raise input_error("receiver.dipole", "needs two distinct endpoints")
            object.__setattr__(self, "dipole", d)
        elif self.dipole is not None:
            raise input_error("receiver.dipole", f"only for an electric dipole (ex, ey); the "
                              f"{self.component} receiver takes none (wrong component?)")
        if self.component not in COIL_COMPONENTS and self.coil_area is not None:
            raise input_error("receiver.coil_area", f"only for an induction coil (dbxdt, dbydt, "
                              f"dbzdt); the {self.component} receiver takes none (wrong component?)")
        if self.component in COIL_COMPONENTS:
            if self.coil_area is None:
                raise input_error("receiver.coil_area", f"{self.component} needs coil_area (m^2)")
            object.__setattr__(self, "coil_area", _pos_finite(self.coil_area, "receiver.coil_area",
                                                              checks.LIMITS["coil_area"], _FLOOR))

    @property
    def dipole_length(self) -> float:
        (x0, y0), (x1, y1) = self.dipole
        return math.hypot(x1 - x0, y1 - y0)

    def volts_to_field(self, current: float) -> float:
        """Factor turning logger volts into the normalised field (per A of peak current).

        E: V/m/A = V / (gain * dipole length * I). dB/dt: T/s/A = V / (gain *
        coil area * I). current: A per A (fraction of peak) = V / (gain * I).
        """
        if self.component in E_COMPONENTS:
            return 1.0 / (self.gain * self.dipole_length * current)
        if self.component in COIL_COMPONENTS:
            return 1.0 / (self.gain * self.coil_area * current)
        return 1.0 / (self.gain * current)

    @property
    def unit(self) -> str:
        return {"ex": "V/m/A", "ey": "V/m/A"}.get(self.component,
                                                    "A/A" if self.component == "current" else "T/s/A")


@dataclass(frozen=True)
class Station:
    """A receiver site: id, coordinates (m, projected; z up) and its channels."""

    id: str
    x: float
    y: float
    z: float = 0.0
    epsg: int = 0
    receivers: tuple = ()

    def __post_init__(self):
        checks.text(self.id, "station.id")
        if "/" in self.id or "\\" in self.id or self.id != self.id.strip() or self.id in (".", ".."):
            raise input_error("station.id", f"must be a name without '/', '\\' or surrounding "
                              f"spaces, got {_show(self.id)}")
        for n in ("x", "y", "z"):
            lim = checks.LIMITS["elevation" if n == "z" else "coordinate"]
            object.__setattr__(self, n, _finite(getattr(self, n), f"station.{n}", lim))
        object.__setattr__(self, "epsg", checks.integer(self.epsg or 0, "station.epsg", minimum=0,
                                                        maximum=checks.LIMITS["epsg"]))
        object.__setattr__(self, "receivers", tuple(self.receivers))
        comps = [r.component for r in self.receivers]
        if len(set(comps)) != len(comps):
            raise input_error("station.receivers", f"{self.id}: component listed twice")

    @property
    def data_receivers(self) -> tuple:
        return tuple(r for r in self.receivers if r.component != CURRENT_COMPONENT)

    def current_receiver(self):
        for r in self.receivers:
            if r.component == CURRENT_COMPONENT:
                return r
        return None


@dataclass(frozen=True)
class Survey:
    """Whole survey. ``base_dir`` resolves relative recording paths."""

    name: str
    transmitter: Transmitter
    stations: tuple
    mains_frequency: float = 50.0
    epsg: int = 0
    lowpass_order: int = 0
    lowpass_cutoff: float = 0.0
    base_dir: Path = field(default_factory=Path)

    def __post_init__(self):
        object.__setattr__(self, "stations", tuple(self.stations))
        checks.text(self.name, "survey.name", empty=True)
        object.__setattr__(self, "mains_frequency",
                           _pos_finite(self.mains_frequency, "survey.mains_frequency",
                                       checks.LIMITS["frequency"]))
        object.__setattr__(self, "epsg", checks.integer(self.epsg or 0, "survey.epsg", minimum=0,
                                                        maximum=checks.LIMITS["epsg"]))
        ids = [s.id for s in self.stations]
        if len(set(ids)) != len(ids):
            raise input_error("stations.id", "station ids must be unique")
        if not self.stations:
            raise input_error("stations", "survey lists no station")
        object.__setattr__(self, "lowpass_order", checks.integer(
            self.lowpass_order, "survey.lowpass_order", minimum=0, maximum=16))
        object.__setattr__(self, "lowpass_cutoff", checks.number(
            self.lowpass_cutoff, "survey.lowpass_cutoff", minimum=0.0,
            maximum=checks.LIMITS["sample_rate"]))
        object.__setattr__(self, "base_dir", Path(self.base_dir))

    def station(self, sid: str) -> Station:
        for s in self.stations:
            if s.id == sid:
                return s
        raise input_error("station", f"no station {sid!r}")

    def path(self, p) -> Path:
        p = Path(p)
        return p if p.is_absolute() else self.base_dir / p

    def mains_rule(self) -> tuple[bool, float]:
        """Whether each half-period holds a whole number of mains cycles.

        Returns ``(ok, ratio)`` with ratio = f_mains / (2 f_base); see
        docs/stacking.md section 6, where the stack's mains transfer function
        is derived.
        """
        ratio = self.mains_frequency / (2.0 * self.transmitter.base_frequency)
        return abs(ratio - round(ratio)) < 1e-9 * max(1.0, ratio), ratio


# ---------------------------------------------------------------------------- TOML in/out
_TX_KEYS = {"kind", "points", "current", "base_frequency", "duty_cycle", "ramp_on", "ramp_off",
            "first_switch_off", "timing"}
_RX_KEYS = {"component", "files", "sample_rate", "gain", "dipole", "coil_area", "format", "column",
            "channel"}
_ST_KEYS = {"id", "x", "y", "z", "epsg", "receiver"}
# Top-level tables; [processing] is read by the pipeline (tem.pipeline.params).
_TOP_KEYS = {"survey", "transmitter", "station", "processing"}


def _check_keys(table, allowed, where):
    checks.table(table, where)
    extra = set(table) - allowed
    if extra:
        raise input_error(f"{where}.{checks.show(sorted(extra)[0])}",
                          f"unknown key; valid: {', '.join(sorted(allowed))}")


def _station_tables(doc):
    """The survey's station tables, one at a time (packed: tem.io.packed)."""
    tables = doc.get("station", [])
    if isinstance(tables, PackedTables):
        if len(tables) > MAX_STATIONS:
            raise input_error("station", f"more than {MAX_STATIONS} items")
        return iter(tables)
    return iter(checks.array(tables, "station", max_len=MAX_STATIONS))


def survey_from_dict(doc: dict, base_dir=".") -> Survey:
    """Build a :class:`Survey` from the parsed TOML document.

    Every value is checked for its type (a table, a list, text or a number),
    finiteness and physical range before use (tem.io.checks).
    """
    extra = set(doc) - _TOP_KEYS
    if extra:
        raise input_error(checks.show(sorted(extra)[0]), "unknown table or key; valid: "
                          f"{', '.join(sorted(_TOP_KEYS))}")
    head = doc.get("survey", {})
    _check_keys(head, {"name", "mains_frequency", "epsg", "lowpass_order", "lowpass_cutoff",
                       "format_version", "projected_epsg"}, "survey")
    doc, head = projected_doc(doc, head)
    version = checks.integer(head.get("format_version", 1), "survey.format_version")
    if version != 1:
        raise input_error("survey.format_version", f"unsupported {checks.show(version)}; this tem reads "
                          "version 1")
    if "transmitter" not in doc:
        raise input_error("transmitter", "missing table")
    tx = doc["transmitter"]
    _check_keys(tx, _TX_KEYS, "transmitter")
    missing = {"kind", "points", "current", "base_frequency", "first_switch_off"} - set(tx)
    if missing:
        raise input_error(f"transmitter.{sorted(missing)[0]}", "missing")
    transmitter = Transmitter(kind=tx["kind"], points=tx["points"], current=tx["current"],
                              base_frequency=tx["base_frequency"],
                              duty_cycle=tx.get("duty_cycle", 0.5), ramp_on=tx.get("ramp_on", 0.0),
                              ramp_off=tx.get("ramp_off", 0.0),
                              first_switch_off=tx["first_switch_off"],
                              timing=tx.get("timing", "survey"))
    stations = []
    for i, st in enumerate(_station_tables(doc)):
        _check_keys(st, _ST_KEYS, f"station[{i}]")
        if "id" not in st:
            raise input_error(f"station[{i}].id", "missing")
        sid = checks.text(st["id"], f"station[{i}].id")
        rxs = []
        for j, rx in enumerate(checks.array(st.get("receiver", []), f"station[{sid}].receiver",
                                            max_len=64)):
            where = f"station[{sid}].receiver[{j}]"
            _check_keys(rx, _RX_KEYS, where)
            for key in ("component", "files", "sample_rate"):
                if key not in rx:
                    raise input_error(f"{where}.{key}", "missing")
            try:
                rxs.append(Channel(component=rx["component"], files=rx["files"],
                                    sample_rate=rx["sample_rate"], gain=rx.get("gain", 1.0),
                                    dipole=rx.get("dipole"), coil_area=rx.get("coil_area"),
                                    format=rx.get("format"), column=rx.get("column", 0),
                                    channel=rx.get("channel")))
            except TemInputError as exc:
                raise input_error(where, str(exc)) from None
        if ("x" in st) != ("y" in st):      # half a position is a typo, not the origin
            raise input_error(f"station[{sid}].{'y' if 'x' in st else 'x'}", "missing (give "
                              "both x and y, or neither for the origin)")
        try:
            stations.append(Station(id=sid, x=st.get("x", 0.0), y=st.get("y", 0.0),
                                    z=st.get("z", 0.0), epsg=st.get("epsg", head.get("epsg", 0)),
                                    receivers=rxs))
        except TemInputError as exc:
            raise input_error(f"station[{sid}]", str(exc)) from None
    return check_survey(Survey(    # then the checks across fields (tem/survey_rules.py)
        name=head.get("name", "unnamed"), transmitter=transmitter, stations=stations,
        mains_frequency=head.get("mains_frequency", 50.0), epsg=head.get("epsg", 0),
        lowpass_order=head.get("lowpass_order", 0),
        lowpass_cutoff=head.get("lowpass_cutoff", 0.0), base_dir=Path(base_dir)))


def read_survey(path) -> Survey:
    """Read and check a survey TOML file; errors name the file and the field."""
    return read_survey_file(path)[0]


def read_survey_file(path) -> tuple:
    """``(survey, processing)``: the checked survey and the file's ``[processing]`` table as
    parsed (``{}`` when absent; checked by tem.pipeline.settings), from one parse of the file."""
    path = Path(path)
    doc = read_toml(path, "survey")
    processing = doc.get("processing", {})
    pack_tables(doc, "station")      # the parse of the station tables goes here (PackedTables)
    try:
        return survey_from_dict(doc, base_dir=path.parent), processing
    except TemInputError as exc:
        raise TemInputError(f"{path}: {exc}") from None


def survey_to_dict(survey: Survey) -> dict:
    """Plain TOML-ready dict (inverse of :func:`survey_from_dict`)."""
    tx = survey.transmitter
    head = {"format_version": 1, "name": survey.name, "mains_frequency": survey.mains_frequency,
            "epsg": survey.epsg}
    if survey.lowpass_order:
        head.update(lowpass_order=survey.lowpass_order, lowpass_cutoff=survey.lowpass_cutoff)
    doc = {"survey": head,
           "transmitter": {"kind": tx.kind, "points": [list(p) for p in tx.points],
                           "current": tx.current, "base_frequency": tx.base_frequency,
                           "duty_cycle": tx.duty_cycle, "ramp_on": tx.ramp_on,
                           "ramp_off": tx.ramp_off,
                           "first_switch_off": format_time(tx.first_switch_off),
                           "timing": tx.timing},
           "station": []}
    for st in survey.stations:
        s = {"id": st.id, "x": st.x, "y": st.y, "z": st.z}
        if st.epsg:
            s["epsg"] = st.epsg
        s["receiver"] = []
        for rx in st.receivers:
            r = {"component": rx.component, "files": [Path(f).as_posix() for f in rx.files],
                 "sample_rate": rx.sample_rate, "gain": rx.gain}
            if rx.dipole is not None:
                r["dipole"] = [list(p) for p in rx.dipole]
            if rx.coil_area is not None:
                r["coil_area"] = rx.coil_area
            if rx.format:
                r["format"] = rx.format
            if rx.column:
                r["column"] = rx.column
            if rx.channel:
                r["channel"] = rx.channel
            s["receiver"].append(r)
        doc["station"].append(s)
    return doc


def write_survey(survey: Survey, path, processing=None) -> Path:
    """Write the survey as TOML (atomically), with a ``[processing]`` table when given (a
    dict as read from a survey file: docs/pipeline.md)."""
    import tomli_w

    from .io.atomic import write_text_atomic
    doc = survey_to_dict(survey)
    if processing:
        doc["processing"] = processing
    return write_text_atomic(path, tomli_w.dumps(doc))


def replace(obj, **changes):
    """``dataclasses.replace`` re-exported (objects are frozen)."""
    return dataclasses.replace(obj, **changes)
