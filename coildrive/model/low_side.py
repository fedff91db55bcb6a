"""The low-side switch: between the coil and ground (the original circuit)::

    V_bus ──┬───────────────┐
            │            freewheel path (diode, diode+Zener, diode+resistor)
          coil (R_coil(T), L)│
            │  [R_sense if position = "coil"]
            ├───────────────┘
          drain ── switch (R_on) ── [R_sense if position = "switch"] ── ground
            └── clamp (TVS, drain to ground) if freewheel type = "clamp"

The switch node is the drain: ``i R_on`` (plus the sense drop under the switch) while on,
``V_bus + V_fw`` while freewheeling, ``V_bus`` once the current is zero.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class LowSide:
    """:class:`~coildrive.model.topology.Topology` of a low-side switch."""

    name: str = "low_side"
    node: str = "drain"
    sense_places: dict = field(default_factory=lambda: {
        "coil": "in the coil path", "switch": "under the switch (source to ground)"})
    shows_node: bool = False
    drive_switches: int = 1

    def node_voltage(self, supply, switch_voltage, sense_drop):
        """Drain to ground, V: the switch's voltage on top of the drop under it."""
        return np.asarray(switch_voltage, float) + np.asarray(sense_drop, float) + 0.0 * np.asarray(supply)

    def switch_peak_from_node(self, supply: float, node_peak: float, node_lowest: float) -> tuple[float, str]:
        """The drain's highest sample is the switch's highest voltage."""
        return node_peak, "highest sampled switch-node voltage"


TOPOLOGY = LowSide()
