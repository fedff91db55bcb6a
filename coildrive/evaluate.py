"""Evaluate a drive setting (peak time, hold duty and frequency) at many operating points.

This is where the model pieces meet: circuit loop -> self-heating fixed point -> rise,
PWM steady state, release. Everything is vectorised over the points, which may be the
design corners, Monte Carlo samples or a tuning sweep.

Assumption (conservative, stated in the docs): at every point the coil is at the
temperature it settles at after a long hold at that point, and pull-in starts from that
hot coil (a valve re-actuated right after a long hold).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .config import Drive
from .model.circuit import Loop, freewheel_element_energy, loop
from .model.pwm import PwmSteadyState, duty_for_mean, pwm_steady_state
from .model.rl import decay_integrals, decay_time, rise_current, rise_time
from .model.thermal import settle_temperature


def hold_temperature(drive: Drive, supply, ambient, r_factor, l_factor, duty, frequency):
    """Coil temperature in degC after a long hold at ``duty``/``frequency`` at each point."""
    def power_at(temp):
        lp = loop(drive, supply, temp, r_factor, l_factor)
        ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
        return ss.rms**2 * lp.r_coil
    return settle_temperature(ambient, drive.thermal.resistance, power_at)


def required_duty(drive: Drive, supply, ambient, r_factor, l_factor, frequency,
                  target: float | None = None, max_iter: int = 30):
    """Smallest single duty that meets ``target`` A (default: hold current) at every point,
    with the self-heating that duty causes.

    Iterates duty -> temperature -> duty from the cold coil; each step can only raise the
    duty, so it converges to the smallest self-consistent duty. Returns
    ``(duty, temperatures)``; duty is ``nan`` where 100 % cannot reach the target.
    """
    target = drive.hold.current if target is None else target
    temp = np.asarray(ambient, float) + np.zeros(np.shape(supply))
    duty = 0.0
    for _ in range(max_iter):
        lp = loop(drive, supply, np.where(np.isfinite(temp), temp, drive.thermal.max_coil_temp),
                  r_factor, l_factor)
        need = duty_for_mean(target, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
        if np.any(np.isnan(need)):
            return float("nan"), temp
        new = float(np.max(need))
        temp = hold_temperature(drive, supply, ambient, r_factor, l_factor, new, frequency)
        if abs(new - duty) < 1e-9:
            return new, temp
        duty = new
    return duty, temp


@dataclass(frozen=True)
class PointResults:
    """Every figure at every point (arrays). SI units, temperatures in degC.

    ``interrupt_current`` is the largest current the switch turns off (end of the peak or
    the top of the hold ripple); ``peak_switch_voltage`` is the switch voltage it causes.
    ``release_*`` are for a turn-off from the top of the hold ripple.
    """

    supply: np.ndarray
    ambient: np.ndarray
    coil_temp: np.ndarray
    r_factor: np.ndarray
    l_factor: np.ndarray
    loop: Loop
    pull_in_time: np.ndarray
    peak_end_current: np.ndarray
    hold: PwmSteadyState
    coil_power: np.ndarray
    release_time: np.ndarray
    release_zero_time: np.ndarray
    release_energy: np.ndarray
    interrupt_current: np.ndarray
    peak_switch_voltage: np.ndarray


def evaluate(drive: Drive, supply, ambient, r_factor, l_factor, duty, frequency,
             peak_time) -> PointResults:
    """All figures for a setting at the points (see :class:`PointResults`).

    Parameters
    ----------
    supply : V; ambient : degC; r_factor, l_factor : tolerance factors (1 = nominal)
    duty : hold duty 0..1; frequency : hold PWM Hz; peak_time : peak phase length in s
    """
    supply, ambient, r_factor, l_factor = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (supply, ambient, r_factor, l_factor)))
    temp = hold_temperature(drive, supply, ambient, r_factor, l_factor, duty, frequency)
    finite = np.where(np.isfinite(temp), temp, drive.thermal.max_coil_temp)
    lp = loop(drive, supply, finite, r_factor, l_factor)
    t_pull = rise_time(drive.pull_in.current, 0.0, lp.v_on, lp.r_on, lp.inductance)
    i_peak = rise_current(peak_time, 0.0, lp.v_on, lp.r_on, lp.inductance)
    ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    power = ss.rms**2 * lp.r_coil
    i_off = ss.i_max
    t_drop = decay_time(drive.release.current, i_off, lp.r_off, lp.v_off, lp.inductance)
    t_zero = decay_time(0.0, i_off, lp.r_off, lp.v_off, lp.inductance)
    q, s = decay_integrals(t_zero, i_off, lp.r_off, lp.v_off, lp.inductance)
    energy = freewheel_element_energy(drive, lp, q, s)
    interrupt = np.maximum(i_peak, ss.i_max)
    v_sw = lp.switch_voltage(drive, interrupt)
    return PointResults(supply=supply, ambient=ambient, coil_temp=temp, r_factor=r_factor,
                        l_factor=l_factor, loop=lp, pull_in_time=t_pull, peak_end_current=i_peak,
                        hold=ss, coil_power=power, release_time=t_drop, release_zero_time=t_zero,
                        release_energy=energy, interrupt_current=interrupt,
                        peak_switch_voltage=v_sw)
