"""Simulation: a transmitter, receivers and a time sampling, precomputed once.

Everything between the layered-earth kernel and the output is linear, so it
is assembled once into matrices when a :class:`Simulation` is built:

1. Hankel transforms by lagged-convolution digital linear filters and a
   degree-7 spline in log offset (``tem.forward.dlf``; the filter chosen by
   :meth:`Simulation._choose_hankel`), integrated along the
   wire or loop with Gauss-Legendre (lines) or trapezoidal (circles) nodes;
   grounded-wire electrodes add the galvanic (TM) terms in closed form
   plus a decaying remainder.
2. The frequency-to-time transform by a lagged sine/cosine DLF onto a log
   time grid, a cubic spline in log time, and the receiver low-pass filter
   as a multiplication in the frequency domain; the kernel itself is
   evaluated at 8 frequencies per decade (2 outside the band the times
   need) and carried to the filter's frequencies by a degree-7 spline.
3. The waveform: ramps integrated by Gauss-Legendre quadrature in log time,
   the alternating tails of earlier half-cycles summed with an Euler-Boole
   tail correction, and gate averages by Gauss-Legendre quadrature with the
   gate's window weights.

A model evaluation is then one kernel evaluation on the (omega, lambda)
grid and a few matrix products; the Jacobian reuses the same matrices.
"""
from __future__ import annotations

import numpy as np
from scipy import signal

from . import dlf, gatewindow, kernel
from .geometry import CircularLoop, PolygonLoop, Receiver, Wire
from .kernel import MU0, fused_spectra, fused_spectra_many
from .model import LayeredModel
from .terms import log_gauss_many, receiver_terms
from .waveform import Waveform

from ..errors import TemInputError

__all__ = ["Simulation", "RESPONSES"]

RESPONSES = ("step-off", "step-on", "impulse", "waveform")
# spectrum interpolation: a degree-7 spline in log omega, dense inside the band the
# times need and sparse in the smooth tails (accuracy study in docs/forward.md)
_SPLINE_DEGREE = 7
_OUTER_PER_DECADE = 2
# hankel="auto": the short filter where a half-space test passes, else the long one
_HANKEL_CHOICE = ("key_101_2012", "key_201_2012")
_CHECK_RHO = (1.0, 10.0, 100.0, 1000.0, 10000.0)
_HANKEL_TOL = 1e-4
_TWO_PI = 2.0 * np.pi


class Simulation:
    """Forward simulation of surface TEM responses over 1D layered earths.

    Parameters
    ----------
    source : Wire | PolygonLoop | CircularLoop
        Transmitter geometry [m]; responses are per ampere.
    receivers : sequence of Receiver
    times : array_like, optional
        Point sample times [s] after the end of the switch-off ramp.
    gates : (open, close) arrays, optional
        Gate windows [s]; the response is averaged over each window with
        ``gate_shape`` weights (``tem.forward.gatewindow``).
    waveform : Waveform, optional
        Transmitter waveform, needed for ``response="waveform"``.
    response : str
        ``"step-off"``, ``"step-on"``, ``"impulse"`` or ``"waveform"``.
    lowpass : (order, cutoff_hz), optional
        Receiver Butterworth low-pass filter applied to the response.
    hankel : str
        libdlf Hankel filter, or ``"auto"`` (default): key_101_2012 where a
        half-space accuracy test on these receivers and times passes, else
        key_201_2012 (see ``_choose_hankel``; the measured deviation is kept in
        ``hankel_check``).
    fourier : str
        libdlf Fourier filter (default key_201_2012). On the closed-form and
        empymod checks of tests/test_forward_*.py the defaults reach 1e-4
        typically, down to u = theta r ~ 3e-3; at even later times the Fourier
        filter loses accuracy (docs/forward.md).
    freq_per_decade : float or None
        Density of the frequencies at which the layered kernel is evaluated
        inside the band the times need (2 per decade outside it); a degree-7
        spline in log frequency carries the spectrum to the filters'
        frequencies. None evaluates at the filters' own frequencies (slower,
        reference-grade).
    n_half_periods : int, optional
        Past half-cycles summed explicitly for a periodic waveform (an
        Euler-Boole correction accounts for the rest); default from the
        latest time.
    hankel_tolerance : float
        Largest deviation of the short Hankel filter from the long one that
        ``hankel="auto"`` accepts (relative to each value, floored at 1e-3 of
        the curve's peak). The default 1e-4 is the modeller's own accuracy; an
        inversion passes a looser one set by its data errors
        (:func:`tem.invert.data.hankel_tolerance_for`).
    """

    def __init__(self, source, receivers, times=None, gates=None, gate_shape="boxcar",
                 waveform=None, response=None, lowpass=None, hankel="auto",
                 fourier="key_201_2012", freq_per_decade=8, n_half_periods=None, gate_nodes=6,
                 hankel_tolerance=_HANKEL_TOL):
        if not isinstance(source, (Wire, PolygonLoop, CircularLoop)):
            raise TemInputError("source: must be a Wire, PolygonLoop or CircularLoop")
        receivers = list(receivers)
        if not receivers or not all(isinstance(r, Receiver) for r in receivers):
            raise TemInputError("receivers: need at least one tem.forward.Receiver")
        if response is None:
            response = "waveform" if waveform is not None else "step-off"
        if response not in RESPONSES:
            raise TemInputError(f"response: unknown response {response!r}; valid: {', '.join(RESPONSES)}")
        if response == "waveform" and waveform is None:
            raise TemInputError("waveform: response='waveform' needs a Waveform")
        if waveform is not None and not isinstance(waveform, Waveform):
            raise TemInputError("waveform: must be a tem.forward.Waveform")
        self.source, self.receivers, self.response = source, receivers, response
        self.waveform = waveform
        self.gate_shape = gatewindow.check_shape(gate_shape)
        self.lowpass = _check_lowpass(lowpass)
        self.hankel_name, self.fourier_name = hankel, fourier
        if not (np.isfinite(hankel_tolerance) and 0 < hankel_tolerance < 0.1):
            raise TemInputError(f"hankel_tolerance: need a number in (0, 0.1), got {hankel_tolerance!r}")
        self.hankel_tolerance = float(hankel_tolerance)
        self.freq_per_decade = freq_per_decade

        self._setup_times(times, gates, gate_nodes, n_half_periods)
        self._check_geometry()
        self._setup_fourier()
        self._setup_evaluate()
        self._terms = [receiver_terms(source, rx) for rx in receivers]
        # closed-form parts per receiver: coefficients of rho_1, i omega mu0, 1
        self._analytic = np.array([an for _, an in self._terms])
        self.hankel_check = None
        if hankel == "auto":
            self._choose_hankel()
        else:
            self._bind(*self._space_operators(hankel))

    # ------------------------------------------------------------------ set-up
    def _setup_times(self, times, gates, gate_nodes, n_half_periods):
        if (times is None) == (gates is None):
            raise TemInputError("times/gates: give exactly one of point times or gate windows")
        if times is not None:
            t = np.atleast_1d(np.asarray(times, dtype=float))
            if t.ndim != 1 or t.size == 0 or not np.all(np.isfinite(t)) or np.any(t <= 0):
                raise TemInputError("times: must be positive and finite (s after switch-off)")
            self.times = t
            self.gates = None
            obs_t, obs_w = t, np.eye(t.size)
        else:
            g0, g1 = (np.atleast_1d(np.asarray(g, dtype=float)) for g in gates)
            if g0.shape != g1.shape or g0.ndim != 1 or g0.size == 0:
                raise TemInputError("gates: open and close must be 1-D arrays of equal length")
            if not (np.all(np.isfinite(g0)) and np.all(np.isfinite(g1))) or np.any(g0 <= 0) \
                    or np.any(g1 <= g0):
                raise TemInputError("gates: need 0 < open < close for every gate (s)")
            self.gates = (g0, g1)
            self.times = np.sqrt(g0 * g1)
            xg, wg = np.polynomial.legendre.leggauss(int(gate_nodes))
            s = 0.5 * (xg + 1.0)
            # nodes in log time inside each gate: accurate for decays spanning the gate
            la, lb = np.log(g0)[:, None], np.log(g1)[:, None]
            tn = np.exp(la + s[None, :] * (lb - la))
            jac = tn * (lb - la) * 0.5 * wg[None, :]
            w = jac * gatewindow.weights(self.gate_shape, tn, g0[:, None], g1[:, None])
            if self.gate_shape == "taper":
                # the Hann window vanishes at the ends; use more nodes for its shape
                xg2, wg2 = np.polynomial.legendre.leggauss(int(gate_nodes) * 2)
                s2 = 0.5 * (xg2 + 1.0)
                tn = g0[:, None] + s2[None, :] * (g1 - g0)[:, None]
                w = (g1 - g0)[:, None] * 0.5 * wg2[None, :] * \
                    gatewindow.weights("taper", tn, g0[:, None], g1[:, None])
            w = w / w.sum(axis=1, keepdims=True)
            n = tn.shape[1]
            obs_t = tn.ravel()
            obs_w = np.zeros((g0.size, obs_t.size))
            for i in range(g0.size):
                obs_w[i, i * n:(i + 1) * n] = w[i]
        # map observation times to (u nodes, coefficients) for the step-off function s(u)
        u, rows, cs, dc = self._time_operator(obs_t, n_half_periods)
        # the response at observation time rows[j] gets cs[j] * s(u[j]); outputs are
        # the window-weighted sums of observation times (obs_w)
        self._u, self._urows, self._ucoef, self._obs_w = u, rows, cs, obs_w
        self._n_out = obs_w.shape[0]
        # (n_out,): coefficient of the DC value in fields (E, B). dB/dt takes no DC
        # term: by Leibniz's rule d/dt [DC I(t) - sum m int_0^(t-t0) s(u) du] =
        # I'(t) (DC - s(0+)) - sum m int s'(u) du, and s(0+) = DC for magnetic fields
        # (the currents just after a switch equal those just before; Ward & Hohmann
        # 1988, superposition of step responses), so a ramp in progress contributes
        # only -m int_0^(t-t0) s'(u) du, which the ramp integral already holds.
        self._dc_coef = obs_w @ dc

    def _time_operator(self, t, n_half_periods):
        """Express the response at times t as sum coef * s(u) + dc * DC."""
        r = self.response
        if r in ("step-off", "impulse"):
            return t, np.arange(t.size), np.ones(t.size), np.zeros(t.size)
        if r == "step-on":
            return t, np.arange(t.size), -np.ones(t.size), np.ones(t.size)
        wf = self.waveform
        if wf.half_period is None:
            shifts, signs = np.array([0.0]), np.array([1.0])
        else:
            hp = wf.half_period
            if n_half_periods is None:
                n_half_periods = int(np.clip(np.ceil(20.0 * t.max() / hp), 20, 200))
            K = int(n_half_periods)
            k = np.arange(-1, K + 2)
            signs = (-1.0) ** k
            # Euler-Boole tail: sum_{k>=K} (-1)^k g(k) ~ (-1)^K [g(K)/2 - g'(K)/4],
            # g'(K) ~ (g(K+1) - g(K-1))/2 (Boole summation; common practice)
            wts = np.ones(k.size)
            iK = np.searchsorted(k, K)
            wts[iK] = 0.5
            signs = signs * wts
            signs[iK - 1] += (-1.0) ** K * (1 / 8)
            signs[iK + 1] += -(-1.0) ** K * (1 / 8)
            shifts = k * hp
        t0, t1, m = wf.segments()
        # every (time, past pulse, ramp segment) at once; u runs over [tt - b, tt - a]
        tt = t[:, None] + shifts[None, :]                       # (n_t, n_shift)
        dc = (signs[None, :] * wf.current_at(tt)).sum(axis=1)
        hi = tt[..., None] - t0                                  # (n_t, n_shift, n_seg)
        lo = np.maximum(tt[..., None] - t1, 0.0)
        coef = -signs[None, :, None] * m[None, None, :] * np.ones_like(hi)
        rows = np.broadcast_to(np.arange(t.size)[:, None, None], hi.shape)
        keep = hi > 0
        u, wq, r = log_gauss_many(lo[keep], hi[keep], rows[keep])
        cs = wq * np.repeat(coef[keep], np.diff(r[1]))
        return u, np.repeat(rows[keep], np.diff(r[1])), cs, dc

    def _check_geometry(self):
        seg = self.source.segments
        scale = self.source.scale
        for rx in self.receivers:
            pts, _, _ = rx.sample_points()
            for p in pts:
                d = self.source.distance_to(p) if isinstance(self.source, CircularLoop) \
                    else seg.distance_to(p)
                if d < 1e-3 * scale:
                    raise TemInputError(f"receivers: {rx.component} receiver at "
                                     f"({p[0]:.1f}, {p[1]:.1f}) m lies on the transmitter")

    def _space_operators(self, hankel):
        """Hankel-form coefficient matrices on a common lambda grid: (lam, G, need_tm)."""
        allR = np.concatenate([R for terms, _ in self._terms for _, R, _ in terms])
        base, j0, j1 = dlf.hankel_filter(hankel)
        # 4 extra offsets each side: the degree-7 spline needs 8 grid points
        rgrid, lam, _ = dlf.lagged_grid(base, allR.min(), allR.max(), pad=4)
        nx = rgrid.size
        C0 = dlf.lagged_matrix(j0, nx)
        C1 = dlf.lagged_matrix(j1, nx)
        # Hankel forms: (kernel, bessel order, lambda power)
        forms = {"F1": ("a1", C0, 0), "F2": ("a1", C1, -1), "F3": ("b", C1, 0),
                 "F4": ("r", C1, 1), "F5": ("r", C1, 0), "F6": ("r", C0, 1)}
        nrx = len(self.receivers)
        G = {"a1": np.zeros((nrx, lam.size)), "r": np.zeros((nrx, lam.size)),
             "b": np.zeros((nrx, lam.size))}
        for i, (terms, _) in enumerate(self._terms):
            for form, R, c in terms:
                kern, C, p = forms[form]
                # sum_i w_i f(b_i/r) at grid r, spline in log r, then divide by R
                H = C * lam[None, :] ** p
                S = dlf.spline_matrix(rgrid, R, degree=_SPLINE_DEGREE)
                G[kern][i] += (c / R) @ S @ H
        # pad the wavenumbers to whole SIMD blocks (zero coefficients beyond the filter)
        pad = (-lam.size) % kernel.LANES
        if pad:
            d = np.log(lam[1] / lam[0])
            lam = np.r_[lam, lam[-1] * np.exp(d * np.arange(1, pad + 1))]
            G = {k: np.pad(v, ((0, 0), (0, pad))) for k, v in G.items()}
        G = {k: np.ascontiguousarray(v) for k, v in G.items()}
        return lam, G, bool(np.any(G["b"] != 0))

    def _choose_hankel(self):
        """The short Hankel filter where it is accurate for these receivers and times.

        Stated accuracy test: half-spaces of 1, 10, 100, 1000 and 10000 ohm-m
        computed with key_101_2012 and with key_201_2012 must agree within
        ``hankel_tolerance`` (default 1e-4) of each value (floor: 1e-3 of the curve's peak) at every output;
        otherwise key_201_2012 is used. The short filter fails first at very
        early times of E fields and impulse responses (u = theta r >> 1), where
        the response is a small remainder of the high-frequency spectrum.
        """
        ops = {name: self._space_operators(name) for name in _HANKEL_CHOICE}
        out = {}
        for name, (lam, G, need_tm) in ops.items():
            self._bind(lam, G, need_tm)
            out[name] = np.array([self.predict(LayeredModel.halfspace(r)) for r in _CHECK_RHO])
        a, b = (out[n] for n in _HANKEL_CHOICE)
        peak = np.max(np.abs(b), axis=-1, keepdims=True)
        denom = np.maximum(np.abs(b), 1e-3 * peak)
        with np.errstate(divide="ignore", invalid="ignore"):
            # a curve that vanishes by symmetry (peak 0) takes no part in the test
            dev = float(np.max(np.where(denom > 0, np.abs(a - b) / denom, 0.0)))
        self.hankel_check = dev
        name = _HANKEL_CHOICE[0] if dev <= self.hankel_tolerance else _HANKEL_CHOICE[1]
        self.hankel_name = name
        self._bind(*ops[name])

    def _setup_fourier(self):
        """Time-domain operators per receiver on a common (coarse) frequency grid.

        Each receiver gets the lagged sine/cosine DLF of its filter on a log time
        grid, a spline to its evaluation times and the waveform/gate operator,
        all folded into one matrix over frequency. The kernel is evaluated on a
        coarse log-frequency grid (``freq_per_decade`` inside the band the times
        need, half as dense outside) and the spectrum, divided by omega, is
        carried to each filter's frequencies by a cubic spline in log omega;
        ``freq_per_decade=None`` evaluates the kernel at the filters' own
        frequencies instead (reference-grade, slower).
        """
        u = self._u
        umin = max(u.min(), 1e-9)
        umax = u.max()
        kinds = [0 if rx.kind in ("e", "b") else 1 for rx in self.receivers]
        if self.response == "impulse":
            kinds = [k + 1 for k in kinds]
        fine = {}
        for k in set(kinds):
            name = self.fourier_name
            if name in fine:
                continue
            base, fsin, fcos = dlf.fourier_filter(name)
            tgrid, omega, _ = dlf.lagged_grid(base, umin, umax)
            nt = tgrid.size
            A = self._obs_w @ dlf.spline_weighted_sum(tgrid, np.maximum(u, umin), self._urows,
                                                      self._ucoef, self._obs_w.shape[1])
            Csin = dlf.lagged_matrix(fsin, nt) / tgrid[:, None] * (2 / np.pi)
            Ccos = dlf.lagged_matrix(fcos, nt) / tgrid[:, None] * (2 / np.pi)
            fine[name] = (omega, A, Csin, Ccos)
        # the frequency grid the kernel is evaluated on
        if self.freq_per_decade is None:
            omega_c = np.concatenate([f[0] for f in fine.values()])
        else:
            wlo = min(f[0][0] for f in fine.values())
            whi = max(f[0][-1] for f in fine.values())
            omega_c = _coarse_omega(wlo, whi, 0.1 / umax, 100.0 / umin, self.freq_per_decade,
                                    _OUTER_PER_DECADE)
        self._omega = omega_c
        if self.lowpass is not None:
            b, a = signal.butter(self.lowpass[0], _TWO_PI * self.lowpass[1], analog=True)
        self._D = []
        offset = 0
        blocks = {}
        for name, (omega, A, Csin, Ccos) in fine.items():
            if self.freq_per_decade is None:
                Q = np.zeros((omega.size, omega_c.size))
                Q[:, offset:offset + omega.size] = np.eye(omega.size)
                offset += omega.size
            else:
                Q = omega[:, None] * dlf.spline_matrix(omega_c, omega, degree=_SPLINE_DEGREE) \
                    / omega_c[None, :]
            if self.lowpass is not None:
                _, hlp = signal.freqs(b, a, worN=omega)
            else:
                hlp = np.ones(omega.size, complex)
            # derivative order p: 0 field step-off (cos of -Im F/omega), 1 its time
            # derivative (sin of Im F), 2 the second derivative (cos of omega Im F)
            T = {0: Ccos * (-1.0 / omega)[None, :], 1: Csin, 2: Ccos * omega[None, :]}
            blocks[name] = (A, T, hlp, Q)
        for rx, k in zip(self.receivers, kinds):
            A, T, hlp, Q = blocks[self.fourier_name]
            sgn = -1.0 if self.response == "impulse" else 1.0
            D = sgn * (A @ T[k])
            # Im(F H) = Im F Re H + Re F Im H, F on the coarse grid through Q
            self._D.append(((D * hlp.real[None, :]) @ Q, (D * hlp.imag[None, :]) @ Q))
        self._scale = np.array([MU0 if rx.kind in ("b", "dbdt") else 1.0
                                for rx in self.receivers])

    # ---------------------------------------------------------------- evaluate
    def _setup_evaluate(self):
        """Stacked time operators and flags for the evaluation methods (set-up, once)."""
        self._Dre = np.stack([d[0] for d in self._D])              # (nr, n_out, nw)
        self._Dim = np.stack([d[1] for d in self._D])
        self._use_re = self.lowpass is not None                    # Re F only through a filter
        kinds = [rx.kind for rx in self.receivers]
        dc_row = np.zeros((len(kinds), self._n_out))
        for i, k in enumerate(kinds):
            if k in ("e", "b"):
                dc_row[i] = self._dc_coef
        self._dc_row = dc_row * self._scale[:, None]
        self._needs_dc = bool(np.any(dc_row != 0))
        self._iwm = 1j * self._omega * MU0

    def _bind(self, lam, G, need_tm):
        """Fix the kernel's model-independent arguments (wavenumbers, coefficient matrices)."""
        self._lam, self._G, self._need_tm = lam, G, need_tm
        self._kargs = (lam, G["r"], G["a1"], G["b"], need_tm)

    def _kernel(self, omega, res, thk, jac=False, jac_thk=False):
        lam, Gr, Ga, Gb, need_tm = self._kargs
        return fused_spectra(lam, omega, res, thk, Gr, Ga, Gb, need_tm=need_tm, jac=jac,
                             jac_thk=jac_thk)

    def _time_domain(self, F):
        """Responses (..., nr, n_out) from spectra F (..., nw, nr), without the DC terms."""
        out = (self._Dre @ np.swapaxes(F.imag, -1, -2)[..., None])[..., 0]
        if self._use_re:
            out += (self._Dim @ np.swapaxes(F.real, -1, -2)[..., None])[..., 0]
        return out * self._scale[:, None]

    def _spectra(self, res, F):
        """Add the closed-form parts (top-layer galvanic DC, free-space terms) in place."""
        an = self._analytic
        F += res[0] * an[:, 0] + self._iwm[:, None] * an[:, 1] + an[:, 2]
        return F

    def _dc_values(self, res, thk, jac=False, jac_thk=False):
        """DC (omega = 0) values per receiver (fields, not rates), and their derivatives."""
        F, dF = self._kernel(np.zeros(1), res, thk, jac, jac_thk)
        an = self._analytic
        dc = F[0].real + res[0] * an[:, 0] + an[:, 2]
        if not jac:
            return dc, None
        ddc = dF[:, 0].real.copy()
        ddc[0] += res[0] * an[:, 0]
        return dc, ddc

    def predict(self, model: LayeredModel) -> np.ndarray:
        """Responses (n_receivers, n_times) per ampere: E [V/m], B [T], dB/dt [T/s]."""
        if not isinstance(model, LayeredModel):
            raise TemInputError("model: must be a tem.forward.LayeredModel")
        res, thk = model.resistivity, model.thickness
        F, _ = self._kernel(self._omega, res, thk)
        out = self._time_domain(self._spectra(res, F))
        if self._needs_dc:
            out += self._dc_values(res, thk)[0][:, None] * self._dc_row
        return out

    def predict_many(self, resistivity, thickness) -> np.ndarray:
        """Responses of many models with the same number of layers, in one call.

        Parameters
        ----------
        resistivity : array_like (n_models, n_layers)
            Resistivities [ohm-m], half-space last.
        thickness : array_like (n_models, n_layers - 1)
            Layer thicknesses [m].

        Returns
        -------
        ndarray (n_models, n_receivers, n_times): equal to ``predict`` model by model.
        The models are spread over numba's threads; each model's arithmetic is the
        same as in :meth:`predict`.
        """
        res = np.atleast_2d(np.asarray(resistivity, dtype=float))
        thk = np.asarray(thickness, dtype=float).reshape(res.shape[0], -1)
        if res.ndim != 2 or thk.shape != (res.shape[0], res.shape[1] - 1):
            raise TemInputError("resistivity/thickness: expected arrays (n_models, L) and "
                             "(n_models, L - 1)")
        if not np.all(np.isfinite(res)) or np.any(res <= 0):
            raise TemInputError("resistivity: every value must be positive and finite (ohm-m)")
        if not np.all(np.isfinite(thk)) or np.any(thk <= 0):
            raise TemInputError("thickness: every layer thickness must be positive and finite (m)")
        lam, Gr, Ga, Gb, need_tm = self._kargs
        F = fused_spectra_many(lam, self._omega, res, thk, Gr, Ga, Gb, need_tm=need_tm)
        an = self._analytic
        F += res[:, :1, None] * an[:, 0][None, None, :]
        F += self._iwm[:, None] * an[:, 1] + an[:, 2]
        out = self._time_domain(F)
        if self._needs_dc:
            D = fused_spectra_many(lam, np.zeros(1), res, thk, Gr, Ga, Gb, need_tm=need_tm)[:, 0]
            dc = D.real + res[:, :1] * an[:, 0] + an[:, 2]
            out += dc[:, :, None] * self._dc_row
        return out

    def jacobian(self, model: LayeredModel, thickness: bool = False):
        """Responses and their derivatives.

        Returns
        -------
        d : ndarray (n_receivers, n_times)
        J : ndarray (n_receivers, n_times, n_params)
            Derivatives with respect to ln(resistivity) of every layer (half-space
            last) and, with ``thickness=True``, ln(thickness) of every layer.
        """
        if not isinstance(model, LayeredModel):
            raise TemInputError("model: must be a tem.forward.LayeredModel")
        res, thk = model.resistivity, model.thickness
        F, dF = self._kernel(self._omega, res, thk, jac=True, jac_thk=thickness)
        dF[0] += res[0] * self._analytic[:, 0]
        d = self._time_domain(self._spectra(res, F))
        J = np.empty((len(self.receivers), self._n_out, dF.shape[0]))   # (nr, n_out, npar)
        for r in range(J.shape[0]):
            J[r] = self._Dre[r] @ dF[:, :, r].imag.T
            if self._use_re:
                J[r] += self._Dim[r] @ dF[:, :, r].real.T
        J *= self._scale[:, None, None]
        if self._needs_dc:
            dc, ddc = self._dc_values(res, thk, jac=True, jac_thk=thickness)
            d += dc[:, None] * self._dc_row
            J += self._dc_row[:, :, None] * ddc.T[:, None, :]
        return d, J

    def dc(self, model: LayeredModel) -> np.ndarray:
        """Steady (DC) fields per receiver while 1 A flows: E [V/m] or B [T]; 0 for dB/dt."""
        if not isinstance(model, LayeredModel):
            raise TemInputError("model: must be a tem.forward.LayeredModel")
        dc = self._dc_values(model.resistivity, model.thickness)[0]
        kinds = np.array([rx.kind for rx in self.receivers])
        return np.where(kinds == "dbdt", 0.0, dc * self._scale)

    # ------------------------------------------------------------ conveniences
    @property
    def n_frequencies(self):
        return self._omega.size

    @property
    def n_wavenumbers(self):
        return self._lam.size

    @classmethod
    def from_sounding(cls, ds, channels=None, source=None, **kw):
        """Simulation matching a gated-sounding Dataset (docs/data-model.md).

        ``channels`` selects channel indices; ``source`` names the file in errors.
        """
        from .sounding import simulation_from_sounding
        return simulation_from_sounding(cls, ds, channels=channels, source=source, **kw)


def _coarse_omega(wlo, whi, core_lo, core_hi, per_decade, outer_per_decade):
    """Log-frequency grid: ``per_decade`` in [core_lo, core_hi], ``outer_per_decade`` outside."""
    step = np.log(10.0) / per_decade
    lo, hi = np.log(max(core_lo, wlo)), np.log(min(core_hi, whi))
    core = np.arange(lo, hi + step, step)
    out_step = np.log(10.0) / min(outer_per_decade, per_decade)
    left = np.arange(core[0] - out_step, np.log(wlo) - out_step, -out_step)[::-1]
    right = np.arange(core[-1] + out_step, np.log(whi) + out_step, out_step)
    return np.exp(np.concatenate([left, core, right]))


def _check_lowpass(lowpass):
    if lowpass is None:
        return None
    try:
        order, fc = int(lowpass[0]), float(lowpass[1])
    except (TypeError, ValueError, IndexError):
        raise TemInputError("lowpass: expected (order, cutoff_hz)") from None
    if order <= 0:
        return None
    if not np.isfinite(fc) or fc <= 0:
        raise TemInputError("lowpass: cut-off frequency must be positive (Hz)")
    return order, fc
