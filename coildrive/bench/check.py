"""Check a capture against its design: measured figures against the model's, pass or fail.

The prediction is made at the capture's operating point -- bus voltage and coil
temperature as the command line gives them, else as the capture says (header metadata,
or the device's SUPPLY events read through the board's supply divider), else the
drive's nominal supply and the coil's reference temperature clipped into the ambient
range -- with the design's peak time, hold duty and hold frequency. The coil is taken
to be at that temperature throughout (a bench actuation, not the design's settled hot
coil). Closed-form figures come from :func:`coildrive.design.evaluate.evaluate`; with an
``[armature]`` the times to a current come from the model waveform
(:func:`coildrive.model.waveform.actuation`) and the seat from the armature model. A PWM
hold at a fixed or supply-table duty has its mean from the model waveform over the stretch
the analysis measures (the last half of the hold, whole periods): the steady state where
the hold has settled by then, and what the window really holds where it has not (a short
hold after a high peak); a closed loop's is its settled mean (the loop's own PI pulls the
current onto the set-point).

Each figure passes when every actuation's value lies inside ``predicted x (1 +/- tol)``
widened to at least two resolution steps of the measurement (two sample periods, or
the time one ADC code takes, for times; two codes for currents). Default tolerances
(:class:`Tolerances`) are our defaults, in line with common practice for an
end-of-line test of a coil driver; every one can be overridden. Each row also says how
far its worst value lies from the nearer band edge, in percent of the band's width
(``margin_pct``: 50 % at the prediction, 0 % on an edge, negative outside).

An actuation that the capture cut short (it ended, or began, during it: see
:attr:`~coildrive.bench.analysis.ActuationResult.partial`) is reported and left out of
the verdict: a stopped capture must never fail a good device. A capture whose every
actuation is cut short has nothing to check (:class:`~coildrive.errors.InputError`).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from ..config import Board, Drive
from ..design.corners import nominal_point
from ..errors import InputError
from ..jsondoc import json_ready
from ..model.topology import topology_of
from .analysis import Analysis, analyse
from .capture_file import Capture
from .messages import EventKind, FaultCode

PASS, FAIL, NA, INFO = "pass", "FAIL", "n/a", "info"


@dataclass(frozen=True)
class Tolerances:
    """Relative tolerances on each checked figure (0.15 = +/-15 %). Our defaults
    (common practice for end-of-line tests of coil drivers; not from a standard):

    * ``pull_in_time`` 15 %: covers the coil's R and L tolerance at one temperature;
    * ``seated_time`` 20 %: mechanics (friction, spring) vary more than the coil;
    * ``peak_duration`` 5 %: firmware timing, set by the scheduler tick;
    * ``hold_mean`` 10 %: the hold current the armature needs has margin in it;
    * ``hold_ripple`` 30 %: ripple goes as 1/L, and L varies most;
    * ``release_time`` 20 %: the freewheel path's parts vary more than the coil (a
      latching coil's time to zero after each pulse too);
    * ``pulse_current`` 10 %: a latching coil's current at the end of each pulse (like the
      hold mean: the pulse's force has margin in it).
    """

    pull_in_time: float = 0.15
    seated_time: float = 0.20
    peak_duration: float = 0.05
    hold_mean: float = 0.10
    hold_ripple: float = 0.30
    release_time: float = 0.20
    pulse_current: float = 0.10

    def __post_init__(self) -> None:
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and 0 <= value < 10):
                raise InputError(f"--tol-{f.name.replace('_', '-')}", "",
                                 f"{value!r} is not a fraction 0..10 (0.15 means 15 %)")


@dataclass(frozen=True)
class OperatingPoint:
    """Bus voltage V and coil temperature degC of the prediction, and where each came from."""

    supply_v: float
    coil_temp_c: float
    supply_from: str
    coil_temp_from: str


@dataclass(frozen=True)
class CheckItem:
    """One row of the check. ``measured`` is the actuation value farthest from the
    prediction; ``low``..``high`` the accepted band; ``status`` pass / FAIL / n/a / info;
    ``values`` per checked actuation (numbers in ``actuations``); ``margin_pct`` the
    distance of ``measured`` to the nearer band edge in percent of the band's width
    (50 at the band's middle, 0 on an edge, negative outside; ``None`` without a band or
    a value), ``margins_pct`` the same per actuation."""

    name: str
    status: str
    measured: float | None
    predicted: float | None
    low: float | None
    high: float | None
    unit: str
    detail: str
    values: tuple[float | None, ...] = ()
    actuations: tuple[int, ...] = ()
    margin_pct: float | None = None
    margins_pct: tuple[float | None, ...] = ()

    @property
    def failed(self) -> bool:
        return self.status == FAIL


@dataclass(frozen=True)
class CheckReport:
    """The result of :func:`check_capture`: rows, the analysis and the prediction.

    ``prediction`` maps figure names to predicted values (SI); ``waveform`` is the model
    actuation at the operating point (for the plot: no output recomputes physics).
    """

    items: tuple[CheckItem, ...]
    analysis: Analysis
    point: OperatingPoint
    tolerances: Tolerances
    prediction: dict
    drive_name: str
    board_name: str
    capture_source: str
    notes: tuple[str, ...] = ()
    cautions: tuple[str, ...] = ()
    waveform: object = field(default=None, repr=False)

    @property
    def ok(self) -> bool:
        """True when no row failed."""
        return not any(i.failed for i in self.items)

    @property
    def failed(self) -> list[CheckItem]:
        return [i for i in self.items if i.failed]

    def to_dict(self) -> dict:
        """Plain JSON-ready dict (the ``check --json`` document)."""
        return json_ready({
            "ok": self.ok, "capture": self.capture_source, "drive": self.drive_name,
            "board": self.board_name, "operating_point": dataclasses.asdict(self.point),
            "tolerances": dataclasses.asdict(self.tolerances), "prediction": dict(self.prediction),
            "items": [dataclasses.asdict(i) for i in self.items],
            "analysis": self.analysis.to_dict(), "notes": list(self.notes),
            "cautions": list(self.cautions),
        })


BENCH_CAUTIONS = (
    "Bench work on coil drivers: turning a coil off makes a voltage spike far above the supply "
    "-- keep the freewheel path or clamp fitted, and never unplug a coil or a probe while current flows.",
    "A coil left on at peak current heats fast: limit the peak phase in the firmware, and let the "
    "coil cool before measuring its resistance again.",
    "Measure with probes and grounds rated for the switch voltage; mains-connected or safety-relevant "
    "equipment follows local codes and licensed practice.",
)


# --------------------------------------------------------------------------- inputs
def board_amps_per_code(board: Board) -> float:
    """Current in A of one code of the board's current-sense ADC channel: one ADC step
    in volts at the pin (``reference / 2**bits``) over the sense transresistance in V/A."""
    return board.adc.reference / 2**board.adc.bits / (board.sense.resistance * board.sense.gain)


def prepare_capture(capture: Capture, board: Board) -> Capture:
    """Fill what the capture does not say (sample rate, ADC bits, A per code, sense
    position, board name) from the board file; what the capture says is kept."""
    meta = capture.meta
    changes: dict = {}
    if meta.sample_rate_hz is None:
        changes["sample_rate_hz"] = float(board.adc.sample_rate)
    if meta.adc_bits is None:
        changes["adc_bits"] = board.adc.bits
    if meta.amps_per_code is None:
        changes["amps_per_code"] = board_amps_per_code(board)
    if meta.sense_position is None:
        changes["sense_position"] = board.sense.position
    if meta.board is None:
        changes["board"] = board.name
    return capture.with_meta(**changes) if changes else capture


def supply_from_codes(drive: Drive, codes, adc_bits: int | None = None) -> float:
    """Bus voltage V from SUPPLY event codes: the median code at ``adc_bits`` (default:
    the board's ADC bits), read as the middle of its ADC step (a converter's code ``k``
    stands for inputs from ``k`` to ``k + 1`` steps: the same reading as ``coildrive
    capture`` and the current samples), against the ADC reference, times the board's
    ``supply_sense.divider``."""
    adc = drive.board.adc
    bits = adc_bits or adc.bits
    return (float(np.median(codes)) + 0.5) * adc.reference / 2**bits * drive.board.supply_sense.divider


def operating_point(drive: Drive, capture: Capture, supply: float | None = None,
                    coil_temp: float | None = None) -> OperatingPoint:
    """Where to predict (see the module docstring for the order of sources)."""
    nom = nominal_point(drive)
    meta = capture.meta
    if supply is not None:
        v, v_from = float(supply), "--supply"
    elif meta.supply_v is not None:
        v, v_from = float(meta.supply_v), ("scope supply column" if meta.link == "scope" else "capture header")
    else:
        codes = [e.value for e in capture.events if e.kind == EventKind.SUPPLY]
        if codes and drive.board.supply_sense is not None:   # (no divider: nothing to read)
            v = supply_from_codes(drive, codes, meta.adc_bits)
            v_from = f"capture SUPPLY events ({len(codes)}, through the board's divider)"
        else:
            v, v_from = float(nom.supply[0]), "drive file: supply.nominal"
    if coil_temp is not None:
        t, t_from = float(coil_temp), "--coil-temp"
    elif meta.coil_temp_c is not None:
        t, t_from = float(meta.coil_temp_c), "capture header"
    else:
        t, t_from = float(nom.ambient[0]), "drive file: coil.reference_temp within the ambient range"
    if not (math.isfinite(v) and v > 0):
        raise InputError("--supply" if v_from == "--supply" else capture.source, "supply",
                         f"{v!r} V is not a bus voltage above zero")
    if not (math.isfinite(t) and t > -273.15):
        raise InputError("--coil-temp" if t_from == "--coil-temp" else capture.source, "coil_temp",
                         f"{t!r} degC is not a temperature")
    return OperatingPoint(v, t, v_from, t_from)


# --------------------------------------------------------------------------- prediction
def _waveform_crossing(w, level: float, start: float, rising: bool) -> float | None:
    t, i = np.asarray(w.time), np.asarray(w.current)
    k0 = int(np.searchsorted(t, start))
    t, i = t[k0:], i[k0:]
    hit = i >= level if rising else i <= level
    if not hit.any():
        return None
    k = int(np.argmax(hit))
    if k == 0:
        return float(t[0] - start)
    frac = (level - i[k - 1]) / (i[k] - i[k - 1]) if i[k] != i[k - 1] else 0.0
    return float(t[k - 1] + frac * (t[k] - t[k - 1]) - start)


def _waveform_spread_ripple(w, frequency: float) -> float:
    """The ripple (A) the capture's analysis reads off ``w``'s last whole hold period:
    ``sqrt(12)`` times the standard deviation of the current over it, sampled evenly in
    time (:func:`coildrive.bench.analysis` takes a triangle's peak-to-peak from its spread).
    With an eddy term the terminal current steps at each edge, so the waveform is no
    triangle and its peak-to-peak is not what that statistic gives: the like figure is
    the same statistic of the model."""
    t_off = w.events["off"]
    period = 1.0 / frequency
    grid = t_off - period + (np.arange(2000) + 0.5) * period / 2000
    return float(np.sqrt(12.0) * np.std(np.interp(grid, np.asarray(w.time), np.asarray(w.current))))


def _waveform_hold_mean(w, frequency: float) -> float | None:
    """The hold's mean current (A) over the stretch the capture's analysis measures it on
    (:func:`coildrive.bench.analysis` ``_hold``): the last half of ``w``'s hold, cut to
    whole PWM periods ending at the switch-off (the half itself where it holds none),
    sampled evenly in time. Where the hold has settled this is its periodic steady state's
    mean; where it has not (a short hold after a peak that ended far above it: a boosted
    peak's threshold, a high pull-in current) it is what the capture's window holds, which
    the steady state is not. ``None`` without a hold."""
    t_on, t_off = w.events.get("hold"), w.events.get("off")
    if t_on is None or t_off is None or not t_off > t_on:
        return None
    period = 1.0 / frequency
    mid = 0.5 * (t_on + t_off)
    whole = math.floor((t_off - mid) / period)
    start = t_off - whole * period if whole >= 1 else mid
    grid = start + (np.arange(4000) + 0.5) * (t_off - start) / 4000
    return float(np.mean(np.interp(grid, np.asarray(w.time), np.asarray(w.current))))


def _bench_drive(drive: Drive) -> Drive:
    """The drive as a bench actuation sees it: the coil at the point's temperature (no
    self-heating), a boost at its nominal parts."""
    cold = dataclasses.replace(drive, thermal=dataclasses.replace(drive.thermal, resistance=0.0))
    if drive.supply.boosted:   # nominal parts: the boost at its nominal too
        cold = dataclasses.replace(cold, supply=dataclasses.replace(
            drive.supply, boost_tolerance=0.0, boost_capacitance_tolerance=0.0))
    return cold


def _current_mode_point(design, point: OperatingPoint, peak: float, mechanics: bool = True):
    """A current-mode hold at ``point``: the design's figures there
    (:func:`coildrive.design.hold_current.evaluate_current`, its thresholds) as
    ``(PointResults, CurrentModeSteadyState)`` of one point (``mechanics``: run an
    ``[armature]``'s model; the hold's switching alone does not need it)."""
    from ..design.hold_current import evaluate_current

    return evaluate_current(_bench_drive(design.drive), design.hold.thresholds,
                            np.array([point.supply_v]), np.array([point.coil_temp_c]), 1.0, 1.0, peak,
                            mechanics=mechanics)


def hold_setting(design, point: OperatingPoint) -> tuple[float, float, float]:
    """``(duty, frequency Hz, peak s)`` of the hold the firmware runs at ``point``: a PWM
    hold's as its timer makes it; a current-mode hold's switching frequency and duty where
    its thresholds settle there (unregulated: the switch stays on, duty 1, and the
    design's frequency stands in for the analysis's period)."""
    from ..design import firmware_setting

    duty, peak = firmware_setting(design, point.supply_v, point.coil_temp_c)
    if design.hold.current_mode is None:
        return duty, design.hold.frequency_hz, peak
    _, cm = _current_mode_point(design, point, peak, mechanics=False)
    if not bool(cm.regulated[0]):
        return 1.0, design.hold.frequency_hz, peak
    return float(cm.duty[0]), float(cm.frequency[0]), peak


def predict(design, point: OperatingPoint, hold_time: float) -> tuple[dict, object]:
    """Predicted figures (SI) at ``point`` with the design's setting, and the model waveform
    of one actuation with ``hold_time`` s of hold. A current-mode hold is predicted from
    its thresholds (its figures at the point, and its waveform:
    :func:`coildrive.design.hold_current.current_mode_actuation`)."""
    from ..design.evaluate import evaluate
    from ..model.waveform import actuation

    drive = design.drive
    cold = _bench_drive(drive)
    duty, freq, peak = hold_setting(design, point)
    label = f"model at {point.supply_v:.4g} V, {point.coil_temp_c:.4g} degC"
    if design.hold.current_mode is not None:
        from ..design.hold_current import current_mode_actuation

        res, _ = _current_mode_point(design, point, peak)
        w = current_mode_actuation(cold, design.hold.thresholds, point.supply_v, point.coil_temp_c,
                                   peak, hold_time, label=label)
    else:
        res = evaluate(cold, np.array([point.supply_v]), np.array([point.coil_temp_c]), 1.0, 1.0,
                       duty, freq, peak)
        w = actuation(cold, point.supply_v, point.coil_temp_c, peak, duty, freq, hold_time, label=label)
    pred = {
        "pull_in_time_s": float(res.pull_in_time[0]),
        "peak_duration_s": float(peak),
        "hold_mean_a": float(res.hold.mean[0]),
        "hold_ripple_a": float(res.hold.ripple[0]),
        "release_time_s": float(res.release_time[0]),
        "peak_switch_voltage_v": float(res.peak_switch_voltage[0]),
        "hold_duty": float(duty),
        "hold_frequency_hz": float(freq),
        "pull_in_current_a": drive.pull_in.current,
        "dropout_current_a": drive.release.current,
        "seated_time_s": None,
    }
    if design.hold.current_mode is not None:
        # after the peak a current-mode switch turns straight off (the current is above
        # its upper threshold): the waveform's first switch-off is the peak's end
        pred["first_off_s"] = float(peak)
    if drive.armature is not None or drive.coil.eddy_resistance:
        # the armature model's times mean other moments (at rest on a stop), an eddy term's
        # are the flux's (the magnetising current): the times the sensed current takes to
        # a current are read off the model waveform instead (its terminal current)
        pred["pull_in_time_s"] = _waveform_crossing(w, drive.pull_in.current, 0.0, True)
        pred["release_time_s"] = _waveform_crossing(w, drive.release.current, w.events["off"], False)
    if drive.coil.eddy_resistance:
        pred["hold_ripple_a"] = _waveform_spread_ripple(w, freq)
    if design.hold.current_mode is None and drive.hold.regulation != "closed_loop":
        # the capture's mean is over the hold's last half: where the current has not
        # settled there yet, the model's mean over that stretch, not its steady state (a
        # fixed duty's; a closed loop regulates to its set-point faster than the model's
        # waveform at the settled duty would decay there, so it keeps the settled mean)
        window = _waveform_hold_mean(w, freq)
        if window is not None:
            pred["hold_mean_a"] = window
    if drive.armature is not None:   # the seat from the dip
        pin = getattr(getattr(res, "armature", None), "pull_in", None)
        dip = getattr(pin, "dip_time", None)
        seat = np.asarray(dip if dip is not None else res.pull_in_time, float).ravel()
        pred["seated_time_s"] = float(seat[0]) if np.isfinite(seat[0]) else None
    return pred, w


# --------------------------------------------------------------------------- the check
def edge_margin_pct(value: float | None, low: float | None, high: float | None) -> float | None:
    """Distance of ``value`` to the nearer edge of ``low..high``, in percent of the band's
    width: 50 in the middle, 0 on an edge, negative outside (``None``: no band or value).

    >>> edge_margin_pct(1.0, 0.9, 1.1), edge_margin_pct(1.12, 0.9, 1.1)
    (50.0, -10.0)
    """
    if value is None or low is None or high is None or not high > low:
        return None
    return round(100.0 * min(value - low, high - value) / (high - low), 6)


def _row(name: str, unit: str, values: list, predicted: float | None, tol: float, floor: float,
         na_reason: str | None = None, missing_fails: bool = True, extra: str = "",
         numbers: list[int] | None = None) -> CheckItem:
    numbers = list(numbers) if numbers is not None else list(range(1, len(values) + 1))
    nums = tuple(numbers)
    if na_reason is not None:
        return CheckItem(name, NA, None, predicted, None, None, unit, na_reason, tuple(values), nums)
    if predicted is None or not math.isfinite(predicted):
        return CheckItem(name, INFO, _first(values), None, None, None, unit,
                         "no prediction from the model" + extra, tuple(values), nums)
    half = max(abs(predicted) * tol, floor)
    low, high = predicted - half, predicted + half
    if not values:
        return CheckItem(name, FAIL, None, predicted, low, high, unit, "no actuation to measure",
                         ())
    missing = [k for k, v in zip(numbers, values) if v is None]
    present = [v for v in values if v is not None]
    worst = max(present, key=lambda v: abs(v - predicted)) if present else None
    bad = [k for k, v in zip(numbers, values) if v is not None and not low <= v <= high]
    if missing and missing_fails:
        status, detail = FAIL, f"not measured in actuation(s) {_list(missing)}"
    elif bad:
        status, detail = FAIL, f"outside the band in actuation(s) {_list(bad)}"
    else:
        status, detail = PASS, f"all {len(present)} within +/-{tol:.0%}" + (
            " (band widened to the resolution)" if half > abs(predicted) * tol else "")
    return CheckItem(name, status, worst, predicted, low, high, unit, detail + extra, tuple(values), nums,
                     edge_margin_pct(worst, low, high),
                     tuple(edge_margin_pct(v, low, high) for v in values))


def _switch_voltage_row(peak: float, predicted: float, rating: float,
                        how: str = "highest sampled switch-node voltage") -> CheckItem:
    """The switch voltage a scope's switch-node probe gives (``how``, in words) against the
    switch's rating: a one-sided band (``margin_pct`` is the headroom below the rating in
    percent of it)."""
    ok = peak <= rating
    detail = (f"{how}, rating {rating:.4g} V"
              + ("" if ok else ": above the switch's rating -- fit a stronger clamp or a higher-rated switch")
              + "; a spike shorter than one sample can be higher")
    margin = round(100.0 * (rating - peak) / rating, 6) if rating > 0 else None
    return CheckItem("switch_voltage", PASS if ok else FAIL, peak,
                     predicted if math.isfinite(predicted) else None, 0.0, rating, "V", detail,
                     (peak,), (), margin, (margin,))


def _first(values):
    present = [v for v in values if v is not None]
    return present[0] if present else None


def _list(numbers: list[int]) -> str:
    return ", ".join(map(str, numbers[:8])) + (" ..." if len(numbers) > 8 else "")


def _fault_row(capture: Capture, sample_rate: float, expected: tuple) -> CheckItem | None:
    """The ``faults`` row: every FAULT event of the capture (code name and time); it fails
    on a code not in ``expected``. ``None`` when the firmware reported none."""
    faults = [e for e in capture.events if e.kind == EventKind.FAULT]
    if not faults:
        return None

    def name(code: int) -> str:
        try:
            return FaultCode(code).name
        except ValueError:
            return f"unknown code {code}"

    unexpected = [e for e in faults if e.value not in {int(c) for c in expected}]
    listed = ", ".join(f"{name(e.value)} at {e.index / sample_rate * 1e3:.4g} ms" for e in faults)
    return CheckItem("faults", FAIL if unexpected else INFO, float(len(faults)), 0.0, None, None, "",
                     f"{len(faults)} reported by the firmware: {listed}"
                     + (f"; {len(unexpected)} unexpected" if unexpected else " (all expected)"))


def check_capture(capture: Capture, design, tolerances: Tolerances | None = None,
                  supply: float | None = None, coil_temp: float | None = None,
                  use_events: bool = True, expected_faults: tuple = ()) -> CheckReport:
    """Compare every actuation of ``capture`` with ``design`` (a :class:`~coildrive.design.Design`).

    Parameters
    ----------
    capture : a capture; what it does not say about its sampling comes from the design's board.
    design : the design the firmware runs.
    tolerances : :class:`Tolerances` (default: ours).
    supply, coil_temp : operating point in V and degC (default: see the module docstring).
    use_events : take the phases from event records when the capture has them.
    expected_faults : :class:`~coildrive.bench.messages.FaultCode` values a test provokes on
        purpose; FAULT events of other codes fail the check.
    """
    tol = tolerances or Tolerances()
    drive = design.drive
    board = drive.board
    capture = prepare_capture(capture, board)
    point = operating_point(drive, capture, supply, coil_temp)
    meta = capture.meta
    notes: list[str] = []
    if meta.link == "scope" and isinstance(meta.extra, dict):
        notes.extend(str(x) for x in meta.extra.get("notes", []))
    if meta.board is not None and meta.board != board.name:
        notes.append(f"the capture says board {meta.board!r}, the drive uses {board.name!r}")
    from ..design import firmware_setting

    duty_fw, peak_fw = firmware_setting(design, point.supply_v, point.coil_temp_c)  # what its firmware runs there
    for key, mine in (("peak_time_s", peak_fw), ("hold_duty", duty_fw),
                      ("hold_frequency_hz", design.hold.frequency_hz)):
        theirs = getattr(meta, key)
        if theirs is not None and abs(theirs - mine) > 1e-6 * max(abs(mine), 1e-12):
            notes.append(f"the capture ran {key} = {theirs:.6g}, the design has {mine:.6g}")
    f_hold = hold_setting(design, point)[1]   # a current-mode hold's switching frequency there
    a = analyse(capture, pull_in_current=drive.pull_in.current,
                dropout_current=drive.release.current, hold_frequency=f_hold,
                use_events=use_events)
    cut_short = [x for x in a.actuations if x.partial is not None]
    acts = [x for x in a.actuations if x.partial is None]
    if cut_short and not acts:
        raise InputError(capture.source, "", f"holds no complete actuation: {cut_short[-1].partial_text()} "
                         "(nothing to check; capture at least one whole actuation, from idle to idle)")
    numbers = [x.number for x in acts]
    notes.extend(f"{x.partial_text()}: it is reported but left out of the check" for x in cut_short)
    holds = [x.hold_duration_s for x in acts if x.hold_duration_s]
    hold_time = float(np.median(holds)) if holds else max(2 * design.pull_in.peak_time_s, 20 / f_hold)
    pred, w = predict(design, point, hold_time)
    fs, apc = a.sample_rate_hz, a.amps_per_code
    period = 1.0 / fs
    items: list[CheckItem] = []

    n = len(acts)
    left_out = "".join(f"; left out: {x.partial_text()}" for x in cut_short)
    items.append(CheckItem("actuations", PASS if n else FAIL, float(n), None, None, None, "",
                           f"{n} found" + (f" from {acts[0].phases_from}" if n else
                                           ": no current rose (open coil?) or no actuation captured")
                           + left_out, actuations=tuple(numbers)))
    missing = sum(x.samples_missing for x in acts)
    link_detail = (f"{missing} missing in actuations; {capture.lost_frames} frames lost, "
                   f"{capture.crc_errors} CRC errors") if meta.link != "scope" else (
        f"{missing} missing in actuations (gaps in the scope record)")
    items.append(CheckItem("link", FAIL if missing else PASS, float(missing), 0.0, 0.0, 0.0, "samples",
                           link_detail))
    faults = _fault_row(capture, fs, expected_faults)
    if faults is not None:
        items.append(faults)
    if n:
        def res_floor(name: str) -> float:
            r = [getattr(x, name) for x in acts if getattr(x, name) is not None]
            return 2.0 * max([period] + r)

        items.append(_row("pull_in_time", "s", [x.pull_in_time_s for x in acts], pred["pull_in_time_s"],
                          tol.pull_in_time, res_floor("pull_in_resolution_s"),
                          extra=f" (to {drive.pull_in.current:.4g} A)", numbers=numbers))
        seated = [x.seated_time_s for x in acts]
        if drive.armature is not None:
            seat = pred["seated_time_s"]
            # after a boosted peak's threshold the hold's PWM carries the armature on: the
            # current falls from the threshold there, and the seat makes no dip to time
            in_hold = design.boost is not None and seat is not None and seat > pred["peak_duration_s"]
            items.append(_row("seated_time", "s", seated, seat, tol.seated_time,
                              2.0 * period, extra=" (bottom of the current dip)", numbers=numbers,
                              na_reason=f"the model seats the armature at {seat * 1e3:.4g} ms, in the hold after "
                              "the boosted peak's threshold, where the current falls under the PWM: no dip "
                              "to time" if in_hold else None))
        else:
            shown = [v for v in seated if v is not None]
            items.append(CheckItem("seated_time", INFO, _first(seated), None, None, None, "s",
                                   ("dip seen in " f"{len(shown)} of {n}" if shown else "no dip seen")
                                   + "; the drive has no [armature] model to predict it", tuple(seated),
                                   tuple(numbers)))
        from_waveform = acts[0].phases_from == "waveform"
        pk = pred.get("first_off_s", pred["peak_duration_s"] + (pred["hold_duty"] / f_hold if from_waveform
                                                                   else 0.0))
        tick = 1.0 / board.tick.rate
        items.append(_row("peak_duration", "s", [x.peak_duration_s for x in acts], pk, tol.peak_duration,
                          2.0 * period + tick,
                          extra=" (from the waveform: to the first switch-off, one hold on-time "
                                "after the peak)" if from_waveform else "", numbers=numbers))
        sense_switch = a.sense_position == "switch"
        switch_dcm = sense_switch and all(x.hold_discontinuous for x in acts)
        # an eddy term steps the terminal current at every switch edge: under the switch
        # the off-time's current (and so the mean and the ripple) cannot be read back
        switch_eddy = sense_switch and bool(drive.coil.eddy_resistance)
        eddy_na = ("sense under the switch with an eddy term: the current steps at each switch "
                   "edge and the off-time is not seen")
        items.append(_row("hold_mean", "A", [x.hold_mean_a for x in acts], pred["hold_mean_a"],
                          tol.hold_mean, 2.0 * apc,
                          na_reason=eddy_na if switch_eddy else
                          "sense under the switch in discontinuous conduction: the coil "
                          "current cannot be seen while the switch is off" if switch_dcm else None,
                          numbers=numbers))
        spp = fs / f_hold
        resolved = spp >= 10.0
        items.append(_row("hold_ripple", "A", [x.hold_ripple_a for x in acts], pred["hold_ripple_a"],
                          tol.hold_ripple, 2.0 * apc,
                          na_reason=eddy_na if switch_eddy else None if resolved else
                          f"{spp:.3g} samples per PWM period (< 10): the sample rate cannot resolve the ripple",
                          numbers=numbers))
        # timed from the OFF event: a voltage-mode hold's firmware (the reference driver)
        # opens the switch at its next conversion, up to one PWM period after the event
        # (a current-mode driver opens it in the tick that sends OFF)
        latency = 0.0 if from_waveform or design.hold.current_mode is not None else 1.0 / f_hold
        items.append(_row("release_time", "s", [x.release_time_s for x in acts], pred["release_time_s"],
                          tol.release_time, res_floor("release_resolution_s") + latency,
                          na_reason="sense under the switch: the release decay is invisible" if sense_switch else None,
                          extra=f" (to {drive.release.current:.4g} A)", numbers=numbers))
    extra = meta.extra if isinstance(meta.extra, dict) else {}
    node_peak = extra.get("switch_node_peak_v")
    node_low = extra.get("switch_node_lowest_v", math.nan)
    if n and isinstance(node_peak, (int, float)) and math.isfinite(node_peak):
        # where the switch sits says how the node's samples give the switch's voltage
        peak, how = topology_of(drive).switch_peak_from_node(
            point.supply_v, float(node_peak), float(node_low) if isinstance(node_low, (int, float)) else math.nan)
        if math.isfinite(peak):
            items.append(_switch_voltage_row(peak, pred["peak_switch_voltage_v"],
                                             board.switch.max_voltage, how))
    return CheckReport(items=tuple(items), analysis=a, point=point, tolerances=tol, prediction=pred,
                       drive_name=drive.name, board_name=board.name, capture_source=capture.source,
                       notes=tuple(notes + list(a.notes)), cautions=BENCH_CAUTIONS, waveform=w)

