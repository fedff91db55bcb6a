"""The boosted peak (``[supply] boost``) against the outside world, and end to end.

The circuit (coildrive/model/boost.py): the boost capacitor ``C_b`` charged to ``V_b``, the
boost switch (with the capacitor's ESR, ``R_b``), the coil loop (sense resistor in the
coil path, coil ``R`` and ``L``, the low-side switch), the main supply behind its diode,
and the freewheel diode across the coil. References:

* ngspice (batch mode, ``ngspice -b``): that circuit as a netlist -- the capacitor with
  its initial charge (``IC=``, ``tran ... uic``), the two switches as ngspice's
  voltage-controlled switches (``S`` elements, ``SW`` model: ngspice manual, "Switches"),
  their body diodes, the main supply's diode and the freewheel diode as the constant-drop
  one-way device of the other references (:func:`ngspice_run.knee`). Checked within 1 %:
  the time to the threshold, the current at the turn-off, the capacitor's droop, the
  switch's voltage after the turn-off;
* scipy's ``solve_ivp`` (Radau) of the two loop equations, written afresh here, and
  ``quad`` of ``R i^2`` for the energy balance (the capacitor's energy out = the field's
  ``1/2 L i^2`` + the loop's copper: conservation of energy in a lumped circuit);
* hand-worked numbers: the recharge time ``1/2 C (V^2 - V_end^2) / P`` and the threshold
  code ``ceil(I R_sense G / LSB)``;
* hypothesis: more boost capacitance never lengthens the time to the threshold.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import EXAMPLES, run_cli
from ngspice_run import OPTIONS, knee, run

from coildrive.model import boost as boost_model

EXAMPLE = EXAMPLES / "fuel-valve-boost-12v.toml"
#: Invented element values (a low-resistance fast valve's slow corner): boost 45.6 V on 176 uF through
#: 0.1 ohm; sense 50 mohm in the coil path, hot coil 2.6 ohm and 2.75 mH, a 20 mohm switch;
#: main supply 9 V behind a 0.9 V diode; freewheel diode 0.9 V; threshold 4.4 A.
V_B, C_B, R_B = 45.6, 176e-6, 0.1
R_SENSE, R_COIL, L_COIL, R_SW = 0.05, 2.6, 2.75e-3, 0.02
V_MAIN, V_D, I_TH = 9.0, 0.9, 4.4
R_ON = R_SENSE + R_COIL + R_SW          # the switch-on loop; the boost adds R_B
R_ROFF = 1e9                             # ohm, the switches' ROFF


def _b(c=C_B, v=V_B):
    return boost_model.boost(v, c, R_ON + R_B, L_COIL)


def boost_netlist(title: str, coil: list[str], t_off: float, t_th: float, step: float, tend: float,
                  measures: list[str]) -> str:
    """The ngspice deck of the boosted peak (voltage-controlled switches with body-diode
    knees, ngspice manual ch. "Switches"): boost capacitor, boost switch, main supply
    behind its diode, sense and coil resistance, the coil's lines ``coil`` from node n3 to
    the drain, the low-side switch opening at ``t_off`` s, the freewheel diode; measures
    the threshold time, the current before the turn-off and the capacitor at ``t_th``,
    then ``measures``."""
    return "\n".join([
        title,
        f"CB boost 0 {C_B!r} IC={V_B!r}",
        "SB boost top gb 0 SWB", knee("BDB", "top", "boost", V_D), "VGB gb 0 DC 1",
        f"VMAIN main 0 DC {V_MAIN!r}", knee("BDM", "main", "top", V_D),
        "VM top n1 DC 0", f"RSENSE n1 n2 {R_SENSE!r}", f"RCOIL n2 n3 {R_COIL!r}",
        *coil,
        "S1 drain 0 g1 0 SW1", knee("BD1", "0", "drain", V_D),
        f"VG1 g1 0 PULSE(1 0 {t_off - 0.5e-9!r} 1e-9 1e-9 1 2)",
        knee("BFW", "drain", "top", V_D),
        f".model SWB SW(VT=0.5 VH=0 RON={R_B!r} ROFF={R_ROFF!r})",
        f".model SW1 SW(VT=0.5 VH=0 RON={R_SW!r} ROFF={R_ROFF!r})",
        OPTIONS, ".control", f"tran {step!r} {tend!r} 0 {step!r} uic",
        f"meas tran tth WHEN i(VM)={I_TH!r} RISE=1",
        f"meas tran ioff FIND i(VM) AT={t_off - 2e-9!r}",
        f"meas tran vcth FIND v(boost) AT={t_th!r}",
        *measures,
        "quit 0", ".endc", ".end"]) + "\n"


def test_boosted_peak_against_ngspice(tmp_path):
    b = _b()
    t_th = float(boost_model.threshold_time(I_TH, b))
    t_off = t_th * 1.05                  # the low-side switch opens a little after the threshold
    i_off, v_off = (float(x) for x in boost_model.state(t_off, b))
    step = t_th / 5000
    tend = t_off + 0.3 * t_th
    text = boost_netlist("* boosted peak: boost capacitor, boost switch, coil, low-side switch, freewheel diode",
                         [f"LCOIL n3 drain {L_COIL!r} IC=0"], t_off, t_th, step, tend,
                         [f"meas tran vsw MAX v(drain) from={t_off + 5e-9!r} to={t_off + 20 * step!r}"])
    res = run(tmp_path, "boost", text)
    assert_peak(res, b, t_th, step, i_off)
    # ngspice: the switch's voltage after the turn-off, the boost at its end + the freewheel
    # diode (the main supply's diode stays off: the boost is above it), within 1 %
    assert res["vsw"] == pytest.approx(v_off + V_D, rel=0.01), (res["vsw"], v_off + V_D)


def assert_peak(res: dict, b, t_th: float, step: float, i_off: float) -> None:
    """The boosted peak's ngspice ``meas`` results (``tth``, ``ioff``, ``vcth``) against the
    closed form of ``b`` (or a saturating coil's run, :mod:`coildrive.model.flux_boost`):
    the time to the threshold ``t_th`` s, the current ``i_off`` A at the turn-off and the
    capacitor's droop."""
    # ngspice transient: the time to the threshold within 1 % plus one step
    assert abs(res["tth"] - t_th) <= 0.01 * t_th + step, (res["tth"], t_th)
    # ngspice: the current at the turn-off within 1 %
    assert res["ioff"] == pytest.approx(i_off, rel=0.01), (res["ioff"], i_off)
    # ngspice: the capacitor's droop by the threshold within 1 %
    v_b = float(b.v_b)
    droop = v_b - float(boost_model.of(b).state(t_th, b)[1])
    assert v_b - res["vcth"] == pytest.approx(droop, rel=0.01), (v_b - res["vcth"], droop)


@pytest.mark.parametrize("damping", ["under", "critical", "over"])
def test_every_damping_against_scipy(damping):
    from scipy.integrate import solve_ivp

    r, ell = R_ON + R_B, L_COIL
    c = {"under": C_B, "critical": 4 * ell / r**2, "over": 10 * 4 * ell / r**2}[damping]
    b = _b(c=c)
    i_th = 0.8 * float(boost_model.highest_current(b))
    t_th = float(boost_model.threshold_time(i_th, b))

    def hit(t, y):
        return y[0] - i_th
    hit.terminal = True
    sol = solve_ivp(lambda t, y: [(y[1] - r * y[0]) / ell, -y[0] / c], (0, 1.0), [0.0, V_B],
                    method="Radau", rtol=1e-10, atol=1e-12, events=hit)
    # scipy solve_ivp (Radau): the time to the threshold within 1e-6, in every regime
    assert sol.t_events[0][0] == pytest.approx(t_th, rel=1e-6), damping
    assert sol.y_events[0][0][1] == pytest.approx(float(boost_model.state(t_th, b)[1]), rel=1e-6)


def test_rise_and_energy_balance_against_scipy():
    from scipy.integrate import quad, solve_ivp

    b = _b()
    r, ell = R_ON + R_B, L_COIL
    t_th = float(boost_model.threshold_time(I_TH, b))

    def f(t, y):              # y = (i, v_C): L di/dt = v_C - R i, C dv_C/dt = -i
        return [(y[1] - r * y[0]) / ell, -y[0] / C_B]

    def hit(t, y):
        return y[0] - I_TH
    hit.terminal = True
    sol = solve_ivp(f, (0, 1e-2), [0.0, V_B], method="Radau", rtol=1e-10, atol=1e-12, events=hit)
    # scipy solve_ivp (Radau): the time to the threshold within 1e-6
    assert sol.t_events[0][0] == pytest.approx(t_th, rel=1e-6)
    # energy balance: the capacitor's energy out = 1/2 L i^2 + int R i^2 dt (scipy quad)
    out = float(boost_model.energy_drawn(t_th, b))
    copper, _ = quad(lambda t: r * float(boost_model.state(t, b)[0]) ** 2, 0.0, t_th, epsabs=1e-12)
    assert out == pytest.approx(0.5 * ell * I_TH**2 + copper, rel=1e-6)
    # an ideal source: V_b int i dt, the same balance
    ideal = boost_model.boost(V_B, 0.0, r, ell)
    t_i = float(boost_model.threshold_time(I_TH, ideal))
    copper, _ = quad(lambda t: r * float(boost_model.state(t, ideal)[0]) ** 2, 0.0, t_i, epsabs=1e-12)
    assert float(boost_model.energy_drawn(t_i, ideal)) == pytest.approx(0.5 * ell * I_TH**2 + copper, rel=1e-6)
    # a threshold above the capacitor's first current maximum is never reached
    top = float(boost_model.highest_current(b))
    assert math.isinf(float(boost_model.threshold_time(1.01 * top, b)))
    assert float(boost_model.threshold_time(0.99 * top, b)) < float(boost_model.peak_time(b))


def test_recharge_hand_worked():
    # hand-worked: 220 uF from 45 V back to 48 V at 10 W: 1/2 x 220e-6 x (48^2 - 45^2)
    # = 1/2 x 220e-6 x 279 = 30.69 mJ; / 10 W = 3.069 ms
    e = 0.5 * 220e-6 * (48.0**2 - 45.0**2)
    assert e == pytest.approx(30.69e-3, rel=1e-12)
    assert float(boost_model.recharge_time(e, 10.0)) == pytest.approx(3.069e-3, rel=1e-12)
    # the recharge trace reaches 48 V again after exactly that time, constant power
    b = boost_model.boost(48.0, 220e-6, 1.0, 1e-3)
    t_end = float(boost_model.threshold_time(2.0, b))
    v_end = float(boost_model.state(t_end, b)[1])
    t_back = 0.5 * 220e-6 * (48.0**2 - v_end**2) / 10.0
    v = boost_model.voltage_trace(np.array([t_end + 0.5 * t_back, t_end + t_back * (1 - 1e-9)]), t_end, b, 10.0)
    assert v[0] == pytest.approx(math.sqrt(v_end**2 + 2 * 10.0 * 0.5 * t_back / 220e-6), rel=1e-12)
    assert v[1] == pytest.approx(48.0, rel=1e-9)


@settings(max_examples=60, deadline=None)
@given(v=st.floats(20.0, 100.0), r=st.floats(0.3, 10.0), ell=st.floats(2e-4, 2e-2),
       c=st.floats(1e-6, 2e-3), more=st.floats(1.0, 20.0), frac=st.floats(0.05, 0.95))
def test_more_capacitance_never_lengthens_the_time_to_the_threshold(v, r, ell, c, more, frac):
    small = boost_model.boost(v, c, r, ell)
    i_th = frac * float(boost_model.highest_current(small))
    t1 = float(boost_model.threshold_time(i_th, small))
    t2 = float(boost_model.threshold_time(i_th, boost_model.boost(v, c * more, r, ell)))
    t_ideal = float(boost_model.threshold_time(i_th, boost_model.boost(v, 0.0, r, ell)))
    assert t2 <= t1 * (1 + 1e-9) + 1e-15
    assert t_ideal <= t2 * (1 + 1e-9) + 1e-15, "an ideal source is the limit of a large capacitor"


@pytest.fixture(scope="module")
def boosted():
    from coildrive.config import load_drive
    from coildrive.design import design
    return design(load_drive(EXAMPLE))


def test_design_json_header_and_simulate(tmp_path, boosted):
    out = run_cli("design", str(EXAMPLE), "--json", "--header", str(tmp_path / "d.h"))
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    b = d["boost"]
    # hand-worked: 1.2 x 0.9 A = 1.08 A; ceil(1.08 A x 0.1 ohm x 20 / (3.3 V / 4096))
    # = ceil(2681.02) = 2682
    assert b["threshold_code"] == 2682 and b["threshold_a"] == pytest.approx(1.08)
    assert d["pull_in"]["peak_ticks"] == b["timeout_ticks"]
    assert b["timeout_ticks"] == math.ceil(b["time_to_threshold_s"] * 1.5 * 10e3 - 1e-9) + 1
    assert b["recharge_time_s"] == pytest.approx(b["energy_j"] / 5.0)
    assert b["lowest_boost_v"] < b["boost_min_v"] and b["droop_v"] > 0
    # the switch: the boost at full charge (48 V + 5 %) + the freewheel diode
    assert b["switch_voltage_v"] == pytest.approx(50.4 + 0.8)
    assert d["release"]["peak_switch_voltage_v"] >= b["switch_voltage_v"]
    offs = {o["event"]: o for o in d["release"]["turn_offs"]}
    for event in ("end of peak", "over-current trip"):   # may come while the boost feeds the coil
        assert offs[event]["switch_voltage_v"] == pytest.approx(50.4 + 0.8), event
    assert offs["end of hold"]["switch_voltage_v"] == pytest.approx(16.0 + 0.8), "the hold: main supply"
    names = {c["name"]: c["ok"] for c in d["checks"]}
    assert names["boost_threshold"] and names["boost_droop"] and names["boost_switch_voltage"]
    h = (tmp_path / "d.h").read_text()
    for key in ("BOOST_THRESHOLD_CODE", "BOOST_TIMEOUT_TICKS", "BOOST_RECHARGE_TICKS", "BOOST_MIN_INTERVAL_TICKS"):
        assert f"COIL_{key}" in h
    assert "#define COIL_BOOST_THRESHOLD_CODE          2682U" in h
    sim = run_cli("simulate", str(EXAMPLE), "--supply", "12", "--coil-temp", "40", "--hold-time", "2 ms",
                  "--csv", str(tmp_path / "s.csv"))
    assert sim.returncode == 0, sim.stderr
    rows = np.genfromtxt(tmp_path / "s.csv", delimiter=",", names=True)
    assert "boost_v" in rows.dtype.names
    assert rows["boost_v"][0] == pytest.approx(48.0)
    peak = rows["time_s"] <= float(sim.stderr.split("peak ")[1].split(" ms")[0]) * 1e-3 * 0.999
    assert np.all(np.diff(rows["boost_v"][peak]) <= 0), "the capacitor only discharges in the peak"
    trip = 2682 * 3.3 / 4096 / 2.0      # the code's current with a nominal chain, A
    assert rows["current_a"][peak][-1] < trip <= rows["current_a"][~peak][0] + 1e-4


def test_emulated_boosted_drive_passes_check(tmp_path, boosted):
    sys.path.insert(0, str(Path(__file__).parent))
    from test_emulator_device import capture_of, run as run_device

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions, VirtualDevice

    dev = VirtualDevice(boosted.drive, DeviceOptions(noise_codes=1.0, seed=3), design=boosted)
    assert dev.peak_time < boosted.pull_in.peak_time_s, "ends at the threshold, before the time-out"
    msgs, _ = run_device(dev, 0.05 + 2 * dev.period, step=0.05)
    report = check_capture(capture_of(msgs, tmp_path / "c.cdcap"), boosted)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items if i.status == "FAIL"]
    bad = VirtualDevice(boosted.drive, DeviceOptions(resistance_scale=1.4), design=boosted)
    msgs, _ = run_device(bad, 0.05 + bad.period, step=0.05)
    assert not check_capture(capture_of(msgs, tmp_path / "bad.cdcap"), boosted).ok


def _variant(tmp_path, name, old, new, board=None):
    text = EXAMPLE.read_text().replace(old, new, 1)
    boards = EXAMPLES.parent / "boards"
    text = text.replace('board = "lab-m32-zener"', f'board = "{boards / (board or "lab-m32-zener")}.toml"')
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    return str(path)


REFUSALS = [
    ("settle", "margin = 1.5", 'margin = 1.5\nsettle_time = "1 ms"', None, "pull_in.settle_time"),
    ("low-boost", 'boost = "48 V"', 'boost = "16.5 V"', None, "supply.boost"),
    ("no-power", 'boost_power = "5 W"', "", None, "supply.boost_power"),
]


@pytest.mark.parametrize("case", REFUSALS, ids=[c[0] for c in REFUSALS])
def test_unmodelled_combinations_refused_in_one_line(tmp_path, case):
    from typer.testing import CliRunner

    from coildrive.cli import app

    name, old, new, board, key = case
    path = _variant(tmp_path, name, old or "\n", new if old else "\n", board)
    out = CliRunner().invoke(app, ["design", path])
    assert out.exit_code == 2, out.stdout
    line = out.stderr.strip()
    assert "\n" not in line and key in line, line


def test_another_drives_firmware_refused(tmp_path):
    """emulate --firmware with a driver folder generated for a drive without a boost (the
    reference C driver runs a boost only when its header declares one:
    tests/test_boost_firmware.py) is refused before building."""
    assert run_cli("firmware-driver", str(EXAMPLES / "demo-valve.toml"), "--out", str(tmp_path / "demo")).returncode == 0
    out = run_cli("emulate", str(EXAMPLE), "--firmware", str(tmp_path / "demo"), "--duration", "0.1")
    assert out.returncode == 2 and "supply.boost" in out.stderr and out.stderr.strip().count("\n") == 0, out.stderr


def test_ideal_boost_source_is_the_plain_rl_rise(tmp_path):
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model.rl import rise_time

    from coildrive.copper import copper_resistance

    text = EXAMPLE.read_text()
    for key in ("boost_capacitance =", "boost_capacitance_tolerance =", "boost_power ="):
        text = "\n".join(line for line in text.splitlines() if not line.startswith(key)) + "\n"
    path = _variant(tmp_path, "ideal", "\n", "\n")
    Path(path).write_text(text.replace('board = "lab-m32-zener"',
                                       f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener.toml"}"'))
    d = design(load_drive(path))
    b = d.boost
    assert b.capacitance_f == 0 and b.recharge_time_s is None and b.droop_v == pytest.approx(0.0)
    k = d.drive
    # the worst corner's time is the plain RL rise (coildrive.model.rl, checked against
    # ngspice in test_reference_ngspice.py) from the lowest boost with the hot coil's R
    label = b.time_to_threshold_corner
    assert "(hot)" in label and "R+5%" in label and "L+10%" in label, label
    hot = float(label.split("coil ")[1].split(" degC")[0])   # as printed: 4 digits
    r_hot = copper_resistance(k.coil.resistance, k.coil.reference_temp, hot) * 1.05
    r = r_hot + k.switch.on_resistance + k.board.sense.resistance + k.supply.boost_resistance
    # the longest peak: to the code's current with the chain reading low (2682 codes x
    # 3.3 V / 4096 / (0.1 ohm x 20)), seen one conversion late: the driver converts once a
    # PWM period (docs/firmware.md), 20 us at the hold's 50 kHz
    trip = 2682 * 3.3 / 4096 / 2.0
    assert b.trip_max_a == pytest.approx(trip, rel=1e-12)
    t = float(rise_time(trip, 0.0, 48 * 0.95, r, k.coil.inductance * 1.1)) + 1.0 / 50e3
    assert b.time_to_threshold_s == pytest.approx(t, rel=1e-4), "the label's temperature has 4 digits"


def test_a_boost_capacitor_too_small_fails_and_says_why(tmp_path):
    # 3 uF (2.4 uF at -20 %) from 45.6 V: the first current maximum of the series RLC is
    # below the 1.08 A threshold at the hot corner; the design fails, the JSON stays JSON
    path = _variant(tmp_path, "small", 'boost_capacitance = "100 uF"', 'boost_capacitance = "3 uF"')
    out = run_cli("design", path, "--json", "--header", str(tmp_path / "no.h"))
    assert out.returncode == 1, out.stderr
    d = json.loads(out.stdout)
    assert d["boost"]["time_to_threshold_s"] is None and d["boost"]["timeout_ticks"] is None
    assert d["pull_in"]["peak_ticks"] is None and "threshold 1.08 A" in d["pull_in"]["not_reached"]
    check = {c["name"]: c for c in d["checks"]}["boost_threshold"]
    assert not check["ok"] and "supply.boost_capacitance" in check["detail"] and "(hot)" in check["detail"]
    assert not (tmp_path / "no.h").exists(), "a failed design writes no header"


def test_rise_check_times_the_boosts_rise(tmp_path):
    """The shorted-turns check of a boosted peak times the rise from the boost, not from the
    main supply (whose slower rise made its limit fault every healthy boosted rise): at
    100 kHz the check is on, unscaled by the supply code (the supply sense reads the main
    bus), and its fastest healthy rise is the boost at its highest (50.4 V, 120 uF) into
    the cold coil at its low R and L -- against scipy's solve_ivp of the loop written
    afresh, L di/dt = v_C - R i, C dv_C/dt = -i."""
    from scipy.integrate import solve_ivp

    from coildrive.config import load_drive
    from coildrive.copper import copper_resistance
    from coildrive.design import design

    path = _variant(tmp_path, "fast-pwm", 'frequency = "50 kHz"', 'frequency = "100 kHz"')
    d = design(load_drive(path))
    rc = d.rise_check
    assert rc.limit > 0 and not rc.by_supply and rc.why_off == "", rc
    assert "coil -40 degC (cold), R-5%, L-10%" in rc.fastest_corner, rc.fastest_corner
    k = d.drive
    r = (copper_resistance(k.coil.resistance, k.coil.reference_temp, -40.0) * 0.95 + k.switch.on_resistance
         + k.board.sense.resistance + k.supply.boost_resistance)
    ell, c = k.coil.inductance * 0.9, 100e-6 * 1.2
    lsb_a = 3.3 / 4096 / 2.0
    i_early = (rc.code - rc.noise_codes) * lsb_a          # the chain reading high: nominal here
    hit = lambda t, y: y[0] - i_early                    # noqa: E731
    hit.terminal = True
    sol = solve_ivp(lambda t, y: [(y[1] - r * y[0]) / ell, -y[0] / c], (0.0, 1e-3), [0.0, 50.4],
                    events=hit, rtol=1e-10, atol=1e-12)
    assert rc.fastest_s == pytest.approx(float(sol.t_events[0][0]), rel=1e-6)
    # the limit: 0.9 x the fastest rise in conversions, floored (docs/firmware.md)
    assert rc.limit == math.floor(0.9 * rc.fastest_s * 100e3)
    # below this fraction of 6 mH the slowest healthy rise (the boost at its lowest) reaches
    # the code a conversion late within the limit: the factor is under the healthy 0.9
    assert 0.0 < rc.trip_inductance_factor < 0.9
