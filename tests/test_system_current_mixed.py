"""A full bridge's current-mode hold with mixed decay on a channel of a system file: the
manifold's purge valves on full bridges under a hysteretic hold with ``fast_fraction``
(each off-time all four open for the one-shot, or to the lower threshold, then Q2 + Q4),
each alone on a timer of its own (the one-shot needs its timer's own prescaler and period:
on a shared timer it is refused in one line).

Outside references, named beside each check:

* scipy's ``solve_ivp`` (LSODA, events at the comparator's thresholds) on the H-bridge's
  three loops written afresh (tests/test_system_bridge_regulated.py's, common practice):
  on, ``L di/dt = V - (R_coil + 2 R_switch + R_sense) i`` (the rail's current ``+i``); fast,
  ``L di/dt = -((R_coil + R_sense) i + V + 2 V_diode)`` stopping at zero (``-i``: returned);
  slow, ``L di/dt = -(R_coil + 2 R_switch + R_sense) i`` (off the rail); the comparator
  trips where the reading (the true current times the sense chain's factor) crosses a
  threshold, the switch ``sense_delay`` later;
* copper R(T): IEC 60028, alpha = 0.00393 /K.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import run_cli
from rail_reference import comparator_run, simulated_last_channel
from test_system_bridge_regulated import BRIDGE, FAST, ON, SLOW, _branch, bridge_rhs

from coildrive.cli import app
from coildrive.config import load_drive

HOLD = 'mode = "current"\ncontrol = "hysteretic"\nsense_delay = "3 us"\nfast_fraction = 0.3\n'


def _system(folder, timers="[[1, 2, 3, 4], [5], [6]]"):
    from test_system import _current_mode_system

    path = _current_mode_system(folder, hold=HOLD)
    board = folder / "board.toml"
    board.write_text(board.read_text().replace("timers = [[1, 2, 3, 4, 5, 6]]", f"timers = {timers}"))
    purge = folder / "purge-valve-24v.toml"
    purge.write_text(purge.read_text().split("[freewheel]")[0] + BRIDGE)
    return path


@pytest.fixture(scope="module")
def doc(tmp_path_factory):
    path = _system(tmp_path_factory.mktemp("cmmixed") / "manifold")
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], path.parent


def _simulate(drv, d, v, r_f, l_f, reading, cycles=60, n=30):
    """The bridge written afresh (module docstring) at ``v`` V, cold: the firmware's peak,
    then ``cycles`` comparator cycles -- on to the upper threshold read, the delay; all four
    open for the one-shot or until the lower threshold read (then the delay on the fast
    path), else Q2 + Q4 to it and the delay -- then the release's fast decay to zero.
    Returns the time (s), the coil current (A) and the rail's current (A)."""
    rhs = bridge_rhs(drv, v, r_f, l_f)
    cm = d["current_mode"]
    lo, hi, delay, one_shot = cm["lower_a"], cm["upper_a"], cm["sense_delay_s"], cm["fast_time_s"]
    peak = d["pull_in"]["peak_ticks"] / drv.board.tick.rate
    *_, (t, i, run) = comparator_run(rhs, lambda _on, x: x, cm, reading, peak, 0, n=n)
    below = lambda x: reading * x - lo   # noqa: E731 -- the reading down to the lower threshold
    for _ in range(cycles):
        t, i = run(t, i, ON, 1.0, hi)
        t, i = run(t, i, ON, delay)
        t0 = t
        t, i = run(t, i, FAST, one_shot, stop=below) if below(i) > 0 else (t, i)
        if below(i) > 1e-12 and i > 0:   # the one-shot over: Q2 + Q4 to the lower threshold
            t, i = run(t, i, SLOW, 1.0, stop=below)
        fast_left = max(one_shot - (t - t0), 0.0)
        t, i = run(t, i, FAST if fast_left > 0 else SLOW, min(delay, fast_left) if fast_left > 0 else delay)
        if fast_left and delay > fast_left:
            t, i = run(t, i, SLOW, delay - fast_left)
    run(t, i, FAST, 1.0, stop=lambda x: x)                    # the release, to zero
    t, i, mode = run.samples()
    return t, i, np.where(mode == ON, i, np.where(mode == FAST, -i, 0.0))


def test_bound_never_below_the_simulated_draw(doc):
    """scipy ``solve_ivp`` at 20 and 28 V, the coil cold, R and L at both tolerance ends,
    the sense reading 2 % low and 2 % high: the coil current and the rail's current never
    above the bound; the hold's fast parts and the release return current (negative)."""
    system, folder = doc
    ch = system["channels"][-1]
    d = ch["design"]
    assert d["topology"]["bridge"]["hold_decay"] == "mixed" and d["current_mode"]["fast_time_s"] > 0
    drv = load_drive(folder / "purge-valve-24v.toml")
    (b,) = ch["bound"]["branches"]
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    returned = 0.0
    for v in (20.0, 28.0):
        for r_f in (1 - tol_r, 1 + tol_r):
            for l_f in (1 - tol_l, 1 + tol_l):
                for reading in (0.99**2, 1.01**2):
                    t, i, draw = _simulate(drv, d, v, r_f, l_f, reading)
                    bound = _branch(t, b)
                    assert np.all(i <= bound + 1e-9), (v, r_f, l_f, reading, float(np.max(i - bound)))
                    assert np.all(draw <= bound + 1e-9)
                    hold = t < t[np.flatnonzero(draw > 0)[-1]]   # before the last on-sample: the hold
                    returned = min(returned, float(draw[hold].min()))
    assert returned < 0


def test_simulate_system(doc, tmp_path):
    """``simulate SYSTEM.toml`` (28 V, cold, nominal coil, on the CSV's grid): purge2's coil
    current never above its bound, its hold switching. Plumbing: the model's actuation."""
    system, folder = doc
    simulated_last_channel(system, folder, tmp_path, _branch, 0.012, 0.009, coil=True)


def test_a_shared_timer_refuses_it_in_one_line(tmp_path):
    """On the board's one shared timer: one line naming hold.fast_fraction, exit 2."""
    path = _system(tmp_path / "manifold", timers="[[1, 2, 3, 4, 5, 6]]")
    r = run_cli("design", str(path))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "hold.fast_fraction" in r.stderr and "one-shot" in r.stderr and "Traceback" not in r.stderr


@pytest.mark.compiler
def test_the_board_header_carries_the_one_shot(doc, tmp_path):
    """`design SYSTEM.toml --header` (a subprocess): purge2's block carries the one-shot of
    its fast part (its own prescaler, its counts = fast_time_s on the timer), and the
    header compiles with gcc -Wall -Wextra -Werror -pedantic and holds."""
    from rail_reference import header_holds

    system, folder = doc
    header = tmp_path / "board.h"
    r = run_cli("design", str(folder / "sys.toml"), "--header", str(header))
    assert r.returncode == 0, r.stderr
    text = header.read_text()
    cm = system["channels"][-1]["design"]["current_mode"]
    assert "#define PURGE2_HOLD_OFF_FAST_TICKS" in text and "#define PURGE2_HOLD_OFF_PRESCALER" in text
    header_holds(tmp_path, text, f"PURGE2_HOLD_OFF_FAST_TICKS == {cm['off_fast_ticks']} && "
                                 f"PURGE2_HOLD_OFF_PRESCALER == {cm['off_prescaler']} && DISP1_PEAK_TICKS > 0")
