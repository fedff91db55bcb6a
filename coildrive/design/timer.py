"""PWM timer solver: prescaler and period for a frequency, with the finest duty steps.

A timer counts its input clock divided by the prescaler; one PWM period is
``period_ticks`` counts, so ``f = clock / (prescaler * period_ticks)`` and the duty can be
set in steps of ``1 / period_ticks``. Many timers take ``prescaler - 1`` and
``period_ticks - 1`` in their registers; the header gives both forms.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Fewest counts per period accepted (below this the duty is barely adjustable).
MIN_PERIOD_TICKS = 2


@dataclass(frozen=True)
class TimerSetting:
    """A realisable timer setting. ``frequency_hz`` is what the timer really makes."""

    prescaler: int
    period_ticks: int
    frequency_hz: float
    target_hz: float

    @property
    def error(self) -> float:
        """Relative frequency error, (actual - target) / target."""
        return (self.frequency_hz - self.target_hz) / self.target_hz


def solve_timer(clock: float, bits: int, prescaler_max: int, target: float,
                tolerance: float, allowed: tuple[int, ...] = ()) -> TimerSetting:
    """Choose prescaler and period for ``target`` Hz.

    Among all prescalers ``1..prescaler_max`` and the nearest period for each (at most
    ``2**bits`` counts) -- or only the ``allowed`` ratios, for timers with a fixed set of
    prescaler values -- keep those within ``tolerance`` (relative) of the target and take
    the longest period (finest duty resolution), then the smallest error. If none is
    within tolerance, the setting with the smallest error is returned and the caller's
    check reports it.
    """
    limit = 2**bits
    p_high = int(min(prescaler_max, max(1, np.ceil(clock / (target * MIN_PERIOD_TICKS)))))
    if allowed:
        prescalers = np.array(sorted(set(allowed)), dtype=np.int64)
    else:
        prescalers = np.arange(1, p_high + 1, dtype=np.int64)
    periods = np.rint(clock / (prescalers * target)).astype(np.int64)
    periods = np.clip(periods, MIN_PERIOD_TICKS, limit)
    actual = clock / (prescalers * periods)
    error = np.abs(actual - target) / target
    ok = error <= tolerance
    if np.any(ok):
        # longest period first, then smallest error, then smallest prescaler
        order = np.lexsort((prescalers, error, -periods))
        best = order[ok[order]][0]
    else:
        best = int(np.argmin(error))
    return TimerSetting(int(prescalers[best]), int(periods[best]), float(actual[best]), float(target))


def timer_for(drive) -> TimerSetting:
    """The hold timer of ``drive`` (a :class:`~coildrive.config.Drive`): the shared timer's
    prescaler and period when a system file fixes them (``drive.shared_timer``, see
    :mod:`coildrive.design.system`), else :func:`solve_timer` for ``hold.frequency``.
    ``target_hz`` stays the drive's asked frequency either way."""
    t = drive.board.timer
    if drive.shared_timer is not None:
        p, n = drive.shared_timer
        return TimerSetting(int(p), int(n), t.clock / (p * n), drive.hold.frequency)
    return solve_timer(t.clock, t.bits, t.prescaler_max, drive.hold.frequency,
                       drive.hold.frequency_tolerance, t.prescalers)


def conversion_period(drive: Drive) -> float:
    """The longest time (s) between two of the driver's conversions in the peak: one PWM
    period of the hold timer (the driver converts once a PWM period, docs/firmware.md), at
    the frequency the timer really makes (:func:`timer_for`: the
    prescaler and period of the drive, or the system's shared timer). Not the ADC's
    ``sample_rate``, the bench link's streaming rate."""
    return 1.0 / timer_for(drive).frequency_hz
