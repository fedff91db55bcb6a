"""A latching coil's pulses from the boost ([hold] mode = "latch" with [supply] boost):
each pulse runs from the boost capacitor until its current threshold (coildrive/design/
latch_boost.py), against the outside world and end to end.

References:

* ngspice (batch mode, ``ngspice -b``): the set pulse of the example
  (examples/latching/shutoff-valve-boost-reset-winding-12v.toml) -- the boost capacitor
  with its charge (``IC=``, ``tran ... uic``), the boost switch and the winding's low-side
  switch as voltage-controlled switches (ngspice manual, "Switches") with body diodes, the
  main supply behind its diode, the sense resistor in the coil path, the winding, the
  freewheel diode across it (the constant-drop device of tests/ngspice_run.py). ngspice
  turns the pulse off itself: a behavioural current source (ngspice manual, "B source")
  starts charging a timing capacitor when the coil current passes the threshold code's
  highest trip current and keeps charging it; both switches open when it reaches 0.5 V,
  one scheduler tick later (the driver's compare once a tick). Checked within 1 %: the
  time to the trip current, the current and the capacitor at the turn-off, the
  capacitor's energy, the copper's and the freewheel diode's, the time to zero after it;
  on the slow side the longest pulse and the capacitor's lowest voltage;
* scipy's ``solve_ivp`` (Radau) of the reset pulse's loop equations written afresh here
  (``L di/dt = v_C - R i``, ``C dv_C/dt = -i``, an event at the trip current, then the
  freewheel decay ``L di/dt = -(R_off i + V_d)`` to zero, with states for ``int i^2 dt``
  and ``int i dt``): the energies within 1e-6;
* hand-worked numbers: the threshold code ``ceil(I R_sense G / LSB)``, the recharge ``E / P``
  and the interval it sets.
"""

from __future__ import annotations

import json
import math
import subprocess

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS, EXAMPLES, require_tool
from ngspice_run import OPTIONS, knee, run
from test_latch import _write
from test_reference_ngspice_latch import _corner   # a corner's label -> (V, degC, R and L factors)
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.latch import design_latch, winding_drive
from coildrive.model import boost as boost_model
from coildrive.model.circuit import loop
from coildrive.model.rl import decay_time

VALVE = EXAMPLES / "latching" / "shutoff-valve-boost-reset-winding-12v.toml"
BRIDGE = EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml"


def header_holds(tmp_path, header: str, condition: str) -> None:
    """A program including ``header`` (in ``tmp_path``) that returns 0 where the C
    ``condition`` holds compiles warning-free (gcc -std=c99 -Wall -Wextra -Werror
    -pedantic) and returns 0."""
    main = tmp_path / "main.c"
    main.write_text(f'#include "{header}"\nint main(void) {{\n  return ({condition}) ? 0 : 1;\n}}\n')
    out = subprocess.run([require_tool("gcc"), "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(main),
                          "-o", str(tmp_path / "a.out")], capture_output=True, text=True, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert subprocess.run([str(tmp_path / "a.out")]).returncode == 0


@pytest.fixture(scope="module")
def valve():
    drive = load_drive(VALVE)
    return drive, design_latch(drive)


def _side(drive, high: bool):
    """The boost's charge (V) and capacitance (F) at its highest or lowest."""
    s, sign = drive.supply, (1.0 if high else -1.0)
    return s.boost * (1 + sign * s.boost_tolerance), s.boost_capacitance * (1 + sign * s.boost_capacitance_tolerance)


def _netlist(drive, v_main, r_coil, ind, v_b, c_b, trip, late, tend, step, r_eddy=None, clamp=None):
    """The set pulse from the boost with ngspice's own threshold turn-off (module docstring);
    ``r_eddy`` ohm: an eddy resistance across the winding's inductance (``eeddy`` its energy);
    ``clamp`` V: a clamp across the switch (drain to a ``clamp`` V source through an ideal
    one-way device) instead of the diode across the winding, ``D_m`` then without its drop
    as the design takes the main supply at the top (``efw`` the clamp's energy, ``emain``
    the main supply's, ``vdmax`` the switch's highest voltage)."""
    sw, sense, v_d = drive.switch.on_resistance, drive.board.sense.resistance, drive.freewheel.diode_drop
    i_q = 1e-3                      # A into the timing capacitor: 0.5 V after `late` s
    c_q = 2.0 * i_q * late
    return "\n".join([
        "* latching coil: set pulse from the boost capacitor, threshold turn-off",
        f"CB cb 0 {c_b!r} IC={v_b!r}", "VMB boost cb DC 0",
        "SB boost top ref q SWB", knee("BDB", "top", "boost", v_d),
        f"VMAIN main 0 DC {v_main!r}", knee("BDM", "main", "top", 0.0 if clamp else v_d),
        # with both switches open the freewheel loop floats: 1 Mohm to the main supply sets
        # its level (31 uA from the boost in the pulse: a 1e-6 share of its energy)
        "RTOP top main 1e6",
        "VM top n1 DC 0", f"RSENSE n1 n2 {sense!r}", f"RCOIL n2 n3 {r_coil!r}", f"LCOIL n3 drain {ind!r} IC=0",
        *([] if r_eddy is None else [f"REDDY n3 drain {r_eddy!r}"]),
        "S1 drain 0 ref q SW1", knee("BD1", "0", "drain", v_d),
        *(["VFW drain dfw DC 0", knee("BFW", "dfw", "top", v_d)] if clamp is None else
          ["VFW drain dfw DC 0", knee("BFW", "dfw", "cl", 0.0), f"VCL cl 0 DC {clamp!r}"]),
        # the comparator and its tick: charging starts at the trip current and latches
        "VREF ref 0 DC 1",
        f"BQ 0 q I = ((i(VM) > {trip!r}) || (v(q) > 1e-3)) && (v(q) < 2) ? {i_q!r} : 0",
        f"CQ q 0 {c_q!r} IC=0", "RQ q 0 1e12",
        # the boost switch opens 10 ns after the winding's (two switches changing at one
        # instant stop ngspice, as in the bridge reference): q rises 1 / (2 late) V/s
        f".model SWB SW(VT={0.5 + 10e-9 / (2.0 * late)!r} VH=0 RON={drive.supply.boost_resistance!r} ROFF=1e9)",
        f".model SW1 SW(VT=0.5 VH=0 RON={sw!r} ROFF=1e9)",
        OPTIONS, ".control", f"tran {step!r} {tend!r} 0 {step!r} uic",
        f"meas tran tth WHEN i(VM)={trip!r} RISE=1",
        "meas tran toff WHEN v(q)=0.5 RISE=1",
        "meas tran ioff FIND i(VM) WHEN v(q)=0.5 RISE=1",
        "meas tran vcoff FIND v(boost) WHEN v(q)=0.5 RISE=1",
        f"let pcap = -v(boost) * i(VMB)", f"let pcu = i(VM) * i(VM) * {r_coil!r}",
        "let pfw = (v(drain) - v(top)) * i(VFW)" if clamp is None else "let pfw = v(drain) * i(VFW)",
        *([] if clamp is None else ["let pmain = -v(main) * i(VMAIN)", f"meas tran emain INTEG pmain from=0 to={tend!r}",
                                    f"meas tran vdmax MAX v(drain) from=0 to={tend!r}"]),
        f"meas tran ecap INTEG pcap from=0 to={tend!r}",
        f"meas tran ecu INTEG pcu from=0 to={tend!r}",
        f"meas tran efw INTEG pfw from=0 to={tend!r}",
        # (with an eddy term the terminal current steps at the turn-off: ion just before it)
        *([] if r_eddy is None else [f"let ped = (v(n3) - v(drain)) * (v(n3) - v(drain)) / {r_eddy!r}",
                                     f"meas tran eeddy INTEG ped from=0 to={tend!r}",
                                     "meas tran ion FIND i(VM) WHEN v(q)=0.499 RISE=1"]),
        "meas tran tzero WHEN i(VM)=1e-6 FALL=1",
        "quit 0", ".endc", ".end"]) + "\n"


@pytest.mark.ngspice
@pytest.mark.parametrize("side", ["fast", "slow"])
def test_set_pulse_from_the_boost_matches_ngspice(tmp_path, valve, side):
    drive, d = valve
    p = d.latch.pulses[0]
    b = p.boost
    # fast: the energy corner (the boost at its highest there); slow: the longest pulse's
    label = p.energy_corner if side == "fast" else b.time_to_threshold_corner
    v, temp, rf, lf = _corner(label)
    high = side == "fast"
    assert ("the boost at its highest" in label) == high
    lp = loop(drive, v, temp, rf, lf)
    r_coil, ind = float(lp.r_coil), float(lp.inductance)
    v_b, c_b = _side(drive, high)
    late = 1.0 / drive.board.tick.rate
    bm = boost_model.boost(v_b, c_b, float(lp.r_on) + drive.supply.boost_resistance, ind)
    t_trip = float(boost_model.threshold_time(b.trip_max_a, bm))
    t_off = t_trip + late
    i_off, v_off = (float(x) for x in boost_model.state(t_off, bm))
    rel = loop(drive, v, temp, rf, lf, path="release")
    t_zero = float(decay_time(0.0, i_off, rel.r_off, rel.v_off, ind))
    step = t_trip / 4000
    tend = t_off + 1.3 * t_zero
    res = run(tmp_path, f"latch-boost-{side}", _netlist(drive, v, r_coil, ind, v_b, c_b, b.trip_max_a, late,
                                                        tend, step))
    # ngspice: the time to the trip current, and the turn-off one tick later, within 1 % + a step
    assert abs(res["tth"] - t_trip) <= 0.01 * t_trip + step, (res["tth"], t_trip)
    assert abs(res["toff"] - t_off) <= 0.01 * t_off + step, (res["toff"], t_off)
    # ngspice: the current and the boost capacitor at the turn-off, within 1 %
    assert res["ioff"] == pytest.approx(i_off, rel=0.01), (res["ioff"], i_off)
    assert v_b - res["vcoff"] == pytest.approx(v_b - v_off, rel=0.01), (res["vcoff"], v_off)
    if not high:
        # the design's longest pulse and the capacitor's lowest (the slow side's worst corner)
        assert res["toff"] == pytest.approx(b.time_to_threshold_s, rel=0.01)
        assert res["vcoff"] == pytest.approx(b.lowest_boost_v, rel=0.01)
        return
    # ngspice: the energy the boost capacitor gives, the copper's and the freewheel diode's
    # over the pulse and its decay (the design's figures at this corner), within 1 %
    assert res["ecap"] == pytest.approx(p.supply_j, rel=0.01), (res["ecap"], p.supply_j)
    assert res["ecu"] == pytest.approx(p.copper_j, rel=0.01), (res["ecu"], p.copper_j)
    assert res["efw"] == pytest.approx(p.freewheel_j, rel=0.01), (res["efw"], p.freewheel_j)
    # ngspice: the time to zero after the turn-off, within 1 % + a step (the design's decay
    # time is the longest over the corners: at least this one's)
    assert abs(res["tzero"] - res["toff"] - t_zero) <= 0.01 * t_zero + step, (res["tzero"] - res["toff"], t_zero)
    assert t_zero <= p.decay_time_s * (1 + 1e-12)


def test_reset_pulse_energies_against_scipy(valve):
    drive, d = valve
    reset_pulse_energies(drive, d)


def reset_pulse_energies(drive, d) -> None:
    """The reset pulse's energies at its energy corner against scipy solve_ivp (Radau) of its
    loop written afresh, within 1e-6: the boost capacitor's series RLC to the highest trip
    current and a tick more, then the freewheel decay to zero -- through the diode across the
    winding, ``L di/dt = -((R_coil + R_sense) i + V_d)``, or a clamp across the switch,
    ``L di/dt = -((R_coil + R_sense) i + V_clamp - V_main)``, the main supply (the corner's)
    then giving ``V_main int i dt`` (``main_supply_j``) and the clamp taking ``V_clamp int i
    dt``; the balance closes."""
    from scipy.integrate import solve_ivp

    p = d.latch.pulses[1]
    wd = winding_drive(drive, True)
    v, temp, rf, lf = _corner(p.energy_corner)
    high = "the boost at its highest" in p.energy_corner
    v_b, c_b = _side(drive, high)
    # the reset winding's loop written afresh: copper R(T) (IEC 60028, alpha 0.00393 /K),
    # its switch, the sense resistor (coil path), the boost path
    coil = drive.latch.reset_coil
    r_coil = coil.resistance * rf * (1 + 0.00393 * (temp - coil.reference_temp))
    ind = coil.inductance * lf
    r_sw, r_sense, r_b = drive.switch.on_resistance, drive.board.sense.resistance, drive.supply.boost_resistance
    r = r_coil + r_sw + r_sense + r_b
    trip, late = p.boost.trip_max_a, 1.0 / drive.board.tick.rate

    def on(_t, y):      # i, v_C, int i^2 dt
        i, vc, _ = y
        return [(vc - r * i) / ind, -i / c_b, i * i]

    def hit(_t, y):
        return y[0] - trip
    hit.terminal = True
    first = solve_ivp(on, (0, 1.0), [0.0, v_b, 0.0], method="Radau", rtol=1e-11, atol=1e-14, events=hit)
    t_trip = float(first.t_events[0][0])
    y_trip = first.y_events[0][0]
    rest = solve_ivp(on, (t_trip, t_trip + late), y_trip, method="Radau", rtol=1e-11, atol=1e-14)
    i_off, vc_off, s_on = rest.y[:, -1]
    # the freewheel decay: L di/dt = -((R_coil + R_sense) i + V_d) (sense in the coil path);
    # a clamp across the switch: V_clamp - V_main in V_d's place
    clamp = drive.freewheel.type == "clamp"
    r_off = r_coil + r_sense
    v_d = drive.freewheel.clamp_voltage - v if clamp else drive.freewheel.diode_drop

    def off(_t, y):     # i, int i^2 dt, int i dt
        return [-(r_off * y[0] + v_d) / ind, y[0] ** 2, y[0]]

    def zero(_t, y):
        return y[0]
    zero.terminal = True
    dec = solve_ivp(off, (0, 1.0), [i_off, 0.0, 0.0], method="Radau", rtol=1e-11, atol=1e-14, events=zero)
    _, s_d, q_d = dec.y_events[0][0]
    e_cap = 0.5 * c_b * (v_b ** 2 - vc_off ** 2)
    # scipy solve_ivp (Radau): each energy of the design's balance within 1e-6
    assert p.supply_j == pytest.approx(e_cap, rel=1e-6)
    assert p.copper_j == pytest.approx(r_coil * (s_on + s_d), rel=1e-6)
    assert p.switch_sense_j == pytest.approx(r_sw * s_on + r_sense * (s_on + s_d), rel=1e-6)
    assert p.boost_j == pytest.approx(r_b * s_on, rel=1e-6)
    assert p.freewheel_j == pytest.approx((v_d + v if clamp else v_d) * q_d, rel=1e-6)
    assert p.main_supply_j == pytest.approx(v * q_d if clamp else 0.0, rel=1e-6)
    assert p.stored_j == pytest.approx(0.5 * ind * i_off ** 2, rel=1e-6)
    # conservation of energy (common practice): the boost's energy (and the main supply's in a
    # clamp's decay) is what the loop takes
    assert p.supply_j + p.main_supply_j == pytest.approx(p.copper_j + p.switch_sense_j + p.boost_j + p.freewheel_j,
                                                         rel=1e-9)
    assert wd.coil is coil


def test_threshold_codes_and_the_interval_worked_by_hand(valve):
    drive, d = valve
    by = {p.name: p for p in d.latch.pulses}
    # hand-worked: 1.2 x 0.8 A = 0.96 A through 0.1 ohm x 20 = 1.92 V; one LSB of 12 bits on
    # 3.3 V is 0.000805664 V, so 1.92 / 0.000805664 = 2383.13 -> code 2384; the reset's
    # 1.2 x 0.5 A = 0.6 A -> 1.2 V / 0.000805664 = 1489.45 -> code 1490
    assert by["set"].boost.threshold_code == 2384 and by["reset"].boost.threshold_code == 1490
    # hand-worked: the recharge is E / P at 1 W, and the boost's interval the longest pulse
    # + the larger pulse's recharge; it governs the example's interval
    for p in by.values():
        assert p.boost.recharge_time_s == pytest.approx(p.boost.energy_j / 1.0, rel=1e-12)
        assert p.supply_j == pytest.approx(p.boost.energy_j, rel=1e-12)   # the same energy, split
    r = d.latch
    assert r.governed_by == "the boost's recharge"
    assert r.interval_s == pytest.approx(max(p.boost.min_interval_s for p in by.values()), rel=1e-12)
    assert r.interval_ticks == math.ceil(r.interval_s * drive.board.tick.rate - 1e-9)
    # the time-out: the slowest pulse x margin in ticks + 1
    for p in by.values():
        assert p.ticks == math.ceil(p.boost.time_to_threshold_s * p.margin * 1e4 - 1e-9) + 1
    assert d.ok


def test_design_json_header_simulate_and_bench(tmp_path, valve):
    drive, d = valve
    runner = CliRunner()
    res = runner.invoke(app, ["design", str(VALVE), "--json"])
    assert res.exit_code == 0, res.stderr
    doc = json.loads(res.stdout)
    pulses = doc["latch"]["pulses"]
    assert [p["boost"]["threshold_code"] for p in pulses] == [2384, 1490]
    assert doc["latch"]["boost_interval_s"] > 0 and all(p["boost_j"] > 0 for p in pulses)
    assert {c["name"] for c in doc["checks"]} >= {"set_pulse", "set_boost_droop", "reset_pulse", "reset_boost_droop"}
    header = tmp_path / "valve.h"
    res = runner.invoke(app, ["design", str(VALVE), "--header", str(header), "--prefix", "SHUT"])
    assert res.exit_code == 0, res.stderr
    header_holds(tmp_path, "valve.h", 'SHUT_LATCH_BOOSTED == 1U && SHUT_SET_THRESHOLD_CODE == 2384U && '
                 f'SHUT_RESET_THRESHOLD_CODE == 1490U && SHUT_SET_PULSE_TICKS == {pulses[0]["ticks"]}U && '
                 f'SHUT_MIN_INTERVAL_TICKS == {doc["latch"]["interval_ticks"]}UL')
    png = tmp_path / "d.png"
    res = runner.invoke(app, ["design", str(VALVE), "--plot", str(png)])
    assert res.exit_code == 0 and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n", res.stderr
    # simulate: each pulse ends where the nominal chain reads its code, the boost column
    csv = tmp_path / "w.csv"
    res = runner.invoke(app, ["simulate", str(VALVE), "--supply", "9", "--coil-temp", "120", "--csv", str(csv)])
    assert res.exit_code == 0, res.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    assert w.dtype.names[:2] == ("time_s", "current_a") and w.dtype.names[-1] == "boost_v"
    # each pulse ends at the first tick whose reading is the code (the driver compares once a
    # tick): at or above the code's current then, below it one tick earlier
    from coildrive.design.latch import firmware_pulse
    lsb_a, tick = 3.3 / 4096 / (0.1 * 20), 1.0 / drive.board.tick.rate
    for col, name, code, t0 in (("current_a", "set", 2384, 0.0), ("reset_current_a", "reset", 1490,
                                                                   d.latch.interval_s)):
        length = firmware_pulse(d, name, 9.0, 120.0)
        assert length * drive.board.tick.rate == pytest.approx(round(length * drive.board.tick.rate), abs=1e-9)
        assert w[col].max() >= code * lsb_a > np.interp(t0 + length - tick, w["time_s"], w[col]), name
    assert w["boost_v"][0] == 40.0 and w["boost_v"].min() < 40.0 - 1.0
    # emulate -> check (the model's device: plumbing), and a coil with 40 % more resistance fails
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_device import LatchDevice

    # a coil with 3 x the inductance reads its codes at no tick before the time-out: each pulse
    # ends there with the driver's FAULT BOOST_TIMEOUT after its OFF, and check fails on it
    from coildrive.bench.messages import EventKind, FaultCode

    for name, scale, l_scale, ok in (("good", 1.0, 1.0, True), ("bad", 1.4, 1.0, False), ("slow", 1.0, 3.0, False)):
        dev = LatchDevice(d, DeviceOptions(noise_codes=0.5, seed=5, supply=9.0, coil_temp=100.0,
                                           resistance_scale=scale, inductance_scale=l_scale))
        msgs, _ = run_device(dev, 0.05 + 2.2 * dev.period, step=0.05)
        cap = capture_of(msgs, tmp_path / f"{name}.cdcap")
        rep = check_latch_capture(cap, d, coil_temp=100.0)
        assert rep.ok is ok, [(i.name, i.status, i.detail) for i in rep.items]
        offs = [e.index for e in cap.events if e.kind == EventKind.OFF]
        faults = [e for e in cap.events if e.kind == EventKind.FAULT]
        row = next((i for i in rep.items if i.name == "faults"), None)
        if name == "slow":
            assert [e.index for e in faults] == offs and len(offs) >= 2
            assert {e.value for e in faults} == {int(FaultCode.BOOST_TIMEOUT)}
            assert row.status == "FAIL" and row.detail.count("BOOST_TIMEOUT at ") == len(offs), row.detail
            # as a user reads it: check --json exits 1 with the row
            res = runner.invoke(app, ["check", str(tmp_path / "slow.cdcap"), str(VALVE), "--coil-temp", "100",
                                      "--json"])
            assert res.exit_code == 1, res.stderr
            out = next(c for c in json.loads(res.stdout)["items"] if c["name"] == "faults")
            assert out["status"] == "FAIL" and "BOOST_TIMEOUT" in out["detail"], out
        else:
            assert not faults and row is None


BOOST = ("[supply]\n", "[supply]\nboost = \"40 V\"\nboost_capacitance = \"220 uF\"\nboost_power = \"1 W\"\nboost_efficiency = 0.85\n")


@pytest.mark.parametrize("path,edits,args,key", [
    (BRIDGE, [BOOST], [], "reset.settle_time"),
    (BRIDGE, [BOOST, ('boost_capacitance = "220 uF"\n', "")], [], "supply.boost_capacitance"),
    (VALVE, [("current = \"0.5 A\"\n", "current = \"0.5 A\"\nsettle_time = \"5 ms\"\n")], [], "reset.settle_time"),
    (VALVE, [("[freewheel]", "[armature]\ninductance_open = \"20 mH\"\ninductance_closed = \"30 mH\"\n"
              "stroke = \"1 mm\"\nmass = \"5 g\"\nspring_preload = \"2 N\"\nspring_rate = \"500 N/m\"\n\n"
              "[freewheel]")], [], "pull_in.current_margin"),   # in flight at the threshold
])
def test_what_a_boosted_latch_refuses_is_one_line(tmp_path, path, edits, args, key):
    src = path
    for old, new in edits:
        src = _write(tmp_path, src, old, new)
    res = CliRunner().invoke(app, ["design", str(src), *args])
    assert res.exit_code == 2, (res.stdout, res.stderr)
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and key in lines[0] and "Traceback" not in res.output, res.stderr


def test_a_boost_too_small_fails_and_a_high_side_board_reports_its_node(tmp_path):
    # 5 uF cannot drive either winding to its threshold: both *_pulse checks fail and say
    # how much it drives, no header is written, simulate refuses in one line; the plot
    # draws each pulse to its first maximum
    weak = _write(tmp_path, VALVE, 'boost_capacitance = "220 uF"', 'boost_capacitance = "5 uF"')
    header, png = tmp_path / "w.h", tmp_path / "w.png"
    res = CliRunner().invoke(app, ["design", str(weak), "--json", "--header", str(header), "--plot", str(png)])
    assert res.exit_code == 1, res.stderr
    doc = json.loads(res.stdout)
    assert sorted(c["name"] for c in doc["checks"] if not c["ok"]) == ["reset_pulse", "set_pulse"]
    assert all(p["ticks"] is None and "drives at most" in p["not_reached"] for p in doc["latch"]["pulses"])
    assert not header.exists() and png.exists()
    res = CliRunner().invoke(app, ["simulate", str(weak), "--supply", "9", "--coil-temp", "20", "--csv",
                                   str(tmp_path / "w.csv")])
    assert res.exit_code == 2 and len(res.stderr.strip().splitlines()) == 1 and not (tmp_path / "w.csv").exists()
    # the high side: the node at a pulse's end is -V_d (the freewheel diode from ground, model.high_side)
    hs = load_drive(_write(tmp_path, VALVE, 'board = "lab-m32-zener"', 'board = "sourcing-hs-zener"'))
    d = design_latch(hs)
    assert d.ok and all(p.lowest_node_v == pytest.approx(-hs.freewheel.diode_drop, abs=1e-6) for p in d.latch.pulses)
    assert any("node swings" in c for c in d.cautions)


def samples_inside_the_corners(d, n: int) -> None:
    """``n`` Monte Carlo samples of the boosted latch ``d`` fail nowhere, and none has a
    time to its current, an energy from the boost or a time to zero above the design's,
    nor an end current below the threshold."""
    from coildrive.design.latch_montecarlo import latch_monte_carlo

    mc = latch_monte_carlo(d, n, seed=3)
    assert set(mc["failures"].values()) == {0}, mc["failures"]
    for p in d.latch.pulses:
        f = mc["pulses"][p.name]
        assert f["time_to_current_s"]["max"] <= p.worst_time_s * (1 + 1e-9)
        assert f["supply_j"]["max"] <= p.supply_j * (1 + 1e-9)
        assert f["decay_time_s"]["max"] <= p.decay_time_s * (1 + 1e-9)
        assert f["end_current_a"]["min"] >= p.boost.threshold_a * (1 - 1e-9)


def test_monte_carlo_never_outside_the_corner_envelope(tmp_path, valve):
    """The samples (the boost's charge and capacitance drawn within their tolerances too)
    lie inside the corners' box, so the corners bound them: the time to each current, the
    energy from the boost and the time to zero never above the design's, the end current
    never below the threshold; a boost too small is counted."""
    from coildrive.design.latch_montecarlo import latch_monte_carlo

    samples_inside_the_corners(valve[1], 2000)
    weak = design_latch(load_drive(_write(tmp_path, VALVE, 'boost_capacitance = "220 uF"', 'boost_capacitance = "5 uF"')))
    fails = latch_monte_carlo(weak, 100)["failures"]
    assert fails["set_not_reached"] == fails["set_timed_out"] == 100
    res = CliRunner().invoke(app, ["design", str(VALVE), "--samples", "300"])
    assert res.exit_code == 0 and "Monte Carlo: 300 samples" in res.stdout and "set timed out: 0" in res.stdout, res.output

