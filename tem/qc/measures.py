"""Per-station and channel QC measures from the stacked and gated products (pure functions).

Everything here reads the two product files of a station (docs/data-model.md,
docs/stacking.md section 7) and returns numbers in SI units; nothing is
re-read from the raw recordings. The measures (docs/qc.md):

* noise floor (per A) and how it falls with the periods stacked (halves,
  quarters and eighths of the record; -0.5 for random noise), last usable time;
* periods stacked and rejected, outlier samples (spikes), samples at the
  positive and the negative full-scale rail and the windows holding them;
* offset, drift and mains at the logger (V, V/s), half-cycle asymmetry;
* timing of the cut against the switch-offs on the current channel;
* polarity: the on-time response against the transmitter's primary field.
  During the on-time of a grounded wire the electric field settles to the
  DC field of its electrodes, whose direction at a receiver does not depend
  on the earth's resistivity for a half-space (Telford, Geldart & Sheriff
  1990, Applied Geophysics, 2nd ed., section 8.2, from memory); and the
  change of Bz over a switch-on is the primary field of the wire or loop
  (Biot-Savart; e.g. Griffiths 1999, Introduction to Electrodynamics, 3rd
  ed., eq. 5.35, from memory) because the DC currents in a horizontally
  layered earth, spreading from point electrodes, have no vertical field
  at the surface. A negative ratio of measured to expected response means
  the channel is wired the other way round.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from ..forward.kernel import MU0

__all__ = ["ChannelMeasures", "channel_measures", "tx_offset", "primary_bz", "dc_field_dipole",
           "polarity_ratio"]


@dataclass(frozen=True)
class ChannelMeasures:
    """QC measures of one channel of one station (SI units; NaN: not measured).

    Attributes
    ----------
    station, component, unit : str
        Station id, receiver component and the unit of its normalised data.
    offset_m : float
        Distance from the receiver to the nearest transmitter segment, m
        (0 inside a loop).
    dead : bool
        Flat record (peak-to-peak <= 1 count) over at least half of its
        half-period windows.
    flat_fraction : float
        Share of half-period windows that are flat (the channel dropped out).
    dropout_fraction : float
        Share of samples in short constant runs (4 ms or more) within windows
        that are not flat: brief drop-outs the stack cannot reject.
    noise_floor : float
        Median per-sample standard error over the late off-time, unit per A.
    noise_slope : float
        d log(noise) / d log(periods stacked) from halves, quarters and
        eighths of the record (random noise: -0.5).
    last_usable : float
        End of the first run of usable gates, s.
    usable_gates, gates : int
        Usable and total gates.
    duration : float
        Record stacked, s.
    periods_total, periods_used, rejected_noisy, rejected_bad : int
        Three-window estimates (periods) in all, used, and rejected whole.
    outlier_fraction : float
        Share of the used estimate-samples rejected as outliers (spikes).
    clipped_high, clipped_low, windows_clipped, windows : int
        Raw samples at the positive and negative rail, half-period windows
        holding any, and windows in all.
    offset, drift, wander : float
        Baseline at the logger: median (V), slope (V/s), rms about the line (V).
    mains : float
        Mains fundamental amplitude at the logger, V.
    full_scale : float
        Digitiser full scale at the logger, V.
    asymmetry, asymmetry_error : float
        Half-cycle asymmetry |a| in P - N = a (P + N) over the off-time (P, N:
        positive and sign-corrected negative half-cycles), and its standard error.
    polarity, polarity_snr : float
        Measured over expected on-time response (see module docstring):
        positive if wired as the survey says, negative if reversed; for E
        the ratio is an apparent DC resistivity (ohm-m). ``polarity_snr``:
        the measured response over its standard error.
    dof : float
        Degrees of freedom of the stack's error bars (batches and their
        correlation; :func:`tem.stack.batchvar.effective_dof`): a short record
        has few, and its error bars are themselves uncertain by about
        1/sqrt(2 dof).
    mains_on_line : float
        Frequency (Hz) of a harmonic of mains off its nominal frequency that lies on a
        line of the transmitter's response and shows in the stack (it stacks with the
        signal and cannot be removed; :func:`tem.stack.mains.on_line`), NaN if none.
    batches : int
        Batches the error bars were estimated from (fewer than the
        estimates when the stack's ``batches`` setting limits them).
    cut_offset, cut_residual : float
        Switch-offs detected on the current channel minus the switch time of
        the cut, and the rms scatter of the detected switch-offs, s.
    """

    station: str
    component: str
    unit: str
    offset_m: float
    dead: bool
    noise_floor: float
    noise_slope: float
    last_usable: float
    usable_gates: int
    gates: int
    duration: float
    periods_total: int
    periods_used: int
    rejected_noisy: int
    rejected_bad: int
    outlier_fraction: float
    clipped_high: int
    clipped_low: int
    windows_clipped: int
    windows: int
    offset: float
    drift: float
    wander: float
    mains: float
    full_scale: float
    asymmetry: float
    asymmetry_error: float
    polarity: float
    polarity_snr: float
    cut_offset: float
    cut_residual: float
    flat_fraction: float = float("nan")
    dropout_fraction: float = float("nan")
    dof: float = float("nan")
    batches: int = 0
    mains_on_line: float = float("nan")

    def as_dict(self) -> dict:
        return asdict(self)


# ---------------------------------------------------------------------------- geometry
def _segments(stacked):
    from ..rhoa.late_time import tx_segments
    return tx_segments(str(stacked.attrs["tx_kind"]), np.asarray(stacked.attrs["tx_points"]))


def _receiver_xy(stacked, c):
    return np.array([0.5 * (float(stacked["rx_x0"].values[c]) + float(stacked["rx_x1"].values[c])),
                     0.5 * (float(stacked["rx_y0"].values[c]) + float(stacked["rx_y1"].values[c]))])


def tx_offset(stacked, c: int) -> float:
    """Distance (m) from receiver ``c`` to the nearest transmitter segment; 0 inside a loop."""
    a, b = _segments(stacked)
    p = _receiver_xy(stacked, c)
    d = b - a
    s = np.clip(np.einsum("ij,ij->i", p - a, d) / np.einsum("ij,ij->i", d, d), 0.0, 1.0)
    dist = float(np.min(np.hypot(*(a + s[:, None] * d - p).T)))
    if str(stacked.attrs["tx_kind"]) == "loop":
        from matplotlib.path import Path as _Path
        if _Path(np.asarray(stacked.attrs["tx_points"], float).reshape(-1, 2)).contains_point(p):
            return 0.0
    return dist


def primary_bz(a, b, p, current: float = 1.0) -> float:
    """Vertical magnetic field (T) at surface point p of straight segments a->b carrying current.

    Biot-Savart for a finite straight segment, all in the plane z = 0:
    Bz = mu0 I / (4 pi h) (cos alpha_1 - cos alpha_2) with the sign of
    (u x (p - a))_z, u the current direction and h the distance to the line.
    """
    a, b = np.atleast_2d(a).astype(float), np.atleast_2d(b).astype(float)
    p = np.asarray(p, float)
    total = 0.0
    for ai, bi in zip(a, b):
        length = math.hypot(*(bi - ai))
        u = (bi - ai) / length
        ra, rb = p - ai, p - bi
        cross = u[0] * ra[1] - u[1] * ra[0]
        if abs(cross) < 1e-9 * max(length, 1.0):
            continue                               # on the line of the segment: no Bz
        ca = float(u @ ra) / math.hypot(*ra)
        cb = float(u @ rb) / math.hypot(*rb)
        total += MU0 * current / (4.0 * math.pi) * (ca - cb) / cross
    return total


def dc_field_dipole(a, b, p0, p1, current: float = 1.0, rho: float = 1.0) -> float:
    """DC electric field (V/m) along a receiver dipole p0 -> p1 of a grounded wire A -> B.

    Point electrodes on a half-space of resistivity ``rho``, potential
    V = rho I / (2 pi R), +I entering the ground at B and leaving at A
    (the current runs A -> B in the wire); E = (V(p0) - V(p1)) / |p1 - p0|.
    """
    a, b, p0, p1 = (np.asarray(v, float) for v in (a, b, p0, p1))

    def pot(p):
        rb, ra = math.hypot(*(p - b)), math.hypot(*(p - a))
        return rho * current / (2.0 * math.pi) * (1.0 / rb - 1.0 / ra)
    return (pot(p0) - pot(p1)) / math.hypot(*(p1 - p0))


def _expected_on_time(stacked, c):
    """Expected on-time response of +1 A: E per ohm-m (V/m/A) or change of Bz (T/A); NaN if none."""
    comp = str(stacked["component"].values[c])
    kind = str(stacked.attrs["tx_kind"])
    pts = np.asarray(stacked.attrs["tx_points"], float).reshape(-1, 2)
    if comp in ("ex", "ey"):
        if kind != "wire":
            return float("nan")                   # a loop has no DC electric field
        p0 = np.array([float(stacked["rx_x0"].values[c]), float(stacked["rx_y0"].values[c])])
        p1 = np.array([float(stacked["rx_x1"].values[c]), float(stacked["rx_y1"].values[c])])
        if not math.hypot(*(p1 - p0)) > 0:
            return float("nan")
        return dc_field_dipole(pts[0], pts[-1], p0, p1)
    if comp == "dbzdt":
        a, b = _segments(stacked)
        return primary_bz(a, b, _receiver_xy(stacked, c))
    return float("nan")


def polarity_ratio(stacked, c: int, result=None):
    """(measured / expected on-time response, measured / its error) of channel ``c``.

    The stacked half-period after a positive switch-off holds the following
    on-time at -1 A (per ampere). E channels: the mean over the last quarter
    of the steady on-time against the DC field per ohm-m (the ratio is an
    apparent DC resistivity, ohm-m). dB/dt channels: the integral over the
    switch-on and the on-time (the change of Bz) against the primary Bz.
    Needs an off-time for dB/dt (duty < 1). NaN where nothing is expected.
    """
    from ..stack.stacking import StackResult
    expected = _expected_on_time(stacked, c)
    nan = (float("nan"), float("nan"))
    if not (np.isfinite(expected) and expected != 0):
        return nan
    t = stacked["time"].values
    dt = float(t[1] - t[0])
    hp = 0.5 / float(stacked.attrs["base_frequency"])
    t_off = float(stacked.attrs.get("off_time", 0.0))
    t_on0 = t_off + float(stacked.attrs.get("ramp_on", 0.0))
    t_end = hp - float(stacked.attrs.get("ramp_off", 0.0)) - 2.0 * dt
    comp = str(stacked["component"].values[c])
    if comp == "dbzdt":
        if t_off <= 2 * dt:
            return nan
        sel = (t >= t_off - 2.0 * dt) & (t <= t_end)
        w = np.where(sel, dt, 0.0)                 # integral: sum of samples times dt
    else:
        sel = (t >= t_on0 + 0.75 * (t_end - t_on0)) & (t <= t_end)
        w = np.where(sel, 1.0 / max(sel.sum(), 1), 0.0)
    if not sel.any():
        return nan
    res = result if result is not None else StackResult.from_dataset(stacked, c)
    v = float(w @ np.nan_to_num(res.value))
    e = float(res.linear_error(w))
    return v / (-expected), (abs(v) / e if e > 0 else float("inf"))


# ---------------------------------------------------------------------------- measures
def _num(ds, name, c, default=float("nan")):
    return float(ds[name].values[c]) if name in ds else default


def _dof(res):
    """Degrees of freedom of a stack's error bars (NaN without batches)."""
    from ..stack.batchvar import effective_dof
    nb = int(res.influence.shape[0])
    if nb < 2:
        return float("nan")
    rho = np.asarray(res.lag_corr, float)
    return float(effective_dof(rho[0] if rho.ndim == 2 and rho.size else rho.ravel(), nb))


def _int(ds, name, c):
    return int(ds[name].values[c]) if name in ds else 0


def channel_measures(stacked, gated=None) -> list:
    """One :class:`ChannelMeasures` per channel of a station's stacked (and gated) product."""
    from ..stack.stacking import StackResult
    out = []
    sid = str(stacked.attrs["station"])
    m = stacked.sizes["time"]
    for c in range(stacked.sizes["channel"]):
        res = StackResult.from_dataset(stacked, c)
        used = _int(stacked, "transients_used", c)
        comp = str(stacked["component"].values[c])
        g = {}
        if gated is not None:
            gc = [str(x) for x in gated["component"].values].index(comp)
            g = {"noise_floor": float(gated["noise_floor"].values[gc]),
                 "noise_slope": _num(gated, "noise_slope", gc),
                 "last_usable": _num(gated, "last_usable", gc),
                 "usable_gates": int(np.sum(gated["usable"].values[gc])),
                 "gates": int(gated.sizes["gate"])}
            if "last_usable" not in gated:
                from ..gate.windows import last_usable_time
                g["last_usable"] = last_usable_time(gated["gate_close"].values,
                                                    gated["usable"].values[gc])
        pol, pol_snr = polarity_ratio(stacked, c, res)
        wr = np.asarray(res.window_rails)
        out.append(ChannelMeasures(
            station=sid, component=comp, unit=str(stacked["unit"].values[c]),
            offset_m=tx_offset(stacked, c), dead=bool(stacked["dead"].values[c]),
            noise_floor=g.get("noise_floor", float("nan")),
            noise_slope=g.get("noise_slope", float("nan")),
            last_usable=g.get("last_usable", float("nan")),
            usable_gates=g.get("usable_gates", 0), gates=g.get("gates", 0),
            duration=_num(stacked, "duration", c,
                          _int(stacked, "transients_total", c) * 0.5
                          / float(stacked.attrs["base_frequency"])),
            periods_total=_int(stacked, "transients_total", c), periods_used=used,
            rejected_noisy=_int(stacked, "rejected_noisy", c),
            rejected_bad=_int(stacked, "rejected_bad_samples", c),
            outlier_fraction=_int(stacked, "samples_outlier", c) / max(used * m, 1),
            clipped_high=_int(stacked, "clipped_high", c),
            clipped_low=_int(stacked, "clipped_low", c),
            windows_clipped=_int(stacked, "windows_clipped", c),
            windows=int(wr.shape[0]) if wr.size else _int(stacked, "transients_total", c) + 2,
            offset=_num(stacked, "offset", c), drift=_num(stacked, "drift", c),
            wander=_num(stacked, "wander", c), mains=_num(stacked, "mains", c),
            full_scale=_num(stacked, "full_scale", c), asymmetry=_num(stacked, "asymmetry", c),
            asymmetry_error=_num(stacked, "asymmetry_error", c),
            polarity=pol, polarity_snr=pol_snr,
            cut_offset=float(stacked.attrs.get("cut_offset", float("nan"))),
            cut_residual=float(stacked.attrs.get("cut_residual", float("nan"))),
            flat_fraction=_num(stacked, "flat_fraction", c),
            dropout_fraction=_num(stacked, "dropout_fraction", c),
            dof=_dof(res), batches=int(res.influence.shape[0]),
            mains_on_line=_num(stacked, "mains_on_line", c)))
    return out
