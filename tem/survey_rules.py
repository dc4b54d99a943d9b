"""Checks of a survey read from TOML that span several fields (docs/survey.md).

Each was accepted before and failed later, or not at all: a low-pass order
without a cut-off (every station failed at rhoa and invert, naming no file),
a station in another CRS than the transmitter (its offset silently wrong),
an ``.npy`` recording listed by two receivers (one station stacked the
other's data). Errors are one line naming the field; :func:`tem.survey.read_survey`
adds the file.
"""
from __future__ import annotations

from pathlib import Path

from .errors import input_error

__all__ = ["check_survey"]


def check_survey(survey):
    """Return ``survey`` after the cross-field checks above (raises TemInputError)."""
    if survey.lowpass_order > 0 and not survey.lowpass_cutoff > 0.0:
        raise input_error("survey.lowpass_cutoff", f"must be positive with a low-pass order "
                          f"({survey.lowpass_order}), got {survey.lowpass_cutoff:g}")
    for st in survey.stations:
        # coordinates are never transformed: a station in another CRS than the transmitter
        # points would sit at a wrong offset from the wire (and in a wrong place on the line)
        if st.epsg and st.epsg != (survey.epsg or 0):
            raise input_error(f"station[{st.id}].epsg", f"EPSG:{st.epsg} differs from "
                              f"survey.epsg ({survey.epsg or 0}); give every coordinate in the "
                              "survey's CRS")
    owner = {}
    for st in survey.stations:
        for rx in st.receivers:
            if rx.format not in (None, "npy"):
                continue
            for f in rx.files:
                if Path(f).suffix.lower() != ".npy":
                    continue
                key = Path(f).as_posix()
                if key in owner:   # an .npy holds one channel
                    raise input_error(f"station[{st.id}].receiver.files",
                                      f"{key} is also the {owner[key]} recording; an .npy file "
                                      "holds one channel")
                owner[key] = f"{st.id} {rx.component}"
    return survey
