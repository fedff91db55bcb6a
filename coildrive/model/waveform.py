"""One actuation as a time series: on at t = 0, peak, PWM hold, off, decay to zero.

Built from the closed-form segments (no time stepping): every switch edge is a sample,
and each segment gets ``points`` samples in between, so the series resolves every PWM
edge exactly. The hold ends after the on-time of its last period, so the release starts
from the top of the ripple (the slowest release).

With split decay the hold's off-times take the slow path and the release the fast one;
the bypass opens ``freewheel.bypass_lead`` s before the final turn-off (a sample sits
there; a lead longer than the on-time -- a failing design check -- is drawn opening at
the start of the last on-time), or after it for a negative lead, in which case the
release decays slowly until the bypass opens.
"""

from __future__ import annotations

import dataclasses
import io
import math
from dataclasses import dataclass, field

import numpy as np

from ..config import Drive
from . import bridge
from .circuit import full_bridge, loop, split_decay, two_paths
from . import boost as boost_model
from . import supply as bus_model
from .eddy import EddyCoil
from .flux import FluxCoil
from .rl import decay_current, decay_time, rise_current
from .topology import coil_voltage, sense_leg_drop, topology_of


@dataclass(frozen=True)
class Waveform:
    """A simulated actuation. Arrays: s, A, 0/1, V, A (and m, m/s with an armature).

    ``sense_current`` is what the current-sense ADC channel sees: the coil current with
    the resistor in the coil path, zero while the switch is off with it under the switch.
    ``events`` maps ``on``, ``hold``, ``off`` and ``zero`` to their times in s; with a
    moving armature also ``move``, ``impact`` (the current dip), ``seat``, ``unlatch``
    and ``open`` (see :mod:`coildrive.model.armature_sim`), and ``dip_current`` in A.
    ``position`` (gap, m: stroke when open, 0 seated) and ``velocity`` (m/s) are
    ``None`` without an armature. ``bypass_on`` (0/1, split decay only, else ``None``)
    is the bypass switch: 1 while it shorts the fast-decay element; ``events`` then has
    ``bypass_open``. ``node_voltage`` (the switch node to ground, V) and ``coil_voltage``
    (across the coil's terminals, V) are there for topologies whose switch node is not
    the switch voltage (``Topology.shows_node``; ``None`` for a low-side switch). A full
    bridge has ``switches`` (each of its four switches' state, 0/1, by name:
    :data:`coildrive.model.bridge.SWITCHES`) and ``coil_voltage``; its ``switch_on`` is 1
    in the on-times (Q1 + Q4), its ``switch_voltage`` the highest of the four switches'.
    ``boost_voltage`` (V; a boosted peak only, else ``None``) is the boost capacitor:
    its discharge in the peak, then its recharge (:func:`coildrive.model.boost.voltage_trace`).
    ``bus_voltage`` (V; a moving armature on a drooping bus, else ``None``) is the bulk
    capacitor: the run's state in the peak, then the source's voltage (the hold and the
    release are modelled on the stiff bus).
    """

    time: np.ndarray
    current: np.ndarray
    switch_on: np.ndarray
    switch_voltage: np.ndarray
    sense_current: np.ndarray
    events: dict[str, float] = field(default_factory=dict)
    label: str = ""
    position: np.ndarray | None = None
    velocity: np.ndarray | None = None
    bypass_on: np.ndarray | None = None
    node_voltage: np.ndarray | None = None
    coil_voltage: np.ndarray | None = None
    boost_voltage: np.ndarray | None = None
    magnetising_current: np.ndarray | None = None
    switches: dict[str, np.ndarray] | None = None
    bus_voltage: np.ndarray | None = None

    def to_csv(self) -> str:
        """CSV text with header ``time_s,current_a,switch_on,switch_voltage_v,sense_current_a``
        (then ``bypass_on`` with split decay, ``position_m,velocity_m_s`` with an armature,
        ``node_voltage_v,coil_voltage_v`` with a high-side switch, ``high_a_on,low_a_on,
        high_b_on,low_b_on,coil_voltage_v`` with a full bridge, ``magnetising_current_a``
        with an eddy-current term, ``boost_v`` with a boosted
        peak, ``bus_v`` with a moving armature on a drooping bus)."""
        buf = io.StringIO()
        cols = [self.time, self.current, self.switch_on, self.switch_voltage, self.sense_current]
        head = "time_s,current_a,switch_on,switch_voltage_v,sense_current_a"
        fmt = ["%.9e", "%.9e", "%d", "%.6e", "%.9e"]
        if self.bypass_on is not None:
            cols.append(self.bypass_on)
            head += ",bypass_on"
            fmt.append("%d")
        if self.position is not None:
            cols += [self.position, self.velocity]
            head += ",position_m,velocity_m_s"
            fmt += ["%.9e", "%.9e"]
        if self.node_voltage is not None:
            cols += [self.node_voltage, self.coil_voltage]
            head += ",node_voltage_v,coil_voltage_v"
            fmt += ["%.6e", "%.6e"]
        if self.switches is not None:
            cols += [*self.switches.values(), self.coil_voltage]
            head += "".join(f",{name}_on" for name in self.switches) + ",coil_voltage_v"
            fmt += ["%d"] * len(self.switches) + ["%.6e"]
        if self.magnetising_current is not None:
            cols.append(self.magnetising_current)
            head += ",magnetising_current_a"
            fmt.append("%.9e")
        if self.boost_voltage is not None:
            cols.append(self.boost_voltage)
            head += ",boost_v"
            fmt.append("%.6e")
        if self.bus_voltage is not None:
            cols.append(self.bus_voltage)
            head += ",bus_v"
            fmt.append("%.6e")
        buf.write(head + "\n")
        np.savetxt(buf, np.column_stack(cols), delimiter=",", fmt=fmt)
        return buf.getvalue()


def actuation(drive: Drive, supply: float, coil_temp: float, peak_time: float, duty: float,
              frequency: float, hold_time: float, r_factor: float = 1.0, l_factor: float = 1.0,
              points: int = 8, label: str = "") -> Waveform:
    """Simulate one actuation at one operating point.

    Parameters
    ----------
    supply : V; coil_temp : degC (the coil is at this temperature throughout)
    peak_time : s of full-on; duty, frequency : hold PWM; hold_time : s (rounded to whole
    periods, at least one); r_factor, l_factor : tolerance factors; points : samples per
    PWM segment (the peak and the final decay get 40x as many).
    """
    if drive.armature is not None:
        return armature_actuation(drive, supply, coil_temp, peak_time, duty, frequency,
                                  hold_time, r_factor, l_factor, points, label)
    lp = loop(drive, supply, coil_temp, r_factor, l_factor)
    if isinstance(lp.inductance, EddyCoil):   # an eddy-current term: its own sampling
        fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release") if two_paths(drive) else None
        return _eddy_actuation(drive, lp, supply, peak_time, duty, frequency, hold_time,
                               points, label, fast)
    if split_decay(drive):
        return _split_actuation(drive, lp, supply, coil_temp, peak_time, duty, frequency,
                                hold_time, r_factor, l_factor, points, label)
    if isinstance(lp.inductance, FluxCoil) and lp.mixed is not None:   # a curve's mixed decay
        from .mixed_waveform import segments_of

        coil = one_point(lp.inductance)
        v, r_on, r_off = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off))
        ts, cs, ons = [], [], []
        i0 = peak_samples(peak_time, v, r_on, coil, 40 * points, ts, cs, ons, drive)
        seg = segments_of(coil, v, r_on, r_off, lp.mixed, i0)
        return boost_columns(drive, _mixed_actuation(drive, lp, supply, coil_temp, peak_time, i0, duty, frequency,
                                                     hold_time, r_factor, l_factor, points, label, ts, cs,
                                                     ons, seg), supply, peak_time, r_on, coil)
    if isinstance(lp.inductance, FluxCoil):   # a saturating coil: its own sampling
        fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release") if full_bridge(drive) else lp
        return _flux_actuation(drive, lp, supply, peak_time, duty, frequency, hold_time,
                               points, label, fast)
    v, r_on, r_off, v_off, ind = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance))
    big = 40 * points
    ts, cs, ons = [], [], []

    # Peak: full on from zero.
    i0 = peak_samples(peak_time, v, r_on, ind, big, ts, cs, ons, drive)
    if lp.mixed is not None:
        from .mixed_waveform import segments_of

        return boost_columns(drive, _mixed_actuation(drive, lp, supply, coil_temp, peak_time, i0, duty,
                                                     frequency, hold_time, r_factor, l_factor, points,
                                                     label, ts, cs, ons,
                                                     segments_of(ind, v, r_on, r_off, lp.mixed, i0)),
                             supply, peak_time, r_on, ind)

    # Hold: per-period start currents by scalar recurrence, then vectorised sampling.
    t_hold, i_hold, on_hold, t_offedge, i_off, _ = hold_samples(
        peak_time, i0, v, r_on, r_off, v_off, ind, duty, frequency, hold_time, points)
    ts.append(t_hold)
    cs.append(i_hold)
    ons.append(on_hold)

    # Release: decay to zero (a full bridge's through its fast path).
    fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release") if full_bridge(drive) else lp
    w = release_waveform(drive, lp, supply, ts, cs, ons, peak_time, t_offedge, i_off, big, label,
                         release_lp=fast)
    return boost_columns(drive, w, supply, peak_time, r_on, ind)


def boost_columns(drive: Drive, w: "Waveform", supply: float, peak_time: float, r_on: float,
                  ind: float, trace: np.ndarray | None = None) -> "Waveform":
    """``w`` with a boosted peak's columns (unchanged without a boost): the boost
    capacitor's voltage (:func:`coildrive.model.boost.voltage_trace`; ``trace``: given, V at
    ``w.time`` -- a moving armature's run) and, on a high-side
    switch, the node fed from the boost rail in the peak of ``peak_time`` s; ``supply`` V
    the main supply, ``r_on`` ohm and ``ind`` H the on-loop."""
    if not drive.supply.boosted:
        return w
    w = dataclasses.replace(w, boost_voltage=trace if trace is not None else boost_model.voltage_trace(
        w.time, peak_time, nominal_boost(drive, r_on, ind), drive.supply.boost_power))
    if w.node_voltage is not None:   # a high-side switch: fed from the boost rail in the peak
        rail = np.where((w.time <= peak_time) & (w.switch_on == 1),
                        w.boost_voltage - w.current * drive.supply.boost_resistance, supply)
        w = dataclasses.replace(w, **node_columns(drive, rail, w.current, w.switch_on, w.switch_voltage))
    elif w.switches is not None:   # a full bridge: Q_b feeds leg A's high side in the peak
        w = _bridge_boost_columns(drive, w, peak_time)
    return w


def _bridge_boost_columns(drive: Drive, w: "Waveform", peak_time: float) -> "Waveform":
    """A full bridge's columns with a boosted peak (docs/design-method.md, "Boosted peak"):
    in the peak the boost switch ``Q_b`` (column ``boost_on``) feeds leg A's rail, so the
    coil sees the boost capacitor less ``(R_b + 2 R_sw + R_sense) i``, and Q2 holds off
    leg A at the capacitor less ``(R_b + R_sw) i`` (the highest switch voltage; Q3 holds
    off only the main bus). The hold and the release (into the main bus) are unchanged."""
    sense = drive.board.sense
    r_sw, r_b = drive.switch.on_resistance, drive.supply.boost_resistance
    in_peak = (w.time <= peak_time) & (w.switch_on == 1)
    i = w.current
    coil = np.where(in_peak, w.boost_voltage - (r_b + 2.0 * r_sw + sense.resistance) * i, w.coil_voltage)
    v_sw = np.where(in_peak, w.boost_voltage - (r_b + r_sw) * i, w.switch_voltage)
    switches = {**w.switches, "boost": in_peak.astype(np.int8)}
    return dataclasses.replace(w, coil_voltage=coil, switch_voltage=v_sw, switches=switches)


def nominal_boost(drive: Drive, r_on: float, ind) -> boost_model.Boost:
    """The boost at its nominal voltage and capacitance feeding the on-loop ``r_on`` ohm
    (with the boost path's own resistance), ``ind`` H (or an
    :class:`~coildrive.model.eddy.EddyCoil` of one point: its magnetising branch and eddy
    resistance, either branch; or a :class:`~coildrive.model.flux.FluxCoil` of one point:
    :mod:`coildrive.model.flux_boost`'s)."""
    s = drive.supply
    return boost_model.boost(s.boost, s.boost_capacitance, r_on + s.boost_resistance, *boost_model.one_point(ind))


def _mixed_actuation(drive: Drive, lp, supply: float, coil_temp: float, peak_time: float,
                     i0: float, duty: float, frequency: float, hold_time: float, r_factor: float,
                     l_factor: float, points: int, label: str, ts: list, cs: list,
                     ons: list, seg) -> Waveform:
    """:func:`actuation`'s hold and release with a full bridge's mixed decay
    (:mod:`coildrive.model.mixed_waveform`, its segments ``seg``: a linear coil's or a
    curve's): the switches see the fast path's voltage while the current flows into the
    bus; the per-switch columns and the coil voltage follow the three segments (on: Q1 +
    Q4, fast: all four open, slow: Q2 + Q4)."""
    from .mixed_waveform import mixed_hold_samples

    t_hold, i_hold, on_hold, fast_hold, t_off, i_off, fast_part = mixed_hold_samples(
        peak_time, i0, seg, duty, frequency, hold_time, points, lp.mixed)
    n_peak = sum(len(t) for t in ts)
    ts.append(t_hold)
    cs.append(i_hold)
    ons.append(on_hold)
    fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release")
    w = release_waveform(drive, lp, supply, ts, cs, ons, peak_time, t_off, i_off, 40 * points,
                         label, release_lp=fast)
    return mixed_columns(drive, w, fast, supply, t_off, n_peak, fast_hold, fast_part)


def mixed_columns(drive: Drive, w: Waveform, fast, supply: float, t_off: float, start: int,
                  fast_hold, fast_part) -> Waveform:
    """A full bridge's waveform ``w`` with a mixed-decay hold's fast parts: from sample
    ``start`` on, ``fast_hold`` marks the samples whose current flows in the fast path
    (the switches then see the fast loop ``fast``'s voltage) and ``fast_part`` those with
    all four open (each fast part, the current flowing or not); the per-switch columns
    and the coil voltage follow (:func:`_bridge_columns`; the final turn-off at ``t_off``
    s)."""
    n = len(fast_hold)
    mask = np.zeros(len(w.time), bool)
    mask[start:start + n] = fast_hold
    v_sw = np.where(mask, fast.switch_voltage(drive, w.current), w.switch_voltage)
    all_open = np.zeros(len(w.time), bool)
    all_open[start:start + n] = fast_part
    v_sw, _, extra = _bridge_columns(drive, supply, w.time, w.current, w.switch_on, v_sw, t_off,
                                     all_open=all_open)
    return dataclasses.replace(w, switch_voltage=v_sw, **extra)


def one_point(inductance):
    """The coil of one operating point: H as a float, or a saturating coil's
    :class:`~coildrive.model.flux.FluxCoil` with a scalar scale."""
    if isinstance(inductance, FluxCoil):
        return inductance.with_scale(float(np.ravel(inductance.scale)[0]))
    return float(inductance)


def _flux_actuation(drive: Drive, lp, supply: float, peak_time: float, duty: float,
                    frequency: float, hold_time: float, points: int, label: str,
                    release_lp) -> Waveform:
    """:func:`actuation` of a saturating coil (:mod:`coildrive.model.flux_waveform`); the
    final decay through ``release_lp`` (a full bridge's fast path, else ``lp``)."""
    from .flux_waveform import actuation as flux_samples

    ts, cs, ons, t_cut, i_cut, tz = flux_samples(drive, lp, peak_time, duty, frequency,
                                                 hold_time, points, release_lp)
    time = np.concatenate(ts)
    current = np.concatenate(cs)
    on = np.concatenate(ons).astype(np.int8)
    v_sw, sense = _switch_and_sense(drive, lp, supply, current, on)
    events = {"on": 0.0, "hold": peak_time, "off": t_cut, "zero": t_cut + tz}
    extra = node_columns(drive, supply, current, on, v_sw)   # a high-side switch's node
    if full_bridge(drive):
        v_sw = np.where(time > t_cut, _switch_and_sense(drive, release_lp, supply, current, on)[0], v_sw)
        v_sw, sense, extra = _bridge_columns(drive, supply, time, current, on, v_sw, t_cut)
    return boost_columns(drive, Waveform(time, current, on, v_sw, sense, events, label, **extra), supply,
                         peak_time, float(np.ravel(lp.r_on)[0]), one_point(lp.inductance))


#: With an eddy term, the time between the rows before and after a switch edge (s).
EDGE = 1e-9


def _eddy_actuation(drive: Drive, lp, supply: float, peak_time: float, duty: float,
                    frequency: float, hold_time: float, points: int, label: str,
                    fast=None) -> Waveform:
    """:func:`actuation` with an eddy resistance (:mod:`coildrive.model.eddy_waveform`):
    ``current`` is the terminal current, ``magnetising_current`` the flux's. ``fast``:
    split decay's release loop (the hold through ``lp``, the slow one), the bypass
    opening ``freewheel.bypass_lead`` s before the final turn-off (no earlier than the
    last on-time's start); or a full bridge's fast decay from the final turn-off (the
    per-switch columns and the coil voltage of :func:`_bridge_columns`; once the body
    diodes block, the coil's terminals show the flux's decay through ``R_e``, ``-R_e
    i_m``), with a mixed-decay hold's fast parts all four open too."""
    from .eddy_waveform import actuation as eddy_samples

    bridged = full_bridge(drive)
    lead = drive.freewheel.bypass_lead if fast is not None and not bridged else 0.0
    pieces = eddy_samples(drive, lp, peak_time, duty, frequency, hold_time, points, fast, lead)
    w = eddy_waveform(drive, lp, supply, pieces, peak_time, label, fast, lead, duty / frequency)
    return boost_columns(drive, w, supply, peak_time, float(np.ravel(lp.r_on)[0]), lp.inductance[...])


def _in_order(time: np.ndarray) -> np.ndarray:
    """The order that sorts ``time`` (s), rows the same instant to rounding (1e-15 s apart)
    kept in the order given: a segment's last row before the next one's first, however the
    two sums that make their times round (a stable sort alone would swap them, putting the
    switch edge's row after the step before the row before it)."""
    order = np.argsort(time, kind="stable")
    for _ in range(len(order)):
        t = time[order]
        swap = np.flatnonzero((np.diff(t) <= 1e-15) & (order[1:] < order[:-1]))
        if swap.size == 0:
            break
        order[swap], order[swap + 1] = order[swap + 1], order[swap].copy()
    return order


def eddy_waveform(drive: Drive, lp, supply: float, pieces, peak_time: float, label: str,
                  fast=None, lead: float = 0.0, last_on: float = 0.0) -> Waveform:
    """The :class:`Waveform` of an actuation with an eddy term from its sample pieces
    ``(time, terminal current, magnetising current, switch_on, fast, t_off, t_zero)`` (of
    :mod:`coildrive.model.eddy_waveform`); ``fast``/``lead``/``last_on`` (s): split
    decay's release loop (a full bridge's fast decay), its bypass lead and the last
    on-time."""
    bridged = full_bridge(drive)
    ts, cs, ms, ons, fasts, t_cut, t_zero = pieces
    order = _in_order(np.concatenate(ts))   # the bypass's sample, in place
    ts, cs, ms, ons, fasts = ([np.concatenate(x)[order]] for x in (ts, cs, ms, ons, fasts))
    time = np.concatenate(ts)
    # each switch edge has a row before and after the step: the one after sits EDGE s
    # later (a switch edge's own scale), so that time rises strictly
    step = np.diff(time)
    gap = min(EDGE, 0.01 * step[step > 1e-15].min(initial=1.0))
    for _ in range(4):   # a step that also ends the conduction: three rows at one instant
        same = np.flatnonzero(np.diff(time) <= 1e-15) + 1      # the same instant, to rounding
        if same.size == 0:
            break
        time[same] = time[same - 1] + gap
    current = np.concatenate(cs)
    on = np.concatenate(ons).astype(np.int8)
    v_sw, sense = _switch_and_sense(drive, lp, supply, current, on)
    events = {"on": 0.0, "hold": peak_time, "off": t_cut, "zero": t_zero}
    magnetising = np.concatenate(ms)
    if bridged:   # (and a mixed-decay hold's fast parts: all four open, as in the release)
        all_open = np.concatenate(fasts) > 0
        v_sw = np.where((time > t_cut) | all_open, _switch_and_sense(drive, fast, supply, current, on)[0], v_sw)
        v_sw, sense, extra = _bridge_columns(drive, supply, time, current, on, v_sw, t_cut,
                                             all_open=all_open if lp.mixed is not None else None)
        r_e = float(np.ravel(lp.inductance.resistance)[0])
        blocked = ((time > t_cut) | all_open) & (current <= 0.0)
        extra["coil_voltage"] = np.where(blocked, -r_e * magnetising, extra["coil_voltage"])
        return Waveform(time, current, on, v_sw, sense, events, label,
                        magnetising_current=magnetising, **extra)
    extra = {}
    if fast is not None:   # split decay: the fast path's switch voltage once the bypass opens
        t_open = max(t_cut - lead, t_cut - last_on)
        events["bypass_open"] = t_open
        bypass = (time < t_open).astype(np.int8)
        v_sw = np.where(bypass == 1, v_sw, _switch_and_sense(drive, fast, supply, current, on)[0])
        extra["bypass_on"] = bypass
    return Waveform(time, current, on, v_sw, sense, events, label,
                    **node_columns(drive, supply, current, on, v_sw),
                    magnetising_current=magnetising, **extra)


def peak_samples(peak_time: float, v: float, r_on: float, ind: float, big: int,
                 ts: list, cs: list, ons: list, drive: Drive | None = None) -> float:
    """Append the peak phase -- full on from zero current for ``peak_time`` s, ``big`` + 1
    samples, through the on-loop ``v`` V, ``r_on`` ohm, ``ind`` H -- to the sample pieces
    ``ts``/``cs``/``ons`` (s, A, 0/1); returns the current at its end, A. With a
    ``drive`` whose supply has a source resistance the rise is on the drooping bus
    (:mod:`coildrive.model.supply`, a curve's :mod:`coildrive.model.flux_bus`; the hold
    that follows sees the stiff supply); with a
    boosted peak it runs from the boost at its nominal (:mod:`coildrive.model.boost`)."""
    tp = np.linspace(0.0, peak_time, big + 1)
    ts.append(tp)
    if drive is not None and drive.supply.boosted:
        b = nominal_boost(drive, r_on, ind)
        cs.append(boost_model.of(b).state(tp, b)[0])
    elif drive is not None and drive.supply.droops and isinstance(ind, FluxCoil):
        from . import flux_bus   # (a curve's peak on the drooping bus: a full bridge's mixed decay)

        cs.append(flux_bus.current(tp, flux_bus.bus(v, drive.supply.source_resistance,
                                                    drive.supply.capacitance, r_on, ind)))
    elif drive is not None and drive.supply.droops:
        cs.append(bus_model.current(tp, bus_model.bus(v, drive.supply.source_resistance,
                                                      drive.supply.capacitance, r_on, ind)))
    else:
        cs.append(rise_current(tp, 0.0, v, r_on, ind))
    ons.append(np.ones_like(tp))
    return float(cs[-1][-1])


def release_waveform(drive: Drive, lp, supply: float, ts: list, cs: list, ons: list,
                     peak_time: float, t_off: float, i_off: float, big: int, label: str,
                     release_lp=None) -> Waveform:
    """Close an actuation without split decay: append the free decay from ``i_off`` A at
    the final turn-off ``t_off`` s down to zero through the off path of ``lp`` (``big``
    samples) -- or of ``release_lp``, a full bridge's fast path -- to the sample pieces
    ``ts``/``cs``/``ons`` (s, A, 0/1), and make the :class:`Waveform` of them (switch-on at
    0 s, the hold from ``peak_time`` s)."""
    rel = lp if release_lp is None else release_lp
    r_off, v_off = (float(x) for x in (rel.r_off, rel.v_off))
    ind = one_point(rel.inductance)
    tz = float(decay_time(0.0, i_off, r_off, v_off, ind))
    td = np.linspace(0.0, tz, big + 1)[1:]
    ts.append(t_off + td)
    cs.append(decay_current(td, i_off, r_off, v_off, ind))
    ons.append(np.zeros_like(td))
    time = np.concatenate(ts)
    current = np.concatenate(cs)
    on = np.concatenate(ons).astype(np.int8)
    v_sw, sense = _switch_and_sense(drive, lp, supply, current, on)
    if rel is not lp:  # the release's switch voltage from its own path
        v_sw = np.where(time > t_off, _switch_and_sense(drive, rel, supply, current, on)[0], v_sw)
    events = {"on": 0.0, "hold": peak_time, "off": t_off, "zero": t_off + tz}
    if full_bridge(drive):
        v_sw, sense, extra = _bridge_columns(drive, supply, time, current, on, v_sw, t_off)
        return Waveform(time, current, on, v_sw, sense, events, label, **extra)
    return Waveform(time, current, on, v_sw, sense, events, label,
                    **node_columns(drive, supply, current, on, v_sw))


def _bridge_columns(drive: Drive, supply: float, time, current, on, v_fast, t_off: float,
                    all_open=None):
    """A full bridge's switch voltage (the highest of its four, V), sensed current (A), and
    as keyword arguments its switches' states and the coil voltage (V), per sample: the
    on-times drive through Q1 + Q4 (Q2 and Q3 hold off ``V_bus`` less the drops across
    Q1 and a common-return sense resistor), the hold's off-times recirculate through Q2
    + Q4 (Q1 holds off ``V_bus + R_sw i``), after the final turn-off ``t_off`` s all four
    are open (``v_fast``: the fast decay's switch voltage, :func:`_switch_and_sense` of
    the release loop). ``all_open`` (bool per sample, mixed decay) marks the hold's fast
    parts, where all four are open as in the release."""
    sense = drive.board.sense
    r_sw = drive.switch.on_resistance
    r_return = sense.resistance if sense.position == "switch" else 0.0
    released = time > t_off if all_open is None else (time > t_off) | all_open
    phase = np.where(on == 1, 1, np.where(released, -1, 0))
    v_sw = np.where(phase == 1, supply - current * (r_sw + r_return),
                    np.where(phase == 0, supply + current * r_sw, v_fast))
    coil = bridge.coil_voltage(supply, current, phase, r_sw, sense.resistance, sense.position == "coil",
                               drive.freewheel.diode_drop)
    sensed = current if sense.position == "coil" else current * on
    return v_sw, sensed, {"switches": bridge.switch_states(phase), "coil_voltage": coil}


def _split_actuation(drive: Drive, lp, supply: float, coil_temp: float, peak_time: float,
                     duty: float, frequency: float, hold_time: float, r_factor: float,
                     l_factor: float, points: int, label: str) -> Waveform:
    """:func:`actuation` with split decay: hold through the slow loop ``lp``, release
    through the fast one, the bypass opening as ``freewheel.bypass_lead`` says."""
    fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release")
    v, r_on, r_off, v_off = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off))
    ind = one_point(lp.inductance)
    big = 40 * points
    ts, cs, ons = [], [], []
    i0 = peak_samples(peak_time, v, r_on, ind, big, ts, cs, ons, drive)
    t_hold, i_hold, on_hold, t_cut, i_cut, starts = hold_samples(
        peak_time, i0, v, r_on, r_off, v_off, ind, duty, frequency, hold_time, points)
    period = 1.0 / frequency
    t_last = t_cut - duty * period  # start of the last on-time
    ts.append(t_hold)
    cs.append(i_hold)
    ons.append(on_hold)
    t_open, zero = split_release(drive, lp, fast, t_cut, i_cut, t_last, float(starts[-1]), t_hold,
                                 big, ts, cs, ons)
    w = split_waveform(drive, lp, fast, supply, ts, cs, ons, t_open,
                       {"on": 0.0, "hold": peak_time, "off": t_cut, "zero": zero,
                        "bypass_open": t_open}, label)
    return boost_columns(drive, w, supply, peak_time, r_on, ind)


def split_release(drive: Drive, lp, fast, t_cut: float, i_cut: float, t_last: float,
                  i_last: float, sampled, big: int, ts: list, cs: list, ons: list):
    """Append the samples of a split-decay release to ``ts``/``cs``/``ons`` (s, A, 0/1).

    The hold's last on-time runs from ``t_last`` s (current ``i_last`` A) to the final
    turn-off at ``t_cut`` s (``i_cut`` A) through the slow loop ``lp``; ``fast`` is the
    release loop. The bypass opens ``freewheel.bypass_lead`` s before the turn-off (no
    earlier than ``t_last``; a sample is added there unless ``sampled`` has it), or
    ``-bypass_lead`` s after it, the current decaying slowly until then. Returns
    ``(bypass opening time s, time the current reaches zero s)``.
    """
    v, r_on, r_off, v_off = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off))
    ind = one_point(lp.inductance)
    f_off, f_v = float(fast.r_off), float(fast.v_off)
    lead = drive.freewheel.bypass_lead
    if lead >= 0:
        t_open = max(t_cut - lead, t_last)
        if t_open < t_cut and not np.any(sampled == t_open):
            # a sample where the bypass opens, inside the last on-time
            ts.append(np.array([t_open]))
            cs.append(rise_current(np.array([t_open - t_last]), i_last, v, r_on, ind))
            ons.append(np.ones(1))
        t_fast, i_fast = t_cut, i_cut
    else:
        # late bypass: slow decay until it opens (or the current is zero)
        t_open = t_cut - lead
        lag = min(-lead, float(decay_time(0.0, i_cut, r_off, v_off, ind)))
        td = np.linspace(0.0, lag, big + 1)[1:]
        ts.append(t_cut + td)
        cs.append(decay_current(td, i_cut, r_off, v_off, ind))
        ons.append(np.zeros_like(td))
        t_fast, i_fast = t_cut + lag, float(cs[-1][-1]) if td.size else i_cut
    tz = float(decay_time(0.0, i_fast, f_off, f_v, ind)) if i_fast > 0 else 0.0
    if tz > 0:
        td = np.linspace(0.0, tz, big + 1)[1:]
        ts.append(t_fast + td)
        cs.append(decay_current(td, i_fast, f_off, f_v, ind))
        ons.append(np.zeros_like(td))
    return t_open, t_fast + tz


def split_waveform(drive: Drive, lp, fast, supply: float, ts: list, cs: list, ons: list,
                   t_open: float, events: dict, label: str) -> Waveform:
    """A :class:`Waveform` from sample pieces of a split-decay actuation: sorted in time,
    the bypass on before ``t_open`` s, the switch voltage of the slow loop ``lp`` while it
    is on and of the fast loop ``fast`` after."""
    time = np.concatenate(ts)
    order = np.argsort(time, kind="stable")
    time = time[order]
    current = np.concatenate(cs)[order]
    on = np.concatenate(ons)[order].astype(np.int8)
    bypass = (time < t_open).astype(np.int8)
    slow_v, sense = _switch_and_sense(drive, lp, supply, current, on)
    fast_v, _ = _switch_and_sense(drive, fast, supply, current, on)
    v_sw = np.where(bypass == 1, slow_v, fast_v)
    return Waveform(time, current, on, v_sw, sense, events, label, bypass_on=bypass,
                    **node_columns(drive, supply, current, on, v_sw))


def _switch_and_sense(drive: Drive, lp, supply: float, current, on):
    """Switch voltage V and sensed current A for samples of coil current and switch state."""
    fw_v = lp.switch_voltage(drive, current)
    r_sw = drive.switch.on_resistance
    off_blocked = float(supply)
    v_sw = np.where(on == 1, current * r_sw, np.where(current > 0, fw_v, off_blocked))
    sense = current if drive.board.sense.position == "coil" else current * on
    return v_sw, sense


def node_columns(drive: Drive, supply: float, current, on, v_sw) -> dict:
    """``node_voltage`` and ``coil_voltage`` (V) of a :class:`Waveform` whose topology shows
    them (:mod:`coildrive.model.topology`), from its current A, switch state and switch
    voltage V; empty for a low-side switch."""
    topo = topology_of(drive)
    if not topo.shows_node:
        return {}
    node = topo.node_voltage(supply, v_sw, sense_leg_drop(drive, current, on))
    return {"node_voltage": node, "coil_voltage": coil_voltage(drive, supply, current, on, v_sw)}


def armature_actuation(drive: Drive, supply: float, coil_temp: float, peak_time: float,
                       duty: float, frequency: float, hold_time: float, r_factor: float = 1.0,
                       l_factor: float = 1.0, points: int = 8, label: str = "",
                       method: str = "numpy", hold=None, comparator=None) -> Waveform:
    """:func:`actuation` with the moving armature (see :mod:`coildrive.model.armature_sim`).

    The same switch schedule -- peak from t = 0, whole PWM periods of hold, off -- drives
    the armature model; after the turn-off the run goes on until the armature rests on
    the open stop and the current is zero. Every PWM edge is a sample. The hold follows
    the armature too: if the current falls below the stay current the armature lifts.
    ``method``: ``"numpy"`` or a scipy ``solve_ivp`` method (the reference path).

    With split decay the hold's off-times take the slow path and the final release the
    fast one: the bypass opens ``freewheel.bypass_lead`` s before the final turn-off
    (inside the last on-time, a sample there) or ``-bypass_lead`` s after it, the
    current decaying slowly until then; ``bypass_on`` and ``events["bypass_open"]`` say
    when.

    On a drooping bus (``supply.source_resistance``) the peak runs on it, the bulk
    capacitor a state of the run (``bus_voltage``); the hold and the release on the stiff
    bus, as the design takes them -- but a full bridge's release, which returns the current
    into the bus, runs on it from the final turn-off (:func:`_bus_release`: the bus at the
    supply's voltage there, the switches seeing ``V_bus + V_d``). After a boosted peak (the
    main bus at the source's voltage, nothing drew from it) the hold and the release run on
    the drooping main bus instead, its capacitor a state from the hand-over on, the boost
    converter drawing its constant current from then
    (:func:`coildrive.model.supply.converter_current` with the coil at most the larger of
    the hand-over current and the hold's steady top), as the design takes them
    (``bus_voltage``: the main bus, the source's voltage in the peak; a PWM hold only).

    ``hold``: a hold that regulates by thresholds in place of the PWM (``duty`` and
    ``frequency`` then unused), ``hold(t_start, i0, v_on, r_on, r_off, v_off, inductance)
    -> (time, current, switch_on, t_off, i_off, lowest, t_last_on)`` on the seated coil
    from the end of the peak: its samples, the final turn-off's time s and current A,
    the lowest current A and the start of the last on-time s. With an eddy term
    ``inductance`` is the seated :class:`~coildrive.model.eddy.EddyCoil`, ``i0``,
    ``i_off`` and ``lowest`` are magnetising currents, ``current`` the terminal one (two
    rows at each edge) and an eighth item the samples' magnetising current. It needs the
    armature seated at the end of the peak and the hold's (magnetising) current never
    below the stay current (else ``ValueError``: a hold switched by thresholds with the
    armature in flight is not modelled) -- except after a boosted peak (a linear coil; the
    hold on the stiff bus, as the seated coil's) with its ``comparator`` given
    (:class:`~coildrive.model.armature_boost.Comparator`): there the comparator's switching
    carries the armature still in flight at the threshold on to the seat
    (:func:`~coildrive.model.armature_boost.comparator_schedule`, the run through its edges),
    and ``hold`` takes over at the first turn-off after it. On a full bridge its on-times are
    Q1 + Q4 and its off-times the slow decay (the hold's loop; with mixed decay each first
    all four open for its fast part: a ninth item flags those samples), the release the fast
    one (on the drooping bus riding it, :func:`_bus_release`).
    """
    from .armature import params_from_loop, time_bound
    from .armature_sim import simulate

    lp = loop(drive, supply, coil_temp, r_factor, l_factor)
    p = params_from_loop(drive.armature, lp, l_factor, drive.coil.eddy_resistance)
    s = drive.supply
    p_peak = params_from_loop(drive.armature, lp, l_factor, drive.coil.eddy_resistance,
                              bus=(s.source_resistance, s.capacitance)) if s.droops else p
    if s.boosted:   # the peak from the boost (its capacitor a state with no source behind it)
        from .armature_boost import boost_params
        p_peak = boost_params(p, s.boost, s.boost_capacitance, s.boost_resistance)
    #: a boosted peak on a drooping main supply: the hold and the release on the main bus
    split = split_decay(drive)
    main = (params_from_loop(drive.armature, lp, l_factor, drive.coil.eddy_resistance,
                             bus=(s.source_resistance, s.capacitance))
            if s.boosted and s.droops and hold is None else None)
    if main is not None and drive.freewheel.type == "clamp" and not split:   # its off-times draw from the bus
        main = main.clamped()
    main_bus = None
    fed: list = []   # after a boost on a drooping main supply: the source less the converter's draw, V
    bridge = full_bridge(drive)   # the hold decays slowly, the release fast into the bus
    fast = p_rel = None
    if split or bridge:
        fast = loop(drive, supply, coil_temp, r_factor, l_factor, path="release")
        p_rel = params_from_loop(drive.armature, fast, l_factor, drive.coil.eddy_resistance)
    lead = drive.freewheel.bypass_lead if split else 0.0
    lag = max(-lead, 0.0)
    big = 40 * points
    period = 1.0 / frequency
    n = max(1, int(round(hold_time * frequency)))
    t_on = duty * period
    t_off = peak_time + (n - 1) * period + t_on
    # the bypass opens inside the last on-time (no earlier than its start) or after the
    # turn-off; without split decay there is no bypass
    t_open = (t_off - min(lead, t_on) if lead >= 0 else t_off + lag) if split else math.inf
    # mixed decay (a bridge's hold.fast_fraction): each off-time starts fast (all four open,
    # the release's path into the bus) and ends slow
    mixed = lp.mixed
    t_fast = mixed.fraction * (period - t_on) if mixed is not None else 0.0
    schedule = []
    if peak_time > 0:
        schedule.append((peak_time, True, big))
    for k in range(n):
        start = peak_time + k * period
        if t_on > 0:
            if k == n - 1 and split and start < t_open < t_off:
                schedule.append((t_open, True, points))  # a sample where the bypass opens
            schedule.append((start + t_on, True, points))
        if k < n - 1 and t_on < period:
            if t_fast > 0:
                schedule.append((start + t_on + t_fast, False, points, "release"))
            if t_on + t_fast < period:
                schedule.append((start + period, False, points))
    i_max = float(p.v_on[0] / p.r_on[0])
    t_un = float(decay_time(min(float(p.stay_current[0]), i_max), i_max, p.r_off[0], p.v_off[0],
                            p.coil_closed[0] if p.curves is not None or p.eddy is not None
                            else p.l_closed[0]))
    bound = float(time_bound(t_un, p.l_closed[0], p.r_off[0], p.mass[0], p.stroke[0],
                              p.damping[0], p.preload[0] + p.load[0]))

    def release_segments(t_cut):
        """The off segments after the final turn-off at ``t_cut``, each naming its path."""
        if bridge:
            return [(t_cut + bound, False, big, "release")]
        if not split:
            return [(t_cut + bound, False, big)]
        if lag > 0:
            return [(t_cut + lag, False, big, "hold"), (t_cut + lag + bound, False, big, "release")]
        return [(t_cut + bound, False, big, "release")]

    schedule += release_segments(t_off)
    released = (lambda r: r.t >= t_off and r.state == "open" and not r.live)

    def after_peak(head, live: bool):
        """``(the run joined, the main bus or None)``: on from the peak's run ``head`` (its end
        state, ``live`` the freewheel conducting) on the stiff bus, or after a boost on a
        drooping main supply on the main bus from the source's voltage."""
        start = [head.flux[-1], head.position[-1], head.velocity[-1], head.charge[-1], head.square[-1]]
        on_bus = p
        if main is not None:
            on_bus = converter_fed(drive, main, float(head.current[-1]), duty, frequency)
            fed.append(float(on_bus.v_on[0]))
            start.append(supply)
        # (split decay with a clamp on the main bus: the release's path draws from it, the hold's not)
        rel = p_rel.clamped() if main is not None and split and drive.freewheel.type == "clamp" else p_rel
        rest = simulate(on_bus, schedule[1:], state=head.state, start=np.array(start), live=live,
                        method=method, points=points, stop=released, release_params=rel, t0=peak_time)
        bus = None
        if main is not None:   # (with an eddy term _joined keeps the rest's first row: the step)
            bus = np.concatenate([np.full(head.time.size, float(supply)), rest.bus[0 if p.eddy is not None else 1:]])
        return _joined(head, rest, float(p.v_on[0])), bus

    tr = None
    if hold is not None and peak_time <= 0:
        raise ValueError("a hold switched by thresholds with an [armature] needs a peak")
    mh = None   # with an eddy term and thresholds: the hold's magnetising current
    hold_fast = None   # ... and with mixed decay its samples all four open
    if peak_time > 0 and (p.eddy is None or hold is not None):
        # Fast path: seated at the end of the peak and the hold current never below the
        # stay current -- then the hold is the closed-form PWM of the seated coil (with
        # the coil's two curves, the seated curve's tabulated exact segments; thresholds
        # with an eddy term: the seated coil's magnetising branch behind R_e, the terminal
        # current compared).
        head = simulate(p_peak, schedule[:1], method=method, points=points)
        t_hand = peak_time   # where the seated coil's hold starts
        if (comparator is not None and hold is not None and head.state != "seated" and main is None
                and s.boosted and p.curves is None):
            # the comparator carries the armature in flight onto the seat, to a turn-off
            from .armature_boost import comparator_schedule
            start = np.array([head.flux[-1], head.position[-1], head.velocity[-1], head.charge[-1],
                              head.square[-1]])
            edges = comparator_schedule(p, peak_time, start, comparator, peak_time + bound)
            rest = simulate(p, [(t_e, on, points) for t_e, on in edges], state=head.state, start=start,
                            live=True, method=method, points=points, t0=peak_time, release_params=p_rel)
            head = _joined(head, rest, float(p.v_on[0]))
            t_hand = float(head.time[-1])
        i0 = float(head.current[-1] if p.eddy is None else head.magnetising_current[-1])
        if head.state == "seated" and main is None:
            v, r_on, r_off, v_off = (float(a[0]) for a in (p.v_on, p.r_on, p.r_off, p.v_off))
            seated = float(p.l_closed[0]) if p.curves is None and p.eddy is None else p.coil_closed[0]
            if hold is not None:   # thresholds: the final turn-off and the bypass follow them
                th, ih, oh, t_cut, i_cut, lowest, t_last, *more = hold(t_hand, i0, v, r_on, r_off,
                                                                       v_off, seated)
                mh = more[0] if more else None
                hold_fast = more[1] if len(more) > 1 else None
                t_off, t_on = t_cut, t_cut - t_last
                t_open = (t_off - min(lead, t_on) if lead >= 0 else t_off + lag) if split else math.inf
                if split and t_last < t_open < t_cut and not np.any(th == t_open):
                    at = int(np.searchsorted(th, t_open))
                    if mh is None:
                        i_open = float(rise_current(t_open - t_last, float(np.interp(t_last, th, ih)),
                                                    v, r_on, seated))
                    else:   # the last on-time's magnetising current, its terminal current
                        from . import eddy as eddy_model
                        start = float(mh[np.searchsorted(th, t_last, side="right") - 1])
                        m_open = float(np.ravel(eddy_model.rise_current(t_open - t_last, start, v, r_on,
                                                                        seated))[0])
                        i_open = float(np.ravel(p.terminal(m_open, True))[0])
                        mh = np.insert(mh, at, m_open)
                    th, ih, oh = (np.insert(th, at, t_open), np.insert(ih, at, i_open),
                                  np.insert(oh, at, 1.0))
            elif mixed is not None:   # the seated coil's three segments (mixed_waveform)
                from .mixed_waveform import mixed_hold_samples, segments_of

                th, ih, oh, _, t_cut, i_cut, _ = mixed_hold_samples(
                    peak_time, i0, segments_of(seated, v, r_on, r_off, mixed, i0), duty, frequency,
                    hold_time, points, mixed)
                lowest = min(i0, float(np.min(ih)))   # the current dips lowest at a period's start
            else:
                th, ih, oh, t_cut, i_cut, starts = hold_samples(
                    peak_time, i0, v, r_on, r_off, v_off, seated, duty, frequency, hold_time, points)
                lowest = float(np.min(starts))
            if hold is None and split and t_cut - t_on < t_open < t_cut and not np.any(th == t_open):
                # a sample where the bypass opens, inside the last on-time
                at = int(np.searchsorted(th, t_open))
                i_open = float(rise_current(t_open - (t_cut - t_on), float(starts[-1]), v, r_on,
                                            seated))
                th, ih, oh = np.insert(th, at, t_open), np.insert(ih, at, i_open), np.insert(oh, at, 1.0)
            if lowest >= float(p.stay_current[0]):
                tail = simulate(p, release_segments(t_cut), state="seated",
                                flux=float(p.flux_closed(i_cut)[0]), method=method, points=points,
                                stop=lambda r: r.state == "open" and not r.live, t0=t_cut,
                                release_params=p_rel)
                zeros = np.zeros_like(th)
                tr = head
                # with an eddy term the tail's first row stays: the terminal current steps
                # at the final turn-off (two rows at its instant, as at every edge)
                k = 1 if mh is None else 0
                tr.time = np.concatenate([head.time, th, tail.time[k:]])
                tr.current = np.concatenate([head.current, ih, tail.current[k:]])
                tr.switch_on = np.concatenate([head.switch_on, oh.astype(np.int8),
                                               tail.switch_on[k:]])
                tr.position = np.concatenate([head.position, zeros, tail.position[k:]])
                tr.velocity = np.concatenate([head.velocity, zeros, tail.velocity[k:]])
                if mh is not None:
                    tr.magnetising_current = np.concatenate([head.magnetising_current, mh,
                                                             tail.magnetising_current])
                tr.log = head.log + tail.log
                tr.events = {**tail.events, **head.events}
                if hold_fast is not None:   # a mixed-decay hold's fast parts, all four open
                    hold_fast = np.concatenate([np.zeros(tr.time.size - th.size - tail.time.size + k, bool),
                                                hold_fast, np.zeros(tail.time.size - k, bool)])
                if head.bus is not None:
                    tr.bus = np.concatenate([head.bus, np.full(th.size + tail.time.size - k, float(p.v_on[0]))])
        if tr is None and p_peak is not p and hold is None:
            # the peak on the drooping bus, then on from its end state on the stiff bus (after
            # a boost on a drooping main supply: on the main bus, from the source's voltage)
            tr, main_bus = after_peak(head, bool(head.current[-1] > 0))
    if tr is None and hold is not None:
        raise ValueError("the armature is not seated at the end of the peak, or the hold's "
                         "current falls below the stay current: a hold switched by thresholds "
                         "with the armature in flight is not modelled")
    if tr is None and peak_time > 0 and p_peak is not p and p.eddy is not None:
        # an eddy term on the drooping bus: the peak on it, then on from its end state on
        # the stiff bus (the terminal current steps with the bus there, a row each side);
        # after a boost on a drooping main supply on the main bus, from the source's voltage
        tr, main_bus = after_peak(simulate(p_peak, schedule[:1], method=method, points=points), True)
    if tr is None:
        tr = simulate(p, schedule, method=method, points=points, stop=released,
                      release_params=p_rel)
    on_bus = bridge and s.droops
    if on_bus:   # the release rides the drooping bus (the capacitor a state of the run)
        p_bus = params_from_loop(drive.armature, fast, l_factor, drive.coil.eddy_resistance,
                                 bus=(s.source_resistance, s.capacitance))
        if main_bus is None:
            tr = _bus_release(tr, p_bus, t_off, float(fast.v_off - fast.v_on), s.sink, points)
        else:   # after a boost: from the main bus at the turn-off, the converter still drawing
            # (on a supply that sinks its Thevenin source, on one that cannot its current)
            boost_rows = tr.bus
            drain = np.array([(float(p_bus.v_on[0]) - fed[-1]) / s.source_resistance])
            tr = _bus_release(tr, dataclasses.replace(p_bus, v_on=np.array(fed[-1:])) if s.sink else p_bus,
                              t_off, float(fast.v_off - fast.v_on), s.sink, points, bus=main_bus,
                              drain=None if s.sink else drain)
            main_bus = tr.bus   # (the boost's trace reads tr.bus up to the peak's end only)
            k = int(np.searchsorted(tr.time, t_off * (1.0 - 1e-12)))
            tr.bus = np.concatenate([boost_rows[:k + 1], main_bus[k + 1:]])
    current = tr.current
    on = tr.switch_on
    if p.eddy is not None:
        # each switch edge has a row before and after the terminal current's step: the
        # one after sits EDGE s later, so that time rises strictly (as _eddy_actuation)
        step = np.diff(tr.time)
        same = np.flatnonzero(step <= 1e-15) + 1
        if same.size:
            tr.time = tr.time.copy()
            tr.time[same] = tr.time[same - 1] + min(EDGE, 0.01 * step[step > 1e-15].min(initial=1.0))
    v_sw, sense = _switch_and_sense(drive, lp, supply, current, on)
    bypass = None
    extra = None
    if bridge:   # the four switches' states; the fast decay's voltage from the final turn-off
        fast_v, _ = _switch_and_sense(drive, fast, supply, current, on)
        all_open = hold_fast   # a hold switched by thresholds: its own fast parts (all before the
        if hold_fast is not None and hold_fast.size != tr.time.size:   # turn-off: the bus's release
            all_open = np.zeros(tr.time.size, bool)                     # keeps the rows up to it)
            all_open[:hold_fast.size] = hold_fast[:tr.time.size]
        if t_fast > 0 and hold is None:   # and in the hold's fast parts (mixed decay): the off samples up to
            # and including each fast part's end (the time into the period, to rounding)
            into = tr.time - peak_time - np.floor((tr.time - peak_time) / period) * period
            all_open = ((tr.time > peak_time) & (tr.time < t_off) & (on == 0) & (into > 0.5 * t_on)
                        & (into <= t_on + t_fast * (1 + 1e-9)))
        rail = supply
        if on_bus:   # the switches see the bus: Q1 and Q4 V_bus + V_d while the current returns
            rail = tr.bus
            sense_ = drive.board.sense
            from .bridge import fast_switch_voltage

            fast_v = np.where(current > 0, fast_switch_voltage(rail, fast.diode(drive), sense_.resistance,
                                                               sense_.position == "coil", current), rail)
        v_sw, sense, extra = _bridge_columns(drive, rail, tr.time, current, on, fast_v, t_off,
                                             all_open=all_open)
    if split:
        bypass = (tr.time < t_open).astype(np.int8)
        fast_v, _ = _switch_and_sense(drive, fast, supply, current, on)
        v_sw = np.where(bypass == 1, v_sw, fast_v)
    ev = tr.events
    events = {"on": 0.0, "hold": peak_time, "off": t_off}
    after = [t for t, name in tr.log if name == "zero" and t >= t_off]
    events["zero"] = after[0] if after else float(tr.time[-1])
    if split:
        events["bypass_open"] = t_open
    for name in ("move", "impact", "dip_current"):
        if name in ev:
            events[name] = float(ev[name])
    seats = [t for t, name in tr.log if name == "seat"]
    if seats:
        events["seat"] = seats[0]
    for name in ("unlatch", "open"):
        times = [t for t, nm in tr.log if nm == name and t >= t_off]
        if times:
            events[name] = times[-1] if name == "open" else times[0]
    trace = None
    if s.boosted:   # the run's capacitor in the peak, then its recharge: a boost_v column
        trace = _boost_trace(drive, tr, peak_time)
        tr.bus = main_bus
    rail = supply if tr.bus is None else tr.bus   # a high-side switch's node: from the bus
    w = Waveform(tr.time, current, on, v_sw, sense, events, label, position=tr.position,
                 velocity=tr.velocity, bypass_on=bypass, magnetising_current=tr.magnetising_current,
                 bus_voltage=tr.bus,
                 **(extra if bridge else node_columns(drive, rail, current, on, v_sw)))
    return boost_columns(drive, w, supply if main_bus is None else main_bus, peak_time, 0.0, 0.0,
                         trace) if s.boosted else w


def converter_fed(drive: Drive, main, i_hand: float, duty: float, frequency: float):
    """The main bus's points ``main`` (one point) with the boost converter's draw from the
    hand-over on taken out of the source: ``V_s - R_s I_conv``
    (:func:`coildrive.model.supply.converter_current`, the coil at most the larger of the
    hand-over current ``i_hand`` A and the seated coil's steady PWM top at ``duty`` and
    ``frequency`` Hz; with an eddy term the terminal current's top too, what the bus feeds)."""
    from .pwm import pwm_steady_state

    ss = pwm_steady_state(duty, frequency, main.v_on, main.r_on, main.r_off, main.v_off, main.coil_closed)
    top = ss.i_max if ss.terminal_max is None else np.maximum(ss.i_max, ss.terminal_max)
    s = drive.supply
    i_conv = bus_model.converter_current(main.v_on, s.source_resistance, s.converter_draw,
                                         np.maximum(i_hand, top))
    return dataclasses.replace(main, v_on=main.v_on - s.source_resistance * i_conv)


def _bus_release(tr, p_bus, t_off: float, v_d2: float, sink: bool, points: int, bus=None, drain=None):
    """``tr`` (a moving armature's actuation on a full bridge, its hold on the stiff bus) with
    its release from the final turn-off at ``t_off`` s replaced by the run into the drooping
    bus (:func:`coildrive.model.armature_bus_release.release` from the state there, the bus
    at the source's voltage ``p_bus.v_on``, ``v_d2`` V the two body diodes; ``points``
    samples an integrator step): the current (terminal), the flux, the motion, the bus and
    the moments after the turn-off (unlatch, open, zero) are the run's. ``bus``: the bus's
    samples up to the turn-off (V, at ``tr.time``; the hold after a boost on the main bus),
    the release starting from its value there instead; ``drain``: A drawn off the bus besides
    (:func:`~coildrive.model.armature_bus_release.release`)."""
    from .armature import OPENED
    from .armature_bus_release import release

    k = int(np.searchsorted(tr.time, t_off * (1.0 - 1e-12)))   # the last on-row at the turn-off
    # (a hold in closed form on the seat carries no flux or integrals: seated at its current)
    full = tr.flux.size == tr.time.size
    flux = float(tr.flux[k]) if full else float(p_bus.flux_closed(np.array([tr.current[k]]))[0])
    start = (np.array([flux]), np.array([float(tr.position[k])]), np.array([float(tr.velocity[k])]))
    v0 = float(p_bus.v_on[0]) if bus is None else float(bus[k])
    r = release(p_bus, 0.0, v0, v_d2, sink=sink, start=start, record=max(points, 2), drain=drain)
    t, y, i_t = r.path
    eddy = p_bus.eddy is not None
    j = 0 if eddy else 1   # (with an eddy term the terminal current steps at the turn-off: both rows)
    b = r.run
    log = [(tm, name) for tm, name in tr.log if tm <= t_off]
    if float(start[1][0]) <= 0.0 and float(start[2][0]) <= 0.0:
        log.append((t_off + float(b.unlatch_time[0]), "unlatch"))
    log += [(t_off + float(b.open_time[0]), "open"), (t_off + float(b.zero_time[0]), "zero")]
    log = sorted((tm, name) for tm, name in log if np.isfinite(tm))
    events = {name: v for name, v in tr.events.items() if name not in ("unlatch", "open", "zero")}
    events.update({name: tm for tm, name in log if tm >= t_off})

    def joined(before, after):
        return np.concatenate([np.asarray(before)[:k + 1], after[j:]])

    mag = None
    if eddy:
        mag = joined(tr.magnetising_current if tr.magnetising_current is not None else tr.current,
                     p_bus.current(y[0], y[1]))
    integrals = {}
    if full:
        integrals = dict(flux=joined(tr.flux, y[0]), charge=joined(tr.charge, tr.charge[k] + y[3]),
                         square=joined(tr.square, tr.square[k] + y[4]))
    return dataclasses.replace(
        tr, time=joined(tr.time, t_off + t), position=joined(tr.position, y[1]), **integrals,
        velocity=joined(tr.velocity, y[2]), switch_on=joined(tr.switch_on, np.zeros(t.size, tr.switch_on.dtype)),
        current=joined(tr.current, i_t), magnetising_current=mag,
        bus=joined(bus if bus is not None else tr.bus if tr.bus is not None
                   else np.full(tr.time.shape, float(p_bus.v_on[0])), y[5]),
        log=log, events=events, impacts=[im for im in tr.impacts if im[0] <= t_off],
        state="open" if b.status[0] == OPENED else tr.state, stopped=True)


def _boost_trace(drive: Drive, tr, peak_time: float) -> np.ndarray:
    """The boost's voltage (V) at ``tr.time`` of a moving armature's actuation: the
    capacitor's state in the run until the peak ends at ``peak_time`` s, then its recharge
    at ``boost_power`` (:func:`coildrive.model.boost.recharge_voltage`); an ideal boost
    (no capacitance) its voltage throughout."""
    s = drive.supply
    if tr.bus is None or not s.boost_capacitance > 0:
        return np.full(tr.time.shape, s.boost)
    k = int(np.searchsorted(tr.time, peak_time, side="right")) - 1
    v_end = float(tr.bus[k])
    after = boost_model.recharge_voltage(v_end, np.maximum(tr.time - peak_time, 0.0), s.boost_capacitance,
                                         s.boost_power, s.boost)
    return np.where(tr.time <= peak_time, tr.bus, after)


def _joined(head, rest, v_bus: float):
    """One trajectory of ``head`` (the peak on the drooping bus, or from an ideal boost: no
    bus) and ``rest`` (on from its end on the stiff bus at ``v_bus`` V): samples end to end,
    the moments of both."""
    import dataclasses

    names = ["time", "flux", "position", "velocity", "switch_on", "charge", "square", "current"]
    # with an eddy term the rest's first row stays: the terminal current steps there (the
    # bus back at the supply, the switch's new state), the magnetising current does not
    eddy = head.magnetising_current is not None
    first = 0 if eddy else 1
    if eddy:
        names.append("magnetising_current")
    cat = {name: np.concatenate([getattr(head, name), getattr(rest, name)[first:]]) for name in names}
    return dataclasses.replace(
        rest, **cat, events={**rest.events, **head.events}, log=head.log + rest.log,
        impacts=head.impacts + rest.impacts,
        bus=None if head.bus is None else np.concatenate([head.bus, np.full(rest.time.size - first, v_bus)]))


def hold_samples(t_start: float, i0: float, v: float, r_on: float, r_off: float, v_off: float,
                 ind: float, duty: float, frequency: float, hold_time: float, points: int):
    """Closed-form samples of a PWM hold of constant inductance ``ind`` H from ``t_start``
    s and ``i0`` A: whole periods (at least one), the last one cut at the end of its
    on-time (the turn-off, at the top of the ripple).

    Returns ``(time, current, switch_on, t_off, i_off, starts)``: the samples after
    ``t_start`` (s, A, 0/1), the turn-off time s and current A, and the current at the
    start of every period (A; its smallest value is the lowest current of the hold).
    """
    peak_time = t_start
    period = 1.0 / frequency
    n = max(1, int(round(hold_time * frequency)))
    t_on, t_off = duty * period, (1.0 - duty) * period
    if isinstance(ind, FluxCoil):
        # a saturating coil (the seated curve of an armature's two): its segments read
        # from one point's tabulated exact times (model.flux_waveform.Track)
        from .flux_waveform import Track

        tr = Track(ind, v, r_on, r_off, v_off, i0)
        rise, decay, to_zero = tr.rise, (lambda t, i: tr.decay(i, t)), tr.to_zero
    else:
        def rise(i, t):
            return rise_current(t, i, v, r_on, ind)

        def decay(t, i):
            return decay_current(t, i, r_off, v_off, ind)

        def to_zero(i):
            return decay_time(0.0, i, r_off, v_off, ind)
    if isinstance(ind, FluxCoil):
        from .flux_waveform import period_starts
        starts = period_starts(rise, lambda i, t: decay(t, i), i0, n, t_on, t_off)
    else:
        starts = np.empty(n)
        i = i0
        e_on, e_off = math.exp(-t_on * r_on / ind), math.exp(-t_off * r_off / ind)
        a, b = v / r_on, v_off / r_off
        for k in range(n):
            starts[k] = i
            top = a + (i - a) * e_on
            i = max((top + b) * e_off - b, 0.0) if k < n - 1 else top
    frac = np.linspace(0.0, 1.0, points + 1)
    t0 = peak_time + np.arange(n)[:, None] * period
    on_t = np.broadcast_to(frac[None, :] * t_on, (n, points + 1))
    on_i = rise(starts[:, None], on_t)
    tops = on_i[:, -1]
    # The off segment's end is the next period's first sample.
    off_t = np.broadcast_to(frac[None, 1:-1] * t_off, (n, points - 1))
    off_i = decay(off_t, tops[:, None])
    # Where the diode blocks (DCM), put a sample exactly at the zero crossing; in CCM the
    # extra sample goes mid-way through the last interval so every row has the same count.
    t_zero = to_zero(tops)
    extra = np.where(t_zero < t_off, t_zero, t_off * (points - 0.5) / points)
    off_t = np.concatenate([off_t, extra[:, None]], axis=1)
    off_i = np.concatenate([off_i, decay(extra, tops)[:, None]], axis=1)
    order = np.argsort(off_t, axis=1, kind="stable")
    off_t = np.take_along_axis(off_t, order, axis=1)
    off_i = np.take_along_axis(off_i, order, axis=1)
    period_t = np.concatenate([t0 + on_t, t0 + t_on + off_t], axis=1)
    period_i = np.concatenate([on_i, off_i], axis=1)
    period_on = np.concatenate([np.ones_like(on_t), np.zeros_like(off_t)], axis=1)
    # The last period ends at its on-edge: drop its off segment.
    keep = np.ones_like(period_t, dtype=bool)
    keep[-1, on_t.shape[1]:] = False
    t_offedge = peak_time + (n - 1) * period + t_on
    return (period_t[keep][1:], period_i[keep][1:], period_on[keep][1:], t_offedge,
            float(tops[-1]), starts)
