"""Synthetic data for the demo and the tests (the fictional Emberline Plateau survey).

- :mod:`.raw`: raw field recordings (forward engine, waveform, realistic noise and faults) and
  the Emberline scenario.
"""
from .raw import *  # noqa: F401,F403
from .raw import __all__  # noqa: F401
