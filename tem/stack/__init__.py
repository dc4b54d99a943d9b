"""Stacking stage: cutting at switch times, polarity combination, drift removal, robust stacks.

- :mod:`.stacking`: window sources, the robust stack and per-station stacking.
- :mod:`.kernels`: the compiled passes (no checks inside).
"""
from .stacking import *  # noqa: F401,F403
from .stacking import __all__  # noqa: F401
