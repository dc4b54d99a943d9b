"""Gates: log spacing, window weights shared with the forward model, honest gate errors."""
import numpy as np
import pytest

from tem.errors import TemInputError
from tem.forward.gatewindow import weights
from tem.gate.windows import GateTable, gate_matrix, gate_values, log_gates, usable_gates
from tem.stack import StackSettings, stack_windows

FS = 4000.0
M = 2000
T = (np.arange(M) + 0.5) / FS


def test_log_spacing_and_edges_between_samples():
    tab = log_gates(T, 1e-3, 0.4, 9, "boxcar")
    h = 1 / FS
    # edges sit half-way between samples
    assert np.allclose(((tab.open - T[0]) / h) % 1, 0.5) and np.allclose(((tab.close - T[0]) / h) % 1, 0.5)
    # late gates follow 9 per decade (common practice, no source); early ones widened to 1 sample
    ratio = tab.close / tab.open
    assert np.allclose(ratio[-5:], 10 ** (1 / 9), rtol=0.02)
    assert np.all(tab.close - tab.open >= h * 0.999)
    tab8 = log_gates(T, 1e-3, 0.4, per_decade=8, shape="taper")
    assert np.all(np.round((tab8.close - tab8.open) * FS) >= 6)


def test_gate_matrix_uses_forward_weights():
    tab = log_gates(T, 2e-3, 0.4, per_decade=6, shape="taper")
    W = gate_matrix(T, tab)
    w = weights("taper", T[None, :], tab.open[:, None], tab.close[:, None])
    np.testing.assert_allclose(W, w / w.sum(axis=1, keepdims=True))
    assert np.allclose(W.sum(axis=1), 1.0)


@pytest.mark.parametrize("shape", ["boxcar", "taper"])
def test_gate_average_matches_continuous_integral(shape):
    # f = t^-2.5 (late dB/dt decay of a half-space, Ward & Hohmann 1988): the discrete gate must
    # match the continuous window average the forward model computes (Gauss-Legendre here)
    tab = log_gates(T, 1e-3, 0.4, per_decade=9, shape=shape)
    W = gate_matrix(T, tab)
    f = T ** -2.5
    x, wq = np.polynomial.legendre.leggauss(200)
    ref = []
    for a, b in zip(tab.open, tab.close):
        tq = a + (x + 1) / 2 * (b - a)
        ww = weights(shape, tq, a, b) * wq
        ref.append(np.sum(ww * tq ** -2.5) / np.sum(ww))
    rel = np.abs(W @ f / np.array(ref) - 1)
    # Euler-Maclaurin corrected midpoint rule (boxcar) or a vanishing window (taper):
    # O((h/t)^4); the first gates at 1 ms (h/t = 0.25) are the worst
    assert rel.max() < 2e-3 and np.median(rel) < 1e-5


def test_gate_errors_with_correlated_noise_monte_carlo():
    # low-pass (correlated) noise: sample errors alone would understate long-gate errors;
    # the batch influence sums must give normalised residuals with sd ~ 1 (0.7-1.5 accepted)
    rng = np.random.default_rng(3)
    n = 200
    sig = 1e-3 * np.exp(-T / 0.02)
    pol = 1 - 2 * (np.arange(n) % 2)
    tab = log_gates(T, 1e-3, 0.45, 8, "boxcar")
    W = gate_matrix(T, tab)
    truth = W @ sig
    z = []
    kern = np.exp(-np.arange(40) / 10.0)
    for _ in range(8):
        white = rng.normal(0, 1e-3, n * M + 39)
        noise = np.convolve(white, kern, mode="valid").reshape(n, M)
        r = stack_windows(pol[:, None] * sig + noise, settings=StackSettings())
        v, e = gate_values(r, T, tab)
        z.append((v - truth) / e)
        naive = np.sqrt((W ** 2) @ r.error ** 2)
    z = np.concatenate(z)
    assert 0.8 < z.std() < 1.25
    assert np.median(e / naive) > 1.5      # correlation matters for long gates


def test_usable_flags_and_bad_tables():
    u = usable_gates([1.0, 0.1, 5.0], [0.1, 0.1, 0.1], [0.1, 0.2, 0.9], [0.2, 0.3, 1.1], 1.0, 2.0)
    assert u.tolist() == [True, False, False]
    with pytest.raises(TemInputError, match="gates"):
        GateTable([0.2], [0.1])
    with pytest.raises(TemInputError, match="contains no sample"):
        gate_matrix(T, GateTable([1e-5], [2e-5]))


def test_nan_per_decade_is_an_input_error():
    # was a ValueError traceback (int(nan)) from the gate count
    with pytest.raises(TemInputError, match="per_decade"):
        log_gates(T, 1e-3, 0.4, float("nan"), "boxcar")
    with pytest.raises(TemInputError, match="t_max"):
        log_gates(T, 1e-3, float("nan"), 9.0, "boxcar")


@pytest.mark.parametrize("opts, field", [
    (["--per-decade", "nan"], "--per-decade"),
    (["--per-decade", "0"], "--per-decade"),
    (["--t-min", "0.5", "--t-max", "0.1"], "--t-max"),
    (["--t-min", "-1"], "--t-min"),
    (["--snr-min", "-1"], "--snr-min"),
])
def test_cli_bad_option_is_one_error_exit_2(tmp_path, capsys, opts, field):
    # option errors used to be reported once per station with exit status 1
    from tem.cli import main
    src = tmp_path / "stacked"
    src.mkdir()
    for name in ("EM01.nc", "EM02.nc"):
        (src / name).write_bytes(b"not read: options are checked first")
    rc = main(["gate", str(src), "--out", str(tmp_path / "g")] + opts)
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and err[0].startswith(f"tem gate: error: {field}: ")
    assert not (tmp_path / "g").exists()


def test_a_nan_sample_spoils_only_the_gates_that_weigh_it():
    # a stacked sample that is not a number (clipped through the switch-off ramp at t = 0,
    # found by an independent review) once blanked every gate of the channel: a matrix
    # product spreads NaN to every row. Now only gates with weight on it are NaN.
    rng = np.random.default_rng(4)
    n = 40
    pol = 1 - 2 * (np.arange(n) % 2)
    d = pol[:, None] * np.exp(-T / 0.01)[None, :] + 1e-4 * rng.standard_normal((n, M))
    res = stack_windows(d)
    tab = log_gates(T, 1e-3, 0.4, per_decade=9, shape="boxcar")
    clean_v, clean_e = gate_values(res, T, tab)
    res.value = res.value.copy()
    res.value[0] = np.nan                      # outside every gate
    v, e = gate_values(res, T, tab)
    np.testing.assert_array_equal(v, clean_v)
    np.testing.assert_array_equal(e, clean_e)
    W = gate_matrix(T, tab)
    k = int(np.flatnonzero((W[10] != 0) & ((W != 0).sum(axis=0) == 1))[0])   # in gate 10 only
    res.value[k] = np.nan
    v, e = gate_values(res, T, tab)
    assert np.isnan(v[10]) and np.isnan(e[10])
    assert np.all(np.isfinite(np.delete(v, 10))) and np.all(np.isfinite(np.delete(e, 10)))
    assert not usable_gates(v, e, tab.open, tab.close, 1.0, 2.0)[10]
