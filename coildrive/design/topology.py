"""The design's figures of where the switch sits (:mod:`coildrive.model.topology`).

The coil's loop, and with it every time, current, switch voltage and energy of the
design, is the same for each topology; what a topology adds is its switch node against
ground at every turn-off (a high-side switch's node swings below ground), and the cautions that go with it. A low-side switch's node is its drain, whose voltage
the release figures already give: no :class:`~coildrive.design.result.TopologyResult`.
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from ..model.topology import topology_of
from .corners import CornerGrid
from .evaluate import PointResults
from .figures import worst
from .result import TopologyResult
from .turnoff import event_currents, release_loop


def topology_result(drive: Drive, grid: CornerGrid, res: PointResults, peak_end,
                    trip_current: float) -> TopologyResult | None:
    """The switch node at its lowest over every turn-off of ``res`` (the points with the
    most current; the end of the peak ``peak_end`` A, the trip at ``trip_current`` A, and
    every hold off-time into the hold's path), V."""
    topo = topology_of(drive)
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
    sense = drive.board.sense
    return TopologyResult(
        name=topo.name, switch_node=topo.node, sense_position=sense.position,
        sense_place=topo.sense_places[sense.position],
        lowest_node_voltage_v=float(nodes[event][k]), lowest_node_corner=grid.label(k),
        lowest_node_event=event)


def topology_cautions(drive: Drive, result: TopologyResult | None) -> list[str]:
    """The cautions of a switch node that swings below ground (none for a low-side switch)."""
    if result is None:
        return []
    return [
        f"At turn-off the {result.switch_node} swings to {result.lowest_node_voltage_v:.3g} V "
        f"({result.lowest_node_event}, {result.lowest_node_corner}): whatever connects to it -- the "
        "gate driver's source pin, a diagnostics divider into the microcontroller, a cable to the "
        "coil -- must take that negative voltage.",
        "A high-side N-channel switch needs its gate driven above the supply for the whole peak "
        "(a charge pump or an isolated supply, or a P-channel part): a bootstrap capacitor alone "
        "recharges only while the node is low (common practice).",
    ]
