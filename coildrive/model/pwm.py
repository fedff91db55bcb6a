"""Exact periodic steady state of a voltage-mode PWM hold.

Each period is a switch-on segment of ``D*T`` and a freewheel segment of ``(1-D)*T``
(see :mod:`coildrive.model.rl`). In continuous conduction (CCM) the current never
reaches zero and the steady state is the fixed point of the two exponentials::

    i_max = A (1 - e_on) + i_min e_on,          e_on  = exp(-D T R_on / L)
    i_min = (i_max + B) e_off - B,              e_off = exp(-(1-D) T R_off / L)

with ``A = V/R_on`` and ``B = V_off/R_off``. Where that gives ``i_min < 0`` the diode
blocks: the current reaches zero during the off time and stays there (discontinuous
conduction, DCM), and every period starts from zero. Mean and RMS follow from the exact
segment integrals — no time stepping.

Mixed decay (a full bridge, :class:`MixedDecay`): each off-time starts with a fraction
``m`` in the fast path (all four switches off, the current into the bus through two body
diodes, ``L di/dt = -(R_f i + V_f)``, ``V_f = V_bus + 2 V_d``) and ends in the slow path
(``L di/dt = -R_s i``), three exponential segments a period. With ``e_f = exp(-m (1-D)
T R_f / L)``, ``e_s = exp(-(1-m) (1-D) T R_s / L)`` and ``F = V_f / R_f`` the continuous
fixed point is::

    i_min = ((A (1 - e_on) + F) e_f - F) e_s / (1 - e_on e_f e_s)

and where that gives ``i_min <= 0`` the current dies in the fast part (the body diodes
block) and every period starts from zero. ``m = 0`` is the plain two-segment orbit.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np

from . import eddy
from .eddy import EddyCoil
from .flux import FluxCoil, linear_orbit, orbit
from .rl import decay_integrals, decay_time, rise_integrals


@dataclass(frozen=True)
class PwmSteadyState:
    """Periodic steady state, arrays over operating points. Units: A, s, A*s, A^2*s.

    ``charge_on``/``square_on`` and ``charge_off``/``square_off`` are the integrals of
    ``i`` and ``i^2`` over one period's on and off segments; with the loop resistances
    and voltages they give every power in the circuit (supply, copper, switch, freewheel).

    With an eddy resistance (:mod:`coildrive.model.eddy`): ``i_min``/``i_max`` are the
    magnetising current's (the state the turn-offs start from), the integrals, ``mean``
    and ``rms`` the terminal current's (the mean is the same: the branch voltage
    averages to zero over a period), ``ripple`` is the terminal current's highest less
    its lowest (``terminal_max`` - ``terminal_min``, what the sense resistor sees),
    ``dcm`` says the freewheel stops conducting in the off-time, ``eddy_energy`` is
    the eddy resistance's energy per period (J) and ``magnetising_rms`` the magnetising
    current's RMS (A: a moving armature's hold force goes with it). Those are ``None``
    without one.
    """

    i_min: np.ndarray
    i_max: np.ndarray
    mean: np.ndarray
    rms: np.ndarray
    ripple: np.ndarray
    dcm: np.ndarray
    conduction_off: np.ndarray
    period: np.ndarray
    charge_on: np.ndarray
    square_on: np.ndarray
    charge_off: np.ndarray
    square_off: np.ndarray
    terminal_min: np.ndarray | None = None
    terminal_max: np.ndarray | None = None
    eddy_energy: np.ndarray | None = None
    magnetising_rms: np.ndarray | None = None
    charge_fast: np.ndarray | float = 0.0
    square_fast: np.ndarray | float = 0.0
    fast_time: np.ndarray | None = None   # s per period all four open (current mode's; None: fraction x t_off)
    fast_pulse: tuple | None = None       # (longest fast part s, shortest period s) on a drooping bus


@dataclass(frozen=True)
class MixedDecay:
    """A full bridge's mixed decay in the hold: the first ``fraction`` (0..1) of each
    off-time through the fast path ``L di/dt = -(r_fast i + v_fast)`` (ohm, V: the coil and
    sense resistor, the bus plus two body diodes), the rest through the loop's slow path.
    Arrays broadcast with the loop's."""

    fraction: float
    r_fast: np.ndarray
    v_fast: np.ndarray

    def at(self, k) -> "MixedDecay":
        """The same at the points ``k`` of the flattened arrays (``shape``: their shape)."""
        return MixedDecay(self.fraction, self.r_fast[k], self.v_fast[k])

    def flat(self, shape) -> "MixedDecay":
        """The arrays broadcast to ``shape`` and flattened."""
        return MixedDecay(self.fraction, *(np.array(np.broadcast_to(np.asarray(x, float), shape),
                                                    dtype=float).ravel()
                                           for x in (self.r_fast, self.v_fast)))


def mixed_steady_state(duty, frequency, v_on, r_on, r_off, inductance,
                       mixed: MixedDecay) -> PwmSteadyState:
    """Steady state of a mixed-decay hold: on for ``duty`` of the period, then
    ``mixed.fraction`` of the off-time in the fast path and the rest in the slow one
    (``r_off`` ohm, no opposing voltage). Closed form (module docstring); the fast
    segment's integrals are ``charge_fast``/``square_fast`` (A*s, A^2*s), and
    ``charge_off``/``square_off`` hold both off segments. ``conduction_off`` is the time
    the current flows in the off-time (s)."""
    duty, frequency, v_on, r_on, r_off, ind, r_f, v_f = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (duty, frequency, v_on, r_on, r_off, inductance,
                                         mixed.r_fast, mixed.v_fast)))
    period = 1.0 / frequency
    t_on = duty * period
    t_fast = mixed.fraction * (period - t_on)
    t_slow = period - t_on - t_fast
    a = v_on / r_on
    f = v_f / r_f
    e_on = np.exp(-t_on * r_on / ind)
    e_f = np.exp(-t_fast * r_f / ind)
    e_s = np.exp(-t_slow * r_off / ind)
    with np.errstate(divide="ignore", invalid="ignore"):
        i_ccm = ((a * (1.0 - e_on) + f) * e_f - f) * e_s / (1.0 - e_on * e_f * e_s)
    dcm = ~(i_ccm > 0.0)
    i_min = np.where(dcm, 0.0, i_ccm)
    i_max = a + (i_min - a) * e_on
    fast_zero = decay_time(0.0, i_max, r_f, v_f, ind)
    t_f = np.where(dcm, np.minimum(fast_zero, t_fast), t_fast)
    i_f = np.where(dcm, 0.0, (i_max + f) * e_f - f)
    t_s = np.where(dcm, 0.0, t_slow)
    q_on, s_on = rise_integrals(t_on, i_min, v_on, r_on, ind)
    q_f, s_f = decay_integrals(t_f, i_max, r_f, v_f, ind)
    q_s, s_s = decay_integrals(t_s, i_f, r_off, 0.0, ind)
    mean = (q_on + q_f + q_s) / period
    rms = np.sqrt(np.maximum((s_on + s_f + s_s) / period, 0.0))
    return PwmSteadyState(i_min=i_min, i_max=i_max, mean=mean, rms=rms, ripple=i_max - i_min,
                          dcm=dcm, conduction_off=t_f + t_s, period=period, charge_on=q_on,
                          square_on=s_on, charge_off=q_f + q_s, square_off=s_f + s_s,
                          charge_fast=q_f, square_fast=s_f)


def pwm_steady_state(duty, frequency, v_on, r_on, r_off, v_off, inductance,
                     mixed: MixedDecay | None = None) -> PwmSteadyState:
    """Steady state of voltage-mode PWM at ``duty`` (0..1) and ``frequency`` Hz.

    Parameters
    ----------
    duty : on fraction of the period, 0..1
    frequency : PWM frequency in Hz
    v_on : voltage driving the coil loop while the switch is on, V
    r_on : loop resistance while on, ohm
    r_off : loop resistance while freewheeling, ohm
    v_off : constant voltage opposing the current while freewheeling, V (> 0)
    inductance : H, or a :class:`~coildrive.model.flux.FluxCoil` (a saturating coil: its
        exact periodic orbit, :func:`coildrive.model.flux.orbit`)
    mixed : a full bridge's mixed decay (:func:`mixed_steady_state`; ``v_off`` is then
        unused, the slow path has none), or ``None``
    """
    if isinstance(inductance, EddyCoil):
        if mixed is not None and mixed.fraction > 0:
            return _eddy_mixed_steady_state(duty, frequency, v_on, r_on, r_off, inductance, mixed)
        return _eddy_steady_state(duty, frequency, v_on, r_on, r_off, v_off, inductance)
    if mixed is not None and mixed.fraction > 0:
        if isinstance(inductance, FluxCoil):
            return _flux_mixed_steady_state(duty, frequency, v_on, r_on, r_off, inductance, mixed)
        return mixed_steady_state(duty, frequency, v_on, r_on, r_off, inductance, mixed)
    if isinstance(inductance, FluxCoil):
        return _flux_steady_state(duty, frequency, v_on, r_on, r_off, v_off, inductance)
    duty, frequency, v_on, r_on, r_off, v_off, inductance = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (duty, frequency, v_on, r_on, r_off, v_off, inductance)))
    period = 1.0 / frequency
    t_on = duty * period
    t_off = period - t_on
    i_min_ccm, _ = linear_orbit(t_on, t_off, v_on, r_on, r_off, v_off, inductance)
    a = v_on / r_on
    e_on = np.exp(-t_on * r_on / inductance)
    dcm = i_min_ccm <= 0.0
    i_min = np.where(dcm, 0.0, i_min_ccm)
    i_max = a + (i_min - a) * e_on
    conduction = np.where(dcm, decay_time(0.0, i_max, r_off, v_off, inductance), t_off)
    conduction = np.minimum(conduction, t_off)
    q_on, s_on = rise_integrals(t_on, i_min, v_on, r_on, inductance)
    q_off, s_off = decay_integrals(conduction, i_max, r_off, v_off, inductance)
    mean = (q_on + q_off) / period
    rms = np.sqrt(np.maximum((s_on + s_off) / period, 0.0))
    return PwmSteadyState(i_min=i_min, i_max=i_max, mean=mean, rms=rms, ripple=i_max - i_min,
                          dcm=dcm, conduction_off=conduction, period=period, charge_on=q_on,
                          square_on=s_on, charge_off=q_off, square_off=s_off)


def _flux_steady_state(duty, frequency, v_on, r_on, r_off, v_off, coil: FluxCoil) -> PwmSteadyState:
    """:func:`pwm_steady_state` of a saturating coil, from its exact orbit."""
    duty, frequency = np.broadcast_arrays(np.asarray(duty, float), np.asarray(frequency, float))
    period = 1.0 / frequency
    t_on = duty * period
    o = orbit(coil, t_on, period - t_on, v_on, r_on, r_off, v_off)
    mean = (o.charge_on + o.charge_off) / period
    rms = np.sqrt(np.maximum((o.square_on + o.square_off) / period, 0.0))
    period = np.broadcast_to(period, np.shape(mean))
    return PwmSteadyState(i_min=o.i_min, i_max=o.i_max, mean=mean, rms=rms,
                          ripple=o.i_max - o.i_min, dcm=o.dcm, conduction_off=o.conduction_off,
                          period=period, charge_on=o.charge_on, square_on=o.square_on,
                          charge_off=o.charge_off, square_off=o.square_off)


def _flux_mixed_steady_state(duty, frequency, v_on, r_on, r_off, coil: FluxCoil,
                             mixed: MixedDecay) -> PwmSteadyState:
    """:func:`mixed_steady_state` of a saturating coil, from its exact three-segment orbit
    (:func:`coildrive.model.flux_mixed.mixed_orbit`); a fraction of 1 (no slow part) is
    the two-segment orbit on the fast path (:func:`coildrive.model.flux.orbit`), and
    full duty the on-segment alone."""
    from .flux_mixed import mixed_orbit

    duty, frequency, v_on, r_on, r_off, r_f, v_f, scale = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (duty, frequency, v_on, r_on, r_off, mixed.r_fast,
                                         mixed.v_fast, coil.scale)))
    coil = coil.with_scale(scale)
    period = 1.0 / frequency
    t_on = duty * period
    t_fast = mixed.fraction * (period - t_on)
    t_slow = period - t_on - t_fast
    shape = np.shape(t_on)
    has_slow = (t_slow > 0).ravel()
    fields = ("i_min", "i_max", "dcm", "conduction_off", "charge_on", "square_on")
    out = {f: np.zeros(has_slow.size, bool if f == "dcm" else float) for f in fields}
    q_f, s_f, q_s, s_s = (np.zeros(has_slow.size) for _ in range(4))

    def pick(x, k):
        return np.ravel(x)[k]
    two = np.flatnonzero(~has_slow)
    if two.size:   # no slow part (a fraction of 1, or full duty): the fast path's two segments
        o = orbit(FluxCoil(coil.curve, pick(coil.scale, two)), pick(t_on, two), pick(period - t_on, two),
                  pick(v_on, two), pick(r_on, two), pick(r_f, two), pick(v_f, two))
        for f in fields:
            out[f][two] = getattr(o, f)
        q_f[two], s_f[two] = o.charge_off, o.square_off
    three = np.flatnonzero(has_slow)
    if three.size:
        m = mixed_orbit(FluxCoil(coil.curve, pick(coil.scale, three)),
                        *(pick(x, three) for x in (t_on, t_fast, t_slow, v_on, r_on, r_off, v_f, r_f)))
        for f in fields:
            out[f][three] = getattr(m, f)
        q_f[three], s_f[three], q_s[three], s_s[three] = m.charge_fast, m.square_fast, m.charge_slow, m.square_slow
    o = SimpleNamespace(**{f: v.reshape(shape) for f, v in out.items()})
    q_f, s_f, q_s, s_s = (x.reshape(shape) for x in (q_f, s_f, q_s, s_s))
    mean = (o.charge_on + q_f + q_s) / period
    rms = np.sqrt(np.maximum((o.square_on + s_f + s_s) / period, 0.0))
    return PwmSteadyState(i_min=o.i_min, i_max=o.i_max, mean=mean, rms=rms, ripple=o.i_max - o.i_min,
                          dcm=o.dcm, conduction_off=o.conduction_off, period=period,
                          charge_on=o.charge_on, square_on=o.square_on, charge_off=q_f + q_s,
                          square_off=s_f + s_s, charge_fast=q_f, square_fast=s_f)


def coil_heat(ss: PwmSteadyState, r_coil):
    """W that heats the coil in the hold: the copper's ``I_rms^2 R_coil``, plus the eddy
    currents' loss in the core (``eddy_energy`` per period) when there is an eddy term."""
    heat = ss.rms**2 * r_coil
    return heat if ss.eddy_energy is None else heat + ss.eddy_energy / ss.period


def _eddy_steady_state(duty, frequency, v_on, r_on, r_off, v_off, coil: EddyCoil) -> PwmSteadyState:
    """:func:`pwm_steady_state` with an eddy resistance, from its exact orbit
    (:func:`coildrive.model.eddy.orbit`)."""
    duty, frequency = np.broadcast_arrays(np.asarray(duty, float), np.asarray(frequency, float))
    period = 1.0 / frequency
    t_on = duty * period
    o = eddy.orbit(coil, t_on, period - t_on, v_on, r_on, r_off, v_off)
    mean = (o.charge_on + o.charge_off) / period
    rms = np.sqrt(np.maximum((o.square_on + o.square_off) / period, 0.0))
    period = np.broadcast_to(period, np.shape(mean))
    return PwmSteadyState(i_min=o.i_min, i_max=o.i_max, mean=mean, rms=rms,
                          ripple=o.terminal_max - o.terminal_min, dcm=o.dcm,
                          conduction_off=o.conduction_off, period=period, charge_on=o.charge_on,
                          square_on=o.square_on, charge_off=o.charge_off, square_off=o.square_off,
                          terminal_min=o.terminal_min, terminal_max=o.terminal_max,
                          eddy_energy=o.eddy_energy,
                          magnetising_rms=np.sqrt(np.maximum(o.square_magnetising / period, 0.0)))


def _eddy_mixed_steady_state(duty, frequency, v_on, r_on, r_off, coil: EddyCoil,
                             mixed: MixedDecay) -> PwmSteadyState:
    """:func:`mixed_steady_state` with an eddy resistance, from its exact three-segment
    orbit (:func:`coildrive.model.eddy_mixed.mixed_orbit`); full duty is the on-segment
    alone (:func:`coildrive.model.eddy.orbit`)."""
    from .eddy_mixed import mixed_orbit

    duty, frequency, v_on, r_on, r_off, r_f, v_f, r_e = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (duty, frequency, v_on, r_on, r_off, mixed.r_fast,
                                         mixed.v_fast, coil.resistance)))
    period = 1.0 / frequency
    t_on = duty * period
    t_fast = mixed.fraction * (period - t_on)
    t_slow = np.maximum(period - t_on - t_fast, 0.0)
    full = t_fast <= 0
    if np.all(full):
        return _eddy_steady_state(duty, frequency, v_on, r_on, r_off, 0.0, coil)
    o = mixed_orbit(coil, t_on, np.where(full, period, t_fast), np.where(full, 0.0, t_slow), v_on, r_on,
                    r_off, v_f, r_f)
    if np.any(full):   # always on: the terminal current sits at v_on / r_on
        top = v_on / r_on
        o = SimpleNamespace(**{**vars(o), **{k: np.where(full, x, getattr(o, k)) for k, x in dict(
            i_min=top, i_max=top, dcm=False, conduction_off=0.0, charge_on=top * t_on,
            square_on=top * top * t_on, charge_fast=0.0, square_fast=0.0, charge_slow=0.0,
            square_slow=0.0, terminal_min=top, terminal_max=top, eddy_energy=0.0,
            square_magnetising=top * top * t_on).items()}})
    q_off, s_off = o.charge_fast + o.charge_slow, o.square_fast + o.square_slow
    mean = (o.charge_on + q_off) / period
    rms = np.sqrt(np.maximum((o.square_on + s_off) / period, 0.0))
    return PwmSteadyState(i_min=o.i_min, i_max=o.i_max, mean=mean, rms=rms,
                          ripple=o.terminal_max - o.terminal_min, dcm=o.dcm,
                          conduction_off=o.conduction_off, period=period, charge_on=o.charge_on,
                          square_on=o.square_on, charge_off=q_off, square_off=s_off,
                          terminal_min=o.terminal_min, terminal_max=o.terminal_max,
                          eddy_energy=o.eddy_energy,
                          magnetising_rms=np.sqrt(np.maximum(o.square_magnetising / period, 0.0)),
                          charge_fast=o.charge_fast, square_fast=o.square_fast)


def _points(inductance):
    """``(array to broadcast, rebuild)``: a FluxCoil broadcasts by its scale, an
    EddyCoil by the index of its (flattened) points."""
    if isinstance(inductance, EddyCoil):
        whole = eddy.flat(inductance, inductance.shape)
        index = np.arange(whole.resistance.size, dtype=float).reshape(inductance.shape)
        return index, lambda x: whole[np.asarray(x).astype(int)]
    if isinstance(inductance, FluxCoil):
        return np.asarray(inductance.scale, float), inductance.with_scale
    return inductance, lambda x: x


def duty_for_mean_bisect(target, frequency, v_on, r_on, r_off, v_off, inductance,
                         iterations: int = 44):
    """Reference for :func:`duty_for_mean`: a plain vectorised bisection of the duty.

    The mean current rises monotonically with duty; 44 halvings bring the bracket below
    one part in 10^13 of the period. Returns the upper end of the bracket, ``nan`` where
    even 100 % duty falls short. Kept for the tests and as the slow, obviously right path.
    """
    shape = np.broadcast(target, frequency, v_on, r_on, r_off, v_off, inductance).shape
    lo = np.zeros(shape)
    hi = np.ones(shape)
    full = pwm_steady_state(1.0, frequency, v_on, r_on, r_off, v_off, inductance).mean
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        ok = pwm_steady_state(mid, frequency, v_on, r_on, r_off, v_off, inductance).mean >= target
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    return np.where(full >= target, hi, np.nan)


#: Duty tolerance of :func:`duty_for_mean` (fraction of the period).
DUTY_TOL = 1e-13


def duty_for_mean(target, frequency, v_on, r_on, r_off, v_off, inductance, iterations: int = 60,
                  start=None, mixed: MixedDecay | None = None):
    """Smallest duty whose steady-state mean current reaches ``target`` A, per point.

    The mean current rises monotonically with duty. Each point starts from the
    continuous-conduction estimate of volt-second balance,
    ``D = (R_off I + V_off) / (V + V_off - (R_on - R_off) I)`` (exact when the two loop
    resistances are equal), then takes secant steps kept inside a bracket
    ``mean(lo) < target <= mean(hi)``; a step that would leave the bracket lands just
    inside the end it overshot (by the overshoot, at most half the bracket). A point is
    done when its bracket is narrower than :data:`DUTY_TOL`, or when a secant step
    is that small and the duty just above it is checked to reach the target. Returns the
    upper end (the duty reaches ``target``), within ``DUTY_TOL`` of the exact root --
    the same as the 44-step bisection :func:`duty_for_mean_bisect` to 1e-12, in about
    five evaluations instead of 44. ``nan`` where even 100 % duty falls short;
    ``iterations`` bounds the steps (the rest is finished by bisection); ``start``
    (optional, broadcast like the others) replaces the first estimate, e.g. the duty of a
    nearby point; ``mixed``: a full bridge's mixed decay (:class:`MixedDecay`).
    """
    inductance, coil = _points(inductance)
    extra = () if mixed is None else (mixed.r_fast, mixed.v_fast)
    arrays = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                   (target, frequency, v_on, r_on, r_off, v_off, inductance, *extra)))
    arrays = arrays[:7]
    shape = arrays[0].shape
    tgt, f, v, ron, roff, voff, ind = (np.array(a, dtype=float).ravel() for a in arrays)
    ind = coil(ind)
    mix = None if mixed is None or not mixed.fraction > 0 else mixed.flat(shape)
    if start is not None:
        start = np.array(np.broadcast_to(np.asarray(start, float), shape), dtype=float).ravel()
    out = np.full(tgt.size, np.nan)
    full = pwm_steady_state(1.0, f, v, ron, roff, voff, ind, mix).mean
    reach = full >= tgt
    out[reach & (tgt <= 0)] = 0.0
    act = np.flatnonzero(reach & (tgt > 0))
    if act.size == 0:
        return out.reshape(shape)

    def mean_minus(x, k):
        return pwm_steady_state(x, f[k], v[k], ron[k], roff[k], voff[k], ind[k],
                                None if mix is None else mix.at(k)).mean - tgt[k]

    k = act
    lo = np.zeros(k.size)
    hi = np.ones(k.size)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = (roff[k] * tgt[k] + voff[k]) / (v[k] + voff[k] - (ron[k] - roff[k]) * tgt[k])
        slope = (v[k] + voff[k]) / (0.5 * (ron[k] + roff[k]))  # d mean / d duty in CCM
    if start is not None:
        x = np.where(np.isfinite(start[k]), start[k], x)
    x = np.where((x > lo) & (x < hi), x, 0.5)
    xp = np.full(k.size, np.nan)  # previous point (none yet: the first step uses ``slope``)
    fp = np.full(k.size, np.nan)
    for _ in range(iterations):
        fx = mean_minus(x, k)
        above = fx >= 0
        hi = np.where(above, x, hi)
        lo = np.where(above, lo, x)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(np.isfinite(xp), fx * (x - xp) / (fx - fp), fx / slope)
        nxt = x - step
        exact = (hi - lo < DUTY_TOL) | (fx == 0)
        # a step below the tolerance: the root is within it of ``nxt`` (which may round
        # onto ``x`` itself) -- checked below
        small = ~exact & (np.abs(step) < DUTY_TOL)
        res = np.where(exact, hi, np.minimum(nxt + DUTY_TOL, hi))
        # A step that leaves the bracket lands just inside it, by as far as it overshot
        # (at least twice the tolerance, at most half the bracket): a secant from far
        # points often overshoots a root that lies right next to an end.
        half = 0.5 * (hi - lo)
        below = np.minimum(np.maximum(lo - nxt, 2 * DUTY_TOL), half)
        above_hi = np.minimum(np.maximum(nxt - hi, 2 * DUTY_TOL), half)
        nxt = np.where(nxt <= lo, lo + below, np.where(nxt >= hi, hi - above_hi, nxt))
        nxt = np.where(np.isfinite(nxt), nxt, lo + half)
        done = exact | small
        if np.any(small):
            # the root lies within |step| of nxt: confirm that the duty just above reaches
            # the target; if not, it is a valid lower end and the point carries on
            ci = np.flatnonzero(small)
            ok = mean_minus(res[ci], k[ci]) >= 0
            miss = ci[~ok]
            done[miss] = False
            lo[miss] = res[miss]
            nxt[miss] = 0.5 * (lo[miss] + hi[miss])
        out[k[done]] = res[done]
        keep = ~done
        if not np.any(keep):
            return out.reshape(shape)
        k, lo, hi = k[keep], lo[keep], hi[keep]
        xp, fp, x, slope = x[keep], fx[keep], nxt[keep], slope[keep]
    # Points still open after ``iterations`` steps: finish by bisection of their bracket.
    while k.size:
        mid = 0.5 * (lo + hi)
        ok = mean_minus(mid, k) >= 0
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
        fin = hi - lo < DUTY_TOL
        out[k[fin]] = hi[fin]
        k, lo, hi = k[~fin], lo[~fin], hi[~fin]
    return out.reshape(shape)
