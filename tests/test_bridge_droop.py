"""A full bridge on the drooping bus (``[supply] source_resistance`` + ``capacitance``,
``sink = true`` or ``false``) against the outside world.

The fast decay pushes the coil's current back through two body diodes into the bus, which
sits behind the source's resistance with the bulk capacitor across it
(coildrive/model/bus_decay.py, closed form). References:

* ngspice (batch mode): the element-level bridge of tests/test_reference_ngspice_bridge.py
  (voltage-controlled ``S`` switches, one-way body diodes, ``CBULK``) with a resistor
  ``RSRC`` in the feed (and, for a supply that cannot sink, that file's ideal feed diode
  ``BFEED`` after it): the peak through two switches on the drooping bus (the current at
  turn-off, the lowest bus), then the release (the drop-out and zero times, the highest bus
  and the switches' voltage), ``.meas tran`` ``FIND ... AT``, ``WHEN ... FALL=1``, ``MIN``,
  ``MAX``;
* scipy's ``solve_ivp`` (Radau) of the decay's two equations, written afresh here (the
  feed ``max(V_s - v, 0)/R_s`` when it cannot sink), with a terminal event at zero
  current.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from ngspice_run import knee, run

from coildrive.model import bus_decay
from coildrive.model import supply as bus_model
from test_reference_ngspice_bridge import (EDGE, I_DROP, L_COIL, R_COIL, R_SENSE, R_SW, STAGGER, V_D,
                                           V_SUP, _netlist, _on_until, _pulse)

#: (R_s ohm, C F, sink): a long cable with a small capacitor (overdamped), a battery lead
#: with a large one (the bus rings: complex eigenvalues), and the cable behind a diode.
CASES = [(1.5, 100e-6, True), (0.5, 4.7e-3, True), (1.5, 100e-6, False)]


def droop_netlist(title, gates, tend, step, measures, r_s, c, sink, inline=False) -> str:
    """The element-level bridge of tests/test_reference_ngspice_bridge.py with the feed
    resistor ``RSRC`` (``r_s`` ohm; before the ideal feed diode when not ``sink``)."""
    text = _netlist(title, gates, tend, step, measures, capacitance=c, sink=sink, inline=inline)
    if sink:
        return text.replace("VFEED sup bus DC 0", f"VFEED sup src DC 0\nRSRC src bus {r_s!r}")
    feed = knee("BFEED", "sup", "bus", 0.0)
    assert feed in text
    return text.replace(feed, f"RSRC sup src {r_s!r}\n" + knee("BFEED", "src", "bus", 0.0))


@pytest.mark.ngspice
@pytest.mark.parametrize("r_s, c, sink", CASES, ids=["100uF", "4700uF", "100uF-no-sink"])
def test_bridge_peak_and_release_on_the_drooping_bus_match_ngspice(tmp_path, r_s, c, sink):
    r_on = R_COIL + 2 * R_SW + R_SENSE
    b = bus_model.bus(V_SUP, r_s, c, r_on, L_COIL)
    t_on = 1.5 * float(bus_model.rise_time(0.55, b))
    i_on, v_on = (float(x) for x in bus_model.state(t_on, b))
    v_low = float(bus_model.lowest_bus(t_on, b)[0])
    fast = bus_decay.decay if sink else bus_decay.decay_no_sink
    d = fast(i_on, v_on, I_DROP, V_SUP, r_s, c, R_COIL + R_SENSE, L_COIL, V_D)
    t_zero = float(d.zero_time)
    step = t_zero / 4000
    t_off = t_on + EDGE / 2 + STAGGER
    tend = t_off + 1.3 * t_zero
    gates = {1: _pulse(0.0, t_on), 2: "DC 0", 3: "DC 0", 4: _on_until(t_off)}
    after = f"from={t_off!r} to={tend!r}"
    measures = ["let vq1 = v(bus) - v(a)", "let vq4 = v(b) - v(rail)",
                f"meas tran ioff FIND i(VM) AT={t_off!r}", f"meas tran voff FIND v(bus) AT={t_off!r}",
                f"meas tran vlow MIN v(bus) from=0 to={t_off!r}",
                f"meas tran tdrop WHEN i(VM)={I_DROP!r} FALL=1", "meas tran tzero WHEN i(VM)=1e-6 FALL=1",
                f"meas tran vmax MAX v(bus) {after}", f"meas tran vq1max MAX vq1 {after}",
                f"meas tran vq4max MAX vq4 {after}"]
    res = run(tmp_path, "bridge-droop", droop_netlist("bridge-droop", gates, tend, step, measures, r_s, c, sink))
    print(f"bridge on a drooping bus ({r_s} ohm, {c * 1e6:g} uF) vs ngspice: i_off {i_on:.6e}/{res['ioff']:.6e} A, "
          f"lowest bus {v_low:.6e}/{res['vlow']:.6e} V, drop {float(d.drop_time):.6e}/{res['tdrop'] - t_off:.6e} s, "
          f"zero {t_zero:.6e}/{res['tzero'] - t_off:.6e} s, highest bus {float(d.bus_max):.6e}/{res['vmax']:.6e} V")
    # ngspice: the peak through two switches on the drooping bus (1 %; the lowest bus 0.1 %)
    assert res["ioff"] == pytest.approx(i_on, rel=0.01)
    assert res["voff"] == pytest.approx(v_on, rel=1e-3)
    assert res["vlow"] == pytest.approx(v_low, rel=1e-3)
    # the release from the bus ngspice has at turn-off: the times within 1 % plus one step
    d = fast(res["ioff"], res["voff"], I_DROP, V_SUP, r_s, c, R_COIL + R_SENSE, L_COIL, V_D)
    for name, t_model in (("tdrop", float(d.drop_time)), ("tzero", float(d.zero_time))):
        assert abs(res[name] - t_off - t_model) <= 0.01 * t_model + step, (name, res[name] - t_off, t_model)
    # ... the highest bus within 0.1 %, above the source (the design's fixed-bus figure)
    assert res["vmax"] == pytest.approx(float(d.bus_top), rel=1e-3)
    if c < 1e-3:   # the small capacitor: the bus rises well above the source
        assert float(d.bus_max) > V_SUP + 0.5
    # ... the switches see the highest bus + V_d (+ R_sense i from the common return) -- the
    # two peak at either end of the decay, so their sum bounds ngspice's from above, within 1 %
    bound = float(d.bus_top) + V_D + R_SENSE * res["ioff"]
    for name in ("vq1max", "vq4max"):
        assert float(d.bus_top) + V_D - 0.01 * bound <= res[name] <= bound * 1.001, (name, res[name], bound)


def solve_fast_decay(i0, v0, v_s, r, ell, v_d, r_s, c, sink, i_drop, rtol=1e-10, atol=1e-12, i_c=0.0):
    """scipy's ``solve_ivp`` (Radau) of the fast decay into the bus, written afresh: ``L
    di/dt = -(R i + v + 2 V_d)``, ``C dv/dt = i - I_c + (V_s - v)/R_s`` (the feed ``max(V_s
    - v, 0)/R_s`` when the supply cannot sink; ``I_c`` A a constant draw off the bus, a
    boost converter's), with the charge ``int i dt``, to the current's zero: ``(drop-out s,
    zero s, highest bus V -- at least V_s --, charge C)``."""
    from scipy.integrate import solve_ivp

    def f(t, x):
        feed = (v_s - x[1]) / r_s
        return [-(r * x[0] + x[1] + 2 * v_d) / ell, (x[0] - i_c + (feed if sink else max(feed, 0.0))) / c, x[0]]

    def zero(t, x):
        return x[0]
    zero.terminal, zero.direction = True, -1

    def drop(t, x):
        return x[0] - i_drop
    s = solve_ivp(f, [0, 1], [i0, v0, 0.0], method="Radau", events=[zero, drop], rtol=rtol, atol=atol,
                  dense_output=True)
    t_zero = s.t_events[0][0]
    v_top = max(float(np.max(s.sol(np.linspace(0, t_zero, 20001))[1])), v_s)
    return s.t_events[1][0], t_zero, v_top, s.y_events[0][0][2]


@pytest.mark.parametrize("sink", [True, False], ids=["sink", "no-sink"])
@pytest.mark.parametrize("i0, v0, r_s, c", [(0.9, 23.0, 1.5, 100e-6), (0.9, 24.0, 0.5, 4.7e-3),
                                            (3.0, 20.0, 2.0, 10e-6)])
def test_fast_decay_into_the_bus_against_solve_ivp(i0, v0, r_s, c, sink):
    r, l = R_COIL + R_SENSE, L_COIL
    t_drop, t_zero, v_top, charge = solve_fast_decay(i0, v0, V_SUP, r, l, V_D, r_s, c, sink, I_DROP)
    d = (bus_decay.decay if sink else bus_decay.decay_no_sink)(i0, v0, I_DROP, V_SUP, r_s, c, r, l, V_D)
    # scipy solve_ivp (Radau, rtol 1e-10): the times, the highest bus and the charge to 1e-7
    assert float(d.charge) == pytest.approx(charge, rel=1e-7)
    assert float(d.zero_time) == pytest.approx(t_zero, rel=1e-7)
    assert float(d.drop_time) == pytest.approx(t_drop, rel=1e-7)
    assert float(d.bus_max) == pytest.approx(v_top, rel=1e-7)


def _drive(tmp_path, extra: str = "", sink: str = "true", r_s: str = "2 ohm"):
    text = (EXAMPLES / "dosing-valve-bridge-24v.toml").read_text()
    old = 'sink = false                 # a diode in the feed: the returned energy stays on the bus\n'
    assert old in text
    text = text.replace(old, f'sink = {sink}\n' + (f'source_resistance = "{r_s}"\n' if r_s else "") + extra)
    p = tmp_path / f"drive{bool(r_s):d}.toml"
    p.write_text(text)
    return p


def test_bridge_design_on_the_drooping_bus(tmp_path):
    r = run_cli("design", str(_drive(tmp_path)), "--json", "--samples", "300")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    sup, rel = doc["supply"], doc["release"]
    stiff = json.loads(run_cli("design", str(_drive(tmp_path, r_s="")), "--json", "--samples", "300").stdout)
    # the bus rises above the highest supply as the release pushes the current through R_s,
    # and the switches see it plus a body diode
    assert sup["highest_bus_v"] > 28.0 and sup["highest_bus_event"]
    assert rel["peak_switch_voltage_v"] >= sup["highest_bus_v"] + 0.7
    cap = [c for c in doc["checks"] if c["name"] == "capacitor_voltage"]
    assert len(cap) == 1 and cap[0]["ok"] and "50 V rating" in cap[0]["detail"], cap
    # the bus droops during the peak; the release from the drooped bus takes longer than
    # on the stiff bus
    assert sup["lowest_bus_v"] < 20.0
    assert rel["time_s"] > stiff["release"]["time_s"]
    assert rel["lockout_ticks"] >= stiff["release"]["lockout_ticks"]
    # ... and carries more charge through the body diodes (2 V_d int i dt)
    hold = {o["event"]: o for o in rel["turn_offs"]}["end of hold"]
    assert hold["elements_j"]["diode"] > {o["event"]: o for o in stiff["release"]["turn_offs"]}[
        "end of hold"]["elements_j"]["diode"]
    assert rel["peak_switch_voltage_v"] > stiff["release"]["peak_switch_voltage_v"] + 1.0
    # the Monte Carlo draws the same samples (one seed): each release from the drooped bus
    # is at least the stiff bus's, the slowest longer
    mc, mc_stiff = doc["monte_carlo"]["release_time_s"], stiff["monte_carlo"]["release_time_s"]
    assert mc["max"] > mc_stiff["max"] and mc["min"] >= mc_stiff["min"]
    assert doc["pull_in"]["peak_time_s"] >= stiff["pull_in"]["peak_time_s"]


def test_bridge_design_on_the_drooping_bus_without_sink(tmp_path):
    # a supply that cannot sink: the highest bus is the pump-up from the source's voltage
    # (the highest starting bus), one capacitor_voltage check and the bus_pump_up check
    r = run_cli("design", str(_drive(tmp_path, sink="false", r_s="0.5 ohm")), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    sup, bridge = doc["supply"], doc["topology"]["bridge"]
    assert sup["highest_bus_v"] == pytest.approx(bridge["pumped_bus_v"], rel=1e-9)
    assert sup["highest_bus_v"] > 30.0 and sup["lowest_bus_v"] < 20.0
    names = [c["name"] for c in doc["checks"]]
    assert names.count("capacitor_voltage") == 1 and "bus_pump_up" in names and "supply_droop" in names
    assert doc["release"]["peak_switch_voltage_v"] >= sup["highest_bus_v"] + 0.7


# what a bridge on the drooping bus still refuses: tests/test_bridge_regulated_droop.py
