"""Apparent resistivity of TEM soundings and the diffusion pseudo-depth.

Three conversions of a decay into resistivity, all pure (arrays in, arrays
out, no files):

* **Late-time** closed forms (Spies & Frischknecht 1991; re-derived from the
  half-space asymptotes of Ward & Hohmann 1988): central/in-loop dBz/dt and
  B_z, grounded wire (or HED) dBz/dt and E along the receiver dipole. They
  assume a step-off response at u = theta*r << 1; each value carries a
  validity flag computed from its own rho_a.
* **All-time**: for each gate the half-space resistivity whose full response
  (same geometry, waveform, ramps, gate windows and receiver filter, from
  :mod:`tem.forward`) equals the datum. The response of a half-space is not
  monotonic in resistivity for E and dB/dt (Spies & Eggers 1986), so a gate
  may have two roots: both are returned, the gate is flagged, and a single
  curve is chosen as the smoothest path through the roots.
* **Pseudo-depth**: the diffusion depth sqrt(2 t rho/mu0) = 1261.566
  sqrt(rho t) m (Ward & Hohmann 1988).

Sign conventions are those of docs/data-model.md: loops anticlockwise seen
from above for positive current, wire current from A to B, step-off data
measured from the end of the switch-off ramp, values per ampere.

Geometry of the late-time forms (derived here, see
docs/apparent-resistivity.md): at late time each current element I ds at p
contributes the same E along the wire whatever its distance, so a wire of any
shape acts through I (B - A) . e (e: receiver direction); and its dBz/dt
contribution is proportional to (ds x (r - p))_z, the element length times the
signed perpendicular distance from its line to the receiver. Summed over the
wire this is the "effective moment" M = I S / 2 with S = sum_k (B_k - A_k) x
(r - A_k); for a closed loop S = 2 * area wherever the receiver is, and for
a straight x-directed wire S = L y (the late-time HED asymptote of Ward &
Hohmann 1988: only the perpendicular distance matters).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import input_error

__all__ = [
    "MU0",
    "U_LIMIT",
    "U_LIMIT_REF",
    "SLOPE_LIMIT",
    "decay_slope",
    "FLAGS",
    "flag_text",
    "diffusion_depth",
    "late_time_dbzdt",
    "late_time_bz",
    "late_time_e",
    "late_time_wire_dbzdt",
    "tx_segments",
    "effective_moment",
    "projected_current_length",
    "perpendicular_distance",
    "max_distance",
    "late_time_rhoa",
    "LateTimeResult",
]

MU0 = 4e-7 * np.pi  # H/m, the value empymod uses (Werthmueller 2017)

#: Late-time validity limits on u = theta(rho_a) * r_max, with theta computed
#: from the returned rho_a itself: below them the late-time rho_a of a
#: half-space is within 5 % of its resistivity. Derived from the shape
#: functions of Ward & Hohmann (1988): rho_a/rho = R(u)^-p with
#: R the ratio of exact to asymptotic response (p = 2 for E, 2/3 for dB/dt and
#: B), solved for rho_a/rho = 1.05 and mapped to u_a = u R(u)^(p/2). Exact
#: roots 0.1970 (E), 0.3129 (dB/dt), 0.4055 (B); rounded down here. (Bounding
#: the *response* R(u) within 5 % instead gives u < 0.293/0.268/0.347, which
#: for E means rho_a within 11 %.)
U_LIMIT = {"e": 0.19, "dbdt": 0.31, "b": 0.40}

#: The same limits on u = theta(rho) * r_max for a reference resistivity
#: rho (the all-time rho_a, or the truth): exact roots 0.2019 (E), 0.3206
#: (dB/dt), 0.4155 (B), rounded down.
U_LIMIT_REF = {"e": 0.20, "dbdt": 0.32, "b": 0.41}

#: Decay-slope limits (d ln|value|/d ln t) for late-time validity without a
#: reference resistivity: halfway between early time (0) and the late-time
#: half-space slopes -1.5 (E, B) and -2.5 (dB/dt). Common practice, no source.
SLOPE_LIMIT = {"e": -0.75, "dbdt": -1.25, "b": -0.75}

#: Gate flags (bit values) and their one-word names used in tables.
FLAGS = {
    "unusable": 1,       # the input marks the gate not usable (converted anyway)
    "bad-value": 2,      # datum zero or not finite, or its error not finite/negative
    "wrong-sign": 4,     # datum has the sign no half-space can produce
    "no-root": 8,        # no half-space in the search range reproduces the datum
    "two-branches": 16,  # half-space response not monotonic: two (or more) roots
    "late-invalid": 32,  # late-time condition u < U_LIMIT fails
    "no-formula": 64,    # no late-time formula for this component and source
}


def flag_text(bits) -> str:
    """Names of the flags set in ``bits`` joined by ``;`` (empty if none)."""
    bits = int(bits)
    return ";".join(name for name, b in FLAGS.items() if bits & b)


# ------------------------------------------------------------------ depth
def diffusion_depth(rho, t):
    """Diffusion depth sqrt(2 t rho / mu0) = 1261.566 sqrt(rho t).

    Parameters
    ----------
    rho : array_like
        Resistivity, ohm-m.
    t : array_like
        Time after switch-off, s.

    Returns
    -------
    ndarray
        Depth, m (NaN where rho is NaN). Ward & Hohmann (1988), from memory.
    """
    rho = np.asarray(rho, float)
    t = np.asarray(t, float)
    with np.errstate(invalid="ignore"):
        return np.sqrt(2.0 * t * rho / MU0)


# ---------------------------------------------------- late-time formulas
def _check_times(t, shape):
    t = np.broadcast_to(np.asarray(t, float), shape)
    if not np.all(np.isfinite(t) & (t > 0)):
        raise input_error("t", "times must be positive and finite (s after switch-off)")
    return t


def _signed_magnitude(value, expected_sign, field):
    """|value| after checking that every value has the expected sign."""
    value = np.asarray(value, float)
    bad = ~np.isfinite(value) | (value * expected_sign <= 0)
    if np.any(bad):
        n = int(np.count_nonzero(bad))
        want = "positive" if np.all(expected_sign > 0) else (
            "negative" if np.all(expected_sign < 0) else "of the source's sign")
        raise input_error(field, f"{n} value(s) zero, not finite or not {want}; "
                          "a late-time apparent resistivity needs the step-off sign")
    return np.abs(value)


def _nonzero(x, field):
    x = np.asarray(x, float)
    if not np.all(np.isfinite(x) & (x != 0)):
        raise input_error(field, "must be finite and non-zero")
    return x


def late_time_dbzdt(dbzdt, t, moment):
    """Late-time apparent resistivity from the step-off dBz/dt of a loop.

    rho_a = (mu0 / (4 pi t)) [2 mu0 |M| / (5 t |dBz/dt|)]^(2/3)
    (Spies & Frischknecht 1991, "Electromagnetic sounding", in Nabighian (ed.),
    EM Methods in Applied Geophysics vol. 2, SEG; loop dB/dt form, from memory;
    re-derived from the late-time asymptote of Ward & Hohmann 1988).

    Parameters
    ----------
    dbzdt : array_like
        dBz/dt, T/s (z up). Must have the step-off sign, opposite to M.
    t : array_like
        Time after switch-off, s.
    moment : float or array_like
        Signed moment M = I * area * turns, A m^2 (positive for current
        anticlockwise seen from above). For any source use
        :func:`effective_moment`.

    Returns
    -------
    ndarray
        Apparent resistivity, ohm-m.
    """
    m = _nonzero(moment, "moment")
    mag = _signed_magnitude(dbzdt, -np.sign(m), "dbzdt")
    t = _check_times(t, mag.shape)
    return MU0 / (4 * np.pi * t) * (2 * MU0 * np.abs(m) / (5 * t * mag)) ** (2.0 / 3.0)


def late_time_bz(bz, t, moment):
    """Late-time apparent resistivity from the step-off B_z of a loop.

    rho_a = (mu0 / (4 pi t)) [4 mu0 |M| / (15 |B_z|)]^(2/3) (after Spies &
    Frischknecht 1991, from memory; re-derived from the late-time asymptote of
    Ward & Hohmann 1988).

    Parameters
    ----------
    bz : array_like
        B_z, T (z up); must have the sign of M.
    t : array_like
        Time after switch-off, s.
    moment : float or array_like
        Signed moment, A m^2 (see :func:`late_time_dbzdt`).

    Returns
    -------
    ndarray
        Apparent resistivity, ohm-m.
    """
    m = _nonzero(moment, "moment")
    mag = _signed_magnitude(bz, np.sign(m), "bz")
    t = _check_times(t, mag.shape)
    return MU0 / (4 * np.pi * t) * (4 * MU0 * np.abs(m) / (15 * mag)) ** (2.0 / 3.0)


def late_time_e(e, t, current_length):
    """Late-time apparent resistivity from the step-off E of a grounded wire.

    rho_a = mu0^3 (I L)^2 / (144 pi^3 t^3 E^2) (after Spies & Frischknecht
    1991, from memory; re-derived from the late-time HED asymptote of Ward &
    Hohmann 1988). At late time E does not depend on the
    receiver position.

    Parameters
    ----------
    e : array_like
        E along the receiver direction, V/m; must have the sign of I L.
    t : array_like
        Time after switch-off, s.
    current_length : float or array_like
        I L projected on the receiver direction, A m (I (B - A) . e; see
        :func:`projected_current_length`).

    Returns
    -------
    ndarray
        Apparent resistivity, ohm-m.
    """
    il = _nonzero(current_length, "current_length")
    mag = _signed_magnitude(e, np.sign(il), "e")
    t = _check_times(t, mag.shape)
    return MU0**3 * il**2 / (144 * np.pi**3 * t**3 * mag**2)


def late_time_wire_dbzdt(dbzdt, t, current_length, y):
    """Late-time apparent resistivity from the dBz/dt of a straight wire.

    rho_a = (mu0 / (4 pi t)) [mu0 I L |y| / (5 t |dBz/dt|)]^(2/3)
    (after Spies & Frischknecht 1991, from memory; re-derived from the
    late-time HED asymptote of Ward & Hohmann 1988): the loop form with
    M = I L y / 2.

    Parameters
    ----------
    dbzdt : array_like
        dBz/dt, T/s (z up); its step-off sign is that of -I L y.
    t : array_like
        Time after switch-off, s.
    current_length : float
        I L, A m, current flowing along the wire direction.
    y : float
        Signed perpendicular distance from the wire line to the receiver, m,
        positive to the left of the current direction
        (:func:`perpendicular_distance`).

    Returns
    -------
    ndarray
        Apparent resistivity, ohm-m.
    """
    return late_time_dbzdt(dbzdt, t, 0.5 * np.asarray(current_length, float) * np.asarray(y, float))


# ------------------------------------------------------------- geometry
def tx_segments(tx_kind, tx_points):
    """Straight segments of a transmitter.

    Parameters
    ----------
    tx_kind : {"wire", "loop"}
        A wire is an open polyline from A (first point) to B (last point); a
        loop is closed (last point joins the first).
    tx_points : array_like
        Flat list x0, y0, x1, y1, ... or an (n, 2) array, m.

    Returns
    -------
    a, b : ndarray, shape (n_segments, 2)
        Segment start and end points, m, in the current direction.
    """
    if tx_kind not in ("wire", "loop"):
        raise input_error("tx_kind", f"unknown transmitter kind {tx_kind!r}; valid: wire, loop")
    try:
        pts = np.asarray(tx_points, float).reshape(-1, 2)
    except (TypeError, ValueError):
        raise input_error("tx_points", "needs pairs of x, y coordinates (m)") from None
    if not np.all(np.isfinite(pts)):
        raise input_error("tx_points", "coordinates must be finite")
    need = 3 if tx_kind == "loop" else 2
    if len(pts) < need:
        raise input_error("tx_points", f"a {tx_kind} needs at least {need} points, got {len(pts)}")
    a = pts
    b = np.roll(pts, -1, axis=0)
    if tx_kind == "wire":
        a, b = a[:-1], b[:-1]
    keep = np.hypot(*(b - a).T) > 0
    if not np.any(keep):
        raise input_error("tx_points", "the transmitter has zero length")
    return a[keep], b[keep]


def effective_moment(tx_kind, tx_points, rx_xy, current=1.0):
    """Late-time effective moment M = I S / 2 of any source at a receiver.

    S = sum_k ((B_k - A_k) x (r - A_k))_z over the straight segments: twice
    the signed area of a closed loop (independent of r), L y for a straight
    wire (y: signed perpendicular distance). Then the loop formulas for dBz/dt
    and B_z apply to every source (from the late-time asymptotes of Ward &
    Hohmann 1988, the HED dB/dt form equals the loop form with M -> I L y / 2).

    Parameters
    ----------
    tx_kind, tx_points
        See :func:`tx_segments`.
    rx_xy : array_like, shape (2,)
        Receiver position, m.
    current : float
        Transmitter current, A (1 for per-ampere data).

    Returns
    -------
    float
        Signed effective moment, A m^2.
    """
    a, b = tx_segments(tx_kind, tx_points)
    r = np.asarray(rx_xy, float).reshape(2)
    d = b - a
    q = r - a
    s = np.sum(d[:, 0] * q[:, 1] - d[:, 1] * q[:, 0])
    return 0.5 * current * float(s)


def projected_current_length(tx_kind, tx_points, direction, current=1.0):
    """I (B - A) . e: the late-time source strength seen by an E receiver.

    Parameters
    ----------
    tx_kind, tx_points
        See :func:`tx_segments`. A closed loop gives 0.
    direction : array_like, shape (2,)
        Receiver direction (normalised here).
    current : float
        Transmitter current, A.

    Returns
    -------
    float
        A m.
    """
    a, b = tx_segments(tx_kind, tx_points)
    e = np.asarray(direction, float).reshape(2)
    e = e / np.hypot(*e)
    return current * float(np.sum((b - a) @ e))


def perpendicular_distance(a, b, p):
    """Signed distance from the line through a and b to p, m.

    Positive to the left of the direction a -> b (for a wire along +x, the
    receiver's y).
    """
    a, b, p = (np.asarray(v, float).reshape(2) for v in (a, b, p))
    d = b - a
    length = np.hypot(*d)
    if length == 0:
        raise input_error("tx_points", "the wire has zero length")
    return float((d[0] * (p[1] - a[1]) - d[1] * (p[0] - a[0])) / length)


def max_distance(tx_kind, tx_points, rx_points):
    """Largest distance between a receiver point and the transmitter, m.

    The late-time ratio of a wire is the average of its elements' ratios,
    each decreasing with distance, so u = theta * max_distance is a
    conservative validity measure (exactly the radius for a central receiver
    in a circular loop).
    """
    tx_segments(tx_kind, tx_points)  # validates the geometry
    pts = np.asarray(tx_points, float).reshape(-1, 2)
    rx = np.asarray(rx_points, float).reshape(-1, 2)
    return float(np.max(np.hypot(pts[None, :, 0] - rx[:, None, 0], pts[None, :, 1] - rx[:, None, 1])))


# ------------------------------------------------ late-time, per channel
@dataclass(frozen=True)
class LateTimeResult:
    """Late-time apparent resistivity of one channel (arrays over gates).

    Attributes
    ----------
    rho : ndarray
        Apparent resistivity, ohm-m (NaN where not converted).
    rel_error : ndarray
        One standard error of rho relative to rho (linearised), -.
    u : ndarray
        theta(rho) * r_max, -.
    valid : ndarray of bool
        u < U_LIMIT: within 5 % of a half-space's resistivity.
    flags : ndarray of int
        Bit flags (:data:`FLAGS`).
    """

    rho: np.ndarray
    rel_error: np.ndarray
    u: np.ndarray
    valid: np.ndarray
    flags: np.ndarray


_E_COMPONENTS = {"ex": (1.0, 0.0), "ey": (0.0, 1.0)}


def late_time_rhoa(component, value, t, tx_kind, tx_points, rx, error=None, current=1.0,
                   rho_ref=None, tol=0.05):
    """Late-time apparent resistivity of one channel; bad gates are flagged.

    Validity (flag ``late-invalid`` where it fails; ``valid`` below):

    * with ``rho_ref`` (the all-time apparent resistivity of the same
      datum): |rho_a / rho_ref - 1| < ``tol``. At the all-time root the datum
      *is* the response of the half-space rho_ref under the real waveform,
      ramps, gates and filter, so this says exactly "the late-time formula is
      within tol of that half-space" - including the effect of the periodic
      waveform, which the step-off formulas ignore (on a bipolar waveform
      the late gates near the half-period are biased, and the u test alone
      would miss it);
    * without it: u = theta(rho_a) r_max below :data:`U_LIMIT` *and* the decay
      steeper than :data:`SLOPE_LIMIT` (d ln|value|/d ln t across the gates).
      The slope test is needed because at early times the late-time rho_a is
      so large that its own u is small again (the two-branch non-uniqueness
      of Spies & Eggers 1986); early-time step-off E and dB/dt are nearly constant in
      time (Ward & Hohmann 1988 t -> 0+ limits), late-time ones fall as
      t^-1.5 and t^-2.5. The thresholds halfway between are common practice,
      no source. A single gate has no slope and is judged on u alone.

    Parameters
    ----------
    component : str
        ``ex``, ``ey``, ``dbzdt`` or ``bz`` (others: all gates flagged
        ``no-formula``).
    value : array_like, shape (n_gates,)
        Step-off data, V/m, T/s or T (per ampere if ``current`` is 1).
    t : array_like, shape (n_gates,)
        Gate times after switch-off, s, increasing.
    tx_kind, tx_points
        Transmitter (see :func:`tx_segments`).
    rx : array_like
        Receiver (x0, y0, x1, y1), m: E dipole endpoints, or the coil
        position twice. A point E receiver measures along x (ex) or y (ey).
    error : array_like, optional
        One standard error of ``value``, same unit.
    current : float
        Transmitter current, A.
    rho_ref : array_like, optional
        All-time apparent resistivity per gate for the validity test, ohm-m;
        ``u`` is then computed from it.
    tol : float
        Relative tolerance of the ``rho_ref`` validity test (0.05).

    Returns
    -------
    LateTimeResult
    """
    value = np.asarray(value, float)
    t = _check_times(t, value.shape)
    err = np.full(value.shape, np.nan) if error is None else np.broadcast_to(np.asarray(error, float), value.shape)
    rx = np.asarray(rx, float).reshape(-1)
    if rx.size != 4 or not np.all(np.isfinite(rx)):
        raise input_error("rx_x0 rx_y0 rx_x1 rx_y1", "receiver geometry missing or not finite")
    p0, p1 = rx[:2], rx[2:]
    centre = 0.5 * (p0 + p1)
    r_max = max_distance(tx_kind, tx_points, np.vstack([p0, p1]))
    nan = np.full(value.shape, np.nan)
    flags = np.zeros(value.shape, dtype=np.int64)
    kind = None
    if component in _E_COMPONENTS:
        d = p1 - p0
        direction = d if np.hypot(*d) > 0 else np.array(_E_COMPONENTS[component])
        strength, kind, power = projected_current_length(tx_kind, tx_points, direction, current), "e", 2.0
        sign = np.sign(strength)
    elif component in ("dbzdt", "bz"):
        strength = effective_moment(tx_kind, tx_points, centre, current)
        kind, power = ("dbdt", 2.0 / 3.0) if component == "dbzdt" else ("b", 2.0 / 3.0)
        sign = -np.sign(strength) if component == "dbzdt" else np.sign(strength)
    else:
        strength = 0.0
    a, b = tx_segments(tx_kind, tx_points)
    scale = float(np.sum(np.hypot(*(b - a).T))) * abs(current) * (r_max if kind != "e" else 1.0)
    if kind is None or abs(strength) <= 1e-9 * scale:
        flags |= FLAGS["no-formula"]
        return LateTimeResult(nan, nan.copy(), nan.copy(), np.zeros(value.shape, bool), flags)
    bad = ~np.isfinite(value) | (value == 0) | ~(np.isfinite(err) | (error is None))
    wrong = ~bad & (value * sign < 0)
    flags[bad] |= FLAGS["bad-value"]
    flags[wrong] |= FLAGS["wrong-sign"]
    ok = ~bad & ~wrong
    rho = nan.copy()
    if np.any(ok):
        fn = {"e": late_time_e, "dbdt": late_time_dbzdt, "b": late_time_bz}[kind]
        rho[ok] = fn(value[ok], t[ok], strength)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = power * np.abs(err) / np.abs(value)
        if rho_ref is not None:
            ref = np.broadcast_to(np.asarray(rho_ref, float), value.shape)
            u = np.sqrt(MU0 / (4 * ref * t)) * r_max
            valid = ok & (np.abs(rho / ref - 1) < tol)
        else:
            u = np.sqrt(MU0 / (4 * rho * t)) * r_max
            valid = ok & (u < U_LIMIT[kind]) & (decay_slope(value, t, ok) < SLOPE_LIMIT[kind])
    flags[ok & ~valid] |= FLAGS["late-invalid"]
    return LateTimeResult(rho, np.where(ok, rel, np.nan), u, valid, flags)


def decay_slope(value, t, ok=None):
    """Local log-log slope d ln|value| / d ln t over the usable gates.

    Parameters
    ----------
    value : array_like, shape (n_gates,)
        Data of one sign (any unit).
    t : array_like, shape (n_gates,)
        Increasing times, s.
    ok : array_like of bool, optional
        Gates to use; the others get NaN.

    Returns
    -------
    ndarray
        Slope per gate (-inf where fewer than two usable gates: no test).
    """
    value = np.asarray(value, float)
    t = np.asarray(t, float)
    ok = np.isfinite(value) & (value != 0) if ok is None else np.asarray(ok, bool)
    out = np.full(value.shape, np.nan)
    if ok.sum() < 2:
        out[ok] = -np.inf
        return out
    out[ok] = np.gradient(np.log(np.abs(value[ok])), np.log(t[ok]))
    return out
