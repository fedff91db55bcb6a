"""The armature model through config, design, JSON, header and the CLI.

Outside sources: the co-energy force balance ``(I^2/2)|dL/dx| = spring + load``
(Fitzgerald, Kingsley & Umans, *Electric Machinery*, ch. 3, from memory) for the derived
currents; scipy's ``solve_ivp`` (DOP853) as the per-point reference of the corner
figures; the C compiler for the header. The scenarios are invented.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import time

import numpy as np
import pytest

from coildrive.config import load_drive
from coildrive.design import ARMATURE_CORNER_KEYS, design
from coildrive.errors import InputError
from coildrive.model import magnet
from coildrive.model.armature_sim import pull_in_reference, release_reference
from conftest import EXAMPLES, ROOT, require_tool, run_cli

LATCH = EXAMPLES / "locker-latch-12v.toml"
STRONG = ROOT / "tests" / "data" / "latch-strong-spring.toml"
LATCH_TEXT = LATCH.read_text()


def _variant(tmp_path, old: str, new: str, name: str = "v.toml"):
    assert old in LATCH_TEXT, old
    path = tmp_path / name
    path.write_text(LATCH_TEXT.replace(old, new))
    return path


@pytest.fixture(scope="module")
def latch_design():
    return design(load_drive(LATCH))


# --------------------------------------------------------------------------- config
def test_currents_left_out_are_derived_from_the_force_balance():
    """hold.current = margin x stay current, release.current = stay current (co-energy
    force balance at the seat), at the lowest inductance of the tolerance band."""
    d = load_drive(LATCH)
    a = d.armature
    assert a.derived == ("hold.current", "release.current")
    lc, beta = magnet.fit_gap(a.inductance_open, a.inductance_closed, a.stroke)
    low = lc * (1 - d.coil.inductance_tolerance)
    need = math.sqrt(2 * (a.spring_preload + a.spring_rate * a.stroke + a.load_force)
                     / abs(magnet.inductance_slope(0.0, low, beta)))
    assert d.hold.current == pytest.approx(a.current_margin * need, rel=1e-12)
    assert d.release.current == pytest.approx(
        math.sqrt(2 * (a.spring_preload + a.spring_rate * a.stroke + a.load_force)
                  / abs(magnet.inductance_slope(0.0, lc, beta))), rel=1e-12)
    assert d.pull_in.current == 0.65, "given in the file: kept"


def test_pull_in_current_derived_when_left_out(tmp_path):
    path = _variant(tmp_path, 'current = "0.65 A"           # the firmware\'s pull-in threshold; checked against the mechanics\n', "")
    d = load_drive(path)
    a = d.armature
    assert "pull_in.current" in a.derived
    lc, beta = magnet.fit_gap(a.inductance_open, a.inductance_closed, a.stroke)
    low = lc * (1 - d.coil.inductance_tolerance)
    start = math.sqrt(2 * (a.spring_preload + a.load_force) / abs(magnet.inductance_slope(a.stroke, low, beta)))
    assert d.pull_in.current == pytest.approx(1.25 * start, rel=1e-9), "soft spring: the open gap needs most"


@pytest.mark.parametrize("old, new, key", [
    ('stroke = "4 mm"', 'stroke = "0 mm"', "armature.stroke"),
    ('inductance_closed = "90 mH"', 'inductance_closed = "20 mH"', "armature.inductance_closed"),
    ('spring_preload = "0.35 N"', 'spring_preload = "0 N"\nload_force_extra = 1', "armature.load_force_extra"),
    ('load_force = "0.15 N"', 'load_force = "-0.5 N"', "armature.spring_preload"),
    ('mass = "18 g"', 'mass = "18 mm"', "armature.mass"),
    ('damping = "0.4 N*s/m"', 'damping = "0.4 N*s/m"\ncurrent_margin = 0.9', "armature.current_margin"),
    ('inductance_open = "25 mH"', 'inductance_open = "90 mH"', "hold.current"),
])
def test_bad_armature_input_names_the_key(tmp_path, old, new, key):
    path = _variant(tmp_path, old, new)
    with pytest.raises(InputError) as err:
        load_drive(path)
    assert err.value.key == key, str(err.value)


def test_no_armature_keeps_every_section_required(tmp_path):
    text = (EXAMPLES / "demo-valve.toml").read_text()
    path = tmp_path / "x.toml"
    path.write_text(text.replace('[hold]\ncurrent = "0.22 A"', "[hold]"))
    with pytest.raises(InputError) as err:
        load_drive(path)
    assert err.value.key == "hold.current"


# --------------------------------------------------------------------------- design
def test_example_passes_on_its_board(latch_design):
    d = latch_design
    assert d.ok, [c.detail for c in d.failed]
    names = {c.name for c in d.checks}
    assert {"armature_seats", "armature_hold", "armature_releases", "pull_in_current_mechanics",
            "hold_current_mechanics"} <= names


def test_corner_figures_match_the_scipy_reference(latch_design):
    """Every corner's seat time, dip and open time against solve_ivp (DOP853), one point
    at a time."""
    from coildrive.design.evaluate import evaluate

    d = latch_design
    c = d.drive.coil
    supply = np.array([k.supply_v for k in d.corners])
    temps = np.array([k.coil_temp_c for k in d.corners])
    # the envelope's points from the corners (IEC 60028 copper at each coil temperature)
    rf = np.array([k.resistance_ohm for k in d.corners]) / (
        c.resistance * (1 + 0.00393 * (temps - 20.0)) / (1 + 0.00393 * (c.reference_temp - 20.0)))
    lf = np.array([k.inductance_h for k in d.corners]) / d.drive.armature.inductance_closed
    duty = np.array([k.hold_duty for k in d.corners])
    res = evaluate(d.drive, supply, 0.0 * supply, rf, lf, duty, d.hold.frequency_hz,
                   d.pull_in.peak_time_s, coil_temp=temps)
    p = res.armature.params
    for k in range(0, len(supply), 5):
        ref = pull_in_reference(p.take(k), "DOP853")
        corner = d.corners[k].armature
        assert corner["seat_time_s"] == pytest.approx(ref.seat_time, rel=1e-5), k
        assert corner["dip_current_a"] == pytest.approx(ref.dip_current, rel=1e-5), k
        rel = release_reference(p.take(k), float(res.hold.i_max[k]), "DOP853")
        assert corner["release_open_time_s"] == pytest.approx(rel.open_time, rel=1e-5), k


def test_design_figures_are_the_armature_moments(latch_design):
    d = latch_design
    seats = [c.armature["seat_time_s"] for c in d.corners]
    assert d.pull_in.time_s == max(seats)
    assert d.pull_in.peak_time_s >= d.pull_in.time_s * d.pull_in.margin
    assert d.release.time_s == max(c.armature["release_open_time_s"] for c in d.corners)
    assert all(c.pull_in_time_s == c.armature["seat_time_s"] for c in d.corners)
    assert d.release.lockout_ticks >= d.release.time_s * d.drive.board.tick.rate
    a = d.armature
    assert a.hold_force_margin >= 1.0
    hot_low = [c for c in d.corners if c.supply_v == d.drive.supply.min]
    hottest = max(hot_low, key=lambda c: c.coil_temp_c)
    assert a.hottest_low_supply_margin == pytest.approx(hottest.armature["hold_force_margin"])
    # the mechanics' static need, at the lowest-inductance corner, against the file's currents
    assert a.pull_in_current_margin == pytest.approx(d.drive.pull_in.current / a.stroke_current_a)
    assert a.hold_current_margin == pytest.approx(1.25, rel=1e-9), "derived: exactly the margin"
    # dips sit at the seat moment at every corner
    for c in d.corners:
        assert c.armature["dip_time_s"] == c.armature["seat_time_s"]
        assert c.armature["dip_depth_a"] > 0


def test_given_currents_that_disagree_are_reported(tmp_path):
    path = _variant(tmp_path, 'current = "0.65 A"', 'current = "0.45 A"')
    text = path.read_text().replace('frequency = "25 kHz"', 'current = "0.17 A"\nfrequency = "25 kHz"')
    path.write_text(text.replace('# [release] left out', '[release]\ncurrent = "0.1 A"\n#'))
    d = design(load_drive(path))
    checks = {c.name: c for c in d.checks}
    c = checks["pull_in_current_mechanics"]
    assert not c.ok and c.severity == "error" and "% below" in c.detail, c.detail
    h = checks["hold_current_mechanics"]
    assert not h.ok and "% below" in h.detail, h.detail
    assert not checks["armature_hold"].ok, "0.17 A mean cannot hold what needs ~0.185 A"
    r = checks["release_current_mechanics"]
    assert not r.ok and r.severity == "warning" and "% off" in r.detail, r.detail


def test_too_strong_spring_fails_with_an_explanation():
    d = design(load_drive(STRONG))
    assert not d.ok
    seats = next(c for c in d.checks if c.name == "armature_seats")
    assert not seats.ok
    assert "never moves" in seats.detail and "spring" in seats.detail, seats.detail
    doc = d.to_dict()
    assert doc["pull_in"]["time_s"] is None, "not a NaN: JSON null"
    # the hot coils never start it (a cold coil at the highest supply may draw enough)
    hot = [c for c in doc["corners"] if "(hot)" in c["label"]]
    assert hot and all(c["seat_time_s"] is None for c in hot)
    assert all(c["armature_status"] == "never starts" for c in hot)
    json.dumps(doc, allow_nan=False)


def test_stiff_spring_stall_fails_with_an_explanation(tmp_path):
    path = _variant(tmp_path, 'spring_rate = "100 N/m"', 'spring_rate = "1500 N/m"')
    path.write_text(path.read_text().replace('frequency = "25 kHz"', 'current = "0.5 A"\nfrequency = "25 kHz"')
                    .replace('# [release] left out', '[release]\ncurrent = "0.4 A"\n#'))
    d = design(load_drive(path))
    seats = next(c for c in d.checks if c.name == "armature_seats")
    assert not seats.ok and "stalls at gap" in seats.detail, seats.detail
    json.dumps(d.to_dict(), allow_nan=False)


def test_design_of_an_armature_file_is_fast(latch_design):
    drive = load_drive(LATCH)
    best = min(_timed(lambda: design(drive)) for _ in range(3))
    assert best < 2.0, f"design() took {best:.3f} s"


def _timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def test_json_has_the_armature_keys(latch_design):
    doc = latch_design.to_dict()
    json.dumps(doc, allow_nan=False)
    assert set(ARMATURE_CORNER_KEYS) <= set(doc["corners"][0])
    assert set(ARMATURE_CORNER_KEYS) <= set(doc["nominal"])
    assert "armature" not in doc["corners"][0]
    for key in ("seat_time_s", "dip_current_a", "dip_time_s", "release_open_time_s",
                "start_current_a", "stay_current_a", "stroke_current_a", "derived",
                "pull_in_current_margin", "hold_current_margin", "hold_force_margin"):
        assert key in doc["armature"], key
    plain = design(load_drive(EXAMPLES / "demo-valve.toml")).to_dict()
    assert "armature" not in plain and "seat_time_s" not in plain["corners"][0]


@pytest.mark.compiler
def test_header_carries_the_seat_window(tmp_path, latch_design):
    require_tool("gcc")
    from coildrive.codegen.header import generate_header

    text = generate_header(latch_design, "L")
    (tmp_path / "l.h").write_text(text)
    (tmp_path / "m.c").write_text('#include <stdio.h>\n#include "l.h"\nint main(void){printf("%lu %lu %lu\\n",'
                                  "(unsigned long)L_SEAT_EARLIEST_TICKS,(unsigned long)L_SEAT_LATEST_TICKS,"
                                  "(unsigned long)L_RELEASE_OPEN_TICKS);return 0;}\n")
    subprocess.run(["gcc", "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(tmp_path / "m.c"),
                    "-o", str(tmp_path / "m")], check=True)
    got = [int(v) for v in subprocess.run([str(tmp_path / "m")], capture_output=True, text=True,
                                          check=True).stdout.split()]
    a, rate = latch_design.armature, latch_design.drive.board.tick.rate
    assert got[0] <= a.seat_time_min_s * rate < got[0] + 1
    assert got[1] - 1 < a.seat_time_s * rate <= got[1]
    assert got[2] - 1 < a.release_open_time_s * rate <= got[2]


# --------------------------------------------------------------------------- CLI
@pytest.mark.slow
def test_cli_design_json_end_to_end():
    r = run_cli("design", str(LATCH), "--json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["ok"] is True
    assert d["pull_in"]["time_s"] == max(c["seat_time_s"] for c in d["corners"])
    assert d["release"]["time_s"] == max(c["release_open_time_s"] for c in d["corners"])
    assert d["armature"]["derived"] == ["hold.current", "release.current"]


@pytest.mark.slow
def test_cli_strong_spring_exits_1():
    r = run_cli("design", str(STRONG))
    assert r.returncode == 1
    assert "armature_seats" in r.stdout and "never moves" in r.stdout


@pytest.mark.slow
def test_cli_bad_stroke_exits_2(tmp_path):
    path = _variant(tmp_path, 'stroke = "4 mm"', 'stroke = "4 mV"')
    r = run_cli("design", str(path))
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "armature.stroke" in lines[0], r.stderr


@pytest.mark.slow
def test_cli_simulate_adds_position_and_velocity(tmp_path):
    out = tmp_path / "w.csv"
    r = run_cli("simulate", str(LATCH), "--supply", "12", "--coil-temp", "40", "--csv", str(out),
                "--hold-time", "10 ms")
    assert r.returncode == 0, r.stderr
    assert "seated at" in r.stderr
    head = out.read_text().splitlines()[0]
    assert head == "time_s,current_a,switch_on,switch_voltage_v,sense_current_a,position_m,velocity_m_s"
    data = np.loadtxt(out, delimiter=",", skiprows=1)
    t, i, on, x = data[:, 0], data[:, 1], data[:, 2], data[:, 5]
    assert np.all(np.diff(t) >= 0)
    assert x[0] == pytest.approx(0.004) and x[-1] == pytest.approx(0.004), "open at both ends"
    assert np.all((x >= 0) & (x <= 0.004 + 1e-12))
    assert np.any(x == 0.0), "seated during the hold"
    assert i[-1] == 0.0 and np.all(i >= 0)
    # every PWM edge is a sample: switch changes state many times in the hold
    assert np.count_nonzero(np.diff(on)) > 2 * 200


@pytest.mark.slow
def test_cli_plot_with_armature(tmp_path):
    out = tmp_path / "p.png"
    r = run_cli("design", str(LATCH), "--plot", str(out))
    assert r.returncode == 0, r.stderr
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.slow
@pytest.mark.parametrize("drive", ["demo-valve", "locker-latch-12v"])
def test_design_does_not_import_scipy(drive):
    """CLI start-up time: the design path (with or without an armature) needs numpy only;
    scipy stays for the reference path and the tests."""
    code = ("import sys, json; from coildrive.cli import app\n"
            "try:\n    app(['design', sys.argv[1], '--json'])\nexcept SystemExit:\n    pass\n"
            "print('SCIPY' if any(m.split('.')[0] == 'scipy' for m in sys.modules) else 'CLEAN', file=sys.stderr)\n")
    r = subprocess.run([sys.executable, "-c", code, str(EXAMPLES / f"{drive}.toml")], capture_output=True,
                       text=True, cwd=ROOT, timeout=120, env={"PYTHONPATH": str(ROOT), "PATH": ""})
    assert r.stderr.strip().splitlines()[-1] == "CLEAN", r.stderr


def test_monte_carlo_uses_the_armature_model(latch_design):
    """Tolerance samples go through the same batched armature model: their seat times lie
    within the corners' range (the corners bound supply, temperature and tolerances)."""
    d = design(load_drive(LATCH), samples=300, seed=3)
    mc = d.monte_carlo
    seats = [c.armature["seat_time_s"] for c in d.corners]
    assert mc["failures"]["pull_in_late"] == 0
    assert min(seats) * 0.999 <= mc["pull_in_time_s"]["min"] <= mc["pull_in_time_s"]["max"] <= max(seats) * 1.001
