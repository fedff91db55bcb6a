"""A full bridge's fast decay into the drooping bus with a saturating coil (the flux-linkage
curve of :mod:`coildrive.model.flux` in place of ``L`` in :mod:`coildrive.model.bus_decay`)::

    L_d(i) di/dt = -(R i + v + 2 V_d)
    C dv/dt      = i + (V_s - v)/R_s          i(0) = i0, v(0) = v0

(``R`` ohm the loop, ``V_d`` V each body diode, ``R_s`` ohm the source, ``C`` F the bulk
capacitor; a source that takes current back.) With ``u = -(v + 2 V_d)`` this is exactly the
peak's circuit of :mod:`coildrive.model.flux_bus` (``L_d di/dt = u - R i``, ``C du/dt =
(V_s' - u)/R_s - i``) with the source ``V_s' = -(V_s + 2 V_d)``, started from ``(i0, u0)``
instead of switch-on: the same ETDRK4 stepping (the bus's ``R_s C`` relaxation taken
exactly, the table's points as events), read by the same cubic Hermite interpolation.
It holds until the current's first zero, where the diodes block.

The steps: first :data:`SETTLE_STEPS` over ``25 R_s C`` or a tenth of the bound below,
the shorter (a bus that starts off the value
the current holds it at, ``V_s + R_s i0``, relaxes there through ``R_s C``: ETDRK4 steps
that exactly, but the Hermite cubics that read the record between steps need steps
shorter than it to follow that transient); then uniform, :data:`STEPS` of them over a
bound on the first zero, and never longer than a tenth of the fastest coil time constant
or LC ringing period. While ``i > 0`` the
bus cannot fall below ``min(v0, V_s)`` (below ``V_s`` both the source and the coil charge
it), so ``|dpsi/dt| >= min(v0, V_s) + 2 V_d + R i`` and the flux is gone by ``psi(i0) /
(min(v0, V_s) + 2 V_d)``; a bus at ``-2 V_d`` (no such bound) takes five secant time
constants ``psi(i0)/(R i0)``. Every run is continued in further stretches of the same
steps until each point's current has crossed zero.

With an eddy-current term (a resistance ``R_e`` across the magnetising branch,
:mod:`coildrive.model.eddy`) the branch sees the loop's Thevenin pair and the diodes carry
the terminal current ``k (i_m + u/R_e)``, ``k = R_e/(R + R_e)``::

    L_d(i_m) di_m/dt = k (u - R i_m)
    C du/dt          = (V_s' - u)/R_s - k (i_m + u/R_e)

-- the peak's circuit with an eddy term of :mod:`coildrive.model.flux_bus`, run on its
equivalent plain circuit from ``(i0, u0)`` (``i0`` the magnetising current). The diodes
block where the terminal current reaches zero, at ``i_m = (v + 2 V_d)/R_e`` (its first
zero, by the same Hermite reading; at once where the turn-off's step already takes it
there): the zero time, the bus then, the highest bus and the charge (``int i dt`` of the
terminal current) end there. The flux then dies through ``R_e`` alone (``dpsi/dt = -R_e
i_m``, the curve's exact quadrature :func:`coildrive.model.flux.time`), so a drop-out
current below the block current is reached that much later; the bus, cut off from the
coil, relaxes to ``V_s`` (never above the highest it reached). The run stops once every
point's terminal current has crossed zero. A supply that cannot sink: :func:`decay_no_sink`;
with a constant current drawn off the bus too (a boost converter), a curve's decay bounded:
:func:`drawn_no_sink_bound`.

All functions broadcast over numpy arrays; units are A, V, ohm, H, Wb, F, s.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from . import bus_decay, flux, flux_bus
from .bridge import flux_pump_trace, flux_pump_up
from .bus_decay import FastDecay
from .eddy import EddyCoil, stored_energy
from .flux import FluxCoil
from .supply import terminal

#: Steps over the bound on the first zero (module docstring).
STEPS = 100
#: The first stretch: :data:`SETTLE_STEPS` steps over ``SETTLE R_s C`` (module docstring);
#: steps per fastest coil time constant and per LC ringing period: the peak's run's own.
SETTLE, SETTLE_STEPS, PER_TIME_CONSTANT = flux_bus.SETTLE, flux_bus.SETTLE_STEPS, flux_bus.PER_TIME_CONSTANT
#: Further stretches tried when a point's current has not crossed zero.
EXTENSIONS = 8


def _record(i0, v0, v_s, r_s, c, r, coil: FluxCoil, v_d, r_e=None):
    """The run of the module docstring (in ``u``) from ``(i0, v0)`` until every point's
    (terminal) current has crossed zero: ``(FluxBus, Record)``; with an eddy resistance
    ``r_e`` ohm on the equivalent plain circuit (:func:`coildrive.model.flux_bus.equivalent`)."""
    fb = flux_bus.equivalent(-(v_s + 2.0 * v_d), r_s, c, r, coil, r_e)
    alone = np.isinf(r_s)
    u_s, r_s, c, coil = fb.v_s, fb.r_s, fb.c, fb.coil       # the equivalent's (the same without R_e)
    cv, s = coil.curve, coil.scale
    k0 = np.clip(np.searchsorted(cv.current, i0, side="right") - 1, 0, cv.base.size - 1)
    u0 = -(v0 + 2.0 * v_d)
    di0 = (u0 - r * i0) / (s * cv.incremental(i0))               # the rates at the start, as run's rows
    du0 = -(u0 - u_s + r_s * i0) / (r_s * c)
    start = flux_bus.Record(*(x[None] for x in (np.zeros_like(i0), i0, u0, di0, du0)), k=k0)
    psi0 = s * cv.psi(i0)
    grid = np.linspace(0.0, 1.0, 33).reshape((-1,) + (1,) * i0.ndim) * i0
    l_min = np.maximum((s * cv.incremental(grid)).min(axis=0), 1e-300)
    # the explicit part's stiffness, (R + R_s)/L_d; the capacitor alone (an eddy term's R_e
    # as the equivalent's R_s, its R_s C/k far slower than the coil) keeps w - R_s i through
    # the steps (the stages of both move together), so its own R/L_d and the ringing set the step
    g = np.where(alone, r, r + r_s)
    lo = np.minimum(v0, v_s) + 2.0 * v_d
    with np.errstate(divide="ignore", invalid="ignore"):
        bound = np.where(lo > 0, psi0 / lo, psi0 / np.maximum(r * i0, 1e-300) * 5.0)
    h = np.minimum(bound / STEPS, np.minimum(l_min / g, 2.0 * np.pi * np.sqrt(l_min * c)) / PER_TIME_CONSTANT)
    n = int(np.max(np.ceil(bound / h)))
    n = min(max(n, STEPS), 20 * STEPS)
    h = bound / n
    # the bus's own transient from a start off its slaved value: finely over 25 R_s C (at
    # most a tenth of the bound: past it the main steps are at most 2.5 R_s C, the
    # transient down by e^-10 or more)
    t1 = np.minimum(SETTLE * r_s * c, 0.1 * bound)
    rec = flux_bus.run(fb, [(SETTLE_STEPS, t1 / SETTLE_STEPS), (n, h)], start)
    for _ in range(EXTENSIONS):
        if not np.any(np.min(terminal(rec.i, rec.v, fb), axis=0) > 0.0):
            break
        rec = flux_bus.run(fb, [(n, h)], rec)
    if np.any(np.min(terminal(rec.i, rec.v, fb), axis=0) > 0.0):
        raise ArithmeticError("the fast decay's current did not reach zero")
    return fb.with_record(rec), rec


def _fall(seg, target):
    """Time (s) a recorded quantity first falls to ``target`` (per point; 0 where it starts
    at or below it): the cubic Hermite interpolant of the first step that reaches it
    (``seg``: :func:`coildrive.model.flux_bus.segments`' first six rows, or
    :func:`coildrive.model.flux_bus.terminal_segments`)."""
    t, _ = flux_bus.first_crossing(*seg, target, rising=False)
    return np.where(seg[2][0] <= target, 0.0, t)


def _charge(seg, t_end):
    """``int_0^t_end y dt`` (per point) of a recorded quantity (``seg`` as :func:`_fall`'s):
    each step's Hermite cubic integrated exactly (``h ((y0 + y1)/2 + (d0 - d1)/12)``), the
    step holding ``t_end`` up to it."""
    t0, h, y0, y1, d0, d1 = seg
    full = (t0 + h <= t_end) & (h > 0)
    whole = np.sum(np.where(full, h * (0.5 * (y0 + y1) + (d0 - d1) / 12.0), 0.0), axis=0)
    inside = (t0 < t_end) & (t0 + h > t_end)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.clip(np.where(inside, (t_end - t0) / np.where(h > 0, h, 1.0), 0.0), 0.0, 1.0)
    # int_0^s of the Hermite basis: y0 (s - s^3 + s^4/2) + d0 (s^2/2 - 2 s^3/3 + s^4/4)
    #   + y1 (s^3 - s^4/2) + d1 (s^4/4 - s^3/3)
    s2, s3, s4 = s * s, s ** 3, s ** 4
    part = h * (y0 * (s - s3 + 0.5 * s4) + d0 * (0.5 * s2 - 2.0 * s3 / 3.0 + 0.25 * s4)
                + y1 * (s3 - 0.5 * s4) + d1 * (0.25 * s4 - s3 / 3.0))
    return whole + np.sum(np.where(inside, part, 0.0), axis=0)


def _eddy_loss(rec, fb, r_e, t_end):
    """J the eddy resistance ``r_e`` ohm takes over ``[0, t_end]`` s of the run: ``R_e int
    (i_m - i_t)^2 dt``, the difference of the two recorded cubics (itself a Hermite cubic
    per step) squared, each step's share by 4-point Gauss-Legendre (exact for its degree 6)
    over the part of the step before ``t_end``."""
    t0, h, i0, i1, di0, di1 = flux_bus.segments(rec)[:6]
    _, _, j0, j1, dj0, dj1 = flux_bus.terminal_segments(rec, fb)
    y0, y1, d0, d1 = i0 - j0, i1 - j1, di0 - dj0, di1 - dj1
    with np.errstate(divide="ignore", invalid="ignore"):
        part = np.clip(np.where(h > 0, (t_end - t0) / np.where(h > 0, h, 1.0), 0.0), 0.0, 1.0)
    x, w = np.polynomial.legendre.leggauss(4)
    total = 0.0
    for xk, wk in zip(x, w):
        th = 0.5 * part * (xk + 1.0)
        t2, t3 = th * th, th ** 3
        g = ((2 * t3 - 3 * t2 + 1) * y0 + (t3 - 2 * t2 + th) * d0 + (3 * t2 - 2 * t3) * y1 + (t3 - t2) * d1)
        total = total + 0.5 * wk * part * h * g * g
    return r_e * np.sum(total, axis=0)


def _field(coil: FluxCoil, i):
    """J stored in the curve at current ``i`` A: ``psi i - W'(i)`` (its co-energy)."""
    i = np.maximum(np.asarray(i, float), 0.0)
    return coil.scale * (coil.curve.psi(i) * i - coil.curve.coenergy(i))


def decay(i0, v0, i_drop, v_s, r_s, c, r, coil: FluxCoil, v_d, r_e=None) -> FastDecay:
    """:func:`coildrive.model.bus_decay.decay` with the flux-linkage curve ``coil`` (its
    scale broadcast with the points): the fast decay of ``i0`` A from the bus at ``v0`` V
    (at or below ``v_s`` V), ``i_drop`` A the drop-out current; with an eddy resistance
    ``r_e`` ohm across the curve (module docstring) ``i0`` and ``i_drop`` are magnetising
    currents and the zero time and the charge the terminal current's."""
    shape, args = _points(i0, v0, i_drop, v_s, r_s, c, r, coil, v_d, r_e)
    return _shaped(_decay(*args)[0], shape)


def _points(i0, v0, i_drop, v_s, r_s, c, r, coil: FluxCoil, v_d, r_e=None):
    """``(shape, arguments)``: the arguments broadcast together (the coil's scale too) to
    ``shape`` and flattened (the run's record has one column per point)."""
    full = np.broadcast_arrays(*(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, r_s, c, r, v_d, coil.scale,
                                                                 np.inf if r_e is None else r_e)))
    i0, v0, i_drop, v_s, r_s, c, r, v_d, scale, r_e_ = (x.ravel().copy() for x in full)
    return full[0].shape, (i0, v0, i_drop, v_s, r_s, c, r, coil.with_scale(scale), v_d,
                           None if r_e is None else r_e_)


def _shaped(d: FastDecay, shape) -> FastDecay:
    """``d`` with every field reshaped to ``shape``."""
    return FastDecay(*(None if getattr(d, f.name) is None else np.reshape(getattr(d, f.name), shape)
                       for f in dataclasses.fields(d)))


def _decay(i0, v0, i_drop, v_s, r_s, c, r, coil: FluxCoil, v_d, r_e=None):
    """:func:`decay` on broadcast points: ``(FastDecay, its Record, the circuit)`` (with an
    eddy term ``r_s`` may be ``inf``: the capacitor alone, the feed blocked)."""
    fb, rec = _record(i0, v0, v_s, r_s, c, r, coil, v_d, r_e)
    seg, flow = flux_bus.segments(rec)[:6], flux_bus.terminal_segments(rec, fb)
    t_zero = _fall(flow, 0.0)
    t_drop = np.minimum(_fall(seg, i_drop), t_zero)
    i_z, u_z = flux_bus.state(t_zero, fb)
    if r_e is not None:   # below the block current the flux dies through R_e alone
        late = i_drop < i_z
        t_tail = flux.time(coil, np.where(late, i_z, 1.0), np.where(late, i_drop, 1.0), 0.0, r_e)
        t_drop = np.where(late, t_zero + t_tail, t_drop)
    u_low, t_low = flux_bus.lowest_bus(t_zero, fb)          # the lowest u is the highest bus
    v_top = -u_low - 2.0 * v_d
    v_z = -u_z - 2.0 * v_d
    # the eddy loss while the diodes conduct, then the field's whole store at the block
    loss = None if r_e is None else _eddy_loss(rec, fb, r_e, t_zero) + _field(coil, i_z)
    return FastDecay(t_drop, t_zero, v_top, np.maximum(v_top, v_s), np.where(v_top > v_s, t_low, np.inf), v_z,
                     _charge(flow, t_zero), loss), rec, fb


def decay_no_sink(i0, v0, i_drop, v_s, r_s, c, r, coil: FluxCoil, v_d, r_e=None) -> FastDecay:
    """:func:`decay` on a supply that cannot sink (an ideal one-way feed, as
    :func:`coildrive.model.bus_decay.decay_no_sink`): with the source until the bus reaches
    ``v_s`` V (the first crossing in the run), then into ``C`` alone, the saturating
    coil's series RLC circuit of :func:`coildrive.model.bridge.flux_pump_up` (stepped in
    the falling current) down to the drop-out current and to zero. ``bus_max`` is the bus
    when the current stops (or ``v_s``, which a bus that never got there relaxes back
    to). With an eddy resistance ``r_e`` ohm (module docstring; magnetising currents) the
    capacitor alone is the same stepped circuit with no source (``R_s -> inf``,
    :func:`coildrive.model.flux_bus.equivalent`) from the moment the bus reaches ``v_s``,
    until the terminal current's zero (the bus rises to it and stays: nothing takes it
    back), the flux's tail through ``R_e`` after it."""
    shape, (i0, v0, i_drop, v_s, r_s, c, r, coil, v_d, r_e) = _points(i0, v0, i_drop, v_s, r_s, c, r, coil, v_d,
                                                                        r_e)
    fed, rec, fb = _decay(i0, np.minimum(v0, v_s), i_drop, v_s, r_s, c, r, coil, v_d, r_e)
    # the bus reaches v_s (u falls to -(v_s + 2 V_d)) before the current stops
    u_s = -(v_s + 2.0 * v_d)
    t0, h, _, _, _, _, u0, u1, du0, du1 = flux_bus.segments(rec)
    t_u, found = flux_bus.first_crossing(t0, h, u0, u1, du0, du1, u_s, rising=False, before=fed.zero_time)
    reach = found & (v0 < v_s)
    t_reach = np.where(reach, t_u, 0.0)
    blocked = reach | (v0 >= v_s)
    i_reach = flux_bus.state(t_reach, fb)[0]
    t_a = np.where(v0 >= v_s, 0.0, np.where(reach, t_reach, fed.zero_time))
    i_a = np.where(v0 >= v_s, i0, np.where(reach, i_reach, 0.0))
    v_a = np.where(blocked, np.maximum(v0, v_s), fed.bus_at_zero)
    q_a = np.where(v0 >= v_s, 0.0, np.where(reach, _charge(flux_bus.terminal_segments(rec, fb), t_a), fed.charge))
    if r_e is not None:   # the capacitor alone (the points that never reach v_s run it from i0, unused)
        alone = _decay(np.where(blocked, i_a, i0), np.where(blocked, v_a, v_s), i_drop, v_s, np.full_like(v_s, np.inf),
                       c, r, coil, v_d, r_e)[0]
        v_end = np.where(blocked, alone.bus_at_zero, fed.bus_at_zero)
        t_drop = np.where(~blocked | (i_a <= i_drop), fed.drop_time, t_a + alone.drop_time)
        t_zero = np.where(blocked, t_a + alone.zero_time, fed.zero_time)
        bus_top = np.where(blocked, v_end, fed.bus_top)
        when = np.where(blocked, t_zero, fed.bus_max_time)
        # the eddy loss: the fed stretch to the bus at v_s, then the capacitor alone's run
        loss = np.where(blocked, _eddy_loss(rec, fb, r_e, t_a) + alone.eddy_energy, fed.eddy_energy)
        return _shaped(FastDecay(t_drop, t_zero, bus_top, np.maximum(bus_top, v_s),
                                 np.where(bus_top > v_s, when, np.inf), v_end,
                                 q_a + np.where(blocked, c * (v_end - v_a), 0.0), loss), shape)
    i_b = np.where(blocked, i_a, 0.0)
    full = flux_pump_up(i_b, v_a, c, r, coil, v_d)
    to_drop = flux_pump_up(i_b, v_a, c, r, coil, v_d, i_end=np.minimum(i_drop, i_b))
    v_end = np.where(blocked, full.v2, fed.bus_at_zero)
    q_b = np.where(blocked, full.charge, 0.0)
    drop_in_a = (~blocked) | (i_a <= i_drop)
    t_drop = np.where(drop_in_a, fed.drop_time, t_a + to_drop.zero_time)
    t_zero = np.where(blocked, t_a + full.zero_time, fed.zero_time)
    bus_top = np.where(blocked, v_end, fed.bus_top)
    when = np.where(blocked, t_zero, fed.bus_max_time)
    return _shaped(FastDecay(t_drop, t_zero, bus_top, np.maximum(bus_top, v_s),
                             np.where(bus_top > v_s, when, np.inf), v_end, q_a + q_b), shape)


def drawn_no_sink_bound(i0, v0, i_drop, v_s, i_c, r_s, c, r, coil: FluxCoil, v_d) -> FastDecay:
    """A bound on :func:`decay_no_sink` with a constant current ``i_c`` A drawn off the bus
    throughout (a boost converter recharging from the main bus; the linear coil's exact
    run is :func:`coildrive.model.bus_decay.decay_drawn`), the flux-linkage curve ``coil``
    (no eddy term), ``v0`` V the starting bus (at or below ``v_s``)::

        dpsi/dt = -(R i + v + 2 V_d)
        C dv/dt = i + max((V_s - v)/R_s, 0) - i_c        (the feed blocks above V_s)

    * The bus never falls below ``m = min(v0, V_s - R_s i_c)`` (at least ``-2 V_d``, the
      bridge's body diodes) while the current flows: below ``V_s`` at ``v = m`` the feed
      brings ``(V_s - m)/R_s >= i_c`` and the coil ``i >= 0``, so ``dv/dt >= 0``; above
      ``V_s`` it is above ``m`` anyway. So ``|dpsi/dt| >= R i + m + 2 V_d`` at every flux
      level, the flux falls monotonically and the times to the drop-out current and to
      zero, and the charge ``int i dt = int i dpsi/|dpsi/dt|``, are at most the decay's
      against the fixed bus ``m`` (:func:`coildrive.model.flux.integral`, the curve's exact
      quadrature): the slowest release.
    * While the bus is above ``V_s`` the feed blocks, so ``1/2 C v^2 + W`` (``W`` the coil's
      stored energy) only falls (``d/dt = -v i_c - R i^2 - 2 V_d i``); the coil's energy
      when the bus crosses up through ``V_s`` is at most ``W(i0)`` (the flux only falls):
      the bus stays below :func:`coildrive.model.bus_decay.no_sink_energy_top` -- the highest
      bus, its ``bus_top``, ``bus_max`` and ``bus_at_zero`` (``bus_max_time`` ``inf``: a
      bound has no moment).

    Where ``m + 2 V_d`` is not above 0 the current's zero has no finite bound
    (``ArithmeticError``). Broadcasts over the points; A, V, ohm, F, s."""
    i0, v0, i_drop, v_s, i_c, r_s, c, r, v_d = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (i0, v0, i_drop, v_s, i_c, r_s, c, r, v_d)))
    m = np.maximum(np.minimum(v0, v_s - r_s * i_c), -2.0 * v_d)
    if np.any(m + 2.0 * v_d <= 0.0):
        raise ArithmeticError("the bus may sit at the bridge's diodes: no bound on the fast decay's zero")
    one = coil.with_scale(np.broadcast_to(np.asarray(coil.scale, float), i0.shape))
    fixed = -(m + 2.0 * v_d)
    t_zero, charge = flux.integral(one, i0, np.zeros_like(i0), fixed, r, (0, 1))
    t_drop = flux.time(one, i0, np.minimum(i_drop, i0), fixed, r)
    top = bus_decay.no_sink_energy_top(v_s, c, stored_energy(one, i0))
    return FastDecay(t_drop, t_zero, top, np.maximum(top, v_s), np.full_like(top, np.inf), top, charge)


# --------------------------------------------------------------------------- any coil
def _split(coil):
    """``(branch, r_e)``: an :class:`~coildrive.model.eddy.EddyCoil`'s magnetising branch and
    eddy resistance, else the coil itself and ``None``."""
    if isinstance(coil, EddyCoil):
        return coil.magnetising, coil.resistance
    return coil, None


def fast_decays(coil, i0, starts, i_drop, v_s, r_s, c, r, v_d, sink: bool = True) -> list[FastDecay]:
    """The fast decay of ``i0`` A into the drooping bus from each bus ``v0`` V of ``starts``,
    whatever the coil: a linear ``L`` H (:func:`coildrive.model.bus_decay.decay`), with an
    eddy term (an :class:`~coildrive.model.eddy.EddyCoil`: ``eddy_decay``; ``i0`` and
    ``i_drop`` magnetising currents) or a flux-linkage curve, either way (:func:`decay`,
    stepped: every start in one run); a supply that cannot sink (``sink`` false): the
    ``*_no_sink`` forms. One :class:`~coildrive.model.bus_decay.FastDecay` per start."""
    branch, r_e = _split(coil)
    if isinstance(branch, FluxCoil):   # stepped: every start in one run
        run = decay if sink else decay_no_sink
        d = run(i0, np.stack(np.broadcast_arrays(*starts)), i_drop, v_s, r_s, c, r, branch, v_d, r_e)
        return [FastDecay(*(None if getattr(d, f.name) is None else getattr(d, f.name)[k]
                            for f in dataclasses.fields(d))) for k in range(len(starts))]
    if r_e is not None:
        run = bus_decay.eddy_decay if sink else bus_decay.eddy_decay_no_sink
        return [run(i0, v0, i_drop, v_s, r_s, c, r, branch, v_d, r_e) for v0 in starts]
    run = bus_decay.decay if sink else bus_decay.decay_no_sink
    return [run(i0, v0, i_drop, v_s, r_s, c, r, branch, v_d) for v0 in starts]


def clamp_decay(coil, i0, v0, v_s, r_s, c, r, v_clamp, i_drop=0.0) -> FastDecay:
    """A clamp across the switch on the drooping bus, whatever the coil (a linear ``L`` H,
    a flux-linkage curve, an eddy term on either): after a pulse the current flows on from
    the bus through the coil into the clamp, ``dpsi/dt = v - V_clamp - R i``, ``C dv/dt =
    (V_s - v)/R_s - i`` (with an eddy term the branch behind the loop's Thevenin pair, the
    clamp carrying the terminal current and blocking at its zero; ``i0``, ``i_drop``
    magnetising currents). Mirrored, ``u = -v``, it is :func:`fast_decays`'s circuit with
    ``V_s -> -V_s`` and ``2 V_d -> V_clamp`` from ``u0 = -v0`` (a bus the pulse has pulled
    below the source starts above the mirrored one: the falling case of those runs; a linear
    coil's the closed form of :func:`coildrive.model.bus_decay.decay`); the figures
    mirrored back: ``bus_top`` the lowest bus while the current flows, ``bus_max`` the lower
    of it and ``V_s``, ``bus_at_zero`` where the current stops, ``charge`` ``int i dt`` (the
    terminal current's), ``eddy_energy`` the eddy resistance's loss over the whole decay."""
    d = fast_decays(coil, i0, [-np.asarray(v0, float)], i_drop, -np.asarray(v_s, float), r_s, c, r,
                    0.5 * np.asarray(v_clamp, float))[0]
    return dataclasses.replace(d, bus_top=-d.bus_top, bus_max=-d.bus_max, bus_at_zero=-d.bus_at_zero)


def clamp_trace(t, coil, i0, v0, v_s, r_s, c, r, v_clamp):
    """The terminal current (A) and the bus (V) ``t`` s into :func:`clamp_decay`'s decay of one
    point, up to the current's zero (:func:`trace` of the mirrored circuit)."""
    i, u = trace(t, coil, i0, -np.asarray(v0, float), -np.asarray(v_s, float), r_s, c, r,
                 0.5 * np.asarray(v_clamp, float))
    return i, -u


def trace(t, coil, i0, v0, v_s, r_s, c, r, v_d, sink: bool = True):
    """The terminal current (A) and the bus (V) ``t`` s (an array) into the fast decay of one
    point (scalars) from ``i0`` A (with an eddy term the magnetising current) and the bus at
    ``v0`` V, up to the terminal current's zero, on the circuits of :func:`fast_decays`: a
    linear coil's closed form (:func:`coildrive.model.bus_decay.trace`), with an eddy term
    ``eddy_decay``'s (:func:`coildrive.model.bus_decay.eddy_trace`), a curve's stepped run
    read by its Hermite cubics; a supply that cannot sink too (the source's circuit until
    the feed blocks, then the capacitor alone's; a curve without an eddy term there is
    :func:`decay_no_sink`'s own run stepped in the falling current, read in time by
    :func:`coildrive.model.bridge.flux_pump_trace`, so the trace ends at the design's zero
    time). Past the zero the current is 0 and the bus is left where it was (the caller
    ends there)."""
    branch, r_e = _split(coil)
    if not isinstance(branch, FluxCoil) and r_e is None:
        return bus_decay.trace(t, i0, v0, v_s, r_s, c, r, branch, v_d, sink=sink)
    i0, v0, v_s, r_s, c, r, v_d = (np.asarray(float(np.ravel(x)[0])) for x in (i0, v0, v_s, r_s, c, r, v_d))
    r_e = None if r_e is None else float(np.ravel(r_e)[0])
    if not isinstance(branch, FluxCoil):
        return bus_decay.eddy_trace(t, i0, v0, v_s, r_s, c, r, float(np.ravel(branch)[0]), v_d, r_e, sink=sink)
    t = np.asarray(t, float)
    one = branch.with_scale(np.asarray(float(np.ravel(branch.scale)[0])))
    # (a supply that sinks: from the bus where it is, above the source too -- a clamp's
    # mirrored decay; one that cannot: the source's circuit only up to the source)
    fed, rec, fb = _decay(i0, v0 if sink else np.minimum(v0, v_s), np.asarray(0.0), v_s, r_s, c, r, one, v_d,
                          r_e)
    t_a, blocked = np.inf, False
    if not sink:   # where the bus reaches v_s the feed blocks: the capacitor alone from there
        t0, h, _, _, _, _, u0, u1, du0, du1 = flux_bus.segments(rec)
        t_u, found = flux_bus.first_crossing(t0, h, u0, u1, du0, du1, -(v_s + 2.0 * v_d), rising=False,
                                             before=fed.zero_time)
        blocked = bool(v0 >= v_s) or bool(found and v0 < v_s)
        t_a = 0.0 if v0 >= v_s else (float(t_u) if blocked else np.inf)
    i_m, u = flux_bus.state(np.minimum(t, t_a), fb)
    i = terminal(i_m, u, fb)
    if blocked:
        i_a = i0 if v0 >= v_s else flux_bus.state(np.asarray(t_a), fb)[0]
        v_a = np.maximum(v0, v_s)
        late = t > t_a
        if r_e is None:   # decay_no_sink's run in the falling current, read in time
            i_n, v_n = flux_pump_trace(np.maximum(t - t_a, 0.0), i_a, v_a, c, r, one, v_d)
            return np.where(late, i_n, np.maximum(i, 0.0)), np.where(late, v_n, -u - 2.0 * v_d)
        _, _, alone = _decay(np.asarray(i_a, float), v_a, np.asarray(0.0), v_s, np.asarray(np.inf), c, r, one, v_d,
                             r_e)
        i_n, u_n = flux_bus.state(np.maximum(t - t_a, 0.0), alone)
        i, u = np.where(late, terminal(i_n, u_n, alone), i), np.where(late, u_n, u)
    return np.maximum(i, 0.0), -u - 2.0 * v_d


# --------------------------------------------------------------------------- into the boost capacitor
def _return_args(i0, v_c, r_off, r_b, v_d) -> tuple:
    """:func:`fast_decays`' ``(v_s, r_s, r, v_d)`` for :func:`boost_return`: the
    source at the capacitor's own voltage (the feed blocked from the start, so the
    capacitor alone), the loop ``r_off + r_b`` and the three drops as two of ``1.5 V_d``
    (the circuit holds only their sum)."""
    from .bridge import RETURN_DROPS

    v_c = np.asarray(v_c, float)
    return (v_c, np.ones_like(v_c), np.asarray(r_off, float) + np.asarray(r_b, float),
            0.5 * RETURN_DROPS * np.asarray(v_d, float))


def boost_return(coil, i0, v_c, c, r_off, r_b, v_d, i_drop=0.0) -> FastDecay:
    """A full bridge's fast decay of ``i0`` A after a pulse from the boost, back up the boost
    switch's body diode into the boost capacitor of ``c`` F at ``v_c`` V
    (:func:`coildrive.model.bridge.boost_return`'s circuit) whatever the coil: a linear
    ``L`` H, a flux-linkage curve or an eddy term on either (``i0``, ``i_drop`` magnetising
    currents). No source stands behind the capacitor (the main supply's diode blocks), so
    this is :func:`fast_decays` on a supply that cannot sink, its feed blocked from the start
    (the source put at the capacitor's own voltage: the capacitor alone from ``t = 0``),
    through ``r_off + r_b`` ohm and :data:`coildrive.model.bridge.RETURN_DROPS` body-diode
    drops of ``v_d`` V: a linear coil's series RLC closed form, an eddy term's on a line
    closed form too, a curve's stepped in the falling current
    (:func:`coildrive.model.bridge.flux_pump_up`), a curve's with an eddy term on its
    equivalent plain circuit with no source. ``bus_at_zero`` is the capacitor when the
    (terminal) current stops, ``charge`` its ``int i dt``, ``eddy_energy`` the eddy
    resistance's loss over the whole release (the conduction, then the flux's tail)."""
    v_s, r_s, r, vd = _return_args(i0, v_c, r_off, r_b, v_d)
    return fast_decays(coil, i0, [v_c], i_drop, v_s, r_s, c, r, vd, sink=False)[0]


def boost_return_trace(t, coil, i0, v_c, c, r_off, r_b, v_d):
    """The terminal current (A) and the boost capacitor (V) ``t`` s into :func:`boost_return`'s
    decay of one point (:func:`trace` of the same circuit), up to the current's zero."""
    v_s, r_s, r, vd = _return_args(i0, v_c, r_off, r_b, v_d)
    return trace(t, coil, i0, v_c, v_s, r_s, c, r, vd, sink=False)
