"""A boosted peak on a full bridge on a drooping main supply (``[supply] boost`` with
``source_resistance`` and ``capacitance``, ``sink = true`` or ``false``): the peak runs
from the boost capacitor while the main supply's diode blocks, the hold takes over from
the main bus at the hand-over (slow decay: its off-times draw nothing), and every
turn-off's fast decay returns the coil's current through two body diodes into the
drooping main bus, while the boost converter, fed from that bus, may still be drawing its
recharge (:func:`coildrive.model.bus_decay.decay_drawn`). References:

* scipy's ``solve_ivp`` (Radau, rtol 1e-11) on the fast decay's equations written afresh
  (tests/test_bridge_droop.py's, the converter a constant current off the bus): ``L di/dt
  = -(R i + v + 2 V_d)``, ``C dv/dt = i - I_c + (V_s - v)/R_s`` (``max(V_s - v, 0)/R_s``
  when the supply cannot sink), to the current's zero -- a supply that sinks, and one that cannot through each of
  its stretches (fed only, fed then blocked to the zero, blocked from the start, blocked
  then fed again, a bus starting above ``V_s - R_s I_c``): the times, the highest bus and
  the charge within 1e-8;
* ngspice (batch mode, ``ngspice -b``): the element-level boosted bridge of
  tests/test_boost_bridge.py (the boost capacitor behind its switch, the main supply's
  diode onto leg A's rail, four ``S`` switches with their body diodes as
  :func:`ngspice_run.knee`) with the main supply behind ``RSRC`` onto ``CBULK`` (after the
  ideal feed diode when it cannot sink) and the converter a constant current sink from the
  hand-over: the boosted peak to the threshold, the hold's PWM from the hand-over (Q2 in
  its off-times: slow decay), then all four open. Checked: the current at the hand-over
  within 1 %, the lowest main bus in the hold within 1 % of the droop (the model's exact
  run, :func:`coildrive.model.supply.hold_from`), and the release from the state ngspice
  turns off at -- drop-out and zero within 1 % plus two steps, the highest bus within 0.1 %
  and Q4's highest voltage (the bus + a body diode) within 1 %.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import run_cli
from ngspice_run import knee, run
from test_boost_bridge import _elements, _netlist, _variant
from test_bridge_droop import solve_fast_decay
from test_reference_ngspice_bridge import EDGE, STAGGER

from coildrive.model import bus_decay


def _drooping(tmp_path, r_s="0.05 ohm", c="1 mF", sink=True, name="droop"):
    """The boosted fuel valve on the bridge board (tests/test_boost_bridge.py) on a main
    supply behind ``r_s`` with ``c`` of bulk capacitance, its converter 100 % efficient."""
    path = _variant(tmp_path)
    text = path.read_text().replace('max = "16 V"', f'max = "16 V"\nsource_resistance = "{r_s}"\n'
                                    f'capacitance = "{c}"\nboost_efficiency = 1\n'
                                    f'sink = {str(sink).lower()}\ncapacitor_voltage = "35 V"', 1)
    out = tmp_path / f"{name}.toml"
    out.write_text(text)
    return out


#: (i0 A, v0 V, V_s V, I_c A, R_s ohm, C F, sink): the stretches named in the docstring.
DECAYS = [
    (0.9, 22.0, 24.0, 0.4, 0.5, 4.7e-3, True),      # a supply that sinks: V_s' the source
    (0.9, 22.0, 24.0, 0.4, 0.5, 4.7e-3, False),     # never reaches V_s: fed only
    (3.0, 20.0, 24.0, 1.0, 2.0, 10e-6, False),      # fed, then blocked to the zero
    (1.5, 24.0, 24.0, 0.6, 0.5, 47e-6, False),      # blocked from the start
    (0.7, 16.0, 16.0, 0.56, 0.05, 1e-3, False),     # blocked, then fed again to the zero
    (0.3, 24.0, 24.0, 1.0, 2.0, 10e-6, False),      # above V_s - R_s I_c: the bus falls first
]


@pytest.mark.parametrize("i0, v0, v_s, i_c, r_s, c, sink", DECAYS)
def test_fast_decay_with_the_converter_against_solve_ivp(i0, v0, v_s, i_c, r_s, c, sink):
    r, ell, v_d, i_drop = 25.0, 70e-3, 0.8, 0.12
    ref = solve_fast_decay(i0, v0, v_s, r, ell, v_d, r_s, c, sink, i_drop, rtol=1e-11, atol=1e-13, i_c=i_c)
    d = bus_decay.decay_drawn(i0, v0, i_drop, v_s, i_c, r_s, c, r, ell, v_d, sink)
    got = (float(d.drop_time), float(d.zero_time), max(float(d.bus_top), v0, v_s), float(d.charge))
    # scipy solve_ivp (Radau, rtol 1e-11): the times, the highest bus and the charge to 1e-8
    for name, g, e in zip(("drop", "zero", "top", "charge"), got, ref):
        assert g == pytest.approx(e, rel=1e-8), (name, g, e)


def test_no_converter_is_the_supply_that_cannot_sink():
    """``I_c = 0`` runs :func:`~coildrive.model.bus_decay.decay_no_sink`'s circuit (its
    blocked stretch the series RLC in closed form): the same numbers (consistency, the
    two written independently)."""
    args = (np.array([0.9, 3.0, 1.5]), np.array([23.0, 20.0, 24.0]), 0.12, 24.0)
    rest = (np.array([1.5, 2.0, 0.5]), np.array([100e-6, 10e-6, 47e-6]), 25.0, 70e-3, 0.8)
    a = bus_decay.decay_drawn(*args, 0.0, *rest, sink=False)
    b = bus_decay.decay_no_sink(*args, *rest)
    for name in ("drop_time", "zero_time", "bus_top", "charge", "bus_at_zero"):
        assert getattr(a, name) == pytest.approx(getattr(b, name), rel=1e-9), name


def _gates(t_hand, duty, period, periods, t_off):
    """PWL gates: the boost switch on until the hand-over; Q1 on through the peak into the
    hold's first on-time, then on for ``duty`` of each ``period``; Q2 on in the off-times
    (one STAGGER after Q1 opens); Q4 on until one STAGGER after the final turn-off at
    ``t_off`` s (the end of the last on-time); Q3 off."""
    def pwl(points):
        return "PWL(" + " ".join(f"{a!r} {b}" for a, b in points) + ")"
    q1, q2 = [(0.0, 1)], [(0.0, 0)]
    for m in range(periods):
        t0 = t_hand + m * period
        off = t0 + duty * period
        q1 += [(off, 1), (off + EDGE, 0)]
        q2 += [(off + STAGGER, 0), (off + STAGGER + EDGE, 1)]
        if m + 1 < periods:
            nxt = t0 + period
            q2 += [(nxt, 1), (nxt + EDGE, 0)]
            q1 += [(nxt + STAGGER, 0), (nxt + STAGGER + EDGE, 1)]
    q2 = q2[:-2]            # the last off-time is the release: Q2 stays open
    return {"boost": f"PULSE(1 0 {t_hand - EDGE / 2!r} {EDGE} {EDGE} 1 2)", "high_a": pwl(q1),
            "low_a": pwl(q2), "high_b": "DC 0", "low_b": f"PULSE(1 0 {t_off + STAGGER - EDGE / 2!r} {EDGE} {EDGE} 1 2)"}


@pytest.mark.ngspice
@pytest.mark.parametrize("r_s, cap, sink, duty", [(0.05, 1e-3, True, 0.4), (0.5, 47e-6, False, 0.85)],
                         ids=["sink", "no-sink"])
def test_actuation_on_the_drooping_bus_against_ngspice(tmp_path, r_s, cap, sink, duty):
    from coildrive.config import load_drive
    from coildrive.design.boost import nominal_trip
    from coildrive.design.supply import converter_current
    from coildrive.model import boost as boost_model
    from coildrive.model import supply as bus_model
    from coildrive.model.circuit import loop
    from coildrive.model.waveform import nominal_boost

    supply, temp = 9.0, 90.0
    drive = load_drive(_drooping(tmp_path, f"{r_s} ohm", f"{cap * 1e6:g} uF", sink))
    s = drive.supply
    lp = loop(drive, supply, temp)
    rel = loop(drive, supply, temp, path="release")
    b = nominal_boost(drive, float(lp.r_on), float(lp.inductance))
    t_hand = float(boost_model.threshold_time(nominal_trip(drive), b))
    i_hand = float(boost_model.state(t_hand, b)[0])
    period, periods = 1.0 / 20e3, 12
    i_conv = float(converter_current(drive, supply, i_hand))
    bus = bus_model.bus(supply - r_s * i_conv, r_s, cap, float(lp.r_on), float(lp.inductance))
    low, when, settled = (float(x) for x in bus_model.hold_from(bus, i_hand, supply, duty, period,
                                                                float(lp.r_off), float(lp.v_off)))
    assert settled and when < (periods - 1) * period and supply - low > 0.05   # a droop worth checking
    t_off = t_hand + (periods - 1) * period + duty * period
    e = _elements(drive, lp, supply, s.boost, s.boost_capacitance)
    feed = ["VFEED main src DC 0"] + ([f"RSRC src bus {r_s!r}"] if sink else
                                      [f"RSRC src fd {r_s!r}", knee("BFEED", "fd", "bus", 0.0)])
    feed += [f"CBULK bus 0 {cap!r} IC={supply!r}", "CRAIL raila 0 1e-9",
             f"ICONV bus 0 PULSE(0 {i_conv!r} {t_hand - 0.5e-9!r} 1e-9 1e-9 1 2)"]
    step = period / 400
    tend = t_off + 1.5e-3
    after = f"from={t_off!r} to={tend!r}"
    text = _netlist("boosted bridge on a drooping main bus", e, _gates(t_hand, duty, period, periods, t_off),
                    tend, step, [f"meas tran ihand FIND i(VM) AT={t_hand - 2e-9!r}",
                                 f"meas tran vlow MIN v(bus) from={t_hand!r} to={t_off!r}",
                                 f"meas tran ioff FIND i(VM) AT={t_off - 2e-9!r}",
                                 f"meas tran voff FIND v(bus) AT={t_off - 2e-9!r}",
                                 f"meas tran tdrop WHEN i(VM)={drive.release.current!r} FALL=LAST",
                                 "meas tran tzero WHEN i(VM)=1e-6 FALL=LAST",
                                 f"meas tran vmax MAX v(bus) {after}", f"meas tran vq4 MAX v(b) {after}"])
    text = text.replace("VFEED main bus DC 0\n", "\n".join(feed) + "\n")
    res = run(tmp_path, "boost-bridge-droop", text)
    # ngspice: the current the hold takes over within 1 %, the droop in the hold within 1 %
    assert res["ihand"] == pytest.approx(i_hand, rel=0.01), (res["ihand"], i_hand)
    assert supply - res["vlow"] == pytest.approx(supply - low, rel=0.01), (res["vlow"], low)
    # the release from the state ngspice turns off at, the converter still drawing
    d = bus_decay.decay_drawn(res["ioff"], res["voff"], drive.release.current, supply, i_conv, r_s, cap,
                              float(rel.r_off), float(rel.inductance), drive.freewheel.diode_drop, sink)
    print(f"boosted bridge, drooping bus ({r_s} ohm, {cap * 1e6:g} uF, sink {sink}) vs ngspice: "
          f"droop {supply - low:.6e}/{supply - res['vlow']:.6e} V, drop {float(d.drop_time):.6e}/"
          f"{res['tdrop'] - t_off:.6e} s, zero {float(d.zero_time):.6e}/{res['tzero'] - t_off:.6e} s, "
          f"top {float(d.bus_top):.6e}/{res['vmax']:.6e} V")
    for name, t_model in (("tdrop", float(d.drop_time)), ("tzero", float(d.zero_time))):
        assert abs(res[name] - t_off - t_model) <= 0.01 * t_model + 2 * step, (name, res[name] - t_off, t_model)
    top = max(float(d.bus_top), res["voff"])
    assert res["vmax"] == pytest.approx(top, rel=1e-3), (res["vmax"], top)
    if not sink:   # the return pumps the bus above the source: the feed blocks on the way
        assert res["vmax"] > supply + 0.2
    # Q4 (and Q1) see the highest bus + a body diode (the sense resistor inline)
    assert res["vq4"] == pytest.approx(top + drive.freewheel.diode_drop, rel=0.01)


@pytest.fixture(scope="module")
def designs(tmp_path_factory):
    """The design JSON of the boosted bridge on the stiff main supply, on a drooping one
    that sinks and on one that cannot (0.05 ohm, 1 mF)."""
    from coildrive.config import load_drive
    from coildrive.design import design

    tmp = tmp_path_factory.mktemp("boost-bridge-droop")
    r = run_cli("design", str(_drooping(tmp, name="sink")), "--json")     # one end to end
    assert r.returncode in (0, 1), r.stderr
    return {"sink": json.loads(r.stdout), "stiff": design(load_drive(_variant(tmp))).to_dict(),
            "no-sink": design(load_drive(_drooping(tmp, sink=False, name="no-sink"))).to_dict()}


def test_design_on_the_drooping_bus(designs):
    """End to end: the supply's figures come from the hand-over, every turn-off returns
    into the drooping bus (slower than on the stiff supply, from buses down to the floor
    under the hold and the converter), the bus rises above the highest supply, and the
    switches see it plus a body diode -- or the boost's turn-off, higher still."""
    stiff = designs["stiff"]
    for name in ("sink", "no-sink"):
        d = designs[name]
        s, rel, checks = d["supply"], d["release"], {c["name"]: c for c in d["checks"]}
        assert d["topology"]["name"] == "full_bridge"
        assert s["handover_current_a"] > 1.0 and s["lowest_bus_method"].startswith("the hold's PWM")
        assert s["lowest_bus_v"] < 9.0 and "hand-over" in checks["supply_droop"]["detail"]
        assert s["highest_bus_v"] > 16.0 and s["highest_bus_event"]
        assert rel["time_s"] > stiff["release"]["time_s"]
        assert rel["zero_time_s"] > stiff["release"]["zero_time_s"]
        assert rel["peak_switch_voltage_v"] >= max(s["highest_bus_v"] + 0.8, d["boost"]["switch_voltage_v"])
        assert d["boost"]["switch_voltage_v"] == pytest.approx(50.4 + 0.8)   # hand-worked: 48 V + 5 % + V_d
    sink, no_sink = designs["sink"], designs["no-sink"]
    assert {c["name"] for c in sink["checks"]} >= {"capacitor_voltage", "supply_droop"}
    # a supply that cannot sink: the highest bus is the pump-up from the source's voltage (the
    # converter drawing never lifts it), checked against the switches and the capacitor once each
    bridge = no_sink["topology"]["bridge"]
    assert no_sink["supply"]["highest_bus_v"] == pytest.approx(bridge["pumped_bus_v"], rel=1e-12)
    names = [c["name"] for c in no_sink["checks"]]
    assert names.count("capacitor_voltage") == 1 and "bus_pump_up" in names
    assert no_sink["supply"]["highest_bus_v"] > sink["supply"]["highest_bus_v"]


def test_the_converter_drawing_slows_the_release(tmp_path, monkeypatch):
    """The release takes the converter drawing its most (the lower bus decays the coil
    slower) as well as idle: without the drawing end the design's release is shorter."""
    from coildrive.config import load_drive
    from coildrive.design import bridge_bus, design

    drive = load_drive(_drooping(tmp_path, "0.5 ohm", "1 mF"))
    both = design(drive).release
    monkeypatch.setattr(bridge_bus, "converter_draw", lambda *a: None)
    idle = design(drive).release
    assert both.time_s > idle.time_s and both.zero_time_s > idle.zero_time_s


def test_mixed_decay_after_the_boost(tmp_path):
    """A mixed-decay hold after the boost designs: the lowest bus after the hand-over then
    the floor (the hold's exact run has no fast parts; they only lift the bus); on a supply
    that cannot sink the highest bus is at least the energy bound at the coil's top (the
    hand-over's or the hold's: the converter's draw only lowers the bus), the pumped bus."""
    import numpy as np

    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model import bus_decay

    for sink in (True, False):
        path = _drooping(tmp_path, sink=sink, name=f"mixed{sink}")
        path.write_text(path.read_text().replace("[hold]", "[hold]\nfast_fraction = 0.3", 1))
        d = design(load_drive(path))
        s = d.supply
        assert s.lowest_bus_method.startswith("a floor") and s.highest_bus_v > 16.0
        if not sink:
            b = d.topology.bridge
            c = [x for x in d.corners if x.supply_v == max(y.supply_v for y in d.corners)]
            top = max(s.handover_current_a, max(x.hold_mean_current_a for x in c))
            low = float(bus_decay.no_sink_energy_top(max(x.supply_v for x in c), b.capacitance_f,
                                                     0.5 * min(x.inductance_h for x in c) * top ** 2))
            assert b.hold_decay == "mixed" and s.highest_bus_v == pytest.approx(b.pumped_bus_v, rel=1e-12)
            assert np.isfinite(s.highest_bus_v) and s.highest_bus_v >= low


def test_a_passing_drooping_drive_simulates_and_runs_in_the_virtual_device(tmp_path):
    """Plumbing (the emulator shares the design's physics): behind 2 mohm the lowest bus
    after the hand-over still reads the supply-min code and the design passes; simulate
    writes the boost and the four switches' columns, and the virtual device's capture
    passes check."""
    from test_boost_high_side import emulated_check_passes

    from coildrive.config import load_drive
    from coildrive.design import design

    path = _drooping(tmp_path, "2 mohm", name="stiffer")
    d = design(load_drive(path))
    assert d.ok and {c.name: c for c in d.checks}["supply_droop"].ok
    csv = tmp_path / "act.csv"
    r = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "40", "--hold-time", "0.5 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    head = csv.read_text().splitlines()[0].split(",")
    assert {"boost_on", "high_a_on", "low_a_on", "high_b_on", "low_b_on", "boost_v"} <= set(head)
    emulated_check_passes(tmp_path, path)


@pytest.mark.compiler
def test_firmware_driver_builds_and_runs(tmp_path):
    """gcc (strict) builds the reference driver of the drooping boosted bridge, which runs
    to the threshold in the loop (plumbing)."""
    from test_boost_high_side import driver_runs_to_threshold

    text = driver_runs_to_threshold(tmp_path, _drooping(tmp_path, "2 mohm", name="stiffer"))
    assert "coil_port_boost" in text and "coil_port_bridge" in text
