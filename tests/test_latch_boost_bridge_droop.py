"""A latching coil on a full bridge with both pulses from the boost, on a DROOPING main
supply (``supply.source_resistance`` and ``capacitance``; coildrive/design/latch_boost.py
``main_bus``, the reset winding's too, docs/design-method.md *Pulses from the boost*): the
main bus carries none of a pulse (its blocking diode: each pulse runs from the boost
capacitor and returns into it), but the boost converter recharges from it, drawing
``boost_power / boost_efficiency`` W for what each pulse net takes from the boost (drawn
less returned) / ``boost_power``, in one run a pulse starting anywhere from the pulse's
start to its end: runs at least the interval less the longest pulse apart. The drive is
the example examples/latching/sprinkler-valve-bridge-boost-12v.toml on an invented 0.5 ohm
cable and a 10 mF bulk capacitor (``R_s C`` = 5 ms, longer than the pulses' interval, so
the bus does not recover between pulses).

References:

* scipy's ``solve_ivp`` (Radau; tests/test_latch_boost_droop.py's) on the main bus written
  afresh -- ``C dv/dt = (V_s - v)/R_s - P/v`` while the converter draws its constant
  power, ``(V_s - v)/R_s`` otherwise -- from a full bus: the example's runs may touch (the
  floor, where a continuous draw settles); runs that cannot, every ``interval - longest
  pulse`` (the orbit, to 1e-6) and at random offsets within each pulse, 100 pulses: its
  lowest bus never below the design's; simulate's ``main_bus_v`` column within 1e-6;
* hand-worked: the floor, the larger root of ``v^2 - V_s v + R_s P = 0`` (9 V, 0.5 ohm,
  2.5 W: ``v_f = (9 + sqrt(76)) / 2 = 8.85890 V``, the converter's current there ``P / v_f
  = 0.282202 A``); the net energy's draw (drawn less returned, / 2 W); a source that
  cannot deliver the draw (``V_s^2 < 4 R_s P``: 10 ohm at 9 V gives at most 2.025 W) fails
  the ``boost_main_bus`` check.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import EXAMPLES, require_tool
from test_latch_boost import header_holds
from test_latch_boost_droop import _bus_ivp, _lowest_ivp
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.latch import design_latch

VALVE = EXAMPLES / "latching" / "sprinkler-valve-bridge-boost-12v.toml"
DROOP = ('boost_efficiency = 0.8\nsource_resistance = "{r_s}"\ncapacitance = "{c}"\n'
         'boost_power = "2 W"')


def _write(tmp, r_s="0.5 ohm", c="10 mF", board=None) -> object:
    text = VALVE.read_text().replace('board = "bridge-m32-fast"', f'board = "{board or "bridge-m32-fast"}"')
    text = text.replace('boost_power = "2 W"', DROOP.format(r_s=r_s, c=c), 1)
    path = tmp / f"valve-droop-{r_s.split()[0]}.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def droop(tmp_path_factory):
    path = _write(tmp_path_factory.mktemp("droop"))
    drive = load_drive(path)
    return path, drive, design_latch(drive)


def _pulses(d, longest, recharges):
    """The design's pulses with their time-out ``longest`` s and recharge times ``recharges``
    (s): main_bus's inputs for a schedule whose runs cannot touch."""
    return [dataclasses.replace(p, time_s=longest, boost=dataclasses.replace(p.boost, recharge_time_s=r))
            for p, r in zip(d.latch.pulses, recharges)]


def test_lowest_main_bus_by_hand_and_against_solve_ivp(droop):
    """The example's converter runs may touch (its runs ``interval - longest pulse`` =
    2.672 ms apart, each 3.144 ms): its lowest main bus is the floor, by hand the larger root
    ``v_f``, and solve_ivp (scipy, Radau) of a continuous constant-power draw settles there.
    With runs that cannot touch (1 ms a pulse, pulses every 4 ms, the longest 0.5 ms) the
    design's periodic orbit of runs every 3.5 ms against solve_ivp's, and solve_ivp's bus
    for runs starting anywhere from each pulse's start to its end never below it."""
    from coildrive.design.latch_boost import main_bus
    from coildrive.model import converter_bus

    _, drive, d = droop
    mb = d.latch.main_bus
    s = drive.supply
    assert mb is not None and mb.lowest_bus_v is not None and mb.lowest_bus_corner == "source 9 V"
    # hand-worked: v_f = (9 + sqrt(81 - 4 x 0.5 x 2.5)) / 2 = 8.85890, I = 2.5 / v_f = 0.282202 A
    v_f = (9 + math.sqrt(76.0)) / 2
    assert mb.converter_draw_w == pytest.approx(2.5, rel=1e-12)
    assert mb.floor_v == pytest.approx(v_f, rel=1e-12) and mb.floor_v == pytest.approx(8.85890, abs=1e-5)
    assert mb.converter_draw_w / mb.floor_v == pytest.approx(0.282202, rel=1e-5)
    # the larger pulse's net energy from the boost (drawn less returned) / 2 W; the runs' spacing
    net = max(p.boost.recharge_time_s for p in d.latch.pulses)
    assert mb.draw_time_s == pytest.approx(net, rel=1e-12)
    assert all(p.boost.recharge_time_s < p.boost.energy_j / 2.0 for p in d.latch.pulses)   # (less than drawn)
    assert mb.period_s == d.latch.interval_s and mb.longest_pulse_s == max(p.time_s for p in d.latch.pulses)
    assert d.latch.interval_s - mb.longest_pulse_s == pytest.approx(2.672e-3, abs=1e-6)
    assert mb.spacing_s == mb.draw_time_s == pytest.approx(3.144e-3, abs=1e-6)   # runs that may touch
    assert mb.lowest_bus_v == pytest.approx(v_f, rel=1e-12)
    (settled,), _ = _bus_ivp(9.0, s.source_resistance, s.capacitance, 2.5, [(0.2, True)])
    assert abs(settled - v_f) < 1e-6          # (40 R_s C of continuous draw: it settles there)
    # runs that cannot touch: R_s C = 5 ms against runs every 3.5 ms
    mb, (check,) = main_bus(drive, _pulses(d, 0.5e-3, [1e-3, 0.6e-3]), 4e-3)
    assert check.ok and mb.spacing_s == pytest.approx(3.5e-3) and mb.lowest_bus_v > v_f + 0.05
    every = [3.5e-3 * k for k in range(100)]
    lowest, last = _lowest_ivp(9.0, s.source_resistance, s.capacitance, 2.5, 1e-3, every)
    assert lowest - last < 1e-6 and last == pytest.approx(mb.lowest_bus_v, rel=1e-6), (lowest, mb)
    rng = np.random.default_rng(4)   # pulses every 4 ms, each run 0 to 0.5 ms after its pulse's start
    starts = [4e-3 * k + rng.uniform(0.0, 0.5e-3) for k in range(100)]
    random = _lowest_ivp(9.0, s.source_resistance, s.capacitance, 2.5, 1e-3, starts)[0]
    assert random >= mb.lowest_bus_v - 1e-9
    # (runs every 4 ms would not be a floor: the random offsets go below their orbit)
    assert random < float(converter_bus.orbit_low(9.0, s.source_resistance, s.capacitance, 2.5, 1e-3, 4e-3))


def test_design_table_json_simulate_and_check_end_to_end(tmp_path, droop):
    """As a user runs it: design (table, --json, --header: compiled by gcc -Wall -Wextra
    -Werror -pedantic) names the lowest main bus and
    passes; the pulses are the stiff main supply's to the bit (the main bus carries none
    of them), and so is simulate's CSV but for its last column, the main bus (against
    solve_ivp), which the rail follows between the pulses; check passes a capture of the model's device
    (plumbing: it shares the design's physics)."""
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_device import LatchDevice

    path, _, d = droop
    runner = CliRunner()
    res = runner.invoke(app, ["design", str(path), "--json", "--header", str(tmp_path / "h.h")])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    mb = doc["latch"]["main_bus"]
    assert mb["lowest_bus_v"] == pytest.approx(d.latch.main_bus.lowest_bus_v)
    assert mb["spacing_s"] == pytest.approx(d.latch.main_bus.spacing_s) and mb["period_s"] == doc["latch"]["interval_s"]
    row = next(c for c in doc["checks"] if c["name"] == "boost_main_bus")
    assert row["ok"] and "return nothing to it; each pulse's fast decay returns into the boost" in row["detail"]
    stiff = design_latch(load_drive(VALVE))
    for a, b in zip(d.latch.pulses, stiff.latch.pulses):
        assert (a.ticks, a.supply_j, a.returned_j, a.decay_time_s, a.peak_switch_voltage_v, a.worst_corner) == \
            (b.ticks, b.supply_j, b.returned_j, b.decay_time_s, b.peak_switch_voltage_v, b.worst_corner)
    assert d.latch.interval_s == stiff.latch.interval_s and d.latch.recharge_interval_s == 0.0
    ticks = doc["latch"]["interval_ticks"]
    header_holds(tmp_path, "h.h", f"COIL_LATCH_BOOSTED == 1U && COIL_MIN_INTERVAL_TICKS == {ticks}U")
    table = runner.invoke(app, ["design", str(path)], terminal_width=200)
    assert table.exit_code == 0 and "lowest main bus" in table.stdout, table.output
    csvs = []
    for name, p in (("droop", path), ("stiff", VALVE)):
        csvs.append(tmp_path / f"{name}.csv")
        res = runner.invoke(app, ["simulate", str(p), "--supply", "9", "--coil-temp", "25", "--csv", str(csvs[-1])])
        assert res.exit_code == 0, res.output
    w, w0 = (np.genfromtxt(c, delimiter=",", names=True) for c in csvs)
    assert w.dtype.names == w0.dtype.names + ("main_bus_v",)
    idle = np.arange(w.size) == int(np.argmax(np.diff(w["time_s"]))) + 1   # the one sample between the pulses
    for name in w0.dtype.names:   # the pulses are the stiff main supply's; between them the rail is the bus
        same = ~idle if name in ("q1_v", "q3_v") else np.ones(w.size, bool)
        assert np.array_equal(w[name][same], w0[name][same]), name
    assert np.array_equal(w["q1_v"][idle], w["main_bus_v"][idle]) and w["current_a"][idle] == 0.0
    # the main_bus_v column against scipy solve_ivp (Radau) of the main bus written afresh: the
    # converter draws 2.5 W from each pulse's end until the boost_v column's v^2 = v_r^2 + 2 P
    # (t - t_end) / C_b (the return's capacitor v_r, from its zero on) reaches 40 V
    t, i = w["time_s"], w["current_a"]
    phases, now = [], 0.0
    for part in (t < w["time_s"][idle][0], t > w["time_s"][idle][0]):
        k_end = int(np.argmax(np.where(part, np.abs(i), -1.0)))            # the pulse's end: its peak
        k_zero = k_end + int(np.argmax(i[k_end:] == 0.0))                  # the return's zero
        draw = (t[k_zero] - t[k_end]) + 0.5 * 220e-6 * (40.0**2 - w["boost_v"][k_zero] ** 2) / 2.0
        phases += [(t[k_end] - now, False), (draw, True)]
        now = t[k_end] + draw
    phases.append((max(t[-1] - now, 0.0) + 1e-9, False))   # (the reset's draw outlasts the CSV)
    _, sols = _bus_ivp(9.0, 0.5, 0.01, 2.5, phases)
    edges = np.cumsum([0.0] + [x for x, _ in phases])
    ref = np.concatenate([sol.sol(t[(t >= a) & (t < b)] - a)[0] for sol, a, b in zip(sols, edges, edges[1:])
                          if np.any((t >= a) & (t < b))])
    assert w["main_bus_v"] == pytest.approx(ref, rel=1e-6) and w["main_bus_v"].min() < 8.98   # (measured 1.1e-7)
    dev = LatchDevice(d, DeviceOptions(noise_codes=0.5, seed=5, supply=9.0, coil_temp=100.0))
    msgs, _ = run_device(dev, 0.05 + 2.2 * dev.period, step=0.05)
    rep = check_latch_capture(capture_of(msgs, tmp_path / "good.cdcap"), d, coil_temp=100.0)
    assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items]


def test_a_source_that_cannot_carry_the_converter_fails(tmp_path):
    """10 ohm at 9 V delivers at most 81 / 40 = 2.025 W (hand-worked), less than the
    converter's 2.5 W: boost_main_bus fails, design exits 1, its lowest bus null."""
    path = _write(tmp_path, r_s="10 ohm")
    res = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert res.exit_code == 1, res.output
    doc = json.loads(res.stdout)
    assert doc["latch"]["main_bus"]["lowest_bus_v"] is None
    bad = [c for c in doc["checks"] if not c["ok"]]
    assert [c["name"] for c in bad] == ["boost_main_bus"] and "at most 2.025 W" in bad[0]["detail"], bad


def test_the_compiled_driver_in_the_loop_passes_check(tmp_path, droop):
    """firmware-driver's reference latch driver, compiled by gcc (codegen/host_build.py) and run in
    the virtual device (the model's coil: plumbing), passes check on the drooping main
    supply: the pulses run from the boost, as on a stiff one."""
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_firmware_device import LatchFirmwareDevice
    from coildrive.codegen.host_build import build_latch_firmware
    from coildrive.codegen.latch_driver import pulse_switches

    require_tool("gcc")
    path, _, d = droop
    r = CliRunner().invoke(app, ["firmware-driver", str(path), "--out", str(tmp_path / "fw")])
    assert r.exit_code == 0, r.output
    dev = LatchFirmwareDevice(d, build_latch_firmware(tmp_path / "fw", d), pulse_switches(d),
                              DeviceOptions(noise_codes=0.5, seed=5, supply=9.0, coil_temp=100.0))
    msgs, _ = run_device(dev, 0.05 + dev.interval + 2.2 * dev.period, step=0.05)
    rep = check_latch_capture(capture_of(msgs, tmp_path / "fw.cdcap"), d, coil_temp=100.0)
    assert rep.ok and not dev.faults, [(i.name, i.status, i.detail) for i in rep.items]
