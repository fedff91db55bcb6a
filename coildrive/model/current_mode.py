"""Exact periodic steady state of a current-mode hold: hysteretic band or fixed off-time.

Both controls switch the same two RL segments as the PWM hold (see
:mod:`coildrive.model.rl`); what ends each segment is a current threshold instead of a
timer:

* **hysteretic** -- switch off when the current reaches the upper threshold ``I_hi``,
  on again when it falls to the lower one ``I_lo``. Between the thresholds the RL
  charge and discharge take (RL step response solved for the time)::

      t_on  = tau_on  ln((A - I_lo) / (A - I_hi)),   A = V / R_on,     tau_on  = L / R_on
      t_off = tau_off ln((I_hi + B) / (I_lo + B)),   B = V_off / R_off, tau_off = L / R_off

  and the switching frequency is ``1 / (t_on + t_off)`` (derived here from the RL step
  ``i(t) = a + (i0 - a) e^(-t/tau)``; the same expressions are in the usual
  treatments of hysteretic current control, from memory). The controller must see the
  current while the switch is off: it needs the sense resistor in the coil path.
* **off_time** -- switch off when the current reaches the peak threshold ``I_pk``, stay
  off for a fixed, timer-made ``t_off``, then on again. The bottom of the ripple is
  ``(I_pk + B) e^(-t_off / tau_off) - B`` (zero if the current dies out first: the
  diode blocks) and ``t_on = tau_on ln((A - I_bot) / (A - I_pk))``. The peak is seen
  while the switch is on, so it works with the sense resistor under the switch too,
  and each period's bottom depends on the peak alone (no sub-harmonic instability).

Mixed decay on a full bridge (``mixed``, a :class:`~coildrive.model.pwm.MixedDecay`; the
fixed off-time control, a linear coil): each off-time's first ``t_f = m t_off`` decays
fast (all four switches open, ``L di/dt = -(R_f i + V_f)``, ``V_f = V_bus + 2 V_d``, the
body diodes blocking at zero), the rest ``t_s = (1 - m) t_off`` slowly through the loop's
``R_off`` (``V_off = 0``). The off-time still starts at the peak, so the orbit is closed
form with no fixed point::

    i_f    = (I_top + F) e^(-t_f R_f / L) - F,  F = V_f / R_f   (0 if the current dies first)
    bottom = i_f e^(-t_s R_off / L)

and ``t_on`` as above; ``charge_fast``/``square_fast`` are the fast segment's integrals
(the bus takes ``V_bus x charge_fast`` back every period). The hysteretic control's fast
part is a fixed time ``t_f`` (a one-shot from the turn-off, ``fast_time``): the off-time
runs on that path -- fast until ``t_f``, slow after -- down to the lower threshold, which
may come in the fast part (the switch then turns on with the fast part cut short).

Mixed decay with an eddy term (an :class:`~coildrive.model.eddy.EddyCoil` on a linear
branch or a curve's): the same path in the magnetising current, each segment the branch's exact
Thevenin one (below), the fast part's terminal current ``(R_e i_m - V_f) / (R_f + R_e)``
blocking at ``i_m = V_f / R_e`` with the flux then dying through ``R_e`` alone
(:func:`coildrive.model.eddy_mixed.fast_part`), the slow part never blocking. The sensed
lower threshold is a magnetising current of the path it is met on -- fast: ``((R_f + R_e)
I_lo + V_f) / R_e``, slow: ``(R_s + R_e) I_lo / R_e`` -- and the sensed current steps UP
where Q2 + Q4 close (the slow loop takes no ``V_f``): if that step is still at or below
``I_lo`` the off-time ends there. A fast path's first sensed current at or below ``I_lo``
(``m_lo,fast >= m_hi``) is ``chatter``. The off-time still starts at the top: no fixed point.

``delay`` is the time from a threshold crossing to the switch edge (comparator, ADC
conversion, interrupt latency): the current runs on for that long past each threshold,
so the ripple's top is ``A + (I_hi - A) e^(-delay/tau_on)`` and the bottom the decay
from ``I_lo`` for ``delay`` (stopping at zero).

With a saturating coil (``inductance`` a :class:`~coildrive.model.flux.FluxCoil`) the
segments are the same time-to-current problems between the same thresholds, each
solved exactly by the curve's quadrature ``t(i1 -> i2) = integral L_d(i) di / (v - R i)``
(the functions of :mod:`coildrive.model.rl` hand over to :mod:`coildrive.model.flux`);
the delay's run-on past a threshold and the fixed off time's decay are the curve's
current after that time. Nothing else changes: the thresholds, not an inductance, end
the segments, so the frequency, ripple, mean and heat follow exactly.

Where the upper (or peak) threshold is at or above ``V / R_on`` the current never gets
there: the switch stays on and the coil carries ``V / R_on`` (``regulated`` is False;
the integrals are then those of that direct current over a 1 s window, ``frequency`` is
zero and ``duty`` one).

With an eddy-current term (``inductance`` a :class:`~coildrive.model.eddy.EddyCoil`:
a resistance ``R_e`` across the magnetising branch) the controller compares the SENSED
current, the terminal current ``i = (v + R_e i_m) / (r + R_e)`` of the loop that
conducts, with its thresholds, while the state is the magnetising current ``i_m``. Each
threshold is therefore a magnetising current that depends on the segment it ends::

    switch on,  sensed current up to I_hi:   m_hi = ((R_on + R_e) I_hi - V) / R_e
    switch off, sensed current down to I_lo: m_lo = ((R_off + R_e) I_lo + V_off) / R_e

and between them the segments are the magnetising branch's exact Thevenin segments of
:mod:`coildrive.model.eddy` (after a freewheel blocks, the flux decays through ``R_e``).
At every switching edge the sensed current steps by about ``(V + V_off) / (R + R_e)``
while ``i_m`` is continuous, so the ripple of ``i_m`` is the band LESS that step: the
switching frequency rises against a plain coil of the same inductance, and the sensed
ripple's ends are the thresholds (moved by the delay). A hysteretic band narrower than
the step (``m_lo >= m_hi``: ``(R_on + R_e) I_hi - (R_off + R_e) I_lo <= V + V_off``), or
a peak threshold the switch-on step alone passes (``m_pk <= 0``), has no orbit: every
edge trips the other threshold at once and the switch chatters at the comparator's own
speed. Those points are ``chatter`` (and not ``regulated``); the design fails them.
``i_min``/``i_max`` are then the magnetising current's (the release starts from
``i_max``), ``terminal_min``/``terminal_max`` the sensed ripple's ends, ``eddy_energy``
the eddy resistance's energy per period (J), ``magnetising_rms`` the magnetising
current's RMS (A: what a moving armature's force goes with; the sensed RMS is higher by
the eddy branch's share, while the two means are equal, the branch voltage averaging to
zero over a period), as in the PWM hold
(:class:`~coildrive.model.pwm.PwmSteadyState`).

All functions broadcast over numpy arrays; units A, V, ohm, H, s, Hz.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from . import eddy, flux
from .eddy import EddyCoil
from .flux import FluxCoil
from .pwm import MixedDecay, PwmSteadyState
from .rl import decay_current, decay_integrals, decay_time, rise_current, rise_integrals, rise_time


@dataclass(frozen=True)
class CurrentModeSteadyState:
    """Periodic steady state of a current-mode hold (arrays). A, s, Hz, A*s, A^2*s.

    ``i_min``/``i_max`` are the bottom and top of the ripple (the thresholds moved by
    the delay); ``t_on``/``t_off`` the switch on and off times, ``conduction_off`` the
    part of ``t_off`` with current flowing; ``dcm`` marks a current that dies out
    during the off time. A full bridge's mixed decay: ``fast_time`` the time of each
    period with all four switches open (s: the fast part, cut short where the off-time
    ends in it), ``charge_fast``/``square_fast`` its current's integrals.
    """

    i_min: np.ndarray
    i_max: np.ndarray
    mean: np.ndarray
    rms: np.ndarray
    ripple: np.ndarray
    t_on: np.ndarray
    t_off: np.ndarray
    period: np.ndarray
    frequency: np.ndarray
    duty: np.ndarray
    regulated: np.ndarray
    dcm: np.ndarray
    conduction_off: np.ndarray
    charge_on: np.ndarray
    square_on: np.ndarray
    charge_off: np.ndarray
    square_off: np.ndarray
    terminal_min: np.ndarray | None = None
    terminal_max: np.ndarray | None = None
    eddy_energy: np.ndarray | None = None
    chatter: np.ndarray | None = None
    magnetising_rms: np.ndarray | None = None
    charge_fast: np.ndarray | float = 0.0
    square_fast: np.ndarray | float = 0.0
    fast_time: np.ndarray | None = None

    def as_pwm(self) -> PwmSteadyState:
        """The same steady state in the voltage-mode container (same field meanings), so
        the loss and report code reads both."""
        return PwmSteadyState(i_min=self.i_min, i_max=self.i_max, mean=self.mean, rms=self.rms,
                              ripple=self.ripple, dcm=self.dcm, conduction_off=self.conduction_off,
                              period=self.period, charge_on=self.charge_on, square_on=self.square_on,
                              charge_off=self.charge_off, square_off=self.square_off,
                              terminal_min=self.terminal_min, terminal_max=self.terminal_max,
                              eddy_energy=self.eddy_energy, magnetising_rms=self.magnetising_rms,
                              charge_fast=self.charge_fast, square_fast=self.square_fast,
                              fast_time=self.fast_time)


def _unregulated(bottom, top, t_on, t_off, conduction, a, regulated):
    """The orbit's ends and times, where not ``regulated`` those of the switch left on
    with the coil at ``a`` = V/R_on (a 1 s window of DC)."""
    return (np.where(regulated, bottom, a), np.where(regulated, top, a),
            np.where(regulated, t_on, 1.0), np.where(regulated, t_off, 0.0),
            np.where(regulated, conduction, 0.0))


def _finish(bottom, top, t_on, t_off, conduction, v_on, r_on, r_off, v_off, inductance, regulated):
    a = v_on / r_on
    bottom, top, t_on, t_off, conduction = _unregulated(bottom, top, t_on, t_off, conduction, a,
                                                        regulated)
    if isinstance(inductance, FluxCoil):
        # the curve's segments between their known end currents (no current-after-time
        # search): on from the bottom to the top, off from the top back to the bottom
        (q_on, q_off), (s_on, s_off) = flux.integral(
            inductance.with_scale(np.stack([inductance.scale] * 2)), np.stack([bottom, top]),
            np.stack([top, bottom]), np.stack([v_on, -v_off]), np.stack([r_on, r_off]), (1, 2))
        # unregulated: the coil carries V/R_on throughout (DC, not a segment)
        q_on = np.where(regulated, q_on, a * t_on)
        s_on = np.where(regulated, s_on, a * a * t_on)
        q_off = np.where(regulated, q_off, 0.0)
        s_off = np.where(regulated, s_off, 0.0)
    else:
        q_on, s_on = rise_integrals(t_on, bottom, v_on, r_on, inductance)
        q_off, s_off = decay_integrals(conduction, top, r_off, v_off, inductance)
    return _state(bottom, top, t_on, t_off, conduction, q_on, s_on, q_off, s_off, regulated)


def _state(bottom, top, t_on, t_off, conduction, q_on, s_on, q_off, s_off, regulated,
           **extra) -> CurrentModeSteadyState:
    """The steady state from the orbit's ends, times and integrals (``extra``: more fields)."""
    period = t_on + t_off
    mean = (q_on + q_off) / period
    rms = np.sqrt(np.maximum((s_on + s_off) / period, 0.0))
    frequency = np.where(regulated, 1.0 / period, 0.0)
    return CurrentModeSteadyState(
        i_min=bottom, i_max=top, mean=mean, rms=rms, ripple=top - bottom, t_on=t_on, t_off=t_off,
        period=period, frequency=frequency, duty=t_on / period, regulated=regulated,
        dcm=regulated & (conduction < t_off), conduction_off=conduction, charge_on=q_on,
        square_on=s_on, charge_off=q_off, square_off=s_off, **extra)


def _broadcast(values, inductance):
    """The arguments as float arrays broadcast together, with the inductance: a linear
    coil's H joins the broadcast; a :class:`FluxCoil`'s per-point scale does; an
    :class:`EddyCoil`'s resistance and magnetising branch do."""
    if isinstance(inductance, EddyCoil):
        m = inductance.magnetising
        per_point = m.scale if isinstance(m, FluxCoil) else m
        *out, r_e, mag = np.broadcast_arrays(*(np.asarray(x, float) for x in values),
                                             np.asarray(inductance.resistance, float),
                                             np.asarray(per_point, float))
        mag = m.with_scale(mag) if isinstance(m, FluxCoil) else mag
        return (*out, EddyCoil(mag, r_e))
    if isinstance(inductance, FluxCoil):
        *out, scale = np.broadcast_arrays(*(np.asarray(x, float) for x in values),
                                          np.asarray(inductance.scale, float))
        return (*out, inductance.with_scale(scale))
    return np.broadcast_arrays(*(np.asarray(x, float) for x in (*values, inductance)))


def hysteretic_steady_state(i_lo, i_hi, v_on, r_on, r_off, v_off, inductance,
                            delay=0.0, fast_time=0.0, mixed: MixedDecay | None = None) -> CurrentModeSteadyState:
    """Hysteretic band ``i_lo``..``i_hi`` A (``0 <= i_lo < i_hi``), ``delay`` s per edge.

    Loop arguments as :func:`coildrive.model.pwm.pwm_steady_state` (V, ohm, H; ``v_off``
    > 0 opposes the freewheeling current). ``mixed``: a full bridge's mixed decay, each
    off-time fast for the fixed ``fast_time`` s (or until the lower threshold, if sooner),
    then slow (a linear coil, an eddy term too; module docstring).
    """
    if mixed is not None and mixed.fraction > 0:
        return _mixed_orbit("hysteretic", i_lo, i_hi, fast_time, v_on, r_on, r_off, inductance, delay, mixed)
    i_lo, i_hi, v_on, r_on, r_off, v_off, delay, inductance = _broadcast(
        (i_lo, i_hi, v_on, r_on, r_off, v_off, delay), inductance)
    if isinstance(inductance, EddyCoil):
        return _eddy_hysteretic(i_lo, i_hi, v_on, r_on, r_off, v_off, inductance, delay)
    a = v_on / r_on
    regulated = i_hi < a
    hi = np.where(regulated, i_hi, 0.5 * a)  # any level below A where unregulated: _finish replaces those
    lo = np.minimum(i_lo, hi)
    top = rise_current(delay, hi, v_on, r_on, inductance)          # run-on past I_hi
    down = decay_time(lo, top, r_off, v_off, inductance)           # top -> I_lo
    to_zero = decay_time(0.0, lo, r_off, v_off, inductance)        # I_lo -> 0
    bottom = np.where(delay < to_zero, decay_current(delay, lo, r_off, v_off, inductance), 0.0)
    bottom = np.maximum(bottom, 0.0)
    conduction = down + np.minimum(delay, to_zero)
    t_off = down + delay
    t_on = rise_time(hi, bottom, v_on, r_on, inductance) + delay
    return _finish(bottom, top, t_on, t_off, conduction, v_on, r_on, r_off, v_off, inductance,
                   regulated)


def off_time_steady_state(i_peak, t_off, v_on, r_on, r_off, v_off, inductance,
                          delay=0.0, mixed: MixedDecay | None = None) -> CurrentModeSteadyState:
    """Peak threshold ``i_peak`` A, fixed off time ``t_off`` s, ``delay`` s to turn off;
    ``mixed``: a full bridge's mixed decay (a linear coil, an eddy term too; module docstring)."""
    if mixed is not None and mixed.fraction > 0:
        return _mixed_orbit("off_time", 0.0, i_peak, t_off, v_on, r_on, r_off, inductance, delay, mixed)
    i_peak, t_off, v_on, r_on, r_off, v_off, delay, inductance = _broadcast(
        (i_peak, t_off, v_on, r_on, r_off, v_off, delay), inductance)
    if isinstance(inductance, EddyCoil):
        return _eddy_off_time(i_peak, t_off, v_on, r_on, r_off, v_off, inductance, delay)
    a = v_on / r_on
    regulated = i_peak < a
    pk = np.where(regulated, i_peak, 0.5 * a)
    top = rise_current(delay, pk, v_on, r_on, inductance)          # run-on past I_pk
    to_zero = decay_time(0.0, top, r_off, v_off, inductance)
    bottom = np.maximum(decay_current(t_off, top, r_off, v_off, inductance), 0.0)
    bottom = np.where(t_off < to_zero, bottom, 0.0)
    conduction = np.minimum(t_off, to_zero)
    t_on = rise_time(pk, np.minimum(bottom, pk), v_on, r_on, inductance) + delay
    return _finish(bottom, top, t_on, t_off, conduction, v_on, r_on, r_off, v_off, inductance,
                   regulated)


class MixedPath:
    """An off-time of a full bridge's mixed decay from ``top`` A: fast for ``t_fast`` s
    (``L di/dt = -(r_f i + v_f)``, blocking at zero), then slow (``L di/dt = -r_s i``);
    linear coil ``ind`` H, arrays broadcast together."""

    def __init__(self, top, t_fast, r_f, v_f, r_s, ind):
        self.top, self.t_fast, self.r_f, self.v_f, self.r_s, self.ind = top, t_fast, r_f, v_f, r_s, ind
        self.to_zero = decay_time(0.0, top, r_f, v_f, ind)
        self.dies = self.to_zero <= t_fast                                 # the body diodes block
        self.i_fast = np.where(self.dies, 0.0, np.maximum(decay_current(t_fast, top, r_f, v_f, ind), 0.0))

    def current(self, t):
        """The current ``t`` s into the off-time (A)."""
        fast = decay_current(np.minimum(t, self.t_fast), self.top, self.r_f, self.v_f, self.ind)
        slow = decay_current(np.maximum(t - self.t_fast, 0.0), self.i_fast, self.r_s, 0.0, self.ind)
        return np.where(t <= self.t_fast, fast, np.where(self.dies, 0.0, slow))

    def time_to(self, level):
        """The time to ``level`` A (``0 < level <= top``), in the fast part or the slow one (s)."""
        in_fast = level >= self.i_fast
        t1 = decay_time(np.minimum(level, self.top), self.top, self.r_f, self.v_f, self.ind)
        with np.errstate(divide="ignore", invalid="ignore"):
            t2 = self.t_fast + decay_time(np.minimum(level, self.i_fast), self.i_fast, self.r_s, 0.0, self.ind)
        return np.where(in_fast, t1, t2)

    def integrals(self, t):
        """``(q_fast, s_fast, q_slow, s_slow)`` over the first ``t`` s (A*s, A^2*s) and the
        time the current flows in them (s)."""
        q_f, s_f = decay_integrals(np.minimum(np.minimum(t, self.t_fast), self.to_zero), self.top,
                                   self.r_f, self.v_f, self.ind)
        slow = np.where(self.dies, 0.0, np.maximum(t - self.t_fast, 0.0))
        q_s, s_s = decay_integrals(slow, self.i_fast, self.r_s, 0.0, self.ind)
        return q_f, s_f, q_s, s_s, np.where(self.dies, np.minimum(t, self.to_zero), t)


def _mixed_orbit(control, i_lo, level, t_off, v_on, r_on, r_off, inductance, delay,
                 mixed: MixedDecay) -> CurrentModeSteadyState:
    """The current-mode orbit with a full bridge's mixed decay (a linear coil or a curve; an
    eddy term, on either: :func:`_eddy_mixed_orbit`): off at the
    upper/peak threshold ``level`` A (+ the delay's run-on), then fast for ``t_off`` s of a
    fixed off-time's ``mixed.fraction`` (``control`` ``"off_time"``) or, hysteretic, for the
    fixed one-shot time ``t_off`` s, the rest slow; the off-time ends after ``t_off`` s or at
    the lower threshold ``i_lo`` A (+ the delay)."""
    if isinstance(inductance, EddyCoil):
        return _eddy_mixed_orbit(control, i_lo, level, t_off, v_on, r_on, r_off, inductance, delay, mixed)
    # (a curve: the same segments, each the curve's exact quadrature through coildrive.model.rl)
    i_lo, level, t_off, v_on, r_on, r_off, delay, r_f, v_f, ind = _broadcast(
        (i_lo, level, t_off, v_on, r_on, r_off, delay, mixed.r_fast, mixed.v_fast), inductance)
    a = v_on / r_on
    regulated = level < a
    pk = np.where(regulated, level, 0.5 * a)
    top = rise_current(delay, pk, v_on, r_on, ind)                     # run-on past the threshold
    hyst = control == "hysteretic"
    path = MixedPath(top, t_off if hyst else mixed.fraction * t_off, r_f, v_f, r_off, ind)
    if hyst:
        lo = np.clip(i_lo, 1e-300, pk)
        t_off = path.time_to(lo) + delay
    bottom = path.current(t_off)
    t_on = rise_time(pk, np.minimum(bottom, pk), v_on, r_on, ind) + delay
    q_f, s_f, q_s, s_s, conduction = path.integrals(t_off)
    bottom, top, t_on, t_off, conduction = _unregulated(bottom, top, t_on, t_off, conduction, a,
                                                        regulated)
    q_on, s_on = rise_integrals(t_on, bottom, v_on, r_on, ind)
    q_f, s_f, q_s, s_s = (np.where(regulated, x, 0.0) for x in (q_f, s_f, q_s, s_s))
    return _state(bottom, top, t_on, t_off, conduction, q_on, s_on, q_f + q_s, s_f + s_s, regulated,
                  charge_fast=q_f, square_fast=s_f,
                  fast_time=np.where(regulated, np.minimum(path.t_fast, t_off), 0.0))


# ------------------------------------------------------------------- an eddy-current term
def _eddy_mixed_orbit(control, i_lo, level, t_off, v_on, r_on, r_s, e: EddyCoil, delay,
                      mixed: MixedDecay) -> CurrentModeSteadyState:
    """:func:`_mixed_orbit` with an eddy term on a linear or a curve's magnetising branch
    (module docstring; the branch's segments are :mod:`coildrive.model.eddy`'s, exact on
    either): the thresholds on the sensed current as magnetising currents of the loop
    that conducts there; the fast part's terminal current blocks at ``i_m = V_f / R_e``
    and the flux then dies through ``R_e`` (:func:`coildrive.model.eddy_mixed.fast_part`),
    the slow part (Q2 + Q4, nothing opposing) never blocks. The off-time starts at the
    peak, so the orbit needs no fixed point."""
    from .eddy_mixed import _assemble, fast_part

    i_lo, level, t_off, v_on, r_on, r_s, delay, e = _broadcast(
        (i_lo, level, t_off, v_on, r_on, r_s, delay), e)
    r_f, v_f = np.broadcast_arrays(np.asarray(mixed.r_fast, float), np.asarray(mixed.v_fast, float),
                                   level)[:2]
    re_, mag = e.resistance, e.magnetising
    rs_t = eddy.thevenin(0.0, r_s, re_)[1]
    a = v_on / r_on
    m_pk = sensed_threshold(level, v_on, r_on, re_)
    hyst = control == "hysteretic"
    m_lo_f = sensed_threshold(i_lo, -v_f, r_f, re_)     # the lower threshold met in the fast part
    # the turn-off step alone passes the threshold (hysteretic: the fast path's first
    # sensed current at or below I_lo; off-time: the switch-on step above I_pk)
    chatter = (level < a) & ((m_lo_f >= m_pk) if hyst else (m_pk <= 0.0))
    regulated = (level < a) & ~chatter
    pk = np.where(regulated, m_pk, 0.5 * a)
    top = eddy.rise_current(delay, pk, v_on, r_on, e)                     # run-on past the threshold
    t_fast = t_off if hyst else mixed.fraction * t_off                     # the fast part's own time
    c_full = fast_part(e, t_fast, top, r_f, v_f)[0]                         # i_m at the fast part's end
    if hyst:   # the off-time ends at the lower threshold (+ the delay), in the fast part or the slow
        m_lo_s = sensed_threshold(i_lo, 0.0, r_s, re_)
        with np.errstate(divide="ignore", invalid="ignore"):
            t1 = eddy.decay_time(np.clip(m_lo_f, 1e-300, None), top, r_f, v_f, e)
            t2 = t_fast + np.where(c_full > m_lo_s, eddy.branch_time(mag, c_full, np.minimum(m_lo_s, c_full),
                                                                     0.0, rs_t), 0.0)
        in_fast = (m_lo_f > 0) & (t1 <= t_fast)
        t_off = np.where(regulated, np.where(in_fast, t1, t2), 0.0) + delay
    t_f = np.minimum(t_off, t_fast)
    c, tc, q_f, s_f, w_f, sm_f = fast_part(e, t_f, top, r_f, v_f)
    t_s = np.maximum(t_off - t_fast, 0.0)
    bottom = eddy.branch_current(mag, t_s, c, 0.0, rs_t)
    slow = eddy.branch_integrals(mag, t_s, c, bottom, 0.0, rs_t)
    t_on = eddy.rise_time(pk, np.minimum(bottom, pk), v_on, r_on, e) + delay
    vt_on, rt_on = eddy.thevenin(v_on, r_on, re_)
    on = eddy.branch_integrals(mag, t_on, bottom, top, vt_on, rt_on)
    rows = _assemble(tc, bottom, top, c, on, None, slow, t_f, t_on, t_s, v_on, r_on, r_s, v_f, r_f, re_,
                     (q_f, s_f, w_f, sm_f))
    (_, _, _, blocked, conduction, q_on, s_on, q_f, s_f, q_s, s_s, t_min, t_max, w, sm) = rows
    bottom, top, t_on, t_off, conduction = _unregulated(bottom, top, t_on, t_off, conduction, a, regulated)
    # unregulated: the coil carries V/R_on, no branch voltage and so no eddy current
    q_on, s_on = np.where(regulated, q_on, a * t_on), np.where(regulated, s_on, a * a * t_on)
    sm = np.where(regulated, sm, a * a * t_on)
    q_f, s_f, q_s, s_s, w = (np.where(regulated, x, 0.0) for x in (q_f, s_f, q_s, s_s, w))
    t_max, t_min = np.where(regulated, t_max, a), np.where(regulated, t_min, a)
    st = _state(bottom, top, t_on, t_off, conduction, q_on, s_on, q_f + q_s, s_f + s_s, regulated,
                charge_fast=q_f, square_fast=s_f, terminal_min=t_min, terminal_max=t_max, eddy_energy=w,
                chatter=chatter, fast_time=np.where(regulated, t_f, 0.0))
    return dataclasses.replace(st, ripple=t_max - t_min, dcm=regulated & (blocked > 0.5),
                               magnetising_rms=np.sqrt(np.maximum(sm / st.period, 0.0)))


def sensed_threshold(level, v, r, r_e):
    """The magnetising current (A) at which the sensed (terminal) current of a loop
    conducting ``v`` V through ``r`` ohm is ``level`` A: ``((r + R_e) level - v) / R_e``
    (for the freewheel loop ``v = -V_off``)."""
    return ((np.asarray(r, float) + r_e) * np.asarray(level, float) - np.asarray(v, float)) / r_e


def _eddy_hysteretic(i_lo, i_hi, v_on, r_on, r_off, v_off, e: EddyCoil, delay):
    """:func:`hysteretic_steady_state` with an eddy term (module docstring): the band's
    ends as magnetising currents, each segment the branch's exact one."""
    r_e = e.resistance
    m_hi = sensed_threshold(i_hi, v_on, r_on, r_e)
    m_lo = sensed_threshold(i_lo, -v_off, r_off, r_e)
    reachable = i_hi < v_on / r_on
    chatter = reachable & (m_lo >= m_hi)
    regulated = reachable & ~chatter
    hi = np.where(regulated, m_hi, 0.5 * v_on / r_on)   # placeholders where not regulated
    lo = np.where(regulated, m_lo, 0.25 * v_on / r_on)
    late = np.any(delay > 0)
    top = eddy.rise_current(delay, hi, v_on, r_on, e) if late else hi  # run-on past I_hi
    down = eddy.decay_time(lo, top, r_off, v_off, e)                  # sensed: top -> I_lo
    if late:   # the run-on past I_lo (the freewheel may block in it: the flux then via R_e)
        bottom = eddy.decay_current(delay, lo, r_off, v_off, e)
        conduction = down + np.minimum(delay, eddy.conduction_time(lo, r_off, v_off, e))
    else:      # I_lo >= 0: the freewheel conducts down to it
        bottom, conduction = lo, down
    t_off = down + delay
    t_on = eddy.rise_time(hi, bottom, v_on, r_on, e) + delay
    return _eddy_finish(bottom, top, t_on, t_off, conduction, v_on, r_on, r_off, v_off, e,
                        regulated, chatter)


def _eddy_off_time(i_peak, t_off, v_on, r_on, r_off, v_off, e: EddyCoil, delay):
    """:func:`off_time_steady_state` with an eddy term: the peak threshold as a
    magnetising current; the fixed off time decays the flux through the freewheel path
    and, once it blocks, through ``R_e``."""
    r_e = e.resistance
    m_pk = sensed_threshold(i_peak, v_on, r_on, r_e)
    reachable = i_peak < v_on / r_on
    chatter = reachable & (m_pk <= 0.0)
    regulated = reachable & ~chatter
    pk = np.where(regulated, m_pk, 0.5 * v_on / r_on)
    top = eddy.rise_current(delay, pk, v_on, r_on, e)                 # run-on past I_pk
    bottom = eddy.decay_current(t_off, top, r_off, v_off, e)
    conduction = np.minimum(t_off, eddy.conduction_time(top, r_off, v_off, e))
    t_on = eddy.rise_time(pk, np.minimum(bottom, pk), v_on, r_on, e) + delay
    return _eddy_finish(bottom, top, t_on, t_off, conduction, v_on, r_on, r_off, v_off, e,
                        regulated, chatter)


def _eddy_finish(bottom, top, t_on, t_off, conduction, v_on, r_on, r_off, v_off, e: EddyCoil,
                 regulated, chatter):
    """The steady state from the magnetising current's orbit: the terminal current's
    integrals (on from ``bottom``, off from ``top`` through the whole off time: the
    eddy energy counts the flux's tail through ``R_e`` after the freewheel blocks)."""
    a = v_on / r_on
    bottom, top, t_on, t_off, conduction = _unregulated(bottom, top, t_on, t_off, conduction, a,
                                                        regulated)
    period = t_on + t_off
    r_e = e.resistance
    q_on, s_on, w_on, q_off, s_off, w_off, s_mag = _eddy_integrals(
        bottom, top, t_on, t_off, conduction, v_on, r_on, r_off, v_off, e)
    # unregulated: the coil carries V/R_on, no branch voltage and so no eddy current
    q_on, s_on = np.where(regulated, q_on, a * t_on), np.where(regulated, s_on, a * a * t_on)
    s_mag = np.where(regulated, s_mag, a * a * t_on)
    q_off, s_off = np.where(regulated, q_off, 0.0), np.where(regulated, s_off, 0.0)
    w = np.where(regulated, w_on + w_off, 0.0)
    dcm = regulated & (conduction < t_off)
    t_max = np.where(regulated, eddy.terminal(top, v_on, r_on, r_e), a)
    t_min = np.where(regulated, np.where(dcm, 0.0, eddy.terminal(bottom, -v_off, r_off, r_e)), a)
    mean = (q_on + q_off) / period
    rms = np.sqrt(np.maximum((s_on + s_off) / period, 0.0))
    return CurrentModeSteadyState(
        i_min=bottom, i_max=top, mean=mean, rms=rms, ripple=t_max - t_min, t_on=t_on, t_off=t_off,
        period=period, frequency=np.where(regulated, 1.0 / period, 0.0), duty=t_on / period,
        regulated=regulated, dcm=dcm, conduction_off=conduction, charge_on=q_on, square_on=s_on,
        charge_off=q_off, square_off=s_off, terminal_min=t_min, terminal_max=t_max, eddy_energy=w,
        chatter=chatter, magnetising_rms=np.sqrt(np.maximum(s_mag / period, 0.0)))


def _eddy_integrals(bottom, top, t_on, t_off, conduction, v_on, r_on, r_off, v_off, e: EddyCoil):
    """Terminal ``(q_on, s_on, w_on, q_off, s_off, w_off)`` (A*s, A^2*s, J of the eddy
    resistance) and the magnetising current's square integral over the period (A^2*s)
    of an orbit whose magnetising current's ends are known: on from
    ``bottom`` to ``top``; off, the freewheel conducting for ``conduction`` s from ``top``
    down to ``bottom`` or to ``V_off / R_e`` where it blocks, then the flux through
    ``R_e`` alone down to ``bottom``. From the end currents, a curve's segments need no
    current-after-time search (:func:`coildrive.model.eddy.branch_integrals`)."""
    r_e, mag = e.resistance, e.magnetising
    ib = eddy.block_current(v_off, r_e)
    vt_on, rt_on = eddy.thevenin(v_on, r_on, r_e)
    vt_off, rt_off = eddy.thevenin(-v_off, r_off, r_e)
    stop = np.where(top > ib, np.maximum(bottom, ib), top)   # where the conduction ends
    with np.errstate(invalid="ignore"):
        qm, sm = eddy.branch_integrals(mag, t_on, bottom, top, vt_on, rt_on)
        qm_off, sm_off = eddy.branch_integrals(mag, conduction, top, stop, vt_off, rt_off)
        tail = bottom < stop
        _, s_tail = eddy.branch_integrals(mag, np.where(tail, t_off - conduction, 0.0),
                                          np.where(tail, stop, 1.0), np.where(tail, bottom, 1.0),
                                          0.0, r_e)
    q_on, s_on, w_on = eddy._terminal_integrals(t_on, qm, sm, v_on, r_on, r_e)
    q_off, s_off, w_off = eddy._terminal_integrals(conduction, qm_off, sm_off, -v_off, r_off, r_e)
    s_tail = np.where(tail, s_tail, 0.0)
    w_off = w_off + r_e * s_tail
    return q_on, s_on, w_on, q_off, s_off, w_off, sm + sm_off + s_tail
