"""tem: land time-domain electromagnetics from raw recordings to layered models.

Stages (each a library function and a command): stack, gate, rhoa, invert,
section, export. See docs/ for file formats and methods.
"""
__version__ = "0.1.0"

SAFETY_NOTE = (
    "Grounded-wire and loop transmitters drive lethal currents and voltages: "
    "operate them under local electrical-safety codes and licensed practice. "
    "Resistivity models are interpretations; check them against wells and "
    "other data before any drilling decision."
)
