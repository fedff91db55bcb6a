"""The high-side switch against ngspice transients of the high-side circuit.

Reference: ngspice (batch mode, ``ngspice -b``), a general-purpose circuit simulator. The
netlist is the high-side circuit at element level, written here from the element values
of an invented drive and board (:mod:`circuit_reference`), not from the model's loop:

    VBUS -- [RSENSE: supply leg] -- drain -- S1 (switch) -- node -- VM -- RCOIL -- LCOIL
                                      DBODY (body diode, node -> drain)      |
    ground -- VFW -- freewheel path (diode [+ Zener | + resistor]) -> node    |
    bus -- clamp -> node (type "clamp")        coil return -- [RSENSE: coil] -- ground

Element models, and why:

* The switch is ngspice's voltage-controlled switch: an ``S`` element with a ``SW``
  model (ngspice manual, "Circuit Elements and Models", "Elementary Devices": the
  sections "Switches" and "Switch Model (SW/CSW)"), ``RON`` the board's on-resistance,
  threshold ``VT = 0.5`` V on a 0..1 V gate pulse, no hysteresis. ``ROFF = 1e9`` ohm
  rather than the default ``1/GMIN`` (1e12): the manual advises an off-resistance just
  high enough to be negligible (at 45 V it leaks 45 nA, 1e-7 of the currents checked),
  and the wider ratio made ngspice stop with "timestep too small" at the switch edges in
  the low-side references (tests/test_reference_ngspice.py).
* The switch's body diode is ngspice's junction diode (``D`` element, default model
  with ``IS = 1e-14`` A), anode at the source (the node), cathode at the drain. A
  high-side switch never forward-biases it in this circuit (the node stays below the
  bus); it is there so that the netlist is the real switch, and the tests check that it
  carries no current.
* The freewheel diode, the Zener and the clamp are the constant-drop one-way devices of
  the low-side references (a B source with its knee at the drop and 1 mohm beyond), the
  model's device law; see that module for why not ngspice's exponential junction.
* ``RBLEED`` (1 Mohm, node to ground) fixes the node when the current is zero and the
  switch and freewheel path are both off; it takes at most 45 V / 1 Mohm = 45 uA of the
  coil current, below 1e-4 of the currents checked.

Tolerances: the issue's 1 % for the rise, the hold's steady state, the release times and
the switch voltage (times add one time step).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from circuit_reference import POINT, SLOW_COIL, Parts, parts, reference_drive
from ngspice_run import OPTIONS
from ngspice_run import decay_case
from ngspice_run import knee as _knee
from ngspice_run import run as _run
from coildrive.model.circuit import loop
from coildrive.model.pwm import duty_for_mean, pwm_steady_state
from coildrive.model.rl import decay_time, rise_current, rise_time
from coildrive.model.topology import topology_of
from coildrive.model.waveform import actuation

pytestmark = pytest.mark.ngspice

EDGE = 1e-9  # s, rise and fall time of the gate pulse
R_OFF_SWITCH = 1e9  # ohm, the switch's ROFF (see the module docstring)
R_BLEED = 1e6  # ohm, node to ground
I_ZERO = 1e-6  # A, "zero" for the ngspice current (far above the switch's leakage)

#: (freewheel, sense position) pairs: every freewheel type, both sense positions.
CASES = [("diode", "switch"), ("zener", "coil"), ("resistor", "coil"), ("clamp", "switch"),
         ("clamp", "coil")]
CASE_IDS = [f"{fw}-sense-{pos}" for fw, pos in CASES]


def _freewheel_lines(p: Parts) -> list[str]:
    """The freewheel path up from ground to the node (or the clamp from the bus to the
    node), through the ammeter ``VFW``."""
    if p.freewheel == "clamp":
        return ["VFW vbus a DC 0", _knee("BCLAMP", "a", "node", p.v_clamp)]
    if p.freewheel == "diode":
        return ["VFW 0 a DC 0", _knee("BDIODE", "a", "node", p.v_diode)]
    if p.freewheel == "zener":
        return ["VFW 0 a DC 0", _knee("BDIODE", "a", "b", p.v_diode), _knee("BZENER", "b", "node", p.v_zener)]
    if p.freewheel == "resistor":
        return ["VFW 0 a DC 0", _knee("BDIODE", "a", "b", p.v_diode), f"RFW b node {p.r_fw!r}"]
    raise ValueError(p.freewheel)


def _netlist(p: Parts, title: str, on_time: float, period: float, tstop: float, tmax: float,
             measures: list[str]) -> str:
    """The high-side circuit with the gate on for ``on_time`` of every ``period`` s."""
    assert p.high_side, "precondition: a high-side drive"
    supply_leg = (f"RSENSE vbus drain {p.r_sense!r}" if not p.sense_in_coil_path else "VLEG vbus drain DC 0")
    coil_return = (f"RSENSE ret 0 {p.r_sense!r}" if p.sense_in_coil_path else "VRET ret 0 DC 0")
    # The switch closes at the rising edge's midpoint and opens at the falling edge's: it
    # conducts for the pulse width plus one edge.
    width = on_time - EDGE
    lines = [
        f"* {title}",
        f"VBUS vbus 0 DC {p.v_bus!r}",
        supply_leg,
        "S1 drain node gate 0 SWITCH",
        f".model SWITCH SW(VT=0.5 VH=0 RON={p.r_switch!r} ROFF={R_OFF_SWITCH!r})",
        "VBODY node nb DC 0",
        "DBODY nb drain BODY",
        ".model BODY D(IS=1e-14)",
        "VM node n1 DC 0",
        f"RCOIL n1 n2 {p.r_coil!r}",
        f"LCOIL n2 ret {p.inductance!r} IC=0",
        coil_return,
        f"VGATE gate 0 PULSE(0 1 0 {EDGE} {EDGE} {width!r} {period!r})",
        *_freewheel_lines(p),
        f"RBLEED node 0 {R_BLEED!r}",
        OPTIONS,
        ".control",
        f"tran {tmax!r} {tstop!r} 0 {tmax!r} uic",
        *measures,
        "quit 0",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"




def _setup(tmp_path, freewheel, position):
    drive = reference_drive(tmp_path, freewheel, position, topology="high_side", **SLOW_COIL)
    return drive, loop(drive, **POINT), parts(drive, **POINT)


def test_reference_board_is_high_side(tmp_path):
    drive, _, p = _setup(tmp_path, "zener", "coil")
    assert drive.switch.topology == "high_side" and p.high_side
    assert topology_of(drive).name == "high_side"


@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
def test_high_side_rise_matches_ngspice(tmp_path, freewheel, position):
    drive, lp, p = _setup(tmp_path, freewheel, position)
    i_pull = drive.pull_in.current
    t_model = float(rise_time(i_pull, 0.0, lp.v_on, lp.r_on, lp.inductance))
    assert math.isfinite(t_model), "precondition: the pull-in current is reachable"
    step = t_model / 2000
    t_probe = 2.0 * t_model
    measures = [f"meas tran tpull WHEN i(VM)={i_pull!r} RISE=1",
                f"meas tran iprobe FIND i(VM) AT={t_probe!r}",
                f"meas tran vnode FIND v(node) AT={t_probe!r}"]
    res = _run(tmp_path, "hs-rise", _netlist(p, "hs-rise", 1.0, 2.0, 2.2 * t_model, step, measures))
    # ngspice transient: time to the pull-in current within 1 % plus one time step.
    assert abs(res["tpull"] - t_model) <= 0.01 * t_model + step, (
        f"pull-in time: model {t_model:.6e} s, ngspice {res['tpull']:.6e} s")
    i_model = float(rise_current(t_probe, 0.0, lp.v_on, lp.r_on, lp.inductance))
    assert res["iprobe"] == pytest.approx(i_model, rel=0.01), (
        f"rise current: model {i_model:.6e} A, ngspice {res['iprobe']:.6e} A")
    # ngspice: the switch node while on, against the simulated actuation's node column
    # (the supply less the switch and a supply-leg sense resistor), within 1 %.
    w = actuation(drive, POINT["supply"], POINT["coil_temp"], 10.0 * t_model, 0.5,
                  drive.hold.frequency, 1e-4, POINT["r_factor"], POINT["l_factor"])
    node_model = float(np.interp(t_probe, w.time, w.node_voltage))
    assert res["vnode"] == pytest.approx(node_model, rel=0.01), (
        f"node while on: model {node_model:.6f} V, ngspice {res['vnode']:.6f} V")


@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
def test_high_side_hold_steady_state_matches_ngspice(tmp_path, freewheel, position):
    drive, lp, p = _setup(tmp_path, freewheel, position)
    f = drive.hold.frequency
    period = 1.0 / f
    duty = float(duty_for_mean(0.25, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance))
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    tau = float(lp.inductance / min(lp.r_on, lp.r_off))
    tstop = max(4, math.ceil(12.0 * tau * f)) * period  # start-up transient down to e^-12
    t0 = tstop - period
    t_open = t0 + duty * period
    window = f"from={t0!r} to={tstop!r}"
    measures = [f"meas tran iavg AVG i(VM) {window}", f"meas tran istart FIND i(VM) AT={t0!r}",
                f"meas tran iopen FIND i(VM) AT={t_open!r}",
                f"meas tran ibody MAX i(VBODY) {window}"]
    res = _run(tmp_path, "hs-pwm", _netlist(p, "hs-pwm", duty * period, period, tstop, period / 100,
                                            measures))
    # ngspice transient, the last period after settling: mean, top and bottom of the
    # ripple within 1 % (the hold's periodic steady state).
    for name, model in (("iavg", float(ss.mean)), ("iopen", float(ss.i_max)), ("istart", float(ss.i_min))):
        assert res[name] == pytest.approx(model, rel=0.01), (
            f"{freewheel}: {name} model {model:.6e} A, ngspice {res[name]:.6e} A")
    # ngspice: the body diode of a high-side switch never conducts (the node stays below the bus).
    assert res["ibody"] < I_ZERO, f"body diode current {res['ibody']:.3e} A"


@pytest.mark.parametrize("freewheel,position", CASES, ids=CASE_IDS)
def test_high_side_release_and_switch_voltage_match_ngspice(tmp_path, freewheel, position):
    drive, lp, p = _setup(tmp_path, freewheel, position)
    i_drop = drive.release.current
    t_on, i0, t_drop, t_zero = decay_case(drive, lp)
    v_switch = float(lp.switch_voltage(drive, i0))
    topo = topology_of(drive)
    v_node = float(topo.node_voltage(POINT["supply"], v_switch, 0.0))
    # the hand-written KVL of the reference circuit agrees with the model's node
    assert v_node == pytest.approx(p.node_voltage_off(i0), abs=1e-9)

    t_off = t_on + EDGE / 2  # the switch opens at the falling edge's midpoint
    step = t_zero / 4000
    tend = t_off + 1.3 * t_zero
    after = f"from={t_off!r} to={tend!r}"
    measures = [
        f"meas tran ioff FIND i(VM) AT={t_off!r}",
        f"meas tran tdrop WHEN i(VM)={i_drop!r} FALL=1",
        f"meas tran tzero WHEN i(VM)={I_ZERO!r} FALL=1",
        f"meas tran vnode MIN v(node) {after}",
        f"meas tran vsw MAX vds {after}",
    ]
    net = _netlist(p, "hs-release", t_on, 10 * tend, tend, step, measures)
    net = net.replace("meas tran ioff", "let vds = v(drain) - v(node)\nmeas tran ioff", 1)
    res = _run(tmp_path, "hs-release", net)
    # ngspice transient: current at turn-off within 1 %.
    assert res["ioff"] == pytest.approx(i0, rel=0.01), (
        f"current at turn-off: model {i0:.6e} A, ngspice {res['ioff']:.6e} A")
    # ngspice transient: release times (to drop-out and to zero) within 1 % plus one step.
    for name, t_model in (("tdrop", t_drop), ("tzero", t_zero)):
        t_spice = res[name] - t_off
        assert abs(t_spice - t_model) <= 0.01 * t_model + step, (
            f"{freewheel}: {name} model {t_model:.6e} s, ngspice {t_spice:.6e} s")
    # ngspice: the switch's peak voltage (drain to source) and the node's lowest voltage
    # within 1 % -- V_bus plus the freewheel voltage, and the node below ground.
    assert res["vsw"] == pytest.approx(v_switch, rel=0.01), (
        f"{freewheel}: switch voltage model {v_switch:.6f} V, ngspice {res['vsw']:.6f} V")
    assert res["vnode"] == pytest.approx(v_node, rel=0.01), (
        f"{freewheel}: lowest node model {v_node:.6f} V, ngspice {res['vnode']:.6f} V")
    assert v_node < 0.0, "the node of a high-side switch swings below ground at turn-off"
