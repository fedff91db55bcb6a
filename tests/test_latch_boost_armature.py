"""A latching coil with a moving armature whose pulses come from the boost ([hold] mode =
"latch", [supply] boost and [armature]): the set pulse is the armature's run from the boost
capacitor until the current reaches its threshold, the armature at rest on the seat by then
(coildrive/design/latch_boost.py, ``armature_pulse``).

The scenario (invented): the plunger valve of examples/latching/plunger-valve-boost-reset-
winding-12v.toml, its set threshold 2 x 0.8 A (at 1.2 x, the current gets there while the
plunger is still in flight: refused).

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the set winding's circuit,
the plunger and the boost capacitor written afresh here in the current (nothing of
coildrive.model), with ``L(x) = L_c / (1 + beta x)`` fitted through the open and seated
inductances (``x`` the gap, ``stroke`` open, 0 seated) and R_coil by IEC 60028 copper::

    L(x) di/dt = u - (R_coil + R_switch + R_sense + R_b) i - i L'(x) v
    C_b du/dt  = -i                                     (the boost capacitor, no source)
    m dv/dt    = preload + rate (stroke - x) + load + i^2 L'(x) / 2 - c v

at rest on the open stop until the pull beats spring + load (an event), in flight to the
seat (an event; an inelastic stop), at rest there until the current reaches the threshold
(an event), then on for the tick until the driver sees it; the freewheel decay ``L_c di/dt
= -((R_coil + R_sense) i + V_d)`` to zero (an event). Checked: the latest seat time, the
fastest and the longest pulse, the capacitor at the longest pulse's end, the highest end
current, the energy from the boost ``C_b (V_b^2 - u^2) / 2``, the copper's and the freewheel
diode's, and the armature's share against the mechanical work (spring and load over the
stroke, ``int c v^2 dt``, the impact's ``m v^2 / 2``): within 1e-5 relative (the batched
model runs at rtol 1e-7).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from test_reference_ngspice_latch import _corner   # a corner's label -> (V, degC, R and L factors)
from coildrive.config import load_drive
from coildrive.design.latch import design_latch

VALVE = EXAMPLES / "latching" / "plunger-valve-boost-reset-winding-12v.toml"


def plunger_valve(tmp_path, margin: float = 2.0):
    """The example with the set threshold at ``margin`` x its current."""
    text = VALVE.read_text()
    old = "current_margin = 2           # its threshold"
    assert old in text
    path = tmp_path / "plunger-valve.toml"
    path.write_text(text.replace(old, f"current_margin = {margin:g}  # its threshold", 1))
    return path


@pytest.fixture(scope="module")
def valve():
    drive = load_drive(VALVE)
    return VALVE, drive, design_latch(drive)


def boost_corner(drive, corner: str, high: bool | None) -> tuple:
    """``(V_main, degC, R and L factors, R_coil, the boost loop's R, R_e (inf: none), V_b, C_b)``
    at a corner's label and boost side (``high``: its tolerances' high end, low end, or
    ``None`` nominal), written afresh: copper by IEC 60028 (0.00393 /K), the loop the coil,
    the switch, the sense resistor and the boost path's resistance in series."""
    v_main, temp, rf, lf = _corner(corner)
    c, s, b = drive.coil, drive.supply, drive.board
    r_coil = c.resistance * (1 + 0.00393 * (temp - c.reference_temp)) * rf   # copper, IEC 60028
    r = r_coil + drive.switch.on_resistance + b.sense.resistance + s.boost_resistance
    sign = 0.0 if high is None else (1.0 if high else -1.0)
    return (v_main, temp, rf, lf, r_coil, r, c.eddy_resistance or math.inf, s.boost * (1 + sign * s.boost_tolerance),
            s.boost_capacitance * (1 + sign * s.boost_capacitance_tolerance))


def reference(drive, corner: str, high: bool | None, trip: float, late: float) -> dict:
    """solve_ivp of the module docstring's equations at the corner's label (the coil's
    temperature and tolerance factors; the main supply feeds nothing while the boost is on)
    from the boost at its highest (``high``), lowest, or nominal (``None``), until the
    current reaches ``trip`` A and ``late`` s on, then the decay to zero. With the drive's
    eddy resistance ``R_e`` across the winding's inductance (test_latch_boost_armature_eddy)
    ``i`` is the branch's current, the terminal current ``i_t = (u + R_e i)/(R + R_e)`` on
    (``(R_e i - V_d)/(R_off + R_e)`` freewheeling, then 0: the flux's tail through ``R_e``
    alone), the branch sees ``v_m = u - R i_t`` (``-(R_off i_t + V_d)``), the threshold,
    ``int i^2 dt`` and the energies take ``i_t``, and ``R_e``'s loss is ``v_m^2 / R_e``. With
    a clamp across the switch (test_latch_boost_clamp) the decay runs from the corner's main
    supply through the winding and the clamp, ``V_clamp - V_main`` in ``V_d``'s place: the
    clamp takes ``V_clamp int i dt``, the main supply gives ``V_main int i dt`` (``main_j``).
    An ideal boost (no ``boost_capacitance``) holds ``u`` at ``V_b`` and gives ``V_b int i_t
    dt``."""
    from scipy.integrate import solve_ivp

    v_main, temp, rf, lf, r_coil, r, r_e, v_b, c_b = boost_corner(drive, corner, high)
    c, a, s, b = drive.coil, drive.armature, drive.supply, drive.board
    ideal = not c_b > 0   # a stiff boost: u stays at V_b
    lc = a.inductance_closed * lf
    beta = (a.inductance_closed / a.inductance_open - 1) / a.stroke   # L(stroke) = the open inductance
    ind = lambda x: lc / (1 + beta * x)                       # noqa: E731
    slope = lambda x: -lc * beta / (1 + beta * x) ** 2        # noqa: E731  dL/dx
    opening = lambda x: a.spring_preload + a.spring_rate * (a.stroke - x) + a.load_force   # noqa: E731
    terminal = lambda y: (y[3] + r_e * y[0]) / (r + r_e) if math.isfinite(r_e) else y[0]   # noqa: E731

    def rhs(free):
        def f(_t, y):
            i, x, v, u = y[:4]
            i_t = terminal(y)
            v_m = u - r * i_t
            loss = v_m * v_m / r_e
            du = 0.0 if ideal else -i_t / c_b
            if not free:
                return [v_m / ind(x), 0.0, 0.0, du, i_t * i_t, 0.0, loss, i_t]
            acc = (opening(x) + 0.5 * i * i * slope(x) - a.damping * v) / a.mass
            return [(v_m - i * slope(x) * v) / ind(x), v, acc, du, i_t * i_t, a.damping * v * v, loss, i_t]
        return f

    def event(fn, direction):
        fn.terminal, fn.direction = True, direction
        return fn

    start = event(lambda _t, y: -0.5 * y[0] ** 2 * slope(a.stroke) - opening(a.stroke), 1)
    at_trip = event(lambda _t, y: terminal(y) - trip, 1)
    seat = event(lambda _t, y: y[1], -1)
    opts = dict(method="DOP853", rtol=1e-11, atol=1e-14)
    out = {}
    crests = []   # the current at each maximum (di/dt falling through zero), every piece

    def run(free, t0, y0, t1, events):
        crest = lambda t, y: rhs(free)(t, y)[0]   # noqa: E731
        crest.direction = -1
        sol = solve_ivp(rhs(free), (t0, t1), y0, events=events + [crest], **opts)
        crests.extend(float(ye[0]) for ye in sol.y_events[-1])
        return sol

    t_end = 1.0 if math.isfinite(trip) else 0.05   # (never there: 50 ms of the capacitor's ringing)
    sol = run(False, 0.0, [0.0, a.stroke, 0.0, v_b, 0.0, 0.0, 0.0, 0.0], t_end, [start, at_trip])
    assert sol.t_events[0].size and not sol.t_events[1].size, "precondition: the plunger starts before the trip"
    sol = run(True, sol.t[-1], sol.y[:, -1], t_end, [seat, at_trip])
    assert sol.t_events[0].size, "precondition: seated before the threshold"
    out.update(seat=float(sol.t[-1]), impact=-float(sol.y[2, -1]))
    y = sol.y[:, -1].copy()
    y[1] = y[2] = 0.0
    sol = run(False, out["seat"], y, t_end, [at_trip])
    out.update(trip=float(sol.t[-1]), top=max(crests + [float(sol.y[0, -1])]))
    if not math.isfinite(trip):
        return out
    sol = solve_ivp(rhs(False), (out["trip"], out["trip"] + late), sol.y[:, -1], **opts)
    i, _, _, u, sq, damp, eddy_on, q = sol.y[:, -1]
    out.update(i=terminal(sol.y[:, -1]), i_m=i, u=u, sq=sq, damp=damp,
               supply_j=v_b * q if ideal else 0.5 * c_b * (v_b**2 - u**2))
    r_off, v_d = r_coil + b.sense.resistance, drive.freewheel.diode_drop   # the sense in the coil path
    clamp = drive.freewheel.type == "clamp"   # across the switch: from the main supply through it
    if clamp:
        v_d = drive.freewheel.clamp_voltage - v_main

    def off(_t, y):   # rows: i, int i_t^2, int i_t, R_e's loss
        i_t = (r_e * y[0] - v_d) / (r_off + r_e) if math.isfinite(r_e) else y[0]
        v_m = -(r_off * i_t + v_d)
        return [v_m / lc, i_t * i_t, i_t, v_m * v_m / r_e]

    zero = event(lambda _t, y: (r_e * y[0] - v_d) / (r_off + r_e) if math.isfinite(r_e) else y[0], -1)
    sol = solve_ivp(off, (0, 1.0), [i, 0.0, 0.0, 0.0], events=[zero], **opts)
    i_block = float(sol.y[0, -1])   # the flux's tail through R_e alone: the field's last energy
    out.update(copper_j=r_coil * (sq + sol.y[1, -1]), zero=float(sol.t[-1]),
               freewheel_j=(v_d + v_main if clamp else v_d) * sol.y[2, -1],
               main_j=v_main * sol.y[2, -1] if clamp else 0.0,
               eddy_j=eddy_on + sol.y[3, -1] + (0.5 * lc * i_block**2 if math.isfinite(r_e) else 0.0),
               work=(a.spring_preload + a.load_force) * a.stroke + 0.5 * a.spring_rate * a.stroke**2
               + damp + 0.5 * a.mass * out["impact"]**2)
    return out


def _side(label: str) -> bool:
    return label.endswith("the boost at its highest")


def set_pulse_against_reference(drive, d, reference=reference):
    """The design ``d``'s set pulse against :func:`reference` (scipy solve_ivp) within 1e-5
    relative (the armature's share against the mechanical work 1e-4): the latest seat, the
    fastest and the longest pulse, the capacitor at its end, the highest (terminal) current
    at a turn-off, the energy from the boost, the copper's, the freewheel diode's, the eddy
    resistance's (0 without one), the main supply's in a clamp's decay (0 without one), the
    armature's; the balance closes (``reference``: another of its signature,
    test_latch_boost_armature_curves' over the curves). Returns the pulse and
    the reference at the highest current's corner, both sides."""
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = next(p for p in d.latch.pulses if p.name == "set")
    b = p.boost
    late = 1.0 / drive.board.tick.rate
    # the latest seat (the threshold itself: the shortest pulse any chain gives)
    ref = reference(drive, p.seat_corner, _side(p.seat_corner), b.threshold_a, 0.0)
    assert p.seat_time_s == pytest.approx(ref["seat"], rel=1e-5)
    assert "set_armature_seats" in [c.name for c in d.checks if c.ok]
    # the fastest pulse: the boost at its highest to the threshold itself
    assert b.fastest_time_s == pytest.approx(reference(drive, b.fastest_corner, True, b.threshold_a, 0.0)["trip"],
                                             rel=1e-5)
    # the longest: the boost at its lowest to the highest trip current, seen a tick late;
    # the capacitor at its end (the droop check's)
    ref = reference(drive, b.time_to_threshold_corner, False, b.trip_max_a, late)
    assert b.time_to_threshold_s == pytest.approx(ref["trip"] + late, rel=1e-5)
    assert b.lowest_boost_v == pytest.approx(reference(drive, b.lowest_boost_corner, False, b.trip_max_a,
                                                       late)["u"], rel=1e-5)
    # the most current at a turn-off: either side of the boost at its corner, a tick late
    tops = [reference(drive, b.end_current_corner, h, b.trip_max_a, late) for h in (False, True)]
    assert b.end_current_max_a == pytest.approx(max(x["i"] for x in tops), rel=1e-5)
    # the energy from the boost, the copper's, the diode's, the eddy resistance's and the
    # armature's (the balance's remainder: the mechanical work)
    ref = reference(drive, p.energy_corner, _side(p.energy_corner), b.trip_max_a, late)
    assert p.supply_j == pytest.approx(ref["supply_j"], rel=1e-5) and b.energy_j == pytest.approx(p.supply_j)
    assert p.copper_j == pytest.approx(ref["copper_j"], rel=1e-5)
    assert p.freewheel_j == pytest.approx(ref["freewheel_j"], rel=1e-5)
    assert p.main_supply_j == pytest.approx(ref["main_j"], rel=1e-5, abs=1e-15)
    assert p.eddy_j == pytest.approx(ref["eddy_j"], rel=1e-5, abs=1e-15)
    assert p.armature_j == pytest.approx(ref["work"], rel=1e-4)
    assert p.supply_j + p.main_supply_j == pytest.approx(p.copper_j + p.switch_sense_j + p.boost_j + p.freewheel_j
                                                         + p.eddy_j + p.armature_j)
    return p, tops


def test_set_pulse_against_solve_ivp(valve):
    _, drive, d = valve
    p, _ = set_pulse_against_reference(drive, d)
    b = p.boost
    assert p.armature_j > 0.02 * p.supply_j and p.eddy_j == 0.0
    # hand-worked: the recharge of the larger pulse's energy at boost_power sets the interval
    assert d.latch.boost_interval_s == pytest.approx(max(x.boost.time_to_threshold_s for x in d.latch.pulses)
                                                     + b.energy_j / drive.supply.boost_power, rel=1e-9)


def simulated_set_pulse(path, drive, d, code: int, tmp_path, plot: bool = False, ref=reference) -> None:
    """``simulate`` at 9 V, coil 20 degC: the set pulse ends at the first tick whose reading is
    the threshold ``code``, on the armature's run from the nominal boost -- its length, the
    (terminal) current and the boost capacitor at its end against :func:`reference` (scipy
    solve_ivp), within 1e-4 and 1e-5."""
    from coildrive.design.boost import nominal_trip
    from coildrive.design.latch import firmware_pulse

    csv = tmp_path / "s.csv"
    extra = ("--plot", str(tmp_path / "s.png")) if plot else ()
    r = run_cli("simulate", str(path), "--supply", "9", "--coil-temp", "20", "--csv", str(csv), *extra)
    assert r.returncode == 0, r.stderr
    assert not plot or (tmp_path / "s.png").stat().st_size > 0
    w = np.genfromtxt(csv, delimiter=",", names=True)
    rate = drive.board.tick.rate
    corner, trip = "9 V, coil 20 degC, R nom, L nom", nominal_trip(drive, code)
    t_code = ref(drive, corner, None, trip, 0.0)["trip"]
    length = firmware_pulse(d, "set", 9.0, 20.0)
    assert length == pytest.approx(math.ceil(t_code * rate) / rate, abs=1e-12)
    ref = ref(drive, corner, None, trip, length - t_code)
    end = int(np.searchsorted(w["time_s"], length))
    assert w["current_a"][end] == pytest.approx(ref["i"], rel=1e-4)        # scipy solve_ivp
    assert w["boost_v"][end] == pytest.approx(ref["u"], rel=1e-5)


def device_checks(d, tmp_path, fault: dict | None = None) -> None:
    """emulate -> check with the model's device at 9 V, coil 100 degC (plumbing): the design
    ``d`` passes, and a coil with 40 % more resistance (or the :class:`DeviceOptions`
    ``fault``) fails."""
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_device import LatchDevice

    for name, options, ok in (("good", {}, True), ("bad", fault or {"resistance_scale": 1.4}, False)):
        dev = LatchDevice(d, DeviceOptions(noise_codes=0.5, seed=5, supply=9.0, coil_temp=100.0, **options))
        msgs, _ = run_device(dev, 0.05 + 2.2 * dev.period, step=0.05)
        rep = check_latch_capture(capture_of(msgs, tmp_path / f"{name}.cdcap"), d, coil_temp=100.0)
        assert rep.ok is ok, (name, [(i.name, i.status, i.detail) for i in rep.items])


def test_cli_design_simulate_emulate_check_and_monte_carlo(valve, tmp_path):
    path, drive, d = valve
    header = tmp_path / "v.h"
    r = run_cli("design", str(path), "--json", "--header", str(header), "--samples", "64")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    s = doc["latch"]["pulses"][0]
    assert s["name"] == "set" and s["seat_time_s"] == pytest.approx(d.latch.pulses[0].seat_time_s)
    assert s["armature_j"] > 0 and s["boost"]["threshold_code"] > 0
    mc = doc["monte_carlo"]
    assert mc["failures"]["set_not_seated"] == 0 and mc["failures"]["set_timed_out"] == 0
    assert mc["pulses"]["set"]["time_to_current_s"]["max"] <= s["seat_time_s"]   # inside the corners
    assert "#define COIL_SET_THRESHOLD_CODE" in header.read_text()
    # simulate at 9 V, coil 20 degC against solve_ivp; emulate -> check
    simulated_set_pulse(path, drive, d, s["boost"]["threshold_code"], tmp_path, plot=True)
    device_checks(d, tmp_path)


def test_a_boost_too_small_says_how_much_current_the_plunger_s_run_reaches(tmp_path):
    # 20 uF: the set current's threshold is never reached; the plunger still seats. The
    # highest current the boost at its lowest drives (its run: the hump before the seat, the
    # seated coil's ringing after) against solve_ivp's maxima; no header, simulate refuses
    text = plunger_valve(tmp_path).read_text().replace('boost_capacitance = "220 uF"', 'boost_capacitance = "20 uF"')
    path = tmp_path / "weak.toml"
    path.write_text(text)
    drive = load_drive(path)
    d = design_latch(drive)
    p = d.latch.pulses[0]
    assert sorted(c.name for c in d.checks if not c.ok) == ["set_armature_seats", "set_pulse"]
    assert p.ticks is None and "drives at most" in p.not_reached
    ref = reference(drive, p.boost.time_to_threshold_corner, False, math.inf, 0.0)
    # scipy solve_ivp; the run's hump is the largest at its integrator's accepted steps (an
    # underestimate of the crest between them: 1.6e-3 here)
    assert p.boost.reachable_current_a == pytest.approx(ref["top"], rel=2e-3)
    assert p.boost.reachable_current_a < p.boost.threshold_a
    r = run_cli("design", str(path), "--header", str(tmp_path / "w.h"))
    assert r.returncode == 1 and not (tmp_path / "w.h").exists()


def test_a_plunger_in_flight_at_the_threshold_is_refused_in_one_line(tmp_path):
    r = run_cli("design", str(plunger_valve(tmp_path, margin=1.2)))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "pull_in.current_margin" in r.stderr and "in flight" in r.stderr and "Traceback" not in r.stderr


def test_the_compiled_driver_in_the_loop_passes_check(valve, tmp_path, monkeypatch):
    """firmware-driver -> the compiled latch driver (gcc) in the model's device, ending each
    pulse at the tick its reading reaches the code while the plunger's run sets the current
    (plumbing: the model is the design's own) -> check passes; 40 % more resistance fails."""
    path, _, d = valve
    driver_in_the_loop(path, d, tmp_path, monkeypatch)


def driver_in_the_loop(path, d, tmp_path, monkeypatch, fault: dict | None = None) -> None:
    """:func:`test_the_compiled_driver_in_the_loop_passes_check` of the drive at ``path``
    (its design ``d``; ``fault``: the :class:`DeviceOptions` that fail, 40 % more resistance
    unless given)."""
    from test_emulator_device import capture_of, run as run_device
    from conftest import require_tool
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_firmware_device import LatchFirmwareDevice
    from coildrive.codegen.host_build import build_latch_firmware
    from coildrive.codegen.latch_driver import pulse_switches
    from coildrive.design.latch import firmware_pulse

    require_tool("gcc")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    r = run_cli("firmware-driver", str(path), "--out", str(tmp_path / "fw"))
    assert r.returncode == 0, r.stderr
    lib = build_latch_firmware(tmp_path / "fw", d)
    for name, options, ok in (("good", {}, True), ("bad", fault or {"resistance_scale": 1.4}, False)):
        dev = LatchFirmwareDevice(d, lib, pulse_switches(d), DeviceOptions(noise_codes=0.5, seed=5, supply=9.0,
                                                                           coil_temp=100.0, **options))
        msgs, _ = run_device(dev, 0.05 + dev.interval + 2.2 * dev.period, step=0.05)
        rep = check_latch_capture(capture_of(msgs, tmp_path / f"{name}.cdcap"), d, coil_temp=100.0)
        assert rep.ok is ok and not dev.faults, (name, [(i.name, i.status, i.detail) for i in rep.items])
        if ok:   # each set pulse as long as the model's firmware runs it there
            sets = [p for p in rep.analysis.pulses if p.name == "set" and p.partial is None]
            assert sets and all(p.length_s == pytest.approx(firmware_pulse(d, "set", 9.0, 100.0),
                                                            abs=1.5 / dev.sample_rate) for p in sets)


@pytest.mark.parametrize("i0,u0", [(0.2, 40.0), (0.9, 2.0), (1.5, 30.0)])
def test_the_seated_coil_s_highest_current_from_a_state(i0, u0):
    """model.supply.top_from on the boost capacitor alone (no source) feeding 8.6 ohm and
    23 mH from ``(i0, u0)``: rising to a crest, falling first and ringing back up, falling
    from the start -- against the maxima of solve_ivp (DOP853) of ``L di/dt = u - R i``,
    ``C du/dt = -i``."""
    from scipy.integrate import solve_ivp
    from coildrive.model import supply as bus_model

    r, ind, c = 8.6, 23e-3, 20e-6
    b = bus_model.bus(np.array([40.0]), np.array([np.inf]), np.array([c]), np.array([r]), np.array([ind]))
    f = lambda _t, y: [(y[1] - r * y[0]) / ind, -y[0] / c]   # noqa: E731
    crest = lambda t, y: f(t, y)[0]                            # noqa: E731
    crest.direction = -1
    sol = solve_ivp(f, (0, 0.05), [i0, u0], events=[crest], method="DOP853", rtol=1e-11, atol=1e-14)
    top = max([i0] + [float(y[0]) for y in sol.y_events[0]])
    assert float(bus_model.top_from(b, i0, u0)[0]) == pytest.approx(top, rel=1e-9)
