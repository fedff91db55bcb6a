"""A full bridge's firmware: the header's phase table, the reference driver's four switch
outputs, and the driver in the loop against the coil model (a high-side switch's too,
which the driver runs as its one switch).

Outside sources: gcc (``-Wall -Wextra -Werror -pedantic``) judges the header and its
``#error`` guards (tests/test_cross_compile.py compiles every example's header, this
one's included, for the host, Cortex-M and AVR); the emulator shares the design's
physics, so the firmware-in-the-loop runs prove plumbing (the phases the driver switches
reach the coil model), not numbers -- the numbers are ngspice's, in
tests/test_reference_ngspice_bridge.py.
"""

from __future__ import annotations

import re
import subprocess

import pytest

from conftest import EXAMPLES, require_tool
from coildrive.codegen.header import generate_header
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model.bridge import PHASES, SWITCHES

BRIDGE = EXAMPLES / "dosing-valve-bridge-24v.toml"
STRICT = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic"]


@pytest.fixture(scope="module")
def bridge_design():
    return design(load_drive(BRIDGE))


def _defines(text: str) -> dict[str, int]:
    return {m[1]: int(m[2]) for m in re.finditer(r"^#define (\w+)\s+(\d+)U", text, re.M)}


def test_header_phase_masks_are_the_designs_switches(bridge_design):
    d = bridge_design
    assert d.topology.bridge.switches_on == {p: list(n) for p, n in PHASES.items()}
    consts = _defines(generate_header(d))
    bits = {n: consts[f"COIL_BRIDGE_{n.upper()}"] for n in SWITCHES}
    assert sorted(bits.values()) == [1, 2, 4, 8]
    for phase, names in PHASES.items():
        assert consts[f"COIL_BRIDGE_{phase.upper()}_SWITCHES"] == sum(bits[n] for n in names), phase
    # common practice: a leg's two switches are never on together (shoot-through)
    for names in PHASES.values():
        assert not {"high_a", "low_a"} <= set(names) and not {"high_b", "low_b"} <= set(names)


def test_header_guards_stop_a_shoot_through_mask(tmp_path, bridge_design):
    # gcc -Wall -Wextra -Werror -pedantic: the header compiles as generated, and its
    # #error guards stop the build when a phase turns on both switches of leg A
    gcc = require_tool("gcc")
    text = generate_header(bridge_design)
    main = tmp_path / "m.c"
    main.write_text('#include "drive.h"\nint main(void) { return (int)COIL_BRIDGE_HOLD_DECAY_SWITCHES - 10; }\n')

    def build(header: str) -> subprocess.CompletedProcess:
        (tmp_path / "drive.h").write_text(header)
        return subprocess.run([gcc, *STRICT, "-I", str(tmp_path), str(main), "-o", str(tmp_path / "m")],
                              capture_output=True, text=True)

    r = build(text)
    assert r.returncode == 0 and r.stderr == "", r.stderr
    assert subprocess.run([str(tmp_path / "m")]).returncode == 0
    bad = re.sub(r"(#define COIL_BRIDGE_HOLD_DECAY_SWITCHES\s+)10U", r"\g<1>11U", text)
    r = build(bad)
    assert r.returncode != 0 and "COIL_BRIDGE_HOLD_DECAY_SWITCHES turns on both switches of one leg" in r.stderr
    bad = re.sub(r"(#define COIL_BRIDGE_RELEASE_SWITCHES\s+)0U", r"\g<1>8U", text)
    r = build(bad)
    assert r.returncode != 0 and "the release opens every switch" in r.stderr


@pytest.mark.compiler
def test_driver_sets_the_phase_masks_around_every_switch_edge(tmp_path):
    # gcc -Wall -Wextra -Werror -pedantic -Wconversion builds the driver with the scripted
    # program of the simavr and QEMU runs (tests/data/driver_target.c): before each enable
    # the driver sets Q1 + Q4 for the on-times and Q2 + Q4 (slow decay) for the off-times;
    # with each disable -- release or fault -- it opens all four (fast decay)
    from driver_harness import budget_script, example_design, run_host

    d = example_design("dosing-valve-bridge-24v")
    lines = [ln.split() for ln in run_host(tmp_path, d, budget_script(d)).lines if ln[:2] in ("s ", "g ")]
    hold = 0b1001 + 16 * 0b1010
    assert lines and [x[0] for x in lines[:2]] == ["s", "g"], lines[:2]   # init: off, all open
    enables = [k for k, x in enumerate(lines) if x[0] == "s" and x[3] == "1"]
    disables = [k for k, x in enumerate(lines) if x[0] == "s" and x[3] == "0"]
    assert len(enables) >= 4 and len(disables) >= 4
    for k in enables:
        assert lines[k - 1][0] == "g" and int(lines[k - 1][3]) == hold, lines[k - 1]
    for k in disables:
        assert lines[k + 1][0] == "g" and int(lines[k + 1][3]) == 0, lines[k + 1]


MIXED = ("[hold]\n", "[hold]\nfast_fraction = 0.3\n")


@pytest.mark.compiler
def test_mixed_decay_fast_end_is_the_headers_for_every_compare(tmp_path):
    # gcc -Wall -Wextra -Werror -pedantic -Wconversion builds the mixed-decay driver with
    # the scripted program (tests/data/driver_target.c): with every compare it gives the
    # count where the off-time's fast part ends, compare + ((PERIOD - compare) x
    # HOLD_FAST_Q16 + 32768) >> 16 with HOLD_FAST_Q16 read from the header's text, which is
    # the design's fraction of the off-time to within half a count
    from driver_harness import example_design, run_host

    d = example_design("dosing-valve-bridge-24v", MIXED)
    codes = [d.adc.supply_min_code + k * (d.adc.supply_max_code - d.adc.supply_min_code) // 6 for k in range(7)]
    script = [("supply", codes[0]), ("full", 2 * d.adc.pull_in_code), ("run", 2), ("on", 0),
              ("run", d.pull_in.peak_ticks + 2)]
    for c in codes:
        script += [("supply", c), ("run", 2)]
    run = run_host(tmp_path, d, script)
    defines = _defines((tmp_path / "coil_drive.h").read_text())
    q16, period = defines["COIL_HOLD_FAST_Q16"], defines["COIL_TIMER_PERIOD_COUNTS"]
    assert q16 == round(0.3 * 65536)
    calls = [(ln.split()[0], int(ln.split()[3])) for ln in run.lines if ln[:2] in ("p ", "f ")]
    assert calls[0] == ("p", 0)      # init: compare 0 with the switch off, no off-time to split
    calls = calls[1:]
    pairs = [(c, calls[k + 1]) for k, (kind, c) in enumerate(calls) if kind == "p"]
    hold = {c for c, _ in pairs if c < period}
    assert len(hold) >= 3, f"the table gives several hold compares: {sorted(hold)}"
    for compare, (kind, end) in pairs:
        assert kind == "f", "the fast end follows every compare"
        assert end == compare + (((period - compare) * q16 + 32768) >> 16), (compare, end)
        assert abs(end - compare - 0.3 * (period - compare)) <= 0.5 + (period - compare) / 65536, (compare, end)


@pytest.mark.compiler
def test_mixed_decay_in_the_loop_passes_check_and_slow_decay_would_not(tmp_path):
    # The compiled mixed-decay driver in the loop (in process): its fast-end count reaches
    # the coil model, which decays fast up to it and slowly after; `check` passes the hold
    # (the design's mixed-decay mean). The same run with the model's off-times all slow
    # holds far higher and fails: the fast part is what the driver must switch.
    import json

    from conftest import run_cli
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.codegen.driver import render_driver
    from coildrive.codegen.host_build import build_firmware
    from test_emulator_device import capture_of, run as run_device

    require_tool("gcc")
    drive = tmp_path / "mixed.toml"
    drive.write_text(BRIDGE.read_text().replace(*MIXED, 1))
    d = design(load_drive(drive))
    (tmp_path / "fw").mkdir()
    for name, text in render_driver(d).items():
        (tmp_path / "fw" / name).write_text(text)
    lib = build_firmware(tmp_path / "fw", d, cache=tmp_path / "cache")
    rows = {}
    for mixed in (True, False):
        dev = FirmwareDevice(d, lib, DeviceOptions(supply=24.0, coil_temp=20.0, noise_codes=1, seed=3,
                                                   hold_time=0.03))
        dev._mixed = mixed
        dev._now = 0.0
        msgs, _ = run_device(dev, 2.3 * dev.period, step=0.01)
        capture_of(msgs, tmp_path / f"{mixed}.cdcap")
        r = run_cli("check", str(tmp_path / f"{mixed}.cdcap"), str(drive), "--json")
        rows[mixed] = {i["name"]: i for i in json.loads(r.stdout)["items"]}
        assert r.returncode == (0 if mixed else 1), {k: (i["status"], i["detail"]) for k, i in rows[mixed].items()}
    assert rows[True]["hold_mean"]["status"] == "pass" and rows[False]["hold_mean"]["status"] == "FAIL"
    assert rows[False]["hold_mean"]["measured"] > 1.3 * rows[True]["hold_mean"]["measured"]


@pytest.fixture(scope="module")
def firmware(tmp_path_factory):
    """The bridge's driver as `firmware-driver` writes it, and a build cache that the
    in-process device and the emulator subprocess share (one compiled library)."""
    from conftest import run_cli

    require_tool("gcc")
    base = tmp_path_factory.mktemp("bridge-fw")
    r = run_cli("firmware-driver", str(BRIDGE), "--out", str(base / "fw"))
    assert r.returncode == 0, r.stderr
    return base / "fw", base / "cache"


@pytest.mark.compiler
@pytest.mark.parametrize("example", ["dosing-valve-bridge-24v", "gate-valve-highside-24v"])
def test_every_extreme_corner_runs_without_a_fault(tmp_path, firmware, example):
    # The healthy envelope never trips the driver's diagnostics on a bridge (and on a
    # high-side switch, which the driver runs as its one switch): at the lowest and
    # highest supply, the coldest and hottest coil and both tolerance ends of R and L the
    # compiled driver runs one actuation in the loop (in process) to its OFF, no FAULT
    from coildrive.bench import FrameDecoder
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.messages import Event, EventKind
    from coildrive.codegen.driver import render_driver
    from coildrive.codegen.host_build import build_firmware

    d = design(load_drive(EXAMPLES / f"{example}.toml"))
    fw, cache = firmware
    if example != BRIDGE.stem:
        fw = tmp_path / "fw"
        fw.mkdir()
        for name, text in render_driver(d).items():
            (fw / name).write_text(text)
    lib = build_firmware(fw, d, cache=cache / "coildrive" / "firmware")
    supplies = (d.drive.supply.min, d.drive.supply.max)
    temps = (min(c.coil_temp_c for c in d.corners), max(c.coil_temp_c for c in d.corners))
    for supply in supplies:
        for temp in temps:
            for rs in (0.93, 1.07):
                for ls in (0.85, 1.15):
                    dev = FirmwareDevice(d, lib, DeviceOptions(
                        supply=supply, coil_temp=temp, resistance_scale=rs, inductance_scale=ls,
                        first_actuation=0.002, noise_codes=1, seed=3, hold_time=0.01))
                    dec, kinds, t = FrameDecoder(), [], 0.0
                    while t < 0.3 and EventKind.OFF not in kinds:
                        t += 0.005
                        kinds += [m.kind for m in dec.feed(dev.read(t)) if isinstance(m, Event)]
                    assert EventKind.PEAK_END in kinds and EventKind.OFF in kinds, (supply, temp, rs, ls, kinds)
                    assert EventKind.FAULT not in kinds, (supply, temp, rs, ls, kinds)


@pytest.mark.slow
def test_firmware_in_the_loop_passes_check_with_the_fast_release(tmp_path, firmware, monkeypatch):
    # firmware-driver -> emulate --firmware -> capture -> check, each a real subprocess:
    # the compiled driver switches the bridge's phases into the coil model (plumbing), and
    # check's release is the fast decay's (the slow path would take ms: it must fail)
    import json

    from conftest import run_cli
    from coildrive.model.circuit import loop
    from coildrive.model.rl import decay_time
    from test_firmware_loop import capture

    fw, cache = firmware
    monkeypatch.setenv("XDG_CACHE_HOME", str(cache))
    out, _ = capture(tmp_path, fw, "bridge", drive=BRIDGE)
    r = run_cli("check", str(out), str(BRIDGE), "--json")
    items = {i["name"]: i for i in json.loads(r.stdout)["items"]}
    assert r.returncode == 0, {k: (i["status"], i["detail"]) for k, i in items.items()}
    rel = items["release_time"]
    drive = load_drive(BRIDGE)
    slow = loop(drive, 24.0, 20.0)
    i_top = 0.3   # A: above the hold's top (258 mA mean, a few mA ripple)
    t_slow = float(decay_time(drive.release.current, i_top, slow.r_off, slow.v_off, slow.inductance))
    assert rel["status"] == "pass" and rel["measured"] < 0.3 * t_slow, (rel, t_slow)
    assert rel["predicted"] < 0.3 * t_slow, (rel, t_slow)


@pytest.mark.slow
def test_mixed_decay_emulate_firmware_capture_check_over_a_real_pty(tmp_path, monkeypatch):
    # firmware-driver -> emulate --firmware -> capture -> check, each a real subprocess
    import json

    from conftest import run_cli
    from test_firmware_loop import capture

    require_tool("gcc")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    drive = tmp_path / "mixed.toml"
    drive.write_text(BRIDGE.read_text().replace(*MIXED, 1))
    r = run_cli("firmware-driver", str(drive), "--out", str(tmp_path / "fw"))
    assert r.returncode == 0, r.stderr
    out, _ = capture(tmp_path, tmp_path / "fw", "mixed", drive=drive)
    r = run_cli("check", str(out), str(drive), "--json")
    items = {i["name"]: i for i in json.loads(r.stdout)["items"]}
    assert r.returncode == 0, {k: (i["status"], i["detail"]) for k, i in items.items()}
    assert items["hold_mean"]["status"] == "pass"
