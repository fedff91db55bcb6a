"""A latching coil's driver in the loop: `firmware-driver` -> `emulate --firmware` ->
`capture` -> `check`, and the driver's interval as the host sees it.

The coil model is the design's own (the plumbing is what this proves); the pulse lengths,
the interval and the polarities come from the compiled driver (gcc), and are checked
against the header's constants (tests/test_latch_driver.py checks the same driver's
ticks against them on the host, simavr and QEMU).
"""

from __future__ import annotations

import pytest

from conftest import EXAMPLES, require_tool, run_cli
from coildrive.bench.device import DeviceOptions
from coildrive.bench.latch_check import check_latch_capture
from coildrive.bench.latch_firmware_device import LatchFirmwareDevice
from coildrive.bench.messages import Opcode, ReplyStatus
from coildrive.bench.protocol import FrameEncoder
from coildrive.codegen.host_build import build_latch_firmware
from coildrive.codegen.latch_driver import pulse_switches
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from test_emulator_device import capture_of, command, run as run_device

pytestmark = pytest.mark.compiler

BRIDGE = EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml"
RELAY = EXAMPLES / "latching" / "bistable-relay-reset-winding-24v.toml"


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    require_tool("gcc")
    base = tmp_path_factory.mktemp("fw")
    for path in (BRIDGE, RELAY):
        r = run_cli("firmware-driver", str(path), "--out", str(base / path.stem))
        assert r.returncode == 0, r.stderr
    return base


@pytest.fixture(autouse=True)
def build_cache(tmp_path_factory, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path_factory.getbasetemp() / "cache"))


@pytest.mark.parametrize("path, point", [(BRIDGE, dict(supply=9.0, coil_temp=100.0)),
                                         (RELAY, dict(supply=24.0, coil_temp=20.0))])
def test_driver_in_the_loop_passes_check_and_a_hot_coil_fails(tmp_path, folders, path, point):
    d = design_latch(load_drive(path))
    lib = build_latch_firmware(folders / path.stem, d)

    def capture(name, **extra):
        dev = LatchFirmwareDevice(d, lib, pulse_switches(d), DeviceOptions(noise_codes=0.5, seed=5, **point, **extra))
        msgs, _ = run_device(dev, 0.05 + dev.interval + 2.2 * dev.period, step=0.05)
        return dev, capture_of(msgs, tmp_path / f"{name}.cdcap")

    dev, cap = capture("good")
    supply = None if path == BRIDGE else point["supply"]
    good = check_latch_capture(cap, d, coil_temp=point["coil_temp"], supply=supply)
    assert good.ok, [(i.name, i.detail) for i in good.items]
    rows = {i.name: i.status for i in good.items}
    assert rows["set_length"] == rows["reset_length"] == "pass", rows
    assert [k for k, _ in dev.starts][:3] == ["set", "reset", "set"]
    ticks = [round(t * dev.tick_rate) for _, t in dev.starts]
    assert ticks[0] >= d.latch.interval_ticks, "the driver's first pulse waits one interval from its init"
    assert all(b - a >= d.latch.interval_ticks for a, b in zip(ticks, ticks[1:]))
    _, cap = capture("bad", resistance_scale=1.4)
    bad = check_latch_capture(cap, d, coil_temp=point["coil_temp"], supply=supply)
    assert not bad.ok and [i for i in bad.failed if i.name == "set_end_current"]


def test_a_start_sooner_than_the_interval_waits_for_it(tmp_path, folders):
    d = design_latch(load_drive(BRIDGE))
    dev = LatchFirmwareDevice(d, build_latch_firmware(folders / BRIDGE.stem, d), pulse_switches(d),
                              DeviceOptions(supply=12.0, first_actuation=100.0))   # the host only
    enc = FrameEncoder()
    t = d.latch.interval_s + 0.01
    assert command(dev, enc, t, Opcode.START).status == ReplyStatus.OK      # the set pulse
    t += 0.15                      # the pulse and its recording are over, the interval is not
    assert not dev.busy(t)
    assert command(dev, enc, t, Opcode.START).status == ReplyStatus.OK      # the reset: it waits
    assert command(dev, enc, t + 0.001, Opcode.START).status == ReplyStatus.BUSY
    run_device(dev, t + d.latch.interval_s + 0.1, step=0.01)
    (k1, t1), (k2, t2) = dev.starts
    assert (k1, k2) == ("set", "reset")
    assert round((t2 - t1) * dev.tick_rate) == d.latch.interval_ticks, "start to start: MIN_INTERVAL_TICKS"
    # STOP in the next pulse: the driver opens the switches at its next tick
    t = t2 + d.latch.interval_s + 0.01
    assert command(dev, enc, t, Opcode.START).status == ReplyStatus.OK
    run_device(dev, t + 2.0 / dev.tick_rate, step=1.0 / dev.tick_rate)     # the driver's next tick starts it
    t3 = dev.starts[2][1]
    assert command(dev, enc, t3 + 0.0025, Opcode.STOP).status == ReplyStatus.OK
    run_device(dev, t3 + 0.2, step=0.01)
    assert round((dev._rec.t_off - t3) * dev.tick_rate) == round(0.0025 * dev.tick_rate) + 1


@pytest.mark.slow
def test_emulate_firmware_capture_check_over_a_real_pty(tmp_path, folders):
    from test_bench_e2e import emulate_capture_check

    r, rows = emulate_capture_check(BRIDGE, tmp_path / "fw.cdcap", "--supply", "9", "--coil-temp", "100",
                                    "--firmware", str(folders / BRIDGE.stem))
    assert r.returncode == 0, rows
    assert rows["set_length"] == rows["reset_length"] == "pass", rows


def test_a_folder_for_another_drive_is_refused_in_one_line(tmp_path, folders):
    r = run_cli("emulate", str(EXAMPLES / "demo-valve.toml"), "--firmware", str(folders / BRIDGE.stem),
                "--duration", "0.1")
    assert r.returncode == 2 and "latching coil's driver" in r.stderr, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert run_cli("firmware-driver", str(EXAMPLES / "demo-valve.toml"), "--out", str(tmp_path / "d")).returncode == 0
    r = run_cli("emulate", str(RELAY), "--firmware", str(tmp_path / "d"), "--duration", "0.1")
    assert r.returncode == 2 and "not a latching coil" in r.stderr, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
