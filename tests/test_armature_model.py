"""The moving-armature model against outside references.

Sources named beside each check:

* magnetic circuit of a gapped core, ``L = mu0 N^2 A / g`` with the core's reluctance
  ``l_core / (mu_r mu0 A)`` in series, and the pull of a gap ``F = B^2 A / (2 mu0)``:
  A. E. Fitzgerald, C. Kingsley, S. D. Umans, *Electric Machinery*, ch. 1 (magnetic
  circuits) and ch. 3 (electromechanical energy conversion: the co-energy force
  ``f = d W'(i, x) / dx`` at constant current) -- chapter numbers from memory;
* the first-order RL step ``i = V/R (1 - exp(-t R / L))``: common practice (any circuit
  text);
* energy conservation of a lossy electromechanical system (first law): supply energy =
  resistive + freewheel-element loss + change of field energy + work against spring and
  load + damping loss + kinetic energy lost at the stops -- the energy method of the
  same ch. 3 (from memory);
* scipy's ``solve_ivp`` (explicit ``RK45``/``DOP853``, implicit ``Radau``/``BDF``) as
  general-purpose ODE solvers, and scipy's ``RK45`` tableau for the Dormand-Prince pair
  (J. R. Dormand, P. J. Prince 1980, J. Comput. Appl. Math. 6(1)).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from coildrive.model import magnet
from coildrive.model.armature import (NO_START, OPENED, SEATED, STALLED, ArmatureParams,
                                      hold_force_current)
from coildrive.model.armature_flight import _A, DP_B, DP_B4, DP_E
from coildrive.model.armature_runs import pull_in, release
from coildrive.model.armature_sim import pull_in_reference, release_reference, simulate
from coildrive.model.rl import rise_current, rise_time

MU0 = 4e-7 * math.pi  # vacuum permeability, H/m (the pre-2019 defined value; common practice)


def latch(**over) -> ArmatureParams:
    """The locker-latch example's mechanics at 12 V and a warm coil (invented data)."""
    lc, beta = magnet.fit_gap(0.025, 0.090, 0.004)
    values = dict(v_on=12.0, r_on=12.3, r_off=45.0, v_off=0.8, l_closed=lc, beta=beta,
                  stroke=0.004, mass=0.018, preload=0.35, rate=100.0, load=0.15, damping=0.4,
                  restitution=0.0)
    values.update(over)
    return ArmatureParams.make(**values)


# --------------------------------------------------------------------------- magnetics
def test_gapped_core_inductance_reproduced_by_the_fit():
    """Fitzgerald & Kingsley ch. 1 (from memory): a core of permeability mu_r and path
    length l_core with an air gap g has L = mu0 N^2 A / (g + l_core / mu_r) -- the core
    reluctance acts as an equivalent gap. Fitted from the open and closed values only,
    L(x) = K / (x + g0) must give the formula's L at every other gap."""
    n_turns, area, l_core, mu_r = 800, 1.2e-4, 0.09, 1800.0  # our choice of a small solenoid
    g_core = l_core / mu_r
    stroke = 3e-3

    def textbook(g):
        return MU0 * n_turns**2 * area / (g + g_core)

    lc, beta = magnet.fit_gap(textbook(stroke), textbook(0.0), stroke)
    assert magnet.equivalent_gap(beta) == pytest.approx(g_core, rel=1e-12), "g0 = core's equivalent gap"
    assert lc / beta == pytest.approx(MU0 * n_turns**2 * area, rel=1e-12), "K = mu0 N^2 A"
    gaps = np.linspace(0.0, stroke, 13)
    np.testing.assert_allclose(magnet.inductance(gaps, lc, beta), textbook(gaps), rtol=1e-12,
                               err_msg="fitted L(x) vs mu0 N^2 A / (x + l_core/mu_r)")
    # Force of the gap: F = B^2 A / (2 mu0) with B = mu0 N i / (g + g_core) (same source, ch. 3)
    i = 0.7
    for g in (0.0, 1e-3, stroke):
        b = MU0 * n_turns * i / (g + g_core)
        assert magnet.closing_force(i, g, lc, beta) == pytest.approx(b * b * area / (2 * MU0), rel=1e-12), g


def test_static_currents_from_the_force_balance():
    """Co-energy force (Fitzgerald & Kingsley ch. 3, from memory): (I^2/2)|dL/dx| equals
    spring + load at the open gap for the start current, and spring (preload + rate x
    stroke) + load at the seat for the stay current."""
    p = latch()
    lc, beta, s = p.l_closed[0], p.beta[0], p.stroke[0]
    i_start = float(p.start_current[0])
    i_stay = float(p.stay_current[0])
    assert 0.5 * i_start**2 * abs(magnet.inductance_slope(s, lc, beta)) == pytest.approx(0.35 + 0.15, rel=1e-12)
    assert 0.5 * i_stay**2 * abs(magnet.inductance_slope(0.0, lc, beta)) == pytest.approx(0.35 + 100 * s + 0.15, rel=1e-12)
    # the whole-stroke current is the largest balance current over a fine grid of gaps
    for rate in (100.0, 2000.0, 20000.0):
        through, gap = magnet.stroke_current(lc, beta, s, 0.35, rate, 0.15)
        grid = np.linspace(0.0, s, 20001)
        brute = magnet.balance_current(grid, lc, beta, s, 0.35, rate, 0.15)
        assert through == pytest.approx(np.max(brute), rel=1e-6), rate
        assert through >= magnet.start_current(lc, beta, s, 0.35, rate, 0.15)
        assert 0.0 <= gap <= s


def test_motion_starts_exactly_at_the_start_current():
    """The armature rests on the open stop until the open-gap RL rise (common practice)
    reaches the force-balance current, then moves."""
    p = latch()
    b = pull_in(p)
    t0 = rise_time(p.start_current[0], 0.0, 12.0, 12.3, p.l_open[0])
    assert b.start_time[0] == pytest.approx(t0, rel=1e-12)
    tr = simulate(p, [(0.03, True)], points=400)
    before = tr.time < t0 * (1 - 1e-9)
    assert np.all(tr.position[before] == p.stroke[0]), "no motion below the start current"
    assert np.all(tr.position[tr.time > t0 * 1.05] < p.stroke[0]), "moving once above it"


def test_dormand_prince_tableau_is_scipys():
    """Our vectorised integrator's coefficients equal scipy's RK45 (Dormand-Prince 5(4))."""
    from scipy.integrate import RK45

    a = np.zeros((6, 5))
    for i, row in enumerate(_A[1:6], start=1):
        a[i, :len(row)] = row[:5]
    np.testing.assert_allclose(a, RK45.A, rtol=0, atol=1e-15)
    np.testing.assert_allclose(DP_B[:6], RK45.B, rtol=0, atol=1e-15)
    np.testing.assert_allclose(np.abs(DP_E), np.abs(RK45.E), rtol=0, atol=1e-15)
    assert DP_B4.sum() == pytest.approx(1.0, abs=1e-15)


# --------------------------------------------------------------------------- limits
def test_equal_inductances_reduce_to_the_rl_step():
    """With L_open = L_closed there is no force: the current is exactly the RL step
    (common practice) and the armature never moves (a failed pull-in, not a NaN)."""
    p = latch(beta=0.0)
    tr = simulate(p, [(0.05, True)], points=2000)
    ref = rise_current(tr.time, 0.0, 12.0, 12.3, p.l_closed[0])
    np.testing.assert_allclose(tr.current, ref, rtol=1e-12, atol=1e-15)
    assert np.all(tr.position == p.stroke[0])
    b = pull_in(p, peak_time=0.01)
    assert b.status[0] == NO_START and math.isinf(b.seat_time[0])
    assert b.peak_end_current[0] == pytest.approx(rise_current(0.01, 0.0, 12.0, 12.3, p.l_closed[0]))


def test_vanishing_stroke_reduces_to_the_closed_rl_step():
    """As the stroke goes to zero the armature seats at a vanishing current and the coil
    is the plain RL circuit with the closed inductance (common practice)."""
    lc = 0.09
    worst = []
    for stroke in (1e-6, 1e-10):
        beta = (lc - lc / 2) / (stroke * lc / 2)  # L_open = L_closed / 2
        p = latch(stroke=stroke, beta=beta, l_closed=lc)
        tr = simulate(p, [(0.05, True)], points=2000)
        ref = rise_current(tr.time, 0.0, 12.0, 12.3, lc)
        worst.append(float(np.max(np.abs(tr.current - ref))) / (12.0 / 12.3))
        assert tr.state == "seated"
    assert worst[1] < worst[0] and worst[1] < 1e-3, f"largest deviation / (V/R): {worst}"


def test_heavy_armature_seats_late_and_early_current_is_the_open_rl_curve():
    """A 1000x heavier armature barely moves early on: the current follows the open-gap
    RL rise (common practice), and it seats far later than the light one."""
    light = pull_in(latch())
    p = latch(mass=18.0)
    heavy = pull_in(p)
    assert heavy.status[0] == SEATED
    assert heavy.seat_time[0] > 10 * light.seat_time[0]
    tau = p.l_open[0] / 12.3
    tr = simulate(p, [(5 * tau, True)], points=2000)
    ref = rise_current(tr.time, 0.0, 12.0, 12.3, p.l_open[0])
    np.testing.assert_allclose(tr.current, ref, rtol=2e-3, atol=1e-9,
                               err_msg="early current vs open-gap RL rise")


# --------------------------------------------------------------------------- integrators
CASES = {
    "latch": {},
    "bouncing": {"restitution": 0.5},
    "stiff spring": {"rate": 1500.0},
    "damped": {"damping": 3.0},
    "light": {"mass": 0.002},
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_explicit_and_implicit_scipy_solvers_agree_on_the_seat_time(case):
    """scipy's solve_ivp: explicit RK45 and DOP853 against implicit Radau and BDF, seat
    time within 0.1 %; our batched integrator against all of them."""
    p = latch(**CASES[case])
    seats = {m: pull_in_reference(p, m).seat_time for m in ("RK45", "DOP853", "Radau", "BDF")}
    assert all(math.isfinite(t) for t in seats.values()), seats
    for explicit in ("RK45", "DOP853"):
        for implicit in ("Radau", "BDF"):
            assert seats[explicit] == pytest.approx(seats[implicit], rel=1e-3), (explicit, implicit, seats)
    batch = pull_in(p)
    assert batch.seat_time[0] == pytest.approx(seats["DOP853"], rel=1e-5), (batch.seat_time, seats)


def test_batched_release_matches_the_scipy_reference():
    """Release through the freewheel path: batch vs solve_ivp (DOP853, Radau)."""
    p = latch(v_on=np.array([10.8, 12.0, 13.2]), r_off=np.array([12.0, 45.0, 200.0]),
              v_off=np.array([0.8, 0.8, 34.0]))
    i_off = np.array([0.25, 0.3, 0.5])
    b = release(p, i_off)
    assert np.all(b.status == OPENED)
    for k in range(3):
        for method in ("DOP853", "Radau"):
            r = release_reference(p.take(k), float(i_off[k]), method)
            assert r.opened
            assert b.open_time[k] == pytest.approx(r.open_time, rel=1e-5), (k, method)
            assert b.zero_time[k] == pytest.approx(r.zero_time, rel=1e-5), (k, method)
            assert b.charge[k] == pytest.approx(r.charge, rel=1e-5), (k, method)


def test_the_dip_exists_and_sits_at_the_seat_moment():
    """The motional back-EMF pulls the current down while the armature closes; its
    minimum is at the moment it seats, after which the current rises again (common
    practice: the dip is how firmware detects pull-in)."""
    p = latch()
    b = pull_in(p)
    assert b.dip_current[0] < b.hump_current[0] - 0.05, "a visible dip"
    assert b.dip_time[0] == b.seat_time[0] == b.impact_time[0]
    tr = simulate(p, [(0.03, True)], points=2000)
    hump = np.argmax(np.where(tr.time < b.seat_time[0], tr.current, -1))
    k = hump + np.argmin(tr.current[hump:])
    assert tr.time[k] == pytest.approx(b.seat_time[0], rel=1e-6), "minimum current at the seat"
    assert tr.current[k] == pytest.approx(b.dip_current[0], rel=1e-6)
    assert tr.position[k] == 0.0 and np.all(tr.position[k:] == 0.0)


# --------------------------------------------------------------------------- energy
def _energy_balance(p: ArmatureParams, t_on: float, method: str):
    t_end = t_on + 1.0
    tr = simulate(p, [(t_on, True, 4000), (t_end, False, 4000)], method=method, points=4000,
                  stop=lambda r: r.t >= t_on and r.state == "open" and not r.live)
    assert tr.stopped, "the run must end with the armature open and no current"
    t, i, x, v = tr.time, tr.current, tr.position, tr.velocity
    on, off = t <= t_on, t >= t_on
    f = lambda y, m: np.trapezoid(y[m], t[m])  # noqa: E731
    supply = p.v_on[0] * f(i, on)
    resistive = p.r_on[0] * f(i * i, on) + p.r_off[0] * f(i * i, off)
    freewheel = p.v_off[0] * f(i, off)
    field = 0.5 * magnet.inductance(x, p.l_closed[0], p.beta[0]) * i * i
    s, pre, rate, load = p.stroke[0], p.preload[0], p.rate[0], p.load[0]
    potential = -(pre * x + rate * (s * x - x * x / 2)) - load * x  # spring + load, F = -dU/dx
    kinetic = 0.5 * p.mass[0] * v * v
    damping = p.damping[0] * np.trapezoid(v * v, t)
    stops = sum(0.5 * p.mass[0] * (before**2 - after**2) for _, _, before, after in tr.impacts)
    out = (resistive + freewheel + (field[-1] - field[0]) + (potential[-1] - potential[0])
           + (kinetic[-1] - kinetic[0]) + damping + stops)
    return supply, out, tr


@pytest.mark.parametrize("method", ["numpy", "DOP853", "Radau"])
@pytest.mark.parametrize("restitution", [0.0, 0.4])
def test_energy_balance_over_a_full_actuation(method, restitution):
    """First law (energy method, Fitzgerald & Kingsley ch. 3, from memory) over on, seat,
    hold at full voltage, off, release to the open stop: within 0.5 %."""
    p = latch(restitution=restitution)
    supply, out, tr = _energy_balance(p, 0.03, method)
    assert len(tr.impacts) >= 2
    assert out == pytest.approx(supply, rel=5e-3), f"in {supply:.6g} J vs accounted {out:.6g} J"


def test_energy_balance_over_the_pull_in_alone():
    """The same balance up to just after the seat: field energy, spring energy and the
    impact loss are all non-zero here."""
    p = latch()
    seat = float(pull_in(p).seat_time[0])
    tr = simulate(p, [(seat * 1.01, True, 4000)], points=4000)
    t, i, x, v = tr.time, tr.current, tr.position, tr.velocity
    supply = 12.0 * np.trapezoid(i, t)
    field = 0.5 * magnet.inductance(x, p.l_closed[0], p.beta[0]) * i * i
    s = p.stroke[0]
    potential = -(0.35 * x + 100.0 * (s * x - x * x / 2)) - 0.15 * x
    stops = sum(0.5 * 0.018 * (b**2 - a**2) for _, _, b, a in tr.impacts)
    terms = [12.3 * np.trapezoid(i * i, t), field[-1] - field[0], potential[-1] - potential[0],
             0.4 * np.trapezoid(v * v, t), stops]
    assert min(terms) > 0, terms
    assert sum(terms) == pytest.approx(supply, rel=5e-3), terms


# --------------------------------------------------------------------------- failures
def test_failures_are_bounded_and_finite():
    """A spring too strong, a spring so stiff the armature stalls mid-stroke, and a very
    viscous armature: each ends with a status, finite figures and no NaN seat time."""
    p = latch(preload=np.array([3.0, 0.35, 0.35]), rate=np.array([100.0, 8000.0, 100.0]),
              damping=np.array([0.4, 0.4, 0.4]))
    b = pull_in(p, peak_time=0.02)
    assert list(b.status) == [NO_START, STALLED, SEATED]
    assert math.isinf(b.seat_time[0]) and math.isinf(b.seat_time[1])
    assert 0.0 < b.stall_gap[1] < p.stroke[1], "stalls inside the stroke"
    assert np.all(np.isfinite(b.peak_end_current))
    assert np.all(b.steps < 25_000)


def test_hold_force_current_rms_or_ripple_bottom():
    """The mass averages the ripple when one period cannot lift the armature; else the
    ripple bottom counts (our rule, docs/armature.md)."""
    p = latch()
    stay = float(p.stay_current[0])
    eff, lift = hold_force_current(p, np.array([stay * 1.1, stay * 0.5, stay * 0.5]),
                                   np.array([stay * 1.2, stay * 1.2, stay * 1.2]),
                                   np.array([4e-5, 4e-5, 1e-2]))
    assert eff[0] == pytest.approx(stay * 1.2) and lift[0] == 0.0
    assert eff[1] == pytest.approx(stay * 1.2), "25 kHz: averaged"
    assert eff[2] == pytest.approx(stay * 0.5), "100 Hz: the bottom counts"
    accel = (0.35 + 100 * 0.004 + 0.15) / 0.018
    assert lift[2] == pytest.approx(0.5 * accel * 1e-4)


def test_heavily_damped_armature_uses_the_stiff_integrator_and_matches_radau():
    """A dashpot-damped armature (damping/mass ~ 2e4 /s) is stiff: the batch steps it
    with the Rosenbrock 2(3) pair; scipy's implicit Radau is the reference."""
    from coildrive.model.armature_flight import fly, is_stiff

    p = latch(damping=400.0)
    assert is_stiff(p, 0.5)[0] and not is_stiff(latch(), 0.5)[0]
    b = pull_in(p)
    r = release(p, 0.3)
    ref = pull_in_reference(p, "Radau")
    rel = release_reference(p, 0.3, "Radau")
    assert b.seat_time[0] == pytest.approx(ref.seat_time, rel=1e-4)
    assert r.open_time[0] == pytest.approx(rel.open_time, rel=1e-4)
    assert b.steps[0] < 5000, "stiff steps are not stability-bound"
    # the Rosenbrock pair is also right (if slower) on the non-stiff latch
    q = latch()
    t0 = np.array([float(pull_in(q).start_time[0])])
    y0 = np.array([[q.l_open[0] * q.start_current[0] * (1 + 1e-12)], [q.stroke[0]], [0.0], [0.0], [0.0]])
    one = np.array([True])
    a = fly(q, t0, y0, np.array([1.0]), one, one, one, 1e-7)
    s = fly(q, t0, y0, np.array([1.0]), one, one, one, 1e-7, stiff=True)
    assert s.t[0] == pytest.approx(a.t[0], rel=1e-5) and s.end[0] == a.end[0]
