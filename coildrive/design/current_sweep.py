"""A current-mode hold's switching over the coil's temperatures, from switch-on to settled.

A coil switched on cold (at the ambient: the first actuation, an on/off cycle's cold
start) warms through every temperature up to the one the hold settles at, and its
current-mode hold switches at each of them: the switching range, the duties and the
shortest segment the design reports (the JSON's ``current_mode``) and checks
(``current_mode_frequency``) are taken over that whole span at every corner.

How the switching moves with the loop resistance (linear coil, no sense delay; the RL
segments of :mod:`coildrive.model.current_mode`, written in ``u = 1 / R``):

* hysteretic: the on segment ``L u ln((V u - I_lo) / (V u - I_hi))`` grows with ``R``
  (its ``u``-derivative ``ln(1 + y) - x (I_hi - I_lo) / ((x - I_hi)(x - I_lo))`` with
  ``x = V u``, ``y = (I_hi - I_lo) / (x - I_hi)`` is negative as ``ln(1 + y) <= y``), the
  off segment ``L u ln((I_hi + V_f u) / (I_lo + V_f u))`` shrinks (the same argument with
  ``ln(1 + y) >= y / (1 + y)``): the duty rises with the coil's temperature, but the
  period is a sum of a rising and a falling part and may have its extreme inside the span
  (a high duty: the on segment wins, the frequency falls as the coil warms; a slow decay
  with nothing opposing it: the off segment wins and it rises);
* off time: the off segment is fixed, the current falls lower in it and rises slower
  after it as ``R`` grows: the frequency falls and the duty rises as the coil warms.

So the range is not taken at the two ends only: :data:`SWEEP_POINTS` temperatures
evenly between cold and settled at every corner, then each corner's fastest and
slowest point refined by golden-section search between its neighbours (a saturating
coil or an eddy term changes the segments, not the sweep).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..model.circuit import loop
from ..model.current_mode import (CurrentModeSteadyState, hysteretic_steady_state,
                                  off_time_steady_state)
from .corners import CornerGrid

#: Temperatures swept between the cold and the settled coil at each corner (our choice;
#: the extremes are then refined, :func:`sweep`).
SWEEP_POINTS = 9

#: Golden-section steps refining an extreme between two sweep points (the bracket shrinks
#: to 0.618^24 ~ 1e-5 of 1/8 of the span).
REFINE_STEPS = 24


def steady_state(drive: Drive, lp, lower_a, upper_a, off_time, delay) -> CurrentModeSteadyState:
    """The current-mode steady state for the drive's control at loop ``lp`` (a full bridge's
    mixed decay: ``lp.mixed``; under hysteretic control ``off_time`` is then the fixed time
    of each off-time's fast part, s)."""
    if drive.hold.control == "hysteretic":   # (mixed decay: ``off_time`` is the fast one-shot's)
        return hysteretic_steady_state(lower_a, upper_a, lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                                       lp.inductance, delay, off_time, lp.mixed)
    return off_time_steady_state(upper_a, off_time, lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                                 lp.inductance, delay, lp.mixed)


@dataclass(frozen=True)
class SwitchingSpan:
    """The switching of a current-mode hold over the coil's temperatures from cold to
    settled at each corner (Hz, degC, s; ``*_temp_c`` the coil where each extreme is)."""

    min_frequency_hz: float
    min_frequency_index: int
    min_frequency_temp_c: float
    max_frequency_hz: float
    max_frequency_index: int
    max_frequency_temp_c: float
    min_duty: float
    max_duty: float
    shortest_segment_s: float


def sweep(drive: Drive, grid: CornerGrid, settled, lower_a: float, upper_a: float,
          off_time: float, delay: float) -> SwitchingSpan | None:
    """The hold's switching (thresholds ``lower_a`` / ``upper_a`` A, ``off_time`` s,
    ``delay`` s) at every corner of ``grid`` with the coil from the ambient up to
    ``settled`` (degC per corner, ``inf`` on runaway: the coil's limit); ``None`` where it
    is regulated nowhere."""
    settled = np.where(np.isfinite(settled), settled, drive.thermal.max_coil_temp)
    cold = np.asarray(grid.ambient, float)

    def at(s):
        """Frequency (nan unregulated), duty and shortest segment at fractions ``s``
        (rows) of the span."""
        temp = cold + s * (settled - cold)
        shape = np.broadcast_shapes(np.shape(s), cold.shape)
        lp = loop(drive, np.broadcast_to(grid.supply, shape), temp,
                  np.broadcast_to(grid.r_factor, shape), np.broadcast_to(grid.l_factor, shape))
        cm = steady_state(drive, lp, lower_a, upper_a, off_time, delay)
        reg = np.broadcast_to(cm.regulated, shape)
        f = np.where(reg, np.broadcast_to(cm.frequency, shape), np.nan)
        seg = np.where(reg, np.minimum(np.broadcast_to(cm.t_on, shape), np.broadcast_to(cm.t_off, shape)),
                       np.inf)
        return f, np.broadcast_to(cm.duty, shape), seg, np.broadcast_to(temp, shape)

    s = np.linspace(0.0, 1.0, SWEEP_POINTS)[:, None] * np.ones_like(cold)
    f, duty, seg, temp = at(s)
    if not np.any(np.isfinite(f)):
        return None
    found = [(f, duty, seg, temp)]
    for sign in (1.0, -1.0):   # the fastest, then the slowest, point of each corner
        score = np.where(np.isfinite(f), sign * f, -np.inf)
        k = np.argmax(score, axis=0)
        if not np.any((k > 0) & (k < SWEEP_POINTS - 1)):
            continue   # every corner's extreme at an end of the span: nothing to refine
        cols = np.arange(cold.size)
        a = s[np.maximum(k - 1, 0), cols]
        b = s[np.minimum(k + 1, SWEEP_POINTS - 1), cols]
        found.extend(_golden(at, a, b, sign))
    f = np.concatenate([x[0] for x in found])
    duty = np.concatenate([x[1] for x in found])
    seg = np.concatenate([x[2] for x in found])
    temp = np.concatenate([x[3] for x in found])
    lo = np.unravel_index(np.nanargmin(f), f.shape)
    hi = np.unravel_index(np.nanargmax(f), f.shape)
    return SwitchingSpan(
        min_frequency_hz=float(f[lo]), min_frequency_index=int(lo[1]), min_frequency_temp_c=float(temp[lo]),
        max_frequency_hz=float(f[hi]), max_frequency_index=int(hi[1]), max_frequency_temp_c=float(temp[hi]),
        min_duty=float(np.min(duty)), max_duty=float(np.max(duty)), shortest_segment_s=float(np.min(seg)))


def _golden(at, a, b, sign: float) -> list:
    """Golden-section search of ``sign x`` frequency's maximum in ``[a, b]`` per corner;
    every point evaluated, as rows like :func:`sweep`'s."""
    g = (np.sqrt(5.0) - 1.0) / 2.0
    c, d = b - g * (b - a), a + g * (b - a)
    rows = [at(c[None, :]), at(d[None, :])]
    fc, fd = rows[0][0][0], rows[1][0][0]
    for _ in range(REFINE_STEPS):
        left = np.nan_to_num(sign * fc, nan=-np.inf) >= np.nan_to_num(sign * fd, nan=-np.inf)
        a, b = np.where(left, a, c), np.where(left, d, b)
        c_new, d_new = b - g * (b - a), a + g * (b - a)
        # the kept inner point carries over; one new point per corner per step
        new = np.where(left, c_new, d_new)
        row = at(new[None, :])
        rows.append(row)
        fn = row[0][0]
        fc, fd = np.where(left, fn, fd), np.where(left, fc, fn)
        c, d = np.where(left, c_new, d), np.where(left, c, d_new)
    return rows
