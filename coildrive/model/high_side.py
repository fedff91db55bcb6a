"""The high-side switch: between the supply and the coil, the coil's other end to ground::

    V_bus ──[R_sense if position = "switch": the supply leg]──┬───────────┐
                                                            switch      clamp (TVS, bus to
                                                            (R_on)      node) if type = "clamp"
                                                              ├───────────┘
                                          switch node (source) = coil's top terminal
                                              │                │
                         freewheel path       │              coil (R_coil(T), L)
                  (diode, diode+Zener,        │                │
                   diode+resistor; anode at   │      [R_sense if position = "coil":
                   ground, cathode at node)   │       the coil return]
                                              │                │
    ground ───────────────────────────────────┴────────────────┘

While on, the node sits at ``V_bus - i (R_on + R_sense in the supply leg)``. At turn-off
the coil keeps its current flowing, pulling the node below ground until the freewheel
path conducts from ground: the node goes to ``-(V_diode + V_zener + R_fw i)``, or with a
clamp across the switch to ``V_bus - V_clamp``; the switch sees ``V_bus`` plus the
freewheel voltage, as a low-side switch does. The coil's loop -- the freewheel path,
the coil and the sense resistor when it sits in the coil return -- is the low-side
loop of :mod:`coildrive.model.circuit`, so every decay and energy is the same. The
sense resistor in the supply leg carries current only while the switch is on (the
freewheel current returns from ground, and the clamp is taken from the bus side of the
resistor); in the coil return it carries the coil current always. Once the current is
zero the coil pulls the node to ground.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class HighSide:
    """:class:`~coildrive.model.topology.Topology` of a high-side switch."""

    name: str = "high_side"
    node: str = "switch node (source, the coil's top terminal)"
    sense_places: dict = field(default_factory=lambda: {
        "coil": "in the coil return (coil to ground)", "switch": "in the supply leg (bus to switch)"})
    shows_node: bool = True
    drive_switches: int = 1

    def node_voltage(self, supply, switch_voltage, sense_drop):
        """Switch node to ground, V: the supply less the switch and the supply-leg drop."""
        return np.asarray(supply, float) - np.asarray(switch_voltage, float) - np.asarray(sense_drop, float)

    def switch_peak_from_node(self, supply: float, node_peak: float, node_lowest: float) -> tuple[float, str]:
        """The switch sees the bus less the node: highest where the node is lowest."""
        return (supply - node_lowest,
                f"the {supply:.4g} V bus less the lowest sampled switch-node voltage {node_lowest:.4g} V")


TOPOLOGY = HighSide()
