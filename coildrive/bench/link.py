"""The host side of a live bench link: a port, a reader thread, a capture file, subscribers.

:class:`DeviceLink` opens a serial port (a device path or any pyserial URL:
``loop://``, ``socket://host:port``, ``rfc2217://...``) and starts one reader thread that
owns the port's input::

    port bytes -> decoder (binary frames or text lines) -> CaptureWriter (if a capture
    file is given) -> every subscriber's queue

The capture file is written as the bytes arrive and flushed every ``flush_interval`` s
(default 50 ms) by the writer's own thread, so a ``kill -9`` loses at most that much. A
device that vanishes (the port raises, or a pseudo-terminal whose other end closed
reads EOF) ends the thread, keeps everything written and sets :attr:`LinkStats.error`.
:meth:`DeviceLink.command` sends a COMMAND frame and waits for the device's REPLY to it.

:func:`replay` runs the same decoding on a file of raw link bytes (``--replay RAW``).

Lost frames are written to the capture as gap records, CRC and malformed frame counts as
error records, each before the first sample that arrived after them and carrying its
index (one past the last sample when none came after them; ``docs/capture-format.md``).

Optionally the link stops by itself after ``stop_after_actuations`` complete actuations
(an ON, then an OFF) and the rest of the last release: it ends at the first of the next
ON (not written), a PAUSE event (the device stops sending idle samples), the current
back at the idle level before that actuation for :data:`RELEASE_QUIET_S`, or
:data:`RELEASE_MAX_S` after the OFF.

Examples
--------
>>> from coildrive.bench.protocol import FrameEncoder
>>> import serial
>>> port = serial.serial_for_url("loop://", timeout=0.05)
>>> with DeviceLink(port, baud=115200) as link:
...     feed = link.subscribe()
...     _ = port.write(FrameEncoder().samples(0, [1, 2, 3]))
...     feed.get(timeout=2.0).codes.tolist()
[1, 2, 3]
"""

from __future__ import annotations

import collections
import contextlib
import os
import queue
import stat
import threading
import time
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import CoildriveError, InputError, OutputError, unreadable
from ..fileio import atomic_path, publish_new, temporary_beside
from .capture_file import DEFAULT_FLUSH_INTERVAL, CaptureWriter
from .messages import Command, Event, EventKind, Info, Message, Opcode, Reply, Samples
from .protocol import FrameDecoder, FrameEncoder
from .textline import TextLineDecoder

__all__ = ["LinkError", "LinkStats", "DeviceLink", "replay", "guess_mode", "NO_FRAME_HINT_S",
           "READ_TIMEOUT_S", "RELEASE_QUIET_S", "RELEASE_MAX_S"]

NO_FRAME_HINT_S = 3.0
"""s without one valid frame (or text line) after which a capture hints at the baud rate
or the mode (``--text`` / ``--binary``)."""
READ_TIMEOUT_S = 0.05
"""s the reader thread waits for a byte before it looks at its stop flag again."""
RELEASE_QUIET_S = 0.002
"""s of samples at the idle level after an OFF that end the release (stop after N)."""
RELEASE_MAX_S = 2.0
"""s after the last OFF at which a stop after N actuations ends whatever the current does."""
WRITE_TIMEOUT_S = 2.0
"""s a command write may block (a stalled device) before it fails."""
SNIFF_BYTES = 4096
"""First bytes of a link kept for :func:`guess_mode` (the hint)."""

_IDLE_SAMPLES = 256  # samples before an ON that tell the idle level


class LinkError(CoildriveError):
    """The link failed: the port did not open, the device vanished or did not reply."""


@dataclass(frozen=True)
class LinkStats:
    """What a link has seen so far (a snapshot).

    Attributes
    ----------
    elapsed_s : s since the link opened (frozen when it closed).
    bytes : bytes read from the port.
    bytes_per_s : ``bytes / elapsed_s``.
    frames : valid frames (text mode: valid lines).
    samples : ADC samples delivered (written to the capture).
    crc_errors : frames whose CRC failed.
    malformed : frames (lines) that were not frames (lines) of the protocol.
    lost_frames : sequence numbers that never arrived intact.
    samples_missing : sample indices skipped between received samples.
    actuations : OFF events seen.
    error : why the link ended by itself (the device vanished), else ``None``.
    complete_actuations : OFF events that followed an ON seen on this link.
    done : the stop condition (``stop_after_actuations``) was met.
    """

    elapsed_s: float
    bytes: int
    bytes_per_s: float
    frames: int
    samples: int
    crc_errors: int
    malformed: int
    lost_frames: int
    samples_missing: int
    actuations: int
    error: str | None = None
    complete_actuations: int = 0
    done: bool = False

    def summary(self) -> str:
        """One line: time, samples, frames, actuations (complete ones; an OFF without its
        ON, the capture having joined mid-actuation, is counted as partial), rate, errors."""
        partial = self.actuations - self.complete_actuations
        acts = f"{self.complete_actuations} actuation(s)" + (f" (+{partial} partial)" if partial > 0 else "")
        return (f"{self.elapsed_s:.1f} s, {self.samples:,} samples in {self.frames:,} frames, "
                f"{acts}, {self.bytes_per_s / 1e3:.1f} kB/s, "
                f"{self.crc_errors} CRC error(s), {self.malformed} malformed, "
                f"{self.lost_frames} lost frame(s)")


# --------------------------------------------------------------------------- decoding
class _Pipeline:
    """bytes -> decoder -> capture writer and a message callback. No port, no thread.

    Not thread-safe by itself: the owner serialises :meth:`feed`.
    """

    def __init__(self, writer: CaptureWriter | None, text: bool, sample_rate_hz: float | None,
                 stop_after: int | None, release_quiet_s: float, release_max_s: float,
                 supply_volts_per_code: float | None = None, temperature_events: bool = False,
                 adc_bits: int | None = None):
        self.decoder: FrameDecoder | TextLineDecoder = TextLineDecoder() if text else FrameDecoder()
        self.writer = writer
        self.text = text
        self.info: Info | None = None
        self.sample_rate_hz = sample_rate_hz
        self.samples = 0
        self.actuations = 0
        self.complete = 0
        self.done = False
        self.dstats = self.decoder.stats
        self._stop_after = stop_after
        self._quiet_s = release_quiet_s
        self._max_s = release_max_s
        self._unwritten = [0, 0, 0]   # lost, CRC-failed, malformed frames counted, not yet written
        self._next_index = 0          # sample index after the last sample
        self._recent: collections.deque[np.ndarray] = collections.deque()
        self._recent_n = 0
        self._seen_on = False
        self._idle_high: int | None = None   # top of the idle band before the last ON
        self._tail_from: int | None = None   # sample index of the last counted OFF
        self._tail_wall: float | None = None
        self._quiet_run = 0
        self._supply_vpc = supply_volts_per_code
        self._supply_bits = adc_bits  # the resolution supply_volts_per_code is for
        self._temperature_events = temperature_events
        self._supply_codes: list[int] = []
        self._temperatures: list[int] = []
        self.supply_v: float | None = None
        self.coil_temp_c: float | None = None

    # ------------------------------------------------------------------ feeding
    def feed(self, data: bytes, deliver) -> None:
        """Decode ``data``, write what it holds, call ``deliver(message)`` for each message."""
        if self.done:
            return
        messages = self.decoder.feed(data)
        self._after_decode(messages, deliver)

    def finish(self, deliver) -> None:
        """End of a stream (a replayed file): decode a last frame without its delimiter."""
        if not self.done:
            self._after_decode(self.decoder.finish(), deliver)
        self.end()

    def end(self) -> None:
        """Write what was counted after the last sample (no sample came after it)."""
        self._write_counts(self._next_index)

    def _after_decode(self, messages: list[Message], deliver) -> None:
        self.dstats = self.decoder.stats
        counted = self.decoder.counted()   # (position, what, count), in stream order
        k = 0
        for position, message in enumerate(messages):
            while k < len(counted) and counted[k][0] <= position:
                self._unwritten[counted[k][1]] += counted[k][2]
                k += 1
            if not self._dispatch(message):
                break                      # the stop point came before this message
            deliver(message)
            if self.done:
                break                      # ... or with it: nothing after it is kept
        for _, what, count in counted[k:]:     # after the last message: written with the
            self._unwritten[what] += count      # next samples, or by end()

    def _write_counts(self, index: int) -> None:
        """Gap and error records for the frames counted since the last ones, at ``index``."""
        lost, crc, bad = self._unwritten
        w = self.writer
        if w is not None:
            if lost:
                w.append_gap(index, lost)
            if crc or bad:
                w.append_errors(index, crc, bad)
        self._unwritten = [0, 0, 0]

    def _dispatch(self, m: Message) -> bool:
        """Write one message; ``False`` when the stop point came before it."""
        w = self.writer
        if isinstance(m, Samples):
            self._write_counts(m.first_index)
            if w is not None:
                w.append_samples(m.first_index, m.codes)
            self.samples += len(m.codes)
            self._next_index = m.next_index
            self._remember(m.codes)
            if self._tail_from is not None:
                self._watch_release(m)
            return True
        if isinstance(m, Event):
            if self._tail_from is not None and m.kind == EventKind.ON:
                self.done = True           # the next actuation: not part of this capture
                return False
            if w is not None:
                w.append_event(m.index, m.kind, m.value)
            if m.kind == EventKind.ON:
                self._seen_on = True
                self._idle_high = self._idle_band()
            elif m.kind == EventKind.OFF:
                self.actuations += 1
                if self._seen_on:
                    self._seen_on = False
                    self.complete += 1
                    if self._stop_after is not None and self.complete >= self._stop_after:
                        self._tail_from = m.index
                        self._tail_wall = time.monotonic()
                        self._quiet_run = 0
            elif m.kind == EventKind.PAUSE and self._tail_from is not None:
                self.done = True           # idle from here: the release is over
            elif m.kind == EventKind.SUPPLY and self._supply_vpc:
                self._supply_codes.append(m.value)
                self._update_supply()
            elif m.kind == EventKind.TEMPERATURE and self._temperature_events:
                self._temperatures.append(m.value)
                temp = float(np.median(self._temperatures)) / 1000.0
                if temp != self.coil_temp_c:
                    self.coil_temp_c = temp
                    if w is not None:
                        w.update_header(coil_temp_c=temp)
            return True
        if isinstance(m, Info):
            self.info = m
            self.sample_rate_hz = m.sample_rate_hz
            if w is not None:
                w.append_message(m)
            if self._supply_vpc and self._supply_bits and m.adc_bits != self._supply_bits:
                # SUPPLY codes are at the resolution INFO states (docs/protocol.md 4.2)
                self._supply_vpc *= 2.0 ** (self._supply_bits - m.adc_bits)
                self._supply_bits = m.adc_bits
                self._update_supply()
            return True
        return True                        # Reply, Command (a loop-back echo): not kept

    def _update_supply(self) -> None:
        """The header's ``supply_v``: the median SUPPLY code read as the middle of its
        step (the ADC truncates), times the volts per code."""
        if not self._supply_codes:
            return
        volts = (float(np.median(self._supply_codes)) + 0.5) * self._supply_vpc
        if volts != self.supply_v:
            self.supply_v = volts
            if self.writer is not None:
                self.writer.update_header(supply_v=volts)

    # ------------------------------------------------------------------ stopping
    def _remember(self, codes: np.ndarray) -> None:
        self._recent.append(codes)
        self._recent_n += len(codes)
        while self._recent_n - len(self._recent[0]) >= _IDLE_SAMPLES:
            self._recent_n -= len(self._recent.popleft())

    def _idle_band(self) -> int | None:
        """Top of the idle codes just before an ON: their maximum + their spread (>= 2)."""
        if self._recent_n < 16:
            return None
        codes = np.concatenate(list(self._recent))[-_IDLE_SAMPLES:].astype(np.int64)
        low, high = int(codes.min()), int(codes.max())
        return high + max(2, high - low)

    def _watch_release(self, m: Samples) -> None:
        fs = self.sample_rate_hz
        start = self._tail_from
        since = (m.next_index - start) & 0xFFFFFFFF
        if since >= 0x80000000:
            return                          # samples from before the OFF
        if fs and since >= self._max_s * fs:
            self.done = True
            return
        if self._idle_high is not None:
            skip = max(0, len(m.codes) - since)   # samples before the OFF
            quiet = np.asarray(m.codes[skip:]) <= self._idle_high
            loud = np.flatnonzero(~quiet)
            run = quiet.size - (int(loud[-1]) + 1) if loud.size else self._quiet_run + quiet.size
            self._quiet_run = run
            if run >= max(16, self._quiet_s * fs if fs else 400):
                self.done = True

    def check_wall_clock(self) -> None:
        """Stop after :data:`RELEASE_MAX_S` of wall time since the last OFF (no samples came)."""
        if self._tail_wall is not None and time.monotonic() - self._tail_wall > self._max_s:
            self.done = True


def guess_mode(data: bytes) -> str | None:
    """``"frames"`` or ``"text"`` when ``data`` decodes as one mode, else ``None``.

    >>> guess_mode(b"10,512\\n11,515\\n12,530\\non,12\\n")
    'text'
    >>> guess_mode(bytes(range(256)) * 4) is None
    True
    """
    frames = FrameDecoder()
    frames.feed(data)
    if frames.stats.frames >= 2:
        return "frames"
    lines = TextLineDecoder()
    lines.feed(data)
    st = lines.stats
    if st.frames >= 3 and st.malformed_frames < st.frames:
        return "text"
    return None


# --------------------------------------------------------------------------- the link
def _utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def _describe(err: BaseException) -> str:
    strerror = getattr(err, "strerror", None)
    if isinstance(err, OSError) and strerror:
        return str(strerror)
    text = str(err).strip() or type(err).__name__
    return text.splitlines()[0]


class DeviceLink:
    """A live link to a bench device: reader thread, capture file, subscribers, commands.

    Parameters
    ----------
    port : a device path (``/dev/ttyUSB0``, a pseudo-terminal), any pyserial URL
        (``loop://``, ``socket://host:port``, ``rfc2217://host:port``), or an already open
        pyserial-like object (``read``, ``write``, ``in_waiting``; its ``timeout`` is set
        to ``read_timeout``; the link does not close an object it was given).
    baud : line rate in baud (ignored by URLs that have none).
    capture : capture file to write as data arrives (``None``: none).
    meta : :class:`~coildrive.bench.capture_file.CaptureMeta` fields for its header
        (``link`` and ``started_utc`` are filled in when absent); the device's INFO
        frame updates the header when it arrives.
    text : the device prints text lines (``docs/protocol.md`` section 7), not frames.
    flush_interval : s between flushes of the capture file.
    stop_after_actuations : end by itself after this many complete actuations and the
        rest of the last release (see the module docstring); ``None``: run until closed.
    read_timeout : s; release_quiet_s, release_max_s : s, see the module docstring.
    supply_volts_per_code : V of bus voltage per code of the device's SUPPLY events (the
        board's ADC step times its supply divider) at the ``adc_bits`` of ``meta``; when
        given, the header's ``supply_v`` follows the median SUPPLY reading (a code read as
        the middle of its step). SUPPLY codes are at the resolution the device's INFO
        states (``docs/protocol.md`` section 4.2): an INFO with other ``adc_bits`` rescales it.
    temperature_events : the header's ``coil_temp_c`` follows the median TEMPERATURE
        event (milli-degC), taken to be the coil's temperature.
    overwrite : replace an existing ``capture`` (``False``: refuse, see :func:`new_capture`).

    Raises
    ------
    LinkError
        when the port does not open, or is busy (another program has it open).
    InputError
        when the capture file cannot be created, or exists and ``overwrite`` is false.
    """

    def __init__(self, port: Any, *, baud: int, capture: str | os.PathLike | None = None,
                 meta: dict | None = None, text: bool = False,
                 flush_interval: float = DEFAULT_FLUSH_INTERVAL,
                 stop_after_actuations: int | None = None, read_timeout: float = READ_TIMEOUT_S,
                 release_quiet_s: float = RELEASE_QUIET_S, release_max_s: float = RELEASE_MAX_S,
                 supply_volts_per_code: float | None = None, temperature_events: bool = False,
                 overwrite: bool = True, raw: str | os.PathLike | None = None):
        if stop_after_actuations is not None and stop_after_actuations < 1:
            raise ValueError(f"stop_after_actuations {stop_after_actuations} must be >= 1")
        self.baud = int(baud)
        self.text = bool(text)
        self.info: Info | None = None
        """The latest INFO frame from the device (``None`` until one arrives)."""
        self.capture_path = None if capture is None else Path(capture)
        self._serial, self._owns, self.port = self._open(port, read_timeout)
        meta = dict(meta or {})
        meta.setdefault("link", "text" if text else "frames")
        meta.setdefault("started_utc", _utc_now())
        writer = None
        if capture is not None:
            try:
                writer = new_capture(capture, overwrite, flush_interval=flush_interval, **meta)
            except BaseException:
                self._close_port()
                raise
        self._writer = writer
        self._raw = None
        if raw is not None:
            try:
                self._raw = new_raw_file(raw, overwrite, option="--raw")
            except BaseException:
                if writer is not None:
                    writer.close()
                self._close_port()
                raise
        self._pipe = _Pipeline(writer, self.text, meta.get("sample_rate_hz"), stop_after_actuations,
                               release_quiet_s, release_max_s, supply_volts_per_code,
                               temperature_events, meta.get("adc_bits"))
        self._lock = threading.Lock()          # pipeline, subscribers, stats
        self._write_lock = threading.Lock()    # the port's output
        self._replies = threading.Condition()
        self._waiting: dict[int, Reply | None] = {}
        self._subscribers: list[queue.Queue] = []
        self._encoder = FrameEncoder()
        self._sniff = bytearray()
        self._error: str | None = None
        self._first_frame = threading.Event()
        self._ended = threading.Event()
        self._stop = threading.Event()
        self._closed = False
        self._t0 = time.monotonic()
        self._t_end: float | None = None
        self._thread = threading.Thread(target=self._reader, name="bench-link-reader", daemon=True)
        self._thread.start()

    # ------------------------------------------------------------------ opening
    def _open(self, port: Any, read_timeout: float):
        if isinstance(port, (str, os.PathLike)):
            import serial  # pyserial: imported only when a link opens (CLI start-up time)

            name = os.fspath(port)
            try:
                # exclusive: a second program (another capture) cannot open the port too
                # and steal half the bytes; pyserial takes an flock on POSIX ports and
                # ignores it where the platform has none
                ser = serial.serial_for_url(name, baudrate=self.baud, timeout=read_timeout,
                                            write_timeout=WRITE_TIMEOUT_S, exclusive=True)
            except (serial.SerialException, OSError, ValueError) as err:
                if "exclusively lock" in str(err):
                    raise LinkError(f"{name}: the port is busy: another program (a capture, a "
                                    "terminal) has it open; close that first") from None
                raise LinkError(f"{name}: cannot open the port ({_describe(err)})") from None
            return ser, True, name
        for attr in ("read", "write"):
            if not hasattr(port, attr):
                raise TypeError(f"port must be a path, a pyserial URL or a serial object, not {port!r}")
        try:
            port.timeout = read_timeout
        except (AttributeError, ValueError):
            pass
        return port, False, str(getattr(port, "name", None) or getattr(port, "port", None) or port)

    def _close_port(self) -> None:
        if self._owns:
            try:
                self._serial.close()
            except Exception:  # noqa: BLE001 - a vanished device may fail to close; nothing to keep
                pass

    # ------------------------------------------------------------------ the reader thread
    def _reader(self) -> None:
        import serial

        ser = self._serial
        pipe = self._pipe
        try:
            while not self._stop.is_set():
                try:
                    waiting = getattr(ser, "in_waiting", 0) or 0
                    data = ser.read(waiting if waiting > 0 else 1)
                except (serial.SerialException, OSError) as err:
                    if not self._stop.is_set():
                        reason = _describe(err)
                        if "returned no data" in reason:   # pyserial's words for end of file
                            reason = "end of file: the other end closed or the device was unplugged"
                        self._error = f"the device vanished ({reason})"
                    break
                except (TypeError, AttributeError) as err:  # pyserial on a port closed under it
                    if not self._stop.is_set():
                        self._error = f"the port failed ({_describe(err)})"
                    break
                if data and self._raw is not None:
                    try:
                        self._raw.write(data)    # unbuffered: a killed capture keeps every byte read
                    except OSError as err:
                        self._error = f"the raw file could not be written ({_describe(err)})"
                        break
                with self._lock:
                    if data:
                        if len(self._sniff) < SNIFF_BYTES:
                            self._sniff += data[:SNIFF_BYTES - len(self._sniff)]
                        pipe.feed(data, self._deliver)
                        if pipe.dstats.frames:
                            self._first_frame.set()
                    pipe.check_wall_clock()
                    if pipe.done:
                        break
        except Exception as err:  # noqa: BLE001 - keep the data, report the cause
            self._error = f"the capture failed ({type(err).__name__}: {_describe(err)})"
        finally:
            self._t_end = time.monotonic()
            try:
                with self._lock:
                    pipe.end()
                if self._writer is not None:
                    self._writer.close()   # flush + fsync: everything so far is kept
                if self._raw is not None:
                    self._raw.close()
            except OSError as err:
                self._error = self._error or f"the capture file could not be written ({_describe(err)})"
            self._ended.set()
            with self._replies:
                self._replies.notify_all()

    def _deliver(self, message: Message) -> None:
        if isinstance(message, Info):
            self.info = message
        elif isinstance(message, Reply):
            with self._replies:
                if message.command_seq in self._waiting:
                    self._waiting[message.command_seq] = message
                    self._replies.notify_all()
        for q in self._subscribers:
            q.put(message)

    # ------------------------------------------------------------------ public
    def stats(self) -> LinkStats:
        """Counters so far (a snapshot)."""
        with self._lock:
            st = self._pipe.dstats
            pipe = self._pipe
            end = self._t_end if self._t_end is not None else time.monotonic()
            elapsed = max(end - self._t0, 1e-9)
            return LinkStats(elapsed, st.bytes, st.bytes / elapsed, st.frames, pipe.samples,
                             st.crc_errors, st.malformed_frames, st.lost_frames, st.samples_missing,
                             pipe.actuations, self._error, pipe.complete, pipe.done)

    def subscribe(self) -> "queue.Queue[Message]":
        """A queue that receives every message decoded from now on (REPLY frames too).

        The queue is unbounded: read it, or :meth:`unsubscribe` it.
        """
        q: queue.Queue = queue.Queue()
        with self._lock:
            self._subscribers = [*self._subscribers, q]
        return q

    def unsubscribe(self, q: "queue.Queue[Message]") -> None:
        """Stop feeding ``q``."""
        with self._lock:
            self._subscribers = [s for s in self._subscribers if s is not q]

    @property
    def running(self) -> bool:
        """The reader thread is still reading."""
        return not self._ended.is_set()

    @property
    def first_bytes(self) -> bytes:
        """The first :data:`SNIFF_BYTES` bytes read (for :func:`guess_mode`)."""
        with self._lock:
            return bytes(self._sniff)

    def wait_first_frame(self, timeout: float | None = None) -> bool:
        """Wait until a valid frame (or text line) arrived; ``False`` on timeout."""
        return self._first_frame.wait(timeout)

    def wait(self, timeout: float | None = None) -> bool:
        """Wait until the reader thread ends by itself (stop condition met, device vanished,
        or closed); ``True`` when it has ended."""
        return self._ended.wait(timeout)

    def command(self, opcode: int, argument: int = 0, *, timeout: float = 1.0,
                retries: int = 2) -> Reply:
        """Send a COMMAND and wait for the REPLY that answers it.

        Each try sends a new COMMAND frame (a new sequence number, ``docs/protocol.md``
        section 4.5) and waits ``timeout`` s; a late reply to an earlier try of the same
        call is accepted. The reply is returned whatever its status (check
        ``reply.status``).

        Raises
        ------
        LinkError
            no reply after ``1 + retries`` tries, the link has ended, or text mode.
        """
        name = _opcode_name(opcode)
        if self.text:
            raise LinkError(f"{self.port}: {name} needs binary frames; the link is in text mode")
        if timeout <= 0 or retries < 0:
            raise ValueError("timeout must be > 0 s and retries >= 0")
        seqs: list[int] = []
        try:
            for _ in range(1 + retries):
                self._require_running(name)
                with self._write_lock:
                    seq = self._encoder.seq
                    wire = self._encoder.encode(Command(opcode, argument))
                    with self._replies:
                        self._waiting[seq] = None
                    seqs.append(seq)
                    try:
                        self._serial.write(wire)
                    except Exception as err:  # noqa: BLE001 - pyserial raises several types
                        raise LinkError(f"{self.port}: cannot send {name} ({_describe(err)})") from None
                deadline = time.monotonic() + timeout
                with self._replies:
                    while True:
                        for s in seqs:
                            if self._waiting.get(s) is not None:
                                return self._waiting[s]  # type: ignore[return-value]
                        left = deadline - time.monotonic()
                        if left <= 0 or self._ended.is_set():
                            break
                        self._replies.wait(left)
            self._require_running(name)
            raise LinkError(f"{self.port}: no reply to {name} after {len(seqs)} tries of "
                            f"{timeout:g} s (is the firmware answering commands?)")
        finally:
            with self._replies:
                for s in seqs:
                    self._waiting.pop(s, None)

    def _require_running(self, name: str) -> None:
        if self._closed:
            raise LinkError(f"{self.port}: cannot send {name}: the link is closed")
        if self._ended.is_set():
            raise LinkError(f"{self.port}: cannot send {name}: {self._error or 'the link has ended'}")

    def close(self) -> None:
        """Stop the reader thread, close the capture (everything kept) and the port.

        Safe to call twice.
        """
        if self._closed:
            return
        self._closed = True
        self._stop.set()
        cancel = getattr(self._serial, "cancel_read", None)
        if cancel is not None:
            try:
                cancel()
            except Exception:  # noqa: BLE001 - not every transport supports it
                pass
        self._thread.join()
        self._close_port()
        if self._writer is not None:
            self._writer.close()

    def __enter__(self) -> "DeviceLink":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _opcode_name(opcode: int) -> str:
    try:
        return Opcode(opcode).name
    except ValueError:
        return f"opcode {opcode}"


# --------------------------------------------------------------------------- files
def new_capture(path: str | os.PathLike, overwrite: bool, option: str = "--out",
                **writer_args: Any) -> CaptureWriter:
    """A :class:`CaptureWriter` on ``path`` that never damages a file already there.

    The header is written to a temporary file beside ``path`` first, which then takes
    the name (:func:`coildrive.fileio.publish_new`: refused when ``path`` exists unless
    ``overwrite``); the writer goes on writing through its open handle, so a killed capture
    keeps what it flushed. A disk too full for the header leaves no file at all.
    """
    writer = _open_new(path, overwrite, option, lambda tmp: CaptureWriter(tmp, **writer_args))
    writer.path = Path(path)
    return writer


def new_raw_file(path: str | os.PathLike, overwrite: bool, option: str = "--raw"):
    """An unbuffered binary file on ``path`` for a live link's raw bytes, made like
    :func:`new_capture` (a temporary file beside it takes the name, never replacing an
    existing file without ``overwrite``). ``capture --replay`` decodes it again."""
    return _open_new(path, overwrite, option, lambda tmp: open(tmp, "wb", buffering=0))


def _open_new(path: str | os.PathLike, overwrite: bool, option: str, opener):
    """``opener(tmp)`` on a temporary file beside ``path`` that then takes the name
    (:func:`coildrive.fileio.publish_new`); the returned handle (it has ``close()``) goes
    on writing into ``path``. Nothing is left behind when either step fails."""
    tmp = temporary_beside(path)
    try:
        handle = opener(tmp)
    except OSError as err:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise OutputError(str(path), f"cannot be written ({err.strerror or err})") from None
    try:
        publish_new(tmp, path, overwrite=overwrite, option=option)
    except BaseException:
        handle.close()
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return handle


class NoFrames(InputError):
    """A replay decoded no frame (or text line): nothing was written. ``stats`` says what
    was read."""

    def __init__(self, source: str, message: str, stats: "LinkStats"):
        super().__init__(source, "", message)
        self.stats = stats


# --------------------------------------------------------------------------- replay
def replay(raw_path: str | os.PathLike, out: str | os.PathLike, *, text: bool = False,
           meta: dict | None = None, stop_after_actuations: int | None = None,
           supply_volts_per_code: float | None = None, temperature_events: bool = False,
           chunk: int = 1 << 20, overwrite: bool = True, require_frames: bool = False) -> LinkStats:
    """Decode a file of raw link bytes (binary frames, or text lines with ``text``) into
    the capture file ``out``, as a live capture would have written it (keyword
    arguments as for :class:`DeviceLink`).

    ``out`` appears complete or not at all (written to a temporary file, then renamed);
    an existing ``out`` is replaced only with ``overwrite``, and with ``require_frames``
    only when at least one frame (text line) was decoded.

    Raises
    ------
    InputError
        ``raw_path`` cannot be read, ``out`` exists (without ``overwrite``), or
        :class:`NoFrames` (with ``require_frames``).
    OutputError
        ``out`` cannot be written (a full disk): an old ``out`` is left as it was.
    """
    source = str(raw_path)
    try:
        if not stat.S_ISREG(os.stat(raw_path).st_mode):
            raise InputError(source, "", "is not a regular file, expected a file of raw link bytes")
        handle = open(raw_path, "rb")
    except OSError as err:
        raise unreadable(source, err, "a file of raw link bytes") from None
    meta = dict(meta or {})
    meta.setdefault("link", "text" if text else "frames")
    meta.setdefault("extra", {})
    meta["extra"] = {**meta["extra"], "replay": os.path.basename(source)}
    t0 = time.monotonic()

    def stats() -> LinkStats:
        st = pipe.dstats
        elapsed = max(time.monotonic() - t0, 1e-9)
        return LinkStats(elapsed, st.bytes, st.bytes / elapsed, st.frames, pipe.samples,
                         st.crc_errors, st.malformed_frames, st.lost_frames, st.samples_missing,
                         pipe.actuations, None, pipe.complete, pipe.done)
    with handle, atomic_path(out, overwrite=overwrite) as tmp:
        try:
            with CaptureWriter(tmp, flush_interval=None, **meta) as writer:
                pipe = _Pipeline(writer, text, meta.get("sample_rate_hz"), stop_after_actuations,
                                 RELEASE_QUIET_S, RELEASE_MAX_S, supply_volts_per_code,
                                 temperature_events, meta.get("adc_bits"))
                while not pipe.done:
                    try:
                        data = handle.read(chunk)
                    except OSError as err:
                        raise unreadable(source, err, "a file of raw link bytes") from None
                    if not data:
                        pipe.finish(lambda m: None)
                        break
                    pipe.feed(data, lambda m: None)
        except OSError as err:   # the capture's own writes: a full disk
            raise OutputError(str(out), f"cannot be written ({err.strerror or err})") from None
        if require_frames and pipe.dstats.frames == 0:
            what = "text line" if text else "frame"
            raise NoFrames(source, f"no valid {what} in {pipe.dstats.bytes:,} bytes; "
                           f"{out} not written", stats())
    return stats()
