"""Every turn-off: the end of the hold, the end of the peak (an actuation cut short) and the
over-current trip.

Each puts the coil's current into the freewheel path: the switch sees the path's voltage
at that current, and the path's elements take the coil's energy (and, with a clamp
across the switch, what the supply delivers during the decay). The worst of the three --
not only the ordinary release from the hold -- is what the switch rating and the
elements' single-pulse energy ratings must take. The release path is the one the
firmware opens at a turn-off (the fast one with split decay). Units: A, V, J.
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from ..model.circuit import Loop
from ..model.rl import decay_integrals, decay_time
from .corners import CornerGrid
from .evaluate import PointResults
from .figures import worst

#: The turn-off events, in the order reports list them.
EVENTS = ("end of hold", "end of peak", "over-current trip")


def element_energies(drive: Drive, lp: Loop, current) -> dict[str, np.ndarray]:
    """Energy (J) each freewheel element takes when ``current`` A decays to zero through
    the path ``lp`` (its segment integrals ``int i dt`` and ``int i^2 dt`` times the
    element's voltage or resistance)."""
    i0 = np.asarray(current, float)
    t0 = decay_time(0.0, i0, lp.r_off, lp.v_off, lp.inductance)
    q, s = decay_integrals(t0, i0, lp.r_off, lp.v_off, lp.inductance)
    fw = drive.freewheel
    zero = np.zeros_like(np.asarray(q, float))
    if lp.bridge == "fast":  # the two body diodes (each takes half)
        return {"diode": 2.0 * lp.diode(drive) * q + zero}
    if lp.bypassed:
        return {"diode": lp.diode(drive) * q, "bypass": fw.bypass_resistance * s}
    if fw.type == "clamp":
        return {"clamp": lp.fast(drive) * q}
    out = {"diode": lp.diode(drive) * q}
    if fw.type == "zener":
        out["zener"] = lp.fast(drive) * q
    if fw.type == "resistor":
        out["resistor"] = fw.resistance * s
    return {k: v + zero for k, v in out.items()}


def event_currents(res: PointResults, peak_end, trip_current: float) -> dict[str, np.ndarray]:
    """The current (A) each turn-off event interrupts at each point of ``res`` (the end of
    the peak ``peak_end``, the trip at ``trip_current``); non-finite currents as 0."""
    currents = {"end of hold": np.asarray(res.hold.i_max, float),
                "end of peak": np.broadcast_to(np.asarray(peak_end, float), np.shape(res.supply)),
                "over-current trip": np.full(np.shape(res.supply), float(trip_current))}
    return {event: np.where(np.isfinite(currents[event]), currents[event], 0.0) for event in EVENTS}


def release_loop(res: PointResults) -> Loop:
    """The path a turn-off opens (the fast one with split decay)."""
    return res.release_loop if res.release_loop is not None else res.loop


def turn_offs(drive: Drive, grid: CornerGrid, res: PointResults, peak_end, trip_current: float) -> list[dict]:
    """The three turn-off events at their worst corners of ``res`` (the points with the
    most current): ``event``, ``current_a``, ``corner``, ``switch_voltage_v`` (its worst
    corner may differ: ``switch_voltage_corner``), ``energy_j`` and ``elements_j``."""
    lp_rel = release_loop(res)
    out = []
    for event, i in event_currents(res, peak_end, trip_current).items():
        parts = element_energies(drive, lp_rel, i)
        energy = sum(parts.values())
        if event == "end of hold":
            # the release as the design models it (the moving armature, a late bypass)
            energy = np.maximum(energy, np.where(np.isfinite(res.release_energy), res.release_energy, 0.0))
        v_sw = np.asarray(lp_rel.switch_voltage(drive, i), float)
        k_e, k_v, k_i = worst(energy), worst(v_sw), worst(i)
        out.append({"event": event, "current_a": float(i[k_i]), "current_corner": grid.label(k_i),
                    "switch_voltage_v": float(v_sw[k_v]), "switch_voltage_corner": grid.label(k_v),
                    "energy_j": float(energy[k_e]), "energy_corner": grid.label(k_e),
                    "elements_j": {name: float(np.max(e)) for name, e in parts.items()}})
    return out
