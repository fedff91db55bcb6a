"""A latching coil with a clamp across each winding's switch (``[freewheel] type =
"clamp"``): the bundled bistable relay (examples/latching/bistable-relay-reset-winding-24v.toml)
on a stiff bus with an invented 36 V clamp in place of its freewheel diode.

After a pulse the current flows from the bus through the winding and the clamp, so the
coil sees ``V - V_clamp``: ``L di/dt = -(R_off i + V_clamp - V)`` (``R_off`` the winding
alone: the sense resistor sits under the switch, which the clamp bypasses), and the bus
gives ``V int i dt`` during the decay too, the clamp taking ``V_clamp int i dt``.
References written afresh here: scipy's ``solve_ivp`` (DOP853) of the pulse and the decay
(the energies as extra states), and the decay's time to zero by hand, ``tau ln(1 + R_off
I/(V_clamp - V))`` (the RL step, textbook); the energy balance (first law: the field is
empty at both ends). On the drooping bus (the example's own 47 ohm and 4700 uF) the
pulse and the clamped decay with the capacitor a state, by solve_ivp again.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from conftest import EXAMPLES, run_cli
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from coildrive.design.latch import Points, winding_drive
from coildrive.design.latch_montecarlo import _figures, latch_monte_carlo
from test_latch_flux import _corner, device_reports

RELAY = EXAMPLES / "latching" / "bistable-relay-reset-winding-24v.toml"
ALPHA = 0.00393   # annealed copper, per K (IEC 60028)
V_CLAMP = 36.0    # V, invented
OPTS = dict(method="DOP853", rtol=1e-11, atol=1e-14)


def clamp_relay(tmp_path, droop: bool = False):
    text = RELAY.read_text().replace('board = "tiny-8bit-diode"',
                                     f'board = "{EXAMPLES.parent / "boards" / "tiny-8bit-diode"}.toml"')
    if not droop:
        text = text.replace('source_resistance = "47 ohm" # the feed\'s series resistor\n', "")
        text = text.replace('capacitance = "4700 uF"      # the pulse capacitor at the board\n', "")
    path = tmp_path / "clamp-relay.toml"
    path.write_text(text + f'\n[switch]\nmax_voltage = "60 V"\n\n[freewheel]\ntype = "clamp"\n'
                           f'clamp_voltage = "{V_CLAMP:g} V"\n')
    return path


@pytest.fixture(scope="module")
def relay(tmp_path_factory):
    path = clamp_relay(tmp_path_factory.mktemp("latch-clamp"))
    drive = load_drive(path)
    return path, drive, design_latch(drive)


def reference(drive, coil, v, temp, rf, lf, t_pulse):
    """One winding's pulse of ``t_pulse`` s at ``v`` V and its clamped decay by solve_ivp:
    ``(end current A, time to zero s, supply J, copper J, clamp J)``."""
    b = drive.board
    r_coil = coil.resistance * (1 + ALPHA * (temp - coil.reference_temp)) * rf
    r_on = r_coil + drive.switch.on_resistance + b.sense.resistance   # the sense under the switch
    l = coil.inductance * lf

    on = solve_ivp(lambda t, y: [(v - r_on * y[0]) / l, y[0], y[0] ** 2], (0, t_pulse), [0, 0, 0], **OPTS)
    i_top, q_on, s_on = on.y[:, -1]
    zero = lambda t, y: y[0]   # noqa: E731
    zero.terminal, zero.direction = True, -1
    off = solve_ivp(lambda t, y: [-(r_coil * y[0] + V_CLAMP - v) / l, y[0], y[0] ** 2], (0, 10.0), [i_top, 0, 0],
                    events=zero, **OPTS)
    _, q_d, s_d = off.y_events[0][0]
    t_zero = float(off.t_events[0][0])
    assert t_zero == pytest.approx(l / r_coil * np.log1p(r_coil * i_top / (V_CLAMP - v)), rel=1e-9), "by hand"
    return i_top, t_zero, v * (q_on + q_d), r_coil * (s_on + s_d), V_CLAMP * q_d


def test_pulses_against_solve_ivp(relay):
    _, drive, d = relay
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    for p, coil in zip(d.latch.pulses, (drive.coil, drive.latch.reset_coil)):
        v, temp, rf, lf = _corner(p.energy_corner)
        i_top, t_zero, supply, copper, clamp = reference(drive, coil, v, temp, rf, lf, p.time_s)
        assert p.supply_j == pytest.approx(supply, rel=1e-6), "supply energy (the decay's draw too) vs solve_ivp"
        assert p.copper_j == pytest.approx(copper, rel=1e-6), "copper energy vs solve_ivp"
        assert p.freewheel_j == pytest.approx(clamp, rel=1e-6), "the clamp's energy vs solve_ivp"
        assert p.supply_j == pytest.approx(p.copper_j + p.switch_sense_j + p.freewheel_j, rel=1e-12)
        assert v * clamp / V_CLAMP > 0.05 * supply, "precondition: the bus feeds the decay a real share"
        # the longest decay: the coil's longest time constant at the highest supply (the least
        # voltage across it), from the longest pulse's current there
        longest = max(reference(drive, coil, drive.supply.max, t, r, l_, p.time_s)[1]
                      for t in (drive.ambient.min, drive.thermal.max_coil_temp)
                      for r in (1 - coil.resistance_tolerance, 1 + coil.resistance_tolerance)
                      for l_ in (1 - coil.inductance_tolerance, 1 + coil.inductance_tolerance))
        assert p.decay_time_s == pytest.approx(longest, rel=1e-6), "time to zero vs solve_ivp"
        assert p.peak_switch_voltage_v == pytest.approx(V_CLAMP), "the clamp holds the switch"
    # the Monte Carlo's supply energy takes the decay's draw too: at the energy corner the
    # design's figure; the corners bound its samples
    mc = latch_monte_carlo(d, 300, seed=3)["pulses"]
    for p, reset in zip(d.latch.pulses, (False, True)):
        pt = Points(*(np.array([x]) for x in _corner(p.energy_corner)), sense_factor=1.0)
        got = _figures(winding_drive(drive, reset), pt, p.current_a, p.shortest_s, p.time_s)[2]
        assert float(got[0]) == pytest.approx(p.supply_j, rel=1e-12)
        assert mc[p.name]["supply_j"]["max"] <= p.supply_j * (1 + 1e-12)


def test_cli_simulate_and_the_device(relay, tmp_path):
    path, drive, d = relay
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["latch"]["pulses"][0]["freewheel_j"] > 0
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    p = d.latch.pulses[0]
    i_top, t_zero, *_ = reference(drive, drive.coil, 24.0, 20.0, 1.0, 1.0, p.time_s)
    k = (data["time_s"] > p.time_s) & (data["time_s"] < p.time_s + 0.9 * t_zero)
    r_coil, l = drive.coil.resistance, drive.coil.inductance
    b = (V_CLAMP - 24.0) / r_coil   # the RL step from i_top towards -(V_clamp - V)/R (textbook)
    ref = (i_top + b) * np.exp(-(data["time_s"][k] - p.time_s) * r_coil / l) - b
    assert np.allclose(data["current_a"][k], ref, rtol=1e-6, atol=1e-9), "the clamped decay"
    assert np.allclose(data["switch_voltage_v"][k], V_CLAMP), "the clamp holds the switch"
    for ok, rep in device_reports(d, tmp_path, 24.0, 20.0, given=True):
        assert rep.ok == ok, [(i.name, i.detail) for i in rep.items]


def droop_reference(drive, coil, v, temp, rf, lf, t_pulse, level: float = 0.0):
    """One winding's pulse of ``t_pulse`` s from a full capacitor at ``v`` V behind ``R_s``
    and its clamped decay, both with the capacitor a state, by solve_ivp (the equations
    written afresh: ``L di/dt = v_b - R_on i`` then ``v_b - V_clamp - R_off i``, ``C dv_b/dt
    = (V - v_b)/R_s - i``; the sense resistor in ``R_off`` too when it sits in the coil
    path): ``(lowest bus V, time to zero (to ``level`` A) s, bus there V, the decay's
    solution)``."""
    b, s = drive.board, drive.supply
    r_coil = coil.resistance * (1 + ALPHA * (temp - coil.reference_temp)) * rf
    r_on = r_coil + drive.switch.on_resistance + b.sense.resistance
    r_off = r_coil + (b.sense.resistance if b.sense.position == "coil" else 0.0)
    l, r_s, c = coil.inductance * lf, s.source_resistance, s.capacitance
    on = solve_ivp(lambda t, y: [(y[1] - r_on * y[0]) / l, ((v - y[1]) / r_s - y[0]) / c], (0, t_pulse), [0, v],
                   dense_output=True, **OPTS)
    zero = lambda t, y: y[0] - level   # noqa: E731
    zero.terminal, zero.direction = True, -1
    off = solve_ivp(lambda t, y: [(y[1] - V_CLAMP - r_off * y[0]) / l, ((v - y[1]) / r_s - y[0]) / c],
                    (0, 10.0), on.y[:, -1], events=zero, dense_output=True, **OPTS)
    t_zero = float(off.t_events[0][0])
    low = min(on.sol(np.linspace(0, t_pulse, 4001))[1].min(), off.sol(np.linspace(0, t_zero, 4001))[1].min())
    return low, t_zero, float(off.y_events[0][0][1]), off


def envelope_runs(drive, coil, one) -> dict:
    """``one(V, degC, R factor, L factor)`` (a reference run) at each of the envelope's 16
    corners of ``coil``: the supply's ends, the coldest ambient and the hottest coil, the
    tolerances' ends; by corner."""
    s = drive.supply
    return {(v, t, r, l_): one(v, t, r, l_)
            for v in (s.min, s.max) for t in (drive.ambient.min, drive.thermal.max_coil_temp)
            for r in (1 - coil.resistance_tolerance, 1 + coil.resistance_tolerance)
            for l_ in (1 - coil.inductance_tolerance, 1 + coil.inductance_tolerance)}


def check_envelope(p, runs: dict) -> None:
    """Pulse ``p``'s ``droop_v`` and ``decay_time_s`` against the worst of ``runs`` (each
    ``(lowest bus V, time to zero s, ...)``, :func:`envelope_runs`) within 1e-6."""
    droop = max(v - low for (v, *_), (low, *_) in runs.items())
    assert p.droop_v == pytest.approx(droop, rel=1e-6), "lowest bus (pulse + decay) vs solve_ivp"
    assert p.decay_time_s == pytest.approx(max(x[1] for x in runs.values()), rel=1e-6), "time to zero"


def test_drooping_bus_against_solve_ivp(tmp_path):
    """The clamped decay keeps drawing on the capacitor: the lowest bus over the pulse and
    its decay, the time to zero and the recharge (the time to zero, then the RC relaxation
    ``R_s C ln(1 + (V - v_z)/(k V))`` by hand, textbook) against solve_ivp, within 1e-6."""
    path = clamp_relay(tmp_path, droop=True)
    drive = load_drive(path)
    d = design_latch(drive)
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    s, k = drive.supply, drive.latch.recharge_tolerance
    (tmp_path / "stiff").mkdir()
    stiff = design_latch(load_drive(clamp_relay(tmp_path / "stiff")))
    for p, q, coil in zip(d.latch.pulses, stiff.latch.pulses, (drive.coil, drive.latch.reset_coil)):
        runs = envelope_runs(drive, coil, lambda v, t, r, l_: droop_reference(drive, coil, v, t, r, l_, p.time_s))
        check_envelope(p, runs)
        assert p.decay_time_s < q.decay_time_s, "the drooping bus shortens the clamped decay"
        rc = max(t_z + s.source_resistance * s.capacitance * np.log1p((v - v_z) / (k * v))
                 for (v, *_), (_, t_z, v_z, _) in runs.items())
        assert p.recharge_time_s == pytest.approx(rc, rel=1e-6), "recharge after the clamped decay"
        # the Monte Carlo's decay on the same bus: its samples within the corners' longest
        mc = latch_monte_carlo(d, 200, seed=3)["pulses"][p.name]["decay_time_s"]
        assert mc["max"] <= p.decay_time_s * (1 + 1e-9) and mc["max"] < q.decay_time_s
    # simulate's trace: the clamped decay of the set pulse against the same solve_ivp
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    p = d.latch.pulses[0]
    _, t_zero, _, off = droop_reference(drive, drive.coil, 24.0, 20.0, 1.0, 1.0, p.time_s)
    kk = (data["time_s"] > p.time_s) & (data["time_s"] < p.time_s + 0.9 * t_zero)
    assert kk.sum() > 50
    assert np.allclose(data["current_a"][kk], off.sol(data["time_s"][kk] - p.time_s)[0], rtol=1e-6, atol=1e-9)
    assert np.allclose(data["switch_voltage_v"][kk], V_CLAMP), "the clamp holds the switch"
    tail = data["time_s"] > p.time_s
    assert float(data["time_s"][tail][np.argmax(data["current_a"][tail] <= 0)]) - p.time_s == \
        pytest.approx(t_zero, rel=1e-6), "simulate's time to zero"
    # the virtual device and the check's prediction from the decay on the drooping bus
    for ok, rep in device_reports(d, tmp_path, 24.0, 20.0, given=True):
        assert rep.ok == ok, [(i.name, i.detail) for i in rep.items]


def test_check_predicts_the_decay_on_the_drooping_bus(tmp_path):
    """With the sense resistor in the coil path (a board that reads the decay) ``check``
    predicts the time to its zero level on the drooping bus, against solve_ivp (1e-6)."""
    from coildrive.bench.latch_check import predict_pulse
    from coildrive.design.latch import firmware_pulse

    path = clamp_relay(tmp_path, droop=True)
    path.write_text(path.read_text().replace("tiny-8bit-diode.toml", "lab-m32-zener.toml"))
    drive = load_drive(path)
    d = design_latch(drive)
    assert drive.board.sense.position == "coil" and d.ok
    for name, coil in (("set", drive.coil), ("reset", drive.latch.reset_coil)):
        got = predict_pulse(d, name, 24.0, 20.0, 0.01, 1e-3)["time_to_zero_s"]
        t_pulse = firmware_pulse(d, name, 24.0, 20.0)
        want = droop_reference(drive, coil, 24.0, 20.0, 1.0, 1.0, t_pulse, level=0.01)[1]
        stiff = droop_reference(dataclass_replace_stiff(drive), coil, 24.0, 20.0, 1.0, 1.0, t_pulse, level=0.01)[1]
        assert got == pytest.approx(want, rel=1e-6), "check's time to zero vs solve_ivp"
        assert abs(stiff / want - 1) > 1e-3, "precondition: the droop moves it"


def dataclass_replace_stiff(drive):
    """``drive`` with a stiff bus (no source resistance: the capacitor stays full)."""
    import dataclasses
    return dataclasses.replace(drive, supply=dataclasses.replace(drive.supply, capacitance=1e6))
