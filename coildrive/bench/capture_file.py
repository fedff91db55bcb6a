"""The capture file: what a bench capture writes as it goes and what analysis reads.

Layout (version 1, all little-endian; full description in ``docs/capture-format.md``)::

    bytes 0..4095   header: UTF-8 JSON text, padded with spaces to 4096 bytes, ending
                    in a newline; rewritten in place when the device reports itself
    then            records of 8 bytes: kind u8 | aux u8 | value u16 | index u32

Record kinds (:class:`RecordKind`): ``1`` one ADC sample (``value`` = code, ``index`` =
sample index); ``2`` an event (``aux`` = event kind as on the bench link: 1 on, 2 peak
end, 3 off, 4 position switch, ..., 9 pause; ``value`` = its value when 0..65535); ``3`` frames
lost on the link (``value`` = how many); ``4`` frame errors (``aux`` 0 = CRC failures,
1 = malformed frames; ``value`` = how many); ``5`` the high 16 bits of the preceding
event's value, for values outside 0..65535 (the event's value is then the signed 32-bit
``value | high << 16``). Gap and error records sit before the first sample received
after the frames they count, and carry its index (one past the last sample when none
came after them).

A code is read as the middle of its ADC step (the converter truncates): the current is
``(code - zero_code + 0.5) * amps_per_code``, and zero at or below ``zero_code``.

A writer that is killed loses only what it had not flushed (it flushes at least every
``flush_interval`` s from a background thread) and may leave a partial last record,
which the reader drops and counts. Sample indices are the device's, modulo 2**32; the
reader unwraps them to 64-bit integers.

>>> import tempfile, os
>>> path = os.path.join(tempfile.mkdtemp(), "run.cdcap")
>>> with CaptureWriter(path, sample_rate_hz=200e3, adc_bits=12) as w:
...     w.append_event(0, 1)
...     w.append_samples(0, [10, 250, 480])
>>> cap = read_capture(path)
>>> cap.code.tolist(), cap.index.tolist(), [e.name for e in cap.events]
([10, 250, 480], [0, 1, 2], ['on'])
"""

from __future__ import annotations

import dataclasses
import io
import json
import math
import os
import threading
from dataclasses import dataclass, field
from enum import IntEnum
from pathlib import Path
from typing import Any, Iterable

import numpy as np

from ..errors import InputError
from .messages import Event, EventKind, Info, Samples
from .protocol import MAX_SAMPLES_PER_FRAME, NO_VALUE

FORMAT_NAME = "coildrive-capture"
FORMAT_VERSION = 1
HEADER_SIZE = 4096
"""Bytes of the header block (version 1)."""
RECORD = np.dtype([("kind", "u1"), ("aux", "u1"), ("value", "<u2"), ("index", "<u4")])
"""One record: kind u8, aux u8, value u16, index u32 (little-endian, 8 bytes)."""
RECORD_SIZE = RECORD.itemsize
DEFAULT_FLUSH_INTERVAL = 0.05
"""Seconds between background flushes (half the 100 ms a kill may lose at most)."""
_MAGIC = b'{"format": "coildrive-capture"'
_U32 = 1 << 32
_HALF = 1 << 31


class RecordKind(IntEnum):
    """The ``kind`` byte of a record."""

    SAMPLE = 1
    EVENT = 2
    GAP = 3
    ERRORS = 4
    EVENT_HIGH = 5


class ErrorKind(IntEnum):
    """The ``aux`` byte of an :attr:`RecordKind.ERRORS` record."""

    CRC = 0
    MALFORMED = 1


# --------------------------------------------------------------------------- metadata
@dataclass(frozen=True)
class CaptureMeta:
    """What the header says about a capture. SI units, temperatures in degC.

    Every field may be unknown (``None``): the board file or the command line fills it.

    Attributes
    ----------
    sample_rate_hz : ADC samples per second.
    adc_bits : ADC resolution.
    amps_per_code : coil current in A per ADC code above ``zero_code``.
    zero_code : ADC code that reads zero current.
    sense_position : ``"coil"`` (reads the coil current always) or ``"switch"`` (under
        the switch: reads zero while the switch is off).
    board, drive : names of the board profile and drive file, if known.
    firmware_id : what the device reports about its firmware.
    has_position_switch : the board reads a position switch (SWITCH events may come).
    supply_v, coil_temp_c : operating point of the capture (bus voltage in V, coil
        temperature in degC), if known.
    peak_time_s, hold_duty, hold_frequency_hz : drive settings the device ran, if known.
    started_utc : ISO 8601 time the capture started.
    link : how the samples came (e.g. ``"frames"``, ``"text"``, ``"synthetic"``).
    extra : anything else, JSON-serialisable (keys a newer writer added land here too).
    """

    sample_rate_hz: float | None = None
    adc_bits: int | None = None
    amps_per_code: float | None = None
    zero_code: int = 0
    sense_position: str | None = None
    board: str | None = None
    drive: str | None = None
    firmware_id: str | None = None
    has_position_switch: bool = False
    supply_v: float | None = None
    coil_temp_c: float | None = None
    peak_time_s: float | None = None
    hold_duty: float | None = None
    hold_frequency_hz: float | None = None
    started_utc: str | None = None
    link: str | None = None
    extra: dict = field(default_factory=dict)

    def replace(self, **changes: Any) -> "CaptureMeta":
        """A copy with ``changes`` applied (unknown names raise ``TypeError``)."""
        _check_meta_keys(changes)
        return dataclasses.replace(self, **changes)

    def to_json_dict(self) -> dict:
        """The header's metadata keys (``None`` kept as JSON null)."""
        return dataclasses.asdict(self)


_META_FIELDS = tuple(f.name for f in dataclasses.fields(CaptureMeta))


def _check_meta_keys(meta: dict) -> None:
    unknown = sorted(set(meta) - set(_META_FIELDS))
    if unknown:
        raise TypeError(f"unknown capture metadata {', '.join(unknown)}; expected: "
                        f"{', '.join(_META_FIELDS)}")


def _header_bytes(meta: CaptureMeta, size: int = HEADER_SIZE) -> bytes:
    doc = {"format": FORMAT_NAME, "version": FORMAT_VERSION, "header_size": size,
           "record": "kind u8, aux u8, value u16, index u32 (little-endian)",
           **meta.to_json_dict()}
    text = json.dumps(doc, allow_nan=False).encode("utf-8")
    if not text.startswith(_MAGIC):  # json.dumps keeps insertion order
        raise AssertionError("header must start with the format name")
    if len(text) > size - 1:
        raise ValueError(f"capture header is {len(text)} bytes of JSON, at most {size - 1}")
    return text + b" " * (size - 1 - len(text)) + b"\n"


# --------------------------------------------------------------------------- writing
class CaptureWriter:
    """Appends a capture to a file as it arrives; safe to kill at any moment.

    Records are buffered in memory and written to the file by :meth:`flush`, which a
    background thread calls every ``flush_interval`` s (so a ``kill -9`` loses at most
    that much); :meth:`close` flushes, writes the final header and ``fsync``s. All
    methods are thread-safe.

    Parameters
    ----------
    path : file to create (an existing file is replaced).
    flush_interval : s between background flushes; ``None``: only explicit flushes.
    **meta : initial :class:`CaptureMeta` fields.
    """

    def __init__(self, path: str | os.PathLike, *, flush_interval: float | None = DEFAULT_FLUSH_INTERVAL,
                 **meta: Any):
        _check_meta_keys(meta)
        self.path = Path(path)
        self._meta = CaptureMeta(**meta)
        header = _header_bytes(self._meta)  # fail on bad metadata before creating the file
        self._lock = threading.Lock()
        self._buffer = bytearray()
        self._file = open(self.path, "wb", buffering=0)
        try:
            self._file.write(header)
        except BaseException:   # a full disk: close, the caller removes the file
            self._file.close()
            raise
        self._records = 0
        self._closed = False
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        if flush_interval is not None:
            if not flush_interval > 0:
                raise ValueError(f"flush_interval {flush_interval} must be > 0 s")
            self._thread = threading.Thread(target=self._flusher, args=(float(flush_interval),),
                                            name="capture-flush", daemon=True)
            self._thread.start()

    # ------------------------------------------------------------------ appending
    @property
    def meta(self) -> CaptureMeta:
        """The metadata as it stands."""
        return self._meta

    @property
    def records(self) -> int:
        """Records appended so far (flushed or not)."""
        return self._records

    def append_samples(self, first_index: int, codes: Iterable[int] | np.ndarray) -> None:
        """Consecutive ADC codes (0..65535), the first at sample index ``first_index``."""
        codes = np.asarray(codes)
        if codes.ndim != 1:
            raise ValueError("codes must be one-dimensional")
        if codes.size and (codes.min() < 0 or codes.max() > 0xFFFF):
            raise ValueError("ADC codes must be 0..65535")
        rec = np.empty(codes.size, RECORD)
        rec["kind"] = RecordKind.SAMPLE
        rec["aux"] = 0
        rec["value"] = codes
        rec["index"] = (int(first_index) + np.arange(codes.size, dtype=np.int64)) % _U32
        self._add(rec.tobytes())

    def append_event(self, index: int, kind: int, value: int = 0) -> None:
        """An event (:class:`~coildrive.bench.messages.EventKind`) at sample ``index``.

        ``value`` is a signed 32-bit integer (for SWITCH the new level, 1 = seated).
        """
        if not 0 <= int(kind) <= 0xFF:
            raise ValueError(f"event kind {kind} is not a byte")
        value = int(value)
        if not -_HALF <= value < _U32:
            raise ValueError(f"event value {value} does not fit in 32 bits")
        rec = [(RecordKind.EVENT, int(kind), value & 0xFFFF, int(index) % _U32)]
        if not 0 <= value <= 0xFFFF:
            rec.append((RecordKind.EVENT_HIGH, 0, (value >> 16) & 0xFFFF, int(index) % _U32))
        self._add(np.array(rec, RECORD).tobytes())

    def append_gap(self, index: int, frames: int) -> None:
        """``frames`` frames lost on the link before sample ``index`` arrived."""
        self._counts(RecordKind.GAP, 0, index, frames)

    def append_errors(self, index: int, crc: int = 0, malformed: int = 0) -> None:
        """Frames that failed their CRC / were malformed, noticed around sample ``index``."""
        self._counts(RecordKind.ERRORS, ErrorKind.CRC, index, crc)
        self._counts(RecordKind.ERRORS, ErrorKind.MALFORMED, index, malformed)

    def append_message(self, message: Samples | Event | Info) -> None:
        """A decoded bench-link message: samples, an event, or the device's INFO."""
        if isinstance(message, Samples):
            self.append_samples(message.first_index, message.codes)
        elif isinstance(message, Event):
            self.append_event(message.index, message.kind, message.value)
        elif isinstance(message, Info):
            self.update_header(**meta_from_info(message))
        else:
            raise TypeError(f"{type(message).__name__} is not kept in a capture file")

    def update_header(self, **meta: Any) -> None:
        """Change metadata fields and rewrite the header block in place (now)."""
        _check_meta_keys(meta)
        with self._lock:
            new = dataclasses.replace(self._meta, **meta)
            header = _header_bytes(new)
            self._require_open()
            self._write_buffer()
            self._file.seek(0)
            self._file.write(header)
            self._file.seek(0, os.SEEK_END)
            self._meta = new

    def flush(self) -> None:
        """Write everything buffered to the file (the OS has it: a kill no longer loses it)."""
        with self._lock:
            if not self._closed:
                self._write_buffer()

    def close(self) -> None:
        """Flush, stop the background flusher, fsync and close. Safe to call twice."""
        self._stop.set()
        if self._thread is not None and self._thread is not threading.current_thread():
            self._thread.join()
        with self._lock:
            if self._closed:
                return
            try:
                self._write_buffer()
                self._file.flush()
                os.fsync(self._file.fileno())
            finally:
                self._file.close()
                self._closed = True

    def __enter__(self) -> "CaptureWriter":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------------ internals
    def _counts(self, kind: int, aux: int, index: int, count: int) -> None:
        count = int(count)
        if count < 0:
            raise ValueError(f"count {count} is negative")
        if count == 0:
            return
        full, rest = divmod(count, 0xFFFF)
        values = [0xFFFF] * full + ([rest] if rest else [])
        rec = np.array([(kind, aux, v, int(index) % _U32) for v in values], RECORD)
        self._add(rec.tobytes())

    def _add(self, data: bytes) -> None:
        with self._lock:
            self._require_open()
            self._buffer += data
            self._records += len(data) // RECORD_SIZE

    def _require_open(self) -> None:
        if self._closed:
            raise ValueError(f"capture file {self.path} is closed")

    def _write_buffer(self) -> None:
        if self._buffer:
            view = memoryview(self._buffer)
            done = 0
            while done < len(view):
                done += self._file.write(view[done:])
            view.release()
            self._buffer.clear()

    def _flusher(self, interval: float) -> None:
        while not self._stop.wait(interval):
            try:
                self.flush()
            except (OSError, ValueError):  # the disk is full or the file was closed:
                return                     # close() reports it to the owner


def meta_from_info(info: Info) -> dict:
    """Capture metadata fields from the device's INFO message."""
    meta: dict = {"sample_rate_hz": info.sample_rate_hz, "adc_bits": info.adc_bits,
                  "zero_code": info.zero_code, "has_position_switch": info.has_position_switch}
    if info.amps_per_code is not None:
        meta["amps_per_code"] = float(info.amps_per_code)
    if info.firmware_id:
        meta["firmware_id"] = info.firmware_id
    return meta


# --------------------------------------------------------------------------- reading
@dataclass(frozen=True)
class CaptureEvent:
    """An event at sample ``index`` (unwrapped): ``kind`` as :class:`EventKind`, ``value``."""

    index: int
    kind: int
    value: int = 0

    @property
    def name(self) -> str:
        """``on``, ``peak_end``, ``off``, ``switch``, ... or ``kind-N`` for unknown kinds."""
        try:
            return EventKind(self.kind).name.lower()
        except ValueError:
            return f"kind-{self.kind}"


@dataclass(frozen=True)
class Gap:
    """``frames`` frames lost on the link before sample ``index`` (unwrapped) arrived."""

    index: int
    frames: int


@dataclass(frozen=True, eq=False)
class Capture:
    """A capture in memory: samples, events and what the header says.

    Attributes
    ----------
    index : int64 sample indices, increasing (the device's, unwrapped; after a device
        restart they continue from the last index + 1, see ``restarts``).
    code : ADC codes (uint16), one per index.
    events : events in file order.
    gaps : lost-frame records.
    meta : :class:`CaptureMeta`.
    crc_errors, malformed_frames : frame errors the capture counted.
    restarts : times the sample index went backwards (the device restarted).
    truncated_bytes : bytes of a partial last record dropped (a writer killed mid-write);
        text mode: of a last line without its newline (not read: it may have been cut).
    source : where it came from (a path, or ``"memory"``).
    """

    index: np.ndarray
    code: np.ndarray
    events: tuple[CaptureEvent, ...] = ()
    gaps: tuple[Gap, ...] = ()
    meta: CaptureMeta = field(default_factory=CaptureMeta)
    crc_errors: int = 0
    malformed_frames: int = 0
    restarts: int = 0
    truncated_bytes: int = 0
    source: str = "memory"

    def __len__(self) -> int:
        return int(self.code.size)

    @classmethod
    def from_codes(cls, codes: Iterable[int] | np.ndarray, *, first_index: int = 0,
                   index: np.ndarray | None = None, events: Iterable[CaptureEvent] = (),
                   gaps: Iterable[Gap] = (), source: str = "memory", **meta: Any) -> "Capture":
        """Build a capture in memory from ADC codes (consecutive from ``first_index``, or at
        the increasing indices ``index``) and :class:`CaptureMeta` fields."""
        _check_meta_keys(meta)
        code = np.ascontiguousarray(codes, dtype=np.uint16)
        if index is None:
            idx = int(first_index) + np.arange(code.size, dtype=np.int64)
        else:
            idx = np.ascontiguousarray(index, dtype=np.int64)
            if idx.shape != code.shape:
                raise ValueError("index and codes must have the same length")
            if idx.size > 1 and np.any(np.diff(idx) <= 0):
                raise ValueError("sample indices must increase")
        return cls(idx, code, tuple(events), tuple(gaps), CaptureMeta(**meta), source=source)

    def with_meta(self, **changes: Any) -> "Capture":
        """A copy with metadata fields changed (arrays shared)."""
        return dataclasses.replace(self, meta=self.meta.replace(**changes))

    # ------------------------------------------------------------------ derived
    @property
    def sample_period_s(self) -> float:
        """Seconds per sample; raises :class:`InputError` when the rate is unknown."""
        return 1.0 / self._rate()

    @property
    def time(self) -> np.ndarray:
        """Time of each sample in s since sample index 0."""
        return self.index / self._rate()

    @property
    def current(self) -> np.ndarray:
        """Coil-sense current of each sample in A (:func:`code_current`)."""
        apc = self.meta.amps_per_code
        if apc is None:
            raise InputError(self.source, "amps_per_code",
                             "the capture does not say how many A one ADC code is; give a board (--board)")
        return code_current(self.code, self.meta.zero_code, apc)

    @property
    def samples_missing(self) -> int:
        """Sample indices skipped between received samples (lost frames, device overruns).

        Indices that a ``pause`` event covers (the device skipped them on purpose) are not
        missing."""
        if self.index.size < 2:
            return 0
        skipped = int(self.index[-1] - self.index[0] + 1 - self.index.size)
        return skipped - self.samples_paused

    @property
    def samples_paused(self) -> int:
        """Sample indices between received samples that ``pause`` events cover."""
        pauses = [(e.index, e.index + e.value) for e in self.events
                  if e.kind == EventKind.PAUSE and e.value > 0]
        if not pauses or self.index.size < 2:
            return 0
        # merge the paused ranges, then the coverage below x is a piecewise-linear function
        pauses.sort()
        merged: list[list[int]] = []
        for a, b in pauses:
            if merged and a <= merged[-1][1]:
                merged[-1][1] = max(merged[-1][1], b)
            else:
                merged.append([a, b])
        lo = np.array([m[0] for m in merged], np.int64)
        hi = np.array([m[1] for m in merged], np.int64)
        below = np.concatenate([[0], np.cumsum(hi - lo)])

        def covered(x: np.ndarray) -> np.ndarray:   # paused indices < x
            k = np.searchsorted(lo, x, side="right")
            prev = np.maximum(k - 1, 0)
            inside = np.where(k > 0, np.clip(x - lo[prev], 0, hi[prev] - lo[prev]), 0)
            return below[np.maximum(k - 1, 0)] * (k > 0) + inside

        step = np.diff(self.index)
        g = np.flatnonzero(step > 1)
        if g.size == 0:
            return 0
        start, end = self.index[g] + 1, self.index[g + 1]     # each gap: [start, end)
        return int(np.sum(covered(end) - covered(start)))

    @property
    def lost_frames(self) -> int:
        """Frames lost on the link, summed over :attr:`gaps`."""
        return sum(g.frames for g in self.gaps)

    def _rate(self) -> float:
        rate = self.meta.sample_rate_hz
        if rate is None or not rate > 0:
            raise InputError(self.source, "sample_rate_hz",
                             "the capture does not say its sample rate; give a board (--board)")
        return float(rate)

    def to_csv(self) -> str:
        """CSV text: ``index,time_s,adc_code,current_a,event``, a row per sample and a
        row per event index that has no sample (``docs/capture-format.md``, *CSV*).

        ``current_a`` is the code read mid-step (:func:`code_current`), empty when the
        scaling is unknown; ``event`` holds the events stamped at that index in file
        order, joined with ``;``: the name (``on``, ``peak_end``, ``off``) or, for kinds
        that carry a value, ``name=value`` (``switch=1``, ``supply=2931``, ``kind-12=5``).
        Rows without a sample (an event in a gap, in a pause or after the last sample)
        have ``adc_code`` and ``current_a`` empty.
        """
        index = self.index
        sampled = np.ones(index.size, bool)
        event_index = np.array([e.index for e in self.events], np.int64)
        alone = np.setdiff1d(event_index, index)
        if alone.size:
            at = np.searchsorted(index, alone)
            index = np.insert(index, at, alone)
            sampled = np.insert(sampled, at, False)
        rows = index.size
        labels = np.full(rows, "", dtype=object)
        for e, k in zip(self.events, np.searchsorted(index, event_index)):
            tag = e.name if e.kind in NO_VALUE else f"{e.name}={e.value}"
            labels[k] = f"{labels[k]};{tag}" if labels[k] else tag
        buf = io.StringIO()
        buf.write("index,time_s,adc_code,current_a,event\n")
        idx = index.astype(str)
        time_s = np.char.mod("%.9g", index / self._rate())
        codes = np.full(rows, "", dtype=object)
        codes[sampled] = self.code.astype(str)
        amps = np.full(rows, "", dtype=object)
        if self.meta.amps_per_code is not None:
            amps[sampled] = np.char.mod("%.6g", self.current)
        rows = [",".join(r) for r in zip(idx, time_s, codes, amps, labels)]
        buf.write("\n".join(rows))
        if rows:
            buf.write("\n")
        return buf.getvalue()


def code_current(code: np.ndarray, zero_code: int, amps_per_code: float) -> np.ndarray:
    """Current in A of current-sense ADC codes, each read as the middle of its step: a
    truncating converter (the design's ADC convention) gives code ``k`` for inputs from
    ``k`` to ``k + 1`` steps, so ``(code - zero_code + 0.5) * amps_per_code``; a code at
    or below ``zero_code`` reads zero (``docs/capture-format.md``, the same reading as
    :mod:`coildrive.bench.analysis`).

    >>> code_current(np.array([0, 1, 10]), 0, 0.01).tolist()
    [0.0, 0.015, 0.105]
    """
    c = np.asarray(code, np.float64) - zero_code
    return np.where(c > 0, c + 0.5, 0.0) * amps_per_code


def _unwrap(raw: np.ndarray) -> tuple[np.ndarray, int]:
    """Unwrap u32 sample indices to int64: forward steps as they are, modulo 2**32; a
    backward step (a device restart) continues from the previous index + 1."""
    if raw.size == 0:
        return raw.astype(np.int64), 0
    step = np.diff(raw.astype(np.int64)) % _U32
    step = np.where(step >= _HALF, step - _U32, step)
    back = step <= 0
    step[back] = 1
    out = np.empty(raw.size, np.int64)
    out[0] = int(raw[0])
    np.cumsum(step, out=out[1:])
    out[1:] += int(raw[0])
    return out, int(np.count_nonzero(back))


def _nearest(raw_index: int, position: int, sample_pos: np.ndarray, sample_raw: np.ndarray,
             sample_idx: np.ndarray) -> int:
    """Unwrap an event's u32 index against the sample records nearest it in the file."""
    if sample_pos.size == 0:
        return int(raw_index)
    k = int(np.searchsorted(sample_pos, position))
    k = min(max(k - 1, 0), sample_pos.size - 1)
    d = (int(raw_index) - int(sample_raw[k])) % _U32
    if d >= _HALF:
        d -= _U32
    return int(sample_idx[k]) + d


#: Sample indices a jump may skip beyond what the file's lost frames and overruns explain
#: (0.33 s at 200 kS/s): a device's own hiccups. A larger unexplained jump is a damaged
#: record, and would make the analysis and the check span, and allocate for, indices the
#: file never held.
JUMP_FLOOR = 1 << 16


def _offset(pos: int) -> str:
    return f"byte {HEADER_SIZE + int(pos) * RECORD_SIZE}"


def _check_structure(rec: np.ndarray, meta: CaptureMeta, source: str) -> None:
    """Record fields that only a damaged file breaks (the writer never makes them)."""
    kind, aux, value = rec["kind"], rec["aux"], rec["value"]

    def first(mask: np.ndarray, what) -> None:
        bad = np.flatnonzero(mask)
        if bad.size:
            pos = int(bad[0])
            raise InputError(source, _offset(pos), f"{what(pos)} ({bad.size} such record(s); "
                             "a damaged or misaligned capture file)")
    sample = kind == RecordKind.SAMPLE
    first(sample & (aux != 0), lambda p: f"a sample record with aux byte {aux[p]}, expected 0")
    if meta.adc_bits is not None:
        top = (1 << meta.adc_bits) - 1
        first(sample & (value > top), lambda p: f"ADC code {value[p]} is above the "
              f"{meta.adc_bits}-bit ADC's {top}")
    high = np.flatnonzero(kind == RecordKind.EVENT_HIGH)
    orphan = np.zeros(kind.size, bool)
    orphan[high] = (high == 0) | (kind[np.maximum(high - 1, 0)] != RecordKind.EVENT) | (aux[high] != 0)
    first(orphan, lambda p: "an event's high-16-bit record that follows no event")
    gap = kind == RecordKind.GAP
    first(gap & ((aux != 0) | (value == 0)), lambda p: f"a lost-frames record with aux {aux[p]} "
          f"and count {value[p]}, expected aux 0 and a count >= 1")
    first((kind == RecordKind.ERRORS) & (aux > ErrorKind.MALFORMED),
          lambda p: f"a frame-errors record of type {aux[p]}, expected 0 (CRC) or 1 (malformed)")


def _pause_cover(pauses: list[tuple[int, int]], a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Indices in each ``[a[k], b[k])`` that the ``(start, end)`` pauses cover (overlapping
    pauses merged first), vectorised: O((jumps + pauses) log pauses), whatever a damaged
    file holds."""
    if not pauses:
        return np.zeros(a.shape, np.int64)
    merged: list[list[int]] = []
    for lo, hi in sorted(pauses):
        if merged and lo <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], hi)
        else:
            merged.append([lo, hi])
    lo, hi = (np.array(col, np.int64) for col in zip(*merged))
    before = np.concatenate(([0], np.cumsum(hi - lo)))     # covered length before interval i

    def covered_below(x: np.ndarray) -> np.ndarray:        # covered indices < x
        i = np.searchsorted(lo, x, side="right") - 1
        inside = np.where(i >= 0, np.clip(x - lo[np.maximum(i, 0)], 0,
                                          (hi - lo)[np.maximum(i, 0)]), 0)
        return np.where(i >= 0, before[np.maximum(i, 0)] + inside, 0)
    return covered_below(b) - covered_below(a)


def check_index_jumps(index: np.ndarray, events: Iterable[CaptureEvent], slack: int, source: str,
                      where) -> None:
    """Raise :class:`InputError` for a forward jump of the sample index that more than
    ``slack`` indices not covered by ``pause`` events make, or jumps adding up to more
    than ``slack`` + the samples present (the file's size bounds what its indices span).
    ``where(k)`` names the place of sample ``k`` (a byte offset, a sample index)."""
    if index.size < 2:
        return
    skipped = np.diff(index) - 1
    pauses = [(e.index, e.index + e.value) for e in events
              if e.kind == EventKind.PAUSE and e.value > 0]
    at = np.flatnonzero(skipped > 0)
    if at.size == 0:
        return
    unexplained = skipped[at] - _pause_cover(pauses, index[at] + 1, index[at + 1])
    too_far = np.flatnonzero(unexplained > slack)
    total = np.cumsum(np.maximum(unexplained, 0))
    too_many = np.flatnonzero(total > slack + index.size)
    if too_far.size and (not too_many.size or too_far[0] <= too_many[0]):
        n = int(too_far[0])
        k = int(at[n])
        raise InputError(source, where(k + 1), f"the sample index jumps from "
                         f"{int(index[k])} to {int(index[k + 1])}: {int(unexplained[n]):,} indices "
                         f"that no lost frame, overrun or pause explains (at most {slack:,}; a "
                         "damaged record?)")
    if too_many.size:
        n = int(too_many[0])
        raise InputError(source, where(int(at[n]) + 1), f"the sample indices skip "
                         f"{int(total[n]):,} unexplained indices up to here, more than the "
                         f"{index.size:,} samples the file holds + {slack:,} (damaged records?)")


def parse_records(body: bytes | memoryview, meta: CaptureMeta, source: str = "memory") -> Capture:
    """A :class:`Capture` from the record part of a capture file (after the header).

    Untrusted input: a record that the writer never makes (a damaged or misaligned file),
    an event far from the samples around it or a sample index jump that the lost frames,
    overruns and pauses in the file do not explain raise :class:`InputError` naming the
    byte offset of the record, so that nothing downstream sizes an array by a damaged
    index."""
    whole = len(body) // RECORD_SIZE * RECORD_SIZE
    rec = np.frombuffer(body, RECORD, count=whole // RECORD_SIZE)
    _check_structure(rec, meta, source)
    kind = rec["kind"]
    is_sample = kind == RecordKind.SAMPLE
    sample_pos = np.flatnonzero(is_sample)
    sample_raw = rec["index"][sample_pos]
    index, restarts = _unwrap(sample_raw)
    code = rec["value"][sample_pos].copy()
    events: list[CaptureEvent] = []
    gaps: list[Gap] = []
    placed: list[tuple[int, int]] = []        # (record position, offset from its sample)
    crc = malformed = 0
    other = np.flatnonzero(~is_sample)
    for n, pos in enumerate(other):
        k, aux, value, raw = (int(x) for x in rec[pos])
        if k == RecordKind.EVENT:
            if pos + 1 < rec.size and rec["kind"][pos + 1] == RecordKind.EVENT_HIGH:
                value = value | (int(rec["value"][pos + 1]) << 16)
                value = value - _U32 if value >= _HALF else value
            at = _nearest(raw, pos, sample_pos, sample_raw, index)
            events.append(CaptureEvent(at, aux, value))
        elif k == RecordKind.GAP:
            at = _nearest(raw, pos, sample_pos, sample_raw, index)
            gaps.append(Gap(at, value))
        elif k == RecordKind.ERRORS:
            if aux == ErrorKind.CRC:
                crc += value
            else:
                malformed += value
            continue
        else:
            continue   # EVENT_HIGH is read with its event; unknown kinds are skipped (newer writers)
        if sample_pos.size:
            near = min(max(int(np.searchsorted(sample_pos, pos)) - 1, 0), sample_pos.size - 1)
            placed.append((int(pos), at - int(index[near])))
    lost = sum(g.frames for g in gaps)
    overrun = sum(e.value for e in events if e.kind == EventKind.OVERRUN and e.value > 0)
    pause_total = sum(e.value for e in events if e.kind == EventKind.PAUSE and e.value > 0)
    # a lost frame may have been a SAMPLES frame or a PAUSE like those the file holds: each
    # explains at most the larger of the two (a damaged line loses PAUSE frames too)
    widest_pause = max((e.value for e in events if e.kind == EventKind.PAUSE), default=0)
    slack = JUMP_FLOOR + lost * max(MAX_SAMPLES_PER_FRAME, widest_pause) + overrun
    for pos, d in placed:
        if abs(d) > slack + pause_total:
            raise InputError(source, _offset(pos), f"an event or lost-frames record {d:+,} sample "
                             f"indices from the samples beside it (at most {slack + pause_total:,}; "
                             "a damaged record?)")
    check_index_jumps(index, events, slack, source, lambda k: _offset(sample_pos[k]))
    return Capture(index, code, tuple(events), tuple(gaps), meta, crc, malformed, restarts,
                   len(body) - whole, source)


def _meta_from_header(doc: dict, source: str) -> CaptureMeta:
    known = {k: doc[k] for k in _META_FIELDS if k in doc and k != "extra"}
    extra = doc.get("extra")
    if extra is not None and not isinstance(extra, dict):
        raise InputError(source, "header extra", f"{_short(extra)} is not a JSON object of "
                         "key: value pairs")
    extra = dict(extra or {})
    skip = {"format", "version", "header_size", "record", "extra"}
    extra.update({k: v for k, v in doc.items() if k not in _META_FIELDS and k not in skip})
    return CaptureMeta(**known, extra=extra)


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:40] + "..."


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


#: Ranges of the header's numbers (SI, degC), as the drive and board files bound them.
_HEADER_RANGES = {
    "sample_rate_hz": (1.0, 10e6, "Hz"),
    "amps_per_code": (1e-9, 1e3, "A per code"),
    "supply_v": (0.5, 1000.0, "V"),
    "coil_temp_c": (-75.0, 250.0, "degC"),
    "peak_time_s": (1e-7, 100.0, "s"),
    "hold_duty": (0.0, 1.0, ""),
    "hold_frequency_hz": (1.0, 5e6, "Hz"),
}


def _validate_meta(meta: CaptureMeta, source: str, where: str = "header") -> None:
    """Every header field's type and range (the header is untrusted input); ``where``
    names the place in the file (``header``, or a text capture's ``line N``)."""
    def fail(key: str, message: str) -> InputError:
        return InputError(source, f"{where} {key}", message)

    for key, (low, high, unit) in _HEADER_RANGES.items():
        value = getattr(meta, key)
        if value is None:
            continue
        if not _number(value):
            raise fail(key, f"{_short(value)} is not a number, expected {low:g}..{high:g} {unit}".rstrip())
        if not low <= value <= high:
            raise fail(key, f"{value!r} is outside {low:g}..{high:g} {unit}".rstrip())
    if meta.adc_bits is not None and not (isinstance(meta.adc_bits, int) and not isinstance(meta.adc_bits, bool)
                                          and 1 <= meta.adc_bits <= 16):
        raise fail("adc_bits", f"{_short(meta.adc_bits)} is not an integer 1..16")
    top = (1 << meta.adc_bits) - 1 if meta.adc_bits is not None else 0xFFFF
    if isinstance(meta.zero_code, bool) or not isinstance(meta.zero_code, int) or not 0 <= meta.zero_code <= top:
        raise fail("zero_code", f"{_short(meta.zero_code)} is not an integer 0..{top}")
    if meta.sense_position not in (None, "coil", "switch"):
        raise fail("sense_position", f"{_short(meta.sense_position)} is not 'coil' or 'switch'")
    for key in ("board", "drive", "firmware_id", "started_utc", "link"):
        value = getattr(meta, key)
        if value is not None and not isinstance(value, str):
            raise fail(key, f"{_short(value)} is not a string")
    if not isinstance(meta.has_position_switch, bool):
        raise fail("has_position_switch", f"{_short(meta.has_position_switch)} is not true or false")


def read_capture(path: str | os.PathLike) -> Capture:
    """Read a capture file, binary (this module's format) or text mode (``index,adc`` lines).

    A partial last record (a writer killed mid-write) is dropped and counted in
    :attr:`Capture.truncated_bytes`. Raises :class:`InputError` for a missing file or a
    file that is neither format.
    """
    from ..fileio import read_input

    source = str(path)
    data = read_input(path, "a capture file")
    if data.startswith(_MAGIC):
        return _read_binary(data, source)
    return read_text_capture(data, source)


def _read_binary(data: bytes, source: str) -> Capture:
    if len(data) < HEADER_SIZE:
        raise InputError(source, "header", f"file is {len(data)} bytes, shorter than the "
                         f"{HEADER_SIZE}-byte header: the capture was cut off as it started")
    try:
        doc = json.loads(data[:HEADER_SIZE].decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as err:
        raise InputError(source, "header", f"is not valid JSON ({err})") from None
    except RecursionError:
        raise InputError(source, "header", "nests JSON too deeply to be a capture header") from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
        raise InputError(source, "header", "is not a coildrive capture header")
    version = doc.get("version")
    if doc.get("header_size", HEADER_SIZE) != HEADER_SIZE:
        raise InputError(source, "header header_size", f"{_short(doc['header_size'])} is not "
                         f"{HEADER_SIZE}, the header size of version {FORMAT_VERSION}")
    if version != FORMAT_VERSION:
        raise InputError(source, "version", f"{_short(version)} is not supported, expected {FORMAT_VERSION}")
    meta = _meta_from_header(doc, source)
    _validate_meta(meta, source)
    return parse_records(memoryview(data)[HEADER_SIZE:], meta, source)


def read_text_capture(data: bytes, source: str = "memory") -> Capture:
    """A :class:`Capture` from text-mode lines (``index,adc``, events, ``info,...``; see
    :mod:`coildrive.bench.textline`). Raises :class:`InputError` when no line is valid."""
    from .textline import TextLineDecoder

    if b"\x00" in data[:4096]:
        raise InputError(source, "", "is neither a coildrive capture file nor text-mode "
                         "lines (index,adc); raw link bytes are read with `coildrive capture --replay`")
    dec = TextLineDecoder()
    messages = dec.feed(data) + dec.finish()
    starts, runs = [], []
    events_raw: list[tuple[int, int, int, int]] = []
    meta: dict = {"link": "text"}
    for m in messages:
        if isinstance(m, Samples):
            starts.append(m.first_index)
            runs.append(np.asarray(m.codes, np.uint16))
        elif isinstance(m, Event):
            events_raw.append((len(runs), m.index, m.kind, m.value))
        elif isinstance(m, Info):
            meta.update(meta_from_info(m))
    stats = dec.stats
    _check_info_lines(data, source)
    if not runs:
        raise InputError(source, "", "holds no sample line (index,adc): not a capture file")
    if stats.malformed_frames > stats.frames:
        raise InputError(source, "", f"{stats.malformed_frames} of {stats.malformed_frames + stats.frames} "
                         "lines are not text-mode records: not a capture file")
    raw = np.concatenate([(s + np.arange(r.size, dtype=np.int64)) % _U32 for s, r in zip(starts, runs)])
    code = np.concatenate(runs)
    index, restarts = _unwrap(raw.astype(np.uint32))
    run_start = np.cumsum([0] + [r.size for r in runs])
    events = []
    for nruns, ev_index, kind, value in events_raw:
        k = min(max(int(run_start[nruns]) - 1, 0), index.size - 1)  # last sample before it
        d = (ev_index - int(raw[k])) % _U32
        d = d - _U32 if d >= _HALF else d
        events.append(CaptureEvent(int(index[k]) + d, kind, value))
    cap_meta = CaptureMeta(**meta)
    _validate_meta(cap_meta, source, "info line")
    if cap_meta.adc_bits is not None and code.size and int(code.max()) >= 1 << cap_meta.adc_bits:
        k = int(np.argmax(code >= 1 << cap_meta.adc_bits))
        raise InputError(source, f"sample index {int(raw[k])}", f"ADC code {int(code[k])} is above "
                         f"the {cap_meta.adc_bits}-bit ADC's {(1 << cap_meta.adc_bits) - 1} that "
                         "the info line gives")
    # a lost or garbled line loses at most the samples of the lines it merged with
    overrun = sum(e.value for e in events if e.kind == EventKind.OVERRUN and e.value > 0)
    slack = JUMP_FLOOR + 2 * stats.malformed_frames + overrun
    pause_total = sum(e.value for e in events if e.kind == EventKind.PAUSE and e.value > 0)
    for (nruns, ev_index, _, _), e in zip(events_raw, events):
        k = min(max(int(run_start[nruns]) - 1, 0), index.size - 1)
        if abs(e.index - int(index[k])) > slack + pause_total:
            raise InputError(source, f"event at sample index {ev_index}", f"{e.index - int(index[k]):+,} "
                             f"sample indices from the samples before it (at most "
                             f"{slack + pause_total:,}; a damaged line?)")
    check_index_jumps(index, events, slack, source, lambda k: f"sample index {int(raw[k])}")
    return Capture(index, code, tuple(events), (), cap_meta, 0,
                   stats.malformed_frames, restarts, stats.tail_bytes, source)


def _check_info_lines(data: bytes, source: str) -> None:
    """An ``info`` line the decoder skipped (a zero or unreadable rate, bits out of range)
    is an error in a capture file: the file's own scaling would be silently replaced."""
    from .textline import TextLineDecoder

    for number, line in enumerate(data.split(b"\n"), 1):
        if line.lstrip()[:5].lower() == b"info,":
            if not TextLineDecoder().feed(line + b"\n"):
                text = line.strip().decode("utf-8", errors="replace")
                raise InputError(source, f"line {number}", f"{_short(text)} is not an info line "
                                 "'info,RATE,BITS[,A per code[,zero code[,firmware id]]]' with "
                                 "a rate above zero (e.g. 200000 or 84000000/420) and bits 1..16")


def count_records(path: str | os.PathLike, chunk: int = 1 << 20) -> tuple[int, int]:
    """``(samples, events)`` in the binary capture file ``path`` as it is on disk (whole
    records only), read in chunks of ``chunk`` records: what a capture kept, whatever it
    decoded."""
    samples = events = 0
    with open(path, "rb") as handle:
        handle.seek(HEADER_SIZE)
        while True:
            data = handle.read(chunk * RECORD_SIZE)
            whole = len(data) // RECORD_SIZE
            if not whole:
                return samples, events
            kind = np.frombuffer(data, RECORD, count=whole)["kind"]
            samples += int(np.count_nonzero(kind == RecordKind.SAMPLE))
            events += int(np.count_nonzero(kind == RecordKind.EVENT))


def write_capture(path: str | os.PathLike, capture: Capture) -> None:
    """Write a :class:`Capture` as a capture file (indices modulo 2**32), samples and
    events interleaved in index order, gaps and error counts after them."""
    with CaptureWriter(path, flush_interval=None, **capture.meta.to_json_dict()) as w:
        ev = sorted(capture.events, key=lambda e: e.index)
        cut = np.searchsorted(capture.index, [e.index for e in ev])
        start = 0
        for e, k in zip(ev, cut):
            if k > start:
                _append_runs(w, capture.index[start:k], capture.code[start:k])
                start = int(k)
            w.append_event(e.index, e.kind, e.value)
        _append_runs(w, capture.index[start:], capture.code[start:])
        for g in capture.gaps:
            w.append_gap(g.index, g.frames)
        w.append_errors(int(capture.index[-1]) + 1 if len(capture) else 0,   # one past the last
                        capture.crc_errors, capture.malformed_frames)


def _append_runs(w: CaptureWriter, index: np.ndarray, code: np.ndarray) -> None:
    if index.size == 0:
        return
    breaks = np.flatnonzero(np.diff(index) != 1) + 1
    for a, b in zip(np.r_[0, breaks], np.r_[breaks, index.size]):
        w.append_samples(int(index[a]), code[a:b])

