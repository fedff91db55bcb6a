"""An eddy-current term with a moving armature on a channel of a system file: the
rail-current bound of its peak and tail, ``simulate SYSTEM.toml`` and the channel's
virtual device (``emulate SYSTEM.toml --channel``).

Outside references, named beside each check:

* scipy's ``solve_ivp`` (DOP853, events at the stops) on the circuit and the armature
  written afresh here: the magnetic-circuit model ``L(x) = L_c / (1 + beta x)`` through the
  two measured inductances, the flux linkage ``lambda = L(x) i_m`` as the state, a
  resistance ``R_e`` across the magnetising branch (Kirchhoff: the terminal current ``i =
  (V + R_e i_m)/(R + R_e)`` with the switch on; off, through the freewheel diode while
  ``R_e i_m > V_f``, else blocked with the flux dying through ``R_e``), co-energy force
  ``lambda^2 beta / (2 L_c)``, spring + load, viscous damping, stops at the seat
  (inelastic) and the open position; the firmware's peak, then PWM periods at its duty;
* copper R(T): IEC 60028, alpha = 0.00393 /K;
* the rail's bound written afresh from docs/design-method.md ("Several channels", "A
  moving armature", "An eddy-current term"), swept at 1e5 points with numpy.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS
from rail_reference import (assert_staggered_within_limit, linear_tail, manifold_copy, simulate_csv,
                            supply_corners)

from coildrive.cli import app
from coildrive.config import load_drive

BOARD = BOARDS / "manifold-m32-6ch.toml"
ARMATURE = (Path(__file__).parent / "test_system_armature.py").read_text().split('ARMATURE = """')[1].split('"""')[0]
EDDY = 'eddy_resistance = "150 ohm"     # invented: solid-core eddy currents\n'
PERIODS = 12


def _folder(folder):
    """The manifold with its two purge valves given an eddy term and a moving armature
    (and the release current its mechanics drop out at)."""
    path = manifold_copy(folder, 'inductance = "70 mH"\n', 'inductance = "70 mH"\n' + EDDY, ARMATURE)
    purge = folder / "purge-valve-24v.toml"
    purge.write_text(purge.read_text().replace('current = "0.09 A"', 'current = "0.15 A"'))
    return path


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return _folder(tmp_path_factory.mktemp("eddyarm"))


@pytest.fixture(scope="module")
def system(folder):
    r = CliRunner().invoke(app, ["design", str(folder), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"]


# --------------------------------------------------------------------------- the reference
def _simulate(drv, v, temp, r_f, l_f, peak, duty, period, periods, n=60):
    """One actuation of the purge valve, written afresh: switched on at 0 s from rest at the
    open stop for ``peak`` s, then ``periods`` PWM periods at ``duty``, by ``solve_ivp``
    restarted at every switching moment and stop event. Returns the time grid, the terminal
    current drawn from the rail (0 while the switch is off) and the gap at the peak's end."""
    from scipy.integrate import solve_ivp

    c, b, a = drv.coil, drv.board, drv.armature
    r_coil = c.resistance * (1 + 0.00393 * (temp - c.reference_temp)) * r_f      # IEC 60028
    r_on = r_coil + drv.switch.on_resistance + b.sense.resistance
    r_off = r_coil + b.sense.resistance + drv.freewheel.bypass_resistance        # bypass on in the hold
    v_f, r_e = drv.freewheel.diode_drop, c.eddy_resistance
    lc = a.inductance_closed * l_f
    beta = (a.inductance_closed - a.inductance_open) / (a.stroke * a.inductance_open)
    f0 = a.spring_preload + a.load_force

    def i_mag(lam, x):
        return lam * (1 + beta * x) / lc

    def v_coil(on, im):
        if on:
            return r_e * (v - r_on * im) / (r_on + r_e)
        # freewheeling through the diode, or blocked (the larger of the two: continuous)
        return max(-r_e * im, r_e * ((r_e * im - v_f) / (r_off + r_e) - im))

    def fmag(lam):
        return lam * lam * beta / (2 * lc)

    def fopen(x):
        return f0 + a.spring_rate * (a.stroke - x)

    mode = ["open"]

    def rhs(_t, y, on):
        lam, x, u = y
        out = [v_coil(on, i_mag(lam, x)), 0.0, 0.0]
        if mode[0] == "flight":
            out[1] = u
            out[2] = (fopen(x) - fmag(lam) - a.damping * u) / a.mass
        return out

    def event(_t, y, _on):
        lam, x, _u = y
        if mode[0] == "open":
            return fmag(lam) - fopen(a.stroke)
        if mode[0] == "seat":
            return fmag(lam) - fopen(0.0)
        return x * (a.stroke - x)
    event.terminal = True

    cuts = [(0.0, peak, True)]
    for k in range(periods):
        t0 = peak + k * period
        cuts += [(t0, t0 + duty * period, True), (t0 + duty * period, t0 + period, False)]
    y, ts, cs, gap = np.array([0.0, a.stroke, 0.0]), [], [], None
    for t0, t1, on in cuts:
        while t0 < t1:
            event.direction = {"open": 1, "seat": -1}.get(mode[0], -1)
            sol = solve_ivp(rhs, (t0, t1), y, method="DOP853", rtol=1e-10, atol=1e-13, args=(on,),
                            max_step=(t1 - t0) / 8, events=event, dense_output=True)
            tt = np.linspace(t0, sol.t[-1], n)
            st = sol.sol(tt)
            im = i_mag(st[0], st[1])
            ts.append(tt)
            cs.append((v + r_e * im) / (r_on + r_e) if on else np.zeros_like(im))
            y, t0 = sol.y[:, -1].copy(), sol.t[-1]
            if sol.status != 1:
                break
            if mode[0] in ("open", "seat"):
                mode[0] = "flight"
            elif y[1] < 0.5 * a.stroke:                      # the seat: inelastic
                y[1], y[2] = 0.0, 0.0
                mode[0] = "seat" if fmag(y[0]) >= fopen(0.0) else "flight"
            else:                                              # back at the open stop
                y[1], y[2] = a.stroke, 0.0
                mode[0] = "open"
        if gap is None:
            gap = y[1]
    return np.concatenate(ts), np.concatenate(cs), gap


def _rise(t, b):
    """A branch's peak bound written afresh: the magnetising current on the Thevenin pair
    (``V_th = V R_e/(R + R_e)``, ``R_th = R R_e/(R + R_e)``) -- the open coil's rise up to
    ``closing_s``, then ``(L_c/L_open) V/R (1 - exp(-t R_th/L_c))`` -- and the terminal
    current ``(V + R_e i_m)/(R + R_e)`` on it; a linear coil's ``V/R (1 - exp(-t R/L))``."""
    v, r = b["supply_v"], b["resistance_ohm"]
    t = np.maximum(t, 0)
    if "eddy_resistance_ohm" not in b:
        return v / r * (1 - np.exp(-t * r / b["inductance_h"]))
    r_e = b["eddy_resistance_ohm"]
    r_th = r * r_e / (r + r_e)
    lin = v / r * (1 - np.exp(-t * r_th / b["inductance_h"]))
    anym = b["flux_ratio"] * v / r * (1 - np.exp(-t * r_th / b["closed_inductance_h"]))
    i_m = np.where(t <= b["closing_s"], lin, anym)
    return (v + r_e * i_m) / (r + r_e)


def _branch(t, b):
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], _rise(t, b), linear_tail(t, b)))


# --------------------------------------------------------------------------- the checks
def test_bound_never_below_the_simulated_current(system):
    """scipy ``solve_ivp`` of the circuit and the armature written afresh over a corner grid:
    the lowest supply, just below a middle peak-table step and the highest (the firmware's
    peak and duty looked up there), the coil cold and at the design's hottest, R and L at
    both tolerance ends; the peak then 12 PWM periods. The armature is seated by the peak's
    end at every corner (the tail's premise); the channel's bound (its largest readable
    branch) is never below the terminal current, and its peak end is within 20 % of the
    simulated worst at its supply."""
    ch = system["channels"][-1]
    d = ch["design"]
    drv = load_drive(ch["drive_file"], BOARD)
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    hot = max(c["coil_temp_c"] for c in d["corners"])
    period = 1 / d["hold"]["frequency_hz"]
    ratios = []
    for v, peak, duty, branches in supply_corners(ch, drv):
        worst = 0.0
        for temp in (drv.ambient.min, hot):
            for r_f in (1 - tol_r, 1 + tol_r):
                for l_f in (1 - tol_l, 1 + tol_l):
                    t, i, gap = _simulate(drv, v, temp, r_f, l_f, peak, duty, period, PERIODS)
                    assert gap == 0.0, (v, temp, r_f, l_f, gap)
                    bound = np.max([_branch(t, b) for b in branches], axis=0)
                    assert np.all(i <= bound + 1e-9), (v, temp, r_f, l_f, float(np.max(i - bound)))
                    worst = max(worst, float(i[t <= peak].max()))
        ratios.append(max(b["peak_end_a"] for b in branches) / worst)
    print("bound / simulated worst over the peak:", [round(x, 4) for x in ratios])
    assert all(1.0 <= x <= 1.2 for x in ratios), ratios


def test_staggered_total_never_above_the_limit(system):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh: never above
    the limit with the stagger found."""
    assert_staggered_within_limit(system, _branch)


def test_simulate_and_the_channels_device(folder, system, tmp_path):
    """``simulate SYSTEM.toml`` runs the channel (its rail never above the design's bound at
    that supply, on the CSV's grid); the device ``emulate SYSTEM.toml --channel purge2``
    serves runs the shared timer and reaches the pull-in current in its peak. Both run the
    model's own actuation: plumbing, not physics."""
    from coildrive.bench.device import DeviceOptions, VirtualDevice
    from coildrive.cli.system_cmd import channel_drive
    from coildrive.design import design

    csv = simulate_csv(folder, tmp_path, 0.004)
    ch = system["channels"][-1]
    bs = [b for b in ch["bound"]["branches"] if b["supply_low_v"] <= 28.0 <= b["supply_v"]]
    bound = np.max([_branch(csv[:, 0] - ch["offset_s"], b) for b in bs], axis=0)
    purge = csv[:, 7] * csv[:, 13]                     # purge2's current while its switch is on
    assert purge.max() > 0.55 and np.all(purge <= bound + 1e-9), float(np.max(purge - bound))
    d = design(channel_drive(folder, None, "purge2"))
    (timer,) = system["timers"]
    assert (d.timer.prescaler, d.timer.period_ticks) == (timer["prescaler"], timer["period_ticks"])
    dev = VirtualDevice(d.drive, DeviceOptions(supply=24.0), design=d)
    w = dev._make_waveform((dev.peak_time, dev.duty, dev.frequency, 0.004))
    assert w.current.max() > d.drive.pull_in.current
