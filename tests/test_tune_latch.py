"""Offline tuning of a latching coil's pulse lengths (coildrive/tune/latch.py, ``coildrive
tune LATCH.toml``): the recommendation against the design's own sizing, one step's
energy against a hand-worked RL pulse, and the CLI end to end; pulses from the boost
(coildrive/tune/latch_boost.py): their thresholds' sweep against design_latch at each
margin, one step's boost energy against the series RLC discharge worked by hand."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from typer.testing import CliRunner

from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from coildrive.tune.latch import tune_latch, with_margin
from coildrive.tune.latch_boost import with_current_margins

EXAMPLES = Path(__file__).resolve().parents[1] / "examples" / "latching"
RELAY = EXAMPLES / "bistable-relay-reset-winding-24v.toml"     # two windings, a pulse capacitor
BOLT = EXAMPLES / "bolt-catch-reset-winding-12v.toml"          # a moving armature (seat time)
BRIDGE = EXAMPLES / "irrigation-valve-bridge-12v.toml"          # one coil on a full bridge
VALVE = EXAMPLES / "shutoff-valve-boost-reset-winding-12v.toml"  # pulses from the boost
PLUNGER = EXAMPLES / "plunger-valve-boost-reset-winding-12v.toml"  # from the boost, a moving armature

runner = CliRunner()


@pytest.mark.parametrize("path, margin", [(RELAY, None), (BOLT, 1.2), (BRIDGE, None)])
def test_recommendation_is_the_designs_own_length_at_that_margin(path, margin):
    """Consistency: the shortest swept length whose figures keep the margins (the shortest
    real pulse >= margin x the worst time, and >= the force time + settle) is the length
    design_latch sizes at that margin, and the tick below it does not keep them."""
    drive = load_drive(path)
    r = tune_latch(drive, margin)
    sized = {p.name: p.ticks for p in design_latch(with_margin(drive, margin)).latch.pulses}
    assert {s.name: s.recommended_ticks for s in r.sweeps} == sized
    assert not r.notes
    for s in r.sweeps:
        by = {x.ticks: x for x in s.steps}
        n = s.recommended_ticks
        assert by[n].keeps and by[n].design_ok and not by[n - 1].keeps
        assert min(by) == math.ceil(s.worst_time_s * drive.board.tick.rate + 1 - 1e-9)   # margin 1
        assert max(by) >= 3 * s.design_ticks
        # a longer pulse costs more energy and never shortens the interval
        e = [x.supply_j for x in s.steps]
        assert all(b > a for a, b in zip(e, e[1:]))
        iv = [x.interval_s for x in s.steps]
        assert all(b >= a * (1 - 1e-12) for a, b in zip(iv, iv[1:]))
    assert r.recommended.ok


def test_one_steps_energy_against_a_hand_worked_rl_pulse():
    """The set pulse's energy from the supply at a swept length, against the RL step worked
    by hand: i = V/R (1 - e^(-t/tau)); the loop's heat int R i^2 dt =
    V^2/R (t - 2 tau (1 - e^(-t/tau)) + tau/2 (1 - e^(-2t/tau))) (integrating the square of
    the RL step response, e.g. Hayt & Kemmerly, Engineering Circuit Analysis, first-order
    RL circuits), and the supply's energy = that heat + 1/2 L i(t)^2 (energy balance).
    The corner worked: the design's energy corner, 28 V, coil -20 degC, R -10 %, L -20 %;
    R(T) by IEC 60028 (alpha 0.00393 /K); the loop adds the switch's 0.06 ohm and the
    sense resistor's 0.5 ohm (boards/tiny-8bit-diode.toml)."""
    r = tune_latch(load_drive(RELAY))
    s = next(x for x in r.sweeps if x.name == "set")
    v = 28.0
    res = 360.0 * (1 + 0.00393 * (-20 - 20)) * 0.9 + 0.06 + 0.5
    ind = 0.9 * 0.8
    tau = ind / res
    for step in (s.steps[0], s.steps[len(s.steps) // 2], s.steps[-1]):
        t = step.time_s
        heat = v * v / res * (t - 2 * tau * (1 - math.exp(-t / tau)) + tau / 2 * (1 - math.exp(-2 * t / tau)))
        i_end = v / res * (1 - math.exp(-t / tau))
        assert step.supply_j == pytest.approx(heat + 0.5 * ind * i_end ** 2, rel=1e-9)


def test_cli_json_and_header_of_the_recommended_pulses(tmp_path):
    """`tune --json` prints one document whose recommendation is the tuned pulses, and
    `--header` writes the latch header with them (here --margin 1.2 shortens the set pulse
    of the bolt catch from the file's 1.5)."""
    out = tmp_path / "bolt.h"
    res = runner.invoke(app, ["tune", str(BOLT), "--json", "--margin", "1.2", "--header", str(out)])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["mode"] == "latch" and doc["ok"] and doc["margin"] == 1.2
    rec = doc["recommendation"]
    # (the force margin on the moving run sets it at 1.2: tests/test_latch_armature.py)
    assert rec["set"]["ticks"] == 112 < design_latch(load_drive(BOLT)).latch.pulses[0].ticks
    assert [p["recommended_ticks"] for p in doc["pulses"]] == [rec["set"]["ticks"], rec["reset"]["ticks"]]
    text = out.read_text()
    assert f"#define COIL_SET_PULSE_TICKS               {rec['set']['ticks']}U" in text
    assert f"#define COIL_RESET_PULSE_TICKS             {rec['reset']['ticks']}U" in text


def test_cli_table_and_the_latch_refusals(tmp_path):
    res = runner.invoke(app, ["tune", str(RELAY)])
    assert res.exit_code == 0, res.output
    assert "recommended: set 14 ticks (14 ms), reset 14 ticks (14 ms)" in res.stdout
    # the energy columns name their own corner (highest supply, coldest coil), not the title's
    assert " ".join(res.stdout.split()).count("supply and copper mJ at the energy corner (28 V, coil -20 degC") == 2
    for args, words in (([str(RELAY), "--plot", str(tmp_path / "p.png")], "--plot"),
                        ([str(RELAY), "--margin", "0.9"], "--margin"),
                        ([str(RELAY), "--port", "loop://", "--hold-time", "20 ms"], "a latching coil has no hold")):
        res = runner.invoke(app, ["tune", *args])
        assert res.exit_code == 2, res.output
        assert words in res.output and "Traceback" not in res.output
    assert not (tmp_path / "p.png").exists()


@pytest.fixture(scope="module")
def valve_tune():
    drive = load_drive(VALVE)
    return drive, tune_latch(drive)


def test_boosted_recommendation_is_the_designs_own_at_that_margin(valve_tune):
    """Consistency: each pulse from the boost is stepped from current_margin 1.0 to 2 x the
    file's (the file's among them); the recommendation keeps the file's margin (its design
    passes), and its design is design_latch with those margins: the same threshold codes,
    time-outs and boost energies as the recommended steps. A higher threshold costs the boost
    more energy and a longer time-out."""
    drive, r = valve_tune
    rec = {s.name: s.recommended_current_margin for s in r.sweeps}
    assert rec == {"set": 1.2, "reset": 1.2} == {p.name: p.current_margin for p in r.design.latch.pulses}
    again = design_latch(with_current_margins(drive, rec))
    assert r.recommended.ok and again.latch.interval_s == r.recommended.latch.interval_s
    for s, p in zip(r.sweeps, again.latch.pulses):
        ms = [x.current_margin for x in s.steps]
        assert ms[0] == 1.0 and s.design_current_margin in ms and ms[-1] >= 2 * s.design_current_margin - 1e-9
        x = next(x for x in s.steps if x.current_margin == s.recommended_current_margin)
        assert x.keeps and (x.threshold_code, x.timeout_ticks) == (p.boost.threshold_code, p.ticks)
        assert x.boost_energy_j == p.boost.energy_j and x.longest_s == p.boost.time_to_threshold_s
        below = [y for y in s.steps if y.current_margin < s.recommended_current_margin]
        assert below and not any(y.keeps for y in below) and all(y.design_ok for y in below)
        reached = [y for y in s.steps if y.timeout_ticks is not None]
        e = [y.boost_energy_j for y in reached]
        assert all(b > a for a, b in zip(e, e[1:]))
        t = [y.timeout_ticks for y in reached]
        assert all(b >= a for a, b in zip(t, t[1:]))


def test_one_boosted_steps_energy_against_the_rlc_discharge_by_hand(valve_tune):
    """The reset pulse's boost energy at one stepped margin, worked by hand: the boost
    capacitor (C at V_b) discharging into the series loop R, L from rest,
    s = -a +- sqrt(a^2 - w0^2), a = R/2L, w0^2 = 1/LC; i(t) = V_b (e^(s1 t) - e^(s2 t)) /
    (L (s1 - s2)), v_C(t) = V_b (s1 e^(s2 t) - s2 e^(s1 t)) / (s1 - s2) (the source-free
    series RLC circuit's natural response, e.g. Nilsson & Riedel, Electric Circuits, ch. 8);
    the pulse ends one scheduler tick after the current reaches the code's highest trip
    current, and the capacitor gives 1/2 C (V_b^2 - v_C^2). The corner is the design's
    energy corner at that margin; R(T) by IEC 60028 (alpha 0.00393 /K); the loop adds the
    switch, the sense resistor and the boost path (lab-m32-zener, the file's boost)."""
    import cmath

    from scipy.optimize import brentq
    from test_reference_ngspice_latch import _corner   # a corner's label -> (V, degC, R and L factors)

    drive, r = valve_tune
    s = next(x for x in r.sweeps if x.name == "reset")
    step = s.steps[len(s.steps) // 2 + 2]
    assert step.current_margin > s.design_current_margin
    p = design_latch(with_current_margins(drive, {"set": 1.2, "reset": step.current_margin})).latch.pulses[1]
    _, temp, rf, lf = _corner(p.energy_corner)
    sign = 1.0 if "the boost at its highest" in p.energy_corner else -1.0
    v_b, c_b = 40.0 * (1 + sign * 0.05), 220e-6 * (1 + sign * 0.2)
    r_loop = (12.0 * rf * (1 + 0.00393 * (temp - 20.0)) + drive.switch.on_resistance
              + drive.board.sense.resistance + 0.15)
    ind = 0.025 * lf
    a, w0sq = r_loop / (2 * ind), 1.0 / (ind * c_b)
    s1, s2 = -a + cmath.sqrt(a * a - w0sq), -a - cmath.sqrt(a * a - w0sq)

    def i(t):
        return (v_b * (cmath.exp(s1 * t) - cmath.exp(s2 * t)) / (ind * (s1 - s2))).real

    def v_c(t):
        return (v_b * (s1 * cmath.exp(s2 * t) - s2 * cmath.exp(s1 * t)) / (s1 - s2)).real
    t_trip = brentq(lambda t: i(t) - step.trip_max_a, 0.0, step.longest_s, xtol=1e-15)
    t_end = t_trip + 1.0 / drive.board.tick.rate
    assert step.boost_energy_j == pytest.approx(0.5 * c_b * (v_b ** 2 - v_c(t_end) ** 2), rel=1e-9)


def test_cli_boosted_sweep_json_header_and_an_armature_in_flight(tmp_path):
    """`tune` of pulses from the boost with a moving armature: thresholds below the one that
    seats it are refused by the design (the armature still in flight) and shown as refused;
    the recommendation is the file's margin, and `--header` writes its threshold codes."""
    out = tmp_path / "plunger.h"
    res = runner.invoke(app, ["tune", str(PLUNGER), "--json", "--header", str(out)])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["swept"] == "current_margin" and doc["ok"]
    set_ = doc["pulses"][0]
    assert set_["recommended_current_margin"] == set_["design_current_margin"] == 2.0
    low = set_["steps"][0]
    assert low["current_margin"] == 1.0 and not low["keeps"] and "in flight" in low["refused"]
    seated = [x for x in set_["steps"] if x["refused"] is None and x["seats"]]
    assert seated and all(x["seated_s"] < x["longest_s"] for x in seated if x["longest_s"] is not None)
    rec = doc["recommendation"]
    assert rec["set"]["current_margin"] == 2.0
    text = out.read_text()
    assert f"{rec['set']['threshold_code']}U" in text and f"{rec['reset']['threshold_code']}U" in text
