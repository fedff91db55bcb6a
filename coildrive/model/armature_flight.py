"""The integrators of the moving-armature equations (:mod:`coildrive.model.armature`).

The integrator is an embedded Dormand-Prince 5(4) Runge-Kutta pair (the method of
scipy's ``RK45``) written over numpy arrays: every point has its own time, step size
and error control, and all points advance together, one vectorised stage at a time.
Stop events are located inside the accepted step by the cubic Hermite interpolant of
the state and its derivative at both ends. Points whose damping makes the motion stiff
(:func:`is_stiff`) are stepped by a linearly implicit Rosenbrock 2(3) pair instead. The
per-point scipy ``solve_ivp`` path in :mod:`coildrive.model.armature_sim` is the
reference it is tested against.

One point at a time (:func:`fly_point`). Simulating one actuation whose hold lets the
armature lift means one short flight per PWM half period -- over a thousand for a
0.037 s hold at 25 kHz, each of a few steps -- and on 1-element arrays numpy's per-call
overhead (microseconds per ufunc, some 40 ufuncs per stage) is nearly all the cost: such
a run took seconds. Measured before choosing (``benchmarks/bench_armature.py``), two
remedies were open: fewer, longer flights (integrating across the PWM edges of a hold)
or the same algorithm without numpy. The first changes the step sequence -- the right-
hand side jumps at every edge, so the flight must stop there anyway, and a step size
carried across an edge gives different (if equally accurate) numbers, not the batch's.
So a batch of one point is integrated by :func:`fly_point`: the same Dormand-Prince
tableau, error norm, step control, Hermite stop location and Rosenbrock pair, written on
Python floats operation for operation in the batch's order. The explicit path gives the
batch's numbers bit for bit; the Rosenbrock path differs by rounding (its 3 x 3 solve is
our own elimination, not LAPACK). The drop-out actuation of
``benchmarks/bench_armature.py`` ran 15-18x faster (0.24 s instead of 3.5-4.3 s). Many
points still go through the numpy batch, unchanged.

Units: SI throughout (V, A, ohm, H, m, kg, N, s).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .armature import BOUND, OPEN, RUNNING, SEAT, START, TRIP, ZERO, ArmatureParams

#: Hard cap on integrator steps per flight (never hang).
MAX_STEPS = 20_000
#: A boosted peak's threshold on a coil with curves found past this fraction of a step: the
#: step is redone short of it (:func:`fly`), so the event lands in a step this much shorter
#: (any coil: a crest over the threshold that only the step's cubic finds, past this
#: fraction, is stepped to and the integrated current decides)
TRIP_REDO = 0.01

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


# --------------------------------------------------------------------------- integrator
class _Rhs:
    """Right-hand side ``dy/dt`` for state rows (lambda, x, v, q, sq), vectorised; on a
    drooping bus (``p.droops``) a sixth row, the capacitor's voltage ``u`` V::

        dlambda/dt = u - R_on i                      switch on (the bus feeds the coil)
        C du/dt    = (V_s - u)/R_s - i [switch on]   (the freewheel path draws nothing)

    A full bridge's fast decay on the drooping bus (``returns``: the two body diodes' drop
    ``2 V_d`` V per point) pushes the current back into the bus instead, switched off::

        dlambda/dt = -(u + 2 V_d) - R_off i
        C du/dt    = (V_s - u)/R_s + i           (a supply that cannot sink, ``sink`` False:
                                                 max(V_s - u, 0)/R_s, its feed one-way)

    ``drain`` (A per point): a constant current something else draws off the bus besides
    (a boost converter recharging from it), ``- drain`` in ``C du/dt``: on a supply that
    cannot sink, where no Thevenin source takes its place.

    A clamp across the switch on the drooping bus (``p.clamp``, ``V_c`` V per point) draws
    from it instead, switched off, while the current flows (the same pair of rows with the
    bus's sign turned)::

        dlambda/dt = u - V_c - R_off i
        C du/dt    = (V_s - u)/R_s - i

    With an eddy term (``p.eddy``, the resistance ``R_e`` across the magnetising branch)
    ``i`` is the branch's current and the branch sees the loop's Thevenin pair: switched on
    ``dlambda/dt = k (u - R_on i)`` with ``k = R_e/(R_on + R_e)``, and the bus feeds the
    terminal current ``k (i + u/R_e)`` (what ``q``, ``sq`` integrate too). Returned into the
    bus (``returns``) the same pair with ``k = R_e/(R_off + R_e)``: ``dlambda/dt = -k (u +
    2 V_d + R_off i)``, the bus taking the terminal current ``(R_e i - u - 2 V_d)/(R_off +
    R_e)`` while it is positive; blocked (not ``live``), ``dlambda/dt = -R_e i`` and the bus
    relaxes alone.

    A seventh row (an eddy term only: the caller stacks it) integrates the eddy
    resistance's loss ``R_e (i - i_t)^2`` W, ``i_t`` the terminal current (0 blocked: the
    flux's whole decay through ``R_e``); like ``q`` and ``sq`` it feeds nothing back.
    """

    def __init__(self, p: ArmatureParams, on: np.ndarray, live: np.ndarray, held: np.ndarray | None = None,
                 returns: np.ndarray | None = None, sink: bool = True, drain: np.ndarray | None = None):
        self.curves = p.curves
        #: 1 where switched off into the drooping bus (a bridge's fast decay), else 0
        self.back = None
        clamp = p.clamp if returns is None and p.droops else None
        if returns is not None or clamp is not None:
            if not p.droops:
                raise ValueError("returns: a full bridge's fast decay into a drooping bus")
            self.back = (~on).astype(float)
            #: the bus's sign in the off-times' drive ``sign (u + v_d2)``: -1 returned into it
            #: (``-(u + 2 V_d)``), +1 drawn through a clamp (``u - V_c``: ``v_d2 = -V_c``)
            self.sign = -1.0 if returns is not None else 1.0
            self.v_d2 = np.broadcast_to(np.asarray(returns if returns is not None else -clamp, float), on.shape)
            #: the share of ``sign (u + v_d2)`` the flux sees (1; an eddy term's k, 0 blocked)
            self.k_back = self.back
        #: False: the source feeds the bus only while it is below V_s (an ideal feed diode)
        self.sink = sink
        #: A drawn off the bus besides the coil (see the class docstring), or None
        self.drain = drain
        #: 0 where the armature is held at its stop (``x``, ``v`` frozen: a resting stretch), else 1
        self.free = 1.0 if held is None else 1.0 - held.astype(float)
        self.inv_m = 1.0 / p.mass
        self.inv_lc = 1.0 / p.l_closed
        self.beta = p.beta
        self.drive_v = np.where(on, p.v_on, -p.v_off)
        self.drive_r = np.where(on, p.r_on, p.r_off)
        self.live = live.astype(float)
        #: the terminal current ``i_t = t0 + t1 i`` of the magnetising current ``i`` (see
        #: :meth:`terminal`); ``None``: no eddy term, the coil's current is the terminal's
        self.t0 = self.t1 = None
        #: on a drooping bus with an eddy term: the terminal current's share of the bus,
        #: ``1/(R_on + R_e)`` S where switched on (0 off), and the branch's share ``k``
        self.tu = None
        self.k_on = 1.0
        if p.eddy is not None:
            # the loop seen from the magnetising branch (its Thevenin pair, model.eddy);
            # blocked (off, not live): the flux dies through R_e alone, no terminal current
            re_ = p.eddy
            c = self.drive_r + re_
            blocked = ~on & ~live
            self.drive_v = np.where(blocked, 0.0, self.drive_v * re_ / c)
            self.drive_r = np.where(blocked, re_, self.drive_r * re_ / c)
            self.t0 = np.where(blocked, 0.0, np.where(on, p.v_on, -p.v_off) / c)
            self.t1 = np.where(blocked, 0.0, re_ / c)
            self.live = np.ones_like(self.live)
            if p.droops:   # switched on, the bus (a state) takes V_on's place
                self.k_on = re_ / c
                self.tu = np.where(on, 1.0 / c, 0.0)
                self.t0 = np.where(on, 0.0, self.t0)
            if self.back is not None:   # returned into the bus (or drawn through a clamp):
                back = (self.back > 0) & ~blocked   # sign (u + v_d2) in -V_off's place
                self.k_back = np.where(back, re_ / c, 0.0)
                self.tu = np.where(back, self.sign / c, self.tu)
                self.t0 = np.where(back, self.sign * self.v_d2 / c, self.t0)
        self.r_e = p.eddy
        self.f0 = (p.preload + p.rate * p.stroke + p.load) / p.mass
        self.km = p.rate / p.mass
        self.cm = p.beta * self.inv_lc / (2.0 * p.mass)
        self.dm = p.damping / p.mass
        self.droop = p.droops
        if self.droop:
            rc = p.source_resistance * p.capacitance
            self.on = on.astype(float)
            self.v_s = p.v_on
            self.g_s = np.where(rc > 0, 1.0 / np.where(rc > 0, rc, 1.0), 0.0)
            self.inv_c = np.where(p.capacitance > 0, 1.0 / np.where(p.capacitance > 0, p.capacitance, 1.0), 0.0)

    def jacobian(self, y: np.ndarray) -> np.ndarray:
        """``d(dy/dt)/dy`` per point, shape (N, m, m) (rows and columns lambda, x, v, q, sq
        and, on a drooping bus, u)."""
        lam, x = y[0], y[1]
        n = lam.size
        if self.curves is None:
            di_dl = (1.0 + self.beta * x) * self.inv_lc
            di_dx = lam * self.beta * self.inv_lc
            i = lam * di_dl
            df_dl = 2.0 * self.cm * lam
        else:   # the saturating coil's curves (model.gap_curves): the same law, tabulated
            i, di_dl, di_dx, _, df = self.curves.state(lam, x)
            df_dl = df * self.inv_m
        m = y.shape[0]
        i_m, dl_m, dx_m = i, di_dl, di_dx
        jac = np.zeros((n, m, m))
        jac[:, 0, 0] = -self.live * self.drive_r * di_dl
        jac[:, 0, 1] = -self.live * self.drive_r * di_dx
        jac[:, 1, 2] = 1.0
        jac[:, 2, 0] = -df_dl
        jac[:, 2, 1] = -self.km
        jac[:, 2, 2] = -self.dm
        if self.t1 is not None:   # q and sq integrate the terminal current t0 + t1 i
            i = self.t0 + self.t1 * i
            di_dl, di_dx = self.t1 * di_dl, self.t1 * di_dx
        jac[:, 3, 0] = di_dl
        jac[:, 3, 1] = di_dx
        jac[:, 4, 0] = 2.0 * i * di_dl
        jac[:, 4, 1] = 2.0 * i * di_dx
        if self.droop:
            feed = self.on if self.back is None else self.on + self.sign * self.back * self.live
            jac[:, 0, 5] = self.live * (self.on * self.k_on + (0.0 if self.back is None else self.sign * self.k_back))
            jac[:, 5, 0] = -feed * self.inv_c * di_dl
            jac[:, 5, 1] = -feed * self.inv_c * di_dx
            jac[:, 5, 5] = -self.g_s if self.sink else -self.g_s * (y[5] < self.v_s)
            if self.tu is not None:   # the terminal current's bus share
                i = i + self.tu * y[5]
                jac[:, 3, 5] = self.tu
                jac[:, 4, 5] = 2.0 * i * self.tu
                jac[:, 4, 0] = 2.0 * i * di_dl
                jac[:, 4, 1] = 2.0 * i * di_dx
                jac[:, 5, 5] -= feed * self.inv_c * self.tu
        if m > 6:   # the eddy loss R_e (i_m - i_t)^2 (i: the terminal current here)
            g = 2.0 * self.r_e * (i_m - i)
            jac[:, 6, 0] = g * (1.0 - self.t1) * dl_m
            jac[:, 6, 1] = g * (1.0 - self.t1) * dx_m
            if self.tu is not None:
                jac[:, 6, 5] = -g * self.tu
        jac[:, 1, :] *= np.reshape(self.free, (-1, 1))
        jac[:, 2, :] *= np.reshape(self.free, (-1, 1))
        return jac

    def terminal_rate(self, y, dy):
        """The terminal current A at states ``y`` and its rate A/s given their
        derivatives ``dy`` (an eddy term only: the distance to the freewheel's blocking)."""
        lam, x = y[0], y[1]
        if self.curves is None:
            di_dl = (1.0 + self.beta * x) * self.inv_lc
            i = lam * di_dl
            di_dx = lam * self.beta * self.inv_lc
        else:
            i, di_dl, di_dx, _, _ = self.curves.state(lam, x)
        rate = self.t1 * (di_dl * dy[0] + di_dx * dy[1])
        if self.tu is not None:
            return self.terminal(i, y[5]), rate + self.tu * dy[5]
        return self.t0 + self.t1 * i, rate

    def current_rate(self, y, dy):
        """The coil's current A at states ``y`` and its rate A/s given their derivatives
        ``dy`` (a linear coil: ``i = lambda (1 + beta x) / L_c``; curves: their blend's
        partials, :meth:`~coildrive.model.gap_curves.GapCurves.state`)."""
        lam, x = y[0], y[1]
        if self.curves is not None:
            i, di_dl, di_dx, _, _ = self.curves.state(lam, x)
            return i, di_dl * dy[0] + di_dx * dy[1]
        di_dl = (1.0 + self.beta * x) * self.inv_lc
        return lam * di_dl, di_dl * dy[0] + lam * self.beta * self.inv_lc * dy[1]

    def terminal(self, i, u=None):
        """Terminal current A at magnetising current ``i`` A (and, on a drooping bus with
        an eddy term, bus ``u`` V), in this flight's switch state: the coil's current
        without an eddy term."""
        if self.t1 is None:
            return i
        out = self.t0 + self.t1 * i
        return out if self.tu is None else out + self.tu * u

    def __call__(self, y: np.ndarray) -> np.ndarray:
        lam, x, v = y[0], y[1], y[2]
        if self.curves is None:
            i = lam * (1.0 + self.beta * x) * self.inv_lc
            pull = self.cm * lam * lam
        else:
            i, _, _, force, _ = self.curves.state(lam, x)
            pull = force * self.inv_m
        out = np.empty_like(y)
        u = y[5] if self.droop else None
        if self.droop:
            drive_v = np.where(self.on > 0, self.k_on * u, self.drive_v)
            if self.back is not None:
                drive_v = np.where(self.back > 0, self.sign * self.k_back * (u + self.v_d2), drive_v)
            out[0] = self.live * (drive_v - self.drive_r * i)
        else:
            out[0] = self.live * (self.drive_v - self.drive_r * i)
        out[1] = self.free * v
        out[2] = self.free * (self.f0 - self.km * x - pull - self.dm * v)
        i_m = i
        i = self.terminal(i, u)
        if y.shape[0] > 6:   # the eddy resistance's loss
            out[6] = self.r_e * (i_m - i) ** 2
        if self.droop:
            feed = self.on if self.back is None else self.on + self.sign * self.back * self.live
            fed = self.v_s - u if self.sink else np.maximum(self.v_s - u, 0.0)
            out[5] = self.g_s * fed - feed * self.inv_c * i
            if self.drain is not None:
                out[5] = out[5] - self.drain * self.inv_c
        out[3] = i
        out[4] = i * i
        return out


def _hermite(y0, y1, d0, d1, h, theta):
    """Cubic Hermite interpolant at fraction ``theta`` of a step of length ``h``."""
    t2 = theta * theta
    t3 = t2 * theta
    return ((2 * t3 - 3 * t2 + 1) * y0 + (t3 - 2 * t2 + theta) * h * d0
            + (-2 * t3 + 3 * t2) * y1 + (t3 - t2) * h * d1)


def _root(g0, g1, d0, d1, h, iterations: int = 40, upper=None):
    """Fraction of the step where the Hermite interpolant of ``g`` reaches 0 from above.

    ``g0 >= 0 > g1``: ``g`` is the distance to a stop (or the flux linkage), so a step
    that starts on the stop (``g0 = 0``, leaving it) looks for the return, not the start.
    Bisection on the cubic, over ``[0, upper]`` (a fraction per point, 1 unless given: a
    dip below 0 inside the step whose end is above it again, :func:`_turn`).
    """
    lo = np.zeros_like(g0)
    hi = np.ones_like(g0) if upper is None else np.array(upper, float)
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
    w = np.eye(y.shape[0])[None, :, :] - (h * _ROS_D)[:, None, None] * rhs.jacobian(y)

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
    """Per point: is the damped motion under ``force`` N stiff for an explicit method? On a
    drooping bus also: is the bus's fast eigenvalue (:mod:`coildrive.model.supply`; a
    small ``R_s C``) that fast against the motion?"""
    f = np.maximum(np.asarray(force, float), 1e-300)
    mech = np.sqrt(2.0 * p.mass * p.stroke / f) + p.damping * p.stroke / f
    stiff = p.damping / p.mass * mech > STIFF_RATIO
    if p.droops:
        fast = np.abs(p.bus(True).l2.real)
        stiff = stiff | (fast * mech > STIFF_RATIO)
    return stiff


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
        max_steps: int = MAX_STEPS, stiff: bool = False, low: np.ndarray | None = None,
        low_until: np.ndarray | None = None, held: np.ndarray | None = None,
        flux_to: np.ndarray | None = None, current_to: np.ndarray | None = None,
        flux_down: np.ndarray | None = None, returns: np.ndarray | None = None,
        high: np.ndarray | None = None, sink: bool = True, drain: np.ndarray | None = None,
        trip_down: np.ndarray | None = None) -> Flight:
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
    low, low_until : on a drooping bus, keep the running lowest capacitor voltage and its
    time in ``low`` (2 x N: V, s) up to ``low_until`` s (per point): at the accepted
    steps' ends and, inside a step where ``du/dt`` turns from falling to rising, at the
    minimum of its cubic Hermite interpolant
    held, flux_to : where ``held``, the armature rests at its stop (``x`` and ``v``
    frozen, no stop events): a resting stretch of a coil whose curves have no closed form
    on the drooping bus; it ends (code START) where the flux linkage rises to ``flux_to`` Wb
    current_to : A per point (``inf``: none): a flight (free or ``held``) ends (code TRIP)
    where the coil's current (with an eddy term the terminal current) rises to it -- a
    boosted peak's threshold; with ``trip_down`` (bool per point) True, where it *falls* to
    it instead (a current-mode hold's lower threshold, the switch off); either way also
    where it crosses it and turns back inside one step (the step's Hermite cubic's turn,
    :func:`_turn`: the step's ends alone would miss it)
    flux_down : Wb per point: where ``held``, the resting stretch ends (code START) where
    the flux linkage falls to it instead (the seated coil's decay to the stay current)
    returns : V per point, a full bridge's two body diodes ``2 V_d``: switched off, the
    current returns into the drooping bus (:class:`_Rhs`); high : then the running
    highest capacitor voltage and its time (2 x N: V, s), as ``low``; sink : False, a
    supply that cannot sink (its feed one-way: ``max(V_s - u, 0)/R_s``); drain : A per point
    drawn off the bus besides (:class:`_Rhs`)

    A batch of one point goes through :func:`fly_point` (Python floats: numpy's per-call
    overhead on 1-element arrays would dominate; same algorithm and results; the coil's
    curves, ``p.curves``, through their one-point law in floats), unless
    :data:`SINGLE_POINT_SCALAR` is False, or the coil has curves and ``stiff`` (the
    Rosenbrock step's Jacobian of the curves is numpy's); its ``path_*`` then hold the
    accepted steps only.
    """
    if (t.size == 1 and SINGLE_POINT_SCALAR and (p.curves is None or not stiff)
            and p.eddy is None and not p.droops and held is None and flux_to is None
            and current_to is None):
        return _fly_single(p, t, y, t_end, active, on, live, rtol, record, query, query_y,
                           track, peak, max_steps, stiff)
    n = t.size
    t = t.astype(float).copy()
    y = y.astype(float).copy()
    active = active.copy() & (t < t_end)
    end = np.where(active, RUNNING, BOUND)
    steps = np.zeros(n, int)
    rhs = _Rhs(p, on, live, held, returns, sink, drain)
    free = np.ones(n, bool) if held is None else ~held
    target = np.full(n, np.inf) if flux_to is None else np.broadcast_to(flux_to, (n,))
    floor = None if flux_down is None else np.broadcast_to(flux_down, (n,))
    trip_at = None if current_to is None else np.broadcast_to(np.asarray(current_to, float), (n,))
    # (the comparator's sign per point: +1 trips rising to trip_at, -1 falling to it)
    sign = 1.0 if trip_down is None else np.where(np.broadcast_to(trip_down, (n,)), -1.0, 1.0)
    rows = [0, 1, 2]                 # the rows under error control
    scale = rtol * p.reference_scales()
    if p.droops:
        rows.append(5)
        scale = np.concatenate([scale, rtol * p.v_on[None, :]])
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
        norm = np.max(np.abs(err[rows]) / (scale + rtol * np.abs(y[rows])), axis=0)
        if held is not None:   # a resting stretch takes few steps: its integrals under control too
            # (relative to their size at the step's ends: int i dt, int i^2 dt feed the energies)
            size = np.maximum(np.abs(y[3:5]), np.abs(y_new[3:5]))
            norm = np.maximum(norm, np.max(np.abs(err[3:5]) / (rtol * size + 1e-300), axis=0))
        ok = active & (norm <= 1.0)
        steps += active
        # stop events inside accepted steps
        seat = ok & free & (y_new[1] < 0.0)
        opn = ok & free & (y_new[1] > p.stroke)
        start = ok & ~free & (y_new[0] >= target)
        if floor is not None:
            start = ok & ~free & (y_new[0] <= floor)
        trip = np.zeros(n, bool)
        th_crest = None
        if trip_at is not None:   # (with an eddy term the terminal current: what the sense sees)
            rate = rhs.current_rate if rhs.t1 is None else rhs.terminal_rate
            c_old, dc_old = rate(y, k1)
            c_new, dc_new = rate(y_new, k7)
            # (held too: a resting stretch's threshold; ``sign`` -1: a falling one)
            g = (sign * (trip_at - c_old), sign * (trip_at - c_new), -sign * dc_old, -sign * dc_new)
            trip = ok & (g[1] <= 0.0)
            # a crest inside the step that crosses the threshold and turns back before the
            # step's end (the ends alone miss it): the step's cubic's turn
            crest = ok & ~trip & np.isfinite(trip_at) & (g[2] < 0.0) & (g[3] > 0.0)
            th_crest = np.ones(n)
            if crest.any():
                g = tuple(np.where(crest, x, 0.0) for x in g)   # (no threshold: inf, not read)
                th = np.where(crest, _turn(*g, h), 1.0)
                over = crest & (_hermite(*g, h, th) < 0.0)
                trip = trip | over
                th_crest = np.where(over, th, 1.0)
        if rhs.t1 is None:
            zero = ok & ~on & live & (y_new[0] < 0.0)
        else:   # an eddy term: the freewheel stops where the terminal current reaches zero
            g_old, dg_old = rhs.terminal_rate(y, k1)
            g_new, dg_new = rhs.terminal_rate(y_new, k7)
            zero = ok & ~on & live & (g_new < 0.0)
        hit = seat | opn | zero | start | trip
        theta = np.ones(n)
        kind = np.zeros(n, int)
        y_full = y_new
        if hit.any():
            for mask, g0, g1, d0, d1, code in (
                    (seat, y[1], y_new[1], k1[1], k7[1], SEAT),
                    (opn, p.stroke - y[1], p.stroke - y_new[1], -k1[1], -k7[1], OPEN),
                    ((zero, y[0], y_new[0], k1[0], k7[0], ZERO) if rhs.t1 is None else
                     (zero, g_old, g_new, dg_old, dg_new, ZERO)),
                    ((start, target - y[0], target - y_new[0], -k1[0], -k7[0], START) if floor is None else
                     (start, y[0] - floor, y_new[0] - floor, k1[0], k7[0], START)),
                    (trip, *((sign * (trip_at - c_old), sign * (trip_at - c_new), -sign * dc_old, -sign * dc_new)
                             if trip_at is not None
                             else (y[0],) * 4), TRIP)):
                if mask.any():   # (a crest's crossing: on its rising side)
                    th = np.where(mask, _root(g0, g1, d0, d1, h, upper=th_crest if code == TRIP else None), 1.0)
                    first = mask & (th < theta)
                    theta = np.where(first, th, theta)
                    kind = np.where(first, code, kind)
            y_hit = _hermite(y, y_new, k1, k7, h, theta)
            y_hit[1] = np.where(kind == SEAT, 0.0, np.where(kind == OPEN, p.stroke, y_hit[1]))
            if rhs.t1 is None:   # (with an eddy term the flux outlasts the terminal current)
                y_hit[0] = np.where(kind == ZERO, 0.0, y_hit[0])
            y_new = np.where(hit, y_hit, y_new)
        redo = None
        if trip_at is not None and rhs.curves is not None:
            # a curve's current is not the cubic of the step's ends that the root takes: a
            # threshold well inside a step is stepped to again, so it falls in a short one
            redo = hit & (kind == TRIP) & (theta > TRIP_REDO)
            ok, hit = ok & ~redo, hit & ~redo
        crest_redo = None
        if th_crest is not None:
            # a crest found by the step's cubic alone (its ends below the threshold): the cubic
            # of a long step can overshoot the true crest, so the step is redone to end at the
            # cubic's crest -- there the integrated current decides (a short step's cubic then)
            crest_redo = hit & (kind == TRIP) & (th_crest < 1.0) & (th_crest > TRIP_REDO)
            ok, hit = ok & ~crest_redo, hit & ~crest_redo
            if redo is not None:
                redo = redo & ~crest_redo
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
                if rhs.tu is not None:   # an eddy term on a drooping bus: the terminal current
                    i_new = rhs.terminal(i_new, y_new[5])
                up = tr & (i_new > peak[0])
                peak[0] = np.where(up, i_new, peak[0])
                peak[1] = np.where(up, t_new, peak[1])
        if low is not None:
            _track_low(low, low_until, ok, t, y, y_full, y_new, k1, k7, h, theta)
        if high is not None:   # the highest is the lowest of -u (only row 5 is read)
            sunk = np.stack([-high[0], high[1]])
            _track_low(sunk, np.full(n, np.inf), ok, t, -y, -y_full, -y_new, -k1, -k7, h, theta)
            high[0], high[1] = -sunk[0], sunk[1]
        # accept
        t = np.where(ok, t_new, t)
        y = np.where(ok, y_new, y)
        k1 = np.where(ok & ~hit, k7, k1)
        if hit.any():
            k1 = np.where(hit, rhs(y), k1)
        end = np.where(hit, kind, end)
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
        if redo is not None:
            h = np.where(redo, 0.999 * theta * h / fac, h)
        if crest_redo is not None:
            h = np.where(crest_redo, th_crest * h / fac, h)
        tiny = active & (h < 1e-12 * np.maximum(np.abs(t_end), 1e-9))
        end = np.where(tiny, BOUND, end)
        active = active & ~tiny
    end = np.where(active, BOUND, end)
    return Flight(t, y, end, steps, path_t, path_y)


def _track_low(low, until, ok, t, y, y_full, y_new, k1, k7, h, theta) -> None:
    """Update the running lowest capacitor voltage ``low`` (2 x N: V, s) with an accepted
    step from ``t`` (state ``y``, slope ``k1``) over ``h`` (``y_full``, slope ``k7`` at its
    end), kept up to ``t + theta h`` (``y_new``: cut at an event when ``theta < 1``) and up
    to ``until`` s: the kept end, and where ``du/dt`` turns from negative to positive in
    the step, the minimum of the step's Hermite cubic (its slope, a quadratic in the
    step fraction, bisected)."""
    t_new = t + theta * h
    up = ok & (t_new <= until) & (y_new[5] < low[0])
    low[0] = np.where(up, y_new[5], low[0])
    low[1] = np.where(up, t_new, low[1])
    turn = ok & (k1[5] < 0.0) & (k7[5] > 0.0)
    if not turn.any():
        return
    th = _turn(y[5], y_full[5], k1[5], k7[5], h)
    inside = turn & (th <= theta) & (t + th * h <= until)
    u_min = _hermite(y[5], y_full[5], k1[5], k7[5], h, th)
    up = inside & (u_min < low[0])
    low[0] = np.where(up, u_min, low[0])
    low[1] = np.where(up, t + th * h, low[1])


def _turn(y0, y1, d0, d1, h, iterations: int = 50):
    """Fraction of the step where the cubic Hermite interpolant's slope, negative at its
    start and positive at its end (``d0 < 0 < d1``), turns: its minimum (bisected)."""
    lo, hi = np.zeros_like(h), np.ones_like(h)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        falling = _hermite_slope(y0, y1, d0, d1, h, mid) < 0.0
        lo, hi = np.where(falling, mid, lo), np.where(falling, hi, mid)
    return 0.5 * (lo + hi)


def _hermite_slope(y0, y1, d0, d1, h, theta):
    """``d/dt`` of the cubic Hermite interpolant at fraction ``theta`` of a step ``h``."""
    t2 = theta * theta
    with np.errstate(divide="ignore", invalid="ignore"):
        return ((6 * t2 - 6 * theta) * (y0 - y1) / np.where(h > 0, h, 1.0)
                + (3 * t2 - 4 * theta + 1) * d0 + (3 * t2 - 2 * theta) * d1)


# --------------------------------------------------------------------------- one point
# The batched integrator above spends almost all its time in numpy's per-call overhead
# when it holds ONE point (a few microseconds per ufunc on a 1-element array, ~40 ufuncs
# per stage): simulating one actuation through a PWM hold in which the armature lifts
# means one short flight per half period, over a thousand of them. The functions below
# are the same algorithm written on Python floats -- the same tableau, error norm, step
# control, stop location on the Hermite interpolant and Rosenbrock pair, operation for
# operation in the same order, so the results agree with the batch to rounding (the
# tests check 1e-9). ``fly`` switches to them by itself for a batch of one point.

#: ``fly`` integrates a batch of one point with the float-by-float :func:`fly_point`
#: (same algorithm, no numpy per-call overhead). False forces the numpy batch even for
#: one point -- only for comparing the two (tests, ``benchmarks/bench_armature.py``).
SINGLE_POINT_SCALAR = True


class OnePoint:
    """The right-hand-side constants of one point as Python floats (units as
    :class:`ArmatureParams`; ``scale``: the error-control scales of lambda, x, v in V*s,
    m, m/s, before the relative tolerance)."""

    __slots__ = ("inv_lc", "l_closed", "beta", "stroke", "v_on", "r_on", "v_off", "r_off",
                 "f0", "km", "cm", "dm", "scale", "curves", "inv_m")

    def __init__(self, p: ArmatureParams, scale=None):
        if len(p) != 1:
            raise ValueError("OnePoint holds the parameters of exactly one point")
        g = {name: float(getattr(p, name)[0]) for name in p.arrays}
        # the same expressions as _Rhs, so the same roundings
        self.inv_lc = 1.0 / g["l_closed"]
        self.l_closed = g["l_closed"]
        self.beta = g["beta"]
        self.stroke = g["stroke"]
        self.v_on, self.r_on = g["v_on"], g["r_on"]
        self.v_off, self.r_off = g["v_off"], g["r_off"]
        self.f0 = (g["preload"] + g["rate"] * g["stroke"] + g["load"]) / g["mass"]
        self.km = g["rate"] / g["mass"]
        self.cm = g["beta"] * self.inv_lc / (2.0 * g["mass"])
        self.dm = g["damping"] / g["mass"]
        #: the open and seated curves (None: the linear L(x)) and 1 / mass (1/kg)
        self.curves = p.curves
        self.inv_m = 1.0 / g["mass"]
        s = p.reference_scales()[:, 0] if scale is None else scale
        self.scale = tuple(float(a) for a in s)


def _hermite5(y0, y1, d0, d1, h, theta):
    """:func:`_hermite` of a state of 5 floats, the weights computed once (the same
    roundings: each weight is the same expression on the same numbers)."""
    t2 = theta * theta
    t3 = t2 * theta
    w0 = 2 * t3 - 3 * t2 + 1
    w1 = (t3 - 2 * t2 + theta) * h
    w2 = -2 * t3 + 3 * t2
    w3 = (t3 - t2) * h
    return (w0 * y0[0] + w1 * d0[0] + w2 * y1[0] + w3 * d1[0],
            w0 * y0[1] + w1 * d0[1] + w2 * y1[1] + w3 * d1[1],
            w0 * y0[2] + w1 * d0[2] + w2 * y1[2] + w3 * d1[2],
            w0 * y0[3] + w1 * d0[3] + w2 * y1[3] + w3 * d1[3],
            w0 * y0[4] + w1 * d0[4] + w2 * y1[4] + w3 * d1[4])


def _root1(g0, g1, d0, d1, h, iterations: int = 40):
    """:func:`_root` of one float (the same bisection)."""
    lo, hi = 0.0, 1.0
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        if _hermite(g0, g1, d0, d1, h, mid) > 0.0:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def _lu3(a):
    """LU factors of a 3 x 3 matrix (list of rows) with partial pivoting, in place:
    returns (rows, order) for :func:`_solve3`."""
    order = [0, 1, 2]
    for k in range(2):
        piv = max(range(k, 3), key=lambda r: abs(a[r][k]))
        if piv != k:
            a[k], a[piv] = a[piv], a[k]
            order[k], order[piv] = order[piv], order[k]
        for r in range(k + 1, 3):
            f = a[r][k] / a[k][k]
            a[r][k] = f
            for col in range(k + 1, 3):
                a[r][col] -= f * a[k][col]
    return a, order


def _solve3(lu, b):
    """Solve with the factors of :func:`_lu3` for a right-hand side of 3 floats."""
    a, order = lu
    z0 = b[order[0]]
    z1 = b[order[1]] - a[1][0] * z0
    z2 = b[order[2]] - a[2][0] * z0 - a[2][1] * z1
    z2 = z2 / a[2][2]
    z1 = (z1 - a[1][2] * z2) / a[1][1]
    z0 = (z0 - a[0][1] * z1 - a[0][2] * z2) / a[0][0]
    return z0, z1, z2


def fly_point(c: OnePoint, t: float, y, t_end: float, on: bool, live: bool,
              rtol: float = 1e-7, record: bool = False, query: float | None = None,
              track: bool = False, peak: list | None = None, max_steps: int = MAX_STEPS,
              stiff: bool = False):
    """:func:`fly` for one point, on Python floats (see the note above
    :data:`SINGLE_POINT_SCALAR`): the same steps, stops and results.

    ``c``: the point's constants; ``t`` s, ``y`` the 5 start values (lambda V*s, x m,
    v m/s, q A*s, sq A^2*s); ``on``/``live`` as in :func:`fly`; ``query`` a time s;
    ``track`` with ``peak = [A, s]`` (updated in place).

    Returns ``(t, y, end, steps, y_query, path)``: end time s, end state (tuple of 5),
    end code, step count, the state at ``query`` (None unless a step passed it), and with
    ``record`` the accepted steps as three lists -- times s, states, derivatives (each
    starting with the start point; the derivative is ``dy/dt`` at that state).
    """
    inv_lc, beta, stroke, lc = c.inv_lc, c.beta, c.stroke, c.l_closed
    f0c, km, cm, dm = c.f0, c.km, c.cm, c.dm
    lv = 1.0 if live else 0.0
    dv = c.v_on if on else -c.v_off
    dr = c.r_on if on else c.r_off
    off_live = (not on) and live

    curves, inv_m = c.curves, c.inv_m

    def law(lam, x):
        """``(i, F_close)`` of the curves (A, N) at one point."""
        one = curves._state_one(lam, x)
        if one is None:   # a division by zero: numpy's infinities decide
            one = [float(a.reshape(-1)[0]) for a in curves.state(np.array([lam]), np.array([x]))]
        return one[0], one[3]

    def rhs(lam, x, v):
        if curves is None:
            i = lam * (1.0 + beta * x) * inv_lc
            pull = cm * lam * lam
        else:   # as _Rhs: the curves' current and pull F / m
            i, force = law(lam, x)
            pull = force * inv_m
        return (lv * (dv - dr * i), v, f0c - km * x - pull - dm * v, i, i * i)

    s0, s1, s2 = (rtol * a for a in c.scale)
    t = float(t)
    y = tuple(float(a) for a in y)
    t_end = float(t_end)
    active = t < t_end
    end = RUNNING if active else BOUND
    steps = 0
    h = max(1e-4 * (t_end - (t if active else 0.0)), 1e-15)
    k1 = rhs(y[0], y[1], y[2])
    y_query = None
    path = ([t], [y], [k1]) if record else None
    a21 = _A[1][0]
    a31, a32 = _A[2]
    a41, a42, a43 = _A[3]
    a51, a52, a53, a54 = _A[4]
    a61, a62, a63, a64, a65 = _A[5]
    b1, b3, b4, b5, b6 = (float(DP_B[j]) for j in (0, 2, 3, 4, 5))
    e1, e3, e4, e5, e6, e7 = (float(DP_E[j]) for j in (0, 2, 3, 4, 5, 6))
    rd, re32 = float(_ROS_D), float(_ROS_E32)
    tiny_h = 1e-12 * max(abs(t_end), 1e-9)
    y_new = y
    for _ in range(max_steps):
        if not active:
            break
        h = min(h, t_end - t)
        if stiff:
            # Rosenbrock 2(3) as _rosenbrock_step: W = I - h d J, J = _Rhs.jacobian. The
            # q and sq rows feed nothing back, so W is solved on (lambda, x, v) and the
            # last two rows by substitution.
            lam, x = y[0], y[1]
            di_dl = (1.0 + beta * x) * inv_lc
            di_dx = lam * beta * inv_lc
            i = lam * di_dl
            hd = h * rd
            j30, j31 = di_dl, di_dx
            j40, j41 = 2.0 * i * di_dl, 2.0 * i * di_dx
            lu = _lu3([[1.0 - hd * (-lv * dr * di_dl), 0.0 - hd * (-lv * dr * di_dx), 0.0],
                       [0.0, 1.0, 0.0 - hd],
                       [0.0 - hd * (-2.0 * cm * lam), 0.0 - hd * (-km), 1.0 - hd * (-dm)]])

            def solve(b):
                z0, z1, z2 = _solve3(lu, b)
                return (z0, z1, z2, b[3] + hd * j30 * z0 + hd * j31 * z1,
                        b[4] + hd * j40 * z0 + hd * j41 * z1)

            f0 = k1
            q1 = solve(f0)
            f1 = rhs(*(y[j] + 0.5 * h * q1[j] for j in range(3)))
            q2 = solve(tuple(f1[j] - q1[j] for j in range(5)))
            q2 = tuple(q2[j] + q1[j] for j in range(5))
            y_new = tuple(y[j] + h * q2[j] for j in range(5))
            k7 = rhs(y_new[0], y_new[1], y_new[2])
            q3 = solve(tuple(k7[j] - re32 * (q2[j] - f1[j]) - 2.0 * (q1[j] - f0[j])
                             for j in range(5)))
            h6 = h / 6.0
            err0, err1, err2 = (h6 * (q1[j] - 2.0 * q2[j] + q3[j]) for j in range(3))
        else:
            # Dormand-Prince 5(4), unrolled: the stages summed in the order of fly(); the
            # stages need only lambda, x, v (q and sq feed nothing back)
            y0, y1, y2, y3, y4 = y
            k2 = rhs(y0 + h * (a21 * k1[0]),
                     y1 + h * (a21 * k1[1]),
                     y2 + h * (a21 * k1[2]))
            k3 = rhs(y0 + h * (a31 * k1[0] + a32 * k2[0]),
                     y1 + h * (a31 * k1[1] + a32 * k2[1]),
                     y2 + h * (a31 * k1[2] + a32 * k2[2]))
            k4 = rhs(y0 + h * (a41 * k1[0] + a42 * k2[0] + a43 * k3[0]),
                     y1 + h * (a41 * k1[1] + a42 * k2[1] + a43 * k3[1]),
                     y2 + h * (a41 * k1[2] + a42 * k2[2] + a43 * k3[2]))
            k5 = rhs(y0 + h * (a51 * k1[0] + a52 * k2[0] + a53 * k3[0] + a54 * k4[0]),
                     y1 + h * (a51 * k1[1] + a52 * k2[1] + a53 * k3[1] + a54 * k4[1]),
                     y2 + h * (a51 * k1[2] + a52 * k2[2] + a53 * k3[2] + a54 * k4[2]))
            k6 = rhs(y0 + h * (a61 * k1[0] + a62 * k2[0] + a63 * k3[0] + a64 * k4[0] + a65 * k5[0]),
                     y1 + h * (a61 * k1[1] + a62 * k2[1] + a63 * k3[1] + a64 * k4[1] + a65 * k5[1]),
                     y2 + h * (a61 * k1[2] + a62 * k2[2] + a63 * k3[2] + a64 * k4[2] + a65 * k5[2]))
            # b2 = 0 (skipped: adding 0 * k2 changes no finite sum)
            y_new = (y0 + h * (b1 * k1[0] + b3 * k3[0] + b4 * k4[0] + b5 * k5[0] + b6 * k6[0]),
                     y1 + h * (b1 * k1[1] + b3 * k3[1] + b4 * k4[1] + b5 * k5[1] + b6 * k6[1]),
                     y2 + h * (b1 * k1[2] + b3 * k3[2] + b4 * k4[2] + b5 * k5[2] + b6 * k6[2]),
                     y3 + h * (b1 * k1[3] + b3 * k3[3] + b4 * k4[3] + b5 * k5[3] + b6 * k6[3]),
                     y4 + h * (b1 * k1[4] + b3 * k3[4] + b4 * k4[4] + b5 * k5[4] + b6 * k6[4]))
            k7 = rhs(y_new[0], y_new[1], y_new[2])
            err0 = h * (e1 * k1[0] + e3 * k3[0] + e4 * k4[0] + e5 * k5[0] + e6 * k6[0]
                          + e7 * k7[0])
            err1 = h * (e1 * k1[1] + e3 * k3[1] + e4 * k4[1] + e5 * k5[1] + e6 * k6[1]
                          + e7 * k7[1])
            err2 = h * (e1 * k1[2] + e3 * k3[2] + e4 * k4[2] + e5 * k5[2] + e6 * k6[2]
                          + e7 * k7[2])
        r0 = abs(err0) / (s0 + rtol * abs(y[0]))
        r1 = abs(err1) / (s1 + rtol * abs(y[1]))
        r2 = abs(err2) / (s2 + rtol * abs(y[2]))
        norm = max(r0, r1, r2)
        if r0 != r0 or r1 != r1 or r2 != r2:
            norm = math.nan  # np.max propagates a NaN; the step is then rejected
        ok = norm <= 1.0
        steps += 1
        hit = False
        theta = 1.0
        kind = 0
        y_full = y_new
        if ok:
            seat = y_new[1] < 0.0
            opn = y_new[1] > stroke
            zero = off_live and y_new[0] < 0.0
            hit = seat or opn or zero
            if hit:
                if seat:
                    th = _root1(y[1], y_new[1], k1[1], k7[1], h)
                    if th < theta:
                        theta, kind = th, SEAT
                if opn:
                    th = _root1(stroke - y[1], stroke - y_new[1], -k1[1], -k7[1], h)
                    if th < theta:
                        theta, kind = th, OPEN
                if zero:
                    th = _root1(y[0], y_new[0], k1[0], k7[0], h)
                    if th < theta:
                        theta, kind = th, ZERO
                yh = list(_hermite5(y, y_new, k1, k7, h, theta))
                if kind == SEAT:
                    yh[1] = 0.0
                elif kind == OPEN:
                    yh[1] = stroke
                if kind == ZERO:
                    yh[0] = 0.0
                y_new = tuple(yh)
            t_new = t + theta * h
            if query is not None and t < query <= t_new:
                th = (query - t) / (h if h > 0 else 1.0)
                y_query = _hermite5(y, y_full, k1, k7, h, th)
            if track:
                i_new = (y_new[0] * (1.0 + beta * y_new[1]) / lc if curves is None
                         else law(y_new[0], y_new[1])[0])
                if i_new > peak[0]:
                    peak[0], peak[1] = i_new, t_new
            t = t_new
            y = y_new
            k1 = rhs(y[0], y[1], y[2]) if hit else k7
            done_t = not hit and t >= t_end
            if hit:
                end = kind
            elif done_t:
                end = BOUND
            if record:
                path[0].append(t)
                path[1].append(y)
                path[2].append(k1)
            active = not hit and not done_t
        if norm == 0.0:
            fac = 5.0  # numpy: 0 ** -0.2 = inf, clipped to 5
        else:
            # (a NaN norm stays NaN through max/min, as through np.clip)
            fac = min(max(0.9 * norm ** (-1.0 / 3.0 if stiff else -0.2), 0.2), 5.0)
        if not ok:
            fac = min(fac, 0.9)
        if active:
            h = h * fac
            if h < tiny_h:
                end = BOUND
                active = False
    if active:
        end = BOUND
    return t, y, end, steps, y_query, path


def _fly_single(p: ArmatureParams, t, y, t_end, active, on, live, rtol, record, query, query_y,
                track, peak, max_steps, stiff) -> Flight:
    """:func:`fly` for a batch of one point through :func:`fly_point`, results as arrays."""
    c = OnePoint(p)
    # (a NaN query time is never passed: every comparison with it is false)
    q = None if query is None else float(np.asarray(query, float).ravel()[0])
    tr = bool(np.asarray(track).ravel()[0]) if track is not None else False
    pk = [float(peak[0, 0]), float(peak[1, 0])] if tr else None
    t_end1 = float(np.asarray(t_end, float).ravel()[0])
    t0 = float(np.asarray(t, float).ravel()[0])
    y0 = np.asarray(y, float)[:, 0]
    if not bool(np.asarray(active).ravel()[0]):
        return Flight(np.array([t0]), y0[:, None].copy(), np.array([BOUND]), np.zeros(1, int),
                      [np.array([t0])] if record else None,
                      [y0[:, None].copy()] if record else None)
    t1, y1, end, steps, yq, path = fly_point(
        c, t0, y0, t_end1, bool(np.asarray(on).ravel()[0]), bool(np.asarray(live).ravel()[0]),
        rtol, record, q, tr, pk, max_steps, stiff)
    if yq is not None and query_y is not None:
        query_y[:, 0] = yq
    if tr:
        peak[0, 0], peak[1, 0] = pk
    path_t = [np.array([a]) for a in path[0]] if record else None
    path_y = [np.array(a, float)[:, None] for a in path[1]] if record else None
    return Flight(np.array([t1]), np.array(y1, float)[:, None], np.array([end]),
                  np.array([steps]), path_t, path_y)
