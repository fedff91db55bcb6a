"""A virtual bench device: the board's firmware and coil, as a pure object.

No ports and no clocks: the caller passes the device time ``now`` (s since the device
started) to :meth:`VirtualDevice.receive` (host bytes arriving) and
:meth:`VirtualDevice.read` (the bytes the device's UART has put on the line by then).
:mod:`coildrive.bench.emulator` serves one on a pseudo-terminal.

What it does, like firmware on a real board (``docs/bench.md``, *Virtual bench device*):

* sends ``0x00`` and an INFO frame at start, and INFO again on QUERY_INFO;
* actuates by itself every ``period`` s until the first intact COMMAND frame arrives;
  from then on only on START (the host is in control);
* records each actuation in its buffer, from ``pre_trigger`` s before the switch-on to
  ``post_margin`` s after the current is back at zero (and, with an armature, the plunger
  back open), and streams it at line rate: EVENT frames (PAUSE for the idle samples it
  does not send, SUPPLY, TEMPERATURE, ON, PEAK_END, OFF, SWITCH with a position switch)
  and SAMPLES frames, in sample-index order; REPLY and INFO frames go first at the next
  frame boundary (they do not wait behind a recording);
* the sample codes come from the model actuation of the design's physics (armature
  included) through the board's ADC, the same chain as :func:`coildrive.bench.synth.synth_capture`;
* bytes on the line may be dropped or corrupted (seeded), to exercise a host's counters.

Sample index ``k`` is taken at device time ``k / sample_rate``.
"""

from __future__ import annotations

import math
from collections import OrderedDict, deque
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from ..config import Drive
from ..design.timer import MIN_PERIOD_TICKS, solve_timer
from .messages import Command, Event, EventKind, Info, Message, Opcode, Reply, ReplyStatus, Samples
from .protocol import MAX_SAMPLES_PER_FRAME, FrameDecoder, FrameEncoder
from .capture_file import CaptureEvent
from .synth import (FAULTS, actuation_events, actuation_waveform, adc_scaling, current_codes, faulty_drive,
                    first_sample_at_or_after, operating_point, sense_current, threshold_switch_changes)

#: Longest peak phase the device accepts, s (a coil at full current overheats; our limit).
MAX_PEAK_TIME = 1.0
#: Shortest period between automatic actuations, s.
MIN_AUTO_PERIOD = 0.2
#: Shortest ``period`` accepted, s (a longer actuation makes the device skip the
#: automatic actuations that come while it is busy).
MIN_PERIOD = 1e-3
#: Bits on the line per byte at 8N1 (start, 8 data, stop).
BITS_PER_BYTE = 10
_I32_MAX = 2**31 - 1
_NONE = np.zeros(0, np.int64)


class OptionError(ValueError):
    """A :class:`DeviceOptions` field has a value the device cannot use."""

    def __init__(self, name: str, message: str):
        super().__init__(f"{name}: {message}")
        self.name = name
        self.message = message


@dataclass(frozen=True)
class DeviceOptions:
    """How the virtual device and its coil behave. SI units, temperatures in degC.

    Attributes
    ----------
    supply : bus voltage V (default: the drive's nominal supply).
    coil_temp : coil temperature degC, throughout (default: its reference temperature
        clipped into the ambient range).
    hold_time : s of hold of the automatic actuations.
    period : s between automatic actuations (default: long enough for a recording to
        drain at line rate, at least :data:`MIN_AUTO_PERIOD`).
    first_actuation : s from start to the first automatic actuation.
    resistance_scale, inductance_scale : the real coil against the drive file.
    fault : ``None`` or one of ``open``, ``shorted_turns``, ``stuck`` (as
        :func:`coildrive.bench.synth.faulty_drive`).
    noise_codes : Gaussian ADC noise, codes (one sigma).
    drop_bytes, corrupt_bytes : probability that a byte on the line is lost / changed.
    seed : seeds the noise and the line damage.
    baud : line rate (default: the board's ``[link] baud``).
    pre_trigger, post_margin : s recorded before the switch-on / after the actuation ends.
    max_hold : s; START 0 (hold until STOP) ends by itself after this (a firmware
        watchdog: a lost STOP must not cook the coil), and a longer START is refused.
    samples_per_frame : ADC codes per SAMPLES frame.
    keep_sent : keep a log of every frame sent (:attr:`VirtualDevice.sent`), for tests.
    threshold_switch : a drive without ``[armature]``: report a position switch read as a
        relay's pick-up (``pull_in.current``) and drop-out (``release.current``) thresholds
        (:func:`coildrive.bench.synth.threshold_switch_changes`).
    """

    supply: float | None = None
    coil_temp: float | None = None
    hold_time: float = 0.02
    period: float | None = None
    first_actuation: float = 0.05
    resistance_scale: float = 1.0
    inductance_scale: float = 1.0
    fault: str | None = None
    noise_codes: float = 0.0
    drop_bytes: float = 0.0
    corrupt_bytes: float = 0.0
    seed: int = 0
    baud: int | None = None
    pre_trigger: float = 0.5e-3
    post_margin: float = 1e-3
    max_hold: float = 1.0
    samples_per_frame: int = 64
    keep_sent: bool = False
    threshold_switch: bool = False

    def __post_init__(self) -> None:
        def positive(name: str, value: float | None, allow_zero: bool = False) -> None:
            if value is None:
                return
            ok = math.isfinite(value) and (value >= 0 if allow_zero else value > 0)
            if not ok:
                raise OptionError(name, f"{value!r} must be {'>= 0' if allow_zero else '> 0'}")
        positive("supply", self.supply)
        positive("hold_time", self.hold_time)
        positive("period", self.period)
        positive("first_actuation", self.first_actuation, True)
        positive("resistance_scale", self.resistance_scale)
        positive("inductance_scale", self.inductance_scale)
        positive("noise_codes", self.noise_codes, True)
        positive("pre_trigger", self.pre_trigger, True)
        positive("post_margin", self.post_margin, True)
        positive("max_hold", self.max_hold)
        if self.coil_temp is not None and not (math.isfinite(self.coil_temp) and self.coil_temp > -273.15):
            raise OptionError("coil_temp", f"{self.coil_temp!r} is not a temperature in degC")
        for name in ("drop_bytes", "corrupt_bytes"):
            p = getattr(self, name)
            if not (math.isfinite(p) and 0 <= p < 1):
                raise OptionError(name, f"{p!r} is not a probability in [0, 1)")
        if self.fault is not None and self.fault not in FAULTS:
            raise OptionError("fault", f"{self.fault!r} is not one of {', '.join(FAULTS)}")
        if self.baud is not None and not (isinstance(self.baud, int) and self.baud > 0):
            raise OptionError("baud", f"{self.baud!r} must be a whole number > 0")
        if not 1 <= self.samples_per_frame <= MAX_SAMPLES_PER_FRAME:
            raise OptionError("samples_per_frame", f"{self.samples_per_frame} is outside 1..{MAX_SAMPLES_PER_FRAME}")
        if self.period is not None and self.period < MIN_PERIOD:
            # each automatic actuation is a step of the device's clock: a period of 1 ns
            # would be 10^9 steps a second, and the device would never get back to its port
            raise OptionError("period", f"{self.period:g} s is below {MIN_PERIOD * 1e3:g} ms, the "
                              "shortest time between automatic actuations")
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or not 0 <= self.seed < 2**63:
            raise OptionError("seed", f"{self.seed!r} is not a whole number 0..2^63-1 (numpy's "
                              "random generators take no negative seed)")
        if self.hold_time > self.max_hold:
            raise OptionError("hold_time", f"{self.hold_time:g} s is above the device's hold limit of {self.max_hold:g} s")


@dataclass
class DeviceStats:
    """What the device did so far (counts)."""

    bytes_sent: int = 0          # bytes the UART put on the line (damaged ones included)
    bytes_dropped: int = 0       # of those, lost on the way
    bytes_corrupted: int = 0     # of those, changed on the way
    frames_sent: int = 0
    frames_damaged: int = 0      # frames with at least one byte dropped or changed
    samples_sent: int = 0        # ADC codes in the SAMPLES frames sent
    samples_paused: int = 0      # indices covered by the PAUSE events sent
    actuations: int = 0
    automatic_skipped: int = 0   # automatic actuations skipped: the last one was still streaming
    commands: int = 0


@dataclass(frozen=True)
class SentFrame:
    """One frame as the device sent it (``keep_sent``): sequence number, message, and
    whether any of its bytes / its delimiter (the last byte) was dropped or changed."""

    seq: int
    message: Message
    damaged: bool
    delimiter_damaged: bool = False


@dataclass(frozen=True)
class DamagedFrame:
    """A frame the line damaged (:attr:`VirtualDevice.damaged`): its number among the
    frames sent (0 first, never wrapping), its 16-bit sequence number, its message kind
    (``SAMPLES``, ``EVENT``, ``INFO``, ``REPLY``) and whether its delimiter (the last byte)
    was dropped or changed, which runs it into the next frame."""

    frame: int
    seq: int
    kind: str
    delimiter_damaged: bool


@dataclass(frozen=True)
class LogEntry:
    """Something to report, at device time ``time`` s: ``state on``, ``state off`` or a
    command line ``command <OPCODE> <argument> -> <status>``."""

    time: float
    text: str


@dataclass(frozen=True)
class Settings:
    """Drive settings in force: peak in scheduler ticks, PWM prescaler/period/compare."""

    peak_ticks: int
    prescaler: int
    period_ticks: int
    compare_ticks: int


@dataclass
class _Recording:
    number: int
    t_on: float                  # s, switch-on
    key: tuple                   # (peak s, duty, frequency Hz, hold s): the waveform's settings
    w: object                    # Waveform
    prev_end: int                # one past the last index of the recording before (0: none)
    k_start: int                 # first recorded sample index
    k_end: int = 0               # one past the last recorded sample index
    k_end_time: float = 0.0      # s, when the last recorded sample is taken
    stopped: bool = False        # cut by STOP
    peak_cut: bool = False       # cut during the peak: no hold phase, no PEAK_END

    @property
    def t_off(self) -> float:
        """s, the final switch-off."""
        return self.t_on + float(self.w.events["off"])


@dataclass
class _Item:
    ready: float                 # s: the content exists from then on
    order: int
    message: Message | None      # None: raw bytes
    raw: bytes = b""
    data: bool = False           # part of a recording (not a reply / info)
    seq: int = 0                 # sequence number, given when the frame goes on the line

    @property
    def key(self) -> tuple:
        m = self.message
        index = m.first_index if isinstance(m, Samples) else getattr(m, "index", None)
        return (self.order, type(m).__name__, getattr(m, "kind", None), index)


class LineOutput:
    """What every emulated device does alike: it advances to a device time (``_advance``),
    and hands out the bytes put on the line (``_out``) and its log (``_log``) once."""

    _out: bytearray
    _log: list

    def _advance(self, now: float) -> None:
        raise NotImplementedError

    def read(self, now: float) -> bytes:
        """The bytes the device has put on the line since the last call, up to ``now`` s."""
        self._advance(now)
        out = bytes(self._out)
        self._out.clear()
        return out

    def log(self, now: float | None = None) -> list[LogEntry]:
        """Log entries up to ``now`` (default: the device time reached), oldest first; each
        is returned once."""
        if now is not None:
            self._advance(now)
        out, self._log = self._log, []
        return out


class VirtualDevice(LineOutput):
    """The virtual board: bytes in, bytes out, as device time goes on.

    Parameters
    ----------
    drive : the drive (its board gives the ADC, timer, tick and link).
    options : :class:`DeviceOptions`.
    design : the :class:`~coildrive.design.Design` of ``drive`` (made when not given):
        its peak time, hold duty and frequency as the timer makes them are the settings
        in force at start.

    Examples
    --------
    >>> from coildrive.config import load_drive
    >>> from coildrive.resources import example
    >>> dev = VirtualDevice(load_drive(example("demo-valve")))
    >>> dec = FrameDecoder()
    >>> msgs = dec.feed(dev.read(0.5))
    >>> type(msgs[0]).__name__, sorted({m.kind.name for m in msgs if isinstance(m, Event)})[:3]
    ('Info', ['OFF', 'ON', 'PAUSE'])
    """

    def __init__(self, drive: Drive, options: DeviceOptions | None = None, design=None):
        if design is None:
            from ..design import design as make_design
            design = make_design(drive)
        self.options = options = options or DeviceOptions()
        self.design = design
        self.drive = drive = design.drive
        #: a current-mode hold: its thresholds end the hold's segments (the duty and
        #: frequency settings are then the fixed-duty fallback's, not in force)
        self._thresholds = design.hold.thresholds if design.hold.current_mode is not None else None
        if not design.pull_in.peak_ticks:
            raise ValueError("the design has no peak phase (the pull-in current is never reached)")
        board = drive.board
        self._set_board(drive, options)
        from ..design import firmware_setting  # the compare and peak its firmware runs at this supply

        duty, peak = firmware_setting(design, self.supply, self.coil_temp)
        ticks = round(peak * self.tick_rate)
        #: a boosted peak ends at its threshold, for this coil (s): the ticks are its time-out
        self._boost_peak = None
        if design.boost is not None:
            _, r_f, l_f = faulty_drive(drive, options.fault)
            self._boost_peak = firmware_setting(design, self.supply, self.coil_temp,
                                                options.resistance_scale * r_f,
                                                options.inductance_scale * l_f)[1]
            ticks = design.pull_in.peak_ticks
        self.settings = Settings(ticks, design.timer.prescaler,
                                 design.timer.period_ticks, round(duty * design.timer.period_ticks))
        if options.threshold_switch and self._thresholds is not None:
            raise ValueError("a threshold switch averages the current over the PWM period of a voltage-mode "
                             "hold; a current-mode hold has none fixed: leave it out")
        if options.threshold_switch and drive.armature is not None:
            raise ValueError("a threshold switch stands in for a coil without [armature]; this "
                             "drive's armature model has its own position switch: leave it out")
        self.info = self._make_info(drive.armature is not None or options.threshold_switch)
        self._start_line(options)

    def _set_board(self, drive: Drive, options: DeviceOptions) -> None:
        """The board's clocks and line rate, and the bench point (supply V, coil degC)."""
        board = drive.board
        self.sample_rate = float(board.adc.sample_rate)
        self.baud = int(options.baud or board.link.baud)
        self.byte_time = BITS_PER_BYTE / self.baud
        self.tick_rate = float(board.tick.rate)
        self.supply, self.coil_temp = operating_point(drive, options.supply, options.coil_temp)

    def _make_info(self, has_position_switch: bool) -> Info:
        """The INFO frame: sample rate, ADC bits and scaling, firmware id."""
        board = self.drive.board
        rate = Fraction(self.sample_rate).limit_denominator(2**32 - 1)
        _, apc = adc_scaling(self.drive)
        return Info(rate.numerator, rate.denominator, board.adc.bits, apc, 0,
                    f"coildrive emulate {self.drive.name} on {board.name}"[:64],
                    has_position_switch=has_position_switch)

    def _start_line(self, options: DeviceOptions) -> None:
        """The line, the queues and the automatic actuations, as at start (after
        ``sample_rate``, ``byte_time`` and ``info`` are set)."""
        self.stats = DeviceStats()
        self.sent: list[SentFrame] = []
        self.damaged: list[DamagedFrame] = []
        """Every frame the line damaged, in order (``emulate --line-log`` writes them)."""
        self.host = FrameDecoder()
        self._encoder = FrameEncoder()
        self._noise_seed = options.seed
        self._line_rng = np.random.default_rng([options.seed, 2])
        self._cache: OrderedDict[tuple, object] = OrderedDict()
        self._control: deque[_Item] = deque()
        self._data: deque[_Item] = deque()
        self._current: list | None = None    # [wire, start, bytes sent, item, damaged, delimiter damaged]
        self._line_free = 0.0
        self._out = bytearray()
        self._log: list[LogEntry] = []
        self._now = 0.0
        self._auto = True
        self._rec: _Recording | None = None
        self._logged_on = self._logged_off = True
        self._stream_end = 0               # one past the last index recorded so far
        self._count = 0
        self._plan_items: list[_Item] = []
        self._queue(_Item(0.0, 0, None, b"\x00"))
        self._queue(_Item(0.0, 1, self.info))
        if options.period is not None:
            self.period = float(options.period)
        else:
            span = 1.25 * self._recording_span(options.hold_time)
            self.period = max(MIN_AUTO_PERIOD, math.ceil(span * 1e3) / 1e3)   # whole ms
        self._next_auto = float(options.first_actuation)

    # ------------------------------------------------------------------ settings
    @property
    def peak_time(self) -> float:
        """Peak phase in force, s (whole scheduler ticks; a boosted peak ends at its
        threshold, or at those ticks, its time-out, if sooner)."""
        t = self.settings.peak_ticks / self.tick_rate
        return t if self._boost_peak is None else min(t, self._boost_peak)

    @property
    def frequency(self) -> float:
        """Hold PWM frequency in force, Hz (as the timer makes it)."""
        t = self.drive.board.timer
        return t.clock / (self.settings.prescaler * self.settings.period_ticks)

    @property
    def duty(self) -> float:
        """Hold duty in force (compare / period)."""
        return self.settings.compare_ticks / self.settings.period_ticks

    @property
    def automatic(self) -> bool:
        """True until the first intact COMMAND frame arrives."""
        return self._auto

    def frequency_range(self) -> tuple[float, float]:
        """Lowest and highest PWM frequency the board's timer makes, Hz."""
        t = self.drive.board.timer
        p_max = max(t.prescalers) if t.prescalers else t.prescaler_max
        p_min = min(t.prescalers) if t.prescalers else 1
        low = t.clock / (p_max * 2**t.bits)
        high = t.clock / (p_min * MIN_PERIOD_TICKS)
        if t.max_pwm_frequency > 0:
            high = min(high, t.max_pwm_frequency)
        return low, high

    # ------------------------------------------------------------------ host side
    def receive(self, data: bytes, now: float) -> list[Reply]:
        """Host bytes arriving at device time ``now`` s; returns the replies queued."""
        self._advance(now)
        replies = []
        for m in self.host.feed(data):
            if isinstance(m, Command):
                replies.append(self._command(m, now))
        return replies

    def next_due(self) -> float | None:
        """Device time of the next thing the device will do by itself, s (``None``: nothing)."""
        times = []
        if self._current is not None:
            times.append(self._current[1] + (self._current[2] + 1) * self.byte_time)
        for q in (self._control, self._data):
            if q:
                times.append(max(self._line_free, q[0].ready))
        if self._auto:
            times.append(self._next_auto)
        rec = self._rec
        if rec is not None and not self._logged_off:
            times.append(rec.t_off)
        return min(times) if times else None

    def busy(self, now: float | None = None) -> bool:
        """An actuation runs or its recording is still being recorded or sent."""
        if now is not None:
            self._advance(now)
        rec = self._rec
        if rec is None:
            return False
        sending = bool(self._data) or (self._current is not None and self._current[3].data)
        return sending or self._now < rec.k_end_time

    def shutdown(self, now: float) -> None:
        """Switch the coil off now (as STOP) and stop actuating by itself."""
        self._advance(now)
        self._auto = False
        self._stop(now)
        if self._rec is not None and self._logged_on and not self._logged_off:
            self._logged_off = True     # the switch opens now or at the end of the on-time
            self._log.append(LogEntry(max(now, self._rec.t_off), "state off"))

    # ------------------------------------------------------------------ commands
    def _command(self, cmd: Command, now: float) -> Reply:
        self.stats.commands += 1
        self._auto = False
        status, value = self._execute(cmd, now)
        reply = Reply(cmd.seq if cmd.seq is not None else 0, int(cmd.opcode), int(status), int(value))
        self._queue(_Item(now, 0, reply))
        if cmd.opcode == Opcode.QUERY_INFO and status == ReplyStatus.OK:
            self._queue(_Item(now, 1, self.info))
        name = cmd.opcode.name if isinstance(cmd.opcode, Opcode) else str(int(cmd.opcode))
        self._log.append(LogEntry(now, f"command {name} {cmd.argument} -> {ReplyStatus(status).name}"))
        return reply

    def _execute(self, cmd: Command, now: float) -> tuple[int, int]:
        op, arg = cmd.opcode, int(cmd.argument)
        s = self.settings
        if op == Opcode.START:
            if self.busy():
                return ReplyStatus.BUSY, 0
            limit_us = int(round(self.options.max_hold * 1e6))
            if arg > limit_us:
                return ReplyStatus.OUT_OF_RANGE, limit_us
            hold = self.options.max_hold if arg == 0 else arg * 1e-6
            periods = max(1, int(round(hold * self.frequency)))
            self._start(now, periods / self.frequency)
            return ReplyStatus.OK, (0 if arg == 0 else int(round(periods / self.frequency * 1e6)))
        if op == Opcode.STOP:
            self._stop(now)
            return ReplyStatus.OK, 0
        if op == Opcode.SET_PEAK_TIME:
            ticks = int(round(arg * 1e-6 * self.tick_rate))
            if ticks < 1 or arg * 1e-6 > MAX_PEAK_TIME:
                return ReplyStatus.OUT_OF_RANGE, int(round(self.peak_time * 1e6))
            self.settings = Settings(ticks, s.prescaler, s.period_ticks, s.compare_ticks)
            return ReplyStatus.OK, int(round(self.peak_time * 1e6))
        if self._thresholds is not None and op in (Opcode.SET_HOLD_DUTY, Opcode.SET_HOLD_FREQUENCY):
            # a current-mode hold has no duty or frequency to set: its thresholds make them
            return ReplyStatus.OUT_OF_RANGE, (self._duty_code() if op == Opcode.SET_HOLD_DUTY
                                              else int(round(self.frequency)))
        if op == Opcode.SET_HOLD_DUTY:
            if arg > 0xFFFF:
                return ReplyStatus.OUT_OF_RANGE, self._duty_code()
            compare = int(round(arg * s.period_ticks / 0xFFFF))
            self.settings = Settings(s.peak_ticks, s.prescaler, s.period_ticks, compare)
            return ReplyStatus.OK, self._duty_code()
        if op == Opcode.SET_HOLD_FREQUENCY:
            if self.drive.shared_timer is not None:
                # a channel of a system file: its board's other channels share the timer, so
                # one channel cannot move it; the frequency in force is the answer
                now_hz = int(round(self.frequency))
                return (ReplyStatus.OK if arg == now_hz else ReplyStatus.OUT_OF_RANGE), now_hz
            low, high = self.frequency_range()
            if not low <= arg <= high:
                return ReplyStatus.OUT_OF_RANGE, int(round(self.frequency))
            t = self.drive.board.timer
            ts = solve_timer(t.clock, t.bits, t.prescaler_max, float(arg),
                             self.drive.hold.frequency_tolerance, t.prescalers)
            compare = int(round(self.duty * ts.period_ticks))
            self.settings = Settings(s.peak_ticks, ts.prescaler, ts.period_ticks, compare)
            return ReplyStatus.OK, int(round(self.frequency))
        if op == Opcode.QUERY_INFO:
            return ReplyStatus.OK, 0
        return ReplyStatus.UNKNOWN_OPCODE, 0

    def _duty_code(self) -> int:
        return int(round(self.duty * 0xFFFF))

    # ------------------------------------------------------------------ physics
    def _waveform(self, key: tuple):
        """The model actuation for (peak s, duty, frequency Hz, hold s), cached."""
        w = self._cache.get(key)
        if w is None:
            w = self._make_waveform(key)
            self._cache[key] = w
            while len(self._cache) > 16:
                self._cache.popitem(last=False)
        else:
            self._cache.move_to_end(key)
        return w

    def _make_waveform(self, key: tuple):
        """The model actuation for (peak s, duty, frequency Hz, hold s)."""
        o = self.options
        peak, duty, freq, hold = key
        if self._thresholds is not None:
            return actuation_waveform(self.drive, self.supply, self.coil_temp, peak, duty, freq, hold,
                                      resistance_scale=o.resistance_scale,
                                      inductance_scale=o.inductance_scale, fault=o.fault,
                                      waveform=self._current_mode_waveform)
        return actuation_waveform(self.drive, self.supply, self.coil_temp, peak, duty, freq, hold,
                                  resistance_scale=o.resistance_scale,
                                  inductance_scale=o.inductance_scale, fault=o.fault)

    def _current_mode_waveform(self, drive, supply, coil_temp, peak, duty, freq, hold, r_factor, l_factor,
                               label=""):
        """:func:`~coildrive.model.waveform.actuation`'s signature over the current-mode
        hold's actuation (:func:`coildrive.design.hold_current.current_mode_actuation`:
        the design's thresholds end the segments; ``duty`` and ``freq`` are not used)."""
        from ..design.hold_current import current_mode_actuation

        return current_mode_actuation(drive, self._thresholds, supply, coil_temp, peak, hold,
                                      r_factor, l_factor, label=label)

    def _recording_span(self, hold_time: float) -> float:
        """s from the start of a recording to the end of its stream, at the settings in force."""
        return self._span_of(self._waveform((self.peak_time, self.duty, self.frequency, hold_time)))

    def _span_of(self, w) -> float:
        """s from the start of the recording of waveform ``w`` to the end of its stream."""
        length = self.options.pre_trigger + float(w.time[-1]) + self.options.post_margin
        samples = length * self.sample_rate
        per = self.options.samples_per_frame
        frame_bytes = 4 + 2 * per + 5 + 2 + per // 127   # payload, header+CRC, COBS (worst), delimiter
        wire = math.ceil(samples / per) * frame_bytes + 20 * 10   # + a few event frames
        return max(length, wire * self.byte_time) + length

    def _start(self, now: float, hold_time: float) -> None:
        self._record(now, (self.peak_time, self.duty, self.frequency, hold_time))

    def _record(self, now: float, key: tuple) -> None:
        """Start the actuation of the waveform ``key`` at ``now`` s and plan its recording."""
        self._count += 1
        self.stats.actuations += 1
        k_on = first_sample_at_or_after(now, self.sample_rate)
        k_start = max(self._stream_end, k_on - int(round(self.options.pre_trigger * self.sample_rate)))
        rec = _Recording(self._count, now, key, self._waveform(key), self._stream_end, k_start)
        self._rec = rec
        self._logged_on = self._logged_off = False
        for item in self._plan(rec):
            self._queue(item)

    def _start_automatic(self, now: float) -> None:
        """An automatic actuation at ``now`` s."""
        self._start(now, self.options.hold_time)

    def _stop(self, now: float) -> None:
        """STOP at ``now``: in the peak the switch opens at once; in the hold at the end of
        the PWM on-time that runs (at once when the switch is already off), as a timer with
        a preloaded compare register does."""
        rec = self._rec
        if rec is None or now >= rec.t_off or rec.stopped:
            return
        peak, duty, freq, _ = rec.key
        rel = now - rec.t_on
        if rel < peak:
            key = (max(rel, 1.0 / self.sample_rate), 0.0, freq, 0.0)
            rec.peak_cut = True
        elif self._thresholds is not None:
            # a current-mode hold: the switch opens at the first threshold turn-off at or after
            # the command (the end of the hold of current_mode_actuation)
            key = (peak, duty, freq, rel - peak)
        else:
            periods = int(math.floor((rel - peak) * freq)) + 1
            key = (peak, duty, freq, periods / freq)
            if abs(periods / freq - rec.key[3]) * freq < 0.5:
                return
        self._replan(rec, key, now)

    def _replan(self, rec: _Recording, key: tuple, now: float) -> None:
        """A recording cut at ``now`` s: its waveform becomes ``key``'s, and the frames not
        sent by then are planned again."""
        rec.stopped = True
        rec.key = key
        rec.w = self._waveform(key)
        old = {i.key for i in self._plan_items if i.ready <= now}
        self._data = deque(i for i in self._data if i.ready <= now)
        for item in self._plan(rec):
            if item.ready > now or item.key not in old:
                self._queue(item)

    def _plan(self, rec: _Recording) -> list[_Item]:
        """Every frame of a recording, with the time its content exists, in stream order."""
        fs = self.sample_rate
        o = self.options
        w = rec.w
        length = float(w.time[-1])
        rec.k_end = int(math.floor((rec.t_on + length + o.post_margin) * fs)) + 1
        rec.k_end_time = rec.k_end / fs
        self._stream_end = rec.k_end
        k = np.arange(rec.k_start, rec.k_end, dtype=np.int64)
        t_rel = k / fs - rec.t_on
        inside = (t_rel >= 0) & (t_rel <= length)
        current = np.zeros(k.size)
        current[inside] = self._sensed(w, t_rel[inside])
        noise = None
        if o.noise_codes > 0:
            noise = np.random.default_rng([self._noise_seed, 1, rec.number]).normal(0.0, o.noise_codes, k.size)
        codes = current_codes(self.drive, current, noise)
        items: list[_Item] = []
        k_on = first_sample_at_or_after(rec.t_on, fs)
        # PAUSE for the indices not sent since the last recording (split to fit an i32)
        start = rec.prev_end
        gap = rec.k_start - start
        while gap > 0:
            n = min(gap, _I32_MAX)
            items.append(_Item(rec.t_on, 0, Event(EventKind.PAUSE, start & 0xFFFFFFFF, n), data=True))
            start += n
            gap -= n
        board = self.drive.board
        if board.supply_sense is not None:   # (a board without one reads no supply: no SUPPLY event)
            code = min(max(math.floor(self.supply / board.supply_sense.divider / board.adc.reference
                                      * 2**board.adc.bits), 0), 2**board.adc.bits - 1)
            items.append(_Item(rec.t_on, 1, Event(EventKind.SUPPLY, k_on & 0xFFFFFFFF, int(code)), data=True))
        items.append(_Item(rec.t_on, 1, Event(EventKind.TEMPERATURE, k_on & 0xFFFFFFFF,
                                              int(round(self.coil_temp * 1000))), data=True))
        for e in self._events(rec):
            items.append(_Item(max(rec.t_on, e.index / fs), 2,
                               Event(EventKind(e.kind), e.index & 0xFFFFFFFF, e.value), data=True))
        per = o.samples_per_frame
        for a in range(0, k.size, per):
            b = min(a + per, k.size)
            first = int(k[a])
            items.append(_Item(max(rec.t_on, int(k[b - 1]) / fs), 3,
                               Samples(first & 0xFFFFFFFF, codes[a:b]), data=True))
        items.sort(key=lambda i: (i.ready, i.order))
        self._plan_items = items
        return items

    def _sensed(self, w, t_rel: np.ndarray) -> np.ndarray:
        """Current (A) the sense resistor carries ``t_rel`` s into the waveform ``w``."""
        return sense_current(self.drive, w, t_rel, self.options.fault)

    def _events(self, rec: _Recording) -> list:
        """The ON, PEAK_END, OFF (and position-switch) events of a recording."""
        out = [e for e in actuation_events(rec.w, rec.t_on, self.sample_rate, self.options.fault)
               if not (rec.peak_cut and e.kind == EventKind.PEAK_END)]
        if self.options.threshold_switch and self.options.fault not in ("open", "stuck"):
            d = self.drive
            out += [CaptureEvent(first_sample_at_or_after(rec.t_on + t, self.sample_rate),
                                 int(EventKind.SWITCH), level)
                    for t, level in threshold_switch_changes(rec.w, d.pull_in.current,
                                                             d.release.current, rec.key[2])]
        return out

    # ------------------------------------------------------------------ time
    def _advance(self, now: float) -> None:
        if now < self._now:
            now = self._now    # time does not go back
        while self._auto and self._next_auto <= now:
            t = self._next_auto
            self._run(t)
            if self.busy():
                self.stats.automatic_skipped += 1
            else:
                self._queue(_Item(t, 1, self.info))
                self._start_automatic(t)
            self._next_auto = t + self.period
        self._run(now)

    def _run(self, until: float) -> None:
        """Advance the line and the switch log to ``until`` s."""
        rec = self._rec
        if rec is not None:
            if not self._logged_on and rec.t_on <= until:
                self._logged_on = True
                self._log.append(LogEntry(rec.t_on, "state on"))
            if not self._logged_off and rec.t_off <= until:
                self._logged_off = True
                self._log.append(LogEntry(rec.t_off, "state off"))
        bt = self.byte_time
        while True:
            if self._current is None:
                pick = self._next_item()
                if pick is None or pick[0] > until:
                    break
                start, q = pick
                item = q.popleft()
                if item.message is None:
                    wire = item.raw
                else:
                    item.seq = self._encoder.seq
                    wire = self._encoder.encode(item.message)
                self._current = [wire, start, 0, item, False, False]
            wire, start, sent, item, damaged, _ = self._current
            done = min(len(wire), int(math.floor((until - start) / bt + 1e-9)))
            if done > sent:
                hit = self._emit(wire[sent:done])
                if hit.size:
                    self._current[4] = True
                    self._current[5] = bool(done == len(wire) and hit[-1] == done - sent - 1)
                self._current[2] = done
            if done < len(wire):
                break
            self._line_free = start + len(wire) * bt
            self._finish(self._current)
            self._current = None
        self._now = max(self._now, until)

    def _next_item(self) -> tuple[float, deque] | None:
        best = None
        for prio, q in enumerate((self._control, self._data)):
            if q:
                start = max(self._line_free, q[0].ready)
                if best is None or start < best[0]:
                    best = (start, q)
        return best

    def _finish(self, current: list) -> None:
        wire, _, _, item, damaged, end_damaged = current
        if item.message is None:
            return
        m = item.message
        if damaged:
            self.damaged.append(DamagedFrame(self.stats.frames_sent, item.seq,
                                             type(m).__name__.upper(), bool(end_damaged)))
        self.stats.frames_sent += 1
        self.stats.frames_damaged += bool(damaged)
        if isinstance(m, Samples):
            self.stats.samples_sent += len(m.codes)
        elif isinstance(m, Event) and m.kind == EventKind.PAUSE:
            self.stats.samples_paused += m.value
        if self.options.keep_sent:
            self.sent.append(SentFrame(item.seq, m, bool(damaged), end_damaged))

    def _emit(self, chunk: bytes) -> np.ndarray:
        """Put bytes on the line, damaged as the options say; the positions damaged."""
        o = self.options
        self.stats.bytes_sent += len(chunk)
        if o.drop_bytes == 0 and o.corrupt_bytes == 0:
            self._out += chunk
            return _NONE
        rng = self._line_rng
        arr = np.frombuffer(chunk, np.uint8).copy()
        corrupt = rng.random(arr.size) < o.corrupt_bytes
        arr[corrupt] ^= rng.integers(1, 256, int(corrupt.sum()), dtype=np.uint8)
        keep = rng.random(arr.size) >= o.drop_bytes
        self.stats.bytes_corrupted += int(np.count_nonzero(corrupt & keep))
        self.stats.bytes_dropped += int(np.count_nonzero(~keep))
        self._out += arr[keep].tobytes()
        return np.flatnonzero(corrupt | ~keep)

    def _queue(self, item: _Item) -> None:
        (self._data if item.data else self._control).append(item)
