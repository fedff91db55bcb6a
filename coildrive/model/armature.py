"""Moving-armature dynamics, batched over operating points (numpy only, no scipy).

State per point: flux linkage ``lambda`` (V*s), gap ``x`` (m; ``stroke`` open, 0 seated),
velocity ``v = dx/dt`` (m/s; negative while closing), and two running integrals
``q = int i dt`` (A*s) and ``sq = int i^2 dt`` (A^2*s) for the energies. With
``L(x) = L_c / (1 + beta x)`` (see :mod:`coildrive.model.magnet`)::

    i          = lambda (1 + beta x) / L_c
    dlambda/dt = V_on - R_on i                    switch on
               = -(R_off i + V_off)               switch off, while i > 0 (the diode
                                                  blocks: lambda stays 0 once there)
    m dv/dt    = preload + rate (stroke - x) + load - lambda^2 beta / (2 L_c) - c v

``V = R i + L(x) di/dt + i (dL/dx) dx/dt`` is the same electrical law written for
``lambda = L(x) i``; integrating ``lambda`` keeps the state smooth through the fast
change of ``L`` near the seat, and makes the magnetic force independent of the gap.

With an eddy resistance ``R_e`` across the magnetising branch (``ArmatureParams.eddy``,
:mod:`coildrive.model.eddy`) ``lambda`` and ``i`` are the branch's, the force follows
them, and the branch sees the loop's Thevenin pair: ``dlambda/dt = V R_e/(R + R_e) -
R R_e/(R + R_e) i`` on and while the freewheel conducts (``V = -V_off``, ``R = R_off``);
the terminal current ``(V + R_e i)/(R + R_e)`` is what ``q``, ``sq`` integrate (switched
on from a drooping bus, ``V`` is the bulk capacitor's voltage, a state). Where it
reaches zero the freewheel blocks (an event of the steppers) and ``dlambda/dt = -R_e i``:
the flux outlasts the terminal current.

End stops: at ``x = 0`` the armature stops dead (or rebounds with ``v -> -e v`` when a
restitution ``e`` is given; bouncing ends once the rebound is below
:data:`REST_FRACTION` of the first impact speed); at ``x = stroke`` it stops dead. At a
stop it stays while the net force pushes it into the stop.

While the armature rests at a stop, ``L`` is constant and the current follows the
closed-form RL segments of :mod:`coildrive.model.rl`; only the motion is time-stepped.

The equations are integrated by :mod:`coildrive.model.armature_flight` (the batched
Dormand-Prince and Rosenbrock steppers, and their one-point form); the pull-in, release
and late-release runs over many points are :mod:`coildrive.model.armature_runs`; one
actuation as a time series, and the scipy reference, :mod:`coildrive.model.armature_sim`.
This module is the model those share: the parameters of a point, the forces, the
currents and time scales, and the outcome codes.

Units: SI throughout (V, A, ohm, H, m, kg, N, s).
"""

from __future__ import annotations

import dataclasses
import functools
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .magnet import fit_gap, start_current, stay_current, stroke_current

if TYPE_CHECKING:
    from .gap_curves import GapCurves

#: Bouncing on the seat ends when the rebound speed is below this fraction of the first
#: impact speed (the rebound then carries under 1e-6 of the impact energy).
REST_FRACTION = 1e-3
#: Most bounces followed on the seat before the armature is taken as seated.
MAX_BOUNCES = 100
#: Integration bound, in multiples of the slowest electrical and mechanical time scales
#: of a point (see :func:`pull_in`): past it an armature that has not arrived is stuck.
BOUND_FACTOR = 20.0

# Flight end codes
RUNNING, SEAT, OPEN, ZERO, BOUND = 0, 1, 2, 3, 4
#: A flight's end where an armature held at its stop (``fly(held=...)``) reached the asked
#: flux linkage (``flux_to``): the current that starts it off the stop.
START = 5
#: A flight's end where the coil's current rose to the asked current (``fly(current_to=...)``):
#: a boosted peak's threshold, where the firmware ends the peak.
TRIP = 6

# Outcome codes (PullInBatch.status, ReleaseBatch.status)
SEATED, NO_START, STALLED = 0, 1, 2
#: A boosted pull-in (``pull_in(trip=...)``) that reached its threshold before the seat.
TRIPPED = 3
OPENED, NOT_OPEN = 0, 2


@dataclass(frozen=True)
class ArmatureParams:
    """Everything the armature model needs at a set of points (1-D arrays, same length).

    Electrical: ``v_on`` V and ``r_on`` ohm with the switch on; ``r_off`` ohm and
    ``v_off`` V (> 0) while freewheeling. Magnetic: ``l_closed`` H and ``beta`` 1/m of
    ``L(x) = l_closed / (1 + beta x)``. Mechanical: ``stroke`` m, ``mass`` kg,
    ``preload`` N (spring at the open position), ``rate`` N/m, ``load`` N (pushes open),
    ``damping`` N*s/m, ``restitution`` (0..1, at the seat).
    """

    v_on: np.ndarray
    r_on: np.ndarray
    r_off: np.ndarray
    v_off: np.ndarray
    l_closed: np.ndarray
    beta: np.ndarray
    stroke: np.ndarray
    mass: np.ndarray
    preload: np.ndarray
    rate: np.ndarray
    load: np.ndarray
    damping: np.ndarray
    restitution: np.ndarray
    #: The drooping bus (:mod:`coildrive.model.supply`): the source resistance ohm and the
    #: bulk capacitance F behind the switch; ``v_on`` is then the source's voltage. 0 (the
    #: default): a stiff bus at ``v_on``.
    source_resistance: np.ndarray
    capacitance: np.ndarray
    #: A saturating coil's open and seated curves (:mod:`coildrive.model.gap_curves`);
    #: ``None``: the linear ``L(x)``. With curves ``l_closed`` and ``beta`` are the
    #: small-signal values (time scales and error control only).
    curves: "GapCurves | None" = None
    #: An eddy resistance across the magnetising branch, ohm per point
    #: (:mod:`coildrive.model.eddy`); ``None``: no eddy term. With it ``lambda`` is the
    #: magnetising branch's flux, :meth:`current` its current (the force's), and the
    #: terminal current (:meth:`terminal`) is what the loop, the freewheel and ``q``,
    #: ``sq`` carry.
    eddy: np.ndarray | None = None
    #: A clamp across the switch on the drooping bus (``droops``): its voltage, V per
    #: point. Switched off, the coil's current flows on from the bus through the clamp, the
    #: coil seeing ``u - V_clamp`` (``u`` the bus, which feeds it) in place of ``-V_off``,
    #: until it reaches zero (:meth:`clamped`); ``None``: the off-times draw nothing from the
    #: bus (a path across the coil).
    clamp: np.ndarray | None = None

    @staticmethod
    def make(curves: "GapCurves | None" = None, eddy=None, **values) -> "ArmatureParams":
        """Broadcast keyword values (floats or arrays) to 1-D arrays of one length
        (``eddy``: the eddy resistance in ohm, or ``None``/0 for none;
        ``source_resistance`` and ``capacitance`` default to 0: a stiff bus)."""
        values = {"source_resistance": 0.0, "capacitance": 0.0, **values}
        names = [f.name for f in ArmatureParams.__dataclass_fields__.values()
                 if f.name not in ("curves", "eddy", "clamp")]
        unknown = set(values) - set(names)
        if unknown:
            raise TypeError(f"unknown armature parameter(s): {', '.join(sorted(unknown))}")
        arrays = np.broadcast_arrays(*(np.atleast_1d(np.asarray(values[n], float)) for n in names))
        out = {n: np.array(a, float).ravel() for n, a in zip(names, arrays)}
        r_e = None
        if eddy is not None and np.any(np.asarray(eddy, float) > 0):
            r_e = np.array(np.broadcast_to(np.asarray(eddy, float), out["v_on"].shape), float)
        return ArmatureParams(**out, curves=curves, eddy=r_e)

    @property
    def arrays(self) -> tuple[str, ...]:
        """The names of the per-point array fields (all but ``curves``, ``eddy`` and ``clamp``)."""
        return tuple(n for n in self.__dataclass_fields__ if n not in ("curves", "eddy", "clamp"))

    def __len__(self) -> int:
        return self.v_on.size

    def same_points(self, other: "ArmatureParams") -> bool:
        """Whether ``other`` holds the same points (every array, and the same curves)."""
        a, b = self.curves, other.curves
        if (a is None) != (b is None) or (a is not None and not (
                a.open is b.open and a.seated is b.seated and np.array_equal(a.scale, b.scale))):
            return False
        for a, b in ((self.eddy, other.eddy), (self.clamp, other.clamp)):
            if (a is None) != (b is None) or (a is not None and not np.array_equal(a, b)):
                return False
        return all(np.array_equal(getattr(self, f), getattr(other, f)) for f in self.arrays)

    def take(self, k) -> "ArmatureParams":
        """The parameters of point(s) ``k`` (an index, slice or mask)."""
        return ArmatureParams(**{n: np.atleast_1d(getattr(self, n)[k]) for n in self.arrays},
                              curves=None if self.curves is None else self.curves[k],
                              eddy=None if self.eddy is None else np.atleast_1d(self.eddy[k]),
                              clamp=None if self.clamp is None else np.atleast_1d(self.clamp[k]))

    def clamped(self) -> "ArmatureParams":
        """These points (on the drooping bus) with their off-times through a clamp across the
        switch, drawing from the bus: ``clamp = v_on + v_off`` (a clamp's ``V_off = V_clamp -
        V_bus``, :mod:`coildrive.model.circuit`, with ``v_on`` the bus it was taken at)."""
        return dataclasses.replace(self, clamp=self.v_on + self.v_off)

    @property
    def droops(self) -> bool:
        """True when the bus droops behind a source resistance (then the state carries the
        capacitor's voltage, a sixth row, while the switch is on it feeds the coil)."""
        return bool(np.any(self.source_resistance > 0))

    def stiff_bus(self) -> "ArmatureParams":
        """These points on a stiff bus at ``v_on`` (the hold's treatment of the droop)."""
        zero = np.zeros_like(self.v_on)
        return dataclasses.replace(self, source_resistance=zero, capacitance=zero)

    def bus(self, open_: bool):
        """The drooping bus's linear circuit (:func:`coildrive.model.supply.bus`) with the
        armature resting on the open stop (``open_``) or on the seat."""
        from .supply import bus
        return bus(self.v_on, self.source_resistance, self.capacitance, self.r_on,
                   self.l_open if open_ else self.l_closed, self.eddy)

    @property
    def l_open(self) -> np.ndarray:
        """Inductance at the open stop in H (small-signal with curves)."""
        return self.l_closed / (1.0 + self.beta * self.stroke)

    @property
    def coil_open(self):
        """The open coil for the closed-form segments (:mod:`coildrive.model.rl`): H, or
        the open curve's :class:`~coildrive.model.flux.FluxCoil` (either wrapped in an
        :class:`~coildrive.model.eddy.EddyCoil` with an eddy term)."""
        return self._with_eddy(self.l_open if self.curves is None else self.curves.coil_open)

    @property
    def coil_closed(self):
        """The seated coil for the closed-form segments: H, or the seated curve's coil
        (wrapped in an :class:`~coildrive.model.eddy.EddyCoil` with an eddy term)."""
        return self._with_eddy(self.l_closed if self.curves is None else self.curves.coil_seated)

    def _with_eddy(self, branch):
        if self.eddy is None:
            return branch
        from .eddy import EddyCoil
        return EddyCoil(branch, self.eddy)

    def terminal(self, i_m, on, r_off=None, v_off=None, bus=None) -> np.ndarray:
        """Terminal current in A at magnetising current ``i_m`` A: with the switch ``on``
        ``(V_on + R_e i_m) / (R_on + R_e)``, off ``(R_e i_m - V_off) / (R_off + R_e)``
        while the freewheel conducts and 0 once that would be negative (the path
        blocks). Without an eddy term the coil's current itself (0 or more).
        ``r_off``/``v_off``: another freewheel path's (split decay's fast path);
        ``bus``: on a drooping bus the capacitor's voltage V in place of ``V_on`` (and with a
        clamp across the switch, :attr:`clamp`, off ``V_off = V_clamp - bus``)."""
        i_m = np.asarray(i_m, float)
        if self.eddy is None:
            return np.maximum(i_m, 0.0)
        r_off = self.r_off if r_off is None else r_off
        if v_off is None and self.clamp is not None and bus is not None:
            v_off = self.clamp - np.asarray(bus, float)
        v_off = self.v_off if v_off is None else v_off
        re_ = self.eddy
        v_on = self.v_on if bus is None else np.asarray(bus, float)
        return np.where(on, (v_on + re_ * i_m) / (self.r_on + re_),
                        np.maximum((re_ * i_m - v_off) / (r_off + re_), 0.0))

    @property
    def block_current(self) -> np.ndarray:
        """Magnetising current A below which the freewheel path blocks (terminal current
        zero): ``V_off / R_e``; 0 without an eddy term."""
        if self.eddy is None:
            return np.zeros_like(self.v_off)
        return np.maximum(self.v_off, 0.0) / self.eddy

    def flux_open(self, i) -> np.ndarray:
        """Flux linkage Wb at ``i`` A on the open stop."""
        return self.l_open * i if self.curves is None else self.curves.flux_open(i)

    def flux_closed(self, i) -> np.ndarray:
        """Flux linkage Wb at ``i`` A on the seat."""
        return self.l_closed * i if self.curves is None else self.curves.flux_seated(i)

    @functools.cached_property
    def start_current(self) -> np.ndarray:
        """Least current in A that starts the armature off the open stop."""
        if self.curves is not None:
            return self.curves.balance_current(self.stroke, self.opening_force(self.stroke))
        return np.atleast_1d(start_current(self.l_closed, self.beta, self.stroke, self.preload,
                                           self.rate, self.load))

    @functools.cached_property
    def stay_current(self) -> np.ndarray:
        """Least current in A that keeps the armature seated (its drop-out current)."""
        if self.curves is not None:
            return self.curves.balance_current(0.0, self.opening_force(0.0))
        return np.atleast_1d(stay_current(self.l_closed, self.beta, self.stroke, self.preload,
                                          self.rate, self.load))

    def stroke_current(self):
        """Least steady current A whose force beats spring + load over the whole stroke,
        and the gap m where it is needed (:func:`coildrive.model.magnet.stroke_current`)."""
        if self.curves is not None:
            return self.curves.stroke_current(self.opening_force)
        cur, gap = stroke_current(self.l_closed, self.beta, self.stroke, self.preload,
                                  self.rate, self.load)
        return np.atleast_1d(cur), np.atleast_1d(gap)

    def current(self, lam, x) -> np.ndarray:
        """Coil current in A from flux linkage V*s and gap m."""
        if self.curves is not None:
            return self.curves.current(lam, x)
        return lam * (1.0 + self.beta * x) / self.l_closed

    def closing_force(self, lam) -> np.ndarray:
        """Magnetic force in N pulling shut at flux linkage ``lam``: ``lam^2 beta / (2 L_c)``
        (the co-energy force of the curves with them)."""
        if self.curves is not None:
            return self.curves.closing_force(lam)
        return lam * lam * self.beta / (2.0 * self.l_closed)

    def field_energy(self, lam, x) -> np.ndarray:
        """Energy J stored in the field at flux linkage ``lam`` V*s and gap ``x`` m."""
        if self.curves is not None:
            return self.curves.field_energy(lam, x)
        return 0.5 * lam * self.current(lam, x)

    def opening_force(self, x) -> np.ndarray:
        """Spring + load force in N pushing open at gap ``x``."""
        return self.preload + self.rate * (self.stroke - x) + self.load

    @property
    def opening_work(self) -> np.ndarray:
        """The most work in J the spring and the load can do on the way from the seat to any
        gap: ``max over x in [0, stroke] of int_0^x opening_force dx'`` -- the whole stroke's
        ``(preload + load) stroke + rate stroke^2 / 2`` while the force pushes open all the
        way, else up to the gap where it falls to zero (0 if it never pushes open). The
        most mechanical energy the armature can hand to the circuit after resting on the
        seat (its kinetic energy and the field's store are never negative)."""
        a = self.preload + self.load                      # the force at the open stop
        r = self.rate
        top = a + r * self.stroke                         # the force on the seat
        with np.errstate(divide="ignore", invalid="ignore"):
            zero = np.where(r > 0, top / np.where(r > 0, r, 1.0), np.where(a >= 0, np.inf, 0.0))
        x = np.clip(zero, 0.0, self.stroke)
        return np.maximum(top * x - 0.5 * r * x * x, 0.0)

    def reference_scales(self) -> np.ndarray:
        """Scales of (lambda, x, v) for the error control: V*s, m, m/s."""
        i_ref = np.maximum(self.v_on / self.r_on, self.stay_current)
        f_ref = self.preload + self.rate * self.stroke + np.abs(self.load)
        v_ref = np.sqrt(2.0 * np.maximum(f_ref, 1e-12) * self.stroke / self.mass)
        return np.stack([self.l_closed * i_ref, self.stroke, v_ref])


def params_from_loop(arm, lp, l_factor, eddy_resistance: float = 0.0, *,
                     bus: tuple[float, float] = (0.0, 0.0)) -> ArmatureParams:
    """:class:`ArmatureParams` at operating points from a drive's ``[armature]`` (an
    :class:`~coildrive.config.Armature`) and a :class:`~coildrive.model.circuit.Loop`.

    ``l_factor`` (the inductance tolerance) scales both measured inductances, so the
    equivalent gap stays and the force constant scales with it. ``eddy_resistance``
    (ohm, ``[coil] eddy_resistance``; 0 = none): the eddy term across the magnetising
    branch (:mod:`coildrive.model.eddy`). ``bus``: the supply's ``(source_resistance ohm,
    capacitance F)``, ``(0, 0)`` for a stiff bus.
    """
    l_closed, beta = fit_gap(arm.inductance_open, arm.inductance_closed, arm.stroke)
    p = ArmatureParams.make(
        v_on=lp.v_on, r_on=lp.r_on, r_off=lp.r_off, v_off=lp.v_off,
        l_closed=l_closed * np.asarray(l_factor, float), beta=beta, stroke=arm.stroke,
        mass=arm.mass, preload=arm.spring_preload, rate=arm.spring_rate, load=arm.load_force,
        damping=arm.damping, restitution=arm.restitution, eddy=eddy_resistance or None,
        source_resistance=bus[0], capacitance=bus[1])
    if not arm.open_current:
        return p
    from .flux import curve
    from .gap_curves import GapCurves

    scale = np.broadcast_to(np.asarray(l_factor, float), p.v_on.shape).astype(float)
    gap = GapCurves(curve(arm.open_current, arm.open_linkage),
                    curve(arm.seated_current, arm.seated_linkage), scale, p.stroke)
    return dataclasses.replace(p, curves=gap)


def time_bound(t0, l_closed, r, mass, stroke, damping, force):
    """Start + BOUND_FACTOR x (electrical time constant + free-flight and damped-travel
    times under ``force`` N)."""
    f = np.maximum(force, 1e-300)
    mech = np.sqrt(2.0 * mass * stroke / f) + damping * stroke / f
    return t0 + BOUND_FACTOR * (l_closed / r + mech)


# --------------------------------------------------------------------------- hold
#: The PWM ripple may be averaged by the armature's mass (force from the RMS current)
#: when the largest lift it could cause within one period is below this fraction of the
#: smaller of the stroke and the equivalent gap; otherwise the ripple bottom counts.
CHATTER_FRACTION = 0.01


def hold_force_current(p: ArmatureParams, i_min, rms, period):
    """The current whose force holds the armature during a PWM hold, A, and the lift
    bound, m.

    The magnetic force goes with ``i^2``, so over one period the seat feels
    ``(|dL/dx| / 2) * I_rms^2`` on average. The armature, at rest on the seat, can only
    move off it while the current is below the stay current; its opening acceleration is
    at most ``(spring + load at the seat) / m``, so in one period it lifts by at most
    ``a T^2 / 2``. Where that bound is below :data:`CHATTER_FRACTION` of
    ``min(stroke, g0)`` the mass averages the ripple and the RMS current counts; where it
    is not, the ripple bottom ``i_min`` must hold the armature on its own.
    """
    i_min = np.asarray(i_min, float)
    below = i_min < p.stay_current
    accel = p.opening_force(0.0) / p.mass
    lift = np.where(below, 0.5 * accel * np.asarray(period, float) ** 2, 0.0)
    with np.errstate(divide="ignore"):
        g0 = np.where(p.beta > 0, 1.0 / np.where(p.beta > 0, p.beta, 1.0), np.inf)
    small = lift <= CHATTER_FRACTION * np.minimum(p.stroke, g0)
    return np.where(small, np.asarray(rms, float), i_min), lift
