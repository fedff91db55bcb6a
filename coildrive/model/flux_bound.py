"""Upper bounds of a saturating coil's current (:mod:`coildrive.model.flux`) for the
rail-current bound of a system (:mod:`coildrive.design.system`). SI units (A, Wb, H, V,
ohm, s).

**The rise.** From rest at constant ``V`` through ``R`` the time to a current is
``t(i) = s int_0^i L_d(j) / (V - R j) dj`` (``s`` the curve's tolerance scale), which
falls as ``V`` rises, as ``R`` falls and as ``s`` falls: the current at any time is
highest at the highest supply, the lowest resistance and the lowest scale.
:func:`rise_table` tabulates that rise exactly (currents on a grid, their times by the
exact quadrature of :func:`coildrive.model.flux.time`); since the current only grows,
the next tabulated current is an upper bound for every time up to its own
(:func:`table_current`).

**The tail.** After the peak the hold's PWM runs; at one operating point the coil's
flux ``psi_a`` and its hold orbit's ``psi_o`` (the same switching) obey
``d(psi_a - psi_o)/dt = -R (i_a - i_o)`` (``R`` the on or the freewheel loop's; the diode
stopping the orbit at zero only helps) and ``i_a - i_o >= (psi_a - psi_o) / (s L_max)``, so
the excess ``D`` decays at least as ``exp(-R t / (s L_max))`` from ``D0 <= s (psi(i_pe) -
psi(B))``. With ``psi_o <= s psi(H)`` and the orbit's flux ripple ``psi(H) - psi(B)`` at
most ``V t_on / s`` (the on-time's ``int (V - R i) dt``), in the unscaled curve::

    i_a <= psi^-1(psi(H) + (psi(i_pe) + ripple - psi(H)) exp(-R t / (s L_max)))

``H``, ``i_pe``, ``ripple`` being their highest over the operating points (the right side
grows with each): the scale cancels but in the rate (:func:`tail_excess`).
"""

from __future__ import annotations

import math

import numpy as np

from . import flux


def incremental_range(curve: flux.FluxCurve, a: float, b: float) -> tuple[float, float]:
    """``(lowest, highest)`` incremental inductance (H, unscaled) of ``curve`` over
    currents ``a..b`` A, exactly: each piece's derivative is a quadratic, so its extremes
    are at the ends, the table points inside and each piece's vertex inside."""
    pts = [a, b] + [x for x in _critical(curve) if a < x < b]
    got = curve.incremental(np.array(pts, float))
    return float(got.min()), float(got.max())


def _critical(curve: flux.FluxCurve) -> list[float]:
    """The currents (A) inside which a piece's incremental inductance can have an extreme:
    the table's points and each piece's vertex (its derivative is a quadratic)."""
    pts = list(curve.current)
    c = curve.coef
    for k, start in enumerate(curve.base):
        if c[0, k] != 0.0:
            vertex = start - c[1, k] / (3.0 * c[0, k])
            if start <= vertex < curve.edges[k + 1]:
                pts.append(vertex)
    return pts


def incremental_low(curve: flux.FluxCurve, a, b) -> np.ndarray:
    """The lowest incremental inductance (H, unscaled) of ``curve`` over each interval
    ``a..b`` A (arrays), exactly, as :func:`incremental_range` (vectorised)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    low = np.minimum(curve.incremental(a), curve.incremental(b))
    pts = np.array(_critical(curve), float)
    at = curve.incremental(pts)
    inside = (pts > a[..., None]) & (pts < b[..., None])
    return np.minimum(low, np.where(inside, at, np.inf).min(axis=-1))


def rise_table(coil: flux.FluxCoil, v: float, r: float, t_end: float, points: int = 129):
    """``(times s, currents A)``: the exact rise of ``coil`` (one scale) from 0 A at ``v``
    V through ``r`` ohm, at ``points`` currents evenly from 0 to the current at ``t_end``
    s (the last time is ``t_end``)."""
    top = float(flux.current(coil, np.array([t_end]), 0.0, v, r)[0])
    i = np.linspace(0.0, top, points)
    t = np.asarray(flux.time(coil, 0.0, i, v, r), float)
    t[-1] = max(t[-1], t_end)
    return np.maximum.accumulate(t), i


def table_current(t, times, currents):
    """Upper bound (A) of a tabulated rise at times ``t`` s: the first tabulated current
    whose time is not before ``t`` (the last one past the table)."""
    times = np.asarray(times, float)
    k = np.searchsorted(times, np.asarray(t, float), side="left")
    return np.asarray(currents, float)[np.minimum(k, len(times) - 1)]


def tail_excess(curve: flux.FluxCurve, i_peak: float, top: float, ripple: float, points: int = 65):
    """The tail after a peak that ends at (at most) ``i_peak`` A, for a hold whose orbit's
    top is at most ``top`` A and whose flux ripple (unscaled) is at most ``ripple`` Wb
    (``V t_on / s``: the on-time's ``int (V - R i) dt``), as a dict (module docstring):

    * ``flux_wb`` ``delta0 = max(0, psi(i_peak) + ripple - psi(top))`` and ``table``
      ``(deltas Wb, currents A)``: ``psi^-1(psi(top) + delta)`` on ``points`` deltas from 0
      to ``delta0``; the current is at most that at ``delta0 exp(-R t / (s L_max))``
      (the next tabulated delta up);
    * ``reach_a`` the highest the tail can be, ``psi^-1(psi(top) + delta0)``;
    * ``excess_a`` ``delta0 / L_min`` over ``top..reach`` (the same decay in the linear
      form ``top + excess exp(-R t/(s L_max))``: looser, for the stagger's proof);
    * ``l_max_h`` the highest incremental inductance over ``0..reach`` (unscaled)."""
    psi_top = float(curve.psi(top))
    delta0 = max(0.0, float(curve.psi(i_peak)) + ripple - psi_top)
    deltas = np.linspace(0.0, delta0, points)
    currents = np.asarray(curve.current_of(psi_top + deltas), float)
    currents = np.maximum.accumulate(np.maximum(currents, top))
    reach = float(currents[-1])
    hi = max(reach, top, 1e-12)
    l_min = incremental_range(curve, top, hi)[0] if hi > top else 1.0
    return {"flux_wb": delta0, "table": (deltas, currents), "reach_a": reach,
            "excess_a": delta0 / l_min, "l_max_h": incremental_range(curve, 0.0, hi)[1]}



def closing_rise_table(open_curve: flux.FluxCurve, seated_curve: flux.FluxCurve, scale: float, v: float,
                       r: float, points: int = 257):
    """``(times s, currents A)``: an upper bound of a moving armature's current over two
    curves (:mod:`coildrive.model.gap_curves`) from rest at 0 A while the armature stands
    or closes, at ``v`` V through ``r`` ohm and the lowest tolerance ``scale``
    (for :func:`table_current`).

    At a flux ``psi`` and gap fraction ``u`` the current is ``i = (1 - u) i_c(psi) + u
    i_o(psi)`` (``i_c <= i <= i_o``, the seated curve above the open one), so
    ``s di/dt = (V - R i) di/dpsi + s (di/dx) dx/dt`` with ``di/dx >= 0``: closing
    (``dx/dt <= 0``) only lowers it, and ``di/dpsi = (1 - u)/L_c(i_c) + u/L_o(i_o)`` is at
    most the larger reciprocal. At a current ``i`` the seated curve's current lies in
    ``[i_c(psi_o(i)), i]`` and the open one's in ``[i, i_o(psi_c(i))]``: over a current
    step ``[j_k, j_k+1]`` the incremental inductance is at least ``L_k``, the least of
    the two curves' over their ranges (:func:`incremental_range`, exact), and the current
    takes at least ``s L_k / R ln((V - R j_k)/(V - R j_k+1))`` to cross it. Those times
    summed are the table's (lower bounds of the times each current is reached); the last
    entry is ``V/R``, which the current does not pass while it only closes."""
    top = v / r
    j = np.linspace(0.0, top, points)
    psi_o = np.asarray(open_curve.psi(j), float)
    psi_c = np.asarray(seated_curve.psi(j), float)
    low_c = np.asarray(seated_curve.current_of(psi_o), float)     # i_c(psi_o(j)) <= j
    high_o = np.asarray(open_curve.current_of(psi_c), float)      # i_o(psi_c(j)) >= j
    lo, hi = j[:-2], j[1:-1]
    l_c = incremental_low(seated_curve, np.minimum(low_c[:-2], lo), hi)
    l_o = incremental_low(open_curve, lo, np.maximum(high_o[1:-1], hi))
    steps = scale * np.minimum(l_c, l_o) / r * np.log((v - r * lo) / (v - r * hi))
    times = np.concatenate([[0.0], np.cumsum(steps)])
    return np.append(times, times[-1]), j


def gap_rise_table(open_curve: flux.FluxCurve, seated_curve: flux.FluxCurve, scale: float, v: float,
                   r: float, t_end: float, start_s: float, closing_s: float, points: int = 129):
    """``(times s, currents A)``: an upper bound of a moving armature's current over two
    curves (:mod:`coildrive.model.gap_curves`: at a flux linkage the current is a blend in
    the gap of the open curve's ``i_o(psi)`` and the seated one's ``i_c(psi)``, so between
    them) from rest at the open stop, 0 A, at ``v`` V through ``r`` ohm and the lowest
    tolerance ``scale`` (for :func:`table_current`, up to ``t_end`` s).

    Before ``start_s`` (:func:`earliest_start`) the armature stands open: the open curve's
    exact rise. Up to ``closing_s`` (the armature proved to only close,
    :func:`~coildrive.model.armature_bound.closing_window` after the start) the
    :func:`closing_rise_table`. After it, whatever the armature does: ``s dpsi/dt = V - R
    i`` with ``i >= i_c(psi)`` keeps the flux under the seated curve's own rise
    ``psi_c(t)`` (comparison theorem), and the current is at most ``max(i_o, i_c)`` at that
    flux -- the seated coil's flux with the gap opened at once, the curves' form of
    :func:`~coildrive.model.armature_bound.any_motion_rise`. The table only grows in
    ``t`` (each part taken at its own times, the running maximum)."""
    opened = rise_table(flux.FluxCoil(open_curve, scale), v, r, min(max(start_s, 0.0), t_end), points) \
        if start_s > 0 else ((np.zeros(1), np.zeros(1)))
    closing = closing_rise_table(open_curve, seated_curve, scale, v, r) if closing_s > start_s else opened
    t_c, i_c = rise_table(flux.FluxCoil(seated_curve, scale), v, r, t_end, points)
    anyhow = (t_c, np.maximum(np.asarray(open_curve.current_of(seated_curve.psi(i_c)), float), i_c))
    # one grid of every table's times and both moments; each step (t_k-1, t_k] lies in one
    # stretch and takes that stretch's bound at its end (the tables only grow)
    grid = np.unique(np.concatenate([opened[0], closing[0], t_c, [start_s, closing_s, t_end]]))
    grid = grid[(grid >= 0) & (grid <= t_end)]
    got = np.where(grid <= start_s, table_current(grid, *opened),
                   np.where(grid <= closing_s, table_current(grid, *closing), table_current(grid, *anyhow)))
    return grid, np.maximum.accumulate(got)

def earliest_start(open_curve: flux.FluxCurve, seated_curve: flux.FluxCurve, scale_low: float,
                   scale_high: float, stroke: float, opening_force: float, v: float, r: float) -> float:
    """Time in s before which a moving armature over two curves cannot leave the open stop:
    the closing force at flux linkage ``lam`` is ``(W_o - W_c)/stroke`` (scaled by ``s``,
    the unscaled flux's energies growing with it), so the least unscaled flux that beats
    ``opening_force`` N (spring preload + load) is the one at the highest scale
    ``scale_high``; the open curve's fastest rise (``v`` V, ``r`` ohm, ``scale_low``)
    reaches its current then. 0 when nothing holds the armature open, ``inf`` when that
    current is out of reach (``>= v/r``)."""
    from .gap_curves import GapCurves

    if not opening_force > 0:
        return 0.0
    gap = GapCurves(open_curve, seated_curve, np.array([scale_high]), np.array([stroke]))
    psi = float(gap.flux_for_force(opening_force)[0]) / scale_high
    i_start = float(np.asarray(open_curve.current_of(psi)).ravel()[0])
    if i_start >= v / r:
        return math.inf
    return float(np.asarray(flux.time(flux.FluxCoil(open_curve, scale_low), 0.0, i_start, v, r)).ravel()[0])
