"""A moving armature on a full bridge: the pull-in on the two-switch loop, the seated hold
on the slow decay, the release on the fast decay into the bus (``V_bus + 2 V_d`` through
``R_coil + R_sense``).

Outside source: scipy's ``solve_ivp`` (Radau, tight tolerances) on the armature's
equations written here afresh from the drive file's raw numbers -- the flux linkage
``lambda = L(x) i`` with ``L(x) = L_c / (1 + beta x)`` through the two measured
inductances, ``d lambda/dt = V - R i`` (Kirchhoff's voltage law), the magnetic pull
``(i^2 / 2) |dL/dx|`` (the co-energy derivative of any electromechanics text) against
the spring, the load and the viscous damping, Newton's second law for the plunger, and
stops that end the motion dead. None of coildrive's model code is used for the reference.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from conftest import BOARDS, EXAMPLES, first_switch_events
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.armature import params_from_loop
from coildrive.model.armature_runs import pull_in, release
from coildrive.model.circuit import loop
from coildrive.model.waveform import armature_actuation

ARMATURE = """
[armature]
inductance_open = "30 mH"
inductance_closed = "80 mH"
stroke = "1.5 mm"
mass = "6 g"
spring_preload = "0.6 N"
spring_rate = "200 N/m"
load_force = "0.3 N"
damping = "0.3 N*s/m"
"""
V_BUS, TEMP = 24.0, 20.0   # at the coil's reference temperature: R_coil is the file's value


def _drive(tmp_path, armature=ARMATURE, name="arm.toml"):
    text = (EXAMPLES / "dosing-valve-bridge-24v.toml").read_text().replace(
        'board = "bridge-m32-fast"', f'board = "{BOARDS / "bridge-m32-fast.toml"}"')
    text = text.replace('current = "0.08 A"', 'current = "0.12 A"')
    path = tmp_path / name
    path.write_text(text + armature)
    return load_drive(path)


class Reference:
    """The armature on the bridge, from the file's raw numbers (SI)."""

    def __init__(self, drive):
        a, sw, sense = drive.armature, drive.switch, drive.board.sense
        assert drive.coil.reference_temp == TEMP
        r_coil = drive.coil.resistance
        self.r_on = r_coil + 2 * sw.on_resistance + sense.resistance      # through two switches
        self.r_fast = r_coil + sense.resistance                           # two body diodes
        self.v_fast = V_BUS + 2 * drive.freewheel.diode_drop              # into the bus
        self.v_d = drive.freewheel.diode_drop
        self.lc, self.s = a.inductance_closed, a.stroke
        self.beta = (a.inductance_closed / a.inductance_open - 1.0) / a.stroke
        self.m, self.c = a.mass, a.damping
        self.f_open = lambda x: a.spring_preload + a.spring_rate * (a.stroke - x) + a.load_force
        self.cap = None   # F: the bus on a capacitor alone (supply.sink = false), else stiff

    def ind(self, x):
        return self.lc / (1.0 + self.beta * x)

    def pull(self, lam):
        """|dL/dx| i^2 / 2 with i = lambda / L(x): lambda^2 beta / (2 L_c), any gap."""
        return lam ** 2 * self.beta / (2.0 * self.lc)

    def rhs(self, on, moving):
        """State (lambda, x, v, charge, e_in, e_copper+sense+switches, e_damping, bus V)."""
        def f(t, y):
            lam, x, v = y[0], y[1], y[2]
            i = max(lam, 0.0) / self.ind(x)
            v_fast = y[7] + 2 * self.v_d                               # into the bus
            dlam = V_BUS - self.r_on * i if on else (-(self.r_fast * i + v_fast) if lam > 0 else 0.0)
            dv = (self.f_open(x) - self.pull(lam) - self.c * v) / self.m if moving else 0.0
            r = self.r_on if on else self.r_fast
            return [dlam, v if moving else 0.0, dv, i, V_BUS * i if on else 0.0, r * i * i,
                    self.c * v * v, i / self.cap if self.cap and not on else 0.0]
        return f

    def run(self, y, t0, on, moving, event, t_end=1.0, also=None):
        """Integrate to ``event``; ``also``: a second, non-terminal event whose first time
        is returned too."""
        event.terminal = True
        events = [event] + ([also] if also else [])
        sol = solve_ivp(self.rhs(on, moving), (t0, t_end), y, method="Radau", rtol=1e-10,
                        atol=[1e-12, 1e-12, 1e-9, 1e-12, 1e-12, 1e-12, 1e-12, 1e-9], events=events)
        assert sol.t_events[0].size, "the event never came"
        out = float(sol.t_events[0][0]), sol.y_events[0][0].copy()
        if also:
            return out + (float(sol.t_events[1][0]) if sol.t_events[1].size else None,)
        return out

    def pull_in(self, t_peak):
        """Switch on from rest at the open stop: (start, seat time, state at t_peak, KE at seat)."""
        y = np.array([0.0, self.s, 0.0, 0.0, 0.0, 0.0, 0.0, V_BUS])
        t_start, y = self.run(y, 0.0, True, False, lambda t, y: self.pull(y[0]) - self.f_open(self.s))
        t_seat, y = self.run(y, t_start, True, True, lambda t, y: y[1])
        ke = 0.5 * self.m * y[2] ** 2
        y[1] = y[2] = 0.0                                     # dead stop on the seat
        t_end, y = self.run(y, t_seat, True, False, lambda t, y: t - t_peak)
        return t_start, t_seat, y, ke

    def release(self, y):
        """Turn off at t = 0, seated: (drop-out, open time, zero time, state at the end, KE)."""
        y = y.copy()
        y[1] = y[2] = 0.0
        t_un, y = self.run(y, 0.0, False, False, lambda t, y: self.pull(y[0]) - self.f_open(0.0))
        t_open, y, t_zero = self.run(y, t_un, False, True, lambda t, y: y[1] - self.s,
                                     also=lambda t, y: y[0] - 1e-15)
        ke = 0.5 * self.m * y[2] ** 2
        y[2] = 0.0                                            # dead stop at the open stop
        if t_zero is None:
            t_zero, y = self.run(y, t_open, False, False, lambda t, y: y[0])
        return t_un, t_open, t_zero, y, ke


def _model(drive):
    hold = loop(drive, V_BUS, TEMP)
    fast = loop(drive, V_BUS, TEMP, path="release")
    return params_from_loop(drive.armature, hold, 1.0), params_from_loop(drive.armature, fast, 1.0)


def test_pull_in_seat_and_fast_release_against_solve_ivp(tmp_path):
    drive = _drive(tmp_path)
    ref = Reference(drive)
    p, p_fast = _model(drive)
    # the pull-in on the switch-on loop (R_coil + 2 R_switch + R_sense)
    t_start, t_seat, _, _ = ref.pull_in(t_peak=0.02)
    pin = pull_in(p, peak_time=0.02)
    assert pin.status[0] == 0
    assert float(pin.start_time[0]) == pytest.approx(t_start, rel=1e-4)
    assert float(pin.seat_time[0]) == pytest.approx(t_seat, rel=1e-5)
    # the release from the seated hold's top, on the fast decay into the bus
    i_off = 0.3
    y = np.array([ref.lc * i_off, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, V_BUS])
    t_un, t_open, t_zero, y_end, _ = ref.release(y)
    rb = release(p_fast, i_off)
    assert rb.status[0] == 0
    assert float(rb.unlatch_time[0]) == pytest.approx(t_un, rel=1e-4)
    assert float(rb.open_time[0]) == pytest.approx(t_open, rel=1e-5)     # the drop-out, on the stop
    assert float(rb.zero_time[0]) == pytest.approx(t_zero, rel=1e-5)
    assert float(rb.charge[0]) == pytest.approx(y_end[3], rel=1e-5)
    # the model's release loop is the fast one (the hold's slow decay never reaches zero)
    assert float(p_fast.v_off[0]) == pytest.approx(ref.v_fast) and float(p.v_off[0]) == 0.0


def test_energy_balance_of_a_full_actuation_with_the_energy_back_to_the_bus(tmp_path):
    """Bus energy in = copper, sense and switch heat + body diodes + energy back to the bus
    + damping + the two dead stops' kinetic energy (spring and load give back what they took:
    the plunger ends where it began). Energy conservation, on the reference; the model's
    energy back to the bus (``V_bus`` x the release charge) against it."""
    drive = _drive(tmp_path)
    ref = Reference(drive)
    _, t_seat, y_on, ke_seat = ref.pull_in(t_peak=0.012)
    assert t_seat < 0.012
    e_in, e_r_on, e_damp_on = y_on[4], y_on[5], y_on[6]
    i_off = y_on[0] / ref.lc
    rel = y_on.copy()
    rel[3:7] = 0.0
    _, _, _, y_off, ke_open = ref.release(rel)
    q_back = y_off[3]
    returned = V_BUS * q_back
    spent = e_r_on + y_off[5] + 2 * ref.v_d * q_back + returned + e_damp_on + y_off[6] + ke_seat + ke_open
    assert spent == pytest.approx(e_in, rel=1e-6)
    assert returned > 0.1 * e_in   # a real share comes back: the regenerative decay
    _, p_fast = _model(drive)
    rb = release(p_fast, i_off)
    assert V_BUS * float(rb.charge[0]) == pytest.approx(returned, rel=1e-5)


def test_design_and_simulate_release_on_the_fast_decay(tmp_path):
    """The design's release figures are the armature's on the fast decay: its energy back
    to the bus is V_bus x the release charge at its corner, and the armature lets go."""
    drive = _drive(tmp_path)
    d = design(drive)
    checks = {c.name: c for c in d.checks}
    assert checks["armature_seats"].ok and checks["armature_releases"].ok
    assert "fast decay" in checks["armature_releases"].detail
    b = d.topology.bridge
    assert b.returned_per_release_j > 0 and b.pumped_bus_v > drive.supply.max
    # simulate's actuation: the seated hold on the slow decay, then the fast release
    # (against the reference from the current it turns off)
    w = armature_actuation(drive, V_BUS, TEMP, 0.008, 0.3, 20e3, 0.005)
    t_off = w.events["off"]
    k = int(np.searchsorted(w.time, t_off))
    ref = Reference(drive)
    _, t_open, t_zero, _, _ = ref.release(np.array([ref.lc * w.current[k], 0, 0, 0, 0, 0, 0, V_BUS]))
    assert w.events["zero"] - t_off == pytest.approx(t_zero, rel=1e-5)
    assert w.events["open"] - t_off == pytest.approx(t_open, rel=1e-3)
    # the switches see the bus and a body diode while the current returns
    during = (w.time > t_off) & (w.current > 0.01)
    assert np.all(w.switch_voltage[during] >= V_BUS)
    # the four switches: all open after the final turn-off, the coil at -(V_bus + 2 V_d) and below
    assert all(np.all(state[w.time > t_off] == 0) for state in w.switches.values())
    assert np.all(w.coil_voltage[during] <= -ref.v_fast)
    assert "high_a_on" in w.to_csv().splitlines()[0]


def test_an_armature_stuck_open_gives_the_plain_bridge_numbers(tmp_path):
    """inductance_open = inductance_closed = coil.inductance: no force, the plunger never
    moves, and the bridge's hold and release (duty, release time, energy back to the bus)
    are the plain bridge design's."""
    stuck = ARMATURE.replace('"30 mH"', '"70 mH"').replace('"80 mH"', '"70 mH"')
    plain = design(_drive(tmp_path, armature="", name="plain.toml"))
    arm = design(_drive(tmp_path, armature=stuck))
    assert not {c.name: c for c in arm.checks}["armature_seats"].ok   # it never moves
    pb, ab = plain.topology.bridge, arm.topology.bridge
    # the release's charge is the armature run's, time-stepped (rtol 1e-7 on the state;
    # 2e-4 off the closed form here), the rest closed form on both sides
    assert ab.returned_per_release_j == pytest.approx(pb.returned_per_release_j, rel=1e-3)
    # (the peak's and the trip's figures differ by design: a plunger that never seats
    # leaves the peak at its longest and the end-of-peak current at V/R)
    assert arm.hold.duty == pytest.approx(plain.hold.duty, rel=1e-9)
    assert arm.release.zero_time_s == pytest.approx(plain.release.zero_time_s, rel=1e-4)


def test_emulate_runs_it(tmp_path):
    """The model's virtual device seats and releases the plunger on the bridge; check
    passes its capture (both share the design's physics: plumbing, not numbers)."""
    from coildrive.bench.check import check_capture
    from coildrive.bench.synth import synth_design_capture

    drive = _drive(tmp_path)
    des = design(drive)
    switch = first_switch_events(drive, des)
    assert switch[:2] == [1, 0], "seats during the peak, opens after the release"
    cap = synth_design_capture(des, actuations=1, hold_time=0.05, noise_codes=1.0, seed=5)  # settled
    report = check_capture(cap, des)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items]


@pytest.mark.compiler
def test_firmware_in_the_loop_seats_it_and_reports_it_stuck(tmp_path):
    """The compiled driver (gcc) on the bridge with the armature model in the loop, in
    process: `check` passes at the nominal point and at the lowest supply with the hottest
    coil of the design (pull-in, seat, hold, the fast release); stuck (no dip), the driver
    reports STUCK. Plumbing: the coil model is the design's."""
    from coildrive.bench.messages import EventKind, FaultCode
    from driver_harness import checked_rows, loop_captures

    drive = _drive(tmp_path)
    des = design(drive)
    hot = max(c.coil_temp_c for c in des.corners)
    runs = [(V_BUS, TEMP, None), (drive.supply.min, hot, None), (V_BUS, TEMP, "stuck")]
    for (supply, temp, fault), (path, cap) in zip(runs, loop_captures(tmp_path, des, runs)):
        if fault:
            faults = [e.value for e in cap.events if e.kind == EventKind.FAULT]
            assert faults and set(faults) == {int(FaultCode.STUCK)}, faults
            continue
        rows = checked_rows(path, drive.source, temp)
        assert rows["seated_time"]["status"] == "pass" and rows["release_time"]["status"] == "pass"


def test_live_tuning_takes_it(tmp_path):
    """Live tuning takes the armature on a bridge (tests/test_tune_live_coils.py): past the
    drive's checks, a port that is not there is the one line."""
    from typer.testing import CliRunner

    from coildrive.cli import app

    drive = _drive(tmp_path)
    res = CliRunner().invoke(app, ["tune", drive.source, "--port", str(tmp_path / "no-port"),
                                   "--capture", str(tmp_path / "c.cdcap")])
    assert res.exit_code == 2, res.stdout
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "--port" in lines[0] and "armature" not in lines[0], res.stderr


def test_the_pump_up_bound_is_on_the_safe_side(tmp_path):
    """With supply.sink = false the release's charge lands on the bulk capacitor and the
    bus rises as the plunger falls: the reference integrates that (``C dV/dt = i``, the
    coil decaying into ``V + 2 V_d``) with the moving armature; the design's bound
    ``V_bus + Q/C`` (Q: the release's charge at the fixed bus) must not be below it, and
    not far above (the rising bus only shortens the decay)."""
    drive = _drive(tmp_path)
    ref = Reference(drive)
    ref.cap = drive.supply.capacitance
    i_off = 0.3
    *_, y_end, _ = ref.release(np.array([ref.lc * i_off, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, V_BUS]))
    _, p_fast = _model(drive)
    bound = V_BUS + float(release(p_fast, i_off).charge[0]) / ref.cap
    assert y_end[7] > V_BUS + 0.1   # the bus did rise
    assert y_end[7] <= bound and bound - V_BUS < 1.05 * (y_end[7] - V_BUS)


def test_firmware_in_the_loop_with_mixed_decay(tmp_path):
    """The compiled driver (gcc) with a mixed-decay hold (30 % of each off-time fast into
    the bus, the driver's ``coil_port_fast_end``) and the armature in the loop: `check`
    passes at the lowest supply with the hottest coil (pull-in, seat, the mixed hold's
    mean, the fast release). Plumbing: the coil model is the design's."""
    from driver_harness import checked_rows, loop_captures

    plain = _drive(tmp_path)
    path = tmp_path / "mixed.toml"
    path.write_text(Path(plain.source).read_text().replace(
        'frequency = "20 kHz"\n', 'frequency = "20 kHz"\nfast_fraction = 0.3\n'))
    drive = load_drive(path)
    assert drive.hold.fast_fraction == 0.3
    des = design(drive)
    hot = max(c.coil_temp_c for c in des.corners)
    [(cap, _)] = loop_captures(tmp_path, des, [(drive.supply.min, hot, None)])
    rows = checked_rows(cap, path, hot)
    assert rows["seated_time"]["status"] == "pass" and rows["release_time"]["status"] == "pass"
