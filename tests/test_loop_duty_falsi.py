"""The closed loop's duty search with an eddy term on a flux-linkage curve: the regula
falsi of :func:`coildrive.design.loop_duty.duty_for_sample` against the plain bisection
of the same sample (an internal cross-check of the root finder: the sample's physics is
checked against scipy's solve_ivp in tests/test_eddy_hold.py)."""

from __future__ import annotations

import numpy as np
import pytest

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


def test_closed_loop_design_settles_its_sample_against_solve_ivp(tmp_path):
    """The closed loop on the curve with the eddy term designs (in seconds: the
    set-point search gallops), and at one operating point (24 V, 40 degC) the settled
    duty's orbit is a fixed point of scipy's solve_ivp (DOP853, rtol 1e-11) of the
    switched circuit written here afresh in the magnetising current (Kirchhoff at the
    branch node: ``L_d(i_m) di_m/dt = R_e (i - i_m)``, ``i = (v + R_e i_m) / (r + R_e)``
    of the conducting loop, the freewheel diode blocking below zero terminal current),
    and the sample in the middle of the on-time matches the model's."""
    from scipy.integrate import solve_ivp

    from coildrive.design import design
    from coildrive.design.loop_duty import settled_duty
    from coildrive.model import eddy
    from test_flux_cycle import Curve

    text = (EXAMPLES / "saturating-valve-24v.toml").read_text().replace(
        'reference_temp = "20 degC"', 'reference_temp = "20 degC"\neddy_resistance = "400 ohm"'
    ).replace("[hold]\n", '[hold]\nregulation = "closed_loop"\n', 1)
    path = tmp_path / "loop.toml"
    path.write_text(text)
    d = design(load_drive(path))
    assert d.hold.regulation == "closed_loop" and d.eddy is not None
    duty = settled_duty(d, 24.0, 40.0)
    lp = loop(d.drive, 24.0, 40.0)
    e = lp.inductance
    f = d.hold.frequency_hz
    t_on, t_off = duty / f, (1.0 - duty) / f
    v, r_on, r_off, v_off, r_e = (float(x) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off, e.resistance))
    o = eddy.orbit(e, t_on, t_off, v, r_on, r_off, v_off)
    curve = Curve(d.drive.coil, float(e.magnetising.scale))

    def rhs(on):
        def fn(_, y):
            i = (v + r_e * y[0]) / (r_on + r_e) if on else max((r_e * y[0] - v_off) / (r_off + r_e), 0.0)
            return [r_e * (i - y[0]) / curve.ld(max(y[0], 0.0))]
        return fn

    def seg(on, y0, t):
        s = solve_ivp(rhs(on), (0.0, t), [y0], method="DOP853", rtol=1e-11, atol=1e-14)
        assert s.success, s.message
        return float(s.y[0, -1])

    a = float(o.i_min)
    half = seg(True, a, 0.5 * t_on)
    top = seg(True, half, 0.5 * t_on)
    back = seg(False, top, t_off)
    # the orbit returns to itself (scipy solve_ivp; the quadrature agrees within 1e-6)
    assert back == pytest.approx(a, rel=1e-6), "orbit's lowest magnetising current (solve_ivp)"
    assert top == pytest.approx(float(o.i_max), rel=1e-6), "orbit's highest (solve_ivp)"
    sample = (v + r_e * half) / (r_on + r_e)
    model, _ = loop_duty.sample_at(duty, f, lp, True)
    assert float(model) == pytest.approx(sample, rel=1e-6), "the loop's sample (solve_ivp)"
    r = d.hold.closed_loop
    # the loop settles its reading between the set-point's code and the next
    assert r.setpoint_code * r.current_lsb_a <= sample <= (r.setpoint_code + 1) * r.current_lsb_a


@pytest.mark.parametrize("answer", [3, 10, 11, 12, 17, 500, 4094])
def test_set_point_search_finds_the_linear_steps_code(answer):
    # the galloping search against stepping one code at a time, on a monotone "short"
    from coildrive.design.hold_closed_loop import _lowest_code

    calls = []

    def solve(c):
        calls.append(c)
        return c

    code, got = _lowest_code(3, 4094, solve, lambda c: c < answer)
    assert code == got == answer
    assert len(calls) <= 3 + 2 * 12
