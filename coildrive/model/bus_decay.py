"""A full bridge's fast decay into a bus behind a source resistance, closed form.

At a turn-off all four switches open and the coil's current flows on through two body
diodes into the bus, which sits behind the source's resistance ``R_s`` with the bulk
capacitor ``C`` across it (a source that takes current back, ``supply.sink = true``)::

    V_s ──R_s──┬── bus v(t) ── body diode ── coil (R, L) ── body diode ── 0 V
               C
              0 V

    L di/dt = -(R i + v + 2 V_d)
    C dv/dt = i + (V_s - v)/R_s          i(0) = i0, v(0) = v0

(``R`` ohm: the coil and the sense resistor; ``V_d`` V each diode.) Linear with constant
input, so ``x(t) = x_ss + e^{A t} (x(0) - x_ss)`` exactly (:mod:`coildrive.model.linear2`)
with ``A = [[-R/L, -1/L], [1/C, -1/(R_s C)]]`` and the (never reached) steady state
``i_ss = -(V_s + 2 V_d)/(R + R_s)``, ``v_ss = V_s + R_s i_ss``. It holds until the
current's first zero, where the diodes block; the bus then relaxes to ``V_s`` through
``R_s C``, monotonically.

Where the extremes are, exactly:

* While ``i > 0`` the bus cannot fall below ``min(v0, V_s)`` (below ``V_s`` both the
  source and the coil charge it), so the current falls at least as fast as the RL decay
  against that fixed bus: the first zero comes by ``(L/R) ln(1 + R i0/(min(v0, V_s) + 2
  V_d))``.
* ``di/dt < 0`` at the start and the current falls monotonically to its first zero
  (for real eigenvalues ``di/dt`` has at most one zero, and a minimum above zero could not
  fall on to ``i_ss < 0``; for a complex pair the damped oscillation about ``i_ss`` crosses
  it before its first minimum). The bisections for the drop-out current and for zero run on
  ``[0, min(that bound, the first zero of di/dt)]``.
* The bus rises from ``v0 <= V_s`` to its first maximum at the first zero of ``dv/dt``
  (closed form, :func:`coildrive.model.linear2.first_zero`); later maxima of a damped
  oscillation are lower. Its highest is ``v`` at the earlier of that and the current's
  zero, or ``V_s`` if higher. A bus that starts above the source by more than ``R_s i0``
  (a mixed-decay hold's returns, a drain on the bus: :func:`decay_drawn`) falls first, to
  that first zero of ``dv/dt``: its highest is then the start, or the next turn of a
  complex pair (``pi/omega`` later) or the current's zero where higher.

**A supply that cannot sink** (``supply.sink = false``: a diode in its feed, taken as
ideal, one-way, no drop): the source feeds the bus only while ``v < V_s``. From a bus at
``v0 < V_s`` the circuit above holds (:func:`decay` up to the moment the bus reaches
``V_s``: it rises monotonically to its first maximum, so that is a bisection on the
monotone stretch); from there, or from ``v0 = V_s``, the feed blocks and the returned
current charges ``C`` alone: the series RLC circuit of
:func:`coildrive.model.bridge.pump_up` (``L di/dt = -(R i + v + 2 V_d)``, ``C dv/dt =
i``), exact, the current falling monotonically to zero and the bus rising with it until
then; the bus stays there (nothing takes it back). See :func:`decay_no_sink`.

With an eddy-current term (:func:`eddy_decay`, :func:`eddy_decay_no_sink`) the circuit is
:mod:`coildrive.model.supply`'s eddy circuit with the bus mirrored, blocking where the
terminal current reaches zero, the flux's tail through ``R_e`` after it.

All functions broadcast over numpy arrays; units are A, V, ohm, H, F, s.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from . import linear2, rlc, supply

#: Bisection steps for the drop-out and zero times: the bracket shrinks 2^-60.
BISECTION_STEPS = 60

#: Starting buses a full bridge's fast decay is tried from, evenly over the range the bus
#: can be in at a turn-off (:mod:`coildrive.design.bridge_bus`; with a moving armature
#: :func:`coildrive.model.armature_bus_release.release_over`).
STARTS = 5


@dataclass(frozen=True)
class FastDecay:
    """The fast decay of ``i0`` A from a bus at ``v0`` V (arrays): the time to the drop-out
    current and to zero (s), the highest bus (V: while the current flows, ``bus_top``,
    or the source's ``V_s`` it relaxes to after, if higher) and when (s; ``inf`` when that
    is ``V_s``), the bus when the current stops (V), and the charge the current carries
    until then (C, ``int i dt``); with an eddy term (else ``None``) the eddy resistance's
    loss over the whole release (J: while the diodes conduct, then the flux's tail)."""

    drop_time: np.ndarray
    zero_time: np.ndarray
    bus_top: np.ndarray
    bus_max: np.ndarray
    bus_max_time: np.ndarray
    bus_at_zero: np.ndarray
    charge: np.ndarray
    eddy_energy: np.ndarray | None = None


def _fed(i0, v0, v_s, r_s, c, r, l, v_d):
    """The circuit with the source (module docstring): ``(A, its eigenvalues, x(0) - x_ss,
    i_ss, at)`` with ``at(t) -> (i A, v V)``."""
    a = (-r / l, -1.0 / l, 1.0 / c, -1.0 / (r_s * c))
    l1, l2 = linear2.eigenvalues(*a)
    i_ss = -(v_s + 2.0 * v_d) / (r + r_s)
    v_ss = v_s + r_s * i_ss
    y = (i0 - i_ss, v0 - v_ss)

    def at(t):
        di, dv = linear2.apply(t, a, l1, l2, y)
        return i_ss + di, v_ss + dv
    return a, (l1, l2), y, i_ss, at


def _fall(value, start, target, top):
    """The time (s) ``value(t)`` (falling from ``start`` on ``[0, top]``) reaches
    ``target``: bisection (0 where it starts at or below it)."""
    lo_t, hi_t = np.zeros_like(top), top.copy()
    for _ in range(BISECTION_STEPS):
        mid = 0.5 * (lo_t + hi_t)
        above = value(mid) > target
        lo_t, hi_t = np.where(above, mid, lo_t), np.where(above, hi_t, mid)
    return np.where(start > target, hi_t, 0.0)


def _grow(value, hi, step):
    """``hi`` doubled (from ``step`` s where it is not finite) until ``value`` has fallen to
    zero there."""
    hi = np.where(np.isfinite(hi), hi, step)
    for _ in range(100):
        short = value(hi) > 0.0
        if not short.any():
            break
        hi = np.where(short, 2.0 * hi, hi)
    return hi


def decay(i0, v0, i_drop, v_s, r_s, c, r, l, v_d) -> FastDecay:
    """The circuit of the module docstring from ``i0`` A and the bus at ``v0`` V (at or
    below the source's ``v_s`` V); ``i_drop`` A the drop-out current."""
    i0, v0, i_drop, v_s, r_s, c, r, l, v_d = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, r_s, c, r, l, v_d)))
    a, (l1, l2), y, i_ss, at = _fed(i0, v0, v_s, r_s, c, r, l, v_d)
    z = linear2.times(a, y)                 # the rates at t = 0
    zz = linear2.times(a, z)                # and their rates

    v_lo = np.minimum(v0, v_s)
    with np.errstate(divide="ignore", invalid="ignore"):
        bound = l / r * np.log1p(r * i0 / (v_lo + 2.0 * v_d))
    hi = np.minimum(np.where(np.isfinite(bound) & (bound > 0), bound, np.inf),
                    linear2.first_zero(z[0], zz[0], l1, l2))
    # a bus down at -2 V_d (the bridge's own body diodes clamp it there) leaves no bound:
    # grow a bracket from L/R until the current has crossed zero
    hi = _grow(lambda t: at(t)[0], hi, l / r)

    t_zero = _fall(lambda t: at(t)[0], i0, 0.0, hi)
    t_drop = _fall(lambda t: at(t)[0], i0, i_drop, t_zero)
    t_top = np.minimum(linear2.first_zero(z[1], zz[1], l1, l2), t_zero)
    v_top = at(t_top)[1]
    falling = z[1] < 0.0
    if falling.any():
        # a bus that starts above the source (a drain on it, :func:`decay_drawn`; a
        # mixed-decay hold's returns, :func:`mixed_hold_rise`) and above it by more than
        # R_s i0 first falls to its minimum (that first zero of dv/dt): its highest is then
        # the start, the next turn of a complex pair (pi/omega later) or the current's zero
        w = np.abs(l1.imag)
        with np.errstate(divide="ignore", invalid="ignore"):
            t_next = np.where(w > 0, linear2.first_zero(z[1], zz[1], l1, l2) + np.pi / np.where(w > 0, w, 1.0),
                              np.inf)
        t_next = np.where(np.isfinite(t_next) & (t_next < t_zero), t_next, t_zero)
        v_next = at(t_next)[1]
        later = v_next > v0
        t_top = np.where(falling, np.where(later, t_next, 0.0), t_top)
        v_top = np.where(falling, np.where(later, v_next, v0), v_top)
    bus_max = np.maximum(v_top, v_s)
    i_z, v_z = at(t_zero)
    # int_0^t (x - x_ss) dt = A^-1 (x(t) - x(0)): the current's part, plus i_ss t
    det = a[0] * a[3] - a[1] * a[2]
    charge = i_ss * t_zero + (a[3] * (i_z - i0) - a[1] * (v_z - v0)) / det
    return FastDecay(t_drop, t_zero, v_top, bus_max, np.where(v_top > v_s, t_top, np.inf), v_z, charge)


def eddy_decay(i0, v0, i_drop, v_s, r_s, c, r, l, v_d, r_e) -> FastDecay:
    """:func:`decay` with an eddy resistance ``r_e`` ohm across the magnetising branch ``l``
    H (:mod:`coildrive.model.eddy`; ``i0`` and ``i_drop`` magnetising currents). With ``u =
    -(v + 2 V_d)`` the circuit is the peak's of :mod:`coildrive.model.supply` with the
    eddy term and the source ``-(V_s + 2 V_d)``, from ``(i0, u0)``: ``L di_m/dt = k (u - R
    i_m)``, ``C du/dt = (u_s - u)/R_s - k (i_m + u/R_e)``, ``k = R_e/(R + R_e)``, closed form
    (:func:`coildrive.model.supply.state_from`). The body diodes carry the terminal current
    ``k (i_m + u/R_e)`` and block at its first zero: it falls from the turn-off (``i_m``
    falls, the bus rises) to its first turn (the first zero of its rate, closed form,
    :func:`coildrive.model.linear2.first_zero`), and ``i_m`` reaches zero no later than
    ``L/(k R) ln(1 + R i0/(min(v0, V_s) + 2 V_d))`` (the bus staying above ``min(v0, V_s)``)
    with the terminal current's zero before it, so the zero is a bisection on ``[0, the
    earlier of the two]`` (0 where the turn-off's step already takes it there). The zero
    time, the bus then, the highest bus (:func:`coildrive.model.supply.lowest_from` of
    ``u``, exact) and the charge (the terminal current's, exact) end there; the flux then
    dies through ``R_e`` alone, ``i_m = i_z e^{-t R_e/L}``, so a drop-out current below
    the block current ``i_z`` is reached ``(L/R_e) ln(i_z/i_drop)`` later."""
    i0, v0, i_drop, v_s, r_s, c, r, l, v_d, r_e = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, r_s, c, r, l, v_d, r_e)))
    b = supply.bus(-(v_s + 2.0 * v_d), r_s, c, r, l, r_e)
    return _eddy_run(b, i0, v0, i_drop, v_s, v_d, r_e)[0]


def _eddy_run(b, i0, v0, i_drop, v_s, v_d, r_e):
    """:func:`eddy_decay` on the circuit ``b`` (a :class:`coildrive.model.supply.Bus` in
    ``u``: the source's, or with no source the capacitor alone) from ``i0`` A and the bus
    at ``v0`` V: ``(FastDecay, at)`` with ``at(t) -> (i_m A, u V)``."""
    l, r = b.l, b.r
    u0 = -(v0 + 2.0 * v_d)
    k = r_e / (r + r_e)

    def at(t):
        return supply.state_from(t, b, i0, u0)

    def flow(t):
        return supply.terminal(*at(t), b)

    a = b.matrix
    ad = linear2.times(a, (i0 - b.i_ss, u0 - b.v_ss))
    aad = linear2.times(a, ad)
    turn = linear2.first_zero(k * (ad[0] + ad[1] / r_e), k * (aad[0] + aad[1] / r_e), b.l1, b.l2)
    with np.errstate(divide="ignore", invalid="ignore"):
        bound = l / (k * r) * np.log1p(r * i0 / (np.minimum(v0, v_s) + 2.0 * v_d))
    hi = np.minimum(np.where(np.isfinite(bound) & (bound > 0), bound, np.inf), turn)
    hi = _grow(flow, hi, l / (k * r))
    t_zero = _fall(flow, flow(np.zeros_like(i0)), 0.0, hi)
    i_z, u_z = at(t_zero)
    late = i_drop < i_z
    with np.errstate(divide="ignore", invalid="ignore"):
        tail = l / r_e * np.log(np.where(late, i_z / i_drop, 1.0))
    t_drop = np.where(late, t_zero + tail, _fall(lambda t: at(t)[0], i0, i_drop, t_zero))
    u_low, t_low = supply.lowest_from(t_zero, b, i0, u0)
    v_top = -u_low - 2.0 * v_d
    charge = supply.integrals_from(t_zero, b, i0, u0)[0]
    # the eddy loss while the diodes conduct, then the field's whole store at the block
    loss = supply.eddy_loss_from(t_zero, b, i0, u0) + 0.5 * l * i_z * i_z
    return FastDecay(t_drop, t_zero, v_top, np.maximum(v_top, v_s), np.where(v_top > v_s, t_low, np.inf),
                     -u_z - 2.0 * v_d, charge, loss), at


def eddy_trace(t, i0, v0, v_s, r_s, c, r, l, v_d, r_e, sink: bool = True):
    """The terminal current (A, at least 0) and the bus (V) ``t`` s (an array) into
    :func:`eddy_decay` (``eddy_decay_no_sink`` without ``sink``) of one point from a
    magnetising current ``i0`` A and the bus at ``v0`` V, up to the terminal current's
    zero: the same closed forms (:func:`coildrive.model.supply.state_from` in ``u = -(v +
    2 V_d)``; without a sink the source's circuit until the feed blocks, then the
    capacitor alone's from the state there)."""
    t = np.asarray(t, float)
    if sink:
        b = supply.bus(-(v_s + 2.0 * v_d), r_s, c, r, l, r_e)
        i_m, u = supply.state_from(t, b, i0, -(v0 + 2.0 * v_d))
        return np.maximum(supply.terminal(i_m, u, b), 0.0), -u - 2.0 * v_d
    _, (b_fed, at), none, (t_a, i_a, v_a), blocked = _eddy_no_sink(i0, v0, 0.0, v_s, r_s, c, r, l, v_d, r_e)
    t_a, i_a, v_a, blocked = (x.item() for x in (t_a, i_a, v_a, blocked))
    late = (t > t_a) & bool(blocked)
    i_f, u_f = at(np.minimum(t, t_a))
    i_n, u_n = supply.state_from(np.maximum(t - t_a, 0.0), none, i_a, -(v_a + 2.0 * v_d))
    i = np.where(late, supply.terminal(i_n, u_n, none), supply.terminal(i_f, u_f, b_fed))
    u = np.where(late, u_n, u_f)
    return np.maximum(i, 0.0), -u - 2.0 * v_d


def eddy_decay_no_sink(i0, v0, i_drop, v_s, r_s, c, r, l, v_d, r_e) -> FastDecay:
    """:func:`eddy_decay` on a supply that cannot sink (as :func:`decay_no_sink`): with the
    source until the bus reaches ``v_s`` V (it rises monotonically to its first maximum: a
    bisection there), then the capacitor alone, the same closed form with no source
    (``R_s -> inf``: ``A = [[-k R/L, k/L], [-k/C, -k/(R_e C)]]``, steady state 0), until
    the terminal current's zero; the bus rises to it and stays there, the flux's tail
    through ``R_e`` after it."""
    return _eddy_no_sink(i0, v0, i_drop, v_s, r_s, c, r, l, v_d, r_e)[0]


def _eddy_no_sink(i0, v0, i_drop, v_s, r_s, c, r, l, v_d, r_e):
    """:func:`eddy_decay_no_sink`: ``(FastDecay, the fed stretch's circuit and its at(t),
    the capacitor alone's circuit, (t_a s, i_a A, v_a V) where the feed blocks, blocked)``."""
    i0, v0, i_drop, v_s, r_s, c, r, l, v_d, r_e = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, r_s, c, r, l, v_d, r_e)))
    b_fed = supply.bus(-(v_s + 2.0 * v_d), r_s, c, r, l, r_e)
    fed, at = _eddy_run(b_fed, i0, np.minimum(v0, v_s), i_drop, v_s, v_d, r_e)
    reach = (fed.bus_top > v_s) & (v0 < v_s)
    # the bus's shortfall below v_s falls to zero on its rise to its first maximum
    t_reach = _fall(lambda t: v_s + 2.0 * v_d + at(t)[1], v_s - v0, 0.0, np.where(reach, fed.bus_max_time, 0.0))
    blocked = reach | (v0 >= v_s)
    t_a = np.where(v0 >= v_s, 0.0, np.where(reach, t_reach, fed.zero_time))
    i_a = np.where(v0 >= v_s, i0, np.where(reach, at(t_a)[0], 0.0))
    v_a = np.where(blocked, np.maximum(v0, v_s), fed.bus_at_zero)
    u0 = -(np.minimum(v0, v_s) + 2.0 * v_d)
    q_a = np.where(v0 >= v_s, 0.0, np.where(reach, supply.integrals_from(t_a, b_fed, i0, u0)[0], fed.charge))
    with np.errstate(invalid="ignore"):       # (its v_ss: 0 - inf x 0)
        none = dataclasses.replace(supply.bus(np.zeros_like(v_s), np.full_like(v_s, np.inf), c, r, l, r_e),
                                   v_ss=np.zeros_like(v_s))
    alone, _ = _eddy_run(none, np.where(blocked, i_a, i0), np.where(blocked, v_a, v_s), i_drop, v_s, v_d, r_e)
    v_end = np.where(blocked, alone.bus_at_zero, fed.bus_at_zero)
    t_drop = np.where(~blocked | (i_a <= i_drop), fed.drop_time, t_a + alone.drop_time)
    t_zero = np.where(blocked, t_a + alone.zero_time, fed.zero_time)
    bus_top = np.where(blocked, v_end, fed.bus_top)
    when = np.where(blocked, t_zero, fed.bus_max_time)
    # the eddy loss: the fed stretch to the moment the bus reaches v_s, then the capacitor alone's
    loss_a = supply.eddy_loss_from(t_a, b_fed, i0, u0)
    loss = np.where(blocked, loss_a + alone.eddy_energy, fed.eddy_energy)
    return (FastDecay(t_drop, t_zero, bus_top, np.maximum(bus_top, v_s), np.where(bus_top > v_s, when, np.inf),
                      v_end, q_a + np.where(blocked, c * (v_end - v_a), 0.0), loss),
            (b_fed, at), none, (t_a, i_a, v_a), blocked)


def _fed_stretch(i0, v0, i_drop, v_s, r_s, c, r, l, v_d):
    """A supply that cannot sink: the stretch with the source (phase A, until the bus
    reaches ``v_s`` or the current stops): ``(A, i_ss, the fed decay's FastDecay, blocked
    (the feed blocks before the current stops), (t_a s, i_a A, v_a V) at its end, at)``."""
    a, _, _, i_ss, at = _fed(i0, v0, v_s, r_s, c, r, l, v_d)
    fed = decay(i0, v0, i_drop, v_s, r_s, c, r, l, v_d)
    # phase A reaches V_s where its bus top, before the current stops, is above it
    t_top = np.where(fed.bus_top > v_s, fed.bus_max_time, 0.0)
    reach = (fed.bus_top > v_s) & (v0 < v_s)
    lo_t, hi_t = np.zeros_like(t_top), np.where(reach, t_top, 0.0)
    for _ in range(BISECTION_STEPS):
        mid = 0.5 * (lo_t + hi_t)
        below = at(mid)[1] < v_s
        lo_t, hi_t = np.where(below, mid, lo_t), np.where(below, hi_t, mid)
    blocked = reach | (v0 >= v_s)
    t_a = np.where(v0 >= v_s, 0.0, np.where(reach, hi_t, fed.zero_time))
    i_a = np.where(v0 >= v_s, i0, np.where(reach, at(t_a)[0], 0.0))
    v_a = np.where(blocked, np.maximum(v0, v_s), fed.bus_at_zero)
    return a, i_ss, fed, blocked, (t_a, i_a, v_a), at


def trace(t, i0, v0, v_s, r_s, c, r, l, v_d, sink: bool = True):
    """The current (A) and the bus (V) ``t`` s (an array) into the fast decay of one point
    from ``i0`` A and the bus at ``v0`` V (:func:`decay`, or :func:`decay_no_sink` without
    ``sink``), up to the current's zero: the same closed forms (with the source, then the
    series RLC circuit into ``C`` alone once the feed blocks). Past the zero the current is
    0 and the bus is left where it was (the caller ends there)."""
    t = np.asarray(t, float)
    point = [np.asarray(x, float) for x in (i0, v0, 0.0, v_s, r_s, c, r, l, v_d)]
    if sink:
        _, _, _, _, at = _fed(point[0], point[1], *point[3:])
        i, v = at(t)
        return np.maximum(i, 0.0), v
    _, _, fed, blocked, (t_a, i_a, v_a), at = _fed_stretch(*point)
    i_fed, v_fed = at(np.minimum(t, t_a))
    a_b = c * (v_a + 2.0 * v_d)
    x, i_b = rlc.state(np.maximum(t - t_a, 0.0), a_b, np.where(blocked, i_a, 1.0), r, l, c)
    late = blocked & (t > t_a)
    return np.maximum(np.where(late, i_b, i_fed), 0.0), np.where(late, v_a + (x - a_b) / c, v_fed)


def decay_no_sink(i0, v0, i_drop, v_s, r_s, c, r, l, v_d) -> FastDecay:
    """:func:`decay` on a supply that cannot sink (module docstring): with the source
    until the bus reaches ``v_s`` V, then the series RLC circuit into ``C`` alone.
    ``bus_max`` is the bus when the current stops (or ``v_s``, which a bus that never got
    there relaxes back to)."""
    i0, v0, i_drop, v_s, r_s, c, r, l, v_d = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, r_s, c, r, l, v_d)))
    a, i_ss, fed, blocked, (t_a, i_a, v_a), _ = _fed_stretch(i0, v0, i_drop, v_s, r_s, c, r, l, v_d)
    det = a[0] * a[3] - a[1] * a[2]
    q_a = i_ss * t_a + (a[3] * (i_a - i0) - a[1] * (v_a - v0)) / det
    q_a = np.where(v0 >= v_s, 0.0, np.where(blocked, q_a, fed.charge))   # (below v_s: blocked = reached it)
    # phase B: x = q + C (v_a + 2 V_d), x(0) = a_b, x'(0) = i_a (model/rlc.py)
    a_b = c * (v_a + 2.0 * v_d)
    i_b = np.where(blocked, i_a, 1.0)
    t_zb = np.where(blocked & (i_a > 0), rlc.first_zero(a_b, i_b, r, l, c), 0.0)
    x_z, _ = rlc.state(t_zb, a_b, i_b, r, l, c)
    v_end = np.where(blocked, v_a + (x_z - a_b) / c, fed.bus_at_zero)
    q_b = np.where(blocked, x_z - a_b, 0.0)

    def crossing_b(target):
        lo, hi = np.zeros_like(t_zb), t_zb.copy()
        for _ in range(BISECTION_STEPS):
            mid = 0.5 * (lo + hi)
            above = rlc.state(mid, a_b, i_b, r, l, c)[1] > target
            lo, hi = np.where(above, mid, lo), np.where(above, hi, mid)
        return hi

    drop_in_a = (~blocked) | (i_a <= i_drop)
    t_drop = np.where(drop_in_a, fed.drop_time, t_a + crossing_b(i_drop))
    t_zero = np.where(blocked, t_a + t_zb, fed.zero_time)
    bus_top = np.where(blocked, v_end, fed.bus_top)
    bus_max = np.maximum(bus_top, v_s)
    when = np.where(blocked, t_zero, fed.bus_max_time)
    return FastDecay(t_drop, t_zero, bus_top, bus_max, np.where(bus_top > v_s, when, np.inf), v_end,
                     q_a + q_b)


def decay_drawn(i0, v0, i_drop, v_s, i_c, r_s, c, r, l, v_d, sink: bool = True) -> FastDecay:
    """:func:`decay` (``sink``) or :func:`decay_no_sink` with a constant current ``i_c`` A
    drawn off the bus throughout (a boost converter fed from the main bus recharging its
    capacitor, :func:`coildrive.design.supply.converter_current`); ``v0`` at or below
    ``v_s`` V, possibly above ``V_s' = v_s - R_s i_c``.

    While the source feeds the bus, ``C dv/dt = i + (V_s - v)/R_s - i_c = i + (V_s' -
    v)/R_s``: :func:`decay`'s circuit with the source ``V_s'`` (Thevenin, exact). A supply
    that sinks stays there until the current's zero (``bus_max``: the highest bus, or
    ``V_s'`` the bus relaxes to). A supply that cannot sink blocks where the bus reaches
    ``v_s`` (not ``V_s'``): a bus that starts rising reaches it on the rise to its first
    maximum (bisection); one that starts falling (``i0 < i_c - (v_s - v0)/R_s``) never
    does (at ``v = v_s`` it would need ``i > i_c``, and the current only falls). Blocked,
    ``L di/dt = -(R i + v + 2 V_d)``, ``C dv/dt = i - i_c``: linear with a constant input,
    ``A = [[-R/L, -1/L], [1/C, 0]]`` about ``(i_c, -(R i_c + 2 V_d))``, closed form; the bus
    rises to its top where ``i = i_c`` (the first zero of ``dv/dt``) and falls after it. The
    current falls all the while (``v >= v_s > 0``), so the blocked stretch ends at the
    earlier of the current's zero (a bisection up to its first minimum) and the bus back at
    ``v_s`` (a bisection on its fall after the top): from there the source feeds it again,
    :func:`decay` with ``V_s'`` from ``(i, v_s)``, the bus never back up to ``v_s`` (the
    current is below ``i_c``). ``i_c = 0`` is :func:`decay_no_sink`'s circuit (its second
    stretch the series RLC circuit: the same numbers)."""
    i0, v0, i_drop, v_s, i_c, r_s, c, r, l, v_d = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, i_c, r_s, c, r, l, v_d)))
    v_fed = v_s - r_s * i_c
    fed = decay(i0, v0, i_drop, v_fed, r_s, c, r, l, v_d)
    if sink:
        return fed
    a, _, y, i_ss, at = _fed(i0, v0, v_fed, r_s, c, r, l, v_d)
    rising = linear2.times(a, y)[1] > 0.0
    reach = rising & (fed.bus_top > v_s) & (v0 < v_s)
    t_a = _fall(lambda t: v_s - at(t)[1], v_s - v0, 0.0, np.where(reach, fed.bus_max_time, 0.0))
    blocked = reach | ((v0 >= v_s) & (i0 > i_c))
    t_a = np.where(reach, t_a, 0.0)
    i_a = np.where(reach, at(t_a)[0], np.where(blocked, i0, i_c + 1.0))
    det = a[0] * a[3] - a[1] * a[2]
    q_a = np.where(reach, i_ss * t_a + (a[3] * (i_a - i0) - a[1] * (v_s - v0)) / det, 0.0)
    # blocked: about (i_c, -(R i_c + 2 V_d))
    ab = (-r / l, -1.0 / l, 1.0 / c, np.zeros_like(c))
    lb1, lb2 = linear2.eigenvalues(*ab)
    vb_ss = -(r * i_c + 2.0 * v_d)
    yb = (i_a - i_c, v_s - vb_ss)

    def at_b(t):
        di, dv = linear2.apply(t, ab, lb1, lb2, yb)
        return i_c + di, vb_ss + dv
    zb = linear2.times(ab, yb)
    zzb = linear2.times(ab, zb)
    t_top = linear2.first_zero(zb[1], zzb[1], lb1, lb2)          # i = i_c: the bus's top
    t_imin = linear2.first_zero(zb[0], zzb[0], lb1, lb2)         # the current's first minimum
    # (always one: the bus must come back down, below v_s, so the current below i_c)
    t_imin = np.where(np.isfinite(t_imin), t_imin, _grow(lambda t: at_b(t)[0], np.full_like(v_s, np.inf), l / r))
    t_iz = _fall(lambda t: at_b(t)[0], i_a, 0.0, t_imin)
    t_iz = np.where(at_b(t_imin)[0] <= 0.0, t_iz, np.inf)
    w = np.abs(lb1.imag)
    with np.errstate(divide="ignore"):
        t_vmin = np.where(w > 0, np.pi / np.where(w > 0, w, 1.0), np.inf)   # after the top
    span = _grow(lambda t: at_b(t_top + t)[1] - v_s, t_vmin, l / r)
    t_back = t_top + _fall(lambda t: at_b(t_top + t)[1], np.full_like(v_s, np.inf), v_s, span)
    by_zero = t_iz <= t_back
    t_b = np.where(by_zero, t_iz, t_back)
    i_b, v_b = at_b(t_b)
    i_b = np.where(by_zero, 0.0, i_b)
    q_b = i_c * t_b + c * (v_b - v_s)
    v_top = at_b(t_top)[1]
    # fed again from the bus back at v_s
    back = blocked & ~by_zero
    fed_c = decay(np.where(back, i_b, 0.0), v_s, i_drop, v_fed, r_s, c, r, l, v_d)
    drop_in_a = ~blocked | (i_a <= i_drop)
    drop_in_b = (i_b <= i_drop) & ~drop_in_a
    t_drop_b = _fall(lambda t: at_b(t)[0], i_a, i_drop, np.where(drop_in_b, t_b, 0.0))
    t_drop = np.where(drop_in_a, fed.drop_time,
                      t_a + np.where(drop_in_b, t_drop_b, t_b + fed_c.drop_time))
    t_zero = np.where(blocked, t_a + t_b + np.where(back, fed_c.zero_time, 0.0), fed.zero_time)
    bus_top = np.where(blocked, v_top, fed.bus_top)
    when = np.where(blocked, t_a + t_top, fed.bus_max_time)
    v_end = np.where(blocked, np.where(back, fed_c.bus_at_zero, v_b), fed.bus_at_zero)
    charge = np.where(blocked, q_a + q_b + np.where(back, fed_c.charge, 0.0), fed.charge)
    return FastDecay(t_drop, t_zero, bus_top, np.maximum(bus_top, v_fed),
                     np.where(bus_top > v_fed, when, np.inf), v_end, charge)


class Unbounded(ValueError):
    """A decay :func:`eddy_decay_drawn_no_sink` does not follow: the bus, fed again after
    the feed's block, would rise back up to the source."""


def eddy_decay_drawn_no_sink(i0, v0, i_drop, v_s, i_c, r_s, c, r, l, v_d, r_e) -> FastDecay:
    """:func:`eddy_decay_no_sink` with a constant current ``i_c`` A drawn off the bus
    throughout (a boost converter fed from the main bus, as :func:`decay_drawn`), an eddy
    resistance ``r_e`` ohm across the magnetising branch ``l`` H (``i0``, ``i_drop``
    magnetising currents); ``v0`` at or below ``v_s`` V. In ``u = -(v + 2 V_d)`` (as
    :func:`eddy_decay`), three stretches, each closed form:

    * **fed** (the feed conducts, ``v < v_s``): ``C dv/dt = i_t + (V_s - v)/R_s - i_c = i_t
      + (V_s' - v)/R_s``, :func:`eddy_decay`'s circuit with the source ``V_s' = v_s - R_s
      i_c`` (Thevenin, exact), ``i_t = k (i_m + u/R_e)`` the terminal current, ``k = R_e/(R
      + R_e)``. Its bus is two exponentials (or a damped sinusoid) about the steady state, so
      it reaches ``v_s`` first on its rise to its highest over the stretch (from the start,
      or from its first minimum when it starts falling: :func:`coildrive.model.linear2.first_zero`
      of ``du/dt``), a bisection there; where it never does, the stretch runs to the
      terminal current's zero and the decay is :func:`eddy_decay` against ``V_s'``.
    * **blocked** (from the bus at ``v_s`` with ``i_t > i_c``; a start at ``v_s`` with
      ``i_t <= i_c`` falls at once and stays fed): ``L di_m/dt = k (u - R i_m)``, ``C du/dt
      = i_c - k (i_m + u/R_e)``: the capacitor alone's matrix (``R_s -> inf``) about the
      steady state ``(i_m, u) = (i_c, R i_c)`` (the constant input moves only that), so
      :func:`coildrive.model.supply.state_from` answers on that circuit. The bus rises while
      ``i_t > i_c``, to its top where ``i_t = i_c`` (the first zero of ``du/dt``), then falls;
      the stretch ends at the earlier of the terminal current's zero (the diodes block: a
      bisection up to its first minimum, which later minima lie above) and the bus back at
      ``v_s`` after the top (a bisection up to the next turn, ``pi/omega`` later, or a
      grown bracket). Its charge is exact, ``int i_t dt = i_c t + C (v - v_s)``.
    * **fed again** from the bus at ``v_s``, falling (``i_t < i_c``): :func:`eddy_decay`'s
      circuit against ``V_s'`` to the terminal current's zero. Where that bus would rise
      back up to ``v_s`` (the terminal current climbing past ``i_c`` again: the eddy
      branch's ``k u / R_e`` rising faster than ``i_m`` falls, which takes a drain of tens
      of amperes on a valve's coil) :class:`Unbounded` is raised rather than a wrong figure
      returned.

    The magnetising current falls throughout (the bus stays above ``-2 V_d``): the drop-out
    is a bisection in the stretch that reaches it, or after the block the flux's tail
    through ``R_e`` alone, ``(L/R_e) ln(i_z/i_drop)``; the eddy loss is each stretch's
    quadrature (:func:`coildrive.model.supply.eddy_loss_from`) plus the field's whole store
    at the block. ``bus_max`` is the highest bus or ``V_s'``, which the bus relaxes to."""
    i0, v0, i_drop, v_s, i_c, r_s, c, r, l, v_d, r_e = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, i_c, r_s, c, r, l, v_d, r_e)))
    v_fed = v_s - r_s * i_c
    b_fed = supply.bus(-(v_fed + 2.0 * v_d), r_s, c, r, l, r_e)
    u0 = -(v0 + 2.0 * v_d)
    fed, at = _eddy_run(b_fed, i0, v0, i_drop, v_fed, v_d, r_e)

    def bus(state):
        return -state[1] - 2.0 * v_d

    # the fed stretch: its first reach of v_s, on the rise to its highest
    start_blocked = (v0 >= v_s) & (supply.terminal(i0, u0, b_fed) > i_c)
    ad = linear2.times(b_fed.matrix, (i0 - b_fed.i_ss, u0 - b_fed.v_ss))
    aad = linear2.times(b_fed.matrix, ad)
    lo = np.where(ad[1] > 0.0, linear2.first_zero(ad[1], aad[1], b_fed.l1, b_fed.l2), 0.0)   # (du/dt > 0: falling)
    reach = (fed.bus_top > v_s) & (v0 < v_s)
    lo = np.where(reach & np.isfinite(lo), lo, 0.0)
    t_a = lo + _fall(lambda t: v_s - bus(at(lo + t)), v_s - bus(at(lo)), 0.0,
                     np.where(reach, fed.bus_max_time - lo, 0.0))
    blocked = reach | start_blocked
    if np.any(~blocked & (v0 >= v_s) & (fed.bus_top > v_s * (1.0 + 1e-9))):
        raise Unbounded("the bus, falling from the source, would rise back up to it")
    t_a = np.where(reach, t_a, 0.0)
    i_a = np.where(reach, at(t_a)[0], np.where(start_blocked, i0, i_c + 1.0))
    u_a = -(v_s + 2.0 * v_d)
    q_a = np.where(reach, supply.integrals_from(t_a, b_fed, i0, u0)[0], 0.0)
    loss_a = np.where(reach, supply.eddy_loss_from(t_a, b_fed, i0, u0), 0.0)
    # blocked: the capacitor alone's circuit about (i_c, R i_c)
    with np.errstate(invalid="ignore"):       # (its v_ss: 0 - inf x 0)
        b_b = dataclasses.replace(supply.bus(np.zeros_like(v_s), np.full_like(v_s, np.inf), c, r, l, r_e),
                                  i_ss=i_c, v_ss=r * i_c)

    def at_b(t):
        return supply.state_from(t, b_b, i_a, u_a)

    def flow_b(t):
        return supply.terminal(*at_b(t), b_b)
    k = r_e / (r + r_e)
    zb = linear2.times(b_b.matrix, (i_a - b_b.i_ss, u_a - b_b.v_ss))
    zzb = linear2.times(b_b.matrix, zb)
    t_top = linear2.first_zero(zb[1], zzb[1], b_b.l1, b_b.l2)                 # i_t = i_c: the bus's top
    t_imin = linear2.first_zero(k * (zb[0] + zb[1] / r_e), k * (zzb[0] + zzb[1] / r_e), b_b.l1, b_b.l2)
    t_imin = np.where(np.isfinite(t_imin), t_imin, _grow(flow_b, np.full_like(v_s, np.inf), l / (k * r)))
    t_iz = _fall(flow_b, flow_b(np.zeros_like(v_s)), 0.0, t_imin)
    t_iz = np.where(flow_b(t_imin) <= 0.0, t_iz, np.inf)
    t_top = np.where(np.isfinite(t_top), t_top, 0.0)
    w = np.abs(b_b.l1.imag)
    with np.errstate(divide="ignore"):
        t_vmin = np.where(w > 0, np.pi / np.where(w > 0, w, 1.0), np.inf)   # after the top
    span = _grow(lambda t: bus(at_b(t_top + t)) - v_s, t_vmin, l / (k * r))
    t_back = t_top + _fall(lambda t: bus(at_b(t_top + t)), np.full_like(v_s, np.inf), v_s, span)
    by_zero = t_iz <= t_back
    t_b = np.where(by_zero, t_iz, t_back)
    i_b, u_b = at_b(t_b)
    v_b = np.where(by_zero, -u_b - 2.0 * v_d, v_s)
    q_b = i_c * t_b + c * (v_b - v_s)
    loss_b = supply.eddy_loss_from(t_b, b_b, i_a, u_a) + np.where(by_zero, 0.5 * l * i_b * i_b, 0.0)
    v_top = bus(at_b(np.minimum(t_top, t_b)))
    # fed again from the bus back at v_s
    back = blocked & ~by_zero
    again, _ = _eddy_run(b_fed, np.where(back, i_b, 0.0), np.where(back, v_s, v_fed), i_drop, v_fed, v_d, r_e)
    if np.any(back & (again.bus_top > v_s * (1.0 + 1e-9))):
        raise Unbounded("the bus, fed again after the feed's block, would rise back up to the source")
    drop_in_a = ~blocked | (i_a <= i_drop)
    drop_in_b = (i_b <= i_drop) & ~drop_in_a
    t_drop_b = _fall(lambda t: at_b(t)[0], i_a, i_drop, np.where(drop_in_b, t_b, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        tail = l / r_e * np.log(np.where(by_zero & (i_drop < i_b), i_b / i_drop, 1.0))
    after_b = np.where(by_zero, t_b + tail, t_b + again.drop_time)
    t_drop = np.where(~blocked, fed.drop_time,
                      np.where(i_a <= i_drop, _fall(lambda t: at(t)[0], i0, i_drop, t_a),
                               t_a + np.where(drop_in_b, t_drop_b, after_b)))
    t_zero = np.where(blocked, t_a + t_b + np.where(back, again.zero_time, 0.0), fed.zero_time)
    bus_top = np.where(blocked, v_top, fed.bus_top)
    when = np.where(blocked, t_a + np.minimum(t_top, t_b), fed.bus_max_time)
    v_end = np.where(blocked, np.where(back, again.bus_at_zero, v_b), fed.bus_at_zero)
    charge = np.where(blocked, q_a + q_b + np.where(back, again.charge, 0.0), fed.charge)
    loss = np.where(blocked, loss_a + loss_b + np.where(back, again.eddy_energy, 0.0), fed.eddy_energy)
    return FastDecay(t_drop, t_zero, bus_top, np.maximum(bus_top, v_fed), np.where(bus_top > v_fed, when, np.inf),
                     v_end, charge, loss)


def mixed_hold_rise(r_s, c, i_top, t_fast, period) -> np.ndarray:
    """A bound (V) on how far a full bridge's mixed-decay hold lifts a bus that sinks above
    its source: with ``u = v - V_s``, ``C du/dt = -u/R_s + j``, where ``j``, the coil's
    current into the bus, is at most ``i_top`` A in each off-time's fast part (at most
    ``t_fast`` s once every ``period`` s) and at most 0 otherwise (an on-time draws, a slow
    part neither draws nor returns; after a boosted peak its converter draws too). By
    comparison ``u`` stays below the same equation driven by ``i_top`` through every fast
    part, from ``u <= 0`` when the hold starts: below that rectangular train's periodic
    orbit, whose top (at the end of a pulse) is ``R_s i_top (1 - e^{-t_fast/tau}) / (1 -
    e^{-period/tau})``, ``tau = R_s C`` (``R_s`` ohm, ``C`` F; towards ``R_s i_top t_fast /
    period`` for a bus slow against the period, ``R_s i_top`` for a fast one)."""
    r_s, c, i_top, t_fast, period = (np.asarray(x, float) for x in (r_s, c, i_top, t_fast, period))
    tau = r_s * c
    return r_s * i_top * np.expm1(-t_fast / tau) / np.expm1(-period / tau)


def no_sink_energy_top(v_s, c, w_top) -> np.ndarray:
    """A bound (V) on the bus of a full bridge behind a supply that cannot sink (a diode in
    its feed), whatever the bridge switches -- a mixed-decay hold's on-times, fast and slow
    parts, any number of periods, then a turn-off -- while the coil's stored energy is at
    most ``w_top`` J whenever the bus crosses up through the source's ``v_s`` V (``c`` F
    the bulk capacitor).

    While the bus is above the source the feed diode blocks, so nothing brings energy in:
    the capacitor and the coil only trade it through the switches and body diodes and lose
    it in the loop's resistance and the diodes, so ``1/2 C v^2 + W`` (``W`` the coil's
    stored energy, ``1/2 L i^2`` for a linear coil) never rises. From the last moment the
    bus was at ``v_s`` (with ``W <= w_top``), ``1/2 C v^2 <= 1/2 C v_s^2 + w_top``: ``v <=
    sqrt(v_s^2 + 2 w_top / C)``. Below the source the bus is below the bound anyway. It
    is the fast decay's pump-up (:func:`coildrive.model.bridge.pump_up`) from ``v_s`` with
    the loop's losses left out: those make the real bus lower, so it bounds from above a
    periodic steady state the fast parts pump up to, the transient into it from the peak
    and the release from anywhere in it."""
    v_s, c, w_top = (np.asarray(x, float) for x in (v_s, c, w_top))
    return np.sqrt(v_s ** 2 + 2.0 * np.maximum(w_top, 0.0) / c)
