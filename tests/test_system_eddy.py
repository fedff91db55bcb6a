"""An eddy-current term (``coil.eddy_resistance``) on a channel of a system file: the
terminal current's step at switch-on in the rail-current bound, its tail, and the shared
rail's droop.

Outside references, named beside each check:

* the circuit solved afresh per segment in closed form (a resistance ``R_e`` across the
  coil's inductance: Thevenin's theorem gives the magnetising current's exponential
  toward ``V/R`` with ``tau = L (R + R_e) / (R R_e)``, and Kirchhoff's laws the terminal
  current ``(V + R_e i_m) / (R + R_e)``; freewheeling, the diode blocks once the terminal
  current is zero, ``i_m = V_off / R_e``, and the flux then dies through ``R_e``);
* ngspice (batch mode): the six coils, each ``R`` in series with ``L || R_e``, switched
  onto a bus behind ``R_s`` and ``C``, ``.meas tran MIN v(bus)``;
* copper R(T): IEC 60028, alpha = 0.00393 /K.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS
from rail_reference import (assert_staggered_within_limit, firmware_lookup, linear_tail, manifold_copy,
                            peaks_droop_ngspice, readable)

from test_system import droop_against_solve_ivp

from coildrive.cli import app
from coildrive.config import load_drive

BOARD = BOARDS / "manifold-m32-6ch.toml"
EDDY = 'eddy_resistance = "150 ohm"     # invented: solid-core eddy currents\n'


def _folder(folder, extra=EDDY):
    return manifold_copy(folder, 'inductance = "70 mH"\n', 'inductance = "70 mH"\n' + extra)


@pytest.fixture(scope="module")
def system(tmp_path_factory):
    """The manifold with its two purge valves given an eddy resistance."""
    r = CliRunner().invoke(app, ["design", str(_folder(tmp_path_factory.mktemp("eddysys"))), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"]


def _on(t, i0, v, r, l, r_e):
    """Switch on for ``t`` s (array from 0) from magnetising current ``i0``: ``(i_m, terminal)``."""
    tau = l * (r + r_e) / (r * r_e)
    i_m = v / r + (i0 - v / r) * np.exp(-t / tau)
    return i_m, (v + r_e * i_m) / (r + r_e)


def _off(t, i0, r, v_off, l, r_e):
    """Freewheeling for ``t`` s from ``i0``: conducting while ``i_m > V_off/R_e``, then blocked."""
    tau = l * (r + r_e) / (r * r_e)
    i_b = v_off / r_e
    t_b = tau * np.log((i0 + v_off / r) / (i_b + v_off / r)) if i0 > i_b else 0.0
    cond = -v_off / r + (i0 + v_off / r) * np.exp(-np.minimum(t, t_b) / tau)
    i_m = np.where(t <= t_b, cond, min(i0, i_b) * np.exp(-(t - t_b) * r_e / l))
    return i_m, np.where(t <= t_b, (-v_off + r_e * i_m) / (r + r_e), 0.0)


def _rise(t, b):
    """A branch's peak bound written afresh: the terminal current's step and rise."""
    v, r, r_e, l = b["supply_v"], b["resistance_ohm"], b.get("eddy_resistance_ohm"), b["inductance_h"]
    t = np.maximum(t, 0)
    if r_e is None:
        return v / r * (1 - np.exp(-t * r / l))
    return _on(t, 0.0, v, r, l, r_e)[1]


def _branch(t, b):
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], _rise(t, b), linear_tail(t, b)))


def test_eddy_bound_never_below_the_worst(system):
    """The purge valve solved afresh per segment: the peak the firmware picks, then 40
    periods of its hold, at the lowest and highest supply and just below a middle
    peak-table step, cold, R and L at both tolerance ends. The channel's bound (its largest
    readable branch) is never below the terminal current; it starts with the step
    ``V/(R + R_e)``; over the peak it is within 8 % of the worst (the branch's top supply)
    and equal to it at the branch's own corner."""
    ch = system["channels"][-1]
    d = ch["design"]
    drv = load_drive(ch["drive_file"], BOARD)
    c, b0 = drv.coil, drv.board
    r_e = c.eddy_resistance
    lsb = b0.adc.reference / 2**b0.adc.bits * b0.supply_sense.divider
    codes = d["peak_table"]["adc_codes"]
    period = 1 / d["hold"]["frequency_hz"]
    ratios = []
    for v in (drv.supply.min, codes[len(codes) // 2] * lsb - 1e-6, drv.supply.max):
        peak, duty = firmware_lookup(d, drv, v)
        branches = readable(ch, v)
        worst = 0.0
        for r_f in (1 - c.resistance_tolerance, 1 + c.resistance_tolerance):
            r_coil = c.resistance * (1 + 0.00393 * (drv.ambient.min - c.reference_temp)) * r_f
            r_on = r_coil + drv.switch.on_resistance + b0.sense.resistance
            r_off = r_coil + b0.sense.resistance + drv.freewheel.bypass_resistance
            for l_f in (1 - c.inductance_tolerance, 1 + c.inductance_tolerance):
                l = c.inductance * l_f
                s = np.linspace(0, 1, 25)
                t_pk = s * peak
                i_m, term = _on(t_pk, 0.0, v, r_on, l, r_e)
                ts, cs, last = [t_pk], [term], i_m[-1]
                worst = max(worst, float(term.max()))
                for m in range(40):
                    t0 = peak + m * period
                    i_m, term = _on(s * duty * period, last, v, r_on, l, r_e)
                    ts.append(t0 + s * duty * period), cs.append(term)
                    i_m, term = _off(s * (1 - duty) * period, i_m[-1], r_off, drv.freewheel.diode_drop, l, r_e)
                    ts.append(t0 + duty * period + s * (1 - duty) * period), cs.append(term)
                    last = i_m[-1]
                t, i = np.concatenate(ts), np.concatenate(cs)
                bound = np.max([_branch(t, b) for b in branches], axis=0)
                assert np.all(i <= bound + 1e-9), (v, r_f, l_f, float(np.max(i - bound)))
        ratios.append(max(b["peak_end_a"] for b in branches) / worst)
        b = branches[0]
        assert abs(_rise(0.0, b) - b["supply_v"] / (b["resistance_ohm"] + r_e)) < 1e-12   # the step
        own = _on(np.array([b["peak_s"]]), 0.0, b["supply_v"], b["resistance_ohm"],
                  c.inductance * (1 - c.inductance_tolerance), r_e)[1][0]
        assert abs(b["peak_end_a"] - own) <= 1e-9 * own
    print("bound / worst over the peak:", [round(x, 4) for x in ratios])
    assert all(1.0 <= x <= 1.08 for x in ratios), ratios


def test_staggered_total_never_above_the_limit(system):
    """A dense sweep (1e5 points, numpy) of the rail's bound written afresh: never above
    the limit with the stagger found."""
    assert_staggered_within_limit(system, _branch)


def test_droop_bound_never_above_ngspice(tmp_path, system):
    """ngspice: the six coils (the purge valves' inductance shunted by R_e) switched on
    together behind the system's R_s and C at the lowest supply, cold, R and L low, up to
    the first peak's end: the reported lowest bus (a bound) is never above ngspice's."""
    rail = system["rails"][0]
    v_s = rail["supply_v"]
    got = {"vlow": peaks_droop_ngspice(tmp_path, system, BOARD, "eddy-droop")}
    print(f"reported {rail['lowest_bus_together_v']:.4f} V, ngspice {got['vlow']:.4f} V")
    # ngspice transient: within 1 mV
    assert rail["lowest_bus_together_v"] <= got["vlow"] + 1e-3
    assert v_s - rail["lowest_bus_together_v"] <= 1.3 * (v_s - got["vlow"])


# An eddy term under a current-mode hold: tests/test_system_eddy_current.py


def test_simulated_droop_fed_back_against_solve_ivp(tmp_path, system):
    """``simulate SYSTEM.toml`` with the purge valves' eddy terms feeds the drooping bus
    back into every coil (their magnetising currents a state of the bus's linear system,
    coildrive/model/shared_bus.py). Reference: scipy's solve_ivp (DOP853, rtol 1e-10) of
    the six coils and the capacitor written afresh from Kirchhoff's laws
    (tests/test_system.py's droop_against_solve_ivp: each switch played from the CSV, the
    eddy coils' terminal current ``(v + R_e i_m)/(R_on + R_e)`` on, the diode blocking at
    zero off): the bus within 1e-6 V, each terminal current within 1e-6 A. The design's
    lowest bus (a bound) is never above the simulated one."""
    bus = droop_against_solve_ivp(_folder(tmp_path), tmp_path)
    assert system["rails"][0]["lowest_bus_staggered_v"] <= bus.min()
