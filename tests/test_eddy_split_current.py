"""Split decay with a current-mode hold and an eddy-current term: the hold's off-times
through the slow path (diode + bypass switch), the release through the fast one (diode +
Zener) from the last turn-off.

Reference: scipy's ``solve_ivp`` (RK45, tight tolerances) on the magnetising current of
the eddy circuit written afresh here -- R in series with L, R_e across L -- with the
controller as terminal events: off when the terminal current ``(V + R_e i_m) / (R_on +
R_e)`` reaches the upper threshold, on when ``(R_e i_m - V_off) / (R_off + R_e)`` falls to
the lower one; the slow path blocks where that current reaches zero (the flux then
decays through R_e alone). The hold's frequency and mean terminal current and the
release to the drop-out current through the fast path agree with the design's closed
forms within 1e-5.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from conftest import EXAMPLES, run_cli
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.hold_current import evaluate_current
from coildrive.model.circuit import loop
from test_eddy_coil import _example_drive
from test_eddy_ngspice import R_EDDY

SPLIT = EXAMPLES / "wash-valve-split-24v.toml"
#: hysteretic, the band wider than the sensed step (V + V_off) / (R + R_e) ~ 0.08 A
HOLD = 'frequency = "25 kHz"\nmode = "current"\nband = "0.12 A"\nmin_frequency = "300 Hz"'


def _drive_file(tmp_path):
    path = _example_drive(tmp_path, f'eddy_resistance = "{R_EDDY} ohm"', SPLIT)
    path.write_text(path.read_text().replace('frequency = "25 kHz"', HOLD))
    return path


def _scalar(x):
    return float(np.ravel(x)[0])


def _reference(v, r_on, r_off, v_off, r_fast, v_fast, ind, r_e, lower, upper, drop):
    """The hold's orbit and the release by solve_ivp with events: ``(frequency Hz, mean
    terminal current A, top magnetising current A, release time s)``."""
    on_i = lambda m: (v + r_e * m) / (r_on + r_e)           # terminal current, switch on
    off_i = lambda m, r, vo: (r_e * m - vo) / (r + r_e)     # terminal current, freewheeling
    m_hi = ((r_on + r_e) * upper - v) / r_e                  # the thresholds as magnetising currents
    m_lo = ((r_off + r_e) * lower + v_off) / r_e

    def on(t, y):
        i = on_i(y[0])
        return [r_e * (i - y[0]) / ind, i]

    def off(r, vo):
        def f(t, y):
            i = max(off_i(y[0], r, vo), 0.0)   # the diode blocks: the flux decays through R_e
            return [r_e * (i - y[0]) / ind, i]
        return f

    def at(level):
        ev = lambda t, y: y[0] - level
        ev.terminal = True
        return ev

    opts = dict(rtol=1e-12, atol=1e-15, method="RK45")
    m, t, marks, charge = m_lo, 0.0, [], []
    for _ in range(12):   # from the lower threshold: a handful of periods settles the orbit
        a = solve_ivp(on, (0.0, 1.0), [m, 0.0], events=at(m_hi), **opts)
        b = solve_ivp(off(r_off, v_off), (0.0, 1.0), [a.y[0, -1], 0.0], events=at(m_lo), **opts)
        m = b.y[0, -1]
        period = a.t[-1] + b.t[-1]
        marks.append(period)
        charge.append((a.y[1, -1] + b.y[1, -1]) / period)
    assert abs(marks[-1] - marks[-2]) < 1e-12 * marks[-1], "the orbit settled"
    # the release: the bypass open (lead >= 0), the fast path from the top of the orbit
    rel = solve_ivp(off(r_fast, v_fast), (0.0, 1.0), [m_hi, 0.0], events=at(drop), **opts)
    return 1.0 / marks[-1], charge[-1], m_hi, rel.t[-1]


def test_design_matches_solve_ivp(tmp_path):
    """At 24 V, 25 degC ambient, nominal R and L: the design's hold frequency, mean terminal
    current, top of the magnetising ripple and release time against solve_ivp."""
    path = _drive_file(tmp_path)
    drive = load_drive(path)
    d = design(drive)
    th = d.hold.thresholds
    assert th.control == "hysteretic" and th.delay_s == 0.0
    one = np.array([1.0])
    res, cm = evaluate_current(drive, th, 24.0 * one, 25.0 * one, one, one, 1e-3)
    temp = _scalar(res.coil_temp)
    slow = loop(drive, 24.0, temp)
    fast = loop(drive, 24.0, temp, path="release")
    assert slow.bypassed and not fast.bypassed
    e = slow.inductance
    f_ref, mean_ref, top_ref, t_rel = _reference(
        _scalar(slow.v_on), _scalar(slow.r_on), _scalar(slow.r_off), _scalar(slow.v_off),
        _scalar(fast.r_off), _scalar(fast.v_off), _scalar(e.magnetising), _scalar(e.resistance),
        th.lower_a, th.upper_a, drive.release.current)
    assert _scalar(res.hold.i_max) == pytest.approx(top_ref, rel=1e-5)
    assert 1.0 / _scalar(res.hold.period) == pytest.approx(f_ref, rel=1e-5)
    assert _scalar(res.hold.mean) == pytest.approx(mean_ref, rel=1e-5)
    assert _scalar(res.release_time) == pytest.approx(t_rel, rel=1e-5)
    # the fast path really is faster than the slow one would be (the bypass matters)
    slow_rel = _reference(*(_scalar(x) for x in (slow.v_on, slow.r_on, slow.r_off, slow.v_off,
                                                 slow.r_off, slow.v_off, e.magnetising, e.resistance)),
                          th.lower_a, th.upper_a, drive.release.current)[3]
    assert t_rel < 0.5 * slow_rel


def test_design_and_simulate_take_both_paths(tmp_path):
    """design --json reports the split decay; simulate's hold switches at the design's
    frequency, the bypass opens 2 us before the final turn-off (inside the last on-time),
    and the magnetising current reaches the drop-out current the design's release time
    after the turn-off (simulate's tabulated segments: within 1e-3)."""
    path = _drive_file(tmp_path)
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    assert doc["split_decay"] is not None and doc["eddy"] is not None
    assert doc["hold"]["mode"] == "current"
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "60", "--hold-time", "20 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    a = np.genfromtxt(csv, delimiter=",", names=True)
    t, on, byp, m = a["time_s"], a["switch_on"], a["bypass_on"], a["magnetising_current_a"]
    k = int(np.flatnonzero(np.diff(byp) != 0)[0]) + 1
    assert np.all(byp[:k] == 1) and np.all(byp[k:] == 0)
    last = np.flatnonzero(on == 1)[-1]
    t_off = t[last]
    assert on[k] == 1 and t[k] == pytest.approx(t_off - 2e-6, abs=2e-9)
    drive = load_drive(path)
    d = design(drive)
    th = d.hold.thresholds
    # the same point as simulate: 24 V, a 60 degC coil, nominal R and L
    lp = loop(drive, 24.0, 60.0)
    fast = loop(drive, 24.0, 60.0, path="release")
    e = lp.inductance
    f_ref, _, top_ref, t_rel = _reference(
        *(_scalar(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off, fast.r_off, fast.v_off,
                               e.magnetising, e.resistance)),
        th.lower_a, th.upper_a, drive.release.current)
    rises = t[1:][(np.diff(on) > 0)]
    assert 1.0 / np.diff(rises[-4:]).mean() == pytest.approx(f_ref, rel=1e-3)
    after = slice(last + 1, None)
    t_drop = np.interp(-drive.release.current, -m[after], t[after]) - t_off
    assert m[last] == pytest.approx(top_ref, rel=1e-3)
    assert t_drop == pytest.approx(t_rel, rel=1e-3)
