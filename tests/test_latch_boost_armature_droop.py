"""A latching coil with a moving armature pulsed from the boost on a drooping main supply
([hold] mode = "latch", [supply] boost with source_resistance and capacitance, [armature]):
the set pulse is the plunger's run from the boost capacitor (test_latch_boost_armature.py),
the reset pulse the reset winding's, and the main bus sees only the boost converter's
recharge draw after each (coildrive/design/latch_boost.py main_bus).

The drive (invented): the plunger valve of examples/latching/plunger-valve-boost-reset-
winding-12v.toml behind a 2 ohm feed with 10 000 uF at the board, its boost converter
charging at 4 W (85 % efficient). References, both written afresh:

* the set pulse's energy from the boost: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the
  winding, the plunger and the boost capacitor (test_latch_boost_armature.reference, nothing
  of coildrive.model);
* the main bus from that energy: ``solve_ivp`` (Radau, rtol 1e-11) of ``C dv/dt = (V_s -
  v)/R_s - P/v`` while the converter draws (the energy / boost_power long) and ``(V_s -
  v)/R_s`` at rest, pulse after pulse from a full bus until the orbit repeats
  (test_latch_boost_droop._bus_ivp): the design's lowest main bus within 1e-5, and
  simulate's ``main_bus_v`` column through one actuation within 1e-6;
* hand-worked: the bus a steady draw settles at, the larger root of ``v^2 - V_s v + R_s P``;
* the model's device -> capture -> check (plumbing).
"""

from __future__ import annotations

import json
import math

import pytest

from conftest import run_cli
from test_latch_boost import header_holds
from test_latch_boost_armature import VALVE, _side, driver_in_the_loop, reference
from test_latch_boost_droop import _bus_ivp, simulated_bus

from coildrive.config import load_drive
from coildrive.design.latch import design_latch

FEED = ('boost_power = "4 W"\nboost_efficiency = 0.85\nsource_resistance = "2 ohm"\n'
        'capacitance = "10000 uF"\n')


@pytest.fixture(scope="module")
def droop(tmp_path_factory):
    text = VALVE.read_text().replace('board = "lab-m32-zener"',
                                     f'board = "{VALVE.parents[2] / "boards" / "lab-m32-zener"}.toml"')
    old = 'boost_power = "1 W"                # the boost converter\'s charging power (it sets the interval)'
    assert text.count(old) == 1, "precondition: the example's boost power"
    path = tmp_path_factory.mktemp("plunger-droop") / "plunger-droop.toml"
    path.write_text(text.replace(old, FEED.rstrip("\n")))
    drive = load_drive(path)
    return path, drive, design_latch(drive)


def test_lowest_main_bus_from_the_plunger_s_pulse_against_solve_ivp(droop):
    _, drive, d = droop
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    m = d.latch.main_bus
    p_in = 4.0 / 0.85
    assert m.converter_draw_w == pytest.approx(p_in, rel=1e-12)
    # scipy solve_ivp of the set pulse (the larger): its energy from the boost, the draw it sets
    p = next(p for p in d.latch.pulses if p.name == "set")
    assert p.supply_j > max(x.supply_j for x in d.latch.pulses if x.name != "set")
    ref = reference(drive, p.energy_corner, _side(p.energy_corner), p.boost.trip_max_a, 1.0 / drive.board.tick.rate)
    draw = ref["supply_j"] / 4.0
    assert m.draw_time_s == pytest.approx(draw, rel=1e-5)
    # hand-worked: the floor (9 + sqrt(81 - 8 x 4.70588)) / 2 = 7.792148 V
    assert m.floor_v == pytest.approx((9.0 + math.sqrt(81.0 - 8.0 * p_in)) / 2.0, rel=1e-12)
    assert m.floor_v == pytest.approx(7.792148, abs=1e-6)
    # scipy solve_ivp: draw, rest, draw ... from a full bus until the bus at the end of a draw
    # repeats, the runs the interval less the longest pulse apart (a run may start anywhere
    # within its pulse: latch.main_bus.spacing_s)
    assert m.spacing_s == pytest.approx(m.period_s - m.longest_pulse_s, rel=1e-12) and m.spacing_s > draw
    v, low = None, []
    for _ in range(200):
        (v_low, v), _ = _bus_ivp(9.0, 2.0, 10e-3, p_in, [(draw, True), (m.spacing_s - draw, False)], v)
        low.append(v_low)
        if len(low) > 1 and abs(low[-1] - low[-2]) < 1e-12:
            break
    assert m.period_s == d.latch.interval_s and m.lowest_bus_v == pytest.approx(low[-1], rel=1e-5)
    assert m.floor_v + 0.1 < m.lowest_bus_v < 8.2   # a real orbit: neither the floor nor a full bus
    check = next(c for c in d.checks if c.name == "boost_main_bus")
    assert check.ok and f"{m.lowest_bus_v:.4g} V" in check.detail
    assert "set_armature_seats" in [c.name for c in d.checks if c.ok]


def test_simulate_header_and_check(droop, tmp_path):
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_device import LatchDevice

    path, _, d = droop
    # simulate's main bus against scipy solve_ivp, the draws from the run's boost_v column
    bus = simulated_bus(path, d, tmp_path, power=4.0, c_bus=10e-3)
    assert bus.min() < 8.6 and bus[0] == 9.0
    r = run_cli("design", str(path), "--json", "--header", str(tmp_path / "p.h"), "--prefix", "PLG")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["latch"]["main_bus"]["lowest_bus_v"] == pytest.approx(d.latch.main_bus.lowest_bus_v)
    header_holds(tmp_path, "p.h", f'PLG_LATCH_BOOSTED == 1U && PLG_MIN_INTERVAL_TICKS == {doc["latch"]["interval_ticks"]}UL')
    # emulate -> check (the model's device: plumbing)
    dev = LatchDevice(d, DeviceOptions(noise_codes=0.5, seed=5, supply=9.0, coil_temp=100.0))
    cap = capture_of(run_device(dev, 0.05 + 2.2 * dev.period, step=0.05)[0], tmp_path / "g.cdcap")
    rep = check_latch_capture(cap, d, coil_temp=100.0)
    assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items]


def test_the_compiled_driver_in_the_loop_passes_check(droop, tmp_path, monkeypatch):
    """The compiled latch driver (gcc) in the model's device on the drooping main supply, the
    plunger's run from the boost (plumbing) -> check passes; 40 % more resistance fails."""
    driver_in_the_loop(droop[0], droop[2], tmp_path, monkeypatch)
