"""A full bridge under a current-mode or a closed-loop hold on a channel of a system file:
its draw in the rail-current bound (the hold's off-times recirculate through the two
low-side switches, off the rail; the release's fast decay returns the current to it),
``simulate SYSTEM.toml`` and ``emulate SYSTEM.toml --channel``.

Outside references, named beside each check:

* scipy's ``solve_ivp`` (LSODA, events at the comparator's thresholds) on the H-bridge's
  three loops written afresh here (common practice): Q1 + Q4 on, ``L di/dt = V - (R_coil +
  2 R_switch + R_sense) i`` (the rail's current ``+i``); slow decay through Q2 + Q4, ``L
  di/dt = -(R_coil + 2 R_switch + R_sense) i`` (off the rail); fast decay through two body
  diodes back into the bus, ``L di/dt = -((R_coil + R_sense) i + V + 2 V_diode)``, stopping
  at zero (the rail's current ``-i``); the comparator trips where the reading (the true
  current times the sense chain's factor) crosses a threshold, the switch ``sense_delay``
  later; the closed loop at its output clamp (the most duty it can command);
* copper R(T): IEC 60028, alpha = 0.00393 /K;
* the rail's bound written afresh from docs/design-method.md, swept at 1e5 points.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import run_cli
from rail_reference import (assert_staggered_within_limit, comparator_run, header_holds, linear_tail,
                            simulated_last_channel)

from coildrive.cli import app
from coildrive.config import load_drive

BRIDGE = '[switch]\ntopology = "full_bridge"\n\n[freewheel]\ntype = "diode"\ndiode_drop = "0.9 V"\n'
HOLDS = {"current": ('mode = "current"\ncontrol = "hysteretic"\nsense_delay = "3 us"\n', "3 A"),
         "closed_loop": ('regulation = "closed_loop"\n', "4.5 A")}
ON, SLOW, FAST = 1, 0, 2


@pytest.fixture(scope="module", params=sorted(HOLDS))
def doc(request, tmp_path_factory):
    """The manifold's purge valves on full bridges (test_system's copy: 1 % sense and gain
    tolerances) under the hold, designed (``design --json``)."""
    from test_system import _current_mode_system

    hold, limit = HOLDS[request.param]
    path = _current_mode_system(tmp_path_factory.mktemp("bridgereg") / "manifold", hold=hold, limit=limit)
    purge = path.parent / "purge-valve-24v.toml"
    purge.write_text(purge.read_text().split("[freewheel]")[0] + BRIDGE)
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], path.parent


def bridge_rhs(drv, v, r_f, l_f):
    """``rhs(t, y, mode)`` of the bridge's three loops written afresh (module docstring) at
    ``v`` V, the coil cold with its R and L scaled by ``r_f`` and ``l_f``: ``mode`` ON, SLOW
    or FAST."""
    c, b = drv.coil, drv.board
    r_coil = c.resistance * (1 + 0.00393 * (drv.ambient.min - c.reference_temp)) * r_f      # IEC 60028
    sw, rs, ind = drv.switch.on_resistance, b.sense.resistance, c.inductance * l_f
    r_bridge, r_fast, v_fast = r_coil + 2 * sw + rs, r_coil + rs, v + 2 * drv.freewheel.diode_drop

    def rhs(_t, y, mode):
        return [(v - r_bridge * y[0] if mode == ON else -r_bridge * y[0] if mode == SLOW
                 else -(r_fast * y[0] + v_fast)) / ind]
    return rhs


def _simulate(drv, d, v, r_f, l_f, reading, n=30):
    """The bridge written afresh (module docstring) at ``v`` V, cold: the firmware's peak,
    then its hold -- current mode: 60 comparator cycles; closed loop: 120 periods at the
    clamp's duty -- then the release's fast decay to zero. Returns the time (s), the coil
    current (A) and the rail's current (A)."""
    rhs = bridge_rhs(drv, v, r_f, l_f)
    peak = d["pull_in"]["peak_ticks"] / drv.board.tick.rate
    if d["hold"]["regulation"] == "current":
        *_, (t1, i1, run) = comparator_run(rhs, lambda _on, x: x, d["current_mode"], reading, peak, 60, n=n)
    else:
        *_, (t1, i1, run) = comparator_run(rhs, None, None, reading, peak, 0, n=n)
        period = 1.0 / d["timer"]["frequency_hz"]
        duty = d["closed_loop"]["max_compare"] / d["timer"]["period_ticks"]
        for _ in range(120):
            t1, i1 = run(t1, i1, ON, duty * period)
            t1, i1 = run(t1, i1, SLOW, (1 - duty) * period)
    run(t1, i1, FAST, 1.0, stop=lambda x: x)                    # the release, to zero
    t, i, mode = run.samples()
    return t, i, np.where(mode == ON, i, np.where(mode == FAST, -i, 0.0))


def _branch(t, b):
    rise = b["supply_v"] / b["resistance_ohm"] * (1 - np.exp(-np.maximum(t, 0) * b["resistance_ohm"] / b["inductance_h"]))
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], rise, linear_tail(t, b)))


def test_bound_never_below_the_simulated_draw(doc):
    """scipy ``solve_ivp`` over a corner grid: 20, 24 and 28 V (the channel's one peak),
    the coil cold, R and L at both tolerance ends, the sense reading 2 % low and 2 % high
    (1 % resistor, 1 % gain; current mode): the coil current and the rail's current never
    above the bound, the release's fast decay returning current (negative); the bound's
    highest value within 20 % of the simulated worst."""
    system, folder = doc
    ch = system["channels"][-1]
    d = ch["design"]
    drv = load_drive(folder / "purge-valve-24v.toml")
    (b,) = ch["bound"]["branches"]
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    readings = (0.99**2, 1.01**2) if d["hold"]["regulation"] == "current" else (1.0,)
    worst, returned = 0.0, 0.0
    for v in (20.0, 24.0, 28.0):
        for r_f in (1 - tol_r, 1 + tol_r):
            for l_f in (1 - tol_l, 1 + tol_l):
                for reading in readings:
                    t, i, draw = _simulate(drv, d, v, r_f, l_f, reading)
                    bound = _branch(t, b)
                    assert np.all(i <= bound + 1e-9), (v, r_f, l_f, reading, float(np.max(i - bound)))
                    assert np.all(draw <= bound + 1e-9)
                    worst, returned = max(worst, float(i.max())), min(returned, float(draw.min()))
    top = float(_branch(np.linspace(0, b["peak_s"] + 0.02, 20001), b).max())
    print(f"{d['hold']['regulation']}: bound's top {top:.5f} A vs simulated worst {worst:.5f} A "
          f"(x{top / worst:.4f}); returned {returned:.4f} A")
    assert returned < 0
    assert worst <= top <= 1.2 * worst


def test_staggered_total_never_above_the_limit(doc):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh: never above
    the limit; the return into the shared rail is cautioned (common practice: a supply
    that cannot sink lets the bus rise)."""
    system = doc[0]
    worst = assert_staggered_within_limit(system, _branch) if system["stagger_ticks"] else None
    if worst is None:       # the peaks together fit: the bound written afresh still within it
        from rail_reference import rail_worst
        assert rail_worst(system["channels"], _branch) <= system["current_limit_a"]
    (warn,) = [c for c in system["checks"] if c["name"] == "shared_rail_return"]
    assert warn["severity"] == "warning" and "purge1" in warn["detail"]


def test_simulate_and_the_channels_device(doc, tmp_path):
    """``simulate SYSTEM.toml`` (28 V, cold, nominal coil, on the CSV's grid): purge2's draw
    never above its bound, its hold switching, its release returning current to the rail;
    ``emulate SYSTEM.toml --channel purge2`` (a real subprocess) serves its device. Both
    run the model's own actuation: plumbing, not physics."""
    system, folder = doc
    csv = simulated_last_channel(system, folder, tmp_path, _branch, 0.012, 0.009, coil=True)
    others = csv[:, 2:7] * csv[:, 8:13]                 # the one-switch channels' draw while on
    assert (csv[:, 1] - others.sum(axis=1)).min() < 0     # the bridge's fast decay, negative
    r = run_cli("emulate", str(folder / "sys.toml"), "--channel", "purge2", "--duration", "0.3")
    assert r.returncode == 0 and r.stdout.startswith("/dev/"), r.stderr
    assert "channel purge2" in r.stderr, r.stderr


def test_header_compiles(doc, tmp_path):
    """``design SYSTEM.toml --header``: the bridge channels' hold under their prefix (the
    current-mode or closed-loop constants and the bridge's switch masks), compiled with
    gcc -Wall -Wextra -Werror -pedantic."""
    system, folder = doc
    header = tmp_path / "board.h"
    r = run_cli("design", str(folder / "sys.toml"), "--header", str(header))
    assert r.returncode == 0, r.stderr
    text = header.read_text()
    what = "CURRENT" if system["channels"][-1]["design"]["hold"]["regulation"] == "current" else "CLOSED_LOOP"
    assert f"#define PURGE2_HOLD_REGULATION             PURGE2_REGULATION_{what}" in text
    assert "#define PURGE2_BRIDGE_HOLD_ON_SWITCHES" in text
    header_holds(tmp_path, text, f"PURGE2_HOLD_REGULATION == PURGE2_REGULATION_{what} && DISP1_PEAK_TICKS > 0")
