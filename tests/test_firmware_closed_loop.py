"""The closed-loop hold's C driver in the loop with the coil model (in process, no pty).

The generated driver and stream encoder are compiled by the system C compiler (gcc here)
and run by :class:`coildrive.bench.firmware_device.FirmwareDevice` against the coil model
at each design corner. The device shares the design's physics, so these runs prove the
driver's loop and its constants (plumbing), not the physics: the margins are checked
against scipy.signal in tests/test_closed_loop.py. What is checked here:
- at every corner of the design's envelope (hot coil at the lowest supply included) the
  mean current over the last 5 ms of a 25 ms hold is the set-point within +-3 %, and
  the design's figure for that corner within 1 %;
- after a supply step 24 -> 20 V in the hold the current stays within +-3 % of the
  set-point and settles (within 5 % of its largest deviation) inside the settling time
  the design states.
"""

from __future__ import annotations

import numpy as np
import pytest

from coildrive.bench.device import DeviceOptions
from coildrive.bench.firmware_device import FirmwareDevice
from coildrive.codegen.driver import render_driver
from coildrive.codegen.host_build import build_firmware
from coildrive.model.circuit import copper_resistance
from conftest import require_tool
from driver_harness import example_design

pytestmark = pytest.mark.compiler

HOLD = 2  # the driver's hold state
FIRST = 0.001


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    require_tool("gcc")
    d = example_design("dosing-valve-closed-loop")
    folder = tmp_path_factory.mktemp("fw")
    for name, text in render_driver(d, "coil").items():
        (folder / name).write_text(text)
    return d, build_firmware(folder, d, cache=tmp_path_factory.mktemp("cache"))


def hold_trace(d, library, hold: float, step=None, **point) -> np.ndarray:
    """``(start s, mean A)`` of each PWM period of the first actuation's hold."""
    dev = FirmwareDevice(d, library, DeviceOptions(hold_time=hold, first_actuation=FIRST, period=1.0, **point),
                         trace=True)
    if step is not None:
        dev.supply_step(*step)
    end = FIRST + d.pull_in.peak_time_s + hold
    t = 0.0
    while not dev.trace or dev.trace[-1][0] < end:
        t += 0.01
        dev.read(t)
    tr = np.array(dev.trace)
    assert not any("fault" in e.text for e in dev.log()), "no fault in the hold"
    return tr[tr[:, 2] == HOLD, :2]


def test_every_corner_holds_the_set_point(built):
    d, lib = built
    r = d.hold.closed_loop
    coil = d.drive.coil
    seen, worst = set(), 0.0
    for c in d.corners:
        point = (c.supply_v, round(c.coil_temp_c, 6), c.resistance_ohm / copper_resistance(
            coil.resistance, coil.reference_temp, c.coil_temp_c), c.inductance_h / coil.inductance)
        if point in seen:
            continue
        seen.add(point)
        tr = hold_trace(d, lib, 0.025, supply=point[0], coil_temp=point[1], resistance_scale=point[2],
                        inductance_scale=point[3])
        mean = float(np.mean(tr[tr[:, 0] > tr[-1, 0] - 0.005, 1]))
        err = mean / r.setpoint_a - 1.0
        worst = max(worst, abs(err))
        assert abs(err) <= 0.03, f"{c.label}: {mean:.5g} A vs set-point {r.setpoint_a:.5g} A ({err:+.2%})"
        assert mean == pytest.approx(c.hold_mean_current_a, rel=0.01), c.label
    assert any(p[0] == d.drive.supply.min and p[1] > 60 for p in seen), "a hot coil at the lowest supply"
    assert len(seen) >= 24
    print(f"worst deviation from the set-point over {len(seen)} corners: {worst:.3%}")


def test_supply_step_recovers_within_the_stated_settling_time(built):
    d, lib = built
    r = d.hold.closed_loop
    at = FIRST + d.pull_in.peak_time_s + 0.02
    tr = hold_trace(d, lib, 0.04, step=(at, 20.0), supply=24.0, coil_temp=20.0)
    after = tr[tr[:, 0] >= at]
    final = float(np.mean(after[after[:, 0] > at + 0.012, 1]))
    before = float(np.mean(tr[(tr[:, 0] < at) & (tr[:, 0] > at - 0.004), 1]))
    assert np.all(np.abs(after[:, 1] / r.setpoint_a - 1.0) <= 0.03), "within +-3 % through the step"
    assert abs(final / before - 1.0) <= 0.005, "back where it was"
    dev = np.abs(after[:, 1] - final)
    peak = float(np.max(dev))
    assert peak > 2 * r.current_lsb_a, "the step moves the current by more than the ADC resolves"
    outside = np.flatnonzero(dev > 0.05 * peak)
    settle = after[outside[-1] + 1, 0] - at
    assert settle <= r.settling_time_s, f"settled after {settle * 1e3:.3g} ms, stated {r.settling_time_s * 1e3:.3g} ms"
    print(f"dip {peak * 1e3:.3g} mA ({peak / r.setpoint_a:.2%}), settled in {settle * 1e3:.3g} ms "
          f"(stated {r.settling_time_s * 1e3:.3g} ms)")


@pytest.mark.slow
@pytest.mark.parametrize("supply, coil_temp", [("20 V", "70 degC"), ("28 V", "-10 degC")])
def test_emulate_firmware_capture_check_passes(tmp_path, monkeypatch, supply, coil_temp):
    """As a user runs it, each a real subprocess over a real pseudo-terminal:
    firmware-driver -> emulate --firmware -> capture -> check, at the hot low-supply and
    the cold high-supply ends; check predicts the hold from the duty the loop settles at."""
    import json

    from conftest import EXAMPLES, run_cli
    from test_bench_e2e import TIMEOUT, Emulator

    require_tool("gcc")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    drive = EXAMPLES / "dosing-valve-closed-loop.toml"
    r = run_cli("firmware-driver", str(drive), "--out", str(tmp_path / "fw"))
    assert r.returncode == 0, r.stderr
    emu = Emulator(drive, "--firmware", str(tmp_path / "fw"), "--noise", "1", "--seed", "3",
                   "--supply", supply, "--coil-temp", coil_temp)
    try:
        r = run_cli("capture", emu.path, "--drive", str(drive), "--out", str(tmp_path / "c.cdcap"),
                    "--actuations", "2", timeout=TIMEOUT)
    finally:
        emu.stop()
    assert r.returncode == 0, r.stderr
    r = run_cli("check", str(tmp_path / "c.cdcap"), str(drive), "--json")
    doc = json.loads(r.stdout)
    assert r.returncode == 0, {i["name"]: (i["status"], i["detail"]) for i in doc["items"]}
    hold = next(i for i in doc["items"] if i["name"] == "hold_mean")
    assert hold["status"] == "pass"
