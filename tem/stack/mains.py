"""Mains off its nominal frequency: found on the record, fitted, removed before a second stack.

The stack cancels mains by its nulls alone (docs/stacking.md, section 6): a
grid at exactly 50 or 60 Hz under the base-frequency rule lands on them. A grid
running off nominal (50.02-50.05 Hz is common on a weak network or a
generator) does not, and passes in part (an independent check measured gates
off by up to 46 times the truth, with error bars 6 times too small, under
0.3 V of 50.05 Hz). Here:

1. **Find it.** On up to 32 blocks of two half-periods spread over the record,
   with the baseline and the first stack (signed per window) taken out, the
   power of the fundamental summed over the blocks, sum_b |sum_t r_b(t)
   exp(-2 pi i f t)|^2, is scanned over f within ``span`` of the nominal
   frequency (a zero-padded FFT, then direct sums around its best bin; a line
   to remove gets its frequency from its phase across the record), and likewise near
   the other grid frequency (60 Hz on a 50 Hz survey, 50 on a 60: a
   generator, a neighbouring network). Each block keeps its own phase, so a
   mains whose phase wanders is still one line.
2. **Decide.** The line is removed when it lies more than ``min_offset`` from
   nominal and explains at least ``min_share`` of the residual's energy (its
   power over (N/2) sum r^2 for N samples a block: 1 for a pure sinusoid, about
   2/N for white noise): mains on its nominal frequency is left to the nulls.
3. **Remove.** Over the whole record, in segments of about 80 s, the
   amplitudes of the fundamental and its harmonics below Nyquist at the found
   frequency are fitted by least squares (each segment its own amplitudes and
   phases: the mains' level and phase may wander), jointly with the transient
   (:func:`fit_removal`), and subtracted from the raw samples (clipped samples
   are left as recorded). The record is then stacked again.

Sources: the least-squares fit of sinusoids of known frequency is textbook
(e.g. Bloomfield 2000, "Fourier analysis of time series", 2nd ed., chapter 2,
from memory); the scan is a periodogram summed over segments (Welch 1967, IEEE
Trans. Audio Electroacoust. 15(2), 70-73, from memory). The thresholds are
common practice, no source.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .rawchecks import _baseline
from .sources import WindowSource

__all__ = ["MainsLine", "find_mains_line", "MainsRemoval", "fit_removal", "CleanedSource",
           "removed_volts", "near_harmonics", "on_line"]

#: Most harmonics fitted (below Nyquist).
HARMONICS = 15


@dataclass(frozen=True)
class MainsLine:
    """The mains line found on a record: frequency (Hz), the share of the residual's energy
    it explains (0..1), and whether it is to be removed."""

    frequency: float
    share: float
    remove: bool


def _pol(k, polarity0):
    return polarity0 * (1.0 if k % 2 == 0 else -1.0)


def _residual(read, j, n, m, means, stack, polarity0, t_frac, clip_volts):
    """Raw windows j..j+n-1 (volts) minus baseline and signed stack, flattened; clipped: NaN."""
    raw = read(j, j + n)
    d = raw - _baseline(means, j, n, t_frac)
    d -= np.array([_pol(k, polarity0) for k in range(j, j + n)])[:, None] * stack[None, :]
    if clip_volts > 0:
        d[np.abs(raw) >= clip_volts] = np.nan
    return d.ravel()


def find_mains_line(read, n_windows, m, fs, means, stack, polarity0, nominal, clip_volts=0.0,
                    span=0.25, min_offset=0.002, min_share=0.05, blocks=32) -> MainsLine:
    """Scan for the mains fundamental near ``nominal`` (Hz; module docstring, steps 1-2).

    read : (j0, j1) -> (j1-j0, M) volts of windows j0..j1-1; means : window means (V);
    stack : (M,) first stack in volts (positive polarity). ``nominal`` may be a sequence:
    then a list of lines, one per nominal frequency, from one scan.
    """
    many = np.ndim(nominal) > 0
    noms = [float(f) for f in np.atleast_1d(nominal)]
    none = [MainsLine(float("nan"), float("nan"), False) for _ in noms]
    if n_windows < 2 or not all(f > 0 for f in noms):
        return none if many else none[0]
    t_frac = (np.arange(m) + 0.5) / m
    starts = np.unique(np.linspace(0, n_windows - 2, min(blocks, n_windows // 2)).astype(int))
    rows = [_residual(read, int(j), 2, m, means, stack, polarity0, t_frac, clip_volts)
            for j in starts]
    # clipped samples (NaN) count as zero; a block clipped throughout is all zeros
    r = np.array([np.where(np.isfinite(x), x - (np.mean(x[np.isfinite(x)]) if
                                                np.isfinite(x).any() else 0.0), 0.0)
                  for x in rows])
    n = r.shape[1]
    t = np.arange(n) / fs
    energy = float(np.sum(r * r)) * 0.5 * n
    # the summed periodogram on a fine grid (zero-padded FFT, bins of fs/P), then the
    # best bin refined by direct sums
    size = 1 << int(math.ceil(math.log2(8 * n)))
    spec = np.sum(np.abs(np.fft.rfft(r, size, axis=1)) ** 2, axis=0)
    freqs = np.fft.rfftfreq(size, 1.0 / fs)
    step = fs / size
    out = []
    for f0 in noms:
        sel = np.flatnonzero(np.abs(freqs - f0) <= span)
        if sel.size == 0 or energy <= 0:
            out.append(MainsLine(float("nan"), 0.0, False))
            continue
        best = freqs[sel[int(np.argmax(spec[sel]))]]
        fine = best + np.linspace(-step, step, 41)
        e = np.exp(-2j * np.pi * np.outer(t, fine))
        pf = np.sum(np.abs(r @ e) ** 2, axis=0)
        f = float(fine[int(np.argmax(pf))])
        share = float(np.max(pf) / energy)
        remove = bool(abs(f - f0) > min_offset and share >= min_share)
        if remove:      # a line to remove: its frequency from the phase across the record
            f = _coherent(r, starts * m / fs, t, f, fine[1] - fine[0])
            remove = abs(f - f0) > min_offset
        out.append(MainsLine(f, share, remove))
    return out if many else out[0]


def _coherent(r, t0, t, f, width):
    """The frequency near ``f`` that maximises the coherent power |sum_b z_b|^2 of the blocks
    ``r`` (starting at ``t0`` s in the record): a block's own phase no longer free, the peak
    is as narrow as the record is long (40-s fit segments need the frequency to about
    1e-4 Hz: 5e-4 Hz off left 0.3 V of 50.01 Hz mains 40 times above the noise).
    Two passes: 101 points over +-2 ``width``, then 41 over +-4 of those points' spacing."""
    span = 2.0 * width
    for n in (101, 41):
        grid = f + np.linspace(-span, span, n)
        z = r @ np.exp(-2j * np.pi * np.outer(t, grid))              # (blocks, grid)
        z *= np.exp(-2j * np.pi * np.outer(t0, grid))
        f = float(grid[int(np.argmax(np.abs(z.sum(axis=0)) ** 2))])
        span = 4.0 * (grid[1] - grid[0])
    return f


#: Closest a fitted harmonic may come to a line of the transmitter's response (odd multiples
#: of the base frequency), Hz: closer, the two cannot be told apart on a record of minutes.
MIN_SEPARATION = 0.05


def _separation(f, fb):
    """Distance (Hz) of ``f`` from the nearest odd multiple of ``fb``."""
    k = np.floor((f / fb - 1.0) / 2.0)
    return float(min(abs(f - (2 * j + 1) * fb) for j in (k - 1, k, k + 1, k + 2)))


@dataclass
class MainsRemoval:
    """The fitted mains of a record: per segment of windows its amplitudes at the harmonics
    ``harmonics`` of ``frequency``; :meth:`volts` gives the mains of any windows."""

    frequency: float
    m: int
    fs: float
    segments: list            # [(first window, windows), ...] tiling the record
    harmonics: tuple          # harmonic numbers fitted
    coef: np.ndarray          # (n_segments, 2 len(harmonics)) volts: cos, sin per harmonic
    amplitude: float          # median fundamental amplitude over the segments, V

    def rows(self, k, j0):
        """(M, 2 H) basis rows of window ``k`` in the segment that starts at window ``j0``."""
        t = ((k - j0) * self.m + np.arange(self.m)) / self.fs
        w = 2 * np.pi * self.frequency * np.outer(t, self.harmonics)
        out = np.empty((self.m, 2 * len(self.harmonics)))
        out[:, 0::2] = np.cos(w)
        out[:, 1::2] = np.sin(w)
        return out

    def volts(self, k0, k1):
        """(k1-k0, M) mains of windows k0..k1-1, volts."""
        out = np.empty((k1 - k0, self.m))
        firsts = np.array([s[0] for s in self.segments])
        for k in range(k0, k1):
            i = int(np.searchsorted(firsts, k, side="right") - 1)
            out[k - k0] = self.rows(k, self.segments[i][0]) @ self.coef[i]
        return out


def _segments(n_windows, length):
    """Segments of ``length`` windows (even) tiling the record; a short rest joins the last."""
    segs = [[j, min(length, n_windows - j)] for j in range(0, n_windows, length)]
    if len(segs) > 1 and segs[-1][1] < length // 2:
        segs[-2][1] += segs.pop()[1]
    return [tuple(x) for x in segs]


def _harmonics(frequency, fs, m, n_windows):
    """Harmonics of ``frequency`` below Nyquist, by their distance to the nearest transmitter
    line: ``far`` (``MIN_SEPARATION`` or more: fitted in segments), ``near`` (told apart only
    over the whole record) and ``on`` (closer than 1 / record length: never)."""
    fb = fs / (2.0 * m)
    floor = 1.0 / (n_windows * m / fs)
    out = {"far": [], "near": [], "on": []}
    for h in range(1, HARMONICS + 1):
        if h * frequency < 0.5 * fs:
            sep = _separation(h * frequency, fb)
            out["far" if sep >= MIN_SEPARATION else "near" if sep >= floor else "on"].append(h)
    return {k: tuple(v) for k, v in out.items()}


def near_harmonics(frequency, fs, m, n_windows):
    """Harmonics of ``frequency`` (below Nyquist) within ``MIN_SEPARATION`` of a transmitter
    line but at least 1 / record length from it: told apart only over the whole record."""
    return _harmonics(frequency, fs, m, n_windows)["near"]


def fit_removal(read, n_windows, m, fs, means, stack, polarity0, frequency,
                clip_volts=0.0, iterations=6, harmonics=None, whole=False) -> MainsRemoval:
    """Least-squares mains of every segment of the record at ``frequency`` (module docstring,
    step 3).

    A sinusoid is told apart from the transmitter's response (lines at odd multiples of
    the base frequency f_b) only over a segment long against the inverse of their
    distance: segments last 4 / ``MIN_SEPARATION`` s (80 s; over 4-s ones the fit
    took the leaked mains for signal and put it back: gates stayed 40 times off), and a
    harmonic that falls within ``MIN_SEPARATION`` of such a line (50.05 x 5 = 250.25 =
    1001 x 0.25 Hz) is left out here (``harmonics`` None; :func:`near_harmonics` are fitted
    over the whole record, ``whole``, by a second call).
    The transient and the mains are then estimated in turn (block coordinate descent on
    their joint least-squares problem, ``iterations`` times): the mains of every segment
    from the record less the current transient, the transient as the signed mean of the
    record less that mains.
    """
    fb = fs / (2.0 * m)
    hs = _harmonics(frequency, fs, m, n_windows)["far"] if harmonics is None \
        else tuple(harmonics)
    length = n_windows if whole else max(2, 2 * int(math.ceil(4.0 / MIN_SEPARATION * fb)))
    segs = _segments(n_windows, length)
    rem = MainsRemoval(float(frequency), m, float(fs), segs, hs,
                       np.zeros((len(segs), 2 * len(hs))), float("nan"))
    if not hs:
        return rem
    t_frac = (np.arange(m) + 0.5) / m
    signal = np.asarray(stack, float).copy()
    pols = np.array([_pol(k, polarity0) for k in range(n_windows)])
    for _ in range(max(1, int(iterations))):
        total = np.zeros(m)
        count = np.zeros(m)
        for i, (j, n) in enumerate(segs):
            r = _residual(read, j, n, m, means, signal, polarity0, t_frac, clip_volts)
            r = r.reshape(n, m)
            ok = np.isfinite(r)
            if ok.sum() < 0.5 * r.size:
                rem.coef[i] = 0.0       # mostly clipped: nothing to fit on, left as it is
                continue
            mean = float(r[ok].mean())
            gram = np.zeros((2 * len(hs),) * 2)
            rhs = np.zeros(2 * len(hs))
            for q in range(n):          # normal equations window by window (memory: one)
                b = rem.rows(j + q, j)[ok[q]]
                gram += b.T @ b
                rhs += b.T @ (r[q, ok[q]] - mean)
            c = np.linalg.lstsq(gram, rhs, rcond=None)[0]
            rem.coef[i] = c
            for q in range(n):          # the transient these windows hold without the mains
                est = pols[j + q] * (r[q] - rem.rows(j + q, j) @ c) + signal
                good = np.isfinite(est)
                total += np.where(good, est, 0.0)
                count += good
        signal = np.where(count > 0, total / np.maximum(count, 1), signal)
    amp = [math.hypot(c[0], c[1]) for c in rem.coef if np.any(c)] if hs[0] == 1 else []
    rem.amplitude = float(np.median(amp)) if amp else float("nan")
    return rem


def removed_volts(removals, k0, k1):
    """(k1-k0, M) volts of all the fitted mains lines in windows k0..k1-1."""
    out = 0.0
    for r in removals:
        out = out + r.volts(k0, k1)
    return out


def on_line(removals, stack, error, fs, m, n_windows, ratio=5.0):
    """Frequency (Hz) of the strongest harmonic of a removed line that sits on a transmitter
    line (closer than 1 / record length: nothing on the record tells it from the signal) and
    shows in the stack, or NaN.

    Such a harmonic stacks like the transient (50.05 x 5 = 250.25 Hz = 1001 x 0.25 Hz: a
    station whose gates were thousands of errors off was called good once the rest of its
    mains was removed). It shows as a sinusoid in the stack's second half, where a decay is
    smooth: its amplitude there, by least squares, over ``ratio`` times the median error.
    """
    t = np.arange(m) / fs
    half = slice(m // 2, m)
    noise = float(np.median(error[half])) if np.isfinite(error[half]).any() else 0.0
    worst, found = 0.0, float("nan")
    for r in removals:
        for h in _harmonics(r.frequency, fs, m, n_windows)["on"]:
            f = h * r.frequency
            b = np.column_stack([np.cos(2 * np.pi * f * t[half]), np.sin(2 * np.pi * f * t[half]),
                                 np.ones(m - m // 2), t[half]])
            c = np.linalg.lstsq(b, np.nan_to_num(stack[half]), rcond=None)[0]
            amp = math.hypot(c[0], c[1])
            if amp > ratio * noise and amp > worst:
                worst, found = amp, f
    return found


class CleanedSource(WindowSource):
    """A :class:`tem.stack.sources.RecordingSource` with the fitted mains lines (a list of
    :class:`MainsRemoval`) taken out of every window (in the stored units; samples at a
    full-scale rail left as recorded, others kept off the rail, so that clipping is counted
    as on the raw record)."""

    def __init__(self, src, removals):
        self.src, self.removals = src, list(removals)
        self.n_windows, self.m, self.polarity0 = src.n_windows, src.m, src.polarity0

    def volts(self, k0, k1):
        return removed_volts(self.removals, k0, k1)

    def view(self, k0, k1):
        x, vpc, full_scale, clip = self.src.view(k0, k1)
        raw = np.asarray(x, np.float64)
        out = raw - self.volts(k0, k1) / vpc
        if full_scale:
            at_rail = np.abs(raw) >= full_scale
            out = np.where(at_rail, raw, np.clip(out, -np.nextafter(full_scale, 0),
                                                 np.nextafter(full_scale, 0)))
        return out, vpc, full_scale, clip

    def get(self, k0, k1):
        d, clip = self.src.get(k0, k1)
        if clip is None:
            return d - self.volts(k0, k1), None
        return np.where(clip, d, d - self.volts(k0, k1)), clip

    def locate_nan(self, k0, k1):
        return self.src.locate_nan(k0, k1)

    @property
    def itemsize(self) -> int:
        return 8
