"""A moving armature's boosted peak: the peak from the boost until the current threshold,
then the PWM hold from the main supply, the armature moving through both.

The peak (:func:`coildrive.model.armature_runs.pull_in` with ``trip``): the armature's
equations (:mod:`coildrive.model.armature`) with the boost in the supply's place -- a
stiff source at ``V_b`` (an ideal boost), or the boost capacitor ``C_b`` as the run's
sixth state with no source behind it (``source_resistance = inf``)::

    dlambda/dt = u - (R_on + R_b) i          C_b du/dt = -i          u(0) = V_b

until the coil's current first reaches the threshold (``i_trip``; with an eddy term the
branch's flux and force, the loop's Thevenin pair, and the threshold on the terminal
current the sense sees, as on the drooping bus of :mod:`coildrive.model.armature`). Where the armature
seats first the threshold comes on the seat (the seated coil's closed form from the seat's
state); where it comes first the armature is still open or in flight, and the hold
carries it on: all such points at once, flown from PWM edge to PWM edge from the state
at the threshold through the hold on the main supply (on for ``D T``, off through the
freewheel path for the rest of each period ``T``, the first on-time at the threshold)
until it rests on the seat, falls back to the open stop where the hold's highest current
cannot start it again, or a window ends (the design's: ``pull_in.margin`` x the longest
boosted peak over the envelope -- flying a weak hold's slow approach edge by edge for as long as
the mechanics' own time bound would cost minutes over the envelope, and an armature that
is not seated by then fails the design anyway). A hold whose duty the firmware sets period
by period (a closed loop: ``control``) flies the same edges with each period's duty from the
current at the period's conversion (the flight's state there; with an eddy term the
terminal current of the segment it falls in, what the sense carries).

A current-mode hold (``comparator``, :class:`Comparator`) flies the
same way from comparator edge to comparator edge: each on-time ends the comparator's delay
after the current rises to the upper threshold, each off-time the delay after it falls to
the lower one (hysteretic) or after the fixed off-time -- the thresholds events on the
current in flight (:func:`~coildrive.model.armature_flight.fly`'s ``current_to``, rising or
falling).

A full bridge's mixed-decay hold (``mixed``, a :class:`~coildrive.model.pwm.MixedDecay`
per point) starts each off-time of the flights fast -- all four switches open, through the
body diodes into the bus: the release path's ``R_fast`` and ``V_fast = V_bus + 2 V_d``
(the diodes blocking at the current's zero) -- for ``fraction`` of it, then slow (the hold's
own off path); the same batched flight with the off path swapped per point at each edge.

On a drooping main supply (``p_hold.droops``: ``source_resistance`` and ``capacitance``
behind the hold's switch) the main bus feeds the hold from the hand-over on, its bulk
capacitor a sixth state of the flight (:class:`~coildrive.model.armature_flight._Rhs`:
``C du/dt = (V_s - u)/R_s - i`` while the switch is on, the freewheel path drawing nothing;
with an eddy term ``i`` the terminal current the bus feeds, the branch behind the loop's
Thevenin pair, the freewheel blocking at the terminal current's zero), starting at ``bus0`` (the source's voltage: the main supply's diode blocked during the
peak, nothing drew from it); the lowest bus is tracked through the flight, and from the
seat on (or from the hand-over, where the armature seated within the peak) the seated
coil's PWM on the bus is exact period by period
(:func:`coildrive.model.supply.state_from`, :func:`~coildrive.model.supply.lowest_from`,
:func:`~coildrive.model.supply.hold_from`) until its orbit repeats.

Energy: the boost gives ``1/2 C_b (V_b^2 - u^2)`` (an ideal boost ``V_b int i dt``),
which is the field's energy plus the loop's ``R int i^2 dt`` plus the mechanical work
(the armature's kinetic energy, the spring's and the load's, the damping's heat).

Units: SI (V, A, ohm, H, F, m, kg, N, s, J).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .armature import (BOUND, MAX_BOUNCES, OPEN, REST_FRACTION, SEAT, SEATED, STALLED, START, TRIP, TRIPPED,
                       ZERO, ArmatureParams)
from .armature_flight import fly_mixed, is_stiff
from .armature_runs import PullInBatch, pull_in
from .eddy import stiff_loss
from .pwm import MixedDecay
from . import supply as bus_model

#: Most PWM edges the hold after the threshold is followed through (never hang; the time
#: bound ends it first at any frequency the timer makes in practice).
MAX_EDGES = 200_000
#: Samples per segment of a drooping bus's hold run through
#: :func:`~coildrive.model.armature_sim.simulate` (an armature that fell back to the open
#: stop and may start again: its lowest bus is taken at them).
BUS_SAMPLES = 16


def boost_params(p: ArmatureParams, v_b, c_b, r_b) -> ArmatureParams:
    """``p`` (the hold's points, main supply) with the boost as the peak's source: ``v_b``
    V, the boost path's ``r_b`` ohm added to the on-loop, and ``c_b`` F a capacitor with no
    source (0: a stiff, ideal boost)."""
    n = len(p)
    c = np.broadcast_to(np.asarray(c_b, float), (n,)).astype(float)
    return dataclasses.replace(
        p, v_on=np.broadcast_to(np.asarray(v_b, float), (n,)).astype(float), r_on=p.r_on + r_b,
        source_resistance=np.where(c > 0, np.inf, 0.0), capacitance=c)


def hold_schedule(t0: float, t_end: float, duty: float, period: float, fast: float = 0.0) -> list:
    """The PWM hold's segments ``(t_end, on)`` from ``t0`` s to ``t_end`` s: on for
    ``duty x period`` s, then off for the rest of each period. ``fast``: a mixed-decay
    hold's fraction of each off-time that decays fast, its segment ``(t_end, False, None,
    "release")`` (:func:`~coildrive.model.armature_sim.simulate`'s release path) first."""
    out = []
    t_on = duty * period
    t_fast = fast * (period - t_on)
    k = 0
    while True:
        start = t0 + k * period
        if start >= t_end:
            return out
        if t_on > 0:
            out.append((min(start + t_on, t_end), True))
        if t_fast > 0 and start + t_on < t_end:
            out.append((min(start + t_on + t_fast, t_end), False, None, "release"))
        if t_on + t_fast < period and start + t_on + t_fast < t_end:
            out.append((min(start + period, t_end), False))
        k += 1


def boosted_pull_in(p_boost: ArmatureParams, p_hold: ArmatureParams, trip, duty, period, until,
                    i_top=None, rtol: float = 1e-7, bus0=None, orbit: bool = True,
                    control=None, mixed: MixedDecay | None = None,
                    comparator: Comparator | None = None) -> PullInBatch:
    """Switch-on from rest: the boost (``p_boost``, :func:`boost_params`) until the current
    reaches ``trip`` A, then the hold (``p_hold``: the main supply's loop, ``duty`` and
    ``period`` s per point) until the armature seats, or ``until`` s after switch-on (per
    point; the design's window: ``pull_in.margin`` x the longest boosted peak),
    whichever comes first (module docstring).

    The result is :func:`~coildrive.model.armature_runs.pull_in`'s with ``trip_time`` and
    ``trip_state`` the threshold's moment (the end of the peak), and where that came
    before the seat the hold's outcome in ``status`` (SEATED or STALLED), ``seat_time``,
    ``seat_current``, ``seat_charge``, ``seat_square``, ``impact_time``, ``dip_current`` (the current at the impact, in the
    hold) and ``stall_gap`` (where it was at ``until``: ``bound``). ``i_top`` (A per point): the hold's highest current (its
    steady ripple top); where the armature falls back to the open stop with ``i_top``
    below its start current it stays there (STALLED at the full stroke).

    On a drooping main supply (``p_hold.droops``; ``p_hold.v_on`` the source's voltage) the
    hold runs on the main bus from ``bus0`` V at the hand-over (per point; default the
    source's), and ``lowest_bus``, ``lowest_bus_time`` (s from switch-on) are the bus's
    lowest from the hand-over until the seat and then on the seated coil's PWM until its
    orbit repeats (``bus_settled``: False where it had not within
    :data:`~coildrive.model.supply.HOLD_PERIODS_MAX` periods; then the lowest so far), or
    until ``until`` where the armature is not seated by then (module docstring). Where the
    threshold never comes the main bus is not drawn: ``bus0`` itself, at 0 s.
    ``orbit`` False: the lowest bus only up to the seat (``bus_settled`` ``None``;
    :func:`with_orbit` completes it), for runs that need the seat alone. With a clamp across
    the switch (``p_hold.clamp``: its off-times draw from the bus, in the flight) the seated
    coil's PWM has no closed form here: the lowest bus is up to the seat whatever ``orbit``
    says (the design bounds the rest by a floor, :func:`coildrive.design.supply.armature_clamp_bus`);
    so too over the coil's open and seated curves (``p_hold.curves``).

    ``control``: a hold whose duty the firmware sets period by period from a conversion
    (a closed loop), else ``None`` (``duty`` throughout). It has ``sample(duty)`` (the
    conversion's moment in each period, a fraction of it, per point) and ``step(k, i)``
    (the next period's duty at points ``k`` from the current ``i`` A converted in the period
    that ends); ``duty`` is then the first period's. With an eddy term the current converted
    is the terminal current the sense carries (:meth:`~coildrive.model.armature.ArmatureParams.terminal`
    in the segment the conversion falls in: on, off through the hold's path or a mixed
    decay's fast one, 0 where the freewheel has blocked; on a drooping bus from the bus
    there). Where the armature falls back to the
    open stop under it, it is taken as not seated (STALLED at the full stroke).

    ``mixed``: a full bridge's mixed-decay hold (its arrays per point; a stiff main supply),
    each off-time fast for its ``fraction`` first (module docstring); ``None``: the hold's
    off path throughout.

    ``comparator``: a current-mode hold (:class:`Comparator`; on a drooping main supply the
    bus a state of its flights too) switches the flights after the threshold by its
    thresholds instead of ``duty`` (module docstring); an armature fallen back to the open
    stop under it is taken as not seated.
    """
    if mixed is not None and p_hold.droops:
        raise ValueError("a mixed-decay hold's flights take a stiff main supply")
    n = len(p_hold)
    pin = pull_in(p_boost, trip=trip, rtol=rtol)
    out = {k: np.array(getattr(pin, k), copy=True) for k in
           ("status", "seat_time", "seat_current", "impact_time", "impact_speed", "dip_current",
            "dip_time", "stall_gap", "bound", "bounces", "steps", "seat_charge", "seat_square")}
    per_point = (lambda x: np.broadcast_to(np.asarray(x, float), (n,)))
    droop = p_hold.droops
    u0 = per_point(p_hold.v_on if bus0 is None else bus0).astype(float)
    in_peak = seated_in_peak_of(pin.status, pin.seat_time, pin.trip_time)
    seat_bus = np.where(in_peak, u0, np.nan)
    low = np.stack([u0, np.where(np.isfinite(pin.trip_time), pin.trip_time, 0.0)])
    k = np.flatnonzero(pin.status == TRIPPED)
    if k.size:
        top = np.full(n, np.inf) if i_top is None else per_point(i_top)
        y0 = pin.trip_state[:5, k]
        if droop:
            y0 = np.concatenate([y0, u0[None, k]])
        got = _hold_flights(p_hold.take(k), pin.trip_time[k], y0, per_point(duty)[k], per_point(period)[k],
                            per_point(until)[k], top[k], rtol,
                            None if control is None else _Sub(control, k),
                            None if mixed is None else mixed.flat((n,)).at(k), comparator)
        got.pop("phase", None), got.pop("phase_edge", None)
        if droop:
            seat_bus[k] = got.pop("seat_bus")
            low[:, k] = got.pop("low")
        for name, value in got.items():
            out[name][k] = value
    if not droop:
        return dataclasses.replace(pin, **out)
    run = dataclasses.replace(pin, **out, lowest_bus=low[0], lowest_bus_time=low[1], seat_bus=seat_bus)
    return with_orbit(p_hold, run, duty, period) if orbit and p_hold.clamp is None and p_hold.curves is None else run


def with_orbit(p_hold: ArmatureParams, run: PullInBatch, duty, period) -> PullInBatch:
    """A :func:`boosted_pull_in` run on the drooping main bus made with ``orbit=False``
    (its lowest bus up to the seat) completed: from the seat on -- from the hand-over where
    it seated within the peak -- the seated coil's PWM on the bus
    (:func:`seated_hold_bus`) until its orbit repeats, into ``lowest_bus``,
    ``lowest_bus_time`` and ``bus_settled``. ``p_hold``, ``duty``, ``period``: the run's."""
    n = len(p_hold)
    per_point = (lambda x: np.broadcast_to(np.asarray(x, float), (n,)))
    low = np.stack([run.lowest_bus, run.lowest_bus_time]).astype(float)
    settled = np.ones(n, bool)
    in_peak = seated_in_peak(run)
    j = np.flatnonzero(run.status == SEATED)
    if j.size:   # from the seat on (seated in the peak: from the hand-over), closed form
        ph = p_hold.take(j)
        t_from = np.where(in_peak[j], run.trip_time[j], run.seat_time[j])
        i_from = np.where(in_peak[j], ph.current(run.trip_state[0, j], 0.0), run.seat_current[j])
        v, when, settled[j] = seated_hold_bus(ph, run.trip_time[j], t_from, i_from, run.seat_bus[j],
                                              per_point(duty)[j], per_point(period)[j])
        lower = v < low[0, j]
        low[0, j] = np.where(lower, v, low[0, j])
        low[1, j] = np.where(lower, when, low[1, j])
    return dataclasses.replace(run, lowest_bus=low[0], lowest_bus_time=low[1], bus_settled=settled)


def seated_in_peak_of(status, seat_time, trip_time) -> np.ndarray:
    """Where a run's armature rests on the seat by the threshold (:func:`seated_in_peak`)."""
    return (status == SEATED) & (seat_time <= trip_time)


def seated_hold_bus(p: ArmatureParams, t_hand, t_seat, i_seat, u_seat, duty, period):
    """``(lowest bus V, when s, settled)`` of the voltage-mode PWM hold on the drooping bus
    (the points of ``p``: the hold's loop and bus) with the armature at rest on the seat
    from ``t_seat`` s on, the coil carrying ``i_seat`` A and the bus at ``u_seat`` V then;
    the hold's periods of ``period`` s (on for ``duty`` of each) count from the hand-over
    at ``t_hand`` s. The rest of the period the seat came in (its on-time on the bus,
    :func:`~coildrive.model.supply.lowest_from`; its off-time the coil's own RL decay while
    the bus recovers through ``R_s``; with an eddy term ``i_seat`` is the magnetising
    current and the off-time the branch's decay, :func:`~coildrive.model.supply.off_current`),
    then :func:`~coildrive.model.supply.hold_from` from
    the next period's start until the orbit repeats. ``when`` from switch-on."""
    b = p.bus(False)
    t_on = duty * period
    phase = np.maximum(t_seat - t_hand, 0.0)
    start = t_hand + np.floor(phase / period * (1.0 + 1e-15)) * period   # this period's start
    on = t_seat < start + t_on
    dt_on = np.where(on, start + t_on - t_seat, 0.0)
    v_low, t_low = bus_model.lowest_from(dt_on, b, i_seat, u_seat)
    when = t_seat + t_low
    i1, u1 = bus_model.state_from(dt_on, b, i_seat, u_seat)
    i1, u1 = np.where(on, i1, i_seat), np.where(on, u1, u_seat)
    t_next = start + period
    dt_off = np.maximum(t_next - np.maximum(t_seat, start + t_on), 0.0)
    i2 = bus_model.off_current(dt_off, i1, p.r_off, p.v_off, b)   # (an eddy term: the branch's decay)
    u2 = b.v_s + (u1 - b.v_s) * np.exp(-dt_off / (p.source_resistance * p.capacitance))
    v_h, t_h, settled = bus_model.hold_from(b, i2, u2, duty, period, p.r_off, p.v_off)
    lower = v_h < v_low
    return np.where(lower, v_h, v_low), np.where(lower, t_next + t_h, when), settled


#: A current-mode hold's comparator phases (:class:`Comparator`): on until the current rises
#: to the upper threshold, on for the delay after it, off until it falls to the lower one
#: (hysteretic), off for a time (the delay after the lower threshold; the fixed off-time).
ON_WAIT, ON_DELAY, OFF_WAIT, OFF_TIMED = 0, 1, 2, 3


@dataclasses.dataclass(frozen=True)
class Comparator:
    """A current-mode hold switched by its thresholds (``hold.mode = "current"``), as
    :func:`coildrive.design.hold_current.threshold_hold` runs it on the seated coil, here
    as events on the current of an armature in flight: from the hand-over the switch is
    off -- hysteretic, until the current falls to ``lower`` A and ``delay`` s more; the
    fixed off-time, for ``off_time`` s -- then on until it rises to ``upper`` A and
    ``delay`` s more (on for the delay alone where it is already at or above it), then off
    again. ``delay``: the comparator's (``hold.sense_delay``). The current compared is
    the sensed one: with an eddy term the terminal current, which steps at each switch edge
    (``i_on``, ``i_off`` below: what it is with the switch on and off)."""

    hysteretic: bool
    upper: float
    lower: float
    off_time: float
    delay: float

    def start(self, t, i_on, i_off) -> tuple[np.ndarray, np.ndarray]:
        """``(phase, edge s)`` per point at the hand-over at ``t`` s, the sensed current
        ``i_on`` A with the switch on, ``i_off`` A with it off."""
        phase = np.full(np.shape(t), OFF_TIMED if not self.hysteretic else OFF_WAIT)
        edge = np.where(phase == OFF_TIMED, t + self.off_time, np.inf)
        return self.settle(np.ones(np.shape(t), bool), phase, edge, t, i_on, i_off)

    def turn(self, turn, phase, edge, t, i_on, i_off) -> tuple[np.ndarray, np.ndarray]:
        """``(phase, edge)`` after the points ``turn`` reached their phase's end at ``t`` s
        (an edge's time or the threshold's event), the sensed current ``i_on``/``i_off`` A."""
        phase, edge = self._next(turn, phase, edge, t)
        return self.settle(turn, phase, edge, t, i_on, i_off)

    def settle(self, pending, phase, edge, t, i_on, i_off) -> tuple[np.ndarray, np.ndarray]:
        """The phases just entered at ``t`` s (``pending``) that end at once passed on: a
        threshold already met (on with the sensed current ``i_on`` at or above ``upper``, off
        with ``i_off`` at or below ``lower``) or a timed phase of no length (no delay)."""
        for _ in range(4):
            pending = pending & (((phase == ON_WAIT) & (i_on >= self.upper))
                                 | ((phase == OFF_WAIT) & (i_off <= self.lower))
                                 | (((phase == ON_DELAY) | (phase == OFF_TIMED)) & (edge <= t)))
            if not pending.any():
                break
            phase, edge = self._next(pending, phase, edge, t)
        return phase, edge

    def _next(self, mask, phase, edge, t) -> tuple[np.ndarray, np.ndarray]:
        """The points ``mask`` moved on to their next phase at ``t`` s, its edge (s; ``inf``
        where a threshold ends it)."""
        nxt = np.choose(phase, [ON_DELAY, OFF_WAIT if self.hysteretic else OFF_TIMED, OFF_TIMED, ON_WAIT])
        timed = np.where(phase == OFF_WAIT, t + self.delay, t + self.off_time)
        ends = np.where(nxt == ON_DELAY, t + self.delay, np.where(nxt == OFF_TIMED, timed, np.inf))
        return np.where(mask, nxt, phase), np.where(mask, ends, edge)

    @staticmethod
    def on(phase) -> np.ndarray:
        """The switch's state in ``phase``."""
        return (phase == ON_WAIT) | (phase == ON_DELAY)

    def event(self, phase) -> tuple[np.ndarray, np.ndarray]:
        """``(current_to A, trip_down)`` of a flight in ``phase`` (:func:`~coildrive.model.armature_flight.fly`):
        the upper threshold rising, the lower one falling, else none."""
        return (np.where(phase == ON_WAIT, self.upper, np.where(phase == OFF_WAIT, self.lower, np.inf)),
                phase == OFF_WAIT)


def _sensed(p: ArmatureParams, y, live) -> tuple[np.ndarray, np.ndarray]:
    """``(A with the switch on, A off)``: the sensed current of the states ``y`` (rows of a
    flight) -- with an eddy term the terminal current in each switch state (0 off where the
    freewheel has blocked, not ``live``), on a drooping bus from the bus there; else the
    coil's current."""
    i = p.current(y[0], y[1])
    if p.eddy is None:
        return i, i
    bus = y[5] if p.droops else None
    return p.terminal(i, True, bus=bus), np.where(live, p.terminal(i, False, bus=bus), 0.0)


def comparator_schedule(p: ArmatureParams, t0: float, y0, comparator: Comparator, until: float,
                        rtol: float = 1e-7) -> list:
    """The switch's segments ``(t_end s, on)`` of a current-mode hold from the threshold at
    ``t0`` s (one point ``p``, a linear coil on a stiff bus: simulate's hold; ``y0``: lambda, x, v, q,
    sq there, the armature not yet seated) to the first turn-off after the seat: the
    comparator's flight (:func:`_hold_flights`) to the seat, then the seated coil's closed
    form to the end of that on-time (its delay after the upper threshold), where the seated
    coil's hold (:func:`coildrive.design.hold_current.threshold_hold`) takes over. Raises
    ``ValueError`` where the armature is not seated by ``until`` s or the upper threshold
    is out of the seated coil's reach."""
    from .rl import decay_current, decay_time, rise_time

    log: list = []
    got = _hold_flights(p, np.array([t0], float), np.asarray(y0, float).reshape(-1, 1), np.zeros(1), np.ones(1),
                        np.array([until], float), np.full(1, np.inf), rtol, comparator=comparator, log=log)
    if got["status"][0] != SEATED:
        raise ValueError("the current-mode hold does not carry the armature onto the seat within the "
                         f"window ({until:.4g} s)")
    t_seat = float(got["seat_time"][0])
    y_col = np.asarray(y0, float).reshape(-1, 1)
    out, on = [], bool(Comparator.on(comparator.start(np.array([t0]), *_sensed(p, y_col, np.ones(1, bool)))[0])[0])
    for t, switched, now in log:
        if switched[0] and t[0] <= t_seat:
            out.append((float(t[0]), on))
            on = bool(now[0])
    t, i, phase, edge = t_seat, float(got["seat_current"][0]), int(got["phase"][0]), float(got["phase_edge"][0])
    v, r_on, r_off, v_off = (float(a[0]) for a in (p.v_on, p.r_on, p.r_off, p.v_off))
    ind = p.take([0]).coil_closed   # (with an eddy term the seated EddyCoil: magnetising currents)
    cmp = comparator
    # the thresholds on the sensed current as the magnetising current's (an eddy term's
    # terminal current with the switch on, and off)
    upper, lower = cmp.upper, cmp.lower
    if p.eddy is not None:
        r_e = float(p.eddy[0])
        upper, lower = ((r_on + r_e) * upper - v) / r_e, ((r_off + r_e) * lower + v_off) / r_e
    if phase in (OFF_WAIT, OFF_TIMED):   # the rest of the off-time, then on to the upper threshold
        t1 = edge if phase == OFF_TIMED else t + float(np.ravel(decay_time(lower, i, r_off, v_off, ind))[0]) + cmp.delay
        i = float(np.ravel(decay_current(t1 - t, i, r_off, v_off, ind))[0])
        out.append((t1, False))
        t, phase, edge = t1, ON_WAIT, math.inf
    if phase == ON_WAIT:
        rise = float(np.ravel(rise_time(upper, i, v, r_on, ind))[0])
        if not math.isfinite(rise):
            raise ValueError("the seated coil does not reach the current-mode hold's upper threshold")
        edge = t + rise + cmp.delay
    out.append((edge, True))
    return out


class _Sub:
    """A ``control`` of :func:`boosted_pull_in` seen at the points ``k`` of its own."""

    def __init__(self, control, k):
        self.control, self.k = control, k

    def sample(self, duty):
        return self.control.sample(duty)

    def step(self, j, i):
        return self.control.step(self.k[j], i)


def _hold_flights(p: ArmatureParams, t0, y0, duty, period, until, i_top, rtol: float,
                  control=None, mixed: MixedDecay | None = None, comparator: Comparator | None = None,
                  log: list | None = None) -> dict:
    """The hold after the threshold for points whose armature is open or in flight there
    (``t0`` s, states ``y0``: lambda, x, v, q, sq, and on a drooping main bus its capacitor
    u V) until ``until`` s, all at once: the batched flight
    (:func:`~coildrive.model.armature_flight.fly_mixed`) from PWM edge to PWM edge, the
    seat's bounces as in :func:`~coildrive.model.armature_runs.pull_in`; a point resting
    on the open stop whose hold could start it again (``i_top`` above its start current)
    goes on alone through :func:`~coildrive.model.armature_sim.simulate` (under a
    ``control``, not seated). With a ``control`` each period's duty is its ``step`` from the
    current at the period's conversion (the flight's state there). Returns the
    :class:`PullInBatch` fields of :func:`boosted_pull_in`; on a drooping bus also
    ``seat_bus`` (V at the seat, NaN where not seated) and ``low`` (2 x N: the lowest bus V
    and when, s, up to the seat or ``until``). ``mixed``: each off-time fast for its
    fraction first (the points' fast path ``r_fast``, ``v_fast``), then through ``p``'s.
    ``comparator``: a current-mode hold's thresholds switch it instead (``duty`` and
    ``period`` unused): each flight ends at its phase's edge or its threshold's event; also
    ``phase`` and ``phase_edge`` (s) per point, the comparator's where it seated (an
    armature fallen back to the open stop is taken as not seated, as under a ``control``);
    ``log`` gets ``(t s, switched, on)`` at each of its turns (arrays per point)."""
    n = len(p)
    t = np.asarray(t0, float).copy()
    y = np.asarray(y0, float).copy()
    duty = np.asarray(duty, float).copy()
    t_on = duty * period
    sampled = None
    if control is not None:   # the conversion's moment in the period, and the state there
        at = t + control.sample(duty) * period
        sampled = np.full((y.shape[0], n), np.nan)   # (on a drooping bus six states)
        # with an eddy term the loop reads the terminal current, which depends on the
        # segment the conversion falls in: its switch, off path and freewheel there
        seg = np.zeros((3, n), bool)
    bound = np.maximum(np.asarray(until, float), t)
    lam_stay = p.flux_closed(p.stay_current)
    lam_start = p.flux_open(p.start_current)
    stiff = is_stiff(p, p.opening_force(p.stroke))
    nan = np.full(n, np.nan)
    res = dict(status=np.full(n, STALLED), seat_time=np.full(n, np.inf), seat_current=nan.copy(),
               impact_time=nan.copy(), impact_speed=nan.copy(), dip_current=nan.copy(),
               dip_time=nan.copy(), stall_gap=nan.copy(), bound=bound, bounces=np.zeros(n, int),
               steps=np.zeros(n, int), seat_charge=nan.copy(), seat_square=nan.copy())
    droop = p.droops
    if droop:
        res["seat_bus"] = nan.copy()
        res["low"] = np.stack([y[5].copy(), t.copy()])
    track = dict(low=res["low"], low_until=np.full(n, np.inf)) if droop else {}
    # resting on the open stop at the threshold (it came before the motion): free once
    # the flux passes the start current's (the flight's own first step sees to that)
    on = np.ones(n, bool)
    fast = np.zeros(n, bool)            # in an off-time's fast part (mixed decay)
    fraction = 0.0 if mixed is None else mixed.fraction
    live = np.ones(n, bool)
    cycle = np.zeros(n)                 # the start of the current PWM period, s after t0
    edge = np.minimum(t + t_on, bound)
    if comparator is not None:   # off from the hand-over, as the seated coil's hold
        phase, cedge = comparator.start(t, *_sensed(p, y, live))
        on = Comparator.on(phase)
        edge = np.minimum(cedge, bound)
        res["phase"], res["phase_edge"] = np.zeros(n, int), nan.copy()
    active = np.ones(n, bool)
    alone = np.zeros(n, bool)
    for _ in range(MAX_EDGES):
        if not active.any():
            break
        p_now = p if mixed is None else dataclasses.replace(
            p, r_off=np.where(fast, mixed.r_fast, p.r_off), v_off=np.where(fast, mixed.v_fast, p.v_off))
        before = None if control is None else np.isnan(sampled[0])
        events = {} if comparator is None else dict(zip(("current_to", "trip_down"), comparator.event(phase)))
        fl = fly_mixed(p_now, t, y, edge, active, on, live, stiff, rtol, **track, **events,
                       **({} if control is None else {"query": at, "query_y": sampled}))
        if control is not None:   # (a sample taken in this flight: the segment's state)
            got = before & np.isfinite(sampled[0])
            seg[:, got] = np.stack([on, fast, live])[:, got]
        res["steps"] += np.where(active, fl.steps, 0)
        t = np.where(active, fl.t, t)
        y = np.where(active, fl.y, y)
        seat = active & (fl.end == SEAT)
        first = seat & np.isnan(res["impact_time"])
        res["impact_time"] = np.where(first, t, res["impact_time"])
        res["impact_speed"] = np.where(first, -y[2], res["impact_speed"])
        i_dip = p.current(y[0], 0.0)   # (with an eddy term what the sense sees: the terminal current)
        res["dip_current"] = np.where(first, i_dip if p.eddy is None else p.terminal(i_dip, on), res["dip_current"])
        rebound = p.restitution * np.abs(y[2])
        bounce = (seat & (rebound >= REST_FRACTION * res["impact_speed"]) & (res["bounces"] < MAX_BOUNCES)
                  & (rebound > 0))
        res["bounces"] += bounce
        y[2] = np.where(bounce, rebound, np.where(seat, 0.0, y[2]))
        holds = seat & ~bounce & (y[0] >= lam_stay)
        res["status"] = np.where(holds, SEATED, res["status"])
        res["seat_time"] = np.where(holds, t, res["seat_time"])
        res["seat_current"] = np.where(holds, p.current(y[0], 0.0), res["seat_current"])
        res["seat_charge"] = np.where(holds, y[3], res["seat_charge"])
        res["seat_square"] = np.where(holds, y[4], res["seat_square"])
        if droop:
            res["seat_bus"] = np.where(holds, y[5], res["seat_bus"])
        if comparator is not None:
            res["phase"] = np.where(holds, phase, res["phase"])
            res["phase_edge"] = np.where(holds, cedge, res["phase_edge"])
        active &= ~holds
        opn = active & (fl.end == OPEN)
        y[2] = np.where(opn, 0.0, y[2])
        rests = opn & (y[0] <= lam_start)
        stays = rests & (i_top < p.start_current)
        res["stall_gap"] = np.where(stays, p.stroke, res["stall_gap"])
        if control is not None or comparator is not None:    # fallen back under a closed loop
            # or a comparator: taken as not seated
            res["stall_gap"] = np.where(rests, p.stroke, res["stall_gap"])
            stays = rests
        alone |= rests & ~stays
        active &= ~rests
        live = np.where(active & (fl.end == ZERO), False, live)
        # a PWM edge (or the bound) reached: switch
        at_edge = active & (fl.end == BOUND) & (t >= edge * (1.0 - 1e-15))
        over = at_edge & (t >= bound * (1.0 - 1e-15))
        res["stall_gap"] = np.where(over, y[1], res["stall_gap"])
        active &= ~over
        turn = at_edge & ~over
        if comparator is not None:   # its phase's edge or its threshold reached: the next phase
            turn = (turn | (fl.end == TRIP)) & active
            phase, cedge = comparator.turn(turn, phase, cedge, t, *_sensed(p, y, live))
            was, on = on, Comparator.on(phase)
            if log is not None:
                log.append((t.copy(), turn & (on != was), on.copy()))
            live = np.where(turn & on, True, live)
            edge = np.minimum(np.maximum(cedge, t), bound)
            stuck = active & (fl.end == BOUND) & ~at_edge
            res["stall_gap"] = np.where(stuck, y[1], res["stall_gap"])
            active &= ~stuck
            continue
        t_fast = fraction * (period - t_on)
        off = turn & on & (t_on < period)
        # (the fast part's end: on to the slow part, unless the fast part fills the off-time)
        slow = turn & fast & (t_on + t_fast < period)
        back = turn & ~off & ~slow
        cycle = np.where(back, cycle + period, cycle)
        if control is not None and back.any():   # the next period's duty from its conversion
            j = np.flatnonzero(back)
            taken = np.isfinite(sampled[0, j])
            pj = p.take(j)
            i_s = pj.current(np.where(taken, sampled[0, j], y[0, j]), np.where(taken, sampled[1, j], y[1, j]))
            if p.eddy is not None:   # what the sense carries: the terminal current
                s_on, s_fast, s_live = (np.where(taken, seg[r, j], (on, fast, live)[r][j]) for r in range(3))
                bus = (np.where(taken, sampled[5, j], y[5, j]) if droop else None)
                r_off, v_off = ((pj.r_off, pj.v_off) if mixed is None else
                                (np.where(s_fast, mixed.r_fast[j], pj.r_off),
                                 np.where(s_fast, mixed.v_fast[j], pj.v_off)))
                i_s = np.where(s_on | s_live, pj.terminal(i_s, s_on, r_off, v_off, bus), 0.0)
            duty[j] = control.step(j, i_s)
            t_on = duty * period
            at = np.where(back, t0 + cycle + control.sample(duty) * period, at)
            sampled[:, j] = np.nan
        goes_fast = off & (t_fast > 0)
        on = np.where(off, False, np.where(back, True, on))
        fast = np.where(goes_fast, True, np.where(slow | back, False, fast))
        live = np.where(back, True, live)
        edge = np.where(goes_fast, t0 + cycle + t_on + t_fast,
                        np.where(off | slow, t0 + cycle + period, np.where(back, t0 + cycle + t_on, edge)))
        edge = np.minimum(np.maximum(edge, t), bound)
        stuck = active & (fl.end == BOUND) & ~at_edge     # the step size collapsed
        res["stall_gap"] = np.where(stuck, y[1], res["stall_gap"])
        active &= ~stuck
    res["stall_gap"] = np.where(active, y[1], res["stall_gap"])
    res["dip_time"] = np.where(res["status"] == SEATED, res["impact_time"], np.nan)
    res["dip_current"] = np.where(res["status"] == SEATED, res["dip_current"], np.nan)
    for j in np.flatnonzero(alone):
        _alone(p.take(j), float(t0[j]), y0[:, j], float(duty[j]), float(period[j]), float(bound[j]),
               res, j, rtol, None if mixed is None else mixed.at([j]))
    return res


def _alone(pj: ArmatureParams, t0: float, y0, duty: float, period: float, bound: float, res: dict,
           j: int, rtol: float, mixed: MixedDecay | None = None) -> None:
    """One point's hold from the threshold through :func:`~coildrive.model.armature_sim.simulate`
    (an armature that fell back to the open stop and may start again), into ``res[...][j]``;
    ``mixed`` (that point's): the off-times' fast parts through the fast path."""
    from .armature_sim import simulate

    opened = y0[1] >= pj.stroke[0] and y0[2] == 0.0
    fast = None if mixed is None else dataclasses.replace(pj, r_off=np.atleast_1d(mixed.r_fast).astype(float),
                                                           v_off=np.atleast_1d(mixed.v_fast).astype(float))
    tr = simulate(pj, hold_schedule(t0, bound, duty, period, 0.0 if mixed is None else mixed.fraction),
                  state="open" if opened else "free", start=y0, live=True, t0=t0,
                  stop=lambda r: r.state == "seated", rtol=rtol, points=BUS_SAMPLES if pj.droops else 2,
                  release_params=fast)
    seated = tr.state == "seated"
    ev = tr.events
    res["status"][j] = SEATED if seated else STALLED
    res["seat_time"][j] = ev.get("seat", math.inf) if seated else math.inf
    res["seat_current"][j] = float(tr.current[-1]) if seated else math.nan
    res["impact_time"][j] = ev.get("impact", math.nan)
    res["dip_time"][j] = ev.get("impact", math.nan) if seated else math.nan
    res["dip_current"][j] = ev.get("dip_current", math.nan) if seated else math.nan
    res["stall_gap"][j] = math.nan if seated else float(tr.position[-1])
    res["seat_charge"][j] = float(tr.charge[-1]) if seated else math.nan
    res["seat_square"][j] = float(tr.square[-1]) if seated else math.nan
    if pj.droops:   # (its lowest bus at the samples: BUS_SAMPLES a segment)
        m = int(np.argmin(tr.bus))
        if tr.bus[m] < res["low"][0, j]:
            res["low"][:, j] = tr.bus[m], tr.time[m]
        res["seat_bus"][j] = float(tr.bus[-1]) if seated else math.nan


def window_flight(p: ArmatureParams, pin: PullInBatch, dt: float, rtol: float = 1e-7):
    """The ``dt`` s after a :func:`~coildrive.model.armature_runs.pull_in` run's trip (the
    boost still on: the conversion in which the firmware may see the threshold), flown
    where the armature is in flight at the trip (status TRIPPED, speed not 0) -- its
    bounces on the seat followed as in the pull-in -- until it comes to rest at a stop or
    the window ends. With a bouncing seat (``restitution``) the rebound's motional term
    drives the current up, so no closed-form bound holds over the window while the armature
    may move away from the seat; at rest, or closing, the open coil's rise bounds the rest.
    With an eddy term (``p.eddy``) the flight is the branch's behind the loop's Thevenin pair
    and the highest is the terminal current's, what the sense sees (switched on, ``(V + R_e
    i_m)/(R + R_e)``, ``V`` the boost capacitor's voltage: on an ideal boost it rises with
    the magnetising current ``i_m``, whose highest is tracked and converted).

    Returns ``(flown, highest A, t s, y)`` per point: where flown, the highest coil current
    (terminal current) over the flight (at its accepted steps and its end) and the time and
    state (rows of the run) where it stopped (the window's end, or a rest); elsewhere the
    trip's."""
    n = len(p)
    hit = np.isfinite(pin.trip_time)
    t = np.where(hit, pin.trip_time, 0.0)
    y = np.where(hit, pin.trip_state, 0.0)
    flown = hit & (pin.status == TRIPPED) & (y[2] != 0.0)
    # (the flight tracks the terminal current itself where it depends on the capacitor,
    # else the magnetising current, converted at the end)
    sensed = p.droops and p.eddy is not None
    current = ((lambda z: p.terminal(p.current(z[0], z[1]), True, bus=z[5])) if sensed
               else (lambda z: p.current(z[0], z[1])))
    i_now = current(y)
    peak = np.stack([i_now, t])
    t_end = t + dt
    active = flown.copy()
    on = np.ones(n, bool)
    stiff = is_stiff(p, p.opening_force(p.stroke))
    lam_stay = p.flux_closed(p.stay_current)
    impact = np.array(pin.impact_speed, float)       # (the run's first impact, as the pull-in's)
    bounces = np.array(pin.bounces, int)
    for _ in range(4 * MAX_BOUNCES):
        if not active.any():
            break
        fl = fly_mixed(p, t, y, t_end, active, on, on, stiff, rtol, track=active.copy(), peak=peak)
        t = np.where(active, fl.t, t)
        y = np.where(active, fl.y, y)
        seat = active & (fl.end == SEAT)
        impact = np.where(seat & np.isnan(impact), -y[2], impact)
        rebound = p.restitution * np.abs(y[2])
        bounce = seat & (rebound >= REST_FRACTION * impact) & (bounces < MAX_BOUNCES) & (rebound > 0)
        bounces += bounce
        opn = active & (fl.end == OPEN)
        y[2] = np.where(bounce, rebound, np.where(seat | opn, 0.0, y[2]))
        lifts = seat & ~bounce & (y[0] < lam_stay)   # (too little flux to stay: flies on)
        active &= bounce | lifts
    high = np.maximum(peak[0], current(y))
    if p.eddy is not None and not sensed:
        high = p.terminal(high, True)
    return flown, high, t, y


def curve_window(p: ArmatureParams, pin: PullInBatch, dt: float, rtol: float = 1e-7):
    """The ``dt`` s after a :func:`~coildrive.model.armature_runs.pull_in` run's trip from
    the boost (its capacitor a state, or an ideal boost) for a coil with curves
    (``p.curves``), the boost still on, flown exactly at every point that trips: in flight
    (bounces as in the pull-in), at rest on a stop held there (the open stop until the flux
    reaches the start current's, the seat for good unless its flux is below the stay
    current's). No closed-form rise bounds a saturating coil's current over the window (its
    incremental inductance falls as it saturates, the seated curve's at a current may lie
    below the open one's), so the window is integrated, not bounded. With an eddy term
    (``p.eddy``) the flight is the magnetising branch's behind the loop's Thevenin pair and
    the highest is the terminal current's, what the sense sees (from the capacitor tracked
    as it is; from an ideal boost the highest magnetising current's, converted: switched on
    the terminal current rises with it).

    Returns ``(highest A, t s, y)`` per point: the highest coil (terminal) current over the
    window (at its accepted steps and its end) and the state (rows of the run) at its end;
    where the trip never comes the trip's (NaN) state and ``nan``."""
    n = len(p)
    hit = np.isfinite(pin.trip_time)
    t = np.where(hit, pin.trip_time, 0.0)
    y = np.where(hit, pin.trip_state, 0.0)
    sensed = p.droops and p.eddy is not None   # (as window_flight's)
    current = ((lambda z: p.terminal(p.current(z[0], z[1]), True, bus=z[5])) if sensed
               else (lambda z: p.current(z[0], z[1])))
    peak = np.stack([current(y), t])
    t_end = t + dt
    lam_start = p.flux_open(p.start_current)
    lam_stay = p.flux_closed(p.stay_current)
    on = np.ones(n, bool)
    stiff = is_stiff(p, p.opening_force(p.stroke))
    rest = hit & (y[2] == 0.0)
    at_open = rest & (y[1] >= p.stroke) & (y[0] < lam_start)
    held = at_open | (rest & (y[1] <= 0.0))
    impact = np.array(pin.impact_speed, float)
    bounces = np.array(pin.bounces, int)
    active = hit.copy()
    for _ in range(8 * MAX_BOUNCES):
        if not active.any():
            break
        fl = fly_mixed(p, t, y, t_end, active, on, on, stiff, rtol, track=active.copy(), peak=peak,
                       held=held, flux_to=np.where(at_open, lam_start, np.inf))
        t = np.where(active, fl.t, t)
        y = np.where(active, fl.y, y)
        starts = active & held & (fl.end == START)           # off the open stop
        seat = active & ~held & (fl.end == SEAT)
        impact = np.where(seat & np.isnan(impact), -y[2], impact)
        rebound = p.restitution * np.abs(y[2])
        bounce = seat & (rebound >= REST_FRACTION * impact) & (bounces < MAX_BOUNCES) & (rebound > 0)
        bounces += bounce
        rests = seat & ~bounce & (y[0] >= lam_stay)          # on the seat for the rest of it
        opn = active & ~held & (fl.end == OPEN)
        stays = opn & (y[0] <= lam_start)                    # back on the open stop
        y[2] = np.where(bounce, rebound, np.where(seat | opn, 0.0, y[2]))
        held = np.where(starts, False, held | rests | stays)
        at_open = np.where(starts, False, at_open | stays)
        active &= ~(fl.end == BOUND) | starts
    high = np.maximum(peak[0], current(y))
    if p.eddy is not None and not sensed:
        high = p.terminal(high, True)
    nan = np.full(n, np.nan)
    return np.where(hit, high, nan), np.where(hit, t, nan), np.where(hit, y, np.nan)


def seated_on(p: ArmatureParams, y, dt) -> np.ndarray:
    """The run's state (rows: lambda, x, v, q, sq and, from a capacitor, its u) ``dt`` s on
    from ``y`` with the armature at rest on the seat and the switch on: the seated coil's
    closed form (:func:`coildrive.model.supply.state_from` and
    :func:`~coildrive.model.supply.integrals_from` from the boost capacitor, the RL rise
    from an ideal boost; ``q`` and ``sq`` accumulated). A linear coil (with an eddy term
    ``lambda`` is the branch's, ``q`` and ``sq`` the terminal current's, and a seventh row
    of ``y``, the eddy loss of :func:`~coildrive.model.armature_runs.pull_in`'s
    ``eddy_loss``, accumulates :func:`~coildrive.model.supply.eddy_loss_from`): a latching
    coil's set pulse from the boost, seated at its threshold, on for the tick until the
    driver sees it (:mod:`coildrive.design.latch_boost`). Over the open and seated curves
    (``p.curves``: a boost capacitor or an ideal boost; an eddy term's loss row too) there is
    no closed form: the seated coil held on the seat is flown for ``dt`` s
    (:func:`_held_on_seat`)."""
    from .rl import rise_current, rise_integrals

    y = np.asarray(y, float)
    dt = np.broadcast_to(np.asarray(dt, float), y[0].shape)
    if p.curves is not None:
        return _held_on_seat(p, y, dt)
    i0 = p.current(y[0], 0.0)
    if p.droops:
        b = p.bus(False)
        q, sq = bus_model.integrals_from(dt, b, i0, y[5])
        i, u = bus_model.state_from(dt, b, i0, y[5])
        extra = [u] + ([y[6] + bus_model.eddy_loss_from(dt, b, i0, y[5])] if y.shape[0] > 6 else [])
    else:
        q, sq = rise_integrals(dt, i0, p.v_on, p.r_on, p.coil_closed)
        i, extra = rise_current(dt, i0, p.v_on, p.r_on, p.coil_closed), []
    zero = np.zeros(np.shape(i))
    return np.stack([p.flux_closed(i), zero, zero, y[3] + q, y[4] + sq] + extra)


def _held_on_seat(p: ArmatureParams, y, dt, rtol: float = 1e-7) -> np.ndarray:
    """A coil with curves on the boost capacitor: the run's state (rows lambda, x, v, q, sq,
    u) ``dt`` s per point on from ``y``, the seated coil held on the seat and switched on
    (the flight integrator, ``held``)."""
    n = len(p)
    y0 = np.array(y, float)
    y0[1], y0[2] = 0.0, 0.0
    ones = np.ones(n, bool)
    fl = fly_mixed(p, np.zeros(n), y0, np.asarray(dt, float), ones, ones, ones,
                   is_stiff(p, p.opening_force(p.stroke)), rtol, held=ones)
    return fl.y


def seated_in_peak(pin: PullInBatch) -> np.ndarray:
    """Where the armature of a :func:`boosted_pull_in` rests on the seat by the end of the
    peak (the threshold), as opposed to in the hold."""
    return seated_in_peak_of(pin.status, pin.seat_time, pin.trip_time)


def boost_energy(p_boost: ArmatureParams, state) -> np.ndarray:
    """J the boost has given at a run's ``state`` (rows of the run): ``1/2 C_b (V_b^2 -
    u^2)`` with the capacitor's ``u``, an ideal boost ``V_b int i dt``."""
    q = state[3]
    if p_boost.droops:
        return 0.5 * p_boost.capacitance * (p_boost.v_on**2 - state[5]**2)
    return p_boost.v_on * q


def run_eddy_loss(p_boost: ArmatureParams, t, state) -> np.ndarray:
    """J the eddy resistance has taken at a run's ``state`` ``t`` s after switch-on, the
    switch on throughout (rows of the run; ``p_boost`` with an eddy term): from a capacitor
    the seventh row (:func:`~coildrive.model.armature_runs.pull_in`'s ``eddy_loss``); from
    an ideal boost, whose stiff ``V_b`` puts ``V_b - R_on i_t`` across the branch at every
    instant, in flight or at rest: :func:`coildrive.model.eddy.stiff_loss` of the run's own
    ``q``, ``sq`` (the terminal current's)."""
    if p_boost.droops:
        return state[6]
    return stiff_loss(t, state[3], state[4], p_boost.v_on, p_boost.r_on, p_boost.eddy)
