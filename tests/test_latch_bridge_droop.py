"""A latching coil on a full bridge on the drooping bus: the bundled irrigation valve
(examples/latching/irrigation-valve-bridge-12v.toml) behind an invented 0.8 ohm source
resistance onto 1000 uF at the board, with a supply that takes current back and one that
cannot (a diode in its feed).

References, written afresh here with scipy's ``solve_ivp`` (DOP853, rtol 1e-11):

* the pulse through two switches from a full capacitor: ``C du/dt = (V_s - u)/R_s - i``,
  ``L di/dt = u - R i`` (``R``: the coil, two switches and the inline sense resistor);
* after it the fast decay through two body diodes back into the bus: ``L di/dt = -(R i + u
  + 2 V_d)``, ``C du/dt = i + (V_s - u)/R_s`` -- without a sink the feed term only while
  ``u < V_s`` (an ideal one-way diode, an event where the bus reaches ``V_s``) -- to the
  current's zero, from each starting bus the design takes (between ``V_s`` and the lowest
  a pulse can leave: ``max(min((1 - tol) V_s, V_s - R_s i), -2 V_d)``, docs/design-method.md);
  the highest bus + ``V_d`` is the switches' voltage (the sense resistor inline: no drop).

Tolerances 1e-6 (the model is closed form).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from conftest import EXAMPLES, run_cli
from coildrive.bench.latch_check import predict_pulse
from coildrive.design.latch_montecarlo import latch_monte_carlo
from test_latch_armature_curves import designed
from test_latch_flux import _corner, device_reports

BRIDGE = EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml"
ALPHA = 0.00393   # annealed copper, per K (IEC 60028)
R_S, C = 0.8, 1000e-6
OPTS = dict(method="DOP853", rtol=1e-11, atol=1e-13)


def droop_bridge(tmp_path, sink: bool, extra: str = ""):
    text = BRIDGE.read_text().replace(
        "sink = true                  # the battery takes the returned energy back\n",
        f'sink = {str(sink).lower()}\nsource_resistance = "{R_S} ohm"\ncapacitance = "{C * 1e6:g} uF"\n'
        'capacitor_voltage = "25 V"\n' + extra)
    path = tmp_path / f"bridge-droop-{sink}.toml"
    path.write_text(text.replace('board = "bridge-m32-fast"',
                                 f'board = "{EXAMPLES.parent / "boards" / "bridge-m32-fast"}.toml"'))
    return path


@pytest.fixture(scope="module", params=[True, False], ids=["sink", "no-sink"])
def bridge(request, tmp_path_factory):
    return designed(droop_bridge(tmp_path_factory.mktemp("latch-bridge-droop"), request.param))


def _loop(drive, coil_temp, rf, lf):
    """``(R on, R of the fast decay, L, V_d)`` of the coil at one corner."""
    b = drive.board
    r_coil = drive.coil.resistance * (1 + ALPHA * (coil_temp - drive.coil.reference_temp)) * rf
    return (r_coil + 2 * drive.switch.on_resistance + b.sense.resistance, r_coil + b.sense.resistance,
            drive.coil.inductance * lf, drive.freewheel.diode_drop)


def _pulse(v_s, r, l, t, bus=True):
    """The current at ``t`` s and the bus then, from a full capacitor (or a stiff bus)."""
    def rhs(_t, y):
        return [((v_s - y[0]) / R_S - y[1]) / C if bus else 0.0, (y[0] - r * y[1]) / l]
    sol = solve_ivp(rhs, (0.0, t), [v_s, 0.0], **OPTS)
    return float(sol.y[1, -1]), float(sol.y[0, -1])


def _decay(v_s, r, l, v_d, i0, u0, sink: bool, t_eval=None):
    """The fast decay into the bus to the current's zero: ``(zero time s, highest bus V)``
    (and the current at ``t_eval`` as ``_decay.at``)."""
    def feed(u):
        return (v_s - u) / R_S if sink or u < v_s else 0.0

    def rhs(_t, y):
        return [-(r * y[0] + y[1] + 2 * v_d) / l, (y[0] + feed(y[1])) / C]

    zero = lambda t, y: y[0]   # noqa: E731
    zero.terminal, zero.direction = True, -1
    reach = lambda t, y: y[1] - v_s   # noqa: E731  (the one-way feed blocks here)
    reach.terminal, reach.direction = (not sink), 1
    t0, y0, top, pieces = 0.0, [i0, u0], max(u0, v_s), []
    while True:
        sol = solve_ivp(rhs, (t0, 1.0), y0, events=[zero, reach], dense_output=True, **OPTS)
        pieces.append(sol)
        ts = np.linspace(t0, sol.t[-1], 2001)
        top = max(top, float(np.max(sol.sol(ts)[1])))
        if sol.t_events[0].size:
            break
        t0, y0 = float(sol.t[-1]), [float(sol.y[0, -1]), v_s * (1 + 1e-15)]
    if t_eval is not None:
        _decay.at = np.array([next(p for p in pieces if p.t[0] <= t <= p.t[-1]).sol(t)[0] for t in t_eval])
    return float(sol.t_events[0][0]), top


def test_pulses_and_their_fast_decay_into_the_bus_against_solve_ivp(bridge):
    _, drive, d = bridge
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    tol = drive.latch.recharge_tolerance
    for p in d.latch.pulses:
        # the end current at the worst corner: the lowest source, from a full capacitor
        _, temp, rf, lf = _corner(p.worst_corner)
        r_on, *_, = _loop(drive, temp, rf, lf)
        v = drive.supply.min * (1 - tol)
        assert p.end_current_a == pytest.approx(_pulse(v, r_on, drive.coil.inductance * lf, p.shortest_s)[0],
                                                rel=1e-6), "end current vs solve_ivp"
        # every corner's decay from the lowest and the highest starting bus: the longest time
        # to zero and the highest switch voltage
        zeros, v_sw = [], []
        for v_s in (v, drive.supply.max):
            for temp in (drive.ambient.min, drive.thermal.max_coil_temp):
                for rf in (1 - drive.coil.resistance_tolerance, 1 + drive.coil.resistance_tolerance):
                    for lf in (1 - drive.coil.inductance_tolerance, 1 + drive.coil.inductance_tolerance):
                        r_on, r_off, l, v_d = _loop(drive, temp, rf, lf)
                        i0 = _pulse(v_s, r_on, l, p.time_s, bus=False)[0]   # the energies' stiff pulse
                        low = max(min((1 - tol) * v_s, v_s - R_S * i0), -2 * v_d)
                        for u0 in (low, v_s):
                            t_zero, top = _decay(v_s, r_off, l, v_d, i0, u0, drive.supply.sink)
                            zeros.append(t_zero)
                            v_sw.append(top + v_d)
        assert p.decay_time_s == pytest.approx(max(zeros), rel=1e-6), "time to zero vs solve_ivp"
        assert p.peak_switch_voltage_v == pytest.approx(max(v_sw), rel=1e-6), "switch voltage vs solve_ivp"
        assert max(v_sw) > drive.supply.max + 2 * drive.freewheel.diode_drop, "precondition: the bus rises"
    assert {c.name for c in d.checks} >= {"set_bus", "reset_bus"}


def simulated(path, tmp_path):
    """``coildrive simulate PATH`` at 12 V with the coil at 20 degC (a real subprocess): the
    CSV's columns by name."""
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    return np.genfromtxt(csv, delimiter=",", names=True)


def test_simulate_check_and_the_device(bridge, tmp_path):
    path, drive, d = bridge
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["latch"]["recharge_interval_s"] > 0
    data = simulated(path, tmp_path)
    p = d.latch.pulses[0]
    r_on, r_off, l, v_d = _loop(drive, 20.0, 1.0, 1.0)
    i0, u0 = _pulse(12.0, r_on, l, p.time_s)
    t_zero, top = _decay(12.0, r_off, l, v_d, i0, u0, drive.supply.sink)
    k = (data["time_s"] > p.time_s) & (data["time_s"] < p.time_s + 0.9 * t_zero)
    _decay(12.0, r_off, l, v_d, i0, u0, drive.supply.sink, t_eval=data["time_s"][k] - p.time_s)
    assert np.allclose(data["current_a"][k], _decay.at, rtol=1e-6, atol=1e-9), "the decay vs solve_ivp"
    assert float(np.max(data["q1_v"])) == pytest.approx(top + v_d, rel=1e-4), "the highest bus + V_d"
    got = predict_pulse(d, "set", 12.0, 20.0, 0.0, 0.001)["time_to_zero_s"]
    assert got == pytest.approx(t_zero, rel=1e-6), "the check's time to zero vs solve_ivp"
    for ok, rep in device_reports(d, tmp_path, 12.0, 20.0):
        assert rep.ok == ok, [(i.name, i.detail) for i in rep.items]
    # the Monte Carlo's samples lie in the corners' box: the corners bound them
    mc = latch_monte_carlo(d, 300, seed=3)
    for q in d.latch.pulses:
        f = mc["pulses"][q.name]
        assert f["decay_time_s"]["max"] <= q.decay_time_s * (1 + 1e-12)
        assert f["end_current_a"]["min"] >= q.end_current_a * (1 - 1e-12)
