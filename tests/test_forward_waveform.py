"""dB/dt under a bipolar waveform with linear ramps, on-time and off-time, against empymod.

The reference is built here, independently of tem's waveform code: by
superposition (Ward & Hohmann 1988, "Electromagnetic theory for geophysical
applications", in Nabighian (ed.), Electromagnetic Methods in Applied Geophysics
vol. 1, SEG: the response to any current waveform is the convolution of its
derivative with the step response) the field is
b(t) = sum over ramps of m int_{max(t - t1, 0)}^{max(t - t0, 0)} b_on(u) du
with the step-on response b_on(u) = DC - s(u) (s: step-off response, from
empymod; DC: empymod at 1e-9 Hz), summed over past half-cycles with
alternating sign. Its time derivative follows from Leibniz's rule alone:
dB/dt(t) = sum over ramps of m [b_on(t - t0) - b_on(t - t1)] (terms with a
non-positive argument are zero), so no derivative of s and no value at 0+
enters the reference.
"""
import numpy as np
import pytest

from tem.forward import LayeredModel, PolygonLoop, Receiver, Simulation, Waveform, Wire

from empymod_ref import MU0, Z, _model, empymod

MODEL = LayeredModel([20.0, 900.0, 600.0], [30.0, 500.0, 8.0, 2000.0])
LOOP = [(-50.0, -50.0), (50.0, -50.0), (50.0, 50.0), (-50.0, 50.0)]
WIRE = ((-500.0, 0.0), (500.0, 0.0))
FB, RON, ROFF = 25.0, 1e-3, 5e-4
HP = 0.5 / FB
ON = 0.5 * HP
# off-time; next (negative) pulse: during its switch-on ramp, flat top, switch-off ramp
T_OFF = np.array([1e-4, 1e-3, 5e-3])
T_RAMP = np.array([ON + 2e-4, ON + 5e-4, ON + 9e-4, HP - 3e-4, HP - 1e-4])
T_FLAT = np.array([ON + 3e-3])
T = np.r_[T_OFF, T_RAMP, T_FLAT]


def _bz(sides, rx, freqtime, signal):
    """B_z [T per A] ours (z up) of straight sides [(a, b)], empymod at z = 1e-3 m."""
    total = 0.0
    for a, b in sides:
        m = _model(MODEL.thickness, MODEL.resistivity, freqtime)
        out = empymod.bipole([a[0], b[0], -a[1], -b[1], Z, Z], [rx[0], -rx[1], Z, 0.0, 90.0],
                             signal=signal, mrec=True, srcpts=11, **m)
        total = total - MU0 * np.asarray(out)
    return total


def _reference(sides, rx, wf, t, n_half=400):
    dc = float(np.real(np.squeeze(_bz(sides, rx, [1e-9], None))))
    t0s, t1s, slopes = wf.segments()
    u, c, row = [], [], []
    for i, ti in enumerate(t):
        for k in range(-1, n_half):
            tk = ti + k * HP
            w = (-1.0) ** k * (0.5 if k == n_half - 1 else 1.0)   # last term halved (alternating)
            for a, b, m in zip(t0s, t1s, slopes):
                for edge, sgn in ((a, 1.0), (b, -1.0)):
                    if tk - edge > 0:
                        u.append(tk - edge)
                        c.append(w * m * sgn)
                        row.append(i)
    u, c, row = np.array(u), np.array(c), np.array(row)
    b_on = dc - _bz(sides, rx, u, -1)
    return np.bincount(row, c * b_on, minlength=len(t)), dc


@pytest.mark.parametrize("geom", ["loop", "wire"])
def test_bipolar_dbzdt_on_and_off_time_against_empymod(geom):
    wf = Waveform.bipolar(FB, 0.5, ramp_on=RON, ramp_off=ROFF)
    if geom == "loop":
        src, rx = PolygonLoop(LOOP), (0.0, 0.0)
        sides = [(LOOP[i], LOOP[(i + 1) % 4]) for i in range(4)]
    else:
        src, rx = Wire(*WIRE), (1000.0, 1732.0508)
        sides = [WIRE]
    d = Simulation(src, [Receiver("dbzdt", rx)], times=T, waveform=wf).predict(MODEL)[0]
    ref, dc = _reference(sides, rx, wf, T)
    # off-time and flat top: the accuracy of the step-off checks (tests/test_forward_empymod.py
    # reaches ~1e-4 at these times); during ramps the response is ~ slope x DC field
    flat = np.r_[np.arange(T_OFF.size), T.size - 1]
    ramp = np.arange(T_OFF.size, T_OFF.size + T_RAMP.size)
    np.testing.assert_allclose(d[flat], ref[flat], rtol=5e-4)
    np.testing.assert_allclose(d[ramp], ref[ramp], rtol=1e-4)
    # the check can fail: a DC rate term I'(t) DC counted twice (as before this test)
    # moves every ramp value by far more than the tolerance
    slope = np.r_[np.full(3, 1.0 / RON), np.full(2, 1.0 / ROFF)]
    assert np.min(slope * abs(dc) / np.abs(ref[ramp])) > 0.5
