"""A moving armature's boosted peak on a drooping main supply with an eddy-current term
(``[supply] boost``, ``[armature]``, ``source_resistance`` and ``coil.eddy_resistance``):
the peak from the boost capacitor until the terminal current reaches the threshold, then
the hold on the main bus, its capacitor a state of the flight, the eddy resistance across
the magnetising branch throughout (coildrive/model/armature_boost.py,
coildrive/model/armature_flight.py, coildrive/model/supply.py).

Outside references:

* scipy's ``solve_ivp`` (Radau, rtol 1e-11) of the circuit and armature written afresh
  below in the branch's flux linkage ``lam``, gap ``x``, velocity ``v`` and capacitor ``u``
  (Kirchhoff's laws solved by hand for the branch's voltage ``e``; ``R_e`` across the
  branch, ``i_m = lam (1 + beta x) / L_c`` its current, ``i_t = i_m + e / R_e`` the
  terminal current the sense sees)::

      boost:     e = R_e (u - (R + R_b) i_m) / (R + R_b + R_e)    C_b du/dt = -i_t
      hold on:   e = R_e (u - R i_m) / (R + R_e)                  C du/dt = (V_s - u)/R_s - i_t
      hold off:  e = -R_e (V_off + R_off i_m) / (R_off + R_e) while i_t > 0, else e = -R_e i_m
                 C du/dt = (V_s - u)/R_s                          (the freewheel draws nothing)
      dlam/dt = e,   m dv/dt = preload + rate (stroke - x) + load - lam^2 beta / (2 L_c) - c v

  the boost capacitor from ``V_b``, the main bus from ``V_s`` at the hand-over; resting on
  the open stop until the pull beats spring + load, an inelastic seat. Checked within 1e-6:
  the threshold's moment, the seat's, the bus at the seat and the lowest bus after the
  hand-over (in the flight; after a seat in the peak, the seated coil's PWM on the bus);
  ``simulate``'s firmware peak (the run with the eddy term to the terminal current's trip)
  against the same equations' crossing within 2e-5 (the run's rtol 1e-7: measured 9.5e-6);
* the first law over the hold on the bus from the hand-over to the seat (``R_s = inf``,
  the switch on throughout, damping 0), its terms written afresh here from the simulated
  samples: what the bus capacitor gave is the copper's, the eddy resistance's, the field's
  and the armature's motion and the spring's and load's work, within 1e-6 (measured 5e-9).

The scenario (the fast valve of examples/fast-valve-boost-armature-12v.toml on an invented
cable, bulk capacitor and eddy term) is invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from armature_equations import boost_peak, hold_on_bus
from test_boost_armature import BOOST, DUTY, PERIOD, POINT
from test_boost_armature_droop import C_BUS, R_S, _droop, agrees, designed_on_the_bus, simulated_at_9v

from coildrive.model.armature import SEATED, ArmatureParams
from coildrive.model.armature_boost import boost_params, boosted_pull_in, seated_in_peak

#: The eddy resistance, ohm (invented): against the 8.6 ohm loop the terminal current steps
#: by some 3 % of V/R at each switch-on.
R_E = 300.0


def reference(g: dict, boost: tuple, r_s: float, c_bus: float, r_e: float, trip: float, duty: float,
              period: float, t_end: float, peak: float | None = None, v_src: float | None = None) -> dict:
    """solve_ivp (Radau) of the module docstring's equations from switch-on to ``t_end``:
    ``trip``, ``seat`` (s), ``seat_bus`` (V, seated in the hold), the lowest bus ``low``
    (V) after the hand-over and when ``low_t`` (s), the bus at ``t_end`` ``end_bus`` (V). ``peak``: the peak ends at that time
    (s) instead of at the threshold; ``v_src``: the source behind ``R_s`` in the hold (V;
    default ``g["v_on"]``, at which the bus starts)."""
    from scipy.integrate import solve_ivp

    v_b, c_b, r_b = boost
    lc, beta, s = g["l_closed"], g["beta"], g["stroke"]
    v_s = g["v_on"] if v_src is None else v_src
    t_peak = t_end
    if peak is not None:
        trip, t_peak = math.inf, peak

    def branch(mode, lam, x, u):
        """(e, i_t): the branch's voltage and the terminal current."""
        i_m = lam * (1 + beta * x) / lc
        if mode == "boost":
            r = g["r_on"] + r_b
            e = r_e * (u - r * i_m) / (r + r_e)
        elif mode == "on":
            e = r_e * (u - g["r_on"] * i_m) / (g["r_on"] + r_e)
        else:
            e = -r_e * (g["v_off"] + g["r_off"] * i_m) / (g["r_off"] + r_e)
            if i_m + e / r_e <= 0.0:   # the freewheel diode blocks: the flux dies through R_e
                e = -r_e * i_m
        return e, i_m + e / r_e

    def rhs(mode, free):
        def f(_t, y):
            lam, x, v, u = y
            e, i_t = branch(mode, lam, x, u)
            if mode == "boost":
                du = -i_t / c_b
            else:
                du = ((v_s - u) / r_s - (i_t if mode == "on" else 0.0)) / c_bus
            if not free:
                return [e, 0.0, 0.0, du]
            acc = (g["preload"] + g["rate"] * (s - x) + g["load"] - lam * lam * beta / (2 * lc)
                   - g["damping"] * v) / g["mass"]
            return [e, v, acc, du]
        return f

    def start(_t, y):
        return y[0] ** 2 * beta / (2 * lc) - (g["preload"] + g["load"])
    start.terminal, start.direction = True, 1

    def at_trip(_t, y):
        return branch("boost", y[0], y[1], y[3])[1] - trip
    at_trip.terminal, at_trip.direction = True, 1

    def seat(_t, y):
        return y[1]
    seat.terminal, seat.direction = True, -1

    opts = dict(method="Radau", rtol=1e-11, atol=1e-14)
    out = {}
    y = [0.0, s, 0.0, v_b]
    t, y, free = boost_peak(rhs, start, at_trip, seat, y, t_peak, opts, out)
    y[3] = g["v_on"]                # the main bus at the hand-over
    y = hold_on_bus(rhs, seat, t, y, free, out["trip"], duty, period, t_end, opts, out)
    out["end_bus"] = y[3]
    return out


@pytest.mark.parametrize("trip,where", [(1.0, "hold"), (1.6, "peak")])
def test_the_hold_on_the_drooping_bus_with_an_eddy_term_matches_scipy(trip, where):
    """The threshold on the terminal current (in flight; after a seat in the peak), the
    seat in the hold on the drooping bus and the bus then, and the lowest bus after the
    hand-over against solve_ivp (Radau) of the equations written afresh."""
    p = ArmatureParams.make(**POINT, source_resistance=R_S, capacitance=C_BUS, eddy=R_E)
    pin = boosted_pull_in(boost_params(p, *BOOST), p, trip, DUTY, PERIOD, 0.02, rtol=1e-10)
    ref = reference(POINT, BOOST, R_S, C_BUS, R_E, trip, DUTY, PERIOD, 2e-3)
    agrees(pin, ref, where)


def test_first_law_of_the_hold_on_the_bus_with_an_eddy_term():
    """No source behind the bus (``R_s = inf``), the switch on throughout, damping 0: from
    the hand-over (the state at the threshold) to the seat the bus capacitor's energy goes
    to the copper, the eddy resistance, the field, the armature's motion and the spring's
    and load's work -- terms written afresh from the simulated samples (trapezoids on a
    dense run), the seat's moment and bus the batch's (first law)."""
    from coildrive.model.armature_sim import simulate

    g = {**POINT, "damping": 0.0}
    r_e = 100.0   # (a strong eddy term: its loss a visible share of the balance)
    p = ArmatureParams.make(**g, source_resistance=math.inf, capacitance=C_BUS, eddy=r_e)
    pb = boost_params(p, *BOOST)
    pin = boosted_pull_in(pb, p, 1.0, 1.0, 1.0, 0.02, rtol=1e-10)   # (one long on-time)
    assert pin.status[0] == SEATED and not seated_in_peak(pin)[0]
    t0 = float(pin.trip_time[0])
    y0 = np.concatenate([pin.trip_state[:5, 0], [g["v_on"]]])
    tr = simulate(p, [(t0 + 1e-3, True, 20000)], state="free", start=y0, t0=t0, rtol=1e-10,
                  stop=lambda r: r.state == "seated", points=20000)
    assert tr.state == "seated"
    assert tr.time[-1] == pytest.approx(pin.seat_time[0], rel=1e-6)      # the batch and the one-point run
    assert tr.bus[-1] == pytest.approx(pin.seat_bus[0], abs=1e-6)
    t, i_t, i_m, x, v = tr.time, tr.current, tr.magnetising_current, tr.position, tr.velocity
    given = 0.5 * C_BUS * (g["v_on"] ** 2 - tr.bus[-1] ** 2)
    copper = g["r_on"] * np.trapezoid(i_t ** 2, t)
    eddy = r_e * np.trapezoid((i_t - i_m) ** 2, t)
    travel = g["stroke"] - x

    def held(k):   # field + kinetic + the spring's and load's work from the open stop
        return (0.5 * tr.flux[k] * i_m[k] + 0.5 * g["mass"] * v[k] ** 2 + g["preload"] * travel[k]
                + 0.5 * g["rate"] * travel[k] ** 2 + g["load"] * travel[k])
    impact = 0.5 * g["mass"] * sum(a ** 2 - b ** 2 for _, _, a, b in tr.impacts)
    taken = copper + eddy + held(-1) + impact - held(0)
    assert eddy > 5e-3 * given                                               # the eddy term counts
    assert taken == pytest.approx(given, rel=1e-6)                           # first law


EDDY = ('inductance = "7 mH"', f'inductance = "7 mH"\neddy_resistance = "{R_E:g} ohm"')


@pytest.fixture(scope="module")
def thin(tmp_path_factory):
    """The drooping example with the eddy term on a thinner cable (0.4 ohm), designed in-process."""
    from coildrive.config import load_drive
    from coildrive.design import design

    return design(load_drive(_droop(tmp_path_factory.mktemp("thin"), EDDY, ('"0.1 ohm"', '"0.4 ohm"'))))


def test_design_follows_the_armature_with_an_eddy_term_onto_the_drooping_bus(tmp_path, thin):
    """``coildrive design --json`` (a real subprocess): seated at every corner, some within
    the peak and the rest in the hold on the drooping bus; the lowest bus is the armature
    runs' after the hand-over; a deeper droop (a thinner cable) lowers the bus; on a full
    bridge it designs too, the release returning into the bus (the converter idle or
    drawing: tests/test_boost_armature_bridge_droop.py), the highest bus named."""
    d = designed_on_the_bus(_droop(tmp_path, EDDY))   # (a real subprocess)
    assert thin.to_dict()["supply"]["lowest_bus_v"] < d["supply"]["lowest_bus_v"]
    b = designed_on_the_bus(_droop(tmp_path, EDDY, ('[freewheel]', '[switch]\ntopology = "full_bridge"\n\n[freewheel]')))
    assert b["supply"]["highest_bus_v"] is not None


def test_simulate_flies_the_hold_with_an_eddy_term_on_the_main_bus(thin):
    """One actuation as ``simulate`` runs it (9 V, a 100 degC coil, nominal parts; the
    firmware's peak from the nominal boost until the terminal current -- what the sense
    resistor carries, the eddy share leading the magnetising current -- reaches the nominal
    chain's trip, then its hold on the 0.4 ohm main bus, the converter's current out of the
    source): the main bus at the source's voltage through the peak; the peak's end (the
    threshold's crossing of the terminal current, the armature still in flight), the seat
    in the hold, the lowest bus over the hold (at the turn-off, the end of the last
    on-time) and the bus there against solve_ivp (Radau) of the equations written afresh
    with the same peak, duty and source, within 1e-6; the crossing within 2e-5 (the firmware
    peak's run at the design's integrator tolerance, rtol 1e-7). (Run without the eddy term the
    magnetising current would reach the trip only at 293 us, the armature seated by then:
    a peak the firmware does not run.)"""
    from coildrive.design.boost import nominal_trip
    from coildrive.model.eddy import EddyCoil
    from test_boost_armature import LC

    w, g, duty, peak, period, v_src = simulated_at_9v(thin, 5e-4, EddyCoil(LC, R_E))
    s = thin.drive.supply
    t_off = w.events["off"]
    trip = nominal_trip(thin.drive)     # ADC code x LSB / (R_sense x gain), a nominal chain
    boost = (s.boost, s.boost_capacitance, s.boost_resistance)
    assert peak < thin.pull_in.peak_time_s                                # ended by the threshold
    crossing = reference(g, boost, s.source_resistance, s.capacitance, R_E, trip, duty, period, 1.01 * peak,
                         v_src=v_src)["trip"]
    assert peak == pytest.approx(crossing, rel=2e-5)   # scipy solve_ivp (the run's rtol 1e-7: measured 9.5e-6)
    ref = reference(g, boost, s.source_resistance, s.capacitance, R_E, math.inf, duty, period, t_off,
                    peak=peak, v_src=v_src)
    assert ref["seat"] > peak                                             # seated in the hold
    k = int(np.flatnonzero(w.time <= t_off)[-1])
    droop = 9.0 - ref["low"]
    assert droop > 0.05 and ref["low_t"] == pytest.approx(t_off)          # the lowest at the turn-off
    assert w.events["seat"] == pytest.approx(ref["seat"], rel=1e-6)             # scipy solve_ivp
    assert w.bus_voltage[k] == pytest.approx(ref["end_bus"], abs=1e-6 * droop)  # scipy solve_ivp
    assert float(np.min(w.bus_voltage[w.time <= t_off])) == pytest.approx(ref["low"], abs=1e-6 * droop)


def test_emulated_drive_passes_check(tmp_path, thin):
    """The virtual bench device runs the drive's actuation (the boost, the threshold on the
    terminal current, the armature into the hold on the main bus): its capture passes
    ``check`` (plumbing: the device shares the design's physics)."""
    from test_emulator_device import capture_of, run as run_device

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions, VirtualDevice

    dev = VirtualDevice(thin.drive, DeviceOptions(noise_codes=1.0, seed=3, hold_time=0.004), design=thin)
    msgs, _ = run_device(dev, 0.05 + 2 * dev.period, step=0.05)
    report = check_capture(capture_of(msgs, tmp_path / "c.cdcap"), thin)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items if i.status == "FAIL"]
