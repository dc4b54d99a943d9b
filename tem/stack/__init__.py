"""Stacking stage: cutting at switch times, polarity combination, drift removal, robust stacks.

- :mod:`.stacking`: window sources and the robust stack of one channel.
- :mod:`.batchvar`: standard errors from batch influence sums (correlated batches).
- :mod:`.station`: switch times and the stack of every channel of a station.
- :mod:`.rawchecks`: raw-record checks (half-cycles, mains, baseline, timing).
- :mod:`.kernels`: the compiled passes (no checks inside).
"""
from .stacking import *  # noqa: F401,F403
from .stacking import __all__ as _a1
from .station import *  # noqa: F401,F403
from .station import __all__ as _a2

__all__ = list(_a1) + list(_a2)
