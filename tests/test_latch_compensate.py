"""A latching coil's supply-compensated pulses (``pull_in.compensate`` with ``[hold] mode =
"latch"``): a table of ticks against the supply reading for each pulse.

The drive is the bundled bridge latch (examples/latching/irrigation-valve-bridge-12v.toml)
with ``compensate = true``. References: every entry's length is sized again here from
the RL step written afresh, ``i = V/R (1 - e^(-t R/L))`` and its time to a current
``t = L/R ln(V / (V - R I))`` (the source-driven RL circuit, any circuits text, e.g.
Hayt & Kemmerly, *Engineering Circuit Analysis*), copper's ``R(T)`` (IEC 60028, alpha =
0.00393 /K), the bridge's two switches and the sense resistor, at the entry's bus with the
coil at its limit and every tolerance end; the supply reading is ``floor(V / divider /
V_ref x 2^bits)`` (a truncating converter). The header is compiled with gcc -Wall -Wextra
-Werror -pedantic and its lookup run. The device and check prove the plumbing (the
emulator runs the design's own physics).
"""

from __future__ import annotations

import itertools
import json
import math
import subprocess

import pytest

from conftest import EXAMPLES, require_tool, run_cli
from test_emulator_device import capture_of, run as run_device
from coildrive.bench.device import DeviceOptions
from coildrive.bench.latch_check import check_latch_capture
from coildrive.bench.latch_device import LatchDevice
from coildrive.config import load_drive
from coildrive.design.latch import design_latch, firmware_pulse

BRIDGE = EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml"
ALPHA = 0.00393     # /K, IEC 60028 annealed copper


def compensated(tmp_path, settle='"20 ms"'):
    text = BRIDGE.read_text()
    old = 'settle_time = "20 ms"        # the plunger\'s travel after the current is there\n'
    assert text.count(old) == 1, "precondition: the example's set pulse settle time"
    text = text.replace(old, f"settle_time = {settle}\ncompensate = true\n")
    text = text.replace('board = "bridge-m32-fast"', f'board = "{EXAMPLES.parent / "boards" / "bridge-m32-fast.toml"}"')
    path = tmp_path / "irrigation-compensated.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def design(tmp_path_factory):
    # no settle time on the set pulse: its length is the rise's, which the supply moves most
    path = compensated(tmp_path_factory.mktemp("latch-comp"), settle="0")
    return path, design_latch(load_drive(path))


def test_every_entry_is_the_rl_step_written_afresh(design):
    _, d = design
    drive = d.drive
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    c, b = drive.coil, drive.board
    rate = b.tick.rate
    lsb = b.adc.reference / 2**b.adc.bits
    for p in d.latch.pulses:
        t = p.table
        assert t is not None and len(t.ticks) == 16
        # the readings: a truncating converter at the nominal divider
        assert t.adc_codes == [math.floor(v / b.supply_sense.divider / lsb) for v in t.supply_v]
        r_coil = c.resistance * (1 + ALPHA * (drive.thermal.max_coil_temp - c.reference_temp))
        for v, ticks in zip(t.design_supply_v, t.ticks):
            t_pull = t_force = 0.0
            for rf, lf, sf in itertools.product((1 - c.resistance_tolerance, 1 + c.resistance_tolerance),
                                                (1 - c.inductance_tolerance, 1 + c.inductance_tolerance),
                                                (1 - b.sense.resistance_tolerance, 1 + b.sense.resistance_tolerance)):
                r = r_coil * rf + 2 * drive.switch.on_resistance + b.sense.resistance * sf
                tau = c.inductance * lf / r
                t_pull = max(t_pull, tau * math.log(v / (v - r * p.current_a)))
                t_force = max(t_force, tau * math.log(v / (v - r * p.current_margin * p.current_a)))
            # the peak's rule (docs/design-method.md): the longer of margin x the time and the
            # force time + settle, in whole ticks + 1
            want = max(math.ceil(t_pull * p.margin * rate - 1e-9), math.ceil((t_force + p.settle_time_s) * rate - 1e-9)) + 1
            assert ticks == want, (p.name, v, ticks, want)
        assert t.ticks == sorted(t.ticks, reverse=True) and p.ticks == t.ticks[0] > t.ticks[-1]
        # the lowest entry is sized at the lowest supply: the fixed pulse's length
        assert t.design_supply_v[0] == pytest.approx(drive.supply.min, abs=0.01)


def test_the_energy_and_interval_take_the_shorter_pulses(tmp_path, design):
    _, d = design
    fixed = design_latch(_uncompensated(tmp_path))
    for p, q in zip(d.latch.pulses, fixed.latch.pulses):
        assert p.ticks == q.ticks                 # the longest entry is the fixed pulse
        assert p.supply_j < q.supply_j            # at the highest supply the entry is shorter
    assert d.latch.interval_s <= fixed.latch.interval_s


def _uncompensated(tmp_path):
    path = compensated(tmp_path, settle="0")
    path.write_text(path.read_text().replace("compensate = true\n", ""))
    return load_drive(path)


def test_header_lookup_compiles_and_returns_the_entries(tmp_path, design):
    path, d = design
    header = tmp_path / "latch.h"
    r = run_cli("design", str(path), "--header", str(header), "--prefix", "VALVE")
    assert r.returncode == 0, r.stderr
    text = header.read_text()
    assert "#define VALVE_PULSE_COMPENSATED" in text and "valve_set_pulse_ticks_for_supply" in text
    checks = []
    for p in d.latch.pulses:
        t = p.table
        probes = [(t.adc_codes[0] - 1, t.ticks[0])]          # below them all: the first entry
        probes += [(code, ticks) for code, ticks in zip(t.adc_codes, t.ticks)]
        probes += [(code + 1, ticks) for code, ticks in zip(t.adc_codes, t.ticks)]   # between: the lower
        checks += [f"valve_{p.name}_pulse_ticks_for_supply({code}U) != {ticks}U" for code, ticks in probes]
    main = tmp_path / "main.c"
    main.write_text('#include "latch.h"\nint main(void) {\n  return (' + " || ".join(checks) + ") ? 1 : 0;\n}\n")
    for compiler, std in (("gcc", "c99"), ("g++", "c++11")):
        out = subprocess.run([require_tool(compiler), f"-std={std}", "-Wall", "-Wextra", "-Werror", "-pedantic",
                              "-x", "c" if compiler == "gcc" else "c++", str(main), "-o", str(tmp_path / "a.out")],
                             capture_output=True, text=True, cwd=tmp_path)
        assert out.returncode == 0, out.stderr
        assert subprocess.run([str(tmp_path / "a.out")]).returncode == 0, compiler


def test_simulate_device_and_check_run_the_entry_of_their_supply(tmp_path, design):
    path, d = design
    v = 13.0
    length = firmware_pulse(d, "set", v)
    assert length < d.latch.pulses[0].time_s, "precondition: a shorter entry at 13 V"
    r = run_cli("simulate", str(path), "--supply", "13", "--coil-temp", "20", "--csv", str(tmp_path / "s.csv"))
    assert r.returncode == 0 and f"set pulse {length * 1e3:.4g} ms" in r.stderr, r.stderr
    dev = LatchDevice(d, DeviceOptions(noise_codes=0.5, seed=5, supply=v, coil_temp=20.0))
    msgs, _ = run_device(dev, 0.05 + 2.2 * dev.period, step=0.05)
    rep = check_latch_capture(capture_of(msgs, tmp_path / "c.cdcap"), d, coil_temp=20.0)
    assert rep.ok, [(i.name, i.detail) for i in rep.items]
    got = {p.name: p.length_s for p in rep.analysis.pulses if p.partial is None}
    assert got["set"] == pytest.approx(length, abs=2.0 / rep.analysis.sample_rate_hz + 1e-4)
    assert rep.prediction["set"]["length_s"] == length


def driver_script(d, top: int) -> list[tuple[str, int]]:
    """A set at a full-scale reading (``top``: every entry passed, the lookup's worst), a reset
    at a reading of 0 (below the first code: the first entry), a set at the fifth entry's
    code + 1 (between two entries: the lower)."""
    s, r = (p.table for p in d.latch.pulses)
    i = d.latch.interval_ticks
    return [("supply", top), ("set", 0), ("run", s.ticks[0] + i + 1), ("supply", 0), ("reset", 0),
            ("run", i + r.ticks[0] + 1), ("supply", s.adc_codes[5] + 1), ("set", 0), ("run", i + s.ticks[5] + 1)]


@pytest.mark.compiler
def test_the_reference_driver_runs_the_entries_on_the_host_avr_and_cortex(tmp_path, design):
    from cortex_trace import run as run_arm
    from driver_harness import run_avr, run_host, write_latch_sources
    from coildrive.codegen.latch_driver import LATCH_COMPENSATED_TICK_CYCLES as CYCLES
    from coildrive.codegen.latch_driver import LATCH_COMPENSATED_TICK_INSTRUCTIONS as INSTRUCTIONS

    _, d = design
    s, r = (p.table for p in d.latch.pulses)
    script = driver_script(d, 2**d.drive.board.adc.bits - 1)
    (tmp_path / "host").mkdir()
    host = run_host(tmp_path / "host", d, script, writer=write_latch_sources)
    ev = [tuple(int(x) for x in line.split()[1:]) for line in host.lines if line.startswith("e ")]
    ons, offs = [t for t, k, _ in ev if k == 1], [t for t, k, _ in ev if k == 3]
    # gcc on the host: each pulse on for the entry its reading selects
    assert [b - a for a, b in zip(ons, offs)] == [s.ticks[-1], r.ticks[0], s.ticks[5]], (ev, s.ticks, r.ticks)
    want = [x for x in host.lines if not x.startswith("c ")]
    # avr-gcc + simavr (ATmega328P) prints the same; its tick's worst cycles within 10 % under the bound
    (tmp_path / "avr").mkdir()
    avr = run_avr(tmp_path / "avr", d, script, writer=write_latch_sources)
    assert [x for x in avr.lines if not x.startswith("c ")] == want
    assert 0.9 * CYCLES["avr"] <= avr.cycles()["tick"] <= CYCLES["avr"], avr.cycles()
    # arm-none-eabi-gcc + QEMU (tests/cortex_trace.py): the same lines, the exact instructions
    for core, instructions in INSTRUCTIONS.items():
        (tmp_path / core).mkdir()
        arm = run_arm(tmp_path / core, d, script, core, writer=write_latch_sources)
        assert [x for x in arm.lines if not x.startswith("c ")] == want, core
        assert arm.instructions["tick"] == instructions and 0.9 * CYCLES[core] <= arm.cycles["tick"] <= CYCLES[core], \
            (core, arm.instructions["tick"], arm.cycles["tick"])


@pytest.mark.compiler
def test_the_compensated_driver_compiles_warning_free_as_c11_and_cplusplus(tmp_path, design):
    # the host, simavr and QEMU runs above build it as C99 (tests/test_cross_compile.py's flags)
    from coildrive.codegen.latch_driver import render_latch_driver
    from test_cross_compile import STRICT, TARGETS

    for file, text in render_latch_driver(design[1], "valve").items():
        (tmp_path / file).write_text(text)
    for target in ("gcc-c11", "g++-c++11"):
        compiler, flags, _ = TARGETS[target]
        r = subprocess.run([require_tool(compiler), *STRICT, *flags, "-I", str(tmp_path), "-c",
                            str(tmp_path / "valve_driver.c"), "-o", str(tmp_path / f"{target}.o")],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 0 and r.stderr == "", f"{target}:\n{r.stderr}"


@pytest.mark.compiler
def test_firmware_driver_in_the_loop_runs_the_entry_of_its_supply(tmp_path, design, monkeypatch):
    from coildrive.bench.latch_firmware_device import LatchFirmwareDevice
    from coildrive.codegen.host_build import build_latch_firmware
    from coildrive.codegen.latch_driver import pulse_switches

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    path, d = design
    r = run_cli("firmware-driver", str(path), "--out", str(tmp_path / "fw"))
    assert r.returncode == 0 and "tick 443 of" in r.stderr, r.stderr
    lib = build_latch_firmware(tmp_path / "fw", d)
    dev = LatchFirmwareDevice(d, lib, pulse_switches(d), DeviceOptions(noise_codes=0.5, seed=5, supply=13.0,
                                                                       coil_temp=20.0))
    msgs, _ = run_device(dev, 0.05 + dev.interval + 2.2 * dev.period, step=0.05)
    rep = check_latch_capture(capture_of(msgs, tmp_path / "fw.cdcap"), d, coil_temp=20.0)
    assert rep.ok, [(i.name, i.detail) for i in rep.items]
    got = [p.length_s for p in rep.analysis.pulses if p.partial is None and p.name == "set"]
    assert got and all(abs(x - firmware_pulse(d, "set", 13.0)) <= 2.0 / rep.analysis.sample_rate_hz + 1e-4
                       for x in got), got


def test_design_json_and_report_carry_the_tables(design):
    path, _ = design
    r = run_cli("design", str(path), "--json")
    doc = json.loads(r.stdout)
    assert [len(p["table"]["ticks"]) for p in doc["latch"]["pulses"]] == [16, 16]
    r = run_cli("design", str(path))
    assert r.returncode == 0 and "against the supply" in r.stdout, r.stdout


def test_a_moving_armature_seats_within_every_entry(tmp_path):
    # the bolt (examples/latching/bolt-catch-reset-winding-12v.toml): the set entries from
    # the armature's seat time at each entry's bus; every corner's own entry still seats it
    bolt = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"
    text = bolt.read_text().replace("[pull_in]", "[pull_in]\ncompensate = true", 1)
    text = text.replace('board = "relay-12bit-resistor"',
                        f'board = "{EXAMPLES.parent / "boards" / "relay-12bit-resistor.toml"}"')
    path = tmp_path / "bolt-compensated.toml"
    path.write_text(text)
    d = design_latch(load_drive(path))
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = d.latch.pulses[0]
    assert p.table.ticks == sorted(p.table.ticks, reverse=True) and p.table.ticks[-1] < p.ticks
    assert p.seat_time_s * p.margin <= p.time_s


def test_a_first_entry_below_the_lowest_supply_that_misses_its_current_fails_in_one_check(tmp_path):
    # the lowest bus that reads the first code is a few mV under supply.min (the divider at
    # its tolerance end): a current reached at 9 V but not there leaves no table, no ticks
    path = compensated(tmp_path)
    text = path.read_text().replace('current = "1.0 A"', 'current = "1.3627 A"\ncurrent_margin = 1.0', 1)
    path.write_text(text)
    d = design_latch(load_drive(path))
    p = d.latch.pulses[0]
    assert p.ticks is None and p.table is None and "reads the supply table's first code" in p.not_reached
    assert [c.name for c in d.failed] == ["set_pulse"]
    r = run_cli("design", str(path), "--header", str(tmp_path / "no.h"))
    assert r.returncode == 1 and not (tmp_path / "no.h").exists(), r.stderr   # a failed design writes no header
