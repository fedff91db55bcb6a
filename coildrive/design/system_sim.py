"""``simulate SYSTEM.toml``: every channel of a designed system at one operating point, as
the firmware runs them on the shared timer (:mod:`coildrive.model.shared_pwm`).

Each channel switches on at its start offset (its ``offset_ticks`` scheduler ticks after
the first channel's) for the peak its firmware picks at the supply; its hold then
follows the timer's output: on at every period start of the timer it is on (the shared
timer's, counting from 0 s, the first channel's switch-on), off at its own compare. The
rail's current is the sum of the switches' currents (a coil's current while its switch
conducts). Stiff bus: the source resistance's droop is not fed back into the coils.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..model.circuit import loop, split_decay
from ..model.shared_pwm import ChannelRun, channel_run
from .firmware import firmware_setting
from .result import SystemResult


@dataclass(frozen=True)
class SystemRun:
    """The simulated system: the time grid ``time`` (s), the rail's current ``rail`` (A),
    per channel (result order) its coil current ``current`` (A), switch state ``on`` (0/1),
    its :class:`~coildrive.model.shared_pwm.ChannelRun` and the timer period (s) and
    compare fraction its hold runs at."""

    names: list[str]
    time: np.ndarray
    rail: np.ndarray
    current: list[np.ndarray]
    on: list[np.ndarray]
    runs: list[ChannelRun]
    periods: list[float]
    duties: list[float]

    def to_csv(self) -> str:
        """``time_s``, ``current_a`` (the rail), ``<name>_current_a`` per channel, then
        ``<name>_on`` (the switch, 0/1) per channel."""
        head = ",".join(["time_s", "current_a", *(f"{n}_current_a" for n in self.names),
                         *(f"{n}_on" for n in self.names)])
        cols = np.column_stack([self.time, self.rail, *self.current])
        ons = np.column_stack(self.on)
        rows = ("{},{}".format(",".join(f"{x:.9g}" for x in r), ",".join(str(int(x)) for x in o))
                for r, o in zip(cols, ons))
        return head + "\n" + "\n".join(rows) + "\n"


def simulate_system(result: SystemResult, supply: float, coil_temp: float, hold_time: float,
                    points: int = 8, r_factor: float = 1.0, l_factor: float = 1.0) -> SystemRun:
    """Every channel of ``result`` at bus ``supply`` V, coils at ``coil_temp`` degC and
    the tolerance factors (module docstring); ``hold_time`` s of hold each, ``points``
    samples per PWM segment (peak and release 40x)."""
    from ..errors import InputError
    from .core import MAX_WAVEFORM_SAMPLES

    f_max = max(c.design.hold.frequency_hz for c in result.channels)
    samples = len(result.channels) * (2.0 * points * hold_time * f_max + 80.0 * points) * 2
    if not samples <= MAX_WAVEFORM_SAMPLES:
        raise InputError("--hold-time", "", f"{hold_time:g} s of hold on {len(result.channels)} channels "
                         f"at up to {f_max:.6g} Hz with {points} points a segment is about "
                         f"{samples:,.0f} samples, more than the {MAX_WAVEFORM_SAMPLES:,} one run may "
                         "have: shorten --hold-time or lower --points")
    for c in result.channels:
        if c.design.hold.mode == "current":
            raise InputError(c.design.drive.source, "hold.mode",
                             f"channel {c.name!r}: simulate SYSTEM.toml runs every hold on the shared "
                             "timer, and a current-mode hold switches on its own thresholds; simulate "
                             "its drive file alone (coildrive simulate DRIVE.toml)")
        for key, what, there in (("armature", "a moving armature", c.design.drive.armature is not None),
                                 ("coil.flux_current", "a flux-linkage curve", bool(c.design.drive.coil.flux_current)),
                                 ("coil.eddy_resistance", "an eddy-current term",
                                  bool(c.design.drive.coil.eddy_resistance))):
            if there:
                raise InputError(c.design.drive.source, key,
                                 f"channel {c.name!r}: simulate SYSTEM.toml runs linear coils on the shared "
                                 f"timer, and {what} is not simulated in a system yet; simulate its drive "
                                 "file alone (coildrive simulate DRIVE.toml)")
    runs, periods, duties = [], [], []
    for c in result.channels:
        d = c.design
        drv = d.drive
        duty, peak = firmware_setting(d, supply, coil_temp)
        lp = loop(drv, supply, coil_temp, r_factor, l_factor)
        rel = loop(drv, supply, coil_temp, r_factor, l_factor, path="release")
        slow = max(0.0, -drv.freewheel.bypass_lead) if split_decay(drv) else 0.0
        period = 1.0 / d.hold.frequency_hz
        runs.append(channel_run(c.offset_s, peak, duty, period, hold_time, float(lp.v_on),
                                float(lp.r_on), float(lp.r_off), float(lp.v_off), float(rel.r_off),
                                float(rel.v_off), float(lp.inductance), slow))
        periods.append(period)
        duties.append(duty)
    t = np.unique(np.concatenate([r.samples(points) for r in runs]))
    current = [r.current(t) for r in runs]
    on = [r.switch_on(t) for r in runs]
    rail = np.sum([i * s for i, s in zip(current, on)], axis=0)
    return SystemRun([c.name for c in result.channels], t, rail, current, on, runs, periods, duties)
