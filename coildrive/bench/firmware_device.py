"""The virtual bench device running the generated C driver (firmware in the loop).

:class:`FirmwareDevice` has the interface :class:`~coildrive.bench.emulator.Emulator`
serves (``receive``, ``read``, ``log``, ``next_due``, ``busy``, ``shutdown``), like
:class:`~coildrive.bench.device.VirtualDevice`; in place of that device's built-in
firmware behaviour it calls the compiled driver and stream encoder (a shared library
built by :func:`coildrive.codegen.host_build.build_firmware`, loaded with ctypes):

* every PWM period the driver's ADC handler gets a conversion (the current at the middle
  of the on-time with the sense under the switch, at the middle of the period in the
  coil path; the supply through the board's divider) and sets the switch, the compare and
  the bypass; every scheduler tick its tick handler runs; the main loop switches it on
  every ``period`` s and off after the peak and ``hold_time``;
* between conversions the coil is the same RL model the design uses (closed-form rise
  and freewheel segments of :mod:`coildrive.model.rl` with the loop of
  :mod:`coildrive.model.circuit`; faults as :func:`coildrive.bench.synth.faulty_drive`),
  read through the same ADC chain and noise as the built-in device;
* every ADC sample (the board's sample rate) goes to the C encoder, whose frames are the
  bytes on the line, paced at the line rate. The device's clock waits for the line while
  more than :data:`LINE_AHEAD` s of bytes are queued: where a board would stream faster
  than its link carries, the emulated one runs slower than real time and loses nothing.

Host commands are decoded by the C encoder and answered through it: START (the main
loop switches on, and off after the peak and the hold asked), STOP, QUERY_INFO; the SET_
commands answer OUT_OF_RANGE with the value in force (the compiled driver has its
settings built in). Until the first command the device actuates by itself.

With an ``[armature]`` the current while the switch is held fully on from rest is the
design's armature model (the pull-in with its dip; on a drooping bus with the bulk
capacitor, whose voltage the supply conversions then read); from the end of that peak on, the
seated coil's RL model (the motional EMF of the armature opening in the release is left
out). On a full bridge the pull-in runs on the bridge's drive path (Q1 + Q4), the seated
hold on its slow decay and the release on its fast decay, as without an armature -- but on
a drooping bus (``supply.source_resistance``) the release rides the bus as the design's
does: from the moment the driver opens all four (a PWM hold's conversion, a current-mode
hold's tick), the armature's run into the bus
(:func:`coildrive.model.armature_bus_release.release`, recorded; the seated coil at the
magnetising current there, or the pull-in run's state where the peak is cut, the bus at the
supply; an eddy term too), its terminal current sensed and its bus read by the supply
conversions until the run ends (the armature on the open stop, the current stopped) or the
driver switches on again; after it, the RL model again.

With a boosted peak (``[supply] boost``) the driver's boost switch (its ``port_boost``
hook) puts the boost capacitor on the coil: while it is on, the current is the series RLC
closed form of :mod:`coildrive.model.boost` (the design's physics) from the current and
the capacitor's voltage at its switch-on; from the conversion that turns it off, the
main supply's RL rise. The capacitor starts charged to the boost's nominal voltage and
between peaks recharges at ``boost_power`` (:func:`coildrive.model.boost.recharge_voltage`);
the main supply's diode taking over below the bus is left out (the design's
``boost_droop`` check keeps the capacitor above it). On a flux-linkage curve the boost's
run is :mod:`coildrive.model.flux_boost`'s, stepped from the current and the capacitor's
voltage at its switch-on. With an ``[armature]`` on the boosted peak the armature is flown
as the driver switches (:mod:`coildrive.bench.boost_flight`: the boost, the threshold's
conversion, the hold's PWM edges) until it rests on the seat, then the seated coil's closed
form; on a drooping main supply the flight carries the main bus from the hand-over (the
converter's draw out of the source), which the supply conversions read until the seat; with
an eddy term the conversions read the flight's terminal current; on a full bridge the
release into the bus then runs with the converter's draw out of the source too.

A full bridge's mixed-decay hold (``hold.fast_fraction``): each off-time decays through
the fast path (all four open) up to the timer count the driver gives through its
``port_fast_end`` hook, then through the slow path.

A current-mode hold: the host port records the
thresholds the driver arms and the off-time one-shot it starts; in the hold the device
steps the comparator with the coil, event by event (:meth:`FirmwareDevice._step_current`),
and calls the driver's threshold and off-timer handlers. The driver opens the switch in
the tick that reports OFF (docs/firmware.md). With an eddy term the state is the
magnetising current (the segments of :mod:`coildrive.model.eddy`) and the comparator
sees the terminal current, which steps at each edge by ``(V + V_off) / (R + R_e)``. On a
full bridge the handlers switch the masks, not the enable: Q1 + Q4 on, Q2 + Q4 off (the
slow decay); the release (all four open) decays fast from the moment the outputs go off.
With mixed decay (the fixed off-time) each off-time's fast part has all four open with the
outputs enabled (the fast path), until the one-shot's first expiry closes Q2 + Q4.
With an ``[armature]`` the peak is the armature model's pull-in as above and the hold's
segments are those of the seated coil.
"""

from __future__ import annotations

import ctypes
import dataclasses
import math
from pathlib import Path

import numpy as np

from ..model import boost as boost_model
from ..model import eddy
from ..model.circuit import full_bridge, loop
from ..model.eddy import EddyCoil
from ..model.rl import decay_current, decay_time, rise_current, rise_time
from .messages import Opcode, Reply, ReplyStatus
from .device import BITS_PER_BYTE, DeviceOptions, DeviceStats, LineOutput, LogEntry
from .synth import adc_scaling, faulty_drive, operating_point

#: Seconds of bytes that may wait for the line before the device's clock waits.
LINE_AHEAD = 0.02
#: Longest device time stepped in one call, s (keeps the emulator's loop responsive).
MAX_STEP = 0.01
STATE_OFF = 0
STATE_PEAK = 1
STATE_HOLD = 2
STATE_FAULT = 4
STATE_NAMES = ("off", "peak", "hold", "release", "fault")


def load_library(path: Path) -> ctypes.CDLL:
    """Load a firmware library and declare its functions' C types."""
    lib = ctypes.CDLL(str(path))
    u8, u16, u32, size = ctypes.c_uint8, ctypes.c_uint16, ctypes.c_uint32, ctypes.c_size_t
    for name, res, args in (("fil_init", None, [ctypes.c_char_p, ctypes.c_int32]), ("fil_conversion", None, [u16, u16]),
                            ("fil_tick", None, []), ("fil_command", None, [u8]),
                            ("fil_push_block", size, [ctypes.POINTER(u16), size]),
                            ("fil_poll", size, []), ("fil_flush", size, []),
                            ("fil_take", size, [ctypes.POINTER(u8), size]), ("fil_outputs", u32, []),
                            ("fil_state", u8, []), ("fil_bridge", u8, []), ("fil_fast_end", u32, []),
                            ("fil_fault", u8, []), ("fil_lost", u32, []),
                            ("fil_receive", ctypes.c_int, [u8]), ("fil_command_opcode", u8, []),
                            ("fil_command_argument", u32, []),
                            ("fil_reply", None, [u8, u32, ctypes.c_char_p])):
        fn = getattr(lib, name)
        fn.restype, fn.argtypes = res, args
    # a current-mode driver's comparator and off-time one-shot (its port has them only then)
    for name, res, args in (("fil_threshold", u32, []), ("fil_threshold_trip", None, [u8]),
                            ("fil_off_timer", u32, []), ("fil_off_timer_expire", None, [])):
        fn = getattr(lib, name, None)
        if fn is not None:
            fn.restype, fn.argtypes = res, args
    return lib


def _terminal(i_m, lp, on: bool):
    """The sensed (terminal) current A at the coil current ``i_m`` A in the loop ``lp``,
    switch ``on`` or freewheeling: ``i_m`` itself, or with an eddy term
    (:mod:`coildrive.model.eddy`) the Thevenin loop's, which steps at each edge by
    ``(V + V_off) / (R + R_e)``; a freewheel that has blocked carries none."""
    e = lp.inductance
    if not isinstance(e, EddyCoil):
        return i_m
    if on:
        return eddy.terminal(i_m, lp.v_on, lp.r_on, e.resistance)
    return np.maximum(eddy.terminal(i_m, -lp.v_off, lp.r_off, e.resistance), 0.0)


def _magnetising(i, lp, on: bool) -> float:
    """The coil current (A; with an eddy term the magnetising current) at which the
    sensed current is ``i`` A in the loop ``lp`` (switch ``on`` or freewheeling): the
    inverse of :func:`_terminal` while the loop conducts."""
    e = lp.inductance
    if not isinstance(e, EddyCoil):
        return i
    v, r = (lp.v_on, lp.r_on) if on else (-lp.v_off, lp.r_off)
    r_e = float(np.ravel(e.resistance)[0])
    return float(np.ravel(((r + r_e) * i - v) / r_e)[0])


class FirmwareDevice(LineOutput):
    """The virtual board with the compiled driver (see the module docstring).

    Parameters
    ----------
    design : the Design the driver was generated from.
    library : path of the shared library (:func:`~coildrive.codegen.host_build.build_firmware`).
    options : :class:`~coildrive.bench.device.DeviceOptions` (supply, coil temperature,
        hold time, period, first actuation, coil scales, fault, noise, seed, baud).
    trace : keep :attr:`trace`, one ``(start s, mean coil current A, driver state)`` per PWM
        period stepped (not the idle stretches), for tests of the hold's regulation.

    :meth:`supply_step` changes the bus voltage from a given device time on (a sag or a
    surge the regulation has to answer).
    """

    def __init__(self, design, library: Path, options: DeviceOptions | None = None,
                 trace: bool = False):
        self.options = o = options or DeviceOptions()
        self.design = design
        drive = design.drive
        self.drive = drive
        board = drive.board
        self.lib = load_library(library)
        self.supply, self.coil_temp = operating_point(drive, o.supply, o.coil_temp)
        faulty, rf, lf = faulty_drive(drive, o.fault)
        r_scale, l_scale = o.resistance_scale * rf, o.inductance_scale * lf
        self._coil = (faulty, r_scale, l_scale)
        self._loops = {path: loop(faulty, self.supply, self.coil_temp, r_scale, l_scale, path)
                       for path in ("hold", "release")}
        self._supply_steps: list[tuple[float, float]] = []
        self.trace: list[tuple[float, float, int]] | None = [] if trace else None
        #: a boosted peak with a moving armature: flown as the driver switches (boost_flight)
        self._arm = None
        if design.boost is not None and faulty.armature is not None and o.fault != "open":
            from .boost_flight import BoostFlight
            setting = None
            if faulty.supply.droops:   # the converter's draw off the bus: the hold the firmware runs here
                from ..design import firmware_setting
                setting = (firmware_setting(design, self.supply, self.coil_temp)[0], design.hold.frequency_hz)
            self._arm = BoostFlight(faulty, self._loops["hold"], self._loops["release"], l_scale, setting)
        self._flight = None if self._arm is not None else self._pull_in_flight(faulty, design, l_scale)
        self._flight_t0: float | None = None
        #: an armature on a full bridge on the drooping bus: the release run's
        #: parameters (``None`` elsewhere) and the run under way (:class:`_BusRun`)
        self._ride = self._release_params(faulty, design, l_scale)
        self._run: _BusRun | None = None
        self.sample_rate = float(board.adc.sample_rate)
        self.tick_rate = float(board.tick.rate)
        self.pwm_period = 1.0 / design.timer.frequency_hz
        self.period_counts = design.timer.period_ticks
        self.baud = int(o.baud or board.link.baud)
        self.byte_time = BITS_PER_BYTE / self.baud
        self.sense_in_switch = board.sense.position == "switch"
        _, self._apc = adc_scaling(drive)
        self._vpa = board.sense.resistance * board.sense.gain
        self._full = 2**board.adc.bits - 1
        self._supply_code = self._volts_code(self.supply)
        from ..design import firmware_setting  # the peak the driver runs at this supply

        self._peak_s = firmware_setting(design, self.supply)[1]
        self._rng = np.random.default_rng([o.seed, 1])
        self.stats = DeviceStats()
        self.info_id = f"coildrive firmware in the loop {drive.name}"[:64].encode()
        self.lib.fil_init(self.info_id, int(round(self.coil_temp * 1000)))
        self.period = float(o.period) if o.period is not None else max(
            0.2, math.ceil((self._peak_s + o.hold_time + 0.05) * 1e3) / 1e3 * 2)
        self._t = 0.0                 # device time of the next PWM period's start
        self._i = 0.0                 # coil current there, A
        self._k = 0                   # next ADC sample index
        self._tick = 1                # next scheduler tick number (tick n at n / tick rate)
        self._outputs = 0             # switch/compare/bypass as the driver set them
        self._next_on = float(o.first_actuation)
        self._off_at: float | None = None
        self._line: list[tuple[float, bytes]] = []   # (time the last byte is out, bytes)
        self._line_free = 0.0
        self._out = bytearray()
        self._log: list[LogEntry] = []
        self._state = STATE_OFF
        self._auto = True
        self._cmd_pending = False
        #: s before an actuation at which a fault is cleared: the release lockout, and a tick
        self._clear_lead = (design.release.lockout_ticks + 2) / self.tick_rate
        #: a full bridge's switch masks (drive, slow decay, fast decay) of the design
        self._bridge = None
        #: a mixed-decay hold: the timer count where the off-time's fast part ends, as the
        #: driver set it for the next period (port_fast_end)
        self._mixed = design.topology is not None and design.topology.bridge is not None \
            and design.topology.bridge.hold_decay == "mixed"
        self._fast_end = 0
        if design.topology is not None and design.topology.bridge is not None:
            from ..model.bridge import switch_mask
            on = design.topology.bridge.switches_on
            self._bridge = (switch_mask(on["hold_on"]), switch_mask(on["hold_decay"]), switch_mask(on["release"]))
        #: a boosted peak: the boost at its nominal on this coil's peak loop, the capacitor's
        #: voltage (V) and the time it was had (s)
        self._boost = None
        if design.boost is not None:
            s, on = drive.supply, self._loops["hold"]
            ind, r_e = on.inductance, None
            if isinstance(ind, EddyCoil):    # the magnetising branch and the eddy resistance
                ind, r_e = ind.magnetising, ind.resistance
            self._boost = boost_model.boost(s.boost, s.boost_capacitance, on.r_on + s.boost_resistance,
                                            ind, r_e)
            self._boost_v, self._boost_t = float(s.boost), 0.0
        #: a current-mode hold: the design's thresholds (the comparator's delay, the off
        #: timer's prescaler), the off-time one-shot's expiry (device s) and a comparator
        #: trip waiting out the delay (device s, above)
        self._cm = design.hold.thresholds if design.hold.current_mode is not None else None
        self._off_expiry: float | None = None
        self._trip: tuple[float, bool] | None = None
        self._spent: tuple[bool, int] | None = None
        self._take_frames()

    def boost_voltage(self, t: float) -> float:
        """The boost capacitor's voltage (V) at device time ``t`` s, while its switch is off:
        recharging at ``boost_power`` from where the last peak left it."""
        s = self.drive.supply
        if s.boost_capacitance <= 0:
            return float(s.boost)
        return float(boost_model.recharge_voltage(self._boost_v, max(t - self._boost_t, 0.0),
                                                  s.boost_capacitance, s.boost_power, s.boost))

    def supply_step(self, at: float, supply: float) -> None:
        """From device time ``at`` s on, the bus is at ``supply`` V: the coil model and the
        supply reading change at the first PWM period that starts at or after ``at`` (the
        armature's pull-in run keeps the supply it was made for)."""
        self._supply_steps = sorted(self._supply_steps + [(float(at), float(supply))])

    def _apply_supply_steps(self, t: float) -> None:
        while self._supply_steps and self._supply_steps[0][0] <= t:
            _, self.supply = self._supply_steps.pop(0)
            faulty, r_scale, l_scale = self._coil
            self._loops = {path: loop(faulty, self.supply, self.coil_temp, r_scale, l_scale, path)
                           for path in ("hold", "release")}
            self._supply_code = self._volts_code(self.supply)
            self._log.append(LogEntry(t, f"supply {self.supply:.4g} V"))

    def _pull_in_flight(self, faulty, design, l_scale):
        """With an armature (not stuck): ``(time, current)`` of the pull-in with the switch
        held on from rest, long enough for the longest peak (the armature model of the
        design, :func:`coildrive.model.armature_sim.simulate`). On a drooping bus
        (``supply.source_resistance``) the run carries the bulk capacitor, as the design's
        pull-in does: :attr:`_flight_bus` is then its bus voltage (V) at those times, which
        the driver's supply conversions read while the flight lasts."""
        self._flight_bus = self._flight_state = None
        if faulty.armature is None:
            return None
        from ..model.armature import params_from_loop
        from ..model.armature_sim import simulate
        s = faulty.supply
        p = params_from_loop(faulty.armature, self._loops["hold"], l_scale, faulty.coil.eddy_resistance,
                             bus=(s.source_resistance, s.capacitance) if s.droops else (0.0, 0.0))
        span = (design.pull_in.peak_ticks + 2) / float(faulty.board.tick.rate) + 2.0 / design.timer.frequency_hz
        traj = simulate(p, [(span, True, 4000)])
        # the magnetising current (with an eddy term the sensed terminal current follows
        # from it, as in the rest of the device's periods)
        i_m = traj.current if traj.magnetising_current is None else traj.magnetising_current
        if traj.bus is not None:
            self._flight_bus = np.asarray(traj.bus, float)
        #: the run's flux linkage Wb, gap m and speed m/s (a release from within the flight)
        self._flight_state = tuple(np.asarray(a, float) for a in (traj.flux, traj.position, traj.velocity))
        return np.asarray(traj.time, float), np.asarray(i_m, float)

    def _supply_reading(self, t: float, flight: float | None) -> int:
        """The supply conversion's code at device time ``t`` s: the bus of the pull-in run
        (started at ``flight`` s) on a drooping bus while it lasts, or of the release run
        under way, else the supply."""
        if self._run is not None and t >= self._run.t0:
            volts = self._run.bus(t)
        elif flight is None or self._flight_bus is None:
            return self._supply_code
        else:
            volts = float(np.interp(t - flight, self._flight[0], self._flight_bus))
        return self._volts_code(volts)

    def _volts_code(self, volts: float) -> int:
        """The supply conversion's code of a bus at ``volts`` V (the board's divider and ADC;
        the converter truncates). A board without ``[supply_sense]`` reads 0: the header's
        supply-min and supply-max codes are 0 there too (the driver checks nothing)."""
        b = self.drive.board
        if b.supply_sense is None:
            return 0
        return int(min(max(math.floor(volts / b.supply_sense.divider / b.adc.reference * 2**b.adc.bits),
                           0), self._full))

    def _release_params(self, faulty, design, l_scale):
        """The release run's armature parameters on the drooping bus (the release loop,
        the bus's ``R_s`` and ``C``; an eddy term too), for an armature on a full bridge
        on a drooping bus; else ``None``."""
        s = faulty.supply
        if faulty.armature is None or not s.droops or not full_bridge(faulty):
            return None
        from ..model.armature import params_from_loop
        return params_from_loop(faulty.armature, self._loops["release"], l_scale, faulty.coil.eddy_resistance,
                                bus=(s.source_resistance, s.capacitance))

    def _start_run(self, t: float, i_m: float, flight: float | None) -> "_BusRun":
        """The armature's release run into the drooping bus from device time ``t`` s: the
        seated coil at the (magnetising) current ``i_m`` A, the bus at the supply; or, within
        the pull-in run started at ``flight`` s (a turn-off in the peak: a fault, the peak
        cut short), from that run's flux, gap, speed and bus there."""
        from ..model.armature_bus_release import release

        p, fast = self._ride, self._loops["release"]
        if flight is not None:
            at = t - flight
            start = tuple(np.array([float(np.interp(at, self._flight[0], a))]) for a in self._flight_state)
            v0 = float(np.interp(at, self._flight[0], self._flight_bus))
        else:
            start = (p.flux_closed(np.array([max(i_m, 0.0)])), np.array([0.0]), np.array([0.0]))
            v0 = float(self.supply)
        v0 = min(v0, float(self.supply))
        drain = None
        if self._arm is not None and self._arm.p_main is not None:
            # after a boosted peak on the drooping main bus: the converter still drawing from it
            # (as the flight and simulate take it: out of the source, or off a supply that
            # cannot sink as a current)
            if self.drive.supply.sink:
                p = dataclasses.replace(p, v_on=self._arm.p_main.v_on)
            else:
                drain = (p.v_on - self._arm.p_main.v_on) / self.drive.supply.source_resistance
        r = release(p, 0.0, v0, float(fast.v_off - fast.v_on), sink=self.drive.supply.sink, start=start, record=8,
                    drain=drain)
        tt, y, i_t = r.path
        self._log.append(LogEntry(t, f"release into the bus from {float(p.current(start[0], start[1])[0]):.6g} A "
                                     f"at {v0:.6g} V: current stops after {1e3 * float(r.run.zero_time[0]):.6g} ms, "
                                     f"open after {1e3 * float(r.run.open_time[0]):.6g} ms"))
        return _BusRun(t, tt, np.asarray(p.current(y[0], y[1]), float), np.asarray(i_t, float),
                       np.asarray(y[5], float))

    # ------------------------------------------------------------------ emulator interface
    def receive(self, data: bytes, now: float) -> list[Reply]:
        """Host bytes, decoded by the C encoder's command receiver; returns the replies sent."""
        self._advance(now)
        replies = []
        for byte in data:
            if self.lib.fil_receive(byte):
                replies.append(self._command(now))
        self._take_frames()
        return replies

    def _command(self, now: float) -> Reply:
        """Serve one command as the port's main loop does. The compiled driver has its
        settings built in: the SET_ commands answer OUT_OF_RANGE with the value in force."""
        self.stats.commands += 1
        self._auto = False
        op, arg = int(self.lib.fil_command_opcode()), int(self.lib.fil_command_argument())
        d = self.design
        status, value = ReplyStatus.OK, 0
        if op == Opcode.START:
            limit = int(round(self.options.max_hold * 1e6))
            if self._state != STATE_OFF or self._off_at is not None or self._cmd_pending:
                status = ReplyStatus.BUSY
            elif arg > limit:
                status, value = ReplyStatus.OUT_OF_RANGE, limit
            else:
                self.lib.fil_command(1)
                self._cmd_pending = True
                self.stats.actuations += 1
                hold = self.options.max_hold if arg == 0 else arg * 1e-6
                self._off_at = self._t + self._peak_s + hold
                value = arg
        elif op == Opcode.STOP:
            self.lib.fil_command(2)
            self._cmd_pending = True
            self._off_at = None
        elif op == Opcode.SET_PEAK_TIME:
            status, value = ReplyStatus.OUT_OF_RANGE, int(round(d.pull_in.peak_time_s * 1e6))
        elif op == Opcode.SET_HOLD_DUTY:
            status, value = ReplyStatus.OUT_OF_RANGE, int(round(d.timer.compare_ticks / d.timer.period_ticks * 0xFFFF))
        elif op == Opcode.SET_HOLD_FREQUENCY:
            status, value = ReplyStatus.OUT_OF_RANGE, int(round(d.timer.frequency_hz))
        elif op != Opcode.QUERY_INFO:
            status = ReplyStatus.UNKNOWN_OPCODE
        self.lib.fil_reply(int(status), value, self.info_id)
        name = Opcode(op).name if op in set(Opcode) else str(op)
        self._log.append(LogEntry(now, f"command {name} {arg} -> {ReplyStatus(status).name}"))
        return Reply(0, op, int(status), value)

    def next_due(self) -> float | None:
        times = [self._t]
        if self._line:
            times.append(self._line[0][0])
        return min(times)

    def busy(self, now: float | None = None) -> bool:
        if now is not None:
            self._advance(now)
        return self._state != STATE_OFF or bool(self._line)

    def shutdown(self, now: float) -> None:
        """Switch the coil off (as the main loop would) and stop actuating."""
        self._auto = False
        self.lib.fil_command(2)
        self._advance(now)

    # ------------------------------------------------------------------ time
    def _advance(self, now: float) -> None:
        self._send(now)
        budget = MAX_STEP
        while self._t < now and self._line_free - now < LINE_AHEAD and budget > 0:
            step = self._step()
            budget -= step
        self._send(now)

    def _send(self, now: float) -> None:
        while self._line and self._line[0][0] <= now:
            self._out += self._line.pop(0)[1]

    def _take_frames(self) -> None:
        self.lib.fil_poll()
        buf = (ctypes.c_uint8 * 65536)()
        n = self.lib.fil_take(buf, 65536)
        if n:
            data = bytes(buf[:n])
            start = max(self._line_free, self._t)
            # whole bytes go out one by one: queue them in small pieces
            for a in range(0, n, 64):
                piece = data[a:a + 64]
                start += len(piece) * self.byte_time
                self._line.append((start, piece))
            self._line_free = start
            self.stats.bytes_sent += n

    def _next_command(self) -> float:
        """Device time of the main loop's next command (a clear before each actuation)."""
        return self._next_on - self._clear_lead if self._state == STATE_FAULT else self._next_on

    def _commands(self, t: float) -> None:
        """The main loop: on at each automatic actuation, off after its hold; a fault is
        cleared before the next actuation (a firmware that retries), so every actuation
        shows its fault."""
        if self._auto and self._state == STATE_FAULT and t >= self._next_on - self._clear_lead:
            self.lib.fil_command(3)
            self._cmd_pending = True
            return
        if self._auto and t >= self._next_on:
            self._next_on += self.period
            self.lib.fil_command(1)
            self._cmd_pending = True
            self.stats.actuations += 1
            self._off_at = t + self._peak_s + self.options.hold_time
        if self._off_at is not None and t >= self._off_at:
            self._off_at = None
            self.lib.fil_command(2)
            self._cmd_pending = True

    def _codes(self, amps: np.ndarray) -> np.ndarray:
        codes = np.asarray(amps, float) * self._vpa / self.drive.board.adc.reference * 2**self.drive.board.adc.bits
        if self.options.noise_codes > 0:
            codes = codes + self._rng.normal(0.0, self.options.noise_codes, codes.shape)
        return np.clip(np.floor(codes), 0, self._full).astype(np.uint16)

    def _idle(self) -> bool:
        """Nothing moves: the driver is off or faulted with no command waiting for a tick,
        the switch is off, the current is zero and no release run is under way (its ticks
        and conversions change nothing)."""
        return (self._state in (STATE_OFF, STATE_FAULT) and not self._cmd_pending and self._i == 0.0
                and self._outputs >> 24 & 1 == 0 and self._run is None)

    def _step(self) -> float:
        """One PWM period (or, idle, a run of them up to the next command); returns its s."""
        t0, T = self._t, self.pwm_period
        self._apply_supply_steps(t0)
        self._commands(t0)
        if self._idle():
            # nothing moves: skip to the next command (ticks and conversions do nothing in OFF)
            until = min(self._next_command() if self._auto else t0 + MAX_STEP, t0 + MAX_STEP)
            n = max(1, int(math.ceil((until - t0) / T)))
            self._run_samples(t0, t0 + n * T, lambda x: np.zeros_like(x))
            self._tick = max(self._tick, int(math.floor((t0 + n * T) * self.tick_rate)) + 1)
            self._t = t0 + n * T
            self.lib.fil_conversion(0, self._supply_code)     # the supply reading stays fresh
            self._take_frames()
            return n * T
        if self._run is not None and self._cm is None:
            return self._step_run(t0)
        if self._cm is not None and (self._state == STATE_HOLD or int(self.lib.fil_threshold()) >> 31
                                     or self._off_expiry is not None or self._run is not None):
            return self._step_current(t0)
        out = self._outputs
        enable, compare = out >> 24 & 1, out & 0xFFFFFF
        on_end = t0 + (T * min(compare, self.period_counts) / self.period_counts if enable else 0.0)
        i0 = self._i
        bypass = self._bridge_slow(enable) if self._bridge is not None else (out >> 25 & 1 or not self._split())
        full_on = bool(enable) and compare >= self.period_counts
        if self._arm is not None and self._arm.active:
            return self._step_flight(t0, on_end, bypass, bool(enable))
        if self._flight is not None and full_on and self._state == STATE_PEAK and self._flight_t0 is None \
                and i0 < 1e-9:
            self._flight_t0 = t0             # the pull-in starts from rest
        flight = self._flight_t0
        #: the boost switch on from the period's start: the capacitor at its voltage then
        boosting = self._boost is not None and bool(enable) and bool(out >> 26 & 1)
        bm = boost_model.of(self._boost) if self._boost is not None else boost_model
        boost = None
        if boosting:
            b = self._boost
            boost = boost_model.with_voltage(b, self.boost_voltage(t0))
        #: the time the driver turns the boost off within this period, s
        boost_cut: list[float] = []
        #: a peak that starts at this period's conversion: (its time s, current A, boost)
        late = None
        #: with an armature, its flight from there: the terminal current's function
        flying: list = []

        def on_current(x):
            if flight is not None:           # the armature model while the switch stays on
                return np.interp(np.asarray(x, float) - flight, *self._flight)
            on = self._loops["hold"]
            x = np.asarray(x, float)
            if boost is None:
                return rise_current(x - t0, i0, on.v_on, on.r_on, on.inductance)
            if not boost_cut:
                return bm.state(x - t0, boost, i0)[0]
            i_cut = bm.state(boost_cut[0] - t0, boost, i0)[0]
            return np.where(x <= boost_cut[0], bm.state(np.minimum(x, boost_cut[0]) - t0, boost, i0)[0],
                            rise_current(np.maximum(x - boost_cut[0], 0.0), i_cut, on.v_on, on.r_on, on.inductance))

        def terminal_current(x, i_m):
            """What the sense resistor carries: the coil's current, or with an eddy
            resistance the terminal current of the magnetising current ``i_m``."""
            e = self._loops["hold"].inductance
            if not isinstance(e, EddyCoil):
                return i_m
            lp = self._loops["hold" if bypass else "release"]
            on = self._loops["hold"]
            off = np.maximum(eddy.terminal(i_m, -lp.v_off, lp.r_off, e.resistance), 0.0)
            if fast_t is not None:   # a mixed-decay hold's fast part: through the body diodes
                fast = self._loops["release"]
                off = np.where(np.asarray(x) <= fast_t,
                               np.maximum(eddy.terminal(i_m, -fast.v_off, fast.r_off, e.resistance), 0.0), off)
            x = np.asarray(x, float)
            on_term = eddy.terminal(i_m, on.v_on, on.r_on, e.resistance)
            if boost is not None:            # fed from the boost capacitor until its switch opens
                end = boost_cut[0] if boost_cut else np.inf
                v_c = bm.state(np.minimum(x, end) - t0, boost, i0)[1]
                on_term = np.where(x <= end, bm.terminal(i_m, v_c, boost), on_term)
            term = np.where(x <= on_end, on_term, off)
            if late is not None and flying:  # the armature's flight from this conversion on
                term = np.where(x >= late[0], flying[0](x), term)
            elif late is not None:           # a peak from this period's conversion on
                v_c = bm.state(np.maximum(x - late[0], 0.0), late[2], late[1])[1]
                term = np.where(x >= late[0], bm.terminal(i_m, v_c, late[2]), term)
            return term

        #: a full bridge's slow decay that the driver ends at the conversion (all four open):
        #: the time it does, s, from which the current decays fast
        cut: list[float] = []
        #: a mixed-decay hold's off-time: fast (all four open) from the on-time's end to
        #: fast_t s, then slow (the design's hold loop)
        fast_t = None
        if self._mixed and bypass:
            fast_t = max(on_end, t0 + T * min(self._fast_end, self.period_counts) / self.period_counts)

        def decay_part(x, i_end):
            """The off-time's current at ``x`` s from ``i_end`` A at the on-time's end."""
            lp = self._loops["hold" if bypass else "release"]
            if fast_t is None:
                return decay_current(x - on_end, i_end, lp.r_off, lp.v_off, lp.inductance)
            fast = self._loops["release"]
            i_fast = decay_current(np.minimum(x, fast_t) - on_end, i_end, fast.r_off, fast.v_off, fast.inductance)
            i_slow = decay_current(np.maximum(x - fast_t, 0.0), i_fast, lp.r_off, lp.v_off,
                                   lp.inductance)
            return np.where(x <= fast_t, i_fast, i_slow)

        #: the release run started at this period's conversion (an armature riding the bus)
        ride: list[_BusRun] = []

        def current(x):
            x = np.asarray(x, float)
            if ride:
                return np.where(x <= ride[0].t0, plain_current(x), ride[0].magnetising(x))
            return plain_current(x)

        def plain_current(x):
            x = np.asarray(x, float)
            i_on = on_current(np.minimum(x, on_end))
            i_end = on_current(on_end)
            i_off = decay_part(x, i_end)
            if cut:
                fast = self._loops["release"]
                i_cut = decay_part(np.asarray(cut[0]), i_end)
                i_off = np.where(x > cut[0], decay_current(x - cut[0], i_cut, fast.r_off, fast.v_off,
                                                           fast.inductance), i_off)
            i = np.where(x <= on_end, i_on, i_off)
            return np.zeros_like(i) if self.options.fault == "open" else i

        def sensed(x):
            i = terminal_current(x, current(x))
            if ride:   # the run's terminal current after the turn-off
                i = np.where(np.asarray(x) <= ride[0].t0, i, ride[0].terminal(x))
            return np.where(np.asarray(x) < on_end, i, 0.0) if self.sense_in_switch else i

        # conversion point: middle of the on-time under the switch, middle of the period in the coil path
        s = t0 + (0.5 * (on_end - t0) if self.sense_in_switch and on_end > t0 else 0.5 * T)
        ticks = []
        while self._tick / self.tick_rate < t0 + T:
            ticks.append(self._tick / self.tick_rate)
            self._tick += 1
        self._run_samples(t0, s, sensed)
        for tt in [x for x in ticks if x < s]:
            self._do_tick(tt)
        code = int(self._codes(np.array([float(sensed(s))]))[0])
        self.lib.fil_conversion(code, self._supply_reading(s, flight))
        new = int(self.lib.fil_outputs())
        if not new >> 24 & 1 and on_end > s:
            on_end = s                      # the switch output is disabled at once
        if self._bridge is not None and bypass and not new >> 24 & 1:
            cut.append(s)                   # the bridge opens all four: fast decay from here
        if self._ride is not None and enable and not new >> 24 & 1 and self.options.fault != "open":
            # all four open: the armature's release into the drooping bus from here
            self._run = self._start_run(s, float(current(s)), flight)
            ride.append(self._run)
        if boosting and not (new >> 26 & 1 and new >> 24 & 1):
            boost_cut.append(s)             # the boost switch off now: the main supply from here
        late = None
        if self._boost is not None and not enable and new >> 26 & 1 and new >> 24 & 1:
            # the peak's start: the boost and the switch go on at once in this conversion
            # (its ON event's moment), the capacitor from where its recharge has it
            b = self._boost
            late = (s, float(current(s)), boost_model.with_voltage(b, self.boost_voltage(s)))
            off_current = current
            if self._arm is not None:       # the armature flown from rest, the boost on
                self._arm.start(self.boost_voltage(s))
                sensed_flight, flown = self._arm.run(s, t0 + T, t0 + T, True, "hold")
                flying.append(sensed_flight)    # its own terminal current from s on

                def current(x):             # noqa: F811 -- this period's current from here on
                    x = np.asarray(x, float)
                    return np.where(x < s, off_current(x), flown(x))
            else:
                def current(x):             # noqa: F811 -- this period's current from here on
                    x = np.asarray(x, float)
                    return np.where(x < s, off_current(x),
                                    bm.state(np.maximum(x - s, 0.0), late[2], late[1])[0])
        self._outputs = new
        if (self._cm is not None and int(self.lib.fil_threshold()) >> 31 and not boosting and late is None
                and not self._mixed):
            # the driver armed the comparator in this conversion (the hold's first, after the
            # tick that entered HOLD): it compares from here on, so the rest of the period is
            # stepped event by event (not run to the period's end on the peak's output, half
            # a period late on average)
            self._tick -= sum(1 for x in ticks if x >= s)   # the ticks after s: not done yet
            self._i = float(current(s))
            return self._step_current(t0, start=s, pieces=[(t0, s, current)])
        if self._mixed:
            self._fast_end = int(self.lib.fil_fast_end())   # the next period's
        self._run_samples(s, t0 + T, sensed)
        for tt in [x for x in ticks if x >= s]:
            self._do_tick(tt)
        self._i = float(current(t0 + T))
        if boosting:                        # where the capacitor stands when its switch is next off
            end = boost_cut[0] if boost_cut else t0 + T
            self._boost_v = float(bm.state(min(end, on_end) - t0, boost, i0)[1])
            self._boost_t = end
        elif late is not None:
            self._boost_v = float(bm.state(t0 + T - late[0], late[2], late[1])[1]) if self._arm is None \
                else self._arm.u
            self._boost_t = t0 + T
            if self._arm is not None and self._arm.settle(True):
                self._i = self._arm.coil_current
        if self.trace is not None:      # the period's mean: midpoint rule, 64 points
            x = t0 + (np.arange(64) + 0.5) * (T / 64)
            self.trace.append((t0, float(np.mean(current(x))), self._state))
        if on_end < t0 + T or not full_on:
            self._flight_t0 = None           # seated (or cut short): the RL model of the seated coil
        self._t = t0 + T
        self._take_frames()
        return T

    def _step_flight(self, t0: float, on_end: float, bypass: bool, enable: bool) -> float:
        """One PWM period with a boosted peak's armature in flight (:mod:`.boost_flight`):
        flown to the conversion with the outputs the driver set, then on to the period's end
        with the ones it sets there (the boost off, the switch off at once; a full bridge's
        slow decay that it ends opens all four); on the seated coil's closed form from the
        period the armature rests on the seat."""
        T, fl = self.pwm_period, self._arm
        boosting = enable and bool(self._outputs >> 26 & 1)
        s = t0 + (0.5 * (on_end - t0) if self.sense_in_switch and on_end > t0 else 0.5 * T)
        ticks = []
        while self._tick / self.tick_rate < t0 + T:
            ticks.append(self._tick / self.tick_rate)
            self._tick += 1

        def sensing(flown, until):
            def sensed(x):
                i = flown(x)
                return np.where(np.asarray(x) < until, i, 0.0) if self.sense_in_switch else i
            return sensed

        path = "hold" if bypass else "release"
        #: a mixed-decay hold's off-time: fast (all four open) until the count the driver gave
        fast_t = (max(on_end, t0 + T * min(self._fast_end, self.period_counts) / self.period_counts)
                  if self._mixed and bypass else None)
        first, first_coil = fl.run(t0, s, on_end, boosting, path, fast_t)
        self._run_samples(t0, s, sensing(first, on_end))
        for tt in [x for x in ticks if x < s]:
            self._do_tick(tt)
        code = int(self._codes(np.array([float(sensing(first, on_end)(s))]))[0])
        self.lib.fil_conversion(code, self._supply_code if fl.p_main is None else self._volts_code(fl.bus))
        new = int(self.lib.fil_outputs())
        if not new >> 24 & 1 and on_end > s:
            on_end = s                      # the switch output is disabled at once
        if self._bridge is not None and bypass and not new >> 24 & 1:
            path = "release"                # the bridge opens all four: fast decay from here
        still = boosting and bool(new >> 26 & 1 and new >> 24 & 1)
        if boosting and not still:          # the boost off now: it recharges from here
            self._boost_v, self._boost_t = fl.u, s
        if self._mixed:
            self._fast_end = int(self.lib.fil_fast_end())   # the next period's
        second, second_coil = fl.run(s, t0 + T, on_end, still, path, fast_t)
        self._outputs = new
        self._run_samples(s, t0 + T, sensing(second, on_end))
        for tt in [x for x in ticks if x >= s]:
            self._do_tick(tt)
        if still:
            self._boost_v, self._boost_t = fl.u, t0 + T
        self._i = fl.coil_current
        if self.trace is not None:      # the period's mean: midpoint rule, 64 points
            x = t0 + (np.arange(64) + 0.5) * (T / 64)
            self.trace.append((t0, float(np.mean(np.where(x < s, first_coil(x), second_coil(x)))), self._state))
        if fl.settle(bool(new >> 24 & 1)) and fl.seat_bus is not None and fl.p_main is not None:
            self._log.append(LogEntry(t0 + T, f"seated on the main bus at {fl.seat_bus:.6g} V"))
        self._t = t0 + T
        self._take_frames()
        return T

    def _step_run(self, t0: float) -> float:
        """One PWM period while the armature's release run into the drooping bus lasts: its
        terminal current sensed, its bus read by the conversions, the driver's ticks; when
        the run has ended, the RL model from its magnetising current on."""
        T, run = self.pwm_period, self._run
        self._flight_t0 = None
        end = t0 + T
        ticks = []
        while self._tick / self.tick_rate < end:
            ticks.append(self._tick / self.tick_rate)
            self._tick += 1

        def sensed(x):
            i = run.terminal(x)
            return np.zeros_like(i) if self.sense_in_switch else i

        s = t0 + 0.5 * T
        self._run_samples(t0, s, sensed)
        for tt in [x for x in ticks if x < s]:
            self._do_tick(tt)
        code = int(self._codes(np.array([float(sensed(s))]))[0])
        self.lib.fil_conversion(code, self._supply_reading(s, None))
        self._outputs = int(self.lib.fil_outputs())
        again = bool(self._outputs >> 24 & 1)
        self._run_samples(s, end, sensed)
        for tt in [x for x in ticks if x >= s]:
            self._do_tick(tt)
        self._i = float(run.magnetising(end))
        if self.trace is not None:
            x = t0 + (np.arange(64) + 0.5) * (T / 64)
            self.trace.append((t0, float(np.mean(run.magnetising(x))), self._state))
        if end >= run.t_end or again:
            # over (the armature on the open stop, no current), or the driver switched on
            # again before: the RL model of the seated coil from the run's current on
            self._run = None
        self._t = end
        self._take_frames()
        return T

    def _step_current(self, t0: float, start: float | None = None, pieces: list | None = None) -> float:
        """One PWM period of a current-mode hold: the switch as the driver's threshold
        handlers set it, the comparator stepped with the coil. Between events the current
        is one closed-form segment (switch on: the rise; off: the freewheel decay, through
        the hold's path while the bypass is closed); the events, in time order, are the
        scheduler ticks, the period's conversion (middle of the period), the comparator's
        trip ``hold.sense_delay`` after the sensed current crosses the armed threshold
        (the high code's current switch on, the low code's switch off: code ``k`` is
        ``k`` amps-per-code, the design's convention) and the off-time one-shot's expiry
        (its counts at the design's off-time prescaler on the timer clock). ``start``: the
        period's rest from there (s; its conversion done), ``pieces`` what came before."""
        T = self.pwm_period
        end, conv = t0 + T, t0 + 0.5 * T
        self._flight_t0 = None     # switched by thresholds: the seated coil (any pull-in run is over)
        ticks = []
        while self._tick / self.tick_rate < end:
            ticks.append(self._tick / self.tick_rate)
            self._tick += 1
        th, clock = self._cm, float(self.drive.board.timer.clock)
        t, i = (t0 if start is None else start), self._i
        converted = start is not None
        pieces = list(pieces or [])   # (start s, end s, coil current function) of the period
        for _ in range(10000):    # a handful of edges per period; the bound only stops a runaway
            on, path = self._cm_segment()
            lp = self._loops[path]
            ind = lp.inductance
            i_seg, t_seg = i, t

            def coil(x, i_seg=i_seg, t_seg=t_seg, on=on, lp=lp):
                dt = np.maximum(np.asarray(x, float) - t_seg, 0.0)
                c = rise_current(dt, i_seg, lp.v_on, lp.r_on, lp.inductance) if on else \
                    decay_current(dt, i_seg, lp.r_off, lp.v_off, lp.inductance)
                return np.zeros_like(c) if self.options.fault == "open" else c

            def seg(x, coil=coil, on=on, lp=lp):   # what the sense resistor carries
                c = coil(x)
                if not on and self.sense_in_switch:
                    return np.zeros_like(c)
                return _terminal(c, lp, on)

            if self._run is not None and on:   # the driver switched on again: the RL model from here
                self._run = None
            if self._run is not None:    # the armature's release run into the drooping bus
                run = self._run

                def coil(x, run=run):    # noqa: F811 -- the run's current in place of the segment's
                    return run.magnetising(x)

                def seg(x, run=run):     # noqa: F811
                    c = run.terminal(x)
                    return np.zeros_like(c) if self.sense_in_switch else c

            armed = int(self.lib.fil_threshold())
            if self._spent is not None and self._spent != (on, armed):
                self._spent = None         # a new segment or a new arming: the comparator can trip again
            flying = self._arm is not None and self._arm.active   # (a boosted armature still in flight)
            if flying:
                self._trip = None          # (found on the flight itself: _fly_segment)
            elif self._trip is None and self._spent is None and armed >> 31:
                lo, hi = (armed & 0xFFFF) * self._apc, (armed >> 16 & 0x7FFF) * self._apc
                # the thresholds compare the sensed current: with an eddy term the
                # magnetising current where the conducting loop's terminal current is there
                m_hi, m_lo = _magnetising(hi, lp, True), _magnetising(lo, lp, False)
                if on:
                    dt = 0.0 if i >= m_hi else float(rise_time(m_hi, i, lp.v_on, lp.r_on, ind))
                    if math.isfinite(dt):
                        self._trip = (t + dt + th.delay_s, True)
                elif th.control == "hysteretic" and i > m_lo:
                    self._trip = (t + float(decay_time(m_lo, i, lp.r_off, lp.v_off, ind)) + th.delay_s, False)
                elif th.control == "hysteretic" and isinstance(ind, EddyCoil):
                    # the turn-off's step took the sensed current below the lower threshold
                    self._trip = (t + th.delay_s, False)
            times = [(end, "end")] + [(x, "tick") for x in ticks if x >= t]
            if not converted:
                times.append((conv, "conversion"))
            if self._trip is not None:
                times.append((max(self._trip[0], t), "trip"))
            if self._off_expiry is not None:
                times.append((max(self._off_expiry, t), "expiry"))
            te, what = min(times, key=lambda x: x[0])
            if flying:
                te, what, coil, seg = self._fly_segment(t, te, what, on, path, armed)
            self._run_samples(t, te, seg)
            pieces.append((t, te, coil))
            i, t = float(coil(te)), te
            if flying and self._arm.settle(on):   # seated: the seated coil's closed form from here
                i = self._arm.coil_current
            if what == "end":
                break
            if what == "tick":
                ticks.remove(te)
                self._do_tick(te)
            elif what == "conversion":
                converted = True
                code = int(self._codes(np.array([float(seg(te))]))[0])
                self.lib.fil_conversion(code, self._supply_reading(te, None))
            elif what == "trip":
                above = self._trip[1]
                self._trip = None
                # an edge: one interrupt per crossing (a handler that does not switch, as
                # outside HOLD, leaves the comparator spent until the switch or arming changes)
                self._spent = (on, armed)
                self.lib.fil_threshold_trip(1 if above else 0)
            else:
                self._off_expiry = None
                self.lib.fil_off_timer_expire()
            started = int(self.lib.fil_off_timer())
            if started:
                self._off_expiry = t + (started - 1) * th.off_prescaler / clock
            if self._cm_segment() != (on, path) or not int(self.lib.fil_threshold()) >> 31:
                self._trip = None          # another segment, or the comparator disarmed
            if (self._ride is not None and self._run is None and (on, path) != (False, "release")
                    and self._cm_segment() == (False, "release") and i > 0.0 and self.options.fault != "open"):
                # all four open: the armature's release into the drooping bus from here
                self._run = self._start_run(t, i, None)
        else:
            raise RuntimeError("the current-mode hold's switch chatters: more edges in one PWM period "
                               "than the comparator can make")
        if self._run is not None and end >= self._run.t_end:
            self._run = None                # over: the armature on the open stop, no current
        self._i = i
        self._outputs = int(self.lib.fil_outputs())
        if self.trace is not None:      # the period's mean: midpoint rule, 64 points
            x = t0 + (np.arange(64) + 0.5) * (T / 64)
            mean = sum(float(np.sum(f(x[(x >= a) & (x < b)]))) for a, b, f in pieces) / 64
            self.trace.append((t0, mean, self._state))
        self._t = end
        self._take_frames()
        return T

    def _fly_segment(self, t: float, te: float, what: str, on: bool, path: str, armed: int):
        """A current-mode hold's segment from ``t`` s with the boosted armature still in flight
        (:mod:`.boost_flight`, the design's model): flown to ``te`` s (the next scheduled
        event, ``what``) with the switch ``on`` and the off ``path``; where the armed
        comparator's threshold is crossed on the way -- the sensed current rising to the high
        code's current switched on, falling to the low code's off (hysteretic) -- the segment
        ends ``hold.sense_delay`` after the crossing with a trip instead (the flight redone to
        there; the crossing between the flight's samples by linear interpolation). Returns
        ``(te, what, coil(x), sensed(x))``."""
        fl, th = self._arm, self._cm
        level = None
        if self._spent is None and armed >> 31:
            lo, hi = (armed & 0xFFFF) * self._apc, (armed >> 16 & 0x7FFF) * self._apc
            level = hi if on else lo if th.control == "hysteretic" else None
        saved = fl.snapshot()
        flown, coil = fl.run(t, te, te if on else t, False, path)
        if level is not None:
            tc = fl.crossing(level, on)
            if tc is not None and tc + th.delay_s < te:
                fl.restore(saved)
                te, what = tc + th.delay_s, "trip"
                self._trip = (te, on)
                flown, coil = fl.run(t, te, te if on else t, False, path)

        def sensed(x, flown=flown):
            c = flown(x)
            return np.zeros_like(c) if not on and self.sense_in_switch else c
        return te, what, coil, sensed

    def _cm_segment(self) -> tuple[bool, str]:
        """A current-mode hold's segment as the driver's outputs set it: ``(switch on, the
        loop's path)``. One switch: on while enabled; off through the hold's path (the
        bypass closed, or no split decay), else the release's. A full bridge: enabled with
        the drive mask on (Q1 + Q4), off with the slow-decay mask (the threshold handlers
        switch the masks, not the enable), and the fast path once all four are open (with
        mixed decay also while enabled: each off-time's fast part)."""
        out = int(self.lib.fil_outputs())
        enable = out >> 24 & 1
        if self._bridge is None:
            return bool(enable), "hold" if (out >> 25 & 1 or not self._split()) else "release"
        if not enable:
            return False, "release"
        on_mask = int(self.lib.fil_bridge()) & 0x0F
        drive, slow, fast = self._bridge
        if self._mixed and on_mask == fast:   # a mixed-decay off-time's fast part: all four open
            return False, "release"
        if on_mask not in (drive, slow):
            raise RuntimeError(f"the driver switches the bridge's current-mode hold as {on_mask:#x}; the "
                               f"coil model has paths for on {drive:#x} and off {slow:#x} (slow decay)"
                               + (f" or {fast:#x} (fast decay)" if self._mixed else ""))
        return on_mask == drive, "hold"

    def _bridge_slow(self, enable: int) -> bool:
        """A full bridge's off-times: True for the slow decay (the hold's path, the masks the
        driver set are the design's hold), False for the fast one (all four open).

        Raises ``RuntimeError`` for masks the coil model has no path for (a driver that
        does not switch the design's phases)."""
        masks = int(self.lib.fil_bridge())
        on_mask, off_mask = masks & 0x0F, masks >> 4
        drive, slow, fast = self._bridge
        if not enable:
            return False
        if on_mask != drive or off_mask not in (slow, fast):
            raise RuntimeError(f"the driver switches the bridge's on-times as {on_mask:#x} and off-times as "
                               f"{off_mask:#x}; the coil model has paths for on {drive:#x}, off {slow:#x} "
                               f"(slow decay) or {fast:#x} (fast decay)")
        return off_mask == slow

    def _split(self) -> bool:
        return self.design.split_decay is not None

    def _do_tick(self, t: float) -> None:
        self.lib.fil_tick()
        self._cmd_pending = False
        state = int(self.lib.fil_state())
        if state != self._state:
            self._log.append(LogEntry(t, f"state {STATE_NAMES[state]}"
                                      + (f" (fault {int(self.lib.fil_fault())})" if state == STATE_FAULT else "")))
            self._state = state

    def _run_samples(self, a: float, b: float, sensed) -> None:
        """Push the ADC samples taken in [a, b) to the encoder."""
        fs = self.sample_rate
        k0, k1 = self._k, int(math.ceil(b * fs - 1e-9))
        if k1 <= k0:
            return
        x = np.arange(k0, k1) / fs
        codes = np.ascontiguousarray(self._codes(sensed(x)), dtype=np.uint16)
        self.lib.fil_push_block(codes.ctypes.data_as(ctypes.POINTER(ctypes.c_uint16)), codes.size)
        self._k = k1
        self.stats.samples_sent += codes.size


class _BusRun:
    """An armature's release run into the drooping bus as the device plays it: started at
    device time ``t0`` s, the run's times ``time`` s (from its turn-off), magnetising (the
    coil's) current A, terminal current A (what the sense resistor carries; 0 once the
    diodes block) and bus V; past the run's end each holds its last value (the device
    then hands over to the RL model)."""

    def __init__(self, t0: float, time, magnetising, terminal, bus):
        self.t0, self._t, self._m, self._i, self._v = float(t0), time, magnetising, terminal, bus
        self.t_end = self.t0 + float(time[-1])

    def magnetising(self, x):
        return np.interp(np.asarray(x, float) - self.t0, self._t, self._m)

    def terminal(self, x):
        return np.interp(np.asarray(x, float) - self.t0, self._t, self._i)

    def bus(self, x) -> float:
        return float(np.interp(float(x) - self.t0, self._t, self._v))
