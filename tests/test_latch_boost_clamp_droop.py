"""A latching coil's pulses from the boost with a clamp across each winding's switch on a
drooping main supply ([hold] mode = "latch", [supply] boost with source_resistance and
capacitance, [freewheel] type = "clamp"): the pulses run from the boost capacitor, but each
decay's current flows from the main bus through the winding into the clamp, drawing on the
bulk capacitor besides the boost converter's recharge (coildrive/design/latch_boost.py
``main_bus``, coildrive/model/converter_bus.py ``clamp_drop``).

The drive (invented): test_latch_boost_clamp's 60 V clamp on the bundled boosted latch
(examples/latching/shutoff-valve-boost-reset-winding-12v.toml) behind an invented 2 ohm and
1000 uF, the converter 85 % efficient. References, written afresh from the circuit's equations:

* scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the main bus -- ``C dv/dt = (V_s - v)/R_s - i``
  with the set winding's clamped decay ``L di/dt = v - V_clamp - R_off i`` (copper R(T) by
  IEC 60028), then the converter's constant-power draw ``P/v`` for its run, then at rest --
  against ``simulate``'s ``main_bus_v`` and set current, within 1e-6;
* the same equations over 40 pulses at the design's shortest interval, each decay
  overlapping a converter run that starts at the pulse's end (the decay from the design's
  highest end current, the winding at its slowest corner): the lowest bus never below the
  design's ``lowest_bus_v`` (a bound), and the clamp's share of its droop within the bound
  ``clamp_drop_v``;
* the model's device -> capture -> check (plumbing: each decay from a full main bus): it
  passes, and three times the inductance times out with the driver's FAULT.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from conftest import run_cli
from test_latch_boost_clamp import _clamped

from coildrive.config import load_drive
from coildrive.design.latch import design_latch

R_S, C, ETA = 2.0, 1000e-6, 0.85
OPTS = dict(method="DOP853", rtol=1e-11, atol=1e-13)


@pytest.fixture(scope="module")
def valve(tmp_path_factory):
    path = _clamped(tmp_path_factory.mktemp("latch-boost-clamp-droop"),
                    extra=f'\nboost_efficiency = {ETA}\nsource_resistance = "{R_S:g} ohm"\n'
                          f'capacitance = "{C * 1e6:g} uF"')
    drive = load_drive(path)
    return path, drive, design_latch(drive)


def _winding(drive, temp: float, rf: float = 1.0, lf: float = 1.0):
    """The set winding's decay loop, written afresh: ``(R_off ohm, L H)`` -- the coil and the
    sense resistor in its path (the clamp across the switch)."""
    c = drive.coil
    r_coil = c.resistance * rf * (1 + 0.00393 * (temp - c.reference_temp))   # IEC 60028
    assert drive.board.sense.position == "coil"
    return r_coil + drive.board.sense.resistance, c.inductance * lf


def _decay(v_s, i0, v0, r_off, ell, p_on: float = 0.0):
    """solve_ivp of the clamped decay on the main bus from ``(i0, v0)`` (the converter drawing
    ``p_on`` W meanwhile) to the current's zero: the solution."""
    zero = lambda t, y: y[0]   # noqa: E731
    zero.terminal, zero.direction = True, -1
    return solve_ivp(lambda t, y: [(y[1] - 60.0 - r_off * y[0]) / ell,
                                   ((v_s - y[1]) / R_S - y[0] - p_on / y[1]) / C],
                     (0.0, 1.0), [i0, v0], events=zero, dense_output=True, **OPTS)


def _bus(v_s, v0, t, p_on):
    """solve_ivp of the main bus alone for ``t`` s from ``v0`` V (the converter drawing ``p_on`` W)."""
    if t <= 0:
        return v0
    return float(solve_ivp(lambda _t, y: [((v_s - y[0]) / R_S - p_on / y[0]) / C], (0.0, t), [v0], **OPTS).y[0, -1])


def test_simulate_s_main_bus_against_solve_ivp(valve, tmp_path):
    path, drive, d = valve
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", "9", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    s, set_p = drive.supply, d.latch.pulses[0]
    t_end = float(w["time_s"][np.flatnonzero(w["current_a"] > 0)].max())   # the set decay's last sample > 0
    k0 = int(np.argmax(w["current_a"]))
    on_end = float(w["time_s"][k0])   # the set pulse's end: its highest current
    r_off, ell = _winding(drive, 20.0)
    off = _decay(9.0, float(w["current_a"][k0]), 9.0, r_off, ell)
    t_zero = float(off.t_events[0][0])
    dec = (w["time_s"] > on_end) & (w["time_s"] <= t_end)
    i_ref, v_ref = off.sol(w["time_s"][dec] - on_end)
    # scipy solve_ivp: the decay's current and the main bus under it, within 1e-6
    assert np.allclose(w["current_a"][dec], i_ref, rtol=1e-6, atol=1e-9)
    assert np.allclose(w["main_bus_v"][dec], v_ref, rtol=1e-6)
    # then the converter's run of 1/2 C_b (V_b^2 - v_end^2) / P from the current's zero, and rest
    v_b_end = float(w["boost_v"][k0])
    run = 0.5 * s.boost_capacitance * (s.boost**2 - v_b_end**2) / s.boost_power
    v_z = float(off.y_events[0][0][1])
    for t in (on_end + t_zero + 0.5 * run, on_end + t_zero + run + 2e-3):
        k = int(np.argmin(np.abs(w["time_s"] - t)))
        dt = float(w["time_s"][k]) - on_end - t_zero
        ref = (_bus(9.0, v_z, dt, s.boost_power / ETA) if dt <= run
               else _bus(9.0, _bus(9.0, v_z, run, s.boost_power / ETA), dt - run, 0.0))
        assert float(w["main_bus_v"][k]) == pytest.approx(ref, rel=1e-6), t
    assert set_p.decay_charge_c > 0


def test_the_lowest_main_bus_bounds_solve_ivp(valve):
    """40 pulses at the design's shortest interval, each run starting at its pulse's end (its
    decay under the converter's draw), from a full bus at the lowest source: the lowest bus
    stays above the design's bound, and the clamp's decays pull it down no more than
    ``clamp_drop_v`` below the same runs alone."""
    _, drive, d = valve
    bus = d.latch.main_bus
    s = drive.supply
    assert bus.source_v == s.min and bus.clamp_drop_v > 0
    p_on = s.boost_power / ETA
    r_off, ell = _winding(drive, drive.ambient.min, 0.93, 1.15)   # cold, R low, L high: the slowest decay
    i0 = max(p.boost.end_current_max_a for p in d.latch.pulses)
    lows = {}
    for clamp in (True, False):
        v, low = s.min, s.min
        for _ in range(40):
            v = _bus(s.min, v, bus.longest_pulse_s, 0.0)      # the pulse: from the boost
            t = 0.0
            if clamp:   # its decay, the converter drawing from the pulse's end
                off = _decay(s.min, i0, v, r_off, ell, p_on)
                t = float(off.t_events[0][0])
                low = min(low, float(off.sol(np.linspace(0.0, t, 400))[1].min()))
                v = float(off.y_events[0][0][1])
            v = _bus(s.min, v, bus.draw_time_s - t, p_on)    # the rest of the run
            low = min(low, v)
            v = _bus(s.min, v, bus.period_s - bus.longest_pulse_s - bus.draw_time_s, 0.0)
        lows[clamp] = low
    assert lows[True] >= bus.lowest_bus_v, (lows, bus)
    assert 0.0 < lows[False] - lows[True] <= bus.clamp_drop_v, (lows, bus)


def test_design_json_and_the_bench(valve, tmp_path):
    from test_latch_boost_curves import passes_and_slow_times_out

    path, _, d = valve
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    mb = doc["latch"]["main_bus"]
    assert mb["clamp_drop_v"] > 0 and mb["decay_charge_c"] == max(p["decay_charge_c"] for p in doc["latch"]["pulses"])
    check = next(c for c in doc["checks"] if c["name"] == "boost_main_bus")
    assert check["ok"] and "through the clamp" in check["detail"]
    passes_and_slow_times_out(d, tmp_path)
