"""An eddy-current term under a current-mode hold on a channel of a system file: the
hold's top and the tail in the rail-current bound (docs/design-method.md, "An
eddy-current term").

Outside references, named beside each check:

* scipy's ``solve_ivp`` (LSODA, events at the comparator's thresholds) on the circuit
  written afresh here: a resistance ``R_e`` across the coil's inductance (Kirchhoff: the
  terminal current, which the sense resistor in the coil path reads, is ``(V + R_e
  i_m)/(R_on + R_e)`` with the switch on; off, ``(R_e i_m - V_f)/(R_off + R_e)`` through
  the freewheel diode, or 0 once it blocks, the flux then dying through ``R_e``); the
  comparator trips where the reading (the true current times the sense chain's factor)
  crosses a threshold and the switch follows ``sense_delay`` later;
* copper R(T): IEC 60028, alpha = 0.00393 /K;
* the rail's bound written afresh from docs/design-method.md, swept at 1e5 points.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from rail_reference import assert_staggered_within_limit, comparator_run, linear_tail, simulated_last_channel

from coildrive.cli import app
from coildrive.config import load_drive

HOLD = 'mode = "current"\ncontrol = "{}"\nsense_delay = "3 us"\nmin_frequency = "3 kHz"\n'
CYCLES = 10


def _eddy_current_system(folder, control="hysteretic", gain=20):
    """The manifold's purge valves on a current-mode hold (test_system's copy: 1 % sense
    and gain tolerances) with an invented eddy resistance of 600 ohm and a plain diode
    freewheel (the Zener's step would be wider than any band)."""
    from test_system import _current_mode_system

    path = _current_mode_system(folder, hold=HOLD.format(control), gain=gain)
    purge = path.parent / "purge-valve-24v.toml"
    text = purge.read_text().replace('inductance = "70 mH"\n', 'inductance = "70 mH"\neddy_resistance = "600 ohm"\n')
    purge.write_text(text.split("[freewheel]")[0] + '[freewheel]\ntype = "diode"\ndiode_drop = "0.9 V"\n')
    return path


def _designed(folder, control, curve=False):
    """The system designed (``design --json``) and its folder; with a fixed off-time the
    purge valves each alone on a timer (a shared timer cannot make their off time); with
    ``curve`` their magnetising branch an invented saturating curve (70 mH at first, 0.085
    Wb at 2 A)."""
    # (on the curve a sense amplifier of gain 18: switched on cold at 28 V its uncompensated
    # peak comes too near the x20 amplifier's full scale for the over-current headroom)
    path = _eddy_current_system(folder, control, gain=18 if curve else 20)
    if control == "off_time":
        board = path.parent / "board.toml"
        board.write_text(board.read_text().replace("timers = [[1, 2, 3, 4, 5, 6]]", "timers = [[1, 2, 3, 4], [5], [6]]"))
    if curve:
        purge = path.parent / "purge-valve-24v.toml"
        purge.write_text(purge.read_text().replace('inductance = "70 mH"\n', 'flux_current = [0, 0.5, 1.0, 2.0]\n'
                                                   'flux_linkage = [0, 0.035, 0.06, 0.085]\n'))
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], path.parent


@pytest.fixture(scope="module", params=["hysteretic", "off_time"])
def doc(request, tmp_path_factory):
    return _designed(tmp_path_factory.mktemp("eddycm") / "manifold", request.param)


def _simulate(drv, cm, v, temp, r_f, l_f, reading, peak, cycles=CYCLES, n=40):
    """The purge valve written afresh: on for the ``peak`` s from 0 A, then the hold for
    ``cycles`` on/off cycles -- on until the reading reaches the upper (peak) threshold and
    the delay past it; hysteretic, off until it falls to the lower and the delay past it,
    else off for the fixed off time -- by ``solve_ivp`` between the comparator's events.
    Returns the time grid and the terminal (sensed) current."""
    c, b = drv.coil, drv.board
    r_coil = c.resistance * (1 + 0.00393 * (temp - c.reference_temp)) * r_f      # IEC 60028
    r_on = r_coil + drv.switch.on_resistance + b.sense.resistance
    r_off = r_coil + b.sense.resistance
    v_f, r_e = drv.freewheel.diode_drop, c.eddy_resistance
    if c.flux_current:      # a saturating magnetising branch: l_f x L_d(i_m), scipy's PCHIP
        from test_system_flux import _curve
        ld = _curve(drv)

        def ind(im):
            return l_f * float(ld(max(im, 0.0)))
    else:
        def ind(_im):
            return c.inductance * l_f

    def terminal(on, im):
        return (v + r_e * im) / (r_on + r_e) if on else np.maximum((r_e * im - v_f) / (r_off + r_e), 0.0)

    def rhs(_t, y, on):
        # the branch's voltage: on, the Thevenin pair; off, the diode path or blocked
        vl = r_e * (v - r_on * y[0]) / (r_on + r_e) if on else \
            max(-r_e * y[0], -r_e * (r_off * y[0] + v_f) / (r_off + r_e))
        return [vl / ind(y[0])]

    t, im, on, _ = comparator_run(rhs, terminal, cm, reading, peak, cycles, n=n)
    return t, np.where(on, terminal(True, im), terminal(False, im))


def _branch(t, b):
    """A branch written afresh: the terminal current on the magnetising rise, or a linear
    coil's rise, then the hold's top plus the excess's decay."""
    v, r = b["supply_v"], b["resistance_ohm"]
    tt = np.maximum(t, 0)
    if "eddy_resistance_ohm" in b:
        r_e = b["eddy_resistance_ohm"]
        i_m = v / r * (1 - np.exp(-tt * r * r_e / ((r + r_e) * b["inductance_h"])))
        rise = (v + r_e * i_m) / (r + r_e)
    else:
        rise = v / r * (1 - np.exp(-tt * r / b["inductance_h"]))
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], rise, linear_tail(t, b)))


def test_bound_never_below_the_simulated_current(doc):
    """scipy ``solve_ivp`` with the comparator's events over a corner grid: 20, 24 and 28 V
    (the channel's one peak), the coil cold, R and L at both tolerance ends, the sense
    reading 2 % low and 2 % high (1 % resistor, 1 % gain): the peak and 10 hold cycles
    never above the bound; the peak's end within 20 % of the simulated worst (its top
    supply); the hold's top within 3 % of the highest top of 30 cycles of hold alone
    (from 0 A: its orbit, reached from below)."""
    sys, folder = doc
    ch = sys["channels"][-1]
    d = ch["design"]
    cm = d["current_mode"]
    drv = load_drive(folder / "purge-valve-24v.toml")
    peak = d["pull_in"]["peak_ticks"] / drv.board.tick.rate
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    (b,) = ch["bound"]["branches"]
    worst, top = 0.0, 0.0
    for v in (20.0, 24.0, 28.0):
        for r_f in (1 - tol_r, 1 + tol_r):
            for l_f in (1 - tol_l, 1 + tol_l):
                for reading in (0.99**2, 1.01**2):
                    t, i = _simulate(drv, cm, v, drv.ambient.min, r_f, l_f, reading, peak)
                    bound = _branch(t, b)
                    assert np.all(i <= bound + 1e-9), (v, r_f, l_f, reading, float(np.max(i - bound)))
                    worst = max(worst, float(i[t <= peak].max()))
                    top = max(top, float(_simulate(drv, cm, v, drv.ambient.min, r_f, l_f, reading, 0.0, 30)[1].max()))
    print(f"peak end bound {b['peak_end_a']:.5f} A vs {worst:.5f} A; hold top {b['hold_top_a']:.5f} A "
          f"vs {top:.5f} A")
    assert 1.0 <= b["peak_end_a"] / worst <= 1.2
    assert top <= b["hold_top_a"] <= 1.03 * top


def test_staggered_total_never_above_the_limit(doc):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh: never above
    the limit with the stagger found."""
    assert_staggered_within_limit(doc[0], _branch)


@pytest.fixture(scope="module", params=["hysteretic", "off_time"])
def doc_curve(request, tmp_path_factory):
    """The same systems with the purge valves' magnetising branch a saturating curve."""
    return _designed(tmp_path_factory.mktemp("eddycmcurve") / "manifold", request.param, curve=True)


def test_on_a_curve_bound_never_below_the_simulated_current(doc_curve):
    """On the saturating curve (scipy's PCHIP through the table, ``l_f L_d(i_m) di_m/dt =
    v_L``), hysteretic and fixed off-time: ``solve_ivp`` with the comparator's events at
    20, 24 and 28 V, cold, R and L
    at both tolerance ends, the reading 2 % low and high -- the peak and 30 hold cycles
    never above the bound (its tables, test_system_flux's reading, written afresh); the
    bound's highest value within 20 % of the simulated worst; the dense sweep of the
    staggered total within the limit."""
    from test_system_flux import _branch as curve_branch

    sys, folder = doc_curve
    ch = sys["channels"][-1]
    d = ch["design"]
    drv = load_drive(folder / "purge-valve-24v.toml")
    peak = d["pull_in"]["peak_ticks"] / drv.board.tick.rate
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    (b,) = ch["bound"]["branches"]
    worst = 0.0
    for v in (20.0, 24.0, 28.0):
        for r_f in (1 - tol_r, 1 + tol_r):
            for l_f in (1 - tol_l, 1 + tol_l):
                for reading in (0.99**2, 1.01**2):
                    t, i = _simulate(drv, d["current_mode"], v, drv.ambient.min, r_f, l_f, reading, peak, 30)
                    bound = curve_branch(t, b)
                    assert np.all(i <= bound + 1e-9), (v, r_f, l_f, reading, float(np.max(i - bound)))
                    worst = max(worst, float(i.max()))
    top = float(curve_branch(np.linspace(0, b["peak_s"] + 0.02, 20001), b).max())
    print(f"bound's top {top:.5f} A vs simulated worst {worst:.5f} A (x{top / worst:.4f})")
    assert worst <= top <= 1.2 * worst
    assert_staggered_within_limit(sys, lambda t, b: curve_branch(t, b) if "rise_time_s" in b else _branch(t, b))


def _simulated_device(sys, folder, tmp_path, branch, hold_time, settle):
    """``simulate SYSTEM.toml`` (:func:`rail_reference.simulated_last_channel`) and the
    device ``emulate SYSTEM.toml --channel purge2`` serves, which has the thresholds."""
    from coildrive.bench.device import DeviceOptions, VirtualDevice
    from coildrive.cli.system_cmd import channel_drive
    from coildrive.design import design

    simulated_last_channel(sys, folder, tmp_path, branch, hold_time, settle)
    d = design(channel_drive(folder / "sys.toml", None, "purge2"))
    dev = VirtualDevice(d.drive, DeviceOptions(supply=24.0), design=d)
    assert dev._thresholds.upper_a == sys["channels"][-1]["design"]["current_mode"]["upper_a"]


def test_simulate_and_the_channels_device(doc, tmp_path):
    """``simulate SYSTEM.toml`` runs the current-mode channels on their own thresholds:
    purge2's draw never above its bound (28 V, cold, nominal coil, on the CSV's grid), its
    hold switching on and off. The device ``emulate SYSTEM.toml --channel purge2`` serves has the thresholds.
    Both run the model's own actuation: plumbing, not physics."""
    _simulated_device(*doc, tmp_path, _branch, 0.002, 0.0005)


def test_on_a_curve_simulate_and_the_channels_device(doc_curve, tmp_path):
    """The same with the curve (its hold switching once the peak's excess is gone)."""
    from test_system_flux import _branch as curve_branch

    _simulated_device(*doc_curve, tmp_path, curve_branch, 0.012, 0.009)
