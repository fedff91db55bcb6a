"""Bench-link framing, frame layout and the streaming decoder's accounting.

Outside sources:
- CRC: the CRC RevEng catalogue ("CRC-16/CCITT-FALSE, check=0x29B1"; the catalogue lists
  it as CRC-16/IBM-3740), parameters width=16 poly=0x1021 init=0xFFFF refin=false
  refout=false xorout=0x0000; the check value is the CRC of ASCII "123456789".
- COBS: S. Cheshire and M. Baker, "Consistent Overhead Byte Stuffing", IEEE/ACM Trans.
  Networking 7(2), 1999: code n (1..254) = n-1 data bytes then a zero; code 0xFF = 254
  data bytes, no zero; the frame's final zero is implicit.
"""

from __future__ import annotations

import binascii
import struct

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from coildrive.bench import (CobsError, Command, Event, EventKind, FrameDecoder, FrameEncoder,
                             FrameType, Info, Opcode, Reply, ReplyStatus, Samples, cobs_decode,
                             cobs_encode, crc16, encode_frame, encode_message)
from coildrive.bench import protocol
from coildrive.bench.framing import cobs_encoded_size
from crc_reference import CCITT_FALSE, crc_model


# --------------------------------------------------------------------------- CRC
def test_crc_check_value_from_catalogue():
    # CRC RevEng catalogue: CRC-16/CCITT-FALSE, check=0x29B1 over b"123456789".
    assert crc16(b"123456789") == 0x29B1, "crc16 is not CRC-16/CCITT-FALSE"
    assert binascii.crc_hqx(b"123456789", 0xFFFF) == 0x29B1
    assert crc_model(b"123456789", **CCITT_FALSE) == 0x29B1


@pytest.mark.parametrize("params, check", [
    # From memory, CRC RevEng catalogue check values of other 16-bit CRCs: they show the
    # bitwise model above is right in the reflected and non-reflected cases alike.
    (dict(width=16, poly=0x1021, init=0x0000, refin=False, refout=False, xorout=0), 0x31C3),  # XMODEM
    (dict(width=16, poly=0x1021, init=0x0000, refin=True, refout=True, xorout=0), 0x2189),    # KERMIT
    (dict(width=16, poly=0x8005, init=0xFFFF, refin=True, refout=True, xorout=0), 0x4B37),    # MODBUS
])
def test_crc_model_against_other_catalogue_entries(params, check):
    assert crc_model(b"123456789", **params) == check


def test_crc_matches_the_parameter_model_on_varied_data():
    rng = np.random.default_rng(5)
    for n in (0, 1, 2, 7, 64, 255, 1029):
        data = rng.integers(0, 256, n, dtype=np.uint8).tobytes()
        assert crc16(data) == crc_model(data, **CCITT_FALSE), f"{n} bytes"


# --------------------------------------------------------------------------- COBS
def hexb(text: str) -> bytes:
    return bytes.fromhex(text)


RUN_254 = bytes(range(1, 255))          # 01 02 .. FE: 254 non-zero bytes
RUN_253 = bytes(range(1, 254))


@pytest.mark.parametrize("data, encoded", [
    # Each expected value follows the paper's rules by hand.
    (b"", hexb("01")),                                   # only the implicit zero
    (hexb("00"), hexb("01 01")),                         # a single zero
    (hexb("00 00"), hexb("01 01 01")),
    (bytes(5), hexb("01") * 6),                          # all zeros: one code per zero + 1
    (hexb("11 22 00 33"), hexb("03 11 22 02 33")),
    (hexb("11 22 33 44"), hexb("05 11 22 33 44")),
    (hexb("11 00 00 00"), hexb("02 11 01 01 01")),
    (RUN_253, b"\xfe" + RUN_253),                        # 253 bytes: one block, code 0xFE
    (RUN_254, b"\xff" + RUN_254),                        # run ends exactly at 254, frame end
    (RUN_254 + b"\xff", b"\xff" + RUN_254 + hexb("02 ff")),  # 255 bytes: 0xFF then a 2-block
    (RUN_254 + b"\x00", b"\xff" + RUN_254 + hexb("01 01")),  # 254-run then a zero
    (b"\x00" + RUN_254, b"\x01\xff" + RUN_254),
    (RUN_254 + b"\x00\x07", b"\xff" + RUN_254 + hexb("01 02 07")),
    (RUN_254 * 2, (b"\xff" + RUN_254) * 2),              # two full blocks
])
def test_cobs_encoding_rules(data, encoded):
    assert cobs_encode(data) == encoded
    assert cobs_decode(encoded) == data


def test_cobs_accepts_a_trailing_empty_block_after_a_full_one():
    # The form with the implicit zero encoded as a last 0x01 block decodes the same.
    assert cobs_decode(b"\xff" + RUN_254 + b"\x01") == RUN_254


@pytest.mark.parametrize("bad", [b"", hexb("03 11"), hexb("02 11 00 01"), hexb("05 11 22"),
                                 hexb("00")])
def test_cobs_rejects_invalid(bad):
    with pytest.raises(CobsError):
        cobs_decode(bad)


def test_cobs_round_trip_and_size_bound():
    rng = np.random.default_rng(3)
    for n in (0, 1, 100, 253, 254, 255, 508, 509, 1029):
        for zero_share in (0.0, 0.01, 0.5, 1.0):
            data = rng.integers(1, 256, n, dtype=np.uint8)
            data[rng.random(n) < zero_share] = 0
            raw = data.tobytes()
            enc = cobs_encode(raw)
            assert 0 not in enc
            assert cobs_decode(enc) == raw
            assert len(enc) <= cobs_encoded_size(n)
            if zero_share == 0.0:
                assert len(enc) == cobs_encoded_size(n), "the bound is met without zeros"


def reference_cobs_decode(enc: bytes) -> bytes | None:
    """COBS decoding block by block, straight from the rules of Cheshire & Baker (1999):
    a code byte ``c`` is followed by ``c - 1`` data bytes and, unless ``c`` is 0xFF or the
    frame ends there, by a zero. ``None`` for a zero byte, no bytes, or a block past the end."""
    if not enc or 0 in enc:
        return None
    out = bytearray()
    i = 0
    while i < len(enc):
        code = enc[i]
        if i + code > len(enc):
            return None
        out += enc[i + 1:i + code]
        i += code
        if code != 0xFF and i < len(enc):
            out.append(0)
    return bytes(out)


@settings(max_examples=400, deadline=None)
@given(st.lists(st.sampled_from([1, 1, 1, 2, 3, 0xFE, 0xFF, 7, 0x80]), min_size=1, max_size=600))
def test_cobs_decoder_equals_the_block_rules_on_code_rich_input(codes):
    # Runs of 0x01 codes (zero-rich data: idle ADC codes) take the decoder's fast path;
    # valid and invalid inputs must decode exactly as the paper's rules say.
    from coildrive.bench.framing import cobs_decode_or_none

    enc = bytes(codes)
    got = cobs_decode_or_none(enc)
    assert (None if got is None else bytes(got)) == reference_cobs_decode(enc)


# --------------------------------------------------------------------------- layout
def unframe(wire: bytes) -> tuple[int, int, bytes]:
    """type, seq, payload of one frame, checking delimiter, COBS and CRC independently."""
    assert wire.endswith(b"\x00") and wire.count(0) == 1
    raw = cobs_decode(wire[:-1])
    body, crc = raw[:-2], struct.unpack("<H", raw[-2:])[0]
    assert crc == crc_model(body, **CCITT_FALSE)
    return body[0], struct.unpack("<H", body[1:3])[0], body[3:]


def test_samples_layout():
    codes = [0, 1, 0x1234, 0xFFFF]
    t, seq, payload = unframe(encode_message(Samples(70000, np.array(codes)), 0x1234))
    assert (t, seq) == (0x01, 0x1234)
    assert payload == struct.pack("<I4H", 70000, *codes)


def test_event_layout():
    t, seq, payload = unframe(encode_message(Event(EventKind.SWITCH, 123456, -5), 9))
    assert (t, seq) == (0x02, 9)
    assert payload == struct.pack("<BIi", 4, 123456, -5)


def test_info_layout():
    info = Info(84_000_000, 420, 12, 0.5, 2048, "fw 1.0", True)
    t, _, payload = unframe(encode_message(info, 0))
    assert t == 0x03
    assert payload == struct.pack("<BBBHIIf", 1, 1, 12, 2048, 84_000_000, 420, 0.5) + b"fw 1.0"


def test_command_and_reply_layout():
    t, seq, payload = unframe(encode_message(Command(Opcode.SET_HOLD_FREQUENCY, 25000), 65535))
    assert (t, seq, payload) == (0x81, 65535, struct.pack("<BI", 5, 25000))
    t, _, payload = unframe(encode_message(Reply(65535, Opcode.SET_HOLD_FREQUENCY,
                                                 ReplyStatus.OUT_OF_RANGE, 24990), 3))
    assert (t, payload) == (0x04, struct.pack("<HBBI", 65535, 5, 2, 24990))


@pytest.mark.parametrize("message", [
    Samples(0, np.array([], dtype="<u2")),
    Samples(0, np.zeros(protocol.MAX_SAMPLES_PER_FRAME + 1, dtype="<u2")),
    Samples(2**32, np.array([1])),
    Samples(0, np.array([70000])),
    Event(EventKind.ON, -1),
    Event(EventKind.ON, 0, 2**31),
    Info(0, 1, 12),
    Info(1, 1, 17),
    Info(1, 1, 12, firmware_id="x" * 65),
    Info(1, 1, 12, amps_per_code=float("nan")),
    Command(Opcode.START, 2**32),
])
def test_encoder_rejects_what_does_not_fit(message):
    with pytest.raises(ValueError):
        encode_message(message, 0)


# --------------------------------------------------------------------------- decoder
def all_kinds() -> list:
    return [
        Info(200_000, 1, 12, 0.25, 7, "bench 0.1", True),
        Samples(0, np.arange(64, dtype="<u2")),
        Event(EventKind.ON, 64),
        Samples(64, np.array([0, 0, 4095, 256], dtype="<u2")),
        Event(EventKind.TEMPERATURE, 68, -12500),
        Event(99, 68, 1),                      # a kind of a later version
        Reply(3, Opcode.START, ReplyStatus.OK, 0),
        Command(Opcode.SET_HOLD_DUTY, 16384),
    ]


def test_round_trip_every_message_type():
    enc_device, enc_host = FrameEncoder(), FrameEncoder()
    messages = all_kinds()
    wire = b"".join(enc_host.encode(m) if isinstance(m, Command) else enc_device.encode(m)
                    for m in messages)
    dec = FrameDecoder()
    out = dec.feed(wire)
    assert out == messages
    assert [m.seq for m in out] == [0, 1, 2, 3, 4, 5, 6, 0], "each direction counts its own frames"
    assert isinstance(out[2].kind, EventKind) and out[5].kind == 99
    s = dec.stats
    assert (s.frames, s.samples, s.errors, s.duplicate_frames, s.bytes) == (8, 68, 0, 0, len(wire))
    assert not out[1].codes.flags.writeable, "decoded samples are read-only"
    assert out[1].codes.dtype == np.dtype("<u2")


def test_chunking_does_not_change_the_result():
    enc = FrameEncoder()
    wire = b"".join(enc.encode(m) for m in all_kinds() if not isinstance(m, Command))
    whole = FrameDecoder()
    expected = whole.feed(wire)
    bytewise = FrameDecoder()
    got = [m for k in range(len(wire)) for m in bytewise.feed(wire[k:k + 1])]
    assert got == expected and bytewise.stats == whole.stats


def frames(n: int, start_seq: int = 0, per_frame: int = 4) -> list[bytes]:
    enc = FrameEncoder(start_seq)
    return [enc.samples(k * per_frame, np.arange(per_frame) + k) for k in range(n)]


def test_lost_frames_are_counted_from_the_gap():
    f = frames(10)
    dec = FrameDecoder()
    dec.feed(f[0] + f[1] + f[5] + f[9])
    assert dec.stats.lost_frames == 3 + 3
    assert dec.stats.samples_missing == 4 * 6


def test_wrap_around_is_not_a_loss():
    f = frames(6, start_seq=65533)              # 65533 65534 65535 0 1 2
    dec = FrameDecoder()
    out = dec.feed(b"".join(f))
    assert [m.seq for m in out] == [65533, 65534, 65535, 0, 1, 2]
    assert dec.stats.lost_frames == 0 and dec.stats.sequence_restarts == 0
    dec = FrameDecoder()
    dec.feed(f[1] + f[4])                        # 65534 -> 1: frames 65535 and 0 lost
    assert dec.stats.lost_frames == 2


def test_duplicate_is_counted_once_and_dropped_not_as_65535_lost():
    f = frames(3, start_seq=65535)
    dec = FrameDecoder()
    out = dec.feed(f[0] + f[0] + f[1] + f[1] + f[1] + f[2])
    assert [m.seq for m in out] == [65535, 0, 1]
    s = dec.stats
    assert (s.duplicate_frames, s.lost_frames, s.sequence_restarts, s.samples) == (3, 0, 0, 12)


def test_half_range_rule():
    # A forward step of 32768 is 32767 lost frames; a step of 32769 is a restart.
    enc = FrameEncoder()
    first = enc.event(EventKind.ON, 0)
    dec = FrameDecoder()
    dec.feed(first + encode_message(Event(EventKind.OFF, 1), 32768))
    assert (dec.stats.lost_frames, dec.stats.sequence_restarts) == (32767, 0)
    dec = FrameDecoder()
    dec.feed(first + encode_message(Event(EventKind.OFF, 1), 32769))
    assert (dec.stats.lost_frames, dec.stats.sequence_restarts) == (0, 1)


def test_device_restart():
    f = frames(50)
    restarted = frames(2)
    dec = FrameDecoder()
    out = dec.feed(b"".join(f) + restarted[0] + restarted[1])
    s = dec.stats
    assert len(out) == 52
    assert (s.sequence_restarts, s.lost_frames, s.index_restarts, s.samples_missing) == (1, 0, 1, 0)


def test_crc_error_then_resync():
    f = frames(3)
    bad = bytearray(f[1])
    bad[1] ^= 0x10                               # a data byte, not a COBS code
    dec = FrameDecoder()
    out = dec.feed(f[0] + bytes(bad) + f[2])
    assert [m.seq for m in out] == [0, 2]
    s = dec.stats
    assert (s.crc_errors, s.malformed_frames, s.lost_frames) == (1, 0, 1)


def test_garbage_before_the_first_delimiter_is_sync_not_error():
    f = frames(2)
    dec = FrameDecoder()
    out = dec.feed(f[0][7:] + f[1])              # joined part-way through frame 0
    assert [m.seq for m in out] == [1]
    s = dec.stats
    assert (s.sync_bytes, s.crc_errors, s.malformed_frames) == (len(f[0]) - 8, 0, 0)


def test_first_frame_without_leading_delimiter_is_decoded():
    dec = FrameDecoder()
    assert len(dec.feed(frames(1)[0])) == 1 and dec.stats.sync_bytes == 0


def test_overlong_piece_is_dropped_with_bounded_memory():
    f = frames(2)
    dec = FrameDecoder()
    dec.feed(f[0])
    for _ in range(100):
        dec.feed(b"\x55" * 1000)
        assert dec.pending_bytes <= protocol.MAX_ENCODED
    out = dec.feed(b"\x00" + f[1])
    assert [m.seq for m in out] == [1]
    assert dec.stats.malformed_frames == 1


def test_malformed_layouts():
    dec = FrameDecoder()
    wire = (encode_frame(FrameType.SAMPLES, 0, b"\x00\x00\x00\x00\x01")   # odd code bytes
            + encode_frame(FrameType.SAMPLES, 1, b"\x00\x00\x00\x00")     # no sample
            + encode_frame(FrameType.EVENT, 2, b"\x01" * 8)               # one byte short
            + encode_frame(FrameType.INFO, 3, bytes(17))                  # rate 0, 0 bits
            + encode_frame(FrameType.COMMAND, 0, b"\x01")
            + b"\x02\x01\x00"                                             # 1-byte frame
            + b"\x05\x01\x00")                                            # block past end
    assert dec.feed(wire) == []
    s = dec.stats
    assert (s.malformed_frames, s.crc_errors, s.lost_frames) == (7, 0, 0)


def test_unknown_type_is_skipped_but_its_number_counts():
    wire = (encode_message(Event(EventKind.ON, 0), 0) + encode_frame(0x30, 1, b"future")
            + encode_message(Event(EventKind.OFF, 9), 2))
    dec = FrameDecoder()
    assert len(dec.feed(wire)) == 2
    assert (dec.stats.unknown_frames, dec.stats.lost_frames) == (1, 0)


def test_finish_decodes_a_last_frame_without_delimiter():
    f = frames(2)
    dec = FrameDecoder()
    assert len(dec.feed(f[0] + f[1][:-1])) == 1
    assert len(dec.finish()) == 1
    assert dec.stats.frames == 2


def test_unfinished_last_frame_is_tail_bytes_not_an_error():
    # docs/protocol.md section 6: a recording that stops part-way through a frame leaves
    # bytes that fail COBS or CRC; like the bytes before the first delimiter, they say
    # nothing about the link.
    f = frames(3)
    dec = FrameDecoder()
    dec.feed(f[0] + f[1] + f[2][:10])
    assert dec.finish() == []
    s = dec.stats
    assert (s.tail_bytes, s.crc_errors, s.malformed_frames, s.lost_frames) == (10, 0, 0, 0)
    # the same bytes with a delimiter after them are a damaged frame
    dec = FrameDecoder()
    dec.feed(f[0] + f[1] + f[2][:10] + b"\x00" + f[2])
    s = dec.stats
    assert (s.tail_bytes, s.crc_errors + s.malformed_frames) == (0, 1)
    # an over-long piece cut by the end of the stream is tail bytes too
    dec = FrameDecoder()
    dec.feed(f[0] + b"\x55" * 3000)
    dec.finish()
    assert (dec.stats.tail_bytes, dec.stats.malformed_frames) == (3000, 0)


def test_whole_last_frame_of_a_wrong_size_is_malformed_at_the_end_too():
    dec = FrameDecoder()
    dec.feed(frames(1)[0] + encode_frame(FrameType.EVENT, 1, b"\x01" * 8)[:-1])
    dec.finish()
    assert (dec.stats.malformed_frames, dec.stats.tail_bytes) == (1, 0)


def test_wrong_size_frame_repeating_the_sequence_number_is_malformed_not_a_duplicate():
    # docs/protocol.md section 6: the payload-size check makes a frame malformed, and a
    # frame that fails a check has no trusted sequence number (section 5), so it cannot
    # be a duplicate. Issue 13, point 2.
    f = frames(2)                                        # seq 0 and 1
    wrong = encode_frame(FrameType.EVENT, 0, b"\x01" * 8)   # seq 0 again, one byte short
    dec = FrameDecoder()
    out = dec.feed(f[0] + wrong + f[1])
    assert [m.seq for m in out] == [0, 1]
    s = dec.stats
    assert (s.malformed_frames, s.duplicate_frames, s.lost_frames) == (1, 0, 0)
    # with a fresh sequence number: malformed too, and its number is not trusted (lost)
    fresh = FrameEncoder()
    a, b = fresh.event(EventKind.ON, 0), encode_frame(FrameType.EVENT, 1, b"\x01" * 8)
    dec = FrameDecoder()
    dec.feed(a + b + encode_message(Event(EventKind.OFF, 5), 2))
    s = dec.stats
    assert (s.malformed_frames, s.duplicate_frames, s.lost_frames) == (1, 0, 1)


@pytest.mark.parametrize("frame_type, payload", [
    (FrameType.EVENT, b"\x01" * 10),                  # a byte too many
    (FrameType.REPLY, b"\x01" * 7),
    (FrameType.COMMAND, b"\x01" * 6),
    (FrameType.INFO, bytes(17)),                       # the right size, rate 0 and 0 bits
    (FrameType.SAMPLES, b"\x00" * 5),
])
def test_a_frame_failing_its_layout_never_takes_part_in_the_sequence(frame_type, payload):
    enc = FrameEncoder()
    good = enc.event(EventKind.ON, 0)
    bad = encode_frame(frame_type, 0, payload)
    dec = FrameDecoder()
    out = dec.feed(good + bad + bad + encode_message(Event(EventKind.OFF, 1), 1))
    assert len(out) == 2
    s = dec.stats
    assert (s.malformed_frames, s.duplicate_frames, s.lost_frames, s.sequence_restarts) == (2, 0, 0, 0)


def raw_wire(frame_type: int, seq: int, payload: bytes) -> bytes:
    """A frame built without the encoder's size limit (COBS, CRC, delimiter)."""
    raw = struct.pack("<BH", frame_type, seq) + payload
    return cobs_encode(raw + struct.pack("<H", crc_model(raw, **CCITT_FALSE))) + b"\x00"


@pytest.mark.parametrize("codes", [511, 512])
def test_frame_above_the_maximum_size_is_malformed(codes):
    # docs/protocol.md section 3.1: payload <= 1024 bytes, a frame <= 1029 bytes; zero
    # codes keep its COBS form short enough (n + 1 bytes) to reach the decoder whole.
    payload = struct.pack("<I", 0) + bytes(2 * codes)
    wire = raw_wire(FrameType.SAMPLES, 1, payload)
    assert len(wire) - 1 <= protocol.MAX_ENCODED
    dec = FrameDecoder()
    out = dec.feed(frames(1)[0] + wire + encode_message(Event(EventKind.OFF, 1), 2))
    assert [type(m).__name__ for m in out] == ["Samples", "Event"]
    s = dec.stats
    assert (s.malformed_frames, s.crc_errors, s.unknown_frames, s.lost_frames) == (1, 0, 0, 1)


def test_unknown_type_above_the_maximum_size_is_malformed_not_unknown():
    wire = raw_wire(0x30, 1, bytes(1100))
    dec = FrameDecoder()
    dec.feed(frames(1)[0] + wire)
    assert (dec.stats.malformed_frames, dec.stats.unknown_frames) == (1, 0)


def test_counted_says_where_frames_were_lost_or_damaged():
    f = frames(6)
    bad = bytearray(f[3])
    bad[2] ^= 0x04
    dec = FrameDecoder()
    out = dec.feed(f[0] + f[2] + bytes(bad) + f[4] + f[5][:-1])
    assert [m.seq for m in out] == [0, 2, 4]
    # frame 1 lost before message 1; frame 3 failed its CRC before message 2, and shows
    # up lost when frame 4 arrives
    assert dec.counted() == [(1, protocol.LOST, 1), (2, protocol.CRC_FAILED, 1), (2, protocol.LOST, 1)]
    dec.feed(b"\x00")
    assert dec.counted() == [], "each call says what it counted itself"


def test_empty_frames_and_idle_delimiters_are_ignored():
    dec = FrameDecoder()
    out = dec.feed(b"\x00\x00" + frames(1)[0] + b"\x00" * 10)
    assert len(out) == 1 and dec.stats.errors == 0 and dec.stats.sync_bytes == 0
