"""Pull-in, release and late-release runs of the moving armature over many points.

Each run integrates the equations of :mod:`coildrive.model.armature` with the batched
steppers of :mod:`coildrive.model.armature_flight` from stop to stop, follows the bounces
on the seat, and reports the moments (seat, dip, unlatch, open, zero current), the
charge and square integrals for the energies, and an outcome code per point.

Units: SI throughout (V, A, ohm, H, m, kg, N, s).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .armature import (BOUND, BOUND_FACTOR, MAX_BOUNCES, NO_START, NOT_OPEN, OPEN, OPENED, REST_FRACTION, SEAT,
                       SEATED, STALLED, START, TRIP, TRIPPED, ZERO, ArmatureParams, time_bound)
from .armature_flight import fly_mixed, is_stiff
from .rl import decay_current, decay_integrals, decay_time, rise_current, rise_integrals, rise_time
from . import supply as bus_model

# --------------------------------------------------------------------------- pull-in
#: With curves on a drooping bus: the least force (a fraction of the opening force at the
#: open stop) the pull-in's time bound assumes (:func:`pull_in`).
FORCE_FLOOR = 1e-3


@dataclass(frozen=True)
class PullInBatch:
    """Pull-in from rest at the open stop with the switch held on (arrays over points).

    ``status``: SEATED, NO_START (the coil never reaches the start current) or STALLED
    (not seated within the bound; ``stall_gap_m`` says where it was). Times in s from
    switch-on; currents in A. ``start_*``: the armature leaves the open stop.
    ``impact_time``: first touch of the seat; ``dip_current``/``dip_time``: the current
    at that moment, where the motional back-EMF has pulled it down to its local
    minimum; ``hump_current`` is the largest current before it (``dip_depth`` =
    hump - dip, 0 when the current never fell); with an eddy term those two are the
    terminal current's (what the sense resistor sees; on a drooping bus it depends on the
    bus too, and the hump is its highest from the motion's start on), every other
    current the magnetising current's. ``seat_time``: at rest on the seat (after
    any bounces). ``peak_end_current``: the current at the asked time (end of the peak
    phase). ``steps``: integrator steps taken. ``seat_charge``/``seat_square``: ``int i dt``
    A*s and ``int i^2 dt`` A^2*s from switch-on to ``seat_time`` (NaN where not seated).

    On a drooping bus (``p.droops``; else ``None``): ``lowest_bus`` V and
    ``lowest_bus_time`` s, the capacitor's lowest over ``[0, peak_time]`` (over the run
    without a ``peak_time``), and ``seat_bus`` V, the capacitor when the armature comes
    to rest on the seat.
    """

    status: np.ndarray
    start_current: np.ndarray
    start_time: np.ndarray
    impact_time: np.ndarray
    impact_speed: np.ndarray
    dip_current: np.ndarray
    dip_time: np.ndarray
    hump_current: np.ndarray
    hump_time: np.ndarray
    seat_time: np.ndarray
    seat_current: np.ndarray
    bounces: np.ndarray
    stall_gap: np.ndarray
    peak_end_current: np.ndarray
    bound: np.ndarray
    steps: np.ndarray
    lowest_bus: np.ndarray | None = None
    lowest_bus_time: np.ndarray | None = None
    seat_bus: np.ndarray | None = None
    seat_charge: np.ndarray | None = None
    seat_square: np.ndarray | None = None
    #: With a ``trip`` current (a boosted peak's threshold): when the coil's current first
    #: reaches it (s; ``inf``: never within the run) and the state then (rows of the run:
    #: lambda, x, v, q, sq and the capacitor's u on a drooping bus, and with ``eddy_loss``
    #: the eddy resistance's ``R_e int (i_m - i_t)^2 dt``; NaN where never).
    #: ``status`` is TRIPPED where that came before the seat (the armature open or in
    #: flight: the run ends there), else as without a trip (a seated point's trip is the
    #: seated coil's closed-form rise from the seat).
    trip_time: np.ndarray | None = None
    trip_state: np.ndarray | None = None
    #: A boosted pull-in's hold on a drooping main bus
    #: (:func:`coildrive.model.armature_boost.boosted_pull_in`): False where the seated
    #: coil's PWM orbit had not repeated within its run (its ``lowest_bus`` the lowest so far).
    bus_settled: np.ndarray | None = None
    #: With a ``trip`` over curves (``p.curves``, the boost capacitor): the seated coil's
    #: highest current (A) from the seat on while it is held there until the trip (over the
    #: run's bound plus the capacitor loop's time scale where the trip never comes), at the
    #: integrator's accepted steps and its end; NaN where the run does not seat.
    seated_top: np.ndarray | None = None
    #: On a drooping bus with a ``peak_time`` (else ``None``): the capacitor (V) then, where
    #: the pulse ends (a latching coil's clamped decay starts from it, with
    #: ``peak_end_current``).
    peak_end_bus: np.ndarray | None = None

    @property
    def dip_depth(self) -> np.ndarray:
        return np.where(np.isfinite(self.dip_current), np.maximum(self.hump_current - self.dip_current, 0.0), np.nan)


def bus_time_scale(p: ArmatureParams) -> np.ndarray:
    """The drooping bus's own time scale (s): ``R_s C``; a capacitor with no source
    (``R_s = inf``, a boost capacitor) the loop's ``R_on C + sqrt(L_c C)``."""
    none = np.isinf(p.source_resistance)
    return np.where(none, p.r_on * p.capacitance + np.sqrt(p.l_closed * p.capacitance),
                    np.where(none, 0.0, p.source_resistance) * p.capacitance)


def pull_in(p: ArmatureParams, peak_time=None, rtol: float = 1e-7, max_rounds: int = 4 * MAX_BOUNCES,
            trip=None, eddy_loss: bool = False) -> PullInBatch:
    """Switch on at t = 0 from rest at the open stop and follow the armature until seated.

    The rise before motion is closed form with the open inductance (the armature rests
    on the open stop while the force is below spring preload + load); the motion is
    integrated by :func:`fly`. ``peak_time`` (s, scalar or per point) asks for the
    current at that time.

    On a drooping bus (``p.droops``) the bulk capacitor's voltage is a sixth state: the
    rise before motion and the seated coil are the closed form of
    :mod:`coildrive.model.supply` (open, then seated inductance, from the state they
    start with), the flight integrates it with the motion; the lowest bus up to
    ``peak_time`` is tracked through all three. A coil with curves (``p.curves``) has no
    closed form there: its resting stretches (the rise before the motion, a wait on the
    open stop, the seat until ``peak_time``) are integrated by the same batched
    integrator with the armature held at its stop (``fly(held=...)``).

    ``trip`` (A, per point): a boosted peak's threshold on the coil's
    current (with an eddy term the terminal current, what the sense sees) -- the run ends
    where it first reaches it (before the
    motion: the open coil's closed form; in flight: the integrator's ``current_to``
    event) with status TRIPPED; where the armature seats first, the trip is the seated
    coil's closed-form rise from the seat (``trip_time``, ``trip_state``). ``p`` is then
    the peak's source: the boost (``v_on``; ``r_on`` with the boost path; a capacitor:
    ``capacitance`` with ``source_resistance = inf``, no source behind it). A coil with
    curves: from the boost capacitor its resting stretches to the trip are the held flights
    (:func:`_held_rise` to the lower of the start's and the trip's open flux,
    :func:`_seated_trip_held` on the seat to the trip's seated flux; with an eddy term the
    terminal current, which depends on the capacitor too, is the held flights' event); from
    an ideal boost (a stiff source) they are the curve's closed-form rise
    (:class:`~coildrive.model.flux.FluxCoil` through :func:`_rise_to`; with an eddy term the
    branch's behind the loop's Thevenin pair), as a linear coil's.

    ``eddy_loss`` (an eddy term on a drooping bus or a boost capacitor): the run carries a
    seventh state, the eddy resistance's loss ``R_e int (i_m - i_t)^2 dt`` J
    (``trip_state``'s last row): the flight integrates it
    (:class:`~coildrive.model.armature_flight._Rhs`), a linear coil's resting stretches add
    :func:`coildrive.model.supply.eddy_loss_from` of their closed form (a coil with curves:
    flown, the flights integrate it there too).
    """
    n = len(p)
    droop = p.droops
    curved = droop and p.curves is not None
    if eddy_loss and (p.eddy is None or not droop):
        raise ValueError("eddy_loss: an eddy term on a drooping bus or a boost capacitor")
    i_start = p.start_current
    l_open = p.coil_open
    want = None if peak_time is None else np.broadcast_to(np.asarray(peak_time, float), (n,)).copy()
    query_y = np.full((7 if eddy_loss else 6 if droop else 5, n), np.nan)
    low = low_until = None
    steps = np.zeros(n, int)
    if curved:
        # the time bound's force: the curves' at the larger of the steady current and the
        # small-signal bus's first maximum, floored at FORCE_FLOOR x the opening force (a
        # start on the current's overshoot alone: a finite, generous bound)
        i_inf = np.maximum(p.v_on / (p.r_on + p.source_resistance), bus_model.top_current(p.bus(True)))
        f_inf = np.maximum(p.closing_force(p.flux_open(i_inf)) - p.opening_force(p.stroke),
                           FORCE_FLOOR * p.opening_force(p.stroke))
        stiff = is_stiff(p, f_inf)
        low_until = np.full(n, np.inf) if want is None else want
        low = np.stack([p.v_on.astype(float), np.zeros(n)])
        lam_to = p.flux_open(p.start_current)
        if trip is not None:   # the threshold first where the open coil reaches it on the stop
            trip = np.broadcast_to(np.asarray(trip, float), (n,))
            if p.eddy is None:   # (the coil's current is the curve's at the flux)
                lam_trip = p.flux_open(trip)
                first_trip = lam_trip < lam_to
                lam_to = np.minimum(lam_to, lam_trip)
        t_start, q0, s0, u_start, st, y_held, code = _held_rise(
            p, i_inf, stiff, rtol, want, query_y, low, low_until, lam_to,
            trip if trip is not None and p.eddy is not None else None, eddy_loss)
        loss0 = np.where(np.isfinite(t_start), y_held[6], 0.0) if eddy_loss else None
        steps += st
        if trip is not None:
            if p.eddy is not None:   # (the terminal current depends on the bus too: an event)
                first_trip = code == TRIP
            held_trip = first_trip & np.isfinite(t_start)
            trip_held = (np.where(held_trip, t_start, np.inf), np.where(held_trip, y_held, np.nan))
            t_start = np.where(first_trip, np.inf, t_start)   # (it never starts within the run)
        moves = np.isfinite(t_start)
        b_open = None
    elif droop:
        b_open = p.bus(True)
        i_inf = bus_model.top_current(b_open)   # (the time bound's force: the most it drives)
        t_start = bus_model.rise_time(i_start, b_open)
        moves = np.isfinite(t_start)
        t_up = np.where(moves, t_start, 0.0)
        q0, s0 = bus_model.integrals_from(t_up, b_open, 0.0, p.v_on)
        u_start = bus_model.state(t_up, b_open)[1]
        loss0 = bus_model.eddy_loss_from(t_up, b_open, 0.0, p.v_on) if eddy_loss else None
    else:
        i_inf = p.v_on / p.r_on
        moves = i_inf > i_start
        t_start = np.where(moves, rise_time(np.where(moves, i_start, 0.0), 0.0, p.v_on, p.r_on, l_open), np.inf)
        q0, s0 = rise_integrals(np.where(moves, t_start, 0.0), 0.0, p.v_on, p.r_on, l_open)
    lam_start = p.flux_open(i_start)
    lam_stay = p.flux_closed(p.stay_current)
    if curved:
        t_start = np.where(moves, t_start, np.inf)
    rows = [np.where(moves, lam_start * (1.0 + 1e-12), 0.0), p.stroke.copy(), np.zeros(n), q0, s0]
    y = np.stack(rows + ([u_start] if droop else []) + ([loss0] if eddy_loss else []))
    t = np.where(moves, t_start, 0.0)
    if not curved:
        f_inf = p.closing_force(p.flux_open(i_inf)) - p.opening_force(p.stroke)
    bound = np.where(moves, time_bound(t_start, p.l_closed, p.r_on, p.mass, p.stroke, p.damping, f_inf), np.inf)
    if droop:   # the bus's own time scale too
        bound = bound + BOUND_FACTOR * bus_time_scale(p)
    status = np.where(moves, -1, NO_START)
    nan = np.full(n, np.nan)
    trip_time = trip_y = None
    if trip is not None:
        trip = np.broadcast_to(np.asarray(trip, float), (n,))
        trip_time, trip_y = (trip_held if curved else
                             _early_trip(p, trip, np.where(moves, t_start, np.inf), eddy_loss))
        early = np.isfinite(trip_time)
        status = np.where(early, TRIPPED, status)
    impact_time, impact_speed, dip_current = nan.copy(), nan.copy(), nan.copy()
    seat_time = np.full(n, np.inf)
    seat_current = nan.copy()
    seat_q, seat_s, seat_l = nan.copy(), nan.copy(), nan.copy()
    stall_gap = np.where(moves, np.nan, p.stroke)
    bounces = np.zeros(n, int)
    # the running highest current (with an eddy term on a drooping bus the terminal
    # current, which depends on the bus too: tracked as it is, from the motion's start)
    sensed = droop and p.eddy is not None
    peak = np.stack([np.where(moves, p.terminal(i_start, True, bus=u_start) if sensed else i_start, 0.0),
                     np.where(moves, t_start, 0.0)])
    if droop and not curved:
        low_until = np.full(n, np.inf) if want is None else want
        early = ~moves | (low_until < t_start)   # the peak ends in the rise before motion
        # (a coil that never moves, with no peak end: the bus's first minimum, or for ever
        # towards v_ss when it has none)
        ever = np.isfinite(low_until) | np.isfinite(b_open.turn_time)
        v_early, t_early = bus_model.lowest_bus(np.where(early & ever, low_until, 0.0), b_open)
        v_early, t_early = np.where(ever, v_early, b_open.v_ss), np.where(ever, t_early, np.inf)
        low = np.stack([np.where(early, v_early, u_start), np.where(early, t_early, t_start)])
    seat_bus = np.full(n, np.nan) if droop else None
    seat_y = np.full_like(y, np.nan) if curved else None
    active = moves.copy() if trip is None else moves & (status != TRIPPED)
    on = np.ones(n, bool)
    live = np.ones(n, bool)
    if not curved:
        stiff = is_stiff(p, np.where(moves, f_inf, 1.0))
    for _ in range(max_rounds):
        if not active.any():
            break
        fl = fly_mixed(p, t, y, bound, active, on, live, stiff, rtol, query=want, query_y=query_y,
                 track=active & np.isnan(impact_time), peak=peak, low=low, low_until=low_until,
                 current_to=trip)
        steps += fl.steps
        t = np.where(active, fl.t, t)
        y = np.where(active, fl.y, y)
        if trip is not None:   # the threshold before the seat: the peak ends here
            hit = active & (fl.end == TRIP)
            status = np.where(hit, TRIPPED, status)
            trip_time = np.where(hit, t, trip_time)
            trip_y = np.where(hit, y, trip_y)
            active = active & ~hit
        lam, x, v = y[0], y[1], y[2]
        seat = active & (fl.end == SEAT)
        first = seat & np.isnan(impact_time)
        impact_time = np.where(first, t, impact_time)
        impact_speed = np.where(first, -v, impact_speed)
        dip_current = np.where(first, p.terminal(p.current(lam, 0.0), True, bus=y[5]) if sensed
                               else p.current(lam, 0.0), dip_current)
        rebound = p.restitution * np.abs(v)
        bounce = seat & (rebound >= REST_FRACTION * impact_speed) & (bounces < MAX_BOUNCES) & (rebound > 0)
        bounces += bounce
        y[2] = np.where(bounce, rebound, np.where(seat, 0.0, y[2]))
        rest = seat & ~bounce
        holds = rest & (lam >= lam_stay)
        status = np.where(holds, SEATED, status)
        seat_time = np.where(holds, t, seat_time)
        seat_current = np.where(holds, p.current(lam, 0.0), seat_current)
        if droop:
            seat_bus = np.where(holds, y[5], seat_bus)
        if curved:
            seat_y = np.where(holds, y, seat_y)
        seat_q, seat_s = np.where(holds, y[3], seat_q), np.where(holds, y[4], seat_s)
        if eddy_loss:
            seat_l = np.where(holds, y[6], seat_l)
        active = active & ~holds
        # At the open stop with the force still too weak: rest there until the current
        # (closed form, open inductance) reaches the start current again.
        opn = active & (fl.end == OPEN)
        if opn.any():
            y[2] = np.where(opn, 0.0, y[2])
            stuck = opn & (lam <= lam_start)
            if stuck.any() and curved:   # no closed form: held on the open stop until the start flux
                # (no query: a peak ending in the wait is given no current, as on the linear
                # coil -- the design then takes the worst case)
                fh = fly_mixed(p, t, y, bound, stuck, on, live, stiff, rtol, low=low, low_until=low_until,
                               held=np.ones(n, bool), flux_to=lam_start)
                steps += np.where(stuck, fh.steps, 0)
                reach = stuck & (fh.end == START)
                status = np.where(stuck & ~reach, STALLED, status)
                stall_gap = np.where(stuck & ~reach, p.stroke, stall_gap)
                active = active & ~(stuck & ~reach)
                t = np.where(stuck, fh.t, t)
                y = np.where(stuck, fh.y, y)
                y[0] = np.where(reach, lam_start * (1.0 + 1e-12), y[0])
            elif stuck.any() and droop:
                i_now = p.current(lam, p.stroke)
                u_now = y[5]
                dt = bus_model.time_to(i_start, b_open, np.minimum(i_now, i_start), u_now,
                                       np.maximum(bound - t, 0.0))
                dt = np.where(stuck & np.isfinite(dt), dt, np.where(stuck, np.maximum(bound - t, 0.0), 0.0))
                dq, ds = bus_model.integrals_from(dt, b_open, i_now, u_now)
                v_low, t_low = bus_model.lowest_from(np.minimum(dt, np.maximum(low_until - t, 0.0)),
                                                     b_open, i_now, u_now)
                lower = stuck & (t <= low_until) & (v_low < low[0])
                low[0] = np.where(lower, v_low, low[0])
                low[1] = np.where(lower, t + t_low, low[1])
                i_new, u_new = bus_model.state_from(dt, b_open, i_now, u_now)
                reach = stuck & (i_new >= i_start * (1.0 - 1e-9))
                # where the current never gets back to the start current: stalled open
                status = np.where(stuck & ~reach, STALLED, status)
                stall_gap = np.where(stuck & ~reach, p.stroke, stall_gap)
                active = active & ~(stuck & ~reach)
                t = np.where(stuck, t + dt, t)
                y[0] = np.where(reach, lam_start * (1.0 + 1e-12), np.where(stuck, p.flux_open(i_new), y[0]))
                y[3] = np.where(stuck, y[3] + dq, y[3])
                y[4] = np.where(stuck, y[4] + ds, y[4])
                if eddy_loss:
                    y[6] = np.where(stuck, y[6] + bus_model.eddy_loss_from(dt, b_open, i_now, u_now), y[6])
                y[5] = np.where(stuck, u_new, y[5])
            elif stuck.any():
                i_now = p.current(lam, p.stroke)
                dt = rise_time(i_start, np.minimum(i_now, i_start), p.v_on, p.r_on, l_open)
                dq, ds = rise_integrals(np.where(stuck, dt, 0.0), i_now, p.v_on, p.r_on, l_open)
                t = np.where(stuck, t + dt, t)
                y[0] = np.where(stuck, lam_start * (1.0 + 1e-12), y[0])
                y[3] = np.where(stuck, y[3] + dq, y[3])
                y[4] = np.where(stuck, y[4] + ds, y[4])
        ended = active & (fl.end == BOUND)
        status = np.where(ended, STALLED, status)
        stall_gap = np.where(ended, x, stall_gap)
        active = active & ~ended
    status = np.where(status < 0, STALLED, status)
    stall_gap = np.where((status == STALLED) & np.isnan(stall_gap), y[1], stall_gap)
    seated = status == SEATED
    seated_top = None
    if trip is not None:
        if curved:
            trip_time, trip_y, st, seated_top = _seated_trip_held(p, trip, seated, seat_time, seat_y, bound,
                                                                  stiff, rtol, trip_time, trip_y)
            steps += st
        else:
            trip_time, trip_y = _seated_trip(p, trip, seated, seat_time, seat_current, seat_bus, seat_q,
                                             seat_s, trip_time, trip_y, seat_l if eddy_loss else None)
    dip_time = np.where(seated, impact_time, np.nan)
    dip_current = np.where(seated, dip_current, np.nan)
    hump = np.where(seated, np.maximum(peak[0], dip_current), np.nan)
    if p.eddy is not None and not sensed:   # the dip as the sense resistor sees it: the terminal current
        dip_current, hump = p.terminal(dip_current, True), p.terminal(hump, True)
    # current at the end of the peak phase
    peak_bus = None
    if want is None:
        peak_end = np.full(n, np.nan)
    elif droop:
        peak_end, low, peak_bus = _droop_peak_end(p, want, t_start, moves, seated, seat_time, seat_current,
                                                  seat_bus, query_y, low, b_open, seat_y, stiff, rtol)
    else:
        before = want < np.where(moves, t_start, np.inf)
        after = seated & (want >= seat_time)
        i_seat = np.where(seated, seat_current, 0.0)
        peak_end = np.where(
            before, rise_current(want, 0.0, p.v_on, p.r_on, l_open),
            np.where(after, rise_current(np.where(after, want - seat_time, 0.0), i_seat, p.v_on,
                                         p.r_on, p.coil_closed),
                     p.current(query_y[0], query_y[1])))
    return PullInBatch(status=status, start_current=i_start, start_time=t_start,
                       impact_time=np.where(seated, impact_time, np.nan), impact_speed=impact_speed,
                       dip_current=dip_current, dip_time=dip_time, hump_current=hump,
                       hump_time=np.where(seated, peak[1], np.nan), seat_time=seat_time,
                       seat_current=seat_current, bounces=bounces, stall_gap=stall_gap,
                       peak_end_current=peak_end, bound=bound, steps=steps,
                       lowest_bus=None if low is None else low[0],
                       lowest_bus_time=None if low is None else low[1], seat_bus=seat_bus,
                       seat_charge=seat_q, seat_square=seat_s, trip_time=trip_time, trip_state=trip_y,
                       seated_top=seated_top, peak_end_bus=peak_bus)


def _early_trip(p: ArmatureParams, trip, t_start, eddy_loss: bool = False):
    """``(s, state)``: where the open coil's closed-form rise reaches ``trip`` A before the
    motion's start ``t_start`` s, when and the state then (rows of :func:`pull_in`'s run;
    ``eddy_loss``: the eddy loss's too); ``inf`` and NaN elsewhere."""
    n = len(p)
    t, y = _rise_to(p, True, trip, np.zeros(n), p.v_on.astype(float), eddy_loss)
    early = np.isfinite(t) & (t <= t_start)
    return np.where(early, t, np.inf), np.where(early, y, np.nan)


def _seated_trip(p: ArmatureParams, trip, seated, seat_time, seat_current, seat_bus, seat_q, seat_s,
                 trip_time, trip_y, seat_loss=None):
    """:func:`_early_trip`'s figures completed where the armature seated before the trip:
    the seated coil's closed-form rise from the seat's state to ``trip`` A (``inf`` where it
    never gets there; ``seat_loss``: the eddy loss at the seat, carried on)."""
    if not seated.any():
        return trip_time, trip_y
    i0 = np.where(seated, seat_current, 0.0)
    u0 = np.where(seated, seat_bus, p.v_on) if p.droops else p.v_on.astype(float)
    dt, y = _rise_to(p, False, trip, i0, u0, seat_loss is not None)
    ok = seated & np.isfinite(dt)
    y[3] = y[3] + np.where(ok, seat_q, 0.0)
    y[4] = y[4] + np.where(ok, seat_s, 0.0)
    if seat_loss is not None:
        y[6] = y[6] + np.where(ok, seat_loss, 0.0)
    return np.where(ok, seat_time + dt, trip_time), np.where(ok, y, trip_y)


def _seated_trip_held(p: ArmatureParams, trip, seated, seat_time, seat_y, bound, stiff, rtol: float,
                      trip_time, trip_y):
    """:func:`_seated_trip` for a coil with curves on the boost capacitor: the seated coil
    held on the seat (the flight integrator, ``held``) from the seat's state ``seat_y``
    until its flux reaches the seated curve's at ``trip`` A (the current at the seat is
    ``i_c(psi)``: the flux is the event; with an eddy term the terminal current, which
    depends on the capacitor too, is the event), within ``bound`` s from switch-on plus the
    capacitor loop's own time scale; ``inf`` where never. Returns ``(trip_time, trip_y,
    steps, the highest current over the flight A)`` (:attr:`PullInBatch.seated_top`)."""
    n = len(p)
    steps = np.zeros(n, int)
    if not seated.any():
        return trip_time, trip_y, steps, np.full(n, np.nan)
    t0 = np.where(seated, seat_time, 0.0)
    y0 = np.where(seated, seat_y, 0.0)
    y0[1], y0[2] = 0.0, 0.0
    end = t0 + np.where(np.isfinite(bound), bound, 0.0) + BOUND_FACTOR * bus_time_scale(p)
    ones = np.ones(n, bool)
    # the highest: with an eddy term the terminal current (it depends on the capacitor too:
    # the flight tracks it so)
    current = ((lambda z: p.terminal(p.current(z[0], 0.0), True, bus=z[5])) if p.eddy is not None
               else (lambda z: p.current(z[0], 0.0)))
    peak = np.stack([current(y0), t0])
    # the stop: the seated flux of the trip current; with an eddy term the terminal current
    to = dict(flux_to=p.flux_closed(trip)) if p.eddy is None else dict(current_to=trip)
    fl = fly_mixed(p, t0, y0, end, seated, ones, ones, stiff, rtol, held=ones, track=seated.copy(), peak=peak,
                   **to)
    ok = seated & (fl.end == (START if p.eddy is None else TRIP))
    top = np.where(seated, np.maximum(peak[0], current(fl.y)), np.nan)
    return (np.where(ok, fl.t, trip_time), np.where(ok, fl.y, trip_y), np.where(seated, fl.steps, 0), top)


def _rise_to(p: ArmatureParams, open_: bool, trip, i0, u0, eddy_loss: bool = False):
    """``(s, state)``: the armature resting on the open stop (``open_``) or the seat, the
    switch on from the magnetising current ``i0`` A (and on a drooping bus the capacitor at
    ``u0`` V): when the sensed current (with an eddy term the terminal current) first
    reaches ``trip`` A (``inf`` where never) and the run's state then (``q``, ``sq`` from
    this start; 0 rows where never). Closed form: :mod:`coildrive.model.supply` on a
    drooping bus (or a boost capacitor), :mod:`coildrive.model.rl` (an eddy term's
    Thevenin pair) on a stiff one. ``eddy_loss``: a last row, the eddy resistance's loss over
    it (a drooping bus or a boost capacitor: :func:`coildrive.model.supply.eddy_loss_from`)."""
    n = len(p)
    coil = p.coil_open if open_ else p.coil_closed
    if p.droops:
        b = p.bus(open_)
        t = bus_model.time_to(trip, b, i0, u0, np.full(n, np.inf), sensed=p.eddy is not None)
        tt = np.where(np.isfinite(t), t, 0.0)
        q, s = bus_model.integrals_from(tt, b, i0, u0)
        i_m, u = bus_model.state_from(tt, b, i0, u0)
        extra = [u] + ([bus_model.eddy_loss_from(tt, b, i0, u0)] if eddy_loss else [])
    else:
        target = trip
        if p.eddy is not None:   # the terminal current (V + R_e i_m)/(R + R_e): its i_m
            target = np.maximum(((p.r_on + p.eddy) * trip - p.v_on) / p.eddy, i0)
        t = rise_time(np.maximum(target, i0), i0, p.v_on, p.r_on, coil)
        tt = np.where(np.isfinite(t), t, 0.0)
        q, s = rise_integrals(tt, i0, p.v_on, p.r_on, coil)
        i_m = rise_current(tt, i0, p.v_on, p.r_on, coil)
        extra = []
    flux = p.flux_open(i_m) if open_ else p.flux_closed(i_m)
    x = p.stroke.astype(float) if open_ else np.zeros(n)
    return t, np.stack([flux, x, np.zeros(n), q, s] + extra)


def _held_rise(p: ArmatureParams, i_inf, stiff, rtol, want, query_y, low, low_until, flux_to=None,
               current_to=None, eddy_loss: bool = False):
    """A coil with curves on a drooping bus, switched on at t = 0 with the armature held on
    the open stop (the flight integrator, ``held``) until the flux reaches the start
    current's (or ``flux_to`` Wb), or (``current_to`` A, an eddy term's threshold on the
    terminal current) the terminal current reaches it first: ``(t s (inf: neither within the
    bound), int i dt A*s, int i^2 dt A^2*s, the bus V then, steps, the state then, the end's
    code: START or TRIP)``; the state at ``want`` s goes into ``query_y``, the lowest
    bus into ``low``; ``eddy_loss``: the state's seventh row, the eddy resistance's loss
    (:class:`~coildrive.model.armature_flight._Rhs` integrates it). The bound: :data:`BOUND_FACTOR` times the slower of the open coil's
    time constant (its small-signal or its secant inductance at the steady current
    ``i_inf`` A, over ``R_on + R_s``) and ``R_s C``."""
    n = len(p)
    l_secant = p.flux_open(i_inf) / i_inf
    tau = np.maximum(p.l_open, l_secant) / (p.r_on + p.source_resistance)
    bound = BOUND_FACTOR * (tau + bus_time_scale(p))   # (a boost capacitor: its loop's scale)
    y0 = np.stack([np.zeros(n), p.stroke.astype(float), np.zeros(n), np.zeros(n), np.zeros(n),
                   p.v_on.astype(float)] + ([np.zeros(n)] if eddy_loss else []))
    ones = np.ones(n, bool)
    fl = fly_mixed(p, np.zeros(n), y0, bound, ones, ones, ones, stiff, rtol, query=want, query_y=query_y,
                   low=low, low_until=low_until, held=ones,
                   flux_to=p.flux_open(p.start_current) if flux_to is None else flux_to,
                   current_to=current_to)
    t_start = np.where((fl.end == START) | (fl.end == TRIP), fl.t, np.inf)
    return t_start, fl.y[3], fl.y[4], fl.y[5], fl.steps, fl.y, fl.end


def _droop_peak_end(p: ArmatureParams, want, t_start, moves, seated, seat_time, seat_current,
                    seat_bus, query_y, low, b_open, seat_y=None, stiff=None, rtol: float = 1e-7):
    """On a drooping bus: the current (A) at ``want`` s, the lowest bus (2 x N: V, s) over
    ``[0, want]`` completed, and the bus (V) at ``want`` -- before the motion the open
    coil's closed form, during it the flight's state there (``query_y``), on the seat the
    seated coil's closed form from the seat's state
    (:func:`coildrive.model.supply.lowest_from`). With curves (``seat_y``: the state on the
    seat) the rise before the motion was flown already (``query_y`` holds it) and the seat
    is flown held from ``seat_y`` to ``want``."""
    before = want < np.where(moves, t_start, np.inf)
    after = seated & (want >= seat_time)
    during = ~before & ~after
    if seat_y is not None:
        n = len(p)
        ones = np.ones(n, bool)
        t0 = np.where(after, seat_time, 0.0)
        y0 = np.where(after, seat_y, 0.0)
        fl = fly_mixed(p, t0, y0, np.where(after, want, 0.0), after, ones, ones, stiff, rtol,
                       low=low, low_until=want, held=ones)
        i_after = p.current(fl.y[0], 0.0)
        got = (before | during) & np.isfinite(query_y[5]) & (query_y[5] < low[0])
        low = np.stack([np.where(got, query_y[5], low[0]), np.where(got, want, low[1])])
        return np.where(after, i_after, p.current(query_y[0], query_y[1])), low, np.where(after, fl.y[5], query_y[5])
    b_seat = p.bus(False)
    dt = np.where(after, want - seat_time, 0.0)
    i0 = np.where(after, seat_current, 0.0)
    u0 = np.where(after, seat_bus, p.v_on)
    i_after, u_after = bus_model.state_from(dt, b_seat, i0, u0)
    v_after, t_after = bus_model.lowest_from(dt, b_seat, i0, u0)
    lower = after & (v_after < low[0])
    low = np.stack([np.where(lower, v_after, low[0]), np.where(lower, seat_time + t_after, low[1])])
    got = during & np.isfinite(query_y[5]) & (query_y[5] < low[0])
    low = np.stack([np.where(got, query_y[5], low[0]), np.where(got, want, low[1])])
    i_b, u_b = bus_model.state(np.where(before, want, 0.0), b_open)
    i_end = np.where(before, i_b, np.where(after, i_after, p.current(query_y[0], query_y[1])))
    return i_end, low, np.where(before, u_b, np.where(after, u_after, query_y[5]))


def peak_current_closed_form(p: ArmatureParams, pin: PullInBatch, peak_time):
    """The current in A at ``peak_time`` s from a finished :func:`pull_in` without
    integrating again, or ``None`` where that needs the trajectory (during the motion).

    Before the armature moves it is the open-inductance rise; once it rests on the seat,
    the closed-inductance rise from the seat current.
    """
    if p.droops:   # the lowest bus depends on the peak's length too: run again
        return None
    want = np.broadcast_to(np.asarray(peak_time, float), (len(p),))
    before = want < pin.start_time
    after = (pin.status == SEATED) & (want >= pin.seat_time)
    if not np.all(before | after):
        return None
    i_seat = np.where(after, pin.seat_current, 0.0)
    return np.where(before, rise_current(want, 0.0, p.v_on, p.r_on, p.coil_open),
                    rise_current(np.where(after, want - pin.seat_time, 0.0), i_seat, p.v_on,
                                 p.r_on, p.coil_closed))


# --------------------------------------------------------------------------- release
@dataclass(frozen=True)
class ReleaseBatch:
    """Release from the seat after turning off ``i_off`` A (arrays over points).

    ``status``: OPENED or NOT_OPEN (not back at the open stop within the bound;
    ``stall_gap_m`` where it was). Times in s from turn-off: ``unlatch_time`` (the
    armature leaves the seat: the current has decayed to the stay current),
    ``open_time`` (at rest on the open stop), ``zero_time`` (the current reaches zero).
    ``charge``/``square``: ``int i dt`` A*s and ``int i^2 dt`` A^2*s from turn-off to
    zero current (for the freewheel energy). With a late bypass (split decay,
    :func:`late_release`) ``slow_charge``/``slow_square`` are the part of those that
    went through the slow path before the bypass opened and ``fast_current`` (A) is the
    current then; ``None`` otherwise (nothing slow, the fast path takes ``i_off``).
    """

    status: np.ndarray
    unlatch_time: np.ndarray
    open_time: np.ndarray
    zero_time: np.ndarray
    charge: np.ndarray
    square: np.ndarray
    stall_gap: np.ndarray
    bound: np.ndarray
    steps: np.ndarray
    slow_charge: np.ndarray | None = None
    slow_square: np.ndarray | None = None
    fast_current: np.ndarray | None = None


def open_stop(end, active, y, t, lam_start, open_time, status):
    """After a release flight: a point at the open stop stops there (``y``'s speed to 0, in
    place) and stays open where its flux is at most ``lam_start`` Wb (it would start again
    above it). Returns ``(stays, open_time s, status)``."""
    opn = active & (end == OPEN)
    y[2] = np.where(opn, 0.0, y[2])
    stays = opn & (y[0] <= lam_start)
    return stays, np.where(stays, t, open_time), np.where(stays, OPENED, status)


def bounce_or_stall(p: ArmatureParams, end, active, y, status, stall_gap):
    """After a release flight (``end``: its codes): a point back on the seat bounces off it
    (``y``'s speed, in place, with the restitution), one at the bound fails (NOT_OPEN at its
    gap). Returns ``(active, status, stall_gap)``."""
    seat = active & (end == SEAT)
    y[2] = np.where(seat, p.restitution * np.abs(y[2]), y[2])
    ended = active & (end == BOUND)
    return active & ~ended, np.where(ended, NOT_OPEN, status), np.where(ended, y[1], stall_gap)


def settle_status(status, stall_gap, y):
    """A release's final ``(status, stall_gap)``: a point still undecided (status < 0) did
    not open, at its last gap ``y[1]``."""
    status = np.where(status < 0, NOT_OPEN, status)
    return status, np.where((status == NOT_OPEN) & np.isnan(stall_gap), y[1], stall_gap)


def release(p: ArmatureParams, i_off, rtol: float = 1e-7, max_rounds: int = 4 * MAX_BOUNCES) -> ReleaseBatch:
    """Turn off at t = 0 with the armature seated and ``i_off`` A flowing; follow the
    freewheel decay and the armature until it rests on the open stop."""
    n = len(p)
    i_off = np.broadcast_to(np.asarray(i_off, float), (n,)).copy()
    i_stay = p.stay_current
    lam_stay = p.flux_closed(i_stay)
    lam_start = p.flux_open(p.start_current)
    held = i_off > i_stay
    t_un = np.where(held, decay_time(np.minimum(i_stay, i_off), i_off, p.r_off, p.v_off, p.coil_closed), 0.0)
    q0, s0 = decay_integrals(t_un, i_off, p.r_off, p.v_off, p.coil_closed)
    lam = np.where(held, lam_stay * (1.0 - 1e-12), p.flux_closed(i_off))
    y = np.stack([lam, np.zeros(n), np.zeros(n), q0, s0])
    t = t_un.copy()
    live = lam > 0
    zero_time = np.where(live, np.nan, t_un)
    if p.eddy is not None:
        # the freewheel conducts while the magnetising current is above V_off / R_e; below
        # it the flux (and the force) dies through R_e alone: the unlatch may come later
        live = np.where(held, i_stay, i_off) > p.block_current
        zero_time = np.where(live, np.nan, decay_time(0.0, i_off, p.r_off, p.v_off, p.coil_closed))
    bound = time_bound(t_un, p.l_closed, p.r_off, p.mass, p.stroke, p.damping, p.opening_force(p.stroke))
    status = np.full(n, -1)
    open_time = np.full(n, np.inf)
    stall_gap = np.full(n, np.nan)
    steps = np.zeros(n, int)
    active = np.ones(n, bool)
    off = np.zeros(n, bool)
    stiff = is_stiff(p, p.opening_force(p.stroke))
    for _ in range(max_rounds):
        if not active.any():
            break
        fl = fly_mixed(p, t, y, bound, active, off, live, stiff, rtol)
        steps += fl.steps
        t = np.where(active, fl.t, t)
        y = np.where(active, fl.y, y)
        zero = active & (fl.end == ZERO)
        zero_time = np.where(zero, t, zero_time)
        live = live & ~zero
        if p.eddy is None:   # (with an eddy term the flux outlasts the terminal current)
            y[0] = np.where(zero, 0.0, y[0])
        stays, open_time, status = open_stop(fl.end, active, y, t, lam_start, open_time, status)
        # current still flowing at the open stop: the rest of the decay is closed form
        tail = stays & live
        if tail.any():
            i_o = p.current(y[0], p.stroke)
            dz = decay_time(0.0, i_o, p.r_off, p.v_off, p.coil_open)
            dq, ds = decay_integrals(np.where(tail, dz, 0.0), i_o, p.r_off, p.v_off, p.coil_open)
            zero_time = np.where(tail, t + dz, zero_time)
            y[3] = np.where(tail, y[3] + dq, y[3])
            y[4] = np.where(tail, y[4] + ds, y[4])
        active = active & ~stays
        active, status, stall_gap = bounce_or_stall(p, fl.end, active, y, status, stall_gap)
    status, stall_gap = settle_status(status, stall_gap, y)
    return ReleaseBatch(status=status, unlatch_time=t_un, open_time=open_time,
                        zero_time=np.where(np.isnan(zero_time), np.inf, zero_time),
                        charge=y[3], square=y[4], stall_gap=stall_gap, bound=bound, steps=steps)


def late_release(p: ArmatureParams, fast: ArmatureParams, i_off, lag: float,
                 rtol: float = 1e-7) -> ReleaseBatch:
    """:func:`release` with a late bypass (split decay with ``bypass_lead < 0``): from
    the turn-off at t = 0 the current decays through ``p``'s off path (the slow hold
    path) for ``lag`` s, then through ``fast``'s (the same points with the release
    path's ``r_off``/``v_off``).

    Where the armature is still seated when the bypass opens (the current above the
    stay current), the slow part is the closed-form decay of the seated coil and the
    rest the batched :func:`release` from there; where it lifts during the lag, the
    point is simulated through both paths by :func:`coildrive.model.armature_sim.simulate`.
    """
    n = len(p)
    i_off = np.broadcast_to(np.asarray(i_off, float), (n,)).copy()
    i_stay = p.stay_current
    t_un = np.where(i_off > i_stay,
                    decay_time(np.minimum(i_stay, i_off), i_off, p.r_off, p.v_off, p.coil_closed), 0.0)
    seated = lag < t_un
    i_lag = decay_current(lag, i_off, p.r_off, p.v_off, p.coil_closed)
    q1, s1 = decay_integrals(np.full(n, float(lag)), i_off, p.r_off, p.v_off, p.coil_closed)
    nan = np.full(n, np.nan)
    out = dict(status=np.full(n, NOT_OPEN), unlatch_time=nan.copy(), open_time=nan.copy(),
               zero_time=nan.copy(), charge=nan.copy(), square=nan.copy(), stall_gap=nan.copy(),
               bound=nan.copy(), steps=np.zeros(n, int), slow_charge=q1.copy(),
               slow_square=s1.copy(), fast_current=np.where(seated, i_lag, nan))
    k = np.flatnonzero(seated)
    if k.size:
        rb = release(fast.take(k), i_lag[k], rtol)
        for name in ("unlatch_time", "open_time", "zero_time", "bound"):
            out[name][k] = lag + getattr(rb, name)
        out["charge"][k] = q1[k] + rb.charge
        out["square"][k] = s1[k] + rb.square
        for name in ("status", "stall_gap", "steps"):
            out[name][k] = getattr(rb, name)
    if k.size < n:
        from .armature_sim import simulate

        for j in np.flatnonzero(~seated):
            pj, fj = p.take(j), fast.take(j)
            bound = lag + float(time_bound(t_un[j], pj.l_closed[0], pj.r_off[0], pj.mass[0],
                                            pj.stroke[0], pj.damping[0],
                                            pj.opening_force(pj.stroke)[0]))
            tr = simulate(pj, [(lag, False, None, "hold"), (bound, False, None, "release")],
                          state="seated", flux=float(pj.flux_closed(i_off[j])[0]), rtol=rtol,
                          release_params=fj, stop=lambda r: r.state == "open" and not r.live)
            m = int(np.searchsorted(tr.time, lag, side="right")) - 1
            opened = tr.state == "open" and tr.stopped
            opens = [t for t, name in tr.log if name == "open"]
            out["status"][j] = OPENED if opened else NOT_OPEN
            out["unlatch_time"][j] = tr.events.get("unlatch", 0.0)
            out["open_time"][j] = opens[-1] if opened and opens else np.inf
            out["zero_time"][j] = tr.events.get("zero", np.inf)
            out["charge"][j], out["square"][j] = tr.charge[-1], tr.square[-1]
            out["slow_charge"][j], out["slow_square"][j] = tr.charge[m], tr.square[m]
            out["fast_current"][j] = tr.current[m] if tr.time[m] >= lag else 0.0
            out["stall_gap"][j] = np.nan if opened else tr.position[-1]
            out["bound"][j] = bound
    return ReleaseBatch(**out)
