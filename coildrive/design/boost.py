"""The boosted peak in the design (``[supply] boost``): the peak runs from the boost until
the current-sense ADC reads the threshold code, with a time-out; the hold runs from the
main supply. Physics in :mod:`coildrive.model.boost`.

* The threshold is ``pull_in.current_margin`` x the pull-in current; its code is the
  smallest one every sense chain (resistor and amplifier tolerances) reaches only at or
  above it, so the real trip lies between the threshold and the code's current as a
  low-reading chain sees it -- and the driver compares it once a conversion, and converts
  once a PWM period (docs/firmware.md), so it is seen up to one PWM period of the hold
  timer late (:func:`~coildrive.design.timer.conversion_period`): the end current, the
  switch voltage, the time-out, the energy and the peak's heat all include it.
* The slow side (pull-in, force, time-out): the boost at its lowest (``boost`` less
  ``boost_tolerance``, the capacitance less its tolerance) with the envelope's hot coil --
  the capacitor's droop is in the rise. The time-out is the worst corner's time to the
  threshold x ``pull_in.margin`` in whole ticks (+1, a phase starts anywhere in a tick).
* The fast side (end current, switch voltage, energy): the boost at its highest.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..config import Drive
from ..model import boost as model
from ..model.circuit import loop
from ..model.eddy import EddyCoil
from .corners import CornerGrid
from .envelope import reading_factors
from .result import BoostResult, Check
from .timer import conversion_period, timer_for


def at_boost(drive: Drive, v_b, c, r_on, inductance) -> model.Boost:
    """The boost of ``v_b`` V on ``c`` F feeding the on-loop ``r_on`` ohm (the boost path's
    own resistance added) and the coil ``inductance`` (H, an
    :class:`~coildrive.model.eddy.EddyCoil`: its magnetising branch and eddy resistance, or
    a :class:`~coildrive.model.flux.FluxCoil`: :mod:`coildrive.model.flux_boost`'s)."""
    r_e = None
    if isinstance(inductance, EddyCoil):
        inductance, r_e = inductance.magnetising, inductance.resistance
    return model.boost(v_b, c, r_on + drive.supply.boost_resistance, inductance, r_e)


def boost_side(drive: Drive, lp, inductance, high: bool) -> model.Boost:
    """The boost at its lowest (voltage and capacitance less their tolerances) or, with
    ``high``, at its highest, feeding the loop ``lp`` and the coil ``inductance``."""
    s = drive.supply
    sign = 1.0 if high else -1.0
    return at_boost(drive, s.boost * (1.0 + sign * s.boost_tolerance),
                    s.boost_capacitance * (1.0 + sign * s.boost_capacitance_tolerance), lp.r_on, inductance)


def rise_time(drive: Drive, lp, i_target, inductance, high: bool = False, sensed: bool = False) -> np.ndarray:
    """Time (s) to ``i_target`` A from the boost at its lowest (``high``: at its highest),
    at the points of ``lp``; ``sensed``: of the terminal current (what the sense reads;
    with an eddy term it leads the magnetising current), else of the magnetising current."""
    b = boost_side(drive, lp, inductance, high)
    return model.of(b).threshold_time(i_target, b, sensed=sensed)


def rise_current(drive: Drive, lp, t, inductance) -> np.ndarray:
    """Current (A) ``t`` s after switch-on from the boost at its lowest."""
    b = boost_side(drive, lp, inductance, False)
    return model.of(b).state(t, b)[0]


def steady_current(drive: Drive, lp) -> np.ndarray:
    """The most current the boost at its lowest drives (A): its first maximum, or ``V/R``."""
    b = boost_side(drive, lp, lp.inductance, False)
    return model.of(b).highest_current(b)


def threshold(drive: Drive, current: float | None = None) -> tuple[float, int, float]:
    """``(threshold A, ADC code, highest true current at which that code trips A)``;
    ``current``: the threshold's current (A) before any eddy share, ``pull_in.current_margin``
    x the pull-in current unless given (a latching coil's pulse gives its own).

    With an eddy term the sense sees the terminal current ``k (i_m + v_C/R_e)``, which
    leads the magnetising current (the flux, the force): the threshold is raised by the
    eddy share's bound ``V_b,max/R_e`` (``k <= 1``, ``v_C <= V_b,max``), so the flux's
    current has reached ``current_margin`` x the pull-in current wherever it trips."""
    b = drive.board
    vpa = b.sense.resistance * b.sense.gain
    lsb = b.adc.reference / 2**b.adc.bits
    low, high = reading_factors(drive)
    i_th = drive.pull_in.current_margin * drive.pull_in.current if current is None else current
    if drive.coil.eddy_resistance:
        s = drive.supply
        i_th += s.boost * (1.0 + s.boost_tolerance) / drive.coil.eddy_resistance
    code = math.ceil(i_th * vpa * high / lsb - 1e-9)
    return i_th, code, code * lsb / (vpa * low)


def nominal_trip(drive: Drive, code: int | None = None) -> float:
    """The true current (A) at which the threshold code (``code`` where given) trips with a
    nominal sense chain."""
    b = drive.board
    code = threshold(drive)[1] if code is None else code
    return code * (b.adc.reference / 2**b.adc.bits) / (b.sense.resistance * b.sense.gain)


def firmware_peak(design, supply: float, coil_temp: float, r_factor: float = 1.0,
                  l_factor: float = 1.0) -> float:
    """The boosted peak the firmware runs at one point (s): until a nominal sense chain
    reads the threshold code, from the boost at its nominal voltage and capacitance, or the
    time-out if sooner (a moving armature: its run with the coil's eddy term, the trip on
    the terminal current the sense resistor carries, as the design's runs in
    :mod:`coildrive.design.boost_armature`)."""
    drive = design.drive
    s = drive.supply
    lp = loop(drive, supply, coil_temp, r_factor, l_factor)
    if drive.armature is not None:   # the moving armature's run from the boost at its nominal
        return min(armature_trip_time(drive, lp, l_factor, nominal_trip(drive)), design.pull_in.peak_time_s or 0.0)
    b = at_boost(drive, s.boost, s.boost_capacitance, lp.r_on, lp.inductance)
    t = float(model.of(b).threshold_time(nominal_trip(drive), b, sensed=True))
    return min(t, design.pull_in.peak_time_s or 0.0)


def armature_trip_time(drive: Drive, lp, l_factor: float, trip: float) -> float:
    """s from switch-on until the coil's current first reaches ``trip`` A with the moving
    armature, from the boost at its nominal charge and capacitance, at the one point of
    ``lp`` (``inf`` never; with the coil's eddy term, the terminal current the sense
    resistor carries, which leads the magnetising current -- the firmware's peak and a
    latch's set pulse): :func:`coildrive.model.armature_runs.pull_in` with the boost as
    its source (:func:`coildrive.model.armature_boost.boost_params`)."""
    from ..model.armature import params_from_loop
    from ..model.armature_boost import boost_params
    from ..model.armature_runs import pull_in

    s = drive.supply
    pb = boost_params(params_from_loop(drive.armature, lp, l_factor, drive.coil.eddy_resistance),
                      s.boost, s.boost_capacitance, s.boost_resistance)
    return float(pull_in(pb, trip=trip).trip_time[0])


def peak_in_force(design, supply: float, coil_temp: float, r_factor: float = 1.0,
                  l_factor: float = 1.0) -> float:
    """The peak (s) a design's firmware runs at one point: the boosted peak's
    :func:`firmware_peak`, else the designed peak time (0 without one)."""
    if design.boost is None or not design.pull_in.peak_time_s:
        return design.pull_in.peak_time_s or 0.0
    return firmware_peak(design, supply, coil_temp, r_factor, l_factor)


def _seen(drive: Drive, b: model.Boost, trip: float | None = None, late: float | None = None) -> np.ndarray:
    """When the firmware sees the threshold at the latest (s; ``inf`` where never): the
    highest trip current (the chain reading low; ``trip`` A where given), one conversion
    (:func:`~coildrive.design.timer.conversion_period`; ``late`` s where given) late. (With
    an eddy term the sense sees the terminal current, which leads the magnetising current.)"""
    trip = threshold(drive)[2] if trip is None else trip
    late = conversion_period(drive) if late is None else late
    return model.of(b).threshold_time(trip, b, sensed=True) + late


def slowest_peak(drive: Drive, lp) -> np.ndarray:
    """The longest peak at each point (s; ``inf`` where the threshold is never reached):
    the boost at its lowest until the firmware sees the threshold. Its worst x
    ``pull_in.margin`` is the time-out."""
    return _seen(drive, boost_side(drive, lp, lp.inductance, False))


def earliest_trip(drive: Drive, lp) -> np.ndarray:
    """The shortest boosted peak at each point on the pull-in side (s): the boost at its
    lowest until the terminal current reaches the threshold (where a chain reading high
    trips). With an eddy term the terminal current leads the magnetising current, so the
    flux's current at the end of the peak is below the threshold (the ``pull_in_force``
    check takes it there)."""
    b = boost_side(drive, lp, lp.inductance, False)
    return model.of(b).threshold_time(threshold(drive)[0], b, sensed=True)


def peak_heat(drive: Drive, lp, peak_time) -> np.ndarray:
    """J the coil's copper takes in one boosted peak at the points of ``lp``: ``R_coil int
    i^2 dt`` (:func:`coildrive.model.boost.square_integral`) from switch-on until the
    firmware sees the threshold at the latest, or ``peak_time`` s (the time-out) if sooner
    -- from the boost at its lowest (the longest peak) and at its highest (the most
    current), the larger. With an eddy term the core's eddy loss heats the coil too
    (:func:`coildrive.model.boost.eddy_loss`)."""
    heat = np.zeros(np.shape(lp.r_coil))
    for high in (False, True):
        b = boost_side(drive, lp, lp.inductance, high)
        t = np.minimum(_seen(drive, b), peak_time)
        m = model.of(b)
        heat = np.maximum(heat, lp.r_coil * m.square_integral(t, b) + m.eddy_loss(t, b))
    return heat


def shortest_peak(drive: Drive, lp, peak_time, inductance=None) -> np.ndarray:
    """The shortest boosted peak at the points of ``lp`` (s): the boost at its highest until
    the firmware sees the threshold, or ``peak_time`` s if sooner. The hold that follows
    runs for the rest of an on-time, so its heat takes this (the longest hold).
    ``inductance``: the coil's (H) if not the loop's (a moving armature's open coil, whose
    rise is no slower than the moving armature's)."""
    coil = lp.inductance if inductance is None else inductance
    return np.minimum(_seen(drive, boost_side(drive, lp, coil, True)), peak_time)


def sampled_pull_in(drive: Drive, res, v_factor, c_factor):
    """``res`` (evaluated points) with each point's pull-in time from its own boost: the
    boost voltage x ``v_factor`` and its capacitance x ``c_factor`` (arrays over the
    points; the tolerance Monte Carlo draws them within ``boost_tolerance`` and
    ``boost_capacitance_tolerance``)."""
    s = drive.supply
    lp = res.loop
    b = at_boost(drive, s.boost * np.asarray(v_factor, float), s.boost_capacitance * np.asarray(c_factor, float),
                 lp.r_on, lp.inductance)
    return dataclasses.replace(res, pull_in_time=model.of(b).threshold_time(drive.pull_in.current, b))


def end_current(drive: Drive, lp) -> np.ndarray:
    """The highest current at the end of the peak (A) at each point: the boost at its
    highest, up to the highest trip current, one conversion late (the terminal current:
    what the switch interrupts)."""
    b = boost_side(drive, lp, lp.inductance, True)
    t = _seen(drive, b)
    m = model.of(b)
    return np.where(np.isfinite(t), m.current(np.where(np.isfinite(t), t, 0.0), b, sensed=True),
                    m.highest_current(b, sensed=True))


def handover(drive: Drive, lp) -> tuple[np.ndarray, np.ndarray]:
    """``(s after switch-on, A)`` at each point: when the hold takes over from the boost at
    its highest (the firmware seeing the highest trip current one conversion late, or the
    current's first maximum where it never does: 0 s for an ideal boost that never gets
    there) and the current then, :func:`end_current` (the most the main bus takes on)."""
    b = boost_side(drive, lp, lp.inductance, True)
    t = _seen(drive, b)
    t = np.where(np.isfinite(t), t, model.of(b).peak_time(b, sensed=True))
    return np.where(np.isfinite(t), t, 0.0), end_current(drive, lp)


def handover_magnetising(drive: Drive, lp, t_hand) -> tuple[np.ndarray, np.ndarray]:
    """``(A, known)`` at each point: the coil's magnetising current at the hand-over
    ``t_hand`` s (:func:`handover`'s moment, the boost at its highest) -- with an eddy term
    the state behind the terminal current the sense reads, without one that current
    itself -- and where it is known (``False`` where the boost never got to a trip or a
    first maximum: :func:`handover` puts 0 s there)."""
    b = boost_side(drive, lp, lp.inductance, True)
    t = np.broadcast_to(np.asarray(t_hand, float), np.shape(lp.v_on))
    known = t > 0
    i_m = model.of(b).state(np.where(known, t, 0.0), b)[0]
    return np.broadcast_to(i_m, t.shape), known


def _release_loop(res):
    """The loop a turn-off goes through at the points of ``res``: with split decay the
    release's (the bypass open, the fast path: the higher switch voltage), else the hold's."""
    return res.release_loop if res.release_loop is not None else res.loop


def _turn_off_voltage(drive: Drive, lp, v_top, current) -> np.ndarray:
    """The low-side switch's voltage at the end of the peak: the top of the coil at
    ``v_top`` V plus the freewheel path's voltage at ``current`` A. A clamp across the
    switch holds it at the clamp voltage whatever the rail (the boost switch opens with
    it; the ``boost_clamp`` check wants the clamp above the boost either way)."""
    if drive.freewheel.type == "clamp":
        return np.broadcast_to(lp.switch_voltage(drive, current), np.shape(current)) + 0.0 * np.asarray(v_top, float)
    return np.asarray(v_top, float) + lp.switch_voltage(drive, current) - lp.supply


def boosted_points(drive: Drive, res):
    """``res`` (:class:`~coildrive.design.evaluate.PointResults`, the points with the most
    current) with the boosted peak's highest end current, and the switch voltage of its
    turn-off from the boost at full charge (with split decay through the release's fast
    path: a peak cut short or a trip opens the bypass too)."""
    if not drive.supply.boosted:
        return res
    lp, rel = res.loop, _release_loop(res)
    runs = None if res.armature is None else res.armature.boost
    i_end = end_current(drive, lp) if runs is None else runs.end_current.reshape(np.shape(res.supply))
    interrupt = np.maximum(i_end, res.hold.i_max)
    v_sw = rel.switch_voltage(drive, interrupt)
    v_boost = _turn_off_voltage(drive, rel, drive.supply.boost * (1.0 + drive.supply.boost_tolerance), i_end)
    return dataclasses.replace(res, peak_end_current=i_end, interrupt_current=interrupt,
                               peak_switch_voltage=np.maximum(v_sw, v_boost))


def boosted_turn_offs(drive: Drive, grid: CornerGrid, res, offs: list[dict]) -> list[dict]:
    """The turn-offs (:func:`coildrive.design.turnoff.turn_offs`) with the boost's share: a
    peak cut short and an over-current trip may come while the boost feeds the coil, so
    the switch sees the boost at full charge, not the main supply, plus the freewheel
    path's voltage at the event's current. (The energies do not change: the freewheel
    path across the coil takes the coil's energy whatever the rail.)"""
    if not drive.supply.boosted:
        return offs
    lp = _release_loop(res)
    v_top = drive.supply.boost * (1.0 + drive.supply.boost_tolerance)
    out = []
    for o in offs:
        if o["event"] in ("end of peak", "over-current trip"):
            v = _turn_off_voltage(drive, lp, v_top, np.full(np.shape(res.supply), o["current_a"]))
            k = int(np.argmax(v))
            if float(v[k]) > o["switch_voltage_v"]:
                o = {**o, "switch_voltage_v": float(v[k]), "switch_voltage_corner": grid.label(k) + ", from the boost"}
        out.append(o)
    return out


def boost_result(drive: Drive, grid: CornerGrid, res, rate: float) -> BoostResult:
    """The boosted peak's figures over the points of ``res`` (hot coil at every corner for
    the slow side); ``rate`` the scheduler tick rate (Hz)."""
    runs = None if res.armature is None else res.armature.boost
    return boost_figures(drive, res.loop, _release_loop(res), res.supply, grid.label, rate,
                         threshold(drive), conversion_period(drive), drive.pull_in.margin, runs)


def boost_figures(drive: Drive, lp, rel, supply, label, rate: float, thr: tuple[float, int, float],
                  late: float, margin: float, runs=None, return_drop=None) -> BoostResult:
    """A pulse from the boost that ends at a current threshold, over the points of ``lp``
    (the loop with its switch on; ``rel`` the turn-off's, ``supply`` the main supply V at
    each point, ``label(k)`` names point ``k``): the threshold ``thr``
    (:func:`threshold`), seen up to ``late`` s late, the time-out the slowest x ``margin``
    in ticks at ``rate`` Hz, +1. The boosted peak's (:func:`boost_result`, with a moving
    armature its ``runs``) and each pulse of a latching coil's
    (:mod:`coildrive.design.latch_boost`; ``return_drop(i)``: V the switch sees above the
    turn-off's voltage at ``i`` A, a full bridge's return into the boost capacitor)."""
    s = drive.supply
    i_th, code, i_trip = thr
    slow = boost_side(drive, lp, lp.inductance, False)
    fast = boost_side(drive, lp, lp.inductance, True)
    t_slow = _seen(drive, slow, i_trip, late)   # the longest peak at each point
    finite = np.isfinite(t_slow)
    reached = bool(np.all(finite))
    m = model.of(slow)
    reachable = m.highest_current(slow, sensed=True)
    # the worst corner: the longest peak, or where the boost drives the least
    k_slow = int(np.argmax(t_slow) if reached else np.argmin(reachable))
    t_fast = m.threshold_time(i_th, fast, sensed=True)
    k_fast = int(np.argmin(t_fast))
    # slow side: the capacitor at the end of the peak (its lowest, while the boost alone
    # feeds the coil)
    t_low = np.where(finite, t_slow, 0.0)
    v_low = m.state(t_low, slow)[1]
    headroom = np.where(finite, v_low - np.asarray(supply, float), -np.inf)
    k_low = int(np.argmin(headroom))
    # fast side: the most current, energy and switch voltage
    t_end = _seen(drive, fast, i_trip, late)
    t_end = np.where(np.isfinite(t_end), t_end, m.peak_time(fast, sensed=True))
    i_m_end, v_end = m.state(t_end, fast)
    i_end = m.terminal(i_m_end, v_end, fast)
    energy = np.maximum(m.energy_drawn(t_end, fast), m.energy_drawn(t_low, slow))
    if runs is not None:   # a moving armature: its runs from the boost (design/boost_armature.py)
        t_slow = runs.long_time
        finite = np.isfinite(t_slow)
        reached = bool(np.all(finite))
        k_slow = int(np.argmax(t_slow) if reached else np.argmax(~finite))
        t_fast = runs.fast_time
        k_fast = int(np.argmin(t_fast))
        v_low = np.where(finite, runs.low_boost, np.nan)
        headroom = np.where(finite, v_low - np.asarray(supply, float), -np.inf)
        k_low = int(np.argmin(headroom))
        t_end = t_slow
        i_end, v_end = runs.end_current, runs.end_boost
        energy = np.where(np.isfinite(runs.energy), runs.energy, 0.0)
        reachable = reachable if runs.reachable is None else runs.reachable
    k_e, k_i = int(np.argmax(energy)), int(np.argmax(i_end))
    v_top = s.boost * (1.0 + s.boost_tolerance)
    v_sw = _turn_off_voltage(drive, rel, v_top, i_end)
    v_sw_end = _turn_off_voltage(drive, rel, v_end, i_end)
    if return_drop is not None:
        v_sw, v_sw_end = v_sw + return_drop(i_end), v_sw_end + return_drop(i_end)
    k_v = int(np.argmax(v_sw))
    timeout = (math.ceil(float(t_slow[k_slow]) * margin * rate - 1e-9) + 1) if reached else None
    recharge = interval = None
    if s.boost_power > 0:
        recharge = float(model.recharge_time(energy[k_e], s.boost_power))
        interval = float(max(np.max(t_end), np.max(t_low) if runs is None else 0.0)) + recharge
        if runs is not None and not reached:   # (no longest peak where the threshold never comes)
            interval = None
    cap = s.boost_capacitance
    return BoostResult(
        boost_v=s.boost, boost_min_v=s.boost * (1.0 - s.boost_tolerance), boost_max_v=v_top,
        capacitance_f=cap, capacitance_min_f=cap * (1.0 - s.boost_capacitance_tolerance),
        boost_resistance_ohm=s.boost_resistance, power_w=s.boost_power,
        threshold_a=i_th, threshold_code=code, trip_max_a=i_trip,
        code_fits=code <= 2**drive.board.adc.bits - 1,
        time_to_threshold_s=float(t_slow[k_slow]) if reached else None,
        time_to_threshold_corner=label(k_slow),
        fastest_time_s=float(t_fast[k_fast]), fastest_corner=label(k_fast),
        timeout_ticks=timeout, timeout_s=None if timeout is None else timeout / rate,
        reachable_current_a=float(reachable[k_slow] if not reached else np.min(reachable)),
        end_current_max_a=float(i_end[k_i]), end_current_corner=label(k_i),
        lowest_boost_v=float(v_low[k_low]) if reached else None, lowest_boost_corner=label(k_low),
        main_supply_there_v=float(np.broadcast_to(supply, np.shape(v_low))[k_low]),
        droop_v=float(s.boost * (1.0 - s.boost_tolerance) - v_low[k_low]) if reached else None,
        energy_j=float(energy[k_e]), energy_corner=label(k_e),
        stored_energy_j=0.5 * cap * (1.0 + s.boost_capacitance_tolerance) * v_top**2,
        recharge_time_s=recharge, min_interval_s=interval,
        switch_voltage_v=float(v_sw[k_v]), switch_voltage_corner=label(k_v),
        end_switch_voltage_v=float(v_sw_end[k_v]))


def boost_outputs(drive: Drive, grid: CornerGrid, res, rate: float
                  ) -> tuple[BoostResult | None, list[Check], list[str]]:
    """``(result, checks, cautions)`` of a boosted peak (:func:`boost_result`,
    :func:`boost_checks`, :func:`boost_cautions`; ``None`` and empty lists without a
    boost), as every hold's design adds them."""
    b = boost_result(drive, grid, res, rate) if drive.supply.boosted else None
    return b, boost_checks(drive, b), boost_cautions(b)


def boost_checks(drive: Drive, b: BoostResult | None) -> list[Check]:
    """The threshold is reached at every corner and fits the ADC; the boost capacitor stays
    above the main supply until the threshold; with an on/off cycle (``[duty]``) the boost
    recharges between switch-ons; the switch takes the boost's turn-off."""
    if b is None:
        return []
    out = []
    if b.time_to_threshold_s is None:
        out.append(Check("boost_threshold", False,
                         f"the boost at its lowest drives at most {b.reachable_current_a:.4g} A, below the "
                         f"threshold {b.threshold_a:.4g} A (at {b.time_to_threshold_corner}) -- a larger "
                         "boost capacitance (supply.boost_capacitance) or a higher boost voltage"))
    else:
        ok = b.code_fits
        out.append(Check("boost_threshold", ok,
                         f"{b.threshold_a:.4g} A (code {b.threshold_code}) seen after at most "
                         f"{b.time_to_threshold_s * 1e3:.4g} ms at {b.time_to_threshold_corner}; time-out "
                         f"{b.timeout_ticks} ticks" + ("" if ok else
                         " -- the code is above the ADC's full scale: a smaller sense resistance or gain")))
        ok = b.lowest_boost_v > b.main_supply_there_v
        out.append(Check("boost_droop", ok,
                         f"the boost capacitor falls {b.droop_v:.4g} V to {b.lowest_boost_v:.4g} V by the "
                         f"end of the peak at {b.lowest_boost_corner}, main supply {b.main_supply_there_v:.4g} V"
                         + ("" if ok else " -- the main supply would take over before the threshold: a "
                            "larger boost capacitance (supply.boost_capacitance)")))
    if drive.duty is not None and b.min_interval_s is not None:
        ok = b.min_interval_s <= drive.duty.period
        out.append(Check("boost_recharge", ok,
                         f"the boost puts the peak's {b.energy_j:.4g} J back at {b.power_w:.4g} W in "
                         f"{b.recharge_time_s * 1e3:.4g} ms: switch-on to switch-on needs at least "
                         f"{b.min_interval_s * 1e3:.4g} ms (the longest peak + the recharge), the on/off "
                         f"cycle gives {drive.duty.period * 1e3:.4g} ms ({drive.duty.actuation_rate:.4g} "
                         "actuations/s)" + ("" if ok else " -- the next peak would start from a partly "
                                            "charged boost: a higher supply.boost_power or a longer "
                                            "duty.off_time")))
    if drive.freewheel.type == "clamp":
        v_c = drive.freewheel.clamp_voltage
        ok = v_c > b.boost_max_v
        out.append(Check("boost_clamp", ok,
                         f"the clamp's {v_c:.4g} V against the boost at full charge {b.boost_max_v:.4g} V: "
                         "a turn-off while the boost switch is still on decays at V_clamp - V_boost"
                         + ("" if ok else " -- not at all: the current keeps rising through the clamp "
                            "until the boost switch opens; a clamp_voltage above the boost")))
    sw = drive.switch
    limit = sw.max_voltage * sw.derating
    ok = b.switch_voltage_v <= limit
    out.append(Check("boost_switch_voltage", ok,
                     f"turning off {b.end_current_max_a:.4g} A from the boost at full charge: the switch "
                     f"sees up to {b.switch_voltage_v:.4g} V vs {limit:.4g} V ({sw.derating:.0%} of the "
                     f"{sw.max_voltage:.4g} V rating)" + ("" if ok else " -- a higher-rated switch or a "
                                                        "lower boost voltage")))
    return out


def boost_cautions(b: BoostResult | None) -> list[str]:
    """The boost's voltage and its capacitor's stored energy."""
    if b is None:
        return []
    above = b.boost_max_v > 60.0
    out = [f"The boost rail reaches {b.boost_max_v:.3g} V" + (
           ": above 60 V DC, outside the extra-low-voltage range of many codes (a shock hazard)"
           if above else " (below 60 V DC, the extra-low-voltage limit of many codes)")
           + "; a charged rail can still arc and burn on an open board: keep it guarded, and "
           "follow local codes and licensed practice."]
    if b.capacitance_f > 0:
        out.append(f"The boost capacitor stores up to {b.stored_energy_j:.3g} J and keeps it after the "
                   "board is switched off: give it a bleed resistor, discharge it before touching the "
                   "board, and rate it above the boost voltage.")
    return out
