"""The boosted peak with a high-side switch against the outside world, and end to end.

The circuit (docs/design-method.md, "The boosted peak"): the boost capacitor ``C_b``
behind the boost switch and the main supply behind its diode feed the rail above the
high-side switch; the switch feeds the coil's top (the switch node), the coil's other end
goes to ground through the sense resistor in the coil return; the freewheel path (a diode
and a 15 V Zener) runs from ground up to the node. References:

* ngspice (batch mode, ``ngspice -b``): that circuit as a netlist -- the capacitor with
  its initial charge (``IC=``, ``tran ... uic``), the boost switch and the high-side
  switch as ngspice's voltage-controlled switches (``S`` elements, ``SW`` model: ngspice
  manual, "Switches") with their body diodes, the main supply's diode and the freewheel
  path as the constant-drop one-way device of the other references
  (:func:`ngspice_run.knee`). The element values are the design's own loop at the slow
  corner (:func:`coildrive.model.circuit.loop`); checked within 1 %: the time to the
  threshold, the current at the turn-off, the capacitor's droop, the switch's voltage
  after the turn-off (``coildrive.design.boost``) and the node's lowest voltage
  (``coildrive.model.high_side``);
* hand-worked numbers: the switch at the end of the peak sees the boost at full charge
  (48 V + 5 % = 50.4 V) plus the freewheel's 0.9 V + 15 V; the node swings to -15.9 V;
* ngspice, the same circuit with a clamp from the rail to the node instead of the
  freewheel path, the peak cut short with the boost switch opening too: the switch's
  voltage (the clamp's), the node (the main supply less the clamp), the time to the
  drop-out current and the clamp's energy within 1 %; hand-worked: 9 V - 75 V = -66 V;
* gcc (``-Wall -Wextra -Werror -pedantic -Wconversion``) builds the reference driver that
  ``firmware-driver`` writes for it (the driver is topology-agnostic but for a bridge).
"""

from __future__ import annotations

import json
import subprocess

import numpy as np
import pytest

from conftest import EXAMPLES, require_tool, run_cli
from ngspice_run import OPTIONS, knee, run
from test_boost import assert_peak

EXAMPLE = EXAMPLES / "fuel-valve-boost-12v.toml"
BOARD = EXAMPLES.parent / "boards" / "sourcing-hs-zener.toml"
R_ROFF = 1e9        # ohm, the switches' ROFF
V_FW = 0.9 + 15.0   # V, the board's freewheel: diode + Zener


def _variant(tmp_path):
    """The boosted fuel valve on the high-side sourcing board (its diode + Zener freewheel,
    the example's own diode left out), with a 100 V switch: the boost at full charge plus
    the Zener is above the board's 60 V part's derated 48 V."""
    text = EXAMPLE.read_text().replace('board = "lab-m32-zener"', f'board = "{BOARD}"')
    text = text.split("[freewheel]")[0] + '[switch]\nmax_voltage = "100 V"\n'
    path = tmp_path / "hs-boost.toml"
    path.write_text(text)
    return path


def hs_netlist(drive, lp, t_off: float, step: float, t_end: float, freewheel: list[str],
               measures: list[str], boost_opens: bool = False, v_dm: float = 0.9) -> str:
    """The boosted peak on the high side as an ngspice netlist: the boost capacitor at its
    lowest (``C_b`` with its initial charge), the boost switch and the main supply's diode
    (``v_dm`` V) onto the rail, the high-side switch from the rail to the node (off at
    ``t_off`` s; the boost switch with it when ``boost_opens``, else on throughout), the
    coil (``lp``'s copper and inductance) to ground through the sense resistor, the
    ``freewheel`` elements, then ``measures`` after a ``tran`` of ``t_end`` s."""
    s, sw, sense = drive.supply, drive.switch, drive.board.sense
    v_b, c_b = s.boost * (1 - s.boost_tolerance), s.boost_capacitance * (1 - s.boost_capacitance_tolerance)
    gate = f"PULSE(1 0 {t_off - 0.5e-9!r} 1e-9 1e-9 1 2)"
    return "\n".join([
        "* boosted peak, high side: boost capacitor and switch, main supply's diode, high-side "
        "switch, coil to ground, freewheel",
        f"CB boost 0 {c_b!r} IC={v_b!r}",
        "SB boost rail gb 0 SWB", knee("BDB", "rail", "boost", 0.9),
        f"VGB gb 0 {gate if boost_opens else 'DC 1'}",
        f"VMAIN main 0 DC {s.min!r}", knee("BDM", "main", "rail", v_dm),
        "S1 rail node g1 0 SW1", knee("BD1", "node", "rail", 0.9), f"VG1 g1 0 {gate}",
        "VM node n1 DC 0", f"RCOIL n1 n2 {float(lp.r_coil)!r}", f"LCOIL n2 n3 {float(lp.inductance)!r} IC=0",
        f"RSENSE n3 0 {sense.resistance!r}", *freewheel,
        f".model SWB SW(VT=0.5 VH=0 RON={s.boost_resistance!r} ROFF={R_ROFF!r})",
        f".model SW1 SW(VT=0.5 VH=0 RON={sw.on_resistance!r} ROFF={R_ROFF!r})",
        OPTIONS, ".control", f"tran {step!r} {t_end!r} 0 {step!r} uic", *measures,
        "quit 0", ".endc", ".end"]) + "\n"


def _slow_corner(drive):
    """The slow corner's loop (the lowest supply, a 120 degC coil, R +5 %, L +10 %) and
    the boost at its lowest feeding it."""
    from coildrive.model import boost as boost_model
    from coildrive.model.circuit import loop

    s = drive.supply
    lp = loop(drive, s.min, 120.0, 1.05, 1.10)
    b = boost_model.boost(s.boost * (1 - s.boost_tolerance), s.boost_capacitance * (1 - s.boost_capacitance_tolerance),
                          float(lp.r_on) + s.boost_resistance, float(lp.inductance))
    return lp, b


def test_high_side_boosted_peak_against_ngspice(tmp_path):
    from coildrive.config import load_drive
    from coildrive.design.boost import _turn_off_voltage
    from coildrive.model import boost as boost_model
    from coildrive.model.high_side import TOPOLOGY

    drive = load_drive(_variant(tmp_path))
    sw, sense = drive.switch, drive.board.sense
    lp, b = _slow_corner(drive)
    assert float(lp.r_on) == pytest.approx(float(lp.r_coil) + sw.on_resistance + sense.resistance)
    i_th = drive.pull_in.current_margin * drive.pull_in.current
    t_th = float(boost_model.threshold_time(i_th, b))
    t_off = t_th * 1.05                  # the high-side switch opens a little after the threshold
    i_off, v_off = (float(x) for x in boost_model.state(t_off, b))
    step = t_th / 5000
    text = hs_netlist(drive, lp, t_off, step, t_off + 0.3 * t_th, [knee("BFW", "0", "node", V_FW)], [
        f"meas tran tth WHEN i(VM)={i_th!r} RISE=1",
        f"meas tran ioff FIND i(VM) AT={t_off - 2e-9!r}",
        f"meas tran vcth FIND v(boost) AT={t_th!r}",
        "let vd = v(rail) - v(node)",
        f"meas tran vsw MAX vd from={t_off + 5e-9!r} to={t_off + 20 * step!r}",
        f"meas tran vnode MIN v(node) from={t_off + 5e-9!r} to={t_off + 20 * step!r}"])
    res = run(tmp_path, "boost-hs", text)
    # ngspice: the time to the threshold, the current at the turn-off and the droop, 1 %
    assert_peak(res, b, t_th, step, i_off)
    # ngspice: the switch after the turn-off sees the boost at its end + the freewheel path
    # (the design's turn-off from the boost rail), within 1 %
    model_sw = float(_turn_off_voltage(drive, lp, v_off, i_off))
    assert model_sw == pytest.approx(v_off + V_FW, rel=1e-12)
    assert res["vsw"] == pytest.approx(model_sw, rel=0.01), (res["vsw"], model_sw)
    # ngspice: the node's lowest voltage, the freewheel's below ground, within 1 %
    node = float(TOPOLOGY.node_voltage(v_off, model_sw, 0.0))
    assert res["vnode"] == pytest.approx(node, rel=0.01), (res["vnode"], node)


def _clamp_variant(tmp_path, volts: float = 75.0):
    """:func:`_variant` with a clamp of ``volts`` V across the high-side switch (rail to
    node) instead of the board's Zener path."""
    path = tmp_path / f"hs-boost-clamp{volts:g}.toml"
    path.write_text(_variant(tmp_path).read_text()
                    + f'\n[freewheel]\ntype = "clamp"\nclamp_voltage = "{volts:g} V"\n')
    return path


def test_high_side_clamp_turn_off_from_the_boost_against_ngspice(tmp_path):
    """A clamp across the high-side switch: a peak cut short while the boost feeds the rail
    (the boost switch opening with the high-side one) decays through the clamp, which now
    draws from the main supply through its diode ``D_m`` (no drop, as the design takes the
    supply at the rail). ngspice within 1 %: the switch's voltage (the clamp's), the node's
    lowest (the main supply less the clamp), the time to the drop-out current, the clamp's
    energy (the coil's and the main supply's)."""
    from coildrive.config import load_drive
    from coildrive.design.boost import _turn_off_voltage
    from coildrive.design.evaluate import release_figures
    from coildrive.model import boost as boost_model
    from coildrive.model.high_side import TOPOLOGY

    drive = load_drive(_clamp_variant(tmp_path))
    v_cl = drive.freewheel.clamp_voltage
    lp, b = _slow_corner(drive)
    t_off = 0.8 * float(boost_model.threshold_time(drive.pull_in.current, b))   # cut short
    i_off, v_off = (float(x) for x in boost_model.state(t_off, b))
    t_drop, _, energy, _ = (float(x) for x in release_figures(drive, lp, lp, i_off))
    model_sw = float(_turn_off_voltage(drive, lp, v_off, i_off))
    node = float(TOPOLOGY.node_voltage(lp.supply, model_sw, 0.0))
    # hand-worked: the switch holds off the clamp's 75 V; the node 9 V - 75 V below ground
    assert (model_sw, node) == (pytest.approx(v_cl), pytest.approx(drive.supply.min - v_cl))
    step = t_off / 2000
    clamp = ["VCL rail cl DC 0", knee("BCL", "cl", "node", v_cl), "BPW pw 0 V = (v(rail) - v(node)) * i(VCL)"]
    window = f"from={t_off + 5e-9!r} to={t_off + 20 * step!r}"
    text = hs_netlist(drive, lp, t_off, step, t_off + 2 * t_drop, clamp, [
        "let vd = v(rail) - v(node)", f"meas tran vsw MAX vd {window}", f"meas tran vnode MIN v(node) {window}",
        f"meas tran tdrop WHEN i(VM)={drive.release.current!r} FALL=LAST",
        f"meas tran eclamp INTEG v(pw) from={t_off!r} to={t_off + 2 * t_drop!r}"], boost_opens=True, v_dm=0.0)
    res = run(tmp_path, "boost-hs-clamp", text)
    # ngspice: the switch held at the clamp voltage, the node at the main supply less it, 1 %
    assert res["vsw"] == pytest.approx(model_sw, rel=0.01), (res["vsw"], model_sw)
    assert res["vnode"] == pytest.approx(node, rel=0.01), (res["vnode"], node)
    # ngspice: the time from the turn-off to the drop-out current within 1 % plus two steps
    assert abs(res["tdrop"] - t_off - t_drop) <= 0.01 * t_drop + 2 * step, (res["tdrop"] - t_off, t_drop)
    # ngspice: the clamp's energy within 1 %
    assert res["eclamp"] == pytest.approx(energy, rel=0.01), (res["eclamp"], energy)


def test_high_side_clamp_design_and_simulate(tmp_path):
    """End to end: every turn-off (from the boost too) leaves the switch at the clamp's 75 V
    and the node at the supply less it (hand-worked: 9 V - 75 V = -66 V at the lowest
    supply); the ``boost_clamp`` check passes at 75 V and fails at 48 V (under the 50.4 V
    boost at full charge); simulate's node sits at 12 V - 75 V while the clamp conducts."""
    out = run_cli("design", str(_clamp_variant(tmp_path)), "--json")
    d = json.loads(out.stdout)
    assert d["boost"]["switch_voltage_v"] == pytest.approx(75.0)
    assert all(o["switch_voltage_v"] == pytest.approx(75.0) for o in d["release"]["turn_offs"])
    assert d["topology"]["lowest_node_voltage_v"] == pytest.approx(9.0 - 75.0)
    assert all(c["switch_node_voltage_v"] == pytest.approx(c["supply_v"] - 75.0) for c in d["corners"])
    assert {c["name"]: c["ok"] for c in d["checks"]}["boost_clamp"]
    low = json.loads(run_cli("design", str(_clamp_variant(tmp_path, 48.0)), "--json").stdout)
    assert not {c["name"]: c["ok"] for c in low["checks"]}["boost_clamp"]
    sim = run_cli("simulate", str(_clamp_variant(tmp_path)), "--supply", "12", "--coil-temp", "40",
                  "--hold-time", "1 ms", "--csv", str(tmp_path / "s.csv"))
    assert sim.returncode == 0, sim.stderr
    rows = np.genfromtxt(tmp_path / "s.csv", delimiter=",", names=True)
    clamping = (rows["switch_on"] == 0) & (rows["current_a"] > 1e-3)
    assert clamping.any()
    assert np.allclose(rows["node_voltage_v"][clamping], 12.0 - 75.0, atol=1e-6)


def test_design_header_and_simulate(tmp_path):
    path = _variant(tmp_path)
    out = run_cli("design", str(path), "--json", "--header", str(tmp_path / "d.h"))
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    b = d["boost"]
    # hand-worked: the boost at full charge (48 V + 5 %) + the diode and Zener
    assert b["switch_voltage_v"] == pytest.approx(50.4 + V_FW)
    assert d["release"]["peak_switch_voltage_v"] >= b["switch_voltage_v"]
    # the node: the freewheel's voltage below ground whichever rail fed it
    assert d["topology"]["name"] == "high_side"
    assert d["topology"]["lowest_node_voltage_v"] == pytest.approx(-V_FW)
    assert all(c["switch_node_voltage_v"] == pytest.approx(-V_FW) for c in d["corners"])
    names = {c["name"]: c["ok"] for c in d["checks"]}
    assert names["boost_switch_voltage"] and names["boost_threshold"] and names["boost_droop"]
    assert any("boost rail in a boosted peak" in c for c in d["cautions"])
    h = (tmp_path / "d.h").read_text()
    assert "COIL_TOPOLOGY_HIGH_SIDE" in h and "#define COIL_BOOST_THRESHOLD_CODE          2682U" in h
    sim = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "40", "--hold-time", "2 ms",
                  "--csv", str(tmp_path / "s.csv"))
    assert sim.returncode == 0, sim.stderr
    assert_node_on_the_boost_rail(tmp_path / "s.csv", sim.stderr)


def assert_node_on_the_boost_rail(csv, stderr: str) -> None:
    """``simulate``'s columns (``csv``, its status line ``stderr``) of the example on
    sourcing-hs-zener at 12 V: 0.1 ohm boost path, 60 mohm switch, 0.1 ohm sense in the coil
    return, diode + Zener 15.9 V."""
    rows = np.genfromtxt(csv, delimiter=",", names=True)
    t_peak = float(stderr.split("peak ")[1].split(" ms")[0]) * 1e-3
    peak = rows["time_s"] <= t_peak * 0.999
    i = rows["current_a"]
    # Kirchhoff: in the peak the node is the boost capacitor less the boost path and the switch
    assert np.allclose(rows["node_voltage_v"][peak], rows["boost_v"][peak] - i[peak] * (0.1 + 0.06), atol=1e-4)
    assert np.allclose(rows["coil_voltage_v"][peak], rows["node_voltage_v"][peak] - i[peak] * 0.1, atol=1e-4)
    # in the hold's on-times the main supply feeds it; off, the node sits at -15.9 V
    hold_on = (rows["time_s"] >= t_peak * 1.001) & (rows["switch_on"] == 1)
    assert np.allclose(rows["node_voltage_v"][hold_on], 12.0 - i[hold_on] * 0.06, atol=1e-4)
    assert rows["node_voltage_v"].min() == pytest.approx(-V_FW, abs=1e-4)


def emulated_check_passes(tmp_path, path):
    """Plumbing (the emulator shares the design's physics): the virtual device's capture of
    the boosted drive at ``path`` passes check, a coil 40 % over its resistance fails it."""
    from test_emulator_device import capture_of, run as run_device

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions, VirtualDevice
    from coildrive.config import load_drive
    from coildrive.design import design

    d = design(load_drive(path))
    for scale, ok in ((1.0, True), (1.4, False)):
        dev = VirtualDevice(d.drive, DeviceOptions(noise_codes=1.0, seed=3, resistance_scale=scale), design=d)
        msgs, _ = run_device(dev, 0.05 + dev.period, step=0.05)
        assert check_capture(capture_of(msgs, tmp_path / f"{scale}.cdcap"), d).ok is ok, scale


def driver_runs_to_threshold(tmp_path, path) -> str:
    """gcc, strict: the reference driver firmware-driver writes for the boosted drive at
    ``path``; then in the loop, in process, one actuation at the nominal point ends the
    peak at the threshold, no fault. Returns the driver's header text."""
    from driver_harness import STRICT

    from coildrive.bench import FrameDecoder
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.messages import Event, EventKind
    from coildrive.codegen.host_build import build_firmware
    from coildrive.config import load_drive
    from coildrive.design import design

    gcc = require_tool("gcc")
    fw = tmp_path / "fw"
    r = run_cli("firmware-driver", str(path), "--out", str(fw))
    assert r.returncode == 0, r.stderr
    c = subprocess.run([gcc, *STRICT, "-c", str(fw / "coil_driver.c"), "-o", str(tmp_path / "d.o")],
                       capture_output=True, text=True)
    assert c.returncode == 0, c.stderr
    d = design(load_drive(path))
    dev = FirmwareDevice(d, build_firmware(fw, d, cache=tmp_path / "cache"),
                         DeviceOptions(first_actuation=0.002, noise_codes=1, seed=3, hold_time=0.005))
    dec, events, t = FrameDecoder(), [], 0.0
    while t < 0.1 and EventKind.OFF not in [e.kind for e in events]:
        t += 0.005
        events += [m for m in dec.feed(dev.read(t)) if isinstance(m, Event)]
    kinds = [e.kind for e in events]
    assert EventKind.PEAK_END in kinds and EventKind.OFF in kinds and EventKind.FAULT not in kinds, kinds
    on, end = (next(e.index for e in events if e.kind == k) for k in (EventKind.ON, EventKind.PEAK_END))
    assert (end - on) / d.drive.board.adc.sample_rate < d.boost.timeout_s
    return (fw / "coil_driver.h").read_text()


def test_emulated_drive_passes_check(tmp_path):
    emulated_check_passes(tmp_path, _variant(tmp_path))


@pytest.mark.compiler
def test_firmware_driver_builds_and_runs(tmp_path):
    # the driver switches the boost and Q1 whatever side Q1 is on
    assert "coil_port_boost" in driver_runs_to_threshold(tmp_path, _variant(tmp_path))
