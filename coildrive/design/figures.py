"""Figures every hold strategy builds the same way: corners, worst corners, the pull-in,
hold spread, release and ADC-threshold results, and the hold-loss figures.

Pure functions of the evaluated points (:class:`~coildrive.design.evaluate.PointResults`)
to the plain results of :mod:`coildrive.design.result`.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..config import Drive
from ..model import eddy
from ..model.circuit import full_bridge, split_decay
from ..model.flux import small_signal
from ..model.losses import HoldLosses
from ..model.topology import topology_of
from .corners import CornerGrid
from .evaluate import PointResults
from .envelope import reading_factors
from .result import AdcThresholds, Corner, PullInResult, ReleaseResult
from .supply import steady_current

#: Over-current threshold above the highest normal current (common practice).
OVER_CURRENT_FACTOR = 1.25
#: Open-load threshold as a fraction of the lowest hold current (common practice).
OPEN_LOAD_FACTOR = 0.5
#: Drop of the freewheel diode assumed for the split-decay saving of a clamp board that
#: gives none (common practice: a silicon rectifier at its working current).
ASSUMED_DIODE_DROP = 0.8


_PULL_STATUS = {0: "seated", 1: "never starts", 2: "stalls"}
_RELEASE_STATUS = {0: "opens", 2: "stays closed"}


def corner_armature(res: PointResults, k: int) -> dict | None:
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


def corners_of(grid: CornerGrid, res: PointResults, losses: HoldLosses | None = None,
               high: PointResults | None = None, duty=math.nan, drive: Drive | None = None) -> list[Corner]:
    """The corners as :class:`Corner` results: the hold figures from ``res``, and where the
    firmware's hold varies with its reading of the supply, the end-of-peak current, the
    switch voltage, the release energy and the coil power from ``high`` (the most
    current it may run there); ``duty``: the switch-on fraction of ``high`` at each corner.
    With ``drive``, its topology's switch node where that is not the switch voltage."""
    hi = res if high is None else high
    out = []
    duty_at = np.broadcast_to(np.asarray(duty, float), (len(grid),))
    nan = np.full(len(grid), math.nan)
    fw_p = nan if losses is None else np.broadcast_to(losses.freewheel, nan.shape)
    sw_p = nan if losses is None else np.broadcast_to(losses.switch, nan.shape)
    topo = None if drive is None else topology_of(drive)
    node = None
    if topo is not None and topo.shows_node:
        # the node is the rail less the switch: a boosted peak's turn-off from the boost
        # rail leaves it the freewheel voltage below ground, as from the main supply
        v_sw = (hi.loop.switch_voltage(drive, hi.interrupt_current) if drive.supply.boosted
                else hi.peak_switch_voltage)
        node = topo.node_voltage(hi.supply, v_sw, 0.0)
    for k in range(len(grid)):
        out.append(Corner(
            label=grid.label(k),
            supply_v=float(res.supply[k]), ambient_c=float(res.ambient[k]),
            coil_temp_c=float(res.coil_temp[k]), resistance_ohm=float(res.loop.r_coil[k]),
            inductance_h=float(small_signal(res.loop.inductance)[k]), pull_in_time_s=float(res.pull_in_time[k]),
            peak_end_current_a=float(hi.peak_end_current[k]),
            hold_mean_current_a=float(res.hold.mean[k]), hold_ripple_a=float(res.hold.ripple[k]),
            hold_rms_current_a=float(res.hold.rms[k]),
            hold_conduction="discontinuous" if res.hold.dcm[k] else "continuous",
            coil_power_w=float(hi.coil_power[k]), release_time_s=float(hi.release_time[k]),
            release_zero_time_s=float(hi.release_zero_time[k]),
            peak_switch_voltage_v=float(hi.peak_switch_voltage[k]),
            release_energy_j=float(hi.release_energy[k]),
            armature=corner_armature(res, k),
            freewheel_power_w=float(fw_p[k]), switch_power_w=float(sw_p[k]),
            hold_duty=float(duty_at[k]),
            switch_node_voltage_v=None if node is None else float(node[k]),
        ))
    return out


def adc_code(volts: float, reference: float, bits: int) -> int:
    """ADC code for a pin voltage: ``floor(V / V_ref * 2^bits)``, clipped to full scale."""
    return int(min(max(math.floor(volts / reference * 2**bits), 0), 2**bits - 1))


def worst(values: np.ndarray, largest: bool = True) -> int:
    v = np.where(np.isnan(values), np.inf if largest else -np.inf, values)
    return int(np.argmax(v) if largest else np.argmin(v))


def path_name(drive: Drive, hold: bool) -> str:
    fw = drive.freewheel
    if full_bridge(drive):
        return ("two low-side switches (slow decay)" if hold else
                "two body diodes into the supply (fast decay)")
    fast = {"diode": "diode", "zener": "diode + Zener", "resistor": "diode + resistor",
            "clamp": "clamp across the switch"}[fw.type]
    if hold and split_decay(drive):
        return "diode + bypass switch (slow decay)"
    return fast + (" (slow decay)" if fw.type == "diode" else " (fast decay)")


def loss_figures(drive: Drive, grid: CornerGrid, loss: HoldLosses) -> dict:
    """The worst-corner hold powers as :class:`HoldResult` fields."""
    k_fw = worst(loss.freewheel)
    switch = np.broadcast_to(loss.switch, loss.freewheel.shape)
    k_sw = worst(switch)
    elements = {name: float(np.max(p)) for name, p in loss.elements().items() if np.any(p > 0)}
    return dict(
        freewheel_power_w=float(loss.freewheel[k_fw]), freewheel_power_corner=grid.label(k_fw),
        freewheel_elements_w=elements,
        switch_power_w=float(switch[k_sw]),
        switch_conduction_w=float(np.max(loss.switch_conduction)),
        switch_switching_w=float(np.max(loss.switch_switching)),
        switch_power_corner=grid.label(k_sw), decay_path=path_name(drive, hold=True),
    )


def slow_hold_drive(drive: Drive) -> tuple[Drive, bool]:
    """The same drive with split decay fitted (an ideal bypass, no lead): the hold takes
    the slow path. A clamp board with no ``diode_drop`` gets :data:`ASSUMED_DIODE_DROP`;
    the flag says so."""
    fw = drive.freewheel
    assumed = fw.diode_drop <= 0
    slow_fw = dataclasses.replace(fw, split_decay=True, bypass_resistance=0.0, bypass_lead=0.0,
                                  diode_drop=ASSUMED_DIODE_DROP if assumed else fw.diode_drop)
    return dataclasses.replace(drive, freewheel=slow_fw), assumed


def saving_figures(drive: Drive, res: PointResults, loss: HoldLosses, duty: float,
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


def pull_in_result(drive: Drive, grid: CornerGrid, res: PointResults, pk,
                   shortest_current) -> PullInResult:
    """The pull-in figures from the sized peak ``pk`` (:class:`~coildrive.design.peak.PeakPlan`):
    the worst-corner times, the chosen peak, the highest current at its end over the points
    of ``res`` (where it came from), and the current the shortest real peak carries
    (``shortest_current`` A per point) at the force margin's worst corner."""
    rate = drive.board.tick.rate
    peak_end = np.asarray(res.peak_end_current, float)
    k_end = worst(peak_end)
    reached = pk.ticks is not None
    k_f = pk.k_force
    if not reached:  # name where it is not reached: the lowest steady current
        k_f = int(np.argmin(np.asarray(steady_current(drive, res.loop), float)))
    return PullInResult(
        current_a=drive.pull_in.current, time_s=pk.t_pull if reached else None,
        worst_corner=grid.label(pk.k_pull if reached else k_f), margin=drive.pull_in.margin,
        peak_time_s=pk.ticks / rate if reached else None, peak_ticks=pk.ticks,
        peak_end_current_max_a=float(peak_end[k_end]) if reached else 0.0,
        peak_end_corner=grid.label(k_end) if reached else "",
        current_margin=drive.pull_in.current_margin, force_current_a=pk.force_current,
        force_time_s=pk.t_force if math.isfinite(pk.t_force) else None,
        force_corner=grid.label(k_f), settle_time_s=drive.pull_in.settle_time,
        time_margin_ticks=pk.time_margin_ticks, force_margin_ticks=pk.force_margin_ticks,
        governed_by=pk.governed_by,
        shortest_peak_s=float(np.asarray(pk.short_time)[k_f]) if reached else None,
        shortest_peak_current_a=float(np.asarray(shortest_current)[k_f]) if reached else None,
        compensated=pk.table is not None, not_reached=pk.not_reached,
        longest_peak_s=float(np.max(pk.long_time)) if reached else None)


def hold_spread(grid: CornerGrid, res: PointResults) -> dict:
    """The hold's spread over the corners as :class:`~coildrive.design.result.HoldResult`
    fields: lowest and highest mean current, ripple, coil power and the hottest coil."""
    k_min = worst(res.hold.mean, largest=False)
    k_max = worst(res.hold.mean)
    k_hot = worst(res.coil_temp)
    return dict(
        min_mean_current_a=float(res.hold.mean[k_min]), min_corner=grid.label(k_min),
        max_mean_current_a=float(res.hold.mean[k_max]), max_corner=grid.label(k_max),
        ripple_a=float(np.max(res.hold.ripple)),
        coil_power_w=float(res.coil_power[k_hot]), coil_temp_c=float(res.coil_temp[k_hot]),
        hottest_corner=grid.label(k_hot), discontinuous_corners=int(np.sum(res.hold.dcm)),
        coil_power_corner=grid.label(k_hot))


def release_result(drive: Drive, grid: CornerGrid, res: PointResults, offs: list[dict]) -> ReleaseResult:
    """The release through the freewheel path from the top of the hold ripple, the lockout
    (wait for zero current -- and, with an armature, for it to be back on the open stop --
    in whole scheduler ticks plus one), and the worst switch voltage and energy of every
    turn-off (``offs``, :func:`coildrive.design.turnoff.turn_offs`)."""
    k_rel = worst(res.release_time)
    rating = drive.switch.max_voltage
    settle = float(np.max(res.release_zero_time))
    if res.armature is not None or drive.coil.eddy_resistance:
        # the armature back on its stop; the flux (an eddy term) down to the drop-out current
        settle = max(settle, float(np.max(res.release_time)))
    lockout = math.ceil(settle * drive.board.tick.rate - 1e-9) + 1 if math.isfinite(settle) else 0
    v_sw = max(float(np.max(res.peak_switch_voltage)), *(o["switch_voltage_v"] for o in offs))
    top = max(offs, key=lambda o: o["energy_j"])
    return ReleaseResult(
        freewheel=drive.freewheel.type, dropout_current_a=drive.release.current,
        time_s=float(res.release_time[k_rel]), zero_time_s=float(np.max(res.release_zero_time)),
        worst_corner=grid.label(k_rel), lockout_ticks=lockout,
        peak_switch_voltage_v=v_sw, switch_limit_v=rating * drive.switch.derating,
        switch_rating_v=rating, energy_j=top["energy_j"], turn_offs=offs,
        worst_turn_off=top["event"],
    )


def adc_thresholds(drive: Drive, res: PointResults, res_low: PointResults, min_mean_current: float,
                   grid: CornerGrid) -> AdcThresholds:
    """Current thresholds as ADC codes of the current-sense channel.

    Over-current: :data:`OVER_CURRENT_FACTOR` above the highest healthy current of the
    envelope (the end of the longest peak or the top of the hold ripple, in ``res``) as
    the channel may read it high (sense resistor and amplifier at the ends of their
    tolerances); ``trip_current_a`` is the true current the turn-off may interrupt at the
    trip: the threshold with the channel reading low, one code up for the converter's step. Open load: :data:`OPEN_LOAD_FACTOR` below the lowest hold mean
    (``res_low``) as the channel may read it low. The supply-sense codes of the supply
    limits (0 on a board that does not measure its supply).
    """
    board = drive.board
    adc = board.adc
    vpa = board.sense.resistance * board.sense.gain
    low, high = reading_factors(drive)
    peaks = np.asarray(res.peak_end_current, float)
    tops = np.asarray(res.hold.i_max, float)
    if res.hold.terminal_max is not None:   # an eddy term: the channel reads the terminal current
        lp = res.loop
        peaks = np.asarray(eddy.terminal(peaks, lp.v_on, lp.r_on, lp.inductance.resistance), float)
        tops = np.asarray(res.hold.terminal_max, float)
    healthy = np.maximum(np.where(np.isfinite(peaks), peaks, 0.0), np.where(np.isfinite(tops), tops, 0.0))
    k = worst(healthy)
    over_a = OVER_CURRENT_FACTOR * float(healthy[k]) * high
    open_a = OPEN_LOAD_FACTOR * min_mean_current * low
    over_code = adc_code(over_a * vpa, adc.reference, adc.bits)
    lsb_a = adc.reference / 2**adc.bits / vpa
    ss = board.supply_sense

    def supply_code(v: float) -> int:
        return 0 if ss is None else adc_code(v / ss.divider, adc.reference, adc.bits)
    return AdcThresholds(
        volts_per_amp=vpa, full_scale_current_a=adc.reference / vpa,
        pull_in_code=adc_code(drive.pull_in.current * vpa, adc.reference, adc.bits),
        hold_code=adc_code(drive.hold.current * vpa, adc.reference, adc.bits),
        over_current_code=over_code, over_current_a=over_a,
        open_load_code=adc_code(open_a * vpa, adc.reference, adc.bits), open_load_a=open_a,
        supply_min_code=supply_code(drive.supply.min), supply_max_code=supply_code(drive.supply.max),
        healthy_max_current_a=float(healthy[k]), healthy_max_corner=grid.label(k),
        trip_current_a=(over_code + 1) * lsb_a / low, reading_low=low, reading_high=high,
    )
