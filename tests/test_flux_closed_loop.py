"""A saturating coil (flux-linkage curve) with the closed-loop hold.

The loop's plant near the set-point is ``V_g / (R_eff + s L_d(I))``, the curve's
incremental inductance at the regulated mean (coildrive/design/loop_gains.py states the
linearisation). Outside references, named beside each check (none calls coildrive's
flux model):

* scipy's ``PchipInterpolator`` through the file's table (tests/test_flux_cycle.py's
  ``Curve``): each stated plant's inductance is its derivative at that corner's mean;
* scipy's ``solve_ivp`` of the averaged nonlinear equation
  ``L_d(i) di/dt = d (V_on - R_on i) - (1 - d) (V_off + R_off i)`` after a one-count
  duty step from the set-point: the linear plant's step response within 0.1 %
  of the deviation (the small-signal claim, for the PI's small steps);
* scipy.signal (``cont2discrete`` with a zero-order hold, a one-period delay, the
  driver's PI, ``dfreqresp``; tests/test_closed_loop.py's helpers): the crossover, phase
  and gain margins of every stated plant;
* scipy's ``solve_ivp`` of the switched circuit with the curve at the duty the loop
  settles at (nominal point, reading true): one period from the design's orbit comes
  back to it, the sample in the middle of the on-time is the set-point code's middle,
  and the period's mean is the design's.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.loop_duty import codes_per_amp
from coildrive.model.circuit import loop
from coildrive.model.pwm import pwm_steady_state
from conftest import EXAMPLES, run_cli
from test_closed_loop import _scipy_loop, _scipy_margins
from test_flux_cycle import Curve

SATURATING = (EXAMPLES / "saturating-valve-24v.toml").read_text()


@pytest.fixture(scope="module")
def cl(tmp_path_factory):
    path = tmp_path_factory.mktemp("cl") / "curve-closed-loop.toml"
    path.write_text(SATURATING.replace('frequency = "25 kHz"',
                                       'frequency = "25 kHz"\nregulation = "closed_loop"', 1))
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr + r.stdout[-2000:]
    drive = load_drive(path)
    assert drive.coil.flux_current, "precondition: the drive has the curve"
    return drive, design(drive), json.loads(r.stdout)


def _l_factor(label: str) -> float:
    return {"L-15%": 0.85, "L+15%": 1.15}.get(next((w for w in label.replace(",", " ").split()
                                                     if w.startswith("L")), ""), 1.0)


def test_plant_is_the_incremental_inductance_at_the_set_point(cl):
    drive, d, js = cl
    r = d.hold.closed_loop
    corners = {c.label: c for c in d.corners}
    small_signal = float(Curve(drive.coil, 1.0).ld(0.0))
    for p in r.plants:
        c = corners[p["corner"]]
        ld = Curve(drive.coil, _l_factor(p["corner"])).ld(c.hold_mean_current_a)
        assert p["inductance_h"] == pytest.approx(ld, rel=1e-9), p["role"] + " (scipy PCHIP derivative)"
        assert p["inductance_h"] < 0.9 * small_signal * _l_factor(p["corner"]), "saturated below L(0)"
    assert js["closed_loop"]["plants"][0]["inductance_h"] == pytest.approx(r.plants[0]["inductance_h"])


def test_small_duty_step_follows_the_linear_plant(cl):
    # the averaged nonlinear equation (scipy solve_ivp) after one compare count more,
    # from its own equilibrium at the designed corner's duty, against
    # V_g dd / R_eff (1 - exp(-t R_eff / L_d(I))) of the stated plant
    drive, d, _ = cl
    r = d.hold.closed_loop
    p = next(q for q in r.plants if q["role"] == "designed")
    c = next(c for c in d.corners if c.label == p["corner"])
    lp = loop(drive, c.supply_v, c.coil_temp_c, c.resistance_ohm / float(loop(drive, c.supply_v, c.coil_temp_c).r_coil),
              _l_factor(c.label))
    v_on, r_on, r_off, v_off = (float(np.ravel(x)[0]) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off))
    curve = Curve(drive.coil, _l_factor(c.label))
    duty, dd = c.hold_duty, 1.0 / d.timer.period_ticks

    def drive_v(i, u):
        return u * (v_on - r_on * i) - (1 - u) * (v_off + r_off * i)
    i0 = (duty * v_on - (1 - duty) * v_off) / (duty * r_on + (1 - duty) * r_off)   # averaged equilibrium
    tau = p["inductance_h"] / p["r_eff_ohm"]
    t = np.linspace(0.0, 3 * tau, 31)
    sol = solve_ivp(lambda _, y: [drive_v(y[0], duty + dd) / curve.ld(y[0])], (0, t[-1]), [i0],
                    t_eval=t, method="DOP853", rtol=1e-12, atol=1e-15)
    dev = sol.y[0] - i0
    vg = v_on + v_off - (r_on - r_off) * i0
    r_eff = duty * r_on + (1 - duty) * r_off
    lin = vg * dd / r_eff * (1 - np.exp(-t * r_eff / float(curve.ld(i0))))
    assert np.max(np.abs(dev - lin)) <= 1e-3 * np.max(np.abs(lin)), "scipy solve_ivp, one count"
    # and the stated plant is that of the set-point: L_d at the sample's mean, not L(0)
    assert float(curve.ld(i0)) == pytest.approx(p["inductance_h"], rel=0.02)


def test_margins_with_a_curve_match_scipy_signal(cl):
    drive, d, _ = cl
    r = d.hold.closed_loop
    cpa = codes_per_amp(drive)
    for p in r.plants:
        sys_d, _ = _scipy_loop(p, r, d.timer.frequency_hz, d.timer.period_ticks, cpa)
        fc, pm, gm = _scipy_margins(sys_d, d.timer.frequency_hz)
        assert fc == pytest.approx(p["crossover_hz"], rel=1e-3), p["role"] + " (scipy.signal)"
        assert pm == pytest.approx(p["phase_margin_deg"], abs=0.05), p["role"] + " (scipy.signal)"
        assert gm == pytest.approx(p["gain_margin_db"], abs=0.05), p["role"] + " (scipy.signal)"
    designed = next(p for p in r.plants if p["role"] == "designed")
    # the most loop gain V_g / L_d over the corners: the least inductance at the set-point
    assert designed["vg_v"] / designed["inductance_h"] >= max(p["vg_v"] / p["inductance_h"] for p in r.plants)
    assert designed["crossover_hz"] == pytest.approx(r.bandwidth_hz, rel=1e-3)
    assert r.phase_margin_deg >= 45.0 and r.gain_margin_db >= 6.0


def test_settled_duty_is_the_curves_orbit(cl):
    drive, d, js = cl
    r = d.hold.closed_loop
    nom = js["nominal"]
    f = d.timer.frequency_hz
    duty = nom["hold_duty"]
    lp = loop(drive, nom["supply_v"], nom["coil_temp_c"])
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    v_on, r_on, r_off, v_off = (float(np.ravel(x)[0]) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off))
    curve = Curve(drive.coil, 1.0)
    t, t_on = 1.0 / f, duty / f

    def seg(i0, v, r, length):
        s = solve_ivp(lambda _, y: [(v - r * y[0]) / curve.ld(y[0]), y[0]], (0, length), [i0, 0.0],
                      method="DOP853", rtol=1e-12, atol=1e-15)
        return s.y[0, -1], s.y[1, -1]
    mid, _ = seg(float(ss.i_min), v_on, r_on, 0.5 * t_on)
    top, q_on = seg(float(ss.i_min), v_on, r_on, t_on)
    back, q_off = seg(top, -v_off, r_off, t - t_on)
    assert back == pytest.approx(float(ss.i_min), rel=1e-7), "periodic (scipy solve_ivp)"
    assert mid == pytest.approx((r.setpoint_code + 0.5) * r.current_lsb_a, rel=1e-7), "sample (scipy solve_ivp)"
    assert (q_on + q_off) * f == pytest.approx(nom["hold_mean_current_a"], rel=1e-7), "mean (scipy solve_ivp)"


@pytest.mark.compiler
def test_firmware_in_the_loop_settles_on_the_curves_orbit(cl, tmp_path):
    # plumbing (the device shares the design's physics): the generated C driver, compiled
    # by the system gcc, runs its PI against the curve at the corner of most duty (hot
    # coil, lowest supply); the mean over the hold's last 3 ms is the design's figure
    # there (the curve's exact orbit at the settled duty) within 0.1 %
    from coildrive.codegen.driver import render_driver
    from coildrive.codegen.host_build import build_firmware
    from coildrive.model.circuit import copper_resistance
    from conftest import require_tool
    from test_firmware_closed_loop import hold_trace

    require_tool("gcc")
    drive, d, _ = cl
    for name, text in render_driver(d, "coil").items():
        (tmp_path / name).write_text(text)
    lib = build_firmware(tmp_path, d, cache=tmp_path / "cache")
    r = d.hold.closed_loop
    c = next(c for c in d.corners if c.label == r.max_duty_corner)
    coil = drive.coil
    tr = hold_trace(d, lib, 0.008, supply=c.supply_v, coil_temp=c.coil_temp_c,
                    resistance_scale=c.resistance_ohm / copper_resistance(coil.resistance, coil.reference_temp,
                                                                          c.coil_temp_c),
                    inductance_scale=_l_factor(c.label))
    mean = float(np.mean(tr[tr[:, 0] > tr[-1, 0] - 0.003, 1]))
    assert mean == pytest.approx(c.hold_mean_current_a, rel=1e-3), c.label
    assert abs(mean / r.setpoint_a - 1.0) <= 0.03, c.label
