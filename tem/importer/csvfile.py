"""The decay CSV of ``tem import`` (docs/import.md): one row per station, component and gate.

Columns (any order, names case-insensitive):

* ``station``, ``component`` (``ex ey bz dbxdt dbydt dbzdt``);
* times, either ``gate_open`` and ``gate_close`` (windows) or ``time`` (point
  samples), each with its unit in the name (``gate_open_ms``, ``time_us``;
  ``s``, ``ms``, ``us``) or in the header line ``# time_unit = ms``;
* ``value`` and ``error`` (one standard error, same unit as ``value``), the
  unit in a ``unit`` column or in the header (``# unit = nV/m/A`` for all
  components, ``# unit.dbzdt = nT/s/A`` for one); a column and a header
  that disagree are refused;
* optional ``usable`` (1/0, true/false, yes/no).

Header lines start with ``#``; ``# key = value`` lines set ``time_unit`` and
``unit[.component]``, other ``#`` lines are comments. Every refusal is one
line naming the file, its line number and the field.
"""
from __future__ import annotations

import csv
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import input_error
from ..io.checks import label, show

__all__ = ["Decays", "read_decays", "TIME_UNITS", "VALUE_UNITS", "RAW_UNITS", "COMPONENTS"]

COMPONENTS = ("ex", "ey", "bz", "dbxdt", "dbydt", "dbzdt")
TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6}
_PREFIX = {"": 1.0, "m": 1e-3, "u": 1e-6, "n": 1e-9, "p": 1e-12}
#: normalised units (per ampere): unit -> (SI factor, kind)
VALUE_UNITS = {}
for _p, _f in _PREFIX.items():
    VALUE_UNITS[f"{_p}V/m/A"] = (_f, "e")
    VALUE_UNITS[f"{_p}T/s/A"] = (_f, "dbdt")
    VALUE_UNITS[f"{_p}V/A/m2"] = (_f, "dbdt")
    VALUE_UNITS[f"{_p}T/A"] = (_f, "b")
#: receiver voltages before normalisation: unit -> SI factor
RAW_UNITS = {f"{p}V": f for p, f in _PREFIX.items()}
_KIND = {"ex": "e", "ey": "e", "bz": "b", "dbxdt": "dbdt", "dbydt": "dbdt", "dbzdt": "dbdt"}
_TRUE = {"1", "true", "yes", "y", "t"}
_FALSE = {"0", "false", "no", "n", "f"}
_TIME_COLS = ("gate_open", "gate_close", "time")
_HEADER_KEY = re.compile(r"^#\s*([A-Za-z_][\w.]*)\s*=\s*(.*?)\s*$")


@dataclass
class Decays:
    """Rows of a decay CSV in SI, grouped by (station, component).

    ``channels[(station, component)]`` is a dict of arrays ``open``, ``close``
    (window sampling) or ``time`` (point sampling), ``value``, ``error``
    (SI units; raw volts when ``raw``), ``usable`` and ``line`` (file line
    numbers). ``sampling`` is ``"window"`` or ``"point"``; ``raw`` is True
    when values are receiver voltages still to be normalised.
    """

    file: Path
    sampling: str
    raw: bool
    channels: dict
    units: dict

    @property
    def stations(self) -> list:
        return list(dict.fromkeys(s for s, _ in self.channels))


def _number(text, field, where):
    try:
        v = float(text)
    except (TypeError, ValueError):
        raise input_error(field, f"not a number: {show(str(text)[:30])}", where) from None
    if not math.isfinite(v):
        raise input_error(field, f"not a finite number: {show(text)}", where)
    return v


def _meaning(unit):
    """What a unit stands for (SI factor and kind): ``nT/s/A`` and ``nV/A/m2`` are one."""
    if unit in RAW_UNITS:
        return RAW_UNITS[unit], "raw"
    return VALUE_UNITS.get(unit, unit)


def _unit_of_column(name, header_unit, path):
    """``gate_open_ms`` -> ('gate_open', factor); a bare ``gate_open`` takes the header unit."""
    for base in _TIME_COLS:
        if name == base:
            if header_unit is None:
                raise input_error(name, "time unit not stated: name the column "
                                  f"{base}_s/_ms/_us or add '# time_unit = s'", path)
            return base, TIME_UNITS[header_unit]
        if name.startswith(base + "_"):
            u = name[len(base) + 1:]
            if u not in TIME_UNITS:
                raise input_error(label(name), f"unknown time unit {show(u)}; valid: "
                                  f"{', '.join(TIME_UNITS)}",
                                  path)
            return base, TIME_UNITS[u]
    return None, None


def read_decays(path) -> Decays:
    """Read and check a decay CSV (see module docstring); raises TemInputError."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise input_error("decays", "file not found", path) from None
    except UnicodeDecodeError:
        raise input_error("decays", "not a UTF-8 text file", path) from None
    except OSError as exc:
        raise input_error("decays", f"cannot read ({exc.strerror})", path) from None
    lines = text.splitlines()
    header, first = {}, None
    for i, line in enumerate(lines):
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            m = _HEADER_KEY.match(s)
            if m:
                key, value = m.group(1).lower(), m.group(2)
                if key in header and header[key].strip() != value.strip():
                    # two units for one thing: which one the values are in is a guess
                    raise input_error(key, f"given twice in the header ({header[key]!r} on an "
                                      f"earlier line, {value!r} on line {i + 1})", path)
                header[key] = value
            continue
        first = i
        break
    if first is None:
        raise input_error("columns", "no header row (station,component,...)", path)
    time_unit = header.get("time_unit")
    if time_unit is not None and time_unit not in TIME_UNITS:
        raise input_error("time_unit", f"unknown {show(time_unit)}; valid: {', '.join(TIME_UNITS)}",
                          f"{path}:header")
    names = [c.strip().lower() for c in next(csv.reader([lines[first]]))]
    if len(set(names)) != len(names):
        raise input_error("columns", "a column name appears twice", f"{path}:{first + 1}")
    cols, tfac = {}, {}
    for j, n in enumerate(names):
        base, fac = _unit_of_column(n, time_unit, f"{path}:{first + 1}")
        key = base or n
        if key in cols:
            raise input_error(label(n), f"column {show(key)} given twice", f"{path}:{first + 1}")
        cols[key] = j
        if base:
            tfac[base] = fac
    missing = [c for c in ("station", "component", "value", "error") if c not in cols]
    if "time" in cols and ("gate_open" in cols or "gate_close" in cols):
        raise input_error("columns", "give gate_open and gate_close, or time, not both",
                          f"{path}:{first + 1}")
    if "time" not in cols:
        missing += [c for c in ("gate_open", "gate_close") if c not in cols]
    if missing:
        sep = next((name for ch, name in ((";", "semicolons"), ("\t", "tabs"))
                    if len(names) == 1 and ch in lines[first]), None)
        hint = (f"; the header is separated by {sep}: save the file comma-separated, with a "
                "point as the decimal mark") if sep else " (see docs/import.md)"
        raise input_error("columns", f"missing {', '.join(missing)}{hint}", f"{path}:{first + 1}")
    sampling = "point" if "time" in cols else "window"
    rows = {}
    units = {}
    raw = None
    seen = {}
    for i in range(first + 1, len(lines)):
        line = lines[i]
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        where = f"{path}:{i + 1}"
        cells = next(csv.reader([line]))
        if len(cells) != len(names):
            raise input_error("columns", f"{len(cells)} cells, header has {len(names)}", where)

        def cell(name):
            return cells[cols[name]].strip()

        sid, comp = cell("station"), cell("component").lower()
        if not sid or "/" in sid:
            raise input_error("station", f"must be a non-empty name without '/', got {show(sid)}",
                              where)
        if comp not in COMPONENTS:
            raise input_error("component", f"unknown {show(comp)}; valid: {', '.join(COMPONENTS)}",
                              where)
        hunit = header.get(f"unit.{comp}", header.get("unit"))
        ustr = cell("unit") if "unit" in cols else hunit
        if "unit" in cols and hunit and _meaning(hunit) != _meaning(ustr):
            # which of the two the values are in is a guess (a factor of 1e9 for n)
            raise input_error("unit", f"{show(ustr)} in the unit column, "
                              f"{show(hunit)} in the header ('# unit"
                              f"{'.' + comp if f'unit.{comp}' in header else ''} = ...'): "
                              "state the unit once", where)
        if not ustr:
            raise input_error("unit", f"unit of {comp} not stated: add a 'unit' column or "
                              f"'# unit.{comp} = ...' to the header", where)
        if ustr in VALUE_UNITS:
            ufac, kind = VALUE_UNITS[ustr]
            if kind != _KIND[comp]:
                raise input_error("unit", f"{show(ustr)} is not a unit of {comp}", where)
            is_raw = False
        elif ustr in RAW_UNITS:
            ufac, is_raw = RAW_UNITS[ustr], True
        else:
            raise input_error("unit", f"unknown {show(ustr)}; valid: V/m/A, T/s/A, V/A/m2, T/A "
                              "(prefixes m u n p) or V (receiver volts)", where)
        if raw is not None and is_raw != raw:
            raise input_error("unit", "mixes normalised units and receiver volts", where)
        raw = is_raw
        units.setdefault(comp, ustr)
        if sampling == "point":
            t0 = t1 = _number(cell("time"), "time", where) * tfac["time"]
            if t0 <= 0:
                raise input_error("time", f"must be > 0 s after time zero, got {t0:g} s", where)
        else:
            t0 = _number(cell("gate_open"), "gate_open", where) * tfac["gate_open"]
            t1 = _number(cell("gate_close"), "gate_close", where) * tfac["gate_close"]
            if not 0 <= t0 < t1:
                raise input_error("gate_close", f"needs 0 <= open < close, got {t0:g} s, "
                                  f"{t1:g} s", where)
        value = _number(cell("value"), "value", where) * ufac
        error = _number(cell("error"), "error", where) * ufac
        if error < 0:
            raise input_error("error", f"must be >= 0, got {cell('error')}", where)
        usable = True
        if "usable" in cols:
            u = cell("usable").lower()
            if u not in _TRUE | _FALSE:
                raise input_error("usable", f"expected 1/0, true/false or yes/no, got {show(u)}", where)
            usable = u in _TRUE
        key = (sid, comp)
        tfield = "time" if sampling == "point" else "gate_open"
        if (sid, comp, t0, t1) in seen:
            raise input_error(tfield, f"duplicate of line {seen[(sid, comp, t0, t1)]} "
                              f"({sid} {comp} at {t0:g} s)", where)
        seen[(sid, comp, t0, t1)] = i + 1
        ch = rows.setdefault(key, [])
        if ch and not (t0 > ch[-1][0] and t1 > ch[-1][1]):
            raise input_error(tfield, f"{sid} {comp}: times must increase down the file "
                              f"({t0:g} s after {ch[-1][0]:g} s on line {ch[-1][5]})", where)
        if ch and sampling == "window" and t0 < ch[-1][1] * (1 - 1e-9):
            raise input_error("gate_open", f"{sid} {comp}: gate overlaps the one on line "
                              f"{ch[-1][5]}", where)
        ch.append((t0, t1, value, error, usable, i + 1))
    if not rows:
        raise input_error("rows", "no data rows", path)
    channels = {}
    for key, ch in rows.items():
        a = np.array([r[:4] for r in ch], float)
        d = {"value": a[:, 2], "error": a[:, 3], "usable": np.array([r[4] for r in ch], bool),
             "line": np.array([r[5] for r in ch], int)}
        if sampling == "point":
            d["time"] = a[:, 0]
        else:
            d["open"], d["close"] = a[:, 0], a[:, 1]
        channels[key] = d
    return Decays(path, sampling, bool(raw), channels, units)
