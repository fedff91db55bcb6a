"""A full bridge's mixed-decay hold with an eddy resistance: the exact three-segment orbit.

Each PWM period is on for ``t_on``, fast for ``t_fast`` (all four switches open, the
terminal current into the bus through two body diodes against ``V_f = V_bus + 2 V_d``
through ``R_f``) and slow for ``t_slow`` (Q2 + Q4 through ``R_s``, nothing opposing).
With ``R_e`` across the magnetising branch (:mod:`coildrive.model.eddy`) every segment
is the plain coil's in the magnetising current ``i_m`` with the loop's Thevenin pair
(``V R_e / (R + R_e)``, ``R R_e / (R + R_e)``), except that

* the fast part's terminal current ``(R_e i_m - V_f) / (R_f + R_e)`` reaches zero at
  ``i_m = V_f / R_e``: the body diodes block there and the flux then decays through
  ``R_e`` alone (``dpsi/dt = -R_e i_m``) for the rest of the fast part;
* the slow part never blocks: its switches conduct both ways and its terminal current
  ``R_e i_m / (R_s + R_e)`` stays positive; it steps up from the fast part's end (zero
  once blocked) when Q2 + Q4 close.

The orbit's lowest magnetising current ``a`` (start of the on-time), highest ``b`` (its
end) and ``c`` (end of the fast part) follow with no time stepping:

* while the fast part conducts to its end (``c >= V_f / R_e``) the orbit is the plain
  coil's mixed orbit with the Thevenin pairs -- the closed form of
  :mod:`coildrive.model.pwm` for a linear branch, the Newton orbit of
  :func:`coildrive.model.flux_mixed.mixed_orbit` for a curve;
* otherwise ``a`` is the fixed point of the period map ``P(a)`` on ``[0, V_on / R_on]``
  (on, fast with its block and tail, slow: each the exact segment current of
  :mod:`coildrive.model.eddy`). ``P`` rises with ``a`` with a slope below one (each
  segment map is a contraction of the magnetising current), so ``P(a) - a`` falls
  through one root: regula falsi with the Illinois halving (:mod:`coildrive.model.roots`).

A period with no slow part (a fraction of 1) is :func:`coildrive.model.eddy.orbit` on
the fast path. Units: s, A, V, ohm, J; arrays broadcast over the points.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import eddy, flux_mixed
from .eddy import EddyCoil, branch_current, branch_integrals, thevenin
from .flux import FluxCoil
from .flux_mixed import MixedOrbit
from .roots import falling_root


@dataclass(frozen=True)
class EddyMixedOrbit(MixedOrbit):
    """The mixed-decay orbit with an eddy term, per point: the fields of
    :class:`~coildrive.model.flux_mixed.MixedOrbit` with the magnetising current's
    lowest, highest and end-of-fast values (A), ``dcm``: the body diodes block in the
    fast part, and the terminal current's integrals; then the terminal current's lowest
    and highest values (A), the eddy energy of a period (J) and the magnetising current's
    ``int i_m^2 dt`` over a period (A^2*s)."""

    terminal_min: np.ndarray
    terminal_max: np.ndarray
    eddy_energy: np.ndarray
    square_magnetising: np.ndarray


def fast_part(e: EddyCoil, t, b, r_f, v_f):
    """The fast part of ``t`` s from a magnetising current ``b`` A (against ``v_f`` V
    through ``r_f`` ohm, blocking at ``v_f / R_e``, then the flux through ``R_e``):
    ``(end magnetising current A, conduction s, int i dt, int i^2 dt, eddy J, int i_m^2
    dt)`` with ``i`` the terminal current."""
    re_, mag = e.resistance, e.magnetising
    vt, rt = thevenin(-np.asarray(v_f, float), r_f, re_)
    ib = eddy.block_current(v_f, re_)
    t, b = np.broadcast_arrays(np.asarray(t, float), np.asarray(b, float))
    tb = eddy.conduction_time(b, r_f, v_f, e)
    tc = np.minimum(t, tb)
    start = np.minimum(b, ib)
    end = np.maximum(branch_current(mag, tc, b, vt, rt), start)
    qm, sm = branch_integrals(mag, tc, b, end, vt, rt)
    q, s, w = eddy._terminal_integrals(tc, qm, sm, -np.asarray(v_f, float), r_f, re_)
    late = t > tb
    tl = np.where(late, t - tb, 0.0)
    tail_start = np.where(late, start, 0.0)
    tail_end = branch_current(mag, tl, tail_start, 0.0, re_)
    _, s_tail = branch_integrals(mag, tl, tail_start, tail_end, 0.0, re_)
    s_tail = np.where(late, s_tail, 0.0)
    return (np.where(late, tail_end, end), tc, q, s, w + re_ * s_tail, sm + s_tail)


def _assemble(tc, a, b, c, on, fast, slow, t_f, t_on, t_s, v_on, r_on, r_s, v_f, r_f, re_, terminal_fast):
    """The orbit's fields (rows in :class:`EddyMixedOrbit`'s order) from its currents ``a``,
    ``b``, ``c`` (A), the fast part's conduction ``tc`` (s) and the magnetising current's
    ``(int i_m dt, int i_m^2 dt)`` over the on, fast and slow segments; ``terminal_fast``:
    the fast part's terminal ``(q, s, eddy J, int i_m^2 dt)`` when it was solved with its
    block (:func:`fast_part`), else ``fast`` is the conducting segment's."""
    q_on, s_on, w_on = eddy._terminal_integrals(t_on, *on, v_on, r_on, re_)
    if isinstance(terminal_fast, tuple):
        q_f, s_f, w_f, sm_f = terminal_fast
    else:
        q_f, s_f, w_f = eddy._terminal_integrals(t_f, *fast, -v_f, r_f, re_)
        sm_f = fast[1]
    q_s, s_s, w_s = eddy._terminal_integrals(t_s, *slow, 0.0, r_s, re_)
    has_slow = t_s > 0
    q_s, s_s, w_s, sm_s = (np.where(has_slow, x, 0.0) for x in (q_s, s_s, w_s, slow[1]))
    blocked = tc < t_f
    t_max = eddy.terminal(b, v_on, r_on, re_)
    end_fast = np.where(blocked, 0.0, eddy.terminal(c, -v_f, r_f, re_))
    t_min = np.minimum(end_fast, np.where(has_slow, eddy.terminal(a, 0.0, r_s, re_), np.inf))
    return np.array([a, b, c, blocked, tc + t_s, q_on, s_on, q_f, s_f, q_s, s_s, t_min, t_max,
                     w_on + w_f + w_s, on[1] + sm_f + sm_s], dtype=float)


def _period_map(e: EddyCoil, t_on, t_fast, t_slow, von_t, ron_t, r_f, v_f, rs_t):
    """``P(a)``: the magnetising current after one period from ``a`` A."""
    mag = e.magnetising

    def p(a):
        b = branch_current(mag, t_on, a, von_t, ron_t)
        c = fast_part(e, t_fast, b, r_f, v_f)[0]
        return branch_current(mag, t_slow, c, 0.0, rs_t)
    return p


def mixed_orbit(e: EddyCoil, t_on, t_fast, t_slow, v_on, r_on, r_slow, v_fast, r_fast,
                iterations: int = 100) -> EddyMixedOrbit:
    """The exact periodic orbit (module docstring): on ``t_on`` s at ``v_on`` V through
    ``r_on``, fast ``t_fast`` s against ``v_fast`` V through ``r_fast``, slow ``t_slow`` s
    through ``r_slow`` (ohm); ``t_on``, ``t_fast`` > 0, ``t_slow`` >= 0."""
    arrays = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                   (t_on, t_fast, t_slow, v_on, r_on, r_slow, v_fast, r_fast, e.resistance)))
    shape = arrays[0].shape
    t_on, t_f, t_s, v_on, r_on, r_s, v_f, r_f, _ = (np.array(x, float).ravel() for x in arrays)
    e = eddy.flat(e, shape)
    n = t_on.size
    re_, mag = e.resistance, e.magnetising
    von_t, ron_t = thevenin(v_on, r_on, re_)
    vf_t, rf_t = thevenin(v_f, r_f, re_)
    rs_t = thevenin(0.0, r_s, re_)[1]
    ib = eddy.block_current(v_f, re_)
    a = np.zeros(n)
    out = np.zeros((15, n))
    # the fast part conducting throughout: the plain coil's mixed orbit with the Thevenin pairs
    if isinstance(mag, FluxCoil):
        conducts = np.zeros(n, bool)
        k = np.flatnonzero(t_s > 0)
        if k.size:
            m = flux_mixed.mixed_orbit(mag[k], t_on[k], t_f[k], t_s[k], von_t[k], ron_t[k], rs_t[k], vf_t[k], rf_t[k])
            ok = ~np.asarray(m.dcm) & (np.asarray(m.i_fast) >= ib[k])
            conducts[k[ok]] = True
            j = k[ok]   # its magnetising integrals give the terminal ones (no segment solved again)
            cols = (m.i_min[ok], m.i_max[ok], m.i_fast[ok], (m.charge_on[ok], m.square_on[ok]),
                    (m.charge_fast[ok], m.square_fast[ok]), (m.charge_slow[ok], m.square_slow[ok]))
            out[:, j] = _assemble(t_f[j], *cols, t_f[j], t_on[j], t_s[j], v_on[j], r_on[j], r_s[j], v_f[j],
                                  r_f[j], re_[j], 0.0)
    else:
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            a_c, _, c_c = flux_mixed.linear_start(t_on, t_f, t_s, von_t, ron_t, rs_t, vf_t, rf_t, mag)
        conducts = np.isfinite(a_c) & (c_c >= ib)
        a = np.where(conducts, a_c, 0.0)
    if isinstance(mag, FluxCoil):
        rest = np.flatnonzero(~conducts)
        if rest.size:   # the period map's root
            sub = e[rest]
            p = _period_map(sub, t_on[rest], t_f[rest], t_s[rest], von_t[rest], ron_t[rest], r_f[rest],
                            v_f[rest], rs_t[rest])
            top = von_t[rest] / ron_t[rest]
            x, _, hi, _, g_hi = falling_root(lambda x: p(x) - x, top * (1.0 - 1e-9), iterations)
            a[rest] = np.where(g_hi == 0, hi, x)
    else:   # a line's segments are closed forms: every point through the period map's pieces
        rest = np.arange(n)
        blocked = np.flatnonzero(~conducts)
        if blocked.size:
            sub = e[blocked]
            p = _period_map(sub, t_on[blocked], t_f[blocked], t_s[blocked], von_t[blocked], ron_t[blocked],
                            r_f[blocked], v_f[blocked], rs_t[blocked])
            top = von_t[blocked] / ron_t[blocked]
            x, _, hi, _, g_hi = falling_root(lambda x: p(x) - x, top * (1.0 - 1e-9), iterations)
            a[blocked] = np.where(g_hi == 0, hi, x)
    if rest.size:
        sub, k = e[rest], rest
        b = branch_current(sub.magnetising, t_on[k], a[k], von_t[k], ron_t[k])
        c, tc, q_f, s_f, w_f, sm_f = fast_part(sub, t_f[k], b, r_f[k], v_f[k])
        on = branch_integrals(sub.magnetising, t_on[k], a[k], b, von_t[k], ron_t[k])
        slow = branch_integrals(sub.magnetising, t_s[k], c, a[k], 0.0, rs_t[k])
        out[:, k] = _assemble(tc, a[k], b, c, on, None, slow, t_f[k], t_on[k], t_s[k], v_on[k], r_on[k],
                              r_s[k], v_f[k], r_f[k], re_[k], (q_f, s_f, w_f, sm_f))
    out = list(out)
    out[3] = out[3] > 0.5
    return EddyMixedOrbit(*(np.reshape(x, shape) for x in out))
