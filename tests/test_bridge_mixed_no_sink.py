"""A full bridge's mixed-decay hold (``hold.fast_fraction``) on a drooping bus that cannot
sink (``[supply] sink = false``: a diode in the feed after ``source_resistance``): each
off-time's fast part returns the coil's current into the bulk capacitor, which keeps it
while the bus is above the source, so the fast parts pump the bus against the on-times'
draw. The design bounds the bus over the hold and every turn-off from it by the coil's
top energy landing on the capacitor without loss
(:func:`coildrive.model.bus_decay.no_sink_energy_top`). References:

* ngspice (batch mode, ``ngspice -b``): the element-level bridge of
  tests/test_bridge_droop.py (``S`` switches with one-way body diodes, ``RSRC`` then the
  ideal feed diode ``BFEED``, ``CBULK``), driven through a peak and a mixed-decay PWM hold
  (the gates of tests/test_bridge_mixed_droop.py), then all four open halfway through a
  slow part. Checked: the highest bus over the hold and the release at or below the bound
  (with the coil's top current ngspice's own), and, on a small capacitor, the bus pumped
  well above the source in the hold (the pumping is real: the bound is not vacuous); the
  release from the state ngspice turns off at, the bus there above the source with the
  feed blocked (:func:`coildrive.model.bus_decay.decay_no_sink`), within 1 % plus two
  steps (times) and 0.1 % (the highest bus).
* hand-worked: the bound's numbers, and that it lies above the lossy pump-up of the same
  energy from the source's voltage (:func:`coildrive.model.bridge.pump_up`).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import run_cli
from ngspice_run import run
from test_bridge_droop import droop_netlist
from test_bridge_mixed_droop import _gates, _mixed
from test_reference_ngspice_bridge import I_DROP, L_COIL, R_COIL, R_SENSE, R_SW, V_D, V_SUP

from coildrive.model import bus_decay
from coildrive.model.bridge import pump_up
from coildrive.model.rl import rise_time


def test_energy_bound_hand_worked():
    """24 V, 10 uF, 69 mH at 0.5 A: W = 1/2 x 0.069 x 0.25 = 8.625 mJ, v = sqrt(576 +
    2 x 8.625e-3 / 1e-5) = sqrt(2301) = 47.9687 V; no energy: the source's 24 V. The lossy
    series-RLC pump-up of the same current from 24 V (26 ohm, 2 x 0.8 V) lies below it."""
    assert float(bus_decay.no_sink_energy_top(24.0, 10e-6, 8.625e-3)) == pytest.approx(math.sqrt(2301.0), rel=1e-12)
    assert float(bus_decay.no_sink_energy_top(24.0, 10e-6, 0.0)) == 24.0
    for c in (10e-6, 220e-6, 4.7e-3):
        lossy = float(pump_up(0.5, 24.0, c, 26.0, 0.069, 0.8).v2)
        assert 24.0 < lossy < float(bus_decay.no_sink_energy_top(24.0, c, 8.625e-3))


@pytest.mark.ngspice
@pytest.mark.parametrize("r_s, cap, duty, fast", [(1.5, 10e-6, 0.25, 0.5), (2.0, 220e-6, 0.3, 0.4),
                                                  (1e-3, 10e-6, 0.25, 0.5)], ids=["10uF", "220uF", "stiff-10uF"])
def test_mixed_hold_on_a_bus_that_cannot_sink_against_ngspice(tmp_path, r_s, cap, duty, fast):
    r_on = R_COIL + 2 * R_SW + R_SENSE
    t_peak = 1.5 * float(rise_time(0.55, 0.0, V_SUP, r_on, L_COIL))
    period, periods = 1.0 / 20e3, 30
    t_rel = t_peak + (periods - 1) * period + (duty + (1 + fast) / 2 * (1 - duty)) * period   # mid-slow
    step = period / 400
    tend = t_rel + 2.5e-3
    measures = [f"meas tran imax MAX i(VM) from=0 to={t_rel!r}",
                f"meas tran vhigh MAX v(bus) from={t_peak!r} to={t_rel!r}",
                f"meas tran ioff FIND i(VM) AT={t_rel - 2e-9!r}", f"meas tran voff FIND v(bus) AT={t_rel - 2e-9!r}",
                f"meas tran tdrop WHEN i(VM)={I_DROP!r} FALL=LAST", "meas tran tzero WHEN i(VM)=1e-6 FALL=LAST",
                f"meas tran vmax MAX v(bus) from={t_rel!r} to={tend!r}"]
    text = droop_netlist("mixed hold on a bus that cannot sink", _gates(t_peak, duty, fast, period, periods, t_rel),
                         tend, step, measures, r_s, cap, False, inline=True)
    res = run(tmp_path, "bridge-mixed-no-sink", text)
    # the bound with ngspice's own top current (the end of the peak's)
    bound = float(bus_decay.no_sink_energy_top(V_SUP, cap, 0.5 * L_COIL * res["imax"] ** 2))
    top = max(res["vhigh"], res["vmax"])
    print(f"no sink, {r_s} ohm {cap * 1e6:g} uF: highest bus {res['vhigh']:.6f} V in the hold, {res['vmax']:.6f} V "
          f"in the release, bound {bound:.6f} V (rise {top - V_SUP:.4f} of {bound - V_SUP:.4f} V)")
    assert top <= bound
    if cap < 50e-6:   # a small capacitor: the fast parts pump the bus well above the source
        assert res["vhigh"] > V_SUP + 2.0 and res["voff"] > V_SUP + 0.5
    # the release from ngspice's state at the turn-off (from above the source: feed blocked)
    d = bus_decay.decay_no_sink(res["ioff"], res["voff"], I_DROP, V_SUP, r_s, cap, R_COIL + R_SENSE, L_COIL, V_D)
    print(f"release from {res['voff']:.6f} V: drop {float(d.drop_time):.6e}/{res['tdrop'] - t_rel:.6e} s, zero "
          f"{float(d.zero_time):.6e}/{res['tzero'] - t_rel:.6e} s, top {float(d.bus_top):.6f}/{res['vmax']:.6f} V")
    for name, t_model in (("tdrop", float(d.drop_time)), ("tzero", float(d.zero_time))):
        assert abs(res[name] - t_rel - t_model) <= 0.01 * t_model + 2 * step, (name, res[name] - t_rel, t_model)
    assert res["vmax"] == pytest.approx(max(float(d.bus_max), res["voff"]), rel=1e-3)


def test_the_stiff_bus_takes_the_bound_too(tmp_path):
    """The dosing-valve bridge as shipped (a stiff 24 V behind its feed diode, 220 uF) with
    a mixed-decay hold: the pumped bus is at least the energy bound at the coil's top (the
    end of the peak's current at the cold highest supply, hand-worked from the design's
    own figures), the end of the hold's switch voltage with it."""
    from conftest import EXAMPLES

    from coildrive.config import load_drive
    from coildrive.design import design

    p = tmp_path / "stiff.toml"
    p.write_text((EXAMPLES / "dosing-valve-bridge-24v.toml").read_text().replace("[hold]\n",
                                                                                 "[hold]\nfast_fraction = 0.3\n", 1))
    d = design(load_drive(p))
    b = d.topology.bridge
    c = max(d.corners, key=lambda x: x.supply_v)
    i_top = {o["event"]: o for o in d.release.turn_offs}["end of peak"]["current_a"]
    w = 0.5 * min(x.inductance_h for x in d.corners) * i_top ** 2
    assert b.pumped_bus_v >= float(bus_decay.no_sink_energy_top(c.supply_v, b.capacitance_f, w)) - 1e-9
    hold = {o["event"]: o for o in d.release.turn_offs}["end of hold"]
    assert d.release.peak_switch_voltage_v >= b.pumped_bus_v + 0.8 - 1e-9 and hold["current_a"] < i_top


def test_design_with_a_mixed_decay_hold_on_a_bus_that_cannot_sink(tmp_path):
    """End to end: it designs; the pumped bus (the switches' and the capacitor's checks)
    and the highest bus take the energy bound at the coil's top (the end of the peak's,
    at most the over-current trip's), above the slow-decay hold's end-of-hold pump-up."""
    from coildrive.config import load_drive
    from coildrive.design import design

    r = run_cli("design", str(_mixed(tmp_path, sink="false")), "--json")
    assert r.returncode in (0, 1), r.stderr
    d = json.loads(r.stdout)
    slow = design(load_drive(_mixed(tmp_path, sink="false", name="slow", fast=0))).to_dict()
    b, b0 = d["topology"]["bridge"], slow["topology"]["bridge"]
    assert b["hold_decay"] == "mixed" and b0["hold_decay"] == "slow" and not b["sink"]
    hold = {o["event"]: o for o in d["release"]["turn_offs"]}["end of hold"]
    hold0 = {o["event"]: o for o in slow["release"]["turn_offs"]}["end of hold"]
    assert hold["switch_voltage_v"] > hold0["switch_voltage_v"] + 3.0
    assert b["pumped_bus_v"] >= hold["switch_voltage_v"] - 0.8 - 1e-9
    assert d["supply"]["highest_bus_v"] == pytest.approx(b["pumped_bus_v"], rel=1e-12)
    assert {c["name"] for c in d["checks"]} >= {"bus_pump_up", "capacitor_voltage", "supply_droop"}


def test_a_passing_drive_simulates_and_runs_in_the_virtual_device(tmp_path):
    """Plumbing (the emulator shares the design's physics): behind 2 mohm the design
    passes with the bound under the capacitor's 50 V; simulate writes the four switches'
    columns, and the virtual device's capture passes check."""
    from test_boost_high_side import emulated_check_passes

    from coildrive.config import load_drive
    from coildrive.design import design

    path = _mixed(tmp_path, "2 mohm", sink="false", name="stiffer")
    d = design(load_drive(path))
    assert d.ok and d.topology.bridge.pumped_bus_v < 50.0
    csv = tmp_path / "sim.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "60", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    assert "high_a_on,low_a_on,high_b_on,low_b_on" in csv.read_text().splitlines()[0]
    emulated_check_passes(tmp_path, path)
