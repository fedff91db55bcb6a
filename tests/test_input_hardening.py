"""Whatever the input: one line and exit 2, never a traceback, a hang or a lost file.

Each test starts from an example of issue 12 (a damaged file, an absurd value, a full
disk, a busy port) and checks what a user sees: the exit code, the one error line on
stderr (naming the file and the key, byte offset or line), the ``--json`` error document
on stdout, and that an existing output is byte for byte as it was.
"""

from __future__ import annotations

import errno
import json
import os
import pty
import re
import shutil
import signal
import stat
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pytest
import typer
from typer.testing import CliRunner

from conftest import BOARDS, EXAMPLES, ROOT, run_cli
from coildrive.bench import capture_file
from coildrive.bench.capture_file import RECORD, count_records, read_capture, write_capture
from coildrive.bench.link import DeviceLink, LinkError
from coildrive.bench.messages import Info, Samples
from coildrive.bench.protocol import FrameEncoder
from coildrive.bench.synth import synth_design_capture
from coildrive.cli import app
from coildrive.config import BOUNDS, bounds_text, load_drive
from coildrive.design import design
from coildrive.errors import InputError

DEMO = EXAMPLES / "demo-valve.toml"
BOARD = "lab-m32-zener"
runner = CliRunner()


def _variant(tmp_path: Path, old: str, new: str, name: str = "drive.toml",
             board_old: str | None = None, board_new: str | None = None) -> Path:
    """The demo drive with ``old`` replaced by ``new`` (and its board, copied beside it,
    with ``board_old`` replaced by ``board_new``)."""
    text = DEMO.read_text()
    assert old in text, old
    text = text.replace(old, new)
    if board_old is not None:
        board = (BOARDS / f"{BOARD}.toml").read_text()
        assert board_old in board, board_old
        (tmp_path / "board.toml").write_text(board.replace(board_old, board_new))
        text = text.replace(f'board = "{BOARD}"', 'board = "board.toml"')
    path = tmp_path / name
    path.write_text(text)
    return path


def _one_line(stderr: str) -> str:
    lines = [ln for ln in stderr.strip().splitlines() if ln]
    assert len(lines) == 1, stderr
    assert "Traceback" not in stderr
    assert lines[0].startswith("coildrive: "), lines[0]
    return lines[0]


def _strict_json(text: str):
    """Parse JSON that must not hold NaN or Infinity (RFC 8259 has neither)."""
    def no_constant(name):
        raise AssertionError(f"{name} in a JSON document")
    return json.loads(text, parse_constant=no_constant)


# ----------------------------------------------------------------------------- 1. bounds
# issue 12 "config values that parse but cannot be designed" and "outputs that contradict
# themselves": each is refused by the accepted range of its key (docs/file-formats.md)
BOUND_CASES = [
    ('min = "-10 degC"', "min = -1" + "0" * 400, None, None, "ambient.min", "too large a number"),
    ("margin = 1.5", "margin = 1e6", None, None, "pull_in.margin", "outside 1 .. 10"),
    ('frequency = "25 kHz"', "frequency = 1e300", None, None, "hold.frequency", "outside 1 Hz .. 5 MHz"),
    ('inductance = "60 mH"', 'inductance = "1000 H"', None, None, "coil.inductance", "outside 1 µH .. 100 H"),
    ("margin = 1.5", "margin = 1.5", 'rate = "10 kHz"', 'rate = "1 mHz"', "tick.rate", "outside 1 Hz .. 10 MHz"),
    ("margin = 1.5", "margin = 1.5", 'sample_rate = "200 kHz"', 'sample_rate = "5 GHz"', "adc.sample_rate",
     "outside 1 Hz .. 10 MHz"),
    ("margin = 1.5", "margin = 1.5", 'diode_drop = "0.9 V"', "diode_drop = 1e300", "freewheel.diode_drop",
     "outside 0 V .. 10 V"),
]


@pytest.mark.parametrize("old, new, bold, bnew, key, fragment", BOUND_CASES, ids=[c[4] for c in BOUND_CASES])
def test_out_of_range_values_are_one_line_and_a_json_error(tmp_path, old, new, bold, bnew, key, fragment):
    drive = _variant(tmp_path, old, new, board_old=bold, board_new=bnew)
    header = tmp_path / "out.h"
    header.write_bytes(b"/* an existing header */\n")
    r = runner.invoke(app, ["design", str(drive), "--json", "--header", str(header)])
    assert r.exit_code == 2, r.output
    doc = _strict_json(r.stdout)
    assert doc["exit_code"] == 2 and f"{key}: " in doc["error"] and fragment in doc["error"], doc
    line = _one_line(r.stderr)
    assert f"{key}: " in line and fragment in line, line
    assert header.read_bytes() == b"/* an existing header */\n"


def test_nested_arrays_are_one_line_and_design_json_prints_json(tmp_path):
    drive = _variant(tmp_path, "margin = 1.5", "margin = " + "[" * 600 + "1" + "]" * 600)
    r = run_cli("design", str(drive), "--json")
    assert r.returncode == 2
    assert "nests arrays or tables too deeply" in _one_line(r.stderr)
    assert _strict_json(r.stdout)["exit_code"] == 2


def test_a_tenth_milliohm_sense_resistor_is_in_range():
    # high-current shunts are 50..100 uOhm (common practice): the file accepts 0.1 mOhm;
    # whether the ADC thresholds still differ is the design's check, not the file's
    low, high, dim = BOUNDS["sense.resistance"]
    assert low <= 1e-4 <= high and dim == "resistance"


def test_the_bounds_table_in_the_docs_is_the_code_s():
    doc = (ROOT / "docs" / "file-formats.md").read_text()
    rows = dict(re.findall(r"^\| `([a-z_]+\.[a-z_]+)` \| (.+?) \|$", doc, re.M))
    assert rows == {key: bounds_text(key) for key in BOUNDS}
    assert "`[thermal]`" in doc and "`[release]` are required" in doc


def test_every_quantity_of_the_bundled_files_is_in_range():
    for path in EXAMPLES.glob("*.toml"):
        load_drive(path)            # raises on any value outside its range


def test_every_range_holds_its_key_s_typical_value():
    # a sanity check on the table itself: typical values of the trade (common practice)
    typical = {"coil.inductance": 0.06, "hold.frequency": 25e3, "tick.rate": 1e3, "adc.sample_rate": 200e3,
               "sense.resistance": 0.1, "freewheel.diode_drop": 0.9, "pull_in.margin": 1.5,
               "thermal.max_coil_temp": 155.0, "ambient.min": -40.0, "timer.clock": 72e6}
    for key, value in typical.items():
        low, high, _ = BOUNDS[key]
        assert low <= value <= high, key


# ----------------------------------------------------------------------------- 2. captures
@pytest.fixture(scope="module")
def demo_design():
    return design(load_drive(DEMO))


@pytest.fixture
def good_capture(tmp_path, demo_design):
    path = tmp_path / "good.cdcap"
    write_capture(path, synth_design_capture(demo_design, actuations=2, seed=3, noise_codes=1.0))
    return path


def _header(path: Path, **changes) -> Path:
    data = path.read_bytes()
    doc = json.loads(data[:capture_file.HEADER_SIZE])
    doc.update(changes)
    text = json.dumps(doc).encode()
    path.write_bytes(text.ljust(capture_file.HEADER_SIZE - 1) + b"\n" + data[capture_file.HEADER_SIZE:])
    return path


@pytest.mark.parametrize("field, value, fragment", [
    ("coil_temp_c", "hot", "header coil_temp_c: 'hot' is not a number"),
    ("hold_duty", "x", "header hold_duty: 'x' is not a number"),
    ("extra", "not key=value", "header extra: 'not key=value' is not a JSON object"),
    ("sample_rate_hz", 1e300, "header sample_rate_hz: 1e+300 is outside"),
    ("sample_rate_hz", 1e-300, "header sample_rate_hz: 1e-300 is outside"),
    ("adc_bits", True, "header adc_bits: True is not an integer"),
    ("board", 7, "header board: 7 is not a string"),
])
@pytest.mark.parametrize("command", ["check", "fit"])
def test_header_fields_of_the_wrong_type_or_range(good_capture, field, value, fragment, command):
    _header(good_capture, **{field: value})
    args = [command, str(good_capture), str(DEMO), "--json"] if command == "check" else \
        [command, str(good_capture), "--json"]
    r = runner.invoke(app, args)
    assert r.exit_code == 2, r.output
    line = _one_line(r.stderr)
    assert line.startswith(f"coildrive: {good_capture}: ") and fragment in line, line
    assert _strict_json(r.stdout)["exit_code"] == 2


def _records(path: Path) -> np.ndarray:
    return np.frombuffer(path.read_bytes()[capture_file.HEADER_SIZE:], RECORD).copy()


def _with_records(path: Path, rec: np.ndarray) -> Path:
    path.write_bytes(path.read_bytes()[:capture_file.HEADER_SIZE] + rec.tobytes())
    return path


def test_a_hundred_flipped_record_bytes_are_one_line_naming_a_byte_offset(good_capture):
    # issue 12: 100 flipped record bytes made `check --json` ask numpy for 4.9 GiB
    data = bytearray(good_capture.read_bytes())
    rng = np.random.default_rng(4)
    for p in rng.integers(capture_file.HEADER_SIZE, len(data), 100):
        data[p] = int(rng.integers(256))
    good_capture.write_bytes(bytes(data))
    t0 = time.monotonic()
    r = runner.invoke(app, ["check", str(good_capture), str(DEMO), "--json"])
    assert time.monotonic() - t0 < 10
    assert r.exit_code == 2, r.output
    assert re.search(r": byte \d+: ", _one_line(r.stderr)), r.stderr


def test_a_2_to_the_30_sample_index_jump_is_refused_before_allocating(good_capture):
    rec = _records(good_capture)
    samples = np.flatnonzero(rec["kind"] == 1)
    k = int(samples[3000])
    rec["index"][k:] = (rec["index"][k:].astype(np.int64) + (1 << 30)) % (1 << 32)
    _with_records(good_capture, rec)
    with pytest.raises(InputError) as err:
        read_capture(good_capture)
    offset = capture_file.HEADER_SIZE + k * capture_file.RECORD_SIZE
    assert f"byte {offset}: the sample index jumps" in str(err.value)
    assert "1,073,741,824 indices" in str(err.value)


def test_jumps_that_lost_frames_explain_are_read(good_capture):
    # the same jump with the lost frames that explain it (a GAP record) is a good capture
    cap = read_capture(good_capture)
    cut = 3000
    jump = 20 * 510            # 20 frames of MAX_SAMPLES_PER_FRAME lost
    index = cap.index.copy()
    index[cut:] += jump
    moved = [capture_file.CaptureEvent(e.index + (jump if e.index >= cap.index[cut] else 0), e.kind, e.value)
             for e in cap.events]
    lost = capture_file.Capture(index, cap.code, tuple(moved), (capture_file.Gap(int(index[cut]), 20),),
                                cap.meta)
    write_capture(good_capture, lost)
    back = read_capture(good_capture)
    assert back.lost_frames == 20 and back.samples_missing == jump


def test_repeated_bytes_in_the_middle_end_quickly(good_capture):
    # issue 12: a few hundred bytes repeated in the middle made `check` run past 6 s
    data = good_capture.read_bytes()
    p = capture_file.HEADER_SIZE + 20_001
    good_capture.write_bytes(data[:p] + data[p:p + 300] * 3 + data[p:])
    t0 = time.monotonic()
    r = runner.invoke(app, ["check", str(good_capture), str(DEMO)])
    assert time.monotonic() - t0 < 10
    assert r.exit_code == 2 and re.search(r": byte \d+: ", _one_line(r.stderr)), r.output


def test_a_partial_last_record_is_still_dropped_and_the_rest_read(good_capture):
    n = len(read_capture(good_capture))
    with open(good_capture, "ab") as handle:
        handle.write(b"\x01\x00\x10")
    cap = read_capture(good_capture)
    assert len(cap) == n and cap.truncated_bytes == 3
    assert count_records(good_capture)[0] == n


def _text_capture(path: Path, info: str) -> Path:
    lines = [info] + [f"{i},{100 + i % 50}" for i in range(2000)]
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.mark.parametrize("command", ["check", "fit"])
def test_a_text_capture_with_rate_1_over_0_is_one_line(tmp_path, command):
    path = _text_capture(tmp_path / "t.txt", "info,1/0,12,0.0004,0,fw")
    args = [command, str(path), str(DEMO)] if command == "check" else \
        [command, str(path), "--board", BOARD, "--supply", "24"]
    r = runner.invoke(app, args)
    assert r.exit_code == 2, r.output
    assert f"{path}: line 1: 'info,1/0,12,0.0004,0,fw' is not an info line" in _one_line(r.stderr)


def test_replaying_a_text_stream_with_rate_1_over_0_counts_the_line_malformed(tmp_path):
    # the link decoder never raises on its input: the line is counted and skipped, and
    # the capture takes its rate from the board
    path = _text_capture(tmp_path / "t.txt", "info,1/0,12,0.0004,0,fw")
    out = tmp_path / "r.cdcap"
    r = runner.invoke(app, ["capture", "--replay", str(path), "--text", "--board", BOARD, "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert "1 malformed" in r.stderr
    assert read_capture(out).meta.sample_rate_hz == 200e3


# ----------------------------------------------------------------------------- 3. files
def _raw_stream(demo_design, actuations: int = 2) -> bytes:
    cap = synth_design_capture(demo_design, actuations=actuations, seed=3, noise_codes=1.0)
    enc = FrameEncoder()
    frames = [b"\x00", enc.encode(Info(int(cap.meta.sample_rate_hz), 1, cap.meta.adc_bits,
                                       cap.meta.amps_per_code, 0, "test"))]
    for a in range(0, len(cap), 64):
        frames.append(enc.encode(Samples(int(cap.index[a]), cap.code[a:a + 64].copy())))
    return b"".join(frames)


def test_an_existing_capture_is_never_overwritten_without_overwrite(tmp_path, good_capture, demo_design):
    raw = tmp_path / "raw.bin"
    raw.write_bytes(_raw_stream(demo_design))
    before = good_capture.read_bytes()
    r = runner.invoke(app, ["capture", "--replay", str(raw), "--board", BOARD, "--out", str(good_capture)])
    assert r.exit_code == 2 and "exists: give another name, or --overwrite" in _one_line(r.stderr)
    assert good_capture.read_bytes() == before
    r = runner.invoke(app, ["capture", "--replay", str(raw), "--board", BOARD, "--out", str(good_capture),
                            "--overwrite"])
    assert r.exit_code == 0, r.output
    assert good_capture.read_bytes() != before and len(read_capture(good_capture)) > 0


@pytest.mark.parametrize("overwrite", [False, True])
def test_text_read_as_binary_leaves_keep_cdcap_untouched(tmp_path, good_capture, overwrite):
    # issue 12: `capture --replay BYTES --out keep.cdcap` with a text-mode stream read as
    # binary exited 1 and left keep.cdcap changed
    keep = tmp_path / "keep.cdcap"
    shutil.copy(good_capture, keep)
    before = keep.read_bytes()
    text = _text_capture(tmp_path / "stream.txt", "info,200000,12,0.0004,0,fw")
    args = ["capture", "--replay", str(text), "--board", BOARD, "--out", str(keep)]
    r = runner.invoke(app, args + (["--overwrite"] if overwrite else []))
    assert r.exit_code == 2
    assert keep.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["good.cdcap", "keep.cdcap", "stream.txt"]


class _FullDisk:
    """A file whose writes fail with ENOSPC after ``room`` bytes (a disk filling up)."""

    def __init__(self, real, room: int):
        self._real, self._room = real, room

    def write(self, data):
        if len(data) > self._room:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        self._room -= len(data)
        return self._real.write(data)

    def __getattr__(self, name):
        return getattr(self._real, name)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._real.close()


def _full_disk_after(monkeypatch, room: int) -> None:
    import builtins

    def opener(path, mode="r", *args, **kwargs):
        handle = builtins.open(path, mode, *args, **kwargs)
        return _FullDisk(handle, room) if "w" in mode else handle
    monkeypatch.setattr(capture_file, "open", opener, raising=False)


def test_replay_on_a_full_disk_is_one_line_and_keeps_the_old_file(tmp_path, monkeypatch, good_capture,
                                                                   demo_design):
    raw = tmp_path / "raw.bin"
    raw.write_bytes(_raw_stream(demo_design))
    before = good_capture.read_bytes()
    _full_disk_after(monkeypatch, 20_000)
    r = runner.invoke(app, ["capture", "--replay", str(raw), "--board", BOARD, "--out", str(good_capture),
                            "--overwrite"])
    assert r.exit_code == 2, r.output
    assert "No space left on device" in _one_line(r.stderr) and str(good_capture) in r.stderr
    assert good_capture.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["good.cdcap", "raw.bin"]


def test_a_disk_already_full_leaves_no_empty_capture(tmp_path, monkeypatch):
    # issue 12: a disk already full left a 0-byte .cdcap
    _full_disk_after(monkeypatch, 0)
    out = tmp_path / "live.cdcap"
    with pytest.raises(OSError) as err:
        DeviceLink("loop://", baud=115200, capture=out, meta={"sample_rate_hz": 1000.0})
    assert "No space left on device" in str(err.value)
    assert list(tmp_path.iterdir()) == []


def _big_raw(tmp_path: Path, demo_design) -> Path:
    raw = tmp_path / "big.bin"
    one = _raw_stream(demo_design, actuations=4)
    raw.write_bytes(one * 60)
    return raw


@pytest.mark.slow
def test_a_killed_replay_leaves_no_temporary_file(tmp_path, demo_design):
    raw = _big_raw(tmp_path, demo_design)
    out = tmp_path / "out.cdcap"
    cmd = [sys.executable, "-m", "coildrive", "capture", "--replay", str(raw), "--board", BOARD,
           "--out", str(out)]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    for how in (signal.SIGTERM, signal.SIGKILL):
        proc = subprocess.Popen(cmd, cwd=tmp_path, env=env, stderr=subprocess.PIPE, text=True)
        deadline = time.monotonic() + 30
        while not any(p.name.endswith(".tmp") for p in tmp_path.iterdir()):
            assert proc.poll() is None and time.monotonic() < deadline, "the replay ended before it was killed"
            time.sleep(0.01)
        proc.send_signal(how)
        _, err = proc.communicate(timeout=30)
        rc = proc.returncode
        assert "Traceback" not in err, err
        left = sorted(p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp"))
        if how == signal.SIGTERM:
            assert rc == 128 + signal.SIGTERM and left == [] and not out.exists(), (rc, left)
        else:
            # kill -9 cannot be caught: the temporary file names its dead process, and the
            # next run on the same output removes it
            assert len(left) == 1 and left[0].startswith(f".out.cdcap.{proc.pid}.")
    r = subprocess.run(cmd + ["--actuations", "1"], cwd=tmp_path, env=env, capture_output=True, text=True,
                       timeout=60)
    assert r.returncode == 0, r.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["big.bin", "out.cdcap"]


def test_the_csv_error_does_not_hide_the_capture_s(tmp_path, demo_design):
    raw = tmp_path / "raw.bin"
    raw.write_bytes(_raw_stream(demo_design))
    csv = tmp_path / "old.csv"
    csv.write_text("an old CSV\n")
    r = runner.invoke(app, ["capture", "--replay", str(raw), "--board", BOARD, "--out", str(tmp_path / "o.cdcap"),
                            "--csv", str(csv)])
    # the CSV exists: refused before anything is written
    assert r.exit_code == 2 and "--csv" in _one_line(r.stderr)
    assert csv.read_text() == "an old CSV\n" and not (tmp_path / "o.cdcap").exists()


def test_the_capture_line_comes_before_a_failing_csv(tmp_path, demo_design, monkeypatch):
    from coildrive.cli import capture_cmd
    from coildrive.errors import OutputError

    raw = tmp_path / "raw.bin"
    raw.write_bytes(_raw_stream(demo_design))

    def full(out, csv, overwrite):
        raise OutputError(str(csv), "cannot be written (No space left on device)")
    monkeypatch.setattr(capture_cmd, "_export_csv", full)
    r = runner.invoke(app, ["capture", "--replay", str(raw), "--board", BOARD, "--out", str(tmp_path / "o.cdcap"),
                            "--csv", str(tmp_path / "o.csv")])
    lines = r.stderr.strip().splitlines()
    assert r.exit_code == 2 and len(lines) == 2, r.stderr
    assert lines[0].startswith("replayed ") and "o.cdcap" in lines[0]
    assert lines[1] == f"coildrive: {tmp_path / 'o.csv'}: cannot be written (No space left on device)"
    assert len(read_capture(tmp_path / "o.cdcap")) > 0


def test_the_live_summary_counts_what_is_on_disk(tmp_path, monkeypatch, demo_design):
    # issue 12: "kept 27,750 samples" while the file held 25,059: a disk that fills up
    # during the capture keeps less than the link decoded
    import threading
    import tty

    master, slave = pty.openpty()
    tty.setraw(slave)
    stream = _raw_stream(demo_design)

    def device():   # streams, then the cable is pulled
        view = memoryview(stream)
        while view:
            view = view[os.write(master, view[:4096]):]
        time.sleep(0.5)
        os.close(master)
    _full_disk_after(monkeypatch, 40_000)
    out = tmp_path / "live.cdcap"
    feeder = threading.Thread(target=device, daemon=True)
    feeder.start()
    try:
        r = runner.invoke(app, ["capture", os.ttyname(slave), "--board", BOARD, "--out", str(out)])
    finally:
        feeder.join(10)
        os.close(slave)
    assert r.exit_code == 1, r.output
    samples, events = count_records(out)
    assert f"kept {samples:,} samples, {events:,} events, " in r.stderr and str(out) in r.stderr, r.stderr
    assert samples * capture_file.RECORD_SIZE < 40_000


def test_a_second_capture_on_a_busy_port_says_it_is_busy(tmp_path):
    master, slave = pty.openpty()
    name = os.ttyname(slave)
    try:
        with DeviceLink(name, baud=115200):
            with pytest.raises(LinkError) as err:
                DeviceLink(name, baud=115200)
            assert "the port is busy" in str(err.value)
            r = runner.invoke(app, ["capture", name, "--board", BOARD, "--out", str(tmp_path / "second.cdcap")])
            assert r.exit_code == 2 and "the port is busy" in _one_line(r.stderr), r.output
            assert not (tmp_path / "second.cdcap").exists()
    finally:
        os.close(master)
        os.close(slave)


# ----------------------------------------------------------------------------- 4. the CLI
def test_a_fifo_as_the_drive_file_is_refused_at_once(tmp_path):
    fifo = tmp_path / "drive.toml"
    os.mkfifo(fifo)
    r = run_cli("design", str(fifo), timeout=20)
    assert r.returncode == 2
    assert f"{fifo}: is a FIFO (named pipe), expected a drive or board file (TOML)" in _one_line(r.stderr)


def test_an_unreadable_drive_file_is_one_line_not_a_usage_box(tmp_path):
    drive = tmp_path / "drive.toml"
    shutil.copy(DEMO, drive)
    drive.chmod(0)
    cmd = [sys.executable, "-m", "coildrive", "design", str(drive)]
    if os.geteuid() == 0:       # root reads anything: run as nobody where that works
        setpriv = shutil.which("setpriv")
        if setpriv is None:
            pytest.skip("running as root without setpriv: cannot make a file unreadable")
        tmp_path.chmod(0o755)
        cmd = [setpriv, "--reuid=nobody", "--regid=nogroup", "--clear-groups", *cmd]
    r = subprocess.run(cmd, capture_output=True, text=True, timeout=60, cwd="/",
                       env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert r.returncode == 2
    assert _one_line(r.stderr) == f"coildrive: {drive}: cannot be read (Permission denied)"


def test_runtime_warnings_do_not_come_before_the_error_line():
    from coildrive.cli.common import user_errors

    probe = typer.Typer()

    @probe.command()
    @user_errors
    def overflow() -> None:
        np.exp(np.float64(1e4))          # numpy warns: overflow encountered in exp
        raise InputError("x.toml", "coil.inductance", "stand-in for the error after it")
    with warnings.catch_warnings():
        warnings.simplefilter("default")
        r = runner.invoke(probe, [])
    assert r.exit_code == 2
    assert r.stderr == "coildrive: x.toml: coil.inductance: stand-in for the error after it\n"


def test_emulate_seed_minus_one_is_reported_against_seed():
    r = runner.invoke(app, ["emulate", str(DEMO), "--seed", "-1", "--duration", "0.1"])
    assert r.exit_code == 2
    assert _one_line(r.stderr).startswith("coildrive: --seed: -1 is not a whole number")


def test_emulate_period_of_a_nanosecond_is_refused():
    r = runner.invoke(app, ["emulate", str(DEMO), "--period", "1 ns", "--duration", "0.5"])
    assert r.exit_code == 2 and "--period: 1e-09 s is below 1 ms" in _one_line(r.stderr)


@pytest.mark.slow
def test_emulate_at_the_shortest_period_stops_at_once_on_sigterm():
    proc = subprocess.Popen([sys.executable, "-m", "coildrive", "emulate", str(DEMO), "--period", "1 ms"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT,
                            env={**os.environ, "PYTHONPATH": str(ROOT)})
    try:
        assert proc.stdout.readline().startswith("/dev/")
        time.sleep(0.5)
        t0 = time.monotonic()
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=10)
        assert time.monotonic() - t0 < 2.0, "took more than 2 s to stop"
        assert proc.returncode == 0 and err.rstrip().endswith("stopped"), err[-500:]
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()


# ----------------------------------------------------------------------------- 5. --json
@pytest.mark.parametrize("args", [
    ["design", "{bad}", "--json"],
    ["demo", "--json", "--header", "{tmp}/missing/x.h"],
    ["tune", "{bad}", "--json"],
    ["check", "{tmp}/none.cdcap", str(DEMO), "--json"],
    ["fit", "{tmp}/none.cdcap", "--json"],
    ["design", "--json", "--no-such-option", str(DEMO)],
], ids=["design", "demo", "tune", "check", "fit", "usage"])
def test_json_always_prints_one_document(tmp_path, args):
    bad = _variant(tmp_path, 'inductance = "60 mH"', 'inductance = "1000 H"')
    argv = [a.format(bad=bad, tmp=tmp_path) for a in args]
    r = run_cli(*argv, cwd=tmp_path)
    assert r.returncode == 2, r.stderr
    doc = _strict_json(r.stdout)
    assert set(doc) == {"error", "exit_code"} and doc["exit_code"] == 2
    assert doc["error"] in r.stderr


def test_json_of_a_failing_design_holds_no_nan(tmp_path):
    # a coil that can never reach its pull-in current: the figures that do not exist are
    # null with a reason, never NaN or Infinity
    drive = _variant(tmp_path, 'current = "0.55 A"', 'current = "5 A"')
    r = runner.invoke(app, ["design", str(drive), "--json"])
    assert r.exit_code == 1, r.output
    doc = _strict_json(r.stdout)
    assert any(not c["ok"] for c in doc["checks"])


@pytest.mark.parametrize("args, output", [
    (["simulate", str(DEMO), "--supply", "24", "--coil-temp", "20", "--csv", "{out}"], "w.csv"),
    (["design", str(DEMO), "--header", "{out}", "--json"], "x.h"),
])
def test_a_full_disk_is_one_line_and_the_old_output_stays(tmp_path, monkeypatch, args, output):
    # issue 12: on a full disk `simulate --csv` (and `check --plot`) gave OSError tracebacks
    import builtins

    from coildrive import fileio

    def opener(path, mode="r", *a, **kw):
        handle = builtins.open(path, mode, *a, **kw)
        return _FullDisk(handle, 100) if "w" in mode else handle
    monkeypatch.setattr(fileio, "open", opener, raising=False)
    out = tmp_path / output
    out.write_bytes(b"the old output\n")
    r = runner.invoke(app, [a.format(out=out) for a in args])
    assert r.exit_code == 2, r.output
    assert _one_line(r.stderr) == f"coildrive: {out}: cannot be written (No space left on device)"
    assert out.read_bytes() == b"the old output\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == [output]
    if "--json" in args:
        assert _strict_json(r.stdout)["exit_code"] == 2
