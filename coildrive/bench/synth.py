"""Synthetic captures: what the board's current-sense ADC would stream for model actuations.

A pure function of its inputs (no files, ports or clocks; the noise comes from a seeded
generator), so the bench emulator can stream its codes and the tests can check the
analysis against the model that made them.

The chain per sample, at the board's ADC sample rate ``f_s``:

1. the coil current ``i(t)`` of :func:`coildrive.model.waveform.actuation` (or any
   function with its signature, e.g. one with a moving armature), read at the sample
   instant by linear interpolation between the waveform's points (they resolve every
   switch edge, and between edges the closed-form segments are smooth: the tests bound
   the interpolation error far below one code);
2. the sense position: in the coil path the resistor sees ``i``; under the switch it
   sees ``i`` while the switch is on and nothing while it is off;
3. volts ``V = i R_sense gain``, plus Gaussian noise of ``noise_codes`` codes (one sigma),
   then the code ``floor(V / V_ref 2^bits)`` clipped to ``0 .. 2^bits - 1`` (the design's
   ADC convention, :func:`coildrive.design.figures.adc_code`).

The steps are separate functions (:func:`actuation_waveform`, :func:`sense_current`,
:func:`current_codes`, :func:`actuation_events`) so that the virtual bench device
(:mod:`coildrive.bench.device`) streams exactly these codes.

Events carry the index of the first sample taken at or after them (the bench link's
convention): ``on`` at switch-on, ``peak_end`` when the hold starts, ``off`` at the final
switch-off, and ``switch`` (position switch) when the waveform reports an armature
position. Actuations start at a random sub-sample phase, separated by idle time.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Callable

import numpy as np

from ..config import Drive
from ..design.corners import nominal_point
from ..model.waveform import Waveform, actuation
from .capture_file import Capture, CaptureEvent
from .messages import EventKind

FAULTS = ("open", "shorted_turns", "stuck")
"""Faults :func:`synth_capture` can put in: an open coil (no current), shorted turns
(lower R and L), a stuck armature (it never moves: no dip)."""

WaveformFunction = Callable[..., Waveform]


def adc_scaling(drive: Drive) -> tuple[float, float]:
    """``(volts_per_amp, amps_per_code)`` of the board's current-sense channel (V/A, A)."""
    board = drive.board
    vpa = board.sense.resistance * board.sense.gain
    return vpa, board.adc.reference / 2**board.adc.bits / vpa


def faulty_drive(drive: Drive, fault: str | None, shorted_fraction: float = 0.2) -> tuple[Drive, float, float]:
    """The drive as the fault makes it, and the extra R and L factors of the fault.

    ``shorted_turns``: a fraction ``s`` of the turns shorted leaves ``(1 - s)`` of the
    winding, so ``R`` scales by ``1 - s`` (wire length goes with turns) and ``L`` by
    ``(1 - s)^2`` (inductance goes with turns squared on the same magnetic path) —
    textbook inductor relations, e.g. ``L = N^2 / reluctance``.
    ``stuck``: the armature stays open, so the coil is a fixed inductor of its open
    inductance (no motion, no dip); a drive without ``[armature]`` is unchanged.
    ``open``: the drive is unchanged; the current is forced to zero by the caller.
    """
    if fault is None or fault == "open":
        return drive, 1.0, 1.0
    if fault == "shorted_turns":
        if not 0 < shorted_fraction < 1:
            raise ValueError(f"shorted_fraction {shorted_fraction} must be in (0, 1)")
        keep = 1.0 - shorted_fraction
        return drive, keep, keep * keep
    if fault == "stuck":
        arm = drive.armature
        if arm is None:
            return drive, 1.0, 1.0
        coil = dataclasses.replace(drive.coil, inductance=arm.inductance_open)
        return dataclasses.replace(drive, armature=None, coil=coil), 1.0, 1.0
    raise ValueError(f"unknown fault {fault!r}, expected one of {', '.join(FAULTS)}")


def _switch_state(w: Waveform, t: np.ndarray) -> np.ndarray:
    """Switch state (bool) at times ``t`` (s from switch-on) from the waveform's points.

    An interval between two points is on only when both ends are on (edges are points
    of the waveform, flagged with their on side); a time that hits a point takes its flag.
    """
    on = np.asarray(w.switch_on).astype(bool)
    k = np.clip(np.searchsorted(w.time, t, side="right") - 1, 0, w.time.size - 1)
    k1 = np.minimum(k + 1, w.time.size - 1)
    state = on[k] & on[k1]
    exact = w.time[k] == t
    state[exact] = on[k[exact]]
    return state


def _seated_changes(w: Waveform) -> list[tuple[float, int]]:
    """(time, level) where a waveform with an armature position seats (1) or leaves (0)."""
    pos = getattr(w, "position", None)
    if pos is None:
        pos = getattr(w, "position_m", None)
    if pos is None:
        return []
    pos = np.asarray(pos, float)
    if pos.shape != w.time.shape:
        return []
    seated = (pos <= 1e-9).astype(np.int8)
    change = np.flatnonzero(np.diff(seated)) + 1
    return [(float(w.time[k]), int(seated[k])) for k in change]


def threshold_switch_changes(w: Waveform, pick_up: float, drop_out: float,
                             frequency: float) -> list[tuple[float, int]]:
    """(time s, level) of a position switch read as a relay's two thresholds, for a coil
    without an ``[armature]`` model: it closes (1) when the current first reaches
    ``pick_up`` A, and opens (0) when, from one PWM period (``frequency`` Hz) after the
    hold starts, the current's mean over the last period falls below ``drop_out`` A (a
    relay's pick-up and drop-out currents: common practice). The current is the
    magnetising current where the waveform has one (an eddy term: it makes the flux and
    the force), else the coil current; the period's mean is the exact charge of the
    waveform's piecewise-linear samples over the period, divided by the period.
    """
    i = np.asarray(w.magnetising_current if w.magnetising_current is not None else w.current, float)
    t = np.asarray(w.time, float)
    up = np.flatnonzero(i >= pick_up)
    if not up.size:
        return []
    t_seat = float(t[up[0]])
    period = 1.0 / frequency
    charge = np.concatenate([[0.0], np.cumsum(0.5 * (i[1:] + i[:-1]) * np.diff(t))])
    after = t >= max(t_seat, float(w.events.get("hold", t_seat))) + period
    mean = (charge[after] - np.interp(t[after] - period, t, charge)) / period
    low = np.flatnonzero(mean < drop_out)
    return [(t_seat, 1)] + ([(float(t[after][low[0]]), 0)] if low.size else [])


def actuation_waveform(drive: Drive, supply: float, coil_temp: float, peak_time: float,
                       duty: float, frequency: float, hold_time: float, *,
                       resistance_scale: float = 1.0, inductance_scale: float = 1.0,
                       fault: str | None = None, shorted_fraction: float = 0.2,
                       waveform: WaveformFunction = actuation) -> Waveform:
    """The model actuation of the real coil: the drive as the fault makes it, the coil's R
    and L scaled (s, A; switch-on at t = 0). The current of an ``open`` fault is zeroed
    later, by :func:`sense_current` (the switch schedule and events are the drive's)."""
    model_drive, r_fault, l_fault = faulty_drive(drive, fault, shorted_fraction)
    return waveform(model_drive, supply, coil_temp, peak_time, duty, frequency, hold_time,
                    resistance_scale * r_fault, inductance_scale * l_fault, label="synthetic")


def sense_current(drive: Drive, w: Waveform, t_rel: np.ndarray, fault: str | None = None) -> np.ndarray:
    """Current in A that the board's sense resistor carries at times ``t_rel`` (s from the
    switch-on of ``w``; every ``t_rel`` inside the waveform): steps 1 and 2 of the chain."""
    i = np.interp(t_rel, w.time, w.current)
    if drive.board.sense.position != "coil":
        i = np.where(_switch_state(w, t_rel), i, 0.0)
    if fault == "open":
        i = np.zeros_like(i)
    return i


def current_codes(drive: Drive, current: np.ndarray, noise: np.ndarray | None = None) -> np.ndarray:
    """ADC codes (uint16) of sense currents in A, plus ``noise`` in codes (step 3)."""
    board = drive.board
    vpa, _ = adc_scaling(drive)
    volts = current * vpa
    codes = volts / board.adc.reference * 2**board.adc.bits
    if noise is not None:
        codes = codes + noise
    return np.clip(np.floor(codes), 0, 2**board.adc.bits - 1).astype(np.uint16)


def first_sample_at_or_after(time_s: float, sample_rate: float) -> int:
    """Index of the first sample taken at or after ``time_s`` (the bench link's event stamp)."""
    return int(math.ceil(time_s * sample_rate - 1e-9))


def actuation_events(w: Waveform, t_on: float, sample_rate: float,
                     fault: str | None = None) -> list[CaptureEvent]:
    """Events of one actuation switched on at ``t_on`` s: ``on``, ``peak_end``, ``off`` and
    the position switch's changes (none with an open coil), stamped with sample indices."""
    stamp = (lambda t: first_sample_at_or_after(t_on + t, sample_rate))
    out = [CaptureEvent(stamp(w.events[name]), int(kind))
           for name, kind in (("on", EventKind.ON), ("hold", EventKind.PEAK_END), ("off", EventKind.OFF))
           if name in w.events]
    if fault != "open":
        out += [CaptureEvent(stamp(t), int(EventKind.SWITCH), level) for t, level in _seated_changes(w)]
    return out


def operating_point(drive: Drive, supply: float | None, coil_temp: float | None) -> tuple[float, float]:
    """``(supply V, coil temperature degC)``: the given values, or the drive's nominal supply
    and its reference temperature clipped into the ambient range (as
    :func:`coildrive.design.corners.nominal_point`)."""
    nominal = nominal_point(drive)
    return (float(nominal.supply[0]) if supply is None else float(supply),
            float(nominal.ambient[0]) if coil_temp is None else float(coil_temp))


def synth_capture(drive: Drive, peak_time: float, duty: float, frequency: float, *,
                  supply: float | None = None, coil_temp: float | None = None,
                  hold_time: float = 0.02, actuations: int = 1, idle_time: float = 0.005,
                  resistance_scale: float = 1.0, inductance_scale: float = 1.0,
                  fault: str | None = None, shorted_fraction: float = 0.2,
                  noise_codes: float = 0.0, seed: int = 0, events: bool = True,
                  first_index: int = 0, on_phase: float | None = None,
                  waveform: WaveformFunction = actuation) -> Capture:
    """A capture of ``actuations`` actuations as the board's ADC would stream it.

    Parameters
    ----------
    drive : the drive, resolved against the board whose ADC and sense resistor are used.
    peak_time : s of full-on; duty : hold PWM duty 0..1; frequency : hold PWM Hz.
    supply : V (default: the drive's nominal supply).
    coil_temp : degC, the coil's temperature throughout (default: its reference
        temperature clipped into the ambient range, as :func:`coildrive.design.corners.nominal_point`).
    hold_time : s of hold per actuation; actuations : how many.
    idle_time : s of zero current before the first actuation, between actuations (from
        the end of one release to the next switch-on) and after the last.
    resistance_scale, inductance_scale : the real coil against the drive file
        (1.4 = 40 % more resistance than designed).
    fault : ``None`` or one of :data:`FAULTS`; shorted_fraction : of the turns, for
        ``shorted_turns``.
    noise_codes : Gaussian noise in ADC codes (one sigma), added before quantisation.
    seed : seeds the noise and the sub-sample phases; the same inputs give the same codes.
    events : include the event records (a board that sends no events: ``False``).
    first_index : device sample index of the first sample.
    on_phase : where each switch-on falls inside its sample interval, 0..1 (default:
        random, from the seed); actuation ``k`` switches on at
        ``(floor(t_k f_s) + on_phase) / f_s`` with ``t_k`` the end of the idle before it.
    waveform : the waveform function, with the signature of
        :func:`coildrive.model.waveform.actuation`.

    Returns
    -------
    Capture with metadata (sample rate, scaling, sense position, operating point and the
    settings used; the fault and scales in ``meta.extra``).
    """
    if on_phase is not None and not 0.0 <= on_phase < 1.0:
        raise ValueError(f"on_phase {on_phase} must be in [0, 1)")
    if actuations < 1:
        raise ValueError(f"actuations {actuations} must be >= 1")
    for name, value in (("hold_time", hold_time), ("idle_time", idle_time), ("noise_codes", noise_codes)):
        if not (math.isfinite(value) and value >= 0):
            raise ValueError(f"{name} {value} must be >= 0")
    for name, value in (("resistance_scale", resistance_scale), ("inductance_scale", inductance_scale)):
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"{name} {value} must be > 0")
    supply, coil_temp = operating_point(drive, supply, coil_temp)
    w = actuation_waveform(drive, supply, coil_temp, peak_time, duty, frequency, hold_time,
                           resistance_scale=resistance_scale, inductance_scale=inductance_scale,
                           fault=fault, shorted_fraction=shorted_fraction, waveform=waveform)
    board = drive.board
    fs = float(board.adc.sample_rate)
    _, apc = adc_scaling(drive)
    rng = np.random.default_rng(seed)
    length = float(w.events["zero"])

    # timeline in samples: idle, then each actuation at a random sub-sample phase
    on_times = []
    t = idle_time
    for _ in range(actuations):
        phase = rng.uniform(0.0, 1.0) if on_phase is None else float(on_phase)
        t_on = (math.floor(t * fs) + phase) / fs
        on_times.append(t_on)
        t = t_on + length + idle_time
    n = int(math.ceil(t * fs)) + 1
    sense = np.zeros(n)
    capture_events: list[CaptureEvent] = []
    seat = _seated_changes(w)

    for t_on in on_times:
        k0 = first_sample_at_or_after(t_on, fs)
        k1 = min(int(math.floor((t_on + length) * fs)), n - 1)
        k = np.arange(k0, k1 + 1)
        sense[k0:k1 + 1] = sense_current(drive, w, k / fs - t_on, fault)
        if events:
            capture_events += [CaptureEvent(first_index + e.index, e.kind, e.value)
                               for e in actuation_events(w, t_on, fs, fault)]
    codes = current_codes(drive, sense, rng.normal(0.0, noise_codes, n) if noise_codes > 0 else None)
    capture_events.sort(key=lambda e: e.index)
    extra = {"resistance_scale": resistance_scale, "inductance_scale": inductance_scale,
             "fault": fault, "noise_codes": noise_codes, "seed": seed}
    if fault == "shorted_turns":
        extra["shorted_fraction"] = shorted_fraction
    return Capture.from_codes(
        codes, first_index=first_index, events=capture_events, source="synthetic",
        sample_rate_hz=fs, adc_bits=board.adc.bits, amps_per_code=apc, zero_code=0,
        sense_position=board.sense.position, board=board.name, drive=drive.name,
        firmware_id="coildrive synthetic capture", has_position_switch=bool(seat),
        supply_v=supply, coil_temp_c=coil_temp, peak_time_s=float(peak_time),
        hold_duty=float(duty), hold_frequency_hz=float(frequency), link="synthetic", extra=extra)


def synth_design_capture(design, **kwargs) -> Capture:
    """:func:`synth_capture` with a :class:`~coildrive.design.Design`'s drive, and the peak
    time, duty and frequency its firmware runs at the capture's supply (the supply table's
    entry where it looks the duty up); keyword arguments as there."""
    from ..design import firmware_setting

    supply, temp = operating_point(design.drive, kwargs.get("supply"), kwargs.get("coil_temp"))
    duty, peak = firmware_setting(design, supply, temp)
    return synth_capture(design.drive, peak, duty, design.hold.frequency_hz, **kwargs)
