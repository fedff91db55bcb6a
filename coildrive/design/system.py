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
  current_limit``; the rail's current is bounded above, channel by channel, in closed
  form (docs/design-method.md, "Several channels");
* **the droop** of the shared rail when the channels pull in together and staggered
  (:mod:`coildrive.model.shared_bus`), with the system's ``[supply]`` source resistance
  and bulk capacitance;
* **the heat** in the shared freewheel parts and in the board.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..errors import InputError
from ..model import shared_bus
from ..system_file import System, with_timer
from .result import Check, SystemChannel, SystemResult
from .timer import MIN_PERIOD_TICKS, timer_for

#: Pieces each interval between two switching moments is cut into by the bound's
#: evaluation (the bound is rigorous for any number; more pieces make it tighter).
PIECES = 48


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
def draw_bound(t, params: dict) -> np.ndarray:
    """Upper bound (A) of the current one channel draws from the rail ``t`` s after its
    switch-on (0 before), from ``params`` (:func:`channel_bound_params`): during the peak
    (``t <= peak_s``) the stiff-bus rise ``V/R (1 - exp(-t R/L))`` with the highest supply,
    the lowest coil resistance and inductance; after it the hold's highest current plus
    the excess the peak leaves, which decays at least as fast as ``exp(-R t/L)`` from the
    end of the first PWM period: ``hold_top + excess min(1, exp(-(t - peak - T_pwm) rate))``."""
    t = np.asarray(t, float)
    v, r, l, tp = params["supply_v"], params["resistance_ohm"], params["inductance_h"], params["peak_s"]
    rise = v / r * -np.expm1(-np.clip(t, 0.0, None) * r / l)
    age = t - tp - params["pwm_period_s"]
    tail = params["hold_top_a"] + params["excess_a"] * np.exp(-np.clip(age, 0.0, None) * params["rate_per_s"])
    return np.where(t < 0, 0.0, np.where(t <= tp, rise, tail))


def channel_bound_params(d) -> dict:
    """The figures of a channel's Design that :func:`draw_bound` reads (SI)."""
    rc = min(c.resistance_ohm for c in d.corners)
    lmin = min(c.inductance_h for c in d.corners)
    lmax = max(c.inductance_h for c in d.corners)
    v = d.drive.supply.max
    tp = d.pull_in.peak_ticks / d.drive.board.tick.rate
    i_pe = v / rc * -math.expm1(-tp * rc / lmin)
    low = d.hold.min_mean_current_a - d.hold.ripple_a
    return {"supply_v": v, "resistance_ohm": rc, "inductance_h": lmin, "peak_s": tp,
            "peak_end_a": i_pe, "hold_top_a": d.hold.max_mean_current_a + d.hold.ripple_a,
            "excess_a": max(0.0, i_pe - low), "rate_per_s": rc / lmax,
            "pwm_period_s": 1.0 / d.hold.frequency_hz}


def total_bound(params: list[dict], offsets) -> tuple[float, float]:
    """``(upper bound A, time s)`` of the largest sum of :func:`draw_bound` over the
    channels started at ``offsets`` (s): between two switching moments every rise only
    grows and every tail only falls, so on each of :data:`PIECES` pieces ``[u, w]`` the sum
    is at most the rises at ``w`` plus the rest at ``u``."""
    offsets = np.asarray(offsets, float)
    ends = np.array([o + p["peak_s"] for o, p in zip(offsets, params)])
    grace = np.array([o + p["peak_s"] + p["pwm_period_s"] for o, p in zip(offsets, params)])
    moments = np.unique(np.concatenate([offsets, ends, grace, [offsets.max() + ends.max()]]))
    frac = np.linspace(0.0, 1.0, PIECES + 1)
    u = (moments[:-1, None] + np.outer(np.diff(moments), frac[:-1])).ravel()
    w = (moments[:-1, None] + np.outer(np.diff(moments), frac[1:])).ravel()
    mid = 0.5 * (u + w)
    total = np.zeros_like(u)
    for o, p in zip(offsets, params):
        rising = (mid > o) & (mid < o + p["peak_s"])
        total += np.where(rising, draw_bound(w - o, p), draw_bound(u - o, p))
    k = int(np.argmax(total))
    return float(total[k]), float(u[k])


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
    rate_j`` is within the limit."""
    n = len(params)
    moving = sorted((k for k in range(n) if fixed[k] is None and positions[k] > 0),
                    key=lambda k: positions[k])
    still = [k for k in range(n) if k not in moving]
    start = [0.0 if f is None else f for f in fixed]
    top_still = total_bound([params[k] for k in still], [start[k] for k in still])[0] if still else 0.0
    reach = max([start[k] + params[k]["peak_s"] + params[k]["pwm_period_s"] for k in still] + [0.0])
    wait = max([reach] + [p["peak_s"] + p["pwm_period_s"] for p in params])
    holds = sum(params[k]["hold_top_a"] for k in still)
    l_inf, worst = top_still, "the channels that start at fixed times, together"
    for k in moving:
        peak = params[k]["hold_top_a"] + params[k]["excess_a"]
        if peak + holds > l_inf:
            l_inf, worst = peak + holds, f"a peak on the hold currents of the channels before it"
        holds += params[k]["hold_top_a"]
    if not l_inf < limit:
        return None, f"{l_inf:.4g} A at any stagger ({worst}), not below the limit {limit:.4g} A"
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
    :class:`InputError` naming the channel a shared timer cannot serve."""
    board_ch = system.channels[0].drive.board.channels
    timer = system.channels[0].drive.board.timer
    channels = list(system.channels)
    seen: set[tuple[int, ...]] = set()
    for ch in system.channels:
        group = board_ch.group("timers", ch.number)
        members = [c for c in channels if c.number in group]
        if group in seen or len(members) < 2:
            continue
        seen.add(group)
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
        members = [c for c in channels if c.number in group]
        if group in seen or len(members) < 2:
            continue
        seen.add(group)
        p, n = members[0].drive.shared_timer
        timers.append({"channels": [c.name for c in members], "board_channels": list(group),
                       "prescaler": p, "period_ticks": n, "frequency_hz": timer.clock / (p * n),
                       "compare_ticks": {}})
    designs = [design(c.drive) for c in channels]
    for t in timers:
        for c, d in zip(channels, designs):
            if c.name in t["channels"]:
                t["compare_ticks"][c.name] = d.timer.compare_ticks
    for c, d in zip(channels, designs):
        if d.pull_in.peak_ticks is None:
            raise InputError(c.drive.source, "pull_in.current",
                             f"channel {c.name!r}: {d.pull_in.not_reached}, so it has no peak to stagger")
    tick = 1.0 / channels[0].drive.board.tick.rate
    params = [channel_bound_params(d) for d in designs]
    rails = _rails(board_ch, channels)
    limit = system.supply.current_limit
    fixed = [None if c.offset is None else math.ceil(c.offset / tick - 1e-9) * tick for c in channels]
    together = {name: total_bound([params[k] for k in ks], [0.0] * len(ks))[0] for name, ks in rails.items()}
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
    staggered = {name: total_bound([params[k] for k in ks], [offsets[k] for k in ks])
                 for name, ks in rails.items()}
    hold_avg = {name: sum(designs[k].hold.max_mean_current_a * designs[k].hold.duty for k in ks)
                for name, ks in rails.items()}
    droop = _droop(system, channels, designs, rails, offsets)
    heat = _heat(board_ch, channels, designs)
    out = [SystemChannel(c.name, c.number, c.drive.source, offset_ticks[k], offsets[k],
                         c.offset is not None, params[k], d)
           for k, (c, d) in enumerate(zip(channels, designs))]
    rail_rows = [{"channels": [channels[k].name for k in ks], "board_channels": list(name),
                  "peak_current_together_a": together[name],
                  "peak_current_staggered_a": staggered[name][0],
                  "peak_current_time_s": staggered[name][1],
                  "hold_average_current_a": hold_avg[name], **droop.get(name, {})}
                 for name, ks in rails.items()]
    return SystemResult(system.name, system.source, channels[0].drive.board.name, limit, s,
                        how, timers, rail_rows, heat, out, checks)


def _refuse(system: System, ch) -> None:
    """What the rail's current bound is made for: a linear coil without a moving armature,
    a voltage-mode hold (fixed or supply table) and one switch. Anything else is refused
    in one line."""
    d = ch.drive
    why = None
    if d.coil.flux_current:
        key, why = "coil.flux_current", "a flux-linkage curve"
    elif d.armature is not None:
        key, why = "armature", "a moving armature"
    elif d.hold.mode != "voltage" or d.hold.regulation == "closed_loop":
        key, why = "hold.mode", f"a {d.hold.regulation.replace('_', ' ')} hold"
    elif d.switch.topology == "full_bridge":
        key, why = "switch.topology", "a full bridge"
    if why is not None:
        raise InputError(d.source, key, f"channel {ch.name!r} of {system.source}: {why} is not modelled "
                         "in a system yet; expected a linear coil, no [armature], one switch and a "
                         "voltage-mode fixed or supply-table hold")


def _rails(board_ch, channels) -> dict[tuple[int, ...], list[int]]:
    rails: dict[tuple[int, ...], list[int]] = {}
    for k, c in enumerate(channels):
        rails.setdefault(board_ch.group("supplies", c.number), []).append(k)
    return rails


def _droop(system: System, channels, designs, rails, offsets) -> dict:
    """The shared rail's lowest bus over the peaks, together and staggered, at the lowest
    supply with each coil at its lowest resistance and inductance (the most current)."""
    s = system.supply
    if not s.source_resistance > 0:
        return {}
    out = {}
    for name, ks in rails.items():
        r, l, tp = [], [], []
        for k in ks:
            d = designs[k]
            drv = d.drive
            extra = drv.switch.on_resistance + drv.board.sense.resistance
            r.append(min(c.resistance_ohm for c in d.corners) + extra)
            l.append(min(c.inductance_h for c in d.corners))
            tp.append(d.pull_in.peak_ticks / drv.board.tick.rate)
        v = channels[ks[0]].drive.supply.min
        low0, when0 = shared_bus.lowest_bus(v, s.source_resistance, s.capacitance, r, l,
                                            [0.0] * len(ks), tp)
        on = [offsets[k] for k in ks]
        low1, when1 = shared_bus.lowest_bus(v, s.source_resistance, s.capacitance, r, l, on,
                                            [o + t for o, t in zip(on, tp)])
        out[name] = {"supply_v": v, "source_resistance_ohm": s.source_resistance,
                     "capacitance_f": s.capacitance, "lowest_bus_together_v": low0,
                     "lowest_bus_together_time_s": float(when0), "lowest_bus_staggered_v": low1,
                     "lowest_bus_staggered_time_s": float(when1),
                     "hold_droop_v": s.source_resistance * sum(
                         designs[k].hold.max_mean_current_a * designs[k].hold.duty for k in ks)}
    return out


def _heat(board_ch, channels, designs) -> dict:
    """Heat on the board (W): each channel's freewheel path (the cycle's average with
    ``[duty]``, else the continuous hold's at its worst corner) and switch (the hold's);
    the shared freewheel parts' sums; and the board's total."""
    per = []
    for c, d in zip(channels, designs):
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
