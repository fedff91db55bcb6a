"""``simulate SYSTEM.toml`` with channels that run the model's own single-channel actuation:
a moving armature, a flux-linkage curve, an eddy-current term and a full bridge
(coildrive/design/system_sim.py).

Outside references, named beside each check:

* the design's rail-current bound (``design --json``, its ``bound`` branches readable at
  the supply) is checked against the simulated rail: the bound is a bound. The simulated
  actuations are the model's own (its armature, curve, eddy and bridge waveforms are
  checked against scipy's ``solve_ivp`` and ngspice in their own test files), so this
  checks the system's plumbing and the bound's claim, not the physics;
* each channel against the same channel simulated alone with the reference driver's
  timing written afresh here from docs/design-method.md ("Several channels",
  "Simulation"): on at the first period start at or after its offset, its peak to the
  first period start at or after its ticks' end;
* the shared timer against the channel designed alone on its own timer (issue 17: "same
  hold currents within one compare count"): the hold's mean over its last period lies
  within one compare count of the alone channel's (the larger design's current step).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS
from rail_reference import firmware_lookup, manifold_copy, readable

from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.system import design_system, draw_bound
from coildrive.design.system_sim import simulate_system
from coildrive.model.waveform import actuation
from coildrive.system_file import load_system

ARMATURE = (Path(__file__).parent / "test_system_armature.py").read_text().split('ARMATURE = """')[1].split('"""')[0]
CURVE = """flux_current = [0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.8, 1.0, 1.5, 2.0]
flux_linkage = ["0 mWb", "7 mWb", "14 mWb", "21 mWb", "28 mWb", "34.5 mWb", "40.5 mWb", "51 mWb",
                "60 mWb", "75 mWb", "85 mWb"]   # invented: 70 mH small-signal, saturating
"""
BRIDGE = '\n[switch]\ntopology = "full_bridge"\n\n[freewheel]\ntype = "diode"\ndiode_drop = "0.9 V"\n'
BOARD = BOARDS / "manifold-m32-6ch.toml"
HOLD = 0.004


def _system(folder):
    """The manifold with its dispensing valves on a saturating curve, purge1 with a moving
    armature and purge2 on a full bridge (30 % of each off-time fast) with an eddy term."""
    path = manifold_copy(folder)
    purge = folder / "purge-valve-24v.toml"
    text = purge.read_text()
    bridge = text.split("[freewheel]")[0].replace('inductance = "70 mH"\n',
                                                  'inductance = "70 mH"\neddy_resistance = "150 ohm"\n')
    (folder / "purge-bridge-24v.toml").write_text(
        bridge.replace("frequency_tolerance = 0.03\n", "frequency_tolerance = 0.03\nfast_fraction = 0.3\n") + BRIDGE)
    purge.write_text(text.replace('current = "0.09 A"', 'current = "0.15 A"') + ARMATURE)
    disp = folder / "dispense-valve-24v.toml"
    disp.write_text(disp.read_text().replace('inductance = "45 mH"\n', CURVE))
    sys_text = path.read_text().split('name = "purge2"')
    path.write_text(sys_text[0] + 'name = "purge2"' + sys_text[1].replace("purge-valve-24v.toml", "purge-bridge-24v.toml"))
    return path


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    """The system, its design and a simulation at the corner of the most current: the
    highest supply, the coldest coil, R and L at their low tolerance ends."""
    path = _system(tmp_path_factory.mktemp("simmodels"))
    result = design_system(load_system(path))
    assert [c.design.drive.source.rsplit("/", 1)[-1] for c in result.channels][-2:] == \
        ["purge-valve-24v.toml", "purge-bridge-24v.toml"]
    drv = result.channels[-1].design.drive
    v, temp = drv.supply.max, drv.ambient.min
    r_f, l_f = 1 - drv.coil.resistance_tolerance, 1 - drv.coil.inductance_tolerance
    run = simulate_system(result, v, temp, HOLD, 8, r_f, l_f)
    return path, result, run, (v, temp, r_f, l_f)


def test_rail_never_above_the_bound(case):
    """The simulated rail (each switch's terminal current summed, a bridge's fast decay
    negative) never exceeds the design's bound at the supply simulated, on the CSV's grid."""
    _, result, run, (v, *_) = case
    doc = result.to_dict()["system"]["channels"]
    bound = sum(draw_bound(run.time - c["offset_s"], {"branches": readable(c, v)}) for c in doc)
    assert np.all(run.rail <= bound + 1e-9), float(np.max(run.rail - bound))
    assert np.allclose(run.rail, np.sum(run.draw, axis=0), rtol=0, atol=1e-12)
    print("rail / bound at its highest:", round(float(run.rail.max()), 4), round(float(bound.max()), 4))


def test_each_channel_equals_its_run_alone(case):
    """On its own samples each channel's current equals its actuation alone (the model's
    single-channel waveform at the driver's peak, written afresh), within 1e-9 A: on a stiff
    bus no other channel acts on it. A full bridge draws negative current in its fast decay."""
    path, result, run, (v, temp, r_f, l_f) = case
    doc = result.to_dict()["system"]["channels"]
    for k, c in enumerate(result.channels):
        d = c.design
        if run.runs[k].__class__.__name__ == "ChannelRun":
            continue
        period = 1.0 / d.hold.frequency_hz
        tp, duty = firmware_lookup(doc[k]["design"], d.drive, v)
        n_on = math.ceil(c.offset_s / period - 1e-9)
        n_end = max(n_on + 1, math.ceil((c.offset_s + tp) / period - 1e-9))
        peak = (n_end - n_on) * period
        assert run.start[k] == pytest.approx(n_on * period, abs=1e-15)
        assert run.duties[k] == pytest.approx(duty, rel=1e-12)
        alone = actuation(d.drive, v, temp, peak, duty, d.hold.frequency_hz, HOLD, r_f, l_f, 8)
        t = alone.time + run.start[k]
        once = np.append(t[1:] != t[:-1], True)
        got = np.interp(t[once], run.time, run.current[k])
        assert np.max(np.abs(got - alone.current[once])) <= 1e-9
        if d.drive.switch.topology == "full_bridge":
            assert run.draw[k].min() < 0 and run.draw[k].min() >= -float(run.current[k].max())


def _last_mean(time, current, t_off, period):
    """The mean (A) of ``current`` over the last ``period`` s up to ``t_off`` s (trapezoids)."""
    sel = (time >= t_off - period) & (time <= t_off)
    return np.trapezoid(current[sel], time[sel]) / np.ptp(time[sel])


def test_shared_timer_hold_within_one_compare_count(case):
    """At the corner that sets the hold (the lowest supply, the hottest coil of the design's
    corners, R and L at their high tolerance ends) the settled hold's mean current over
    its last period (30 ms of hold) on the shared timer is within one compare count of the
    channel designed alone on its own timer, simulated alike."""
    _, result, _, _ = case
    d0 = result.channels[-1].design
    v = d0.drive.supply.min
    temp = max(c.coil_temp_c for ch in result.channels for c in ch.design.corners)
    r_f, l_f = 1 + d0.drive.coil.resistance_tolerance, 1 + d0.drive.coil.inductance_tolerance
    run = simulate_system(result, v, temp, 0.03, 4, r_f, l_f)
    doc = result.to_dict()["system"]["channels"]
    done = set()
    for k, c in enumerate(result.channels):
        src = c.design.drive.source
        if src in done or run.runs[k].__class__.__name__ == "ChannelRun":
            continue
        done.add(src)
        shared = _last_mean(run.time, run.current[k], run.runs[k].events["off"] + run.start[k], run.periods[k])
        alone = design(load_drive(src, BOARD))
        n = alone.timer.period_ticks
        peak, duty = firmware_lookup(alone.to_dict(), alone.drive, v)
        assert peak == firmware_lookup(doc[k]["design"], c.design.drive, v)[0]
        w = actuation(alone.drive, v, temp, run.runs[k].events["hold"], round(duty * n) / n,
                      alone.hold.frequency_hz, 0.03, r_f, l_f, 4)
        own = _last_mean(w.time, w.current, w.events["off"], 1.0 / alone.hold.frequency_hz)
        # one compare count: the larger of the two designs' current steps (each rounds its
        # duty to its own period's counts), as tests/test_system.py takes it
        step = max(c.design.hold.current_step_a, alone.hold.current_step_a)
        print(Path(src).name, "shared", round(shared, 6), "alone", round(own, 6), "one count", round(step, 6))
        assert abs(shared - own) <= step


def test_simulate_cli_writes_the_csv(case, tmp_path):
    """The CLI end to end at the same corner: one CSV whose rail column is the library's
    (within its 9 digits), exit 0."""
    path, _, run, (v, temp, r_f, l_f) = case
    out = tmp_path / "sys.csv"
    r = CliRunner().invoke(app, ["simulate", str(path), "--supply", f"{v!r}", "--coil-temp", f"{temp!r}",
                                 "--hold-time", f"{HOLD!r}", "--r-factor", f"{r_f!r}", "--l-factor", f"{l_f!r}",
                                 "--csv", str(out)])
    assert r.exit_code == 0, r.output
    head = out.read_text().splitlines()[0].split(",")
    assert head[:3] == ["time_s", "current_a", "disp1_current_a"] and head[-1] == "purge2_on"
    csv = np.loadtxt(out, delimiter=",", skiprows=1)
    assert np.allclose(csv[:, 0], run.time, rtol=1e-8, atol=0)
    assert np.allclose(csv[:, 1], run.rail, rtol=1e-8, atol=1e-12)


@pytest.mark.slow
def test_emulate_channel_capture_check_over_a_real_pty(tmp_path):
    """``emulate SYSTEM.toml --channel purge2`` (the full bridge with an eddy term, 30 % fast
    decay) on the shared timer -> ``capture`` two actuations -> ``check`` against the
    channel's drive file, each a real subprocess over a real pseudo-terminal. The device runs
    the channel's own model actuation, so this checks the plumbing (the channel's drive with
    the shared timer fixed in it reaches the device), not the physics."""
    import json

    from conftest import run_cli
    from test_bench_e2e import TIMEOUT, Emulator

    path = _system(tmp_path)
    drive = tmp_path / "purge-bridge-24v.toml"
    (timer,) = design_system(load_system(path)).timers
    with open(tmp_path / "emulate.log", "w") as log:
        emu = Emulator(path, "--channel", "purge2", "--duration", "30", log=log)
        try:
            r = run_cli("capture", emu.path, "--drive", str(drive), "--out", str(tmp_path / "a.cdcap"),
                        "--actuations", "2", timeout=TIMEOUT)
        finally:
            emu.stop()
    assert r.returncode == 0 and "2 actuation(s)" in r.stderr and " 0 lost frame(s)" in r.stderr, r.stderr
    said = (tmp_path / "emulate.log").read_text()
    assert f"channel purge2: hold PWM on the board's shared timer, prescaler {timer['prescaler']}, " \
           f"period {timer['period_ticks']} counts" in said, said
    r = run_cli("check", str(tmp_path / "a.cdcap"), str(path), "--channel", "purge2", "--json")
    items = {i["name"]: i for i in json.loads(r.stdout)["items"]}
    rows = {k: i["status"] for k, i in items.items()}
    assert r.returncode == 0, rows
    assert rows["hold_mean"] == rows["release_time"] == rows["link"] == "pass", rows
    # against the channel's design on the shared timer, not its drive file's own design
    ripple = items["hold_ripple"]["predicted"]
    alone = json.loads(run_cli("check", str(tmp_path / "a.cdcap"), str(drive), "--json").stdout)
    assert ripple != next(i["predicted"] for i in alone["items"] if i["name"] == "hold_ripple")
    r = run_cli("check", str(tmp_path / "a.cdcap"), str(drive), "--channel", "purge2")
    assert r.returncode == 2 and "--channel" in r.stderr and len(r.stderr.strip().splitlines()) == 1, r.stderr
