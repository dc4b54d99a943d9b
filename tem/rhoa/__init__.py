"""Apparent-resistivity stage: late-time and all-time apparent resistivity, pseudo-depth.

- :mod:`.late_time`: closed forms, geometry of the effective moment, flags,
  diffusion depth.
- :mod:`.all_time`: half-space root matching with branch choice.
- :mod:`.sounding`: one gated sounding -> its apparent-resistivity product.
- :mod:`.plot`: sounding curves and pseudo-sections.
"""
from .all_time import *  # noqa: F401,F403
from .all_time import __all__ as _all_time
from .late_time import *  # noqa: F401,F403
from .late_time import __all__ as _late_time

__all__ = list(_late_time) + list(_all_time)
