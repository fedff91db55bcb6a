"""The design entry points: a drive in, one Design out; its actuations for simulate and plot.

:func:`design` hands the drive to its hold strategy (:mod:`coildrive.design.holds`); the
strategy evaluates every figure under the hold the firmware runs. The Design holds plain
data; the table, JSON, header and plot all read it and none of them recomputes physics.
Drawing a waveform is a separate step (:func:`design_waveforms`), paid only by the
outputs that show one.
"""

from __future__ import annotations

import dataclasses

from ..config import Drive
from ..errors import InputError
from .datasheet import datasheet_checks, datasheet_result, uses_datasheet
from .firmware import firmware_setting  # noqa: F401  (re-exported: part of this module's API)
from .holds import strategy_for
from .result import Check, Design


def design(drive: Drive, samples: int = 0, seed: int = 1) -> Design:
    """Design the peak-and-hold drive for ``drive``.

    ``samples`` > 0 adds a tolerance Monte Carlo of that many points (see
    :func:`coildrive.design.montecarlo.monte_carlo`; voltage-mode holds only).
    A latching coil (``[hold] mode = "latch"``) has no peak and hold: it is
    :func:`coildrive.design.latch.design_latch`'s, which ``coildrive design`` and
    ``simulate`` call; anything else asking for its Design is refused in one line.
    """
    if drive.latch is not None:
        raise InputError(drive.source, "hold.mode", "\"latch\": a latching coil is designed and "
                         "simulated by coildrive design and coildrive simulate only; this command "
                         "runs a peak-and-hold drive")
    out = strategy_for(drive).design(drive, samples, seed)
    if uses_datasheet(drive):
        sheet = datasheet_result(drive, out.release)
        out = dataclasses.replace(out, datasheet=sheet, checks=out.checks + datasheet_checks(
            drive, out.pull_in, out.release, sheet))
    if drive.coil.flux_current:
        out = dataclasses.replace(out, checks=out.checks + [_curve_range(drive, out)])
    return out


def _curve_range(drive: Drive, d: Design) -> Check:
    """A warning when the design's highest current (the over-current trip) lies past the
    flux-linkage table, where the curve goes on straight at its end slope."""
    top = drive.coil.flux_current[-1]
    if drive.coil.seated_current:   # with [armature]: the shorter of the open and seated tables
        top = min(top, drive.coil.seated_current[-1])
    highest = max(d.adc.trip_current_a, d.pull_in.peak_end_current_max_a)
    ok = highest <= top
    return Check("flux_curve_range", ok,
                 f"the flux-linkage table reaches {top:.4g} A; the highest current is {highest:.4g} A "
                 "(the over-current trip)" + ("" if ok else ": above the table the curve is extended "
                                              "straight at its end slope; measure up to there"),
                 severity="warning")


#: Most samples one simulated actuation may have (a CSV of about 0.4 GB); past it the
#: run is refused before anything is computed.
MAX_WAVEFORM_SAMPLES = 4_000_000


def actuation(design: Design, supply: float, coil_temp: float, hold_time: float,
              r_factor: float = 1.0, l_factor: float = 1.0, points: int = 8, label: str = "",
              strict: bool = True):
    """One actuation of ``design`` at one operating point (V, degC, s, tolerance factors),
    with the design's peak and its hold as the firmware runs it: a
    :class:`~coildrive.model.waveform.Waveform`. ``points`` samples per PWM segment.

    Raises :class:`~coildrive.errors.InputError` (naming ``--hold-time``) when the
    waveform would hold more than :data:`MAX_WAVEFORM_SAMPLES` samples."""
    f = design.hold.frequency_hz
    if design.hold.current_mode is not None:
        f = max(f, design.hold.current_mode.max_frequency_hz)
    samples = 2.0 * points * hold_time * f + 80.0 * points
    if not samples <= MAX_WAVEFORM_SAMPLES:
        raise InputError("--hold-time", "", f"{hold_time:g} s of hold at {f:.6g} Hz with {points} "
                         f"points a segment is about {samples:,.0f} samples, more than the "
                         f"{MAX_WAVEFORM_SAMPLES:,} one actuation may have: shorten --hold-time or "
                         "lower --points")
    return strategy_for(design.drive).actuation(design, supply, coil_temp, hold_time, r_factor,
                                                l_factor, points, label, strict)


def design_waveforms(design: Design) -> dict:
    """The actuations the plot shows (``"nominal"`` and ``"worst"`` pull-in), by name."""
    return {p.name: actuation(design, p.supply_v, p.coil_temp_c, p.hold_time_s, p.r_factor,
                              p.l_factor, label=p.label, strict=False)
            for p in design.actuation_points}

def design_thermal_curves(design: Design) -> dict:
    """The coil temperature held on from a cold start and from a hot restart, by name (see
    :func:`coildrive.design.thermal_cycle.thermal_curves`); empty without a heat capacity."""
    t = design.thermal_cycle
    if t is None or t.cold_start is None:
        return {}
    from .thermal_cycle import thermal_curves
    return thermal_curves(t)

__all__ = ["actuation", "design", "design_thermal_curves", "design_waveforms", "firmware_setting"]
