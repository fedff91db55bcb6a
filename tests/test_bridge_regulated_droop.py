"""A full bridge's regulated holds -- current mode and the closed loop -- on the drooping bus
(``[supply] source_resistance`` + ``capacitance``, ``sink = true`` or ``false``).

The droop is the peak's (the regulation takes it out of the hold) and the hold's slow decay
draws nothing from the bus; every turn-off's fast decay pushes the current back into the
bus behind the source resistance (coildrive/design/bridge_bus.py), from the regulated
hold's own top, the end of the peak and the over-current trip. A current-mode design also
takes its corners with the coil cold (at the ambient): the lowest bus, the slowest decay.

References, named beside each check (none goes through the package's bus code):

* scipy's ``solve_ivp`` (Radau) of the two circuits written afresh -- the peak here, ``L
  di/dt = v - R_on i``, ``C dv/dt = (V_s - v)/R_s - i``; the fast decay, ``L di/dt = -(R i
  + v + 2 V_d)``, ``C dv/dt = i + (V_s - v)/R_s`` (the feed ``max(V_s - v, 0)/R_s`` when
  the supply cannot sink; tests/test_bridge_droop.py's ``solve_fast_decay``) -- at the
  corner each figure names, the copper's resistance at
  the cold coil from IEC 60028 (alpha 0.00393 /K); the closed loop's hold top from the PWM
  orbit of an RL load, ``I_max = (V/R)(1 - e^(-D T/tau))/(1 - e^(-T/tau))`` (slow decay:
  the same loop on and off, from memory);
* ngspice (batch mode): the hysteretic bridge deck of tests/test_bridge_current.py (Q1's
  gate from a comparator with hysteresis on the coil current, Q2 its complement) with the
  feed resistor of tests/test_bridge_droop.py and Q1 forced on for a peak first, then all
  four open: the lowest bus in the peak, and the release from the state ngspice turns off
  at against the design's range of starting buses.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import BOARDS, run_cli
from test_bridge_current import bridge_variant
from test_bridge_droop import solve_fast_decay

DROOP = ('capacitance = "220 uF"', 'source_resistance = "2 ohm"\ncapacitance = "220 uF"')
SINK = ('sink = false                 # a diode in the feed: the returned energy stays on the bus',
        'sink = true')
HOLDS = {"current": ('frequency = "20 kHz"\n', 'frequency = "20 kHz"\nmode = "current"\n'),
         "closed_loop": ('frequency = "20 kHz"\n', 'frequency = "20 kHz"\nregulation = "closed_loop"\n')}
ALPHA = 0.00393   # /K, annealed copper (IEC 60028)


def _design(tmp_path, hold, sink):
    path = bridge_variant(tmp_path, HOLDS[hold], DROOP, *([SINK] if sink else []), name=f"{hold}{sink:d}.toml")
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    from coildrive.config import load_drive
    return load_drive(path), json.loads(r.stdout)


def _corner(drive, label, cold_temp=None):
    """``(V_s, R_coil, L)`` at a corner label ``"V V, T degC, ..., R+x%, L+y%"``; the coil at
    ``cold_temp`` degC (IEC 60028 copper) or, without it, from the label's ``coil T degC``."""
    parts = [p.strip() for p in label.split(",")]
    v = float(parts[0].split()[0])
    rf = 1.0 + (0.0 if parts[-2] == "R nom" else float(parts[-2][1:-1]) / 100.0)
    lf = 1.0 + (0.0 if parts[-1] == "L nom" else float(parts[-1][1:-1]) / 100.0)
    temp = cold_temp if cold_temp is not None else float(next(p for p in parts if p.startswith("coil")).split()[1])
    c = drive.coil
    return v, c.resistance * (1.0 + ALPHA * (temp - c.reference_temp)) * rf, c.inductance * lf


def _peak(v_s, r_on, ell, r_s, cap, t_end):
    """solve_ivp of the peak on the drooping bus: ``(lowest bus V, current at t_end A)``."""
    from scipy.integrate import solve_ivp

    s = solve_ivp(lambda t, x: [(x[1] - r_on * x[0]) / ell, ((v_s - x[1]) / r_s - x[0]) / cap],
                  [0.0, t_end], [0.0, v_s], method="Radau", rtol=1e-11, atol=1e-13, dense_output=True)
    return float(np.min(s.sol(np.linspace(0.0, t_end, 40001))[1])), float(s.y[0, -1])


@pytest.mark.parametrize("hold, sink", [("current", True), ("current", False), ("closed_loop", True)],
                         ids=["current-sink", "current-no-sink", "closed-loop-sink"])
def test_release_and_buses_match_solve_ivp(tmp_path, hold, sink):
    drive, d = _design(tmp_path, hold, sink)
    sup, rel = d["supply"], d["release"]
    r_s, cap = drive.supply.source_resistance, drive.supply.capacitance
    sw, rsense, v_d = drive.switch.on_resistance, drive.board.sense.resistance, drive.freewheel.diode_drop
    amb = drive.ambient.min
    corners = {c["label"]: c for c in d["corners"]}
    t_peak = d["pull_in"]["longest_peak_s"]   # the longest real peak (the driver's switch lead)

    # the lowest bus: the peak with the coil cold (a current-mode design's corners are its
    # settled coil: the cold pass gives it)
    assert "(cold)" in sup["lowest_bus_corner"]
    v_s, r, ell = _corner(drive, sup["lowest_bus_corner"], amb if hold == "current" else None)
    v_low, _ = _peak(v_s, r + 2 * sw + rsense, ell, r_s, cap, t_peak)
    assert sup["lowest_bus_v"] == pytest.approx(v_low, rel=1e-7)          # scipy solve_ivp (Radau)

    # the release from the hold's top at its worst corner: the cold coil at the lowest supply,
    # from the lowest bus a turn-off can find (the peak's lowest, or V_s - R_s x the most the
    # coil draws after it), the longest drop-out
    label = rel["worst_corner"]
    assert "(cold)" in label and label.startswith(f"{drive.supply.min:g} V")
    v_s, r, ell = _corner(drive, label, amb if hold == "current" else None)
    r_on = r + 2 * sw + rsense
    if hold == "current":
        top = d["current_mode"]["upper_a"]   # hysteretic, no sense delay: the band's top
        assert d["current_mode"]["control"] == "hysteretic" and drive.hold.sense_delay == 0
    else:   # the PWM orbit's top at the duty the loop settles at there (slow decay: R_on both ways)
        duty, period = corners[label]["hold_duty"], 1.0 / d["hold"]["frequency_hz"]
        tau = ell / r_on
        top = v_s / r_on * (1 - math.exp(-duty * period / tau)) / (1 - math.exp(-period / tau))
    v_peak, i_end = _peak(v_s, r_on, ell, r_s, cap, t_peak)
    first = i_end
    if hold == "closed_loop":
        # its hold starts at the preload duty: the first on-time from the peak's end rises on
        # past it, taken on the stiff bus (the RL step V/R + (i0 - V/R) e^{-t/tau})
        t_on = d["timer"]["compare_ticks"] / d["timer"]["period_ticks"] / d["hold"]["frequency_hz"]
        first = v_s / r_on + (i_end - v_s / r_on) * math.exp(-t_on * r_on / ell)
        assert first > i_end
    start = min(v_peak, v_s - r_s * max(i_end, first, top))
    t_drop, t_zero, _, _ = solve_fast_decay(top, start, v_s, r + rsense, ell, v_d, r_s, cap, sink,
                                            drive.release.current, 1e-11, 1e-13)
    assert rel["time_s"] == pytest.approx(t_drop, rel=1e-6)               # scipy solve_ivp (Radau)
    assert rel["zero_time_s"] >= t_zero * (1 - 1e-6)
    # the driver's lockout after a release covers the drooped bus's zero time (whole ticks + 1)
    assert rel["lockout_ticks"] == math.ceil(rel["zero_time_s"] * drive.board.tick.rate - 1e-9) + 1
    stiff = ell / (r + rsense) * math.log((top + (v_s + 2 * v_d) / (r + rsense))
                                          / (drive.release.current + (v_s + 2 * v_d) / (r + rsense)))
    assert rel["time_s"] > stiff * 1.01, "the drooped bus slows the release"

    # the highest bus: the over-current trip from the source's voltage, the cold coil at the
    # highest supply (the least resistance: the most energy back)
    assert sup["highest_bus_event"] == "over-current trip" and "(cold)" in sup["highest_bus_corner"]
    v_s, r, ell = _corner(drive, sup["highest_bus_corner"], amb if hold == "current" else None)
    _, _, v_top, _ = solve_fast_decay(d["adc"]["trip_current_a"], v_s, v_s, r + rsense, ell, v_d, r_s, cap,
                                      sink, drive.release.current, 1e-11, 1e-13)
    assert sup["highest_bus_v"] == pytest.approx(v_top, rel=1e-7)          # scipy solve_ivp (Radau)
    assert rel["peak_switch_voltage_v"] == pytest.approx(v_top + v_d, rel=1e-7)   # + a body diode (inline sense)
    names = {c["name"]: c for c in d["checks"]}
    assert names["capacitor_voltage"]["ok"] and f"{v_top:.4g} V" in names["capacitor_voltage"]["detail"]
    if not sink:   # the pump-up check sees the same (cold) bus
        assert d["topology"]["bridge"]["pumped_bus_v"] == pytest.approx(sup["highest_bus_v"], rel=1e-9)
        assert f"{v_top:.4g} V" in names["bus_pump_up"]["detail"]
    assert not names["supply_droop"]["ok"] and f"{sup['lowest_bus_v']:.4g} V" in names["supply_droop"]["detail"]


@pytest.mark.ngspice
def test_hysteretic_actuation_on_the_drooping_bus_matches_ngspice(tmp_path):
    """ngspice runs a whole actuation of the designed hysteretic hold: Q1 forced on for the
    designed peak (Q4 on), then the comparator of tests/test_bridge_current.py on the coil
    current at the design's thresholds (Q2 its complement, slow decay) for ten periods past
    the settling, then all four open; the feed behind ``RSRC`` = 2 ohm and 100 uF. Against
    it: the lowest bus in the peak (0.1 %), the release from the state ngspice turns off at
    (the regulated hold's own current, the drooped bus) -- drop-out and zero times 1 % plus
    a step, the highest bus 0.1 %, :func:`coildrive.model.bus_decay.decay` --, and the
    design's range of starting buses at that point holds every bus ngspice has from the
    peak to the turn-off, its slowest decay (from the band's top) at least ngspice's."""
    from ngspice_run import run
    from test_bridge_current import _hysteretic_deck
    from test_bridge_droop import droop_netlist
    from test_reference_ngspice_bridge import EDGE, L_COIL, R_COIL, R_SENSE, R_SW, STAGGER, V_D, V_SUP
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.design.bridge_bus import bus_range, decays
    from coildrive.design.hold_current import evaluate_current
    from coildrive.model import bus_decay
    from coildrive.model import supply as bus_model

    r_s, cap = 2.0, 100e-6
    board = tmp_path / "bridge.toml"
    board.write_text((BOARDS / "bridge-m32-fast.toml").read_text().replace(
        'on_resistance = "40 mohm"', f'on_resistance = "{R_SW * 1e3:g} mohm"'))
    path = bridge_variant(tmp_path, HOLDS["current"], SINK,
                          ('capacitance = "220 uF"', f'source_resistance = "{r_s:g} ohm"\ncapacitance = "{cap * 1e6:g} uF"'),
                          ('resistance = "24 ohm"', f'resistance = "{R_COIL:g} ohm"'),
                          ('inductance = "70 mH"', f'inductance = "{L_COIL * 1e3:g} mH"'), board=board)
    drive = load_drive(path)
    assert (drive.board.sense.resistance, drive.freewheel.diode_drop, drive.board.sense.position) == \
        (R_SENSE, V_D, "coil")
    d = design(drive)
    th = d.hold.thresholds
    assert th.control == "hysteretic" and th.delay_s == 0.0
    lo, hi = th.lower_a, th.upper_a
    t_peak = d.pull_in.peak_time_s
    # the model at that point: 24 V, the coil at its reference temperature (R_COIL), nominal parts
    res, cm = evaluate_current(drive, th, np.array([V_SUP]), np.array([20.0]), np.ones(1), np.ones(1),
                               t_peak, coil_temp=np.array([20.0]))
    period = float(cm.period[0])
    i_end = float(res.peak_end_current[0])
    r_on = R_COIL + 2 * R_SW + R_SENSE
    t_rel = t_peak + L_COIL / r_on * math.log(i_end / lo) + 10 * period   # the slow decay to the band, ten periods
    i_drop = drive.release.current
    z = bus_decay.decay(hi, V_SUP, i_drop, V_SUP, r_s, cap, R_COIL + R_SENSE, L_COIL, V_D)
    tend = t_rel + 1.2 * float(z.zero_time)
    t_off = t_rel + 2 * STAGGER
    measures = [f"meas tran vlowpk MIN v(bus) from=0 to={t_peak!r}",
                f"meas tran vlowall MIN v(bus) from=0 to={t_rel!r}",
                f"meas tran vhighall MAX v(bus) from=0 to={t_rel!r}",
                f"meas tran ioff FIND i(VM) AT={t_off!r}", f"meas tran voff FIND v(bus) AT={t_off!r}",
                f"meas tran tdrop WHEN i(VM)={i_drop!r} FALL=1", "meas tran tzero WHEN i(VM)=1e-6 FALL=1",
                f"meas tran vmax MAX v(bus) from={t_off!r} to={tend!r}"]
    gates = {1: "DC 0", 2: "DC 0", 3: "DC 0", 4: f"PULSE(1 0 {t_rel + STAGGER!r} {EDGE} {EDGE} 1 1e3)"}
    step = period / 200
    text = droop_netlist("bridge-cm-droop", gates, tend, step, measures, r_s, cap, True, inline=True)
    deck = _hysteretic_deck(text, lo, hi, t_rel)
    # the coil from zero, Q1 forced on (and Q2 off) for the peak
    deck = deck.replace(f"LCOIL n3 b {L_COIL!r} IC={lo!r}", f"LCOIL n3 b {L_COIL!r} IC=0")
    for old, new in (("BG1 g1 0 V = v(gate) * v(en)", "BG1 g1 0 V = max(v(gate), v(pk)) * v(en)"),
                     ("BG2 g2 0 V = (1 - v(gate)) * v(en)", "BG2 g2 0 V = (1 - max(v(gate), v(pk))) * v(en)")):
        assert old in deck
        deck = deck.replace(old, new)
    deck = deck.replace("VONE one 0 DC 1", f"VONE one 0 DC 1\nVPK pk 0 PULSE(1 0 {t_peak!r} {EDGE} {EDGE} 1 1e3)")
    assert "IC=0" in deck.split("LCOIL")[1].splitlines()[0]
    r = run(tmp_path, "bridge-cm-droop", deck, timeout=120)
    d_spice = bus_decay.decay(r["ioff"], r["voff"], i_drop, V_SUP, r_s, cap, R_COIL + R_SENSE, L_COIL, V_D)
    lo_bus, hi_bus = (float(x[0]) for x in bus_range(drive, res, t_peak, res.peak_end_current))
    runs = decays(drive, res, res.hold.i_max, t_peak, res.peak_end_current)
    b = bus_model.bus(V_SUP, r_s, cap, r_on, L_COIL)
    v_low = float(bus_model.lowest_bus(t_peak, b)[0])
    print(f"bridge current mode on a drooping bus vs ngspice: lowest bus in the peak {v_low:.6e}/{r['vlowpk']:.6e} V "
          f"(the range's bottom {lo_bus:.6e} V), turn-off {r['ioff']:.6e} A at {r['voff']:.6e} V, drop "
          f"{float(d_spice.drop_time):.6e}/{r['tdrop'] - t_off:.6e} s, zero {float(d_spice.zero_time):.6e}/"
          f"{r['tzero'] - t_off:.6e} s, highest bus {float(d_spice.bus_max):.6e}/{r['vmax']:.6e} V")
    # ngspice: the peak through two switches on the drooping bus (its lowest bus, 0.1 %)
    assert r["vlowpk"] == pytest.approx(v_low, rel=1e-3)
    # ... the regulated hold turns off inside its band; the release from there (1 % + a step)
    assert lo * 0.99 <= r["ioff"] <= hi * 1.01
    for name, t_model in (("tdrop", float(d_spice.drop_time)), ("tzero", float(d_spice.zero_time))):
        assert abs(r[name] - t_off - t_model) <= 0.01 * t_model + step, (name, r[name] - t_off, t_model)
    assert r["vmax"] == pytest.approx(float(d_spice.bus_top), rel=1e-3)
    # the design's range of starting buses holds every bus ngspice has up to the turn-off,
    # and its slowest decay from the band's top is at least ngspice's
    assert lo_bus <= r["vlowall"] and r["vhighall"] <= hi_bus * (1 + 1e-6), (lo_bus, hi_bus, r["vlowall"])
    assert max(float(x.drop_time[0]) for x in runs) >= (r["tdrop"] - t_off) * (1 - 1e-3)
    assert max(float(x.zero_time[0]) for x in runs) >= (r["tzero"] - t_off) * (1 - 1e-3)
    assert max(float(x.bus_max[0]) for x in runs) >= r["vmax"] * (1 - 1e-3)


@pytest.mark.parametrize("hold", ["current", "closed_loop"])
def test_simulate_and_the_virtual_device(tmp_path, hold):
    """`coildrive simulate` (a subprocess, 24 V, 20 degC): the peak on the drooping bus (its
    current at the peak's end as solve_ivp of the peak written afresh above has it, to the
    CSV's digits), the hold's phases and the fast release as on the stiff bus; the virtual
    device's capture passes `check` at the low supply hot and the high supply cold, and a
    coil 40 % over its resistance fails (plumbing: the device shares the design's model)."""
    from test_bridge_current import device_checks, simulated_phases
    from coildrive.config import load_drive
    from coildrive.design import design

    path = bridge_variant(tmp_path, HOLDS[hold], DROOP, SINK, name=f"s{hold}.toml")
    drive = load_drive(path)
    d = design(drive)
    w, _, _ = simulated_phases(path, tmp_path)
    t_peak = d.pull_in.peak_time_s
    k = int(np.argmin(np.abs(w["time_s"] - t_peak)))
    assert w["time_s"][k] == pytest.approx(t_peak, rel=1e-6)
    r_on = drive.coil.resistance + 2 * drive.switch.on_resistance + drive.board.sense.resistance
    _, i_end = _peak(24.0, r_on, drive.coil.inductance, drive.supply.source_resistance, drive.supply.capacitance,
                     t_peak)
    assert w["current_a"][k] == pytest.approx(i_end, rel=1e-6)          # scipy solve_ivp (Radau)
    stiff = 24.0 / r_on * (1 - math.exp(-t_peak * r_on / drive.coil.inductance))
    assert i_end < stiff * 0.99, "the droop slows the peak's rise"
    device_checks(d, tmp_path)


@pytest.mark.compiler
@pytest.mark.parametrize("hold", ["current", "closed_loop"])
def test_compiled_driver_in_the_loop_passes_check(tmp_path, hold):
    """gcc builds the reference driver of the design and the coil model runs it (plumbing):
    at 20 V with a 130 degC coil and at 28 V with a -10 degC one `check` passes, the hold
    mean within 0.5 % of the prediction, the release within 5 %."""
    from conftest import require_tool
    from test_bridge_current import compiled_loop_checks
    from coildrive.config import load_drive
    from coildrive.design import design

    require_tool("gcc")
    path = bridge_variant(tmp_path, HOLDS[hold], DROOP, SINK, name=f"f{hold}.toml")
    compiled_loop_checks(design(load_drive(path)), tmp_path, 5e-3)
