"""The operating envelope: where the hardware can be, and how the firmware reads it.

Corners span supply x ambient x coil temperature x the parts' tolerances. The coil
temperature is an axis of its own, not a consequence of the corner's supply: it runs
from a cold start (the corner's ambient) to the hottest that same coil -- its own
tolerance corner -- settles at under the hold the firmware runs, at any supply and
ambient of the file, because a coil heated at one supply can meet another (a hot coil on
a sagging bus). So the pull-in and the hold are checked with the hot coil at the lowest
supply, and the highest currents, switch voltages and energies with the cold coil at the
highest supply.

The tolerances beyond the coil's R and L (freewheel diode drop, Zener or clamp voltage,
sense resistor) are axes too, where the files give them; a zero tolerance adds no
corner. The firmware's readings of the supply (the supply table, a compensated peak)
and of the current (the ADC thresholds) err by the ADC step and by the divider, sense
resistor and amplifier tolerances: :func:`supply_codes` and :func:`reading_factors`
give the ends of those errors.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from .corners import CornerGrid, _axis


@dataclass(frozen=True)
class Tolerances:
    """The parts' tolerance corners as parallel arrays (factors, 1 = nominal): coil
    resistance and inductance, freewheel diode drop, fast element (Zener or clamp)
    voltage, sense resistance."""

    r_factor: np.ndarray
    l_factor: np.ndarray
    diode_factor: np.ndarray
    fast_factor: np.ndarray
    sense_factor: np.ndarray

    def __len__(self) -> int:
        return len(self.r_factor)

    def take(self, k) -> "Tolerances":
        return Tolerances(*(np.asarray(getattr(self, f))[k] for f in self.__dataclass_fields__))


def tolerances(drive: Drive) -> Tolerances:
    """Every combination of the tolerance ends the files give (zero tolerances: one value)."""
    c, fw, sense = drive.coil, drive.freewheel, drive.board.sense
    fast_tol = fw.clamp_voltage_tolerance if fw.type == "clamp" else fw.zener_voltage_tolerance
    rows = list(itertools.product(
        _axis(1.0 - c.resistance_tolerance, 1.0 + c.resistance_tolerance),
        _axis(1.0 - c.inductance_tolerance, 1.0 + c.inductance_tolerance),
        _axis(1.0 - fw.diode_drop_tolerance, 1.0 + fw.diode_drop_tolerance),
        _axis(1.0 - fast_tol, 1.0 + fast_tol),
        _axis(1.0 - sense.resistance_tolerance, 1.0 + sense.resistance_tolerance),
    ))
    a = np.array(rows, float)
    return Tolerances(*(a[:, j].copy() for j in range(5)))


def supply_axis(drive: Drive, extra=()) -> list[float]:
    """The supplies of the envelope: min, nominal, max, and ``extra`` ones within them."""
    values = [drive.supply.min, drive.supply.nominal, drive.supply.max]
    values += sorted(float(v) for v in extra if drive.supply.min <= v <= drive.supply.max)
    return _axis(*values)


def bracket_tops(drive: Drive, codes) -> list[float]:
    """The highest bus voltage at which the firmware still reads each table entry's code
    and not the next (the divider reading low, the ADC truncating): between two entries
    the hold runs the lower entry's compare there, so the current and the heat are at
    their highest just below the next entry."""
    tol = drive.board.supply_sense.divider_tolerance
    step = supply_lsb(drive) * (1.0 + tol)
    return [float(c * step * (1.0 - 1e-9)) for c in list(codes)[1:]]


def ambient_axis(drive: Drive) -> list[float]:
    return _axis(drive.ambient.min, drive.ambient.max)


@dataclass(frozen=True)
class HeatingGrid:
    """Where a coil heats: every supply x ambient of the file for each tolerance corner
    (``index`` is the tolerance corner of each point)."""

    supply: np.ndarray
    ambient: np.ndarray
    tol: Tolerances
    index: np.ndarray

    def label(self, k: int) -> str:
        # ``tol`` is already taken per point: point k's own tolerance corner is its row k
        return _label(self.supply[k], self.ambient[k], None, self.tol, k)


def heating_grid(drive: Drive, tol: Tolerances, extra=()) -> HeatingGrid:
    pairs = list(itertools.product(supply_axis(drive, extra), ambient_axis(drive)))
    n = len(pairs)
    sup = np.tile(np.array([p[0] for p in pairs], float), len(tol))
    amb = np.tile(np.array([p[1] for p in pairs], float), len(tol))
    idx = np.repeat(np.arange(len(tol)), n)
    return HeatingGrid(sup, amb, tol.take(idx), idx)


def hottest(grid: HeatingGrid, temps: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray]:
    """Per tolerance corner: the hottest settled temperature over its heating points
    (``inf`` on a runaway) and the heating point it came from."""
    t = np.where(np.isfinite(temps), temps, np.inf)
    best = np.full(count, -np.inf)
    where = np.zeros(count, int)
    for k in range(len(t)):
        i = int(grid.index[k])
        if t[k] > best[i]:
            best[i], where[i] = t[k], k
    return best, where


@dataclass(frozen=True)
class Envelope(CornerGrid):
    """The design corners: a :class:`CornerGrid` whose points carry their coil
    temperature (degC) and the freewheel/sense tolerance factors; ``hot`` marks the
    points at the hottest coil."""

    coil_temp: np.ndarray = None
    diode_factor: np.ndarray = None
    fast_factor: np.ndarray = None
    sense_factor: np.ndarray = None
    hot: np.ndarray = None
    tol_index: np.ndarray = None

    def label(self, k: int) -> str:
        state = "hot" if self.hot[k] else "cold"
        return _label(self.supply[k], self.ambient[k], (self.coil_temp[k], state), self,
                      k)

    def factors(self) -> dict:
        """The loop's tolerance factors, as keyword arguments of
        :func:`coildrive.model.circuit.loop`."""
        return {"diode_factor": self.diode_factor, "fast_factor": self.fast_factor,
                "sense_factor": self.sense_factor}


def envelope(drive: Drive, tol: Tolerances, hot_temp: np.ndarray, extra=()) -> Envelope:
    """Supply x ambient x {cold (the ambient), hot (``hot_temp`` of the tolerance corner)}
    x tolerance corners. A hot temperature that does not settle (``inf``) is taken at
    ``thermal.max_coil_temp`` for the electrical figures (the temperature check fails).
    ``extra``: more supplies (the supply table's bracket tops)."""
    rows = []
    for k in range(len(tol)):
        t_hot = float(hot_temp[k]) if math.isfinite(hot_temp[k]) else drive.thermal.max_coil_temp
        for s in supply_axis(drive, extra):
            for a in ambient_axis(drive):
                rows.append((s, a, a, 0, k))
                rows.append((s, a, max(t_hot, a), 1, k))
    a = np.array(rows, float)
    idx = a[:, 4].astype(int)
    t = tol.take(idx)
    return Envelope(a[:, 0].copy(), a[:, 1].copy(), t.r_factor, t.l_factor, coil_temp=a[:, 2].copy(),
                    diode_factor=t.diode_factor, fast_factor=t.fast_factor,
                    sense_factor=t.sense_factor, hot=a[:, 3] > 0, tol_index=idx)


def _label(supply, ambient, coil, tol, k) -> str:
    """``"20 V, 50 degC, coil 121.8 degC (hot), R+7%, L-15%"`` (and the freewheel and
    sense tolerance corners where they are not nominal)."""
    def pct(name: str, f: float, always: bool = True) -> str:
        p = (f - 1.0) * 100.0
        if abs(p) <= 1e-9:
            return f"{name} nom" if always else ""
        return f"{name}{p:+.3g}%"
    parts = [f"{supply:g} V", f"{ambient:g} degC"]
    if coil is not None:
        parts.append(f"coil {coil[0]:.4g} degC ({coil[1]})")
    parts += [pct("R", tol.r_factor[k]), pct("L", tol.l_factor[k])]
    parts += [p for p in (pct("Vd", tol.diode_factor[k], False), pct("Vfast", tol.fast_factor[k], False),
                          pct("Rsense", tol.sense_factor[k], False)) if p]
    return ", ".join(parts)


# --------------------------------------------------------------------------- readings
def reading_factors(drive: Drive) -> tuple[float, float]:
    """``(low, high)``: the current-sense reading over the true current, at the ends of
    the sense resistor's and the amplifier's tolerances."""
    s = drive.board.sense
    return ((1.0 - s.resistance_tolerance) * (1.0 - s.gain_tolerance),
            (1.0 + s.resistance_tolerance) * (1.0 + s.gain_tolerance))


def supply_lsb(drive: Drive) -> float:
    """Bus volts of one supply-sense code at the nominal divider."""
    b = drive.board
    return b.adc.reference / 2**b.adc.bits * b.supply_sense.divider


def supply_codes(drive: Drive, supply) -> tuple[np.ndarray, np.ndarray]:
    """``(low, high)`` supply-sense codes the firmware may read at bus voltage ``supply``:
    a truncating converter reads ``floor(pin / LSB)``, and the divider may be off by its
    tolerance either way (a divider that divides more reads low)."""
    b = drive.board
    tol = b.supply_sense.divider_tolerance
    top = 2**b.adc.bits - 1
    pin_lsb = b.adc.reference / 2**b.adc.bits
    v = np.asarray(supply, float)
    low = np.clip(np.floor(v / (b.supply_sense.divider * (1.0 + tol)) / pin_lsb), 0, top)
    high = np.clip(np.floor(v / (b.supply_sense.divider * (1.0 - tol)) / pin_lsb), 0, top)
    return low.astype(int), high.astype(int)


def lowest_supply_for_code(drive: Drive, code) -> np.ndarray:
    """The lowest bus voltage that can read ``code`` or more (the divider at the end of its
    tolerance that reads high): what a table entry at ``code`` must work at."""
    tol = drive.board.supply_sense.divider_tolerance
    return np.asarray(code, float) * supply_lsb(drive) * (1.0 - tol)


def table_index(codes: list[int], reading) -> np.ndarray:
    """Index of the entry the firmware takes for each reading: the last entry whose code is
    at or below it (the first entry for a reading below them all)."""
    k = np.searchsorted(np.asarray(codes), np.asarray(reading), side="right") - 1
    return np.clip(k, 0, len(codes) - 1)
