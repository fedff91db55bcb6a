"""Voltage-mode hold (``[hold] mode = "voltage"``): a fixed PWM duty from the hold timer.

Decisions (each explained in docs/design-method.md):

* peak duration = worst-corner pull-in time x ``pull_in.margin``, rounded up to whole
  scheduler ticks plus one tick (a tick-based phase may start anywhere inside a tick);
* hold duty = the smallest duty whose steady-state mean current meets ``hold.current`` at
  every corner with the self-heating it causes, rounded up to whole compare counts;
* a supply-compensated duty table (compare value against supply-sense ADC code);
* release through the board's freewheel path, checked against the switch rating;
* the hold's average power in every freewheel element and in the switch at every corner
  (:mod:`coildrive.model.losses`), checked against the board's power ratings; with
  split decay the hold takes the slow path and the release the fast one.

This module is one hold strategy (see :mod:`coildrive.design.holds`): ``design`` and
``actuation`` are its interface.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..config import Drive
from ..errors import InputError
from ..model.circuit import loop, split_decay
from ..model.losses import HoldLosses, hold_losses
from ..model.pwm import duty_for_mean, pwm_steady_state
from .checks import base_checks, cautions, loss_cautions, loss_checks
from .corners import CornerGrid, corner_grid, nominal_point
from .evaluate import PointResults, evaluate, required_duty
from .figures import (adc_code, adc_thresholds, corners_of, hold_spread, loss_figures, path_name,
                      peak_ticks_for, pull_in_result, release_result, saving_figures,
                      slow_hold_drive, worst)
from .mechanics import armature_checks, armature_result
from .result import (ActuationPoint, Design, DutyTable, HoldResult, SplitDecayResult,
                     TimerResult)
from .timer import TimerSetting, solve_timer

#: Entries in the supply-compensated duty table.
DUTY_TABLE_ENTRIES = 16


def design(drive: Drive, samples: int = 0, seed: int = 1) -> Design:
    """Design the voltage-mode peak-and-hold drive for ``drive`` (see the module docstring).

    ``samples`` > 0 adds a tolerance Monte Carlo of that many points (see
    :func:`coildrive.design.montecarlo.monte_carlo`).
    """
    board = drive.board
    grid = corner_grid(drive)
    timer = solve_timer(board.timer.clock, board.timer.bits, board.timer.prescaler_max,
                        drive.hold.frequency, drive.hold.frequency_tolerance,
                        board.timer.prescalers)
    f_hold = timer.frequency_hz
    duty_exact, _ = required_duty(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                                  f_hold)
    compare = quantised_compare(drive, grid, duty_exact, timer)
    duty = compare / timer.period_ticks

    # Pull-in at the settled temperatures, then the peak time from the worst corner.
    first = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, duty, f_hold, 0.0)
    k_pull = worst(first.pull_in_time)
    t_pull = float(first.pull_in_time[k_pull])
    peak_ticks = peak_ticks_for(drive, t_pull)
    peak_time = peak_ticks / board.tick.rate
    res = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, duty, f_hold,
                   peak_time, reuse=first)
    # Hold powers at every corner from the steady state the design already has (coil at
    # its settled temperature there).
    loss = _losses(drive, res, f_hold)
    corners = corners_of(grid, res, loss)
    nom_grid = nominal_point(drive)
    nom = evaluate(drive, nom_grid.supply, nom_grid.ambient, nom_grid.r_factor, nom_grid.l_factor,
                   duty, f_hold, peak_time)
    nominal = corners_of(nom_grid, nom, _losses(drive, nom, f_hold))[0]
    nominal = dataclasses.replace(nominal, label="nominal: " + nominal.label)

    up = min(compare + 1, timer.period_ticks)
    step = pwm_steady_state(up / timer.period_ticks, f_hold, res.loop.v_on, res.loop.r_on,
                            res.loop.r_off, res.loop.v_off, res.loop.inductance).mean - res.hold.mean
    hold = HoldResult(
        mode=drive.hold.mode, current_a=drive.hold.current, frequency_hz=f_hold, duty=duty,
        compare_ticks=compare, current_step_a=float(np.max(step)), **hold_spread(grid, res),
        **loss_figures(drive, grid, loss),
        split_decay_saving=_split_saving(drive, grid, timer, res, loss, duty, peak_time),
    )
    release = release_result(drive, grid, res)
    pull_in = pull_in_result(drive, grid, res, k_pull, t_pull, peak_ticks)
    timer_result = TimerResult(clock_hz=board.timer.clock, bits=board.timer.bits,
                               prescaler=timer.prescaler, period_ticks=timer.period_ticks,
                               compare_ticks=compare, frequency_hz=f_hold,
                               target_hz=drive.hold.frequency, frequency_error=timer.error)
    thresholds = adc_thresholds(drive, res, hold.min_mean_current_a)
    table = _duty_table(drive, grid, res.coil_temp, timer)

    checks = base_checks(drive, grid, res, pull_in, hold, release, timer_result, thresholds, timer)
    split = _split_result(drive, timer, compare) if split_decay(drive) else None
    arm = None
    if res.armature is not None:
        arm = armature_result(drive, grid, res)
        checks += armature_checks(drive, grid, res, arm, release)
    checks += loss_checks(drive, hold, loss, grid, split)
    notes = cautions(drive, hold, release)
    if arm is not None:
        notes.append(
            "Pull-in and release moments come from the mechanical figures in [armature]; confirm "
            "the current dip and the release on the bench before relying on the margins of a "
            "safety-relevant actuator (an armature that fails to release keeps the load engaged).")
    notes += loss_cautions(drive, hold, release, split)
    hold_time = max(2.0 * peak_time, 20.0 / f_hold)
    points = (plot_point(drive, "nominal", "nominal", nom, 0, hold_time),
              plot_point(drive, "worst", "worst pull-in: " + grid.label(k_pull), res, k_pull, hold_time))
    mc = None
    if samples > 0:
        from .montecarlo import monte_carlo
        mc = monte_carlo(drive, duty, f_hold, peak_time, samples, seed)
    return Design(drive=drive, pull_in=pull_in, hold=hold, release=release, timer=timer_result,
                  adc=thresholds, duty_table=table, corners=corners, nominal=nominal,
                  checks=checks, cautions=notes, monte_carlo=mc,
                  input_hash=drive.input_hash(), worst_corner_index=k_pull, armature=arm,
                  split_decay=split, actuation_points=points)


def plot_point(drive: Drive, name: str, label: str, res: PointResults, k: int,
               hold_time: float) -> ActuationPoint:
    """Point ``k`` of ``res`` as an :class:`ActuationPoint` (a coil that does not settle is
    drawn at ``thermal.max_coil_temp``)."""
    temp = float(res.coil_temp[k]) if math.isfinite(res.coil_temp[k]) else drive.thermal.max_coil_temp
    return ActuationPoint(name, label, float(res.supply[k]), temp, float(res.r_factor[k]),
                          float(res.l_factor[k]), hold_time)


def actuation(design: Design, supply: float, coil_temp: float, hold_time: float,
              r_factor: float = 1.0, l_factor: float = 1.0, points: int = 8, label: str = "",
              strict: bool = True):
    """One actuation of ``design`` at one operating point (the fixed duty the timer makes):
    a :class:`~coildrive.model.waveform.Waveform`. ``strict``: refuse a split-decay bypass
    that would open during an off-time (the design's ``bypass_timing`` check fails it;
    the plot still draws it)."""
    from ..model.waveform import actuation as waveform

    s = design.split_decay
    if strict and s is not None and s.lead_counts > s.on_time_counts:
        raise InputError(design.drive.source, "freewheel.bypass_lead",
                         f"{design.drive.freewheel.bypass_lead * 1e6:.4g} us is longer than the hold "
                         f"on-time ({s.on_time_counts / s.count_rate_hz * 1e6:.4g} us): the "
                         "bypass would open during an off-time")
    return waveform(design.drive, supply, coil_temp, design.pull_in.peak_time_s, design.hold.duty,
                    design.hold.frequency_hz, hold_time, r_factor, l_factor, points, label=label)


def quantised_compare(drive: Drive, grid: CornerGrid, duty: float, timer: TimerSetting) -> int:
    """Round the duty up to whole compare counts, adding counts until every corner holds."""
    period = timer.period_ticks
    if not math.isfinite(duty):
        return period
    compare = min(period, max(0, math.ceil(duty * period - 1e-9)))
    while compare < period:
        res = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                       compare / period, timer.frequency_hz, 0.0, mechanics=False)
        if np.min(res.hold.mean) >= drive.hold.current:
            break
        compare += 1
    return compare


def _duty_table(drive: Drive, grid: CornerGrid, temps: np.ndarray, timer: TimerSetting,
                entries: int = DUTY_TABLE_ENTRIES) -> DutyTable:
    """Compare value against supply: the worst corner at each supply holds the current.

    The coil temperatures are those of the lowest-supply corners (the hold current, and so
    the coil power, stays about the same as the table compensates the supply).
    """
    adc = drive.board.adc
    low = grid.supply == np.min(grid.supply)
    amb, rf, lf = grid.ambient[low], grid.r_factor[low], grid.l_factor[low]
    t = np.where(np.isfinite(temps[low]), temps[low], drive.thermal.max_coil_temp)
    if drive.supply.max > drive.supply.min:
        volts = np.linspace(drive.supply.min, drive.supply.max, entries)
    else:
        volts = np.array([drive.supply.min])
    period = timer.period_ticks
    # one vectorised bisection over (supply entry x low-supply corner)
    lp = loop(drive, volts[:, None] + 0.0 * amb[None, :], t[None, :], rf[None, :], lf[None, :])
    need = duty_for_mean(drive.hold.current, timer.frequency_hz, lp.v_on, lp.r_on, lp.r_off,
                         lp.v_off, lp.inductance)
    need_max = np.where(np.any(np.isnan(need), axis=1), 1.0, np.nanmax(np.nan_to_num(need, nan=1.0), axis=1))
    compares = [int(min(period, math.ceil(d * period - 1e-9))) for d in need_max]
    codes = [adc_code(v / drive.board.supply_sense.divider, adc.reference, adc.bits) for v in volts]
    return DutyTable([float(v) for v in volts], codes, compares)


def _losses(drive: Drive, res: PointResults, frequency: float) -> HoldLosses:
    """Element powers of the hold at the points of ``res`` (its loop and steady state)."""
    sw = drive.switch
    return hold_losses(drive, res.loop, res.hold, frequency, sw.rise_time, sw.fall_time)


def _split_saving(drive: Drive, grid: CornerGrid, timer: TimerSetting, res: PointResults,
                  loss: HoldLosses, duty: float, peak_time: float) -> dict | None:
    """What split decay would save when the hold takes a fast-decay path without it: the
    same design (frequency, peak) with the slow hold path, its duty solved again.

    ``None`` with a plain diode path (already slow) or with split decay fitted.
    """
    fw = drive.freewheel
    if fw.type == "diode" or split_decay(drive):
        return None
    slow, assumed = slow_hold_drive(drive)
    f_hold = timer.frequency_hz
    # The duty iteration climbs to the smallest self-consistent duty from below, so
    # stopping it early (within a quarter count) gives a duty at or below it; the compare
    # is then rounded up and raised until every corner holds, which lands on the same
    # count as the exact duty would (the tests compare with a full split-decay design).
    d_low, _ = required_duty(slow, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, f_hold,
                             tol=0.25 / timer.period_ticks)
    compare = quantised_compare(slow, grid, d_low, timer)
    d_slow = compare / timer.period_ticks
    rs = evaluate(slow, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, d_slow, f_hold,
                  peak_time, mechanics=False)
    ls = _losses(slow, rs, f_hold)
    return saving_figures(drive, res, loss, duty, rs, ls, d_slow, compare, assumed)


def _split_result(drive: Drive, timer: TimerSetting, compare: int) -> SplitDecayResult:
    fw = drive.freewheel
    rate = drive.board.timer.clock / timer.prescaler
    lead = fw.bypass_lead
    lead_counts = math.ceil(lead * rate - 1e-9) if lead > 0 else 0
    lag_counts = math.floor(-lead * rate + 1e-9) if lead < 0 else 0
    return SplitDecayResult(
        hold_path=path_name(drive, hold=True), release_path=path_name(drive, hold=False),
        bypass_resistance_ohm=fw.bypass_resistance, bypass_lead_s=lead, count_rate_hz=rate,
        lead_counts=lead_counts, lag_counts=lag_counts, on_time_counts=compare)
