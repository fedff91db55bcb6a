"""One actuation of a saturating coil as a time series (``simulate``, the emulator, plots).

The same schedule as :mod:`coildrive.model.waveform` -- full on from zero for the peak,
whole PWM periods of hold ending at the top of the last on-time, then the free decay to
zero -- with the flux-linkage curve of :mod:`coildrive.model.flux`. At one operating
point the two segment kinds are tabulated once (:class:`Track`): the exact time from
zero current along the on-loop, and from the top along the off-loop, at 20,000
currents; a current after a time is read back from the table. The hold's per-period
start currents follow by the same scalar recurrence as the linear coil's. On a drooping
bus (``supply.source_resistance``) the peak is :mod:`coildrive.model.flux_bus`'s; the
hold that follows sees the stiff supply, as :func:`coildrive.model.waveform.peak_samples`
has it. A boosted peak (``supply.boost``) runs from the boost at its nominal
(:mod:`coildrive.model.flux_boost`); the hold from the main supply.
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from . import flux, flux_boost, flux_bus
from .circuit import Loop

#: Currents tabulated per segment kind.
GRID = 20_000


class Track:
    """Both segment kinds of one operating point, tabulated: on (``v_on`` V through
    ``r_on``) and off (against ``v_off`` V through ``r_off``), for currents up to
    ``top`` A (and up to the on-loop's asymptote ``v_on / r_on``). Where ``top`` lies
    above the asymptote (the hold after a boosted peak), the on-loop's fall from there
    towards it is tabulated too."""

    def __init__(self, coil: flux.FluxCoil, v_on: float, r_on: float, r_off: float,
                 v_off: float, top: float):
        a = v_on / r_on
        near = a * (1.0 - np.logspace(-3, -13, 400))           # toward the asymptote
        self.i_on = np.concatenate([np.linspace(0.0, near[0], GRID, endpoint=False), near])
        dt = flux.time(coil, self.i_on[:-1], self.i_on[1:], v_on, r_on)
        self.t_on = np.concatenate([[0.0], np.cumsum(dt)])
        self.a = a
        self.i_above = None
        if top > a:   # falling from above towards the asymptote (i_above falls)
            near = a * (1.0 + np.logspace(-3, -13, 400))
            self.i_above = np.concatenate([np.linspace(top * 1.001, near[0], GRID, endpoint=False), near])
            dt = flux.time(coil, self.i_above[:-1], self.i_above[1:], v_on, r_on)
            self.t_above = np.concatenate([[0.0], np.cumsum(dt)])
        hi = max(top, a) * 1.001
        self.i_off = np.linspace(0.0, hi, GRID + 1)
        dt = flux.time(coil, self.i_off[1:], self.i_off[:-1], -v_off, r_off)
        # time to fall from ``hi`` to each current (falling as the current rises)
        self.t_off = np.concatenate([np.cumsum(dt[::-1])[::-1], [0.0]])

    def rise(self, i0, t):
        """Current A after ``t`` s on from ``i0`` A (falling towards ``v_on / r_on`` from
        above it)."""
        start = np.interp(i0, self.i_on, self.t_on)
        up = np.interp(start + t, self.t_on, self.i_on)
        if self.i_above is None:
            return up
        start = np.interp(i0, self.i_above[::-1], self.t_above[::-1])
        down = np.interp(start + t, self.t_above, self.i_above)
        return np.where(np.asarray(i0) > self.a, down, up)

    def decay(self, i0, t):
        """Current A after ``t`` s off from ``i0`` A (zero once it gets there)."""
        start = np.interp(i0, self.i_off, self.t_off)
        return np.interp(start + t, self.t_off[::-1], self.i_off[::-1])

    def to_zero(self, i0):
        """s of decay from ``i0`` A to zero."""
        return self.t_off[0] - np.interp(i0, self.i_off, self.t_off)


def period_starts(rise, decay, i0: float, n: int, t_on: float, t_off: float) -> np.ndarray:
    """The current (A) at the start of each of ``n`` hold periods from ``i0`` A: each
    period rises for ``t_on`` s (``rise(i, t)``) and, but for the last, decays for
    ``t_off`` s (``decay(i, t)``)."""
    starts = np.empty(n)
    i = i0
    for k in range(n):
        starts[k] = i
        top = float(rise(i, t_on))
        i = float(decay(top, t_off)) if k < n - 1 else top
    return starts


def stitch_periods(t0, t_on: float, on_t, off_t, *values):
    """The hold's periods (rows: period start ``t0`` s, on-time sample times ``on_t`` and
    off-time ones ``off_t`` from their segment's start) as flat samples, without the
    first sample (the peak's end) and the last period's off-time (the release starts at
    the top of its on-time): ``(time s, switch 0/1, *columns)``, one column per
    ``(on values, off values)`` pair in ``values``."""
    keep = np.ones((on_t.shape[0], on_t.shape[1] + off_t.shape[1]), dtype=bool)
    keep[-1, on_t.shape[1]:] = False
    rows = [np.concatenate([t0 + on_t, t0 + t_on + off_t], axis=1),
            np.concatenate([np.ones_like(on_t), np.zeros_like(off_t)], axis=1)]
    rows += [np.concatenate(pair, axis=1) for pair in values]
    return tuple(r[keep][1:] for r in rows)


def actuation(drive: Drive, lp: Loop, peak_time: float, duty: float, frequency: float,
              hold_time: float, points: int, release_lp: Loop | None = None):
    """The sample pieces of one actuation: ``(time, current, switch_on, t_off, i_off)``
    (s, A, 0/1 arrays; the final turn-off time s and current A), through the loop ``lp``
    of one operating point whose inductance is a :class:`~coildrive.model.flux.FluxCoil`;
    the final decay through ``release_lp`` where it differs (a full bridge's fast path)."""
    coil = lp.inductance
    coil = coil.with_scale(float(np.ravel(coil.scale)[0]))
    v, r_on, r_off, v_off = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off))
    big = 40 * points
    tp = np.linspace(0.0, peak_time, big + 1)
    if drive.supply.boosted:   # the peak from the boost at its nominal (model/flux_boost.py)
        s = drive.supply
        b = flux_boost.boost(s.boost, s.boost_capacitance, r_on + s.boost_resistance, coil)
        rise = flux_boost.state(tp, b)[0]
        peak_end = float(rise[-1])
        tr = Track(coil, v, r_on, r_off, v_off, peak_end)
    elif drive.supply.droops:   # the peak on the drooping bus (model/flux_bus.py)
        s = drive.supply
        fb = flux_bus.bus(v, s.source_resistance, s.capacitance, r_on, coil)
        rise = flux_bus.current(tp, fb)
        peak_end = float(rise[-1])
        tr = Track(coil, v, r_on, r_off, v_off, peak_end)
    else:
        peak_end = float(flux.current(coil, peak_time, 0.0, v, r_on))
        tr = Track(coil, v, r_on, r_off, v_off, peak_end)
        rise = tr.rise(0.0, tp)
        rise[-1] = peak_end
    ts, cs, ons = [tp], [rise], [np.ones_like(tp)]
    period = 1.0 / frequency
    n = max(1, int(round(hold_time * frequency)))
    t_on, t_off = duty * period, (1.0 - duty) * period
    starts = period_starts(tr.rise, tr.decay, peak_end, n, t_on, t_off)
    frac = np.linspace(0.0, 1.0, points + 1)
    t0 = peak_time + np.arange(n)[:, None] * period
    on_t = np.broadcast_to(frac[None, :] * t_on, (n, points + 1))
    on_i = tr.rise(starts[:, None], on_t)
    tops = on_i[:, -1]
    off_t = np.broadcast_to(frac[None, 1:-1] * t_off, (n, points - 1))
    t_zero = tr.to_zero(tops)
    extra = np.where(t_zero < t_off, t_zero, t_off * (points - 0.5) / points)
    off_t = np.sort(np.concatenate([off_t, extra[:, None]], axis=1), axis=1)
    off_i = tr.decay(tops[:, None], off_t)
    t_flat, on_flat, i_flat = stitch_periods(t0, t_on, on_t, off_t, (on_i, off_i))
    ts.append(t_flat)
    cs.append(i_flat)
    ons.append(on_flat)
    t_cut = peak_time + (n - 1) * period + t_on
    i_cut = float(tops[-1])
    if release_lp is not None and release_lp is not lp:
        tr = Track(coil, v, r_on, float(release_lp.r_off), float(release_lp.v_off), peak_end)
    tz = float(tr.to_zero(i_cut))
    td = np.linspace(0.0, tz, big + 1)[1:]
    ts.append(t_cut + td)
    cs.append(tr.decay(i_cut, td))
    ons.append(np.zeros_like(td))
    return ts, cs, ons, t_cut, i_cut, tz
