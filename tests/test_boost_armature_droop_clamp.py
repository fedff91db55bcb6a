"""A moving armature's boosted peak on a drooping main supply with a clamp across the switch
(``[supply] boost``, ``[armature]``, ``source_resistance``, ``[freewheel] type = "clamp"``):
the hold's off-times draw from the main bus through the clamp while the armature may be in
flight (coildrive/model/armature_flight.py ``_Rhs`` with ``ArmatureParams.clamp``;
coildrive/model/armature_sim.py ``_rest_clamped``; coildrive/design/supply.py
``armature_clamp_bus``).

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the circuit and armature
written afresh in the *current* (tests/armature_equations.py ``boosted_rhs`` with ``clamp``;
``L(x) = L_c / (1 + beta x)``, ``L' = dL/dx``)::

    boost:     L(x) di/dt = u_b - (R + R_b) i - i L'(x) v     C_b du_b/dt = -i
    hold on:   L(x) di/dt = u - R i - i L'(x) v               C du/dt = (V_s - u)/R_s - i
    hold off:  L(x) di/dt = u - V_clamp - R_off i - i L'(x) v C du/dt = (V_s - u)/R_s - i
               (while i > 0: the clamp stops conducting at zero, the bus then relaxes)
    m dv/dt = preload + rate (stroke - x) + load + i^2 L'(x) / 2 - c v

and the seated coil letting go where ``i^2 |L'(0)| / 2`` falls to the spring and load at
the seat. The scenario (the fast valve of examples/fast-valve-boost-armature-12v.toml on an
invented cable, bulk capacitor and 40 V or 60 V clamp) is invented.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from armature_equations import boost_peak, boosted_events, boosted_loop, boosted_rhs, current_form, hold_on_bus
from conftest import EXAMPLES, run_cli
from test_boost_armature import BOOST, DUTY, EXAMPLE, LC, PERIOD, POINT
from test_boost_armature_droop import C_BUS, R_S, _held_at_zero, designed_on_the_bus

from coildrive.model.armature import SEATED, ArmatureParams
from coildrive.model.armature_boost import boost_params, boosted_pull_in, seated_in_peak

V_C = 40.0               # the clamp, V
OPTS = dict(method="DOP853", rtol=1e-11, atol=1e-14)


def _point(clamp: bool = True, r_e: float | None = None) -> ArmatureParams:
    """The example's hot 9 V corner on the bus, its off-times through the clamp (``V_off =
    V_clamp - V_bus`` at the source's 9 V); ``r_e``: an eddy resistance, ohm."""
    p = ArmatureParams.make(**{**POINT, "v_off": V_C - POINT["v_on"]}, source_resistance=R_S, capacitance=C_BUS,
                            eddy=r_e)
    return p.clamped() if clamp else p


def reference(t_end: float, clamp: float | None, trip: float = 1.0, r_e: float | None = None) -> dict:
    """solve_ivp of the module docstring's equations: the peak from the boost until the
    threshold (``trip`` A, in flight; with an eddy resistance ``r_e`` on the terminal
    current), then the hold on the bus until ``t_end`` s (the seat's moment ``seat``, the bus
    then ``seat_bus``, the lowest bus ``low`` and when ``low_t``)."""
    bus = (R_S, C_BUS, POINT["v_on"])
    rhs = boosted_rhs(POINT, BOOST, bus, r_e=r_e, clamp=clamp)
    start, at_trip = boosted_events(POINT, trip, boosted_loop(POINT, BOOST, bus, r_e, clamp))

    def seat(_t, y):
        return y[1]
    seat.terminal, seat.direction = True, -1
    out: dict = {}
    t, y, free = boost_peak(rhs, start, at_trip, seat, [0.0, POINT["stroke"], 0.0, BOOST[0]], t_end, OPTS, out)
    y[3] = POINT["v_on"]                 # the main bus at the hand-over
    hold_on_bus(rhs, seat, t, y, free, out["trip"], DUTY, PERIOD, t_end, OPTS, out,
                fix=_held_at_zero if r_e is None else None)   # (an eddy term: the flux outlasts the current)
    return out


@pytest.mark.parametrize("r_e,trip", [(None, 1.0), (300.0, 1.1)], ids=["plain", "eddy"])
def test_the_flight_through_the_clamp_on_the_bus_matches_scipy(r_e, trip):
    """A threshold in flight: the hold on the drooping bus, each off-time through the clamp
    drawing from it, carries the armature onto the seat -- the threshold's and the seat's
    moments within 1e-6, the bus at the seat and the lowest bus up to it within 1e-6 of the
    droop, against solve_ivp (with a 300 ohm eddy term the branch behind the loop's
    Thevenin pair, the clamp blocking at the terminal current's zero); the clamp's draw is
    no rounding (the off-times left off the bus, the bus at the seat sits 54 mV higher, 68 mV
    with the eddy term)."""
    p = _point(r_e=r_e)
    pin = boosted_pull_in(boost_params(p, *BOOST), p, trip, DUTY, PERIOD, 0.02, rtol=1e-9)
    assert pin.status[0] == SEATED and not seated_in_peak(pin)[0] and pin.bus_settled is None
    ref = reference(float(pin.seat_time[0]), V_C, trip, r_e)
    droop = POINT["v_on"] - ref["low"]
    assert droop > 0.5 and ref["trip"] < ref["low_t"] < ref["seat"]
    assert pin.trip_time[0] == pytest.approx(ref["trip"], rel=1e-6)              # scipy solve_ivp
    assert pin.seat_time[0] == pytest.approx(ref["seat"], rel=1e-6)              # scipy solve_ivp
    assert pin.seat_bus[0] == pytest.approx(ref["seat_bus"], abs=1e-6 * droop)   # scipy solve_ivp
    assert pin.lowest_bus[0] == pytest.approx(ref["low"], abs=1e-6 * droop)      # scipy solve_ivp
    plain = boosted_pull_in(boost_params(_point(False, r_e), *BOOST), _point(False, r_e), trip, DUTY, PERIOD,
                            0.02, orbit=False)
    assert plain.seat_bus[0] - pin.seat_bus[0] > 0.05 * droop     # the clamp's draw: 54 mV, 68 mV


@pytest.mark.parametrize("r_e", [None, 300.0], ids=["plain", "eddy"])
def test_a_seated_hold_and_release_through_the_clamp_simulate_as_scipy(r_e):
    """``simulate`` of one point resting on the seat on the drooping bus (1 A, the bus at
    9 V): five PWM periods, each off-time through the clamp from the bus (the resting
    armature's held flight), then the release through it -- the armature lets go where the
    seated force falls to the spring's and load's, the current stops, the armature opens.
    The current and the bus at the last period's end, the letting-go, the current's zero
    and the bus then against solve_ivp within 1e-6 (the bus: of its 9 V); with a 300 ohm
    eddy term the magnetising current, the zero the terminal current's (the clamp blocks),
    the flux dying on through R_e."""
    from scipy.integrate import solve_ivp

    from coildrive.model.armature_sim import simulate

    p = _point(r_e=r_e)
    i0, u0, n = 1.0, POINT["v_on"], 5
    sched = [piece for k in range(n) for piece in (((k + DUTY) * PERIOD, True), ((k + 1) * PERIOD, False))]
    sched.append((n * PERIOD + 2e-3, False))
    tr = simulate(p, sched, state="seated", start=np.array([LC * i0, 0.0, 0.0, 0.0, 0.0, u0]), live=True,
                  points=8, stop=lambda r: r.state == "open" and not r.live)
    k = int(np.flatnonzero(tr.time <= n * PERIOD)[-1])
    assert tr.time[k] == pytest.approx(n * PERIOD, abs=1e-15)

    _, slope, opening = current_form(POINT)
    i_stay = math.sqrt(2.0 * opening(0.0) / -slope(0.0))   # the seated force balance, afresh
    rhs = boosted_rhs(POINT, BOOST, (R_S, C_BUS, POINT["v_on"]), r_e=r_e, clamp=V_C)
    y = [i0, 0.0, 0.0, u0]
    t = 0.0
    for stop, mode in ((s, "on" if on else "off") for s, on in sched[:-1]):
        sol = solve_ivp(rhs(mode, False), (t, stop), y, **OPTS)
        t, y = stop, list(sol.y[:, -1])
    got = tr.current if r_e is None else tr.magnetising_current
    assert got[k] == pytest.approx(y[0], rel=1e-6)                             # scipy solve_ivp
    assert tr.bus[k] == pytest.approx(y[3], abs=1e-6 * u0)                     # scipy solve_ivp

    def lets_go(_t, yy):
        return yy[0] - i_stay
    lets_go.terminal, lets_go.direction = True, -1

    def zero(_t, yy):   # (the terminal current's numerator: the clamp's path blocks)
        return yy[0] if r_e is None else yy[3] - V_C + r_e * yy[0]
    zero.terminal, zero.direction = True, -1
    sol = solve_ivp(rhs("off", False), (t, t + 2e-3), y, events=[lets_go], **OPTS)
    t_go, y = float(sol.t[-1]), list(sol.y[:, -1])
    sol = solve_ivp(rhs("off", True), (t_go, t_go + 2e-3), y, events=[zero], **OPTS)
    t_zero, u_zero = float(sol.t[-1]), float(sol.y[3, -1])
    assert sol.t_events[0].size and t_go > n * PERIOD
    assert tr.events["unlatch"] == pytest.approx(t_go, rel=1e-6)               # scipy solve_ivp
    zeros = [tz for tz, name in tr.log if name == "zero"]
    assert zeros[-1] == pytest.approx(t_zero, rel=1e-6)                        # scipy solve_ivp
    j = int(np.argmin(np.abs(tr.time - zeros[-1])))
    assert tr.bus[j] == pytest.approx(u_zero, abs=1e-6 * u0)                   # scipy solve_ivp


def _clamped(folder: Path) -> Path:
    """The example on a drooping main supply (0.1 ohm, 470 uF, the converter at 85 %) with
    a 60 V clamp across the switch."""
    board = EXAMPLES.parent / "boards" / "lab-m32-zener.toml"
    text = EXAMPLE.read_text().replace('board = "lab-m32-zener"', f'board = "{board}"').replace(
        'max = "16 V"', f'max = "16 V"\nsource_resistance = "0.1 ohm"\ncapacitance = "470 uF"\n'
        'boost_efficiency = 0.85').replace('type = "diode"', 'type = "clamp"\nclamp_voltage = "60 V"')
    path = folder / "clamp.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("coil_line", ["", 'eddy_resistance = "1 kohm"'], ids=["plain", "eddy"])
def test_design_simulate_and_emulate_with_the_clamp_on_the_drooping_bus(tmp_path, coil_line):
    """``coildrive design --json`` (a real subprocess, tests/test_boost_armature_droop.py
    ``designed_on_the_bus``): seated at every corner (some in the hold, flown on the bus
    through the clamp's draws), the lowest bus the flights' and the floor's after the seat
    (named). ``simulate`` at 9 V with the nominal coil stays at or above the design's lowest
    bus (a bound over the envelope). With an eddy term (1 kohm) the same; without, the
    virtual device's capture passes ``check`` (plumbing: it shares the design's physics;
    split decay: tests/test_boost_armature_droop_split.py)."""
    from test_emulator_device import emulated_passes_check

    from coildrive.config import load_drive
    from coildrive.design import design

    path = _clamped(tmp_path)
    path.write_text(path.read_text().replace("inductance_tolerance = 0.10", "inductance_tolerance = 0.10\n"
                                             + coil_line))
    s = designed_on_the_bus(str(path))["supply"]
    assert "clamp's off-times" in s["lowest_bus_method"]
    out = tmp_path / "c.csv"
    r = run_cli("simulate", str(path), "--supply", "9", "--coil-temp", "-40", "--hold-time", "0.001",
                "--csv", str(out))
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(out, delimiter=",", names=True)
    assert np.min(data["position_m"]) == 0.0
    assert s["lowest_bus_v"] <= np.min(data["bus_v"]) < 9.0
    if coil_line:
        return
    emulated_passes_check(design(load_drive(path)), tmp_path)


@pytest.mark.compiler
def test_firmware_in_the_loop_through_the_clamp_on_the_bus(tmp_path):
    """The reference C driver (gcc) in the loop with the hottest coil at the nominal 13.5 V:
    the device flies the hold on the main bus, the clamp's off-times drawing from it
    (bench/boost_flight.py), and ``check`` passes (lean: one corner; plumbing, the device
    shares the model)."""
    from driver_harness import hot_nominal_loop_passes

    (tmp_path / "d").mkdir()
    hot_nominal_loop_passes(tmp_path, _clamped(tmp_path / "d"))
