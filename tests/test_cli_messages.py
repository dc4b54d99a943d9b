"""Option errors and output folders in the way: one line naming the option or folder, exit
status 2 (options) or 1 (outputs), no usage block and no traceback."""
import pytest

from tem.cli import main


@pytest.mark.parametrize("argv, line", [
    (["invert", "g", "--out", "o", "--jobs", "0"],
     "tem invert: --jobs: a whole number in 1..256, got '0' (tem invert --help lists the options)"),
    (["invert", "g", "--out", "o", "--few-resistivity-bounds", "-10,10"],
     "tem invert: --few-resistivity-bounds: expected one argument; a value that starts with '-' "
     "is written --few-resistivity-bounds=-VALUE (tem invert --help lists the options)"),
    (["invert", "g", "--out", "o", "--bogus", "3"],
     "tem invert: unrecognized arguments: --bogus 3 (tem invert --help lists the options)"),
    (["section"],
     "tem section: the following arguments are required: models, --out "
     "(tem section --help lists the options)"),
    (["nonsense"], None),
])
def test_option_errors_one_line(capsys, argv, line):
    with pytest.raises(SystemExit) as exc:
        main(argv)
    err = capsys.readouterr().err
    assert exc.value.code == 2 and len(err.strip().splitlines()) == 1 and "usage" not in err
    if line is None:
        assert err.startswith("tem: COMMAND: invalid choice: 'nonsense'")
        assert err.strip().endswith("(tem --help lists the commands)")
    else:
        assert err.strip() == line


def test_negative_list_value_after_equals(tmp_path, capsys):
    """--opt=-10,10 reaches the option (the value is checked, not taken for an option)."""
    status = main(["invert", str(tmp_path / "none"), "--out", str(tmp_path / "o"),
                   "--few-resistivity-bounds=-10,10"])
    err = capsys.readouterr().err
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert "expected one argument" not in err



def test_figures_file_in_the_way(tmp_path, capsys):
    from gated_fixture import write_two_stations

    (tmp_path / "g").mkdir()
    write_two_stations(tmp_path / "g")
    (tmp_path / "o").mkdir()
    (tmp_path / "o" / "figures").write_text("x")
    status = main(["rhoa", str(tmp_path / "g"), "--out", str(tmp_path / "o"), "--jobs", "1",
                   "--no-progress"])
    err = capsys.readouterr().err
    assert status == 1 and "Traceback" not in err
    assert f"{tmp_path / 'o' / 'figures'}: exists and is not a folder" in err
    assert err.strip().splitlines()[-1] == \
        f"tem rhoa: error: {tmp_path / 'o' / 'figures'}: exists and is not a folder"


@pytest.mark.parametrize("command, says", [
    ("run", ["evening QC verdict is reoccupy", "not fitted (misfit)", "2 on bad input"]),
    ("evening", ["evening QC verdict is reoccupy", "2 on bad input"]),
    ("invert", ["not fitted (misfit", "2 on bad input"]),
    ("section", ["not fitted (misfit", "2 on bad input"]),
    ("export", ["not fitted (misfit", "a file cannot be written", "2 on bad input"]),
])
def test_help_states_the_exit_statuses_of_docs(capsys, command, says):
    """Each command's --help gives the exit statuses docs/pipeline.md gives it."""
    with pytest.raises(SystemExit) as exc:
        main([command, "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert exc.value.code == 0 and "Exit status 1" in text
    for phrase in says:
        assert phrase in text, phrase
