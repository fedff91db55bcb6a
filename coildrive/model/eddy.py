"""Eddy currents: a resistance ``R_e`` across the coil's magnetising branch.

A solid iron core carries eddy currents that oppose a change of its flux. Lumped, they
are a resistance across the magnetising branch: the terminal current ``i`` splits into
the magnetising current ``i_m`` (which makes the flux, ``psi(i_m)`` or ``L i_m``) and the
eddy current ``v_m / R_e``, where ``v_m = dpsi/dt`` is the branch voltage::

    loop:  V = R i + v_m          KCL:  i = i_m + v_m / R_e          v_m = dpsi(i_m)/dt

Eliminating ``i``: ``dpsi/dt = V_th - R_th i_m`` with the Thevenin equivalent of the
loop seen from the branch, ``V_th = V R_e / (R + R_e)`` and ``R_th = R R_e / (R + R_e)``.
So the magnetising current obeys the plain coil's equation with ``(V_th, R_th)``: still
first order, and every segment keeps its exact form -- the linear coil's exponential
(``tau = L / R_th``) and the saturating coil's quadrature ``t = int dpsi / (V_th -
R_th i_m)`` (:mod:`coildrive.model.flux`). No time stepping is needed: the eddy branch
adds no state, only an algebraic split, so the exact segment solutions still apply and
a batched ODE integrator would only add error. The terminal current follows from the
state: ``i = (V + R_e i_m) / (R + R_e)``.

What it looks like: at switch-on (``i_m = 0``) the terminal current steps to
``V / (R + R_e)``, then rises with ``i_m`` toward ``V / R``. At a turn-off it steps down
by ``(V + V_off) / (R + R_e)`` (the freewheel loop's Thevenin pair ``-V_off R_e / (R_off +
R_e)``, ``R_off R_e / (R_off + R_e)``); once the magnetising current has fallen to
``i_b = V_off / R_e`` the terminal current is zero, the freewheel diode blocks, and the
flux dies through ``R_e`` alone (``dpsi/dt = -R_e i_m``, ``tau = L / R_e``): the flux,
and the force it makes, outlasts the terminal current.

Conventions for :mod:`coildrive.model.rl`: the currents in and out of the segment
functions are the magnetising current (the state; the flux and the force follow it),
``decay_time(0, ...)`` is the time until the terminal current reaches zero (the
freewheel path stops conducting), and the segment integrals ``int i dt``, ``int i^2 dt``
are of the terminal current (what the copper, the switch and the freewheel elements
carry). Units: A, V, ohm, H, Wb, s, J.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import flux
from .exponential import segment_integrals
from .flux import FluxCoil
from .roots import falling_root


@dataclass(frozen=True, eq=False)
class EddyCoil:
    """A coil with an eddy resistance, at a set of operating points: ``magnetising`` is
    the magnetising branch (H per point, or a :class:`~coildrive.model.flux.FluxCoil`)
    and ``resistance`` the eddy resistance ``R_e`` (ohm per point)."""

    magnetising: object
    resistance: np.ndarray

    @property
    def shape(self):
        return np.shape(self.resistance)

    def __getitem__(self, index) -> EddyCoil:
        m = self.magnetising
        m = m[index] if isinstance(m, FluxCoil) else np.broadcast_to(np.asarray(m, float), self.shape)[index]
        return EddyCoil(m, np.asarray(self.resistance)[index])

    def small_signal(self):
        """The magnetising branch's inductance at zero current, H per point."""
        return flux.small_signal(self.magnetising)


def thevenin(v, r, r_e):
    """The loop (``v`` V through ``r`` ohm) seen from the magnetising branch with ``r_e``
    ohm across it: ``(V_th, R_th)`` in V and ohm."""
    k = np.asarray(r_e, float) / (np.asarray(r, float) + r_e)
    return np.asarray(v, float) * k, np.asarray(r, float) * k


def terminal(i_m, v, r, r_e):
    """Terminal current in A while the loop (``v`` V through ``r`` ohm) conducts, at
    magnetising current ``i_m`` A: ``(v + R_e i_m) / (r + R_e)``."""
    return (np.asarray(v, float) + r_e * np.asarray(i_m, float)) / (np.asarray(r, float) + r_e)


def stiff_loss(t, q, sq, v, r, r_e):
    """J ``r_e`` ohm across the magnetising branch takes over ``t`` s switched on from a
    stiff ``v`` V through the loop's ``r`` ohm, from the terminal current's ``q = int i dt``
    A*s and ``sq = int i^2 dt`` A^2*s over them (whatever the branch does -- a moving
    armature, a curve): the branch sees ``v - r i`` at every instant, so ``int (v - r i)^2
    dt / R_e = (v^2 t - 2 v r q + r^2 sq) / R_e``."""
    v, r = np.asarray(v, float), np.asarray(r, float)
    return (v * v * np.asarray(t, float) - 2.0 * v * r * np.asarray(q, float) + r * r * np.asarray(sq, float)) / r_e


def block_current(v_off, r_e):
    """The magnetising current (A) at which a freewheel against ``v_off`` V stops
    conducting: the terminal current is zero there (``V_off / R_e``)."""
    return np.maximum(np.asarray(v_off, float), 0.0) / r_e


# --------------------------------------------------------------- the magnetising branch
def branch_time(mag, i0, i1, v, r):
    """s for the magnetising current to go from ``i0`` to ``i1`` A with ``dpsi/dt = v - r
    i_m`` (``inf`` where ``i1`` lies at or past the asymptote ``v / r``)."""
    if isinstance(mag, FluxCoil):
        return flux.time(mag, i0, i1, v, r)
    i0, i1, v, r = (np.asarray(x, float) for x in (i0, i1, v, r))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.asarray(mag, float) / r * np.log((v - r * i0) / (v - r * i1))
    t = np.where(i1 == i0, 0.0, t)
    return np.where(np.isfinite(t) & (t >= 0), t, np.inf)


def branch_current(mag, t, i0, v, r):
    """Magnetising current in A after ``t`` s from ``i0`` A with ``dpsi/dt = v - r i_m``
    (moving toward ``v / r``; a saturating coil's stops at zero)."""
    if isinstance(mag, FluxCoil):
        return flux.current(mag, t, i0, v, r)
    a = np.asarray(v, float) / r
    return a + (np.asarray(i0, float) - a) * np.exp(-np.asarray(t, float) * r / np.asarray(mag, float))


def branch_integrals(mag, t, i0, i1, v, r):
    """``(int i_m dt, int i_m^2 dt)`` (A*s, A^2*s) over a segment of ``t`` s from ``i0`` to
    ``i1`` A with ``dpsi/dt = v - r i_m``."""
    if isinstance(mag, FluxCoil):
        with np.errstate(invalid="ignore"):
            q, s = flux.integral(mag, i0, i1, v, r, (1, 2))
        t = np.asarray(t, float)
        return np.where(t > 0, q, 0.0), np.where(t > 0, s, 0.0)
    a = np.asarray(v, float) / r
    return segment_integrals(a, np.asarray(i0, float) - a, np.asarray(mag, float) / r, t)


def stored_energy(mag, i):
    """Magnetic energy ``int_0^i i' dpsi(i')`` in J at magnetising current ``i`` A."""
    i = np.asarray(i, float)
    if not isinstance(mag, FluxCoil):
        return 0.5 * np.asarray(mag, float) * i * i
    c = mag.curve
    # per table interval, clipped to [0, i]: i L_d(i) is a cubic, exact at 4 nodes
    x, w = np.polynomial.legendre.leggauss(4)
    a = np.minimum(c.edges[:-1], i[..., None])
    b = np.minimum(c.edges[1:], i[..., None])
    nodes = 0.5 * (a + b)[..., None] + 0.5 * (b - a)[..., None] * x
    ld = c.incremental(nodes)
    part = 0.5 * (b - a) * ((nodes * ld) @ w)
    return np.asarray(mag.scale, float) * np.sum(part, axis=-1)


# ------------------------------------------------------------------ switched segments
def rise_time(i1, i0, v, r, e: EddyCoil):
    """s for the magnetising current to rise from ``i0`` to ``i1`` A, switch on."""
    vt, rt = thevenin(v, r, e.resistance)
    i0, i1 = np.asarray(i0, float), np.asarray(i1, float)
    return np.where(i1 <= i0, 0.0, branch_time(e.magnetising, i0, np.maximum(i1, i0), vt, rt))


def rise_current(t, i0, v, r, e: EddyCoil):
    """Magnetising current in A after ``t`` s switched on from ``i0`` A."""
    return branch_current(e.magnetising, t, i0, *thevenin(v, r, e.resistance))


def rise_integrals(t, i0, v, r, e: EddyCoil):
    """``(int i dt, int i^2 dt)`` of the terminal current over ``t`` s switched on from a
    magnetising current ``i0`` A, and the eddy resistance's energy (J) over it."""
    re_ = e.resistance
    vt, rt = thevenin(v, r, re_)
    end = branch_current(e.magnetising, t, i0, vt, rt)
    qm, sm = branch_integrals(e.magnetising, t, i0, end, vt, rt)
    return _terminal_integrals(t, qm, sm, v, r, re_)


def _terminal_integrals(t, qm, sm, v, r, re_):
    """Terminal ``(int i dt, int i^2 dt, eddy energy J)`` of a conducting segment of ``t``
    s at loop voltage ``v`` V through ``r`` ohm, from the magnetising current's integrals:
    ``i = (v + R_e i_m) / c`` and ``i - i_m = (v - r i_m) / c`` with ``c = r + R_e``."""
    t = np.asarray(t, float)
    v, r = np.asarray(v, float), np.asarray(r, float)
    c = r + re_
    q = (v * t + re_ * qm) / c
    s = (v * v * t + 2.0 * v * re_ * qm + re_ * re_ * sm) / (c * c)
    eddy = re_ * (v * v * t - 2.0 * v * r * qm + r * r * sm) / (c * c)
    return q, s, eddy


def decay_time(i1, i0, r, v_off, e: EddyCoil):
    """s of freewheeling from a magnetising current ``i0`` A down to ``i1`` A; ``i1 <= 0``:
    until the terminal current reaches zero (the freewheel path stops conducting). A
    target below ``V_off / R_e`` is reached after that, the flux dying through ``R_e``."""
    re_ = e.resistance
    vt, rt = thevenin(-np.asarray(v_off, float), r, re_)
    ib = block_current(v_off, re_)
    i0 = np.asarray(i0, float)
    i1 = np.minimum(np.asarray(i1, float), i0)
    stop = np.where(i1 <= 0, ib, i1)
    conduct_to = np.maximum(stop, ib)
    t1 = np.where(i0 > conduct_to, branch_time(e.magnetising, i0, np.minimum(conduct_to, i0), vt, rt), 0.0)
    start = np.minimum(i0, ib)
    tail = (stop < start) & (stop > 0)
    safe = np.where(tail, stop, start)
    t2 = np.where(tail, branch_time(e.magnetising, np.where(tail, start, 1.0), np.where(tail, safe, 1.0),
                                    0.0, re_), 0.0)
    return t1 + t2


def conduction_time(i0, r, v_off, e: EddyCoil):
    """s the freewheel path conducts from a magnetising current ``i0`` A (0 if ``i0 <=
    V_off / R_e``: the terminal current steps straight to zero)."""
    return decay_time(0.0, i0, r, v_off, e)


def decay_current(t, i0, r, v_off, e: EddyCoil):
    """Magnetising current in A after ``t`` s of freewheeling from ``i0`` A: through the
    freewheel path while the terminal current flows, then through ``R_e`` alone."""
    re_ = e.resistance
    vt, rt = thevenin(-np.asarray(v_off, float), r, re_)
    ib = block_current(v_off, re_)
    t, i0, ib = np.broadcast_arrays(np.asarray(t, float), np.asarray(i0, float), ib)
    tb = conduction_time(i0, r, v_off, e)
    first = branch_current(e.magnetising, np.minimum(t, tb), i0, vt, rt)
    start = np.minimum(i0, ib)
    late = t > tb
    rest = branch_current(e.magnetising, np.where(late, t - tb, 0.0), np.where(late, start, 0.0), 0.0, re_)
    return np.where(late, rest, np.where(i0 > ib, np.maximum(first, ib), first))


def decay_integrals(t, i0, r, v_off, e: EddyCoil):
    """Terminal ``(int i dt, int i^2 dt, eddy energy J)`` over ``t`` s of freewheeling
    from a magnetising current ``i0`` A; the terminal current flows only until the path
    stops conducting, the eddy energy counts the tail through ``R_e`` to ``t`` too."""
    re_ = e.resistance
    v = -np.asarray(v_off, float)
    vt, rt = thevenin(v, r, re_)
    ib = block_current(v_off, re_)
    t, i0, ib = np.broadcast_arrays(np.asarray(t, float), np.asarray(i0, float), ib)
    tb = conduction_time(i0, r, v_off, e)
    tc = np.minimum(t, tb)
    end = branch_current(e.magnetising, tc, i0, vt, rt)
    qm, sm = branch_integrals(e.magnetising, tc, i0, np.maximum(end, np.minimum(ib, i0)), vt, rt)
    q, s, eddy = _terminal_integrals(tc, qm, sm, v, r, re_)
    late = t > tb
    start = np.minimum(i0, ib)
    if np.any(late):
        whole = ~np.isfinite(t)
        tl = np.where(late & ~whole, t - tb, 0.0)
        fin = branch_current(e.magnetising, tl, np.where(late, start, 0.0), 0.0, re_)
        _, s_tail = branch_integrals(e.magnetising, tl, np.where(late, start, 0.0), fin, 0.0, re_)
        tail = np.where(whole, stored_energy(e.magnetising, start), re_ * s_tail)
        eddy = eddy + np.where(late, tail, 0.0)
    return q, s, eddy


def release_eddy_energy(i0, r, v_off, e: EddyCoil):
    """J the eddy resistance takes in a whole release from a magnetising current ``i0``
    A (the conduction, then the flux's tail through ``R_e`` to zero)."""
    return decay_integrals(np.inf, i0, r, v_off, e)[2]



@dataclass(frozen=True)
class LateRelease:
    """A split decay's release whose bypass opens ``lag`` s after the final turn-off, per
    point: the flux's time to the drop-out current and the time the terminal current
    stops (s), the magnetising current when the bypass opens (A), the terminal current's
    ``(int i dt, int i^2 dt)`` through the slow path and then the fast one (A*s, A^2*s),
    and the eddy resistance's energy to the end of the flux (J)."""

    drop_time: np.ndarray
    zero_time: np.ndarray
    open_current: np.ndarray
    slow: tuple
    fast: tuple
    eddy_energy: np.ndarray


def late_release(i_off, lag: float, slow, fast, drop, e: EddyCoil) -> LateRelease:
    """The release from a magnetising current ``i_off`` A through the hold's slow path
    (``slow = (r ohm, v_off V)``, the diode and the closed bypass) for ``lag`` s, then
    through the fast one (``fast``, the diode and the fast element). Each path blocks
    where its terminal current reaches zero (``i_m = V_off / R_e``) and the flux then
    decays through ``R_e``: the slow path may block inside the lag (the fast one then
    finds ``i_m`` below its own, higher, block current and conducts nothing); a flux
    still above the fast path's block current drives the terminal current on through the
    fast path, stepping down at the bypass's opening. ``drop``: the drop-out current
    (A, of the flux)."""
    (r1, v1), (r2, v2) = slow, fast
    i_off = np.asarray(i_off, float)
    i_lag = decay_current(lag, i_off, r1, v1, e)
    q1, s1, w1 = decay_integrals(lag, i_off, r1, v1, e)
    q2, s2, w2 = decay_integrals(np.inf, i_lag, r2, v2, e)
    t2 = conduction_time(i_lag, r2, v2, e)
    t_zero = np.where(t2 > 0, lag + t2, np.minimum(lag, conduction_time(i_off, r1, v1, e)))
    t_drop = np.where(i_lag <= drop, decay_time(drop, i_off, r1, v1, e), lag + decay_time(drop, i_lag, r2, v2, e))
    return LateRelease(t_drop, t_zero, i_lag, (q1, s1), (q2, s2), w1 + w2)

@dataclass(frozen=True)
class EddyOrbit:
    """The PWM hold's periodic orbit with an eddy resistance, per point: the lowest and
    highest magnetising current (A), whether the freewheel stops conducting in the
    off-time (``dcm``) and for how long it conducts (s), the terminal current's
    integrals over the on and off segments (A*s, A^2*s), the eddy energy of a period
    (J), the terminal current's lowest and highest values (A) and the magnetising
    current's ``int i_m^2 dt`` over a period (A^2*s: the force a moving armature feels
    goes with it)."""

    i_min: np.ndarray
    i_max: np.ndarray
    dcm: np.ndarray
    conduction_off: np.ndarray
    charge_on: np.ndarray
    square_on: np.ndarray
    charge_off: np.ndarray
    square_off: np.ndarray
    eddy_energy: np.ndarray
    terminal_min: np.ndarray
    terminal_max: np.ndarray
    square_magnetising: np.ndarray


def flat(e: EddyCoil, shape) -> EddyCoil:
    """``e`` broadcast to ``shape`` and flattened (one point per element)."""
    re_ = np.array(np.broadcast_to(np.asarray(e.resistance, float), shape), float).ravel()
    m = e.magnetising
    if isinstance(m, FluxCoil):
        m = m.with_scale(np.array(np.broadcast_to(np.asarray(m.scale, float), shape), float).ravel())
    else:
        m = np.array(np.broadcast_to(np.asarray(m, float), shape), float).ravel()
    return EddyCoil(m, re_)


def orbit(e: EddyCoil, t_on, t_off, v_on, r_on, r_off, v_off, iterations: int = 100) -> EddyOrbit:
    """The exact periodic orbit of the switched coil with an eddy resistance: on for
    ``t_on`` s (``v_on`` V through ``r_on``), off for ``t_off`` s (against ``v_off`` V
    through ``r_off``; the freewheel stops conducting when the terminal current reaches
    zero, at a magnetising current ``V_off / R_e``, and the flux then decays through
    ``R_e`` for the rest of the off-time).

    While the freewheel conducts through the whole off-time the orbit is the plain
    coil's with the Thevenin pairs (:func:`thevenin`): the closed-form fixed point of
    the two exponentials for a linear branch, the Newton orbit of
    :func:`coildrive.model.flux.orbit` for a curve. Where that orbit dips below ``V_off
    / R_e`` it does not exist, and the lowest magnetising current ``a`` is the fixed
    point of the period map ``P(a)`` on ``[0, V_off / R_e]`` (on, conduct down to
    ``V_off / R_e``, decay through ``R_e``): ``P`` rises with ``a`` with a slope below
    one, so ``P(a) - a`` falls through one root, found by regula falsi with the
    Illinois halving to 1e-13 of the bracket.
    """
    arrays = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                   (t_on, t_off, v_on, r_on, r_off, v_off, e.resistance)))
    shape = arrays[0].shape
    t_on, t_off, v_on, r_on, r_off, v_off, _ = (np.array(x, float).ravel() for x in arrays)
    e = flat(e, shape)
    n = t_on.size
    re_, mag = e.resistance, e.magnetising
    von_t, ron_t = thevenin(v_on, r_on, re_)
    voff_t, roff_t = thevenin(v_off, r_off, re_)     # decays toward -voff_t / roff_t
    ib = block_current(v_off, re_)
    if isinstance(mag, FluxCoil):
        ccm = (t_off <= 0) | _conducts(mag, t_on, t_off, von_t, ron_t, voff_t, roff_t, ib)
        a, b = np.zeros(n), np.zeros(n)
        k = np.flatnonzero(ccm)
        if k.size:
            o = flux.orbit(mag[k], t_on[k], t_off[k], von_t[k], ron_t[k], roff_t[k], voff_t[k])
            a[k], b[k] = o.i_min, o.i_max
    else:
        a, b = flux.linear_orbit(t_on, t_off, von_t, ron_t, roff_t, voff_t, mag)
        a = np.where(t_off <= 0, von_t / ron_t, a)
        b = np.where(t_off <= 0, von_t / ron_t, b)
        ccm = a > ib
    rest = np.flatnonzero(~ccm)
    if rest.size and isinstance(mag, FluxCoil):   # Newton on the segment times first
        ok, a_n, b_n = _blocked_newton(e[rest], t_on[rest], t_off[rest], von_t[rest], ron_t[rest],
                                       voff_t[rest], roff_t[rest], ib[rest])
        a[rest[ok]], b[rest[ok]] = a_n[ok], b_n[ok]
        rest = rest[~ok]
    if rest.size:
        a[rest] = _blocked_fixed_point(e[rest], t_on[rest], t_off[rest], von_t[rest], ron_t[rest],
                                       voff_t[rest], roff_t[rest], ib[rest], iterations)
        b[rest] = branch_current(e[rest].magnetising, t_on[rest], a[rest], von_t[rest], ron_t[rest])
    # the freewheel's conduction: the whole off-time, or until the magnetising current
    # reaches V_off / R_e
    stop = np.where(ccm, a, np.minimum(ib, b))
    if isinstance(mag, FluxCoil):
        # the three segments' time and integrals in one pass (a curve's depend only on the
        # end currents): on a -> b, conducting b -> stop, through R_e stop -> a
        three = mag.with_scale(np.tile(mag.scale, 3))
        with np.errstate(invalid="ignore"):
            ts, qs, ss = flux.integral(three, np.concatenate([a, b, stop]), np.concatenate([b, stop, a]),
                                       np.concatenate([von_t, -voff_t, 0.0 * re_]),
                                       np.concatenate([ron_t, roff_t, re_]), (0, 1, 2))
        cond = np.where(ccm, t_off, np.minimum(ts[n:2 * n], t_off))
        qm, sm = qs[:n], ss[:n]
        qm_off, sm_off = qs[n:2 * n], ss[n:2 * n]
        s_tail = np.where(ccm, 0.0, ss[2 * n:])
    else:
        tb = np.where(ccm, t_off, np.where(b > ib, branch_time(mag, b, np.where(b > ib, ib, b), -voff_t,
                                                                 roff_t), 0.0))
        cond = np.minimum(tb, t_off)
        qm, sm = branch_integrals(mag, t_on, a, b, von_t, ron_t)
        qm_off, sm_off = branch_integrals(mag, cond, b, stop, -voff_t, roff_t)
        _, s_tail = branch_integrals(mag, t_off - cond, stop, a, 0.0, re_)
    q_on, s_on, w_on = _terminal_integrals(t_on, qm, sm, v_on, r_on, re_)
    q_off, s_off, w_off = _terminal_integrals(cond, qm_off, sm_off, -v_off, r_off, re_)
    w_tail = np.where(ccm, 0.0, re_ * s_tail)
    t_max = terminal(b, v_on, r_on, re_)
    t_min = np.where(ccm, terminal(a, -v_off, r_off, re_), 0.0)
    full = t_off <= 0   # always on: the terminal current sits at v_on / r_on
    q_on = np.where(full, t_max * t_on, q_on)
    s_on = np.where(full, t_max * t_max * t_on, s_on)
    w_on = np.where(full, 0.0, w_on)
    t_min = np.where(full, t_max, t_min)
    # the magnetising current's square over the period: on, conducting, then through R_e
    s_mag = np.where(full, b * b * t_on, sm + np.where(cond > 0, sm_off, 0.0)
                     + np.where(ccm, 0.0, s_tail))
    out = (a, b, ~ccm, cond, q_on, s_on, q_off, s_off, w_on + w_off + w_tail, t_min, t_max, s_mag)
    return EddyOrbit(*(np.reshape(x, shape) for x in out))


def _conducts(mag, t_on, t_off, von_t, ron_t, voff_t, roff_t, ib):
    """Whether the freewheel of a saturating branch conducts through the whole off-time
    in the orbit: exactly when, from ``a = ib``, the on-time ends at a ``b_c`` from which
    the decay back to ``ib`` takes longer than the off-time (``P`` rises with ``a`` with
    a slope below one). Both times rise with that end current, so with ``b_g`` the end
    current whose decay takes exactly the off-time, it conducts iff ``b_c > b_g``. Two
    probes 5 % either side of the linear estimate of ``b_c`` settle most points with one
    batch of segment times (``T_on(ib -> b)`` against ``t_on``, ``T_off(b -> ib)`` against
    ``t_off``); the rest (``b_g`` between the probes) take the exact on-current."""
    n = ib.size
    top = von_t / ron_t
    ell = mag.incremental(ib)
    guess = top + (ib - top) * np.exp(-t_on * ron_t / ell)
    lo = np.maximum(ib + 0.95 * (guess - ib), ib * (1 + 1e-9))
    hi = np.minimum(ib + 1.05 * (guess - ib), top * (1 - 1e-12))
    four = mag.with_scale(np.tile(mag.scale, 4))
    t = flux.time(four, np.concatenate([ib, ib, lo, hi]), np.concatenate([lo, hi, ib, ib]),
                  np.concatenate([von_t, von_t, -voff_t, -voff_t]),
                  np.concatenate([ron_t, ron_t, roff_t, roff_t]))
    f_lo, f_hi, g_lo, g_hi = t[:n] - t_on, t[n:2 * n] - t_on, t[2 * n:3 * n] - t_off, t[3 * n:] - t_off
    yes = (f_lo <= 0) & (g_lo > 0)      # b_g < lo <= b_c
    no = (f_hi >= 0) & (g_hi < 0)       # b_c <= hi < b_g
    out = yes.copy()
    rest = np.flatnonzero(~yes & ~no)
    if rest.size:
        k = mag[rest]
        b = branch_current(k, t_on[rest], ib[rest], von_t[rest], ron_t[rest])
        out[rest] = (b > ib[rest]) & (flux.time(k, b, np.minimum(ib[rest], b), -voff_t[rest], roff_t[rest])
                                      > t_off[rest])
    return out


def _blocked_newton(e, t_on, t_off, von_t, ron_t, voff_t, roff_t, ib, iterations: int = 30):
    """The blocked orbit of a saturating branch by Newton's method on its two segment
    times (no inner solves): ``T_on(a -> b) = t_on`` and ``T_off(b -> ib) + T_Re(ib -> a)
    = t_off`` (``T_Re(b -> a)`` alone where ``b <= ib``: the turn-off step already takes
    the terminal current to zero), with the exact Jacobian (the integrands ``L_d / (v - r
    i)`` at the ends; continuous at ``b = ib``) and steps halved to stay in ``0 < a < ib``,
    ``a < b``. Returns ``(converged, a, b)``; the
    points that do not converge go to :func:`_blocked_fixed_point`."""
    mag, re_ = e.magnetising, e.resistance
    n = ib.size
    # start: the linear branch at the incremental inductance of ib / 2, the whole off-time
    # through R_e (the orbit's own case when the turn-off step takes the current to zero)
    ell = mag.incremental(0.5 * ib)
    top = von_t / ron_t
    e_on, e_t = np.exp(-t_on * ron_t / ell), np.exp(-t_off * re_ / ell)
    a = np.clip(top * (1.0 - e_on) * e_t / (1.0 - e_on * e_t), 1e-3 * ib, 0.999 * ib)
    b = top + (a - top) * e_on

    three = mag.with_scale(np.tile(mag.scale, 3))
    vs, rs = np.concatenate([von_t, -voff_t, 0.0 * ib]), np.concatenate([ron_t, roff_t, re_])

    def resid(a, b):   # the three segment times in one pass
        cond = b > ib   # the freewheel conducts from b down to ib, then the flux decays via R_e
        knee = np.where(cond, ib, b)
        t = flux.time(three, np.concatenate([a, np.where(cond, b, 2 * ib), knee]),
                      np.concatenate([b, ib, a]), vs, rs)
        t_cond = np.where(cond, t[n:2 * n], 0.0)
        return t[:n] / t_on - 1.0, (t_cond + t[2 * n:]) / t_off - 1.0

    f1, f2 = resid(a, b)
    for _ in range(iterations):
        la, lb = mag.incremental(a), mag.incremental(b)
        j11, j12 = -la / (von_t - ron_t * a) / t_on, lb / (von_t - ron_t * b) / t_on
        v_b = np.where(b > ib, -voff_t - roff_t * b, -re_ * b)   # the off-segment's dpsi/dt at b
        j21, j22 = la / (-re_ * a) / t_off, -lb / v_b / t_off
        det = j11 * j22 - j12 * j21
        with np.errstate(divide="ignore", invalid="ignore"):
            da = (-f1 * j22 + f2 * j12) / det
            db = (-j11 * f2 + j21 * f1) / det
        norm = np.abs(f1) + np.abs(f2)
        step = np.ones(n)
        better = np.zeros(n, bool)
        for _h in range(30):
            na, nb = a + step * da, b + step * db
            inside = np.isfinite(na + nb) & (na > 0) & (na < ib) & (nb > na) & (nb < von_t / ron_t)
            g1, g2 = resid(np.where(inside, na, a), np.where(inside, nb, b))
            better = inside & (np.abs(g1) + np.abs(g2) < norm)
            if np.all(better | (norm < 1e-13)):
                break
            step = np.where(better, step, 0.5 * step)
        a, b = np.where(better, na, a), np.where(better, nb, b)
        f1, f2 = np.where(better, g1, f1), np.where(better, g2, f2)
        ok = np.abs(f1) + np.abs(f2) < 1e-11
        if np.all(ok | ~better):
            break
    return ok, a, b


def _blocked_fixed_point(e, t_on, t_off, von_t, ron_t, voff_t, roff_t, ib, iterations):
    """The lowest magnetising current of an orbit whose freewheel stops conducting: the
    root of ``P(a) - a`` on ``[0, ib]`` (see :func:`orbit`)."""
    mag, re_ = e.magnetising, e.resistance

    def g(x):
        top = branch_current(mag, t_on, x, von_t, ron_t)
        above = top > ib
        tb = np.where(above, branch_time(mag, top, np.where(above, ib, top), -voff_t, roff_t), 0.0)
        late = tb < t_off
        start = np.minimum(top, ib)
        after = branch_current(mag, np.where(late, t_off - tb, 0.0), np.where(late, start, 0.0), 0.0, re_)
        still = branch_current(mag, np.where(late, 0.0, t_off), top, -voff_t, roff_t)
        return np.where(late, after, still) - x

    x, _, hi, _, g_hi = falling_root(g, ib, iterations)
    return np.where(g_hi == 0, hi, x)


def terminal_rise_time(i, v, r, e: EddyCoil):
    """s from switch-on (no flux) until the terminal current reaches ``i`` A: zero where
    the switch-on step ``V / (R + R_e)`` already reaches it, else until the magnetising
    current reaches ``((R + R_e) i - V) / R_e``."""
    i_m = ((np.asarray(r, float) + e.resistance) * np.asarray(i, float) - np.asarray(v, float)) / e.resistance
    return rise_time(np.maximum(i_m, 0.0), 0.0, v, r, e)
