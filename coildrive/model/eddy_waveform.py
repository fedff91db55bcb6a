"""One actuation of a coil with an eddy resistance as a time series (``simulate``, the
emulator, synthetic captures).

The schedule of :mod:`coildrive.model.waveform` -- full on from zero for the peak, whole
PWM periods of hold ending at the top of the last on-time, then the release -- with the
magnetising current as the state (:mod:`coildrive.model.eddy`). At one operating point
the three segment kinds are tabulated once from their exact segment times
(:class:`_Table`): on (the Thevenin pair of the on-loop), off while the freewheel
conducts (down to ``V_off / R_e``) and the flux's decay through ``R_e`` alone; a current
after a time is read back from the table. The terminal current steps at every switch
edge, so each edge has two samples at the same time (before and after). The release is
drawn until the magnetising current has fallen to 1 % of where it started. On a drooping
bus (``supply.source_resistance``) the peak is :mod:`coildrive.model.supply`'s closed form
(its magnetising and terminal currents; a curve's, :mod:`coildrive.model.flux_bus`'s
run), from a boost :mod:`coildrive.model.boost`'s; the hold that follows sees the stiff
supply, as :func:`coildrive.model.waveform.peak_samples` has it.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..config import Drive
from . import boost as boost_model
from . import eddy
from . import flux_bus
from . import supply as bus_model
from .circuit import Loop
from .flux import FluxCoil
from .flux_waveform import period_starts, stitch_periods

#: Currents tabulated per segment kind.
GRID = 20_000
#: The release is drawn until the magnetising current is this fraction of its start.
TAIL_FRACTION = 0.01


class _Table:
    """Exact times along one segment kind (``dpsi/dt = v - r i_m``) at the tabulated
    magnetising ``currents`` (A, in the direction of travel)."""

    def __init__(self, mag, v: float, r: float, currents: np.ndarray):
        self.i = currents
        dt = eddy.branch_time(mag, currents[:-1], currents[1:], v, r)
        self.t = np.concatenate([[0.0], np.cumsum(dt)])
        self.up = currents[-1] > currents[0]

    def time_at(self, i):
        """s from the table's start to the current ``i`` A."""
        if self.up:
            return np.interp(i, self.i, self.t)
        return np.interp(i, self.i[::-1], self.t[::-1])

    def current(self, i0, dt):
        """Current A ``dt`` s after ``i0`` A."""
        return np.interp(self.time_at(i0) + dt, self.t, self.i)


class _Point:
    """The three tables of one operating point and the terminal current's rules."""

    def __init__(self, lp: Loop, top: float):
        e = lp.inductance[...]
        self.re = float(np.ravel(e.resistance)[0])
        mag = e.magnetising
        self.mag = mag.with_scale(float(np.ravel(mag.scale)[0])) if hasattr(mag, "with_scale") \
            else float(np.ravel(mag)[0])
        self.v, self.r_on, self.r_off, self.v_off = (float(np.ravel(x)[0]) for x in
                                                     (lp.v_on, lp.r_on, lp.r_off, lp.v_off))
        von, ron = (float(x) for x in eddy.thevenin(self.v, self.r_on, self.re))
        voff, roff = (float(x) for x in eddy.thevenin(-self.v_off, self.r_off, self.re))
        a = von / ron
        near = a * (1.0 - np.logspace(-3, -13, 400))
        self.on = _Table(self.mag, von, ron, np.concatenate([np.linspace(0.0, near[0], GRID,
                                                                         endpoint=False), near]))
        self.ib = float(eddy.block_current(self.v_off, self.re))
        hi = max(top, a) * 1.001
        self.off = _Table(self.mag, voff, roff, np.linspace(hi, self.ib, GRID + 1)) if hi > self.ib else None
        self.tail = _Table(self.mag, 0.0, self.re, self.ib * np.logspace(0, -9, GRID + 1)) \
            if self.ib > 0 else None

    def conduction(self, i0):
        """s the freewheel conducts from ``i0`` A."""
        if self.off is None:
            return np.zeros_like(np.asarray(i0, float))
        return np.where(i0 > self.ib, self.off.t[-1] - self.off.time_at(i0), 0.0)

    def decay(self, i0, t):
        """Magnetising current A ``t`` s into a freewheel from ``i0`` A."""
        i0, t = np.broadcast_arrays(np.asarray(i0, float), np.asarray(t, float))
        tb = self.conduction(i0)
        first = self.off.current(i0, np.minimum(t, tb)) if self.off is not None else i0
        if self.tail is None:
            return first
        late = t > tb
        rest = self.tail.current(np.minimum(i0, self.ib), np.where(late, t - tb, 0.0))
        return np.where(late, rest, first)

    def on_terminal(self, i_m):
        return eddy.terminal(i_m, self.v, self.r_on, self.re)

    def off_terminal(self, i_m):
        return np.maximum(eddy.terminal(i_m, -self.v_off, self.r_off, self.re), 0.0)

    def time_to(self, i0, i1):
        """s of freewheeling from ``i0`` down to ``i1`` A of magnetising current."""
        tb = float(self.conduction(i0))
        if i1 >= self.ib or self.tail is None:
            return float(self.off.time_at(i1) - self.off.time_at(i0)) if self.off is not None else 0.0
        return tb + float(self.tail.time_at(i1) - self.tail.time_at(min(i0, self.ib)))


class _Mixed:
    """A full bridge's mixed-decay off-times at one operating point (``lp.mixed``): the
    fast part (all four switches open: against ``V_bus + 2 V_d`` through ``R_f``, the
    body diodes blocking at ``i_m = V_f / R_e``, then the flux through ``R_e``) tabulated
    as a freewheel of its own (:class:`_Point`), then the slow part (Q2 + Q4, nothing
    opposing: ``dpsi/dt = -R_s R_e / (R_s + R_e) i_m``, never blocking). The terminal
    current steps up where the slow part starts (the fast part's end, at the same
    instant)."""

    def __init__(self, lp: Loop, pt: _Point, top: float, t_off: float, t_fast: float | None = None):
        m = lp.mixed
        self.t_fast = float(m.fraction) * t_off if t_fast is None else t_fast   # (a one-shot's own time)
        self.t_slow = t_off - self.t_fast
        self.fast = _Point(dataclasses.replace(lp, r_off=np.ravel(m.r_fast)[:1], v_off=np.ravel(m.v_fast)[:1]),
                           top)
        self.re, self.r_s = pt.re, pt.r_off
        rs_t = float(eddy.thevenin(0.0, self.r_s, self.re)[1])
        hi = max(top, pt.v / pt.r_on)   # the on-loop's asymptote of the magnetising current
        self.slow = _Table(pt.mag, 0.0, rs_t, hi * 1.001 * np.logspace(0, -12, GRID + 1))

    def period_end(self, top, _t_off=None):
        """Magnetising current A at the end of the off-time from ``top`` A."""
        return self.slow.current(self.fast.decay(top, self.t_fast), self.t_slow)

    def sensed_down_to(self, m0: float, level: float) -> float:
        """s from the turn-off at ``m0`` A of magnetising current until the SENSED current
        falls to ``level`` A (> 0): in the fast part (its terminal current ``(R_e i_m -
        V_f) / (R_f + R_e)``) or, after its end, in the slow part (``R_e i_m / (R_s +
        R_e)``, stepping up there: at the fast part's end if that step is still at or below
        ``level``)."""
        f = self.fast
        m_f = ((f.r_off + self.re) * level + f.v_off) / self.re
        if m0 > m_f:
            t1 = f.time_to(m0, m_f)
            if t1 <= self.t_fast:
                return t1
        c = float(f.decay(m0, self.t_fast))
        m_s = (self.r_s + self.re) * level / self.re
        if c <= m_s:
            return self.t_fast
        return self.t_fast + float(self.slow.time_at(m_s) - self.slow.time_at(c))

    def off_time_samples(self, m0: float, dur: float, n: int):
        """One off-time of ``dur`` s from ``m0`` A: ``(time from its start s, magnetising A,
        terminal A, 1 in the fast part)``, about ``n`` samples in each part, the fast
        part's block a sample and its end two (the terminal current's step up as Q2 + Q4
        close)."""
        t_f = min(dur, self.t_fast)
        tb = float(self.fast.conduction(m0))
        tf = np.unique(np.concatenate([np.linspace(0.0, t_f, n + 1), [tb] if tb < t_f else []]))
        mf = self.fast.decay(m0, tf)
        cf = self.fast.off_terminal(mf)
        if dur <= self.t_fast:
            return tf, mf, cf, np.ones_like(tf)
        ts = np.linspace(0.0, dur - self.t_fast, n + 1)
        ms = self.slow.current(float(mf[-1]), ts)
        return (np.concatenate([tf, self.t_fast + ts]), np.concatenate([mf, ms]),
                np.concatenate([cf, eddy.terminal(ms, 0.0, self.r_s, self.re)]),
                np.concatenate([np.ones_like(tf), np.zeros_like(ts)]))

    def off_samples(self, tops, frac):
        """The off-times' samples from the tops ``tops`` (A, one per period): ``(time from
        the off-time's start s, magnetising A, terminal A, 1 in the fast part)``, rows per
        period."""
        n, k = tops.size, frac.size - 1
        tb = self.fast.conduction(tops)
        extra = np.where(tb < self.t_fast, tb, self.t_fast * (k - 0.5) / k)
        fast_t = np.sort(np.concatenate([np.broadcast_to(frac[None, :] * self.t_fast, (n, k + 1)),
                                         extra[:, None]], axis=1), axis=1)
        fast_m = self.fast.decay(tops[:, None], fast_t)
        slow_t = np.broadcast_to(frac[None, :] * self.t_slow, (n, k + 1))
        slow_m = self.slow.current(fast_m[:, -1:], slow_t)
        slow_c = eddy.terminal(slow_m, 0.0, self.r_s, self.re)
        flag = np.concatenate([np.ones_like(fast_t), np.zeros_like(slow_t)], axis=1)
        return (np.concatenate([fast_t, self.t_fast + slow_t], axis=1), np.concatenate([fast_m, slow_m], axis=1),
                np.concatenate([self.fast.off_terminal(fast_m), slow_c], axis=1), flag)


def _freewheel_samples(pt: _Point, t0: float, i0: float, t_knee: float, t_end: float, big: int,
                       pieces) -> tuple[float, float]:
    """Append a freewheel through ``pt``'s off path from ``i0`` A at ``t0`` s to the sample
    pieces ``(time, magnetising, terminal, switch_on, fast)``: ``big`` + 1 samples up to
    ``t_knee`` s (where the path stops conducting) and as many after it, to ``t_end`` s;
    returns the end ``(time s, magnetising current A)``."""
    td = np.unique(np.concatenate([np.linspace(0.0, t_knee, big + 1), np.linspace(t_knee, t_end, big + 1)]))
    md = pt.decay(i0, td)
    for piece, x in zip(pieces, (t0 + td, md, pt.off_terminal(md), np.zeros_like(td), np.zeros_like(td))):
        piece.append(x)
    return t0 + float(td[-1]), float(md[-1])


def _peak(drive: Drive, lp: Loop, peak_time: float, big: int):
    """The operating point's tables and the peak's ``big`` + 1 samples from zero flux:
    ``(point, magnetising current at the peak's end A, [time], [terminal], [magnetising],
    [switch_on])``; on a drooping bus (``supply.source_resistance``) the peak's closed
    form of :mod:`coildrive.model.supply` (a curve: :mod:`coildrive.model.flux_bus`'s
    run), from a boost (``supply.boost``, at its nominal) :mod:`coildrive.model.boost`'s (a
    curve: :mod:`coildrive.model.flux_boost`'s)."""
    e = lp.inductance[...]
    v, r_on = (float(np.ravel(x)[0]) for x in (lp.v_on, lp.r_on))
    tp = np.linspace(0.0, peak_time, big + 1)
    if drive.supply.boosted:
        s = drive.supply
        b = boost_model.boost(s.boost, s.boost_capacitance, r_on + s.boost_resistance, *boost_model.one_point(e))
        m = boost_model.of(b)
        mp, vp = m.state(tp, b)
        peak_end = float(mp[-1])
        return _Point(lp, peak_end), peak_end, [tp], [m.terminal(mp, vp, b)], [mp], [np.ones_like(tp)]
    if drive.supply.droops:
        s = drive.supply
        mag, r_e = e.magnetising, float(np.ravel(e.resistance)[0])
        if isinstance(mag, FluxCoil):   # a curve: the stepped run of model/flux_bus.py
            b = flux_bus.bus(v, s.source_resistance, s.capacitance, r_on,
                             mag.with_scale(float(np.ravel(mag.scale)[0])), r_e)
            mp, vp = flux_bus.state(tp, b)
        else:
            b = bus_model.bus(v, s.source_resistance, s.capacitance, r_on, float(np.ravel(mag)[0]), r_e)
            mp, vp = bus_model.state(tp, b)
        peak_end = float(mp[-1])
        return _Point(lp, peak_end), peak_end, [tp], [bus_model.terminal(mp, vp, b)], [mp], [np.ones_like(tp)]
    peak_end = float(np.ravel(eddy.rise_current(peak_time, 0.0, v, r_on, e))[0])
    pt = _Point(lp, peak_end)
    mp = pt.on.current(0.0, tp)
    mp[-1] = peak_end
    return pt, peak_end, [tp], [pt.on_terminal(mp)], [mp], [np.ones_like(tp)]


def _release_samples(pt: _Point, release: Loop | None, lead: float, t_cut: float, i_cut: float,
                     m_last: float, t_last: float, big: int, pieces) -> float:
    """Append the release from the final turn-off at ``t_cut`` s, ``i_cut`` A of
    magnetising current, to the sample pieces ``(time, magnetising, terminal, switch_on,
    fast)``; the last on-time lasted ``t_last`` s from ``m_last`` A. ``release``: split
    decay's fast loop (``None``: ``pt``'s own path), its bypass opening ``lead`` s before
    the turn-off (a sample there inside the last on-time) or ``-lead`` s after it (the
    slow path until then). Returns the time the terminal current reaches zero, s."""
    ts, ms, cs, ons, fasts = pieces
    if release is not None and 0.0 < lead < t_last:   # the bypass opens in the last on-time
        m_open = pt.on.current(m_last, t_last - lead)
        ts.append(np.array([t_cut - lead]))
        ms.append(np.array([m_open]))
        cs.append(np.atleast_1d(pt.on_terminal(m_open)))
        ons.append(np.ones(1))
        fasts.append(np.zeros(1))
    t_rel, i_rel, t_stop = t_cut, i_cut, None
    if release is not None and lead < 0:   # a late bypass: the slow path for -lead s first
        t_stop = min(-lead, float(pt.conduction(i_cut)))   # the slow path may block in the lag
        t_rel, i_rel = _freewheel_samples(pt, t_cut, i_cut, t_stop, -lead, big, pieces)
    pt = pt if release is None else _Point(release, i_rel)
    tz = float(pt.conduction(i_rel))
    _freewheel_samples(pt, t_rel, i_rel, tz, max(pt.time_to(i_rel, TAIL_FRACTION * i_cut), tz, 0.0), big,
                       pieces)
    # the terminal current stops where the fast path stops conducting, or (a late bypass
    # opening on a flux below the fast path's block current) where the slow path did
    return t_rel + tz if tz > 0 or t_stop is None else t_cut + t_stop


def actuation(drive: Drive, lp: Loop, peak_time: float, duty: float, frequency: float,
              hold_time: float, points: int, release: Loop | None = None, lead: float = 0.0):
    """The sample pieces of one actuation: ``(time, terminal current, magnetising
    current, switch_on, fast, t_off, t_zero)`` (s, A, A, 0/1 arrays, 1 in a mixed-decay
    hold's fast parts; the final turn-off and the time the terminal current reaches
    zero, s) through the loop ``lp`` of one
    operating point whose inductance is an :class:`~coildrive.model.eddy.EddyCoil`.
    ``release``: the loop of the release (split decay's fast path; ``None``: ``lp``'s),
    its bypass opening ``lead`` s before the final turn-off (a sample there when that is
    inside the last on-time; the pieces are then not in time order), or ``-lead`` s after
    it (the flux decaying through the slow path until then, and through ``R_e`` once
    that blocks)."""
    big = 40 * points
    pt, peak_end, ts, cs, ms, ons = _peak(drive, lp, peak_time, big)
    fasts = [np.zeros_like(ts[0])]
    period = 1.0 / frequency
    n = max(1, int(round(hold_time * frequency)))
    t_on, t_off = duty * period, (1.0 - duty) * period
    frac = np.linspace(0.0, 1.0, points + 1)
    t0 = peak_time + np.arange(n)[:, None] * period
    on_t = np.broadcast_to(frac[None, :] * t_on, (n, points + 1))
    if lp.mixed is not None:   # a full bridge's mixed decay: each off-time fast, then slow
        mixed = _Mixed(lp, pt, peak_end, t_off)
        starts = period_starts(pt.on.current, mixed.period_end, peak_end, n, t_on, t_off)
        on_m = pt.on.current(starts[:, None], on_t)
        off_t, off_m, off_c, fast_off = mixed.off_samples(on_m[:, -1], frac)
    else:
        starts = period_starts(pt.on.current, pt.decay, peak_end, n, t_on, t_off)
        on_m = pt.on.current(starts[:, None], on_t)
        tb = pt.conduction(on_m[:, -1])
        extra = np.where(tb < t_off, tb, t_off * (points - 0.5) / points)
        off_t = np.sort(np.concatenate([np.broadcast_to(frac[None, :] * t_off, (n, points + 1)),
                                        extra[:, None]], axis=1), axis=1)
        off_m = pt.decay(on_m[:, -1][:, None], off_t)
        off_c = pt.off_terminal(off_m)
        fast_off = np.zeros(off_t.shape)
    tops = on_m[:, -1]
    t_flat, on_flat, m_flat, c_flat, fast_flat = stitch_periods(
        t0, t_on, on_t, off_t, (on_m, off_m), (pt.on_terminal(on_m), off_c), (np.zeros_like(on_m), fast_off))
    ts.append(t_flat)
    ms.append(m_flat)
    cs.append(c_flat)
    ons.append(on_flat)
    fasts.append(fast_flat)
    t_cut = peak_time + (n - 1) * period + t_on
    t_zero = _release_samples(pt, release, lead, t_cut, float(tops[-1]), float(starts[-1]), t_on, big,
                              (ts, ms, cs, ons, fasts))
    return ts, cs, ms, ons, fasts, t_cut, t_zero


def threshold_actuation(drive: Drive, lp: Loop, peak_time: float, hold_time: float,
                        points: int, control: str, lower: float, upper: float,
                        off_time: float, delay: float, release: Loop | None = None,
                        lead: float = 0.0, fast_time: float = 0.0):
    """The sample pieces of one actuation with a current-mode hold and the last on-time's
    length: ``(pieces, s)``, the pieces those of :func:`actuation`: the peak, the hold of
    :func:`threshold_hold`, the release. ``release``/``lead``: split decay's fast loop and
    bypass lead, as in :func:`actuation` (the hold's off-times through ``lp``'s slow path,
    the release from the last turn-off through the fast one). A full bridge's mixed decay
    (``lp.mixed``): each off-time fast (all four open) for ``fast_time`` s, then slow."""
    big = 40 * points
    pt, peak_end, ts, cs, ms, ons = _peak(drive, lp, peak_time, big)
    fasts = [np.zeros_like(ts[0])]
    pieces = (ts, ms, cs, ons, fasts)
    mixed = _Mixed(lp, pt, peak_end, max(off_time, fast_time), fast_time) if lp.mixed is not None else None
    t, m, last = threshold_hold(pt, peak_time, peak_end, peak_time + hold_time, control, lower, upper,
                                off_time, delay, points, pieces, mixed)
    t_zero = _release_samples(pt, release, lead, t, m, last[0], last[1], big, pieces)
    return (ts, cs, ms, ons, fasts, t, t_zero), last[1]


def threshold_hold(pt: _Point, t: float, m: float, end: float, control: str, lower: float,
                   upper: float, off_time: float, delay: float, points: int,
                   pieces, mixed: _Mixed | None = None) -> tuple[float, float, list]:
    """A current-mode hold at one point ``pt`` from ``t`` s and ``m`` A of magnetising
    current (the end of the peak) until the first turn-off edge at or after ``end`` s,
    appended to the sample pieces ``(time, magnetising, terminal, switch_on, fast)``
    (the first off-time, down from the peak, in ``40 points`` samples). The controller
    compares the SENSED (terminal) current with its thresholds -- hysteretic: off when it
    reaches ``upper`` A, on again when it falls to ``lower`` A; ``"off_time"``: off at
    ``upper`` A for ``off_time`` s -- each edge ``delay`` s late. A threshold is a
    magnetising current that depends on the loop that conducts
    (:func:`coildrive.model.current_mode.sensed_threshold`). The terminal current steps
    at every edge (two samples at the edge's instant). Where the threshold is out of
    reach (or the band chatters) the switch stays on to ``end``. Returns ``(t_off s,
    magnetising current there A, [start of the last on-time's magnetising current A, its
    length s])`` (``[m, 0]`` without an on-time). ``mixed``: a full bridge's mixed decay,
    each off-time along its fast-then-slow path (:class:`_Mixed`; the fast part's
    samples flagged in ``fast``), the lower threshold met in either part."""
    ts, ms, cs, ons, fasts = pieces
    last = [m, 0.0]   # the latest on segment's start (magnetising A) and length (s)
    v, r_on = pt.v, pt.r_on
    m_hi = (r_on + pt.re) * upper / pt.re - v / pt.re
    m_lo = ((pt.r_off + pt.re) * lower + pt.v_off) / pt.re
    if mixed is not None:   # the off-time opens on the fast path: its sensed current first
        m_lo = ((mixed.fast.r_off + pt.re) * lower + mixed.fast.v_off) / pt.re
    top = pt.on.i[-1]
    regulated = upper < v / r_on and (m_lo < m_hi if control == "hysteretic" else m_hi > 0)
    first = True
    big = 40 * points
    frac = np.linspace(0.0, 1.0, points + 1)

    def on_for(t, m, dur):   # append an on segment of dur s from i_m = m A at t s
        last[:] = [m, dur]
        tu = frac * dur
        mu = pt.on.current(m, tu)
        ts.append(t + tu)
        ms.append(mu)
        cs.append(pt.on_terminal(mu))
        ons.append(np.ones_like(tu))
        fasts.append(np.zeros_like(tu))
        return t + dur, float(mu[-1])

    while regulated and t < end:
        n = big if first else points
        first = False
        if mixed is not None:
            dur = mixed.sensed_down_to(m, lower) + delay if control == "hysteretic" else off_time
            td, md, cd, fd = mixed.off_time_samples(m, dur, n)
        else:
            dur = (pt.time_to(m, m_lo) if m > m_lo else 0.0) + delay if control == "hysteretic" else off_time
            tb = float(pt.conduction(m))
            td = np.unique(np.concatenate([np.linspace(0.0, dur, n + 1), [tb] if tb < dur else []]))
            md = pt.decay(m, td)
            cd, fd = pt.off_terminal(md), np.zeros_like(td)
        ts.append(t + td)
        ms.append(md)
        cs.append(cd)
        ons.append(np.zeros_like(td))
        fasts.append(fd)
        t, m = t + dur, float(md[-1])
        dur = (float(pt.on.time_at(min(m_hi, top)) - pt.on.time_at(m)) if m < m_hi else 0.0) + delay
        if dur > 0:
            t, m = on_for(t, m, dur)
    if not regulated:   # the threshold is out of reach (or chatters): the switch stays on
        t, m = on_for(t, m, end - t)
    return t, m, last


def seated_hold(lp: Loop, t: float, m: float, end: float, control: str, lower: float, upper: float,
                off_time: float, delay: float, points: int, fast_time: float = 0.0):
    """:func:`threshold_hold` on one point's loop ``lp`` (an
    :class:`~coildrive.model.eddy.EddyCoil` inductance: a moving armature's seated coil)
    from ``t`` s and ``m`` A of magnetising current, as arrays: ``(time s, terminal A,
    magnetising A, switch_on, t_off s, magnetising current at t_off A, start of the last
    on-time s, all four open)`` (each edge two rows at the same time). A full bridge's
    mixed decay (``lp.mixed``): each off-time fast for ``fast_time`` s, then slow, as in
    :func:`threshold_actuation` (the last array flags the fast part's samples)."""
    pt = _Point(lp, m)
    pieces = ([], [], [], [], [])
    mixed = _Mixed(lp, pt, m, max(off_time, fast_time), fast_time) if lp.mixed is not None else None
    t_off, m_off, last = threshold_hold(pt, t, m, end, control, lower, upper, off_time, delay, points,
                                        pieces, mixed)
    ts, ms, cs, ons, fasts = (np.concatenate(x) if x else np.empty(0) for x in pieces)
    return ts, cs, ms, ons, t_off, m_off, t_off - last[1], fasts.astype(bool)
