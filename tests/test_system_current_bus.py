"""A current-mode channel on a drooping shared rail: its comparator's thresholds on the coil
current fed from the bus (:class:`coildrive.model.shared_bus.ThresholdRun` in
:func:`coildrive.model.shared_bus.on_bus`), beside a voltage-mode channel on the timer.

Outside references, named beside each check:

* scipy's ``solve_ivp`` (DOP853, rtol 1e-12) on the circuit's equations written afresh
  here -- ``C dv/dt = (V_s - v)/R_s - sum of the switched coils' currents``, each coil
  ``L di/dt = v - R_on i`` while its switch conducts and ``-(R_p i + V_p)`` freewheeling
  (held at zero where the diode blocks) -- with the comparators as solve_ivp's own
  terminal events (the current rising to the upper threshold, falling to the lower one,
  reaching zero) and the comparator's delay a scheduled edge after each crossing;
* the CLI end to end: ``simulate SYSTEM.toml`` on the manifold with two current-mode purge
  valves, the CSV's switch columns played into the same circuit written afresh
  (:func:`test_system.droop_against_solve_ivp`).
"""

from __future__ import annotations

import numpy as np
import pytest
from typer.testing import CliRunner

from coildrive.cli import app
from coildrive.model.shared_bus import BusRun, ThresholdRun, on_bus
from coildrive.model.shared_pwm import HOLD_OFF, ON, RELEASE

V_S, R_S, CAP = 24.0, 0.5, 470e-6

# a voltage-mode channel on the timer: on at 0 for a 3.01 ms peak, then 20 us of every 50 us
# period to its final turn-off at 7.97 ms; the hold's path (diode), the release's (diode + Zener)
PWM = dict(r_on=25.0, ind=0.06, r_off=24.2, v_off=0.9, r_rel=24.2, v_rel=36.9)
# the current-mode channels (A, ohm, H, s): a hysteretic band with a 3 us delay and 2 us of
# split decay's late bypass; a fixed off-time with a 2 us delay
HYST = dict(r_on=24.5, ind=0.07, r_off=24.3, v_off=0.9, r_rel=24.3, v_rel=36.9, control="hysteretic",
            lower=0.20, upper=0.24, off_time=0.0, delay=3e-6, on=0.5e-3, peak=2.5e-3, hold=5e-3, slow=2e-6)
OFFT = dict(r_on=30.0, ind=0.05, r_off=29.8, v_off=0.9, r_rel=29.8, v_rel=36.9, control="off_time",
            lower=0.0, upper=0.30, off_time=40e-6, delay=2e-6, on=1.0e-3, peak=2.0e-3, hold=4e-3, slow=0.0)
T_END = 10e-3


def _pwm_edges():
    """The voltage-mode channel's segments ``(start s, kind)``."""
    edges = [(0.0, ON), (3.01e-3, HOLD_OFF)]
    for k in range(61, 160):
        edges += [(k * 50e-6, ON), (k * 50e-6 + 20e-6, HOLD_OFF)]
    edges[-1] = (edges[-1][0], RELEASE)
    return edges


def _runs():
    pwm = _pwm_edges()
    runs = [BusRun(np.array([s for s, _ in pwm]), np.array([k for _, k in pwm]), PWM["r_on"], PWM["r_off"],
                   PWM["v_off"], PWM["r_rel"], PWM["v_rel"], PWM["ind"])]
    for p in (HYST, OFFT):
        runs.append(ThresholdRun(np.array([p["on"]]), np.array([ON]), p["r_on"], p["r_off"], p["v_off"],
                                 p["r_rel"], p["v_rel"], p["ind"], control=p["control"], lower=p["lower"],
                                 upper=p["upper"], off_time=p["off_time"], delay=p["delay"],
                                 peak_end=p["on"] + p["peak"], hold_end=p["on"] + p["peak"] + p["hold"],
                                 v_on=V_S, slow=p["slow"]))
    return runs


def _reference(times):
    """The three coils and the bus at ``times`` (s), and each current-mode coil's switching
    moments, by solve_ivp written afresh (module docstring): rows coil currents, then the
    bus."""
    from scipy.integrate import solve_ivp

    coils = [PWM, HYST, OFFT]
    n = len(coils)
    mode = ["idle"] * n             # idle, on, hold (freewheel on the hold's path), release
    waiting = [False] * n           # an on-time looking for its upper threshold
    falling = [False] * n           # a hysteretic off-time looking for its lower threshold
    dead = [True] * n               # the diode blocked: held at zero
    edges = {1: [], 2: []}
    pending = [(s, 0, {ON: "on", HOLD_OFF: "hold", RELEASE: "release"}[k]) for s, k in _pwm_edges()]
    pending += [(HYST["on"], 1, "on"), (HYST["on"] + HYST["peak"], 1, "off"),
                (OFFT["on"], 2, "on"), (OFFT["on"] + OFFT["peak"], 2, "off")]
    x = np.append(np.zeros(n), V_S)
    now, pieces = 0.0, []

    def act(k, what, i):
        p = coils[k]
        if k:
            edges[k].append(now)
        if what in ("on", "hold", "release") and k == 0:
            mode[k] = what
            dead[k] = dead[k] and what != "on"
            return
        if what == "on":
            mode[k], dead[k] = "on", False
            if i >= p["upper"] and now > p["on"]:
                pending.append((now + p["delay"], k, "off"))
            else:
                waiting[k] = now > p["on"]
        elif what == "off":
            if now >= p["on"] + p["peak"] + p["hold"]:
                mode[k] = "hold" if p["slow"] else "release"
                if p["slow"]:
                    pending.append((now + p["slow"], k, "release"))
            else:
                mode[k] = "hold"
                if p["control"] == "hysteretic":
                    falling[k] = True
                else:
                    pending.append((now + p["off_time"], k, "on"))
        elif what == "release":
            mode[k] = "release"

    while now < T_END:
        nxt = min([s for s, _, _ in pending if s > now] + [T_END])
        for s, k, what in sorted([e for e in pending if e[0] <= now], key=lambda e: e[0]):
            pending.remove((s, k, what))
            act(k, what, x[k])
        if any(s <= now for s, _, _ in pending):
            continue
        nxt = min([s for s, _, _ in pending] + [T_END])

        def rhs(_, y):
            i, v = y[:-1], y[-1]
            di = np.zeros(n)
            fed = 0.0
            for k, p in enumerate(coils):
                if mode[k] == "on":
                    di[k] = (v - p["r_on"] * i[k]) / p["ind"]
                    fed += i[k]
                elif mode[k] in ("hold", "release") and not dead[k]:
                    r_p, v_p = (p["r_off"], p["v_off"]) if mode[k] == "hold" else (p["r_rel"], p["v_rel"])
                    di[k] = -(r_p * i[k] + v_p) / p["ind"]
            return np.append(di, ((V_S - v) / R_S - fed) / CAP)

        events = []              # (event, coil, what): its threshold crossed or its diode blocking
        for k, p in enumerate(coils):
            for flag, level, direction, what in ((waiting[k], p.get("upper"), 1, "up"),
                                                 (falling[k], p.get("lower"), -1, "down"),
                                                 (mode[k] in ("hold", "release") and not dead[k], 0.0, -1, "zero")):
                if flag:
                    def ev(_, y, k=k, level=level):
                        return y[k] - level
                    ev.terminal, ev.direction = True, direction
                    events.append((ev, k, what))
        sol = solve_ivp(rhs, (now, nxt), x, method="DOP853", rtol=1e-12, atol=1e-13, dense_output=True,
                        events=[e for e, _, _ in events] or None)
        pieces.append((now, sol.t[-1], sol.sol))
        x = sol.y[:, -1].copy()
        now = sol.t[-1]
        for (_, k, what), hit in zip(events, sol.t_events or []):
            if sol.status == 1 and len(hit):
                if what == "zero":
                    dead[k], x[k] = True, 0.0
                elif what == "up":
                    waiting[k] = False
                    pending.append((now + coils[k]["delay"], k, "off"))
                else:
                    falling[k] = False
                    pending.append((now + coils[k]["delay"], k, "on"))
    out = np.zeros((n + 1, len(times)))
    for a, b, f in pieces:
        inside = (times >= a) & (times < b)
        if inside.any():
            out[:, inside] = f(times[inside])
    out[:n] = np.maximum(out[:n], 0.0)
    return out, edges


@pytest.fixture(scope="module")
def both():
    times = np.sort(np.random.default_rng(7).uniform(0.0, T_END * 0.999, 6000))
    runs = _runs()
    cur, bus = on_bus(V_S, R_S, CAP, runs, times)
    want, edges = _reference(times)
    return times, runs, cur, bus, want, edges


def test_current_mode_on_the_drooping_bus_against_solve_ivp(both):
    """Reference: scipy solve_ivp (DOP853, rtol 1e-12) with the comparators as its events
    (module docstring). The bus within 1e-6 V and each coil's current within 1e-6 A at 6000
    times; each current-mode coil's switching moments within 1e-9 s."""
    times, runs, cur, bus, want, edges = both
    assert np.abs(bus - want[-1]).max() <= 1e-6
    assert np.abs(cur - want[:-1]).max() <= 1e-6
    worst = 0.0
    for k in (1, 2):
        start = runs[k].segments()[0]
        ours = start[1:]
        theirs = np.array(edges[k][1:])
        theirs = theirs[theirs < T_END]
        ours = ours[ours < T_END]
        assert len(ours) == len(theirs) and len(ours) > 10, (len(ours), len(theirs))
        worst = max(worst, float(np.abs(ours - theirs).max()))
        assert worst <= 1e-9
    print(f"bus {np.abs(bus - want[-1]).max():.2e} V, coils {np.abs(cur - want[:-1]).max():.2e} A, "
          f"edges {worst:.2e} s, lowest bus {bus.min():.4f} V")


def test_the_droop_moves_the_comparator_edges(both):
    """The droop is fed back: against the same channels on a stiff bus (R_s 1e-9 ohm), the
    hysteretic channel's on-times are longer (the bus that charges it is lower)."""
    times, runs, _, _, _, _ = both
    stiff = _runs()
    on_bus(V_S, 1e-9, CAP, stiff, times)
    span = [np.diff(r.segments()[0])[r.segments()[1][:-1] == ON][1:4] for r in (runs[1], stiff[1])]
    assert np.all(span[0] > span[1] * (1 + 1e-4)), span


@pytest.mark.parametrize("control", ["hysteretic", "off_time"])
def test_simulate_feeds_the_droop_into_current_mode_channels(tmp_path, control):
    """``simulate SYSTEM.toml`` (the CLI end to end) on the manifold with its two purge
    valves on a current-mode hold (3 us comparator delay; a fixed off-time each on a timer
    of its own, which makes it) and the rail's 0.25 ohm and 1000 uF: the bus is fed back (no
    stiff line), and the CSV's switch columns played into the circuit written afresh agree
    with scipy solve_ivp (DOP853, rtol 1e-10) within 1e-6 V and 1e-6 A
    (:func:`test_system.droop_against_solve_ivp`)."""
    from test_system import _current_mode_system, droop_against_solve_ivp

    path = _current_mode_system(tmp_path / "manifold", control=control)
    if control == "off_time":
        board = path.parent / "board.toml"
        board.write_text(board.read_text().replace("timers = [[1, 2, 3, 4, 5, 6]]", "timers = [[1, 2, 3, 4], [5], [6]]"))
    r = CliRunner().invoke(app, ["simulate", str(path), "--supply", "20", "--coil-temp", "0", "--hold-time", "0.001",
                                 "--csv", str(tmp_path / "a.csv")])
    assert r.exit_code == 0, r.output
    assert "bus_v: the bus droops" in r.stderr and "taken stiff" not in r.stderr, r.stderr
    droop_against_solve_ivp(path, tmp_path)


def test_a_current_mode_eddy_channel_still_runs_stiff(tmp_path):
    """What is not built stays one clear line: a current-mode hold with an eddy term on the
    drooping rail runs on the stiff bus and ``simulate`` names the channel and why."""
    from test_system_eddy_current import _eddy_current_system

    path = _eddy_current_system(tmp_path / "manifold")
    r = CliRunner().invoke(app, ["simulate", str(path), "--supply", "24", "--coil-temp", "20", "--hold-time", "0.001",
                                 "--csv", str(tmp_path / "a.csv")])
    assert r.exit_code == 0, r.output
    lines = [x for x in r.stderr.splitlines() if "taken stiff" in x]
    assert len(lines) == 1 and "'purge1'" in lines[0] and "current-mode hold with" in lines[0], r.stderr
    assert "bus_v" not in r.stderr
