"""Hold tuning live on the bench: find where the armature drops out, recommend a hold.

The procedure (:class:`LiveTuner`, over a :class:`~coildrive.bench.link.DeviceLink`-like
object; it knows no CLI, files or ports):

1. QUERY_INFO; set the design's peak time (rounded *down* to whole microseconds, so the
   device never runs a longer peak) and hold frequency. A device that answers with a
   longer peak is refused.
2. Actuate at the design duty: the armature must seat (a SWITCH = 1 event when the
   board has a position switch, else the current dip of the pull-in) and stay seated
   through the hold. No seating is a stuck armature; a drop-out already at the design
   duty is a hold too weak for this bench. Both end the procedure (exit 1 in the CLI).
3. Search the duty downward: coarse steps of ``coarse_step`` x the design duty until the
   armature drops out during the hold (down to ``floor`` x the design duty), then
   bisection between the last held and the first dropped duty until they are less than
   ``resolution`` x the design duty apart (or one duty step of the device). The bench
   drop-out duty is the middle of that last bracket. The search runs ``repeats`` times
   for the spread.
4. Drop-out detection (:func:`judge_actuation`): from the SWITCH input when the INFO
   flag says the board has one (a SWITCH = 0 during the hold); else from the current's
   signature -- a rise of the period-averaged hold current above its running minimum
   (with the armature seated the hold current only falls towards its steady state; an
   opening gap lowers L and ``i = lambda / L`` rises), or, when the design-duty
   actuation showed a release bump, the lack of one at the final turn-off (the
   armature is already open). Limits are in docs/tuning.md.
5. Safety: any sample above the design's over-current threshold (1.25 x its worst-case
   peak or hold current, the header's ``ADC_OVER_CURRENT``) or at the ADC's full scale
   stops the device at once (over-current); a peak phase whose highest current stays
   below the design's open-load threshold is an open coil. STOP goes out in a
   ``finally`` on every exit path, Ctrl-C included.

The recommendation (:func:`recommend`): the highest bench drop-out current over the
repeats, scaled to the worst corner by the model's own corner grid (the largest stay
current over the corners over the stay current at the bench point: with an
``[armature]`` it is the inductance tolerance that moves it), times the hold margin
(``armature.current_margin``, or ``hold.current / release.current`` without an
armature), and never below the model's minimum hold current
(:func:`coildrive.tune.minimum_hold_current`). Its duty comes from
:func:`coildrive.design.design` of the drive with that ``hold.current``: the lowest
supply and hottest coil of every corner, with self-heating, as for any design.

Units: SI (A, V, s, Hz), temperatures in degC; duty as a fraction 0..1.
"""

from __future__ import annotations

import dataclasses
import math
import queue
import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..config import Drive
from ..errors import InputError

#: Wall-clock time without new samples, after the OFF and the current back at zero,
#: that ends an actuation's stream (s; the device may stream only what it recorded).
QUIET_S = 0.15
#: Hold length in multiples of the slowest time constant of the PWM-averaged hold
#: (our choice: the current settles to e^-10 of its step, and a near-threshold armature
#: has time to lift).
HOLD_SETTLE_TAUS = 10.0
#: A hold-current rise must exceed this many sigmas of the averaged current's noise.
RISE_MIN_CONFIDENCE = 8.0
#: ... and at least this many ADC codes (our choice: well above quantisation).
RISE_MIN_CODES = 2.0
#: ... and this fraction of the model's hold ripple (aliasing of an unresolved PWM).
RISE_RIPPLE_FRACTION = 0.25
#: The averaging window of the hold current covers at least this many samples.
RISE_WINDOW_SAMPLES = 32
#: Slack on the device's peak duration, in samples, on top of one scheduler tick.
PEAK_SLACK_SAMPLES = 2
#: Poll interval while the device answers BUSY, s.
BUSY_POLL_S = 0.02
#: Samples kept before the ON event for the analysis' idle level.
PRE_SAMPLES = 200

DETECTIONS = ("auto", "switch", "signature")
"""How drop-out is detected: the position switch when there is one, or as asked."""

FAILURES = ("stuck", "drops_at_design", "no_dropout", "open_coil", "over_current",
            "peak_time", "refused", "link", "interrupted")
"""Failure codes of a live tuning (see :class:`LiveFailure`)."""


class LiveFailure(Exception):
    """The procedure cannot go on; ``code`` is one of :data:`FAILURES`."""

    def __init__(self, code: str, message: str):
        super().__init__(message)
        self.code = code
        self.message = message


# --------------------------------------------------------------------------- options
@dataclass(frozen=True)
class LiveOptions:
    """What the live search does.

    ``repeats`` searches; ``supply`` V / ``coil_temp`` degC of the bench (``None``: the
    device's SUPPLY events, else the drive's nominal supply / the coil's reference
    temperature within the ambient range); ``hold_time`` s per actuation (0: automatic,
    :data:`HOLD_SETTLE_TAUS` time constants); ``coarse_step``, ``resolution`` and
    ``floor`` as fractions of the design duty; ``margin`` the hold margin (``None``: the
    drive's); ``timeout`` s of slack on top of the expected time of each actuation;
    ``detect``: ``"auto"`` (the position switch when the INFO flag says there is one,
    else the current's signature), ``"switch"`` or ``"signature"``.
    """

    repeats: int = 3
    supply: float | None = None
    coil_temp: float | None = None
    hold_time: float = 0.0
    coarse_step: float = 0.10
    resolution: float = 0.01
    floor: float = 0.10
    margin: float | None = None
    timeout: float = 10.0
    detect: str = "auto"

    def check(self) -> None:
        """Raise :class:`InputError` naming the option for a value out of range."""
        if not 1 <= self.repeats <= 100:
            raise InputError("--repeats", "", f"{self.repeats} is out of range, expected 1..100")
        if self.supply is not None and not (math.isfinite(self.supply) and self.supply > 0):
            raise InputError("--supply", "", f"{self.supply:g} V must be greater than zero")
        if self.coil_temp is not None and not (math.isfinite(self.coil_temp) and self.coil_temp > -273.15):
            raise InputError("--coil-temp", "", f"{self.coil_temp:g} degC is not a temperature")
        if not (math.isfinite(self.hold_time) and 0 <= self.hold_time <= 10.0):
            raise InputError("--hold-time", "", f"{self.hold_time:g} s is out of range, expected 0 "
                             "(automatic) up to 10 s")
        if not 0 < self.coarse_step <= 0.5:
            raise InputError("--coarse-step", "", f"{self.coarse_step:g} is out of range, expected a "
                             "fraction of the design duty in (0, 0.5]")
        if not 0 < self.resolution <= self.coarse_step:
            raise InputError("--resolution", "", f"{self.resolution:g} is out of range, expected a "
                             f"fraction of the design duty in (0, {self.coarse_step:g}] (the coarse step)")
        if not 0 <= self.floor < 1:
            raise InputError("--floor", "", f"{self.floor:g} is out of range, expected a fraction of "
                             "the design duty in [0, 1)")
        if self.margin is not None and not self.margin >= 1.0:
            raise InputError("--margin", "", f"{self.margin:g} is below 1, expected a factor >= 1 on "
                             "the bench drop-out current")
        if self.detect not in DETECTIONS:
            raise InputError("--detect", "", f"{self.detect!r} is not one of {', '.join(DETECTIONS)}")
        if not self.timeout > 0:
            raise InputError("--timeout", "", f"{self.timeout:g} s must be greater than zero")


# --------------------------------------------------------------------------- the model at the bench
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
    elif supply_codes:
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
    ``ripple_a`` (peak-to-peak), and ``tau_s`` (time constant of the PWM-averaged
    current, ``L / (D R_on + (1 - D) R_off)``)."""

    duty: np.ndarray
    force_a: np.ndarray
    mean_a: np.ndarray
    ripple_a: np.ndarray
    tau_s: np.ndarray


def hold_figures(drive: Drive, point: BenchPoint, duty, frequency: float) -> HoldFigures:
    """:class:`HoldFigures` of a seated hold at ``duty`` (array) and ``frequency`` Hz,
    nominal parts, at the bench point (the exact PWM steady state of
    :mod:`coildrive.model.pwm`; the force current of
    :func:`coildrive.model.armature.hold_force_current`)."""
    from ..model.circuit import loop
    from ..model.pwm import pwm_steady_state

    duty = np.atleast_1d(np.asarray(duty, float))
    lp = loop(drive, point.supply_v, point.coil_temp_c, 1.0, 1.0)
    ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    force = ss.mean
    if drive.armature is not None:
        from ..model.armature import hold_force_current, params_from_loop

        p = params_from_loop(drive.armature, lp, 1.0)
        force, _ = hold_force_current(p, ss.i_min, ss.rms, ss.period)
    tau = lp.inductance / (duty * lp.r_on + (1.0 - duty) * lp.r_off)
    return HoldFigures(duty, np.asarray(force, float), np.asarray(ss.mean, float),
                       np.asarray(ss.ripple, float), np.asarray(tau, float))


def model_stay_current(drive: Drive, point: BenchPoint) -> float:
    """The model's drop-out current at the bench point, A: the stay current of the seated
    armature (nominal parts; ``(I^2 / 2) |dL/dx|(0) = spring + load``), or the drive
    file's ``release.current`` without an ``[armature]``."""
    if drive.armature is None:
        return float(drive.release.current)
    from ..model.armature import params_from_loop
    from ..model.circuit import loop

    lp = loop(drive, point.supply_v, point.coil_temp_c, 1.0, 1.0)
    return float(params_from_loop(drive.armature, lp, 1.0).stay_current[0])


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
    (:func:`coildrive.corners.corner_grid`) over the stay current at the bench point.

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


# --------------------------------------------------------------------------- one actuation
@dataclass(frozen=True)
class Judgement:
    """What one captured actuation says about the armature (A, s from the switch-on).

    ``seated``/``seated_by``: it seated during the peak (``"switch"`` or ``"dip"``);
    ``dropped``/``dropped_by``: it let go during the hold (``"switch"``,
    ``"hold rise"`` or ``"no release bump"``); ``evidence`` says it in words.
    ``hold_rise_a`` is the largest rise of the period-averaged hold current above its
    running minimum and ``rise_threshold_a`` what counts as one; ``late_hold_mean_a``
    the measured mean over the last quarter of the hold (whole PWM periods);
    ``settled_hold_a`` the settled hold current: the last eighth's mean when the hold had
    settled, else the Aitken extrapolation of the last three eighths (``None`` when the
    samples show no clean exponential settling); ``dropped_at_s`` when the switch opened
    (from the switch-on).
    """

    seated: bool
    seated_by: str
    dropped: bool
    dropped_by: str
    evidence: str
    peak_current_a: float
    late_hold_mean_a: float | None
    settled_hold_a: float | None
    settled_how: str
    hold_rise_a: float | None
    rise_threshold_a: float | None
    release_bump_a: float | None
    dropped_at_s: float | None
    peak_duration_s: float | None
    samples_missing: int
    analysis: object = field(repr=False, default=None)

    def to_dict(self) -> dict:
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "analysis"}
        out["analysis"] = None if self.analysis is None else self.analysis.to_dict()
        return out


def _hold_rise(amps: np.ndarray, spp: float | None, noise_a: float) -> tuple[float, float]:
    """Largest rise of the hold current, averaged over whole PWM periods, above its
    running minimum (A), and the noise of that average (A, one sigma)."""
    if spp and spp > 0:
        periods = max(1, math.ceil(RISE_WINDOW_SAMPLES / spp))
        width = max(1, int(round(periods * spp)))
    else:
        width = RISE_WINDOW_SAMPLES
    if amps.size < 2 * width:
        return 0.0, noise_a
    from ..bench.analysis import _smooth

    s = _smooth(amps, width)[width:]
    rise = s - np.minimum.accumulate(s)
    return float(np.max(rise)), noise_a / math.sqrt(width)


def settled_value(amps: np.ndarray, spp: float | None, noise_a: float) -> tuple[float | None, str]:
    """The value a settling hold current tends to, from its last three eighths (A).

    The mean over equal windows of ``a + b exp(-t / tau)`` is a geometric sequence plus
    ``a``, so Aitken's delta-squared process gives ``a`` exactly from three windows:
    ``a = w3 - (w3 - w2)^2 / ((w3 - w2) - (w2 - w1))``, used while the first step stands
    out of the noise (3 sigma) and the steps shrink like one exponential (ratio 0..0.9).
    Otherwise, when the last two windows agree within the noise (or 0.1 %), the hold has
    settled and ``w3`` is the answer; else there is no estimate.
    """
    n = amps.size // 8
    if spp and spp > 0 and n >= spp:
        n = int(round(int(n / spp) * spp))
    if n < 4:
        return None, "hold too short"
    w1, w2, w3 = (float(np.mean(amps[amps.size - k * n: amps.size - (k - 1) * n])) for k in (3, 2, 1))
    sigma = noise_a / math.sqrt(n) * math.sqrt(2.0)
    d1, d2 = w2 - w1, w3 - w2
    if abs(d1) > 3.0 * sigma and 0 < d2 / d1 < 0.9:
        return w3 - d2 * d2 / (d2 - d1), f"still settling (steps {d1 * 1e3:.3g}, {d2 * 1e3:.3g} mA): Aitken extrapolation"
    if abs(d2) <= max(3.0 * sigma, 1e-3 * abs(w3)):
        return w3, "settled"
    return None, f"not settling like one exponential (steps {d1 * 1e3:.3g}, {d2 * 1e3:.3g} mA)"


def judge_actuation(capture, *, hold_frequency: float, use_switch: bool,
                    release_bump_expected: bool = False, ripple_a: float = 0.0,
                    pull_in_current: float | None = None, dropout_current: float | None = None,
                    sense_position: str | None = None) -> Judgement:
    """Analyse a capture of one actuation (with ON, PEAK_END and OFF events) and say
    whether the armature seated and whether it dropped out during the hold.

    Parameters
    ----------
    capture : :class:`~coildrive.bench.capture_file.Capture` with sample rate and scaling.
    hold_frequency : Hz of the hold PWM (for whole-period averages).
    use_switch : judge from the SWITCH events (the board has a position switch).
    release_bump_expected : the design-duty actuation showed a release bump, so a
        missing one means the armature was already open (signature mode only).
    ripple_a : the model's hold ripple, A p-p (raises the rise threshold by
        :data:`RISE_RIPPLE_FRACTION` of it).
    pull_in_current, dropout_current : A, passed to the analysis.
    """
    from ..bench.analysis import analyse
    from ..bench.messages import EventKind

    a = analyse(capture, pull_in_current=pull_in_current, dropout_current=dropout_current,
                hold_frequency=hold_frequency, sense_position=sense_position)
    if not a.actuations:
        return Judgement(False, "", False, "", "no actuation in the capture", 0.0, None, None, "no hold",
                         None, None, None, None, None, 0, None)
    r = a.actuations[0]
    fs = a.sample_rate_hz
    apc = a.amps_per_code
    sense = a.sense_position
    idx = capture.index
    on_i = r.on_index
    pe_i = r.peak_end_index
    off_i = r.off_index
    t_on = r.on_at_s

    # late-hold mean and the hold rise
    late = rise = thr = settled = None
    settled_how = "no hold"
    if pe_i is not None and off_i is not None and off_i > pe_i:
        sel = (idx >= pe_i) & (idx < off_i)
        c = capture.code[sel].astype(np.int64) - int(capture.meta.zero_code)
        amps = np.where(c > 0, c + 0.5, 0.0) * apc
        spp = fs / hold_frequency if hold_frequency else None
        if sense == "switch":
            amps = amps[amps > a.zero_threshold_a]
        if amps.size >= 4:
            quarter = amps.size // 4
            if spp and sense == "coil":
                periods = max(1, int(quarter / spp))
                quarter = max(1, int(round(periods * spp)))
            late = float(np.mean(amps[-quarter:]))
            settled, settled_how = settled_value(amps, spp if sense == "coil" else None, r.noise_a)
            rise, sigma = _hold_rise(amps, spp if sense == "coil" else None, r.noise_a)
            thr = max(RISE_MIN_CONFIDENCE * sigma, RISE_MIN_CODES * apc, RISE_RIPPLE_FRACTION * ripple_a)
    bump = r.release_bump_height_a

    switch = [(e.index, e.value) for e in capture.events if e.kind == EventKind.SWITCH]
    dropped_at = None
    if use_switch:
        end_peak = pe_i if pe_i is not None else (off_i if off_i is not None else idx[-1])
        seat_idx = [i for i, v in switch if v == 1 and on_i <= i <= (off_i if off_i is not None else idx[-1])]
        seated = bool(seat_idx)
        seated_by = "switch" if seated else ""
        drop_idx = [i for i, v in switch if v == 0 and seat_idx and i > seat_idx[0]
                    and end_peak <= i <= (off_i if off_i is not None else idx[-1])]
        dropped = bool(drop_idx)
        dropped_by = "switch" if dropped else ""
        if dropped:
            dropped_at = drop_idx[0] / fs - t_on
        if not seated:
            evidence = "the position switch never reported the armature seated (no SWITCH = 1)"
        elif dropped:
            evidence = f"the position switch opened {dropped_at * 1e3:.3g} ms after the switch-on, during the hold"
        else:
            evidence = "the position switch stayed closed through the hold"
    else:
        seated = r.seated_time_s is not None
        seated_by = "dip" if seated else ""
        why = []
        if rise is not None and rise > thr:
            why.append(f"the hold current rose {rise * 1e3:.3g} mA above its running minimum "
                       f"(threshold {thr * 1e3:.3g} mA)")
        if release_bump_expected and off_i is not None and bump is None and sense == "coil":
            why.append("no release bump at the turn-off (the armature was already open)")
        dropped = bool(why)
        dropped_by = ("hold rise" if why and why[0].startswith("the hold") else "no release bump") if why else ""
        if not seated:
            evidence = (f"no current dip during the peak (confidence {r.dip_confidence:.1f}): "
                        "the armature did not move")
        elif dropped:
            evidence = "; ".join(why)
        else:
            evidence = ("the hold current never rose"
                        + (f" (largest rise {rise * 1e3:.3g} mA, threshold {thr * 1e3:.3g} mA)" if rise is not None else "")
                        + ("" if not release_bump_expected else "; the release bump is there"))
    return Judgement(
        seated=seated, seated_by=seated_by, dropped=bool(seated and dropped), dropped_by=dropped_by if seated else "",
        evidence=evidence, peak_current_a=float(r.peak_current_a or 0.0), late_hold_mean_a=late,
        settled_hold_a=settled, settled_how=settled_how,
        hold_rise_a=rise, rise_threshold_a=thr, release_bump_a=bump, dropped_at_s=dropped_at,
        peak_duration_s=r.peak_duration_s, samples_missing=r.samples_missing, analysis=r)


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class LiveActuation:
    """One actuation of the procedure: what was asked, what the device set, the verdict."""

    number: int
    repeat: int
    step: str
    duty_requested: float
    duty: float
    hold_time_s: float
    on_index: int
    judgement: Judgement

    def to_dict(self) -> dict:
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "judgement"}
        out.update(self.judgement.to_dict())
        return out


@dataclass(frozen=True)
class RepeatResult:
    """One downward search: the lowest duty that held, the highest that dropped out, the
    drop-out duty (their middle) and the drop-out current (A) there."""

    number: int
    held_duty: float
    dropped_duty: float
    dropout_duty: float
    dropout_current_a: float
    equivalent_current_a: float
    current_basis: str
    actuations: int

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


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


@dataclass
class LiveResult:
    """Everything a live tuning found (plain data; see docs/tuning.md for the JSON)."""

    drive: Drive
    design: object
    options: LiveOptions
    point: BenchPoint | None = None
    device: dict = field(default_factory=dict)
    detection: str = ""
    hold_time_s: float = 0.0
    resolution_duty: float = 0.0
    floor_duty: float = 0.0
    over_current_a: float = 0.0
    open_load_a: float = 0.0
    actuations: list[LiveActuation] = field(default_factory=list)
    repeats: list[RepeatResult] = field(default_factory=list)
    model_dropout_duty: float = math.nan
    model_dropout_current_a: float = math.nan
    recommendation: LiveRecommendation | None = None
    failure: tuple[str, str] | None = None
    stopped: bool = False
    stop_detail: str = ""
    commands: list[dict] = field(default_factory=list)
    link: dict = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    seconds: float = 0.0

    @property
    def ok(self) -> bool:
        """A recommendation whose design passes, and the device acknowledged the STOP."""
        return (self.failure is None and self.recommendation is not None
                and self.recommendation.design_ok and self.stopped)

    def duties(self) -> np.ndarray:
        return np.array([r.dropout_duty for r in self.repeats], float)

    def currents(self) -> np.ndarray:
        return np.array([r.dropout_current_a for r in self.repeats], float)

    @property
    def dropout_duty(self) -> float:
        """Mean bench drop-out duty over the repeats (``nan`` without one)."""
        d = self.duties()
        return float(d.mean()) if d.size else math.nan

    @property
    def dropout_duty_spread(self) -> float:
        """Highest minus lowest drop-out duty over the repeats."""
        d = self.duties()
        return float(d.max() - d.min()) if d.size else math.nan


# --------------------------------------------------------------------------- recommendation
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


# --------------------------------------------------------------------------- the procedure
class _Unwrap:
    """Device sample indices (mod 2**32) to increasing 64-bit integers."""

    def __init__(self):
        self.base = None
        self.last = 0

    def __call__(self, raw: int) -> int:
        raw = int(raw) & 0xFFFFFFFF
        if self.base is None:
            self.base = raw
            self.last = 0
            return raw
        step = (raw - (self.base + self.last)) & 0xFFFFFFFF
        if step >= 1 << 31:
            step -= 1 << 32
        self.last += step
        return self.base + self.last


Progress = Callable[[int, int, str], None]
"""``progress(done, total, message)``: actuations done, an estimate of the total, what happened."""


class LiveTuner:
    """The live procedure over ``link`` (a :class:`~coildrive.bench.link.DeviceLink` or
    anything with its ``info``, ``subscribe()``, ``command()`` and ``stats()``).

    ``design`` is the :class:`~coildrive.design.Design` of the drive the firmware runs;
    ``progress`` is called after each actuation. :meth:`run` returns a
    :class:`LiveResult`; every failure (and Ctrl-C) is in ``result.failure``, and the
    device has been sent STOP.
    """

    def __init__(self, link, design, options: LiveOptions | None = None,
                 progress: Progress | None = None, clock: Callable[[], float] = time.monotonic):
        self.link = link
        self.design = design
        self.drive: Drive = design.drive
        self.options = options or LiveOptions()
        self.options.check()
        if self.drive.hold.mode != "voltage":
            raise InputError(self.drive.source, "hold.mode", "live tuning steps the duty of a voltage-mode "
                             "hold; for mode = \"current\" tune the thresholds with coildrive design")
        self.progress = progress
        self.clock = clock
        self.result = LiveResult(drive=self.drive, design=design, options=self.options)
        self._q = None
        self._unwrap = _Unwrap()
        self._samples: list[tuple[int, np.ndarray]] = []   # (first index, codes), arrival order
        self._events: list[tuple[int, int, int, int]] = []  # (arrival, index, kind, value)
        self._replies: list[tuple[int, object]] = []        # (arrival, Reply)
        self._arrival = 0
        self._info = None
        self._limit_code = None
        self._full_code = None
        self._supply_codes: list[int] = []
        self._temperatures: list[int] = []
        self._last_samples_at = 0.0
        self._expected_total = 0
        self._frequency = float(design.hold.frequency_hz)
        self._ripple = 0.0
        self._bump_expected = False
        self._t0 = clock()

    # ------------------------------------------------------------------ plumbing
    def _log(self, opcode, argument, reply=None, note: str = "") -> None:
        from ..bench.messages import Opcode, ReplyStatus

        def name(enum, v):
            try:
                return enum(v).name
            except ValueError:
                return str(v)
        entry = {"t_s": round(self.clock() - self._t0, 6), "opcode": name(Opcode, opcode), "argument": int(argument)}
        if reply is not None:
            entry["status"] = name(ReplyStatus, reply.status)
            entry["value"] = int(reply.value)
        if note:
            entry["note"] = note
        self.result.commands.append(entry)

    def _pump(self, timeout: float) -> bool:
        """Take every waiting message off the queue (waiting up to ``timeout`` s for the
        first); check samples for over-current. True if anything came."""
        from ..bench.messages import Event, EventKind, Info, Reply, Samples

        got = False
        wait = timeout
        while True:
            try:
                msg = self._q.get(timeout=wait) if wait > 0 else self._q.get_nowait()
            except queue.Empty:
                return got
            got = True
            wait = 0
            self._arrival += 1
            if isinstance(msg, Samples):
                first = self._unwrap(msg.first_index)
                codes = np.asarray(msg.codes)
                self._samples.append((first, codes))
                self._last_samples_at = self.clock()
                self._check_over_current(first, codes)
            elif isinstance(msg, Event):
                index = self._unwrap(msg.index)
                self._events.append((self._arrival, index, int(msg.kind), int(msg.value)))
                if int(msg.kind) == EventKind.SUPPLY:
                    self._supply_codes.append(int(msg.value))
                elif int(msg.kind) == EventKind.TEMPERATURE:
                    self._temperatures.append(int(msg.value))
            elif isinstance(msg, Info):
                self._info = msg
            elif isinstance(msg, Reply):
                self._replies.append((self._arrival, msg))

    def _check_over_current(self, first: int, codes: np.ndarray) -> None:
        if self._limit_code is None or codes.size == 0:
            return
        top = int(codes.max())
        if top > self._limit_code or top >= self._full_code:
            k = int(np.argmax(codes))
            apc, zero = self._scaling()
            amps = (top - zero + 0.5) * apc
            if top >= self._full_code:
                why = f"sample {first + k} reads the ADC's full scale (code {top}): the current is off the scale"
            else:
                why = (f"sample {first + k} reads {amps:.4g} A (code {top}), above the over-current limit "
                       f"{self.result.over_current_a:.4g} A (1.25 x the design's worst-case peak or hold current)")
            raise LiveFailure("over_current", f"over-current: {why}; the device was stopped")

    def _scaling(self) -> tuple[float, int]:
        info = self._info
        if info is not None and info.amps_per_code:
            apc = float(info.amps_per_code)
        else:
            from ..bench.synth import adc_scaling
            apc = adc_scaling(self.drive)[1]
        return apc, int(info.zero_code) if info is not None else 0

    def _command(self, opcode, argument: int = 0, deadline_s: float | None = None):
        """Send a command; wait while the device is BUSY (pumping messages); fail on a
        refusal. Returns the Reply.

        START goes once per try with a long timeout and no resend: a resent START whose
        first reply was lost would actuate twice."""
        from ..bench.messages import Opcode, ReplyStatus

        end = self.clock() + (deadline_s if deadline_s is not None else self.options.timeout + 30.0)
        busy = 0
        once = {"timeout": max(5.0, self.options.timeout), "retries": 0} if opcode == Opcode.START else {}
        while True:
            reply = self.link.command(opcode, int(argument), **once)
            if reply.status == ReplyStatus.BUSY:
                busy += 1
                if self.clock() > end:
                    self._log(opcode, argument, reply, f"still busy after {busy} tries")
                    raise LiveFailure("link", "the device stayed busy (still streaming an actuation?) "
                                      f"for {deadline_s or self.options.timeout + 30.0:.3g} s")
                self._pump(BUSY_POLL_S)
                continue
            self._log(opcode, argument, reply, f"after {busy} busy replies" if busy else "")
            if reply.status != ReplyStatus.OK:
                raise LiveFailure("refused", f"the device refused {Opcode(opcode).name} {int(argument)} "
                                  f"({ReplyStatus(reply.status).name if reply.status in ReplyStatus._value2member_map_ else reply.status})")
            return reply

    def _stop(self) -> None:
        """STOP, on every exit path; note whether the device acknowledged it."""
        from ..bench.messages import Opcode, ReplyStatus

        try:
            reply = self.link.command(Opcode.STOP, 0, timeout=1.0, retries=3)
            self._log(Opcode.STOP, 0, reply, "final STOP")
            self.result.stopped = reply.status == ReplyStatus.OK
            self.result.stop_detail = ("STOP acknowledged: the device is off" if self.result.stopped else
                                       f"STOP answered {reply.status}: check the device is off")
        except BaseException as err:  # noqa: BLE001 -- the link may be gone; say so, never hide it
            self.result.stopped = False
            self.result.stop_detail = (f"STOP not acknowledged ({err}): switch the coil supply off by hand")

    # ------------------------------------------------------------------ setup
    def _setup(self) -> None:
        from ..bench.messages import Opcode

        des = self.design
        res = self.result
        self._command(Opcode.QUERY_INFO)
        end = self.clock() + 2.0
        while self._info is None and self.clock() < end:
            self._pump(0.05)
            if self._info is None and getattr(self.link, "info", None) is not None:
                self._info = self.link.info
        if self._info is None:
            raise LiveFailure("link", "the device sent no INFO after QUERY_INFO: is it a coildrive bench link?")
        info = self._info
        apc, zero = self._scaling()
        res.device = {"firmware_id": info.firmware_id, "sample_rate_hz": info.sample_rate_hz,
                      "adc_bits": info.adc_bits, "amps_per_code": apc,
                      "amps_per_code_from": "device INFO" if info.amps_per_code else "board file",
                      "zero_code": zero, "has_position_switch": bool(info.has_position_switch),
                      "protocol_version": info.protocol_version}
        detect = self.options.detect
        if detect == "switch" and not info.has_position_switch:
            raise LiveFailure("refused", "--detect switch: the device says it has no position switch "
                              "(INFO flag clear)")
        res.detection = ("switch" if info.has_position_switch else "signature") if detect == "auto" else detect
        res.over_current_a = float(des.adc.over_current_a)
        res.open_load_a = float(des.adc.open_load_a)
        self._full_code = 2**info.adc_bits - 1
        self._limit_code = zero + int(math.floor(res.over_current_a / apc))
        # the peak: never longer than the design's
        want_us = int(math.floor(des.pull_in.peak_time_s * 1e6 + 1e-6))
        r = self._command(Opcode.SET_PEAK_TIME, want_us)
        if r.value and r.value > want_us:
            raise LiveFailure("peak_time", f"the device set a peak of {r.value} us, longer than the design's "
                              f"{want_us} us: refused")
        res.device["peak_time_s"] = (r.value or want_us) * 1e-6
        f_want = int(round(des.hold.frequency_hz))
        r = self._command(Opcode.SET_HOLD_FREQUENCY, f_want)
        f_dev = float(r.value or f_want)
        res.device["hold_frequency_hz"] = f_dev
        if abs(f_dev - des.hold.frequency_hz) > 0.01 * des.hold.frequency_hz:
            res.notes.append(f"the device runs the hold at {f_dev:g} Hz, not the design's "
                             f"{des.hold.frequency_hz:.6g} Hz")
        self._frequency = f_dev

    # ------------------------------------------------------------------ one actuation
    def _events_after(self, arrival: int, kinds) -> list[tuple[int, int, int, int]]:
        return [e for e in self._events if e[0] > arrival and e[2] in kinds]

    def _actuate(self, duty: float, repeat: int, step: str) -> LiveActuation:
        from ..bench.capture_file import Capture, CaptureEvent
        from ..bench.messages import EventKind, Opcode

        des = self.design
        res = self.result
        r = self._command(Opcode.SET_HOLD_DUTY, int(round(min(max(duty, 0.0), 1.0) * 65535)))
        in_force = r.value / 65535 if r.value else duty
        self._pump(0)
        if self._samples:  # keep only what may precede the next switch-on
            newest = max(f + c.size for f, c in self._samples)
            self._samples = [(f, c) for f, c in self._samples if f + c.size > newest - 4 * PRE_SAMPLES]
        mark = self._arrival
        started = self._command(Opcode.START, int(round(res.hold_time_s * 1e6)))
        hold_in_force = started.value * 1e-6 if started.value else res.hold_time_s
        # the START reply reaches the queue just after command() returned: what came
        # before it in the stream is an older actuation's
        end = self.clock() + 0.5
        while True:
            self._pump(0.01)
            starts = [a for a, rep in self._replies if a > mark and rep.opcode == Opcode.START and rep.status == 0]
            if starts or self.clock() > end:
                break
        mark = starts[-1] if starts else self._arrival
        fs = float(self._info.sample_rate_hz)
        length = res.device["peak_time_s"] + res.hold_time_s
        release = float(des.release.zero_time_s)
        if des.armature is not None and math.isfinite(des.armature.release_open_time_s):
            release = max(release, float(des.armature.release_open_time_s))
        release = 1.5 * release + 0.002
        quiet_s = max(QUIET_S, 40 * 140 * 10.0 / (getattr(self.link, "baud", None) or self.drive.board.link.baud))
        samples = (length + release) * fs
        baud = getattr(self.link, "baud", None) or self.drive.board.link.baud
        stream_s = samples * 2.3 / (baud / 10.0)  # ~2.2 bytes per sample in SAMPLES frames
        wait_s = length + release + 3.0 * stream_s + self.options.timeout
        deadline = self.clock() + wait_s
        on = off = None
        end_index = None
        while True:
            if on is None:
                ev = self._events_after(mark, (EventKind.ON,))
                if ev:
                    on = ev[0]
            if on is not None and off is None:
                ev = [e for e in self._events_after(on[0] - 1, (EventKind.OFF,)) if e[1] >= on[1]]
                if ev:
                    off = ev[0]
                    end_index = off[1] + int(math.ceil(release * fs))
            if off is not None:
                paused = [e for e in self._events_after(off[0] - 1, (EventKind.PAUSE,)) if e[1] >= off[1]]
                last = max((f + c.size for f, c in self._samples[-4:]), default=0)
                if paused or last >= end_index:
                    break
                # a device that streams only what it recorded: done when quiet, back at zero
                if (last > off[1] and self.clock() - self._last_samples_at > quiet_s
                        and self._back_at_zero()):
                    break
            if self.clock() > deadline:
                what = ("no ON event" if on is None else "no OFF event" if off is None else
                        "the release samples did not arrive")
                raise LiveFailure("link", f"the device did not report the actuation in time ({what} within "
                                  f"{wait_s:.3g} s of START)")
            self._pump(0.05)
        on_index = on[1]
        lo = on_index - PRE_SAMPLES
        hi = end_index
        parts_i, parts_c = [], []
        for first, codes in self._samples:
            if first + codes.size <= lo or first >= hi:
                continue
            ii = first + np.arange(codes.size, dtype=np.int64)
            keep = (ii >= lo) & (ii < hi)
            parts_i.append(ii[keep])
            parts_c.append(codes[keep])
        if not parts_i:
            raise LiveFailure("link", "no samples came for the actuation")
        index = np.concatenate(parts_i)
        code = np.concatenate(parts_c)
        order = np.argsort(index, kind="stable")
        index, code = index[order], code[order]
        uniq = np.concatenate([[True], np.diff(index) > 0])
        index, code = index[uniq], code[uniq]
        events = [CaptureEvent(i, k, v) for a, i, k, v in self._events
                  if lo <= i < hi and k in (EventKind.ON, EventKind.PEAK_END, EventKind.OFF, EventKind.SWITCH)
                  and (k != EventKind.ON or i == on_index)]
        apc, zero = self._scaling()
        cap = Capture.from_codes(code, index=index, events=events, source="live", sample_rate_hz=fs,
                                 adc_bits=self._info.adc_bits, amps_per_code=apc, zero_code=zero,
                                 sense_position=self.drive.board.sense.position,
                                 hold_frequency_hz=self._frequency)
        # drop what is done with, keep the tail (it may hold the next actuation's start)
        self._samples = [(f, c) for f, c in self._samples if f + c.size > hi]
        self._events = [e for e in self._events if e[1] >= hi or e[0] > off[0]]
        j = judge_actuation(cap, hold_frequency=self._frequency, use_switch=res.detection == "switch",
                            release_bump_expected=self._bump_expected, ripple_a=self._ripple,
                            pull_in_current=self.drive.pull_in.current,
                            dropout_current=self.drive.release.current)
        act = LiveActuation(number=len(res.actuations) + 1, repeat=repeat, step=step,
                            duty_requested=float(duty), duty=float(in_force), hold_time_s=hold_in_force,
                            on_index=int(on_index), judgement=j)
        res.actuations.append(act)
        self._safety(act)
        if self.progress is not None:
            verdict = "no seat" if not j.seated else ("dropped out" if j.dropped else "held")
            self._expected_total = max(self._expected_total, len(res.actuations))
            self.progress(len(res.actuations), self._expected_total,
                          f"repeat {repeat}: duty {act.duty:.4f} {verdict}" if repeat else
                          f"design duty {act.duty:.4f}: {verdict}")
        return act

    def _back_at_zero(self) -> bool:
        """The newest samples read (about) no current."""
        if not self._samples:
            return False
        apc, zero = self._scaling()
        tail = self._samples[-1][1]
        return bool(tail.size) and float(np.median(tail[-16:])) - zero <= max(3.0, 0.02 * self.result.open_load_a / apc)

    def _safety(self, act: LiveActuation) -> None:
        j = act.judgement
        res = self.result
        if j.peak_current_a < res.open_load_a:
            raise LiveFailure("open_coil", f"open coil: actuation {act.number} reached only "
                              f"{j.peak_current_a * 1e3:.3g} mA during the peak, below the design's open-load "
                              f"threshold {res.open_load_a * 1e3:.4g} mA (open coil, a loose wire, or no "
                              "supply); the device was stopped")
        tick = 1.0 / self.drive.board.tick.rate
        fs = float(self._info.sample_rate_hz)
        if (j.peak_duration_s is not None
                and j.peak_duration_s > self.design.pull_in.peak_time_s + tick + PEAK_SLACK_SAMPLES / fs):
            raise LiveFailure("peak_time", f"actuation {act.number} ran a peak of {j.peak_duration_s * 1e3:.4g} ms, "
                              f"longer than the design's {self.design.pull_in.peak_time_s * 1e3:.4g} ms "
                              "(+1 tick): the device was stopped")

    def _one(self, duty: float, repeat: int, step: str) -> LiveActuation:
        """An actuation, redone (twice at most) when samples went missing inside it."""
        for attempt in range(3):
            act = self._actuate(duty, repeat, step)
            if act.judgement.samples_missing == 0:
                break
            self.result.notes.append(f"actuation {act.number}: {act.judgement.samples_missing} samples lost "
                                     "on the link" + ("; repeated" if attempt < 2 else ""))
        else:
            raise LiveFailure("link", "samples went missing in three actuations in a row: the link "
                              "loses data (lower the sample rate or raise the baud rate)")
        if not act.judgement.seated:
            hint = ("" if self.drive.armature is not None else
                    " (the drive file has no [armature] section: a coildrive emulate device built from it "
                    "has no moving armature, so there is nothing to drop out)")
            raise LiveFailure("stuck", f"stuck armature: actuation {act.number} (duty {act.duty:.4f}) did not "
                              f"seat -- {act.judgement.evidence}; the device was stopped{hint}")
        return act

    # ------------------------------------------------------------------ the search
    def _search(self, repeat: int, d0: float) -> RepeatResult:
        o = self.options
        step = o.coarse_step * d0
        floor = self.result.floor_duty
        held, dropped = d0, None
        d = d0 - step
        count = 0
        while dropped is None:
            d = max(d, floor)
            act = self._one(d, repeat, "coarse")
            count += 1
            if act.judgement.dropped:
                dropped = act.duty
            else:
                held = act.duty
                if d <= floor + 1e-12:
                    raise LiveFailure("no_dropout", f"no drop-out down to duty {act.duty:.4f} "
                                      f"({o.floor:g} x the design duty): the armature stays seated -- stuck "
                                      "closed, latching (residual magnetism), or the drop-out signature does "
                                      "not show on this board; the device was stopped")
                d -= step
        quantum = max(self.result.resolution_duty, 1.0 / 65535)
        while held - dropped > quantum:
            mid = 0.5 * (held + dropped)
            act = self._one(mid, repeat, "bisect")
            count += 1
            if act.duty >= held or act.duty <= dropped:
                break  # the device cannot set a duty in between: its own resolution
            if act.judgement.dropped:
                dropped = act.duty
            else:
                held = act.duty
        estimate = 0.5 * (held + dropped)
        eq = float(hold_figures(self.drive, self.result.point, estimate, self._frequency).force_a[0])
        measured = [a for a in self.result.actuations if a.repeat == repeat and not a.judgement.dropped
                    and a.duty == held]
        got = measured[-1].judgement.settled_hold_a if measured else None
        if got is not None:
            hf = hold_figures(self.drive, self.result.point, [held, estimate], self._frequency)
            current = got * float(hf.force_a[1] / hf.mean_a[0])
            basis = (f"measured settled hold current at duty {held:.4f} ({got:.4g} A, "
                     f"{measured[-1].judgement.settled_how}), times the model's force/mean ratio to the drop-out duty")
        else:
            why = measured[-1].judgement.settled_how if measured else "no held actuation in this search"
            current, basis = eq, f"the model's force current at the drop-out duty (no measured hold current: {why})"
        return RepeatResult(number=repeat, held_duty=float(held), dropped_duty=float(dropped),
                            dropout_duty=float(estimate), dropout_current_a=float(current),
                            equivalent_current_a=eq, current_basis=basis, actuations=count)

    def _model_at_bench(self) -> None:
        """The bench point from the options and the device's events so far, and the model's
        drop-out current (A) and duty there."""
        res, o = self.result, self.options
        res.point = bench_point(self.drive, o.supply, o.coil_temp, self._supply_codes or None,
                                self._info.adc_bits, self._temperatures or None)
        res.model_dropout_current_a = model_stay_current(self.drive, res.point)
        res.model_dropout_duty = model_dropout_duty(self.drive, res.point, self._frequency)

    def run(self) -> LiveResult:
        """Run the procedure (see the module docstring); STOP on every exit."""
        from ..bench.link import LinkError

        res = self.result
        des = self.design
        o = self.options
        self._t0 = self.clock()
        self._q = self.link.subscribe()
        self._bump_expected = False
        try:
            try:
                self._setup()
                self._model_at_bench()
                d0 = float(des.hold.duty)
                res.floor_duty = o.floor * d0
                res.resolution_duty = max(o.resolution * d0, 1.0 / des.timer.period_ticks)
                auto = default_hold_time(self.drive, res.point, self._frequency, [res.floor_duty, d0])
                res.hold_time_s = o.hold_time if o.hold_time > 0 else auto
                if res.hold_time_s < auto:
                    res.notes.append(f"the hold ({res.hold_time_s * 1e3:.4g} ms) is shorter than the automatic "
                                     f"{auto * 1e3:.4g} ms ({HOLD_SETTLE_TAUS:g} time constants): near the "
                                     "threshold the armature may not lift within it, so the drop-out duty comes "
                                     "out low" + (" (the signature needs the gap to open visibly)"
                                                  if res.detection == "signature" else ""))
                hf = hold_figures(self.drive, res.point, d0, self._frequency)
                self._ripple = float(hf.ripple_a[0])
                coarse = max(1, math.ceil((d0 - res.model_dropout_duty) / (o.coarse_step * d0))) \
                    if math.isfinite(res.model_dropout_duty) else 3
                bisect = max(0, math.ceil(math.log2(o.coarse_step / o.resolution)))
                self._expected_total = 1 + o.repeats * (coarse + bisect)
                first = self._one(d0, 0, "design duty")
                if first.judgement.dropped:
                    raise LiveFailure("drops_at_design", f"the armature drops out already at the design duty "
                                      f"{first.duty:.4f} ({first.judgement.evidence}): the hold is too weak for "
                                      "this bench -- check the coil, the supply and the mechanics before raising "
                                      "hold.current; the device was stopped")
                self._bump_expected = first.judgement.release_bump_a is not None
                if (o.supply is None and self._supply_codes) or (o.coil_temp is None and self._temperatures):
                    self._model_at_bench()  # again, with the device's events of the first actuation
                if res.detection == "signature" and not self._bump_expected:
                    res.notes.append("the design-duty actuation shows no release bump: drop-out is judged from "
                                     "the hold current's rise alone")
                for k in range(1, o.repeats + 1):
                    res.repeats.append(self._search(k, d0))
                top = float(res.currents().max())
                res.recommendation = recommend(self.drive, res.point, top, o.margin)
            except LiveFailure as f:
                res.failure = (f.code, f.message)
            except LinkError as err:
                res.failure = ("link", f"the bench link failed: {err}")
            except KeyboardInterrupt:
                res.failure = ("interrupted", "interrupted (Ctrl-C)")
        finally:
            self._stop()
            try:
                st = self.link.stats()
                res.link = {k: getattr(st, k) for k in ("elapsed_s", "bytes", "bytes_per_s", "frames", "samples",
                                                          "crc_errors", "malformed", "lost_frames",
                                                          "samples_missing", "actuations", "error")
                            if hasattr(st, k)}
            except Exception as err:  # noqa: BLE001 -- statistics are a courtesy after a failure
                res.link = {"error": str(err)}
            res.seconds = self.clock() - self._t0
        if res.point is None:
            res.point = bench_point(self.drive, o.supply, o.coil_temp)
        return res
