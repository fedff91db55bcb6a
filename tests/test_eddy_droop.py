"""An eddy-current term on the drooping bus (``[coil] eddy_resistance`` with ``[supply]
source_resistance`` + ``capacitance``) against the outside world.

The circuit (coildrive/model/supply.py, module docstring): source ``V_s``, its resistance
``R_s``, the bulk capacitor ``C``, the coil loop ``R`` and the magnetising inductance ``L``
with the eddy resistance ``R_e`` across it, switched on at ``t = 0``. References:

* ngspice (batch mode, ``ngspice -b``): the netlist of tests/test_supply_droop.py
  (:func:`test_supply_droop.spice_droop`) with a
  resistor ``RE`` across the inductor and a 0 V source ``VLM`` in series with it (an
  ammeter: ``i(VLM)`` is the magnetising current, ``i(VM)`` the terminal current);
  ``.meas tran`` ``WHEN ... CROSS=1`` (the rise time of the magnetising current), ``MIN``
  (the lowest bus) and ``FIND ... AT`` (the currents at the end of the peak);
* scipy's ``solve_ivp`` (Radau) of the circuit written afresh from Kirchhoff's laws, with
  the terminal current solved from the loop at every step (no Thevenin reduction);
* the limit ``R_e -> inf`` (hand-worked: the branch carries no eddy current), today's
  drooping bus.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from test_supply_droop import simulated_peak, spice_droop

from coildrive.model import supply as bus_model

#: (name, V_s V, R_s ohm, C F, R ohm, L H, R_e ohm, pull-in A, peak s): an overdamped relay
#: on a long cable, and an underdamped low-resistance coil on a battery (complex eigenvalues).
CASES = [
    ("overdamped", 12.0, 2.0, 100e-6, 44.0, 0.2, 300.0, 0.16, 20e-3),
    ("underdamped", 12.0, 1.0, 1e-3, 1.0, 1e-3, 5.0, 3.0, 10e-3),
]


def _model(vs, rs, c, r, l, r_e, i_pull, t_end):
    b = bus_model.bus(vs, rs, c, r, l, r_e)
    t_pull = float(bus_model.rise_time(i_pull, b))
    v_low, _ = bus_model.lowest_bus(t_end, b)
    i_m, v = bus_model.state(t_end, b)
    return t_pull, float(v_low), float(i_m), float(bus_model.terminal(i_m, v, b))


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_eddy_droop_against_ngspice(tmp_path, case):
    name, vs, rs, c, r, l, r_e, i_pull, t_end = case
    step = t_end / 20000
    got = spice_droop(tmp_path, name, vs, rs, c, r, l, i_pull, t_end, r_e)
    t_pull, v_low, i_m, i_t = _model(vs, rs, c, r, l, r_e, i_pull, t_end)
    print(f"{name}: pull-in {t_pull / got['tpull'] - 1:+.2e}, lowest bus {v_low - got['vlow']:+.2e} V, "
          f"terminal {i_t / got['iend'] - 1:+.2e} (relative to ngspice)")
    # ngspice transient: 0.1 % + one time step on the time; 1 mV on the bus; 0.1 % on currents
    assert abs(t_pull - got["tpull"]) <= 1e-3 * t_pull + step, (t_pull, got)
    assert abs(v_low - got["vlow"]) <= 1e-3, (v_low, got)
    assert abs(i_m - got["imend"]) <= 1e-3 * abs(i_m), (i_m, got)
    assert abs(i_t - got["iend"]) <= 1e-3 * abs(i_t), (i_t, got)


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_eddy_droop_against_solve_ivp(case):
    from scipy.integrate import solve_ivp

    name, vs, rs, c, r, l, r_e, i_pull, t_end = case

    def terminal(x):      # the loop v = R i + R_e (i - i_m), solved for the terminal current
        i_m, v = x
        return (v + r_e * i_m) / (r + r_e)

    def f(t, x):          # x = (magnetising current, bus voltage)
        i = terminal(x)
        return [r_e * (i - x[0]) / l, ((vs - x[1]) / rs - i) / c]

    def reach(t, x):
        return x[0] - i_pull
    sol = solve_ivp(f, (0.0, t_end), [0.0, vs], method="Radau", rtol=1e-10, atol=1e-12,
                    dense_output=True, events=reach)
    t_pull, v_low, i_m, i_t = _model(vs, rs, c, r, l, r_e, i_pull, t_end)
    tt = np.linspace(0.0, t_end, 200001)
    ref = sol.sol(tt)
    # scipy solve_ivp (Radau, rtol 1e-10): the event's first time, the dense bus minimum
    assert t_pull == pytest.approx(sol.t_events[0][0], rel=1e-7)
    assert v_low == pytest.approx(float(np.min(ref[1])), abs=1e-6)
    assert i_m == pytest.approx(float(sol.y[0, -1]), rel=1e-7)
    assert i_t == pytest.approx(float(terminal(sol.y[:, -1])), rel=1e-7)
    # the closed form along the whole peak, terminal current included
    b = bus_model.bus(vs, rs, c, r, l, r_e)
    m, v = bus_model.state(tt[::1000], b)
    assert np.max(np.abs(m - ref[0][::1000])) <= 1e-7 * np.max(np.abs(ref[0]))
    assert np.max(np.abs(v - ref[1][::1000])) <= 1e-7 * vs
    assert np.max(np.abs(bus_model.terminal(m, v, b) - terminal(ref[:, ::1000]))) <= 1e-7 * np.max(ref[0])


def test_without_eddy_current_limit():
    # R_e -> inf: no eddy current, today's drooping bus (hand-worked); R_e = None is it to the bit
    name, vs, rs, c, r, l, r_e, i_pull, t_end = CASES[0]
    plain = bus_model.bus(vs, rs, c, r, l)
    far = bus_model.bus(vs, rs, c, r, l, 1e12)
    assert float(bus_model.rise_time(i_pull, far)) == pytest.approx(float(bus_model.rise_time(i_pull, plain)), rel=1e-8)
    assert float(bus_model.lowest_bus(t_end, far)[0]) == pytest.approx(float(bus_model.lowest_bus(t_end, plain)[0]),
                                                                       abs=1e-8)
    assert np.array_equal(plain.matrix, bus_model.bus(vs, rs, c, r, l, None).matrix)


def _drive(tmp_path, rs: str | None, eddy: str = "300 ohm") -> str:
    text = (EXAMPLES / "relay-12v.toml").read_text()
    if rs is not None:
        text = text.replace('max = "14.4 V"',
                            f'max = "14.4 V"\nsource_resistance = "{rs}"\ncapacitance = "470 uF"', 1)
    text = text.replace('board = "tiny-8bit-diode"', f'board = "{EXAMPLES.parent / "boards" / "tiny-8bit-diode.toml"}"')
    text = text.replace("[coil]", f'[coil]\neddy_resistance = "{eddy}"', 1)
    path = tmp_path / f"eddy-droop-{rs and rs.split()[0]}.toml"
    path.write_text(text)
    return str(path)


def test_design_and_simulate_end_to_end(tmp_path):
    stiff = json.loads(run_cli("design", _drive(tmp_path, None), "--json").stdout)
    r = run_cli("design", _drive(tmp_path, "0.5 ohm"), "--json")
    assert r.returncode in (0, 1), r.stderr
    d = json.loads(r.stdout)
    s = d["supply"]
    # the pull-in corner includes the droop: slower than on the stiff bus
    assert d["pull_in"]["time_s"] > stiff["pull_in"]["time_s"]
    assert s["lowest_bus_corner"].startswith("9.6 V") and s["lowest_bus_v"] < 9.6
    assert s["capacitor_energy_j"] > 0 and s["ripple_current_a"] > 0
    assert "supply_droop" in {c["name"] for c in d["checks"]} and "eddy" in d
    # simulate: the terminal current steps to V/(R + R_e) at switch-on (the bus has not
    # moved yet), the magnetising current starts at zero and follows the closed form
    from coildrive.config import load_drive

    path = _drive(tmp_path, "0.5 ohm")
    rows, lp = simulated_peak(tmp_path, path, 9.6, 80.0, 3)
    drive = load_drive(path)
    b = bus_model.bus(9.6, 0.5, 470e-6, float(lp.r_on), drive.coil.inductance, 300.0)
    assert rows[0, 5] == 0.0 and rows[0, 1] == pytest.approx(9.6 / (float(lp.r_on) + 300.0), rel=1e-8)
    m, v = bus_model.state(rows[:, 0], b)
    assert rows[:, 5] == pytest.approx(m, rel=1e-8, abs=1e-12)
    assert rows[:, 1] == pytest.approx(bus_model.terminal(m, v, b), rel=1e-8)


#: An underdamped low-resistance valve coil with a strong eddy term on a long supply lead,
#: a clamp across the switch (fast-32bit-clamp's 75 V), a fixed-duty hold (invented).
CLAMP_DRIVE = f"""board = "{EXAMPLES.parent / 'boards' / 'fast-32bit-clamp.toml'}"
[coil]
resistance = "1 ohm"
reference_temp = "20 degC"
inductance = "1 mH"
eddy_resistance = "5 ohm"
resistance_tolerance = 0.05
inductance_tolerance = 0.10
[supply]
min = "20 V"
nominal = "24 V"
max = "28 V"
source_resistance = "1 ohm"
capacitance = "1 mF"
[ambient]
min = "20 degC"
max = "25 degC"
[thermal]
resistance = "0 K/W"
max_coil_temp = "105 degC"
[pull_in]
current = "5 A"
margin = 2.0
[hold]
current = "2 A"
frequency = "20 kHz"
[release]
current = "0.5 A"
"""


@pytest.mark.parametrize("regulation", ["supply_table", "closed_loop"])
def test_clamp_floor_after_the_peak_against_solve_ivp(tmp_path, regulation):
    """With a clamp across the switch the coil draws from the drooping bus after the peak
    too, and the design's lowest bus takes the floor ``V_s - R_s i_top``. scipy's
    ``solve_ivp`` (Radau) on the circuit written afresh at the design's lowest-bus corner:
    the peak, then the hold's fixed duty -- on, ``i = (v + R_e i_m)/(R_on + R_e)``; off
    through the clamp, ``i = (v - V_clamp + R_e i_m)/(R_off + R_e)`` while positive, else
    0; ``L di_m/dt = R_e (i - i_m)``; ``C dv/dt = (V_s - v)/R_s - i``. The bus recovers in
    the first off-time, so the first on-time draws more than the terminal current at the
    end of the peak (the gap the floor's top once had): the design's top
    (``(V_s - lowest bus)/R_s``) covers every draw and stays within 1.1x the most, and the
    lowest bus is under scipy's. The closed loop starts its hold at its preload duty (the
    most it settles at anywhere) and lowers it while the current is above its set-point:
    its first period, at that duty, is the one run."""
    from scipy.integrate import solve_ivp

    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model.circuit import loop

    path = tmp_path / "clamp-eddy.toml"
    loop_ = regulation == "closed_loop"
    path.write_text(CLAMP_DRIVE.replace('frequency = "20 kHz"', 'frequency = "20 kHz"\nregulation = "closed_loop"')
                    if loop_ else CLAMP_DRIVE)
    drive = load_drive(path)
    d = design(drive)
    sup = d.supply
    assert sup.lowest_bus_corner == "20 V, 20 degC, coil 20 degC (cold), R-5%, L-10%"
    assert sup.lowest_bus_time_s == d.pull_in.longest_peak_s        # the floor after the longest real peak
    duty = next(k.hold_duty for k in d.corners if k.label.startswith("20 V, 20 degC, coil 20 degC")
                and k.label.endswith("R-5%, L-10%"))
    if loop_:
        duty = d.hold.closed_loop.preload_compare / d.timer.period_ticks
    lp = loop(drive, 20.0, 20.0, 0.95, 0.9)
    r_on, r_off = float(lp.r_on), float(lp.r_off)
    ell, r_e = float(lp.inductance.magnetising), 5.0
    v_s, r_s, c, v_cl = 20.0, 1.0, 1e-3, 75.0
    period = 1.0 / d.hold.frequency_hz

    def on_i(i_m, v):
        return (v + r_e * i_m) / (r_on + r_e)

    def off_i(i_m, v):
        return np.maximum((v - v_cl + r_e * i_m) / (r_off + r_e), 0.0)

    def rates(draw):
        def f(t, y):
            i = draw(y[0], y[1])
            return [r_e * (i - y[0]) / ell, ((v_s - y[1]) / r_s - i) / c]
        return f

    opt = dict(method="Radau", rtol=1e-9, atol=1e-12, dense_output=True)
    s = solve_ivp(rates(on_i), (0.0, d.pull_in.longest_peak_s), [0.0, v_s], **opt)
    y = s.y[:, -1]
    end = float(on_i(*y))
    low, most = v_s, 0.0
    for n in range(1 if loop_ else 20):
        t0 = d.pull_in.longest_peak_s + n * period
        for draw, a, b in ((on_i, t0, t0 + duty * period), (off_i, t0 + duty * period, t0 + period)):
            s = solve_ivp(rates(draw), (a, b), y, **opt)
            i_m, v = s.sol(np.linspace(a, b, 41))
            low, most, y = min(low, float(v.min())), max(most, float(np.max(draw(i_m, v)))), s.y[:, -1]
    top = (v_s - sup.lowest_bus_v) / r_s
    # scipy: the first on-time draws past the peak's end current; the top covers it, closely
    assert most > end + 0.05, (most, end)
    assert most <= top <= 1.1 * most, (most, top)
    assert sup.lowest_bus_v <= low, (sup.lowest_bus_v, low)
