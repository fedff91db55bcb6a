"""The model at the bench point, for live tuning: where the bench runs, the hold there,
the drop-out the model predicts, the scaling from the bench to the worst corner, and the
recommendation built from a bench drop-out current.

Units: SI (A, V, s, Hz), temperatures in degC; duty as a fraction 0..1.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from ..config import Drive

#: Hold length in multiples of the slowest time constant of the PWM-averaged hold
#: (our choice: the current settles to e^-10 of its step, and a near-threshold armature
#: has time to lift).
HOLD_SETTLE_TAUS = 10.0


@dataclass(frozen=True)
class BenchPoint:
    """Where the bench runs: bus voltage V and coil temperature degC, and where each
    figure came from."""

    supply_v: float
    supply_from: str
    coil_temp_c: float
    coil_temp_from: str


def bench_point(drive: Drive, supply: float | None = None, coil_temp: float | None = None,
                supply_codes: list[int] | None = None, adc_bits: int | None = None,
                temperatures_mc: list[int] | None = None) -> BenchPoint:
    """The bench operating point: ``supply`` V (else the median of the device's SUPPLY
    codes through the board's divider, else ``supply.nominal``) and ``coil_temp`` degC
    (else the median of the device's TEMPERATURE events, milli-degC, else the coil's
    reference temperature clipped into the ambient range)."""
    from ..bench.check import supply_from_codes
    from ..design.corners import nominal_point

    nom = nominal_point(drive)
    if supply is not None:
        v, v_from = float(supply), "--supply"
    elif supply_codes and drive.board.supply_sense is not None:   # (no divider: nothing to read)
        v = supply_from_codes(drive, supply_codes, adc_bits)
        v_from = f"device SUPPLY events ({len(supply_codes)}, through the board's divider)"
    else:
        v, v_from = float(nom.supply[0]), "drive file: supply.nominal"
    if coil_temp is not None:
        t, t_from = float(coil_temp), "--coil-temp"
    elif temperatures_mc:
        t = float(np.median(temperatures_mc)) / 1000.0
        t_from = f"device TEMPERATURE events ({len(temperatures_mc)})"
    else:
        t, t_from = float(nom.ambient[0]), "drive file: coil.reference_temp within the ambient range"
    return BenchPoint(v, v_from, t, t_from)


@dataclass(frozen=True)
class HoldFigures:
    """The model's seated hold at the bench point for some duties (arrays): the current
    that counts for the force (``force_a``: RMS, or the ripple bottom where the armature
    could lift within a period; the mean without an ``[armature]``), ``mean_a``,
    ``ripple_a`` (peak-to-peak of the current the sense resistor carries: with an eddy
    term the terminal current, steps at the edges included), and ``tau_s`` (time
    constant of the PWM-averaged current, :func:`averaged_time_constant`)."""

    duty: np.ndarray
    force_a: np.ndarray
    mean_a: np.ndarray
    ripple_a: np.ndarray
    tau_s: np.ndarray


def hold_figures(drive: Drive, point: BenchPoint, duty, frequency: float) -> HoldFigures:
    """:class:`HoldFigures` of a seated hold at ``duty`` (array) and ``frequency`` Hz,
    nominal parts, at the bench point: the exact periodic orbit of
    :func:`coildrive.model.pwm.pwm_steady_state` on the hold's loop, as the design and the
    offline sweep evaluate it -- a flux-linkage curve's (the seated curve with an
    ``[armature]``), an eddy term's, a mixed-decay hold's three segments, a full bridge's
    slow decay -- and the force current of
    :func:`coildrive.model.armature.hold_force_current`."""
    from ..model.circuit import loop
    from ..model.pwm import pwm_steady_state

    duty = np.atleast_1d(np.asarray(duty, float))
    lp = loop(drive, point.supply_v, point.coil_temp_c, 1.0, 1.0)
    ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                          mixed=lp.mixed)
    force = ss.mean
    if drive.armature is not None:
        from ..model.armature import hold_force_current, params_from_loop

        p = params_from_loop(drive.armature, lp, 1.0, drive.coil.eddy_resistance)
        # the force goes with the magnetising current (an eddy term's terminal RMS is higher)
        rms = ss.rms if ss.magnetising_rms is None else ss.magnetising_rms
        force, _ = hold_force_current(p, ss.i_min, rms, ss.period)
    tau = averaged_time_constant(lp, duty, ss.mean)
    return HoldFigures(duty, np.asarray(force, float), np.asarray(ss.mean, float),
                       np.asarray(ss.ripple, float), np.asarray(tau, float))


def averaged_time_constant(lp, duty, mean):
    """Time constant (s) of the PWM-averaged hold current at ``duty`` on the loop ``lp``,
    about the mean current ``mean`` A: ``L_d / R_avg``.

    ``L_d`` is the incremental inductance at the mean (a flux-linkage curve's
    ``dpsi/di``, else ``L``). ``R_avg`` weights each segment's loop resistance by its
    share of the period: ``D R_on + (1 - D) R_off``, with mixed decay the off-time split
    ``(1 - f) R_off + f R_fast``. With an eddy term the magnetising branch sees each
    loop through the eddy resistance ``R_e`` (its Thevenin resistance ``R R_e / (R +
    R_e)``, :func:`coildrive.model.eddy.thevenin`): slower than without.
    """
    from ..model.eddy import EddyCoil
    from ..model.flux import incremental_at

    ind = lp.inductance
    r_on, r_off = np.asarray(lp.r_on, float), np.asarray(lp.r_off, float)
    if lp.mixed is not None and lp.mixed.fraction > 0:
        r_off = (1.0 - lp.mixed.fraction) * r_off + lp.mixed.fraction * np.asarray(lp.mixed.r_fast, float)
    if isinstance(ind, EddyCoil):
        r_e = np.asarray(ind.resistance, float)
        r_on, r_off = r_on * r_e / (r_on + r_e), r_off * r_e / (r_off + r_e)
        ind = ind.magnetising
    return incremental_at(ind, mean) / (duty * r_on + (1.0 - duty) * r_off)


def model_stay_current(drive: Drive, point: BenchPoint) -> float:
    """The model's drop-out current at the bench point, A: the stay current of the seated
    armature (nominal parts; ``(I^2 / 2) |dL/dx|(0) = spring + load``), or the drive
    file's ``release.current`` without an ``[armature]``."""
    if drive.armature is None:
        return float(drive.release.current)
    from ..model.armature import params_from_loop
    from ..model.circuit import loop

    lp = loop(drive, point.supply_v, point.coil_temp_c, 1.0, 1.0)
    return float(params_from_loop(drive.armature, lp, 1.0, drive.coil.eddy_resistance).stay_current[0])


def model_dropout_duty(drive: Drive, point: BenchPoint, frequency: float, current: float | None = None,
                       iterations: int = 50) -> float:
    """Duty at which the model's hold force current at the bench point equals ``current``
    A (default: :func:`model_stay_current`), by bisection (the force current rises with
    the duty); ``nan`` if even 100 % falls short."""
    target = model_stay_current(drive, point) if current is None else current
    if hold_figures(drive, point, 1.0, frequency).force_a[0] < target:
        return math.nan
    lo, hi = 0.0, 1.0
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        if hold_figures(drive, point, mid, frequency).force_a[0] >= target:
            hi = mid
        else:
            lo = mid
    return 0.5 * (lo + hi)


def corner_factor(drive: Drive, point: BenchPoint) -> tuple[float, str]:
    """How much more current than at the bench point the worst corner needs to hold, and
    that corner's label: the largest stay current over the design's corner grid
    (:func:`coildrive.design.corners.corner_grid`) over the stay current at the bench point.

    The stay current is a force balance, so the supply and coil temperature do not move
    it (they move the duty that makes it, which the design takes care of); the
    inductance tolerance does (``|dL/dx|`` scales with it). Without an ``[armature]``
    there is no model of the mechanics: 1.
    """
    if drive.armature is None:
        return 1.0, "no [armature]: the drop-out current is taken as the same at every corner"
    from ..design.corners import corner_grid
    from ..model.armature import params_from_loop
    from ..model.circuit import loop

    grid = corner_grid(drive)
    lp = loop(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor)
    stay = params_from_loop(drive.armature, lp, grid.l_factor).stay_current
    k = int(np.argmax(stay))
    return float(stay[k]) / model_stay_current(drive, point), grid.label(k)


def hold_margin(drive: Drive, margin: float | None = None) -> tuple[float, str]:
    """The hold margin on the drop-out current and where it comes from."""
    if margin is not None:
        return float(margin), "--margin"
    if drive.armature is not None:
        return float(drive.armature.current_margin), "armature.current_margin"
    if drive.release.current > 0:
        return float(drive.hold.current / drive.release.current), "hold.current / release.current of the drive file"
    return 1.25, "default 1.25 (the drive file gives no drop-out current)"


def default_hold_time(drive: Drive, point: BenchPoint, frequency: float, duties) -> float:
    """:data:`HOLD_SETTLE_TAUS` x the slowest averaged-hold time constant over ``duties``,
    rounded up to whole milliseconds, at least 10 ms and 20 PWM periods (s)."""
    tau = float(np.max(hold_figures(drive, point, duties, frequency).tau_s))
    return max(math.ceil(HOLD_SETTLE_TAUS * tau * 1e3) / 1e3, 0.010, 20.0 / frequency)


@dataclass(frozen=True)
class LiveRecommendation:
    """The hold to use: ``hold_current_a`` = max(bench drop-out x ``corner_factor`` x
    ``margin``, the model minimum); its duty, compare value and frequency from the design
    of the drive with that hold current, the ``[hold]`` section, and that design's
    verdict."""

    hold_current_a: float
    governed_by: str
    bench_need_a: float
    bench_dropout_a: float
    corner_factor: float
    worst_corner: str
    margin: float
    margin_source: str
    model_minimum_a: float
    model_minimum_basis: str
    duty: float
    compare_ticks: int
    period_ticks: int
    frequency_hz: float
    min_mean_current_a: float
    hold_toml: str
    design_ok: bool
    design_failed: list[str]
    cautions: list[str]
    design: object = field(default=None, repr=False, compare=False)

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "design"}


def recommend(drive: Drive, point: BenchPoint, bench_dropout_a: float,
              margin: float | None = None) -> LiveRecommendation:
    """The hold current and its design from a bench drop-out current (A at the bench
    point; the highest over the repeats): see the module docstring for the rule."""
    from ..design import design
    from .sweep import minimum_hold_current

    k, worst = corner_factor(drive, point)
    m, m_src = hold_margin(drive, margin)
    need = bench_dropout_a * k * m
    i_min, basis = minimum_hold_current(drive)
    rec = max(need, i_min)
    governed = "bench" if need >= i_min else "model minimum"
    rec_drive = dataclasses.replace(drive, hold=dataclasses.replace(drive.hold, current=rec))
    des = design(rec_drive)
    lines = ["[hold]",
             f"current = {rec!r}  # A ({rec * 1e3:.5g} mA): "
             + (f"bench drop-out {bench_dropout_a:.4g} A x {k:.4g} (worst corner) x {m:.4g} margin"
                if governed == "bench" else f"the model minimum ({basis}); the bench needs {need:.4g} A"),
             f"frequency = {drive.hold.frequency!r}  # Hz: compare {des.timer.compare_ticks}/{des.timer.period_ticks}"
             f" = duty {des.hold.duty:.4f} at {des.hold.frequency_hz:.6g} Hz"]
    if drive.hold.mode != "voltage":
        lines.append(f'mode = "{drive.hold.mode}"')
    if drive.hold.frequency_tolerance != 0.01:
        lines.append(f"frequency_tolerance = {drive.hold.frequency_tolerance!r}")
    return LiveRecommendation(
        hold_current_a=rec, governed_by=governed, bench_need_a=need, bench_dropout_a=bench_dropout_a,
        corner_factor=k, worst_corner=worst, margin=m, margin_source=m_src, model_minimum_a=i_min,
        model_minimum_basis=basis, duty=des.hold.duty, compare_ticks=des.timer.compare_ticks,
        period_ticks=des.timer.period_ticks, frequency_hz=des.hold.frequency_hz,
        min_mean_current_a=des.hold.min_mean_current_a, hold_toml="\n".join(lines) + "\n",
        design_ok=des.ok, design_failed=[c.name for c in des.failed], cautions=list(des.cautions),
        design=des)
