"""Build and run tests/data/driver_target.c (the reference driver under a script) on the
host with gcc and on a simulated ATmega328P with avr-gcc + simavr."""

from __future__ import annotations

import functools
import math
import re
import subprocess
from dataclasses import dataclass
from pathlib import Path

from coildrive.codegen.driver import render_driver
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.resources import example
from conftest import ROOT, require_tool

PROGRAM = ROOT / "tests" / "data" / "driver_target.c"
STRICT = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-Wconversion", "-Wsign-conversion"]
OPS = {"on": 1, "off": 2, "clear": 3, "run": 4, "supply": 5, "mode": 6, "full": 7, "dip": 8, "level": 9, "slew": 10}
MODES = {"coil": 0, "open": 1, "short": 2}
_ANSI = re.compile(r"\x1b\[[0-9;]*m")


@functools.lru_cache(maxsize=None)
def example_design(name: str, text_edit: tuple[str, str] | None = None):
    """The Design of a bundled example (optionally with one text replacement in its file)."""
    path = example(name)
    if text_edit is None:
        return design(load_drive(path))
    import tempfile
    text = as_edited(path.read_text(), text_edit)
    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / path.name
        p.write_text(text)
        return design(load_drive(p))


def as_edited(text: str, text_edit: tuple[str, str]) -> str:
    """``text`` with the replacement; a current-mode variant drops the voltage-mode-only
    keys (``regulation``, and the supply-compensated peak) the file may give."""
    import re
    text = text.replace(*text_edit)
    if 'mode = "current"' in text:
        text = re.sub(r"^(regulation|compensate) = .*\n", "", text, flags=re.M)
    return text


def healthy_slew(d) -> int:
    """Codes per conversion the harness's coil climbs at most: a rise to the shorted-turns
    check's code that takes enough conversions to pass it at the lowest supply reading
    the scripts switch on at (COIL_SUPPLY_MIN_CODE)."""
    rc = d.rise_check
    if rc is None or rc.limit == 0:
        return 0xFFFF
    need = -(-rc.limit // (max(d.adc.supply_min_code, 1) if rc.by_supply else 1)) + 1
    return max(1, rc.code // need)


def conversions_per_tick(d) -> int:
    """ADC conversions (one per PWM period) per scheduler tick, at least one."""
    return max(1, math.floor(d.timer.frequency_hz / d.drive.board.tick.rate))


@dataclass
class Run:
    lines: list[str]

    def calls(self, kind: str) -> list[tuple[int, ...]]:
        """Every ``kind`` line's numbers (``e``: tick, conversion, event kind, value)."""
        return [tuple(int(x) for x in line.split()[1:]) for line in self.lines if line.startswith(kind + " ")]

    def events(self) -> list[tuple[int, int, int]]:
        """``(tick, kind, value)`` of each event."""
        return [(t, k, v) for t, _, k, v in self.calls("e")]

    def states(self) -> list[tuple[int, int]]:
        """``(state, fault)`` after each scenario step."""
        return [tuple(int(x) for x in line.split()[1:]) for line in self.lines if line.startswith("x ")]

    def cycles(self) -> dict[str, int]:
        return {line.split()[1]: int(line.split()[2]) for line in self.lines if line.startswith("c ")}


def write_sources(folder: Path, d, script: list[tuple[str, int]]) -> list[str]:
    for name, text in render_driver(d, "coil").items():
        (folder / name).write_text(text)
    rows = ",\n".join(f"    {{{OPS[op]}u, {MODES.get(arg, arg) if op == 'mode' else arg}u}}"
                      for op, arg in script)
    (folder / "scenario.h").write_text(
        f"#include <stdint.h>\n#define CONVERSIONS_PER_TICK {conversions_per_tick(d)}u\n"
        f"#define RISE_SLEW {healthy_slew(d)}u\n"
        f"static const uint16_t scenario[][2] = {{\n{rows}\n}};\n")
    return [str(PROGRAM), str(folder / "coil_driver.c")]


LATCH_PROGRAM = ROOT / "tests" / "data" / "latch_target.c"
LATCH_OPS = {"set": 1, "reset": 2, "stop": 3, "run": 4, "supply": 5, "current": 6}


def write_latch_sources(folder: Path, d, script: list[tuple[str, int]]) -> list[str]:
    """The latching coil's driver (a LatchDesign ``d``) and tests/data/latch_target.c's
    scenario: set, reset, stop, run <ticks>, supply <code> (a compensated driver's reading),
    current <code> (a boosted driver's current-sense reading)."""
    from coildrive.codegen.latch_driver import render_latch_driver
    for name, text in render_latch_driver(d, "coil").items():
        (folder / name).write_text(text)
    rows = ",\n".join(f"    {{{LATCH_OPS[op]}UL, {arg}UL}}" for op, arg in script)
    (folder / "scenario.h").write_text(f"#include <stdint.h>\nstatic const uint32_t scenario[][2] = {{\n{rows}\n}};\n")
    return [str(LATCH_PROGRAM), str(folder / "coil_driver.c")]


def run_host(folder: Path, d, script: list[tuple[str, int]], flags: tuple[str, ...] = (),
             writer=write_sources) -> Run:
    gcc = require_tool("gcc")
    sources = writer(folder, d, script)
    exe = folder / "host"
    build = subprocess.run([gcc, *STRICT, "-O2", *flags, "-I", str(folder), *sources, "-o", str(exe)],
                           capture_output=True, text=True, timeout=120)
    assert build.returncode == 0 and build.stderr == "", build.stderr
    out = subprocess.run([str(exe)], capture_output=True, text=True, timeout=60, check=True)
    return Run(out.stdout.splitlines())


def uart_lines(stderr: str) -> list[str]:
    """simavr's UART output (on stderr, in colour, a chunk per newline shown as '.')."""
    text = []
    for chunk in stderr.splitlines():
        chunk = _ANSI.sub("", chunk)
        text.append(chunk[:-1] + "\n" if chunk.endswith(".") else chunk)
    return "".join(text).splitlines()


def run_avr(folder: Path, d, script: list[tuple[str, int]], flags: tuple[str, ...] = (),
            writer=write_sources) -> Run:
    avr_gcc, simavr = require_tool("avr-gcc"), require_tool("simavr")
    sources = writer(folder, d, script)
    elf = folder / "prog.elf"
    build = subprocess.run([avr_gcc, "-mmcu=atmega328p", "-Os", *STRICT, *flags, "-I", str(folder), *sources,
                            "-o", str(elf)], capture_output=True, text=True, timeout=120)
    assert build.returncode == 0 and build.stderr == "", build.stderr
    sim = subprocess.run([simavr, "-m", "atmega328p", "-f", "16000000", str(elf)],
                         capture_output=True, text=True, timeout=300)
    return Run([x for x in uart_lines(sim.stderr) if re.match(r"^[a-z] ", x) or x == "end"])


def budget_script(d) -> list[tuple[str, int]]:
    """A scenario through every handler path: an actuation at the top of the duty table
    (its longest search), then over-current, open load, a supply fault in the hold,
    shorted turns (where the design has the rise check), a boosted peak's time-out and,
    with an armature, a seat and a stuck armature, each cleared through the lockout."""
    lock = d.release.lockout_ticks + 2
    peak = d.pull_in.peak_ticks
    from coildrive.codegen.driver import open_load_ticks
    nominal = (d.adc.supply_min_code + d.adc.supply_max_code) // 2
    script = [("supply", d.adc.supply_max_code), ("full", 2 * d.adc.pull_in_code), ("run", 2),
              ("on", 0), ("run", peak + 10), ("off", 0), ("run", lock),
              ("supply", nominal), ("mode", "short"), ("on", 0), ("run", 3), ("clear", 0), ("run", lock),
              ("mode", "open"), ("on", 0), ("run", open_load_ticks(d) + 2), ("clear", 0), ("run", lock),
              ("mode", "coil"), ("on", 0), ("run", peak + 5), ("supply", d.adc.supply_min_code - 1),
              ("run", 6), ("supply", nominal), ("clear", 0), ("run", lock)]
    if d.rise_check is not None and d.rise_check.limit > 0:     # shorted turns: the rise in one conversion
        script += [("slew", d.rise_check.code), ("on", 0), ("run", 3), ("clear", 0), ("run", lock),
                   ("slew", healthy_slew(d))]
    if d.boost is not None:     # a boosted peak that never reaches its threshold: the time-out
        script += [("full", d.adc.pull_in_code), ("on", 0), ("run", peak + 2), ("clear", 0), ("run", lock),
                   ("full", 2 * d.adc.pull_in_code)]
    if d.armature is not None:
        from coildrive.codegen.header import HeaderView
        hv = HeaderView(d)
        from coildrive.codegen.driver import seat_grace_ticks
        early = hv.value("SEAT_EARLIEST_TICKS")
        late = hv.value("SEAT_LATEST_TICKS") + seat_grace_ticks(d)
        script += [("full", d.adc.pull_in_code + 200), ("on", 0), ("run", 1), ("dip", early + 1),
                   ("run", late + 3), ("off", 0), ("run", lock), ("on", 0), ("run", late + 3),
                   ("clear", 0), ("run", lock)]
    return script


#: Drive shapes whose handlers the budget covers: every bundled example (the closed-loop
#: one included), the bridge example with a moving armature, with a mixed-decay hold, with
#: each current-mode control and with a closed loop (with and without mixed decay), the demo
#: with each current-mode control, and the boost example with a current-mode hold and with a
#: closed loop.
def budget_shapes() -> list[tuple[str, object]]:
    shapes = [(name, example_design(name)) for name in
              ("demo-valve", "door-latch-24v", "locker-latch-12v", "pinch-valve-48v", "relay-12v",
               "wash-valve-split-24v", "dosing-valve-closed-loop", "dosing-valve-bridge-24v",
               "fuel-valve-boost-12v")]
    from test_bridge_armature import ARMATURE
    shapes.append(("dosing-valve-bridge-24v armature", example_design(
        "dosing-valve-bridge-24v", ('[release]\ncurrent = "0.08 A"', ARMATURE + '\n[release]\ncurrent = "0.12 A"'))))
    shapes.append(("dosing-valve-bridge-24v mixed", example_design(
        "dosing-valve-bridge-24v", ("[hold]\n", "[hold]\nfast_fraction = 0.3\n"))))
    for control in ("hysteretic", "off_time"):
        shapes.append((f"demo-valve {control}", example_design(
            "demo-valve", ('frequency = "25 kHz"', f'frequency = "25 kHz"\nmode = "current"\ncontrol = "{control}"'))))
        # a bridge's current-mode hold: the threshold handlers switch the masks
        shapes.append((f"dosing-valve-bridge-24v {control}", example_design(
            "dosing-valve-bridge-24v", ("[hold]\n", f'[hold]\nmode = "current"\ncontrol = "{control}"\n'))))
    # a bridge's current-mode mixed decay: the one-shot times the fast part (then the slow rest)
    for control, more in (("off_time", "fast_fraction = 0.3\n"),
                          ("hysteretic", 'fast_fraction = 0.1\nband = "6 mA"\nmin_frequency = "5 kHz"\n')):
        shapes.append((f"dosing-valve-bridge-24v {control} mixed", example_design(
            "dosing-valve-bridge-24v", ("[hold]\n", f'[hold]\nmode = "current"\ncontrol = "{control}"\n{more}'))))
    shapes.append(("dosing-valve-bridge-24v closed-loop", example_design(
        "dosing-valve-bridge-24v", ("[hold]\n", '[hold]\nregulation = "closed_loop"\n'))))
    # the regulated holds after a boosted peak: the threshold's conversion arms the
    # comparator, or preloads the loop and runs its first PI step
    for label, line in (("current", 'mode = "current"'), ("closed-loop", 'regulation = "closed_loop"')):
        shapes.append((f"fuel-valve-boost-12v {label}", example_design(
            "fuel-valve-boost-12v", ('frequency = "50 kHz"', f'frequency = "50 kHz"\n{line}'))))
    shapes.append(("dosing-valve-bridge-24v closed-loop mixed", example_design(
        "dosing-valve-bridge-24v", ("[hold]\n", '[hold]\nregulation = "closed_loop"\nfast_fraction = 0.3\n'))))
    return shapes


def loop_captures(tmp_path: Path, des, runs, hold_time: float = 0.03, **options):
    """The reference driver of ``des`` written to ``tmp_path/fw`` and compiled with gcc, in
    the loop of :class:`~coildrive.bench.firmware_device.FirmwareDevice`: for each
    ``(supply V, coil temperature degC, fault or None)`` of ``runs`` the messages of 2.3
    device periods (two actuations) as a capture file ``tmp_path/<k>.cdcap``. Returns the
    ``(path, Capture)`` of each run; ``options``: more :class:`DeviceOptions` fields
    (``first_actuation``: where the switch-on falls against the ticks and PWM periods)."""
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.codegen.host_build import build_firmware
    from test_emulator_device import capture_of, run as run_device

    require_tool("gcc")
    (tmp_path / "fw").mkdir()
    for name, text in render_driver(des).items():
        (tmp_path / "fw" / name).write_text(text)
    lib = build_firmware(tmp_path / "fw", des, cache=tmp_path / "cache")
    out = []
    for k, (supply, temp, fault) in enumerate(runs):
        dev = FirmwareDevice(des, lib, DeviceOptions(supply=supply, coil_temp=temp, fault=fault, noise_codes=1,
                                                     seed=3, hold_time=hold_time, **options))
        dev._now = 0.0
        msgs, _ = run_device(dev, 2.3 * dev.period, step=0.01)
        path = tmp_path / f"{k}.cdcap"
        out.append((path, capture_of(msgs, path)))
    return out


def checked_rows(capture: Path, drive: Path | str, coil_temp: float) -> dict:
    """`coildrive check --json` of ``capture`` against ``drive`` at ``coil_temp`` degC: it
    must pass (exit 0; the failing rows in the message); its rows by name."""
    import json

    from conftest import run_cli

    r = run_cli("check", str(capture), str(drive), "--json", "--coil-temp", str(coil_temp))
    rows = {i["name"]: i for i in json.loads(r.stdout)["items"]}
    assert r.returncode == 0, {n: (i["status"], i["detail"]) for n, i in rows.items()
                               if i["status"] not in ("pass", "info")}
    return rows


def hot_nominal_loop_passes(tmp_path: Path, path: Path | str) -> None:
    """The drive file ``path`` designed, its reference driver (gcc) in the loop with the
    hottest coil at the nominal supply (:func:`loop_captures`, a 10 ms hold): no fault, and
    ``check`` passes the pull-in, the peak, the hold and the release (lean: one corner;
    plumbing, the device shares the model)."""
    from coildrive.bench.messages import EventKind
    from coildrive.config import load_drive
    from coildrive.design import design

    d = design(load_drive(path))
    hot = max(c.coil_temp_c for c in d.corners)
    (cap_path, cap), = loop_captures(tmp_path, d, [(d.drive.supply.nominal, hot, None)], hold_time=0.01)
    assert int(EventKind.FAULT) not in [int(e.kind) for e in cap.events]
    rows = checked_rows(cap_path, str(path), hot)
    assert {n for n, i in rows.items() if i["status"] == "pass"} >= {
        "pull_in_time", "peak_duration", "hold_mean", "release_time"}
