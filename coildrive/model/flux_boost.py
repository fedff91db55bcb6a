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
``int i^2 dt = (E - W) / R`` needs no quadrature.

**With an eddy-current term** (a resistance ``R_e`` across the magnetising branch,
:mod:`coildrive.model.eddy`; ``k = R_e/(R + R_e)``, ``g_e = 1/R_e``) the state is the
magnetising current ``i_m`` (the flux, the force) and the capacitor feeds the terminal
current ``i = k (i_m + g_e v_C)`` (what the sense resistor reads)::

    L_d(i_m) di_m/dt = k (v_C - R i_m),    C_b dv_C/dt = -k (i_m + g_e v_C)

-- :func:`coildrive.model.flux_bus.equivalent` with no source (``R_s = inf``): the plain
circuit with the capacitor ``C_b/k``, the curve scaled by ``1/k`` and a 0 V source behind
``R_e``, stepped by the same ETDRK4 stepper from ``(i_m, v_C) = (i0, V_b)``
(:func:`_run_from`), over six times the first current maximum of the linear circuit at
that curve's largest incremental inductance (:func:`coildrive.model.rlc.first_peak`; the
eddy path only drains the capacitor sooner), continued where a point has not yet peaked.
The threshold is on the terminal current (``sensed``), the pull-in on the magnetising
current, each up to its own first maximum (the first zero of its slope: the recorded
rates are the Hermite cubics' end slopes, so the crest is the root of the step's
quadratic). The energy given is ``1/2 C_b (V_b^2 - v_C^2)`` as before; the copper's ``int
i^2 dt`` of the terminal current is each step's Hermite cubic squared, integrated by
4-point Gauss-Legendre (exact for its degree 6), and the eddy resistance's loss the
rest of the balance, ``E - W(i_m) - R int i^2 dt``. An ideal source with an eddy term is
the eddy coil's exact rise (:mod:`coildrive.model.eddy`: the curve's quadrature at the
Thevenin pair ``(k V_b, k R)``), its terminal integrals closed.

Physics only; SI units (A, V, ohm, Wb, H, F, s, J); every function broadcasts over the
points of the boost.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import flux, flux_bus
from .eddy import EddyCoil
from .flux import FluxCoil
from .rl import rise_current, rise_integrals, rise_time


@dataclass(frozen=True)
class FluxBoost:
    """The boost at each point (arrays broadcast together): ``v_b`` V at switch-on, ``c``
    F (0 at every point: an ideal source), the peak's loop ``r`` ohm (with the boost
    path's own resistance) and the saturating ``coil`` (one scale per point)."""

    v_b: np.ndarray
    c: np.ndarray
    r: np.ndarray
    coil: FluxCoil
    r_e: np.ndarray | None = None

    @property
    def eddy(self) -> bool:
        """True with an eddy resistance ``r_e`` ohm across the curve (module docstring)."""
        return self.r_e is not None

    @property
    def k(self) -> np.ndarray:
        """``R_e/(R + R_e)`` (1 without an eddy term)."""
        return np.ones_like(self.r) if self.r_e is None else self.r_e / (self.r + self.r_e)

    @property
    def g_e(self) -> np.ndarray | float:
        """The eddy conductance ``1/R_e`` S (0 without an eddy term)."""
        return 0.0 if self.r_e is None else 1.0 / self.r_e

    def eddy_coil(self) -> EddyCoil | FluxCoil:
        """The coil as :mod:`coildrive.model.rl` takes it (the curve with ``R_e`` across it)."""
        return self.coil if self.r_e is None else EddyCoil(self.coil, self.r_e)

    @property
    def ideal(self) -> np.ndarray:
        return ~(self.c > 0)

    @property
    def source(self) -> bool:
        """True for an ideal source (no capacitance at any point)."""
        return bool(np.all(self.ideal))


def boost(v_b, c, r, coil: FluxCoil, r_e=None) -> FluxBoost:
    """The boost of the module docstring at each point; ``c`` all zero (a converter) or all
    positive (a capacitor); ``r_e`` ohm an eddy resistance across the curve (``None``:
    none)."""
    v_b, c, r, scale, r_e_ = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                                   (v_b, c, r, coil.scale, np.inf if r_e is None else r_e)))
    if np.any(c > 0) and not np.all(c > 0):
        raise ValueError("a boost is a capacitor at every point or a source at every point")
    return FluxBoost(v_b, c, r, coil.with_scale(scale), None if r_e is None else r_e_ + 0.0)


def _bus(b: FluxBoost, t_need=None) -> flux_bus.FluxBus:
    """The capacitor's run from rest (cached by :mod:`coildrive.model.flux_bus`; with an
    eddy term :func:`_rest`'s), over at least ``t_need`` s where given."""
    if not b.eddy:
        return flux_bus.capacitor(b.v_b, b.c, b.r, b.coil)
    return _rest(b, 0.0 if t_need is None else float(np.max(t_need)))


#: With an eddy term, the runs from rest (:func:`_rest`) of the last few boosts.
_REST: dict = {}
#: The least steps of a run from rest over twice :func:`_rise_span`, and how many such
#: stretches it may add to reach every point's first maxima or a time asked.
RISE_STEPS = 500
EXTENSIONS = 12


def _rest(b: FluxBoost, t_need: float) -> flux_bus.FluxBus:
    """With an eddy term, the capacitor's run from rest (module docstring): stretches of
    the same steps (:func:`_start`'s, at least :data:`RISE_STEPS` over twice
    :func:`_rise_span`) until both currents have passed their first maximum at every
    point and the run reaches ``t_need`` s; kept for the last few boosts."""
    key = (id(b.coil.curve), b.v_b.shape,
           *(np.asarray(x, float).tobytes() for x in (b.v_b, b.c, b.r, b.coil.scale, b.r_e)))
    hit = _REST.get(key)
    if hit is None or hit[0].coil.curve is not b.coil.curve:
        fb, start, h = _start(b, np.zeros_like(b.v_b))
        span = 2.0 * _rise_span(b)
        n = int(np.clip(np.ceil(span / h), RISE_STEPS, flux_bus.MAX_STEPS))
        hit = [fb.with_record(start), span / n, n, False]     # (circuit, step s, steps, peaked)
        if len(_REST) >= FROM_CACHE:
            _REST.pop(next(iter(_REST)))
        _REST[key] = hit
    fb, dt, n = hit[:3]
    rec = fb.record()
    for _ in range(EXTENSIONS):
        if not hit[3]:
            hit[3] = rec.t.shape[0] > 1 and all(np.all(_crest(seg)[1]) for seg in (
                flux_bus.segments(rec)[:6], flux_bus.terminal_segments(rec, fb)))
        if hit[3] and rec.t[-1].min() >= t_need:
            break
        rec = flux_bus.run(fb, [(n, dt)], rec)
        fb.with_record(rec)
    return fb


def _rise_span(b: FluxBoost) -> float:
    """The first current maximum (s, the longest over the points) of the linear series
    circuit at the equivalent's largest incremental inductance below ``V_b/R`` (module
    docstring)."""
    from . import rlc
    cv, k = b.coil.curve, b.k
    grid = np.linspace(0.0, 1.0, 65).reshape((-1,) + (1,) * b.v_b.ndim) * (b.v_b / b.r)
    l_hi = (b.coil.scale * cv.incremental(grid)).max(axis=0) / k
    return float(np.max(rlc.first_peak(-b.c / k * b.v_b, 0.0, b.r, l_hi, b.c / k)))


def _crest(seg) -> tuple[np.ndarray, np.ndarray]:
    """``(time s, found)`` of a recorded quantity's first maximum (``seg``: the first six
    rows of :func:`coildrive.model.flux_bus.segments`): the first step whose end slope is
    not rising, at the root of its Hermite cubic's derivative (a quadratic whose end
    values are the recorded slopes); 0 where it starts falling."""
    t0, h, y0, y1, d0, d1 = seg
    hit = (d1 <= 0.0) & (h > 0)
    found = hit.any(axis=0)
    m = np.argmax(hit, axis=0)
    cols = np.arange(m.size).reshape(m.shape)
    pick = (m, cols) if m.ndim else (m,)
    y0, y1, d0, d1 = y0[pick], y1[pick], d0[pick], d1[pick]
    # the cubic's derivative a s^2 + b s + d0 on [0, 1]: the root where it turns down
    a = 6.0 * y0 + 3.0 * d0 - 6.0 * y1 + 3.0 * d1
    bb = -6.0 * y0 - 4.0 * d0 + 6.0 * y1 - 2.0 * d1
    with np.errstate(divide="ignore", invalid="ignore"):
        disc = np.sqrt(np.maximum(bb * bb - 4.0 * a * d0, 0.0))
        lin = -d0 / bb
        roots = [(-bb + disc) / (2.0 * a), (-bb - disc) / (2.0 * a)]
    s = np.where(np.abs(a) > 1e-12 * (np.abs(bb) + np.abs(d0)), np.inf, lin)
    for rt in roots:
        s = np.where(np.abs(a) > 1e-12 * (np.abs(bb) + np.abs(d0)),
                     np.minimum(s, np.where(np.isfinite(rt) & (rt >= 0) & (rt <= 1), rt, np.inf)), s)
    s = np.clip(np.where(np.isfinite(s), s, 1.0), 0.0, 1.0)
    t = np.where(d0 <= 0.0, t0[pick], t0[pick] + s * h[pick])
    return np.where(seg[4][0] <= 0.0, 0.0, t), found


def state(t, b: FluxBoost, i0=0.0) -> tuple[np.ndarray, np.ndarray]:
    """``(coil current A, boost voltage V)`` ``t`` s after switch-on, from the current ``i0``
    A then (0: from rest; the capacitor at ``b.v_b`` either way). With an eddy term the
    current is the magnetising current (:func:`terminal` the sensed one)."""
    if b.source:
        i = rise_current(t, i0, b.v_b, b.r, b.eddy_coil())
        return i, np.broadcast_to(b.v_b, np.shape(i)) + 0.0
    if np.any(np.asarray(i0, float) != 0.0):
        return flux_bus.state(t, _run_from(b, i0, float(np.max(t))))
    return flux_bus.state(t, _bus(b, t))


#: The last few runs from a current (the compiled driver's device asks one PWM period's
#: run several questions: :mod:`coildrive.bench.firmware_device`).
_FROM: dict = {}
FROM_CACHE = 8
#: Least steps of a run from a current.
FROM_STEPS = 64


def _run_from(b: FluxBoost, i0, t_need: float) -> flux_bus.FluxBus:
    """The capacitor's run from the current ``i0`` A (and ``b.v_b`` V) over at least
    ``t_need`` s (:func:`_start`'s steps, at least :data:`FROM_STEPS`)."""
    i0 = np.broadcast_to(np.asarray(i0, float), b.v_b.shape)
    key = (id(b.coil.curve), b.v_b.shape, *(np.asarray(x, float).tobytes() for x in
                                            (b.v_b, b.c, b.r, b.coil.scale, i0, np.inf if b.r_e is None else b.r_e)))
    hit = _FROM.get(key)
    if hit is not None and hit[0] >= t_need and hit[1].coil.curve is b.coil.curve:
        return hit[1]
    fb, start, h = _start(b, i0)
    horizon = max(t_need, 0.0) * 1.25 + 1e-15
    n = int(np.clip(np.ceil(horizon / h), FROM_STEPS, flux_bus.MAX_STEPS))
    fb = fb.with_record(flux_bus.run(fb, [(n, horizon / n)], start))
    if len(_FROM) >= FROM_CACHE:
        _FROM.pop(next(iter(_FROM)))
    _FROM[key] = (horizon, fb)
    return fb


def _start(b: FluxBoost, i0) -> tuple[flux_bus.FluxBus, flux_bus.Record, float]:
    """``(circuit, its first record row, longest step s)`` of the capacitor's run from the
    current ``i0`` A (with an eddy term the magnetising current, on
    :func:`coildrive.model.flux_bus.equivalent`'s plain circuit) and ``b.v_b`` V: steps of
    at most a tenth of ``L_d,min / R`` and of the LC period at ``L_d,min`` (the least
    incremental inductance up to the higher of ``i0`` and ``V_b / R``) and of the least
    time through a table piece (:func:`coildrive.model.flux_bus.piece_time`)."""
    if b.eddy:      # the plain circuit: C/k, the curve / k, 0 V behind R_e (module docstring)
        fb = flux_bus.equivalent(b.v_b, np.full_like(b.v_b, np.inf), b.c, b.r, b.coil, b.r_e)
    else:
        fb = flux_bus.FluxBus(b.v_b, np.zeros_like(b.v_b), b.c, b.r, b.coil, b.v_b / b.r, False)
    cv, scale, c = fb.coil.curve, fb.coil.scale, fb.c
    top = np.maximum(i0, b.v_b / b.r)
    grid = np.linspace(0.0, 1.0, 65).reshape((-1,) + (1,) * top.ndim) * top
    l_lo = (scale * cv.incremental(grid)).min(axis=0)
    h = np.minimum(l_lo / b.r, 2.0 * np.pi * np.sqrt(l_lo * c)) / flux_bus.PER_TIME_CONSTANT
    h = float(np.min(np.minimum(h, flux_bus.piece_time(fb.coil, b.v_b, top))))
    k0 = np.clip(np.searchsorted(cv.current, i0, side="right") - 1, 0, cv.base.size - 1)
    di0 = (b.v_b - b.r * i0) / (scale * cv.incremental(i0))     # the rates at the start, as run's rows
    dv0 = -(i0 + b.g_e * b.v_b) / c
    start = flux_bus.Record(*(np.asarray(x, float)[None] for x in (np.zeros_like(i0), i0, b.v_b, di0, dv0)),
                            k=k0)
    return fb, start, h


def terminal(i, v, b: FluxBoost) -> np.ndarray:
    """The sensed current (A) at magnetising current ``i`` A and boost ``v`` V: ``k (i +
    v/R_e)`` (the coil current itself without an eddy term)."""
    if not b.eddy:
        return np.asarray(i, float)
    return b.k * (np.asarray(i, float) + b.g_e * np.asarray(v, float))


def current(t, b: FluxBoost, sensed: bool = False) -> np.ndarray:
    """The (magnetising) coil current (A) ``t`` s after switch-on from rest; ``sensed``: the
    terminal current (the same without an eddy term)."""
    i, v = state(t, b)
    return terminal(i, v, b) if sensed else i


def _segments(b: FluxBoost, sensed: bool, rec=None):
    """The capacitor's run from rest as :func:`coildrive.model.flux_bus.segments`' first six
    rows, of the magnetising or (``sensed``) the terminal current."""
    fb = _bus(b)
    rec = fb.record() if rec is None else rec
    return flux_bus.terminal_segments(rec, fb) if sensed and b.eddy else flux_bus.segments(rec)[:6]


def peak_time(b: FluxBoost, sensed: bool = False) -> np.ndarray:
    """When the current (``sensed``: the terminal one) has its first maximum (s; ``inf``
    for an ideal source, and where the capacitor's run holds none): without an eddy term
    the first zero of ``v_C - R i`` from above; with one the crest of the recorded
    current (:func:`_crest`)."""
    if b.source:
        return np.full(b.v_b.shape, np.inf)
    if b.eddy:
        t, found = _crest(_segments(b, sensed))
        return np.where(found, t, np.inf)
    fb = _bus(b)
    for need in (None, np.inf):      # the rise, then the whole horizon where it holds no maximum
        t0, h, i0, i1, di0, di1, v0, v1, dv0, dv1 = flux_bus.segments(fb.record(t_need=need))
        t, found = flux_bus.first_crossing(t0, h, v0 - b.r * i0, v1 - b.r * i1, dv0 - b.r * di0,
                                           dv1 - b.r * di1, 0.0, rising=False)
        if np.all(found):
            break
    return np.where(found, t, np.inf)


def highest_current(b: FluxBoost, sensed: bool = False) -> np.ndarray:
    """The most current the boost drives (A; ``sensed``: the terminal current): its first
    maximum (the run's highest where it holds none), or ``V_b / R`` for an ideal source
    (the terminal current's limit too)."""
    if b.source:
        return b.v_b / b.r
    t = peak_time(b, sensed)
    top = np.max(_segments(b, sensed)[3], axis=0)
    return np.where(np.isfinite(t), current(np.where(np.isfinite(t), t, 0.0), b, sensed), top)


def threshold_time(i_target, b: FluxBoost, sensed: bool = False) -> np.ndarray:
    """Time (s) from switch-on to ``i_target`` A of the (magnetising) current, or with
    ``sensed`` the terminal current (``inf`` where the boost never drives it there): the
    exact quadrature for an ideal source (the terminal current's target as the
    magnetising current ``i/k - V_b/R_e`` it means), else the capacitor's run's first
    crossing before the first maximum."""
    target = np.broadcast_to(np.asarray(i_target, float), b.v_b.shape)
    if b.source:
        mag = target / b.k - b.g_e * b.v_b if sensed else target
        return np.where(mag <= 0, 0.0, rise_time(np.maximum(mag, 0.0), 0.0, b.v_b, b.r, b.eddy_coil()))
    if b.eddy:
        seg = _segments(b, sensed)
        t, found = flux_bus.first_crossing(*seg, target, rising=True, before=peak_time(b, sensed))
        return np.where(target <= seg[2][0], 0.0, np.where(found, t, np.inf))
    fb = _bus(b)
    rec = fb.record(i_need=target)
    t, found = flux_bus.first_crossing(*flux_bus.segments(rec)[:6], target, rising=True, before=peak_time(b))
    return np.where(target <= 0, 0.0, np.where(found, t, np.inf))


def energy_drawn(t, b: FluxBoost) -> np.ndarray:
    """Energy (J) the boost gives in the first ``t`` s: ``1/2 C (V_b^2 - v_C^2)``, or for an
    ideal source ``V_b (V_b t - psi(i)) / R`` (with an eddy term ``V_b int i dt`` of the
    terminal current, :mod:`coildrive.model.eddy`'s closed integrals)."""
    i, v = state(t, b)
    if b.source:
        if b.eddy:
            return b.v_b * rise_integrals(t, 0.0, b.v_b, b.r, b.eddy_coil())[0]
        return b.v_b * (b.v_b * np.asarray(t, float) - flux.linkage(b.coil, i)) / b.r
    return 0.5 * b.c * (b.v_b**2 - v**2)


#: Gauss-Legendre nodes and weights on [0, 1] (4 points: exact for a step's squared Hermite cubic).
_GL_X, _GL_W = np.polynomial.legendre.leggauss(4)
_GL_S, _GL_W = 0.5 * (_GL_X + 1.0), 0.5 * _GL_W


def _square(seg, t_end) -> np.ndarray:
    """``int_0^t_end y^2 dt`` (per point) of a recorded quantity (``seg`` as :func:`_crest`'s):
    each step's Hermite cubic squared, by Gauss-Legendre on the part of it before
    ``t_end``."""
    t0, h, y0, y1, d0, d1 = seg
    with np.errstate(divide="ignore", invalid="ignore"):
        s_end = np.clip(np.where(h > 0, (t_end - t0) / np.where(h > 0, h, 1.0), 0.0), 0.0, 1.0)
    total = np.zeros_like(y0)
    for x, w in zip(_GL_S, _GL_W):
        total = total + w * flux_bus.hermite(y0, y1, d0, d1, x * s_end) ** 2
    return np.sum(total * s_end * h, axis=0)


def square_integral(t, b: FluxBoost) -> np.ndarray:
    """``int_0^t i^2 dt`` (A^2 s) of the (terminal) current's rise from rest: ``(E_drawn(t) -
    W(i(t))) / R``, the field's energy ``W = i psi - W'`` (module docstring); with an eddy
    term the ideal source's closed integral, the capacitor's run's by quadrature
    (:func:`_square`)."""
    if b.eddy:
        if b.source:
            return rise_integrals(t, 0.0, b.v_b, b.r, b.eddy_coil())[1]
        t = np.broadcast_to(np.asarray(t, float), b.v_b.shape)
        fb = _bus(b, t)
        return _square(flux_bus.terminal_segments(fb.record(), fb), t)
    i = state(t, b)[0]
    return (energy_drawn(t, b) - flux.energy(b.coil, i)) / b.r


def eddy_loss(t, b: FluxBoost) -> np.ndarray:
    """J the eddy resistance takes in the first ``t`` s from rest (0 without an eddy
    term), by the energy balance: the boost's energy less the field's ``W(i_m)`` and the
    loop's ``R int i^2 dt`` (the terminal current through the loop's copper)."""
    if not b.eddy:
        return np.zeros(np.broadcast(np.asarray(t, float), b.v_b).shape)
    i_m = state(t, b)[0]
    return energy_drawn(t, b) - flux.energy(b.coil, i_m) - b.r * square_integral(t, b)
