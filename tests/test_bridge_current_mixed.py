"""A full bridge's current-mode hold with mixed decay (``mode = "current"``,
``fast_fraction`` > 0): under the fixed off-time (``control = "off_time"``) each off-time's
first ``fast_fraction`` with all four switches open (the current back into the bus through
two body diodes), the rest through Q2 + Q4 (slow decay); under hysteretic control each
off-time all four open for a one-shot's fixed time (``fast_fraction`` x the slow-decay
off-time at the nominal point), or to the lower threshold if sooner, then Q2 + Q4.

Outside references, named beside each check (none goes through the package's loop code):

* scipy's ``solve_ivp`` (RK45, rtol 1e-10) of the three equations written afresh -- on:
  ``L di/dt = V - (R + 2 R_sw + R_s) i`` until the peak (upper) threshold (an event); fast:
  ``L di/dt = -((R + R_s) i + V + 2 V_d)`` stopping at zero (the body diodes block) or, hysteretic,
  at the lower threshold (events); slow: ``L di/dt = -(R + 2 R_sw [+ R_s inline]) i`` -- the
  orbit's frequency, mean and the energy returned per period (``V x`` the fast part's charge);
* ngspice (batch mode): the element-level bridge of tests/test_reference_ngspice_bridge.py
  driven with the orbit's gate pattern, the currents at the thresholds, the mean and the
  energy back into the supply;
* conservation of energy over one period (common practice): the supply's energy net of
  what the fast parts return is the copper's, the sense resistor's, the switches' and the
  body diodes';
* the RL step ``i(t) = a + (i0 - a) e^(-t R / L)`` (from memory) for the simulated
  off-times.

The virtual device and the driver in the loop share the design's physics: plumbing.
"""

from __future__ import annotations

import json
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
from coildrive.model.current_mode import hysteretic_steady_state, off_time_steady_state
from coildrive.model.losses import element_powers
from coildrive.model.pwm import MixedDecay

HOLD = 'frequency = "20 kHz"\nmode = "current"\n'
#: s, the CSV's time resolution about 26 ms in (10 significant digits)
CSV_TIME = 1e-10


def _mixed(tmp_path, fraction=0.3, board=None, name="mx.toml"):
    return _variant(tmp_path, (HOLD, HOLD + f'control = "off_time"\nfast_fraction = {fraction}\n'),
                    board=board, name=name)


@pytest.fixture(scope="module")
def mixed(tmp_path_factory):
    return designed(_mixed(tmp_path_factory.mktemp("bmx")))


def segments(v, r_on, r_fast, v_fast, r_slow, ell):
    """The three segments' right-hand sides for ``solve_ivp``, written afresh (module
    docstring): ``y = (i, int i dt)``; and a crossing event of a level, falling or rising."""
    def on(_, y):
        return [(v - r_on * y[0]) / ell, y[0]]

    def fast(_, y):
        return [-(r_fast * y[0] + v_fast) / ell, y[0]]

    def slow(_, y):
        return [-r_slow * y[0] / ell, y[0]]

    def crossing(level, direction):
        def event(_, y):
            return y[0] - level
        event.terminal, event.direction = True, direction
        return event
    return on, fast, slow, crossing


OPTS = dict(rtol=1e-10, atol=1e-14)


def reference_orbit(v, r_on, r_fast, v_fast, r_slow, ell, peak, t_off, fraction):
    """``(frequency Hz, mean A, fast charge C per period)`` of the off-time orbit by scipy's
    ``solve_ivp``, the three segments written afresh (module docstring)."""
    from scipy.integrate import solve_ivp

    on, fast, slow, crossing = segments(v, r_on, r_fast, v_fast, r_slow, ell)
    top, zero, opts = crossing(peak, 1), crossing(0.0, -1), OPTS
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


def reference_hysteretic(v, r_on, r_fast, v_fast, r_slow, ell, lo, hi, t_fast):
    """``(frequency Hz, mean A, fast charge C per period)`` of the hysteretic orbit by
    scipy's ``solve_ivp``, the three segments written afresh: on from ``lo`` to ``hi`` (an
    event), fast for ``t_fast`` s or down to ``lo`` (an event), then slow down to ``lo``."""
    from scipy.integrate import solve_ivp

    on, fast, slow, crossing = segments(v, r_on, r_fast, v_fast, r_slow, ell)
    top, bottom, opts = crossing(hi, 1), crossing(lo, -1), OPTS
    a = solve_ivp(on, (0.0, 1.0), [lo, 0.0], events=top, **opts)
    b = solve_ivp(fast, (0.0, t_fast), [hi, 0.0], events=bottom, **opts)
    q, period = a.y[1, -1] + b.y[1, -1], a.t[-1] + b.t[-1]
    if b.y[0, -1] > lo * (1 + 1e-9):   # the fast part over before the lower threshold
        c = solve_ivp(slow, (0.0, 1.0), [b.y[0, -1], 0.0], events=bottom, **opts)
        q, period = q + c.y[1, -1], period + c.t[-1]
    return 1.0 / period, q / period, b.y[1, -1]


@pytest.mark.parametrize("edit", ['fast_fraction = 0.1\nband = "6 mA"\nmin_frequency = "5 kHz"\n',
                                  "fast_fraction = 0.3\n"], ids=["fast-then-slow", "all-fast"])
def test_hysteretic_mixed_orbit_against_solve_ivp(tmp_path, edit):
    """Hysteretic control, each off-time fast for the one-shot's fixed time (or to the lower
    threshold, if sooner), then slow: solve_ivp (:func:`reference_hysteretic`) at the
    slowest and fastest corner over the coil from cold to settled, the mean at the settled
    one and the energy returned per period at its corner, within 1e-6."""
    drive = load_drive(_variant(tmp_path, (HOLD, HOLD + edit)))
    d = design(drive).to_dict()
    cm, b = d["current_mode"], d["topology"]["bridge"]
    assert cm["control"] == "hysteretic" and b["hold_decay"] == "mixed"
    sw, rs, vd = drive.switch.on_resistance, drive.board.sense.resistance, drive.freewheel.diode_drop
    assert cm["fast_time_s"] == pytest.approx(cm["off_fast_ticks"] * cm["off_prescaler"] / drive.board.timer.clock)

    def orbit(c):
        r, ell, v = c["resistance_ohm"], c["inductance_h"], c["supply_v"]
        return reference_hysteretic(v, r + 2 * sw + rs, r + rs, v + 2 * vd, r + 2 * sw + rs, ell,
                                    cm["lower_a"], cm["upper_a"], cm["fast_time_s"])
    for which in ("min", "max"):
        assert cm[f"{which}_frequency_hz"] == pytest.approx(orbit(corner_at(d, which))[0], rel=1e-6), which
    corners = {c["label"]: c for c in d["corners"]}
    c = corners[cm["min_frequency_corner"]]
    assert c["hold_mean_current_a"] == pytest.approx(orbit(c)[1], rel=1e-6)
    c = corners[b["hold_period_corner"]]
    assert b["returned_per_hold_period_j"] == pytest.approx(c["supply_v"] * orbit(c)[2], rel=1e-6)


def reference_delayed(control, v, r_on, r_fast, v_fast, r_slow, ell, lo, hi, t_fast, t_off, delay):
    """``(frequency Hz, mean A, fast charge C)`` of either control's orbit with a sense delay
    (the switch follows each threshold ``delay`` s late), by ``solve_ivp`` period after
    period: on to ``hi`` (an event) and ``delay`` more; off along the path -- fast for
    ``t_fast`` s (stopping at zero), then slow -- for ``t_off`` s, or hysteretic to ``lo``
    (an event on the path) and ``delay`` more."""
    from scipy.integrate import solve_ivp

    on, fast, slow, crossing = segments(v, r_on, r_fast, v_fast, r_slow, ell)

    def path(i0, t_end, level=None):
        """Along the off path from ``i0`` for ``t_end`` s or to ``level``: ``(t, i, q, q_fast)``."""
        events = [crossing(0.0, -1)] + ([crossing(level, -1)] if level is not None else [])
        b = solve_ivp(fast, (0.0, min(t_end, t_fast)), [i0, 0.0], events=events, **OPTS)
        if level is not None and b.t_events[1].size:
            return b.t[-1], b.y[0, -1], b.y[1, -1], b.y[1, -1]
        i_f = 0.0 if b.t_events[0].size else b.y[0, -1]
        if t_end <= t_fast or i_f == 0.0:
            return (t_end if level is None else math.inf), i_f, b.y[1, -1], b.y[1, -1]
        c = solve_ivp(slow, (0.0, t_end - t_fast), [i_f, 0.0], events=events[1:], **OPTS)
        return t_fast + c.t[-1], c.y[0, -1], b.y[1, -1] + c.y[1, -1], b.y[1, -1]

    i, periods = lo, []
    for _ in range(40):
        a = solve_ivp(on, (0.0, 1.0), [i, 0.0], events=crossing(hi, 1), **OPTS)
        d = solve_ivp(on, (0.0, delay), [hi, 0.0], **OPTS)
        top, t_on, q_on = d.y[0, -1], a.t[-1] + delay, a.y[1, -1] + d.y[1, -1]
        off = t_off if control == "off_time" else path(top, 1.0, lo)[0] + delay
        _, i, q, q_f = path(top, off)
        periods.append((t_on + off, (q_on + q) / (t_on + off), q_f))
    assert abs(periods[-2][0] / periods[-1][0] - 1) < 1e-9, "the orbit repeats"
    return 1.0 / periods[-1][0], periods[-1][1], periods[-1][2]


@pytest.mark.parametrize("control, t_fast", [("off_time", 0.3), ("hysteretic", 3e-6), ("hysteretic", 30e-6)],
                         ids=["off-time", "hysteretic-fast-then-slow", "hysteretic-all-fast"])
def test_a_sense_delay_runs_on_along_the_path_as_solve_ivp_says(control, t_fast):
    """A 2 us sense delay: the switch opens that long after the upper (peak) threshold and,
    hysteretic, turns on that long after the lower one, the current running on along the
    path it is on (solve_ivp, :func:`reference_delayed`); frequency, mean and fast charge
    within 1e-6. Element values invented (a 24 V, 69 mH coil on the bridge)."""
    v, r_on, r_f, r_s, ell, vf, delay = 24.0, 26.17, 26.1, 26.17, 0.069, 25.6, 2e-6
    lo, hi, t_off = 0.39, 0.4, 40e-6
    mixed = MixedDecay(0.3 if control == "off_time" else 0.5, r_f, vf)
    if control == "off_time":
        ss = off_time_steady_state(hi, t_off, v, r_on, r_s, 0.0, ell, delay, mixed)
        ref = reference_delayed(control, v, r_on, r_f, vf, r_s, ell, lo, hi, t_fast * t_off, t_off, delay)
    else:
        ss = hysteretic_steady_state(lo, hi, v, r_on, r_s, 0.0, ell, delay, t_fast, mixed)
        ref = reference_delayed(control, v, r_on, r_f, vf, r_s, ell, lo, hi, t_fast, 0.0, delay)
    assert float(ss.frequency) == pytest.approx(ref[0], rel=1e-6)
    assert float(ss.mean) == pytest.approx(ref[1], rel=1e-6)
    assert float(ss.charge_fast) == pytest.approx(ref[2], rel=1e-6)


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
        assert t[end] - t0 == pytest.approx(t_hold, abs=CSV_TIME)
        fast_end = np.flatnonzero(open4[k + 1:end + 1])[-1] + k + 1
        assert t[fast_end] - t0 == pytest.approx(frac * t_hold, abs=CSV_TIME)
        b = (24.0 + 2 * vd) / (r + rs)
        i_f = (i0 + b) * math.exp(-frac * t_hold * (r + rs) / ell) - b
        expect = i_f * math.exp(-(1 - frac) * t_hold * (r + 2 * sw + rs) / ell)
        assert i[end] == pytest.approx(expect, rel=1e-7)


def test_virtual_device_runs_it_and_check_passes(mixed, tmp_path):
    """The virtual device (the design's model). Plumbing."""
    device_checks(design(mixed[0]), tmp_path)


def test_what_current_mode_mixed_decay_refuses_is_one_line(tmp_path):
    """A boosted peak with an [armature]: one line naming the key (an eddy term, a curve,
    both, the drooping bus, an [armature], a boosted peak are designed:
    tests/test_bridge_current_mixed_eddy.py, _droop.py, _curve.py, _droop_coils.py,
    _armature.py, test_boost_bridge_current_mixed.py)."""
    from test_bridge_armature import ARMATURE

    boost = ('capacitor_voltage = "50 V"', 'capacitor_voltage = "50 V"\nboost = "48 V"\n'
             'boost_capacitance = "100 uF"\nboost_resistance = "0.1 ohm"\nboost_power = "5 W"')
    path = _variant(tmp_path, (HOLD, HOLD + "fast_fraction = 0.3\n"), boost, ("[ambient]\n", ARMATURE + "\n[ambient]\n"))
    with pytest.raises(InputError) as err:
        load_drive(path)
    line = str(err.value)
    assert "\n" not in line and "hold.fast_fraction" in line and "a boosted peak and an [armature]" in line
    assert str(path) in line
    r = run_cli("design", str(path))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr


@pytest.mark.compiler
def test_compiled_driver_opens_all_four_then_closes_q2_q4_in_each_off_time(mixed, tmp_path):
    """gcc -Wall -Wextra -Werror -pedantic -Wconversion builds the driver with the scripted
    program (tests/data/driver_target.c): in the hold each turn-off at the peak threshold
    opens all four with the outputs enabled and starts the one-shot for HOLD_OFF_FAST_TICKS;
    its expiry closes Q2 + Q4 and starts it for the slow rest; the next expiry drives Q1 +
    Q4 again."""
    d = design(mixed[0])
    cm = d.hold.current_mode
    fast, slow_ticks = cm.off_fast_ticks, cm.off_ticks - cm.off_fast_ticks
    assert fast == round(0.3 * cm.off_ticks) and fast >= 2 and slow_ticks >= 2
    seen = hook_masks(tmp_path, d, slow_ticks)
    for a, b in zip(seen, seen[1:]):   # drive -> all open -> slow -> drive
        assert (a, b) in ((DRIVE, 0), (0, SLOW), (SLOW, DRIVE), (DRIVE, DRIVE)), (a, b)


#: The bridge's masks as the scripted program logs them: on-time + 16 x off-time masks.
DRIVE, SLOW = 0b1001 + 16 * 0b1010, 0b1010 + 16 * 0b1010


def hook_masks(tmp_path, d, after_slow: int | None) -> list[int]:
    """gcc's build of design ``d``'s driver with the scripted program: the masks set with
    the outputs enabled, in order; each all-open one is followed by the one-shot for the
    fast part's counts, each slow one by ``after_slow`` counts (``None``: by none)."""
    from driver_harness import budget_script, run_host

    fast = d.hold.current_mode.off_fast_ticks
    lines = [ln.split() for ln in run_host(tmp_path, d, budget_script(d)).lines if ln[:2] in ("s ", "g ", "o ")]
    enabled, seen = False, []
    for k, x in enumerate(lines):
        if x[0] == "s":
            enabled = x[3] == "1"
        elif x[0] == "g" and enabled:
            seen.append(int(x[3]))
            follow = {0: fast, SLOW: after_slow}.get(int(x[3]))
            if follow is not None:
                assert lines[k + 1][0] == "o" and int(lines[k + 1][3]) == follow, lines[k:k + 2]
        elif x[0] == "o":
            assert int(x[3]) in (fast, after_slow)
    assert seen.count(0) >= 2 and seen.count(SLOW) >= 2 and set(seen) <= {0, SLOW, DRIVE}
    return seen


@pytest.mark.compiler
def test_compiled_driver_in_the_loop_passes_check(mixed, tmp_path):
    """The compiled driver in the loop with the bridge's coil model (the fast path while
    the outputs are enabled with all four open): `check` passes at 20 V with a 130 degC
    coil and at 28 V with a -10 degC one, the hold mean within 0.2 % of the prediction
    (the fast part whole counts: the model takes fast_fraction x t_off) and the release
    within 5 % (plumbing: the model is the design's)."""
    compiled_loop_checks(design(mixed[0]), tmp_path, 2e-3)


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


HYST = 'fast_fraction = 0.1\nband = "6 mA"\nmin_frequency = "5 kHz"\n'


@pytest.fixture(scope="module")
def hyst_mixed(tmp_path_factory):
    """Hysteretic control whose off-times end in the slow part at every corner here."""
    return designed(_variant(tmp_path_factory.mktemp("bhx"), (HOLD, HOLD + HYST), name="hx.toml"))


def test_simulated_hysteretic_off_times_are_fast_for_the_one_shot_then_slow(hyst_mixed, tmp_path):
    """`coildrive simulate` (a subprocess) in the settled hold: each off-time all four open
    for the one-shot's time, then Q2 + Q4 down to the lower threshold, where the switch
    turns on; the current at the fast part's end is the RL step's (written out here)."""
    drive, path, d = hyst_mixed
    w, t_off, settled, off = simulate_csv(path, tmp_path)
    t, i, on = w["time_s"], w["current_a"], w["switch_on"]
    cm = d["current_mode"]
    open4 = settled & (w["high_a_on"] + w["low_a_on"] + w["high_b_on"] + w["low_b_on"] == 0)
    assert open4.sum() > 50 and (off & ~open4).sum() > 50
    rs, vd = drive.board.sense.resistance, drive.freewheel.diode_drop
    r, ell = drive.coil.resistance, drive.coil.inductance   # 20 degC: R_ref (IEC 60028)
    edges = np.flatnonzero(settled[1:] & (on[:-1] == 1) & (on[1:] == 0))
    assert edges.size > 20
    for k in edges[1:-1]:
        end = np.flatnonzero((t > t[k]) & (on == 1))[0] - 1
        fast_end = np.flatnonzero(open4[k + 1:end + 1])[-1] + k + 1
        assert t[fast_end] - t[k] == pytest.approx(cm["fast_time_s"], abs=CSV_TIME)
        b = (24.0 + 2 * vd) / (r + rs)
        assert i[fast_end] == pytest.approx((i[k] + b) * math.exp(-cm["fast_time_s"] * (r + rs) / ell) - b, rel=1e-7)
        assert i[end] == pytest.approx(cm["lower_a"], rel=1e-9)


def test_hysteretic_virtual_device_runs_it_and_check_passes(hyst_mixed, tmp_path):
    """The virtual device (the design's model). Plumbing."""
    device_checks(design(hyst_mixed[0]), tmp_path)


@pytest.mark.compiler
def test_compiled_hysteretic_driver_times_the_fast_part_with_the_one_shot(hyst_mixed, tmp_path):
    """gcc -Wall -Wextra -Werror -pedantic -Wconversion (tests/data/driver_target.c): each
    turn-off at the upper threshold opens all four with the outputs enabled and starts the
    one-shot for HOLD_OFF_FAST_TICKS; its expiry closes Q2 + Q4; the lower threshold drives
    Q1 + Q4 again (cutting a fast part short where it comes first)."""
    seen = hook_masks(tmp_path, design(hyst_mixed[0]), None)
    # drive -> all open -> (slow ->) drive; the harness's comparator is level-sensitive, so
    # with the current still above the upper threshold after the peak a slow part trips it
    # again (slow -> all open)
    pairs = list(zip(seen, seen[1:]))
    for a, b in pairs:
        assert (a, b) in ((DRIVE, 0), (0, SLOW), (0, DRIVE), (SLOW, DRIVE), (DRIVE, DRIVE), (SLOW, 0)), (a, b)
    assert (0, DRIVE) in pairs or (SLOW, DRIVE) in pairs


@pytest.mark.compiler
def test_compiled_hysteretic_driver_in_the_loop_passes_check(hyst_mixed, tmp_path):
    """The compiled driver in the loop (the one-shot's expiry and the comparator stepped
    with the coil: the fast path while all four are open with the outputs enabled): `check`
    passes at both ends (plumbing: the model is the design's)."""
    compiled_loop_checks(design(hyst_mixed[0]), tmp_path, 2e-3)


@pytest.mark.ngspice
@pytest.mark.parametrize("t_fast", [5e-6, 30e-6], ids=["fast-then-slow", "all-fast"])
def test_hysteretic_mixed_orbit_drives_the_ngspice_bridge_between_its_thresholds(tmp_path, t_fast):
    """ngspice (batch mode), the bridge of tests/test_reference_ngspice_bridge.py driven with
    the hysteretic orbit's gate pattern from its bottom -- Q1 + Q4 for the model's on-time,
    all four open for the one-shot's time or to the lower threshold, Q2 + Q4 for the rest of
    the model's off-time: the current the on-time ends at is the upper threshold and the
    one the off-time ends at the lower (each within 1 % of the 10 mA band), the mean and the
    energy back into the supply per period within 1 %."""
    from test_reference_ngspice_bridge import (L_COIL, R_COIL, R_SENSE, R_SW, V_D, V_SUP,
                                               mixed_orbit_netlist)
    from ngspice_run import run

    lo, hi = 0.39, 0.4
    r_on = R_COIL + 2 * R_SW + R_SENSE
    ss = hysteretic_steady_state(lo, hi, V_SUP, r_on, R_COIL + 2 * R_SW + R_SENSE, 0.0, L_COIL, 0.0, t_fast,
                                 MixedDecay(0.5, R_COIL + R_SENSE, V_SUP + 2 * V_D))
    t_off = float(ss.t_off)
    assert (t_off > t_fast) == (t_fast < 10e-6)   # the two regimes
    text = mixed_orbit_netlist("bridge-hyst-mixed", float(ss.t_on), min(t_fast, t_off), float(ss.period),
                               lo, True)
    res = run(tmp_path, "bridge-hyst-mixed", text)
    print(f"hysteretic mixed orbit vs ngspice: top {hi}/{res['imax']:.6e}, bottom {lo}/{res['imin']:.6e}, "
          f"mean {float(ss.mean):.6e}/{res['iavg']:.6e} A, back {V_SUP * float(ss.charge_fast):.6e}/"
          f"{res['eback']:.6e} J")
    assert abs(res["imax"] - hi) <= 0.01 * (hi - lo) and abs(res["imin"] - lo) <= 0.01 * (hi - lo)
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01)
    assert res["eback"] == pytest.approx(V_SUP * float(ss.charge_fast), rel=0.01)


def test_an_unreachable_band_fails_its_checks_not_the_run(tmp_path):
    """Hysteretic mixed decay where the upper threshold is out of reach at the nominal
    point (no slow-decay off-time to take the fraction of): the design fails its checks,
    `current_mode_fast_timer` among them, in one JSON document."""
    path = _variant(tmp_path, (HOLD, HOLD + "fast_fraction = 0.3\n"), ('current = "0.2 A"', 'current = "0.85 A"'),
                    ('current = "0.5 A"', 'current = "0.95 A"'))
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 1, r.stderr
    checks = {c["name"]: c["ok"] for c in json.loads(r.stdout)["checks"]}
    assert checks["current_mode_fast_timer"] is False and checks["current_mode_regulated"] is False
