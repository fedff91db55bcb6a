"""Offline tuning of a latching coil's pulses (``[hold] mode = "latch"``): how long each
timed pulse could be, and what every length costs.

:func:`tune_latch` sweeps each pulse's length in whole scheduler ticks, the other pulse at
its designed length, from the shortest that still reaches the pulse's current at the
worst corner (margin 1, no settle time: it moves the armature or trips the catch there,
with nothing to spare) up to three times the designed length. Every step is
:func:`coildrive.design.latch.design_latch` with that pulse run at that length (its
``fixed`` argument): the same worst corner, requirement functions, energies, interval and
coil temperature as the design, never a second copy of them. Per step:

* ``time_margin`` -- the shortest real pulse (one tick less) over the worst corner's time
  to the pulse's current (the design wants ``margin``);
* ``current_margin`` -- the current the shortest real pulse carries at the worst corner
  over the pulse's current (the design wants ``current_margin`` for ``settle_time`` more);
* the energy per pulse from the supply and into the copper (the design's energy corner),
  the shortest safe interval between pulses and what governs it, and the coil's
  temperature just after a pulse at that fastest rate.

The recommendation is the shortest step that keeps the margins the pulse is designed for
(or ``margin`` given here instead of ``pull_in.margin`` / ``reset.margin``): by
construction the design's own length at that margin (the tests check it). The sweep
always holds that length and the tick below it, so "shortest" is exact to the tick.

Pulses from the boost end at a current threshold, not after a time: their sweep steps each
pulse's ``current_margin`` instead (:mod:`coildrive.tune.latch_boost`; ``sweeps`` then holds
its :class:`~coildrive.tune.latch_boost.ThresholdSweep`). A supply-compensated pulse
(``pull_in.compensate``) is a table of lengths against the supply reading: its sweep steps
the time margin every entry keeps (:mod:`coildrive.tune.latch_table`; ``sweeps`` then holds
its :class:`~coildrive.tune.latch_table.TableSweep`).

Units: SI (s, J, A), temperatures in degC.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..design.latch import LatchDesign, design_latch
from ..design.peak import whole_ticks
from .latch_boost import ThresholdSweep, tune_boosted
from .latch_table import TableSweep, sized_at, tune_table, with_margins

#: Longest length swept, as a multiple of the designed length (our choice: past that the
#: pulse only heats the coil).
LONGEST = 3.0
#: Lengths swept per pulse besides the designed one and the tick below it (our choice).
STEPS = 16


@dataclass(frozen=True)
class PulseStep:
    """One pulse length: ``ticks`` (s ``time_s``; the shortest real pulse ``shortest_s``),
    its margins at the worst corner, its energies (J) and the interval and coil temperature
    (degC) of the design that runs it; ``keeps``: it keeps the margins asked for;
    ``design_ok``: every check of that design passes."""

    ticks: int
    time_s: float
    shortest_s: float
    time_margin: float
    current_margin: float
    end_current_a: float
    keeps: bool
    supply_j: float
    copper_j: float
    interval_s: float
    interval_governed_by: str
    hottest_coil_c: float
    design_ok: bool


@dataclass(frozen=True)
class PulseSweep:
    """The sweep of one pulse (``name``): the margins it must keep, the designed length
    (ticks), its ``steps`` (shortest first) and the recommended length (ticks; ``None``
    when no swept length keeps the margins)."""

    name: str
    margin: float
    current_margin: float
    settle_time_s: float
    worst_time_s: float
    worst_corner: str
    design_ticks: int
    steps: list[PulseStep]
    recommended_ticks: int | None


@dataclass
class LatchTune:
    """The result of :func:`tune_latch`: the file's design, one sweep per pulse (of its
    length, from the boost of its threshold's ``current_margin``, of a supply-compensated
    table's time margin), and the design that
    runs the recommended pulses (``recommended``: the header's source)."""

    design: LatchDesign
    sweeps: list[PulseSweep] | list[ThresholdSweep] | list[TableSweep]
    recommended: LatchDesign | None
    margin: float | None
    notes: list[str] = dataclasses.field(default_factory=list)


def with_margin(drive: Drive, margin: float | None) -> Drive:
    """The drive with ``margin`` on both pulses' worst times (``pull_in.margin`` and
    ``reset.margin``; unchanged for ``None``)."""
    return drive if margin is None else with_margins(drive, {"set": margin, "reset": margin})


def _lengths(lowest: int, designed: int, sized: int) -> list[int]:
    """The swept lengths (ticks): ``STEPS`` spread from ``lowest`` to ``LONGEST`` x the
    file's designed length, with the length sized at the margin asked for and the tick
    below it."""
    top = max(int(math.ceil(LONGEST * designed)), lowest)
    spread = np.unique(np.round(np.linspace(lowest, top, STEPS)).astype(int))
    return sorted({int(x) for x in spread} | {sized, max(sized - 1, lowest)})


def _step(drive: Drive, name: str, ticks: int, margin: float) -> PulseStep:
    d = design_latch(drive, {name: ticks})
    p = next(x for x in d.latch.pulses if x.name == name)
    time_margin = p.shortest_s / p.worst_time_s if p.worst_time_s > 0 else math.inf
    # the force margin: the open-armature rise's time with settle, and (a moving armature's
    # current lags that rise) the design's own check on the moving run's current
    keeps = (p.shortest_s >= margin * p.worst_time_s * (1 - 1e-12)
             and p.shortest_s >= (p.force_time_s + p.settle_time_s) * (1 - 1e-12)
             and p.end_current_a >= p.force_current_a * (1 - 1e-9)
             and next(c for c in d.checks if c.name == f"{name}_pulse").ok)
    return PulseStep(ticks=ticks, time_s=p.time_s, shortest_s=p.shortest_s, time_margin=time_margin,
                     current_margin=p.end_current_a / p.current_a, end_current_a=p.end_current_a, keeps=keeps,
                     supply_j=p.supply_j, copper_j=p.copper_j, interval_s=d.latch.interval_s,
                     interval_governed_by=d.latch.governed_by, hottest_coil_c=d.latch.hottest_coil_c,
                     design_ok=d.ok)


def tune_latch(drive: Drive, margin: float | None = None) -> LatchTune:
    """Sweep each pulse's length (module docstring); ``margin``: the time margin the
    recommendation keeps on both pulses (default: the file's). Pulses from the boost: the
    sweep of their thresholds, ``margin`` the least ``current_margin`` kept
    (:func:`coildrive.tune.latch_boost.tune_boosted`). Supply-compensated pulses: the sweep
    of their tables' time margin (:func:`coildrive.tune.latch_table.tune_table`)."""
    if drive.supply.boosted:
        base, sweeps, recommended = tune_boosted(drive, margin)
        return LatchTune(base, sweeps, recommended, margin)
    if drive.pull_in.compensate:
        base, sweeps, recommended, notes = tune_table(drive, margin)
        return LatchTune(base, sweeps, recommended, margin, notes)
    # its steps' checks hold them to the margin asked for; sized: the pulses the design sizes at it
    base, margins, asked, sized = sized_at(drive, margin)
    sweeps, notes = [], []
    for p, q in zip(base.latch.pulses, sized.latch.pulses):
        if p.ticks is None:
            notes.append(f"the {p.name} pulse is not swept: its current is {p.not_reached}")
            continue
        m = margins[p.name]
        lowest = whole_ticks(p.worst_time_s, drive.board.tick.rate)
        steps = [_step(asked, p.name, n, m) for n in _lengths(lowest, p.ticks, q.ticks or p.ticks)]
        keeping = [s.ticks for s in steps if s.keeps]
        sweeps.append(PulseSweep(p.name, m, p.current_margin, p.settle_time_s, p.worst_time_s, p.worst_corner,
                                 p.ticks, steps, min(keeping) if keeping else None))
    recommended = None
    if len(sweeps) == len(base.latch.pulses) and all(s.recommended_ticks is not None for s in sweeps):
        recommended = sized
        mine = {s.name: s.recommended_ticks for s in sweeps}
        theirs = {p.name: p.ticks for p in recommended.latch.pulses}
        if mine != theirs:   # the sweep and the design size the same requirement
            notes.append(f"the sweep's shortest lengths {mine} differ from the design's {theirs} at that "
                         "margin; the header uses the design's")
    return LatchTune(base, sweeps, recommended, margin, notes)
