"""From a gated-sounding Dataset to the joint data vector, errors and forward problem.

All usable gates of all channels (components and offsets) of one station form
one data vector ``d`` with standard errors ``s``. Each channel's error is
raised to a relative floor for its component:
``s = max(error, floor[component] * |value|)`` (a floor on the relative error;
common practice, no source). Values are in the file's normalisation (per
ampere), SI.

The contract of the gated file is docs/data-model.md, "Gated sounding file".
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import input_error
from ..io.schema import check_usable_gates
from .settings import FLOOR_COMPONENTS, parse_floor

__all__ = ["DEFAULT_FLOOR", "StationData", "parse_floors", "station_data", "check_sounding"]

#: Default relative error floor per component (3 %; common practice, no source).
DEFAULT_FLOOR = 0.03

_REQUIRED = ("value", "error", "usable", "gate_open", "gate_close", "gate_centre", "component",
             "rx_x0", "rx_y0", "rx_x1", "rx_y1")


def parse_floors(spec) -> dict:
    """Relative error floors per component.

    ``spec`` is a float (all components), a dict ``{component: floor}``, or a
    string ``"0.03"`` / ``"ex=0.05,dbzdt=0.03"`` (others keep the default); read by
    :func:`tem.invert.settings.parse_floor`, the one parser of the floor's text.
    """
    if spec is None:
        return {c: DEFAULT_FLOOR for c in FLOOR_COMPONENTS}
    try:
        value = parse_floor(spec)
    except ValueError as exc:
        raise input_error("error floor", str(exc).splitlines()[0]) from None
    if isinstance(value, dict):
        return {c: value.get(c, DEFAULT_FLOOR) for c in FLOOR_COMPONENTS}
    return {c: value for c in FLOOR_COMPONENTS}


def hankel_tolerance_for(floors, components) -> float:
    """The forward accuracy an inversion of these data needs: the Hankel filter test's
    tolerance (:class:`tem.forward.Simulation`), 1/30 of the smallest relative error
    floor of the station's components, kept within 1e-4 (the modeller's own default)
    and 1e-3.

    A relative modelling error e on data whose standard errors are at least a fraction f
    of the value moves each datum by at most e/f standard errors; at e = f/30 that is
    0.033 of a standard error, which changes the chi-square per datum by about 0.001.
    Keeping modelling errors well below data errors is common practice, no source. With
    the 3 % default floor the short filter (key_101_2012) is accepted where it agrees
    with the long one to 1e-3: about 1.4 times faster per station on the demo with the
    same models (docs/inversion.md).
    """
    f = min((float(floors[c]) for c in components), default=0.0)
    return float(np.clip(f / 30.0, 1e-4, 1e-3))


@dataclass
class StationData:
    """One station's joint data vector and its forward problem.

    Attributes
    ----------
    station : str
    x, y, z : float, m
    d_obs, std : ndarray (N,)
        Usable values and standard errors (after the floor), per ampere, SI.
    mask : ndarray (n_channel, n_gate), bool
        Which (channel, gate) entries are in ``d_obs`` (row-major order).
    component : ndarray (N,) of str
        Component of each datum.
    channel : ndarray (N,) of int
    gate_centre : ndarray (n_gate,), s
    sim : tem.forward.Simulation
        Forward simulation of all channels and gates.
    file : str or None
    """

    station: str
    x: float
    y: float
    z: float
    d_obs: np.ndarray
    std: np.ndarray
    mask: np.ndarray
    component: np.ndarray
    channel: np.ndarray
    gate_centre: np.ndarray
    channel_component: np.ndarray
    sim: object
    file: str | None = None

    @property
    def n_data(self) -> int:
        return int(self.d_obs.size)

    def predict(self, resistivity, thickness):
        """Predicted usable data (N,) of a layered model."""
        from ..forward import LayeredModel

        d = self.sim.predict(LayeredModel(thickness=thickness, resistivity=resistivity))
        return np.asarray(d)[self.mask]

    def predict_many(self, resistivity, thickness):
        """Predicted usable data (S, N) of S models with the same layer count (rows)."""
        d = self.sim.predict_many(resistivity, thickness)
        return np.asarray(d)[:, self.mask]

    def jacobian(self, resistivity, thickness, with_thickness=False):
        """Predicted data (N,) and Jacobian (N, P) with respect to ln rho (then ln h)."""
        from ..forward import LayeredModel

        d, J = self.sim.jacobian(LayeredModel(thickness=thickness, resistivity=resistivity),
                                 thickness=with_thickness)
        return np.asarray(d)[self.mask], np.asarray(J)[self.mask]


def check_sounding(ds, file=None):
    """Check a gated-sounding Dataset for what the inversion needs.

    Raises :class:`tem.errors.TemInputError` (one line, naming file and field)
    for missing variables, an inconsistent gate table or geometry.
    """
    for name in _REQUIRED:
        if name not in ds.variables:
            raise input_error(name, "required variable missing from the gated sounding", file)
    value = np.asarray(ds["value"].values, float)
    if value.ndim != 2:
        raise input_error("value", f"expected dims (channel, gate), got {ds['value'].dims}", file)
    nch, ng = value.shape
    for name in ("error", "usable"):
        if ds[name].shape != value.shape:
            raise input_error(name, f"shape {ds[name].shape} differs from value {value.shape}", file)
    go = np.asarray(ds["gate_open"].values, float)
    gc = np.asarray(ds["gate_close"].values, float)
    if go.shape != (ng,) or gc.shape != (ng,):
        raise input_error("gate_open", f"gate table length differs from {ng} gates", file)
    from ..forward.sounding import response_of

    _, sampling = response_of(ds.attrs, file)
    if not (np.all(np.isfinite(go)) and np.all(np.isfinite(gc))):
        raise input_error("gate_close", "gate times must be finite (s)", file)
    if sampling == "point":
        t = np.asarray(ds["gate_centre"].values, float)
        if np.any(t <= 0) or np.any(np.diff(t) <= 0):
            raise input_error("gate_centre", "point times must be positive and increasing (s)", file)
    elif np.any(go < 0) or np.any(gc <= go):
        raise input_error("gate_close", "every gate needs 0 <= open < close (s)", file)
    comps = [str(c) for c in np.asarray(ds["component"].values).ravel()]
    if len(comps) != nch:
        raise input_error("component", f"{len(comps)} components for {nch} channels", file)
    for c in comps:
        if c not in FLOOR_COMPONENTS:
            raise input_error("component", f"unknown component {c!r}; valid: "
                              f"{', '.join(FLOOR_COMPONENTS)}", file)
    rx = np.array([np.asarray(ds[k].values, float) for k in ("rx_x0", "rx_y0", "rx_x1", "rx_y1")])
    if rx.shape != (4, nch) or not np.all(np.isfinite(rx)):
        raise input_error("rx_x0", "receiver coordinates must be finite, one set per channel", file)
    for i, c in enumerate(comps):
        if not c.startswith("e") and (rx[0, i] != rx[2, i] or rx[1, i] != rx[3, i]):
            raise input_error("rx_x1", f"channel {i} ({c}): coil with two different ends", file)
    pts = np.asarray(ds.attrs.get("tx_points", []), float).ravel()
    kind = str(ds.attrs.get("tx_kind", ""))
    if kind not in ("wire", "loop"):
        raise input_error("tx_kind", f"expected 'wire' or 'loop', got {kind!r}", file)
    if pts.size < 4 or pts.size % 2 or not np.all(np.isfinite(pts)):
        raise input_error("tx_points", "need finite x,y pairs (at least two points)", file)
    if kind == "wire":
        xy = pts.reshape(-1, 2)
        seg = np.diff(xy, axis=0)
        if np.any(np.hypot(seg[:, 0], seg[:, 1]) <= 0):
            raise input_error("tx_points", "wire has a zero-length segment", file)
        # a receiver on the wire has no finite field: reject
        for i in range(nch):
            for (px, py) in ((rx[0, i], rx[1, i]), (rx[2, i], rx[3, i])):
                if _dist_to_polyline(np.array([px, py]), xy) < 1.0:
                    raise input_error("rx_x0", f"channel {i}: receiver within 1 m of the transmitter wire", file)
    return value.shape


def _dist_to_polyline(p, xy):
    a, b = xy[:-1], xy[1:]
    d = b - a
    l2 = np.sum(d * d, axis=1)
    s = np.clip(np.sum((p - a) * d, axis=1) / l2, 0.0, 1.0)
    q = a + s[:, None] * d
    return float(np.min(np.hypot(*(p - q).T)))


def station_data(ds, floors=None, file=None, build_simulation=True) -> StationData:
    """Assemble one station's data vector, errors and forward simulation.

    Parameters
    ----------
    ds : xarray.Dataset
        Gated sounding (docs/data-model.md).
    floors : float, dict or str, optional
        Relative error floors per component (see :func:`parse_floors`).
    file : str, optional
        File name for error messages.

    Raises
    ------
    TemInputError
        No usable gate, all errors zero, inconsistent gates or geometry.
    """
    fl = parse_floors(floors)
    check_sounding(ds, file)
    value = np.asarray(ds["value"].values, float)
    error = np.asarray(ds["error"].values, float)
    usable = np.asarray(ds["usable"].values).astype(bool)
    comps = np.array([str(c) for c in np.asarray(ds["component"].values).ravel()])
    check_usable_gates(value, error, usable, comps, file)
    mask = usable.copy()
    if not mask.any():
        raise input_error("usable", "no usable gates (all flagged)", file)
    if np.all(error[mask] == 0):
        raise input_error("error", "all standard errors of usable gates are zero", file)
    floor = np.array([fl[c] for c in comps])[:, None] * np.abs(value)
    std = np.maximum(error, floor)
    mask &= std > 0     # a zero error with a zero floor carries no usable weight
    if not mask.any():
        raise input_error("error", "every usable gate has a zero error and a zero floor", file)
    ch_idx = np.broadcast_to(np.arange(value.shape[0])[:, None], value.shape)
    sim = None
    if build_simulation:
        from ..forward import Simulation
        try:
            sim = Simulation.from_sounding(ds, hankel_tolerance=hankel_tolerance_for(fl, set(comps)))
        except ValueError as exc:
            raise input_error("geometry", str(exc).splitlines()[0] if str(exc) else "inconsistent", file) from None
    return StationData(
        station=str(ds.attrs.get("station", file or "?")),
        x=float(ds.attrs.get("x", np.nan)), y=float(ds.attrs.get("y", np.nan)),
        z=float(ds.attrs.get("z", 0.0)),
        d_obs=value[mask], std=std[mask], mask=mask, component=np.broadcast_to(comps[:, None], value.shape)[mask],
        channel=ch_idx[mask], gate_centre=np.asarray(ds["gate_centre"].values, float),
        channel_component=comps, sim=sim, file=None if file is None else str(file))


def station_data_from_arrays(sim, value, error, components, station="synthetic", x=0.0, y=0.0,
                             z=0.0, gate_centre=None, usable=None, floors=None) -> StationData:
    """A :class:`StationData` from arrays and a ready :class:`tem.forward.Simulation`.

    For synthetic studies and tests; ``value``/``error`` have shape
    (n_channel, n_gate) in the simulation's receiver order.
    """
    fl = parse_floors(floors)
    value = np.asarray(value, float)
    error = np.asarray(error, float)
    comps = np.array([str(c) for c in components])
    usable = np.ones(value.shape, bool) if usable is None else np.asarray(usable, bool)
    std = np.maximum(error, np.array([fl[c] for c in comps])[:, None] * np.abs(value))
    mask = usable & np.isfinite(value) & (std > 0)
    if not mask.any():
        raise input_error("usable", "no usable gates")
    ch_idx = np.broadcast_to(np.arange(value.shape[0])[:, None], value.shape)
    if gate_centre is None:
        gate_centre = np.arange(value.shape[1], dtype=float)
    return StationData(station=str(station), x=float(x), y=float(y), z=float(z),
                       d_obs=value[mask], std=std[mask], mask=mask,
                       component=np.broadcast_to(comps[:, None], value.shape)[mask],
                       channel=ch_idx[mask], gate_centre=np.asarray(gate_centre, float),
                       channel_component=comps, sim=sim)


__all__ += ["station_data_from_arrays", "hankel_tolerance_for"]
