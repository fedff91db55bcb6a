"""A boosted peak on a full bridge on a drooping main supply that sinks, with a flux-linkage
curve or an eddy-current term: every turn-off's fast decay returns into the main bus behind
``R_s`` and ``C`` with the boost converter idle or drawing its most, ``I_c``. While the
source feeds the bus ``C dv/dt = i + (V_s - v)/R_s - I_c = i + (V_s - R_s I_c - v)/R_s``,
so the drawing converter's decay is the curve's stepped one
(coildrive/model/flux_bus_decay.py) or the eddy term's closed form
(``bus_decay.eddy_decay``) against the source ``V_s - R_s I_c`` (Thevenin).
References:

* scipy's ``solve_ivp`` (Radau, rtol 1e-11) of the decay's equations written afresh with
  the converter's current drawn off the bus explicitly, the source at ``V_s``
  (tests/test_flux_bridge_droop.py ``curve_reference``, tests/test_eddy_bridge_droop.py
  ``_reference``, their ``i_c``): the times, the buses and the charge to 1e-5, from buses
  below, at and above ``V_s - R_s I_c``;
* the design end to end: the release takes the drawing converter (without it the
  release is shorter), a curve on a supply that cannot sink too (its drawing converter's
  decay bounded: tests/test_boost_bridge_no_sink_curve.py; an eddy term on a linear coil
  there: tests/test_boost_bridge_no_sink_eddy.py), an eddy term on a curve on one that
  cannot stays refused in one line.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import run_cli
from test_boost_bridge_droop import _drooping
from test_eddy_bridge_droop import _reference
from test_flux_bridge_droop import curve_reference
from test_reference_ngspice_bridge import COILS, I_DROP, L_COIL, R_COIL, R_SENSE, V_D, V_SUP

from coildrive.model import bus_decay, flux_bus_decay

#: (i0 A, v0 V, R_s ohm, C F, I_c A): a cable and a small capacitor from below the source;
#: a battery lead and a large one; a bus above ``V_s - R_s I_c`` (it falls first).
CASES = [(0.9, 22.0, 1.5, 100e-6, 0.4), (0.9, 23.5, 0.5, 4.7e-3, 1.0), (0.5, 24.0, 1.5, 10e-6, 0.6)]


@pytest.mark.parametrize("kind", ["curve", "eddy", "curve+eddy"])
def test_fast_decay_with_the_converter_drawing_against_solve_ivp(kind):
    r = R_COIL + R_SENSE
    coil = L_COIL if kind == "eddy" else COILS["curve"]
    r_e = None if kind == "curve" else 150.0
    i0, v0, r_s, c, i_c = (np.array(x) for x in zip(*CASES))
    fast = bus_decay.eddy_decay if kind == "eddy" else flux_bus_decay.decay
    d = fast(i0, v0, I_DROP, V_SUP - r_s * i_c, r_s, c, r, coil, V_D, *(() if r_e is None else (r_e,)))
    for k, (a, b, rs, cap, ic) in enumerate(CASES):
        ref = (curve_reference(a, b, rs, cap, r, i_c=ic) if r_e is None else
               _reference(coil, a, b, I_DROP, rs, cap, r, r_e, i_c=ic)[0][:5])
        got = [float(x[k]) for x in (d.zero_time, d.drop_time, d.bus_max, d.bus_at_zero, d.charge)]
        print(f"{kind} case {k}: " + ", ".join(f"{g / e - 1:+.1e}" for g, e in zip(got, ref)) + " (vs solve_ivp)")
        # scipy solve_ivp (Radau, rtol 1e-11), the drain explicit: times, buses, charge to 1e-5
        assert got == pytest.approx(ref, rel=1e-5), (k, got, ref)


def _coil(path, kind):
    """The boosted fuel valve's 6 mH as the saturating curve of tests/test_boost_flux.py,
    or with a 200 ohm eddy term."""
    from test_boost_flux import CURVE_I, CURVE_PSI

    curve = (f"flux_current = {[float(x) for x in CURVE_I]}\n"
             f"flux_linkage = {[f'{1e3 * x:.6g} mWb' for x in CURVE_PSI]}\n").replace("'", '"')
    new = curve if kind == "curve" else 'inductance = "6 mH"\neddy_resistance = "200 ohm"\n'
    text = path.read_text()
    assert 'inductance = "6 mH"\n' in text
    path.write_text(text.replace('inductance = "6 mH"\n', new, 1))
    return path


@pytest.mark.parametrize("kind, sink", [("curve", True), ("eddy", True), ("curve", False)],
                         ids=["curve", "eddy", "curve-no-sink"])
def test_design_end_to_end(tmp_path, kind, sink, monkeypatch):
    """Designs (was refused): the release into the drooping bus takes the converter idle
    and drawing its most -- without the drawing end the release is shorter -- and the
    switches see the highest bus plus a body diode. A curve on a supply that cannot sink:
    the drawing converter's decay bounded (tests/test_boost_bridge_no_sink_curve.py)."""
    from coildrive.config import load_drive
    from coildrive.design import bridge_bus, design

    path = _coil(_drooping(tmp_path, "0.5 ohm", "1 mF", sink=sink), kind)
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    d = json.loads(r.stdout)
    s, rel = d["supply"], d["release"]
    assert d["topology"]["name"] == "full_bridge" and s["handover_current_a"] > 0.5
    assert rel["peak_switch_voltage_v"] >= s["highest_bus_v"] + 0.7
    monkeypatch.setattr(bridge_bus, "converter_draw", lambda *a: None)
    idle = design(load_drive(path)).release
    assert rel["time_s"] > idle.time_s and rel["zero_time_s"] > idle.zero_time_s


def test_a_supply_that_cannot_sink_still_refused(tmp_path):
    # an eddy term on a curve (on a linear coil it is designed: tests/test_boost_bridge_no_sink_eddy.py)
    from test_boost_droop import _curve_eddy

    path = _drooping(tmp_path, sink=False)
    path.write_text(path.read_text().replace(*_curve_eddy(), 1))
    out = run_cli("design", str(path))
    assert out.returncode == 2 and "supply.sink" in out.stderr and "cannot sink" in out.stderr, out.stderr
    assert len(out.stderr.strip().splitlines()) == 1



def test_simulate_writes_the_actuation(tmp_path):
    """Plumbing: simulate writes the eddy-term valve's actuation behind 0.5 ohm -- the boost,
    the four switches' and the magnetising current's columns -- down to zero."""
    path = _coil(_drooping(tmp_path, "0.5 ohm", "1 mF"), "eddy")
    csv = tmp_path / "act.csv"
    r = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "40", "--hold-time", "0.5 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    head = csv.read_text().splitlines()[0].split(",")
    assert {"boost_on", "high_a_on", "low_b_on", "magnetising_current_a", "boost_v"} <= set(head)
    rows = np.loadtxt(csv, delimiter=",", skiprows=1)
    assert rows[-1, 1] == 0.0 and np.max(rows[:, 1]) > 0.5
