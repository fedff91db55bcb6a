"""The bus behind a source resistance: the peak's rise on a drooping supply, closed form.

The circuit (one switch, on from ``t = 0``)::

    V_s ──R_s──┬── bus v(t) ──R──L── (switch on) ── 0 V
               C
               │
              0 V

The source (``V_s`` V, the supply corner) charges the bulk capacitor ``C`` F through the
cable or battery resistance ``R_s`` ohm; the coil loop (``R`` ohm: coil, switch, sense;
``L`` H) draws ``i(t)`` from the bus. With the state ``x = (i, v)``::

    L di/dt = v - R i
    C dv/dt = (V_s - v)/R_s - i         i(0) = 0, v(0) = V_s

is linear with constant input: ``x(t) = x_ss + e^{A t} (x(0) - x_ss)`` with
``A = [[-R/L, 1/L], [-1/C, -1/(R_s C)]]``, the steady state ``i_ss = V_s/(R + R_s)``,
``v_ss = V_s R/(R + R_s)``, and ``e^{A t}`` from the two eigenvalues of ``A`` (real or a
complex pair) by Putzer's formula ``e^{At} = e^{l1 t} I + f[l1, l2] (A - l1 I)`` with the
divided difference ``f = (e^{l1 t} - e^{l2 t})/(l1 - l2)`` (written with ``expm1`` so a
double eigenvalue and a stiff one stay exact). No time stepping.

From the charged capacitor the current is
``I(s) = V_s (1 + s R_s C) / (s ((R + sL)(1 + s R_s C) + R_s))``: the numerator's zero
(the capacitor's charge, ``di/dt = V_s/L`` at ``t = 0``) lets it rise faster than an
all-pole response and overshoot -- with a complex pair its first maximum comes before
``pi/omega``, and with real eigenvalues it may have one maximum above ``i_ss``. So the
current rises monotonically up to the first zero of ``di/dt`` (from
:func:`coildrive.model.linear2.first_zero`; for ever when there is none). The bus has
``dv/dt = 0`` at ``t = 0`` (``dv/dt`` a multiple of ``e^{alpha t} sin(omega t)``, or of
``e^{l1 t} - e^{l2 t}``): it falls monotonically to its first minimum at ``pi/omega``
(or for ever, when the eigenvalues are real). The rise time is a bisection of the closed
form on the current's monotone stretch; the lowest bus over a peak of length ``T`` is
``v(min(T, pi/omega))``.

With an eddy-current term (a resistance ``R_e`` across the magnetising branch,
:mod:`coildrive.model.eddy`) the state is the magnetising current ``i_m`` and the bus: the
branch sees the loop's Thevenin pair, ``L di_m/dt = k (v - R i_m)`` with ``k = R_e/(R +
R_e)``, and the bus feeds the terminal current ``i = k (i_m + v/R_e)``::

    L di_m/dt = k (v - R i_m)
    C dv/dt   = (V_s - v)/R_s - k (i_m + v/R_e)        i_m(0) = 0, v(0) = V_s

still linear with constant input, ``A = [[-k R/L, k/L], [-k/C, -1/(R_s C) - k/(R_e C)]]``
(``R_e -> inf``: ``k = 1``, the plain coil's matrix to the bit) and the same steady state
(the branch is a short at DC). ``i_m`` is still an all-pole step response (the input
enters the bus equation, ``i_m`` only through ``a12``), so it rises monotonically to
``pi/omega``; the bus, though, steps into a falling slope at once (``C dv/dt(0) = -V_s/(R +
R_e)``, the terminal current's switch-on step) and falls monotonically to the first zero
of ``dv/dt`` (:func:`coildrive.model.linear2.first_zero`): its lowest over a peak of length
``T`` is ``v`` at the earlier of ``T`` and that zero (a local minimum of a damped
oscillation lies below ``v_ss``, and each later one is closer to it).

Limits: ``R_s -> 0`` is today's stiff bus (``V_s/R`` with ``tau = L/R``); ``C -> 0`` is a
first-order rise towards ``V_s/(R + R_s)`` with ``tau = L/(R + R_s)`` (the coil sees
``V_s R/(R + R_s)`` at the end).

All functions broadcast over numpy arrays; units are A, V, ohm, H, F, s.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from . import eddy, linear2
from .rl import decay_current

#: Bisection steps for the rise time: the bracket shrinks 2^-60, far below a tick.
BISECTION_STEPS = 60


@dataclass(frozen=True)
class Bus:
    """The linear circuit at each point (arrays broadcast together): source ``v_s`` V,
    ``r_s`` ohm, ``c`` F, loop ``r`` ohm and ``l`` H (the magnetising branch's, with an
    eddy term), ``g_e`` S the eddy conductance ``1/R_e`` (0: none); its eigenvalues
    ``l1``, ``l2`` (complex, ``Re l1 >= Re l2``) and steady state ``i_ss`` A, ``v_ss`` V."""

    v_s: np.ndarray
    r_s: np.ndarray
    c: np.ndarray
    r: np.ndarray
    l: np.ndarray
    l1: np.ndarray
    l2: np.ndarray
    i_ss: np.ndarray
    v_ss: np.ndarray
    g_e: np.ndarray

    @property
    def matrix(self) -> tuple:
        """``(a11, a12, a21, a22)`` of the module docstring's ``A``."""
        return _matrix(self.r_s, self.c, self.r, self.l, self.g_e)

    @property
    def turn_time(self) -> np.ndarray:
        """``pi/omega`` s: the bus's first minimum after switch-on (``inf`` when the
        eigenvalues are real: it falls for ever). (The current's first maximum comes
        earlier: :func:`rise_time`.)"""
        w = np.abs(self.l1.imag)
        with np.errstate(divide="ignore"):
            return np.where(w > 0, np.pi / np.where(w > 0, w, 1.0), np.inf)


def bus(v_s, r_s, c, r, l, r_e=None) -> Bus:
    """The circuit of the module docstring at each point (``r_s`` > 0, ``c`` > 0), with an
    eddy resistance ``r_e`` ohm across the magnetising branch ``l`` H (``None``: none).
    ``r_s = inf`` is a charged capacitor with no source behind it (a boost capacitor:
    ``i_ss = v_ss = 0``, the moving armature's boosted peak,
    :func:`coildrive.model.armature_runs.pull_in` with ``trip``)."""
    g_e = 0.0 if r_e is None else 1.0 / np.asarray(r_e, float)
    v_s, r_s, c, r, l, g_e = np.broadcast_arrays(*(np.asarray(x, float) for x in (v_s, r_s, c, r, l, g_e)))
    l1, l2 = linear2.eigenvalues(*_matrix(r_s, c, r, l, g_e))
    i_ss = v_s / (r + r_s)
    # r_s = inf: a charged capacitor with no source (a boost capacitor): it ends empty
    none = np.isinf(r_s)
    v_ss = np.where(none, 0.0, v_s - np.where(none, 0.0, r_s) * i_ss)
    return Bus(v_s, r_s, c, r, l, l1, l2, i_ss, v_ss, g_e)


def _matrix(r_s, c, r, l, g_e) -> tuple:
    k = 1.0 / (1.0 + r * g_e)        # R_e/(R + R_e); exactly 1 without an eddy term
    return -k * r / l, k / l, -k / c, -1.0 / (r_s * c) - k * g_e / c


def state(t, b: Bus) -> tuple[np.ndarray, np.ndarray]:
    """``(i A, v V)`` at ``t`` s after switch-on (Putzer's formula, module docstring);
    with an eddy term ``i`` is the magnetising current (:func:`terminal` the coil's)."""
    di, dv = linear2.apply(t, b.matrix, b.l1, b.l2, (-b.i_ss, b.v_s - b.v_ss))
    return b.i_ss + di, b.v_ss + dv


def terminal(i, v, b: Bus) -> np.ndarray:
    """The coil's terminal current (A) at magnetising current ``i`` A and bus ``v`` V: ``k
    (i + v/R_e)`` (``i`` itself without an eddy term). ``b``: any bus with the eddy
    conductance ``g_e`` and the loop ``r`` (a saturating coil's
    :class:`~coildrive.model.flux_bus.FluxBus` too)."""
    return (np.asarray(i, float) + b.g_e * np.asarray(v, float)) / (1.0 + b.r * b.g_e)


def bus_turn_time(b: Bus) -> np.ndarray:
    """s to the bus's first minimum (``inf``: it falls for ever): ``pi/omega`` without an
    eddy term (``dv/dt(0) = 0``), else the first zero of ``dv/dt`` (module docstring)."""
    a = b.matrix
    z = linear2.times(a, (-b.i_ss, b.v_s - b.v_ss))      # the rates at t = 0
    zz = linear2.times(a, z)
    return np.where(b.g_e > 0, linear2.first_zero(z[1], zz[1], b.l1, b.l2), b.turn_time)


def rise_time(i_target, b: Bus) -> np.ndarray:
    """Time (s) from switch-on to ``i_target`` A on the drooping bus (``inf`` where the
    current never gets there): a bisection of the closed form on its monotone stretch
    up to its first maximum, the first zero of ``di/dt`` (where it has none: a bracket
    doubled from the slow time constant until it holds the crossing)."""
    target = np.broadcast_to(np.asarray(i_target, float), b.i_ss.shape)
    slow = -1.0 / b.l1.real
    top = _slope_zeros(b, 0.0, b.v_s, 0)[0]      # the current's first maximum (inf: none)
    hi = np.where(np.isfinite(top), top, slow)
    reached = np.where(np.isfinite(top), state(hi, b)[0] >= target, target < b.i_ss)
    for _ in range(80):          # no maximum: grow the bracket (converges: i -> i_ss)
        short = reached & (state(hi, b)[0] < target)
        if not short.any():
            break
        hi = np.where(short, 2.0 * hi, hi)
    lo = np.zeros_like(hi)
    for _ in range(BISECTION_STEPS):
        mid = 0.5 * (lo + hi)
        up = state(mid, b)[0] >= target
        lo, hi = np.where(up, lo, mid), np.where(up, mid, hi)
    return np.where(reached & (target > 0), hi, np.where(target <= 0, 0.0, np.inf))


def top_current(b: Bus) -> np.ndarray:
    """The most current (A) the rise from switch-on reaches: at the current's first
    maximum (the first zero of ``di/dt``; later maxima are lower), or ``i_ss`` where it
    has none."""
    top = _slope_zeros(b, 0.0, b.v_s, 0)[0]
    return np.where(np.isfinite(top), state(np.where(np.isfinite(top), top, 0.0), b)[0], b.i_ss)


def top_from(b: Bus, i0, v0) -> np.ndarray:
    """The most current (A) from ``(i0 A, v0 V)`` on, the switch on: ``i0`` itself, or a
    maximum at one of the first two zeros of ``di/dt`` (a damped pair's later maxima are
    lower), or ``i_ss`` approached for ever where there is none (the largest of these)."""
    t1, t2, _ = _slope_zeros(b, i0, v0, 0)
    top = np.maximum(np.asarray(i0, float), np.where(np.isfinite(t1), -np.inf, b.i_ss))
    for t in (t1, t2):
        ok = np.isfinite(t)
        top = np.where(ok, np.maximum(top, state_from(np.where(ok, t, 0.0), b, i0, v0)[0]), top)
    return top


def current(t, b: Bus) -> np.ndarray:
    """Coil current (A) at ``t`` s after switch-on."""
    return state(t, b)[0]


def lowest_bus(t_end, b: Bus) -> tuple[np.ndarray, np.ndarray]:
    """``(lowest bus V, when s)`` over a peak of ``t_end`` s: the bus falls monotonically
    to its first minimum at ``pi/omega`` (with an eddy term at :func:`bus_turn_time`;
    module docstring)."""
    when = np.minimum(np.asarray(t_end, float), bus_turn_time(b))
    return state(when, b)[1], when


def capacitor_energy(c, v_s, v_low) -> np.ndarray:
    """Energy (J) the capacitor gives up as the bus falls from ``v_s`` to ``v_low`` V:
    ``C (v_s^2 - v_low^2) / 2``."""
    return 0.5 * np.asarray(c, float) * (np.asarray(v_s, float) ** 2 - np.asarray(v_low, float) ** 2)


def hold_ripple_current(mean, duty, fast=0.0) -> np.ndarray:
    """RMS (A) of the capacitor's current in the PWM hold: the bus draws the coil current
    in the on-time only; the source, behind ``R_s`` with ``R_s C`` long against the PWM
    period, gives its average; the capacitor carries the rest. With the coil's own ripple
    neglected against its mean (the coil current taken flat at ``mean`` A while on), that
    is ``mean * sqrt(D (1 - D))``. A full bridge's mixed decay returns the coil current
    into the bus for the share ``fast`` (``F``) of each period as well: the bus current
    takes ``-I``, ``+I`` and 0 for ``D``, ``F`` and the rest, so about its average ``I (F
    - D)`` the RMS is ``mean * sqrt(D + F - (F - D)^2)``."""
    d, f = np.asarray(duty, float), np.asarray(fast, float)
    # D + F - (F - D)^2 written so that F = 0 is D (1 - D) to the bit
    return np.asarray(mean, float) * np.sqrt(np.clip(d * (1.0 - d) + f * (1.0 - f) + 2.0 * f * d, 0.0, None))


def bus_floor(v_s, r_s, i_top) -> np.ndarray:
    """A floor (V) under the bus while the coil draws at most ``i_top`` A from it: if
    ``v < V_s - R_s i_top`` the source's current ``(V_s - v)/R_s`` exceeds the coil's and
    ``C dv/dt > 0``, so the bus never falls below ``min(v(t0), V_s - R_s i_top)`` after a
    moment ``t0`` from which the coil's current stays at or under ``i_top``. With a clamp
    across the switch the coil keeps drawing from the bus after the peak (the hold's
    off-times, the release); the current falls from the end of the peak, so this bounds
    the bus from below from then on (``V_s`` V, ``R_s`` ohm)."""
    return np.asarray(v_s, float) - np.asarray(r_s, float) * np.asarray(i_top, float)


def pulse_floor(v_s, r_s, c, i_top, duty, period) -> np.ndarray:
    """A floor (V) under the bus from a moment it sits at ``v_s`` V while the coil draws at
    most ``i_top`` A in each on-time (``duty`` of each ``period`` s, an on-time first) and
    nothing in the off-times: the bus is linear in what it gives, so it stays above the bus
    driven by exactly that rectangular train -- an RC circuit (``tau = R_s C``) whose
    shortfall ``u = V_s - v`` rises in each on-time to ``a u + R_s i_top (1 - a)`` (``a =
    e^{-t_on/tau}``) and decays in each off-time, so its values at the ends of the on-times
    climb monotonically to the periodic response's ``R_s i_top (1 - a) / (1 - e^{-T/tau})``,
    the floor. ``duty`` 1 (or not known, NaN): :func:`bus_floor`'s ``V_s - R_s i_top``."""
    r_s, c = np.asarray(r_s, float), np.asarray(c, float)
    d = np.clip(np.nan_to_num(np.asarray(duty, float), nan=1.0), 0.0, 1.0)
    t = np.asarray(period, float) / (r_s * c)
    share = np.where(d >= 1.0, 1.0, np.expm1(-d * t) / np.expm1(-np.where(d > 0, t, 1.0)))
    return np.asarray(v_s, float) - r_s * np.asarray(i_top, float) * np.where(d > 0, share, 0.0)


def converter_current(v_s, r_s, p, i_top) -> np.ndarray:
    """The most current (A) a converter drawing the constant power ``p`` W takes from the bus
    behind ``r_s`` ohm from the source ``v_s`` V while the coil draws at most ``i_top`` A:
    at the bus's floor ``v_f``, the larger root of ``v_f^2 - (V_s - R_s i_top) v_f + R_s P =
    0`` (below it the source behind ``R_s`` gives more than the coil and the converter
    take, so the bus never gets there: ``P / v`` <= ``P / v_f``). A source that cannot
    carry it (no real root) has the bus at the root's double point, half of ``V_s - R_s
    i_top``. (A boost converter fed from the main bus, recharging its capacitor after a
    boosted peak.)"""
    head = np.asarray(v_s, float) - r_s * np.asarray(i_top, float)
    disc = np.maximum(head**2 - 4.0 * r_s * p, 0.0)
    v_f = 0.5 * (head + np.sqrt(disc))
    return p / np.maximum(v_f, 1e-9)


def state_from(t, b: Bus, i0, v0) -> tuple[np.ndarray, np.ndarray]:
    """``(i A, v V)`` at ``t`` s after a moment at which the coil carries ``i0`` A and the
    bus is at ``v0`` V, the switch on throughout (the same circuit from any start:
    ``x(t) = x_ss + e^{At} (x0 - x_ss)``). A moving armature's coil, once it rests at a
    stop, is this circuit again from the state it arrived with."""
    a = b.matrix
    di, dv = linear2.apply(t, a, b.l1, b.l2, (np.asarray(i0, float) - b.i_ss,
                                               np.asarray(v0, float) - b.v_ss))
    return b.i_ss + di, b.v_ss + dv


def _slope_zeros(b: Bus, i0, v0, row) -> tuple[np.ndarray, np.ndarray]:
    """The first two zeros (s, ``inf`` where none) of ``d/dt`` of the state's ``row``
    (0: current, 1: bus; a pair of weights: that combination of the two, e.g. the terminal
    current's) from ``(i0, v0)``: the first from :func:`linear2.first_zero` on
    ``e^{At} A d``; a complex pair's next ``pi/omega`` later (a real pair has one at most)."""
    a = b.matrix
    d = (np.asarray(i0, float) - b.i_ss, np.asarray(v0, float) - b.v_ss)
    ad = linear2.times(a, d)
    aad = linear2.times(a, ad)
    if not isinstance(row, int):   # a weighted sum of the two rows
        w0, w1 = row
        ad, aad, row = (w0 * ad[0] + w1 * ad[1],), (w0 * aad[0] + w1 * aad[1],), 0
    with np.errstate(invalid="ignore", divide="ignore"):
        t1 = linear2.first_zero(ad[row], aad[row], b.l1, b.l2)
    t1 = np.where(np.isnan(t1), np.inf, t1)
    w = np.abs(b.l1.imag)
    with np.errstate(divide="ignore"):
        t2 = np.where(w > 0, t1 + np.pi / np.where(w > 0, w, 1.0), np.inf)
    return t1, t2, ad[row]


def lowest_from(t_end, b: Bus, i0, v0) -> tuple[np.ndarray, np.ndarray]:
    """``(lowest bus V, when s)`` over ``[0, t_end]`` s from ``(i0 A, v0 V)``, the switch
    on: the bus is a sum of two exponentials (or a damped sinusoid) about ``v_ss``, so its
    lowest is at an end or at a zero of ``dv/dt`` -- the first, or for a complex pair the
    next one ``pi/omega`` later (later minima lie closer to ``v_ss``): exact, no sampling."""
    t_end = np.broadcast_to(np.asarray(t_end, float), b.i_ss.shape)
    t1, t2, _ = _slope_zeros(b, i0, v0, 1)
    best_v = np.broadcast_to(np.asarray(v0, float), b.i_ss.shape).astype(float)
    best_t = np.zeros_like(best_v)
    for t in (t_end, t1, t2):
        ok = np.isfinite(t) & (t <= t_end)
        v = state_from(np.where(ok, t, 0.0), b, i0, v0)[1]
        low = ok & (v < best_v)
        best_v, best_t = np.where(low, v, best_v), np.where(low, t, best_t)
    return best_v, best_t


def time_to(i_target, b: Bus, i0, v0, t_max, sensed: bool = False) -> np.ndarray:
    """Time (s) from ``(i0 A, v0 V)``, the switch on, to the coil current's first upward
    crossing of ``i_target`` A within ``t_max`` s (``inf`` where none): on the current's
    first rising stretch (from 0, or from the first zero of ``di/dt`` when it starts
    falling, to the next zero of ``di/dt``; real eigenvalues: for ever after the last),
    later maxima being lower (damped); a bisection of the closed form there. ``sensed``:
    of the terminal current (:func:`terminal`, a weighted sum of the two states: the same
    argument holds for it) -- with an eddy term what the sense resistor sees."""
    target = np.broadcast_to(np.asarray(i_target, float), b.i_ss.shape)
    t_max = np.broadcast_to(np.asarray(t_max, float), b.i_ss.shape)
    i0 = np.broadcast_to(np.asarray(i0, float), b.i_ss.shape)
    k = 1.0 / (1.0 + b.r * b.g_e)
    row = (k, k * b.g_e) if sensed else 0

    def value(t):
        i, v = state_from(t, b, i0, v0)
        return terminal(i, v, b) if sensed else i
    t1, t2, slope0 = _slope_zeros(b, i0, v0, row)
    rising = slope0 > 0
    lo = np.where(rising, 0.0, t1)
    hi = np.minimum(np.where(rising, t1, t2), t_max)
    lo = np.where(np.isfinite(lo), lo, t_max)
    hi = np.where(np.isfinite(hi), hi, t_max)
    reached = (value(hi) >= target) & (lo <= hi)
    a = lo.copy()
    c = hi.copy()
    for _ in range(BISECTION_STEPS):
        mid = 0.5 * (a + c)
        up = value(mid) >= target
        a, c = np.where(up, a, mid), np.where(up, mid, c)
    start = terminal(i0, v0, b) if sensed else i0
    return np.where(start >= target, 0.0, np.where(reached, c, np.inf))


def integrals_from(t, b: Bus, i0, v0, nodes: int = 64) -> tuple[np.ndarray, np.ndarray]:
    """``(int i dt A*s, int i^2 dt A^2*s)`` of the coil's terminal current (:func:`terminal`;
    with an eddy term ``k (i_m + v/R_e)``, else the current itself) over ``[0, t]`` s from
    ``(i0, v0)`` (``i0`` the magnetising current with an eddy term), the switch on: the
    charge exact (integrating ``x' = A (x - x_ss)``: ``int (x - x_ss) dt = A^-1 (x(t) -
    x0)``, both rows), the square by ``nodes``-point Gauss-Legendre quadrature of the
    closed form (numpy's ``leggauss``; the integrand is smooth, a few exponentials)."""
    shape = np.broadcast_shapes(np.shape(t), b.i_ss.shape, np.shape(i0), np.shape(v0))
    t, i0, v0 = (np.broadcast_to(np.asarray(a, float), shape) for a in (t, i0, v0))
    a11, a12, a21, a22 = b.matrix
    i1, v1 = state_from(t, b, i0, v0)
    det = a11 * a22 - a12 * a21
    charge = b.i_ss * t + (a22 * (i1 - i0) - a12 * (v1 - v0)) / det
    volts = b.v_ss * t + (a11 * (v1 - v0) - a21 * (i1 - i0)) / det   # int v dt, V*s
    x, w = _gauss(nodes)
    s = 0.5 * t[..., None] * (x + 1.0)
    wide = _expand(b)
    ii = terminal(*state_from(s, wide, i0[..., None], v0[..., None]), wide)
    return ((charge + b.g_e * volts) / (1.0 + b.r * b.g_e),
            0.5 * t * np.sum(w * ii * ii, axis=-1))


def eddy_loss_from(t, b: Bus, i0, v0, nodes: int = 64) -> np.ndarray:
    """J the eddy resistance takes over ``[0, t]`` s from ``(i0, v0)`` (as
    :func:`integrals_from`; ``b`` with an eddy term): ``R_e int (i_m - i_t)^2 dt``, ``i_t``
    the terminal current, by ``nodes``-point Gauss-Legendre quadrature of the closed form
    (as :func:`integrals_from`'s square)."""
    shape = np.broadcast_shapes(np.shape(t), b.i_ss.shape, np.shape(i0), np.shape(v0))
    t, i0, v0 = (np.broadcast_to(np.asarray(a, float), shape) for a in (t, i0, v0))
    x, w = _gauss(nodes)
    s = 0.5 * t[..., None] * (x + 1.0)
    wide = _expand(b)
    i_m, v = state_from(s, wide, i0[..., None], v0[..., None])
    d = i_m - terminal(i_m, v, wide)
    return 0.5 * t * np.sum(w * d * d, axis=-1) / b.g_e


@functools.lru_cache(maxsize=8)
def _gauss(nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [-1, 1] (numpy's ``leggauss``, computed once:
    its eigenvalue solve costs more than the quadrature it serves)."""
    return np.polynomial.legendre.leggauss(nodes)


def _expand(b: Bus) -> Bus:
    """``b`` with a trailing axis on every array (to evaluate many times per point)."""
    return Bus(*(np.asarray(getattr(b, f))[..., None] for f in b.__dataclass_fields__))


def clamp_hold_ripple_current(ripple) -> np.ndarray:
    """RMS (A) of the capacitor's current in a hold whose off-times decay through a clamp
    across the switch: the bus draws the coil current all the time (the switch in the
    on-time, the clamp in the off-time), the source gives its average and the capacitor
    its ripple, a triangle of ``ripple`` A peak to peak: ``ripple / (2 sqrt(3))``."""
    return np.asarray(ripple, float) / (2.0 * np.sqrt(3.0))


#: Periods after which :func:`hold_from` stops even if the orbit has not repeated yet (a
#: coil whose time constant is thousands of periods; the caller bounds the rest).
HOLD_PERIODS_MAX = 5_000
#: The orbit has repeated when a period moves the state by less than this, relatively.
HOLD_SETTLED = 1e-9


def hold_from(b: Bus, i0, v0, duty, period, r_off, v_off) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(lowest bus V, when s, settled)`` of a voltage-mode PWM hold on the drooping bus
    from a hand-over: the coil carries ``i0`` A and the bus is at ``v0`` V when the hold
    starts with an on-time. Each period of ``period`` s is on for ``duty`` of it (the
    circuit of the module docstring from its state, :func:`state_from`, its lowest bus
    exact by :func:`lowest_from`), then off: the coil freewheels in its own loop (``r_off``
    ohm against ``v_off`` V, the exact RL decay, held at zero once there) and draws nothing
    from the bus, which recovers towards ``V_s`` through ``R_s``: ``v = V_s + (v - V_s)
    e^{-t/(R_s C)}`` (its lowest is the off-time's start). Periods follow one another until
    a period moves the state at its start by less than :data:`HOLD_SETTLED` (relative; the
    orbit repeats, so no later period goes lower) or :data:`HOLD_PERIODS_MAX`; ``settled``
    says which. ``when`` counts from the hand-over. With an eddy term (``b.g_e`` > 0) ``i0``
    is the magnetising current and the on-times are the module docstring's eddy circuit
    (the terminal current steps to ``k (i_m + v/R_e)`` at each switch-on, so the bus
    starts falling at once; :func:`lowest_from` takes the zero of ``dv/dt`` wherever it
    lies); in the off-times the magnetising current freewheels through the loop's Thevenin
    pair and, once the terminal current is zero, through ``R_e`` alone
    (:func:`coildrive.model.eddy.decay_current`), still drawing nothing from the bus.
    Every argument broadcasts over the points of ``b``."""
    shape = np.broadcast_shapes(b.i_ss.shape, *(np.shape(x) for x in (i0, v0, duty, period, r_off, v_off)))

    def flat(x):
        return np.broadcast_to(np.asarray(x), shape).ravel()
    fields = [flat(getattr(b, f)) for f in b.__dataclass_fields__]
    i, v = flat(np.asarray(i0, float)).copy(), flat(np.asarray(v0, float)).copy()
    d = np.clip(np.nan_to_num(flat(np.asarray(duty, float))), 0.0, 1.0)
    per = flat(np.asarray(period, float))
    t_on, t_off = d * per, (1.0 - d) * per
    r_off, v_off = flat(np.asarray(r_off, float)), flat(np.asarray(v_off, float))
    recover = np.exp(-t_off / (flat(b.r_s) * flat(b.c)))
    low, when = v.copy(), np.zeros(v.shape)
    live = np.ones(v.shape, bool)
    for n in range(HOLD_PERIODS_MAX):
        k = np.flatnonzero(live)
        if k.size == 0:
            break
        sub = Bus(*(x[k] for x in fields))
        v_low, t_low = lowest_from(t_on[k], sub, i[k], v[k])
        lower = v_low < low[k]
        low[k] = np.where(lower, v_low, low[k])
        when[k] = np.where(lower, n * per[k] + t_low, when[k])
        i_on, v_on = state_from(t_on[k], sub, i[k], v[k])
        i_next = off_current(t_off[k], i_on, r_off[k], v_off[k], sub)
        v_next = sub.v_s + (v_on - sub.v_s) * recover[k]
        still = ((np.abs(i_next - i[k]) > HOLD_SETTLED * np.maximum(np.abs(i[k]), 1e-6))
                 | (np.abs(v_next - v[k]) > HOLD_SETTLED * np.abs(v[k])))
        i[k], v[k] = i_next, v_next
        live[k] = still
    return low.reshape(shape), when.reshape(shape), ~live.reshape(shape)


def off_current(t, i0, r_off, v_off, b: Bus) -> np.ndarray:
    """The (magnetising) current (A) after ``t`` s of a hold's off-time from ``i0`` A: the
    plain coil's RL decay (held at zero), or where ``b`` has an eddy term the magnetising
    branch's (:func:`coildrive.model.eddy.decay_current`)."""
    plain = decay_current(t, i0, r_off, v_off, b.l)
    eddy_on = b.g_e > 0
    if not np.any(eddy_on):
        return plain
    r_e = 1.0 / np.where(eddy_on, b.g_e, 1.0)
    return np.where(eddy_on, eddy.decay_current(t, i0, r_off, v_off, eddy.EddyCoil(b.l, r_e)), plain)
