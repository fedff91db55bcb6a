"""The offline hold sweep (coildrive.tune) against the closed-form model, point by point.

* every realisable frequency, each with its longest period: against a brute-force
  enumeration of every prescaler x period of the timer (the timer arithmetic
  ``f = clock / (prescaler x period)``);
* sweep figures against :func:`coildrive.design.evaluate.evaluate` and
  :func:`coildrive.model.pwm.pwm_steady_state` at every corner: they agree within the
  self-heating tolerance of model/thermal.py (1e-4 K, which moves a current by about
  ``alpha x 1e-4`` = 4e-7 relative, IEC 60028 copper);
* each compare value is the smallest that holds its level (one count less fails);
* the recommendation is the least-power feasible setting of an independent brute force
  that designs every frequency with :func:`coildrive.design.design`;
* switching loss against the linearised hard-switching estimate
  ``P = f (V I_on t_r + V I_off t_f) / 2`` (Mohan, Undeland & Robbins, "Power
  Electronics: Converters, Applications and Design", ch. 2, switching power loss);
* constraint handling: a ripple limit, duty-step count or coil limit nobody meets gives
  no recommendation and names that constraint;
* the safeguarded secant duty inversion against the 44-step bisection it replaced.
"""

from __future__ import annotations

import dataclasses
import itertools
import re
from types import SimpleNamespace

import numpy as np
import pytest

from coildrive.design.thermal_cycle import cycling
from coildrive.config import Timer, load_drive
from coildrive.design.corners import corner_grid
from coildrive.design import design
from coildrive.errors import InputError
from coildrive.design.evaluate import evaluate
from coildrive.model.pwm import duty_for_mean, duty_for_mean_bisect, pwm_steady_state
from coildrive.model.circuit import loop
from coildrive.tune.sweep import (TuneOptions, minimum_hold_current, rank_settings,
                                  realisable_frequencies, recommended_design, recommended_hold, tune)
from circuit_reference import iec60028_resistance
from conftest import BOARDS, EXAMPLES, loads

#: Relative agreement with evaluate(): its self-heating stops within 1e-4 K (thermal.py);
#: with alpha = 0.00393 /K (IEC 60028) that moves a current by < 1e-6 relative.
RTOL = 2e-6


def _demo(**hold):
    d = load_drive(EXAMPLES / "reagent-valve-zener-24v.toml")
    return dataclasses.replace(d, hold=dataclasses.replace(d.hold, **hold)) if hold else d


def _board_with(tmp_path, name: str, extra: str, section: str = "[switch]"):
    text = (BOARDS / f"{name}.toml").read_text()
    assert section in text
    path = tmp_path / f"{name}-x.toml"
    path.write_text(text.replace(section, section + "\n" + extra, 1))
    return path


# --------------------------------------------------------------------------- frequencies
@pytest.mark.parametrize("whole_hz", [True, False])
@pytest.mark.parametrize("timer", [
    Timer(16e6, 8, 1024, (1, 8, 64, 256, 1024)),
    Timer(16e6, 8, 64),
    Timer(48e6, 10, 128, (1, 2, 4, 8, 16, 32, 64, 128)),
])
def test_realisable_frequencies_against_brute_force(timer, whole_hz):
    """Timer arithmetic f = clock / (prescaler x period) over every prescaler x period;
    with ``whole_hz`` only the products that divide the clock (a whole number of Hz)."""
    lo, hi = 20e3, 100e3
    ratios = timer.prescalers or range(1, timer.prescaler_max + 1)
    best: dict[int, tuple[int, int]] = {}
    for p, n in itertools.product(ratios, range(2, 2**timer.bits + 1)):
        f = timer.clock / (p * n)
        if lo - 1e-9 <= f <= hi + 1e-9 and (not whole_hz or int(timer.clock) % (p * n) == 0):
            m = p * n
            if m not in best or n > best[m][1]:
                best[m] = (p, n)
    freq, pre, per = realisable_frequencies(timer, lo, hi, whole_hz=whole_hz)
    got = {int(p) * int(n): (int(p), int(n)) for p, n in zip(pre, per)}
    assert got == best, "every exact frequency once, with its longest period"
    assert np.all(np.diff(freq) > 0)
    assert np.allclose(freq, timer.clock / (pre * per), rtol=1e-15)
    if whole_hz:
        assert all(int(f) == f and int(f) * int(p) * int(n) == int(timer.clock)
                   for f, p, n in zip(freq, pre, per)), "whole Hz, exactly clock / (p x N)"


def test_a_clock_of_no_whole_hz_offers_nothing():
    timer = Timer(16e6 + 0.5, 16, 64)
    assert realisable_frequencies(timer, 20e3, 100e3)[0].size == 0
    assert realisable_frequencies(timer, 20e3, 100e3, whole_hz=False)[0].size > 0


# --------------------------------------------------------------------------- the sweep
@pytest.fixture(scope="module")
def demo_result():
    return tune(_demo(), TuneOptions(levels=4, level_step=0.1))


def _fast(r) -> np.ndarray:
    """The settings the fast sweep alone evaluated (the best ones are evaluated again as
    the design evaluates them: test_best_settings_are_what_the_design_reports)."""
    return np.array([k for k in range(r.points) if k not in r.exact_labels], int)


def test_sweep_matches_closed_form_point_by_point(demo_result):
    r = demo_result
    drive, grid = r.drive, r.grid
    fast = _fast(r)
    feas = [k for k in r.order if k in set(fast.tolist())]
    picks = [int(feas[0]), int(feas[len(feas) // 2]),
             int(fast[np.argmax(r.frequency[fast])]), int(fast[np.argmin(r.frequency[fast])])]
    for k in picks:
        duty, f = r.compare[k] / r.period[k], r.frequency[k]
        res = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, duty, f, 0.0)
        fg = r.figures
        where = f"setting {k}: {f:.6g} Hz compare {r.compare[k]}/{r.period[k]}"
        assert fg.min_mean[k] == pytest.approx(res.hold.mean.min(), rel=RTOL), where
        assert fg.max_mean[k] == pytest.approx(res.hold.mean.max(), rel=RTOL), where
        assert fg.ripple[k] == pytest.approx(res.hold.ripple.max(), rel=RTOL), where
        assert fg.coil_power[k] == pytest.approx(res.coil_power.max(), rel=RTOL), where
        assert fg.coil_temp[k] == pytest.approx(res.coil_temp.max(), abs=2e-4), where
        # switch conduction R_on * int_on i^2 dt / T at the evaluated temperatures
        lp = loop(drive, grid.supply, res.coil_temp, grid.r_factor, grid.l_factor)
        ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
        cond = drive.switch.on_resistance * ss.square_on * f
        assert fg.conduction_power[k] == pytest.approx(cond.max(), rel=RTOL), where
        # Every element the current flows through (Joule's law R I^2 for the resistances,
        # V x mean current for the diode and the Zener; sense resistor in the coil path):
        fw = drive.freewheel
        sense = drive.board.sense.resistance * ss.rms**2
        freewheel = (fw.diode_drop + fw.zener_voltage) * ss.charge_off * f
        total = res.coil_power + sense + cond + freewheel
        assert fg.total_power[k] == pytest.approx(total.max(), rel=RTOL), where
        assert fg.freewheel_power[k] == pytest.approx(freewheel.max(), rel=RTOL), where
        # ... and that is what the supply gives: V_bus x its mean current (the current
        # flows from the bus only while the switch is on), conservation of energy over
        # a period of the steady state (the coil's stored energy returns to its value).
        drawn = lp.supply * ss.charge_on * f
        assert fg.total_power[k] == pytest.approx(drawn.max(), rel=RTOL), where
        assert np.sum(fg.parts[k]) == pytest.approx(fg.total_power[k], rel=1e-12), where


def test_best_settings_are_what_the_design_reports(demo_result):
    """The leading settings: compare, currents, ripple, powers and coil temperature are the
    design's own for that [hold] (coildrive.design, the envelope under the regulation)."""
    r = demo_result
    for c in r.ranked(5):
        d = design(dataclasses.replace(r.drive, hold=recommended_hold(r.drive, c)))
        assert (d.timer.prescaler, d.timer.period_ticks, d.timer.compare_ticks) == \
            (c.prescaler, c.period_ticks, c.compare_ticks), c
        assert c.min_mean_current_a == pytest.approx(d.hold.min_mean_current_a, rel=1e-12)
        assert c.max_mean_current_a == pytest.approx(d.hold.max_mean_current_a, rel=1e-12)
        assert c.coil_temp_c == pytest.approx(d.hold.coil_temp_c, rel=1e-12)
        assert c.coil_power_w == pytest.approx(d.hold.coil_power_w, rel=1e-12)
        assert c.freewheel_power_w == pytest.approx(d.hold.freewheel_power_w, rel=1e-12)
        assert c.switch_power_w == pytest.approx(d.hold.switch_power_w, rel=1e-12)


def test_each_compare_is_the_smallest_that_holds_its_level(demo_result):
    r = demo_result
    grid = r.grid
    fast = _fast(r)
    for k in list(fast[:3]) + [int(fast[np.argmax(r.level[fast])])]:
        k = int(k)
        f, n, c = r.frequency[k], r.period[k], r.compare[k]
        args = (r.drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor)
        at = evaluate(*args, c / n, f, 0.0).hold.mean.min()
        below = evaluate(*args, (c - 1) / n, f, 0.0).hold.mean.min()
        assert at >= r.level[k] * (1 - RTOL), f"compare {c} holds {r.level[k]:.4g} A: {at:.6g} A"
        assert below < r.level[k], f"compare {c - 1} must fall short of {r.level[k]:.4g} A: {below:.6g} A"


def test_levels_start_at_the_minimum_and_rise(demo_result):
    r = demo_result
    i_min, basis = minimum_hold_current(r.drive)
    assert i_min == r.drive.hold.current and "hold.current" in basis
    assert np.isclose(r.level.min(), i_min * r.options.margin)
    assert np.allclose(np.unique(r.level), i_min * (1 + 0.1 * np.arange(4)))


def test_ranking_is_by_objective_with_ties_by_switching_then_frequency(demo_result):
    r = demo_result
    lead = [int(k) for k in r.order if int(k) in r.exact_labels]  # evaluated as the design does
    assert lead == [int(k) for k in r.order[:len(lead)]], "the exactly evaluated settings lead"
    ranked = r.ranked(len(lead))
    assert all(c.feasible and not c.failed for c in ranked)
    least = min(c.total_power_w for c in ranked)
    band = [c for c in ranked if c.in_tie_band]
    assert band == ranked[:r.band] and len(band) == r.band >= 2
    assert all(c.total_power_w <= least * 1.01 for c in band)
    assert all(c.total_power_w > least * 1.01 for c in ranked[r.band:])
    keys = [(c.switching_power_w, abs(c.frequency_hz - r.drive.hold.frequency)) for c in band]
    assert keys == sorted(keys)
    rest = [c.total_power_w for c in ranked[r.band:]]
    assert rest == sorted(rest)


def _figs(total, switching, ripple=None):
    n = len(total)
    return SimpleNamespace(total_power=np.array(total, float), switching_power=np.array(switching, float),
                           ripple=np.zeros(n) if ripple is None else np.array(ripple, float))


def test_ties_within_one_percent_go_to_switching_loss_then_the_files_frequency():
    # settings: objective W, switching W, frequency Hz (file: 25 kHz)
    total = [10.00, 10.05, 10.05, 10.20, 10.09, 10.101, 10.10]
    switching = [0.002, 0.001, 0.001, 0.0, 0.001, 0.0, 0.003]
    freq = np.array([40e3, 30e3, 26e3, 25e3, 25e3, 25e3, 20e3])
    order, band = rank_settings(np.arange(7), _figs(total, switching), freq, 25e3, 0.01)
    # in the band (<= 10.1 W): 4, 2, 1 (switching 1 mW; 0, 1 and 5 kHz from the file's),
    # 0 (2 mW), 6 (3 mW); outside, by objective: 5 (10.101 W), 3 (10.2 W)
    assert band == 5
    assert order.tolist() == [4, 2, 1, 0, 6, 5, 3]
    # equal objective, switching and distance: the lower objective, then frequency
    order, band = rank_settings(np.arange(3), _figs([10.0, 10.0, 9.99], [0, 0, 0]),
                                np.array([26e3, 24e3, 26e3]), 25e3, 0.01)
    assert order.tolist() == [2, 1, 0] and band == 3
    # a band of 0 keeps only exact ties together; outside the band: objective, then ripple,
    # then frequency
    order, band = rank_settings(np.arange(6), _figs([10.0, 10.0, 10.2, 10.3, 10.3, 10.3],
                                                    [0.001, 0, 0, 0, 0, 0], [9, 9, 9, 2, 1, 1]),
                                np.array([30e3, 40e3, 25e3, 25e3, 31e3, 30e3]), 25e3, 0.0)
    assert order.tolist() == [1, 0, 2, 5, 4, 3] and band == 2


def test_first_two_margin(demo_result):
    r = demo_result
    first, second = r.ranked(2)
    w, frac = r.first_two_margin
    assert w == second.total_power_w - first.total_power_w
    assert frac == pytest.approx(w / first.total_power_w, rel=1e-12)
    one = tune(_demo(), TuneOptions(levels=1, min_frequency=25e3, max_frequency=25e3))
    assert one.order.size == 1 and one.first_two_margin is None


def test_demo_prefers_the_files_25_khz_over_a_microwatt():
    """The demo board gives no rise/fall time: every frequency draws the same within a
    few mW of 10 W, so the file's 25 kHz stays; 84 MHz / 2059 = 40796.50... Hz is not a
    whole number of Hz and is not offered."""
    r = tune(_demo())
    rec = r.recommendation
    assert rec.frequency_hz == 25000.0 == r.drive.hold.frequency
    assert (rec.prescaler, rec.period_ticks) == (1, 3360)
    assert not np.any(np.isclose(r.frequency, 84e6 / 2059, rtol=1e-9, atol=0))
    assert abs(r.first_two_margin[1]) < 0.01
    assert "frequency = 25000  # Hz = 84 MHz / (prescaler 1 x period 3360)" in r.hold_section()


def _objective_of_design(d, drive) -> float:
    """All hold power drawn from the supply at the worst corner of a Design: each
    corner's coil + freewheel + switch powers as design() reports them, plus the sense
    resistor by Joule's law from the corner's RMS current (the demo boards' sense sits in
    the coil path, so it carries the coil current all the time)."""
    assert drive.board.sense.position == "coil"
    r_s = drive.board.sense.resistance
    return max(c.coil_power_w + c.freewheel_power_w + c.switch_power_w + r_s * c.hold_rms_current_a**2
               for c in d.corners)


@pytest.mark.parametrize("example", ["reagent-valve-zener-24v.toml", "wash-valve-split-24v.toml"])
def test_objective_is_the_sum_of_the_designs_element_powers(example):
    """Independent path: design() of the recommended [hold] reports each element's power
    at every corner (coildrive.design, not this sweep); the objective is their sum at the
    worst corner -- the Zener's watts (demo) and the bypass switch (split decay) included."""
    drive = load_drive(EXAMPLES / example)
    r = tune(drive, TuneOptions(levels=2))
    rec = r.recommendation
    d = recommended_design(r)
    assert d.timer.compare_ticks == rec.compare_ticks
    assert rec.total_power_w == pytest.approx(_objective_of_design(d, drive), rel=RTOL)
    assert rec.freewheel_power_w == pytest.approx(d.hold.freewheel_power_w, rel=RTOL)
    for name, w in d.hold.freewheel_elements_w.items():  # each element's largest over the corners
        assert 0 < rec.worst_corner_powers_w[name] <= w * (1 + RTOL), name
    if example == "reagent-valve-zener-24v.toml":
        assert rec.worst_corner_powers_w["zener"] > 4.0, "the Zener's 4.13 W counts"
    else:
        assert rec.worst_corner_powers_w["bypass"] > 0 and rec.worst_corner_powers_w["zener"] == 0


def test_recommendation_is_the_brute_force_optimum(tmp_path):
    """Independent path: design() every whole-Hz frequency of a range, take each design's
    element powers at every corner, and apply the stated rule: within 1 % of the least
    worst-case supply power, the least switching loss, then the nearest to 25 kHz."""
    board = _board_with(tmp_path, "lab-m32-zener", 'rise_time = "400 ns"\nfall_time = "300 ns"')
    drive = load_drive(EXAMPLES / "reagent-valve-zener-24v.toml", board)
    r = tune(drive, TuneOptions(min_frequency=24e3, max_frequency=34e3, levels=1))
    rows = []
    for m in range(int(np.ceil(84e6 / 34e3)), int(84e6 // 24e3) + 1):
        if 84_000_000 % m:
            continue  # not a whole number of Hz
        f = 84e6 / m
        d = design(dataclasses.replace(drive, hold=dataclasses.replace(
            drive.hold, frequency=f, frequency_tolerance=1e-9)))
        ripple = max(c.hold_ripple_a for c in d.corners)
        if d.ok and ripple <= 0.2 * drive.hold.current:
            rows.append((_objective_of_design(d, drive), d.hold.switch_switching_w, abs(f - 25e3), f,
                         d.timer.compare_ticks))
    least = min(row[0] for row in rows)
    band = sorted((row for row in rows if row[0] <= least * 1.01), key=lambda row: (row[1], row[2]))
    rec = r.recommendation
    assert len(rows) == r.order.size >= 3
    assert (rec.frequency_hz, rec.compare_ticks) == (band[0][3], band[0][4])
    assert rec.total_power_w == pytest.approx(band[0][0], rel=RTOL)
    assert rec.switching_power_w == pytest.approx(band[0][1], rel=RTOL) and rec.switching_power_w > 0


def test_switching_loss_is_the_linearised_estimate(tmp_path):
    board = _board_with(tmp_path, "lab-m32-zener", 'rise_time = "50 ns"\nfall_time = "80 ns"')
    drive = load_drive(EXAMPLES / "reagent-valve-zener-24v.toml", board)
    t_r, t_f = drive.switch.rise_time, drive.switch.fall_time
    assert (t_r, t_f) == pytest.approx((50e-9, 80e-9), rel=1e-12)
    r = tune(drive, TuneOptions(min_frequency=50e3, max_frequency=50e3, levels=1))
    k = int(r.order[0])  # evaluated as the design evaluates it: at the envelope's corners
    d = design(dataclasses.replace(drive, hold=recommended_hold(drive, r.candidate(k))))
    f = r.frequency[k]
    # Mohan, Undeland & Robbins ch. 2: P_s = V I f (t_on + t_off) / 2, per edge with its
    # current; the edges' currents at each corner from the steady state by hand
    supply = np.array([c.supply_v for c in d.corners])
    temps = np.array([c.coil_temp_c for c in d.corners])
    cmp = np.array([c.hold_duty for c in d.corners])
    rf = np.array([c.resistance_ohm for c in d.corners]) / np.array(
        [iec60028_resistance(drive.coil.resistance, drive.coil.reference_temp, t) for t in temps])
    lf = np.array([c.inductance_h for c in d.corners]) / drive.coil.inductance
    lp = loop(drive, supply, temps, rf, lf)
    ss = pwm_steady_state(cmp, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    v_block = supply + 0.9 + 33.0  # switch voltage while freewheeling (KVL)
    p_sw = 0.5 * f * v_block * (ss.i_min * t_r + ss.i_max * t_f)
    assert r.figures.switching_power[k] == pytest.approx(p_sw.max(), rel=RTOL)
    assert r.switching_estimated


# --------------------------------------------------------------------------- constraints
def _least_ripple_meeting_the_rest(r, exact_only: bool = True) -> float:
    """Among the settings that meet every other constraint: the exactly evaluated ones (or
    all, as the sweep's explanation sees them when none is feasible)."""
    exact = np.zeros(r.points, bool)
    exact[list(r.exact_labels)] = True
    others = np.logical_and.reduce([r.ok[k] for k in r.ok if k != "ripple"]) & (exact | (not exact_only))
    assert np.any(others), "precondition: settings that meet every other constraint"
    return float(r.figures.ripple[others].min())


def test_too_tight_ripple_limit_is_infeasible_and_named(demo_result):
    least = _least_ripple_meeting_the_rest(demo_result, exact_only=False)
    r = tune(_demo(), dataclasses.replace(demo_result.options, max_ripple=0.5 * least))
    assert r.recommendation is None and r.order.size == 0
    assert "ripple" in r.explanation and "--max-ripple" in r.explanation
    assert f"{least * 1e3:.4g} mA" in r.explanation, r.explanation


def test_ripple_limit_just_above_the_least_keeps_only_those(demo_result):
    least = _least_ripple_meeting_the_rest(demo_result)
    r = tune(_demo(), dataclasses.replace(demo_result.options, max_ripple=least * 1.000001))
    assert r.recommendation is not None
    assert r.recommendation.ripple_a == pytest.approx(least, rel=1e-6)
    assert r.order.size < demo_result.order.size


def test_duty_steps_constraint(demo_result):
    most = int(demo_result.period.max())
    r = tune(_demo(), TuneOptions(levels=1, min_duty_steps=most + 1))
    assert r.recommendation is None
    assert "compare steps" in r.explanation and str(most) in r.explanation
    r = tune(_demo(), TuneOptions(levels=1, min_duty_steps=most))
    assert r.recommendation is not None and r.recommendation.period_ticks == most


def test_coil_temperature_constraint():
    d = _demo()
    hot = dataclasses.replace(d, thermal=dataclasses.replace(d.thermal, max_coil_temp=100.0))
    r = tune(hot, TuneOptions(levels=2))
    assert r.recommendation is None
    assert "coil temperature <= 100 degC" in r.explanation
    assert not np.any(r.ok["coil_temp"])


def test_margin_raises_the_target(demo_result):
    r = tune(_demo(), TuneOptions(levels=1, margin=1.05, min_frequency=40e3, max_frequency=41e3))
    assert r.target_current == pytest.approx(0.231)
    assert r.recommendation.min_mean_current_a >= 0.231


def test_fixed_prescaler_list_board():
    drive = load_drive(EXAMPLES / "reagent-valve-zener-24v.toml", "tiny-8bit-diode")
    r = tune(drive, TuneOptions(levels=2, min_duty_steps=32))
    assert r.points > 0
    assert set(np.unique(r.prescaler)) <= {1, 8, 64, 256, 1024}
    assert np.all(r.period <= 256)
    if r.recommendation is not None:
        d = recommended_design(r)
        assert (d.timer.prescaler, d.timer.period_ticks) == (r.recommendation.prescaler,
                                                             r.recommendation.period_ticks)


def test_recommended_design_agrees(demo_result):
    r = demo_result
    d = recommended_design(r)
    rec = r.recommendation
    assert d.ok
    assert (d.timer.prescaler, d.timer.period_ticks, d.timer.compare_ticks) == (
        rec.prescaler, rec.period_ticks, rec.compare_ticks)
    assert d.hold.frequency_hz == rec.frequency_hz
    assert d.hold.min_mean_current_a == pytest.approx(rec.min_mean_current_a, rel=RTOL)
    assert d.hold.ripple_a == pytest.approx(rec.ripple_a, rel=RTOL)
    assert d.hold.coil_temp_c == pytest.approx(rec.coil_temp_c, abs=2e-4)


def test_board_max_pwm_frequency_sets_the_upper_end(tmp_path):
    board = _board_with(tmp_path, "lab-m32-zener", 'max_pwm_frequency = "30 kHz"', "[timer]")
    drive = load_drive(EXAMPLES / "reagent-valve-zener-24v.toml", board)
    r = tune(drive, TuneOptions(levels=1))
    assert r.max_frequency == 30e3 and r.max_frequency_source == "board timer.max_pwm_frequency"
    assert r.frequency.max() <= 30e3 + 1e-9
    r = tune(drive, TuneOptions(levels=1, max_frequency=25e3))
    assert r.frequency.max() <= 25e3 + 1e-9


@pytest.mark.parametrize("options, name", [
    (TuneOptions(margin=0.9), "--margin"),
    (TuneOptions(levels=0), "--levels"),
    (TuneOptions(min_frequency=50e3, max_frequency=40e3), "--max-frequency"),
    (TuneOptions(min_duty_steps=1), "--min-steps"),
    (TuneOptions(min_frequency=20.001e3, max_frequency=20.002e3), "--max-frequency"),  # no 84 MHz / M
    (TuneOptions(min_frequency=20.1e3, max_frequency=20.9e3), "--max-frequency"),  # no whole-Hz 84 MHz / M
    (TuneOptions(tie_band=1.0), "tie_band"),
])
def test_bad_options_name_the_option(options, name):
    with pytest.raises(InputError) as err:
        tune(_demo(), options)
    assert str(err.value).startswith(name), str(err.value)


# --------------------------------------------------------------------------- inversion
def test_secant_inversion_matches_bisection():
    rng = np.random.default_rng(11)
    n = 20_000
    f = 10 ** rng.uniform(3, 5.3, n)
    r = 10 ** rng.uniform(0, 2.5, n)
    ind = r * 10 ** rng.uniform(-4, -1, n)
    r_on, r_off = r + rng.uniform(0, 1, n), r + rng.choice([0.0, 0.1, 33.0], n)
    v = rng.uniform(3, 60, n)
    v_off = rng.choice([0.7, 15.0, 34.0], n) * rng.uniform(0.5, 1.5, n)
    full = pwm_steady_state(1.0, f, v, r_on, r_off, v_off, ind).mean
    target = full * rng.uniform(-0.05, 1.05, n)
    new = duty_for_mean(target, f, v, r_on, r_off, v_off, ind)
    old = duty_for_mean_bisect(target, f, v, r_on, r_off, v_off, ind)
    assert np.array_equal(np.isnan(new), np.isnan(old)), "same points out of reach"
    ok = np.isfinite(new)
    assert np.max(np.abs(new[ok] - old[ok])) < 1e-9
    reached = pwm_steady_state(new[ok], f[ok], v[ok], r_on[ok], r_off[ok], v_off[ok], ind[ok]).mean
    assert np.all(reached >= target[ok]), "the duty returned reaches the target"
    assert np.any(target > full) and np.any(~ok), "some targets are out of reach (precondition)"


def _paste_hold(text: str, section: str) -> str:
    """The drive file's text with its [hold] section replaced, as a user pastes it."""
    start = text.index("[hold]")
    nxt = re.search(r"^\[", text[start + 1:], re.M)
    end = len(text) if nxt is None else start + 1 + nxt.start()
    return text[:start] + section + "\n" + text[end:]


def printed_hold(r) -> str:
    """The [hold] ``r`` prints, checked to name its recommendation's frequency, prescaler,
    period and compare on the frequency line."""
    rec = r.recommendation
    section = r.hold_section()
    m = re.search(r"^frequency = (\d+)  # Hz = [\d.]+ MHz / \(prescaler (\d+) x period (\d+)\), compare (\d+)$",
                  section, re.M)
    assert m, section
    assert tuple(map(int, m.groups())) == (rec.frequency_hz, rec.prescaler, rec.period_ticks,
                                           rec.compare_ticks)
    return section


@pytest.mark.parametrize("example,board", [
    (e, b) for e in sorted(p.name for p in EXAMPLES.glob("*.toml"))
    # (a saturating coil's example is left out: tune refuses a flux-linkage curve, which
    # tests/test_flux_coil.py checks)
    if "flux_current" not in (EXAMPLES / e).read_text()
    for b in sorted(p.stem for p in BOARDS.glob("*.toml")) if loads(EXAMPLES / e, b)])
def test_every_offered_frequency_is_exact_and_the_pasted_hold_designs_to_it(tmp_path, example, board):
    """Timer arithmetic: every frequency offered is a whole number of Hz equal to
    clock / (prescaler x period) exactly; the [hold] printed for the recommendation,
    pasted into the drive file and read back by config, designs (coildrive.design) to the
    same frequency, prescaler, period and compare."""
    drive = load_drive(EXAMPLES / example, board)
    if drive.hold.mode != "voltage":
        with pytest.raises(InputError, match="hold.mode"):
            tune(drive)
        return
    if drive.hold.regulation == "closed_loop":
        with pytest.raises(InputError, match="hold.regulation"):
            tune(drive)
        return
    r = tune(drive, TuneOptions(levels=2))
    clock = drive.board.timer.clock
    assert r.frequency.size > 0
    for f, p, n in zip(r.frequency, r.prescaler, r.period):
        assert f == int(f) and int(f) * int(p) * int(n) == clock, (f, p, n)
    rec = r.recommendation
    if rec is None:
        assert r.explanation.startswith("no feasible hold setting"), r.explanation
        return
    section = printed_hold(r)
    path = tmp_path / example
    path.write_text(_paste_hold((EXAMPLES / example).read_text(), section))
    pasted = load_drive(path, board)
    assert pasted.hold.frequency == rec.frequency_hz and pasted.hold.current == rec.hold_current_a
    d = design(pasted)
    assert d.hold.frequency_hz == rec.frequency_hz
    assert (d.timer.prescaler, d.timer.period_ticks) == (rec.prescaler, rec.period_ticks)
    if cycling(pasted):
        # over an on/off cycle the sweep heats the coil with the hold alone, the design with
        # each actuation's peak too: a hotter coil may need up to one compare count more
        assert 0 <= d.timer.compare_ticks - rec.compare_ticks <= 1, (d.timer.compare_ticks, rec.compare_ticks)
    else:
        assert d.timer.compare_ticks == rec.compare_ticks


def test_a_duty_per_corner_is_evaluated_at_its_own_corner():
    """The objective takes the duty at each corner as one (settings x corners) array, as a
    supply-following hold needs: each corner's figures against design's evaluate() at
    that corner's own duty (coildrive.design.evaluate, self-heating to its 1e-4 K)."""
    drive = _demo()
    grid = corner_grid(drive)
    from coildrive.tune.sweep import corner_duties, evaluate_settings
    fixed = corner_duties(drive, grid, np.array([2501, 2600]), np.array([3360, 3360]))
    assert fixed.shape == (2, len(grid)) and np.all(fixed[0] == 2501 / 3360) and np.all(fixed[1] == 2600 / 3360)
    duty = 2501 / 3360 * grid.supply.min() / grid.supply  # less duty at a higher supply
    duties = np.stack([duty, fixed[1]])
    figs = evaluate_settings(drive, grid, duties, np.array([25e3, 25e3]))
    res = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, duty, 25e3, 0.0)
    assert figs.min_mean[0] == pytest.approx(res.hold.mean.min(), rel=RTOL)
    assert figs.max_mean[0] == pytest.approx(res.hold.mean.max(), rel=RTOL)
    assert figs.coil_temp[0] == pytest.approx(res.coil_temp.max(), abs=2e-4)
    drawn = res.loop.supply * res.hold.charge_on * 25e3  # V_bus x mean supply current
    assert figs.total_power[0] == pytest.approx(drawn.max(), rel=RTOL)
    flat = evaluate_settings(drive, grid, np.array([2600 / 3360]), 25e3)
    assert flat.total_power[0] == figs.total_power[1], "a flat duty is the same duty at every corner"
    assert figs.max_mean[0] < flat.max_mean[0], "less duty at the high supply"
