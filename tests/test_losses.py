"""Hold-phase element powers against an independent integration and energy conservation.

References:
- scipy.integrate.solve_ivp (LSODA) integrates the switched circuit period by period from
  zero current until it repeats; scipy.integrate.quad then integrates each element's
  power over the last period. Nothing of coildrive's closed form is used for it.
- Conservation of energy over one steady-state period (the inductor's energy is periodic):
  energy from the supply = copper + sense + switch + freewheel elements.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp

from coildrive.config import load_drive
from coildrive.model.circuit import loop
from coildrive.model.losses import hold_losses
from coildrive.model.pwm import pwm_steady_state
from conftest import EXAMPLES

CASES = [
    ("reagent-valve-zener-24v", 0.74, 20.0),  # Zener, continuous conduction
    ("reagent-valve-zener-24v", 0.25, 28.0),  # Zener, discontinuous conduction
    ("pinch-valve-48v", 0.6, 48.0),    # clamp across the switch
    ("door-latch-24v", 0.55, 24.0),    # diode + resistor
    ("relay-12v", 0.45, 12.0),         # plain diode, sense under the switch
]


def _periodic_integrals(v, r_on, r_off, v_off, ind, duty, freq):
    """Steady-state integrals of i and i^2 over one period's on and off segments."""
    period = 1.0 / freq
    t_on, t_off = duty * period, (1.0 - duty) * period

    def on(t, y):
        return [(v - r_on * y[0]) / ind]

    def off(t, y):
        return [-(r_off * y[0] + v_off) / ind]

    def zero(t, y):
        return y[0]
    zero.terminal = True
    zero.direction = -1
    i0 = 0.0
    for _ in range(5000):
        a = solve_ivp(on, (0, t_on), [i0], method="LSODA", rtol=1e-11, atol=1e-13, dense_output=True)
        b = solve_ivp(off, (0, t_off), [a.y[0, -1]], method="LSODA", rtol=1e-11, atol=1e-13,
                      dense_output=True, events=zero)
        end = 0.0 if b.t_events[0].size else float(b.y[0, -1])
        if abs(end - i0) < 1e-12:
            break
        i0 = end
    else:
        raise AssertionError("no periodic steady state reached")
    t_b = float(b.t[-1])
    ia = lambda t: float(a.sol(t)[0])  # noqa: E731
    ib = lambda t: max(float(b.sol(t)[0]), 0.0)  # noqa: E731
    q_on = quad(ia, 0, t_on, epsabs=1e-15)[0]
    s_on = quad(lambda t: ia(t) ** 2, 0, t_on, epsabs=1e-15)[0]
    q_off = quad(ib, 0, t_b, epsabs=1e-15)[0] if t_b > 0 else 0.0
    s_off = quad(lambda t: ib(t) ** 2, 0, t_b, epsabs=1e-15)[0] if t_b > 0 else 0.0
    return q_on, s_on, q_off, s_off


@pytest.mark.parametrize("example, duty, supply", CASES)
def test_element_powers_match_independent_integration(example, duty, supply):
    drive = load_drive(EXAMPLES / f"{example}.toml")
    f = drive.hold.frequency
    lp = loop(drive, np.array([supply]), np.array([60.0]))
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    model = hold_losses(drive, lp, ss, f)
    q_on, s_on, q_off, s_off = _periodic_integrals(float(lp.v_on[0]), float(lp.r_on[0]),
                                                   float(lp.r_off[0]), float(lp.v_off[0]),
                                                   float(lp.inductance[0]), duty, f)
    fw, sense = drive.freewheel, drive.board.sense
    ref = {
        "coil": float(lp.r_coil[0]) * (s_on + s_off) * f,
        "switch_conduction": drive.switch.on_resistance * s_on * f,
        "sense": sense.resistance * (s_on + (s_off if sense.position == "coil" else 0.0)) * f,
    }
    if fw.type == "clamp":
        ref["clamp"] = fw.clamp_voltage * q_off * f
        ref["supply"] = supply * (q_on + q_off) * f
    else:
        ref["diode"] = fw.diode_drop * q_off * f
        ref["zener"] = fw.zener_voltage * q_off * f
        ref["resistor"] = fw.resistance * s_off * f
        ref["supply"] = supply * q_on * f
    for name, value in ref.items():
        got = float(getattr(model, name)[0])
        assert got == pytest.approx(value, rel=1e-5, abs=1e-9), f"{example} {name}: {got} vs scipy {value}"


@pytest.mark.parametrize("example, duty, supply", CASES)
def test_energy_is_conserved_per_period(example, duty, supply):
    drive = load_drive(EXAMPLES / f"{example}.toml")
    f = drive.hold.frequency
    supplies = np.linspace(supply * 0.8, supply * 1.2, 7)
    lp = loop(drive, supplies, np.full(7, 40.0))
    for d in (duty, duty / 3, min(0.98, duty * 1.3)):
        ss = pwm_steady_state(d, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
        losses = hold_losses(drive, lp, ss, f)
        np.testing.assert_allclose(losses.balance_error(), 0.0, atol=1e-9 * float(np.max(losses.supply)),
                                   err_msg=f"{example} at duty {d}: supply != sum of losses")


def test_switching_estimate_scales_with_edges():
    """1/2 V I t per edge (common practice): doubling both transition times doubles it,
    and it is proportional to frequency at fixed currents."""
    drive = load_drive(EXAMPLES / "reagent-valve-zener-24v.toml")
    lp = loop(drive, np.array([24.0]), np.array([60.0]))
    f = 25e3
    ss = pwm_steady_state(0.7, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    a = hold_losses(drive, lp, ss, f, rise_time=50e-9, fall_time=80e-9).switch_switching[0]
    b = hold_losses(drive, lp, ss, f, rise_time=100e-9, fall_time=160e-9).switch_switching[0]
    assert b == pytest.approx(2 * a)
    v_off = 24.0 + drive.freewheel.diode_drop + drive.freewheel.zener_voltage
    expected = 0.5 * v_off * (ss.i_min[0] * 50e-9 + ss.i_max[0] * 80e-9) * f
    assert a == pytest.approx(expected)


def test_slow_path_override_takes_no_zener_power():
    drive = load_drive(EXAMPLES / "reagent-valve-zener-24v.toml")
    slow = dataclasses.replace(drive, freewheel=dataclasses.replace(drive.freewheel, zener_voltage=0.0,
                                                                    type="diode"))
    lp = loop(slow, np.array([24.0]), np.array([60.0]))
    ss = pwm_steady_state(0.3, 25e3, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    losses = hold_losses(drive, lp, ss, 25e3, zener_voltage=0.0)
    assert losses.zener[0] == 0.0 and losses.diode[0] > 0
    assert abs(losses.balance_error()[0]) < 1e-9
