"""Evening quality control: per-channel measures, a verdict per station, QC tables and figures.

- :mod:`.measures`: per-station and channel measures from the stacked and
  gated products (pure functions).
- :mod:`.verdict`: the ``[processing.qc]`` settings, the rules that turn
  measures into good / reoccupy / check with reasons, and ``qc/stations.csv``.
- :mod:`.views`: the terminal QC table and the QC figures.
"""
from .measures import *  # noqa: F401,F403
from .measures import __all__ as _a1
from .verdict import *  # noqa: F401,F403
from .verdict import __all__ as _a2
from .views import *  # noqa: F401,F403
from .views import __all__ as _a3

__all__ = list(_a1) + list(_a2) + list(_a3)
