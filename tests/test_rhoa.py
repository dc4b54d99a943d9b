"""Tests for tem.rhoa: late-time and all-time apparent resistivity, pseudo-depth.

Independent truth: empymod 2.6.1 (Werthmueller 2017, Geophysics 82(6),
WB9-WB19) run quasi-statically as described in docs/forward.md (source and
receivers at z = 1e-3 m, epermH = epermV = 0, air 2e14 ohm-m), finite wires
integrated with srcpts = 11 (Gauss-Legendre); the late-time formulas of
Spies & Frischknecht (1991, from memory) applied to empymod values; the
diffusion depth of Ward & Hohmann (1988, from memory).
"""
from __future__ import annotations

import numpy as np
import pytest

from tem import rhoa as R
from tem.errors import TemInputError
from tem.rhoa.settings import RhoaSettings

empymod = pytest.importorskip("empymod")

MU0 = 4e-7 * np.pi
WIRE = [-500.0, 0.0, 500.0, 0.0]  # 1 km wire along +x, current from A to B


def emp_step_off(src, rec, rho, t, mrec=False):
    """QS empymod step-off response of 1 A (run as in docs/forward.md).

    ``mrec='b'`` with ``signal=-1`` gives dB/dt step-off (equal to
    ``-mu0 * bipole(..., signal=0, mrec=True)`` under QS).
    """
    with np.errstate(all="ignore"):
        out = empymod.bipole(src=src, rec=rec, depth=[0], res=[2e14, rho], freqtime=t, signal=-1,
                             epermH=[0, 0], epermV=[0, 0], mrec=mrec, strength=1, srcpts=11,
                             verb=1)
    return np.asarray(out, float)


def wire_src(a, b):
    return [a[0], b[0], a[1], b[1], 1e-3, 1e-3]


# ------------------------------------------------------------ check values
def test_reference_late_time_check_values():
    # empymod QS step-off values at t = 1e-2 s over 100 ohm-m, 1 A (50 m central loop;
    # 1 km wire, E at (2000,0), dBz/dt at (0,2000)) and their late-time rho_a by the
    # Spies & Frischknecht (1991, from memory) forms, re-derived from the Ward & Hohmann
    # (1988) asymptotes. rtol 2e-5: the raw values carry 7 digits.
    m_loop = np.pi * 50.0**2
    # Tolerance: half a unit in the last quoted digit plus 7-digit raw input.
    assert R.late_time_dbzdt(-1.247715e-11, 1e-2, m_loop) == pytest.approx(100.038, abs=6e-4)
    assert R.late_time_bz(8.319986e-14, 1e-2, m_loop) == pytest.approx(100.022, abs=6e-4)
    assert R.late_time_e(1.057279e-06, 1e-2, 1000.0) == pytest.approx(397.59, abs=6e-3)
    assert R.late_time_wire_dbzdt(-6.616541e-10, 1e-2, 1000.0, 2000.0) == pytest.approx(179.37, abs=6e-3)
    # The same through the geometry-driven channel function.
    lt = R.late_time_rhoa("ex", [1.057279e-06], [1e-2], "wire", WIRE, [2000, 0, 2000, 0])
    assert lt.rho[0] == pytest.approx(397.59, abs=6e-3)
    assert not lt.valid[0] and lt.flags[0] & R.FLAGS["late-invalid"]
    lt = R.late_time_rhoa("dbzdt", [-6.616541e-10], [1e-2], "wire", WIRE, [0, 2000, 0, 2000])
    assert lt.rho[0] == pytest.approx(179.37, abs=6e-3)


def test_diffusion_depth_reference_values():
    # diffusion depth sqrt(2 t rho / mu0) (Ward & Hohmann 1988, from memory) = 1261.566
    # sqrt(rho t) m: 398.94 m for both.
    assert R.diffusion_depth(100.0, 1e-3) == pytest.approx(398.94, abs=0.01)
    assert R.diffusion_depth(10.0, 1e-2) == pytest.approx(398.94, abs=0.01)
    assert R.diffusion_depth(1.0, 1.0) == pytest.approx(1261.566, abs=1e-3)
    assert np.isnan(R.diffusion_depth(np.nan, 1.0))


# ---------------------------------------------------------------- geometry
def test_effective_moment_loop_is_area_anywhere_and_wire_is_L_y_over_2():
    # Derived in tem.rhoa docstring: S = 2 * area for a closed loop.
    sq = [0, 0, 100, 0, 100, 100, 0, 100]  # anticlockwise 100 m square
    for rx in ([50, 50], [10, 90], [300, -200]):
        assert R.effective_moment("loop", sq, rx) == pytest.approx(1e4, rel=1e-12)
    cw = np.array(sq, float).reshape(-1, 2)[::-1].ravel()
    assert R.effective_moment("loop", cw, [50, 50]) == pytest.approx(-1e4)
    # late-time asymptotes (Ward & Hohmann 1988): HED dB/dt form = loop form with M -> I L y / 2.
    assert R.effective_moment("wire", WIRE, [1234.0, 2000.0]) == pytest.approx(1000.0 * 2000.0 / 2)
    assert R.perpendicular_distance((-500, 0), (500, 0), (1234.0, -700.0)) == pytest.approx(-700.0)
    assert R.projected_current_length("wire", WIRE, (0.6, 0.8)) == pytest.approx(600.0)
    assert R.projected_current_length("loop", sq, (1, 0)) == pytest.approx(0.0, abs=1e-9)


# ------------------------------------------------------- late time vs truth
TIMES = np.logspace(-5, 0.5, 34)


@pytest.mark.parametrize("rho", [10.0, 100.0, 1000.0])
def test_late_time_wire_within_5_percent_where_valid_and_fails_early(rho):
    """Late-time rho_a of a 1 km wire against empymod (run as in docs/forward.md).

    Condition (tem.rhoa.U_LIMIT, derived from the Ward & Hohmann 1988 shape
    functions): u = theta(rho_a) r_max < 0.19 for E, < 0.31 for dBz/dt, with
    r_max the largest transmitter-receiver distance.
    """
    cases = [("ex", (2000.0, 0.0), False), ("ex", (600.0, 800.0), False), ("ex", (0.0, 3000.0), False),
             ("dbzdt", (0.0, 2000.0), "b"), ("dbzdt", (1500.0, 2000.0), "b"),
             ("dbzdt", (-800.0, -1000.0), "b")]
    n_valid = 0
    for comp, (x, y), mrec in cases:
        rec = [x, y, 1e-3, 0, 90] if comp == "dbzdt" else [x, y, 1e-3, 0, 0]
        t = TIMES * 100.0 / rho  # same range of u for every rho
        d = emp_step_off(wire_src((-500, 0), (500, 0)), rec, rho, t, mrec=mrec)
        lt = R.late_time_rhoa(comp, d, t, "wire", WIRE, [x, y, x, y])
        dev = np.abs(lt.rho / rho - 1)
        assert np.all(np.isfinite(lt.rho)), comp
        # Within 5 % at every gate the condition declares valid.
        assert lt.valid.sum() >= 3, (comp, x, y)
        assert dev[lt.valid].max() < 0.05, (comp, x, y, dev[lt.valid].max())
        n_valid += lt.valid.sum()
        # Early times (true u > 1): the late-time formula fails by far more than 5 %.
        r_max = R.max_distance("wire", WIRE, [x, y])
        early = np.sqrt(MU0 / (4 * rho * t)) * r_max > 1.0
        assert early.sum() >= 3
        assert dev[early].min() > 0.3, (comp, x, y)
        assert np.all(lt.flags[early] & R.FLAGS["late-invalid"])
    assert n_valid > 30


def test_late_time_validity_limit_is_tight_for_a_dipole():
    """Near the stated u-limit the error crosses 5 % (short wire ~ HED, empymod).

    rho_a/rho - 1 at u_a just below U_LIMIT is between 4 and 5 %; 6 % above
    the exact root (0.197 E, 0.313 dB/dt) it exceeds 5 %.
    """
    t = np.logspace(-2.5, -0.5, 120)
    short = [-5.0, 0.0, 5.0, 0.0]
    for comp, rec, mrec, key, exact in [("ex", [1000.0, 0, 1e-3, 0, 0], False, "e", 0.197),
                                        ("dbzdt", [0, 1000.0, 1e-3, 0, 90], "b", "dbdt", 0.313)]:
        d = emp_step_off(wire_src((-5, 0), (5, 0)), rec, 100.0, t, mrec=mrec)
        lt = R.late_time_rhoa(comp, d, t, "wire", short, [rec[0], rec[1]] * 2)
        dev = lt.rho / 100.0 - 1
        late = np.sqrt(MU0 / (4 * 100.0 * t)) * 1000.0 < 0.6  # late side of the maximum
        near = late & (lt.u < R.U_LIMIT[key]) & (lt.u > 0.9 * R.U_LIMIT[key])
        assert near.any() and 0.035 < dev[near].max() < 0.05
        assert np.all(dev[late & (lt.u > 1.06 * exact)] > 0.05)
        assert np.all(lt.valid == (late & (lt.u < R.U_LIMIT[key])))
        # With u from the true resistivity the limit is U_LIMIT_REF.
        u_true = np.sqrt(MU0 / (4 * 100.0 * t)) * R.max_distance("wire", short, rec[:2])
        below = u_true < R.U_LIMIT_REF[key]
        assert dev[below].max() < 0.05 and dev[late & ~below].min() > 0.045


def test_late_time_arbitrary_wire_orientation_uses_perpendicular_distance():
    """A wire at 30 degrees: same rho_a as the x-directed case (empymod truth).

    Late-time HED asymptote (Ward & Hohmann 1988): only the perpendicular distance matters; the
    E receiver dipole along the wire measures the full late-time E.
    """
    ang = np.deg2rad(30.0)
    rot = np.array([[np.cos(ang), -np.sin(ang)], [np.sin(ang), np.cos(ang)]])
    a, b = rot @ [-500.0, 0.0], rot @ [500.0, 0.0]
    wire = [*a, *b]
    t = np.array([0.3, 1.0, 3.0])
    p = rot @ [700.0, 2000.0]  # perpendicular distance 2000 m
    d = emp_step_off(wire_src(a, b), [p[0], p[1], 1e-3, 0, 90], 100.0, t, mrec="b")
    lt = R.late_time_rhoa("dbzdt", d, t, "wire", wire, [*p, *p])
    assert np.all(np.abs(lt.rho / 100 - 1) < 0.05) and lt.valid.all()  # u = 0.24 .. 0.08
    e_dir = rot @ [1.0, 0.0]
    q = rot @ [2000.0, 300.0]
    d = emp_step_off(wire_src(a, b), [q[0], q[1], 1e-3, 30.0, 0], 100.0, t)
    lt = R.late_time_rhoa("ex", d, t, "wire", wire, [*(q - 5 * e_dir), *(q + 5 * e_dir)])
    assert list(lt.valid) == [False, True, True]  # u = 0.25, 0.14, 0.08
    assert np.all(np.abs(lt.rho[lt.valid] / 100 - 1) < 0.05)


def test_late_time_loop_dbzdt_vs_empymod_polygon():
    """Central 50 m loop (empymod, 90-segment polygon of equal area, docs/forward.md)."""
    n = 90
    a_eq = 50.0 * np.sqrt((2 * np.pi / n) / np.sin(2 * np.pi / n))
    phi = np.arange(n + 1) * 2 * np.pi / n
    px, py = a_eq * np.cos(phi), a_eq * np.sin(phi)
    src = [px[:-1], px[1:], py[:-1], py[1:], np.full(n, 1e-3), np.full(n, 1e-3)]
    t = np.logspace(-5, -1, 9)
    with np.errstate(all="ignore"):
        dbdt = empymod.bipole(src=src, rec=[0, 0, 1e-3, 0, 90], depth=[0], res=[2e14, 100.0],
                              freqtime=t, signal=-1, epermH=[0, 0], epermV=[0, 0], mrec="b",
                              strength=1, verb=1).sum(axis=-1)
    pts = np.column_stack([px[:-1], py[:-1]]).ravel()
    # empymod's frame has z down: the anticlockwise (in its x-y) loop's step-off
    # dB_z/dt along its +z is negative as in Ward & Hohmann (1988), central loop.
    lt = R.late_time_rhoa("dbzdt", np.real(dbdt), t, "loop", pts, [0, 0, 0, 0])
    dev = np.abs(lt.rho / 100 - 1)
    assert lt.valid.sum() >= 5 and dev[lt.valid].max() < 0.05
    # late-time rho_a of this empymod loop response (Spies & Frischknecht 1991 form):
    # 100.374 at 1e-3 s, 100.038 at 1e-2 s.
    assert lt.rho[np.argmin(abs(t - 1e-3))] == pytest.approx(100.374, rel=1e-3)
    assert lt.rho[np.argmin(abs(t - 1e-2))] == pytest.approx(100.038, rel=1e-3)
    assert dev[0] > 0.3 and not lt.valid[0]  # t = 1e-5 s, u = 2.8: fails


# --------------------------------------------------------------- bad input
def test_late_time_bad_input_errors_and_flags():
    with pytest.raises(TemInputError, match="e: 1 value"):
        R.late_time_e([1e-9, 0.0], [1e-2, 2e-2], 1000.0)
    with pytest.raises(TemInputError, match="dbzdt"):
        R.late_time_dbzdt([1e-9], [1e-2], 100.0)  # positive dB/dt for a positive moment
    with pytest.raises(TemInputError, match="t:"):
        R.late_time_bz([1e-12], [-1.0], 100.0)
    with pytest.raises(TemInputError, match="moment"):
        R.late_time_dbzdt([-1e-9], [1e-2], 0.0)
    with pytest.raises(TemInputError, match="rx_x0"):
        R.late_time_rhoa("ex", [1e-9], [1e-2], "wire", WIRE, [np.nan, 0, 0, 0])
    with pytest.raises(TemInputError, match="tx_points"):
        R.late_time_rhoa("ex", [1e-9], [1e-2], "wire", [0.0, 0.0], [2000, 0, 2000, 0])
    with pytest.raises(TemInputError, match="tx_kind"):
        R.late_time_rhoa("ex", [1e-9], [1e-2], "coil", WIRE, [2000, 0, 2000, 0])
    # Per-gate problems are flagged, never dropped: output keeps every gate.
    v = np.array([1e-9, -1e-9, 0.0, np.nan, 2e-10])
    lt = R.late_time_rhoa("ex", v, np.logspace(-2, -1, 5), "wire", WIRE, [2000, 0, 2000, 0])
    assert lt.rho.shape == (5,)
    assert np.isfinite(lt.rho[[0, 4]]).all() and np.isnan(lt.rho[1:4]).all()
    assert [R.flag_text(f) for f in lt.flags[1:4]] == ["wrong-sign", "bad-value", "bad-value"]
    # ey of an x-directed wire, or E from a loop: no late-time formula.
    lt = R.late_time_rhoa("ey", v, np.logspace(-2, -1, 5), "wire", WIRE, [2000, 0, 2000, 0])
    assert np.all(lt.flags == R.FLAGS["no-formula"]) and np.isnan(lt.rho).all()
    lt = R.late_time_rhoa("dbxdt", v, np.logspace(-2, -1, 5), "wire", WIRE, [2000, 0, 2000, 0])
    assert np.all(lt.flags == R.FLAGS["no-formula"])


# ---------------------------------------------------------------- all-time
pytest.importorskip("tem.forward")
from tem.forward import (CircularLoop, LayeredModel, Receiver, Simulation,  # noqa: E402
                         Waveform, Wire)

# Grid deliberately not through 10, 100 or 1000 ohm-m, so that the test
# measures the interpolation and not a grid node.
GRID = R.rho_grid(0.137, 1.37e5, 12)


@pytest.fixture(scope="module")
def wire_sim():
    """1 km wire, Ex inline and broadside, dBz/dt broadside and off-axis, 500-4000 m.

    Bipolar 0.25 Hz, 50 % duty, 1 ms on-ramp, 0.5 ms off-ramp, boxcar gates,
    2nd-order 20 kHz receiver low-pass.
    """
    rx = [Receiver("ex", (1000.0, 0.0)), Receiver("ex", (2000.0, 0.0)), Receiver("ex", (4000.0, 0.0)),
          Receiver("ex", (0.0, 500.0)), Receiver("ex", (0.0, 1500.0)),
          Receiver("dbzdt", (0.0, 500.0)), Receiver("dbzdt", (0.0, 1000.0)),
          Receiver("dbzdt", (0.0, 2000.0)), Receiver("dbzdt", (1500.0, 3000.0)),
          Receiver("dbzdt", (0.0, 4000.0))]
    t = np.logspace(-4, np.log10(0.5), 24)
    wf = Waveform.bipolar(base_frequency=0.25, duty_cycle=0.5, ramp_on=1e-3, ramp_off=5e-4)
    sim = Simulation(Wire(a=(-500.0, 0.0), b=(500.0, 0.0)), rx, gates=(t / 1.1, t * 1.1),
                     gate_shape="boxcar", waveform=wf, lowpass=(2, 2e4))
    table, slope = R.halfspace_table(sim, GRID)
    return sim, table, slope


@pytest.mark.parametrize("rho", [10.0, 100.0, 1000.0])
def test_all_time_recovers_halfspace_within_half_percent(wire_sim, rho):
    """All-time rho_a of gated, periodic, ramped, filtered half-space data.

    Truth: the half-space itself (definition of all-time rho_a; Spies &
    Eggers 1986). Tolerance 0.5 % (issue 4); the measured worst case is
    printed by the report script in docs/apparent-resistivity.md.
    """
    sim, table, slope = wire_sim
    d = sim.predict(LayeredModel(thickness=[], resistivity=[rho]))
    err = 0.02 * np.abs(d)
    res = R.halfspace_match(GRID, table, d, err, slope_table=slope)
    assert res.rho.shape == d.shape
    # Every gate converts, and one of its roots is the truth within 0.5 %.
    assert np.all(res.n_roots >= 1)
    best = np.minimum(np.abs(res.rho_low / rho - 1), np.abs(res.rho_high / rho - 1))
    assert best.max() < 5e-3, best.max()
    # The branch chooser (smoothest path) picks the true root at every gate.
    assert np.abs(res.rho / rho - 1).max() < 5e-3
    # Where the response is not monotonic the other root is returned and flagged.
    # (A datum at the maximum, where the branches merge, is one double root,
    # also flagged.)
    two = res.n_roots >= 2
    assert two.any()
    flagged = (res.flags & R.FLAGS["two-branches"]) != 0
    assert np.all(flagged[two])
    at_peak = flagged & ~two
    assert np.all(np.abs(res.slope[at_peak]) < 0.05)
    other = np.where(np.abs(res.rho_low / rho - 1) < np.abs(res.rho_high / rho - 1),
                     res.rho_high, res.rho_low)
    assert np.all(res.rho_high[two] > res.rho_low[two])
    assert np.median(np.abs(other[two] / rho - 1)) > 0.5  # a distinct spurious branch
    # Uncertainty: 2 % data error / |d ln d / d ln rho| (first order).
    # At a merged (peak) root the curvature term sqrt(2 sigma / |q''|) is used.
    np.testing.assert_allclose(res.rel_error[~at_peak], 0.02 / np.abs(res.slope[~at_peak]), rtol=1e-12)
    assert np.all(np.isfinite(res.rel_error[at_peak]) & (res.rel_error[at_peak] > 0.02))
    _, jac = sim.jacobian(LayeredModel(thickness=[], resistivity=[rho]))
    np.testing.assert_allclose(res.slope, jac[..., 0] / d, rtol=0.02, atol=2e-3)


def test_all_time_agrees_with_late_time_where_valid(wire_sim):
    """Step-off point data: all-time equals the truth, late-time within 5 % where valid."""
    t = np.logspace(-2, 0.5, 8)
    rx = [Receiver("ex", (2000.0, 0.0)), Receiver("dbzdt", (0.0, 2000.0))]
    sim = Simulation(Wire(a=(-500.0, 0.0), b=(500.0, 0.0)), rx, times=t)
    d = sim.predict(LayeredModel(thickness=[], resistivity=[100.0]))
    at = R.all_time_rhoa(sim, d, rho_min=0.137, rho_max=1.37e5, points_per_decade=12)
    assert np.abs(at.rho / 100 - 1).max() < 5e-3
    for i, comp in enumerate(("ex", "dbzdt")):
        x, y = rx[i].position
        lt = R.late_time_rhoa(comp, d[i], t, "wire", WIRE, [x, y, x, y], rho_ref=at.rho[i])
        assert lt.valid.sum() >= 2 and np.abs(lt.rho[lt.valid] / 100 - 1).max() < 0.05


@pytest.mark.parametrize("thk,rho1,rho2", [(100.0, 100.0, 10.0), (50.0, 30.0, 300.0)])
def test_all_time_two_layer_early_upper_late_lower(thk, rho1, rho2):
    """Two layers: first gate within 10 % of rho1, last gate within 10 % of rho2.

    Physics (Ward & Hohmann 1988; Spies & Frischknecht 1991): early-time
    currents stay in the top layer, late-time ones in the basement. Off-time
    grounded-wire E at early time carries the galvanic DC of the whole earth
    minus the top layer's instantaneous field, so it does not tend to rho1:
    only its late gates are checked, and early gates that no half-space can
    produce must be flagged, not dropped.
    """
    t = np.logspace(-5, np.log10(5.0), 24)
    wf = Waveform.bipolar(base_frequency=0.025, duty_cycle=0.5, ramp_on=1e-3, ramp_off=1e-5)
    gates = (t / 1.12, t * 1.12)
    model = LayeredModel(thickness=[thk], resistivity=[rho1, rho2])
    wire = Simulation(Wire(a=(-500.0, 0.0), b=(500.0, 0.0)),
                      [Receiver("dbzdt", (0.0, 1000.0)), Receiver("dbzdt", (0.0, 2000.0)),
                       Receiver("ex", (1000.0, 0.0)), Receiver("ex", (2000.0, 0.0))],
                      gates=gates, waveform=wf)
    loop = Simulation(CircularLoop(centre=(0.0, 0.0), radius=50.0), [Receiver("dbzdt", (0.0, 0.0))],
                      gates=gates, waveform=wf)
    for sim, n_db in ((wire, 2), (loop, 1)):
        d = sim.predict(model)
        res = R.all_time_rhoa(sim, d, rho_min=0.137, rho_max=1.37e5, points_per_decade=12)
        assert np.all(np.abs(res.rho[:n_db, 0] / rho1 - 1) < 0.10), res.rho[:n_db, 0]
        assert np.all(np.abs(res.rho[:, -1] / rho2 - 1) < 0.10), res.rho[:, -1]
        # gates without a root keep their place, flagged
        none = res.n_roots == 0
        assert np.all(np.isnan(res.rho[none]))
        assert np.all(res.flags[none] & (R.FLAGS["no-root"] | R.FLAGS["wrong-sign"]))


def test_halfspace_match_bad_values_and_impossible_data_are_flagged():
    """Closed-form HED E_x (Ward & Hohmann 1988) on a rho grid.

    E_x is not monotonic in rho: its maximum at fixed t is 0.4280 I ds mu0 /
    (8 pi r t) at u* = 0.9679 (maximising the closed form over u; cf. Spies &
    Eggers 1986). A datum above it has no root, one below has
    two; zero and NaN data are bad values; a negative one has the wrong sign.
    """
    from scipy.special import erf

    r, t = 2000.0, 1e-2
    grid = R.rho_grid(0.1, 1e5, 16)
    u = np.sqrt(MU0 / (4 * grid * t)) * r
    fe = erf(u) - 2 / np.sqrt(np.pi) * u * np.exp(-u * u)
    ex = grid / (2 * np.pi * r**3) * fe
    emax = 0.4280 * MU0 / (8 * np.pi * r * t)
    # maximum of the closed form at u* = 0.9679: rho* = 0.2669 mu0 r^2 / t = 134.15 ohm-m,
    # value 1.0700e-9 V/m per A m.
    assert grid[np.argmax(ex)] == pytest.approx(134.15, rel=0.08)
    assert emax == pytest.approx(1.0700e-9, rel=1e-4)
    vals = np.array([1.01 * emax, 0.5 * emax, 0.0, np.nan, -0.5 * emax, 0.999 * emax])
    res = R.halfspace_match(grid, np.repeat(ex[:, None], vals.size, axis=1), vals)
    names = [R.flag_text(f) for f in res.flags]
    assert names == ["no-root", "two-branches", "bad-value", "bad-value", "wrong-sign", "two-branches"]
    assert res.rho.shape == (6,) and np.isnan(res.rho[[0, 2, 3, 4]]).all()
    lo, hi = res.rho_low[1], res.rho_high[1]
    assert lo < 134.15 < hi
    for root in (lo, hi):  # both roots reproduce the datum (closed form)
        uu = np.sqrt(MU0 / (4 * root * t)) * r
        e = root / (2 * np.pi * r**3) * (erf(uu) - 2 / np.sqrt(np.pi) * uu * np.exp(-uu * uu))
        assert e == pytest.approx(0.5 * emax, rel=1e-5)
    # near the maximum the two roots close in on rho*
    assert res.rho_low[5] == pytest.approx(134.15, rel=0.1) and res.rho_high[5] == pytest.approx(134.15, rel=0.1)
    with pytest.raises(TemInputError, match="rho_grid"):
        R.halfspace_match([1.0, 2.0], np.ones((2, 1)), [1.0])
    with pytest.raises(TemInputError, match="table"):
        R.halfspace_match(grid, np.ones((3, 1)), [1.0])


def test_choose_branches_smoothest_path():
    # Truth ln(rho) = 0 everywhere; spurious roots drift. Common practice, no source.
    roots = [np.array([0.0, 3.0]), np.array([0.0]), np.array([-2.0, 0.01]), np.array([]),
             np.array([0.02, 1.5])]
    assert list(R.choose_branches(roots)) == [0, 0, 1, -1, 0]
    assert list(R.choose_branches([np.array([]), np.array([])])) == [-1, -1]


# -------------------------------------------------------------- sounding/CLI
def _gated(station, x, model, rng):
    """A gated sounding (docs/data-model.md) on the fictional Emberline Plateau line.

    1.5 km east-west wire 800 m north of the profile, bipolar 0.25 Hz, Ex on
    a 100 m dipole and dBz/dt at the station, 1 % Gaussian noise.
    """
    import xarray as xr

    from tem import __version__
    from tem.provenance import records_to_json

    t = np.logspace(np.log10(2e-4), np.log10(0.8), 16)
    g0, g1 = t / 1.15, t * 1.15
    wire = ((-750.0, 800.0), (750.0, 800.0))
    rx = [Receiver("ex", dipole=((x - 50.0, 0.0), (x + 50.0, 0.0))), Receiver("dbzdt", (x, 0.0))]
    wf = Waveform.bipolar(base_frequency=0.25, duty_cycle=0.5, ramp_on=1e-3, ramp_off=4e-4)
    sim = Simulation(Wire(a=wire[0], b=wire[1]), rx, gates=(g0, g1), gate_shape="boxcar",
                     waveform=wf, lowpass=(2, 1e4))
    d = sim.predict(model)
    err = 0.01 * np.abs(d)
    val = d + err * rng.standard_normal(d.shape)
    return xr.Dataset({
        "value": (("channel", "gate"), val), "error": (("channel", "gate"), err),
        "usable": (("channel", "gate"), np.ones(d.shape, bool)),
        "noise_floor": ("channel", np.array([1e-12, 1e-14])),
        "gate_open": ("gate", g0), "gate_close": ("gate", g1), "gate_centre": ("gate", t),
        "component": ("channel", np.array(["ex", "dbzdt"])),
        "rx_x0": ("channel", [x - 50.0, x]), "rx_y0": ("channel", [0.0, 0.0]),
        "rx_x1": ("channel", [x + 50.0, x]), "rx_y1": ("channel", [0.0, 0.0]),
        "coil_area": ("channel", [np.nan, 1e4]),
    }, attrs={"station": station, "x": x, "y": 0.0, "z": 0.0, "epsg": 0, "gate_shape": "boxcar",
              "time_reference": "end of switch-off ramp", "normalisation": "per ampere",
              "tx_kind": "wire", "tx_points": [*wire[0], *wire[1]], "tx_current": 40.0,
              "base_frequency": 0.25, "duty_cycle": 0.5, "ramp_on": 1e-3, "ramp_off": 4e-4,
              "lowpass_order": 2, "lowpass_cutoff": 1e4, "tem_format": "gated",
              "format_version": "1.0", "tem_version": __version__, "provenance": records_to_json([])}), sim


def test_sounding_rhoa_dataset_halfspace_and_flags():
    """Sounding-level conversion: 300 ohm-m half-space with 1 % noise.

    All-time within 3 sigma of the truth at every gate (sigma: the propagated
    rel_error); late-time valid gates within 5 % + 3 sigma (issue 4; the late-time
    formulas of Spies & Frischknecht 1991, from memory).
    """
    from tem.rhoa.sounding import sounding_rhoa, table_rows

    rng = np.random.default_rng(4)
    ds, sim = _gated("EM05", -1500.0, LayeredModel(thickness=[], resistivity=[300.0]), rng)
    ds["usable"].values[1, -1] = False
    ds["value"].values[0, 3] = 0.0   # a dead sample: flagged, kept
    out = sounding_rhoa(ds, RhoaSettings(rho_per_decade=12), sim=sim)
    assert out.attrs["tem_format"] == "rhoa" and "rhoa" in out.attrs["provenance"]
    rho, rel = out["rhoa"].values, out["rhoa_rel_error"].values
    ok = np.isfinite(rho)
    assert ok.sum() == rho.size - 1 and np.isnan(rho[0, 3])
    assert out["rhoa_flags"].values[0, 3] & R.FLAGS["bad-value"]
    assert out["rhoa_flags"].values[1, -1] & R.FLAGS["unusable"]
    assert np.all(np.abs(np.log(rho[ok] / 300.0)) < 3 * rel[ok] + 1e-3)
    late, valid = out["rhoa_late"].values, out["rhoa_late_valid"].values
    assert valid.sum() >= 3
    assert np.all(np.abs(late[valid] / 300 - 1) < 0.05 + 3 * out["rhoa_late_rel_error"].values[valid])
    np.testing.assert_allclose(out["pseudo_depth"].values[ok],
                               1261.566 * np.sqrt((rho * out["gate_centre"].values)[ok]), rtol=1e-6)
    rows = table_rows(out)
    assert len(rows) == rho.size  # every gate has a row, converted or not


def test_sounding_rhoa_missing_geometry_is_a_clear_error():
    from tem.rhoa.sounding import sounding_rhoa

    ds, sim = _gated("EM01", 0.0, LayeredModel(thickness=[], resistivity=[100.0]),
                     np.random.default_rng(0))
    bad = ds.copy()
    del bad.attrs["tx_points"]
    with pytest.raises(TemInputError, match="s1.nc: tx_points: missing"):
        sounding_rhoa(bad, sim=sim, source="s1.nc")
    bad = ds.copy(deep=True)
    bad["rx_x0"].values[0] = np.nan
    with pytest.raises(TemInputError, match="rx_x0"):
        sounding_rhoa(bad, sim=sim, source="s1.nc")


def test_cli_rhoa_writes_table_files_and_figures(tmp_path, capsys):
    import csv

    from tem.cli import main
    from tem.io.stacked import write_dataset

    models = {"EM04": -2500.0, "EM05": -1500.0, "EM06": -500.0}
    gated = tmp_path / "gated"
    rng = np.random.default_rng(7)
    for st, x in models.items():
        ds, _ = _gated(st, x, LayeredModel(thickness=[20.0, 900.0], resistivity=[30.0, 500.0, 8.0]), rng)
        write_dataset(ds, gated / f"{st}.nc")
    (gated / "broken.nc").write_text("not a netCDF file")
    out = tmp_path / "rhoa"
    code = main(["rhoa", str(gated), "--out", str(out), "--rho-per-decade", "8",
                 "--section-axis", "depth"])
    assert code == 2  # one station's file refused (bad input), the others processed
    with open(out / "rhoa" / "rhoa.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 3 * 2 * 16
    assert {r["station"] for r in rows} == set(models)
    assert all(r["rhoa_ohmm"] or r["flags"] for r in rows)  # unconverted gates carry a flag
    for st in models:
        assert (out / "rhoa" / f"{st}.nc").is_file()
        assert (out / "figures" / "stations" / f"{st}_rhoa.png").stat().st_size > 10_000
    assert (out / "figures" / "pseudosection_dbzdt.png").is_file()
    assert (out / "figures" / "pseudosection_ex.png").is_file()
    assert not (out / "rhoa" / "broken.nc").exists()
    # a failing file's error is one line on stderr, however long (rich wrapped it)
    long = gated / ("a_station_file_with_a_long_name_" * 3 + ".nc")
    long.write_text("not a netCDF file")
    capsys.readouterr()
    assert main(["rhoa", str(long), "--out", str(tmp_path / "r2"), "--no-all-time",
                 "--no-figures"]) == 2
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert err[0].startswith("tem rhoa: station a_station") and len(err[0]) > 120
    assert err[1] == "tem rhoa: no station could be converted to apparent resistivity"
    # bad command-line input: exit 2
    assert main(["rhoa", str(tmp_path / "nothing"), "--out", str(out)]) == 2
    assert main(["rhoa", str(gated), "--out", str(out), "--rho-min", "10", "--rho-max", "1"]) == 2
    assert "--rho-max: must exceed rho_min" in capsys.readouterr().err


def test_noise_dominated_gates_do_not_steer_the_branch():
    """A late gate below signal-to-noise 2 with only the spurious (1/t) root must not drag
    the whole curve onto that branch (common practice, no source: noisy gates follow)."""
    t = np.geomspace(5e-3, 0.8, 12)
    true = np.log(np.interp(np.log(t), np.log(t[[0, 6, 11]]), [800.0, 30.0, 70.0]))
    spurious = np.log(30.0 * (t[0] / t))            # runs as 1/t
    roots = [np.sort([a, b]) for a, b in zip(true, spurious)]
    roots[-1] = np.array([spurious[-1]])            # the last, noisy gate has one root
    weak = np.zeros(t.size, bool)
    weak[-1] = True
    chosen = R.choose_branches(roots, weak)
    picked = np.array([r[c] for r, c in zip(roots, chosen)])
    np.testing.assert_allclose(picked[:-1], true[:-1])
    # without the weak flag the single late root wins and the path is wrong
    chosen_all = R.choose_branches(roots)
    picked_all = np.array([r[c] for r, c in zip(roots, chosen_all)])
    assert not np.allclose(picked_all[:-1], true[:-1])


def test_layered_earth_late_gates_read_on_the_late_time_branch():
    """Emberline-like earth (30/500/8/2000 ohm-m), receiver 1.7 km from the wire, 0.25 Hz
    bipolar waveform as in the demo: the late-time formula (Spies & Frischknecht 1991, valid as u -> 0) and the all-time value
    agree at the late gates only on the late-time branch; the spurious early-side root
    there is orders of magnitude lower. Smoothness alone picked that root (ln rho varies
    as much along the true branch), the decay-rate term must not."""
    model = LayeredModel([20.0, 1154.5, 600.0], [30.0, 500.0, 8.0, 2000.0])   # demo's EM05
    edges = np.geomspace(4e-3, 0.86, 22)
    rx = [Receiver("ex", dipole=((-1550.0, 0.0), (-1450.0, 0.0))), Receiver("dbzdt", (-1500.0, 0.0))]
    wf = Waveform.bipolar(base_frequency=0.25, duty_cycle=0.5, ramp_on=1e-3, ramp_off=5e-4)
    sim = Simulation(Wire(a=(-750.0, 800.0), b=(750.0, 800.0)), rx, gates=(edges[:-1], edges[1:]),
                     waveform=wf)
    clean = sim.predict(model)
    # 2 % noise, as after stacking: its jitter along the true branch made that branch look
    # rougher than the spurious one, which runs smoothly as 1/t
    d = clean * (1 + 0.02 * np.random.default_rng(7).standard_normal(clean.shape))
    at = R.all_time_rhoa(sim, d, 0.02 * np.abs(d), rho_min=0.05, rho_max=2e5, points_per_decade=12)
    t = np.sqrt(edges[:-1] * edges[1:])
    late = (t > 0.05) & (t < 0.3)
    for c, comp in enumerate(("ex", "dbzdt")):
        lt = R.late_time_rhoa(comp, d[c], t, "wire", [-750.0, 800.0, 750.0, 800.0],
                              (-1500.0, 0.0, -1500.0, 0.0))
        ratio = at.rho[c, late] / lt.rho[late]
        assert np.all((ratio > 0.5) & (ratio < 2.0)), (comp, ratio)
        # and a genuinely different second root exists there, far below
        assert np.all(at.n_roots[c, late] >= 2)
        assert np.all(at.rho_low[c, late] < 0.1 * at.rho_high[c, late])


def test_decay_rate_mismatch_overrules_a_smoother_spurious_path():
    """Along a layered earth the true root can vary more than the 1/t spurious root; the
    per-gate decay mismatch (observed vs candidate half-space) must decide then."""
    t = np.geomspace(5e-3, 0.8, 15)
    true = np.log(np.interp(np.log(t), np.log(t[[0, 4, 14]]), [1200.0, 3500.0, 60.0]))
    spurious = np.log(45.0 * (t[0] / t))
    roots = [np.sort([a, b]) for a, b in zip(true, spurious)]
    is_true_low = [r[0] == a for r, a in zip(roots, true)]
    # the true half-space decays like the data (mismatch 0); the spurious one does not (0.5)
    mismatch = [np.array([0.0, 0.5]) if low else np.array([0.5, 0.0]) for low in is_true_low]
    pick = lambda ch: np.array([r[c] for r, c in zip(roots, ch)])  # noqa: E731
    assert not np.allclose(pick(R.choose_branches(roots)), true)      # smoothness alone fails
    np.testing.assert_allclose(pick(R.choose_branches(roots, mismatch=mismatch)), true)


def test_cli_rhoa_all_stations_failing_writes_no_table(tmp_path, capsys):
    """A folder holding only a non-gated product: exit 1, one error line, no empty rhoa.csv."""
    import xarray as xr

    from tem.cli import main
    src = tmp_path / "in"
    src.mkdir()
    xr.Dataset(attrs={"tem_format": "stacked", "format_version": "1.0"}).to_netcdf(
        src / "EM01.nc", engine="h5netcdf")
    rc = main(["rhoa", str(src), "--out", str(tmp_path / "out"), "--no-all-time", "--no-figures"])
    err = capsys.readouterr().err
    assert rc == 2
    assert "tem_format" in err
    assert not (tmp_path / "out" / "rhoa" / "rhoa.csv").exists()
