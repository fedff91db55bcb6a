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


def test_high_side_boosted_peak_against_ngspice(tmp_path):
    from coildrive.config import load_drive
    from coildrive.design.boost import _turn_off_voltage
    from coildrive.model import boost as boost_model
    from coildrive.model.circuit import loop
    from coildrive.model.high_side import TOPOLOGY

    drive = load_drive(_variant(tmp_path))
    s, sw, sense = drive.supply, drive.switch, drive.board.sense
    v_b, c_b = s.boost * (1 - s.boost_tolerance), s.boost_capacitance * (1 - s.boost_capacitance_tolerance)
    lp = loop(drive, s.min, 120.0, 1.05, 1.10)
    r_coil, ell = float(lp.r_coil), float(lp.inductance)
    assert float(lp.r_on) == pytest.approx(r_coil + sw.on_resistance + sense.resistance)
    b = boost_model.boost(v_b, c_b, float(lp.r_on) + s.boost_resistance, ell)
    i_th = drive.pull_in.current_margin * drive.pull_in.current
    t_th = float(boost_model.threshold_time(i_th, b))
    t_off = t_th * 1.05                  # the high-side switch opens a little after the threshold
    i_off, v_off = (float(x) for x in boost_model.state(t_off, b))
    step = t_th / 5000
    text = "\n".join([
        "* boosted peak, high side: boost capacitor and switch, main supply's diode, high-side "
        "switch, coil to ground, freewheel from ground",
        f"CB boost 0 {c_b!r} IC={v_b!r}",
        f"SB boost rail gb 0 SWB", knee("BDB", "rail", "boost", 0.9), "VGB gb 0 DC 1",
        f"VMAIN main 0 DC {s.min!r}", knee("BDM", "main", "rail", 0.9),
        "S1 rail node g1 0 SW1", knee("BD1", "node", "rail", 0.9),
        f"VG1 g1 0 PULSE(1 0 {t_off - 0.5e-9!r} 1e-9 1e-9 1 2)",
        "VM node n1 DC 0", f"RCOIL n1 n2 {r_coil!r}", f"LCOIL n2 n3 {ell!r} IC=0",
        f"RSENSE n3 0 {sense.resistance!r}",
        knee("BFW", "0", "node", V_FW),
        f".model SWB SW(VT=0.5 VH=0 RON={s.boost_resistance!r} ROFF={R_ROFF!r})",
        f".model SW1 SW(VT=0.5 VH=0 RON={sw.on_resistance!r} ROFF={R_ROFF!r})",
        OPTIONS, ".control", f"tran {step!r} {t_off + 0.3 * t_th!r} 0 {step!r} uic",
        f"meas tran tth WHEN i(VM)={i_th!r} RISE=1",
        f"meas tran ioff FIND i(VM) AT={t_off - 2e-9!r}",
        f"meas tran vcth FIND v(boost) AT={t_th!r}",
        "let vd = v(rail) - v(node)",
        f"meas tran vsw MAX vd from={t_off + 5e-9!r} to={t_off + 20 * step!r}",
        f"meas tran vnode MIN v(node) from={t_off + 5e-9!r} to={t_off + 20 * step!r}",
        "quit 0", ".endc", ".end"]) + "\n"
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
    assert "COIL_TOPOLOGY_HIGH_SIDE" in h and "#define COIL_BOOST_THRESHOLD_CODE          2905U" in h
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
