"""The settings tables are the one declaration of every processing setting (issue 9).

Checked: each stage command's options and each ``[processing.<stage>]`` table
accept exactly the table's exposed settings, with the table's help text and
no default stored anywhere else (argparse holds none; library functions repeat
none of them as a keyword default); errors name what the user typed.
"""
from __future__ import annotations

import argparse
import ast
from pathlib import Path

import pytest

from tem.cli import build_parser
from tem.errors import TemInputError
from tem.forward.settings import FORWARD
from tem.pipeline.settings import TABLES, resolve_settings
from tem.settings import PYTHON, SettingsTable

from tem.importer.settings import IMPORT

ALL = dict(TABLES, forward=FORWARD, **{"import": IMPORT})
#: command that exposes each table (the pipeline exposes them through [processing] and --set)
COMMANDS = {"stack": "stack", "gate": "gate", "qc": "gate", "rhoa": "rhoa", "invert": "invert",
            "section": "section", "export": "export", "report": "report", "forward": "forward",
            "import": "import"}


def _subparser(name):
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return sub.choices[name]


@pytest.mark.parametrize("stage", sorted(ALL))
def test_options_are_generated_from_the_table(stage):
    table = ALL[stage]
    p = _subparser(COMMANDS[stage])
    generated = {a.option_strings[0]: a for a in p._actions
                 if a.dest.startswith(f"_set_{stage}_")}
    assert set(generated) == {s.flag for s in table.exposed}
    for s in table.exposed:
        a = generated[s.flag]
        assert a.default is argparse.SUPPRESS          # the default lives only in the table
        assert a.help == s.describe()
        assert (s.unit in a.help) or not s.unit or s.default is None or isinstance(s.default, bool)


@pytest.mark.parametrize("stage", sorted(ALL))
def test_option_placeholders_are_words(stage):
    # a unit such as "1/decade" once showed as "--per-decade 1_DECADE" in --help: a placeholder
    # is a choice list or upper-case words without an underscore (common practice, no source)
    p = _subparser(COMMANDS[stage])
    for a in p._actions:
        if a.dest.startswith(f"_set_{stage}_") and a.metavar:
            mv = a.metavar
            assert mv.startswith("{") or ("_" not in mv and mv == mv.upper()), (a.dest, mv)
    gate = {a.option_strings[0]: a.metavar for a in _subparser("gate")._actions
            if a.option_strings}
    assert gate["--per-decade"] == "X"


@pytest.mark.parametrize("stage", sorted(TABLES))
def test_processing_keys_are_the_table(stage):
    table = TABLES[stage]
    # every exposed setting is a key; its default value is accepted as given
    given = {s.name: s.default for s in table.exposed if s.default is not None}
    settings = resolve_settings({stage: given}, survey_file=Path("s.toml"))[stage]
    for s in table.items:
        value = getattr(settings, s.name)
        assert value == s.default or list(value) == list(s.default)
    with pytest.raises(TemInputError, match=rf"s\.toml: processing\.{stage}\.bogus: unknown key"):
        resolve_settings({stage: {"bogus": 1}}, survey_file=Path("s.toml"))
    hidden = [s.name for s in table.items if not s.expose]
    for name in hidden:      # library-only tuning knobs are not keys
        with pytest.raises(TemInputError, match="unknown key"):
            resolve_settings({stage: {name: table.item(name).default}}, survey_file=Path("s.toml"))


@pytest.mark.parametrize("stage", sorted(ALL))
def test_library_class_defaults_are_the_table(stage):
    table = ALL[stage]
    obj = table.cls()
    assert obj.as_dict() == {s.name: (list(s.default) if isinstance(s.default, tuple)
                                      else s.default) for s in table.items}
    with pytest.raises(TemInputError):
        table.cls(**{table.items[0].name: object()})


def _function_defaults():
    """(file, function, argument, value) for every constant keyword default in tem/."""
    root = Path(__file__).resolve().parents[1] / "tem"
    for f in root.rglob("*.py"):
        if f.name == "settings.py":
            continue
        for node in ast.walk(ast.parse(f.read_text(encoding="utf-8"))):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                a = node.args
                pos = a.args[len(a.args) - len(a.defaults):]
                pairs = list(zip(pos, a.defaults))
                pairs += [(k, d) for k, d in zip(a.kwonlyargs, a.kw_defaults) if d is not None]
                for arg, d in pairs:
                    if isinstance(d, ast.Constant) and d.value is not None:
                        yield f.relative_to(root.parent), node.name, arg.arg, d.value


def test_no_setting_default_is_written_twice():
    settings = {}
    for table in ALL.values():
        for s in table.items:
            settings.setdefault(s.name, []).append((table.stage, s.default))
    twice = [f"{f}: {fn}({arg}={value!r}) repeats {stage}.{arg}"
             for f, fn, arg, value in _function_defaults() if arg in settings
             for stage, default in settings[arg] if default == value]
    assert not twice, "\n".join(twice)


def test_errors_name_what_the_user_typed(tmp_path, capsys):
    from tem.cli import main

    assert main(["gate", str(tmp_path), "--out", str(tmp_path / "o"), "--per-decade", "x"]) == 2
    assert "tem gate: error: --per-decade: expected a number, got 'x'" in capsys.readouterr().err
    with pytest.raises(TemInputError, match=r"^s\.toml: processing\.invert\.layers: "):
        resolve_settings({"invert": {"layers": [3]}}, survey_file=Path("s.toml"))
    with pytest.raises(TemInputError, match=r"^--set invert\.layers: "):
        resolve_settings({}, [("invert", "layers", "3.5")])
    with pytest.raises(TemInputError, match=r"^layers: "):
        TABLES["invert"].cls(layers=1)
    huge = 10 ** 400
    for value in (huge, "9" * 5000, float("nan"), "1e999", True, {"a": 1}, "a\x00b"):
        with pytest.raises(TemInputError) as exc:
            TABLES["gate"].build({"per_decade": value}, PYTHON)
        assert "\n" not in str(exc.value) and len(str(exc.value)) < 200


def test_a_table_refuses_duplicate_names():
    from tem.settings import Setting

    with pytest.raises(ValueError):
        SettingsTable("x", [Setting("a", 1, "int"), Setting("a", 2, "int")], "X")


def test_reference_page_is_generated_from_the_tables():
    from tem.settings import markdown

    page = Path(__file__).resolve().parents[1] / "docs" / "settings.md"
    assert page.read_text(encoding="utf-8") == markdown(list(TABLES.values()) + [FORWARD, IMPORT]), \
        "docs/settings.md is stale: python -m tem.settings > docs/settings.md"


def test_reference_page_rows_have_six_cells():
    # a bare "|" in a help text (|value|) once split a row of docs/settings.md into more cells;
    # Markdown tables end a cell at every unescaped "|" (GitHub Flavored Markdown spec, tables)
    import re

    from tem.settings import markdown

    page = markdown(list(TABLES.values()) + [FORWARD, IMPORT])
    rows = [line for line in page.splitlines() if line.startswith("| `")]
    assert len(rows) > 50
    for line in rows:
        assert len(re.split(r"(?<!\\)\|", line)) == 8, line    # 6 cells between 7 bars
