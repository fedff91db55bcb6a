"""A latching coil on a channel of a system file: its pulses in the rail-current bound (a
peak without a hold), the header's per-channel constants, ``simulate SYSTEM.toml`` and
``emulate SYSTEM.toml --channel``.

Outside references, named beside each check:

* scipy's ``solve_ivp`` (LSODA) on each winding's loop written afresh: ``L di/dt = V -
  R_on i`` with the switches on (a full bridge: ``R_coil + 2 R_switch + R_sense``; one
  low-side switch: ``R_coil + R_switch + R_sense``), then off -- a bridge's fast decay
  through two body diodes back into the bus, ``L di/dt = -(R i + V_bus + 2 V_diode)``, the
  rail's current negative (common practice); one switch, the freewheel diode and Zener
  across the coil, off the rail -- stopping at zero;
* copper R(T): IEC 60028, alpha = 0.00393 /K;
* the generated header compiled by gcc -Wall -Wextra -Werror -pedantic;
* the rail's bound written afresh from docs/design-method.md, swept at 1e5 points.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS, run_cli
from rail_reference import assert_staggered_within_limit, header_holds, linear_tail, manifold_copy, simulate_csv

from coildrive.cli import app
from coildrive.config import load_drive

BOARD = BOARDS / "manifold-m32-6ch.toml"
LATCH = """# Invented: a latching purge valve (a permanent magnet holds it either way)
board = "manifold-m32-6ch"
{circuit}
[coil]
resistance = "18 ohm"
reference_temp = "20 degC"
inductance = "60 mH"
resistance_tolerance = 0.07
inductance_tolerance = 0.15

[supply]
min = "20 V"
nominal = "24 V"
max = "28 V"
sink = true

[ambient]
min = "0 degC"
max = "45 degC"

[thermal]
resistance = "12 K/W"
capacity = "20 J/K"
max_coil_temp = "130 degC"

[pull_in]
current = "0.6 A"
margin = 1.5
settle_time = "10 ms"

[hold]
mode = "latch"

[reset]
current = "0.4 A"
margin = 1.5
settle_time = "10 ms"
"""
#: on a full bridge (the reset the other polarity), or a reset winding on its own switch
CIRCUITS = {
    "bridge": '\n[switch]\ntopology = "full_bridge"\n\n[freewheel]\ntype = "diode"\ndiode_drop = "0.9 V"\n',
    "winding": '\n[reset_coil]\nresistance = "22 ohm"\nreference_temp = "20 degC"\ninductance = "75 mH"\n'
               'resistance_tolerance = 0.07\ninductance_tolerance = 0.15\n',
}


@pytest.fixture(scope="module", params=sorted(CIRCUITS))
def doc(request, tmp_path_factory):
    """The manifold with its two purge valves latching (``design --json --header board.h``)."""
    folder = tmp_path_factory.mktemp(f"latch-{request.param}")
    path = manifold_copy(folder)
    (folder / "purge-latch-24v.toml").write_text(LATCH.format(circuit=CIRCUITS[request.param]))
    path.write_text(path.read_text().replace('"purge-valve-24v.toml"', '"purge-latch-24v.toml"'))
    r = CliRunner().invoke(app, ["design", str(path), "--json", "--header", str(folder / "board.h")])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout), path


def _pulse(drv, reset, v, temp, r_f, l_f, t_pulse, n=400):
    """One pulse from zero and its decay, by ``solve_ivp`` (module docstring): ``(t, rail
    current)`` -- the winding's current while on, then 0 (one switch) or minus the decaying
    current (a bridge's fast decay)."""
    from scipy.integrate import solve_ivp

    c = drv.latch.reset_coil if reset and drv.latch.reset_coil is not None else drv.coil
    bridge = drv.switch.topology == "full_bridge"
    r_coil = c.resistance * (1 + 0.00393 * (temp - c.reference_temp)) * r_f       # IEC 60028
    r_on = r_coil + (2 if bridge else 1) * drv.switch.on_resistance + drv.board.sense.resistance
    ind = c.inductance * l_f
    on = solve_ivp(lambda _t, y: [(v - r_on * y[0]) / ind], (0, t_pulse), [0.0], method="LSODA", rtol=1e-10,
                   atol=1e-13, dense_output=True)
    t1 = np.linspace(0, t_pulse, n)
    i1 = on.sol(t1)[0]
    if not bridge:
        return np.append(t1, t_pulse + 1e-6), np.append(i1, 0.0)
    r_off = r_coil + drv.board.sense.resistance
    back = v + 2 * drv.freewheel.diode_drop

    def zero(_t, y):
        return y[0]
    zero.terminal = True
    off = solve_ivp(lambda _t, y: [-(r_off * y[0] + back) / ind], (t_pulse, t_pulse + 1.0), [i1[-1]],
                    method="LSODA", rtol=1e-10, atol=1e-13, dense_output=True, events=zero)
    t2 = np.linspace(t_pulse, off.t[-1], n)[1:]
    return np.concatenate([t1, t2]), np.concatenate([i1, -np.maximum(off.sol(t2)[0], 0.0)])


def _branch(t, b):
    """A branch written afresh: the RL rise over the pulse (or peak), then the tail."""
    rise = b["supply_v"] / b["resistance_ohm"] * (1 - np.exp(-np.maximum(t, 0) * b["resistance_ohm"] / b["inductance_h"]))
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], rise, linear_tail(t, b)))


def test_pulses_never_above_the_bound(doc):
    """Each pulse of the channel at its ticks solved afresh at 20, 24 and 28 V, the coil
    cold and at thermal.max_coil_temp, R and L at both tolerance ends: the rail's current
    (the decay off the rail, or returned by a bridge) never above the channel's bound; each
    pulse's end bound equal to the simulated worst at its corner (28 V, cold, R and L low)
    within 1e-6."""
    system = doc[0]["system"]
    ch = system["channels"][-1]
    drv = load_drive(ch["drive_file"], BOARD)
    assert drv.latch is not None and ch["design"]["latch"]["pulses"][0]["name"] == "set"
    tol_r, tol_l = drv.coil.resistance_tolerance, drv.coil.inductance_tolerance
    branches = {b["pulse"]: b for b in ch["bound"]["branches"]}
    for p in ch["design"]["latch"]["pulses"]:
        t_pulse = p["ticks"] / drv.board.tick.rate
        worst = 0.0
        for v in (20.0, 24.0, 28.0):
            for temp in (drv.ambient.min, drv.thermal.max_coil_temp):
                for r_f in (1 - tol_r, 1 + tol_r):
                    for l_f in (1 - tol_l, 1 + tol_l):
                        t, i = _pulse(drv, p["name"] == "reset", v, temp, r_f, l_f, t_pulse)
                        bound = np.max([_branch(t, b) for b in ch["bound"]["branches"]], axis=0)
                        assert np.all(i <= bound + 1e-9), (p["name"], v, temp, r_f, l_f)
                        worst = max(worst, float(i.max()))
        b = branches[p["name"]]
        assert b["peak_s"] == pytest.approx(t_pulse) and b["hold_top_a"] == 0.0 and b["excess_a"] == [0.0]
        assert b["peak_end_a"] == pytest.approx(worst, rel=1e-6), (p["name"], b["peak_end_a"], worst)


def test_staggered_total_never_above_the_limit(doc):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh: never above
    the limit with the stagger found; the latching channels take no part in the shared
    timer and hold nothing on average."""
    system = doc[0]["system"]
    assert_staggered_within_limit(system, _branch)
    (timer,) = system["timers"]
    assert timer["channels"] == ["disp1", "disp2", "disp3", "disp4"]
    assert system["rails"][0]["hold_average_current_a"] == pytest.approx(
        sum(c["design"]["hold"]["max_mean_current_a"] * c["design"]["hold"]["duty"] for c in system["channels"][:4]))


def test_header_has_the_pulses_and_compiles(doc, tmp_path):
    """``design SYSTEM.toml --header``: each latching channel's pulse constants under its
    prefix, compiled with gcc -Wall -Wextra -Werror -pedantic."""
    text = (doc[1].parent / "board.h").read_text()
    ch = doc[0]["system"]["channels"][-1]
    ticks = {p["name"]: p["ticks"] for p in ch["design"]["latch"]["pulses"]}
    for name in ("PURGE1", "PURGE2"):
        assert f"#define {name}_SET_PULSE_TICKS" in text and f"#define {name}_LATCH " in text
    assert re.search(rf"#define PURGE2_RESET_PULSE_TICKS +{ticks['reset']}U ", text)
    header_holds(tmp_path, text, f"PURGE2_SET_PULSE_TICKS == {ticks['set']} && DISP1_PEAK_TICKS > 0")


def test_simulate_and_the_channels_device(doc, tmp_path):
    """``simulate SYSTEM.toml``: purge2 fires its set pulse at its start and its reset pulse
    ``--hold-time`` later, each pulse's draw never above its branch from its own start (28
    V, cold, on the CSV's grid; a bridge's decay negative in the rail); ``emulate SYSTEM.toml
    --channel purge2`` (a real subprocess) serves the latching device with the design's
    pulses. Both run the model's own pulses: plumbing."""
    system, path = doc[0]["system"], doc[1]
    csv = simulate_csv(path, tmp_path, 0.1)
    ch = system["channels"][-1]
    t = csv[:, 0] - ch["offset_s"]
    draw = csv[:, 7] * csv[:, 13]
    pulses = {p["name"]: p["time_s"] for p in ch["design"]["latch"]["pulses"]}
    on = t[csv[:, 13] == 1]
    assert on.min() == pytest.approx(0.0, abs=1e-9) and on.max() == pytest.approx(0.1 + pulses["reset"], abs=pulses["reset"] / 100)
    # each pulse within its own branch from its own start (the reset in a later slot)
    branches = {b["pulse"]: b for b in ch["bound"]["branches"]}
    first = t < 0.1
    assert np.all(draw[first] <= _branch(t[first], branches["set"]) + 1e-9)
    assert np.all(draw[~first] <= _branch(t[~first] - 0.1, branches["reset"]) + 1e-9)
    r = run_cli("emulate", str(path), "--channel", "purge2", "--duration", "0.3")
    assert r.returncode == 0 and r.stdout.startswith("/dev/"), r.stderr
    assert f"latching coil: set pulse {pulses['set'] * 1e3:.4g} ms" in r.stderr, r.stderr
