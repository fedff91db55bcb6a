"""A full bridge's mixed-decay hold (``hold.fast_fraction``) on the drooping bus with a
flux-linkage curve or an eddy-current term (``[coil] eddy_resistance``), on a supply that
sinks or not. The bounds of the linear coil carry over with the coil's own top current:
on a supply that sinks the fast parts' rise above the source
(:func:`coildrive.model.bus_decay.mixed_hold_rise`, the current returned into the bus at
most the larger of the terminal and the magnetising current's top: in a fast part the
eddy branch's reversed voltage puts the terminal current below the magnetising one), the
top of the release's starting buses, whose fast decay from a bus above the source is the
curve's stepped run or the eddy term's closed form; on one that cannot, the coil's top
stored energy (a curve's ``int i dpsi``, the magnetising branch's) landing on the
capacitor (:func:`coildrive.model.bus_decay.no_sink_energy_top`). References:

* scipy's ``solve_ivp`` (Radau, rtol 1e-11): the fast decay's equations written afresh in
  tests/test_eddy_bridge_droop.py (``_reference``: the magnetising current, the bus and
  the charge, the terminal current from the loop through the body diodes, a curve's
  ``L_d(i)``) and, for a curve without an eddy term, tests/test_flux_bridge_droop.py
  (``curve_reference``), here from buses above the source (the mixed-decay hold's starts): the
  times, the highest bus, the bus at the zero and the charge to 1e-5;
* ngspice (batch mode): the mixed-decay hold deck of tests/test_bridge_mixed_droop.py
  with the flux-controlled inductor of tests/test_flux_ngspice.py and/or the eddy
  resistor across the inductor (tests/test_bridge_eddy.py): the highest bus over the hold
  at or below the bound with ngspice's own top currents, and the release from the state
  ngspice turns off at within 1 % plus two steps (times) and 0.1 % (the highest bus).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import run_cli
from ngspice_run import run
from test_bridge_droop import droop_netlist
from test_bridge_eddy import _eddy
from test_bridge_mixed_droop import _gates, _mixed
from test_eddy_bridge_droop import _reference
from test_flux_bridge_droop import curve_reference
from test_flux_droop import CURVE_I, CURVE_PSI
from test_reference_ngspice_bridge import (COILS, I_DROP, L_COIL, R_COIL, R_SENSE, R_SW, V_D, V_SUP,
                                           _coil_netlist)

from coildrive.model import bus_decay, flux_bus_decay
from coildrive.model.eddy import stored_energy
from coildrive.model.rl import rise_time

CURVE = COILS["curve"]


@pytest.mark.parametrize("kind", ["curve", "eddy", "curve+eddy"])
def test_fast_decay_from_a_bus_above_the_source_against_solve_ivp(kind):
    """(i0 A, v0 V, R_s ohm, C F): far enough above the source that the bus falls first
    (v0 - V_s > R_s i0), a little above it on a small capacitor (it rises), and on a
    battery lead's large one."""
    r = R_COIL + R_SENSE
    cases = [(0.9, V_SUP + 2.0, 1.5, 100e-6), (0.6, V_SUP + 0.3, 1.5, 10e-6), (0.9, V_SUP + 1.0, 0.5, 4.7e-3)]
    i0, v0, r_s, c = (np.array(x) for x in zip(*cases))
    coil = L_COIL if kind == "eddy" else CURVE
    r_e = None if kind == "curve" else 150.0
    fast = bus_decay.eddy_decay if kind == "eddy" else flux_bus_decay.decay
    d = fast(i0, v0, I_DROP, V_SUP, r_s, c, r, coil, V_D, *(() if r_e is None else (r_e,)))
    for k, case in enumerate(cases):
        ref = (curve_reference(*case, r) if r_e is None else _reference(coil, *case[:2], I_DROP, *case[2:], r, r_e)[0][:5])
        got = [float(x[k]) for x in (d.zero_time, d.drop_time, d.bus_max, d.bus_at_zero, d.charge)]
        print(f"{kind} case {k}: " + ", ".join(f"{g / e - 1:+.1e}" for g, e in zip(got, ref)) + " (vs solve_ivp)")
        # scipy solve_ivp (Radau, rtol 1e-11): the times, the buses and the charge to 1e-5
        assert got == pytest.approx(ref, rel=1e-5), (k, got, ref)
    assert float(d.bus_max[0]) == pytest.approx(V_SUP + 2.0, rel=1e-12)   # it fell first: the start


@pytest.mark.ngspice
@pytest.mark.parametrize("kind, sink", [("curve", True), ("eddy", True), ("curve", False)],
                         ids=["curve", "eddy", "curve-no-sink"])
def test_mixed_hold_with_a_curve_or_eddy_term_against_ngspice(tmp_path, kind, sink):
    r_s, cap, duty, fast, r_e = 1.5, 10e-6, 0.25, 0.5, 150.0
    coil = CURVE if kind == "curve" else L_COIL
    r_on = R_COIL + 2 * R_SW + R_SENSE
    t_peak = 1.5 * float(rise_time(0.55, 0.0, V_SUP, r_on, L_COIL))
    period, periods = 1.0 / 20e3, 12   # (the flux-controlled inductor is slow to step: a short run)
    t_rel = t_peak + (periods - 1) * period + (duty + (1 + fast) / 2 * (1 - duty)) * period   # mid-slow
    step = period / 200
    # (the flux-controlled inductor steps slowly near the current's zero: a curve's run ends
    # at the turn-off, its release from a bus above the source is checked by solve_ivp above)
    tend = t_rel + (1.5e-3 if kind == "eddy" else 2 * step)
    im = "i(VLM)" if kind == "eddy" else "i(VM)"
    measures = [f"meas tran itop MAX i(VM) from=0 to={t_rel!r}", f"meas tran imtop MAX {im} from=0 to={t_rel!r}",
                f"meas tran vhigh MAX v(bus) from={t_peak!r} to={t_rel!r}",
                f"meas tran ioff FIND {im} AT={t_rel - 2e-9!r}", f"meas tran voff FIND v(bus) AT={t_rel - 2e-9!r}"]
    if kind == "eddy":
        measures += [f"meas tran tdrop WHEN {im}={I_DROP!r} FALL=LAST", "meas tran tzero WHEN i(VM)=1e-6 FALL=LAST",
                     f"meas tran vmax MAX v(bus) from={t_rel!r} to={tend!r}"]
    text = droop_netlist(f"mixed hold, {kind}", _gates(t_peak, duty, fast, period, periods, t_rel),
                         tend, step, measures, r_s, cap, sink, inline=True)
    text = _eddy(text, r_e) if kind == "eddy" else _coil_netlist(text, coil)
    res = run(tmp_path, "bridge-mixed-coils", text)
    if sink:
        returned = max(res["itop"], res["imtop"])
        bound = V_SUP + float(bus_decay.mixed_hold_rise(r_s, cap, returned, fast * (1 - duty) * period, period))
    else:
        bound = float(bus_decay.no_sink_energy_top(V_SUP, cap, stored_energy(coil, res["imtop"])))
    print(f"{kind} (sink={sink}): highest bus {res['vhigh']:.6f} V in the hold, bound {bound:.6f} V, "
          f"turn-off from {res['voff']:.6f} V")
    assert V_SUP + 0.2 < res["vhigh"] <= bound and res["voff"] > V_SUP
    if kind != "eddy":
        return
    # the release from the state ngspice turns off at (from above the source)
    d = bus_decay.eddy_decay(res["ioff"], res["voff"], I_DROP, V_SUP, r_s, cap, R_COIL + R_SENSE, coil, V_D, r_e)
    print(f"release: drop {float(d.drop_time):.6e}/{res['tdrop'] - t_rel:.6e} s, zero {float(d.zero_time):.6e}/"
          f"{res['tzero'] - t_rel:.6e} s, top {float(d.bus_max):.6f}/{res['vmax']:.6f} V")
    for name, t_model in (("tdrop", float(d.drop_time)), ("tzero", float(d.zero_time))):
        assert abs(res[name] - t_rel - t_model) <= 0.01 * t_model + 2 * step, (name, res[name] - t_rel, t_model)
    assert res["vmax"] == pytest.approx(max(float(d.bus_max), res["voff"]), rel=1e-3)


def _coil(path, kind):
    """``path``'s 70 mH coil as the curve of tests/test_flux_droop.py, with a 200 ohm eddy
    term, or both."""
    curve = (f"flux_current = {list(CURVE_I)}\nflux_linkage = {[f'{1e3 * x:g} mWb' for x in CURVE_PSI]}\n"
             ).replace("'", '"')
    coil = {"curve": curve, "eddy": 'inductance = "70 mH"\neddy_resistance = "200 ohm"\n',
            "curve+eddy": curve + 'eddy_resistance = "200 ohm"\n'}[kind]
    path.write_text(path.read_text().replace('inductance = "70 mH"\n', coil))
    return path


@pytest.mark.parametrize("kind, sink", [("curve", "true"), ("eddy", "true"), ("eddy", "false")])
def test_design_end_to_end(tmp_path, kind, sink):
    """End to end (was refused): the mixed-decay hold designs; on a supply that sinks the
    fast parts lift the highest starting bus above the slow-decay hold's; on one that
    cannot, the pumped bus is the energy bound at the coil's top, the highest bus too;
    simulate writes the actuation (a curve's peak on the drooping bus: plumbing)."""
    from coildrive.config import load_drive
    from coildrive.design import design

    path = _coil(_mixed(tmp_path, sink=sink), kind)
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    d = json.loads(r.stdout)
    slow = design(load_drive(_coil(_mixed(tmp_path, sink=sink, name="slow", fast=0), kind))).to_dict()
    b, s, s0 = d["topology"]["bridge"], d["supply"], slow["supply"]
    assert b["hold_decay"] == "mixed" and slow["topology"]["bridge"]["hold_decay"] == "slow"
    hold = {o["event"]: o for o in d["release"]["turn_offs"]}["end of hold"]
    hold0 = {o["event"]: o for o in slow["release"]["turn_offs"]}["end of hold"]
    assert hold["switch_voltage_v"] > hold0["switch_voltage_v"]
    if sink == "true":
        assert "fast part" in s["ripple_method"] and s["ripple_current_a"] > s0["ripple_current_a"]
        assert {c["name"] for c in d["checks"]} >= {"supply_droop", "capacitor_voltage"}
    else:
        assert s["highest_bus_v"] == pytest.approx(b["pumped_bus_v"], rel=1e-12)
        assert {c["name"] for c in d["checks"]} >= {"bus_pump_up", "capacitor_voltage"}
    # simulate draws it (the peak on the drooping bus, the mixed-decay hold, the release)
    csv = tmp_path / "sim.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "60", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    rows = np.loadtxt(csv, delimiter=",", skiprows=1)
    assert rows[-1, 1] == 0.0 and np.max(rows[:, 1]) > 0.3
