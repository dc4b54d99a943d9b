"""1D layered-earth forward modelling for grounded-wire and loop TEM.

See :class:`Simulation` for the method and docs/forward.md for formats.
"""
from .geometry import COMPONENTS, CircularLoop, PolygonLoop, Receiver, Wire
from .kernel import MU0
from .model import LayeredModel
from .simulation import RESPONSES, Simulation
from .waveform import Waveform

__all__ = ["LayeredModel", "Wire", "PolygonLoop", "CircularLoop", "Receiver", "Waveform",
           "Simulation", "COMPONENTS", "RESPONSES", "MU0"]
