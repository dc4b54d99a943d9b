"""Never destroy or write into an input (issue 9, item 4): every command, before any write.

An output folder that is an input file, the folder holding an input file, the
survey's folder, a recording folder, or a folder whose stage folders hold an
input the stage would overwrite is refused with one line (exit status 2) and
nothing on disk changes. The inputs here are placeholders: the guard runs
before any product is read.
"""
from __future__ import annotations

import pytest

from tem.cli import main


@pytest.fixture()
def tree(tmp_path):
    """A survey folder with (empty) recordings, a project with one product per stage, a model."""
    from tem.survey import write_survey
    from tem.synth import emberline_survey

    day = tmp_path / "day"
    sv, _ = emberline_survey(base_dir=day, stations=["EM01", "EM02"])
    write_survey(sv, day / "survey.toml")
    for st in sv.stations:
        for rx in st.receivers:
            for f in rx.files:
                p = day / f
                p.parent.mkdir(parents=True, exist_ok=True)
                p.write_bytes(b"placeholder")
    proj = tmp_path / "proj"
    for rel in ("stacked/EM01.nc", "stacked/EM02.nc", "gated/EM01.nc", "gated/EM02.nc",
                "models/models.nc", "sections/section.nc"):
        (proj / rel).parent.mkdir(parents=True, exist_ok=True)
        (proj / rel).write_bytes(b"placeholder " + rel.encode())
    model = tmp_path / "models" / "model.csv"
    model.parent.mkdir()
    model.write_text("thickness_m,resistivity_ohmm\n100,10\n,100\n")
    return tmp_path


def _snapshot(root):
    return {p: (p.stat().st_mtime_ns, p.stat().st_size) for p in root.rglob("*")}


def _refused(capsys, args, expected):
    capsys.readouterr()
    rc = main([str(a) for a in args])
    err = capsys.readouterr().err
    assert rc == 2, (args, err)
    assert expected in err and "--out" in err and err.count("\n") == 1, (args, err)


CASES = {
    # the brief's four cases
    "gate into the stacked folder": (["gate", "{p}/stacked/EM01.nc", "--out", "{p}/stacked"],
                                     "is the folder of the input EM01.nc"),
    "forward beside the model": (["forward", "{t}/models/model.csv", "{d}/survey.toml", "--out",
                                  "{t}/models"], "is the folder of the input model.csv"),
    "run into a recording folder": (["run", "{d}/survey.toml", "--out", "{d}/raw/EM01/proj"],
                                    "lies inside the input folder"),
    "synth into the survey folder": (["synth", "{d}/survey.toml", "--models",
                                      "{t}/models/model.csv", "--out", "{d}"],
                                     "lies inside the input folder"),
    # every other command
    "synth below the survey folder": (["synth", "{d}/survey.toml", "--models",
                                       "{t}/models/model.csv", "--out", "{d}/again"],
                                      "lies inside the input folder"),
    "forward into the survey folder": (["forward", "{t}/models/model.csv", "{d}/survey.toml",
                                        "--out", "{d}"], "is the folder of the input survey.toml"),
    "forward over the model": (["forward", "{t}/models/model.csv", "{d}/survey.toml", "--out",
                                "{t}/models/model.csv"], "exists and is not a folder"),
    "stack into the survey folder": (["stack", "{d}/survey.toml", "--out", "{d}"],
                                     "lies inside the input folder"),
    "stack into a recording folder": (["stack", "{d}/survey.toml", "--out", "{d}/raw/EM02"],
                                      "lies inside the input folder"),
    "gate a folder into itself": (["gate", "{p}/stacked", "--out", "{p}/stacked"],
                                  "is the folder of the input"),
    "gate over a stacked file": (["gate", "{p}/stacked", "--out", "{p}/stacked/EM01.nc"],
                                 "exists and is not a folder"),
    "gate over its gated inputs": (["gate", "{p}/gated", "--out", "{p}"],
                                   "would overwrite or remove the input"),
    "rhoa into the gated folder": (["rhoa", "{p}/gated", "--out", "{p}/gated"],
                                   "is the folder of the input"),
    "invert into the gated folder": (["invert", "{p}/gated/EM02.nc", "--out", "{p}/gated"],
                                     "is the folder of the input EM02.nc"),
    "invert over its models input": (["invert", "{p}/models/models.nc", "--out", "{p}"],
                                     "would overwrite or remove the input"),
    "section into the models folder": (["section", "{p}/models/models.nc", "--out",
                                        "{p}/models"], "is the folder of the input models.nc"),
    "export into the models folder": (["export", "{p}", "--out", "{p}/models"],
                                      "is the folder of the input models.nc"),
    "report into the models folder": (["report", "{p}", "--out", "{p}/models"],
                                      "is the folder of the input models.nc"),
    "run into the survey folder": (["run", "{d}/survey.toml", "--out", "{d}"],
                                   "lies inside the input folder"),
    "run over the survey": (["run", "{d}/survey.toml", "--out", "{d}/survey.toml"],
                            "exists and is not a folder"),
    "evening into a recording folder": (["evening", "{d}/survey.toml", "--out", "{d}/raw/EM02"],
                                        "lies inside the input folder"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_command_refuses_output_into_or_over_an_input(tree, capsys, case):
    args, expected = CASES[case]
    fill = {"t": tree, "d": tree / "day", "p": tree / "proj"}
    before = _snapshot(tree)
    _refused(capsys, [a.format(**fill) for a in args], expected)
    assert _snapshot(tree) == before          # nothing written, created or removed


def test_relative_paths_as_typed(tree, capsys, monkeypatch):
    # the commands exactly as a user types them in the project and the model's folder
    monkeypatch.chdir(tree / "proj")
    before = _snapshot(tree)
    _refused(capsys, ["gate", "stacked/EM01.nc", "--out", "stacked"], "is the folder of the input")
    _refused(capsys, ["rhoa", "gated", "--out", "gated"], "is the folder of the input")
    _refused(capsys, ["gate", "gated", "--out", "."], "would overwrite or remove the input")
    monkeypatch.chdir(tree / "models")
    _refused(capsys, ["forward", "model.csv", "../day/survey.toml", "--out", "."],
             "is the folder of the input model.csv")
    assert _snapshot(tree) == before


def test_separate_output_folders_are_accepted(tree):
    from tem.io.project import check_output

    p = tree / "proj"
    # the usual chain: each stage reads the project's products and writes into the project
    check_output(p, ["gate"], inputs=[p / "stacked" / "EM01.nc"])
    check_output(p, ["section"], inputs=[p / "models" / "models.nc"])
    check_output(tree / "fwd", ["forward"], inputs=[tree / "models" / "model.csv",
                                                   tree / "day" / "survey.toml"],
                 planned=["response.csv"])
    # a project beside the survey folder
    check_output(tree / "proj2", ["stack"], inputs=[tree / "day" / "survey.toml"],
                 read_only=[tree / "day"])
