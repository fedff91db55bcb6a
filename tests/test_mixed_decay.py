"""Mixed decay on a full bridge (``[hold] fast_fraction``): the three-segment orbit of
coildrive.model.pwm (its ngspice reference is in tests/test_reference_ngspice_bridge.py),
its limits, its energy balance, the design's figures, simulate and the header; and the
refusals."""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from conftest import BOARDS, EXAMPLES, require_tool
from coildrive.cli import app
from coildrive.codegen.header import generate_header
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.circuit import loop
from coildrive.model.losses import hold_losses
from coildrive.model.pwm import MixedDecay, duty_for_mean, pwm_steady_state

BRIDGE = EXAMPLES / "dosing-valve-bridge-24v.toml"
V, R_ON, R_SLOW, R_FAST, V_FAST, L = 24.0, 26.2, 26.07, 26.1, 25.6, 0.069


def _variant(tmp_path, fraction, name="m.toml"):
    path = tmp_path / name
    text = BRIDGE.read_text().replace('frequency = "20 kHz"\n', f'frequency = "20 kHz"\nfast_fraction = {fraction}\n')
    path.write_text(text.replace('board = "bridge-m32-fast"', f'board = "{BOARDS / "bridge-m32-fast.toml"}"'))
    return path


def _ss(duty, fraction, freq=20e3):
    return pwm_steady_state(duty, freq, V, R_ON, R_SLOW, 0.0, L, mixed=MixedDecay(fraction, R_FAST, V_FAST))


@settings(max_examples=40, deadline=None)
@given(duty=st.floats(0.02, 0.98), freq=st.floats(1e3, 50e3))
def test_the_ends_of_the_fraction_are_the_two_segment_orbits(duty, freq):
    # m = 0 is the slow orbit, m = 1 the fast one (the two-segment closed form of model.pwm)
    slow = pwm_steady_state(duty, freq, V, R_ON, R_SLOW, 0.0, L)
    fast = pwm_steady_state(duty, freq, V, R_ON, R_FAST, V_FAST, L)
    for m, ref in ((1e-300, slow), (1.0, fast)):
        got = _ss(duty, m, freq)
        for name in ("i_min", "i_max", "mean", "rms"):
            assert float(getattr(got, name)) == pytest.approx(float(getattr(ref, name)), rel=1e-9, abs=1e-12), name


@settings(max_examples=40, deadline=None)
@given(duty=st.floats(0.05, 0.95), a=st.floats(0.0, 1.0), b=st.floats(0.0, 1.0))
def test_more_fast_decay_never_raises_the_mean(duty, a, b):
    # the fast path opposes the current with V_bus + 2 V_d where the slow one has none:
    # more of it at the same duty can only lower the orbit (and return more to the bus)
    lo, hi = sorted((a, b))
    s_lo, s_hi = _ss(duty, lo), _ss(duty, hi)
    assert float(s_hi.mean) <= float(s_lo.mean) * (1 + 1e-12) + 1e-15
    assert float(s_hi.i_max) <= float(s_lo.i_max) * (1 + 1e-12) + 1e-15


def test_duty_for_the_hold_current_reaches_it():
    mixed = MixedDecay(0.3, np.array([R_FAST, R_FAST]), np.array([V_FAST, V_FAST]))
    duty = duty_for_mean(0.2, 20e3, V, R_ON, R_SLOW, 0.0, L, mixed=mixed)
    got = pwm_steady_state(duty, 20e3, V, R_ON, R_SLOW, 0.0, L, mixed=mixed).mean
    assert np.all(got >= 0.2) and np.all(got < 0.2 * (1 + 1e-9))


def test_mixed_hold_power_balances(tmp_path):
    # Conservation of energy over one period of the periodic steady state (common
    # practice): what the supply gives net of what the fast parts return is the copper's,
    # the sense resistor's, the switches' and the body diodes'
    drive = load_drive(_variant(tmp_path, 0.2))
    lp = loop(drive, 24.0, 60.0)
    ss = pwm_steady_state(0.45, 20e3, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance, mixed=lp.mixed)
    loss = hold_losses(drive, lp, ss, 20e3)
    assert float(loss.diode) == pytest.approx(2 * drive.freewheel.diode_drop * float(ss.charge_fast) * 20e3)
    assert float(loss.balance_error()) == pytest.approx(0.0, abs=1e-12 * float(loss.supply))


def test_fraction_zero_changes_no_output(tmp_path):
    plain = CliRunner().invoke(app, ["design", str(BRIDGE), "--json"])
    zero = CliRunner().invoke(app, ["design", str(_variant(tmp_path, 0)), "--json"])
    a, b = json.loads(plain.stdout), json.loads(zero.stdout)
    for doc in (a, b):
        doc.pop("drive", None), doc.pop("input_hash", None), doc.pop("source", None)
    assert a == b


def test_design_reports_the_energy_returned_per_hold_period(tmp_path):
    path = _variant(tmp_path, 0.3)
    d = design(load_drive(path))
    b = d.topology.bridge
    assert b.hold_decay == "mixed" and b.hold_fast_fraction == 0.3
    # the returned energy per period is V_bus x the fast part's charge at its corner
    c = next(c for c in d.corners if c.label == b.hold_period_corner)
    drive = load_drive(path)
    lp = loop(drive, c.supply_v, c.coil_temp_c, c.resistance_ohm / float(loop(drive, 0.0, c.coil_temp_c).r_coil),
              c.inductance_h / drive.coil.inductance)
    ss = pwm_steady_state(c.hold_duty, d.hold.frequency_hz, lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                          lp.inductance, mixed=lp.mixed)
    assert b.returned_per_hold_period_j == pytest.approx(c.supply_v * float(ss.charge_fast), rel=1e-6)
    # mixed decay needs more duty for the same hold current than slow decay
    assert d.hold.duty > design(load_drive(BRIDGE)).hold.duty
    res = CliRunner().invoke(app, ["design", str(path)])
    assert res.exit_code == 0 and "mixed decay" in res.stdout


def test_header_gives_the_fraction_and_compiles(tmp_path):
    gcc = require_tool("gcc")
    text = generate_header(design(load_drive(_variant(tmp_path, 0.3))))
    assert "#define COIL_HOLD_FAST_Q16                 19661U" in text  # round(0.3 x 65536)
    h = tmp_path / "drive.h"
    h.write_text(text)
    c = tmp_path / "main.c"
    c.write_text('#include "drive.h"\nint main(void) { return (int)(COIL_HOLD_FAST_Q16 == 19661U ? 0 : 1); }\n')
    import subprocess
    out = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(c), "-o",
                          str(tmp_path / "a.out")], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr


def _simulate(tmp_path, path, hold_time):
    """``simulate`` at 24 V, 20 degC: the CSV's columns by name."""
    out = tmp_path / "w.csv"
    res = CliRunner().invoke(app, ["simulate", str(path), "--supply", "24 V", "--coil-temp", "20 degC",
                                   "--hold-time", hold_time, "--csv", str(out)])
    assert res.exit_code == 0, res.stderr
    return np.genfromtxt(out, delimiter=",", names=True)


def test_simulated_hold_takes_the_fast_path_first(tmp_path):
    path = _variant(tmp_path, 0.3)
    w = _simulate(tmp_path, path, "40 ms")
    drive = load_drive(path)
    on, t, i, v = w["switch_on"], w["time_s"], w["current_a"], w["switch_voltage_v"]
    k_off = int(np.flatnonzero(np.diff(on) < 0)[-1])
    hold_off = (on == 0) & (t < t[k_off]) & (t > t[np.flatnonzero(np.diff(on) < 0)[0]])
    # the off-times' highest switch voltage: V_bus + V_d while the current flows into the
    # bus (sense inline; all four open), V_bus + R_sw i across Q1 while it recirculates
    # slowly through Q2 + Q4
    fast, slow = hold_off & (w["low_a_on"] == 0), hold_off & (w["low_a_on"] == 1)
    assert fast.any() and slow.any() and (i[fast] > 0).all()
    np.testing.assert_allclose(v[fast], 24.0 + drive.freewheel.diode_drop, rtol=1e-9)
    np.testing.assert_allclose(v[slow], 24.0 + drive.switch.on_resistance * i[slow], rtol=1e-6)
    # the late periods sit on the model's orbit (duty of the 24 V table entry)
    lp = loop(drive, 24.0, 20.0)
    period = 1 / 20e3
    k_on = np.flatnonzero(np.diff(on) > 0)
    width = t[np.flatnonzero(np.diff(on) < 0)[-2]] - t[k_on[-2] + 1]
    ss = pwm_steady_state(width / period, 20e3, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                          mixed=lp.mixed)
    assert i[k_off] == pytest.approx(float(ss.i_max), rel=1e-3)


def test_a_fraction_above_one_is_refused(tmp_path):
    path = _variant(tmp_path, 1.5)
    res = CliRunner().invoke(app, ["design", str(path)])
    assert res.exit_code == 2 and "hold.fast_fraction" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_mixed_decay_needs_a_full_bridge_and_live_tuning_takes_it(tmp_path):
    demo = tmp_path / "d.toml"
    demo.write_text((EXAMPLES / "demo-valve.toml").read_text().replace(
        "[hold]\n", "[hold]\nfast_fraction = 0.2\n", 1))
    res = CliRunner().invoke(app, ["design", str(demo)])
    assert res.exit_code == 2 and "hold.fast_fraction" in res.stderr and "full bridge" in res.stderr
    # live (tests/test_tune_live_coils.py): past the drive's checks, the missing port is the line
    res = CliRunner().invoke(app, ["tune", str(_variant(tmp_path, 0.2)), "--port", str(tmp_path / "no-port"),
                                   "--capture", str(tmp_path / "c.cdcap")])
    assert res.exit_code == 2 and "--port" in res.stderr and "hold.fast_fraction" not in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_the_tuned_mixed_hold_pasted_designs_to_the_printed_figures(tmp_path):
    """tune's sweep evaluates the hold with its fast part; the [hold] it prints keeps
    ``fast_fraction``, and pasted into the drive file designs (coildrive.design, the orbit
    tests/test_reference_ngspice_bridge.py checks against ngspice) to the candidate's
    timer counts and figures."""
    from test_tune import _paste_hold
    from coildrive.tune.sweep import TuneOptions, tune

    path = _variant(tmp_path, 0.3)
    # (a band of frequencies around the file's 20 kHz keeps the test short)
    r = tune(load_drive(path), TuneOptions(min_frequency=15e3, max_frequency=25e3, levels=2, level_step=0.1))
    rec = r.recommendation
    section = r.hold_section()
    assert rec is not None and "\nfast_fraction = 0.3  #" in section, section
    pasted_path = tmp_path / "pasted.toml"
    pasted_path.write_text(_paste_hold(path.read_text(), section))
    pasted = load_drive(pasted_path)
    assert pasted.hold.fast_fraction == 0.3
    d = design(pasted)
    assert (d.hold.frequency_hz, d.timer.period_ticks, d.timer.compare_ticks) == (
        rec.frequency_hz, rec.period_ticks, rec.compare_ticks)
    for got, want in ((rec.min_mean_current_a, d.hold.min_mean_current_a),
                      (rec.max_mean_current_a, d.hold.max_mean_current_a),
                      (rec.ripple_a, d.hold.ripple_a), (rec.coil_temp_c, d.hold.coil_temp_c),
                      (rec.freewheel_power_w, d.hold.freewheel_power_w),
                      (rec.switch_power_w, d.hold.switch_power_w)):
        assert got == pytest.approx(want, rel=1e-9), (got, want)
    # the fraction matters: the same hold in slow decay alone needs fewer compare counts
    slow = design(dataclasses.replace(pasted, hold=dataclasses.replace(pasted.hold, fast_fraction=0.0)))
    assert slow.timer.compare_ticks < rec.compare_ticks, (slow.timer.compare_ticks, rec.compare_ticks)


def test_simulated_switch_columns_follow_the_three_segments(tmp_path):
    """simulate's per-switch columns of a mixed-decay hold, against the segment times of
    the design's setting: from each period's start, Q1 + Q4 for ``t_on = duty / f``, all four
    open for ``t_fast = fraction (1/f - t_on)``, then Q2 + Q4; the coil voltage in each part
    (``model.bridge.coil_voltage``'s formulas, written out here)."""
    from coildrive.design import firmware_setting

    path = _variant(tmp_path, 0.3)
    w = _simulate(tmp_path, path, "1 ms")
    drive = load_drive(path)
    d = design(drive)
    duty, peak = firmware_setting(d, 24.0, 20.0)
    period = 1.0 / d.hold.frequency_hz
    t_on, t_fast = duty * period, 0.3 * (period - duty * period)
    t, i = w["time_s"], w["current_a"]
    t_off = t[np.flatnonzero(np.diff(w["switch_on"]) < 0)[-1]]
    hold = (t > peak) & (t <= t_off)
    u = (t[hold] - peak) % period
    eps = 1e-9 * t_off   # the CSV gives a time to 10 digits
    on = (u <= t_on + eps) | (u >= period - eps)
    fast = ~on & (u <= t_on + t_fast + eps)
    slow = ~on & ~fast
    assert on.sum() and fast.sum() and slow.sum()
    states = {q: w[f"{q}_on"][hold] for q in ("high_a", "low_a", "high_b", "low_b")}
    for mask, want in ((on, (1, 0, 0, 1)), (fast, (0, 0, 0, 0)), (slow, (0, 1, 0, 1))):
        for (q, col), bit in zip(states.items(), want):
            assert (col[mask] == bit).all(), (q, bit)
    # after the final turn-off all four stay open
    assert all((w[f"{q}_on"][t > t_off] == 0).all() for q in states)
    # the coil voltage: -(V_bus + 2 V_d + R_sense i) in the fast parts (sense inline), the
    # drop across the two low-side switches and the sense resistor in the slow ones
    sense, r_sw, v_d = drive.board.sense, drive.switch.on_resistance, drive.freewheel.diode_drop
    assert sense.position == "coil"
    ih, vc = i[hold], w["coil_voltage_v"][hold]
    flowing = fast & (ih > 0)
    np.testing.assert_allclose(vc[flowing], -(24.0 + 2 * v_d + sense.resistance * ih[flowing]), rtol=1e-6)
    np.testing.assert_allclose(vc[slow], -(2 * r_sw + sense.resistance) * ih[slow], rtol=1e-5, atol=1e-6)
