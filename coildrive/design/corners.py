"""Operating corners: supply x ambient x resistance tolerance x inductance tolerance."""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from ..config import Drive


@dataclass(frozen=True)
class CornerGrid:
    """The corner operating points as parallel arrays (V, degC, factors)."""

    supply: np.ndarray
    ambient: np.ndarray
    r_factor: np.ndarray
    l_factor: np.ndarray

    def __len__(self) -> int:
        return len(self.supply)

    def label(self, k: int) -> str:
        """Short human label of corner ``k``, e.g. ``"20 V, 50 degC, R+7%, L+15%"``."""
        return (f"{self.supply[k]:g} V, {self.ambient[k]:g} degC, "
                f"{tolerance_label('R', self.r_factor[k])}, {tolerance_label('L', self.l_factor[k])}")


def tolerance_label(name: str, factor: float) -> str:
    """``"R+7%"`` for a factor of 1.07, ``"R nom"`` for 1."""
    pct = (factor - 1.0) * 100.0
    return f"{name}{pct:+.3g}%" if abs(pct) > 1e-9 else f"{name} nom"


def _axis(*values: float) -> list[float]:
    out: list[float] = []
    for v in values:
        if not any(abs(v - u) < 1e-12 for u in out):
            out.append(v)
    return out


def corner_grid(drive: Drive) -> CornerGrid:
    """Every combination of supply min/nominal/max, ambient min/max, R and L at +/- tolerance.

    Repeated values (a zero tolerance, equal min and max) appear once.
    """
    c = drive.coil
    rows = list(itertools.product(
        _axis(drive.supply.min, drive.supply.nominal, drive.supply.max),
        _axis(drive.ambient.min, drive.ambient.max),
        _axis(1.0 - c.resistance_tolerance, 1.0 + c.resistance_tolerance),
        _axis(1.0 - c.inductance_tolerance, 1.0 + c.inductance_tolerance),
    ))
    a = np.array(rows, float)
    return CornerGrid(a[:, 0].copy(), a[:, 1].copy(), a[:, 2].copy(), a[:, 3].copy())


def nominal_point(drive: Drive) -> CornerGrid:
    """The nominal operating point: nominal supply and parts, ambient at the coil's
    reference temperature (clipped into the ambient range)."""
    amb = min(max(drive.coil.reference_temp, drive.ambient.min), drive.ambient.max)
    one = np.ones(1)
    return CornerGrid(one * drive.supply.nominal, one * amb, one.copy(), one.copy())
