"""Latching coils ([hold] mode = "latch"): the interval between pulses worked by hand,
the thermal bound against the cycle model, each pulse's energy balance, the CLI (table,
JSON, header compiled, simulate) and the refusals. The ngspice references of the pulses
are in tests/test_reference_ngspice_latch.py."""

from __future__ import annotations

import json
import math
import subprocess

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from conftest import EXAMPLES, require_tool
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from coildrive.model import latch as latch_model
from coildrive.model.thermal_cycle import orbit

BRIDGE = EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml"
RELAY = EXAMPLES / "latching" / "bistable-relay-reset-winding-24v.toml"


def test_interval_worked_by_hand():
    # 1 J a pulse into 5 J/K (0.2 K), tau 100 s, 50 K allowed: T = -100 ln(1 - 0.2/50)
    # = -100 ln(0.996) = -100 x (-0.00400802139) = 0.400802 s (hand arithmetic)
    assert float(latch_model.shortest_interval(1.0, 5.0, 100.0, 50.0)) == pytest.approx(0.400802139, rel=1e-8)
    # at that interval the rise just after a pulse is the limit: 0.2 / (1 - e^-0.004008) = 50 K
    assert float(latch_model.peak_rise(1.0, 0.400802139, 5.0, 100.0)) == pytest.approx(50.0, rel=1e-7)
    # one pulse past the limit: no interval is safe
    assert math.isinf(float(latch_model.shortest_interval(300.0, 5.0, 100.0, 50.0)))
    # 47 ohm x 4700 uF = 0.2209 s; 0.24 V low on 20 V, back within 1 % (0.2 V):
    # 0.2209 ln(1 + 0.24 / 0.2) = 0.2209 x ln 2.2 = 0.2209 x 0.788457 = 0.174170 s (hand)
    assert float(latch_model.recharge_time(0.24, 20.0, 0.01, 47.0, 4700e-6)) == pytest.approx(0.17417, rel=1e-4)


@settings(max_examples=50, deadline=None)
@given(energy=st.floats(1e-3, 10.0), t1=st.floats(1e-3, 1e3), t2=st.floats(1e-3, 1e3),
       tau=st.floats(1.0, 1e3), cap=st.floats(0.1, 100.0))
def test_a_longer_interval_never_heats_the_coil_more(energy, t1, t2, tau, cap):
    lo, hi = sorted((t1, t2))
    assert float(latch_model.peak_rise(energy, hi, cap, tau)) <= float(latch_model.peak_rise(energy, lo, cap, tau)) * (1 + 1e-12)


@settings(max_examples=50, deadline=None)
@given(energy=st.floats(1e-3, 10.0), t_pulse=st.floats(1e-4, 0.1), gap=st.floats(0.01, 1e3),
       tau=st.floats(1.0, 1e3), cap=st.floats(0.1, 100.0))
def test_the_impulse_bound_is_above_the_cycle_model(energy, t_pulse, gap, tau, cap):
    # the same heat spread over the pulse as a rectangle (model.thermal_cycle's orbit, a
    # constant power: slope 0) never runs hotter than all of it at once
    top, _ = orbit(energy / t_pulse, 0.0, t_pulse, gap, tau / cap, cap)
    assert float(top) <= float(latch_model.peak_rise(energy, t_pulse + gap, cap, tau)) * (1 + 1e-9)


@pytest.mark.parametrize("path", [BRIDGE, RELAY], ids=["bridge", "two-windings"])
def test_each_pulse_balances_its_energy(path):
    # Conservation of energy from zero current back to zero (common practice): what the
    # supply gives is what the copper, the switches and sense resistor, the freewheel
    # path take and what goes back to the bus
    d = design_latch(load_drive(path))
    for p in d.latch.pulses:
        parts = p.copper_j + p.switch_sense_j + p.freewheel_j + p.returned_j
        assert p.supply_j == pytest.approx(parts, rel=1e-9), p.name
        assert (p.returned_j > 0) == (path == BRIDGE), p.name
    assert d.ok


def test_the_interval_keeps_the_coil_at_its_limit():
    d = design_latch(load_drive(BRIDGE))
    r = d.latch
    assert r.governed_by == "the coil's temperature"
    drive = load_drive(BRIDGE)
    th = drive.thermal
    rise = latch_model.peak_rise(r.pulse_heat_j, r.interval_s, th.capacity, th.time_constant)
    assert drive.ambient.max + float(rise) == pytest.approx(th.max_coil_temp, rel=1e-9)
    assert r.interval_ticks == math.ceil(r.interval_s * drive.board.tick.rate - 1e-9)


def test_the_relay_waits_for_its_capacitor():
    d = design_latch(load_drive(RELAY))
    r = d.latch
    assert r.governed_by == "the capacitor's recharge"
    p = max(r.pulses, key=lambda x: x.time_s + x.recharge_time_s)
    assert r.interval_s == pytest.approx(p.time_s + p.recharge_time_s)


@pytest.mark.parametrize("path", [BRIDGE, RELAY], ids=["bridge", "two-windings"])
def test_design_json_header_and_simulate(tmp_path, path):
    runner = CliRunner()
    res = runner.invoke(app, ["design", str(path), "--json"])
    assert res.exit_code == 0, res.stderr
    doc = json.loads(res.stdout)
    lt = doc["latch"]
    assert [p["name"] for p in lt["pulses"]] == ["set", "reset"]
    assert lt["interval_ticks"] > max(p["ticks"] for p in lt["pulses"])
    header = tmp_path / "latch.h"
    res = runner.invoke(app, ["design", str(path), "--header", str(header), "--prefix", "VALVE"])
    assert res.exit_code == 0, res.stderr
    text = header.read_text()
    for p in lt["pulses"]:
        assert f"#define VALVE_{p['name'].upper()}_PULSE_TICKS" in text
    gcc = require_tool("gcc")
    main = tmp_path / "main.c"
    main.write_text('#include "latch.h"\n#include <stdint.h>\nint main(void) {\n'
                    f'  uint32_t set = VALVE_SET_PULSE_TICKS, gap = VALVE_MIN_INTERVAL_TICKS;\n'
                    f'  return (set == {lt["pulses"][0]["ticks"]}U && gap == {lt["interval_ticks"]}UL) ? 0 : 1;\n}}\n')
    out = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(main), "-o",
                          str(tmp_path / "a.out")], capture_output=True, text=True, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert subprocess.run([str(tmp_path / "a.out")]).returncode == 0
    csv = tmp_path / "w.csv"
    res = runner.invoke(app, ["simulate", str(path), "--supply", "12 V" if path == BRIDGE else "24 V",
                              "--coil-temp", "20 degC", "--csv", str(csv)])
    assert res.exit_code == 0, res.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    names = w.dtype.names
    assert names[:2] == ("time_s", "current_a")
    drive = load_drive(path)
    if path == BRIDGE:
        assert names[2:] == ("coil_voltage_v", "q1_v", "q2_v", "q3_v", "q4_v")
        # the set pulse drives the current one way, the reset the other
        assert w["current_a"].max() > 1.0 and w["current_a"].min() < -1.0
        # in the fast decay after the set pulse Q1 and Q4 see V_bus + V_d, the body diodes -V_d
        fast = (w["time_s"] > lt["pulses"][0]["time_s"]) & (w["current_a"] > 1e-3)
        assert np.allclose(w["q1_v"][fast], 12.0 + drive.freewheel.diode_drop)
        assert np.allclose(w["q2_v"][fast], -drive.freewheel.diode_drop)
        assert np.allclose(w["coil_voltage_v"][fast], -(12.0 + 2 * drive.freewheel.diode_drop)
                           - w["current_a"][fast] * drive.board.sense.resistance)
    else:
        assert names[2:] == ("reset_current_a", "coil_voltage_v", "reset_coil_voltage_v",
                             "switch_voltage_v", "reset_switch_voltage_v")
        assert w["current_a"].max() > 0.03 and w["reset_current_a"].max() > 0.02
        assert not np.any((w["current_a"] > 0) & (w["reset_current_a"] > 0))


def _write(tmp_path, path, old, new):
    text = path.read_text()
    assert old in text, old
    out = tmp_path / "v.toml"
    out.write_text(text.replace(old, new, 1))
    return out


@pytest.mark.parametrize("path,old,new,key", [
    (BRIDGE, "[reset]", "[release]\ncurrent = \"0.1 A\"\n\n[reset]", "release"),
    (BRIDGE, "[reset]", "[reset_coil]\nresistance = \"5 ohm\"\nreference_temp = \"20 degC\"\n"
     "inductance = \"10 mH\"\nresistance_tolerance = 0.1\ninductance_tolerance = 0.1\n\n[reset]", "reset_coil"),
    (RELAY, "[reset_coil]", "[unused_coil]", "unused_coil"),
    (BRIDGE, 'capacity = "6 J/K"           # the coil and its plunger tube (time constant 180 s)\n', "",
     "thermal.capacity"),
    (BRIDGE, 'mode = "latch"               # no hold: the magnet holds\n',
     'mode = "latch"\nfrequency = "20 kHz"\n', "hold.frequency"),
])
def test_what_a_latch_refuses_is_one_line(tmp_path, path, old, new, key):
    res = CliRunner().invoke(app, ["design", str(_write(tmp_path, path, old, new))])
    assert res.exit_code == 2, res.stdout
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and key in lines[0], res.stderr


@pytest.mark.parametrize("board,droop", [("fast-32bit-clamp", False), ("fast-32bit-clamp", True),
                                         ("lab-m32-zener", False)])
def test_a_clamp_and_a_zener_are_designed(tmp_path, board, droop):
    path = _write(tmp_path, RELAY, 'board = "tiny-8bit-diode"', f'board = "{board}"')
    if not droop:
        path.write_text(path.read_text().replace('source_resistance = "47 ohm"', "# no source resistance"))
    res = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert res.exit_code in (0, 1), res.stderr
    # the Zener's or the clamp's share of each pulse (in freewheel_j): the clamped decay
    # against solve_ivp in tests/test_latch_clamp.py (on the drooping bus too)
    doc = json.loads(res.stdout)
    assert all(p["freewheel_j"] > 0 for p in doc["latch"]["pulses"]), doc["latch"]
    if droop:   # the clamped decay draws the capacitor down below the pulse's own droop
        assert all(p["droop_v"] > 0 and p["recharge_time_s"] > p["decay_time_s"] for p in doc["latch"]["pulses"])


def test_a_two_winding_drive_without_its_reset_winding_is_refused(tmp_path):
    text = RELAY.read_text()
    start, end = text.index("[reset_coil]"), text.index("[supply]")
    path = tmp_path / "v.toml"
    path.write_text(text[:start] + text[end:])
    res = CliRunner().invoke(app, ["design", str(path)])
    assert res.exit_code == 2 and "reset_coil" in res.stderr and "missing" in res.stderr


def test_design_plot_draws_both_pulses(tmp_path):
    out = tmp_path / "latch.png"
    res = CliRunner().invoke(app, ["design", str(RELAY), "--plot", str(out)])
    assert res.exit_code == 0, res.stderr
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_reset_sections_need_a_latch(tmp_path):
    demo = tmp_path / "d.toml"
    demo.write_text((EXAMPLES / "demo-valve.toml").read_text() + "\n[reset]\ncurrent = \"0.1 A\"\n")
    res = CliRunner().invoke(app, ["design", str(demo)])
    assert res.exit_code == 2 and "reset" in res.stderr and "latching" in res.stderr


def test_a_high_side_latch_reports_its_node_below_ground(tmp_path):
    # the relay's windings on the high-side Zener board: the node at a pulse's end is
    # -(V_diode + V_zener) (the topology's node, model.high_side)
    path = _write(tmp_path, RELAY, 'board = "tiny-8bit-diode"', 'board = "sourcing-hs-zener"')
    drive = load_drive(path)
    d = design_latch(drive)
    fw = drive.freewheel
    for p in d.latch.pulses:
        assert p.lowest_node_v == pytest.approx(-(fw.diode_drop + fw.zener_voltage), abs=0.05)
    assert any("node swings" in c for c in d.cautions)
    assert all(p.lowest_node_v is None for p in design_latch(load_drive(RELAY)).latch.pulses)


def test_a_pulse_too_hot_for_the_coil_fails_and_writes_no_header(tmp_path):
    # 0.01 J/K: one ~1 J pulse alone would heat the coil ~100 K, past the 55 K allowed
    path = _write(tmp_path, BRIDGE, 'capacity = "6 J/K"', 'capacity = "0.01 J/K"')
    header = tmp_path / "latch.h"
    res = CliRunner().invoke(app, ["design", str(path), "--json", "--header", str(header), "--plot",
                                   str(tmp_path / "p.png")])
    assert res.exit_code == 1, res.stderr
    assert (tmp_path / "p.png").exists()
    doc = json.loads(res.stdout)
    assert doc["ok"] is False and doc["latch"]["thermal_interval_s"] is None
    assert [c["name"] for c in doc["checks"] if not c["ok"]] == ["coil_temperature"]
    assert not header.exists()
    assert "No interval keeps the coil" in doc["cautions"][0]
    res = CliRunner().invoke(app, ["simulate", str(path), "--supply", "12", "--coil-temp", "20", "--csv",
                                   str(tmp_path / "w.csv")])
    assert res.exit_code == 2 and len(res.stderr.strip().splitlines()) == 1, res.stderr


BOLT = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"


def test_simulate_plot_of_a_latch_writes_a_png_and_nothing_on_bad_input(tmp_path):
    """``simulate --plot`` of a latching coil: a valid PNG for a bridge and for two windings
    with a moving armature (current, switch states, gap); where the armature does not seat
    (too low a supply) one line, exit 2, and neither the CSV nor the PNG is written."""
    for path in (BRIDGE, BOLT):
        csv, png = tmp_path / f"{path.stem}.csv", tmp_path / f"{path.stem}.png"
        res = CliRunner().invoke(app, ["simulate", str(path), "--supply", "12", "--coil-temp", "20",
                                       "--csv", str(csv), "--plot", str(png), "--points", "2"])
        assert res.exit_code == 0, res.output
        data = png.read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR" and data[-8:-4] == b"IEND", path
        assert f"wrote plot {png}" in res.stderr
    csv, png = tmp_path / "low.csv", tmp_path / "low.png"
    res = CliRunner().invoke(app, ["simulate", str(BOLT), "--supply", "3", "--coil-temp", "20",
                                   "--csv", str(csv), "--plot", str(png), "--points", "2"])
    assert res.exit_code == 2, res.output
    assert len(res.stderr.strip().splitlines()) == 1 and "Traceback" not in res.output, res.stderr
    assert not csv.exists() and not png.exists()



def test_pulse_heat_is_the_most_copper_over_the_corners():
    # heat_j (the interval's and the cycle's) is the most copper heat one pulse leaves over
    # every corner, not the energy corner's copper_j. Worked by hand for the bridge's pulses
    # (boards/bridge-m32-fast: two 40 mohm switches on, the 0.1 ohm sense inline, the fast
    # decay through two 0.8 V body diodes into the bus): the RL step's int i^2 dt =
    # I^2 (t - 2 tau (1 - e^(-t/tau)) + tau/2 (1 - e^(-2t/tau))), then L di/dt = -(E + R i)
    # from the top to zero, int i^2 dt = a^2 tau/2 (1 - e^(-2 t_z/tau)) - 2 a b tau
    # (1 - e^(-t_z/tau)) + b^2 t_z with b = E/R, a = I_0 + b, t_z = tau ln(a / b)
    # (first-order circuits, e.g. Hayt & Kemmerly); R(T) by IEC 60028 (0.00393 /K).
    drive = load_drive(BRIDGE)
    d = design_latch(drive)
    rate = drive.board.tick.rate
    for p in d.latch.pulses:
        t = p.ticks / rate
        heats = []
        for v in (drive.supply.min, drive.supply.max):
            for temp in (drive.ambient.min, drive.thermal.max_coil_temp):
                for rf in (0.93, 1.07):
                    for lf in (0.85, 1.15):
                        r_coil = 4.5 * (1 + 0.00393 * (temp - 20)) * rf
                        ind, r_on, r_off = 0.015 * lf, r_coil + 2 * 0.04 + 0.1, r_coil + 0.1
                        i_inf, tau = v / r_on, ind / r_on
                        on = i_inf**2 * (t - 2 * tau * (1 - math.exp(-t / tau)) + tau / 2 * (1 - math.exp(-2 * t / tau)))
                        i0 = i_inf * (1 - math.exp(-t / tau))
                        b = (v + 1.6) / r_off
                        a, tau = i0 + b, ind / r_off
                        tz = tau * math.log(a / b)
                        off = (a * a * tau / 2 * (1 - math.exp(-2 * tz / tau)) - 2 * a * b * tau * (1 - math.exp(-tz / tau))
                               + b * b * tz)
                        heats.append(r_coil * (on + off))
        assert p.heat_j == pytest.approx(max(heats), rel=1e-9), p.name
        assert p.heat_j >= p.copper_j
    assert d.latch.pulse_heat_j == max(p.heat_j for p in d.latch.pulses)
