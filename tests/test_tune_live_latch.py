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
"""

from __future__ import annotations

import json
import math

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


def hand_threshold(current: float, supply: float = 12.0, coil_temp: float = 20.0) -> float:
    """s from switch-on to ``current`` A on the irrigation latch's bridge (module docstring)."""
    d = load_drive(IRRIGATION)
    c, b = d.coil, d.board
    r = c.resistance * (1 + 0.00393 * (coil_temp - c.reference_temp)) + 2 * b.switch.on_resistance + b.sense.resistance
    return -(c.inductance / r) * math.log(1.0 - current * r / supply)


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


def test_an_armature_latch_has_no_threshold_switch():
    bolt = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"
    r = CliRunner().invoke(app, ["emulate", str(bolt), "--threshold-switch", "--duration", "0.1 s"])
    lines = r.stderr.strip().splitlines()
    assert r.exit_code == 2 and len(lines) == 1 and "--threshold-switch" in lines[0], r.stderr


@pytest.mark.slow
def test_live_tune_of_a_latch_finds_the_hand_worked_thresholds(tmp_path):
    emu = Emulator("--threshold-switch", drive=IRRIGATION)
    header = tmp_path / "latch.h"
    try:
        r = run_cli("tune", str(IRRIGATION), "--port", emu.path, "--capture", str(tmp_path / "live.cdcap"),
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
def test_a_latch_device_without_a_switch_is_refused_and_stopped(tmp_path):
    emu = Emulator(drive=IRRIGATION)
    try:
        r = run_cli("tune", str(IRRIGATION), "--port", emu.path, "--capture", str(tmp_path / "live.cdcap"),
                    timeout=60)
    finally:
        emu.stop()
    assert r.returncode == 1 and "no position switch" in r.stdout, r.stdout
    assert "STOP acknowledged" in r.stderr and "Traceback" not in r.stderr
