"""`coildrive emulate` end to end: a real subprocess, a real pty, pyserial on the host side."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import pytest
import serial
from typer.testing import CliRunner

from conftest import EXAMPLES, ROOT
from coildrive.bench.messages import Event, EventKind, Info, Opcode, Reply, ReplyStatus, Samples
from coildrive.bench.protocol import FrameDecoder, FrameEncoder
from coildrive.cli import app

def start(*args: str) -> tuple[subprocess.Popen, str]:
    proc = subprocess.Popen([sys.executable, "-m", "coildrive", "emulate", *args], cwd=ROOT,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "PYTHONPATH": str(ROOT)})
    path = proc.stdout.readline().strip()
    assert path.startswith("/dev/"), (path, proc.stderr.read() if proc.poll() is not None else "")
    return proc, path


def read_until(port, dec: FrameDecoder, done, timeout: float = 10.0) -> list:
    """Decode frames until ``done(messages)`` or the timeout (a failure)."""
    msgs: list = []
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        msgs += dec.feed(port.read(4096))
        if done(msgs):
            return msgs
    raise AssertionError(f"timed out; got {len(msgs)} messages, {dec.stats}")


def complete_actuation(msgs) -> bool:
    """INFO seen, then a recording from its PAUSE through ON, PEAK_END, OFF and the samples
    up to a zero reading after the OFF, with no index missing."""
    if not any(isinstance(m, Info) for m in msgs):
        return False
    seen, expect, off = set(), None, None
    for m in msgs:
        if isinstance(m, Event) and m.kind == EventKind.PAUSE:
            seen, expect, off = {"pause"}, m.index + m.value, None
        elif expect is None:
            continue
        elif isinstance(m, Event):
            seen.add(m.kind)
            if m.kind == EventKind.OFF:
                off = m.index
        elif isinstance(m, Samples):
            if m.first_index != expect:
                return False
            expect = m.next_index
            if off is not None and expect > off + 10 and m.codes[-1] == 0 \
                    and {EventKind.ON, EventKind.PEAK_END} <= seen:
                return True
    return False


@pytest.mark.slow
def test_emulate_serves_frames_and_answers_commands():
    proc, path = start(str(EXAMPLES / "demo-valve.toml"))
    try:
        with serial.serial_for_url(path, timeout=0.05) as port:
            dec = FrameDecoder()
            read_until(port, dec, complete_actuation)
            assert dec.stats.errors == 0
            enc = FrameEncoder()
            port.write(enc.command(Opcode.SET_HOLD_DUTY, 30000))
            replies = lambda ms: [m for m in ms if isinstance(m, Reply)]   # noqa: E731
            msgs = read_until(port, dec, lambda ms: replies(ms))
            r = replies(msgs)[0]
            assert (r.opcode, r.status, r.command_seq) == (Opcode.SET_HOLD_DUTY, ReplyStatus.OK, 0)
            assert abs(r.value - 30000) <= 65535 / 3360 / 2 + 1, "rounded to one compare count"
            # the automatic actuation may still be streaming: START until it is accepted
            for _ in range(50):
                port.write(enc.command(Opcode.START, 20000))
                got = replies(read_until(port, dec, lambda ms: replies(ms)))
                if got[0].status == ReplyStatus.OK:
                    break
                assert got[0].status == ReplyStatus.BUSY
            assert got[0].value == 20000
            # ... and its actuation streams in full
            read_until(port, dec, lambda ms: any(isinstance(m, Event) and m.kind == EventKind.OFF
                                                  for m in ms))
        # hosts may close and reopen the device path
        with serial.serial_for_url(path, timeout=0.05) as port:
            port.write(FrameEncoder().command(Opcode.QUERY_INFO))
            read_until(port, FrameDecoder(), lambda ms: any(isinstance(m, Info) for m in ms))
    finally:
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=10)
    assert proc.returncode == 0, err
    lines = err.splitlines()
    assert out == "", "stdout holds the device path only"
    assert "state on" in lines and "state off" in lines
    assert "command SET_HOLD_DUTY 30000 -> OK" in lines
    assert "command START 20000 -> OK" in lines
    assert "command QUERY_INFO 0 -> OK" in lines
    assert lines[-1] == "stopped"


@pytest.mark.slow
def test_emulate_stops_after_its_duration_with_the_coil_off():
    proc, _ = start(str(EXAMPLES / "demo-valve.toml"), "--duration", "0.3", "--period", "0.5 s")
    out, err = proc.communicate(timeout=20)
    assert proc.returncode == 0, err
    lines = err.splitlines()
    assert lines[-1] == "stopped"
    assert lines.count("state on") == lines.count("state off") == 1


@pytest.mark.parametrize("args, where", [
    (["--fault", "melted"], "--fault"),
    (["--drop-bytes", "1.5"], "--drop-bytes"),
    (["--supply", "12 A"], "--supply"),
    (["--period", "-1"], "--period"),
    (["--baud", "0"], "--baud"),
])
def test_bad_options_are_one_line_and_exit_2(args, where):
    result = CliRunner().invoke(app, ["emulate", str(EXAMPLES / "demo-valve.toml"), *args])
    assert result.exit_code == 2, result.output
    lines = [line for line in result.output.splitlines() if line]
    assert len(lines) == 1 and where in lines[0] and "Traceback" not in result.output


@pytest.mark.slow
def test_bad_drive_file_is_one_line_in_a_real_process(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text((EXAMPLES / "demo-valve.toml").read_text().replace('"22 ohm"', '"22 V"'))
    proc = subprocess.run([sys.executable, "-m", "coildrive", "emulate", str(bad), "--duration", "1"],
                          cwd=ROOT, capture_output=True, text=True, timeout=60,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert proc.returncode == 2 and proc.stdout == ""
    assert len(proc.stderr.splitlines()) == 1 and "coil.resistance" in proc.stderr


@pytest.mark.slow
def test_emulator_sends_whether_or_not_anyone_reads():
    """Nobody opens the pty: the bytes wait a little, then are dropped and counted, and
    the emulator neither blocks nor stops pacing (a UART sends regardless)."""
    import threading

    from coildrive.bench.device import DeviceOptions, VirtualDevice
    from coildrive.bench.emulator import Emulator
    from coildrive.config import load_drive

    dev = VirtualDevice(load_drive(EXAMPLES / "demo-valve.toml"), DeviceOptions(period=0.2))
    entries = []
    with Emulator(dev, write_wait=0.05) as emu:
        worker = threading.Thread(target=emu.serve, args=(0.8, entries.append))
        worker.start()
        worker.join(timeout=20)
        assert not worker.is_alive(), "serve() must end after its duration"
    assert emu.unread_dropped > 0
    assert dev.stats.bytes_sent > emu.unread_dropped
    texts = [e.text for e in entries]
    assert texts.count("state on") == texts.count("state off") >= 3


@pytest.mark.slow
def test_line_log_lists_the_frames_the_line_damaged(tmp_path):
    """``--line-log``: one CSV row per damaged frame, as many as the ``line:`` summary counts,
    numbered in sending order with their 16-bit sequence numbers."""
    log = tmp_path / "line.csv"
    proc, _ = start(str(EXAMPLES / "demo-valve.toml"), "--duration", "0.6", "--period", "0.2 s",
                    "--drop-bytes", "2e-3", "--corrupt-bytes", "2e-3", "--seed", "3",
                    "--line-log", str(log))
    _, err = proc.communicate(timeout=30)
    assert proc.returncode == 0, err
    summary = [line for line in err.splitlines() if line.startswith("line: ")]
    damaged = int(summary[0].split(", ")[1].split()[0])
    rows = log.read_text().splitlines()
    assert rows[0] == "frame,seq,kind,delimiter_damaged"
    body = [row.split(",") for row in rows[1:]]
    assert len(body) == damaged > 0
    frames = [int(r[0]) for r in body]
    assert frames == sorted(set(frames))
    assert all(int(r[1]) == int(r[0]) % 65536 and r[2] in {"SAMPLES", "EVENT", "INFO", "REPLY"}
               and r[3] in {"0", "1"} for r in body)


def test_line_log_in_a_missing_folder_is_one_line(tmp_path):
    r = CliRunner().invoke(app, ["emulate", str(EXAMPLES / "demo-valve.toml"), "--line-log",
                                 str(tmp_path / "no" / "line.csv")])
    assert r.exit_code == 2 and "--line-log" in r.output and len(r.output.strip().splitlines()) == 1
