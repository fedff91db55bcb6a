"""A moving armature on the drooping bus (``[supply] source_resistance`` + ``capacitance``).

The pull-in runs with the bulk capacitor as a state (coildrive/model/armature_runs.py,
armature_sim.py). Outside references:

* scipy's ``solve_ivp`` (Radau, rtol 1e-11) of the circuit + armature + source equations
  written afresh below -- flux linkage ``lam``, gap ``x``, velocity ``v``, bus ``u``::

      dlam/dt = u - R i,   i = lam (1 + beta x) / L_c
      m dv/dt = preload + rate (stroke - x) + load - lam^2 beta / (2 L_c) - c v
      C du/dt = (V_s - u)/R_s - i

  resting on the open stop until the magnetic force beats spring + load, then free to the
  seat (an inelastic stop), then seated to the end of the peak: the seat moment, the
  current at the end of the peak and the lowest bus, within 1e-5;
* ``R_s -> 0``: the stiff-bus armature run (already checked against solve_ivp in
  tests/test_armature_model.py);
* conservation of energy over the peak (first law; the terms written afresh here from the
  simulated samples): source out = R_s loss + the capacitor's change + copper + the field's
  store + the spring and load's work + damping + the seat's impact, within 1 %.

The scenario (examples/locker-latch-12v.toml on a cable or a battery) is invented.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from armature_equations import equations, values
from conftest import BOARDS, EXAMPLES, run_cli

from coildrive.config import load_drive
from coildrive.model.armature import params_from_loop
from coildrive.model.armature_runs import SEATED, pull_in
from coildrive.model.armature_sim import simulate
from coildrive.model.circuit import loop

LATCH = EXAMPLES / "locker-latch-12v.toml"
#: (name, R_s ohm, C F): a long cable on a small capacitor (real eigenvalues: the lowest
#: bus falls in the flight), a bus that rings (R_s C near L_open/R: a complex pair).
BUSES = [("cable", 2.0, 220e-6), ("ringing", 1.2, 1e-3)]
#: The worst pull-in corner's loop: lowest supply, hot coil, R +7 %, L -10 %.
CORNER = dict(supply=10.8, temp=130.0, r=1.07, l=0.9)
PEAK = 0.05   # s


def _drive_file(tmp_path, rs: str = "2 ohm", cap: str = "220 uF", extra: str = "") -> str:
    text = LATCH.read_text().replace('board = "relay-12bit-resistor"',
                                     f'board = "{BOARDS / "relay-12bit-resistor.toml"}"')
    text = text.replace('max = "13.2 V"', f'max = "13.2 V"\nsource_resistance = "{rs}"\ncapacitance = "{cap}"')
    path = tmp_path / "latch-droop.toml"
    path.write_text(text + extra)
    return str(path)


def _params(rs: float, c: float):
    d = load_drive(LATCH)
    lp = loop(d, np.array([CORNER["supply"]]), np.array([CORNER["temp"]]), np.array([CORNER["r"]]),
              np.array([CORNER["l"]]))
    return params_from_loop(d.armature, lp, np.array([CORNER["l"]]), bus=(rs, c))


def reference(p, rs: float, c: float, t_peak: float) -> dict:
    """solve_ivp (Radau) of the equations of the module docstring, three pieces."""
    from scipy.integrate import solve_ivp

    g = values(p)
    vs, r, stroke = g["v_on"], g["r_on"], g["stroke"]
    cur, opening, pull = equations(g)

    def du(lam, x, u):
        return ((vs - u) / rs - cur(lam, x)) / c

    tol = dict(rtol=1e-11, atol=1e-13, method="Radau", dense_output=True)

    def start(t, y):
        return pull(y[0]) - opening(stroke)
    start.terminal, start.direction = True, 1
    s1 = solve_ivp(lambda t, y: [y[1] - r * cur(y[0], stroke), du(y[0], stroke, y[1])],
                   (0, t_peak), [0.0, vs], events=start, **tol)
    t_move, (lam0, u0) = s1.t_events[0][0], s1.y_events[0][0]

    def flight(t, y):
        lam, x, v, u = y
        return [u - r * cur(lam, x), v, (opening(x) - pull(lam) - g["damping"] * v) / g["mass"],
                du(lam, x, u)]

    def seat(t, y):
        return y[1]
    seat.terminal, seat.direction = True, -1

    def back(t, y):   # back at the open stop (the force fell with the current)
        return y[1] - stroke * (1 + 1e-9)
    back.terminal, back.direction = True, 1
    s2 = solve_ivp(flight, (t_move, t_peak), [lam0, stroke, 0.0, u0], events=[seat, back], **tol)
    if len(s2.t_events[1]):
        return dict(move=t_move, back=s2.t_events[1][0])
    t_seat, ys = s2.t_events[0][0], s2.y_events[0][0]
    s3 = solve_ivp(lambda t, y: [y[1] - r * cur(y[0], 0.0), du(y[0], 0.0, y[1])],
                   (t_seat, t_peak), [ys[0], ys[3]], **tol)
    low = min(float(np.min(s.sol(np.linspace(a, b, 20001))[row]))
              for s, a, b, row in ((s1, 0, t_move, 1), (s2, t_move, t_seat, 3), (s3, t_seat, t_peak, 1)))
    return dict(move=t_move, seat=t_seat, i_end=cur(s3.y[0, -1], 0.0), low=low)


@pytest.mark.parametrize("bus", BUSES, ids=[b[0] for b in BUSES])
def test_pull_in_against_solve_ivp(bus):
    _, rs, c = bus
    p = _params(rs, c)
    pin = pull_in(p, peak_time=PEAK)
    ref = reference(p, rs, c, PEAK)   # scipy solve_ivp (Radau), written afresh
    assert pin.status[0] == SEATED
    assert pin.start_time[0] == pytest.approx(ref["move"], rel=1e-6)
    assert pin.seat_time[0] == pytest.approx(ref["seat"], rel=1e-5), "pull-in moment"
    assert pin.peak_end_current[0] == pytest.approx(ref["i_end"], rel=1e-5), "current at the peak's end"
    assert pin.lowest_bus[0] == pytest.approx(ref["low"], abs=1e-5 * p.v_on[0]), "lowest bus"
    stiff = pull_in(_params(0.0, 0.0), peak_time=PEAK)
    assert pin.seat_time[0] > stiff.seat_time[0], "the droop slows the pull-in"
    if bus[0] == "ringing":
        assert np.isfinite(p.bus(True).turn_time[0]), "a complex pair"


#: A low-resistance coil on a ringing bus (R = 0.5 ohm, 0.5/2 mH, 3 V behind 1 ohm and 3 mF):
#: the steady current 2 A is below the start current; the current's overshoot (its first
#: maximum 3.6 A, before pi/omega) starts the plunger. With preload 0.5 N it seats; with
#: 1 N the current falls back before it gets there and the plunger returns to the open stop.
def _ringing(preload: float):
    from coildrive.model.armature import ArmatureParams
    from coildrive.model.magnet import fit_gap

    lc, beta = fit_gap(0.5e-3, 2e-3, 0.002)
    return ArmatureParams.make(v_on=3.0, r_on=0.5, r_off=5.0, v_off=0.8, l_closed=lc, beta=beta,
                               stroke=0.002, mass=0.005, preload=preload, rate=100.0, load=0.0,
                               damping=0.01, restitution=0.0, source_resistance=1.0, capacitance=3e-3)


def test_the_overshoot_starts_and_seats_or_falls_back():
    from coildrive.model.armature_runs import STALLED

    p = _ringing(0.5)
    assert p.start_current[0] > p.bus(True).i_ss[0]
    pin = pull_in(p, peak_time=0.02)
    ref = reference(p, 1.0, 3e-3, 0.02)   # scipy solve_ivp (Radau), written afresh
    assert pin.status[0] == SEATED
    assert pin.start_time[0] == pytest.approx(ref["move"], rel=1e-6)
    assert pin.seat_time[0] == pytest.approx(ref["seat"], rel=1e-5)
    assert pin.peak_end_current[0] == pytest.approx(ref["i_end"], rel=1e-5)
    assert pin.lowest_bus[0] == pytest.approx(ref["low"], abs=1e-5 * 3.0)
    p = _ringing(1.0)
    pin = pull_in(p, peak_time=0.02)
    ref = reference(p, 1.0, 3e-3, 0.02)
    tr = simulate(p, [(0.02, True)])
    back = [t for t, name in tr.log if name == "open"]
    assert pin.status[0] == STALLED and pin.stall_gap[0] == p.stroke[0], "never back to the start current"
    assert tr.state == "open" and back[0] == pytest.approx(ref["back"], rel=1e-5)


def test_still_coil_rise_through_the_overshoot():
    """The still coil's rise on a ringing bus: the current's first maximum comes before
    pi/omega (the charged capacitor's zero in I(s)); a target between the current at
    pi/omega and that maximum is reached -- scipy solve_ivp (Radau) of L di/dt = v - R i,
    C dv/dt = (V_s - v)/R_s - i, written afresh."""
    from scipy.integrate import solve_ivp

    from coildrive.model import supply as bus_model

    vs, rs, c, r, l = 3.0, 1.0, 3e-3, 0.5, 0.5e-3
    b = bus_model.bus(vs, rs, c, r, l)
    target = 2.3
    assert bus_model.state(b.turn_time, b)[0][()] < target < bus_model.top_current(b)[()]

    def hit(t, y):
        return y[0] - target
    hit.terminal, hit.direction = True, 1
    sol = solve_ivp(lambda t, y: [(y[1] - r * y[0]) / l, ((vs - y[1]) / rs - y[0]) / c], (0, 0.01),
                    [0.0, vs], method="Radau", rtol=1e-11, atol=1e-13, events=hit)
    assert float(bus_model.rise_time(target, b)) == pytest.approx(sol.t_events[0][0], rel=1e-7)


def test_stiff_source_gives_the_stiff_bus_armature():
    """R_s -> 0 (1 micro-ohm on 1 mF): the stiff-bus run (tests/test_armature_model.py
    checks that against solve_ivp)."""
    stiff = pull_in(_params(0.0, 0.0), peak_time=PEAK)
    tiny = pull_in(_params(1e-6, 1e-3), peak_time=PEAK)
    for name in ("start_time", "seat_time", "peak_end_current", "dip_current"):
        assert getattr(tiny, name)[0] == pytest.approx(getattr(stiff, name)[0], rel=1e-5), name
    assert CORNER["supply"] - 1e-5 < tiny.lowest_bus[0] < CORNER["supply"]


def energy_terms(p, tr, rs: float, c: float) -> dict:
    """The first law's terms (J) over a switched-on run on the drooping bus, written afresh
    from the simulated samples (trapezoids): the source's output and where it went --
    ``R_s``, the capacitor's change, copper (the run's own ``int i^2 dt``), the field's
    store (the magnetising current's with an eddy term), spring, load, damping and the
    seat's impacts (``mech``)."""
    g = {n: float(getattr(p, n)[0]) for n in p.arrays}
    t, u, v, x = tr.time, tr.bus, tr.velocity, tr.position
    i_s = (g["v_on"] - u) / rs
    i_m = tr.current if tr.magnetising_current is None else tr.magnetising_current
    travel = g["stroke"] - x[-1]
    assert tr.state == "seated" and travel == g["stroke"]
    kinetic = 0.5 * g["mass"] * (v[-1] ** 2 + sum(a ** 2 - b ** 2 for _, _, a, b in tr.impacts))
    return dict(source=np.trapezoid(g["v_on"] * i_s, t), r_s=np.trapezoid(rs * i_s ** 2, t),
                cap=0.5 * c * (u[-1] ** 2 - g["v_on"] ** 2), copper=g["r_on"] * tr.square[-1],
                field=0.5 * tr.flux[-1] * i_m[-1],
                mech=(g["preload"] + g["load"]) * travel + 0.5 * g["rate"] * travel ** 2
                + np.trapezoid(g["damping"] * v ** 2, t) + kinetic)


def test_energy_balance_of_the_pull_in():
    """First law over the peak from the simulated samples (trapezoids on a dense run)."""
    rs, c = BUSES[0][1:]
    p = _params(rs, c)
    e = energy_terms(p, simulate(p, [(PEAK, True, 4000)], points=400), rs, c)
    parts = e["r_s"] + e["cap"] + e["copper"] + e["field"] + e["mech"]
    assert parts == pytest.approx(e["source"], rel=1e-2), e
    assert abs(e["cap"]) > 1e-3 * e["source"] and e["r_s"] > 1e-3 * e["source"], "the bus's own terms count"


@pytest.mark.parametrize("hold", ["", '[hold]\nregulation = "closed_loop"\n', '[hold]\nmode = "current"\n'],
                         ids=["fixed", "closed_loop", "current_mode"])
def test_design_simulate_and_emulate(tmp_path, hold):
    """design --json: the pull-in and the supply figures come from the drooping run
    (slower than on the stiff bus); simulate's bus_v column is the run's; the model's
    virtual device gives a capture that check passes (the emulator shares the design's
    physics: plumbing, not numbers); firmware in the loop takes it (the test below). A
    closed-loop or a current-mode hold alike: the droop is the peak's (the loop or the
    comparator regulates the hold)."""
    drive = _drive_file(tmp_path)
    if hold:
        Path(drive).write_text(Path(drive).read_text().replace("[hold]\n", hold, 1))
    out = run_cli("design", drive, "--json")
    assert out.returncode in (0, 1), out.stderr
    doc = json.loads(out.stdout)
    stiff = json.loads(run_cli("design", str(LATCH), "--json").stdout)
    sup = doc["supply"]
    assert doc["pull_in"]["time_s"] > stiff["pull_in"]["time_s"]
    # the lowest bus's corner (a cold coil at the lowest supply, R -7 %, L -10 %: the most
    # current) against solve_ivp over the longest peak the firmware runs
    assert sup["lowest_bus_corner"].startswith("10.8 V, -20 degC") and "R-7%, L-10%" in sup["lowest_bus_corner"], sup
    d = load_drive(drive)
    cold = params_from_loop(d.armature, loop(d, np.array([10.8]), np.array([-20.0]), np.array([0.93]),
                                             np.array([0.9])), np.array([0.9]), bus=(2.0, 220e-6))
    ref = reference(cold, 2.0, 220e-6, doc["pull_in"]["longest_peak_s"])   # scipy solve_ivp (Radau)
    assert sup["lowest_bus_v"] == pytest.approx(ref["low"], abs=1e-4), (sup, ref)
    assert any(c["name"] == "supply_droop" for c in doc["checks"])
    csv = tmp_path / "sim.csv"
    sim = run_cli("simulate", drive, "--supply", "10.8", "--coil-temp", "130", "--csv", str(csv))
    assert sim.returncode == 0, sim.stderr
    assert "column bus_v" in sim.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    p = params_from_loop(d.armature, loop(d, np.array([10.8]), np.array([130.0]), np.array([1.0]),
                                          np.array([1.0])), np.array([1.0]), bus=(2.0, 220e-6))
    ref = reference(p, 2.0, 220e-6, doc["pull_in"]["peak_time_s"])   # scipy solve_ivp (Radau)
    assert float(np.min(data["bus_v"])) == pytest.approx(ref["low"], abs=1e-4)
    assert data["bus_v"][-1] == pytest.approx(10.8), "the hold and release on the stiff supply"

    from coildrive.bench.check import check_capture
    from coildrive.bench.synth import synth_design_capture
    from coildrive.design import design

    des = design(load_drive(drive))
    if des.hold.current_mode is None:   # (a synthetic capture runs a fixed-duty hold)
        cap = synth_design_capture(des, actuations=1, hold_time=0.05, noise_codes=1.0, seed=5)
        report = check_capture(cap, des)
        assert report.ok, [(i.name, i.status, i.detail) for i in report.items]


def test_firmware_in_the_loop_reads_the_drooping_bus(tmp_path):
    """The compiled driver with the moving armature on a drooping bus (0.6 ohm, 470 uF):
    its supply conversions read the pull-in run's bus. At the lowest supply the bus falls
    below the supply-min code at once and the driver faults SUPPLY_LOW in the peak, as the
    design's failed supply_droop check says it would (the driver rendered through the
    library: firmware-driver writes none for a failing design); at the highest supply
    `check` passes, the seat included, later than on a stiff bus (plumbing: the device
    shares the design's model, checked against solve_ivp above)."""
    from conftest import require_tool

    require_tool("gcc")
    import sys

    sys.path.insert(0, str(Path(__file__).parent))
    from test_current_mode_bench import capture_of

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.messages import Event, EventKind, FaultCode
    from coildrive.bench.protocol import FrameDecoder
    from coildrive.codegen.driver import render_driver
    from coildrive.codegen.host_build import build_firmware
    from coildrive.design import design

    d = design(load_drive(_drive_file(tmp_path, "0.6 ohm", "470 uF")))
    assert [c.name for c in d.failed] == ["supply_droop"]
    fw = tmp_path / "fw"
    fw.mkdir()
    for name, text in render_driver(d, "coil").items():
        (fw / name).write_text(text)
    lib = build_firmware(fw, d, cache=tmp_path / "cache")
    fs = d.drive.board.adc.sample_rate

    def run(supply, until):
        dev = FirmwareDevice(d, lib, DeviceOptions(supply=supply, coil_temp=20.0, first_actuation=0.002,
                                                   noise_codes=1, seed=3, hold_time=0.03, period=0.1))
        dec, msgs, t = FrameDecoder(), [], 0.0
        while t < until:
            t += 0.01
            msgs += dec.feed(dev.read(t))
        return msgs

    ev = [(m.kind, m.index / fs, m.value) for m in run(10.8, 0.05) if isinstance(m, Event)]
    on = next(t for k, t, _ in ev if k == EventKind.ON)
    fault = [(t, v) for k, t, v in ev if k == EventKind.FAULT]
    assert fault and fault[0][1] == int(FaultCode.SUPPLY_LOW) and fault[0][0] - on < 0.002, ev
    rep = check_capture(capture_of(run(13.2, 0.4), tmp_path / "f.cdcap"), d, coil_temp=20.0)
    rows = {i.name: i for i in rep.items}
    assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items if i.status == "FAIL"]
    from coildrive.bench.check import OperatingPoint, predict

    stiff, _ = predict(design(load_drive(LATCH)), OperatingPoint(13.2, 20.0, "", ""), 0.01)
    seat = rows["seated_time"].values[0]
    # measured 11.72 ms: the drooping run's 11.61 ms, not the stiff bus's 11.23 ms
    assert seat == pytest.approx(rep.prediction["seated_time_s"], rel=0.02)
    assert seat > 1.02 * stiff["seated_time_s"]


BRIDGE = ("[hold]\n", '[switch]\ntopology = "full_bridge"\n\n[freewheel]\ntype = "diode"\ndiode_drop = "0.8 V"\n\n[hold]\n')


def test_a_bridge_with_an_eddy_term_designs(tmp_path):
    """The latch on a full bridge on the drooping bus with an eddy-current term is designed
    now (it was refused; tests/test_bridge_armature_droop_flux.py checks its release): no
    refusal, one JSON document."""
    path = Path(_drive_file(tmp_path))
    text = path.read_text()
    for old, new in (BRIDGE, ("[coil]\n", '[coil]\neddy_resistance = "400 ohm"\n')):
        text = text.replace(old, new, 1)
    path.write_text(text)
    out = run_cli("design", str(path), "--json")
    assert out.returncode in (0, 1), out.stderr
    assert json.loads(out.stdout)["eddy"]["resistance_ohm"] == 400.0


def test_high_side_node_follows_the_bus(tmp_path):
    """A high-side switch's node in the peak is the drooping bus less the switch's drop
    (Ohm's law, common practice); after the peak the stiff supply's."""
    from coildrive.model.waveform import actuation

    path = Path(_drive_file(tmp_path))
    path.write_text(path.read_text().replace("relay-12bit-resistor.toml", "sourcing-hs-zener.toml"))
    d = load_drive(path)
    w = actuation(d, 10.8, 130.0, 0.03, 0.7, 25e3, 0.002)
    peak = (w.time <= 0.03) & (w.switch_on == 1)
    drop = w.bus_voltage[peak] - w.node_voltage[peak]
    np.testing.assert_allclose(drop, w.current[peak] * d.switch.on_resistance, atol=1e-9)
    assert w.bus_voltage[peak].min() < 10.8 - 0.1 and np.all(w.bus_voltage[w.time > 0.03] == 10.8)
