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
from ..model.flux import FluxCoil
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
#: Duty bracket the regula falsi stops at (a millionth of a timer tick at 16 bits).
_FALSI_TOL = 1e-11


def codes_per_amp(drive: Drive) -> float:
    """ADC codes per ampere of the current-sense channel (nominal parts)."""
    b = drive.board
    return b.sense.resistance * b.sense.gain / b.adc.reference * 2**b.adc.bits


def sample_at(duty, frequency: float, lp, switch_leg: bool):
    """``(current at the sampling instant A, the PWM steady state)`` at ``duty``: the middle
    of the on-time (switch leg) or of the period (coil path, the on-time first). A full
    bridge's mixed-decay hold (``lp.mixed``): the off-time decays fast for its fraction of
    the off-time, then slowly; the mid-period sample may fall in either part (with an eddy
    term the terminal current of that part's loop: ``(R_e i_m - V_f)/(R_f + R_e)`` in the
    fast part, zero once its body diodes block; a curve through its own segment
    currents)."""
    ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                          mixed=lp.mixed)
    t = 1.0 / frequency
    t_on = np.asarray(duty, float) * t
    on_sensed, off_sensed = _sensed(lp)
    if switch_leg:
        return on_sensed(rise_current(0.5 * t_on, ss.i_min, lp.v_on, lp.r_on, lp.inductance)), ss
    mid = 0.5 * t
    on = rise_current(np.minimum(mid, t_on), ss.i_min, lp.v_on, lp.r_on, lp.inductance)
    late = np.maximum(mid - t_on, 0.0)
    if lp.mixed is not None:   # the fast part first (two body diodes into the bus), then slow
        t_fast = lp.mixed.fraction * (t - t_on)
        top = decay_current(np.minimum(late, t_fast), ss.i_max, lp.mixed.r_fast, lp.mixed.v_fast,
                            lp.inductance)
        off = decay_current(np.maximum(late - t_fast, 0.0), top, lp.r_off, lp.v_off, lp.inductance)
        fast_sensed = _sensed(lp, lp.mixed.r_fast, lp.mixed.v_fast)[1]
        return np.where(mid <= t_on, on_sensed(on),
                        np.where(late <= t_fast, fast_sensed(top), off_sensed(off))), ss
    off = decay_current(late, ss.i_max, lp.r_off, lp.v_off, lp.inductance)
    return np.where(mid <= t_on, on_sensed(on), off_sensed(off)), ss


def _sensed(lp, r_off=None, v_off=None):
    """``(on, off)``: the sensed (terminal) current as a function of the state the segment
    functions return -- the current itself, or with an eddy term the magnetising current
    (``i = (v + R_e i_m) / (r + R_e)`` of the conducting loop, zero once the freewheel
    blocks; :mod:`coildrive.model.eddy`). ``r_off``/``v_off``: the off-time's loop, the
    hold's freewheel path unless given (a bridge's fast part: ``R_f``, ``V_f``)."""
    e = lp.inductance
    if not isinstance(e, EddyCoil):
        return (lambda i: i), (lambda i: i)
    r_off, v_off = (lp.r_off, lp.v_off) if r_off is None else (r_off, v_off)
    return (lambda m: eddy.terminal(m, lp.v_on, lp.r_on, e.resistance),
            lambda m: np.maximum(eddy.terminal(m, -v_off, r_off, e.resistance), 0.0))


def duty_for_sample(target, frequency: float, lp, switch_leg: bool, low: float = 0.0,
                    high: float = 1.0) -> np.ndarray:
    """Duty (``low``..``high``) at which the sample reaches ``target`` A at each point (the
    sample rises with the duty); ``nan`` where even ``high`` falls short, ``low`` where
    ``low`` already exceeds it (bisection, :data:`_STEPS` halvings)."""
    shape = np.broadcast(np.asarray(target), lp.v_on).shape
    lo = np.full(shape, float(low))
    hi = np.full(shape, float(high))
    top, _ = sample_at(hi, frequency, lp, switch_leg)
    if isinstance(lp.inductance, EddyCoil) and isinstance(lp.inductance.magnetising, FluxCoil):
        # each sample is the curve's eddy orbit (milliseconds): regula falsi instead of
        # bisection, a few evaluations instead of fifty
        return _falsi(np.broadcast_to(np.asarray(target, float), shape), frequency, lp,
                      switch_leg, lo, hi, top)
    return _bisect(target, frequency, lp, switch_leg, lo, hi, top)


def _bisect(target, frequency: float, lp, switch_leg: bool, lo, hi, top):
    """:func:`duty_for_sample` by :data:`_STEPS` halvings of ``lo``..``hi``."""
    for _ in range(_STEPS):
        mid = 0.5 * (lo + hi)
        ok = sample_at(mid, frequency, lp, switch_leg)[0] >= target
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    return np.where(top >= target, hi, np.nan)


def _falsi(target, frequency: float, lp, switch_leg: bool, lo, hi, top, steps: int = 60):
    """:func:`duty_for_sample` by regula falsi with the Illinois halving on
    ``sample(duty) - target`` (rising in the duty) to a duty bracket of
    :data:`_FALSI_TOL`, all points in each pass (the loop's points are not a
    sliceable array); ``nan`` where ``hi`` falls short, ``lo`` where ``lo`` exceeds."""
    f_hi = top - target
    # at zero duty the coil carries nothing (the orbit has no on-time to solve)
    f_lo = np.where(lo > 0, sample_at(np.maximum(lo, _FALSI_TOL), frequency, lp,
                                      switch_leg)[0], 0.0) - target
    live = (f_lo < 0) & (f_hi > 0)
    side = np.zeros(target.shape, int)   # which end moved last (-1 low, +1 high)
    for _ in range(steps):
        live &= hi - lo > _FALSI_TOL
        if not live.any():
            break
        with np.errstate(divide="ignore", invalid="ignore"):
            x = lo - f_lo * (hi - lo) / (f_hi - f_lo)
        x = np.where(live, np.clip(x, lo + 0.01 * _FALSI_TOL, hi - 0.01 * _FALSI_TOL), hi)
        fx = sample_at(x, frequency, lp, switch_leg)[0] - target
        up = live & (fx >= 0)
        down = live & ~up
        f_lo = np.where(up & (side == 1), 0.5 * f_lo, f_lo)   # Illinois: halve the stuck end
        f_hi = np.where(down & (side == -1), 0.5 * f_hi, f_hi)
        hi, f_hi = np.where(up, x, hi), np.where(up, fx, f_hi)
        lo, f_lo = np.where(down, x, lo), np.where(down, fx, f_lo)
        side = np.where(up, 1, np.where(down, -1, side))
    d = np.where(f_lo >= 0, lo, hi)
    return np.where(f_hi >= 0, d, np.nan)


def reading_range(sense_factor, gain_tolerance: float):
    """``(low, high)`` reading of the channel over the true current at each point."""
    f = np.asarray(sense_factor, float)
    return f * (1.0 - gain_tolerance), f * (1.0 + gain_tolerance)


def regulated_duty(drive: Drive, lp, target, frequency: float, switch_leg: bool, floor: float):
    """The duty the loop settles at (``nan``: saturated at the top) and the steady state
    there (at ``MAX_DUTY`` where saturated)."""
    d = duty_for_sample(target, frequency, lp, switch_leg, floor, MAX_DUTY)
    run = np.where(np.isnan(d), MAX_DUTY, d)
    ss = pwm_steady_state(run, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                          mixed=lp.mixed)
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
