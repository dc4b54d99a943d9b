"""Layered-earth model: N layers over a half-space, air above."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import TemInputError

__all__ = ["LayeredModel"]


@dataclass(frozen=True)
class LayeredModel:
    """A stack of layers over a half-space.

    Parameters
    ----------
    thickness : array_like, shape (N,)
        Layer thicknesses [m], top down; empty for a half-space.
    resistivity : array_like, shape (N+1,)
        Layer resistivities [ohm-m], the half-space last.
    """

    thickness: np.ndarray
    resistivity: np.ndarray

    def __post_init__(self):
        thk = np.atleast_1d(np.asarray(self.thickness, dtype=float)).ravel()
        res = np.atleast_1d(np.asarray(self.resistivity, dtype=float)).ravel()
        if res.size != thk.size + 1:
            raise TemInputError(
                f"resistivity: expected {thk.size + 1} values (one per layer and the "
                f"half-space), got {res.size}")
        if not np.all(np.isfinite(res)) or np.any(res <= 0):
            raise TemInputError("resistivity: every value must be positive and finite (ohm-m)")
        if not np.all(np.isfinite(thk)) or np.any(thk <= 0):
            raise TemInputError("thickness: every layer thickness must be positive and finite (m)")
        thk.flags.writeable = False
        res.flags.writeable = False
        object.__setattr__(self, "thickness", thk)
        object.__setattr__(self, "resistivity", res)

    @property
    def n_layers(self) -> int:
        """Number of layers including the half-space."""
        return self.resistivity.size

    @property
    def depth_top(self) -> np.ndarray:
        """Depth of each layer top [m] (0 for the first, then cumulative)."""
        return np.concatenate([[0.0], np.cumsum(self.thickness)])

    @classmethod
    def halfspace(cls, resistivity: float) -> "LayeredModel":
        return cls(thickness=[], resistivity=[resistivity])

    @classmethod
    def from_depths(cls, depth_top, resistivity) -> "LayeredModel":
        """From layer-top depths [m] (first 0) and resistivities [ohm-m]."""
        d = np.asarray(depth_top, dtype=float)
        return cls(thickness=np.diff(d), resistivity=resistivity)
