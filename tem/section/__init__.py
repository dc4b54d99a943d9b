"""Section stage: stitch 1D models along a profile, pseudo-sections, depth and two-way time.

- :mod:`.profile`: profile lines, chainage, stitching, velocity tables.
- :mod:`.plot`: section, pseudo-section and model figures.
"""
from .profile import *  # noqa: F401,F403
from .profile import __all__  # noqa: F401
