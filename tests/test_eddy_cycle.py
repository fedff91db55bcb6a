"""The on/off cycle (``[duty]``, ``thermal.capacity``) with an eddy-current term.

Each actuation heats the coil with its copper and the core's eddy loss: the peak's, the
hold's and the release's (the flux's tail through ``R_e`` included). Checked against
scipy's ``solve_ivp`` on the circuit written afresh here (the magnetising current, the
eddy resistance across it, Kirchhoff's laws; the switch on, the freewheel conducting or
blocked) at the design's hottest heating point, and the coil over the cycle (``C dT/dt =
P(T) - (T - T_a) / R_th``) integrated by ``solve_ivp`` with that heat, as
tests/test_thermal_cycle.py does for the plain coil.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from conftest import EXAMPLES
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.thermal_cycle import on_energies
from coildrive.model.circuit import loop
from coildrive.model.pwm import pwm_steady_state
from test_eddy_coil import _example_drive
from test_thermal_cycle import hottest_point, ivp_cycles


def _segment(i0, duration, l_m, r_e, r_coil, on, v, r, t_eval=None):
    """scipy solve_ivp (Radau) of one switched segment from a magnetising current ``i0``:
    switch on (``v`` V through ``r`` ohm: ``v = r i + v_m``) or freewheeling (``-v = r i +
    v_m`` while the path conducts, ``i > 0``; else ``i = 0``), with ``i = i_m + v_m / R_e``
    and ``L_m di_m/dt = v_m``. States: ``i_m``, the copper's ``R_coil int i^2 dt`` and the
    eddy resistance's ``int v_m^2 / R_e dt``."""
    def terminal(i_m):
        if on:
            return (v + r_e * i_m) / (r + r_e)
        return max((r_e * i_m - v) / (r + r_e), 0.0)

    def rhs(t, y):
        i = terminal(y[0])
        v_m = r_e * (i - y[0])
        return [v_m / l_m, r_coil * i * i, v_m * v_m / r_e]
    sol = solve_ivp(rhs, (0.0, duration), [i0, 0.0, 0.0], method="Radau", rtol=1e-11,
                    atol=[1e-13, 1e-15, 1e-15], max_step=duration / 400)
    return sol.y[:, -1]


def _actuation_heat(drive, point, duty, f, temp, peak_time):
    """The actuation's heat at ``temp`` degC, ``(peak, hold, release)`` J, each from scipy
    (the hold: one period from the model's orbit, checked to come back, x its periods)."""
    lp = loop(drive, point["supply"], np.array([temp]), point["r_factor"], point["l_factor"],
              **point["factors"])
    v, r_on, r_off, v_off, r_coil = (float(np.ravel(x)[0]) for x in
                                     (lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.r_coil))
    l_m, r_e = float(np.ravel(lp.inductance.magnetising)[0]), float(np.ravel(lp.inductance.resistance)[0])
    t_on = drive.duty.on_time
    t_pk = min(peak_time, t_on)
    _, cu_pk, e_pk = _segment(0.0, t_pk, l_m, r_e, r_coil, True, v, r_on)
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    period = 1.0 / f
    d = float(np.ravel(duty)[0])
    i1, cu1, e1 = _segment(float(ss.i_min[0]), d * period, l_m, r_e, r_coil, True, v, r_on)
    i2, cu2, e2 = _segment(i1, (1 - d) * period, l_m, r_e, r_coil, False, v_off, r_off)
    assert i2 == pytest.approx(float(ss.i_min[0]), rel=1e-6), "scipy: the model's orbit is periodic"
    hold = (cu1 + cu2 + e1 + e2) / period * (t_on - t_pk)
    # the release from the top of the hold ripple until the flux is gone (50 tail time constants)
    _, cu_rel, e_rel = _segment(float(ss.i_max[0]), 50.0 * l_m / r_e + 50.0 * l_m / r_off, l_m, r_e,
                                r_coil, False, v_off, r_off)
    return (cu_pk + e_pk, hold, cu_rel + e_rel), (e_pk + (e1 + e2) / period * (t_on - t_pk) + e_rel)


@pytest.fixture(scope="module")
def eddy_cycled(tmp_path_factory):
    path = _example_drive(tmp_path_factory.mktemp("eddy-cycle"), 'eddy_time_constant = "0.1 ms"',
                          EXAMPLES / "filler-valve-cycle-24v.toml")
    return design(load_drive(path))


def test_actuation_heat_and_cycle_against_solve_ivp(eddy_cycled):
    d = eddy_cycled
    drive, c = d.drive, d.thermal_cycle.cycle
    point, duty, f, amb = hottest_point(d)
    peak_time = d.pull_in.longest_peak_s   # the longest real peak heats
    model = on_energies(drive, point["supply"], point["r_factor"], point["l_factor"], duty, f,
                        point["factors"], peak_time)
    hot = c["hottest_c"]
    ref, eddy_part = _actuation_heat(drive, point, duty, f, hot, peak_time)
    got = [float(np.ravel(e)[0]) for e in model(np.array([hot]))]
    print(f"eddy cycle at {c['corner']}, {hot:.4f} degC: peak {got[0]:.8e}/{ref[0]:.8e} J, hold "
          f"{got[1]:.8e}/{ref[1]:.8e} J, release {got[2]:.8e}/{ref[2]:.8e} J (eddy {eddy_part:.4e} J)")
    assert eddy_part > 0.1 * sum(ref), "precondition: the eddy loss is a real part of the heat"
    # scipy solve_ivp (Radau, rtol 1e-11) on the circuit: each energy to 1e-6
    for g, r in zip(got, ref):
        assert g == pytest.approx(r, rel=1e-6)
    assert (c["peak_energy_j"], c["hold_energy_j"], c["release_energy_j"]) == pytest.approx(got, rel=1e-9)

    # the coil over the cycle: scipy's heat at three temperatures spanning the orbit
    # (quadratic in T to far below 1e-6 over 2 K), integrated by solve_ivp (LSODA) from the
    # model's coolest point for 60 cycles, comes back to the model's hottest and coolest
    temps = np.array([c["coolest_c"] - 0.5, 0.5 * (c["coolest_c"] + hot), hot + 0.5])
    heat = [sum(_actuation_heat(drive, point, duty, f, t, peak_time)[0]) / drive.duty.on_time
            for t in temps]
    fit = np.polynomial.Polynomial.fit(temps, heat, 2)
    hot_ref, cool_ref = ivp_cycles(lambda t: float(fit(t)), amb, c["coolest_c"], drive, 60)
    print(f"cycle: hottest {hot:.5f}/{hot_ref:.5f} degC, coolest {c['coolest_c']:.5f}/{cool_ref:.5f} degC")
    assert hot_ref == pytest.approx(hot, abs=2e-3), "scipy solve_ivp, 60 cycles"
    assert cool_ref == pytest.approx(c["coolest_c"], abs=2e-3), "scipy solve_ivp, 60 cycles"


def test_the_eddy_loss_warms_the_cycle(eddy_cycled, tmp_path):
    """The same coil without the eddy term runs cooler over the same cycle; the design's
    hold power and coil temperature are the cycle's."""
    plain = design(load_drive(EXAMPLES / "filler-valve-cycle-24v.toml"))
    assert eddy_cycled.thermal_cycle.cycle["hottest_c"] > plain.thermal_cycle.cycle["hottest_c"] + 1.0
    assert eddy_cycled.hold.coil_temp_c == pytest.approx(eddy_cycled.thermal_cycle.cycle["hottest_c"], abs=1e-3)


def test_tune_sweeps_the_cycle_with_an_eddy_term(tmp_path):
    """The offline sweep heats the coil over the cycle with the eddy loss too: the printed
    [hold], pasted, designs to the printed timer (the compare within the one count the
    peak's heat may add, as tests/test_tune.py allows for any cycle)."""
    from coildrive.tune.sweep import TuneOptions, tune
    from test_tune import _paste_hold, printed_hold

    path = _example_drive(tmp_path, 'eddy_time_constant = "20 us"', EXAMPLES / "filler-valve-cycle-24v.toml")
    r = tune(load_drive(path), TuneOptions(levels=1, min_frequency=24e3, max_frequency=26e3, top=1))
    rec = r.recommendation
    assert rec is not None, r.explanation
    path.write_text(_paste_hold(path.read_text(), printed_hold(r)))
    d = design(load_drive(path))
    assert (d.timer.prescaler, d.timer.period_ticks) == (rec.prescaler, rec.period_ticks)
    assert 0 <= d.timer.compare_ticks - rec.compare_ticks <= 1
    assert d.eddy is not None and d.thermal_cycle.cycle is not None
