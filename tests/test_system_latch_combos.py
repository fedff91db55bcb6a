"""Latching coils on a channel of a system file that the rail's bound does not take yet, and
a latching armature's set pulse cut by STOP: each refused in one line, never a traceback.

* A latching coil with an eddy-current term or a flux-linkage curve: its pulses' bound
  (coildrive/design/system.py ``_latch_bound_params``) takes a linear winding, so
  ``design SYSTEM.toml`` and ``simulate SYSTEM.toml`` refuse it (exit 2, the key named).
* A latching armature's set pulse from the boost in ``simulate SYSTEM.toml``: the boost
  capacitor through it is the armature run's (the converter draws from the rail until it
  is recharged), checked by the energy balance of the recharge written afresh,
  ``C u du/dt = P`` (common practice: a converter delivering a constant power), from the
  single-drive ``simulate``'s capacitor after the pulse;
* A moving armature's set pulse cut before the armature rests on the seat: the catch would
  not hold it and its fall back open is no part of the latch model, so the virtual device
  lets the pulse run to its end and replies BUSY to STOP (plumbing: no physics checked). The
  compiled driver (``emulate --firmware``) opens the switches at STOP as the board does, so
  its device ends the run in one line (``UnseatedCut``, exit 2), or with a log line when
  the run's end cuts the pulse, never a traceback (plumbing; gcc, run under CI=true).
"""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from conftest import EXAMPLES, require_tool, run_cli
from rail_reference import manifold_copy
from test_emulator_device import command, run as run_device
from test_system_flux import CURVE
from test_system_boost_armature import LIGHT
from test_system_latch import CIRCUITS, LATCH
from test_system_latch_boost import BOOST

from coildrive.bench.device import DeviceOptions
from coildrive.bench.latch_device import LatchDevice
from coildrive.bench.messages import Opcode, ReplyStatus
from coildrive.bench.protocol import FrameEncoder
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.latch import design_latch


@pytest.mark.parametrize("key, coil", [("coil.eddy_resistance", 'eddy_resistance = "3 kohm"\n'),
                                       ("coil.flux_current", CURVE)])
def test_latch_with_eddy_or_curve_is_refused_in_one_line(tmp_path, key, coil):
    """The set winding (``[coil]``) with an eddy term or a saturating curve (its 60 mH left
    out for the curve): design and simulate refuse in one line naming the key."""
    path = manifold_copy(tmp_path)
    text = LATCH.format(circuit=CIRCUITS["winding"])
    head, tail = text.split("[coil]\n", 1)
    if key == "coil.flux_current":
        tail = tail.replace('inductance = "60 mH"\n', "", 1)
    (tmp_path / "purge-latch-24v.toml").write_text(head + "[coil]\n" + coil + tail)
    path.write_text(path.read_text().replace('"purge-valve-24v.toml"', '"purge-latch-24v.toml"'))
    for args in (["design", str(path)],
                 ["simulate", str(path), "--supply", "24", "--coil-temp", "20", "--csv", str(tmp_path / "s.csv")]):
        r = CliRunner().invoke(app, args)
        assert r.exit_code == 2 and key in r.stderr and "latching coil" in r.stderr, (args, r.output)
        assert len(r.stderr.strip().splitlines()) == 1 and not (tmp_path / "s.csv").exists()


def test_stop_in_a_latching_armatures_set_pulse_replies_busy():
    """The plunger valve (a latching armature, its set pulse from the boost): STOP a third
    into the set pulse replies BUSY (the armature not yet seated), the pulse keeps its
    length, and the device shuts down there too without raising (the switch
    opening at the pulse's end)."""
    d = design_latch(load_drive(EXAMPLES / "latching" / "plunger-valve-boost-reset-winding-12v.toml"))
    dev = LatchDevice(d, DeviceOptions(first_actuation=0.01))
    length = dev.pulse_time("set")
    run_device(dev, 0.01 + length / 3, step=length / 6)
    assert dev._rec is not None and dev._rec.key[0] == "set"
    assert command(dev, FrameEncoder(), 0.01 + length / 3, Opcode.STOP).status == ReplyStatus.BUSY
    assert dev._rec.key == ("set", length) and not dev._rec.stopped
    dev.shutdown(0.01 + length / 3)
    assert dev._rec.key == ("set", length)


def test_the_compiled_driver_cutting_an_unseated_set_pulse_ends_the_run_in_one_line(tmp_path, monkeypatch):
    """The bolt catch (a latching armature, no boost) with its compiled driver (gcc): STOP
    4 ms into the 25.4 ms set pulse replies OK and the driver's next tick opens the switches
    before the bolt is seated -> UnseatedCut (a CoildriveError: one line, exit 2); the
    ``--duration`` end cutting it the same way -> a log line, exit 0, no traceback."""
    from coildrive.bench.latch_firmware_device import LatchFirmwareDevice, UnseatedCut
    from coildrive.codegen.host_build import build_latch_firmware
    from coildrive.codegen.latch_driver import pulse_switches
    from coildrive.errors import CoildriveError

    require_tool("gcc")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    path = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"
    assert run_cli("firmware-driver", str(path), "--out", str(tmp_path / "fw")).returncode == 0
    d = design_latch(load_drive(path))
    dev = LatchFirmwareDevice(d, build_latch_firmware(tmp_path / "fw", d), pulse_switches(d), DeviceOptions())
    start = dev.interval                      # the driver's first set pulse
    run_device(dev, start + 0.004, step=0.002)
    assert dev._on is not None and dev._on[0] == "set"
    assert command(dev, FrameEncoder(), start + 0.004, Opcode.STOP).status == ReplyStatus.OK
    with pytest.raises(UnseatedCut, match="before the armature rests on the seat") as err:
        run_device(dev, start + 0.006, step=0.001)
    assert isinstance(err.value, CoildriveError) and "\n" not in str(err.value)
    r = run_cli("emulate", str(path), "--firmware", str(tmp_path / "fw"), "--duration", f"{(start + 0.004) * 1e3:.4g} ms")
    assert r.returncode == 0 and "Traceback" not in r.stderr, r.stderr
    assert "stream ends: the driver stopped the set pulse after" in r.stderr, r.stderr


def test_simulate_takes_the_armature_run_for_the_boost_capacitor(tmp_path):
    """The purge valves latching from the boost with a 1 g plunger (invented; it seats in
    the set pulse): at 24 V, 20 degC the rail's converter draw for purge1's set pulse
    (the rail less the dispensing valves', over ``P / (eta V)``) ends where the capacitor
    is back at ``V_b``: from the single drive's capacitor ``u`` at its last sample in the
    recharge ``t_u``, ``t_u + C (V_b^2 - u^2) / (2 P)`` (within the rail grid's step). The
    linear boosted pulse (no armature) ended it 0.66 ms sooner."""
    import json

    import numpy as np

    path = manifold_copy(tmp_path)
    text = LATCH.format(circuit=CIRCUITS["winding"]).replace('settle_time = "10 ms"\n', "")
    text = text.replace("sink = true\n", BOOST).replace("margin = 1.5\n", "margin = 1.5\ncurrent_margin = 1.2\n")
    drive = tmp_path / "purge-latch-24v.toml"
    drive.write_text(text + LIGHT.replace('"2 g"', '"1 g"'))
    path.write_text(path.read_text().replace('"purge-valve-24v.toml"', '"purge-latch-24v.toml"'))
    run = CliRunner()
    offset = json.loads(run.invoke(app, ["design", str(path), "--json"]).stdout)["system"]["channels"][4]["offset_s"]
    for src, csv in ((path, "s.csv"), (drive, "one.csv")):
        r = run.invoke(app, ["simulate", str(src), "--supply", "24", "--coil-temp", "20", "--csv", str(tmp_path / csv)])
        assert r.exit_code == 0, r.output
    s = np.loadtxt(tmp_path / "s.csv", delimiter=",", skiprows=1)
    one = np.loadtxt(tmp_path / "one.csv", delimiter=",", skiprows=1)
    n = np.round((s[:, 1] - (s[:, 2:6] * s[:, 8:12]).sum(axis=1)) / (5.0 / (0.85 * 24.0)))
    k = int(np.argmax(n == 2))
    fall = k + int(np.argmax(n[k:] < 2))                   # purge1's converter stops first
    end = s[fall, 0] - offset
    reset = int(np.argmax(one[:, 2] > 0))
    u_at = int(np.nonzero(one[:reset, 7] < 38.0 - 1e-9)[0][-1])   # the set's last sample below V_b
    t_u, u = one[u_at, 0], one[u_at, 7]
    expected = t_u + 220e-6 * (38.0**2 - u**2) / (2 * 5.0)
    print(f"converter end {end * 1e3:.4f} ms vs energy balance {expected * 1e3:.4f} ms")
    assert s[fall - 1, 0] - offset <= expected + 1e-9 and end >= expected - 1e-9
