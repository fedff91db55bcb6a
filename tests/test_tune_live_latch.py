"""Live tune of a latching coil's pulses (`coildrive tune LATCH.toml --port PORT`).

End to end: `coildrive emulate` of the bridge irrigation latch (no [armature]) with its
threshold switch, on a real pseudo-terminal, and `coildrive tune --port` as a user runs
them, each a real subprocess (tests/test_tune_live.py's Emulator).

The reference for the shortest pulses is worked by hand here from the drive and board
files (not through the code under test): the full bridge's loop while a pulse's two
switches are on is ``R = R_coil(T) + 2 R_switch + R_sense`` (the sense resistor inline),
copper ``R(T) = R_ref (1 + 0.00393 (T - T_ref))`` (IEC 60028), and the current from zero
is the RL step ``i(t) = V/R (1 - exp(-t R / L))`` (first-order circuit step response;
Hayt & Kemmerly, "Engineering Circuit Analysis", first-order circuits chapter; from
memory), so the pulse reaches its current ``I`` at ``t = -(L/R) ln(1 - I R / V)``. The
device runs whole scheduler ticks: the shortest that latches is the first tick at or past
that time.

With a moving armature (the bolt-catch latch: a linear ``L(x)``, a stiff 12 V bus) the set
pulse's threshold comes from the armature's equations written afresh here and integrated
by scipy's ``solve_ivp`` (RK45 at rtol 1e-10; not the project's integrators): flux linkage
``lam = L(x) i`` with ``L(x) = L_c / (1 + beta x)``, ``beta = (L_c - L_o) / (stroke L_o)``
through the two measured inductances (air-gap reluctance linear in the gap: common
practice); ``dlam/dt = V - R_on i`` while on, ``-(R_off i + V_d)`` freewheeling through
the diode and resistor until the current is zero (the diode blocks); the co-energy force
``(i^2 / 2) dL/dx`` (Fitzgerald, Kingsley & Umans, "Electric Machinery", electromechanical
energy conversion; from memory) against the return spring (preload + rate x travel), the
load and viscous damping; the armature resting on the open stop until the force lifts it.
The pulse latches when the armature reaches the seat (the catch drops behind it), during
the pulse or in its flight after it.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import EXAMPLES, run_cli
from coildrive.bench.device import DeviceOptions
from coildrive.bench.latch_device import LatchDevice
from coildrive.bench.messages import PULSE_RESET_BIT, Command, Opcode, ReplyStatus
from coildrive.bench.protocol import FrameDecoder
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from coildrive.tune.latch_live import search_shortest
from test_tune_live import Emulator

IRRIGATION = EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml"
BOLT = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"


def hand_threshold(current: float, supply: float = 12.0, coil_temp: float = 20.0) -> float:
    """s from switch-on to ``current`` A on the irrigation latch's bridge (module docstring)."""
    d = load_drive(IRRIGATION)
    c, b = d.coil, d.board
    r = c.resistance * (1 + 0.00393 * (coil_temp - c.reference_temp)) + 2 * b.switch.on_resistance + b.sense.resistance
    return -(c.inductance / r) * math.log(1.0 - current * r / supply)


def armature_latches(t_pulse: float, supply: float = 12.0) -> bool:
    """The bolt-catch's set pulse of ``t_pulse`` s at 20 degC latches (module docstring)."""
    from scipy.integrate import solve_ivp

    d = load_drive(BOLT)
    a, b = d.armature, d.board
    r_on = d.coil.resistance + b.switch.on_resistance + b.sense.resistance   # the sense resistor inline
    r_off = d.coil.resistance + b.sense.resistance + b.freewheel.resistance
    l_c, stroke = a.inductance_closed, a.stroke
    beta = (l_c - a.inductance_open) / (stroke * a.inductance_open)

    def rhs(on):
        def f(t, y):
            lam, x, v = y
            i = max(lam * (1 + beta * x) / l_c, 0.0)
            dlam = supply - r_on * i if on else (-(r_off * i + b.freewheel.diode_drop) if i > 0 else 0.0)
            force = (-0.5 * i * i * l_c * beta / (1 + beta * x) ** 2
                     + a.spring_preload + a.spring_rate * (stroke - x) + a.load_force - a.damping * v)
            if x >= stroke and v >= 0 and force > 0:   # resting on the open stop
                return [dlam, 0.0, 0.0]
            return [dlam, v, force / a.mass]
        return f

    def event(fn, direction):
        fn.terminal, fn.direction = True, direction
        return fn
    seat = event(lambda t, y: y[1], -1)
    zero = event(lambda t, y: y[0], -1)
    back = event(lambda t, y: y[1] - stroke, 1)
    kw = dict(rtol=1e-10, atol=1e-13, max_step=1e-4)
    s = solve_ivp(rhs(True), (0.0, t_pulse), [0.0, stroke, 0.0], events=seat, **kw)
    if s.status == 1:
        return True
    s = solve_ivp(rhs(False), (t_pulse, t_pulse + 1.0), s.y[:, -1], events=[seat, zero, back], **kw)
    if s.t_events[1].size and not s.t_events[0].size:   # the current is out: the armature flies on
        y = s.y[:, -1].copy()
        y[0] = 0.0
        s = solve_ivp(rhs(False), (s.t[-1], s.t[-1] + 1.0), y, events=[seat, back], **kw)
    return bool(s.t_events[0].size)


def armature_threshold() -> float:
    """The shortest set pulse (s) that latches, by bisection on :func:`armature_latches`."""
    lo, hi = 1e-3, 20e-3
    for _ in range(24):
        mid = 0.5 * (lo + hi)
        lo, hi = (lo, mid) if armature_latches(mid) else (mid, hi)
    return hi


def test_a_cut_set_pulse_flies_on_and_latches_as_the_afresh_equations_say():
    """pulse(fly=True): the shortest set pulse whose armature reaches the seat (in the pulse
    or after it) against solve_ivp on the equations written afresh (module docstring)."""
    from coildrive.model.latch_waveform import NotSeated, pulse

    d = load_drive(BOLT)

    def caught(t):
        gap = pulse(d, 12.0, 20.0, 1.0, 1.0, t, 400, fly=True)[6]
        return bool(np.any(gap <= 0.0))
    lo, hi = 1e-3, 20e-3
    for _ in range(24):
        mid = 0.5 * (lo + hi)
        lo, hi = (lo, mid) if caught(mid) else (mid, hi)
    truth = armature_threshold()
    assert hi == pytest.approx(truth, rel=1e-4), (hi, truth)   # 6.6996 ms both, 4e-6 apart when written
    with pytest.raises(NotSeated):   # without fly the model keeps refusing a pulse cut before the seat
        pulse(d, 12.0, 20.0, 1.0, 1.0, 0.8 * truth, 400)


def test_search_shortest_brackets_a_threshold_to_the_tick():
    """The halving then bisection on a pulse that works from 1.63 ms: 1.7 ms worked, 1.6 not."""
    tick = 1e-4
    fired = []

    def test(length, step):
        fired.append((round(length / tick), step))
        return length, length >= 1.63e-3

    worked, failed, count = search_shortest(test, 24.4e-3, tick, tick)
    assert (round(worked / tick), round(failed / tick)) == (17, 16)
    assert [n for n, s in fired if s == "halve"] == [122, 61, 30, 15] and count == len(fired) <= 9
    # a pulse that works even at one tick: no failure to bracket
    assert search_shortest(lambda t, s: (t, True), 1e-3, tick, tick)[1] is None


def test_the_device_sets_a_pulse_length_and_reports_its_threshold_switch():
    """SET_PULSE_TIME in whole ticks (the reply in force), OUT_OF_RANGE below one tick; the
    switch closes on the set pulse and opens on the reset pulse only at their currents."""
    d = design_latch(load_drive(IRRIGATION))
    dev = LatchDevice(d, DeviceOptions(threshold_switch=True, first_actuation=100.0))
    assert dev.info.has_position_switch
    assert dev._execute(Command(Opcode.SET_PULSE_TIME, 1549), 0.0) == (ReplyStatus.OK, 1500)
    assert dev._execute(Command(Opcode.SET_PULSE_TIME, 940 | PULSE_RESET_BIT), 0.0) == (ReplyStatus.OK, 900)
    assert dev._execute(Command(Opcode.SET_PULSE_TIME, 20), 0.0)[0] == ReplyStatus.OUT_OF_RANGE
    assert dev.pulse_time("set") == pytest.approx(1.5e-3) and dev.pulse_time("reset") == pytest.approx(0.9e-3)
    dec = FrameDecoder()
    switches = []
    now = 0.0
    for _ in range(2):   # set 1.5 ms (below 1.585 ms: no latch), reset 0.9 ms (nothing to let go)
        now += 1.0
        assert dev._execute(Command(Opcode.START, 0), now)[0] == ReplyStatus.OK
        switches += [m.value for m in dec.feed(dev.read(now + 0.5)) if getattr(m, "kind", None) == 4]
    assert switches == []
    dev._execute(Command(Opcode.SET_PULSE_TIME, 1600), now)
    for _ in range(2):   # set 1.6 ms latches, reset 0.9 ms lets go
        now += 1.0
        dev._execute(Command(Opcode.START, 0), now)
        switches += [m.value for m in dec.feed(dev.read(now + 0.5)) if getattr(m, "kind", None) == 4]
    assert switches == [1, 0]


@pytest.mark.parametrize("args, words", [
    (["--hold-time", "20 ms"], "no hold"),
    (["--detect", "signature"], "signature of a pulse that latches is not built"),
    (["--resolution", "0.9"], "--resolution"),
    (["--margin", "0.5"], "--margin"),
])
def test_bad_latch_live_options_exit_2_with_one_line(args, words):
    r = CliRunner().invoke(app, ["tune", str(IRRIGATION), "--port", "/dev/null-none", *args])
    lines = r.stderr.strip().splitlines()
    assert r.exit_code == 2 and len(lines) == 1 and words in lines[0], r.stderr


def test_pulses_from_the_boost_are_refused_in_one_line():
    boosted = EXAMPLES / "latching" / "sprinkler-valve-bridge-boost-12v.toml"
    r = CliRunner().invoke(app, ["tune", str(boosted), "--port", "/dev/null-none"])
    lines = r.stderr.strip().splitlines()
    assert r.exit_code == 2 and len(lines) == 1 and "supply.boost" in lines[0], r.stderr


def test_a_supply_compensated_table_is_refused_live_in_one_line(tmp_path):
    from test_tune_latch_table import compensated

    r = CliRunner().invoke(app, ["tune", str(compensated(IRRIGATION, tmp_path)), "--port", "/dev/null-none"])
    lines = r.stderr.strip().splitlines()
    assert r.exit_code == 2 and len(lines) == 1 and "pull_in.compensate" in lines[0], r.stderr


def test_an_armature_latch_has_no_threshold_switch():
    bolt = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"
    r = CliRunner().invoke(app, ["emulate", str(bolt), "--threshold-switch", "--duration", "0.1 s"])
    lines = r.stderr.strip().splitlines()
    assert r.exit_code == 2 and len(lines) == 1 and "--threshold-switch" in lines[0], r.stderr


@pytest.mark.slow
def test_live_tune_of_a_latch_finds_the_hand_worked_thresholds(tmp_path):
    """The irrigation latch with its coil on a heat sink (thermal.resistance 3 K/W, not 30):
    the coil's temperature allows a pulse every 53 ms instead of 529 ms, so the bench run
    takes a tenth of the time; the pulses' electrics (the reference) are the file's."""
    text = IRRIGATION.read_text()
    assert 'resistance = "30 K/W"' in text
    drive = tmp_path / "irrigation-heatsunk.toml"
    drive.write_text(text.replace('resistance = "30 K/W"', 'resistance = "3 K/W"'))
    emu = Emulator("--threshold-switch", drive=drive)
    header = tmp_path / "latch.h"
    try:
        r = run_cli("tune", str(drive), "--port", emu.path, "--capture", str(tmp_path / "live.cdcap"),
                    "--json", "--repeats", "1", "--resolution", "0.4 %", "--header", str(header), timeout=120)
    finally:
        log = emu.stop()
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    rate = doc["procedure"]["tick_rate_hz"]
    for s in doc["searches"]:
        truth = hand_threshold(1.0 if s["pulse"] == "set" else 0.6)
        # the first whole tick at or past the hand-worked time latched, the tick below did not
        assert round(s["worked_s"] * rate) == math.ceil(truth * rate), (s, truth)
        assert round(s["failed_s"] * rate) == math.ceil(truth * rate) - 1, (s, truth)
        rec = doc["recommendation"][s["pulse"]]
        # the model's time at the bench point (the SUPPLY code's voltage) against the hand's
        at_bench = hand_threshold(1.0 if s["pulse"] == "set" else 0.6, doc["bench_point"]["supply_v"])
        assert rec["model_bench_s"] == pytest.approx(at_bench, rel=1e-6)
        assert rec["ticks"] == max(rec["bench_ticks"], rec["model_ticks"])
    assert doc["ok"] is True and doc["stopped"] is True and doc["procedure"]["detection"] == "switch"
    assert doc["recommendation"]["design_ok"] and header.read_text().count("#define") > 5
    assert json.loads((tmp_path / "live.tune.json").read_text())["searches"] == doc["searches"]
    assert [line for line in log if line.startswith("command ")][-1] == "command STOP 0 -> OK", log[-3:]
    assert sum(1 for line in log if "SET_PULSE_TIME" in line) >= 4


@pytest.mark.slow
def test_live_tune_of_an_armature_latch_finds_the_afresh_seat_threshold(tmp_path):
    """The bolt-catch's set pulse against solve_ivp on the armature written afresh, its
    reset winding's against the RL rise by hand (module docstring)."""
    emu = Emulator(drive=BOLT)
    try:
        r = run_cli("tune", str(BOLT), "--port", emu.path, "--capture", str(tmp_path / "bolt.cdcap"), "--json",
                    "--repeats", "1", "--resolution", "0.5 %", timeout=120)
    finally:
        emu.stop()
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    d = load_drive(BOLT)
    tick = 1.0 / doc["procedure"]["tick_rate_hz"]
    (s_set,) = [s for s in doc["searches"] if s["pulse"] == "set"]
    truth = armature_threshold()
    assert s_set["failed_s"] < truth <= s_set["worked_s"], (s_set, truth)
    assert s_set["worked_s"] - s_set["failed_s"] == pytest.approx(tick)
    (s_reset,) = [s for s in doc["searches"] if s["pulse"] == "reset"]
    rc, b = d.latch.reset_coil, d.board
    r_on = rc.resistance + b.switch.on_resistance + b.sense.resistance
    trip = -(rc.inductance / r_on) * math.log(1.0 - d.latch.reset_current * r_on / 12.0)   # the RL rise by hand
    assert s_reset["failed_s"] < trip <= s_reset["worked_s"], (s_reset, trip)
    assert s_reset["worked_s"] - s_reset["failed_s"] == pytest.approx(tick)
    assert doc["ok"] and doc["procedure"]["detection"] == "switch"


@pytest.mark.slow
def test_a_latch_device_without_a_switch_is_refused_and_stopped(tmp_path):
    emu = Emulator(drive=IRRIGATION)
    try:
        r = run_cli("tune", str(IRRIGATION), "--port", emu.path, "--capture", str(tmp_path / "live.cdcap"),
                    timeout=60)
    finally:
        emu.stop()
    assert r.returncode == 1 and "no position switch" in r.stdout, r.stdout
    assert "STOP acknowledged" in r.stderr and "Traceback" not in r.stderr
