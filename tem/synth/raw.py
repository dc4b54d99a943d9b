"""Synthetic field days: raw recordings with realistic noise from the forward engine.

The noise-free transient of each receiver is the forward engine's periodic
(``response="waveform"``) response at the sample times of one half-period,
tiled over the recording with alternating sign. Noise added at the logger
(volts): white and 1/f noise, mains with harmonics and slowly drifting
amplitude and phase, sferic-like spikes, a DC offset, linear and slow
polynomial drift, and digitiser clipping. Everything is seeded.

The Emberline Plateau scenario (fictional) is defined here:
:func:`emberline_survey`.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
from scipy.interpolate import PchipInterpolator

from ..errors import input_error
from ..forward import LayeredModel, Simulation
from ..forward.sounding import survey_lowpass, survey_receiver, survey_source, survey_waveform
from ..io.raw import FORMATS, RawHeader, write_mseed_recording, write_npy_recording
from ..survey import (COIL_COMPONENTS, Channel, Station, Survey, Transmitter, parse_time,
                     seconds_between)

__all__ = ["NoiseSpec", "Faults", "station_transient", "synth_channel", "synth_survey",
           "emberline_survey", "emberline_models", "EMBERLINE_NOISE"]


@dataclass(frozen=True)
class NoiseSpec:
    """Noise at the logger input, volts (per sample unless stated).

    white : std of white noise. pink : std of 1/f noise (band 0.01 Hz .. Nyquist).
    mains : amplitude of the mains fundamental; harmonics : relative amplitudes
    of harmonics 1, 2, 3, ... (odd ones dominate). mains_drift : relative
    amplitude wander (fraction). phase_drift : rad/sqrt(s) random walk of the
    mains phase. spike_rate : spikes per second; spike_amp : median spike
    amplitude (V). offset : DC offset (V). drift : linear drift (V/s).
    poly : amplitude of a slow cubic drift over the record (V). n_clip :
    spikes large enough to clip the digitiser. full_scale : digitiser range (V).
    """

    white: float = 1e-4
    pink: float = 5e-5
    mains: float = 2e-3
    harmonics: tuple = (1.0, 0.05, 0.3, 0.02, 0.1)
    mains_drift: float = 0.2
    phase_drift: float = 0.02
    spike_rate: float = 0.3
    spike_amp: float = 5e-3
    offset: float = 0.05
    drift: float = 2e-5
    poly: float = 5e-3
    n_clip: int = 3
    full_scale: float = 2.5

    def scaled(self, factor: float) -> "NoiseSpec":
        """Random noise (white, 1/f, spikes) scaled by ``factor``."""
        return replace(self, white=self.white * factor, pink=self.pink * factor,
                       spike_amp=self.spike_amp * factor)


@dataclass(frozen=True)
class Faults:
    """Faults injected into one station's recordings (synthetic QC tests and demos only).

    noise : factor on the random noise (white, 1/f, spikes) of the data channels.
    burst : (start, end, rate, amplitude): extra spikes between the fractions
        start..end of the record, ``rate`` per s, median amplitude (V).
    dead : components recorded flat (all zero).
    offset : {component: V} added to a channel (e.g. near full scale: clipping
        at the positive rail).
    reversed : components wired the other way round (every sample negated).
    clock : s by which the logger's clock runs ahead: every header of the
        station says the recording started ``clock`` later than it did.
    drift : V/s of extra linear drift on every data channel.
    half_cycle : the transmitter drives (1 + h) I one way and (1 - h) I the
        other: positive half-cycles of the response scaled by 1 + h, negative
        ones by 1 - h.
    """

    noise: float = 1.0
    burst: tuple = ()
    dead: tuple = ()
    offset: dict = field(default_factory=dict)
    reversed: tuple = ()
    clock: float = 0.0
    drift: float = 0.0
    half_cycle: float = 0.0


# Logger-volt noise per component in the Emberline scenario (common practice, no source)
EMBERLINE_NOISE = {
    "ex": NoiseSpec(),
    "dbzdt": NoiseSpec(white=2e-6, pink=1e-6, mains=5e-5, spike_amp=1e-4, offset=1e-3,
                       drift=1e-7, poly=1e-5),
}


def station_transient(survey: Survey, station: Station, model: LayeredModel, times,
                      receivers=None, n_per_piece: int = 140):
    """Noise-free periodic response (per A) at ``times`` in [0, T/2) for the receivers.

    The engine is evaluated on a grid refined after every waveform corner
    (time zero, start and end of the next ramp-on, start of its switch-off
    ramp) and interpolated piece by piece (PCHIP in log time since the
    corner), which is exact at the grid and smooth between.
    Returns (n_receivers, n_times).
    """
    tx = survey.transmitter
    receivers = station.data_receivers if receivers is None else receivers
    hp = tx.half_period
    t = np.asarray(times, float)
    t_on = tx.off_time
    corners = [0.0]
    if t_on > 0:
        corners += [t_on, t_on + tx.ramp_on]
    corners += [hp - tx.ramp_off] if tx.ramp_off > 0 else []
    corners = sorted(set(c for c in corners if c < hp))
    ends = corners[1:] + [hp]
    dt_min = max(1e-7, 0.02 * (t[1] - t[0]) if t.size > 1 else 1e-7)
    grids = []
    for a, b in zip(corners, ends):
        if b - a <= 2 * dt_min:
            grids.append(np.array([a + 0.5 * (b - a)]))
            continue
        n = n_per_piece if a == 0.0 else max(12, n_per_piece // 3)
        g = a + np.geomspace(dt_min, (b - a) - dt_min, n)
        grids.append(g)
    grid = np.unique(np.concatenate(grids))
    sim = Simulation(survey_source(tx), [survey_receiver(r, station) for r in receivers],
                     times=grid, waveform=survey_waveform(tx), response="waveform",
                     lowpass=survey_lowpass(survey))
    d = sim.predict(model)
    out = np.empty((len(receivers), t.size))
    for a, b, g in zip(corners, ends, grids):
        sel = (t >= a) & (t < b) if b < hp else (t >= a)
        if not sel.any():
            continue
        idx = np.searchsorted(grid, g)
        if g.size == 1:
            out[:, sel] = d[:, idx][:, :1]
            continue
        x = np.log(g - a)
        xs = np.log(np.clip(t[sel] - a, g[0] - a, g[-1] - a))
        for i in range(len(receivers)):
            out[i, sel] = PchipInterpolator(x, d[i, idx])(xs)
    return out


# ---------------------------------------------------------------------------- noise
def _pink(rng, n, fs, std, f_lo=0.01):
    if std <= 0:
        return np.zeros(n)
    w = rng.standard_normal(n)
    W = np.fft.rfft(w)
    f = np.fft.rfftfreq(n, 1.0 / fs)
    W *= 1.0 / np.sqrt(np.maximum(f, f_lo))
    W[0] = 0.0
    x = np.fft.irfft(W, n)
    return x * (std / x.std())


def _slow(rng, n, fs, step_s, std_per_sqrt_s):
    """Random walk sampled every step_s seconds and interpolated to n samples."""
    m = int(n / fs / step_s) + 2
    walk = np.cumsum(rng.standard_normal(m)) * std_per_sqrt_s * np.sqrt(step_s)
    return np.interp(np.arange(n) / fs, np.arange(m) * step_s, walk)


def noise_record(rng, n, fs, spec: NoiseSpec, mains_frequency: float) -> np.ndarray:
    """Noise at the logger (V), n samples at fs (Hz)."""
    tau = np.arange(n) / fs
    x = spec.white * rng.standard_normal(n)
    x += _pink(rng, n, fs, spec.pink)
    if spec.mains > 0:
        amp = spec.mains * (1.0 + spec.mains_drift * np.sin(2 * np.pi * tau / (n / fs)
                                                            + rng.uniform(0, 2 * np.pi)))
        phase = _slow(rng, n, fs, 1.0, spec.phase_drift)
        for h, rel in enumerate(spec.harmonics, start=1):
            if h * mains_frequency < fs / 2 and rel:
                x += rel * amp * np.cos(2 * np.pi * h * mains_frequency * tau + h * phase
                                        + rng.uniform(0, 2 * np.pi))
    n_sp = rng.poisson(spec.spike_rate * n / fs)
    if n_sp:
        pos = rng.integers(0, n - 8, n_sp)
        amp = spec.spike_amp * rng.lognormal(0.0, 1.0, n_sp) * rng.choice([-1, 1], n_sp)
        for k, a in enumerate(np.exp(-np.arange(8) / 1.5)):
            np.add.at(x, pos + k, amp * a)
    if spec.n_clip:
        pos = rng.integers(0, n, spec.n_clip)
        x[pos] += 2.0 * spec.full_scale * rng.choice([-1, 1], spec.n_clip)
    x += spec.offset + spec.drift * tau
    if spec.poly:
        s = tau / max(tau[-1], 1e-12) * 2.0 - 1.0
        x += spec.poly * (0.6 * s * s - 0.4 * s ** 3)
    return x


# ---------------------------------------------------------------------------- channels
def synth_channel(transient, t_first: float, fs: float, n: int, scale: float,
                  noise=None, half_cycle: float = 0.0) -> np.ndarray:
    """Logger volts for one channel: periodic tiled transient * scale + noise.

    transient : (M,) response per A over one half-period at sample times
    (delay + i/fs). t_first : time (s, from sample 0) of a positive switch-off
    end. scale : volts per unit of the transient (gain * length-or-area * I).
    half_cycle : positive half-cycles scaled by 1 + h, negative ones by 1 - h.
    """
    m = transient.size
    hp = m / fs
    k_first = int(np.ceil(-t_first / hp - 1e-9)) if t_first < 0 else 0
    first = int(np.ceil((t_first + k_first * hp) * fs - 1e-6))
    # window index of sample j: (j - first) // m, relative to window k_first
    j = np.arange(n)
    rel = j - first
    w = np.floor_divide(rel, m)
    i = rel - w * m
    sign = np.where((w + k_first) % 2 == 0, 1.0, -1.0)
    x = sign * (1.0 + half_cycle * sign) * transient[i] * scale
    if noise is not None:
        x = x + noise
    return x


def _to_counts(volts, full_scale_v, vpc):
    """Counts of a two's complement digitiser of full scale ``full_scale_v``: rails -F and F - 1."""
    fsc = int(round(full_scale_v / vpc))
    c = np.clip(np.round(volts / vpc), -fsc, fsc - 1)
    return c.astype(np.int32), fsc


def _burst(rng, n, fs, burst):
    """Spikes of a burst (start, end, rate, amplitude), decaying over 8 samples (V)."""
    x = np.zeros(n)
    if not burst:
        return x
    a, z, rate, amp = burst
    i0, i1 = int(a * n), max(int(z * n) - 8, int(a * n) + 1)
    k = rng.poisson(rate * (i1 - i0) / fs)
    pos = rng.integers(i0, i1, k)
    val = amp * rng.lognormal(0.0, 1.0, k) * rng.choice([-1, 1], k)
    for j, w in enumerate(np.exp(-np.arange(8) / 1.5)):
        np.add.at(x, pos + j, val * w)
    return x


def _apply_faults(volts, comp, f, rng, n, fs):
    """A data channel's volts with the faults of its station (new array)."""
    volts = volts + _burst(rng, n, fs, f.burst)
    if f.drift:
        volts = volts + f.drift * np.arange(n) / fs
    volts = volts + float(f.offset.get(comp, 0.0))
    if comp in f.reversed:
        volts = -volts
    if comp in f.dead:
        volts = np.zeros(n)
    return volts


#: Longest recording synthesised per station (s): one day (the scenario records 900 s).
MAX_DURATION = 86400.0


def _check_synth_inputs(survey, models, duration, noisy_station, dead_channel):
    """Refuse inputs that would be ignored or fail half-way, before any file is written."""
    if not survey.stations:
        raise input_error("stations", "survey lists no station")
    if not (np.isfinite(duration) and duration > 0):
        raise input_error("duration", f"must be a positive number of seconds, got {duration}")
    if duration > MAX_DURATION:
        # each channel is built in memory: 1e12 s ended in a MemoryError traceback
        raise input_error("duration", f"at most {MAX_DURATION:g} s (a day) per station, got "
                          f"{duration:g}")
    ids = [st.id for st in survey.stations]
    missing = [i for i in ids if i not in models]
    if missing:
        raise input_error("models", f"no layered model for station {', '.join(missing)}")
    if noisy_station is not None and noisy_station not in ids:
        raise input_error("noisy_station", f"no station {noisy_station!r}; valid: {', '.join(ids)}")
    if dead_channel is not None:
        if len(dead_channel) != 2:
            raise input_error("dead", f"expected STATION:COMPONENT, got {dead_channel!r}")
        sid, comp = dead_channel
        st = next((s for s in survey.stations if s.id == sid), None)
        if st is None:
            raise input_error("dead", f"no station {sid!r}; valid: {', '.join(ids)}")
        comps = [rx.component for rx in st.receivers]
        if comp not in comps:
            raise input_error("dead", f"station {sid} has no {comp!r} channel; valid: "
                              f"{', '.join(comps)}")


def synth_survey(survey: Survey, models: dict, out_dir, seed: int = 0, duration: float = 900.0,
                 noise: dict | None = None, noisy_station: str | None = None,
                 noisy_factor: float = 8.0, dead_channel: tuple | None = None,
                 current_channel: bool = True, progress=None, faults: dict | None = None) -> dict:
    """Write raw recordings for every station of ``survey`` (paths from the survey).

    models : station id -> LayeredModel. noise : component -> NoiseSpec.
    faults : station id -> :class:`Faults` (``noisy_station`` and
    ``dead_channel`` are shorthands for the noise and dead faults).
    Each station's recordings start at its own time: the survey's first
    switch (rounded down to the second) + 30 min + 20 min per station + 1 s.
    Stations of identical geometry and model share one forward computation. Returns
    {station: {component: noise-free transient per A (M,)}} (the truth).
    """
    _check_synth_inputs(survey, models, duration, noisy_station, dead_channel)
    faults = dict(faults or {})
    unknown = [k for k in faults if k not in {st.id for st in survey.stations}]
    if unknown:
        raise input_error("faults", f"no station {unknown[0]!r}")
    if noisy_station is not None:
        faults[noisy_station] = replace(faults.get(noisy_station, Faults()), noise=noisy_factor)
    if dead_channel is not None:
        f = faults.get(dead_channel[0], Faults())
        faults[dead_channel[0]] = replace(f, dead=tuple(f.dead) + (dead_channel[1],))
    cache = {}
    tx = survey.transmitter
    noise = dict(EMBERLINE_NOISE if noise is None else noise)
    master = np.random.default_rng(seed)
    truth = {}
    for si, st in enumerate(survey.stations):
        rng = np.random.default_rng(master.integers(2**63))
        whole = tx.first_switch_off.astype("datetime64[s]").astype("datetime64[ns]")
        start = whole + np.timedelta64(int((1800 + 1200 * si + 1.0) * 1e9), "ns")
        recs = st.data_receivers
        fs = recs[0].sample_rate
        m = int(round(fs * tx.half_period))
        n = int(round(duration * fs))
        t_first = seconds_between(start, tx.first_switch_off)
        k_first = int(np.ceil(-t_first / tx.half_period - 1e-9))
        first = int(np.ceil((t_first + k_first * tx.half_period) * fs - 1e-6))
        delay = first / fs - (t_first + k_first * tx.half_period)
        times = np.maximum(delay + np.arange(m) / fs, 1e-3 / fs)
        key = (st.x, st.y, tuple((r.component, r.dipole, r.coil_area, r.gain) for r in recs),
               tuple(models[st.id].thickness), tuple(models[st.id].resistivity), times.tobytes())
        if key not in cache:
            cache[key] = station_transient(survey, st, models[st.id], times, recs)
        tr = cache[key]
        truth[st.id] = {r.component: tr[i] for i, r in enumerate(recs)}
        f = faults.get(st.id, Faults())
        for i, rx in enumerate(st.receivers):
            if abs(rx.sample_rate - fs) > 1e-9:
                raise input_error("sample_rate", f"{st.id}: receivers must share one sample rate")
            spec = noise.get(rx.component, noise.get("ex")) if rx.component != "current" else \
                NoiseSpec(white=1e-4, pink=0, mains=0, spike_rate=0, offset=1e-3, drift=0, poly=0,
                          n_clip=0)
            if rx.component != "current" and f.noise != 1.0:
                spec = spec.scaled(f.noise)
            if rx.component == "current":
                wf = survey_waveform(tx)
                cur = -wf.current_at(times - tx.half_period)
                volts = synth_channel(cur, t_first, fs, n, rx.gain * tx.current,
                                      noise_record(rng, n, fs, spec, survey.mains_frequency))
            else:
                k = list(recs).index(rx)
                length = rx.dipole_length if rx.coil_area is None else rx.coil_area
                volts = synth_channel(tr[k], t_first, fs, n, rx.gain * length * tx.current,
                                      noise_record(rng, n, fs, spec, survey.mains_frequency),
                                      half_cycle=f.half_cycle)
            if rx.component != "current":
                volts = _apply_faults(volts, rx.component, f, rng, n, fs)
            vpc = spec.full_scale / 2**23          # 24-bit digitiser
            counts, fsc = _to_counts(volts, spec.full_scale, vpc)
            stamp = start + np.timedelta64(int(round(f.clock * 1e9)), "ns")
            header = RawHeader(sample_rate=fs, volts_per_count=vpc, start_time=stamp,
                               full_scale=fsc, component=rx.component, station=st.id)
            path = survey.path(rx.files[0])
            path.parent.mkdir(parents=True, exist_ok=True)
            if rx.format == "mseed" or (rx.format is None
                                        and path.suffix.lower() in FORMATS["mseed"].suffixes):
                write_mseed_recording(path, counts, header, rx.channel)
            else:
                write_npy_recording(path, counts, header)
        if progress is not None:
            progress(si + 1, len(survey.stations))
    return truth


# ---------------------------------------------------------------------------- Emberline Plateau
EMBERLINE_FIRST_SWITCH = "2025-06-02T07:29:59.999875Z"   # half a sample before 07:30:00 at 4 kHz


def emberline_models(x=None) -> dict:
    """Layered earth under each Emberline station (fictional).

    20 m of 30 ohm-m cover; 500 ohm-m basalt thickening linearly from 900 m
    (west end, x = -5500 m) to 1600 m (east end, x = +5500 m); 600 m of
    8 ohm-m sediments (the target); 2000 ohm-m basement.
    """
    xs = np.arange(-5500.0, 5501.0, 1000.0) if x is None else np.asarray(x, float)
    out = {}
    for i, xi in enumerate(xs):
        basalt = 900.0 + (xi + 5500.0) / 11000.0 * 700.0
        out[f"EM{i + 1:02d}"] = LayeredModel(thickness=[20.0, basalt, 600.0],
                                             resistivity=[30.0, 500.0, 8.0, 2000.0])
    return out


def emberline_survey(base_dir=".", sample_rate: float = 4000.0, stations=None,
                     current_channel: bool = True, raw_format: str = "npy"):
    """The Emberline Plateau survey (fictional) and its layered models.

    11 km east-west profile of 12 stations (EM01 west .. EM12 east) at 1 km
    spacing; a 1.5 km east-west grounded wire 800 m north of the profile
    midpoint, 40 A, bipolar with off-time (duty 0.5), 0.25 Hz; 50 Hz mains;
    Ex (100 m dipole) and dBz/dt (10 000 m^2 coil) at every station, 4 kHz.
    ``raw_format``: ``npy`` (+ sidecar) or ``mseed`` (MiniSEED, one file per
    channel with the channel codes of :data:`tem.io.mseed.DEFAULT_CHANNELS`).
    Returns ``(survey, models)``.
    """
    if raw_format not in ("npy", "mseed"):
        raise input_error("raw_format", f"unknown {raw_format!r}; valid: npy, mseed")
    from ..io.mseed import DEFAULT_CHANNELS

    ext = raw_format
    chan = (lambda c: DEFAULT_CHANNELS[c]) if raw_format == "mseed" else (lambda c: None)
    xs = np.arange(-5500.0, 5501.0, 1000.0)
    tx = Transmitter(kind="wire", points=((-750.0, 800.0), (750.0, 800.0)), current=40.0,
                     base_frequency=0.25, duty_cycle=0.5, ramp_on=1e-3, ramp_off=5e-4,
                     first_switch_off=parse_time(EMBERLINE_FIRST_SWITCH))
    sts = []
    for i, x in enumerate(xs):
        sid = f"EM{i + 1:02d}"
        if stations is not None and sid not in stations:
            continue
        rxs = [Channel("ex", files=(f"raw/{sid}/ex.{ext}",), sample_rate=sample_rate, gain=1.0,
                        dipole=((x - 50.0, 0.0), (x + 50.0, 0.0)), channel=chan("ex")),
               Channel("dbzdt", files=(f"raw/{sid}/dbzdt.{ext}",), sample_rate=sample_rate,
                        gain=1.0, coil_area=1.0e4, channel=chan("dbzdt"))]
        if current_channel:
            rxs.append(Channel("current", files=(f"raw/{sid}/current.{ext}",),
                                sample_rate=sample_rate, gain=0.01, channel=chan("current")))
        sts.append(Station(id=sid, x=float(x), y=0.0, z=1100.0, epsg=0, receivers=rxs))
    survey = Survey(name="Emberline Plateau (fictional)", transmitter=tx, stations=sts,
                    mains_frequency=50.0, base_dir=Path(base_dir))
    models = {k: v for k, v in emberline_models(xs).items() if stations is None or k in stations}
    return survey, models


def is_coil(component: str) -> bool:
    return component in COIL_COMPONENTS
