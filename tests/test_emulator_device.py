"""The virtual bench device (coildrive.bench.device), in process: no pty, time passed in.

The device's ADC codes are checked against synth_capture, which shares the chain
(model waveform -> sense position -> ADC) and whose codes test_analysis and
test_check_fit measure; the model itself is checked against ngspice and scipy in
test_reference_*.py. Protocol accounting is checked against independent counts made here
from what the device says it sent.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from conftest import EXAMPLES
from coildrive.bench.capture_file import CaptureWriter, read_capture
from coildrive.bench.device import DeviceOptions, OptionError, VirtualDevice
from coildrive.bench.messages import Event, EventKind, Info, Opcode, Reply, ReplyStatus, Samples
from coildrive.bench.protocol import FrameDecoder, FrameEncoder, encode_message
from coildrive.bench.synth import adc_scaling, synth_capture
from coildrive.bench.textline import TextLineDecoder, format_text
from coildrive.config import load_drive
from coildrive.design import design


@pytest.fixture(scope="module")
def demo():
    return design(load_drive(EXAMPLES / "demo-valve.toml"))


@pytest.fixture(scope="module")
def latch():
    return design(load_drive(EXAMPLES / "locker-latch-12v.toml"))


def run(dev: VirtualDevice, until: float, step: float = 0.01, dec: FrameDecoder | None = None):
    """Read the device in steps of ``step`` s up to ``until``; decoded messages."""
    dec = dec or FrameDecoder()
    out = []
    t = dev._now
    while t < until:
        t = min(until, t + step)
        out += dec.feed(dev.read(t))
    return out, dec


def command(dev: VirtualDevice, enc: FrameEncoder, now: float, opcode: int, argument: int = 0) -> Reply:
    replies = dev.receive(enc.command(opcode, argument), now)
    assert len(replies) == 1
    return replies[0]


def recordings(messages):
    """Samples of each recording (between PAUSE events): (first index, codes, events)."""
    out = []
    for m in messages:
        if isinstance(m, Event) and m.kind == EventKind.PAUSE:
            out.append({"first": m.index + m.value, "codes": [], "events": []})
        elif out and isinstance(m, Samples):
            assert m.first_index == out[-1]["first"] + sum(len(c) for c in out[-1]["codes"])
            out[-1]["codes"].append(np.asarray(m.codes))
        elif out and isinstance(m, Event):
            out[-1]["events"].append(m)
    for r in out:
        r["codes"] = np.concatenate(r["codes"]) if r["codes"] else np.zeros(0, np.uint16)
    return out


def synth_like(d, dev: VirtualDevice, rec, t_on: float, hold_time: float, **kw):
    """synth_capture laid over the device's recording: same settings, same switch-on time."""
    fs = dev.sample_rate
    x = t_on * fs
    phase = x - math.floor(x)
    m = math.floor(x) - rec["first"]
    cap = synth_capture(d.drive, dev.peak_time, dev.duty, dev.frequency, supply=dev.supply,
                        coil_temp=dev.coil_temp, hold_time=hold_time, first_index=rec["first"],
                        idle_time=(m + 0.5) / fs, on_phase=phase, **kw)
    return cap


def assert_same_codes(rec, cap):
    """The recording's codes equal the synthetic capture's where both have samples; the
    device's extra margin after the synthetic capture's end reads zero current."""
    idx = rec["first"] + np.arange(rec["codes"].size)
    common = idx <= cap.index[-1]
    assert common.sum() > 0.5 * idx.size
    want = cap.code[np.searchsorted(cap.index, idx[common])]
    assert np.array_equal(rec["codes"][common], want), "device codes differ from synth_capture's"
    assert not rec["codes"][~common].any()


def test_info_comes_first_and_says_what_the_board_is(demo, latch):
    dev = VirtualDevice(demo.drive, design=demo)
    wire = dev.read(0.001)
    assert wire[:1] == b"\x00", "the device sends 0x00 before its first frame (protocol 3.4)"
    msgs = FrameDecoder().feed(wire)
    info = msgs[0]
    assert isinstance(info, Info)
    assert info.sample_rate_hz == demo.drive.board.adc.sample_rate
    assert info.adc_bits == demo.drive.board.adc.bits
    assert info.amps_per_code == pytest.approx(adc_scaling(demo.drive)[1], rel=1e-7)  # binary32
    assert not info.has_position_switch
    arm = VirtualDevice(latch.drive, design=latch)
    assert FrameDecoder().feed(arm.read(0.005))[0].has_position_switch


def test_automatic_actuation_codes_equal_synth_capture(demo):
    # switch-on at a fraction of a sample period, to exercise the sub-sample phase
    opts = DeviceOptions(first_actuation=0.0500123, noise_codes=0.0)
    dev = VirtualDevice(demo.drive, opts, design=demo)
    msgs, dec = run(dev, dev.period + 0.0500123 - 0.001)
    rec = recordings(msgs)
    assert len(rec) == 1 and dec.stats.samples_missing == 0
    cap = synth_like(demo, dev, rec[0], 0.0500123, opts.hold_time)
    assert rec[0]["codes"].size > 5000
    assert_same_codes(rec[0], cap)
    got = sorted((e.kind, e.index, e.value) for e in rec[0]["events"]
                 if e.kind in (EventKind.ON, EventKind.PEAK_END, EventKind.OFF))
    assert got == sorted((e.kind, e.index, e.value) for e in cap.events)
    assert rec[0]["codes"].max() > 2000, "the peak current reads as a large code"


def test_armature_drive_sends_switch_events_and_the_dip(latch):
    dev = VirtualDevice(latch.drive, DeviceOptions(first_actuation=0.01), design=latch)
    msgs, _ = run(dev, 0.01 + dev.period - 0.001, step=0.05)
    rec = recordings(msgs)[0]
    cap = synth_like(latch, dev, rec, 0.01, 0.02)
    assert_same_codes(rec, cap)
    switch = [(e.index, e.value) for e in rec["events"] if e.kind == EventKind.SWITCH]
    assert switch == [(e.index, e.value) for e in cap.events if e.kind == EventKind.SWITCH]
    assert [v for _, v in switch] == [1, 0], "seats during the peak, opens after the release"


def test_commands_get_replies_with_the_value_in_force(demo):
    dev = VirtualDevice(demo.drive, DeviceOptions(first_actuation=10.0), design=demo)
    enc = FrameEncoder()
    run(dev, 0.01)
    period = demo.timer.period_ticks
    r = command(dev, enc, 0.01, Opcode.SET_HOLD_DUTY, 30000)
    compare = round(30000 * period / 65535)
    assert (r.status, r.value) == (ReplyStatus.OK, round(compare * 65535 / period))
    assert r.command_seq == 0 and r.opcode == Opcode.SET_HOLD_DUTY
    assert dev.duty == compare / period
    assert command(dev, enc, 0.01, Opcode.SET_HOLD_DUTY, 70000).status == ReplyStatus.OUT_OF_RANGE
    # the tick is 10 kHz: 5.63 ms is 56 ticks = 5.6 ms
    r = command(dev, enc, 0.01, Opcode.SET_PEAK_TIME, 5630)
    assert (r.status, r.value) == (ReplyStatus.OK, 5600)
    assert command(dev, enc, 0.01, Opcode.SET_PEAK_TIME, 0).status == ReplyStatus.OUT_OF_RANGE
    # 84 MHz clock: 31 kHz is made as 84e6 / 2710 = 30996.3 Hz (prescaler 1)
    r = command(dev, enc, 0.01, Opcode.SET_HOLD_FREQUENCY, 31000)
    assert (r.status, r.value) == (ReplyStatus.OK, round(84e6 / 2710))
    assert dev.duty == pytest.approx(compare / period, abs=1 / 2710)
    low, high = dev.frequency_range()
    assert low == pytest.approx(84e6 / (65536 * 65536)) and high == 42e6
    r = command(dev, enc, 0.01, Opcode.SET_HOLD_FREQUENCY, 0)
    assert (r.status, r.value) == (ReplyStatus.OUT_OF_RANGE, round(84e6 / 2710))
    assert command(dev, enc, 0.01, 99).status == ReplyStatus.UNKNOWN_OPCODE
    assert command(dev, enc, 0.01, Opcode.START, 2_000_000).status == ReplyStatus.OUT_OF_RANGE
    r = command(dev, enc, 0.02, Opcode.START, 10_000)
    f = 84e6 / 2710
    assert (r.status, r.value) == (ReplyStatus.OK, round(round(0.01 * f) / f * 1e6)), "whole PWM periods"
    assert command(dev, enc, 0.021, Opcode.START, 10_000).status == ReplyStatus.BUSY
    msgs, _ = run(dev, 0.3)
    replies = [m for m in msgs if isinstance(m, Reply)]
    assert [m.command_seq for m in replies] == list(range(10))
    assert command(dev, enc, 0.3, Opcode.START, 10_000).status == ReplyStatus.OK, "free again once streamed"
    r = command(dev, enc, 0.31, Opcode.QUERY_INFO)
    msgs, _ = run(dev, 0.32)
    kinds = [type(m).__name__ for m in msgs]
    assert "Info" in kinds and kinds.index("Reply") < kinds.index("Info")
    text = [e.text for e in dev.log()]
    assert "command SET_HOLD_DUTY 30000 -> OK" in text and "command START 10000 -> BUSY" in text
    assert text.count("state on") == 2 and text.count("state off") == 2


def test_host_takes_control_with_its_first_command(demo):
    dev = VirtualDevice(demo.drive, design=demo)
    enc = FrameEncoder()
    msgs, _ = run(dev, 0.1)
    assert sum(isinstance(m, Event) and m.kind == EventKind.ON for m in msgs) == 1
    command(dev, enc, 0.1, Opcode.QUERY_INFO)
    msgs, _ = run(dev, 3.0, step=0.1)
    assert not any(isinstance(m, Event) and m.kind == EventKind.ON for m in msgs), \
        "no automatic actuation once the host has sent a command"


def test_stop_in_the_hold_ends_it_after_the_running_on_time(demo):
    dev = VirtualDevice(demo.drive, DeviceOptions(first_actuation=10.0), design=demo)
    enc = FrameEncoder()
    run(dev, 0.01)
    assert command(dev, enc, 0.01, Opcode.START, 0).value == 0        # hold until STOP
    f = dev.frequency
    t_stop = 0.01 + dev.peak_time + 3.3 / f
    msgs, dec = run(dev, t_stop - 0.0005, step=0.002)
    command(dev, enc, t_stop, Opcode.STOP)
    more, _ = run(dev, 0.5, dec=dec)
    rec = recordings(msgs + more)[0]
    off = [e.index for e in rec["events"] if e.kind == EventKind.OFF]
    fs = dev.sample_rate
    assert off == [math.ceil((0.01 + dev.peak_time + (3 + dev.duty) / f) * fs - 1e-9)]
    # the whole recording is what a 4-period hold makes
    cap = synth_like(demo, dev, rec, 0.01, 4 / f)
    assert_same_codes(rec, cap)
    assert rec["codes"][-1] == 0 and dec.stats.samples_missing == 0


def test_stop_in_the_peak_cuts_it_there(demo):
    dev = VirtualDevice(demo.drive, DeviceOptions(first_actuation=10.0), design=demo)
    enc = FrameEncoder()
    run(dev, 0.01)
    command(dev, enc, 0.01, Opcode.START, 20_000)
    msgs, dec = run(dev, 0.012, step=0.001)
    command(dev, enc, 0.012, Opcode.STOP)
    more, _ = run(dev, 0.3, dec=dec)
    rec = recordings(msgs + more)[0]
    kinds = [e.kind for e in rec["events"]]
    assert EventKind.PEAK_END not in kinds
    fs = dev.sample_rate
    off = [e.index for e in rec["events"] if e.kind == EventKind.OFF][0]
    assert off == math.ceil(0.012 * fs - 1e-9)
    k = off - rec["first"]
    assert rec["codes"][k - 1] == rec["codes"][:k].max(), "the current tops out at the STOP"
    assert rec["codes"][k + 5] < rec["codes"][k - 1], "then decays"


def test_pause_accounting_is_exact_in_frames_text_and_capture_file(demo, tmp_path):
    dev = VirtualDevice(demo.drive, DeviceOptions(period=0.25), design=demo)
    msgs, dec = run(dev, 1.3, step=0.05)
    s = dec.stats
    last = max(m.next_index for m in msgs if isinstance(m, Samples))
    assert s.samples_missing == 0 and s.lost_frames == 0
    assert s.samples + s.samples_paused == last, "every index is a sample or paused"
    assert s.samples_paused == dev.stats.samples_paused and s.samples == dev.stats.samples_sent
    # text line mode
    text = "".join(format_text(m) for m in msgs if not isinstance(m, Reply))
    assert "\npause," in text
    tdec = TextLineDecoder()
    tdec.feed(text.encode())
    assert (tdec.stats.samples_missing, tdec.stats.samples_paused) == (0, s.samples_paused)
    # capture file: pauses between recordings are not missing samples
    cap = capture_of(msgs, tmp_path / "run.cdcap")
    first = min(m.first_index for m in msgs if isinstance(m, Samples))
    assert cap.samples_missing == 0
    assert cap.samples_paused == last - first - len(cap)
    # a lost PAUSE frame leaves its indices missing: the count is conservative, not blind
    pauses = [m for m in msgs if isinstance(m, Event) and m.kind == EventKind.PAUSE]
    dropped = pauses[2]
    redo = FrameDecoder()
    for k, m in enumerate(msgs):
        if m is not dropped:
            redo.feed(encode_message(m, k))
    assert redo.stats.samples_missing == dropped.value and redo.stats.lost_frames == 1


def capture_of(msgs, path):
    with CaptureWriter(path, flush_interval=None) as w:
        for m in msgs:
            if not isinstance(m, Reply):
                w.append_message(m)
    return read_capture(path)


def test_line_damage_is_counted_by_the_decoder_exactly(demo, tmp_path):
    opts = DeviceOptions(drop_bytes=2e-4, corrupt_bytes=2e-4, seed=7, keep_sent=True, period=0.25)
    dev = VirtualDevice(demo.drive, opts, design=demo)
    dec = FrameDecoder()
    received = bytearray()
    t = 0.0
    while t < 2.0:
        t += 0.02
        chunk = dev.read(t)
        received += chunk
        dec.feed(chunk)
    st, s = dev.stats, dec.stats
    sent = dev.sent
    assert st.bytes_dropped > 5 and st.bytes_corrupted > 5 and st.frames_damaged > 5
    assert s.bytes == st.bytes_sent - st.bytes_dropped
    # a frame arrives when its bytes and the delimiter before it did (the leading 0x00 is intact)
    intact = [f for k, f in enumerate(sent)
              if not f.damaged and not (k > 0 and sent[k - 1].delimiter_damaged)]
    assert not any(f.damaged for f in sent[:1])
    last_intact = intact[-1].seq
    assert s.frames == len(intact)
    arrived = {f.seq for f in intact}
    assert s.lost_frames == sum(1 for f in sent if f.seq not in arrived and f.seq < last_intact)
    # every non-empty piece between delimiters that is not an intact frame is counted once
    good = {encode_message(f.message, f.seq)[:-1] for f in intact}
    pieces = bytes(received).split(b"\x00")[:-1]          # the last one waits for its delimiter
    bad = [p for p in pieces[1:] if p and p not in good]
    assert s.crc_errors + s.malformed_frames == len(bad)
    assert s.sync_bytes == len(pieces[0])
    # samples: delivered = those in intact frames; missing = indices neither delivered nor
    # covered by an intact PAUSE, between the first and the last intact index message
    assert s.samples == sum(len(f.message.codes) for f in intact if isinstance(f.message, Samples))
    top = max(f.message.next_index for f in sent if isinstance(f.message, Samples))
    covered = np.zeros(top + 1, bool)
    points = []
    for f in intact:
        m = f.message
        if isinstance(m, Samples):
            covered[m.first_index:m.next_index] = True
            points.append(m.first_index)
        elif isinstance(m, Event) and m.kind == EventKind.PAUSE:
            covered[m.index:m.index + m.value] = True
            points.append(m.index)
    missing = int(np.count_nonzero(~covered[points[0]:points[-1]]))
    assert missing > 0
    assert s.samples_missing == missing
    # the capture file of what arrived counts the same indices missing between its samples
    msgs = FrameDecoder().feed(bytes(received))
    cap = capture_of(msgs, tmp_path / "damaged.cdcap")
    span = slice(int(cap.index[0]), int(cap.index[-1]) + 1)
    assert cap.samples_missing == int(np.count_nonzero(~covered[span]))


@pytest.mark.parametrize("fault", ["open", "shorted_turns"])
def test_faults(demo, fault):
    base = VirtualDevice(demo.drive, DeviceOptions(first_actuation=0.01), design=demo)
    dev = VirtualDevice(demo.drive, DeviceOptions(first_actuation=0.01, fault=fault), design=demo)
    ref = recordings(run(base, 0.2, step=0.05)[0])[0]
    rec = recordings(run(dev, 0.2, step=0.05)[0])[0]
    assert {e.kind for e in rec["events"]} >= {EventKind.ON, EventKind.PEAK_END, EventKind.OFF}
    if fault == "open":
        assert rec["codes"].max() == 0, "an open coil carries no current"
    else:
        # 20 % of the turns shorted: R x 0.8, so the held current rises by about 1/0.8
        # (textbook winding relations, see synth.faulty_drive)
        hold = slice(rec["codes"].size // 2, rec["codes"].size // 2 + 1000)
        assert rec["codes"][hold].mean() == pytest.approx(ref["codes"][hold].mean() / 0.8, rel=0.05)


def test_stuck_armature_never_seats(latch):
    dev = VirtualDevice(latch.drive, DeviceOptions(first_actuation=0.01, fault="stuck"), design=latch)
    rec = recordings(run(dev, 0.3, step=0.05)[0])[0]
    assert not [e for e in rec["events"] if e.kind == EventKind.SWITCH]


def test_noise_is_seeded_and_options_are_checked(demo):
    a = VirtualDevice(demo.drive, DeviceOptions(noise_codes=2.0, seed=3), design=demo)
    b = VirtualDevice(demo.drive, DeviceOptions(noise_codes=2.0, seed=3), design=demo)
    assert a.read(0.2) == b.read(0.2)
    with pytest.raises(OptionError) as err:
        DeviceOptions(drop_bytes=1.5)
    assert err.value.name == "drop_bytes"
    with pytest.raises(OptionError):
        DeviceOptions(fault="melted")


def test_pause_accounting_edge_cases():
    enc = FrameEncoder()
    dec = FrameDecoder()
    dec.feed(enc.event(EventKind.PAUSE, 0, 1000))          # the first reference
    dec.feed(enc.samples(1000, [1, 2, 3]))
    assert (dec.stats.samples_missing, dec.stats.samples_paused) == (0, 1000)
    dec.feed(enc.event(EventKind.PAUSE, 1010, 90))          # 7 samples lost before it
    dec.feed(enc.samples(1100, [4]))
    assert dec.stats.samples_missing == 7
    dec.feed(enc.event(EventKind.PAUSE, 5, 10))             # backward: the device restarted
    dec.feed(enc.samples(15, [5]))
    assert (dec.stats.index_restarts, dec.stats.samples_missing) == (1, 7)
    dec.feed(enc.event(EventKind.PAUSE, 16, 0))             # nothing paused: no effect
    dec.feed(enc.samples(16, [6]))
    assert dec.stats.samples_missing == 7 and dec.stats.samples_paused == 1100
    assert TextLineDecoder().feed(b"pause,12,30\n") == [Event(EventKind.PAUSE, 12, 30)]


def test_the_device_stream_passes_check_against_its_design(demo, tmp_path):
    """The emulator runs the design: `check` (phases, pull-in, hold mean, ripple, release
    against the closed-form prediction) passes on what it streams, noise included."""
    from coildrive.bench.check import check_capture

    dev = VirtualDevice(demo.drive, DeviceOptions(noise_codes=1.0, seed=5), design=demo)
    msgs, _ = run(dev, 0.05 + 2 * dev.period, step=0.05)
    cap = capture_of(msgs, tmp_path / "check.cdcap")
    report = check_capture(cap, demo)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items if i.status == "FAIL"]
    assert report.point.supply_v == pytest.approx(24.0, rel=0.01), "read from the SUPPLY events"
    # and a coil with 40 % more resistance than designed fails it
    bad = VirtualDevice(demo.drive, DeviceOptions(resistance_scale=1.4), design=demo)
    msgs, _ = run(bad, 0.3, step=0.05)
    assert not check_capture(capture_of(msgs, tmp_path / "bad.cdcap"), demo).ok


def emulated_passes_check(d, tmp_path) -> None:
    """The virtual device of the design ``d`` (1 code of noise, a 4 ms hold) runs two
    actuations and their capture passes ``check`` (plumbing: the device shares the design's
    physics)."""
    from coildrive.bench.check import check_capture

    dev = VirtualDevice(d.drive, DeviceOptions(noise_codes=1.0, seed=3, hold_time=0.004), design=d)
    msgs, _ = run(dev, 0.05 + 2 * dev.period, step=0.05)
    report = check_capture(capture_of(msgs, tmp_path / "c.cdcap"), d)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items if i.status == "FAIL"]
