"""The release of a moving armature on a full bridge on the drooping bus.

At the turn-off all four switches open and the coil's current flows on through two body
diodes back into the bus, behind the source's resistance ``R_s`` with the bulk capacitor
``C`` across it (a source that takes current back, ``supply.sink = true``), while the
armature lets go. The capacitor's voltage ``u`` is a sixth state of the armature's run
(as in the pull-in, :func:`coildrive.model.armature_runs.pull_in`)::

    dlambda/dt = -(u + 2 V_d) - R_off i          i = lambda (1 + beta x) / L_c
    C du/dt    = (V_s - u)/R_s + i               (while i > 0; the diodes block at 0)

A supply that cannot sink (``supply.sink = false``: an ideal one-way diode in its feed)
feeds the bus only while it is below ``V_s``: ``max(V_s - u, 0)/R_s``; above it the
returned current charges ``C`` alone, and the bus stays where the current stops.
    m dv/dt    = F_spring(x) + F_load - beta lambda^2 / (2 L_c) - d v,   dx/dt = v

The armature rests on the seat (the flux held, :func:`~coildrive.model.armature_flight.fly`
with ``held``) until the flux falls to the stay current's; it then flies to the open stop
(bounces on the seat as in :func:`~coildrive.model.armature_runs.release`), the current
stopping at its first zero; a current still flowing at the open stop decays on there,
the armature held. Every stretch is the same batched integrator (no closed form with the
motion). The motion feeds energy back: at constant flux the spring's work raises the
field's energy ``lambda^2 (x + g0) / (2 K)``, so the bus rises higher than under a still
coil's decay and the current lingers.

With the open and seated curves (``p.curves``, :mod:`coildrive.model.gap_curves`) the
current and the force are the curves' (``i(lambda, x)``, the co-energy force); nothing
else changes. With an eddy term (``p.eddy``: ``R_e`` across the magnetising branch)
``lambda`` and ``i`` are the branch's and the branch sees the loop's Thevenin pair::

    dlambda/dt = -k (u + 2 V_d + R_off i)        k = R_e / (R_off + R_e)
    i_t        = (R_e i - u - 2 V_d) / (R_off + R_e)   (the terminal current: into the bus)

while ``i_t > 0``; at its zero the diodes block (the steppers' event) and the flux dies on
through ``R_e`` alone (``dlambda/dt = -R_e i``), the bus relaxing without the coil. That
may come while the armature is seated (then it lets go later, on the flux's tail). The
charge, ``int i^2 dt``, the zero time and the bus then are the terminal current's. The
run carries a seventh state with the term, the eddy resistance's loss ``int R_e (i -
i_t)^2 dt`` (``i_t`` 0 once blocked); the field's energy left when the run ends (the
armature on the open stop, the diodes blocked) dies through ``R_e`` too, so
``eddy_energy`` is the loss of the whole release, and ``block_current`` the magnetising
current at the diodes' block, ``(u + 2 V_d)/R_e`` with the bus then.

``release(record=...)`` keeps one point's run as samples (``simulate`` draws the release
from them).

Units: SI throughout (V, A, ohm, H, m, kg, N, s, F).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from .armature import (BOUND_FACTOR, MAX_BOUNCES, NOT_OPEN, OPENED, START, ZERO, ArmatureParams,
                       time_bound)
from .armature_flight import _hermite, _Rhs, fly_mixed, is_stiff
from .armature_runs import ReleaseBatch, bounce_or_stall, bus_time_scale, open_stop, settle_status


@dataclass(frozen=True)
class BusRelease:
    """:func:`release` 's result: ``run`` the release (times s from the turn-off, the
    charge ``int i dt`` A*s and ``int i^2 dt`` A^2*s to zero current) and, per point, the
    highest bus ``highest_bus`` V (the capacitor's highest over the run, or the source's
    ``V_s`` it relaxes back to, if higher) with ``highest_bus_time`` s (``inf`` when
    that is ``V_s``), and the bus when the current stops ``bus_at_zero`` V. ``path``
    (``record``, one point): the run as samples, ``(time s, state 6 x m, terminal current
    A)`` -- the state's rows ``lambda, x, v, q, sq, u`` (and the eddy loss with the term);
    else ``None``. With an eddy term (else ``None``): ``eddy_energy`` J, the eddy
    resistance's loss over the whole release (the flux's tail to zero), and
    ``block_current`` A, the magnetising current where the diodes block."""

    run: ReleaseBatch
    highest_bus: np.ndarray
    highest_bus_time: np.ndarray
    bus_at_zero: np.ndarray
    path: tuple | None = None
    eddy_energy: np.ndarray | None = None
    block_current: np.ndarray | None = None


def release(p: ArmatureParams, i_off, v0, v_diodes, rtol: float = 1e-7,
            max_rounds: int = 4 * MAX_BOUNCES, sink: bool = True, start=None,
            record: int = 0, drain=None) -> BusRelease:
    """Turn off at t = 0 with the armature seated, ``i_off`` A flowing and the bus at
    ``v0`` V (at most the source's ``p.v_on``); ``v_diodes`` V the two body diodes'
    drop ``2 V_d``. ``p``: the release loop's points on the drooping bus (``p.droops``;
    a linear coil or its curves, an eddy term too (``i_off`` then the magnetising
    current); ``r_off`` the coil's path, ``v_on`` the source); ``sink``: False, a supply
    that cannot sink (module docstring). ``start``: ``(lambda Wb, x m, v m/s)`` per point
    in place of the seated coil at ``i_off`` (an armature caught off the seat by the
    turn-off flies from there; ``i_off`` unused). ``record``: samples per integrator step
    of the run (one point: ``path``, the steps' cubic Hermite interpolants); 0, none.
    ``drain``: A per point drawn off the bus besides throughout (a boost converter recharging
    from it; :class:`~coildrive.model.armature_flight._Rhs`), or ``None``."""
    if not p.droops:
        raise ValueError("the bridge's release on the drooping bus: R_s > 0")
    n = len(p)
    i_off, v0, v_d2 = (np.broadcast_to(np.asarray(a, float), (n,)).copy() for a in (i_off, v0, v_diodes))
    lam_stay = p.flux_closed(p.stay_current)
    lam_start = p.flux_open(p.start_current)
    zeros = np.zeros(n)
    loss = [zeros] if p.eddy is not None else []    # the eddy loss, a seventh state
    if start is None:
        y = np.stack([p.flux_closed(i_off), zeros, zeros, zeros, zeros, v0, *loss])
    else:
        y = np.stack([*(np.broadcast_to(np.asarray(a, float), (n,)) for a in start), zeros, zeros, v0, *loss])
    i_m = p.current(y[0], y[1])
    on_seat = (y[1] <= 0.0) & (y[2] <= 0.0)
    off = np.zeros(n, bool)
    ones = np.ones(n, bool)
    # with an eddy term the diodes conduct while the terminal current (R_e i - v - 2 V_d) /
    # (R_off + R_e) is positive: at once blocked where the magnetising current is below that
    live = i_m > (0.0 if p.eddy is None else (v0 + v_d2) / p.eddy)
    high = np.stack([v0.copy(), zeros.copy()])
    # the electrical decay against a bus no lower than min(v0, V_s), the flight, R_s C
    bound = (time_bound(zeros, p.l_closed, p.r_off, p.mass, p.stroke, p.damping, p.opening_force(p.stroke))
             + BOUND_FACTOR * bus_time_scale(p))
    stiff = is_stiff(p, p.opening_force(p.stroke))
    steps = np.zeros(n, int)
    t = zeros.copy()
    status = np.full(n, -1)
    stall_gap = np.full(n, np.nan)
    zero_time = np.where(live, np.inf, 0.0)
    bus_zero = np.where(live, np.nan, v0)
    pieces = [] if record else None

    def fly(t, y, t_end, active, live, **kw):
        fl = fly_mixed(p, t, y, t_end, active, off, live, stiff, rtol, returns=v_d2, high=high, sink=sink,
                       record=bool(record), drain=drain, **kw)
        if record:
            pieces.append((fl, live.copy(), kw.get("held")))
        return fl

    def advance(mask, **kw):
        """Fly the points ``mask`` on to the bound or their flight's end; where their
        current stops there (the diodes block), note when and the bus then."""
        nonlocal t, y, steps, zero_time, bus_zero, live
        fl = fly(t, y, bound, mask, live, **kw)
        steps += fl.steps
        t = np.where(mask, fl.t, t)
        y = np.where(mask, fl.y, y)
        zero = mask & (fl.end == ZERO)
        zero_time = np.where(zero, t, zero_time)
        bus_zero = np.where(zero, y[5], bus_zero)
        live = live & ~zero
        return fl, zero

    # seated until the flux falls to the stay current's (the armature held on the seat)
    seated = (live | (p.eddy is not None)) & on_seat & (y[0] > lam_stay)
    for _ in range(2):   # (an eddy term: the terminal current may stop first, the flux held on)
        if not seated.any():
            break
        fl, zero = advance(seated, held=ones, flux_down=lam_stay)
        stuck = seated & ~zero & (fl.end != START)   # (never within the bound: it stays seated)
        status = np.where(stuck, NOT_OPEN, status)
        stall_gap = np.where(stuck, 0.0, stall_gap)
        left = seated & (fl.end == START)
        y[0] = np.where(left, np.minimum(y[0], lam_stay * (1.0 - 1e-12)), y[0])
        seated = zero
    unlatch = t.copy()
    open_time = np.full(n, np.inf)
    active = status < 0
    for _ in range(max_rounds):
        if not active.any():
            break
        fl, zero = advance(active)
        if p.eddy is None:   # (with an eddy term the flux outlasts the terminal current)
            y[0] = np.where(zero, 0.0, y[0])
        stays, open_time, status = open_stop(fl.end, active, y, t, lam_start, open_time, status)
        active = active & ~stays
        active, status, stall_gap = bounce_or_stall(p, fl.end, active, y, status, stall_gap)
    status, stall_gap = settle_status(status, stall_gap, y)
    # current still flowing at the open stop: it decays on into the bus, the armature held
    tail = (status == OPENED) & live
    if tail.any():
        fl = fly(t, y, np.maximum(bound, t) + bound, tail, live, held=ones)
        steps += np.where(tail, fl.steps, 0)
        done = tail & (fl.end == ZERO)
        zero_time = np.where(done, fl.t, zero_time)
        bus_zero = np.where(done, fl.y[5], bus_zero)
        y = np.where(tail, fl.y, y)
    v_s = p.v_on
    above = high[0] > v_s
    run = ReleaseBatch(status=status, unlatch_time=unlatch, open_time=open_time, zero_time=zero_time,
                       charge=y[3], square=y[4], stall_gap=stall_gap, bound=bound, steps=steps)
    eddy_energy = block = None
    if p.eddy is not None:   # the flux left at the end dies through R_e (the armature at rest)
        eddy_energy = y[6] + p.field_energy(np.maximum(y[0], 0.0), y[1])
        block = (bus_zero + v_d2) / p.eddy
    return BusRelease(run=run, highest_bus=np.where(above, high[0], v_s),
                      highest_bus_time=np.where(above, high[1], np.inf), bus_at_zero=bus_zero,
                      path=None if not record else _path(p, pieces, v_d2, sink, record, drain),
                      eddy_energy=eddy_energy, block_current=block)


def _path(p: ArmatureParams, pieces, v_d2, sink: bool, dense: int, drain=None) -> tuple:
    """One point's run as samples (:class:`BusRelease`'s ``path``) from its flights'
    accepted steps (``pieces``: each flight, its ``live`` and ``held``), ``dense`` samples a
    step on each step's cubic Hermite interpolant (the slopes the run's right-hand side)."""
    if len(p) != 1:
        raise ValueError("a recorded release is one point's")
    ts, ys, cur = [], [], []
    for fl, live, held in pieces:
        t = np.array([a[0] for a in fl.path_t])
        y = np.stack([a[:, 0] for a in fl.path_y], axis=1)
        keep = np.isfinite(t)
        t, y = t[keep], y[:, keep]
        if t.size < 2:
            continue
        rhs = _Rhs(p, np.zeros(1, bool), live, held, v_d2, sink, drain)
        d = rhs(y)
        h = np.diff(t)
        theta = (np.arange(1, dense + 1) / dense)[:, None]
        yy = _hermite(y[:, None, :-1], y[:, None, 1:], d[:, None, :-1], d[:, None, 1:], h, theta)
        tt = t[:-1] + theta * h
        order = np.argsort(tt.T.ravel(), kind="stable")
        tt = tt.T.ravel()[order]
        yy = np.transpose(yy, (0, 2, 1)).reshape(y.shape[0], -1)[:, order]
        if not ys:   # the turn-off's own sample
            ts.append(t[:1])
            ys.append(y[:, :1])
            i_t = rhs.terminal(p.current(y[0, :1], y[1, :1]), y[5, :1])
            cur.append(np.maximum(i_t, 0.0) if live[0] else np.zeros(1))
        ts.append(tt)
        ys.append(yy)
        i_t = rhs.terminal(p.current(yy[0], yy[1]), yy[5])
        cur.append(np.maximum(i_t, 0.0) if live[0] else np.zeros_like(tt))
    return np.concatenate(ts), np.concatenate(ys, axis=1), np.concatenate(cur)


def release_over(p: ArmatureParams, i_off, lowest, highest, v_diodes, starts: int,
                 rtol: float = 1e-7, sink: bool = True, drains=()) -> BusRelease:
    """:func:`release` from ``starts`` starting buses evenly over ``[lowest, highest]`` V
    per point (the range the bus can be in at the turn-off), all in one batch; per point
    each figure the worst over the starts: the latest unlatch, open stop and zero current,
    the most charge and ``int i^2 dt``, the highest bus (its time and the bus at zero
    current from the start that gives it); a point that fails to open from any start
    fails (``NOT_OPEN``, its gap from that start); with an eddy term the most eddy loss and
    the highest block current.

    ``drains``: constant currents (A per point) something else draws off the bus during the
    release -- a boost converter recharging from it -- each run from every start too, the
    worst over them all (and the bus with nothing drawn): a supply that sinks behind ``R_s``
    with ``I`` drawn off its bus is the source ``V_s - R_s I`` (Thevenin: ``C du/dt = (V_s -
    u)/R_s - I + i = (V_s - R_s I - u)/R_s + i``, exact); one that cannot sink (its feed
    ``max(V_s - u, 0)/R_s``) has no such source: the run's ``drain``."""
    n = len(p)
    lo, hi = (np.broadcast_to(np.asarray(a, float), (n,)) for a in (lowest, highest))
    drawn = [np.zeros(n)] + [np.broadcast_to(np.asarray(d, float), (n,)) for d in drains]
    v0 = np.concatenate([lo + (hi - lo) * k / max(starts - 1, 1) for k in range(starts)] * len(drawn))
    each = starts
    starts = starts * len(drawn)
    idx = np.tile(np.arange(n), starts)
    q = p.take(idx)
    drain = None
    if drains and sink:
        q = replace(q, v_on=np.concatenate([np.tile(p.v_on - p.source_resistance * d, each) for d in drawn]))
    elif drains:
        drain = np.concatenate([np.tile(d, each) for d in drawn])
    r = release(q, np.tile(np.broadcast_to(np.asarray(i_off, float), (n,)), starts), v0,
                np.tile(np.broadcast_to(np.asarray(v_diodes, float), (n,)), starts), rtol, sink=sink, drain=drain)
    b = r.run

    def worst(a):
        return np.max(np.reshape(a, (starts, n)), axis=0)

    status = np.reshape(b.status, (starts, n))
    failed = status != OPENED
    gap = np.where(failed, np.reshape(b.stall_gap, (starts, n)), -np.inf).max(axis=0)
    k_bus = np.argmax(np.reshape(r.highest_bus, (starts, n)), axis=0)
    cols = np.arange(n)
    run = ReleaseBatch(status=np.where(failed.any(axis=0), NOT_OPEN, OPENED),
                       unlatch_time=worst(b.unlatch_time), open_time=worst(b.open_time),
                       zero_time=worst(b.zero_time), charge=worst(b.charge), square=worst(b.square),
                       stall_gap=np.where(failed.any(axis=0), gap, np.nan), bound=worst(b.bound),
                       steps=np.reshape(b.steps, (starts, n)).sum(axis=0))
    eddy_energy, block = ((None, None) if r.eddy_energy is None
                          else (worst(r.eddy_energy), worst(r.block_current)))
    return BusRelease(run=run, highest_bus=worst(r.highest_bus),
                      highest_bus_time=np.reshape(r.highest_bus_time, (starts, n))[k_bus, cols],
                      bus_at_zero=np.reshape(r.bus_at_zero, (starts, n))[k_bus, cols],
                      eddy_energy=eddy_energy, block_current=block)
