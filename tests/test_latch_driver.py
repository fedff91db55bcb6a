"""The latching coil's reference driver: its pulses and interval against the header.

Outside sources: gcc compiles the generated driver (C99, every warning an error) with
tests/data/latch_target.c and runs a script; the pulse lengths, the interval between
pulse starts and the switches of each polarity the run shows must be the header's
constants (the header's own values, read from its text, and the design's). avr-gcc and
simavr (cycle-level ATmega328P), and arm-none-eabi-gcc and QEMU (Cortex-M0+, M3, M4,
tests/cortex_trace.py) run the same program and must print the same lines; the tick's
worst cycles bound firmware-driver's budget (coildrive.codegen.latch_driver).
"""

from __future__ import annotations

import re

import pytest

from coildrive.codegen.latch_driver import LATCH_TICK_CYCLES, LATCH_TICK_INSTRUCTIONS
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from conftest import EXAMPLES
from driver_harness import run_avr, run_host, write_latch_sources

pytestmark = pytest.mark.compiler

ON, OFF = 1, 3
PATHS = {"bridge": EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml",
         "relay": EXAMPLES / "latching" / "bistable-relay-reset-winding-24v.toml"}
DESIGNS = {name: design_latch(load_drive(p)) for name, p in PATHS.items()}
measured: dict[str, int] = {}


def header_value(folder, name: str) -> int:
    text = (folder / "coil_drive.h").read_text() + (folder / "coil_driver.h").read_text()
    m = re.search(rf"^#define COIL_{name}\s+(\d+)UL?\b", text, re.M)
    assert m, name
    return int(m.group(1))


def script(d) -> list[tuple[str, int]]:
    """Set (waits an interval after init), a reset asked at once after it (waits for the
    interval), a set stopped after its third tick (the set runs from tick 3i - 1), then a reset and a set asked together
    (the latest wins)."""
    i = d.latch.interval_ticks
    s, r = (p.ticks for p in d.latch.pulses)
    return [("set", 0), ("run", s + i + 1), ("reset", 0), ("run", i + r + 1),
            ("set", 0), ("run", i - s - r), ("stop", 0), ("run", 2),
            ("reset", 0), ("set", 0), ("run", i + s + 1)]


def lines(run, kind):
    return [tuple(int(x) for x in line.split()[1:]) for line in run.lines if line.startswith(kind + " ")]


@pytest.mark.parametrize("name", list(PATHS))
def test_pulses_and_interval_are_the_headers(tmp_path, name):
    d = DESIGNS[name]
    run = run_host(tmp_path, d, script(d), writer=write_latch_sources)
    set_t, reset_t, interval = (header_value(tmp_path, k) for k in
                                ("SET_PULSE_TICKS", "RESET_PULSE_TICKS", "MIN_INTERVAL_TICKS"))
    assert (set_t, reset_t, interval) == (d.latch.pulses[0].ticks, d.latch.pulses[1].ticks, d.latch.interval_ticks)
    masks = {0: header_value(tmp_path, "DRIVER_SET_SWITCHES"), 1: header_value(tmp_path, "DRIVER_RESET_SWITCHES")}
    ev = lines(run, "e")
    ons = [(t, v) for t, k, v in ev if k == ON]
    offs = [t for t, k, _ in ev if k == OFF]
    # ticks from 0; init counts as the last pulse's start: the first pulse on the interval's tick
    assert ons[0] == (interval - 1, 0), "the first pulse waits one interval after init"
    assert [v for _, v in ons] == [0, 1, 0, 0], "set, reset, set (stopped), set (the latest request)"
    assert offs[0] - ons[0][0] == set_t and offs[1] - ons[1][0] == reset_t, "each pulse lasts its header ticks"
    assert ons[1][0] - ons[0][0] == interval, "a reset asked at once waits for the interval, start to start"
    assert ons[2][0] - ons[1][0] == interval
    assert offs[2] - ons[2][0] == 3, "STOP ends the pulse at the next tick"
    assert ons[3][0] - ons[2][0] == interval, "a stopped pulse's start still counts for the interval"
    # the switches: the pulse's polarity on at its ON, all open at its OFF, nothing else
    sw = lines(run, "w")
    assert sw[0] == (0, 0) or sw[0][1] == 0, "init opens every switch"
    want = [(0, 0)]
    for (t_on, v), t_off in zip(ons, offs):
        want += [(t_on, masks[v]), (t_off, 0)]
    assert [m for _, m in sw] == [m for _, m in want] and [t for t, _ in sw[1:]] == [t for t, _ in want[1:]]
    if name == "bridge":
        # never both switches of one leg (Q1 with Q2, Q3 with Q4): common practice
        for m in masks.values():
            assert not (m & 0b11 == 0b11 or m & 0b1100 == 0b1100), m
        assert masks == {0: 0b1001, 1: 0b0110}, "set Q1 + Q4, reset Q3 + Q2"
    assert lines(run, "x")[-1] == (0,), "the driver is off at the end"


@pytest.mark.parametrize("name", list(PATHS))
def test_simulated_avr_runs_what_the_host_build_runs(tmp_path, name):
    d = DESIGNS[name]
    (tmp_path / "host").mkdir()
    host = run_host(tmp_path / "host", d, script(d), writer=write_latch_sources)
    avr = run_avr(tmp_path, d, script(d), writer=write_latch_sources)
    assert [x for x in avr.lines if not x.startswith("c ")] == [x for x in host.lines if not x.startswith("c ")]
    cycles = avr.cycles()["tick"]
    measured[f"avr {name}"] = cycles
    assert cycles <= LATCH_TICK_CYCLES["avr"], f"{name}: tick {cycles} cycles above the budget's bound"


@pytest.mark.parametrize("core", ["cortex-m0plus", "cortex-m3", "cortex-m4"])
def test_cortex_runs_what_the_host_build_runs(tmp_path, core):
    from cortex_trace import run
    d = DESIGNS["bridge"]     # the longer path of the two examples (the relay's: 60 instructions)
    (tmp_path / "host").mkdir()
    host = run_host(tmp_path / "host", d, script(d), writer=write_latch_sources)
    (tmp_path / core).mkdir()
    arm = run(tmp_path / core, d, script(d), core, writer=write_latch_sources)
    assert [x for x in arm.lines if not x.startswith("c ")] == [x for x in host.lines if not x.startswith("c ")]
    measured[core] = arm.cycles["tick"]
    measured[core + " instructions"] = arm.instructions["tick"]
    assert arm.cycles["tick"] <= LATCH_TICK_CYCLES[core]
    assert arm.instructions["tick"] <= LATCH_TICK_INSTRUCTIONS[core]


def test_cycle_bounds_are_tight():
    if len(measured) < 2 + 6:
        pytest.skip("needs every run (run the whole file)")
    assert max(measured["avr bridge"], measured["avr relay"]) >= 0.9 * LATCH_TICK_CYCLES["avr"]
    for core, instructions in LATCH_TICK_INSTRUCTIONS.items():
        assert measured[core] >= 0.9 * LATCH_TICK_CYCLES[core], core
        assert measured[core + " instructions"] == instructions, core


def test_firmware_driver_writes_the_latch_driver(tmp_path):
    from conftest import run_cli
    r = run_cli("firmware-driver", str(PATHS["relay"]), "--out", str(tmp_path / "fw"), "--prefix", "relay1")
    assert r.returncode == 0, r.stderr
    assert sorted(p.name for p in (tmp_path / "fw").iterdir()) == ["relay1_drive.h", "relay1_driver.c", "relay1_driver.h"]
    assert "RELAY1_MIN_INTERVAL_TICKS" in (tmp_path / "fw" / "relay1_drive.h").read_text()
    assert f"tick {LATCH_TICK_CYCLES['avr']} of 16,000 cycles a tick" in r.stderr, r.stderr


def test_latch_driver_compiles_warning_free_in_every_dialect(tmp_path):
    """Both examples' drivers, each under its own prefix in one unit, for every target of
    tests/test_cross_compile.py (C99, C11, C++11 on the host; Cortex-M0+, M4; ATmega328P)
    with every warning an error."""
    import subprocess

    from coildrive.codegen.latch_driver import render_latch_driver
    from conftest import require_tool
    from test_cross_compile import STRICT, TARGETS

    lines = []
    for name, d in DESIGNS.items():
        for file, text in render_latch_driver(d, name).items():
            (tmp_path / file).write_text(text)
        lines.append(f'#include "{name}_driver.c"')
    (tmp_path / "drivers.c").write_text("\n".join(lines) + "\n")
    for target, (compiler, flags, _) in TARGETS.items():
        r = subprocess.run([require_tool(compiler), *STRICT, *flags, "-I", str(tmp_path), "-c",
                            str(tmp_path / "drivers.c"), "-o", str(tmp_path / f"{target}.o")],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 0 and r.stderr == "", f"{target}:\n{r.stderr}"
