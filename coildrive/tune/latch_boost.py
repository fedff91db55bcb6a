"""Offline tuning of a latching coil's pulses from the boost (``[supply] boost``): where
each pulse's current threshold could sit, and what every threshold costs.

A pulse from the boost ends when its current reaches ``current_margin`` x the pulse's
current (``pull_in.current_margin``, ``reset.current_margin``), not after a time, so
:func:`tune_boosted` steps each pulse's ``current_margin`` (the other pulse at its own)
from 1.0 up to ``TOP`` x the file's (at most 3, the files' bound), ``STEPS`` values plus the file's own and the margin
asked for. Every step is :func:`coildrive.design.latch.design_latch` run on the drive with
that margin in the file's place: its threshold code, time-out, shortest and longest pulse,
the armature's latest seat (where it has one), the energy the boost gives, the recharge
and the interval, and the coil's temperature are the design's own, never a second copy.

The recommendation is the lowest stepped margin that keeps the force margin asked for
(``--margin``: the least ``current_margin`` a pulse may end at; default the file's) and
whose design passes every check: the file's own margin whenever its design passes (the
sweep then shows what a higher threshold costs and what a lower one would save, and
where it would fail), else the next margin up that passes. Its design is
:func:`design_latch` at those margins (the header's source; the tests check the steps
against it).

Units: SI (s, J, A), temperatures in degC.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from ..config import BOUNDS, Drive
from ..design.latch import LatchDesign, design_latch
from ..errors import InputError

#: Highest margin stepped, as a multiple of the file's (our choice: past that the pulse
#: only costs the boost more energy).
TOP = 2.0
#: Margins stepped per pulse besides the file's and the one asked for (our choice).
STEPS = 12


@dataclass(frozen=True)
class ThresholdStep:
    """One ``current_margin`` of a pulse from the boost and the design that runs it: the
    threshold (A, its ADC ``threshold_code``, the highest true current that code trips at
    A, ``code_fits`` the ADC), the time-out (``timeout_ticks``, s; ``None`` where the boost
    at its lowest never reaches the threshold), the shortest and longest pulse (s: the
    fastest corner's time to the threshold, the slowest corner's until the firmware sees
    it), the armature's latest seat (s; ``None`` without a moving armature or a threshold
    reached) and whether it seats before the threshold everywhere (``None`` without one),
    the energy the boost gives per pulse (J), its recharge (s; these three ``None`` where no
    corner reaches the threshold), the design's interval (s)
    and what governs it, the coil's hottest (degC); ``design_ok`` with ``failed`` its
    failing checks; ``keeps``: at least the force margin asked and the design passes.
    ``refused``: why the design does not model that margin (a moving armature still in
    flight when the current reaches the threshold: the design's own one line), the
    figures then ``None``."""

    current_margin: float
    keeps: bool
    design_ok: bool
    failed: list[str]
    refused: str | None = None
    threshold_a: float | None = None
    threshold_code: int | None = None
    trip_max_a: float | None = None
    code_fits: bool | None = None
    timeout_ticks: int | None = None
    timeout_s: float | None = None
    shortest_s: float | None = None
    longest_s: float | None = None
    seated_s: float | None = None
    seats: bool | None = None
    boost_energy_j: float | None = None
    recharge_s: float | None = None
    interval_s: float | None = None
    interval_governed_by: str | None = None
    hottest_coil_c: float | None = None


@dataclass(frozen=True)
class ThresholdSweep:
    """The sweep of one boosted pulse (``name``, ``current_a`` A): the force margin it must
    keep (``margin``: the least ``current_margin``), the file's ``design_current_margin``,
    its ``steps`` (lowest margin first) and the recommended margin (``None`` when no step
    keeps the force margin with every check passing)."""

    name: str
    current_a: float
    margin: float
    design_current_margin: float
    steps: list[ThresholdStep]
    recommended_current_margin: float | None


def with_current_margins(drive: Drive, margins: dict[str, float]) -> Drive:
    """The drive with ``margins`` (``{"set": x, "reset": y}``, either) in place of
    ``pull_in.current_margin`` and ``reset.current_margin``."""
    if "set" in margins:
        drive = dataclasses.replace(drive, pull_in=dataclasses.replace(drive.pull_in,
                                                                        current_margin=margins["set"]))
    if "reset" in margins:
        drive = dataclasses.replace(drive, latch=dataclasses.replace(drive.latch,
                                                                      reset_current_margin=margins["reset"]))
    return drive


def _margins(design: float, asked: float) -> list[float]:
    """The stepped margins: ``STEPS`` from 1.0 to ``TOP`` x the file's (at most the highest
    ``current_margin`` a file may give), with the file's and the asked one (rounded to 1e-6: margins read as the file would write them)."""
    top = min(TOP * design, BOUNDS["pull_in.current_margin"][1])   # no higher than a file may write
    spread = np.linspace(1.0, max(top, 1.0 + 1e-3), STEPS)
    return sorted({round(float(x), 6) for x in spread} | {design, asked})


def _step(drive: Drive, name: str, cm: float, floor: float) -> ThresholdStep:
    try:
        d = design_latch(with_current_margins(drive, {name: cm}))
    except InputError as err:   # the design refuses that threshold (the armature in flight)
        return ThresholdStep(current_margin=cm, keeps=False, design_ok=False, failed=[], refused=err.message)
    p = next(x for x in d.latch.pulses if x.name == name)
    b = p.boost
    seat = next((c.ok for c in d.checks if c.name == f"{name}_armature_seats"), None)
    failed = [c.name for c in d.failed]
    some = math.isfinite(b.fastest_time_s)   # the threshold reached at some corner: a pulse to cost
    return ThresholdStep(
        current_margin=cm, threshold_a=b.threshold_a, threshold_code=b.threshold_code, trip_max_a=b.trip_max_a,
        code_fits=b.code_fits, timeout_ticks=b.timeout_ticks, timeout_s=b.timeout_s,
        shortest_s=b.fastest_time_s if some else None, longest_s=b.time_to_threshold_s, seated_s=p.seat_time_s,
        seats=seat, boost_energy_j=b.energy_j if some else None, recharge_s=b.recharge_time_s if some else None, interval_s=d.latch.interval_s, interval_governed_by=d.latch.governed_by,
        hottest_coil_c=d.latch.hottest_coil_c, design_ok=d.ok, failed=failed,
        keeps=cm >= floor * (1 - 1e-12) and d.ok)


def tune_boosted(drive: Drive, margin: float | None) -> tuple[LatchDesign, list[ThresholdSweep],
                                                              LatchDesign | None]:
    """The file's design, one :class:`ThresholdSweep` per pulse (module docstring) and the
    design at the recommended margins (``None`` when a pulse has none). ``margin``: the
    force margin both pulses keep (default each pulse's ``current_margin``)."""
    base = design_latch(drive)
    floors = {p.name: p.current_margin if margin is None else margin for p in base.latch.pulses}
    others = with_current_margins(drive, floors)   # each step's other pulse at its floor
    sweeps = []
    for p in base.latch.pulses:
        steps = [_step(others, p.name, cm, floors[p.name]) for cm in _margins(p.current_margin, floors[p.name])]
        keeping = [s.current_margin for s in steps if s.keeps]
        sweeps.append(ThresholdSweep(p.name, p.current_a, floors[p.name], p.current_margin, steps,
                                     min(keeping) if keeping else None))
    if any(s.recommended_current_margin is None for s in sweeps):
        return base, sweeps, None
    return base, sweeps, design_latch(with_current_margins(drive, {s.name: s.recommended_current_margin
                                                                   for s in sweeps}))
