"""``coildrive tune`` end to end through real subprocesses, as a user runs it.

The generated header is compiled with gcc -std=c99 -Wall -Wextra -Werror -pedantic
(the C compiler is the outside reference for "valid C"); the pasted ``[hold]`` section
is fed back through ``coildrive design``.
"""

from __future__ import annotations

import json
import re
import subprocess

import pytest

from conftest import EXAMPLES, json_error, require_tool, run_cli

DEMO = EXAMPLES / "reagent-valve-zener-24v.toml"  # a Zener hold: what the objective must count
NARROW = ["--min-frequency", "30 kHz", "--max-frequency", "34 kHz", "--levels", "3"]
HOLD_KEYS = ("frequency_hz", "duty", "min_mean_current_a", "max_mean_current_a", "ripple_a")


@pytest.fixture(scope="module")
def tuned():
    r = run_cli("tune", str(DEMO), "--json", *NARROW)
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout)  # stdout holds one JSON document and nothing else


def test_json_contract(tuned):
    rec = tuned["recommendation"]
    for key in HOLD_KEYS + ("coil_power_w", "switch_power_w", "coil_temp_c"):
        assert isinstance(rec[key], (int, float)), key
    assert tuned["ok"] is True and tuned["design_ok"] is True
    cands = tuned["candidates"]
    assert 1 <= len(cands) <= 20
    assert [c["rank"] for c in cands] == list(range(1, len(cands) + 1))
    # within 1 % of the least supply power: by switching loss, then nearness to hold.frequency
    ranking = tuned["ranking"]
    assert ranking["tie_band"] == 0.01 and ranking["file_frequency_hz"] == 25e3
    band = [c for c in cands if c["in_tie_band"]]
    assert band == cands[:len(band)] and len(band) == min(ranking["settings_in_band"], len(cands)) >= 2
    least = min(c["total_power_w"] for c in cands)
    assert all(c["total_power_w"] <= least * 1.01 for c in band)
    keys = [(c["switching_power_w"], abs(c["frequency_hz"] - 25e3)) for c in band]
    assert keys == sorted(keys)
    margin = cands[1]["total_power_w"] - cands[0]["total_power_w"]
    assert ranking["first_two_margin_w"] == margin
    assert ranking["first_two_margin_percent"] == pytest.approx(100 * margin / cands[0]["total_power_w"])
    for c in cands:  # the objective is all the hold power from the supply, split at its corner
        parts = c["worst_corner_powers_w"]
        assert sum(parts.values()) == pytest.approx(c["total_power_w"], rel=1e-12)
        assert parts["zener"] > 4 and c["freewheel_power_w"] >= parts["zener"] + parts["diode"] - 1e-12
        assert c["frequency_hz"] == int(c["frequency_hz"]) and (
            int(c["frequency_hz"]) * c["prescaler"] * c["period_ticks"] == 84_000_000)
    first = {k: v for k, v in cands[0].items() if k not in ("rank", "feasible", "failed")}
    assert first == {k: v for k, v in rec.items() if k != "hold_toml"}, "rank 1 is the recommendation"
    sweep = tuned["sweep"]
    assert sweep["min_frequency_hz"] == 30e3 and sweep["max_frequency_hz"] == 34e3
    assert 30e3 <= rec["frequency_hz"] <= 34e3
    assert sweep["corners"] == 24 and sweep["levels"] == 3
    assert any("licensed practice" in c for c in tuned["cautions"]), "safety cautions kept"


def test_pasted_hold_section_reproduces_the_recommendation(tmp_path, tuned):
    rec = tuned["recommendation"]
    text = DEMO.read_text()
    start = text.index("[hold]")
    end = text.index("[release]")
    drive = tmp_path / "tuned.toml"
    drive.write_text(text[:start] + rec["hold_toml"] + "\n" + text[end:])
    r = run_cli("design", str(drive), "--json", cwd=EXAMPLES)
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert re.search(rf"^frequency = {int(rec['frequency_hz'])}  # Hz = 84 MHz / \(prescaler "
                     rf"{rec['prescaler']} x period {rec['period_ticks']}\), compare {rec['compare_ticks']}$",
                     rec["hold_toml"], re.M), rec["hold_toml"]
    assert d["hold"]["frequency_hz"] == rec["frequency_hz"]
    assert d["hold"]["duty"] == rec["duty"]
    assert d["timer"]["compare_ticks"] == rec["compare_ticks"]
    assert d["timer"]["period_ticks"] == rec["period_ticks"]
    # self-heating tolerance of model/thermal.py (1e-4 K) -> < 1e-6 relative in current
    assert d["hold"]["min_mean_current_a"] == pytest.approx(rec["min_mean_current_a"], rel=2e-6)
    assert d["hold"]["ripple_a"] == pytest.approx(rec["ripple_a"], rel=2e-6)


def test_table_header_and_plot(tmp_path, tuned):
    require_tool("gcc")
    header, plot = tmp_path / "tuned.h", tmp_path / "tuned.png"
    r = run_cli("tune", str(DEMO), *NARROW, "--header", str(header), "--plot", str(plot),
                "--prefix", "VT")
    assert r.returncode == 0, r.stderr
    out = r.stdout
    assert "feasible settings" in out and "recommended:" in out
    assert "Paste into the drive file:" in out and re.search(r"^\[hold\]$", out, re.M)
    assert "licensed practice" in out and "switch see up to" in out, "cautions shown"
    j = tuned["recommendation"]  # the same options with --json
    m = re.search(r"^#2 draws ([\d.]+) ([mµ]?W) \(([\d.]+) %\) (more|less) than #1 from the supply$", out, re.M)
    assert m, out
    margin = tuned["ranking"]["first_two_margin_w"]
    scale = {"W": 1.0, "mW": 1e-3, "µW": 1e-6}[m.group(2)]
    assert float(m.group(1)) * scale == pytest.approx(abs(margin), rel=5e-3)
    assert m.group(4) == ("more" if margin >= 0 else "less")
    assert re.search(r"^ ?1\* " + str(int(j["frequency_hz"])) + r" ", out, re.M), "rank 1 in the tie band"
    assert f"frequency = {int(j['frequency_hz'])}  # Hz = 84 MHz / (prescaler {j['prescaler']} x period" in out
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    text = header.read_text()
    m = re.search(r"#define VT_HOLD_COMPARE_COUNTS\s+(\d+)U", text)
    src = tmp_path / "main.c"
    src.write_text('#include <stdio.h>\n#include "tuned.h"\nint main(void)\n{\n'
                   '    printf("%lu %lu\\n", (unsigned long)VT_HOLD_COMPARE_COUNTS, '
                   '(unsigned long)VT_TIMER_PERIOD_COUNTS);\n    return 0;\n}\n')
    exe = tmp_path / "main"
    cc = subprocess.run(["gcc", "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(src),
                         "-o", str(exe)], capture_output=True, text=True, cwd=tmp_path)
    assert cc.returncode == 0, cc.stderr
    compare, period = map(int, subprocess.run([str(exe)], capture_output=True, text=True,
                                              check=True).stdout.split())
    assert (compare, period) == (j["compare_ticks"], j["period_ticks"]) and m


def test_too_tight_ripple_exits_1_and_says_why(tmp_path):
    header = tmp_path / "x.h"
    r = run_cli("tune", str(DEMO), *NARROW, "--max-ripple", "0.1 mA", "--json", "--header", str(header))
    assert r.returncode == 1, r.stderr
    d = json.loads(r.stdout)
    assert d["ok"] is False and d["recommendation"] is None and d["candidates"] == []
    assert "ripple <= 0.1 mA" in d["explanation"]
    assert "no feasible hold setting: ripple" in r.stderr
    assert not header.exists()
    r = run_cli("tune", str(DEMO), *NARROW, "--max-ripple", "0.1 %")
    assert r.returncode == 1 and "no feasible hold setting" in r.stdout


@pytest.mark.parametrize("args, fragment", [
    (["--margin", "0.5"], "--margin: 0.5 is below 1"),
    (["--max-ripple", "3 V"], "--max-ripple: '3 V' is a voltage"),
    (["--max-ripple", "-2 mA"], "--max-ripple: '-2 mA' must be greater than zero"),
    (["--min-frequency", "fast"], "--min-frequency: 'fast' is not a number"),
    (["--max-frequency", "10 kHz"], "--max-frequency: 10000 Hz is below --min-frequency"),
    (["--levels", "0"], "--levels: 0 is out of range"),
    (["--level-step", "0"], "--level-step: 0 must be greater than zero"),
    (["--min-steps", "1"], "--min-steps: 1 is below 2"),
    (["--prefix", "9x", "--header", "x.h"], "--prefix: '9x' is not a C identifier"),
    (["--board", "nowhere"], "--board: unknown board 'nowhere'"),
])
def test_bad_options_one_line_exit_2(tmp_path, args, fragment):
    r = run_cli("tune", str(DEMO), *args, "--json", cwd=tmp_path)
    assert r.returncode == 2, (r.returncode, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in r.stderr, r.stderr
    assert fragment in lines[0], lines[0]
    json_error(r.stdout, r.stderr)
    assert not (tmp_path / "x.h").exists()


def test_bad_drive_file_exit_2(tmp_path):
    bad = tmp_path / "v.toml"
    bad.write_text(DEMO.read_text().replace('"60 mH"', '"60 mV"'))
    r = run_cli("tune", str(bad))
    assert r.returncode == 2 and "coil.inductance: '60 mV' is a voltage" in r.stderr


def test_docs_show_what_tune_prints():
    """docs/tuning.md quotes a real run on the demo valve: keep it true."""
    from conftest import ROOT
    doc = (ROOT / "docs" / "tuning.md").read_text()
    m = re.search(r"recommended: ([\d.]+) Hz \(prescaler (\d+), period (\d+)\), compare (\d+)", doc)
    assert m, "the usage section shows a recommendation"
    r = run_cli("tune", str(EXAMPLES / "demo-valve.toml"), "--json")
    rec = json.loads(r.stdout)["recommendation"]
    assert f"{rec['frequency_hz']:.0f}" == m.group(1)
    assert (rec["prescaler"], rec["period_ticks"], rec["compare_ticks"]) == tuple(map(int, m.groups()[1:]))
    assert rec["hold_toml"].splitlines()[2] in doc, "the pasted [hold] section is the real one"
