"""A full bridge's current-mode hold with mixed decay (``mode = "current"``, ``control =
"off_time"``, ``fast_fraction`` > 0): each fixed off-time's first ``fast_fraction`` with all
four switches open (the current back into the bus through two body diodes), the rest
through Q2 + Q4 (slow decay).

Outside references, named beside each check (none goes through the package's loop code):

* scipy's ``solve_ivp`` (RK45, rtol 1e-10) of the three equations written afresh -- on:
  ``L di/dt = V - (R + 2 R_sw + R_s) i`` until the peak threshold (an event); fast, for
  ``fast_fraction x t_off``: ``L di/dt = -((R + R_s) i + V + 2 V_d)`` stopping at zero (an
  event: the body diodes block); slow, for the rest: ``L di/dt = -(R + 2 R_sw [+ R_s
  inline]) i`` -- run period after period to the orbit: frequency, mean and the energy
  returned per period (``V x`` the fast part's charge);
* conservation of energy over one period (common practice): the supply's energy net of
  what the fast parts return is the copper's, the sense resistor's, the switches' and the
  body diodes';
* the RL step ``i(t) = a + (i0 - a) e^(-t R / L)`` (from memory) for the simulated
  off-times.

The virtual device and the driver in the loop share the design's physics: plumbing.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from coil_span import corner_at
from conftest import run_cli
from test_bridge_current import (_variant, common_return_board, compiled_loop_checks, designed, device_checks,
                                 simulate_csv)
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.errors import InputError
from coildrive.model.circuit import loop
from coildrive.model.current_mode import off_time_steady_state
from coildrive.model.losses import element_powers
from coildrive.model.pwm import MixedDecay

HOLD = 'frequency = "20 kHz"\nmode = "current"\n'


def _mixed(tmp_path, fraction=0.3, board=None, name="mx.toml"):
    return _variant(tmp_path, (HOLD, HOLD + f'control = "off_time"\nfast_fraction = {fraction}\n'),
                    board=board, name=name)


@pytest.fixture(scope="module")
def mixed(tmp_path_factory):
    return designed(_mixed(tmp_path_factory.mktemp("bmx")))


def reference_orbit(v, r_on, r_fast, v_fast, r_slow, ell, peak, t_off, fraction):
    """``(frequency Hz, mean A, fast charge C per period)`` of the off-time orbit by scipy's
    ``solve_ivp``, the three segments written afresh (module docstring)."""
    from scipy.integrate import solve_ivp

    def on(_, y):
        return [(v - r_on * y[0]) / ell, y[0]]

    def fast(_, y):
        return [-(r_fast * y[0] + v_fast) / ell, y[0]]

    def slow(_, y):
        return [-r_slow * y[0] / ell, y[0]]

    def top(_, y):
        return y[0] - peak

    def zero(_, y):
        return y[0]
    top.terminal, top.direction = True, 1
    zero.terminal, zero.direction = True, -1
    opts = dict(rtol=1e-10, atol=1e-14)
    t_f, t_s = fraction * t_off, (1 - fraction) * t_off
    i, periods = 0.5 * peak, []
    for _ in range(40):
        a = solve_ivp(on, (0.0, 1.0), [i, 0.0], events=top, **opts)
        b = solve_ivp(fast, (0.0, t_f), [peak, 0.0], events=zero, **opts)
        i_f = max(b.y[0, -1], 0.0)
        c = solve_ivp(slow, (0.0, t_s), [i_f, 0.0], **opts) if i_f > 0 else None
        q = a.y[1, -1] + b.y[1, -1] + (0.0 if c is None else c.y[1, -1])
        period = a.t[-1] + t_off
        periods.append((period, q / period, b.y[1, -1]))
        i = 0.0 if c is None else c.y[0, -1]
    assert abs(periods[-2][0] / periods[-1][0] - 1) < 1e-9, "the orbit repeats"
    return 1.0 / periods[-1][0], periods[-1][1], periods[-1][2]


@pytest.mark.parametrize("inline", [True, False])
def test_off_time_mixed_orbit_against_solve_ivp(tmp_path, mixed, inline):
    """solve_ivp (module docstring) at the slowest and fastest corner over the coil from
    cold to settled and at the corner of the most energy returned per period: frequency,
    mean and returned energy within 1e-6 (the brief asks 1 %); the sense resistor inline
    with the coil (in every loop) and in the common return (out of the slow one)."""
    if inline:
        drive, _, d = mixed
    else:
        drive = load_drive(_mixed(tmp_path, 0.6, board=common_return_board(tmp_path)))
        d = design(drive).to_dict()
    cm, b = d["current_mode"], d["topology"]["bridge"]
    assert cm["control"] == "off_time" and b["hold_decay"] == "mixed" and b["hold_fast_fraction"] > 0
    sw, rs, vd = drive.switch.on_resistance, drive.board.sense.resistance, drive.freewheel.diode_drop
    frac = b["hold_fast_fraction"]

    def orbit(c):
        r, ell, v = c["resistance_ohm"], c["inductance_h"], c["supply_v"]
        return reference_orbit(v, r + 2 * sw + rs, r + rs, v + 2 * vd, r + 2 * sw + (rs if inline else 0.0),
                               ell, cm["upper_a"], cm["off_time_s"], frac)
    for which in ("min", "max"):
        f, mean, _ = orbit(corner_at(d, which))
        assert cm[f"{which}_frequency_hz"] == pytest.approx(f, rel=1e-6), which
    corners = {c["label"]: c for c in d["corners"]}
    c = corners[cm["min_frequency_corner"]]   # settled: the corner's figures are the settled hold's
    assert c["hold_mean_current_a"] == pytest.approx(orbit(c)[1], rel=1e-6)
    c = corners[b["hold_period_corner"]]
    assert b["returned_per_hold_period_j"] == pytest.approx(c["supply_v"] * orbit(c)[2], rel=1e-6)
    assert b["returned_per_hold_period_j"] > 0


def test_the_current_dies_in_the_fast_part_as_solve_ivp_says():
    """A long off-time, all of it fast: the body diodes block at zero and every on-time
    starts from zero (solve_ivp, module docstring); the mean and frequency within 1e-6."""
    v, r_on, r_f, r_s, ell, vf = 24.0, 30.0, 29.0, 29.6, 0.02, 25.6
    for frac in (1.0, 0.6):   # the fast decay from 0.3 A takes about 0.2 ms here
        ss = off_time_steady_state(0.3, 4e-4, v, r_on, r_s, 0.0, ell, 0.0, MixedDecay(frac, r_f, vf))
        f, mean, q_f = reference_orbit(v, r_on, r_f, vf, r_s, ell, 0.3, 4e-4, frac)
        assert bool(ss.dcm) and float(ss.i_min) == 0.0
        assert float(ss.frequency) == pytest.approx(f, rel=1e-6)
        assert float(ss.mean) == pytest.approx(mean, rel=1e-6)
        assert float(ss.charge_fast) == pytest.approx(q_f, rel=1e-6)


def test_mixed_off_time_power_balances(mixed):
    """Conservation of energy over one period (common practice): the supply's energy net
    of the fast parts' return is every element's (the body diodes ``2 V_d x`` the fast
    charge)."""
    drive = mixed[0]
    cm_doc = mixed[2]["current_mode"]
    lp = loop(drive, 24.0, 60.0)
    cm = off_time_steady_state(cm_doc["upper_a"], cm_doc["off_time_s"], lp.v_on, lp.r_on, lp.r_off,
                               lp.v_off, lp.inductance, 0.0, lp.mixed)
    loss = element_powers(drive, lp, cm.charge_on, cm.square_on, cm.charge_off, cm.square_off,
                          1.0 / cm.period, cm.i_min, cm.i_max, cm.dcm, cm.frequency,
                          charge_fast=cm.charge_fast, square_fast=cm.square_fast)
    assert float(loss.diode) == pytest.approx(2 * drive.freewheel.diode_drop * float(cm.charge_fast / cm.period))
    assert float(loss.balance_error()) == pytest.approx(0.0, abs=1e-12 * float(loss.supply))


def test_simulate_opens_all_four_for_the_fast_part_then_decays_slowly(mixed, tmp_path):
    """`coildrive simulate` (a subprocess) in the settled hold: each off-time opens all four
    for ``fast_fraction x t_off`` (the coil at ``-(V + 2 V_d) - R_s i``), then Q2 + Q4; the
    current at the end of each off-time is the RL step's (written out here) from the top."""
    drive, path, d = mixed
    w, t_off, settled, off = simulate_csv(path, tmp_path)
    t, i = w["time_s"], w["current_a"]
    cm = d["current_mode"]
    frac, t_hold = drive.hold.fast_fraction, cm["off_time_s"]
    open4 = settled & (w["high_a_on"] + w["low_a_on"] + w["high_b_on"] + w["low_b_on"] == 0)
    slow = off & (w["low_a_on"] == 1) & (w["low_b_on"] == 1)
    assert open4.sum() > 50 and slow.sum() > 50 and np.all(off == open4 | slow)
    rs, sw, vd = drive.board.sense.resistance, drive.switch.on_resistance, drive.freewheel.diode_drop
    assert w["coil_voltage_v"][open4] == pytest.approx(-(24.0 + 2 * vd) - rs * i[open4], rel=1e-6)
    # each off-time: from the turn-off at the top, fast for frac x t_off, slow for the rest
    r, ell = drive.coil.resistance, drive.coil.inductance   # 20 degC: R_ref (IEC 60028)
    edges = np.flatnonzero(settled[1:] & (w["switch_on"][:-1] == 1) & (w["switch_on"][1:] == 0))
    assert edges.size > 20
    for k in edges[1:-1]:
        i0, t0 = i[k], t[k]
        end = np.flatnonzero((t > t0) & (w["switch_on"] == 1))[0] - 1
        assert t[end] - t0 == pytest.approx(t_hold, rel=1e-9)
        fast_end = np.flatnonzero(open4[k + 1:end + 1])[-1] + k + 1
        assert t[fast_end] - t0 == pytest.approx(frac * t_hold, rel=1e-9)
        b = (24.0 + 2 * vd) / (r + rs)
        i_f = (i0 + b) * math.exp(-frac * t_hold * (r + rs) / ell) - b
        expect = i_f * math.exp(-(1 - frac) * t_hold * (r + 2 * sw + rs) / ell)
        assert i[end] == pytest.approx(expect, rel=1e-7)


def test_virtual_device_runs_it_and_check_passes(mixed, tmp_path):
    """The virtual device (the design's model). Plumbing."""
    device_checks(design(mixed[0]), tmp_path)


def test_hysteretic_mixed_decay_stays_refused_in_one_line(tmp_path):
    path = _variant(tmp_path, (HOLD, HOLD + "fast_fraction = 0.3\n"))
    with pytest.raises(InputError) as err:
        load_drive(path)
    line = str(err.value)
    assert "\n" not in line and "hold.fast_fraction" in line and 'control = "hysteretic"' in line
    r = run_cli("design", str(path))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1


@pytest.mark.compiler
def test_compiled_driver_opens_all_four_then_closes_q2_q4_in_each_off_time(mixed, tmp_path):
    """gcc -Wall -Wextra -Werror -pedantic -Wconversion builds the driver with the scripted
    program (tests/data/driver_target.c): in the hold each turn-off at the peak threshold
    opens all four with the outputs enabled and starts the one-shot for HOLD_OFF_FAST_TICKS;
    its expiry closes Q2 + Q4 and starts it for the slow rest; the next expiry drives Q1 +
    Q4 again."""
    from driver_harness import budget_script, run_host

    d = design(mixed[0])
    cm = d.hold.current_mode
    fast, slow_ticks = cm.off_fast_ticks, cm.off_ticks - cm.off_fast_ticks
    assert fast == round(0.3 * cm.off_ticks) and fast >= 2 and slow_ticks >= 2
    lines = [ln.split() for ln in run_host(tmp_path, d, budget_script(d)).lines if ln[:2] in ("s ", "g ", "o ")]
    drive, slow = 0b1001 + 16 * 0b1010, 0b1010 + 16 * 0b1010
    enabled, seen = False, []
    for k, x in enumerate(lines):
        if x[0] == "s":
            enabled = x[3] == "1"
        elif x[0] == "g" and enabled:
            seen.append(int(x[3]))
            if int(x[3]) == 0:    # a fast part: the one-shot for its counts next
                assert lines[k + 1][0] == "o" and int(lines[k + 1][3]) == fast, lines[k:k + 2]
            elif int(x[3]) == slow:
                assert lines[k + 1][0] == "o" and int(lines[k + 1][3]) == slow_ticks, lines[k:k + 2]
    cycle = [m for m in seen if m in (0, slow, drive)]
    assert cycle.count(0) >= 2 and cycle.count(slow) >= 2
    for a, b in zip(cycle, cycle[1:]):   # drive -> all open -> slow -> drive
        assert (a, b) in ((drive, 0), (0, slow), (slow, drive), (drive, drive)), (a, b)


@pytest.mark.compiler
def test_compiled_driver_in_the_loop_passes_check(mixed, tmp_path):
    """The compiled driver in the loop with the bridge's coil model (the fast path while
    the outputs are enabled with all four open): `check` passes at 20 V with a 130 degC
    coil and at 28 V with a -10 degC one, the hold mean within 0.2 % of the prediction
    (the fast part whole counts: the model takes fast_fraction x t_off) and the release
    within 5 % (plumbing: the model is the design's)."""
    compiled_loop_checks(design(mixed[0]), tmp_path, 2e-3)


def test_a_system_files_channel_refuses_it_in_one_line(tmp_path):
    """Not yet on a system file's shared rail: one line naming the key, exit 2."""
    from rail_reference import manifold_copy
    from test_system_bridge import BRIDGE

    path = manifold_copy(tmp_path)
    purge = tmp_path / "purge-valve-24v.toml"
    text = purge.read_text().split("[freewheel]")[0]
    purge.write_text(text.replace("frequency_tolerance = 0.03\n", 'frequency_tolerance = 0.03\nmode = "current"\n'
                                  'control = "off_time"\nfast_fraction = 0.3\n') + BRIDGE)
    r = run_cli("design", str(path))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "hold.fast_fraction" in r.stderr and "system file" in r.stderr


@pytest.mark.ngspice
@pytest.mark.parametrize("inline", [False, True], ids=["common-return", "inline"])
def test_off_time_mixed_orbit_drives_the_ngspice_bridge_to_its_threshold(tmp_path, inline):
    """ngspice (batch mode): the element-level bridge of tests/test_reference_ngspice_bridge.py
    (voltage-controlled switches with their body diodes, the bus behind an ammeter) driven
    with the orbit's gate pattern -- Q1 + Q4 for the model's on-time, all four open for
    ``m t_off``, Q2 + Q4 for the rest of the fixed off-time -- from the model's bottom: the
    current the on-time ends at is the peak threshold (so the model's on-time, and with the
    timed off-time its switching frequency, is ngspice's), the bottom, the mean and the
    energy back into the supply per period within 1 %."""
    from test_reference_ngspice_bridge import (L_COIL, R_COIL, R_SENSE, R_SW, V_D, V_SUP,
                                               mixed_orbit_netlist)
    from ngspice_run import run

    peak, t_off, frac = 0.4, 40e-6, 0.3
    r_on = R_COIL + 2 * R_SW + R_SENSE
    r_slow = R_COIL + 2 * R_SW + (R_SENSE if inline else 0.0)
    ss = off_time_steady_state(peak, t_off, V_SUP, r_on, r_slow, 0.0, L_COIL, 0.0,
                               MixedDecay(frac, R_COIL + R_SENSE, V_SUP + 2 * V_D))
    text = mixed_orbit_netlist("bridge-cm-mixed", float(ss.t_on), frac * t_off, float(ss.period),
                               float(ss.i_min), inline)
    res = run(tmp_path, "bridge-cm-mixed", text)
    print(f"current-mode mixed orbit vs ngspice: top {peak:.6e}/{res['imax']:.6e}, bottom {float(ss.i_min):.6e}/"
          f"{res['imin']:.6e}, mean {float(ss.mean):.6e}/{res['iavg']:.6e} A, back "
          f"{V_SUP * float(ss.charge_fast):.6e}/{res['eback']:.6e} J")
    assert not bool(ss.dcm) and float(ss.i_max) == pytest.approx(peak)
    assert res["imax"] == pytest.approx(peak, rel=0.01), res["imax"]
    assert res["imin"] == pytest.approx(float(ss.i_min), rel=0.01), (res["imin"], float(ss.i_min))
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01), (res["iavg"], float(ss.mean))
    assert res["eback"] == pytest.approx(V_SUP * float(ss.charge_fast), rel=0.01)


@pytest.mark.slow
def test_firmware_driver_emulate_capture_check_over_a_real_pty(mixed, tmp_path, monkeypatch):
    """As a user runs it, each a real subprocess: firmware-driver -> emulate --firmware ->
    capture -> check passes the hold and the release. Plumbing."""
    from test_bridge_current import pty_check

    pty_check(tmp_path, monkeypatch, mixed[1])
