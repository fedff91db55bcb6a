"""A full bridge with an eddy-current term (a resistance across the magnetising branch):
slow decay in the hold, fast decay at the release, the body diodes blocking once the
terminal current reaches zero and the flux then decaying through ``R_e`` alone.

Reference: ngspice (batch transient) on the element-level bridge of
tests/test_reference_ngspice_bridge.py (voltage-controlled switches, ngspice manual
"Switch Model (SW/CSW)", with their body diodes as constant-drop one-way devices) with
the eddy resistor ``REDDY`` across the linear inductor and a 0 V ammeter ``VLM`` in its
magnetising branch (as tests/test_eddy_ngspice.py): ``i(VLM)`` is the magnetising
current, ``i(VM)`` the terminal current. ngspice solves the circuit by its own time
stepping; it knows nothing of the model's Thevenin reduction. The saturating branch's
pump-up (no closed form) is checked against scipy's ``solve_ivp`` (LSODA) on the
circuit written afresh. Tolerances: 1 % (times also one time step).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import EXAMPLES, run_cli
from coildrive.model import bridge, eddy, flux
from coildrive.model.eddy import EddyCoil
from coildrive.model.rl import decay_time, rise_current, rise_time
from test_bridge import bridges
from test_eddy_coil import _example_drive, check_synthetic
from test_reference_ngspice_bridge import (EDGE, L_COIL, R_COIL, R_SENSE, R_SW, STAGGER, V_D,
                                           V_SUP, _netlist, _on_until)
from ngspice_run import run

BRIDGE = EXAMPLES / "dosing-valve-bridge-24v.toml"
#: ohm: the switch-on step V / (R + R_e) is about a tenth of V / R, and at the release the
#: magnetising current is still (V_bus + 2 V_d) / R_e ~ 85 mA when the diodes block.
R_E = 300.0
COIL = EddyCoil(np.array(L_COIL), np.array(R_E))
R_ON = R_COIL + 2 * R_SW + R_SENSE           # Q1 + Q4, the sense resistor in the common return
R_FAST = R_COIL + R_SENSE                    # two body diodes into the bus
R_SLOW = R_COIL + 2 * R_SW                   # Q2 + Q4
V_FAST = V_SUP + 2 * V_D
#: A, the drop-out current: below the block current, so the flux's tail sets the release.
I_DROP = 0.05


def _eddy(text: str, r_e: float = R_E) -> str:
    """The bridge's netlist with ``REDDY`` (``r_e`` ohm) across ``LCOIL`` and the ammeter
    ``VLM`` in its branch."""
    out = []
    for line in text.splitlines():
        if line.startswith("LCOIL "):
            node_a, node_b = line.split()[1:3]
            out += ["VLM " + node_a + " nm DC 0", line.replace(f"LCOIL {node_a} ", "LCOIL nm ", 1),
                    f"REDDY {node_a} {node_b} {r_e!r}"]
        else:
            out.append(line)
    return "\n".join(out) + "\n"


def _turn_off():
    """On (Q1 + Q4) from zero for 1.5 x the magnetising current's time to 0.5 A: the on-time
    (s) and the magnetising current at its end (A)."""
    t_on = 1.5 * float(rise_time(0.5, 0.0, V_SUP, R_ON, COIL))
    return t_on, float(rise_current(t_on, 0.0, V_SUP, R_ON, COIL))


@pytest.mark.ngspice
def test_rise_and_fast_release_match_ngspice(tmp_path):
    """The rise (terminal step, magnetising current) and the fast release: the flux's
    drop-out, the moment the diodes block, the energy back into the supply and the eddy
    loss; the energy balance of the fast path."""
    t_on, i0 = _turn_off()
    t_off = t_on + EDGE / 2 + STAGGER
    t_block = float(decay_time(0.0, i0, R_FAST, V_FAST, COIL))
    t_drop = float(decay_time(I_DROP, i0, R_FAST, V_FAST, COIL))
    assert I_DROP < V_FAST / R_E and t_drop > t_block, "precondition: the flux outlasts the terminal current"
    step = t_block / 2000
    tend = t_off + 1.2 * t_drop
    after = f"from={t_off!r} to={tend!r}"
    gates = {1: _on_until(t_on + EDGE / 2), 2: "DC 0", 3: "DC 0", 4: _on_until(t_off)}
    t_half = 0.5 * t_on
    measures = ["let back = -v(bus) * i(VFEED)", f"let peddy = (v(n2) - v(b)) * (v(n2) - v(b)) / {R_E!r}",
                f"meas tran istep FIND i(VM) AT={20 * EDGE!r}", f"meas tran imhalf FIND i(VLM) AT={t_half!r}",
                f"meas tran ioff FIND i(VLM) AT={t_off!r}",
                f"meas tran tblock WHEN i(VM)=1e-4 FALL=1", f"meas tran tdrop WHEN i(VLM)={I_DROP!r} FALL=1",
                f"meas tran eback INTEG back {after}", f"meas tran eeddy INTEG peddy {after}"]
    res = run(tmp_path, "bridge-eddy-fast", _eddy(_netlist("bridge-eddy-fast", gates, tend, step, measures)))
    q, s, w_eddy = eddy.decay_integrals(np.inf, i0, R_FAST, V_FAST, COIL)
    returned, w_eddy = V_SUP * float(q), float(w_eddy)
    print(f"bridge + eddy vs ngspice: block {t_block:.6e}/{res['tblock'] - t_off:.6e} s, drop "
          f"{t_drop:.6e}/{res['tdrop'] - t_off:.6e} s, returned {returned:.6e}/{res['eback']:.6e} J, "
          f"eddy {w_eddy:.6e}/{res['eeddy']:.6e} J")
    # ngspice: the switch-on step V / (R + R_e) and the magnetising current half-way, 1 %
    assert res["istep"] == pytest.approx(V_SUP / (R_ON + R_E), rel=0.01)
    assert res["imhalf"] == pytest.approx(float(rise_current(t_half, 0.0, V_SUP, R_ON, COIL)), rel=0.01)
    assert res["ioff"] == pytest.approx(i0, rel=0.01)
    # ngspice: the diodes block, then the flux drops out through R_e alone (1 % + a step)
    assert abs(res["tblock"] - t_off - t_block) <= 0.01 * t_block + step, (res["tblock"] - t_off, t_block)
    assert abs(res["tdrop"] - t_off - t_drop) <= 0.01 * t_drop + step, (res["tdrop"] - t_off, t_drop)
    # ngspice: only the terminal current returns energy (V_bus x its charge); the eddy loss is heat
    assert res["eback"] == pytest.approx(returned, rel=0.01), (res["eback"], returned)
    assert res["eeddy"] == pytest.approx(w_eddy, rel=0.01), (res["eeddy"], w_eddy)
    # energy balance of the fast path (conservation): 1/2 L i0^2 = returned + diodes + copper + eddy
    stored = 0.5 * L_COIL * i0 * i0
    assert returned + 2 * V_D * float(q) + R_FAST * float(s) + w_eddy == pytest.approx(stored, rel=1e-9)


@pytest.mark.ngspice
def test_slow_decay_hold_orbit_matches_ngspice(tmp_path):
    """The hold's exact orbit with the eddy term on the slow path (Q2 + Q4, nothing opposes
    the current, so the path never blocks), started in ngspice at its lowest magnetising
    current and run five time constants: the terminal current's lowest and highest values
    (the steps at the edges included), its mean, and the magnetising current's lowest,
    1 %; nothing back to the supply; the energy balance of a period."""
    f, duty = 20e3, 0.30
    period = 1.0 / f
    t_on = duty * period
    o = eddy.orbit(COIL, t_on, period - t_on, V_SUP, R_ON, R_SLOW, 0.0)
    i_min = float(o.i_min)
    mean = float(o.charge_on + o.charge_off) / period
    assert not bool(o.dcm) and i_min > 0.1, "precondition: the slow path conducts throughout"
    n = max(4, round(5.0 * L_COIL / R_SLOW * f))
    tstop = n * period
    t0 = tstop - period

    def pulse(start, width):
        return f"PULSE(0 1 {start!r} {EDGE} {EDGE} {width - EDGE!r} {period!r})"
    gates = {1: pulse(0.0, t_on), 2: pulse(t_on + 2 * EDGE, period - t_on - 4 * EDGE), 3: "DC 0", 4: "DC 1"}
    window = f"from={t0 + 10 * EDGE!r} to={tstop - 10 * EDGE!r}"
    measures = ["let back = -v(bus) * i(VFEED)", f"meas tran imin FIND i(VLM) AT={t0!r}",
                f"meas tran tmax MAX i(VM) {window}", f"meas tran tmin MIN i(VM) {window}",
                f"meas tran iavg AVG i(VM) from={t0!r} to={tstop!r}",
                "let drawn = v(bus) * i(VFEED)", f"meas tran edrawn INTEG drawn from={t0!r} to={tstop!r}",
                f"meas tran eback INTEG back from={t0 + t_on + 10 * EDGE!r} to={tstop - 10 * EDGE!r}"]
    text = _eddy(_netlist("bridge-eddy-orbit", gates, tstop, period / 200, measures))
    text = text.replace(f"LCOIL nm b {L_COIL!r} IC=0", f"LCOIL nm b {L_COIL!r} IC={i_min!r}")
    res = run(tmp_path, "bridge-eddy-orbit", text)
    print(f"bridge + eddy orbit vs ngspice: i_m,min {i_min:.6e}/{res['imin']:.6e}, terminal "
          f"{float(o.terminal_min):.6e}..{float(o.terminal_max):.6e}/{res['tmin']:.6e}..{res['tmax']:.6e}, "
          f"mean {mean:.6e}/{res['iavg']:.6e} A")
    assert res["imin"] == pytest.approx(i_min, rel=0.01)
    assert res["tmax"] == pytest.approx(float(o.terminal_max), rel=0.01)
    assert res["tmin"] == pytest.approx(float(o.terminal_min), rel=0.01)
    assert res["iavg"] == pytest.approx(mean, rel=0.01)
    # the slow decay's off-times return nothing to the supply (leakage only)
    assert abs(res["eback"]) < 1e-4 * 0.5 * L_COIL * i_min**2, res["eback"]
    # energy balance of a period (conservation): the supply's V int i dt over the on-time is
    # the copper's and the core's heat (the field's energy is back where it started); ngspice
    # draws the same from the supply, 1 %
    heat = R_ON * float(o.square_on) + R_SLOW * float(o.square_off) + float(o.eddy_energy)
    assert V_SUP * float(o.charge_on) == pytest.approx(heat, rel=1e-9)
    assert res["edrawn"] == pytest.approx(V_SUP * float(o.charge_on), rel=0.01)


@pytest.mark.ngspice
@pytest.mark.parametrize("capacitance", [22e-6, 220e-6], ids=["22uF", "220uF"])
def test_pump_up_with_eddy_matches_ngspice(tmp_path, capacitance):
    """The supply cannot take current back: the terminal current charges the bulk
    capacitance until the diodes block; the rest of the flux is heat in the core."""
    t_on, _ = _turn_off()
    t_off = t_on + EDGE / 2 + STAGGER
    t_fixed = float(decay_time(0.0, _turn_off()[1], R_FAST, V_FAST, COIL))
    step = t_fixed / 4000
    tend = t_off + 1.5 * t_fixed
    gates = {1: _on_until(t_on + EDGE / 2), 2: "DC 0", 3: "DC 0", 4: _on_until(t_off)}
    measures = [f"meas tran ioff FIND i(VLM) AT={t_off!r}", f"meas tran v1 FIND v(bus) AT={t_off!r}",
                "meas tran tzero WHEN i(VM)=1e-4 FALL=1", f"meas tran v2 MAX v(bus) from={t_off!r} to={tend!r}"]
    res = run(tmp_path, "bridge-eddy-pump", _eddy(_netlist("bridge-eddy-pump", gates, tend, step, measures,
                                                           sink=False, capacitance=capacitance)))
    pu = bridge.pump_up(res["ioff"], res["v1"], capacitance, R_FAST, COIL, V_D)
    print(f"eddy pump-up ({capacitance * 1e6:g} uF) vs ngspice: dV {float(pu.delta_v):.6e}/"
          f"{res['v2'] - res['v1']:.6e} V, block {float(pu.zero_time):.6e}/{res['tzero'] - t_off:.6e} s")
    assert res["v2"] - res["v1"] == pytest.approx(float(pu.delta_v), rel=0.01)
    assert abs(res["tzero"] - t_off - float(pu.zero_time)) <= 0.01 * float(pu.zero_time) + step
    # the eddy resistance takes part of the field's energy: less pump-up than without it
    plain = bridge.pump_up(res["ioff"], res["v1"], capacitance, R_FAST, L_COIL, V_D)
    assert float(pu.delta_v) < float(plain.delta_v)


def test_pump_up_of_a_saturating_branch_matches_scipy():
    """A curve as the magnetising branch (no closed form): scipy's LSODA on ``L_d(i_m)
    di_m/dt = R_e (i - i_m)``, ``C du/dt = i``, ``i = max(0, (R_e i_m - u) / (R + R_e))``, to the
    moment the diodes block; the bus there within 1e-5, the time within 1e-3."""
    from scipy.integrate import solve_ivp

    i_tab = np.linspace(0.0, 1.5, 16)
    curve = flux.curve(tuple(i_tab), tuple(0.04 * np.tanh(i_tab / 0.35) + 0.005 * i_tab))
    coil = EddyCoil(flux.FluxCoil(curve, np.array(1.0)), np.array(R_E))
    i0, v1, c = 0.9, 24.0, 47e-6
    pu = bridge.pump_up(i0, v1, c, R_FAST, coil, V_D)

    def rhs(t, y):   # the state (i_m, u): dpsi/dt = L_d(i_m) di_m/dt
        i_m, u = y
        i = max(R_E * i_m - u, 0.0) / (R_FAST + R_E)
        return [R_E * (i - i_m) / float(curve.incremental(i_m)), i / c]

    def blocks(t, y):
        return R_E * y[0] - y[1]
    blocks.terminal, blocks.direction = True, -1
    sol = solve_ivp(rhs, (0.0, 1.0), [i0, v1 + 2 * V_D], method="LSODA", rtol=1e-11, atol=1e-13,
                    events=blocks)
    v2 = float(sol.y[1, -1]) - 2 * V_D
    assert float(pu.v2) == pytest.approx(v2, rel=1e-5), (float(pu.v2), v2)
    assert float(pu.zero_time) == pytest.approx(float(sol.t[-1]), rel=1e-3)


@settings(max_examples=60, deadline=None)
@given(bridges, st.floats(10.0, 1e5), st.floats(1e-6, 1e-2), st.floats(1.0001, 100.0))
def test_eddy_bridge_properties(b, r_e, capacitance, more):
    """Hypothesis, with an eddy resistance across the branch: the fast decay releases (the
    flux to the drop-out current) sooner than the slow one from the same magnetising
    current, and more bulk capacitance never raises the pump-up (common practice: the
    same charge on a larger capacitor lifts it less)."""
    coil = EddyCoil(np.array(b["inductance"]), np.array(r_e))
    r_on = b["r_coil"] + 2 * b["r_switch"] + b["r_sense"]
    i0 = b["fraction"] * b["supply"] / r_on
    i_drop = b["drop"] * i0
    fast = decay_time(i_drop, i0, b["r_coil"] + b["r_sense"], b["supply"] + 2 * b["v_diode"], coil)
    slow_r = b["r_coil"] + 2 * b["r_switch"] + (b["r_sense"] if b["inline"] else 0.0)
    slow = eddy.branch_time(coil.magnetising, i0, i_drop, 0.0, eddy.thevenin(0.0, slow_r, r_e)[1])
    assert float(fast) < float(slow)
    r = b["r_coil"] + b["r_sense"]
    small = bridge.pump_up(i0, b["supply"], capacitance, r, coil, b["v_diode"])
    large = bridge.pump_up(i0, b["supply"], capacitance * more, r, coil, b["v_diode"])
    # (never below zero beyond rounding: a pump-up of a few nJ is a difference of squares
    # near V1^2, -3.6e-15 V seen)
    assert float(small.delta_v) >= -1e-12 and np.isfinite(small.delta_v)
    assert float(large.delta_v) <= float(small.delta_v) * (1 + 1e-9) + 1e-12


# ------------------------------------------------------------- the design and its outputs
def _bridge_eddy(tmp_path):
    return _example_drive(tmp_path, f'eddy_resistance = "{R_E} ohm"', BRIDGE)


def test_design_simulate_and_check_of_the_bridge_with_eddy(tmp_path):
    """design --json: the bridge's returned energy per release is V_bus x the terminal
    charge, none per hold period (slow decay), the pump-up on the bulk capacitance; simulate
    writes the four switches, the coil voltage and the magnetising current, the coil
    voltage is R_coil i + R_e (i - i_m) at every row (Kirchhoff round the coil) and -R_e i_m
    once the diodes have blocked; a synthetic capture checks against its own design
    (plumbing: the device shares the model)."""
    path = _bridge_eddy(tmp_path)
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    b = doc["topology"]["bridge"]
    assert doc["eddy"] is not None and b["hold_decay"] == "slow" and b["returned_per_hold_period_j"] == 0.0
    assert 0.0 < b["returned_per_release_j"] and b["pump_up_v"] > 0.0
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--hold-time", "1 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    head = csv.read_text().splitlines()[0].split(",")
    for col in ("high_a_on", "low_a_on", "high_b_on", "low_b_on", "coil_voltage_v", "magnetising_current_a"):
        assert col in head, head
    data = np.genfromtxt(csv, delimiter=",", names=True)
    from coildrive.config import load_drive
    from coildrive.copper import copper_resistance
    drive = load_drive(path)
    r_coil = float(copper_resistance(drive.coil.resistance, drive.coil.reference_temp, 20.0))
    i, im, v = data["current_a"], data["magnetising_current_a"], data["coil_voltage_v"]
    want = r_coil * i + R_E * (i - im)
    assert np.allclose(v, want, atol=1e-6 * V_SUP), float(np.max(np.abs(v - want)))
    released = (data["high_a_on"] + data["low_a_on"] + data["high_b_on"] + data["low_b_on"]) == 0
    blocked = released & (i == 0.0)
    assert blocked.sum() > 10 and np.all(v[blocked] < 0)
    check_synthetic(tmp_path, path)

