"""The boosted peak on a saturating coil with an eddy-current term (``[supply] boost`` with
``[coil] flux_current`` / ``flux_linkage`` and ``eddy_resistance``), against the outside
world and end to end.

The circuit is tests/test_boost_flux.py's with a resistance ``R_e`` across the curve
(coildrive/model/flux_boost.py: the capacitor's run on flux_bus.equivalent's plain circuit
with no source). References:

* scipy's ``solve_ivp`` (Radau, rtol 1e-11) of Kirchhoff's laws written afresh (the loop
  ``v_C = R i + v_m``, the node ``i = i_m + v_m/R_e``, ``L_d(i_m) di_m/dt = v_m``, ``C dv_C/dt
  = -i``; no equivalent circuit), the curve by scipy's own ``PchipInterpolator``, and
  ``quad`` of ``R i^2`` and ``v_m^2/R_e`` for the copper and the eddy loss;
* ngspice (batch mode): tests/test_boost.py's boost deck with tests/test_flux_ngspice.py's
  flux-controlled inductor and a resistor ``REDDY`` across it -- the terminal current's
  time to the threshold, the current at the turn-off, the capacitor's droop (1 %) and the
  flux there;
* hand-worked limit: ``R_e -> inf`` is the boost without the eddy term.
"""

from __future__ import annotations

import json
import math
from types import SimpleNamespace

import numpy as np
import pytest

from test_boost import C_B, I_TH, V_B, assert_peak, boost_netlist
from test_boost_flux import CURVE_I, CURVE_PSI, R, _cli, _coil, _drive, assert_device_passes

from coildrive.model import boost as boost_model
from coildrive.model import flux


def _kirchhoff(c: float, r_e: float, stop: float):
    """scipy ``solve_ivp`` (Radau) of the module docstring's laws from rest; ``c`` 0: an
    ideal source at ``V_B``."""
    from scipy.integrate import solve_ivp
    from scipy.interpolate import PchipInterpolator

    ld = PchipInterpolator(CURVE_I, CURVE_PSI).derivative()

    def f(t, y):              # y = (i_m, v_C)
        i = (y[1] + r_e * y[0]) / (R + r_e)      # the loop and the node solved for i
        return [(y[1] - R * i) / float(ld(y[0])), -i / c if c > 0 else 0.0]

    return solve_ivp(f, (0.0, stop), [0.0, V_B], method="Radau", rtol=1e-11, atol=1e-13, dense_output=True)


@pytest.mark.parametrize("c, r_e", [(C_B, 30.0), (20e-6, 30.0), (2e-3, 300.0), (0.0, 30.0)],
                         ids=["under", "strongly-under", "over", "converter"])
def test_against_kirchhoff_in_solve_ivp(c, r_e):
    from scipy.integrate import quad

    b = boost_model.boost(V_B, c, R, _coil(), r_e)
    m = boost_model.of(b)
    top = float(m.highest_current(b, sensed=True))
    th = 0.7 * top if c > 0 else I_TH
    t_th = float(m.threshold_time(th, b, sensed=True))
    t_pk = float(m.peak_time(b)) if c > 0 else t_th
    sol = _kirchhoff(c, r_e, 1.5 * max(t_pk, t_th))

    def terminal(t):
        y = sol.sol(t)
        return (y[1] + r_e * y[0]) / (R + r_e)

    # scipy solve_ivp (Radau): the terminal current at the model's threshold time, the
    # magnetising current and the capacitor there, within 1e-5
    assert terminal(t_th) == pytest.approx(th, rel=1e-5), c
    i_m, v = (float(x) for x in m.state(t_th, b))
    assert i_m == pytest.approx(sol.sol(t_th)[0], rel=1e-5) and v == pytest.approx(sol.sol(t_th)[1], rel=1e-7)
    # the pull-in on the magnetising current: the model's time to 90 % of it there
    t_m = float(m.threshold_time(0.9 * i_m, b))
    assert sol.sol(t_m)[0] == pytest.approx(0.9 * i_m, rel=1e-5)
    if c > 0:   # the first maxima of both currents (dense grid of the reference: 1e-4)
        tt = np.linspace(0.0, 1.5 * t_pk, 30001)
        y = sol.sol(tt)
        assert t_pk == pytest.approx(tt[np.argmax(y[0])], abs=1e-4 * t_pk)
        assert top == pytest.approx(np.max((y[1] + r_e * y[0]) / (R + r_e)), rel=1e-6)
        assert math.isinf(float(m.threshold_time(1.01 * top, b, sensed=True)))
    # scipy quad of the reference: the copper's int i^2 dt and the eddy loss int v_m^2/R_e dt
    # within 1e-5; the energy drawn = field + copper + eddy (conservation of energy)
    sq, _ = quad(lambda t: terminal(t) ** 2, 0.0, t_th, epsabs=1e-14, limit=400)
    ed, _ = quad(lambda t: (sol.sol(t)[1] - R * terminal(t)) ** 2 / r_e, 0.0, t_th, epsabs=1e-14, limit=400)
    assert float(m.square_integral(t_th, b)) == pytest.approx(sq, rel=1e-5)
    assert float(m.eddy_loss(t_th, b)) == pytest.approx(ed, rel=1e-4)
    field = float(flux.energy(_coil(), i_m))
    assert float(m.energy_drawn(t_th, b)) == pytest.approx(field + R * sq + ed, rel=1e-5)


def test_no_eddy_limit():
    # hand-worked: R_e -> inf is the plain boost into the curve (10 Mohm: the eddy share
    # R/R_e is 3e-7; the equivalent circuit steps w = v + R_e i_m, so a far larger R_e
    # would lose the bus to rounding)
    for c in (C_B, 0.0):
        far, plain = boost_model.boost(V_B, c, R, _coil(), 1e7), boost_model.boost(V_B, c, R, _coil())
        m = boost_model.of(far)
        assert float(m.threshold_time(I_TH, far, sensed=True)) == pytest.approx(
            float(m.threshold_time(I_TH, plain)), rel=2e-6)


@pytest.mark.ngspice
def test_against_ngspice(tmp_path):
    from ngspice_run import run
    from test_flux_ngspice import _flux_netlist

    r_e = 40.0
    b = boost_model.boost(V_B, C_B, R, _coil(), r_e)
    m = boost_model.of(b)
    t_th = float(m.threshold_time(I_TH, b, sensed=True))
    t_off = t_th * 1.05
    i_m, v_off = (float(x) for x in m.state(t_off, b))
    step = t_th / 3000
    text = boost_netlist("* boosted peak into a saturating coil with an eddy resistance across it",
                         ["LCOIL n3 drain 1 IC=0"], t_off, t_th, step, t_off + 0.3 * t_th,
                         [f"meas tran phith FIND v(phi) AT={t_th!r}"])
    text = _flux_netlist(text, SimpleNamespace(inductance=_coil()), top=float(CURVE_I[-1]))
    text = text.replace("GINT 0 phi", f"REDDY n3 drain {r_e!r}\nGINT 0 phi", 1)
    res = run(tmp_path, "boost-flux-eddy", text)
    # ngspice: the terminal current's threshold, the (terminal) current at the turn-off, the
    # capacitor's droop, each within 1 %
    assert_peak(res, b, t_th, step, float(m.terminal(i_m, v_off, b)))
    # ngspice: the flux at the threshold (the magnetising current's), within 1 %
    assert res["phith"] == pytest.approx(float(flux.linkage(_coil(), m.state(t_th, b)[0])), rel=0.01)


def test_design_and_simulate_end_to_end(tmp_path):
    path = _drive(tmp_path, ("inductance_tolerance", 'eddy_resistance = "1 kohm"\ninductance_tolerance'))
    out = _cli("design", str(path), "--json")
    assert out.exit_code in (0, 1), out.stderr
    d = json.loads(out.stdout)
    bst, pin = d["boost"], d["pull_in"]
    # the threshold raised by the eddy share's bound V_b,max / R_e (48 V + 5 %, 1 kohm)
    assert bst["threshold_a"] == pytest.approx(1.2 * pin["current_a"] + 50.4 / 1000.0)
    assert d["eddy"]["resistance_ohm"] == 1000.0 and pin["force_time_s"] > 0
    csv = tmp_path / "s.csv"
    out = _cli("simulate", str(path), "--supply", "12", "--coil-temp", "25", "--hold-time", "0.5e-3",
               "--csv", str(csv))
    assert out.exit_code == 0, out.stderr
    head = csv.read_text().splitlines()
    assert "magnetising_current_a" in head[0] and "boost_v" in head[0]
    # switch-on: the terminal current steps to V_b / (R + R_e), the magnetising one is 0
    cols = head[0].split(",")
    first = dict(zip(cols, map(float, head[1].split(","))))
    assert first["magnetising_current_a"] == 0.0 and 0.0 < first["current_a"] < 48.0 / 1000.0
    # the model's device (emulate without --firmware): the peak ends at the threshold (the
    # terminal current, what the sense reads) and check passes its capture
    assert_device_passes(path, tmp_path)


@pytest.mark.compiler
def test_compiled_driver_in_the_loop(tmp_path):
    # gcc builds firmware-driver's C; in the loop the hottest coil at its high R and L on the
    # lowest supply (the longest peak) ends at the threshold without a fault, within the
    # design's fastest time and its time-out (the emulator steps the capacitor into the
    # curve with the eddy term from the magnetising current and the capacitor where the
    # driver switches the boost on: the design's physics, so this proves plumbing)
    from conftest import require_tool
    from test_boost_flux import _run_in_the_loop

    from coildrive.bench.messages import Event, EventKind
    from coildrive.codegen.host_build import build_firmware
    from coildrive.config import load_drive
    from coildrive.design import design

    require_tool("gcc")
    # 3 kohm: the raised threshold's end current stays inside the over-current code's reach
    # (at 1 kohm the design's adc_over_current fails, and firmware-driver refuses it)
    path = _drive(tmp_path, ("inductance_tolerance", 'eddy_resistance = "3 kohm"\ninductance_tolerance'))
    assert _cli("firmware-driver", str(path), "--out", str(tmp_path / "fw")).exit_code == 0
    d = design(load_drive(path))
    lib = build_firmware(tmp_path / "fw", d, cache=tmp_path / "cache")
    c = d.drive.coil
    hot = max(x.coil_temp_c for x in d.corners)
    events = [m for m in _run_in_the_loop(d, lib, supply=d.drive.supply.min, coil_temp=hot,
                                          resistance_scale=1 + c.resistance_tolerance,
                                          inductance_scale=1 + c.inductance_tolerance, noise_codes=1, seed=3,
                                          hold_time=0.005) if isinstance(m, Event)]
    kinds = [e.kind for e in events]
    assert EventKind.PEAK_END in kinds and EventKind.FAULT not in kinds and EventKind.OFF in kinds, kinds
    on = next(e.index for e in events if e.kind == EventKind.ON)
    end = next(e.index for e in events if e.kind == EventKind.PEAK_END)
    took = (end - on) / d.drive.board.adc.sample_rate
    assert d.boost.fastest_time_s <= took <= d.pull_in.peak_time_s, took
