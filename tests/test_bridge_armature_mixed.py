"""A moving armature on a full bridge with mixed decay in the hold (``hold.fast_fraction``):
each off-time starts fast (all four switches open, the current into the bus through two
body diodes) and ends slow (Q2 + Q4); the release is fast.

Outside source: scipy's ``solve_ivp`` (Radau, tight tolerances) on the armature's
equations written afresh from the drive file's raw numbers (tests/test_bridge_armature.py's
``Reference``: ``lambda = L(x) i``, ``d lambda/dt = V - R i``, the co-energy pull, the
spring, the load, the damping, dead stops), with the hold's three segments per period:
the current at the final turn-off, the release's zero and drop-out times, the energy the
hold's fast parts and the release give back to the bus, and the energy balance of the
whole actuation (conservation). ngspice checks the mixed orbit of the seated coil itself
(tests/test_reference_ngspice_bridge.py, test_mixed_decay_orbit_matches_ngspice).
"""

from __future__ import annotations

import numpy as np
import pytest

from coildrive.design import design
from coildrive.model.circuit import loop
from coildrive.model.pwm import pwm_steady_state
from coildrive.model.rl import decay_integrals
from coildrive.model.waveform import armature_actuation
from test_bridge_armature import TEMP, V_BUS, Reference, _drive

FRACTION = 0.3
FREQ = 20e3


def _mixed(tmp_path):
    drive = _drive(tmp_path)
    path = tmp_path / "arm.toml"
    text = path.read_text()
    assert 'frequency = "20 kHz"\n' in text
    path.write_text(text.replace('frequency = "20 kHz"\n', f'frequency = "20 kHz"\nfast_fraction = {FRACTION}\n'))
    from coildrive.config import load_drive
    drive = load_drive(path)
    assert drive.hold.fast_fraction == FRACTION, "precondition"
    return drive


class MixedReference(Reference):
    """The reference with the hold's slow path too (Q2 + Q4: ``d lambda/dt = -R_slow i``)."""

    def __init__(self, drive):
        super().__init__(drive)
        sense = drive.board.sense
        inline = sense.resistance if sense.position == "coil" else 0.0   # a common return is outside
        self.r_slow = drive.coil.resistance + 2 * drive.switch.on_resistance + inline

    def rhs(self, on, moving, slow=False):
        if not slow:
            return super().rhs(on, moving)

        def f(t, y):
            lam, x, v = y[0], y[1], y[2]
            i = max(lam, 0.0) / self.ind(x)
            dv = (self.f_open(x) - self.pull(lam) - self.c * v) / self.m if moving else 0.0
            return [-self.r_slow * i, v if moving else 0.0, dv, i, 0.0, self.r_slow * i * i,
                    self.c * v * v, 0.0]
        return f

    def segment(self, y, t0, t1, on, slow=False, moving=False):
        """One hold segment, ``t0`` to ``t1``; a moving plunger stops dead on the seat
        (returned: the state at ``t1`` and the seat's time, or ``None``)."""
        from scipy.integrate import solve_ivp

        def seat(t, y):
            return y[1]
        seat.terminal, seat.direction = True, -1
        atol = [1e-13, 1e-12, 1e-9, 1e-13, 1e-13, 1e-13, 1e-13, 1e-9]
        sol = solve_ivp(self.rhs(on, moving, slow), (t0, t1), y, method="Radau", rtol=1e-11, atol=atol,
                        events=[seat] if moving else None)
        if moving and sol.t_events[0].size:
            t_seat = float(sol.t_events[0][0])
            y = sol.y_events[0][0].copy()
            y[1] = y[2] = 0.0
            return self.segment(y, t_seat, t1, on, slow)[0], t_seat
        return sol.y[:, -1].copy(), None

    def hold(self, y, start, duty, periods, moving=False):
        """``periods`` PWM periods of mixed decay from ``start`` s (the last cut at its
        on-time's end): the state there, the charge back to the bus in the fast parts,
        the lowest current and the seat's time (``None``: seated throughout)."""
        period = 1.0 / FREQ
        t_on = duty * period
        t_fast = FRACTION * (period - t_on)
        back, lowest, seated_at = 0.0, np.inf, None
        for k in range(periods):
            t0 = start + k * period
            parts = [(t0 + t_on, True, False)]
            if k < periods - 1:
                parts += [(t0 + t_on + t_fast, False, False), (t0 + period, False, True)]
            t = t0
            for t1, on, slow in parts:
                q0 = y[3]
                y, at = self.segment(y, t, t1, on, slow, moving)
                if at is not None:
                    moving, seated_at = False, at
                if not on and not slow:
                    back += y[3] - q0
                t = t1
            if k < periods - 1:
                lowest = min(lowest, y[0] / self.ind(y[1]))
        return y, back, lowest, seated_at


def test_seated_mixed_hold_and_release_against_solve_ivp(tmp_path):
    drive = _mixed(tmp_path)
    ref = MixedReference(drive)
    peak, duty, hold = 0.008, 0.45, 0.004
    w = armature_actuation(drive, V_BUS, TEMP, peak, duty, FREQ, hold)
    assert w.events["seat"] < peak, "precondition: seated in the peak (the hold's closed-form path)"
    # the reference: pull-in to the seat and on to the peak's end, then the hold's periods
    _, _, y, _ = ref.pull_in(t_peak=peak)
    period = 1.0 / FREQ
    t_fast = FRACTION * (period - duty * period)
    n = round(hold * FREQ)
    y[3:7] = 0.0
    y, back, lowest, _ = ref.hold(y, peak, duty, n)
    assert ref.pull(lowest * ref.lc) > ref.f_open(0.0), "precondition: the hold keeps it seated"
    i_off = y[0] / ref.lc
    t_off = w.events["off"]
    k = int(np.searchsorted(w.time, t_off))
    # scipy: the current at the final turn-off (the hold's three segments per period), 1e-6
    assert w.current[k] == pytest.approx(i_off, rel=1e-6), (w.current[k], i_off)
    # the hold's fast parts: the switches see the bus plus a body diode, all four open
    fast = (w.time > peak) & (w.time < t_off) & (w.switches["high_a"] + w.switches["low_a"] +
                                                  w.switches["high_b"] + w.switches["low_b"] == 0)
    assert fast.sum() >= n - 1 and np.all(w.coil_voltage[fast & (w.current > 0)] <= -V_BUS)
    # the release from there: drop-out and zero times, 1e-5 (1e-3 for the plunger's arrival)
    rel = y.copy()
    rel[3:7] = 0.0
    _, t_open, t_zero, y_off, _ = ref.release(rel)
    assert w.events["zero"] - t_off == pytest.approx(t_zero, rel=1e-5)
    assert w.events["open"] - t_off == pytest.approx(t_open, rel=1e-3)
    # a fast part from the turn-off's current gives back what the model's segment says, 1e-6
    lp = loop(drive, V_BUS, TEMP)
    q0 = y[3]
    y2, _ = ref.segment(y, 0.0, t_fast, False)
    q_model, _ = decay_integrals(t_fast, i_off, lp.mixed.r_fast, lp.mixed.v_fast, lp.inductance)
    assert y2[3] - q0 == pytest.approx(float(q_model), rel=1e-6)
    assert back > 0.0


def test_a_plunger_still_moving_in_the_mixed_hold_against_solve_ivp(tmp_path):
    """A peak that ends while the plunger travels: the hold's on, fast and slow segments
    drive it on to the seat (the armature model's own integration, not the seated closed
    form): the seat's time and the current at the final turn-off, against scipy."""
    drive = _mixed(tmp_path)
    ref = MixedReference(drive)
    t_start, t_seat, _, _ = ref.pull_in(t_peak=0.05)
    peak = t_start + 0.3 * (t_seat - t_start)
    duty, n = 0.6, 100
    w = armature_actuation(drive, V_BUS, TEMP, peak, duty, FREQ, n / FREQ)
    # the reference: on from rest to the peak's end (moving), then the hold
    y = np.array([0.0, ref.s, 0.0, 0.0, 0.0, 0.0, 0.0, V_BUS])
    t0, y = ref.run(y, 0.0, True, False, lambda t, y: ref.pull(y[0]) - ref.f_open(ref.s))
    y, _ = ref.segment(y, t0, peak, True, moving=True)
    assert y[1] > 0, "precondition: still travelling at the peak's end"
    y, _, _, seated_at = ref.hold(y, peak, duty, n, moving=True)
    assert seated_at is not None and seated_at > peak
    # scipy: the seat within 1e-4, the current at the final turn-off within 1e-5
    assert w.events["seat"] == pytest.approx(seated_at, rel=1e-4), (w.events["seat"], seated_at)
    k = int(np.searchsorted(w.time, w.events["off"]))
    assert w.current[k] == pytest.approx(y[0] / ref.lc, rel=1e-5)


def test_energy_balance_of_an_actuation_with_mixed_decay(tmp_path):
    """Bus energy in = copper, sense and switch heat + body diodes + energy back to the bus
    (the hold's fast parts and the release) + damping + the dead stops' kinetic energy
    (the plunger ends where it began): conservation, on the reference."""
    drive = _mixed(tmp_path)
    ref = MixedReference(drive)
    _, t_seat, y, ke_seat = ref.pull_in(t_peak=0.008)
    duty = 0.45
    y, q_back, _, _ = ref.hold(y, 0.008, duty, 20)
    e_damp = y[6]
    e_in, e_r = y[4], y[5]
    rel = y.copy()
    rel[3:7] = 0.0
    _, _, _, y_off, ke_open = ref.release(rel)
    q_back += y_off[3]
    spent = e_r + y_off[5] + (V_BUS + 2 * ref.v_d) * q_back + e_damp + y_off[6] + ke_seat + ke_open
    # the field's energy is back where it started (zero): all of it is accounted for
    assert spent == pytest.approx(e_in, rel=1e-6)


def test_design_runs_the_armature_s_mixed_hold(tmp_path):
    """design: the mixed hold (its energy back per period V_bus x the fast part's charge),
    the armature seats and lets go on the fast decay; the model's device streams it and
    check passes its capture (plumbing: both share the design's physics)."""
    from coildrive.bench.check import check_capture
    from coildrive.bench.synth import synth_design_capture

    drive = _mixed(tmp_path)
    d = design(drive)
    checks = {c.name: c for c in d.checks}
    assert checks["armature_seats"].ok and checks["armature_releases"].ok
    b = d.topology.bridge
    assert b.hold_decay == "mixed" and b.hold_fast_fraction == FRACTION and b.returned_per_hold_period_j > 0
    cap = synth_design_capture(d, actuations=1, hold_time=0.05, noise_codes=1.0, seed=5)
    report = check_capture(cap, d)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items]


def test_two_curves_hold_on_the_seated_curve_s_mixed_orbit(tmp_path):
    """With the coil's two curves (open and seated, docs/coil-model.md) the seated mixed
    hold runs on the seated curve's tabulated segments: after 20 ms it sits on the exact
    three-segment orbit (model.flux_mixed, checked against ngspice elsewhere), its last
    period's top and bottom within 0.5 %."""
    from coildrive.config import load_drive
    from test_armature_curves import _fmt, open_table, seated_table

    _mixed(tmp_path)
    path = tmp_path / "arm.toml"
    (o_i, o_psi), (s_i, s_psi) = open_table(), seated_table()
    text = "\n".join(ln for ln in path.read_text().splitlines()
                     if not ln.startswith(("inductance_open", "inductance_closed"))) + "\n"
    assert 'inductance = "70 mH"' in text
    text = text.replace('inductance = "70 mH"', f"flux_current = [{_fmt(o_i)}]\nflux_linkage = [{_fmt(o_psi)}]\n"
                        f"seated_current = [{_fmt(s_i)}]\nseated_linkage = [{_fmt(s_psi)}]")
    path.write_text(text)
    drive = load_drive(path)
    duty = 0.45
    w = armature_actuation(drive, V_BUS, TEMP, 0.008, duty, FREQ, 0.02)
    assert w.events["seat"] < 0.008, "precondition: seated in the peak"
    lp = loop(drive, V_BUS, TEMP)
    ss = pwm_steady_state(duty, FREQ, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance, lp.mixed)
    t_off = w.events["off"]
    last = (w.time > t_off - 1.0 / FREQ) & (w.time <= t_off)
    assert float(w.current[last].max()) == pytest.approx(float(ss.i_max), rel=0.005)
    assert float(w.current[last].min()) == pytest.approx(float(ss.i_min), rel=0.005)
