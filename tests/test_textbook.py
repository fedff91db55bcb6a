"""The model against textbook relations, the copper standard and energy conservation.

Sources, named beside each check:

* RL step response ``i(t) = V/R (1 - e^(-t/tau))``, ``tau = L/R``: 63.2 % of the final
  current after one time constant, 99.3 % after five; natural response
  ``i = I0 e^(-t/tau)``, 36.8 % after one. Hayt, Kemmerly & Durbin, "Engineering
  Circuit Analysis", chapter "Basic RL and RC Circuits" (from memory; the chapter
  number differs between editions).
* Energy stored in an inductor ``W = 1/2 L i^2`` (same book, chapter on capacitors and
  inductors, from memory) and conservation of energy.
* IEC 60028, International standard of resistance for copper: annealed copper has a
  temperature coefficient of resistance of 0.00393 /K at 20 degC, and its resistance is
  linear in temperature about 20 degC, ``R(T) = R_20 (1 + 0.00393 (T - 20))``; the
  coefficient at another reference temperature follows as ``1 / (1/0.00393 + T_ref - 20)``
  = ``1 / (254.45 + T_ref - 20)`` (that form from memory).
* scipy ``integrate.quad`` (QUADPACK) as an independent quadrature of the closed-form
  currents.
"""

from __future__ import annotations

import math

import pytest
from scipy.integrate import quad

from circuit_reference import (CASE_IDS, CASES, FAST_COIL, POINT, SLOW_COIL, parts,
                               reference_drive)
from coildrive.model.circuit import COPPER_ALPHA, copper_resistance, freewheel_element_energy, loop
from coildrive.model.pwm import duty_for_mean, pwm_steady_state
from coildrive.model.rl import decay_current, decay_integrals, decay_time, rise_current, rise_time

# (V, R, L): a small relay, a valve, a large solenoid (invented values).
RL_CASES = [(12.0, 40.0, 0.18), (24.0, 22.0, 0.06), (48.0, 3.5, 0.9)]


# --------------------------------------------------------------------------- RL step
@pytest.mark.parametrize("v,r,l", RL_CASES)
def test_rl_step_one_and_five_time_constants(v, r, l):
    tau, final = l / r, v / r
    at_one = float(rise_current(tau, 0.0, v, r, l)) / final
    at_five = float(rise_current(5 * tau, 0.0, v, r, l)) / final
    # Hayt & Kemmerly: 1 - e^-1 of the final current at one time constant ...
    assert at_one == pytest.approx(1 - math.exp(-1), rel=1e-12), f"i(tau)/I_final = {at_one}"
    assert at_one == pytest.approx(0.632, abs=5e-4), f"i(tau)/I_final = {at_one}, textbook 63.2 %"
    # ... and 1 - e^-5, about 99.3 %, at five.
    assert at_five == pytest.approx(1 - math.exp(-5), rel=1e-12), f"i(5 tau)/I_final = {at_five}"
    assert at_five == pytest.approx(0.993, abs=5e-4), f"i(5 tau)/I_final = {at_five}, textbook 99.3 %"
    # Hayt & Kemmerly: the time to 63.2 % is the time constant L/R.
    t63 = float(rise_time((1 - math.exp(-1)) * final, 0.0, v, r, l))
    assert t63 == pytest.approx(tau, rel=1e-12), f"time to 63.2 %: {t63} s, tau = {tau} s"


@pytest.mark.parametrize("v,r,l", RL_CASES)
def test_rl_natural_response(v, r, l):
    tau, i0 = l / r, v / r
    # Hayt & Kemmerly, source-free RL circuit: i = I0 e^(-t/tau), 36.8 % after one tau.
    ratio = float(decay_current(tau, i0, r, 0.0, l)) / i0
    assert ratio == pytest.approx(math.exp(-1), rel=1e-12), f"i(tau)/I0 = {ratio}"
    assert ratio == pytest.approx(0.368, abs=5e-4), f"i(tau)/I0 = {ratio}, textbook 36.8 %"
    t_half = float(decay_time(0.5 * i0, i0, r, 0.0, l))
    assert t_half == pytest.approx(tau * math.log(2), rel=1e-12), f"half-life {t_half} s"


def test_rl_step_from_an_initial_current():
    # Hayt & Kemmerly, complete response = forced + natural: V/R + (I0 - V/R) e^(-t/tau).
    v, r, l, i0 = 24.0, 22.0, 0.06, 0.3
    for t in (0.0, 1e-4, 1e-3, 1e-2):
        expected = v / r + (i0 - v / r) * math.exp(-t * r / l)
        got = float(rise_current(t, i0, v, r, l))
        assert got == pytest.approx(expected, rel=1e-12), f"i({t}) = {got}, expected {expected}"


# --------------------------------------------------------------------------- copper
def test_copper_coefficient_is_iec60028():
    # IEC 60028: 0.00393 /K for annealed copper at 20 degC.
    assert COPPER_ALPHA == 0.00393, f"COPPER_ALPHA = {COPPER_ALPHA}, IEC 60028 gives 0.00393 /K"


@pytest.mark.parametrize("temp", [-40.0, -10.0, 20.0, 85.0, 100.0, 155.0])
def test_copper_resistance_referenced_to_20c(temp):
    # IEC 60028: R(T) = R_20 (1 + 0.00393 (T - 20)).
    r20 = 22.0
    expected = r20 * (1 + 0.00393 * (temp - 20.0))
    got = float(copper_resistance(r20, 20.0, temp))
    assert got == pytest.approx(expected, rel=1e-12), f"R({temp} degC) = {got}, IEC 60028 {expected}"


def test_copper_resistance_at_100c_worked_value():
    # IEC 60028 worked by hand: 10 ohm at 20 degC is 10 (1 + 0.00393 * 80) = 13.144 ohm at 100 degC.
    assert float(copper_resistance(10.0, 20.0, 100.0)) == pytest.approx(13.144, rel=1e-12), (
        "10 ohm at 20 degC must read 13.144 ohm at 100 degC")


@pytest.mark.parametrize("t_ref", [0.0, 23.0, 25.0, 40.0])
def test_copper_resistance_from_another_reference_temperature(t_ref):
    # IEC 60028 is linear about 20 degC, so a coil measured at t_ref scales by
    # (1 + a (T - 20)) / (1 + a (t_ref - 20)); its slope at t_ref, per ohm, is the
    # coefficient at t_ref, 1 / (254.45 + t_ref - 20) (from memory).
    r_ref, temp = 22.0, 100.0
    expected = r_ref * (1 + 0.00393 * (temp - 20.0)) / (1 + 0.00393 * (t_ref - 20.0))
    got = float(copper_resistance(r_ref, t_ref, temp))
    assert got == pytest.approx(expected, rel=1e-12), (
        f"R(100 degC) of {r_ref} ohm at {t_ref} degC: {got}, IEC 60028 {expected}")
    h = 1e-3
    slope = (float(copper_resistance(r_ref, t_ref, t_ref + h))
             - float(copper_resistance(r_ref, t_ref, t_ref - h))) / (2 * h) / r_ref
    assert slope == pytest.approx(1 / (1 / 0.00393 + t_ref - 20.0), rel=1e-9), (
        f"coefficient at {t_ref} degC: {slope} /K")


def test_loop_uses_the_copper_law(tmp_path):
    # IEC 60028 through the circuit: the coil of a drive file rated at 25 degC.
    drive = reference_drive(tmp_path, "diode", "switch", reference_temp="25 degC")
    lp = loop(drive, 24.0, 100.0)
    expected = 22.0 * (1 + 0.00393 * 80.0) / (1 + 0.00393 * 5.0)
    assert float(lp.r_coil) == pytest.approx(expected, rel=1e-12), (
        f"coil at 100 degC: {float(lp.r_coil)} ohm, IEC 60028 {expected} ohm")


# --------------------------------------------------------------------------- energy
@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("i0", [0.1, 0.62])
def test_decay_energy_balance(tmp_path, freewheel, position, i0):
    """1/2 L I0^2 (+ the supply's V_bus Q through a clamp) = copper + sense loss + E_element.

    ``R_off`` of the model is the loop's copper (+ sense in the coil path) plus the
    freewheel resistor; the resistor's share is counted in the element energy here.
    """
    drive = reference_drive(tmp_path, freewheel, position)
    lp = loop(drive, **POINT)
    p = parts(drive, **POINT)
    r_off, v_off, l_h = float(lp.r_off), float(lp.v_off), float(lp.inductance)
    t_zero = float(decay_time(0.0, i0, r_off, v_off, l_h))
    stored = 0.5 * l_h * i0**2  # Hayt & Kemmerly: W = 1/2 L i^2
    q_model, s_model = (float(x) for x in decay_integrals(t_zero, i0, r_off, v_off, l_h))
    # scipy quad of the closed-form current, independently of decay_integrals.
    q_quad = quad(lambda t: float(decay_current(t, i0, r_off, v_off, l_h)), 0.0, t_zero,
                  epsabs=0.0, epsrel=1e-12)[0]
    s_quad = quad(lambda t: float(decay_current(t, i0, r_off, v_off, l_h)) ** 2, 0.0, t_zero,
                  epsabs=0.0, epsrel=1e-12)[0]
    assert q_model == pytest.approx(q_quad, rel=1e-9), f"charge {q_model} vs quad {q_quad}"
    assert s_model == pytest.approx(s_quad, rel=1e-9), f"int i^2 dt {s_model} vs quad {s_quad}"
    for label, q, s in (("model integrals", q_model, s_model), ("scipy quad", q_quad, s_quad)):
        element = float(freewheel_element_energy(drive, lp, q, s))
        # The element energy against the element-level circuit (diode, Zener, resistor, clamp).
        assert element == pytest.approx(p.element_energy(q, s), rel=1e-12), (
            f"{freewheel}: element energy {element} J vs {p.element_energy(q, s)} J")
        supplied = p.v_bus * q if p.supply_during_off() else 0.0
        resistive = (r_off - p.r_fw) * s
        assert r_off - p.r_fw == pytest.approx(
            p.r_coil + (p.r_sense if p.sense_in_coil_path else 0.0), rel=1e-12), (
            f"{freewheel}: freewheel loop resistance {r_off} ohm does not match its parts")
        # Conservation of energy over the decay.
        assert stored + supplied == pytest.approx(resistive + element, rel=1e-9), (
            f"{freewheel} ({label}): stored {stored:.9e} J + supplied {supplied:.9e} J vs "
            f"resistive {resistive:.9e} J + element {element:.9e} J")


@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("coil,target", [(SLOW_COIL, 0.25), (FAST_COIL, 0.1), (FAST_COIL, 0.3)],
                         ids=["slow-ccm", "fast-0.1A", "fast-0.3A"])
def test_pwm_energy_per_period(tmp_path, freewheel, position, coil, target):
    """In steady state the inductor's energy repeats, so per period the supply's energy =
    copper + switch + sense losses + freewheel element energy (conservation of energy)."""
    drive = reference_drive(tmp_path, freewheel, position, **coil)
    lp = loop(drive, **POINT)
    p = parts(drive, **POINT)
    f = drive.hold.frequency
    duty = float(duty_for_mean(target, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance))
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    q_on, s_on = float(ss.charge_on), float(ss.square_on)
    q_off, s_off = float(ss.charge_off), float(ss.square_off)
    supply = p.v_bus * (q_on + (q_off if p.supply_during_off() else 0.0))
    copper = p.r_coil * (s_on + s_off)
    switch = p.r_switch * s_on
    sense = p.r_sense * (s_on + (s_off if p.sense_in_coil_path else 0.0))
    element = p.element_energy(q_off, s_off)
    losses = copper + switch + sense + element
    assert supply == pytest.approx(losses, rel=1e-9), (
        f"{freewheel}, {'DCM' if ss.dcm else 'CCM'}: supply {supply:.9e} J per period vs "
        f"losses {losses:.9e} J (copper {copper:.3e}, switch {switch:.3e}, sense {sense:.3e}, "
        f"element {element:.3e})")
    # W = 1/2 L i^2 (Hayt & Kemmerly): the on segment stores what the supply gives beyond
    # the on-loop losses, and the off segment gives it back.
    gained = 0.5 * p.inductance * (float(ss.i_max) ** 2 - float(ss.i_min) ** 2)
    on_net = p.v_bus * q_on - (p.r_coil + p.r_switch + p.r_sense) * s_on
    assert gained == pytest.approx(on_net, rel=1e-9), (
        f"{freewheel}: inductor energy gained {gained:.9e} J vs on-segment net {on_net:.9e} J")


def test_pwm_energy_cases_cover_both_modes(tmp_path):
    # Guard for the parametrisation above: continuous and discontinuous conduction occur.
    modes = set()
    for coil, target in ((SLOW_COIL, 0.25), (FAST_COIL, 0.1)):
        drive = reference_drive(tmp_path, "diode", "coil", **coil)
        lp = loop(drive, **POINT)
        f = drive.hold.frequency
        duty = duty_for_mean(target, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
        modes.add(bool(pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                                        lp.inductance).dcm))
    assert modes == {True, False}, f"conduction modes covered: {modes}"
