"""A latching coil's virtual bench device running the compiled latch driver (firmware in
the loop, ``coildrive emulate --firmware`` on a ``[hold] mode = "latch"`` drive).

:class:`LatchFirmwareDevice` is :class:`~coildrive.bench.latch_device.LatchDevice` (the
same line, ADC chain, pulse physics and recordings) with the pulses' timing and polarity
taken from the generated C driver (a shared library built by
:func:`coildrive.codegen.host_build.build_latch_firmware`, loaded with ctypes): its tick
handler runs at the board's tick rate; the main loop asks it for a set or a reset pulse
(alternately, every ``period`` s, or on the host's START) and STOP calls its stop. A pulse
starts at the tick where the driver switches its polarity's switches on (after the
shortest interval the driver enforces) and ends where the driver opens them; its ON and
OFF events carry the driver's values. Switches the design has no path for (a mask that is
neither pulse's) are a ``RuntimeError``. Pulses from the boost: the driver ends each where
the current-sense reading the device gives it every tick reaches the pulse's threshold
code, or at its time-out with a FAULT event (``BOOST_TIMEOUT``), which the device streams
after the pulse's OFF, at the same sample (``faults`` keeps every one, for tests).

The samples and events go out through the device's own encoder (the peak-and-hold
driver's loop, :mod:`coildrive.bench.firmware_device`, uses the C encoder; the frames are
the same, tests/test_stream_c.py). A pulse's recording is planned when the driver starts
it, as long as twice its design length (the driver ends it sooner), and planned again
at the tick the driver ends it: only samples after that tick change. The driver opens a
pulse's switches at STOP wherever it is; a set pulse it cuts before a moving armature rests
on the seat ends the run (:class:`UnseatedCut`, one line, exit 2; at the run's end a log
line), since the armature's fall back open is no part of the coil model.
"""

from __future__ import annotations

import ctypes
from pathlib import Path

import numpy as np

from ..design.figures import adc_code
from ..errors import CoildriveError
from .device import DeviceOptions, LogEntry, _Item
from .latch_device import PULSE_CODE, LatchDevice
from .messages import EventKind, Opcode, ReplyStatus

#: fil_command codes of the host port (codegen_templates/driver/latch_host_shim.c.j2).
COMMANDS = {"set": 1, "reset": 2, "stop": 3}


class UnseatedCut(CoildriveError):
    """The driver opened a set pulse's switches (at STOP) before the moving armature rests
    on the seat: the catch would not hold it, and its fall back open is no part of
    :mod:`coildrive.model.latch_waveform`, so the model cannot stream what follows
    (``str`` is the one line the CLI prints, exit 2)."""


def load_latch_library(path: Path) -> ctypes.CDLL:
    """Load a latch firmware library and declare its functions' C types."""
    lib = ctypes.CDLL(str(path))
    u8 = ctypes.c_uint8
    for name, res, args in (("fil_init", None, []), ("fil_tick", u8, []), ("fil_command", None, [u8]),
                            ("fil_switches", u8, []), ("fil_state", u8, []),
                            ("fil_event_kind_at", u8, [u8]), ("fil_event_value_at", ctypes.c_int32, [u8])):
        fn = getattr(lib, name)
        fn.restype, fn.argtypes = res, args
    for name in ("fil_supply", "fil_current"):   # a compensated driver's supply, a boosted one's current
        if hasattr(lib, name):
            getattr(lib, name).restype, getattr(lib, name).argtypes = None, [ctypes.c_uint32]
    return lib


class LatchFirmwareDevice(LatchDevice):
    """The latching coil's virtual board with the compiled driver (module docstring).

    Parameters
    ----------
    design : the :class:`~coildrive.design.latch.LatchDesign` the driver was generated from.
    library : path of the shared library (``build_latch_firmware``).
    masks : ``{"set": mask, "reset": mask}``, the switches of each pulse
        (:func:`coildrive.codegen.latch_driver.pulse_switches`).
    options : :class:`~coildrive.bench.device.DeviceOptions`.
    """

    def __init__(self, design, library: Path, masks: dict[str, int], options: DeviceOptions | None = None):
        super().__init__(design, options)
        self.lib = load_latch_library(library)
        self.lib.fil_init()
        if any(p.table is not None for p in design.latch.pulses):
            # a supply-compensated driver reads the bus at the nominal divider, as the design's
            # firmware_pulse does: each pulse then runs its table entry for this supply
            b = design.drive.board
            self.lib.fil_supply(adc_code(self.supply / b.supply_sense.divider, b.adc.reference, b.adc.bits))
        self._kind_of_mask = {m: k for k, m in masks.items()}
        #: pulses from the boost: the driver ends each at its threshold code, so it reads the
        #: current every tick (a nominal sense chain, no noise); every FAULT the driver sends,
        #: (s, value), also streamed with its pulse
        self._boosted = design.drive.supply.boosted
        self.faults: list[tuple[float, int]] = []
        self._tick = 0                   # the next tick: at (n + 1) / tick rate
        self._asked = False              # a set or reset asked and not yet started
        self._on: tuple[str, float] | None = None    # the pulse the driver runs: (kind, start s)
        self.starts: list[tuple[str, float]] = []    # every pulse's (kind, start s), for tests
        # the driver's first pulse waits one interval from its init (at t = 0)
        self._next_auto = max(self._next_auto, self.interval)

    # ------------------------------------------------------------------ driver
    def _tick_time(self, n: int) -> float:
        return (n + 1) / self.tick_rate

    def _driver_tick(self) -> None:
        t = self._tick_time(self._tick)
        self._tick += 1
        if self._boosted:
            self.lib.fil_current(self._reading(t))
        n = int(self.lib.fil_tick())
        if not n:
            return
        self._run(t)                     # the line up to this tick, then the switch change
        mask = int(self.lib.fil_switches())
        events = [(int(self.lib.fil_event_kind_at(k)), int(self.lib.fil_event_value_at(k))) for k in range(n)]
        # a FAULT goes with the pulse the tick ends (the time-out's comes after its OFF): it is
        # the running recording's before the OFF plans that recording's frames again
        faults = [value for kind, value in events if kind == EventKind.FAULT]
        if faults:
            if self._on is None or not any(kind == EventKind.OFF for kind, _ in events):
                raise RuntimeError(f"the driver sends FAULT {faults[0]} without ending a pulse at that tick; "
                                   "the coil model streams a latch driver's FAULT with the pulse it ends")
            self.faults += [(t, v) for v in faults]
            self._faults.setdefault(self._rec.number, []).extend((t, v) for v in faults)
        for kind, value in events:
            if kind == EventKind.ON:
                pulse = self._kind_of_mask.get(mask)
                if pulse is None or PULSE_CODE[pulse] != value:
                    raise RuntimeError(f"the driver switches {mask:#x} on with an ON event of value {value}; "
                                       f"the coil model has the set pulse on {self._mask('set'):#x} (value 0) "
                                       f"and the reset pulse on {self._mask('reset'):#x} (value 1)")
                self._asked = False
                self._on = (pulse, t)
                self.starts.append(self._on)
                self._record(t, (pulse, 2.0 * self.pulse_time(pulse)))
            elif kind == EventKind.OFF and self._on is not None:
                if mask != 0:
                    raise RuntimeError(f"the driver sends OFF with the switches {mask:#x} on")
                pulse, start = self._on
                self._cut_waveform(pulse, t - start)
                self._on = None
                self._replan(self._rec, (pulse, t - start), t)

    def _cut_waveform(self, pulse: str, on_time: float) -> None:
        """The pulse ``pulse`` cut after ``on_time`` s, or :class:`UnseatedCut` when the
        armature is not on the seat by then."""
        from ..model.latch_waveform import NotSeated

        try:
            self._waveform((pulse, on_time))
        except NotSeated:
            raise UnseatedCut(f"the driver stopped the {pulse} pulse after {on_time * 1e3:.4g} ms of its "
                              f"{self.pulse_time(pulse) * 1e3:.4g} ms, before the armature rests on the "
                              "seat: the catch would not hold it, and the coil model does not follow its "
                              "fall back open, so the run ends here") from None

    def _reading(self, t: float) -> int:
        """The current-sense ADC code at ``t`` s (0 between pulses): the running pulse's
        current through a nominal chain (floor, clipped)."""
        if self._on is None or self._rec is None:
            return 0
        s, b = self.drive.board.sense, self.drive.board
        i = float(self._sensed(self._rec.w, np.array([t - self._on[1]]))[0])
        return adc_code(i * s.resistance * s.gain, b.adc.reference, b.adc.bits)

    def _mask(self, kind: str) -> int:
        return next(m for m, k in self._kind_of_mask.items() if k == kind)

    def _drive_until(self, now: float) -> None:
        """Run the driver's ticks up to ``now`` s."""
        while self._tick_time(self._tick) <= now:
            if self._on is not None and self._tick_time(self._tick) - self._on[1] > 2.0 * self.pulse_time(self._on[0]):
                raise RuntimeError(f"the driver keeps the {self._on[0]} pulse on past twice its "
                                   f"{self.pulse_time(self._on[0]) * 1e3:.4g} ms")
            self._driver_tick()

    # ------------------------------------------------------------------ device
    def _advance(self, now: float) -> None:
        now = max(now, self._now)
        while self._auto and self._next_auto <= now:
            t = self._next_auto
            self._drive_until(t)
            self._run(t)
            if self._asked or self._on is not None:
                self.stats.automatic_skipped += 1
            else:
                self._queue(_Item(t, 1, self.info))
                self._start(t)
            self._next_auto = t + self.period
        self._drive_until(now)
        self._run(now)

    def _start(self, now: float, hold_time: float | None = None) -> None:
        """Ask the driver for the next pulse (set and reset alternate); it starts it at a
        tick, when the interval allows."""
        kind = self._next_kind
        self._next_kind = "reset" if kind == "set" else "set"
        self._asked = True
        self.lib.fil_command(COMMANDS[kind])

    def _stop(self, now: float) -> bool:
        """STOP: the driver opens the switches at its next tick (and drops a request); a set
        pulse it cuts before the armature is seated raises :class:`UnseatedCut` there."""
        self._asked = False
        self.lib.fil_command(COMMANDS["stop"])
        return True

    def next_due(self) -> float | None:
        due = super().next_due()
        if self._asked or self._on is not None:     # the tick that starts or ends a pulse
            t = self._tick_time(self._tick)
            due = t if due is None else min(due, t)
        return due

    def busy(self, now: float | None = None) -> bool:
        return super().busy(now) or self._asked or self._on is not None

    def _execute(self, cmd, now: float) -> tuple[int, int]:
        op = cmd.opcode
        if op == Opcode.START:
            if self.busy():
                return ReplyStatus.BUSY, 0
            kind = self._next_kind
            self._start(now)
            return ReplyStatus.OK, int(round(self.pulse_time(kind) * 1e6))
        if op == Opcode.SET_PULSE_TIME:   # the compiled driver's lengths are its header's constants
            return ReplyStatus.UNKNOWN_OPCODE, 0
        return super()._execute(cmd, now)

    def shutdown(self, now: float) -> None:
        """Stop the driver: its next tick opens the switches. A set pulse it cuts before the
        armature rests on the seat (:class:`UnseatedCut`) ends the stream at that tick, with
        a log line saying so (the model does not follow the armature's fall back open)."""
        self._advance(now)
        now = self._now                     # the host's reads may have taken the device past ``now``
        self._auto = False
        self._stop(now)
        t = now + 1.0 / self.tick_rate      # the driver's next tick opens the switches
        try:
            self._drive_until(t)
        except UnseatedCut as err:
            self._log.append(LogEntry(now, f"stream ends: {err}"))
            return
        self._run(t)


__all__ = ["LatchFirmwareDevice", "COMMANDS", "UnseatedCut", "load_latch_library"]
