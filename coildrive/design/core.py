"""The design entry points: a drive in, one Design out; its actuations for simulate and plot.

:func:`design` hands the drive to its hold strategy (:mod:`coildrive.design.holds`); the
strategy evaluates every figure under the hold the firmware runs. The Design holds plain
data; the table, JSON, header and plot all read it and none of them recomputes physics.
Drawing a waveform is a separate step (:func:`design_waveforms`), paid only by the
outputs that show one.
"""

from __future__ import annotations

from ..config import Drive
from .firmware import firmware_setting  # noqa: F401  (re-exported: part of this module's API)
from .holds import strategy_for
from .result import Design


def design(drive: Drive, samples: int = 0, seed: int = 1) -> Design:
    """Design the peak-and-hold drive for ``drive``.

    ``samples`` > 0 adds a tolerance Monte Carlo of that many points (see
    :func:`coildrive.design.montecarlo.monte_carlo`; voltage-mode holds only).
    """
    return strategy_for(drive).design(drive, samples, seed)


def actuation(design: Design, supply: float, coil_temp: float, hold_time: float,
              r_factor: float = 1.0, l_factor: float = 1.0, points: int = 8, label: str = "",
              strict: bool = True):
    """One actuation of ``design`` at one operating point (V, degC, s, tolerance factors),
    with the design's peak and its hold as the firmware runs it: a
    :class:`~coildrive.model.waveform.Waveform`. ``points`` samples per PWM segment."""
    return strategy_for(design.drive).actuation(design, supply, coil_temp, hold_time, r_factor,
                                                l_factor, points, label, strict)


def design_waveforms(design: Design) -> dict:
    """The actuations the plot shows (``"nominal"`` and ``"worst"`` pull-in), by name."""
    return {p.name: actuation(design, p.supply_v, p.coil_temp_c, p.hold_time_s, p.r_factor,
                              p.l_factor, label=p.label, strict=False)
            for p in design.actuation_points}

__all__ = ["actuation", "design", "design_waveforms", "firmware_setting"]
