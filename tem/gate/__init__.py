"""Gating stage: log-spaced, tapered time gates, errors per gate, noise floor.

- :mod:`.windows`: gate tables, gate averages and their errors, usable gates.
"""
from .windows import *  # noqa: F401,F403
from .windows import __all__  # noqa: F401
