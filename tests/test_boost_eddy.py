"""The boosted peak with an eddy-current term (``[supply] boost`` with ``coil.eddy_resistance``)
against the outside world.

The circuit of tests/test_boost.py with a resistor ``R_e`` across the coil's inductance (the
lumped eddy currents of coildrive/model/eddy.py). References:

* ngspice (batch mode, ``ngspice -b``): that netlist, the boost capacitor with its initial
  charge (``IC=``, ``tran ... uic``), the switches as ngspice's voltage-controlled switches
  (``S`` elements, ``SW`` model: ngspice manual, "Switches"). Checked within 1 %: the time
  for the terminal current (the sense resistor's) to reach the threshold, the terminal
  current at the turn-off, the capacitor's droop by the threshold, the inductor's
  (magnetising) current at the threshold;
* scipy's ``solve_ivp`` (Radau) of the two loop equations written afresh here, and
  ``quad`` of the terminal current squared (the copper's heat).
"""

from __future__ import annotations

import pytest

from ngspice_run import run
from test_boost import C_B, I_TH, L_COIL, R_B, R_ON, V_B, boost_netlist

from coildrive.model import boost as boost_model

#: Invented: an eddy resistance of 40 ohm across the 2.75 mH magnetising branch (a solid core).
R_E = 40.0


def _b(c=C_B):
    return boost_model.boost(V_B, c, R_ON + R_B, L_COIL, R_E)


def test_boosted_peak_with_eddy_term_against_ngspice(tmp_path):
    b = _b()
    t_th = float(boost_model.threshold_time(I_TH, b, sensed=True))
    t_off = t_th * 1.05
    i_m, v_c = boost_model.state(t_off, b)
    i_off = float(boost_model.terminal(i_m, v_c, b))
    i_m_th = float(boost_model.current(t_th, b))
    step = t_th / 5000
    text = boost_netlist("* boosted peak, eddy resistance across the coil's inductance",
                         ["VL n3 n4 DC 0", f"LCOIL n4 drain {L_COIL!r} IC=0", f"REDDY n3 drain {R_E!r}"],
                         t_off, t_th, step, t_off * 1.1, [f"meas tran imth FIND i(VL) AT={t_th!r}"])
    res = run(tmp_path, "boost_eddy", text)
    # ngspice transient: the terminal current's time to the threshold within 1 % plus one step
    assert abs(res["tth"] - t_th) <= 0.01 * t_th + step, (res["tth"], t_th)
    # ngspice: the terminal current at the turn-off, the magnetising current at the threshold
    assert res["ioff"] == pytest.approx(i_off, rel=0.01), (res["ioff"], i_off)
    assert res["imth"] == pytest.approx(i_m_th, rel=0.01), (res["imth"], i_m_th)
    # ngspice: the capacitor's droop by the threshold within 1 %
    droop = V_B - float(boost_model.state(t_th, b)[1])
    assert V_B - res["vcth"] == pytest.approx(droop, rel=0.01), (V_B - res["vcth"], droop)
    # the eddy branch makes the sensed current lead the flux: the threshold comes sooner
    assert t_th < float(boost_model.threshold_time(I_TH, b))


@pytest.mark.parametrize("c", [C_B, 3e-3, 0.0])     # a complex pair, real eigenvalues, an ideal source
def test_states_and_copper_heat_against_scipy(c):
    from scipy.integrate import quad, solve_ivp

    b = _b(c)
    r, k = R_ON + R_B, R_E / (R_ON + R_B + R_E)

    def f(t, y):              # y = (i_m, v_C): L di_m/dt = k (v_C - R i_m), C dv_C/dt = -k (i_m + v_C/R_e)
        return [k * (y[1] - r * y[0]) / L_COIL, 0.0 if c == 0 else -k * (y[0] + y[1] / R_E) / c]

    t_end = float(boost_model.threshold_time(I_TH, b, sensed=True))
    sol = solve_ivp(f, (0.0, 2 * t_end), [0.0, V_B], method="Radau", rtol=1e-10, atol=1e-12,
                    dense_output=True)

    def term(t):
        i_m, v = sol.sol(t)
        return k * (i_m + v / R_E)

    # scipy Radau: the states and the terminal current at the threshold, within 1e-6
    for t in (0.3 * t_end, t_end, 2 * t_end):
        assert boost_model.state(t, b)[0] == pytest.approx(sol.sol(t)[0], rel=1e-6)
        assert boost_model.state(t, b)[1] == pytest.approx(sol.sol(t)[1], rel=1e-6)
    assert term(t_end) == pytest.approx(I_TH, rel=1e-6)
    # scipy quad: the copper's int i^2 dt of the terminal current, within 1e-6
    heat = quad(lambda t: term(t) ** 2, 0.0, t_end, limit=200, epsabs=0)[0]
    assert float(boost_model.square_integral(t_end, b)) == pytest.approx(heat, rel=1e-6)


def test_no_eddy_term_is_the_plain_boost_to_the_bit():
    plain = boost_model.boost(V_B, C_B, R_ON + R_B, L_COIL)
    t = 2e-4
    assert boost_model.state(t, plain) == boost_model.state(t, boost_model.boost(V_B, C_B, R_ON + R_B, L_COIL))
    assert float(boost_model.current(t, plain, sensed=True)) == float(boost_model.state(t, plain)[0])


@pytest.fixture(scope="module")
def eddy_example(tmp_path_factory):
    """The boosted example with an invented 1 kohm eddy resistance (a laminated core)."""
    from test_boost import _variant

    return _variant(tmp_path_factory.mktemp("eddy"), "eddy", "[coil]", '[coil]\neddy_resistance = "1 kohm"')


def test_design_simulate_and_emulate_end_to_end(tmp_path, eddy_example):
    import json
    import sys
    from pathlib import Path

    import numpy as np
    from conftest import run_cli

    out = run_cli("design", eddy_example, "--json")
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    b, p = d["boost"], d["pull_in"]
    # hand-worked: 1.2 x 0.9 A + the eddy share's bound 48 V x 1.05 / 1 kohm = 1.08 + 0.0504 A
    assert b["threshold_a"] == pytest.approx(1.1304)
    # the flux's current at the shortest peak (the terminal current's trip) carries the force
    assert p["shortest_peak_current_a"] >= p["force_current_a"]
    assert {c["name"]: c["ok"] for c in d["checks"]}["pull_in_force"]
    sim = run_cli("simulate", eddy_example, "--supply", "12", "--coil-temp", "40", "--hold-time", "1 ms",
                  "--csv", str(tmp_path / "s.csv"))
    assert sim.returncode == 0, sim.stderr
    rows = np.genfromtxt(tmp_path / "s.csv", delimiter=",", names=True)
    assert rows["boost_v"][0] == pytest.approx(48.0)
    # the switch-on step V_b / (R + R_e) of the terminal current (coildrive/model/eddy.py), the
    # loop R between the 6 ohm coil's and 10 ohm
    assert 48.0 / (1000.0 + 10.0) < rows["current_a"][0] < 48.0 / (1000.0 + 6.0)
    peak = rows["time_s"] <= float(sim.stderr.split("peak ")[1].split(" ms")[0]) * 1e-3 * 0.999
    code = int(round(b["threshold_code"]))
    trip = code * 3.3 / 4096 / 2.0      # the code's current with a nominal chain (0.1 ohm x 20), A
    assert rows["current_a"][peak][-1] < trip <= rows["current_a"][~peak][0] + 1e-4
    assert np.all(rows["magnetising_current_a"][peak] < rows["current_a"][peak]), "the sense leads the flux"

    sys.path.insert(0, str(Path(__file__).parent))
    from test_emulator_device import capture_of, run as run_device

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions, VirtualDevice
    from coildrive.config import load_drive
    from coildrive.design import design

    des = design(load_drive(Path(eddy_example)))
    dev = VirtualDevice(des.drive, DeviceOptions(noise_codes=1.0, seed=3), design=des)
    assert dev.peak_time < des.pull_in.peak_time_s, "ends at the threshold, before the time-out"
    msgs, _ = run_device(dev, 0.05 + 2 * dev.period, step=0.05)
    report = check_capture(capture_of(msgs, tmp_path / "c.cdcap"), des)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items if i.status == "FAIL"]

