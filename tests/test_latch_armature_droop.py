"""A latching coil with a moving armature on the drooping bus: the bundled bolt
(examples/latching/bolt-catch-reset-winding-12v.toml) fed through an invented 1.5 ohm
source resistance onto 2200 uF at the board.

References, written afresh (tests/test_latch_armature.py's ``_set_pulse_reference``): scipy's
``solve_ivp`` (DOP853) of the set winding's circuit with ``L(x) = L_c / (1 + beta x)``
(``V = R i + L(x) di/dt + i dL/dx dx/dt``, the co-energy force ``1/2 i^2 |dL/dx|``, an
inelastic seat) fed from the bulk capacitor, ``C du/dt = (V_s - u) / R_s - i``, full at
switch-on: the latest seat time and the shortest pulse's end current at the worst corner,
the lowest bus over the longest pulse; the capacitor's recharge after it from the RC
step ``R_s C ln(1 + dV / (tol V_s))`` (the coil off the bus, docs/design-method.md); the
reset winding's trip from a full capacitor (its RL loop and the capacitor by solve_ivp)
and the armature's flight to the open stop. With a clamp across the switch (an invented
36 V) the set pulse's run then the clamped decay of the seated coil from its end state,
``L_c di/dt = u - V_clamp - R_off i`` with the capacitor a state, at each of the envelope's 16
corners: the droop (pulse and decay), the time to zero and the recharge after it. Tolerances
1e-5 (the batched model runs at rtol 1e-7).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import run_cli
from coildrive.bench.latch_check import predict_pulse
from coildrive.design.latch_montecarlo import latch_monte_carlo
from test_latch_armature import BOLT, open_flight, _set_pulse_reference as ref
from test_latch_armature_curves import designed
from test_latch_flux import _corner, device_reports

R_S, C = 1.5, 2200e-6


def droop_bolt(tmp_path):
    text = BOLT.read_text().replace('max = "13.2 V"\n', f'max = "13.2 V"\nsource_resistance = "{R_S} ohm"\n'
                                    f'capacitance = "{C * 1e6:g} uF"\n', 1)
    path = tmp_path / "droop-bolt.toml"
    path.write_text(text.replace('board = "relay-12bit-resistor"',
                                 f'board = "{BOLT.parents[2] / "boards" / "relay-12bit-resistor"}.toml"'))
    return path


@pytest.fixture(scope="module")
def bolt(tmp_path_factory):
    return designed(droop_bolt(tmp_path_factory.mktemp("latch-arm-droop")))


def test_set_pulse_on_the_drooping_bus_against_solve_ivp(bolt):
    _, drive, d = bolt
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = next(p for p in d.latch.pulses if p.name == "set")
    # designed from a source and capacitor recharge_tolerance below the lowest supply
    v = drive.supply.min * (1 - drive.latch.recharge_tolerance)
    _, temp, rf, lf = _corner(p.seat_corner)
    assert p.seat_corner.startswith(f"{v:.4g} V, coil 130 degC, R+7%")
    t_seat, *_ = ref(drive, v, temp, rf, lf, p.time_s, bus=(R_S, C))
    assert p.seat_time_s == pytest.approx(t_seat, rel=1e-5), "seat time vs scipy solve_ivp (DOP853)"
    # the least current at the shortest pulse's end: there with L high (the slower seated rise)
    ref(drive, v, temp, rf, 1.1, p.time_s, bus=(R_S, C), t_short=p.shortest_s)
    assert p.end_current_a == pytest.approx(ref.i_short, rel=1e-5), "end current vs solve_ivp"
    stiff, *_ = ref(drive, v, temp, rf, lf, p.time_s)
    assert t_seat > stiff * 1.01, "precondition: the droop delays the seat"
    # the capacitor: the longest pulse from a full one at the recharge corner, then its recharge
    v, temp, rf, lf = _corner(p.recharge_corner)
    ref(drive, v, temp, rf, lf, p.time_s, bus=(R_S, C))
    dv = v - ref.low
    tol = drive.latch.recharge_tolerance
    assert p.recharge_time_s == pytest.approx(R_S * C * math.log1p(dv / (tol * v)), rel=1e-5), \
        "recharge: the RC step from the lowest bus (solve_ivp)"
    assert p.droop_v == pytest.approx(dv, rel=1e-5)
    # the energies stay the stiff bus's at the energy corner (a drooping one gives less)
    v, temp, rf, lf = _corner(p.energy_corner)
    _, supply_j, copper_j, work = ref(drive, v, temp, rf, lf, p.time_s)
    assert p.supply_j == pytest.approx(supply_j, rel=1e-5) and p.copper_j == pytest.approx(copper_j, rel=1e-5)
    assert p.armature_j == pytest.approx(work, rel=1e-4)


def test_reset_trip_on_the_drooping_bus_against_solve_ivp(bolt):
    # the reset winding's rise from a full capacitor to reset.current (solve_ivp of its RL
    # loop and the capacitor), then spring + load carry the armature to the open stop
    from scipy.integrate import solve_ivp

    _, drive, d = bolt
    p = next(p for p in d.latch.pulses if p.name == "reset")
    v = drive.supply.min * (1 - drive.latch.recharge_tolerance)
    _, temp, rf, lf = _corner(p.worst_corner)
    rc, b = drive.latch.reset_coil, drive.board
    r_on = (rc.resistance * (1 + 0.00393 * (temp - rc.reference_temp)) * rf + drive.switch.on_resistance
            + b.sense.resistance)   # copper's alpha per K (IEC 60028); the sense in the coil path
    trip = lambda t, y: y[1] - p.current_a   # noqa: E731
    trip.terminal = True
    r = solve_ivp(lambda t, y: [((v - y[0]) / R_S - y[1]) / C, (y[0] - r_on * y[1]) / (rc.inductance * lf)],
                  (0, 1.0), [v, 0.0], method="DOP853", rtol=1e-12, atol=1e-14, events=trip)
    assert p.worst_time_s == pytest.approx(float(r.t_events[0][0]), rel=1e-6), "trip vs solve_ivp"
    assert p.open_time_s - p.worst_time_s == pytest.approx(open_flight(drive), rel=1e-5), "flight vs solve_ivp"


def test_cli_simulate_check_and_monte_carlo(bolt, tmp_path):
    path, drive, d = bolt
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["latch"]["recharge_interval_s"] > 0 and doc["latch"]["pulses"][0]["droop_v"] > 0
    p = d.latch.pulses[0]
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    ref(drive, 12.0, 20.0, 1.0, 1.0, p.time_s, bus=(R_S, C))
    k = int(np.searchsorted(data["time_s"], p.time_s))
    assert data["current_a"][k] == pytest.approx(ref.i_top, rel=1e-5), "simulate vs solve_ivp"
    got = predict_pulse(d, "set", 12.0, 20.0, 0.001, 0.001)["end_current_a"]
    assert got == pytest.approx(ref.i_top, rel=1e-5), "the check's end current vs solve_ivp"
    # the virtual device -> capture -> check (plumbing: the device runs the design's physics)
    for ok, rep in device_reports(d, tmp_path, 12.0, 20.0):
        assert rep.ok == ok, [(i.name, i.detail) for i in rep.items]
    mc = latch_monte_carlo(d, 200, seed=3)
    assert mc["pulses"]["set"]["time_to_current_s"]["max"] <= p.worst_time_s * (1 + 1e-12)
    assert mc["pulses"]["set"]["supply_j"]["max"] <= p.supply_j * (1 + 1e-12)
    assert mc["failures"]["set_not_seated"] == 0


def test_clamp_on_the_drooping_bus_against_solve_ivp(tmp_path):
    """The set pulse's seat run carries the clamped decay's draw on the capacitor: from the
    run's end state (solve_ivp, the armature seated) the seated coil decays from the bus
    through the winding into the clamp, the capacitor a state (written afresh here)."""
    from scipy.integrate import solve_ivp
    from test_latch_clamp import V_CLAMP, envelope_runs
    from test_latch_armature import bolt_circuit

    path = droop_bolt(tmp_path)
    path.write_text(path.read_text() + f'\n[freewheel]\ntype = "clamp"\nclamp_voltage = "{V_CLAMP:g} V"\n')
    _, drive, d = designed(path)
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = next(p for p in d.latch.pulses if p.name == "set")
    assert drive.freewheel.resistance == 0.0 and drive.board.sense.position == "coil"

    def one(v, temp, rf, lf):   # (lowest bus V over the pulse and the decay, time to zero s, bus then V)
        ref(drive, v, temp, rf, lf, p.time_s, bus=(R_S, C))
        r_coil, _, _, _, lc, *_ = bolt_circuit(drive, temp, rf, lf)
        r_off = r_coil + drive.board.sense.resistance   # the sense in the coil path, the clamp across the switch
        zero = lambda t, y: y[0]   # noqa: E731
        zero.terminal, zero.direction = True, -1
        off = solve_ivp(lambda t, y: [(y[1] - V_CLAMP - r_off * y[0]) / lc, ((v - y[1]) / R_S - y[0]) / C],
                        (0, 10.0), [ref.i_top, ref.bus_end], events=zero, dense_output=True, method="DOP853",
                        rtol=1e-11, atol=1e-14)
        t_zero = float(off.t_events[0][0])
        return (min(ref.low, off.sol(np.linspace(0, t_zero, 4001))[1].min()), t_zero, float(off.y_events[0][0][1]))
    runs = envelope_runs(drive, drive.coil, one)
    assert p.droop_v == pytest.approx(max(v - low for (v, *_), (low, *_) in runs.items()), rel=1e-5)
    assert p.decay_time_s == pytest.approx(max(x[1] for x in runs.values()), rel=1e-5)
    # the recharge: the decay, then the RC step from the bus where the current stops
    tol = drive.latch.recharge_tolerance
    t_rc = max(t_zero + R_S * C * math.log1p((v - v_end) / (tol * v)) for (v, *_), (_, t_zero, v_end) in runs.items())
    assert p.recharge_time_s == pytest.approx(t_rc, rel=1e-5)
    # simulate and the bench run the same decay (plumbing: the device runs the design's physics)
    for ok, rep in device_reports(d, tmp_path, 12.0, 20.0):
        assert rep.ok == ok, [(i.name, i.detail) for i in rep.items]
