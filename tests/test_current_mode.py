"""The current-mode hold model against the analytic switching times and an ODE solve.

References:

* the hysteretic switching times between two thresholds, from the RL step response
  solved for the time (charge ``t_on = tau_on ln((A - I_lo)/(A - I_hi))``, discharge
  ``t_off = tau_off ln((I_hi + B)/(I_lo + B))``; from memory, as in the usual
  treatments of hysteretic current control) -- written out here independently;
* ``scipy.integrate.solve_ivp`` (LSODA, rtol 1e-11) of the switched circuit
  ``L di/dt = V - R_on i`` (on) / ``-(R_off i + V_off)`` (off, diode blocks at zero)
  driven by a threshold state machine with events, run cycle after cycle until the
  period repeats; the integrator also carries ``int i dt`` and ``int i^2 dt``.

Tolerances: the solver is good to ~1e-9 relative; the checks use 1e-6.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from coildrive.model.current_mode import hysteretic_steady_state, off_time_steady_state

CHECK = 1e-6

# (V, R_on, R_off, V_off, L): a 24 V valve with a diode, a Zener and a clamp-like path
LOOPS = {
    "diode": (24.0, 22.3, 22.2, 0.9, 0.06),
    "zener": (24.0, 22.3, 22.2, 33.9, 0.06),
    "clamp-48V": (48.0, 30.0, 29.9, 27.0, 0.12),   # V_off = V_clamp - V_bus = 75 - 48
}


def _ivp_cycles(v, r_on, r_off, v_off, ind, *, lo=None, hi=None, peak=None, t_off=None,
                delay=0.0, cycles=40):
    """Simulate the controller from the lower threshold upward; returns the last cycle's
    (t_on, t_off, mean, rms, bottom, top)."""
    def on(t, y):
        i = y[0]
        return [(v - r_on * i) / ind, i, i * i]

    def off(t, y):
        i = y[0]
        d = -(r_off * i + v_off) / ind if i > 0 else 0.0
        return [d, i, i * i]

    opts = dict(method="LSODA", rtol=1e-11, atol=1e-15)
    y = np.array([lo if lo is not None else 0.0, 0.0, 0.0])
    history = []
    for _ in range(cycles):
        start = y.copy()
        # on until the upper (or peak) threshold, then the delay
        level = hi if hi is not None else peak

        def reach(t, y, level=level):
            return y[0] - level
        reach.terminal, reach.direction = True, 1
        s = solve_ivp(on, (0, 1.0), y, events=reach, **opts)
        t1 = s.t[-1]
        y = s.y[:, -1]
        if delay:
            s = solve_ivp(on, (0, delay), y, **opts)
            y = s.y[:, -1]
        t_on = t1 + delay
        top = y[0]
        # off until the lower threshold (+ delay), or for the fixed off time
        if t_off is None:
            def fall(t, y):
                return y[0] - lo
            fall.terminal, fall.direction = True, -1
            s = solve_ivp(off, (0, 1.0), y, events=fall, **opts)
            t2 = s.t[-1]
            y = s.y[:, -1]
            if delay:
                y = _off_for(off, y, delay, opts)
            off_len = t2 + delay
        else:
            y = _off_for(off, y, t_off, opts)
            off_len = t_off
        bottom = y[0]
        q, sq = y[1] - start[1], y[2] - start[2]
        period = t_on + off_len
        history.append((t_on, off_len, q / period, math.sqrt(sq / period), bottom, top))
        y = np.array([y[0], 0.0, 0.0])
    return history[-1], history[-2]


def _off_for(off, y, duration, opts):
    def zero(t, y):
        return y[0]
    zero.terminal, zero.direction = True, -1
    s = solve_ivp(off, (0, duration), y, events=zero, **opts)
    y = s.y[:, -1].copy()
    if s.status == 1:  # the diode blocks: the current stays at zero for the rest
        y[0] = 0.0
    return y


@pytest.mark.parametrize("name", list(LOOPS))
def test_hysteretic_times_are_the_rl_charge_and_discharge(name):
    v, r_on, r_off, v_off, ind = LOOPS[name]
    lo, hi = np.array([0.20, 0.30, 0.05]), np.array([0.22, 0.36, 0.25])
    ss = hysteretic_steady_state(lo, hi, v, r_on, r_off, v_off, ind)
    a, b = v / r_on, v_off / r_off
    t_on = ind / r_on * np.log((a - lo) / (a - hi))        # RL charge between thresholds
    t_off = ind / r_off * np.log((hi + b) / (lo + b))      # RL discharge between thresholds
    assert np.allclose(ss.t_on, t_on, rtol=1e-12), name
    assert np.allclose(ss.t_off, t_off, rtol=1e-12), name
    assert np.allclose(ss.frequency, 1 / (t_on + t_off), rtol=1e-12)
    assert np.allclose(ss.duty, t_on / (t_on + t_off), rtol=1e-12)
    assert np.all(ss.regulated) and np.allclose(ss.ripple, hi - lo, rtol=1e-12)
    # the mean of an exponential segment lies between its ends
    assert np.all((ss.mean > lo) & (ss.mean < hi))


@pytest.mark.parametrize("name", list(LOOPS))
@pytest.mark.parametrize("delay", [0.0, 3e-6])
def test_hysteretic_against_solve_ivp(name, delay):
    v, r_on, r_off, v_off, ind = LOOPS[name]
    lo, hi = 0.21, 0.23
    ss = hysteretic_steady_state(lo, hi, v, r_on, r_off, v_off, ind, delay)
    (t_on, t_off, mean, rms, bottom, top), prev = _ivp_cycles(v, r_on, r_off, v_off, ind, lo=lo,
                                                               hi=hi, delay=delay)
    assert prev[0] == pytest.approx(t_on, rel=1e-7), "the solve reached its periodic state"
    where = f"{name}, delay {delay:g} s"
    assert float(ss.t_on) == pytest.approx(t_on, rel=CHECK), where
    assert float(ss.t_off) == pytest.approx(t_off, rel=CHECK), where
    assert float(ss.mean) == pytest.approx(mean, rel=CHECK), where
    assert float(ss.rms) == pytest.approx(rms, rel=CHECK), where
    assert float(ss.i_min) == pytest.approx(bottom, rel=CHECK, abs=1e-12), where
    assert float(ss.i_max) == pytest.approx(top, rel=CHECK), where


@pytest.mark.parametrize("name", list(LOOPS))
@pytest.mark.parametrize("t_off, delay", [(15e-6, 0.0), (40e-6, 2e-6), (3e-3, 0.0)])
def test_off_time_against_solve_ivp(name, t_off, delay):
    v, r_on, r_off, v_off, ind = LOOPS[name]
    peak = 0.24
    ss = off_time_steady_state(peak, t_off, v, r_on, r_off, v_off, ind, delay)
    (t_on, t_off_ivp, mean, rms, bottom, top), _ = _ivp_cycles(v, r_on, r_off, v_off, ind,
                                                               peak=peak, t_off=t_off, delay=delay)
    where = f"{name}, off {t_off:g} s, delay {delay:g} s"
    assert float(ss.t_on) == pytest.approx(t_on, rel=CHECK), where
    assert float(ss.t_off) == t_off_ivp
    assert float(ss.mean) == pytest.approx(mean, rel=CHECK), where
    assert float(ss.rms) == pytest.approx(rms, rel=CHECK), where
    assert float(ss.i_min) == pytest.approx(bottom, rel=CHECK, abs=1e-12), where
    assert bool(ss.dcm) == (bottom == 0.0), where
    if t_off == 3e-3 and name != "diode":
        assert bool(ss.dcm) and float(ss.i_min) == 0.0, "a long fast decay lets the current die out"


def test_off_time_bottom_is_the_rl_decay_from_the_peak():
    v, r_on, r_off, v_off, ind = LOOPS["diode"]
    peak, t_off = np.array([0.2, 0.3]), 20e-6
    ss = off_time_steady_state(peak, t_off, v, r_on, r_off, v_off, ind)
    b = v_off / r_off
    bottom = (peak + b) * np.exp(-t_off * r_off / ind) - b   # RL step response, off
    assert np.allclose(ss.i_min, bottom, rtol=1e-12)
    a = v / r_on
    assert np.allclose(ss.t_on, ind / r_on * np.log((a - bottom) / (a - peak)), rtol=1e-12)


def test_unreachable_threshold_is_unregulated():
    v, r_on, r_off, v_off, ind = LOOPS["diode"]
    a = v / r_on
    ss = hysteretic_steady_state(a * 0.9, a * 1.01, v, r_on, r_off, v_off, ind)
    assert not bool(ss.regulated)
    assert float(ss.mean) == pytest.approx(a) and float(ss.frequency) == 0.0 and float(ss.duty) == 1.0
    ss = off_time_steady_state(a, 1e-5, v, r_on, r_off, v_off, ind)
    assert not bool(ss.regulated) and float(ss.mean) == pytest.approx(a)


def test_frequency_falls_as_the_band_widens():
    v, r_on, r_off, v_off, ind = LOOPS["zener"]
    hi = 0.22 + np.linspace(0.002, 0.05, 30)
    f = hysteretic_steady_state(0.22, hi, v, r_on, r_off, v_off, ind).frequency
    assert np.all(np.diff(f) < 0)
