"""Offline tuning of a latching coil's pulse lengths (coildrive/tune/latch.py, ``coildrive
tune LATCH.toml``): the recommendation against the design's own sizing, one step's
energy against a hand-worked RL pulse, and the CLI end to end."""

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

EXAMPLES = Path(__file__).resolve().parents[1] / "examples" / "latching"
RELAY = EXAMPLES / "bistable-relay-reset-winding-24v.toml"     # two windings, a pulse capacitor
BOLT = EXAMPLES / "bolt-catch-reset-winding-12v.toml"          # a moving armature (seat time)
BRIDGE = EXAMPLES / "irrigation-valve-bridge-12v.toml"          # one coil on a full bridge
BOOSTED = EXAMPLES / "sprinkler-valve-bridge-boost-12v.toml"    # pulses from the boost

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
    assert rec["set"]["ticks"] == 102 < design_latch(load_drive(BOLT)).latch.pulses[0].ticks
    assert [p["recommended_ticks"] for p in doc["pulses"]] == [rec["set"]["ticks"], rec["reset"]["ticks"]]
    text = out.read_text()
    assert f"#define COIL_SET_PULSE_TICKS               {rec['set']['ticks']}U" in text
    assert f"#define COIL_RESET_PULSE_TICKS             {rec['reset']['ticks']}U" in text


def test_cli_table_and_the_latch_refusals(tmp_path):
    res = runner.invoke(app, ["tune", str(RELAY)])
    assert res.exit_code == 0, res.output
    assert "recommended: set 14 ticks (14 ms), reset 14 ticks (14 ms)" in res.stdout
    for args, words in (([str(BOOSTED)], "supply.boost"),
                        ([str(RELAY), "--plot", str(tmp_path / "p.png")], "--plot"),
                        ([str(RELAY), "--margin", "0.9"], "--margin"),
                        ([str(RELAY), "--port", "loop://"], "tune without --port sweeps its pulse lengths")):
        res = runner.invoke(app, ["tune", *args])
        assert res.exit_code == 2, res.output
        assert words in res.output and "Traceback" not in res.output
    assert not (tmp_path / "p.png").exists()


def test_a_compensated_pulse_table_is_refused_in_one_line(tmp_path):
    lines = BRIDGE.read_text().splitlines()
    at = next(k for k, ln in enumerate(lines) if ln.startswith("[pull_in]"))
    text = "\n".join(lines[:at + 1] + ["compensate = true"] + lines[at + 1:]) + "\n"
    text = text.replace('board = "bridge-m32-fast"',
                        f'board = "{EXAMPLES.parents[1] / "boards" / "bridge-m32-fast.toml"}"')
    path = tmp_path / "compensated.toml"
    path.write_text(text)
    assert load_drive(path).pull_in.compensate
    res = runner.invoke(app, ["tune", str(path), "--header", str(tmp_path / "x.h")])
    assert res.exit_code == 2 and "pull_in.compensate" in res.output, res.output
    assert not (tmp_path / "x.h").exists()
