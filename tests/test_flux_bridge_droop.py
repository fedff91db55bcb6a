"""A saturating coil (a flux-linkage curve) on a full bridge on the drooping bus
(``[supply] source_resistance`` + ``capacitance``, ``sink = true`` or ``false``) against the
outside world.

The peak through two switches is coildrive/model/flux_bus.py's run; the fast decay into the
bus behind ``R_s`` and ``C`` is coildrive/model/flux_bus_decay.py (stepped, the bus's
``R_s C`` relaxation exact; a supply that cannot sink blocks at the source's voltage and
the rest charges ``C`` alone). References:

* ngspice (batch mode): the element-level bridge of tests/test_reference_ngspice_bridge.py
  with the flux-controlled inductor of tests/test_flux_ngspice.py in place of ``LCOIL``
  and the feed resistor ``RSRC`` of tests/test_bridge_droop.py (after it, for a supply
  that cannot sink, the ideal feed diode ``BFEED``): the current at turn-off, the lowest
  bus in the peak, the drop-out and zero times and the highest bus;
* scipy's ``solve_ivp`` (Radau) of the decay's two equations with ``L_d(i)`` from the
  same curve, written afresh here (the feed ``max(V_s - v, 0)/R_s`` when it cannot sink),
  terminal event at zero current.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import run_cli
from ngspice_run import run

from coildrive.model import bus_decay, flux, flux_bus, flux_bus_decay
from coildrive.model import supply as bus_model
from test_bridge_droop import droop_netlist
from test_bridge_eddy import _eddy
from test_flux_bridge import bridge_curve
from test_reference_ngspice_bridge import (COILS, EDGE, I_DROP, L_COIL, R_COIL, R_SENSE, R_SW, STAGGER, V_D, V_SUP,
                                           _coil_netlist, _on_until)

COIL = COILS["curve"]


def against_ngspice(tmp_path, r_s, c, sink, r_e=None, coil=COIL):
    """The coil's peak through two switches on the drooping bus (1.5 x its time to 0.55 A)
    and the fast decay into the bus from the state ngspice has at the turn-off, against
    ngspice: the element-level bridge with ``RSRC`` and the flux-controlled inductor of the
    curve (``coil`` a number: the linear ``LCOIL`` of that many H; with ``r_e`` ohm across
    it, the magnetising current's ammeter ``VLM`` in series:
    :func:`test_bridge_eddy._eddy`; the pull-in, the current at turn-off and the drop-out
    are then the magnetising current's, the zero time the terminal current's)."""
    r_on = R_COIL + 2 * R_SW + R_SENSE
    eddy = {} if r_e is None else {"r_e": r_e}
    if isinstance(coil, flux.FluxCoil):
        peak = flux_bus
        fast = flux_bus_decay.decay if sink else flux_bus_decay.decay_no_sink
    else:   # (the linear coil without an eddy term: tests/test_bridge_droop.py)
        peak, fast = bus_model, bus_decay.eddy_decay if sink else bus_decay.eddy_decay_no_sink
    b = peak.bus(V_SUP, r_s, c, r_on, coil, r_e)
    t_on = 1.5 * float(peak.rise_time(0.55, b))
    i_on, v_on = (float(x) for x in peak.state(t_on, b))
    v_low = float(peak.lowest_bus(t_on, b)[0])
    d = fast(i_on, v_on, I_DROP, V_SUP, r_s, c, R_COIL + R_SENSE, coil, V_D, **eddy)
    t_end = max(float(d.zero_time), float(d.drop_time))
    step = t_end / 4000
    t_off = t_on + EDGE / 2 + STAGGER
    tend = t_off + 1.3 * t_end
    # Q1 on from the start (an eddy term's terminal current steps at switch-on, and a
    # switch edge there stalls ngspice's time step), off half an edge after t_on as a
    # pulse from 0 would be
    gates = {1: _on_until(t_on + EDGE / 2), 2: "DC 0", 3: "DC 0", 4: _on_until(t_off)}
    im = "i(VM)" if r_e is None else "i(VLM)"
    measures = [f"meas tran ioff FIND {im} AT={t_off!r}", f"meas tran voff FIND v(bus) AT={t_off!r}",
                f"meas tran vlow MIN v(bus) from=0 to={t_off!r}",
                f"meas tran tdrop WHEN {im}={I_DROP!r} FALL=1", "meas tran tzero WHEN i(VM)=1e-6 FALL=1",
                f"meas tran vmax MAX v(bus) from={t_off!r} to={tend!r}"]
    text = droop_netlist("curve-bridge-droop", gates, tend, step, measures, r_s, c, sink)
    if not isinstance(coil, flux.FluxCoil):
        text = text.replace(f"LCOIL n2 b {L_COIL!r}", f"LCOIL n2 b {coil!r}")
    res = run(tmp_path, "curve-bridge-droop", _coil_netlist(text if r_e is None else _eddy(text, r_e), coil))
    # the release from the state ngspice has at turn-off
    d = fast(res["ioff"], res["voff"], I_DROP, V_SUP, r_s, c, R_COIL + R_SENSE, coil, V_D, **eddy)
    print(f"{'curve' if peak is flux_bus else 'linear'} bridge on a drooping bus (sink={sink}, R_e={r_e}) vs ngspice: i_off {i_on:.6e}/{res['ioff']:.6e} A, "
          f"lowest bus {v_low:.6e}/{res['vlow']:.6e} V, drop {float(d.drop_time):.6e}/{res['tdrop'] - t_off:.6e} s, "
          f"zero {float(d.zero_time):.6e}/{res['tzero'] - t_off:.6e} s, highest bus {float(d.bus_top):.6e}/"
          f"{res['vmax']:.6e} V")
    # ngspice: the peak through two switches on the drooping bus (1 %; the buses 0.1 %)
    assert res["ioff"] == pytest.approx(i_on, rel=0.01)
    assert res["voff"] == pytest.approx(v_on, rel=1e-3)
    assert res["vlow"] == pytest.approx(v_low, rel=1e-3)
    # ... the release's times within 1 % plus one step, the highest bus within 0.1 %
    for name, t_model in (("tdrop", float(d.drop_time)), ("tzero", float(d.zero_time))):
        assert abs(res[name] - t_off - t_model) <= 0.01 * t_model + step, (name, res[name] - t_off, t_model)
    assert res["vmax"] == pytest.approx(max(float(d.bus_top), res["voff"]), rel=1e-3)
    assert float(d.bus_max) > V_SUP + 0.05    # the returned current lifts the bus above the source
    return d


@pytest.mark.ngspice
@pytest.mark.parametrize("r_s, c, sink", [(1.5, 100e-6, True), (1.5, 100e-6, False)], ids=["sink", "no-sink"])
def test_curve_bridge_peak_and_release_on_the_drooping_bus_match_ngspice(tmp_path, r_s, c, sink):
    against_ngspice(tmp_path, r_s, c, sink)


@pytest.mark.parametrize("sink", [True, False], ids=["sink", "no-sink"])
def test_curve_fast_decay_into_the_bus_against_solve_ivp(sink):
    r = R_COIL + R_SENSE
    # (i0 A, v0 V, R_s ohm, C F): a cable and a small capacitor; a battery lead and a large
    # one (the bus rings); a stiff source (R_s C = 2.35 us, far below the decay's ms)
    cases = [(0.9, 23.0, 1.5, 100e-6), (0.9, 24.0, 0.5, 4.7e-3), (0.6, 23.9, 0.005, 470e-6)]
    i0s, v0s, r_ss, cs = (np.array(x) for x in zip(*cases[:2]))     # the first two as one array
    d = (flux_bus_decay.decay if sink else flux_bus_decay.decay_no_sink)(i0s, v0s, I_DROP, V_SUP, r_ss, cs, r, COIL,
                                                                         V_D)
    one = (flux_bus_decay.decay if sink else flux_bus_decay.decay_no_sink)(
        cases[2][0], cases[2][1], I_DROP, V_SUP, cases[2][2], cases[2][3], r, COIL, V_D)
    for k, (i0, v0, r_s, c) in enumerate(cases):
        t_zero, t_drop, v_top, _, q = curve_reference(i0, v0, r_s, c, r, sink, rtol=1e-10)
        got = [float(np.ravel(x)[k]) for x in (d.zero_time, d.drop_time, d.bus_max, d.charge)] if k < 2 else \
            [float(x) for x in (one.zero_time, one.drop_time, one.bus_max, one.charge)]
        # scipy solve_ivp (Radau, rtol 1e-10): the times, the highest bus and the charge to 1e-5
        assert got == pytest.approx([t_zero, t_drop, v_top, q], rel=1e-5), (k, got)


def curve_reference(i0, v0, r_s, c, r, sink=True, rtol=1e-11, i_c=0.0, coil=COIL):
    """scipy's solve_ivp (Radau) of the curve's fast decay into the bus, written afresh:
    ``L_d(i) di/dt = -(R i + v + 2 V_d)``, ``C dv/dt = i + feed - i_c`` (the feed ``(V_s -
    v)/R_s``, never below 0 when it cannot sink; ``i_c`` A drawn off the bus), ``q' = i``,
    to the current's zero: ``(zero s, drop-out s, highest bus V, bus at zero V, charge C)``."""
    from scipy.integrate import solve_ivp

    def f(t, x):
        feed = (V_SUP - x[1]) / r_s
        ld = float(coil.curve.incremental(x[0]))
        return [-(r * x[0] + x[1] + 2 * V_D) / ld, (x[0] + (feed if sink else max(feed, 0.0)) - i_c) / c, x[0]]

    def zero(t, x):
        return x[0]
    zero.terminal, zero.direction = True, -1

    def drop(t, x):
        return x[0] - I_DROP
    s = solve_ivp(f, [0, 1], [i0, v0, 0.0], method="Radau", events=[zero, drop], rtol=rtol, atol=rtol * 1e-2,
                  dense_output=True)
    t_zero, (_, v_z, q) = s.t_events[0][0], s.y_events[0][0]
    v_top = max(float(np.max(s.sol(np.linspace(0, t_zero, 20001))[1])), V_SUP - r_s * i_c)
    return t_zero, s.t_events[1][0], v_top, v_z, q


def test_curve_bridge_design_on_the_drooping_bus(tmp_path):
    """End to end: the saturating bridge example with a 2 ohm source designs (was refused)
    and its release takes the bus above the source and the source's voltage."""
    p = bridge_curve(tmp_path, sink=True)
    text = p.read_text()
    p.write_text(text.replace("sink = true", 'sink = true\nsource_resistance = "2 ohm"', 1))
    r = run_cli("design", str(p), "--json", "--samples", "100")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    sup, rel = doc["supply"], doc["release"]
    # the bus rises above the highest supply (28 V) as the release returns the current through R_s
    assert sup["highest_bus_v"] > 28.0 and sup["highest_bus_event"]
    assert rel["peak_switch_voltage_v"] >= sup["highest_bus_v"] + 0.7
    assert sup["lowest_bus_v"] < 20.0
    assert [c for c in doc["checks"] if c["name"] == "capacitor_voltage"][0]["ok"]
