"""The full bridge's decay paths and the bus pump-up (coildrive.model.bridge): the energy
balance of each decay path, the pump-up against scipy's ODE solver, and properties over
random bridges (Hypothesis). The circuit itself is checked against ngspice in
tests/test_reference_ngspice_bridge.py."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from coildrive.model.bridge import fast_decay, pump_up, release, slow_decay

SETTINGS = settings(max_examples=150, deadline=None)

# Invented element values of a usual size: a 24 V valve coil on 35 mohm switches.
R_COIL, L_COIL, R_SW, R_SENSE, V_D, I0, I_DROP = 26.0, 0.069, 0.035, 0.1, 0.8, 0.9, 0.1


@pytest.mark.parametrize("supply", [12.0, 24.0, 48.0])
def test_fast_decay_energy_balance(supply):
    # Energy balance of the fast path (conservation of energy, common practice): the
    # coil's 1/2 L i0^2 goes to the supply, the diodes and the loop's resistance.
    rel = release(fast_decay(R_COIL, R_SENSE, supply, V_D), I0, I_DROP, L_COIL)
    stored = 0.5 * L_COIL * I0**2
    total = float(rel.returned + rel.resistive + rel.diodes)
    assert total == pytest.approx(stored, rel=1e-12)
    assert float(rel.returned) == pytest.approx(supply * float(rel.charge), rel=1e-12)
    assert float(rel.diodes) == pytest.approx(2 * V_D * float(rel.charge), rel=1e-12)


@pytest.mark.parametrize("inline", [False, True])
def test_slow_decay_energy_balance(inline):
    # Slow decay recirculates: all of 1/2 L i0^2 ends in the loop's resistance, none in the
    # supply, and the current only approaches zero.
    rel = release(slow_decay(R_COIL, R_SW, R_SENSE, inline), I0, I_DROP, L_COIL)
    assert float(rel.resistive) == pytest.approx(0.5 * L_COIL * I0**2, rel=1e-12)
    assert float(rel.returned) == 0.0 and float(rel.diodes) == 0.0
    assert np.isinf(rel.zero_time) and np.isfinite(rel.drop_time)


@pytest.mark.parametrize("capacitance", [1e-6, 22e-6, 470e-6, 10e-3])
def test_pump_up_matches_scipy_and_balances_energy(capacitance):
    # Reference: scipy's solve_ivp (LSODA, rtol 1e-10) on L di/dt = -(R i + v_c + 2 V_d),
    # C dv_c/dt = i, stopped at i = 0 by an event; it also integrates R i^2 and 2 V_d i.
    from scipy.integrate import solve_ivp

    r, v1 = R_COIL + R_SENSE, 24.0
    pu = pump_up(I0, v1, capacitance, r, L_COIL, V_D)

    def rhs(t, y):
        i, v = y[0], y[1]
        return [-(r * i + v + 2 * V_D) / L_COIL, i / capacitance, r * i * i, 2 * V_D * i]

    def stop(t, y):
        return y[0]
    stop.terminal, stop.direction = True, -1
    sol = solve_ivp(rhs, (0.0, 1.0), [I0, v1, 0.0, 0.0], method="LSODA", events=stop,
                    rtol=1e-10, atol=1e-13)
    t_end = sol.t_events[0][0]
    _, v2, e_r, e_d = sol.y_events[0][0]
    assert float(pu.zero_time) == pytest.approx(t_end, rel=1e-6)
    assert float(pu.v2) == pytest.approx(v2, rel=1e-7)
    # energy balance: the capacitor takes 1/2 C (v2^2 - v1^2), the rest is resistive and diode loss
    assert float(pu.returned) + e_r + e_d == pytest.approx(0.5 * L_COIL * I0**2, rel=1e-6)
    assert float(pu.returned) == pytest.approx(0.5 * capacitance * (v2**2 - v1**2), rel=1e-6)


def test_a_large_capacitance_approaches_the_fixed_bus():
    # With a bus that hardly moves, the returned energy is the fixed bus's V_bus x charge.
    r, v1 = R_COIL + R_SENSE, 24.0
    rel = release(fast_decay(R_COIL, R_SENSE, v1, V_D), I0, I_DROP, L_COIL)
    pu = pump_up(I0, v1, 1.0, r, L_COIL, V_D)
    assert float(pu.returned) == pytest.approx(float(rel.returned), rel=1e-4)
    assert float(pu.zero_time) == pytest.approx(float(rel.zero_time), rel=1e-4)


bridges = st.fixed_dictionaries({
    "supply": st.floats(5.0, 100.0),
    "r_coil": st.floats(0.5, 500.0),
    "inductance": st.floats(1e-4, 1.0),
    "r_switch": st.floats(1e-3, 2.0),
    "r_sense": st.floats(0.0, 1.0),
    "v_diode": st.floats(0.3, 1.2),
    "inline": st.booleans(),
    "fraction": st.floats(0.01, 1.0),   # the current as a fraction of what the bridge can drive
    "drop": st.floats(0.01, 0.99),      # the drop-out current as a fraction of it
})


@SETTINGS
@given(bridges)
def test_fast_decay_always_releases_sooner_than_slow(b):
    # From the same current -- any the bridge can drive, up to V_bus / R_on -- the fast
    # decay reaches the drop-out current sooner than the slow one.
    r_on = b["r_coil"] + 2 * b["r_switch"] + b["r_sense"]
    i0 = b["fraction"] * b["supply"] / r_on
    i_drop = b["drop"] * i0
    fast = release(fast_decay(b["r_coil"], b["r_sense"], b["supply"], b["v_diode"]), i0, i_drop, b["inductance"])
    slow = release(slow_decay(b["r_coil"], b["r_switch"], b["r_sense"], b["inline"]), i0, i_drop,
                   b["inductance"])
    assert float(fast.drop_time) < float(slow.drop_time)


@SETTINGS
@given(bridges, st.floats(1e-7, 1e-2), st.floats(1.0001, 100.0))
def test_more_capacitance_never_raises_the_pump_up(b, capacitance, more):
    r_on = b["r_coil"] + 2 * b["r_switch"] + b["r_sense"]
    i0 = b["fraction"] * b["supply"] / r_on
    r = b["r_coil"] + b["r_sense"]
    small = pump_up(i0, b["supply"], capacitance, r, b["inductance"], b["v_diode"])
    large = pump_up(i0, b["supply"], capacitance * more, r, b["inductance"], b["v_diode"])
    assert float(small.delta_v) > 0.0 and np.isfinite(small.delta_v)
    assert float(large.delta_v) <= float(small.delta_v) * (1 + 1e-9)
