"""A latching coil with a moving armature (a catch holds it seated, the reset winding
trips the catch): the set pulse's seat time and energies, and the armature's travel to
the open stop after the reset pulse, against scipy's solve_ivp on the circuit and
armature equations written afresh here; the CLI's refusals. The pulses' tolerance Monte
Carlo (design --samples) never outside the corner envelope."""

from __future__ import annotations

import json
import math

import numpy as np

import pytest
from scipy.integrate import solve_ivp

from conftest import EXAMPLES
from coildrive.config import load_drive
from coildrive.design.latch import design_latch

BOLT = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"
ALPHA = 0.00393   # annealed copper, per K (IEC 60028)


@pytest.fixture(scope="module")
def bolt():
    drive = load_drive(BOLT)
    return drive, design_latch(drive)


def bolt_circuit(drive, coil_temp, rf, lf):
    """The bolt's set winding at one corner, written afresh: ``(R_coil, R_on, R_off ohm,
    V_off V, L_c H, beta 1/m, L(x), the opening force(x) N)`` with ``L(x) = L_c / (1 + beta
    x)`` through the inductances measured open and seated (the sense in the coil path, the
    freewheel diode + resistor)."""
    a, b = drive.armature, drive.board
    r_coil = drive.coil.resistance * (1 + ALPHA * (coil_temp - drive.coil.reference_temp)) * rf
    r_on = r_coil + drive.switch.on_resistance + b.sense.resistance            # sense in the coil path
    r_off = r_coil + b.sense.resistance + drive.freewheel.resistance
    lc, lo, s = a.inductance_closed * lf, a.inductance_open * lf, a.stroke
    beta = (lc / lo - 1.0) / s

    def ind(x):
        return lc / (1 + beta * x)

    def opening(x):
        return a.spring_preload + a.spring_rate * (s - x) + a.load_force

    return r_coil, r_on, r_off, drive.freewheel.diode_drop, lc, beta, ind, opening


def _set_pulse_reference(drive, supply, coil_temp, rf, lf, t_long, bus=None, t_short=None):
    """The set pulse at one corner by solve_ivp: the RL circuit with L(x) = L_c / (1 + beta x)
    written as V = R i + L(x) di/dt + i dL/dx dx/dt, the co-energy force 1/2 i^2 |dL/dx|
    against spring + load + damping, an inelastic seat; then the freewheel decay through
    diode + resistor with the armature held on the seat. ``bus`` ``(R_s ohm, C F)``: the
    coil fed from the bulk capacitor ``u``, ``C du/dt = (V - u) / R_s - i``, full at
    switch-on (else a stiff bus at ``supply`` V). Returns the seat time s, and over the pulse
    and its decay: V int i dt, R_coil int i^2 dt, the magnetic force's work J; the current at
    the pulse's end (``.i_top``), at ``t_short`` (``.i_short``), the lowest bus over the
    pulse (``.low``) and the bus at its end (``.bus_end``) as attributes."""
    a = drive.armature
    r_coil, r_on, r_off, v_off, lc, beta, ind, opening = bolt_circuit(drive, coil_temp, rf, lf)
    s = a.stroke

    def slope(x):   # dL/dx, H/m (negative: L grows as the gap closes)
        return -lc * beta / (1 + beta * x) ** 2

    def feed(y):   # C du/dt, A
        return 0.0 if bus is None else (supply - y[6]) / bus[0] - y[0]

    def rhs(t, y, moving):
        i, x, v = y[0], y[1], y[2]
        di = (y[6] - r_on * i - i * slope(x) * v) / ind(x)
        f_mag = 0.5 * i * i * -slope(x)
        dv = (opening(x) - f_mag - a.damping * v) / a.mass if moving else 0.0
        return [di, v if moving else 0.0, dv, i, i * i, f_mag * -v if moving else 0.0,
                0.0 if bus is None else feed(y) / bus[1]]

    opts = dict(method="DOP853", rtol=1e-11, atol=1e-14, dense_output=True)
    lowest = lambda t, y, m: feed(y)   # noqa: E731  (the bus turns up)
    lowest.direction = 1
    start = lambda t, y, m: 0.5 * y[0] ** 2 * -slope(s) - opening(s)   # noqa: E731
    start.terminal, start.direction = True, 1
    r1 = solve_ivp(rhs, (0, t_long), [0, s, 0, 0, 0, 0, supply], args=(False,), events=[start, lowest], **opts)
    seat = lambda t, y, m: y[1]   # noqa: E731
    seat.terminal, seat.direction = True, -1
    r2 = solve_ivp(rhs, (r1.t[-1], t_long), r1.y[:, -1], args=(True,), events=[seat, lowest], **opts)
    t_seat = r2.t_events[0][0]
    y = r2.y[:, -1].copy()
    y[1], y[2] = 0.0, 0.0
    r3 = solve_ivp(rhs, (t_seat, t_long), y, args=(False,), events=[lowest], **opts)
    i_top, q_on, s_on, work = r3.y[0, -1], r3.y[3, -1], r3.y[4, -1], r3.y[5, -1]
    zero = lambda t, y: y[0]   # noqa: E731
    zero.terminal, zero.direction = True, -1
    r4 = solve_ivp(lambda t, y: [-(r_off * y[0] + v_off) / lc, y[0] ** 2], (0, 10.0), [i_top, 0.0],
                   events=zero, method="DOP853", rtol=1e-11, atol=1e-14)
    _set_pulse_reference.i_top = i_top   # the current at the pulse's end, A
    _set_pulse_reference.bus_end = float(r3.y[6, -1])   # the bus then, V
    if t_short is not None:
        run = next(r for r in (r1, r2, r3) if r.t[0] <= t_short <= r.t[-1])
        _set_pulse_reference.i_short = float(run.sol(t_short)[0])
    turns = [float(e[6]) for r in (r1, r2, r3) for e in r.y_events[-1]]
    _set_pulse_reference.low = min([float(r3.y[6, -1])] + turns)
    return t_seat, supply * q_on, r_coil * (s_on + r4.y[1, -1]), work


def test_set_pulse_against_solve_ivp(bolt):
    drive, d = bolt
    p = next(p for p in d.latch.pulses if p.name == "set")
    assert d.ok and p.ticks is not None
    # the latest seat: lowest supply, the coil at its limit, R high, L low (the force is weaker)
    assert p.seat_corner == "10.8 V, coil 130 degC, R+7%, L-10%"
    t_seat, *_ = _set_pulse_reference(drive, 10.8, 130.0, 1.07, 0.9, p.time_s)
    assert p.seat_time_s == pytest.approx(t_seat, rel=1e-5), "seat time vs scipy solve_ivp (DOP853)"
    assert p.shortest_s >= 1.5 * t_seat, "the shortest set pulse outlasts the seat x pull_in.margin"
    # the energies at the corner where the supply gives the most
    assert p.energy_corner == "13.2 V, coil -20 degC, R-7%, L-10%"
    _, supply_j, copper_j, work = _set_pulse_reference(drive, 13.2, -20.0, 0.93, 0.9, p.time_s)
    assert p.supply_j == pytest.approx(supply_j, rel=1e-5), "supply energy vs scipy solve_ivp"
    assert p.copper_j == pytest.approx(copper_j, rel=1e-5), "copper energy vs scipy solve_ivp"
    # the armature's share comes from the balance; scipy's is the magnetic force's work
    assert p.armature_j == pytest.approx(work, rel=1e-4), "armature energy vs the force's work (solve_ivp)"
    assert p.supply_j == pytest.approx(p.copper_j + p.switch_sense_j + p.freewheel_j + p.returned_j
                                       + p.armature_j, rel=1e-12)


def open_flight(drive) -> float:
    """The armature's flight s from the seat to the open stop by solve_ivp (DOP853): spring +
    load against mass and damping, no current in the set coil."""
    a = drive.armature

    def rhs(t, y):
        return [y[1], (a.spring_preload + a.spring_rate * (a.stroke - y[0]) + a.load_force
                       - a.damping * y[1]) / a.mass]

    arrive = lambda t, y: y[0] - a.stroke   # noqa: E731
    arrive.terminal, arrive.direction = True, 1
    r = solve_ivp(rhs, (0, 1.0), [0.0, 0.0], method="DOP853", rtol=1e-11, atol=1e-14, events=arrive)
    return float(r.t_events[0][0])


def test_reset_travel_against_solve_ivp(bolt):
    drive, d = bolt
    p = next(p for p in d.latch.pulses if p.name == "reset")
    flight = open_flight(drive)
    # from the reset pulse's start: the latest trip (time to reset.current) + the flight
    assert p.open_time_s - p.worst_time_s == pytest.approx(flight, rel=1e-5), "flight vs solve_ivp"
    assert d.latch.armature_interval_s == p.open_time_s
    assert d.latch.interval_s >= p.open_time_s


def test_json_table_and_refusals(bolt, tmp_path):
    from typer.testing import CliRunner

    from coildrive.cli import app

    runner = CliRunner()
    out = runner.invoke(app, ["design", str(BOLT), "--json"])
    assert out.exit_code == 0, out.output
    doc = json.loads(out.stdout)
    names = [c["name"] for c in doc["checks"]]
    assert "set_armature_seats" in names and "reset_armature_opens" in names
    assert all(math.isfinite(x) for x in (doc["latch"]["interval_s"], doc["latch"]["armature_interval_s"]))
    table = runner.invoke(app, ["design", str(BOLT)], env={"COLUMNS": "120"})
    assert "armature open" in table.output and "the armature's latest seat" in table.output
    # simulate: the set pulse follows the moving armature (scipy's current at its end), and
    # where the armature does not seat within the pulse it says so in one line
    res = runner.invoke(app, ["simulate", str(BOLT), "--supply", "10.8", "--coil-temp", "130", "--r-factor",
                              "1.07", "--l-factor", "0.9", "--csv", str(tmp_path / "s.csv")])
    assert res.exit_code == 0, res.output
    data = np.genfromtxt(tmp_path / "s.csv", delimiter=",", names=True)
    t_set = doc["latch"]["pulses"][0]["time_s"]
    _set_pulse_reference(load_drive(BOLT), 10.8, 130.0, 1.07, 0.9, t_set)
    k = int(np.searchsorted(data["time_s"], t_set))
    assert data["current_a"][k] == pytest.approx(_set_pulse_reference.i_top, rel=1e-5), "vs solve_ivp"
    res = runner.invoke(app, ["design", str(BOLT), "--plot", str(tmp_path / "b.png")])
    assert res.exit_code == 0 and (tmp_path / "b.png").read_bytes()[:4] == b"\x89PNG"
    res = runner.invoke(app, ["simulate", str(BOLT), "--supply", "3", "--coil-temp", "20", "--csv",
                              str(tmp_path / "low.csv")])
    assert res.exit_code == 2 and "not on the seat" in res.output and not (tmp_path / "low.csv").exists()
    res = runner.invoke(app, ["emulate", str(BOLT), "--supply", "3"])
    assert res.exit_code == 2 and "--supply: the armature is not on the seat" in res.output
    # a spring too strong for the coil: the set pulse is not designed, no header is written
    text = BOLT.read_text().replace('spring_preload = "0.35 N" ', 'spring_preload = "3 N" ')
    strong = tmp_path / "strong.toml"
    strong.write_text(text.replace("# current left out", 'current = "0.6 A" #'))
    res = runner.invoke(app, ["design", str(strong), "--json", "--header", str(tmp_path / "s.h")])
    assert res.exit_code == 1 and not (tmp_path / "s.h").exists()
    checks = {c["name"]: c for c in json.loads(res.stdout)["checks"]}
    assert not checks["set_armature_seats"]["ok"] and "never reaches" in checks["set_armature_seats"]["detail"]
    assert not checks["set_pulse"]["ok"] and "does not seat" in checks["set_pulse"]["detail"]
    # a full bridge reverses one coil: that unlatches only a permanent magnet, not modelled
    bridge = EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml"
    arm = BOLT.read_text().split("\n[armature]")[1]
    both = tmp_path / "bridge.toml"
    both.write_text(bridge.read_text() + "\n[armature]" + arm)
    res = runner.invoke(app, ["design", str(both)])
    assert res.exit_code == 2 and "armature" in res.output and "permanent magnet" in res.output


# --------------------------------------------------------------------------- Monte Carlo
@pytest.mark.parametrize("name", ["irrigation-valve-bridge-12v", "bistable-relay-reset-winding-24v",
                                  "bolt-catch-reset-winding-12v"])
def test_monte_carlo_never_outside_the_corner_envelope(name):
    import dataclasses

    from coildrive.design.latch_montecarlo import latch_monte_carlo, with_monte_carlo

    d = with_monte_carlo(design_latch(load_drive(EXAMPLES / "latching" / f"{name}.toml")), 3000, seed=7)
    mc = d.monte_carlo
    for p in d.latch.pulses:
        f = mc["pulses"][p.name]
        # the samples lie in the corners' box, so the corners bound every sample
        assert f["time_to_current_s"]["max"] <= p.worst_time_s * (1 + 1e-12), p.name
        assert f["end_current_a"]["min"] >= p.end_current_a * (1 - 1e-12), p.name
        assert f["supply_j"]["max"] <= p.supply_j * (1 + 1e-12), p.name
        assert f["decay_time_s"]["max"] <= p.decay_time_s * (1 + 1e-12), p.name
        assert mc["failures"][f"{p.name}_not_reached"] == mc["failures"][f"{p.name}_below_margin"] == 0
    if "set_not_seated" in mc["failures"]:   # a moving armature: its seat time is the set's time
        assert mc["failures"]["set_not_seated"] == 0
    # a pulse cut to 3/4 of the worst time to its current: samples miss it, and are counted
    half = [dataclasses.replace(p, shortest_s=p.worst_time_s * 0.75) if p.name == "set" else p
            for p in d.latch.pulses]
    cut = dataclasses.replace(d, latch=dataclasses.replace(d.latch, pulses=half))
    fails = latch_monte_carlo(cut, 500)["failures"]
    assert fails["set_not_reached"] <= fails["set_below_margin"]
    # with an armature the pulse still carries its current early: it is the seat that is missed
    assert 0 < fails.get("set_not_seated", fails["set_not_reached"]) < 500


def test_monte_carlo_cli(tmp_path):
    from typer.testing import CliRunner

    from coildrive.cli import app

    runner = CliRunner()
    relay = EXAMPLES / "latching" / "bistable-relay-reset-winding-24v.toml"
    out = runner.invoke(app, ["design", str(relay), "--samples", "200", "--seed", "3", "--json"])
    assert out.exit_code == 0, out.output
    mc = json.loads(out.stdout)["monte_carlo"]
    assert mc["samples"] == 200 and mc["seed"] == 3 and set(mc["pulses"]) == {"set", "reset"}
    table = runner.invoke(app, ["design", str(relay), "--samples", "200"], env={"COLUMNS": "200"})
    assert "Monte Carlo: 200 samples" in table.output and "reset below margin: 0" in table.output
    res = runner.invoke(app, ["design", str(BOLT), "--samples", "100", "--json"])
    assert res.exit_code == 0 and json.loads(res.stdout)["monte_carlo"]["failures"]["set_not_seated"] == 0


def test_check_predicts_the_seated_end_current(bolt):
    from coildrive.bench.latch_check import predict_pulse

    drive, d = bolt
    p = next(p for p in d.latch.pulses if p.name == "set")
    got = predict_pulse(d, "set", 12.0, 20.0, 0.001, 0.001)["end_current_a"]
    _set_pulse_reference(drive, 12.0, 20.0, 1.0, 1.0, p.time_s)
    assert got == pytest.approx(_set_pulse_reference.i_top, rel=1e-5), "vs scipy solve_ivp (DOP853)"


def test_force_margin_on_the_moving_run(bolt):
    # At pull_in.margin 1.2 the seat x margin is shorter than the time the moving run needs
    # to carry current_margin x pull_in.current, so the force margin sets the set pulse: the
    # open-armature rise runs ahead of the real current (the closing gap's back-EMF and the
    # larger seated inductance), so the design searches the ticks on the moving run. Checked
    # against scipy solve_ivp (DOP853) of the circuit and armature written afresh, at the
    # four tolerance ends of the lowest supply with the coil at its limit: the shortest real
    # pulse carries the current everywhere, one tick less does not somewhere.
    import dataclasses

    drive, _ = bolt
    drive = dataclasses.replace(drive, pull_in=dataclasses.replace(drive.pull_in, margin=1.2))
    d = design_latch(drive)
    p = next(p for p in d.latch.pulses if p.name == "set")
    check = next(c for c in d.checks if c.name == "set_pulse")
    assert check.ok and p.governed_by == "force margin", check.detail
    rate, need = drive.board.tick.rate, p.force_current_a
    ends = {}
    for t in ((p.ticks - 1) / rate, (p.ticks - 2) / rate):
        ends[t] = []
        for rf, lf in ((0.93, 0.9), (0.93, 1.1), (1.07, 0.9), (1.07, 1.1)):
            _set_pulse_reference(drive, 10.8, 130.0, rf, lf, p.time_s, t_short=t)
            ends[t].append(_set_pulse_reference.i_short)
    short, shorter = ends.values()
    assert min(short) >= need * (1 - 1e-6), "the shortest pulse carries the force current (solve_ivp)"
    assert min(short) == pytest.approx(p.end_current_a, rel=1e-5), "end current vs solve_ivp"
    assert min(shorter) < need, "one tick less would not (solve_ivp): the search's least length"
