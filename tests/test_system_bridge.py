"""A full bridge on a channel of a system file (mixed decay in the hold): its supply draw
in the rail-current bound, the energy its fast decay returns, and the shared rail's droop.

Outside references, named beside each check:

* the H-bridge's three loops solved afresh per segment in closed form (common practice:
  both switches on, ``R_coil + 2 R_switch + R_sense`` across the bus; fast decay through
  two body diodes back into the bus, ``L di/dt = -(R i + V_bus + 2 V_diode)``, the rail's
  current then *negative*; slow decay through the two low-side switches, off the rail),
  each segment ``i(t) = A + (i0 - A) exp(-t R/L)``, stopping at zero;
* ngspice (batch mode): the six coils switched onto a bus behind ``R_s`` and ``C``;
* copper R(T): IEC 60028, alpha = 0.00393 /K.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS
from rail_reference import (assert_staggered_within_limit, firmware_lookup, linear_tail, manifold_copy,
                            peaks_droop_ngspice, readable)

from test_system import droop_against_solve_ivp

from coildrive.cli import app
from coildrive.config import load_drive

BOARD = BOARDS / "manifold-m32-6ch.toml"
BRIDGE = '\n[switch]\ntopology = "full_bridge"\n\n[freewheel]\ntype = "diode"\ndiode_drop = "0.9 V"\n'


@pytest.fixture(scope="module")
def system(tmp_path_factory):
    """The manifold with its purge valves on full bridges, 30 % of each off-time fast."""
    folder = tmp_path_factory.mktemp("bridgesys")
    path = manifold_copy(folder)
    purge = folder / "purge-valve-24v.toml"
    text = purge.read_text().split("[freewheel]")[0]
    purge.write_text(text.replace("frequency_tolerance = 0.03\n", "frequency_tolerance = 0.03\nfast_fraction = 0.3\n")
                     + BRIDGE)
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"]


def _segment(t, i0, a, r, l):
    """``i = A + (i0 - A) exp(-t R/L)``, held at zero once there (``A < 0``)."""
    return np.maximum(a + (i0 - a) * np.exp(-t * r / l), 0.0)


def _branch(t, b):
    rise = b["supply_v"] / b["resistance_ohm"] * (1 - np.exp(-np.maximum(t, 0) * b["resistance_ohm"] / b["inductance_h"]))
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], rise, linear_tail(t, b)))


def test_bridge_draw_never_above_the_bound(system):
    """The bridge channel solved afresh: the firmware's peak, then 40 PWM periods (on,
    fast decay into the bus for 30 % of the off-time, slow decay for the rest), at the
    lowest and highest supply, cold, R and L at both tolerance ends. The coil current and
    the rail's current (+ on, - in the fast decay: the returned energy, which the bound
    leaves out -- the safe side) are never above the bound; the fast decay does return
    current; the peak's bound is within 8 % of the worst simulated peak."""
    ch = system["channels"][-1]
    d = ch["design"]
    drv = load_drive(ch["drive_file"], BOARD)
    c, b0 = drv.coil, drv.board
    vd, sw, rs = drv.freewheel.diode_drop, drv.switch.on_resistance, b0.sense.resistance
    period, frac = 1 / d["hold"]["frequency_hz"], 0.3
    ratios, returned = [], 0.0
    for v in (drv.supply.min, drv.supply.max):
        peak, duty = firmware_lookup(d, drv, v)
        branches = readable(ch, v)
        worst = 0.0
        for r_f in (1 - c.resistance_tolerance, 1 + c.resistance_tolerance):
            r_coil = c.resistance * (1 + 0.00393 * (drv.ambient.min - c.reference_temp)) * r_f
            r_on, r_fast, r_slow = r_coil + 2 * sw + rs, r_coil + rs, r_coil + rs + 2 * sw
            for l_f in (1 - c.inductance_tolerance, 1 + c.inductance_tolerance):
                l = c.inductance * l_f
                s = np.linspace(0, 1, 25)
                i = _segment(s * peak, 0.0, v / r_on, r_on, l)
                ts, cs, draws = [s * peak], [i], [i]
                worst = max(worst, float(i[-1]))
                for m in range(40):
                    t0, t_on, t_off = peak + m * period, duty * period, (1 - duty) * period
                    i = _segment(s * t_on, i[-1], v / r_on, r_on, l)
                    ts.append(t0 + s * t_on), cs.append(i), draws.append(i)
                    i = _segment(s * frac * t_off, i[-1], -(v + 2 * vd) / r_fast, r_fast, l)
                    ts.append(t0 + t_on + s * frac * t_off), cs.append(i), draws.append(-i)
                    i = _segment(s * (1 - frac) * t_off, i[-1], 0.0, r_slow, l)
                    ts.append(t0 + t_on + frac * t_off + s * (1 - frac) * t_off), cs.append(i)
                    draws.append(0 * i)
                t, cur, draw = np.concatenate(ts), np.concatenate(cs), np.concatenate(draws)
                bound = np.max([_branch(t, b) for b in branches], axis=0)
                assert np.all(cur <= bound + 1e-9), (v, r_f, l_f, float(np.max(cur - bound)))
                assert np.all(draw <= bound + 1e-9)
                returned = min(returned, float(draw.min()))
        ratios.append(max(b["peak_end_a"] for b in branches) / worst)
    print("bound / worst over the peak:", [round(x, 4) for x in ratios], f"returned {returned:.3f} A")
    assert returned < 0
    assert all(1.0 <= x <= 1.08 for x in ratios), ratios


def test_staggered_total_never_above_the_limit(system):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh: never above
    the limit with the stagger found."""
    assert_staggered_within_limit(system, _branch)


def test_droop_bound_never_above_ngspice(tmp_path, system):
    """ngspice: the six coils (the bridges through two switches) switched on together
    behind R_s and C, lowest supply, cold, R and L low, up to the first peak's end: the
    reported lowest bus (a bound) is never above ngspice's (1 mV)."""
    rail = system["rails"][0]
    low = peaks_droop_ngspice(tmp_path, system, BOARD, "bridge-droop")
    print(f"reported {rail['lowest_bus_together_v']:.4f} V, ngspice {low:.4f} V")
    assert rail["lowest_bus_together_v"] <= low + 1e-3
    assert "full bridge" in rail["droop_method"]


def test_the_shared_rail_return_is_cautioned(system):
    """The energy the bridges return into the shared rail is not summed over channels: a
    warning says so (common practice: a supply that cannot sink lets the bus rise)."""
    (warn,) = [c for c in system["checks"] if c["name"] == "shared_rail_return"]
    assert warn["severity"] == "warning" and "purge1" in warn["detail"] and "capacitor" in warn["detail"]


def test_simulated_droop_with_bridges_against_solve_ivp(tmp_path):
    """``simulate SYSTEM.toml`` with the purge valves on full bridges (slow decay in the
    hold) feeds the drooping bus back into every coil, the bridges' fast decay returning
    into it (coildrive/model/shared_bus.py, the diodes blocking at zero: a root of the
    closed form). Reference: scipy's solve_ivp (DOP853, rtol 1e-10) of the six coils and
    the capacitor written afresh (tests/test_system.py's droop_against_solve_ivp, the
    H-bridge's three loops of the module docstring, each switch played from the CSV), to the
    CSV's end: the bus within 1e-6 V, each coil's current within 1e-6 A, the rail's current
    negative while a bridge returns its current. Then with a mixed-decay hold (30 % of each
    off-time fast): its fast parts return the current into the bus too, each to its end or
    the diodes' block (an event of the reference's integration), then the slow part; the
    same reference and tolerances. With an eddy term on the bridge the rail stays stiff,
    said in one line."""
    path = manifold_copy(tmp_path)
    purge = tmp_path / "purge-valve-24v.toml"
    text = purge.read_text().split("[freewheel]")[0]
    purge.write_text(text + BRIDGE)
    bus = droop_against_solve_ivp(path, tmp_path)
    assert bus.max() > 20.0, "the fast decay lifts the bus above the source"
    purge.write_text(text.replace("frequency_tolerance = 0.03\n", "frequency_tolerance = 0.03\nfast_fraction = 0.3\n")
                     + BRIDGE)
    bus = droop_against_solve_ivp(path, tmp_path)
    assert bus.max() > 20.0, "the fast parts and the release lift the bus above the source"
    # with an eddy term on the bridge the rail stays stiff, said in one line
    purge.write_text(purge.read_text().replace('inductance = "70 mH"\n', 'inductance = "70 mH"\neddy_resistance = "150 ohm"\n'))
    r = CliRunner().invoke(app, ["simulate", str(path), "--supply", "20", "--coil-temp", "0", "--hold-time", "0.002",
                                 "--csv", str(tmp_path / "eddy.csv")])
    assert r.exit_code == 0, r.output
    (line,) = [x for x in r.stderr.splitlines() if "stiff" in x]
    assert "a full bridge with an eddy term: the bus is taken stiff" in line and "bus_v" not in r.stderr
