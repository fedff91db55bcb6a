"""Where the switch sits: the topology interface, its registry and what every topology shares.

The coil's loop is the same whichever side of the coil the switch is on: on, the supply
drives the coil through the switch and the sense resistor; off, the coil's current
freewheels through the path of :mod:`coildrive.model.circuit`, whose switch voltage
(drain to source) and decay are the same for a low-side and a high-side switch. What a
topology changes is where the circuit's nodes sit against ground -- the switch node the
firmware's diagnostics and a scope see -- and where the sense resistor's two positions
are. A topology is a module with a :class:`Topology` object; :data:`TOPOLOGIES` maps
``[switch] topology`` to it, and the model picks it once (:func:`topology_of`).

Voltages in V, currents in A, resistances in ohm; arrays broadcast together.
"""

from __future__ import annotations

from typing import Protocol

import numpy as np

from ..config import Drive
from . import bridge, high_side, low_side


class Topology(Protocol):
    """What each topology module provides."""

    #: The ``[switch] topology`` value.
    name: str
    #: What the switch node is, in words (tables and the header comment).
    node: str
    #: ``sense.position`` -> where the resistor sits in this circuit, in words.
    sense_places: dict[str, str]
    #: Whether the switch node is more than the switch's voltage, so that the design
    #: reports it and ``simulate`` adds the ``node_voltage_v`` and ``coil_voltage_v``
    #: columns (a low-side switch's node is its drain: the switch voltage says it all).
    shows_node: bool
    #: Switches the drive current flows through while on (each ``on_resistance``): one,
    #: or a full bridge's two (Q1 + Q4).
    drive_switches: int

    def node_voltage(self, supply, switch_voltage, sense_drop):
        """The switch node against ground (V), from the supply V, the switch's drain-source
        voltage V and the drop across a sense resistor in the switch's leg V (``i R_sense``
        while the switch is on there, else 0)."""

    def switch_peak_from_node(self, supply: float, node_peak: float, node_lowest: float) -> tuple[float, str]:
        """The switch's highest voltage (V) from a probe on the switch node -- its highest
        magnitude ``node_peak`` V and its lowest value ``node_lowest`` V, at a bus of
        ``supply`` V -- and how it was found, in words."""


def coil_voltage(drive: Drive, supply, current, on, switch_voltage):
    """Voltage across the coil's terminals (V: ``R_coil i + L di/dt``) from the supply V,
    the coil current A, the switch state (0/1) and its drain-source voltage V.

    Kirchhoff round the loop, the same for both switch positions: the supply less the
    switch less the sense resistor when it carries the coil's current (always in the coil
    path, only while on in the switch's leg). Freewheeling this is ``-(V_off + (R_off -
    R_coil) i)`` of :class:`~coildrive.model.circuit.Loop`; with no current, 0.
    """
    sense = drive.board.sense
    current = np.asarray(current, float)
    on = np.asarray(on)
    carries = (on == 1) if sense.position == "switch" else np.ones(np.shape(on), bool)
    return np.asarray(supply, float) - np.asarray(switch_voltage, float) - np.where(
        carries, current * sense.resistance, 0.0)


def sense_leg_drop(drive: Drive, current, on):
    """Drop across a sense resistor in the switch's leg (V): ``i R_sense`` while the switch
    is on, 0 off or with the resistor in the coil path."""
    sense = drive.board.sense
    if sense.position != "switch":
        return np.zeros(np.shape(current))
    return np.where(np.asarray(on) == 1, np.asarray(current, float) * sense.resistance, 0.0)


def topology_of(drive: Drive) -> Topology:
    """The topology of ``drive`` (its ``[switch] topology``; config has checked the name)."""
    return topology_named(drive.switch.topology)


def topology_named(name: str) -> Topology:
    """The topology of a ``[switch] topology`` value (a drive's, or a board's alone)."""
    return {"low_side": low_side.TOPOLOGY, "high_side": high_side.TOPOLOGY,
            "full_bridge": bridge.TOPOLOGY}[name]
