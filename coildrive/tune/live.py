"""Hold tuning live on the bench: find where the armature drops out, recommend a hold.

The procedure (:class:`LiveTuner`, over a :class:`~coildrive.bench.link.DeviceLink`-like
object; it knows no CLI, files or ports):

1. QUERY_INFO; set the design's peak time (rounded *down* to whole microseconds, so the
   device never runs a longer peak) and hold frequency. A device that answers with a
   longer peak is refused.
2. Actuate at the design duty: the armature must seat (a SWITCH = 1 event when the
   board has a position switch, else the current dip of the pull-in) and stay seated
   through the hold. No seating is a stuck armature; a drop-out already at the design
   duty is a hold too weak for this bench. Both end the procedure (exit 1 in the CLI).
3. Search the duty downward: coarse steps of ``coarse_step`` x the design duty until the
   armature drops out during the hold (down to ``floor`` x the design duty), then
   bisection between the last held and the first dropped duty until they are less than
   ``resolution`` x the design duty apart (or one duty step of the device). The bench
   drop-out duty is the middle of that last bracket. The search runs ``repeats`` times
   for the spread.
4. Drop-out detection (:func:`judge_actuation`): from the SWITCH input when the INFO
   flag says the board has one (a SWITCH = 0 during the hold); else from the current's
   signature -- a rise of the period-averaged hold current above its running minimum
   (with the armature seated the hold current only falls towards its steady state; an
   opening gap lowers L and ``i = lambda / L`` rises), or, when the design-duty
   actuation showed a release bump, the lack of one at the final turn-off (the
   armature is already open). Limits are in docs/tuning.md.
5. Safety: any sample above the design's over-current threshold (1.25 x its worst-case
   peak or hold current, the header's ``ADC_OVER_CURRENT``) or at the ADC's full scale
   stops the device at once (over-current); a peak phase whose highest current stays
   below the design's open-load threshold is an open coil. STOP goes out in a
   ``finally`` on every exit path, Ctrl-C included.

The recommendation (:func:`recommend`): the highest bench drop-out current over the
repeats, scaled to the worst corner by the model's own corner grid (the largest stay
current over the corners over the stay current at the bench point: with an
``[armature]`` it is the inductance tolerance that moves it), times the hold margin
(``armature.current_margin``, or ``hold.current / release.current`` without an
armature), and never below the model's minimum hold current
(:func:`coildrive.tune.minimum_hold_current`). Its duty comes from
:func:`coildrive.design.design` of the drive with that ``hold.current``: the lowest
supply and hottest coil of every corner, with self-heating, as for any design.

Units: SI (A, V, s, Hz), temperatures in degC; duty as a fraction 0..1.
"""

from __future__ import annotations

import dataclasses
import math
import queue
import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..config import Drive
from ..errors import InputError
from .dropout import Judgement, judge_actuation
from .failures import LiveFailure
from .live_model import (HOLD_SETTLE_TAUS, BenchPoint, LiveRecommendation, bench_point,
                         default_hold_time, hold_figures, model_dropout_duty, model_stay_current,
                         recommend)
from .search import RepeatResult, repeat_result, search_dropout

#: Wall-clock time without new samples, after the OFF and the current back at zero,
#: that ends an actuation's stream (s; the device may stream only what it recorded).
QUIET_S = 0.15
#: Slack on the device's peak duration, in samples, on top of one scheduler tick.
PEAK_SLACK_SAMPLES = 2
#: Poll interval while the device answers BUSY, s.
BUSY_POLL_S = 0.02
#: Samples kept before the ON event for the analysis' idle level.
PRE_SAMPLES = 200

DETECTIONS = ("auto", "switch", "signature")
"""How drop-out is detected: the position switch when there is one, or as asked."""


# --------------------------------------------------------------------------- options
@dataclass(frozen=True)
class LiveOptions:
    """What the live search does.

    ``repeats`` searches; ``supply`` V / ``coil_temp`` degC of the bench (``None``: the
    device's SUPPLY events, else the drive's nominal supply / the coil's reference
    temperature within the ambient range); ``hold_time`` s per actuation (0: automatic,
    :data:`HOLD_SETTLE_TAUS` time constants); ``coarse_step``, ``resolution`` and
    ``floor`` as fractions of the design duty; ``margin`` the hold margin (``None``: the
    drive's); ``timeout`` s of slack on top of the expected time of each actuation;
    ``detect``: ``"auto"`` (the position switch when the INFO flag says there is one,
    else the current's signature), ``"switch"`` or ``"signature"``.
    """

    repeats: int = 3
    supply: float | None = None
    coil_temp: float | None = None
    hold_time: float = 0.0
    coarse_step: float = 0.10
    resolution: float = 0.01
    floor: float = 0.10
    margin: float | None = None
    timeout: float = 10.0
    detect: str = "auto"

    def check(self) -> None:
        """Raise :class:`InputError` naming the option for a value out of range."""
        check_bench_options(self)
        if not (math.isfinite(self.hold_time) and 0 <= self.hold_time <= 10.0):
            raise InputError("--hold-time", "", f"{self.hold_time:g} s is out of range, expected 0 "
                             "(automatic) up to 10 s")
        if not 0 < self.coarse_step <= 0.5:
            raise InputError("--coarse-step", "", f"{self.coarse_step:g} is out of range, expected a "
                             "fraction of the design duty in (0, 0.5]")
        if not 0 < self.resolution <= self.coarse_step:
            raise InputError("--resolution", "", f"{self.resolution:g} is out of range, expected a "
                             f"fraction of the design duty in (0, {self.coarse_step:g}] (the coarse step)")
        if not 0 <= self.floor < 1:
            raise InputError("--floor", "", f"{self.floor:g} is out of range, expected a fraction of "
                             "the design duty in [0, 1)")
        if self.margin is not None and not self.margin >= 1.0:
            raise InputError("--margin", "", f"{self.margin:g} is below 1, expected a factor >= 1 on "
                             "the bench drop-out current")
        if self.detect not in DETECTIONS:
            raise InputError("--detect", "", f"{self.detect!r} is not one of {', '.join(DETECTIONS)}")


def check_bench_options(o) -> None:
    """The options every live tune shares (``repeats``, ``supply``, ``coil_temp``,
    ``timeout``): :class:`InputError` naming the option for a value out of range."""
    if not 1 <= o.repeats <= 100:
        raise InputError("--repeats", "", f"{o.repeats} is out of range, expected 1..100")
    if o.supply is not None and not (math.isfinite(o.supply) and o.supply > 0):
        raise InputError("--supply", "", f"{o.supply:g} V must be greater than zero")
    if o.coil_temp is not None and not (math.isfinite(o.coil_temp) and o.coil_temp > -273.15):
        raise InputError("--coil-temp", "", f"{o.coil_temp:g} degC is not a temperature")
    if not o.timeout > 0:
        raise InputError("--timeout", "", f"{o.timeout:g} s must be greater than zero")


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class LiveActuation:
    """One actuation of the procedure: what was asked, what the device set, the verdict."""

    number: int
    repeat: int
    step: str
    duty_requested: float
    duty: float
    hold_time_s: float
    on_index: int
    judgement: Judgement

    def to_dict(self) -> dict:
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "judgement"}
        out.update(self.judgement.to_dict())
        return out


@dataclass
class SessionResult:
    """What every live tune records of its session: the drive, its design and the options;
    the bench point, the device (from its INFO), how latching or drop-out is detected, the
    over-current and open-load limits (A); how it ended (``failure``: code and message),
    whether the STOP was acknowledged, the commands sent, the link's statistics, notes and
    the time taken (s)."""

    drive: Drive
    design: object
    options: object
    point: BenchPoint | None = None
    device: dict = field(default_factory=dict)
    detection: str = ""
    over_current_a: float = 0.0
    open_load_a: float = 0.0
    failure: tuple[str, str] | None = None
    stopped: bool = False
    stop_detail: str = ""
    commands: list[dict] = field(default_factory=list)
    link: dict = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    seconds: float = 0.0


@dataclass
class LiveResult(SessionResult):
    """Everything a live tuning found (plain data; see docs/tuning.md for the JSON)."""

    hold_time_s: float = 0.0
    resolution_duty: float = 0.0
    floor_duty: float = 0.0
    actuations: list[LiveActuation] = field(default_factory=list)
    repeats: list[RepeatResult] = field(default_factory=list)
    model_dropout_duty: float = math.nan
    model_dropout_current_a: float = math.nan
    recommendation: LiveRecommendation | None = None

    @property
    def ok(self) -> bool:
        """A recommendation whose design passes, and the device acknowledged the STOP."""
        return (self.failure is None and self.recommendation is not None
                and self.recommendation.design_ok and self.stopped)

    def duties(self) -> np.ndarray:
        return np.array([r.dropout_duty for r in self.repeats], float)

    def currents(self) -> np.ndarray:
        return np.array([r.dropout_current_a for r in self.repeats], float)

    @property
    def dropout_duty(self) -> float:
        """Mean bench drop-out duty over the repeats (``nan`` without one)."""
        d = self.duties()
        return float(d.mean()) if d.size else math.nan

    @property
    def dropout_duty_spread(self) -> float:
        """Highest minus lowest drop-out duty over the repeats."""
        d = self.duties()
        return float(d.max() - d.min()) if d.size else math.nan


# --------------------------------------------------------------------------- the procedure
class _Unwrap:
    """Device sample indices (mod 2**32) to increasing 64-bit integers."""

    def __init__(self):
        self.base = None
        self.last = 0

    def __call__(self, raw: int) -> int:
        raw = int(raw) & 0xFFFFFFFF
        if self.base is None:
            self.base = raw
            self.last = 0
            return raw
        step = (raw - (self.base + self.last)) & 0xFFFFFFFF
        if step >= 1 << 31:
            step -= 1 << 32
        self.last += step
        return self.base + self.last


Progress = Callable[[int, int, str], None]
"""``progress(done, total, message)``: actuations done, an estimate of the total, what happened."""


class LiveTuner:
    """The live procedure over ``link`` (a :class:`~coildrive.bench.link.DeviceLink` or
    anything with its ``info``, ``subscribe()``, ``command()`` and ``stats()``).

    ``design`` is the :class:`~coildrive.design.Design` of the drive the firmware runs;
    ``progress`` is called after each actuation. :meth:`run` returns a
    :class:`LiveResult`; every failure (and Ctrl-C) is in ``result.failure``, and the
    device has been sent STOP. A hold live tuning cannot step (a current-mode or
    closed-loop hold; a latching coil, whose pulses
    :class:`~coildrive.tune.latch_live.LatchLiveTuner` tunes on the same session) raises
    :class:`InputError` here, the offline sweep's refusal
    (:func:`coildrive.tune.sweep.check_tunable`).
    """

    def __init__(self, link, design, options: LiveOptions | None = None,
                 progress: Progress | None = None, clock: Callable[[], float] = time.monotonic):
        self.design = design
        self.drive: Drive = design.drive
        self.options = options or LiveOptions()
        self.options.check()
        # the offline sweep's refusals, one wording (a current-mode hold's switching over the
        # coil from cold to settled is the design's alone: design/current_sweep.py)
        from .sweep import check_tunable

        check_tunable(self.drive, "live tuning steps")
        self._open_session(link, progress, clock)
        self.result = LiveResult(drive=self.drive, design=design, options=self.options)
        self._frequency = float(design.hold.frequency_hz)
        self._ripple = 0.0
        self._bump_expected = False

    def _open_session(self, link, progress: Progress | None, clock: Callable[[], float]) -> None:
        """The link's state shared by every live procedure (this one and a latching coil's,
        :mod:`coildrive.tune.latch_live`): queues, sample indices, the device's events."""
        self.link = link
        self.progress = progress
        self.clock = clock
        self._q = None
        self._unwrap = _Unwrap()
        self._samples: list[tuple[int, np.ndarray]] = []   # (first index, codes), arrival order
        self._events: list[tuple[int, int, int, int]] = []  # (arrival, index, kind, value)
        self._replies: list[tuple[int, object]] = []        # (arrival, Reply)
        self._arrival = 0
        self._info = None
        self._limit_code = None
        self._full_code = None
        self._supply_codes: list[int] = []
        self._temperatures: list[int] = []
        self._last_samples_at = 0.0
        self._expected_total = 0
        self._t0 = clock()

    # ------------------------------------------------------------------ plumbing
    def _log(self, opcode, argument, reply=None, note: str = "") -> None:
        from ..bench.messages import Opcode, ReplyStatus

        def name(enum, v):
            try:
                return enum(v).name
            except ValueError:
                return str(v)
        entry = {"t_s": round(self.clock() - self._t0, 6), "opcode": name(Opcode, opcode), "argument": int(argument)}
        if reply is not None:
            entry["status"] = name(ReplyStatus, reply.status)
            entry["value"] = int(reply.value)
        if note:
            entry["note"] = note
        self.result.commands.append(entry)

    def _pump(self, timeout: float) -> bool:
        """Take every waiting message off the queue (waiting up to ``timeout`` s for the
        first); check samples for over-current. True if anything came."""
        from ..bench.messages import Event, EventKind, Info, Reply, Samples

        got = False
        wait = timeout
        while True:
            try:
                msg = self._q.get(timeout=wait) if wait > 0 else self._q.get_nowait()
            except queue.Empty:
                return got
            got = True
            wait = 0
            self._arrival += 1
            if isinstance(msg, Samples):
                first = self._unwrap(msg.first_index)
                codes = np.asarray(msg.codes)
                self._samples.append((first, codes))
                self._last_samples_at = self.clock()
                self._check_over_current(first, codes)
            elif isinstance(msg, Event):
                index = self._unwrap(msg.index)
                self._events.append((self._arrival, index, int(msg.kind), int(msg.value)))
                if int(msg.kind) == EventKind.SUPPLY:
                    self._supply_codes.append(int(msg.value))
                elif int(msg.kind) == EventKind.TEMPERATURE:
                    self._temperatures.append(int(msg.value))
            elif isinstance(msg, Info):
                self._info = msg
            elif isinstance(msg, Reply):
                self._replies.append((self._arrival, msg))

    def _check_over_current(self, first: int, codes: np.ndarray) -> None:
        if self._limit_code is None or codes.size == 0:
            return
        top = int(codes.max())
        if top > self._limit_code or top >= self._full_code:
            k = int(np.argmax(codes))
            apc, zero = self._scaling()
            amps = (top - zero + 0.5) * apc
            if top >= self._full_code:
                why = f"sample {first + k} reads the ADC's full scale (code {top}): the current is off the scale"
            else:
                why = (f"sample {first + k} reads {amps:.4g} A (code {top}), above the over-current limit "
                       f"{self.result.over_current_a:.4g} A (1.25 x the design's worst-case peak or hold current)")
            raise LiveFailure("over_current", f"over-current: {why}; the device was stopped")

    def _scaling(self) -> tuple[float, int]:
        info = self._info
        if info is not None and info.amps_per_code:
            apc = float(info.amps_per_code)
        else:
            from ..bench.synth import adc_scaling
            apc = adc_scaling(self.drive)[1]
        return apc, int(info.zero_code) if info is not None else 0

    def _command(self, opcode, argument: int = 0, deadline_s: float | None = None):
        """Send a command; wait while the device is BUSY (pumping messages); fail on a
        refusal. Returns the Reply.

        START goes once per try with a long timeout and no resend: a resent START whose
        first reply was lost would actuate twice."""
        from ..bench.messages import Opcode, ReplyStatus

        end = self.clock() + (deadline_s if deadline_s is not None else self.options.timeout + 30.0)
        busy = 0
        once = {"timeout": max(5.0, self.options.timeout), "retries": 0} if opcode == Opcode.START else {}
        while True:
            reply = self.link.command(opcode, int(argument), **once)
            if reply.status == ReplyStatus.BUSY:
                busy += 1
                if self.clock() > end:
                    self._log(opcode, argument, reply, f"still busy after {busy} tries")
                    raise LiveFailure("link", "the device stayed busy (still streaming an actuation?) "
                                      f"for {deadline_s or self.options.timeout + 30.0:.3g} s")
                self._pump(BUSY_POLL_S)
                continue
            self._log(opcode, argument, reply, f"after {busy} busy replies" if busy else "")
            if reply.status != ReplyStatus.OK:
                raise LiveFailure("refused", f"the device refused {Opcode(opcode).name} {int(argument)} "
                                  f"({ReplyStatus(reply.status).name if reply.status in ReplyStatus._value2member_map_ else reply.status})")
            return reply

    def _stop(self) -> None:
        """STOP, on every exit path; note whether the device acknowledged it."""
        from ..bench.messages import Opcode, ReplyStatus

        try:
            reply = self.link.command(Opcode.STOP, 0, timeout=1.0, retries=3)
            self._log(Opcode.STOP, 0, reply, "final STOP")
            self.result.stopped = reply.status == ReplyStatus.OK
            self.result.stop_detail = ("STOP acknowledged: the device is off" if self.result.stopped else
                                       f"STOP answered {reply.status}: check the device is off")
        except BaseException as err:  # noqa: BLE001 -- the link may be gone; say so, never hide it
            self.result.stopped = False
            self.result.stop_detail = (f"STOP not acknowledged ({err}): switch the coil supply off by hand")

    def _close(self) -> None:
        """STOP (:meth:`_stop`), then the link's statistics and the time taken into the result."""
        res = self.result
        self._stop()
        try:
            st = self.link.stats()
            res.link = {k: getattr(st, k) for k in ("elapsed_s", "bytes", "bytes_per_s", "frames", "samples",
                                                      "crc_errors", "malformed", "lost_frames",
                                                      "samples_missing", "actuations", "error")
                        if hasattr(st, k)}
        except Exception as err:  # noqa: BLE001 -- statistics are a courtesy after a failure
            res.link = {"error": str(err)}
        res.seconds = self.clock() - self._t0

    # ------------------------------------------------------------------ setup
    def _query_info(self, over_current_a: float, open_load_a: float) -> None:
        """QUERY_INFO and wait for the INFO; ``result.device`` and ``result.detection`` from
        it (``options.detect``); the over-current limit ``over_current_a`` A (any sample
        above it, or at the ADC's full scale, stops the procedure) and the open-load
        threshold ``open_load_a`` A."""
        from ..bench.messages import Opcode

        res = self.result
        self._command(Opcode.QUERY_INFO)
        end = self.clock() + 2.0
        while self._info is None and self.clock() < end:
            self._pump(0.05)
            if self._info is None and getattr(self.link, "info", None) is not None:
                self._info = self.link.info
        if self._info is None:
            raise LiveFailure("link", "the device sent no INFO after QUERY_INFO: is it a coildrive bench link?")
        info = self._info
        apc, zero = self._scaling()
        res.device = {"firmware_id": info.firmware_id, "sample_rate_hz": info.sample_rate_hz,
                      "adc_bits": info.adc_bits, "amps_per_code": apc,
                      "amps_per_code_from": "device INFO" if info.amps_per_code else "board file",
                      "zero_code": zero, "has_position_switch": bool(info.has_position_switch),
                      "protocol_version": info.protocol_version}
        detect = self.options.detect
        if detect == "switch" and not info.has_position_switch:
            raise LiveFailure("refused", "--detect switch: the device says it has no position switch "
                              "(INFO flag clear)")
        res.detection = ("switch" if info.has_position_switch else "signature") if detect == "auto" else detect
        res.over_current_a = over_current_a
        res.open_load_a = open_load_a
        self._full_code = 2**info.adc_bits - 1
        self._limit_code = zero + int(math.floor(res.over_current_a / apc))

    def _setup(self) -> None:
        from ..bench.messages import Opcode

        des = self.design
        res = self.result
        self._query_info(float(des.adc.over_current_a), float(des.adc.open_load_a))
        # the peak: never longer than the design's
        want_us = int(math.floor(des.pull_in.peak_time_s * 1e6 + 1e-6))
        r = self._command(Opcode.SET_PEAK_TIME, want_us)
        if r.value and r.value > want_us:
            raise LiveFailure("peak_time", f"the device set a peak of {r.value} us, longer than the design's "
                              f"{want_us} us: refused")
        res.device["peak_time_s"] = (r.value or want_us) * 1e-6
        f_want = int(round(des.hold.frequency_hz))
        r = self._command(Opcode.SET_HOLD_FREQUENCY, f_want)
        f_dev = float(r.value or f_want)
        res.device["hold_frequency_hz"] = f_dev
        if abs(f_dev - des.hold.frequency_hz) > 0.01 * des.hold.frequency_hz:
            res.notes.append(f"the device runs the hold at {f_dev:g} Hz, not the design's "
                             f"{des.hold.frequency_hz:.6g} Hz")
        self._frequency = f_dev

    # ------------------------------------------------------------------ one actuation
    def _events_after(self, arrival: int, kinds) -> list[tuple[int, int, int, int]]:
        return [e for e in self._events if e[0] > arrival and e[2] in kinds]

    def _fire(self, argument: int) -> tuple[int, object]:
        """START (``argument`` as the protocol has it); ``(mark, reply)``: the arrival number
        from which the messages are this actuation's, and the START reply."""
        from ..bench.messages import Opcode

        self._pump(0)
        if self._samples:  # keep only what may precede the next switch-on
            newest = max(f + c.size for f, c in self._samples)
            self._samples = [(f, c) for f, c in self._samples if f + c.size > newest - 4 * PRE_SAMPLES]
        mark = self._arrival
        started = self._command(Opcode.START, argument)
        # the START reply reaches the queue just after command() returned: what came
        # before it in the stream is an older actuation's
        end = self.clock() + 0.5
        while True:
            self._pump(0.01)
            starts = [a for a, rep in self._replies if a > mark and rep.opcode == Opcode.START and rep.status == 0]
            if starts or self.clock() > end:
                break
        return (starts[-1] if starts else self._arrival), started

    def _gather(self, mark: int, length: float, release: float, kinds, hold_frequency: float | None):
        """Wait for the actuation started after arrival ``mark`` (``length`` s on, its
        current back at zero ``release`` s after the OFF) and cut it out of the stream:
        ``(capture, ON index, ON value)``, the capture holding the events of ``kinds``
        (the ON at its start only)."""
        from ..bench.capture_file import Capture, CaptureEvent
        from ..bench.messages import EventKind

        fs = float(self._info.sample_rate_hz)
        quiet_s = max(QUIET_S, 40 * 140 * 10.0 / (getattr(self.link, "baud", None) or self.drive.board.link.baud))
        samples = (length + release) * fs
        baud = getattr(self.link, "baud", None) or self.drive.board.link.baud
        stream_s = samples * 2.3 / (baud / 10.0)  # ~2.2 bytes per sample in SAMPLES frames
        wait_s = length + release + 3.0 * stream_s + self.options.timeout
        deadline = self.clock() + wait_s
        on = off = None
        end_index = None
        while True:
            if on is None:
                ev = self._events_after(mark, (EventKind.ON,))
                if ev:
                    on = ev[0]
            if on is not None and off is None:
                ev = [e for e in self._events_after(on[0] - 1, (EventKind.OFF,)) if e[1] >= on[1]]
                if ev:
                    off = ev[0]
                    end_index = off[1] + int(math.ceil(release * fs))
            if off is not None:
                paused = [e for e in self._events_after(off[0] - 1, (EventKind.PAUSE,)) if e[1] >= off[1]]
                last = max((f + c.size for f, c in self._samples[-4:]), default=0)
                if paused or last >= end_index:
                    break
                # a device that streams only what it recorded: done when quiet, back at zero
                if (last > off[1] and self.clock() - self._last_samples_at > quiet_s
                        and self._back_at_zero()):
                    break
            if self.clock() > deadline:
                what = ("no ON event" if on is None else "no OFF event" if off is None else
                        "the release samples did not arrive")
                raise LiveFailure("link", f"the device did not report the actuation in time ({what} within "
                                  f"{wait_s:.3g} s of START)")
            self._pump(0.05)
        on_index = on[1]
        lo = on_index - PRE_SAMPLES
        hi = end_index
        parts_i, parts_c = [], []
        for first, codes in self._samples:
            if first + codes.size <= lo or first >= hi:
                continue
            ii = first + np.arange(codes.size, dtype=np.int64)
            keep = (ii >= lo) & (ii < hi)
            parts_i.append(ii[keep])
            parts_c.append(codes[keep])
        if not parts_i:
            raise LiveFailure("link", "no samples came for the actuation")
        index = np.concatenate(parts_i)
        code = np.concatenate(parts_c)
        order = np.argsort(index, kind="stable")
        index, code = index[order], code[order]
        uniq = np.concatenate([[True], np.diff(index) > 0])
        index, code = index[uniq], code[uniq]
        events = [CaptureEvent(i, k, v) for a, i, k, v in self._events
                  if lo <= i < hi and k in kinds and (k != EventKind.ON or i == on_index)]
        apc, zero = self._scaling()
        cap = Capture.from_codes(code, index=index, events=events, source="live", sample_rate_hz=fs,
                                 adc_bits=self._info.adc_bits, amps_per_code=apc, zero_code=zero,
                                 sense_position=self.drive.board.sense.position,
                                 **({} if hold_frequency is None else {"hold_frequency_hz": hold_frequency}))
        # drop what is done with, keep the tail (it may hold the next actuation's start)
        self._samples = [(f, c) for f, c in self._samples if f + c.size > hi]
        self._events = [e for e in self._events if e[1] >= hi or e[0] > off[0]]
        return cap, on_index, on[3]

    def _actuate(self, duty: float, repeat: int, step: str) -> LiveActuation:
        from ..bench.messages import EventKind, Opcode

        des = self.design
        res = self.result
        r = self._command(Opcode.SET_HOLD_DUTY, int(round(min(max(duty, 0.0), 1.0) * 65535)))
        in_force = r.value / 65535 if r.value else duty
        mark, started = self._fire(int(round(res.hold_time_s * 1e6)))
        hold_in_force = started.value * 1e-6 if started.value else res.hold_time_s
        release = float(des.release.zero_time_s)
        if des.armature is not None and math.isfinite(des.armature.release_open_time_s):
            release = max(release, float(des.armature.release_open_time_s))
        cap, on_index, _ = self._gather(mark, res.device["peak_time_s"] + res.hold_time_s, 1.5 * release + 0.002,
                                        (EventKind.ON, EventKind.PEAK_END, EventKind.OFF, EventKind.SWITCH),
                                        self._frequency)
        j = judge_actuation(cap, hold_frequency=self._frequency, use_switch=res.detection == "switch",
                            release_bump_expected=self._bump_expected, ripple_a=self._ripple,
                            pull_in_current=self.drive.pull_in.current,
                            dropout_current=self.drive.release.current)
        act = LiveActuation(number=len(res.actuations) + 1, repeat=repeat, step=step,
                            duty_requested=float(duty), duty=float(in_force), hold_time_s=hold_in_force,
                            on_index=int(on_index), judgement=j)
        res.actuations.append(act)
        self._safety(act)
        if self.progress is not None:
            verdict = "no seat" if not j.seated else ("dropped out" if j.dropped else "held")
            self._expected_total = max(self._expected_total, len(res.actuations))
            self.progress(len(res.actuations), self._expected_total,
                          f"repeat {repeat}: duty {act.duty:.4f} {verdict}" if repeat else
                          f"design duty {act.duty:.4f}: {verdict}")
        return act

    def _back_at_zero(self) -> bool:
        """The newest samples read (about) no current."""
        if not self._samples:
            return False
        apc, zero = self._scaling()
        tail = self._samples[-1][1]
        return bool(tail.size) and float(np.median(tail[-16:])) - zero <= max(3.0, 0.02 * self.result.open_load_a / apc)

    def _safety(self, act: LiveActuation) -> None:
        j = act.judgement
        res = self.result
        if j.peak_current_a < res.open_load_a:
            raise LiveFailure("open_coil", f"open coil: actuation {act.number} reached only "
                              f"{j.peak_current_a * 1e3:.3g} mA during the peak, below the design's open-load "
                              f"threshold {res.open_load_a * 1e3:.4g} mA (open coil, a loose wire, or no "
                              "supply); the device was stopped")
        tick = 1.0 / self.drive.board.tick.rate
        fs = float(self._info.sample_rate_hz)
        if (j.peak_duration_s is not None
                and j.peak_duration_s > self.design.pull_in.peak_time_s + tick + PEAK_SLACK_SAMPLES / fs):
            raise LiveFailure("peak_time", f"actuation {act.number} ran a peak of {j.peak_duration_s * 1e3:.4g} ms, "
                              f"longer than the design's {self.design.pull_in.peak_time_s * 1e3:.4g} ms "
                              "(+1 tick): the device was stopped")

    def _one(self, duty: float, repeat: int, step: str) -> LiveActuation:
        """An actuation, redone (twice at most) when samples went missing inside it."""
        for attempt in range(3):
            act = self._actuate(duty, repeat, step)
            if act.judgement.samples_missing == 0:
                break
            self.result.notes.append(f"actuation {act.number}: {act.judgement.samples_missing} samples lost "
                                     "on the link" + ("; repeated" if attempt < 2 else ""))
        else:
            raise LiveFailure("link", "samples went missing in three actuations in a row: the link "
                              "loses data (lower the sample rate or raise the baud rate)")
        if not act.judgement.seated:
            hint = ("" if self.drive.armature is not None else
                    ". The drive file has no [armature] section: if the device is coildrive emulate of "
                    "this file, its coil has no moving armature, so there is no dip and nothing to drop "
                    "out. Live tuning needs an armature that moves: a real coil on the bench, an "
                    "emulated drive with an [armature] section (e.g. examples/locker-latch-12v.toml), "
                    "or coildrive emulate --threshold-switch (a position switch at pull_in.current "
                    "and release.current)")
            raise LiveFailure("stuck", f"stuck armature: actuation {act.number} (duty {act.duty:.4f}) did not "
                              f"seat -- {act.judgement.evidence}; the device was stopped{hint}")
        return act

    # ------------------------------------------------------------------ the search
    def _search(self, repeat: int, d0: float) -> RepeatResult:
        o, res = self.options, self.result
        held, dropped, count = search_dropout(
            lambda d, step: self._one(d, repeat, step), d0, res.floor_duty, o.floor, o.coarse_step,
            max(res.resolution_duty, 1.0 / 65535))
        return repeat_result(self.drive, res.point, self._frequency, repeat, held, dropped, count,
                             res.actuations)

    def _model_at_bench(self) -> None:
        """The bench point from the options and the device's events so far, and the model's
        drop-out current (A) and duty there."""
        res, o = self.result, self.options
        res.point = bench_point(self.drive, o.supply, o.coil_temp, self._supply_codes or None,
                                self._info.adc_bits, self._temperatures or None)
        res.model_dropout_current_a = model_stay_current(self.drive, res.point)
        res.model_dropout_duty = model_dropout_duty(self.drive, res.point, self._frequency)

    def run(self) -> LiveResult:
        """Run the procedure (see the module docstring); STOP on every exit."""
        self._bump_expected = False
        return self._session(self._procedure)

    def _session(self, procedure: Callable[[], None]):
        """Run ``procedure`` on the link: a :class:`LiveFailure`, a link error or Ctrl-C
        ends it into ``result.failure``; STOP (:meth:`_close`) on every exit. The result."""
        from ..bench.link import LinkError

        res, o = self.result, self.options
        self._t0 = self.clock()
        self._q = self.link.subscribe()
        try:
            try:
                procedure()
            except LiveFailure as f:
                res.failure = (f.code, f.message)
            except LinkError as err:
                res.failure = ("link", f"the bench link failed: {err}")
            except KeyboardInterrupt:
                res.failure = ("interrupted", "interrupted (Ctrl-C)")
        finally:
            self._close()
        if res.point is None:
            res.point = bench_point(self.drive, o.supply, o.coil_temp)
        return res

    def _procedure(self) -> None:
        res = self.result
        des = self.design
        o = self.options
        self._setup()
        self._model_at_bench()
        d0 = float(des.hold.duty)
        res.floor_duty = o.floor * d0
        res.resolution_duty = max(o.resolution * d0, 1.0 / des.timer.period_ticks)
        auto = default_hold_time(self.drive, res.point, self._frequency, [res.floor_duty, d0])
        res.hold_time_s = o.hold_time if o.hold_time > 0 else auto
        if res.hold_time_s < auto:
            res.notes.append(f"the hold ({res.hold_time_s * 1e3:.4g} ms) is shorter than the automatic "
                             f"{auto * 1e3:.4g} ms ({HOLD_SETTLE_TAUS:g} time constants): near the "
                             "threshold the armature may not lift within it, so the drop-out duty comes "
                             "out low" + (" (the signature needs the gap to open visibly)"
                                          if res.detection == "signature" else ""))
        hf = hold_figures(self.drive, res.point, d0, self._frequency)
        self._ripple = float(hf.ripple_a[0])
        coarse = max(1, math.ceil((d0 - res.model_dropout_duty) / (o.coarse_step * d0))) \
            if math.isfinite(res.model_dropout_duty) else 3
        bisect = max(0, math.ceil(math.log2(o.coarse_step / o.resolution)))
        self._expected_total = 1 + o.repeats * (coarse + bisect)
        first = self._one(d0, 0, "design duty")
        if first.judgement.dropped:
            raise LiveFailure("drops_at_design", f"the armature drops out already at the design duty "
                              f"{first.duty:.4f} ({first.judgement.evidence}): the hold is too weak for "
                              "this bench -- check the coil, the supply and the mechanics before raising "
                              "hold.current; the device was stopped")
        self._bump_expected = first.judgement.release_bump_a is not None
        if (o.supply is None and self._supply_codes) or (o.coil_temp is None and self._temperatures):
            self._model_at_bench()  # again, with the device's events of the first actuation
        if res.detection == "signature" and not self._bump_expected:
            res.notes.append("the design-duty actuation shows no release bump: drop-out is judged from "
                             "the hold current's rise alone")
        for k in range(1, o.repeats + 1):
            res.repeats.append(self._search(k, d0))
        top = float(res.currents().max())
        res.recommendation = recommend(self.drive, res.point, top, o.margin)
