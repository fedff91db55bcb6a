"""The bench link's binary frames: layout, host-side encoder, streaming decoder.

Pure bytes in, messages out: no ports, no threads. The full specification, written for
firmware authors, is ``docs/protocol.md``; in short, one frame on the wire is::

    COBS( type:u8 | seq:u16 | payload | crc:u16 ) 0x00

little-endian, with the CRC-16/CCITT-FALSE of ``type | seq | payload``. Device-to-host
frame types have the top bit clear, host-to-device types have it set; each direction
numbers its frames with its own 16-bit counter.

>>> enc = FrameEncoder()
>>> wire = enc.samples(0, [100, 200, 300]) + enc.event(EventKind.ON, 3)
>>> dec = FrameDecoder()
>>> [type(m).__name__ for m in dec.feed(wire)]
['Samples', 'Event']
>>> dec.stats.samples, dec.stats.lost_frames
(3, 0)
"""

from __future__ import annotations

import binascii
import math
import struct
from dataclasses import dataclass
from enum import IntEnum
from typing import Callable, Iterable

import numpy as np

from .framing import c_cobs_decoder, cobs_decode_or_none, cobs_encode, cobs_encoded_size
from .messages import (Command, Event, EventKind, Info, Message, Opcode, Reply, ReplyStatus,
                       Samples)

__all__ = [
    "FrameType", "HEADER_SIZE", "CRC_SIZE", "MAX_PAYLOAD", "MAX_FRAME", "MAX_ENCODED",
    "MAX_SAMPLES_PER_FRAME", "MAX_FIRMWARE_ID", "PROTOCOL_VERSION", "SEQ_HALF_RANGE",
    "encode_frame", "encode_message", "frame_payload", "FrameEncoder", "FrameDecoder",
    "DecoderStats", "DecoderAccount", "NO_VALUE", "LOST", "CRC_FAILED", "MALFORMED",
    "Samples", "Event", "EventKind", "Info", "Command", "Opcode", "Reply",
    "ReplyStatus", "Message",
]

PROTOCOL_VERSION = 1
"""Version of this layout, sent in every INFO frame."""


class FrameType(IntEnum):
    """The first byte of a frame. Top bit clear: device to host; set: host to device."""

    SAMPLES = 0x01
    EVENT = 0x02
    INFO = 0x03
    REPLY = 0x04
    COMMAND = 0x81


HEADER_SIZE = 3
"""type (1) + sequence number (2), bytes."""
CRC_SIZE = 2
"""CRC-16 at the end of a frame, bytes."""
MAX_PAYLOAD = 1024
"""Longest payload a receiver must accept, bytes."""
MAX_FRAME = HEADER_SIZE + MAX_PAYLOAD + CRC_SIZE
"""Longest frame before COBS, bytes."""
MAX_ENCODED = cobs_encoded_size(MAX_FRAME)
"""Longest frame after COBS (delimiter not counted), bytes."""
SAMPLES_HEADER = 4
"""first-sample index (u32) at the start of a SAMPLES payload, bytes."""
MAX_SAMPLES_PER_FRAME = (MAX_PAYLOAD - SAMPLES_HEADER) // 2
"""Most ADC codes in one SAMPLES frame (510)."""
MAX_FIRMWARE_ID = 64
"""Longest firmware id in an INFO frame, bytes of UTF-8."""
INFO_FIXED = 17
"""Bytes of an INFO payload before the firmware id."""
SEQ_HALF_RANGE = 0x8000
"""A sequence step of 1..32768 is forward (step - 1 frames lost); 32769..65535 is backward."""
INDEX_HALF_RANGE = 0x80000000
"""The same rule for 32-bit sample indices."""

FLAG_POSITION_SWITCH = 0x01
"""INFO flags bit 0: the board reads a position switch."""

NO_VALUE = frozenset({EventKind.ON, EventKind.PEAK_END, EventKind.OFF})
"""Event kinds whose value is unused (0 in a frame, absent from a text line and from the
capture CSV's ``event`` column); every other kind carries one."""

_EVENT = struct.Struct("<BIi")      # kind, index, value
_INFO = struct.Struct("<BBBHIIf")   # version, flags, adc_bits, zero_code, rate num, rate den, A/code
_COMMAND = struct.Struct("<BI")     # opcode, argument
_REPLY = struct.Struct("<HBBI")     # command seq, opcode, status, value
_U32 = struct.Struct("<I")
_HEAD = struct.Struct("<BH")        # type, seq

assert _EVENT.size == 9 and _INFO.size == INFO_FIXED and _COMMAND.size == 5 and _REPLY.size == 8

_crc = binascii.crc_hqx


# --------------------------------------------------------------------------- encoding
def encode_frame(frame_type: int, seq: int, payload: bytes | bytearray | memoryview) -> bytes:
    """One frame as it goes on the wire: COBS-encoded, ``0x00`` delimiter appended.

    Parameters
    ----------
    frame_type : 0..255 (a :class:`FrameType` normally).
    seq : sequence number, taken modulo 65536.
    payload : at most :data:`MAX_PAYLOAD` bytes.
    """
    if not 0 <= frame_type <= 0xFF:
        raise ValueError(f"frame type {frame_type} is not a byte")
    if len(payload) > MAX_PAYLOAD:
        raise ValueError(f"payload of {len(payload)} bytes is above {MAX_PAYLOAD}")
    raw = _HEAD.pack(frame_type, seq & 0xFFFF) + bytes(payload)
    raw += (_crc(raw, 0xFFFF)).to_bytes(2, "little")
    return cobs_encode(raw) + b"\x00"


def _u32(value: int, what: str) -> int:
    if not 0 <= value <= 0xFFFFFFFF:
        raise ValueError(f"{what} {value} does not fit an unsigned 32-bit field")
    return value


def frame_payload(message: Message) -> tuple[int, bytes]:
    """Frame type and payload bytes of a message (its ``seq`` is not used).

    Raises
    ------
    ValueError
        when a field does not fit its wire field.
    """
    if isinstance(message, Samples):
        codes = np.asarray(message.codes)
        if codes.ndim != 1 or not 1 <= len(codes) <= MAX_SAMPLES_PER_FRAME:
            raise ValueError(f"a SAMPLES frame carries 1..{MAX_SAMPLES_PER_FRAME} codes, "
                             f"not {codes.shape}")
        if codes.dtype != np.dtype("<u2"):
            if codes.dtype.kind not in "iu" or codes.min() < 0 or codes.max() > 0xFFFF:
                raise ValueError("ADC codes must be integers 0..65535")
            codes = codes.astype("<u2")
        return FrameType.SAMPLES, _U32.pack(_u32(message.first_index, "first_index")) + codes.tobytes()
    if isinstance(message, Event):
        if not 0 <= message.kind <= 0xFF:
            raise ValueError(f"event kind {message.kind} is not a byte")
        if not -2**31 <= message.value < 2**31:
            raise ValueError(f"event value {message.value} does not fit a signed 32-bit field")
        return FrameType.EVENT, _EVENT.pack(message.kind, _u32(message.index, "index"), message.value)
    if isinstance(message, Info):
        return FrameType.INFO, _info_payload(message)
    if isinstance(message, Command):
        if not 0 <= message.opcode <= 0xFF:
            raise ValueError(f"opcode {message.opcode} is not a byte")
        return FrameType.COMMAND, _COMMAND.pack(message.opcode, _u32(message.argument, "argument"))
    if isinstance(message, Reply):
        if not 0 <= message.command_seq <= 0xFFFF:
            raise ValueError(f"command_seq {message.command_seq} is not 16-bit")
        if not (0 <= message.opcode <= 0xFF and 0 <= message.status <= 0xFF):
            raise ValueError("opcode and status must be bytes")
        return FrameType.REPLY, _REPLY.pack(message.command_seq, message.opcode, message.status,
                                            _u32(message.value, "value"))
    raise TypeError(f"not a bench-link message: {message!r}")


def _info_payload(info: Info) -> bytes:
    if not 1 <= info.adc_bits <= 16:
        raise ValueError(f"adc_bits {info.adc_bits} is outside 1..16")
    if not (1 <= info.rate_numerator <= 0xFFFFFFFF and 1 <= info.rate_denominator <= 0xFFFFFFFF):
        raise ValueError("rate_numerator and rate_denominator must be 1..2**32-1")
    if not 0 <= info.zero_code <= 0xFFFF:
        raise ValueError(f"zero_code {info.zero_code} is not 16-bit")
    if not 0 <= info.protocol_version <= 0xFF:
        raise ValueError(f"protocol_version {info.protocol_version} is not a byte")
    scale = 0.0 if info.amps_per_code is None else float(info.amps_per_code)
    if not (math.isfinite(scale) and scale >= 0):
        raise ValueError(f"amps_per_code {scale} must be finite and positive (or None)")
    ident = info.firmware_id.encode("utf-8")
    if len(ident) > MAX_FIRMWARE_ID:
        raise ValueError(f"firmware_id is {len(ident)} bytes of UTF-8, at most {MAX_FIRMWARE_ID}")
    flags = FLAG_POSITION_SWITCH if info.has_position_switch else 0
    return _INFO.pack(info.protocol_version, flags, info.adc_bits, info.zero_code,
                      info.rate_numerator, info.rate_denominator, scale) + ident


def encode_message(message: Message, seq: int) -> bytes:
    """A message as one frame on the wire (COBS, delimiter), with sequence number ``seq``."""
    frame_type, payload = frame_payload(message)
    return encode_frame(frame_type, seq, payload)


class FrameEncoder:
    """Builds frames for one direction, numbering them 0, 1, 2, ... modulo 65536.

    Used by the device emulator (device to host) and by the host to send commands.

    Parameters
    ----------
    seq : sequence number of the first frame.
    """

    def __init__(self, seq: int = 0):
        self.seq = seq & 0xFFFF

    def encode(self, message: Message) -> bytes:
        """Encode ``message`` with the next sequence number (``message.seq`` is not used)."""
        wire = encode_message(message, self.seq)
        self.seq = (self.seq + 1) & 0xFFFF
        return wire

    def samples(self, first_index: int, codes: Iterable[int] | np.ndarray) -> bytes:
        """A SAMPLES frame: ``codes`` (uint16) starting at sample index ``first_index``."""
        return self.encode(Samples(first_index, np.asarray(codes)))

    def event(self, kind: int, index: int, value: int = 0) -> bytes:
        """An EVENT frame of ``kind`` at sample ``index``."""
        return self.encode(Event(kind, index, value))

    def info(self, info: Info) -> bytes:
        """An INFO frame."""
        return self.encode(info)

    def command(self, opcode: int, argument: int = 0) -> bytes:
        """A COMMAND frame (host to device)."""
        return self.encode(Command(opcode, argument))

    def reply(self, command_seq: int, opcode: int, status: int = ReplyStatus.OK,
              value: int = 0) -> bytes:
        """A REPLY frame answering the command frame numbered ``command_seq``."""
        return self.encode(Reply(command_seq, opcode, status, value))


# --------------------------------------------------------------------------- decoding
@dataclass(frozen=True)
class DecoderStats:
    """Counters of a decoder since it was made (a snapshot).

    Binary frames: every frame that arrives is delivered or counted in exactly one of
    ``crc_errors``, ``malformed_frames``, ``unknown_frames`` and ``duplicate_frames``.
    ``lost_frames`` counts sequence numbers that never arrived in a frame that passed
    every check (frames dropped on the way *and* frames that failed a check: a frame's
    sequence number is trusted only once COBS, length, CRC and payload size are right).

    Text line mode: ``frames`` counts good lines, ``malformed_frames`` bad lines; the
    sequence counters stay 0 (lines carry no sequence number).

    Attributes
    ----------
    bytes : bytes fed in.
    frames : frames (or lines) decoded into messages.
    crc_errors : frames whose CRC did not match.
    malformed_frames : not a frame: bad COBS, shorter than a header and CRC, longer than
        :data:`MAX_FRAME` (or than :data:`MAX_ENCODED` on the wire), or a known type whose
        payload does not fit its layout.
    unknown_frames : intact frames of a type this version does not know (skipped, their
        sequence numbers still counted).
    lost_frames : sequence numbers skipped, summed over all gaps.
    duplicate_frames : frames repeating the previous sequence number (dropped).
    sequence_restarts : backward sequence steps (a device restart); no loss counted.
    samples : ADC samples delivered.
    samples_missing : sample indices skipped between consecutive SAMPLES messages
        (samples in lost frames, plus samples the device dropped itself); indices a
        PAUSE event covers are not missing.
    index_restarts : backward sample-index steps (a device restart).
    sync_bytes : bytes before the first delimiter that did not form a valid frame
        (joining a stream part-way through a frame; not an error).
    samples_paused : sample indices the device said it skipped on purpose (PAUSE
        events: idle between recorded actuations; neither received nor missing).
    tail_bytes : bytes after the last delimiter, at the end of the stream
        (:meth:`FrameDecoder.finish`), that did not form a valid frame: the recording
        stopped part-way through a frame (not an error). Text mode: a last line
        without its newline (not read: it may have been cut).
    """

    bytes: int = 0
    frames: int = 0
    crc_errors: int = 0
    malformed_frames: int = 0
    unknown_frames: int = 0
    lost_frames: int = 0
    duplicate_frames: int = 0
    sequence_restarts: int = 0
    samples: int = 0
    samples_missing: int = 0
    index_restarts: int = 0
    sync_bytes: int = 0
    samples_paused: int = 0
    tail_bytes: int = 0

    @property
    def errors(self) -> int:
        """Damaged or missing frames: CRC errors + malformed frames + lost frames."""
        return self.crc_errors + self.malformed_frames + self.lost_frames


LOST, CRC_FAILED, MALFORMED = 0, 1, 2
"""What a :meth:`DecoderAccount.counted` entry counts."""


class DecoderAccount:
    """Accounting shared by :class:`FrameDecoder` and
    :class:`~coildrive.bench.textline.TextLineDecoder`.

    Sample indices: the index expected next (``None`` before the first sample), the
    samples missing (forward jumps), the index restarts (backward jumps) and the samples
    paused (PAUSE events), by the rule of :func:`index_gap`. A decoder calls
    :meth:`_index_jump` when samples do not start at the index expected next, then sets
    ``_next_index`` past them.

    Where in the message stream frames were lost, failed their CRC or were malformed:
    :meth:`counted` (the capture file places its gap and error records by it)."""

    def __init__(self) -> None:
        self._next_index: int | None = None
        self._samples_missing = 0
        self._index_restarts = 0
        self._samples_paused = 0
        self._notes: list[tuple[int, int, int]] = []

    def counted(self) -> list[tuple[int, int, int]]:
        """What the last :meth:`feed` or :meth:`finish` call counted, and where:
        ``(position, what, count)`` with ``what`` one of :data:`LOST`, :data:`CRC_FAILED`,
        :data:`MALFORMED`, and ``position`` the number of messages that call returned
        before it (the count belongs between message ``position - 1`` and message
        ``position``; ``position == len(messages)``: after the last one)."""
        return list(self._notes)

    def _index_jump(self, index: int) -> None:
        """The samples go on at ``index`` instead of at the index expected next."""
        missing, restarts = index_gap(self._next_index, index)
        self._samples_missing += missing
        self._index_restarts += restarts

    def _pause(self, index: int, value: int) -> None:
        """A PAUSE event: no samples from ``index`` for ``value`` (> 0) samples."""
        self._index_jump(index)
        self._next_index = (index + value) & 0xFFFFFFFF
        self._samples_paused += value


_UNKNOWN = object()   # _parse: an intact frame of a type this version does not know
_INSIDE, _START, _END = 0, 1, 2   # where a piece lies: between delimiters, before the first, at the end


class FrameDecoder(DecoderAccount):
    """Streaming decoder of binary frames: ``feed(bytes) -> list of messages``.

    It never raises on its input. Bytes are cut at every ``0x00``; each piece is one
    frame, checked (COBS, length, CRC, layout) and either turned into a message or
    counted (see :class:`DecoderStats`). A damaged frame costs only itself: decoding
    resumes at the next delimiter. Memory stays bounded: a piece longer than
    :data:`MAX_ENCODED` bytes is discarded as it comes.

    Sequence rule, per direction: with ``step = (seq - previous) mod 65536``, a step of
    0 is a duplicate (dropped, counted), 1..32768 is forward with ``step - 1`` frames
    lost, 32769..65535 is backward: a restart of the sender, counted, no loss. The first
    frame sets the reference. Only a frame that passed every check (or an intact frame
    of an unknown type) takes part. The same rule over 2**32 applies to sample indices.

    Parameters
    ----------
    cobs_decode : ``bytes -> bytes | None`` (``None``: not valid COBS). Default: the
        ``cobs`` package's C decoder (:func:`~coildrive.bench.framing.c_cobs_decoder`),
        else our :func:`~coildrive.bench.framing.cobs_decode_or_none`, the reference the
        tests compare it with (same result on every input; benchmarks/bench_decoder.py
        measures both).

    Examples
    --------
    >>> enc = FrameEncoder(seq=65535)
    >>> frames = [enc.samples(i * 4, [1, 2, 3, 4]) for i in range(4)]
    >>> dec = FrameDecoder()
    >>> msgs = dec.feed(frames[0] + frames[0] + frames[3])   # a duplicate, two lost, wrap
    >>> [m.seq for m in msgs], dec.stats.duplicate_frames, dec.stats.lost_frames
    ([65535, 2], 1, 2)
    """

    def __init__(self, cobs_decode: Callable[[bytes], bytes | bytearray | None] | None = None) -> None:
        super().__init__()
        self._cobs = cobs_decode or c_cobs_decoder() or cobs_decode_or_none
        self._pending = b""
        self._discarding = False   # inside a piece that grew past MAX_ENCODED
        self._discarded = 0        # bytes of that piece so far
        self._synced = False       # a delimiter has been seen
        self._last_seq: list[int | None] = [None, None]   # device->host, host->device
        self._bytes = 0
        self._frames = 0
        self._crc_errors = 0
        self._malformed = 0
        self._unknown = 0
        self._lost = 0
        self._duplicates = 0
        self._restarts = 0
        self._samples = 0
        self._sync_bytes = 0
        self._tail_bytes = 0

    @property
    def stats(self) -> DecoderStats:
        """The counters so far (a frozen snapshot)."""
        return DecoderStats(self._bytes, self._frames, self._crc_errors, self._malformed,
                            self._unknown, self._lost, self._duplicates, self._restarts,
                            self._samples, self._samples_missing, self._index_restarts,
                            self._sync_bytes, self._samples_paused, self._tail_bytes)

    @property
    def pending_bytes(self) -> int:
        """Bytes held back waiting for their delimiter."""
        return len(self._pending)

    def feed(self, data: bytes | bytearray | memoryview) -> list[Message]:
        """Decode whatever frames ``data`` completes; keep the rest for the next call.

        Parameters
        ----------
        data : raw bytes from the link, any length, any content.

        Returns
        -------
        the messages in the order their frames arrived (:meth:`counted` says where
        frames were lost or damaged between them).
        """
        data = bytes(data)
        self._bytes += len(data)
        self._notes = []
        out: list[Message] = []
        pieces = data.split(b"\x00")
        tail = pieces.pop()
        if pieces:
            first = pieces[0]
            if self._discarding:
                self._end_discard(len(first), out)
            else:
                if self._pending:
                    first = self._pending + first
                if first:
                    self._frame(first, out, _INSIDE if self._synced else _START)
            self._pending = b""
            self._synced = True
            frame = self._frame
            for piece in pieces[1:]:
                if piece:
                    frame(piece, out)
        if self._discarding:
            self._discarded += len(tail)
        else:
            if self._pending:
                tail = self._pending + tail
            if len(tail) > MAX_ENCODED:
                self._discarding = True
                self._discarded = len(tail)
                self._pending = b""
            else:
                self._pending = tail
        return out

    def finish(self) -> list[Message]:
        """End of stream: the bytes after the last delimiter.

        A whole frame whose delimiter never came is decoded (a recorder stopped right
        before the ``0x00``). Bytes that fail COBS, length or CRC are what the recording
        cut off part-way through a frame: counted as ``tail_bytes``, not as an error
        (like ``sync_bytes`` at the start). The decoder can be fed again afterwards (as
        after a delimiter).
        """
        self._notes = []
        out: list[Message] = []
        if self._discarding:
            self._discarding = False
            self._tail_bytes += self._discarded
            self._discarded = 0
        elif self._pending:
            self._frame(self._pending, out, _END if self._synced else _START)
        self._pending = b""
        self._synced = True
        return out

    def _end_discard(self, more: int, out: list[Message]) -> None:
        """A piece longer than MAX_ENCODED has ended: one malformed frame (or sync bytes)."""
        self._discarding = False
        if self._synced:
            self._bad(MALFORMED, out, b"")
        else:
            self._sync_bytes += self._discarded + more
        self._discarded = 0

    def _bad(self, what: int, out: list[Message], piece: bytes, where: int = _INSIDE) -> None:
        """Count a piece that is no frame: a CRC failure or a malformed frame, or, at the
        start or the end of the stream (COBS, length, CRC), sync or tail bytes."""
        if where == _START:
            self._sync_bytes += len(piece)
        elif where == _END:
            self._tail_bytes += len(piece)
        elif what == CRC_FAILED:
            self._crc_errors += 1
            self._notes.append((len(out), CRC_FAILED, 1))
        else:
            self._malformed += 1
            self._notes.append((len(out), MALFORMED, 1))

    # The hot path: one call per frame. Checks in the order of docs/protocol.md section 6;
    # the sequence number is read only from a frame that passed them all.
    def _frame(self, piece: bytes, out: list[Message], where: int = _INSIDE) -> None:
        raw = self._cobs(piece) if len(piece) <= MAX_ENCODED else None
        n = len(raw) if raw is not None else 0
        if not HEADER_SIZE + CRC_SIZE <= n <= MAX_FRAME:
            self._bad(MALFORMED, out, piece, where)
            return
        if _crc(raw[:-2], 0xFFFF) != raw[-2] | raw[-1] << 8:
            self._bad(CRC_FAILED, out, piece, where)
            return
        frame_type = raw[0]
        seq = raw[1] | raw[2] << 8
        size = n - HEADER_SIZE - CRC_SIZE
        message = None
        if frame_type == 0x01:   # SAMPLES: built after the sequence check
            count = (size - SAMPLES_HEADER) >> 1
            if count < 1 or size & 1:
                self._bad(MALFORMED, out, piece)
                return
        else:
            message = _parse(frame_type, raw, size, seq)
            if message is None:
                self._bad(MALFORMED, out, piece)
                return
        direction = frame_type >> 7
        last = self._last_seq[direction]
        if last is not None:
            step = (seq - last) & 0xFFFF
            if step == 0:
                self._duplicates += 1
                return
            if step <= SEQ_HALF_RANGE:
                if step > 1:
                    self._lost += step - 1
                    self._notes.append((len(out), LOST, step - 1))
            else:
                self._restarts += 1
        self._last_seq[direction] = seq
        if frame_type == 0x01:
            first = raw[3] | raw[4] << 8 | raw[5] << 16 | raw[6] << 24
            codes = np.frombuffer(raw, dtype="<u2", count=count, offset=HEADER_SIZE + SAMPLES_HEADER)
            codes.flags.writeable = False
            if first != self._next_index:
                self._index_jump(first)
            self._next_index = (first + count) & 0xFFFFFFFF
            self._samples += count
            self._frames += 1
            out.append(Samples(first, codes, seq))
            return
        if message is _UNKNOWN:
            self._unknown += 1
            return
        if type(message) is Event and message.kind == EventKind.PAUSE and message.value > 0:
            self._pause(message.index, message.value)
        self._frames += 1
        out.append(message)


def _parse(frame_type: int, raw: bytes | bytearray, size: int, seq: int) -> Message | object | None:
    """The message of an intact frame other than SAMPLES; ``None`` when its payload does
    not fit its type (malformed), :data:`_UNKNOWN` for a type this version does not know."""
    if frame_type == FrameType.EVENT:
        if size != _EVENT.size:
            return None
        kind, index, value = _EVENT.unpack_from(raw, HEADER_SIZE)
        # A kind of a later version is delivered as a plain int.
        return Event(_known(EventKind, kind), index, value, seq)
    if frame_type == FrameType.INFO:
        return _decode_info(raw, size, seq)
    if frame_type == FrameType.COMMAND:
        if size != _COMMAND.size:
            return None
        opcode, argument = _COMMAND.unpack_from(raw, HEADER_SIZE)
        return Command(_known(Opcode, opcode), argument, seq)
    if frame_type == FrameType.REPLY:
        if size != _REPLY.size:
            return None
        command_seq, opcode, status, value = _REPLY.unpack_from(raw, HEADER_SIZE)
        return Reply(command_seq, _known(Opcode, opcode), _known(ReplyStatus, status), value, seq)
    return _UNKNOWN


def index_gap(next_index: int | None, index: int) -> tuple[int, int]:
    """``(samples missing, index restarts)`` when a receiver that expects ``next_index``
    (``None`` before any sample) sees the stream go on at ``index``: with ``step = (index
    - next_index) mod 2**32``, a forward step (below :data:`INDEX_HALF_RANGE`) lost the
    ``step`` indices between, a backward one is a restart of the sender."""
    if next_index is None or index == next_index:
        return 0, 0
    gap = (index - next_index) & 0xFFFFFFFF
    return (gap, 0) if gap < INDEX_HALF_RANGE else (0, 1)


def _known(enum: type[IntEnum], value: int) -> int:
    try:
        return enum(value)
    except ValueError:
        return value


def _decode_info(raw: bytearray, size: int, seq: int) -> Info | None:
    if not INFO_FIXED <= size <= INFO_FIXED + MAX_FIRMWARE_ID:
        return None
    version, flags, bits, zero, num, den, scale = _INFO.unpack_from(raw, HEADER_SIZE)
    if not 1 <= bits <= 16 or num == 0 or den == 0:
        return None
    start = HEADER_SIZE + INFO_FIXED
    ident = raw[start:start + size - INFO_FIXED].decode("utf-8", errors="replace")
    amps = scale if math.isfinite(scale) and scale > 0 else None
    return Info(num, den, bits, amps, zero, ident, bool(flags & FLAG_POSITION_SWITCH), version, seq)
