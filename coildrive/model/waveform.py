"""One actuation as a time series: on at t = 0, peak, PWM hold, off, decay to zero.

Built from the closed-form segments (no time stepping): every switch edge is a sample,
and each segment gets ``points`` samples in between, so the series resolves every PWM
edge exactly. The hold ends after the on-time of its last period, so the release starts
from the top of the ripple (the slowest release).
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass, field

import numpy as np

from ..config import Drive
from .circuit import loop
from .rl import decay_current, decay_time, rise_current


@dataclass(frozen=True)
class Waveform:
    """A simulated actuation. Arrays: s, A, 0/1, V, A.

    ``sense_current`` is what the current-sense ADC channel sees: the coil current with
    the resistor in the coil path, zero while the switch is off with it under the switch.
    ``events`` maps ``on``, ``hold``, ``off`` and ``zero`` to their times in s.
    """

    time: np.ndarray
    current: np.ndarray
    switch_on: np.ndarray
    switch_voltage: np.ndarray
    sense_current: np.ndarray
    events: dict[str, float] = field(default_factory=dict)
    label: str = ""

    def to_csv(self) -> str:
        """CSV text with header ``time_s,current_a,switch_on,switch_voltage_v,sense_current_a``."""
        buf = io.StringIO()
        buf.write("time_s,current_a,switch_on,switch_voltage_v,sense_current_a\n")
        data = np.column_stack([self.time, self.current, self.switch_on, self.switch_voltage,
                                self.sense_current])
        np.savetxt(buf, data, delimiter=",", fmt=["%.9e", "%.9e", "%d", "%.6e", "%.9e"])
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
    lp = loop(drive, supply, coil_temp, r_factor, l_factor)
    v, r_on, r_off, v_off, ind = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance))
    big = 40 * points
    ts, cs, ons = [], [], []

    # Peak: full on from zero.
    tp = np.linspace(0.0, peak_time, big + 1)
    ts.append(tp)
    cs.append(rise_current(tp, 0.0, v, r_on, ind))
    ons.append(np.ones_like(tp))
    i0 = float(cs[-1][-1])

    # Hold: per-period start currents by scalar recurrence, then vectorised sampling.
    period = 1.0 / frequency
    n = max(1, int(round(hold_time * frequency)))
    t_on, t_off = duty * period, (1.0 - duty) * period
    e_on, e_off = math.exp(-t_on * r_on / ind), math.exp(-t_off * r_off / ind)
    a, b = v / r_on, v_off / r_off
    starts = np.empty(n)
    i = i0
    for k in range(n):
        starts[k] = i
        top = a + (i - a) * e_on
        i = max((top + b) * e_off - b, 0.0) if k < n - 1 else top
    frac = np.linspace(0.0, 1.0, points + 1)
    t0 = peak_time + np.arange(n)[:, None] * period
    on_t = np.broadcast_to(frac[None, :] * t_on, (n, points + 1))
    on_i = rise_current(on_t, starts[:, None], v, r_on, ind)
    tops = on_i[:, -1]
    # The off segment's end is the next period's first sample.
    off_t = np.broadcast_to(frac[None, 1:-1] * t_off, (n, points - 1))
    off_i = decay_current(off_t, tops[:, None], r_off, v_off, ind)
    # Where the diode blocks (DCM), put a sample exactly at the zero crossing; in CCM the
    # extra sample goes mid-way through the last interval so every row has the same count.
    t_zero = decay_time(0.0, tops, r_off, v_off, ind)
    extra = np.where(t_zero < t_off, t_zero, t_off * (points - 0.5) / points)
    off_t = np.concatenate([off_t, extra[:, None]], axis=1)
    off_i = np.concatenate([off_i, decay_current(extra, tops, r_off, v_off, ind)[:, None]], axis=1)
    order = np.argsort(off_t, axis=1, kind="stable")
    off_t = np.take_along_axis(off_t, order, axis=1)
    off_i = np.take_along_axis(off_i, order, axis=1)
    period_t = np.concatenate([t0 + on_t, t0 + t_on + off_t], axis=1)
    period_i = np.concatenate([on_i, off_i], axis=1)
    period_on = np.concatenate([np.ones_like(on_t), np.zeros_like(off_t)], axis=1)
    # The last period ends at its on-edge: drop its off segment.
    keep = np.ones_like(period_t, dtype=bool)
    keep[-1, on_t.shape[1]:] = False
    ts.append(period_t[keep][1:])
    cs.append(period_i[keep][1:])
    ons.append(period_on[keep][1:])
    t_offedge = peak_time + (n - 1) * period + t_on
    i_off = float(tops[-1])

    # Release: decay to zero.
    tz = float(decay_time(0.0, i_off, r_off, v_off, ind))
    td = np.linspace(0.0, tz, big + 1)[1:]
    ts.append(t_offedge + td)
    cs.append(decay_current(td, i_off, r_off, v_off, ind))
    ons.append(np.zeros_like(td))

    time = np.concatenate(ts)
    current = np.concatenate(cs)
    on = np.concatenate(ons).astype(np.int8)
    fw_v = lp.switch_voltage(drive, current)
    r_sw = drive.switch.on_resistance
    off_blocked = float(supply)
    v_sw = np.where(on == 1, current * r_sw, np.where(current > 0, fw_v, off_blocked))
    sense = current if drive.board.sense.position == "coil" else current * on
    events = {"on": 0.0, "hold": peak_time, "off": t_offedge, "zero": t_offedge + tz}
    return Waveform(time, current, on, v_sw, sense, events, label)
