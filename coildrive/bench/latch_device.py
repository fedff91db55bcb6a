"""The virtual bench device of a latching coil (``[hold] mode = "latch"``).

Like :class:`~coildrive.bench.device.VirtualDevice` (the same line, queues, ADC chain and
protocol), but each actuation is the design's two pulses: the set pulse, then one
period later the reset pulse (the period defaults to the design's shortest safe
interval, or longer when a pulse's recording needs longer to drain at line rate; a
shorter ``--period`` is refused). Each pulse is its own recording: from
``pre_trigger`` s before it to ``post_margin`` s after its current is back at zero, with
PAUSE over the idle samples between the pulses.

Each pulse (:func:`coildrive.model.latch_waveform.pulse`) switches on from zero for the
design's pulse length (whole scheduler ticks; with ``pull_in.compensate`` the table entry
its supply reads; from the boost until its nominal threshold at the device's point), from
a full capacitor on a drooping bus or from the boost,
and decays to zero through the release path. Events: ON at its start (``value`` 0 for
the set pulse, 1 for the reset pulse: ``docs/protocol.md``), OFF at its end, then the
FAULT events the driver raised at that pulse, at the OFF's sample (``_faults``): a pulse
from the boost that reaches its threshold code at no tick before its time-out ends there
with FAULT ``BOOST_TIMEOUT`` (7), as the reference driver does (the compiled driver's own,
in :mod:`coildrive.bench.latch_firmware_device`); SUPPLY and TEMPERATURE as for any
actuation.

What the sense resistor reads (``docs/bench.md``, *A latching coil on the bench*):

* full bridge, common return (``position = "switch"``): both polarities flow down
  through it while a pulse's switches are on, so it reads ``|i|``; in the fast decay the
  current comes up out of ground through it (reversed), and the unipolar ADC reads 0;
* full bridge, inline (``position = "coil"``): it carries the coil's signed current
  throughout; the device streams its magnitude, as a firmware that folds the sign of a
  bidirectional sense amplifier (it knows the polarity it drives) would;
* a reset winding: both windings share the one sense resistor -- under their switches
  (``"switch"``) it reads the pulsing winding's current while on, in the windings' return
  (``"coil"``) also its freewheel decay.

Host commands: START fires the next pulse (set and reset alternate; BUSY while one runs
or sooner than the design's interval after the last), STOP opens the switches at once,
QUERY_INFO; SET_PULSE_TIME sets a timed pulse's length for the pulses of its kind that
follow (whole scheduler ticks, 1 tick up to 1 s; a pulse from the boost ends at its
threshold: OUT_OF_RANGE), as the live tune of a latch steps it
(:mod:`coildrive.tune.latch_live`); the peak-and-hold settings (peak time, hold duty and
frequency) do not apply (UNKNOWN_OPCODE).

A position switch (INFO flag) with a moving armature, or a threshold switch
(``threshold_switch``) on a drive without ``[armature]``: it closes (SWITCH 1) when a set
pulse's current reaches ``pull_in.current`` -- with an armature, when the armature reaches
the seat -- and opens (SWITCH 0) when a reset pulse's current reaches ``reset.current``
(the catch or the magnet trips there: the current the design sizes the reset pulse to
reach). The device starts unlatched. A set pulse at a length the host set (SET_PULSE_TIME)
that ends before the armature rests on the seat is flown on
(:func:`coildrive.model.latch_waveform.pulse`, ``fly``): the catch holds it if it reaches
the seat, else it falls back open (a linear coil on a stiff bus; otherwise refused as
before).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..design.latch import LatchDesign, firmware_pulse, winding_drive
from .capture_file import CaptureEvent
from .device import MAX_PEAK_TIME, MIN_AUTO_PERIOD, DeviceOptions, OptionError, VirtualDevice, _Recording
from .messages import PULSE_RESET_BIT, EventKind, FaultCode, Opcode, ReplyStatus
from .synth import first_sample_at_or_after

#: ON event value of each pulse (``docs/protocol.md``, section 4.2).
PULSE_CODE = {"set": 0, "reset": 1}


@dataclass(frozen=True)
class PulseRun:
    """One pulse from zero: ``time`` s, the winding's current ``current`` A (its magnitude),
    ``on_time`` s the switches are on, ``events`` (``on``, ``off``, ``zero``: s); with a
    moving armature the set pulse's ``gap`` (m, 0 on the seat)."""

    kind: str
    time: np.ndarray
    current: np.ndarray
    on_time: float
    events: dict
    gap: np.ndarray | None = None


class LatchDevice(VirtualDevice):
    """The virtual board of a latching coil (module docstring).

    Parameters
    ----------
    design : the :class:`~coildrive.design.latch.LatchDesign` the firmware runs.
    options : :class:`~coildrive.bench.device.DeviceOptions` (``hold_time`` and ``fault``
        do not apply: a fault is refused).
    """

    def __init__(self, design: LatchDesign, options: DeviceOptions | None = None):
        self.options = options = options or DeviceOptions()
        if options.fault is not None:
            raise OptionError("fault", "the latching coil's device has no fault to put in")
        self.design = design
        self.drive = drive = design.drive
        lt = design.latch
        missing = [p.name for p in lt.pulses if p.ticks is None]
        if missing or lt.interval_ticks is None:
            raise ValueError(f"the design has no {missing[0]} pulse (its current is never reached)" if missing
                             else "the design has no safe interval between pulses (coil_temperature check)")
        self._set_board(drive, options)
        self.interval = lt.interval_ticks / self.tick_rate
        self._drives: dict[str, Drive] = {"set": drive, "reset": winding_drive(drive, True)}
        self._next_kind = "set"
        self._last_start = -math.inf
        self._boost_peak = None
        #: the FAULT events of each pulse, by its recording's number: [(s, FaultCode value)]
        self._faults: dict[int, list[tuple[float, int]]] = {}
        if options.threshold_switch and drive.armature is not None:
            raise ValueError("a threshold switch stands in for a coil without [armature]; this "
                             "drive's armature model seats by its own mechanics: leave it out")
        #: SET_PULSE_TIME's lengths in force (s), by pulse
        self._lengths: dict[str, float] = {}
        #: the threshold switch: latched now, and before each recording (by its number)
        self._latched = False
        self._latched_before: dict[int, bool] = {}
        self.info = self._make_info(options.threshold_switch or drive.armature is not None)
        if options.period is not None and options.period < self.interval:
            raise OptionError("period", f"{options.period:g} s is shorter than the design's shortest safe "
                              f"interval between pulses, {self.interval:g} s ({lt.governed_by})")
        self._start_line(options)
        if options.period is None:
            self.period = max(self.period, MIN_AUTO_PERIOD, math.ceil(self.interval * 1e3 - 1e-9) / 1e3)

    def pulse_time(self, kind: str) -> float:
        """The pulse's length, s (whole scheduler ticks): a supply-compensated pulse's is the
        table entry for the device's supply, a pulse from the boost's the time its current
        reaches the threshold code at the device's coil
        (:func:`coildrive.design.latch.firmware_pulse`)."""
        if kind in self._lengths:
            return self._lengths[kind]
        o = self.options
        return firmware_pulse(self.design, kind, self.supply, self.coil_temp, o.resistance_scale,
                              o.inductance_scale)

    # ------------------------------------------------------------------ physics
    def _make_waveform(self, key: tuple) -> PulseRun:
        """The pulse ``(kind, on-time s)`` at the device's supply and coil temperature."""
        from ..model.latch_waveform import pulse

        kind, on_time = key
        o = self.options
        # a length the host set (SET_PULSE_TIME): a set pulse too short to seat the armature
        # is flown on (it may still reach the seat, else it falls back open)
        t, i, _, _, t_zero, _, gap = pulse(self._drives[kind], self.supply, self.coil_temp,
                                           o.resistance_scale, o.inductance_scale, on_time, 2000,
                                           fly=kind in self._lengths)
        return PulseRun(kind, t, np.abs(i), on_time, {"on": 0.0, "off": on_time, "zero": t_zero}, gap)

    def _sensed(self, w: PulseRun, t_rel: np.ndarray) -> np.ndarray:
        i = np.interp(t_rel, w.time, w.current)
        if self.drive.board.sense.position != "coil":
            i = np.where(t_rel <= w.on_time, i, 0.0)
        return i

    def _events(self, rec: _Recording) -> list:
        fs = self.sample_rate
        w = rec.w
        out = [CaptureEvent(first_sample_at_or_after(rec.t_on, fs), int(EventKind.ON), PULSE_CODE[w.kind]),
               CaptureEvent(first_sample_at_or_after(rec.t_on + w.on_time, fs), int(EventKind.OFF), 0),
               *(CaptureEvent(first_sample_at_or_after(t, fs), int(EventKind.FAULT), code)
                 for t, code in self._faults.get(rec.number, ()))]
        if self.info.has_position_switch:
            change = self._switch_change(rec)
            if change is not None:
                out.append(CaptureEvent(first_sample_at_or_after(rec.t_on + change[0], fs), int(EventKind.SWITCH),
                                        change[1]))
        return out

    def _switch_change(self, rec: _Recording) -> tuple[float, int] | None:
        """The threshold switch's change in recording ``rec`` (module docstring): ``(s from
        its start, new level)``, or ``None``; the latch's state after it is kept when ``rec``
        is the newest recording (a STOP plans it again, cut)."""
        w = rec.w
        before = self._latched_before.get(rec.number, self._latched)
        level = 1 if w.kind == "set" else 0
        change = None
        if w.gap is not None and w.kind == "set":   # a moving armature latches where it reaches the seat
            seat = np.flatnonzero(w.gap <= 0.0)
            if seat.size and not before:
                change = (float(w.time[seat[0]]), 1)
            if rec.number == self._count:
                self._latched = True if seat.size else before
            return change
        need = self.drive.pull_in.current if w.kind == "set" else self.drive.latch.reset_current
        on = w.time <= w.on_time + 1e-15
        reached = np.flatnonzero(on & (w.current >= need))
        if reached.size and bool(before) != bool(level):
            k = int(reached[0])
            if k > 0:   # the crossing, linear between the waveform's points
                t0, t1, i0, i1 = w.time[k - 1], w.time[k], w.current[k - 1], w.current[k]
                t = float(t0 + (need - i0) * (t1 - t0) / (i1 - i0)) if i1 > i0 else float(t1)
            else:
                t = float(w.time[0])
            change = (t, level)
        if rec.number == self._count:
            self._latched = bool(level) if change is not None else before
        return change

    def _recording_span(self, hold_time: float) -> float:
        """s from the start of the longer pulse's recording to the end of its stream."""
        return max(self._span_of(self._waveform((kind, self.pulse_time(kind)))) for kind in ("set", "reset"))

    def _start_automatic(self, now: float) -> None:
        self._start(now)

    def times_out(self, kind: str) -> bool:
        """Whether pulse ``kind`` from the boost ends at its time-out at the device's point
        (the reading reaches its threshold code at no tick before it): the driver's FAULT
        ``BOOST_TIMEOUT`` (:func:`coildrive.design.latch_boost.firmware_times_out`)."""
        p = next(x for x in self.design.latch.pulses if x.name == kind)
        if p.boost is None:
            return False
        from ..design.latch_boost import firmware_times_out

        o = self.options
        return firmware_times_out(self._drives[kind], p.boost, self.supply, self.coil_temp, o.resistance_scale,
                                  o.inductance_scale)

    def _start(self, now: float, hold_time: float | None = None) -> None:
        kind = self._next_kind
        self._next_kind = "reset" if kind == "set" else "set"
        self._last_start = now
        length = self.pulse_time(kind)
        if self.times_out(kind):   # after its OFF, at the same sample, as the driver sends it
            self._faults[self._count + 1] = [(now + length, int(FaultCode.BOOST_TIMEOUT))]
        self._latched_before[self._count + 1] = self._latched
        self._record(now, (kind, length))

    def _stop(self, now: float) -> bool:
        """STOP at ``now``: the switches open at once (the pulse ends there). With a moving
        armature a set pulse of the design's length cut before the armature rests on the
        seat is not modelled (the catch would not hold it, and its fall back open is no part
        of :mod:`coildrive.model.latch_waveform` there): that pulse runs on to its end
        instead, and ``False`` says so (a STOP command then replies BUSY). A pulse at a
        length the host set (SET_PULSE_TIME) is cut and flown on (module docstring)."""
        from ..model.latch_waveform import NotSeated

        rec = self._rec
        if rec is None or now >= rec.t_off or rec.stopped:
            return True
        key = (rec.key[0], max(now - rec.t_on, 1.0 / self.sample_rate))
        try:
            self._waveform(key)
        except NotSeated:
            return False
        self._faults.pop(rec.number, None)   # ended before its time-out
        self._replan(rec, key, now)
        return True

    def _execute(self, cmd, now: float) -> tuple[int, int]:
        op = cmd.opcode
        if op == Opcode.START:
            if self.busy() or now - self._last_start < self.interval:
                return ReplyStatus.BUSY, 0
            kind = self._next_kind
            self._start(now)
            return ReplyStatus.OK, int(round(self.pulse_time(kind) * 1e6))
        if op == Opcode.STOP:
            return (ReplyStatus.OK if self._stop(now) else ReplyStatus.BUSY), 0
        if op == Opcode.QUERY_INFO:
            return ReplyStatus.OK, 0
        if op == Opcode.SET_PULSE_TIME:
            return self._set_pulse_time(int(cmd.argument))
        return ReplyStatus.UNKNOWN_OPCODE, 0

    def _set_pulse_time(self, argument: int) -> tuple[int, int]:
        """SET_PULSE_TIME (``docs/protocol.md``): the pulse (bit 31) and its length in us,
        rounded to whole scheduler ticks; the reply's value the length in force, us."""
        kind = "reset" if argument & PULSE_RESET_BIT else "set"
        seconds = (argument & ~PULSE_RESET_BIT) * 1e-6
        p = next(x for x in self.design.latch.pulses if x.name == kind)
        now_us = int(round(self.pulse_time(kind) * 1e6))
        ticks = int(round(seconds * self.tick_rate))
        if p.boost is not None or ticks < 1 or seconds > MAX_PEAK_TIME:
            return ReplyStatus.OUT_OF_RANGE, now_us
        self._lengths[kind] = ticks / self.tick_rate
        return ReplyStatus.OK, int(round(self._lengths[kind] * 1e6))


__all__ = ["LatchDevice", "PulseRun", "PULSE_CODE"]
