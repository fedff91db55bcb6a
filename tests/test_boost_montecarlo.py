"""The tolerance Monte Carlo (``design --samples``) of a boosted peak: each sample draws its
own boost voltage and capacitance within their tolerances beside the supply, ambient and
coil; its pull-in runs from that boost.

Outside reference: the corner envelope -- the Monte Carlo's samples lie inside the
tolerance box whose corners the design evaluates, so no sample may fall outside the
design's worst figures (the slowest pull-in, the hold's lowest and highest mean current,
the hottest coil, the slowest release), nor below the fastest pull-in (the boost and its
capacitance at their highest with the coldest coil and the smallest R and L, worked here
from the series RLC closed form of coildrive/model/boost.py, itself checked against
ngspice and scipy in tests/test_boost.py).
"""

from __future__ import annotations

import json

import pytest

from conftest import EXAMPLES, run_cli

EXAMPLE = EXAMPLES / "fuel-valve-boost-12v.toml"


def test_monte_carlo_inside_the_corner_envelope(tmp_path):
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model import boost as boost_model
    from coildrive.model.circuit import loop

    out = run_cli("design", str(EXAMPLE), "--samples", "4000", "--json")
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    mc = doc["monte_carlo"]
    assert mc["samples"] == 4000 and mc["failures"] == {"pull_in_late": 0, "hold_short": 0, "coil_too_hot": 0}
    # the corner envelope: never outside
    assert mc["pull_in_time_s"]["max"] <= doc["pull_in"]["time_s"] * (1 + 1e-9)
    assert mc["hold_mean_current_a"]["min"] >= doc["hold"]["min_mean_current_a"] * (1 - 1e-9)
    assert mc["hold_mean_current_a"]["max"] <= doc["hold"]["max_mean_current_a"] * (1 + 1e-9)
    assert mc["coil_temp_c"]["max"] <= doc["hold"]["coil_temp_c"] + 1e-9
    assert mc["release_time_s"]["max"] <= doc["release"]["time_s"] * (1 + 1e-9)
    # the fastest pull-in: the boost at its highest, the coldest coil, R and L at their lowest
    drive = load_drive(EXAMPLE)
    s, c = drive.supply, drive.coil
    lp = loop(drive, s.min, drive.ambient.min, 1 - c.resistance_tolerance, 1 - c.inductance_tolerance)
    fast = boost_model.boost(s.boost * (1 + s.boost_tolerance),
                             s.boost_capacitance * (1 + s.boost_capacitance_tolerance),
                             lp.r_on + s.boost_resistance, lp.inductance)
    t_fast = float(boost_model.threshold_time(drive.pull_in.current, fast))
    assert mc["pull_in_time_s"]["min"] >= t_fast * (1 - 1e-9)
    # the boost's own draw widens the slowest pull-in: the same samples (same seed) with the
    # boost and its capacitance without tolerance stay below it
    text = EXAMPLE.read_text().replace("boost_tolerance = 0.05", "boost_tolerance = 0.0").replace(
        "boost_capacitance_tolerance = 0.2", "boost_capacitance_tolerance = 0.0")
    fixed = tmp_path / "fixed-boost.toml"
    fixed.write_text(text.replace('board = "lab-m32-zener"', f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener.toml"}"'))
    mc0 = design(load_drive(fixed), samples=4000).monte_carlo
    assert mc0["pull_in_time_s"]["max"] < mc["pull_in_time_s"]["max"]
