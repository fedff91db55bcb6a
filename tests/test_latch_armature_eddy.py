"""A latching coil with a moving armature and an eddy-current term (``[hold] mode =
"latch"``, ``[armature]`` and ``[coil] eddy_resistance``): the bundled bolt of
tests/test_latch_armature.py with an invented 200 ohm eddy resistance across its set
winding's magnetising branch. The set pulse's seat time, end current and energies (the eddy
resistance's share and the armature's apart) against scipy's solve_ivp on the circuit and
armature equations written afresh here; simulate's terminal current against the same
reference; the energies' balance."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from conftest import EXAMPLES, run_cli
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from test_latch_armature import bolt_circuit

BOLT = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"
R_E = 200.0       # ohm, invented


@pytest.fixture(scope="module")
def eddy_bolt(tmp_path_factory):
    text = BOLT.read_text().replace("inductance_tolerance = 0.10\n", "inductance_tolerance = 0.10\n"
                                    f'eddy_resistance = "{R_E:g} ohm"\n', 1)
    path = tmp_path_factory.mktemp("eddy-bolt") / "eddy-bolt.toml"
    path.write_text(text.replace('board = "relay-12bit-resistor"',
                                 f'board = "{BOLT.parents[2] / "boards" / "relay-12bit-resistor"}.toml"'))
    drive = load_drive(path)
    return path, drive, design_latch(drive)


def reference(drive, supply, coil_temp, rf, lf, t_long, t_short=None):
    """The set pulse and its decay at one corner by solve_ivp (DOP853), written afresh:
    the magnetising branch's flux ``lam = L(x) i_m`` with ``L(x) = L_c / (1 + beta x)``
    (the inductances measured open and seated), the eddy resistance across it, the loop
    ``V = R_on i + R_e (i - i_m)`` and ``dlam/dt = R_e (i - i_m)`` (Kirchhoff); the co-energy
    force ``1/2 i_m^2 |dL/dx|`` against spring + load + damping, an inelastic seat; then
    the freewheel (diode + resistor) while the terminal current ``i`` flows, and the
    flux's tail through ``R_e`` alone once the diode blocks, the armature held on the seat.
    (The circuit at the corner: :func:`test_latch_armature.bolt_circuit`.) Returns a dict: seat time s, terminal current at ``t_long`` and ``t_short`` A,
    magnetising current at ``t_short``; supply, copper, eddy energies and the magnetic
    force's work J over the pulse and its decay."""
    a = drive.armature
    r_coil, r_on, r_off, v_off, lc, beta, ind, opening = bolt_circuit(drive, coil_temp, rf, lf)
    s = a.stroke

    def terminal(lam, x):   # switched on: V = R_on i + R_e (i - i_m)
        return (supply + R_E * lam / ind(x)) / (r_on + R_E)

    def rhs(t, y, moving):
        lam, x, v = y[0], y[1], y[2]
        i_m, i = lam / ind(x), terminal(lam, x)
        force = 0.5 * i_m ** 2 * lc * beta / (1 + beta * x) ** 2
        dv = (opening(x) - force - a.damping * v) / a.mass if moving else 0.0
        return [R_E * (i - i_m), v if moving else 0.0, dv, i, i * i, R_E * (i - i_m) ** 2,
                force * -v if moving else 0.0]

    opts = dict(method="DOP853", rtol=1e-11, atol=1e-14, dense_output=True)
    start = lambda t, y, m: 0.5 * (y[0] / ind(s)) ** 2 * lc * beta / (1 + beta * s) ** 2 - opening(s)  # noqa: E731
    start.terminal, start.direction = True, 1
    r1 = solve_ivp(rhs, (0, t_long), [0, s, 0, 0, 0, 0, 0], args=(False,), events=start, **opts)
    seat = lambda t, y, m: y[1]   # noqa: E731
    seat.terminal, seat.direction = True, -1
    r2 = solve_ivp(rhs, (r1.t[-1], t_long), r1.y[:, -1], args=(True,), events=seat, **opts)
    t_seat = float(r2.t_events[0][0])
    y = r2.y[:, -1].copy()
    y[1], y[2] = 0.0, 0.0
    r3 = solve_ivp(rhs, (t_seat, t_long), y, args=(False,), **opts)
    lam, q_on, s_on, e_on, work = r3.y[0, -1], r3.y[3, -1], r3.y[4, -1], r3.y[5, -1], r3.y[6, -1]
    out = {"seat": t_seat, "i_top": float(terminal(lam, 0.0)), "supply": supply * q_on, "work": work}
    if t_short is not None:
        run = next(r for r in (r1, r2, r3) if r.t[0] <= t_short <= r.t[-1])
        ys = run.sol(t_short)
        out["i_short_m"] = float(ys[0] / ind(ys[1]))

    def freewheel(t, y):   # 0 = R_off i + V_off + R_e (i - i_m), while i > 0
        i_m = y[0] / lc
        i = (R_E * i_m - v_off) / (r_off + R_E)
        return [R_E * (i - i_m), i * i, R_E * (i - i_m) ** 2]

    block = lambda t, y: (R_E * y[0] / lc - v_off)   # noqa: E731  (the terminal current's zero)
    block.terminal, block.direction = True, -1
    r4 = solve_ivp(freewheel, (0, 10.0), [lam, 0, 0], events=block, method="DOP853", rtol=1e-11, atol=1e-14)
    tau = lc / R_E
    r5 = solve_ivp(lambda t, y: [-R_E * y[0] / lc, R_E * (y[0] / lc) ** 2], (0, 60 * tau), [r4.y[0, -1], 0.0],
                   method="DOP853", rtol=1e-11, atol=1e-16)
    out["copper"] = r_coil * (s_on + r4.y[1, -1])
    out["eddy"] = e_on + r4.y[2, -1] + r5.y[1, -1]
    return out


def test_set_pulse_against_solve_ivp(eddy_bolt):
    _, drive, d = eddy_bolt
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = next(p for p in d.latch.pulses if p.name == "set")
    v, temp, rf, lf = 10.8, 130.0, 1.07, 0.9
    assert p.seat_corner == "10.8 V, coil 130 degC, R+7%, L-10%"
    ref = reference(drive, v, temp, rf, lf, p.time_s)
    assert p.seat_time_s == pytest.approx(ref["seat"], rel=1e-5), "seat time vs scipy solve_ivp (DOP853)"
    plain = design_latch(load_drive(BOLT)).latch.pulses[0]
    assert p.seat_time_s > plain.seat_time_s * 1.005, "precondition: the eddy term delays the seat"
    # the end current: the magnetising current's (the force's) at the shortest pulse's end,
    # least with L high (the slower seated rise)
    ref = reference(drive, v, temp, rf, 1.1, p.time_s, t_short=p.shortest_s)
    assert p.end_current_a == pytest.approx(ref["i_short_m"], rel=1e-5), "end current vs solve_ivp"
    # the energies at the corner where the supply gives the most: each against scipy's own
    assert p.energy_corner == "13.2 V, coil -20 degC, R-7%, L-10%"
    ref = reference(drive, 13.2, -20.0, 0.93, 0.9, p.time_s)
    assert p.supply_j == pytest.approx(ref["supply"], rel=1e-5), "supply energy vs scipy solve_ivp"
    assert p.copper_j == pytest.approx(ref["copper"], rel=1e-5), "copper energy vs scipy solve_ivp"
    assert p.eddy_j == pytest.approx(ref["eddy"], rel=1e-4), "eddy energy vs scipy solve_ivp"
    assert p.armature_j == pytest.approx(ref["work"], rel=1e-4), "armature energy vs the force's work (solve_ivp)"
    assert p.eddy_j > 0.02 * p.supply_j, "precondition: the eddy term takes a real share"
    assert p.supply_j == pytest.approx(p.copper_j + p.switch_sense_j + p.freewheel_j + p.returned_j
                                       + p.eddy_j + p.armature_j, rel=1e-12)


def test_cli_simulate_and_json(eddy_bolt, tmp_path):
    path, drive, d = eddy_bolt
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    set_ = doc["latch"]["pulses"][0]
    assert set_["eddy_j"] > 0 and set_["armature_j"] > 0
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    t_set = set_["time_s"]
    ref = reference(drive, 12.0, 20.0, 1.0, 1.0, t_set)
    k = int(np.searchsorted(data["time_s"], t_set))
    # the terminal current (what the sense reads) at the pulse's end
    assert data["current_a"][k] == pytest.approx(ref["i_top"], rel=1e-5), "vs scipy solve_ivp (DOP853)"


def test_the_bench(eddy_bolt, tmp_path):
    from coildrive.bench.latch_check import predict_pulse
    from test_latch_flux import device_reports

    _, drive, d = eddy_bolt
    p = next(p for p in d.latch.pulses if p.name == "set")
    # the check's end current is the terminal current the sense reads
    got = predict_pulse(d, "set", 12.0, 20.0, 0.001, 0.001)["end_current_a"]
    assert got == pytest.approx(reference(drive, 12.0, 20.0, 1.0, 1.0, p.time_s)["i_top"], rel=1e-5), \
        "vs scipy solve_ivp (DOP853)"
    # the virtual device's capture passes as designed and fails with 40 % more resistance
    for ok, rep in device_reports(d, tmp_path, 12.0, 20.0):
        assert rep.ok == ok, [(i.name, i.detail) for i in rep.items]
