"""The command line end to end, through real subprocesses, as a user runs it."""

from __future__ import annotations

import json
import re

import pytest

from conftest import EXAMPLES, json_error, run_cli

DEMO_TEXT = (EXAMPLES / "reagent-valve-zener-24v.toml").read_text()  # no [freewheel] of its own


def _variant(tmp_path, old: str, new: str, name: str = "valve.toml"):
    assert old in DEMO_TEXT, old
    path = tmp_path / name
    path.write_text(DEMO_TEXT.replace(old, new))
    return path


def test_demo_writes_header_and_prints_table(tmp_path):
    r = run_cli("demo", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "pull-in time (worst)" in r.stdout
    assert "design ok" in r.stdout
    assert "licensed practice" in r.stdout  # cautions shown
    header = (tmp_path / "demo_valve.h").read_text()
    assert "#ifndef VALVE_DRIVE_H" in header
    assert "wrote header demo_valve.h" in r.stderr


def test_design_json_has_contract_keys(demo_drive):
    r = run_cli("design", str(demo_drive), "--json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)  # stdout holds one JSON document and nothing else
    for path in ["pull_in.time_s", "pull_in.peak_time_s", "hold.frequency_hz", "hold.duty",
                 "hold.min_mean_current_a", "hold.max_mean_current_a", "hold.ripple_a",
                 "release.time_s", "release.peak_switch_voltage_v", "release.energy_j",
                 "timer.prescaler", "timer.period_ticks", "timer.compare_ticks"]:
        node = d
        for part in path.split("."):
            assert part in node, f"{path} missing from design JSON"
            node = node[part]
        assert isinstance(node, (int, float)), path
    # the envelope: supplies (min, nominal, max and, with the supply table, just below each
    # entry's code) x 2 ambients x 2 coil temperatures (cold, hot) x 2 R x 2 L
    supplies = 3 + len(d["duty_table"]["adc_codes"]) - 1
    assert len(d["corners"]) == supplies * 2 * 2 * 2 * 2
    assert d["hold"]["regulation"] == "supply_table"
    for key in ["supply_v", "coil_temp_c", "resistance_ohm", "inductance_h", "pull_in_time_s",
                "hold_mean_current_a", "hold_ripple_a", "release_time_s", "peak_switch_voltage_v",
                "release_energy_j"]:
        assert all(key in c for c in d["corners"]), key
    assert all({"name", "ok", "detail"} <= set(c) for c in d["checks"])
    assert d["pull_in"]["time_s"] == max(c["pull_in_time_s"] for c in d["corners"])
    assert d["hold"]["min_mean_current_a"] == min(c["hold_mean_current_a"] for c in d["corners"])


def test_design_header_plot_and_monte_carlo(tmp_path, demo_drive):
    header, plot = tmp_path / "v.h", tmp_path / "v.png"
    r = run_cli("design", str(demo_drive), "--header", str(header), "--plot", str(plot),
                "--prefix", "VALVE2", "--samples", "2000")
    assert r.returncode == 0, r.stderr
    assert "#define VALVE2_HOLD_COMPARE_COUNTS" in header.read_text()
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "Monte Carlo: 2000 samples" in r.stdout


def test_header_is_reproducible(tmp_path, demo_drive):
    a, b = tmp_path / "a.h", tmp_path / "b.h"
    assert run_cli("design", str(demo_drive), "--header", str(a)).returncode == 0
    # the same inputs with other formatting and comments give the same header
    reformatted = tmp_path / "demo-valve.toml"
    reformatted.write_text("# another comment\n" + demo_drive.read_text().replace('"22 ohm"', "22.0")
                           .replace('board = "lab-m32-zener"', "board='lab-m32-zener'"))
    assert run_cli("design", str(reformatted), "--header", str(b)).returncode == 0
    assert a.read_text() == b.read_text()


def test_failed_design_exits_1_and_writes_no_header(tmp_path):
    drive = _variant(tmp_path, 'max_voltage' if False else 'current = "0.55 A"', 'current = "0.95 A"')
    header = tmp_path / "out.h"
    header.write_text("/* the previous header */\n")
    r = run_cli("design", str(drive), "--header", str(header))
    assert r.returncode == 1, r.stdout + r.stderr
    assert "FAIL" in r.stdout and "pull_in_reachable" in r.stdout
    assert "not written" in r.stderr
    assert header.read_text() == "/* the previous header */\n"  # left as it was


def test_simulate_csv(tmp_path, demo_drive):
    out = tmp_path / "wave.csv"
    r = run_cli("simulate", str(demo_drive), "--supply", "20", "--coil-temp", "85",
                "--hold-time", "0.05", "--csv", str(out))
    assert r.returncode == 0, r.stderr
    lines = out.read_text().splitlines()
    assert lines[0].startswith("time_s,current_a")
    rows = [list(map(float, line.split(","))) for line in lines[1:]]
    t = [row[0] for row in rows]
    assert all(b > a for a, b in zip(t, t[1:])), "time strictly increasing"
    assert rows[0][1] == 0.0 and rows[-1][1] == 0.0, "starts and ends at zero current"
    edges = sum(1 for a, b in zip(rows, rows[1:]) if a[2] != b[2])
    # 25 kHz for 50 ms: 1250 periods, two edges each (less the last off-edge), plus the ends
    assert edges >= 2 * 1250 - 1, edges


def test_boards_lists_bundled_profiles():
    r = run_cli("boards", "--json")
    assert r.returncode == 0, r.stderr
    boards = json.loads(r.stdout)
    names = {b["name"] for b in boards}
    assert {"lab-m32-zener", "tiny-8bit-diode", "fast-32bit-clamp"} <= names
    assert {b["freewheel"] for b in boards} >= {"diode", "zener", "clamp", "resistor"}
    assert {b["sense_position"] for b in boards} == {"coil", "switch"}
    r = run_cli("boards")
    assert r.returncode == 0 and "tiny-8bit-diode" in r.stdout


BAD_INPUTS = [
    # (replace, with, expected fragment of the one error line)
    ('resistance = "22 ohm"', 'resistance = "22 mH"', "coil.resistance: '22 mH' is an inductance"),
    ('resistance = "22 ohm"', 'resistance = "-22 ohm"', "coil.resistance: '-22 ohm' must be greater than zero"),
    ('resistance = "22 ohm"', "resistance = 0", "coil.resistance: 0 must be greater than zero"),
    ('resistance = "22 ohm"        # at reference_temp\n', "", "coil.resistance: missing"),
    ('min = "20 V"', 'min = "30 V"', "supply.min: 30 V is above supply.max"),
    ('current = "0.22 A"', 'current = "0.6 A"', "hold.current: 0.6 A is not below pull_in.current"),
    ('board = "lab-m32-zener"', 'board = "no-such-board"', "board: unknown board 'no-such-board'"),
    ("resistance_tolerance = 0.07", "resistance_tolerance = 1.2", "coil.resistance_tolerance: 1.2 must be a fraction below 1"),
    ("inductance_tolerance = 0.15", "inductance_tolerance = 0.15\ncolour = 'red'", "coil.colour: unknown key"),
    ("[release]", "[relase]\ncurrent = 1\n[release]", "relase: unknown section [relase]"),
    ('frequency = "25 kHz"', 'frequency = "25 kV"', "hold.frequency: '25 kV' is a voltage, expected a frequency"),
    ('max = "50 degC"', 'max = "50 V"', "ambient.max: '50 V': unit 'V' is not a temperature"),
    ('margin = 1.5', 'margin = 0.5', "pull_in.margin: 0.5 is outside 1 .. 10"),
    ("[hold]", "[hold]\nmode = 'sideways'", "hold.mode: 'sideways' is not one of"),
    ('current = "0.10 A"', 'current = "0.3 A"', "release.current: 0.3 A drop-out is not below hold.current"),
    ("[release]", "[freewheel]\nzener_voltage = \"-3 V\"\n[release]", "freewheel.zener_voltage: '-3 V' must not be negative"),
]


@pytest.mark.parametrize("old, new, fragment", BAD_INPUTS, ids=[b[2].split(":")[0] for b in BAD_INPUTS])
def test_bad_input_one_line_exit_2_nothing_written(tmp_path, old, new, fragment):
    drive = _variant(tmp_path, old, new)
    header = tmp_path / "out.h"
    r = run_cli("design", str(drive), "--header", str(header), "--json")
    assert r.returncode == 2, (r.returncode, r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1, r.stderr
    assert "Traceback" not in r.stderr
    assert lines[0].startswith(f"coildrive: {drive}: ") or "board" in fragment, lines[0]
    assert fragment in lines[0], lines[0]
    json_error(r.stdout, r.stderr)  # stdout: the error as one JSON document, nothing else
    assert not header.exists(), "no file written"


def test_bad_toml_and_missing_file(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[coil\nresistance = 3\n")
    r = run_cli("design", str(bad))
    assert r.returncode == 2 and "not valid TOML" in r.stderr and len(r.stderr.strip().splitlines()) == 1
    r = run_cli("design", str(tmp_path / "absent.toml"))
    assert r.returncode == 2 and "absent.toml: file not found" in r.stderr


def test_bad_board_file_names_board_file(tmp_path):
    board = tmp_path / "myboard.toml"
    text = (EXAMPLES.parent / "boards" / "lab-m32-zener.toml").read_text()
    board.write_text(text.replace("bits = 12", "bits = 40"))
    drive = _variant(tmp_path, 'board = "lab-m32-zener"', 'board = "myboard.toml"')
    r = run_cli("design", str(drive))
    assert r.returncode == 2
    assert re.search(r"myboard\.toml: adc\.bits: 40 is out of range", r.stderr), r.stderr


def test_drive_override_of_board_switch_names_drive_file(tmp_path):
    drive = _variant(tmp_path, "[release]", "[switch]\nmax_voltage = \"40 V\"\n[release]")
    r = run_cli("design", str(drive), "--json")
    assert r.returncode == 1, r.stderr  # 61.9 V peak exceeds 80 % of 40 V
    d = json.loads(r.stdout)
    assert d["release"]["switch_rating_v"] == 40.0
    drive = _variant(tmp_path, "[release]", "[switch]\nmax_voltage = \"forty\"\n[release]", "v2.toml")
    r = run_cli("design", str(drive))
    assert r.returncode == 2 and f"{drive}: switch.max_voltage" in r.stderr


@pytest.mark.parametrize("args, fragment", [
    (["--prefix", "1BAD", "--header", "x.h"], "--prefix: '1BAD' is not a C identifier"),
    (["--samples", "-3"], "--samples: -3 is negative"),
    (["--board", "nowhere"], "--board: unknown board 'nowhere'"),
])
def test_bad_options(tmp_path, demo_drive, args, fragment):
    r = run_cli("design", str(demo_drive), *args, cwd=tmp_path)
    assert r.returncode == 2, r.stderr
    assert fragment in r.stderr
    assert not (tmp_path / "x.h").exists()


@pytest.mark.parametrize("args, fragment", [
    (["--supply", "twenty"], "--supply: 'twenty' is not a number"),
    (["--supply", "-5"], "--supply: '-5' must be greater than zero"),
    (["--supply", "20", "--coil-temp", "85 V"], "--coil-temp"),
])
def test_simulate_bad_options(tmp_path, demo_drive, args, fragment):
    full = ["simulate", str(demo_drive), "--csv", str(tmp_path / "w.csv")] + args
    if "--coil-temp" not in args:
        full += ["--coil-temp", "85"]
    r = run_cli(*full)
    assert r.returncode == 2, r.stderr
    assert fragment in r.stderr and "Traceback" not in r.stderr
    assert not (tmp_path / "w.csv").exists()


def test_debug_shows_traceback(tmp_path):
    r = run_cli("--debug", "design", str(tmp_path / "absent.toml"))
    assert r.returncode != 0 and "Traceback" in r.stderr


def test_version():
    r = run_cli("--version")
    assert r.returncode == 0 and r.stdout.startswith("coildrive ")


def test_firmware_stream_command(tmp_path):
    r = run_cli("firmware-stream", str(tmp_path / "fw"), "--prefix", "valve", "--board", "lab-m32-zener")
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "fw" / "valve_stream.h").is_file() and (tmp_path / "fw" / "valve_stream.c").is_file()
    r = run_cli("firmware-stream", str(tmp_path / "fw2"), "--blocks", "3")
    assert r.returncode == 2 and "--blocks" in r.stderr and "Traceback" not in r.stderr
    assert not (tmp_path / "fw2" / "coil_stream.h").exists()
