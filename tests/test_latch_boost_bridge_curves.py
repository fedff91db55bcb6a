"""A latching coil on a full bridge with both pulses from the boost, on a flux-linkage curve
and with an eddy-current term: after each pulse the fast decay returns up the body diodes
into the boost capacitor (coildrive/model/flux_bus_decay.py ``boost_return``: the curve's run
stepped in the falling current, an eddy term's on its equivalent circuit with no source).

The drives are the bundled bridge latch from the boost
(examples/latching/sprinkler-valve-bridge-boost-12v.toml) with an invented saturating curve
in place of its 15 mH (``psi = 12 mWb tanh(i / 0.7 A) + 4 mH i``), alone (``curve``) and with
300 ohm across it (``eddy``). Reference, written afresh from the circuit's equations:

* scipy's ``solve_ivp`` (Radau, rtol 1e-10) of Kirchhoff's laws -- on: the boost capacitor
  through ``R_b``, two bridge switches, the sense resistor and the coil, ``v_C = R_on i +
  v_m``; off: the current up two body diodes and the boost switch's into the capacitor,
  ``v_m = -(v_C + 3 V_d + (R_coil + R_sense + R_b) i)``, ``C dv_C/dt = i``; the node ``i = i_m
  + v_m/R_e``, ``L_d(i_m) di_m/dt = v_m`` with ``L_d`` scipy's own ``PchipInterpolator``
  differentiated; copper R(T) by IEC 60028 (alpha 0.00393 /K). An event at the threshold
  code's highest trip current, one scheduler tick more, then the return to the terminal
  current's zero; the flux's tail after the diodes block gives the eddy resistance what the
  field then holds (first law, ``int i dpsi`` by scipy's ``quad``). At each pulse's energy
  corner the design's energies (from the boost, back into it, copper, switches and sense,
  the boost path, the three diodes, the eddy resistance, the field) and the time to zero,
  within 1e-5; the slow side's longest pulse and lowest boost too;
* the first law (common practice): what the boost gives is what the loop's elements take
  plus what returns into it;
* the model's device -> capture -> check (plumbing: the device runs the design's physics):
  it passes, and three times the inductance times out with the driver's FAULT; the same
  through the compiled reference latch driver (gcc) in the loop; Monte Carlo samples never
  outside the corners.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from test_latch_boost import _side, samples_inside_the_corners
from test_latch_boost_curves import built_driver, passes_and_slow_times_out
from test_latch_flux import CURVE_I, _psi, curve_drive
from test_reference_ngspice_latch import _corner

from coildrive.config import load_drive
from coildrive.design.latch import design_latch

VALVE = EXAMPLES / "latching" / "sprinkler-valve-bridge-boost-12v.toml"
SHAPE = {"flux": 0.012, "knee": 0.7, "air": 0.004}
R_E = 300.0


@pytest.fixture(scope="module")
def designs(tmp_path_factory):
    out = {}
    for name in ("curve", "eddy"):
        path = curve_drive(tmp_path_factory.mktemp(name), base=VALVE, **SHAPE)
        if name == "eddy":
            line = "inductance_tolerance = 0.15\n"
            path.write_text(path.read_text().replace(line, f'{line}eddy_resistance = "{R_E:g} ohm"\n'))
        out[name] = (path, design_latch(load_drive(path)))
    return out


def _reference(drive, label: str, high: bool, trip: float, r_e):
    """solve_ivp of the pulse and its return at the corner ``label`` (module docstring)."""
    from scipy.integrate import quad, solve_ivp
    from scipy.interpolate import PchipInterpolator

    _, temp, rf, lf = _corner(label)
    s, sense, v_d = drive.supply, drive.board.sense.resistance, drive.freewheel.diode_drop
    v_b, c_b = _side(drive, high)
    r_coil = drive.coil.resistance * rf * (1 + 0.00393 * (temp - drive.coil.reference_temp))   # IEC 60028
    r_on = r_coil + 2 * drive.switch.on_resistance + sense + s.boost_resistance   # two bridge switches, inline sense
    r_off = r_coil + sense + s.boost_resistance
    d = PchipInterpolator(CURVE_I, _psi(CURVE_I, **SHAPE)).derivative()

    def ld(i):
        return lf * float(d(max(i, 0.0)))

    def terminal(i_m, u, r):   # the loop u = r i + v_m and the node i = i_m + v_m/R_e, for i
        return i_m if r_e is None else (u + r_e * i_m) / (r + r_e)
    kw = dict(method="Radau", rtol=1e-10, atol=1e-13)

    def on(_t, y):        # i_m, v_C, int i^2 dt, int v_m^2/R_e dt
        i = terminal(y[0], y[1], r_on)
        vm = y[1] - r_on * i
        return [vm / ld(y[0]), -i / c_b, i * i, 0.0 if r_e is None else vm * vm / r_e]

    def hit(_t, y):
        return terminal(y[0], y[1], r_on) - trip
    hit.terminal = True
    first = solve_ivp(on, (0.0, 1.0), [0.0, v_b, 0.0, 0.0], events=hit, **kw)
    t_trip = float(first.t_events[0][0])
    late = 1.0 / drive.board.tick.rate
    i_m, v_off, s_on, e_on = solve_ivp(on, (t_trip, t_trip + late), first.y_events[0][0], **kw).y[:, -1]

    def off(_t, y):       # i_m, v_C, int i^2 dt, int i dt, int v_m^2/R_e dt while the diodes conduct
        i = terminal(y[0], -(y[1] + 3 * v_d), r_off)
        vm = -(y[1] + 3 * v_d + r_off * i)
        return [vm / ld(y[0]), i / c_b, i * i, i, 0.0 if r_e is None else vm * vm / r_e]

    def zero(_t, y):
        return terminal(y[0], -(y[1] + 3 * v_d), r_off)
    zero.terminal, zero.direction = True, -1
    dec = solve_ivp(off, (0.0, 1.0), [i_m, v_off, 0.0, 0.0, 0.0], events=zero, **kw)
    i_b, v_end, s_d, q_d, e_d = dec.y_events[0][0]

    def field(i):         # int_0^i i' dpsi(i') (J), scipy quad
        return quad(lambda x: x * ld(x), 0.0, i, limit=200)[0]
    return {"seen": t_trip + late, "v_c": v_off, "t_zero": float(dec.t_events[0][0]),
            "supply_j": 0.5 * c_b * (v_b**2 - v_off**2), "returned_j": 0.5 * c_b * (v_end**2 - v_off**2),
            "copper_j": r_coil * (s_on + s_d), "freewheel_j": 3 * v_d * q_d, "stored_j": field(i_m),
            "switch_sense_j": 2 * drive.switch.on_resistance * s_on + sense * (s_on + s_d),
            "boost_j": s.boost_resistance * (s_on + s_d),
            "eddy_j": 0.0 if r_e is None else e_on + e_d + field(i_b)}


def _model_decay(drive, name: str, label: str, high: bool, trip: float) -> float:
    """The model's time to zero (s) of the return after the pulse at ``label``."""
    from coildrive.design.boost import boost_side
    from coildrive.design.latch import winding_drive
    from coildrive.design.latch_boost import return_decay
    from coildrive.model import boost as boost_model
    from coildrive.model.circuit import loop

    wd = winding_drive(drive, name == "reset")
    lp, rel = loop(wd, *_corner(label)), loop(wd, *_corner(label), path="release")
    bb = boost_side(wd, lp, lp.inductance, high)
    m = boost_model.of(bb)
    i_top, v_top = m.state(m.threshold_time(trip, bb, sensed=True) + 1.0 / drive.board.tick.rate, bb)
    return float(np.ravel(return_decay(wd, rel, i_top, v_top, bb.c).zero_time)[0])


@pytest.mark.parametrize("case, name", [("curve", "set"), ("curve", "reset"), ("eddy", "set")])
def test_pulse_and_return_against_kirchhoff_in_solve_ivp(designs, case, name):
    _, d = designs[case]
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = next(x for x in d.latch.pulses if x.name == name)
    b, r_e = p.boost, (R_E if case == "eddy" else None)
    # scipy solve_ivp: the slow side's longest pulse (seen one tick late) and the boost's lowest
    ref = _reference(d.drive, b.time_to_threshold_corner, False, b.trip_max_a, r_e)
    assert b.time_to_threshold_s == pytest.approx(ref["seen"], rel=1e-5)
    assert b.lowest_boost_v == pytest.approx(ref["v_c"], rel=1e-5)
    # the energy corner: every energy of the pulse and its return into the boost capacitor
    high = p.energy_corner.endswith("the boost at its highest")
    ref = _reference(d.drive, p.energy_corner, high, b.trip_max_a, r_e)
    for key in ("supply_j", "returned_j", "copper_j", "switch_sense_j", "boost_j", "freewheel_j", "stored_j",
                "eddy_j"):
        assert getattr(p, key) == pytest.approx(ref[key], rel=1e-5, abs=1e-12), key
    assert (p.eddy_j > 0.05 * p.supply_j) if r_e else p.eddy_j == 0.0
    # the time to zero there (the terminal current's), and the design's (the longest) at least that
    assert _model_decay(d.drive, name, p.energy_corner, high, b.trip_max_a) == pytest.approx(ref["t_zero"], rel=1e-5)
    assert ref["t_zero"] <= p.decay_time_s * (1 + 1e-5)
    # the first law (common practice): the boost's energy is what the loop takes plus what returns
    assert p.supply_j == pytest.approx(p.copper_j + p.switch_sense_j + p.boost_j + p.freewheel_j + p.eddy_j
                                       + p.returned_j, rel=1e-9)
    assert 0.0 < p.returned_j < p.stored_j


def test_cli_simulate_and_the_bench(designs, tmp_path):
    path, d = designs["eddy"]
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    pulses = json.loads(r.stdout)["latch"]["pulses"]
    assert all(p["returned_j"] > 0 and p["eddy_j"] > 0 for p in pulses)
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", "9", "--coil-temp", "100", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    # the set pulse positive, the reset negative; in each return the (terminal) current only
    # falls to its zero and the boost capacitor only rises
    k = int(np.argmax(w["current_a"]))
    decay = (w["time_s"] > w["time_s"][k]) & (w["current_a"] > 0)
    assert w["current_a"].min() < 0 and np.all(np.diff(w["current_a"][decay]) < 0)
    assert np.all(np.diff(w["boost_v"][decay]) > 0)
    # emulate -> check (the model's device: plumbing); three times the inductance times out
    passes_and_slow_times_out(d, tmp_path)
    assert math.isfinite(d.latch.interval_s)


def test_monte_carlo_inside_the_corners(designs):
    """Each sample's return into the boost capacitor (its own charge and capacitance) lies
    inside the corners' box, so the corners bound it."""
    for _, d in designs.values():
        samples_inside_the_corners(d, 150)


def test_compiled_driver_in_the_loop(designs, tmp_path, monkeypatch):
    """firmware-driver -> the compiled reference latch driver (gcc) in the model's device
    (plumbing: the model is the design's own) -> check, on the curve with its eddy term:
    passes at 9 V with a hot coil; three times the inductance times out with its FAULTs."""
    from coildrive.bench.latch_firmware_device import LatchFirmwareDevice
    from coildrive.codegen.latch_driver import pulse_switches

    path, d = designs["eddy"]
    lib = built_driver(path, d, tmp_path, monkeypatch)
    passes_and_slow_times_out(d, tmp_path, lambda opts: LatchFirmwareDevice(d, lib, pulse_switches(d), opts))
