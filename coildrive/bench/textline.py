"""The plain text line mode of the bench link, for printf-style firmware.

One record per line (``\\n``, an optional ``\\r`` before it is ignored), fields separated
by commas, integers in decimal, spaces around fields ignored::

    1234,2051                       a sample: sample index, ADC code
    on,1300                         an event: kind name, sample index
    switch,1377,1                   an event with a value: kind, index, value
    info,200000,12,0.000403,0,fw-1  sample rate Hz, ADC bits, [A per code, [zero code, [firmware id]]]
    # anything                      a comment, ignored (so are empty lines)

Event kind names are the :class:`~coildrive.bench.messages.EventKind` names in lower
case. ``on``, ``peak_end`` and ``off`` take no value; ``switch``, ``overrun``,
``supply``, ``temperature``, ``events_lost`` and ``pause`` take one (a
``pause,<index>,<value>`` line says the device sends no samples from ``index`` for
``value`` samples: they are not counted as missing). The sample rate may be an integer,
a decimal (``1234.5``) or a ratio (``84000000/420``). A line longer than
:data:`MAX_LINE` bytes or that fits none of these forms (a value missing, or a value on
a kind that takes none, included) is counted as malformed and skipped. A last line
without its newline at the end of the stream is not read (the recording may have cut
it): its bytes are counted as ``tail_bytes``.

>>> dec = TextLineDecoder()
>>> msgs = dec.feed(b"10,512\\n11,520\\non,12\\n12,530\\nbad line\\n")
>>> [type(m).__name__ for m in msgs], dec.stats.samples, dec.stats.malformed_frames
(['Samples', 'Event', 'Samples'], 3, 1)
"""

from __future__ import annotations

import math
import re
from fractions import Fraction

import numpy as np

from .messages import Event, EventKind, Info, Message, Samples
from .protocol import MALFORMED, MAX_FIRMWARE_ID, NO_VALUE, DecoderAccount, DecoderStats

MAX_LINE = 256
"""Longest line accepted, bytes (newline not counted)."""

_SAMPLE = re.compile(rb"[ \t]*([0-9]{1,10})[ \t]*,[ \t]*([0-9]{1,5})[ \t]*\r?")
_KINDS = {kind.name.lower().encode(): kind for kind in EventKind}
_U32_MAX = 0xFFFFFFFF


class TextLineDecoder(DecoderAccount):
    """Streaming decoder of the text line mode: ``feed(bytes) -> list of messages``.

    Consecutive sample lines with consecutive indices become one
    :class:`~coildrive.bench.messages.Samples` message (per call of :meth:`feed`);
    events and info lines become :class:`~coildrive.bench.messages.Event` and
    :class:`~coildrive.bench.messages.Info`. It never raises on its input.
    Counters are in :attr:`stats` (``frames`` counts good lines).
    """

    def __init__(self) -> None:
        super().__init__()
        self._pending = b""
        self._discarding = False     # inside a line longer than MAX_LINE
        self._bytes = 0
        self._lines = 0
        self._malformed = 0
        self._samples = 0
        self._tail_bytes = 0
        self._discarded = 0          # bytes of that line so far

    @property
    def stats(self) -> DecoderStats:
        """The counters so far (a frozen snapshot)."""
        return DecoderStats(bytes=self._bytes, frames=self._lines,
                            malformed_frames=self._malformed, samples=self._samples,
                            samples_missing=self._samples_missing,
                            index_restarts=self._index_restarts,
                            samples_paused=self._samples_paused, tail_bytes=self._tail_bytes)

    def feed(self, data: bytes | bytearray | memoryview) -> list[Message]:
        """Decode the complete lines in ``data``; keep a partial last line for later."""
        data = bytes(data)
        self._bytes += len(data)
        self._notes = []
        lines = data.split(b"\n")
        tail = lines.pop()
        out: list[Message] = []
        if lines:
            if self._discarding:
                self._discarding = False
                self._discarded = 0
                self._malformed_line(out)
                lines[0] = b"#"          # the rest of an over-long line: already counted
            elif self._pending:
                lines[0] = self._pending + lines[0]
            self._pending = b""
        self._lines_to_messages(lines, out)
        if self._discarding:
            self._discarded += len(tail)
            return out
        if self._pending:
            tail = self._pending + tail
        if len(tail) > MAX_LINE:
            self._discarding = True
            self._discarded = len(tail)
            self._pending = b""
        else:
            self._pending = tail
        return out

    def finish(self) -> list[Message]:
        """End of stream: a last line without its newline is not read (a recording cut
        ``1234,2051`` to ``1234,20`` would read as a valid but wrong sample); its bytes
        are counted as ``tail_bytes``. Returns no message (the list keeps the interface
        of :meth:`FrameDecoder.finish`)."""
        self._notes = []
        self._tail_bytes += self._discarded if self._discarding else len(self._pending)
        self._discarding = False
        self._discarded = 0
        self._pending = b""
        return []

    # ------------------------------------------------------------------ internals
    def _malformed_line(self, out: list[Message]) -> None:
        self._malformed += 1
        self._notes.append((len(out), MALFORMED, 1))

    def _lines_to_messages(self, lines: list[bytes], out: list[Message]) -> None:
        first = -1            # sample index of the open run
        codes: list[int] = []
        match = _SAMPLE.fullmatch

        def malformed() -> None:
            # a bad line ends the open run, so that the count sits where the line was
            nonlocal codes
            if codes:
                out.append(self._samples_message(first, codes))
                codes = []
            self._malformed_line(out)

        for line in lines:
            if len(line) > MAX_LINE:
                malformed()
                continue
            m = match(line)
            if m is not None:
                index = int(m[1])
                code = int(m[2])
                if index > _U32_MAX or code > 0xFFFF:
                    malformed()
                    continue
                self._lines += 1
                if codes and index == (first + len(codes)) & _U32_MAX:
                    codes.append(code)
                    continue
                if codes:
                    out.append(self._samples_message(first, codes))
                first = index
                codes = [code]
                continue
            stripped = line.strip()
            if not stripped or stripped.startswith(b"#"):
                continue
            message = self._record(stripped)
            if message is None:
                malformed()
                continue
            self._lines += 1
            if codes:
                out.append(self._samples_message(first, codes))
                codes = []
            out.append(message)
            if isinstance(message, Event) and message.kind == EventKind.PAUSE and message.value > 0:
                self._pause(message.index, message.value)
        if codes:
            out.append(self._samples_message(first, codes))

    def _samples_message(self, first: int, codes: list[int]) -> Samples:
        if first != self._next_index:
            self._index_jump(first)
        self._next_index = (first + len(codes)) & _U32_MAX
        self._samples += len(codes)
        array = np.array(codes, dtype="<u2")
        array.flags.writeable = False
        return Samples(first, array)

    @staticmethod
    def _record(line: bytes) -> Message | None:
        name, _, rest = line.partition(b",")
        name = name.strip().lower()
        if name == b"info":
            return _info(rest)
        kind = _KINDS.get(name)
        if kind is None:
            return None
        fields = rest.split(b",")
        if len(fields) != (1 if kind in NO_VALUE else 2):
            return None
        index = _integer(fields[0], 0, _U32_MAX)
        value = _integer(fields[1], -2**31, 2**31 - 1) if len(fields) == 2 else 0
        if index is None or value is None:
            return None
        return Event(kind, index, value)


def _integer(text: bytes, low: int, high: int) -> int | None:
    text = text.strip()
    if not re.fullmatch(rb"[-+]?[0-9]{1,11}", text):
        return None
    value = int(text)
    return value if low <= value <= high else None


def _rate(text: bytes) -> tuple[int, int] | None:
    text = text.strip()
    if not re.fullmatch(rb"[0-9]{1,10}(/[0-9]{1,10}|\.[0-9]{1,9})?", text):
        return None
    try:
        rate = Fraction(text.decode("ascii"))
    except ZeroDivisionError:   # "1/0"
        return None
    if rate <= 0:
        return None
    if rate.numerator > _U32_MAX or rate.denominator > _U32_MAX:
        rate = rate.limit_denominator(_U32_MAX)
        if not 0 < rate.numerator <= _U32_MAX:
            return None
    return rate.numerator, rate.denominator


def _info(rest: bytes) -> Info | None:
    fields = rest.split(b",", 4)
    if len(fields) < 2:
        return None
    rate = _rate(fields[0])
    bits = _integer(fields[1], 1, 16)
    if rate is None or bits is None:
        return None
    amps: float | None = None
    if len(fields) > 2 and fields[2].strip():
        try:
            amps = float(fields[2])
        except ValueError:
            return None
        if not math.isfinite(amps) or amps < 0:
            return None
        amps = amps or None
    zero = 0
    if len(fields) > 3 and fields[3].strip():
        zero = _integer(fields[3], 0, 0xFFFF)
        if zero is None:
            return None
    ident = fields[4].strip().decode("utf-8", errors="replace") if len(fields) > 4 else ""
    if len(ident.encode("utf-8")) > MAX_FIRMWARE_ID:
        return None
    return Info(rate[0], rate[1], bits, amps, zero, ident)


def format_text(message: Message) -> str:
    """The text-mode lines of a message (each ending in ``\\n``).

    >>> import numpy as np
    >>> print(format_text(Samples(7, np.array([1, 2]))), end="")
    7,1
    8,2
    >>> format_text(Event(EventKind.SWITCH, 9, 1))
    'switch,9,1\\n'
    """
    if isinstance(message, Samples):
        first = message.first_index
        return "".join(f"{(first + k) & _U32_MAX},{int(code)}\n"
                       for k, code in enumerate(message.codes))
    if isinstance(message, Event):
        kind = EventKind(message.kind)
        name = kind.name.lower()
        if kind not in NO_VALUE:
            return f"{name},{message.index},{message.value}\n"
        if message.value != 0:
            raise ValueError(f"a text-mode {name} line carries no value, not {message.value}")
        return f"{name},{message.index}\n"
    if isinstance(message, Info):
        rate = (str(message.rate_numerator) if message.rate_denominator == 1
                else f"{message.rate_numerator}/{message.rate_denominator}")
        amps = "" if message.amps_per_code is None else repr(float(message.amps_per_code))
        if "\n" in message.firmware_id or "\r" in message.firmware_id:
            raise ValueError("a text-mode firmware id cannot hold a line break")
        return f"info,{rate},{message.adc_bits},{amps},{message.zero_code},{message.firmware_id}\n"
    raise TypeError(f"{type(message).__name__} has no text-mode form")
