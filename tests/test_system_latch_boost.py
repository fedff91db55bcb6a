"""A latching coil's pulses from the boost on a channel of a system file: the rail carries
its boost converter's input (not the windings' current), the stagger, and ``simulate
SYSTEM.toml``.

Outside references, named beside each check:

* scipy's ``solve_ivp`` (LSODA, an event at the threshold) on each winding's pulse written
  afresh from Kirchhoff's laws: the boost capacitor into the winding through ``R_on + R_b``,
  ``L di/dt = u - (R_on + R_b) i``, ``C du/dt = -i + P/u`` (the converter charging it at a
  constant power ``P`` from switch-on while it is below its charge ``V_b`` -- it regulates
  there, giving at most the winding's current -- and taking ``P/eta`` from the rail: its
  input over its efficiency, common practice); the pulse ends a scheduler tick after the
  sensed current reaches the threshold (the driver compares once a tick), the winding then
  decays through its own freewheel path, off the rail; the converter recharges the
  capacitor, ``C u du/dt = P``, closed form;
* copper R(T): IEC 60028, alpha = 0.00393 /K;
* the board header compiled by gcc -Wall -Wextra -Werror -pedantic;
* the rail's bound written afresh from docs/design-method.md, swept at 1e5 points.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS
from rail_reference import assert_staggered_within_limit, header_holds, manifold_copy, readable, simulate_csv

from test_system_boost import _branch
from test_system_latch import CIRCUITS, LATCH

from coildrive.cli import app
from coildrive.config import load_drive

BOARD = BOARDS / "manifold-m32-6ch.toml"
#: the latching purge valves' two windings pulsed from an invented 38 V, 220 uF boost (5 W,
#: 85 %), each until 1.2 x its current (a pulse from the boost ends at its threshold: no
#: settle time)
BOOST = ('boost = "38 V"\nboost_tolerance = 0.05\nboost_capacitance = "220 uF"\nboost_capacitance_tolerance = 0.2\n'
         'boost_resistance = "0.1 ohm"\nboost_power = "5 W"\nboost_efficiency = 0.85\n')


@pytest.fixture(scope="module")
def doc(tmp_path_factory):
    """The manifold with its two purge valves latching on a set and a reset winding, their
    pulses from the boost (``design --json``)."""
    folder = tmp_path_factory.mktemp("latchboost")
    path = manifold_copy(folder)
    text = LATCH.format(circuit=CIRCUITS["winding"]).replace('settle_time = "10 ms"\n', "")
    text = text.replace("sink = true\n", BOOST).replace("margin = 1.5\n", "margin = 1.5\ncurrent_margin = 1.2\n")
    (folder / "purge-latch-24v.toml").write_text(text)
    path.write_text(path.read_text().replace('"purge-valve-24v.toml"', '"purge-latch-24v.toml"'))
    r = CliRunner().invoke(app, ["design", str(path), "--json", "--header", str(folder / "board.h")])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], path


def _pulse(drv, reset, v, temp, r_f, l_f, v_b, cap, threshold, reading):
    """One pulse from the boost (module docstring), the winding at ``temp`` degC:
    ``(the converter's end s, the capacitor's lowest V, the rail's current while it draws A)``."""
    from scipy.integrate import solve_ivp

    c = drv.latch.reset_coil if reset else drv.coil
    s = drv.supply
    r = (c.resistance * (1 + 0.00393 * (temp - c.reference_temp)) * r_f              # IEC 60028
         + drv.switch.on_resistance + drv.board.sense.resistance + s.boost_resistance)
    ind, p = c.inductance * l_f, s.boost_power

    def rhs(_t, y):
        charge = p / y[1] if y[1] < v_b else min(p / y[1], y[0])
        return [(y[1] - r * y[0]) / ind, (-y[0] + charge) / cap]

    def reached(_t, y):
        return reading * y[0] - threshold
    reached.terminal, reached.direction = True, 1
    first = solve_ivp(rhs, (0, 1.0), [0.0, v_b], method="LSODA", rtol=1e-10, atol=1e-12, events=reached)
    t_end = first.t[-1] + 1 / drv.board.tick.rate           # seen at most one tick late
    sol = solve_ivp(rhs, (0, t_end), [0.0, v_b], method="LSODA", rtol=1e-10, atol=1e-12, max_step=t_end / 200)
    u_end = sol.y[1, -1]
    return t_end + cap * (v_b**2 - u_end**2) / (2 * p), float(sol.y[1].min()), p / (s.boost_efficiency * v)


def test_the_rail_carries_the_converter_within_the_bound(doc):
    """Each pulse solved afresh (module docstring) at 20 V with the winding at
    thermal.max_coil_temp and at 28 V cold (ambient.min), R and L at both tolerance ends, the boost at its highest on the nominal capacitor and at its lowest on
    the smallest, the sense reading 2 % low and high: the capacitor never falls to the main
    supply (its diode blocks: the windings' current is never the rail's), and the rail's
    current -- the converter's input from switch-on until the capacitor is recharged --
    never above the pulse's branch on a dense grid; the branch's converter lasts at most
    50 % longer than the longest simulated one (the longest pulse and the most energy, each
    at its own corner, summed)."""
    system, _ = doc
    ch = system["channels"][-1]
    drv = load_drive(ch["drive_file"], BOARD)
    s, tol_r, tol_l = drv.supply, drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    branches = {b["pulse"]: b for b in ch["bound"]["branches"]}
    for p in ch["design"]["latch"]["pulses"]:
        b = branches[p["name"]]
        assert b["coil_top_a"] == 0.0       # the boost_droop checks pass: the winding is off the rail
        longest = 0.0
        for v, temp in ((s.min, drv.thermal.max_coil_temp), (s.max, drv.ambient.min)):
            for r_f in (1 - tol_r, 1 + tol_r):
                for l_f in (1 - tol_l, 1 + tol_l):
                    for v_b, cap in ((s.boost * (1 + s.boost_tolerance), s.boost_capacitance),
                                     (s.boost * (1 - s.boost_tolerance),
                                      s.boost_capacitance * (1 - s.boost_capacitance_tolerance))):
                        for reading in (0.98, 1.02):
                            until, lowest, draw = _pulse(drv, p["name"] == "reset", v, temp, r_f, l_f, v_b, cap,
                                                         p["boost"]["threshold_a"], reading)
                            assert lowest > v, (p["name"], v, lowest)
                            t = np.linspace(0, 1.5 * b["converter_until_s"], 4001)
                            rail = np.where(t < until, draw, 0.0)
                            assert np.all(rail <= _branch(t, b) + 1e-12), (p["name"], v, r_f, l_f, v_b, reading)
                            longest = max(longest, until)
        print(f"{p['name']}: converter until {b['converter_until_s'] * 1e3:.4f} ms vs simulated "
              f"{longest * 1e3:.4f} ms")
        assert longest <= b["converter_until_s"] <= 1.5 * longest


def test_staggered_total_never_above_the_limit(doc):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh: never above the
    limit with the stagger found."""
    assert_staggered_within_limit(doc[0], _branch)


def test_header_has_the_boosted_pulses_and_compiles(doc, tmp_path):
    """``design SYSTEM.toml --header``: the latching channels' pulses from the boost under
    their prefixes (each pulse's threshold code, the boosted flag), purge2 starting its
    stagger after purge1, compiled with gcc -Wall -Wextra -Werror -pedantic."""
    system, path = doc
    text = (path.parent / "board.h").read_text()
    codes = {p["name"]: p["boost"]["threshold_code"] for p in system["channels"][-1]["design"]["latch"]["pulses"]}
    for name in ("PURGE1", "PURGE2"):
        assert f"#define {name}_LATCH_BOOSTED " in text
    header_holds(tmp_path, text, f"PURGE2_SET_THRESHOLD_CODE == {codes['set']} && PURGE2_RESET_THRESHOLD_CODE == "
                                 f"{codes['reset']} && PURGE2_START_OFFSET_TICKS > PURGE1_START_OFFSET_TICKS")


def test_simulate_draws_the_converter(doc, tmp_path):
    """``simulate SYSTEM.toml`` at 28 V (the reset pulses 50 ms after the sets): up to the
    first reset the rail never above the sum of the channels' bounds readable there on the
    CSV's grid; throughout, the rail less the dispensing valves' draw is a whole number of
    converter inputs ``P / (eta V)`` (the windings' current is never the rail's), two while
    purge2's set pulse runs from the boost (its winding carrying current, purge1's
    capacitor still recharging). The model's own pulses: plumbing."""
    system, path = doc
    csv = simulate_csv(path, tmp_path, 0.05)
    chans = system["channels"]
    total = sum(np.max([_branch(csv[:, 0] - c["offset_s"], b) for b in readable(c, 28.0)], axis=0) for c in chans)
    # (the reset pulses come 50 ms later, each in a slot of its own: the bound's slot is the set's)
    first = csv[:, 0] < chans[4]["offset_s"] + 0.05
    assert np.all(csv[first, 1] <= total[first] + 1e-9), float(np.max(csv[first, 1] - total[first]))
    # the latching channels draw their converters' input alone: 0, 1 or 2 x P / (eta V)
    rest = (csv[:, 1] - (csv[:, 2:6] * csv[:, 8:12]).sum(axis=1)) / (5.0 / (0.85 * 28.0))
    assert np.allclose(rest, np.round(rest), rtol=0, atol=1e-6) and set(np.round(rest)) == {0.0, 1.0, 2.0}
    mine = (csv[:, 0] > chans[5]["offset_s"]) & (csv[:, 13] == 1) & first
    assert mine.any() and np.all(csv[mine, 7] > 0) and np.all(np.round(rest[mine]) == 2)
