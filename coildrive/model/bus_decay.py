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
  zero, or ``V_s`` if higher.

All functions broadcast over numpy arrays; units are A, V, ohm, H, F, s.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import linear2

#: Bisection steps for the drop-out and zero times: the bracket shrinks 2^-60.
BISECTION_STEPS = 60


@dataclass(frozen=True)
class FastDecay:
    """The fast decay of ``i0`` A from a bus at ``v0`` V (arrays): the time to the drop-out
    current and to zero (s), the highest bus (V: while the current flows, ``bus_top``,
    or the source's ``V_s`` it relaxes to after, if higher) and when (s; ``inf`` when that
    is ``V_s``), the bus when the current stops (V), and the charge the current carries
    until then (C, ``int i dt``)."""

    drop_time: np.ndarray
    zero_time: np.ndarray
    bus_top: np.ndarray
    bus_max: np.ndarray
    bus_max_time: np.ndarray
    bus_at_zero: np.ndarray
    charge: np.ndarray


def decay(i0, v0, i_drop, v_s, r_s, c, r, l, v_d) -> FastDecay:
    """The circuit of the module docstring from ``i0`` A and the bus at ``v0`` V (at or
    below the source's ``v_s`` V); ``i_drop`` A the drop-out current."""
    i0, v0, i_drop, v_s, r_s, c, r, l, v_d = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, r_s, c, r, l, v_d)))
    a = (-r / l, -1.0 / l, 1.0 / c, -1.0 / (r_s * c))
    l1, l2 = linear2.eigenvalues(*a)
    i_ss = -(v_s + 2.0 * v_d) / (r + r_s)
    v_ss = v_s + r_s * i_ss
    y = (i0 - i_ss, v0 - v_ss)
    z = linear2.times(a, y)                 # the rates at t = 0
    zz = linear2.times(a, z)                # and their rates

    def at(t):
        di, dv = linear2.apply(t, a, l1, l2, y)
        return i_ss + di, v_ss + dv

    v_lo = np.minimum(v0, v_s)
    with np.errstate(divide="ignore", invalid="ignore"):
        bound = l / r * np.log1p(r * i0 / (v_lo + 2.0 * v_d))
    hi = np.minimum(np.where(np.isfinite(bound) & (bound > 0), bound, np.inf),
                    linear2.first_zero(z[0], zz[0], l1, l2))
    # a bus down at -2 V_d (the bridge's own body diodes clamp it there) leaves no bound:
    # grow a bracket from L/R until the current has crossed zero
    hi = np.where(np.isfinite(hi), hi, l / r)
    for _ in range(100):
        short = at(hi)[0] > 0.0
        if not short.any():
            break
        hi = np.where(short, 2.0 * hi, hi)

    def crossing(target, top):
        lo_t, hi_t = np.zeros_like(top), top.copy()
        for _ in range(BISECTION_STEPS):
            mid = 0.5 * (lo_t + hi_t)
            above = at(mid)[0] > target
            lo_t, hi_t = np.where(above, mid, lo_t), np.where(above, hi_t, mid)
        return np.where(i0 > target, hi_t, 0.0)

    t_zero = crossing(0.0, hi)
    t_drop = crossing(i_drop, t_zero)
    t_top = np.minimum(linear2.first_zero(z[1], zz[1], l1, l2), t_zero)
    v_top = at(t_top)[1]
    bus_max = np.maximum(v_top, v_s)
    i_z, v_z = at(t_zero)
    # int_0^t (x - x_ss) dt = A^-1 (x(t) - x(0)): the current's part, plus i_ss t
    det = a[0] * a[3] - a[1] * a[2]
    charge = i_ss * t_zero + (a[3] * (i_z - i0) - a[1] * (v_z - v0)) / det
    return FastDecay(t_drop, t_zero, v_top, bus_max, np.where(v_top > v_s, t_top, np.inf), v_z, charge)
