"""Mixed decay in a full bridge's hold with an eddy-current term (``hold.fast_fraction``
with ``[coil] eddy_resistance``): the exact three-segment orbit of
:mod:`coildrive.model.eddy_mixed`, its design, simulate and the emulated device.

Sources beside each check:
* ngspice (batch transient) on the element-level bridge of
  tests/test_reference_ngspice_bridge.py (voltage-controlled switches, ngspice manual
  "Switch Model (SW/CSW)", body diodes as constant-drop one-way devices) driven with the
  mixed-decay gate pattern of that file, with the eddy resistor across the linear
  inductor and the ammeter in its branch (tests/test_bridge_eddy.py); ngspice knows
  nothing of the model's Thevenin reduction;
* scipy's ``solve_ivp`` (Radau) on the circuit's equations written afresh in the
  magnetising current (Kirchhoff at the branch node, the body diodes blocking below
  zero terminal current), for the linear branch and a saturating curve;
* the energy balance of a period (the first law: the field ends where it started).
Tolerances: ngspice 1 % (times also a step), scipy 1e-7.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import run_cli
from coildrive.model import flux
from coildrive.model.eddy import EddyCoil
from coildrive.model.eddy_mixed import mixed_orbit
from coildrive.model.pwm import MixedDecay, pwm_steady_state
from test_bridge_eddy import R_E, _bridge_eddy, _eddy
from test_eddy_coil import check_synthetic
from test_reference_ngspice_bridge import (EDGE, L_COIL, R_COIL, R_SENSE, R_SW, STAGGER, V_D, V_SUP,
                                           _mixed_gates, _netlist)
from ngspice_run import run

R_ON = R_COIL + 2 * R_SW + R_SENSE      # Q1 + Q4, the sense resistor in the common return
R_FAST = R_COIL + R_SENSE               # two body diodes into the bus
R_SLOW = R_COIL + 2 * R_SW              # Q2 + Q4
V_FAST = V_SUP + 2 * V_D
LINEAR = EddyCoil(np.array(L_COIL), np.array(R_E))
_I = np.linspace(0.0, 1.5, 16)
CURVE = flux.curve(tuple(_I), tuple(0.04 * np.tanh(_I / 0.35) + 0.005 * _I))
SATURATING = EddyCoil(flux.FluxCoil(CURVE, np.array(1.0)), np.array(R_E))
#: (duty, fast fraction, Hz): the fast part conducting throughout; conducting, then the
#: body diodes blocking at V_f / R_e and the flux decaying through R_e for the rest of it.
CASES = {"conducting": (0.3, 0.2, 20e3), "blocking": (0.4, 0.7, 1e3)}


def _orbit(coil, duty, fraction, freq):
    period = 1.0 / freq
    t_on = duty * period
    t_fast = fraction * (period - t_on)
    ss = pwm_steady_state(duty, freq, V_SUP, R_ON, R_SLOW, 0.0, coil,
                          mixed=MixedDecay(fraction, np.array(R_FAST), np.array(V_FAST)))
    return ss, period, t_on, t_fast


@pytest.mark.ngspice
@pytest.mark.parametrize("case", list(CASES))
def test_mixed_eddy_orbit_matches_ngspice(tmp_path, case):
    """Started on the model's orbit (the inductor at its lowest magnetising current), four
    periods: the last one's magnetising current at its start and highest, the terminal
    current's mean, highest and lowest (the steps at the edges included), when the body
    diodes block, the energy back into the supply in the fast part and the eddy loss,
    1 %; the period's energy balance (conservation)."""
    ss, period, t_on, t_fast = _orbit(LINEAR, *CASES[case])
    assert bool(ss.dcm) == (case == "blocking") and float(ss.charge_fast) > 0, "precondition"
    n = 4
    step = period / 4000
    t0 = (n - 1) * period
    win = f"from={t0 + 20 * EDGE!r} to={n * period - 20 * EDGE!r}"
    fast = f"from={t0 + t_on + EDGE!r} to={t0 + t_on + t_fast + 2 * STAGGER!r}"
    measures = ["let back = -v(bus) * i(VFEED)", f"let peddy = (v(n2) - v(b)) * (v(n2) - v(b)) / {R_E!r}",
                f"meas tran imin FIND i(VLM) AT={t0!r}", f"meas tran mmax MAX i(VLM) {win}",
                f"meas tran iavg AVG i(VM) from={t0!r} to={n * period!r}",
                f"meas tran tmax MAX i(VM) {win}", f"meas tran tmin MIN i(VM) {win}",
                f"meas tran eback INTEG back {fast}",
                f"meas tran eeddy INTEG peddy from={t0!r} to={n * period!r}"]
    if case == "blocking":
        measures.append(f"meas tran tblock WHEN i(VM)=1e-5 FALL=1 TD={t0 + t_on!r}")
    text = _eddy(_netlist("bridge-eddy-mixed", _mixed_gates(t_on, t_fast, period), n * period, step, measures))
    text = text.replace(f"LCOIL nm b {L_COIL!r} IC=0", f"LCOIL nm b {L_COIL!r} IC={float(ss.i_min)!r}")
    res = run(tmp_path, "bridge-eddy-mixed", text)
    back = V_SUP * float(ss.charge_fast)
    print(f"mixed + eddy ({case}) vs ngspice: i_m {float(ss.i_min):.6e}/{res['imin']:.6e}.."
          f"{float(ss.i_max):.6e}/{res['mmax']:.6e}, mean {float(ss.mean):.6e}/{res['iavg']:.6e}, terminal "
          f"{float(ss.terminal_min):.6e}/{res['tmin']:.6e}..{float(ss.terminal_max):.6e}/{res['tmax']:.6e} A, "
          f"back {back:.6e}/{res['eback']:.6e} J, eddy {float(ss.eddy_energy):.6e}/{res['eeddy']:.6e} J")
    assert res["imin"] == pytest.approx(float(ss.i_min), rel=0.01)
    assert res["mmax"] == pytest.approx(float(ss.i_max), rel=0.01)
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01)
    assert res["tmax"] == pytest.approx(float(ss.terminal_max), rel=0.01)
    assert abs(res["tmin"] - float(ss.terminal_min)) <= 0.01 * float(ss.terminal_max)
    assert res["eback"] == pytest.approx(back, rel=0.01), (res["eback"], back)
    assert res["eeddy"] == pytest.approx(float(ss.eddy_energy), rel=0.01)
    if case == "blocking":   # the diodes block this long into the fast part
        t_cond = float(ss.conduction_off) - (period - t_on - t_fast)
        assert abs(res["tblock"] - t0 - t_on - t_cond) <= 0.01 * t_cond + step
    # conservation over a period: the supply's on-time energy less what the fast part gives
    # back heats the copper, switches, diodes and core
    q_f, s_f = float(ss.charge_fast), float(ss.square_fast)
    heat = (R_ON * float(ss.square_on) + R_FAST * s_f + R_SLOW * (float(ss.square_off) - s_f)
            + 2 * V_D * q_f + float(ss.eddy_energy))
    assert V_SUP * float(ss.charge_on) - back == pytest.approx(heat, rel=1e-9)


def _reference(coil, a, t_on, t_fast, t_slow):
    """One period from the magnetising current ``a`` A by scipy's Radau on the circuit
    written afresh: ``y = (i_m, int i dt, int i^2 dt, eddy J)``; the terminal current ``i``
    from Kirchhoff at the branch node, ``L_d(i_m) di_m/dt = R_e (i - i_m)``."""
    from scipy.integrate import solve_ivp

    curve = isinstance(coil.magnetising, flux.FluxCoil)

    def terminal(seg, i_m):
        if seg == 0:
            return (V_SUP + R_E * i_m) / (R_ON + R_E)
        if seg == 1:   # the body diodes pass no negative current
            return max((R_E * i_m - V_FAST) / (R_FAST + R_E), 0.0)
        return R_E * i_m / (R_SLOW + R_E)

    y = [a, 0.0, 0.0, 0.0]
    for seg, t in enumerate((t_on, t_fast, t_slow)):
        def rhs(_t, y, seg=seg):
            i = terminal(seg, y[0])
            v_m = R_E * (i - y[0])
            ld = float(CURVE.incremental(max(y[0], 0.0))) if curve else L_COIL
            return [v_m / ld, i, i * i, v_m * v_m / R_E]
        if t > 0:
            y = list(solve_ivp(rhs, (0.0, t), y, method="Radau", rtol=1e-11, atol=1e-14,
                               max_step=t / 50).y[:, -1])
    return y


@pytest.mark.parametrize("kind", ["linear", "curve"])
@pytest.mark.parametrize("case", [*CASES, "all-fast"])
def test_orbit_is_periodic_under_scipy(kind, case):
    """scipy (Radau): one period from the orbit's lowest magnetising current ends there
    again (1e-7 of the highest), with the terminal current's charge, square and the eddy
    energy of the orbit (1e-7); a fraction of 1 (no slow part) too; the period's energy
    balance (1e-9)."""
    coil = LINEAR if kind == "linear" else SATURATING
    duty, fraction, freq = CASES.get(case, (0.2, 1.0, 20e3))
    ss, period, t_on, t_fast = _orbit(coil, duty, fraction, freq)
    ref = _reference(coil, float(ss.i_min), t_on, t_fast, period - t_on - t_fast)
    assert ref[0] == pytest.approx(float(ss.i_min), abs=1e-7 * float(ss.i_max))
    assert ref[1] == pytest.approx(float(ss.charge_on + ss.charge_off), rel=1e-7)
    assert ref[2] == pytest.approx(float(ss.square_on + ss.square_off), rel=1e-7)
    assert ref[3] == pytest.approx(float(ss.eddy_energy), rel=1e-7)
    # the first law over a period (the field ends where it started): the supply's on-time
    # energy less what the fast part gives back heats the copper, switches, diodes and core
    q_f, s_f = float(ss.charge_fast), float(ss.square_fast)
    heat = (R_ON * float(ss.square_on) + R_FAST * s_f + R_SLOW * (float(ss.square_off) - s_f)
            + 2 * V_D * q_f + float(ss.eddy_energy))
    assert V_SUP * float(ss.charge_on - ss.charge_fast) == pytest.approx(heat, rel=1e-9)


def test_without_the_eddy_term_it_tends_to_the_plain_mixed_orbit():
    """A very large R_e: the plain coil's mixed orbit (model.pwm's closed form), 1e-5."""
    big = EddyCoil(np.array(L_COIL), np.array(1e9))
    o = mixed_orbit(big, 15e-6, 7e-6, 28e-6, V_SUP, R_ON, R_SLOW, V_FAST, R_FAST)
    plain = pwm_steady_state(0.3, 20e3, V_SUP, R_ON, R_SLOW, 0.0, L_COIL,
                             mixed=MixedDecay(0.2, np.array(R_FAST), np.array(V_FAST)))
    assert float(o.i_min) == pytest.approx(float(plain.i_min), rel=1e-5)
    assert float(o.i_max) == pytest.approx(float(plain.i_max), rel=1e-5)


# ------------------------------------------------------------- the design and its outputs
def _mixed_drive(tmp_path, fraction=0.3):
    path = _bridge_eddy(tmp_path)
    path.write_text(path.read_text().replace('frequency = "20 kHz"',
                                             f'frequency = "20 kHz"\nfast_fraction = {fraction}'))
    return path


def test_design_simulate_and_check_with_mixed_decay(tmp_path):
    """design --json names the mixed hold and returns energy per hold period; simulate's
    fast parts open all four switches, the coil voltage is R_coil i + R_e (i - i_m) at
    every row (Kirchhoff round the coil), and after a long hold the sampled periods sit
    on the exact orbit at that point (the tabulated segments against the quadrature,
    1e-4); a synthetic capture checks against its own design (plumbing)."""
    from coildrive.config import load_drive
    from coildrive.copper import copper_resistance
    from coildrive.model.circuit import loop

    path = _mixed_drive(tmp_path)
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    b = doc["topology"]["bridge"]
    assert b["hold_decay"] == "mixed" and b["hold_fast_fraction"] == 0.3
    assert b["returned_per_hold_period_j"] > 0.0 and doc["eddy"]["hold_eddy_power_w"] > 0.0
    freq = doc["hold"]["frequency_hz"]
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--hold-time", "40 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    drive = load_drive(path)
    r_coil = float(copper_resistance(drive.coil.resistance, drive.coil.reference_temp, 20.0))
    i, im, v = data["current_a"], data["magnetising_current_a"], data["coil_voltage_v"]
    assert np.allclose(v, r_coil * i + R_E * (i - im), atol=1e-6 * V_SUP)
    switches = data["high_a_on"] + data["low_a_on"] + data["high_b_on"] + data["low_b_on"]
    t, on = data["time_s"], data["switch_on"]
    t_peak, t_cut = t[np.flatnonzero(on == 0)[0]], t[np.flatnonzero(on == 1)[-1]]
    hold = (t > t_peak) & (t <= t_cut)
    assert np.any(hold & (switches == 0)) and np.any(hold & (data["low_a_on"] == 1)), "fast and slow parts"
    # the last five periods against the exact orbit at that point, at the duty simulate ran
    sim_duty = float(r.stderr.split("hold duty ")[1].split()[0])
    lp = loop(drive, 24.0, 20.0)
    ss = pwm_steady_state(sim_duty, freq, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance, mixed=lp.mixed)
    late = hold & (t > t_cut - 5.0 / freq)
    assert float(np.max(im[late])) == pytest.approx(float(ss.i_max), rel=1e-4)
    assert float(np.min(im[late])) == pytest.approx(float(ss.i_min), rel=1e-4)
    assert float(np.max(i[late])) == pytest.approx(float(ss.terminal_max), rel=1e-4)
    check_synthetic(tmp_path, path)


def test_firmware_in_the_loop_with_mixed_decay(tmp_path):
    """The compiled driver (gcc) runs the mixed-decay hold with the eddy term in the loop
    (its ``coil_port_fast_end`` count ends each fast part; the sensed current is the
    terminal current of the path that conducts, the body diodes' in the fast part):
    `check` passes, the hold's ripple included. Plumbing: the coil model is the design's."""
    from coildrive.config import load_drive
    from coildrive.design import design
    from driver_harness import checked_rows, loop_captures

    path = _mixed_drive(tmp_path)
    [(cap, _)] = loop_captures(tmp_path, design(load_drive(path)), [(24.0, 20.0, None)])
    rows = checked_rows(cap, path, 20.0)
    assert rows["hold_ripple"]["status"] == "pass"
