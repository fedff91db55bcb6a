"""A saturating coil (a flux-linkage curve) on a channel of a system file: the rail-current
bound of its peak and tail (coildrive/model/flux_bound.py) and the shared rail's droop.

Outside references, named beside each check:

* scipy's ``PchipInterpolator`` (Fritsch & Carlson) through the drive file's table,
  extended straight at its end slope, and scipy's ``solve_ivp`` (LSODA) on
  ``s L_d(i) di/dt = v - R i``, written afresh here: the peak, then the hold's PWM (on
  at the supply, off through the bypassed freewheel path: diode drop and bypass
  resistor, stopping at zero), and the coils on a bus behind ``R_s`` and ``C``;
* copper R(T): IEC 60028, alpha = 0.00393 /K.
"""

from __future__ import annotations

import json
import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS
from rail_reference import assert_staggered_within_limit, linear_tail, manifold_copy, supply_corners

from coildrive.cli import app
from coildrive.config import load_drive

CURVE = """flux_current = [0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.8, 1.0, 1.5, 2.0]
flux_linkage = ["0 mWb", "7 mWb", "14 mWb", "21 mWb", "28 mWb", "34.5 mWb", "40.5 mWb", "51 mWb",
                "60 mWb", "75 mWb", "85 mWb"]   # invented: 70 mH small-signal, saturating
"""
BOARD = BOARDS / "manifold-m32-6ch.toml"


def _folder(folder, extra="", coil_extra=""):
    return manifold_copy(folder, 'inductance = "70 mH"\n', CURVE + coil_extra, extra)


@pytest.fixture(scope="module")
def system(tmp_path_factory):
    """The manifold with its two purge valves on the saturating curve above."""
    r = CliRunner().invoke(app, ["design", str(_folder(tmp_path_factory.mktemp("fluxsys"))), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"]


def _curve(drv):
    """``L_d(i)`` (H, unscaled): scipy's PCHIP through the table, straight above it."""
    from scipy.interpolate import PchipInterpolator

    c = drv.coil
    p = PchipInterpolator(c.flux_current, c.flux_linkage)
    d, top, end = p.derivative(), c.flux_current[-1], float(p.derivative()(c.flux_current[-1]))
    return lambda i: np.where(i <= top, d(np.minimum(i, top)), end)


def _loop(drv, temp, r_f):
    c, b = drv.coil, drv.board
    r_coil = c.resistance * (1 + 0.00393 * (temp - c.reference_temp)) * r_f
    return (r_coil + drv.switch.on_resistance + b.sense.resistance,
            r_coil + b.sense.resistance + drv.freewheel.bypass_resistance, drv.freewheel.diode_drop)


def _segment(ld, scale, i0, v, r, t0, t1, n=12):
    """``s L_d(i) di/dt = v - R i`` from ``i0`` over ``t0..t1`` (scipy LSODA), stopping
    at zero current when ``v < 0`` (the diode)."""
    from scipy.integrate import solve_ivp

    def zero(_t, y):
        return y[0]
    zero.terminal, zero.direction = True, -1
    grid = np.linspace(t0, t1, n)
    sol = solve_ivp(lambda _t, y: [(v - r * y[0]) / (scale * float(ld(max(y[0], 0.0))))], (t0, t1), [i0],
                    method="LSODA", rtol=1e-9, atol=1e-12, t_eval=grid, events=zero if v < 0 else None)
    i = np.zeros_like(grid)
    i[:len(sol.y[0])] = np.maximum(sol.y[0], 0.0)
    return grid, i, float(i[-1])


def _pwm(ld, scale, i0, v, loop, t0, duty, period, cycles):
    """``cycles`` PWM periods (:func:`_segment`) from ``i0`` A at ``t0`` s: on at ``v`` V
    through the loop's ``R_on``, off through its ``R_off`` and freewheel drop (``loop`` as
    :func:`_loop` gives it). ``(t, i)``."""
    r_on, r_off, v_fw = loop
    ts, cs = [], []
    for m in range(cycles):
        start = t0 + m * period
        t, i, i0 = _segment(ld, scale, i0, v, r_on, start, start + duty * period)
        ts.append(t), cs.append(i)
        t, i, i0 = _segment(ld, scale, i0, -v_fw, r_off, start + duty * period, start + period)
        ts.append(t), cs.append(i)
    return np.concatenate(ts), np.concatenate(cs)


def _branch(t, b):
    """A branch's bound from its tables (the next tabulated value up), written afresh."""
    t = np.asarray(t, float)
    rt, ri = np.array(b["rise_time_s"]), np.array(b["rise_current_a"])
    rise = ri[np.minimum(np.searchsorted(rt, np.minimum(t, b["peak_s"]), side="left"), len(rt) - 1)]
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], rise, flux_tail(t, b)))


def flux_tail(t, b):
    """A curve branch's tail (A) ``t`` s after switch-on, written afresh: the flux excess
    decaying from the end of the first PWM period, the next tabulated current up."""
    age = np.maximum(np.asarray(t, float) - b["peak_s"] - b["pwm_period_s"], 0)
    left = b["tail_flux_wb"][-1] * np.exp(-age * b["slow_resistance_ohm"] / b["tail_inductance_h"][0])
    ft, fi = np.array(b["tail_flux_wb"]), np.array(b["tail_current_a"])
    return fi[np.minimum(np.searchsorted(ft, left, side="left"), len(ft) - 1)]


def test_curve_bound_never_below_the_simulated_worst(system):
    """scipy PCHIP + ``solve_ivp`` of the saturating purge valve: the peak the firmware
    picks, then 40 periods of its hold, at the lowest and highest supply and just below a
    peak-table step, the coil cold (ambient.min), R and L at both tolerance ends. The
    channel's bound (its largest branch readable there) is never below the simulated
    current; over the peak it is within 8 % of the simulated worst (the bound takes the top
    supply of each peak's reading range: 21.3 V at 20 V), and at the branch's own corner
    the exact rise at the peak's end (to the solver's 1e-7)."""
    ch = system["channels"][-1]
    d = ch["design"]
    drv = load_drive(ch["drive_file"], BOARD)
    ld = _curve(drv)
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    period = 1 / d["hold"]["frequency_hz"]
    ratios = []
    for v, peak, duty, branches in supply_corners(ch, drv):
        worst_peak = 0.0
        for r_f in (1 - tol_r, 1 + tol_r):
            r_on, r_off, v_fw = _loop(drv, drv.ambient.min, r_f)
            for l_f in (1 - tol_l, 1 + tol_l):
                ts, cs = [], []
                t, i, last = _segment(ld, l_f, 0.0, v, r_on, 0.0, peak, n=200)
                ts.append(t), cs.append(i)
                worst_peak = max(worst_peak, float(i.max()))
                t, i = _pwm(ld, l_f, last, v, (r_on, r_off, v_fw), peak, duty, period, 40)
                t, i = np.concatenate(ts + [t]), np.concatenate(cs + [i])
                bound = np.max([_branch(t, b) for b in branches], axis=0)
                assert np.all(i <= bound + 1e-9), (v, r_f, l_f, float(np.max(i - bound)))
        ratios.append(max(b["peak_end_a"] for b in branches) / worst_peak)
        # like for like: the branch's own corner (its top supply, lowest R and scale)
        b = branches[0]
        exact = _segment(ld, 1 - tol_l, 0.0, b["supply_v"], b["resistance_ohm"], 0.0, b["peak_s"])[2]
        assert exact * (1 - 1e-7) <= b["peak_end_a"] <= exact * 1.01, (exact, b["peak_end_a"])
    print("bound / simulated worst over the peak:", [round(x, 4) for x in ratios])
    assert all(1.0 <= x <= 1.08 for x in ratios), ratios


def rail_branch(t, b):
    """Any branch of a rail with curves on it: a curve's tables (:func:`_branch`), a linear
    channel's exponential rise and :func:`linear_tail`, written afresh."""
    if "rise_time_s" in b:
        return _branch(t, b)
    rise = b["supply_v"] / b["resistance_ohm"] * (1 - np.exp(-np.maximum(t, 0) * b["resistance_ohm"] / b["inductance_h"]))
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], rise, linear_tail(t, b)))


def test_staggered_total_never_above_the_limit(system):
    """A dense sweep (1e5 points, numpy) of the rail's bound (:func:`rail_branch`) at every
    supply where the readable branches change: never above the limit with the stagger found."""
    assert_staggered_within_limit(system, rail_branch)


def test_droop_bound_never_above_the_simulated_bus(system):
    """scipy ``solve_ivp`` (LSODA) of the six coils -- two on the PCHIP curve, four linear
    -- switched on together behind the system's ``R_s`` and ``C`` at the lowest supply,
    cold coils, R and L low, up to the first peak's end: the reported lowest bus (a bound
    from the rail-current bounds) is never above the simulated one."""
    from scipy.integrate import solve_ivp

    rail = system["rails"][0]
    coils, ends = [], []
    for c in system["channels"]:
        drv = load_drive(c["drive_file"], BOARD)
        r_on = _loop(drv, drv.ambient.min, 1 - drv.coil.resistance_tolerance)[0]
        l_f = 1 - drv.coil.inductance_tolerance
        ld = _curve(drv) if drv.coil.flux_current else (lambda i, L=drv.coil.inductance: L + 0 * i)
        coils.append((r_on, l_f, ld))
        ends.append(c["design"]["pull_in"]["peak_ticks"] / drv.board.tick.rate)
    v_s, r_s, cap = rail["supply_v"], rail["source_resistance_ohm"], rail["capacitance_f"]

    def rhs(_t, y):
        vb, i = y[0], y[1:]
        di = [(vb - r * x) / (s * float(ld(max(x, 0.0)))) for (r, s, ld), x in zip(coils, i)]
        return [((v_s - vb) / r_s - i.sum()) / cap, *di]

    sol = solve_ivp(rhs, (0, min(ends)), [v_s] + [0.0] * len(coils), method="LSODA", rtol=1e-9,
                    atol=1e-12, t_eval=np.linspace(0, min(ends), 2000))
    low = float(sol.y[0].min())
    print(f"reported {rail['lowest_bus_together_v']:.4f} V, simulated {low:.4f} V")
    assert rail["lowest_bus_together_v"] <= low
    assert "bound" in rail["droop_method"]

