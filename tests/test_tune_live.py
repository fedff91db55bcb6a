"""Live hold tuning (`coildrive tune DRIVE --port PORT`).

Pure parts on in-process synthetic captures (`bench.synth`, the model's own physics
through the board's ADC), then end to end: `coildrive emulate` on a real pseudo-terminal
and `coildrive tune --port` as a user runs them, each a real subprocess.

The reference for the drop-out duty is the force balance of the seated armature, worked
by hand here from the drive file's numbers (not through the code under test):

* magnetic equivalent circuit ``L(x) = L_c / (1 + beta x)`` through the two measured
  inductances, so ``|dL/dx|(0) = L_c beta`` with ``beta = (L_c - L_o) / (stroke L_o)``
  (air-gap reluctance linear in the gap: common practice);
* co-energy force ``F = (I^2 / 2) |dL/dx|`` (Fitzgerald, Kingsley & Umans, "Electric
  Machinery", electromechanical energy conversion chapter; from memory) against spring + load at the seat
  (``preload + rate stroke + load``) gives the stay (drop-out) current
  ``I_s = sqrt(2 (preload + rate stroke + load) / (L_c beta))``;
* the armature's mass averages a 25 kHz ripple, so the hold's force goes with the RMS
  current of the PWM steady state (``coildrive.model.pwm``, itself checked against
  scipy's ODE solvers in test_reference_scipy.py) on the loop of the bench point:
  ``R_on = R_coil + R_switch + R_sense``, ``R_off = R_coil + R_sense + R_freewheel``,
  ``V_off`` = the diode drop (board relay-12bit-resistor).

The drop-out duty is where that RMS current equals ``I_s``.
"""

from __future__ import annotations

import json
import math
import os
import queue
import signal
import subprocess
import sys
import threading
import time
import tomllib
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import EXAMPLES, ROOT, run_cli
from coildrive.bench.capture_file import read_capture
from coildrive.bench.messages import Event, Info, Opcode, Reply, ReplyStatus, Samples
from coildrive.bench.synth import synth_capture
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.errors import InputError
from coildrive.model.pwm import pwm_steady_state
from coildrive.tune.dropout import judge_actuation, settled_value
from coildrive.tune.live import LiveOptions, LiveTuner
from coildrive.tune.live_model import bench_point, model_dropout_duty, model_stay_current, recommend

LATCH = EXAMPLES / "locker-latch-12v.toml"
TIMEOUT = 60.0


# --------------------------------------------------------------------------- the reference
def reference_dropout_duty(supply: float = 12.0, coil_temp: float = 20.0) -> tuple[float, float]:
    """(duty, stay current A) of the seated latch at the bench point, by hand (see the
    module docstring)."""
    d = load_drive(LATCH)
    a, c, b = d.armature, d.coil, d.board
    l_c, l_o = a.inductance_closed, a.inductance_open
    beta = (l_c - l_o) / (a.stroke * l_o)
    force = a.spring_preload + a.spring_rate * a.stroke + a.load_force
    stay = math.sqrt(2.0 * force / (l_c * beta))
    r_coil = c.resistance * (1 + 0.00393 * (coil_temp - c.reference_temp))  # IEC 60028 copper
    r_on = r_coil + b.switch.on_resistance + b.sense.resistance
    r_off = r_coil + b.sense.resistance + b.freewheel.resistance
    v_off = b.freewheel.diode_drop
    lo, hi = 0.0, 1.0
    for _ in range(50):
        mid = 0.5 * (lo + hi)
        rms = float(pwm_steady_state(mid, d.hold.frequency, supply, r_on, r_off, v_off, l_c).rms)
        lo, hi = (mid, hi) if rms < stay else (lo, mid)
    return 0.5 * (lo + hi), stay


@pytest.fixture(scope="module")
def latch():
    d = load_drive(LATCH)
    return d, design(d)


def test_model_dropout_matches_the_force_balance(latch):
    d, _ = latch
    duty, stay = reference_dropout_duty()
    point = bench_point(d)
    assert (point.supply_v, point.coil_temp_c) == (12.0, 20.0)
    assert model_stay_current(d, point) == pytest.approx(stay, rel=1e-9)
    assert model_dropout_duty(d, point, d.hold.frequency) == pytest.approx(duty, rel=1e-6)


# --------------------------------------------------------------------------- pure parts
def test_dropout_detection_on_synthetic_captures(latch):
    """Design duty holds, a duty 8 % below the drop-out lets go: both by the position
    switch and by the current's signature; a stuck armature never seats."""
    d, des = latch
    duty_ref, _ = reference_dropout_duty()
    f = des.hold.frequency_hz
    kw = dict(hold_time=0.025, noise_codes=0.7, seed=4)
    held = synth_capture(d, des.pull_in.peak_time_s, des.hold.duty, f, **kw)
    dropped = synth_capture(d, des.pull_in.peak_time_s, 0.92 * duty_ref, f, **kw)
    stuck = synth_capture(d, des.pull_in.peak_time_s, des.hold.duty, f, fault="stuck", **kw)
    for use_switch in (True, False):
        how = "switch" if use_switch else "signature"
        j = judge_actuation(held, hold_frequency=f, use_switch=use_switch, ripple_a=des.hold.ripple_a)
        assert j.seated and not j.dropped, (how, j.evidence)
        assert j.seated_by == ("switch" if use_switch else "dip")
        j = judge_actuation(dropped, hold_frequency=f, use_switch=use_switch, ripple_a=des.hold.ripple_a)
        assert j.seated and j.dropped, (how, j.evidence)
        assert j.dropped_by == ("switch" if use_switch else "hold rise"), j.evidence
        if use_switch:
            # the armature model lifts during the hold, after the current fell to the stay current
            assert des.pull_in.peak_time_s < j.dropped_at_s < des.pull_in.peak_time_s + 0.025
        j = judge_actuation(stuck, hold_frequency=f, use_switch=use_switch)
        assert not j.seated and not j.dropped, (how, j.evidence)
    # an open coil: no current at all during the peak
    j = judge_actuation(synth_capture(d, des.pull_in.peak_time_s, des.hold.duty, f, fault="open", **kw),
                        hold_frequency=f, use_switch=True)
    assert j.peak_current_a < des.adc.open_load_a


def test_settled_value_is_aitken_exact_for_an_exponential():
    """Aitken's delta-squared process is exact for a geometric sequence (window means of
    a + b exp(-t/tau)); a settled hold returns its last window."""
    t = np.arange(4000) / 1e5
    amps = 0.175 + 0.3 * np.exp(-t / 0.004)
    value, how = settled_value(amps, 4.0, 1e-5)
    assert value == pytest.approx(0.175, rel=1e-6), how
    assert "Aitken" in how
    value, how = settled_value(np.full(4000, 0.2), 4.0, 1e-4)
    assert (value, how) == (pytest.approx(0.2), "settled")


def test_recommendation_from_the_model_drop_out_is_the_model_minimum(latch):
    """A bench that drops out exactly at the model's stay current gives back the drive's
    derived hold.current (margin x stay current at the lowest-inductance corner);
    10 % more drop-out current on the bench raises the hold by 10 %."""
    d, des = latch
    point = bench_point(d)
    stay = model_stay_current(d, point)
    rec = recommend(d, point, stay)
    assert rec.corner_factor == pytest.approx(1.0 / math.sqrt(1.0 - d.coil.inductance_tolerance), rel=1e-9)
    assert rec.bench_need_a == pytest.approx(d.hold.current, rel=1e-9)
    assert rec.hold_current_a == pytest.approx(d.hold.current, rel=1e-9)
    assert rec.compare_ticks == des.timer.compare_ticks
    more = recommend(d, point, 1.1 * stay)
    assert more.governed_by == "bench" and more.hold_current_a == pytest.approx(1.1 * d.hold.current, rel=1e-9)
    assert more.design_ok and more.duty > des.hold.duty and more.min_mean_current_a >= more.hold_current_a
    section = tomllib.loads(more.hold_toml)["hold"]
    assert section["current"] == more.hold_current_a and section["frequency"] == d.hold.frequency
    # below the model's minimum the model minimum governs
    less = recommend(d, point, 0.8 * stay)
    assert less.governed_by == "model minimum" and less.hold_current_a == d.hold.current


@pytest.mark.parametrize("kw, option", [
    ({"repeats": 0}, "--repeats"), ({"resolution": 0.5}, "--resolution"), ({"margin": 0.9}, "--margin"),
    ({"hold_time": -1.0}, "--hold-time"), ({"supply": -3.0}, "--supply"), ({"floor": 1.0}, "--floor"),
])
def test_options_out_of_range_name_the_option(kw, option):
    with pytest.raises(InputError) as err:
        LiveOptions(**kw).check()
    assert str(err.value).startswith(option), str(err.value)


@pytest.mark.parametrize("args, expect", [
    (["--repeats", "2"], "--repeats: is for the live bench tuning: give --port too"),
    (["--port", "loop://", "--plot", "x.png"], "--plot: belongs to the offline sweep"),
    (["--port", "loop://", "--repeats", "0"], "--repeats: 0 is out of range"),
    (["--port", "loop://", "--detect", "eyes"], "--detect: 'eyes' is not one of auto, switch, signature"),
    (["--port", "/dev/coildrive-no-such-port"], "cannot open the port"),
])
def test_bad_live_options_exit_2_with_one_line(args, expect, tmp_path):
    r = CliRunner().invoke(app, ["tune", str(LATCH), *args, "--capture", str(tmp_path / "c.cdcap")]
                           if "--port" in args else ["tune", str(LATCH), *args])
    assert r.exit_code == 2, r.output
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 and expect in lines[0], r.output
    assert not (tmp_path / "c.cdcap").exists()


def test_a_failing_design_is_not_run_on_hardware(tmp_path):
    """A switch rated 40 V against the latch's 52.5 V turn-off spike: exit 1 before the
    port opens (loop:// would open: nothing may be sent)."""
    drive = tmp_path / "latch-40v.toml"
    drive.write_text(LATCH.read_text().replace('board = "relay-12bit-resistor"',
                                               'board = "relay-12bit-resistor"\n[switch]\nmax_voltage = "40 V"'))
    r = CliRunner().invoke(app, ["tune", str(drive), "--port", "loop://", "--capture", str(tmp_path / "c.cdcap")])
    assert r.exit_code == 1, r.output
    assert "fails switch_voltage" in r.output and "nothing was sent to the device" in r.output
    assert not (tmp_path / "c.cdcap").exists()


# --------------------------------------------------------------------------- the procedure, in process
class ScriptedLink:
    """A device in process, with DeviceLink's interface: replies as the protocol says
    (docs/protocol.md 4.5) and, on START, streams a synthetic capture of the actuation
    (bench.synth at ``synth`` settings) as SAMPLES and EVENT messages. Only for failure
    paths that the emulator cannot make cheaply."""

    baud = 460800

    def __init__(self, drive, longer_peak_us: int = 0, **synth):
        from coildrive.bench.synth import adc_scaling
        self.drive = drive
        self.synth = synth
        self.longer = longer_peak_us
        self.info = None
        self.q = None
        self.sent: list[tuple[str, int]] = []
        self.peak_us = self.freq = 0
        self.duty_code = 0
        self.index = 1000
        self._info = Info(int(drive.board.adc.sample_rate), 1, drive.board.adc.bits, adc_scaling(drive)[1], 0,
                          "scripted", has_position_switch=drive.armature is not None)

    def subscribe(self):
        self.q = queue.Queue()
        return self.q

    def stats(self):
        return None

    def command(self, opcode, argument=0, *, timeout=1.0, retries=2):
        self.sent.append((Opcode(opcode).name, int(argument)))
        value = 0
        if opcode == Opcode.SET_PEAK_TIME:
            self.peak_us = value = int(argument) + self.longer
        elif opcode == Opcode.SET_HOLD_FREQUENCY:
            self.freq = value = int(argument)
        elif opcode == Opcode.SET_HOLD_DUTY:
            self.duty_code = value = int(argument)
        reply = Reply(0, int(opcode), ReplyStatus.OK, value)
        self.q.put(reply)
        if opcode == Opcode.QUERY_INFO:
            self.info = self._info
            self.q.put(self._info)
        if opcode == Opcode.START:
            cap = synth_capture(self.drive, self.peak_us * 1e-6, self.duty_code / 65535, float(self.freq),
                                hold_time=argument * 1e-6, first_index=self.index, **self.synth)
            events = sorted(cap.events, key=lambda e: e.index)
            for k in range(0, len(cap), 64):
                first = int(cap.index[k])
                while events and events[0].index <= first + 63:
                    e = events.pop(0)
                    self.q.put(Event(e.kind, e.index, e.value))
                self.q.put(Samples(first, cap.code[k:k + 64]))
            self.index = int(cap.index[-1]) + 1
        return reply


def test_over_current_stops_at_once(latch):
    """20 V on a coil with a fifth of its turns shorted: the peak runs towards
    20 V / 9.85 ohm = 2.0 A, past the design's over-current threshold (1.25 x the
    highest healthy current, about 1.6 A: the cold coil at 13.2 V)."""
    d, des = latch
    assert des.adc.over_current_a < 20.0 / 9.85 * 0.95, des.adc
    link = ScriptedLink(d, supply=20.0, fault="shorted_turns")
    res = LiveTuner(link, des, LiveOptions(hold_time=0.01)).run()
    assert res.failure[0] == "over_current", res.failure
    assert "over-current" in res.failure[1] and f"{des.adc.over_current_a:.4g} A" in res.failure[1]
    assert link.sent[-1] == ("STOP", 0) and res.stopped
    assert [name for name, _ in link.sent].count("START") == 1


def test_a_device_that_sets_a_longer_peak_is_refused(latch):
    d, des = latch
    link = ScriptedLink(d, longer_peak_us=200)
    res = LiveTuner(link, des, LiveOptions()).run()
    assert res.failure[0] == "peak_time", res.failure
    assert "START" not in [name for name, _ in link.sent] and link.sent[-1] == ("STOP", 0)


# --------------------------------------------------------------------------- end to end
class Emulator:
    """`coildrive emulate LATCH ARGS`: device path from stdout, stderr lines collected."""

    def __init__(self, *args: str, drive: Path = LATCH):
        self.proc = subprocess.Popen([sys.executable, "-m", "coildrive", "emulate", str(drive), "--seed", "1", *args],
                                     cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                     env={**os.environ, "PYTHONPATH": str(ROOT)})
        self.lines: queue.Queue = queue.Queue()
        self.log: list[str] = []
        first: queue.Queue = queue.Queue()
        threading.Thread(target=lambda: first.put(self.proc.stdout.readline()), daemon=True).start()
        self._reader = threading.Thread(target=self._read_stderr, daemon=True)
        self._reader.start()
        try:
            self.path = first.get(timeout=TIMEOUT).strip()
        except queue.Empty:
            self.stop()
            raise AssertionError("coildrive emulate printed no device path") from None

    def _read_stderr(self):
        for line in self.proc.stderr:
            self.log.append(line.rstrip("\n"))
            self.lines.put(line.rstrip("\n"))

    def wait_for(self, text: str, timeout: float = TIMEOUT) -> None:
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            try:
                if text in self.lines.get(timeout=0.1):
                    return
            except queue.Empty:
                pass
        raise AssertionError(f"emulator never logged {text!r}: {self.log[-5:]}")

    def stop(self) -> list[str]:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        self.proc.wait(TIMEOUT)
        self._reader.join(TIMEOUT)   # stderr at its end: every line is in the log
        self.proc.stdout.close()
        self.proc.stderr.close()
        return self.log

    def last_state(self) -> str:
        return [line for line in self.log if line.startswith("state ")][-1]


def tune_args(emu: Emulator, tmp_path, *extra: str) -> list[str]:
    return ["tune", str(LATCH), "--port", emu.path, "--capture", str(tmp_path / "live.cdcap"), *extra]


@pytest.mark.slow
def test_live_tune_finds_the_emulated_dropout(tmp_path):
    emu = Emulator()
    try:
        r = run_cli(*tune_args(emu, tmp_path, "--json", "--repeats", "2", "--hold-time", "20 ms",
                               "--resolution", "3 %"), timeout=120)
    finally:
        log = emu.stop()
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    truth, stay = reference_dropout_duty()
    bench = doc["bench"]
    assert len(bench["dropout_duty"]) == 2
    assert bench["dropout_duty_mean"] == pytest.approx(truth, rel=0.05), (bench, truth)
    # the bracket of each search: held above the truth, dropped below (a slow lift near
    # the threshold may let a duty just below it hold through a 20 ms hold)
    for rep in doc["repeats"]:
        assert rep["dropped_duty"] < truth * 1.001 and rep["held_duty"] > truth * 0.98, rep
    assert bench["dropout_current_max_a"] == pytest.approx(stay, rel=0.05)
    assert doc["model"]["dropout_duty"] == pytest.approx(truth, rel=1e-3)  # SUPPLY event: 12 V within a code
    assert doc["procedure"]["detection"] == "switch" and doc["stopped"] is True
    rec = doc["recommendation"]
    assert rec["hold_current_a"] >= load_drive(LATCH).hold.current and rec["design_ok"]
    assert tomllib.loads(rec["hold_toml"])["hold"]["current"] == rec["hold_current_a"]
    # never a longer peak than the design's, and every duty from the device's reply
    cmds = [c for c in doc["commands"] if c["opcode"] == "SET_PEAK_TIME"]
    assert cmds and all(c["value"] <= round(design(load_drive(LATCH)).pull_in.peak_time_s * 1e6) for c in cmds)
    # the capture file holds every actuation; the log is the same document
    cap = read_capture(tmp_path / "live.cdcap")
    assert sum(e.name == "on" for e in cap.events) >= len(doc["actuations"])
    assert json.loads((tmp_path / "live.tune.json").read_text())["bench"] == bench
    assert [line for line in log if line.startswith("state ")][-1] == "state off"
    assert [line for line in log if line.startswith("command ")][-1] == "command STOP 0 -> OK", log[-3:]


@pytest.mark.slow
def test_live_tune_from_the_current_signature(tmp_path):
    """A board read as if it had no position switch: the hold current's rise finds the
    drop-out. Near the threshold the armature lifts slowly, so the figure can only sit
    below the reference (the bias docs/tuning.md describes); a 30 ms hold keeps it within
    5 % (a 20 ms one does not: the rise shows only 5 % below the drop-out duty)."""
    emu = Emulator("--noise", "1")
    try:
        r = run_cli(*tune_args(emu, tmp_path, "--json", "--detect", "signature", "--repeats", "1",
                               "--hold-time", "30 ms", "--resolution", "3 %"), timeout=120)
    finally:
        emu.stop()
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    truth, _ = reference_dropout_duty()
    assert doc["procedure"]["detection"] == "signature"
    assert {a["dropped_by"] for a in doc["actuations"] if a["dropped"]} == {"hold rise"}
    assert doc["bench"]["dropout_duty_mean"] == pytest.approx(truth, rel=0.05)
    assert doc["bench"]["dropout_duty_mean"] < truth * 1.001


@pytest.mark.slow
@pytest.mark.parametrize("fault, words", [("stuck", "stuck armature"), ("open", "open coil")])
def test_live_tune_fails_clearly_and_leaves_the_device_off(fault, words, tmp_path):
    emu = Emulator("--fault", fault)
    try:
        r = run_cli(*tune_args(emu, tmp_path, "--hold-time", "20 ms"), timeout=120)
    finally:
        emu.stop()
    assert r.returncode == 1, r.stderr
    assert words in r.stdout and words not in r.stderr, r.stderr  # in the report, not said twice
    assert "STOP acknowledged: the device is off" in r.stderr, r.stderr
    assert "Traceback" not in r.stderr
    assert emu.last_state() == "state off", emu.log
    doc = json.loads((tmp_path / "live.tune.json").read_text())
    assert doc["ok"] is False and doc["failure"]["code"] == ("stuck" if fault == "stuck" else "open_coil")


@pytest.mark.slow
def test_ctrl_c_stops_the_device(tmp_path):
    emu = Emulator()
    tune = subprocess.Popen([sys.executable, "-m", "coildrive", *tune_args(emu, tmp_path, "--hold-time", "0.9 s")],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "PYTHONPATH": str(ROOT)})
    try:
        emu.wait_for("command START")
        emu.wait_for("state on")
        tune.send_signal(signal.SIGINT)
        out, err = tune.communicate(timeout=TIMEOUT)
    finally:
        if tune.poll() is None:
            tune.kill()
        log = emu.stop()
    assert tune.returncode == 130, err
    assert "interrupted" in out and "STOP acknowledged" in err, (out, err)
    states = [line for line in log if line.startswith("state ")]
    assert states[-1] == "state off", log
    after_on = log[len(log) - 1 - log[::-1].index("state on"):]
    assert any(line.startswith("command STOP 0 -> OK") for line in after_on), log


@pytest.mark.slow
def test_live_tune_of_an_emulated_coil_without_armature_says_why(tmp_path):
    """An emulated drive without [armature] has no mechanics: no dip, nothing to drop out.
    The failure says so once, and says what live tuning needs."""
    demo = EXAMPLES / "demo-valve.toml"
    emu = Emulator(drive=demo)
    try:
        r = run_cli("tune", str(demo), "--port", emu.path, "--capture", str(tmp_path / "live.cdcap"),
                    "--hold-time", "20 ms", timeout=120)
    finally:
        emu.stop()
    assert r.returncode == 1, r.stderr
    assert "stuck armature" in r.stdout and "stuck armature" not in r.stderr, r.stderr
    said = " ".join(r.stdout.split())  # the report wraps the message
    assert "no [armature] section" in said and "needs an armature that moves" in said, said
    assert emu.last_state() == "state off", emu.log
