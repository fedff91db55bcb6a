"""The closed-loop hold (``[hold] regulation = "closed_loop"``): its design figures.

References:
- the loop's crossover, phase and gain margins are recomputed with scipy.signal from
  the plant the design states (``V_g / (R_eff + s L)``): ``cont2discrete`` (zero-order
  hold over one PWM period), a one-period delay and the driver's PI as a ``dlti``, and
  the margins read off ``dfreqresp`` on a dense grid -- none of coildrive's own
  formulas;
- the settling time from scipy.signal's ``dstep`` of the closed loop's response to a
  step at the plant input;
- the sample the loop regulates (middle of the period, coil-path sense) from
  scipy.integrate's ``solve_ivp`` over the switched RL circuit at the duty the design
  says the loop settles at.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.circuit import loop
from conftest import EXAMPLES, run_cli

EXAMPLE = EXAMPLES / "dosing-valve-closed-loop.toml"


@pytest.fixture(scope="module")
def cl():
    return design(load_drive(EXAMPLE))


def _scipy_loop(plant: dict, r, frequency: float, counts: int, cpa: float):
    """The sampled loop ``C(z) z^-1 P_zoh(z)`` as a scipy dlti (codes per count)."""
    from scipy import signal
    t = 1.0 / frequency
    g = signal.lti([plant["vg_v"] * cpa / counts], [plant["inductance_h"], plant["r_eff_ohm"]])
    num_p, den_p, _ = signal.cont2discrete((g.num, g.den), t, method="zoh")
    num_p = np.trim_zeros(np.atleast_1d(np.squeeze(num_p)), "f")
    kp, ki = r.kp_q / 2**r.gain_shift, r.ki_q / 2**r.gain_shift
    num_c, den_c = [kp + ki, -kp], [1.0, -1.0]
    num = np.convolve(num_c, num_p)
    den = np.convolve(np.convolve(den_c, den_p), [1.0, 0.0])       # the one-period delay
    return signal.dlti(num, den, dt=t), (num_p, den_p, num_c, den_c)


def _scipy_margins(sys_d, frequency: float):
    from scipy import signal
    w = np.linspace(1e-5, math.pi * (1 - 1e-9), 400_000)              # rad/sample
    _, h = signal.dfreqresp(sys_d, w=w)
    mag, ph = np.abs(h), np.unwrap(np.angle(h))
    k = int(np.argmax(mag < 1.0))
    x = (0.0 - math.log(mag[k - 1])) / (math.log(mag[k]) - math.log(mag[k - 1]))
    wc = w[k - 1] + x * (w[k] - w[k - 1])
    pm = 180.0 + math.degrees(ph[k - 1] + x * (ph[k] - ph[k - 1]))
    j = int(np.argmax(ph < -math.pi))
    y = (-math.pi - ph[j - 1]) / (ph[j] - ph[j - 1])
    gm = -20 * math.log10(mag[j - 1] + y * (mag[j] - mag[j - 1]))
    return wc * frequency / (2 * math.pi), pm, gm


def test_margins_match_scipy_signal(cl):
    r = cl.hold.closed_loop
    b = cl.drive.board
    cpa = b.sense.resistance * b.sense.gain / b.adc.reference * 2**b.adc.bits
    assert {p["role"] for p in r.plants} == {"designed", "lowest crossover", "lowest phase margin",
                                             "slowest settling"}
    for p in r.plants:
        sys_d, _ = _scipy_loop(p, r, cl.timer.frequency_hz, cl.timer.period_ticks, cpa)
        fc, pm, gm = _scipy_margins(sys_d, cl.timer.frequency_hz)
        assert fc == pytest.approx(p["crossover_hz"], rel=1e-3), p["role"]
        assert pm == pytest.approx(p["phase_margin_deg"], abs=0.05), p["role"]
        assert gm == pytest.approx(p["gain_margin_db"], abs=0.05), p["role"]
    designed = next(p for p in r.plants if p["role"] == "designed")
    assert designed["crossover_hz"] == pytest.approx(r.bandwidth_hz, rel=1e-3)
    assert r.bandwidth_hz == pytest.approx(cl.timer.frequency_hz / 20)
    lowest = next(p for p in r.plants if p["role"] == "lowest phase margin")
    assert lowest["phase_margin_deg"] == pytest.approx(r.phase_margin_deg)
    assert r.phase_margin_deg >= 45.0 and r.gain_margin_db >= 6.0


def test_settling_time_matches_scipy_dstep(cl):
    from scipy import signal
    r = cl.hold.closed_loop
    b = cl.drive.board
    cpa = b.sense.resistance * b.sense.gain / b.adc.reference * 2**b.adc.bits
    p = next(p for p in r.plants if p["role"] == "slowest settling")
    _, (num_p, den_p, num_c, den_c) = _scipy_loop(p, r, cl.timer.frequency_hz, cl.timer.period_ticks, cpa)
    # disturbance at the plant input -> current: P / (1 + C z^-1 P)
    num = np.convolve(np.convolve(num_p, den_c), [1.0, 0.0])
    den = np.polyadd(np.convolve(np.convolve(den_p, den_c), [1.0, 0.0]), np.convolve(num_c, num_p))
    t = 1.0 / cl.timer.frequency_hz
    _, (y,) = signal.dstep(signal.dlti(num, den, dt=t), n=4000)
    y = np.ravel(y)
    y = y - y[-1]                       # the deviation: the integrator brings it back to zero
    y[0] = 0.0
    outside = np.flatnonzero(np.abs(y) > 0.05 * np.max(np.abs(y)))
    settle = (outside[-1] + 1) * t
    assert settle == pytest.approx(p["settling_time_s"], abs=1.01 * t)
    assert r.settling_time_s == pytest.approx(max(q["settling_time_s"] for q in r.plants))


def test_every_corner_holds_the_set_point(cl):
    """The regulated mean sits at the set-point within its quantisation at every corner:
    one code, plus the sample's distance from the mean (at most half the ripple)."""
    r = cl.hold.closed_loop
    assert r.saturated_corners == 0 and r.corners == len(cl.corners)
    for c in cl.corners:
        assert c.hold_mean_current_a >= cl.drive.hold.current - 1e-9, c.label
        assert abs(c.hold_mean_current_a - r.setpoint_a) <= r.current_lsb_a + c.hold_ripple_a / 2, c.label
        assert 0.0 < c.hold_duty <= 0.95
    # the coil's temperature follows the regulated current: the same at 20 V and 28 V
    hot = {c.supply_v: c.coil_temp_c for c in cl.corners if "(hot), R-7%, L-15%" in c.label and c.ambient_c == 50}
    assert hot[20.0] == pytest.approx(hot[28.0], abs=0.5)
    assert r.smallest_step_a == max(r.current_lsb_a, r.duty_step_current_a)


def test_sample_matches_scipy_ode(cl):
    """At the hot, low-supply corner the duty the loop settles at puts the middle-of-period
    sample at the set-point (scipy's solve_ivp over the switched circuit, two periods
    from the periodic state)."""
    from scipy.integrate import solve_ivp

    from coildrive.design.loop_duty import sample_at
    r = cl.hold.closed_loop
    c = next(c for c in cl.corners if c.label == r.max_duty_corner)
    drive = cl.drive
    lp = loop(drive, c.supply_v, c.coil_temp_c, 1.07, 1.15)
    assert float(lp.r_coil) == pytest.approx(c.resistance_ohm)
    f = cl.timer.frequency_hz
    target, ss = sample_at(r.max_duty, f, lp, False)
    assert float(target) == pytest.approx(r.setpoint_a, abs=1e-9)
    v_on, r_on, r_off, v_off, ind = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance))
    t = 1.0 / f
    t_on = r.max_duty * t

    def rhs(time, i):
        on = (time % t) < t_on
        return [(v_on - r_on * i[0]) / ind if on else -(v_off + r_off * i[0]) / ind]
    sol = solve_ivp(rhs, (0, 2 * t), [float(ss.i_min)], max_step=t / 2000, rtol=1e-10, atol=1e-12,
                    dense_output=True)
    assert sol.sol(2 * t)[0] == pytest.approx(float(ss.i_min), rel=1e-6)     # periodic
    assert sol.sol(1.5 * t)[0] == pytest.approx(r.setpoint_a, rel=1e-6)


def test_json_and_table_show_the_loop(tmp_path):
    r = run_cli("design", str(EXAMPLE), "--json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["hold"]["regulation"] == "closed_loop"
    loop_doc = doc["closed_loop"]
    for key in ("setpoint_code", "kp_q", "ki_q", "gain_shift", "crossover_hz", "phase_margin_deg",
                "gain_margin_db", "settling_time_s", "current_lsb_a", "duty_step_current_a"):
        assert key in loop_doc
    names = {c["name"] for c in doc["checks"]}
    assert {"loop_duty", "loop_phase_margin", "loop_gain_margin", "loop_fixed_point", "loop_setpoint"} <= names
    text = run_cli("design", str(EXAMPLE)).stdout
    assert "closed-loop hold" in text and "phase margin" in text and "quantisation" in text


def test_saturating_corner_is_a_failed_check(tmp_path):
    """A low supply with a hot coil: the loop needs more than its 95 % and says where."""
    text = EXAMPLE.read_text().replace('min = "20 V"', 'min = "8.5 V"').replace(
        'current = "0.18 A"', 'current = "0.24 A"')
    p = tmp_path / "low.toml"
    p.write_text(text.replace('board = "lab-m32-zener"', f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener.toml"}"'))
    r = run_cli("design", str(p), "--json")
    assert r.returncode == 1
    doc = json.loads(r.stdout)
    check = next(c for c in doc["checks"] if c["name"] == "loop_duty")
    assert not check["ok"] and "saturates" in check["detail"] and "8.5 V" in check["detail"]
    assert doc["closed_loop"]["saturated_corners"] > 0


def test_switch_leg_sense_samples_mid_on_time(tmp_path):
    text = (EXAMPLES / "relay-12v.toml").read_text().replace(
        'frequency = "20 kHz"', 'frequency = "20 kHz"\nregulation = "closed_loop"')
    p = tmp_path / "relay.toml"
    p.write_text(text)
    d = design(load_drive(p))
    r = d.hold.closed_loop
    assert r.sample_point == "middle of the on-time"
    # the least on-time (2 us) in whole counts at the timer's count rate
    rate = d.timer.clock_hz / d.timer.prescaler
    assert r.min_compare == math.ceil(2e-6 * rate - 1e-9) and r.integrator_min == r.min_compare << r.gain_shift
    assert r.min_duty > r.min_compare / d.timer.period_ticks


def test_compensated_peak_is_refused_in_one_line(tmp_path):
    text = (EXAMPLES / "demo-valve.toml").read_text().replace(
        'regulation = "supply_table"', 'regulation = "closed_loop"')
    p = tmp_path / "demo.toml"
    p.write_text(text)
    r = run_cli("design", str(p))
    assert r.returncode == 2
    assert r.stderr.strip().endswith("leave it out with regulation = \"closed_loop\"")
    assert "pull_in.compensate" in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_hottest_coil_matches_the_closed_form(cl):
    """The regulated current heats the coil as DC would (the ripple's RMS share is
    negligible here): ``T = T_amb + R_th I^2 R(T)`` with IEC 60028 copper
    (``alpha_20 = 0.00393 /K``) is linear in ``T``; the current is the strongest hold's
    sample, one code above the set-point, at the highest ambient and the R+7 % coil."""
    drive = cl.drive
    r = cl.hold.closed_loop
    c = drive.coil
    alpha = 0.00393
    amps = (r.setpoint_code + 1) * r.current_lsb_a
    r20 = c.resistance * (1 + c.resistance_tolerance) / (1 + alpha * (c.reference_temp - 20.0))
    k = drive.thermal.resistance * amps**2 * r20
    t = (drive.ambient.max + k * (1 - 20.0 * alpha)) / (1 - k * alpha)
    assert cl.hold.coil_temp_c == pytest.approx(t, abs=0.3), "IEC 60028 closed form, DC at the sample"
