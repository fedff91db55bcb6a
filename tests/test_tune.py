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
import math

import numpy as np
import pytest

from coildrive.config import Timer, load_drive
from coildrive.design.corners import corner_grid
from coildrive.design import design
from coildrive.errors import InputError
from coildrive.design.evaluate import evaluate
from coildrive.model.pwm import duty_for_mean, duty_for_mean_bisect, pwm_steady_state
from coildrive.model.circuit import loop
from coildrive.tune.sweep import (TuneOptions, minimum_hold_current, realisable_frequencies,
                            recommended_design, tune)
from conftest import BOARDS, EXAMPLES

#: Relative agreement with evaluate(): its self-heating stops within 1e-4 K (thermal.py);
#: with alpha = 0.00393 /K (IEC 60028) that moves a current by < 1e-6 relative.
RTOL = 2e-6


def _demo(**hold):
    d = load_drive(EXAMPLES / "demo-valve.toml")
    return dataclasses.replace(d, hold=dataclasses.replace(d.hold, **hold)) if hold else d


def _board_with(tmp_path, name: str, extra: str, section: str = "[switch]"):
    text = (BOARDS / f"{name}.toml").read_text()
    assert section in text
    path = tmp_path / f"{name}-x.toml"
    path.write_text(text.replace(section, section + "\n" + extra, 1))
    return path


# --------------------------------------------------------------------------- frequencies
@pytest.mark.parametrize("timer", [
    Timer(16e6, 8, 1024, (1, 8, 64, 256, 1024)),
    Timer(16e6, 8, 64),
    Timer(48e6, 10, 128, (1, 2, 4, 8, 16, 32, 64, 128)),
])
def test_realisable_frequencies_against_brute_force(timer):
    lo, hi = 20e3, 100e3
    ratios = timer.prescalers or range(1, timer.prescaler_max + 1)
    best: dict[int, tuple[int, int]] = {}
    for p, n in itertools.product(ratios, range(2, 2**timer.bits + 1)):
        f = timer.clock / (p * n)
        if lo - 1e-9 <= f <= hi + 1e-9:
            m = p * n
            if m not in best or n > best[m][1]:
                best[m] = (p, n)
    freq, pre, per = realisable_frequencies(timer, lo, hi)
    got = {int(p) * int(n): (int(p), int(n)) for p, n in zip(pre, per)}
    assert got == best, "every exact frequency once, with its longest period"
    assert np.all(np.diff(freq) > 0)
    assert np.allclose(freq, timer.clock / (pre * per), rtol=1e-15)


# --------------------------------------------------------------------------- the sweep
@pytest.fixture(scope="module")
def demo_result():
    return tune(_demo(), TuneOptions(levels=4, level_step=0.1))


def test_sweep_matches_closed_form_point_by_point(demo_result):
    r = demo_result
    drive, grid = r.drive, r.grid
    picks = [int(r.order[0]), int(r.order[len(r.order) // 2]), int(np.flatnonzero(~r.feasible)[0]),
             int(np.argmax(r.frequency)), int(np.argmin(r.frequency))]
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
        total = res.coil_power + cond
        assert fg.total_power[k] == pytest.approx(total.max(), rel=RTOL), where


def test_each_compare_is_the_smallest_that_holds_its_level(demo_result):
    r = demo_result
    grid = r.grid
    for k in list(r.order[:3]) + [int(np.argmax(r.level))]:
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


def test_ranking_is_by_worst_case_total_power(demo_result):
    r = demo_result
    ranked = r.ranked(50)
    totals = [c.total_power_w for c in ranked]
    assert totals == sorted(totals)
    assert all(c.feasible and not c.failed for c in ranked)
    feas = r.figures.total_power[r.feasible]
    assert r.recommendation.total_power_w == feas.min()


def test_recommendation_is_the_brute_force_optimum(tmp_path):
    """Independent path: design() every frequency of a narrow range, evaluate it at every
    corner with switching loss, take the least worst-case total power."""
    board = _board_with(tmp_path, "lab-m32-zener", 'rise_time = "400 ns"\nfall_time = "300 ns"')
    drive = load_drive(EXAMPLES / "demo-valve.toml", board)
    opts = TuneOptions(min_frequency=33e3, max_frequency=34e3, levels=1)
    r = tune(drive, opts)
    grid = corner_grid(drive)
    best = (math.inf, None)
    for m in range(int(np.ceil(84e6 / 34e3)), int(84e6 // 33e3) + 1):
        f = 84e6 / m
        d = design(dataclasses.replace(drive, hold=dataclasses.replace(
            drive.hold, frequency=f, frequency_tolerance=1e-9)))
        duty = d.timer.compare_ticks / d.timer.period_ticks
        res = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, duty, f, 0.0)
        lp, ss = res.loop, res.hold
        v_block = lp.supply + drive.freewheel.diode_drop + drive.freewheel.zener_voltage
        sw = 0.5 * f * v_block * (ss.i_min * drive.switch.rise_time
                                  + ss.i_max * drive.switch.fall_time)  # Mohan et al., ch. 2
        total = res.coil_power + drive.switch.on_resistance * ss.square_on * f + sw
        ok = d.ok and res.hold.ripple.max() <= 0.2 * drive.hold.current
        if ok and total.max() < best[0]:
            best = (float(total.max()), (f, d.timer.compare_ticks))
    rec = r.recommendation
    assert best[1] is not None
    assert (rec.frequency_hz, rec.compare_ticks) == pytest.approx(best[1], rel=1e-12)
    assert rec.total_power_w == pytest.approx(best[0], rel=RTOL)
    assert rec.switching_power_w > 0


def test_switching_loss_is_the_linearised_estimate(tmp_path):
    board = _board_with(tmp_path, "lab-m32-zener", 'rise_time = "50 ns"\nfall_time = "80 ns"')
    drive = load_drive(EXAMPLES / "demo-valve.toml", board)
    t_r, t_f = drive.switch.rise_time, drive.switch.fall_time
    assert (t_r, t_f) == pytest.approx((50e-9, 80e-9), rel=1e-12)
    r = tune(drive, TuneOptions(min_frequency=50e3, max_frequency=50e3, levels=1))
    k = 0
    grid = r.grid
    f, duty = r.frequency[k], r.compare[k] / r.period[k]
    res = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, duty, f, 0.0)
    ss = res.hold
    v_block = res.loop.supply + 0.9 + 33.0  # switch voltage while freewheeling (KVL)
    # Mohan, Undeland & Robbins ch. 2: P_s = V I f (t_on + t_off) / 2, per edge with its current
    p_sw = 0.5 * f * v_block * (ss.i_min * t_r + ss.i_max * t_f)
    assert r.figures.switching_power[k] == pytest.approx(p_sw.max(), rel=RTOL)
    assert r.switching_estimated


# --------------------------------------------------------------------------- constraints
def _least_ripple_meeting_the_rest(r) -> float:
    others = np.logical_and.reduce([r.ok[k] for k in r.ok if k != "ripple"])
    assert np.any(others), "precondition: settings that meet every other constraint"
    return float(r.figures.ripple[others].min())


def test_too_tight_ripple_limit_is_infeasible_and_named(demo_result):
    least = _least_ripple_meeting_the_rest(demo_result)
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
    drive = load_drive(EXAMPLES / "demo-valve.toml", "tiny-8bit-diode")
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
    drive = load_drive(EXAMPLES / "demo-valve.toml", board)
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
