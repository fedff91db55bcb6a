"""One channel's actuation with its hold on a shared PWM timer (several channels, one timer).

The shared timer counts from 0 s; its periods start at ``m T``. A channel is switched on
at its start ``t0`` for its peak ``t_peak``; from the peak's end on its switch follows the
timer's output: on from every period start ``m T`` until the channel's compare at
``m T + D T`` (``D`` = compare / period counts), off (freewheeling through the hold's
path) for the rest of the period. If the peak ends before the compare of its period the
switch stays on until that compare. The final turn-off is the first compare edge at or
after ``t0 + t_peak + hold``; then the coil decays to zero through the release path
(after ``slow_s`` s more of the hold's path, a bypass opened after the turn-off). Every
switch-on segment is ``V/R + (i0 - V/R) e^(-t R/L)``, every off segment the freewheel decay
held at zero once there (:mod:`coildrive.model.rl`): exact between switching moments on a
stiff bus. SI units throughout; the model knows no files.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .rl import decay_current, decay_time, rise_current

ON, HOLD_OFF, RELEASE = 1, 0, 2


@dataclass(frozen=True)
class ChannelRun:
    """The piecewise actuation: segment start times ``start`` (s), their kinds (``ON``,
    ``HOLD_OFF``, ``RELEASE``), the coil current at each start ``i0`` (A), the time the
    current reaches zero ``t_zero`` (s), the final turn-off ``t_cut`` (s) and the loop's
    constants (V, ohm, H)."""

    start: np.ndarray
    kind: np.ndarray
    i0: np.ndarray
    t_zero: float
    t_cut: float
    v: float
    r_on: float
    r_off: float
    v_off: float
    r_rel: float
    v_rel: float
    ind: float

    def current(self, t) -> np.ndarray:
        """Coil current (A) at the times ``t`` (s): 0 before the switch-on and after zero."""
        t = np.asarray(t, float)
        k = np.clip(np.searchsorted(self.start, t, side="right") - 1, 0, None)
        dt = np.clip(t - self.start[k], 0.0, None)
        i0, kind = self.i0[k], self.kind[k]
        on = rise_current(dt, i0, self.v, self.r_on, self.ind)
        off = decay_current(dt, i0, self.r_off, self.v_off, self.ind)
        rel = decay_current(dt, i0, self.r_rel, self.v_rel, self.ind)
        i = np.where(kind == ON, on, np.where(kind == HOLD_OFF, off, rel))
        return np.where((t < self.start[0]) | (t >= self.t_zero), 0.0, i)

    def switch_on(self, t) -> np.ndarray:
        """1 where the switch conducts at ``t`` (s), else 0: on-segments are closed (a
        sample at an off-edge is on, at the top of its current)."""
        t = np.asarray(t, float)
        k = np.searchsorted(self.start, t, side="right") - 1
        kk = np.clip(k, 0, None)
        inside = (k >= 0) & (self.kind[kk] == ON)
        at_end = (k >= 1) & (t == self.start[kk]) & (self.kind[np.clip(k - 1, 0, None)] == ON)
        return (inside | at_end).astype(np.int8)

    def kind_at(self, t) -> np.ndarray:
        """The segment's kind (``ON``, ``HOLD_OFF``, ``RELEASE``) at the times ``t`` (s);
        -1 before the switch-on."""
        k = np.searchsorted(self.start, np.asarray(t, float), side="right") - 1
        return np.where(k >= 0, self.kind[np.clip(k, 0, None)], -1)

    def edges(self) -> tuple[np.ndarray, np.ndarray]:
        """``(on-edges, off-edges)`` (s) of the switch."""
        k = self.kind
        on = self.start[k == ON]
        off = self.start[1:][(k[:-1] == ON) & (k[1:] != ON)]
        return on, off

    def samples(self, points: int) -> np.ndarray:
        """Sample times (s): every segment's start, ``points`` per segment (the peak and
        the release 40x as many), and the zero crossing."""
        ends = np.append(self.start[1:], self.t_zero)
        n = np.where(self.kind == HOLD_OFF, points, 40 * points)
        n[(self.kind == ON) & (np.arange(len(n)) > 0)] = points
        parts = [s + (e - s) * np.arange(m) / m for s, e, m in zip(self.start, ends, n)]
        return np.concatenate(parts + [[self.t_zero]])


def channel_run(t0: float, t_peak: float, duty: float, period: float, hold: float, v: float,
                r_on: float, r_off: float, v_off: float, r_rel: float, v_rel: float, ind: float,
                slow_s: float = 0.0) -> ChannelRun:
    """The :class:`ChannelRun` of one channel (module docstring): start ``t0`` s, peak
    ``t_peak`` s, hold duty ``duty`` (compare / period counts) on the shared timer of
    period ``period`` s, at least ``hold`` s of hold; the on-loop ``v`` V, ``r_on`` ohm, the
    hold's off path ``r_off`` ohm and ``v_off`` V, the release path ``r_rel``, ``v_rel``,
    coil ``ind`` H; ``slow_s`` s of the hold's path after the final turn-off."""
    on_at = t0 + t_peak
    t_end = on_at + hold
    times, kinds = [t0], [ON]
    tail = duty * period
    m = math.floor(on_at / period + 1e-9)   # a peak ending on a period start starts it
    if duty >= 1.0:                 # on throughout: cut at the first period start after the hold
        t_cut = math.ceil(t_end / period) * period
    elif duty <= 0.0:               # never on in the hold: cut at the peak's end
        t_cut = on_at
    else:
        if on_at - m * period >= tail:  # the peak ends past its period's compare: off now
            times.append(on_at)
            kinds.append(HOLD_OFF)
            m += 1
            times.append(m * period)
            kinds.append(ON)
        while m * period + tail < t_end:
            times += [m * period + tail, (m + 1) * period]
            kinds += [HOLD_OFF, ON]
            m += 1
        t_cut = m * period + tail
    if slow_s > 0:
        times.append(t_cut)
        kinds.append(HOLD_OFF)
    times.append(t_cut + slow_s)
    kinds.append(RELEASE)
    start = np.array(times)
    kind = np.array(kinds)
    keep = np.append(np.diff(start) > 0, True)   # drop zero-length segments
    start, kind = start[keep], kind[keep]
    i0 = np.zeros(len(start))
    for j in range(1, len(start)):
        dt = start[j] - start[j - 1]
        if kind[j - 1] == ON:
            i0[j] = float(rise_current(dt, i0[j - 1], v, r_on, ind))
        elif kind[j - 1] == HOLD_OFF:
            i0[j] = float(decay_current(dt, i0[j - 1], r_off, v_off, ind))
        else:
            i0[j] = float(decay_current(dt, i0[j - 1], r_rel, v_rel, ind))
    t_zero = start[-1] + float(decay_time(0.0, i0[-1], r_rel, v_rel, ind))
    return ChannelRun(start, kind, i0, float(t_zero), float(t_cut), v, r_on, r_off, v_off, r_rel,
                      v_rel, ind)
