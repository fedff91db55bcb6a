"""Several coils on one drooping bus: their peaks behind one source resistance, exact.

The circuit (a board's supply rail with ``n`` channels)::

    V_s ──R_s──┬── bus v(t) ──R_1──L_1── switch 1 ── 0 V
               C        ├─────R_2──L_2── switch 2 ── 0 V
               │        ...
              0 V

Coil ``k`` (loop ``R_k`` ohm: coil, switch, sense; ``L_k`` H) draws from the bus from its
switch-on ``on_k`` s to the end of its peak ``off_k`` s; after it, it freewheels in its own
loop and draws nothing from the bus (a diode, Zener or resistor path across the coil).
Between those moments the set of coils on the bus is fixed and the state
``x = (i_active..., v)`` obeys the linear system with constant input::

    L_k di_k/dt = v - R_k i_k            (each coil on the bus)
    C dv/dt     = (V_s - v)/R_s - sum i_k

so ``x(t) = x_ss + e^{A t} (x(0) - x_ss)``, evaluated through the eigen-decomposition of
``A`` (an ``(m + 1)``-square matrix; numpy's ``eig``). A coil leaves the state at its
peak's end and joins it at zero current. One coil is the 2x2 system of
:mod:`coildrive.model.supply`, which the tests compare. :func:`lowest_bus_pwm` keeps the
coils in the state after their peaks too: each PWM on-time of the shared timer puts a
coil back on the bus, and while off it freewheels in its own loop down to zero.
:func:`on_bus` runs every channel's whole actuation on the bus (:class:`BusRun`): a coil
with an eddy resistance across it keeps its magnetising current in the state (still
linear), and a full bridge's fast decay returns its current into the bus until its
diodes block (a mixed-decay hold's fast parts too, each to its scheduled end). A
current-mode hold (:class:`ThresholdRun`) switches on its comparator's thresholds: its
edges are events found on the coupled closed form. Units A, V, ohm, H, F, s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .rl import decay_time
from .shared_pwm import HOLD_OFF, ON, RELEASE

#: Samples of each piece between two switching moments where the lowest bus is looked for
#: (then refined to the sample's neighbours by golden section).
PIECE_SAMPLES = 2000
#: Golden-section steps of the refinement (the bracket shrinks 0.618^60).
GOLDEN_STEPS = 60


def _on_matrix(r_s, c, r, l, share=None):
    """``A`` of the coils ``r``, ``l`` on the bus (the bus last). ``share`` per coil: ``g =
    R_e/(R + R_e)`` with an eddy resistance ``R_e`` across its magnetising branch (1 without):
    its state is the magnetising current ``i_m``, the terminal current ``(v + R_e i_m)/(R +
    R_e) = g i_m + (1 - g) v/R`` the bus feeds, and ``L di_m/dt = g (v - R i_m)``."""
    m = len(r)
    g = np.ones(m) if share is None else np.asarray(share, float)
    a = np.zeros((m + 1, m + 1))
    for k in range(m):
        a[k, k] = -g[k] * r[k] / l[k]
        a[k, m] = g[k] / l[k]
        a[m, k] = -g[k] / c
        a[m, m] -= (1.0 - g[k]) / (r[k] * c)
    a[m, m] -= 1.0 / (r_s * c)
    return a


def _piece(v_s, r_s, c, r, l, share=None):
    """``(eigenvalues, eigenvectors, their inverse, steady state)`` of the system with the
    coils ``r``, ``l`` (arrays, possibly empty; ``share``: :func:`_on_matrix`'s) on the bus.
    At the steady state each magnetising current is ``v/R`` (the inductance a short across
    any eddy resistance)."""
    m = len(r)
    a = _on_matrix(r_s, c, r, l, share)
    lam, vec = np.linalg.eig(a)
    # steady state: v = V_s / (1 + R_s sum 1/R_k), i_k = v / R_k
    v_ss = v_s / (1.0 + r_s * float(np.sum(1.0 / np.asarray(r)))) if m else v_s
    x_ss = np.append(v_ss / np.asarray(r, float), v_ss)
    return lam, vec, np.linalg.inv(vec), x_ss


def _evaluate(piece, x0, t):
    lam, vec, inv, x_ss = piece
    coef = inv @ (x0 - x_ss)
    return (x_ss[:, None] + (vec @ (coef[:, None] * np.exp(np.outer(lam, t))))).real


def lowest_bus(v_s: float, r_s: float, c: float, r, l, on, off) -> tuple[float, float]:
    """``(lowest bus V, when s)`` from the first switch-on to the last peak's end, with
    coil ``k`` (loop ``r[k]`` ohm, ``l[k]`` H) on the bus from ``on[k]`` to ``off[k]`` s
    (module docstring). Exact between switching moments: the lowest of
    :data:`PIECE_SAMPLES` samples of each piece, refined by golden section."""
    r, l, on, off = (np.asarray(x, float) for x in (r, l, on, off))
    moments = np.unique(np.concatenate([on, off]))
    x = {}                       # coil index -> current, plus the bus
    v = float(v_s)
    best = (v, float(moments[0]))
    for a_t, b_t in zip(moments[:-1], moments[1:]):
        active = [k for k in range(len(r)) if on[k] <= a_t < off[k]]
        for k in active:
            x.setdefault(k, 0.0)
        piece = _piece(v_s, r_s, c, r[active], l[active])
        x0 = np.array([x[k] for k in active] + [v])
        span = b_t - a_t
        t = np.linspace(0.0, span, PIECE_SAMPLES)
        bus = _evaluate(piece, x0, t)[-1]
        j = int(np.argmin(bus))
        lo, hi = t[max(j - 1, 0)], t[min(j + 1, len(t) - 1)]
        g = (np.sqrt(5.0) - 1.0) / 2.0
        for _ in range(GOLDEN_STEPS):     # the bus is smooth and unimodal next to its sample minimum
            m1, m2 = hi - g * (hi - lo), lo + g * (hi - lo)
            f1, f2 = _evaluate(piece, x0, np.array([m1, m2]))[-1]
            lo, hi = (lo, m2) if f1 <= f2 else (m1, hi)
        t_min = 0.5 * (lo + hi)
        v_min = float(_evaluate(piece, x0, np.array([t_min]))[-1, 0])
        v_min, t_min = min((v_min, t_min), (float(bus[j]), float(t[j])))
        if v_min < best[0]:
            best = (v_min, a_t + t_min)
        end = _evaluate(piece, x0, np.array([span]))[:, 0]
        for n, k in enumerate(active):
            x[k] = float(end[n])
        v = float(end[-1])
        for k in [k for k in x if off[k] <= b_t]:
            del x[k]
    return best


def _system(v_s, r_s, c, modes, r, l, v_off):
    """``(A, b)`` of ``x' = A x + b`` for the coils in ``modes`` (``"on"``: on the bus
    through ``r`` ohm; ``"off"``: freewheeling in its own loop, ``r`` ohm against
    ``v_off`` V) and the bus, last."""
    m = len(modes)
    a = np.zeros((m + 1, m + 1))
    b = np.zeros(m + 1)
    for k, mode in enumerate(modes):
        a[k, k] = -r[k] / l[k]
        if mode == "on":
            a[k, m] = 1.0 / l[k]
            a[m, k] = -1.0 / c
        else:
            b[k] = -v_off[k] / l[k]
    a[m, m] = -1.0 / (r_s * c)
    b[m] = v_s / (r_s * c)
    return a, b


def lowest_bus_pwm(v_s: float, r_s: float, c: float, r_on, r_off, v_off, l, on, peak_end, duty,
                   period: float, t_end: float, step: float = 2e-6) -> tuple[float, float]:
    """``(lowest bus V, when s)`` from 0 to ``t_end`` s with every coil's peak *and* its PWM
    hold on the bus: coil ``k`` (loop ``r_on[k]`` ohm on, ``r_off[k]`` ohm against
    ``v_off[k]`` V freewheeling, ``l[k]`` H) is switched on at ``on[k]`` s, held on to
    ``peak_end[k]`` s, then on from each period start of the shared timer (multiples of
    ``period`` s) for ``duty[k]`` of it and freewheeling in its own loop (off the bus)
    for the rest, stopping at zero (the diode blocks). Exact between switching moments
    (a switch-on, a peak end, a timer edge, a freewheel current reaching zero, found in
    closed form since a freewheeling coil is decoupled from the bus): each piece is
    sampled every ``step`` s and the lowest sample's piece refined by golden section.
    Units A, V, ohm, H, F, s."""
    r_on, r_off, v_off, l, on, peak_end, duty = (np.asarray(x, float) for x in
                                                  (r_on, r_off, v_off, l, on, peak_end, duty))
    n = len(l)
    edges = [np.arange(0.0, t_end + period, period)]
    edges += [np.arange(0.0, t_end + period, period) + d * period for d in duty]
    moments = np.concatenate([on, peak_end, [t_end], *edges])
    moments = np.unique(moments[(moments >= 0.0) & (moments <= t_end)])
    cur = np.zeros(n)
    v = float(v_s)
    t = 0.0
    best = (v, 0.0, None)
    j = 0
    while t < t_end - 1e-15:
        while j < len(moments) and moments[j] <= t + 1e-15:
            j += 1
        nxt = moments[j] if j < len(moments) else t_end
        mid = 0.5 * (t + nxt)
        modes, idx = [], []
        for k in range(n):
            if mid < on[k]:
                continue
            if mid < peak_end[k] or (mid % period) < duty[k] * period:
                modes.append("on")
            elif cur[k] > 0.0:
                modes.append("off")
            else:
                continue
            idx.append(k)
        # a freewheeling current reaches zero: i(t) = -V/R + (i0 + V/R) exp(-t R/L)
        for mode, k in zip(modes, idx):
            if mode == "off" and v_off[k] > 0.0:
                t_zero = l[k] / r_off[k] * np.log1p(cur[k] * r_off[k] / v_off[k])
                nxt = min(nxt, t + t_zero)
        rr = np.array([r_on[k] if m_ == "on" else r_off[k] for m_, k in zip(modes, idx)])
        a, b = _system(v_s, r_s, c, modes, rr, l[idx], v_off[idx])
        lam, vec = np.linalg.eig(a)
        inv = np.linalg.inv(vec)
        x_ss = np.linalg.solve(a, -b)
        x0 = np.append(cur[idx], v)
        piece = (lam, vec, inv, x_ss)
        span = nxt - t
        ts = np.linspace(0.0, span, max(3, int(np.ceil(span / step)) + 1))
        bus = _evaluate(piece, x0, ts)[-1]
        k_min = int(np.argmin(bus))
        if bus[k_min] < best[0]:
            best = (float(bus[k_min]), t + float(ts[k_min]), (piece, x0, t, ts, k_min))
        end = _evaluate(piece, x0, np.array([span]))[:, 0]
        for p, k in enumerate(idx):
            cur[k] = float(end[p])
            if modes[p] == "off" and cur[k] < 1e-12:   # reached zero at the piece's end: the diode blocks
                cur[k] = 0.0
        v = float(end[-1])
        t = nxt
    if best[2] is None:
        return best[0], best[1]
    piece, x0, t0, ts, k_min = best[2]
    lo, hi = ts[max(k_min - 1, 0)], ts[min(k_min + 1, len(ts) - 1)]
    g = (np.sqrt(5.0) - 1.0) / 2.0
    for _ in range(GOLDEN_STEPS):
        m1, m2 = hi - g * (hi - lo), lo + g * (hi - lo)
        f1, f2 = _evaluate(piece, x0, np.array([m1, m2]))[-1]
        lo, hi = (lo, m2) if f1 <= f2 else (m1, hi)
    t_min = 0.5 * (lo + hi)
    v_min = float(_evaluate(piece, x0, np.array([t_min]))[-1, 0])
    if v_min < best[0]:
        return v_min, t0 + t_min
    return best[0], best[1]


@dataclass(frozen=True)
class BusRun:
    """One channel as :func:`on_bus` switches it: its segments' start times ``start`` (s)
    and kinds ``kind`` (:mod:`coildrive.model.shared_pwm`'s ``ON``, ``HOLD_OFF``,
    ``RELEASE``), the on-loop's ``r_on`` ohm, the hold's off path ``r_off`` ohm against
    ``v_off`` V, the release path's ``r_rel`` ohm against ``v_rel`` V (paths across the
    coil), the (magnetising) inductance ``ind`` H and an eddy resistance across it
    ``r_eddy`` ohm (``inf``: none). ``returns``: the release returns the current into the
    bus (a full bridge's fast decay through two body diodes: ``L di/dt = -(v + v_rel) -
    r_rel i``, ``v_rel`` the two diode drops, the capacitor taking ``+i``) until it is
    zero, where the diodes block; a ``RELEASE`` segment before a later one is a mixed-decay
    hold's fast part, all four switches open, the same path."""

    start: np.ndarray
    kind: np.ndarray
    r_on: float
    r_off: float
    v_off: float
    r_rel: float
    v_rel: float
    ind: float
    r_eddy: float = math.inf
    returns: bool = False

    @classmethod
    def of(cls, run) -> "BusRun":
        """A plain coil's :class:`~coildrive.model.shared_pwm.ChannelRun` on the bus."""
        return cls(run.start, run.kind, run.r_on, run.r_off, run.v_off, run.r_rel, run.v_rel, run.ind)

    def segments(self) -> tuple[np.ndarray, np.ndarray]:
        """``(start s, kind)`` of its segments as switched so far (fixed here: the timer's
        and the peak's moments)."""
        return np.asarray(self.start, float), np.asarray(self.kind)

    def kind_at(self, t, side: str = "left") -> np.ndarray:
        """The segment's kind at the times ``t`` (s; a time at a switching moment: the one
        before it, as :func:`on_bus`'s samples, or with ``side="right"`` the one after);
        -1 before the switch-on."""
        start, kind = self.segments()
        k = np.searchsorted(start, np.asarray(t, float), side=side) - 1
        return np.where(k >= 0, kind[np.clip(k, 0, None)], -1)

    @property
    def share(self) -> float:
        """``R_e/(R_on + R_e)`` (1 without an eddy term)."""
        return 1.0 if math.isinf(self.r_eddy) else self.r_eddy / (self.r_on + self.r_eddy)

    def decay(self, i0: float, r_p: float, v_p: float, dt) -> tuple[np.ndarray, np.ndarray]:
        """``(magnetising, terminal)`` currents (A) ``dt`` s into a freewheel through the
        path ``r_p`` ohm against ``v_p`` V from ``i0`` A (closed form: the path does not see
        the bus). Without an eddy term the plain decay, held at zero. With ``R_e``: while the
        path conducts (``R_e i_m > v_p``) ``L di_m/dt = -g (R_p i_m + v_p)`` (``g = R_e/(R_p +
        R_e)``), the terminal current ``(R_e i_m - v_p)/(R_p + R_e)``; from ``i_m = v_p/R_e``
        the diode blocks and the flux's current decays through ``R_e`` alone, ``L di_m/dt =
        -R_e i_m``, the terminal current 0."""
        dt = np.asarray(dt, float)
        if math.isinf(self.r_eddy):
            x = np.maximum((i0 + v_p / r_p) * np.exp(-dt * r_p / self.ind) - v_p / r_p, 0.0)
            return x, x
        r_e = self.r_eddy
        g = r_e / (r_p + r_e)
        block = v_p / r_e
        if i0 > block:
            t_b = self.ind / (g * r_p) * math.log((i0 + v_p / r_p) / (block + v_p / r_p))
            live = (i0 + v_p / r_p) * np.exp(-dt * g * r_p / self.ind) - v_p / r_p
        else:
            t_b, live = 0.0, np.full(dt.shape, i0)
        start = min(i0, block)
        x = np.where(dt < t_b, live, start * np.exp(-np.maximum(dt - t_b, 0.0) * r_e / self.ind))
        return x, np.where(dt < t_b, np.maximum((r_e * x - v_p) / (r_p + r_e), 0.0), 0.0)


@dataclass(frozen=True)
class ThresholdRun(BusRun):
    """A linear coil on one switch under a current-mode hold, as :func:`on_bus` switches
    it: its switching depends on the bus, so its segments are found as it runs (``log``:
    ``start``, ``kind`` and the ``next`` scheduled edge ``(s, kind)``). On at ``start[0]``
    for the peak to ``peak_end`` s, then (as
    :func:`coildrive.design.hold_current.threshold_hold` on a stiff supply) off --
    ``control`` ``"hysteretic"``: until the current has decayed to ``lower`` A and
    ``delay`` s more (closed form: the freewheel does not see the bus); ``"off_time"``:
    ``off_time`` s -- then on until the current reaches ``upper`` A (a root of the coupled
    closed form, :func:`_crossing`) and ``delay`` s more, the comparator's delay (on for
    the delay alone when the current is at or above ``upper`` already); the hold ends at
    the first turn-off at or after ``hold_end`` s, then ``slow`` s on the hold's path (split
    decay's late bypass) and the release path. Where ``upper`` is at or above
    ``v_on/r_on`` the switch stays on to ``hold_end``."""

    control: str = "hysteretic"
    lower: float = 0.0
    upper: float = 0.0
    off_time: float = 0.0
    delay: float = 0.0
    peak_end: float = 0.0
    hold_end: float = 0.0
    v_on: float = 0.0
    slow: float = 0.0
    log: dict = field(default_factory=dict)

    def __post_init__(self):
        reach = self.upper < self.v_on / self.r_on
        first = self.peak_end if reach and self.hold_end > self.peak_end else self.hold_end
        self.log.update(start=[float(self.start[0])], kind=[ON], next=(first, HOLD_OFF))

    def segments(self) -> tuple[np.ndarray, np.ndarray]:
        return np.asarray(self.log["start"], float), np.asarray(self.log["kind"])

    @property
    def next_edge(self) -> float:
        """The scheduled switching moment (s; ``inf``: none)."""
        return math.inf if self.log["next"] is None else self.log["next"][0]

    def waiting(self) -> bool:
        """On in the hold, its turn-off not yet found (the upper threshold ahead)."""
        return self.log["next"] is None and self.log["kind"][-1] == ON

    def found(self, when: float) -> None:
        """The current reached ``upper`` at ``when`` s: off ``delay`` s later."""
        self.log["next"] = (when + self.delay, HOLD_OFF)

    def switch(self, t: float, i: float) -> None:
        """Take the scheduled edge at ``t`` s, the coil at ``i`` A, and schedule the next."""
        start, kind = self.log["start"], self.log["kind"]
        new = self.log["next"][1]
        self.log["next"] = None
        if new == RELEASE:            # split decay's bypass opens
            start.append(t), kind.append(RELEASE)
            return
        if new == ON and not (i >= self.upper and self.delay <= 0.0):
            start.append(t), kind.append(ON)
            if i >= self.upper:       # tripped at once: on for the comparator's delay
                self.found(t)
            return
        # a turn-off, or an on-edge tripped at once without a delay (no on-time)
        if t >= self.hold_end:        # the final turn-off
            if self.slow > 0.0:
                start.append(t), kind.append(HOLD_OFF)
                self.log["next"] = (t + self.slow, RELEASE)
            else:
                start.append(t), kind.append(RELEASE)
            return
        start.append(t), kind.append(HOLD_OFF)
        off = (max(float(decay_time(self.lower, i, self.r_off, self.v_off, self.ind)), 0.0) + self.delay
               if self.control == "hysteretic" else self.off_time)
        self.log["next"] = (t + off, ON)


def _crossing(args, row: int, level: float, span: float) -> float | None:
    """The first time (s, within ``span``) the state's component ``row`` of :func:`_solve`
    with ``args`` (all but its times) reaches ``level`` (a coil's current rising to its threshold), or ``None``:
    :data:`CROSSING_SAMPLES` samples of the closed form bracket it, scipy's brentq finds it."""
    from scipy.optimize import brentq

    s = np.linspace(0.0, span, CROSSING_SAMPLES)
    x = _solve(*args[:6], s, *args[6:])[row]
    up = np.flatnonzero(x >= level)
    if len(up) == 0:
        return None
    if up[0] == 0:
        return 0.0
    return brentq(lambda u: float(_solve(*args[:6], np.array([u]), *args[6:])[row, 0]) - level, s[up[0] - 1], s[up[0]],
                  xtol=1e-15, rtol=1e-14)


#: Samples of a piece where a rising current is looked for at its threshold (then brentq
#: between the samples that bracket it).
CROSSING_SAMPLES = 64

#: Largest condition number of a piece's eigenvector matrix evaluated through the
#: eigen-decomposition; past it (nearly equal but unequal time constants) each sample is
#: the matrix exponential itself (scipy.linalg.expm), slower but exact to rounding.
EIG_CONDITION = 1e8


def on_bus(v_s: float, r_s: float, c: float, runs, t) -> tuple[np.ndarray, np.ndarray]:
    """``(currents, bus)``: the channels' coil currents (A, one row per run; the terminal
    current with an eddy term) and the bus (V) at the times ``t`` (s, ascending), each
    channel switched as its :class:`BusRun` says (its switching moments are the timer's
    and its peak's: they do not depend on the bus; a :class:`ThresholdRun`'s are its
    comparator's, found as the pieces run: its scheduled edges split the pieces, and
    while it waits for its upper threshold the first crossing in a piece, a root of the
    closed form (:func:`_crossing`), plus its delay, ends it) but fed from the bus ``v(t)`` behind
    ``r_s`` ohm and ``c`` F from ``v_s`` V instead of a stiff one. While its switch
    conducts a coil is on the bus (``L di/dt = v - R_on i``; with an eddy term
    :func:`_on_matrix`'s magnetising current); in its hold's off-times and its release it
    freewheels in its own loop (a path across the coil: a diode, a Zener or a resistor)
    and draws nothing, down to zero and held there (closed form: the path does not see
    the bus; :meth:`BusRun.decay`). Between two switching moments of any channel
    the coils on the bus and the capacitor are the linear system of the module docstring,
    solved exactly through its eigen-decomposition (or the matrix exponential where that
    is ill-conditioned, :data:`EIG_CONDITION`). The bus starts at ``v_s`` (the capacitor
    charged), every coil at zero before its run's start; a sample at a switching moment
    has the value just before it (a step, with an eddy term, comes after it), but at a
    run's own switch-on the value after it (its first)."""
    t = np.asarray(t, float)
    n = len(runs)
    cur = np.zeros((n, len(t)))
    bus = np.full(len(t), float(v_s))
    moments = np.unique(np.concatenate([r.segments()[0] for r in runs] + [[t[-1]]]))
    moments = moments[moments <= t[-1]]
    gated = [k for k, r in enumerate(runs) if isinstance(r, ThresholdRun)]
    state = np.zeros(n)            # each coil's (magnetising) current at the piece's start
    after = np.zeros(n)            # its terminal current at the last piece's end
    v = float(v_s)
    pieces = list(zip(moments[:-1], moments[1:]))
    while pieces:
        a_t, b_t = pieces.pop(0)
        # a current-mode channel's scheduled edge inside the piece ends it there
        cut = min([runs[k].next_edge for k in gated if a_t < runs[k].next_edge < b_t], default=b_t)
        if cut < b_t:
            pieces.insert(0, (cut, b_t))
            b_t = cut
        # the piece's samples after its start up to its end (a sample at a switching moment
        # has the value before it: an eddy term's terminal current steps there), then its end
        lo, hi = np.searchsorted(t, a_t, side="right"), np.searchsorted(t, b_t, side="right")
        dt = np.append(t[lo:hi] - a_t, b_t - a_t)
        active, off, back = [], [], []
        for k, r in enumerate(runs):
            start, kinds = r.segments()
            if a_t < start[0]:
                continue
            kind = kinds[np.searchsorted(start, a_t, side="right") - 1]
            if kind == ON:
                active.append(k)
            elif kind == RELEASE and r.returns:
                if state[k] > 0.0:       # into the bus until the diodes block at zero
                    back.append(k)
                else:
                    cur[k, lo:hi], state[k], after[k] = 0.0, 0.0, 0.0
            else:
                path = (r.r_off, r.v_off) if kind == HOLD_OFF else (r.r_rel, r.v_rel)
                off.append((k, path))
        if back:
            # the first of the returning currents to reach zero ends the piece there
            returning = [(runs[k].r_rel, runs[k].ind, runs[k].v_rel) for k in back]
            x0 = np.concatenate([state[active], state[back], [v]])
            args = (v_s, r_s, c, [runs[k].r_on for k in active], [runs[k].ind for k in active],
                    x0, [runs[k].share for k in active], returning)
            ends = _solve(*args[:5], x0, np.array([b_t - a_t]), args[6], returning)[len(active):-1, 0]
            if np.any(ends <= 0.0):
                when = min(_first_zero(args, len(active) + p, b_t - a_t) for p in np.flatnonzero(ends <= 0.0))
                pieces.insert(0, (a_t + when, b_t))
                b_t = a_t + when
                hi = np.searchsorted(t, b_t, side="right")
                dt = np.append(t[lo:hi] - a_t, b_t - a_t)
        waiting = [p for p, k in enumerate(active) if k in gated and runs[k].waiting()]
        if waiting:
            # a current-mode channel's current reaching its threshold: the first within the
            # piece ends it (after the comparator's delay); a crossing after that end is not
            # yet known (the piece's end changes the circuit)
            args = (v_s, r_s, c, [runs[k].r_on for k in active], [runs[k].ind for k in active],
                    np.concatenate([state[active], state[back], [v]]), [runs[k].share for k in active],
                    [(runs[k].r_rel, runs[k].ind, runs[k].v_rel) for k in back])
            found = [(p, _crossing(args, p, runs[active[p]].upper, b_t - a_t)) for p in waiting]
            found = [(p, s) for p, s in found if s is not None]
            edge = min([a_t + s + runs[active[p]].delay for p, s in found], default=b_t)
            if edge < b_t:
                pieces.insert(0, (edge, b_t))
                b_t = edge
                hi = np.searchsorted(t, b_t, side="right")
                dt = np.append(t[lo:hi] - a_t, b_t - a_t)
            for p, s in found:
                if a_t + s <= b_t:
                    runs[active[p]].found(a_t + s)
        for k, (r_p, v_p) in off:
            x, terminal = runs[k].decay(state[k], r_p, v_p, dt)
            cur[k, lo:hi], state[k], after[k] = terminal[:-1], x[-1], terminal[-1]
        share = [runs[k].share for k in active]
        r_on = [runs[k].r_on for k in active]
        if active or back:
            xs = _solve(v_s, r_s, c, r_on, [runs[k].ind for k in active],
                        np.concatenate([state[active], state[back], [v]]), dt, share,
                        [(runs[k].r_rel, runs[k].ind, runs[k].v_rel) for k in back])
        else:                       # the capacitor recharges through R_s alone
            xs = (v_s + (v - v_s) * np.exp(-dt / (r_s * c)))[None, :]
        for p, k in enumerate(back):
            x = np.maximum(xs[len(active) + p], 0.0)
            x[-1] = x[-1] if x[-1] > 1e-9 * max(state[k], 1e-300) else 0.0    # stopped at the piece's end
            cur[k, lo:hi], state[k], after[k] = x[:-1], x[-1], x[-1]
        for p, k in enumerate(active):
            terminal = share[p] * xs[p] + (1.0 - share[p]) * xs[-1] / r_on[p]
            cur[k, lo:hi], state[k], after[k] = terminal[:-1], xs[p, -1], terminal[-1]
            if a_t == runs[k].segments()[0][0] and lo > 0 and t[lo - 1] == a_t:
                # a run's own switch-on sample: the step there is its first value (a
                # waveform's first row), from zero
                cur[k, lo - 1] = (1.0 - share[p]) * v / r_on[p]
        bus[lo:hi], v = xs[-1, :-1], float(xs[-1, -1])
        for k in gated:
            while runs[k].next_edge == b_t:
                runs[k].switch(b_t, after[k])
    last = t >= moments[-1]
    bus[last] = v
    cur[:, last] = after[:, None]
    return cur, bus


def _first_zero(args, row: int, span: float) -> float:
    """When (s, within ``span``) the state's component ``row`` of :func:`_solve` with
    ``args`` first reaches zero: a returning current, which only falls (``L di/dt = -(v +
    v_rel) - r_rel i < 0``), so it is bracketed by the piece (scipy's brentq on the closed
    form)."""
    from scipy.optimize import brentq

    def at(s):
        return float(_solve(*args[:5], args[5], np.array([s]), args[6], args[7])[row, 0])
    return brentq(at, 0.0, span, xtol=1e-15, rtol=1e-14)


def _with_returns(a, b, r_s, c, back):
    """``(A, b)`` with coils returning into the bus appended before it (``back``: ``(r_rel
    ohm, L H, v_rel V)`` each; :class:`BusRun`'s ``returns``)."""
    m = a.shape[0] - 1
    n = m + len(back)
    big = np.zeros((n + 1, n + 1))
    big[:m, :m], big[:m, n], big[n, :m], big[n, n] = a[:m, :m], a[:m, m], a[m, :m], a[m, m]
    bb = np.zeros(n + 1)
    bb[:m], bb[n] = b[:m], b[m]
    for j, (r_p, l_p, v_p) in enumerate(back):
        big[m + j, m + j] = -r_p / l_p
        big[m + j, n] = -1.0 / l_p
        big[n, m + j] = 1.0 / c
        bb[m + j] = -v_p / l_p
    return big, bb


def _solve(v_s, r_s, c, r, l, x0, dt, share=None, back=()) -> np.ndarray:
    """The state ``(i..., returning i..., v)`` of the coils ``r``, ``l`` (``share``:
    :func:`_on_matrix`'s) on the bus, and of the coils ``back`` returning into it
    (:func:`_with_returns`), from ``x0`` after each of the times ``dt`` (s): rows per state,
    columns per time."""
    if back:
        a = _on_matrix(r_s, c, r, l, share)
        b = np.zeros(a.shape[0])
        b[-1] = v_s / (r_s * c)
        a, b = _with_returns(a, b, r_s, c, back)
        lam, vec = np.linalg.eig(a)
        piece = (lam, vec, np.linalg.inv(vec), np.linalg.solve(a, -b))
    else:
        piece = _piece(v_s, r_s, c, r, l, share)
    if np.linalg.cond(piece[1]) <= EIG_CONDITION:
        out = _evaluate(piece, x0, dt)
        out[:, dt == 0.0] = np.asarray(x0, float)[:, None]     # the start itself, not rounded
        return out
    from scipy.linalg import expm

    a = _on_matrix(r_s, c, r, l, share)
    b = np.zeros(a.shape[0])
    b[-1] = v_s / (r_s * c)
    if back:
        a, b = _with_returns(a, b, r_s, c, back)
    m = len(x0)
    aug = np.zeros((m + 1, m + 1))
    aug[:m, :m], aug[:m, m] = a, b
    return np.column_stack([(expm(aug * s) @ np.append(x0, 1.0))[:m] for s in dt])
