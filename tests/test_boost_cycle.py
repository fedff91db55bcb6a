"""A boosted peak in an on/off cycle (``[supply] boost`` with ``[duty]`` and
``thermal.capacity``): the peak's heat in the coil's thermal cycle, and the boost
capacitor's recharge between actuations.

Outside references, named beside each check:

* scipy's ``solve_ivp`` (Radau) of the boosted peak's two loop equations written afresh
  (``L di/dt = v_C - R i``, ``C dv_C/dt = -i``) with a third state for the coil's copper
  heat ``R_coil i^2``, to the highest trip current seen one conversion (one PWM period of
  the hold, docs/firmware.md) late;
* scipy's ``solve_ivp`` (LSODA) of ``C dT/dt = P(T) - (T - T_a) / R_th`` over many cycles,
  written afresh: the hold's loss from the RL segments between the current-mode thresholds
  (their lengths by the logarithm of the RL step, ``int i^2`` by scipy's ``quad``) through
  IEC 60028 copper, for the rest of the on-time after the shortest peak; the peak's heat
  from the solve_ivp above;
* hand-worked: the recharge time ``E / P`` against the cycle's period.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp

from conftest import run_cli
from test_boost import _variant
from test_cycle_regulated import ALPHA, ivp_orbit

DUTY = ('max_coil_temp = "150 degC"', 'max_coil_temp = "150 degC"\ncapacity = "2 J/K"\n\n[duty]\n'
        'on_time = "4 ms"\nactuation_rate = "50 Hz"')
CURRENT = ("[hold]", '[hold]\nmode = "current"\nband = "0.1 A"\nmin_frequency = "2 kHz"')


def _drive(tmp_path, name: str, current: bool = True):
    from coildrive.config import load_drive

    path = _variant(tmp_path, name, *DUTY)
    if current:
        Path(path).write_text(Path(path).read_text().replace(*CURRENT, 1))
    return path, load_drive(path)


@pytest.fixture(scope="module")
def cycled(tmp_path_factory):
    from coildrive.design import design

    path, drive = _drive(tmp_path_factory.mktemp("boost-cycle"), "cycled")
    return path, design(drive)


def _peak_afresh(drive, supply_r: float, ind: float, r_coil: float, high: bool, t_max: float):
    """``(copper heat J, peak length s)`` of one boosted peak by solve_ivp: the boost at its
    highest or lowest (voltage and capacitance) through ``supply_r`` ohm (the whole loop)
    and ``ind`` H, until the highest trip current is seen one conversion late, or ``t_max``."""
    from coildrive.design.boost import threshold

    s = drive.supply
    sign = 1.0 if high else -1.0
    v0 = s.boost * (1 + sign * s.boost_tolerance)
    c = s.boost_capacitance * (1 + sign * s.boost_capacitance_tolerance)
    trip = threshold(drive)[2]

    def f(t, y):
        return [(y[1] - supply_r * y[0]) / ind, -y[0] / c, r_coil * y[0] ** 2]

    def hit(t, y):
        return y[0] - trip
    hit.terminal = True
    sol = solve_ivp(f, (0, t_max), [0.0, v0, 0.0], method="Radau", rtol=1e-10, atol=1e-13, events=hit)
    # the driver converts once a PWM period (docs/firmware.md); the lab board's 84 MHz timer
    # makes the example's hold frequency exactly (84 MHz / 50 kHz = 1680 counts)
    t_end = min(float(sol.t_events[0][0]) + 1.0 / drive.hold.frequency, t_max)
    sol = solve_ivp(f, (0, t_end), [0.0, v0, 0.0], method="Radau", rtol=1e-10, atol=1e-13)
    return float(sol.y[2, -1]), t_end


def test_boosted_peak_heat_and_cycle_against_solve_ivp(cycled):
    from coildrive.design.corners import corner_grid
    from coildrive.design.thermal_cycle import on_energies
    from coildrive.design.hold_current import heat_points

    _, d = cycled
    drive, t = d.drive, d.thermal_cycle
    c = t.cycle
    assert d.boost is not None and c is not None and d.hold.coil_temp_c == pytest.approx(c["hottest_c"])
    grid = corner_grid(drive)
    k = next(i for i in range(len(grid)) if grid.label(i) == c["corner"])
    rf, lf, supply, amb = (float(x[k]) for x in (grid.r_factor, grid.l_factor, grid.supply, grid.ambient))
    b, s = drive.board, drive.supply
    cm = d.hold.current_mode
    lo, hi = cm.lower_a, cm.upper_a
    t_pk = d.pull_in.peak_time_s          # the time-out

    def r_coil(temp):   # IEC 60028 copper from the coil's reference
        return rf * drive.coil.resistance * (1 + ALPHA * (temp - 20.0)) / (1 + ALPHA * (drive.coil.reference_temp - 20.0))

    def peak(temp):     # (the larger heat of the two boost sides, the shorter peak)
        rc = r_coil(temp)
        r = rc + b.sense.resistance + drive.switch.on_resistance + s.boost_resistance
        runs = [_peak_afresh(drive, r, drive.coil.inductance * lf, rc, high, t_pk) for high in (False, True)]
        return max(h for h, _ in runs), min(e for _, e in runs)

    # scipy solve_ivp: the peak's copper heat at the cycle's hottest point within 1e-6
    pts = heat_points(drive, grid.supply[k:k + 1], grid.ambient[k:k + 1], grid.r_factor[k:k + 1],
                      grid.l_factor[k:k + 1], lo, hi, 0.0, 0.0, grid.label)
    energies = on_energies(drive, pts.supply, pts.r_factor, pts.l_factor, None, None, {}, t_pk, pts.state)
    e_pk, t_short = peak(c["hottest_c"])
    assert c["peak_energy_j"] == pytest.approx(e_pk, rel=1e-6), "scipy solve_ivp (Radau), the boosted peak"
    def i2(temp):       # the hysteretic hold's mean square current (A^2), exact segments
        rc, ind = r_coil(temp), drive.coil.inductance * lf
        r_on = rc + b.sense.resistance + drive.switch.on_resistance
        r_off = rc + b.sense.resistance      # the sense resistor sits in the coil path
        a, v_d = supply / r_on, drive.freewheel.diode_drop
        t_up = ind / r_on * np.log((a - lo) / (a - hi))
        t_dn = ind / r_off * np.log((hi + v_d / r_off) / (lo + v_d / r_off))
        up = quad(lambda x: (a + (lo - a) * np.exp(-x * r_on / ind)) ** 2, 0, t_up, epsabs=1e-14)[0]
        dn = quad(lambda x: (-v_d / r_off + (hi + v_d / r_off) * np.exp(-x * r_off / ind)) ** 2, 0, t_dn,
                  epsabs=1e-14)[0]
        return (up + dn) / (t_up + t_dn)

    # the hold heats for the rest of the on-time after the shortest peak, not after the time-out
    on = drive.duty.on_time
    assert t_short < t_pk
    hot = c["hottest_c"]
    assert c["hold_energy_j"] == pytest.approx(i2(hot) * r_coil(hot) * (on - t_short), rel=1e-6), \
        "the RL segments between the thresholds (scipy quad) x IEC 60028 copper"
    # scipy solve_ivp (LSODA): the cycle's hottest and coolest coil, 60 cycles; the peak's
    # heat and length afresh at five temperatures, a quartic through them (smooth in T)
    temps = np.linspace(c["coolest_c"] - 20, c["hottest_c"] + 20, 5)
    runs = np.array([peak(x) for x in temps])
    fit_e, fit_t = (np.polyfit(temps, runs[:, j], 4) for j in (0, 1))
    # the release (a few % of the heat): the design's model, through the same quartic
    fit_rel = np.polyfit(temps, np.asarray(energies(temps)[2], float).ravel(), 4)

    def power(temp):
        held = on - np.polyval(fit_t, temp)
        return (np.polyval(fit_e, temp) + i2(temp) * r_coil(temp) * held + np.polyval(fit_rel, temp)) / on
    hot, cool = ivp_orbit(power, amb, c["coolest_c"], on, drive.duty.off_time, drive.thermal.resistance,
                          drive.thermal.capacity, 60)
    # (60 cycles are 1.2 s of a 30 s time constant: from the design's coolest point a 0.1 %
    # error in the power would drift about 1 mK, so the bound is 0.1 mK)
    assert hot == pytest.approx(c["hottest_c"], abs=1e-4), "scipy solve_ivp, 60 cycles"
    assert cool == pytest.approx(c["coolest_c"], abs=1e-4), "scipy solve_ivp, 60 cycles"


def test_boost_recharge_against_the_actuation_rate(tmp_path, cycled):
    """The recharge check passes at 50 actuations/s and fails when switch-on to switch-on is
    shorter than the longest peak + the recharge (hand-worked ``E / P``)."""
    import json

    _, d = cycled
    b = d.boost
    # hand-worked: the recharge time E / P, and the interval after the longest peak
    assert b.recharge_time_s == pytest.approx(b.energy_j / d.drive.supply.boost_power, rel=1e-12)
    assert b.min_interval_s == pytest.approx(b.time_to_threshold_s + b.recharge_time_s, rel=1e-12)
    check = {c.name: c for c in d.checks}["boost_recharge"]
    assert check.ok and "20 ms" in check.detail
    # a converter too weak for 50 actuations/s: E / P alone is longer than the 20 ms period
    power = 0.9 * b.energy_j / 20e-3
    path, _ = _drive(tmp_path, "weak", current=False)
    Path(path).write_text(Path(path).read_text().replace('boost_power = "5 W"', f'boost_power = "{power:.6g} W"'))
    out = run_cli("design", path, "--json")
    assert out.returncode == 1, out.stderr
    doc = json.loads(out.stdout)
    bad = {c["name"]: c for c in doc["checks"]}["boost_recharge"]
    assert not bad["ok"] and "boost_power" in bad["detail"], bad
    assert doc["boost"]["recharge_time_s"] > 20e-3
