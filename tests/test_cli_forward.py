"""`tem forward` end to end, in-process: files out, errors as one line with exit status 2."""
import csv
from pathlib import Path

import numpy as np

from tem.cli import main
from tem.forward import LayeredModel, Receiver, Simulation, Waveform, Wire

SURVEY = """
[survey]
name = "forward test (fictional)"
[transmitter]
kind = "wire"
points = [[-750.0, 800.0], [750.0, 800.0]]
current = 40.0
base_frequency = 0.25
duty_cycle = 0.5
ramp_on = 0.001
ramp_off = 0.0005
first_switch_off = "2025-06-02T07:30:00Z"
[[station]]
id = "P1"
x = 2500.0
y = 0.0
[[station.receiver]]
component = "ex"
files = []
sample_rate = 4000.0
dipole = [[2450.0, 0.0], [2550.0, 0.0]]
[[station.receiver]]
component = "dbzdt"
files = []
sample_rate = 4000.0
coil_area = 10000.0
"""

MODEL = "thickness_m,resistivity_ohmm\n20,30\n900,500\n600,8\n,2000\n"


def _write(tmp_path):
    (tmp_path / "survey.toml").write_text(SURVEY)
    (tmp_path / "model.csv").write_text(MODEL)
    return tmp_path / "model.csv", tmp_path / "survey.toml"


def test_forward_command_writes_csv_and_figure(tmp_path):
    model, survey = _write(tmp_path)
    out = tmp_path / "out"
    rc = main(["forward", str(model), str(survey), "--out", str(out), "--gates", "12"])
    assert rc == 0
    with open(out / "response.csv") as fh:
        rows = list(csv.DictReader(line for line in fh if not line.startswith("#")))
    assert len(rows) == 24
    assert {r["component"] for r in rows} == {"ex", "dbzdt"}
    assert (out / "response.png").stat().st_size > 10_000
    # the CSV holds what the library computes for the same set-up
    edges = np.geomspace(1e-4, 1.0, 13)
    sim = Simulation(Wire((-750, 800), (750, 800)),
                     [Receiver("ex", dipole=((2450, 0), (2550, 0))), Receiver("dbzdt", (2500, 0))],
                     gates=(edges[:-1], edges[1:]),
                     waveform=Waveform.bipolar(0.25, 0.5, ramp_on=1e-3, ramp_off=5e-4))
    d = sim.predict(LayeredModel([20, 900, 600], [30, 500, 8, 2000]))
    ex = np.array([float(r["value"]) for r in rows if r["component"] == "ex"])
    np.testing.assert_allclose(ex, d[0], rtol=1e-6)


def test_forward_command_bad_inputs_exit_2_with_one_line(tmp_path, capsys):
    model, survey = _write(tmp_path)
    bad = tmp_path / "bad.csv"
    bad.write_text("thickness_m,resistivity_ohmm\n20,nan\n,100\n")
    assert main(["forward", str(bad), str(survey), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "bad.csv" in err and "resistivity" in err
    noend = tmp_path / "noend.csv"
    noend.write_text("thickness_m,resistivity_ohmm\n20,10\n30,100\n")
    assert main(["forward", str(noend), str(survey), "--out", str(tmp_path / "o")]) == 2
    assert "thickness_m" in capsys.readouterr().err
    # a row with a surplus field (a shifted column) was accepted silently
    extra = tmp_path / "extra.csv"
    extra.write_text("thickness_m,resistivity_ohmm\n20,30,4\n,100\n")
    assert main(["forward", str(extra), str(survey), "--out", str(tmp_path / "o")]) == 2
    assert "extra.csv: line 2: more fields than the header has (2)" in capsys.readouterr().err
    # receiver on the wire
    (tmp_path / "s2.toml").write_text(SURVEY.replace("x = 2500.0\ny = 0.0", "x = 0.0\ny = 800.0")
                                      .replace("[[2450.0, 0.0], [2550.0, 0.0]]",
                                               "[[-50.0, 800.0], [50.0, 800.0]]"))
    assert main(["forward", str(model), str(tmp_path / "s2.toml"), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err      # refused where the survey is read, naming its file
    assert "s2.toml: station[P1].receiver: the ex receiver" in err and "lies on the transmitter" in err
    assert not Path(tmp_path / "o" / "response.csv").exists()
