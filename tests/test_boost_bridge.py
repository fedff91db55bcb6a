"""The boosted peak on a full bridge against the outside world, and end to end.

The circuit (docs/design-method.md, "Boosted peak", the full bridge): the boost capacitor
``C_b`` (its ESR in series) behind the boost switch ``Q_b`` and the main supply behind its
diode ``D_m`` feed leg A's rail, above Q1 only; Q3's drain sits on the main bus itself
(a supply that takes current back, through an ammeter here), so the release decays fast
through Q2's and Q3's body diodes into the main bus, never into ``C_b``. References:

* ngspice (batch mode, ``ngspice -b``): that circuit as an element-level netlist -- the
  capacitor with its initial charge (``IC=``, ``tran ... uic``), the boost switch and the
  four bridge switches as ngspice's voltage-controlled switches (``S`` elements, ``SW``
  model: ngspice manual, "Switches") each with its body diode, ``D_m`` and the body diodes
  as the constant-drop one-way device of the other references (:func:`ngspice_run.knee`;
  ``D_m`` with no drop, as the design takes the main supply at leg A's rail). Checked
  within 1 % (times plus one step):

  - `coildrive simulate`'s switch columns (``boost_on`` too) played into the gates: the
    current and the boost capacitor at the threshold, the coil voltage in the peak, the
    current at the final turn-off, the hold's slow decay, the release to the drop-out
    current and to zero, the energy returned into the main bus (``int V_main i dt``), and
    the boost capacitor untouched by the release;
  - a turn-off from the boost (an over-current trip in the peak, ``Q_b`` still on): the
    time to the threshold from the design's own loop at its slow corner, Q1's voltage (the
    boost plus a body diode: ``coildrive.design.boost``) and the energy the fast decay
    returns to the main bus;
  - the same trip with Q3's drain moved onto leg A's rail (both legs on the boosted rail):
    the return then reaches ``C_b`` through ``Q_b``'s body diode, and its rise is the
    series RLC of :func:`coildrive.model.bridge.pump_up` (three body diodes), under the
    design's bound ``topology.bridge.boost_return_bound_v``.
* hand-worked numbers: Q1 at a boosted turn-off sees the boost at full charge (48 V + 5 %
  = 50.4 V) plus one body diode (0.8 V): 51.2 V.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import BOARDS, EXAMPLES, run_cli
from ngspice_run import OPTIONS, knee, run
from test_boost_high_side import driver_runs_to_threshold, emulated_check_passes
from test_reference_ngspice_bridge import EDGE, STAGGER, column_gate

EXAMPLE = EXAMPLES / "fuel-valve-boost-12v.toml"
R_OFF = 1e9        # ohm, the switches' ROFF


def _variant(tmp_path):
    """The boosted fuel valve on the bridge board (its body diodes, the example's own
    freewheel left out), with 100 V switches: a boosted turn-off's 51.2 V is above the
    board's 60 V parts' derated 48 V."""
    text = EXAMPLE.read_text().replace('board = "lab-m32-zener"', f'board = "{BOARDS / "bridge-m32-fast.toml"}"')
    path = tmp_path / "bridge-boost.toml"
    path.write_text(text.split("[freewheel]")[0] + '[switch]\nmax_voltage = "100 V"\n')
    return path


def _netlist(name, e, gates, tstop, step, measures, *, miswired=False):
    """The bridge with the boost on leg A's rail (``raila``); Q3's drain on the main bus
    (``bus``, fed through the ammeter ``VFEED``) or, ``miswired``, on ``raila`` too."""
    b_drain = "raila" if miswired else "bus"
    lines = [f"* {name}", f"CB boost 0 {e['c_b']!r} IC={e['v_b']!r}",
             f"RESR boost bq {0.5 * e['r_b']!r}",
             "SB bq raila gb 0 SWB", knee("BDB", "raila", "bq", e["v_d"]), f"VGB gb 0 {gates['boost']}",
             f"VMAIN main 0 DC {e['v_main']!r}", "VFEED main bus DC 0", knee("BDM", "bus", "raila", 0.0),
             "VM a n1 DC 0", f"RSENSE n1 n2 {e['r_sense']!r}", f"RCOIL n2 n3 {e['r_coil']!r}",
             f"LCOIL n3 b {e['ell']!r} IC=0"]
    for k, (name_, d, s) in enumerate((("high_a", "raila", "a"), ("low_a", "a", "0"),
                                       ("high_b", b_drain, "b"), ("low_b", "b", "0")), start=1):
        lines += [f"S{k} {d} {s} g{k} 0 SWQ", knee(f"BD{k}", s, d, e["v_d"]), f"VG{k} g{k} 0 {gates[name_]}"]
    lines += [f".model SWB SW(VT=0.5 VH=0 RON={0.5 * e['r_b']!r} ROFF={R_OFF!r})",
              f".model SWQ SW(VT=0.5 VH=0 RON={e['r_sw']!r} ROFF={R_OFF!r})", OPTIONS,
              ".control", f"tran {step!r} {tstop!r} 0 {step!r} uic",
              "let vcoil = v(n2) - v(b)", "let vq1 = v(raila) - v(a)", "let pret = -v(bus) * i(VFEED)",
              *measures, "quit 0", ".endc", ".end"]
    return "\n".join(lines) + "\n"


def _elements(drive, lp, v_main, v_b, c_b):
    s = drive.supply
    return dict(v_main=v_main, v_b=v_b, c_b=c_b, r_b=s.boost_resistance, r_sw=drive.switch.on_resistance,
                r_sense=drive.board.sense.resistance, r_coil=float(lp.r_coil), ell=float(lp.inductance),
                v_d=drive.freewheel.diode_drop)


def test_simulated_actuation_against_ngspice(tmp_path):
    from coildrive.config import load_drive
    from coildrive.model.circuit import loop
    from coildrive.model.rl import decay_integrals, decay_time

    path = _variant(tmp_path)
    drive = load_drive(path)
    s = drive.supply
    supply, temp = 12.0, 40.0
    csv = tmp_path / "act.csv"
    r = run_cli("simulate", str(path), "--supply", f"{supply:g}", "--coil-temp", f"{temp:g}",
                "--hold-time", "0.5 ms", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    t, on = w["time_s"], w["switch_on"]
    names = ("boost", "high_a", "low_a", "high_b", "low_b")
    change = np.nonzero(np.any([np.diff(w[f"{n}_on"]) for n in names], axis=0))[0]
    # an edge sits on the last sample of the part it ends, but on the first of an on-time
    # (the peak's end, the boost switch opening into the hold's on-time, on its last sample)
    edges = [float(t[k] if w["boost_on"][k] != w["boost_on"][k + 1] or on[k + 1] != 1 else t[k + 1])
             for k in change]
    gates = {name: column_gate(w[f"{name}_on"], change, edges, name == "low_b") for name in names}
    t_peak, t_off = edges[0], edges[-1]
    assert w["boost_on"][change[0]] == 1 and w["boost_on"][change[0] + 1] == 0
    lp = loop(drive, supply, temp)
    rel = loop(drive, supply, temp, path="release")
    e = _elements(drive, lp, supply, s.boost, s.boost_capacitance)
    i_off = float(np.interp(t_off, t, w["current_a"]))
    r_off, v_off, ell = float(rel.r_off), float(rel.v_off), float(rel.inductance)
    t_drop = float(decay_time(drive.release.current, i_off, r_off, v_off, ell))
    t_zero = float(decay_time(0.0, i_off, r_off, v_off, ell))
    q, _ = decay_integrals(t_zero, i_off, r_off, v_off, ell)
    t_slow = 0.5 * (edges[-3] + edges[-2])     # the middle of the hold's last off-time
    t_mid = 0.5 * t_peak                        # the middle of the peak
    step = 1e-7
    res = run(tmp_path, "boost-bridge-act", _netlist("boosted peak on a full bridge, one actuation", e, gates,
                                                     t_off + 1.3 * t_zero, step, [
        f"meas tran ipeak FIND i(VM) AT={t_peak!r}", f"meas tran vbpeak FIND v(boost) AT={t_peak!r}",
        f"meas tran vcmid FIND vcoil AT={t_mid!r}", f"meas tran ioff FIND i(VM) AT={t_off!r}",
        f"meas tran vslow FIND vcoil AT={t_slow!r}",
        f"meas tran tdrop WHEN i(VM)={drive.release.current!r} FALL=LAST",
        "meas tran tzero WHEN i(VM)=1e-6 FALL=LAST",
        f"meas tran eret INTEG pret from={t_off!r} to={t_off + 1.2 * t_zero!r}",
        f"meas tran vbend FIND v(boost) AT={t_off + 1.2 * t_zero!r}"]))

    def model(col, at):
        return float(np.interp(at, t, w[col]))
    # ngspice: the current and the boost capacitor at the end of the peak, the coil voltage
    # in the peak (the capacitor less R_b + 2 R_sw + R_sense), within 1 %
    assert res["ipeak"] == pytest.approx(model("current_a", t_peak), rel=0.01)
    assert res["vbpeak"] == pytest.approx(model("boost_v", t_peak), rel=0.01)
    assert res["vcmid"] == pytest.approx(model("coil_voltage_v", t_mid), rel=0.01)
    # ngspice: the hold from the main supply -- the current at the final turn-off and the
    # slow decay's coil voltage -- within 1 %
    assert res["ioff"] == pytest.approx(i_off, rel=0.01)
    assert res["vslow"] == pytest.approx(model("coil_voltage_v", t_slow), rel=0.01)
    # ngspice: the release into the main bus, to the drop-out and to zero, within 1 % + a step
    assert abs(res["tdrop"] - t_off - t_drop) <= 0.01 * t_drop + 2 * step, (res["tdrop"] - t_off, t_drop)
    assert abs(res["tzero"] - t_off - t_zero) <= 0.01 * t_zero + 2 * step, (res["tzero"] - t_off, t_zero)
    # ngspice: the energy returned into the main bus, V_main int i dt, within 1 %
    assert res["eret"] == pytest.approx(supply * float(q), rel=0.01), (res["eret"], supply * float(q))
    # ngspice: the release never reaches the boost capacitor (Q_b's body diode stays off)
    assert res["vbend"] == pytest.approx(res["vbpeak"], abs=1e-3)


@pytest.mark.parametrize("miswired", [False, True], ids=["return-to-main", "return-to-boost"])
def test_turn_off_from_the_boost_against_ngspice(tmp_path, miswired):
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.design.boost import _turn_off_voltage
    from coildrive.model import boost as boost_model
    from coildrive.model.bridge import pump_up
    from coildrive.model.circuit import loop
    from coildrive.model.rl import decay_integrals, decay_time

    drive = load_drive(_variant(tmp_path))
    s = drive.supply
    v_b, c_b = s.boost * (1 - s.boost_tolerance), s.boost_capacitance * (1 - s.boost_capacitance_tolerance)
    lp = loop(drive, s.min, 120.0, 1.05, 1.10)
    rel = loop(drive, s.min, 120.0, 1.05, 1.10, path="release")
    b = boost_model.boost(v_b, c_b, float(lp.r_on) + s.boost_resistance, float(lp.inductance))
    i_th = drive.pull_in.current_margin * drive.pull_in.current
    t_th = float(boost_model.threshold_time(i_th, b))
    t_off = 1.05 * t_th                   # a trip in the peak: the bridge opens, Q_b stays on
    i_off, v_c = (float(x) for x in boost_model.state(t_off, b))
    e = _elements(drive, lp, s.min, v_b, c_b)
    r_off, v_off, ell = float(rel.r_off), float(rel.v_off), float(rel.inductance)
    t_zero = float(decay_time(0.0, i_off, r_off, v_off, ell))
    step = t_th / 4000
    trip = f"PULSE(1 0 {t_off - EDGE / 2!r} {EDGE} {EDGE} 1 2)"
    late = f"PULSE(1 0 {t_off + STAGGER - EDGE / 2!r} {EDGE} {EDGE} 1 2)"
    # Q_b stays on through the trip (Q1 then holds off the boost); with both legs on the
    # boosted rail it opens with Q1, so that the return must go up its body diode
    gates = {"boost": trip if miswired else "DC 1", "high_a": trip, "low_a": "DC 0", "high_b": "DC 0",
             "low_b": late}
    res = run(tmp_path, "boost-bridge-trip", _netlist("a trip from the boost", e, gates, t_off + 1.5 * t_zero, step, [
        f"meas tran tth WHEN i(VM)={i_th!r} RISE=1", f"meas tran ioff FIND i(VM) AT={t_off - 2 * EDGE!r}",
        f"meas tran vq1 FIND vq1 AT={t_off + 0.5 * t_zero!r}",
        f"meas tran eret INTEG pret from={t_off!r} to={t_off + 1.4 * t_zero!r}",
        f"meas tran vbmax MAX v(boost) from={t_off!r} to={t_off + 1.4 * t_zero!r}"], miswired=miswired))
    # ngspice transient: the time to the threshold and the current at the trip within 1 %
    assert abs(res["tth"] - t_th) <= 0.01 * t_th + step, (res["tth"], t_th)
    assert res["ioff"] == pytest.approx(i_off, rel=0.01)
    if not miswired:
        # ngspice: Q1 holds off the boost (Q_b still on) plus Q2's body diode -- the design's
        # turn-off voltage from the boost -- within 1 %
        model_sw = float(_turn_off_voltage(drive, rel, v_c, i_off))
        assert model_sw == pytest.approx(v_c + drive.freewheel.diode_drop, rel=1e-9)
        assert res["vq1"] == pytest.approx(model_sw, rel=0.01), (res["vq1"], model_sw)
        # ngspice: the fast decay returns V_main int i dt into the main bus, within 1 %
        q, _ = decay_integrals(t_zero, i_off, r_off, v_off, ell)
        assert res["eret"] == pytest.approx(s.min * float(q), rel=0.01), (res["eret"], s.min * float(q))
        assert res["vbmax"] == pytest.approx(v_c, abs=1e-3)   # C_b never rises after the trip
        return
    # ngspice: both legs on the boosted rail -- the return goes up Q_b's body diode into
    # C_b: its rise is the series RLC onto C_b through three body diodes and C_b's ESR
    # (half of R_b here), within 1 %
    v2 = float(pump_up(i_off, v_c, c_b, r_off + 0.5 * s.boost_resistance, ell,
                       1.5 * drive.freewheel.diode_drop).v2)
    assert res["vbmax"] - v_c == pytest.approx(v2 - v_c, rel=0.01), (res["vbmax"] - v_c, v2 - v_c)
    assert res["eret"] == pytest.approx(0.0, abs=1e-9)     # nothing reaches the main bus
    # the design's bound (the boost at full charge, C_b less its tolerance, every turn-off)
    # lies above it
    bound = design(drive).topology.bridge.boost_return_bound_v
    assert bound >= res["vbmax"]


def test_design_header_and_emulated_check(tmp_path):
    path = _variant(tmp_path)
    out = run_cli("design", str(path), "--json", "--header", str(tmp_path / "d.h"))
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    # hand-worked: Q1 at a boosted turn-off sees 48 V + 5 % plus one body diode
    assert d["boost"]["switch_voltage_v"] == pytest.approx(50.4 + 0.8)
    assert d["release"]["peak_switch_voltage_v"] == pytest.approx(50.4 + 0.8)
    br = d["topology"]["bridge"]
    assert d["topology"]["name"] == "full_bridge" and br["release_decay"] == "fast"
    assert br["boost_return_bound_v"] > 50.4 and br["returned_worst_j"] > 0
    h = (tmp_path / "d.h").read_text()
    assert "COIL_SWITCH_TOPOLOGY               COIL_TOPOLOGY_FULL_BRIDGE" in h
    assert "#define COIL_BOOST_THRESHOLD_CODE          2682U" in h
    assert "the coil across the boost (with the boost switch)" in h
    assert any("wire leg B's high side (Q3) to the main bus" in c for c in d["cautions"])
    emulated_check_passes(tmp_path, path)


@pytest.mark.compiler
def test_firmware_driver_builds_and_runs(tmp_path):
    # the bridge's phase masks on the four switches, the boost switch on its own pin
    text = driver_runs_to_threshold(tmp_path, _variant(tmp_path))
    assert "coil_port_boost" in text and "coil_port_bridge" in text
