"""A moving armature on a boosted peak in the firmware device (``[supply] boost`` and
``[armature]``, ``coildrive emulate --firmware``): the armature flown stretch by stretch as
the compiled driver switches, from the peak's start until it rests on the seat.

The device (:class:`~coildrive.bench.firmware_device.FirmwareDevice`) hands each PWM
period over in two stretches, split at the period's conversion (where the driver may turn
the boost or the switch off): :meth:`BoostFlight.run` flies the armature's equations
(:func:`coildrive.model.armature_sim.simulate`, the design's model) over a stretch --
switch on from the boost capacitor while the driver keeps the boost on (its voltage a
state with no source behind it, :func:`coildrive.model.armature_boost.boost_params`; the
boost at its nominal voltage and capacitance, the capacitor where its recharge has it at
the peak's start), on from the main supply after it, off through the hold's freewheel
path (or the release's once the driver opens everything) -- and returns the current over
it. Once the armature rests on the seat the device goes on with the seated coil's
closed form, as it does after an unboosted pull-in; once it rests open with no current
after the driver switched off, the flight is over too. With an eddy-current term
(``coil.eddy_resistance``) the flight carries the branch behind the loop's Thevenin pair
(the design's model): :meth:`BoostFlight.run` gives the terminal current the sense resistor
carries (what the driver's conversions read, the threshold's among them) beside the
magnetising current, from which the seated coil's closed form goes on
(:attr:`BoostFlight.coil_current`).

On a drooping main supply (``supply.source_resistance``) the flight carries the main bus
as the design and ``simulate`` do (:func:`coildrive.model.armature_boost.boosted_pull_in`
with ``bus0``, :func:`coildrive.model.waveform.armature_actuation`): its bulk capacitor a
sixth state of the flight from the hand-over on (the first stretch off the boost), starting
at the source's voltage (nothing drew from it during the peak), the boost converter's draw
from the hand-over on taken out of the source (:func:`coildrive.model.waveform.converter_fed`:
the larger of the hand-over current and the seated coil's steady PWM top at the firmware's
duty). :attr:`BoostFlight.bus` is the bus, V, which the driver's supply conversions read
while the flight lasts; :attr:`BoostFlight.seat_bus` the bus where it rested on the seat.

Units: SI (s, A, V, V*s, m, m/s).
"""

from __future__ import annotations

import copy

import numpy as np

from ..model.armature import params_from_loop
from ..model.armature_boost import boost_params
from ..model.armature_sim import simulate

#: Samples per closed-form piece or integrated piece of a stretch (the current between them
#: is interpolated linearly for the ADC's samples).
POINTS = 16


class BoostFlight:
    """The armature's state between stretches (see the module docstring).

    Parameters
    ----------
    drive : the (possibly faulty) drive the device emulates (its ``[armature]`` and boost).
    hold, release : its loops at the device's point (:func:`coildrive.model.circuit.loop`):
        the hold's (switch on from the main supply, the hold's off path) and the release's
        (the off path once the driver opens everything).
    l_scale : the coil's inductance factor (the device's tolerance scale x its fault's).
    setting : on a drooping main supply, the hold's ``(duty, frequency Hz)`` the firmware
        runs at the device's point (the converter's draw from the hand-over on); else unused.
    """

    def __init__(self, drive, hold, release, l_scale: float, setting: tuple[float, float] | None = None):
        s, r_e = drive.supply, drive.coil.eddy_resistance
        self.drive, self._setting = drive, setting
        self.p_hold = params_from_loop(drive.armature, hold, l_scale, r_e)
        self.p_release = params_from_loop(drive.armature, release, l_scale, r_e)
        #: on a drooping main supply: the hold's points on the bus (the converter's draw
        #: taken out at the hand-over: ``p_main``), else ``None``
        self._p_bus = (params_from_loop(drive.armature, hold, l_scale, r_e, bus=(s.source_resistance, s.capacitance))
                       if s.droops else None)
        if self._p_bus is not None and drive.freewheel.type == "clamp":   # off-times drawing from the bus
            self._p_bus = self._p_bus.clamped()
        self.p_main = None
        self.bus = float(hold.v_on)          # the main bus, V (the source's while not drawn)
        self.seat_bus: float | None = None   # V where the armature came to rest on the seat
        self.seat_time: float | None = None  # s (device time) where it came to rest on the seat
        #: ``(s, A)``: the hand-over (the first stretch off the boost) and the terminal current
        #: there, as the boost left it
        self.hand_over: tuple[float, float] | None = None
        #: the flight's stretches as flown since the peak's start: ``(from s, to s, what)``,
        #: what ``"boost"``, ``"on"`` (the main supply) or the off path (``"hold"``/``"release"``)
        self.flown: list[tuple[float, float, str]] = []
        self._boost = (float(s.boost_capacitance), float(s.boost_resistance))
        self.y: np.ndarray | None = None     # lambda, x, v, q, sq while in flight, else None
        self.u = float(s.boost)              # the boost capacitor, V
        self.state = "open"
        self.live = False
        self.current = 0.0                   # A at the end of the last stretch (the terminal current)
        #: A there, the coil's: with an eddy term the magnetising current (the seated coil's
        #: closed form goes on from it), else :attr:`current`
        self.coil_current = 0.0

    @property
    def active(self) -> bool:
        """True from the peak's start until the armature rests on the seat (or open, off)."""
        return self.y is not None

    def start(self, u: float) -> None:
        """The peak's start from rest, the boost capacitor at ``u`` V."""
        self.y = np.array([0.0, float(self.p_hold.stroke[0]), 0.0, 0.0, 0.0])
        self.u, self.state, self.live, self.current, self.coil_current = float(u), "open", False, 0.0, 0.0
        self.bus, self.p_main, self.seat_bus, self.flown = float(self.p_hold.v_on[0]), None, None, []
        self.seat_time = self.hand_over = None

    def _main(self):
        """The hold's points off the boost: on a drooping main supply the bus's, the
        converter's draw from this hand-over on (module docstring), else the stiff supply's."""
        if self._p_bus is None:
            return self.p_hold
        if self.p_main is None:
            from ..model.waveform import converter_fed

            self.p_main = converter_fed(self.drive, self._p_bus, self.current, *self._setting)
        return self.p_main

    def _fly(self, p, schedule, t0: float, boost: bool, release=None):
        droops = boost and self._boost[0] > 0
        on_bus = not boost and self._p_bus is not None
        start = np.append(self.y, self.u) if droops else np.append(self.y, self.bus) if on_bus else self.y
        tr = simulate(p, schedule, state=self.state, start=start, live=self.live, t0=t0, points=POINTS,
                      release_params=release)
        self.y = np.array([tr.flux[-1], tr.position[-1], tr.velocity[-1], tr.charge[-1], tr.square[-1]])
        if droops:
            self.u = float(tr.bus[-1])
        seats = [t for t, name in tr.log if name == "seat"]
        if seats and tr.state == "seated":
            self.seat_time = float(seats[-1])
        if on_bus:
            self.bus = float(tr.bus[-1])
            if seats and tr.state == "seated":   # (a piece ends at the seat: a sample there)
                self.seat_bus = float(np.interp(seats[-1], tr.time, tr.bus))
        self.state = tr.state
        coil = tr.current if tr.magnetising_current is None else tr.magnetising_current
        self.current, self.coil_current = float(tr.current[-1]), float(coil[-1])
        self.live = self.current > 0.0
        return tr.time, tr.current, coil

    def run(self, t0: float, t1: float, on_end: float, boost: bool, path: str, fast_end: float | None = None):
        """Fly from ``t0`` to ``t1`` s: the switch on until ``on_end`` s (from the boost
        capacitor while ``boost``, else from the main supply), then off through ``path``
        (``"hold"`` or ``"release"``); ``fast_end``: a full bridge's mixed-decay hold, its
        off-time through the release's path (all four open) until then, s, before ``path``.
        Returns ``(sensed(x), coil(x))``: the terminal current (what the sense resistor
        carries) and the coil's (with an eddy term the magnetising current; else the same),
        A at device times in the stretch."""
        if t1 <= t0:
            i, m = self.current, self.coil_current
            self._samples = (np.array([t0]), np.array([i]))
            return (lambda x: np.full(np.shape(x), i)), (lambda x: np.full(np.shape(x), m))
        times, amps, coils = [np.array([t0])], [np.array([self.current])], [np.array([self.coil_current])]
        if not boost and self.hand_over is None:
            self.hand_over = (t0, self.current)
        cut = min(max(on_end, t0), t1)
        if boost and cut > t0:
            c_b, r_b = self._boost
            t, i, m = self._fly(boost_params(self.p_hold, self.u, c_b, r_b), [(cut, True)], t0, True)
            times.append(t)
            amps.append(i)
            coils.append(m)
        schedule = [] if boost else [(cut, True)] if cut > t0 else []
        off_from = cut
        if fast_end is not None and path == "hold" and min(fast_end, t1) > cut:
            off_from = min(fast_end, t1)
            schedule.append((off_from, False, None, "release"))
        if t1 > off_from:
            schedule.append((t1, False, None, path))
        edges = [t0 if not boost else cut] + [seg[0] for seg in schedule]
        self.flown += ([(t0, cut, "boost")] if boost and cut > t0 else []) + [
            (a, seg[0], "on" if seg[1] else seg[3]) for a, seg in zip(edges, schedule)]
        if schedule:
            t, i, m = self._fly(self._main(), schedule, cut if boost else t0, False, self.p_release)
            times.append(t)
            amps.append(i)
            coils.append(m)
        t, i, m = np.concatenate(times), np.concatenate(amps), np.concatenate(coils)
        self._samples = (t, i)
        return (lambda x: np.interp(np.asarray(x, float), t, i)), (lambda x: np.interp(np.asarray(x, float), t, m))

    def crossing(self, level: float, rising: bool) -> float | None:
        """s: where the last :meth:`run`'s terminal current first reaches ``level`` A
        (``rising``: from below, else from above; its start where it is already there), by
        linear interpolation between its samples; ``None`` where it does not."""
        t, i = self._samples
        d = (i - level) if rising else (level - i)
        k = np.flatnonzero(d >= 0.0)
        if k.size == 0:
            return None
        k = int(k[0])
        if k == 0:
            return float(t[0])
        return float(t[k - 1] + (t[k] - t[k - 1]) * -d[k - 1] / (d[k] - d[k - 1]))

    def snapshot(self) -> dict:
        """The flight's state, for :meth:`restore` (a stretch flown too far: a comparator's
        crossing inside it)."""
        out = copy.copy(self.__dict__)
        out["y"] = None if self.y is None else self.y.copy()
        out["flown"] = list(self.flown)
        return out

    def restore(self, saved: dict) -> None:
        """Back to a :meth:`snapshot`."""
        self.__dict__.update(saved)
        self.flown = list(saved["flown"])

    def settle(self, enabled: bool) -> bool:
        """End the flight where it is over: the armature resting on the seat, or (the driver
        switched off) open with no current left. True where it ended."""
        if self.y is not None and (self.state == "seated" or (not enabled and self.state == "open"
                                                                and not self.live)):
            self.y = None
            return True
        return False
