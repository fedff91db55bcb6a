"""A full bridge's current-mode hold with mixed decay on the drooping bus with a
flux-linkage curve or an eddy-current term (``hold.mode = "current"``,
``hold.fast_fraction`` > 0, ``[supply] source_resistance``, ``coil.flux_current`` or
``coil.eddy_resistance``): the hold is its thresholds' orbit on the stiff bus (the curve's
or the eddy term's own, as there), and the bus takes the linear coil's bounds with the
coil's own segments: on a supply that sinks the fast parts' rise above the source
(:func:`coildrive.model.bus_decay.mixed_hold_rise` with each period's longest fast part and
shortest period, :func:`coildrive.design.hold_current.fast_pulses`: the curve's quadrature,
the eddy term's thresholds as magnetising currents at the bus's extremes); on one that
cannot, the energy bound at the coil's top; the release from the starting buses as the
voltage-mode mixed decay's on the drooping bus.

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-10) of the circuit written
afresh (``reference`` of tests/test_bridge_current_mixed_droop.py, the linear coil's too) -- ``C dv/dt = (V_s - v) / R_s - i_bridge`` (a supply that cannot sink: the feed's
current never negative); the coil on each path ``V_loop`` through ``R``: a curve ``di/dt =
(V_loop - R i) / L_d(i)`` with ``L_d`` the derivative of scipy's own
``PchipInterpolator`` through the table (scaled by the tolerance); an eddy term from
Kirchhoff's laws, ``V_loop = R i + v_m`` (KVL), ``i = i_m + v_m / R_e`` (KCL), ``L di_m/dt =
v_m``; on (Q1 + Q4, ``V_loop = v``, ``i_bridge = i``), fast (all four open, ``V_loop =
-(v + 2 V_d)``, ``i_bridge = -i``, the body diodes blocking at the terminal current's
zero, after which ``v_m = -R_e i_m``), slow (Q2 + Q4, ``V_loop = 0``) -- switched by the
thresholds on the sensed (terminal) current as events and the one-shot / off-timer, over
the hold from its first turn-off and then the release. None of it goes through the
package's loop code. The virtual device shares the design's physics: plumbing.
"""

from __future__ import annotations

import json
from types import SimpleNamespace

import numpy as np
import pytest

from conftest import run_cli
from test_bridge_current import bridge_variant
from test_bridge_current_mixed_droop import HOLDS, _point, reference, simulates_and_emulates
from test_flux_bridge import CURVE
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.hold_current import fast_pulses, steady_state
from coildrive.model import bus_decay
from coildrive.model.circuit import loop

COILS = {"curve": [('inductance = "70 mH"\n', "flux_current" + CURVE)],
         "eddy": [('resistance = "24 ohm"', 'resistance = "24 ohm"\neddy_resistance = "2000 ohm"')]}
COILS["curve+eddy"] = COILS["curve"] + COILS["eddy"]


def _drive(folder, kind, control, r_s="2 ohm", cap="1 uF", sink="true"):
    hold = 'frequency = "20 kHz"\nmode = "current"\nmin_frequency = "5 kHz"\n' + HOLDS[control]
    return bridge_variant(folder, ('frequency = "20 kHz"\n', hold), *COILS[kind],
                          ('sink = false                 # a diode in the feed: the returned energy stays on the bus\n',
                           f'sink = {sink}\nsource_resistance = "{r_s}"\n'),
                          ('capacitance = "220 uF"', f'capacitance = "{cap}"'),
                          name=f"{kind}-{control}-{sink}-{r_s.split()[0]}.toml")


@pytest.mark.parametrize("kind, control", [("curve", "off_time"), ("eddy", "off_time"),
                                           ("eddy", "hysteretic"), ("curve+eddy", "hysteretic")])
def test_hold_rise_bound_against_solve_ivp(tmp_path, kind, control):
    """A supply that sinks, 2 ohm and 1 uF (``R_s C`` = 2 us, fast against the period):
    the highest bus over 12 periods of the hold at the nominal point (20 degC: R_ref, the
    nominal curve) at or below ``V_s`` + the bound, and at least half of it (solve_ivp,
    module docstring)."""
    drive = load_drive(_drive(tmp_path, kind, control))
    th = design(drive).hold.thresholds
    v_s = drive.supply.nominal
    lp = loop(drive, v_s, 20.0)
    cm = steady_state(drive, lp, th.lower_a if control == "hysteretic" else 0.0, th.upper_a, th.off_time_s,
                      th.delay_s)
    t_fast, period = fast_pulses(drive, th, lp, cm)
    top = float(np.maximum(cm.i_max, cm.i_max if cm.terminal_max is None else cm.terminal_max))
    bound = float(bus_decay.mixed_hold_rise(drive.supply.source_resistance, drive.supply.capacitance, top,
                                            t_fast, period))
    v = reference(drive, th, v_s, drive.coil.resistance, 1.0, 12, release=False)[2]
    rise = float(v.max()) - v_s
    print(f"{kind} {control}: highest bus {rise:.5g} V over the source, bound {bound:.5g} V")
    assert 0.5 * bound <= rise <= bound


@pytest.mark.parametrize("kind", ["curve", "eddy"])
def test_no_sink_highest_bus_against_solve_ivp(tmp_path, kind):
    """A supply that cannot sink, 0.5 ohm and 47 uF, the fixed off-time: at the design's
    highest-bus corner (the highest supply, the coil cold at the lowest ambient, its
    resistance low and its inductance high; copper's R(T), IEC 60028), 30 periods of hold
    then the release, the highest bus above the source and at or below the design's
    (solve_ivp, module docstring); `design --json` (a subprocess) names the fast part's
    share in its ripple method."""
    path = _drive(tmp_path, kind, "off_time", r_s="0.5 ohm", cap="47 uF", sink="false")
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    d = json.loads(r.stdout)
    assert "the fast part's time / the period" in d["supply"]["ripple_method"]
    drive = load_drive(path)
    cm = d["current_mode"]   # the design's thresholds, as the firmware takes them
    th = SimpleNamespace(control="off_time", upper_a=cm["upper_a"], lower_a=None, off_time_s=cm["off_time_s"])
    v_s, res, scale = _point(d, drive, "highest")
    v = reference(drive, th, v_s, res, scale, 30)[2]
    print(f"{kind}: highest bus {float(v.max()):.5g} V, design's {d['supply']['highest_bus_v']:.5g} V")
    assert v_s + 0.3 < float(v.max()) <= d["supply"]["highest_bus_v"]


def test_an_eddy_term_simulates_and_runs_in_the_virtual_device(tmp_path):
    """An eddy term behind 2 mohm and 220 uF with a supply that sinks, the fixed off-time:
    the design passes, it simulates and runs in the virtual device (plumbing)."""
    simulates_and_emulates(tmp_path, _drive(tmp_path, "eddy", "off_time", r_s="2 mohm", cap="220 uF"))
