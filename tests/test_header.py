"""Generated headers compile cleanly and carry the design's numbers (checked with gcc/g++).

Every bundled board x example is designed; the header of each passing design is compiled
with gcc -std=c99/-std=c11 and g++ -std=c++11, -Wall -Wextra -Werror -pedantic, and a C
program prints its constants back for comparison with ``design --json``.
"""

from __future__ import annotations

import itertools
import json
import subprocess

import pytest

from coildrive.config import load_drive
from coildrive.design import design
from coildrive.codegen.header import generate_header
from conftest import BOARDS, EXAMPLES, loads, require_tool, run_cli

FLAGS = ["-Wall", "-Wextra", "-Werror", "-pedantic"]
COMBOS = [(e, b) for e, b in itertools.product(sorted(p.stem for p in EXAMPLES.glob("*.toml")),
                                               sorted(p.stem for p in BOARDS.glob("*.toml")))
          if loads(EXAMPLES / f"{e}.toml", b)]

PRINTER = r"""
#include <stdio.h>
#include "drive.h"
int main(void)
{
    unsigned int k;
    printf("prescaler %lu\n", (unsigned long)P_TIMER_PRESCALER);
    printf("period_ticks %lu\n", (unsigned long)P_TIMER_PERIOD_COUNTS);
    printf("compare_ticks %lu\n", (unsigned long)P_HOLD_COMPARE_COUNTS);
    printf("peak_ticks %lu\n", (unsigned long)P_PEAK_TICKS);
    printf("lockout_ticks %lu\n", (unsigned long)P_RELEASE_LOCKOUT_TICKS);
    printf("pull_in_code %lu\n", (unsigned long)P_ADC_PULL_IN_CODE);
    printf("hold_code %lu\n", (unsigned long)P_ADC_HOLD_CODE);
    printf("over_current_code %lu\n", (unsigned long)P_ADC_OVER_CURRENT_CODE);
    printf("open_load_code %lu\n", (unsigned long)P_ADC_OPEN_LOAD_CODE);
    printf("regulation %lu\n", (unsigned long)P_HOLD_REGULATION);
#if P_HOLD_REGULATION == P_REGULATION_SUPPLY_TABLE
    for (k = 0U; k < P_DUTY_TABLE_LEN; ++k) {
        printf("table %lu %lu\n", (unsigned long)p_duty_table_adc[k], (unsigned long)p_duty_table_compare[k]);
    }
    printf("lookup_low %lu\n", (unsigned long)p_hold_compare_for_supply(0U));
    printf("lookup_high %lu\n", (unsigned long)p_hold_compare_for_supply(P_ADC_MAX_CODE));
#endif
#if P_PEAK_COMPENSATED
    for (k = 0U; k < P_PEAK_TABLE_LEN; ++k) {
        printf("peaks %lu %lu\n", (unsigned long)p_peak_table_adc[k], (unsigned long)p_peak_table_ticks[k]);
    }
    printf("peak_low %lu\n", (unsigned long)p_peak_ticks_for_supply(0U));
    printf("peak_high %lu\n", (unsigned long)p_peak_ticks_for_supply(P_ADC_MAX_CODE));
#endif
    (void)k;
    return 0;
}
"""


def _compile_and_run(tmp_path, header_text: str, compiler: str, std: str, source: str = PRINTER):
    (tmp_path / "drive.h").write_text(header_text)
    ext = "cpp" if compiler == "g++" else "c"
    src = tmp_path / f"main_{std}.{ext}"
    src.write_text(source)
    exe = tmp_path / f"main_{std}"
    r = subprocess.run([compiler, f"-std={std}", *FLAGS, str(src), "-o", str(exe)],
                       capture_output=True, text=True)
    assert r.returncode == 0, f"{compiler} -std={std}: {r.stderr}"
    out = subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout
    values: dict = {"table": [], "peaks": []}
    for line in out.splitlines():
        parts = line.split()
        if parts[0] in ("table", "peaks"):
            values[parts[0]].append((int(parts[1]), int(parts[2])))
        else:
            values[parts[0]] = int(parts[1])
    return values


@pytest.mark.compiler
@pytest.mark.parametrize("example, board", COMBOS)
def test_header_compiles_and_matches_design(tmp_path, example, board):
    require_tool("gcc")
    require_tool("g++")
    # The CLI writes no header for a failing design, but the generator's C must be valid
    # for every combination all the same (a failed check is physics, not syntax).
    d = design(load_drive(EXAMPLES / f"{example}.toml", board))
    text = generate_header(d, prefix="P")
    if d.pull_in.peak_ticks is None:
        # no peak (the pull-in current is never reached): the header stops the build
        (tmp_path / "drive.h").write_text(text)
        (tmp_path / "m.c").write_text(PRINTER)
        r = subprocess.run(["gcc", "-std=c99", *FLAGS, str(tmp_path / "m.c"), "-o", str(tmp_path / "m")],
                           capture_output=True, text=True)
        assert r.returncode != 0 and "peak phase shorter than one tick" in r.stderr, r.stderr
        return
    for compiler, std in (("gcc", "c99"), ("gcc", "c11"), ("g++", "c++11")):
        v = _compile_and_run(tmp_path, text, compiler, std)
        assert v["prescaler"] == d.timer.prescaler
        assert v["period_ticks"] == d.timer.period_ticks
        assert v["compare_ticks"] == d.timer.compare_ticks
        assert v["peak_ticks"] == d.pull_in.peak_ticks
        assert v["lockout_ticks"] == d.release.lockout_ticks
        assert v["pull_in_code"] == d.adc.pull_in_code
        assert v["hold_code"] == d.adc.hold_code
        assert v["over_current_code"] == d.adc.over_current_code
        assert v["open_load_code"] == d.adc.open_load_code
        assert v["regulation"] == {"fixed": 0, "supply_table": 1, "current": 2, "closed_loop": 3}[d.hold.regulation]
        assert v["table"] == list(zip(d.duty_table.adc_codes, d.duty_table.compare_ticks))
        if d.duty_table.adc_codes:
            assert v["lookup_low"] == d.duty_table.compare_ticks[0], "below the table: highest duty"
            assert v["lookup_high"] == d.duty_table.compare_ticks[-1]
        if d.peak_table is not None:
            assert v["peaks"] == list(zip(d.peak_table.adc_codes, d.peak_table.peak_ticks))
            assert v["peak_low"] == d.peak_table.peak_ticks[0] == d.pull_in.peak_ticks


def test_every_board_has_a_passing_example():
    passing = {b for e, b in COMBOS if design(load_drive(EXAMPLES / f"{e}.toml", b)).ok}
    assert passing == {p.stem for p in BOARDS.glob("*.toml")}


@pytest.mark.compiler
def test_cli_header_matches_cli_json(tmp_path, demo_drive):
    """The header written by the CLI carries the numbers the CLI's JSON reports."""
    require_tool("gcc")
    header = tmp_path / "cli.h"
    r = run_cli("design", str(demo_drive), "--json", "--header", str(header), "--prefix", "P")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    v = _compile_and_run(tmp_path, header.read_text(), "gcc", "c99")
    assert (v["prescaler"], v["period_ticks"], v["compare_ticks"]) == (
        d["timer"]["prescaler"], d["timer"]["period_ticks"], d["timer"]["compare_ticks"])
    assert v["peak_ticks"] / d["pull_in"]["peak_ticks"] == 1
    assert v["peak_ticks"] >= d["pull_in"]["time_s"] * d["pull_in"]["margin"] * 10_000


@pytest.mark.compiler
def test_range_check_fires_on_a_broken_constant(tmp_path, demo_drive):
    """The header's own range checks stop a build whose constants were edited out of range."""
    require_tool("gcc")
    text = generate_header(design(load_drive(demo_drive)), prefix="P")
    import re
    broken = re.sub(r"#define P_HOLD_COMPARE_COUNTS\s+\d+U", "#define P_HOLD_COMPARE_COUNTS 99999UL", text)
    assert broken != text
    (tmp_path / "drive.h").write_text(broken)
    src = tmp_path / "m.c"
    src.write_text('#include "drive.h"\nint main(void) { return 0; }\n')
    for std in ("c99", "c11"):
        r = subprocess.run(["gcc", f"-std={std}", *FLAGS, str(src), "-o", str(tmp_path / "m")],
                           capture_output=True, text=True)
        assert r.returncode != 0 and "hold compare exceeds the PWM period" in r.stderr, r.stderr


def test_header_has_guard_provenance_and_cautions(demo_drive):
    d = design(load_drive(demo_drive))
    text = generate_header(d, prefix="Valve")
    assert text.count("#ifndef VALVE_DRIVE_H") == 1 and text.rstrip().endswith("#endif /* VALVE_DRIVE_H */")
    assert f"sha256 {d.input_hash}" in text and f"coildrive {d.version}" in text
    assert "CAUTION" in text and "licensed practice" in text
    import re
    assert not re.search(r"20\d\d-\d\d-\d\d", text), "no timestamp: output is reproducible"
    for line in text.splitlines():
        if line.startswith("#define VALVE_") and not line.startswith("#define VALVE_DRIVE_H"):
            # an integer literal, or (the regulation) one of the header's own macros
            assert re.match(r"#define VALVE_\w+\s+(\d+UL?|VALVE_REGULATION_\w+)\s", line), line
