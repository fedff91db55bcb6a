"""The boosted peak with a saturating coil: the boost of :mod:`coildrive.model.boost` into a
flux-linkage curve (:mod:`coildrive.model.flux`) in place of ``L``.

* **From a converter** (no boost capacitance: an ideal source at ``V_b``) the peak is the
  curve's rise at the boost voltage, ``t(0 -> i) = int_0^i L_d(i') / (V_b - R i') di'``,
  exact by :mod:`coildrive.model.flux`'s segment quadrature (currents by its Newton
  inversion); the most it drives is ``V_b / R``.
* **From a capacitor** ``C_b`` charged to ``V_b``, with no source during the peak::

      L_d(i) di/dt = v_C - R i,    C_b dv_C/dt = -i,    i(0) = 0, v_C(0) = V_b

  has no closed form: it is :func:`coildrive.model.flux_bus.capacitor`'s run (the
  drooping bus's stepper with the source's terms taken out, split at the table's
  points, one run for every point), read by cubic Hermite interpolation. The current
  rises to its first maximum where ``v_C = R i`` (the first zero of ``v_C - R i`` in the
  record); the time to a threshold is its first crossing before that maximum. From a
  current other than zero (the compiled driver's emulated device switching the boost on
  mid-run) the same stepper runs from that state over the time asked (:func:`state`).

Energy, exact from the state either way (conservation of energy in the lumped loop): the
capacitor gives up ``1/2 C_b (V_b^2 - v_C^2)``; an ideal source ``V_b int i dt`` with
``int i dt = (V_b t - psi(i)) / R`` (from ``int (V_b - R i) dt = psi``). The field holds
``W = i psi(i) - W'(i)`` (:func:`coildrive.model.flux.energy`), so the copper's
``int i^2 dt = (E - W) / R`` needs no quadrature. No eddy term here (``R_e`` with a curve
is refused by the configuration).

Physics only; SI units (A, V, ohm, Wb, H, F, s, J); every function broadcasts over the
points of the boost.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import flux, flux_bus
from .flux import FluxCoil
from .rl import rise_current, rise_time


@dataclass(frozen=True)
class FluxBoost:
    """The boost at each point (arrays broadcast together): ``v_b`` V at switch-on, ``c``
    F (0 at every point: an ideal source), the peak's loop ``r`` ohm (with the boost
    path's own resistance) and the saturating ``coil`` (one scale per point)."""

    v_b: np.ndarray
    c: np.ndarray
    r: np.ndarray
    coil: FluxCoil

    #: no eddy term (the configuration refuses one with a curve)
    eddy = False

    @property
    def ideal(self) -> np.ndarray:
        return ~(self.c > 0)

    @property
    def source(self) -> bool:
        """True for an ideal source (no capacitance at any point)."""
        return bool(np.all(self.ideal))


def boost(v_b, c, r, coil: FluxCoil) -> FluxBoost:
    """The boost of the module docstring at each point; ``c`` all zero (a converter) or all
    positive (a capacitor)."""
    v_b, c, r, scale = np.broadcast_arrays(*(np.asarray(x, float) for x in (v_b, c, r, coil.scale)))
    if np.any(c > 0) and not np.all(c > 0):
        raise ValueError("a boost is a capacitor at every point or a source at every point")
    return FluxBoost(v_b, c, r, coil.with_scale(scale))


def _bus(b: FluxBoost) -> flux_bus.FluxBus:
    """The capacitor's run (cached by :mod:`coildrive.model.flux_bus`)."""
    return flux_bus.capacitor(b.v_b, b.c, b.r, b.coil)


def state(t, b: FluxBoost, i0=0.0) -> tuple[np.ndarray, np.ndarray]:
    """``(coil current A, boost voltage V)`` ``t`` s after switch-on, from the current ``i0``
    A then (0: from rest; the capacitor at ``b.v_b`` either way)."""
    if b.source:
        i = rise_current(t, i0, b.v_b, b.r, b.coil)
        return i, np.broadcast_to(b.v_b, np.shape(i)) + 0.0
    if np.any(np.asarray(i0, float) != 0.0):
        return flux_bus.state(t, _run_from(b, i0, float(np.max(t))))
    return flux_bus.state(t, _bus(b))


#: The last few runs from a current (the compiled driver's device asks one PWM period's
#: run several questions: :mod:`coildrive.bench.firmware_device`).
_FROM: dict = {}
FROM_CACHE = 8
#: Least steps of a run from a current.
FROM_STEPS = 64


def _run_from(b: FluxBoost, i0, t_need: float) -> flux_bus.FluxBus:
    """The capacitor's run from the current ``i0`` A (and ``b.v_b`` V) over at least
    ``t_need`` s: :func:`coildrive.model.flux_bus.run` from that state, in steps of at
    most a tenth of ``L_d,min / R`` and of the LC period at ``L_d,min`` (the least
    incremental inductance up to the higher of ``i0`` and ``V_b / R``) and of the least
    time through a table piece (:func:`coildrive.model.flux_bus.piece_time`)."""
    i0 = np.broadcast_to(np.asarray(i0, float), b.v_b.shape)
    key = (id(b.coil.curve), *(np.asarray(x, float).tobytes() for x in (b.v_b, b.c, b.r, b.coil.scale, i0)))
    hit = _FROM.get(key)
    if hit is not None and hit[0] >= t_need and hit[1].coil.curve is b.coil.curve:
        return hit[1]
    cv, scale = b.coil.curve, b.coil.scale
    top = np.maximum(i0, b.v_b / b.r)
    grid = np.linspace(0.0, 1.0, 65).reshape((-1,) + (1,) * top.ndim) * top
    l_lo = (scale * cv.incremental(grid)).min(axis=0)
    h = np.minimum(l_lo / b.r, 2.0 * np.pi * np.sqrt(l_lo * b.c)) / flux_bus.PER_TIME_CONSTANT
    h = float(np.min(np.minimum(h, flux_bus.piece_time(b.coil, b.v_b, top))))
    horizon = max(t_need, 0.0) * 1.25 + 1e-15
    n = int(np.clip(np.ceil(horizon / h), FROM_STEPS, flux_bus.MAX_STEPS))
    k0 = np.clip(np.searchsorted(cv.current, i0, side="right") - 1, 0, cv.base.size - 1)
    di0 = (b.v_b - b.r * i0) / (scale * cv.incremental(i0))     # the rates at the start, as run's rows
    start = flux_bus.Record(*(np.asarray(x, float)[None] for x in (np.zeros_like(i0), i0, b.v_b, di0, -i0 / b.c)),
                            k=k0)
    fb = flux_bus.FluxBus(b.v_b, np.zeros_like(b.v_b), b.c, b.r, b.coil, b.v_b / b.r, False)
    fb = fb.with_record(flux_bus.run(fb, [(n, horizon / n)], start))
    if len(_FROM) >= FROM_CACHE:
        _FROM.pop(next(iter(_FROM)))
    _FROM[key] = (horizon, fb)
    return fb


def terminal(i, v, b: FluxBoost) -> np.ndarray:
    """The sensed current (A): the coil current itself (no eddy term)."""
    return np.asarray(i, float)


def current(t, b: FluxBoost, sensed: bool = False) -> np.ndarray:
    """The coil current (A) ``t`` s after switch-on from rest (``sensed``: the same)."""
    return state(t, b)[0]


def peak_time(b: FluxBoost, sensed: bool = False) -> np.ndarray:
    """When the current has its first maximum (s; ``inf`` for an ideal source, and where
    the capacitor's run holds none): the first zero of ``v_C - R i`` from above."""
    if b.source:
        return np.full(b.v_b.shape, np.inf)
    fb = _bus(b)
    for need in (None, np.inf):      # the rise, then the whole horizon where it holds no maximum
        t0, h, i0, i1, di0, di1, v0, v1, dv0, dv1 = flux_bus.segments(fb.record(t_need=need))
        t, found = flux_bus.first_crossing(t0, h, v0 - b.r * i0, v1 - b.r * i1, dv0 - b.r * di0,
                                           dv1 - b.r * di1, 0.0, rising=False)
        if np.all(found):
            break
    return np.where(found, t, np.inf)


def highest_current(b: FluxBoost, sensed: bool = False) -> np.ndarray:
    """The most current the boost drives (A): its first maximum (the run's highest where
    it holds none), or ``V_b / R`` for an ideal source."""
    if b.source:
        return b.v_b / b.r
    t = peak_time(b)
    top = np.max(_bus(b).record().i, axis=0)
    return np.where(np.isfinite(t), current(np.where(np.isfinite(t), t, 0.0), b), top)


def threshold_time(i_target, b: FluxBoost, sensed: bool = False) -> np.ndarray:
    """Time (s) from switch-on to ``i_target`` A (``inf`` where the boost never drives it
    there): the exact quadrature for an ideal source, else the capacitor's run's first
    crossing before the first maximum."""
    target = np.broadcast_to(np.asarray(i_target, float), b.v_b.shape)
    if b.source:
        return np.where(target <= 0, 0.0, rise_time(target, 0.0, b.v_b, b.r, b.coil))
    fb = _bus(b)
    rec = fb.record(i_need=target)
    t, found = flux_bus.first_crossing(*flux_bus.segments(rec)[:6], target, rising=True, before=peak_time(b))
    return np.where(target <= 0, 0.0, np.where(found, t, np.inf))


def energy_drawn(t, b: FluxBoost) -> np.ndarray:
    """Energy (J) the boost gives in the first ``t`` s: ``1/2 C (V_b^2 - v_C^2)``, or for an
    ideal source ``V_b (V_b t - psi(i)) / R``."""
    i, v = state(t, b)
    if b.source:
        return b.v_b * (b.v_b * np.asarray(t, float) - flux.linkage(b.coil, i)) / b.r
    return 0.5 * b.c * (b.v_b**2 - v**2)


def square_integral(t, b: FluxBoost) -> np.ndarray:
    """``int_0^t i^2 dt`` (A^2 s) of the rise from rest: ``(E_drawn(t) - W(i(t))) / R``, the
    field's energy ``W = i psi - W'`` (module docstring)."""
    i = state(t, b)[0]
    return (energy_drawn(t, b) - flux.energy(b.coil, i)) / b.r


def eddy_loss(t, b: FluxBoost) -> np.ndarray:
    """J an eddy resistance takes: none here (0 at every point)."""
    return np.zeros(np.broadcast(np.asarray(t, float), b.v_b).shape)
