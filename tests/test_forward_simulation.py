"""Waveform, gates, receiver filter, Jacobian and input checks of the forward engine.

The independent checks use the closed-form half-space HED field (Ward &
Hohmann 1988, via tem.forward.halfspace, itself tested against published
values) integrated with scipy's adaptive quadrature or filtered with scipy's
own linear-system simulation, so none of tem's transforms are involved.
"""
import numpy as np
import pytest
from scipy import integrate, signal

from tem.forward import LayeredModel, PolygonLoop, Receiver, Simulation, Waveform, Wire
from tem.forward import halfspace as hs

RHO = 100.0
POS = (1000.0, 300.0)
DS = 2.0
WIRE = Wire((-1.0, 0.0), (1.0, 0.0))   # an HED of moment 2 A m to (L/r)^2 ~ 4e-6


def ex_off(t):
    return hs.hed_ex_stepoff(RHO, np.asarray(t, float), *POS, moment=DS)


def ex_dc():
    x, y = POS
    r = np.hypot(x, y)
    return RHO * DS / (2 * np.pi * r ** 3) * (3 * x * x / r ** 2 - 1)   # Telford et al. 1990


def test_gate_averages_match_quadrature_of_closed_form():
    g0 = np.array([1e-4, 1e-3, 1e-2])
    g1 = g0 * 1.6
    for shape in ("boxcar", "taper"):
        sim = Simulation(WIRE, [Receiver("ex", POS)], gates=(g0, g1), gate_shape=shape)
        d = sim.predict(LayeredModel.halfspace(RHO))[0]
        ref = []
        for a, b in zip(g0, g1):
            w = (lambda t: 1.0) if shape == "boxcar" else \
                (lambda t, a=a, b=b: np.sin(np.pi * (t - a) / (b - a)) ** 2)
            num = integrate.quad(lambda t: w(t) * ex_off(t), a, b, epsrel=1e-10)[0]
            den = integrate.quad(w, a, b, epsrel=1e-10)[0]
            ref.append(num / den)
        np.testing.assert_allclose(d, ref, rtol=5e-4)


def test_periodic_bipolar_waveform_matches_brute_force_superposition():
    # 25 Hz bipolar, 50 % duty, 0.2 ms on-ramp, 0.1 ms off-ramp; the reference sums
    # 400 past half-cycles of ramp integrals of the closed-form step-off with quad
    fb, ron, roff = 25.0, 2e-4, 1e-4
    wf = Waveform.bipolar(fb, 0.5, ramp_on=ron, ramp_off=roff)
    t = np.array([5e-5, 2e-4, 1e-3, 5e-3])
    d = Simulation(WIRE, [Receiver("ex", POS)], times=t, waveform=wf).predict(
        LayeredModel.halfspace(RHO))[0]
    hp = 0.5 / fb
    on = 0.5 * hp
    segs = [(-on, -on + ron, 1.0 / ron), (-roff, 0.0, -1.0 / roff)]
    ref = np.zeros(t.size)
    for i, ti in enumerate(t):
        total = 0.0
        for k in range(400):
            tk = ti + k * hp
            for a, b, m in segs:
                total += -((-1) ** k) * m * integrate.quad(ex_off, tk - b, tk - a, epsrel=1e-11)[0]
        ref[i] = total
    np.testing.assert_allclose(d, ref, rtol=1e-3)
    # the earlier half-cycles matter: a single ramped pulse differs by more than 1 %
    single = Simulation(WIRE, [Receiver("ex", POS)], times=t,
                        waveform=Waveform(wf.times, wf.current, half_period=None)).predict(
        LayeredModel.halfspace(RHO))[0]
    assert np.max(np.abs(single / ref - 1)) > 1e-2


def test_lowpass_matches_scipy_lsim():
    # 4th-order Butterworth at 5 kHz on the step-off E_x; scipy simulates the same analog filter
    order, fc = 4, 5e3
    t_eval = np.array([2e-4, 5e-4, 1e-3, 3e-3])
    d = Simulation(WIRE, [Receiver("ex", POS)], times=t_eval, lowpass=(order, fc)).predict(
        LayeredModel.halfspace(RHO))[0]
    dt = 2e-7
    tt = np.arange(-2e-3, 3.2e-3, dt)
    x = np.where(tt > 0, ex_off(np.maximum(tt, 1e-12)), ex_dc())
    b, a = signal.butter(order, 2 * np.pi * fc, analog=True)
    # start from rest: subtract the DC; lsim wants times from 0
    _, y, _ = signal.lsim((b, a), x - ex_dc(), tt - tt[0])
    y = y + ex_dc()
    ref = np.interp(t_eval, tt, y)
    np.testing.assert_allclose(d, ref, rtol=2e-3)
    # and the filter changes early times visibly
    raw = ex_off(t_eval)
    assert abs(d[0] / raw[0] - 1) > 1e-3


def test_impulse_is_minus_derivative_of_step_off():
    t = np.geomspace(1e-4, 1e-1, 7)
    imp = Simulation(WIRE, [Receiver("ex", POS)], times=t, response="impulse").predict(
        LayeredModel.halfspace(RHO))[0]
    h = 1e-4
    deriv = (ex_off(t * (1 + h)) - ex_off(t * (1 - h))) / (2 * h * t)
    np.testing.assert_allclose(imp, -deriv, rtol=2e-3, atol=1e-4 * np.abs(deriv).max())


@pytest.mark.parametrize("thickness", [False, True])
def test_jacobian_matches_finite_differences(thickness):
    m = LayeredModel([20.0, 900.0, 600.0], [30.0, 500.0, 8.0, 2000.0])
    g = np.geomspace(1e-3, 1.0, 13)
    wf = Waveform.bipolar(0.25, 0.5, ramp_on=1e-3, ramp_off=5e-4)
    sim = Simulation(Wire((-750, 800), (750, 800)), [Receiver("ex", (2500, 0)),
                                                     Receiver("dbzdt", (2500, 0))],
                     gates=(g[:-1], g[1:]), waveform=wf)
    d, J = sim.jacobian(m, thickness=thickness)
    np.testing.assert_allclose(d, sim.predict(m), rtol=1e-12)
    params = np.r_[np.log(m.resistivity), np.log(m.thickness)] if thickness else np.log(m.resistivity)
    assert J.shape == d.shape + (params.size,)
    nres = m.resistivity.size
    for k in range(params.size):
        e = 1e-5
        p1, p2 = params.copy(), params.copy()
        p1[k] += e
        p2[k] -= e

        def model(p):
            thk = np.exp(p[nres:]) if thickness else m.thickness
            return LayeredModel(thk, np.exp(p[:nres]))

        fd = (sim.predict(model(p1)) - sim.predict(model(p2))) / (2 * e)
        scale = np.abs(J[:, :, k]).max(axis=1, keepdims=True)
        assert np.max(np.abs(fd - J[:, :, k]) / scale) < 1e-5, f"parameter {k}"


@pytest.mark.parametrize("kwargs,field", [
    (dict(thickness=[10.0], resistivity=[-5.0, 10.0]), "resistivity"),
    (dict(thickness=[10.0], resistivity=[np.nan, 10.0]), "resistivity"),
    (dict(thickness=[0.0], resistivity=[5.0, 10.0]), "thickness"),
    (dict(thickness=[np.inf], resistivity=[5.0, 10.0]), "thickness"),
    (dict(thickness=[10.0, 5.0], resistivity=[5.0, 10.0]), "resistivity"),
])
def test_bad_models_name_the_field(kwargs, field):
    with pytest.raises(ValueError, match=field):
        LayeredModel(**kwargs)


def test_bad_simulation_inputs_name_the_field():
    w = Wire((-500, 0), (500, 0))
    with pytest.raises(ValueError, match="times"):
        Simulation(w, [Receiver("ex", (2000, 0))], times=[0.0, 1e-3])
    with pytest.raises(ValueError, match="times"):
        Simulation(w, [Receiver("ex", (2000, 0))], times=[np.nan])
    with pytest.raises(ValueError, match="receivers"):
        Simulation(w, [Receiver("ex", (100.0, 0.0))], times=[1e-3])
    with pytest.raises(ValueError, match="component"):
        Receiver("hz", (0, 0))
    with pytest.raises(ValueError, match="gates"):
        Simulation(w, [Receiver("ex", (2000, 0))], gates=([1e-3], [1e-4]))
    with pytest.raises(ValueError, match="response"):
        Simulation(w, [Receiver("ex", (2000, 0))], times=[1e-3], response="ramp")
    with pytest.raises(ValueError, match="waveform"):
        Simulation(w, [Receiver("ex", (2000, 0))], times=[1e-3], response="waveform")
    with pytest.raises(ValueError, match="duty_cycle"):
        Waveform.bipolar(1.0, duty_cycle=1.5)
    for tol in (0.0, np.nan, 0.5):
        with pytest.raises(ValueError, match="hankel_tolerance"):
            Simulation(w, [Receiver("ex", (2000, 0))], times=[1e-3], hankel_tolerance=tol)


def test_bent_wire_is_the_sum_of_its_straight_pieces():
    # superposition: a -> c -> b equals wire a -> c plus wire c -> b (the currents at c cancel);
    # each straight wire is checked against empymod in test_forward_empymod.py
    m = LayeredModel([20.0, 900.0, 600.0], [30.0, 500.0, 8.0, 2000.0])
    t = np.geomspace(1e-3, 1.0, 9)
    rx = [Receiver("ex", (2500.0, -300.0)), Receiver("ey", (2500.0, -300.0)),
          Receiver("dbzdt", (2500.0, -300.0))]
    a, c, b = (-750.0, 800.0), (0.0, 1200.0), (750.0, 800.0)
    bent = Simulation(Wire(a, b, via=[c]), rx, times=t).predict(m)
    parts = Simulation(Wire(a, c), rx, times=t).predict(m) + Simulation(Wire(c, b), rx, times=t).predict(m)
    # (different offset grids for the three set-ups: agreement to the engine accuracy, 1e-4)
    np.testing.assert_allclose(bent, parts, rtol=1e-4, atol=1e-6 * np.abs(parts).max())
    # and a straight wire with a collinear corner is the straight wire
    straight = Simulation(Wire(a, b), rx, times=t).predict(m)
    kinked = Simulation(Wire(a, b, via=[(0.0, 800.0)]), rx, times=t).predict(m)
    np.testing.assert_allclose(kinked, straight, rtol=1e-4, atol=1e-6 * np.abs(straight).max())


@pytest.mark.parametrize("thickness", [False, True])
def test_jacobian_te_only_matches_finite_differences(thickness):
    # a loop with dBz/dt needs only the TE mode: the kernel takes its own TE derivative
    # pass and a single downward sweep there; checked against central differences
    # (common practice, no source)
    # (a conductive cover over a resistor and a conductor, receiver 100 m outside the loop:
    # there the top layer's attenuation term of d/dln rho is several percent of the column)
    m = LayeredModel([30.0, 60.0], [10.0, 300.0, 3.0])
    g = np.geomspace(1e-4, 1e-1, 13)
    sim = Simulation(PolygonLoop([(-50, -50), (50, -50), (50, 50), (-50, 50)]),
                     [Receiver("dbzdt", (150.0, 0.0))], gates=(g[:-1], g[1:]))
    d, J = sim.jacobian(m, thickness=thickness)
    np.testing.assert_allclose(d, sim.predict(m), rtol=1e-12)
    p0 = np.r_[np.log(m.resistivity), np.log(m.thickness)] if thickness else np.log(m.resistivity)
    nres = m.resistivity.size
    assert J.shape == d.shape + (p0.size,)

    def model(p):
        thk = np.exp(p[nres:]) if thickness else m.thickness
        return LayeredModel(thk, np.exp(p[:nres]))

    # columns are compared against max(their own peak, 1e-7 of the data's peak): a column
    # far below the data is below what differences of the forward resolve
    floor = 1e-7 * np.abs(d).max()
    for k in range(p0.size):
        e = 1e-4
        p1, p2 = p0.copy(), p0.copy()
        p1[k] += e
        p2[k] -= e
        fd = (sim.predict(model(p1)) - sim.predict(model(p2))) / (2 * e)
        scale = np.abs(J[:, :, k]).max(axis=1, keepdims=True)
        assert np.max(np.abs(fd - J[:, :, k]) / np.maximum(scale, floor)) < 1e-4, f"param {k}"
