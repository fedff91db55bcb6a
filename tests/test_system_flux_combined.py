"""A saturating coil (a flux-linkage curve) on a channel of a system file together with a
current-mode hold (hysteretic, or a fixed off time), or with an eddy-current term: the rail-current bound of its
peak, hold and tail (coildrive/design/system.py, ``_current_mode_hold``,
``_eddy_curve_branch`` and ``channel_bound_params``).

Outside references, named beside each check:

* scipy's ``PchipInterpolator`` (Fritsch & Carlson) through the drive file's table and
  scipy's ``solve_ivp`` (LSODA, with threshold events) on ``s L_d(i) di/dt = v - R i``,
  written afresh here: the peak, then the comparator on the sensed current (the true
  current times the sense reading factor), on until the upper threshold and the sense
  delay past it, off through the bypassed freewheel path (diode drop and bypass resistor)
  down to the lower threshold and the delay past it, or for the fixed off time;
* with an eddy term, the same solver on the magnetising current with ``R_e`` across the
  coil (``s L_d(i_m) di_m/dt = v_m``, the terminal current ``i_m + v_m/R_e``), the
  freewheel diode blocking at zero terminal current;
* copper R(T): IEC 60028, alpha = 0.00393 /K.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from rail_reference import assert_staggered_within_limit, manifold_copy, readable, supply_corners
from test_system import _current_mode_system
from test_system_eddy import EDDY
from test_system_flux import CURVE, _branch, _curve, _loop, rail_branch

from coildrive.cli import app
from coildrive.config import load_drive


# (gain 18: a purge valve on the saturating curve switched on cold at 28 V ends its
# uncompensated peak at 1.34 A, too near the x20 amplifier's 1.65 A full scale for the
# over-current trip's headroom)
@pytest.fixture(scope="module")
def doc(tmp_path_factory):
    """The manifold with its two purge valves on the saturating curve and a hysteretic
    current-mode hold (3 us comparator delay, 1 % sense and gain tolerances)."""
    path = _current_mode_system(tmp_path_factory.mktemp("cmflux") / "manifold", gain=18)
    purge = path.parent / "purge-valve-24v.toml"
    purge.write_text(purge.read_text().replace('inductance = "70 mH"\n', CURVE))
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], purge


def _run(ld, s, v, r_on, r_off, v_fw, t_peak, upper, lower, delay, cycles=10, off_time=None):
    """``(times, currents, tops)``: the peak from rest, then ``cycles`` hysteretic cycles
    with the true thresholds ``upper``/``lower`` A and the comparator ``delay`` s (scipy
    LSODA), or with ``off_time`` s, cycles of a fixed off-time (on until ``upper`` and the
    delay past it, off for ``off_time``); ``tops`` the current at each switch-off after
    the first."""
    from scipy.integrate import solve_ivp

    ts, cs, tops = [], [], []

    def seg(i0, t0, on, until=None, length=None):
        v_, r_ = (v, r_on) if on else (-v_fw, r_off)
        ev = None
        if until is not None:
            def ev(_t, y):
                return y[0] - until
            ev.terminal, ev.direction = True, (1 if on else -1)
        sol = solve_ivp(lambda _t, y: [(v_ - r_ * y[0]) / (s * float(ld(max(y[0], 0.0))))],
                        (t0, t0 + (length if length is not None else 1.0)), [i0], method="LSODA",
                        rtol=1e-10, atol=1e-13, dense_output=True, events=ev)
        t1 = float(sol.t[-1])
        grid = np.linspace(t0, t1, 16)
        i = np.maximum(sol.sol(grid)[0], 0.0)
        ts.append(grid), cs.append(i)
        return float(i[-1]), t1

    i, t = seg(0.0, 0.0, True, length=t_peak)
    for _ in range(cycles):
        if i < upper:
            i, t = seg(i, t, True, until=upper)
        i, t = seg(i, t, True, length=delay)         # on for the delay past the trip
        tops.append(i)
        if off_time is not None:
            i, t = seg(i, t, False, length=off_time)
            continue
        if i > lower:
            i, t = seg(i, t, False, until=lower)
        i, t = seg(i, t, False, length=delay)
    return np.concatenate(ts), np.concatenate(cs), tops[1:]


def _corner_grid(doc, control: str, run) -> tuple[float, float]:
    """The purge valve's current-mode hold over the corner grid -- 20 V and 28 V, the coil
    cold, R and L at both tolerance ends, the sense reading 2 % low and 2 % high: ``run(args,
    t_peak, current_mode, reading)`` gives ``(t, i, tops)``, ``args`` :func:`_run`'s first
    six. The current is never above the channel's readable branches; returns the highest
    of the ``tops`` and the bound's hold top (A)."""
    system, purge = doc
    ch = system["channels"][-1]
    d, drv = ch["design"], load_drive(purge)
    ld, cm = _curve(drv), d["current_mode"]
    assert d["hold"]["mode"] == "current" and cm["control"] == control
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    t_peak = d["pull_in"]["peak_ticks"] / drv.board.tick.rate
    top_seen = 0.0
    for v in (drv.supply.min, drv.supply.max):
        branches = readable(ch, v)
        for r_f in (1 - tol_r, 1 + tol_r):
            r_on, r_off, v_fw = _loop(drv, drv.ambient.min, r_f)
            for l_f in (1 - tol_l, 1 + tol_l):
                for reading in (0.99**2, 1.01**2):
                    t, i, tops = run((ld, l_f, v, r_on, r_off, v_fw), t_peak, cm, reading)
                    bound = np.max([_branch(t, b) for b in branches], axis=0)
                    assert np.all(i <= bound + 1e-9), (v, r_f, l_f, reading, float(np.max(i - bound)))
                    top_seen = max(top_seen, *tops)
    return top_seen, max(b["hold_top_a"] for b in ch["bound"]["branches"])


def test_hold_and_tail_bound_never_below_the_simulated_current(doc):
    """scipy PCHIP + ``solve_ivp`` of the saturating purge valve on its hysteretic hold:
    the peak, the fall to the lower threshold and 10 hold cycles at 20 V and 28 V, the
    coil cold (ambient.min), R and L at both tolerance ends, the sense reading 2 % low and
    2 % high. The channel's bound is never below the simulated current; its hold's top is
    within 0.5 % of the simulated highest hold top (28 V, R and L low, the reading low)."""
    def run(args, t_peak, cm, reading):
        return _run(*args, t_peak, cm["upper_a"] / reading, cm["lower_a"] / reading, cm["sense_delay_s"])
    top_seen, hold_top = _corner_grid(doc, "hysteretic", run)
    print(f"hold top: bound {hold_top:.6f} A, simulated {top_seen:.6f} A")
    assert top_seen <= hold_top <= 1.005 * top_seen


def test_staggered_total_never_above_the_limit(doc):
    """A dense sweep (1e5 points, numpy) of the rail's bound (the curve's tables, the
    linear channels' exponentials, written afresh) at every supply where the readable
    branches change: never above the limit with the stagger found."""
    assert_staggered_within_limit(doc[0], rail_branch)


@pytest.fixture(scope="module")
def off_doc(tmp_path_factory):
    """The same purge valves on a fixed off-time hold, each alone on its timer (a shared
    timer cannot make the off time)."""
    path = _current_mode_system(tmp_path_factory.mktemp("offflux") / "manifold", control="off_time", gain=18)
    board = path.parent / "board.toml"
    board.write_text(board.read_text().replace("timers = [[1, 2, 3, 4, 5, 6]]", "timers = [[1, 2, 3, 4]]"))
    purge = path.parent / "purge-valve-24v.toml"
    purge.write_text(purge.read_text().replace('inductance = "70 mH"\n', CURVE))
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], purge


def test_off_time_bound_never_below_the_simulated_current(off_doc):
    """scipy PCHIP + ``solve_ivp`` of the saturating purge valve on a fixed off-time: the
    peak and 40 cycles after it (each on to the peak threshold -- at once while the peak's
    excess lasts -- and the delay past it, then the off time) at 20 V and 28 V, cold, R
    and L at both tolerance ends, the sense reading 2 % low and 2 % high: never above the
    bound; the hold's top within 0.5 % of the highest top of 40 cycles of hold alone (from
    0 A: its orbit, reached from below)."""
    def run(args, t_peak, cm, reading):
        t, i, _ = _run(*args, t_peak, cm["upper_a"] / reading, 0.0, cm["sense_delay_s"], 40, cm["off_time_s"])
        hold = _run(*args, 0.0, cm["upper_a"] / reading, 0.0, cm["sense_delay_s"], 40, cm["off_time_s"])
        return t, i, hold[2]
    top_seen, hold_top = _corner_grid(off_doc, "off_time", run)
    print(f"hold top: bound {hold_top:.6f} A, simulated {top_seen:.6f} A")
    assert top_seen <= hold_top <= 1.005 * top_seen


def test_off_time_staggered_total_never_above_the_limit(off_doc):
    """The dense sweep of the staggered total with the off-time channels: within the limit."""
    assert_staggered_within_limit(off_doc[0], rail_branch)


@pytest.fixture(scope="module")
def eddy_doc(tmp_path_factory):
    """The manifold with its two purge valves on the curve with ``R_e`` = 150 ohm, the
    supply's limit raised to 3.5 A (the bound's tail on the saturating curve is loose)."""
    from coildrive.design.system import design_system
    from coildrive.system_file import load_system

    path = manifold_copy(tmp_path_factory.mktemp("eddyflux"), 'inductance = "70 mH"\n', CURVE + EDDY)
    path.write_text(path.read_text().replace('current_limit = "3 A"', 'current_limit = "3.5 A"'))
    result = design_system(load_system(path))
    doc = json.loads(json.dumps(result.to_dict(), allow_nan=False))["system"]
    assert all(c["ok"] for c in doc["checks"]), doc["checks"]
    return doc, path.parent / "purge-valve-24v.toml", result


def _eddy_run(ld, s, v, r_on, r_off, v_fw, r_e, t_peak, duty, period, periods=10, i_m0=None):
    """``(times, terminal currents)``: the peak from rest, then ``periods`` PWM periods
    (scipy LSODA on the magnetising current; off, the diode blocks at zero terminal
    current); ``i_m0``: the periods alone from ``t_peak`` s, the magnetising current then
    ``i_m0`` A (the peak run elsewhere)."""
    from scipy.integrate import solve_ivp

    def terminal(i_m, on):
        if on:
            return (v + r_e * i_m) / (r_on + r_e)
        return np.maximum((r_e * i_m - v_fw) / (r_off + r_e), 0.0)

    ts, cs, i_m = [], [], 0.0 if i_m0 is None else i_m0
    bounds = [(0.0, t_peak, True)] if i_m0 is None else []
    for m in range(periods):
        t0 = t_peak + m * period
        bounds += [(t0, t0 + duty * period, True), (t0 + duty * period, t0 + period, False)]
    for t0, t1, on in bounds:
        sol = solve_ivp(lambda _t, y: [r_e * (terminal(y[0], on) - y[0]) / (s * float(ld(max(y[0], 0.0))))],
                        (t0, t1), [i_m], method="LSODA", rtol=1e-10, atol=1e-13,
                        t_eval=np.linspace(t0, t1, 8))
        i_m = float(sol.y[0][-1])
        ts.append(sol.t), cs.append(terminal(sol.y[0], on))
    return np.concatenate(ts), np.concatenate(cs)


def test_eddy_curve_bound_never_below_the_simulated_current(eddy_doc):
    """scipy PCHIP + ``solve_ivp`` of the saturating purge valve with ``R_e`` across it:
    the peak the firmware picks and 10 periods of its hold at 20 V, just below a middle
    peak-table step and 28 V, cold, R and L at both tolerance ends. The channel's bound is
    never below the simulated terminal current; it starts at the step ``V/(R + R_e)`` and
    its peak end is within 8 % of the simulated worst."""
    system, purge, _ = eddy_doc
    ch = system["channels"][-1]
    d, drv = ch["design"], load_drive(purge)
    ld, r_e = _curve(drv), drv.coil.eddy_resistance
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    period = 1 / d["hold"]["frequency_hz"]
    ratios = []
    for v, peak, duty, branches in supply_corners(ch, drv):
        worst = 0.0
        for r_f in (1 - tol_r, 1 + tol_r):
            r_on, r_off, v_fw = _loop(drv, drv.ambient.min, r_f)
            for l_f in (1 - tol_l, 1 + tol_l):
                t, i = _eddy_run(ld, l_f, v, r_on, r_off, v_fw, r_e, peak, duty, period)
                bound = np.max([_branch(t, b) for b in branches], axis=0)
                assert np.all(i <= bound + 1e-9), (v, r_f, l_f, float(np.max(i - bound)))
                worst = max(worst, float(i[t <= peak].max()))
        b = branches[0]
        assert b["rise_current_a"][0] == pytest.approx(b["supply_v"] / (b["resistance_ohm"] + r_e), rel=1e-12)
        ratios.append(max(x["peak_end_a"] for x in branches) / worst)
    print("bound / simulated worst over the peak:", [round(x, 4) for x in ratios])
    assert all(1.0 <= x <= 1.08 for x in ratios), ratios


def test_eddy_curve_staggered_total_never_above_the_limit(eddy_doc):
    """The dense sweep (1e5 points) of the rail's bound with two eddy-curve channels
    (:func:`rail_branch`, written afresh): never above the 3.5 A limit."""
    assert_staggered_within_limit(eddy_doc[0], rail_branch)


def test_eddy_curve_system_simulation_within_the_bound(eddy_doc):
    """``simulate SYSTEM.toml`` takes the eddy-curve channels (the model's own actuation):
    at the corner of the most current (28 V, cold, R and L low, 3 ms of hold) the
    simulated rail never exceeds the design's bound (a plumbing check: both are the
    model's)."""
    from coildrive.design.system import draw_bound
    from coildrive.design.system_sim import simulate_system

    doc, _, result = eddy_doc
    drv = result.channels[-1].design.drive
    v = drv.supply.max
    run = simulate_system(result, v, drv.ambient.min, 0.003, 8, 1 - drv.coil.resistance_tolerance,
                          1 - drv.coil.inductance_tolerance)
    bound = sum(draw_bound(run.time - c["offset_s"], {"branches": readable(c, v)}) for c in doc["channels"])
    assert np.all(run.rail <= bound + 1e-9), float(np.max(run.rail - bound))
