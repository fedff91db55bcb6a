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
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..errors import InputError
from ..model.circuit import split_decay
from ..model.losses import HoldLosses, hold_losses
from ..model.pwm import coil_heat, pwm_steady_state
from .diagnostics import rise_check, seat_check
from .boost import boost_outputs, boosted_points, boosted_turn_offs
from .checks import base_checks, cautions, energy_checks, loss_cautions, loss_checks
from .corners import nominal_point
from .envelope import supply_codes
from .evaluate import PointResults, evaluate
from .firmware import firmware_arrays, firmware_setting
from .eddy import eddy_result
from .figures import (ASSUMED_DIODE_DROP, adc_code, adc_thresholds, corners_of, hold_spread,
                      loss_figures, path_name, pull_in_result, release_result, slow_hold_drive,
                      worst)
from .mechanics import armature_checks, armature_result
from .peak import plan_peak, shortest_peak_current, switch_lag
from .regulation import HoldPlan, coil_power_at, solve_hold, table_lookup, table_supplies
from .result import ActuationPoint, Design, DutyTable, HoldResult, SplitDecayResult, TimerResult
from .bridge_bus import bridge_bus_checks, bridge_release
from .supply import steady_current, supply_checks, supply_result
from .thermal_cycle import (cycle_caution, cycling, thermal_cautions, thermal_checks,
                            thermal_result)
from .timer import TimerSetting, timer_for
from .topology import bridge_checks, pumped_release, topology_cautions, topology_result
from .turnoff import turn_offs


#: Rounds of the peak <-> cycle heat iteration (an on/off cycle only; it settles in two or three).
MAX_PEAK_ROUNDS = 8


def design(drive: Drive, samples: int = 0, seed: int = 1) -> Design:
    """Design the voltage-mode peak-and-hold drive for ``drive`` (see the module docstring).

    ``samples`` > 0 adds a tolerance Monte Carlo of that many points (see
    :func:`coildrive.design.montecarlo.monte_carlo`).
    """
    board = drive.board
    timer = timer_for(drive)
    f_hold = timer.frequency_hz
    period = timer.period_ticks
    # With an on/off cycle the peak heats the coil too: the hold and the peak are solved
    # again with the peak's length until it no longer grows (a hotter coil only lengthens it).
    peak_time = 0.0
    for _ in range(MAX_PEAK_ROUNDS):
        plan = solve_hold(drive, timer, peak_time)
        env = plan.env
        compare = plan.fixed_compare
        duty = compare / period
        d_low, d_high = plan.compare_low / period, plan.compare_high / period
        at = dict(coil_temp=env.coil_temp, factors=env.factors())

        # Pull-in on the envelope (the hot coil at the lowest supply is the worst), then the
        # peak by time and by force (design/peak.py).
        first = evaluate(drive, env.supply, env.ambient, env.r_factor, env.l_factor, d_low, f_hold, 0.0, **at)
        entry_res = table_args = None
        code_low, code_high = (supply_codes(drive, env.supply) if board.supply_sense is not None
                               else (np.zeros(len(env), int), np.zeros(len(env), int)))
        if drive.pull_in.compensate:
            volts, codes, design_v = table_supplies(drive)
            m, tol = len(codes), plan.tol
            hot = np.where(np.isfinite(plan.hot_temp), plan.hot_temp, drive.thermal.max_coil_temp)
            t = tol.take(np.tile(np.arange(len(tol)), m))
            entry_res = evaluate(drive, np.repeat(design_v, len(tol)), drive.ambient.max, t.r_factor,
                                 t.l_factor, duty, f_hold, 0.0, coil_temp=np.tile(hot, m),
                                 factors={"diode_factor": t.diode_factor, "fast_factor": t.fast_factor,
                                          "sense_factor": t.sense_factor})
            table_args = dict(table_codes=codes, table_volts=volts, table_design=design_v)
        pk = plan_peak(drive, env, first, entry_res, code_low=code_low, code_high=code_high,
                       **(table_args or {}))
        # the longest real peak: the ticks and the driver's switch lead
        longer = 0.0 if pk.ticks is None else pk.ticks / board.tick.rate + switch_lag(drive)[1]
        if not cycling(drive) or longer <= peak_time:
            break
        peak_time = longer
    short, long_ = pk.short_time, pk.long_time
    # the weakest hold with the shortest peak; the most current with the longest
    res_low = evaluate(drive, env.supply, env.ambient, env.r_factor, env.l_factor, d_low, f_hold,
                       short, reuse=first, **at)
    res = evaluate(drive, env.supply, env.ambient, env.r_factor, env.l_factor, d_high, f_hold,
                   long_, reuse=first if np.array_equal(d_low, d_high) else None, **at)
    res = boosted_points(drive, res)   # a boosted peak's highest end current and turn-off
    loss = _losses(drive, res, f_hold)
    corners = corners_of(env, res_low, loss, high=res, duty=d_high, drive=drive)
    nom_grid = nominal_point(drive)
    nom = evaluate(drive, nom_grid.supply, nom_grid.ambient, nom_grid.r_factor, nom_grid.l_factor,
                   _nominal_duty(drive, plan, period), f_hold,
                   0.0 if pk.ticks is None else pk.ticks / board.tick.rate)
    nominal = corners_of(nom_grid, nom, _losses(drive, nom, f_hold), drive=drive,
                         duty=_nominal_duty(drive, plan, period))[0]
    nominal = dataclasses.replace(nominal, label="nominal: " + nominal.label)

    up = np.minimum(plan.compare_low + 1, period)
    step = pwm_steady_state(up / period, f_hold, res_low.loop.v_on, res_low.loop.r_on,
                            res_low.loop.r_off, res_low.loop.v_off, res_low.loop.inductance,
                            mixed=res_low.loop.mixed).mean - res_low.hold.mean
    k_hot = int(np.argmax(np.where(np.isfinite(plan.hot_temp), plan.hot_temp, np.inf)))
    k_heat = int(plan.hot_point[k_hot])
    spread = hold_spread(env, res_low)
    k_max = worst(res.hold.mean)
    spread.update(max_mean_current_a=float(res.hold.mean[k_max]), max_corner=env.label(k_max),
                  ripple_a=float(max(np.max(res.hold.ripple), np.max(res_low.hold.ripple))),
                  coil_power_w=coil_power_at(drive, plan, k_heat, f_hold, period),
                  coil_temp_c=float(plan.hot_temp[k_hot]),
                  hottest_corner=plan.heat.label(k_heat) + (
                      f", the hottest over the on/off cycle {plan.hot_temp[k_hot]:.4g} degC" if cycling(drive)
                      else f", settles at {plan.hot_temp[k_hot]:.4g} degC"),
                  discontinuous_corners=int(np.sum(res_low.hold.dcm | res.hold.dcm)),
                  coil_power_corner=plan.heat.label(k_heat))
    hold = HoldResult(
        mode=drive.hold.mode, current_a=drive.hold.current, frequency_hz=f_hold, duty=duty,
        compare_ticks=compare, current_step_a=float(np.max(step)), **spread,
        **loss_figures(drive, env, loss), split_decay_saving=None,
        regulation=drive.hold.regulation)
    hold = dataclasses.replace(hold, split_decay_saving=_split_saving(drive, hold))
    peak_end = np.asarray(res.peak_end_current, float)
    thresholds = adc_thresholds(drive, res, res_low, hold.min_mean_current_a, env)
    offs = boosted_turn_offs(drive, env, res, turn_offs(drive, env, res, peak_end, thresholds.trip_current_a))
    release = release_result(drive, env, res, offs)
    topo = topology_result(drive, env, res, peak_end, thresholds.trip_current_a)
    release = pumped_release(release, topo)
    release, bridge_bus = bridge_release(drive, env, res, release, long_, peak_end, thresholds.trip_current_a)
    pull_in = pull_in_result(drive, env, res, pk, shortest_peak_current(drive, res_low, short))
    thermal = thermal_result(drive, plan, f_hold, period, peak_time, release.turn_offs,
                             hold.freewheel_power_w, hold.freewheel_elements_w)
    timer_result = TimerResult(clock_hz=board.timer.clock, bits=board.timer.bits,
                               prescaler=timer.prescaler, period_ticks=period,
                               compare_ticks=compare, frequency_hz=f_hold,
                               target_hz=drive.hold.frequency, frequency_error=timer.error)
    table = plan.table or DutyTable([], [], [])

    checks = base_checks(drive, env, res_low, pull_in, hold, release, timer_result, thresholds, timer,
                         plan_reachable=plan.reachable, high=res)
    split = _split_result(drive, timer, int(np.min(plan.compare_low))) if split_decay(drive) else None
    arm, more, notes = closing_checks(drive, env, res_low, hold, loss, release, split)
    checks += more
    notes += topology_cautions(drive, topo)
    checks += bridge_checks(drive, topo)
    checks += thermal_checks(drive, pull_in.peak_time_s, thermal)
    sense = board.supply_sense
    sup = supply_result(drive, env, res, long_, d_high,
                        lambda v: adc_code(v / sense.divider, board.adc.reference, board.adc.bits),
                        thresholds.supply_min_code, bridge_bus)
    checks += supply_checks(sup) + bridge_bus_checks(drive, sup)
    boost, boost_rows, boost_notes = boost_outputs(drive, env, res_low, board.tick.rate)
    checks += boost_rows
    notes += boost_notes
    if thermal is not None and thermal.cycle is not None:
        notes[2] = cycle_caution(thermal)   # the envelope's hot coil is the cycle's
    notes += thermal_cautions(thermal)
    points = plot_points(drive, pk, env, nom, res_low, f_hold)
    out = Design(drive=drive, pull_in=pull_in, hold=hold, release=release, timer=timer_result,
                 adc=thresholds, duty_table=table, corners=corners, nominal=nominal,
                 checks=checks, cautions=notes, monte_carlo=None,
                 input_hash=drive.input_hash(), worst_corner_index=pk.k_pull, armature=arm,
                 split_decay=split, actuation_points=points, peak_table=pk.table,
                 thermal_cycle=thermal, topology=topo, supply=sup, boost=boost,
                 rise_check=rise_check(drive, env, res, f_hold),
                 seat_check=seat_check(drive, env, res_low), eddy=eddy_result(drive, env, res, long_, peak_end))
    if samples > 0:
        from .montecarlo import monte_carlo

        def duty_at(s):
            return firmware_arrays(out, s)[0]

        def peak_at(s):
            return firmware_arrays(out, s)[1]
        out = dataclasses.replace(out, monte_carlo=monte_carlo(drive, duty_at, f_hold, peak_at,
                                                               samples, seed))
    return out


def closing_checks(drive: Drive, env, res_low: PointResults, hold: HoldResult, loss: HoldLosses,
                   release, split) -> tuple:
    """``(armature result or None, checks, cautions)`` every PWM hold ends its design with:
    the armature's figures and checks, the loss and energy checks, and the cautions."""
    arm = None
    checks = []
    if res_low.armature is not None:
        arm = armature_result(drive, env, res_low)
        checks += armature_checks(drive, env, res_low, arm, release)
    checks += loss_checks(drive, hold, loss, env, split)
    checks += energy_checks(drive, release)
    notes = cautions(drive, hold, release)
    if arm is not None:
        notes.append(
            "Pull-in and release moments come from the mechanical figures in [armature]; confirm "
            "the current dip and the release on the bench before relying on the margins of a "
            "safety-relevant actuator (an armature that fails to release keeps the load engaged).")
    notes += loss_cautions(drive, hold, release, split)
    return arm, checks, notes


def plot_points(drive: Drive, pk, env, nom: PointResults, res_low: PointResults,
                frequency: float) -> tuple:
    """The actuations the plot draws: the nominal point and the worst pull-in (where it is
    not reached, the corner with the lowest steady current), holding for twice the peak,
    at least 20 and at most 2000 PWM periods."""
    peak_time = 0.0 if pk.ticks is None else pk.ticks / drive.board.tick.rate
    hold_time = min(max(2.0 * peak_time, 20.0 / frequency), 2000.0 / frequency)
    k_w = pk.k_pull
    if pk.ticks is None:  # not reached: draw where the steady current is lowest
        k_w = int(np.argmin(np.asarray(steady_current(drive, res_low.loop), float)))
    what = "worst pull-in: " if pk.ticks is not None else "pull-in not reached: "
    return (plot_point(drive, "nominal", "nominal", nom, 0, hold_time),
            plot_point(drive, "worst", what + env.label(k_w), res_low, k_w, hold_time))


def _nominal_duty(drive: Drive, plan: HoldPlan, period: int) -> float:
    """The duty the firmware runs at the nominal supply (read without error)."""
    if plan.table is None:
        return plan.fixed_compare / period
    b = drive.board
    code = adc_code(drive.supply.nominal / b.supply_sense.divider, b.adc.reference, b.adc.bits)
    return plan.table.compare_ticks[table_lookup(plan.table, code)] / period


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
    """One actuation of ``design`` at one operating point, as the firmware runs it there: the
    fixed compare, or with the supply table the entry the firmware takes for the supply's
    reading (and the peak table's entry with a compensated peak), a
    :class:`~coildrive.model.waveform.Waveform`. ``strict``: refuse a split-decay bypass
    that would open during an off-time (the design's ``bypass_timing`` check fails it;
    the plot still draws it)."""
    from ..model.waveform import actuation as waveform

    s = design.split_decay
    if strict and s is not None and s.lead_counts > s.on_time_counts:
        raise InputError(design.drive.source, "freewheel.bypass_lead",
                         f"{design.drive.freewheel.bypass_lead * 1e6:.4g} us is longer than the hold "
                         f"on-time ({s.on_time_counts / s.count_rate_hz * 1e6:.4g} us): the "
                         "bypass would open during an off-time")
    duty, peak = firmware_setting(design, supply, coil_temp, r_factor, l_factor)
    return waveform(design.drive, supply, coil_temp, peak, duty, design.hold.frequency_hz, hold_time,
                    r_factor, l_factor, points, label=label)


def _losses(drive: Drive, res: PointResults, frequency: float) -> HoldLosses:
    """Element powers of the hold at the points of ``res`` (its loop and steady state)."""
    sw = drive.switch
    return hold_losses(drive, res.loop, res.hold, frequency, sw.rise_time, sw.fall_time)


def _split_saving(drive: Drive, hold: HoldResult) -> dict | None:
    """What split decay would change when the hold takes a fast-decay path without it: the
    same drive designed again with the slow hold path (an ideal bypass), compared with
    ``hold``. ``None`` with a plain diode path (already slow) or with split decay fitted."""
    fw = drive.freewheel
    if fw.type == "diode" or split_decay(drive):
        return None
    slow_drive, assumed = slow_hold_drive(drive)
    slow = design(slow_drive).hold
    fast_element = {"zener": "zener", "resistor": "resistor", "clamp": "clamp"}[fw.type]
    return {
        "freewheel_power_w": hold.freewheel_power_w - slow.freewheel_power_w,
        "fast_element": fast_element,
        "fast_element_power_w": hold.freewheel_elements_w.get(fast_element, 0.0),
        "freewheel_power_split_w": slow.freewheel_power_w,
        "coil_power_change_w": slow.coil_power_w - hold.coil_power_w,
        "switch_power_change_w": slow.switch_power_w - hold.switch_power_w,
        "duty_split": slow.duty, "compare_ticks_split": slow.compare_ticks,
        "duty_change": slow.duty - hold.duty,
        "ripple_split_a": slow.ripple_a, "ripple_change_a": slow.ripple_a - hold.ripple_a,
        "assumed_diode_drop_v": ASSUMED_DIODE_DROP if assumed else None,
    }


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


@dataclass(frozen=True)
class HoldFigures:
    """A voltage-mode hold (level, frequency) evaluated exactly as :func:`design` evaluates
    it -- the envelope, the declared regulation, the hottest coil -- for the offline tune.

    ``compare`` is the fixed compare (with the supply table its first, largest entry);
    currents in A, powers in W (each the largest of any corner, ``total`` the largest sum
    at one corner, ``parts`` its split there by the names of
    :data:`coildrive.model.losses.HoldLosses.ELEMENTS` plus ``coil``, ``sense``,
    ``switch_conduction``, ``switch_switching``), temperature in degC.
    """

    compare: int
    reachable: bool
    min_mean: float
    max_mean: float
    ripple: float
    coil_power: float
    coil_temp: float
    conduction: float
    switching: float
    switch: float
    sense: float
    freewheel: float
    total: float
    parts: dict
    worst_corner: str
    hottest_corner: str


def hold_figures(drive: Drive, timer: TimerSetting) -> HoldFigures:
    """The hold of ``drive`` (its ``hold.current`` and regulation) at the timer setting
    ``timer``, with the figures the design reports (see :class:`HoldFigures`)."""
    f = timer.frequency_hz
    period = timer.period_ticks
    plan = solve_hold(drive, timer)
    env = plan.env
    at = dict(coil_temp=env.coil_temp, factors=env.factors(), mechanics=False)
    res_low = evaluate(drive, env.supply, env.ambient, env.r_factor, env.l_factor,
                       plan.compare_low / period, f, 0.0, **at)
    res = evaluate(drive, env.supply, env.ambient, env.r_factor, env.l_factor,
                   plan.compare_high / period, f, 0.0, **at)
    loss = _losses(drive, res, f)
    # the coil's part: its copper and, with an eddy term, the core's eddy loss the supply feeds
    coil = loss.coil if res.hold.eddy_energy is None else coil_heat(res.hold, res.loop.r_coil)
    parts = {"coil": coil, "sense": loss.sense, "switch_conduction": loss.switch_conduction,
             "switch_switching": np.broadcast_to(loss.switch_switching, loss.coil.shape),
             **{n: np.broadcast_to(v, loss.coil.shape) for n, v in loss.elements().items()}}
    total = sum(parts.values())
    k = worst(total)
    k_hot = int(np.argmax(np.where(np.isfinite(plan.hot_temp), plan.hot_temp, np.inf)))
    k_heat = int(plan.hot_point[k_hot])
    switch = np.broadcast_to(loss.switch, loss.coil.shape)
    return HoldFigures(
        compare=plan.fixed_compare, reachable=plan.reachable,
        min_mean=float(np.min(res_low.hold.mean)), max_mean=float(np.max(res.hold.mean)),
        ripple=float(max(np.max(res.hold.ripple), np.max(res_low.hold.ripple))),
        coil_power=coil_power_at(drive, plan, k_heat, f, period),
        coil_temp=float(plan.hot_temp[k_hot]),
        conduction=float(np.max(loss.switch_conduction)),
        switching=float(np.max(np.broadcast_to(loss.switch_switching, loss.coil.shape))),
        switch=float(np.max(switch)), sense=float(np.max(loss.sense)),
        freewheel=float(np.max(loss.freewheel)), total=float(total[k]),
        parts={n: float(v[k]) for n, v in parts.items()}, worst_corner=env.label(k),
        hottest_corner=plan.heat.label(k_heat))
