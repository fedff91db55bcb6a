"""Offline tuning of a latching coil's supply-compensated pulses (coildrive/tune/latch_table.py,
``coildrive tune LATCH.toml`` with ``pull_in.compensate``): the time margin on every entry
swept. The recommendation against the design's own tables at that margin (every entry, to
the tick); one entry's energy against the RL pulse worked by hand; one entry's margins at
its worst corner against scipy's solve_ivp on the coil's equation written afresh; the CLI
end to end (CliRunner and a subprocess, the header against ``design --header``)."""

from __future__ import annotations

import itertools
import json
import math
import re
from pathlib import Path

import pytest
from typer.testing import CliRunner

from conftest import BOARDS, EXAMPLES, run_cli
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from coildrive.tune.latch import tune_latch, with_margin

LATCHING = EXAMPLES / "latching"
BRIDGE = LATCHING / "irrigation-valve-bridge-12v.toml"    # one coil on a full bridge, a stiff battery
RELAY = LATCHING / "bistable-relay-reset-winding-24v.toml"  # two windings, a pulse capacitor
BOLT = LATCHING / "bolt-catch-reset-winding-12v.toml"       # a moving armature (seat time)
ALPHA = 0.00393     # /K, IEC 60028 annealed copper

runner = CliRunner()


def compensated(path: Path, tmp: Path, settle: str | None = None) -> Path:
    """A copy of the example ``path`` with ``compensate = true`` in ``[pull_in]`` (and its
    ``settle_time`` replaced by ``settle``), its bundled board by path."""
    text = path.read_text()
    board = re.search(r'^board = "([^"]+)"', text, re.M)
    text = text.replace(board.group(0), f'board = "{BOARDS / (board.group(1) + ".toml")}"')
    lines = text.splitlines()
    at = next(k for k, ln in enumerate(lines) if ln.startswith("[pull_in]"))
    if settle is not None:
        k = next(k for k in range(at, len(lines)) if lines[k].startswith("settle_time"))
        lines[k] = f"settle_time = {settle}"
    out = tmp / f"{path.stem}-compensated.toml"
    out.write_text("\n".join(lines[:at + 1] + ["compensate = true"] + lines[at + 1:]) + "\n")
    return out


@pytest.fixture(scope="module")
def bridge(tmp_path_factory):
    """The bridge latch compensated with no settle time on its set pulse: the time margin
    then sets every entry, so the margin moves the whole table."""
    path = compensated(BRIDGE, tmp_path_factory.mktemp("latch-table"), settle='"0"')
    drive = load_drive(path)
    return path, drive, tune_latch(drive)


def _check_sweep(drive, r, margin):
    """The recommendation is design_latch's own table at that margin, every entry to the
    tick; the step one tick short (where the time margin sets an entry) does not keep; every
    step at or above the recommendation keeps; a higher margin never costs less."""
    sized = design_latch(with_margin(drive, margin))
    assert r.recommended is not None and r.recommended.ok
    for s, p, q in zip(r.sweeps, r.recommended.latch.pulses, sized.latch.pulses):
        assert s.recommended_ticks == p.table.ticks == q.table.ticks, s.name
        assert s.margin == (q.margin if margin is None else margin)
        ms = [x.margin for x in s.steps]
        assert ms == sorted(ms) and ms[0] == 1.0 and s.margin in ms and ms[-1] >= 3 * s.margin - 1e-6
        at = ms.index(s.recommended_margin)
        assert all(x.keeps for x in s.steps[at:]) and not any(x.keeps for x in s.steps[:at])
        e = [x.supply_j for x in s.steps]
        assert all(b >= a * (1 - 1e-12) for a, b in zip(e, e[1:]))
        iv = [x.interval_s for x in s.steps]
        assert all(b >= a * (1 - 1e-12) for a, b in zip(iv, iv[1:]))
        # each step's entries against its margin: the time margin never below the step's
        # where it sets the entry (the force rule only lengthens)
        for x in s.steps:
            assert all(tm >= x.margin * (1 - 1e-9) for tm in x.time_margins)
            assert x.least_time_margin == min(x.time_margins)
    return sized


def test_bridge_recommendation_is_the_designs_table_to_the_tick(bridge):
    _, drive, r = bridge
    _check_sweep(drive, r, None)
    s = r.sweeps[0]
    assert s.recommended_margin == 1.5
    # the reset pulse keeps its 20 ms settle time: the force rule sets its table from margin 1
    assert r.sweeps[1].recommended_margin == 1.0 and len(r.notes) == 1 and "the reset table" in r.notes[0]
    # the step just below: one entry one tick shorter, the rest the same or shorter
    below = s.steps[[x.margin for x in s.steps].index(1.5) - 1]
    assert not below.keeps and 1.49 < below.margin < 1.5
    short = [a - b for a, b in zip(s.recommended_ticks, below.ticks)]
    assert max(short) == 1 and min(short) >= 0


def test_recommendation_with_a_pulse_capacitor(tmp_path):
    """Two windings on a pulse capacitor: the force rule sets every entry, so the lowest
    margin, 1, gives the file's table (a note says so)."""
    drive = load_drive(compensated(RELAY, tmp_path))
    r = tune_latch(drive)
    _check_sweep(drive, r, None)
    assert [s.recommended_margin for s in r.sweeps] == [1.0, 1.0]
    assert len(r.notes) == 2 and all("to the tick" in n for n in r.notes)


def test_a_moving_armature_table_sized_on_the_moving_run(tmp_path):
    """A moving armature at ``--margin 1.2``: each set entry's worst time is its latest seat,
    and the open coil's rise to current_margin x the current runs ahead of the moving run's
    (the current dips as the armature closes), so the design lengthens entries until their
    shortest pulse carries it on the moving run. The table passes set_pulse, the
    recommendation is the design's table at 1.2 to the tick (_check_sweep), and an entry
    the force sets is longer than the open rise alone would make it."""
    drive = load_drive(compensated(BOLT, tmp_path))
    r = tune_latch(drive, 1.2)
    sized = _check_sweep(drive, r, 1.2)
    assert next(c for c in sized.checks if c.name == "set_pulse").ok
    s, p = r.sweeps[0], sized.latch.pulses[0]
    assert min(p.table.end_current_a) >= p.force_current_a
    # the moving run's force sets every entry there: margin 1 sizes the same table (a note)
    assert s.recommended_margin == 1.0 and any("to the tick" in n for n in r.notes)
    # the first entry's bus reads its code at the divider's end: at or a little below the
    # lowest supply, so its latest seat is at or a little after the design's worst
    assert p.seat_time_s <= s.worst_time_s[0] < p.seat_time_s * 1.002
    rate = drive.board.tick.rate
    open_rise = [max(math.ceil(w * 1.2 * rate + 1 - 1e-9), math.ceil(f * rate + 1 - 1e-9))
                 for w, f in zip(s.worst_time_s, s.force_time_s)]
    assert any(t > o for t, o in zip(s.recommended_ticks, open_rise)), "the moving run sets an entry"
    assert all(t >= o for t, o in zip(s.recommended_ticks, open_rise))


def test_one_entrys_energy_against_a_hand_worked_rl_pulse(bridge):
    """The set pulse's energy from the supply at several margins, at each step's energy
    corner (its label: bus V, coil degC, R and L ends), worked by hand: the firmware there
    reads floor(V / 11 / (3.3 V / 4096)) (a truncating converter; the divider exact) and
    runs the last entry whose code is at or below it (the first below them all), t =
    ticks / 10 kHz; i = V/R (1 -
    e^(-t/tau)), the loop's heat V^2/R (t - 2 tau (1 - e^(-t/tau)) + tau/2 (1 - e^(-2t/tau)))
    (the squared RL step response integrated, e.g. Hayt & Kemmerly, Engineering Circuit
    Analysis, first-order RL circuits), and the supply's energy = that heat + 1/2 L i(t)^2
    (energy balance: the current starts at zero). R(T) by IEC 60028; the bridge's two
    40 mohm switches and the 0.1 ohm sense resistor (boards/bridge-m32-fast.toml)."""
    from test_reference_ngspice_latch import _corner   # a corner's label -> (V, degC, R and L factors)

    _, drive, r = bridge
    s = r.sweeps[0]
    picked = [s.steps[0], s.steps[len(s.steps) // 2], s.steps[-1]]
    assert len({x.supply_j for x in picked}) == 3
    for step in picked:
        v, temp, rf, lf = _corner(step.energy_corner)
        code = math.floor(v / 11 / (3.3 / 4096))
        row = max([k for k, c in enumerate(s.adc_codes) if c <= code] or [0])
        res = 4.5 * (1 + ALPHA * (temp - 20)) * rf + 2 * 0.04 + 0.1
        ind = 0.015 * lf
        tau = ind / res
        t = step.ticks[row] / 10e3
        heat = v * v / res * (t - 2 * tau * (1 - math.exp(-t / tau)) + tau / 2 * (1 - math.exp(-2 * t / tau)))
        i_end = v / res * (1 - math.exp(-t / tau))
        assert step.supply_j == pytest.approx(heat + 0.5 * ind * i_end ** 2, rel=1e-9)


def test_one_entrys_margins_against_solve_ivp(bridge):
    """Entry 7's time and current margins at every step, against the coil's equation
    written afresh, L di/dt = V - R i from rest, integrated by scipy's solve_ivp (DOP853, an
    event at the set pulse's current) at each tolerance corner of the entry: its bus the
    lowest that reads its code (code x 3.3 V / 4096 x 11, a truncating converter, the
    divider exact), the coil at thermal.max_coil_temp (105 degC; R(T) by IEC 60028), R
    +-7 %, L +-15 %, the bridge's two switches and the sense resistor. The time margin is
    the shortest real pulse ((ticks - 1) / 10 kHz) over the slowest corner's time to 1 A,
    the current margin the least current at that pulse's end over 1 A."""
    from scipy.integrate import solve_ivp

    _, drive, r = bridge
    s = r.sweeps[0]
    e = 7
    code = math.floor(s.supply_v[e] / 11 / (3.3 / 4096))
    v = code * 3.3 / 4096 * 11
    assert s.design_supply_v[e] == pytest.approx(v, rel=1e-12)
    r_hot = 4.5 * (1 + ALPHA * (105 - 20))
    runs = []
    for rf, lf in itertools.product((0.93, 1.07), (0.85, 1.15)):
        res, ind = r_hot * rf + 2 * 0.04 + 0.1, 0.015 * lf

        def reach(t, i):
            return i[0] - 1.0
        sol = solve_ivp(lambda t, i: [(v - res * i[0]) / ind], (0.0, 0.06), [0.0], method="DOP853",
                        events=reach, dense_output=True, rtol=1e-11, atol=1e-13)
        runs.append((sol.t_events[0][0], sol.sol))
    t_worst = max(t for t, _ in runs)
    assert s.worst_time_s[e] == pytest.approx(t_worst, rel=1e-9)
    for step in s.steps:
        short = (step.ticks[e] - 1) / 10e3
        assert step.time_margins[e] == pytest.approx(short / t_worst, rel=1e-9)
        assert step.current_margins[e] == pytest.approx(min(f(short)[0] for _, f in runs), rel=1e-9)


def test_cli_json_and_header_of_the_recommended_tables(bridge, tmp_path):
    """`tune --json --margin 2` prints one document with each pulse's table; `--header`
    writes the latch header whose lookup tables are the recommended entries."""
    path, drive, _ = bridge
    out = tmp_path / "valve.h"
    res = runner.invoke(app, ["tune", str(path), "--json", "--margin", "2", "--header", str(out)])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["mode"] == "latch" and doc["swept"] == "margin" and doc["ok"] and doc["margin"] == 2.0
    sized = design_latch(with_margin(drive, 2.0))
    text = out.read_text()
    for p, q in zip(doc["pulses"], sized.latch.pulses):
        rec = doc["recommendation"][p["name"]]
        assert rec["table"]["ticks"] == p["recommended_ticks"] == q.table.ticks
        assert rec["table"]["adc_codes"] == q.table.adc_codes and rec["ticks"] == q.ticks
        ticks = re.search(rf"_{p['name']}_pulse_table_ticks\[[^]]+\] = {{(.*?)}};", text, re.S).group(1)
        assert [int(x) for x in re.findall(r"(\d+)U", ticks)] == q.table.ticks
        assert len(p["steps"][0]["time_margins"]) == len(p["supply_v"]) == 16


def test_subprocess_table_and_header_equal_to_design(bridge, tmp_path):
    """A real subprocess: the table names the sweep and the recommendation; the header is
    `design --header`'s line for line (the same tables, pulses and interval) but for the
    inputs' hash; a margin below 1 is refused in one line and writes nothing."""
    path, _, _ = bridge
    tuned, designed = tmp_path / "t.h", tmp_path / "d.h"
    res = run_cli("tune", str(path), "--header", str(tuned))
    assert res.returncode == 0, res.stderr
    shown = " ".join(res.stdout.split())
    assert "supply-compensated pulse tables" in shown and "recommended: set at margin 1.5" in shown
    assert run_cli("design", str(path), "--header", str(designed)).returncode == 0
    # the same header but for its inputs' hash: the reset pulse's recommended margin is 1
    # (its 20 ms settle time sets its table), the file's 1.5
    differ = [(a, b) for a, b in zip(tuned.read_text().splitlines(), designed.read_text().splitlines()) if a != b]
    assert len(differ) == 1 and all("inputs: sha256" in x for x in differ[0])
    assert len(tuned.read_text()) == len(designed.read_text())
    bad = tmp_path / "bad.h"
    res = run_cli("tune", str(path), "--margin", "0.9", "--header", str(bad))
    assert res.returncode == 2 and "--margin" in res.stderr and "Traceback" not in res.stderr
    assert not bad.exists()
