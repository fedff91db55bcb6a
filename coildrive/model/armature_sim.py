"""One operating point of the moving-armature model through any switch schedule.

The armature is in one of three states:

* ``open``   -- resting on the open stop (x = stroke); ``L`` is constant, so the current
  is the closed-form RL segment with the open inductance. It leaves the stop when the
  magnetic force exceeds spring preload + load (``lambda > lambda_start``).
* ``seated`` -- resting on the seat (x = 0); closed form with the closed inductance. It
  leaves when the force falls below the spring + load at the seat
  (``lambda < lambda_stay``).
* ``free``   -- moving: the ODE of :mod:`coildrive.model.armature`, integrated until it
  hits a stop, the current reaches zero with the switch off, or the segment ends.

Two integrators can drive the ``free`` state: ``"numpy"`` (the Dormand-Prince integrator
of :mod:`coildrive.model.armature`, for one point its float-by-float form ``fly_point``:
the batch's numbers without numpy's per-call overhead) and any scipy ``solve_ivp``
method name (``"RK45"``, ``"DOP853"``, ``"Radau"``, ``"BDF"``, ``"LSODA"``), with terminal
events for the stops -- the per-point reference the batched model is checked against.
scipy is imported only when one of its methods is asked for.

Units: SI (s, A, V*s, m, m/s).
"""

from __future__ import annotations

import dataclasses
import math
from bisect import bisect_right
from dataclasses import dataclass, field

import numpy as np

from . import armature_flight as _flight
from .armature import (BOUND, MAX_BOUNCES, OPEN, REST_FRACTION, SEAT, START, ZERO, ArmatureParams,
                       time_bound)
from .armature_flight import OnePoint, _hermite, _hermite5, _Rhs, fly, fly_point, is_stiff
from .rl import decay_current, decay_integrals, decay_time, rise_current, rise_integrals, rise_time
from . import supply as bus_model

#: Default scipy tolerances of the reference path (relative; absolute = rtol x scale).
REFERENCE_RTOL = 1e-10
#: An integrated piece keeps at most this many times its sample count of solver steps.
THIN = 8


@dataclass
class Trajectory:
    """A simulated run: samples (s, V*s, m, m/s, 0/1, A*s, A^2*s) and the moments.

    ``current`` is the terminal current (what the loop carries); with an eddy term
    ``magnetising_current`` is the flux's (A). ``events`` maps names to times in s: ``move`` (leaves the open stop), ``impact``
    (first touch of the seat; the current dip), ``seat`` (at rest on the seat),
    ``unlatch`` (leaves the seat), ``open`` (at rest on the open stop), ``zero`` (the
    current reaches zero); ``dip_current`` is the current at the impact in A. ``log``
    lists every transition as ``(time, name)``; ``impacts`` every arrival at a stop as
    ``(time, stop, speed before, speed after)`` (m/s; ``stop`` is ``"seat"`` or
    ``"open"``) -- the kinetic energy lost there is ``m (before^2 - after^2) / 2``.
    ``bus`` (V): the bulk capacitor's voltage on a drooping bus, else ``None``.
    """

    time: np.ndarray
    flux: np.ndarray
    position: np.ndarray
    velocity: np.ndarray
    switch_on: np.ndarray
    charge: np.ndarray
    square: np.ndarray
    current: np.ndarray
    #: the magnetising current A (the flux's, the force's) with an eddy term, else None
    magnetising_current: np.ndarray | None = None
    events: dict = field(default_factory=dict)
    log: list = field(default_factory=list)
    impacts: list = field(default_factory=list)
    state: str = ""
    stopped: bool = False
    bus: np.ndarray | None = None


class _Point:
    """Scalar view of a one-point :class:`ArmatureParams` plus the stop thresholds."""

    def __init__(self, p: ArmatureParams):
        if len(p) != 1:
            raise ValueError("armature_sim works on one operating point at a time")
        self.p = p
        for name in p.arrays:
            setattr(self, name, float(getattr(p, name)[0]))
        self.l_open = float(p.l_open[0])
        # what the closed-form segments take at the stops: H, or the curves' coils (in an
        # EddyCoil with an eddy term)
        plain = p.curves is None and p.eddy is None
        self.coil_open = self.l_open if plain else p.coil_open[0]
        self.coil_closed = self.l_closed if plain else p.coil_closed[0]
        #: the eddy resistance ohm (None: no eddy term) and the magnetising current A
        #: below which the freewheel blocks
        self.eddy = None if p.eddy is None else float(p.eddy[0])
        self.i_block = float(p.block_current[0])
        self.droop = p.droops
        self.rows = 6 if self.droop else 5
        self.bus_open = p.bus(True) if self.droop else None
        self.bus_closed = p.bus(False) if self.droop else None
        self.i_start = float(p.start_current[0])
        self.i_stay = float(p.stay_current[0])
        self.lam_start = self.flux_at(self.i_start, False)
        self.lam_stay = self.flux_at(self.i_stay, True)
        self.scales = p.reference_scales()[:, 0]
        i_inf = self.v_on / self.r_on
        f_inf = self.f_inf = float(p.closing_force(p.flux_open(i_inf))[0])
        weakest = min(self.preload + self.load, max(f_inf - self.preload - self.load, 1e-300))
        self.stiff = bool(is_stiff(p, weakest)[0])

    def flux_at(self, i, seated: bool):
        """Flux linkage V*s at ``i`` A (scalar or array) on the seat or the open stop."""
        if self.p.curves is None:
            return i * (self.l_closed if seated else self.l_open)
        out = self.p.flux_closed(i) if seated else self.p.flux_open(i)
        return float(out[0]) if np.ndim(i) == 0 else out

    def terminal(self, i_m, on, bus=None):
        """Terminal current A at magnetising current ``i_m`` A with the switch ``on``
        (the coil's current, at least 0, without an eddy term); ``bus``: the capacitor's
        voltage V on a drooping bus."""
        out = self.p.terminal(i_m, on, bus=bus if self.droop else None)
        return float(out[0]) if np.ndim(i_m) == 0 else out

    def current(self, lam, x):
        if self.p.curves is None:
            return lam * (1.0 + self.beta * x) / self.l_closed
        out = self.p.curves.current(lam, x)
        return float(out[0]) if np.ndim(lam) == 0 and np.ndim(x) == 0 else out


class _Run:
    """Mutable state of a simulation and its sample lists."""

    def __init__(self, pt: _Point, t: float, y: np.ndarray, state: str, live: bool):
        self.pt = pt
        self.t = t
        self.y = y.astype(float).copy()
        self.state = state
        self.live = live
        self.impact_speed = math.nan
        self.bounces = 0
        self.events: dict = {}
        self.log: list = []
        self.impacts: list = []
        self.chunks: list = []  # (t, y(5 x k), on, point: its freewheel path)

    def emit(self, ts, ys, on):
        self.chunks.append((np.atleast_1d(ts), np.atleast_2d(ys).reshape(self.pt.rows, -1), on, self.pt))

    def mark(self, name: str, first_only: bool = True):
        if not (first_only and name in self.events):
            self.events[name] = self.t
        self.log.append((self.t, name))


def _rest_segment(run: _Run, t_end: float, on: bool, points: int, stop, rtol: float = 1e-8) -> None:
    """Advance a resting armature (open or seated) in closed form until it leaves its
    stop, the current reaches zero, or ``t_end`` (a coil with curves switched on to a
    drooping bus has no closed form: :func:`_rest_held`, at ``rtol``)."""
    pt = run.pt
    if pt.droop and on and pt.p.curves is not None:
        return _rest_held(run, t_end, rtol)
    if pt.droop and not on and pt.p.clamp is not None and (run.live or pt.eddy is not None):
        return _rest_clamped(run, t_end, rtol)
    if pt.droop:
        return _rest_segment_droop(run, t_end, on, points, stop)
    seated = run.state == "seated"
    ind = pt.coil_closed if seated else pt.coil_open
    x = 0.0 if seated else pt.stroke
    start = _rest_start(run, on, seated, pt.current(run.y[0], x), lambda i: float(
        rise_time(pt.i_start, i, pt.v_on, pt.r_on, pt.coil_open)))
    if start is None:
        return
    i0, t_leave = start
    dt = min(t_leave, t_end - run.t)
    t_zero = math.inf
    if not on and run.live:
        t_zero = float(decay_time(0.0, i0, pt.r_off, pt.v_off, ind))
        dt = min(dt, t_zero)
    if dt > 0:
        s = np.linspace(0.0, dt, max(points, 2))[1:]
        if on:
            i = rise_current(s, i0, pt.v_on, pt.r_on, ind)
            q, sq = rise_integrals(s, i0, pt.v_on, pt.r_on, ind)
        else:
            i, q, sq = _off_samples(pt, s, i0, t_zero, ind, run.live)
        ys = np.stack([pt.flux_at(i, seated), np.full_like(s, x), np.zeros_like(s), run.y[3] + q, run.y[4] + sq])
        run.emit(run.t + s, ys, on)
        run.t += dt
        run.y = ys[:, -1].copy()
    _rest_end(run, dt, t_zero, t_leave, t_end, on, seated, stop)


def _rest_start(run: _Run, on: bool, seated: bool, i0: float, to_start):
    """``(i0 A, t_leave s)`` of a resting piece: the current it starts from (0 where the
    diode blocks) and when the armature leaves its stop (``to_start(i0)``: the switched-on
    rise to the start current on the open stop); ``None`` when it leaves at once (seated
    below the stay current with the switch on: ``run`` is then free)."""
    pt = run.pt
    if on:
        run.live = True
        # seated: the current rises, the armature stays (unless below the stay current)
        if seated:
            if i0 < pt.i_stay:
                run.state = "free"
                return None
            return i0, math.inf
        return i0, (0.0 if run.y[0] > pt.lam_start else to_start(i0))
    if pt.eddy is not None:
        # an eddy term: the flux outlasts the terminal current, dying through R_e once
        # the freewheel blocks (the EddyCoil's decay segments follow it)
        i0 = max(i0, 0.0)
    elif not run.live or i0 <= 0.0:
        run.live = False
        i0 = 0.0
    if seated:
        return i0, (0.0 if i0 <= pt.i_stay else float(
            decay_time(pt.i_stay, i0, pt.r_off, pt.v_off, pt.coil_closed)))
    return i0, math.inf


def _off_samples(pt: _Point, s, i0: float, t_zero: float, ind, live: bool):
    """``(i A, int i dt A*s, int i^2 dt A^2*s)`` at ``s`` s of a resting coil's freewheel
    decay from ``i0`` A (zero once blocked; with an eddy term the magnetising current's
    tail through R_e, no terminal charge)."""
    if live:
        return (decay_current(s, i0, pt.r_off, pt.v_off, ind),
                *decay_integrals(np.minimum(s, t_zero), i0, pt.r_off, pt.v_off, ind))
    if pt.eddy is not None:   # the freewheel blocked: the flux's tail through R_e
        return decay_current(s, i0, pt.r_off, pt.v_off, ind), np.zeros_like(s), np.zeros_like(s)
    return np.zeros_like(s), np.zeros_like(s), np.zeros_like(s)


def _rest_end(run: _Run, dt: float, t_zero: float, t_leave: float, t_end: float, on: bool,
              seated: bool, stop) -> None:
    """After a resting piece of ``dt`` s: the current reaching zero (``t_zero``), the
    armature leaving its stop (``t_leave``), each marked."""
    pt = run.pt
    if dt == t_zero and not on and run.live:
        run.live = False
        if pt.eddy is None:
            run.y[0] = 0.0
        run.mark("zero")
        if stop(run):
            return
    if dt == t_leave and run.t < t_end + 1e-18:
        if seated:
            if pt.eddy is not None:
                run.y[0] = min(run.y[0], pt.lam_stay * (1.0 - 1e-12))
            else:
                run.y[0] = pt.lam_stay * (1.0 - 1e-12) if run.live else 0.0
        else:
            run.y[0] = pt.lam_start * (1.0 + 1e-12)
        run.state = "free"
        run.mark("unlatch" if seated else "move")


def _rest_held(run: _Run, t_end: float, rtol: float) -> None:
    """A resting armature of a coil with curves, switched on to the drooping bus: the flight
    integrator with the armature held at its stop (``fly(held=...)``) until ``t_end`` or, on
    the open stop, the flux reaching the start current's (the armature then moves)."""
    pt = run.pt
    seated = run.state == "seated"
    run.live = True
    if seated and pt.current(run.y[0], 0.0) < pt.i_stay:
        run.state = "free"
        return
    if not seated and run.y[0] > pt.lam_start:
        run.y[0] = pt.lam_start * (1.0 + 1e-12)
        run.state = "free"
        run.mark("move")
        return
    fl = _held_flight(run, t_end, True, rtol, flux_to=np.array([math.inf if seated else pt.lam_start]))
    if int(fl.end[0]) == START:
        run.y[0] = pt.lam_start * (1.0 + 1e-12)
        run.state = "free"
        run.mark("move")


def _held_flight(run: _Run, t_end: float, on: bool, rtol: float, live: bool = True, **stop):
    """The flight integrator (``fly(held=...)``) over a resting stretch of ``run`` switched
    ``on`` (or off; ``live`` False: the path blocked) until ``t_end`` or a ``stop`` of
    :func:`~coildrive.model.armature_flight.fly` (``flux_to``, ``flux_down``), its accepted
    steps emitted and ``run`` moved to its end; returns the flight."""
    pt = run.pt
    yes = np.array([True])
    fl = fly(pt.p, np.array([run.t]), run.y[:, None], np.array([t_end]), yes, np.array([on]),
             np.array([live]), rtol, record=True, stiff=pt.stiff, held=yes, **stop)
    ts = np.array([a[0] for a in fl.path_t[1:]])
    ys = np.array([a[:, 0] for a in fl.path_y[1:]]).T if len(fl.path_y) > 1 else np.zeros((pt.rows, 0))
    keep = np.isfinite(ts)
    if keep.any():
        run.emit(ts[keep], ys[:, keep], on)
    run.t = float(fl.t[0])
    run.y = fl.y[:, 0].copy()
    return fl


def _blocks(run: _Run) -> bool:
    """With an eddy term, switched off and conducting: whether the freewheel path blocks at
    once (the terminal current's step at the turn-off takes it to zero or below): through a
    clamp on the drooping bus where ``u - V_c + R_e i_m <= 0``, else below the block current."""
    pt = run.pt
    i_m = pt.current(run.y[0], run.y[1])
    if pt.droop and pt.p.clamp is not None:
        return float(run.y[5]) - float(pt.p.clamp[0]) + pt.eddy * i_m <= 0.0
    return i_m <= pt.i_block


def _rest_clamped(run: _Run, t_end: float, rtol: float) -> None:
    """A resting armature switched off on the drooping bus with a clamp across the switch
    (``p.clamp``): the current flows on from the bus through the clamp (``L di/dt = u - V_c -
    R_off i``, the bus feeding it; with an eddy term the branch behind the loop's Thevenin
    pair) -- the flight integrator with the armature held at its stop (``fly(held=...)``)
    until ``t_end``, the current's zero (the clamp stops conducting; the bus then relaxes
    alone, :func:`_rest_segment_droop`; with an eddy term the flux dies on through ``R_e``,
    held on in the same integrator) or, on the seat, the flux falling to the stay current's
    (the armature lets go)."""
    pt = run.pt
    seated = run.state == "seated"
    if run.live and pt.eddy is not None and _blocks(run):
        run.live = False
        run.mark("zero")
        return
    fl = _held_flight(run, t_end, False, rtol, live=run.live,
                      flux_down=np.array([pt.lam_stay if seated else -math.inf]))
    end = int(fl.end[0])
    if end == ZERO:
        run.live = False
        if pt.eddy is None:
            run.y[0] = 0.0
        run.mark("zero")
    elif end == START:   # on the seat, down to the stay current: it lets go
        run.y[0] = pt.lam_stay * (1.0 - 1e-12)
        run.state = "free"
        run.mark("unlatch")


def _rest_segment_droop(run: _Run, t_end: float, on: bool, points: int, stop) -> None:
    """:func:`_rest_segment` on a drooping bus (state row 5: the capacitor, V): switched
    on, the closed form of :mod:`coildrive.model.supply` from the state the stop was
    reached with; switched off, the coil's decay (the freewheel path draws nothing from the
    bus) while the capacitor recharges through ``R_s``, ``u = V_s + (u0 - V_s) e^{-t/(R_s C)}``."""
    pt = run.pt
    seated = run.state == "seated"
    b = pt.bus_closed if seated else pt.bus_open
    ind = pt.coil_closed if seated else pt.coil_open
    x = 0.0 if seated else pt.stroke
    u0 = float(run.y[5])
    span = t_end - run.t
    start = _rest_start(run, on, seated, pt.current(run.y[0], x), lambda i: float(np.ravel(
        bus_model.time_to(pt.i_start, b, min(i, pt.i_start), u0, span))[0]))
    if start is None:
        return
    i0, t_leave = start
    t_zero = math.inf
    if not on and run.live:
        t_zero = float(decay_time(0.0, i0, pt.r_off, pt.v_off, ind))
    dt = min(t_leave, span, t_zero)
    if dt > 0:
        s = np.linspace(0.0, dt, max(points, 2))[1:]
        if on:
            i, u = bus_model.state_from(s, b, i0, u0)
            q, sq = bus_model.integrals_from(s, b, np.full_like(s, i0), np.full_like(s, u0))
        else:
            tau = pt.source_resistance * pt.capacitance
            u = pt.v_on + (u0 - pt.v_on) * np.exp(-s / tau)
            i, q, sq = _off_samples(pt, s, i0, t_zero, ind, run.live)
        ys = np.stack([pt.flux_at(i, seated), np.full_like(s, x), np.zeros_like(s), run.y[3] + q,
                       run.y[4] + sq, u])
        run.emit(run.t + s, ys, on)
        run.t += dt
        run.y = ys[:, -1].copy()
    _rest_end(run, dt, t_zero, t_leave, t_end, on, seated, stop)


def _fly_point(run: _Run, t_end: float, on: bool, rtol: float, dense: int):
    """:func:`_fly_numpy` on Python floats (:func:`~coildrive.model.armature_flight.fly_point`),
    with the same dense fill: the same samples, without numpy's per-call overhead on
    1-element arrays (a PWM hold in which the armature lifts flies once per half period)."""
    pt = run.pt
    c = pt.__dict__.get("_one")
    if c is None:
        c = pt._one = OnePoint(pt.p, pt.scales)  # constants of the point, once per run
    t1, y1, code, _, _, (kt, ky, kd) = fly_point(c, run.t, run.y.tolist(), t_end, on, run.live,
                                                 rtol, record=True, stiff=pt.stiff)
    ts, ys = kt[1:], ky[1:]
    if dense > 1 and ts:
        # fill in between the steps with the cubic Hermite interpolant of the state
        have = set(ts)
        grid = [g for g in np.linspace(run.t, ts[-1], dense + 1)[1:-1].tolist() if g not in have]
        last = len(kt) - 2
        fill = []
        for g in grid:
            j = min(max(bisect_right(kt, g) - 1, 0), last)
            h = kt[j + 1] - kt[j]
            theta = (g - kt[j]) / h if h > 0 else 0.0
            fill.append(_hermite5(ky[j], ky[j + 1], kd[j], kd[j + 1], h, theta))
        if fill:
            # in time order, a step before a grid time equal to it (as the stable argsort)
            both = sorted(zip(ts + grid, ys + fill), key=lambda e: e[0])
            ts, ys = [e[0] for e in both], [e[1] for e in both]
    ys_a = np.array(ys, float).T if ys else np.zeros((5, 0))
    return np.array(ts, float), ys_a, code, t1, np.array(y1, float)


def _fly_numpy(run: _Run, t_end: float, on: bool, rtol: float, dense: int):
    if _flight.SINGLE_POINT_SCALAR and run.pt.p.curves is None and run.pt.eddy is None and not run.pt.droop:
        return _fly_point(run, t_end, on, rtol, dense)
    pt = run.pt
    fl = fly(pt.p, np.array([run.t]), run.y[:, None], np.array([t_end]), np.array([True]),
             np.array([on]), np.array([run.live]), rtol, record=True, stiff=pt.stiff)
    ts = np.array([a[0] for a in fl.path_t[1:]])
    ys = np.array([a[:, 0] for a in fl.path_y[1:]]).T if len(fl.path_y) > 1 else np.zeros((pt.rows, 0))
    keep = np.isfinite(ts)
    ts, ys = ts[keep], ys[:, keep]
    code = int(fl.end[0])
    if dense > 1 and ts.size:
        # fill in between the steps with the cubic Hermite interpolant of the state
        rhs = _Rhs(pt.p, np.array([on]), np.array([run.live]))
        knots_t = np.concatenate([[run.t], ts])
        knots_y = np.concatenate([run.y[:, None], ys], axis=1)
        knots_d = rhs(knots_y)
        grid = np.linspace(run.t, ts[-1], dense + 1)[1:-1]
        grid = grid[~np.isin(grid, ts)]
    if dense > 1 and ts.size and grid.size:
        j = np.clip(np.searchsorted(knots_t, grid, side="right") - 1, 0, knots_t.size - 2)
        h = knots_t[j + 1] - knots_t[j]
        theta = np.where(h > 0, (grid - knots_t[j]) / np.where(h > 0, h, 1.0), 0.0)
        yg = _hermite(knots_y[:, j], knots_y[:, j + 1], knots_d[:, j], knots_d[:, j + 1], h, theta)
        order = np.argsort(np.concatenate([ts, grid]), kind="stable")
        ts = np.concatenate([ts, grid])[order]
        ys = np.concatenate([ys, yg], axis=1)[:, order]
    return ts, ys, code, float(fl.t[0]), fl.y[:, 0].copy()


def _fly_scipy(run: _Run, t_end: float, on: bool, method: str, rtol: float, dense: int):
    from scipy.integrate import solve_ivp

    pt = run.pt
    rhs = _Rhs(pt.p, np.array([on]), np.array([run.live]))

    def fun(_t, y):
        return rhs(y[:, None])[:, 0]

    # A stop counts once passed by a band of 1e-9 stroke: an implicit solver's first step
    # off a stop may cross it back by rounding, which must not end the flight at once.
    band = 1e-9 * pt.stroke

    def seat(_t, y):
        return y[1] + band
    seat.terminal, seat.direction = True, -1

    def opened(_t, y):
        return pt.stroke + band - y[1]
    opened.terminal, opened.direction = True, -1

    def zero(_t, y):
        if pt.eddy is None:
            return y[0]
        return float(rhs.terminal(pt.current(y[0], y[1]))[0])   # the freewheel blocks
    zero.terminal, zero.direction = True, -1

    events = [seat, opened] + ([zero] if (not on and run.live) else [])
    span = t_end - run.t
    i_ref = pt.scales[0] / pt.l_closed
    atol = rtol * np.concatenate([pt.scales, [i_ref * span, i_ref * i_ref * span]]
                                 + ([[pt.v_on]] if pt.droop else []))
    sol = solve_ivp(fun, (run.t, t_end), run.y, method=method, rtol=rtol, atol=atol,
                    events=events, dense_output=dense > 1)
    if sol.status == -1:
        raise RuntimeError(f"solve_ivp ({method}) failed: {sol.message}")
    code = BOUND
    t_hit, y_hit = float(sol.t[-1]), sol.y[:, -1].copy()
    if sol.status == 1:
        best = math.inf
        for k, c in enumerate((SEAT, OPEN, ZERO)[:len(events)]):
            if len(sol.t_events[k]) and sol.t_events[k][0] < best:
                best = float(sol.t_events[k][0])
                code, t_hit, y_hit = c, best, sol.y_events[k][0].copy()
    keep = sol.t < t_hit
    ts = np.append(sol.t[keep][1:], t_hit)
    ys = np.concatenate([sol.y[:, keep][:, 1:], y_hit[:, None]], axis=1)
    grid = np.linspace(run.t, t_hit, dense + 1)[1:-1] if dense > 1 and t_hit > run.t else np.zeros(0)
    grid = grid[~np.isin(grid, ts)]
    if grid.size:
        order = np.argsort(np.concatenate([ts, grid]), kind="stable")
        ts = np.concatenate([ts, grid])[order]
        ys = np.concatenate([ys, sol.sol(grid)], axis=1)[:, order]
    if code == SEAT:
        y_hit[1] = 0.0
    elif code == OPEN:
        y_hit[1] = pt.stroke
    elif code == ZERO and pt.eddy is None:
        y_hit[0] = 0.0
    ys[:, int(np.argmax(ts))] = y_hit
    return ts, ys, code, t_hit, y_hit


def _free_segment(run: _Run, t_end: float, on: bool, method: str, rtol: float, dense: int) -> None:
    pt = run.pt
    if on:
        run.live = True
    elif run.live and pt.eddy is not None and _blocks(run):
        # an eddy term: the turn-off's step takes the terminal current to zero at once
        run.live = False
        run.mark("zero")
        return
    if method == "numpy":
        ts, ys, code, t1, y1 = _fly_numpy(run, t_end, on, rtol, dense)
    else:
        ts, ys, code, t1, y1 = _fly_scipy(run, t_end, on, method, rtol, dense)
    if ts.size > THIN * max(dense, 2):
        # a long, finely stepped flight (stiff damping): keep evenly spread steps and the end
        keep = np.unique(np.linspace(0, ts.size - 1, THIN * max(dense, 2)).round().astype(int))
        ts, ys = ts[keep], ys[:, keep]
    if ts.size:
        run.emit(ts, ys, on)
    run.t, run.y = t1, y1
    v_before = abs(float(run.y[2]))
    if code == SEAT:
        v = -run.y[2]
        first = math.isnan(run.impact_speed)
        if first:
            run.impact_speed = v
            i_dip = pt.current(run.y[0], 0.0)
            run.events["dip_current"] = i_dip if pt.eddy is None else pt.terminal(
                i_dip, on, float(run.y[5]) if pt.droop else None)
            run.mark("impact")
        rebound = pt.restitution * abs(run.y[2])
        if rebound > 0 and rebound >= REST_FRACTION * run.impact_speed and run.bounces < MAX_BOUNCES:
            run.bounces += 1
            run.y[2] = rebound
            run.mark("bounce", first_only=False)
        else:
            run.y[2] = 0.0
            if run.y[0] >= pt.lam_stay:
                run.state = "seated"
                run.mark("seat", first_only=False)
        run.impacts.append((run.t, "seat", v_before, abs(float(run.y[2]))))
    elif code == OPEN:
        run.y[2] = 0.0
        run.impacts.append((run.t, "open", v_before, 0.0))
        if run.y[0] <= pt.lam_start:
            run.state = "open"
            run.mark("open", first_only=False)
    elif code == ZERO:
        run.live = False
        if pt.eddy is None:
            run.y[0] = 0.0
        run.mark("zero")


def simulate(p: ArmatureParams, schedule, state: str = "open", flux: float = 0.0,
             method: str = "numpy", rtol: float | None = None, points: int = 40, stop=None,
             t0: float = 0.0, release_params: ArmatureParams | None = None,
             start: np.ndarray | None = None, live: bool | None = None) -> Trajectory:
    """Simulate one point through ``schedule``: segments ``(t_end, switch_on)``,
    ``(t_end, switch_on, samples)`` or ``(t_end, switch_on, samples, path)``, in time
    order.

    ``path`` names the freewheel path of the segment's off time: ``"hold"`` (the
    default: ``p``'s ``r_off``/``v_off``) or ``"release"`` (those of
    ``release_params``, which must then be given: the fast path of split decay; its
    other parameters are those of ``p``). ``samples`` may be ``None`` for ``points``.

    Parameters
    ----------
    p : parameters of one point; state : ``"open"`` or ``"seated"`` at ``t0``
    flux : flux linkage at ``t0`` in V*s (0: no current)
    method : ``"numpy"`` or a scipy ``solve_ivp`` method name
    rtol : relative tolerance (default 1e-8 numpy, :data:`REFERENCE_RTOL` scipy)
    points : samples per piece of a segment that gives no count (closed-form pieces get
        that many, integrated pieces at least that many)
    stop : ``stop(run) -> bool``, checked after every transition, ends the run early
    start, live : a whole start state instead of ``flux`` (lambda, x, v, q, sq; on a
        drooping bus ``p.droops`` also the capacitor V, else it starts at ``v_on``) and
        whether the current flows; ``state`` may then also be ``"free"`` (moving)
    """
    pt = _Point(p)
    paths = {"hold": pt}
    if release_params is not None:
        # (a clamp the release's path draws from a drooping bus through: its own, split decay's)
        paths["release"] = _Point(dataclasses.replace(p, r_off=release_params.r_off, v_off=release_params.v_off,
                                                      clamp=p.clamp if release_params.clamp is None
                                                      else release_params.clamp))
    if rtol is None:
        rtol = 1e-8 if method == "numpy" else REFERENCE_RTOL
    if state not in ("open", "seated") and not (start is not None and state == "free"):
        raise ValueError(f"state {state!r}: expected 'open' or 'seated'")
    if start is None:
        x0 = pt.stroke if state == "open" else 0.0
        y0 = [flux, x0, 0.0, 0.0, 0.0] + ([pt.v_on] if pt.droop else [])
        run = _Run(pt, t0, np.array(y0), state, flux > 0)
    else:
        y0 = list(np.asarray(start, float)[:5]) + ([float(start[5]) if len(start) > 5 else pt.v_on]
                                                  if pt.droop else [])
        run = _Run(pt, t0, np.array(y0), state, bool(flux > 0 if live is None else live))
    stop = stop or (lambda r: False)
    run.emit(t0, run.y, bool(schedule[0][1]) if schedule else False)
    guard = 0
    stopped = False
    limit = 10 * MAX_BOUNCES + 4 * len(schedule) + 100
    for seg in schedule:
        t_end, on = float(seg[0]), bool(seg[1])
        n = int(seg[2]) if len(seg) > 2 and seg[2] is not None else points
        path = seg[3] if len(seg) > 3 else "hold"
        if path not in paths:
            raise ValueError(f"schedule path {path!r}: expected 'hold'"
                             + (" or 'release'" if release_params is not None else
                                " ('release' needs release_params)"))
        run.pt = paths[path]
        if pt.eddy is not None and run.chunks and run.chunks[-1][2] != on and run.t < t_end:
            # an eddy term steps the terminal current at a switch edge: a second row at the
            # edge's time, in the new state (the magnetising current is continuous)
            run.emit(run.t, run.y, on)
        while run.t < t_end and not stopped:
            guard += 1
            if guard > limit:
                raise RuntimeError("armature simulation did not settle (too many transitions)")
            before = (run.state, len(run.log))
            if run.state == "free":
                _free_segment(run, t_end, on, method, rtol, n)
            else:
                _rest_segment(run, t_end, on, n, stop, rtol)
            if len(run.log) != before[1] or run.state != before[0]:
                stopped = stop(run)
        if stopped:
            break
    ts = np.concatenate([c[0] for c in run.chunks])
    ys = np.concatenate([c[1] for c in run.chunks], axis=1)
    if ts[-1] == run.t:
        ys[:, -1] = run.y  # a run ending on a stop ends with the state after the stop
    ons = np.concatenate([np.full(c[0].size, int(c[2])) for c in run.chunks]).astype(np.int8)
    cur = pt.current(ys[0], ys[1])
    magnetising = None
    if pt.eddy is not None:   # the terminal current of each piece's switch state and path
        magnetising = cur
        cur = np.concatenate([c[3].terminal(pt.current(c[1][0], c[1][1]), c[2],
                                            c[1][5] if pt.droop else None)
                              for c in run.chunks])
        if ts[-1] == run.t:
            cur[-1] = run.pt.terminal(magnetising[-1:], bool(ons[-1]),
                                      run.y[5:6] if pt.droop else None)[0]
    return Trajectory(time=ts, flux=ys[0], position=ys[1], velocity=ys[2], switch_on=ons,
                      charge=ys[3], square=ys[4], current=np.maximum(cur, 0.0),
                      magnetising_current=magnetising,
                      events=dict(run.events), log=list(run.log), impacts=list(run.impacts),
                      state=run.state, stopped=stopped, bus=ys[5] if pt.droop else None)


# --------------------------------------------------------------------------- references
@dataclass(frozen=True)
class PullInReference:
    """Per-point pull-in figures (s, A) from :func:`pull_in_reference`."""

    seated: bool
    start_time: float
    impact_time: float
    dip_current: float
    seat_time: float
    trajectory: Trajectory


def pull_in_reference(p: ArmatureParams, method: str = "DOP853", rtol: float | None = None,
                      points: int = 40) -> PullInReference:
    """Switch on from rest at the open stop until the armature rests on the seat (or the
    same bound as :func:`coildrive.model.armature_runs.pull_in`)."""
    pt = _Point(p)
    i_inf = pt.v_on / pt.r_on
    if not i_inf > pt.i_start:
        nan = math.nan
        empty = simulate(p, [], method=method, rtol=rtol)
        return PullInReference(False, math.inf, nan, nan, math.inf, empty)
    t_start = float(rise_time(pt.i_start, 0.0, pt.v_on, pt.r_on, pt.coil_open))
    f_inf = pt.f_inf - (pt.preload + pt.load)
    bound = float(time_bound(t_start, pt.l_closed, pt.r_on, pt.mass, pt.stroke, pt.damping, f_inf))
    tr = simulate(p, [(bound, True)], method=method, rtol=rtol, points=points,
                  stop=lambda r: r.state == "seated")
    ev = tr.events
    return PullInReference(tr.state == "seated", ev.get("move", math.nan), ev.get("impact", math.nan),
                           ev.get("dip_current", math.nan), ev.get("seat", math.inf) if tr.state == "seated" else math.inf,
                           tr)


@dataclass(frozen=True)
class ReleaseReference:
    """Per-point release figures (s, A*s, A^2*s) from :func:`release_reference`."""

    opened: bool
    unlatch_time: float
    open_time: float
    zero_time: float
    charge: float
    square: float
    trajectory: Trajectory


def release_reference(p: ArmatureParams, i_off: float, method: str = "DOP853",
                      rtol: float | None = None, points: int = 40) -> ReleaseReference:
    """Turn off ``i_off`` A with the armature seated; run until it rests on the open stop
    and the current is zero (or the bound of :func:`coildrive.model.armature_runs.release`)."""
    pt = _Point(p)
    t_un = float(decay_time(min(pt.i_stay, i_off), i_off, pt.r_off, pt.v_off, pt.coil_closed)) if i_off > pt.i_stay else 0.0
    bound = float(time_bound(t_un, pt.l_closed, pt.r_off, pt.mass, pt.stroke, pt.damping,
                              pt.preload + pt.load))
    tr = simulate(p, [(bound, False)], state="seated", flux=pt.flux_at(i_off, True), method=method,
                  rtol=rtol, points=points,
                  stop=lambda r: r.state == "open" and not r.live)
    ev = tr.events
    return ReleaseReference(tr.state == "open", ev.get("unlatch", 0.0), ev.get("open", math.inf),
                            ev.get("zero", math.inf), float(tr.charge[-1]), float(tr.square[-1]), tr)
