"""Check a capture of a latching coil against its design: each pulse measured, pass or fail.

The pulses come from the device's events: ON (``value`` 0 the set pulse, 1 the reset
pulse; ``docs/protocol.md``) to OFF, then the decay to zero. Per pulse:

* ``<pulse>_length``: OFF minus ON against the design's pulse (whole ticks), band
  ``Tolerances.peak_duration`` widened to two sample periods and one tick;
* ``<pulse>_end_current``: the last sample before OFF (mid-step) against the model's
  current at the pulse's end, ``i(t_pulse)`` of the winding's RL rise (from a full
  capacitor on a drooping bus: :func:`coildrive.design.latch.rise_current_at`) with the
  design's R and L at the capture's supply and coil temperature (the operating point of
  :func:`coildrive.bench.check.operating_point`; with a moving armature the set pulse's
  current follows it onto the seat, :func:`coildrive.design.latch.seat_run`, from the
  boost its run from the capacitor), band
  ``Tolerances.pulse_current``
  widened to two ADC codes plus the rise of one sample period. A reading at the ADC's
  full scale is not a measurement (left out; the row is ``n/a`` when every one is);
* ``<pulse>_time_to_zero``: from OFF to the first sample at or below the capture's zero
  level, against the model's decay through the release path from that end current down
  to the current of one code above that level, band ``Tolerances.release_time`` widened
  to two sample periods and the time one code takes. ``n/a`` where the sense resistor
  does not see the decay (under the switches, or a bridge's common return).

``faults`` (only when the capture holds FAULT events: a pulse from the boost that timed
out sends ``BOOST_TIMEOUT`` after its OFF) lists each with its name and time and fails, as
:func:`coildrive.bench.check._fault_row` does for a peak and hold.

A pulse the capture cut short (no OFF, or its current not back at zero when the capture
ends, or begun before it) is reported and left out, like the partial actuations of
:mod:`coildrive.bench.check`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..jsondoc import json_ready
from .analysis import _levels
from .capture_file import Capture
from .check import (BENCH_CAUTIONS, FAIL, PASS, CheckItem, CheckReport, Tolerances, _fault_row, _row,
                    operating_point, prepare_capture)
from .messages import EventKind

_NAMES = {0: "set", 1: "reset"}


@dataclass(frozen=True)
class PulseMeasure:
    """One pulse of the capture: ``number`` (1 first), ``name`` (set / reset), its start
    ``start_s``, ``length_s``, ``end_current_a`` (``None`` at full scale),
    ``time_to_zero_s`` (``None`` unseen), ``samples_missing``, ``partial`` (``None`` or why
    it is left out)."""

    number: int
    name: str
    start_s: float
    length_s: float | None
    end_current_a: float | None
    time_to_zero_s: float | None
    samples_missing: int
    partial: str | None = None


@dataclass(frozen=True)
class LatchAnalysis:
    """The pulses of a capture (``check --json`` key ``analysis``)."""

    pulses: tuple[PulseMeasure, ...]
    sample_rate_hz: float
    amps_per_code: float
    sense_position: str
    zero_threshold_a: float

    def to_dict(self) -> dict:
        return json_ready({"pulses": [p.__dict__ for p in self.pulses], "sample_rate_hz": self.sample_rate_hz,
                           "amps_per_code": self.amps_per_code, "sense_position": self.sense_position,
                           "zero_threshold_a": self.zero_threshold_a})


def measure_pulses(capture: Capture, sense: str) -> LatchAnalysis:
    """Cut ``capture`` into pulses by its ON/OFF events and measure each (module docstring)."""
    meta = capture.meta
    fs, apc = float(meta.sample_rate_hz), float(meta.amps_per_code)
    idx = capture.index
    c = capture.code.astype(np.int64) - int(meta.zero_code or 0)
    lv = _levels(c)
    full = 2 ** int(meta.adc_bits) - 1 - int(meta.zero_code or 0)
    ev = sorted((e for e in capture.events if e.kind in (EventKind.ON, EventKind.OFF)), key=lambda e: e.index)
    ons = [e for e in ev if e.kind == EventKind.ON]
    out = []
    for k, on in enumerate(ons):
        nxt = ons[k + 1].index if k + 1 < len(ons) else None
        off = next((e for e in ev if e.kind == EventKind.OFF and e.index >= on.index
                    and (nxt is None or e.index < nxt)), None)
        name = _NAMES.get(on.value, f"pulse code {on.value}")
        p_on = int(np.searchsorted(idx, on.index))
        partial = None
        if p_on == 0 and idx.size and idx[0] > on.index:
            partial = f"the capture began during pulse {k + 1} ({name})"
        if off is None:
            out.append(PulseMeasure(k + 1, name, on.index / fs, None, None, None, 0,
                                    partial or f"the capture ended during pulse {k + 1} ({name})"))
            continue
        p_off = int(np.searchsorted(idx, off.index))
        limit = int(np.searchsorted(idx, nxt)) if nxt is not None else idx.size
        end = None
        if p_off > 0 and p_off - 1 >= p_on:
            code = int(c[p_off - 1])
            end = None if code >= full else (max(code, 0) + 0.5) * apc
        low = np.flatnonzero(c[p_off:limit] <= lv.zero)
        zero_pos = p_off + int(low[0]) if low.size else None
        if zero_pos is None and partial is None:
            partial = f"the capture ended before pulse {k + 1} ({name}) was back at zero"
        t_zero = None if zero_pos is None or sense != "coil" else float(idx[zero_pos] - off.index) / fs
        span = idx[p_on:(zero_pos + 1 if zero_pos is not None else limit)]
        missing = int(np.sum(np.maximum(np.diff(span) - 1, 0))) if span.size > 1 else 0
        out.append(PulseMeasure(k + 1, name, on.index / fs, (off.index - on.index) / fs, end, t_zero, missing,
                                partial))
    return LatchAnalysis(tuple(out), fs, apc, sense, lv.zero * apc)


def predict_pulse(design, name: str, supply: float, coil_temp: float, zero_current: float,
                  resolution: float) -> dict:
    """The model's figures of pulse ``name`` at ``supply`` V with the coil at ``coil_temp``
    degC and the design's nominal R and L: ``length_s``, ``end_current_a``, the slope at the
    end ``slope_a_s`` (A/s), ``time_to_zero_s`` (down to ``zero_current`` A) and the time
    one code ``resolution`` A takes there, ``code_time_s`` -- of the current the sense reads
    (with an eddy term the terminal current, not the magnetising one)."""
    from ..design.latch import firmware_pulse, rise_current_at, winding_drive
    from ..model.circuit import full_bridge, loop
    from ..model.rl import decay_time
    from ..model.eddy import EddyCoil
    from ..model.flux import incremental_at

    # a compensated pulse: the entry read there; from the boost: to its threshold there
    length = firmware_pulse(design, name, supply, coil_temp)
    wd = winding_drive(design.drive, name == "reset")
    lp = loop(wd, np.array([supply]), np.array([coil_temp]), 1.0, 1.0)
    rel = loop(wd, np.array([supply]), np.array([coil_temp]), 1.0, 1.0, path="release")
    v_on = float(lp.v_on[0])
    if wd.supply.boosted and wd.armature is not None:   # the armature's run from the boost onto the seat
        i_end, v_on = _seated_boost_end(wd, length, supply, coil_temp)
    elif wd.supply.boosted:   # from the boost capacitor (model.boost): its voltage drives the end slope
        from ..model import boost as boost_model
        from ..model.latch_waveform import boost_of
        b = boost_of(wd, float(lp.r_on[0]), lp.inductance)
        m = boost_model.of(b)   # (a curve's or an eddy term's: model.flux_boost; i_end the magnetising current)
        i_end, v_c = (float(x) for x in m.state(length, b))
        v_on = v_c - wd.supply.boost_resistance * float(m.terminal(i_end, v_c, b))   # the top of the coil
    elif wd.armature is None:
        i_end = float(rise_current_at(wd, lp, length)[0])
    else:
        i_end = _seated_end(wd, lp, length, supply, coil_temp)
    # a flux-linkage curve's slopes take its incremental inductance where they are read
    ind = lp.inductance
    r_on = float(lp.r_on[0])
    r_off, v_off = float(np.ravel(rel.r_off)[0]), float(np.ravel(rel.v_off)[0])
    if isinstance(ind, EddyCoil):
        # the sense reads the terminal current (model/eddy.py): k_on (i_m + V/R_e) on, k_off
        # (i_m - V_off/R_e) freewheeling (k = R_e/(R + R_e) of each loop), and moves k times as
        # fast as the magnetising current, whose flux changes at k (V - R i_m) on and -k (V_off
        # + R_off i_m) off
        r_e = float(np.ravel(ind.resistance)[0])
        k_on, k_off = r_e / (r_on + r_e), r_e / (r_off + r_e)
        mag = ind.magnetising
        level_t = min(zero_current, k_off * (i_end - v_off / r_e))
        level = level_t / k_off + v_off / r_e                  # the magnetising current there
        l_end, l_level = (float(np.ravel(incremental_at(mag, i))[0]) for i in (i_end, level))
        slope = max(k_on * k_on * (v_on - r_on * i_end) / l_end, 0.0)
        fall = k_off * k_off * (r_off * level + v_off) / l_level
        i_sensed = k_on * (i_end + v_on / r_e)
    else:
        level = min(zero_current, i_end)
        l_end, l_level = (float(np.ravel(incremental_at(ind, i))[0]) for i in (i_end, level))
        slope = max((v_on - r_on * i_end) / l_end, 0.0)
        fall = (r_off * level + v_off) / l_level
        i_sensed = i_end
    t_zero = float(np.ravel(decay_time(level, i_end, r_off, v_off, ind))[0])
    if wd.supply.droops and full_bridge(wd) and not wd.supply.boosted:   # the fast decay into the drooping bus
        from ..model.latch_waveform import fast_decay_after, pulse
        _, _, on, bus, *_ = pulse(wd, supply, coil_temp, 1.0, 1.0, length, 2)
        fast = fast_decay_after(wd, rel, i_end, float(bus[on == 1][-1]), level)
        # (an eddy term: the diodes block where the terminal current, which the sense reads,
        # reaches zero -- the level's magnetising current is the stiff freewheel's)
        t_zero = float(np.ravel(fast.zero_time if isinstance(ind, EddyCoil) else fast.drop_time)[0])
    elif wd.supply.boosted and full_bridge(wd):   # back into the boost capacitor (model.flux_bus_decay.boost_return)
        from ..model.bridge import RETURN_DROPS
        from ..model.flux_bus_decay import boost_return, boost_return_trace
        from ..model.latch_waveform import return_args
        coil, args = return_args(wd, rel)
        back = boost_return(coil, i_end, v_c, *args, i_drop=level)
        # (an eddy term: the diodes block where the terminal current, which the sense reads,
        # reaches zero -- the level's magnetising current is the stiff freewheel's)
        t_zero = float(np.ravel(back.zero_time if isinstance(ind, EddyCoil) else back.drop_time)[0])
        u = float(boost_return_trace(np.array([t_zero]), coil, i_end, v_c, *args)[1][0]) + RETURN_DROPS * args[-1]
        r_ret = r_off + wd.supply.boost_resistance
        if isinstance(ind, EddyCoil):
            # at the block (terminal current 0, i_m = u / R_e) the terminal current k (i_m - u/R_e)
            # falls at k^2 (u + R i_m) / L_d(i_m) = k u / L_d (the capacitor's rate i/C is 0 there)
            k_ret = r_e / (r_ret + r_e)
            fall = k_ret * u / float(np.ravel(incremental_at(ind.magnetising, u / r_e))[0])
        else:
            fall = (r_ret * level + u) / l_level
    elif wd.supply.droops and wd.freewheel.type == "clamp":   # the clamped decay draws the bus down further
        from ..model.latch_waveform import clamp_decay_after, pulse
        # (from the boost the decay draws on the main bus, full at the pulse's end: the pulse drew
        # nothing from it; else on the bus the pulse left)
        if wd.supply.boosted:
            v0 = supply
        else:
            _, _, on, bus, *_ = pulse(wd, supply, coil_temp, 1.0, 1.0, length, 2)
            v0 = float(bus[on == 1][-1])
        clamped = clamp_decay_after(wd, rel, i_end, v0, level)
        # (an eddy term: the clamp blocks where the terminal current, which the sense reads, stops)
        t_zero = float(np.ravel(clamped.zero_time if isinstance(ind, EddyCoil) else clamped.drop_time)[0])
    return {"length_s": length, "end_current_a": i_sensed, "slope_a_s": slope, "time_to_zero_s": t_zero,
            "code_time_s": resolution / fall}


def _seated_end(wd, lp, t_pulse: float, supply: float, coil_temp: float) -> float:
    """The set pulse's current at its end, A, with a moving armature (the design's seat
    run at the one point); one line where it is not on the seat by then."""
    from ..design.latch import Points, seat_run

    one = np.ones(1)
    pin, _ = seat_run(wd, lp, Points(np.array([supply]), np.array([coil_temp]), one, one, one),
                      peak_time=t_pulse)
    if not (pin.status[0] == 0 and pin.seat_time[0] <= t_pulse):
        raise InputError(wd.source, "armature", f"at {supply:g} V with the coil at {coil_temp:g} degC the "
                         "armature is not on the seat when the set pulse ends: no end current to check")
    return float(pin.peak_end_current[0])


def _seated_boost_end(wd, t_pulse: float, supply: float, coil_temp: float) -> tuple[float, float]:
    """``(A, V)``: the set pulse's current and the top of the coil (the boost capacitor less
    its path's drop) at its end, with a moving armature from the boost
    (:func:`coildrive.model.latch_waveform.pulse`: the armature's run from the capacitor);
    one line where it is not on the seat by then."""
    from ..model.latch_waveform import NotSeated, pulse

    try:
        _, i, on, top, *_ = pulse(wd, supply, coil_temp, 1.0, 1.0, t_pulse, 200)
    except NotSeated as err:
        raise InputError(wd.source, "armature", f"{err}: no end current to check") from None
    return float(i[on == 1][-1]), float(top[on == 1][-1])


def check_latch_capture(capture: Capture, design, tolerances: Tolerances | None = None,
                        supply: float | None = None, coil_temp: float | None = None) -> CheckReport:
    """Compare every pulse of ``capture`` with ``design`` (a
    :class:`~coildrive.design.latch.LatchDesign`; module docstring)."""
    tol = tolerances or Tolerances()
    drive = design.drive
    board = drive.board
    capture = prepare_capture(capture, board)
    if capture.meta.link == "text":
        raise InputError(capture.source, "", "is a text-line capture: its 'on' lines carry no pulse "
                         "polarity, and a latching coil's check needs the ON events' values (binary frames)")
    if not any(e.kind == EventKind.ON for e in capture.events):
        raise InputError(capture.source, "", "has no ON events: a latching coil's check takes its pulses "
                         "(set or reset) from the device's ON/OFF events")
    supply_codes = [e.value for e in capture.events if e.kind == EventKind.SUPPLY]
    bits = capture.meta.adc_bits or board.adc.bits
    if supply is None and capture.meta.supply_v is None and supply_codes and board.supply_sense is not None and \
            float(np.median(supply_codes)) >= 2**bits - 1:
        raise InputError(capture.source, "supply", "its SUPPLY readings are at the ADC's full scale (the bus "
                         f"is above the {board.adc.reference * board.supply_sense.divider:.4g} V the "
                         "board's divider reads): give the bus voltage with --supply")
    point = operating_point(drive, capture, supply, coil_temp)
    sense = capture.meta.sense_position or board.sense.position
    a = measure_pulses(capture, sense)
    cut = [p for p in a.pulses if p.partial is not None]
    done = [p for p in a.pulses if p.partial is None]
    if cut and not done:
        raise InputError(capture.source, "", f"holds no complete pulse: {cut[-1].partial} (nothing to check; "
                         "capture at least one whole pulse, from idle to idle)")
    notes = [f"{p.partial}: it is reported but left out of the check" for p in cut]
    if capture.meta.board is not None and capture.meta.board != board.name:
        notes.insert(0, f"the capture says board {capture.meta.board!r}, the drive uses {board.name!r}")
    fs, apc = a.sample_rate_hz, a.amps_per_code
    period, tick = 1.0 / fs, 1.0 / board.tick.rate
    items = [CheckItem("pulses", PASS if done else FAIL, float(len(done)), None, None, None, "",
                       f"{len(done)} found from the ON/OFF events ("
                       + ", ".join(f"{sum(p.name == n for p in done)} {n}" for n in ("set", "reset")) + ")"
                       + "".join(f"; left out: {p.partial}" for p in cut),
                       actuations=tuple(p.number for p in done))]
    missing = sum(p.samples_missing for p in done)
    items.append(CheckItem("link", FAIL if missing else PASS, float(missing), 0.0, 0.0, 0.0, "samples",
                           f"{missing} missing in pulses; {capture.lost_frames} frames lost, "
                           f"{capture.crc_errors} CRC errors"))
    faults = _fault_row(capture, fs, ())
    if faults is not None:
        items.append(faults)
    prediction = {}
    for name in ("set", "reset"):
        mine = [p for p in done if p.name == name]
        if not mine:
            continue
        pred = predict_pulse(design, name, point.supply_v, point.coil_temp_c, (a.zero_threshold_a / apc + 1) * apc,
                             apc)
        prediction[name] = pred
        nums = [p.number for p in mine]
        items.append(_row(f"{name}_length", "s", [p.length_s for p in mine], pred["length_s"], tol.peak_duration,
                          2.0 * period + tick, numbers=nums))
        ends = [p.end_current_a for p in mine]
        clipped = all(v is None for v in ends)
        items.append(_row(f"{name}_end_current", "A", ends, pred["end_current_a"], tol.pulse_current,
                          2.0 * apc + pred["slope_a_s"] * period, missing_fails=False,
                          na_reason=(f"at the ADC's full scale ({(2 ** bits - 1) * apc:.4g} A) "
                                     "in every pulse: the current is above what the sense chain reads")
                          if clipped else None,
                          extra=" (the last sample before OFF)", numbers=nums))
        items.append(_row(f"{name}_time_to_zero", "s", [p.time_to_zero_s for p in mine], pred["time_to_zero_s"],
                          tol.release_time, 2.0 * period + pred["code_time_s"], numbers=nums,
                          na_reason=None if sense == "coil" else
                          "the sense resistor does not carry the decay (under the switches, or a bridge's "
                          "common return, where the fast decay's current is reversed)",
                          extra=f" (to {a.zero_threshold_a:.4g} A)"))
    return CheckReport(items=tuple(items), analysis=a, point=point, tolerances=tol, prediction=prediction,
                       drive_name=drive.name, board_name=board.name, capture_source=capture.source,
                       notes=tuple(notes), cautions=BENCH_CAUTIONS, waveform=None)


__all__ = ["check_latch_capture", "measure_pulses", "predict_pulse", "LatchAnalysis", "PulseMeasure"]
