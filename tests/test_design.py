"""Design-level checks: the decisions of :func:`coildrive.design.design` re-derived by hand.

Each test recomputes one decision from its definition with independent pieces (the
element-level circuit of :mod:`circuit_reference`, the RL step, the IEC 60028 copper
law) rather than reading it back from the design:

* the hold duty is the smallest whole compare count that holds at every corner;
* the peak phase covers the worst-corner pull-in time x margin in scheduler ticks;
* the timer makes the hold frequency within its tolerance, with the longest period;
* the hottest corner's temperature is the fixed point ``T = T_amb + R_th P(T)``;
* the peak switch voltage is the clamp voltage, or ``V_bus + V_d (+ V_z) + I R_fw``;
* an unreachable pull-in current fails ``pull_in_reachable``;
* Monte Carlo samples stay within the corner extremes.

Sources: RL step ``t = tau ln(1 / (1 - I R / V))`` (Hayt, Kemmerly & Durbin, "Engineering
Circuit Analysis", basic RL circuits, from memory); IEC 60028 for copper; KVL around the
freewheel path for the switch voltage. Phase rounding (whole ticks plus one, because a
tick-based phase may start anywhere inside a tick) is common practice.
"""

from __future__ import annotations

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
def test_duty_is_the_smallest_compare_count(drive):
    d = design(drive)
    grid = corner_grid(drive)
    period, compare = d.timer.period_ticks, d.timer.compare_ticks
    assert 0 < compare < period, f"precondition: a duty in range, compare {compare}/{period}"
    f = d.hold.frequency_hz
    held = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                    compare / period, f, 0.0)
    short = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                     (compare - 1) / period, f, 0.0)
    target = drive.hold.current
    k = int(np.argmin(short.hold.mean))
    assert np.min(held.hold.mean) >= target, (
        f"compare {compare}: lowest hold mean {np.min(held.hold.mean):.6e} A below {target} A")
    assert short.hold.mean[k] < target, (
        f"compare {compare - 1} still holds {short.hold.mean[k]:.6e} A >= {target} A at the "
        f"worst corner ({grid.label(k)}): the chosen duty is not the smallest")
    assert d.hold.duty == compare / period, f"duty {d.hold.duty} is not {compare}/{period}"
    assert d.hold.min_mean_current_a == pytest.approx(float(np.min(held.hold.mean)), rel=1e-9), (
        "reported lowest hold mean differs from the corners'")


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
def test_thermal_fixed_point_at_hottest_corner(drive):
    d = design(drive)
    grid = corner_grid(drive)
    k = int(np.argmax([c.coil_temp_c for c in d.corners]))
    c = d.corners[k]
    assert c.coil_temp_c == pytest.approx(d.hold.coil_temp_c, rel=1e-12), (
        "the hold's hottest temperature is not the hottest corner's")
    temp = c.coil_temp_c
    p = _corner_parts(drive, grid, k, temp)
    # IEC 60028 for the copper at the settled temperature.
    assert c.resistance_ohm == pytest.approx(p.r_coil, rel=1e-12), (
        f"coil {c.resistance_ohm} ohm at {temp} degC, IEC 60028 gives {p.r_coil} ohm")
    v_on, r_on = p.on()
    v_off, r_off = p.off()
    ss = pwm_steady_state(d.hold.duty, d.hold.frequency_hz, v_on, r_on, r_off, -v_off,
                          p.inductance)
    power = float(ss.rms) ** 2 * p.r_coil  # copper loss: Joule heating of the coil alone
    expected = c.ambient_c + drive.thermal.resistance * power
    assert temp == pytest.approx(expected, abs=1e-4), (
        f"hottest corner ({c.label}): {temp:.6f} degC, T_amb + R_th P(T) = {expected:.6f} degC")
    assert power > 0 and temp > c.ambient_c, "precondition: the coil heats itself"


# --------------------------------------------------------------------------- switch voltage
def _interrupt_currents(drive, d):
    """Current at the end of the peak phase per corner, by the RL step (Hayt & Kemmerly)."""
    sw, sense = drive.switch.on_resistance, drive.board.sense.resistance
    out = []
    for c in d.corners:
        r_on = c.resistance_ohm + sw + sense
        i_peak = c.supply_v / r_on * (1 - math.exp(-d.pull_in.peak_time_s * r_on / c.inductance_h))
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
    assert d.release.peak_switch_voltage_v == pytest.approx(top, rel=1e-12), (
        "release peak switch voltage is not the highest corner's")
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
    assert math.isinf(d.pull_in.time_s), f"pull-in time {d.pull_in.time_s}, expected inf"
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
