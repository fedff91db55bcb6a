"""A moving armature over two flux-linkage curves (open and seated) on a channel of a
system file: the rail-current bound of its peak (coildrive/model/flux_bound.py,
gap_rise_table) and tail, the stagger and the shared rail's droop.

Outside references, named beside each check:

* scipy's ``PchipInterpolator`` (Fritsch & Carlson) through the drive file's two tables
  (straight past their ends), ``brentq`` and ``solve_ivp`` (DOP853, events at the stop
  and the seat) on the armature's equations written afresh in
  tests/test_armature_curves.py (``Fresh``: the current blended in the gap at constant
  flux, the series magnetic circuit of Fitzgerald, Kingsley & Umans, *Electric
  Machinery*, ch. 1, from memory; the co-energy force, ch. 3): the peak from the open
  stop, then the hold's PWM on the seated curve (tests/test_system_flux.py's LSODA
  segments);
* copper R(T): IEC 60028, alpha = 0.00393 /K.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from rail_reference import assert_staggered_within_limit, readable, simulate_csv, supply_corners
from test_armature_curves import Fresh
from test_system_flux import BOARD, _branch, _folder, _loop, _pwm, rail_branch

from coildrive.cli import app
from coildrive.config import load_drive


#: the purge valve's seated curve (invented: above the open one, saturating sooner) and armature
SEATED = """seated_current = [0, 0.2, 0.4, 0.8, 1.5, 2.0]
seated_linkage = ["0 mWb", "22 mWb", "42 mWb", "70 mWb", "95 mWb", "105 mWb"]
"""
ARMATURE = """
[armature]
stroke = "1 mm"
mass = "5 g"
spring_preload = "0.3 N"
spring_rate = "50 N/m"
load_force = "0 N"
damping = "0.5 N*s/m"
"""


@pytest.fixture(scope="module")
def system(tmp_path_factory):
    """The manifold with its two purge valves on test_system_flux's saturating curve, given
    a moving armature and a seated curve."""
    r = CliRunner().invoke(app, ["design", str(_folder(tmp_path_factory.mktemp("fluxarm"), ARMATURE, SEATED)),
                                 "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"]


def _peak(fresh, arm, scale, v, r, peak):
    """The armature's pull-in from the open stop at 0 A, ``v`` V through ``r`` ohm, for
    ``peak`` s (scipy DOP853 on the fresh equations, the unscaled flux ``psi`` with ``s
    dpsi/dt = V - R i``, the closing force ``s (W_o - W_c)(psi) / stroke``): standing until
    the force beats preload + load, flying, then seated (inelastic). ``(t, i, seated)``."""
    from scipy.integrate import solve_ivp

    stroke, m, c = arm.stroke, arm.mass, arm.damping

    def opening(x):
        return arm.spring_preload + arm.spring_rate * (stroke - x) + arm.load_force

    def force(psi):
        return scale * fresh.closing_force(psi)

    def stand(_t, y):
        return [(v - r * fresh.current(y[0], stroke)) / scale]

    def leave(_t, y):
        return force(y[0]) - opening(stroke)
    leave.terminal, leave.direction = True, 1

    def fly(_t, y):
        psi, x, u = y
        return [(v - r * fresh.current(psi, x)) / scale, u, (opening(x) - force(psi) - c * u) / m]

    def seat(_t, y):
        return y[1]
    seat.terminal, seat.direction = True, -1

    def rest(_t, y):
        return [(v - r * fresh.current(y[0], 0.0)) / scale]

    ts, cs = [], []
    opts = {"method": "DOP853", "rtol": 1e-8, "atol": 1e-11}
    sol = solve_ivp(stand, (0.0, peak), [0.0], events=leave, dense_output=True, **opts)
    t = np.linspace(0.0, sol.t[-1], 60)
    ts.append(t), cs.append([fresh.current(p, stroke) for p in sol.sol(t)[0]])
    seated = False
    if sol.t[-1] < peak:
        sol = solve_ivp(fly, (sol.t[-1], peak), [sol.y[0][-1], stroke, 0.0], events=seat, dense_output=True,
                        **{**opts, "atol": [1e-12, 1e-11, 1e-9]})
        t = np.linspace(sol.t[0], sol.t[-1], 150)
        y = sol.sol(t)
        ts.append(t), cs.append([fresh.current(p, max(x, 0.0)) for p, x in zip(y[0], y[1])])
        if sol.t[-1] < peak:
            seated = True
            assert force(sol.y[0][-1]) >= opening(0.0), "the force holds it on the seat"
            sol = solve_ivp(rest, (sol.t[-1], peak), [sol.y[0][-1]], dense_output=True, **opts)
            t = np.linspace(sol.t[0], peak, 60)
            ts.append(t), cs.append([fresh.current(p, 0.0) for p in sol.sol(t)[0]])
    return np.concatenate(ts), np.concatenate([np.asarray(x, float) for x in cs]), seated


def _purge(system):
    """``(channel, drive, Fresh, seated L_d(i), hold period s)`` of the system's last
    purge valve: its curves written afresh (``Fresh``), the seated curve's incremental
    inductance straight past the table's end."""
    ch = system["channels"][-1]
    drv = load_drive(ch["drive_file"], BOARD)
    c = drv.coil
    fresh = Fresh((c.flux_current, c.flux_linkage), (c.seated_current, c.seated_linkage), drv.armature.stroke)
    seated_ld = fresh.curves["c"].derivative()
    top = fresh.top["c"]
    slope = float(seated_ld(top))

    def ld(i):
        return np.where(i <= top, seated_ld(np.minimum(i, top)), slope)
    return ch, drv, fresh, ld, 1 / ch["design"]["hold"]["frequency_hz"]


def _never_above(t, i, branches, where) -> None:
    """The simulated current ``i`` (A at ``t`` s) never above the channel's bound (its
    largest branch there); ``where`` names the point in the failure."""
    bound = np.max([_branch(t, b) for b in branches], axis=0)
    assert np.all(i <= bound + 1e-9), (*where, float(np.max(i - bound)))


def _within_35_percent(ratios) -> None:
    """Each supply's bound over the peak at or above the simulated worst, within 35 %."""
    print("bound / simulated worst over the peak:", [round(x, 4) for x in ratios])
    assert all(1.0 <= x <= 1.35 for x in ratios), ratios


def test_gap_bound_never_below_the_simulated_worst(system):
    """The purge valve's armature over its two curves (scipy, written afresh: module
    docstring) at the lowest and highest supply and just below a middle peak-table step,
    the peak the firmware picks there, the coil cold (ambient.min: the most current), R
    and L at both tolerance ends, then 12 periods of its hold on the seated curve: the
    channel's bound (its largest branch readable there) is never below the simulated
    current, and over the peak it is within 35 % of the simulated worst (the bound takes
    the top supply of each peak's reading range, 21.3 V at 20 V, and while the armature
    closes, at each current, the least incremental inductance the blend can have)."""
    ch, drv, fresh, ld, period = _purge(system)
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    ratios = []
    for v, peak, duty, branches in supply_corners(ch, drv):
        worst = 0.0
        for r_f in (1 - tol_r, 1 + tol_r):
            loop = _loop(drv, drv.ambient.min, r_f)
            for l_f in (1 - tol_l, 1 + tol_l):
                t, i, seated = _peak(fresh, drv.armature, l_f, v, loop[0], peak)
                assert seated, (v, r_f, l_f)
                worst = max(worst, float(i.max()))
                t_h, i_h = _pwm(ld, l_f, float(i[-1]), v, loop, peak, duty, period, 12)
                _never_above(np.concatenate([t, t_h]), np.concatenate([i, i_h]), branches, (v, r_f, l_f))
        ratios.append(max(b["peak_end_a"] for b in branches) / worst)
    _within_35_percent(ratios)


def test_staggered_total_never_above_the_limit(system):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh
    (tests/test_system_flux.py's rail_branch) at every supply where the readable branches
    change: never above the limit with the stagger found."""
    assert_staggered_within_limit(system, rail_branch)
    assert all(c["ok"] for c in system["checks"]), system["checks"]


@pytest.fixture(scope="module")
def eddy_system(tmp_path_factory):
    """The purge valves of :func:`system` with tests/test_system_eddy.py's invented 150 ohm
    eddy term across the coil, the supply's limit raised to 3.5 A (the saturating curve's
    tail is loose, as tests/test_system_flux_combined.py's)."""
    from test_system_eddy import EDDY

    path = _folder(tmp_path_factory.mktemp("fluxarmeddy"), ARMATURE, SEATED + EDDY)
    path.write_text(path.read_text().replace('current_limit = "3 A"', 'current_limit = "3.5 A"'))
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], path


def test_eddy_gap_bound_never_below_the_simulated_current(eddy_system):
    """With the eddy term (module docstring's equations, the flux the magnetising branch's
    behind the loop's Thevenin pair ``V R_e/(R + R_e)``, ``R R_e/(R + R_e)``, the terminal
    current ``(V + R_e i_m)/(R + R_e)``; then 10 hold periods on the seated curve,
    tests/test_system_flux_combined.py's LSODA run, the diode blocking at zero terminal
    current) at the supplies of :func:`test_gap_bound_never_below_the_simulated_worst`, the
    coil cold, R and L both at their low or both at their high tolerance ends: the bound
    never below the simulated terminal current, its peak within 35 % of the simulated
    worst."""
    from test_system_flux_combined import _eddy_run

    ch, drv, fresh, ld, period = _purge(eddy_system[0])
    tol_r, tol_l, r_e = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance, drv.coil.eddy_resistance
    ratios = []
    for v, peak, duty, branches in supply_corners(ch, drv):
        worst = 0.0
        for r_f, l_f in ((1 - tol_r, 1 - tol_l), (1 + tol_r, 1 + tol_l)):
            r_on, r_off, v_fw = _loop(drv, drv.ambient.min, r_f)
            t, i_m, seated = _peak(fresh, drv.armature, l_f, v * r_e / (r_on + r_e), r_on * r_e / (r_on + r_e), peak)
            assert seated, (v, r_f, l_f)
            i = (v + r_e * i_m) / (r_on + r_e)
            worst = max(worst, float(i.max()))
            t_h, i_h = _eddy_run(ld, l_f, v, r_on, r_off, v_fw, r_e, peak, duty, period, i_m0=float(i_m[-1]))
            _never_above(np.concatenate([t, t_h]), np.concatenate([i, i_h]), branches, (v, r_f, l_f))
        ratios.append(max(b["peak_end_a"] for b in branches) / worst)
    _within_35_percent(ratios)


def test_eddy_staggered_total_never_above_the_limit(eddy_system):
    """The dense sweep (1e5 points) of the rail's bound written afresh with the two
    eddy-term armature channels: never above the 3.5 A limit."""
    assert_staggered_within_limit(eddy_system[0], rail_branch)


def test_eddy_simulate_within_the_bound(eddy_system, tmp_path):
    """``simulate SYSTEM.toml`` runs the eddy-term armature channels (the model's own
    actuation) at 28 V, cold: the rail never above the sum of the channels' bounds readable
    there on the CSV's grid (plumbing: both are the model's)."""
    system, path = eddy_system
    csv = simulate_csv(path, tmp_path, 0.003)
    total = sum(np.max([rail_branch(csv[:, 0] - c["offset_s"], b) for b in readable(c, 28.0)], axis=0)
                for c in system["channels"])
    assert np.all(csv[:, 1] <= total + 1e-9), float(np.max(csv[:, 1] - total))
    assert csv[:, 7].max() > 0.3


def _flight(fresh, mech, v, r, t_end):
    """The armature over ``fresh``'s curves from rest at the open stop, 0 A, ``v`` V through
    ``r`` ohm for ``t_end`` s (scipy DOP853 on the fresh equations): standing at a stop
    until the force moves it, flying, a seat bouncing back at ``restitution`` times the
    speed (inelastic at the open stop). ``(t, i)``."""
    from scipy.integrate import solve_ivp

    stroke, m, k, f0, c, e = (mech[x] for x in ("stroke", "m", "k", "f0", "c", "e"))

    def opening(x):
        return f0 + k * (stroke - x)

    def fly(_t, y):
        psi, x, u = y
        return [v - r * fresh.current(psi, x), u, (opening(x) - fresh.closing_force(psi) - c * u) / m]

    def seat(_t, y):
        return y[1]
    seat.terminal, seat.direction = True, -1

    def back_open(_t, y):
        return stroke - y[1]
    back_open.terminal, back_open.direction = True, -1

    def stand_rhs(x):
        return lambda _t, y: [v - r * fresh.current(y[0], x)]

    def moves(x, sign):
        def ev(_t, y):
            return sign * (fresh.closing_force(y[0]) - opening(x))
        ev.terminal, ev.direction = True, 1
        return ev

    ts, cs = [], []
    t0, psi, x, u, at = 0.0, 0.0, stroke, 0.0, "open"
    opts = {"method": "DOP853", "rtol": 1e-8, "atol": 1e-11, "dense_output": True}
    for _ in range(40):
        if t0 >= t_end:
            break
        if at in ("open", "seat"):       # at a stop until the net force moves it off
            sol = solve_ivp(stand_rhs(x), (t0, t_end), [psi], events=moves(x, 1 if at == "open" else -1), **opts)
            tt = np.linspace(t0, sol.t[-1], 80)
            ts.append(tt), cs.append([fresh.current(p, x) for p in sol.sol(tt)[0]])
            t0, psi, at = sol.t[-1], sol.y[0][-1], "fly"
            continue
        sol = solve_ivp(fly, (t0, t_end), [psi, x, u], events=[seat, back_open], **opts)
        tt = np.linspace(t0, sol.t[-1], 200)
        y = sol.sol(tt)
        ts.append(tt), cs.append([fresh.current(p, min(max(q, 0.0), stroke)) for p, q in zip(y[0], y[1])])
        t0, (psi, x, u) = sol.t[-1], sol.y[:, -1]
        if sol.status == 1 and sol.t_events[0].size:         # the seat: bounce, or rest there
            x, u = 0.0, -e * u
            at = "fly" if u > 1e-3 else "seat"
        elif sol.status == 1:                                  # back at the open stop
            x, u, at = stroke, 0.0, "open"
    return np.concatenate(ts), np.concatenate([np.asarray(q, float) for q in cs])


@pytest.mark.parametrize("mech, closing", [
    # a bouncing seat (restitution 0.6): nothing proved after the earliest start
    ({"m": 2e-3, "k": 200.0, "f0": 2.0, "c": 0.05, "e": 0.6}, "start"),
    # heavy and undamped on a stiff spring, a marginal force: it swings open and shut
    ({"m": 0.05, "k": 4000.0, "f0": 2.0, "c": 0.0, "e": 0.0}, "start"),
    # an inelastic seat, under-damped: the closing stretch for tau_1 after the start
    ({"m": 2e-3, "k": 200.0, "f0": 2.0, "c": 0.05, "e": 0.0}, "window"),
])
def test_gap_rise_bound_under_any_motion(mech, closing):
    """coildrive/model/flux_bound.py's gap_rise_table against scipy ``solve_ivp`` of the
    saturating latch of tests/test_armature_curves.py (its two invented curves, 4 mm
    stroke: the equations written afresh there) at 12 V through 6 ohm over 12 ms: never
    below the simulated current, where the armature bounces off the seat or swings open
    again (the any-motion bound from the earliest start) and where it only closes (the
    closing stretch for ``tau_1``, coildrive/model/armature_bound.py's closing window).
    (In these three the simulated current also stays under the closing stretch alone: the
    flights exercise the bound's plumbing over motion, not a case that needs the
    any-motion part.)"""
    from test_armature_curves import STROKE, open_table, seated_table

    from coildrive.model import armature_bound, flux, flux_bound

    fresh = Fresh()
    mech = {**mech, "stroke": STROKE}
    v, r, t_end = 12.0, 6.0, 0.012
    o, c = (flux.curve(tuple(map(float, a)), tuple(map(float, b))) for a, b in (open_table(), seated_table()))
    start = flux_bound.earliest_start(o, c, 1.0, 1.0, STROKE, mech["f0"], v, r)
    window = armature_bound.closing_window(mech["m"], mech["c"], mech["k"], mech["e"])
    assert 0.0 < start < t_end
    times, currents = flux_bound.gap_rise_table(o, c, 1.0, v, r, t_end, start,
                                                start + (window if closing == "window" else 0.0))
    t, i = _flight(fresh, mech, v, r, t_end)
    bound = flux_bound.table_current(t, times, currents)
    print(closing, "highest current / bound at that time:", round(float(i.max()), 4),
          round(float(bound[np.argmax(i)]), 4))
    assert np.all(i <= bound + 1e-9), float(np.max(i - bound))
