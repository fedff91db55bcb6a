"""A full bridge on the drooping bus (``supply.source_resistance``): its turn-offs push the
coil's current back into the bus behind the source resistance and the bulk capacitor, so
the bus rises above the source while the release starts from a bus that may sit below it
(:mod:`coildrive.model.bus_decay`, closed form, with an eddy term too; a supply that
cannot sink blocks at the source's voltage and the rest charges the capacitor alone; a
flux-linkage curve's, with or without an eddy term, :mod:`coildrive.model.flux_bus_decay`,
stepped). After a boosted peak the main bus sits at the source through the peak and feeds
the hold and the boost converter from the hand-over: the release takes the converter idle
and drawing its most (:func:`coildrive.model.bus_decay.decay_drawn`; a curve's on a supply
that cannot sink bounded, :func:`coildrive.model.flux_bus_decay.drawn_no_sink_bound`; an
eddy term's there :func:`coildrive.model.bus_decay.eddy_decay_drawn_no_sink`)."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..config import Drive
from ..errors import InputError
from ..model import bus_decay, flux_bus_decay
from ..model.circuit import full_bridge
from ..model.eddy import EddyCoil, stored_energy
from ..model.eddy import terminal as eddy_terminal
from ..model.flux import FluxCoil
from ..model.supply import bus_floor
from .figures import worst
from .result import Check, ReleaseResult, SupplyResult
from .supply import bus_at, converter_current, first_on_current, model_of
from .turnoff import event_currents, release_loop

#: Starting buses tried for a bridge's fast decay, evenly over the range the bus can be in
#: at a turn-off (a still coil's state is affine in the starting bus at every moment).
BRIDGE_STARTS = bus_decay.STARTS


def _coil_top(res, peak_end) -> np.ndarray:
    """The coil's (with an eddy term: the magnetising) current's top (A) after the peak at
    the points of ``res``: the largest of the end of the peak ``peak_end`` A (a boosted
    peak's hand-over), the hold's first on-time from there at ``res.first_duty`` on a
    stiff bus at ``V_s`` (:func:`coildrive.design.supply.first_on_current`: a peak that
    ends below ``V_s/R`` rises on past its end; a closed loop's at its preload; a
    current-mode hold, ``None``, stays off until the current falls into its band) and the
    hold's top (every later on-time lies under the first one's or the orbit's, the
    argument of :func:`coildrive.design.supply._first_on_top`). A mixed-decay hold on the
    drooping bus is outside that argument (its on-times may see a bus above ``V_s``, its
    fast parts one below): there the stiff figures are checked against solve_ivp of the
    circuit instead (tests/test_bridge_mixed_droop_top.py, docs/design-method.md: the
    fast parts return less charge than the on-times draw, so the bus sits below the source
    on average)."""
    end = np.broadcast_to(np.asarray(peak_end, float), res.loop.v_on.shape)
    end = np.where(np.isfinite(end), end, 0.0)
    top = np.maximum(end, np.where(np.isfinite(res.hold.i_max), res.hold.i_max, 0.0))
    if res.first_duty is None:
        return top
    return np.maximum(top, first_on_current(res.loop, end, res.first_duty, res.hold.period))


def _top(drive: Drive, res, peak_end) -> np.ndarray:
    """The most current (A) the coil draws off the bus after the peak at the points of
    ``res``: :func:`_coil_top` (with an eddy term the terminal current it bounds)."""
    lp = res.loop
    top = _coil_top(res, peak_end)
    if isinstance(lp.inductance, EddyCoil):
        # the bus feeds the terminal current: at most (V_s + R_e i_m)/(R + R_e) (v <= V_s)
        top = eddy_terminal(top, lp.v_on, lp.r_on, lp.inductance.resistance)
    return top


def _returned_top(drive: Drive, res, peak_end) -> np.ndarray:
    """The most current (A) a fast part of the hold returns into the bus: :func:`_top`,
    and with an eddy term at least the magnetising current's top (in a fast part the
    branch's voltage is reversed, so the terminal current is below the magnetising one)."""
    top = _top(drive, res, peak_end)
    if isinstance(res.loop.inductance, EddyCoil):
        top = np.maximum(top, _coil_top(res, peak_end))
    return top


def converter_draw(drive: Drive, res, peak_end) -> np.ndarray | None:
    """The most current (A) a boosted peak's converter draws off the drooping main bus from
    the hand-over on, per point (:func:`coildrive.design.supply.converter_current` with the
    coil at most :func:`_top`, as :func:`coildrive.design.supply.handover_bus` takes it);
    ``None`` without a boost converter drawing (no boost, no ``boost_power``)."""
    if not (drive.supply.boosted and drive.supply.converter_draw > 0):
        return None
    return converter_current(drive, res.loop.v_on, _top(drive, res, peak_end))


def bus_range(drive: Drive, res, peak_time, peak_end) -> tuple[np.ndarray, np.ndarray]:
    """``(lowest, highest)`` V the bus can be at when a full bridge turns off, per point: at
    most the source ``V_s``; at least the lowest bus of the peak (``peak_time`` s) or, once
    the coil draws no more than :func:`_top` (the largest of the end of the peak ``peak_end``
    A, the hold's first on-time from there and the hold's top), the floor :func:`~coildrive.model.supply.bus_floor` under it (the
    slow decay of the hold's off-times draws nothing from the bus); and never below ``-2
    V_d``. After a boosted peak the main bus carries nothing in the peak (its diode blocks:
    it sits at ``V_s`` until the hand-over) and from the hand-over on the floor takes the
    converter's draw too (:func:`converter_draw`): the floor of
    :func:`coildrive.design.supply.handover_bus`. A mixed-decay hold (on a supply that
    sinks) returns current into the bus in every off-time's fast part, so the bus may sit
    above the source by up to :func:`coildrive.model.bus_decay.mixed_hold_rise` (the
    current returned at most :func:`_returned_top`): the highest starting bus (on a supply
    that cannot sink the starts stop at the source: :func:`no_sink_top`)."""
    s = drive.supply
    lp = res.loop
    top = _top(drive, res, peak_end)
    draw = top
    if s.boosted:
        v_peak = np.asarray(lp.v_on, float)
        i_conv = converter_draw(drive, res, peak_end)
        draw = top if i_conv is None else top + i_conv
    else:
        b = bus_at(drive, lp, lp.inductance)
        v_peak, _ = model_of(b).lowest_bus(np.broadcast_to(peak_time, lp.v_on.shape), b)
    floor = bus_floor(lp.v_on, s.source_resistance, draw)
    # never below -2 V_d: the bridge's own body diodes (Q2 then Q1) clamp the bus there
    clamp = -2.0 * np.asarray(release_loop(res).diode(drive), float)
    high = np.asarray(lp.v_on, float)
    if lp.mixed is not None and s.sink:
        # every fast part of the hold returns current: the bus may sit above the source
        # (one that cannot sink: the starts stay at or below it, see no_sink_top)
        period = np.asarray(res.hold.period, float)
        # (a PWM hold's fast part at most fraction x its fixed period; a current-mode hold's
        # period moves with the bus: its longest fast part and shortest period there)
        t_fast = lp.mixed.fraction * period
        if res.hold.fast_pulse is not None:
            t_fast, period = res.hold.fast_pulse
        high = high + bus_decay.mixed_hold_rise(s.source_resistance, s.capacitance,
                                                _returned_top(drive, res, peak_end), t_fast, period)
    return np.maximum(np.minimum(v_peak, floor), clamp), high


def no_sink_top(drive: Drive, res, peak_end) -> np.ndarray | None:
    """A full bridge's mixed-decay hold on a supply that cannot sink (drooping or stiff:
    the argument needs only the feed diode): the highest bus (V) over the hold and every
    turn-off after it, per point --
    :func:`coildrive.model.bus_decay.no_sink_energy_top` with the coil's energy at most
    its stored energy at :func:`_coil_top` (``1/2 L top^2``, a curve's ``int i dpsi``; with
    an eddy term the magnetising branch's, the eddy resistance stores none) when the bus
    crosses up through the source. With a moving armature (seated at rest through the hold:
    the seated coil's store) its spring and load may feed the circuit too once a turn-off
    lets it go: the energy they can give up between the seat and any gap
    (:attr:`coildrive.model.armature.ArmatureParams.opening_work`) adds to the coil's top
    energy -- the sum ``1/2 C v^2 + W + kinetic + the spring's and the load's potential``
    never rises while the feed blocks (the pull only trades energy between the field and
    the motion; damping and the stops' impacts lose it), and the kinetic energy and the
    field's store are never negative. ``None`` otherwise. (The fast decays from starting
    buses at or below the source give the release's times and charges: a bus above it
    decays faster, with less charge.)"""
    lp = res.loop
    if not full_bridge(drive) or drive.supply.sink or lp.mixed is None:
        return None
    coil = lp.inductance
    mag = coil.magnetising if isinstance(coil, EddyCoil) else coil
    w_top = stored_energy(mag, _coil_top(res, peak_end))
    if res.armature is not None:
        w_top = w_top + np.reshape(res.armature.params.opening_work, np.shape(w_top))
    return bus_decay.no_sink_energy_top(lp.v_on, drive.supply.capacitance, w_top)


def drooped(drive: Drive) -> bool:
    """True for a full bridge on the drooping bus."""
    return drive.supply.droops and full_bridge(drive)


def decays(drive: Drive, res, i0, peak_time, peak_end) -> list[bus_decay.FastDecay]:
    """The fast decay of ``i0`` A at the points of ``res`` from each of
    :data:`BRIDGE_STARTS` starting buses over :func:`bus_range` (a supply that cannot
    sink: :func:`coildrive.model.bus_decay.decay_no_sink`; a flux-linkage curve:
    :mod:`coildrive.model.flux_bus_decay`, stepped; an eddy term:
    :func:`coildrive.model.bus_decay.eddy_decay` (``eddy_decay_no_sink``), or with a curve
    the stepped ones, the currents the magnetising ones). After a boosted peak the
    converter may be idle or drawing its most (:func:`converter_draw`, ``I_c``): a linear
    coil's :func:`coildrive.model.bus_decay.decay_drawn`; a curve's or an eddy term's on a
    supply that sinks the same decays with the source ``V_s - R_s I_c`` (Thevenin: ``C
    dv/dt = i + (V_s - v)/R_s - I_c = i + (V_s - R_s I_c - v)/R_s``, exact); a curve's (no
    eddy term) on a supply that cannot sink, the feed blocking at ``V_s`` and the drain on,
    bounded: :func:`coildrive.model.flux_bus_decay.drawn_no_sink_bound` (the release against
    the fixed lowest bus, the highest bus by the energy argument); an eddy term's (its
    linear magnetising branch) there exact:
    :func:`coildrive.model.bus_decay.eddy_decay_drawn_no_sink` (a bus fed again that would
    climb back to the source is refused in one line, ``supply.sink``)."""
    s = drive.supply
    lp = release_loop(res)
    lo, hi = bus_range(drive, res, peak_time, peak_end)
    starts = [lo + (hi - lo) * k / (BRIDGE_STARTS - 1) for k in range(BRIDGE_STARTS)]
    coil = lp.inductance
    i_conv = converter_draw(drive, res, peak_end)
    plain = not isinstance(coil, (EddyCoil, FluxCoil))
    # a curve (no eddy term) on a supply that cannot sink: the drawing converter's bound below
    bound = i_conv is not None and isinstance(coil, FluxCoil) and not s.sink
    # an eddy term (a linear branch) on a supply that cannot sink: its drawing decay below
    eddy_drawn = i_conv is not None and isinstance(coil, EddyCoil) and not s.sink
    # the sources the decays run against: the idle converter's, and the drawing one's (a
    # curve or an eddy term on a supply that sinks; a plain linear coil's drawing
    # converter is decay_drawn's below, the feed's blocking included)
    sources = [lp.v_on] + ([] if i_conv is None or plain or bound or eddy_drawn
                           else [lp.v_on - s.source_resistance * i_conv])
    runs = [run for v_s in sources
            for run in flux_bus_decay.fast_decays(coil, i0, starts, drive.release.current, v_s, s.source_resistance,
                                                  s.capacitance, lp.r_off, lp.diode(drive), s.sink)]
    if i_conv is not None and plain:
        # the converter may be idle at the turn-off (recharged) or drawing its most: the
        # state is affine in its current too, so both ends from every starting bus
        runs += [bus_decay.decay_drawn(i0, v0, drive.release.current, lp.v_on, i_conv, s.source_resistance,
                                       s.capacitance, lp.r_off, coil, lp.diode(drive), s.sink) for v0 in starts]
    if eddy_drawn:
        # the feed blocking at V_s with the converter's drain: fed against V_s - R_s I_c,
        # blocked, fed again, the diodes blocking at the terminal current's zero (exact)
        try:
            runs += [bus_decay.eddy_decay_drawn_no_sink(i0, v0, drive.release.current, lp.v_on, i_conv,
                                                        s.source_resistance, s.capacitance, lp.r_off,
                                                        coil.magnetising, lp.diode(drive), coil.resistance)
                     for v0 in starts]
        except bus_decay.Unbounded as err:
            raise InputError(drive.source, "supply.sink", (
                f"false with an eddy-current term and the boost converter drawing: {err} after a turn-off "
                "(not modelled), expected a supply that sinks, a larger capacitance or a lower boost_power")) from None
    if bound:
        # the feed blocking at V_s with the converter's drain: the slowest release (against
        # the fixed lowest bus) and the highest bus (the energy argument), bounded
        if np.any(np.minimum(lo, lp.v_on - s.source_resistance * i_conv) + 2.0 * lp.diode(drive) <= 0.0):
            raise InputError(drive.source, "supply.source_resistance", (
                "the boost converter's draw and the coil pull the main bus down to the bridge's body "
                "diodes: a curve's release there has no bound, expected a lower source resistance or "
                "boost_power"))
        runs += [flux_bus_decay.drawn_no_sink_bound(i0, v0, drive.release.current, lp.v_on, i_conv,
                                                    s.source_resistance, s.capacitance, lp.r_off, coil,
                                                    lp.diode(drive)) for v0 in starts]
    return runs


def release_time(drive: Drive, res, peak_time) -> np.ndarray:
    """The time (s) to the drop-out current from the top of the hold ripple at each point of
    ``res``: on the drooping bus the longest over the starting buses (at least the stiff
    bus's); otherwise ``res.release_time``."""
    if not drooped(drive):
        return res.release_time
    runs = decays(drive, res, np.where(np.isfinite(res.hold.i_max), res.hold.i_max, 0.0), peak_time,
                  res.peak_end_current)
    return np.maximum(res.release_time, np.max([d.drop_time for d in runs], axis=0))


def bridge_release(drive: Drive, grid, res, release: ReleaseResult, peak_time, peak_end,
                   trip_current: float) -> tuple[ReleaseResult, dict]:
    """A full bridge's turn-offs on the drooping bus: the fast decay pushes the current back
    into the bus behind ``R_s`` and ``C`` (:mod:`coildrive.model.bus_decay`, exact), from
    :data:`BRIDGE_STARTS` starting buses over :func:`bus_range` at every point. The release
    figures take the longer drop-out and zero times (the bus starts below the source: the
    design's release on the source voltage is not the safe side), the higher switch
    voltage (the bus rises above the source) and the larger body-diode energy
    (``2 V_d int i dt``, more charge on a slower decay); the dict holds the highest bus for
    :class:`~coildrive.design.result.SupplyResult`. A mixed-decay hold on a supply that
    cannot sink: a turn-off from the hold (its end, a trip) sees the bus at most
    :func:`no_sink_top` too. Without a source resistance or a bridge, unchanged and
    ``{}``."""
    if not drooped(drive):
        return release, {}
    v_d = release_loop(res).diode(drive)
    common = drive.board.sense.position != "coil"
    offs = [dict(o) for o in release.turn_offs]
    bus_top, ev_top, k_top = -np.inf, "", 0
    t_drop = t_zero = None
    hold_top = no_sink_top(drive, res, peak_end)   # (a mixed-decay hold, no sink: a bound)
    for event, i0 in event_currents(res, peak_end, trip_current).items():
        runs = (decays(drive, res, i0, peak_time, peak_end) if res.armature is None
                else _armature_decays(drive, res, event, i0, peak_time, peak_end))
        bus = np.max([d.bus_max for d in runs], axis=0)
        if hold_top is not None and event != "end of peak":   # a turn-off from the hold
            bus = np.maximum(bus, hold_top)
        diodes = 2.0 * v_d * np.max([d.charge for d in runs], axis=0)   # the two body diodes
        v_sw = bus + v_d + (drive.board.sense.resistance * i0 if common else 0.0)
        k = worst(v_sw)
        for o in offs:
            if o["event"] != event:
                continue
            if v_sw[k] > o["switch_voltage_v"]:
                o.update(switch_voltage_v=float(v_sw[k]), switch_voltage_corner=grid.label(k))
            k_e = worst(diodes)
            if diodes[k_e] > o["energy_j"]:
                o.update(energy_j=float(diodes[k_e]), energy_corner=grid.label(k_e),
                         elements_j={**o["elements_j"], "diode": float(np.max(diodes))})
        if float(np.max(bus)) > bus_top:
            k_top = worst(bus)
            bus_top, ev_top = float(bus[k_top]), event
        if event == "end of hold" and res.armature is not None:
            # the release time is the armature's on the open stop (already the run's)
            t_drop = np.zeros_like(runs[0].drop_time)
            t_zero = runs[0].zero_time
        elif event == "end of hold":
            t_drop = np.max([d.drop_time for d in runs], axis=0)
            t_zero = np.max([d.zero_time for d in runs], axis=0)
    top = max(offs, key=lambda o: o["energy_j"])
    out = dict(turn_offs=offs, peak_switch_voltage_v=max(release.peak_switch_voltage_v,
                                                         *(o["switch_voltage_v"] for o in offs)),
               energy_j=top["energy_j"], worst_turn_off=top["event"])
    k = worst(t_drop)
    if t_drop[k] > release.time_s:
        out.update(time_s=float(t_drop[k]), worst_corner=grid.label(k))
    zero = max(release.zero_time_s, float(np.max(t_zero)))
    out.update(zero_time_s=zero, lockout_ticks=math.ceil(zero * drive.board.tick.rate - 1e-9) + 1)
    return dataclasses.replace(release, **out), dict(
        highest_bus_v=bus_top, highest_bus_event=ev_top, highest_bus_corner=grid.label(k_top))


def _armature_decays(drive: Drive, res, event: str, i0, peak_time, peak_end) -> list[bus_decay.FastDecay]:
    """A moving armature's turn-off of ``i0`` A on the drooping bus (a linear coil; a
    supply that cannot sink too): the armature seated at the turn-off lets go while the current
    returns into the bus (:func:`coildrive.model.armature_bus_release.release_over`, the
    worst of :data:`BRIDGE_STARTS` starting buses over :func:`bus_range`, its floor the
    pull-in's lowest bus too): the end of the hold's the design's run already
    (``res.armature.bus_release``). One :class:`~coildrive.model.bus_decay.FastDecay`
    of those worst figures (``drop_time``: the time to the open stop). After a boosted peak
    the boost converter may be idle or drawing its most (:func:`converter_draw`): both."""
    from ..model.armature_bus_release import release_over

    arm = res.armature
    lp = release_loop(res)
    shape = np.shape(lp.v_on)
    if event == "end of hold":
        r = arm.bus_release
    else:
        lo, hi = bus_range(drive, res, peak_time, peak_end)
        lo = np.minimum(lo, np.reshape(arm.pull_in.lowest_bus, shape))
        p = dataclasses.replace(arm.params, r_off=np.ravel(np.broadcast_to(lp.r_off, shape)).astype(float),
                                v_off=np.ravel(np.broadcast_to(lp.v_off, shape)).astype(float))
        i_conv = converter_draw(drive, res, peak_end)
        r = release_over(p, np.ravel(i0), np.ravel(lo), np.ravel(hi), 2.0 * np.ravel(np.broadcast_to(
            np.asarray(lp.diode(drive), float), shape)), BRIDGE_STARTS, sink=drive.supply.sink,
            drains=() if i_conv is None else (np.ravel(i_conv),))
    b = r.run
    figures = (b.open_time, b.zero_time, r.highest_bus, r.highest_bus, r.highest_bus_time, r.bus_at_zero,
               b.charge)
    return [bus_decay.FastDecay(*(np.reshape(a, shape) for a in figures))]


def bridge_bus_checks(drive: Drive, sup: SupplyResult | None) -> list[Check]:
    """``capacitor_voltage``: a full bridge's highest bus on the drooping bus against the
    bulk capacitor's rating (a warning when the drive gives none). The switches' check
    takes the same bus through the release's switch voltage."""
    if sup is None or sup.highest_bus_v is None or not drive.supply.sink:
        # a supply that cannot sink: the bus_pump_up and capacitor_voltage checks of
        # design/topology.py take the same highest bus (the pump-up from the source's
        # voltage, the highest of the starting buses)
        return []
    rating = drive.supply.capacitor_voltage
    where = f"the bus rises to {sup.highest_bus_v:.4g} V ({sup.highest_bus_event}, {sup.highest_bus_corner})"
    if not rating > 0:
        return [Check("capacitor_voltage", False, f"{where}; the drive gives no supply.capacitor_voltage "
                      "to check it against", severity="warning")]
    ok = sup.highest_bus_v <= rating
    return [Check("capacitor_voltage", ok, f"{where} vs the bulk capacitor's {rating:.4g} V rating"
                  + ("" if ok else " -- a higher-rated or larger capacitor, a lower source resistance"))]
