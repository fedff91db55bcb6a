"""Hold tuning, offline: the least-power hold setting that stays seated at every corner.

:func:`tune` sweeps every whole-Hz PWM frequency the board's timer makes exactly inside
a range (``clock / (prescaler x period)`` a whole number of Hz, each with the prescaler
and period that give it the finest duty steps) and hold-current levels from the minimum
the mechanics need upward. For every (frequency, level) it finds the smallest compare
value that holds the level at every corner with the self-heating it causes -- the same
definition as :func:`coildrive.design.design` -- and evaluates that setting at every
corner from the exact PWM steady state: settled coil temperature, mean current range,
ripple and the power of every element the hold current flows through
(:func:`coildrive.model.losses.hold_losses`). Constraints (hold, ripple, duty
resolution, coil temperature, a compare below the period) decide feasibility.

The objective is all the hold power drawn from the supply, at the worst corner: coil +
sense resistor + switch (conduction and switching) + every freewheel element (diode,
Zener, resistor, clamp, or the diode and bypass switch of split decay). Feasible
settings within ``tie_band`` (1 %) of the least objective are ranked by switching loss,
then by closeness to the drive file's ``hold.frequency``; the rest follow by objective.
The duty at each corner is one array (:func:`corner_duties`): one duty for all corners
under a fixed-duty hold.

The sweep knows nothing of files or the CLI (the live bench tuning will reuse
:class:`TuneOptions`, :func:`minimum_hold_current` and :func:`evaluate_settings`).
Everything is vectorised over (setting x corner) in chunks that fit the CPU caches.
See docs/tuning.md for the method and its decisions.

Units: SI (A, V, ohm, H, s, Hz, W), temperatures in degC.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field

import numpy as np

from ..config import Drive, Hold, Timer
from ..design.corners import CornerGrid, corner_grid
from ..design.hold_voltage import hold_figures
from ..design.thermal_cycle import cycle_states, cycling
from ..design.timer import MIN_PERIOD_TICKS, TimerSetting, solve_timer
from ..errors import InputError
from ..jsondoc import json_ready
from ..model.circuit import COPPER_ALPHA, loop
from ..model.losses import HoldLosses, hold_losses
from ..model.pwm import coil_heat, duty_for_mean, pwm_steady_state
from ..model.thermal import CEILING_C, closed_form_temperature, coil_r20
from ..model.thermal_cycle import closed_form_cycle_temperature

#: Lower end of the sweep by default: the upper limit of hearing (common practice).
DEFAULT_MIN_FREQUENCY = 20_000.0
#: Upper end when neither the option nor the board's ``timer.max_pwm_frequency`` sets
#: one (our choice, not a standard: switching and core losses grow with frequency).
DEFAULT_MAX_FREQUENCY = 100_000.0
#: Fewest compare steps per period by default (common practice, as in the design check).
DEFAULT_MIN_DUTY_STEPS = 64
#: Default ripple limit as a fraction of the target hold current (our choice).
DEFAULT_RIPPLE_FRACTION = 0.2
#: Settings within this fraction of the least objective count as equal in power and
#: are ranked by switching loss, then closeness to ``hold.frequency`` (our choice: a
#: difference that small is not worth a louder switch or leaving the file's frequency).
DEFAULT_TIE_BAND = 0.01
#: Largest sweep accepted (settings x corners), to keep memory and time bounded.
MAX_POINTS = 20_000_000
#: Elements per vectorised chunk (fits the caches; far faster than one huge array).
CHUNK = 12_288
#: Convergence of the self-heating fixed point, K (tighter than model/thermal.py's
#: 1e-4 K, so the sweep agrees with :func:`coildrive.design.evaluate.evaluate` to that tolerance).
TEMP_TOL = 1e-5

CONSTRAINTS = ("hold", "duty_range", "ripple", "duty_steps", "coil_temp")
#: The best settings of the fast sweep that are evaluated again exactly as the design
#: evaluates them (at least ``--top``), and lead the ranking.
EXACT_SETTINGS = 24


@dataclass(frozen=True)
class TuneOptions:
    """What the sweep may vary and what a setting must meet.

    Frequencies in Hz (``max_frequency`` 0: the board's ``timer.max_pwm_frequency``,
    else :data:`DEFAULT_MAX_FREQUENCY`); ``margin`` multiplies the minimum hold current
    (see :func:`minimum_hold_current`); ``levels`` hold-current levels, each
    ``level_step`` (a fraction) above the previous; ``max_ripple`` in A peak-to-peak
    (0: ``max_ripple_fraction`` of the target hold current); ``min_duty_steps`` compare
    counts per period at least; ``top`` candidates kept in the ranked list;
    ``tie_band`` the fraction of the least objective within which settings count as
    equal (see the module docstring).
    """

    min_frequency: float = DEFAULT_MIN_FREQUENCY
    max_frequency: float = 0.0
    margin: float = 1.0
    levels: int = 8
    level_step: float = 0.05
    max_ripple: float = 0.0
    max_ripple_fraction: float = DEFAULT_RIPPLE_FRACTION
    min_duty_steps: int = DEFAULT_MIN_DUTY_STEPS
    top: int = 20
    tie_band: float = DEFAULT_TIE_BAND

    def check(self) -> None:
        """Raise :class:`InputError` naming the option for a value out of range."""
        if not self.min_frequency > 0:
            raise InputError("--min-frequency", "", f"{self.min_frequency:g} Hz must be greater than zero")
        if self.max_frequency < 0:
            raise InputError("--max-frequency", "", f"{self.max_frequency:g} Hz must not be negative")
        if self.max_frequency and self.max_frequency < self.min_frequency:
            raise InputError("--max-frequency", "", f"{self.max_frequency:g} Hz is below --min-frequency "
                             f"({self.min_frequency:g} Hz)")
        if not self.margin >= 1.0:
            raise InputError("--margin", "", f"{self.margin:g} is below 1, expected a factor >= 1 on the "
                             "minimum hold current")
        if not 1 <= self.levels <= 1000:
            raise InputError("--levels", "", f"{self.levels} is out of range, expected 1..1000")
        if not self.level_step > 0:
            raise InputError("--level-step", "", f"{self.level_step:g} must be greater than zero")
        if self.max_ripple < 0:
            raise InputError("--max-ripple", "", f"{self.max_ripple:g} A must not be negative")
        if not self.max_ripple_fraction > 0:
            raise InputError("--max-ripple", "", f"{self.max_ripple_fraction:g} must be greater than zero")
        if self.min_duty_steps < 2:
            raise InputError("--min-steps", "", f"{self.min_duty_steps} is below 2")
        if self.top < 1:
            raise InputError("--top", "", f"{self.top} is below 1")
        if not 0 <= self.tie_band < 1:
            raise InputError("tie_band", "", f"{self.tie_band:g} is out of range, expected 0 <= band < 1")


def minimum_hold_current(drive: Drive) -> tuple[float, str]:
    """The least hold current (A) the mechanics need, and where the figure comes from.

    The single place where that minimum is decided. Today it is the drive file's
    ``hold.current`` (already the requirement at every corner; with an ``[armature]``
    and no ``hold.current`` in the file, config has derived it from the closed-gap force
    balance). A closed-gap minimum seated current from the armature model plugs in here.
    """
    arm = drive.armature
    if arm is not None and "hold.current" in getattr(arm, "derived", ()):
        return drive.hold.current, "hold.current derived from [armature] (closed-gap force balance x current_margin)"
    return drive.hold.current, "hold.current of the drive file"


def frequency_range(drive: Drive, options: TuneOptions) -> tuple[float, float, str]:
    """``(low, high, source of high)`` of the sweep in Hz."""
    if options.max_frequency > 0:
        high, src = options.max_frequency, "--max-frequency"
    elif drive.board.timer.max_pwm_frequency > 0:
        high, src = drive.board.timer.max_pwm_frequency, "board timer.max_pwm_frequency"
    else:
        high, src = DEFAULT_MAX_FREQUENCY, "default"
    return options.min_frequency, high, src


def realisable_frequencies(timer: Timer, low: float, high: float, whole_hz: bool = True):
    """Every frequency in ``low..high`` Hz the timer makes exactly, finest steps first.

    A period of the PWM is ``M = prescaler x period_ticks`` clock counts. For each
    whole ``M`` with ``clock / M`` in range -- and with ``whole_hz`` (the default, what
    :func:`tune` offers) only those where ``M`` divides the clock, so that the frequency
    is a whole number of Hz that reads back from a drive file exactly -- the smallest
    allowed prescaler that divides ``M`` with ``period_ticks <= 2**bits`` (and at least
    :data:`MIN_PERIOD_TICKS`) gives that frequency its longest period -- its finest duty
    resolution. Returns ``(frequency_hz, prescaler, period_ticks)`` arrays, ascending in
    frequency. A clock that is not a whole number of Hz makes no whole-Hz frequency.
    """
    limit = 2**timer.bits
    m_lo = max(MIN_PERIOD_TICKS, math.ceil(timer.clock / high - 1e-9))
    m_hi = math.floor(timer.clock / low + 1e-9)
    if whole_hz and float(timer.clock) != math.floor(timer.clock):
        m_hi = m_lo - 1
    if m_hi < m_lo:
        return np.zeros(0), np.zeros(0, np.int64), np.zeros(0, np.int64)
    m = np.arange(m_lo, m_hi + 1, dtype=np.int64)
    if whole_hz:
        m = m[int(timer.clock) % m == 0]
    best = np.zeros(m.size, np.int64)
    if timer.prescalers:
        ratios = iter(sorted(set(timer.prescalers)))
    else:
        first = max(1, m_lo // limit)
        ratios = iter(range(first, timer.prescaler_max + 1))
    for p in ratios:
        if p > m_hi // MIN_PERIOD_TICKS:
            break
        open_ = best == 0
        if not np.any(open_):
            break
        fit = open_ & (m % p == 0) & (m // p <= limit) & (m // p >= MIN_PERIOD_TICKS)
        best[fit] = p
    ok = best > 0
    m, best = m[ok], best[ok]
    period = m // best
    freq = (int(timer.clock) // m).astype(float) if whole_hz else timer.clock / m.astype(float)
    order = np.argsort(freq)
    return freq[order], best[order], period[order]


# --------------------------------------------------------------------------- physics
def _temp_guess(drive: Drive, supply, ambient, r_factor, duty):
    """A first guess of the settled temperature (degC), for the exact iteration to refine.

    Volt-second balance gives the continuous-conduction mean current
    ``I = (D V - (1 - D) V_off) / (R_c(T) + e)`` (ripple neglected; ``e`` the switch,
    sense and freewheel resistance weighted by the duty). Without ``e`` the fixed point
    ``T - T_a = R_th I^2 R_c(T)`` is the quadratic
    ``a rho T^2 + rho (1 - 20 a - a T_a) T - rho T_a (1 - 20 a) - R_th (D V - (1-D) V_off)^2 = 0``
    (``R_c = rho (1 + a (T - 20))``); one Newton step on the full estimate adds ``e``.
    """
    r_th = drive.thermal.resistance
    a = COPPER_ALPHA
    fw = drive.freewheel
    rho = coil_r20(drive, r_factor)
    extra_on = drive.switch.on_resistance + drive.board.sense.resistance
    extra_off = (drive.board.sense.resistance if drive.board.sense.position == "coil" else 0.0) + fw.resistance
    # The fast path's off-voltage even with split decay: only a first guess, which the
    # exact iteration (on the loop's hold path) refines; a worse guess costs iterations.
    v_off = fw.clamp_voltage - supply if fw.type == "clamp" else fw.diode_drop + fw.zener_voltage
    vd = np.maximum(duty * supply - (1.0 - duty) * v_off, 0.0)
    k = r_th * vd * vd
    qa = a * rho
    qb = rho * (1.0 - 20.0 * a - a * ambient)
    qc = -rho * ambient * (1.0 - 20.0 * a) - k
    temp = (np.sqrt(qb * qb - 4.0 * qa * qc) - qb) / (2.0 * qa)
    e = extra_off + duty * (extra_on - extra_off)
    r_c = rho * (1.0 + a * (temp - 20.0))
    r_eff = r_c + e
    power = k / r_th * r_c / (r_eff * r_eff) if r_th > 0 else 0.0 * r_c
    slope = r_th * power * rho * a * (1.0 / r_c - 2.0 / r_eff)
    temp = temp - (temp - ambient - r_th * power) / (1.0 - slope)
    return np.minimum(np.where(np.isfinite(temp) & (temp >= ambient), temp, ambient), CEILING_C)


def settle_voltage_mode(drive: Drive, supply, ambient, r_factor, l_factor, duty, frequency,
                        max_iter: int = 40):
    """Settled coil temperature (degC) under a fixed-duty hold, and the loop and steady
    state at it, for flat arrays of points.

    Solves ``T = T_a + R_th I_rms(T)^2 R_coil(T)`` (the same fixed point as
    :func:`coildrive.design.evaluate.hold_temperature`) by Newton steps with the slope
    ``dP/dT = P (dR_c/dT) (1/R_c - 2/R_on)`` (a fixed-duty coil current scales as
    ``1/R_on``), to :data:`TEMP_TOL`. Points that run away or do not settle get ``inf``
    (the loop and steady state there are at ``max_coil_temp``, as in evaluate). With an
    on/off cycle and a heat capacity, the hottest coil over the cycle instead
    (:func:`coildrive.design.thermal_cycle.cycle_states`, the hold's heat only: the sweep
    sizes no peak).
    """
    if cycling(drive):   # an on/off cycle with a heat capacity: its hottest coil
        temp = cycle_states(drive, supply, ambient, r_factor, l_factor, duty, frequency).hottest
        lp = loop(drive, supply, np.where(np.isfinite(temp), temp, drive.thermal.max_coil_temp),
                  r_factor, l_factor)
        return temp, lp, pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                                          lp.inductance, mixed=lp.mixed)
    r_th = drive.thermal.resistance
    a = COPPER_ALPHA
    dr_dt = coil_r20(drive, r_factor) * a
    temp = _temp_guess(drive, supply, ambient, r_factor, duty) if r_th > 0 else np.array(ambient, float)
    done = np.zeros(temp.shape, bool)
    bad = np.zeros(temp.shape, bool)
    lp = ss = None
    prev_t = prev_g = None
    for _ in range(max_iter if r_th > 0 else 1):
        lp = loop(drive, supply, np.where(bad, drive.thermal.max_coil_temp, temp), r_factor, l_factor)
        ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                              mixed=lp.mixed)
        if r_th == 0:
            done[:] = True
            break
        power = coil_heat(ss, lp.r_coil)   # copper, and an eddy term's core loss
        g = ambient + r_th * power
        slope = r_th * power * dr_dt * (1.0 / lp.r_coil - 2.0 / lp.r_on)
        if prev_t is not None:
            # once two points are known, the secant slope of g (Wegstein's idea)
            with np.errstate(divide="ignore", invalid="ignore"):
                sec = (g - prev_g) / (temp - prev_t)
            slope = np.where(np.isfinite(sec) & (np.abs(temp - prev_t) > 1e3 * TEMP_TOL), sec, slope)
        step = (temp - g) / (1.0 - slope)
        prev_t, prev_g = temp, g
        done = done | (np.abs(step) < TEMP_TOL) | bad
        if np.all(done):
            break
        new = np.where(done, temp, temp - step)
        bad = bad | ~np.isfinite(new) | (new > CEILING_C)
        temp = np.where(bad, temp, new)
    temp = np.where(done & ~bad, temp, np.inf)
    if np.any(~np.isfinite(temp)):
        lp = loop(drive, supply, np.where(np.isfinite(temp), temp, drive.thermal.max_coil_temp),
                  r_factor, l_factor)
        ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                              mixed=lp.mixed)
    return temp, lp, ss


#: The hold's power figures of a setting, in the order the objective sums them (W):
#: the elements of :class:`coildrive.model.losses.HoldLosses` the supply feeds.
POWER_PARTS = ("coil", "sense", "switch_conduction", "switch_switching") + HoldLosses.ELEMENTS


@dataclass(frozen=True)
class SettingFigures:
    """Figures of hold settings over the corners (arrays over settings; worst over corners).

    Currents in A, powers in W, temperatures in degC, all from
    :func:`coildrive.model.losses.hold_losses` at each corner's exact PWM steady state:
    ``switch_power`` is conduction (``R_switch int_on i^2 dt / T``) plus the switching
    estimate from the switch's ``rise_time``/``fall_time`` (``V I t / 2`` per edge);
    ``coil_power``, ``sense_power``, ``conduction_power``, ``switching_power``,
    ``switch_power`` and ``freewheel_power`` are each the largest of any corner.
    ``total_power`` -- the objective -- is the largest over the corners of all the hold
    power drawn from the supply at one corner (every entry of :data:`POWER_PARTS`);
    ``parts`` (settings x :data:`POWER_PARTS`) is its split at that corner, which
    ``worst_corner`` indexes; ``hottest_corner`` indexes the hottest coil.
    """

    min_mean: np.ndarray
    max_mean: np.ndarray
    ripple: np.ndarray
    coil_power: np.ndarray
    conduction_power: np.ndarray
    switching_power: np.ndarray
    switch_power: np.ndarray
    total_power: np.ndarray
    coil_temp: np.ndarray
    worst_corner: np.ndarray
    hottest_corner: np.ndarray
    sense_power: np.ndarray
    freewheel_power: np.ndarray
    parts: np.ndarray


def corner_duties(drive: Drive, grid: CornerGrid, compare, period) -> np.ndarray:
    """The duty the firmware runs at every corner for each setting: (settings x corners).

    The one place the sweep turns a setting's timer counts into duties. A fixed-duty hold
    runs ``compare / period`` at every corner; a hold whose compare follows the supply
    returns each corner's own duty here, and the objective, the feasibility and the
    figures follow it (:func:`evaluate_settings` takes this array as it is). ``drive``
    says which hold the firmware runs; today every voltage-mode hold here is fixed-duty.
    """
    duty = np.asarray(compare, float) / np.asarray(period, float)
    return np.broadcast_to(duty.reshape(-1, 1), (duty.size, len(grid)))


def evaluate_settings(drive: Drive, grid: CornerGrid, duty, frequency, chunk: int = CHUNK
                      ) -> SettingFigures:
    """Every hold setting at every corner of ``grid`` with self-heating, reduced to the
    worst over the corners.

    ``duty`` is the duty at each corner, (settings x corners) as :func:`corner_duties`
    gives it (a flat array over settings means the same duty at every corner);
    ``frequency`` Hz, an array over settings.
    """
    c = len(grid)
    duty = np.asarray(duty, float)
    duty = duty.reshape(-1, 1) if duty.ndim < 2 else duty
    frequency = np.asarray(frequency, float).ravel()
    n = max(duty.shape[0], frequency.size)
    duty, frequency = np.broadcast_to(duty, (n, c)), np.broadcast_to(frequency, (n,))
    names = ("min_mean", "max_mean", "ripple", "coil_power", "conduction_power", "switching_power",
             "switch_power", "total_power", "coil_temp", "sense_power", "freewheel_power")
    out = {k: np.empty(n) for k in names}
    parts = np.empty((n, len(POWER_PARTS)))
    worst = np.empty(n, np.int64)
    hottest = np.empty(n, np.int64)
    per = max(1, chunk // c)
    for s in range(0, n, per):
        e = min(n, s + per)
        m = e - s
        d = duty[s:e].ravel()
        f = np.repeat(frequency[s:e], c)
        sup, amb = np.tile(grid.supply, m), np.tile(grid.ambient, m)
        rf, lf = np.tile(grid.r_factor, m), np.tile(grid.l_factor, m)
        temp, lp, ss = settle_voltage_mode(drive, sup, amb, rf, lf, d, f)
        loss = hold_losses(drive, lp, ss, f, drive.switch.rise_time, drive.switch.fall_time)
        if ss.eddy_energy is not None:   # the coil's heat: its copper and the core's eddy loss
            loss = dataclasses.replace(loss, coil=coil_heat(ss, lp.r_coil))
        split = np.stack([np.broadcast_to(getattr(loss, name), d.shape) for name in POWER_PARTS])
        total = split.sum(axis=0)

        def grid2(x):
            return np.reshape(x, (m, c))
        mean = grid2(ss.mean)
        out["min_mean"][s:e] = mean.min(axis=1)
        out["max_mean"][s:e] = mean.max(axis=1)
        out["ripple"][s:e] = grid2(ss.ripple).max(axis=1)
        out["coil_power"][s:e] = grid2(loss.coil).max(axis=1)
        out["sense_power"][s:e] = grid2(loss.sense).max(axis=1)
        out["conduction_power"][s:e] = grid2(loss.switch_conduction).max(axis=1)
        out["switching_power"][s:e] = grid2(loss.switch_switching).max(axis=1)
        out["switch_power"][s:e] = grid2(loss.switch).max(axis=1)
        out["freewheel_power"][s:e] = grid2(loss.freewheel).max(axis=1)
        tt = grid2(total)
        k = tt.argmax(axis=1)
        out["total_power"][s:e] = tt[np.arange(m), k]
        worst[s:e] = k
        parts[s:e] = split.reshape(len(POWER_PARTS), m, c)[:, np.arange(m), k].T
        th = grid2(temp)
        out["coil_temp"][s:e] = th.max(axis=1)
        hottest[s:e] = th.argmax(axis=1)
    return SettingFigures(**out, worst_corner=worst, hottest_corner=hottest, parts=parts)


def _probe_corners(grid: CornerGrid) -> np.ndarray:
    """Corners that set the hold duty: lowest supply, hottest ambient, highest resistance
    (every inductance). Others are checked afterwards (see :func:`required_compare`)."""
    sel = ((grid.supply == grid.supply.min()) & (grid.ambient == grid.ambient.max())
           & (grid.r_factor == grid.r_factor.max()))
    return np.flatnonzero(sel)


def required_duty_points(drive: Drive, grid: CornerGrid, corners: np.ndarray, target, frequency,
                         max_iter: int = 20):
    """Smallest duty meeting ``target`` A at each listed corner with its own self-heating.

    For a hold that meets the target exactly at a corner the coil carries about the
    target, so the temperature hardly depends on the duty: iterate
    temperature (closed form for the RMS current of the last duty) -> duty
    (:func:`~coildrive.model.pwm.duty_for_mean`) until the temperature moves less than
    :data:`TEMP_TOL`. ``target``/``frequency`` are flat arrays over settings; returns
    an array (settings x listed corners); ``nan`` where the target is out of reach or
    the coil runs away.
    """
    n, c = np.size(target), corners.size
    tgt = np.repeat(np.asarray(target, float), c)
    f = np.repeat(np.asarray(frequency, float), c)
    sup = np.tile(grid.supply[corners], n)
    amb = np.tile(grid.ambient[corners], n)
    rf = np.tile(grid.r_factor[corners], n)
    lf = np.tile(grid.l_factor[corners], n)
    out = np.full(tgt.size, np.nan)
    settled = closed_form_cycle_temperature if cycling(drive) else closed_form_temperature
    for s in range(0, tgt.size, CHUNK):
        sl = slice(s, s + CHUNK)
        temp = settled(drive, amb[sl], rf[sl], tgt[sl])
        duty = np.full(temp.size, np.nan)
        for _ in range(max_iter):
            ok = np.isfinite(temp)
            lp = loop(drive, sup[sl], np.where(ok, temp, drive.thermal.max_coil_temp), rf[sl], lf[sl])
            duty = duty_for_mean(tgt[sl], f[sl], lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                                 start=duty, mixed=lp.mixed)
            ss = pwm_steady_state(np.nan_to_num(duty), f[sl], lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                                  lp.inductance, mixed=lp.mixed)
            # an eddy term's core loss heats the coil too: as the current that heats the
            # copper at this temperature as much (the fixed point is the same)
            heat_rms = ss.rms if ss.eddy_energy is None else np.sqrt(coil_heat(ss, lp.r_coil) / lp.r_coil)
            new = settled(drive, amb[sl], rf[sl], heat_rms)
            moved = np.abs(new - temp)
            temp = new
            if not np.any(np.isfinite(moved) & (moved >= TEMP_TOL)):
                break
        out[sl] = np.where(np.isfinite(temp), duty, np.nan)
    return out.reshape(n, c)


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class Candidate:
    """One hold setting of the sweep with its worst-case figures (SI, degC).

    ``hold_current_a`` is the level the compare value was chosen for; ``rank`` counts
    from 1 among the feasible settings (0: infeasible); ``failed`` names the
    constraints it misses. ``total_power_w`` is the objective: all the hold power drawn
    from the supply at ``worst_corner``, split by element in ``worst_corner_powers_w``
    (keys :data:`POWER_PARTS`); the other powers are each the largest of any corner.
    ``in_tie_band``: within ``tie_band`` of the least objective (see :func:`tune`).
    """

    rank: int
    frequency_hz: float
    prescaler: int
    period_ticks: int
    compare_ticks: int
    duty: float
    hold_current_a: float
    min_mean_current_a: float
    max_mean_current_a: float
    ripple_a: float
    coil_power_w: float
    conduction_power_w: float
    switching_power_w: float
    switch_power_w: float
    total_power_w: float
    coil_temp_c: float
    worst_corner: str
    hottest_corner: str
    feasible: bool
    failed: list[str]
    sense_power_w: float
    freewheel_power_w: float
    worst_corner_powers_w: dict
    in_tie_band: bool

    def to_dict(self) -> dict:
        return json_ready(dataclasses.asdict(self))


@dataclass(frozen=True)
class TuneResult:
    """The sweep, its ranking and the recommendation (plain data; arrays over settings).

    ``order`` indexes the feasible settings best first; the first ``band`` of them are
    within ``options.tie_band`` of the least objective. ``ok`` masks per constraint
    (see :data:`CONSTRAINTS`). ``recommendation`` is the best feasible setting or
    ``None``; then ``explanation`` says which constraint bound.
    """

    drive: Drive
    options: TuneOptions
    grid: CornerGrid
    min_frequency: float
    max_frequency: float
    max_frequency_source: str
    minimum_current: float
    minimum_basis: str
    target_current: float
    max_ripple: float
    frequency: np.ndarray
    prescaler: np.ndarray
    period: np.ndarray
    compare: np.ndarray
    level: np.ndarray
    figures: SettingFigures
    ok: dict
    feasible: np.ndarray
    order: np.ndarray
    frequencies: int
    levels: int
    recommendation: Candidate | None
    explanation: str
    seconds: float
    band: int = 0
    notes: list[str] = field(default_factory=list)
    exact_labels: dict = field(default_factory=dict)

    @property
    def points(self) -> int:
        """Settings evaluated (after merging levels that gave the same compare value)."""
        return int(self.frequency.size)

    @property
    def first_two_margin(self) -> tuple[float, float] | None:
        """Objective of rank 2 minus rank 1: ``(W, fraction of rank 1)``; ``None`` with
        fewer than two feasible settings. Negative when rank 1 won inside the tie band
        on switching loss or closeness to ``hold.frequency`` while drawing a little more."""
        if self.order.size < 2:
            return None
        first, second = (float(self.figures.total_power[k]) for k in self.order[:2])
        return second - first, (second - first) / first

    @property
    def switching_estimated(self) -> bool:
        return self.drive.switch.rise_time > 0 or self.drive.switch.fall_time > 0

    def candidate(self, k: int, rank: int = 0) -> Candidate:
        """The setting at index ``k`` as a :class:`Candidate`."""
        fg = self.figures
        failed = [name for name in CONSTRAINTS if not self.ok[name][k]]
        return Candidate(
            rank=rank, frequency_hz=float(self.frequency[k]), prescaler=int(self.prescaler[k]),
            period_ticks=int(self.period[k]), compare_ticks=int(self.compare[k]),
            duty=float(self.compare[k] / self.period[k]), hold_current_a=float(self.level[k]),
            min_mean_current_a=float(fg.min_mean[k]), max_mean_current_a=float(fg.max_mean[k]),
            ripple_a=float(fg.ripple[k]), coil_power_w=float(fg.coil_power[k]),
            conduction_power_w=float(fg.conduction_power[k]),
            switching_power_w=float(fg.switching_power[k]), switch_power_w=float(fg.switch_power[k]),
            total_power_w=float(fg.total_power[k]), coil_temp_c=float(fg.coil_temp[k]),
            worst_corner=(self.exact_labels[k][0] if k in self.exact_labels else
                          self.grid.label(int(fg.worst_corner[k]))),
            hottest_corner=(self.exact_labels[k][1] if k in self.exact_labels else
                            self.grid.label(int(fg.hottest_corner[k]))),
            feasible=bool(self.feasible[k]), failed=failed,
            sense_power_w=float(fg.sense_power[k]), freewheel_power_w=float(fg.freewheel_power[k]),
            worst_corner_powers_w={name: float(w) for name, w in zip(POWER_PARTS, fg.parts[k])},
            in_tie_band=bool(np.any(self.order[:self.band] == k)))

    def ranked(self, count: int | None = None) -> list[Candidate]:
        """The best ``count`` feasible settings (default ``options.top``), best first."""
        count = self.options.top if count is None else count
        return [self.candidate(int(k), r + 1) for r, k in enumerate(self.order[:count])]

    def hold_section(self) -> str:
        """The ``[hold]`` TOML section of the recommendation, to paste into the drive file."""
        return hold_toml(self.drive, self.recommendation) if self.recommendation else ""

    def recommended_drive(self) -> Drive:
        """The drive file with the recommended ``[hold]`` (as :meth:`hold_section` reads)."""
        if self.recommendation is None:
            raise ValueError("no feasible setting")
        return dataclasses.replace(self.drive, hold=recommended_hold(self.drive, self.recommendation))


def _exact(x: float) -> str:
    """A float as the shortest decimal that reads back to the same value."""
    return repr(float(x))


def recommended_hold(drive: Drive, c: Candidate) -> Hold:
    """``[hold]`` of a candidate: its level, its whole-Hz frequency, and a frequency
    tolerance tight enough that the timer solver picks the candidate's own prescaler and
    period."""
    timer = drive.board.timer
    tol = drive.hold.frequency_tolerance
    s = solve_timer(timer.clock, timer.bits, timer.prescaler_max, c.frequency_hz, tol, timer.prescalers)
    if (s.prescaler, s.period_ticks) != (c.prescaler, c.period_ticks):
        tol = 1e-9
    return dataclasses.replace(drive.hold, current=float(_exact(c.hold_current_a)),
                               frequency=float(c.frequency_hz), frequency_tolerance=tol)


def hold_toml(drive: Drive, c: Candidate) -> str:
    """The ``[hold]`` section for a candidate (bare SI numbers: they read back exactly;
    the frequency is a whole number of Hz, with its timer counts in the comment)."""
    h = recommended_hold(drive, c)
    clock = drive.board.timer.clock
    lines = [
        "[hold]",
        f"current = {_exact(h.current)}  # A ({c.hold_current_a * 1e3:.5g} mA)",
        f"frequency = {round(h.frequency)}  # Hz = {clock / 1e6:.6g} MHz / (prescaler {c.prescaler} x period "
        f"{c.period_ticks}), compare {c.compare_ticks}",
    ]
    if h.mode != "voltage":
        lines.append(f'mode = "{h.mode}"')
    else:
        lines.append(f'regulation = "{h.regulation}"')
    if h.fast_fraction > 0:   # a full bridge's mixed decay: the sweep evaluated the hold with it
        lines.append(f"fast_fraction = {_exact(h.fast_fraction)}  # of each off-time in fast decay")
    if h.frequency_tolerance != 0.01:
        lines.append(f"frequency_tolerance = {h.frequency_tolerance!r}"
                     + ("   # picks this exact prescaler and period" if h.frequency_tolerance == 1e-9 else ""))
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- the sweep
def check_tunable(drive: Drive, who: str) -> None:
    """Raise :class:`InputError` (naming the key) for a hold that tuning cannot step: a
    latching coil's pulses (the offline sweep of their lengths is :mod:`coildrive.tune.latch`,
    the live one :mod:`coildrive.tune.latch_live`), a current-mode hold, a closed-loop hold. ``who``: the start of
    the message (``"coildrive tune sweeps"``, ``"live tuning steps"``); the offline sweep
    and live tuning share these refusals. Both take a flux-linkage curve (every figure on
    the curve's exact orbit, :func:`coildrive.model.flux.orbit`, as in the design), an
    eddy term (its exact orbit, :func:`coildrive.model.eddy.orbit`; the coil's heat and
    power are the copper's plus the core's eddy loss, :func:`coildrive.model.pwm.coil_heat`),
    a mixed-decay hold (its three-segment orbit) and a moving armature on a full bridge
    (its slow decay); the live model at the bench point is :mod:`coildrive.tune.live_model`.

    Neither takes a current-mode hold's switching frequency or duty from anywhere: its
    range over the coil from cold (the ambient) to settled is the design's alone
    (:mod:`coildrive.design.current_sweep`, the ``current_mode_frequency`` check), so
    tuning never recommends a band or off time checked on the settled coil only."""
    if drive.hold.mode == "latch":
        raise InputError(drive.source, "hold.mode", f"{who} the PWM of a hold; a latching coil has "
                         "none: coildrive tune sweeps its pulse lengths (offline, or on the bench with --port)")
    if drive.hold.mode != "voltage":
        raise InputError(drive.source, "hold.mode", f"{who} the PWM of a voltage-mode hold; for "
                         "mode = \"current\" run coildrive design (it sizes the thresholds and checks "
                         "the switching with the coil from cold to settled)")
    if drive.hold.regulation == "closed_loop":
        raise InputError(drive.source, "hold.regulation", f"{who} a fixed or supply-table compare; "
                         "a closed-loop hold sets its own compare every PWM period and holds its "
                         "set-point at every corner: set hold.current and run coildrive design")


def tune(drive: Drive, options: TuneOptions | None = None) -> TuneResult:
    """Sweep the voltage-mode hold of ``drive`` (see the module docstring).

    Raises :class:`InputError` for options out of range or a sweep with no frequency.
    """
    options = options or TuneOptions()
    options.check()
    check_tunable(drive, "coildrive tune sweeps")
    t0 = time.perf_counter()
    grid = corner_grid(drive)
    f_lo, f_hi, f_src = frequency_range(drive, options)
    freq, pre, per = realisable_frequencies(drive.board.timer, f_lo, f_hi)
    if freq.size == 0:
        raise InputError("--max-frequency" if f_src == "--max-frequency" else "--min-frequency", "",
                         f"the timer ({drive.board.timer.clock:.6g} Hz clock, {drive.board.timer.bits}-bit) "
                         f"makes no whole-Hz frequency in {f_lo:.6g}..{f_hi:.6g} Hz")
    i_min, basis = minimum_hold_current(drive)
    target = options.margin * i_min
    levels = target * (1.0 + options.level_step * np.arange(options.levels))
    n_f, n_k = freq.size, levels.size
    if n_f * n_k * len(grid) > MAX_POINTS:
        raise InputError("--levels", "", f"{n_f} frequencies x {n_k} levels x {len(grid)} corners is more "
                         f"than {MAX_POINTS:,} points: narrow the frequency range or use fewer levels")
    max_ripple = options.max_ripple if options.max_ripple > 0 else options.max_ripple_fraction * target

    # Settings: every (frequency, level); the duty from the probe corners, in counts.
    f_s = np.repeat(freq, n_k)
    p_s = np.repeat(pre, n_k)
    n_s = np.repeat(per, n_k)
    lvl = np.tile(levels, n_f)
    probes = _probe_corners(grid)
    need = required_duty_points(drive, grid, probes, lvl, f_s).max(axis=1)
    reach = np.isfinite(need)
    comp = np.where(reach, np.ceil(np.nan_to_num(need, nan=1.0) * n_s - 1e-9), n_s).astype(np.int64)
    comp = np.clip(comp, 0, n_s)

    # Evaluate at every corner; add counts where another corner falls short (rare).
    figs = evaluate_settings(drive, grid, corner_duties(drive, grid, comp, n_s), f_s)
    for _ in range(64):
        short = (figs.min_mean < lvl) & (comp < n_s) & reach
        if not np.any(short):
            break
        idx = np.flatnonzero(short)
        comp[idx] += 1
        sub = evaluate_settings(drive, grid, corner_duties(drive, grid, comp[idx], n_s[idx]), f_s[idx])
        for name in dataclasses.fields(SettingFigures):
            getattr(figs, name.name)[idx] = getattr(sub, name.name)

    # Levels that gave the same compare value at a frequency: keep the lowest level.
    key = np.stack([np.repeat(np.arange(n_f), n_k), comp])
    _, first = np.unique(key, axis=1, return_index=True)
    keep = np.sort(first)
    sel = lambda a: a[keep]  # noqa: E731
    f_s, p_s, n_s, lvl, comp, reach = map(sel, (f_s, p_s, n_s, lvl, comp, reach))
    figs = SettingFigures(**{f.name: sel(getattr(figs, f.name)) for f in dataclasses.fields(SettingFigures)})

    ok = {
        "hold": reach & (figs.min_mean >= lvl) & np.isfinite(figs.min_mean),
        "duty_range": (comp > 0) & (comp < n_s),
        "ripple": figs.ripple <= max_ripple,
        "duty_steps": n_s >= options.min_duty_steps,
        "coil_temp": np.isfinite(figs.coil_temp) & (figs.coil_temp <= drive.thermal.max_coil_temp),
    }
    feasible = np.logical_and.reduce([ok[k] for k in CONSTRAINTS])
    order, band = rank_settings(np.flatnonzero(feasible), figs, f_s, drive.hold.frequency, options.tie_band)
    # The best settings again, exactly as the design evaluates them (the envelope, the
    # declared regulation, the hottest coil): they are ranked among themselves and lead.
    exact = order[:max(options.top, EXACT_SETTINGS)]
    labels = {}
    for k in exact:
        hf = hold_figures(dataclasses.replace(drive, hold=dataclasses.replace(drive.hold, current=float(lvl[k]))),
                          TimerSetting(int(p_s[k]), int(n_s[k]), float(f_s[k]), float(f_s[k])))
        comp[k] = hf.compare
        for name, value in (("min_mean", hf.min_mean), ("max_mean", hf.max_mean), ("ripple", hf.ripple),
                            ("coil_power", hf.coil_power), ("conduction_power", hf.conduction),
                            ("switching_power", hf.switching), ("switch_power", hf.switch),
                            ("total_power", hf.total), ("coil_temp", hf.coil_temp),
                            ("sense_power", hf.sense), ("freewheel_power", hf.freewheel)):
            getattr(figs, name)[k] = value
        figs.parts[k] = [hf.parts[name] for name in POWER_PARTS]
        labels[int(k)] = (hf.worst_corner, hf.hottest_corner)
        ok["hold"][k] = hf.reachable and hf.min_mean >= lvl[k]
        ok["duty_range"][k] = 0 < hf.compare < n_s[k]
        ok["ripple"][k] = hf.ripple <= max_ripple
        ok["coil_temp"][k] = math.isfinite(hf.coil_temp) and hf.coil_temp <= drive.thermal.max_coil_temp
    feasible = np.logical_and.reduce([ok[k] for k in CONSTRAINTS])
    lead, band = rank_settings(exact[feasible[exact]], figs, f_s, drive.hold.frequency, options.tie_band)
    done = set(exact.tolist())
    rest = np.array([k for k in order if k not in done and feasible[k]], int)
    order = np.concatenate([lead, rest]).astype(int)
    result = TuneResult(
        drive=drive, options=options, grid=grid, min_frequency=f_lo, max_frequency=f_hi,
        max_frequency_source=f_src, minimum_current=i_min, minimum_basis=basis, target_current=target,
        max_ripple=max_ripple, frequency=f_s, prescaler=p_s, period=n_s, compare=comp, level=lvl,
        figures=figs, ok=ok, feasible=feasible, order=order, frequencies=n_f, levels=n_k,
        recommendation=None, explanation="", seconds=0.0, band=band, exact_labels=labels)
    rec = result.candidate(int(order[0]), 1) if order.size else None
    explanation = "" if rec is not None else _explain(result)
    return dataclasses.replace(result, recommendation=rec, explanation=explanation,
                               seconds=time.perf_counter() - t0)


def rank_settings(idx: np.ndarray, figs: SettingFigures, frequency: np.ndarray, file_frequency: float,
                  tie_band: float) -> tuple[np.ndarray, int]:
    """Order the settings ``idx`` best first; return ``(order, settings in the tie band)``.

    Settings whose objective (``figs.total_power``) is within ``tie_band`` of the least
    come first, by switching loss (the largest of any corner), then by distance to
    ``file_frequency`` Hz, then objective and frequency (see :data:`DEFAULT_TIE_BAND`).
    The rest follow by objective, then ripple, then frequency.
    """
    if idx.size == 0:
        return idx, 0
    total = figs.total_power[idx]
    inside = total <= total.min() * (1.0 + tie_band)
    a, b = idx[inside], idx[~inside]
    a = a[np.lexsort((frequency[a], figs.total_power[a], np.abs(frequency[a] - file_frequency),
                      figs.switching_power[a]))]
    b = b[np.lexsort((frequency[b], figs.ripple[b], figs.total_power[b]))]
    return np.concatenate([a, b]), int(a.size)


def _explain(r: TuneResult) -> str:
    """Which constraint bound, when no setting meets them all."""
    fg = r.figures
    n = r.points
    parts = []
    for name in CONSTRAINTS:
        others = np.logical_and.reduce([r.ok[k] for k in CONSTRAINTS if k != name])
        blocked = others & ~r.ok[name]
        if not np.any(blocked):
            continue
        b = np.flatnonzero(blocked)
        if name == "ripple":
            k = b[np.argmin(fg.ripple[b])]
            why = (f"ripple <= {r.max_ripple * 1e3:.4g} mA (--max-ripple): the least ripple there is "
                   f"{fg.ripple[k] * 1e3:.4g} mA at {r.frequency[k]:.0f} Hz — allow more ripple or a "
                   "higher --max-frequency")
        elif name == "coil_temp":
            k = b[np.argmin(fg.coil_temp[b])]
            why = (f"coil temperature <= {r.drive.thermal.max_coil_temp:g} degC: the coolest is "
                   f"{fg.coil_temp[k]:.1f} degC — improve the coil's cooling or lower the hold current")
        elif name == "duty_steps":
            k = b[np.argmax(r.period[b])]
            why = (f"at least {r.options.min_duty_steps} compare steps (--min-steps): the most is "
                   f"{r.period[k]} at {r.frequency[k]:.0f} Hz — a lower frequency or a faster timer clock")
        elif name == "hold":
            why = (f"hold >= {r.target_current:.4g} A at every corner: out of reach even at full duty "
                   "— raise the minimum supply or lower the hold current")
        else:
            why = "a compare value strictly between 0 and the period: the hold needs 100 % duty"
        parts.append(f"{why} ({b.size} of {n} settings meet every other constraint)")
    if not parts:
        counts = ", ".join(f"{k} fails at {int(np.sum(~r.ok[k]))}" for k in CONSTRAINTS if np.any(~r.ok[k]))
        parts.append(f"several constraints together: {counts} of {n} settings")
    return "no feasible hold setting: " + "; ".join(parts)


def recommended_design(result: TuneResult):
    """:func:`coildrive.design.design` of the drive with the recommended ``[hold]``
    (``None`` without a recommendation): the source of the header and the cautions.

    Its compare value is the candidate's: both are the smallest count that holds at every
    corner (they could differ by one count only where the two self-heating tolerances
    straddle a count boundary; the CLI notes it if so).
    """
    if result.recommendation is None:
        return None
    from ..design import design

    return design(result.recommended_drive())
