"""The closed-loop hold's PI gains, their fixed-point form and the loop's margins.

The plant is the averaged RL model of the PWM hold, linearised at the operating point:
with duty ``d`` the mean current obeys
``L di/dt = d (V_on - R_on i) - (1 - d) (V_off + R_off i)``, so a small change of the
duty drives the current through ``G(s) = V_g / (R_eff + s L)`` with
``V_g = V_on + V_off - (R_on - R_off) I`` and ``R_eff = d R_on + (1 - d) R_off``
(state-space averaging: Middlebrook and Cuk, 1976; with equal resistances and no
freewheel voltage it is the textbook ``V / (R + s L)``). A full bridge's mixed-decay hold
spends ``phi (1 - d)`` of each period in the fast path (``V_f + R_f i``) and
``(1 - phi)(1 - d)`` in the slow one, so its average is the same equation with
``V_off = phi V_f + (1 - phi) V_slow`` and ``R_off = phi R_f + (1 - phi) R_slow`` (with
an eddy term each path's Thevenin pair, below: ``k_f = R_e / (R_f + R_e)`` for the fast
one, and a mid-period sample in the fast part reads ``k_f di_m``).

A saturating coil (a flux-linkage curve, :mod:`coildrive.model.flux`) obeys the same
average with ``dpsi/dt = L_d(i) di/dt`` on the left. Linearised at the mean current
``I`` -- ``psi(I + di) = psi(I) + L_d(I) di + O(di^2)`` -- the plant is
``V_g / (R_eff + s L_d(I))``: the incremental inductance at the set-point, not the
small-signal one at zero current. It holds while the loop's deviations keep
``|L_d'(I)| di`` small against ``L_d(I)``: the PI moves the duty a few counts a period
and the current a few ADC codes about the set-point (milliamperes against a curve that
changes over tenths of an ampere), so the plant seen by the loop is that of the
set-point; a large step (the fall from the peak onto the set-point) passes through other
slopes, where the loop is saturated at its preload and not linear anyway. The loop runs once a PWM
period ``T``: the duty is held for a period (zero-order hold) and the compare computed
from the sample of period ``k`` takes effect in period ``k + 1`` (one period of delay).
Discretised exactly with the hold, ``P(z) = b / (z - a)``, ``a = exp(-R_eff T / L)``,
``b = (V_g / R_eff) (1 - a)``; the controller is what the driver computes,
``u[k] = Kp e[k] + I[k]``, ``I[k] = I[k-1] + Ki e[k]``, i.e.
``C(z) = Kp + Ki z / (z - 1)``; the loop is ``L(z) = C(z) z^-1 P(z)`` in ADC codes of
current per timer count of compare.

An eddy-current term (a resistance ``R_e`` across the magnetising branch,
:mod:`coildrive.model.eddy`) keeps the plant first order: the state is the magnetising
current ``i_m``, and each loop seen from the branch is its Thevenin pair
(``V k``, ``R k`` with ``k = R_e / (R + R_e)``), so the averaged branch obeys the same
equation with ``V_g = k_on V_on + k_off V_off - (k_on R_on - k_off R_off) I`` and
``R_eff = d k_on R_on + (1 - d) k_off R_off``. What the loop reads is the terminal
current ``i = (v + R_e i_m) / (r + R_e)`` of the segment its sample falls in (the
on-time's with the sense resistor under the switch; in the coil path the on-time's
where ``d >= 1/2``, else the freewheel's): ``di = k di_m``, the ``sensed`` factor of
:class:`Plant`. The mean of the terminal current has a further, direct term -- the step
``D`` of the terminal current at the switching edges, weighted by the duty:
``G_mean(s) = D + K V_g / (R_eff + s L)`` with ``K = d k_on + (1 - d) k_off``, a zero at
``s = -(R_eff + K V_g / D) / L`` (for equal resistances and no freewheel voltage, the
zero sits at ``-R_e / L`` and the pole at ``-R R_e / ((R + R_e) L)``, DC gain ``V / R``).
A sample inside one segment does not carry that step (a small change of the duty moves
an edge, not the level the sample reads), so the loop's plant is ``k V_g / (R_eff + s
L)``: the zero belongs to the mean (and to a sense filter averaging over the period),
not to the sampled loop the driver runs.

Gains: the crossover is placed at :data:`BANDWIDTH_FRACTION` of the PWM frequency at the
corner with the most loop gain (``V_g / L`` largest), the PI zero :data:`ZERO_RATIO`
below it; every other corner crosses lower. Everything is plain numpy over the corners;
the tests compare the margins with scipy.signal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..model.eddy import EddyCoil
from ..model.flux import incremental_at

#: Crossover at the fastest corner as a fraction of the PWM frequency (our choice: a
#: twentieth keeps the loop's delay of 1.5 periods, ZOH and computation, to 27 degrees
#: of phase there).
BANDWIDTH_FRACTION = 1.0 / 20.0
#: The PI zero sits this factor below the crossover (common practice: 3 to 10; 4 costs
#: 14 degrees of phase at the crossover).
ZERO_RATIO = 4.0
#: Least phase margin at any corner (common practice: 45 degrees).
MIN_PHASE_MARGIN_DEG = 45.0
#: Least gain margin at any corner (common practice: 6 dB).
MIN_GAIN_MARGIN_DB = 6.0
#: A disturbance response has settled when it stays within this fraction of its
#: largest deviation (common practice: the 5 % settling band).
SETTLE_BAND = 0.05
#: Largest value any intermediate of the driver's loop arithmetic may reach (int32).
INT32_MAX = 2**31 - 1
#: Frequency points per decade of the margin search (then refined by bisection).
_GRID_PER_DECADE = 200


@dataclass(frozen=True)
class Plant:
    """The sampled plant at each point: ``P(z) = b / (z - a)``, ``b`` in ADC codes per
    timer count (ZOH over one PWM period), ``a`` dimensionless; ``vg`` V, ``r_eff`` ohm,
    ``inductance`` H, ``period`` s (the PWM period); ``sensed``: the sample's change per
    unit change of the plant's state (1; with an eddy term ``R_e / (r + R_e)`` of the
    segment the sample falls in, ``vg`` and ``r_eff`` then the Thevenin pairs')."""

    a: np.ndarray
    b: np.ndarray
    vg: np.ndarray
    r_eff: np.ndarray
    inductance: np.ndarray
    period: float
    sensed: np.ndarray | None = None

    def point(self, k: int) -> "Plant":
        """The plant of point ``k`` alone."""
        sl = slice(k, k + 1)
        return Plant(self.a[sl], self.b[sl], self.vg[sl], self.r_eff[sl], self.inductance[sl],
                     self.period, None if self.sensed is None else self.sensed[sl])


def plant(lp, duty, current, frequency: float, counts: int, codes_per_amp: float,
          switch_leg: bool = False) -> Plant:
    """The linearised, sampled plant at the loops ``lp`` (a
    :class:`~coildrive.model.circuit.Loop`), operating duty and mean current (A);
    ``switch_leg``: the sample falls in the on-time (else in the middle of the period)."""
    d = np.asarray(duty, float)
    i = np.asarray(current, float)
    coil = lp.inductance
    k_on = k_off = sensed = 1.0
    if isinstance(coil, EddyCoil):   # the Thevenin pairs; the mean of i_m is the terminal mean
        k_on = coil.resistance / (lp.r_on + coil.resistance)
        k_off = coil.resistance / (lp.r_off + coil.resistance)
        sensed = k_on if switch_leg else np.where(d >= 0.5, k_on, k_off)
        coil = coil.magnetising
    v_on, r_on, v_off, r_off = k_on * lp.v_on, k_on * lp.r_on, k_off * lp.v_off, k_off * lp.r_off
    if lp.mixed is not None:   # a bridge's mixed decay: the fast path's (Thevenin) pair
        phi = lp.mixed.fraction
        k_fast = 1.0
        if isinstance(lp.inductance, EddyCoil):
            k_fast = lp.inductance.resistance / (lp.mixed.r_fast + lp.inductance.resistance)
            if not switch_leg:   # a mid-period sample in the fast part reads its loop's terminal
                fast = 0.5 < d + phi * (1.0 - d)
                sensed = np.where(d >= 0.5, k_on, np.where(fast, k_fast, k_off))
        v_off = phi * k_fast * lp.mixed.v_fast + (1.0 - phi) * v_off
        r_off = phi * k_fast * lp.mixed.r_fast + (1.0 - phi) * r_off
    vg = v_on + v_off - (r_on - r_off) * i
    r_eff = d * r_on + (1.0 - d) * r_off
    t = 1.0 / frequency
    ind = np.asarray(incremental_at(coil, i), float)   # H: L, or L_d(I) of a curve
    a = np.exp(-r_eff * t / ind)
    sensed = np.asarray(sensed + 0.0 * a, float)
    b = sensed * vg / r_eff * (1.0 - a) * codes_per_amp / counts
    return Plant(a=np.atleast_1d(a), b=np.atleast_1d(b), vg=np.atleast_1d(vg),
                 r_eff=np.atleast_1d(r_eff), inductance=np.atleast_1d(ind), period=t,
                 sensed=np.atleast_1d(sensed))


def loop_gain(kp: float, ki: float, p: Plant, w) -> np.ndarray:
    """``L(e^{j w T})`` (complex) at angular frequencies ``w`` (rad/s, last axis) for
    each point of ``p`` (first axis)."""
    z = np.exp(1j * np.asarray(w, float) * p.period)
    c = kp + ki * z / (z - 1.0)
    return c * p.b[:, None] / (z * (z - p.a[:, None]))


def _phase(kp: float, ki: float, p: Plant, w) -> np.ndarray:
    """The loop's phase in radians, continuous from the lowest frequency (where the
    integrator and the plant give a little below -90 degrees)."""
    z = np.exp(1j * np.asarray(w, float) * p.period)
    pc = np.unwrap(np.angle(kp + ki * z / (z - 1.0)), axis=-1)
    pp = np.unwrap(np.angle(p.b[:, None] / (z - p.a[:, None])), axis=-1)
    return pc + pp - np.asarray(w, float) * p.period


@dataclass(frozen=True)
class Margins:
    """Per point: crossover (Hz, where ``|L| = 1``), phase margin (degrees), the phase
    crossover (Hz, where the phase is -180 degrees) and the gain margin (dB)."""

    crossover_hz: np.ndarray
    phase_margin_deg: np.ndarray
    phase_crossover_hz: np.ndarray
    gain_margin_db: np.ndarray


def margins(kp: float, ki: float, p: Plant) -> Margins:
    """The margins of the loop at each point of ``p``: a log grid up to the Nyquist
    frequency, then bisection at the first crossing of ``|L| = 1`` and of -180 degrees."""
    nyq = math.pi / p.period
    lo = nyq * 1e-5
    w = np.geomspace(lo, nyq * (1.0 - 1e-9), int(5 * _GRID_PER_DECADE))
    mag = np.abs(loop_gain(kp, ki, p, w))
    ph = _phase(kp, ki, p, w)
    n = len(p.a)

    def first(cond: np.ndarray) -> np.ndarray:
        """Index of the grid interval where ``cond`` first turns true (-1: never)."""
        hit = cond[:, 1:] & ~cond[:, :-1]
        k = np.argmax(hit, axis=1)
        return np.where(hit.any(axis=1), k, -1)

    def refine(k: np.ndarray, f) -> np.ndarray:
        out = np.full(n, math.nan)
        for i in range(n):
            if k[i] < 0:
                continue
            a, b = w[k[i]], w[k[i] + 1]
            for _ in range(60):
                m = math.sqrt(a * b)
                if f(i, m):
                    b = m
                else:
                    a = m
            out[i] = math.sqrt(a * b)
        return out

    sub = p.point

    wc = refine(first(mag < 1.0), lambda i, m: abs(loop_gain(kp, ki, sub(i), [m])[0, 0]) < 1.0)
    w180 = refine(first(ph < -math.pi), lambda i, m: _phase(kp, ki, sub(i), np.array([w[0], m]))[0, 1] < -math.pi)
    pm = np.full(n, math.nan)
    gm = np.full(n, math.inf)
    for i in range(n):
        if math.isfinite(wc[i]):
            pm[i] = 180.0 + math.degrees(_phase(kp, ki, sub(i), np.array([w[0], wc[i]]))[0, 1])
        if math.isfinite(w180[i]):
            gm[i] = -20.0 * math.log10(abs(loop_gain(kp, ki, sub(i), [w180[i]])[0, 0]))
    return Margins(wc / (2 * math.pi), pm, w180 / (2 * math.pi), gm)


def design_gains(p: Plant, k: int, bandwidth_hz: float) -> tuple[float, float]:
    """``(Kp, Ki)`` in timer counts per ADC code (``Ki`` per PWM period) that put the
    crossover of point ``k`` at ``bandwidth_hz`` with the PI zero :data:`ZERO_RATIO`
    below it: ``Ki = Kp (w_c / ZERO_RATIO) T`` and ``|L(e^{j w_c T})| = 1``."""
    wc = 2 * math.pi * bandwidth_hz
    ratio = wc / ZERO_RATIO * p.period
    one = p.point(k)
    unit = abs(loop_gain(1.0, ratio, one, [wc])[0, 0])
    kp = 1.0 / unit
    return kp, kp * ratio


def settling_time(kp: float, ki: float, p: Plant, periods: int = 4000) -> tuple[np.ndarray, np.ndarray]:
    """``(settling time s, largest deviation per unit step)`` of each point's response to a
    step disturbance at the plant's input (a supply step acts there: it changes
    ``d V_on``), with the driver's arithmetic in real numbers: the time after which the
    current's deviation stays within :data:`SETTLE_BAND` of its largest."""
    n = len(p.a)
    x = np.zeros(n)
    integ = np.zeros(n)
    u = np.zeros(n)
    ys = np.empty((periods, n))
    for k in range(periods):
        ys[k] = x
        e = -x
        integ = integ + ki * e
        v = kp * e + integ
        x = p.a * x + p.b * (u + 1.0)
        u = v
    peak = np.max(np.abs(ys), axis=0)
    outside = np.abs(ys) > SETTLE_BAND * peak
    last = periods - 1 - np.argmax(outside[::-1], axis=0)
    return (last + 1) * p.period, peak


@dataclass(frozen=True)
class FixedPoint:
    """The gains as the driver's integers: ``kp_q = round(Kp 2^shift)``, likewise
    ``ki_q``; the integrator holds compare counts x ``2^shift`` within
    ``[0, max_compare 2^shift]``; the relative rounding of each gain."""

    shift: int
    kp_q: int
    ki_q: int
    integrator_max: int
    kp_rounding: float
    ki_rounding: float


def fixed_point(kp: float, ki: float, max_compare: int, adc_bits: int) -> FixedPoint:
    """The largest shift (at most 24) for which every intermediate of the driver's
    arithmetic fits a signed 32-bit integer: the integrator (``max_compare 2^shift``), the
    proportional term with a full-scale error (``kp_q 2^bits``) and their sum, and an
    integrator step (``ki_q 2^bits``)."""
    full = 2**adc_bits
    best = None
    for shift in range(0, 25):
        kp_q = round(kp * 2**shift)
        ki_q = round(ki * 2**shift)
        imax = max_compare * 2**shift
        if kp_q * full + imax > INT32_MAX or imax + ki_q * full > INT32_MAX:
            break
        best = (shift, kp_q, ki_q, imax)
    if best is None:
        best = (0, round(kp), round(ki), max_compare)
    shift, kp_q, ki_q, imax = best
    return FixedPoint(shift, kp_q, ki_q, imax,
                      abs(kp_q / 2**shift - kp) / kp if kp > 0 else 0.0,
                      abs(ki_q / 2**shift - ki) / ki if ki > 0 else 0.0)
