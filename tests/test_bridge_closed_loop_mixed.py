"""A full bridge's closed-loop hold with mixed decay (``[hold] regulation = "closed_loop"``
and ``fast_fraction``): the PI loop sets each period's compare as in
tests/test_bridge_closed_loop.py, and each off-time starts fast (all four open, the current
back into the bus through two body diodes) for ``fast_fraction`` of the off-time the loop's
compare leaves, then decays slowly (Q2 + Q4) -- the voltage-mode mixed orbit at the loop's
duty.

Outside references, named beside each check (none goes through the package's loop code):

* scipy's ``solve_ivp`` of the three switched segments written afresh (on, fast with the
  diodes blocking at zero, slow) at the duty the design says the loop settles at: the
  orbit is periodic and its middle-of-period sample is what the loop regulates;
* scipy.signal: the crossover and margins from the averaged plant the design states
  (tests/test_closed_loop.py's helpers);
* ngspice: the element-level bridge of tests/test_reference_ngspice_bridge.py driven with
  its mixed-decay gate pattern at that duty: the sample and the mean within 1 %;
* gcc: the reference driver compiled and run in the loop with the coil model (plumbing).
"""

from __future__ import annotations

import numpy as np
import pytest

from conftest import require_tool, run_cli
from test_bridge_closed_loop import corner_loop, ngspice_board
from test_bridge_current import (bridge_variant, common_return_board, compiled_loop_checks, device_checks,
                                 simulate_csv)
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.circuit import loop

FRACTION = 0.3
MIXED = ('frequency = "20 kHz"\n', f'frequency = "20 kHz"\nregulation = "closed_loop"\nfast_fraction = {FRACTION}\n')


def _variant(tmp_path, *edits, name="clm.toml", board=None):
    return bridge_variant(tmp_path, MIXED, *edits, name=name, board=board)


@pytest.fixture(scope="module")
def clm(tmp_path_factory):
    path = _variant(tmp_path_factory.mktemp("bclm"))
    return path, design(load_drive(path))


@pytest.fixture(scope="module")
def clm_return(tmp_path_factory):
    """The same drive with the sense resistor in the bridge's common return (the loop
    samples the middle of the on-time; the slow decay's loop has no sense resistor)."""
    tmp = tmp_path_factory.mktemp("bclmr")
    return design(load_drive(_variant(tmp, board=common_return_board(tmp))))


def test_common_return_sample_matches_solve_ivp(clm_return):
    """With the sense resistor in the common return the loop samples the middle of the
    on-time: scipy's solve_ivp of the three segments (``R + 2 R_sw + R_s`` on, ``R + R_s``
    against ``V + 2 V_d`` fast -- the diodes' current through the return resistor --,
    ``R + 2 R_sw`` slow) at the most-duty corner's settled duty: periodic, and the sample
    there within 1e-5 and in the set-point's code."""
    d = clm_return
    r = d.hold.closed_loop
    assert r.sample_point == "middle of the on-time" and d.topology.bridge.hold_decay == "mixed"
    _three_segments(d, r.max_duty_corner, r.max_duty, switch_leg=True)
    assert r.phase_margin_deg >= 45.0 and r.gain_margin_db >= 6.0 and r.saturated_corners == 0


def _three_segments(d, label, duty, switch_leg=False):
    """solve_ivp of the bridge's three segments at corner ``label`` and ``duty``, two
    periods from the model's periodic state: ``(sample A, solve_ivp's, t_on, t_fast, T,
    steady state)``, the orbit asserted periodic and the sample equal within 1e-5."""
    from scipy.integrate import solve_ivp
    from coildrive.design.loop_duty import sample_at

    drive = d.drive
    c, lp = corner_loop(d, label)
    f = d.timer.frequency_hz
    target, ss = sample_at(duty, f, lp, switch_leg)
    sw, rs, vd = drive.switch.on_resistance, drive.board.sense.resistance, drive.freewheel.diode_drop
    r_on, r_fast, v_fast = c.resistance_ohm + 2 * sw + rs, c.resistance_ohm + rs, c.supply_v + 2 * vd
    r_slow = r_on - (rs if switch_leg else 0.0)
    t = 1.0 / f
    t_on = duty * t
    t_fast = FRACTION * (t - t_on)

    def rhs(time, i):
        x = time % t
        if x < t_on:
            return [(c.supply_v - r_on * i[0]) / c.inductance_h]
        if x < t_on + t_fast:
            return [-(v_fast + r_fast * i[0]) / c.inductance_h if i[0] > 0 else 0.0]
        return [-r_slow * i[0] / c.inductance_h]
    sol = solve_ivp(rhs, (0, 2 * t), [float(ss.i_min)], max_step=t / 4000, rtol=1e-10, atol=1e-12,
                    dense_output=True)
    at = t + (0.5 * t_on if switch_leg else 0.5 * t)
    got = sol.sol(at)[0]
    print(f"duty {duty:.5f} at {label}: sample {float(target):.6e} vs solve_ivp {got:.6e} A")
    assert sol.sol(2 * t)[0] == pytest.approx(float(ss.i_min), rel=1e-5)     # periodic
    assert got == pytest.approx(float(target), rel=1e-5)
    if switch_leg:
        r = d.hold.closed_loop
        assert abs(float(target) - r.setpoint_a) <= 2 * r.current_lsb_a
    return float(target), t_on, t_fast, t, ss


@pytest.mark.parametrize("which", ["max_duty", "min_duty", "slow_part"])
def test_settled_sample_matches_solve_ivp_through_the_fast_part(clm, which):
    """At the corners with the most and the least duty the loop's duty puts the
    middle-of-period sample at the set-point: scipy's solve_ivp of ``L di/dt = V - (R +
    2 R_sw + R_s) i`` on, ``-(V + 2 V_d) - (R + R_s) i`` for ``fast_fraction`` of the
    off-time (the body diodes block at zero), ``-(R + 2 R_sw + R_s) i`` for the rest (the
    inline sense resistor in every loop), two periods from the model's periodic state.
    There the sample falls in the fast part; ``slow_part``: the sample function at a duty
    of 0.25 (the most-duty corner), where it falls in the slow part (the orbit still continuous)."""
    _, d = clm
    r = d.hold.closed_loop
    assert d.hold.regulation == "closed_loop" and d.topology.bridge.hold_decay == "mixed"
    assert r.sample_point == "middle of the period"
    label, duty = (r.min_duty_corner, r.min_duty) if which == "min_duty" else (r.max_duty_corner, r.max_duty)
    duty = 0.25 if which == "slow_part" else duty
    target, t_on, t_fast, t, ss = _three_segments(d, label, duty)
    assert (0.5 * t > t_on + t_fast) == (which == "slow_part") and 0.5 * t > t_on and not ss.dcm
    if which != "slow_part":   # the sample sits in the set-point's code as the channel reads it
        assert abs(float(target) - r.setpoint_a) <= 2 * r.current_lsb_a


def test_averaged_plant_and_margins_match_scipy_signal(clm):
    """The loop's plant averages the three segments (``R_off = phi R_fast + (1 - phi)
    R_slow``, ``V_off = phi V_fast``): ``R_eff`` lies between the on and the averaged off
    resistance; the crossover and margins from scipy.signal (ZOH, a period's delay, the
    driver's PI) agree with the design's; every corner holds the current."""
    from test_closed_loop import _scipy_loop, _scipy_margins

    path, d = clm
    r, drive = d.hold.closed_loop, d.drive
    b, sw = drive.board, drive.switch.on_resistance
    cpa = b.sense.resistance * b.sense.gain / b.adc.reference * 2**b.adc.bits
    corners = {c.label: c for c in d.corners}
    for p in r.plants:
        c = corners[p["corner"]]
        r_on = c.resistance_ohm + 2 * sw + b.sense.resistance
        r_off = FRACTION * (c.resistance_ohm + b.sense.resistance) + (1 - FRACTION) * r_on
        assert r_off - 1e-12 <= p["r_eff_ohm"] <= r_on + 1e-12, p["role"]
        # V_g = V_on + phi (V + 2 V_d) - (R_on - R_off) I: more than the bus alone
        assert c.supply_v * (1 + FRACTION) < p["vg_v"] < c.supply_v * (1 + FRACTION) + 2 * FRACTION * 1.5
        sys_d, _ = _scipy_loop(p, r, d.timer.frequency_hz, d.timer.period_ticks, cpa)
        fc, pm, gm = _scipy_margins(sys_d, d.timer.frequency_hz)
        assert fc == pytest.approx(p["crossover_hz"], rel=1e-3), p["role"]
        assert pm == pytest.approx(p["phase_margin_deg"], abs=0.05), p["role"]
        assert gm == pytest.approx(p["gain_margin_db"], abs=0.05), p["role"]
    assert r.phase_margin_deg >= 45.0 and r.gain_margin_db >= 6.0 and r.saturated_corners == 0
    for c in d.corners:
        assert c.hold_mean_current_a >= drive.hold.current - 1e-9, c.label
    assert d.topology.bridge.returned_per_hold_period_j > 0
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    assert '"hold_decay": "mixed"' in r.stdout and '"regulation": "closed_loop"' in r.stdout


@pytest.mark.ngspice
def test_settled_mixed_hold_matches_ngspice(tmp_path):
    """ngspice: the element-level bridge (the sense resistor inline) driven with the
    mixed-decay gate pattern (tests/test_reference_ngspice_bridge.py's ``_mixed_gates``) at
    the duty the designed loop settles at for those elements, started on the model's orbit
    and run ten periods: the middle-of-period sample and the period's mean within 1 %, the
    sample within one ADC code of the set-point's middle."""
    from ngspice_run import run
    from test_reference_ngspice_bridge import L_COIL, R_COIL, V_SUP, _mixed_gates, _netlist
    from coildrive.design.loop_duty import sample_at, settled_duty

    path = _variant(tmp_path, ('resistance = "24 ohm"', f'resistance = "{R_COIL:g} ohm"'),
                    ('inductance = "70 mH"', f'inductance = "{L_COIL * 1e3:g} mH"'),
                    board=ngspice_board(tmp_path))
    d = design(load_drive(path))
    r = d.hold.closed_loop
    duty = settled_duty(d, V_SUP, 20.0)       # the coil at its reference temperature: R_COIL
    f = d.hold.frequency_hz
    sample, ss = sample_at(duty, f, loop(d.drive, V_SUP, 20.0), False)
    period, t_on = 1.0 / f, duty / f
    n = 10
    t0 = (n - 1) * period
    measures = [f"meas tran isample FIND i(VM) AT={t0 + 0.5 * period!r}",
                f"meas tran iavg AVG i(VM) from={t0!r} to={n * period!r}"]
    text = _netlist("bridge-closed-loop-mixed", _mixed_gates(t_on, FRACTION * (period - t_on), period),
                    n * period, period / 400, measures, inline=True)
    res = run(tmp_path, "bridge-closed-loop-mixed", text.replace("IC=0\n", f"IC={float(ss.i_min)!r}\n"))
    print(f"bridge closed loop mixed at duty {duty:.6f} vs ngspice: sample {float(sample):.6e}/"
          f"{res['isample']:.6e}, mean {float(ss.mean):.6e}/{res['iavg']:.6e} A")
    assert res["isample"] == pytest.approx(float(sample), rel=0.01)
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01)
    assert abs(res["isample"] - (r.setpoint_code + 0.5) * r.current_lsb_a) <= r.current_lsb_a


def test_simulate_and_the_virtual_device(clm, tmp_path):
    """`coildrive simulate` (a subprocess) holds at the set-point with both decays in the
    off-times (all four open first, then Q2 + Q4); the virtual device's capture passes
    `check` at the two ends of the envelope, a coil 40 % over its resistance fails
    (plumbing: the device shares the design's model)."""
    path, d = clm
    w, _, settled, off = simulate_csv(path, tmp_path)
    fast = off & (w["low_a_on"] + w["low_b_on"] + w["high_a_on"] + w["high_b_on"] == 0)
    slow = off & (w["low_a_on"] == 1) & (w["low_b_on"] == 1)
    assert fast.sum() > 20 and slow.sum() > 20 and (fast | slow).sum() == off.sum()
    r_cl = d.hold.closed_loop
    assert abs(float(np.mean(w["current_a"][settled])) - r_cl.setpoint_a) <= 2 * r_cl.current_lsb_a + d.hold.ripple_a / 2
    device_checks(d, tmp_path)


@pytest.mark.compiler
def test_compiled_driver_in_the_loop_holds_the_set_point(clm, tmp_path):
    """gcc builds the reference driver (its PI step, the fast part's end of each compare
    through coil_port_fast_end, the bridge's masks) and the coil model runs it, decaying
    fast to the driver's count: at 20 V with a 130 degC coil and at 28 V with a -10 degC one
    `check` passes, the hold mean within 0.5 % of the prediction, the release within 5 %
    (plumbing: the device shares the design's model)."""
    require_tool("gcc")
    compiled_loop_checks(clm[1], tmp_path, 5e-3)
