"""The voltage-mode hold the firmware runs (``[hold] regulation``), solved over the envelope.

``"fixed"``: one compare value at every supply. ``"supply_table"``: the compare looked up
against the measured supply (the duty table), and optionally the peak likewise (the peak
table, ``[pull_in] compensate``).

The coil's hottest temperature depends on the hold, and the hold needed depends on the
hottest coil, so both are solved together: start from a coil at the highest ambient, find
the duty (or table) that holds at every envelope corner, let every tolerance corner of
the coil settle under that hold at every supply and ambient (the table's entry as the
firmware reads the supply: low, so the most duty), take each coil's hottest, and repeat.
Each step can only raise the duty and the temperature, so the iteration climbs to the
smallest self-consistent hold (a runaway coil stops it: its temperature is ``inf``).

Table entries: entry ``i`` holds at ``lowest_supply_for_code(code_i)``, the lowest bus
voltage that can read its code (the ADC truncates, and the divider may read high by its
tolerance), so whatever the reading error, the entry the firmware takes holds at the
true supply. Units: SI, degC.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..model.circuit import loop
from ..model.pwm import duty_for_mean, coil_heat, pwm_steady_state
from .envelope import (Envelope, HeatingGrid, Tolerances, bracket_tops, envelope, heating_grid,
                       hottest, lowest_supply_for_code, supply_codes, table_index, tolerances)
from .evaluate import hold_temperature
from .figures import adc_code
from .result import DutyTable
from .thermal_cycle import cycle_states, cycling
from .timer import TimerSetting

#: Entries in the supply-compensated duty table (and the peak table).
TABLE_ENTRIES = 16
#: Counts above an entry that :func:`_monotone` tries in one batch before bisecting (0:
#: the serial search, one entry and one count at a time, kept for the benchmark).
LOOK_AHEAD = 16
#: Rounds of the duty <-> hottest-coil iteration before it is taken as settled.
MAX_ROUNDS = 60
#: The hottest coil is settled when no tolerance corner moved more than this (K).
TEMP_TOL = 1e-4


@dataclass(frozen=True)
class HoldPlan:
    """The solved hold: the compare (counts) the firmware may use at each envelope corner --
    ``compare_low`` the least (the supply read high: the weakest hold), ``compare_high``
    the most (read low: the most current and heat) -- and the hottest coil of each
    tolerance corner with the heating point it settles at."""

    regulation: str
    tol: Tolerances
    heat: HeatingGrid
    env: Envelope
    hot_temp: np.ndarray
    hot_point: np.ndarray
    heat_temps: np.ndarray
    heat_compare: np.ndarray
    compare_low: np.ndarray
    compare_high: np.ndarray
    fixed_compare: int
    table: DutyTable | None
    reachable: bool


def _factors(t: Tolerances) -> dict:
    return {"diode_factor": t.diode_factor, "fast_factor": t.fast_factor, "sense_factor": t.sense_factor}


def _finite(drive: Drive, temps) -> np.ndarray:
    return np.where(np.isfinite(temps), temps, drive.thermal.max_coil_temp)


def _heat(drive: Drive, heat: HeatingGrid, duty, frequency: float, count: int,
          peak_time: float = 0.0):
    """Settled coil temperatures at the heating points under the hold ``duty``: after a
    continuous hold, or with an on/off cycle and a heat capacity the hottest over the
    cycle (:mod:`coildrive.design.thermal_cycle`, with a peak of ``peak_time`` s)."""
    if cycling(drive):
        temps = cycle_states(drive, heat.supply, heat.ambient, heat.tol.r_factor, heat.tol.l_factor,
                             duty, frequency, _factors(heat.tol), peak_time).hottest
    else:
        temps = hold_temperature(drive, heat.supply, heat.ambient, heat.tol.r_factor,
                                 heat.tol.l_factor, duty, frequency, _factors(heat.tol))
    hot, where = hottest(heat, temps, count)
    return temps, hot, where


def table_supplies(drive: Drive) -> tuple[np.ndarray, list[int], np.ndarray]:
    """``(nominal entry voltages, their supply-sense codes, the voltages each entry is
    designed at)``: :data:`TABLE_ENTRIES` steps from the lowest to the highest supply."""
    b = drive.board
    if drive.supply.max > drive.supply.min:
        volts = np.linspace(drive.supply.min, drive.supply.max, TABLE_ENTRIES)
    else:
        volts = np.array([drive.supply.min])
    codes = [adc_code(v / b.supply_sense.divider, b.adc.reference, b.adc.bits) for v in volts]
    design_v = np.minimum(lowest_supply_for_code(drive, codes), volts)
    design_v[0] = min(design_v[0], drive.supply.min)
    return volts, codes, design_v


def solve_hold(drive: Drive, timer: TimerSetting, peak_time: float = 0.0) -> HoldPlan:
    """The hold of ``drive`` under its declared regulation (see the module docstring);
    ``peak_time`` (s): the peak each actuation of an on/off cycle heats the coil with."""
    f = timer.frequency_hz
    period = timer.period_ticks
    target = drive.hold.current
    tol = tolerances(drive)
    extra = ()
    if drive.hold.regulation == "supply_table":
        extra = bracket_tops(drive, table_supplies(drive)[1])
    heat = heating_grid(drive, tol, extra)
    n = len(tol)
    hot = np.full(n, float(drive.ambient.max))
    table = None
    reachable = True
    if drive.hold.regulation == "supply_table":
        volts, codes, design_v = table_supplies(drive)
        compares = None
        for _ in range(MAX_ROUNDS):
            lp = loop(drive, design_v[:, None] + 0.0 * hot[None, :], _finite(drive, hot)[None, :],
                      tol.r_factor[None, :], tol.l_factor[None, :],
                      **{k: v[None, :] for k, v in _factors(tol).items()})
            need = duty_for_mean(target, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                                 mixed=lp.mixed)
            reachable = not bool(np.any(np.isnan(need)))
            worst = np.where(np.any(np.isnan(need), axis=1), 1.0,
                             np.nanmax(np.nan_to_num(need, nan=1.0), axis=1))
            new = np.array([min(period, math.ceil(d * period - 1e-9)) for d in worst], int)
            new = _monotone(drive, tol, hot, design_v, new, period, f)
            low, _ = supply_codes(drive, heat.supply)
            heat_compare = new[table_index(codes, low)]
            temps, new_hot, where = _heat(drive, heat, heat_compare / period, f, n, peak_time)
            settled = compares is not None and np.array_equal(new, compares) and \
                np.all(np.abs(_finite(drive, new_hot) - _finite(drive, hot)) < TEMP_TOL)
            compares, hot = new, np.maximum(new_hot, drive.ambient.max)
            if settled or not reachable:
                break
        table = DutyTable([float(v) for v in volts], [int(c) for c in codes],
                          [int(c) for c in compares], [float(v) for v in design_v])
        env = envelope(drive, tol, hot, extra)
        low, high = supply_codes(drive, env.supply)
        compare_high = compares[table_index(codes, low)]
        compare_low = compares[table_index(codes, high)]
        fixed = int(np.max(compares))
    else:
        duty = 0.0
        for _ in range(MAX_ROUNDS):
            env = envelope(drive, tol, hot)
            lp = loop(drive, env.supply, _finite(drive, env.coil_temp), env.r_factor, env.l_factor,
                      **env.factors())
            need = duty_for_mean(target, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                                 mixed=lp.mixed)
            if np.any(np.isnan(need)):
                reachable, duty = False, 1.0
                temps, hot, where = _heat(drive, heat, duty, f, n, peak_time)
                hot = np.maximum(hot, drive.ambient.max)
                break
            new = float(np.max(need))
            temps, new_hot, where = _heat(drive, heat, new, f, n, peak_time)
            settled = abs(new - duty) < 1e-12 and \
                np.all(np.abs(_finite(drive, new_hot) - _finite(drive, hot)) < TEMP_TOL)
            duty, hot = new, np.maximum(new_hot, drive.ambient.max)
            if settled:
                break
        fixed = min(period, max(1, math.ceil(duty * period - 1e-9)))
        # whole counts: raise until every corner holds with the heat that compare causes
        while reachable and fixed < period:
            temps, hot2, where2 = _heat(drive, heat, fixed / period, f, n, peak_time)
            env2 = envelope(drive, tol, np.maximum(hot2, drive.ambient.max))
            lp = loop(drive, env2.supply, _finite(drive, env2.coil_temp), env2.r_factor,
                      env2.l_factor, **env2.factors())
            mean = pwm_steady_state(fixed / period, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                                    lp.inductance, mixed=lp.mixed).mean
            hot, where = np.maximum(hot2, drive.ambient.max), where2
            if np.min(mean) >= target:
                break
            fixed += 1
        temps, hot_s, where = _heat(drive, heat, fixed / period, f, n, peak_time)
        hot = np.maximum(hot_s, drive.ambient.max)
        env = envelope(drive, tol, hot)
        compare_low = compare_high = np.full(len(env), fixed, int)
        heat_compare = np.full(len(heat.supply), fixed, int)
    return HoldPlan(drive.hold.regulation, tol, heat, env, hot, where, temps, heat_compare,
                    np.asarray(compare_low, int), np.asarray(compare_high, int), int(fixed),
                    table, reachable)


def _monotone(drive: Drive, tol: Tolerances, hot: np.ndarray, design_v: np.ndarray,
              compares: np.ndarray, period: int, frequency: float) -> np.ndarray:
    """Raise table entries (a count at a time) until a higher supply never lowers the hold
    current: at the bottom of each entry's range, every coil of the envelope (each
    tolerance corner, cold at the lowest ambient and at its hottest) carries at least what
    it carries at the bottom of the entry below. Without this the whole-count rounding of
    each entry alone lets the current dip by up to a count at a step."""
    out = compares.copy()
    # each entry's lowest supply in the envelope: the first entry is designed at or below
    # supply.min (its code's bottom may lie lower), but the firmware serves it from there
    bottom = np.maximum(design_v, drive.supply.min)
    temps = np.concatenate([np.full(len(tol), float(drive.ambient.min)), _finite(drive, hot)])
    k = np.concatenate([np.arange(len(tol)), np.arange(len(tol))])
    t = tol.take(k)

    def means(entries, counts) -> np.ndarray:
        """Mean hold currents ``(len(counts), coils)`` A: entry ``entries[j]``'s lowest
        supply at compare ``counts[j]``, every coil, in one vectorised steady state."""
        m, n = len(counts), temps.size
        tt = t.take(np.tile(np.arange(n), m))
        lp = loop(drive, np.repeat(bottom[np.asarray(entries)], n), np.tile(temps, m),
                  tt.r_factor, tt.l_factor, **_factors(tt))
        return pwm_steady_state(np.repeat(np.asarray(counts) / period, n), frequency, lp.v_on,
                                lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                                mixed=lp.mixed).mean.reshape(m, n)

    def short(here: np.ndarray, below: np.ndarray) -> np.ndarray:
        """Per row of ``here``: does some coil carry less than it does at ``below``?"""
        return np.any(here < below * (1.0 - 1e-12), axis=-1)

    if LOOK_AHEAD:   # every entry at its own count, one batch
        start = means(np.arange(len(out)), out)
    else:            # the serial search (benchmarks/bench_tune.py's side-by-side)
        start = np.array([means([i], [out[i]])[0] for i in range(len(out))])
    below = start[0]
    for i in range(1, len(out)):
        here = start[i]
        if short(here, below):
            # the smallest count that keeps every coil's current (the mean rises with the
            # duty): the rounding dip it makes up is a few counts, so the next LOOK_AHEAD
            # counts are tried in one batch (one vectorised steady state instead of a
            # dozen serial ones); past them, a bisection, at most log2(period) steps
            lo, hi, here = int(out[i]), int(period), None
            ahead = np.arange(lo + 1, min(lo + LOOK_AHEAD, hi - 1) + 1)
            if ahead.size:
                got = means(np.full(ahead.size, i), ahead)
                fine = ~short(got, below)
                if np.any(fine):
                    j = int(np.argmax(fine))
                    lo, hi, here = int(ahead[j]) - 1, int(ahead[j]), got[j]
                else:
                    lo = int(ahead[-1])
            while hi - lo > 1:
                mid = (lo + hi) // 2
                if short(means([i], [mid])[0], below):
                    lo = mid
                else:
                    hi = mid
            if here is None:
                here = means([i], [hi])[0]
            out[i] = hi
        below = here
    return out


def table_lookup(table, supply_code) -> int:
    """The entry's value the firmware takes for one supply-sense reading."""
    return int(table_index(table.adc_codes, supply_code))


def coil_power_at(drive: Drive, plan: HoldPlan, k: int, frequency: float, period: int) -> float:
    """Coil power (W) at heating point ``k`` at its settled temperature, under the hold the
    firmware runs there: the power that made that temperature."""
    heat = plan.heat
    t = plan.heat_temps[k]
    temp = t if math.isfinite(t) else drive.thermal.max_coil_temp
    tk = heat.tol.take([k])
    lp = loop(drive, heat.supply[k:k + 1], temp, tk.r_factor, tk.l_factor, **_factors(tk))
    ss = pwm_steady_state(plan.heat_compare[k] / period, frequency, lp.v_on, lp.r_on, lp.r_off,
                          lp.v_off, lp.inductance, mixed=lp.mixed)
    return float(coil_heat(ss, lp.r_coil)[0])
