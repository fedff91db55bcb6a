"""The duty a closed-loop hold settles at: the sample the loop regulates, at its instant
in the PWM period, from the exact periodic steady state (closed form), and the duty that
puts it at a target. Shared by the closed-loop design
(:mod:`coildrive.design.hold_closed_loop`) and by what the firmware runs at an operating
point (:mod:`coildrive.design.firmware`). Units: SI.
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from ..model import eddy
from ..model.circuit import loop
from ..model.eddy import EddyCoil
from ..model.pwm import pwm_steady_state
from ..model.rl import decay_current, rise_current

#: Highest duty the loop may settle at (our choice: 5 % of the period left for the loop
#: to answer a supply dip or a heating coil without saturating).
MAX_DUTY = 0.95
#: Least on-time with the sense resistor under the switch: the middle of the on-time
#: must leave the switching edge and the sense filter behind and give the converter its
#: acquisition time (common practice: a microsecond each side).
MIN_ON_TIME_S = 2e-6
#: Bisection steps of the duty for a sample current (the bracket ends below 1e-15).
_STEPS = 52


def codes_per_amp(drive: Drive) -> float:
    """ADC codes per ampere of the current-sense channel (nominal parts)."""
    b = drive.board
    return b.sense.resistance * b.sense.gain / b.adc.reference * 2**b.adc.bits


def sample_at(duty, frequency: float, lp, switch_leg: bool):
    """``(current at the sampling instant A, the PWM steady state)`` at ``duty``: the middle
    of the on-time (switch leg) or of the period (coil path, the on-time first)."""
    ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    t = 1.0 / frequency
    t_on = np.asarray(duty, float) * t
    on_sensed, off_sensed = _sensed(lp)
    if switch_leg:
        return on_sensed(rise_current(0.5 * t_on, ss.i_min, lp.v_on, lp.r_on, lp.inductance)), ss
    mid = 0.5 * t
    on = rise_current(np.minimum(mid, t_on), ss.i_min, lp.v_on, lp.r_on, lp.inductance)
    off = decay_current(np.maximum(mid - t_on, 0.0), ss.i_max, lp.r_off, lp.v_off, lp.inductance)
    return np.where(mid <= t_on, on_sensed(on), off_sensed(off)), ss


def _sensed(lp):
    """``(on, off)``: the sensed (terminal) current as a function of the state the segment
    functions return -- the current itself, or with an eddy term the magnetising current
    (``i = (v + R_e i_m) / (r + R_e)`` of the conducting loop, zero once the freewheel
    blocks; :mod:`coildrive.model.eddy`)."""
    e = lp.inductance
    if not isinstance(e, EddyCoil):
        return (lambda i: i), (lambda i: i)
    return (lambda m: eddy.terminal(m, lp.v_on, lp.r_on, e.resistance),
            lambda m: np.maximum(eddy.terminal(m, -lp.v_off, lp.r_off, e.resistance), 0.0))


def duty_for_sample(target, frequency: float, lp, switch_leg: bool, low: float = 0.0,
                    high: float = 1.0) -> np.ndarray:
    """Duty (``low``..``high``) at which the sample reaches ``target`` A at each point (the
    sample rises with the duty); ``nan`` where even ``high`` falls short, ``low`` where
    ``low`` already exceeds it (bisection, :data:`_STEPS` halvings)."""
    shape = np.broadcast(np.asarray(target), lp.v_on).shape
    lo = np.full(shape, float(low))
    hi = np.full(shape, float(high))
    top, _ = sample_at(hi, frequency, lp, switch_leg)
    for _ in range(_STEPS):
        mid = 0.5 * (lo + hi)
        ok = sample_at(mid, frequency, lp, switch_leg)[0] >= target
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    return np.where(top >= target, hi, np.nan)


def reading_range(sense_factor, gain_tolerance: float):
    """``(low, high)`` reading of the channel over the true current at each point."""
    f = np.asarray(sense_factor, float)
    return f * (1.0 - gain_tolerance), f * (1.0 + gain_tolerance)


def regulated_duty(drive: Drive, lp, target, frequency: float, switch_leg: bool, floor: float):
    """The duty the loop settles at (``nan``: saturated at the top) and the steady state
    there (at ``MAX_DUTY`` where saturated)."""
    d = duty_for_sample(target, frequency, lp, switch_leg, floor, MAX_DUTY)
    run = np.where(np.isnan(d), MAX_DUTY, d)
    ss = pwm_steady_state(run, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    return d, run, ss


def settled_duty(design, supply: float, coil_temp: float, r_factor: float = 1.0,
                 l_factor: float = 1.0) -> float:
    """The duty a closed-loop ``design`` settles at, at one operating point (V, degC,
    tolerance factors), its channel reading true: the sample at the middle of the
    set-point's code (the loop's reading dithers between the code and the next)."""
    drive = design.drive
    r = design.hold.closed_loop
    lp = loop(drive, supply, coil_temp, r_factor, l_factor)
    floor = r.min_compare / design.timer.period_ticks
    return float(regulated_duty(drive, lp, (r.setpoint_code + 0.5) * r.current_lsb_a,
                            design.hold.frequency_hz, drive.board.sense.position == "switch",
                            floor)[1])
