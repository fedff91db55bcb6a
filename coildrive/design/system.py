"""Several channels on one board (a system file): one Design per channel, designed together.

:func:`design_system` takes a :class:`~coildrive.system_file.System` and returns a
:class:`~coildrive.design.result.SystemResult`:

* **the shared timer** (:func:`shared_timer`): channels that the board's
  ``[channels] timers`` puts on one timer get one prescaler and period that makes a
  frequency inside every one of their windows (``hold.frequency`` +/-
  ``hold.frequency_tolerance``), the longest such period (finest duty steps), then the
  smallest worst relative error; each channel is then designed with it and keeps its own
  compare. Windows that do not overlap, or an overlap no prescaler and period can hit,
  are a one-line failure naming the channel;
* **the stagger** (:func:`draw_bound`, :func:`find_stagger`): the peaks start ``s`` apart
  (channel ``k`` of the file at ``k s``, or at its own ``offset``), ``s`` the least whole
  number of scheduler ticks that keeps the rail's current within ``[supply]
  current_limit``; the rail's current is bounded above in closed form, each channel by
  one branch per peak its firmware may pick at the supplies that read as it, summed at a
  common supply (docs/design-method.md, "Several channels");
* **the droop** of the shared rail when the channels pull in together and staggered,
  their PWM holds included (:mod:`coildrive.model.shared_bus`), with the system's
  ``[supply]`` source resistance and bulk capacitance;
* **the heat** in the shared freewheel parts and in the board.

A channel is a linear coil, with a moving armature (:mod:`coildrive.model.armature_bound`),
an eddy term or both, or a flux-linkage curve (:mod:`coildrive.model.flux_bound`; with a
moving armature over two curves too, :func:`_gap_rise`, an eddy term too), on one
switch or a full bridge, or a latching coil (its pulses: :func:`_latch_bound_params`), or a
boosted peak (its converter's draw: :func:`_boost_keys`; with a moving armature on a linear
coil: :func:`_boost_armature_keys`); what is not is refused in one line (:func:`_refuse`). A rail with a curve, an eddy term or a bridge on it takes its droop
from the rail-current bounds (:func:`bus_from_bound`).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..errors import InputError
from ..model import armature_bound, circuit, eddy, flux, flux_bound, magnet, pwm, shared_bus
from ..model.current_mode import sensed_threshold
from ..system_file import System, with_timer
from . import envelope
from .envelope import table_index
from .result import Check, SystemChannel, SystemResult
from .timer import MIN_PERIOD_TICKS, timer_for

# --------------------------------------------------------------------------- shared timer
def shared_timer(clock: float, bits: int, prescaler_max: int, allowed: tuple[int, ...],
                 windows: list[tuple[str, float, float, float]]) -> tuple[int, int] | str:
    """``(prescaler, period counts)`` whose frequency ``clock / (p N)`` lies inside every
    window ``(name, low Hz, high Hz, asked Hz)``: the longest period, then the smallest
    worst relative error against the asked frequencies, then the smallest prescaler. A
    string says why there is none, naming the channel."""
    top = max(windows, key=lambda w: w[1])          # the highest lower end
    bottom = min(windows, key=lambda w: w[2])       # the lowest upper end
    f_lo, f_hi = top[1], bottom[2]
    if f_lo > f_hi:
        return (f"channel {top[0]!r} (hold PWM {top[1]:.6g}..{top[2]:.6g} Hz) cannot share a timer "
                f"with channel {bottom[0]!r} ({bottom[1]:.6g}..{bottom[2]:.6g} Hz): their frequency "
                "windows (hold.frequency +/- hold.frequency_tolerance) do not overlap")
    if allowed:
        p = np.array(sorted(set(allowed)), dtype=np.int64)
    else:
        p = np.arange(1, int(min(prescaler_max, math.ceil(clock / (f_lo * MIN_PERIOD_TICKS)))) + 1,
                      dtype=np.int64)
    n_high = np.minimum(np.floor(clock / (p * f_lo) * (1 + 1e-12)), 2**bits).astype(np.int64)
    n_low = np.maximum(np.ceil(clock / (p * f_hi) * (1 - 1e-12)), MIN_PERIOD_TICKS).astype(np.int64)
    ok = n_high >= n_low
    if not ok.any():
        narrow = min(windows, key=lambda w: w[2] - w[1])
        return (f"no prescaler and period of the {bits}-bit timer make a frequency within "
                f"{f_lo:.6g}..{f_hi:.6g} Hz, where every channel's window overlaps (the narrowest is "
                f"channel {narrow[0]!r}'s, {narrow[1]:.6g}..{narrow[2]:.6g} Hz)")
    p, n = p[ok], n_high[ok]
    f = clock / (p * n)
    err = np.max([np.abs(f - w[3]) / w[3] for w in windows], axis=0)
    best = np.lexsort((p, err, -n))[0]
    return int(p[best]), int(n[best])


# --------------------------------------------------------------------------- the rail's current
#: Longest piece (s) the rail's bound is cut into between switching moments: the bound is
#: rigorous for any length; shorter pieces make it tighter (a rise of 1 A/ms over 10 us
#: overstates by 10 mA).
PIECE_S = 10e-6
#: Parts the coil's inductance range is cut into for the tail after a peak (the bound
#: holds for any number; more parts make it tighter).
TAIL_SPLITS = 6


def _branch_rise(t, b: dict):
    """The bound (A) of one branch's peak ``t`` s after switch-on: the stiff-bus rise
    ``V/R (1 - exp(-t R/L))``, or with a moving armature
    :func:`~coildrive.model.armature_bound.peak_rise`, or a boosted peak's
    (:func:`_boost_rise`)."""
    if "boost_v" in b:
        return _boost_rise(t, b)
    if "rise_time_s" in b:
        return flux_bound.table_current(t, b["rise_time_s"], b["rise_current_a"])
    if "eddy_resistance_ohm" in b:
        return _eddy_terminal_rise(t, b)
    if "closing_s" in b:
        return armature_bound.peak_rise(t, b["supply_v"], b["resistance_ohm"], b["inductance_h"],
                                        b["closed_inductance_h"], b["flux_ratio"], b["closing_s"])
    return b["supply_v"] / b["resistance_ohm"] * -np.expm1(
        -np.clip(t, 0.0, None) * b["resistance_ohm"] / b["inductance_h"])


def _eddy_terminal_rise(t, b: dict):
    """The bound (A) of an eddy branch's terminal current ``t`` s after switch-on: ``i =
    (V + R_e i_m)/(R + R_e)`` on the magnetising current's bound (:func:`_magnetising_rise`)."""
    v, r, r_e = b["supply_v"], b["resistance_ohm"], b["eddy_resistance_ohm"]
    return np.where(np.asarray(t) < 0, 0.0, (v + r_e * _magnetising_rise(t, b)) / (r + r_e))


def _magnetising_rise(t, b: dict):
    """The bound (A) of an eddy branch's magnetising current ``t`` s after switch-on: it
    sees the Thevenin pair ``V_th = V R_e/(R + R_e)``, ``R_th = R R_e/(R + R_e)``, so ``V/R
    (1 - exp(-t R_th/L))``, or with a moving armature
    :func:`~coildrive.model.armature_bound.peak_rise` on that pair."""
    v, r, r_e = b["supply_v"], b["resistance_ohm"], b["eddy_resistance_ohm"]
    if "closing_s" in b:
        return armature_bound.peak_rise(t, v * r_e / (r + r_e), r * r_e / (r + r_e), b["inductance_h"],
                                        b["closed_inductance_h"], b["flux_ratio"], b["closing_s"])
    return v / r * -np.expm1(-np.clip(t, 0.0, None) * r * r_e / ((r + r_e) * b["inductance_h"]))


def _branch_parts(t, b: dict):
    """``(rise, tail)`` (A) of one branch ``t`` s after switch-on, each as if it held there."""
    t = np.asarray(t, float)
    rise = _branch_rise(t, b)
    age = np.clip(t - b["peak_s"] - b["pwm_period_s"], 0.0, None)
    if "tail_flux_wb" in b:     # a saturating coil: the flux excess left (model/flux_bound.py)
        left = b["tail_flux_wb"][-1] * np.exp(-age * b["slow_resistance_ohm"] / b["tail_inductance_h"][0])
        tail = flux_bound.table_current(left, b["tail_flux_wb"], b["tail_current_a"])
    else:
        tail = b["hold_top_a"] + np.max([e * np.exp(-age * b["slow_resistance_ohm"] / l)
                                         for e, l in zip(b["excess_a"], b["tail_inductance_h"])], axis=0)
    if "tail_cap_a" in b:             # a closed loop's: never above its clamp's top (_two_period_top)
        tail = np.minimum(tail, b["tail_cap_a"])
    if "converter_until_s" in b:      # a boosted peak's converter, recharging its capacitor
        tail = tail + np.where(t < b["converter_until_s"], b["converter_a"], 0.0)
    return rise, tail


def _branch_draw(t, b: dict):
    """Upper bound (A) of one branch's draw ``t`` s after switch-on (arrays broadcast)."""
    t = np.asarray(t, float)
    rise, tail = _branch_parts(t, b)
    return np.where(t < 0, 0.0, np.where(t <= b["peak_s"], rise, tail))


def _piece_draw(u, w, b: dict):
    """Upper bound (A) of one branch's draw over the pieces ``[u, w]`` (s after its
    switch-on) that no switching moment cuts: 0 before the switch-on, the rise at ``w``
    within the peak, else the tail at ``u`` (its value just after the peak's end where
    ``u`` is that end: the tail starts above the rise)."""
    mid = 0.5 * (u + w)
    rise = _branch_rise(np.minimum(w, b["peak_s"]), b)      # the rise is within the peak
    tail = _branch_parts(u, b)[1]
    return np.where(mid < 0, 0.0, np.where(mid < b["peak_s"], rise, tail))


def draw_bound(t, params: dict) -> np.ndarray:
    """Upper bound (A) of the current one channel draws from the rail ``t`` s after its
    switch-on (0 before), from ``params`` (:func:`channel_bound_params`): the largest of
    its branches, one for each peak the firmware may pick (a supply-table entry, or the one
    peak), each at the highest supply that can be read as that entry. A branch: during
    its peak (``t <= peak_s``) the stiff-bus rise ``V/R (1 - exp(-t R/L))`` with the coldest
    loop resistance and the lowest inductance; after it the hold's top at that supply plus
    the excess the peak leaves, which decays at least as fast as ``exp(-R t/L_max)`` from
    the end of the first PWM period: ``hold_top + excess min(1, exp(-(t - peak - T_pwm) rate))``."""
    t = np.asarray(t, float)
    return np.max([_branch_draw(t, b) for b in params["branches"]], axis=0)


def _tables(d):
    """``(peak entries, duty lookup)`` of what the firmware runs: ``[(code or None, ticks)]``
    and a function of supply-sense codes giving the hold's duty (the highest: a
    closed-loop hold's output clamp)."""
    pt = d.peak_table
    peaks = ([(c, t) for c, t in zip(pt.adc_codes, pt.peak_ticks)] if pt is not None
             else [(None, d.pull_in.peak_ticks)])
    if d.hold.regulation == "closed_loop":
        # the loop's output is clamped at max_compare: the most duty it can command, at
        # any moment after the peak (docs/design-method.md, "Several channels")
        top = d.hold.closed_loop.max_compare / d.timer.period_ticks
        return peaks, [], lambda code: np.full(np.shape(code), top)
    dt = d.duty_table
    if d.hold.regulation == "supply_table" and dt.adc_codes:
        comp = np.asarray(dt.compare_ticks, float) / d.timer.period_ticks
        codes = list(dt.adc_codes)
        return peaks, codes, lambda code: comp[table_index(codes, code)]
    return peaks, [], lambda code: np.full(np.shape(code), d.hold.duty)


def channel_bound_params(d, reading_droop_v: float = 0.0) -> dict:
    """The branches of a channel's rail-current bound (SI; :func:`draw_bound`), from its
    Design, when the firmware's supply reading may sit ``reading_droop_v`` below the
    source's voltage (the shared rail's droop at the moment it reads).

    For each peak the firmware may pick (each supply-table entry ``e``, or the one peak):
    the supplies ``V`` that can be read as ``e`` -- from the lowest that reads its code
    with the divider reading high (:func:`~coildrive.design.envelope.lowest_supply_for_code`)
    to the highest whose lowest reading (the divider reading low, the ADC truncating,
    ``reading_droop_v`` lower) is still below the next entry's code
    (:func:`~coildrive.design.envelope.bracket_tops`), within ``[supply] min..max``. The
    rise and the hold only grow with ``V`` at a fixed peak and duty, so the branch takes
    the top of that range: the peak's rise with the coldest coil (``ambient.min``) at its
    lowest resistance and inductance, and the hold's orbit top (the highest over every
    tolerance corner, cold coil) at the highest duty readable there -- the duty entry read
    low, at the top of the range and just below each duty-table step inside it. The excess
    over the orbit's bottom is taken against the lowest bottom in the range (its lowest
    supply and readable duty, the hottest coil of the design's corners). With a moving
    armature the peak's rise is :func:`_armature_rise`'s (the open coil's while the armature
    is proved to only close) and the tail is the seated coil's, one part; over two curves
    :func:`_gap_rise`'s, the tail the seated curve's (with an eddy term both on the
    magnetising flux behind the loop's Thevenin pair). A boosted peak's: :func:`_boost_keys`
    (with a moving armature :func:`_boost_armature_keys`). A latching coil's:
    :func:`_latch_bound_params`."""
    if is_latch(d):
        return _latch_bound_params(d)
    drive = d.drive
    b = drive.board
    rate_tick = b.tick.rate
    v_min, v_max = drive.supply.min, drive.supply.max
    f = d.hold.frequency_hz
    tol = envelope.tolerances(drive)
    factors = {"diode_factor": tol.diode_factor, "fast_factor": tol.fast_factor,
               "sense_factor": tol.sense_factor}
    t_cold = drive.ambient.min
    t_hot = max(c.coil_temp_c for c in d.corners)
    peaks, duty_codes, duty_of = _tables(d)
    current = _current_mode_hold(d) if d.hold.mode == "current" else None

    def low_code(v):         # the lowest code the firmware may read at source voltage v (just below it)
        if b.supply_sense is None:
            return np.zeros(np.shape(v), int)
        return envelope.supply_codes(drive, np.maximum((np.asarray(v) - reading_droop_v) * (1 - 1e-9), 0.0))[0]

    def high_code(v):
        if b.supply_sense is None:
            return np.zeros(np.shape(v), int)
        return envelope.supply_codes(drive, v)[1]

    def loops(v, temp):
        return circuit.loop(drive, v, temp, tol.r_factor, tol.l_factor, **factors)

    def top_of(code):        # highest source voltage whose lowest reading is below ``code``
        step = envelope.supply_lsb(drive) * (1.0 + b.supply_sense.divider_tolerance)
        return code * step + reading_droop_v

    branches = []
    for e, (code, ticks) in enumerate(peaks):
        lo = v_min if (code is None or e == 0) else max(v_min, float(envelope.lowest_supply_for_code(drive, code)))
        hi = v_max if e == len(peaks) - 1 else min(v_max, top_of(peaks[e + 1][0]))
        if lo > v_max or hi < v_min or hi < lo:
            continue
        if current is not None:
            hold_top, bottom, settle_s = current(loops(hi, t_cold))
        else:
            cands = [hi] + [top_of(c) for c in duty_codes[1:] if lo < top_of(c) < hi] if duty_codes else [hi]
            cold = loops(np.array(cands)[:, None], t_cold)
            duty_hi = np.asarray(duty_of(low_code(np.array(cands))), float)[:, None]
            orbit = pwm.pwm_steady_state(duty_hi, f, cold.v_on, cold.r_on, cold.r_off, cold.v_off, cold.inductance,
                                         mixed=cold.mixed)
            # the draw is the terminal current (with an eddy term: the magnetising current's
            # step up at each switch-on; the state, i_min below, is the magnetising current)
            hold_top = float(np.max(orbit.i_max if orbit.terminal_max is None else orbit.terminal_max))
            hot = loops(lo, t_hot)
            duty_lo = float(duty_of(high_code(np.array([hi])))[0])
            bottom = float(np.min(pwm.pwm_steady_state(duty_lo, f, hot.v_on, hot.r_on, hot.r_off, hot.v_off,
                                                       hot.inductance, mixed=hot.mixed).i_min))
            settle_s = 1.0 / f
        top_cold = loops(hi, t_cold)
        r_on = float(np.min(top_cold.r_on))
        coil = top_cold.inductance
        r_eddy = None
        if isinstance(coil, eddy.EddyCoil):       # (its magnetising coil: linear or a curve)
            r_eddy, coil = float(np.min(coil.resistance)), coil.magnetising
        curve = coil.curve if isinstance(coil, flux.FluxCoil) else None
        if curve is not None:     # a saturating coil: its small-signal range (reports only)
            scale = np.asarray(coil.scale, float)
            coil = scale * float(curve.incremental(0.0))
        l_min, l_max = float(np.min(coil)), float(np.max(coil))
        r_slow = float(np.min(np.minimum(top_cold.r_on, top_cold.r_off)))
        if top_cold.mixed is not None:     # a full bridge's mixed decay: its fast path too
            r_slow = min(r_slow, float(np.min(top_cold.mixed.r_fast)))
        tp = ticks / rate_tick
        # the inductance range in TAIL_SPLITS parts: a part's excess at its lowest L, its
        # decay at its highest
        ends = np.linspace(l_min, l_max, TAIL_SPLITS + 1) if l_max > l_min else np.array([l_min, l_min])
        i_pe = hi / r_on * -np.expm1(-tp * r_on / ends[:-1])
        branch = {"supply_v": hi, "supply_low_v": lo, "resistance_ohm": r_on, "inductance_h": l_min,
                  "peak_s": tp}
        peak_end = {}             # the peak's end current where the excess is not measured from it
        if r_eddy is not None:
            # the tail on the magnetising current, decaying at the slowest Thevenin rate
            r_low = np.minimum(top_cold.r_on, top_cold.r_off)
            r_slow_eddy = float(np.min(r_eddy * r_low / (r_low + r_eddy)))
        if drive.supply.boosted:
            flight = _hold_flight(d)
            branch.update(_boost_keys(d, hi, r_on, l_min, hold_top, bottom, reading_droop_v, r_eddy,
                                      None if curve is None else flux.FluxCoil(curve, float(scale.min())),
                                      flight))
            if drive.armature is not None:
                branch.update(_boost_armature_keys(d, branch, hi, l_max, flight))
            # with an eddy term the end current (terminal) is above the magnetising one,
            # whose excess decays at the slowest Thevenin rate
            i_pe = np.array([d.boost.end_current_max_a])
            ends = np.array([l_min, l_max])
            peak_end["a"] = float(_branch_rise(branch["peak_s"], branch))
            if r_eddy is not None:
                r_slow = r_slow_eddy
            if curve is not None and r_eddy is not None:
                # the magnetising flux's tail from the end current (the terminal current leads
                # the magnetising one while it rises), the terminal current on it, as an eddy
                # curve branch's (below)
                if current is not None:
                    # under the comparator: the on-times' magnetising top and trip (J), the flux
                    # rising by at most V_th delay / s after the hand-over, as the curve's below
                    top_m, j = _eddy_current_top(d.hold.thresholds, top_cold, envelope.reading_factors(drive)[0])
                    top_m, bottom = float(np.max(top_m)), float(np.min(j))
                    tail = _eddy_curve_tail(curve, hi, r_on, r_eddy, d.boost.end_current_max_a, top_m, bottom,
                                            hi * r_eddy / (r_on + r_eddy) * d.hold.thresholds.delay_s
                                            / float(scale.min()))
                else:
                    tail = _eddy_curve_tail(curve, hi, r_on, r_eddy, d.boost.end_current_max_a,
                                            float(np.max(orbit.i_max)), bottom)
                tail.pop("top_a")       # (the branch's: the converter and the coil's top; its tail's start below)
                branch.update(tail)
                hold_top, bottom = branch.pop("hold_top_a"), 0.0
                i_pe = np.array([branch.pop("excess_a")])
                ends = np.array([l_min, branch.pop("l_max_h") * float(scale.max())])
            elif curve is not None:
                # the tail on the flux from the end current, as a curve branch's (below)
                ripple = hi * (d.hold.thresholds.delay_s if current is not None else float(np.max(duty_hi)) / f)
                tail = flux_bound.tail_excess(curve, d.boost.end_current_max_a, hold_top,
                                              ripple / float(scale.min()))
                branch.update({"tail_flux_wb": [float(x) for x in tail["table"][0]],
                               "tail_current_a": [float(x) for x in tail["table"][1]]})
                i_pe = np.array([bottom + tail["excess_a"]])
                ends = np.array([l_min, tail["l_max_h"] * float(scale.max())])
        elif drive.armature is not None and r_eddy is not None and curve is None:
            # the armature's bound on the magnetising current, which sees the Thevenin pair
            # (the closing window and the earliest start on it); the rail the terminal current
            # on it; the tail the eddy term's (below) on the seated coil: one part
            branch.update(_armature_rise(drive.armature, hi * r_eddy / (r_on + r_eddy),
                                         r_on * r_eddy / (r_on + r_eddy), l_min, l_max, tp))
            branch["eddy_resistance_ohm"] = r_eddy
            r_slow = r_slow_eddy
            peak_end["a"] = float(_branch_rise(tp, branch))
            i_pe, ends = np.array([float(_magnetising_rise(tp, branch))]), np.array([l_min, l_max])
        elif drive.armature is not None and curve is None:
            branch.update(_armature_rise(drive.armature, hi, r_on, l_min, l_max, tp))
            # the peak's end current is bounded at the open gap, its decay at the seated
            # coil's highest inductance: one part
            i_pe, ends = np.array([float(_branch_rise(tp, branch))]), np.array([l_min, l_max])
        elif r_eddy is not None and curve is not None:
            ripple = None
            if current is not None:
                # the magnetising current's hold top and trip (J); after the peak on for at
                # most the delay, the flux rising by at most V_th delay / s, then off
                top_m, j = _eddy_current_top(d.hold.thresholds, top_cold, envelope.reading_factors(drive)[0])
                top_m, bottom = float(np.max(top_m)), float(np.min(j))
                ripple = hi * r_eddy / (r_on + r_eddy) * d.hold.thresholds.delay_s / float(scale.min())
            else:
                top_m = float(np.max(orbit.i_max))
            branch.update(_eddy_curve_branch(flux.FluxCoil(curve, float(scale.min())), hi, r_on, r_eddy, tp,
                                             top_m, bottom, ripple))
            if drive.armature is not None:
                # a moving armature over two curves (``curve`` the seated one): the gap's rise
                # bound on the magnetising flux through the Thevenin pair (as _gap_rise's on the
                # coil's own loop), the terminal current on it; the tail the seated curve's
                # from the seated rise's end (the flux is never above it, whatever the gap)
                times, i_m = _gap_rise(drive.armature, curve, scale, hi * r_eddy / (r_on + r_eddy),
                                       r_on * r_eddy / (r_on + r_eddy), tp)
                rise = (hi + r_eddy * np.asarray(i_m, float)) / (r_on + r_eddy)
                branch.update({"rise_time_s": [float(x) for x in times], "rise_current_a": [float(x) for x in rise],
                               "top_a": max(branch["top_a"], float(rise[-1]))})
            r_slow = r_slow_eddy
            hold_top, bottom = branch.pop("hold_top_a"), 0.0
            i_pe = np.array([branch.pop("excess_a")])
            ends = np.array([l_min, branch.pop("l_max_h") * float(scale.max())])
            peak_end["a"] = float(branch["rise_current_a"][-1])
        elif r_eddy is not None:
            # the terminal current's step and rise (model/eddy.py's Thevenin pair); the tail
            # on the magnetising current: one part
            branch["eddy_resistance_ohm"] = r_eddy
            r_slow = r_slow_eddy
            i_pe = np.array([float(_magnetising_rise(tp, branch))])
            ends = np.array([l_min, l_max])
            peak_end["a"] = float(_branch_rise(tp, branch))
        elif curve is not None:
            # the exact rise at the lowest scale, tabulated; the tail's excess and decay on
            # the flux (model/flux_bound.py): one part
            times, currents = flux_bound.rise_table(flux.FluxCoil(curve, float(scale.min())), hi, r_on, tp)
            seated_end = float(currents[-1])     # the flux at the peak's end is at most this one's
            if drive.armature is not None:
                # a moving armature over two curves (``curve`` the seated one): the open
                # curve's rise until it can start, then the seated flux with the gap opened
                # at once (model/flux_bound.py, gap_rise_table); the tail the seated coil's
                times, currents = _gap_rise(drive.armature, curve, scale, hi, r_on, tp)
            branch.update({"rise_time_s": [float(x) for x in times], "rise_current_a": [float(x) for x in currents]})
            if current is not None:
                # hysteretic: on for at most the delay after the peak, then off down to the
                # lower threshold, the flux excess over the hold's top falling
                # (docs/design-method.md, "A flux-linkage curve")
                ripple = hi * d.hold.thresholds.delay_s / float(scale.min())
            else:
                ripple = hi * float(np.max(duty_hi)) / f / float(scale.min())
            tail = flux_bound.tail_excess(curve, seated_end, hold_top, ripple)
            branch.update({"tail_flux_wb": [float(x) for x in tail["table"][0]],
                           "tail_current_a": [float(x) for x in tail["table"][1]],
                           "top_a": max(float(currents[-1]), tail["reach_a"])})
            i_pe = np.array([bottom + tail["excess_a"]])
            ends = np.array([l_min, tail["l_max_h"] * float(scale.max())])
            peak_end["a"] = float(currents[-1])
        if d.hold.regulation == "closed_loop" and not (drive.armature is not None or r_eddy is not None
                                                       or curve is not None or drive.supply.boosted):
            # a linear coil under its loop, at most the clamp's PWM from the peak's end:
            # never above the larger of its orbit's top and two periods' rise (_two_period_top)
            cap = max(hold_top, _two_period_top(float(i_pe[0]), hi, r_on, l_min, 1.0 / f))
            branch.update({"tail_cap_a": cap, "top_a": min(cap, hold_top + max(0.0, float(i_pe[0]) - bottom))})
        seated = 1.0
        if drive.supply.boosted and drive.armature is not None and not _proved_seated(d):
            # never proved on the seat: the flux's bound over the open coil (_boost_armature_keys)
            seated = branch["flux_ratio"]
        branches.append({**branch, "peak_end_a": float(peak_end.get("a", i_pe[0])), "hold_top_a": hold_top * seated,
                         "excess_a": [seated * max(0.0, float(x) - bottom) for x in i_pe],
                         "tail_inductance_h": [float(x) for x in ends[1:]],
                         "slow_resistance_ohm": r_slow, "pwm_period_s": settle_s})
        if drive.supply.boosted:
            # its highest draw (the stagger's proof takes it): the tail may start above the rise
            b_ = branches[-1]
            b_["top_a"] = max(b_["top_a"], float(_branch_parts(b_["peak_s"], b_)[1]))
    return {"reading_droop_v": reading_droop_v, **_summary(branches)}


def is_latch(d) -> bool:
    """True for a latching coil's design (its set and reset pulses, no hold)."""
    return getattr(d, "latch", None) is not None


def _latch_bound_params(d) -> dict:
    """The branches of a latching coil's rail-current bound (:func:`draw_bound`): one per
    pulse, the firmware firing either at the channel's start (docs/design-method.md, "A
    latching coil"). The pulses are not looked up against the supply: each branch spans
    ``[supply] min..max`` and takes its top. Over the pulse's ticks the rise as a peak's --
    the winding's coldest loop, lowest resistance and inductance -- and with a moving
    armature the set pulse's :func:`_armature_rise` (from the open stop), the reset pulse
    of the same coil the any-motion bound from its start (``closing_s`` 0: it starts seated
    and the reset moves it open). After the pulse no hold (``hold_top_a`` 0, settling at
    once): the rail carries none of the decaying current through a freewheel across the
    coil, a bridge's fast decay returns it (negative: taken as 0); only through a clamp
    across the switch does it draw the coil's current, which falls at least as
    ``exp(-R_off t/L_max)`` through the release path from the pulse's end (with the
    any-motion bound, the flux linkage does, the current at most its over the open
    inductance): the excess the pulse's end bound there, else 0. A pulse from the boost
    draws its converter's input instead (:func:`_latch_boost_keys`)."""
    from .latch import winding_drive

    drive = d.drive
    v = drive.supply.max
    branches = []
    for p in d.latch.pulses:
        wd = winding_drive(drive, p.name == "reset")
        tol = envelope.tolerances(wd)
        factors = {"diode_factor": tol.diode_factor, "fast_factor": tol.fast_factor, "sense_factor": tol.sense_factor}
        lp = circuit.loop(wd, v, drive.ambient.min, tol.r_factor, tol.l_factor, **factors)
        rel = circuit.loop(wd, v, drive.ambient.min, tol.r_factor, tol.l_factor, path="release", **factors)
        r_on = float(np.min(lp.r_on))
        l_min, l_max = float(np.min(lp.inductance)), float(np.max(lp.inductance))
        tp = p.ticks / drive.board.tick.rate
        branch = {"pulse": p.name, "supply_v": v, "supply_low_v": drive.supply.min, "resistance_ohm": r_on,
                  "inductance_h": l_min, "peak_s": tp}
        if wd.armature is not None:
            branch.update(_armature_rise(wd.armature, v, r_on, l_min, l_max, tp))
            if p.name == "reset":
                branch["closing_s"] = 0.0
        if p.boost is not None:
            branch.update(_latch_boost_keys(d, p, r_on, l_min, tp))
        end = float(_branch_rise(tp, branch))
        # (from the boost its freewheel is across the winding: config refuses a clamp)
        draws = wd.freewheel.type == "clamp" and not circuit.full_bridge(wd)
        branches.append({**branch, "peak_end_a": end, "hold_top_a": 0.0, "excess_a": [end if draws else 0.0],
                         "tail_inductance_h": [l_max], "slow_resistance_ohm": float(np.min(rel.r_off)),
                         "pwm_period_s": 0.0})
    return {"reading_droop_v": 0.0, **_summary(branches)}


def _latch_boost_keys(d, p, r_on: float, l_min: float, pulse_s: float) -> dict:
    """The keys a latching coil's pulse from the boost adds to its branch
    (:func:`_latch_bound_params`; docs/design-method.md, "Several channels"): the rail
    carries the boost converter's input, not the winding's current -- the boost capacitor
    feeds the winding and the main supply's diode blocks while it stays above the main
    supply, which the pulse's ``{name}_boost_droop`` check proves at every corner (where
    that check fails the winding's current is counted too, ``coil_top_a`` its highest end
    current, as a boosted peak's). With a capacitor the converter draws at most its
    output ``boost_power`` over ``supply.boost_efficiency`` at ``[supply] min`` from the
    pulse's start until the energy the pulse took is back (``converter_until_s``: the
    pulse's shortest interval, its longest real pulse plus the recharge of the most energy
    it takes; without one the time-out ``pulse_s`` s plus that recharge); with an ideal boost it feeds
    the winding while the pulse runs, ``V_b,max i / (eta V_min)``, ``i`` at most the rise
    from the boost at its highest through the coldest loop (``r_on`` ohm, ``l_min`` H)
    and the highest end current."""
    s, bst = d.drive.supply, p.boost
    v_low = max(s.min, 1e-3)
    i_end = bst.end_current_max_a
    ok = {c.name: c.ok for c in d.checks}.get(f"{p.name}_boost_droop", False)
    out = {"boost_v": bst.boost_max_v, "resistance_ohm": r_on, "inductance_h": l_min,
           "coil_top_a": 0.0 if ok else i_end, "boost_efficiency": s.boost_efficiency}
    if bst.capacitance_f > 0:
        converter = bst.power_w / (s.boost_efficiency * v_low)
        busy = bst.min_interval_s if bst.min_interval_s is not None else pulse_s + (bst.recharge_time_s or 0.0)
        out.update({"converter_a": converter, "converter_until_s": busy, "top_a": converter + out["coil_top_a"]})
    else:
        out.update({"feed_ratio": bst.boost_max_v / (s.boost_efficiency * v_low), "feed_end_a": i_end})
        out["top_a"] = max(out["feed_ratio"] * i_end, out["coil_top_a"])
    return out


def _lowest_resistance(d) -> float:
    """A channel's lowest loop resistance (ohm): its design's corners', or a latching coil's
    pulses' (its bound's branches)."""
    if is_latch(d):
        return min(b["resistance_ohm"] for b in _latch_bound_params(d)["branches"])
    return min(c.resistance_ohm for c in d.corners)


def _hold_average(d) -> float:
    """A channel's hold current averaged over its PWM at its highest mean (A; a latching
    coil has none)."""
    return 0.0 if is_latch(d) else d.hold.max_mean_current_a * d.hold.duty


def _latch_heat(name: str, d) -> dict:
    """A latching coil's heat on the board (W): its pulses' freewheel and switch energies
    averaged over its on/off cycle (``[duty]``: a set and a reset pulse each period), else
    the larger pulse's every shortest interval (the most the design allows)."""
    by = {p.name: p for p in d.latch.pulses}
    cyc = d.latch.cycle
    if cyc is not None:
        fw = (by["set"].freewheel_j + by["reset"].freewheel_j) / cyc.period_s
        sw = (by["set"].switch_sense_j + by["reset"].switch_sense_j) / cyc.period_s
        basis = "on/off cycle average"
    else:
        interval = d.latch.interval_s if math.isfinite(d.latch.interval_s) and d.latch.interval_s > 0 else math.inf
        fw = max(p.freewheel_j for p in by.values()) / interval
        sw = max(p.switch_sense_j for p in by.values()) / interval
        basis = "latching: a pulse every shortest interval"
    return {"channel": name, "freewheel_w": fw, "switch_w": sw, "freewheel_basis": basis}


def _boost_keys(d, v_hi: float, r_on: float, l_min: float, hold_top: float, bottom: float,
                reading_droop_v: float, r_eddy: float | None = None, curve=None, flight: float = 1.0) -> dict:
    """The keys a boosted peak's branch adds (docs/design-method.md, "A boosted peak"): the
    coil's current from switch-on is at most the rise ``V_b/R (1 - exp(-t R/L))`` from the
    boost at its highest through the coldest on-loop (the capacitor's voltage only falls,
    the boost path's resistance only slows it, and after the threshold the main supply
    drives less), and never above ``coil_top_a``. Under a voltage-mode hold from the main
    supply at ``v_hi`` V the PWM's period map is increasing and contracts onto its orbit,
    so from the trip at ``I <= I_end`` (the highest end current) every period starts at
    most at ``max(I, B)`` (``B`` the orbit's start) and rises within two periods (the first
    may start late) by at most ``(V/R - c)(1 - exp(-2 T R/L))``: ``coil_top_a`` is the
    larger of that from ``I_end`` and the hold's top; under a current-mode hold the tail's
    value at the end, the hold's top plus ``I_end`` less the bottom (a linear coil's rise
    over the comparator's delay only shrinks as its current grows). The boost
    converter draws its output over ``supply.boost_efficiency`` from the rail at its lowest
    (``[supply] min`` less the reading's droop, ``reading_droop_v``): with a capacitor a
    constant ``boost_power`` from switch-on until the energy one peak takes is back
    (``converter_until_s``: the time-out plus the recharge time), with an ideal boost the
    coil's current times ``V_b`` while the peak runs from it.

    With an eddy term ``r_eddy`` (ohm, across the magnetising branch) the coil's current
    is the terminal one, ``(V + R_e i_m)/(R + R_e)`` while a source ``V`` drives it (below
    ``i_m`` while it is off): from switch-on on the magnetising current's rise from the
    boost at its highest through the Thevenin pair (``V_b R_e/(R + R_e)``, ``R R_e/(R +
    R_e)``); after the trip the magnetising current -- at most the end current, which the
    terminal current leads while it rises -- is under the voltage-mode hold's PWM at most
    the larger of its orbit's top and :func:`_two_period_top` on that pair, and
    ``coil_top_a`` the terminal current there at ``v_hi``. The converter's draw is the
    same: the energy one peak takes from the capacitor (the design's ``boost.energy_j``,
    the eddy resistance's share included) sets its recharge time.

    On a flux-linkage curve (``curve``: its :class:`~coildrive.model.flux.FluxCoil` at the
    lowest scale ``s``) the exponential is no bound (the saturating coil rises faster than
    its small-signal inductance lets the linear one): the rise is the curve's exact one from
    the boost at its highest through the coldest on-loop (``boost_rise_time_s`` /
    ``boost_rise_current_a``, :func:`~coildrive.model.flux_bound.rise_table`), and under a
    voltage-mode hold the period map on the flux is increasing and contracting too, each
    period adding at most ``V T / s``: ``coil_top_a`` the larger of the hold's top and
    ``psi^-1(psi(I_end) + 2 V T / s)``. Under a current-mode hold the comparator turns the
    switch off within its delay of a reading above the threshold, so after the hand-over
    the flux rises by at most ``V delay / s`` from ``I_end`` and later on-times end at most
    at the hold's top: ``coil_top_a`` is the larger of the hold's top and ``psi^-1(psi(I_end)
    + V delay / s)``. Not the linear coil's top plus ``I_end`` less the bottom: past a knee
    ``L_d(I_end)`` is far below ``L_d`` at the threshold and the delay's rise from ``I_end``
    outgrows the hold's (tests/test_system_boost.py, scipy ``solve_ivp``: 8 mA above that
    on a hard knee). With an eddy term on the curve both on the magnetising flux through
    the Thevenin pair (``V_th = V R_e/(R + R_e)``, ``R_th``), the terminal current ``(V +
    R_e i_m)/(R + R_e)`` on it.

    With a moving armature (a linear coil, ``l_min`` its lowest seated inductance) that may
    still fly in the hold (``flight = L_c/L_open > 1``, :func:`_hold_flight`) the PWM's
    falling flux leaves its closing unproved: any motion, the flux linkage ``lambda =
    L(x) i`` obeys ``dlambda/dt = v - R i <= v - R lambda/L_c`` (``L(x) <= L_c``), so it is
    at most the seated coil's under the same PWM from the hand-over (``lambda <= L_c
    I_end``), and ``i <= lambda/L_open``: ``coil_top_a`` is ``flight`` x the seated bound
    above (with an eddy term the magnetising current's, the terminal current the larger of
    it and ``(V + R_e i_m)/(R + R_e)``), and never below ``I_end`` (the boosted peak's)."""
    drive = d.drive
    s, bst = drive.supply, d.boost
    v_low = max(s.min - reading_droop_v, 1e-3)
    i_end = bst.end_current_max_a
    period = 1.0 / d.hold.frequency_hz
    if d.hold.mode == "current" and curve is not None:
        # the comparator turns the switch off within the delay of a reading above its
        # threshold: after the hand-over the (magnetising) flux rises by at most V delay / s
        # (V_th with an eddy term) from I_end, then the on-times end at most at the hold's
        # top. (Not the linear coil's top plus I_end less the bottom: the curve's rise over
        # the delay grows as L_d falls, tests/test_system_boost.py.)
        c = curve.curve
        v_th = v_hi if r_eddy is None else v_hi * r_eddy / (r_on + r_eddy)
        reach = float(np.asarray(c.current_of(float(c.psi(i_end)) + v_th * d.hold.thresholds.delay_s
                                               / float(curve.scale))).ravel()[0])
        coil_top = max(hold_top, reach)
        if r_eddy is not None:      # the terminal current on it
            coil_top = max(coil_top, (v_hi + r_eddy * reach) / (r_on + r_eddy))
    elif d.hold.mode == "current":
        coil_top = hold_top + max(0.0, i_end - bottom)
    elif curve is not None and r_eddy is not None:
        # the magnetising flux on the Thevenin pair: a period adds at most V_th T / s
        c = curve.curve
        v_th = v_hi * r_eddy / (r_on + r_eddy)
        reach = c.current_of(float(c.psi(i_end)) + 2.0 * v_th * period / float(curve.scale))
        top_m = max(hold_top, float(np.asarray(reach).ravel()[0]))
        coil_top = max(hold_top, (v_hi + r_eddy * top_m) / (r_on + r_eddy))
    elif curve is not None:
        c = curve.curve
        reach = c.current_of(float(c.psi(i_end)) + 2.0 * v_hi * period / float(curve.scale))
        coil_top = max(hold_top, float(np.asarray(reach).ravel()[0]))
    elif r_eddy is not None:
        top_m = _two_period_top(i_end, v_hi * r_eddy / (r_on + r_eddy), r_on * r_eddy / (r_on + r_eddy), l_min, period)
        if flight > 1.0:     # (the orbit's magnetising top is below its terminal one, hold_top)
            top_m = flight * max(hold_top, top_m)
            coil_top = max(i_end, top_m, (v_hi + r_eddy * top_m) / (r_on + r_eddy))
        else:
            coil_top = max(hold_top, (v_hi + r_eddy * top_m) / (r_on + r_eddy))
    else:
        coil_top = max(hold_top, _two_period_top(i_end, v_hi, r_on, l_min, period))
        if flight > 1.0:
            coil_top = max(i_end, flight * coil_top)
    out = {"boost_v": bst.boost_max_v, "resistance_ohm": r_on, "inductance_h": l_min, "coil_top_a": coil_top,
           "boost_efficiency": s.boost_efficiency}
    if r_eddy is not None:
        out["eddy_resistance_ohm"] = r_eddy
    if curve is not None:
        peak_s = d.pull_in.peak_ticks / drive.board.tick.rate
        if r_eddy is None:
            times, currents = flux_bound.rise_table(curve, bst.boost_max_v, r_on, peak_s)
        else:       # the terminal current on the magnetising rise through the Thevenin pair
            v_b = bst.boost_max_v
            times, i_m = flux_bound.rise_table(curve, v_b * r_eddy / (r_on + r_eddy), r_on * r_eddy / (r_on + r_eddy),
                                               peak_s)
            currents = (v_b + r_eddy * np.asarray(i_m, float)) / (r_on + r_eddy)
        out.update({"boost_rise_time_s": [float(x) for x in times],
                    "boost_rise_current_a": [float(x) for x in currents]})
    if bst.capacitance_f > 0:
        converter = bst.power_w / (s.boost_efficiency * v_low)
        out.update({"converter_a": converter, "converter_until_s": d.pull_in.peak_ticks / drive.board.tick.rate
                    + bst.recharge_time_s, "top_a": converter + coil_top})
    else:
        out.update({"feed_ratio": bst.boost_max_v / (s.boost_efficiency * v_low),
                    "feed_end_a": bst.end_current_max_a})
        out["top_a"] = max(out["feed_ratio"] * bst.end_current_max_a, coil_top)
    return out


def _hold_flight(d) -> float:
    """The factor a boosted peak's hold bound takes for an armature that may still move in
    the hold: ``L_c/L_open`` where it is not at rest on the seat within the peak at every
    corner of the design (:attr:`~coildrive.design.result.ArmatureResult.seated_in_peak_corners`;
    a bouncing seat's rebounds included) or not proved to stay there
    (:func:`_proved_seated`), else 1 (no armature, or seated for good before every
    hand-over)."""
    a = d.armature
    if d.drive.armature is None or a is None:
        return 1.0
    if a.seated_in_peak_corners == a.corners and _proved_seated(d):
        return 1.0
    return a.inductance_closed_h / a.inductance_open_h


def _proved_seated(d) -> bool:
    """Whether a boosted armature's design has it on the seat from its window's end on:
    at rest there at every corner within ``seat_window_s`` (a bouncing seat's rebounds
    over) and held (its ``armature_seats`` and ``armature_hold`` checks pass): nothing
    lifts it after that."""
    ok = {c.name: c.ok for c in d.checks}
    a = d.armature
    return (a is not None and a.seated_corners == a.corners and ok.get("armature_seats", False)
            and ok.get("armature_hold", False))


def _boost_armature_keys(d, branch: dict, v_hi: float, lc_high: float, flight: float) -> dict:
    """The keys a boosted peak's branch with a moving armature adds or replaces
    (docs/design-method.md, "Several channels"; SI units). ``branch``: its keys so far
    (:func:`_boost_keys`; ``inductance_h`` the lowest seated inductance), ``v_hi`` V the
    branch's top supply, ``lc_high`` H the highest seated inductance, ``flight``
    (:func:`_hold_flight`).

    From switch-on the coil is driven by at most ``V = max(V_b,max, v_hi)`` (the boost's
    capacitor only falls, then the main supply; off-times drive it down). While the
    armature only closes its current is at most the open coil's rise
    (:mod:`~coildrive.model.armature_bound`), proved from its earliest start over the
    closing window while the source only pushes the flux up -- in the boosted peak, so no
    later than the hand-over, which comes no sooner than the open coil's fastest rise
    reaches the threshold ``boost.threshold_a`` (the lowest true current a trip can read:
    ``t*``; with an eddy term the terminal current, on the magnetising rise through the
    Thevenin pair); so ``closing_s`` is the earlier of the window's end and ``t*`` (with a
    bouncing seat, ``restitution``, the window is empty: the earliest start). After
    it the any-motion bound (the seated coil's flux over the open inductance), which holds
    under any voltage up to ``V``, PWM or not. Over the whole of it the current is at most
    ``coil_top_a`` (:func:`_boost_keys` with ``flight``: the end current, or the flux's
    bound in the hold over the open inductance while the armature may still fly there).
    Where it may fly in the hold (``flight > 1``) the branch's peak (``peak_s``) lasts to
    the seat's window (``armature.seat_window_s``) if that is later than the time-out:
    from there on it is seated and the tail is the seated coil's."""
    drive, arm = d.drive, d.drive.armature
    r, l_c = branch["resistance_ohm"], branch["inductance_h"]
    v = max(branch["boost_v"], v_hi)
    r_e = branch.get("eddy_resistance_ohm")
    trip = d.boost.threshold_a
    if r_e is None:
        v_rise, r_rise, need = v, r, trip
    else:       # the magnetising current's rise through the Thevenin pair; the terminal trips
        v_rise, r_rise, need = v * r_e / (r + r_e), r * r_e / (r + r_e), ((r + r_e) * trip - v) / r_e
    keys = _armature_rise(arm, v_rise, r_rise, l_c, lc_high, math.inf)
    frac = need * r / v
    t_star = 0.0 if need <= 0 else math.inf if frac >= 1 else -keys["inductance_h"] / r_rise * math.log1p(-frac)
    keys.update({"boost_v": v, "closing_s": min(keys["closing_s"], t_star)})
    if flight > 1.0:
        keys["peak_s"] = max(branch["peak_s"], d.armature.seat_window_s)
    return keys


def _two_period_top(i0: float, v: float, r: float, l: float, period: float) -> float:
    """The most (A) a linear coil's current reaches over two PWM periods ``period`` s on at
    ``v`` V through ``r`` ohm and ``l`` H from ``i0`` A: ``i0 + (V/R - i0)(1 - exp(-2 T
    R/L))`` (at the lowest ``R`` and ``L`` the largest; it grows with ``i0``). Under a PWM of
    constant duty whose period map is increasing and contracts onto its orbit (start ``B``,
    top ``H``), a current handed over at ``i0`` at any phase reaches its first period start
    within a period at most at that rise, every later start is at most ``max(that, B)``, and
    each period's top is at most ``max(H, the rise)`` (the top is 1-Lipschitz in the start):
    so the current never passes ``max(H, _two_period_top)`` (docs/design-method.md, "Several
    channels")."""
    return i0 + max(0.0, v / r - i0) * -math.expm1(-2.0 * period * r / l)


def _boost_rise(t, b: dict):
    """A boosted branch's peak bound (A) ``t`` s after switch-on (:func:`_boost_keys`): with
    a capacitor, the converter's draw plus the coil's current (counted as the rail's even
    while the capacitor feeds it); with an ideal boost, the larger of the converter feeding
    the coil and the coil's own current. Non-decreasing in ``t``."""
    t = np.asarray(t, float)
    if "boost_rise_time_s" in b:     # a curve's exact rise, tabulated
        coil = flux_bound.table_current(t, b["boost_rise_time_s"], b["boost_rise_current_a"])
    elif "eddy_resistance_ohm" in b:   # the terminal current on the magnetising current's rise
        coil = _eddy_terminal_rise(t, {**b, "supply_v": b["boost_v"]})
        if "closing_s" in b:           # (off in the hold, through a clamp, at most the magnetising one)
            coil = np.maximum(coil, _magnetising_rise(t, {**b, "supply_v": b["boost_v"]}))
    elif "closing_s" in b:             # a moving armature's (_boost_armature_keys)
        coil = armature_bound.peak_rise(t, b["boost_v"], b["resistance_ohm"], b["inductance_h"],
                                        b["closed_inductance_h"], b["flux_ratio"], b["closing_s"])
    else:
        coil = b["boost_v"] / b["resistance_ohm"] * -np.expm1(-np.clip(t, 0.0, None) * b["resistance_ohm"]
                                                             / b["inductance_h"])
    coil = np.minimum(coil, b["coil_top_a"])
    if "converter_a" in b:
        got = b["converter_a"] + coil
    else:
        got = np.maximum(b["feed_ratio"] * np.minimum(coil, b["feed_end_a"]), coil)
    return np.where(t < 0, 0.0, got)


def _armature_rise(arm, supply: float, r_on: float, lc_low: float, lc_high: float, peak_s: float) -> dict:
    """The keys a moving armature's branch adds (:func:`coildrive.model.armature_bound.peak_rise`):
    ``inductance_h`` the lowest open inductance (the rise while the armature only closes),
    ``closed_inductance_h`` the lowest seated one and ``flux_ratio`` ``L_c/L_open`` (the
    any-motion bound), ``closing_s`` the time up to which the armature is proved to only
    close (the earliest start plus :func:`~coildrive.model.armature_bound.closing_window`;
    the peak's length when that covers it). ``lc_low``/``lc_high``: the loop's seated
    inductance range (H) over the tolerances."""
    ratio = arm.inductance_closed / arm.inductance_open
    _, beta = magnet.fit_gap(arm.inductance_open, arm.inductance_closed, arm.stroke)
    start = armature_bound.earliest_start(supply, r_on, lc_low / ratio, lc_high, ratio, beta,
                                          arm.spring_preload + arm.load_force)
    closing = start + armature_bound.closing_window(arm.mass, arm.damping, arm.spring_rate, arm.restitution)
    return {"inductance_h": lc_low / ratio, "closed_inductance_h": lc_low, "flux_ratio": ratio,
            "closing_s": min(closing, peak_s)}


def _gap_rise(arm, seated, scale, v: float, r: float, peak_s: float):
    """``(times s, currents A)``: the rise bound of a moving armature over two curves
    (:func:`~coildrive.model.flux_bound.gap_rise_table`), ``seated`` the seated curve,
    ``scale`` the tolerance scales, at ``v`` V through the coldest on-loop's ``r`` ohm over
    a peak ``peak_s`` s long; the open stop is left no sooner than
    :func:`~coildrive.model.flux_bound.earliest_start` (preload + load against the closing
    force at the highest scale, the open curve's fastest rise), and the armature only
    closes for :func:`~coildrive.model.armature_bound.closing_window` after that (the
    closing force grows with the flux linkage alone, as the linear coil's does)."""
    opened = flux.curve(arm.open_current, arm.open_linkage)
    low, high = float(np.min(scale)), float(np.max(scale))
    start = flux_bound.earliest_start(opened, seated, low, high, arm.stroke, arm.spring_preload + arm.load_force,
                                      v, r)
    closing = start + armature_bound.closing_window(arm.mass, arm.damping, arm.spring_rate, arm.restitution)
    return flux_bound.gap_rise_table(opened, seated, low, v, r, peak_s, start, closing)


def _eddy_curve_branch(coil, v: float, r: float, r_e: float, peak_s: float, top_m: float,
                       bottom_m: float, ripple: float | None = None) -> dict:
    """The keys of a branch with an eddy term on a flux-linkage curve (``coil`` at its
    lowest scale), at ``v`` V through the coldest on-loop's ``r`` ohm, ``r_e`` ohm across
    the coil, a peak ``peak_s`` s long, the hold orbit's highest magnetising top ``top_m``
    A and its lowest bottom ``bottom_m`` A (docs/design-method.md, "An eddy-current term").

    The magnetising current obeys ``s dpsi/dt = V_th - R_th i_m`` (``V_th = V R_e/(R +
    R_e)``, ``R_th = R R_e/(R + R_e)``): the curve's exact rise at ``V_th`` through
    ``R_th`` (:func:`~coildrive.model.flux_bound.rise_table`), and the terminal current
    ``g(i_m) = (V + R_e i_m)/(R + R_e)`` on it (``rise_time_s``/``rise_current_a``).
    After the peak the magnetising current is at most ``psi^-1(psi(top_m) + D)``, ``D``
    the flux excess over the orbit's, from ``psi(i_pe) - psi(bottom_m)`` falling at the
    highest incremental inductance (``l_max_h``, unscaled); the terminal current is at
    most ``max(i_m, g(i_m))`` of that (off, it is below ``i_m``): ``tail_flux_wb`` /
    ``tail_current_a``, ``hold_top_a`` its value at ``D = 0``, ``excess_a`` ``D0/L_min``
    (the lowest incremental inductance from ``top_m`` up to the reach: both parts of the
    max grow with slope at most 1). Under a current-mode hold ``ripple`` (Wb, unscaled)
    replaces ``psi(top_m) - psi(bottom_m)``: the flux's rise over the delay the switch
    stays on after the peak, before it is off down to the lower threshold, with the
    excess falling through the off-loop's Thevenin resistance (``top_m`` the on-times'
    highest top, ``bottom_m`` the trip ``J``)."""
    v_th, r_th = v * r_e / (r + r_e), r * r_e / (r + r_e)
    times, i_m = flux_bound.rise_table(coil, v_th, r_th, peak_s)
    out = _eddy_curve_tail(coil.curve, v, r, r_e, float(i_m[-1]), top_m, bottom_m, ripple)
    out.update({"rise_time_s": [float(x) for x in times],
                "rise_current_a": [float(x) for x in (v + r_e * i_m) / (r + r_e)]})
    out["top_a"] = max(out["top_a"], float((v + r_e * i_m[-1]) / (r + r_e)))
    return out


def _eddy_curve_tail(curve, v: float, r: float, r_e: float, i_from: float, top_m: float, bottom_m: float,
                     ripple: float | None = None) -> dict:
    """The tail keys of :func:`_eddy_curve_branch` (``curve`` unscaled) after a peak whose
    magnetising current ends at most at ``i_from`` A: ``tail_flux_wb``/``tail_current_a``
    (the terminal current), ``top_a`` its reach, ``hold_top_a``, ``excess_a``, ``l_max_h``
    and ``eddy_resistance_ohm``."""
    spread = float(curve.psi(top_m)) - float(curve.psi(min(bottom_m, top_m))) if ripple is None else ripple
    tail = flux_bound.tail_excess(curve, i_from, top_m, spread)
    deltas, cur = tail["table"]
    terminal = np.maximum(cur, (v + r_e * cur) / (r + r_e))
    return {"eddy_resistance_ohm": r_e, "tail_flux_wb": [float(x) for x in deltas],
            "tail_current_a": [float(x) for x in terminal], "top_a": float(terminal[-1]),
            "hold_top_a": float(terminal[0]), "excess_a": tail["excess_a"], "l_max_h": tail["l_max_h"]}


def _current_mode_hold(d):
    """For a current-mode hold, a function of the cold loops at a branch's top supply giving
    ``(hold top A, bottom A, settle s)`` for :func:`channel_bound_params`.

    The comparator trips where the reading reaches the threshold code: the true current is
    then the code's current over the reading factor (the sense resistor's and amplifier's
    tolerances, :func:`~coildrive.design.envelope.reading_factors`), so between ``I_min' =
    I_thr / high`` and ``I_hi' = I_thr / low`` (``I_thr`` the upper or peak threshold); the switch follows ``delay`` s later. Held
    on from ``i0`` for the delay, the current is ``A (1 - e^-a) + i0 e^-a`` (``A = V/R_on``,
    ``a = delay R_on / L``) ``= T(I) + (i0 - I) e^-a`` for any ``I``, with ``T(I) = A - (A -
    I) e^-a`` the top a crossing of ``I`` leads to (``A`` where ``A <= I``: the threshold
    is out of reach). So the hold's top is at most ``min(A, A - (A - I_hi') e^-a)`` at the
    coldest loop, highest over the tolerance corners; after the peak a current ``i0 >=
    I_min'`` is at most that top plus ``(i0 - I_lo')`` falling at least as fast as ``exp(-R
    t/L)`` (``R = min(R_on, R_off)``; taking ``I = I_min'`` above) once the first
    switching cycle after the peak is over:
    hysteretic, the delay (then off, a monotone decay down to the lower threshold);
    fixed off-time, the delay plus the off time (each further cycle the same again, the
    excess over the threshold multiplied by ``exp(-(delay R_on + t_off R_off)/L)``). The
    bottom of :func:`channel_bound_params`'s excess is therefore ``I_lo'``
    (docs/design-method.md, "Several channels"). A fixed off-time may switch on with the
    current still above the threshold and then runs the delay alone: the top is at most
    the larger of the above and :func:`_delay_orbit_top`."""
    th = d.hold.thresholds
    low, high = envelope.reading_factors(d.drive)
    hyst = th.control == "hysteretic"
    settle = th.delay_s + (0.0 if hyst else th.off_time_s)

    def hold(cold):
        a_top = cold.v_on / cold.r_on
        i_hi = th.upper_a / low
        if isinstance(cold.inductance, eddy.EddyCoil):
            return _eddy_current_hold(th, cold, low, settle)
        if isinstance(cold.inductance, flux.FluxCoil):
            # a saturating coil: over the delay the flux rises by at most v_on x delay, so
            # the top is at most psi^-1(psi(I_hi') + v_on delay / s) at the lowest scale s,
            # and never above A from below it (docs/design-method.md, "Several channels")
            curve, s_min = cold.inductance.curve, float(np.min(cold.inductance.scale))
            rise = float(np.max(cold.v_on)) * th.delay_s / s_min
            reach = float(np.asarray(curve.current_of(float(curve.psi(i_hi)) + rise)).max())
            top = np.minimum(a_top, reach)
        else:
            top = np.minimum(a_top, a_top - (a_top - i_hi) * np.exp(-th.delay_s * cold.r_on / cold.inductance))
        if not hyst:
            top = np.maximum(top, _delay_orbit_top(th, cold))
        return float(np.max(top)), float(th.upper_a / high), settle
    return hold


def _delay_orbit_top(th, cold) -> np.ndarray:
    """The top (A; with an eddy term the magnetising current's) of the PWM orbit of a fixed
    off-time hold that switches on above its threshold every time: ``delay`` on, ``t_off``
    off, at the cold loops ``cold``. One such cycle maps a start onto the next
    increasingly and contracts (every segment's flow does: ``d(psi_a - psi_b)/dt = -R (i_a
    - i_b)``), so with the tops of the cycles that cross the threshold at most ``T``, every
    top after one at most ``max(T, x*)`` stays there (``x*`` this orbit's top), and a top
    above it comes down by the contraction (docs/design-method.md, "Several channels")."""
    cycle = th.delay_s + th.off_time_s
    orbit = pwm.pwm_steady_state(th.delay_s / cycle, 1.0 / cycle, cold.v_on, cold.r_on, cold.r_off,
                                 cold.v_off, cold.inductance, mixed=cold.mixed)
    return orbit.i_max


def _eddy_current_top(th, cold, low: float) -> tuple[np.ndarray, np.ndarray]:
    """``(top, J)`` (A, magnetising, per cold loop) of a current-mode hold with an eddy
    term (:func:`_eddy_current_hold`): the highest magnetising current an on-time ends at,
    and the magnetising current the switch trips off at (at most). On a flux-linkage curve
    the delay's rise is at most the flux's ``V_th delay / s`` (the lowest scale ``s``):
    ``psi^-1(psi(J) + V_th delay / s)``, never above ``A`` from below it."""
    e = cold.inductance
    r_e, l_m = e.resistance, e.magnetising
    a_top = cold.v_on / cold.r_on
    j = sensed_threshold(th.upper_a / low, cold.v_on, cold.r_on, r_e)
    if th.control == "hysteretic":
        j = np.maximum(j, sensed_threshold(th.lower_a / low, -cold.v_off, cold.r_off, r_e))
        if cold.mixed is not None:   # a bridge's mixed decay: the lower threshold met in the fast part
            j = np.maximum(j, sensed_threshold(th.lower_a / low, -cold.mixed.v_fast, cold.mixed.r_fast, r_e))
    r_th = cold.r_on * r_e / (cold.r_on + r_e)
    if isinstance(l_m, flux.FluxCoil):
        curve, s_min = l_m.curve, float(np.min(l_m.scale))
        v_th = float(np.max(cold.v_on * r_e / (cold.r_on + r_e)))
        reach = np.asarray(curve.current_of(curve.psi(np.maximum(j, 0.0)) + v_th * th.delay_s / s_min), float)
        top = np.maximum(j, np.minimum(a_top, reach))
    else:
        top = np.maximum(j, a_top - (a_top - j) * np.exp(-th.delay_s * r_th / l_m))
    if th.control != "hysteretic":
        top = np.maximum(top, _delay_orbit_top(th, cold))
    return top, j


def _eddy_current_hold(th, cold, low: float, settle: float) -> tuple[float, float, float]:
    """:func:`_current_mode_hold`'s ``(hold top A, bottom A, settle s)`` with an eddy term
    on a linear coil, from the cold loops ``cold`` (docs/design-method.md, "An
    eddy-current term"). The comparator reads the terminal current, the state is the
    magnetising current ``i_m``, which rises toward ``A = V/R_on`` on the Thevenin pair.
    The switch trips off at a magnetising current of at most ``J``: the upper (peak)
    threshold read low, ``((R_on + R_e) I_hi' - V) / R_e``; hysteretic, also the lower
    threshold read low as it switches on (``((R_off + R_e) I_lo' + V_off) / R_e``, and a
    bridge's mixed decay's fast path ``((R_f + R_e) I_lo' + V_f) / R_e``: it may step above
    the upper at once). So an on-time ends at most at ``max(J, A - (A - J)
    exp(-delay R_th/L))``; a fixed off-time may also switch on above ``J`` and run the
    delay alone, a PWM of ``delay`` on and ``t_off`` off whose orbit's top is the other
    bound (the map of one such cycle is a contraction: the tops stay under the larger).
    The hold's top is the terminal current there (off it is below ``i_m``); the bottom
    of the tail's excess is the lowest ``J`` (magnetising)."""
    r_e = cold.inductance.resistance
    top, j = _eddy_current_top(th, cold, low)
    terminal = np.maximum(top, (cold.v_on + r_e * top) / (cold.r_on + r_e))
    return float(np.max(terminal)), float(np.min(j)), settle


def _summary(branches: list[dict]) -> dict:
    """``branches`` and what :func:`stagger_bound` reads of them: the longest peak, the
    PWM period, the highest hold top, the largest excess, the highest hold top plus excess,
    the slowest decay rate (1/s) and ``busy_s``, from switch-on to the end of the first
    PWM period after the longest peak or of a boost converter's recharge, the later."""
    return {"branches": branches,
            "peak_s": max(x["peak_s"] for x in branches),
            "pwm_period_s": max(x["pwm_period_s"] for x in branches),
            "hold_top_a": max(x["hold_top_a"] for x in branches),
            "excess_a": max(x["excess_a"][0] for x in branches),
            "top_a": max(x.get("top_a", x["hold_top_a"] + x["excess_a"][0]) for x in branches),
            "rate_per_s": min(x["slow_resistance_ohm"] / x["tail_inductance_h"][-1] for x in branches),
            "busy_s": max([max(x["peak_s"] for x in branches) + max(x["pwm_period_s"] for x in branches)]
                          + [x.get("converter_until_s", 0.0) for x in branches])}


def supply_cells(params: list[dict]) -> list[tuple[float, float, list[list[int]]]]:
    """The rail's supply range cut where any channel's branch range
    (``supply_low_v..supply_v``) starts or ends: for each cell ``(low V, high V,
    branches)``, each channel's branches readable inside it (all of them where the cell is outside the channel's own range).
    Every channel on a rail sees the same source voltage, so the rail's current at a
    supply in a cell is at most the sum over the channels of their largest readable
    branch there. Cells with the same branches are given once."""
    edges = sorted({x for p in params for b in p["branches"] for x in (b["supply_low_v"], b["supply_v"])})
    if len(edges) < 2:
        edges = edges * 2
    cells, seen = [], set()
    for a, z in zip(edges[:-1], edges[1:]):
        if z <= a and len(edges) > 2:
            continue
        cell = []
        for p in params:
            got = [j for j, b in enumerate(p["branches"])
                   if (b["supply_low_v"] < z and b["supply_v"] > a) or b["supply_low_v"] == b["supply_v"]]
            cell.append(got or list(range(len(p["branches"]))))
        key = tuple(tuple(c) for c in cell)
        if key not in seen:
            seen.add(key)
            cells.append((a, z, cell))
    return cells


def total_bound(params: list[dict], offsets, cells=None) -> tuple[float, float]:
    """``(upper bound A, time s)`` of the rail's current with the channels started at
    ``offsets`` (s): between two switching moments (a switch-on, a branch's peak end, the
    end of its first PWM period) every branch's rise only grows and its tail only falls,
    so on each piece ``[u, w]`` (at most :data:`PIECE_S` long) a branch draws at most its
    rise at ``w`` or the rest at ``u``; the rail, at a supply in one of the
    :func:`supply_cells` (``cells``, computed when not given), at most the sum over the
    channels of their largest branch readable there; the bound is the largest over the
    cells and pieces."""
    offsets = np.asarray(offsets, float)
    cells = supply_cells(params) if cells is None else cells
    u, _, rows = _piece_rows(params, offsets)
    best, when = -1.0, 0.0
    for _, _, cell in cells:
        total = sum(r[idx].max(axis=0) for r, idx in zip(rows, cell))
        k = int(np.argmax(total))
        if total[k] > best:
            best, when = float(total[k]), float(u[k])
    return best, when


def _piece_rows(params: list[dict], offsets: np.ndarray):
    """``(u, w, rows)``: the pieces ``[u, w]`` (s) of :func:`total_bound` -- cut at every
    switching moment, at most :data:`PIECE_S` long, one past the last moment -- and per
    channel its branches' upper bounds on each piece (A, branches x pieces)."""
    marks = [offsets]
    for o, p in zip(offsets, params):
        for b in p["branches"]:
            marks += [[o + b["peak_s"], o + b["peak_s"] + b["pwm_period_s"], o + b.get("converter_until_s", 0.0)]]
    moments = np.unique(np.concatenate(marks))
    moments = np.append(moments, moments[-1] + PIECE_S)
    count = np.maximum(np.ceil(np.diff(moments) / PIECE_S).astype(int), 1)
    start = np.repeat(moments[:-1], count)
    step = np.repeat(np.diff(moments) / count, count)
    k_in = np.arange(len(start)) - np.repeat(np.cumsum(count) - count, count)
    u = start + k_in * step
    w = u + step
    rows = [np.array([_piece_draw(u - o, w - o, b) for b in p["branches"]]) for o, p in zip(offsets, params)]
    return u, w, rows


def bus_from_bound(v_s: float, r_s: float, cap: float, params: list[dict], offsets) -> tuple[float, float]:
    """``(lowest bus V, time s)``, a bound from below, of a rail at source voltage ``v_s``
    behind ``r_s`` ohm with ``cap`` F at the board, its channels started at ``offsets``
    (s) with the rail-current bounds ``params`` (their branches readable at ``v_s``:
    ``supply_low_v <= v_s``). The droop ``d = v_s - v`` obeys ``R_s C d' = R_s I - d``,
    a positive linear filter of the rail's current ``I``; each coil's current on the
    drooped bus is at most its stiff-bus bound (it only grows with the voltage), so ``d``
    is at most the filter of ``R_s`` x the sum of the bounds, taken piecewise constant at
    each piece's bound (exact exponentials), and after the last piece -- where the bounds
    only fall -- at most the larger of its end value and ``R_s`` x the last piece's sum."""
    low = [_summary([b for b in p["branches"] if b["supply_low_v"] <= v_s] or p["branches"][:1]) for p in params]
    u, w, rows = _piece_rows(low, np.asarray(offsets, float))
    total = np.sum([r.max(axis=0) for r in rows], axis=0) * r_s
    decay = np.exp(-(w - u) / (r_s * cap))
    d, top, when = 0.0, 0.0, 0.0
    for k in range(len(u)):
        d = d * decay[k] + total[k] * (1.0 - decay[k])
        if d > top:
            top, when = d, float(w[k])
    if total[-1] > top:
        top, when = float(total[-1]), float(w[-1])
    return v_s - top, when


def stagger_bound(params: list[dict], positions: list[int], fixed: list[float | None],
                  limit: float) -> tuple[float | None, str]:
    """A stagger ``S_hi`` (s) from which on the rail's :func:`total_bound` is proved to stay
    within ``limit`` A (``None`` and the reason when no stagger can), for channels that
    start at ``positions[k] x s`` unless ``fixed[k]`` gives their start (s).

    Proof (docs/design-method.md, "Several channels"): once ``s >= W`` -- the longest peak
    plus a PWM period, and past the peaks of the channels that do not move (a fixed start,
    or position 0) -- no two moving peaks overlap and every earlier channel's peak ended
    at least ``s - W`` before a moving peak starts, so the sum is at most
    ``L_inf + sum_j excess_j exp(-(s - W) rate_j)``; ``L_inf`` is the worst of the still
    channels' own sum and each moving channel's highest draw on the hold currents of the
    channels started before it. So ``s >= W + max_j ln(n excess_j / (limit - L_inf)) /
    rate_j`` is within the limit. The rail shares one supply: this is done in each of the
    :func:`supply_cells` with the channels' branches readable there, and the largest
    ``S_hi`` taken."""
    s_hi = 0.0
    for lo, hi, cell in supply_cells(params):
        got, why = _stagger_bound_cell([_summary([p["branches"][j] for j in idx]) for p, idx in zip(params, cell)],
                                       positions, fixed, limit)
        if got is None:
            return None, f"{why} (supply {lo:.4g}..{hi:.4g} V)"
        s_hi = max(s_hi, got)
    return s_hi, ""


def _stagger_bound_cell(params: list[dict], positions: list[int], fixed: list[float | None],
                        limit: float) -> tuple[float | None, str]:
    """:func:`stagger_bound` with every channel's branches readable at one supply."""
    n = len(params)
    moving = sorted((k for k in range(n) if fixed[k] is None and positions[k] > 0),
                    key=lambda k: positions[k])
    still = [k for k in range(n) if k not in moving]
    start = [0.0 if f is None else f for f in fixed]
    top_still = total_bound([params[k] for k in still], [start[k] for k in still])[0] if still else 0.0
    reach = max([start[k] + params[k]["busy_s"] for k in still] + [0.0])
    wait = max([reach] + [p["busy_s"] for p in params])
    holds = sum(params[k]["hold_top_a"] for k in still)
    l_inf, worst = top_still, "the channels that start at fixed times, together"
    for k in moving:
        peak = params[k]["top_a"]
        if peak + holds > l_inf:
            l_inf, worst = peak + holds, f"a peak on the hold currents of the channels before it"
        holds += params[k]["hold_top_a"]
    if not l_inf < limit:
        return None, (f"the bound stays at {l_inf:.4g} A at any stagger ({worst}), not below the "
                      f"limit {limit:.4g} A")
    margin = limit - l_inf
    extra = max([math.log(n * p["excess_a"] / margin) / p["rate_per_s"] for p in params
                 if p["excess_a"] > 0 and n * p["excess_a"] > margin] + [0.0])
    return wait + extra, ""


def find_stagger(params: list[dict], fixed: list[float | None], limit: float, tick: float,
                 rails: list[list[int]]) -> tuple[int | None, str]:
    """The least stagger in whole ticks (``tick`` s) at which the :func:`total_bound` of
    every rail (lists of channel indices) stays within ``limit`` A, channel ``k`` starting
    at ``k`` staggers unless ``fixed[k]`` gives its start (whole ticks); and how it was
    searched, or ``None`` and why not. Every tick from 0 up to the largest of the rails'
    :func:`stagger_bound` is tried: the first that holds is the least."""
    s_hi = 0.0
    for ks in rails:
        got, why = stagger_bound([params[k] for k in ks], list(ks), [fixed[k] for k in ks], limit)
        if got is None:
            return None, why
        s_hi = max(s_hi, got)
    last = math.ceil(s_hi / tick * (1 + 1e-9)) + 1
    for s in range(last + 1):
        off = [s * tick * k if fixed[k] is None else fixed[k] for k in range(len(params))]
        if all(total_bound([params[k] for k in ks], [off[k] for k in ks])[0] <= limit for ks in rails):
            return s, (f"the least whole tick: every tick from 0 tried, within the limit from "
                       f"{s_hi * 1e3:.4g} ms on (proved)")
    return None, f"no stagger up to {last} ticks keeps the bound within {limit:.4g} A"


# --------------------------------------------------------------------------- the system
def system_drives(system: System) -> list:
    """Each channel's drive with its shared timer fixed (the channels' order); a one-line
    :class:`InputError` naming the channel a shared timer cannot serve. A hysteretic
    current-mode hold switches on its thresholds, not on the timer; its fixed-duty fallback
    (what the firmware starts the hold with or falls back to, :mod:`.hold_current`) runs on
    the timer's period at ``hold.frequency`` and takes part as a voltage-mode hold does. A
    fixed off-time is the timer's own period, and a current-mode mixed decay's fast part
    its own one-shot, so neither can share one. A latching coil has
    no hold PWM: it takes no part in a shared timer."""
    board_ch = system.channels[0].drive.board.channels
    timer = system.channels[0].drive.board.timer
    channels = list(system.channels)
    seen: set[tuple[int, ...]] = set()
    for ch in system.channels:
        group = board_ch.group("timers", ch.number)
        members = [c for c in channels if c.number in group and c.drive.latch is None]
        if group in seen or len(members) < 2:
            continue
        seen.add(group)
        for c in members:
            if c.drive.hold.mode == "current" and c.drive.hold.control == "off_time":
                raise InputError(c.drive.source, "hold.control",
                                 f"channel {c.name!r} of {system.source}: a fixed off-time is made by "
                                 "its timer's own prescaler and period, which a timer shared by channels "
                                 f"{list(group)} cannot give; expected the channel alone on a timer "
                                 "([channels] timers) or control = \"hysteretic\"")
            if c.drive.hold.mode == "current" and c.drive.hold.fast_fraction > 0:
                raise InputError(c.drive.source, "hold.fast_fraction",
                                 f"{c.drive.hold.fast_fraction:g} on channel {c.name!r} of {system.source}: "
                                 "a current-mode mixed decay's fast part is a one-shot of its timer's own "
                                 f"prescaler and period, which a timer shared by channels {list(group)} "
                                 "cannot give; expected the channel alone on a timer ([channels] timers) "
                                 "or 0")
        windows = [(c.name, c.drive.hold.frequency * (1 - c.drive.hold.frequency_tolerance),
                    c.drive.hold.frequency * (1 + c.drive.hold.frequency_tolerance),
                    c.drive.hold.frequency) for c in members]
        got = shared_timer(timer.clock, timer.bits, timer.prescaler_max, timer.prescalers, windows)
        if isinstance(got, str):
            raise InputError(system.source, "channel", got)
        channels = [with_timer(c, *got) if c.number in group else c for c in channels]
    return [c.drive for c in channels]


def design_system(system: System) -> SystemResult:
    """Design every channel of ``system`` together (module docstring)."""
    from . import design
    from .latch import design_latch

    board_ch = system.channels[0].drive.board.channels
    timer = system.channels[0].drive.board.timer
    channels = list(system.channels)
    for ch in channels:
        _refuse(system, ch)
    checks: list[Check] = []
    channels = [dataclasses.replace(c, drive=d) for c, d in zip(channels, system_drives(system))]
    timers: list[dict] = []
    seen: set[tuple[int, ...]] = set()
    for ch in channels:
        group = board_ch.group("timers", ch.number)
        members = [c for c in channels if c.number in group and c.drive.latch is None]
        if group in seen or len(members) < 2:
            continue
        seen.add(group)
        p, n = members[0].drive.shared_timer
        timers.append({"channels": [c.name for c in members], "board_channels": list(group),
                       "prescaler": p, "period_ticks": n, "frequency_hz": timer.clock / (p * n),
                       "compare_ticks": {}})
    designs = [design_latch(c.drive) if c.drive.latch is not None else design(c.drive) for c in channels]
    for c, d in zip(channels, designs):
        a = None if is_latch(d) else d.armature
        if (a is not None and d.boost is not None and d.hold.regulation == "current"
                and a.seated_in_peak_corners is not None and a.seated_in_peak_corners < a.corners):
            # (the rail's bound of a current-mode hold takes the seated coil's thresholds)
            raise InputError(c.drive.source, "hold.mode", f"channel {c.name!r} of {system.source}: a current-mode "
                             "hold that carries the armature in flight after the boosted peak (at "
                             f"{a.corners - a.seated_in_peak_corners} of {a.corners} corners) is not modelled in a "
                             "system yet; expected a higher threshold (pull_in.current_margin: seated within the "
                             "peak at every corner) or a voltage-mode or closed-loop hold")
    for t in timers:
        for c, d in zip(channels, designs):
            if c.name in t["channels"]:
                t["compare_ticks"][c.name] = d.timer.compare_ticks
    for c, d in zip(channels, designs):
        if is_latch(d):
            for p in d.latch.pulses:
                if p.ticks is None:
                    raise InputError(c.drive.source, "reset.current" if p.name == "reset" else "pull_in.current",
                                     f"channel {c.name!r}: {p.not_reached}, so its {p.name} pulse has no length "
                                     "to stagger")
        elif d.pull_in.peak_ticks is None:
            raise InputError(c.drive.source, "pull_in.current",
                             f"channel {c.name!r}: {d.pull_in.not_reached}, so it has no peak to stagger")
    tick = 1.0 / channels[0].drive.board.tick.rate
    rails = _rails(board_ch, channels)
    limit = system.supply.current_limit
    r_s = system.supply.source_resistance
    # the firmware reads the rail drooped by at most R_s x the rail's current so far: within
    # the limit, R_s x limit (docs/design-method.md, "Several channels")
    params = [channel_bound_params(d, r_s * limit) for d in designs]
    fixed = [None if c.offset is None else math.ceil(c.offset / tick - 1e-9) * tick for c in channels]
    together = {}
    for name, ks in rails.items():
        got, delta = _consistent(designs, ks, [0.0] * len(ks), r_s)
        together[name] = (got[0], delta)
    if limit > 0:
        stagger, how = find_stagger(params, fixed, limit, tick, list(rails.values()))
        checks.append(Check("supply_current_limit", stagger is not None,
                            f"peaks {stagger} ticks apart keep every rail within {limit:.4g} A ({how})"
                            if stagger is not None else f"no stagger keeps the rail within "
                            f"{limit:.4g} A: {how}"))
    else:
        stagger, how = 0, "no supply.current_limit given: the peaks start together"
    s = stagger or 0
    offset_ticks = [s * k if f is None else round(f / tick) for k, f in enumerate(fixed)]
    offsets = [t * tick for t in offset_ticks]
    staggered, reading = {}, {}
    for name, ks in rails.items():
        got = total_bound([params[k] for k in ks], [offsets[k] for k in ks])
        reading[name] = r_s * limit
        if r_s > 0 and not (limit > 0 and got[0] <= limit):
            # beyond the limit (or none given) the readings may droop more: a consistent droop
            got, reading[name] = _consistent(designs, ks, [offsets[k] for k in ks], r_s)
            for k in ks:
                params[k] = channel_bound_params(designs[k], reading[name])
        staggered[name] = got
    for name, ks in rails.items():
        bridges = [channels[k].name for k in ks if designs[k].drive.switch.topology == "full_bridge"]
        if bridges:
            checks.append(Check(
                "shared_rail_return", False,
                f"full bridge channel(s) {bridges} return their coil's energy into the shared rail at each "
                "fast decay (the release, and a mixed-decay hold's off-times): the rail's current bound "
                "leaves that return out (the safe side for the current), but the rail's rise is checked "
                "only per channel against its drive file's [supply] sink and capacitance, not for several "
                "releasing together -- keep their releases apart or let the supply sink the current, and "
                "check the bus capacitor's rating", severity="warning"))
    hold_avg = {name: sum(_hold_average(designs[k]) for k in ks) for name, ks in rails.items()}
    droop = _droop(system, channels, designs, rails, offsets, params)
    heat = _heat(board_ch, channels, designs)
    out = [SystemChannel(c.name, c.number, c.drive.source, offset_ticks[k], offsets[k],
                         c.offset is not None, params[k], d)
           for k, (c, d) in enumerate(zip(channels, designs))]
    rail_rows = [{"channels": [channels[k].name for k in ks], "board_channels": list(name),
                  "peak_current_together_a": together[name][0],
                  "together_reading_droop_v": together[name][1],
                  "staggered_reading_droop_v": reading[name],
                  "peak_current_staggered_a": staggered[name][0],
                  "peak_current_time_s": staggered[name][1],
                  "hold_average_current_a": hold_avg[name], **droop.get(name, {})}
                 for name, ks in rails.items()]
    return SystemResult(system.name, system.source, channels[0].drive.board.name, limit, s,
                        how, timers, rail_rows, heat, out, checks)


def _consistent(designs, ks: list[int], offsets, r_s: float) -> tuple[tuple[float, float], float]:
    """``((bound A, time s), reading droop V)`` of the rail's current with the channels
    ``ks`` started at ``offsets`` (s) when no limit keeps it low. With a source resistance
    the readings droop by ``R_s`` x the rail's current, which this bound is itself of: a
    droop ``delta`` with ``R_s x bound(delta) <= delta`` is consistent (the rail cannot pass
    the bound before a reading sees more droop), found from 0 upwards; if it does not
    settle in six steps, the droop of every channel's ``V_max/R``."""
    def bound(delta: float) -> tuple[float, float]:
        return total_bound([channel_bound_params(designs[k], delta) for k in ks], offsets)
    got = bound(0.0)
    if not r_s > 0:
        return got, 0.0
    for _ in range(6):
        delta = r_s * got[0] * (1 + 1e-3) + 1e-6
        got = bound(delta)
        if r_s * got[0] <= delta:
            return got, delta
    delta = r_s * sum(designs[k].drive.supply.max / _lowest_resistance(designs[k]) for k in ks)
    return bound(delta), delta


def rail_curves(result: SystemResult, points: int = 6000) -> list[dict]:
    """What ``design SYSTEM.toml --plot`` draws, per rail: the bound of each channel's draw
    and of the rail's current against time (s after the first switch-on), staggered as
    designed and with the peaks together, each at the supply cell of :func:`supply_cells`
    where the total is highest (its channels' largest readable branches there); the
    limit (A, 0 = none). Arrays on ``points`` instants; never above the result's bound."""
    by_name = {c.name: c for c in result.channels}
    out = []
    for rail in result.rails:
        chans = [by_name[n] for n in rail["channels"]]
        views = {}
        for view, params, offsets in (
                ("staggered", [channel_bound_params(c.design, rail["staggered_reading_droop_v"])
                               for c in chans], [c.offset_s for c in chans]),
                ("together", [channel_bound_params(c.design, rail["together_reading_droop_v"])
                              for c in chans], [0.0] * len(chans))):
            end = max(o + p["peak_s"] for o, p in zip(offsets, params)) * 1.25 + 1e-3
            t = np.linspace(0.0, end, points)
            rows = [np.array([_branch_draw(t - o, b) for b in p["branches"]]) for o, p in zip(offsets, params)]
            best = None
            for low, high, cell in supply_cells(params):
                each = [r[idx].max(axis=0) for r, idx in zip(rows, cell)]
                total = np.sum(each, axis=0)
                if best is None or total.max() > best[1].max():
                    best = (each, total, (low, high))
            each, total, cell_v = best
            views[view] = {"time_s": t, "channel_a": each, "total_a": total,
                           "offsets_s": list(offsets), "supply_v": cell_v,
                           "bound_a": rail["peak_current_staggered_a" if view == "staggered"
                                           else "peak_current_together_a"]}
        out.append({"channels": list(rail["channels"]), "limit_a": result.current_limit_a,
                    "stagger_ticks": result.stagger_ticks, **views})
    return out


def _refuse(system: System, ch) -> None:
    """What the rail's current bound is made for: a linear coil (with a moving armature,
    an eddy term or both) or a flux-linkage curve (with an eddy term, a moving armature
    over two curves, or both), on one switch or a full bridge, under a voltage-mode (fixed, supply-table or
    closed-loop) hold or a current-mode one, or a latching coil (its pulses from the boost
    too), or a boosted peak (a linear coil with a moving armature, an eddy term or both; a
    curve, with an eddy term too). Anything else is refused in one line: a moving armature
    over two curves with a boosted peak (the single-channel design refuses it too), a
    latching coil with an eddy term or a curve (the pulses' bound takes a linear winding), and a
    boosted peak or pulses without ``supply.boost_efficiency`` (its converter's draw)."""
    d = ch.drive
    why = None
    if d.coil.flux_current and d.armature is not None and d.supply.boosted:
        key, why = "armature", "a moving armature over flux-linkage curves with a boosted peak"
    elif d.hold.mode == "latch" and (d.coil.eddy_resistance or d.coil.flux_current):
        key = "coil.eddy_resistance" if d.coil.eddy_resistance else "coil.flux_current"
        why = "a latching coil with an eddy-current term or a flux-linkage curve (its pulses' bound)"
    elif d.supply.boosted and not d.supply.boost_efficiency > 0:
        raise InputError(d.source, "supply.boost_efficiency", f"missing: channel {ch.name!r} of {system.source} "
                         "has a boosted peak or pulses, whose converter draws from the shared rail, expected its "
                         "efficiency (e.g. 0.85)")
    if why is not None:
        raise InputError(d.source, key, f"channel {ch.name!r} of {system.source}: {why} is not modelled "
                         "in a system yet; expected a linear coil (with an [armature], an eddy term or both) "
                         "or a flux-linkage curve (with an eddy term, an [armature] or both), "
                         "on one switch or a full bridge under a voltage-mode fixed, supply-table, closed-loop "
                         "or current-mode hold, or a latching coil on a linear winding without an eddy term (its pulses from the boost too); a boosted peak "
                         "on a linear coil (an eddy term, an [armature], both or neither) or on a curve (an eddy "
                         "term or not) without an [armature]")


def _rails(board_ch, channels) -> dict[tuple[int, ...], list[int]]:
    rails: dict[tuple[int, ...], list[int]] = {}
    for k, c in enumerate(channels):
        rails.setdefault(board_ch.group("supplies", c.number), []).append(k)
    return rails


def _droop(system: System, channels, designs, rails, offsets, params) -> dict:
    """The shared rail's lowest bus, the peaks together and staggered, at the lowest supply
    with each coil at the corner of the most current (cold, lowest resistance, inductance
    and freewheel drop): every peak and every hold's PWM on the shared timer, the duty the
    firmware reads there (the reading low: the highest); up to the last peak's end plus
    five ``R_s C`` and two PWM periods. A hold whose off-times go through a clamp across
    the switch draws from the rail while off too, and a current-mode hold switches on its
    own thresholds: then the peaks alone."""
    s = system.supply
    if not s.source_resistance > 0:
        return {}
    out = {}
    for name, ks in rails.items():
        if any(designs[k].drive.coil.flux_current or designs[k].drive.coil.eddy_resistance
               or designs[k].drive.switch.topology == "full_bridge" or is_latch(designs[k])
               or designs[k].drive.supply.boosted for k in ks):
            out[name] = _droop_bound(system, channels, designs, ks, offsets, params)
            continue
        r_on, r_off, v_off, l, tp, duty = [], [], [], [], [], []
        clamp = regulated = False
        for k in ks:
            d = designs[k]
            drv = d.drive
            v = drv.supply.min
            tol = envelope.tolerances(drv)
            lp = circuit.loop(drv, v, drv.ambient.min, tol.r_factor, tol.l_factor,
                              diode_factor=tol.diode_factor, fast_factor=tol.fast_factor,
                              sense_factor=tol.sense_factor)
            clamp = clamp or (drv.freewheel.type == "clamp" and not lp.bypassed)
            regulated = regulated or d.hold.mode == "current"
            r_on.append(float(np.min(lp.r_on)))
            r_off.append(float(np.min(lp.r_off)))
            v_off.append(float(np.min(lp.v_off)))
            # a moving armature's current is bounded by the open coil's (model/armature_bound.py)
            l.append(float(np.min(lp.inductance if drv.armature is None
                                  else circuit.open_inductance(drv, tol.l_factor))))
            tp.append(d.pull_in.peak_ticks / drv.board.tick.rate)
            low = envelope.supply_codes(drv, v)[0] if drv.board.supply_sense is not None else 0
            duty.append(float(_tables(d)[2](np.asarray(low))))
        v = channels[ks[0]].drive.supply.min
        period = max(1.0 / designs[k].hold.frequency_hz for k in ks)
        on_s = [offsets[k] for k in ks]
        rows = {}
        for view, on in (("together", [0.0] * len(ks)), ("staggered", on_s)):
            ends = [o + t for o, t in zip(on, tp)]
            if clamp or regulated:
                low, when = shared_bus.lowest_bus(v, s.source_resistance, s.capacitance, r_on, l, on, ends)
            else:
                t_end = max(ends) + 5 * s.source_resistance * s.capacitance + 2 * period
                low, when = shared_bus.lowest_bus_pwm(v, s.source_resistance, s.capacitance, r_on, r_off,
                                                      v_off, l, on, ends, duty, period, t_end)
            rows[view] = (low, float(when))
        out[name] = {"supply_v": v, "source_resistance_ohm": s.source_resistance,
                     "capacitance_f": s.capacitance,
                     "lowest_bus_together_v": rows["together"][0],
                     "lowest_bus_together_time_s": rows["together"][1],
                     "lowest_bus_staggered_v": rows["staggered"][0],
                     "lowest_bus_staggered_time_s": rows["staggered"][1],
                     "droop_method": ("the peaks alone (a hold through a clamp across the switch draws "
                                      "from the rail while off)" if clamp else
                                      "the peaks alone (a current-mode hold switches on its own "
                                      "thresholds, not on the shared timer)" if regulated else
                                      "every peak and every hold's PWM on the shared timer, exact"),
                     "hold_droop_v": s.source_resistance * sum(
                         designs[k].hold.max_mean_current_a * designs[k].hold.duty for k in ks)}
    return out


def _droop_bound(system: System, channels, designs, ks, offsets, params) -> dict:
    """:func:`_droop`'s figures for a rail with a saturating coil, an eddy term or a full
    bridge on it, from the channels' rail-current bounds (:func:`bus_from_bound`) at the lowest supply: a bound from below,
    peaks and holds included (the shared rail's exact solution is for linear coils)."""
    s = system.supply
    v = channels[ks[0]].drive.supply.min
    rows = {view: bus_from_bound(v, s.source_resistance, s.capacitance, [params[k] for k in ks], on)
            for view, on in (("together", [0.0] * len(ks)), ("staggered", [offsets[k] for k in ks]))}
    return {"supply_v": v, "source_resistance_ohm": s.source_resistance, "capacitance_f": s.capacitance,
            "lowest_bus_together_v": rows["together"][0], "lowest_bus_together_time_s": rows["together"][1],
            "lowest_bus_staggered_v": rows["staggered"][0], "lowest_bus_staggered_time_s": rows["staggered"][1],
            "droop_method": ("a bound from the channels' rail-current bounds at the lowest supply, peaks "
                             "and holds (a saturating coil, an eddy term or a full bridge is on the rail; a "
                             "bridge's fast decay returning energy only lifts the bus)"),
            "hold_droop_v": s.source_resistance * sum(_hold_average(designs[k]) for k in ks)}


def _heat(board_ch, channels, designs) -> dict:
    """Heat on the board (W): each channel's freewheel path (the cycle's average with
    ``[duty]``, else the continuous hold's at its worst corner) and switch (the hold's);
    the shared freewheel parts' sums; and the board's total."""
    per = []
    for c, d in zip(channels, designs):
        if is_latch(d):
            per.append(_latch_heat(c.name, d))
            continue
        cyc = d.thermal_cycle.freewheel if d.thermal_cycle is not None else None
        fw = cyc["average_power_w"] if cyc else d.hold.freewheel_power_w
        per.append({"channel": c.name, "freewheel_w": fw, "switch_w": d.hold.switch_power_w,
                    "freewheel_basis": "on/off cycle average" if cyc else "continuous hold"})
    shared = []
    for g in board_ch.freewheels:
        ks = [k for k, c in enumerate(channels) if c.number in g]
        if len(ks) > 1:
            shared.append({"board_channels": list(g), "channels": [channels[k].name for k in ks],
                           "power_w": sum(per[k]["freewheel_w"] for k in ks)})
    return {"channels": per, "shared_freewheel": shared,
            "board_w": sum(p["freewheel_w"] + p["switch_w"] for p in per)}
