"""Forward engine against empymod (Werthmueller 2017, "An open-source full 3D
electromagnetic modeller for 1D VTI media in Python: empymod", Geophysics
82(6), WB9-WB19) on layered models, run quasi-statically as described in
docs/forward.md ("empymod as the reference": z = 1e-3 m, epermH = epermV = 0,
default filters).

Acceptance (issue): within 0.5 % wherever the signal exceeds 1e-3 of the
curve's largest absolute value; next to sign changes the comparison is in
absolute terms, against 1e-4 of the curve's maximum (the finer transform
set-up of docs/forward.md moves empymod's values by up to 2.4e-5 relative).
"""
import numpy as np
import pytest

from tem.forward import LayeredModel, PolygonLoop, Receiver, Simulation, Wire

from empymod_ref import polygon_loop_response, wire_response

T = np.geomspace(1e-5, 1.0, 16)


def _thirty_layer():
    thk = np.geomspace(5.0, 400.0, 29)
    z = np.r_[0.0, np.cumsum(thk)]
    logr = 1.5 + 0.8 * np.sin(z / 700.0) + 0.3 * np.cos(z / 170.0)
    return LayeredModel(thk, 10 ** logr)


MODELS = {
    # 1.5 km of 500 ohm-m over 10 ohm-m: sub-basalt-like
    "resistive_over_conductive": LayeredModel([1500.0], [500.0, 10.0]),
    # thick 5000 ohm-m layer between conductors: sub-salt-like
    "thick_resistor": LayeredModel([300.0, 2000.0], [20.0, 5000.0, 5.0]),
    # thin conductor: 20 m of 2 ohm-m at 400 m in 200 ohm-m
    "thin_conductor": LayeredModel([400.0, 20.0], [200.0, 2.0, 200.0]),
    "thirty_layers": _thirty_layer(),
    # the Emberline Plateau earth (demo scenario) at its west end
    "emberline_west": LayeredModel([20.0, 900.0, 600.0], [30.0, 500.0, 8.0, 2000.0]),
    # conductive cover over a resistive basement
    "cover_over_basement": LayeredModel([50.0, 150.0], [5.0, 50.0, 3000.0]),
}

WIRE = ((-500.0, 0.0), (500.0, 0.0))
# offsets from 100 m to 5 km, inline, broadside and oblique
# offsets from 100 m to 5 km, inline, broadside and oblique (the 100 m receiver needs
# empymod's wire integration at 51 points: 11 points leave a 1 % error that close)
EX_RX = [(800.0, 600.0), (2000.0, 0.0), (3000.0, 4000.0), (0.0, -5000.0)]
DBZ_RX = [(800.0, 600.0), (0.0, 2000.0), (0.0, -5000.0)]
NEAR_RX = [(0.0, 100.0)]
LOOP = [(-50.0, -50.0), (50.0, -50.0), (50.0, 50.0), (-50.0, 50.0)]
LOOP_RX = [(0.0, 0.0), (150.0, 0.0), (600.0, 800.0)]


def assert_agrees(ours, ref, label):
    for k, (a, b) in enumerate(zip(ours, ref)):
        peak = np.max(np.abs(b))
        near_sign = np.zeros(b.size, bool)
        flip = np.sign(b[1:]) != np.sign(b[:-1])
        near_sign[1:] |= flip
        near_sign[:-1] |= flip
        big = (np.abs(b) > 1e-3 * peak) & ~near_sign
        rel = np.abs(a[big] - b[big]) / np.abs(b[big])
        assert rel.max(initial=0) < 5e-3, f"{label} rx{k}: max rel dev {rel.max():.2e}"
        absdev = np.abs(a[near_sign] - b[near_sign]) / peak
        assert absdev.max(initial=0) < 1e-4, f"{label} rx{k}: abs dev near sign change {absdev.max():.2e}"


# the 30-layer wire case costs 40-50 s (empymod's reference at 51 source points); the same
# model is checked in the normal run by the loop test below, and this case under -m slow
@pytest.mark.parametrize("name", [pytest.param(n, marks=pytest.mark.slow) if n == "thirty_layers"
                                  else n for n in MODELS])
def test_wire_ex_and_dbzdt_against_empymod(name):
    m = MODELS[name]
    rx = [Receiver("ex", p) for p in EX_RX + NEAR_RX] + [Receiver("dbzdt", p) for p in DBZ_RX + NEAR_RX]
    ours = Simulation(Wire(*WIRE), rx, times=T).predict(m)
    n_ex = len(EX_RX) + 1
    ref_ex = np.vstack([wire_response(m.thickness, m.resistivity, *WIRE, EX_RX, "ex", T, srcpts=11),
                        wire_response(m.thickness, m.resistivity, *WIRE, NEAR_RX, "ex", T, srcpts=51)])
    ref_dbz = np.vstack([wire_response(m.thickness, m.resistivity, *WIRE, DBZ_RX, "dbzdt", T, srcpts=11),
                         wire_response(m.thickness, m.resistivity, *WIRE, NEAR_RX, "dbzdt", T, srcpts=51)])
    assert_agrees(ours[:n_ex], ref_ex, f"{name} Ex")
    assert_agrees(ours[n_ex:], ref_dbz, f"{name} dBz/dt")


@pytest.mark.parametrize("name", ["resistive_over_conductive", "thin_conductor", "thirty_layers"])
def test_loop_dbzdt_against_empymod(name):
    m = MODELS[name]
    t = np.geomspace(1e-5, 1e-1, 17)
    ours = Simulation(PolygonLoop(LOOP), [Receiver("dbzdt", p) for p in LOOP_RX], times=t).predict(m)
    ref = polygon_loop_response(m.thickness, m.resistivity, LOOP, LOOP_RX, "dbzdt", t)
    assert_agrees(ours, ref, f"{name} loop dBz/dt")


def test_ey_and_horizontal_dbdt_against_published_table():
    # values of empymod 2.6.1 run as in docs/forward.md: 100/10/1000 ohm-m (tops 0, 300,
    # 500 m), 1 km wire from (-500,0) to (500,0), srcpts = 21, receivers at z = 1e-3 m; ours has
    # y north and z up, empymod y and z flipped, so dB_y/dt changes sign
    t = np.array([1e-4, 1e-3, 1e-2, 1e-1])
    m = LayeredModel([300.0, 200.0], [100.0, 10.0, 1000.0])
    rx = [Receiver("dbydt", (2000.0, 0.0)), Receiver("dbydt", (0.0, 2000.0)),
          Receiver("dbxdt", (2000.0, 0.0))]
    d = Simulation(Wire(*WIRE), rx, times=t).predict(m)
    np.testing.assert_allclose(d[0], -np.array([-1.421170e-08, -2.718528e-09, -5.426646e-10,
                                                -1.401602e-11]), rtol=1e-3)
    np.testing.assert_allclose(d[1], -np.array([2.341401e-08, 4.163541e-09, 5.312058e-10,
                                                -1.153700e-11]), rtol=1e-3)
    # by symmetry dB_x/dt = 0 inline
    assert np.max(np.abs(d[2])) < 1e-6 * np.max(np.abs(d[0]))


def test_finite_dipole_receiver_against_empymod():
    # a 100 m Ex dipole averages the field along its length
    m = MODELS["emberline_west"]
    t = np.geomspace(1e-3, 1.0, 10)
    rx = Receiver("ex", dipole=((1950.0, 0.0), (2050.0, 0.0)))
    ours = Simulation(Wire(*WIRE), [rx], times=t).predict(m)
    xg, wg = np.polynomial.legendre.leggauss(7)
    pts = [(2000.0 + 50.0 * x, 0.0) for x in xg]
    ref = (wire_response(m.thickness, m.resistivity, *WIRE, pts, "ex", t) * (wg / 2)[:, None]).sum(0)
    assert_agrees(ours, ref[None, :], "dipole")
