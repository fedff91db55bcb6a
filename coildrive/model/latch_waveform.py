"""A latching coil's set and reset pulses as a time series (``simulate`` of a latch).

The set pulse switches on at t = 0 for ``set_time`` s and its current decays to zero
through the release path; the reset pulse starts ``interval`` s after the set pulse and
does the same (closed-form segments of :mod:`coildrive.model.rl`, a flux-linkage curve's
by :mod:`coildrive.model.flux`'s exact quadrature; on a drooping bus the rise of
:mod:`coildrive.model.supply`, a curve's of :mod:`coildrive.model.flux_bus`, from a full
capacitor). With a moving armature
the set pulse follows it onto the seat (:mod:`coildrive.model.armature_sim`), and its
decay is the seated coil's: the catch holds the armature. Between the pulses one
sample marks the idle coil.

A full bridge (:mod:`coildrive.model.bridge`): the current is signed (+ set through Q1 +
Q4, - reset through Q3 + Q2); each switch's drain-source voltage is a column (``q1_v`` ..
``q4_v``). After a pulse all four are off and the current flows into the bus through two
body diodes (``-V_d`` across each, ``V_bus + V_d`` across the other two); with no current
both legs are drawn at 0 V (they float: a real bridge's leg voltages then depend on its
gate drivers' leakage). On the drooping bus the current returns into the bus behind the
source resistance, which rises as it does (:func:`fast_decay_after`, :func:`fast_trace`:
:mod:`coildrive.model.bus_decay`, closed form). Two windings: one current, coil voltage and switch voltage column
per winding; the windings' magnetic coupling is not modelled (each decays through its own
freewheel path).

From the boost (``[supply] boost``, two windings or a full bridge): each pulse's on-time
is the boost capacitor's series RLC discharge into the winding (:mod:`coildrive.model.boost`,
at its nominal charge and capacitance; a flux-linkage curve's or an eddy term's by
:mod:`coildrive.model.flux_boost`, the current then the terminal one; with a moving
armature the set pulse's run from it, the capacitor a state), the top of the coil the
capacitor less ``R_b i``; after the pulse the winding's freewheel path returns its current
to the top, which the main supply holds (the boost switch is off). On a full bridge the
boost switch feeds the high-side rail and the fast decay returns up its body diode into
the boost capacitor (:func:`coildrive.model.flux_bus_decay.boost_return`: a linear coil, a
curve or an eddy term, the current then the terminal one): the rail is the
capacitor + ``V_d + R_b i`` then. A ``boost_v`` column is the capacitor through both
pulses, recharged at ``boost_power`` after each. On a drooping main supply a
``main_bus_v`` column is the main bus (:mod:`coildrive.model.converter_bus`: the
converter draws ``boost_power / boost_efficiency`` from it while it recharges; on a
bridge the net of the return), which each switch's node follows while it is off (on a
bridge the rail between the pulses).

Units: s, A, V.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from . import boost as boost_model
from . import eddy, flux_bus, flux_bus_decay
from . import supply as bus_model
from .eddy import EddyCoil
from .circuit import full_bridge, loop
from .flux import FluxCoil
from .flux_bus_decay import fast_decays
from .rl import decay_current, decay_time, rise_current
from .topology import coil_voltage


class NotSeated(ValueError):
    """The set pulse ends before the moving armature rests on the seat."""


@dataclass(frozen=True)
class LatchWaveform:
    """The two pulses: ``columns`` maps each CSV column (``time_s`` first, then
    ``current_a``) to its array; ``events`` the set, reset and zero-current times (s).
    ``gap`` (m, not a CSV column): with a moving armature its gap (0 seated) through the
    set pulse, 0 while the catch holds it, NaN from the reset pulse on (not modelled);
    else ``None``."""

    columns: dict
    events: dict
    gap: np.ndarray | None = None

    @property
    def time(self) -> np.ndarray:
        return self.columns["time_s"]

    def to_csv(self) -> str:
        buf = io.StringIO()
        names = list(self.columns)
        buf.write(",".join(names) + "\n")
        np.savetxt(buf, np.column_stack([self.columns[n] for n in names]), delimiter=",",
                   fmt=["%.9e"] * 2 + ["%.6e"] * (len(names) - 2))
        return buf.getvalue()


def pulse(drive: Drive, supply: float, coil_temp: float, r_factor: float, l_factor: float,
           t_pulse: float, points: int, main_v: float | None = None, fly: bool = False):
    """One pulse from zero: ``(t, i, on, bus, t_zero, release loop, gap)`` relative to its
    start (s, A, 0/1, the bus while on V), the time its current reaches zero, and with a
    moving armature its gap (m; 0 through the decay: the catch holds it), else ``None``.
    ``fly``: a set pulse that ends before a moving armature rests on the seat is flown on
    (:func:`_flight`) instead of refused (:class:`NotSeated`).
    With an eddy term (:mod:`coildrive.model.eddy`, a linear or a saturating branch) ``i``
    is the terminal current (what the sense and the switches carry): ``(v + R_e i_m)/(R +
    R_e)`` on, ``(R_e i_m - V_off)/(R_off + R_e)`` freewheeling until it reaches zero.
    From the boost with a clamp across the switch on a drooping main supply the decay draws
    on the main bus from ``main_v`` V at the pulse's end (``supply``, a full bus, by default;
    the pulse itself draws nothing from it), and ``bus`` is that main bus in the decay."""
    lp = loop(drive, supply, coil_temp, r_factor, l_factor)
    rel = loop(drive, supply, coil_temp, r_factor, l_factor, path="release")
    v, r_on = float(lp.v_on), float(lp.r_on)
    ind = lp.inductance if isinstance(lp.inductance, (FluxCoil, EddyCoil)) else float(lp.inductance)
    r_e = float(np.ravel(ind.resistance)[0]) if isinstance(ind, EddyCoil) else None
    t_on = np.linspace(0.0, t_pulse, points + 1)
    gap_on = None
    if drive.armature is not None:   # the set pulse moves the armature (a drooping bus: a state of its run)
        try:
            t_on, i_on, gap_on, bus = _seating(drive, lp, l_factor, t_pulse, points, supply, coil_temp)
        except NotSeated:
            if not fly:
                raise
            t, i, on, gap, t_zero = _flight(drive, lp, rel, l_factor, t_pulse, points, supply, coil_temp)
            return t, i, on, np.where(on == 1, v, supply), t_zero, rel, gap
    elif drive.supply.boosted:   # from the boost capacitor (a curve's, an eddy term's: model.flux_boost)
        b = boost_of(drive, r_on, ind)
        m = boost_model.of(b)
        i_on, v_c = m.state(t_on, b)
        bus = v_c - drive.supply.boost_resistance * m.terminal(i_on, v_c, b)   # the top of the coil
    elif drive.supply.droops:
        s = drive.supply
        mag = ind.magnetising if r_e is not None else ind
        if isinstance(mag, FluxCoil):   # a curve's drooping bus (model.flux_bus)
            b = flux_bus.bus(v, s.source_resistance, s.capacitance, r_on, mag, r_e)
            i_on, bus = flux_bus.state(t_on, b)
        else:
            b = bus_model.bus(v, s.source_resistance, s.capacitance, r_on, float(np.ravel(mag)[0]), r_e)
            i_on, bus = bus_model.state(t_on, b)
    else:
        i_on, bus = rise_current(t_on, 0.0, v, r_on, ind), np.full(t_on.shape, v)
    i_top = float(i_on[-1])
    r_off, v_off = float(rel.r_off), float(rel.v_off)
    fast = fast_decay_after(drive, rel, i_top, float(bus[-1]))
    # (from the boost the decay's current comes from the main bus, not the boost capacitor)
    clamped = clamp_decay_after(drive, rel, i_top, (supply if main_v is None else main_v) if drive.supply.boosted
                                else float(bus[-1]))
    returning = drive.supply.boosted and full_bridge(drive)
    if clamped is not None:   # a clamp on the drooping bus: the decay draws the capacitor down further
        tz = float(clamped.zero_time)
        t_d = np.linspace(0.0, tz, points + 1)[1:]
        v_end = (supply if main_v is None else main_v) if drive.supply.boosted else float(bus[-1])
        i_d, bus_d = flux_bus_decay.clamp_trace(t_d, rel.inductance, i_top, v_end,
                                                *_clamp_args(drive, rel))   # (the terminal current)
        i_d[-1] = 0.0   # (the zero, to rounding)
    elif returning:   # back into the boost capacitor, up Q_b's body diode (the terminal current)
        coil, args = return_args(drive, rel)
        tz = float(flux_bus_decay.boost_return(coil, i_top, float(v_c[-1]), *args).zero_time)
        t_d = np.linspace(0.0, tz, points + 1)[1:]
        i_d, v_cd = flux_bus_decay.boost_return_trace(t_d, coil, i_top, float(v_c[-1]), *args)
        i_d[-1] = 0.0   # (the zero, to rounding)
        bus_d = v_cd + float(rel.diode(drive)) + drive.supply.boost_resistance * i_d   # the bridge's rail
    elif fast is None:
        tz = float(decay_time(0.0, i_top, r_off, v_off, ind))
        t_d = np.linspace(0.0, tz, points + 1)[1:]
        i_d = np.maximum(decay_current(t_d, i_top, r_off, v_off, ind), 0.0)
        bus_d = np.full(t_d.size, supply)
    else:   # a bridge's fast decay into the drooping bus: the bus rises as the current returns
        tz = float(fast.zero_time)
        t_d = np.linspace(0.0, tz, points + 1)[1:]
        i_d, bus_d = fast_trace(drive, rel, i_top, float(bus[-1]), t_d)   # (the terminal current)
        i_d[-1] = 0.0   # (the zero, to rounding)
    if r_e is not None:   # the magnetising currents to the terminal current (model.eddy): on, then freewheeling
        i_on = eddy.terminal(i_on, bus, r_on, r_e)
        if fast is None and clamped is None and not returning:
            i_d = np.maximum(eddy.terminal(i_d, -v_off, r_off, r_e), 0.0)
    t = np.concatenate([t_on, t_pulse + t_d])
    i = np.concatenate([i_on, i_d])
    on = np.concatenate([np.ones(t_on.size), np.zeros(t_d.size)])
    gap = None if gap_on is None else np.concatenate([gap_on, np.zeros(t_d.size)])
    return t, i, on, np.concatenate([bus, bus_d]), t_pulse + tz, rel, gap


def return_args(drive: Drive, rel) -> tuple:
    """A full bridge's return into the boost capacitor at one point
    (:func:`coildrive.model.flux_bus_decay.boost_return`): ``(coil, (C_b, r_off, R_b,
    V_d))``, the coil the release loop's (a linear ``L`` H, a flux-linkage curve or an eddy
    term), the capacitor at its nominal capacitance."""
    s = drive.supply
    return rel.inductance, (s.boost_capacitance, *(float(np.ravel(x)[0]) for x in (rel.r_off, s.boost_resistance,
                                                                                     rel.diode(drive))))


def _fast_args(drive: Drive, rel, i0: float, v0: float) -> tuple:
    s = drive.supply
    return (rel.inductance, i0, v0, *(float(np.ravel(x)[0]) for x in (rel.supply, s.source_resistance,
                                                                      s.capacitance, rel.r_off, rel.diode(drive))))


def fast_decay_after(drive: Drive, rel, i0: float, v0: float, i_drop: float = 0.0):
    """A full bridge's fast decay of ``i0`` A into the drooping bus from the bus at ``v0`` V
    at the pulse's end (:func:`coildrive.model.flux_bus_decay.fast_decays`: a linear coil,
    a flux-linkage curve or an eddy term, whose ``i0`` and ``i_drop`` are magnetising
    currents): its :class:`~coildrive.model.bus_decay.FastDecay` (``drop_time`` to
    ``i_drop`` A), or ``None`` off a bridge, on a stiff bus or from the boost (whose decay
    returns into the boost capacitor, not the main bus). ``rel``: the fast decay's loop at
    one point."""
    if not (drive.supply.droops and full_bridge(drive)) or drive.supply.boosted:
        return None
    coil, i0, v0, v_s, r_s, c, r, v_d = _fast_args(drive, rel, i0, v0)
    return fast_decays(coil, i0, [v0], i_drop, v_s, r_s, c, r, v_d, drive.supply.sink)[0]


def clamp_decay_after(drive: Drive, rel, i0: float, v0: float, i_drop: float = 0.0):
    """A clamp across the switch on the drooping bus (a linear coil, a flux-linkage curve or
    an eddy term, whose ``i0`` and ``i_drop`` are magnetising currents): the decay of ``i0``
    A from the bus at ``v0`` V at the pulse's end, the current flowing on from the bus
    through the coil into the clamp (:func:`coildrive.model.flux_bus_decay.clamp_decay`,
    ``drop_time`` to ``i_drop`` A), or ``None`` on a stiff bus or another freewheel.
    ``rel``: the release loop at one point."""
    if not (drive.supply.droops and drive.freewheel.type == "clamp"):
        return None
    return flux_bus_decay.clamp_decay(rel.inductance, i0, v0, *_clamp_args(drive, rel), i_drop)


def _clamp_args(drive: Drive, rel) -> tuple:
    """``(V_s, R_s, C, R_off, V_clamp)`` of the release loop ``rel`` at one point."""
    s = drive.supply
    return tuple(float(np.ravel(x)[0]) for x in (rel.supply, s.source_resistance, s.capacitance, rel.r_off,
                                                 rel.v_off + rel.supply))


def fast_trace(drive: Drive, rel, i0: float, v0: float, t):
    """The terminal current A and the bus V ``t`` s into :func:`fast_decay_after`'s decay
    (:func:`coildrive.model.flux_bus_decay.trace`)."""
    return flux_bus_decay.trace(t, *_fast_args(drive, rel, i0, v0), sink=drive.supply.sink)


def boost_of(drive: Drive, r_on: float, inductance):
    """The boost at its nominal charge and capacitance feeding the winding's on-loop
    ``r_on`` ohm (the boost path's own resistance added) and one point's coil
    ``inductance`` (H, a :class:`~coildrive.model.flux.FluxCoil` or an
    :class:`~coildrive.model.eddy.EddyCoil`: :func:`coildrive.model.boost.one_point`)."""
    s = drive.supply
    return boost_model.boost(s.boost, s.boost_capacitance, r_on + s.boost_resistance,
                             *boost_model.one_point(inductance))


def boost_column(drive: Drive, reset_drive: Drive, supply: float, coil_temp: float, r_factor: float,
                 l_factor: float, time, set_time: float, reset_time: float, gap: float,
                 seating=None, holds=(0.0, 0.0)) -> np.ndarray:
    """The boost capacitor (V) through both pulses: each pulse draws it down from full
    charge, then the converter recharges it at ``boost_power``
    (:func:`coildrive.model.boost.voltage_trace`); the reset pulse starts from full charge
    (the interval includes the recharge). A full bridge's fast decay returns into it after
    each pulse (:func:`coildrive.model.flux_bus_decay.boost_return`): the converter's charge from
    the pulse's end is added in energy, ``v^2 = v_r^2 + 2 P (t - t_end) / C`` up to ``V_b``
    (``v_r`` the return's capacitor; their coupling in the decay left out, as the design's
    recharge of the net energy does). ``seating``: with a moving armature the set
    pulse's ``(t, i, on, top of the coil)`` (:func:`pulse`): its capacitor is the run's
    (the top plus ``R_b i``), then the same recharge
    (:func:`coildrive.model.boost.recharge_voltage`). ``holds``: per pulse how long (s)
    after its end the converter waits before it recharges (a clamp's decay on a drooping
    main supply: until the current's zero, :func:`_decay_stretch`)."""
    out = []
    for wd, start, length, part, hold in ((drive, 0.0, set_time, time < gap, holds[0]),
                                          (reset_drive, gap, reset_time, time >= gap, holds[1])):
        lp = loop(wd, supply, coil_temp, r_factor, l_factor)
        if seating is not None and wd is drive:
            run_t, v_c = _seating_boost(wd, seating)
            dt = time - start
            after = boost_model.recharge_voltage(float(v_c[-1]), np.maximum(dt - length - hold, 0.0),
                                                 wd.supply.boost_capacitance, wd.supply.boost_power, wd.supply.boost)
            trace = np.where(dt <= length, np.interp(dt, run_t, v_c), after)
        else:
            b = boost_of(wd, float(lp.r_on), lp.inductance)
            dt = time - start   # (held at its end for `hold` s, then the recharge)
            trace = boost_model.voltage_trace(np.where(dt > length, np.maximum(dt - hold, length), dt), length, b,
                                              wd.supply.boost_power)
        if full_bridge(wd):
            rel = loop(wd, supply, coil_temp, r_factor, l_factor, path="release")
            i_end, v_end = (float(x) for x in boost_model.of(b).state(length, b))
            coil, args = return_args(wd, rel)
            dt = np.maximum(time - start - length, 0.0)
            v_r = flux_bus_decay.boost_return_trace(
                np.minimum(dt, float(flux_bus_decay.boost_return(coil, i_end, v_end, *args).zero_time)),
                coil, i_end, v_end, *args)[1]
            after = boost_model.recharge_voltage(v_r, dt, wd.supply.boost_capacitance, wd.supply.boost_power,
                                                 wd.supply.boost)
            trace = np.where(time - start <= length, trace, after)
        out.append(np.where(part, trace, 0.0))
    return out[0] + out[1]


def _seating_boost(wd: Drive, seating) -> tuple:
    """``(t s, boost capacitor V)`` over a moving armature's set pulse (``seating``: its
    ``(t, i, on, top of the coil)``, :func:`pulse`): the top plus ``R_b i`` while on."""
    t_p, i_p, on_p, top = seating
    return t_p[on_p == 1], (top + wd.supply.boost_resistance * i_p)[on_p == 1]


def _main_bus_column(drive: Drive, reset_drive: Drive, supply: float, coil_temp: float, r_factor: float,
                     l_factor: float, time, set_time: float, reset_time: float, gap: float,
                     seating=None) -> np.ndarray:
    """The drooping main bus (V) through both pulses from a full bus at ``supply`` V: after
    each pulse the boost converter draws ``boost_power / boost_efficiency`` from it while
    it puts the pulse's ``1/2 C (V_b^2 - v_end^2)`` back at ``boost_power`` (the
    ``boost_v`` column's recharge; each draw ends by the next pulse's start), the bus
    resting in between (:func:`coildrive.model.converter_bus.trace`). ``seating``: with a
    moving armature the set pulse's (:func:`boost_column`): ``v_end`` is its run's. On a
    full bridge ``v_end`` is the capacitor after the fast decay's return
    (:func:`coildrive.model.flux_bus_decay.boost_return`): the converter puts back the net, as the
    ``boost_v`` column's recharge reaches ``V_b`` once the return is over."""
    from . import converter_bus

    s = drive.supply
    starts, lengths = [], []
    for wd, start, length, nxt in ((drive, 0.0, set_time, gap), (reset_drive, gap, reset_time, np.inf)):
        if seating is not None and wd is drive:
            v_end = float(_seating_boost(wd, seating)[1][-1])
            c_b = s.boost_capacitance
        else:
            lp = loop(wd, supply, coil_temp, r_factor, l_factor)
            b = boost_of(wd, float(lp.r_on), lp.inductance)
            i_end, v_end = (float(x) for x in boost_model.of(b).state(length, b))
            c_b = float(b.c)
            if full_bridge(wd):   # the decay's return into the capacitor first
                rel = loop(wd, supply, coil_temp, r_factor, l_factor, path="release")
                coil, args = return_args(wd, rel)
                v_end = float(flux_bus_decay.boost_return(coil, i_end, v_end, *args).bus_at_zero)
        draw = 0.5 * c_b * (s.boost**2 - v_end**2) / s.boost_power if s.boost_power > 0 else 0.0
        starts.append(start + length)
        lengths.append(min(draw, nxt - start - length))
    return converter_bus.trace(time, starts, lengths, supply, s.source_resistance, s.capacitance,
                               s.converter_draw)


def _clamped_main(drive: Drive) -> bool:
    """Pulses from the boost with a clamp across each winding's switch on a drooping main
    supply: each decay draws on the main bus (:func:`_clamped_main_column`)."""
    s = drive.supply
    return s.boosted and s.droops and drive.freewheel.type == "clamp" and not full_bridge(drive)


def _decay_stretch(wd: Drive, supply: float, coil_temp: float, r_factor: float, l_factor: float, length: float,
                   t, on, bus, t_zero: float, nxt: float, start: float = 0.0, seating=None) -> tuple:
    """One pulse's stretch of the main bus (:func:`_clamped_main_column`): ``(decay start s,
    its zero s, the decay's sample times s and main bus V, the converter's run s after it)``
    -- the run puts the pulse's ``1/2 C (V_b^2 - v_end^2)`` back at ``boost_power`` from the
    current's zero (a converter held off until then), ending by ``nxt`` s (the next pulse).
    ``seating``: a moving armature's set pulse (:func:`boost_column`): ``v_end`` its run's."""
    s = wd.supply
    if seating is not None:
        v_end = float(_seating_boost(wd, seating)[1][-1])
    else:
        lp = loop(wd, supply, coil_temp, r_factor, l_factor)
        b = boost_of(wd, float(lp.r_on), lp.inductance)
        v_end = float(boost_model.of(b).state(length, b)[1])
    c_b = s.boost_capacitance
    draw = 0.5 * c_b * (s.boost**2 - v_end**2) / s.boost_power if s.boost_power > 0 and c_b > 0 else 0.0
    off = on == 0
    return start + length, t_zero, t[off], bus[off], max(min(draw, nxt - t_zero), 0.0)


def _clamped_main_column(time, supply: float, s, stretches) -> np.ndarray:
    """The drooping main bus (V) at ``time`` s from a full bus at ``supply`` V when each
    pulse's clamped decay draws on it (:func:`_decay_stretch`'s ``stretches``, in order): at
    rest until the decay (:func:`coildrive.model.converter_bus.resting`), the decay's own
    bus (:func:`coildrive.model.flux_bus_decay.clamp_trace`, from the bus there), then the
    converter's run (``under_draw``) and at rest again."""
    from . import converter_bus

    t = np.asarray(time, float)
    out = np.empty(t.shape)
    v, now = float(supply), 0.0
    p_in = s.converter_draw
    for t_a, t_b, t_d, v_d, run in list(stretches) + [(np.inf, np.inf, None, None, 0.0)]:
        rest = (t >= now) & (t <= t_a)
        out[rest] = converter_bus.resting(v, t[rest] - now, supply, s.source_resistance, s.capacitance)
        if not np.isfinite(t_a):
            break
        dec = (t > t_a) & (t <= t_b)
        out[dec] = np.interp(t[dec], t_d, v_d)
        v = float(v_d[-1])
        on = (t > t_b) & (t < t_b + run)
        out[on] = converter_bus.under_draw(v, t[on] - t_b, supply, s.source_resistance, s.capacitance, p_in)
        v, now = float(converter_bus.under_draw(v, run, supply, s.source_resistance, s.capacitance, p_in)), t_b + run
    return out


def _seating(drive: Drive, lp, l_factor: float, t_pulse: float, points: int, supply: float,
             coil_temp: float):
    """The set pulse with a moving armature (:func:`coildrive.model.armature_sim.simulate`
    from rest at the open stop; on a drooping bus from a full capacitor, a state of the
    run; from the boost its capacitor at full charge, ``bus`` the top of the coil):
    ``(t, i, gap, bus)``. The armature must rest on the seat when the pulse ends (the
    catch then holds it, and the decay is the seated coil's); :class:`NotSeated` otherwise.
    With an eddy term ``i`` is the magnetising current (the branch behind the loop's
    Thevenin pair)."""
    from .armature import params_from_loop
    from .armature_sim import simulate

    s = drive.supply
    bus = (s.source_resistance, s.capacitance) if s.droops else (0.0, 0.0)
    p = params_from_loop(drive.armature, lp, l_factor, drive.coil.eddy_resistance, bus=bus)
    if s.boosted:   # from the boost (its capacitor a state with no source behind it)
        from .armature_boost import boost_params
        p = boost_params(p, s.boost, s.boost_capacitance, s.boost_resistance)
    tr = simulate(p, [(t_pulse, True, points)], points=points)
    if tr.state != "seated":
        raise NotSeated(f"the armature is not on the seat when the set pulse ends at {supply:g} V, coil "
                         f"{coil_temp:g} degC, so the catch would not hold it")
    # (with an eddy term the magnetising current: pulse() turns it into the terminal current)
    i = tr.current if tr.magnetising_current is None else tr.magnetising_current
    u = np.full(tr.time.shape, float(p.v_on[0])) if tr.bus is None else tr.bus   # (a stiff bus: its voltage)
    # from the boost: the top of the coil is the capacitor (an ideal boost's voltage) less the
    # boost path's drop (the terminal current's, with an eddy term)
    return tr.time, i, tr.position, (u - s.boost_resistance * tr.current if s.boosted else u)


#: How long after a set pulse cut short its flight is followed at most, s (our choice: the
#: armature is back at the open stop or caught on the seat long before).
FLIGHT_S = 1.0


def _flight(drive: Drive, lp, rel, l_factor: float, t_pulse: float, points: int, supply: float,
            coil_temp: float):
    """A set pulse that ends before the moving armature rests on the seat (``pulse(...,
    fly=True)``; a linear coil on a stiff bus): the armature flown on
    (:func:`coildrive.model.armature_sim.simulate`) while the current decays through the
    release path. The catch holds it from its first touch of the seat (``impact``), after
    which the seated coil's decay runs on in closed form; else it falls back to the open stop
    and the pulse did not latch. ``(t, i, on, gap, t_zero)`` relative to the pulse's start
    (s, A, 0/1, m, s)."""
    from .armature import params_from_loop
    from .armature_sim import simulate

    s = drive.supply
    if s.droops or s.boosted or drive.coil.eddy_resistance or drive.armature.open_current:
        raise NotSeated(f"the armature is not on the seat when the set pulse ends at {supply:g} V, coil "
                        f"{coil_temp:g} degC; its flight after a cut pulse is flown for a linear coil on a "
                        "stiff bus only")
    p = params_from_loop(drive.armature, lp, l_factor)
    q = params_from_loop(drive.armature, rel, l_factor)

    def done(run) -> bool:
        return "impact" in run.events or (not run.live and run.state == "open")
    tr = simulate(p, [(t_pulse, True, points), (t_pulse + FLIGHT_S, False, points, "release")], points=points,
                  release_params=q, stop=done)
    t, i, x, on = tr.time, tr.current, tr.position, tr.switch_on.astype(float)
    t_caught = tr.events.get("impact")
    if t_caught is None:   # back open: the current is zero by now
        return t, i, on, x, float(tr.events.get("zero", t[-1]))
    if t_caught <= t_pulse:
        raise NotSeated(f"the armature touches the seat during the set pulse at {supply:g} V, coil "
                        f"{coil_temp:g} degC, but is not at rest there when it ends")
    keep = t <= t_caught
    i_c = float(i[keep][-1])
    l_c = float(np.ravel(p.l_closed)[0])
    r_off, v_off = float(np.ravel(rel.r_off)[0]), float(np.ravel(rel.v_off)[0])
    tz = float(decay_time(0.0, i_c, r_off, v_off, l_c)) if i_c > 0 else 0.0
    t_d = np.linspace(0.0, tz, points + 1)[1:]
    i_d = np.maximum(decay_current(t_d, i_c, r_off, v_off, l_c), 0.0)
    return (np.concatenate([t[keep], t_caught + t_d]), np.concatenate([i[keep], i_d]),
            np.concatenate([on[keep], np.zeros(t_d.size)]), np.concatenate([x[keep], np.zeros(t_d.size)]),
            t_caught + tz)


def latch_actuation(drive: Drive, reset_drive: Drive, supply: float, coil_temp: float,
                    set_time: float, reset_time: float, interval: float, r_factor: float = 1.0,
                    l_factor: float = 1.0, points: int = 400) -> LatchWaveform:
    """The set pulse at 0 and the reset pulse at ``interval`` s (``reset_drive``: the drive
    as its winding sees it, :func:`coildrive.design.latch.winding_drive`)."""
    ts, is_, ons, buses, tz_s, rel_s, gap_s = pulse(drive, supply, coil_temp, r_factor, l_factor, set_time, points)
    gap = max(interval, tz_s)
    clamped = _clamped_main(drive)
    main_r = None
    if clamped:   # the reset pulse's decay from the main bus the set pulse's decay and draw left
        stretch = _decay_stretch(drive, supply, coil_temp, r_factor, l_factor, set_time, ts, ons, buses, tz_s, gap,
                                 seating=None if gap_s is None else (ts, is_, ons, buses))
        main_r = float(_clamped_main_column(np.array([gap + reset_time]), supply, drive.supply, [stretch])[0])
    tr, ir, onr, busr, tz_r, rel_r, _ = pulse(reset_drive, supply, coil_temp, r_factor, l_factor, reset_time,
                                            points, main_v=main_r)
    idle_t = np.array([0.5 * (tz_s + gap)]) if gap > tz_s else np.empty(0)
    time = np.concatenate([ts, idle_t, gap + tr])
    n_s, n_i = ts.size, idle_t.size
    events = {"set": 0.0, "set_zero": tz_s, "reset": gap, "reset_zero": gap + tz_r}
    zeros_i = np.zeros(n_i)
    if full_bridge(drive):
        cols = _bridge_columns(drive, supply, time, n_s, n_i, (is_, ons, buses), (ir, onr, busr))
    else:
        cols = {"time_s": time,
                "current_a": np.concatenate([is_, zeros_i, np.zeros(tr.size)]),
                "reset_current_a": np.concatenate([np.zeros(n_s), zeros_i, ir])}
        for key, wd, rel, (i, on, bus), first in (("", drive, rel_s, (is_, ons, buses), True),
                                                  ("reset_", reset_drive, rel_r, (ir, onr, busr), False)):
            v_sw = np.where(on == 1, i * wd.switch.on_resistance,
                            np.where(i > 0, rel.switch_voltage(wd, i), bus))
            v_coil = coil_voltage(wd, bus, i, on, v_sw)
            idle_sw, idle_coil = np.full(n_i, supply), zeros_i
            other = np.full(tr.size if first else n_s, supply)
            cols[f"{key}coil_voltage_v"] = (np.concatenate([v_coil, idle_coil, 0.0 * other]) if first
                                            else np.concatenate([0.0 * other, idle_coil, v_coil]))
            cols[f"{key}switch_voltage_v"] = (np.concatenate([v_sw, idle_sw, other]) if first
                                              else np.concatenate([other, idle_sw, v_sw]))
        cols = {k: cols[k] for k in ("time_s", "current_a", "reset_current_a", "coil_voltage_v",
                                     "reset_coil_voltage_v", "switch_voltage_v", "reset_switch_voltage_v")}
    if drive.supply.boosted:
        cols["boost_v"] = boost_column(drive, reset_drive, supply, coil_temp, r_factor, l_factor, time,
                                       set_time, reset_time, gap,
                                       None if gap_s is None else (ts, is_, ons, buses),
                                       (tz_s - set_time, tz_r - reset_time) if clamped else (0.0, 0.0))
    if clamped:   # each decay draws on the main bus, the converter's run after it
        main = _clamped_main_column(time, supply, drive.supply, [
            stretch, _decay_stretch(reset_drive, supply, coil_temp, r_factor, l_factor, reset_time, gap + tr, onr, busr,
                                    gap + tz_r, np.inf, start=gap)])
    elif drive.supply.boosted and drive.supply.droops:
        main = _main_bus_column(drive, reset_drive, supply, coil_temp, r_factor, l_factor, time, set_time,
                                reset_time, gap, None if gap_s is None else (ts, is_, ons, buses))
    if drive.supply.boosted and drive.supply.droops:
        if full_bridge(drive):   # between the pulses, all five off: the rail (Q1's, Q3's drain) on the main bus
            idle = np.concatenate([np.zeros(n_s), np.ones(n_i), np.zeros(tr.size)])
            cols["q1_v"] = cols["q1_v"] + idle * (main - supply)
            cols["q3_v"] = cols["q3_v"] + idle * (main - supply)
        else:   # each switch off, its node follows the top, which the main bus holds (a clamp
            # holds it in the decay, drawn on the main bus already)
            held_s, held_r = (ons == 0) & clamped, (onr == 0) & clamped
            off_s = np.concatenate([1.0 - ons - held_s, np.ones(n_i + tr.size)])
            off_r = np.concatenate([np.ones(n_s + n_i), 1.0 - onr - held_r])
            cols["switch_voltage_v"] = cols["switch_voltage_v"] + off_s * (main - supply)
            cols["reset_switch_voltage_v"] = cols["reset_switch_voltage_v"] + off_r * (main - supply)
        cols["main_bus_v"] = main
    gap_all = (None if gap_s is None else
               np.concatenate([gap_s, np.zeros(n_i), np.full(tr.size, np.nan)]))
    return LatchWaveform(cols, events, gap_all)


def _bridge_columns(drive: Drive, supply: float, time, n_s: int, n_i: int, set_part, reset_part) -> dict:
    """The signed current, the coil's voltage and each switch's voltage (module docstring)."""
    r_sw, sense, v_d = drive.switch.on_resistance, drive.board.sense, drive.freewheel.diode_drop
    inline = sense.position == "coil"
    parts = []
    for sign, (i, on, bus) in ((1.0, set_part), (-1.0, reset_part)):
        flowing = (on == 0) & (i > 0)
        drive_rail = 0.0 if inline else i * sense.resistance
        fast_rail = 0.0 if inline else -i * sense.resistance
        rail = np.where(on == 1, drive_rail, np.where(flowing, fast_rail, 0.0))
        hi = np.where(on == 1, bus - i * r_sw, np.where(flowing, rail - v_d, 0.0))   # the driven leg
        lo = np.where(on == 1, rail + i * r_sw, np.where(flowing, bus + v_d, 0.0))   # the returning leg
        a, b = (hi, lo) if sign > 0 else (lo, hi)
        parts.append((sign * i, a, b, rail, bus))
        if sign > 0:
            parts.append((np.zeros(n_i), np.zeros(n_i), np.zeros(n_i), np.zeros(n_i), np.full(n_i, supply)))
    i, a, b, rail, bus = (np.concatenate(x) for x in zip(*parts))
    v_coil = a - b - (i * sense.resistance if inline else 0.0)
    return {"time_s": time, "current_a": i, "coil_voltage_v": v_coil, "q1_v": bus - a, "q2_v": a - rail,
            "q3_v": bus - b, "q4_v": b - rail}
