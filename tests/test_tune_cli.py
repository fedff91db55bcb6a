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

from conftest import EXAMPLES, require_tool, run_cli

DEMO = EXAMPLES / "demo-valve.toml"
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
    assert [c["total_power_w"] for c in cands] == sorted(c["total_power_w"] for c in cands)
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
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    text = header.read_text()
    m = re.search(r"#define VT_HOLD_COMPARE_TICKS\s+(\d+)U", text)
    src = tmp_path / "main.c"
    src.write_text('#include <stdio.h>\n#include "tuned.h"\nint main(void)\n{\n'
                   '    printf("%lu %lu\\n", (unsigned long)VT_HOLD_COMPARE_TICKS, '
                   '(unsigned long)VT_TIMER_PERIOD_TICKS);\n    return 0;\n}\n')
    exe = tmp_path / "main"
    cc = subprocess.run(["gcc", "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(src),
                         "-o", str(exe)], capture_output=True, text=True, cwd=tmp_path)
    assert cc.returncode == 0, cc.stderr
    compare, period = map(int, subprocess.run([str(exe)], capture_output=True, text=True,
                                              check=True).stdout.split())
    j = tuned["recommendation"]  # the same options with --json
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
    assert json.loads(r.stdout) == {"error": lines[0].removeprefix("coildrive: "), "exit_code": 2}
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
    r = run_cli("tune", str(DEMO), "--json")
    rec = json.loads(r.stdout)["recommendation"]
    assert f"{rec['frequency_hz']:.6g}" == m.group(1)
    assert (rec["prescaler"], rec["period_ticks"], rec["compare_ticks"]) == tuple(map(int, m.groups()[1:]))
    assert rec["hold_toml"].splitlines()[2] in doc, "the pasted [hold] section is the real one"
