"""The whole bench path as a user runs it: `coildrive emulate` -> `coildrive capture` ->
`coildrive check` / `coildrive fit`, each a real subprocess, over a real pseudo-terminal.

The virtual device streams the model actuation of the drive's physics (armature
included) through the board's ADC; the references below are what it was told to be:

* `check` passes on a nominal device, and fails the rows the physics says must fail on a
  coil with 40 % more resistance (hold mean current ~ V·duty/R: 1/1.4 = -29 %, far
  outside the +/-10 % band; the slower RL rise lengthens the pull-in) and on a stuck
  armature (no current dip: no seat time);
* `fit` recovers the coil's R and L within 3 %: R is the drive file's resistance at the
  coil temperature (IEC 60028 annealed copper, alpha = 0.00393 /K) times the
  resistance scale; L, with an armature, is the open armature's inductance (the rise is
  fitted before the plunger moves) times the inductance scale.
"""

from __future__ import annotations

import json
import os
import queue
import signal
import subprocess
import sys
import threading
import tomllib

import pytest

from conftest import EXAMPLES, ROOT, run_cli
from coildrive.bench.capture_file import read_capture
from coildrive.units import parse_quantity

LATCH = EXAMPLES / "locker-latch-12v.toml"
ALPHA = 0.00393          # /K, IEC 60028 annealed copper
TIMEOUT = 60.0           # s: upper bound for a capture of three actuations

pytestmark = pytest.mark.slow


class Emulator:
    """A `coildrive emulate` subprocess; its device path is the first line of stdout."""

    def __init__(self, drive, *args: str, log=None):
        self.proc = subprocess.Popen([sys.executable, "-m", "coildrive", "emulate", str(drive), *args],
                                     cwd=ROOT, stdout=subprocess.PIPE, stderr=log or subprocess.DEVNULL,
                                     text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
        first: queue.Queue = queue.Queue()
        threading.Thread(target=lambda: first.put(self.proc.stdout.readline()), daemon=True).start()
        try:
            self.path = first.get(timeout=TIMEOUT).strip()
        except queue.Empty:
            self.stop()
            raise AssertionError("coildrive emulate printed no device path") from None
        assert self.path.startswith("/dev/"), self.path

    def stop(self):
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        try:
            self.proc.wait(TIMEOUT)
        finally:
            self.proc.stdout.close()


def capture_from(tmp_path, name, *emulate_args: str):
    """Emulate LATCH with ``emulate_args``, capture three actuations, return the file."""
    out = tmp_path / f"{name}.cdcap"
    with open(tmp_path / f"{name}.emulate.log", "w") as log:
        emu = Emulator(LATCH, "--noise", "1", "--seed", "7", *emulate_args, log=log)
        try:
            r = run_cli("capture", emu.path, "--drive", str(LATCH), "--out", str(out),
                        "--actuations", "3", timeout=TIMEOUT)
        finally:
            emu.stop()
    assert r.returncode == 0, r.stderr
    assert "3 actuation(s)" in r.stderr, r.stderr
    cap = read_capture(out)
    assert cap.lost_frames == 0 and cap.crc_errors == 0, r.stderr
    return out


def emulate_capture_check(drive, out, *emulate_args: str):
    """`emulate` DRIVE with ``emulate_args``, `capture` two actuations (or pulses) to
    ``out``, `check` it: the check's process result and its rows by name."""
    emu = Emulator(drive, *emulate_args)
    try:
        r = run_cli("capture", emu.path, "--drive", str(drive), "--out", str(out), "--actuations", "2",
                    timeout=TIMEOUT)
    finally:
        emu.stop()
    assert r.returncode == 0 and "2 actuation(s)" in r.stderr, r.stderr
    r = run_cli("check", str(out), str(drive), "--json")
    return r, {i["name"]: i["status"] for i in json.loads(r.stdout)["items"]}


def check_rows(capture):
    r = run_cli("check", str(capture), str(LATCH), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    return r.returncode, {i["name"]: i["status"] for i in doc["items"]}


def fit_of(capture):
    r = run_cli("fit", str(capture), "--json")
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout)


def expected_r_l(coil_temp_c, r_scale=1.0, l_scale=1.0):
    doc = tomllib.loads(LATCH.read_text())
    r_ref = parse_quantity(doc["coil"]["resistance"], "resistance")
    t_ref = parse_quantity(doc["coil"]["reference_temp"], "temperature")
    l_open = parse_quantity(doc["armature"]["inductance_open"], "inductance")
    return r_ref * (1 + ALPHA * (coil_temp_c - t_ref)) * r_scale, l_open * l_scale


def _fitted(doc):
    coil = doc["coil"] if "coil" in doc else doc
    return coil["resistance_ohm"], coil["inductance_h"]


def test_nominal_device_passes_check_and_fit_recovers_r_and_l(tmp_path):
    out = capture_from(tmp_path, "nominal")
    rc, rows = check_rows(out)
    assert rc == 0, rows
    assert rows["seated_time"] == "pass" and rows["link"] == "pass", rows
    cap = read_capture(out)
    assert cap.meta.coil_temp_c == 20.0 and cap.meta.supply_v == pytest.approx(12.0, rel=2e-3)
    r_fit, l_fit = _fitted(fit_of(out))
    r_exp, l_exp = expected_r_l(20.0)
    assert r_fit == pytest.approx(r_exp, rel=0.03), (r_fit, r_exp)
    assert l_fit == pytest.approx(l_exp, rel=0.03), (l_fit, l_exp)


def test_high_resistance_fails_the_hold_and_fit_sees_it_hot(tmp_path):
    out = capture_from(tmp_path, "high-r", "--resistance-scale", "1.4", "--coil-temp", "45")
    rc, rows = check_rows(out)
    assert rc == 1, rows
    assert rows["hold_mean"] == "FAIL" and rows["pull_in_time"] == "FAIL", rows
    assert rows["actuations"] == "pass" and rows["link"] == "pass", rows
    assert read_capture(out).meta.coil_temp_c == 45.0      # from the device's TEMPERATURE events
    r_fit, l_fit = _fitted(fit_of(out))
    r_exp, l_exp = expected_r_l(45.0, r_scale=1.4)
    assert r_fit == pytest.approx(r_exp, rel=0.03), (r_fit, r_exp)
    assert l_fit == pytest.approx(l_exp, rel=0.03), (l_fit, l_exp)


def test_stuck_armature_fails_on_the_missing_seat(tmp_path):
    out = capture_from(tmp_path, "stuck", "--fault", "stuck")
    rc, rows = check_rows(out)
    assert rc == 1, rows
    assert rows["seated_time"] == "FAIL", rows
    assert rows["actuations"] == "pass" and rows["link"] == "pass", rows


@pytest.mark.parametrize("example", ["gate-valve-highside-24v", "dosing-valve-bridge-24v"])
def test_other_topologies_emulate_capture_and_pass_check(tmp_path, example):
    # A high-side switch and a full bridge: the emulated board streams the coil current from
    # its coil-path sense resistor (the same two sense positions as a low-side board; the
    # bridge's release decays fast into the bus), and check passes.
    drive = EXAMPLES / f"{example}.toml"
    r, rows = emulate_capture_check(drive, tmp_path / "act.cdcap", "--noise", "1", "--seed", "7")
    assert r.returncode == 0, rows
    assert rows["release_time"] == "pass" and rows["hold_mean"] == "pass", rows
