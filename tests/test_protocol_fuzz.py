"""Property tests of the frame decoder: arbitrary input never raises, damage is accounted
exactly.

The oracle below does not run the decoder: it cuts the damaged stream at its zero bytes
(COBS framing, Cheshire & Baker 1999: 0x00 never occurs inside a frame), recognises the
pieces that are intact copies of frames that were sent, and derives the documented
counters (docs/protocol.md, section 5) from those alone. A damaged piece that happens to
carry a valid CRC-16 (a 1 in 65536 event for random damage) is assumed away: no CRC can
catch it, so it says nothing about the decoder.
"""

from __future__ import annotations

import numpy as np
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from coildrive.bench import (CobsError, Event, EventKind, FrameDecoder, FrameEncoder, Info,
                             Samples, TextLineDecoder, cobs_decode)
from crc_reference import CCITT_FALSE, crc_model

FUZZ = settings(max_examples=150, deadline=None)


def feed_in_chunks(decoder, data: bytes, cuts: list[int]) -> list:
    out = []
    points = sorted({min(c, len(data)) for c in cuts} | {0, len(data)})
    for a, b in zip(points, points[1:]):
        out.extend(decoder.feed(data[a:b]))
    return out


# --------------------------------------------------------------------------- arbitrary bytes
@FUZZ
@given(st.binary(max_size=4000), st.lists(st.integers(0, 4000), max_size=20))
def test_random_bytes_never_raise_and_chunking_is_irrelevant(data, cuts):
    for make in (FrameDecoder, TextLineDecoder):
        whole = make()
        expected = whole.feed(data) + whole.finish()
        chunked = make()
        got = feed_in_chunks(chunked, data, cuts) + chunked.finish()
        assert got == expected
        assert chunked.stats == whole.stats
        assert whole.stats.bytes == len(data)


# --------------------------------------------------------------------------- damaged streams
codes_strategy = st.one_of(
    st.lists(st.integers(0, 4095), min_size=1, max_size=40),          # 12-bit codes
    st.lists(st.sampled_from([0, 0xFF, 0xFF00, 0xFFFF, 1]), min_size=1, max_size=40),
    st.integers(1, 300).map(lambda n: [0x0101] * n),                 # no zero: 0xFF blocks
)


@st.composite
def sent_stream(draw):
    """Messages as a device sends them: samples in order, events and info between."""
    index = draw(st.integers(0, 2**32 - 1))
    messages = []
    for _ in range(draw(st.integers(1, 25))):
        kind = draw(st.sampled_from(["samples", "samples", "samples", "event", "info"]))
        if kind == "samples":
            codes = np.array(draw(codes_strategy), dtype="<u2")
            messages.append(Samples(index, codes))
            index = (index + len(codes)) & 0xFFFFFFFF
        elif kind == "event":
            event_kind = draw(st.sampled_from(list(EventKind)))
            if event_kind == EventKind.PAUSE:   # the device skips `value` indices on purpose
                value = draw(st.integers(1, 2**20))
                messages.append(Event(event_kind, index, value))
                index = (index + value) & 0xFFFFFFFF
            else:
                messages.append(Event(event_kind, index, draw(st.integers(-2**31, 2**31 - 1))))
        else:
            messages.append(Info(draw(st.integers(1, 2**32 - 1)), draw(st.integers(1, 1000)),
                                 draw(st.integers(1, 16)), None, 0, draw(st.text(max_size=10))))
    return draw(st.integers(0, 65535)), messages


damage = st.one_of(
    st.just(("keep",)), st.just(("keep",)), st.just(("keep",)),
    st.just(("drop",)), st.just(("dup",)),
    st.tuples(st.just("flip"), st.integers(0, 10**6), st.integers(0, 7)),
    st.tuples(st.just("cut"), st.integers(1, 10**6)),
)


def damage_frame(frame: bytes, op: tuple) -> bytes:
    if op[0] == "drop":
        return b""
    if op[0] == "dup":
        return frame + frame
    if op[0] == "flip":                         # any byte, the delimiter included
        data = bytearray(frame)
        data[op[1] % len(data)] ^= 1 << op[2]
        return bytes(data)
    if op[0] == "cut":                          # lose the frame's last bytes, keep its 0x00
        body = frame[:-1]
        return body[:len(body) - 1 - op[1] % (len(body) - 1)] + b"\x00"
    return frame


def accidentally_valid(piece: bytes) -> bool:
    try:
        raw = cobs_decode(piece)
    except CobsError:
        return False
    return len(raw) >= 5 and crc_model(raw[:-2], **CCITT_FALSE) == int.from_bytes(raw[-2:], "little")


def expected_outcome(stream: bytes, originals: dict[bytes, int], messages: list):
    """What the decoder must report, from the pieces of ``stream`` alone."""
    pieces = stream.split(b"\x00")
    pieces.pop()                                 # no delimiter yet: held back, not judged
    delivered: list[int] = []
    damaged = duplicates = lost = sync = 0
    last = None
    for number, piece in enumerate(pieces):
        if not piece:
            continue
        sent = originals.get(piece)
        if sent is None:
            assume(not accidentally_valid(piece))
            if number == 0:
                sync += len(piece)               # before the first delimiter
            else:
                damaged += 1
            continue
        if sent == last:
            duplicates += 1
            continue
        if last is not None:
            lost += sent - last - 1
        last = sent
        delivered.append(sent)
    missing = 0
    next_index = None
    for i in delivered:
        m = messages[i]
        if isinstance(m, Samples):
            if next_index is not None:
                missing += (m.first_index - next_index) & 0xFFFFFFFF
            next_index = m.next_index
        elif isinstance(m, Event) and m.kind == EventKind.PAUSE:   # protocol.md section 5
            if next_index is not None:
                missing += (m.index - next_index) & 0xFFFFFFFF
            next_index = (m.index + m.value) & 0xFFFFFFFF
    return delivered, damaged, duplicates, lost, sync, missing


@FUZZ
@given(sent_stream(), st.lists(damage, min_size=25, max_size=25),
       st.binary(max_size=30).map(lambda b: b.replace(b"\x00", b"")),
       st.integers(0, 50), st.lists(st.integers(0, 20000), max_size=12))
def test_damaged_stream_is_accounted_exactly(sent, ops, garbage, cut_end, cuts):
    start_seq, messages = sent
    enc = FrameEncoder(start_seq)
    frames = [enc.encode(m) for m in messages]
    originals = {f[:-1]: i for i, f in enumerate(frames)}
    stream = garbage + b"".join(damage_frame(f, op) for f, op in zip(frames, ops))
    stream = stream[:max(0, len(stream) - cut_end)]      # the capture stops anywhere
    delivered, damaged, duplicates, lost, sync, missing = expected_outcome(stream, originals, messages)

    dec = FrameDecoder()
    out = feed_in_chunks(dec, stream, cuts)

    assert out == [messages[i] for i in delivered], "exactly the intact frames, in order"
    assert [m.seq for m in out] == [(start_seq + i) & 0xFFFF for i in delivered]
    s = dec.stats
    assert s.crc_errors + s.malformed_frames == damaged
    assert s.duplicate_frames == duplicates
    assert s.lost_frames == lost
    assert s.sync_bytes == sync
    assert s.samples == sum(len(messages[i]) for i in delivered if isinstance(messages[i], Samples))
    assert s.samples_missing == missing
    assert (s.sequence_restarts, s.index_restarts, s.unknown_frames) == (0, 0, 0)
    assert s.frames == len(delivered)


@FUZZ
@given(sent_stream(), st.sets(st.integers(0, 24)), st.lists(st.integers(0, 20000), max_size=8))
def test_dropped_frames_only_lost_count_is_the_number_dropped(sent, dropped, cuts):
    start_seq, messages = sent
    enc = FrameEncoder(start_seq)
    frames = [enc.encode(m) for m in messages]
    keep = [i for i in range(len(frames)) if i not in dropped]
    assume(keep)
    dec = FrameDecoder()
    out = feed_in_chunks(dec, b"".join(frames[i] for i in keep), cuts)
    assert len(out) == len(keep)
    assert dec.stats.lost_frames == keep[-1] - keep[0] + 1 - len(keep)
    assert dec.stats.errors == dec.stats.lost_frames


@FUZZ
@given(sent_stream(), st.lists(damage, min_size=25, max_size=25), st.integers(0, 200),
       st.lists(st.integers(0, 20000), max_size=8))
def test_end_of_stream_is_tail_bytes_or_a_whole_frame_never_an_error(sent, ops, cut_end, cuts):
    # docs/protocol.md section 6: the bytes after the last delimiter, when the stream
    # ends, are decoded when they are a whole frame, else counted as tail bytes.
    start_seq, messages = sent
    enc = FrameEncoder(start_seq)
    frames = [enc.encode(m) for m in messages]
    originals = {f[:-1]: i for i, f in enumerate(frames)}
    stream = b"".join(damage_frame(f, op) for f, op in zip(frames, ops))
    stream = stream[:max(0, len(stream) - cut_end)]
    dec = FrameDecoder()
    out = feed_in_chunks(dec, stream, cuts)
    before = dec.stats
    last = stream.rsplit(b"\x00", 1)[-1] if b"\x00" in stream else None
    assume(last is not None)                      # no delimiter at all: sync bytes instead
    out_end = dec.finish()
    after = dec.stats
    sent_index = originals.get(last)
    if last and sent_index is None:
        assume(not accidentally_valid(last))
    assert (after.crc_errors, after.malformed_frames) == (before.crc_errors, before.malformed_frames)
    if sent_index is None:
        assert out_end == [] and after.tail_bytes == len(last)
    elif out and out[-1].seq == (start_seq + sent_index) & 0xFFFF:     # a duplicate, cut
        assert out_end == [] and after.duplicate_frames == before.duplicate_frames + 1
        assert after.tail_bytes == 0
    else:
        assert out_end == [messages[sent_index]] and after.tail_bytes == 0
