"""A mixed-decay hold as samples: each PWM period on, fast, slow (a full bridge,
:class:`~coildrive.model.pwm.MixedDecay`).

The on-time rises towards ``V / R_on``; the fast part decays against ``V_f = V_bus + 2
V_d`` through ``R_f`` and stops at zero (the body diodes block); the slow part decays
through ``R_off`` with no opposing voltage: the closed-form segments of
:mod:`coildrive.model.rl` for a linear coil (:class:`LinearSegments`), the exact
tabulated ones of a saturating coil (:class:`CurveSegments`). Every edge is a sample, each segment gets ``points`` samples in between, and a
current that dies in the fast part gets a sample at its zero. Units: s, A, V, ohm, H.
"""

from __future__ import annotations

import numpy as np

from .flux import FluxCoil
from .pwm import MixedDecay
from .rl import decay_current, decay_time, rise_current


class LinearSegments:
    """The three segment kinds of a linear coil of ``ind`` H in closed form
    (:mod:`coildrive.model.rl`): on (``v`` V through ``r_on``), fast (against the bridge's
    ``V_f`` through ``R_f``, stopping at zero) and slow (through ``r_off``)."""

    def __init__(self, v: float, r_on: float, r_off: float, ind: float, mixed: MixedDecay):
        self.v, self.r_on, self.r_off, self.ind = v, r_on, r_off, ind
        self.r_f, self.v_f = float(mixed.r_fast), float(mixed.v_fast)

    def rise(self, i0, t):
        return rise_current(t, i0, self.v, self.r_on, self.ind)

    def fast(self, i0, t):
        return np.maximum(decay_current(t, i0, self.r_f, self.v_f, self.ind), 0.0)

    def fast_zero(self, i0):
        return decay_time(0.0, i0, self.r_f, self.v_f, self.ind)

    def slow(self, i0, t):
        return i0 * np.exp(-t * self.r_off / self.ind)


class CurveSegments:
    """The same three segment kinds of a saturating coil (one point's
    :class:`~coildrive.model.flux.FluxCoil`), tabulated once per kind
    (:class:`~coildrive.model.flux_waveform.Track`: exact times at 20,000 currents)."""

    def __init__(self, coil, v: float, r_on: float, r_off: float, mixed: MixedDecay, top: float):
        from .flux_waveform import Track

        self._fast = Track(coil, v, r_on, float(mixed.r_fast), float(mixed.v_fast), top)
        self._slow = Track(coil, v, r_on, r_off, 0.0, top)

    def rise(self, i0, t):
        return self._fast.rise(i0, t)

    def fast(self, i0, t):
        return self._fast.decay(i0, t)

    def fast_zero(self, i0):
        return self._fast.to_zero(i0)

    def slow(self, i0, t):
        return self._slow.decay(i0, t)


def segments_of(inductance, v: float, r_on: float, r_off: float, mixed: MixedDecay, top: float):
    """The segments of one operating point's coil: ``inductance`` H (a linear coil) or a
    :class:`~coildrive.model.flux.FluxCoil` (tabulated up to ``top`` A and the on-loop's
    asymptote)."""
    if isinstance(inductance, FluxCoil):
        return CurveSegments(inductance, v, r_on, r_off, mixed, top)
    return LinearSegments(v, r_on, r_off, float(inductance), mixed)


def mixed_hold_samples(t_start: float, i0: float, seg, duty: float, frequency: float,
                       hold_time: float, points: int, mixed: MixedDecay):
    """Samples of a mixed-decay hold from ``t_start`` s and ``i0`` A: whole periods (at
    least one), the last cut at the end of its on-time (the turn-off, at the top of the
    ripple); ``seg``: the segments (:class:`LinearSegments` or :class:`CurveSegments`).

    Returns ``(time, current, switch_on, fast, t_off, i_off, fast_part)``: the samples
    after ``t_start`` (s, A, 0/1, and 1 where the current flows in the fast path), the
    final turn-off time s and current A, and 1 on the samples of each fast part (all four
    switches open: from just after the on-time's end up to and including the sample at
    the fast part's end; the slow part follows).
    """
    period = 1.0 / frequency
    n = max(1, int(round(hold_time * frequency)))
    t_on = duty * period
    t_fast = mixed.fraction * (period - t_on)
    t_slow = period - t_on - t_fast
    starts = np.empty(n)
    i = i0
    for k in range(n):
        starts[k] = i
        i = float(seg.slow(seg.fast(seg.rise(i, t_on), t_fast), t_slow))
    frac = np.linspace(0.0, 1.0, points + 1)
    on_t = np.broadcast_to(frac[None, :] * t_on, (n, points + 1))
    on_i = seg.rise(starts[:, None], on_t)
    tops = on_i[:, -1]
    # the fast part: points samples up to its end, one more at the zero where it dies
    fast_t = np.broadcast_to(frac[None, 1:] * t_fast, (n, points))
    t_zero = seg.fast_zero(tops)
    extra = np.where(t_zero < t_fast, t_zero, t_fast * (points - 0.5) / points)
    fast_t = np.sort(np.concatenate([fast_t, extra[:, None]], axis=1), axis=1)
    fast_i = seg.fast(tops[:, None], fast_t)
    i_f = seg.fast(tops, t_fast)
    # the slow part: its end is the next period's first sample
    slow_t = np.broadcast_to(frac[None, 1:-1] * t_slow, (n, points - 1))
    slow_i = seg.slow(i_f[:, None], slow_t)
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
