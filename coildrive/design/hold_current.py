"""Current-mode hold (``[hold] mode = "current"``): thresholds, figures and checks.

One hold strategy (see :mod:`coildrive.design.holds`): :func:`design` is what
:func:`coildrive.design.design` runs for a current-mode drive. It starts from the fixed-duty design of the same drive (kept as
the *fixed-duty fallback*: ``timer``, ``duty_table`` and ``_HOLD_COMPARE_TICKS`` keep
their voltage-mode meaning, for firmware that starts the hold open-loop or falls back
to it), then replaces everything the hold decides with the current-mode model of
:mod:`coildrive.model.current_mode`:

* thresholds in ADC codes of the current-sense channel (a code ``c`` trips at
  ``c x LSB`` A): the lower (hysteretic) or peak (off-time) code is the smallest whose
  mean current meets ``hold.current`` at every corner with self-heating; the band
  (``hold.band``) or off time (``hold.off_time``, made by the board's timer in whole
  ticks) is sized when not given: among the bands / off times whose switching
  frequency fits the allowed range at every corner, the one nearest ``hold.frequency``
  at the nominal point (the coil taken at the temperature a hold at ``hold.current``
  gives it, for sizing only);
* coil temperatures, pull-in, peak phase, release, ADC thresholds and cautions at the
  temperatures the current-mode hold settles at;
* checks: the switching frequency stays inside ``hold.min_frequency`` ..
  ``hold.max_frequency`` at every corner with the coil anywhere from cold to settled
  (:mod:`coildrive.design.current_sweep`; the JSON's range and duties cover that span
  too, and the sizing takes the corners cold too), the threshold is reachable at every corner,
  the sense position suits the control (hysteretic needs the coil path), the codes fit
  the ADC, the off time fits the timer.
* hold losses (each freewheel element and the switch, from the exact switching cycle by
  the element formulas of :mod:`coildrive.model.losses`), their rating checks and
  cautions, and what split decay would save; with split decay
  (``freewheel.split_decay``) the off segments take the slow path (the thresholds and
  the switching frequency follow it) and the release the fast one.
* on the drooping bus (``supply.source_resistance``) the corners are taken again with the
  coil cold (at the ambient): the lowest bus in the peak, and on a full bridge every
  turn-off's fast decay into the bus (:mod:`coildrive.design.bridge_bus`) and the pump-up,
  each the worse of the settled and the cold coil.
* with an ``[armature]`` the pull-in is the moving armature's run, the hold regulated on
  the seated coil, the release from the band's top until the armature is back open; with
  an eddy-current term too (the run's eddy branch, the thresholds on the seated coil's
  sensed current, the hold's force from the magnetising current's RMS); after a boosted
  peak the comparator carries an armature still in flight at the threshold on to the seat
  (a linear coil, an eddy term too; on a drooping main supply without either an eddy term or
  a bouncing seat); with an eddy term or a bouncing seat on a drooping main supply only
  where the armature seats within the peak at every corner (else refused in one line
  naming ``hold.mode``).

In the design JSON ``hold.frequency_hz`` is the switching frequency at the nominal
point, ``hold.duty`` the largest switch-on fraction over the corners (1 where the
threshold is out of reach) and ``hold.current_step_a`` one ADC code; the top-level
``current_mode`` object holds the thresholds and the frequency range.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..config import Drive
from ..errors import InputError
from ..model.circuit import full_bridge, loop, split_decay, two_paths
from ..model.current_mode import (CurrentModeSteadyState, MixedPath, hysteretic_steady_state,
                                  off_time_steady_state, sensed_threshold)
from ..model.eddy import EddyCoil
from ..model.flux import FluxCoil
from ..model.losses import HoldLosses, element_powers
from ..model.pwm import coil_heat
from ..model.rl import decay_current, decay_time, rise_current, rise_time
from ..model.thermal import closed_form_temperature, settle_temperature
from . import hold_voltage
from .hold_voltage import closing_checks
from .checks import base_checks
from .corners import CornerGrid, corner_grid, nominal_point
from .current_sweep import steady_state, sweep
from .evaluate import PointResults, moving_armature, release_figures, switch_voltage_peak
from .figures import (adc_code, adc_thresholds, corners_of, hold_spread, loss_figures, pull_in_result,
                      release_result, saving_figures, slow_hold_drive)
from .boost import boost_outputs, boosted_points, boosted_turn_offs, peak_in_force
from .bridge_bus import bridge_bus_checks, bridge_release
from .diagnostics import rise_check, seat_check
from .eddy import eddy_result
from .peak import plan_peak, shortest_peak_current, switch_lag
from .supply import rise_current as bus_rise_current
from .supply import rise_time as bus_rise_time
from .supply import supply_checks, supply_result
from .turnoff import turn_offs
from .result import Check, CurrentModeResult, Design, HoldResult, Thresholds
from .thermal_cycle import (HeatPoints, cycle_caution, cycle_result, cycling, thermal_cautions,
                            thermal_checks)
from .timer import solve_timer, timer_for
from .topology import (bridge_checks, pumped_release, topology_cautions, topology_result,
                       worse_bridge)

#: Upper end of the allowed switching range when neither ``hold.max_frequency`` nor the
#: board's ``timer.max_pwm_frequency`` gives one (our choice, as for ``coildrive tune``).
DEFAULT_MAX_FREQUENCY = 100_000.0
#: Fewest ADC samples per shortest switching segment before the sampling lag deserves a
#: ``hold.sense_delay`` (our choice).
MIN_SAMPLES_PER_SEGMENT = 4


def lsb_current(drive: Drive) -> float:
    """Current in A of one code of the current-sense ADC channel."""
    b = drive.board
    return b.adc.reference / 2**b.adc.bits / (b.sense.resistance * b.sense.gain)


def allowed_range(drive: Drive) -> tuple[float, float, str]:
    """``(low, high, source of high)``: the switching frequencies allowed, Hz."""
    h = drive.hold
    if h.max_frequency > 0:
        return h.min_frequency, h.max_frequency, "hold.max_frequency"
    if drive.board.timer.max_pwm_frequency > 0:
        return h.min_frequency, drive.board.timer.max_pwm_frequency, "board timer.max_pwm_frequency"
    return h.min_frequency, DEFAULT_MAX_FREQUENCY, "default"


def settle(drive: Drive, supply, ambient, r_factor, l_factor, lower_a, upper_a, off_time, delay,
           peak_time=0.0):
    """Coil temperature (degC, ``inf`` on runaway), loop and steady state at each point
    after a long current-mode hold (the fixed point of model/thermal.py), or with an on/off
    cycle and a heat capacity the hottest over the cycle, each actuation a peak of
    ``peak_time`` s, the hold and the release (:mod:`coildrive.design.thermal_cycle`)."""
    pts = heat_points(drive, supply, ambient, r_factor, l_factor, lower_a, upper_a, off_time,
                      delay, str)
    temp = pts.temperature(drive, peak_time)
    lp = loop(drive, supply, np.where(np.isfinite(temp), temp, drive.thermal.max_coil_temp),
              r_factor, l_factor)
    return temp, lp, steady_state(drive, lp, lower_a, upper_a, off_time, delay)


def heat_points(drive: Drive, supply, ambient, r_factor, l_factor, lower_a, upper_a, off_time,
                delay, label) -> HeatPoints:
    """The points as :class:`~coildrive.design.thermal_cycle.HeatPoints`: the coil's loss
    is that of the regulated current, ``rms^2 R(T)`` of the exact switching cycle."""
    def state(lp):
        return steady_state(drive, lp, lower_a, upper_a, off_time, delay)
    return HeatPoints(np.asarray(supply, float), np.asarray(ambient, float), r_factor, l_factor,
                      {}, label, state)


def _tiled(grid: CornerGrid, n: int):
    return (np.tile(grid.supply, n), np.tile(grid.ambient, n), np.tile(grid.r_factor, n),
            np.tile(grid.l_factor, n))


def _smallest_holding(drive: Drive, grid: CornerGrid, codes: np.ndarray, band: int,
                      off_time: float, delay: float, lsb: float, peak_time: float = 0.0) -> int | None:
    """Smallest code (lower for hysteretic, peak for off-time) whose mean meets the hold
    current at every corner, regulated everywhere; ``None`` if none of ``codes`` does
    (``peak_time``: the peak an on/off cycle heats the coil with, s)."""
    c = len(grid)
    n = codes.size
    sup, amb, rf, lf = _tiled(grid, n)
    if drive.hold.control == "hysteretic":
        lo, hi = np.repeat(codes, c) * lsb, np.repeat(codes + band, c) * lsb
    else:
        lo, hi = 0.0, np.repeat(codes, c) * lsb
    temp, lp, ss = settle(drive, sup, amb, rf, lf, lo, hi, off_time, delay, peak_time)
    ok = ((ss.mean >= drive.hold.current) & ss.regulated & np.isfinite(temp)).reshape(n, c).all(axis=1)
    idx = np.flatnonzero(ok)
    return int(codes[idx[0]]) if idx.size else None


def _sizing_loops(drive: Drive, grid: CornerGrid):
    """Loops at the nominal point and the corners with the coil at the temperature a hold
    at ``hold.current`` gives it, then the corners with the coil cold (at the ambient: the
    hold switches at every temperature between, :mod:`coildrive.design.current_sweep`:
    its extremes lie at the two ends except a hysteretic period's extreme inside the span);
    sizing only, the design then evaluates the whole span exactly and checks it."""
    nom = nominal_point(drive)
    amb = np.concatenate([nom.ambient, grid.ambient])
    rf = np.concatenate([nom.r_factor, grid.r_factor])
    hot = closed_form_temperature(drive, amb, rf, drive.hold.current)
    hot = np.where(np.isfinite(hot), hot, drive.thermal.max_coil_temp)
    temp = np.concatenate([hot, grid.ambient])
    sup = np.concatenate([nom.supply] + [grid.supply] * 2)
    rf = np.concatenate([nom.r_factor] + [grid.r_factor] * 2)
    lf = np.concatenate([nom.l_factor] + [grid.l_factor] * 2)
    return loop(drive, sup[None, :], temp[None, :], rf[None, :], lf[None, :])


def _fits(drive: Drive, freq: np.ndarray, regulated: np.ndarray) -> np.ndarray:
    """Per row of ``freq`` (candidates x [nominal, corners...]): regulated everywhere and
    every corner inside the allowed switching range."""
    f_lo, f_hi, _ = allowed_range(drive)
    return regulated.all(axis=1) & (freq[:, 1:].min(axis=1) >= f_lo) & (freq[:, 1:].max(axis=1) <= f_hi)


def _pick(drive: Drive, freq: np.ndarray, regulated: np.ndarray) -> int:
    """Row of ``freq`` (candidates x [nominal, corners...]) to use: among the candidates
    whose every corner is regulated and inside the allowed range, the one whose nominal
    frequency is nearest ``hold.frequency`` (in ratio); if none fits, the nearest of those
    regulated everywhere (with an eddy term a band no wider than the switching step has no
    orbit at some corner), else the nearest of all."""
    ok = _fits(drive, freq, regulated)
    with np.errstate(divide="ignore", invalid="ignore"):
        err = np.abs(np.log(freq[:, 0] / drive.hold.frequency))
    err = np.where(np.isfinite(err) & regulated[:, 0], err, np.inf)
    everywhere = regulated.all(axis=1)
    if np.any(ok):
        err = np.where(ok, err, np.inf)
    elif np.any(everywhere & np.isfinite(err)):
        err = np.where(everywhere, err, np.inf)
    return int(np.argmin(err))


def _size_band(drive: Drive, grid: CornerGrid, lsb: float, c0: int, full: int) -> int:
    """Band in codes (centred on the hold current) for :func:`_pick`."""
    lp = _sizing_loops(drive, grid)

    def pick(b):
        lo = np.maximum(c0 - b // 2, 1)[:, None]
        ss = hysteretic_steady_state(lo * lsb, (lo + b[:, None]) * lsb, lp.v_on, lp.r_on, lp.r_off,
                                     lp.v_off, lp.inductance, drive.hold.sense_delay)
        if lp.mixed is not None:   # mixed decay: the fast part's time from the slow orbit's at nominal
            ss = hysteretic_steady_state(lo * lsb, (lo + b[:, None]) * lsb, lp.v_on, lp.r_on, lp.r_off,
                                         lp.v_off, lp.inductance, drive.hold.sense_delay,
                                         drive.hold.fast_fraction * ss.t_off[:, :1], lp.mixed)
        return (_pick(drive, ss.frequency, ss.regulated),
                bool(np.any(_fits(drive, ss.frequency, ss.regulated))), ss)

    n = max(2, min(full - c0, 4096))
    b = np.arange(1, n + 1)
    ind = lp.inductance
    curve = isinstance(ind.magnetising if isinstance(ind, EddyCoil) else ind, FluxCoil)
    if curve and n > 64:
        # a saturating coil's segments are quadratures, not logarithms: every band at
        # every point would take seconds. The frequency falls as the band widens at every
        # point, so the bands that fit form one run and the nominal's distance to
        # hold.frequency has one minimum there: pick among 48 log-spaced bands, then among
        # every band between the pick's neighbours (the band the full search finds). Where
        # none of the 48 fits, the run (if any) may lie between two of them: every band of
        # the gaps that :func:`_gaps` cannot rule out.
        coarse = np.unique(np.round(np.geomspace(1, n, 48)).astype(int))
        k, fits, ss = pick(coarse)
        if fits:
            b = np.arange(coarse[max(k - 1, 0)], coarse[min(k + 1, coarse.size - 1)] + 1)
        else:
            b = _gaps(drive, coarse, ss.frequency, ss.regulated,
                      np.zeros_like(ss.regulated) if ss.chatter is None else ss.chatter)
    return int(b[pick(b)[0]])


def _gaps(drive: Drive, coarse: np.ndarray, freq: np.ndarray, regulated: np.ndarray,
          chatter: np.ndarray) -> np.ndarray:
    """The bands :func:`_pick` may choose when none of the ``coarse`` bands (rows of
    ``freq`` / ``regulated`` / ``chatter``: [nominal, corners...]) fits. As the band widens
    the frequency falls at every regulated point, a point that chatters (a band no wider
    than an eddy term's step) stops chattering and one out of reach stays so. So a gap
    between two coarse bands holds no fitting band where a point still chatters at its
    wider end or is already out of reach at its narrower one, or where both ends are
    regulated everywhere and its wider end is still too fast somewhere or its narrower end
    already too slow somewhere; and :func:`_pick`'s fallback, the nominal frequency nearest
    ``hold.frequency``, lies in the gap where the nominal frequency crosses it or where
    the bands stop (or start) being regulated everywhere. Every other gap is skipped."""
    f_lo, f_hi, _ = allowed_range(drive)
    every = regulated.all(axis=1)
    fmax, fmin, nom = freq[:, 1:].max(axis=1), freq[:, 1:].min(axis=1), freq[:, 0]
    side = np.sign(nom - drive.hold.frequency)
    out_of_reach = ~regulated & ~chatter
    keep = [coarse]
    for j in range(coarse.size - 1):
        a, b = j, j + 1
        ruled_out = (np.any(chatter[b]) or np.any(out_of_reach[a])
                     or every[a] and every[b] and (fmax[b] > f_hi or fmin[a] < f_lo))
        # the fallback's candidates: regulated everywhere if any coarse band is (a point
        # regulated at neither end of a gap is not regulated inside it), else any
        turns = side[a] != side[b] or every[a] != every[b] or (
            not np.any(every) and np.any(regulated[a] != regulated[b]))
        if not ruled_out or turns:
            keep.append(np.arange(coarse[a] + 1, coarse[b]))
    return np.unique(np.concatenate(keep))


def _size_off_time(drive: Drive, grid: CornerGrid, peak_a: float) -> float:
    """Off time (s) for :func:`_pick`, from 400 log-spaced values up to 1 / min_frequency."""
    lp = _sizing_loops(drive, grid)
    f_lo, f_hi, _ = allowed_range(drive)
    t = np.geomspace(0.01 / max(f_hi, drive.hold.frequency), 1.0 / min(f_lo, drive.hold.frequency), 400)
    ss = off_time_steady_state(peak_a, t[:, None], lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                               lp.inductance, drive.hold.sense_delay, lp.mixed)
    return float(t[_pick(drive, ss.frequency, ss.regulated)])


def _fast_one_shot(drive: Drive, grid: CornerGrid, lsb: float, c0: int, band: int) -> tuple:
    """A full bridge's mixed decay under hysteretic control: each off-time's fast part is a
    fixed time the firmware's one-shot makes, ``fast_fraction`` x the slow-decay off-time at
    the nominal point (the coil at the hold's temperature) of the band centred on the hold
    current (the band's sizing); ``(time s, prescaler, ticks, target s)`` on the board's
    timer."""
    lp = _sizing_loops(drive, grid)
    lo = max(c0 - band // 2, 1)
    ss = hysteretic_steady_state(lo * lsb, (lo + band) * lsb, lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                                 lp.inductance, drive.hold.sense_delay)
    target = drive.hold.fast_fraction * float(np.ravel(ss.t_off)[0])
    if not (bool(np.ravel(ss.regulated)[0]) and target > 0):
        return 0.0, 1, 0, 0.0   # the threshold out of reach at the nominal point: no fast part (checked)
    timer = drive.board.timer
    t = solve_timer(timer.clock, timer.bits, timer.prescaler_max, 1.0 / target,
                    drive.hold.frequency_tolerance, timer.prescalers)
    return t.prescaler * t.period_ticks / timer.clock, t.prescaler, t.period_ticks, target


def choose_thresholds(drive: Drive, grid: CornerGrid, peak_time: float = 0.0) -> Thresholds:
    """The current-mode setting for ``drive`` (see the module docstring; ``peak_time``: the
    peak an on/off cycle heats the coil with, s)."""
    h = drive.hold
    lsb = lsb_current(drive)
    full = 2**drive.board.adc.bits - 1
    c0 = max(1, math.ceil(h.current / lsb - 1e-9))
    delay = h.sense_delay
    timer = drive.board.timer
    # codes tried at once, lowest first (the answer is the first that holds): a saturating
    # coil's segments are quadratures, so fewer at a time (the answer lies a few codes up)
    chunk = 16 if drive.coil.flux_current else 256
    if h.control == "hysteretic":
        sized = h.band <= 0
        band = _size_band(drive, grid, lsb, c0, full) if sized else max(1, round(h.band / lsb))
        fast = (0.0, 0, 0, 0.0) if not (full_bridge(drive) and h.fast_fraction > 0) else \
            _fast_one_shot(drive, grid, lsb, c0, band)
        start = max(1, c0 - band - 2)
        code = None
        while code is None and start + band <= full:
            codes = np.arange(start, min(full - band, start + chunk - 1) + 1)
            code = _smallest_holding(drive, grid, codes, band, fast[0], delay, lsb, peak_time)
            start = int(codes[-1]) + 1
        lower = code if code is not None else min(c0, full - band)
        return Thresholds("hysteretic", lsb, lower, lower + band, *fast, delay, sized)
    sized = h.off_time <= 0
    target = _size_off_time(drive, grid, c0 * lsb) if sized else h.off_time
    t = solve_timer(timer.clock, timer.bits, timer.prescaler_max, 1.0 / target,
                    h.frequency_tolerance, timer.prescalers)
    off = t.prescaler * t.period_ticks / timer.clock
    start, code = c0, None
    while code is None and start <= full:
        codes = np.arange(start, min(full, start + chunk - 1) + 1)
        code = _smallest_holding(drive, grid, codes, 0, off, delay, lsb, peak_time)
        start = int(codes[-1]) + 1
    peak = code if code is not None else c0
    return Thresholds("off_time", lsb, 0, peak, off, t.prescaler, t.period_ticks, target, delay, sized)


def evaluate_current(drive: Drive, th: Thresholds, supply, ambient, r_factor, l_factor,
                     peak_time, heat_peak: float | None = None, mechanics: bool = True,
                     coil_temp=None) -> tuple[PointResults, CurrentModeSteadyState]:
    """Every design figure at the points with the current-mode hold ``th`` (the
    counterpart of :func:`coildrive.design.evaluate.evaluate`; the release starts from the
    top of the ripple) after a peak of ``peak_time`` s; ``heat_peak`` (s, default
    ``peak_time``): the peak an on/off cycle heats the coil with. With split decay the hold (thresholds, switching, heat) takes
    the slow path and the release the fast one, as in voltage mode. With an ``[armature]``
    (``mechanics``: run its model) the pull-in is the seat, the peak's end current the
    moving armature's, the release the time until it is back open (as
    :func:`coildrive.design.evaluate.evaluate`). ``coil_temp`` (degC at each point): the
    coil at that temperature instead of the hold's settled one (a cold start)."""
    supply, ambient, r_factor, l_factor = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (supply, ambient, r_factor, l_factor)))
    lower = th.lower_a if th.control == "hysteretic" else 0.0
    if coil_temp is None:
        temp, lp, cm = settle(drive, supply, ambient, r_factor, l_factor, lower, th.upper_a,
                              th.off_time_s, th.delay_s, peak_time if heat_peak is None else heat_peak)
    else:
        temp = np.broadcast_to(np.asarray(coil_temp, float), supply.shape)
        lp = loop(drive, supply, temp, r_factor, l_factor)
        cm = steady_state(drive, lp, lower, th.upper_a, th.off_time_s, th.delay_s)
    ss = cm.as_pwm()
    if lp.mixed is not None and drive.supply.droops and drive.supply.sink:
        ss = dataclasses.replace(ss, fast_pulse=fast_pulses(drive, th, lp, cm))
    # the peak on the drooping bus where [supply] source_resistance is given (the hold's
    # regulation takes the bus's droop out of the hold)
    t_pull = bus_rise_time(drive, lp, drive.pull_in.current, lp.inductance)
    i_peak = bus_rise_current(drive, lp, peak_time, lp.inductance)
    power = coil_heat(ss, lp.r_coil)   # the copper's, and an eddy term's core loss
    i_off = ss.i_max
    if two_paths(drive):   # split decay, or a full bridge: the release decays fast
        finite = np.where(np.isfinite(temp), temp, drive.thermal.max_coil_temp)
        lp_rel = loop(drive, supply, finite, r_factor, l_factor, path="release")
    else:
        lp_rel = lp
    t_drop, t_zero, energy, i_fast = release_figures(drive, lp, lp_rel, i_off)
    arm = None
    if drive.armature is not None and mechanics:
        # the peak with the moving armature, the hold's switching cycle on the seated coil
        # (lp.inductance is inductance_closed) for its force, the release from the top of
        # the band until the armature is back on the open stop
        # (a boosted peak: duty 0 keeps the runs' PWM flight finite; where the armature is
        # not yet seated at the threshold the comparator's flight replaces it below)
        arm, t_pull, i_peak, t_drop, t_zero, energy, i_fast = moving_armature(
            drive, lp, lp_rel, l_factor, ss, peak_time, None, np.shape(supply), i_fast, 0.0)
    interrupt, v_sw = switch_voltage_peak(drive, lp, lp_rel, i_peak, ss.i_max, i_fast)
    res = PointResults(supply=supply, ambient=ambient, coil_temp=temp, r_factor=r_factor,
                       l_factor=l_factor, loop=lp, pull_in_time=t_pull, peak_end_current=i_peak,
                       hold=ss, coil_power=power, release_time=t_drop, release_zero_time=t_zero,
                       release_energy=energy, interrupt_current=interrupt,
                       peak_switch_voltage=v_sw, armature=arm, release_loop=lp_rel)
    if arm is not None and drive.supply.boosted and not in_flight_refused(drive):
        # the armature still in flight at the threshold: the hold's comparator carries it on
        from .boost_armature import threshold_pull_in
        res = threshold_pull_in(drive, res, comparator(th))
    return res, cm


def comparator(th: Thresholds):
    """The thresholds ``th`` as the model's comparator
    (:class:`~coildrive.model.armature_boost.Comparator`): an armature in flight after a
    boosted peak."""
    from ..model.armature_boost import Comparator

    hyst = th.control == "hysteretic"
    return Comparator(hyst, th.upper_a, th.lower_a if hyst else 0.0, 0.0 if hyst else th.off_time_s, th.delay_s)


def in_flight_refused(drive: Drive) -> str | None:
    """Why a current-mode hold after a boosted peak cannot carry an armature still in
    flight at the threshold (the comparator's flight,
    :func:`~coildrive.design.boost_armature.threshold_pull_in`, is a linear coil's, an eddy
    term's too -- not over flux-linkage curves; on a drooping main supply neither with an eddy term, whose terminal
    current's steps the bus floor's top does not take, nor with a bouncing seat, whose
    rebound's motional term would lift the current past it in the comparator's delay), in
    words; ``None`` where it can."""
    if drive.coil.flux_current:
        return "the armature's open and seated flux-linkage curves"
    if drive.coil.eddy_resistance and drive.supply.droops:
        return "an eddy-current term on a drooping main supply"
    if drive.supply.droops and drive.armature.restitution > 0:
        return "a bouncing seat (armature.restitution) on a drooping main supply"
    return None


def fast_pulses(drive: Drive, th: Thresholds, lp, cm: CurrentModeSteadyState) -> tuple:
    """A full bridge's current-mode mixed decay on a drooping bus that sinks (a linear
    coil, a curve or an eddy term; after a boosted peak too): ``(t_fast, T)`` per point,
    each period's fast part at most ``t_fast`` s and the periods at least ``T`` s long
    whatever the bus does, for :func:`coildrive.model.bus_decay.mixed_hold_rise` (its bound
    grows with ``t_fast`` and shrinks with ``T``).

    The fixed off-time: ``t_fast = fast_fraction x t_off`` and ``T = t_off`` -- coming down
    from the peak's end above the peak threshold the switch turns straight off again, so a
    period may hold no on-time at all. Hysteretic: ``t_fast`` the one-shot (cut short
    where the lower threshold comes first: a shorter pulse in a shorter period bounds
    less), and ``T`` that plus the on-time's rise from the lower threshold (the off-time
    ends at or below it) to the upper at the highest bus: the bus stays within ``R_s
    i_top`` of the source (``C du/dt = -u / R_s + j``, ``|j| <= i_top``), ``i_top`` the most
    current the coil ever carries -- the hold's top (with an eddy term the larger of the
    magnetising and the sensed top), the peak's end (at most ``V_s / R_on``; after a
    boosted peak its end current) -- so ``V_hi = V_s + R_s i_top``. A curve's rise is its
    quadrature (:mod:`coildrive.model.rl` hands over). With an eddy term the state is the
    magnetising current and the thresholds are sensed: the on-time ends at the upper
    threshold's magnetising current at ``V_hi`` (the lowest) and starts at most at the lower
    threshold's met in the fast part with ``V_f = V_hi + 2 V_d`` (the highest; the slow
    part's is lower). Where the threshold is out of reach (no switching) no fast part."""
    s, m, ind = drive.supply, lp.mixed, lp.inductance
    reg = np.asarray(cm.regulated, bool)
    if th.control != "hysteretic":
        return np.where(reg, m.fraction * th.off_time_s, 0.0), np.where(reg, th.off_time_s, 1.0)
    top = np.maximum(np.asarray(cm.i_max, float), np.asarray(lp.v_on, float) / np.asarray(lp.r_on, float))
    if cm.terminal_max is not None:
        top = np.maximum(top, np.asarray(cm.terminal_max, float))
    if s.boosted:
        from .boost import end_current
        top = np.maximum(top, end_current(drive, lp))
    v_hi = np.asarray(lp.v_on, float) + s.source_resistance * top
    end, start = th.upper_a, th.lower_a
    if isinstance(ind, EddyCoil):   # the thresholds as magnetising currents (docstring)
        end = sensed_threshold(th.upper_a, v_hi, lp.r_on, ind.resistance)
        start = sensed_threshold(th.lower_a, -(v_hi + 2.0 * drive.freewheel.diode_drop), m.r_fast,
                                 ind.resistance)
    period = rise_time(end, np.minimum(start, end), v_hi, lp.r_on, ind) + th.off_time_s
    return np.where(reg, th.off_time_s, 0.0), np.where(reg, period, 1.0)


def current_losses(drive: Drive, res: PointResults, cm: CurrentModeSteadyState) -> HoldLosses:
    """Element powers (W) of the current-mode hold at the points of ``res``: the same
    element formulas as the PWM hold (:func:`coildrive.model.losses.element_powers`)
    over the exact switching cycle, ``1 / T`` periods per second (where the threshold is
    out of reach the switch stays on: DC, no switching loss)."""
    sw = drive.switch
    return element_powers(drive, res.loop, cm.charge_on, cm.square_on, cm.charge_off,
                          cm.square_off, 1.0 / cm.period, cm.i_min, cm.i_max, cm.dcm,
                          cm.frequency, sw.rise_time, sw.fall_time, charge_fast=cm.charge_fast,
                          square_fast=cm.square_fast)


def _split_saving(drive: Drive, grid: CornerGrid, res: PointResults, cm: CurrentModeSteadyState,
                  loss: HoldLosses, fallback, peak_time: float) -> dict | None:
    """What split decay would save in a current-mode hold on a fast-decay path: the same
    drive with the slow hold path, its thresholds chosen again (so the switching
    frequency changes too, over the coil's temperatures from cold to settled). ``None`` with
    a diode path or with split decay fitted."""
    if drive.freewheel.type == "diode" or split_decay(drive):
        return None
    slow, assumed = slow_hold_drive(drive)
    th = choose_thresholds(slow, grid, peak_time)
    rs, cms = evaluate_current(slow, th, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                               peak_time, mechanics=False)
    ls = current_losses(slow, rs, cms)
    fb = fallback.hold.split_decay_saving or {}
    out = saving_figures(drive, res, loss, float(np.max(cm.duty)), rs, ls,
                             float(np.max(cms.duty)), fb.get("compare_ticks_split"), assumed)
    hyst = th.control == "hysteretic"
    span = sweep(slow, grid, rs.coil_temp, th.lower_a if hyst else 0.0, th.upper_a, th.off_time_s, th.delay_s)
    out.update(min_frequency_split_hz=0.0 if span is None else span.min_frequency_hz,
               max_frequency_split_hz=0.0 if span is None else span.max_frequency_hz,
               lower_code_split=th.lower_code if th.control == "hysteretic" else None,
               upper_code_split=th.upper_code,
               off_time_split_s=None if th.control == "hysteretic" else th.off_time_s)
    return out


def _split_result(drive: Drive, fallback, cm: CurrentModeSteadyState):
    """The split-decay timing of a current-mode hold: the fixed-duty fallback's lead and
    lag counts, and as the on-time the shortest switch-on time over the corners (in the
    same PWM-timer counts, rounded down), within which a leading bypass must open."""
    s = fallback.split_decay
    if s is None:
        return None
    reg = cm.regulated
    shortest = float(np.min(cm.t_on[reg])) if np.any(reg) else 0.0
    return dataclasses.replace(s, on_time_counts=math.floor(shortest * s.count_rate_hz + 1e-9))


# --------------------------------------------------------------------------- design
def design(drive: Drive, samples: int = 0, seed: int = 1) -> Design:
    """The Design of a current-mode drive (see the module docstring). After a boosted peak
    with an ``[armature]``: where the armature is still in flight at the threshold the
    comparator carries it on (:func:`~coildrive.design.boost_armature.threshold_pull_in`);
    with an eddy-current term or a bouncing seat on a drooping main supply only where it
    seats within the peak at every corner (:func:`~coildrive.design.boost_armature.require_seated_in_peak`,
    else one line naming ``hold.mode``)."""
    if samples > 0:
        raise InputError("--samples", "", "the Monte Carlo covers the voltage-mode hold only "
                         "(this drive has hold.mode = \"current\")")
    if drive.pull_in.compensate:
        raise InputError(drive.source, "pull_in.compensate", "a supply-compensated peak is "
                         "designed for voltage-mode holds only; leave it out with mode = \"current\"")
    fallback = hold_voltage.design(
        dataclasses.replace(drive, hold=dataclasses.replace(drive.hold, mode="voltage")))
    grid = corner_grid(drive)
    board = drive.board
    # With an on/off cycle the peak heats the coil too: the thresholds and the peak are
    # chosen again with the peak's length until it no longer grows (as in voltage mode).
    peak_time = 0.0
    for _ in range(hold_voltage.MAX_PEAK_ROUNDS):
        th = choose_thresholds(drive, grid, peak_time)
        first, _ = evaluate_current(drive, th, grid.supply, grid.ambient, grid.r_factor,
                                    grid.l_factor, 0.0, heat_peak=peak_time)
        if drive.supply.boosted and first.armature is not None and (why := in_flight_refused(drive)):
            from .boost_armature import require_seated_in_peak
            # (over the open and seated curves the closed loop is not modelled: config)
            require_seated_in_peak(drive, grid.label, first.armature.pull_in, "hold.mode",
                                   f"a current-mode hold with {why}", "its comparator's flight with "
                                   "the armature moving is a linear coil's, an eddy term's on a stiff bus",
                                   "a voltage-mode hold" + ("" if drive.coil.flux_current else
                                                            " (or the closed loop, which carries it)"))
        pk = plan_peak(drive, grid, first)
        # the longest real peak: the ticks and the driver's switch lead
        longer = 0.0 if pk.ticks is None else pk.ticks / board.tick.rate + switch_lag(drive)[1]
        if not cycling(drive) or longer <= peak_time:
            break
        peak_time = longer
    k_pull = pk.k_pull
    heat_peak, peak_time = peak_time, longer
    res, cm = evaluate_current(drive, th, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                               peak_time, heat_peak)
    res = boosted_points(drive, res)   # a boosted peak's highest end current and turn-off
    nom_grid = nominal_point(drive)
    nom, nom_cm = evaluate_current(drive, th, nom_grid.supply, nom_grid.ambient, nom_grid.r_factor,
                                   nom_grid.l_factor, peak_time, heat_peak)
    # Hold powers at every corner from the exact switching cycle (coil at its settled
    # temperature there), as for the PWM hold.
    loss = current_losses(drive, res, cm)
    corners = corners_of(grid, res, loss, duty=cm.duty, drive=drive)
    nominal = corners_of(nom_grid, nom, current_losses(drive, nom, nom_cm), duty=nom_cm.duty,
                         drive=drive)[0]
    nominal = dataclasses.replace(nominal, label="nominal: " + nominal.label)

    result = _mode_result(drive, th, grid, cm, float(nom_cm.frequency[0]), res.coil_temp)
    hold = HoldResult(
        mode="current", current_a=drive.hold.current, frequency_hz=result.nominal_frequency_hz,
        duty=float(np.max(cm.duty)), compare_ticks=fallback.hold.compare_ticks,
        current_step_a=th.lsb_a, **_spread(drive, grid, res), **loss_figures(drive, grid, loss),
        split_decay_saving=_split_saving(drive, grid, res, cm, loss, fallback, peak_time),
        current_mode=result, thresholds=th, regulation="current")
    # The corners' coil is the hold's settled one (the slowest pull-in); a coil switched on
    # cold draws the most current in the peak (the over-current threshold, the lowest bus,
    # the turn-offs' energy) and decays the slowest (the release, a bridge's return).
    cold, cold_cm = evaluate_current(drive, th, grid.supply, grid.ambient, grid.r_factor,
                                     grid.l_factor, peak_time, heat_peak, coil_temp=grid.ambient)
    cold = boosted_points(drive, cold)
    cold_grid = ColdGrid(grid)
    thresholds = max((adc_thresholds(drive, res, res, hold.min_mean_current_a, grid),
                      adc_thresholds(drive, cold, res, hold.min_mean_current_a, cold_grid)),
                     key=lambda t: t.healthy_max_current_a)
    release = release_result(drive, grid, res, boosted_turn_offs(
        drive, grid, res, turn_offs(drive, grid, res, res.peak_end_current, thresholds.trip_current_a)))
    release = slower_release(release, release_result(drive, cold_grid, cold, boosted_turn_offs(
        drive, cold_grid, cold, turn_offs(drive, cold_grid, cold, cold.peak_end_current,
                                          thresholds.trip_current_a))))
    offs = release.turn_offs
    # a full bridge: its fast decay's energy returned, the bus pump-up and its checks
    topo = topology_result(drive, grid, res, res.peak_end_current, thresholds.trip_current_a)
    if full_bridge(drive):
        topo = worse_bridge(topo, topology_result(drive, cold_grid, cold, cold.peak_end_current,
                                                  thresholds.trip_current_a))
    release = pumped_release(release, topo)
    release, bridge_bus = _bridge_release(drive, grid, res, cold, release, pk.long_time,
                                          thresholds.trip_current_a)
    pull_in = pull_in_result(drive, grid, res, pk, shortest_peak_current(drive, res, pk.short_time))

    setting = timer_for(drive)
    base = base_checks(drive, grid, res, pull_in, hold, release, fallback.timer, thresholds, setting)
    old = {c.name: c for c in fallback.checks}
    voltage_only = ("timer_frequency", "duty_range", "duty_resolution")
    checks = [c for c in base if c.name not in voltage_only + ("audible_frequency",)]
    checks += _current_checks(drive, th, result, thresholds, res, cm, grid)
    if cold_cm.chatter is not None:
        # a cold coil's lower resistance makes an eddy term's step at each edge larger
        step = _step_check(drive, th, cold_cm, cold, cold_grid)
        if not step.ok:
            checks = [c for c in checks if c.name != "current_mode_step"] + [step]
    split = _split_result(drive, fallback, cm) if split_decay(drive) else None
    arm, more, notes = closing_checks(drive, grid, res, hold, loss, release, split)
    checks += more
    for name in voltage_only:
        if name in old:
            c = old[name]
            checks.append(dataclasses.replace(c, detail="fixed-duty fallback: " + c.detail,
                                              severity="warning"))
    notes += topology_cautions(drive, topo)
    checks += bridge_checks(drive, topo)
    lower = th.lower_a if th.control == "hysteretic" else 0.0
    thermal = cycle_result(drive, heat_points(drive, grid.supply, grid.ambient, grid.r_factor,
                                              grid.l_factor, lower, th.upper_a, th.off_time_s,
                                              th.delay_s, grid.label),
                           heat_peak, release.turn_offs, hold.freewheel_power_w, hold.freewheel_elements_w)
    checks += thermal_checks(drive, pull_in.peak_time_s, thermal)
    sup = drooping_bus(drive, grid, res, pk.long_time, cm.duty, thresholds, bridge_bus)
    if sup is not None:
        sup = lower_bus(sup, drooping_bus(drive, ColdGrid(grid), cold, pk.long_time, cold_cm.duty,
                                          thresholds))
    checks += supply_checks(sup) + bridge_bus_checks(drive, sup)
    boost, boost_rows, boost_notes = boost_outputs(drive, grid, res, board.tick.rate)
    checks += boost_rows
    notes += boost_notes
    if thermal is not None and thermal.cycle is not None:
        notes[2] = cycle_caution(thermal)   # the envelope's hot coil is the cycle's
    notes += thermal_cautions(thermal)
    points = tuple(
        hold_voltage.plot_point(drive, name, label, r, k, min(max(2.0 * peak_time, 20.0 * (
            float(r.hold.period[k]) if np.isfinite(r.hold.period[k]) else 1e-4)), 2000.0 * (
            float(r.hold.period[k]) if np.isfinite(r.hold.period[k]) else 1e-4)))
        for name, label, r, k in (("nominal", "nominal", nom, 0),
                                  ("worst", "worst pull-in: " + grid.label(k_pull), res, k_pull)))
    return dataclasses.replace(
        fallback, drive=drive, pull_in=pull_in, hold=hold, release=release, adc=thresholds,
        split_decay=split, corners=corners, nominal=nominal, checks=checks, cautions=notes,
        actuation_points=points, armature=arm, topology=topo, thermal_cycle=thermal, supply=sup, boost=boost,
        input_hash=drive.input_hash(), worst_corner_index=k_pull,
        rise_check=rise_check(drive, grid, res, fallback.timer.frequency_hz),
        seat_check=seat_check(drive, grid, res),
        eddy=eddy_result(drive, grid, res, pk.long_time, res.peak_end_current))


def drooping_bus(drive: Drive, grid, res: PointResults, peak_time, duty, thresholds,
                 bridge_bus: dict | None = None, first_duty=None):
    """The supply's figures (:func:`coildrive.design.supply.supply_result`) of a hold that
    regulates its current: the peak of ``peak_time`` s on the drooping bus at the points of
    ``res``, the hold's switch-on fraction ``duty`` for its capacitor ripple; the firmware
    reads the bus through the board's supply sense as for the voltage-mode hold.
    ``bridge_bus``: a full bridge's highest bus
    (:func:`coildrive.design.bridge_bus.bridge_release`); ``first_duty``: a closed loop's
    duty at the start of its hold."""
    b = drive.board
    sense = b.supply_sense

    def read(volts):
        return adc_code(volts / sense.divider, b.adc.reference, b.adc.bits)
    return supply_result(drive, grid, res, peak_time, duty, read, thresholds.supply_min_code, bridge_bus,
                         first_duty)


def _bridge_release(drive: Drive, grid: CornerGrid, res: PointResults, cold: PointResults | None,
                    release, peak_time: float, trip_current: float) -> tuple:
    """:func:`coildrive.design.bridge_bus.bridge_release` of a full bridge on the drooping
    bus at the corners with the coil at its settled heat (``res``) and cold (``cold``, at
    the ambient: the lowest bus in the peak, the slowest fast decay), each figure the
    worse of the two; the release and its highest-bus dict (``{}`` elsewhere)."""
    release, bus = bridge_release(drive, grid, res, release, peak_time, res.peak_end_current, trip_current)
    if not bus:
        return release, bus
    release, bus_cold = bridge_release(drive, ColdGrid(grid), cold, release, peak_time,
                                       cold.peak_end_current, trip_current)
    return release, max(bus, bus_cold, key=lambda b: b["highest_bus_v"])


def slower_release(release, other):
    """``release`` (a :class:`~coildrive.design.result.ReleaseResult`) with each figure
    taken from ``other`` (the same drive at other points: a cold coil) where it is worse
    there: the slower release and its corner, the later zero and lockout, the higher
    switch voltage, the larger energy with its turn-offs."""
    out = {}
    if other.time_s > release.time_s:
        out.update(time_s=other.time_s, worst_corner=other.worst_corner)
    out.update(zero_time_s=max(release.zero_time_s, other.zero_time_s),
               lockout_ticks=max(release.lockout_ticks, other.lockout_ticks),
               peak_switch_voltage_v=max(release.peak_switch_voltage_v, other.peak_switch_voltage_v))
    if other.energy_j > release.energy_j:
        out.update(energy_j=other.energy_j, turn_offs=other.turn_offs, worst_turn_off=other.worst_turn_off)
    return dataclasses.replace(release, **out)


@dataclasses.dataclass(frozen=True)
class ColdGrid:
    """A :class:`~coildrive.design.corners.CornerGrid`'s points with the coil at the
    ambient (a cold start), labelled so."""

    grid: CornerGrid

    def label(self, k: int) -> str:
        g = self.grid
        head = f"{g.supply[k]:g} V, {g.ambient[k]:g} degC, "
        return head + f"coil {g.ambient[k]:.4g} degC (cold), " + g.label(k)[len(head):]


def lower_bus(sup, other):
    """``sup`` (a :class:`~coildrive.design.result.SupplyResult`) with the lowest bus and
    the capacitor's energy taken from ``other`` (the same supply at other points) where
    those are worse."""
    if other.lowest_bus_v < sup.lowest_bus_v:
        sup = dataclasses.replace(sup, lowest_bus_v=other.lowest_bus_v, lowest_bus_corner=other.lowest_bus_corner,
                                  lowest_bus_time_s=other.lowest_bus_time_s, droop_v=other.droop_v,
                                  lowest_bus_code=other.lowest_bus_code)
    if other.capacitor_energy_j > sup.capacitor_energy_j:
        sup = dataclasses.replace(sup, capacitor_energy_j=other.capacitor_energy_j,
                                  capacitor_energy_corner=other.capacitor_energy_corner)
    return sup


def _spread(drive: Drive, grid: CornerGrid, res: PointResults) -> dict:
    """:func:`~coildrive.design.figures.hold_spread`, its hottest corner naming the on/off
    cycle when the envelope takes the cycle's hottest coil."""
    out = hold_spread(grid, res)
    if cycling(drive):
        out["hottest_corner"] += f", the hottest over the on/off cycle {out['coil_temp_c']:.4g} degC"
    return out


def _mode_result(drive: Drive, th: Thresholds, grid: CornerGrid, cm: CurrentModeSteadyState,
                 nominal_frequency: float, settled) -> CurrentModeResult:
    """The thresholds and the switching range over the corners (the JSON's
    ``current_mode``): the frequencies, duties and shortest segment with the coil at every
    temperature from cold to ``settled`` (degC per corner; :mod:`~.current_sweep`)."""
    f_lo, f_hi, f_src = allowed_range(drive)
    reg = cm.regulated
    hyst = th.control == "hysteretic"
    span = sweep(drive, grid, settled, th.lower_a if hyst else 0.0, th.upper_a, th.off_time_s, th.delay_s)
    if span is None:
        flo = fhi = 0.0
        k_lo = k_hi = 0
        t_lo = t_hi = float(grid.ambient[0])
        duties = (float(np.min(cm.duty)), float(np.max(cm.duty)))
        shortest = math.inf
    else:
        flo, fhi = span.min_frequency_hz, span.max_frequency_hz
        k_lo, k_hi = span.min_frequency_index, span.max_frequency_index
        t_lo, t_hi = span.min_frequency_temp_c, span.max_frequency_temp_c
        duties = (span.min_duty, span.max_duty)
        shortest = span.shortest_segment_s
    fast = fast_ticks(drive, th)   # a mixed decay's fast part, counts (None without one)
    return CurrentModeResult(
        control=th.control, sense_position=drive.board.sense.position, code_current_a=th.lsb_a,
        lower_code=th.lower_code if hyst else None, lower_a=th.lower_a if hyst else None,
        upper_code=th.upper_code, upper_a=th.upper_a,
        band_codes=th.upper_code - th.lower_code if hyst else None,
        band_a=th.upper_a - th.lower_a if hyst else None,
        off_time_s=None if hyst else th.off_time_s,
        off_time_target_s=None if hyst else th.off_time_target_s,
        off_prescaler=None if hyst and fast is None else th.off_prescaler, off_ticks=None if hyst else th.off_ticks,
        sized_from_frequency=th.sized, sense_delay_s=th.delay_s,
        nominal_frequency_hz=nominal_frequency,
        min_frequency_hz=flo, min_frequency_corner=grid.label(k_lo), min_frequency_coil_temp_c=t_lo,
        max_frequency_hz=fhi, max_frequency_corner=grid.label(k_hi), max_frequency_coil_temp_c=t_hi,
        allowed_min_frequency_hz=f_lo, allowed_max_frequency_hz=f_hi, allowed_max_source=f_src,
        min_duty=duties[0], max_duty=duties[1],
        shortest_segment_s=shortest, regulated_corners=int(np.sum(reg)),
        corners=len(grid), off_fast_ticks=fast,
        fast_time_s=None if fast is None else th.off_time_s if hyst else fast * th.off_time_s / th.off_ticks)


def fast_ticks(drive: Drive, th: Thresholds) -> int | None:
    """A full bridge's mixed decay: the off-timer counts of each off-time's fast part --
    under the fixed off-time ``round(fast_fraction x off_ticks)`` (the firmware's one-shot
    times the fast part, then the rest), under hysteretic control the one-shot's own
    (:func:`_fast_one_shot`); ``None`` otherwise."""
    if not (full_bridge(drive) and drive.hold.fast_fraction > 0):
        return None
    if th.control == "hysteretic":   # the one-shot times the fast part alone
        return th.off_ticks
    return int(round(drive.hold.fast_fraction * th.off_ticks))


def _current_checks(drive: Drive, th: Thresholds, r: CurrentModeResult, adc, res: PointResults,
                    cm: CurrentModeSteadyState, grid: CornerGrid):
    out = []
    add = out.append
    hyst = th.control == "hysteretic"
    position = drive.board.sense.position
    if hyst:
        ok = position == "coil"
        where = ("in the bridge's common return (the slow decay's recirculation through the two "
                 "low-side switches bypasses it)" if full_bridge(drive) else "under the switch")
        add(Check("current_mode_sense", ok,
                  "hysteretic control reads the current while the switch is off: sense resistor in "
                  "the coil path" if ok else
                  "hysteretic control needs the current while the switch is off, but the sense "
                  f"resistor sits {where} (it reads zero then, so the lower threshold would "
                  "trip at once) — use control = \"off_time\" (a timed off time) or a coil-path sense"))
    else:
        add(Check("current_mode_sense", True,
                  f"off-time control reads the peak while the switch is on: works with the sense "
                  f"resistor in the {'coil path' if position == 'coil' else 'switch leg'}"))
    if cm.chatter is not None:
        out.append(_step_check(drive, th, cm, res, grid))
    a = res.loop.v_on / res.loop.r_on
    k = int(np.argmin(a))
    reg_ok = bool(np.all(cm.regulated))
    what = "upper" if hyst else "peak"
    add(Check("current_mode_regulated", reg_ok,
              f"{what} threshold {th.upper_a:.4g} A vs the lowest full-on current {a[k]:.4g} A "
              f"({grid.label(k)}); regulated at {r.regulated_corners} of {r.corners} corners"
              + ("" if reg_ok else " — the current never reaches the threshold there: lower the band "
                 "or raise the minimum supply")))
    f_ok = reg_ok and r.allowed_min_frequency_hz <= r.min_frequency_hz and \
        r.max_frequency_hz <= r.allowed_max_frequency_hz
    hint = ""
    if not f_ok and reg_ok:
        wider = "widen hold.band" if hyst else "lengthen hold.off_time"
        narrower = "narrow hold.band" if hyst else "shorten hold.off_time"
        hint = (f" — {wider}" if r.max_frequency_hz > r.allowed_max_frequency_hz else f" — {narrower}")
        if r.max_frequency_hz > r.allowed_max_frequency_hz and r.min_frequency_hz < r.allowed_min_frequency_hz:
            hint = " — the corners spread wider than the allowed range: widen the range"
    add(Check("current_mode_frequency", bool(f_ok),
              f"switching {r.min_frequency_hz:.0f} Hz ({r.min_frequency_corner}, coil "
              f"{r.min_frequency_coil_temp_c:.4g} degC) .. {r.max_frequency_hz:.0f} Hz "
              f"({r.max_frequency_corner}, coil {r.max_frequency_coil_temp_c:.4g} degC) over the coil "
              f"from cold to settled vs allowed "
              f"{r.allowed_min_frequency_hz:.0f}..{r.allowed_max_frequency_hz:.0f} Hz "
              f"(upper end: {r.allowed_max_source}; 20 kHz lower default: the audible limit, common "
              f"practice)" + hint))
    full = 2**drive.board.adc.bits - 1
    codes_ok = (th.upper_code <= full and th.upper_code < adc.over_current_code
                and (not hyst or 1 <= th.lower_code < th.upper_code))
    add(Check("current_mode_thresholds", bool(codes_ok),
              (f"lower {th.lower_code} / upper {th.upper_code} codes" if hyst else f"peak {th.upper_code} code")
              + f" ({th.lsb_a * 1e3:.4g} mA per code) vs over-current {adc.over_current_code} and full "
              f"scale {full}" + ("" if codes_ok else " — thresholds out of the ADC's range or order")))
    if not hyst:
        t = drive.board.timer
        err = (th.off_time_s - th.off_time_target_s) / th.off_time_target_s
        ok = abs(err) <= drive.hold.frequency_tolerance and th.off_ticks >= 2
        add(Check("current_mode_off_timer", bool(ok),
                  f"off time {th.off_time_s * 1e6:.5g} us = {th.off_ticks} ticks at prescaler "
                  f"{th.off_prescaler} of the {t.clock:.6g} Hz timer, for {th.off_time_target_s * 1e6:.5g} us "
                  f"(error {err:+.3%}, allowed {drive.hold.frequency_tolerance:.2%})"))
    if r.off_fast_ticks is not None:
        out.append(_fast_timer_check(drive, th, r.off_fast_ticks))
    sample = 1.0 / drive.board.adc.sample_rate
    seg_ok = th.delay_s >= sample or r.shortest_segment_s >= MIN_SAMPLES_PER_SEGMENT * sample
    add(Check("current_mode_sampling", bool(seg_ok),
              f"shortest switching segment {r.shortest_segment_s * 1e6:.4g} us vs ADC sample period "
              f"{sample * 1e6:.4g} us (sense_delay {th.delay_s * 1e6:.4g} us)"
              + ("" if seg_ok else f" — fewer than {MIN_SAMPLES_PER_SEGMENT} samples per segment (our "
                 "choice): a sampled threshold trips up to one sample late; give hold.sense_delay "
                 "(e.g. one sample period) or use a comparator"), severity="warning"))
    return out


def _fast_timer_check(drive: Drive, th: Thresholds, fast: int) -> Check:
    """Mixed decay under the fixed off-time: the one-shot times the fast part (``fast``
    counts), then the slow rest; each at least two counts (as the off-time), or the slow
    rest none (a fraction of 1). The model takes ``fast_fraction x t_off``: the rounding
    to whole counts is reported, and fails where it is beyond the frequency tolerance."""
    if th.control == "hysteretic" and not th.off_time_target_s > 0:
        return Check("current_mode_fast_timer", False,
                     "mixed decay: no slow-decay off-time at the nominal point to take fast_fraction of (the "
                     "upper threshold out of reach there: see current_mode_regulated)")
    if th.control == "hysteretic":
        err = (th.off_time_s - th.off_time_target_s) / th.off_time_target_s
        ok = fast >= 2 and abs(err) <= drive.hold.frequency_tolerance
        return Check("current_mode_fast_timer", bool(ok),
                     f"mixed decay: each off-time fast for {th.off_time_s * 1e6:.5g} us = {fast} counts at "
                     f"prescaler {th.off_prescaler} (or to the lower threshold, if sooner), for "
                     f"{th.off_time_target_s * 1e6:.5g} us = fast_fraction {drive.hold.fast_fraction:g} x the "
                     f"slow-decay off-time at the nominal point (error {err:+.3%}, allowed "
                     f"{drive.hold.frequency_tolerance:.2%})" + ("" if ok else " -- the timer cannot make it: "
                                                                  "change fast_fraction or the band"))
    slow = th.off_ticks - fast
    err = (fast / th.off_ticks - drive.hold.fast_fraction) if th.off_ticks else 0.0
    ok = fast >= 2 and (slow >= 2 or slow == 0) and abs(err) <= drive.hold.frequency_tolerance
    return Check("current_mode_fast_timer", bool(ok),
                 f"mixed decay: each off-time's fast part {fast} of its {th.off_ticks} off-timer counts, the "
                 f"slow rest {slow} (fast_fraction {drive.hold.fast_fraction:g}; the counts give "
                 f"{fast / max(th.off_ticks, 1):.5g}, {err:+.3g} of the off-time, allowed "
                 f"{drive.hold.frequency_tolerance:.2%})" + ("" if ok else " -- each part needs at least 2 "
                                                              "counts and the rounding within the tolerance: "
                                                              "lengthen hold.off_time or change fast_fraction"))


def _step_check(drive: Drive, th: Thresholds, cm: CurrentModeSteadyState, res: PointResults,
                grid: CornerGrid) -> Check:
    """With an eddy term: the sensed current steps at every switching edge (the flux's
    current is continuous, the eddy resistance's share is not), by ``(V + V_off) / (R +
    R_e)`` at a turn-off (a bridge's mixed decay: ``V_f``, the fast path's); a hysteretic band must be wider than that step (a peak
    threshold above the switch-on step ``V / (R + R_e)``) or every edge trips the other
    threshold at once and the switch chatters (docs/coil-model.md)."""
    lp = res.loop
    r_e = drive.coil.eddy_resistance
    hyst = th.control == "hysteretic"
    # the sensed current's fall at a turn-off at the upper threshold (its rise at a
    # turn-on is the same within the loop resistances' difference)
    # (a bridge's mixed decay: a turn-off opens all four, the fast path against V_f first)
    v_off, r_off, off = (lp.v_off, lp.r_off, "V_off") if lp.mixed is None else \
        (lp.mixed.v_fast, lp.mixed.r_fast, "V_f")
    step = np.asarray((lp.v_on + v_off + (r_off - lp.r_on) * th.upper_a) / (r_off + r_e)
                      if hyst else lp.v_on / (lp.r_on + r_e), float) + 0.0 * cm.mean
    k = int(np.argmax(step))
    bad = int(np.sum(cm.chatter))
    ok = bad == 0
    if hyst:
        what = (f"band {th.upper_a - th.lower_a:.4g} A vs the sensed current's step at each edge "
                f"{step[k]:.4g} A ({grid.label(k)}; eddy term: (V + {off}) / (R + R_e))")
        fix = "widen hold.band, or use control = \"off_time\""
    else:
        what = (f"peak {th.upper_a:.4g} A vs the switch-on step {step[k]:.4g} A ({grid.label(k)}; "
                "eddy term: V / (R + R_e))")
        fix = "raise hold.current"
    return Check("current_mode_step", ok, what + ("" if ok else f" — at {bad} of {len(cm.mean)} "
                                                  "corners every edge trips the other threshold "
                                                  f"at once and the switch chatters: {fix}"))


# --------------------------------------------------------------------------- waveform
def actuation(design: Design, supply: float, coil_temp: float, hold_time: float,
              r_factor: float = 1.0, l_factor: float = 1.0, points: int = 8, label: str = "",
              strict: bool = True):
    """One actuation of a current-mode ``design`` at one operating point (see
    :func:`current_mode_actuation`; ``strict`` is there for the strategy interface: a
    current-mode hold has nothing to refuse)."""
    return current_mode_actuation(design.drive, design.hold.thresholds, supply, coil_temp,
                                  peak_in_force(design, supply, coil_temp, r_factor, l_factor),
                                  hold_time, r_factor, l_factor, points, label)


def threshold_hold(th: Thresholds, t: float, i: float, end: float, v: float, r_on: float,
                   r_off: float, v_off: float, ind, points: int, ts: list, cs: list,
                   ons: list, mixed=None, marks: list | None = None) -> tuple[float, float, list]:
    """The current-mode hold ``th`` from ``t`` s and ``i`` A (the end of the peak) until the
    first turn-off edge at or after ``end`` s, in closed-form segments of inductance
    ``ind`` (H, or one point's curve), every switch edge a sample: each segment's samples
    (s, A, 0/1) appended to ``ts``, ``cs``, ``ons``. Returns ``(t_off s, i_off A,
    [start s, current A] of the last on-time or [])``. Where the threshold is out of reach
    (``V / R_on`` at or below it) the switch stays on to ``end``.

    ``mixed`` (a full bridge's :class:`~coildrive.model.pwm.MixedDecay` at this point, a
    linear coil or a curve): each off-time's first ``mixed.fraction`` (hysteretic: the one-shot's
    ``th.off_time_s``, or to the lower threshold if sooner) decays fast (all four open; a
    sample where the current dies), the rest slowly; ``marks`` then gets,
    per segment appended, a 2-row array: the current flowing in the fast path, all four open."""
    a = v / r_on   # the current the on-time rises toward, A
    hyst = th.control == "hysteretic"
    upper, lower, d = th.upper_a, th.lower_a, th.delay_s
    big = 40 * points
    last_on = []
    seg = None
    if mixed is not None:
        from ..model.mixed_waveform import segments_of   # (a curve: its tabulated exact segments)

        seg = segments_of(ind, v, r_on, r_off, mixed, max(i, upper))

    def mark(n, flowing=None):
        if marks is not None:
            marks.append(np.zeros((2, n), bool) if flowing is None else np.stack([flowing, np.ones(n, bool)]))

    def on_seg(t0, i0, dur):
        last_on[:] = [t0, i0]
        x = np.linspace(0.0, dur, points + 1)[1:]
        ts.append(t0 + x)
        cs.append(rise_current(x, i0, v, r_on, ind))
        ons.append(np.ones_like(x))
        mark(x.size)
        return t0 + dur, float(cs[-1][-1])

    def off_seg(t0, i0, dur, n=points):
        x = np.linspace(0.0, dur, n + 1)[1:]
        ts.append(t0 + x)
        cs.append(decay_current(x, i0, r_off, v_off, ind))
        ons.append(np.zeros_like(x))
        mark(x.size)
        return t0 + dur, float(cs[-1][-1])

    def fast_seg(t0, i0, dur, n=points):
        x = np.linspace(0.0, dur, n + 1)[1:]
        tz = float(seg.fast_zero(i0))
        if tz < dur:   # the body diodes block: a sample at the zero
            x = np.sort(np.append(x, tz))
        ts.append(t0 + x)
        cs.append(seg.fast(i0, x))
        ons.append(np.zeros_like(x))
        mark(x.size, (cs[-1] > 0) | (x <= tz))
        return t0 + dur, float(cs[-1][-1])

    regulated = upper < a
    first = True
    while t < end and regulated:
        # off: to the lower threshold (+ delay) or for the fixed off time; the first one,
        # down from the peak, gets as many samples as the peak
        n = big if first else points
        if seg is not None:   # mixed decay: the fast part, then the slow one
            t_fast = th.off_time_s if hyst else mixed.fraction * th.off_time_s
            dur = th.off_time_s
            if hyst:   # to the lower threshold (+ delay), in the fast part or the slow one
                dur = float(MixedPath(i, t_fast, float(mixed.r_fast), float(mixed.v_fast), r_off,
                                      ind).time_to(lower)) + d
            t, i = fast_seg(t, i, min(t_fast, dur), n)
            if dur > t_fast:
                t, i = off_seg(t, i, dur - t_fast, n)
        else:
            dur = float(decay_time(lower, i, r_off, v_off, ind)) + d if hyst else th.off_time_s
            t, i = off_seg(t, i, dur, n)
        first = False
        # on: to the upper/peak threshold, + delay (none while the current is still above
        # the peak threshold after the peak phase: the switch turns straight off again)
        dur = float(rise_time(upper, i, v, r_on, ind)) + d
        if dur > 0:
            t, i = on_seg(t, i, dur)
    if not regulated:
        t, i = on_seg(t, i, end - t)
    return t, i, last_on


def current_mode_actuation(drive: Drive, th: Thresholds, supply: float, coil_temp: float,
                           peak_time: float, hold_time: float, r_factor: float = 1.0,
                           l_factor: float = 1.0, points: int = 8, label: str = ""):
    """One actuation with the current-mode hold (closed-form segments, every switch edge a
    sample): peak, hold for ``hold_time`` s (ending at a turn-off edge), release.

    With split decay the hold's off segments take the slow path and the release the
    fast one, the bypass opening as ``freewheel.bypass_lead`` says (within the last
    on-time, or after the turn-off for a negative lead; a ``bypass_on`` column). On a
    full bridge the off segments recirculate through the two low-side switches (slow
    decay) and the release opens all four (fast decay into the bus): the bridge's
    per-switch columns and coil voltage; with mixed decay (the fixed off-time) each
    off-time's first ``hold.fast_fraction`` opens all four too.

    With an ``[armature]`` the peak is the moving armature's run and the hold the
    thresholds' segments on the seated coil (:func:`_armature_actuation`)."""
    from ..model.waveform import (boost_columns, mixed_columns, one_point, peak_samples,
                                  release_waveform, split_release, split_waveform)

    if drive.armature is not None:
        return _armature_actuation(drive, th, supply, coil_temp, peak_time, hold_time, r_factor,
                                   l_factor, points, label)
    lp = loop(drive, supply, coil_temp, r_factor, l_factor)
    if isinstance(lp.inductance, EddyCoil):   # the sensed current steps at each edge
        from ..model.eddy_waveform import threshold_actuation
        from ..model.waveform import eddy_waveform

        fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release") \
            if two_paths(drive) else None
        lead = drive.freewheel.bypass_lead if split_decay(drive) else 0.0
        t_fast = 0.0 if lp.mixed is None else \
            th.off_time_s if th.control == "hysteretic" else lp.mixed.fraction * th.off_time_s
        pieces, last_on = threshold_actuation(drive, lp, peak_time, hold_time, points, th.control,
                                              th.lower_a, th.upper_a, th.off_time_s, th.delay_s,
                                              fast, lead, t_fast)
        return boost_columns(drive, eddy_waveform(drive, lp, supply, pieces, peak_time, label, fast, lead,
                                                  last_on),
                             supply, peak_time, float(np.ravel(lp.r_on)[0]), lp.inductance[...])
    v, r_on, r_off, v_off = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off))
    ind = one_point(lp.inductance)   # H, or a saturating coil's curve (exact segments)
    big = 40 * points
    ts, cs, ons = [], [], []
    t, i = peak_time, peak_samples(peak_time, v, r_on, ind, big, ts, cs, ons, drive)
    n_peak = sum(len(x) for x in ts)
    marks = [] if lp.mixed is not None else None
    t, i, last_on = threshold_hold(th, t, i, peak_time + hold_time, v, r_on, r_off, v_off, ind,
                                   points, ts, cs, ons, lp.mixed, marks)
    t_off_edge = t
    if split_decay(drive):
        fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release")
        t_last, i_last = last_on if last_on else (t_off_edge, i)
        t_open, zero = split_release(drive, lp, fast, t_off_edge, i, t_last, i_last, ts[-1],
                                     big, ts, cs, ons)
        w = split_waveform(drive, lp, fast, supply, ts, cs, ons, t_open,
                           {"on": 0.0, "hold": peak_time, "off": t_off_edge, "zero": zero,
                            "bypass_open": t_open}, label)
        return boost_columns(drive, w, supply, peak_time, r_on, ind)
    # a full bridge: the hold's off-times decayed slowly (lp), the release decays fast
    fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release") if two_paths(drive) else None
    w = release_waveform(drive, lp, supply, ts, cs, ons, peak_time, t_off_edge, i, big, label, fast)
    if marks:   # a mixed-decay hold: its fast parts all four open
        m = np.concatenate(marks, axis=1)
        w = mixed_columns(drive, w, fast, supply, t_off_edge, n_peak, m[0], m[1])
    return boost_columns(drive, w, supply, peak_time, r_on, ind)


def _armature_actuation(drive: Drive, th: Thresholds, supply: float, coil_temp: float,
                        peak_time: float, hold_time: float, r_factor: float, l_factor: float,
                        points: int, label: str):
    """One actuation of a current-mode hold with a moving armature
    (:func:`coildrive.model.waveform.armature_actuation` with the thresholds as its hold):
    the pull-in run during the peak, the hold's closed-form segments on the seated coil
    (:func:`threshold_hold`; with an eddy-current term the seated branch behind ``R_e``,
    the thresholds on its terminal current:
    :func:`coildrive.model.eddy_waveform.seated_hold`), the release run until the armature
    is back on the open stop (a full bridge's mixed decay: each off-time's fast part first,
    all four open, flagged for the bridge's columns). After a boosted peak (a linear coil,
    :func:`in_flight_refused`) the comparator carries an armature still in flight at the
    threshold onto the seat first (:func:`comparator`). Where the armature is not seated at
    the end of the peak otherwise, or the hold's (magnetising) current falls below the stay
    current, the hold would switch with the armature in flight: not modelled, refused in one
    line (``InputError``). Without a hold (``hold_time`` 0: a
    STOP in the peak) the switch opens at the peak's end, the armature wherever it is."""
    from ..model.waveform import armature_actuation

    mixed = loop(drive, supply, coil_temp, r_factor, l_factor).mixed   # (a bridge's fast part)
    t_fast = 0.0 if mixed is None else \
        th.off_time_s if th.control == "hysteretic" else mixed.fraction * th.off_time_s

    def hold(t0, i0, v, r_on, r_off, v_off, seated):
        if isinstance(seated, EddyCoil):   # the seated branch behind R_e: the terminal current sensed
            from ..model.circuit import Loop
            from ..model.eddy_waveform import seated_hold

            one = np.ones(1)
            lp = Loop(v * one, r_on * one, r_off * one, v_off * one, seated, one, v * one, mixed=mixed)
            ts, cur, mag, ons, t, m, t_last, fast = seated_hold(
                lp, t0, i0, peak_time + hold_time, th.control, th.lower_a, th.upper_a, th.off_time_s, th.delay_s,
                points, t_fast)
            return ts, cur, ons, t, m, min(i0, float(np.min(mag, initial=i0))), t_last, mag, fast
        ts, cs, ons = [], [], []   # (the hold ends hold_time after the peak, as the firmware's)
        marks = [] if mixed is not None else None
        t, i, last = threshold_hold(th, t0, i0, peak_time + hold_time, v, r_on, r_off, v_off, seated,
                                    points, ts, cs, ons, mixed, marks)
        if not ts:
            return np.empty(0), np.empty(0), np.empty(0), t, i, i0, t0
        cur = np.concatenate(cs)
        fast = None if marks is None else np.concatenate(marks, axis=1)[1]
        return (np.concatenate(ts), cur, np.concatenate(ons), t, i, min(i0, float(np.min(cur))),
                last[0] if last else t0, None, fast)

    if hold_time <= 0:   # no hold (a STOP in the peak): the switch opens at the peak's end
        return armature_actuation(drive, supply, coil_temp, peak_time, 0.0, 1.0, 0.0, r_factor,
                                  l_factor, points, label)
    # (after a boosted peak: an armature in flight at the threshold carried by the comparator)
    cmp = comparator(th) if drive.supply.boosted and not in_flight_refused(drive) else None
    try:
        return armature_actuation(drive, supply, coil_temp, peak_time, 0.0, 1.0, hold_time,
                                  r_factor, l_factor, points, label, hold=hold, comparator=cmp)
    except ValueError as exc:
        raise InputError(drive.source, "hold.mode",
                         f"current mode at {supply:.4g} V, {coil_temp:.4g} degC: {exc}") from None
