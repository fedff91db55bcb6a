"""`coildrive capture` and the host side of the bench link (`coildrive.bench.link`).

As a user would: real `coildrive capture` subprocesses reading real pseudo-terminals
(`os.openpty`, the device side written by a thread of this test), pyserial's `loop://`
and `socket://` transports in-process, and raw byte files for `--replay`. What is sent
is built with the project's own `FrameEncoder` / text-line format (`docs/protocol.md`),
and what lands in the capture file is read back with `read_capture`
(`docs/capture-format.md`): the test is that the two are equal, sample for sample.
No wall-clock sleeps decide a result: the tests wait on the capture file's contents,
on the subprocess's stderr lines and on queues, each with a timeout.
"""

from __future__ import annotations

import doctest
import os
import queue
import select
import signal
import socket
import subprocess
import sys
import threading
import time
import tty
from pathlib import Path

import numpy as np
import pytest
import serial
from typer.testing import CliRunner

from conftest import EXAMPLES, ROOT, run_cli
from coildrive.bench import link as link_module
from coildrive.bench.capture_file import HEADER_SIZE, RECORD_SIZE, read_capture
from coildrive.bench.link import DeviceLink, LinkError, LinkStats, guess_mode, replay
from coildrive.bench.messages import EventKind, Info, Opcode, ReplyStatus, Samples
from coildrive.bench.protocol import FrameDecoder, FrameEncoder
from coildrive.bench.synth import synth_design_capture
from coildrive.bench.textline import format_text
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design import design

DEMO = EXAMPLES / "demo-valve.toml"
BOARD = "lab-m32-zener"          # the demo's board: 200 kHz, 12-bit, 921600 Bd
PER_FRAME = 64
TIMEOUT = 20.0                   # s: generous upper bounds for waits, never a pass condition

runner = CliRunner()


# ----------------------------------------------------------------------------- helpers
@pytest.fixture(scope="module")
def demo():
    return design(load_drive(DEMO))


def synth(demo, actuations=2, **kwargs):
    kwargs.setdefault("noise_codes", 1.0)
    return synth_design_capture(demo, actuations=actuations, seed=3, **kwargs)


def info_of(cap) -> Info:
    return Info(int(cap.meta.sample_rate_hz), 1, cap.meta.adc_bits, cap.meta.amps_per_code, 0,
                "test-fw 1.0")


def messages_of(cap, per_frame=PER_FRAME, info=True):
    """What a device would send for ``cap``: INFO, then samples and events in index order."""
    from coildrive.bench.messages import Event
    out = [info_of(cap)] if info else []
    events = sorted(cap.events, key=lambda e: e.index)
    cuts = np.searchsorted(cap.index, [e.index for e in events]).tolist() + [len(cap)]
    pos = 0
    for k, e in zip(cuts, events + [None]):
        while pos < k:
            end = min(k, pos + per_frame)
            out.append(Samples(int(cap.index[pos]), cap.code[pos:end].copy()))
            pos = end
        if e is not None:
            out.append(Event(e.kind, e.index, e.value))
    return out


def frames_of(messages) -> list[bytes]:
    enc = FrameEncoder()
    return [b"\x00"] + [enc.encode(m) for m in messages]


def records_in(cap) -> int:
    """Records a capture file holds for ``cap`` (samples + events; no error records)."""
    high = sum(1 for e in cap.events if not 0 <= e.value <= 0xFFFF)
    return len(cap) + len(cap.events) + high


def wait_for(predicate, timeout=TIMEOUT, what="condition"):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return
        time.sleep(0.02)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


def file_records(path: Path) -> int:
    try:
        return max(0, (path.stat().st_size - HEADER_SIZE) // RECORD_SIZE)
    except FileNotFoundError:
        return 0


class PtyDevice:
    """The device end of a pseudo-terminal: a thread writes frames to the master side."""

    def __init__(self):
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)          # no line discipline between the two ends
        self.path = os.ttyname(self.slave)
        os.set_blocking(self.master, False)
        self.stop = threading.Event()
        self.samples_sent = 0
        self._thread: threading.Thread | None = None

    def write(self, data: bytes) -> bool:
        view = memoryview(data)
        while len(view):
            if self.stop.is_set():
                return False
            try:
                view = view[os.write(self.master, view):]
            except BlockingIOError:
                select.select([], [self.master], [], 0.05)
            except OSError:
                return False
        return True

    def stream(self, chunks, pace_s: float = 0.0, samples_per_chunk=None):
        """Write ``chunks`` from a thread (``pace_s`` between them: the device's own rate)."""
        def run():
            for k, chunk in enumerate(chunks):
                if not self.write(chunk):
                    return
                if samples_per_chunk is not None:
                    self.samples_sent += samples_per_chunk[k]
                if pace_s:
                    time.sleep(pace_s)
        self._thread = threading.Thread(target=run, daemon=True)
        self._thread.start()
        return self._thread

    def close_master(self):
        os.close(self.master)
        self.master = -1

    def close(self):
        self.stop.set()
        if self._thread is not None:
            self._thread.join(TIMEOUT)
        for fd in (self.master, self.slave):
            if fd >= 0:
                os.close(fd)


@pytest.fixture
def pty_device():
    dev = PtyDevice()
    yield dev
    dev.close()


class Capture:
    """A ``coildrive capture`` subprocess; its stderr lines arrive on a queue."""

    def __init__(self, *args: str):
        self.proc = subprocess.Popen([sys.executable, "-m", "coildrive", "capture", *args],
                                     cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                                     text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
        self.lines: queue.Queue = queue.Queue()
        self.stderr: list[str] = []
        threading.Thread(target=self._pump, daemon=True).start()

    def _pump(self):
        for line in self.proc.stderr:
            self.stderr.append(line)
            self.lines.put(line)
        self.proc.stderr.close()
        self.lines.put(None)

    def started(self):
        """Wait for the status line the capture prints once the port is open."""
        line = self.lines.get(timeout=TIMEOUT)
        assert line is not None and line.startswith("capturing "), "".join(self.stderr)

    def wait(self) -> int:
        rc = self.proc.wait(TIMEOUT)
        deadline = time.monotonic() + TIMEOUT
        while self.lines.get(timeout=max(0.1, deadline - time.monotonic())) is not None:
            pass
        return rc

    @property
    def err(self) -> str:
        return "".join(self.stderr)


def assert_same(got, sent, what=""):
    assert got.index.tolist() == sent.index.tolist(), f"{what}: sample indices differ"
    assert np.array_equal(got.code, sent.code), f"{what}: ADC codes differ"
    assert [(e.index, e.kind, e.value) for e in got.events] == \
        [(e.index, e.kind, e.value) for e in sorted(sent.events, key=lambda e: e.index)], f"{what}: events differ"


def test_link_module_doctests():
    assert doctest.testmod(link_module).failed == 0


# ----------------------------------------------------------------------------- pty, subprocess
@pytest.mark.slow
def test_pty_capture_equals_what_was_sent_and_ctrl_c_keeps_it(demo, pty_device, tmp_path):
    sent = synth(demo)
    out = tmp_path / "run.cdcap"
    cap = Capture(pty_device.path, "--board", BOARD, "--drive", str(DEMO), "--out", str(out))
    cap.started()
    pty_device.stream(frames_of(messages_of(sent)))
    wait_for(lambda: file_records(out) >= records_in(sent), what="every record in the file")
    cap.proc.send_signal(signal.SIGINT)
    assert cap.wait() == 0, cap.err
    assert "stopped by SIGINT" in cap.err, cap.err
    got = read_capture(out)
    assert_same(got, sent, "pty capture")
    assert got.lost_frames == 0 and got.crc_errors == 0 and got.truncated_bytes == 0
    m = got.meta
    assert (m.board, m.drive, m.link, m.firmware_id) == (BOARD, "demo-valve", "frames", "test-fw 1.0")
    assert m.extra["port"] == pty_device.path and m.extra["baud"] == 921600, m.extra
    assert m.extra["drive_file"] == str(DEMO)
    assert m.sample_rate_hz == 200000.0 and m.adc_bits == 12  # from the INFO frame
    assert m.amps_per_code == pytest.approx(sent.meta.amps_per_code, rel=1e-6)  # f32 on the wire
    assert m.started_utc is not None


@pytest.mark.slow
def test_raw_keeps_the_bytes_as_they_arrived_and_replays_to_the_same_capture(demo, pty_device, tmp_path):
    """``--raw``: every byte read, unchanged, in a file that ``--replay`` decodes into the
    same samples and events as the live capture; an existing raw file is never replaced
    without ``--overwrite``."""
    sent = synth(demo)
    wire = b"".join(frames_of(messages_of(sent)))
    out, raw = tmp_path / "live.cdcap", tmp_path / "live.raw"
    cap = Capture(pty_device.path, "--board", BOARD, "--out", str(out), "--raw", str(raw))
    cap.started()
    pty_device.stream([wire])
    wait_for(lambda: file_records(out) >= records_in(sent), what="every record in the file")
    cap.proc.send_signal(signal.SIGINT)
    assert cap.wait() == 0, cap.err
    assert f"raw bytes {raw}" in cap.err
    assert raw.read_bytes() == wire
    again = tmp_path / "again.cdcap"
    r = runner.invoke(app, ["capture", "--replay", str(raw), "--board", BOARD, "--out", str(again)])
    assert r.exit_code == 0, r.output
    assert_same(read_capture(again), sent, "replayed raw bytes")
    r = runner.invoke(app, ["capture", "loop://", "--board", BOARD, "--out", str(tmp_path / "b.cdcap"),
                            "--raw", str(raw)])
    assert r.exit_code == 2 and "exists" in r.output and raw.read_bytes() == wire


@pytest.mark.slow
def test_actuations_stop_after_the_release_and_the_capture_checks(demo, pty_device, tmp_path):
    sent = synth(demo, actuations=3)
    out = tmp_path / "two.cdcap"
    cap = Capture(pty_device.path, "--board", BOARD, "--out", str(out), "--actuations", "2",
                  "--csv", str(tmp_path / "two.csv"))
    cap.started()
    pty_device.stream(frames_of(messages_of(sent)))
    assert cap.wait() == 0, cap.err
    assert "2 actuation(s)" in cap.err, cap.err
    got = read_capture(out)
    ons = [e.index for e in sent.events if e.kind == EventKind.ON]
    offs = [e.index for e in sent.events if e.kind == EventKind.OFF]
    assert [e.kind for e in got.events].count(EventKind.ON) == 2, got.events
    assert int(got.index[-1]) < ons[2], "samples of the third actuation were written"
    # the second release has ended: the current is back at zero (the analysis's zero
    # level) before the last sample written
    after = got.code[got.index > offs[1]]
    assert after.size and after[-1] <= 8, after[-20:]
    n = len(got)
    assert np.array_equal(got.code, sent.code[:n]) and got.index.tolist() == sent.index[:n].tolist()
    assert (tmp_path / "two.csv").read_text() == got.to_csv()
    check = run_cli("check", str(out), str(DEMO))
    assert check.returncode == 0, check.stdout + check.stderr   # both actuations whole


@pytest.mark.slow
def test_kill_9_leaves_a_readable_file_with_all_but_the_last_flush(pty_device, tmp_path):
    # a device streaming 10 000 samples/s in frames of 50: codes are a ramp, so any
    # sample lost or reordered would show
    per, pace = 50, 0.005
    enc = FrameEncoder()
    n_frames = 4000
    codes = (np.arange(per * n_frames) % 4096).astype(np.uint16)
    chunks = [b"\x00" + enc.info(Info(10000, 1, 12, 0.001))] + \
        [enc.samples(k * per, codes[k * per:(k + 1) * per]) for k in range(n_frames)]
    out = tmp_path / "killed.cdcap"
    cap = Capture(pty_device.path, "--board", BOARD, "--out", str(out))
    cap.started()
    pty_device.stream(chunks, pace_s=pace, samples_per_chunk=[0] + [per] * n_frames)
    wait_for(lambda: file_records(out) >= 5000, what="5000 samples on disk")
    sent_at_kill = pty_device.samples_sent
    cap.proc.kill()                                  # SIGKILL: no handler, no flush
    assert cap.wait() == -signal.SIGKILL
    got = read_capture(out)
    assert len(got) >= 5000
    assert np.array_equal(got.code, codes[:len(got)]) and got.index.tolist() == list(range(len(got)))
    # the writer flushes every 50 ms (docs/capture-format.md promises <= 100 ms lost);
    # 0.3 s of samples is the bound here: flush interval + what was in the pty and in
    # flight when the kill came, with room for a loaded test machine
    assert sent_at_kill - len(got) <= 3000, (sent_at_kill, len(got))


@pytest.mark.slow
def test_device_vanishing_exits_1_and_keeps_the_data(demo, pty_device, tmp_path):
    sent = synth(demo, actuations=1)
    out = tmp_path / "gone.cdcap"
    cap = Capture(pty_device.path, "--board", BOARD, "--out", str(out), "--csv", str(tmp_path / "gone.csv"))
    cap.started()
    pty_device.stream(frames_of(messages_of(sent)))
    wait_for(lambda: file_records(out) >= records_in(sent), what="every record in the file")
    pty_device.close_master()                        # the cable is pulled
    assert cap.wait() == 1, cap.err
    last = cap.err.strip().splitlines()
    assert len(last) == 2, cap.err                   # the start line, then one line
    assert "vanished" in last[1] and f"kept {len(sent):,} samples" in last[1] and str(out) in last[1], last
    assert "Traceback" not in cap.err
    assert_same(read_capture(out), sent, "vanished")
    assert (tmp_path / "gone.csv").exists()


@pytest.mark.slow
def test_garbage_at_the_wrong_baud_gives_the_hint(pty_device, tmp_path):
    rng = np.random.default_rng(1)
    noise = [rng.integers(0, 256, 200, dtype=np.uint8).tobytes() for _ in range(100)]
    out = tmp_path / "noise.cdcap"
    cap = Capture(pty_device.path, "--board", BOARD, "--out", str(out), "--hint-after", "0.4",
                  "--duration", "1.5")
    cap.started()
    pty_device.stream(noise, pace_s=0.01)
    assert cap.wait() == 0, cap.err
    hint = [line for line in cap.err.splitlines() if line.startswith("hint:")]
    assert len(hint) == 1, cap.err
    assert "no valid frame" in hint[0] and "check the baud rate (the board says 921600 Bd" in hint[0]
    assert "--text" in hint[0] and "still waiting" in hint[0]
    assert "duration reached" in cap.err


@pytest.mark.slow
def test_text_mode_over_a_pty_and_the_mode_hint(demo, pty_device, tmp_path):
    sent = synth(demo, actuations=1)
    lines = "".join(format_text(m) for m in messages_of(sent)).encode()
    out = tmp_path / "text.cdcap"
    cap = Capture(pty_device.path, "--board", BOARD, "--out", str(out), "--text", "--actuations", "1")
    cap.started()
    pty_device.stream([lines[k:k + 4096] for k in range(0, len(lines), 4096)])
    assert cap.wait() == 0, cap.err
    got = read_capture(out)
    assert got.meta.link == "text"
    n = len(got)
    assert n > 0.9 * len(sent) and np.array_equal(got.code, sent.code[:n])
    # the same lines without --text: the hint says what they look like
    dev2 = PtyDevice()
    try:
        cap2 = Capture(dev2.path, "--board", BOARD, "--out", str(tmp_path / "b.cdcap"),
                       "--hint-after", "0.3", "--duration", "1")
        cap2.started()
        dev2.stream([lines[:3000]])
        assert cap2.wait() == 0, cap2.err
        assert "look like text lines: use --text" in cap2.err, cap2.err
    finally:
        dev2.close()


# ----------------------------------------------------------------------------- in-process links
def _responder(port, commands: queue.Queue, stop: threading.Event, ignore_first=0, enc=None):
    """A tiny device on ``loop://``: answers each COMMAND it sees with a REPLY.

    On ``loop://`` the host's own COMMAND frames come back to its decoder; this thread
    watches them and writes a REPLY (SET_HOLD_DUTY is answered with the duty rounded to
    a 1000-count timer, as a firmware would)."""
    enc = enc or FrameEncoder()
    seen = 0
    while not stop.is_set():
        try:
            msg = commands.get(timeout=0.05)
        except queue.Empty:
            continue
        if type(msg).__name__ != "Command":
            continue
        seen += 1
        if seen <= ignore_first:
            continue                       # a command lost on the way: no reply
        if msg.opcode == Opcode.SET_HOLD_DUTY:
            value = round(msg.argument / 65535 * 1000) * 65535 // 1000
            port.write(enc.reply(msg.seq, msg.opcode, ReplyStatus.OK, value))
        elif msg.opcode == Opcode.QUERY_INFO:
            port.write(enc.info(Info(50000, 1, 10, 0.002, 3, "loop-fw")) +
                       enc.reply(msg.seq, msg.opcode, ReplyStatus.OK))
        else:
            port.write(enc.reply(msg.seq, msg.opcode, ReplyStatus.UNKNOWN_OPCODE))


def test_loop_commands_round_trip_and_samples_are_captured(tmp_path):
    port = serial.serial_for_url("loop://", timeout=0.05)
    out = tmp_path / "loop.cdcap"
    stop = threading.Event()
    with DeviceLink(port, baud=115200, capture=out, meta={"board": BOARD}) as link:
        feed = link.subscribe()
        commands = link.subscribe()
        device = FrameEncoder()               # one sequence counter for all device frames
        t = threading.Thread(target=_responder, args=(port, commands, stop, 0, device), daemon=True)
        t.start()
        reply = link.command(Opcode.SET_HOLD_DUTY, 32768)
        assert reply.status == ReplyStatus.OK and reply.value == 500 * 65535 // 1000, reply
        reply = link.command(Opcode.QUERY_INFO)
        assert reply.status == ReplyStatus.OK
        assert link.info is not None and link.info.firmware_id == "loop-fw"
        assert link.command(200).status == ReplyStatus.UNKNOWN_OPCODE
        stop.set()
        t.join(TIMEOUT)
        wire = [device.samples(0, [1, 2, 3]), device.event(EventKind.ON, 3), device.samples(3, [40, 50]),
                device.event(EventKind.OFF, 5), device.samples(5, [5, 6, 7, 8]), device.samples(9, [7])]
        port.write(b"".join(wire[:4] + wire[5:]))          # the frame of samples 5..8 is lost
        got = []
        while len(got) < 5:
            m = feed.get(timeout=TIMEOUT)
            if type(m).__name__ in ("Samples", "Event"):
                got.append(m)
        st = link.stats()
        assert isinstance(st, LinkStats)
        assert (st.samples, st.actuations, st.lost_frames, st.samples_missing, st.error) == (6, 1, 1, 4, None), st
    link.close()                                          # idempotent
    cap = read_capture(out)
    assert cap.code.tolist() == [1, 2, 3, 40, 50, 7]
    assert [e.name for e in cap.events] == ["on", "off"]
    assert cap.meta.firmware_id == "loop-fw" and cap.meta.zero_code == 3  # header from INFO
    assert cap.meta.board == BOARD
    assert cap.samples_missing == 4 and [(g.index, g.frames) for g in cap.gaps] == [(9, 1)]


def test_commands_retry_with_a_new_sequence_number_then_give_up():
    port = serial.serial_for_url("loop://", timeout=0.05)
    stop = threading.Event()
    with DeviceLink(port, baud=115200) as link:
        commands = link.subscribe()
        t = threading.Thread(target=_responder, args=(port, commands, stop, 1), daemon=True)
        t.start()
        reply = link.command(Opcode.SET_HOLD_DUTY, 65535, timeout=0.3, retries=2)
        assert reply.status == ReplyStatus.OK and reply.command_seq == 1  # the second try
        stop.set()
        t.join(TIMEOUT)
        with pytest.raises(LinkError) as err:
            link.command(Opcode.STOP, timeout=0.1, retries=1)
    assert "no reply to STOP after 2 tries" in str(err.value)
    with pytest.raises(LinkError) as err:
        link.command(Opcode.STOP)
    assert "closed" in str(err.value)


def test_text_mode_link_refuses_commands():
    with DeviceLink("loop://", baud=9600, text=True) as link:
        with pytest.raises(LinkError) as err:
            link.command(Opcode.START)
    assert "text mode" in str(err.value)


def test_open_failure_is_a_link_error(tmp_path):
    with pytest.raises(LinkError) as err:
        DeviceLink(str(tmp_path / "no-such-tty"), baud=9600)
    assert "cannot open the port" in str(err.value) and "\n" not in str(err.value)


def _serve_once(payload: bytes):
    """A TCP 'device' that sends ``payload`` to the first client, then hangs up.

    It starts streaming a moment after the client connects: pyserial's ``socket://``
    discards whatever is already waiting when it opens (as it flushes a serial port's
    input), like a host that joins a running stream."""
    srv = socket.create_server(("127.0.0.1", 0))
    def run():
        conn, _ = srv.accept()
        with conn:
            time.sleep(0.3)
            conn.sendall(payload)
        srv.close()
    threading.Thread(target=run, daemon=True).start()
    return srv.getsockname()[1]


def test_socket_url_capture_in_process_device_hangs_up(demo, tmp_path):
    sent = synth(demo, actuations=1)
    port = _serve_once(b"".join(frames_of(messages_of(sent))))
    out = tmp_path / "tcp.cdcap"
    r = runner.invoke(app, ["capture", f"socket://127.0.0.1:{port}", "--board", BOARD, "--out", str(out)])
    # the server closes the connection after the data: the device has vanished
    assert r.exit_code == 1, r.output
    assert "vanished" in r.output and "kept" in r.output
    assert_same(read_capture(out), sent, "socket://")


# ----------------------------------------------------------------------------- replay
def _damaged_stream(sent):
    """Frames with one frame dropped and one frame's CRC broken (docs/protocol.md s. 5)."""
    frames = frames_of(messages_of(sent))
    lost_at, bad_at = 40, 80
    bad = bytearray(frames[bad_at])
    bad[5] ^= 0x01 if bad[5] != 0x01 else 0x03   # damage a payload byte (never make a 0x00)
    damaged = frames[:lost_at] + frames[lost_at + 1:bad_at] + [bytes(bad)] + frames[bad_at + 1:]
    return b"".join(damaged), frames, lost_at, bad_at


def test_replay_counts_lost_frames_and_crc_errors_where_they_happened(demo, tmp_path):
    sent = synth(demo, actuations=1)
    raw, frames, lost_at, bad_at = _damaged_stream(sent)
    (tmp_path / "raw.bin").write_bytes(raw)
    st = replay(tmp_path / "raw.bin", tmp_path / "r.cdcap", meta={"board": BOARD})
    ref = FrameDecoder()
    ref.feed(raw)
    assert (st.lost_frames, st.crc_errors) == (ref.stats.lost_frames, ref.stats.crc_errors) == (2, 1)
    cap = read_capture(tmp_path / "r.cdcap")
    assert cap.lost_frames == 2 and cap.crc_errors == 1
    msgs = messages_of(sent)
    # frames[k] carries msgs[k - 1]; a gap record sits at the first sample after each loss
    def next_samples(k):
        return next(m for m in msgs[k:] if isinstance(m, Samples))
    gap_index = sorted(g.index for g in cap.gaps)
    assert gap_index == sorted({next_samples(lost_at).first_index, next_samples(bad_at).first_index}), cap.gaps
    missing = sum(len(m) for m in (msgs[lost_at - 1], msgs[bad_at - 1]) if isinstance(m, Samples))
    assert len(cap) == len(sent) - missing
    assert cap.samples_missing == missing


def test_replay_cli_binary_text_csv_and_actuations(demo, tmp_path):
    sent = synth(demo, actuations=2)
    raw = tmp_path / "raw.bin"
    raw.write_bytes(b"".join(frames_of(messages_of(sent))))
    r = run_cli("capture", "--replay", str(raw), "--board", BOARD, "--out", str(tmp_path / "b.cdcap"),
                "--csv", str(tmp_path / "b.csv"))
    assert r.returncode == 0, r.stderr
    assert f"{len(sent):,} samples" in r.stderr and "2 actuation(s)" in r.stderr
    got = read_capture(tmp_path / "b.cdcap")
    assert_same(got, sent, "replay")
    assert got.meta.extra["replay"] == "raw.bin"
    assert (tmp_path / "b.csv").read_text() == got.to_csv()
    # text lines, in process
    text = tmp_path / "raw.txt"
    text.write_text("".join(format_text(m) for m in messages_of(sent)))
    r = runner.invoke(app, ["capture", "--replay", str(text), "--text", "--board", BOARD,
                            "--out", str(tmp_path / "t.cdcap"), "--actuations", "1"])
    assert r.exit_code == 0, r.output
    got = read_capture(tmp_path / "t.cdcap")
    assert got.meta.link == "text" and [e.kind for e in got.events].count(EventKind.OFF) == 1
    assert np.array_equal(got.code, sent.code[:len(got)])
    # text replayed as binary: nothing decodes, nothing is written, the hint names the mode
    r = runner.invoke(app, ["capture", "--replay", str(text), "--board", BOARD,
                            "--out", str(tmp_path / "x.cdcap")])
    assert r.exit_code == 2 and "look like text lines: use --text" in r.output, r.output
    assert not (tmp_path / "x.cdcap").exists()


def test_guess_mode():
    enc = FrameEncoder()
    assert guess_mode(enc.samples(0, [1, 2]) + enc.samples(2, [3])) == "frames"
    assert guess_mode(b"1,2\n2,3\n3,4\n") == "text"
    assert guess_mode(b"") is None


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("args, message", [
    (["loop://", "--out", "@x.cdcap"], "--board: missing"),
    (["loop://", "--board", "no-such-board", "--out", "@x.cdcap"], "unknown board"),
    (["loop://", "--board", BOARD], "--out: missing"),
    (["loop://", "--board", BOARD, "--out", "@no/such/folder/x.cdcap"], "does not exist"),
    (["--board", BOARD, "--out", "@x.cdcap"], "PORT: missing"),
    (["loop://", "--board", BOARD, "--out", "@x.cdcap", "--actuations", "two"], "--actuations"),
    (["loop://", "--board", BOARD, "--out", "@x.cdcap", "--actuations", "0"], "--actuations"),
    (["loop://", "--board", BOARD, "--out", "@x.cdcap", "--baud", "fast"], "--baud"),
    (["loop://", "--board", BOARD, "--out", "@x.cdcap", "--duration", "3 A"], "--duration"),
    (["--replay", "@missing.bin", "--board", BOARD, "--out", "@x.cdcap"], "file not found"),
    (["--replay", "@missing.bin", "--board", BOARD, "--out", "@x.cdcap", "--duration", "1"], "--duration"),
    (["/dev/no-such-tty", "--board", BOARD, "--out", "@x.cdcap"], "cannot open the port"),
    (["loop://", "--drive", "@missing.toml", "--out", "@x.cdcap"], "missing.toml"),
    (["--replay", "@missing.bin", "--board", BOARD, "--out", "@x.cdcap", "--raw", "@r.bin"], "--raw"),
    (["loop://", "--board", BOARD, "--out", "@x.cdcap", "--raw", "@x.cdcap"], "--raw"),
    (["loop://", "--board", BOARD, "--out", "@x.cdcap", "--raw", "@no/such/r.bin"], "does not exist"),
])
def test_bad_input_is_one_line_exit_2(args, message, tmp_path):
    args = [str(tmp_path / a[1:]) if a.startswith("@") else a for a in args]
    r = runner.invoke(app, ["capture", *args])
    assert r.exit_code == 2, r.output
    assert len(r.output.strip().splitlines()) == 1 and message in r.output, r.output
    assert not (tmp_path / "x.cdcap").exists()      # nothing written on bad input


@pytest.mark.slow
def test_bad_input_as_a_subprocess():
    r = run_cli("capture", "loop://", "--board", "no-such-board", "--out", "x.cdcap")
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "Traceback" not in r.stderr and not (ROOT / "x.cdcap").exists()


def test_operating_point_from_the_device_events_or_the_options(tmp_path):
    from coildrive.bench.messages import Event
    from coildrive.config import load_board, resolve_board
    brd = load_board(resolve_board(BOARD))
    enc = FrameEncoder()
    raw = b"\x00" + b"".join(enc.encode(m) for m in (
        Event(EventKind.SUPPLY, 0, 2000), Event(EventKind.TEMPERATURE, 0, 41500), Samples(0, np.arange(10)),
        Event(EventKind.SUPPLY, 10, 2010), Event(EventKind.TEMPERATURE, 10, 42500), Samples(10, np.arange(10)),
        Event(EventKind.SUPPLY, 20, 2002)))
    (tmp_path / "raw.bin").write_bytes(raw)
    r = runner.invoke(app, ["capture", "--replay", str(tmp_path / "raw.bin"), "--board", BOARD,
                            "--out", str(tmp_path / "a.cdcap")])
    assert r.exit_code == 0, r.output
    meta = read_capture(tmp_path / "a.cdcap").meta
    # median code 2002, read as the middle of its step (the ADC truncates), through the
    # board's ADC step and supply divider; temperature events are milli-degC
    volts = (2002 + 0.5) * brd.adc.reference / 2**brd.adc.bits * brd.supply_sense.divider
    assert meta.supply_v == pytest.approx(volts, rel=1e-12) and meta.coil_temp_c == 42.0, meta
    r = runner.invoke(app, ["capture", "--replay", str(tmp_path / "raw.bin"), "--board", BOARD,
                            "--out", str(tmp_path / "b.cdcap"), "--supply", "23.5 V", "--coil-temp", "30"])
    assert r.exit_code == 0, r.output
    meta = read_capture(tmp_path / "b.cdcap").meta
    assert (meta.supply_v, meta.coil_temp_c) == (23.5, 30.0)      # the options win
