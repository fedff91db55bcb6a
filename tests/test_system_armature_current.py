"""A current-mode hold with a moving armature on a channel of a system file: the peak's
bound is the armature's (the open coil's rise while it only closes), the hold's and the
tail's the current-mode ones on the seated coil (docs/design-method.md, "Several
channels").

Outside references, named beside each check:

* scipy's ``solve_ivp`` (DOP853) of the armature's equations written afresh
  (tests/armature_equations.py, through test_armature_current_mode.reference): resting
  open, free, seated in the peak; the hold switched at the hysteretic thresholds (the
  true current at the threshold's code over the sense chain's factor), the armature
  checked to stay seated;
* copper R(T): IEC 60028, alpha = 0.00393 /K (in the loop's resistance);
* the rail's bound written afresh from docs/design-method.md, swept at 1e5 points.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from armature_equations import equations
from conftest import run_cli
from rail_reference import assert_staggered_within_limit, linear_tail, simulated_last_channel
from test_armature_current_mode import _point, reference
from test_system_armature import ARMATURE, _rise

from coildrive.cli import app
from coildrive.config import load_drive

HOLD = 'mode = "current"\ncontrol = "hysteretic"\nsense_delay = "3 us"\n'


@pytest.fixture(scope="module")
def doc(tmp_path_factory):
    """The manifold's purge valves on a hysteretic hold (test_system's copy: 1 % sense and
    gain tolerances) with test_system_armature's invented armature (and the release current
    its mechanics drop out at), designed (``design --json``)."""
    from test_system import _current_mode_system

    path = _current_mode_system(tmp_path_factory.mktemp("armcm") / "manifold", hold=HOLD)
    purge = path.parent / "purge-valve-24v.toml"
    purge.write_text(purge.read_text().replace('current = "0.09 A"', 'current = "0.15 A"') + ARMATURE)
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], path.parent


def _branch(t, b):
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], _rise(t, b), linear_tail(t, b)))


def test_bound_never_below_the_simulated_current(doc):
    """``solve_ivp`` over a corner grid: 20 and 28 V (the channel's one peak), the coil
    cold, R and L at both tolerance ends, the sense reading 2 % low and high: the peak's
    end and every hold segment (7.5 ms: the peak's excess decaying, then the comparator's
    cycles) never above the bound; the bound's highest value within 25 % of the
    simulated worst."""
    system, folder = doc
    ch = system["channels"][-1]
    d = ch["design"]
    cm = d["current_mode"]
    drv = load_drive(folder / "purge-valve-24v.toml")
    (b,) = ch["bound"]["branches"]
    peak = d["pull_in"]["peak_ticks"] / drv.board.tick.rate
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    worst = 0.0
    for v in (20.0, 28.0):
        for r_f in (1 - tol_r, 1 + tol_r):
            for l_f in (1 - tol_l, 1 + tol_l):
                for reading in (0.99**2, 1.01**2):
                    g = _point(drv, v, drv.ambient.min, r_f, l_f)
                    got = reference(g, cm["lower_a"] / reading, cm["upper_a"] / reading, peak, 0.0075)
                    assert got["seat"] < peak and got["i_peak"] <= b["peak_end_a"] + 1e-9
                    cur = equations(g)[0]
                    for a, z, _on, sol in got["segments"]:
                        tt = np.linspace(a, z, 20)
                        i = cur(sol(tt)[0], 0.0)
                        assert np.all(i <= _branch(tt, b) + 1e-9), (v, r_f, l_f, reading)
                    worst = max(worst, got["i_peak"])
    top = float(_branch(np.linspace(0, b["peak_s"] + 0.02, 20001), b).max())
    print(f"bound's top {top:.5f} A vs simulated worst {worst:.5f} A (x{top / worst:.4f})")
    assert worst <= top <= 1.25 * worst


def test_staggered_total_never_above_the_limit(doc):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh: never above
    the limit with the stagger found."""
    assert_staggered_within_limit(doc[0], _branch)


def test_simulate_and_the_channels_device(doc, tmp_path):
    """``simulate SYSTEM.toml`` (28 V, cold, nominal coil, on the CSV's grid): purge2's draw
    never above its bound, its hold switching on its thresholds; ``emulate SYSTEM.toml
    --channel purge2`` (a real subprocess) serves its device. Both run the model's own
    actuation: plumbing, not physics."""
    system, folder = doc
    simulated_last_channel(system, folder, tmp_path, _branch, 0.01, 0.008)     # past the peak's excess
    r = run_cli("emulate", str(folder / "sys.toml"), "--channel", "purge2", "--duration", "0.3")
    assert r.returncode == 0 and r.stdout.startswith("/dev/"), r.stderr
    assert "channel purge2" in r.stderr, r.stderr
