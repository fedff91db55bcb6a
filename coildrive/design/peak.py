"""The peak phase: how long full-on must last, sized by time and by force.

A margin on time alone is not a margin on force: near the end of the rise the current
creeps towards ``V/R``, so 1.5x the time to the pull-in current may carry barely more
current -- and the magnetic force grows with the square of the current. So the peak is
the longest of

* the worst pull-in time x ``pull_in.margin`` (whole ticks, plus one: a tick-based phase
  may start anywhere inside a tick, so the shortest real peak is one tick shorter);
* the time the *shortest real peak* (``ticks - 1``) needs to carry
  ``pull_in.current_margin`` x the pull-in current at the worst corner (the hot coil at
  the lowest supply), plus ``pull_in.settle_time``.

The reference driver's switch follows its ticks through the PWM timer
(docs/firmware.md): it goes on at the start of the PWM period after the conversion that
follows the PEAK tick, and the peak ends at the conversion after the tick that enters HOLD
(a current-mode hold: the comparator armed above its upper threshold trips at once) or at
the start of the next period (a PWM hold: the first on-time at the hold's compare). With a
tick and a conversion each anywhere within a PWM period ``T`` of the other, the full-on time
is ``PEAK_TICKS`` ticks within -1.5 T .. +0.5 T (current mode) or -T .. +T (a PWM hold):
:func:`switch_lag`. So the shortest real peak is the shorter of one tick and that lag below
``PEAK_TICKS`` ticks, the ticks are chosen so that it still meets both requirements, and the
longest real peak (the end current, the heat) is that lead above them.

With an ``[armature]`` the pull-in time is the seat time of the moving-armature model,
and the force margin is taken on the rise with the armature still open (the inductance
before it moves).

A supply-compensated peak (``pull_in.compensate``) does the same for each entry of a
table against the measured supply (:class:`~coildrive.design.result.PeakTable`), each
entry at the lowest bus voltage that can read its code. Where the current is never
reached, the plan says what is not reached, where and why, and gives no ticks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..model.circuit import open_inductance
from .corners import CornerGrid
from .evaluate import PointResults
from .figures import worst
from .result import PeakTable
from .boost import earliest_trip, slowest_peak
from .supply import rise_current, rise_time, steady_current
from .timer import conversion_period


@dataclass(frozen=True)
class PeakPlan:
    """The sized peak. ``ticks`` (``None`` when the pull-in current is never reached);
    per grid point the shortest and the longest real peak the firmware may run there
    (s); the time and force requirements and where they came from."""

    ticks: int | None
    time_margin_ticks: int | None
    force_margin_ticks: int | None
    t_pull: float
    k_pull: int
    t_force: float
    k_force: int
    force_current: float
    short_time: np.ndarray
    long_time: np.ndarray
    table: PeakTable | None
    not_reached: str | None
    governed_by: str


def switch_lag(drive: Drive) -> tuple[float, float]:
    """``(short, long)``: how much shorter and longer (s) the reference driver's full-on time
    can be than its ``PEAK_TICKS`` ticks, from where its ticks fall against the PWM periods
    (see the module docstring; ``T`` the timer's period, :func:`conversion_period`): a
    current-mode hold ``1.5 T`` and ``0.5 T``, a PWM hold (fixed, supply table, closed loop)
    ``T`` and ``T``. A boosted peak ends at its threshold, not at a tick: ``(0, 0)``."""
    if drive.supply.boosted:
        return 0.0, 0.0
    period = conversion_period(drive)
    if drive.hold.mode == "current":
        return 1.5 * period, 0.5 * period
    return period, period


def lag_governs(pull_in, rate: float) -> bool:
    """Whether the driver's switch lag (:func:`switch_lag`), not one tick, is what a designed
    peak (a :class:`~coildrive.design.result.PullInResult`) allows for below its ticks: its
    shortest real peak is more than one tick shorter than ``peak_ticks``."""
    if pull_in.peak_ticks is None or pull_in.shortest_peak_s is None:
        return False
    return pull_in.shortest_peak_s * rate < pull_in.peak_ticks - 1 - 1e-6


def allowance_words(pull_in, rate: float) -> str:
    """What the peak's ticks add to its requirement, in words: ``+1 tick``, or the driver's
    switch lag where that is longer (:func:`lag_governs`)."""
    return "+ the driver's switch lag" if lag_governs(pull_in, rate) else "+1 tick"


def whole_ticks(seconds: float, rate: float, lag: float = 0.0) -> int | None:
    """Whole ticks for a phase of at least ``seconds`` however the tick falls (``ceil + 1``)
    and, run ``lag`` s short by the driver's switch (:func:`switch_lag`), still at least
    ``seconds``."""
    if not math.isfinite(seconds):
        return None
    return math.ceil(max(seconds * rate + 1.0, (seconds + lag) * rate) - 1e-9)


def force_times(drive: Drive, res: PointResults) -> tuple[np.ndarray, float]:
    """Time (s) from switch-on to ``current_margin`` x the pull-in current at each point
    (``inf`` where never reached), with the armature open when there is one; and that
    current (A). On a drooping bus (``supply.source_resistance``) the rise is
    :mod:`coildrive.design.supply`'s; a boosted peak with an armature: the armature's run
    from the boost at its lowest (:mod:`coildrive.design.boost_armature`)."""
    lp = res.loop
    i_force = drive.pull_in.current_margin * drive.pull_in.current
    boosted = _boost_runs(res)
    if boosted is not None:   # the armature's run from the boost: the motion in the current
        return boosted.slow.trip_time.reshape(np.shape(res.supply)), i_force
    ind = lp.inductance if drive.armature is None else open_inductance(drive, res.l_factor)
    return rise_time(drive, lp, i_force, ind), i_force


def _boost_runs(res: PointResults):
    """A boosted peak's armature runs at the points of ``res``
    (:class:`~coildrive.design.boost_armature.BoostRuns`), else ``None``."""
    return None if res.armature is None else res.armature.boost


def requirement(drive: Drive, t_pull: np.ndarray, t_force: np.ndarray, margin: float | None = None,
                settle: float | None = None, lag: float = 0.0) -> tuple[int | None, int | None, int | None]:
    """``(ticks, time-margin ticks, force-margin ticks)`` for pull-in times and force
    times over points (their worst); ``margin`` and ``settle`` (s) replace
    ``pull_in.margin`` and ``pull_in.settle_time`` (a latching coil's reset pulse); ``lag``
    s: how much shorter than its ticks the driver may run the peak (:func:`switch_lag`)."""
    rate = drive.board.tick.rate
    margin = drive.pull_in.margin if margin is None else margin
    settle = drive.pull_in.settle_time if settle is None else settle
    tp = float(np.max(np.where(np.isnan(t_pull), np.inf, t_pull)))
    tf = float(np.max(np.where(np.isnan(t_force), np.inf, t_force)))
    by_time = whole_ticks(tp * margin, rate, lag)
    by_force = whole_ticks(tf + settle, rate, lag)
    if by_time is None:
        return None, None, by_force
    return max(by_time, by_force or 0), by_time, by_force


def plan_peak(drive: Drive, grid: CornerGrid, first: PointResults, entry_results=None,
              table_codes=None, table_volts=None, table_design=None, code_low=None,
              code_high=None) -> PeakPlan:
    """Size the peak from ``first`` (the points evaluated with no peak end). With a
    compensated peak, ``entry_results`` are the table entries' points (entries x
    tolerance corners, hot coil, flattened entry-major), ``code_low``/``code_high`` the
    readings at each grid point."""
    rate = drive.board.tick.rate
    t_pull = np.asarray(first.pull_in_time, float)
    k_pull = worst(t_pull)
    tf_all, i_force = force_times(drive, first)
    k_force = worst(tf_all)
    lag, lead = switch_lag(drive)
    ticks, by_time, by_force = requirement(drive, t_pull, tf_all, lag=lag)
    if drive.supply.boosted:
        # the peak ends at its threshold (the force current) at every point; the ticks are
        # the time-out: the worst corner's longest peak x margin (design/boost.py)
        runs = _boost_runs(first)
        t_end = slowest_peak(drive, first.loop) if runs is None else runs.long_time.reshape(np.shape(first.supply))
        ticks = by_time = whole_ticks(float(np.max(np.where(np.isnan(t_end), np.inf, t_end))) * drive.pull_in.margin,
                                 rate)
        by_force = None
    not_reached = None
    lp = first.loop
    if ticks is None:
        i_inf = steady_current(drive, lp)
        k = int(np.argmin(i_inf))
        not_reached = (f"not reached: steady current {float(i_inf[k]):.4g} A < pull-in "
                       f"{drive.pull_in.current:.4g} A at {grid.label(k)}")
        if drive.supply.boosted:
            i_th = drive.pull_in.current_margin * drive.pull_in.current
            not_reached = (f"not reached: the boost at its lowest drives at most {float(i_inf[k]):.4g} A, "
                           f"below its threshold {i_th:.4g} A at {grid.label(k)}")
        if drive.armature is not None and math.isfinite(float(i_inf[k])) and i_inf[k] > drive.pull_in.current:
            not_reached = (f"not reached: the armature does not seat at {grid.label(k_pull)} "
                           "(see the armature_seats check)")
        if drive.supply.boosted and _boost_runs(first) is not None:
            k = int(np.argmax(~np.isfinite(np.ravel(t_end))))
            not_reached = (f"not reached: the boost at its lowest does not drive the moving armature's "
                           f"coil to the highest trip current at {grid.label(k)} (the capacitor's droop "
                           "and the motion's back-EMF; see the boost_threshold check)")
    governed = "" if ticks is None else ("force margin" if (by_force or 0) > (by_time or 0) else "time margin")
    if drive.supply.boosted and ticks is not None:
        governed = "time-out; ends at the current threshold"
    table = None
    n = len(grid)
    if ticks is not None and entry_results is not None:
        m = len(table_codes)
        tp_e = np.asarray(entry_results.pull_in_time, float).reshape(m, -1)
        tf_e, _ = force_times(drive, entry_results)
        tf_e = np.asarray(tf_e, float).reshape(m, -1)
        entries = [requirement(drive, tp_e[i], tf_e[i], lag=lag)[0] for i in range(m)]
        if all(e is not None for e in entries):
            table = PeakTable([float(v) for v in table_volts], [int(c) for c in table_codes],
                              [int(e) for e in entries], [float(v) for v in table_design])
            ticks = max(entries)
    if ticks is None:
        short = long_ = np.zeros(n)
    elif drive.supply.boosted:   # each point's peak ends at the threshold, at the latest when seen
        short, long_ = np.asarray(tf_all, float), np.asarray(t_end, float)
        if drive.coil.eddy_resistance and drive.armature is None:   # the sense trips on the
            short = earliest_trip(drive, first.loop)   # terminal current, ahead of the flux's
    elif table is not None:
        ent = np.asarray(table.peak_ticks)
        codes = np.asarray(table.adc_codes)
        k_hi = np.clip(np.searchsorted(codes, code_high, side="right") - 1, 0, len(codes) - 1)
        k_lo = np.clip(np.searchsorted(codes, code_low, side="right") - 1, 0, len(codes) - 1)
        short = np.minimum(ent[k_hi] - 1, ent[k_hi] - lag * rate) / rate
        long_ = ent[k_lo] / rate + lead
    else:
        short = np.full(n, min(ticks - 1, ticks - lag * rate) / rate)
        long_ = np.full(n, ticks / rate + lead)
    return PeakPlan(ticks, by_time, by_force, float(t_pull[k_pull]), k_pull, float(tf_all[k_force]),
                    k_force, i_force, short, long_, table, not_reached, governed)


def shortest_peak_current(drive: Drive, res: PointResults, short_time: np.ndarray) -> np.ndarray:
    """Current (A) at the end of the shortest real peak at each point (plain RL rise; with
    an armature the open inductance, before it moves; a boosted peak with an armature ends
    at the threshold -- with an eddy term the magnetising current there)."""
    lp = res.loop
    runs = _boost_runs(res)
    if runs is not None:   # the armature's boosted peak ends at the threshold itself
        if drive.coil.eddy_resistance:   # the sense trips on the terminal current: the flux's there
            y = runs.slow.trip_state
            return res.armature.params.current(y[0], y[1]).reshape(np.shape(res.supply))
        return np.full(np.shape(res.supply), drive.pull_in.current_margin * drive.pull_in.current)
    ind = lp.inductance if drive.armature is None else open_inductance(drive, res.l_factor)
    return rise_current(drive, lp, short_time, ind)
