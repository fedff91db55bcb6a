"""A moving armature's boosted peak on a drooping main supply with a clamp across the switch
and split decay (``[supply] boost``, ``[armature]``, ``source_resistance``,
``[freewheel] type = "clamp"``, ``split_decay = true``): the hold's off-times go through
the bypass (the slow path: nothing drawn from the main bus) while the armature may be in
flight, and only the release goes through the clamp, drawing from the bus
(coildrive/design/boost_armature.py ``clamp_draws``; coildrive/model/armature_sim.py's
release path carrying the clamp; coildrive/design/supply.py ``armature_clamp_bus``).

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the circuit and armature
written afresh in the current (tests/armature_equations.py ``boosted_rhs``; the hold's
off-times ``-(R_off i + V_off)`` of the bypass path, the release ``u - V_clamp - R_off i``
through the clamp, the bus ``C du/dt = (V_src - u)/R_s - i`` while the switch is on or the
clamp conducts). The scenario (the fast valve of examples/fast-valve-boost-armature-12v.toml
on an invented cable, bulk capacitor and 60 V clamp with a 0.05 ohm bypass) is invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from armature_equations import boosted_rhs, current_form
from test_boost_armature import BOOST, LC, POINT
from test_boost_armature_droop import designed_on_the_bus, reference, simulated_at_9v
from test_boost_armature_droop_clamp import OPTS, _clamped

V_C = 60.0


@pytest.fixture(scope="module")
def split(tmp_path_factory):
    """``(drive file, design --json, Design)`` of the example on the drooping bus with the
    60 V clamp bypassed in the hold (was refused naming freewheel.split_decay)."""
    from coildrive.config import load_drive
    from coildrive.design import design

    path = _clamped(tmp_path_factory.mktemp("split"))
    path.write_text(path.read_text().replace('clamp_voltage = "60 V"', 'clamp_voltage = "60 V"\nsplit_decay = true'
                                             '\nbypass_resistance = "0.05 ohm"'))
    return path, designed_on_the_bus(str(path)), design(load_drive(path))


def test_the_hold_through_the_bypass_and_the_release_through_the_clamp_against_scipy(split):
    """``simulate`` at 9 V, a 100 degC coil, nominal parts: the seat in the hold on the main
    bus (its off-times through the bypass, drawing nothing) and the bus there within 1e-6
    against solve_ivp; then the release from the final turn-off through the clamp, drawing
    from the bus (12.6 mV below where the source alone would have brought it back) -- the
    armature letting go, the current's zero and the bus then within 1e-6 (the bus: of its
    9 V; measured 2.9e-7 V); the design's lowest bus stays below every bus
    simulated (a bound over the envelope, its floor from the seat on covering the release)."""
    from scipy.integrate import solve_ivp

    from coildrive.model.circuit import loop

    _, out, d = split
    w, g, duty, peak, period, v_src = simulated_at_9v(d, 0.002, LC)
    s = d.drive.supply
    boost = (s.boost, s.boost_capacitance, s.boost_resistance)
    ref = reference(g, boost, s.source_resistance, s.capacitance, math.inf, duty, period, 0.6e-3, peak=peak,
                    v_src=v_src)                                                 # scipy solve_ivp
    k = int(np.argmax(w.time >= w.events["seat"]))
    droop = 9.0 - ref["seat_bus"]
    assert ref["seat"] > peak and droop > 0.05
    assert w.events["seat"] == pytest.approx(ref["seat"], rel=1e-6)
    assert w.bus_voltage[k] == pytest.approx(ref["seat_bus"], abs=1e-6 * droop)
    # the release through the clamp from the state simulate has at the final turn-off
    t_off = w.events["off"]
    j = int(np.flatnonzero(w.time <= t_off)[-1])
    assert w.time[j] == pytest.approx(t_off, abs=1e-15) and w.position[j] == 0.0
    rel = loop(d.drive, 9.0, 100.0, path="release")
    g_rel = {**g, "r_off": float(rel.r_off), "v_off": float(rel.v_off)}
    rhs = boosted_rhs(g_rel, boost, (s.source_resistance, s.capacitance, v_src), clamp=V_C)
    _, slope, opening = current_form(g)
    i_stay = math.sqrt(2.0 * opening(0.0) / -slope(0.0))      # the seated force balance, afresh

    def lets_go(_t, y):
        return y[0] - i_stay
    lets_go.terminal, lets_go.direction = True, -1

    def zero(_t, y):
        return y[0]
    zero.terminal, zero.direction = True, -1
    y = [float(w.current[j]), 0.0, 0.0, float(w.bus_voltage[j])]
    sol = solve_ivp(rhs("off", False), (t_off, t_off + 2e-3), y, events=[lets_go], **OPTS)
    t_go, y = float(sol.t[-1]), list(sol.y[:, -1])
    sol = solve_ivp(rhs("off", True), (t_go, t_go + 2e-3), y, events=[zero], **OPTS)
    t_zero, u_zero = float(sol.t[-1]), float(sol.y[3, -1])
    assert sol.t_events[0].size
    assert w.events["unlatch"] == pytest.approx(t_go, rel=1e-6)                   # scipy solve_ivp
    assert w.events["zero"] == pytest.approx(t_zero, rel=1e-6)                    # scipy solve_ivp
    m = int(np.argmin(np.abs(w.time - t_zero)))
    # the bus the source alone would have brought back by then (no draw): the clamp's is no rounding
    drawn = v_src + (float(w.bus_voltage[j]) - v_src) * math.exp(-(t_zero - t_off) / (s.source_resistance
                                                                                     * s.capacitance)) - u_zero
    assert drawn > 0.01                                                          # (measured 12.6 mV)
    assert w.bus_voltage[m] == pytest.approx(u_zero, abs=1e-6 * 9.0)             # scipy solve_ivp
    assert out["supply"]["lowest_bus_v"] <= float(np.min(w.bus_voltage))


def test_design_names_the_bypass_and_the_virtual_device_passes_check(split, tmp_path):
    """The design: seated at every corner (some in the hold, flown on the bus with the
    off-times through the bypass), the lowest bus the flights' and the floor's after the seat,
    named so; the virtual device's capture passes ``check`` (plumbing: it shares the
    design's physics)."""
    from test_emulator_device import emulated_passes_check

    _, out, d = split
    assert "through the bypass" in out["supply"]["lowest_bus_method"]
    assert out["split_decay"]["release_path"].startswith("clamp")
    emulated_passes_check(d, tmp_path)
