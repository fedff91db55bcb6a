"""A saturating coil (flux-linkage curve) over an on/off cycle ([duty], thermal.capacity).

Outside references, named beside each check:

* scipy's ``solve_ivp`` (DOP853) integrating the curve's own equation written here afresh,
  ``v = R i + dpsi/dt`` as ``di/dt = (v - R i) / L_d(i)`` with ``L_d`` the derivative of
  scipy's ``PchipInterpolator`` through the file's table (it calls nothing of
  coildrive's flux model): the peak, hold and release heat of one actuation;
* scipy's ``quad`` of ``W = int i dpsi = int_0^i0 i L_d(i) di``, the energy stored in
  the saturating coil, against the release's energy balance;
* scipy's ``solve_ivp`` (LSODA) of the first-order thermal model over many cycles, as
  tests/test_thermal_cycle.py does for the linear coil.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp
from scipy.interpolate import CubicSpline, PchipInterpolator
from typer.testing import CliRunner

from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.thermal_cycle import on_energies
from coildrive.model import flux
from coildrive.model.circuit import loop
from coildrive.model.pwm import pwm_steady_state
from conftest import EXAMPLES
from test_thermal_cycle import hottest_point_energies, ivp_cycles

runner = CliRunner()


def cycle_file(tmp_path):
    """The saturating valve example on a 1.5 s on / 3.5 s off cycle with a heat capacity."""
    text = (EXAMPLES / "saturating-valve-24v.toml").read_text()
    text = text.replace('max_coil_temp = "155 degC"', 'max_coil_temp = "155 degC"\ncapacity = "12 J/K"')
    text += '\n[duty]\non_time = "1.5 s"\nactuation_rate = "0.2 Hz"\n'
    path = tmp_path / "saturating-cycle.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def cycled(tmp_path_factory):
    drive = load_drive(cycle_file(tmp_path_factory.mktemp("cycle")))
    return drive, design(drive)


class Curve:
    """The file's table through scipy's PchipInterpolator, times the tolerance scale,
    with the straight end slope above the last point (the coil model's documented
    extension)."""

    def __init__(self, coil, scale):
        x, y = np.array(coil.flux_current), np.array(coil.flux_linkage) * scale
        self.p = PchipInterpolator(x, y)
        self.d = self.p.derivative()
        self.top, self.end = x[-1], float(self.d(x[-1]))

    def ld(self, i):
        return float(self.d(i)) if i <= self.top else self.end


def ivp_segment(curve, i0, v, r, r_coil, t=None, to_zero=False):
    """``(end current A, copper heat J)`` of one segment at constant ``v`` through ``r``:
    scipy solve_ivp (DOP853, rtol 1e-11), ``di/dt = (v - r i) / L_d(i)``, with the heat
    ``r_coil int i^2 dt`` as a second state; ``to_zero`` runs to the zero crossing."""
    def rhs(_, y):
        return [(v - r * y[0]) / curve.ld(max(y[0], 0.0)), r_coil * y[0] ** 2]

    def zero(_, y):
        return y[0]
    zero.terminal = True
    sol = solve_ivp(rhs, (0.0, 1.0 if to_zero else t), [i0, 0.0], method="DOP853",
                    rtol=1e-11, atol=1e-13, events=zero if to_zero else None)
    assert sol.success, sol.message
    return float(sol.y[0, -1]), float(sol.y[1, -1])


def test_actuation_heat_against_solve_ivp(cycled):
    # One actuation's copper heat (peak, hold, release) at a hot, low-supply,
    # low-inductance point against scipy solve_ivp of the curve's own equation.
    drive, _ = cycled
    supply, temp, rf, lf, duty, f, t_pk = 20.0, 90.0, 1.07, 0.85, 0.85, 25e3, 4e-3
    at = on_energies(drive, np.array([supply]), rf, lf, duty, f, {}, t_pk)
    e_pk, e_hold, e_rel = (float(np.asarray(e)[0]) for e in at(np.array([temp])))
    lp = loop(drive, np.array([supply]), np.array([temp]), rf, lf)
    v, r_on, r_off, v_off, r_coil = (float(np.asarray(x).ravel()[0]) for x in
                                     (lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.r_coil))
    curve = Curve(drive.coil, lf)
    _, ref_pk = ivp_segment(curve, 0.0, v, r_on, r_coil, t_pk)
    assert e_pk == pytest.approx(ref_pk, rel=1e-6), "peak heat vs scipy solve_ivp"
    # the hold: one period from the model's orbit comes back to it (scipy solve_ivp), and
    # its heat over the rest of the on-time is that period's times the periods
    ss = pwm_steady_state(duty, f, v, r_on, r_off, v_off, lp.inductance)
    i_min = float(np.asarray(ss.i_min).ravel()[0])
    assert i_min > 0.1, "precondition: continuous conduction"
    top, h_on = ivp_segment(curve, i_min, v, r_on, r_coil, duty / f)
    back, h_off = ivp_segment(curve, top, -v_off, r_off, r_coil, (1 - duty) / f)
    assert back == pytest.approx(i_min, rel=1e-6), "the hold orbit is periodic (scipy solve_ivp)"
    ref_hold = (h_on + h_off) * f * (drive.duty.on_time - t_pk)
    assert e_hold == pytest.approx(ref_hold, rel=1e-5), "hold heat vs scipy solve_ivp"
    # the release: from the top of the ripple to zero through the freewheel path
    _, ref_rel = ivp_segment(curve, top, -v_off, r_off, r_coil, to_zero=True)
    assert e_rel == pytest.approx(ref_rel, rel=1e-6), "release heat vs scipy solve_ivp"
    # and the energy stored in the curve at that current, int i dpsi (scipy quad), is
    # what the release path takes: v_off int i dt + r_off int i^2 dt
    w_ref = quad(lambda i: i * curve.ld(i), 0.0, top, limit=200, epsabs=1e-14)[0]
    coil = lp.inductance
    assert float(np.ravel(flux.energy(coil, top))[0]) == pytest.approx(w_ref, rel=1e-9), "W = int i dpsi (scipy quad)"
    q, s = (flux.integral(coil, top, 0.0, -v_off, r_off, p) for p in (1, 2))
    assert float(np.ravel(v_off * q + r_off * s)[0]) == pytest.approx(w_ref, rel=1e-7), "release energy balance"


def test_design_cycle_against_solve_ivp(cycled):
    # The design's periodic thermal orbit against scipy solve_ivp over 40 cycles of the
    # first-order model, heated by the actuation's copper heat through the curve.
    drive, d = cycled
    t = d.thermal_cycle
    assert d.hold.coil_temp_c == pytest.approx(t.cycle["hottest_c"], abs=1e-3)
    assert t.cycle["hottest_c"] < t.continuous_hold_c, "a coil that rests cools below a continuous hold"
    energies, amb = hottest_point_energies(d)
    cyc = drive.duty
    # the on-time's mean power on a dense grid of coil temperatures (one vectorised call:
    # each value runs the curve's orbit), between them scipy's cubic spline
    grid = np.linspace(t.cycle["coolest_c"] - 2.0, t.cycle["hottest_c"] + 2.0, 25)
    table = CubicSpline(grid, sum(np.asarray(e, float).ravel() for e in energies(grid)) / cyc.on_time)

    def power(temp):
        return float(table(temp))
    hot, cool = ivp_cycles(power, amb, t.cycle["coolest_c"], drive, 40)
    assert hot == pytest.approx(t.cycle["hottest_c"], abs=2e-3), "scipy solve_ivp, 40 cycles"
    assert cool == pytest.approx(t.cycle["coolest_c"], abs=2e-3), "scipy solve_ivp, 40 cycles"


def test_cli_design_json(tmp_path):
    res = runner.invoke(app, ["design", str(cycle_file(tmp_path)), "--json"])
    assert res.exit_code in (0, 1), res.output
    doc = json.loads(res.stdout)
    cyc = doc["thermal_cycle"]["cycle"]
    assert cyc["peak_energy_j"] > 0 and cyc["hold_energy_j"] > 0 and cyc["release_energy_j"] > 0
    t = doc["thermal_cycle"]
    assert t["continuous_hold_c"] < t["max_coil_temp_c"]
    assert t["cold_start"]["time_to_limit_s"] is None, "held on for good it never gets there"
