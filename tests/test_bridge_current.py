"""A full bridge's current-mode hold (``[hold] mode = "current"`` on ``[switch] topology =
"full_bridge"``): the hold's off-times recirculate through the two low-side switches (slow
decay), the release opens all four (fast decay into the bus).

Outside references, named beside each check (none goes through the package's loop code):

* the hysteretic switching times written out here from a corner's own JSON figures: the
  RL charge ``tau_on ln((A - I_lo) / (A - I_hi))`` through two switches and the sense
  resistor, and the slow decay's discharge ``tau_off ln(I_hi / I_lo)`` (no opposing
  voltage), the fast release ``tau ln((I_0 + B) / (I_drop + B))`` with ``B = (V_bus + 2
  V_d) / (R_coil + R_sense)``, and its charge ``(L I_0 - (V_bus + 2 V_d) t_zero) / R``
  back into the bus (the RL step response, from memory);
* ngspice (batch mode): the element-level bridge of tests/test_reference_ngspice_bridge.py
  with Q1's gate from a comparator with hysteresis on the coil current (a voltage-controlled
  switch, SW model ``VT``/``VH``, as tests/test_flux_current_mode.py builds it) and Q2 its
  complement with a dead time, so ngspice finds the switching itself; then all four open;
* scipy's ``solve_ivp`` (events at the peak threshold, the fixed off-time timed) of the
  off-time control on the slow path, the two equations written afresh.

The virtual device shares the design's physics: its `check` proves plumbing, not numbers.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from coil_span import cold_and_settled, corner_at
from conftest import BOARDS, EXAMPLES, require_tool, run_cli
from coildrive.config import load_drive
from coildrive.design import design

BRIDGE = EXAMPLES / "dosing-valve-bridge-24v.toml"
CURRENT = ('frequency = "20 kHz"\n', 'frequency = "20 kHz"\nmode = "current"\n')


def bridge_variant(tmp_path, hold_edit, *edits, name="v.toml", board=None):
    """The bridge example with ``hold_edit`` and ``edits`` (each ``(old, new)``, once) on
    ``board`` (default: the bundled bridge board, by path)."""
    text = BRIDGE.read_text().replace(*hold_edit, 1)
    for old, new in edits:
        assert old in text, old
        text = text.replace(old, new, 1)
    board = board or BOARDS / "bridge-m32-fast.toml"
    path = tmp_path / name
    path.write_text(text.replace('board = "bridge-m32-fast"', f'board = "{board}"'))
    return path


def _variant(tmp_path, *edits, name="cm.toml", board=None):
    return bridge_variant(tmp_path, CURRENT, *edits, name=name, board=board)


@pytest.fixture(scope="module")
def hysteretic(tmp_path_factory):
    return designed(_variant(tmp_path_factory.mktemp("bcm")))


def designed(path):
    """``(drive, path, design JSON)`` of the drive file ``path`` (`design --json`, a subprocess)."""
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr + r.stdout[-2000:]
    return load_drive(path), path, json.loads(r.stdout)


def common_return_board(tmp_path):
    """The bundled bridge board with its sense resistor in the common return."""
    board = tmp_path / "bridge-return.toml"
    text = (BOARDS / "bridge-m32-fast.toml").read_text()
    old = 'position = "coil"     # inline with the coil: reads the current always'
    assert old in text
    board.write_text(text.replace(old, 'position = "switch"'))
    return board


def test_hysteretic_corners_against_the_switching_times(hysteretic):
    drive, _, d = hysteretic
    cm, b = d["current_mode"], d["topology"]["bridge"]
    assert d["hold"]["regulation"] == "current" and cm["control"] == "hysteretic"
    assert b["hold_decay"] == "slow" and b["release_decay"] == "fast" and b["returned_per_hold_period_j"] == 0.0
    sw, rs, vd = drive.switch.on_resistance, drive.board.sense.resistance, drive.freewheel.diode_drop
    lo, hi = cm["lower_a"], cm["upper_a"]
    returned = []
    for c in d["corners"]:
        r, ell, v = c["resistance_ohm"], c["inductance_h"], c["supply_v"]
        r_on = r + 2 * sw + rs            # Q1 + Q4 and the inline sense resistor
        r_slow = r + 2 * sw + rs          # Q2 + Q4, the inline sense resistor still in the loop
        assert lo < c["hold_mean_current_a"] < hi
        assert c["hold_ripple_a"] == pytest.approx(hi - lo, rel=1e-9)
        # the release from the band's top decays fast into the bus through two body diodes
        r_fast, v_fast = r + rs, v + 2 * vd
        big_b = v_fast / r_fast
        t_drop = ell / r_fast * math.log((hi + big_b) / (drive.release.current + big_b))
        assert c["release_time_s"] == pytest.approx(t_drop, rel=1e-9), c["label"]
        t_zero = ell / r_fast * math.log((hi + big_b) / big_b)
        returned.append(v * (ell * hi - v_fast * t_zero) / r_fast)
        # the same coil switched on cold (at the ambient; copper R(T) by IEC 60028,
        # alpha = 0.00393 /K): less copper, more back into the bus
        r_c = r * (1 + 0.00393 * (c["ambient_c"] - 20.0)) / (1 + 0.00393 * (c["coil_temp_c"] - 20.0)) + rs
        t_zero_c = ell / r_c * math.log((hi + v_fast / r_c) / (v_fast / r_c))
        returned.append(v * (ell * hi - v_fast * t_zero_c) / r_c)
    # the switching range over the coil from switched on cold to settled: the slow decay
    # (nothing opposes the current) is faster the more copper, so a cold coil switches
    # the slowest and the range's two ends are the span's
    freqs = []
    for c in cold_and_settled(d):
        r, ell, v = c["resistance_ohm"], c["inductance_h"], c["supply_v"]
        r_on = r + 2 * sw + rs            # Q1 + Q4 and the inline sense resistor
        r_slow = r + 2 * sw + rs          # Q2 + Q4, the inline sense resistor still in the loop
        t_on = ell / r_on * math.log((v / r_on - lo) / (v / r_on - hi))
        t_off = ell / r_slow * math.log(hi / lo)   # slow decay: nothing opposes the current
        freqs.append(1.0 / (t_on + t_off))
    assert cm["min_frequency_hz"] == pytest.approx(min(freqs), rel=1e-9)
    assert cm["max_frequency_hz"] == pytest.approx(max(freqs), rel=1e-9)
    assert min(freqs) == pytest.approx(min(freqs[len(freqs) // 2:]), rel=1e-12), "the slowest: a cold coil"
    assert cm["allowed_min_frequency_hz"] <= cm["min_frequency_hz"], "a cold coil inside the range too"
    # the energy back into the bus per release (from the band's top), the corner that has the most
    assert b["returned_per_release_j"] == pytest.approx(max(returned), rel=1e-9)
    assert d["hold"]["min_mean_current_a"] >= drive.hold.current
    names = {c["name"]: c for c in d["checks"]}
    for name in ("current_mode_sense", "current_mode_regulated", "current_mode_frequency", "bus_pump_up",
                 "capacitor_voltage", "hold_current_met"):
        assert names[name]["ok"], names[name]
    # the switches see the pumped bus at a turn-off, as in voltage mode
    assert d["release"]["peak_switch_voltage_v"] == pytest.approx(b["pumped_switch_voltage_v"], rel=1e-12)
    assert d["hold"]["freewheel_power_w"] == 0.0, "the slow decay heats the switches, not a freewheel element"


def test_off_time_on_the_slow_path_against_solve_ivp(tmp_path):
    """scipy ``solve_ivp`` (RK45, rtol 1e-10) of the two equations written afresh -- on:
    ``L di/dt = V - (R + 2 R_sw + R_s) i`` until the peak threshold (an event); off, for the
    fixed off-time: ``L di/dt = -(R + 2 R_sw) i`` (the common-return sense resistor out of
    the recirculating loop) -- run period after period to the orbit: the frequency and the
    mean at the slowest and the fastest corner within 1e-6."""
    from scipy.integrate import solve_ivp

    path = _variant(tmp_path, ('frequency = "20 kHz"\nmode = "current"\n',
                               'frequency = "20 kHz"\nmode = "current"\ncontrol = "off_time"\n'),
                    board=common_return_board(tmp_path))
    drive = load_drive(path)
    d = design(drive).to_dict()
    cm = d["current_mode"]
    assert cm["control"] == "off_time" and cm["sense_position"] == "switch"
    checks = {c["name"]: c for c in d["checks"]}
    assert checks["current_mode_sense"]["ok"] and checks["current_mode_frequency"]["ok"]
    sw, rs = drive.switch.on_resistance, drive.board.sense.resistance
    corners = {c["label"]: c for c in d["corners"]}
    peak, t_off = cm["upper_a"], cm["off_time_s"]
    for which in ("min", "max"):
        # the coil from cold to settled: the frequency falls as it warms (a fixed off-time)
        c = corner_at(d, which)
        settled = corners[cm[f"{which}_frequency_corner"]]
        assert c["coil_temp_c"] == pytest.approx(settled["ambient_c" if which == "max" else "coil_temp_c"])
        r, ell, v = c["resistance_ohm"], c["inductance_h"], c["supply_v"]
        r_on, r_off = r + 2 * sw + rs, r + 2 * sw

        def on(_, y):
            return [(v - r_on * y[0]) / ell, y[0]]

        def off(_, y):
            return [-r_off * y[0] / ell, y[0]]

        def top(_, y):
            return y[0] - peak
        top.terminal, top.direction = True, 1
        i, periods = 0.9 * peak * math.exp(-r_off * t_off / ell), []
        for _ in range(40):
            a = solve_ivp(on, (0.0, 1.0), [i, 0.0], events=top, rtol=1e-10, atol=1e-14)
            b = solve_ivp(off, (0.0, t_off), [peak, 0.0], rtol=1e-10, atol=1e-14)
            periods.append((a.t[-1] + t_off, (a.y[1, -1] + b.y[1, -1]) / (a.t[-1] + t_off)))
            i = b.y[0, -1]
        f, mean = 1.0 / periods[-1][0], periods[-1][1]
        assert abs(periods[-2][0] / periods[-1][0] - 1) < 1e-9, "the orbit repeats"
        assert cm[f"{which}_frequency_hz"] == pytest.approx(f, rel=1e-6), which
        if which == "min":   # the settled coil's: the corner's figures are the settled hold's
            assert c["hold_mean_current_a"] == pytest.approx(mean, rel=1e-6), which


def test_simulate_switches_the_slow_decay_in_the_hold_and_the_fast_at_the_release(hysteretic, tmp_path):
    """`coildrive simulate` (a subprocess): in the settled hold every off-time is Q2 + Q4
    (slow decay, the coil voltage ``-(2 R_sw + R_s) i``), every on-time Q1 + Q4, the current
    between the thresholds; after the final turn-off all four are open and the current
    falls to the drop-out current in the fast release's time (written out as above)."""
    drive, path, d = hysteretic
    w, t_off, settled = simulated_phases(path, tmp_path)
    t, i, on = w["time_s"], w["current_a"], w["switch_on"]
    cm = d["current_mode"]
    assert np.all(i[settled] >= cm["lower_a"] * (1 - 1e-9)) and np.all(i[settled] <= cm["upper_a"] * (1 + 1e-9))
    off = settled & (on == 0)
    sw, rs = drive.switch.on_resistance, drive.board.sense.resistance
    assert w["coil_voltage_v"][off] == pytest.approx(-(2 * sw + rs) * i[off], rel=1e-6)   # the CSV's 7 digits
    after = t > t_off
    # the fast release from the current at the final turn-off (IEC 60028 copper at 20 degC: R_ref)
    i0, r, ell = float(i[t == t_off][0]), drive.coil.resistance, drive.coil.inductance
    big_b = (24.0 + 2 * drive.freewheel.diode_drop) / (r + rs)
    t_drop = ell / (r + rs) * math.log((i0 + big_b) / (drive.release.current + big_b))
    k = np.flatnonzero(after & (i <= drive.release.current))[0]
    assert t[k] - t_off == pytest.approx(t_drop, abs=float(t[k] - t[k - 1]))


def simulate_csv(path, tmp_path):
    """`coildrive simulate` of ``path`` at 24 V, 20 degC with a 20 ms hold (a subprocess):
    ``(columns, final turn-off s, the last 5 ms of the hold, its off-time samples)``."""
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--hold-time", "20 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    t, on = w["time_s"], w["switch_on"]
    t_off = t[np.flatnonzero(on == 1)[-1]]
    settled = (t > t_off - 5e-3) & (t < t_off)
    return w, t_off, settled, settled & (on == 0)


def simulated_phases(path, tmp_path):
    """:func:`simulate_csv` with the bridge's phases checked: every off-time of the last
    5 ms Q2 + Q4 (slow decay), every on-time Q1 + Q4, all four open after."""
    w, t_off, settled, off = simulate_csv(path, tmp_path)
    t, on = w["time_s"], w["switch_on"]
    assert off.sum() > 50 and np.all(w["low_a_on"][off] == 1) and np.all(w["high_a_on"][off] == 0)
    assert np.all(w["low_b_on"][settled] == 1) and np.all(w["high_a_on"][settled & (on == 1)] == 1)
    after = t > t_off
    assert np.all(w["high_a_on"][after] + w["low_a_on"][after] + w["high_b_on"][after] + w["low_b_on"][after] == 0)
    return w, t_off, settled


def test_virtual_device_runs_it_and_check_passes(hysteretic, tmp_path):
    """The virtual device (the design's model, the thresholds ending the segments). Plumbing."""
    device_checks(design(hysteretic[0]), tmp_path)


def device_checks(d, tmp_path, bad: dict | None = None):
    """The virtual device of design ``d`` at the low supply with the hottest coil and the
    high supply cold: `check` passes the hold and the fast release; a coil 40 % over its
    resistance fails (the check can fail; ``bad``: another coil's scales that fail)."""
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions, VirtualDevice

    drive = d.drive

    def checked(supply, temp, **scales):
        dev = VirtualDevice(drive, DeviceOptions(noise_codes=1.0, seed=3, supply=supply, coil_temp=temp,
                                                 hold_time=0.02, **scales), design=d)
        msgs, _ = run_device(dev, 0.05 + 2 * dev.period, step=0.05)
        return check_capture(capture_of(msgs, tmp_path / "c.cdcap"), d, coil_temp=temp)

    for supply, temp in ((drive.supply.min, drive.thermal.max_coil_temp), (drive.supply.max, drive.ambient.min)):
        rep = checked(supply, temp)
        rows = {i.name: i for i in rep.items}
        assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items if i.status == "FAIL"]
        for name in ("hold_mean", "release_time"):
            assert rows[name].status == "pass", (supply, temp, name, rows[name].detail)
    assert not checked(drive.supply.min, drive.thermal.max_coil_temp, **(bad or dict(resistance_scale=1.4))).ok


def test_tune_refuses_it_in_one_line(hysteretic):
    _, path, _ = hysteretic
    r = run_cli("tune", str(path))   # as for one switch: the design sizes the thresholds
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and "hold.mode" in r.stderr


def _control(tmp_path, control):
    return design(load_drive(_variant(tmp_path, ('frequency = "20 kHz"\nmode = "current"\n',
                                                 f'frequency = "20 kHz"\nmode = "current"\ncontrol = "{control}"\n'),
                                      name=f"{control}.toml")))


@pytest.mark.compiler
@pytest.mark.parametrize("control", ["hysteretic", "off_time"])
def test_compiled_driver_switches_the_masks_not_the_enable(tmp_path, control):
    # gcc -Wall -Wextra -Werror -pedantic -Wconversion builds the driver with the scripted
    # program (tests/data/driver_target.c): in the hold the threshold handlers switch the
    # bridge between Q1 + Q4 (drive) and Q2 + Q4 (slow decay) with the outputs enabled; the
    # outputs go off (all four open: the fast release) only at the release or a fault
    from driver_harness import budget_script, run_host

    d = _control(tmp_path, control)
    lines = [ln.split() for ln in run_host(tmp_path, d, budget_script(d)).lines if ln[:2] in ("s ", "g ")]
    drive, slow = 0b1001 + 16 * 0b1010, 0b1010 + 16 * 0b1010
    masks = [int(x[3]) for x in lines if x[0] == "g"]
    assert set(masks) <= {0, drive, slow} and masks.count(slow) >= 2 and masks.count(drive) >= 3
    enabled = False
    for k, x in enumerate(lines):
        if x[0] == "s":
            enabled = x[3] == "1"
            if not enabled:
                assert lines[k + 1][0] == "g" and int(lines[k + 1][3]) == 0, lines[k:k + 2]
        elif int(x[3]) == slow:
            assert enabled, "a slow-decay off-time with the outputs enabled"


@pytest.mark.compiler
@pytest.mark.parametrize("control", ["hysteretic", "off_time"])
def test_compiled_driver_in_the_loop_passes_check(tmp_path, control):
    """The compiled driver in the loop with the bridge's coil model (the comparator stepped
    on the drive path while the masks say Q1 + Q4, the slow path while Q2 + Q4, the fast
    path once the outputs are off): `check` passes at 20 V with a 130 degC coil and at 28 V
    with a -10 degC one, the hold mean within 0.1 % of the prediction and the release --
    fast, from the OFF -- within 5 % (plumbing: the model is the design's)."""
    compiled_loop_checks(_control(tmp_path, control), tmp_path, 1e-3)


def compiled_loop_checks(d, tmp_path, mean_rel: float, release=(0.95, 1.05)) -> None:
    """The compiled driver of design ``d`` in the loop (gcc) at 20 V with a 130 degC coil and
    at 28 V with a -10 degC one: `check` passes, the hold mean within ``mean_rel`` of the
    prediction and the release between ``release`` x the prediction (default within 5 %)."""
    from driver_harness import loop_captures
    from coildrive.bench.check import check_capture

    runs = [(20.0, 130.0, None), (28.0, -10.0, None)]
    for (_, temp, _), (_, cap) in zip(runs, loop_captures(tmp_path, d, runs, hold_time=0.02)):
        rep = check_capture(cap, d, coil_temp=temp)
        rows = {x.name: x for x in rep.items}
        assert rep.ok, [(x.name, x.status, x.detail) for x in rep.items if x.status == "FAIL"]
        assert rows["hold_mean"].values[0] == pytest.approx(rep.prediction["hold_mean_a"], rel=mean_rel)
        assert release[0] <= rows["release_time"].values[0] / rep.prediction["release_time_s"] <= release[1]


def _hysteretic_deck(text: str, lo: float, hi: float, t_rel: float, psi0=None) -> str:
    """The bridge netlist ``text`` with Q1's gate from a comparator with hysteresis on
    ``i(VM)`` (closes below ``lo``, opens above ``hi`` A; its input filtered by 1 ns -- the
    terminal current of an eddy term steps at each edge -- its output by 10 ns), Q2 its
    complement with a dead time either side (its own switch model closes below 0.1 of the
    gate), both until ``t_rel`` s; the coil (or a curve's flux node, at ``psi0``) from ``lo``."""
    from test_reference_ngspice_bridge import EDGE, R_SW

    mid, half = 0.5 * (lo + hi), 0.5 * (hi - lo)
    comparator = ["VONE one 0 DC 1", "SCMP one sw ctl 0 HYST", "RPULL sw 0 1",
                  "RF sw gate 10", "CF gate 0 1e-9 IC=0",
                  f"BCTL raw 0 V = ({mid!r} - i(VM)) * 1000", "RCTL raw ctl 1", "CCTL ctl 0 1e-9",
                  f".model HYST SW(RON=1e-3 ROFF=1e15 VT=0 VH={half * 1000!r})",
                  f"VEN en 0 PULSE(1 0 {t_rel!r} {EDGE} {EDGE} 1 1e3)",
                  "BG1 g1 0 V = v(gate) * v(en)",
                  "BG2 g2 0 V = (1 - v(gate)) * v(en)",
                  f".model SWITCH2 SW(VT=0.9 VH=0 RON={R_SW!r} ROFF=1e9)"]
    lines = [x for x in text.splitlines() if not x.startswith(("VG1 ", "VG2 "))]
    lines = [x.replace(" g2 0 SWITCH", " g2 0 SWITCH2") for x in lines]
    lines = [x.replace("IC=0", f"IC={lo!r}") if x.startswith("LCOIL") else x for x in lines]
    if psi0 is not None:
        lines = [x.replace("IC=0", f"IC={psi0!r}") if x.startswith("CPHI") else x for x in lines]
    k = next(j for j, x in enumerate(lines) if x.startswith(".options"))
    return "\n".join(lines[:k] + comparator + lines[k:]) + "\n"


@pytest.mark.ngspice
def test_hysteretic_hold_with_an_eddy_term_matches_ngspice(tmp_path):
    """The eddy term on the bridge's hysteretic hold: ngspice's element-level bridge with
    ``REDDY`` across the inductor (tests/test_bridge_eddy.py's netlist), the comparator on
    the terminal current (what the sense resistor carries: it steps at each edge by ``(V +
    V_off) / (R + R_e)``, here within the 0.1 A band) against the design's loop at that
    point: the switching frequency over eight periods and the terminal mean within 1 %."""
    from ngspice_run import run
    from test_bridge_eddy import R_E, _eddy
    from test_reference_ngspice_bridge import L_COIL, R_COIL, R_SW, V_SUP, _netlist
    from coildrive.design.hold_current import steady_state
    from coildrive.model.circuit import loop

    board = tmp_path / "bridge.toml"
    board.write_text((BOARDS / "bridge-m32-fast.toml").read_text().replace(
        'on_resistance = "40 mohm"', f'on_resistance = "{R_SW * 1e3:g} mohm"'))
    path = _variant(tmp_path, ('resistance = "24 ohm"', f'resistance = "{R_COIL:g} ohm"\neddy_resistance = {R_E!r}'),
                    ('inductance = "70 mH"', f'inductance = "{L_COIL * 1e3:g} mH"'), board=board)
    drive = load_drive(path)
    lp = loop(drive, V_SUP, 20.0)
    lo, hi = 0.25, 0.35
    ss = steady_state(drive, lp, lo, hi, 0.0, 0.0)
    assert bool(ss.regulated) and (ss.chatter is None or not bool(ss.chatter)), "precondition: the band holds"
    period = float(ss.period)
    first, last = 2, 10
    measures = [f"meas tran t1 WHEN v(g1)=0.5 RISE={first}", f"meas tran t2 WHEN v(g1)=0.5 RISE={last}",
                "meas tran iavg AVG i(VM) from=t1 to=t2"]
    gates = {1: "DC 0", 2: "DC 0", 3: "DC 0", 4: "DC 1"}
    text = _eddy(_netlist("bridge-hysteretic-eddy", gates, (last + 1) * period, period / 400, measures, inline=True))
    res = run(tmp_path, "bridge-hysteretic-eddy", _hysteretic_deck(text, lo, hi, 1.0))
    f_spice = (last - first) / (res["t2"] - res["t1"])
    print(f"bridge hysteretic (eddy) vs ngspice: {float(ss.frequency):.6e}/{f_spice:.6e} Hz, mean "
          f"{float(ss.mean):.6e}/{res['iavg']:.6e} A")
    assert f_spice == pytest.approx(float(ss.frequency), rel=0.01), "switching frequency (ngspice)"
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01), "terminal mean (ngspice)"


@pytest.mark.ngspice
@pytest.mark.parametrize("kind", ["linear", "curve"])
def test_hysteretic_hold_and_release_match_ngspice(tmp_path, kind):
    """ngspice finds the switching itself: the element-level bridge (tests/
    test_reference_ngspice_bridge.py, the sense resistor inline) with Q1's gate from a
    comparator with hysteresis on the coil current (a voltage-controlled switch, SW model
    ``VT``/``VH``; ngspice manual, "Switches", chapter from memory) that closes below
    ``I_lo`` and opens above ``I_hi``, filtered by 10 ns; Q2 closes once that gate is below
    0.1 and opens once it is above (a dead time either side, Q2's body diode carrying the
    current); Q4 on. Started at ``I_lo``, after ten periods all four open. The design's
    loop at that point (its bridge's slow path) against ngspice: the switching frequency over
    eight periods and the mean within 1 %, the ripple's ends within 1 % of the band; the
    fast release from the current ngspice turns off (time to drop-out within 1 % plus a
    step, the energy back into the supply within 1 %). Twice: with the linear inductor and
    with the saturating curve of tests/test_flux_ngspice.py (ngspice's flux-controlled
    inductor, started at ``psi(I_lo)``; the model's exact quadrature of the curve)."""
    from ngspice_run import run
    from test_flux_ngspice import CURVE_I, _psi
    from test_reference_ngspice_bridge import (COILS, EDGE, L_COIL, R_COIL, R_SENSE, R_SW, STAGGER, V_D, V_SUP,
                                               _coil_netlist, _netlist)
    from coildrive.design.hold_current import steady_state
    from coildrive.model import flux
    from coildrive.model.bridge import fast_decay, release
    from coildrive.model.circuit import loop

    board = tmp_path / "bridge.toml"
    board.write_text((BOARDS / "bridge-m32-fast.toml").read_text().replace(
        'on_resistance = "40 mohm"', f'on_resistance = "{R_SW * 1e3:g} mohm"'))
    table = ", ".join(f'"{x * 1e3:.9f} mWb"' for x in _psi(CURVE_I))
    coil = (f'inductance = "{L_COIL * 1e3:g} mH"' if kind == "linear" else
            f"flux_current = {CURVE_I}\nflux_linkage = [{table}]")
    path = _variant(tmp_path, ('resistance = "24 ohm"', f'resistance = "{R_COIL:g} ohm"'),
                    ('inductance = "70 mH"', coil), board=board)
    drive = load_drive(path)
    assert (drive.board.sense.resistance, drive.freewheel.diode_drop, drive.board.sense.position) == \
        (R_SENSE, V_D, "coil")
    lp = loop(drive, V_SUP, 20.0)          # the coil at its reference temperature: R_COIL
    lo, hi = 0.30, 0.32
    ss = steady_state(drive, lp, lo, hi, 0.0, 0.0)
    period = float(ss.period)
    first, last, n = 2, 10, 11
    t_rel = n * period
    i_drop = drive.release.current
    measures = [f"meas tran t1 WHEN v(g1)=0.5 RISE={first}", f"meas tran t2 WHEN v(g1)=0.5 RISE={last}",
                "meas tran iavg AVG i(VM) from=t1 to=t2", "meas tran imax MAX i(VM) from=t1 to=t2",
                "meas tran imin MIN i(VM) from=t1 to=t2",
                f"meas tran ioff FIND i(VM) AT={t_rel + 2 * STAGGER!r}",
                f"meas tran tdrop WHEN i(VM)={i_drop!r} FALL=1",
                "let back = -v(bus) * i(VFEED)", f"meas tran eback INTEG back from={t_rel + 2 * STAGGER!r}"]
    step = period / 400
    gates = {1: "DC 0", 2: "DC 0", 3: "DC 0",
             4: f"PULSE(1 0 {t_rel + STAGGER!r} {EDGE} {EDGE} 1 1e3)"}
    # to just before the release's zero from the band's bottom (once the body diodes block,
    # the coil's loop is the switches' ROFF alone: a time constant of 1e-10 s that ngspice crawls)
    fast = loop(drive, V_SUP, 20.0, path="release")
    t_end = t_rel + 0.95 * float(release(fast_decay(R_COIL, R_SENSE, V_SUP, V_D), lo, i_drop,
                                         fast.inductance).zero_time)
    measures.append(f"meas tran iend FIND i(VM) AT={t_end!r}")
    text = _coil_netlist(_netlist("bridge-hysteretic", gates, t_end, step, measures, inline=True), COILS[kind])
    psi0 = float(np.ravel(flux.linkage(COILS[kind], lo))[0]) if kind == "curve" else None
    res = run(tmp_path, "bridge-hysteretic", _hysteretic_deck(text, lo, hi, t_rel, psi0))
    f_spice = (last - first) / (res["t2"] - res["t1"])
    rel = release(fast_decay(R_COIL, R_SENSE, V_SUP, V_D), res["ioff"], i_drop, fast.inductance)
    t_drop = float(rel.drop_time)
    # the supply takes back V_bus x the charge up to t_end (the rest of the tail: the RL
    # integral's remainder, (L i_end - (V_bus + 2 V_d) t_rest) / R, from memory, with the
    # curve's small-signal slope: the tail's current is near zero)
    b = (V_SUP + 2 * V_D) / (R_COIL + R_SENSE)
    ell = L_COIL if kind == "linear" else float(np.ravel(COILS[kind].curve.incremental(0.0))[0])
    t_rest = ell / (R_COIL + R_SENSE) * math.log((res["iend"] + b) / b)
    rest = V_SUP * (ell * res["iend"] - (V_SUP + 2 * V_D) * t_rest) / (R_COIL + R_SENSE)
    print(f"bridge hysteretic ({kind}) vs ngspice: {float(ss.frequency):.6e}/{f_spice:.6e} Hz, mean "
          f"{float(ss.mean):.6e}/{res['iavg']:.6e} A, drop {t_drop:.6e}/{res['tdrop'] - t_rel:.6e} s, "
          f"back {float(rel.returned):.6e}/{res['eback'] + rest:.6e} J")
    assert float(fast.r_off) == pytest.approx(R_COIL + R_SENSE) and float(fast.v_off) == pytest.approx(V_SUP + 2 * V_D)
    assert f_spice == pytest.approx(float(ss.frequency), rel=0.01), "switching frequency (ngspice)"
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01), "mean (ngspice)"
    assert abs(res["imax"] - hi) <= 0.01 * (hi - lo) and abs(res["imin"] - lo) <= 0.01 * (hi - lo), \
        (res["imin"], res["imax"])
    # the fast release from where ngspice turned off (it starts anywhere in the band)
    assert lo * 0.99 <= res["ioff"] <= hi * 1.01
    assert abs(res["tdrop"] - t_rel - t_drop) <= 0.01 * t_drop + step, (res["tdrop"] - t_rel, t_drop)
    assert res["eback"] + rest == pytest.approx(float(rel.returned), rel=0.01)
    assert 0 < rest < 0.01 * float(rel.returned), "the tail left out is small"


@pytest.mark.slow
def test_firmware_driver_emulate_capture_check_over_a_real_pty(tmp_path, monkeypatch):
    # as a user runs it, each a real subprocess: firmware-driver -> emulate --firmware ->
    # capture -> check, the bridge's hysteretic hold at the low supply with a hot coil
    pty_check(tmp_path, monkeypatch, _variant(tmp_path))


def pty_check(tmp_path, monkeypatch, drive):
    """firmware-driver -> emulate --firmware -> capture -> check of the drive file ``drive``
    at 20 V with a 110 degC coil, each a real subprocess: the hold mean and the release pass."""
    from test_firmware_loop import capture

    require_tool("gcc")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    r = run_cli("firmware-driver", str(drive), "--out", str(tmp_path / "fw"))
    assert r.returncode == 0, r.stderr
    out, _ = capture(tmp_path, tmp_path / "fw", "bridge-cm", "--supply", "20", "--coil-temp", "110", drive=drive)
    r = run_cli("check", str(out), str(drive), "--json")
    items = {i["name"]: i for i in json.loads(r.stdout)["items"]}
    assert r.returncode == 0, {k: (i["status"], i["detail"]) for k, i in items.items()}
    assert items["hold_mean"]["status"] == "pass" and items["release_time"]["status"] == "pass"


def test_hysteretic_with_the_sense_in_the_common_return_fails_its_check(tmp_path):
    # the slow decay recirculates through Q2 + Q4 above the common-return resistor: it reads
    # zero in every off-time, so the lower threshold cannot be seen (off-time control can)
    d = design(load_drive(_variant(tmp_path, board=common_return_board(tmp_path))))
    check = next(c for c in d.checks if c.name == "current_mode_sense")
    assert not check.ok and "common return" in check.detail and 'control = "off_time"' in check.detail


def test_an_eddy_terms_step_chatters_on_a_cold_coil(tmp_path):
    """With an eddy term (300 ohm) the sensed current steps by ``V / (R_on + R_e)`` at each
    edge of the slow decay (the on and the recirculating loop have the same resistance:
    Q1 + Q4 or Q2 + Q4 and the inline sense resistor). At the settled coil the band is
    wider than that step; a coil switched on cold has less resistance, a larger step and
    the switch chatters: with a band of 87 mA `current_mode_step` fails there, naming the
    cold corner, the step written afresh (copper R(T) by IEC 60028, alpha = 0.00393 /K)
    above the band. A band sized from the frequency is sized with the cold coil too: it
    clears the cold step."""
    import re

    eddy = ('resistance = "24 ohm"', 'resistance = "24 ohm"\neddy_resistance = "300 ohm"')
    sized = json.loads(run_cli("design", str(_variant(tmp_path, eddy, name="sized.toml")), "--json").stdout)
    step = next(c for c in sized["checks"] if c["name"] == "current_mode_step")
    assert step["ok"] and sized["current_mode"]["sized_from_frequency"], step
    path = _variant(tmp_path, eddy, ('frequency = "20 kHz"\nmode = "current"\n',
                                     'frequency = "20 kHz"\nmode = "current"\nband = "87 mA"\n'))
    d = json.loads(run_cli("design", str(path), "--json").stdout)
    step = next(c for c in d["checks"] if c["name"] == "current_mode_step")
    assert not step["ok"] and "(cold)" in step["detail"], step
    m = re.search(r"\(([\d.]+) V, (-?[\d.]+) degC, coil (-?[\d.]+) degC \(cold\), R([-+][\d.]+)%", step["detail"])
    v, amb, coil, r_pct = (float(x) for x in m.groups())
    drive = load_drive(path)
    r_on = (24.0 * (1 + 0.00393 * (coil - 20.0)) * (1 + r_pct / 100) + 2 * drive.switch.on_resistance
            + drive.board.sense.resistance)
    band = d["current_mode"]["band_a"]
    assert v / (r_on + 300.0) > band
    # the settled corners' steps are all within the band (the design passed before)
    assert all(c["supply_v"] / (c["resistance_ohm"] + 2 * drive.switch.on_resistance + drive.board.sense.resistance
                                + 300.0) < band for c in d["corners"])
