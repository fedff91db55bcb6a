"""The on/off cycle (``[duty]``, ``thermal.capacity``) with the holds that regulate the
current: current mode (``[hold] mode = "current"``) and the closed loop
(``regulation = "closed_loop"``). Their hold heats the coil with a regulated current,
``I_rms^2 R(T)``, linear in the temperature, so the cycle's chord model is exact.

Outside references, named beside each check:

* scipy's ``solve_ivp`` integrating ``C dT/dt = P(T) - (T - T_a) / R_th`` over many
  cycles, written here afresh (it calls nothing of coildrive's thermal model);
* the hysteretic hold's coil loss written afresh: the current ramps between the two
  thresholds, so ``I_rms^2 = I_mid^2 + band^2 / 12`` (the RMS of a triangle riding on
  its mean, from memory) through the copper law ``R(T) = R_20 (1 + 0.00393 (T - 20))``
  (IEC 60028);
* the closed loop's set-point: the loop holds the sampled current at the set-point as
  the channel reads it, so the hold's loss is ``I_set^2 R(T)`` within the ripple's share.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.corners import corner_grid
from coildrive.design.envelope import heating_grid, tolerances
from coildrive.design.hold_current import heat_points
from coildrive.design.loop_duty import reading_range, regulated_duty
from coildrive.design.thermal_cycle import on_energies
from conftest import EXAMPLES

EXAMPLE = EXAMPLES / "filler-valve-cycle-24v.toml"
BOARD = EXAMPLES.parent / "boards" / "lab-m32-zener.toml"
ALPHA = 0.00393  # annealed copper, IEC 60028


def _drive(tmp_path, hold_line):
    # the example without its compensated peak (a voltage-mode feature), with another hold
    text = (EXAMPLE.read_text().replace('board = "lab-m32-zener"', f'board = "{BOARD}"')
            .replace("compensate = true", "compensate = false")
            .replace("[hold]\n", f"[hold]\n{hold_line}\n"))
    p = tmp_path / "regulated.toml"
    p.write_text(text)
    return load_drive(p)


@pytest.fixture(scope="module")
def current(tmp_path_factory):
    return design(_drive(tmp_path_factory.mktemp("cm"), 'mode = "current"'))


@pytest.fixture(scope="module")
def closed(tmp_path_factory):
    return design(_drive(tmp_path_factory.mktemp("cl"), 'regulation = "closed_loop"'))


def ivp_orbit(power, ambient, start, t_on, t_off, r_th, capacity, cycles):
    """``cycles`` on/off cycles from ``start`` degC by scipy solve_ivp (LSODA, rtol 1e-11):
    ``(hottest, coolest)`` degC of the last one. ``power(T)`` W while on, 0 while off."""
    def seg(on, t0, duration):
        sol = solve_ivp(lambda t, y: [((power(y[0]) if on else 0.0) - (y[0] - ambient) / r_th) / capacity],
                        (0.0, duration), [t0], method="LSODA", rtol=1e-11, atol=1e-11)
        assert sol.success, sol.message
        return float(sol.y[0, -1])
    hot, cool = start, start
    for _ in range(cycles):
        hot = seg(True, cool, t_on)
        cool = seg(False, hot, t_off)
    return hot, cool


def _r_coil(drive, r_factor, temp):
    """The coil's resistance (ohm) at ``temp`` degC: IEC 60028 copper from 20 degC."""
    c = drive.coil
    r20 = c.resistance / (1.0 + ALPHA * (c.reference_temp - 20.0))
    return r_factor * r20 * (1.0 + ALPHA * (temp - 20.0))


def _cycle_of(d, regulation):
    """``(drive, thermal_cycle, its cycle)`` of ``d``, whose envelope takes the cycle's
    hottest coil -- not a continuous hold's, which would cook the coil."""
    drive, t = d.drive, d.thermal_cycle
    c = t.cycle
    assert d.hold.regulation == regulation and c is not None
    assert d.hold.coil_temp_c == pytest.approx(c["hottest_c"], abs=1e-9)
    assert c["hottest_c"] < t.continuous_hold_c and t.continuous_hold_c > drive.thermal.max_coil_temp
    return drive, t, c


def test_current_mode_cycle_against_solve_ivp(current):
    d = current
    drive, t, c = _cycle_of(d, "current")
    assert "the hottest over the on/off cycle" in d.hold.hottest_corner
    assert not any("with mode" in n for n in d.cautions)
    grid = corner_grid(drive)
    k = next(i for i in range(len(grid)) if grid.label(i) == c["corner"])
    cm = d.hold.current_mode
    assert cm.control == "hysteretic" and cm.sense_delay_s == 0.0
    lo, hi = cm.lower_a, cm.upper_a
    # the regulated hold's loss written afresh: triangle between the thresholds (from
    # memory) through IEC 60028 copper
    i2 = ((lo + hi) / 2) ** 2 + (hi - lo) ** 2 / 12
    cyc, th = drive.duty, drive.thermal
    t_pk = d.pull_in.peak_time_s
    t_hold = cyc.on_time - t_pk
    hot_r = _r_coil(drive, grid.r_factor[k], c["hottest_c"])
    assert c["hold_energy_j"] == pytest.approx(i2 * hot_r * t_hold, rel=2e-4), \
        "triangle RMS x IEC 60028 copper"
    # the peak and the release (about 1 % of the heat) from the design's circuit model
    pts = heat_points(drive, grid.supply[k:k + 1], grid.ambient[k:k + 1], grid.r_factor[k:k + 1],
                      grid.l_factor[k:k + 1], lo, hi, 0.0, 0.0, grid.label)
    energies = on_energies(drive, pts.supply, pts.r_factor, pts.l_factor, None, None, {}, t_pk,
                           pts.state)

    def power(temp):
        e_pk, _, e_rel = (float(np.asarray(e)[0]) for e in energies(np.array([temp])))
        return (e_pk + e_rel + i2 * _r_coil(drive, grid.r_factor[k], temp) * t_hold) / cyc.on_time
    amb = float(grid.ambient[k])
    hot, cool = ivp_orbit(power, amb, c["coolest_c"], cyc.on_time, cyc.off_time, th.resistance,
                          th.capacity, 60)
    assert hot == pytest.approx(c["hottest_c"], abs=5e-3), "scipy solve_ivp, 60 cycles"
    assert cool == pytest.approx(c["coolest_c"], abs=5e-3), "scipy solve_ivp, 60 cycles"


def test_closed_loop_cycle_against_solve_ivp(closed):
    d = closed
    drive, t, c = _cycle_of(d, "closed_loop")
    heat = heating_grid(drive, tolerances(drive))
    k = next(i for i in range(len(heat.supply)) if heat.label(i) == c["corner"])
    r = d.hold.closed_loop
    tk = heat.tol.take([k])
    gt = drive.board.sense.gain_tolerance
    # the coil heats under the most current the loop runs: one code above the set-point,
    # the channel reading low
    i_set = (r.setpoint_code + 1) * r.current_lsb_a / reading_range(tk.sense_factor, gt)[0]
    f = d.hold.frequency_hz
    floor = r.min_compare / d.timer.period_ticks
    switch_leg = drive.board.sense.position == "switch"

    def state(lp):
        return regulated_duty(drive, lp, i_set, f, switch_leg, floor)[2]
    factors = {"diode_factor": tk.diode_factor, "fast_factor": tk.fast_factor,
               "sense_factor": tk.sense_factor}
    cyc, th = drive.duty, drive.thermal
    t_pk = d.pull_in.peak_time_s
    energies = on_energies(drive, heat.supply[k:k + 1], tk.r_factor, tk.l_factor, None, None,
                           factors, t_pk, state)
    # the hold's loss is the set-point current's through IEC 60028 copper, within the
    # ripple's share (the sample is the mean of a near-triangle)
    hot_r = _r_coil(drive, tk.r_factor[0], c["hottest_c"])
    assert c["hold_energy_j"] == pytest.approx(float(i_set[0]) ** 2 * hot_r * (cyc.on_time - t_pk),
                                               rel=0.01), "set-point current x IEC 60028 copper"

    def power(temp):
        return float(sum(np.asarray(e)[0] for e in energies(np.array([temp])))) / cyc.on_time
    amb = float(heat.ambient[k])
    hot, cool = ivp_orbit(power, amb, c["coolest_c"], cyc.on_time, cyc.off_time, th.resistance,
                          th.capacity, 60)
    assert hot == pytest.approx(c["hottest_c"], abs=2e-3), "scipy solve_ivp, 60 cycles"
    assert cool == pytest.approx(c["coolest_c"], abs=2e-3), "scipy solve_ivp, 60 cycles"
    # the chord of a regulated current's loss is exact or above it: never below the reference
    assert c["hottest_c"] >= hot - 1e-4


def test_regulated_holds_report_the_cycle(current, closed):
    for d in (current, closed):
        t = d.thermal_cycle
        assert t.cold_start["time_to_limit_s"] > t.warm_start["time_to_limit_s"] > 0
        fw = t.freewheel
        end_of_hold = d.release.turn_offs[0]
        assert fw["release_power_w"] == pytest.approx(end_of_hold["energy_j"] * 0.2, rel=1e-12)
        names = {c.name for c in d.checks}
        assert "duty_on_time" in names
        assert any("Over its on/off cycle" in n for n in d.cautions)
        assert any("Held on continuously" in n for n in d.cautions)
        assert d.to_dict()["thermal_cycle"]["cycle"]["hottest_c"] == pytest.approx(t.cycle["hottest_c"])


@pytest.mark.parametrize("hold", ['mode = "current"', 'regulation = "closed_loop"'])
def test_cli_cycle_and_droop_together(tmp_path, hold):
    # as a user runs it: the cycle and a drooping bus with a regulated hold, one JSON
    # document with both sections (exit 0 or 1: the board's ratings may fail, never 2)
    import json

    from conftest import run_cli

    p = _drive(tmp_path, hold).source
    text = Path(p).read_text().replace('max = "28 V"', 'max = "28 V"\nsource_resistance = "0.4 ohm"\n'
                                  'capacitance = "220 uF"', 1)
    f = tmp_path / "both.toml"
    f.write_text(text)
    proc = run_cli("design", str(f), "--json")
    assert proc.returncode in (0, 1), proc.stderr
    doc = json.loads(proc.stdout)
    assert doc["thermal_cycle"]["cycle"]["hottest_c"] == pytest.approx(doc["hold"]["coil_temp_c"])
    assert doc["supply"]["lowest_bus_v"] < 20.0 and doc["supply"]["source_resistance_ohm"] == 0.4
    assert "supply_droop" in {c["name"] for c in doc["checks"]}
