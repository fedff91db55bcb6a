"""A full bridge (``[switch] topology = "full_bridge"``) through the design: the file keys
and their refusals, the loop the design uses (the one tests/test_reference_ngspice_bridge.py
checks against ngspice), the energy returned and the bus pump-up with their checks, the
hold's power balance, the simulated release, and the header."""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS, EXAMPLES, REFUSING_BOARDS, loads
from coildrive.cli import app
from coildrive.codegen.header import generate_header
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.bridge import fast_decay, pump_up, release, slow_decay
from coildrive.model.circuit import copper_resistance, loop
from coildrive.model.losses import hold_losses
from coildrive.model.pwm import pwm_steady_state

BRIDGE = EXAMPLES / "dosing-valve-bridge-24v.toml"


def _variant(tmp_path, old: str, new: str, name: str = "v.toml"):
    path = tmp_path / name
    text = BRIDGE.read_text()
    assert old in text, old
    path.write_text(text.replace(old, new, 1).replace('board = "bridge-m32-fast"',
                                                     f'board = "{BOARDS / "bridge-m32-fast.toml"}"'))
    return path


def _one_line_error(path, key):
    res = CliRunner().invoke(app, ["design", str(path)])
    assert res.exit_code == 2, res.stdout
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and key in lines[0] and str(path) in lines[0], res.stderr
    return lines[0]


@pytest.mark.parametrize("old,new,key", [
    ('[hold]\n', '[freewheel]\ntype = "zener"\ndiode_drop = "0.8 V"\nzener_voltage = "20 V"\n\n[hold]\n',
     "freewheel.type"),
    ('[hold]\n', '[freewheel]\nsplit_decay = true\nbypass_resistance = "0.1 ohm"\n\n[hold]\n',
     "freewheel.split_decay"),
    ('capacitance = "220 uF"       # bulk capacitance on the bridge\'s bus\n', '', "supply.capacitance"),
    # (a moving armature designs on a bridge, with mixed decay too: tests/test_bridge_armature*.py;
    # a current-mode hold: tests/test_bridge_current.py; a closed loop: tests/test_bridge_closed_loop.py)
])
def test_what_a_full_bridge_refuses_is_one_line(tmp_path, old, new, key):
    line = _one_line_error(_variant(tmp_path, old, new), key)
    assert "full" in line or "sink = false" in line


def test_bundled_examples_a_bridge_refuses():
    refused = {(e.stem, b) for e in EXAMPLES.glob("*.toml") for b in REFUSING_BOARDS if not loads(e, b)}
    assert refused == {("demo-valve", "bridge-m32-fast"), ("wash-valve-split-24v", "bridge-m32-fast"),
                       ("fuel-valve-boost-12v", "bridge-m32-fast"),   # made for its own board
                       ("fast-valve-boost-armature-12v", "bridge-m32-fast"),   # likewise
                       ("dosing-valve-closed-loop", "bridge-m32-fast")}   # its Zener


def test_the_design_loop_is_the_bridge_of_the_ngspice_reference():
    drive = load_drive(BRIDGE)
    sense, sw, fw = drive.board.sense, drive.switch, drive.freewheel
    hold = loop(drive, 24.0, 60.0)
    rel = loop(drive, 24.0, 60.0, path="release")
    r_coil = float(copper_resistance(drive.coil.resistance, drive.coil.reference_temp, 60.0))
    # drive through two switches and the sense resistor
    assert float(hold.r_on) == pytest.approx(r_coil + 2 * sw.on_resistance + sense.resistance)
    slow = slow_decay(r_coil, sw.on_resistance, sense.resistance, sense.position == "coil")
    fast = fast_decay(r_coil, sense.resistance, 24.0, fw.diode_drop)
    assert (float(hold.r_off), float(hold.v_off)) == pytest.approx((float(slow.r_off), float(slow.v_off)))
    assert (float(rel.r_off), float(rel.v_off)) == pytest.approx((float(fast.r_off), float(fast.v_off)))
    assert float(rel.switch_voltage(drive, 0.5)) == pytest.approx(24.0 + fw.diode_drop)  # inline sense


def test_energy_returned_and_pump_up_are_the_models_at_their_corners():
    d = design(load_drive(BRIDGE))
    doc = d.to_dict()
    b = doc["topology"]["bridge"]
    drive = d.drive
    assert b["returned_per_hold_period_j"] == 0.0 and b["hold_decay"] == "slow"
    corners = {c["label"]: c for c in doc["corners"]}
    r_sense, vd = drive.board.sense.resistance, drive.freewheel.diode_drop
    # the over-current trip interrupts the most current: the worst return and pump-up
    assert b["worst_event"] == b["pump_event"] == "over-current trip"
    i_trip = doc["adc"]["trip_current_a"]
    c = corners[b["worst_corner"]]
    rel = release(fast_decay(c["resistance_ohm"], r_sense, c["supply_v"], vd), i_trip, 0.0, c["inductance_h"])
    assert b["returned_worst_j"] == pytest.approx(float(rel.returned), rel=1e-9)
    c = corners[b["pump_corner"]]
    pu = pump_up(i_trip, c["supply_v"], drive.supply.capacitance, c["resistance_ohm"] + r_sense,
                 c["inductance_h"], vd)
    assert b["pumped_bus_v"] == pytest.approx(float(pu.v2), rel=1e-9)
    # the switches see the pumped bus plus a body diode (inline sense): the switch-voltage figure
    assert doc["release"]["peak_switch_voltage_v"] == pytest.approx(float(pu.v2) + vd, rel=1e-9)
    names = {ch["name"]: ch["ok"] for ch in doc["checks"]}
    assert names["bus_pump_up"] and names["capacitor_voltage"] and doc["ok"]
    assert any("returns up to" in n for n in doc["cautions"])


def test_too_little_capacitance_fails_the_pump_up(tmp_path):
    path = _variant(tmp_path, 'capacitance = "220 uF"', 'capacitance = "4.7 uF"')
    res = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert res.exit_code == 1
    checks = {c["name"]: c for c in json.loads(res.stdout)["checks"]}
    assert not checks["bus_pump_up"]["ok"] and "more bulk capacitance" in checks["bus_pump_up"]["detail"]
    assert not checks["capacitor_voltage"]["ok"] and not checks["switch_voltage"]["ok"]


def test_a_supply_that_sinks_has_no_pump_up(tmp_path):
    path = _variant(tmp_path, "sink = false", "sink = true")
    doc = json.loads(CliRunner().invoke(app, ["design", str(path), "--json"]).stdout)
    b = doc["topology"]["bridge"]
    assert b["sink"] is True and b["pumped_bus_v"] is None
    assert "bus_pump_up" not in {c["name"] for c in doc["checks"]}
    assert doc["release"]["peak_switch_voltage_v"] == pytest.approx(28.0 + 0.8)


def test_bridge_hold_power_balances():
    # Conservation of energy in the hold's periodic steady state (common practice): the
    # supply's power is the copper's, the sense resistor's and the switches' (two conduct
    # while on, the two low-side ones while the current recirculates); no freewheel element.
    drive = load_drive(BRIDGE)
    lp = loop(drive, 24.0, 60.0)
    ss = pwm_steady_state(0.3, 20e3, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    loss = hold_losses(drive, lp, ss, 20e3)
    assert float(loss.freewheel) == 0.0
    assert float(loss.balance_error()) == pytest.approx(0.0, abs=1e-12 * float(loss.supply))


def test_simulated_release_is_the_fast_decay(tmp_path):
    out = tmp_path / "w.csv"
    res = CliRunner().invoke(app, ["simulate", str(BRIDGE), "--supply", "24 V", "--coil-temp", "20 degC",
                                   "--hold-time", "5 ms", "--csv", str(out)])
    assert res.exit_code == 0, res.stderr
    w = np.genfromtxt(out, delimiter=",", names=True)
    drive = load_drive(BRIDGE)
    on, t, i = w["switch_on"], w["time_s"], w["current_a"]
    k_off = int(np.flatnonzero(np.diff(on) < 0)[-1])  # the last on sample: the final turn-off
    rel = release(fast_decay(drive.coil.resistance, drive.board.sense.resistance, 24.0,
                             drive.freewheel.diode_drop), i[k_off], drive.release.current,
                  drive.coil.inductance)
    after = slice(k_off + 1, None)
    t_drop = np.interp(drive.release.current, i[after][::-1], t[after][::-1]) - t[k_off]
    assert t_drop == pytest.approx(float(rel.drop_time), rel=1e-6)
    assert w["switch_voltage_v"][after].max() == pytest.approx(24.0 + drive.freewheel.diode_drop)
    # in the hold's off-times Q1 holds off the bus above leg A (at -R_sw i: Q2 carries the
    # current back); in the on-times Q2 and Q3 hold off the bus less Q1's drop (inline sense)
    r_sw = drive.switch.on_resistance
    hold_off = (on == 0) & (t < t[k_off])
    assert np.allclose(w["switch_voltage_v"][hold_off], 24.0 + r_sw * i[hold_off], rtol=0, atol=1e-5)
    assert np.allclose(w["switch_voltage_v"][on == 1], 24.0 - r_sw * i[on == 1], rtol=0, atol=1e-5)
    # the switches' columns are the phase table (Q1 + Q4 on, Q2 + Q4 off, all open after)
    for name, state_on, state_off in (("high_a", 1, 0), ("low_a", 0, 1), ("high_b", 0, 0), ("low_b", 1, 1)):
        assert np.all(w[f"{name}_on"][on == 1] == state_on) and np.all(w[f"{name}_on"][hold_off] == state_off)
        assert np.all(w[f"{name}_on"][after] == 0)


def test_header_and_driver(tmp_path):
    text = generate_header(design(load_drive(BRIDGE)))
    assert "#define COIL_SWITCH_TOPOLOGY               COIL_TOPOLOGY_FULL_BRIDGE" in text
    assert "pump-up   the bus rises to" in text
    assert "#define COIL_BRIDGE_HOLD_DECAY_SWITCHES    10U" in text
    res = CliRunner().invoke(app, ["firmware-driver", str(BRIDGE), "--out", str(tmp_path / "drv")])
    assert res.exit_code == 0, res.stderr
    assert "coil_port_bridge(COIL_BRIDGE_PEAK_SWITCHES, COIL_BRIDGE_HOLD_DECAY_SWITCHES)" in (
        tmp_path / "drv" / "coil_driver.c").read_text()
