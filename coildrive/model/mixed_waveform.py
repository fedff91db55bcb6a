"""A mixed-decay hold as samples: each PWM period on, fast, slow (a full bridge,
:class:`~coildrive.model.pwm.MixedDecay`).

The closed-form segments of :mod:`coildrive.model.rl`: the on-time rises towards
``V / R_on``; the fast part decays against ``V_f = V_bus + 2 V_d`` through ``R_f`` and stops at
zero (the body diodes block); the slow part decays through ``R_off`` with no opposing
voltage. Every edge is a sample, each segment gets ``points`` samples in between, and a
current that dies in the fast part gets a sample at its zero. Units: s, A, V, ohm, H.
"""

from __future__ import annotations

import math

import numpy as np

from .pwm import MixedDecay
from .rl import decay_current, decay_time, rise_current


def mixed_hold_samples(t_start: float, i0: float, v: float, r_on: float, r_off: float,
                       ind: float, duty: float, frequency: float, hold_time: float, points: int,
                       mixed: MixedDecay):
    """Samples of a mixed-decay hold from ``t_start`` s and ``i0`` A: whole periods (at
    least one), the last cut at the end of its on-time (the turn-off, at the top of the
    ripple).

    Returns ``(time, current, switch_on, fast, t_off, i_off, fast_part)``: the samples
    after ``t_start`` (s, A, 0/1, and 1 where the current flows in the fast path), the
    final turn-off time s and current A, and 1 on the samples of each fast part (all four
    switches open: from just after the on-time's end up to and including the sample at
    the fast part's end; the slow part follows).
    """
    r_f, v_f = float(mixed.r_fast), float(mixed.v_fast)
    period = 1.0 / frequency
    n = max(1, int(round(hold_time * frequency)))
    t_on = duty * period
    t_fast = mixed.fraction * (period - t_on)
    t_slow = period - t_on - t_fast
    e_on = math.exp(-t_on * r_on / ind)
    e_f, e_s = math.exp(-t_fast * r_f / ind), math.exp(-t_slow * r_off / ind)
    a, b = v / r_on, v_f / r_f
    starts = np.empty(n)
    i = i0
    for k in range(n):
        starts[k] = i
        top = a + (i - a) * e_on
        i = max((top + b) * e_f - b, 0.0) * e_s
    frac = np.linspace(0.0, 1.0, points + 1)
    on_t = np.broadcast_to(frac[None, :] * t_on, (n, points + 1))
    on_i = rise_current(on_t, starts[:, None], v, r_on, ind)
    tops = on_i[:, -1]
    # the fast part: points samples up to its end, one more at the zero where it dies
    fast_t = np.broadcast_to(frac[None, 1:] * t_fast, (n, points))
    t_zero = decay_time(0.0, tops, r_f, v_f, ind)
    extra = np.where(t_zero < t_fast, t_zero, t_fast * (points - 0.5) / points)
    fast_t = np.sort(np.concatenate([fast_t, extra[:, None]], axis=1), axis=1)
    fast_i = np.maximum(decay_current(fast_t, tops[:, None], r_f, v_f, ind), 0.0)
    i_f = np.maximum((tops + b) * e_f - b, 0.0)
    # the slow part: its end is the next period's first sample
    slow_t = np.broadcast_to(frac[None, 1:-1] * t_slow, (n, points - 1))
    slow_i = i_f[:, None] * np.exp(-slow_t * r_off / ind)
    t0 = t_start + np.arange(n)[:, None] * period
    period_t = np.concatenate([t0 + on_t, t0 + t_on + fast_t, t0 + t_on + t_fast + slow_t], axis=1)
    period_i = np.concatenate([on_i, fast_i, slow_i], axis=1)
    period_on = np.concatenate([np.ones_like(on_t), np.zeros_like(fast_t), np.zeros_like(slow_t)],
                               axis=1)
    in_fast = np.concatenate([np.zeros_like(on_t), (fast_i > 0) | (fast_t <= t_zero[:, None]),
                              np.zeros_like(slow_t)], axis=1)
    fast_part = np.concatenate([np.zeros_like(on_t), np.ones_like(fast_t), np.zeros_like(slow_t)],
                               axis=1).astype(bool)
    keep = np.ones_like(period_t, dtype=bool)
    keep[-1, on_t.shape[1]:] = False
    t_offedge = t_start + (n - 1) * period + t_on
    return (period_t[keep][1:], period_i[keep][1:], period_on[keep][1:],
            in_fast[keep][1:].astype(bool), t_offedge, float(tops[-1]), fast_part[keep][1:])
