"""The text line mode (docs/protocol.md, section 7): parsing, accounting, never raising."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from coildrive.bench import Event, EventKind, Info, Samples, TextLineDecoder, format_text
from coildrive.bench.protocol import MALFORMED, NO_VALUE
from coildrive.bench.textline import MAX_LINE


def test_every_line_form():
    text = (b"# a comment\n"
            b"info,84000000/420,12,0.000402832,2048,bench fw, rev 2\n"
            b"\n"
            b"1000,0\r\n"
            b" 1001 , 17 \n"
            b"on,1002\n"
            b"1002,96\n"
            b"switch,1003,1\n"
            b"temperature,1003,-12500\n"
            b"1003,181\n")
    dec = TextLineDecoder()
    out = dec.feed(text)
    assert out == [
        Info(200000, 1, 12, 0.000402832, 2048, "bench fw, rev 2"),
        Samples(1000, np.array([0, 17])),
        Event(EventKind.ON, 1002),
        Samples(1002, np.array([96])),
        Event(EventKind.SWITCH, 1003, 1),
        Event(EventKind.TEMPERATURE, 1003, -12500),
        Samples(1003, np.array([181])),
    ]
    s = dec.stats
    assert (s.frames, s.malformed_frames, s.samples, s.samples_missing) == (8, 0, 4, 0)
    assert out[0].sample_rate_hz == 200000.0


def test_decimal_and_integer_rates():
    dec = TextLineDecoder()
    a, b = dec.feed(b"info,1234.5,10\ninfo,8e3,10\ninfo,50000,10,,7\n")
    assert (a.rate_numerator, a.rate_denominator) == (2469, 2)
    assert b.rate_numerator == 50000 and b.zero_code == 7 and b.amps_per_code is None
    assert dec.stats.malformed_frames == 1        # "8e3": not one of the rate forms


def test_malformed_lines_are_counted_and_skipped():
    bad = [b"1,2,3", b"1,", b",5", b"-1,5", b"1,65536", b"4294967296,1", b"x,1", b"on",
           b"on,1,2,3", b"switch,1,2147483648", b"info,0,12", b"info,1000,17", b"info,1000",
           b"1\x00,2", b"\xff\xfe", b"on,-5", b"info,1000,12,-1"]
    dec = TextLineDecoder()
    out = dec.feed(b"\n".join(bad + [b"5,5"]) + b"\n")
    assert out == [Samples(5, np.array([5]))]
    assert dec.stats.malformed_frames == len(bad)


def test_gaps_and_restarts_in_the_index():
    dec = TextLineDecoder()
    dec.feed(b"10,1\n11,1\n15,1\n16,1\n3,1\n")
    s = dec.stats
    assert (s.samples, s.samples_missing, s.index_restarts) == (5, 3, 1)


def test_index_wraps_at_32_bits():
    dec = TextLineDecoder()
    out = dec.feed(b"4294967295,7\n0,8\n")
    assert out == [Samples(4294967295, np.array([7, 8]))]
    assert dec.stats.samples_missing == 0


def test_overlong_line_is_one_malformed_line_with_bounded_memory():
    dec = TextLineDecoder()
    for _ in range(50):
        dec.feed(b"7" * 100)
        assert len(dec._pending) <= MAX_LINE
    out = dec.feed(b"\n1,1\n")
    assert out == [Samples(1, np.array([1]))]
    assert dec.stats.malformed_frames == 1


def test_finish_does_not_read_a_last_line_without_newline():
    # docs/protocol.md section 7: a recording that stops mid-line would turn "2,2051"
    # into the valid but wrong "2,20"; the cut line is counted as tail bytes instead.
    dec = TextLineDecoder()
    assert dec.feed(b"1,1\n2,20") == [Samples(1, np.array([1]))]
    assert dec.finish() == []
    s = dec.stats
    assert (s.samples, s.tail_bytes, s.malformed_frames) == (1, 4, 0)
    dec = TextLineDecoder()
    dec.feed(b"1,1\n" + b"7" * (MAX_LINE + 50))             # an over-long unfinished line
    dec.finish()
    assert (dec.stats.tail_bytes, dec.stats.malformed_frames) == (MAX_LINE + 50, 0)


@pytest.mark.parametrize("line", [
    b"temperature,7200",          # a kind with a value, the value missing
    b"supply,7200",
    b"pause,7200",
    b"peak_end,7200,5",           # a kind without a value, given one
    b"on,7200,0",
    b"off,7200,1",
])
def test_event_lines_with_a_value_missing_or_extra_are_malformed(line):
    # docs/protocol.md section 7: on, peak_end, off are `<kind>,<index>`; the other
    # kinds are `<kind>,<index>,<value>`; anything else makes the line malformed.
    # Issue 13, point 3.
    dec = TextLineDecoder()
    out = dec.feed(b"10,1\n" + line + b"\n11,1\n")
    assert not any(isinstance(m, Event) for m in out)
    assert (dec.stats.malformed_frames, dec.stats.samples) == (1, 2)


def test_format_text_writes_a_value_exactly_for_kinds_that_take_one():
    assert format_text(Event(EventKind.SUPPLY, 7, 0)) == "supply,7,0\n"
    assert format_text(Event(EventKind.OFF, 7)) == "off,7\n"
    with pytest.raises(ValueError, match="no value"):
        format_text(Event(EventKind.ON, 7, 3))


def test_a_malformed_line_is_counted_where_it_was():
    dec = TextLineDecoder()
    out = dec.feed(b"10,1\n11,1\nbad\n12,1\n")
    assert out == [Samples(10, np.array([1, 1])), Samples(12, np.array([1]))]
    assert dec.counted() == [(1, MALFORMED, 1)]


@settings(max_examples=100, deadline=None)
@given(st.lists(st.one_of(
    st.tuples(st.integers(0, 2**32 - 1), st.lists(st.integers(0, 65535), min_size=1, max_size=20)),
    st.tuples(st.sampled_from(sorted(set(EventKind) - NO_VALUE)), st.integers(0, 2**32 - 1),
              st.integers(-2**31, 2**31 - 1)),
    st.tuples(st.sampled_from(sorted(NO_VALUE)), st.integers(0, 2**32 - 1), st.just(0)),
), max_size=20), st.lists(st.integers(0, 5000), max_size=10))
def test_format_then_decode_round_trip(items, cuts):
    messages = [Samples(i[0], np.array(i[1], dtype="<u2")) if len(i) == 2 else Event(*i)
                for i in items]
    text = "".join(format_text(m) for m in messages).encode()
    dec = TextLineDecoder()
    points = sorted({min(c, len(text)) for c in cuts} | {0, len(text)})
    out = [m for a, b in zip(points, points[1:]) for m in dec.feed(text[a:b])] + dec.finish()
    # A sample run may be split by a chunk boundary or joined to the next run that
    # continues it; compare the sample streams and the events.
    def flat(ms):
        samples = [(m.first_index + k) & 0xFFFFFFFF for m in ms if isinstance(m, Samples)
                   for k in range(len(m))]
        codes = [int(c) for m in ms if isinstance(m, Samples) for c in m.codes]
        return samples, codes, [m for m in ms if isinstance(m, Event)]
    assert flat(out) == flat(messages)
    assert dec.stats.malformed_frames == 0
    assert dec.stats.samples == sum(len(m) for m in messages if isinstance(m, Samples))
