"""A full bridge's closed-loop hold (``[hold] regulation = "closed_loop"`` on ``[switch]
topology = "full_bridge"``): the PI loop sets each period's compare; the on-times drive
through Q1 + Q4, the off-times recirculate through Q2 + Q4 (slow decay), the release
opens all four (fast decay into the bus).

Outside references, named beside each check (none goes through the package's loop code):

* scipy.signal: the loop's crossover, phase and gain margins from the plant the design
  states, ``cont2discrete`` (ZOH), a period's delay and the driver's PI (the helpers of
  tests/test_closed_loop.py); the plant on the slow path written out here from a corner's
  own figures (state-space averaging, Middlebrook and Cuk 1976: ``V_g = V_on + V_off -
  (R_on - R_off) I``, ``R_eff = d R_on + (1 - d) R_off`` with ``V_off = 0``);
* scipy's ``solve_ivp`` of the switched bridge written afresh at the duty the design says
  the loop settles at: the middle-of-period sample is the set-point;
* ngspice: the element-level bridge of tests/test_reference_ngspice_bridge.py driven at
  that duty (Q1 + Q4 on, Q2 + Q4 off with a dead time): the sample and the mean;
* gcc: the reference driver compiled and run in the loop with the coil model (plumbing).
"""

from __future__ import annotations

import numpy as np
import pytest

from conftest import BOARDS, require_tool, run_cli
from test_bridge_current import (bridge_variant, common_return_board, compiled_loop_checks, device_checks,
                                 simulated_phases)
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.circuit import loop

CLOSED = ('frequency = "20 kHz"\n', 'frequency = "20 kHz"\nregulation = "closed_loop"\n')


def _variant(tmp_path, *edits, name="cl.toml", board=None):
    return bridge_variant(tmp_path, CLOSED, *edits, name=name, board=board)


@pytest.fixture(scope="module")
def cl(tmp_path_factory):
    path = _variant(tmp_path_factory.mktemp("bcl"))
    return path, design(load_drive(path))


@pytest.fixture(scope="module")
def common_return(tmp_path_factory):
    """The same drive with the sense resistor in the bridge's common return (the loop
    samples the middle of the on-time; the slow decay's loop has no sense resistor)."""
    tmp = tmp_path_factory.mktemp("bclr")
    return design(load_drive(_variant(tmp, board=common_return_board(tmp))))


@pytest.mark.parametrize("which", ["inline", "common-return"])
def test_plant_on_the_slow_path_and_margins_match_scipy_signal(cl, common_return, which):
    from test_closed_loop import _scipy_loop, _scipy_margins

    d = cl[1] if which == "inline" else common_return
    r, drive = d.hold.closed_loop, d.drive
    b, sw = drive.board, drive.switch.on_resistance
    assert d.hold.regulation == "closed_loop" and d.topology.bridge.hold_decay == "slow"
    assert r.sample_point == ("middle of the period" if which == "inline" else "middle of the on-time")
    cpa = b.sense.resistance * b.sense.gain / b.adc.reference * 2**b.adc.bits
    corners = {c.label: c for c in d.corners}
    for p in r.plants:
        c = corners[p["corner"]]
        r_on = c.resistance_ohm + 2 * sw + b.sense.resistance
        r_slow = c.resistance_ohm + 2 * sw + (b.sense.resistance if which == "inline" else 0.0)
        duty = p["r_eff_ohm"] - r_slow
        duty = duty / (r_on - r_slow) if r_on != r_slow else None
        # V_g = V_on + V_off - (R_on - R_off) I with nothing opposing the slow decay (V_off = 0)
        if which == "inline":   # the same resistance on and off: V_g = V, R_eff = R_on
            assert p["vg_v"] == pytest.approx(c.supply_v, rel=1e-12) and p["r_eff_ohm"] == pytest.approx(r_on, rel=1e-12)
        else:
            assert 0.0 < duty < 0.95
            i_mean = (c.supply_v - p["vg_v"]) / (r_on - r_slow)
            assert 0.9 * drive.hold.current < i_mean < 1.2 * drive.hold.current, p["role"]
        assert p["inductance_h"] == pytest.approx(c.inductance_h, rel=1e-12)
        sys_d, _ = _scipy_loop(p, r, d.timer.frequency_hz, d.timer.period_ticks, cpa)
        fc, pm, gm = _scipy_margins(sys_d, d.timer.frequency_hz)
        assert fc == pytest.approx(p["crossover_hz"], rel=1e-3), p["role"]
        assert pm == pytest.approx(p["phase_margin_deg"], abs=0.05), p["role"]
        assert gm == pytest.approx(p["gain_margin_db"], abs=0.05), p["role"]
    assert r.phase_margin_deg >= 45.0 and r.gain_margin_db >= 6.0 and r.saturated_corners == 0
    for c in d.corners:
        assert c.hold_mean_current_a >= drive.hold.current - 1e-9, c.label
        assert abs(c.hold_mean_current_a - r.setpoint_a) <= r.current_lsb_a + c.hold_ripple_a / 2, c.label
    checks = {c.name: c for c in d.checks}
    for name in ("loop_duty", "loop_phase_margin", "loop_gain_margin", "bus_pump_up", "capacitor_voltage"):
        assert checks[name].ok, checks[name]
    assert d.release.peak_switch_voltage_v == pytest.approx(d.topology.bridge.pumped_switch_voltage_v)


def corner_loop(d, label):
    """``(corner, its Loop)``: design ``d``'s corner ``label`` with its resistance and
    inductance factors (nominal diode and sense parts)."""
    drive = d.drive
    c = next(c for c in d.corners if c.label == label)
    rf = c.resistance_ohm / float(loop(drive, c.supply_v, c.coil_temp_c).r_coil)
    lf = c.inductance_h / drive.coil.inductance
    return c, loop(drive, c.supply_v, c.coil_temp_c, rf, lf)


def ngspice_board(tmp_path):
    """The bundled bridge board with tests/test_reference_ngspice_bridge.py's switch."""
    from test_reference_ngspice_bridge import R_SW

    board = tmp_path / "bridge.toml"
    board.write_text((BOARDS / "bridge-m32-fast.toml").read_text().replace(
        'on_resistance = "40 mohm"', f'on_resistance = "{R_SW * 1e3:g} mohm"'))
    return board


def test_settled_sample_matches_solve_ivp_on_the_slow_path(cl):
    """At the corner with the most duty the loop's duty puts the middle-of-period sample at
    the set-point: scipy's solve_ivp of ``L di/dt = V - (R + 2 R_sw + R_s) i`` on and
    ``-(R + 2 R_sw + R_s) i`` off (slow decay, the inline sense resistor in the loop), two
    periods from the model's periodic state."""
    from scipy.integrate import solve_ivp
    from coildrive.design.loop_duty import sample_at

    _, d = cl
    r, drive = d.hold.closed_loop, d.drive
    c, lp = corner_loop(d, r.max_duty_corner)
    f = d.timer.frequency_hz
    target, ss = sample_at(r.max_duty, f, lp, False)
    sw, rs = drive.switch.on_resistance, drive.board.sense.resistance
    r_loop = c.resistance_ohm + 2 * sw + rs
    t, t_on = 1.0 / f, r.max_duty / f

    def rhs(time, i):
        return [(c.supply_v * ((time % t) < t_on) - r_loop * i[0]) / c.inductance_h]
    sol = solve_ivp(rhs, (0, 2 * t), [float(ss.i_min)], max_step=t / 2000, rtol=1e-10, atol=1e-12,
                    dense_output=True)
    assert sol.sol(2 * t)[0] == pytest.approx(float(ss.i_min), rel=1e-6)     # periodic
    assert sol.sol(1.5 * t)[0] == pytest.approx(float(target), rel=1e-6)
    # the sample sits in the set-point's code as the channel reads it (its tolerance ends)
    assert abs(float(target) - r.setpoint_a) <= 2 * r.current_lsb_a


@pytest.mark.ngspice
@pytest.mark.parametrize("kind", ["linear", "curve", "eddy"])
def test_settled_hold_matches_ngspice(tmp_path, kind):
    """ngspice: the element-level bridge (tests/test_reference_ngspice_bridge.py, the sense
    resistor inline) driven at the duty the designed loop settles at for those elements
    (Q1 + Q4 on; Q2 + Q4 in the off-time, Q2 closing 2 ns after Q1 opens and opening 2 ns
    before it closes: its body diode carries the dead time), started at the model's orbit
    and run ten periods: the middle-of-period sample (what the loop regulates) and the
    period's mean within 1 % (the sample also within one ADC code of the set-point). Twice:
    the linear inductor and the saturating curve of tests/test_flux_ngspice.py (ngspice's
    flux-controlled inductor started at ``psi(i_min)``; the plant at the curve's slope), and
    an eddy term (tests/test_bridge_eddy.py's resistor across the inductor: the sample and
    the mean are the terminal current's, the inductor started at the magnetising ``i_min``)."""
    from ngspice_run import run
    from test_bridge_eddy import R_E, _eddy
    from test_flux_ngspice import CURVE_I, _psi
    from test_reference_ngspice_bridge import COILS, EDGE, L_COIL, R_COIL, V_SUP, _coil_netlist, _netlist
    from coildrive.design.loop_duty import sample_at, settled_duty
    from coildrive.model import flux

    board = ngspice_board(tmp_path)
    table = ", ".join(f'"{x * 1e3:.9f} mWb"' for x in _psi(CURVE_I))
    coil = (f"flux_current = {CURVE_I}\nflux_linkage = [{table}]" if kind == "curve" else
            f'inductance = "{L_COIL * 1e3:g} mH"')
    eddy = f"\neddy_resistance = {R_E!r}" if kind == "eddy" else ""
    path = _variant(tmp_path, ('resistance = "24 ohm"', f'resistance = "{R_COIL:g} ohm"{eddy}'),
                    ('inductance = "70 mH"', coil), board=board)
    d = design(load_drive(path))
    r = d.hold.closed_loop
    duty = settled_duty(d, V_SUP, 20.0)       # the coil at its reference temperature: R_COIL
    f = d.hold.frequency_hz
    lp = loop(d.drive, V_SUP, 20.0)
    sample, ss = sample_at(duty, f, lp, False)
    period, t_on = 1.0 / f, duty / f
    n = 10

    def pulse(start, width):
        return f"PULSE(0 1 {start!r} {EDGE} {EDGE} {width - EDGE!r} {period!r})"
    gates = {1: pulse(0.0, t_on), 2: pulse(t_on + 2 * EDGE, period - t_on - 4 * EDGE), 3: "DC 0", 4: "DC 1"}
    t0 = (n - 1) * period
    measures = [f"meas tran isample FIND i(VM) AT={t0 + 0.5 * period!r}",
                f"meas tran iavg AVG i(VM) from={t0!r} to={n * period!r}"]
    text = _netlist("bridge-closed-loop", gates, n * period, period / 400, measures, inline=True)
    text = text.replace("IC=0\n", f"IC={float(ss.i_min)!r}\n")
    text = _eddy(text) if kind == "eddy" else _coil_netlist(text, COILS[kind])
    if kind == "curve":   # the flux node at psi(i_min)
        psi0 = float(np.ravel(flux.linkage(COILS[kind], float(ss.i_min)))[0])
        text = text.replace("CPHI phi 0 1 IC=0", f"CPHI phi 0 1 IC={psi0!r}")
    res = run(tmp_path, "bridge-closed-loop", text)
    print(f"bridge closed loop ({kind}) at duty {duty:.6f} vs ngspice: sample {float(sample):.6e}/{res['isample']:.6e}, "
          f"mean {float(ss.mean):.6e}/{res['iavg']:.6e} A")
    assert res["isample"] == pytest.approx(float(sample), rel=0.01)
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01)
    assert abs(res["isample"] - (r.setpoint_code + 0.5) * r.current_lsb_a) <= r.current_lsb_a


def test_simulate_and_the_virtual_device(cl, tmp_path):
    """`coildrive simulate` (a subprocess) holds at the loop's duty with the slow decay in
    the off-times and all four open after the final turn-off; the virtual device's capture
    passes `check` at the low supply with the hottest coil and the high supply cold, a
    coil 40 % over its resistance fails (plumbing: the device shares the design's model)."""
    path, d = cl
    w, _, settled = simulated_phases(path, tmp_path)
    r_cl = d.hold.closed_loop
    assert abs(float(np.mean(w["current_a"][settled])) - r_cl.setpoint_a) <= 2 * r_cl.current_lsb_a + d.hold.ripple_a / 2

    device_checks(d, tmp_path)


@pytest.mark.compiler
def test_compiled_driver_in_the_loop_holds_the_set_point(cl, tmp_path):
    """gcc builds the reference driver (its PI loop, the bridge's masks) and the coil model
    runs it: at 20 V with a 130 degC coil and at 28 V with a -10 degC one `check` passes, the
    hold mean within 0.5 % of the prediction, the release (fast, from the OFF) within 5 %."""
    require_tool("gcc")
    compiled_loop_checks(cl[1], tmp_path, 5e-3)


def test_what_a_closed_loop_bridge_refuses_is_one_line(tmp_path):
    """The sweep is refused as for one switch (mixed decay under the loop, with an eddy
    term or a curve too: tests/test_bridge_closed_loop_mixed_coils.py)."""
    r = run_cli("tune", str(_variant(tmp_path, name="t.toml")))   # as for one switch
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and "hold.regulation" in r.stderr

