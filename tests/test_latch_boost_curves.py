"""A latching coil's pulses from the boost on a flux-linkage curve and with an eddy-current
term ([hold] mode = "latch", [supply] boost, [coil] flux_current / flux_linkage,
eddy_resistance on either winding): each pulse is the monostable boosted peak's run
(coildrive/model/flux_boost.py) until its own threshold.

The drives are the bundled boosted latch (examples/latching/shutoff-valve-boost-reset-
winding-12v.toml) with an invented saturating curve in place of the set winding's 20 mH
(``psi = 12 mWb tanh(i / 0.7 A) + 4 mH i``: 21 mH at zero current, about 5 mH by 1.5 A),
alone (``CURVE``) and with 300 ohm across it and 200 ohm across the linear reset winding
(``EDDY``). References, each written afresh from the circuit's equations:

* scipy's ``solve_ivp`` (Radau, rtol 1e-10) of Kirchhoff's laws (the loop ``v_C = R i +
  v_m``, the node ``i = i_m + v_m/R_e``, ``L_d(i_m) di_m/dt = v_m``, ``C dv_C/dt = -i``; the
  curve by scipy's own ``PchipInterpolator``; copper R(T) by IEC 60028, alpha 0.00393 /K),
  an event where the terminal current reaches the threshold code's highest trip current,
  one scheduler tick more, then the freewheel decay ``v_m = -(R_off i + V_d)`` to the
  terminal current's zero, with states for ``int i^2 dt``, ``int i dt`` and ``int v_m^2/R_e
  dt``; the flux's tail after the diode blocks gives the eddy resistance what the field
  then holds (first law), ``int i dpsi`` by scipy's ``quad``: each pulse's time to its
  current at the worst corner, the longest pulse and the lowest boost on the slow side,
  and the energies (boost, copper, freewheel, eddy, field) and the time to zero at the
  energy corner, within 1e-5 (measured: 2.3e-7 at most);
* ngspice (batch mode): tests/test_latch_boost.py's deck (ngspice's own threshold
  turn-off) with the reset winding and a resistor across its inductance, at the reset
  pulse's energy corner: times, currents, the boost's droop and the energies (boost,
  copper, freewheel diode, eddy resistance) within 1 % (measured 4.2e-4 at most);
* the model's device -> capture -> check (plumbing: the device runs the design's physics),
  and a coil three times slower times out with the driver's FAULT; the same through the
  compiled reference driver in the loop.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import EXAMPLES, require_tool, run_cli
from test_latch_boost import header_holds, samples_inside_the_corners
from test_latch_flux import CURVE_I, _psi, curve_drive
from test_reference_ngspice_latch import _corner

from coildrive.config import load_drive
from coildrive.design.latch import design_latch

VALVE = EXAMPLES / "latching" / "shutoff-valve-boost-reset-winding-12v.toml"
SHAPE = {"flux": 0.012, "knee": 0.7, "air": 0.004}
R_E = {"set": 300.0, "reset": 200.0}


def _write(tmp_path, eddy: bool):
    path = curve_drive(tmp_path, base=VALVE, old='inductance = "20 mH"\n', **SHAPE)
    if eddy:   # each winding's section: [coil] (the set winding) and [reset_coil]
        head, tail = path.read_text().split("[reset_coil]")
        line = "inductance_tolerance = 0.15\n"
        path = path.with_name("eddy-" + path.name)
        path.write_text(head.replace(line, f'{line}eddy_resistance = "{R_E["set"]:g} ohm"\n') + "[reset_coil]"
                        + tail.replace(line, f'{line}eddy_resistance = "{R_E["reset"]:g} ohm"\n', 1))
    return path


@pytest.fixture(scope="module")
def designs(tmp_path_factory):
    out = {}
    for name, eddy in (("curve", False), ("eddy", True)):
        path = _write(tmp_path_factory.mktemp(name), eddy)
        out[name] = (path, design_latch(load_drive(path)))
    return out


def _winding(drive, name: str, rf: float, lf: float, temp: float):
    """The winding's loop written afresh: ``(R_coil, R on (+ R_b), R off, L_d(i) H, R_e or None)``."""
    coil = drive.coil if name == "set" else drive.latch.reset_coil
    r_coil = coil.resistance * rf * (1 + 0.00393 * (temp - coil.reference_temp))   # IEC 60028
    r_sense = drive.board.sense.resistance           # in the coil path: on and freewheeling
    r_on = r_coil + drive.switch.on_resistance + r_sense + drive.supply.boost_resistance
    if name == "set":
        from scipy.interpolate import PchipInterpolator
        d = PchipInterpolator(CURVE_I, _psi(CURVE_I, **SHAPE)).derivative()

        def ld(i):
            return lf * float(d(max(i, 0.0)))
    else:
        def ld(_i):
            return lf * coil.inductance
    r_e = coil.eddy_resistance or None
    return r_coil, r_on, r_coil + r_sense, ld, r_e


def _terminal(i_m, v, r, r_e):
    """The loop ``v = r i + v_m`` and the node ``i = i_m + v_m/R_e`` solved for ``i``."""
    return i_m if r_e is None else (v + r_e * i_m) / (r + r_e)


def _reference(drive, name: str, label: str, high: bool, trip: float, current: float):
    """solve_ivp of the pulse at the corner ``label`` from the boost at its highest or lowest
    (module docstring): a dict of the figures."""
    from scipy.integrate import quad, solve_ivp

    v, temp, rf, lf = _corner(label)
    s = drive.supply
    sign = 1.0 if high else -1.0
    v_b, c_b = s.boost * (1 + sign * s.boost_tolerance), s.boost_capacitance * (1 + sign * s.boost_capacitance_tolerance)
    r_coil, r_on, r_off, ld, r_e = _winding(drive, name, rf, lf, temp)
    late = 1.0 / drive.board.tick.rate
    kw = dict(method="Radau", rtol=1e-10, atol=1e-13)

    def on(_t, y):        # i_m, v_C, int i^2 dt, int v_m^2/R_e dt
        i = _terminal(y[0], y[1], r_on, r_e)
        vm = y[1] - r_on * i
        return [vm / ld(y[0]), -i / c_b, i * i, 0.0 if r_e is None else vm * vm / r_e]

    def hit(_t, y):
        return _terminal(y[0], y[1], r_on, r_e) - trip
    hit.terminal = True

    def reach(_t, y):     # the magnetising current (the flux, the force) at the pulse's current
        return y[0] - current
    y0 = [0.0, v_b, 0.0, 0.0]
    first = solve_ivp(on, (0.0, 1.0), y0, events=[hit, reach], **kw)
    t_trip = float(first.t_events[0][0])
    reached = solve_ivp(on, (0.0, 1.0), y0, events=[reach], **kw).t_events[0]
    rest = solve_ivp(on, (t_trip, t_trip + late), first.y_events[0][0], **kw)
    i_m, v_c, s_on, e_on = rest.y[:, -1]
    v_d = drive.freewheel.diode_drop

    def off(_t, y):       # i_m, int i^2 dt, int i dt, int v_m^2/R_e dt while the diode conducts
        i = y[0] if r_e is None else (r_e * y[0] - v_d) / (r_off + r_e)
        vm = -(r_off * i + v_d)
        return [vm / ld(y[0]), i * i, i, 0.0 if r_e is None else vm * vm / r_e]

    def zero(_t, y):
        return y[0] if r_e is None else (r_e * y[0] - v_d)
    zero.terminal, zero.direction = True, -1
    dec = solve_ivp(off, (0.0, 1.0), [i_m, 0.0, 0.0, 0.0], events=zero, **kw)
    i_b, s_d, q_d, e_d = dec.y_events[0][0]

    def field(i):         # int_0^i i' dpsi(i') (J), scipy quad
        return quad(lambda x: x * ld(x), 0.0, i, limit=200)[0]
    return {"time_to_current": float(reached[0]) if reached.size else math.inf, "seen": t_trip + late,
            "v_c": v_c, "supply_j": 0.5 * c_b * (v_b**2 - v_c**2), "copper_j": r_coil * (s_on + s_d),
            "freewheel_j": v_d * q_d, "eddy_j": 0.0 if r_e is None else e_on + e_d + field(i_b),
            "stored_j": field(i_m), "t_zero": float(dec.t_events[0][0]),
            "switch_sense_j": drive.switch.on_resistance * s_on + drive.board.sense.resistance * (s_on + s_d),
            "boost_j": s.boost_resistance * s_on}


def design_decay(drive, name: str, label: str, high: bool, trip: float) -> float:
    """The model's time to zero (s) after the pulse at the corner ``label`` (the boost at its
    highest or lowest, the threshold seen one tick late)."""
    from coildrive.design.boost import boost_side
    from coildrive.design.latch import winding_drive
    from coildrive.model import boost as boost_model
    from coildrive.model.circuit import loop
    from coildrive.model.rl import decay_time

    wd = winding_drive(drive, name == "reset")
    point = _corner(label)
    lp, rel = loop(wd, *point), loop(wd, *point, path="release")
    bb = boost_side(wd, lp, lp.inductance, high)
    m = boost_model.of(bb)
    i_top = m.state(m.threshold_time(trip, bb, sensed=True) + 1.0 / drive.board.tick.rate, bb)[0]
    return float(decay_time(0.0, i_top, rel.r_off, rel.v_off, lp.inductance))


@pytest.mark.parametrize("case, name", [("curve", "set"), ("eddy", "set"), ("eddy", "reset")])
def test_pulses_against_kirchhoff_in_solve_ivp(designs, case, name):
    path, d = designs[case]
    drive = d.drive
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = next(x for x in d.latch.pulses if x.name == name)
    b = p.boost
    # the threshold is raised by the eddy share's bound V_b,max / R_e (hand-worked: 42 V / R_e)
    r_e = R_E[name] if case == "eddy" else None
    assert b.threshold_a == pytest.approx(p.current_margin * p.current_a + (42.0 / r_e if r_e else 0.0), rel=1e-12)
    # scipy solve_ivp: the magnetising current's time to the pulse's current at the worst
    # corner (the boost at its lowest), within 1e-4
    ref = _reference(drive, name, p.worst_corner, False, b.trip_max_a, p.current_a)
    assert p.worst_time_s == pytest.approx(ref["time_to_current"], rel=1e-5)
    # the slow side: the longest pulse (seen one tick late) and the boost's lowest there
    ref = _reference(drive, name, b.time_to_threshold_corner, False, b.trip_max_a, p.current_a)
    assert b.time_to_threshold_s == pytest.approx(ref["seen"], rel=1e-5)
    assert b.lowest_boost_v == pytest.approx(ref["v_c"], rel=1e-5)
    # the energy corner: the boost's energy, the copper's, the sense resistor's share, the
    # freewheel diode's, the eddy resistance's and the field's at the turn-off; the time to zero
    high = p.energy_corner.endswith("the boost at its highest")
    ref = _reference(drive, name, p.energy_corner, high, b.trip_max_a, p.current_a)
    for key in ("supply_j", "copper_j", "switch_sense_j", "boost_j", "freewheel_j", "stored_j", "eddy_j"):
        assert getattr(p, key) == pytest.approx(ref[key], rel=1e-5, abs=1e-12), key
    assert (p.eddy_j > 0.05 * p.supply_j) if r_e else p.eddy_j == 0.0
    # the time to zero there, and the design's (the longest over the corners) at least that
    t_zero = design_decay(drive, name, p.energy_corner, high, b.trip_max_a)
    assert t_zero == pytest.approx(ref["t_zero"], rel=1e-5)
    assert ref["t_zero"] <= p.decay_time_s * (1 + 1e-5)
    # conservation of energy (common practice): the boost's energy is what the loop takes
    assert p.supply_j == pytest.approx(p.copper_j + p.switch_sense_j + p.boost_j + p.freewheel_j + p.eddy_j,
                                       rel=1e-6)


@pytest.mark.ngspice
def test_reset_pulse_with_its_eddy_term_against_ngspice(designs, tmp_path):
    """ngspice (batch mode): tests/test_latch_boost.py's deck of a pulse from the boost with
    ngspice's own threshold turn-off, the reset winding in it with a resistor across its
    inductance, at the reset pulse's energy corner: the time to the trip current and the
    turn-off, the terminal current just before it and the capacitor there, the capacitor's, the copper's,
    the freewheel diode's and the eddy resistance's energy and the time to zero, each
    within 1 %."""
    from ngspice_run import run
    from test_latch_boost import _netlist, _side
    from coildrive.design.latch import winding_drive
    from coildrive.model import boost as boost_model
    from coildrive.model.circuit import loop
    from coildrive.model.rl import decay_time

    _, d = designs["eddy"]
    p = d.latch.pulses[1]
    wd = winding_drive(d.drive, True)
    high = p.energy_corner.endswith("the boost at its highest")
    point = _corner(p.energy_corner)
    lp, rel = loop(wd, *point), loop(wd, *point, path="release")
    v_b, c_b = _side(wd, high)
    r_e, ind = R_E["reset"], float(lp.inductance.magnetising)
    late = 1.0 / wd.board.tick.rate
    bm = boost_model.boost(v_b, c_b, float(lp.r_on) + wd.supply.boost_resistance, ind, r_e)
    t_trip = float(boost_model.threshold_time(p.boost.trip_max_a, bm, sensed=True))
    i_m, v_off = (float(x) for x in boost_model.state(t_trip + late, bm))
    # the terminal current just before the turn-off (q at 0.499 V: 0.002 of a tick before it)
    i_on = float(boost_model.current(t_trip + 0.998 * late, bm, sensed=True))
    t_zero = float(decay_time(0.0, i_m, rel.r_off, rel.v_off, lp.inductance))
    step = t_trip / 4000
    res = run(tmp_path, "latch-boost-eddy", _netlist(wd, point[0], float(lp.r_coil), ind, v_b, c_b, p.boost.trip_max_a,
                                                     late, t_trip + late + 1.3 * t_zero + 10 * ind / r_e, step, r_e))
    assert abs(res["tth"] - t_trip) <= 0.01 * t_trip + step, (res["tth"], t_trip)
    assert abs(res["toff"] - t_trip - late) <= 0.01 * (t_trip + late) + step, res["toff"]
    assert res["ion"] == pytest.approx(i_on, rel=0.01) and v_b - res["vcoff"] == pytest.approx(v_b - v_off, rel=0.01)
    for key, ours in (("ecap", p.supply_j), ("ecu", p.copper_j), ("efw", p.freewheel_j), ("eeddy", p.eddy_j)):
        assert res[key] == pytest.approx(ours, rel=0.01), (key, res[key], ours)
    assert abs(res["tzero"] - res["toff"] - t_zero) <= 0.01 * t_zero + step, (res["tzero"] - res["toff"], t_zero)


def test_cli_header_simulate_and_the_bench(designs, tmp_path):
    path, d = designs["eddy"]
    r = run_cli("design", str(path), "--json", "--header", str(tmp_path / "v.h"), "--prefix", "SHUT")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    pulses = doc["latch"]["pulses"]
    assert all(p["eddy_j"] > 0 and p["boost"]["threshold_code"] > 0 for p in pulses)
    header_holds(tmp_path, "v.h", f'SHUT_LATCH_BOOSTED == 1U && SHUT_SET_THRESHOLD_CODE == '
                 f'{pulses[0]["boost"]["threshold_code"]}U && SHUT_RESET_PULSE_TICKS == {pulses[1]["ticks"]}U')
    # simulate: the current columns are the terminal currents (the sense's): at switch-on
    # the eddy resistance's step V_b / (R + R_e) (hand-worked), each pulse ending at the
    # first tick whose reading is its code
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", "9", "--coil-temp", "120", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    _, r_on, _, _, _ = _winding(d.drive, "set", 1.0, 1.0, 120.0)
    assert w["current_a"][0] == pytest.approx(40.0 / (r_on + R_E["set"]), rel=1e-6)
    lsb_a = 3.3 / 4096 / (0.1 * 20)
    for col, p in zip(("current_a", "reset_current_a"), d.latch.pulses):
        assert w[col].max() >= p.boost.threshold_code * lsb_a, col
    assert w["boost_v"][0] == 40.0 and w["boost_v"].min() < 39.0
    passes_and_slow_times_out(d, tmp_path)


def passes_and_slow_times_out(d, tmp_path, make=None) -> None:
    """emulate -> check (plumbing: the device runs the design's physics) of the boosted latch
    ``d`` at 9 V with the coil at 100 degC: it passes, and three times the inductance times
    out with the driver's FAULT. ``make(options)``: the device (the model's
    :class:`~coildrive.bench.latch_device.LatchDevice` by default; a firmware device runs
    its interval longer)."""
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_device import LatchDevice
    from coildrive.bench.messages import EventKind, FaultCode

    for name, l_scale, ok in (("good", 1.0, True), ("slow", 3.0, False)):
        opts = DeviceOptions(noise_codes=0.5, seed=5, supply=9.0, coil_temp=100.0, inductance_scale=l_scale)
        dev = LatchDevice(d, opts) if make is None else make(opts)
        extra = 0.0 if make is None else dev.interval
        msgs, _ = run_device(dev, 0.05 + extra + 2.2 * dev.period, step=0.05)
        cap = capture_of(msgs, tmp_path / f"{name}.cdcap")
        rep = check_latch_capture(cap, d, coil_temp=100.0)
        assert rep.ok is ok, (name, [(i.name, i.status, i.detail) for i in rep.items])
        faults = {e.value for e in cap.events if e.kind == EventKind.FAULT}
        assert faults == (set() if ok else {int(FaultCode.BOOST_TIMEOUT)}), name


def test_monte_carlo_inside_the_corners(designs):
    """The samples lie inside the corners' box (the boost's charge and capacitance drawn
    within their tolerances too), so the corners bound them."""
    for _, d in designs.values():
        samples_inside_the_corners(d, 300)


def built_driver(path, d, tmp_path, monkeypatch):
    """``firmware-driver`` of the drive file ``path`` (its design ``d``) compiled for the
    loop (gcc): the library :class:`~coildrive.bench.latch_firmware_device.LatchFirmwareDevice`
    runs."""
    from coildrive.codegen.host_build import build_latch_firmware

    require_tool("gcc")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    r = run_cli("firmware-driver", str(path), "--out", str(tmp_path / "fw"))
    assert r.returncode == 0, r.stderr
    return build_latch_firmware(tmp_path / "fw", d)


def test_compiled_driver_in_the_loop(designs, tmp_path, monkeypatch):
    """firmware-driver -> the compiled driver in the model's device (gcc; plumbing: the
    model is the design's own) -> check, on the curve with eddy terms: passes at 9 V with
    a hot coil; three times the inductance times out with the driver's FAULTs, which the
    model's own device streams at the same samples."""
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_device import LatchDevice
    from coildrive.bench.latch_firmware_device import LatchFirmwareDevice
    from coildrive.bench.messages import EventKind
    from coildrive.codegen.latch_driver import pulse_switches

    path, d = designs["eddy"]
    lib = built_driver(path, d, tmp_path, monkeypatch)

    def faults(cap):
        return [(e.index - max(o.index for o in cap.events if o.kind == EventKind.ON and o.index <= e.index), e.value)
                for e in cap.events if e.kind == EventKind.FAULT]
    for name, extra, ok in (("good", {}, True), ("slow", dict(inductance_scale=3.0), False)):
        opts = DeviceOptions(noise_codes=0.5, seed=5, supply=9.0, coil_temp=100.0, **extra)
        dev = LatchFirmwareDevice(d, lib, pulse_switches(d), opts)
        cap = capture_of(run_device(dev, 0.05 + dev.interval + 2.2 * dev.period, step=0.05)[0], tmp_path / f"{name}.cdcap")
        rep = check_latch_capture(cap, d, coil_temp=100.0)
        assert rep.ok is ok, (name, [(i.name, i.status, i.detail) for i in rep.items])
        model = LatchDevice(d, opts)
        mine = capture_of(run_device(model, 0.05 + 2.2 * model.period, step=0.05)[0], tmp_path / f"m{name}.cdcap")
        assert set(faults(mine)) == set(faults(cap)) and bool(faults(cap)) == (not ok), name
