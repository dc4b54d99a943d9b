"""Transmitters and receivers on the surface, and their discretisation.

Coordinates are metres in a right-handed frame, x east, y north, z up.
A wire carries +1 A from endpoint ``a`` to endpoint ``b`` (so the current
enters the ground at ``b``); a loop carries +1 A along its vertices in the
order given (anticlockwise seen from above gives +z field at the centre).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import TemInputError

__all__ = ["Wire", "PolygonLoop", "CircularLoop", "Receiver", "COMPONENTS",
           "E_COMPONENTS", "B_COMPONENTS", "DBDT_COMPONENTS"]

E_COMPONENTS = ("ex", "ey")
B_COMPONENTS = ("bz",)
DBDT_COMPONENTS = ("dbxdt", "dbydt", "dbzdt")
COMPONENTS = E_COMPONENTS + B_COMPONENTS + DBDT_COMPONENTS


def _point(p, name):
    a = np.asarray(p, dtype=float).ravel()
    if a.size != 2 or not np.all(np.isfinite(a)):
        raise TemInputError(f"{name}: expected a finite (x, y) pair in metres, got {p!r}")
    return a


@dataclass(frozen=True)
class _Segments:
    """Straight segments: start points (n,2), end points (n,2)."""
    p0: np.ndarray
    p1: np.ndarray

    def nodes(self, n_per_segment):
        """Gauss-Legendre nodes (P,2), unit tangents (P,2), weights ds (P,)."""
        xg, wg = np.polynomial.legendre.leggauss(int(n_per_segment))
        d = self.p1 - self.p0
        length = np.hypot(d[:, 0], d[:, 1])
        u = d / length[:, None]
        s = 0.5 * (xg[None, :] + 1.0)  # (nseg, n)
        pts = self.p0[:, None, :] + s[..., None] * d[:, None, :]
        w = 0.5 * wg[None, :] * length[:, None]
        tang = np.broadcast_to(u[:, None, :], pts.shape)
        return pts.reshape(-1, 2), tang.reshape(-1, 2), w.reshape(-1)

    def distance_to(self, p):
        """Shortest distance from point p to any segment [m]."""
        d = self.p1 - self.p0
        l2 = np.sum(d * d, axis=1)
        s = np.clip(np.sum((p - self.p0) * d, axis=1) / l2, 0.0, 1.0)
        q = self.p0 + s[:, None] * d
        return float(np.min(np.hypot(*(p - q).T)))

    @property
    def length(self):
        d = self.p1 - self.p0
        return np.hypot(d[:, 0], d[:, 1])


@dataclass(frozen=True)
class Wire:
    """Grounded wire from electrode ``a`` to electrode ``b`` (m); +I enters the ground at b.

    ``via`` lists the corner points of a wire laid along a bent path (m);
    the wire then runs a -> via[0] -> ... -> b, straight between corners.
    """
    a: tuple
    b: tuple
    via: tuple = ()
    grounded = True

    def __post_init__(self):
        a, b = _point(self.a, "transmitter.a"), _point(self.b, "transmitter.b")
        via = np.array([_point(p, "transmitter.via") for p in self.via]).reshape(-1, 2)
        pts = np.vstack([a, via, b])
        if np.any(np.hypot(*np.diff(pts, axis=0).T) <= 0):
            raise TemInputError("transmitter: consecutive wire points coincide")
        object.__setattr__(self, "a", a)
        object.__setattr__(self, "b", b)
        object.__setattr__(self, "via", via)

    @property
    def points(self):
        return np.vstack([self.a, self.via, self.b])

    @property
    def segments(self):
        p = self.points
        return _Segments(p[:-1], p[1:])

    @property
    def electrodes(self):
        """(points (2,2), signs (2,)): +1 where current enters the ground."""
        return np.array([self.b, self.a]), np.array([1.0, -1.0])

    def nodes(self, n):
        return self.segments.nodes(n)

    @property
    def scale(self):
        return float(self.segments.length.sum())


@dataclass(frozen=True)
class PolygonLoop:
    """Closed loop through ``vertices`` (m), current flowing in vertex order."""
    vertices: tuple
    grounded = False

    def __post_init__(self):
        v = np.asarray(self.vertices, dtype=float)
        if v.ndim != 2 or v.shape[1] != 2 or v.shape[0] < 3 or not np.all(np.isfinite(v)):
            raise TemInputError("transmitter.vertices: need at least three finite (x, y) vertices")
        object.__setattr__(self, "vertices", v)

    @property
    def segments(self):
        v = self.vertices
        return _Segments(v, np.roll(v, -1, axis=0))

    @property
    def electrodes(self):
        return np.zeros((0, 2)), np.zeros(0)

    def nodes(self, n):
        return self.segments.nodes(n)

    @property
    def area(self):
        x, y = self.vertices.T
        return 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))

    @property
    def scale(self):
        return float(self.segments.length.max())


@dataclass(frozen=True)
class CircularLoop:
    """Circular loop (centre in m, radius in m), current anticlockwise seen from above."""
    centre: tuple
    radius: float
    grounded = False

    def __post_init__(self):
        c = _point(self.centre, "transmitter.centre")
        r = float(self.radius)
        if not np.isfinite(r) or r <= 0:
            raise TemInputError("transmitter.radius: must be positive and finite (m)")
        object.__setattr__(self, "centre", c)
        object.__setattr__(self, "radius", r)

    @property
    def electrodes(self):
        return np.zeros((0, 2)), np.zeros(0)

    def nodes(self, n):
        """Trapezoidal rule on the circle: spectrally accurate for a periodic integrand."""
        n = int(n)
        th = 2 * np.pi * (np.arange(n) + 0.5) / n
        pts = self.centre + self.radius * np.c_[np.cos(th), np.sin(th)]
        tang = np.c_[-np.sin(th), np.cos(th)]
        w = np.full(n, 2 * np.pi * self.radius / n)
        return pts, tang, w

    @property
    def segments(self):
        """A fine polygon, used only for distance checks and Biot-Savart of the DC field."""
        n = 720
        th = 2 * np.pi * np.arange(n) / n
        v = self.centre + self.radius * np.c_[np.cos(th), np.sin(th)]
        return _Segments(v, np.roll(v, -1, axis=0))

    @property
    def area(self):
        return np.pi * self.radius ** 2

    @property
    def scale(self):
        return self.radius

    def distance_to(self, p):
        return abs(np.hypot(*(np.asarray(p) - self.centre)) - self.radius)


@dataclass(frozen=True)
class Receiver:
    """A receiver on the surface.

    Parameters
    ----------
    component : str
        One of ``ex ey bz dbxdt dbydt dbzdt``.
    position : (x, y)
        Receiver position [m] (the dipole midpoint for E dipoles).
    dipole : ((x0, y0), (x1, y1)), optional
        E-field dipole electrodes [m]. The response is then the voltage from
        electrode 0 to electrode 1 divided by the dipole length, i.e. the
        field averaged along the dipole and projected on its direction.
    """
    component: str
    position: tuple = (0.0, 0.0)
    dipole: tuple | None = field(default=None)

    def __post_init__(self):
        c = str(self.component).lower()
        if c not in COMPONENTS:
            raise TemInputError(f"component: unknown receiver component {self.component!r}; "
                             f"valid: {', '.join(COMPONENTS)}")
        object.__setattr__(self, "component", c)
        if self.dipole is not None:
            if c not in E_COMPONENTS:
                raise TemInputError(f"dipole: only E components take dipole electrodes, not {c}")
            d = np.asarray(self.dipole, dtype=float)
            if d.shape != (2, 2) or not np.all(np.isfinite(d)) or np.hypot(*(d[1] - d[0])) <= 0:
                raise TemInputError("dipole: expected two distinct finite electrode positions ((x0,y0),(x1,y1))")
            object.__setattr__(self, "dipole", d)
            object.__setattr__(self, "position", d.mean(axis=0))
        else:
            object.__setattr__(self, "position", _point(self.position, "receiver.position"))

    @property
    def kind(self):
        if self.component in E_COMPONENTS:
            return "e"
        if self.component in B_COMPONENTS:
            return "b"
        return "dbdt"

    def sample_points(self, n=7):
        """E receivers: (points (n,2), weights (n,), direction (2,)); others: the point."""
        if self.dipole is None:
            e = np.array([1.0, 0.0]) if self.component in ("ex", "dbxdt") else \
                np.array([0.0, 1.0]) if self.component in ("ey", "dbydt") else np.zeros(2)
            return self.position[None, :], np.ones(1), e
        d0, d1 = self.dipole
        xg, wg = np.polynomial.legendre.leggauss(n)
        s = 0.5 * (xg + 1.0)
        pts = d0 + s[:, None] * (d1 - d0)
        length = np.hypot(*(d1 - d0))
        return pts, 0.5 * wg, (d1 - d0) / length
