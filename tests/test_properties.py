"""Property tests (hypothesis) of the model over physical ranges of coils and drivers.

The monotonicity properties follow from the RL step ``i = V/R (1 - e^(-t R/L))`` and the
freewheel decay ``t = L/R ln((I0 + V_off/R)/(I1 + V_off/R))`` (Hayt, Kemmerly & Durbin,
"Engineering Circuit Analysis", basic RL circuits, from memory): a higher supply reaches
a current sooner, a longer on-time leaves more current, a larger inductance decays more
slowly. The steady-state invariants are those of any periodic waveform (common
practice): its minimum <= mean <= maximum, and it touches zero exactly in
discontinuous conduction.

Ranges (invented, physical): supply 5..60 V, coil 1..200 ohm and 1 mH..1 H, PWM
1..50 kHz, freewheel voltage 0.3..60 V.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from coildrive.config import load_drive
from coildrive.design.evaluate import evaluate
from coildrive.model.pwm import duty_for_mean, pwm_steady_state
from coildrive.model.rl import decay_time, rise_time
from coildrive.resources import example

SETTINGS = settings(max_examples=150, deadline=None)

supply = st.floats(5.0, 60.0)
resistance = st.floats(1.0, 200.0)
inductance = st.floats(1e-3, 1.0)
frequency = st.floats(1e3, 50e3)
v_freewheel = st.floats(0.3, 60.0)
off_ratio = st.floats(0.5, 3.0)  # R_off / R_on (freewheel resistor, sense position)


@st.composite
def circuits(draw):
    """(v_on, r_on, r_off, v_off, inductance, frequency) anywhere in the physical ranges."""
    r_on = draw(resistance)
    return (draw(supply), r_on, r_on * draw(off_ratio), draw(v_freewheel), draw(inductance),
            draw(frequency))


@st.composite
def continuous_circuits(draw):
    """Long time constant (>= 20 periods) and a freewheel voltage <= 10 % of the supply:
    for duties >= 0.2 the current never reaches zero."""
    v, r_on, f = draw(supply), draw(resistance), draw(frequency)
    tau = draw(st.floats(20.0, 2000.0)) / f
    return v, r_on, r_on * draw(st.floats(0.5, 1.0)), v * draw(st.floats(0.01, 0.1)), tau * r_on, f


@st.composite
def discontinuous_circuits(draw):
    """Short time constant (<= 5 % of a period): for duties <= 0.5 the current reaches
    zero within ln(1 + 30) time constants of the off time."""
    v, r_on, f = draw(supply), draw(resistance), draw(frequency)
    tau = draw(st.floats(0.005, 0.05)) / f
    return v, r_on, r_on * draw(off_ratio), v * draw(st.floats(0.1, 3.0)), tau * r_on, f


def _ss(duty, c):
    v, r_on, r_off, v_off, l_h, f = c
    return pwm_steady_state(duty, f, v, r_on, r_off, v_off, l_h)


# --------------------------------------------------------------------------- monotonicity
@SETTINGS
@given(v1=supply, rise=st.floats(0.01, 1.0), r=resistance, l_h=inductance,
       frac=st.floats(0.05, 0.95))
def test_more_supply_pulls_in_sooner(v1, rise, r, l_h, frac):
    v2 = v1 * (1.0 + rise)
    i_pull = frac * v1 / r
    t1, t2 = float(rise_time(i_pull, 0.0, v1, r, l_h)), float(rise_time(i_pull, 0.0, v2, r, l_h))
    assert np.isfinite(t1) and t2 < t1, f"pull-in {t1:.6e} s at {v1} V, {t2:.6e} s at {v2} V"


@SETTINGS
@given(c=continuous_circuits(), d1=st.floats(0.2, 0.95), step=st.floats(1e-3, 0.3))
def test_more_duty_more_hold_current_continuous(c, d1, step):
    d2 = min(d1 + step, 1.0)
    s1, s2 = _ss(d1, c), _ss(d2, c)
    assert not s1.dcm and not s2.dcm, f"precondition: continuous conduction for {c}"
    assert s2.mean > s1.mean, f"mean {float(s1.mean):.9e} A at {d1}, {float(s2.mean):.9e} A at {d2}"


@SETTINGS
@given(c=discontinuous_circuits(), d1=st.floats(0.01, 0.45), step=st.floats(1e-3, 0.05))
def test_more_duty_more_hold_current_discontinuous(c, d1, step):
    d2 = d1 + step
    s1, s2 = _ss(d1, c), _ss(d2, c)
    assert s1.dcm and s2.dcm, f"precondition: discontinuous conduction for {c}"
    assert s2.mean > s1.mean, f"mean {float(s1.mean):.9e} A at {d1}, {float(s2.mean):.9e} A at {d2}"


@SETTINGS
@given(i0=st.floats(0.05, 5.0), drop=st.floats(0.0, 0.9), r=resistance, v_off=v_freewheel,
       l1=inductance, grow=st.floats(0.01, 1.0))
def test_more_inductance_releases_later(i0, drop, r, v_off, l1, grow):
    l2 = l1 * (1.0 + grow)
    t1 = float(decay_time(drop * i0, i0, r, v_off, l1))
    t2 = float(decay_time(drop * i0, i0, r, v_off, l2))
    assert t2 > t1 > 0, f"release {t1:.6e} s with {l1} H, {t2:.6e} s with {l2} H"


_DEMO = load_drive(example("demo-valve"))


@settings(max_examples=40, deadline=None)
@given(l1=st.floats(0.8, 1.2), grow=st.floats(0.01, 0.3), supply_v=st.floats(20.0, 28.0),
       ambient=st.floats(-10.0, 50.0))
def test_more_inductance_releases_later_whole_evaluation(l1, grow, supply_v, ambient):
    # Through evaluate(): a larger inductance also lowers the hold ripple (and so the
    # current the release starts from), yet the release still takes longer.
    l2 = l1 * (1.0 + grow)
    duty, f = 0.75, _DEMO.hold.frequency
    res = evaluate(_DEMO, supply_v, ambient, 1.0, np.array([l1, l2]), duty, f, 0.0)
    assert res.release_time[1] > res.release_time[0], (
        f"release {res.release_time[0]:.6e} s at L x{l1}, {res.release_time[1]:.6e} s at L x{l2}")


# --------------------------------------------------------------------------- invariants
@SETTINGS
@given(c=st.one_of(circuits(), continuous_circuits(), discontinuous_circuits()),
       duty=st.floats(0.01, 0.99))
def test_steady_state_invariants(c, duty):
    ss = _ss(duty, c)
    i_min, i_max, mean = float(ss.i_min), float(ss.i_max), float(ss.mean)
    assert i_min <= mean <= i_max, f"i_min {i_min:.9e} <= mean {mean:.9e} <= i_max {i_max:.9e}"
    assert float(ss.ripple) >= 0.0, f"ripple {float(ss.ripple):.3e} A"
    assert float(ss.rms) >= mean, f"rms {float(ss.rms):.9e} below mean {mean:.9e}"
    assert bool(ss.dcm) == (i_min == 0.0), f"dcm {bool(ss.dcm)} but i_min {i_min:.3e} A"
    assert 0.0 <= float(ss.conduction_off) <= (1.0 - duty) / c[5] * (1 + 1e-12), (
        f"off-time conduction {float(ss.conduction_off):.3e} s outside the off time")


@SETTINGS
@given(c=st.one_of(circuits(), continuous_circuits(), discontinuous_circuits()),
       frac=st.floats(0.01, 0.99))
def test_duty_for_mean_is_the_smallest(c, frac):
    v, r_on, r_off, v_off, l_h, f = c
    target = frac * v / r_on  # 100 % duty gives V / R_on
    duty = float(duty_for_mean(target, f, v, r_on, r_off, v_off, l_h))
    assert 1e-6 < duty <= 1.0, f"duty {duty} for {target} A"
    assert float(_ss(duty, c).mean) >= target, f"mean at duty {duty} below {target} A"
    below = float(_ss(duty - 1e-6, c).mean)
    assert below < target, f"duty {duty} - 1e-6 still gives {below:.12e} >= {target:.12e} A"


def test_duty_for_mean_unreachable_is_nan():
    # Above V / R_on no duty can hold the current.
    assert np.isnan(duty_for_mean(1.01 * 24 / 22, 25e3, 24.0, 22.0, 22.0, 0.8, 0.06)), (
        "a mean above V/R_on must give nan")


@pytest.mark.parametrize("duty", [0.0, 1.0])
def test_steady_state_at_the_duty_limits(duty):
    # 0 %: no current; 100 %: the DC current V / R_on (RL step, final value).
    ss = pwm_steady_state(duty, 25e3, 24.0, 22.0, 22.0, 0.8, 0.06)
    expected = 24.0 / 22.0 * duty
    assert float(ss.mean) == pytest.approx(expected, abs=1e-12), f"mean {float(ss.mean)} at {duty}"
