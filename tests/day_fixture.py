"""A small synthetic Emberline day (fictional) for tests that run the whole chain.

The raw recordings come from tem.synth (the forward engine and its noise model,
not data): 1000 Hz, no transmitter-current channel, the survey TOML with the
test's ``[processing]`` table appended.
"""
from __future__ import annotations

import contextlib
import io

#: A light [processing] table for two-station runs through every stage (12-layer smooth
#: models, 4 gates per decade, a 25 m section step, PNG figures, 10 m LAS step).
SMALL_CHAIN = """
[processing.gate]
per_decade = 4.0

[processing.invert]
layers = 12

[processing.section]
depth_step = 25.0
formats = ["png"]

[processing.export]
las_step = 10.0
"""


def write_day(folder, stations, processing, seed, duration, edit=None, faults=None):
    """Synthesise the day of ``stations`` into ``folder``; return its survey file.

    ``edit(survey_dict)`` may change the survey before it is written (e.g. a
    wrong gain); the recordings are those of the true survey. ``faults``:
    station -> :class:`tem.synth.Faults` built into its recording.
    """
    import tomli_w

    from tem.survey import survey_to_dict
    from tem.synth import emberline_survey, synth_survey

    sv, models = emberline_survey(base_dir=folder, sample_rate=1000.0, stations=stations,
                                  current_channel=False)
    folder.mkdir(parents=True, exist_ok=True)
    synth_survey(sv, models, folder, seed=seed, duration=duration, faults=faults)
    d = survey_to_dict(sv)
    if edit is not None:
        edit(d)
    (folder / "survey.toml").write_text(tomli_w.dumps(d) + processing)
    return folder / "survey.toml"


def run_captured(args):
    """``tem ARGS`` in this process; returns (exit status, standard output, standard error)."""
    from tem.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(list(args))
    return rc, out.getvalue(), err.getvalue()
