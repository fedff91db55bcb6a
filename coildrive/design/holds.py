"""The ways the firmware can hold, behind one small interface.

A hold strategy is a module with two functions:

``design(drive, samples=0, seed=1) -> Design``
    the whole design of a drive held this way (every figure under this hold);
``actuation(design, supply, coil_temp, hold_time, r_factor=1, l_factor=1, points=8,
label="", strict=True) -> Waveform``
    one actuation of that design at one operating point, as the firmware runs it
    (``simulate`` and the plot draw it).

:data:`STRATEGIES` maps ``[hold] mode`` to its module (a voltage-mode hold whose
``regulation`` is ``"closed_loop"`` has a module of its own); the design picks one, from
the file, and never branches on it again. A further way of holding is a new module here and
one entry in :data:`STRATEGIES`.
"""

from __future__ import annotations

from typing import Protocol

from ..config import Drive
from . import hold_closed_loop, hold_current, hold_voltage
from .result import Design


class HoldStrategy(Protocol):
    """What :data:`STRATEGIES` holds (each a module with these functions)."""

    def design(self, drive: Drive, samples: int = 0, seed: int = 1) -> Design: ...

    def actuation(self, design: Design, supply: float, coil_temp: float, hold_time: float,
                  r_factor: float = 1.0, l_factor: float = 1.0, points: int = 8,
                  label: str = "", strict: bool = True): ...


#: ``[hold] mode`` (or ``regulation = "closed_loop"``) -> the module that designs and
#: simulates that hold.
STRATEGIES: dict[str, HoldStrategy] = {"voltage": hold_voltage, "current": hold_current,
                                       "closed_loop": hold_closed_loop}


def strategy_for(drive: Drive) -> HoldStrategy:
    """The hold strategy of ``drive`` (its ``[hold] mode``, or the closed loop; config has
    checked the names)."""
    if drive.hold.regulation == "closed_loop":
        return STRATEGIES["closed_loop"]
    return STRATEGIES[drive.hold.mode]
