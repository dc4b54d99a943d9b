"""One table per stage: every processing setting is declared once.

A :class:`Setting` carries a name (the library field, the key in the survey's
``[processing.<stage>]`` table and, dashed, the command-line option), its
default, unit, check and help text. A :class:`SettingsTable` turns its
settings into

- a frozen dataclass (``table.cls``) whose construction checks every field,
  used by the library;
- the options of the stage's command (``table.add_options(parser)``);
- the checked values of a ``[processing.<stage>]`` table or of
  ``--set STAGE.KEY=VALUE``;

so a default, a unit or a check is written in one place. Errors name what the
user typed: ``--layers`` on the command line, ``processing.invert.layers``
(with the file) in a survey, ``--set invert.layers`` for an override and the
field name in Python. Every error is a :class:`tem.errors.TemInputError`.
"""
from __future__ import annotations

import argparse
import dataclasses
import math
import sys
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from .errors import TemInputError, input_error

__all__ = ["Setting", "SettingsTable", "Origin", "CLI", "PYTHON", "survey_origin", "override_origin",
           "parse_assignment"]

#: Largest number of digits accepted for a whole number (TOML allows 64-bit; a
#: command line could pass thousands of digits).
MAX_DIGITS = 15
#: Longest text value accepted.
MAX_TEXT = 4096

KINDS = ("float", "int", "bool", "choice", "text", "path", "list", "floats", "custom")


# ----------------------------------------------------------------------------- origins
@dataclass(frozen=True)
class Origin:
    """Where values come from, so that errors name what the user typed.

    ``kind`` is ``python``, ``cli``, ``survey`` or ``set``; ``file`` is the
    survey file (``survey``), ``stage`` the table's stage.
    """

    kind: str = "python"
    file: Any = None

    def label(self, table: "SettingsTable", name: str) -> str:
        if self.kind == "cli":
            return table.item(name).flag if name in table.names else name
        if self.kind == "survey":
            return f"processing.{table.stage}.{name}"
        if self.kind == "set":
            return f"--set {table.stage}.{name}"
        return name


PYTHON = Origin("python")
CLI = Origin("cli")


def survey_origin(file) -> Origin:
    """Values read from the ``[processing]`` table of ``file``."""
    return Origin("survey", file)


def override_origin() -> Origin:
    """Values given as ``--set STAGE.KEY=VALUE``."""
    return Origin("set")


# ----------------------------------------------------------------------------- one setting
@dataclass(frozen=True)
class Setting:
    """One processing setting.

    Parameters
    ----------
    name : str
        Library field and ``[processing.<stage>]`` key; the option is
        ``--`` + name with dashes (or ``flag``).
    default : object
        Default value (None: unset; then ``optional`` is implied).
    kind : str
        ``float``, ``int``, ``bool``, ``choice``, ``text``, ``path``,
        ``list`` (items from ``choices``), ``floats`` (numbers) or ``custom``
        (parsed by ``parse``).
    unit : str
        SI unit of the value ("" for dimensionless), shown in help and docs.
    help : str
        One sentence for the command's help and docs/pipeline.md.
    minimum, maximum : float or None
        Bounds; ``exclusive`` makes the minimum strict (e.g. positive),
        ``exclusive_max`` the maximum.
    choices : tuple
        Valid values of ``choice`` and ``list`` kinds.
    optional : bool
        None (unset) is allowed.
    source : str
        Where the default comes from (a publication, or "common practice,
        no source").
    parse : callable or None
        ``parse(value) -> value`` for ``custom`` kinds; raise ValueError or
        TemInputError with the problem (the field is added here).
    expose : bool
        False keeps a tuning knob library-only (no option, no key).
    flag : str or None
        Option spelling when it differs from the name.
    repeat : bool
        The option may be given several times (``custom`` lists).
    metavar : str or None
        Placeholder in the option's help.
    """

    name: str
    default: Any
    kind: str
    unit: str = ""
    help: str = ""
    minimum: float | None = None
    maximum: float | None = None
    exclusive: bool = False
    exclusive_max: bool = False
    choices: tuple = ()
    optional: bool = False
    source: str = ""
    parse: Callable | None = None
    expose: bool = True
    flag: str | None = None
    repeat: bool = False
    metavar: str | None = None

    def __post_init__(self):
        if self.kind not in KINDS:
            raise ValueError(f"setting {self.name}: unknown kind {self.kind!r}")
        if self.flag is None:
            object.__setattr__(self, "flag", "--" + self.name.replace("_", "-"))

    @property
    def may_be_unset(self) -> bool:
        return self.optional or self.default is None

    def describe(self) -> str:
        """Help text with default and unit, e.g. ``gates per decade (default 9)``."""
        d = self.default
        if d is None:
            return self.help if "unset" in self.help else f"{self.help} (default unset)"
        if isinstance(d, bool):
            dtext = "on" if d else "off"
        elif isinstance(d, (list, tuple)):
            dtext = ",".join(str(v) for v in d) if d else "none"
        else:
            dtext = f"{d:g}" if isinstance(d, float) else str(d)
        unit = f" {self.unit}" if self.unit and d is not None and not isinstance(d, bool) else ""
        return f"{self.help} (default {dtext}{unit})"

    # -- checking ------------------------------------------------------------------------------
    def coerce(self, value, label: str, file=None):
        """Checked value of this setting; errors are TemInputError naming ``label``."""
        def bad(problem):
            return input_error(label, problem, file)

        if value is None or (isinstance(value, str) and value.strip().lower() == "none"
                             and self.kind not in ("text", "path")):
            if self.may_be_unset:
                return None
            raise bad("cannot be unset")
        k = self.kind
        if k == "float":
            value = _number(value, bad)
        elif k == "int":
            value = _whole(value, bad)
        elif k == "bool":
            value = _boolean(value, bad)
        elif k in ("choice", "text", "path"):
            value = _text(value, bad)
            if k == "choice" and value not in self.choices:
                raise bad(f"unknown {value!r}; valid: {', '.join(map(str, self.choices))}")
        elif k == "list":
            items = _items(value, bad)
            wrong = [v for v in items if v not in self.choices]
            if wrong:
                raise bad(f"unknown {wrong[0]!r}; valid: {', '.join(self.choices)}")
            if not items:
                raise bad("expected a non-empty list")
            value = tuple(items)
        elif k == "floats":
            value = tuple(_number(v, bad) for v in _items(value, bad))
            if not value:
                raise bad("expected one or more numbers")
        elif k == "custom":
            try:
                value = self.parse(value)
            except TemInputError as exc:
                raise bad(_problem(str(exc))) from None
            except (ValueError, TypeError, KeyError) as exc:
                raise bad(str(exc).splitlines()[0] if str(exc) else "not understood") from None
        if k in ("float", "int"):
            _bounds(self, value, bad)
        elif k == "floats":
            for v in value:
                _bounds(self, v, bad)
        return value


def _problem(text: str) -> str:
    """The problem part of a TemInputError text ``file: field: problem``."""
    return text.rsplit(": ", 1)[-1] if ": " in text else text


def _number(value, bad) -> float:
    if isinstance(value, str):
        text = value.strip()
        if len(text) > 64:
            raise bad("not a number (too long)")
        try:
            value = float(text)
        except ValueError:
            raise bad(f"expected a number, got {text!r}") from None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise bad(f"expected a number, got {_show(value)}")
    if isinstance(value, int) and len(str(abs(value))) > MAX_DIGITS + 300:
        raise bad("number too large")
    try:
        value = float(value)
    except OverflowError:
        raise bad("number too large") from None
    if not math.isfinite(value):
        raise bad(f"must be finite, got {value!r}")
    return value


def _whole(value, bad) -> int:
    if isinstance(value, str):
        text = value.strip()
        if len(text.lstrip("+-")) > MAX_DIGITS:
            raise bad(f"whole number with more than {MAX_DIGITS} digits")
        try:
            value = int(text)
        except ValueError:
            try:
                value = float(text)
            except ValueError:
                raise bad(f"expected a whole number, got {text!r}") from None
    if isinstance(value, float) and math.isfinite(value) and value.is_integer() \
            and abs(value) < 10.0 ** MAX_DIGITS:
        value = int(value)
    if isinstance(value, bool) or not isinstance(value, int):
        raise bad(f"expected a whole number, got {_show(value)}")
    if abs(value) >= 10 ** MAX_DIGITS:
        raise bad(f"whole number with more than {MAX_DIGITS} digits")
    return value


def _boolean(value, bad) -> bool:
    if isinstance(value, str):
        text = value.strip().lower()
        if text in ("true", "yes", "on", "1"):
            return True
        if text in ("false", "no", "off", "0"):
            return False
    if isinstance(value, bool):
        return value
    raise bad(f"expected true or false, got {_show(value)}")


def _text(value, bad) -> str:
    if not isinstance(value, str):
        raise bad(f"expected text, got {_show(value)}")
    if not value.strip():
        raise bad("empty text")
    if len(value) > MAX_TEXT:
        raise bad(f"text longer than {MAX_TEXT} characters")
    if any(ord(c) < 32 and c not in "\t" for c in value):
        raise bad("contains control characters")
    return value


def _items(value, bad) -> list:
    if isinstance(value, str):
        value = [v.strip() for v in value.split(",") if v.strip()]
    if not isinstance(value, (list, tuple)):
        raise bad(f"expected a list, got {_show(value)}")
    if len(value) > 10000:
        raise bad("list too long")
    return list(value)


def _bounds(s: Setting, value, bad):
    lo, hi = s.minimum, s.maximum
    unit = f" {s.unit}" if s.unit else ""
    if lo is not None and (value < lo or (s.exclusive and value == lo)):
        if lo == 0 and s.exclusive:
            raise bad(f"must be positive, got {value:g}{unit}")
        rel = ">" if s.exclusive else ">="
        raise bad(f"must be {rel} {lo:g}{unit}, got {value:g}")
    if hi is not None and (value > hi or (s.exclusive_max and value == hi)):
        rel = "<" if s.exclusive_max else "<="
        raise bad(f"must be {rel} {hi:g}{unit}, got {value:g}")


def _show(value) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


# ----------------------------------------------------------------------------- the table
class SettingsTable:
    """The settings of one stage, declared once.

    Parameters
    ----------
    stage : str
        Stage name: the ``[processing.<stage>]`` table.
    items : sequence of Setting
    cls_name : str
        Name of the generated frozen dataclass (e.g. ``GateSettings``).
    doc : str
        First line of the dataclass's docstring.
    checks : sequence of callables
        Cross-field checks ``check(values: dict) -> (field, problem) or None``;
        the error names the field as the user typed it.
    """

    def __init__(self, stage: str, items, cls_name: str, doc: str = "", checks=(), module=None):
        self.stage = stage
        # the generated class lives (for pickling into worker processes) in the module that
        # assigns it, by default the caller's
        self._module = module or sys._getframe(1).f_globals.get("__name__", __name__)
        self.items = tuple(items)
        self._by_name = {s.name: s for s in self.items}
        if len(self._by_name) != len(self.items):
            raise ValueError(f"{stage}: duplicate setting names")
        self.checks = tuple(checks)
        self.cls = self._make_class(cls_name, doc)

    # -- lookup --------------------------------------------------------------------------------
    @property
    def names(self) -> tuple:
        return tuple(self._by_name)

    @property
    def exposed(self) -> tuple:
        """Settings that are options and ``[processing]`` keys."""
        return tuple(s for s in self.items if s.expose)

    def item(self, name: str) -> Setting:
        return self._by_name[name]

    def defaults(self) -> dict:
        return {s.name: s.default for s in self.items}

    # -- the dataclass ---------------------------------------------------------------------
    def _make_class(self, cls_name, doc):
        table = self
        fields = [(s.name, Any, dataclasses.field(default=s.default)) for s in self.items]

        def __post_init__(self):
            values = {s.name: getattr(self, s.name) for s in table.items}
            checked = table.check(values, PYTHON)
            for k, v in checked.items():
                object.__setattr__(self, k, v)

        def as_dict(self) -> dict:
            """Every setting as plain values (provenance records)."""
            return {s.name: _plain(getattr(self, s.name)) for s in table.items}

        def replace(self, **changes):
            return dataclasses.replace(self, **changes)

        lines = [doc or f"Settings of the {self.stage} stage.", "", "Parameters", "----------"]
        for s in self.items:
            unit = f", {s.unit}" if s.unit else ""
            lines.append(f"{s.name} : {s.kind}{unit}")
            lines.append(f"    {s.describe()}." + (f" Source: {s.source}." if s.source else ""))
        cls = dataclasses.make_dataclass(
            cls_name, fields, frozen=True,
            namespace={"__post_init__": __post_init__, "as_dict": as_dict, "replace": replace,
                       "__doc__": "\n".join(lines), "table": self})
        cls.__module__ = self._module
        return cls

    # -- checking ---------------------------------------------------------------------------
    def check(self, values: dict, origin: Origin = PYTHON, origins: dict | None = None) -> dict:
        """Checked copy of ``values`` (every setting of the table).

        ``origins`` maps a field to the :class:`Origin` it came from when the
        values were gathered from several places (defaults, survey, options).
        """
        origins = origins or {}
        out = {}
        for s in self.items:
            o = origins.get(s.name, origin)
            out[s.name] = s.coerce(values.get(s.name, s.default), o.label(self, s.name), o.file)
        for check in self.checks:
            fault = check(out)
            if fault:
                field, problem = fault
                if field not in origins and origins:
                    # the field at fault keeps its default: blame the given value that makes
                    # the conflict (else a --set value was blamed on the survey file)
                    defaults = self.defaults()
                    for k in origins:
                        if k != field and k in out and not check({**out, k: defaults.get(k)}):
                            ok = origins[k]
                            if out[field] is None:      # a value missing: name it, where k is
                                raise input_error(ok.label(self, field), problem, ok.file)
                            raise input_error(ok.label(self, k), f"conflicts with {field} = "
                                              f"{out[field]!r} (its default): {problem}", ok.file)
                o = origins.get(field, origin)
                raise input_error(o.label(self, field), problem, o.file)
        return out

    def build(self, values: dict | None = None, origin: Origin = PYTHON, origins=None):
        """A settings object from defaults updated by ``values`` (checked, labelled by origin)."""
        values = dict(values or {})
        origins = origins or {}
        for k in values:
            if k not in self._by_name or not self._by_name[k].expose and origin.kind != "python":
                o = origins.get(k, origin)
                raise input_error(o.label(self, _show_key(k)), "unknown setting; valid: "
                                  + ", ".join(s.name for s in self.exposed), o.file)
        merged = {**self.defaults(), **values}
        checked = self.check(merged, origin, origins)
        return _construct(self.cls, checked)


    def unknown_message(self, key) -> str:
        """'unknown key' with the closest valid names (the whole list is in docs/settings.md)."""
        import difflib

        names = [x.name for x in self.exposed]
        close = difflib.get_close_matches(str(key)[:60], names, n=3, cutoff=0.5)
        if len(names) <= 12:
            return "unknown key; valid: " + ", ".join(names)
        hint = f"did you mean {' or '.join(close)}? " if close else ""
        return (f"unknown key; {hint}{len(names)} keys are valid here, listed in docs/settings.md "
                f"and by 'tem {self.stage.replace('qc', 'gate')} --help'")   # QC: gate's options
    def from_table(self, table, file=None, base=None) -> dict:
        """Checked values of one ``[processing.<stage>]`` table (only the keys given).

        Relative ``path`` values are resolved against ``base`` (the survey's
        folder).
        """
        origin = survey_origin(file)
        if not isinstance(table, dict):
            raise input_error(f"processing.{self.stage}", "expected a table", file)
        out = {}
        for key, value in table.items():
            s = self._by_name.get(key)
            if s is None or not s.expose:
                raise input_error(f"processing.{self.stage}.{_show_key(key)}",
                                  self.unknown_message(key), file)
            v = s.coerce(value, origin.label(self, key), file)
            if s.kind == "path" and v is not None and base is not None and not Path(v).is_absolute():
                v = str(Path(base) / v)
            out[key] = v
        return out

    # -- command line -------------------------------------------------------------------------
    def add_options(self, parser, skip=(), group_title=None):
        """Add one option per exposed setting (defaults are not stored in argparse)."""
        target = parser.add_argument_group(group_title) if group_title else parser
        for s in self.exposed:
            if s.name in skip:
                continue
            dest = f"_set_{self.stage}_{s.name}"
            if s.kind == "bool":
                target.add_argument(s.flag, dest=dest, action=argparse.BooleanOptionalAction,
                                    default=argparse.SUPPRESS, help=s.describe())
                continue
            kw = {"dest": dest, "default": argparse.SUPPRESS, "help": s.describe(),
                  "metavar": s.metavar or _metavar(s)}
            if s.repeat:
                kw["action"] = "append"
            target.add_argument(s.flag, **kw)
        return target

    def from_args(self, args) -> dict:
        """Values given on the command line (raw text; checked by :meth:`build`)."""
        out = {}
        for s in self.exposed:
            dest = f"_set_{self.stage}_{s.name}"
            if hasattr(args, dest):
                out[s.name] = getattr(args, dest)
        return out

    def from_command_line(self, args, extra: dict | None = None):
        """The settings object of a stage command: defaults, then the options given."""
        values = self.from_args(args)
        values.update(extra or {})
        return self.build(values, CLI, {k: CLI for k in values})


def _show_key(key) -> str:
    text = str(key)
    return text if len(text) <= 40 and text.isprintable() else repr(text[:37]) + "..."


def _metavar(s: Setting) -> str:
    if s.kind == "choice":
        return "{" + ",".join(s.choices) + "}"
    if s.kind == "list":
        return "LIST"
    if s.kind in ("float", "floats"):
        word = s.unit.upper().replace("-", "").replace(" ", "")
        return word if word.isalpha() else "X"   # a unit such as 1/decade reads as X
    if s.kind == "int":
        return "N"
    if s.kind == "path":
        return "FILE"
    return "VALUE"


def _plain(v):
    if isinstance(v, tuple):
        return [_plain(x) for x in v]
    if dataclasses.is_dataclass(v) and not isinstance(v, type):
        return {k: _plain(x) for k, x in dataclasses.asdict(v).items()}
    if isinstance(v, dict):
        return {k: _plain(x) for k, x in v.items()}
    return v


def _construct(cls, checked: dict):
    obj = object.__new__(cls)
    for k, v in checked.items():
        object.__setattr__(obj, k, v)
    return obj


# ----------------------------------------------------------------------------- --set
def parse_assignment(text: str):
    """``"stage.key=value"`` (value in TOML syntax, or bare text) -> (stage, key, value)."""
    head, sep, raw = text.partition("=")
    stage, dot, key = head.strip().partition(".")
    if not sep or not dot or not key:
        raise input_error("--set", f"expected STAGE.KEY=VALUE, got {_show(text)}")
    raw = raw.strip()
    if len(raw) > MAX_TEXT:
        raise input_error(f"--set {head.strip()}", f"value longer than {MAX_TEXT} characters")
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except (tomllib.TOMLDecodeError, KeyError):
        value = raw
    if raw.lower() == "none":
        value = None
    return stage.strip(), key.strip(), value


# ----------------------------------------------------------------------------- reference
def markdown(tables) -> str:
    """The settings reference (docs/settings.md) generated from the tables themselves."""
    lines = ["# Processing settings", "",
             "Generated from the settings tables (`tem/<stage>/settings.py`) by",
             "`python -m tem.settings > docs/settings.md`; a test keeps this page in step with",
             "the code. Each setting is a key of the survey's `[processing.<stage>]` table",
             "(`tem run`, `tem evening`; `--set STAGE.KEY=VALUE`), an option of the stage's",
             "command (`--name-with-dashes`) and a field of the stage's settings class in the",
             "library. The `qc` settings are options of `tem gate`; `forward` and `import`",
             "are commands only (`tem forward`, `tem import`), not `[processing]` tables.", ""]
    for t in tables:
        lines += [f"## `{t.stage}` ({t.cls.__name__})", "",
                  "| key | option | default | unit | meaning | source of the default |",
                  "|---|---|---|---|---|---|"]
        for s in t.exposed:
            d = s.default
            if d is None:
                dtext = "unset"
            elif isinstance(d, bool):
                dtext = "true" if d else "false"
            elif isinstance(d, (list, tuple)):
                dtext = ", ".join(map(str, d)) if d else "none"
            else:
                dtext = f"{d:g}" if isinstance(d, float) else str(d)
            if s.kind in ("choice", "list") and s.choices:
                meaning = f"{s.help} (one of: {', '.join(map(str, s.choices))})"
            else:
                meaning = s.help
            cells = (f"`{s.name}`", f"`{s.flag}`", dtext, s.unit, meaning, s.source)
            # a "|" inside a cell (e.g. |value|) would end the cell: escape it
            lines.append("| " + " | ".join(str(c).replace("|", "\\|") for c in cells) + " |")
        lines.append("")
    return "\n".join(lines)


if __name__ == "__main__":  # pragma: no cover - writes the reference page
    from .forward.settings import FORWARD
    from .importer.settings import IMPORT
    from .pipeline.settings import TABLES

    sys.stdout.write(markdown(list(TABLES.values()) + [FORWARD, IMPORT]))
