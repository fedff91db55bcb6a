"""A full bridge's closed-loop hold with mixed decay on a coil with an eddy-current term or
a flux-linkage curve (``regulation = "closed_loop"``, ``fast_fraction``, ``[coil]
eddy_resistance`` or ``flux_current``/``flux_linkage``): the loop of
tests/test_bridge_closed_loop_mixed.py on the three-segment orbits of
coildrive/model/eddy_mixed.py and coildrive/model/flux_mixed.py.

Outside references, named beside each check (none goes through the package's loop code):

* scipy's ``solve_ivp`` of the three switched segments written afresh at the duty the
  design says the loop settles at (``settled_duty``): with an eddy term the magnetising
  current ``L di_m/dt = R_e (i - i_m)`` under the terminal current of each loop -- on
  ``(V + R_e i_m)/(R_on + R_e)``, fast ``(R_e i_m - V_f)/(R_f + R_e)`` while positive (then
  the body diodes block and ``i = 0``), slow ``R_e i_m/(R_slow + R_e)``; with a curve
  ``L_d(i) di/dt = v - r i`` with ``L_d`` from scipy's own ``PchipInterpolator`` of the
  table. Two periods from the model's periodic state: periodic, and the sensed current
  in the middle of the period is the model's sample, in the set-point's code;
* the averaged plant's DC gain (amperes of sample per unit of duty) against the slope of
  that exact sample over the duty (central difference): the loop's gain where it acts;
* the virtual device's capture passes ``check`` (plumbing: the device shares the model).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import require_tool, run_cli
from test_bridge_closed_loop_mixed import FRACTION, _variant
from test_bridge_current import device_checks, simulate_csv
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.circuit import loop

EDDY = (('inductance = "70 mH"', 'inductance = "70 mH"\neddy_resistance = "2 kohm"'),
        )
#: (V, coil degC): the envelope's two ends, where the loop's duty is largest and least
POINTS = ((20.0, 100.0), (28.0, -10.0))


@pytest.fixture(scope="module")
def eddy_clm(tmp_path_factory):
    path = _variant(tmp_path_factory.mktemp("bclme"), *EDDY, name="clm-eddy.toml")
    return path, design(load_drive(path))


@pytest.fixture(scope="module")
def curve_clm(tmp_path_factory):
    """The bridge's saturating curve of tests/test_flux_bridge.py under the loop."""
    from test_flux_bridge import bridge_curve

    path = bridge_curve(tmp_path_factory.mktemp("bclmc"))
    text = path.read_text()
    path.write_text(text.replace("[hold]\n", f'[hold]\nregulation = "closed_loop"\nfast_fraction = {FRACTION}\n', 1))
    return path, design(load_drive(path))


def _segments(lp, eddy: bool):
    """The three segments' right-hand sides and the sensed current, written afresh:
    ``(on, fast, slow, sensed(segment, state))``."""
    v, r_on, r_slow = float(lp.v_on), float(lp.r_on), float(lp.r_off)
    r_f, v_f = float(lp.mixed.r_fast), float(lp.mixed.v_fast)
    if eddy:
        ell, r_e = float(lp.inductance.magnetising), float(lp.inductance.resistance)
        terms = {"on": lambda m: (v + r_e * m) / (r_on + r_e),
                 "fast": lambda m: max((r_e * m - v_f) / (r_f + r_e), 0.0),
                 "slow": lambda m: r_e * m / (r_slow + r_e)}
        rhs = {k: (lambda t, y, f=f: [r_e * (f(y[0]) - y[0]) / ell]) for k, f in terms.items()}
        return rhs, lambda seg, m: terms[seg](m)
    from scipy.interpolate import PchipInterpolator

    curve = lp.inductance.curve
    ld = PchipInterpolator(np.asarray(curve.current), np.asarray(curve.flux)).derivative()
    scale = float(np.ravel(lp.inductance.scale)[0])
    volts = {"on": (v, r_on), "fast": (-v_f, r_f), "slow": (0.0, r_slow)}
    rhs = {k: (lambda t, y, vr=vr: [(vr[0] - vr[1] * y[0]) / (scale * float(ld(max(y[0], 0.0))))
                                    if y[0] > 0 or vr[0] > 0 else 0.0]) for k, vr in volts.items()}
    return rhs, lambda seg, i: max(i, 0.0)


def _two_periods(d, supply, coil_temp, eddy: bool):
    """solve_ivp over two periods at the settled duty: ``(model sample, solve_ivp's,
    start, end of the second period, the loop)``."""
    from scipy.integrate import solve_ivp
    from coildrive.design.loop_duty import sample_at, settled_duty

    duty = settled_duty(d, supply, coil_temp)
    lp = loop(d.drive, supply, coil_temp)
    f = d.hold.frequency_hz
    sample, ss = sample_at(duty, f, lp, False)
    rhs, sensed = _segments(lp, eddy)
    t = 1.0 / f
    t_on = duty * t
    edges = [t_on, t_on + FRACTION * (t - t_on), t]
    y, got = float(ss.i_min), None
    for n in range(2):
        start = n * t
        for seg, a, b in zip(("on", "fast", "slow"), [0.0] + edges[:2], edges):
            s = solve_ivp(rhs[seg], (start + a, start + b), [y], method="Radau", rtol=1e-11, atol=1e-14,
                          dense_output=True)
            mid = start + 0.5 * t
            if n == 1 and start + a <= mid <= start + b:
                got = sensed(seg, float(s.sol(mid)[0]))
            y = float(s.y[0, -1])
    return float(sample), got, float(ss.i_min), y, lp, duty


@pytest.mark.parametrize("coil", ["eddy", "curve"])
@pytest.mark.parametrize("point", POINTS, ids=["20V-hot", "28V-cold"])
def test_settled_sample_matches_solve_ivp(eddy_clm, curve_clm, coil, point):
    """scipy's solve_ivp (Radau) of the three segments written afresh, two periods from the
    model's periodic state at the duty the loop settles at: periodic (1e-6), the middle of
    the period's sensed current the model's sample (1e-5) and within a code of the
    set-point's middle (the loop's reading dithers between the code and the next)."""
    _, d = eddy_clm if coil == "eddy" else curve_clm
    r = d.hold.closed_loop
    assert d.topology.bridge.hold_decay == "mixed" and r.sample_point == "middle of the period"
    sample, got, start, end, _, duty = _two_periods(d, *point, coil == "eddy")
    print(f"{coil} at {point}: duty {duty:.5f}, sample {sample:.6e} vs solve_ivp {got:.6e} A")
    assert end == pytest.approx(start, rel=1e-6)
    assert got == pytest.approx(sample, rel=1e-5)
    assert abs(sample - (r.setpoint_code + 0.5) * r.current_lsb_a) <= r.current_lsb_a


@pytest.mark.parametrize("coil", ["eddy", "curve"])
def test_averaged_plant_gain_matches_the_exact_sample_slope(eddy_clm, curve_clm, coil):
    """At the corners the loop's gains were set from, the averaged plant's DC gain
    ``sensed V_g / R_eff`` (A of sample per unit duty; with an eddy term each path's
    Thevenin pair, the fast one ``R_e/(R_f + R_e)``) against the slope of the exact sample
    (the orbit scipy confirms above) over +-1e-4 of duty: within 15 % (the average smooths
    the ripple the sample sits on; with the same plant a linear coil's loop is checked
    against ngspice in tests/test_bridge_closed_loop_mixed.py)."""
    from coildrive.design.loop_duty import sample_at
    from test_bridge_closed_loop import corner_loop

    _, d = eddy_clm if coil == "eddy" else curve_clm
    r, f = d.hold.closed_loop, d.hold.frequency_hz
    corners = {c.label: c for c in d.corners}
    for p in r.plants:
        c = corners[p["corner"]]
        lp = corner_loop(d, p["corner"])[1] if coil == "eddy" else loop(d.drive, c.supply_v, c.coil_temp_c)
        duty = c.hold_duty
        slope = (float(sample_at(duty + 1e-4, f, lp, False)[0]) - float(sample_at(duty - 1e-4, f, lp, False)[0])) / 2e-4
        gain = p["sensed_fraction"] * p["vg_v"] / p["r_eff_ohm"]
        print(f"{coil} {p['role']}: plant {gain:.4g} A/duty vs exact slope {slope:.4g}")
        assert gain == pytest.approx(slope, rel=0.15), p["role"]
    assert r.phase_margin_deg >= 45.0 and r.gain_margin_db >= 6.0


def test_design_simulate_and_the_virtual_device(eddy_clm, tmp_path):
    """End to end with the eddy term: `design --json` (a subprocess) names the mixed
    closed-loop hold and every corner holds the current; `simulate` switches both decays in
    the off-times (all four open first, then Q2 + Q4); the virtual device's capture passes
    `check` at the two ends of the envelope (plumbing)."""
    path, d = eddy_clm
    out = run_cli("design", str(path), "--json")
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    assert doc["topology"]["bridge"]["hold_decay"] == "mixed" and doc["hold"]["regulation"] == "closed_loop"
    assert doc["topology"]["bridge"]["returned_per_hold_period_j"] > 0
    assert all(c["hold_mean_current_a"] >= 0.2 - 1e-9 for c in doc["corners"])
    # the sensed current's steps meet the sample at 1/2 and where the fast part ends,
    # (1/2 - 0.3)/(1 - 0.3): the settled duties lie between them
    edge = next(c for c in doc["checks"] if c["name"] == "loop_sample_edge")
    assert edge["ok"] and "vs 0.5 and 0.2857" in edge["detail"], edge
    w, _, settled, off = simulate_csv(path, tmp_path)
    fast = off & (w["low_a_on"] + w["low_b_on"] + w["high_a_on"] + w["high_b_on"] == 0)
    slow = off & (w["low_a_on"] == 1) & (w["low_b_on"] == 1)
    assert fast.sum() > 20 and slow.sum() > 20 and (fast | slow).sum() == off.sum()
    device_checks(d, tmp_path)


@pytest.mark.compiler
def test_compiled_driver_in_the_loop_with_the_eddy_term(eddy_clm, tmp_path):
    """gcc builds the reference driver (its PI step, the fast part's end of each compare)
    and the eddy term's coil model runs it at 24 V with a 20 degC coil and at 28 V with a
    -10 degC one: `check` passes, the hold mean within 1 % of the prediction (measured 0.9 %
    and 0.13 % above it, where the linear coil's loop is within 0.5 %: not traced further)
    and the
    release within 5 % (plumbing: the device shares the model). (Not at 20 V with a 130
    degC coil as the linear coil's test: that coil, hotter than the design's own 73 degC,
    settles its duty at 1/2, on the edge where the sensed current steps by the eddy term's
    ``(V + V_f)/(R + R_e)``; the loop dithers across the step -- ``loop_sample_edge``.)"""
    from driver_harness import loop_captures
    from coildrive.bench.check import check_capture

    require_tool("gcc")
    d = eddy_clm[1]
    runs = [(24.0, 20.0, None), (28.0, -10.0, None)]
    for (_, temp, _), (_, cap) in zip(runs, loop_captures(tmp_path, d, runs, hold_time=0.02)):
        rep = check_capture(cap, d, coil_temp=temp)
        rows = {x.name: x for x in rep.items}
        assert rep.ok, [(x.name, x.status, x.detail) for x in rep.items if x.status == "FAIL"]
        assert rows["hold_mean"].values[0] == pytest.approx(rep.prediction["hold_mean_a"], rel=0.01)
        assert rows["release_time"].values[0] == pytest.approx(rep.prediction["release_time_s"], rel=0.05)
