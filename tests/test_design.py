"""Design-level checks: the decisions of :func:`coildrive.design.design` re-derived by hand.

Each test recomputes one decision from its definition with independent pieces (the
element-level circuit of :mod:`circuit_reference`, the RL step, the IEC 60028 copper
law) rather than reading it back from the design:

* each supply-table entry is the smallest whole compare count that holds at every
  coil tolerance corner at its hottest, at the lowest supply that reads its code;
* the peak phase covers the worst-corner pull-in time x margin in scheduler ticks;
* the timer makes the hold frequency within its tolerance, with the longest period;
* the hottest coil is the fixed point ``T = T_amb + R_th P(T)`` over every supply and
  ambient (scipy's brentq);
* the peak switch voltage is the clamp voltage, or ``V_bus + V_d (+ V_z) + I R_fw``, at
  every turn-off;
* an unreachable pull-in current fails ``pull_in_reachable``;
* Monte Carlo samples stay within the corner extremes.

Sources: RL step ``t = tau ln(1 / (1 - I R / V))`` (Hayt, Kemmerly & Durbin, "Engineering
Circuit Analysis", basic RL circuits, from memory); IEC 60028 for copper; KVL around the
freewheel path for the switch voltage. Phase rounding (whole ticks plus one, because a
tick-based phase may start anywhere inside a tick) is common practice.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from circuit_reference import (CASE_IDS, CASES, Parts, iec60028_resistance, parts,
                               reference_drive, write_board, write_drive)
from coildrive.config import load_board, load_drive
from coildrive.design.corners import corner_grid
from coildrive.design import design
from coildrive.design.evaluate import evaluate
from coildrive.model.pwm import pwm_steady_state
from coildrive.resources import bundled_boards, example


def _corner_parts(drive, grid, k, coil_temp) -> Parts:
    return parts(drive, grid.supply[k], coil_temp, grid.r_factor[k], grid.l_factor[k])


@pytest.fixture(params=CASES, ids=CASE_IDS)
def drive(request, tmp_path):
    freewheel, position = request.param
    return reference_drive(tmp_path, freewheel, position)


# --------------------------------------------------------------------------- hold duty
def _hot_temps(d) -> dict:
    """The hottest coil temperature of each coil tolerance corner, from the envelope's
    "(hot)" corners' labels: {(r_factor, l_factor): degC}."""
    import re
    out = {}
    for c in d.corners:
        m = re.search(r"coil ([-0-9.e+]+) degC \(hot\), R(nom|[-+][0-9.]+%), L(nom|[-+][0-9.]+%)", c.label)
        if m:
            def f(tag):
                return 1.0 if tag == "nom" else 1.0 + float(tag[:-1]) / 100.0
            out[(round(f(m.group(2)), 9), round(f(m.group(3)), 9))] = c.coil_temp_c
    return out


def _mean(drive, d, supply, temp, rf, lf, compare) -> float:
    p = parts(drive, supply, temp, rf, lf)
    v_on, r_on = p.on()
    v_off, r_off = p.off()
    return float(pwm_steady_state(compare / d.timer.period_ticks, d.hold.frequency_hz, v_on, r_on,
                                  r_off, -v_off, p.inductance).mean)


def test_table_entries_are_the_smallest_compare_counts(drive):
    """Each supply-table entry is the smallest whole compare count that holds the current
    at the lowest bus voltage that can read its code, with every coil tolerance corner at
    its hottest (the element-level circuit, not the design's envelope code)."""
    d = design(drive)
    assert d.hold.regulation == "supply_table", "precondition: the board measures its supply"
    hot = _hot_temps(d)
    assert len(hot) == 4, hot
    target = drive.hold.current
    # every coil of the envelope: each tolerance corner cold (lowest ambient) and hottest
    coils = [(t, rf, lf) for (rf, lf), t in hot.items()] + \
            [(drive.ambient.min, rf, lf) for (rf, lf) in hot]
    below = None
    entries = list(zip(d.duty_table.design_supply_v, d.duty_table.compare_ticks))
    for v, cmp in entries:
        held = min(_mean(drive, d, v, t, rf, lf, cmp) for (rf, lf), t in hot.items())
        short = min(_mean(drive, d, v, t, rf, lf, cmp - 1) for (rf, lf), t in hot.items())
        assert held >= target, f"entry at {v:.4f} V: compare {cmp} holds only {held:.6e} A"
        here = [_mean(drive, d, v, t, rf, lf, cmp) for t, rf, lf in coils]
        if short >= target:
            # one count less would hold: then it must be what keeps a higher supply from
            # lowering the current of some coil (the current at the bottom of the entry below)
            less = [_mean(drive, d, v, t, rf, lf, cmp - 1) for t, rf, lf in coils]
            assert below is not None and any(a < b for a, b in zip(less, below)), (
                f"entry at {v:.4f} V: compare {cmp - 1} still holds {short:.6e} A")
        if below is not None:
            assert all(a >= b * (1 - 1e-12) for a, b in zip(here, below)), \
                f"entry at {v:.4f} V lowers the current of a coil"
        below = here
    # the lowest bus voltage that reads each entry's code (a truncating ADC, exact divider)
    lsb = drive.board.adc.reference / 2**drive.board.adc.bits * drive.board.supply_sense.divider
    for code, v in zip(d.duty_table.adc_codes, d.duty_table.design_supply_v):
        assert v <= code * lsb + 1e-12, (code, v)
    assert d.hold.duty == max(d.duty_table.compare_ticks) / d.timer.period_ticks, \
        "the fixed fallback compare is the table's largest (first) entry, safe at every supply"


# --------------------------------------------------------------------------- peak phase
def test_peak_ticks_cover_worst_pull_in(drive):
    d = design(drive)
    sw, sense = drive.switch.on_resistance, drive.board.sense.resistance
    i_pull = drive.pull_in.current
    # RL step (Hayt & Kemmerly): time to I is tau ln(1 / (1 - I R / V)), at each corner's
    # settled coil resistance and inductance.
    times = []
    for c in d.corners:
        r_on = c.resistance_ohm + sw + sense
        times.append(c.inductance_h / r_on * math.log(1.0 / (1.0 - i_pull * r_on / c.supply_v)))
    worst = max(times)
    assert d.pull_in.time_s == pytest.approx(worst, rel=1e-9), (
        f"worst pull-in {d.pull_in.time_s:.9e} s vs RL step {worst:.9e} s")
    need = worst * drive.pull_in.margin * drive.board.tick.rate
    ticks = d.pull_in.peak_ticks
    assert ticks >= need, f"{ticks} peak ticks < {need:.3f} needed (pull-in x margin x tick rate)"
    # common practice: rounded up to whole ticks plus one tick, no more.
    assert ticks <= math.ceil(need) + 1, f"{ticks} peak ticks, more than ceil({need:.3f}) + 1"
    assert d.pull_in.peak_time_s == pytest.approx(ticks / drive.board.tick.rate, rel=1e-12), (
        "peak time is not the peak ticks at the tick rate")
    assert min(c.peak_end_current_a for c in d.corners) >= i_pull, (
        "the peak phase must reach the pull-in current at every corner")


# --------------------------------------------------------------------------- timer
def test_timer_frequency_within_tolerance_and_finest(drive):
    d = design(drive)
    t = drive.board.timer
    f = t.clock / (d.timer.prescaler * d.timer.period_ticks)
    assert d.timer.frequency_hz == pytest.approx(f, rel=1e-12), (
        f"reported {d.timer.frequency_hz} Hz, the registers make {f} Hz")
    target, tol = drive.hold.frequency, drive.hold.frequency_tolerance
    assert abs(f - target) / target <= tol, f"{f} Hz is more than {tol:.2%} from {target} Hz"
    assert d.timer.period_ticks <= 2**t.bits, f"period {d.timer.period_ticks} > 2^{t.bits}"
    # Exhaustive over every prescaler: none gives a longer period within the tolerance.
    pre = np.arange(1, t.prescaler_max + 1)
    periods = np.clip(np.rint(t.clock / (pre * target)), 2, 2**t.bits)
    ok = np.abs(t.clock / (pre * periods) - target) / target <= tol
    assert d.timer.period_ticks == int(periods[ok].max()), (
        f"period {d.timer.period_ticks}, but {int(periods[ok].max())} counts are possible")


# --------------------------------------------------------------------------- thermal
def test_hottest_coil_is_the_fixed_point_over_every_supply_and_ambient(drive):
    """The hottest coil: every coil tolerance corner settles under the compare the firmware
    looks up at every supply x ambient; T = T_amb + R_th P(T) solved here by Brent's
    method (scipy) with the copper loss of the element-level circuit, and IEC 60028."""
    from scipy.optimize import brentq

    d = design(drive)
    b = drive.board
    lsb = b.adc.reference / 2**b.adc.bits
    c = drive.coil
    best = (-1.0, 0.0)
    # every supply of the file: its ends, and just below each entry's code (the highest
    # supply that still runs the entry below it: between entries the duty is the higher)
    tops = [a * lsb * b.supply_sense.divider * (1 - 1e-9) for a in d.duty_table.adc_codes[1:]]
    for v in {drive.supply.min, drive.supply.nominal, drive.supply.max, *tops}:
        code = math.floor(v / b.supply_sense.divider / lsb)
        k = max(i for i, a in enumerate(d.duty_table.adc_codes) if a <= code) \
            if code >= d.duty_table.adc_codes[0] else 0
        cmp = d.duty_table.compare_ticks[k]
        for ta in {drive.ambient.min, drive.ambient.max}:
            for rf in {1 - c.resistance_tolerance, 1 + c.resistance_tolerance}:
                for lf in {1 - c.inductance_tolerance, 1 + c.inductance_tolerance}:
                    def power(t):
                        p = parts(drive, v, t, rf, lf)
                        v_on, r_on = p.on()
                        v_off, r_off = p.off()
                        ss = pwm_steady_state(cmp / d.timer.period_ticks, d.hold.frequency_hz,
                                              v_on, r_on, r_off, -v_off, p.inductance)
                        return float(ss.rms) ** 2 * p.r_coil  # Joule heating of the copper
                    t = brentq(lambda t: ta + drive.thermal.resistance * power(t) - t, ta, 900.0,
                               xtol=1e-9)
                    if t > best[0]:
                        best = (t, power(t))
    assert best[0] > drive.ambient.max, "precondition: the coil heats itself"
    assert d.hold.coil_temp_c == pytest.approx(best[0], abs=2e-3), (d.hold.coil_temp_c, best)
    assert d.hold.coil_power_w == pytest.approx(best[1], rel=1e-4), "power and temperature of one point"
    hot = max(c.coil_temp_c for c in d.corners)
    assert hot == pytest.approx(d.hold.coil_temp_c, abs=1e-9), "the envelope's hot corners"


# --------------------------------------------------------------------------- switch voltage
def _interrupt_currents(drive, d):
    """Current at the end of the longest real peak per corner, by the RL step (Hayt &
    Kemmerly): the peak's ticks and a PWM period more (a PWM hold's driver switches on and
    off at period starts, docs/firmware.md)."""
    sw, sense = drive.switch.on_resistance, drive.board.sense.resistance
    longest = d.pull_in.peak_time_s + 1.0 / d.timer.frequency_hz
    out = []
    for c in d.corners:
        r_on = c.resistance_ohm + sw + sense
        i_peak = c.supply_v / r_on * (1 - math.exp(-longest * r_on / c.inductance_h))
        # the peak current is the largest the switch ever turns off (the hold ripple's top
        # is at most mean + ripple)
        assert i_peak >= c.hold_mean_current_a + c.hold_ripple_a, "precondition: peak > hold"
        out.append(i_peak)
    return out


@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
def test_peak_switch_voltage(tmp_path, freewheel, position):
    drive = reference_drive(tmp_path, freewheel, position)
    d = design(drive)
    fw = drive.freewheel
    currents = _interrupt_currents(drive, d)
    for c, i in zip(d.corners, currents):
        if freewheel == "clamp":
            expected = fw.clamp_voltage  # the clamp holds the drain at its voltage
        else:  # KVL around the freewheel path: V_bus + V_d (+ V_z) + I R_fw
            expected = c.supply_v + fw.diode_drop + fw.zener_voltage + i * fw.resistance
        assert c.peak_switch_voltage_v == pytest.approx(expected, rel=1e-9), (
            f"{freewheel} at {c.label}: {c.peak_switch_voltage_v:.6f} V, expected {expected:.6f} V")
    top = max(c.peak_switch_voltage_v for c in d.corners)
    for off in d.release.turn_offs:  # every turn-off, by KVL at its current
        i = off["current_a"]  # the event's largest current (at its own corner)
        bound = (fw.clamp_voltage if freewheel == "clamp" else
                 drive.supply.max + fw.diode_drop + fw.zener_voltage + i * fw.resistance)
        assert off["switch_voltage_v"] <= bound * (1 + 1e-12), off
        if off["event"] == "over-current trip" or freewheel != "resistor":
            # one current everywhere (the trip), or no current term: the highest supply
            assert off["switch_voltage_v"] == pytest.approx(bound, rel=1e-9), off
    worst = max(top, *(o["switch_voltage_v"] for o in d.release.turn_offs))
    assert d.release.peak_switch_voltage_v == pytest.approx(worst, rel=1e-12), (
        "release peak switch voltage is not the worst turn-off's")
    if freewheel == "clamp":
        assert d.release.peak_switch_voltage_v == fw.clamp_voltage, (
            f"clamp board: {d.release.peak_switch_voltage_v} V, clamp {fw.clamp_voltage} V")
    if freewheel == "resistor":
        k = int(np.argmax([c.supply_v for c in d.corners]))
        assert top >= d.corners[k].supply_v + fw.diode_drop + fw.resistance * drive.pull_in.current, (
            "resistor freewheel: at least V_bus + V_d + I_pull R_fw at the highest supply")


@pytest.mark.parametrize("board", [n for n, p in bundled_boards().items()
                                   if load_board(p).freewheel.type == "clamp"])
def test_bundled_clamp_board_switch_voltage_is_clamp_voltage(board):
    drive = load_drive(example("demo-valve"), board=board)
    d = design(drive)
    assert drive.freewheel.type == "clamp", "precondition: a clamp board"
    assert d.release.peak_switch_voltage_v == drive.freewheel.clamp_voltage, (
        f"{board}: peak switch voltage {d.release.peak_switch_voltage_v} V, clamp "
        f"{drive.freewheel.clamp_voltage} V")


# --------------------------------------------------------------------------- pull-in
def test_unreachable_pull_in_fails_the_check(tmp_path):
    board = write_board(tmp_path, "diode", "switch")
    weak = load_drive(write_drive(tmp_path, board, resistance="45 ohm", name="weak"))
    # precondition from the RL step: even the final current V/R at the worst corner
    # (lowest supply, hottest coil, R + 7 %) is below the pull-in current.
    r_hot = iec60028_resistance(45.0, 20.0, 50.0) * 1.07 + 0.035 + 0.1
    assert weak.supply.min / r_hot < weak.pull_in.current, "precondition: unreachable"
    d = design(weak)
    check = {c.name: c for c in d.checks}["pull_in_reachable"]
    assert not check.ok, f"pull_in_reachable passed: {check.detail}"
    assert not d.ok, "a design that cannot pull in must not be ok"
    assert d.pull_in.time_s is None and d.pull_in.peak_ticks is None, d.pull_in
    assert check.detail.startswith("not reached: steady current"), check.detail
    assert "inf" not in json.dumps(d.to_dict()) and "NaN" not in json.dumps(d.to_dict())
    strong = load_drive(write_drive(tmp_path, board, resistance="22 ohm", name="strong"))
    ok = {c.name: c for c in design(strong).checks}["pull_in_reachable"]
    assert ok.ok, f"control: a 22 ohm coil reaches 0.55 A from 20 V, but {ok.detail}"


# --------------------------------------------------------------------------- Monte Carlo
FIGURES = ["pull_in_time_s", "hold_mean_current_a", "hold_ripple_a", "coil_temp_c",
           "release_time_s"]


def test_monte_carlo_within_corner_extremes(drive):
    d = design(drive, samples=4000, seed=7)
    mc = d.monte_carlo
    assert mc["samples"] == 4000 and mc["seed"] == 7, "precondition: the samples asked for"
    for name in FIGURES:
        corner = [getattr(c, name) for c in d.corners]
        lo, hi = min(corner), max(corner)
        slack = 1e-9 * max(abs(lo), abs(hi))
        values = mc[name]["values"]
        assert values == sorted(values), f"{name}: percentiles not ascending {values}"
        # Every percentile lies within the corner extremes: corners are the worst cases.
        for level, v in zip(mc["percentiles"], values):
            assert lo - slack <= v <= hi + slack, (
                f"{name}: {level} % percentile {v:.6e} outside corners {lo:.6e}..{hi:.6e}")
        # So does every sample, as each figure is monotonic in each corner variable.
        assert lo - slack <= mc[name]["min"] and mc[name]["max"] <= hi + slack, (
            f"{name}: samples {mc[name]['min']:.6e}..{mc[name]['max']:.6e} outside corners "
            f"{lo:.6e}..{hi:.6e}")
    assert mc["failures"]["pull_in_late"] == 0, "no sample may pull in later than the peak phase"
    assert mc["failures"]["hold_short"] == 0, "no sample may hold below the hold current"
