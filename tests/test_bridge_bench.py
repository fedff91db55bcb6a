"""The bench tools on a full bridge: tune's sweep runs the bridge's hold, whose off-times
recirculate through the two low-side switches (slow decay), not a freewheel diode; fit
takes the drive path's two switches (Q1 + Q4) out of the loop resistance.

Outside sources: the slow-decay path is the one tests/test_reference_ngspice_bridge.py
checks against ngspice (its drop time, and the simulated hold played into the
element-level netlist); the PWM steady state is the closed form tests/test_reference_scipy.py
checks against scipy's ODE solvers; the settled temperature is IEC 60028 copper at the
fixed point T = T_a + R_th I_rms^2 R_coil(T); fit's coil resistance against IEC 60028
copper at the capture's coil temperature (the rise is the textbook RL step).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from conftest import EXAMPLES
from coildrive.config import load_drive
from coildrive.copper import copper_resistance
from coildrive.design import design
from coildrive.model.bridge import slow_decay
from coildrive.model.pwm import pwm_steady_state
from coildrive.tune.sweep import TuneOptions, recommended_hold, settle_voltage_mode, tune

BRIDGE = EXAMPLES / "dosing-valve-bridge-24v.toml"


def test_the_sweep_holds_through_the_slow_decay():
    drive = load_drive(BRIDGE)
    duty, f = 0.3, 20e3
    temp, lp, ss = settle_voltage_mode(drive, np.array([24.0]), np.array([25.0]), np.array([1.0]),
                                       np.array([1.0]), duty, f)
    sense = drive.board.sense
    r_coil = copper_resistance(drive.coil.resistance, drive.coil.reference_temp, temp)
    path = slow_decay(r_coil, drive.switch.on_resistance, sense.resistance, sense.position == "coil")
    assert np.allclose(lp.r_off, path.r_off, rtol=1e-12) and np.all(lp.v_off == 0.0)
    want = pwm_steady_state(duty, f, lp.v_on, lp.r_on, path.r_off, path.v_off, drive.coil.inductance)
    assert ss.ripple == pytest.approx(want.ripple, rel=1e-12) and ss.mean == pytest.approx(want.mean, rel=1e-12)
    # IEC 60028 copper at the settled temperature: T = T_a + R_th I_rms^2 R_coil(T)
    assert temp == pytest.approx(25.0 + drive.thermal.resistance * float(ss.rms[0])**2 * float(r_coil[0]), abs=1e-3)
    # a freewheel diode across the coil (the low-side circuit) would decay 0.8 V faster: the
    # sweep's hold is not that one
    diode = pwm_steady_state(duty, f, lp.v_on, lp.r_on, r_coil + sense.resistance, drive.freewheel.diode_drop,
                             drive.coil.inductance)
    assert float(diode.mean[0]) < 0.97 * float(ss.mean[0])


def test_the_best_settings_are_the_bridge_designs():
    drive = load_drive(BRIDGE)
    r = tune(drive, TuneOptions(levels=2, level_step=0.1))
    for c in r.ranked(2):
        d = design(dataclasses.replace(drive, hold=recommended_hold(drive, c)))
        assert (d.timer.period_ticks, d.timer.compare_ticks) == (c.period_ticks, c.compare_ticks), c
        assert c.min_mean_current_a == pytest.approx(d.hold.min_mean_current_a, rel=1e-12)
        assert c.max_mean_current_a == pytest.approx(d.hold.max_mean_current_a, rel=1e-12)
        assert c.coil_temp_c == pytest.approx(d.hold.coil_temp_c, rel=1e-12)
        assert c.switch_power_w == pytest.approx(d.hold.switch_power_w, rel=1e-12)
        assert c.freewheel_power_w == 0.0   # the current recirculates through the switches


def test_fit_takes_both_drive_switches_out_of_the_loop():
    from coildrive.bench.fit import fit_capture
    from coildrive.bench.synth import synth_capture
    from coildrive.design import firmware_setting

    drive = load_drive(BRIDGE)
    d = design(drive)
    duty, peak = firmware_setting(d, 24.0, 60.0)
    cap = synth_capture(drive, peak, duty, d.hold.frequency_hz, supply=24.0, coil_temp=60.0, hold_time=0.005)
    fit = fit_capture(cap, drive.board, 24.0, 60.0)
    r_sw, r_sense = drive.switch.on_resistance, drive.board.sense.resistance
    assert fit.switch_resistance_ohm == pytest.approx(2 * r_sw)
    assert fit.loop_resistance_ohm - fit.resistance_ohm == pytest.approx(2 * r_sw + r_sense, rel=1e-12)
    # IEC 60028 annealed copper at 60 degC, within 1 % (the ADC's steps)
    want = float(copper_resistance(drive.coil.resistance, drive.coil.reference_temp, 60.0))
    assert fit.resistance_ohm == pytest.approx(want, rel=0.01)
