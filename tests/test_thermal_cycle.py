"""The coil over an on/off cycle: the first-order thermal model, its use in the design,
the command line and the file keys (``[duty]``, ``thermal.capacity`` / ``time_constant``).

Outside references, named beside each check:

* the periodic steady-state peak rise of a rectangular power pulse train on a
  first-order RC thermal network, ``P R (1 - e^(-t_on/tau)) / (1 - e^(-T/tau))`` -- a
  standard result of first-order systems, the basis of the transient thermal impedance
  curves for repetitive pulses in power-semiconductor datasheets (from memory);
* scipy's ``solve_ivp`` integrating ``C dT/dt = P(T) - (T - T_a) / R_th`` over many
  cycles, written here afresh (it calls nothing of coildrive's thermal model);
* hand-worked on-times to the limit (the arithmetic in the comments).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from typer.testing import CliRunner

from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.thermal_cycle import on_energies
from coildrive.errors import InputError
from coildrive.model.thermal_cycle import cycle_steady_state, orbit, time_to_rise
from conftest import EXAMPLES, run_cli

EXAMPLE = EXAMPLES / "filler-valve-cycle-24v.toml"
ALPHA = 0.00393  # annealed copper, IEC 60028
runner = CliRunner()


# --------------------------------------------------------------------------- references
def ivp_cycle(power, ambient, t_on, t_off, r_th, capacity, cycles):
    """Reference: the coil temperature over ``cycles`` on/off cycles from the ambient,
    integrated by scipy's solve_ivp (LSODA, rtol 1e-11) segment by segment; returns
    ``(hottest, coolest)`` degC of the last cycle (the end of its on-time and of its
    off-time). ``power(T)`` in W while on, 0 while off."""
    temp = ambient

    def seg(on, t0, duration):
        def rhs(t, y):
            p = float(power(y[0])) if on else 0.0
            return [(p - (y[0] - ambient) / r_th) / capacity]
        sol = solve_ivp(rhs, (0.0, duration), [t0], method="LSODA", rtol=1e-11, atol=1e-11)
        assert sol.success, sol.message
        return float(sol.y[0, -1])
    hot = cool = temp
    for _ in range(cycles):
        hot = seg(True, temp, t_on)
        cool = temp = seg(False, hot, t_off)
    return hot, cool


def handbook_peak_rise(p, r_th, tau, t_on, period):
    """Peak rise of a rectangular power pulse train on a first-order RC network, periodic
    steady state: P R (1 - e^(-t_on/tau)) / (1 - e^(-T/tau)) (standard first-order
    result; transient thermal impedance of repetitive pulses in power-semiconductor
    datasheets; from memory)."""
    return p * r_th * (1 - math.exp(-t_on / tau)) / (1 - math.exp(-period / tau))


# --------------------------------------------------------------------------- model
@pytest.mark.parametrize("p,r_th,cap,t_on,t_off", [
    (2.0, 20.0, 5.0, 30.0, 70.0),        # tau 100 s, cycle comparable to tau
    (8.0, 14.0, 30.0, 1.5, 3.5),         # tau 420 s, a fast cycle: the rise is the average's
    (0.5, 60.0, 0.2, 60.0, 600.0),       # tau 12 s, long pulses: near full rise and full cooling
])
def test_orbit_matches_the_handbook_pulse_train(p, r_th, cap, t_on, t_off):
    top, bottom = orbit(p, 0.0, t_on, t_off, r_th, cap)
    tau = r_th * cap
    want = handbook_peak_rise(p, r_th, tau, t_on, t_on + t_off)
    assert top == pytest.approx(want, rel=1e-12), "peak rise vs the pulse-train formula"
    # the coolest point is the peak after an off-time of plain cooling
    assert bottom == pytest.approx(want * math.exp(-t_off / tau), rel=1e-12)


def test_cycle_matches_solve_ivp_with_constant_power():
    # constant power: the chord is exact, the orbit is the handbook's
    amb, p, r_th, cap, t_on, t_off = 30.0, 3.0, 20.0, 4.0, 20.0, 40.0   # tau 80 s
    st = cycle_steady_state(np.array([amb]), lambda t: np.full_like(t, p), t_on, t_off, r_th, cap)
    hot, cool = ivp_cycle(lambda t: p, amb, t_on, t_off, r_th, cap, cycles=40)   # 30 tau
    assert st.hottest[0] == pytest.approx(hot, abs=1e-6), "scipy solve_ivp, 40 cycles"
    assert st.coolest[0] == pytest.approx(cool, abs=1e-6), "scipy solve_ivp, 40 cycles"


def test_cycle_matches_solve_ivp_for_a_constant_current_coil():
    # P = I^2 R(T), copper R(T) = R20 (1 + a (T - 20)) (IEC 60028): linear in T, so the
    # chord is exact and the orbit must match the integrator to its tolerance (the loss
    # rising with T stretches the time constant to 1 / lam = 413 s: 90 cycles are 16 of it)
    i, r20 = 0.6, 18.0
    amb, r_th, cap, t_on, t_off = 40.0, 25.0, 6.0, 45.0, 30.0         # tau 150 s

    def power(t):
        return i * i * r20 * (1 + ALPHA * (np.asarray(t) - 20.0))
    st = cycle_steady_state(np.array([amb]), power, t_on, t_off, r_th, cap)
    hot, cool = ivp_cycle(power, amb, t_on, t_off, r_th, cap, cycles=90)   # 16 effective tau
    assert st.hottest[0] == pytest.approx(hot, abs=1e-5), "scipy solve_ivp, 30 cycles"
    assert st.coolest[0] == pytest.approx(cool, abs=1e-5), "scipy solve_ivp, 30 cycles"


def test_cycle_bounds_solve_ivp_for_a_voltage_driven_coil():
    # a coil fed a fixed voltage: P = V^2 R(T) / (R(T) + R_x)^2, convex in T where the coil
    # is more than twice the rest of the loop -- the chord lies above it, so the model's
    # orbit is at or above the true one, and close: here the coil swings by about 30 K in
    # each cycle (t_on is half of tau), and the chord over that swing stays within 0.05 K
    # (0.1 % of the 46 K rise)
    v, r20, r_x = 12.0, 20.0, 1.5
    amb, r_th, cap, t_on, t_off = 25.0, 15.0, 3.0, 20.0, 25.0          # tau 45 s

    def power(t):
        r = r20 * (1 + ALPHA * (np.asarray(t) - 20.0))
        return v * v * r / (r + r_x) ** 2
    st = cycle_steady_state(np.array([amb]), power, t_on, t_off, r_th, cap)
    hot, cool = ivp_cycle(power, amb, t_on, t_off, r_th, cap, cycles=30)  # 30 tau
    assert hot <= st.hottest[0] + 1e-6, "the chord is on the safe side (scipy solve_ivp)"
    assert st.hottest[0] - hot < 0.05, f"within 0.05 K of scipy solve_ivp: {st.hottest[0]} vs {hot}"
    assert cool <= st.coolest[0] + 1e-6 and st.coolest[0] - cool < 0.05


def test_closed_form_cycle_temperature_of_a_constant_current_coil(cycled):
    # the tune's closed form (loss linear in T: no iteration) against the iterated orbit of
    # the same loss, and against scipy solve_ivp over 90 cycles
    drive = cycled.drive
    from coildrive.model.thermal import coil_r20
    from coildrive.model.thermal_cycle import closed_form_cycle_temperature
    rms, amb, rf = 0.5, np.array([45.0]), np.array([1.07])
    rho = float(coil_r20(drive, 1.07))

    def power(t):
        return rms * rms * rho * (1 + ALPHA * (np.asarray(t) - 20.0))
    th, cyc = drive.thermal, drive.duty
    closed = float(closed_form_cycle_temperature(drive, amb, rf, rms)[0])
    iterated = float(cycle_steady_state(amb, power, cyc.on_time, cyc.off_time, th.resistance,
                                        th.capacity).hottest[0])
    assert closed == pytest.approx(iterated, abs=1e-4)
    # periodic: from the coolest point (the hottest after an off-time of plain cooling,
    # e^(-t_off / tau)) one cycle integrated by scipy solve_ivp comes back to both
    cool = 45.0 + (closed - 45.0) * math.exp(-cyc.off_time / (th.resistance * th.capacity))
    hot, back = ivp_cycle_from(lambda t: float(power(t)), 45.0, cool, cyc.on_time, cyc.off_time,
                               th.resistance, th.capacity)
    assert hot == pytest.approx(closed, abs=1e-6), "scipy solve_ivp, one cycle from the coolest point"
    assert back == pytest.approx(cool, abs=1e-6), "scipy solve_ivp, one cycle from the coolest point"


def test_tune_sweeps_the_cycle():
    # a continuous hold would cook this coil (143 degC > 130): the tune must find holds
    # over the cycle, and its best one as the design evaluates it
    r = runner.invoke(app, ["tune", str(EXAMPLE), "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["recommendation"] is not None
    assert doc["recommendation"]["coil_temp_c"] <= 130.0


def test_on_time_to_the_limit_hand_worked():
    # P = 10 W, R = 10 K/W, C = 20 J/K: tau = 200 s, settles 100 K above ambient.
    # To 80 K from cold: t = tau ln(100 / (100 - 80)) = 200 ln 5 = 321.888 s (hand-worked)
    assert time_to_rise(0.0, 80.0, 10.0, 0.0, 10.0, 20.0) == pytest.approx(200 * math.log(5), rel=1e-12)
    assert time_to_rise(0.0, 80.0, 10.0, 0.0, 10.0, 20.0) == pytest.approx(321.888, abs=1e-3)
    # from a warm 40 K: 200 ln (60 / 20) = 219.722 s (hand-worked)
    assert time_to_rise(40.0, 80.0, 10.0, 0.0, 10.0, 20.0) == pytest.approx(219.722, abs=1e-3)
    # a limit above the settled rise is never reached; a start above it is at once
    assert math.isinf(time_to_rise(0.0, 105.0, 10.0, 0.0, 10.0, 20.0))
    assert time_to_rise(90.0, 80.0, 10.0, 0.0, 10.0, 20.0) == 0.0
    # heat rising with the temperature, P = 10 + 0.05 theta W: lam = (1/10 - 0.05) / 20 =
    # 1/400 s, settles at 10 / (20/400) = 200 K; to 80 K: 400 ln (200 / 120) = 204.330 s
    assert time_to_rise(0.0, 80.0, 10.0, 0.05, 10.0, 20.0) == pytest.approx(204.330, abs=1e-3)
    # the loss grows exactly as fast as the cooling (lam = 0): a straight climb,
    # C theta / P = 20 x 80 / 10 = 160 s
    assert time_to_rise(0.0, 80.0, 10.0, 0.1, 10.0, 20.0) == pytest.approx(160.0, rel=1e-9)


def test_on_time_to_the_limit_against_solve_ivp_voltage_driven():
    # the chord over start..limit against the true P(T) integrated to the limit (an event)
    v, r20, r_x = 24.0, 16.0, 1.0
    amb, r_th, cap, limit = 45.0, 22.0, 18.0, 130.0

    def power(t):
        r = r20 * (1 + ALPHA * (np.asarray(t) - 20.0))
        return v * v * r / (r + r_x) ** 2 * 0.2   # a hold at about a fifth of full power
    from coildrive.model.thermal_cycle import chord
    heat, slope = chord(power, np.array([amb]), np.array([limit]), np.array([amb]))
    t_model = float(time_to_rise(0.0, limit - amb, heat, slope, r_th, cap)[0])

    def rhs(t, y):
        return [(float(power(y[0])) - (y[0] - amb) / r_th) / cap]

    def hit(t, y):
        return y[0] - limit
    hit.terminal = True
    sol = solve_ivp(rhs, (0.0, 1e5), [amb], method="LSODA", rtol=1e-11, atol=1e-11, events=hit)
    t_ref = float(sol.t_events[0][0])   # scipy solve_ivp, event at the limit
    assert t_model <= t_ref * (1 + 1e-9), "the chord reaches the limit no later (safe side)"
    assert t_model == pytest.approx(t_ref, rel=0.03), f"{t_model} s vs scipy {t_ref} s"


# --------------------------------------------------------------------------- design
@pytest.fixture(scope="module")
def cycled():
    return design(load_drive(EXAMPLE))


def test_design_takes_the_cycle_hottest_coil(cycled):
    t = cycled.thermal_cycle
    c = t.cycle
    assert cycled.ok
    assert cycled.hold.coil_temp_c == pytest.approx(c["hottest_c"], abs=1e-3)
    assert c["hottest_c"] < t.continuous_hold_c, "a coil that rests cools below a continuous hold"
    assert t.continuous_hold_c > t.max_coil_temp_c, "precondition: it would cook on a continuous hold"
    hot = [k.coil_temp_c for k in cycled.corners if "(hot)" in k.label]
    assert max(hot) == pytest.approx(c["hottest_c"], abs=1e-3), "the envelope's hot coil"
    # the peak heat is the design's own peak length, full on
    assert c["peak_energy_j"] > 0 and c["hold_energy_j"] > c["peak_energy_j"]


def test_design_cycle_against_solve_ivp(cycled):
    # The design's orbit at its hottest heating point against scipy solve_ivp of the same
    # first-order model with the actuation's copper heat at each temperature
    # (coildrive's circuit physics as the input, the integration independent)
    drive = cycled.drive
    t = cycled.thermal_cycle
    energies, amb = hottest_point_energies(cycled)
    cyc, th = drive.duty, drive.thermal

    def power(temp):
        return float(sum(np.asarray(e)[0] for e in energies(np.array([temp])))) / cyc.on_time
    # start where the model says the orbit is and run 60 cycles (0.75 tau): an orbit that
    # is not periodic would drift; then check the end of the on-time and of the off-time
    hot, cool = ivp_cycles(power, amb, t.cycle["coolest_c"], drive, 60)
    assert hot == pytest.approx(t.cycle["hottest_c"], abs=2e-3), "scipy solve_ivp, 60 cycles"
    assert cool == pytest.approx(t.cycle["coolest_c"], abs=2e-3), "scipy solve_ivp, 60 cycles"


def hottest_point(d):
    """The heating point of the design ``d`` where its cycle is hottest: ``(point, duty,
    frequency Hz, ambient degC)``, ``point`` the loop's supply, tolerance factors (arrays
    of one) and other ``factors``."""
    from coildrive.design.regulation import solve_hold
    from coildrive.design.timer import solve_timer
    drive = d.drive
    b = drive.board
    timer = solve_timer(b.timer.clock, b.timer.bits, b.timer.prescaler_max, drive.hold.frequency,
                        drive.hold.frequency_tolerance, b.timer.prescalers)
    plan = solve_hold(drive, timer, d.pull_in.longest_peak_s)   # the longest real peak heats
    heat = plan.heat
    k = next(i for i in range(len(heat.supply)) if heat.label(i) == d.thermal_cycle.cycle["corner"])
    tk = heat.tol.take([k])
    point = dict(supply=heat.supply[k:k + 1], r_factor=tk.r_factor, l_factor=tk.l_factor,
                 factors={"diode_factor": tk.diode_factor, "fast_factor": tk.fast_factor,
                          "sense_factor": tk.sense_factor})
    return point, plan.heat_compare[k:k + 1] / timer.period_ticks, timer.frequency_hz, float(heat.ambient[k])


def hottest_point_energies(d):
    """``(on_energies function, ambient degC)`` at the heating point of the design ``d``
    where its cycle is hottest: the actuation's copper heat as the design computes it."""
    p, duty, f, amb = hottest_point(d)
    energies = on_energies(d.drive, p["supply"], p["r_factor"], p["l_factor"], duty, f, p["factors"],
                           d.pull_in.longest_peak_s)   # the longest real peak heats
    return energies, amb


def ivp_cycles(power, ambient, start, drive, cycles):
    """``cycles`` on/off cycles of ``drive``'s [duty] and [thermal] from ``start`` degC by
    scipy solve_ivp: ``(hottest, coolest)`` degC of the last one."""
    cyc, th = drive.duty, drive.thermal
    hot, cool = None, start
    for _ in range(cycles):
        hot, cool = ivp_cycle_from(power, ambient, cool, cyc.on_time, cyc.off_time, th.resistance,
                                   th.capacity)
    return hot, cool


def ivp_cycle_from(power, ambient, start, t_on, t_off, r_th, capacity):
    """One on/off cycle from ``start`` degC by scipy solve_ivp (LSODA): ``(hottest, coolest)``."""
    def seg(on, t0, duration):
        sol = solve_ivp(lambda t, y: [((power(y[0]) if on else 0.0) - (y[0] - ambient) / r_th) / capacity],
                        (0.0, duration), [t0], method="LSODA", rtol=1e-11, atol=1e-11)
        return float(sol.y[0, -1])
    hot = seg(True, start, t_on)
    return hot, seg(False, hot, t_off)


def test_monte_carlo_takes_the_cycle(cycled):
    # every sample lies inside the envelope: its hottest coil over the cycle is at most the
    # design's, so none is too hot (a continuous hold would put most above 130 degC)
    d = design(cycled.drive, samples=4000, seed=3)
    mc = d.monte_carlo
    assert mc["failures"]["coil_too_hot"] == 0
    assert mc["coil_temp_c"]["max"] <= d.thermal_cycle.cycle["hottest_c"] + 1e-6


def test_freewheel_average_power(cycled):
    t = cycled.thermal_cycle
    fw = t.freewheel
    end_of_hold = cycled.release.turn_offs[0]
    assert end_of_hold["event"] == "end of hold"
    assert fw["release_power_w"] == pytest.approx(end_of_hold["energy_j"] * 0.2, rel=1e-12)
    hold_share = (1.5 - cycled.pull_in.longest_peak_s) / 5.0   # the hold after the longest real peak
    assert fw["hold_power_w"] == pytest.approx(cycled.hold.freewheel_power_w * hold_share, rel=1e-12)
    assert fw["average_power_w"] == pytest.approx(fw["release_power_w"] + fw["hold_power_w"], rel=1e-12)


def test_time_constant_is_the_capacity_times_the_resistance(tmp_path, cycled):
    # 18 J/K x 22 K/W = 396 s: the same design either way
    p = tmp_path / "tau.toml"
    p.write_text(EXAMPLE.read_text().replace('capacity = "18 J/K"', 'time_constant = "396 s"')
                 .replace('board = "lab-m32-zener"', f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener.toml"}"'))
    other = design(load_drive(p)).thermal_cycle
    assert other.capacity_j_k == pytest.approx(18.0, rel=1e-12)
    assert other.cycle["hottest_c"] == pytest.approx(cycled.thermal_cycle.cycle["hottest_c"], rel=1e-9)


def test_capacity_alone_gives_the_cold_start_only(tmp_path):
    text = (EXAMPLES / "demo-valve.toml").read_text().replace(
        'max_coil_temp = "130 degC"   # class B winding',
        'max_coil_temp = "130 degC"\ncapacity = "40 J/K"')
    p = tmp_path / "v.toml"
    p.write_text(text.replace('board = "lab-m32-zener"',
                              f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener.toml"}"'))
    d = design(load_drive(p))
    t = d.thermal_cycle
    assert t.cycle is None and t.freewheel is None and t.warm_start is None
    # no cycle: the envelope keeps the continuous hold's coil
    assert d.hold.coil_temp_c == pytest.approx(t.continuous_hold_c, abs=1e-6)
    assert t.cold_start["time_to_limit_s"] is None, "the demo valve never reaches its limit"


def _variant(tmp_path, text):
    p = tmp_path / "variant.toml"
    p.write_text(text.replace('board = "lab-m32-zener"',
                              f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener.toml"}"'))
    return design(load_drive(p))


def test_duty_alone_keeps_the_continuous_hold(tmp_path, cycled):
    # no heat capacity: the coil is taken at a continuous hold's temperature (tau -> 0),
    # and the freewheel's average power is still given
    d = _variant(tmp_path, EXAMPLE.read_text().replace('capacity = "18 J/K"', ''))
    t = d.thermal_cycle
    assert t.cycle is None and t.cold_start is None and t.warm_start is None
    assert d.hold.coil_temp_c == pytest.approx(t.continuous_hold_c, abs=1e-6)
    assert d.hold.coil_temp_c > cycled.hold.coil_temp_c
    assert t.freewheel["release_power_w"] > 0


@pytest.mark.parametrize("rating,ok", [("5 W", True), ("3 W", False)])
def test_freewheel_average_power_against_the_rating(tmp_path, cycled, rating, ok):
    # the Zener averages the releases x 0.2/s + its hold power x (1.5 s - peak) / 5 s;
    # checked against rating x 50 % (power derating, common practice)
    fw = cycled.thermal_cycle.freewheel
    share = (1.5 - cycled.pull_in.longest_peak_s) / 5.0
    want = fw["release_elements_w"]["zener"] + cycled.hold.freewheel_elements_w["zener"] * share
    assert fw["elements_average_w"]["zener"] == pytest.approx(want, rel=1e-12)
    d = _variant(tmp_path, EXAMPLE.read_text() + f'\n[freewheel]\nzener_power_rating = "{rating}"\n')
    check = next(c for c in d.checks if c.name == "zener_average_power")
    assert check.ok is ok, check.detail
    assert (want <= 0.5 * float(rating.split()[0])) is ok


def test_armature_peak_heat_through_the_open_inductance(tmp_path):
    # with an [armature] the peak heats through the open inductance (it bounds the moving
    # armature's current from above): R int i^2 dt of the rise V/R (1 - e^(-t R / L_open)),
    # integrated here by scipy's quad at the hottest heating point
    import re

    from scipy.integrate import quad
    text = (EXAMPLES / "locker-latch-12v.toml").read_text()
    text = re.sub(r'board = "([^"]+)"', lambda m: f'board = "{EXAMPLES.parent / "boards" / m.group(1)}.toml"',
                  text, count=1)
    text = text.replace("[thermal]\n", '[thermal]\ncapacity = "5 J/K"\n', 1) + '\n[duty]\non_time = "2 s"\noff_time = "8 s"\n'
    p = tmp_path / "latch.toml"
    p.write_text(text)
    d = design(load_drive(p))
    c = d.thermal_cycle.cycle
    drive = d.drive
    from coildrive.model.circuit import loop
    m = re.match(r"([\d.]+) V, ([-\d.]+) degC, R([-+\d.]+)%, L([-+\d.]+)%", c["corner"])
    v, rf, lf = float(m.group(1)), 1 + float(m.group(3)) / 100, 1 + float(m.group(4)) / 100
    lp = loop(drive, np.array([v]), np.array([c["hottest_c"]]), np.array([rf]), np.array([lf]))
    l_open = drive.armature.inductance_open * lf
    r_on, r_c = float(lp.r_on[0]), float(lp.r_coil[0])
    want, _ = quad(lambda t: r_c * (v / r_on * (1 - math.exp(-t * r_on / l_open))) ** 2, 0.0,
                   d.pull_in.longest_peak_s, epsabs=1e-12)   # the longest real peak heats
    assert c["peak_energy_j"] == pytest.approx(want, rel=1e-4), "scipy quad of the open-inductance rise"


# --------------------------------------------------------------------------- command line
def test_cli_design_json_table_and_plot(tmp_path):
    png = tmp_path / "d.png"
    proc = run_cli("design", str(EXAMPLE), "--json", "--plot", str(png))
    assert proc.returncode == 0, proc.stderr
    doc = json.loads(proc.stdout)
    t = doc["thermal_cycle"]
    assert t["actuation_rate_hz"] == pytest.approx(0.2) and t["off_time_s"] == pytest.approx(3.5)
    assert t["cold_start"]["time_to_limit_s"] > t["warm_start"]["time_to_limit_s"] > 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    r = runner.invoke(app, ["design", str(EXAMPLE)], env={"COLUMNS": "250"})
    assert r.exit_code == 0, r.output
    for text in ("coil over the cycle", "freewheel average power", "on-time to 130 degC (cold start)",
                 "on-time to 130 degC (warm start)", "Held on continuously"):
        assert text in r.stdout, text


def test_files_without_the_keys_have_no_thermal_cycle():
    r = runner.invoke(app, ["design", str(EXAMPLES / "relay-12v.toml"), "--json"])
    assert "thermal_cycle" not in json.loads(r.stdout)


BAD = [
    ('capacity = "18 J/K"', 'capacity = "18 J/K"\ntime_constant = "396 s"',
     "thermal.time_constant: given together with thermal.capacity"),
    ('actuation_rate = "0.2 Hz"', 'actuation_rate = "0.2 Hz"\noff_time = "3.5 s"',
     "duty.actuation_rate: given together with duty.off_time"),
    ('on_time = "1.5 s"', 'on_time = "6 s"', "duty.on_time: 6 s is not shorter than the actuation period"),
    ('actuation_rate = "0.2 Hz"', '', "duty.off_time: missing, expected duty.off_time or duty.actuation_rate"),
    ('resistance = "22 K/W"', 'resistance = 0', "thermal.capacity: needs thermal.resistance above 0"),
    ('capacity = "18 J/K"', 'capacity = "18 J"', "thermal.capacity: '18 J' is an energy, expected a heat capacity in J/K"),
    ('capacity = "18 J/K"', 'capacity = "1 MJ/K"', "thermal.capacity: '1 MJ/K' is outside 0.001 J/K .. 100000 J/K"),
    ('actuation_rate = "0.2 Hz"', 'actuation_rate = "2 kHz"', "duty.actuation_rate: '2 kHz' is outside"),
    ('on_time = "1.5 s"', 'on_time = "1.5 s"\nspeed = 3', "duty.speed: unknown key"),
]


@pytest.mark.parametrize("old,new,message", BAD, ids=[b[2].split(":")[0] + str(i) for i, b in enumerate(BAD)])
def test_bad_input_one_line_exit_2(tmp_path, old, new, message):
    text = EXAMPLE.read_text()
    assert old in text
    p = tmp_path / "bad.toml"
    p.write_text(text.replace(old, new, 1).replace(
        'board = "lab-m32-zener"', f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener.toml"}"'))
    out = tmp_path / "out.h"
    r = runner.invoke(app, ["design", str(p), "--header", str(out)])
    assert r.exit_code == 2, r.output
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], r.stderr
    assert "Traceback" not in r.output and not out.exists()


def test_bad_input_real_subprocess(tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text(EXAMPLE.read_text().replace('capacity = "18 J/K"', 'capacity = "18 J/K"\ntime_constant = "6 min"')
                 .replace('board = "lab-m32-zener"', f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener.toml"}"'))
    proc = run_cli("design", str(p), "--json")
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1 and "thermal.capacity" in proc.stderr and "thermal.time_constant" in proc.stderr
    with pytest.raises(InputError):
        load_drive(p)
