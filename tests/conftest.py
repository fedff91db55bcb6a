"""Shared test helpers.

Tools from outside the project (ngspice, gcc, g++) may be missing on a developer's
machine: the tests that need them then skip with the reason. Under CI (``CI=true``) they
must run, so a missing tool is a failure there, not a skip.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
BOARDS = ROOT / "boards"
IN_CI = os.environ.get("CI", "").lower() in ("1", "true", "yes")


#: Debian package of each external tool the tests run (.ci/run installs them).
PACKAGES = {"ngspice": "ngspice", "arm-none-eabi-gcc": "gcc-arm-none-eabi libnewlib-arm-none-eabi",
            "arm-none-eabi-nm": "binutils-arm-none-eabi", "avr-gcc": "gcc-avr avr-libc",
            "avr-nm": "binutils-avr", "avr-size": "binutils-avr", "simavr": "simavr",
            "arm-none-eabi-objdump": "binutils-arm-none-eabi", "qemu-system-arm": "qemu-system-arm"}


def require_tool(name: str) -> str:
    """Path of an external tool; skip (locally) or fail (under CI=true) when it is missing."""
    path = shutil.which(name)
    if path is None:
        message = f"{name} is not installed (apt-get install {PACKAGES.get(name, 'build-essential')})"
        if IN_CI:
            pytest.fail(f"CI=true but {message}")
        pytest.skip(message)
    return path


def run_cli(*args: str, cwd: Path | None = None, input: str | None = None,
            timeout: float = 120) -> subprocess.CompletedProcess:
    """Run ``coildrive ARGS`` as a real subprocess with this interpreter."""
    return subprocess.run([sys.executable, "-m", "coildrive", *args], cwd=cwd or ROOT,
                          capture_output=True, text=True, input=input, timeout=timeout,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})


@pytest.fixture
def demo_drive() -> Path:
    return EXAMPLES / "demo-valve.toml"


def json_error(stdout: str, stderr: str, code: int = 2) -> dict:
    """With ``--json`` an error is still one JSON document on stdout: ``{"error": the one
    line of stderr without its "coildrive: " prefix, "exit_code": code}``."""
    import json

    doc = json.loads(stdout)
    line = stderr.strip().splitlines()[-1]
    assert doc == {"error": line.removeprefix("coildrive: "), "exit_code": code}, (doc, line)
    return doc


def drive_path(name: str):
    """A drive file by name: tests/data/NAME.toml (test fixtures) or examples/NAME.toml."""
    data = ROOT / "tests" / "data" / f"{name}.toml"
    return data if data.exists() else EXAMPLES / f"{name}.toml"


#: Bundled boards whose topology refuses some examples (one line each, exit 2): a full
#: bridge takes no split decay and no freewheel element of its own (its body diodes are its path).
REFUSING_BOARDS = ("bridge-m32-fast",)
#: Bundled examples made for one board only, by name: the boosted fuel valve's peak is
#: sized for its board's ADC and tick (its 1.1 A threshold reads 2731 codes there); on
#: the high-side and bridge boards it designs with a higher-rated switch
#: (tests/test_boost_high_side.py, tests/test_boost_bridge.py).
BOARD_ONLY_EXAMPLES = {"fuel-valve-boost-12v": "lab-m32-zener", "fast-valve-boost-armature-12v": "lab-m32-zener"}


def loads(example: Path, board: str) -> bool:
    """Whether the bundled ``example`` loads on the bundled ``board`` (a full-bridge board
    refuses the examples with split decay, a Zener or a boosted peak: tests/test_bridge_design.py
    checks those refusals)."""
    from coildrive.config import load_drive
    from coildrive.errors import InputError

    if BOARD_ONLY_EXAMPLES.get(example.stem, board) != board:
        return False
    try:
        load_drive(example, board)
    except InputError:
        if board in REFUSING_BOARDS:
            return False
        raise
    return True


def first_switch_events(drive, design, first: float = 0.01, hold_time: float = 0.004) -> list[int]:
    """The position-switch event values the model's virtual bench device streams over its
    first actuation (``first`` s after start, ``hold_time`` s of hold)."""
    from coildrive.bench.device import DeviceOptions, VirtualDevice
    from coildrive.bench.messages import Event, EventKind
    from coildrive.bench.protocol import FrameDecoder

    dev = VirtualDevice(drive, DeviceOptions(first_actuation=first, hold_time=hold_time), design=design)
    dec, msgs, t = FrameDecoder(), [], 0.0
    while t < first + dev.period - 0.001:
        t = min(first + dev.period - 0.001, t + 0.05)
        msgs += dec.feed(dev.read(t))
    return [m.value for m in msgs if isinstance(m, Event) and m.kind == EventKind.SWITCH]
