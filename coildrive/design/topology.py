"""The design's figures of where the switch sits (:mod:`coildrive.model.topology`).

For a low-side and a high-side switch the coil's loop, and with it every time, current,
switch voltage and energy of the design, is the same; what the high side adds is its
switch node against ground at every turn-off (it swings below ground), and the cautions
that go with it. A low-side switch's node is its drain, whose voltage the release
figures already give: no :class:`~coildrive.design.result.TopologyResult`. A full bridge
(:mod:`coildrive.model.bridge`) has its own loop, built by :func:`coildrive.model.circuit.loop`;
here are the energy its fast decay returns to the supply and, when the supply cannot
take it, the bus pump-up and its checks.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..config import Drive
from ..model.bridge import PHASES, pump_up
from ..model.circuit import full_bridge
from ..model.rl import decay_integrals, decay_time
from ..model.topology import topology_of
from .corners import CornerGrid
from .bridge_bus import no_sink_top
from .evaluate import PointResults
from .figures import worst
from .result import BridgeResult, Check, ReleaseResult, TopologyResult
from .turnoff import event_currents, release_loop


def topology_result(drive: Drive, grid: CornerGrid, res: PointResults, peak_end,
                    trip_current: float) -> TopologyResult | None:
    """The switch node at its lowest over every turn-off of ``res`` (the points with the
    most current; the end of the peak ``peak_end`` A, the trip at ``trip_current`` A, and
    every hold off-time into the hold's path), V; for a full bridge its decay paths and
    the energy they return (:func:`bridge_result`)."""
    topo = topology_of(drive)
    sense = drive.board.sense
    if full_bridge(drive):
        return TopologyResult(name=topo.name, switch_node=topo.node, sense_position=sense.position,
                              sense_place=topo.sense_places[sense.position],
                              bridge=bridge_result(drive, grid, res, peak_end, trip_current))
    if not topo.shows_node:
        return None
    supply = np.asarray(res.supply, float)
    zero = np.zeros(np.shape(supply))
    lp_rel = release_loop(res)
    nodes = {event: topo.node_voltage(supply, lp_rel.switch_voltage(drive, i), zero)
             for event, i in event_currents(res, peak_end, trip_current).items()}
    hold_top = np.where(np.isfinite(res.hold.i_max), res.hold.i_max, 0.0)
    nodes["every hold off-time"] = topo.node_voltage(supply, res.loop.switch_voltage(drive, hold_top), zero)
    lowest = {event: worst(v, largest=False) for event, v in nodes.items()}
    event = min(lowest, key=lambda e: float(nodes[e][lowest[e]]))
    k = lowest[event]
    return TopologyResult(
        name=topo.name, switch_node=topo.node, sense_position=sense.position,
        sense_place=topo.sense_places[sense.position],
        lowest_node_voltage_v=float(nodes[event][k]), lowest_node_corner=grid.label(k),
        lowest_node_event=event)


def bridge_result(drive: Drive, grid: CornerGrid, res: PointResults, peak_end,
                  trip_current: float) -> BridgeResult:
    """The energy a full bridge's fast decay returns to the bus at every turn-off of
    ``res`` (closed form at a fixed bus, :mod:`coildrive.model.bridge`), and with a supply
    that cannot sink it the bus pump-up on the bulk capacitance (series RLC, exact). With
    an ``[armature]`` the release's energy is ``V_bus`` times the armature run's charge
    (:func:`coildrive.model.armature_runs.release` on the fast path) and its pump-up is
    bounded by that charge on the capacitor. A mixed-decay hold on a supply that cannot
    sink (stiff or drooping) pumps the bus in its fast parts: the hold and the turn-offs
    from it take the energy bound :func:`coildrive.design.bridge_bus.no_sink_top` where it
    is higher."""
    lp = release_loop(res)
    supply = np.asarray(res.supply, float)
    currents = event_currents(res, peak_end, trip_current)
    returned = {}
    for event, i in currents.items():
        t0 = decay_time(0.0, i, lp.r_off, lp.v_off, lp.inductance)
        q, _ = decay_integrals(t0, i, lp.r_off, lp.v_off, lp.inductance)
        returned[event] = supply * q
    arm = res.armature
    if arm is not None:
        # the release as the armature model runs it: the armature lets go during the fast
        # decay and its falling inductance feeds the bus (the whole charge goes back at V_bus)
        q_arm = np.reshape(arm.release.charge, np.shape(supply))
        returned["end of hold"] = supply * np.where(np.isfinite(q_arm), q_arm, 0.0)
    k_rel = worst(returned["end of hold"])
    worst_event = max(returned, key=lambda e: float(np.max(returned[e])))
    k_w = worst(returned[worst_event])
    sup = drive.supply
    out = dict(hold_decay="slow", release_decay="fast",
               returned_per_release_j=float(returned["end of hold"][k_rel]), release_corner=grid.label(k_rel),
               returned_worst_j=float(returned[worst_event][k_w]), worst_event=worst_event,
               worst_corner=grid.label(k_w), returned_per_hold_period_j=0.0, sink=sup.sink,
               capacitance_f=sup.capacitance, capacitor_rating_v=sup.capacitor_voltage,
               switches_on={phase: list(names) for phase, names in PHASES.items()})
    if sup.boosted and sup.boost_capacitance > 0:
        # a bound for a bridge wired so that its return reaches the boost capacitor (through
        # Q_b's body diode): the same series RLC as the bus pump-up, onto C_b less its
        # tolerance from the boost at full charge (Q_b's own drop left out: a higher bound)
        v_top = sup.boost * (1.0 + sup.boost_tolerance)
        c_b = sup.boost_capacitance * (1.0 - sup.boost_capacitance_tolerance)
        rises = {event: pump_up(i, v_top + 0.0 * supply, c_b, lp.r_off, lp.inductance, lp.diode(drive)).v2
                 for event, i in currents.items()}
        ev = max(rises, key=lambda e: float(np.max(rises[e])))
        k_b = worst(rises[ev])
        out.update(boost_return_bound_v=float(rises[ev][k_b]), boost_return_event=ev,
                   boost_return_corner=grid.label(k_b))
    if res.loop.mixed is not None:  # the fast part of every off-time returns V_bus x its charge
        per_period = supply * np.asarray(res.hold.charge_fast, float)
        k_h = worst(per_period)
        out.update(hold_decay="mixed", returned_per_hold_period_j=float(per_period[k_h]),
                   hold_fast_fraction=drive.hold.fast_fraction, hold_period_corner=grid.label(k_h))
    if not sup.sink:
        pumps = {event: pump_up(i, supply, sup.capacitance, lp.r_off, lp.inductance, lp.diode(drive))
                 for event, i in currents.items()}
        if arm is not None:
            # no closed form with the armature moving: bound the release's rise by its
            # whole charge at the fixed bus landing on the capacitor (a rising bus drains
            # the flux sooner, with less charge)
            p = pumps["end of hold"]
            v2 = np.maximum(p.v2, supply + returned["end of hold"] / supply / sup.capacitance)
            pumps["end of hold"] = dataclasses.replace(p, v2=v2, delta_v=v2 - supply)
        hold_top = no_sink_top(drive, res, peak_end)
        if hold_top is not None:
            # a mixed-decay hold: its fast parts pump the bus (most in the hold's first
            # periods); bounded with the turn-offs after it by the coil's top energy
            for ev in ("end of hold", "over-current trip"):
                p = pumps[ev]
                v2 = np.maximum(p.v2, hold_top)
                pumps[ev] = dataclasses.replace(p, v2=v2, delta_v=v2 - supply)
        event = max(pumps, key=lambda e: float(np.max(pumps[e].v2)))
        k = worst(pumps[event].v2)
        v2 = float(pumps[event].v2[k])
        # the switches see the pumped bus plus a body diode, and a common-return sense
        # resistor's drop at the largest current (the two peak at either end of the decay:
        # their sum bounds the highest)
        i_top = max(float(np.max(i)) for i in currents.values())
        drop = 0.0 if drive.board.sense.position == "coil" else drive.board.sense.resistance * i_top
        out.update(pumped_bus_v=v2, pump_up_v=float(pumps[event].delta_v[k]), pump_event=event,
                   pump_corner=grid.label(k),
                   pumped_switch_voltage_v=v2 + float(np.max(lp.diode(drive))) + drop)
    return BridgeResult(**out)


def worse_bridge(result: TopologyResult, other: TopologyResult) -> TopologyResult:
    """A full bridge's ``result`` with each of its figures -- the energy returned per release
    and at the worst turn-off, the pumped bus -- taken from ``other`` (the same bridge at
    other points: a cold coil) where it is worse there."""
    a, b = result.bridge, other.bridge
    groups = (("returned_per_release_j", "release_corner"),
              ("returned_worst_j", "worst_event", "worst_corner"),
              ("pumped_bus_v", "pump_up_v", "pump_event", "pump_corner", "pumped_switch_voltage_v"))
    out = {}
    for head, *rest in groups:
        if getattr(b, head) is not None and (getattr(a, head) is None or getattr(b, head) > getattr(a, head)):
            out.update({name: getattr(b, name) for name in (head, *rest)})
    return dataclasses.replace(result, bridge=dataclasses.replace(a, **out))


def pumped_release(release: ReleaseResult, result: TopologyResult | None) -> ReleaseResult:
    """The release figures with the switches' voltage on a pumped bus (a full bridge whose
    supply cannot sink the returned energy), so that the switch-voltage check sees it."""
    b = None if result is None else result.bridge
    if b is None or b.sink or not b.pumped_switch_voltage_v > release.peak_switch_voltage_v:
        return release
    return dataclasses.replace(release, peak_switch_voltage_v=b.pumped_switch_voltage_v)


def bridge_checks(drive: Drive, result: TopologyResult | None) -> list[Check]:
    """With a supply that cannot sink the fast decay's energy: the pumped bus against the
    switches' rating (derated) and the bulk capacitor's rating."""
    b = None if result is None else result.bridge
    if b is None or b.sink:
        return []
    sw = drive.switch
    limit = sw.max_voltage * sw.derating
    ok = b.pumped_switch_voltage_v <= limit
    out = [Check("bus_pump_up", ok,
                 f"the fast decay ({b.pump_event}, {b.pump_corner}) pumps the bus up by {b.pump_up_v:.4g} V "
                 f"to {b.pumped_bus_v:.4g} V on {b.capacitance_f * 1e6:.4g} uF (supply.sink = false): the "
                 f"switches see up to {b.pumped_switch_voltage_v:.4g} V vs {limit:.4g} V ({sw.derating:.0%} of "
                 f"the {sw.max_voltage:.4g} V rating)" + ("" if ok else " -- more bulk capacitance, a "
                                                        "supply that takes current back, or a "
                                                        "higher-rated switch"))]
    if b.capacitor_rating_v > 0:
        ok = b.pumped_bus_v <= b.capacitor_rating_v
        out.append(Check("capacitor_voltage", ok,
                         f"pumped bus {b.pumped_bus_v:.4g} V vs the bulk capacitor's {b.capacitor_rating_v:.4g} V "
                         "rating" + ("" if ok else " -- a higher-rated or larger capacitor")))
    else:
        out.append(Check("capacitor_voltage", False, f"pumped bus {b.pumped_bus_v:.4g} V; the drive gives "
                         "no supply.capacitor_voltage to check it against", severity="warning"))
    return out


def topology_cautions(drive: Drive, result: TopologyResult | None) -> list[str]:
    """The cautions of a switch node that swings below ground (none for a low-side switch),
    or of a bridge returning energy to its supply."""
    if result is None:
        return []
    b = result.bridge
    if b is not None:
        out = [f"The bridge's fast decay returns up to {b.returned_worst_j * 1e3:.3g} mJ per turn-off to the "
               f"supply ({b.worst_event}): a supply that cannot take current back (a diode in its feed, "
               "many bench and linear supplies) lets the bus rise; check it before relying on it."]
        if not b.sink:
            out.append(f"With supply.sink = false the bus rises to {b.pumped_bus_v:.3g} V at a turn-off: "
                       "everything on the bus (the supply's output, other loads, the bulk capacitor) must "
                       "take it, and repeated actuations pump it up further unless the bus discharges "
                       "between them.")
        if b.boost_return_bound_v is not None:
            out.append("With a boosted peak, wire leg B's high side (Q3) to the main bus, not to the "
                       "boost switch's rail: there the fast decay's return would go up the boost switch's "
                       f"body diode into the boost capacitor, up to {b.boost_return_bound_v:.3g} V. Q1's "
                       "gate must be driven above the boost rail for the whole peak (common practice).")
        return out
    return [
        f"At turn-off the {result.switch_node} swings to {result.lowest_node_voltage_v:.3g} V "
        f"({result.lowest_node_event}, {result.lowest_node_corner}): whatever connects to it -- the "
        "gate driver's source pin, a diagnostics divider into the microcontroller, a cable to the "
        "coil -- must take that negative voltage.",
        "A high-side N-channel switch needs its gate driven above the supply"
        + (" (the boost rail in a boosted peak)" if drive.supply.boosted else "") + " for the whole peak "
        "(a charge pump or an isolated supply, or a P-channel part): a bootstrap capacitor alone "
        "recharges only while the node is low (common practice).",
    ]
