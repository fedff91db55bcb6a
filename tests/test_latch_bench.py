"""A latching coil on the bench: the virtual device's set and reset pulses -> capture ->
check.

The emulator streams the design's own pulse physics, so emulate -> check passing proves
the plumbing (events, ADC chain, pulse cutting, bands), not the numbers. The numbers are
checked here against the model written afresh: the check's predicted current at a
pulse's end against ``i = V/R (1 - e^(-t R/L))`` (the RL step, any circuits text, e.g.
Hayt & Kemmerly, *Engineering Circuit Analysis*, the source-driven RL circuit) with the
design's R and L at the capture's temperature (copper's R(T), IEC 60028 annealed copper,
alpha = 0.00393 /K), and on the relay's drooping bus against scipy's ``solve_ivp`` of the
source, its resistance, the capacitor and the coil; the time to zero after a bridge's
pulse against the closed form of its fast decay, ``L di/dt = -((R_coil + R_sense) i + V_bus
+ 2 V_diode)`` (docs/design-method.md, the same RL step with a constant opposing voltage).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from typer.testing import CliRunner

from conftest import EXAMPLES, run_cli
from test_emulator_device import capture_of, run as run_device
from coildrive.bench.device import DeviceOptions
from coildrive.bench.latch_check import check_latch_capture, predict_pulse
from coildrive.bench.latch_device import LatchDevice
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.latch import design_latch

BRIDGE = EXAMPLES / "latching" / "irrigation-valve-bridge-12v.toml"
RELAY = EXAMPLES / "latching" / "bistable-relay-reset-winding-24v.toml"
BOLT = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"   # a moving armature
ALPHA = 0.00393     # /K, IEC 60028 annealed copper


def _capture(tmp_path, design, name, **options):
    dev = LatchDevice(design, DeviceOptions(noise_codes=0.5, seed=5, **options))
    msgs, _ = run_device(dev, 0.05 + 2.2 * dev.period, step=0.05)
    return capture_of(msgs, tmp_path / f"{name}.cdcap")


@pytest.mark.parametrize("path, point", [(BRIDGE, dict(supply=9.0, coil_temp=100.0)),
                                         (RELAY, dict(supply=24.0, coil_temp=20.0)),
                                         (BOLT, dict(supply=12.0, coil_temp=20.0))])
def test_both_examples_pass_and_a_coil_with_more_resistance_fails(tmp_path, path, point):
    d = design_latch(load_drive(path))
    good = check_latch_capture(_capture(tmp_path, d, "good", **point), d, coil_temp=point["coil_temp"],
                               supply=None if path != RELAY else point["supply"])
    rows = {i.name: i.status for i in good.items}
    assert good.ok, [(i.name, i.detail) for i in good.items]
    assert rows["set_end_current"] == rows["reset_end_current"] == "pass", rows
    assert {p.name for p in good.analysis.pulses if p.partial is None} == {"set", "reset"}
    # the bridge's inline sense sees the fast decay; the relay's sense under the switches does not
    assert rows["set_time_to_zero"] == ("n/a" if path == RELAY else "pass"), rows
    bad = check_latch_capture(_capture(tmp_path, d, "bad", resistance_scale=1.4, **point), d,
                              coil_temp=point["coil_temp"], supply=None if path != RELAY else point["supply"])
    assert not bad.ok and [i for i in bad.failed if i.name == "set_end_current"], \
        [(i.name, i.status) for i in bad.items]


def test_the_predicted_pulse_end_current_and_decay_are_the_rl_steps_written_afresh():
    # bridge, stiff bus: V / R (1 - exp(-t R / L)), R = R_coil(T) + 2 R_switch + R_sense
    d = design_latch(load_drive(BRIDGE))
    drv = d.drive
    v, temp = 9.0, 100.0
    r = (drv.coil.resistance * (1 + ALPHA * (temp - drv.coil.reference_temp))
         + 2 * drv.switch.on_resistance + drv.board.sense.resistance)
    # the fast decay after it (design-method.md, the bridge's fast decay): L di/dt =
    # -((R_coil + R_sense) i + V_bus + 2 V_diode), so t = L/R ln((R i0 + V) / (R i1 + V))
    r_fast = r - 2 * drv.switch.on_resistance
    v_fast = v + 2 * drv.freewheel.diode_drop
    for p in d.latch.pulses:
        fresh = v / r * (1 - math.exp(-p.time_s * r / drv.coil.inductance))
        pred = predict_pulse(d, p.name, v, temp, 2e-3, 1e-3)
        assert pred["end_current_a"] == pytest.approx(fresh, rel=1e-3), (p.name, pred, fresh)
        t_fresh = drv.coil.inductance / r_fast * math.log((r_fast * fresh + v_fast) / (r_fast * 2e-3 + v_fast))
        assert pred["time_to_zero_s"] == pytest.approx(t_fresh, rel=1e-3), (p.name, pred, t_fresh)
    # relay, drooping bus (source V_s behind R_s into C; the winding from C): solve_ivp
    d = design_latch(load_drive(RELAY))
    drv = d.drive
    s = drv.supply
    for p in d.latch.pulses:
        coil = drv.coil if p.name == "set" else drv.latch.reset_coil
        r = (coil.resistance * (1 + ALPHA * (25.0 - coil.reference_temp)) + drv.switch.on_resistance
             + drv.board.sense.resistance)
        ind = coil.inductance

        def f(_t, y):
            vc, i = y
            return [((24.0 - vc) / s.source_resistance - i) / s.capacitance, (vc - r * i) / ind]

        sol = solve_ivp(f, (0.0, p.time_s), [24.0, 0.0], method="Radau", rtol=1e-10, atol=1e-12)
        got = predict_pulse(d, p.name, 24.0, 25.0, 1e-3, 1e-3)["end_current_a"]
        assert got == pytest.approx(float(sol.y[1, -1]), rel=1e-4), (p.name, got, sol.y[1, -1])


def test_a_pulse_the_capture_cut_is_reported_incomplete(tmp_path):
    d = design_latch(load_drive(BRIDGE))
    dev = LatchDevice(d, DeviceOptions(first_actuation=0.01))
    msgs, _ = run_device(dev, dev.period + 0.015, step=0.005)    # ends 5 ms into the reset pulse
    report = check_latch_capture(capture_of(msgs, tmp_path / "cut.cdcap"), d)
    assert [p.partial is None for p in report.analysis.pulses] == [True, False]
    assert "ended during pulse 2 (reset)" in " ".join(report.notes)
    assert report.ok, [(i.name, i.detail) for i in report.items]


def test_what_a_latch_cannot_take_is_refused_in_one_line(tmp_path):
    r = run_cli("emulate", str(RELAY), "--period", "0.05 s", "--duration", "0.1")
    assert r.returncode == 2 and "--period" in r.stderr and "interval" in r.stderr, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    d = design_latch(load_drive(RELAY))
    cap = tmp_path / "relay.cdcap"
    _capture(tmp_path, d, "relay")
    for args, where in ((["--supply", "24", "--plot", str(tmp_path / "p.png")], "--plot"),
                        ([], "--supply")):     # the 24 V bus is above the divider's 20 V
        res = CliRunner().invoke(app, ["check", str(cap), str(RELAY), *args])
        assert res.exit_code == 2 and where in res.stderr, (args, res.stderr)
        assert len(res.stderr.strip().splitlines()) == 1 and not (tmp_path / "p.png").exists()


@pytest.mark.slow
def test_emulate_capture_check_over_a_real_pty(tmp_path):
    from test_bench_e2e import emulate_capture_check

    r, rows = emulate_capture_check(BRIDGE, tmp_path / "latch.cdcap", "--supply", "9", "--coil-temp", "100")
    doc = json.loads(r.stdout)
    assert r.returncode == 0, rows
    assert rows["set_end_current"] == rows["reset_end_current"] == "pass", rows
    # the capture joins the stream wherever the device is: set and reset alternate
    names = [p["name"] for p in doc["analysis"]["pulses"] if p["partial"] is None]
    assert set(names) == {"set", "reset"} and all(a != b for a, b in zip(names, names[1:])), names
    assert np.isfinite(doc["prediction"]["set"]["end_current_a"])
