"""A current-mode hold's switching range over the coil's temperatures, from switched on cold
(at the ambient) to settled: the JSON's ``current_mode`` frequencies and duties, and the
``current_mode_frequency`` check with them.

Outside references, named beside each check (none goes through the package's loop code):

* scipy's ``solve_ivp`` (RK45, rtol 1e-11) of the hysteretic switching written afresh --
  on: ``L di/dt = V - R_on i`` until the upper threshold (an event), off: ``L di/dt =
  -(R_off i + V_off)`` until the lower one (an event) -- at the design's slowest and
  fastest point (a cold and a hot coil);
* the same two segments in closed form (the RL step response, from memory) over a dense
  sweep of the coil's temperature at every corner, copper R(T) by IEC 60028 (alpha =
  0.00393 /K).

``coildrive tune`` (the offline sweep and live tuning) takes no current-mode switching
from anywhere: both refuse the hold in one line, so the cold-to-settled range is the
design's alone and tuning never recommends a band checked on the settled coil only.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from coil_span import at_temp, corner_at
from conftest import drive_path, run_cli
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.errors import InputError
from coildrive.tune.live import LiveTuner
from test_bridge_current import _variant


def _ivp_frequency(v, r_on, r_off, v_off, ell, lo, hi) -> float:
    """Switching frequency (Hz) of the hysteretic hold by solve_ivp with threshold events."""
    from scipy.integrate import solve_ivp

    def reach(level):
        def ev(_, y):
            return y[0] - level
        ev.terminal = True
        return ev
    i, periods = lo, []
    for _ in range(3):
        a = solve_ivp(lambda _, y: [(v - r_on * y[0]) / ell], (0.0, 1.0), [i], events=reach(hi),
                      rtol=1e-11, atol=1e-14)
        b = solve_ivp(lambda _, y: [-(r_off * y[0] + v_off) / ell], (0.0, 1.0), [a.y[0, -1]],
                      events=reach(lo), rtol=1e-11, atol=1e-14)
        assert a.status == 1 and b.status == 1, "both thresholds reached"
        periods.append(a.t[-1] + b.t[-1])
        i = b.y[0, -1]
    return 1.0 / periods[-1]


def _closed_form(v, r_on, r_off, v_off, ell, lo, hi):
    """(frequency Hz, duty) of the same hold from the RL step response."""
    a, b = v / r_on, v_off / r_off
    t_on = ell / r_on * np.log((a - lo) / (a - hi))
    t_off = ell / r_off * np.log((hi + b) / (lo + b))
    return 1.0 / (t_on + t_off), t_on / (t_on + t_off)


def test_a_bridge_switched_on_cold_switches_slowest(tmp_path):
    """The bridge's slow decay has nothing opposing the current: the more copper, the faster
    the off segment, so a coil switched on cold switches slower than any settled corner (a
    range taken on the settled coil missed it). The design's range: its slowest point a
    cold coil, its fastest a settled one, each against solve_ivp; and both inside the
    allowed range (the band is sized with the cold coil too)."""
    path = _variant(tmp_path)
    d = json.loads(run_cli("design", str(path), "--json").stdout)
    drive = load_drive(path)
    cm = d["current_mode"]
    sw, rs = drive.switch.on_resistance, drive.board.sense.resistance
    lo, hi = cm["lower_a"], cm["upper_a"]
    slow, fast = corner_at(d, "min"), corner_at(d, "max")
    assert slow["coil_temp_c"] == slow["ambient_c"], "the slowest: a cold coil"
    settled = {c["label"]: c for c in d["corners"]}
    assert fast["coil_temp_c"] == settled[fast["label"]]["coil_temp_c"], "the fastest: a settled coil"
    for which, c in (("min", slow), ("max", fast)):
        r = c["resistance_ohm"] + 2 * sw + rs   # Q1 + Q4 on, Q2 + Q4 recirculating, the inline sense
        f = _ivp_frequency(c["supply_v"], r, r, 0.0, c["inductance_h"], lo, hi)
        assert cm[f"{which}_frequency_hz"] == pytest.approx(f, rel=1e-6), f"{which} (solve_ivp)"
    f_settled = [_closed_form(c["supply_v"], c["resistance_ohm"] + 2 * sw + rs, c["resistance_ohm"] + 2 * sw + rs,
                              0.0, c["inductance_h"], lo, hi)[0] for c in d["corners"]]
    assert cm["min_frequency_hz"] < min(f_settled) * 0.99, "below every settled corner"
    check = next(c for c in d["checks"] if c["name"] == "current_mode_frequency")
    assert check["ok"] and "from cold to settled" in check["detail"], check
    assert cm["allowed_min_frequency_hz"] <= cm["min_frequency_hz"] <= cm["max_frequency_hz"] <= \
        cm["allowed_max_frequency_hz"]


def test_the_fastest_point_inside_the_warm_up_against_solve_ivp_and_a_dense_sweep(tmp_path):
    """A plain diode freewheel at a 0.4 A hold: the on segment grows and the off segment
    shrinks as the coil warms, and at the high supply the period has its minimum between
    the cold and the settled coil. The design finds it (a warming coil) within 1e-6 of
    solve_ivp there; no point of a dense closed-form sweep (401 temperatures at every
    corner) switches faster or slower than the range, nor has a duty outside it."""
    text = drive_path("zener-valve").read_text()
    text = text.replace('frequency = "25 kHz"', 'frequency = "25 kHz"\nmode = "current"')
    text = text.replace('current = "0.22 A"', 'current = "0.4 A"').replace('max = "28 V"', 'max = "27 V"')
    path = tmp_path / "diode.toml"
    path.write_text(text + '\n[freewheel]\ntype = "diode"\ndiode_drop = "0.9 V"\n')
    d = json.loads(run_cli("design", str(path), "--json").stdout)
    drive = load_drive(path)
    cm = d["current_mode"]
    sw, rs, vd = drive.switch.on_resistance, drive.board.sense.resistance, drive.freewheel.diode_drop
    lo, hi = cm["lower_a"], cm["upper_a"]
    fast = corner_at(d, "max")
    settled = {c["label"]: c for c in d["corners"]}[fast["label"]]
    assert fast["ambient_c"] < fast["coil_temp_c"] < settled["coil_temp_c"], "inside the warm-up"
    r = fast["resistance_ohm"]
    f = _ivp_frequency(fast["supply_v"], r + sw + rs, r + rs, vd, fast["inductance_h"], lo, hi)
    assert cm["max_frequency_hz"] == pytest.approx(f, rel=1e-6), "solve_ivp"
    freqs, duties = [], []
    for c in d["corners"]:
        temps = np.linspace(c["ambient_c"], c["coil_temp_c"], 401)
        rr = np.array([at_temp(c, t)["resistance_ohm"] for t in temps])
        fq, du = _closed_form(c["supply_v"], rr + sw + rs, rr + rs, vd, c["inductance_h"], lo, hi)
        freqs.append(fq)
        duties.append(du)
    freqs, duties = np.concatenate(freqs), np.concatenate(duties)
    assert cm["max_frequency_hz"] >= freqs.max() * (1 - 1e-9) and cm["max_frequency_hz"] <= freqs.max() * (1 + 1e-6)
    assert cm["min_frequency_hz"] == pytest.approx(freqs.min(), rel=1e-9)
    assert cm["min_duty"] == pytest.approx(duties.min(), rel=1e-9)
    assert cm["max_duty"] == pytest.approx(duties.max(), rel=1e-9)
    # the settled corners alone (the old figure) fall short of the warming coil (by 0.04 %)
    f_hot = max(_closed_form(c["supply_v"], c["resistance_ohm"] + sw + rs, c["resistance_ohm"] + rs, vd,
                             c["inductance_h"], lo, hi)[0] for c in d["corners"])
    assert math.isfinite(f_hot) and cm["max_frequency_hz"] > f_hot * (1 + 1e-4)


def test_tuning_never_recommends_a_band_whose_cold_coil_switches_too_slowly(tmp_path):
    """The bridge's band of 4 codes with the allowed minimum at 25 kHz: every settled corner
    switches above it (at least 25.5 kHz, RL step response written here), the coil switched
    on cold below it (24.6 kHz, at the design's slowest point: solve_ivp with threshold
    events). The design fails ``current_mode_frequency`` there; ``coildrive tune`` (offline,
    with --json and --header) and live tuning (the CLI before it opens the port, and
    :class:`LiveTuner` from Python) recommend nothing: one line naming hold.mode, exit 2,
    no header written."""
    path = _variant(tmp_path, ('mode = "current"\n', 'mode = "current"\nband = "1.6113 mA"\n'
                               'min_frequency = "25 kHz"\n'))
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 1, r.stderr
    d = json.loads(r.stdout)
    drive = load_drive(path)
    cm = d["current_mode"]
    assert cm["band_codes"] == 4 and cm["allowed_min_frequency_hz"] == 25_000.0
    sw, rs = drive.switch.on_resistance, drive.board.sense.resistance
    lo, hi = cm["lower_a"], cm["upper_a"]
    f_settled = [_closed_form(c["supply_v"], c["resistance_ohm"] + 2 * sw + rs, c["resistance_ohm"] + 2 * sw + rs,
                              0.0, c["inductance_h"], lo, hi)[0] for c in d["corners"]]
    assert min(f_settled) > 25_000.0 * 1.01, "settled only, the band would pass"
    slow = corner_at(d, "min")
    assert slow["coil_temp_c"] == slow["ambient_c"], "the slowest: a cold coil"
    r_cold = slow["resistance_ohm"] + 2 * sw + rs
    f_cold = _ivp_frequency(slow["supply_v"], r_cold, r_cold, 0.0, slow["inductance_h"], lo, hi)
    assert f_cold < 25_000.0 * 0.99 and cm["min_frequency_hz"] == pytest.approx(f_cold, rel=1e-6), "solve_ivp"
    check = next(c for c in d["checks"] if c["name"] == "current_mode_frequency")
    assert not check["ok"] and "coil -10 degC" in check["detail"], check
    header = tmp_path / "tuned.h"
    for args in (("tune", str(path), "--json", "--header", str(header)),
                 ("tune", str(path), "--port", str(tmp_path / "no-such-port"))):
        t = run_cli(*args)
        assert t.returncode == 2, t.stdout + t.stderr
        line = (json.loads(t.stdout)["error"] if "--json" in args else t.stderr.strip())
        assert "\n" not in line and "hold.mode" in line and "from cold to settled" in line, line
        assert "Traceback" not in t.stderr
    assert not header.exists()
    with pytest.raises(InputError, match="hold.mode.*from cold to settled"):
        LiveTuner(object(), design(drive))
