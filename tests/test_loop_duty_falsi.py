"""The closed loop's duty search with an eddy term on a flux-linkage curve: the regula
falsi of :func:`coildrive.design.loop_duty.duty_for_sample` against the plain bisection
of the same sample (an internal cross-check of the root finder: the sample's physics is
checked against scipy's solve_ivp in tests/test_eddy_hold.py)."""

from __future__ import annotations

import numpy as np

from coildrive.config import load_drive
from coildrive.design import loop_duty
from coildrive.model.circuit import loop
from coildrive.model.eddy import EddyCoil
from conftest import EXAMPLES


def _eddy_curve_loop(tmp_path):
    text = (EXAMPLES / "saturating-valve-24v.toml").read_text().replace(
        'reference_temp = "20 degC"', 'reference_temp = "20 degC"\neddy_resistance = "400 ohm"')
    path = tmp_path / "valve.toml"
    path.write_text(text)
    drive = load_drive(path)
    # the supply and temperature corners, each tolerance end of R and the curve's scale
    lp = loop(drive, np.array([20.0, 24.0, 28.0, 20.0]), np.array([155.0, 60.0, -10.0, 20.0]),
              np.array([1.07, 1.0, 0.93, 1.0]), np.array([0.85, 1.0, 1.15, 1.0]))
    assert isinstance(lp.inductance, EddyCoil)
    return lp


def test_falsi_finds_the_bisection_duty(tmp_path):
    lp = _eddy_curve_loop(tmp_path)
    f = 25e3
    # a reachable sample at each point, one below the floor's sample, one past the top
    target = np.array([0.2, 0.25, 0.3, 50.0])
    shape = target.shape
    lo, hi = np.full(shape, 0.02), np.full(shape, loop_duty.MAX_DUTY)
    top, _ = loop_duty.sample_at(hi, f, lp, True)
    floor_sample, _ = loop_duty.sample_at(lo, f, lp, True)
    target[2] = 0.5 * floor_sample[2]
    fast = loop_duty.duty_for_sample(target, f, lp, True, 0.02, loop_duty.MAX_DUTY)
    slow = loop_duty._bisect(target, f, lp, True, lo.copy(), hi.copy(), top)
    assert np.isnan(fast[3]) and np.isnan(slow[3])
    assert fast[2] == 0.02 and abs(slow[2] - 0.02) < 1e-14   # the floor already exceeds it
    np.testing.assert_allclose(fast[:2], slow[:2], rtol=0, atol=1e-10)
    sample, _ = loop_duty.sample_at(fast, f, lp, True)
    np.testing.assert_allclose(sample[:2], target[:2], rtol=1e-9)


def test_coil_path_sample_too(tmp_path):
    lp = _eddy_curve_loop(tmp_path)
    f = 25e3
    target = np.array([0.18, 0.22, 0.22, 0.25])
    fast = loop_duty.duty_for_sample(target, f, lp, False, 0.0, loop_duty.MAX_DUTY)
    lo, hi = np.zeros(4), np.full(4, loop_duty.MAX_DUTY)
    top, _ = loop_duty.sample_at(hi, f, lp, False)
    slow = loop_duty._bisect(target, f, lp, False, lo, hi, top)
    np.testing.assert_allclose(fast, slow, rtol=0, atol=1e-10)
