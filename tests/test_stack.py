"""Stacking: drift cancellation, robust estimators, honest errors, mains rejection, timing.

Test signal: a placeholder exponential decay (tests only; the engine is used
in tests/test_synth.py).
"""
import numpy as np
import pytest

from tem.errors import TemInputError
from tem.stack import (ESTIMATORS, StackSettings, combine_three, detect_switch_times,
                       plain_bipolar_stack, stack_windows, window_layout)

FS = 4000.0
M = 400                                  # half-period 0.1 s (base 5 Hz)
T = (np.arange(M) + 0.5) / FS
SIG = 1e-3 * np.exp(-T / 0.01)


def record(n, extra=None):
    pol = 1 - 2 * (np.arange(n) % 2)
    d = pol[:, None] * SIG[None, :]
    return d if extra is None else d + extra


def tau(n):
    return (np.arange(n)[:, None] * M + np.arange(M)[None, :]) / FS


@pytest.mark.parametrize("est", ESTIMATORS)
@pytest.mark.parametrize("detrend", [True, False])
def test_offset_and_linear_drift_cancel_exactly(est, detrend):
    # REFERENCE.md 6.2 (three-window combination kills c0 + c1 t exactly)
    n = 60
    d = record(n, 0.7 + 0.03 * tau(n))
    r = stack_windows(d, settings=StackSettings(estimator=est, detrend=detrend))
    assert np.max(np.abs(r.value - SIG)) < 1e-15 * 1e3  # rounding of 0.7 V offsets
    assert r.counts["samples_outlier"] == 0 and r.counts["rejected_noisy"] == 0


def test_plain_stack_leaves_half_drift():
    # REFERENCE.md 6.1: plain bipolar stack leaves -c1/2 (c1 = drift per half-period)
    n = 40
    c1 = 2e-5
    drift = c1 * np.repeat(np.arange(n)[:, None], M, axis=1)
    s = plain_bipolar_stack(record(n, drift))
    assert np.allclose(s - SIG, -c1 / 2, rtol=1e-9)


def test_quadratic_drift_removed_by_detrend():
    # without the baseline each three-window estimate keeps 2 c2 (T/2)^2 / 4 of a quadratic
    # drift c2 t^2, alternating in sign (REFERENCE.md 6.2); the period-mean baseline is exact
    # for quadratic drift (docs/stacking.md), so every estimate is clean
    from tem.stack import _detrend
    n = 60
    c2 = 1e-3
    d = record(n, c2 * tau(n) ** 2)
    raw = combine_three(d) - SIG
    assert np.allclose(np.abs(raw), 2 * c2 * (M / FS) ** 2 / 4, rtol=1e-6)
    clean = combine_three(_detrend(d, (np.arange(M) + 0.5) / M)) - SIG
    assert np.max(np.abs(clean)) < 1e-13
    r = stack_windows(d)
    assert np.max(np.abs(r.value - SIG)) < 1e-13


def test_inputs_not_mutated():
    d = record(20, 0.1)
    copy = d.copy()
    stack_windows(d)
    combine_three(d)
    np.testing.assert_array_equal(d, copy)


def test_errors_honest_monte_carlo():
    # normalised residuals should have sd ~ 1 (accept 0.7-1.5; batch-means estimate with
    # B = 19 batches has a t(18) spread, sd 1.06; common practice, no source)
    rng = np.random.default_rng(4)
    n = 200
    z = {e: [] for e in ("huber", "mean", "trimmed")}
    for _ in range(12):
        noise = rng.normal(0, 2e-4, (n, M)) + 0.01 * tau(n)
        for e in z:
            r = stack_windows(record(n, noise), settings=StackSettings(estimator=e))
            z[e].append((r.value - SIG) / r.error)
    for e, v in z.items():
        sd = np.std(np.concatenate(v))
        assert 0.8 < sd < 1.25, (e, sd)


def test_robust_beats_mean_with_spikes():
    # sferic-like spikes: heavy tails; Huber (Huber 1964) should beat the mean in rms error
    rng = np.random.default_rng(7)
    n = 200
    noise = rng.normal(0, 2e-4, (n, M))
    flat = noise.ravel()
    idx = rng.integers(0, flat.size, 300)
    flat[idx] += rng.choice([-1, 1], 300) * rng.lognormal(np.log(2e-2), 1.0, 300)
    d = record(n, noise.reshape(n, M) + 0.3 + 0.02 * tau(n))
    rms = {}
    for e in ESTIMATORS:
        r = stack_windows(d, settings=StackSettings(estimator=e))
        rms[e] = np.sqrt(np.mean((r.value - SIG) ** 2))
    assert rms["huber"] < 0.5 * rms["mean"]
    assert rms["trimmed"] < rms["mean"] and rms["median"] < rms["mean"]
    r = stack_windows(d)
    assert r.counts["samples_outlier"] > 300  # each spike touches up to 3 estimates


@pytest.mark.parametrize("mains", [50.0, 60.0])
def test_mains_alone_rejected_40db(mains):
    # REFERENCE.md 6.4: f_b = 5 Hz puts 50 and 60 Hz (and harmonics) on nulls; with slowly
    # drifting amplitude (10 %/min) and phase (0.3 rad/min) the residual must be < -40 dB
    rng = np.random.default_rng(1)
    n = 600                                   # 60 s at f_b = 5 Hz
    t = tau(n)
    amp = 1e-2 * (1 + 0.1 * t / 60)
    ph = 0.3 * t / 60 + 0.05 * np.sin(2 * np.pi * t / 37)
    x = sum(a * amp * np.cos(2 * np.pi * h * mains * t + h * ph + rng.uniform(0, 6))
            for h, a in ((1, 1.0), (3, 0.3), (5, 0.1)))
    for est in ("huber", "mean"):
        r = stack_windows(x, settings=StackSettings(estimator=est))
        ratio_db = 20 * np.log10(np.max(np.abs(r.value)) / 1e-2)
        assert ratio_db < -40, (est, ratio_db)


def test_mains_rule_violated_passes_mains():
    # REFERENCE.md 6.4: 50/f_b odd (f_b = 50/3 Hz, half-period 0.03 s) passes 50 Hz fully
    m = 120
    n = 200
    t = (np.arange(n)[:, None] * m + np.arange(m)[None, :]) / FS
    x = np.cos(2 * np.pi * 50 * t)
    r = stack_windows(x, settings=StackSettings(estimator="mean", detrend=False))
    assert np.max(np.abs(r.value)) > 0.9


def test_clipped_samples_rejected():
    n = 40
    d = record(n, 0.01)
    clip = np.zeros(d.shape, bool)
    clip[5, 10] = True
    d[5, 10] = 50.0
    r = stack_windows(d, settings=StackSettings(estimator="mean"), clip_mask=clip)
    assert r.counts["samples_clipped"] == 3
    # the clipped 50 V would shift the mean by ~0.2 V; what remains is the baseline seeing
    # M-1 instead of M signal samples in one window (~SIG/M/n_est)
    assert abs(r.value[10] - SIG[10]) < 1e-7


def test_nan_sample_is_an_input_error():
    d = record(20)
    d[3, 7] = np.nan
    with pytest.raises(TemInputError, match="samples: NaN"):
        stack_windows(d)


def test_window_layout_checks():
    first, m, nw, delay, k = window_layout(40000, FS, -3.00005, 0.1)
    assert m == 400 and k == 31 and delay == pytest.approx(0.2 / FS, abs=1e-12)
    with pytest.raises(TemInputError, match="n_samples: recording of"):
        window_layout(700, FS, 0.0, 0.1, file="x.npy")
    with pytest.raises(TemInputError, match="first_switch_off: switch times fall outside"):
        window_layout(40000, FS, 9.8, 0.1, file="x.npy")
    with pytest.raises(TemInputError, match="sample_rate"):
        window_layout(40000, 4001.0, 0.0, 0.1)


@pytest.mark.parametrize("duty", [0.5, 1.0])
def test_switch_detection(duty):
    from tem.forward import Waveform
    wf = Waveform.bipolar(5.0, duty, 1e-3, 5e-4)
    t = np.arange(int(4.0 * FS)) / FS
    t_first = 0.0371
    ph = (t - t_first) % 0.2
    cur = np.where(ph < 0.1, -wf.current_at(ph - 0.1), wf.current_at(ph - 0.2))
    cur += np.random.default_rng(0).normal(0, 1e-3, t.size)
    t0, period, res, _ = detect_switch_times(cur, FS, 0.1, 5e-4, duty)
    # duty 0.5: crossing mid-ramp, exact for a linear ramp; duty 1: the kink at the zero
    # crossing biases linear interpolation by a fraction of a sample (1/4 sample allowed)
    tol = 2e-6 if duty < 1 else 0.25 / FS
    assert abs(((t0 - t_first + 0.1) % 0.2) - 0.1) < tol
    assert period == pytest.approx(0.2, rel=1e-6) and res < 5e-6
