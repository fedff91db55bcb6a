"""A saturating coil (flux-linkage curve) under a full bridge's mixed decay: the exact
three-segment orbit (coildrive.model.flux_mixed), the design, simulate.

References:
* ngspice (batch transient), in tests/test_reference_ngspice_bridge.py
  (test_mixed_decay_orbit_matches_ngspice, the "curve" cases): the element-level bridge
  with the flux-controlled inductor of tests/test_flux_ngspice.py, driven with the mixed
  gate pattern and started on the model's orbit: the period's top, bottom and mean
  current and the energy the supply takes back per period, 1 %;
* scipy's ``solve_ivp`` (DOP853) on ``di/dt = (v - r i) / L_d(i)`` with ``L_d`` from
  scipy's ``PchipInterpolator`` through the same table (nothing of coildrive's flux
  model): one period from the orbit's start returns to it;
* the linear coil's closed-form mixed orbit (tests/test_reference_ngspice_bridge.py checks
  it against ngspice) for a straight-line curve.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import run_cli
from coildrive.model import flux
from coildrive.model.pwm import MixedDecay, mixed_steady_state, pwm_steady_state
from test_eddy_coil import check_synthetic
from test_flux_bridge import bridge_curve
from test_flux_ngspice import CURVE_I, _psi

V, R_ON, R_SLOW, R_FAST, V_FAST = 24.0, 26.17, 26.07, 26.1, 25.6
FREQ = 20e3
CURVE = flux.FluxCoil(flux.curve(tuple(CURVE_I), tuple(_psi(CURVE_I))), np.array(1.0))


def _ss(duty, fraction, coil=CURVE):
    return pwm_steady_state(duty, FREQ, V, R_ON, R_SLOW, 0.0, coil, MixedDecay(fraction, R_FAST, V_FAST))


def test_a_straight_curve_gives_the_linear_closed_form():
    line = flux.FluxCoil(flux.curve((0.0, 1.0, 2.0), (0.0, 0.069, 0.138)), np.array(1.0))
    duty = np.linspace(0.02, 1.0, 50)
    for fraction in (1e-4, 0.3, 0.7, 0.9999, 1.0):
        a, b = _ss(duty, fraction, line), mixed_steady_state(duty, FREQ, V, R_ON, R_SLOW, 0.069,
                                                              MixedDecay(fraction, R_FAST, V_FAST))
        for name in ("i_min", "i_max", "mean", "rms", "charge_fast", "square_fast", "charge_off"):
            np.testing.assert_allclose(getattr(a, name), getattr(b, name), rtol=1e-9, atol=1e-13,
                                       err_msg=f"{name} at fraction {fraction}")
        assert np.array_equal(a.dcm, b.dcm)


def test_one_period_from_the_orbit_returns_to_it_under_scipy():
    from scipy.integrate import solve_ivp
    from scipy.interpolate import PchipInterpolator

    ld = PchipInterpolator(np.array(CURVE_I), _psi(np.array(CURVE_I))).derivative()
    period = 1.0 / FREQ
    for duty, fraction in ((0.45, 0.3), (0.3, 0.05), (0.6, 0.8)):
        ss = _ss(duty, fraction)
        t_on = duty * period
        t_fast = fraction * (period - t_on)
        i = float(ss.i_min)
        assert not bool(ss.dcm) and i > 0.05, "precondition: continuous conduction"
        ends, charge = [], 0.0
        for t, v, r in ((t_on, V, R_ON), (t_fast, -V_FAST, R_FAST), (period - t_on - t_fast, 0.0, R_SLOW)):
            sol = solve_ivp(lambda _, y, v=v, r=r: [(v - r * y[0]) / ld(y[0]), y[0]], (0.0, t), [i, 0.0],
                            method="DOP853", rtol=1e-11, atol=1e-14)
            i, charge = float(sol.y[0, -1]), charge + float(sol.y[1, -1])
            ends.append(i)
        # scipy: the period's top, the fast part's end and the return to the bottom, 1e-7
        assert ends[0] == pytest.approx(float(ss.i_max), rel=1e-7)
        assert ends[2] == pytest.approx(float(ss.i_min), rel=1e-7)
        assert charge / period == pytest.approx(float(ss.mean), rel=1e-7)


def test_more_fast_decay_never_raises_the_mean():
    duty = np.linspace(0.05, 0.95, 19)
    means = np.array([_ss(duty, f).mean for f in np.linspace(0.0, 1.0, 11)])
    assert np.all(np.diff(means, axis=0) <= 1e-12), "common practice: fast decay lowers the mean"


def test_design_and_simulate_run_the_curve_s_mixed_hold(tmp_path):
    """design --json: the mixed hold and its energy back per period; simulate: the hold
    settles on the design's orbit (its last period's top and bottom, 0.5 %) with the
    fast parts' columns (all four open); a synthetic capture (the virtual device's
    samples) checks against its own design (plumbing: the device shares the model)."""
    path = bridge_curve(tmp_path)
    path.write_text(path.read_text().replace("[hold]\n", "[hold]\nfast_fraction = 0.3\n", 1))
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    b = doc["topology"]["bridge"]
    assert b["hold_decay"] == "mixed" and b["hold_fast_fraction"] == 0.3 and b["returned_per_hold_period_j"] > 0
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--hold-time", "20 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    duty = float(r.stderr.split("hold duty ")[1].split()[0])
    from coildrive.config import load_drive
    from coildrive.model.circuit import loop
    lp = loop(load_drive(path), 24.0, 20.0)
    ss = pwm_steady_state(duty, FREQ, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance, lp.mixed)
    t_off = float(w["time_s"][np.flatnonzero(w["switch_on"])[-1]])
    last = (w["time_s"] > t_off - 1.0 / FREQ) & (w["time_s"] <= t_off)
    assert float(w["current_a"][last].max()) == pytest.approx(float(ss.i_max), rel=0.005)
    assert float(w["current_a"][last].min()) == pytest.approx(float(ss.i_min), rel=0.005)
    open_all = last & (w["high_a_on"] + w["low_a_on"] + w["high_b_on"] + w["low_b_on"] == 0)
    assert open_all.any() and np.all(w["coil_voltage_v"][open_all & (w["current_a"] > 0)] < -24.0)
    check_synthetic(tmp_path, path)
