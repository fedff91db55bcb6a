"""Exact periodic steady state of a voltage-mode PWM hold.

Each period is a switch-on segment of ``D*T`` and a freewheel segment of ``(1-D)*T``
(see :mod:`coildrive.model.rl`). In continuous conduction (CCM) the current never
reaches zero and the steady state is the fixed point of the two exponentials::

    i_max = A (1 - e_on) + i_min e_on,          e_on  = exp(-D T R_on / L)
    i_min = (i_max + B) e_off - B,              e_off = exp(-(1-D) T R_off / L)

with ``A = V/R_on`` and ``B = V_off/R_off``. Where that gives ``i_min < 0`` the diode
blocks: the current reaches zero during the off time and stays there (discontinuous
conduction, DCM), and every period starts from zero. Mean and RMS follow from the exact
segment integrals — no time stepping.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .rl import decay_integrals, decay_time, rise_integrals


@dataclass(frozen=True)
class PwmSteadyState:
    """Periodic steady state, arrays over operating points. Units: A, s, A*s, A^2*s.

    ``charge_on``/``square_on`` and ``charge_off``/``square_off`` are the integrals of
    ``i`` and ``i^2`` over one period's on and off segments; with the loop resistances
    and voltages they give every power in the circuit (supply, copper, switch, freewheel).
    """

    i_min: np.ndarray
    i_max: np.ndarray
    mean: np.ndarray
    rms: np.ndarray
    ripple: np.ndarray
    dcm: np.ndarray
    conduction_off: np.ndarray
    period: np.ndarray
    charge_on: np.ndarray
    square_on: np.ndarray
    charge_off: np.ndarray
    square_off: np.ndarray


def pwm_steady_state(duty, frequency, v_on, r_on, r_off, v_off, inductance) -> PwmSteadyState:
    """Steady state of voltage-mode PWM at ``duty`` (0..1) and ``frequency`` Hz.

    Parameters
    ----------
    duty : on fraction of the period, 0..1
    frequency : PWM frequency in Hz
    v_on : voltage driving the coil loop while the switch is on, V
    r_on : loop resistance while on, ohm
    r_off : loop resistance while freewheeling, ohm
    v_off : constant voltage opposing the current while freewheeling, V (> 0)
    inductance : H
    """
    duty, frequency, v_on, r_on, r_off, v_off, inductance = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (duty, frequency, v_on, r_on, r_off, v_off, inductance)))
    period = 1.0 / frequency
    t_on = duty * period
    t_off = period - t_on
    a = v_on / r_on
    b = v_off / r_off
    e_on = np.exp(-t_on * r_on / inductance)
    e_off = np.exp(-t_off * r_off / inductance)
    i_min_ccm = ((a * (1.0 - e_on) + b) * e_off - b) / (1.0 - e_on * e_off)
    dcm = i_min_ccm <= 0.0
    i_min = np.where(dcm, 0.0, i_min_ccm)
    i_max = a + (i_min - a) * e_on
    conduction = np.where(dcm, decay_time(0.0, i_max, r_off, v_off, inductance), t_off)
    conduction = np.minimum(conduction, t_off)
    q_on, s_on = rise_integrals(t_on, i_min, v_on, r_on, inductance)
    q_off, s_off = decay_integrals(conduction, i_max, r_off, v_off, inductance)
    mean = (q_on + q_off) / period
    rms = np.sqrt(np.maximum((s_on + s_off) / period, 0.0))
    return PwmSteadyState(i_min=i_min, i_max=i_max, mean=mean, rms=rms, ripple=i_max - i_min,
                          dcm=dcm, conduction_off=conduction, period=period, charge_on=q_on,
                          square_on=s_on, charge_off=q_off, square_off=s_off)


def duty_for_mean(target, frequency, v_on, r_on, r_off, v_off, inductance, iterations: int = 44):
    """Smallest duty whose steady-state mean current reaches ``target`` A, per point.

    The mean current rises monotonically with duty, so a vectorised bisection finds it
    (44 halvings: below one part in 10^13 of the period). Returns ``nan`` where even
    100 % duty falls short.
    """
    shape = np.broadcast(target, frequency, v_on, r_on, r_off, v_off, inductance).shape
    lo = np.zeros(shape)
    hi = np.ones(shape)
    full = pwm_steady_state(1.0, frequency, v_on, r_on, r_off, v_off, inductance).mean
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        ok = pwm_steady_state(mid, frequency, v_on, r_on, r_off, v_off, inductance).mean >= target
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    return np.where(full >= target, hi, np.nan)
