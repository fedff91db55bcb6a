"""A saturating coil (flux-linkage curve) on a full bridge: the design, the command line
and the generated driver in the loop (mixed decay with a curve: tests/test_flux_mixed.py).

The physics of the bridge's paths with a curve (the fast decay's time and the energy it
returns to the supply, the slow decay, the slow-decay hold's periodic orbit, `simulate`'s
phases) is checked against ngspice in tests/test_reference_ngspice_bridge.py; the
driver in the loop below proves plumbing only (the emulator shares the model).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import BOARDS, EXAMPLES, require_tool, run_cli
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model import flux
from coildrive.model.circuit import loop

#: the curve of the saturating valve example, in the bridge example's [coil]
CURVE = (EXAMPLES / "saturating-valve-24v.toml").read_text().split("flux_current", 1)[1].split(
    "resistance_tolerance", 1)[0]


def bridge_curve(tmp_path, sink=True):
    """The bridge example with the curve for its inductance, on a copy of its board whose
    sense amplifier has half the gain (the saturating coil's peak reaches 1.4 A, above
    the x20 amplifier's 1.65 A full scale less its over-current margin)."""
    board = tmp_path / "bridge-board.toml"
    text = (BOARDS / "bridge-m32-fast.toml").read_text()
    assert "gain = 20" in text
    board.write_text(text.replace("gain = 20", "gain = 10"))
    text = (EXAMPLES / "dosing-valve-bridge-24v.toml").read_text()
    for old, new in (('board = "bridge-m32-fast"', f'board = "{board}"'),
                     ('inductance = "70 mH"\n', "flux_current" + CURVE),
                     ("sink = false", f"sink = {str(sink).lower()}")):
        assert old in text
        text = text.replace(old, new)
    path = tmp_path / "bridge-curve.toml"
    path.write_text(text)
    return path


def test_design_json_returns_the_fast_decays_charge_times_the_bus(tmp_path):
    path = bridge_curve(tmp_path)
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    b = doc["topology"]["bridge"]
    assert b["hold_decay"] == "slow" and b["release_decay"] == "fast"
    fails = [c["name"] for c in doc["checks"] if not c["ok"]]
    # what is left to fail is the board's missing ratings (switch power, diode energy)
    assert set(fails) <= {"switch_power", "diode_energy"}, fails
    # the figure is V_bus x int i dt over the fast decay through the curve; the energy
    # balance of that decay, W = int i dpsi = (V_bus + 2 V_d) int i dt + R int i^2 dt,
    # bounds it by the energy stored at the hold's highest current on the curve's highest
    # tolerance (W exact per table interval; tests/test_flux_cycle.py checks it by quad)
    drive = load_drive(path)
    top = doc["hold"]["max_mean_current_a"] + doc["hold"]["ripple_a"]
    coil = loop(drive, 24.0, 20.0, l_factor=1.0 + drive.coil.inductance_tolerance).inductance
    stored = float(np.ravel(flux.energy(coil, top))[0])
    assert 0.2 * stored < b["returned_per_release_j"] < stored, (b["returned_per_release_j"], stored)


def test_pump_up_of_a_curve_converges_and_is_the_rlc_for_a_straight_line():
    # Runge-Kutta over the current: 400 steps within 1e-6 of 8,000; a straight-line curve
    # (a linear coil) against the series RLC's closed form (any circuits textbook)
    from coildrive.model.bridge import flux_pump_up, pump_up
    from test_flux_ngspice import CURVE_I, _psi
    coil = flux.FluxCoil(flux.curve(tuple(CURVE_I), tuple(_psi(CURVE_I))), np.array([0.85, 1.15]))
    args = (np.array([0.9, 1.4]), 24.0, 22e-6, 26.1, coil, 0.8)
    a, b = flux_pump_up(*args), flux_pump_up(*args, steps=8000)
    np.testing.assert_allclose(a.delta_v, b.delta_v, rtol=1e-6)
    np.testing.assert_allclose(a.zero_time, b.zero_time, rtol=1e-6)
    line = flux.FluxCoil(flux.curve((0.0, 1.0, 2.0), (0.0, 0.07, 0.14)), np.array(1.0))
    x, y = pump_up(0.9, 24.0, 22e-6, 26.1, line, 0.8), pump_up(0.9, 24.0, 22e-6, 26.1, 0.07, 0.8)
    assert float(x.delta_v) == pytest.approx(float(y.delta_v), rel=1e-10)
    assert float(x.zero_time) == pytest.approx(float(y.zero_time), rel=1e-10)


def test_design_checks_the_pumped_bus_with_a_curve(tmp_path):
    r = run_cli("design", str(bridge_curve(tmp_path, sink=False)), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    b = doc["topology"]["bridge"]
    checks = {c["name"]: c for c in doc["checks"]}
    assert b["sink"] is False and b["pump_up_v"] > 0 and "bus_pump_up" in checks
    # the bus rises by at most what the stored energy can lift it on the bulk capacitor
    # (no losses: 1/2 C (v2^2 - v1^2) <= W), on the curve's highest tolerance, from the
    # highest supply
    drive = load_drive(bridge_curve(tmp_path, sink=False))
    coil = loop(drive, 24.0, 20.0, l_factor=1.0 + drive.coil.inductance_tolerance).inductance
    i_top = doc["adc"]["trip_current_a"]   # the most current any turn-off interrupts
    w = float(np.ravel(flux.energy(coil, i_top))[0])
    v1 = drive.supply.max
    bound = (v1 ** 2 + 2.0 * w / drive.supply.capacitance) ** 0.5
    assert b["pumped_bus_v"] <= bound + 1e-9, (b["pumped_bus_v"], bound)


def test_simulate_releases_through_the_fast_path(tmp_path):
    csv = tmp_path / "act.csv"
    r = run_cli("simulate", str(bridge_curve(tmp_path)), "--supply", "24", "--coil-temp", "20",
                "--hold-time", "2 ms", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    off = w["switch_on"] == 0
    last_on = np.flatnonzero(w["switch_on"] == 1)[-1]
    rel = slice(last_on + 1, None)
    assert w["current_a"][-1] == 0.0, "the fast decay reaches zero"
    for name in ("high_a_on", "low_a_on", "high_b_on", "low_b_on"):
        assert np.all(w[name][rel] == 0), f"all four open at the release: {name}"
    assert np.any(off[:last_on] & (w["low_a_on"][:last_on] == 1)), "the hold's off-times are slow"


@pytest.mark.compiler
def test_generated_driver_runs_the_curve_in_the_loop(tmp_path):
    # firmware-driver's C, compiled, drives the bridge over a saturating coil: one
    # actuation at the lowest and highest supply to its OFF, no FAULT (plumbing)
    from coildrive.bench import FrameDecoder
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.messages import Event, EventKind
    from coildrive.codegen.driver import render_driver
    from coildrive.codegen.host_build import build_firmware

    require_tool("gcc")
    d = design(load_drive(bridge_curve(tmp_path)))
    fw = tmp_path / "fw"
    fw.mkdir()
    for name, text in render_driver(d).items():
        (fw / name).write_text(text)
    lib = build_firmware(fw, d, cache=tmp_path / "cache")
    for supply in (d.drive.supply.min, d.drive.supply.max):
        dev = FirmwareDevice(d, lib, DeviceOptions(supply=supply, coil_temp=20.0, first_actuation=0.002,
                                                   noise_codes=1, seed=3, hold_time=0.01))
        dec, kinds, t = FrameDecoder(), [], 0.0
        while t < 0.3 and EventKind.OFF not in kinds:
            t += 0.005
            kinds += [m.kind for m in dec.feed(dev.read(t)) if isinstance(m, Event)]
        assert EventKind.PEAK_END in kinds and EventKind.OFF in kinds, (supply, kinds)
        assert EventKind.FAULT not in kinds, (supply, kinds)


def test_check_passes_a_synthetic_capture_with_the_fast_release(tmp_path):
    # plumbing (the synthetic capture shares the model): design -> synth capture -> check,
    # and check's predicted release is the fast decay's through the curve
    from coildrive.bench.check import check_capture
    from coildrive.bench.synth import synth_capture
    from coildrive.design import firmware_setting
    from coildrive.model.rl import decay_time

    d = design(load_drive(bridge_curve(tmp_path, sink=False)))
    duty, peak = firmware_setting(d, 24.0, 60.0)
    cap = synth_capture(d.drive, peak, duty, d.hold.frequency_hz, supply=24.0, coil_temp=60.0, hold_time=0.01)
    items = {i.name: i for i in check_capture(cap, d).items}
    assert all(i.status in ("pass", "info") for i in items.values()), {k: i.status for k, i in items.items()}
    slow = loop(d.drive, 24.0, 60.0)
    t_slow = float(decay_time(d.drive.release.current, 0.3, slow.r_off, slow.v_off, slow.inductance))
    assert items["release_time"].predicted < 0.3 * t_slow, (items["release_time"].predicted, t_slow)
