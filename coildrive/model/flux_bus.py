"""A saturating coil's peak on the drooping bus: the circuit of :mod:`coildrive.model.supply`
with the flux-linkage curve of :mod:`coildrive.model.flux` in place of ``L``::

    dpsi/dt = L_d(i) di/dt = v - R i
    C dv/dt = (V_s - v)/R_s - i              i(0) = 0, v(0) = V_s

(``V_s`` V the source, ``R_s`` ohm its resistance, ``C`` F the bulk capacitor, ``R`` ohm the
loop, ``L_d(i) = dpsi/di`` H the curve's incremental inductance.) No closed form: two
coupled states and a nonlinear coil. Time is stepped, once per design for every corner
together, and the record answers every question (time to a current, the state at a
time, the lowest bus over a peak) by cubic Hermite interpolation between its steps.

How it is stepped, and why:

* **Exponential time differencing** (ETDRK4, Cox & Matthews, J. Comput. Phys. 176 (2002)
  430, their eq. 26). The bus relaxes through ``R_s C``, which on a stiff source (a few
  mohm, a few hundred uF) is far shorter than the coil's rise: an explicit Runge-Kutta
  step would have to follow it. The bus is stepped as its departure from the
  capacitor-less bus, ``w = v - (V_s - R_s i)``: ``dw/dt = -w/(R_s C) + R_s di/dt`` and
  ``L_d di/dt = V_s - (R + R_s) i + w``. ETDRK4 takes ``w``'s own decay exactly (the
  ``phi`` functions below) and the rest at fourth order; on the current (no linear
  part) it is the classical fourth-order Runge-Kutta method. ``w`` is small where
  ``R_s C`` is short (it follows the smooth ``R_s di/dt``), so a step far longer than
  ``R_s C`` stays accurate there (stepping the bus itself, the error of its large,
  slaved value fell to first order in that limit).
* **Events at the table's points.** ``L_d`` is the PCHIP interpolant's derivative: a
  quadratic on each table piece whose slope jumps at the points, so a step across a
  point is only second-order accurate there. Each step uses one piece's polynomial
  throughout (the piece the current starts in, continued smoothly); where the current
  leaves the piece in a step, the cubic Hermite interpolant of the step locates the
  crossing, the step is taken again up to it and the rest of it with the next piece.
  Every step is then smooth and the whole run is fourth order (measured in
  tests/test_flux_droop.py).
* **Steps.** Uniform in two stretches (:func:`_phases`): the rise, finely, then -- only
  when a question needs it -- on to within ``e^-25`` of the steady current ``V_s/(R +
  R_s)`` at the fastest time constant's pace. Hand-written, not scipy's ``solve_ivp``:
  one fixed grid serves every corner in one pass (no per-point calls, no scipy import on
  the design's path), and ETDRK4 is not among scipy's methods.

**A capacitor with no source** (:func:`capacitor`: a boost capacitor charged to ``V_b``
discharging into the coil, :mod:`coildrive.model.flux_boost`)::

    L_d(i) di/dt = v - R i,    C dv/dt = -i,    i(0) = 0, v(0) = V_b

is the same stepper with the source's terms taken out: the bus is stepped as itself
(``w = v``, no decay of its own, so ETDRK4's weights are those of the classical
fourth-order Runge-Kutta method on both states), and its rate is ``-i/C``. Its
stretches (:func:`_phases`) come from the linear series RLC circuit at the curve's
largest incremental inductance below ``V_b/R`` (:func:`coildrive.model.rlc.first_peak`):
the rise to the first current maximum, then as long again and more.

The current is the coil current (the step response of this passive circuit rises to its
first maximum; the record holds the whole horizon, so a later crossing is found too).

With an eddy-current term (a resistance ``R_e`` across the magnetising branch,
:mod:`coildrive.model.eddy`; ``g_e = 1/R_e``) the state is the magnetising current ``i_m``
and the bus, as in :mod:`coildrive.model.supply`: the branch sees the loop's Thevenin
pair and the bus feeds the terminal current ``k (i_m + g_e v)``, ``k = R_e/(R + R_e)``::

    L_d(i_m) di_m/dt = k (v - R i_m)
    C dv/dt          = (V_s - v)/R_s - k (i_m + g_e v)        i_m(0) = 0, v(0) = V_s

With ``a = 1 + k g_e R_s`` this is, term for term, the plain circuit above with the
source ``V_s/a``, its resistance ``k R_s/a``, the capacitor ``C/k`` and the curve scaled
by ``1/k`` (divide the first line by ``k``; the second is ``(C/k) dv/dt = (V_s/a - v)/(k
R_s/a) - i_m``), the same loop ``R`` and the same bus ``v``; only the start differs: the
capacitor holds ``V_s``, above that circuit's source ``V_s/a`` (the terminal current's
switch-on step ``V_s/(R + R_e)`` draws it down at once through ``R_s C/a``). So the same
stepper runs it, from ``w(0) = V_s - V_s/a`` (:func:`bus`), with a first stretch of
:data:`SETTLE_STEPS` steps over that transient (:func:`_phases`, as
:mod:`coildrive.model.flux_bus_decay` starts off the slaved bus too). The steady current
is the same ``V_s/(R + R_s)`` (the branch is a short at DC), and ``R_e -> inf`` (``k = a =
1``) is the plain circuit. The record's current is then the magnetising current
(:func:`terminal` the coil's).

All functions broadcast over numpy arrays; units are A, V, ohm, H, Wb, F, s.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import rlc
from .flux import FluxCoil
# the coil's terminal current k (i_m + g_e v) from a bus's g_e and r: the same for this one
from .supply import terminal  # noqa: F401

#: Least number of time steps after the rise.
STEPS = 300
#: Steps over the rise (:func:`_phases`).
RISE_STEPS = 500
#: The rise's length in secant time constants (:func:`_phases`): most peaks end inside it.
RISE_SPAN = 8.0
#: Most time steps after the rise (a horizon that asks for more takes longer steps: the accuracy stays
#: 4th order, the constant grows).
MAX_STEPS = 3000
#: Steps per fastest coil time constant and per LC ringing period.
PER_TIME_CONSTANT = 10
#: The horizon's time constants past the rise (:func:`_phases`).
HORIZON = 25.0
#: A step is split at most this many times (at most this many table points crossed).
SPLITS = 6
#: With an eddy term, the first stretch: :data:`SETTLE_STEPS` steps over ``SETTLE`` times
#: the bus's own ``R_s C / a`` (at most a tenth of the rise; module docstring).
SETTLE = 25.0
SETTLE_STEPS = 60


def _phi(z):
    """``(phi1, phi2, phi3)`` at ``z`` (array, ``z <= 0``): ``phi_k(z) = sum_j z^j/(j+k)!``,
    by the series near 0 (the direct forms cancel there) and directly elsewhere."""
    z = np.asarray(z, float)
    small = np.abs(z) < 0.5
    zs = np.where(small, z, 0.0)
    series = []
    for k in (1, 2, 3):
        term = np.full_like(zs, 1.0 / _fact(k))
        total = term.copy()
        for j in range(1, 16):
            term = term * zs / (j + k)
            total = total + term
        series.append(total)
    zd = np.where(small, -1.0, z)
    em1 = np.expm1(zd)
    p1 = em1 / zd
    p2 = (em1 - zd) / zd**2
    p3 = (em1 - zd - 0.5 * zd**2) / zd**3
    return tuple(np.where(small, s, d) for s, d in zip(series, (p1, p2, p3)))


def _fact(k: int) -> float:
    return float(np.prod(np.arange(1, k + 1)))


@dataclass(frozen=True, eq=False)
class Record:
    """The run at every step (arrays of shape ``(steps, points)``): time ``t`` s, current
    ``i`` A, bus ``v`` V and their rates ``di``, ``dv`` (A/s, V/s); ``k`` the table piece
    the current is in at the end (per point)."""

    t: np.ndarray
    i: np.ndarray
    v: np.ndarray
    di: np.ndarray
    dv: np.ndarray
    k: np.ndarray


@dataclass(frozen=True, eq=False)
class FluxBus:
    """The circuit of the module docstring at each point (arrays broadcast together) with
    a saturating ``coil`` (:class:`~coildrive.model.flux.FluxCoil`, one scale per point);
    ``i_ss`` A the steady current ``V_s/(R + R_s)``. The run is made on first use. With an
    eddy term (:func:`bus`) ``v_s``, ``r_s``, ``c`` and ``coil`` are the equivalent plain
    circuit's (module docstring), ``g_e`` S the eddy conductance (0: none) and ``v0`` V the
    bus at switch-on (``None``: ``v_s``, the capacitor charged to the source). Not ``fed``:
    a capacitor with no source (:func:`capacitor`; ``v_s`` its starting voltage, ``r_s`` 0,
    ``i_ss`` the bound ``V_b/R``)."""

    v_s: np.ndarray
    r_s: np.ndarray
    c: np.ndarray
    r: np.ndarray
    coil: FluxCoil
    i_ss: np.ndarray
    fed: bool = True
    _run: list = field(default_factory=list, repr=False)
    g_e: np.ndarray | float = 0.0
    v0: np.ndarray | None = None

    def record(self, t_need=None, i_need=None) -> Record:
        """The run: its rise (the first of :func:`_phases`), continued over the rest of the
        horizon when a point asks for a time past it (``t_need`` s) or has not reached
        ``i_need`` A in it."""
        if not self._run:
            phases = _phases(self)
            self._run.extend([run(self, phases[:-1]), phases[-1:]])
        rec, rest = self._run
        short = False
        if rest and t_need is not None:
            short = bool(np.any(np.asarray(t_need, float) > rec.t[-1]))
        if rest and i_need is not None:
            short = short or bool(np.any(np.max(rec.i, axis=0) < np.asarray(i_need, float)))
        if short:
            rec = self._run[0] = run(self, rest, rec)
            self._run[1] = []
        return rec

    def with_record(self, rec: Record) -> "FluxBus":
        """This circuit answering from ``rec``, a run made elsewhere and long enough for
        every question (:mod:`coildrive.model.flux_bus_decay`'s, from a turn-off's state)."""
        self._run[:] = [rec, []]
        return self


#: The last few circuits and their runs: a design asks the same points several questions.
_CACHE: dict = {}
CACHE_SIZE = 8


def bus(v_s, r_s, c, r, coil: FluxCoil, r_e=None) -> FluxBus:
    """The circuit of the module docstring at each point (``r_s`` > 0, ``c`` > 0), with an
    eddy resistance ``r_e`` ohm across the magnetising branch (``None``: none) as its
    equivalent plain circuit; the same points and curve give the same object back (its
    run made once)."""
    g_e = 0.0 if r_e is None else 1.0 / np.asarray(r_e, float)
    v_s, r_s, c, r, scale, g_e = np.broadcast_arrays(*(np.asarray(x, float)
                                                       for x in (v_s, r_s, c, r, coil.scale, g_e)))
    key = (id(coil.curve), v_s.shape, *(x.tobytes() for x in (v_s, r_s, c, r, scale, g_e)))
    hit = _CACHE.get(key)
    if hit is not None and hit.coil.curve is coil.curve:
        return hit
    return _keep(key, equivalent(v_s, r_s, c, r, coil.with_scale(scale.copy()),
                                 None if r_e is None else np.broadcast_to(np.asarray(r_e, float), v_s.shape)))


def capacitor(v_0, c, r, coil: FluxCoil) -> FluxBus:
    """A capacitor of ``c`` F (> 0) charged to ``v_0`` V, with no source, discharging into
    the loop of ``r`` ohm and the saturating ``coil`` from ``i = 0`` (module docstring);
    cached as :func:`bus`."""
    v_s, c, r, scale = np.broadcast_arrays(*(np.asarray(x, float) for x in (v_0, c, r, coil.scale)))
    key = (id(coil.curve), "capacitor", v_s.shape, *(x.tobytes() for x in (v_s, c, r, scale)))
    hit = _CACHE.get(key)
    if hit is not None and hit.coil.curve is coil.curve:
        return hit
    return _keep(key, FluxBus(v_s.copy(), np.zeros_like(v_s), c.copy(), r.copy(), coil.with_scale(scale.copy()),
                              v_s / r, False))


def _keep(key, fb: FluxBus) -> FluxBus:
    """``fb``, kept in the cache under ``key`` (the oldest dropped when it is full)."""
    if len(_CACHE) >= CACHE_SIZE:
        _CACHE.pop(next(iter(_CACHE)))
    _CACHE[key] = fb
    return fb


def equivalent(v_s, r_s, c, r, coil: FluxCoil, r_e=None) -> FluxBus:
    """The circuit of the module docstring (arrays of one shape, ``coil``'s scale too), not
    cached: with an eddy resistance ``r_e`` ohm its equivalent plain circuit (source
    ``V_s/a``, ``k R_s/a``, ``C/k``, the curve scaled by ``1/k``), the bus starting at
    ``v_s``. With an eddy term ``r_s`` may be ``inf`` (no source: the capacitor alone feeds
    the coil, or takes its current back): the limit, source 0 V behind ``R_e``."""
    v_s, r_s, c, r = (np.array(x, float) for x in (v_s, r_s, c, r))
    if r_e is None:
        return FluxBus(v_s, r_s, c, r, coil, v_s / (r + r_s))
    g_e = 1.0 / np.asarray(r_e, float)
    k = 1.0 / (1.0 + r * g_e)           # R_e/(R + R_e)
    a = 1.0 + k * g_e * r_s
    none = np.isinf(r_s)
    with np.errstate(invalid="ignore"):
        v_eq = np.where(none, 0.0, v_s / a)
        r_eq = np.where(none, 1.0 / g_e, k * r_s / a)
    return FluxBus(v_eq, r_eq, c / k, r, coil.with_scale(np.asarray(coil.scale, float) / k),
                   np.where(none, 0.0, v_s / (r + r_s)), g_e=g_e, v0=v_s)


def _phases(fb: FluxBus) -> list[tuple[int, np.ndarray]]:
    """The run's two stretches, ``[(steps, step length s per point)]`` (module docstring):
    the rise, :data:`RISE_STEPS` over :data:`RISE_SPAN` secant time constants
    ``psi(i_ss)/(i_ss (R + R_s))``; then the rest of the horizon. Along the rise ``dt = L_d di/(v - R i)``; on the
    way to ``(1 - 1/20)`` of the steady current the denominator stays above ``(R + R_s)
    i_ss / 20`` once the bus has settled, so that part takes at most 20 secant time
    constants; the last twentieth closes at the incremental inductance there and the bus
    settles through ``R_s C``: 25 of each of those more. The second stretch's steps take
    :data:`PER_TIME_CONSTANT` per fastest coil time constant and per LC ringing period
    (at the smallest incremental inductance), at least :data:`STEPS`. A bus that starts off
    the slaved one (an eddy term's, ``v0``) first takes :data:`SETTLE_STEPS` over
    :data:`SETTLE` ``R_s C`` (at most a tenth of the rise), then the rest of the rise. A
    capacitor with no source: :func:`_capacitor_phases`."""
    if not fb.fed:
        return _capacitor_phases(fb)
    cv = fb.coil.curve
    s = fb.coil.scale
    i_ss = fb.i_ss
    g = fb.r + fb.r_s
    secant = s * cv.psi(i_ss) / np.maximum(i_ss, 1e-300) / g
    grid = np.linspace(0.0, 1.0, 65).reshape((-1,) + (1,) * i_ss.ndim) * i_ss
    ld = s * cv.incremental(grid)
    top = ld[-4:].max(axis=0)                         # over the last twentieth
    rise = RISE_SPAN * secant
    horizon = 20.0 * secant + HORIZON * (top / g + fb.r_s * fb.c)
    l_min = ld.min(axis=0)
    h = np.minimum(l_min / g, 2.0 * np.pi * np.sqrt(l_min * fb.c)) / PER_TIME_CONSTANT
    steps = int(np.clip(np.max(np.ceil((horizon - rise) / h)), STEPS, MAX_STEPS))
    tail = (steps, (horizon - rise) / steps)
    if fb.v0 is None:
        return [(RISE_STEPS, rise / RISE_STEPS), tail]
    settle = np.minimum(SETTLE * fb.r_s * fb.c, 0.1 * rise)
    return [(SETTLE_STEPS, settle / SETTLE_STEPS), (RISE_STEPS, (rise - settle) / RISE_STEPS), tail]


def _capacitor_phases(fb: FluxBus) -> list[tuple[int, np.ndarray]]:
    """A capacitor's two stretches (module docstring): with ``L_hi`` the largest and
    ``L_lo`` the smallest incremental inductance below ``V_b/R``, the linear circuit's
    first current maximum ``t_p`` at ``L_hi`` bounds the rise's time scale; the rise is
    ``2 t_p``, the rest ``4 t_p`` more. Steps: at most a :data:`PER_TIME_CONSTANT`-th of
    ``L_lo/R`` and of the LC period at ``L_lo``, and at most the least time the current
    can take through a table piece (its width x its least ``L_d`` / ``V_b``: ``di/dt <=
    V_b / L_d``), so that a step's polynomial is never carried past the next piece;
    :data:`RISE_STEPS` and :data:`STEPS` at least, :data:`MAX_STEPS` at most (the rise then
    ends sooner, the rest takes longer steps)."""
    cv, scale = fb.coil.curve, fb.coil.scale
    grid = np.linspace(0.0, 1.0, 65).reshape((-1,) + (1,) * fb.i_ss.ndim) * fb.i_ss
    ld = scale * cv.incremental(grid)
    l_hi, l_lo = ld.max(axis=0), ld.min(axis=0)
    t_p = rlc.first_peak(-fb.c * fb.v_s, 0.0, fb.r, l_hi, fb.c)
    h = np.minimum(l_lo / fb.r, 2.0 * np.pi * np.sqrt(l_lo * fb.c)) / PER_TIME_CONSTANT
    h = np.minimum(h, piece_time(fb.coil, fb.v_s, fb.i_ss))
    out, done = [], 0.0
    for span, least in ((2.0 * t_p, RISE_STEPS), (6.0 * t_p, STEPS)):
        steps = int(np.clip(np.max(np.ceil((span - done) / h)), least, MAX_STEPS))
        dt = np.minimum((span - done) / steps, h) if not out else (span - done) / steps
        out.append((steps, dt))
        done = done + steps * dt
    return out


def piece_time(coil: FluxCoil, v_top, i_top) -> np.ndarray:
    """The least time (s, per point) the current can take through a table piece that
    starts below ``i_top`` A, with at most ``v_top`` V across the coil: the piece's width x
    its least incremental inductance / ``v_top`` (``di/dt <= v / L_d``); ``inf`` where no
    piece starts below ``i_top`` (the straight extension above the table: constant
    ``L_d``)."""
    cv = coil.curve
    i_top = np.asarray(i_top, float)
    width = np.diff(cv.current)
    inside = cv.current[:-1, None] + width[:, None] * np.linspace(0.0, 1.0, 9)[None, :]
    least = (width * cv.incremental(inside).min(axis=1)).reshape((-1,) + (1,) * i_top.ndim)
    below = cv.current[:-1].reshape(least.shape) < i_top
    return coil.scale * np.where(below, least, np.inf).min(axis=0) / np.asarray(v_top, float)


def run(fb: FluxBus, phases=None, start: Record | None = None) -> Record:
    """Step the circuit over ``phases`` (``[(steps, step length s per point)]``, default
    :func:`_phases`) from switch-on, or on from the last row of ``start`` (an earlier
    run's record), splitting each step at the table's points: the :class:`Record` of
    every step (the starting row first)."""
    phases = _phases(fb) if phases is None else phases
    cv = fb.coil.curve
    coef, base = cv.coef, cv.base
    top = np.append(cv.current, np.inf)[1:]          # piece k spans base[k] .. top[k]
    last = base.size - 1
    scale, r, r_s, c, v_s = fb.coil.scale, fb.r, fb.r_s, fb.c, fb.v_s
    if fb.fed:
        lam = -1.0 / (r_s * c)                        # the bus's own decay, 1/s
        drain = np.zeros_like(c)
    else:                                             # a capacitor alone: w = v, dv/dt = -i/C
        v_s, lam, drain = np.zeros_like(v_s), np.zeros_like(c), 1.0 / c
    g = r + r_s

    def piece(k):
        """Piece ``k``'s ends and its incremental inductance's coefficients x scale."""
        cc = coef[:, k]
        return base[k], top[k], 3 * cc[0] * scale, 2 * cc[1] * scale, cc[2] * scale

    def rates(i, w, p):
        """``(di/dt, dw/dt without w's own decay)`` with piece ``p``'s polynomial."""
        d = i - p[0]
        di = (v_s - g * i + w) / ((p[2] * d + p[3]) * d + p[4])
        return di, r_s * di - drain * i

    def weights(h):
        z = lam * h
        p1, p2, p3 = _phi(z)
        return (np.exp(z), np.exp(0.5 * z), _phi(0.5 * z)[0], p1 - 3 * p2 + 4 * p3, p2 - 2 * p3,
                -p2 + 4 * p3)

    def step(i, w, p, h, wt, n0):
        """One ETDRK4 step of ``h`` s (``wt`` its weights, ``n0`` the rates at its start)."""
        e, e2, q1, f1, f2, f3 = wt
        hh, qh = 0.5 * h, 0.5 * h * q1
        ni0, nw0 = n0
        ai, aw = i + hh * ni0, e2 * w + qh * nw0
        nia, nwa = rates(ai, aw, p)
        bi, bw = i + hh * nia, e2 * w + qh * nwa
        nib, nwb = rates(bi, bw, p)
        ci, cw = ai + hh * (2 * nib - ni0), e2 * aw + qh * (2 * nwb - nw0)
        nic, nwc = rates(ci, cw, p)
        return (i + h / 6.0 * (ni0 + 2 * nia + 2 * nib + nic),
                e * w + h * (f1 * nw0 + 2 * f2 * (nwa + nwb) + f3 * nwc))

    def row(t, i, w, n0):
        """A record row: the bus ``v = V_s - R_s i + w`` and its rate ``-w/(R_s C)`` (a
        capacitor alone: ``v = w``, its rate ``-i/C``)."""
        return t, i, v_s - r_s * i + w, n0[0], lam * w - drain * i

    if start is None:
        t, i, k = np.zeros_like(v_s), np.zeros_like(v_s), np.zeros(v_s.shape, int)
        if not fb.fed:          # a capacitor alone: w is its voltage
            w = fb.v_s.copy()
        else:
            w = np.zeros_like(v_s) if fb.v0 is None else fb.v0 - v_s
    else:
        t, i, k = start.t[-1], start.i[-1], start.k
        w = start.v[-1] - v_s + r_s * i
    p = piece(k)
    n0 = rates(i, w, p)
    rec = [row(t, i, w, n0)]
    for m, h_phase in phases:
        dt = np.broadcast_to(np.asarray(h_phase, float), v_s.shape)
        w_dt = weights(dt)
        for _ in range(m):
            left = dt
            for split in range(SPLITS + 1):
                i1, w1 = step(i, w, p, left, w_dt if split == 0 else weights(left), n0)
                up = (i1 >= p[1]) & (k < last)
                down = (i1 < p[0]) & (k > 0) & (i1 < i)
                cross = (up | down) & (split < SPLITS)
                if not cross.any():
                    t, i, w = t + left, i1, w1
                    n0 = rates(i, w, p)
                    rec.append(row(t, i, w, n0))
                    break
                knot = np.where(up, p[1], p[0])
                d1 = rates(i1, w1, p)[0] * left
                theta = hermite_root(i, i1, n0[0] * left, d1, knot, cross)
                part = np.where(cross, theta * left, left)
                i, w = step(i, w, p, part, weights(part), n0)
                t = t + part
                k = np.where(cross, np.where(up, k + 1, k - 1), k)
                p = piece(k)
                n0 = rates(i, w, p)
                rec.append(row(t, i, w, n0))
                left = left - part
    out = Record(*(np.array(x) for x in zip(*rec)), k=k)
    if start is None:
        return out
    return Record(*(np.concatenate([getattr(start, f), getattr(out, f)[1:]]) for f in ("t", "i", "v", "di", "dv")),
                  k=k)


def _hermite(y0, y1, d0, d1, s):
    """The cubic Hermite interpolant on ``[0, 1]`` (``d0``, ``d1``: the end slopes times
    the interval) at ``s``."""
    s2, s3 = s * s, s * s * s
    return ((2 * s3 - 3 * s2 + 1) * y0 + (s3 - 2 * s2 + s) * d0 + (-2 * s3 + 3 * s2) * y1
            + (s3 - s2) * d1)


#: The cubic Hermite interpolant (:func:`_hermite`), for the modules that read a record.
hermite = _hermite


def hermite_root(y0, y1, d0, d1, target, where, iterations: int = 8):
    """``s`` in ``[0, 1]`` where the Hermite interpolant reaches ``target`` (between ``y0``
    and ``y1`` where ``where``; 1 elsewhere): Newton's method on the cubic from the chord's
    root, kept inside the bracket (a step leaving it bisects). Within a step the cubic
    is nearly straight, so a few iterations reach rounding."""
    where = where & (y1 != y0)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.where(where, (target - y0) / np.where(where, y1 - y0, 1.0), 1.0)
    s = np.clip(np.where(np.isfinite(s), s, 1.0), 0.0, 1.0)
    lo, hi = np.zeros_like(s), np.ones_like(s)
    rising = y1 >= y0
    for _ in range(iterations):
        f = _hermite(y0, y1, d0, d1, s) - target
        past = np.where(rising, f >= 0, f <= 0)
        lo, hi = np.where(past, lo, s), np.where(past, s, hi)
        slope = ((6 * s - 6) * s) * (y0 - y1) + (3 * s - 4) * s * d0 + d0 + (3 * s - 2) * s * d1
        with np.errstate(divide="ignore", invalid="ignore"):
            nxt = s - f / slope
        s = np.where(np.isfinite(nxt) & (nxt >= lo) & (nxt <= hi), nxt, 0.5 * (lo + hi))
    return np.where(where, s, 1.0)


def segments(rec: Record):
    """Per step (rows 0 .. M-2): start time, length, ends and end slopes x length of the
    current and the bus."""
    t0, h = rec.t[:-1], np.diff(rec.t, axis=0)
    return (t0, h, rec.i[:-1], rec.i[1:], rec.di[:-1] * h, rec.di[1:] * h,
            rec.v[:-1], rec.v[1:], rec.dv[:-1] * h, rec.dv[1:] * h)


def terminal_segments(rec: Record, fb: FluxBus):
    """:func:`segments`' first six rows of the terminal current ``k (i_m + g_e v)`` (a
    fixed combination of the two recorded cubics: itself a Hermite cubic); the current
    itself without an eddy term."""
    t0, h, i0, i1, di0, di1, v0, v1, dv0, dv1 = segments(rec)
    k = 1.0 / (1.0 + fb.r * fb.g_e)
    return (t0, h, terminal(i0, v0, fb), terminal(i1, v1, fb), k * (di0 + fb.g_e * dv0),
            k * (di1 + fb.g_e * dv1))


def first_crossing(t0, h, y0, y1, d0, d1, target, rising: bool, before=None):
    """Per point, the first moment (s) a recorded quantity reaches ``target`` (from below
    when ``rising``, else from above): the first step (rows of :func:`segments`) whose end
    is at or past it, solved on the step's cubic Hermite interpolant; ``before`` s: only
    steps that start before it. ``(time s, found)``; where not found the time is that of
    the last step's end and means nothing."""
    target = np.broadcast_to(np.asarray(target, float), np.shape(y0)[1:])
    hit = ((y1 >= target) if rising else (y1 <= target)) & (h > 0)
    if before is not None:
        hit = hit & (t0 < before)
    found = hit.any(axis=0)
    m = np.argmax(hit, axis=0)
    cols = np.arange(target.size).reshape(target.shape)
    pick = (m, cols) if target.ndim else (m,)
    s = hermite_root(y0[pick], y1[pick], d0[pick], d1[pick], target, found)
    return t0[pick] + s * h[pick], found


def rise_time(i_target, fb: FluxBus) -> np.ndarray:
    """Time (s) from switch-on to the first moment the current reaches ``i_target`` A
    (``inf`` where it does not within the run: at most ``e^-25`` short of the steady
    current)."""
    target = np.broadcast_to(np.asarray(i_target, float), fb.v_s.shape)
    rec = fb.record(i_need=target)
    t, found = first_crossing(*segments(rec)[:6], target, rising=True)
    return np.where(target <= 0, 0.0, np.where(found, t, np.inf))


def state(t, fb: FluxBus) -> tuple[np.ndarray, np.ndarray]:
    """``(i A, v V)`` at ``t`` s after switch-on (the run's last state past its horizon, the
    steady state to ``e^-25``); for a circuit of one point ``t`` may be any array."""
    rec = fb.record(t_need=t)
    t0, h, i0, i1, di0, di1, v0, v1, dv0, dv1 = segments(rec)
    if fb.v_s.ndim == 0:       # one point: ``t`` of any shape (a waveform's samples)
        t = np.asarray(t, float)
        pick = (np.clip(np.searchsorted(rec.t[1:-1], t, side="right"), 0, h.shape[0] - 1),)
    else:
        t = np.broadcast_to(np.asarray(t, float), fb.v_s.shape)
        m = np.clip(np.sum(rec.t[1:-1] <= t, axis=0), 0, h.shape[0] - 1)
        pick = (m, np.arange(t.size).reshape(t.shape))
    hm = h[pick]
    s = np.clip(np.where(hm > 0, (t - t0[pick]) / np.where(hm > 0, hm, 1.0), 1.0), 0.0, 1.0)
    return (_hermite(i0[pick], i1[pick], di0[pick], di1[pick], s),
            _hermite(v0[pick], v1[pick], dv0[pick], dv1[pick], s))


def current(t, fb: FluxBus) -> np.ndarray:
    """Coil current (A) at ``t`` s after switch-on (with an eddy term the magnetising
    current)."""
    return state(t, fb)[0]



def lowest_bus(t_end, fb: FluxBus) -> tuple[np.ndarray, np.ndarray]:
    """``(lowest bus V, when s)`` over ``[0, t_end]``: the least of the steps' ends, each
    step's interior minimum (the Hermite cubic's stationary points) and the bus at
    ``t_end``."""
    t_end = np.broadcast_to(np.asarray(t_end, float), fb.v_s.shape)
    rec = fb.record(t_need=t_end)
    t0, h, _, _, _, _, v0, v1, d0, d1 = segments(rec)
    rows = max(int(np.max(np.sum(t0 <= t_end, axis=0))), 1)     # the steps that start by t_end
    t0, h, v0, v1, d0, d1 = (x[:rows] for x in (t0, h, v0, v1, d0, d1))
    # the cubic's derivative a s^2 + b s + c0 on [0, 1]; its roots are the candidates
    a = 6 * v0 + 3 * d0 - 6 * v1 + 3 * d1
    b = -6 * v0 - 4 * d0 + 6 * v1 - 2 * d1
    c0 = d0
    cands_s, cands_v = [np.zeros_like(v0)], [v0]
    disc = b * b - 4 * a * c0
    sq = np.sqrt(np.maximum(disc, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        for sgn in (1.0, -1.0):
            s = np.where(np.abs(a) > 1e-300, (-b + sgn * sq) / (2 * a), -c0 / b)
            ok = (disc >= 0) & np.isfinite(s) & (s > 0) & (s < 1)
            s = np.where(ok, s, 0.0)
            cands_s.append(s)
            cands_v.append(np.where(ok, _hermite(v0, v1, d0, d1, s), np.inf))
    best_v = np.full(fb.v_s.shape, np.inf)
    best_t = np.zeros(fb.v_s.shape)
    for s, vv in zip(cands_s, cands_v):
        tt = t0 + s * h
        vv = np.where(tt <= t_end, vv, np.inf)
        m = np.argmin(vv, axis=0)
        cols = np.arange(best_v.size).reshape(best_v.shape)
        pick = (m, cols) if best_v.ndim else (m,)
        better = vv[pick] < best_v
        best_v, best_t = np.where(better, vv[pick], best_v), np.where(better, tt[pick], best_t)
    v_end = state(t_end, fb)[1]
    end = v_end < best_v
    return np.where(end, v_end, best_v), np.where(end, t_end, best_t)
