"""``simulate SYSTEM.toml``: every channel of a designed system at one operating point, as
the firmware runs them on the shared timer (:mod:`coildrive.model.shared_pwm`).

Each channel switches on at its start offset (its ``offset_ticks`` scheduler ticks after
the first channel's) for the peak its firmware picks at the supply; its hold then
follows the timer's output: on at every period start of the timer it is on (the shared
timer's, counting from 0 s, the first channel's switch-on), off at its own compare. The
rail's current is the sum of the switches' currents (a coil's current while its switch
conducts, and while it decays through a clamp across its switch, which takes it from the
rail). On a rail with the system's source resistance and capacitance whose channels are
all linear coils on voltage-mode holds, on one switch with a path across the coil (an
eddy term too) or on a full bridge (slow or mixed decay in the hold), or linear coils on
one switch under a current-mode hold (their comparators' edges found on the bus,
:class:`~coildrive.model.shared_bus.ThresholdRun`; the rail is run twice so that the grid
has those edges), the bus droops and its droop is fed back into the coils, exact between
switching moments (:func:`coildrive.model.shared_bus.on_bus` on each channel's
:func:`bus_run`; ``SystemRun.bus``); any other rail runs on a stiff bus
(``SystemRun.stiff`` says why).

A current-mode channel runs its own actuation
(:func:`coildrive.design.hold_current.current_mode_actuation`: the nominal thresholds
switch it, each edge a sample), on at its start offset for the peak its firmware picks
(on a drooping rail that feeds it, its run's switching is the bus's).
A boosted channel runs its own actuation (the peak from the boost until its threshold at
the nominal sense chain, the hold from the main supply), on at its start offset; its draw
from the rail is :func:`boost_draw` (the converter's input in place of the peak's coil
current).
A latching channel (:func:`latch_run`) fires its set pulse at its start offset and its
reset pulse ``hold_time`` later (at least its shortest interval); from the boost each pulse
ends at its threshold and it draws the converter's input (:func:`boost_draw`).
Any other channel with a moving armature, a flux-linkage curve, an eddy-current term or a full
bridge runs the model's own single-channel actuation
(:func:`coildrive.model.waveform.actuation`) as the reference driver switches it, in its
once-a-period handler: on at the first period start of the shared timer at or after its
offset, its peak to the first period start at or after its ticks' end (so its hold's
periods are the timer's), then its whole periods of hold and the release. Its current
between its own samples (at the other channels' sample times) is interpolated linearly;
at a step (an eddy term's terminal current at a switching moment) the grid keeps the value
after it. It draws its terminal current from the rail while its switch conducts; a full
bridge's fast decay (all four switches open, the body diodes conducting) returns the
current to the rail: negative.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ..model.circuit import full_bridge, loop, split_decay
from ..model.shared_bus import BusRun, ThresholdRun, on_bus
from ..model.shared_pwm import HOLD_OFF, ON, RELEASE, ChannelRun, channel_run
from ..model.waveform import EDGE, Waveform, actuation
from .firmware import firmware_setting
from .hold_current import current_mode_actuation
from .system import is_latch
from .result import SystemResult


@dataclass(frozen=True)
class SystemRun:
    """The simulated system: the time grid ``time`` (s), the rail's current ``rail`` (A),
    per channel (result order) its coil current ``current`` (A; the terminal current with
    an eddy term), switch state ``on`` (0/1), its draw from the rail ``draw`` (A), its
    :class:`~coildrive.model.shared_pwm.ChannelRun` (a linear coil on one switch) or its
    :class:`~coildrive.model.waveform.Waveform` shifted to its switch-on ``start`` (s; module
    docstring), and the timer period (s) and compare fraction its hold runs at; ``bus``:
    each drooping rail's bus (V) by CSV column name, ``stiff``: why a drooping rail runs
    stiff, one line each."""

    names: list[str]
    time: np.ndarray
    rail: np.ndarray
    current: list[np.ndarray]
    on: list[np.ndarray]
    runs: list
    periods: list[float]
    duties: list[float]
    draw: list[np.ndarray]
    start: list[float]
    bus: dict = field(default_factory=dict)
    stiff: list = field(default_factory=list)

    def to_csv(self) -> str:
        """``time_s``, ``current_a`` (the rail), ``<name>_current_a`` per channel, then
        ``<name>_on`` (the switch, 0/1) per channel, then each drooping rail's bus (V:
        ``bus_v``, with several rails ``bus_<its first channel>_v``)."""
        head = ",".join(["time_s", "current_a", *(f"{n}_current_a" for n in self.names),
                         *(f"{n}_on" for n in self.names), *self.bus])
        cols = np.column_stack([self.time, self.rail, *self.current])
        ons = np.column_stack(self.on)
        buses = np.column_stack([*self.bus.values()]) if self.bus else np.zeros((len(self.time), 0))
        rows = ("{},{}{}".format(",".join(f"{x:.9g}" for x in r), ",".join(str(int(x)) for x in o),
                                 "".join(f",{x:.9g}" for x in b))
                for r, o, b in zip(cols, ons, buses))
        return head + "\n" + "\n".join(rows) + "\n"


def simulate_system(result: SystemResult, supply: float, coil_temp: float, hold_time: float,
                    points: int = 8, r_factor: float = 1.0, l_factor: float = 1.0) -> SystemRun:
    """Every channel of ``result`` at bus ``supply`` V, coils at ``coil_temp`` degC and
    the tolerance factors (module docstring); ``hold_time`` s of hold each, ``points``
    samples per PWM segment (peak and release 40x)."""
    from ..errors import InputError
    from .core import MAX_WAVEFORM_SAMPLES

    f_max = max([max(c.design.hold.frequency_hz, c.design.hold.current_mode.max_frequency_hz
                     if c.design.hold.current_mode is not None else 0.0)
                 for c in result.channels if not is_latch(c.design)] + [1.0])
    samples = len(result.channels) * (2.0 * points * hold_time * f_max + 80.0 * points) * 2
    if not samples <= MAX_WAVEFORM_SAMPLES:
        raise InputError("--hold-time", "", f"{hold_time:g} s of hold on {len(result.channels)} channels "
                         f"at up to {f_max:.6g} Hz with {points} points a segment is about "
                         f"{samples:,.0f} samples, more than the {MAX_WAVEFORM_SAMPLES:,} one run may "
                         "have: shorten --hold-time or lower --points")
    runs, periods, duties, starts = [], [], [], []
    boosts: dict[int, float] = {}      # a boosted channel's peak (s), by its run
    gated: dict[int, tuple] = {}       # a current-mode channel's (thresholds, peak s, hold s), by its run
    hold_clamp = {}    # a linear one-switch channel whose hold's off-times go through a clamp
    for c in result.channels:
        d = c.design
        drv = d.drive
        if is_latch(d):
            runs.append(latch_run(d, supply, coil_temp, hold_time, r_factor, l_factor, 40 * points))
            starts.append(c.offset_s)
            periods.append(0.0)
            duties.append(0.0)
            continue
        duty, peak = firmware_setting(d, supply, coil_temp)
        period = 1.0 / d.hold.frequency_hz
        periods.append(period)
        duties.append(duty)
        if d.hold.mode == "current":
            # its own thresholds switch it, not the timer: on at its offset for its peak
            runs.append(current_mode_actuation(drv, d.hold.thresholds, supply, coil_temp, peak, hold_time,
                                               r_factor, l_factor, points, label=c.name))
            starts.append(c.offset_s)
            gated[len(runs) - 1] = (d.hold.thresholds, peak, hold_time)
            continue
        if drv.supply.boosted:
            # the peak ends at the current threshold, not on the timer: on at the offset
            runs.append(actuation(drv, supply, coil_temp, peak, duty, d.hold.frequency_hz, hold_time,
                                  r_factor, l_factor, points, label=c.name))
            starts.append(c.offset_s)
            boosts[len(runs) - 1] = peak
            continue
        if own_waveform(drv):
            t_on, t_peak = driver_peak(c.offset_s, peak, period)
            runs.append(actuation(drv, supply, coil_temp, t_peak, duty, d.hold.frequency_hz, hold_time,
                                  r_factor, l_factor, points, label=c.name))
            starts.append(t_on)
            continue
        lp = loop(drv, supply, coil_temp, r_factor, l_factor)
        rel = loop(drv, supply, coil_temp, r_factor, l_factor, path="release")
        slow = max(0.0, -drv.freewheel.bypass_lead) if split_decay(drv) else 0.0
        hold_clamp[len(runs)] = drv.freewheel.type == "clamp" and not bool(np.all(lp.bypassed))
        runs.append(channel_run(c.offset_s, peak, duty, period, hold_time, float(lp.v_on),
                                float(lp.r_on), float(lp.r_off), float(lp.v_off), float(rel.r_off),
                                float(rel.v_off), float(lp.inductance), slow))
        starts.append(c.offset_s)
    t = np.unique(np.concatenate([r.samples(points) if isinstance(r, ChannelRun) else r.time + s0
                                  for r, s0 in zip(runs, starts)]))

    def feed(ks):       # each channel of a drooping rail as its bus feeds it
        return [bus_run(result.channels[n].design.drive, runs[n], starts[n], supply, coil_temp, r_factor,
                        l_factor, gated.get(n)) for n in ks]
    rails = []
    for rail_row in result.rails:
        if rail_row.get("source_resistance_ohm"):
            ks = [n for n, c in enumerate(result.channels) if c.name in rail_row["channels"]]
            rails.append((rail_row, ks, _stiff_reason([result.channels[n] for n in ks], feed(ks))))
    for rail_row, ks, why in rails:
        if why is None and any(n in gated for n in ks):
            # a current-mode channel's edges move with the bus: a first run finds them, the
            # grid takes them and ``points`` samples of each of its segments
            fed = feed(ks)
            on_bus(supply, rail_row["source_resistance_ohm"], rail_row["capacitance_f"], fed, t)
            t = np.unique(np.concatenate([t, *(_segment_samples(f, runs[n], starts[n], points, t[-1])
                                               for f, n in zip(fed, ks) if isinstance(f, ThresholdRun))]))
    current, on, draw = [], [], []
    for k, (c, r, s0) in enumerate(zip(result.channels, runs, starts)):
        clamp = c.design.drive.freewheel.type == "clamp"
        if isinstance(r, ChannelRun):
            i, sw = r.current(t), r.switch_on(t)
            # a clamp across the switch: the coil's current flows from the rail through it
            # while it decays through the clamp (the hold's off-times unless bypassed, the release)
            kind = r.kind_at(t)
            through = ((kind == RELEASE) | ((kind == HOLD_OFF) & hold_clamp[k])) & (i > 0) if clamp \
                else np.zeros(len(t), bool)
            current.append(i)
            on.append(sw)
            draw.append(i * np.maximum(sw, through))
            continue
        i, sw, back, bypass = on_grid(r, s0, t)
        current.append(i)
        on.append(sw)
        if k in boosts:
            trace = r.boost_voltage
            level = np.interp(t - s0, r.time, trace, left=trace[0], right=trace[-1]) if trace is not None else None
            draw.append(boost_draw(c.design.drive, level, (t >= s0) & (t < s0 + boosts[k]), supply, i, sw))
            continue
        if isinstance(r, LatchRun) and r.boost_level is not None:    # its pulses from the boost
            level = np.where(t >= s0, r.boost_level(np.maximum(t - s0, 0.0)), c.design.drive.supply.boost)
            draw.append(boost_draw(c.design.drive, level, sw == 1, supply, i, sw))
            continue
        through = ((sw == 0) & (bypass == 0) & (i > 0)) if clamp else np.zeros(len(t), bool)
        draw.append(i * np.maximum(sw, through) - i * back)
    buses, stiff = {}, []
    for rail_row, ks, why in rails:
        fed = feed(ks)
        if why is not None:
            stiff.append(f"rail {', '.join(rail_row['channels'])}: {why}")
            continue
        cur, bus = on_bus(supply, rail_row["source_resistance_ohm"], rail_row["capacitance_f"], fed, t)
        for p, n in enumerate(ks):
            current[n] = cur[p]
            if isinstance(fed[p], ThresholdRun):      # its switch as the bus made it (on-times closed)
                on[n] = ((fed[p].kind_at(t) == ON) | (fed[p].kind_at(t, "right") == ON)).astype(np.int8)
            # a full bridge's fast decay returns its current into the rail: negative
            back = (fed[p].kind_at(t) == RELEASE) & (cur[p] > 0) if fed[p].returns else 0.0
            draw[n] = cur[p] * on[n] - cur[p] * back
        buses["bus_v" if len(result.rails) == 1 else f"bus_{rail_row['channels'][0]}_v"] = bus
    rail = np.sum(draw, axis=0)
    return SystemRun([c.name for c in result.channels], t, rail, current, on, runs, periods, duties,
                     draw, starts, buses, stiff)


def _stiff_reason(channels, fed) -> str | None:
    """Why a drooping rail's channels run on the stiff bus, or ``None`` when the bus's
    droop is fed back into them (:func:`coildrive.model.shared_bus.on_bus`: linear coils,
    an eddy term too, on one switch, voltage-mode holds or a linear coil's current-mode
    hold, a freewheel path across the coil;
    ``fed``: each channel's :func:`bus_run`)."""
    for c, r in zip(channels, fed):
        if r is None:
            what = ("a latching coil" if is_latch(c.design) else
                    "a current-mode hold with a moving armature, a flux-linkage curve, an eddy term, "
                    "a full bridge or a boosted peak" if c.design.hold.mode == "current" else
                    "a boosted peak" if c.design.drive.supply.boosted else
                    "a moving armature, a flux-linkage curve, or a full bridge with an eddy term")
            return f"channel {c.name!r} has {what}: the bus is taken stiff (its droop is the design's)"
        if c.design.drive.freewheel.type == "clamp":
            return (f"channel {c.name!r} decays through a clamp across its switch, from the rail: the "
                    "bus is taken stiff (its droop is the design's)")
    return None


def bus_run(drive, run, start: float, supply: float, coil_temp: float, r_factor: float,
            l_factor: float, gated: tuple | None = None) -> BusRun | None:
    """A channel as the drooping bus feeds it (:class:`~coildrive.model.shared_bus.BusRun`):
    a linear coil on one switch under a voltage-mode hold (its
    :class:`~coildrive.model.shared_pwm.ChannelRun`), or with an eddy term, or on a full
    bridge with slow or mixed decay in its hold (its own actuation's switching moments, the
    run's ``switch_on``, a bridge's ``switches`` and split decay's ``bypass_on``: on, the
    hold's path while off before the final turn-off or while the bypass conducts, the
    release path after -- a bridge's fast decay, returning into the bus over its two diode
    drops until they block; a mixed-decay hold's fast parts, all four open, are that same
    path, each to its scheduled end, then its slow part, Q2 + Q4, off the bus; the loop's (magnetising) inductance
    and eddy resistance at ``supply`` V, ``coil_temp`` degC and the tolerance factors);
    A linear coil on one switch under a current-mode hold (``gated``: its thresholds, peak s
    and hold s; split decay too) is a :class:`~coildrive.model.shared_bus.ThresholdRun`, its
    edges found on the bus. ``None`` for anything else (:func:`_stiff_reason` says why)."""
    if isinstance(run, ChannelRun):
        return BusRun.of(run)
    if drive.hold.mode == "current":
        if gated is None or own_waveform(drive) or drive.supply.boosted:
            return None
        th, peak, hold_time = gated
        lp = loop(drive, supply, coil_temp, r_factor, l_factor)
        rel = loop(drive, supply, coil_temp, r_factor, l_factor, path="release")
        slow = max(0.0, -drive.freewheel.bypass_lead) if split_decay(drive) else 0.0
        return ThresholdRun(np.array([start]), np.array([ON]), float(lp.r_on), float(lp.r_off), float(lp.v_off),
                            float(rel.r_off), float(rel.v_off), float(lp.inductance), control=th.control,
                            lower=th.lower_a, upper=th.upper_a, off_time=th.off_time_s, delay=th.delay_s,
                            peak_end=start + peak, hold_end=start + peak + hold_time, v_on=float(lp.v_on),
                            slow=slow)
    bridge = full_bridge(drive)
    if not (isinstance(run, Waveform) and (drive.coil.eddy_resistance or bridge) and not drive.coil.flux_current
            and drive.armature is None and not (bridge and drive.coil.eddy_resistance)
            and drive.hold.mode != "current" and not drive.supply.boosted):
        return None
    lp = loop(drive, supply, coil_temp, r_factor, l_factor)
    rel = loop(drive, supply, coil_temp, r_factor, l_factor, path="release")
    after = np.append(run.time[1:] != run.time[:-1], True)       # the value after a step
    tw, sw = run.time[after] + start, run.switch_on[after]
    last_on = int(np.flatnonzero(sw)[-1])
    bypass = np.zeros(len(tw), np.int8) if run.bypass_on is None else run.bypass_on[after]
    if bridge:       # all four open: the fast decay (after the final turn-off, a mixed-decay
        # hold's fast parts); Q2 + Q4 on: the slow decay
        fast = np.all([s[after] == 0 for s in run.switches.values()], axis=0) & (sw == 0)
        kind = np.where(sw == 1, ON, np.where((np.arange(len(tw)) < last_on) & ~fast, HOLD_OFF, RELEASE))
    else:
        kind = np.where(sw == 1, ON, np.where((np.arange(len(tw)) < last_on) | (bypass == 1), HOLD_OFF, RELEASE))
    # a segment starts at its first row; a turn-off at the on-time's last row (on-segments
    # closed), and with an eddy term the row after a switch-on sits EDGE s after it
    # (model/waveform.py): the row before it then
    first = np.flatnonzero(np.append(True, kind[1:] != kind[:-1]))
    prev = np.maximum(first - 1, 0)
    before = (kind[prev] == ON) | ((kind[first] == ON) & (tw[first] - tw[prev] <= 1.5 * EDGE))
    # a mixed-decay hold's fast part ends at its last row (model/mixed_waveform.py)
    before |= (kind[prev] == RELEASE) & (kind[first] == HOLD_OFF)
    edges = np.where(before & (first > 0), tw[prev], tw[first])
    coil = lp.inductance
    if bridge:       # the fast decay into the bus through the two body diodes
        return BusRun(edges, kind[first], float(lp.r_on), float(lp.r_off), float(lp.v_off), float(rel.r_off),
                      float(rel.v_off) - supply, float(coil), returns=True)
    return BusRun(edges, kind[first], float(lp.r_on), float(lp.r_off), float(lp.v_off), float(rel.r_off),
                  float(rel.v_off), float(coil.magnetising), float(coil.resistance))


@dataclass(frozen=True)
class LatchRun:
    """A latching coil's set and reset pulses as :func:`on_grid` reads a run: ``time`` (s
    from the set pulse's switch-on), ``current`` (A, the pulsing winding's, its magnitude),
    ``switch_on`` (0/1, a pulse's switches), ``switches`` (a full bridge's: both pulses'
    pairs, so that all four open with current flowing is its fast decay into the rail;
    else ``None``); no split decay's bypass (``bypass_on`` ``None``); pulses from the boost:
    ``boost_level``, its capacitor (V) at any times (s from the set pulse's switch-on)
    through both (else ``None``)."""

    time: np.ndarray
    current: np.ndarray
    switch_on: np.ndarray
    switches: dict | None
    bypass_on: None = None
    boost_level: Callable[[np.ndarray], np.ndarray] | None = None


def latch_run(d, supply: float, coil_temp: float, hold_time: float, r_factor: float, l_factor: float,
              points: int) -> LatchRun:
    """A latching channel in ``simulate SYSTEM.toml``: its set pulse at its start, its reset
    pulse ``hold_time`` s later (at least the design's shortest interval, and after the set
    pulse's decay), each the winding's own pulse and decay
    (:func:`coildrive.model.latch_waveform.pulse`); from the boost, each pulse until the
    firmware's threshold at the point (:func:`coildrive.design.latch.firmware_pulse`) and
    the boost capacitor through both (:func:`coildrive.model.latch_waveform.boost_column`;
    with a moving armature the set pulse's capacitor is its armature run's, ``seating``)."""
    from ..model.latch_waveform import boost_column, pulse
    from .latch import firmware_pulse, winding_drive

    by = {p.name: p.time_s for p in d.latch.pulses}
    drive = d.drive
    if drive.supply.boosted:
        by = {name: firmware_pulse(d, name, supply, coil_temp, r_factor, l_factor) for name in by}
    reset_drive = winding_drive(drive, True)
    ts, is_, ons, buses, tz, _, moving = pulse(drive, supply, coil_temp, r_factor, l_factor, by["set"], points)
    # (with a moving armature the set pulse's run is the boost capacitor's too)
    seating = None if moving is None else (ts, is_, ons, buses)
    tr, ir, onr, _, _, _, _ = pulse(reset_drive, supply, coil_temp, r_factor, l_factor, by["reset"], points)
    interval = d.latch.interval_s if math.isfinite(d.latch.interval_s) else 0.0
    gap = max(hold_time, interval, tz)
    (ts, is_, ons), (tr, ir, onr) = (_off_edge(ts, is_, ons), _off_edge(tr, ir, onr))
    on = np.concatenate([ons, onr]).astype(np.int8)
    switches = None
    if full_bridge(drive):
        pair_set = np.concatenate([ons, 0 * onr]).astype(np.int8)
        pair_reset = np.concatenate([0 * ons, onr]).astype(np.int8)
        switches = {"Q1": pair_set, "Q4": pair_set, "Q3": pair_reset, "Q2": pair_reset}
    level = None
    if drive.supply.boosted:
        def level(rel):
            return boost_column(drive, reset_drive, supply, coil_temp, r_factor, l_factor, rel, by["set"],
                                by["reset"], gap, seating)
    return LatchRun(np.concatenate([ts, gap + tr]), np.abs(np.concatenate([is_, ir])), on, switches,
                    boost_level=level)


def boost_draw(drive, level, in_peak, supply: float, i, sw) -> np.ndarray:
    """A boosted channel's current from the rail (A) on a grid: its coil's current ``i``
    while its switch conducts (``sw``), except where the boost feeds it (``in_peak``, per
    grid point: the peak, or a latching coil's pulses; the main supply's diode blocks),
    plus its boost converter's input, its output over ``supply.boost_efficiency`` at the
    bus ``supply`` V: with a capacitor (``level``: its voltage on the grid, full charge
    before the switch-on) ``boost_power`` while it is below its full charge (its discharge
    in the peak, then the recharge), with an ideal boost ``V_b i`` where it feeds the coil."""
    s = drive.supply
    coil = np.where(in_peak, 0.0, i * sw)
    if s.boost_capacitance > 0:
        charging = np.asarray(level) < s.boost * (1 - 1e-9)
        return coil + np.where(charging | in_peak, s.boost_power / (s.boost_efficiency * supply), 0.0)
    return coil + np.where(in_peak, s.boost * i / (s.boost_efficiency * supply), 0.0)


def _segment_samples(run: ThresholdRun, w, s0: float, points: int, t_end: float) -> np.ndarray:
    """A current-mode channel's switching moments on the bus (s, up to ``t_end``) and
    ``points`` samples of each of its segments between them; its release's samples are
    those of its stiff run ``w`` (switched on at ``s0`` s) after its final turn-off, moved to
    the bus's final turn-off (past ``t_end`` where that is later)."""
    start, kind = run.segments()
    tail = np.empty(0)
    if kind[-1] == RELEASE:
        off = w.time[int(np.flatnonzero(w.switch_on)[-1])] + s0        # the stiff final turn-off
        tail = w.time[w.time + s0 >= off] + s0 + (start[-1] - run.slow - off)
    start = np.append(start[start <= t_end], t_end)
    x = np.linspace(0.0, 1.0, points + 1)
    return np.concatenate([start, tail, *(a + (b - a) * x for a, b in zip(start[:-1], start[1:]))])


def _off_edge(t, i, on):
    """A pulse's samples with its end repeated, off: on a grid the switch is then off at
    once after the pulse (:func:`on_grid` keeps the value after a step)."""
    k = int(np.flatnonzero(on)[-1]) + 1
    return np.insert(t, k, t[k - 1]), np.insert(i, k, i[k - 1]), np.insert(on, k, 0)


def own_waveform(drive) -> bool:
    """True for a channel that runs the model's own single-channel actuation (a moving
    armature, a flux-linkage curve, an eddy-current term or a full bridge)."""
    return (drive.armature is not None or bool(drive.coil.flux_current)
            or bool(drive.coil.eddy_resistance) or full_bridge(drive))


def driver_peak(offset: float, peak: float, period: float) -> tuple[float, float]:
    """``(switch-on, peak length)`` (s) as the reference driver runs a peak of ``peak`` s
    from ``offset`` s in its once-a-period handler on a timer of ``period`` s counting from
    0 s: on at the first period start at or after the offset, off-to-hold at the first
    period start at or after the peak's end (at least one period of peak)."""
    n_on = math.ceil(offset / period - 1e-9)
    n_end = max(n_on + 1, math.ceil((offset + peak) / period - 1e-9))
    return n_on * period, (n_end - n_on) * period


def on_grid(w, start: float, t: np.ndarray) -> tuple[np.ndarray, ...]:
    """A single-channel :class:`~coildrive.model.waveform.Waveform` switched on at ``start``
    s, on the grid ``t`` (s): its current (A; linear between its samples, after a step at a
    repeated time, 0 outside the run), its switch state (0/1: a row's own, between two rows
    on where both are), 1
    where a full bridge's four switches are all open with current flowing (the fast decay
    returning it to the rail), else 0, and split decay's bypass switch (0/1; 0 without one)."""
    tw = w.time + start
    last = np.append(tw[1:] != tw[:-1], True)          # the value after a step
    tw, cur = tw[last], w.current[last]
    k = np.clip(np.searchsorted(tw, t, side="right") - 1, 0, len(tw) - 1)
    inside = (t >= tw[0]) & (t <= tw[-1])
    i = np.where(inside, np.interp(t, tw, cur), 0.0)
    # on-segments are closed: a row at a switch edge is on, so between two rows the switch
    # is on only where both are (a turn-off's last on row, then the off-time's first; of
    # rows at one instant the last before and the first after)
    raw = w.time + start
    j = np.clip(np.searchsorted(raw, t, side="right") - 1, 0, len(raw) - 1)
    between = w.switch_on[j] & w.switch_on[np.minimum(j + 1, len(raw) - 1)]
    sw = np.where(inside, np.where(raw[j] == t, w.switch_on[j], between), 0).astype(np.int8)
    back = np.zeros(len(t), np.int8)
    if w.switches is not None:
        open_all = np.all([s[last][k] == 0 for s in w.switches.values()], axis=0)
        back = (inside & open_all & (i > 0)).astype(np.int8)
    bypass = np.zeros(len(t), np.int8) if w.bypass_on is None else \
        np.where(inside, w.bypass_on[last][k], 0).astype(np.int8)
    return i, sw, back, bypass
