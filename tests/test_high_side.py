"""The high-side switch (``[switch] topology = "high_side"``) through every stage: the file
key, the design (figures shared with the low-side loop, the switch node below ground),
the header, the simulated columns, and a scope check that reads the switch's voltage from
its node. The circuit itself is checked against ngspice in
tests/test_reference_ngspice_high_side.py."""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest
from typer.testing import CliRunner

from circuit_reference import reference_drive
from conftest import EXAMPLES
from coildrive.cli import app
from coildrive.codegen.header import generate_header
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.circuit import copper_resistance

HIGH = EXAMPLES / "gate-valve-highside-24v.toml"


def _as_low_side(drive):
    return dataclasses.replace(drive, switch=dataclasses.replace(drive.switch, topology="low_side"))


def test_topology_defaults_to_low_side_and_reads_high_side():
    assert load_drive(EXAMPLES / "demo-valve.toml").switch.topology == "low_side"
    assert load_drive(HIGH).switch.topology == "high_side"


def test_an_unknown_topology_is_one_line_naming_the_key(tmp_path):
    drive = tmp_path / "valve.toml"
    drive.write_text(HIGH.read_text().replace('board = "sourcing-hs-zener"',
                                              'board = "sourcing-hs-zener"\n[switch]\ntopology = "sideways"'))
    res = CliRunner().invoke(app, ["design", str(drive)])
    assert res.exit_code == 2
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "switch.topology" in lines[0] and str(drive) in lines[0], res.stderr
    assert "'low_side', 'high_side'" in lines[0], lines[0]


def test_the_input_hash_of_a_low_side_drive_is_unchanged_by_the_default():
    drive = load_drive(EXAMPLES / "demo-valve.toml")
    explicit = dataclasses.replace(drive, switch=dataclasses.replace(drive.switch, topology="low_side"))
    assert explicit.input_hash() == drive.input_hash()
    high = dataclasses.replace(drive, switch=dataclasses.replace(drive.switch, topology="high_side"))
    assert high.input_hash() != drive.input_hash()


def test_high_side_shares_the_low_side_loop_and_adds_the_node():
    high = design(load_drive(HIGH))
    low = design(_as_low_side(load_drive(HIGH)))
    hd, ld = high.to_dict(), low.to_dict()
    # the coil's loop is the same: every figure of the pull-in, hold and release (switch
    # voltage and energies included) and every corner agree exactly
    for key in ("pull_in", "hold", "release", "timer", "adc", "duty_table", "checks"):
        assert hd[key] == ld[key], key
    assert [{k: v for k, v in c.items() if k != "switch_node_voltage_v"} for c in hd["corners"]] == ld["corners"]
    assert "topology" not in ld and low.topology is None
    t = hd["topology"]
    fw = high.drive.freewheel
    # diode + Zener to ground: the node sits at -(V_d + V_z), below ground (KVL from ground)
    assert t["name"] == "high_side" and t["lowest_node_voltage_v"] == pytest.approx(
        -(fw.diode_drop + fw.zener_voltage), abs=1e-12)
    assert t["sense_place"].startswith("in the coil return")
    # the switch sees the bus plus the freewheel voltage: the node's swing below the bus
    assert hd["release"]["peak_switch_voltage_v"] == pytest.approx(
        high.drive.supply.max - t["lowest_node_voltage_v"], abs=1e-9)
    # every corner names its switch node: the bus less the switch voltage there
    for c in hd["corners"] + [hd["nominal"]]:
        assert c["switch_node_voltage_v"] == pytest.approx(c["supply_v"] - c["peak_switch_voltage_v"], abs=1e-9)
    assert all("switch_node_voltage_v" not in c for c in ld["corners"])
    assert any("swings to -15.9 V" in c for c in hd["cautions"])
    assert any("gate driven above the supply" in c for c in hd["cautions"])


def test_a_clamp_across_a_high_side_switch_puts_the_node_lowest_at_the_lowest_supply(tmp_path):
    drive = reference_drive(tmp_path, "clamp", "switch", topology="high_side")
    d = design(drive)
    t = d.topology
    # the clamp holds the switch at V_clamp: the node is V_bus - V_clamp, lowest at supply.min
    assert t.lowest_node_voltage_v == pytest.approx(drive.supply.min - drive.freewheel.clamp_voltage)
    assert t.lowest_node_corner.startswith(f"{drive.supply.min:g} V")
    assert d.release.peak_switch_voltage_v == pytest.approx(drive.freewheel.clamp_voltage)
    assert t.sense_place.startswith("in the supply leg")


def test_header_names_the_topology_only_for_a_high_side_switch():
    text = generate_header(design(load_drive(HIGH)))
    assert "#define COIL_SWITCH_TOPOLOGY               COIL_TOPOLOGY_HIGH_SIDE" in text
    assert "switch    high-side; at turn-off the switch node swings to -15.9 V;" in text
    assert "TOPOLOGY" not in generate_header(design(load_drive(EXAMPLES / "demo-valve.toml")))


def test_simulated_node_and_coil_voltages_follow_kirchhoff_and_the_coil_law(tmp_path):
    out = tmp_path / "w.csv"
    res = CliRunner().invoke(app, ["simulate", str(HIGH), "--supply", "24 V", "--coil-temp", "60 degC",
                                   "--hold-time", "2 ms", "--csv", str(out)])
    assert res.exit_code == 0, res.stderr
    head = out.read_text().splitlines()[0]
    assert head == ("time_s,current_a,switch_on,switch_voltage_v,sense_current_a,"
                    "node_voltage_v,coil_voltage_v")
    w = np.genfromtxt(out, delimiter=",", names=True)
    drive = load_drive(HIGH)
    fw, r_sw, r_sense = drive.freewheel, drive.switch.on_resistance, drive.board.sense.resistance
    on, i, node = w["switch_on"] == 1, w["current_a"], w["node_voltage_v"]
    # KVL while on: the node is the bus less the switch (the sense sits in the coil return)
    assert np.allclose(node[on], 24.0 - i[on] * r_sw, atol=1e-6)
    # freewheeling: the diode + Zener from ground hold the node at -(V_d + V_z)
    free = ~on & (i > 1e-6)
    assert free.any() and np.allclose(node[free], -(fw.diode_drop + fw.zener_voltage), atol=1e-6)
    assert np.allclose(w["switch_voltage_v"][free] + node[free], 24.0, atol=1e-6)
    # the coil law v = R i + L di/dt (central differences inside the peak, where the
    # samples are dense): the coil column is the voltage across the coil's terminals
    r_coil = float(copper_resistance(drive.coil.resistance, drive.coil.reference_temp, 60.0))
    t = w["time_s"]
    k = np.flatnonzero(on & (t > 1e-4) & (t < 5e-3))[1:-1]
    didt = (i[k + 1] - i[k - 1]) / (t[k + 1] - t[k - 1])
    law = r_coil * i[k] + drive.coil.inductance * didt
    assert np.allclose(w["coil_voltage_v"][k], law, rtol=2e-3), np.max(np.abs(w["coil_voltage_v"][k] - law))


def test_low_side_csv_keeps_its_columns(tmp_path):
    out = tmp_path / "w.csv"
    res = CliRunner().invoke(app, ["simulate", str(EXAMPLES / "relay-12v.toml"), "--supply", "12 V",
                                   "--coil-temp", "20 degC", "--hold-time", "1 ms", "--csv", str(out)])
    assert res.exit_code == 0, res.stderr
    assert out.read_text().splitlines()[0] == "time_s,current_a,switch_on,switch_voltage_v,sense_current_a"


def test_scope_check_reads_a_high_side_switch_from_its_node(tmp_path):
    """A scope record of the switch node (synthetic, from the model) gives the switch's
    voltage as the bus less the node's lowest sample."""
    sim = tmp_path / "w.csv"
    res = CliRunner().invoke(app, ["simulate", str(HIGH), "--supply", "24 V", "--coil-temp", "20 degC",
                                   "--hold-time", "20 ms", "--csv", str(sim)])
    assert res.exit_code == 0, res.stderr
    w = np.genfromtxt(sim, delimiter=",", names=True)
    dt, lead = 5e-6, 2e-3
    t = np.arange(0.0, w["time_s"][-1] + lead + 2e-3, dt)
    k = np.clip(np.searchsorted(w["time_s"], t - lead, side="right") - 1, 0, None)
    before = t < lead
    i = np.where(before, 0.0, np.interp(t - lead, w["time_s"], w["current_a"]))
    sw = np.where(before, 0, w["switch_on"][k])
    node = np.where(before, 0.0, w["node_voltage_v"][k])
    scope = tmp_path / "scope.csv"
    scope.write_text("TIME,CH1,CH2,CH3\n" + "".join(
        f"{a:.9e},{b:.6e},{int(c)},{d:.5e}\n" for a, b, c, d in zip(t, i, sw, node)))
    res = CliRunner().invoke(app, ["check", str(scope), str(HIGH), "--columns",
                                   "time=TIME,current=CH1,switch=CH2,node=CH3", "--supply", "24 V",
                                   "--coil-temp", "20 degC", "--json"])
    assert res.exit_code == 0, res.stdout
    items = {x["name"]: x for x in json.loads(res.stdout)["items"]}
    row = items["switch_voltage"]
    fw = load_drive(HIGH).freewheel
    assert row["status"] == "pass"
    assert row["measured"] == pytest.approx(24.0 + fw.diode_drop + fw.zener_voltage, abs=1e-3)
    assert "bus less the lowest sampled switch-node voltage" in row["detail"]
    assert items["release_time"]["status"] == "pass"


def test_tune_runs_on_a_high_side_drive():
    res = CliRunner().invoke(app, ["tune", str(HIGH), "--json"])
    assert res.exit_code == 0, res.stderr
    assert json.loads(res.stdout)["ok"] is True
