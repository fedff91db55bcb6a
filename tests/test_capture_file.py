"""The capture file: round trip, a killed writer, the numpy-only reader of the docs, text mode."""

from __future__ import annotations

import doctest
import json
import os
import re
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from conftest import ROOT
from coildrive.bench import capture_file
from coildrive.bench.capture_file import (HEADER_SIZE, RECORD_SIZE, Capture, CaptureEvent,
                                          CaptureWriter, Gap, read_capture, write_capture)
from coildrive.bench.messages import EventKind, Info, Samples
from coildrive.errors import InputError

DOC = (ROOT / "docs" / "capture-format.md").read_text()


def _wait_until(condition, timeout: float) -> bool:
    """Poll ``condition`` until it holds or ``timeout`` s pass (a condition wait, not a delay)."""
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            return False
        time.sleep(0.002)
    return True


def _sample_records(path) -> int:
    size = os.path.getsize(path)
    return max(size - HEADER_SIZE, 0) // RECORD_SIZE


def _capture() -> Capture:
    rng = np.random.default_rng(4)
    codes = rng.integers(0, 4096, 3000)
    index = np.r_[np.arange(1000), np.arange(1200, 3200)]      # 200 samples lost
    events = (CaptureEvent(10, EventKind.ON), CaptureEvent(500, EventKind.PEAK_END),
              CaptureEvent(600, EventKind.SWITCH, 1), CaptureEvent(700, EventKind.TEMPERATURE, -12500),
              CaptureEvent(1300, EventKind.OVERRUN, 70000), CaptureEvent(3100, EventKind.OFF))
    return Capture.from_codes(codes, index=index, events=events, gaps=(Gap(1200, 3),),
                              sample_rate_hz=200e3, adc_bits=12, amps_per_code=4e-4,
                              sense_position="coil", board="lab-m32-zener", supply_v=24.0,
                              coil_temp_c=21.5, extra={"operator": "bench 3"})


def test_module_doctest():
    assert doctest.testmod(capture_file).failed == 0


def test_round_trip(tmp_path):
    cap = _capture()
    path = tmp_path / "run.cdcap"
    write_capture(path, cap)
    back = read_capture(path)
    assert np.array_equal(back.index, cap.index), "sample indices survive, gaps included"
    assert np.array_equal(back.code, cap.code)
    assert back.events == cap.events, "events with 16- and 32-bit (signed) values survive"
    assert back.gaps == cap.gaps
    assert back.meta == cap.meta
    assert back.samples_missing == 200 and back.lost_frames == 3
    assert back.truncated_bytes == 0 and back.restarts == 0
    assert os.path.getsize(path) % RECORD_SIZE == 0 and os.path.getsize(path) > HEADER_SIZE


def test_writer_api_and_header_rewrite(tmp_path):
    path = tmp_path / "w.cdcap"
    with CaptureWriter(path, flush_interval=None, board="tiny-8bit-diode") as w:
        w.append_event(0, EventKind.ON)
        w.append_samples(0, [1, 2, 3])
        w.flush()
        assert json.loads(path.read_bytes()[:HEADER_SIZE])["sample_rate_hz"] is None
        w.update_header(sample_rate_hz=15e3, adc_bits=10, amps_per_code=0.00977)
        w.append_message(Samples(3, np.array([4, 5], np.uint16)))
        w.append_message(Info(15000, 1, 10, None, 0, "fw 2.1", True))
        w.append_gap(5, 2)
        w.append_errors(5, crc=70000, malformed=1)
        w.append_samples(9, [9])
    data = path.read_bytes()
    assert data.startswith(b'{"format": "coildrive-capture"') and data[HEADER_SIZE - 1:HEADER_SIZE] == b"\n"
    cap = read_capture(path)
    assert cap.code.tolist() == [1, 2, 3, 4, 5, 9] and cap.index.tolist() == [0, 1, 2, 3, 4, 9]
    assert cap.meta.sample_rate_hz == 15e3 and cap.meta.firmware_id == "fw 2.1"
    assert cap.meta.board == "tiny-8bit-diode" and cap.meta.has_position_switch
    assert cap.crc_errors == 70000 and cap.malformed_frames == 1, "counts above 65535 split over records"
    assert cap.lost_frames == 2 and cap.samples_missing == 4
    with pytest.raises(TypeError):
        CaptureWriter(tmp_path / "x.cdcap", colour="red")


def test_truncated_mid_record_is_readable(tmp_path):
    """A writer killed in the middle of a record: the partial record is dropped."""
    path = tmp_path / "cut.cdcap"
    write_capture(path, Capture.from_codes(np.arange(100), sample_rate_hz=1e3, amps_per_code=1e-3))
    data = path.read_bytes()
    path.write_bytes(data[:HEADER_SIZE + 37 * RECORD_SIZE + 3])
    cap = read_capture(path)
    assert cap.code.tolist() == list(range(37))
    assert cap.truncated_bytes == 3


def test_background_flush_without_flush_calls(tmp_path):
    path = tmp_path / "live.cdcap"
    w = CaptureWriter(path, flush_interval=0.05, sample_rate_hz=1e3)
    try:
        w.append_samples(0, np.arange(500))
        # the writer's own thread must put the records in the file (no flush() here)
        assert _wait_until(lambda: _sample_records(path) >= 500, timeout=5.0)
    finally:
        w.close()
    assert read_capture(path).code.size == 500


CHILD = r"""
import sys
import numpy as np
sys.path.insert(0, {root!r})
from coildrive.bench.capture_file import CaptureWriter
w = CaptureWriter({path!r}, sample_rate_hz=1e5, adc_bits=12, amps_per_code=1e-3)
w.append_samples(0, np.arange(2000) % 4096)
print("ready", flush=True)
k = 2000
while True:                      # write until killed; never flush by hand
    w.append_samples(k, (np.arange(k, k + 100) % 4096))
    k += 100
"""


def test_sigkill_of_a_running_writer_leaves_a_readable_file(tmp_path):
    path = tmp_path / "killed.cdcap"
    with subprocess.Popen([sys.executable, "-c", CHILD.format(root=str(ROOT), path=str(path))],
                          stdout=subprocess.PIPE, text=True) as proc:
        try:
            assert proc.stdout.readline().strip() == "ready"
            # the data appended before "ready" reaches the file by the background flush alone
            assert _wait_until(lambda: _sample_records(path) >= 3000, timeout=10.0)
        finally:
            proc.send_signal(signal.SIGKILL)
            proc.wait(timeout=10)
    assert proc.returncode == -signal.SIGKILL
    cap = read_capture(path)
    assert cap.code.size >= 3000
    assert np.array_equal(cap.index, np.arange(cap.code.size)), "whole records, no gaps, no garbage"
    assert np.array_equal(cap.code, cap.index % 4096)
    assert cap.meta.sample_rate_hz == 1e5


def _python_blocks(section: str) -> list[str]:
    part = DOC.split(section, 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```python\n(.+?)\n```", part, re.S)


def test_numpy_only_reader_of_the_docs(tmp_path, monkeypatch):
    (snippet,) = _python_blocks("## Reading it with numpy alone")
    assert "coildrive" not in snippet, "the documented reader needs numpy only"
    cap = _capture()
    write_capture(tmp_path / "run.cdcap", cap)
    monkeypatch.chdir(tmp_path)
    scope: dict = {}
    exec(compile(snippet, "docs/capture-format.md", "exec"), scope)
    assert np.allclose(scope["time_s"], cap.time)
    assert np.allclose(scope["current_a"], cap.current)
    assert np.allclose(scope["switch_on_s"], [10 / 200e3])


def test_python_example_of_the_docs(tmp_path, monkeypatch, capsys):
    (snippet,) = _python_blocks("## From Python")
    monkeypatch.chdir(tmp_path)
    exec(compile(snippet, "docs/capture-format.md", "exec"), {})
    out = capsys.readouterr().out
    assert out.splitlines()[0] == "index,time_s,adc_code,current_a,event"
    assert out.splitlines()[1].startswith("0,0,3,") and out.splitlines()[1].endswith(",on")


def test_csv_export():
    cap = _capture()
    lines = cap.to_csv().splitlines()
    assert lines[0] == "index,time_s,adc_code,current_a,event"
    assert len(lines) == len(cap) + 1, "every event of _capture() sits on a sample"
    row = lines[11].split(",")
    assert row[0] == "10" and float(row[1]) == pytest.approx(10 / 200e3) and row[4] == "on"
    assert float(row[3]) == pytest.approx((cap.code[10] + 0.5) * 4e-4, rel=1e-5), "read mid-step"
    assert lines[601].endswith(",switch=1") and lines[701].endswith(",temperature=-12500")
    blank = Capture.from_codes([1, 2], sample_rate_hz=10.0).to_csv().splitlines()
    assert blank[1] == "0,0,1,," and blank[2] == "1,0.1,2,,"


def test_csv_event_column_names_values_and_keeps_events_without_a_sample():
    # docs/capture-format.md, CSV: `name` for on/peak_end/off, `name=value` for the rest,
    # `;` between events at one index, a row of its own for an event with no sample.
    events = (CaptureEvent(0, EventKind.PAUSE, 0), CaptureEvent(2, EventKind.ON),
              CaptureEvent(2, EventKind.SUPPLY, 2931), CaptureEvent(3, EventKind.OVERRUN, 2),
              CaptureEvent(4, EventKind.EVENTS_LOST, 1), CaptureEvent(6, EventKind.PEAK_END),
              CaptureEvent(6, 12, 5), CaptureEvent(9, EventKind.OFF), CaptureEvent(9, EventKind.SUPPLY, 0))
    cap = Capture.from_codes([5, 6, 7, 8], index=np.array([1, 2, 5, 6]), events=events,
                             sample_rate_hz=1000.0, amps_per_code=0.5)
    rows = [line.split(",") for line in cap.to_csv().splitlines()[1:]]
    assert [(r[0], r[2], r[4]) for r in rows] == [
        ("0", "", "pause=0"),
        ("1", "5", ""),
        ("2", "6", "on;supply=2931"),
        ("3", "", "overrun=2"),
        ("4", "", "events_lost=1"),
        ("5", "7", ""),
        ("6", "8", "peak_end;kind-12=5"),
        ("9", "", "off;supply=0"),
    ]
    assert [r[3] for r in rows if r[2]] == ["2.75", "3.25", "3.75", "4.25"], "(code + 0.5) x 0.5 A"
    assert all(r[3] == "" for r in rows if not r[2])


def test_current_is_read_mid_step_like_the_analysis():
    # A truncating converter (floor: the ADC convention of coildrive.bench.synth and the
    # design) gives code k for currents in [k, k + 1) steps. Over a slow ramp its error
    # is uniform over one step: read at the code the mean error is -0.5 step, read at the
    # middle of the step 0 (the mean of a uniform distribution).
    apc = 1e-3
    true_a = np.linspace(0.0005, 2.0, 200_001)
    codes = np.floor(true_a / apc).astype(np.uint16) + 7
    cap = Capture.from_codes(codes, sample_rate_hz=1e6, amps_per_code=apc, zero_code=7)
    err = cap.current - true_a
    assert abs(float(np.mean(err[true_a > apc]))) < 0.01 * apc, "mid-step reading is unbiased"
    assert float(np.max(np.abs(err[true_a > apc]))) <= 0.5 * apc * (1 + 1e-9)
    assert float(np.mean((codes.astype(float) - 7) * apc - true_a)) < -0.45 * apc, \
        "reading at the code is half a step low: the reading this test rules out"
    assert np.all(cap.current[codes <= 7] == 0.0), "at or below zero_code: zero current"
    # the same reading as the analysis of check and fit
    from coildrive.bench.analysis import _Reader

    np.testing.assert_array_equal(_Reader(cap, 1e6, apc, 7).amps(0, len(cap)), cap.current)


def test_text_mode_capture(tmp_path):
    text = ("# printf firmware\ninfo,200000,12,0.0004,0,fw-t\n"
            + "".join(f"{k},{k * 3}\n" for k in range(50)) + "on,20\n"
            + "".join(f"{k},{k * 3}\n" for k in range(60, 80)) + "bad line\noff,75\n")
    path = tmp_path / "run.txt"
    path.write_text(text)
    cap = read_capture(path)
    assert cap.meta.link == "text" and cap.meta.sample_rate_hz == 200000 and cap.meta.amps_per_code == 0.0004
    assert cap.index.tolist() == list(range(50)) + list(range(60, 80))
    assert [(e.name, e.index) for e in cap.events] == [("on", 20), ("off", 75)]
    assert cap.malformed_frames == 1 and cap.samples_missing == 10


def test_index_wrap_and_restart():
    raw = np.array([2**32 - 2, 2**32 - 1, 0, 1, 2, 0, 1], np.uint32)   # wraps, then restarts
    index, restarts = capture_file._unwrap(raw)
    assert index.tolist() == [2**32 - 2, 2**32 - 1, 2**32, 2**32 + 1, 2**32 + 2, 2**32 + 3, 2**32 + 4]
    assert restarts == 1


@pytest.mark.parametrize("content, message", [
    (None, "file not found"),
    (b"\x00\x01\x02\x03garbage", "neither"),
    (b'{"format": "coildrive-capture", "version": 1}', "shorter than"),
    (b'{"format": "coildrive-capture", "version": 7}'.ljust(4096) + b"x" * 8, "not supported"),
    (b'{"format": "coildrive-capture", "version": 1, "sample_rate_hz": -5}'.ljust(4096), "is outside 1..1e+07 Hz"),
    (b"[coil]\nresistance = 3\n", "no sample line"),
])
def test_bad_files_raise_input_errors(tmp_path, content, message):
    path = tmp_path / "bad.cdcap"
    if content is not None:
        path.write_bytes(content)
    with pytest.raises(InputError) as err:
        read_capture(path)
    assert message in str(err.value)
    assert str(path) in str(err.value)
