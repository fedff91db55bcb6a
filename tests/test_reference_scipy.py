"""The closed-form model against scipy's ODE solver on the same switched circuit.

Reference: ``scipy.integrate.solve_ivp`` (Radau, an implicit Runge-Kutta method of
order 5, rtol 1e-10), an integrator independent of the model's closed forms. The ODE is
Kirchhoff's voltage law for the element-level circuit of :mod:`circuit_reference`
(``L di/dt = V - R i`` with ``(V, R)`` of the switch-on loop or of the freewheel loop),
not the model's lumped :class:`~coildrive.model.circuit.Loop`; the integrator also
carries ``int i dt`` and ``int i^2 dt`` as states, so charges and resistive energies
come from the solver too. The freewheel diode blocks: an off segment ends at an event
``i = 0`` and the current stays at zero for the rest of it.

Tolerances: with rtol 1e-10 the solver is good to ~1e-9; the checks use 1e-6 relative
(a thousand times that, far below any physical effect) for amplitudes and times.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from circuit_reference import (CASE_IDS, CASES, FAST_COIL, POINT, SLOW_COIL, Parts, parts,
                               reference_drive)
from coildrive.model.circuit import freewheel_element_energy, loop
from coildrive.model.pwm import duty_for_mean, pwm_steady_state
from coildrive.model.rl import (decay_integrals, decay_time, rise_current, rise_integrals,
                                rise_time)

RTOL = 1e-10  # solver relative tolerance
ATOL = 1e-14  # solver absolute tolerance (A, A*s, A^2*s)
CHECK = 1e-6  # relative tolerance of the comparisons


def _segment(p: Parts, on: bool, i0: float, duration: float, levels=()):
    """Integrate one switch-on or freewheel segment of ``duration`` s from ``i0`` A.

    Returns ``(i_end, charge, square, crossings)``; ``crossings`` maps each level in
    ``levels`` (and 0 for a freewheel segment) to the time the current passes it
    (rising while on, falling while freewheeling).
    """
    v, r = p.on() if on else p.off()
    l_h = p.inductance

    def rhs(t, y):
        return [(v - r * y[0]) / l_h, y[0], y[0] * y[0]]

    def jac(t, y):
        return [[-r / l_h, 0.0, 0.0], [1.0, 0.0, 0.0], [2.0 * y[0], 0.0, 0.0]]

    events = []
    for level in levels:
        def crossing(t, y, level=level):
            return y[0] - level
        crossing.direction = 1 if on else -1
        events.append(crossing)
    if not on:  # the diode blocks: the segment ends where the current reaches zero
        def zero(t, y):
            return y[0]
        zero.terminal = True
        zero.direction = -1
        events.append(zero)
    sol = solve_ivp(rhs, (0.0, duration), [i0, 0.0, 0.0], method="Radau", rtol=RTOL,
                    atol=ATOL, jac=jac, events=events or None)
    assert sol.success, sol.message
    crossings = {}
    all_levels = list(levels) + ([0.0] if not on else [])
    for level, times in zip(all_levels, sol.t_events or []):
        if len(times):
            crossings[level] = float(times[0])
    i_end = 0.0 if (not on and 0.0 in crossings) else float(sol.y[0, -1])
    return i_end, float(sol.y[1, -1]), float(sol.y[2, -1]), crossings


def _period(p: Parts, i0: float, t_on: float, t_off: float):
    """One PWM period from ``i0``: ``(i_end, i_top, charge, square, conduction_off)``."""
    i_top, q_on, s_on, _ = _segment(p, True, i0, t_on)
    i_end, q_off, s_off, cross = _segment(p, False, i_top, t_off)
    return i_end, i_top, q_on + q_off, s_on + s_off, cross.get(0.0, t_off)


def _setup(tmp_path, freewheel, position, coil=SLOW_COIL):
    drive = reference_drive(tmp_path, freewheel, position, **coil)
    return drive, loop(drive, **POINT), parts(drive, **POINT)


# --------------------------------------------------------------------------- rise
@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
def test_rise_matches_solve_ivp(tmp_path, freewheel, position):
    drive, lp, p = _setup(tmp_path, freewheel, position)
    i_pull = drive.pull_in.current
    t_model = float(rise_time(i_pull, 0.0, lp.v_on, lp.r_on, lp.inductance))
    duration = 2.0 * t_model
    i_end, q, s, cross = _segment(p, True, 0.0, duration, levels=[i_pull])
    t_ivp = cross[i_pull]
    # scipy solve_ivp: time to the pull-in current.
    assert t_ivp == pytest.approx(t_model, rel=CHECK), (
        f"pull-in time: model {t_model:.9e} s, solve_ivp {t_ivp:.9e} s")
    i_model = float(rise_current(duration, 0.0, lp.v_on, lp.r_on, lp.inductance))
    q_model, s_model = rise_integrals(duration, 0.0, lp.v_on, lp.r_on, lp.inductance)
    # scipy solve_ivp: current, charge and int i^2 dt at the end of the rise.
    for name, model, ivp in (("current", i_model, i_end), ("charge", float(q_model), q),
                             ("int i^2 dt", float(s_model), s)):
        assert ivp == pytest.approx(model, rel=CHECK), (
            f"rise {name}: model {model:.9e}, solve_ivp {ivp:.9e}")


# --------------------------------------------------------------------------- decay
@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
def test_decay_matches_solve_ivp(tmp_path, freewheel, position):
    drive, lp, p = _setup(tmp_path, freewheel, position)
    i0 = 0.62  # A, about the current at the end of a peak phase
    i_drop = drive.release.current
    t_drop = float(decay_time(i_drop, i0, lp.r_off, lp.v_off, lp.inductance))
    t_zero = float(decay_time(0.0, i0, lp.r_off, lp.v_off, lp.inductance))
    i_end, q, s, cross = _segment(p, False, i0, 2.0 * t_zero, levels=[i_drop])
    assert 0.0 in cross, "solve_ivp: the current must reach zero (the diode then blocks)"
    # scipy solve_ivp with events: time to the drop-out current and to zero.
    assert cross[i_drop] == pytest.approx(t_drop, rel=CHECK), (
        f"{freewheel}: drop-out time model {t_drop:.9e} s, solve_ivp {cross[i_drop]:.9e} s")
    assert cross[0.0] == pytest.approx(t_zero, rel=CHECK), (
        f"{freewheel}: time to zero model {t_zero:.9e} s, solve_ivp {cross[0.0]:.9e} s")
    q_model, s_model = decay_integrals(t_zero, i0, lp.r_off, lp.v_off, lp.inductance)
    # scipy solve_ivp: charge and int i^2 dt through the freewheel path, and so the
    # energy left in the freewheel element(s).
    assert q == pytest.approx(float(q_model), rel=CHECK), (
        f"{freewheel}: charge model {float(q_model):.9e} C, solve_ivp {q:.9e} C")
    assert s == pytest.approx(float(s_model), rel=CHECK), (
        f"{freewheel}: int i^2 dt model {float(s_model):.9e}, solve_ivp {s:.9e}")
    e_model = float(freewheel_element_energy(drive, lp, q_model, s_model))
    e_ivp = p.element_energy(q, s)
    assert e_ivp == pytest.approx(e_model, rel=CHECK), (
        f"{freewheel}: freewheel energy model {e_model:.9e} J, solve_ivp {e_ivp:.9e} J")


# --------------------------------------------------------------------------- PWM
def _compare_steady_state(label, ss, i_min, i_max, mean, rms, conduction):
    for name, model, ivp in (("i_min", ss.i_min, i_min), ("i_max", ss.i_max, i_max),
                             ("mean", ss.mean, mean), ("rms", ss.rms, rms),
                             ("ripple", ss.ripple, i_max - i_min),
                             ("off-time conduction", ss.conduction_off, conduction)):
        model = float(model)
        # scipy solve_ivp, periodic steady state.
        assert ivp == pytest.approx(model, rel=CHECK, abs=1e-12), (
            f"{label}: {name} model {model:.9e}, solve_ivp {ivp:.9e}")


def _run_to_steady_state(p: Parts, duty: float, frequency: float, max_periods: int = 200):
    """Period after period from zero until the start current repeats to 1e-12 A."""
    period = 1.0 / frequency
    t_on, t_off = duty * period, (1.0 - duty) * period
    i = 0.0
    for _ in range(max_periods):
        i_next, i_top, q, s, conduction = _period(p, i, t_on, t_off)
        if abs(i_next - i) < 1e-12:
            return i_next, i_top, q / period, math.sqrt(s / period), conduction
        i = i_next
    raise AssertionError(f"no steady state after {max_periods} periods")


@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
def test_pwm_discontinuous_run_to_steady_state(tmp_path, freewheel, position):
    drive, lp, p = _setup(tmp_path, freewheel, position, FAST_COIL)
    f = drive.hold.frequency
    duty = float(duty_for_mean(0.1, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance))
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    assert ss.dcm, "precondition: discontinuous conduction"
    i_min, i_max, mean, rms, conduction = _run_to_steady_state(p, duty, f)
    _compare_steady_state(f"{freewheel} DCM", ss, i_min, i_max, mean, rms, conduction)


@pytest.mark.parametrize("duty", [0.6, 0.7, 0.85])
def test_pwm_continuous_run_to_steady_state(tmp_path, duty):
    # Time constant shorter than the period: large ripple, a few periods to settle.
    drive, lp, p = _setup(tmp_path, "diode", "coil", FAST_COIL)
    f = drive.hold.frequency
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    assert not ss.dcm, "precondition: continuous conduction"
    i_min, i_max, mean, rms, conduction = _run_to_steady_state(p, duty, f)
    _compare_steady_state(f"CCM duty {duty}", ss, i_min, i_max, mean, rms, conduction)


@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
def test_pwm_continuous_long_time_constant_by_shooting(tmp_path, freewheel, position):
    # With tau ~ 60 periods a run from zero would take ~1000 periods; the periodic
    # steady state is found instead by shooting (the start current that one period maps
    # onto itself, scipy brentq), then checked by one more period.
    drive, lp, p = _setup(tmp_path, freewheel, position, SLOW_COIL)
    f = drive.hold.frequency
    period = 1.0 / f
    duty = float(duty_for_mean(0.25, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance))
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    assert not ss.dcm, "precondition: continuous conduction"
    t_on, t_off = duty * period, (1.0 - duty) * period
    v, r = p.on()

    def mismatch(i0):
        return _period(p, i0, t_on, t_off)[0] - i0

    i_start = brentq(mismatch, 0.0, v / r, xtol=1e-15, rtol=4 * np.finfo(float).eps)
    i_end, i_top, q, s, conduction = _period(p, i_start, t_on, t_off)
    assert abs(i_end - i_start) < 1e-11, "solve_ivp: the period must map i_min onto itself"
    _compare_steady_state(f"{freewheel} CCM", ss, i_start, i_top, q / period,
                          math.sqrt(s / period), conduction)
