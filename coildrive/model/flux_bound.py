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

import numpy as np

from . import flux


def incremental_range(curve: flux.FluxCurve, a: float, b: float) -> tuple[float, float]:
    """``(lowest, highest)`` incremental inductance (H, unscaled) of ``curve`` over
    currents ``a..b`` A, exactly: each piece's derivative is a quadratic, so its extremes
    are at the ends, the table points inside and each piece's vertex inside."""
    pts = [a, b] + [x for x in curve.current if a < x < b]
    c = curve.coef
    for k, start in enumerate(curve.base):
        if c[0, k] != 0.0:
            vertex = start - c[1, k] / (3.0 * c[0, k])
            end = curve.edges[k + 1]
            if start <= vertex < end and a < vertex < b:
                pts.append(vertex)
    got = curve.incremental(np.array(pts, float))
    return float(got.min()), float(got.max())


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
