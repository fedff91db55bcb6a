"""Offline tuning of a latching coil's supply-compensated pulses (``pull_in.compensate``):
what each pulse's table of ticks against the supply reading costs at each time margin.

A compensated pulse is a table: each entry sized at its own worst corner (the lowest bus
that reads its code, the coil at its limit, the worst tolerance end) by the rule of a
fixed pulse -- the longer of ``margin`` x the time to the pulse's current and the time to
``current_margin`` x it + ``settle_time``, in whole ticks + 1
(:func:`coildrive.design.latch._table`). :func:`tune_table` steps each pulse's time margin
(``pull_in.margin``, ``reset.margin``; the other pulse at the margin asked for), the one
factor applied to every entry's own worst time, from 1.0 up to ``LONGEST`` x the margin
asked for (at most the files' bound), ``STEPS`` values plus the file's margin, the one
asked for and the highest margin at which some entry falls one tick short of it (so the
recommendation is exact to the tick). Every step is
:func:`coildrive.design.latch.design_latch` on the drive with that margin in the file's
place: every entry's length, its worst time and corner, the current its shortest real
pulse carries, the energies, the interval and the coil's temperature are the design's
own, never a second copy.

Why one margin on every entry, not one scale on every entry's ticks: each entry then
keeps the same factor over its own worst time, so the table is as safe at a full battery
as at a tired one; an entry the force rule (``current_margin``, ``settle_time``) sets
keeps that length, where a common scale would lengthen it for nothing; and the setting is
the file's own key, so the recommended table is what ``coildrive design`` sizes from the
file with that margin, to the tick.

Per step and entry: ``time_margins`` (the shortest real pulse, one tick less, over the
entry's worst time) and ``current_margins`` (the least current that pulse carries at the
entry's corners over the pulse's current). A step ``keeps`` the margins when every entry's
shortest real pulse is at least the margin asked for x its worst time and at least its
force time + settle time, and the design's own ``{name}_pulse`` check passes (the entry
each corner may read carries ``current_margin`` x the current at its shortest). The
recommendation is the lowest stepped margin that keeps them: its table is the design's own
at the margin asked for (the tests check it every entry, to the tick), and its design the
header's source. (With a moving armature the design sizes each entry on the moving run's
current, which lags the open coil's rise: :func:`coildrive.design.latch.seated_force_ticks`.)

Units: SI (s, J, A), temperatures in degC.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from ..config import BOUNDS, Drive
from ..design.latch import LatchDesign, PulseResult, design_latch

#: Highest margin stepped, as a multiple of the margin asked for (our choice, as the fixed
#: pulse's sweep: past that the pulses only heat the coil).
LONGEST = 3.0
#: Margins stepped per pulse besides the file's, the asked one and the one a tick short.
STEPS = 12


@dataclass(frozen=True)
class TableStep:
    """One time margin of a compensated pulse and the design that runs it: the table's
    ``ticks`` (per entry, lowest supply first), ``time_margins`` and ``current_margins``
    per entry (module docstring) and the least of each, ``pulse_ok`` (the design's
    ``{name}_pulse`` check: the entry each corner may read carries ``current_margin`` x the
    current at its shortest), ``keeps`` (every entry keeps the margins asked for and
    ``pulse_ok``), the energy per pulse from the supply and into the copper (J, at
    the design's ``energy_corner``), the shortest safe interval (s) and what governs it, the coil's
    hottest (degC), ``design_ok`` with ``failed`` its failing checks."""

    margin: float
    ticks: list[int]
    time_margins: list[float]
    current_margins: list[float]
    least_time_margin: float
    least_current_margin: float
    pulse_ok: bool
    keeps: bool
    supply_j: float
    copper_j: float
    energy_corner: str
    interval_s: float
    interval_governed_by: str
    hottest_coil_c: float
    design_ok: bool
    failed: list[str]


@dataclass(frozen=True)
class TableSweep:
    """The sweep of one compensated pulse (``name``): the margin it must keep (``margin``,
    the asked one), its ``current_margin`` and ``settle_time_s``, the file's
    ``design_margin``; the table's entries (nominal buses ``supply_v`` V, ``adc_codes``,
    the buses each is sized at ``design_supply_v`` V) with each entry's worst time (s), its
    corner and its force time (s); the ``steps`` (lowest margin first) and the recommended
    margin (``None`` when no step keeps the margins) with its table's ticks."""

    name: str
    margin: float
    current_margin: float
    settle_time_s: float
    design_margin: float
    supply_v: list[float]
    adc_codes: list[int]
    design_supply_v: list[float]
    worst_time_s: list[float]
    worst_corner: list[str]
    force_time_s: list[float]
    steps: list[TableStep]
    recommended_margin: float | None
    recommended_ticks: list[int] | None


def with_margins(drive: Drive, margins: dict[str, float]) -> Drive:
    """The drive with ``margins`` (``{"set": x, "reset": y}``, either) in place of
    ``pull_in.margin`` and ``reset.margin``."""
    if "set" in margins:
        drive = dataclasses.replace(drive, pull_in=dataclasses.replace(drive.pull_in, margin=margins["set"]))
    if "reset" in margins:
        drive = dataclasses.replace(drive, latch=dataclasses.replace(drive.latch, reset_margin=margins["reset"]))
    return drive


def sized_at(drive: Drive, margin: float | None) -> tuple[LatchDesign, dict[str, float], Drive, LatchDesign]:
    """The file's design, each pulse's time margin asked for (``margin``, default the
    pulse's own), the drive with those margins and its design (the pulses the design sizes
    at them): what the sweeps of timed and of compensated pulses start from."""
    base = design_latch(drive)
    asked = {p.name: p.margin if margin is None else margin for p in base.latch.pulses}
    at = with_margins(drive, asked)
    return base, asked, at, design_latch(at)


def entries_keep(p: PulseResult, margin: float, rate: float) -> bool:
    """Every entry of ``p``'s table: its shortest real pulse (one tick less at ``rate``
    Hz) at least ``margin`` x the entry's worst time and at least its force time + the
    settle time."""
    t = p.table
    return all((n - 1) / rate >= margin * w * (1 - 1e-12) and (n - 1) / rate >= (f + p.settle_time_s) * (1 - 1e-12)
               for n, w, f in zip(t.ticks, t.worst_time_s, t.force_time_s))


def tick_short(p: PulseResult, rate: float) -> float | None:
    """The highest margin (rounded down to 1e-6) at which an entry of ``p``'s table, sized
    at ``p.margin``, is one tick shorter: for each entry its time margin sets, ``(ticks -
    2) / (worst time x rate)`` (the sizing is ``ceil(margin x time x rate) + 1``); ``None``
    when the force rule sets every entry or that margin is below 1."""
    t = p.table
    cand = [(n - 2) / (w * rate) for n, w, f in zip(t.ticks, t.worst_time_s, t.force_time_s)
            if math.ceil((f + p.settle_time_s) * rate + 1.0 - 1e-9) < n and w > 0]
    if not cand:
        return None
    m = math.floor(max(cand) * 1e6) / 1e6
    return m if m >= 1.0 else None


def _margins(asked: float, file_margin: float, short: float | None) -> list[float]:
    """The stepped margins: ``STEPS`` from 1.0 to ``LONGEST`` x the asked one (at most
    the highest margin a file may give), the file's, the asked one and ``short``."""
    top = min(LONGEST * asked, BOUNDS["pull_in.margin"][1])
    spread = np.linspace(1.0, max(top, 1.0 + 1e-3), STEPS)
    extra = {file_margin, asked} | ({short} if short is not None else set())
    return sorted({round(float(x), 6) for x in spread} | extra)


def _step(drive: Drive, name: str, m: float, asked: float) -> TableStep:
    d = design_latch(with_margins(drive, {name: m}))
    p = next(x for x in d.latch.pulses if x.name == name)
    t = p.table
    rate = d.latch.tick_rate_hz
    tm = [(n - 1) / rate / w if w > 0 else math.inf for n, w in zip(t.ticks, t.worst_time_s)]
    cm = [i / p.current_a for i in t.end_current_a]
    ok = next(c.ok for c in d.checks if c.name == f"{name}_pulse")
    return TableStep(margin=m, ticks=list(t.ticks), time_margins=tm, current_margins=cm,
                     least_time_margin=min(tm), least_current_margin=min(cm), pulse_ok=ok,
                     keeps=ok and entries_keep(p, asked, rate),
                     supply_j=p.supply_j, copper_j=p.copper_j, energy_corner=p.energy_corner,
                     interval_s=d.latch.interval_s,
                     interval_governed_by=d.latch.governed_by, hottest_coil_c=d.latch.hottest_coil_c,
                     design_ok=d.ok, failed=[c.name for c in d.failed])


def tune_table(drive: Drive, margin: float | None) -> tuple[LatchDesign, list[TableSweep], LatchDesign | None,
                                                            list[str]]:
    """The file's design, one :class:`TableSweep` per compensated pulse (module
    docstring), the design at the recommended margins (``None`` when a pulse has none) and
    notes. ``margin``: the time margin both pulses keep (default each pulse's own)."""
    base, asked, others, sized = sized_at(drive, margin)   # each step's other pulse at its asked margin
    sweeps, notes = [], []
    for p, q in zip(base.latch.pulses, sized.latch.pulses):
        if q.table is None:
            notes.append(f"the {p.name} pulse is not swept: its current is {q.not_reached}")
            continue
        ms = _margins(asked[p.name], p.margin, tick_short(q, sized.latch.tick_rate_hz))
        steps = [_step(others, p.name, m, asked[p.name]) for m in ms]
        keeping = [s for s in steps if s.keeps]
        rec = keeping[0] if keeping else None
        t = q.table
        sweeps.append(TableSweep(p.name, asked[p.name], p.current_margin, p.settle_time_s, p.margin, t.supply_v,
                                 t.adc_codes, t.design_supply_v, t.worst_time_s, t.worst_corner, t.force_time_s,
                                 steps, None if rec is None else rec.margin, None if rec is None else rec.ticks))
    if len(sweeps) < len(base.latch.pulses) or any(s.recommended_margin is None for s in sweeps):
        return base, sweeps, None, notes
    recommended = design_latch(with_margins(drive, {s.name: s.recommended_margin for s in sweeps}))
    for s, p, q in zip(sweeps, recommended.latch.pulses, sized.latch.pulses):
        if p.table.ticks != q.table.ticks:   # the sweep and the design size the same rule
            notes.append(f"the {s.name} table at margin {s.recommended_margin:g} differs from the design's at "
                         f"{s.margin:g}; the header uses the one at {s.recommended_margin:g}")
        elif s.recommended_margin < s.margin:
            notes.append(f"the {s.name} table at margin {s.recommended_margin:g} is the one sized at {s.margin:g}, "
                         "to the tick: between the two the force rule (current_margin, settle_time) or the "
                         "tick's rounding sets every entry")
    return base, sweeps, recommended, notes
