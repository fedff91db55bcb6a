"""Closed-loop average-current hold (``[hold] regulation = "closed_loop"``).

One hold strategy (see :mod:`coildrive.design.holds`). The firmware converts the coil
current once a PWM period -- in the middle of the on-time with the sense resistor under
the switch, in the middle of the period with it in the coil path -- and an integer PI
loop sets the next period's compare so that the reading sits at a set-point code. So:

* the set-point is the smallest code that holds ``hold.current`` with the channel
  reading high (sense resistor and amplifier at the ends of their tolerances); at every
  corner the loop settles where the sample equals the set-point as that corner's channel
  reads it, to within one code: the weakest hold reads high at the set-point code, the
  strongest reads low one code above it. The duty there is solved from the exact PWM
  steady state (the sample at its instant, closed form), so the mean current, the
  ripple, the coil's self-heating (a fixed point: the current is regulated, the duty
  follows the resistance), the freewheel losses and the release all follow from it;
* a corner where that duty is above :data:`MAX_DUTY` (a low supply with a hot coil) or
  below the least on-time the switch-leg sample needs is a failed check that names it;
* the gains, margins and settling time come from :mod:`coildrive.design.loop_gains`
  (crossover at a stated fraction of the PWM frequency at the corner with the most loop
  gain), and the fixed-point constants the header carries.

The peak, the release and every other figure are built as for the voltage-mode hold
(:mod:`coildrive.design.figures`, :mod:`coildrive.design.checks`).

A full bridge's mixed decay (``hold.fast_fraction``; a linear coil, an eddy term, a
flux-linkage curve): each off-time the loop's compare leaves starts fast for that fraction
of it, then decays slowly -- the loop's :class:`~coildrive.model.circuit.Loop` carries it,
so the sample, the settled duty, every steady state and the averaged plant are the
three-segment orbit's (:mod:`coildrive.design.loop_duty`, :mod:`coildrive.design.loop_gains`;
:mod:`coildrive.model.eddy_mixed`, :mod:`coildrive.model.flux_mixed`). With an eddy term
the sensed current steps where the fast part ends too: ``loop_sample_edge`` names that
duty beside 1/2.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..config import Drive
from ..errors import InputError
from ..model.circuit import loop, split_decay
from ..model.pwm import pwm_steady_state
from ..model.thermal import settle_temperature
from . import loop_gains
from .loop_duty import (MAX_DUTY, MIN_ON_TIME_S, codes_per_amp, reading_range, regulated_duty,
                        settled_duty)
from .boost import boost_outputs, boosted_points, boosted_turn_offs, peak_in_force
from .bridge_bus import bridge_bus_checks, bridge_release
from .checks import base_checks
from .corners import nominal_point
from .envelope import envelope, heating_grid, hottest, tolerances
from .evaluate import evaluate
from .figures import (adc_thresholds, corners_of, hold_spread, loss_figures, pull_in_result,
                      release_result, worst)
from .hold_current import drooping_bus
from .hold_voltage import MAX_PEAK_ROUNDS, _losses, _split_result, closing_checks, plot_points
from .peak import plan_peak, shortest_peak_current, switch_lag
from .diagnostics import rise_check, seat_check
from .eddy import eddy_result
from .thermal_cycle import (HeatPoints, cycle_caution, cycle_result, cycling, thermal_cautions,
                            thermal_checks)
from .topology import bridge_checks, pumped_release, topology_cautions, topology_result
from .result import Check, ClosedLoopResult, Design, DutyTable, HoldResult, TimerResult
from .supply import supply_checks
from .timer import timer_for
from .turnoff import turn_offs

#: Set-points the search steps one code at a time before it gallops (a high-resolution
#: channel, or an eddy term's sample far above the mean, may need thousands of codes).
_LINEAR_CODES = 2


def _lowest_code(first: int, last: int, solve, short):
    """``(code, solve(code))``: the lowest code from ``first`` (at most ``last``) whose
    solve is no longer ``short``, stepping one code at a time for :data:`_LINEAR_CODES`
    codes, then doubling the step and bisecting back (the weakest hold's mean rises
    with the set-point)."""
    code = first
    got = solve(code)
    for _ in range(_LINEAR_CODES):
        if not short(got) or code >= last:
            return code, got
        code += 1
        got = solve(code)
    if not short(got) or code >= last:
        return code, got
    lo, step = code, 1   # lo: short
    while True:
        hi = min(lo + step, last)
        got_hi = solve(hi)
        if not short(got_hi) or hi >= last:
            break
        lo, step = hi, 2 * step
    while hi - lo > 1:   # lo short, hi not (or the last code)
        mid = (lo + hi) // 2
        got_mid = solve(mid)
        if short(got_mid):
            lo = mid
        else:
            hi, got_hi = mid, got_mid
    return hi, got_hi


def design(drive: Drive, samples: int = 0, seed: int = 1) -> Design:
    """The Design of a closed-loop hold (see the module docstring)."""
    if samples > 0:
        raise InputError("--samples", "", "the Monte Carlo covers the fixed and supply-table holds "
                         "only (this drive has hold.regulation = \"closed_loop\")")
    if drive.pull_in.compensate:
        raise InputError(drive.source, "pull_in.compensate", "a supply-compensated peak is designed "
                         "for the fixed and supply-table holds; leave it out with regulation = "
                         "\"closed_loop\"")
    board = drive.board
    timer = timer_for(drive)
    f = timer.frequency_hz
    period = timer.period_ticks
    switch_leg = board.sense.position == "switch"
    cpa = codes_per_amp(drive)
    lsb = 1.0 / cpa
    gt = board.sense.gain_tolerance
    setpoint = max(1, math.ceil(drive.hold.current * reading_range(1.0 + board.sense.resistance_tolerance, gt)[1] * cpa - 1e-9))
    floor = min(MIN_ON_TIME_S * f, MAX_DUTY) if switch_leg else 0.0
    min_compare = math.ceil(floor * period - 1e-9)
    floor = min_compare / period
    max_compare = math.floor(MAX_DUTY * period + 1e-9)

    tol = tolerances(drive)
    heat = heating_grid(drive, tol)
    hf = {"diode_factor": heat.tol.diode_factor, "fast_factor": heat.tol.fast_factor,
          "sense_factor": heat.tol.sense_factor}

    def solve(code: int, peak_time: float):
        """Everything that follows from set-point ``code``: the coil heats under the most
        current the loop runs (the channel reading low, one code up) at every supply x
        ambient x tolerance corner -- after a long hold, or with an on/off cycle and a heat
        capacity the hottest over the cycle, each actuation a peak of ``peak_time`` s, the
        regulated hold and the release; the envelope at those hottest coils; the duties of
        the weakest and the strongest hold at each corner."""
        strong_h = (code + 1) * lsb / reading_range(heat.tol.sense_factor, gt)[0]
        pts = HeatPoints(heat.supply, heat.ambient, heat.tol.r_factor, heat.tol.l_factor, hf,
                         heat.label,
                         lambda lph: regulated_duty(drive, lph, strong_h, f, switch_leg, floor)[2])
        heat_power = pts.power(drive)
        temps = pts.temperature(drive, peak_time)
        hot, where = hottest(heat, temps, len(tol))
        hot = np.maximum(hot, drive.ambient.max)
        env = envelope(drive, tol, hot)
        lp = loop(drive, env.supply, np.where(np.isfinite(env.coil_temp), env.coil_temp,
                                              drive.thermal.max_coil_temp),
                  env.r_factor, env.l_factor, **env.factors())
        rd_low, rd_high = reading_range(env.sense_factor, gt)
        d_weak, run_low, ss_low = regulated_duty(drive, lp, code * lsb / rd_high, f, switch_leg, floor)
        d_strong, run_high, _ = regulated_duty(drive, lp, (code + 1) * lsb / rd_low, f, switch_leg, floor)
        return temps, where, hot, env, lp, d_weak, d_strong, run_low, run_high, heat_power, ss_low, pts

    # The sample is not the mean (the ripple's curvature; in the coil path the middle of
    # the period may fall in the off-time): the set-point goes up a code at a time until
    # the weakest hold's mean meets the hold current (the loop cannot hold it where it
    # saturates: that corner fails its own check).
    # With an on/off cycle the peak heats the coil too: the set-point and the peak are
    # solved again with the peak's length until it no longer grows (as in voltage mode).
    full = 2**board.adc.bits - 1
    first_setpoint = setpoint
    heat_peak = 0.0
    for _ in range(MAX_PEAK_ROUNDS):
        setpoint, got = _lowest_code(first_setpoint, full - 1, lambda c: solve(c, heat_peak),
                                     lambda g: bool(np.any(np.isfinite(g[5])
                                                           & (g[10].mean < drive.hold.current))))
        (temps, where, hot, env, lp, d_weak, d_strong, run_low, run_high, heat_power, ss_low,
         pts) = got
        at = dict(coil_temp=env.coil_temp, factors=env.factors())
        first = evaluate(drive, env.supply, env.ambient, env.r_factor, env.l_factor, run_low, f, 0.0, **at)
        # each hold starts from the most duty the loop settles at anywhere: the current comes
        # down onto the set-point from above after the peak, never from below
        preload = min(max_compare, max(min_compare, math.ceil(float(np.max(run_high)) * period - 1e-9)))
        saturated = np.isnan(d_weak) | np.isnan(d_strong) | (d_weak <= floor + 1e-12) & (floor > 0)
        loop_result = _loop(drive, env, lp, first, run_low, f, period, setpoint, lsb, min_compare,
                            max_compare, saturated, switch_leg, preload)
        if drive.supply.boosted and first.armature is not None:
            # an armature still in flight when the boosted peak ends: the loop's own duties
            # (its integer PI from the preload, the chain reading high; with an eddy term
            # on the terminal current its conversions read) carry it on
            from .boost_armature import loop_pull_in
            first = loop_pull_in(drive, first, loop_result, period,
                                 reading_range(env.sense_factor, gt)[1], switch_leg)
        pk = plan_peak(drive, env, first)
        # the longest real peak: the ticks and the driver's switch lead
        longer = 0.0 if pk.ticks is None else pk.ticks / board.tick.rate + switch_lag(drive)[1]
        if not cycling(drive) or longer <= heat_peak:
            break
        heat_peak = longer
    short, long_ = pk.short_time, pk.long_time
    res_low = evaluate(drive, env.supply, env.ambient, env.r_factor, env.l_factor, run_low, f,
                       short, reuse=first, **at)
    # (its hold starts from the preload: the first on-time after the peak at that duty)
    res = evaluate(drive, env.supply, env.ambient, env.r_factor, env.l_factor, run_high, f,
                   long_, first_duty=preload / period, **at)
    res = boosted_points(drive, res)   # a boosted peak's highest end current and turn-off
    loss = _losses(drive, res, f)
    corners = corners_of(env, res_low, loss, high=res, duty=run_high, drive=drive)

    # nominal: nominal parts, the channel reading true, the coil at its own settled heat
    nom_grid = nominal_point(drive)
    mid_a = (setpoint + 0.5) * lsb

    def nom_power(temp):
        lpn = loop(drive, nom_grid.supply, temp, nom_grid.r_factor, nom_grid.l_factor)
        return regulated_duty(drive, lpn, mid_a, f, switch_leg, floor)[2].rms**2 * lpn.r_coil
    nom_temp = settle_temperature(nom_grid.ambient, drive.thermal.resistance, nom_power)
    nom_lp = loop(drive, nom_grid.supply, np.where(np.isfinite(nom_temp), nom_temp, drive.thermal.max_coil_temp),
                  nom_grid.r_factor, nom_grid.l_factor)
    nom_duty = regulated_duty(drive, nom_lp, mid_a, f, switch_leg, floor)[1]
    peak_time = 0.0 if pk.ticks is None else pk.ticks / board.tick.rate
    nom = evaluate(drive, nom_grid.supply, nom_grid.ambient, nom_grid.r_factor, nom_grid.l_factor,
                   nom_duty, f, peak_time, coil_temp=nom_temp)
    nominal = corners_of(nom_grid, nom, _losses(drive, nom, f), duty=nom_duty, drive=drive)[0]
    nominal = dataclasses.replace(nominal, label="nominal: " + nominal.label)

    k_hot = int(np.argmax(np.where(np.isfinite(hot), hot, np.inf)))
    k_heat = int(where[k_hot])
    spread = hold_spread(env, res_low)
    k_max = worst(res.hold.mean)
    heat_p = float(heat_power(np.atleast_1d(np.where(np.isfinite(temps), temps,
                                                     drive.thermal.max_coil_temp)))[k_heat])
    spread.update(max_mean_current_a=float(res.hold.mean[k_max]), max_corner=env.label(k_max),
                  ripple_a=float(max(np.max(res.hold.ripple), np.max(res_low.hold.ripple))),
                  coil_power_w=heat_p, coil_temp_c=float(hot[k_hot]),
                  hottest_corner=heat.label(k_heat) + (
                      f", the hottest over the on/off cycle {hot[k_hot]:.4g} degC" if cycling(drive)
                      else f", settles at {hot[k_hot]:.4g} degC"),
                  discontinuous_corners=int(np.sum(res_low.hold.dcm | res.hold.dcm)),
                  coil_power_corner=heat.label(k_heat))
    hold = HoldResult(
        mode=drive.hold.mode, current_a=drive.hold.current, frequency_hz=f,
        duty=float(np.max(run_high)), compare_ticks=preload,
        current_step_a=loop_result.smallest_step_a, **spread, **loss_figures(drive, env, loss),
        split_decay_saving=None, regulation="closed_loop", closed_loop=loop_result)
    thresholds = adc_thresholds(drive, res, res_low, hold.min_mean_current_a, env)
    peak_end = np.asarray(res.peak_end_current, float)
    offs = boosted_turn_offs(drive, env, res, turn_offs(drive, env, res, peak_end, thresholds.trip_current_a))
    release = release_result(drive, env, res, offs)
    topo = topology_result(drive, env, res, peak_end, thresholds.trip_current_a)
    release = pumped_release(release, topo)
    # a full bridge on the drooping bus: every turn-off's fast decay into it, from the
    # regulated hold's own top (the envelope has the cold coil and the hot)
    release, bridge_bus = bridge_release(drive, env, res, release, long_, peak_end, thresholds.trip_current_a)
    pull_in = pull_in_result(drive, env, res, pk, shortest_peak_current(drive, res_low, short))
    timer_result = TimerResult(clock_hz=board.timer.clock, bits=board.timer.bits,
                               prescaler=timer.prescaler, period_ticks=period, compare_ticks=preload,
                               frequency_hz=f, target_hz=drive.hold.frequency,
                               frequency_error=timer.error)
    checks = base_checks(drive, env, res_low, pull_in, hold, release, timer_result, thresholds, timer,
                         plan_reachable=not bool(np.any(np.isnan(d_weak))), high=res)
    checks += loop_checks(drive, loop_result, thresholds, period)
    split = _split_result(drive, timer, min_compare if switch_leg else
                          math.floor(float(np.min(run_low)) * period + 1e-9)) if split_decay(drive) else None
    arm, more, notes = closing_checks(drive, env, res_low, hold, loss, release, split)
    checks += more
    notes += topology_cautions(drive, topo)
    checks += bridge_checks(drive, topo)
    thermal = cycle_result(drive, pts, heat_peak, release.turn_offs, hold.freewheel_power_w,
                           hold.freewheel_elements_w)
    checks += thermal_checks(drive, pull_in.peak_time_s, thermal)
    if thermal is not None and thermal.cycle is not None:
        notes[2] = cycle_caution(thermal)   # the envelope's hot coil is the cycle's
    notes += thermal_cautions(thermal)
    sup = drooping_bus(drive, env, res, long_, run_high, thresholds, bridge_bus, preload / period)
    checks += supply_checks(sup) + bridge_bus_checks(drive, sup)
    boost, boost_rows, boost_notes = boost_outputs(drive, env, res_low, board.tick.rate)
    checks += boost_rows
    notes += boost_notes
    points = plot_points(drive, pk, env, nom, res_low, f)
    return Design(drive=drive, pull_in=pull_in, hold=hold, release=release, timer=timer_result,
                  adc=thresholds, duty_table=DutyTable([], [], []), corners=corners, nominal=nominal,
                  checks=checks, cautions=notes, monte_carlo=None, input_hash=drive.input_hash(),
                  worst_corner_index=pk.k_pull, armature=arm, split_decay=split,
                  actuation_points=points, peak_table=None, topology=topo, thermal_cycle=thermal, supply=sup,
                  boost=boost,
                  rise_check=rise_check(drive, env, res, f), seat_check=seat_check(drive, env, res_low),
                  eddy=eddy_result(drive, env, res, long_, peak_end))


def _loop(drive, env, lp, res_low, duty, f, period, setpoint, lsb, min_compare, max_compare,
          saturated, switch_leg, preload) -> ClosedLoopResult:
    """Gains, fixed point, margins and settling over the corners (the weakest hold's
    operating points: the loop's small-signal plant there)."""
    cpa = 1.0 / lsb
    p = loop_gains.plant(lp, duty, res_low.hold.mean, f, period, cpa, switch_leg)
    speed = p.sensed * p.vg / p.inductance
    k_fast = int(np.argmax(speed))
    bandwidth = loop_gains.BANDWIDTH_FRACTION * f
    kp, ki = loop_gains.design_gains(p, k_fast, bandwidth)
    fx = loop_gains.fixed_point(kp, ki, max_compare, drive.board.adc.bits)
    kq, iq = fx.kp_q / 2**fx.shift, fx.ki_q / 2**fx.shift
    m = loop_gains.margins(kq, iq, p)
    t_settle, _ = loop_gains.settling_time(kq, iq, p)
    k_pm = worst(m.phase_margin_deg, largest=False)
    k_gm = worst(m.gain_margin_db, largest=False)
    k_cmin = worst(m.crossover_hz, largest=False)
    k_cmax = worst(m.crossover_hz)
    k_set = worst(t_settle)
    # one compare count of current at each corner: the change of the mean per count
    up = pwm_steady_state(np.minimum(duty + 1.0 / period, 1.0), f, lp.v_on, lp.r_on, lp.r_off,
                          lp.v_off, lp.inductance, mixed=lp.mixed).mean
    step = float(np.max(up - res_low.hold.mean))
    k_dmin, k_dmax = worst(duty, largest=False), worst(duty)
    plants = []
    for role, k in (("designed", k_fast), ("lowest crossover", k_cmin), ("lowest phase margin", k_pm),
                    ("slowest settling", k_set)):
        plants.append({"role": role, "corner": env.label(k), "vg_v": float(p.vg[k]),
                       "r_eff_ohm": float(p.r_eff[k]), "inductance_h": float(p.inductance[k]),
                       "sensed_fraction": float(p.sensed[k]),
                       "crossover_hz": float(m.crossover_hz[k]),
                       "phase_margin_deg": float(m.phase_margin_deg[k]),
                       "gain_margin_db": float(m.gain_margin_db[k]),
                       "settling_time_s": float(t_settle[k])})
    return ClosedLoopResult(
        sample_point="middle of the on-time" if switch_leg else "middle of the period",
        setpoint_code=setpoint, setpoint_a=setpoint * lsb, bandwidth_hz=bandwidth,
        design_corner=env.label(k_fast), kp=kp, ki=ki, gain_shift=fx.shift, kp_q=fx.kp_q,
        ki_q=fx.ki_q, kp_rounding=fx.kp_rounding, ki_rounding=fx.ki_rounding,
        min_compare=min_compare, max_compare=max_compare, max_duty_limit=MAX_DUTY,
        integrator_min=min_compare * 2**fx.shift, integrator_max=fx.integrator_max,
        preload_compare=preload,
        crossover_hz=float(m.crossover_hz[k_fast]),
        crossover_min_hz=float(m.crossover_hz[k_cmin]), crossover_min_corner=env.label(k_cmin),
        crossover_max_hz=float(m.crossover_hz[k_cmax]), crossover_max_corner=env.label(k_cmax),
        phase_margin_deg=float(m.phase_margin_deg[k_pm]), phase_margin_corner=env.label(k_pm),
        gain_margin_db=float(m.gain_margin_db[k_gm]), gain_margin_corner=env.label(k_gm),
        settling_time_s=float(t_settle[k_set]), settling_corner=env.label(k_set),
        current_lsb_a=lsb, duty_step_current_a=step, smallest_step_a=max(lsb, step),
        min_duty=float(duty[k_dmin]), min_duty_corner=env.label(k_dmin),
        max_duty=float(duty[k_dmax]), max_duty_corner=env.label(k_dmax),
        saturated_corners=int(np.sum(saturated)), corners=len(env), plants=plants)


def loop_checks(drive: Drive, r: ClosedLoopResult, adc, period: int) -> list[Check]:
    """The closed loop's own checks: the duty it settles at stays within its limits at
    every corner, the margins, the fixed-point gains and the set-point's code."""
    out = []
    sat_ok = r.saturated_corners == 0
    hint = ""
    if not sat_ok:
        hint = (f" — the loop saturates at {r.saturated_corners} of {r.corners} corners: it needs "
                f"more than {r.max_duty_limit:.0%} duty there (low supply, hot coil); raise the "
                "minimum supply or lower the hold current")
        if r.min_compare > 0 and r.min_duty <= r.min_compare / period + 1e-12:
            hint = (f" — at {r.min_duty_corner} the loop would need less than the least on-time "
                    f"({MIN_ON_TIME_S * 1e6:.3g} us) the switch-leg sample needs")
    out.append(Check("loop_duty", sat_ok,
                     f"the loop settles at duty {r.min_duty:.4f} ({r.min_duty_corner}) .. "
                     f"{r.max_duty:.4f} ({r.max_duty_corner}) within {r.min_compare}..{r.max_compare} "
                     f"counts ({r.max_duty_limit:.0%} at most: headroom for the loop to act)" + hint))
    pm_ok = r.phase_margin_deg >= loop_gains.MIN_PHASE_MARGIN_DEG
    out.append(Check("loop_phase_margin", pm_ok,
                     f"phase margin {r.phase_margin_deg:.1f} deg ({r.phase_margin_corner}) vs "
                     f"{loop_gains.MIN_PHASE_MARGIN_DEG:g} deg (common practice); crossover "
                     f"{r.crossover_min_hz:.4g}..{r.crossover_max_hz:.4g} Hz over the corners"))
    gm_ok = r.gain_margin_db >= loop_gains.MIN_GAIN_MARGIN_DB
    out.append(Check("loop_gain_margin", gm_ok,
                     f"gain margin {r.gain_margin_db:.1f} dB ({r.gain_margin_corner}) vs "
                     f"{loop_gains.MIN_GAIN_MARGIN_DB:g} dB (common practice)"))
    q_ok = r.ki_q >= 1 and r.kp_q >= 1 and r.ki_rounding <= 0.01 and r.kp_rounding <= 0.01
    out.append(Check("loop_fixed_point", q_ok,
                     f"Kp {r.kp:.5g} -> {r.kp_q}/2^{r.gain_shift} ({r.kp_rounding:.2%} rounding), "
                     f"Ki {r.ki:.5g} -> {r.ki_q}/2^{r.gain_shift} ({r.ki_rounding:.2%}); every "
                     "intermediate fits 32 bits" + ("" if q_ok else
                                                    " — a gain rounds by more than 1 %: the ADC or "
                                                    "the timer is too coarse for this loop")))
    if drive.coil.eddy_resistance and r.sample_point == "middle of the period":
        # the sensed current steps at each edge: a duty of 1/2 puts the edge on the sample;
        # a mixed-decay hold's fast part ends on it at d + phi (1 - d) = 1/2
        phi = drive.hold.fast_fraction
        edges = [0.5] + ([(0.5 - phi) / (1.0 - phi)] if 0 < phi < 0.5 else [])
        edge = any(r.min_duty <= e <= r.max_duty for e in edges)
        at = " and ".join(f"{e:.4g}" for e in edges)
        out.append(Check("loop_sample_edge", not edge,
                         f"settled duties {r.min_duty:.4f}..{r.max_duty:.4f} vs {at}, where a "
                         "switching edge (and the eddy term's step of the sensed current) meets "
                         "the mid-period sample" + (" — at some corner the reading jumps by the "
                                                    "step as the duty crosses it: move the duties "
                                                    "off it (hold.current, supply, "
                                                    "hold.fast_fraction) or sense under "
                                                    "the switch" if edge else ""),
                         severity="warning"))
    full = 2**drive.board.adc.bits - 1
    sp_ok = r.setpoint_code < min(adc.over_current_code, full) and r.setpoint_code >= adc.open_load_code
    out.append(Check("loop_setpoint", sp_ok,
                     f"set-point {r.setpoint_code} codes ({r.setpoint_a:.4g} A as read) between open "
                     f"load {adc.open_load_code} and over-current {adc.over_current_code}; one code "
                     f"{r.current_lsb_a * 1e3:.3g} mA, one compare count {r.duty_step_current_a * 1e3:.3g} mA"))
    return out


def actuation(design: Design, supply: float, coil_temp: float, hold_time: float,
              r_factor: float = 1.0, l_factor: float = 1.0, points: int = 8, label: str = "",
              strict: bool = True):
    """One actuation with the loop settled: the hold at the duty the loop reaches at this
    point (the channel reading true, the set-point's middle), a
    :class:`~coildrive.model.waveform.Waveform`. ``strict``: the interface's flag
    (nothing to refuse here beyond what the voltage-mode hold refuses)."""
    from ..model.waveform import actuation as waveform

    drive = design.drive
    f = design.hold.frequency_hz
    duty = settled_duty(design, supply, coil_temp, r_factor, l_factor)
    return waveform(drive, supply, coil_temp, peak_in_force(design, supply, coil_temp, r_factor, l_factor),
                    duty, f, hold_time, r_factor, l_factor, points, label=label)
