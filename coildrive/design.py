"""The peak-and-hold design: from a :class:`~coildrive.config.Drive` to one Design result.

Decisions (each explained in docs/design-method.md):

* peak duration = worst-corner pull-in time x ``pull_in.margin``, rounded up to whole
  scheduler ticks plus one tick (a tick-based phase may start anywhere inside a tick);
* hold duty = the smallest duty whose steady-state mean current meets ``hold.current`` at
  every corner with the self-heating it causes, rounded up to whole compare counts;
* a supply-compensated duty table (compare value against supply-sense ADC code);
* release through the board's freewheel path, checked against the switch rating;
* the hold's average power in every freewheel element and in the switch at every corner
  (:mod:`coildrive.model.losses`), checked against the board's power ratings; with
  split decay the hold takes the slow path and the release the fast one.

The :class:`Design` holds plain data; the table, JSON, header and plot all read it and
none of them recomputes physics.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import asdict, dataclass, field

import numpy as np

from . import __version__
from .config import Drive
from .corners import CornerGrid, corner_grid, nominal_point
from .evaluate import PointResults, evaluate, required_duty
from .jsondoc import document_head, json_ready
from .model.circuit import loop, split_decay
from .model.losses import HoldLosses, hold_losses
from .model.waveform import actuation
from .model.pwm import duty_for_mean, pwm_steady_state
from .timer import TimerSetting, solve_timer

#: Below this the PWM whine is audible (common practice: the upper limit of hearing).
AUDIBLE_LIMIT_HZ = 20_000.0
#: Over-current threshold above the highest normal current (common practice).
OVER_CURRENT_FACTOR = 1.25
#: Open-load threshold as a fraction of the lowest hold current (common practice).
OPEN_LOAD_FACTOR = 0.5
#: Fewest compare steps per PWM period before the duty is called coarse (common practice).
MIN_DUTY_STEPS = 64
#: Fewest ADC codes for the hold current before the reading is called coarse (common practice).
MIN_HOLD_CODES = 10
#: Entries in the supply-compensated duty table.
DUTY_TABLE_ENTRIES = 16
UINT32_MAX = 2**32 - 1
#: Drop of the freewheel diode assumed for the split-decay saving of a clamp board that
#: gives none (common practice: a silicon rectifier at its working current).
ASSUMED_DIODE_DROP = 0.8
#: What the freewheel elements are called in tables and check details.
ELEMENT_NAMES = {"diode": "freewheel diode", "zener": "Zener", "resistor": "freewheel resistor",
                 "clamp": "clamp", "bypass": "bypass switch"}


@dataclass(frozen=True)
class Check:
    """One design check. ``severity`` is ``"error"`` (fails the design) or ``"warning"``."""

    name: str
    ok: bool
    detail: str
    severity: str = "error"


@dataclass(frozen=True)
class Corner:
    """Figures at one operating corner. SI units, temperatures in degC."""

    label: str
    supply_v: float
    ambient_c: float
    coil_temp_c: float
    resistance_ohm: float
    inductance_h: float
    pull_in_time_s: float
    peak_end_current_a: float
    hold_mean_current_a: float
    hold_ripple_a: float
    hold_rms_current_a: float
    hold_conduction: str
    coil_power_w: float
    release_time_s: float
    release_zero_time_s: float
    peak_switch_voltage_v: float
    release_energy_j: float
    armature: dict | None = None
    freewheel_power_w: float = math.nan
    switch_power_w: float = math.nan


#: Per-corner keys added with an ``[armature]`` (flattened into each JSON corner).
ARMATURE_CORNER_KEYS = (
    "seat_time_s", "impact_time_s", "dip_current_a", "dip_time_s", "dip_depth_a",
    "start_time_s", "bounces", "release_unlatch_time_s", "release_open_time_s",
    "start_current_a", "stay_current_a", "stroke_current_a", "hold_force_current_a",
    "hold_force_margin", "hold_lift_m", "armature_status", "release_status",
)


@dataclass(frozen=True)
class ArmatureResult:
    """The moving armature across the corners (``design --json`` key ``armature``).

    Fit: ``equivalent_gap_m`` (g0) and ``force_constant_h_m`` (K) of
    ``L(x) = K / (x + g0)``. Currents (A) the mechanics need, largest over the corners
    (the lowest inductance of the tolerance band): ``start_current_a`` (off the open
    stop), ``stroke_current_a`` (over the whole stroke, at gap ``stroke_current_gap_m``),
    ``stay_current_a`` (to stay seated; also the predicted drop-out). Margins are the
    file's (or derived) current over that need. Times in s, worst corner named.
    """

    inductance_open_h: float
    inductance_closed_h: float
    stroke_m: float
    equivalent_gap_m: float
    force_constant_h_m: float
    slope_open_h_m: float
    slope_closed_h_m: float
    current_margin: float
    derived: list[str]
    start_current_a: float
    stroke_current_a: float
    stroke_current_gap_m: float
    stay_current_a: float
    dropout_current_a: float
    pull_in_current_margin: float
    hold_current_margin: float
    seat_time_s: float
    seat_corner: str
    seat_time_min_s: float
    dip_current_a: float
    dip_time_s: float
    dip_current_min_a: float
    release_open_time_s: float
    release_corner: str
    hold_force_current_a: float
    hold_force_margin: float
    hold_force_corner: str
    hold_force_basis: str
    hottest_low_supply_corner: str
    hottest_low_supply_margin: float
    hold_lift_max_m: float
    seated_corners: int
    opened_corners: int
    corners: int


@dataclass(frozen=True)
class PullInResult:
    """Pull-in: worst-corner time to the pull-in current and the chosen peak duration."""

    current_a: float
    time_s: float
    worst_corner: str
    margin: float
    peak_time_s: float
    peak_ticks: int
    peak_end_current_max_a: float


@dataclass(frozen=True)
class HoldResult:
    """Hold: the duty as the timer makes it and the currents it gives across corners.

    Heat outside the coil (W, :mod:`coildrive.model.losses`): ``freewheel_power_w`` is
    the freewheel path's total at its worst corner, ``freewheel_elements_w`` each
    element's largest over the corners, ``switch_power_w`` conduction + switching
    estimate at the switch's worst corner; ``decay_path`` names the hold's freewheel
    path. ``split_decay_saving`` says what split decay would change (``None`` with a
    diode path or with split decay fitted); see docs/design-method.md.
    """

    mode: str
    current_a: float
    frequency_hz: float
    duty: float
    compare_ticks: int
    min_mean_current_a: float
    min_corner: str
    max_mean_current_a: float
    max_corner: str
    ripple_a: float
    current_step_a: float
    coil_power_w: float
    coil_temp_c: float
    hottest_corner: str
    discontinuous_corners: int
    freewheel_power_w: float = math.nan
    freewheel_power_corner: str = ""
    freewheel_elements_w: dict = field(default_factory=dict)
    switch_power_w: float = math.nan
    switch_conduction_w: float = math.nan
    switch_switching_w: float = math.nan
    switch_power_corner: str = ""
    decay_path: str = ""
    split_decay_saving: dict | None = None


@dataclass(frozen=True)
class SplitDecayResult:
    """Split decay: the hold takes the slow path, the release the fast one.

    ``bypass_lead_s`` is the board's ``bypass_lead`` (s; > 0: the bypass opens before the
    main switch's final turn-off, < 0: after it); as PWM-timer counts (one count =
    ``1 / count_rate_hz`` s) ``lead_counts`` before the final turn-off (rounded up) or
    ``lag_counts`` after it (rounded down), one of them zero. ``on_time_counts`` is the
    hold's on-time, within which a leading bypass must open.
    """

    hold_path: str
    release_path: str
    bypass_resistance_ohm: float
    bypass_lead_s: float
    count_rate_hz: float
    lead_counts: int
    lag_counts: int
    on_time_counts: int


@dataclass(frozen=True)
class ReleaseResult:
    """Release from the top of the hold ripple through the freewheel path."""

    freewheel: str
    dropout_current_a: float
    time_s: float
    zero_time_s: float
    worst_corner: str
    lockout_ticks: int
    peak_switch_voltage_v: float
    switch_limit_v: float
    switch_rating_v: float
    energy_j: float


@dataclass(frozen=True)
class TimerResult:
    """PWM timer registers. ``prescaler`` and ``period_ticks`` are divide ratio and counts."""

    clock_hz: float
    bits: int
    prescaler: int
    period_ticks: int
    compare_ticks: int
    frequency_hz: float
    target_hz: float
    frequency_error: float


@dataclass(frozen=True)
class AdcThresholds:
    """Current thresholds as ADC codes of the current-sense channel, and their currents (A)."""

    volts_per_amp: float
    full_scale_current_a: float
    pull_in_code: int
    hold_code: int
    over_current_code: int
    over_current_a: float
    open_load_code: int
    open_load_a: float
    supply_min_code: int
    supply_max_code: int


@dataclass(frozen=True)
class DutyTable:
    """Supply-compensated hold: compare value for each supply-sense ADC code (ascending).

    Firmware takes the last entry whose code is <= the measured code (the first entry
    below it); each entry holds the current at every corner up to the next entry's supply.
    """

    supply_v: list[float]
    adc_codes: list[int]
    compare_ticks: list[int]


@dataclass(frozen=True)
class Design:
    """One design result: every output (table, JSON, header, plot) is made from this."""

    drive: Drive
    pull_in: PullInResult
    hold: HoldResult
    release: ReleaseResult
    timer: TimerResult
    adc: AdcThresholds
    duty_table: DutyTable
    corners: list[Corner]
    nominal: Corner
    checks: list[Check]
    cautions: list[str]
    monte_carlo: dict | None = None
    waveforms: dict = field(default_factory=dict, repr=False)
    version: str = __version__
    input_hash: str = ""
    worst_corner_index: int = 0
    extra: dict = field(default_factory=dict)
    armature: ArmatureResult | None = None
    split_decay: SplitDecayResult | None = None

    @property
    def ok(self) -> bool:
        """True when no error-severity check failed."""
        return all(c.ok for c in self.checks if c.severity == "error")

    @property
    def failed(self) -> list[Check]:
        return [c for c in self.checks if not c.ok and c.severity == "error"]

    def to_dict(self) -> dict:
        """Plain JSON-ready dict (the ``design --json`` document)."""
        out = {
            **document_head(self.drive, self.version, self.input_hash),
            "ok": self.ok,
            "pull_in": asdict(self.pull_in),
            "hold": asdict(self.hold),
            "release": asdict(self.release),
            "timer": asdict(self.timer),
            "adc": asdict(self.adc),
            "duty_table": asdict(self.duty_table),
            "nominal": asdict(self.nominal),
            "corners": [_corner_dict(c) for c in self.corners],
            "checks": [asdict(c) for c in self.checks],
            "cautions": list(self.cautions),
        }
        out["nominal"] = _corner_dict(self.nominal)
        if self.armature is not None:
            out["armature"] = asdict(self.armature)
        if self.split_decay is not None:
            out["split_decay"] = asdict(self.split_decay)
        if "current_mode" in self.extra:
            out["current_mode"] = asdict(self.extra["current_mode"])
        if self.monte_carlo is not None:
            out["monte_carlo"] = self.monte_carlo
        return json_ready(out)


def _corner_dict(c: Corner) -> dict:
    """A corner as JSON: the armature figures, when there are any, flattened in."""
    d = asdict(c)
    arm = d.pop("armature")
    if arm is not None:
        d.update(arm)
    return d


_PULL_STATUS = {0: "seated", 1: "never starts", 2: "stalls"}
_RELEASE_STATUS = {0: "opens", 2: "stays closed"}


def _corner_armature(res: PointResults, k: int) -> dict | None:
    a = res.armature
    if a is None:
        return None
    pin, rel = a.pull_in, a.release
    return {
        "seat_time_s": float(pin.seat_time[k]), "impact_time_s": float(pin.impact_time[k]),
        "dip_current_a": float(pin.dip_current[k]), "dip_time_s": float(pin.dip_time[k]),
        "dip_depth_a": float(pin.dip_depth[k]), "start_time_s": float(pin.start_time[k]),
        "bounces": int(pin.bounces[k]),
        "release_unlatch_time_s": float(rel.unlatch_time[k]),
        "release_open_time_s": float(rel.open_time[k]),
        "start_current_a": float(a.start_current[k]), "stay_current_a": float(a.stay_current[k]),
        "stroke_current_a": float(a.stroke_current[k]),
        "hold_force_current_a": float(a.hold_current[k]),
        "hold_force_margin": float(a.hold_current[k] / a.stay_current[k]),
        "hold_lift_m": float(a.hold_lift[k]),
        "armature_status": _PULL_STATUS[int(pin.status[k])],
        "release_status": _RELEASE_STATUS[int(rel.status[k])],
    }


def _corners(grid: CornerGrid, res: PointResults, losses: HoldLosses | None = None) -> list[Corner]:
    out = []
    nan = np.full(len(grid), math.nan)
    fw_p = nan if losses is None else np.broadcast_to(losses.freewheel, nan.shape)
    sw_p = nan if losses is None else np.broadcast_to(losses.switch, nan.shape)
    for k in range(len(grid)):
        out.append(Corner(
            label=grid.label(k),
            supply_v=float(res.supply[k]), ambient_c=float(res.ambient[k]),
            coil_temp_c=float(res.coil_temp[k]), resistance_ohm=float(res.loop.r_coil[k]),
            inductance_h=float(res.loop.inductance[k]), pull_in_time_s=float(res.pull_in_time[k]),
            peak_end_current_a=float(res.peak_end_current[k]),
            hold_mean_current_a=float(res.hold.mean[k]), hold_ripple_a=float(res.hold.ripple[k]),
            hold_rms_current_a=float(res.hold.rms[k]),
            hold_conduction="discontinuous" if res.hold.dcm[k] else "continuous",
            coil_power_w=float(res.coil_power[k]), release_time_s=float(res.release_time[k]),
            release_zero_time_s=float(res.release_zero_time[k]),
            peak_switch_voltage_v=float(res.peak_switch_voltage[k]),
            release_energy_j=float(res.release_energy[k]),
            armature=_corner_armature(res, k),
            freewheel_power_w=float(fw_p[k]), switch_power_w=float(sw_p[k]),
        ))
    return out


def _adc_code(volts: float, reference: float, bits: int) -> int:
    """ADC code for a pin voltage: ``floor(V / V_ref * 2^bits)``, clipped to full scale."""
    return int(min(max(math.floor(volts / reference * 2**bits), 0), 2**bits - 1))


def _worst(values: np.ndarray, largest: bool = True) -> int:
    v = np.where(np.isnan(values), np.inf if largest else -np.inf, values)
    return int(np.argmax(v) if largest else np.argmin(v))


def _quantised_compare(drive: Drive, grid: CornerGrid, duty: float, timer: TimerSetting) -> int:
    """Round the duty up to whole compare counts, adding counts until every corner holds."""
    period = timer.period_ticks
    if not math.isfinite(duty):
        return period
    compare = min(period, max(0, math.ceil(duty * period - 1e-9)))
    while compare < period:
        res = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                       compare / period, timer.frequency_hz, 0.0, mechanics=False)
        if np.min(res.hold.mean) >= drive.hold.current:
            break
        compare += 1
    return compare


def _duty_table(drive: Drive, grid: CornerGrid, temps: np.ndarray, timer: TimerSetting,
                entries: int = DUTY_TABLE_ENTRIES) -> DutyTable:
    """Compare value against supply: the worst corner at each supply holds the current.

    The coil temperatures are those of the lowest-supply corners (the hold current, and so
    the coil power, stays about the same as the table compensates the supply).
    """
    adc = drive.board.adc
    low = grid.supply == np.min(grid.supply)
    amb, rf, lf = grid.ambient[low], grid.r_factor[low], grid.l_factor[low]
    t = np.where(np.isfinite(temps[low]), temps[low], drive.thermal.max_coil_temp)
    if drive.supply.max > drive.supply.min:
        volts = np.linspace(drive.supply.min, drive.supply.max, entries)
    else:
        volts = np.array([drive.supply.min])
    period = timer.period_ticks
    # one vectorised bisection over (supply entry x low-supply corner)
    lp = loop(drive, volts[:, None] + 0.0 * amb[None, :], t[None, :], rf[None, :], lf[None, :])
    need = duty_for_mean(drive.hold.current, timer.frequency_hz, lp.v_on, lp.r_on, lp.r_off,
                         lp.v_off, lp.inductance)
    worst = np.where(np.any(np.isnan(need), axis=1), 1.0, np.nanmax(np.nan_to_num(need, nan=1.0), axis=1))
    compares = [int(min(period, math.ceil(d * period - 1e-9))) for d in worst]
    codes = [_adc_code(v / drive.board.supply_sense.divider, adc.reference, adc.bits) for v in volts]
    return DutyTable([float(v) for v in volts], codes, compares)


def design(drive: Drive, samples: int = 0, seed: int = 1) -> Design:
    """Design the peak-and-hold drive for ``drive`` (see the module docstring).

    ``samples`` > 0 adds a tolerance Monte Carlo of that many points (see
    :func:`coildrive.montecarlo.monte_carlo`). A current-mode hold
    (``hold.mode = "current"``) is designed by :mod:`coildrive.current_hold`.
    """
    if drive.hold.mode == "current":
        from .current_hold import design_current_mode
        return design_current_mode(drive, samples, seed)
    board = drive.board
    grid = corner_grid(drive)
    timer = solve_timer(board.timer.clock, board.timer.bits, board.timer.prescaler_max,
                        drive.hold.frequency, drive.hold.frequency_tolerance,
                        board.timer.prescalers)
    f_hold = timer.frequency_hz
    duty_exact, _ = required_duty(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                                  f_hold)
    compare = _quantised_compare(drive, grid, duty_exact, timer)
    duty = compare / timer.period_ticks

    # Pull-in at the settled temperatures, then the peak time from the worst corner.
    first = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, duty, f_hold, 0.0)
    k_pull = _worst(first.pull_in_time)
    t_pull = float(first.pull_in_time[k_pull])
    tick_rate = board.tick.rate
    if math.isfinite(t_pull):
        peak_ticks = math.ceil(t_pull * drive.pull_in.margin * tick_rate - 1e-9) + 1
    else:
        peak_ticks = 0
    peak_time = peak_ticks / tick_rate
    res = evaluate(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, duty, f_hold,
                   peak_time, reuse=first)
    # Hold powers at every corner from the steady state the design already has (coil at
    # its settled temperature there).
    loss = _losses(drive, res, f_hold)
    corners = _corners(grid, res, loss)
    nom_grid = nominal_point(drive)
    nom = evaluate(drive, nom_grid.supply, nom_grid.ambient, nom_grid.r_factor, nom_grid.l_factor,
                   duty, f_hold, peak_time)
    nominal = _corners(nom_grid, nom, _losses(drive, nom, f_hold))[0]
    nominal = Corner(**{**asdict(nominal), "label": "nominal: " + nominal.label})

    # Hold figures
    k_min = _worst(res.hold.mean, largest=False)
    k_max = _worst(res.hold.mean)
    k_hot = _worst(res.coil_temp)
    up = min(compare + 1, timer.period_ticks)
    step = pwm_steady_state(up / timer.period_ticks, f_hold, res.loop.v_on, res.loop.r_on,
                            res.loop.r_off, res.loop.v_off, res.loop.inductance).mean - res.hold.mean
    hold = HoldResult(
        mode=drive.hold.mode, current_a=drive.hold.current, frequency_hz=f_hold, duty=duty,
        compare_ticks=compare,
        min_mean_current_a=float(res.hold.mean[k_min]), min_corner=grid.label(k_min),
        max_mean_current_a=float(res.hold.mean[k_max]), max_corner=grid.label(k_max),
        ripple_a=float(np.max(res.hold.ripple)), current_step_a=float(np.max(step)),
        coil_power_w=float(np.max(res.coil_power)), coil_temp_c=float(res.coil_temp[k_hot]),
        hottest_corner=grid.label(k_hot), discontinuous_corners=int(np.sum(res.hold.dcm)),
        **_loss_figures(drive, grid, loss),
        split_decay_saving=_split_saving(drive, grid, timer, res, loss, duty, peak_time),
    )

    # Release
    k_rel = _worst(res.release_time)
    rating = drive.switch.max_voltage
    limit = rating * drive.switch.derating
    # Wait for zero current -- and, with an armature, for it to be back on the open stop.
    settle = float(np.max(res.release_zero_time))
    if res.armature is not None:
        settle = max(settle, float(np.max(res.release_time)))
    lockout = math.ceil(settle * tick_rate - 1e-9) + 1 if math.isfinite(settle) else 0
    release = ReleaseResult(
        freewheel=drive.freewheel.type, dropout_current_a=drive.release.current,
        time_s=float(res.release_time[k_rel]), zero_time_s=float(np.max(res.release_zero_time)),
        worst_corner=grid.label(k_rel), lockout_ticks=lockout,
        peak_switch_voltage_v=float(np.max(res.peak_switch_voltage)), switch_limit_v=limit,
        switch_rating_v=rating, energy_j=float(np.max(res.release_energy)),
    )
    peak_end_max = float(np.max(res.peak_end_current))
    pull_in = PullInResult(current_a=drive.pull_in.current, time_s=t_pull,
                           worst_corner=grid.label(k_pull), margin=drive.pull_in.margin,
                           peak_time_s=peak_time, peak_ticks=peak_ticks,
                           peak_end_current_max_a=peak_end_max)
    timer_result = TimerResult(clock_hz=board.timer.clock, bits=board.timer.bits,
                               prescaler=timer.prescaler, period_ticks=timer.period_ticks,
                               compare_ticks=compare, frequency_hz=f_hold,
                               target_hz=drive.hold.frequency, frequency_error=timer.error)

    # ADC thresholds
    adc = board.adc
    vpa = board.sense.resistance * board.sense.gain
    full_scale = adc.reference / vpa
    over_a = OVER_CURRENT_FACTOR * max(peak_end_max, float(np.max(res.hold.i_max)))
    open_a = OPEN_LOAD_FACTOR * hold.min_mean_current_a
    thresholds = AdcThresholds(
        volts_per_amp=vpa, full_scale_current_a=full_scale,
        pull_in_code=_adc_code(drive.pull_in.current * vpa, adc.reference, adc.bits),
        hold_code=_adc_code(drive.hold.current * vpa, adc.reference, adc.bits),
        over_current_code=_adc_code(over_a * vpa, adc.reference, adc.bits), over_current_a=over_a,
        open_load_code=_adc_code(open_a * vpa, adc.reference, adc.bits), open_load_a=open_a,
        supply_min_code=_adc_code(drive.supply.min / board.supply_sense.divider, adc.reference, adc.bits),
        supply_max_code=_adc_code(drive.supply.max / board.supply_sense.divider, adc.reference, adc.bits),
    )
    table = _duty_table(drive, grid, res.coil_temp, timer)

    checks = _checks(drive, grid, res, pull_in, hold, release, timer_result, thresholds, timer)
    split = _split_result(drive, timer, compare) if split_decay(drive) else None
    arm = None
    if res.armature is not None:
        arm = _armature_result(drive, grid, res)
        checks += _armature_checks(drive, grid, res, arm, release)
    checks += _loss_checks(drive, hold, loss, grid, split)
    cautions = _cautions(drive, hold, release)
    if arm is not None:
        cautions.append(
            "Pull-in and release moments come from the mechanical figures in [armature]; confirm "
            "the current dip and the release on the bench before relying on the margins of a "
            "safety-relevant actuator (an armature that fails to release keeps the load engaged).")
    cautions += _loss_cautions(drive, hold, release, split)
    waveforms = {
        "nominal": _waveform(drive, nom, 0, peak_time, duty, f_hold, "nominal"),
        "worst": _waveform(drive, res, k_pull, peak_time, duty, f_hold,
                           "worst pull-in: " + grid.label(k_pull)),
    }
    mc = None
    if samples > 0:
        from .montecarlo import monte_carlo
        mc = monte_carlo(drive, duty, f_hold, peak_time, samples, seed)
    return Design(drive=drive, pull_in=pull_in, hold=hold, release=release, timer=timer_result,
                  adc=thresholds, duty_table=table, corners=corners, nominal=nominal,
                  checks=checks, cautions=cautions, monte_carlo=mc, waveforms=waveforms,
                  input_hash=drive.input_hash(), worst_corner_index=k_pull, armature=arm,
                  split_decay=split)


# --------------------------------------------------------------------------- hold losses
def _losses(drive: Drive, res: PointResults, frequency: float) -> HoldLosses:
    """Element powers of the hold at the points of ``res`` (its loop and steady state)."""
    sw = drive.switch
    return hold_losses(drive, res.loop, res.hold, frequency, sw.rise_time, sw.fall_time)


def _path_name(drive: Drive, hold: bool) -> str:
    fw = drive.freewheel
    fast = {"diode": "diode", "zener": "diode + Zener", "resistor": "diode + resistor",
            "clamp": "clamp across the switch"}[fw.type]
    if hold and split_decay(drive):
        return "diode + bypass switch (slow decay)"
    return fast + (" (slow decay)" if fw.type == "diode" else " (fast decay)")


def _loss_figures(drive: Drive, grid: CornerGrid, loss: HoldLosses) -> dict:
    """The worst-corner hold powers as :class:`HoldResult` fields."""
    k_fw = _worst(loss.freewheel)
    switch = np.broadcast_to(loss.switch, loss.freewheel.shape)
    k_sw = _worst(switch)
    elements = {name: float(np.max(p)) for name, p in loss.elements().items() if np.any(p > 0)}
    return dict(
        freewheel_power_w=float(loss.freewheel[k_fw]), freewheel_power_corner=grid.label(k_fw),
        freewheel_elements_w=elements,
        switch_power_w=float(switch[k_sw]),
        switch_conduction_w=float(np.max(loss.switch_conduction)),
        switch_switching_w=float(np.max(loss.switch_switching)),
        switch_power_corner=grid.label(k_sw), decay_path=_path_name(drive, hold=True),
    )


def _slow_hold_drive(drive: Drive) -> tuple[Drive, bool]:
    """The same drive with split decay fitted (an ideal bypass, no lead): the hold takes
    the slow path. A clamp board with no ``diode_drop`` gets :data:`ASSUMED_DIODE_DROP`;
    the flag says so."""
    fw = drive.freewheel
    assumed = fw.diode_drop <= 0
    slow_fw = dataclasses.replace(fw, split_decay=True, bypass_resistance=0.0, bypass_lead=0.0,
                                  diode_drop=ASSUMED_DIODE_DROP if assumed else fw.diode_drop)
    return dataclasses.replace(drive, freewheel=slow_fw), assumed


def _saving_figures(drive: Drive, res: PointResults, loss: HoldLosses, duty: float,
                    rs: PointResults, ls: HoldLosses, d_slow: float, compare: int,
                    assumed: bool) -> dict:
    """The ``split_decay_saving`` object from the hold as designed (``res``, ``loss``,
    ``duty``) and with the slow hold path (``rs``, ``ls``, ``d_slow``, ``compare``)."""
    fast_element = {"zener": "zener", "resistor": "resistor", "clamp": "clamp"}[drive.freewheel.type]
    return {
        "freewheel_power_w": float(np.max(loss.freewheel) - np.max(ls.freewheel)),
        "fast_element": fast_element,
        "fast_element_power_w": float(np.max(getattr(loss, fast_element))),
        "freewheel_power_split_w": float(np.max(ls.freewheel)),
        "coil_power_change_w": float(np.max(rs.coil_power) - np.max(res.coil_power)),
        "switch_power_change_w": float(np.max(ls.switch) - np.max(loss.switch)),
        "duty_split": d_slow, "compare_ticks_split": compare,
        "duty_change": d_slow - duty,
        "ripple_split_a": float(np.max(rs.hold.ripple)),
        "ripple_change_a": float(np.max(rs.hold.ripple) - np.max(res.hold.ripple)),
        "assumed_diode_drop_v": ASSUMED_DIODE_DROP if assumed else None,
    }


def _split_saving(drive: Drive, grid: CornerGrid, timer: TimerSetting, res: PointResults,
                  loss: HoldLosses, duty: float, peak_time: float) -> dict | None:
    """What split decay would save when the hold takes a fast-decay path without it: the
    same design (frequency, peak) with the slow hold path, its duty solved again.

    ``None`` with a plain diode path (already slow) or with split decay fitted.
    """
    fw = drive.freewheel
    if fw.type == "diode" or split_decay(drive):
        return None
    slow, assumed = _slow_hold_drive(drive)
    f_hold = timer.frequency_hz
    # The duty iteration climbs to the smallest self-consistent duty from below, so
    # stopping it early (within a quarter count) gives a duty at or below it; the compare
    # is then rounded up and raised until every corner holds, which lands on the same
    # count as the exact duty would (the tests compare with a full split-decay design).
    d_low, _ = required_duty(slow, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, f_hold,
                             tol=0.25 / timer.period_ticks)
    compare = _quantised_compare(slow, grid, d_low, timer)
    d_slow = compare / timer.period_ticks
    rs = evaluate(slow, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, d_slow, f_hold,
                  peak_time, mechanics=False)
    ls = _losses(slow, rs, f_hold)
    return _saving_figures(drive, res, loss, duty, rs, ls, d_slow, compare, assumed)


def _split_result(drive: Drive, timer: TimerSetting, compare: int) -> SplitDecayResult:
    fw = drive.freewheel
    rate = drive.board.timer.clock / timer.prescaler
    lead = fw.bypass_lead
    lead_counts = math.ceil(lead * rate - 1e-9) if lead > 0 else 0
    lag_counts = math.floor(-lead * rate + 1e-9) if lead < 0 else 0
    return SplitDecayResult(
        hold_path=_path_name(drive, hold=True), release_path=_path_name(drive, hold=False),
        bypass_resistance_ohm=fw.bypass_resistance, bypass_lead_s=lead, count_rate_hz=rate,
        lead_counts=lead_counts, lag_counts=lag_counts, on_time_counts=compare)


def _loss_checks(drive: Drive, hold: HoldResult, loss: HoldLosses, grid: CornerGrid,
                 split: SplitDecayResult | None) -> list[Check]:
    """The hold's average power in each freewheel element and in the switch against the
    board's ratings x derating (common practice); a warning where no rating is given.
    With split decay, the bypass timing."""
    fw, sw = drive.freewheel, drive.switch
    out: list[Check] = []
    fix = (" — fit split decay (a bypass switch across the fast element during the hold), lower "
           "the hold current, or use a part rated for more" if hold.split_decay_saving else
           " — lower the hold current or use a part rated for more")
    for name, p in loss.elements().items():
        if not np.any(p > 0):
            continue
        k = _worst(p)
        worst = float(p[k])
        what = f"the hold puts {worst:.3g} W into the {ELEMENT_NAMES[name]} ({grid.label(k)})"
        rating = getattr(fw, f"{name}_power_rating")
        check = f"{name}_power"
        if rating > 0:
            limit = rating * fw.power_derating
            ok = worst <= limit
            out.append(Check(check, ok, f"{what} vs {limit:.3g} W ({fw.power_derating:.0%} of the "
                             f"{rating:.3g} W rating, power derating: common practice)"
                             + ("" if ok else fix)))
        else:
            out.append(Check(check, False, f"{what}; the board gives no freewheel.{name}_power_rating "
                             "to check it against", severity="warning"))
    sw_p = np.broadcast_to(loss.switch, loss.freewheel.shape)
    k = _worst(sw_p)
    how = (f"conduction {float(loss.switch_conduction[k]):.3g} W + switching "
           f"{float(np.broadcast_to(loss.switch_switching, sw_p.shape)[k]):.3g} W"
           if sw.rise_time > 0 or sw.fall_time > 0 else
           "conduction only (no switch.rise_time/fall_time: switching loss not estimated)")
    what = f"the hold puts {float(sw_p[k]):.3g} W into the switch ({how}, {grid.label(k)})"
    if sw.power_rating > 0:
        limit = sw.power_rating * sw.power_derating
        ok = float(sw_p[k]) <= limit
        out.append(Check("switch_power", ok, f"{what} vs {limit:.3g} W ({sw.power_derating:.0%} of "
                         f"the {sw.power_rating:.3g} W rating, power derating: common practice)"
                         + ("" if ok else " — a switch with a lower on-resistance or faster edges, or more cooling")))
    else:
        out.append(Check("switch_power", False, f"{what}; the board gives no switch.power_rating to "
                         "check it against", severity="warning"))
    if fw.split_decay and fw.type == "diode":
        out.append(Check("split_decay", False, "split_decay has nothing to bypass on a plain diode "
                         "path (the hold and the release both decay slowly)", severity="warning"))
    elif split is not None:
        rate = split.count_rate_hz
        if split.lead_counts > 0:
            ok = split.lead_counts <= split.on_time_counts
            out.append(Check("bypass_timing", ok,
                             f"the bypass opens {fw.bypass_lead * 1e6:.4g} us ({split.lead_counts} counts) "
                             f"before the final turn-off, within the last on-time of "
                             f"{split.on_time_counts / rate * 1e6:.4g} us ({split.on_time_counts} counts)"
                             + ("" if ok else " — shorten freewheel.bypass_lead to at most the hold "
                                "on-time: it would open during an off-time")))
        elif split.lag_counts > 0 or fw.bypass_lead < 0:
            out.append(Check("bypass_timing", False,
                             f"the bypass opens {-fw.bypass_lead * 1e6:.4g} us ({split.lag_counts} counts) "
                             "after the final turn-off: the release decays slowly until then (the "
                             "release time includes it) — open it before the turn-off",
                             severity="warning"))
        else:
            out.append(Check("bypass_timing", False,
                             "the bypass opens with the final turn-off (bypass_lead = 0): the bypass "
                             "switch's own turn-off delay slows the start of the release — give "
                             "freewheel.bypass_lead of at least that delay", severity="warning"))
    return out


def _loss_cautions(drive: Drive, hold: HoldResult, release: ReleaseResult,
                   split: SplitDecayResult | None) -> list[str]:
    parts = ", ".join(f"{ELEMENT_NAMES[n]} {w:.3g} W" for n, w in hold.freewheel_elements_w.items())
    out = [
        f"During a long hold the freewheel path takes up to {hold.freewheel_power_w:.3g} W ({parts}) "
        f"and the switch {hold.switch_power_w:.3g} W: parts taking watts get hot enough to burn; size "
        "them and their cooling from the datasheets' derating curves at the highest ambient."]
    if split is not None:
        out.append(
            "Split decay relies on the bypass switch: if it stays on at the release the current "
            f"decays slowly through the diode (the load lets go late); if it fails open the "
            f"{drive.freewheel.type} path takes the hold power. Keep the {drive.freewheel.type} "
            f"rated for the release energy ({release.energy_j * 1e3:.3g} mJ) and verify both "
            "paths on the bench.")
    return out


def _waveform(drive: Drive, res: PointResults, k: int, peak_time: float, duty: float,
              frequency: float, label: str):
    """An actuation at point ``k`` of ``res`` for the plot: the hold shown for twice the
    peak time (at least 20 PWM periods)."""
    temp = float(res.coil_temp[k]) if math.isfinite(res.coil_temp[k]) else drive.thermal.max_coil_temp
    hold_time = max(2.0 * peak_time, 20.0 / frequency)
    return actuation(drive, float(res.supply[k]), temp, peak_time, duty, frequency, hold_time,
                     float(res.r_factor[k]), float(res.l_factor[k]), label=label)


def _checks(drive: Drive, grid: CornerGrid, res: PointResults, pull_in: PullInResult,
            hold: HoldResult, release: ReleaseResult, timer: TimerResult, adc: AdcThresholds,
            setting: TimerSetting) -> list[Check]:
    checks: list[Check] = []
    add = checks.append
    i_inf = res.loop.v_on / res.loop.r_on
    k = _worst(i_inf, largest=False)
    add(Check("pull_in_reachable", bool(np.all(i_inf > drive.pull_in.current)),
              f"lowest steady current at full supply {i_inf[k]:.4g} A ({grid.label(k)}) vs "
              f"pull-in {drive.pull_in.current:.4g} A"
              + ("" if np.all(i_inf > drive.pull_in.current) else
                 " — lower the coil resistance, raise the minimum supply or lower the pull-in current")))
    met = hold.min_mean_current_a >= drive.hold.current and hold.duty < 1.0
    add(Check("hold_current_met", bool(met and np.all(np.isfinite(res.hold.mean))),
              f"lowest hold mean {hold.min_mean_current_a:.4g} A ({hold.min_corner}) vs "
              f"{drive.hold.current:.4g} A at duty {hold.duty:.4f}"
              + ("" if met else " — even full duty cannot hold: raise the supply or lower the hold current")))
    add(Check("hold_below_pull_in", drive.hold.current < drive.pull_in.current,
              f"hold {drive.hold.current:.4g} A vs pull-in {drive.pull_in.current:.4g} A"))
    add(Check("hold_max_current", hold.max_mean_current_a < drive.pull_in.current,
              f"highest hold mean {hold.max_mean_current_a:.4g} A ({hold.max_corner}) vs pull-in "
              f"{drive.pull_in.current:.4g} A"
              + ("" if hold.max_mean_current_a < drive.pull_in.current else
                 " — use the supply-compensated duty table to save power at high supply"),
              severity="warning"))
    hot_ok = bool(np.all(np.isfinite(res.coil_temp))) and hold.coil_temp_c <= drive.thermal.max_coil_temp
    add(Check("coil_temperature", hot_ok,
              (f"hottest coil {hold.coil_temp_c:.1f} degC ({hold.hottest_corner}) vs limit "
               f"{drive.thermal.max_coil_temp:.1f} degC" if np.all(np.isfinite(res.coil_temp)) else
               "the coil temperature does not settle below 1000 degC (thermal runaway)")
              + ("" if hot_ok else " — lower the hold current or improve the coil's cooling")))
    v_ok = release.peak_switch_voltage_v <= release.switch_limit_v
    add(Check("switch_voltage", v_ok,
              f"peak switch voltage {release.peak_switch_voltage_v:.4g} V vs {release.switch_limit_v:.4g} V "
              f"({drive.switch.derating:.0%} of the {release.switch_rating_v:.4g} V rating, derating: common practice)"
              + ("" if v_ok else " — use a lower Zener/clamp voltage or a switch with a higher rating")))
    f_ok = abs(timer.frequency_error) <= drive.hold.frequency_tolerance
    add(Check("timer_frequency", f_ok,
              f"{timer.frequency_hz:.6g} Hz for {timer.target_hz:.6g} Hz (error {timer.frequency_error:+.3%}, "
              f"allowed {drive.hold.frequency_tolerance:.2%}); prescaler {timer.prescaler}, "
              f"period {timer.period_ticks} counts"
              + ("" if f_ok else " — the timer cannot make this frequency: change hold.frequency")))
    d_ok = 0 < timer.compare_ticks < timer.period_ticks
    add(Check("duty_range", d_ok,
              f"compare {timer.compare_ticks} of {timer.period_ticks} counts"))
    add(Check("duty_resolution", timer.period_ticks >= MIN_DUTY_STEPS,
              f"{timer.period_ticks} steps per period, one step = {hold.current_step_a * 1e3:.3g} mA of hold "
              f"current (fewer than {MIN_DUTY_STEPS} steps is coarse: common practice)",
              severity="warning"))
    add(Check("audible_frequency", timer.frequency_hz >= AUDIBLE_LIMIT_HZ,
              f"{timer.frequency_hz:.6g} Hz" + ("" if timer.frequency_hz >= AUDIBLE_LIMIT_HZ else
                                               " is below 20 kHz: the coil may whine (common practice)"),
              severity="warning"))
    peak_ok = pull_in.peak_ticks > 0 and pull_in.peak_ticks <= UINT32_MAX
    add(Check("peak_ticks", peak_ok,
              f"{pull_in.peak_ticks} ticks at {drive.board.tick.rate:.6g} Hz = {pull_in.peak_time_s * 1e3:.4g} ms"))
    max_code = 2**drive.board.adc.bits - 1
    pull_code_ok = drive.pull_in.current < adc.full_scale_current_a
    add(Check("adc_range", pull_code_ok,
              f"current-sense full scale {adc.full_scale_current_a:.4g} A vs pull-in "
              f"{drive.pull_in.current:.4g} A" + ("" if pull_code_ok else
                                                  " — lower the sense resistance or amplifier gain")))
    add(Check("adc_over_current", adc.over_current_a < adc.full_scale_current_a,
              f"over-current threshold {adc.over_current_a:.4g} A (code {adc.over_current_code} of "
              f"{max_code}) vs full scale {adc.full_scale_current_a:.4g} A",
              severity="warning"))
    sup_pin = drive.supply.max / drive.board.supply_sense.divider
    add(Check("supply_sense_range", sup_pin < drive.board.adc.reference,
              f"{sup_pin:.4g} V at the supply-sense pin at {drive.supply.max:.4g} V vs ADC reference "
              f"{drive.board.adc.reference:.4g} V"))
    add(Check("adc_hold_resolution", adc.hold_code >= MIN_HOLD_CODES,
              f"hold current reads {adc.hold_code} codes (fewer than {MIN_HOLD_CODES} is coarse: common practice)",
              severity="warning"))
    return checks


def _cautions(drive: Drive, hold: HoldResult, release: ReleaseResult) -> list[str]:
    out = [
        f"Turning the coil off makes the switch see up to {release.peak_switch_voltage_v:.3g} V: keep the "
        f"freewheel path ({release.freewheel}) fitted and rated; never open the coil circuit while current flows.",
        f"Each release dumps up to {release.energy_j * 1e3:.3g} mJ into the freewheel element; check its "
        "energy and average-power rating at the highest actuation rate.",
        f"The coil settles at up to {hold.coil_temp_c:.0f} degC during a long hold; hot coils burn and "
        "insulation ages fast above its class rating.",
        "These figures are a design aid, not a safety approval: for mains-connected or safety-relevant "
        "equipment follow local codes and licensed practice.",
    ]
    return out


# --------------------------------------------------------------------------- armature
def _armature_result(drive: Drive, grid: CornerGrid, res: PointResults) -> ArmatureResult:
    from .model.magnet import equivalent_gap, fit_gap, inductance_slope

    arm = drive.armature
    a = res.armature
    pin, rel = a.pull_in, a.release
    lc, beta = fit_gap(arm.inductance_open, arm.inductance_closed, arm.stroke)
    g0 = float(equivalent_gap(beta))
    k_seat = _worst(pin.seat_time)
    seated = pin.status == 0
    k_early = _worst(np.where(seated, pin.seat_time, np.inf), largest=False)
    k_rel = _worst(rel.open_time)
    ratio = a.hold_current / a.stay_current
    k_hold = _worst(ratio, largest=False)
    low = grid.supply == np.min(grid.supply)
    k_hl = int(np.flatnonzero(low)[_worst(res.coil_temp[low])])
    k_through = _worst(a.stroke_current)
    through = float(a.stroke_current[k_through])
    stay = float(np.max(a.stay_current))
    lift_ok = a.hold_lift <= 0
    basis = ("RMS current (the ripple never drops below the stay current)" if np.all(lift_ok) else
             "RMS current where the mass averages the ripple, else the ripple bottom")
    dip = pin.dip_current
    return ArmatureResult(
        inductance_open_h=arm.inductance_open, inductance_closed_h=arm.inductance_closed,
        stroke_m=arm.stroke, equivalent_gap_m=g0,
        force_constant_h_m=float(lc * g0) if math.isfinite(g0) else math.inf,
        slope_open_h_m=float(inductance_slope(arm.stroke, lc, beta)),
        slope_closed_h_m=float(inductance_slope(0.0, lc, beta)),
        current_margin=arm.current_margin, derived=list(arm.derived),
        start_current_a=float(np.max(a.start_current)), stroke_current_a=through,
        stroke_current_gap_m=float(a.stroke_gap[k_through]), stay_current_a=stay,
        dropout_current_a=float(np.min(a.stay_current)),
        pull_in_current_margin=drive.pull_in.current / through if through > 0 else math.inf,
        hold_current_margin=drive.hold.current / stay if stay > 0 else math.inf,
        seat_time_s=float(pin.seat_time[k_seat]), seat_corner=grid.label(k_seat),
        seat_time_min_s=float(pin.seat_time[k_early]),
        dip_current_a=float(dip[k_seat]), dip_time_s=float(pin.dip_time[k_seat]),
        dip_current_min_a=float(np.nanmin(dip)) if np.any(np.isfinite(dip)) else math.nan,
        release_open_time_s=float(rel.open_time[k_rel]), release_corner=grid.label(k_rel),
        hold_force_current_a=float(a.hold_current[k_hold]), hold_force_margin=float(ratio[k_hold]),
        hold_force_corner=grid.label(k_hold), hold_force_basis=basis,
        hottest_low_supply_corner=grid.label(k_hl), hottest_low_supply_margin=float(ratio[k_hl]),
        hold_lift_max_m=float(np.max(a.hold_lift)),
        seated_corners=int(np.sum(seated)), opened_corners=int(np.sum(rel.status == 0)),
        corners=len(grid),
    )


def _mm(metres: float) -> str:
    return f"{metres * 1e3:.3g} mm"


def _armature_checks(drive: Drive, grid: CornerGrid, res: PointResults, ar: ArmatureResult,
                     release: ReleaseResult) -> list[Check]:
    """Checks of the moving armature: it seats, stays seated, lets go; the file's currents
    against the force balance."""
    from .model.armature import CHATTER_FRACTION, NO_START

    arm = drive.armature
    a = res.armature
    pin, rel = a.pull_in, a.release
    out: list[Check] = []
    add = out.append
    i_inf = res.loop.v_on / res.loop.r_on

    # It seats at every corner.
    bad = np.flatnonzero(pin.status != 0)
    if bad.size == 0:
        add(Check("armature_seats", True,
                  f"seated at every corner, latest {ar.seat_time_s * 1e3:.4g} ms ({ar.seat_corner}); "
                  f"current dip {ar.dip_current_a:.4g} A at the seat moment"))
    else:
        k = int(bad[0])
        where = f"{bad.size} of {len(grid)} corners, e.g. {grid.label(k)}"
        if pin.status[k] == NO_START:
            force = arm.spring_preload + arm.load_force
            why = (f"the coil reaches only {i_inf[k]:.4g} A but spring preload + load "
                   f"({force:.4g} N) need {a.start_current[k]:.4g} A at the open gap: the "
                   "armature never moves")
            if not np.isfinite(a.start_current[k]):
                why = ("inductance_open = inductance_closed: the coil makes no force on the "
                       "armature")
            fix = " — a stronger spring than the coil can pull: lower spring_preload/load_force, raise the supply or use a coil with more ampere-turns"
        elif a.stroke_current[k] >= i_inf[k]:
            why = (f"the armature stalls at gap {_mm(pin.stall_gap[k])}: spring + load need "
                   f"{a.stroke_current[k]:.4g} A at gap {_mm(a.stroke_gap[k])} but the coil "
                   f"carries at most {i_inf[k]:.4g} A")
            fix = " — the spring rate or the load keeps it from seating: lower them or raise the current"
        else:
            why = (f"not seated within {pin.bound[k] * 1e3:.4g} ms (gap {_mm(pin.stall_gap[k])} "
                   "at the end): the armature moves too slowly (mass, damping)")
            fix = " — check mass and damping"
        add(Check("armature_seats", False, f"not seated at {where}: {why}{fix}"))

    # It stays seated through the hold (closed-gap force balance).
    hold_ok = bool(ar.hold_force_margin >= 1.0 and np.all(np.isfinite(a.hold_current)))
    add(Check("armature_hold", hold_ok,
              f"hold force current {ar.hold_force_current_a:.4g} A vs {ar.stay_current_a:.4g} A to "
              f"stay seated (closed-gap force balance), margin x{ar.hold_force_margin:.3g} at "
              f"{ar.hold_force_corner}; x{ar.hottest_low_supply_margin:.3g} at the hottest, "
              f"lowest-supply corner ({ar.hottest_low_supply_corner}); counted as the {ar.hold_force_basis}"
              + ("" if hold_ok else " — raise hold.current: the armature would drop out during the hold")))

    # PWM ripple: can the armature chatter within one period?
    limit = CHATTER_FRACTION * min(arm.stroke, ar.equivalent_gap_m)
    add(Check("armature_chatter", bool(ar.hold_lift_max_m <= limit),
              f"largest lift within one PWM period {ar.hold_lift_max_m * 1e6:.3g} um vs "
              f"{limit * 1e6:.3g} um ({CHATTER_FRACTION:.0%} of min(stroke, equivalent gap): our "
              "choice)" + ("" if ar.hold_lift_max_m <= limit else
                           " — the ripple bottom falls below the stay current long enough to lift "
                           "the armature: raise the PWM frequency"),
              severity="warning"))

    # It lets go and returns to the open stop.
    bad = np.flatnonzero(rel.status != 0)
    if bad.size == 0:
        add(Check("armature_releases", True,
                  f"back on the open stop at every corner, latest {ar.release_open_time_s * 1e3:.4g} ms "
                  f"after turn-off ({ar.release_corner}) through the {drive.freewheel.type} path"))
    else:
        k = int(bad[0])
        add(Check("armature_releases", False,
                  f"not back on the open stop at {bad.size} of {len(grid)} corners, e.g. {grid.label(k)}: "
                  f"gap {_mm(rel.stall_gap[k])} after {rel.bound[k] * 1e3:.4g} ms — spring preload + load "
                  f"({arm.spring_preload + arm.load_force:.4g} N at the open stop) against damping "
                  f"{arm.damping:.4g} N*s/m: a stronger return spring or less damping"))

    # The file's currents against the force balance.
    def compare(key: str, name: str, value: float, need: float, what: str) -> None:
        ratio = value / need if need > 0 else math.inf
        if key in arm.derived:
            add(Check(name, True, f"{key} not given: derived {value:.4g} A = x{arm.current_margin:g} "
                      f"(armature.current_margin) on {need:.4g} A {what}"))
            return
        if ratio >= arm.current_margin:
            add(Check(name, True, f"{key} {value:.4g} A vs {need:.4g} A {what}: "
                      f"x{ratio:.3g} (at least x{arm.current_margin:g} asked)"))
        elif ratio >= 1.0:
            add(Check(name, False, f"{key} {value:.4g} A vs {need:.4g} A {what}: only "
                      f"{(ratio - 1) * 100:.3g} % above, below the x{arm.current_margin:g} of "
                      "armature.current_margin", severity="warning"))
        else:
            add(Check(name, False, f"{key} {value:.4g} A disagrees with the mechanics: "
                      f"{(1 - ratio) * 100:.3g} % below the {need:.4g} A {what}"))

    compare("pull_in.current", "pull_in_current_mechanics", drive.pull_in.current,
            ar.stroke_current_a, "the mechanics need to pull in over the whole stroke (static "
            "force balance, lowest inductance)")
    compare("hold.current", "hold_current_mechanics", drive.hold.current, ar.stay_current_a,
            "the mechanics need to stay seated (static force balance, lowest inductance)")
    if "release.current" in arm.derived:
        add(Check("release_current_mechanics", True,
                  f"release.current not given: the predicted drop-out {drive.release.current:.4g} A "
                  "(nominal stay current)"))
    else:
        lo, hi = ar.dropout_current_a, ar.stay_current_a
        inside = lo * 0.9 <= drive.release.current <= hi * 1.1
        off = (drive.release.current / (lo if drive.release.current < lo else hi) - 1) * 100
        add(Check("release_current_mechanics", bool(inside),
                  f"release.current {drive.release.current:.4g} A vs the mechanics' drop-out "
                  f"{lo:.4g}..{hi:.4g} A over the tolerance band"
                  + ("" if inside else f": {off:+.3g} % off (more than 10 %); release times use "
                     "the armature model, not this current"),
                  severity="warning"))
    lo_l, hi_l = arm.inductance_open, arm.inductance_closed
    inside = lo_l * (1 - 1e-9) <= drive.coil.inductance <= hi_l * (1 + 1e-9)
    add(Check("coil_inductance_armature", bool(inside),
              f"coil.inductance {drive.coil.inductance * 1e3:.4g} mH vs armature "
              f"{lo_l * 1e3:.4g}..{hi_l * 1e3:.4g} mH (open..closed); with [armature] the model "
              "uses the armature values" + ("" if inside else ": check which position coil.inductance was measured at"),
              severity="warning"))
    return out
