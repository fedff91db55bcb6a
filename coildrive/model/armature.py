"""Moving-armature dynamics, batched over operating points (numpy only, no scipy).

State per point: flux linkage ``lambda`` (V*s), gap ``x`` (m; ``stroke`` open, 0 seated),
velocity ``v = dx/dt`` (m/s; negative while closing), and two running integrals
``q = int i dt`` (A*s) and ``sq = int i^2 dt`` (A^2*s) for the energies. With
``L(x) = L_c / (1 + beta x)`` (see :mod:`coildrive.model.magnet`)::

    i          = lambda (1 + beta x) / L_c
    dlambda/dt = V_on - R_on i                    switch on
               = -(R_off i + V_off)               switch off, while i > 0 (the diode
                                                  blocks: lambda stays 0 once there)
    m dv/dt    = preload + rate (stroke - x) + load - lambda^2 beta / (2 L_c) - c v

``V = R i + L(x) di/dt + i (dL/dx) dx/dt`` is the same electrical law written for
``lambda = L(x) i``; integrating ``lambda`` keeps the state smooth through the fast
change of ``L`` near the seat, and makes the magnetic force independent of the gap.

End stops: at ``x = 0`` the armature stops dead (or rebounds with ``v -> -e v`` when a
restitution ``e`` is given; bouncing ends once the rebound is below
:data:`REST_FRACTION` of the first impact speed); at ``x = stroke`` it stops dead. At a
stop it stays while the net force pushes it into the stop.

While the armature rests at a stop, ``L`` is constant and the current follows the
closed-form RL segments of :mod:`coildrive.model.rl`; only the motion is time-stepped.

The integrator is an embedded Dormand-Prince 5(4) Runge-Kutta pair (the method of
scipy's ``RK45``) written over numpy arrays: every point has its own time, step size
and error control, and all points advance together, one vectorised stage at a time.
Stop events are located inside the accepted step by the cubic Hermite interpolant of
the state and its derivative at both ends. Points whose damping makes the motion stiff
(:func:`is_stiff`) are stepped by a linearly implicit Rosenbrock 2(3) pair instead. The
per-point scipy ``solve_ivp`` path in :mod:`coildrive.model.armature_sim` is the
reference it is tested against.

Units: SI throughout (V, A, ohm, H, m, kg, N, s).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .magnet import fit_gap, stay_current, start_current
from .rl import decay_integrals, decay_time, rise_current, rise_integrals, rise_time

#: Bouncing on the seat ends when the rebound speed is below this fraction of the first
#: impact speed (the rebound then carries under 1e-6 of the impact energy).
REST_FRACTION = 1e-3
#: Most bounces followed on the seat before the armature is taken as seated.
MAX_BOUNCES = 100
#: Integration bound, in multiples of the slowest electrical and mechanical time scales
#: of a point (see :func:`pull_in`): past it an armature that has not arrived is stuck.
BOUND_FACTOR = 20.0
#: Hard cap on integrator steps per flight (never hang).
MAX_STEPS = 20_000

# Flight end codes
RUNNING, SEAT, OPEN, ZERO, BOUND = 0, 1, 2, 3, 4

# Outcome codes (PullInBatch.status, ReleaseBatch.status)
SEATED, NO_START, STALLED = 0, 1, 2
OPENED, NOT_OPEN = 0, 2

# Dormand-Prince 5(4) coefficients (Dormand & Prince 1980; the tableau of scipy's RK45).
_A = (
    (),
    (1 / 5,),
    (3 / 40, 9 / 40),
    (44 / 45, -56 / 15, 32 / 9),
    (19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729),
    (9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656),
    (35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84),
)
DP_B = np.array([35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84, 0.0])
DP_B4 = np.array([5179 / 57600, 0.0, 7571 / 16695, 393 / 640, -92097 / 339200, 187 / 2100,
                  1 / 40])
DP_E = DP_B - DP_B4


@dataclass(frozen=True)
class ArmatureParams:
    """Everything the armature model needs at a set of points (1-D arrays, same length).

    Electrical: ``v_on`` V and ``r_on`` ohm with the switch on; ``r_off`` ohm and
    ``v_off`` V (> 0) while freewheeling. Magnetic: ``l_closed`` H and ``beta`` 1/m of
    ``L(x) = l_closed / (1 + beta x)``. Mechanical: ``stroke`` m, ``mass`` kg,
    ``preload`` N (spring at the open position), ``rate`` N/m, ``load`` N (pushes open),
    ``damping`` N*s/m, ``restitution`` (0..1, at the seat).
    """

    v_on: np.ndarray
    r_on: np.ndarray
    r_off: np.ndarray
    v_off: np.ndarray
    l_closed: np.ndarray
    beta: np.ndarray
    stroke: np.ndarray
    mass: np.ndarray
    preload: np.ndarray
    rate: np.ndarray
    load: np.ndarray
    damping: np.ndarray
    restitution: np.ndarray

    @staticmethod
    def make(**values) -> "ArmatureParams":
        """Broadcast keyword values (floats or arrays) to 1-D arrays of one length."""
        names = [f.name for f in ArmatureParams.__dataclass_fields__.values()]
        unknown = set(values) - set(names)
        if unknown:
            raise TypeError(f"unknown armature parameter(s): {', '.join(sorted(unknown))}")
        arrays = np.broadcast_arrays(*(np.atleast_1d(np.asarray(values[n], float)) for n in names))
        return ArmatureParams(**{n: np.array(a, float).ravel() for n, a in zip(names, arrays)})

    def __len__(self) -> int:
        return self.v_on.size

    def take(self, k) -> "ArmatureParams":
        """The parameters of point(s) ``k`` (an index, slice or mask)."""
        return ArmatureParams(**{n: np.atleast_1d(getattr(self, n)[k])
                                 for n in self.__dataclass_fields__})

    @property
    def l_open(self) -> np.ndarray:
        """Inductance at the open stop in H."""
        return self.l_closed / (1.0 + self.beta * self.stroke)

    @property
    def start_current(self) -> np.ndarray:
        """Least current in A that starts the armature off the open stop."""
        return np.atleast_1d(start_current(self.l_closed, self.beta, self.stroke, self.preload,
                                           self.rate, self.load))

    @property
    def stay_current(self) -> np.ndarray:
        """Least current in A that keeps the armature seated (its drop-out current)."""
        return np.atleast_1d(stay_current(self.l_closed, self.beta, self.stroke, self.preload,
                                          self.rate, self.load))

    def current(self, lam, x) -> np.ndarray:
        """Coil current in A from flux linkage V*s and gap m."""
        return lam * (1.0 + self.beta * x) / self.l_closed

    def closing_force(self, lam) -> np.ndarray:
        """Magnetic force in N pulling shut at flux linkage ``lam``: ``lam^2 beta / (2 L_c)``."""
        return lam * lam * self.beta / (2.0 * self.l_closed)

    def opening_force(self, x) -> np.ndarray:
        """Spring + load force in N pushing open at gap ``x``."""
        return self.preload + self.rate * (self.stroke - x) + self.load

    def reference_scales(self) -> np.ndarray:
        """Scales of (lambda, x, v) for the error control: V*s, m, m/s."""
        i_ref = np.maximum(self.v_on / self.r_on, self.stay_current)
        f_ref = self.preload + self.rate * self.stroke + np.abs(self.load)
        v_ref = np.sqrt(2.0 * np.maximum(f_ref, 1e-12) * self.stroke / self.mass)
        return np.stack([self.l_closed * i_ref, self.stroke, v_ref])


def params_from_loop(arm, lp, l_factor) -> ArmatureParams:
    """:class:`ArmatureParams` at operating points from a drive's ``[armature]`` (an
    :class:`~coildrive.config.Armature`) and a :class:`~coildrive.model.circuit.Loop`.

    ``l_factor`` (the inductance tolerance) scales both measured inductances, so the
    equivalent gap stays and the force constant scales with it.
    """
    l_closed, beta = fit_gap(arm.inductance_open, arm.inductance_closed, arm.stroke)
    return ArmatureParams.make(
        v_on=lp.v_on, r_on=lp.r_on, r_off=lp.r_off, v_off=lp.v_off,
        l_closed=l_closed * np.asarray(l_factor, float), beta=beta, stroke=arm.stroke,
        mass=arm.mass, preload=arm.spring_preload, rate=arm.spring_rate, load=arm.load_force,
        damping=arm.damping, restitution=arm.restitution)


# --------------------------------------------------------------------------- integrator
class _Rhs:
    """Right-hand side ``dy/dt`` for state rows (lambda, x, v, q, sq), vectorised."""

    def __init__(self, p: ArmatureParams, on: np.ndarray, live: np.ndarray):
        self.inv_lc = 1.0 / p.l_closed
        self.beta = p.beta
        self.drive_v = np.where(on, p.v_on, -p.v_off)
        self.drive_r = np.where(on, p.r_on, p.r_off)
        self.live = live.astype(float)
        self.f0 = (p.preload + p.rate * p.stroke + p.load) / p.mass
        self.km = p.rate / p.mass
        self.cm = p.beta * self.inv_lc / (2.0 * p.mass)
        self.dm = p.damping / p.mass

    def jacobian(self, y: np.ndarray) -> np.ndarray:
        """``d(dy/dt)/dy`` per point, shape (N, 5, 5) (rows and columns lambda, x, v, q, sq)."""
        lam, x = y[0], y[1]
        n = lam.size
        di_dl = (1.0 + self.beta * x) * self.inv_lc
        di_dx = lam * self.beta * self.inv_lc
        i = lam * di_dl
        jac = np.zeros((n, 5, 5))
        jac[:, 0, 0] = -self.live * self.drive_r * di_dl
        jac[:, 0, 1] = -self.live * self.drive_r * di_dx
        jac[:, 1, 2] = 1.0
        jac[:, 2, 0] = -2.0 * self.cm * lam
        jac[:, 2, 1] = -self.km
        jac[:, 2, 2] = -self.dm
        jac[:, 3, 0] = di_dl
        jac[:, 3, 1] = di_dx
        jac[:, 4, 0] = 2.0 * i * di_dl
        jac[:, 4, 1] = 2.0 * i * di_dx
        return jac

    def __call__(self, y: np.ndarray) -> np.ndarray:
        lam, x, v = y[0], y[1], y[2]
        i = lam * (1.0 + self.beta * x) * self.inv_lc
        out = np.empty_like(y)
        out[0] = self.live * (self.drive_v - self.drive_r * i)
        out[1] = v
        out[2] = self.f0 - self.km * x - self.cm * lam * lam - self.dm * v
        out[3] = i
        out[4] = i * i
        return out


def _hermite(y0, y1, d0, d1, h, theta):
    """Cubic Hermite interpolant at fraction ``theta`` of a step of length ``h``."""
    t2 = theta * theta
    t3 = t2 * theta
    return ((2 * t3 - 3 * t2 + 1) * y0 + (t3 - 2 * t2 + theta) * h * d0
            + (-2 * t3 + 3 * t2) * y1 + (t3 - t2) * h * d1)


def _root(g0, g1, d0, d1, h, iterations: int = 40):
    """Fraction of the step where the Hermite interpolant of ``g`` reaches 0 from above.

    ``g0 >= 0 > g1``: ``g`` is the distance to a stop (or the flux linkage), so a step
    that starts on the stop (``g0 = 0``, leaving it) looks for the return, not the start.
    Bisection on the cubic.
    """
    lo = np.zeros_like(g0)
    hi = np.ones_like(g0)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        same = _hermite(g0, g1, d0, d1, h, mid) > 0.0
        lo = np.where(same, mid, lo)
        hi = np.where(same, hi, mid)
    return 0.5 * (lo + hi)


_ROS_D = 1.0 / (2.0 + np.sqrt(2.0))
_ROS_E32 = 6.0 + np.sqrt(2.0)


def _rosenbrock_step(rhs: _Rhs, y: np.ndarray, f0: np.ndarray, h: np.ndarray):
    """One step of the Rosenbrock pair of order 2(3) for an autonomous system (Shampine &
    Reichelt 1997): returns the new state, its derivative and the error estimate."""
    w = np.eye(5)[None, :, :] - (h * _ROS_D)[:, None, None] * rhs.jacobian(y)

    def solve(b):
        return np.linalg.solve(w, b.T[:, :, None])[:, :, 0].T

    k1 = solve(f0)
    f1 = rhs(y + 0.5 * h * k1)
    k2 = solve(f1 - k1) + k1
    y_new = y + h * k2
    f2 = rhs(y_new)
    k3 = solve(f2 - _ROS_E32 * (k2 - f1) - 2.0 * (k1 - f0))
    err = (h / 6.0) * (k1 - 2.0 * k2 + k3)
    return y_new, f2, err


#: A point is integrated with the Rosenbrock pair when ``damping / mass`` times its
#: mechanical time scale exceeds this (an explicit step would then be stability-bound).
STIFF_RATIO = 200.0


def is_stiff(p: ArmatureParams, force) -> np.ndarray:
    """Per point: is the damped motion under ``force`` N stiff for an explicit method?"""
    f = np.maximum(np.asarray(force, float), 1e-300)
    mech = np.sqrt(2.0 * p.mass * p.stroke / f) + p.damping * p.stroke / f
    return p.damping / p.mass * mech > STIFF_RATIO


def fly_mixed(p: ArmatureParams, t, y, t_end, active, on, live, stiff: np.ndarray, rtol: float,
              **kw) -> Flight:
    """:func:`fly` with the stiff points stepped by the Rosenbrock pair, the rest by
    Dormand-Prince (two vectorised runs, results merged)."""
    if not np.any(active & stiff):
        return fly(p, t, y, t_end, active, on, live, rtol, **kw)
    if not np.any(active & ~stiff):
        return fly(p, t, y, t_end, active, on, live, rtol, stiff=True, **kw)
    a = fly(p, t, y, t_end, active & ~stiff, on, live, rtol, **kw)
    b = fly(p, t, y, t_end, active & stiff, on, live, rtol, stiff=True, **kw)
    pick = active & stiff
    return Flight(np.where(pick, b.t, a.t), np.where(pick, b.y, a.y), np.where(pick, b.end, a.end),
                  a.steps + b.steps)


@dataclass
class Flight:
    """Result of :func:`fly`: per point the end time s, state (5 x N), why it ended
    (SEAT, OPEN, ZERO, BOUND) and the step count; plus the accepted-step trajectory
    (times and states, one column per point) when asked for."""

    t: np.ndarray
    y: np.ndarray
    end: np.ndarray
    steps: np.ndarray
    path_t: list | None = None
    path_y: list | None = None


def fly(p: ArmatureParams, t: np.ndarray, y: np.ndarray, t_end: np.ndarray, active: np.ndarray,
        on: np.ndarray, live: np.ndarray, rtol: float = 1e-7, record: bool = False,
        query: np.ndarray | None = None, query_y: np.ndarray | None = None,
        track: np.ndarray | None = None, peak: np.ndarray | None = None,
        max_steps: int = MAX_STEPS, stiff: bool = False) -> Flight:
    """Integrate the free armature of every ``active`` point from ``t`` until a stop, the
    current reaching zero (switch off), or ``t_end``.

    ``stiff``: step with the linearly implicit Rosenbrock pair of order 2(3) (Shampine &
    Reichelt 1997, the method of MATLAB's ``ode23s``; L-stable) instead of Dormand-Prince
    -- for a heavily damped armature, whose ``damping / mass`` would hold an explicit
    method to tiny steps (see :func:`is_stiff`).

    Parameters
    ----------
    p : parameters; t : start times s; y : start states (5 x N); t_end : s
    active : points to move; on : switch state per point; live : False where the
    current is blocked at zero (``lambda = 0`` with the switch off)
    rtol : relative tolerance of the error control (per step, max over lambda, x, v)
    record : keep every accepted step (for a waveform)
    query, query_y : times s at which to store the state into ``query_y`` (5 x N) when
    a step passes them
    track, peak : where ``track``, keep the running largest current and its time in
    ``peak`` (2 x N: A, s)
    """
    n = t.size
    t = t.astype(float).copy()
    y = y.astype(float).copy()
    active = active.copy() & (t < t_end)
    end = np.where(active, RUNNING, BOUND)
    steps = np.zeros(n, int)
    rhs = _Rhs(p, on, live)
    scale = rtol * p.reference_scales()
    h = np.maximum(1e-4 * (t_end - np.where(active, t, 0.0)), 1e-15)
    k1 = rhs(y)
    path_t = [t.copy()] if record else None
    path_y = [y.copy()] if record else None
    for _ in range(max_steps):
        if not active.any():
            break
        h = np.where(active, np.minimum(h, t_end - t), 0.0)
        if stiff:
            y_new, k7, err = _rosenbrock_step(rhs, y, k1, h)
        else:
            ks = [k1]
            for row in _A[1:]:
                acc = row[0] * ks[0]
                for a, k in zip(row[1:], ks[1:]):
                    if a:
                        acc = acc + a * k
                ks.append(rhs(y + h * acc))
            y_new = y + h * sum(b * k for b, k in zip(DP_B[:6], ks[:6]))
            k7 = rhs(y_new)
            ks.append(k7)
            err = h * sum(e * k for e, k in zip(DP_E, ks) if e)
        norm = np.max(np.abs(err[:3]) / (scale + rtol * np.abs(y[:3])), axis=0)
        ok = active & (norm <= 1.0)
        steps += active
        # stop events inside accepted steps
        seat = ok & (y_new[1] < 0.0)
        opn = ok & (y_new[1] > p.stroke)
        zero = ok & ~on & live & (y_new[0] < 0.0)
        hit = seat | opn | zero
        theta = np.ones(n)
        kind = np.zeros(n, int)
        y_full = y_new
        if hit.any():
            for mask, g0, g1, d0, d1, code in (
                    (seat, y[1], y_new[1], k1[1], k7[1], SEAT),
                    (opn, p.stroke - y[1], p.stroke - y_new[1], -k1[1], -k7[1], OPEN),
                    (zero, y[0], y_new[0], k1[0], k7[0], ZERO)):
                if mask.any():
                    th = np.where(mask, _root(g0, g1, d0, d1, h), 1.0)
                    first = mask & (th < theta)
                    theta = np.where(first, th, theta)
                    kind = np.where(first, code, kind)
            y_hit = _hermite(y, y_new, k1, k7, h, theta)
            y_hit[1] = np.where(kind == SEAT, 0.0, np.where(kind == OPEN, p.stroke, y_hit[1]))
            y_hit[0] = np.where(kind == ZERO, 0.0, y_hit[0])
            y_new = np.where(hit, y_hit, y_new)
        t_new = t + theta * h
        if query is not None:
            qmask = ok & (t < query) & (query <= t_new)
            if qmask.any():
                th = np.where(qmask, (query - t) / np.where(h > 0, h, 1.0), 0.0)
                yq = _hermite(y, y_full, k1, k7, h, th)
                query_y[:, qmask] = yq[:, qmask]
        if track is not None:
            tr = ok & track
            if tr.any():
                i_new = p.current(y_new[0], y_new[1])
                up = tr & (i_new > peak[0])
                peak[0] = np.where(up, i_new, peak[0])
                peak[1] = np.where(up, t_new, peak[1])
        # accept
        t = np.where(ok, t_new, t)
        y = np.where(ok, y_new, y)
        k1 = np.where(ok & ~hit, k7, k1)
        if hit.any():
            k1 = np.where(hit, rhs(y), k1)
        end = np.where(seat | opn | zero, kind, end)
        done_t = ok & ~hit & (t >= t_end)
        end = np.where(done_t, BOUND, end)
        if record:
            path_t.append(np.where(ok, t, np.nan))
            path_y.append(np.where(ok, y, np.nan))
        active = active & ~hit & ~done_t
        with np.errstate(divide="ignore"):
            fac = np.clip(0.9 * norm ** (-1.0 / 3.0 if stiff else -0.2), 0.2, 5.0)
        fac = np.where(norm <= 1.0, fac, np.minimum(fac, 0.9))
        h = np.where(active, h * fac, h)
        tiny = active & (h < 1e-12 * np.maximum(np.abs(t_end), 1e-9))
        end = np.where(tiny, BOUND, end)
        active = active & ~tiny
    end = np.where(active, BOUND, end)
    return Flight(t, y, end, steps, path_t, path_y)


# --------------------------------------------------------------------------- pull-in
@dataclass(frozen=True)
class PullInBatch:
    """Pull-in from rest at the open stop with the switch held on (arrays over points).

    ``status``: SEATED, NO_START (the coil never reaches the start current) or STALLED
    (not seated within the bound; ``stall_gap_m`` says where it was). Times in s from
    switch-on; currents in A. ``start_*``: the armature leaves the open stop.
    ``impact_time``: first touch of the seat; ``dip_current``/``dip_time``: the current
    at that moment, where the motional back-EMF has pulled it down to its local
    minimum; ``hump_current`` is the largest current before it (``dip_depth`` =
    hump - dip, 0 when the current never fell). ``seat_time``: at rest on the seat (after
    any bounces). ``peak_end_current``: the current at the asked time (end of the peak
    phase). ``steps``: integrator steps taken.
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

    @property
    def dip_depth(self) -> np.ndarray:
        return np.where(np.isfinite(self.dip_current), np.maximum(self.hump_current - self.dip_current, 0.0), np.nan)


def _time_bound(t0, l_closed, r, mass, stroke, damping, force):
    """Start + BOUND_FACTOR x (electrical time constant + free-flight and damped-travel
    times under ``force`` N)."""
    f = np.maximum(force, 1e-300)
    mech = np.sqrt(2.0 * mass * stroke / f) + damping * stroke / f
    return t0 + BOUND_FACTOR * (l_closed / r + mech)


def pull_in(p: ArmatureParams, peak_time=None, rtol: float = 1e-7, max_rounds: int = 4 * MAX_BOUNCES) -> PullInBatch:
    """Switch on at t = 0 from rest at the open stop and follow the armature until seated.

    The rise before motion is closed form with the open inductance (the armature rests
    on the open stop while the force is below spring preload + load); the motion is
    integrated by :func:`fly`. ``peak_time`` (s, scalar or per point) asks for the
    current at that time.
    """
    n = len(p)
    i_inf = p.v_on / p.r_on
    i_start = p.start_current
    moves = i_inf > i_start
    l_open = p.l_open
    t_start = np.where(moves, rise_time(np.where(moves, i_start, 0.0), 0.0, p.v_on, p.r_on, l_open), np.inf)
    q0, s0 = rise_integrals(np.where(moves, t_start, 0.0), 0.0, p.v_on, p.r_on, l_open)
    lam_start = l_open * i_start
    lam_stay = p.l_closed * p.stay_current
    y = np.stack([np.where(moves, lam_start * (1.0 + 1e-12), 0.0), p.stroke.copy(), np.zeros(n), q0, s0])
    t = np.where(moves, t_start, 0.0)
    f_inf = p.closing_force(l_open * i_inf) - p.opening_force(p.stroke)
    bound = np.where(moves, _time_bound(t_start, p.l_closed, p.r_on, p.mass, p.stroke, p.damping, f_inf), np.inf)
    status = np.where(moves, -1, NO_START)
    nan = np.full(n, np.nan)
    impact_time, impact_speed, dip_current = nan.copy(), nan.copy(), nan.copy()
    seat_time = np.full(n, np.inf)
    seat_current = nan.copy()
    stall_gap = np.where(moves, np.nan, p.stroke)
    bounces = np.zeros(n, int)
    steps = np.zeros(n, int)
    peak = np.stack([np.where(moves, i_start, 0.0), np.where(moves, t_start, 0.0)])
    want = None if peak_time is None else np.broadcast_to(np.asarray(peak_time, float), (n,)).copy()
    query_y = np.full((5, n), np.nan)
    active = moves.copy()
    on = np.ones(n, bool)
    live = np.ones(n, bool)
    stiff = is_stiff(p, np.where(moves, f_inf, 1.0))
    for _ in range(max_rounds):
        if not active.any():
            break
        fl = fly_mixed(p, t, y, bound, active, on, live, stiff, rtol, query=want, query_y=query_y,
                 track=active & np.isnan(impact_time), peak=peak)
        steps += fl.steps
        t = np.where(active, fl.t, t)
        y = np.where(active, fl.y, y)
        lam, x, v = y[0], y[1], y[2]
        seat = active & (fl.end == SEAT)
        first = seat & np.isnan(impact_time)
        impact_time = np.where(first, t, impact_time)
        impact_speed = np.where(first, -v, impact_speed)
        dip_current = np.where(first, p.current(lam, 0.0), dip_current)
        rebound = p.restitution * np.abs(v)
        bounce = seat & (rebound >= REST_FRACTION * impact_speed) & (bounces < MAX_BOUNCES) & (rebound > 0)
        bounces += bounce
        y[2] = np.where(bounce, rebound, np.where(seat, 0.0, y[2]))
        rest = seat & ~bounce
        holds = rest & (lam >= lam_stay)
        status = np.where(holds, SEATED, status)
        seat_time = np.where(holds, t, seat_time)
        seat_current = np.where(holds, p.current(lam, 0.0), seat_current)
        active = active & ~holds
        # At the open stop with the force still too weak: rest there until the current
        # (closed form, open inductance) reaches the start current again.
        opn = active & (fl.end == OPEN)
        if opn.any():
            y[2] = np.where(opn, 0.0, y[2])
            stuck = opn & (lam <= lam_start)
            if stuck.any():
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
    dip_time = np.where(seated, impact_time, np.nan)
    dip_current = np.where(seated, dip_current, np.nan)
    hump = np.where(seated, np.maximum(peak[0], dip_current), np.nan)
    # current at the end of the peak phase
    if want is None:
        peak_end = np.full(n, np.nan)
    else:
        before = want < np.where(moves, t_start, np.inf)
        after = seated & (want >= seat_time)
        i_seat = np.where(seated, seat_current, 0.0)
        peak_end = np.where(
            before, rise_current(want, 0.0, p.v_on, p.r_on, l_open),
            np.where(after, rise_current(np.where(after, want - seat_time, 0.0), i_seat, p.v_on,
                                         p.r_on, p.l_closed),
                     p.current(query_y[0], query_y[1])))
    return PullInBatch(status=status, start_current=i_start, start_time=t_start,
                       impact_time=np.where(seated, impact_time, np.nan), impact_speed=impact_speed,
                       dip_current=dip_current, dip_time=dip_time, hump_current=hump,
                       hump_time=np.where(seated, peak[1], np.nan), seat_time=seat_time,
                       seat_current=seat_current, bounces=bounces, stall_gap=stall_gap,
                       peak_end_current=peak_end, bound=bound, steps=steps)


def peak_current_closed_form(p: ArmatureParams, pin: PullInBatch, peak_time):
    """The current in A at ``peak_time`` s from a finished :func:`pull_in` without
    integrating again, or ``None`` where that needs the trajectory (during the motion).

    Before the armature moves it is the open-inductance rise; once it rests on the seat,
    the closed-inductance rise from the seat current.
    """
    want = np.broadcast_to(np.asarray(peak_time, float), (len(p),))
    before = want < pin.start_time
    after = (pin.status == SEATED) & (want >= pin.seat_time)
    if not np.all(before | after):
        return None
    i_seat = np.where(after, pin.seat_current, 0.0)
    return np.where(before, rise_current(want, 0.0, p.v_on, p.r_on, p.l_open),
                    rise_current(np.where(after, want - pin.seat_time, 0.0), i_seat, p.v_on,
                                 p.r_on, p.l_closed))


# --------------------------------------------------------------------------- release
@dataclass(frozen=True)
class ReleaseBatch:
    """Release from the seat after turning off ``i_off`` A (arrays over points).

    ``status``: OPENED or NOT_OPEN (not back at the open stop within the bound;
    ``stall_gap_m`` where it was). Times in s from turn-off: ``unlatch_time`` (the
    armature leaves the seat: the current has decayed to the stay current),
    ``open_time`` (at rest on the open stop), ``zero_time`` (the current reaches zero).
    ``charge``/``square``: ``int i dt`` A*s and ``int i^2 dt`` A^2*s from turn-off to
    zero current (for the freewheel energy).
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


def release(p: ArmatureParams, i_off, rtol: float = 1e-7, max_rounds: int = 4 * MAX_BOUNCES) -> ReleaseBatch:
    """Turn off at t = 0 with the armature seated and ``i_off`` A flowing; follow the
    freewheel decay and the armature until it rests on the open stop."""
    n = len(p)
    i_off = np.broadcast_to(np.asarray(i_off, float), (n,)).copy()
    i_stay = p.stay_current
    lam_stay = p.l_closed * i_stay
    lam_start = p.l_open * p.start_current
    held = i_off > i_stay
    t_un = np.where(held, decay_time(np.minimum(i_stay, i_off), i_off, p.r_off, p.v_off, p.l_closed), 0.0)
    q0, s0 = decay_integrals(t_un, i_off, p.r_off, p.v_off, p.l_closed)
    lam = np.where(held, lam_stay * (1.0 - 1e-12), p.l_closed * i_off)
    y = np.stack([lam, np.zeros(n), np.zeros(n), q0, s0])
    t = t_un.copy()
    live = lam > 0
    zero_time = np.where(live, np.nan, t_un)
    bound = _time_bound(t_un, p.l_closed, p.r_off, p.mass, p.stroke, p.damping, p.opening_force(p.stroke))
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
        y[0] = np.where(zero, 0.0, y[0])
        opn = active & (fl.end == OPEN)
        y[2] = np.where(opn, 0.0, y[2])
        stays = opn & (y[0] <= lam_start)
        open_time = np.where(stays, t, open_time)
        status = np.where(stays, OPENED, status)
        # current still flowing at the open stop: the rest of the decay is closed form
        tail = stays & live
        if tail.any():
            i_o = p.current(y[0], p.stroke)
            dz = decay_time(0.0, i_o, p.r_off, p.v_off, p.l_open)
            dq, ds = decay_integrals(np.where(tail, dz, 0.0), i_o, p.r_off, p.v_off, p.l_open)
            zero_time = np.where(tail, t + dz, zero_time)
            y[3] = np.where(tail, y[3] + dq, y[3])
            y[4] = np.where(tail, y[4] + ds, y[4])
        active = active & ~stays
        seat = active & (fl.end == SEAT)
        y[2] = np.where(seat, p.restitution * np.abs(y[2]), y[2])
        ended = active & (fl.end == BOUND)
        status = np.where(ended, NOT_OPEN, status)
        stall_gap = np.where(ended, y[1], stall_gap)
        active = active & ~ended
    status = np.where(status < 0, NOT_OPEN, status)
    stall_gap = np.where((status == NOT_OPEN) & np.isnan(stall_gap), y[1], stall_gap)
    return ReleaseBatch(status=status, unlatch_time=t_un, open_time=open_time,
                        zero_time=np.where(np.isnan(zero_time), np.inf, zero_time),
                        charge=y[3], square=y[4], stall_gap=stall_gap, bound=bound, steps=steps)


# --------------------------------------------------------------------------- hold
#: The PWM ripple may be averaged by the armature's mass (force from the RMS current)
#: when the largest lift it could cause within one period is below this fraction of the
#: smaller of the stroke and the equivalent gap; otherwise the ripple bottom counts.
CHATTER_FRACTION = 0.01


def hold_force_current(p: ArmatureParams, i_min, rms, period):
    """The current whose force holds the armature during a PWM hold, A, and the lift
    bound, m.

    The magnetic force goes with ``i^2``, so over one period the seat feels
    ``(|dL/dx| / 2) * I_rms^2`` on average. The armature, at rest on the seat, can only
    move off it while the current is below the stay current; its opening acceleration is
    at most ``(spring + load at the seat) / m``, so in one period it lifts by at most
    ``a T^2 / 2``. Where that bound is below :data:`CHATTER_FRACTION` of
    ``min(stroke, g0)`` the mass averages the ripple and the RMS current counts; where it
    is not, the ripple bottom ``i_min`` must hold the armature on its own.
    """
    i_min = np.asarray(i_min, float)
    below = i_min < p.stay_current
    accel = p.opening_force(0.0) / p.mass
    lift = np.where(below, 0.5 * accel * np.asarray(period, float) ** 2, 0.0)
    with np.errstate(divide="ignore"):
        g0 = np.where(p.beta > 0, 1.0 / np.where(p.beta > 0, p.beta, 1.0), np.inf)
    small = lift <= CHATTER_FRACTION * np.minimum(p.stroke, g0)
    return np.where(small, np.asarray(rms, float), i_min), lift
