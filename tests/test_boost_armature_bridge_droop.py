"""A moving armature's boosted peak on a full bridge on a drooping main supply (``[supply]
boost``, ``[armature]``, ``source_resistance``, a bridge board): the hold's slow decay draws
nothing from the main bus, and the release's fast decay returns the current into it while
the armature lets go and the boost converter, recharging from the hand-over on, may still
draw from it (coildrive/model/armature_bus_release.py ``release_over(drains=...)``,
coildrive/design/evaluate.py ``_release_on_bus``, coildrive/design/bridge_bus.py
``_armature_decays``, coildrive/model/waveform.py ``_bus_release``).

Outside reference: scipy's ``solve_ivp`` (Radau, rtol 1e-11) of the release's equations
written afresh (tests/test_bridge_armature_droop.py ``reference``, with the converter's
current drawn off the bus explicitly, ``C du/dt = (V_s - u)/R_s - I_c + i`` -- not the
model's Thevenin source ``V_s - R_s I_c``); for the boosted hold before it,
tests/test_boost_armature_droop.py's (``simulated_at_9v``).

The scenarios (the bridge dosing valve of tests/test_bridge_armature.py, the fast valve of
examples/fast-valve-boost-armature-12v.toml on the bundled bridge board on an invented
cable and bulk capacitor) are invented.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from conftest import EXAMPLES
from test_boost_armature import EXAMPLE, LC
from test_boost_armature_droop import designed_on_the_bus, simulated_at_9v
from test_bridge_armature_droop import _params, reference

from coildrive.model.armature import OPENED, params_from_loop
from coildrive.model.armature_bus_release import release_over

I_C = 1.0          # A: the converter's draw off the bus


@pytest.mark.parametrize("sink", [True, False])
def test_release_with_the_converter_drawing_against_solve_ivp(tmp_path, sink):
    """The seated armature's release into the bus (1.5 ohm, 100 uF, 0.3 A from a 20 V bus)
    with a converter drawing 1 A off it, and idle: the model's worst over both (on a supply
    that sinks the source ``V_s - R_s I_c`` while it draws; on one that cannot, its feed
    one-way, the draw as a current) against solve_ivp with the draw as a current -- the
    latest unlatch, open stop and zero current (the draw's: a lower bus returns slower),
    the most charge and the highest bus (the idle one's), within 1e-5."""
    d, p = _params(tmp_path, 1.5, 100e-6)
    v_d = d.freewheel.diode_drop
    r = release_over(p, 0.3, 20.0, 20.0, 2 * v_d, 1, drains=(np.array([I_C]),), sink=sink)
    idle = reference(p, v_d, 1.5, 100e-6, 0.3, 20.0, sink)                # scipy solve_ivp
    drawn = reference(p, v_d, 1.5, 100e-6, 0.3, 20.0, sink, drain=I_C)    # scipy solve_ivp
    assert r.run.status[0] == OPENED
    assert drawn["zero"] > idle["zero"] * (1 + 1e-3) and idle["high"] > drawn["high"] + 0.1
    b = r.run
    for got, want in ((b.unlatch_time, max(idle["unlatch"], drawn["unlatch"])),
                      (b.open_time, max(idle["open"], drawn["open"])),
                      (b.zero_time, max(idle["zero"], drawn["zero"])), (b.charge, max(idle["q"], drawn["q"])),
                      (r.highest_bus, max(idle["high"], drawn["high"]))):
        assert got[0] == pytest.approx(want, rel=1e-5)              # scipy solve_ivp


def _bridged(folder: Path, sink: str = "true") -> Path:
    """The example on the bundled bridge board (a 100 V switch) on a drooping main supply
    (0.1 ohm, 470 uF, the converter at 85 %)."""
    board = EXAMPLES.parent / "boards" / "bridge-m32-fast.toml"
    text = EXAMPLE.read_text().replace('board = "lab-m32-zener"', f'board = "{board}"\n[switch]\n'
                                       'max_voltage = "100 V"').replace(
        'max = "16 V"', 'max = "16 V"\nsource_resistance = "0.1 ohm"\ncapacitance = "470 uF"\n'
        f'boost_efficiency = 0.85\nsink = {sink}')
    path = folder / f"bridge-{sink}.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("sink", ["true", "false"])
def test_design_simulate_and_emulate_on_the_bridge_on_the_drooping_bus(tmp_path, sink):
    """``coildrive design --json`` (a real subprocess, tests/test_boost_armature_droop.py
    ``designed_on_the_bus``): seated at every corner (some in the hold on the main bus), the
    release's turn-offs into the bus with the highest bus named.
    ``simulate`` at 9 V and 100 degC: its release from the final turn-off -- the main bus
    there, the converter still drawing -- against solve_ivp of the release's equations from
    the same state (the letting-go, the open stop, the current's zero within 1e-5 of their
    time from the turn-off; the converter's current from the hand-over and the hold's top,
    tests/test_boost_armature_droop.py ``simulated_at_9v``); the virtual device's capture
    passes ``check`` (plumbing). A supply that sinks, and one that cannot (its feed
    one-way, the converter's draw a current off the bus)."""
    from test_emulator_device import emulated_passes_check

    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model.circuit import loop

    path = _bridged(tmp_path, sink)
    assert designed_on_the_bus(str(path))["supply"]["highest_bus_v"] is not None
    d = design(load_drive(path))
    w, _, _, _, _, v_src = simulated_at_9v(d, 0.001, LC)
    t_off = w.events["off"]
    k = int(np.searchsorted(w.time, t_off * (1.0 - 1e-12)))
    sup = d.drive.supply
    assert w.position[k] == 0.0 and w.bus_voltage[k] < 9.0
    lp = loop(d.drive, np.array([9.0]), np.array([100.0]), path="release")
    p = params_from_loop(d.drive.armature, lp, np.array([1.0]), bus=(sup.source_resistance, sup.capacitance))
    ref = reference(p, d.drive.freewheel.diode_drop, sup.source_resistance, sup.capacitance,
                    float(w.current[k]), float(w.bus_voltage[k]), sup.sink, drain=(9.0 - v_src) / sup.source_resistance)
    for name, key in (("unlatch", "unlatch"), ("open", "open"), ("zero", "zero")):
        assert w.events[name] - t_off == pytest.approx(ref[key], rel=1e-5)   # scipy solve_ivp
    emulated_passes_check(d, tmp_path)


@pytest.mark.compiler
def test_firmware_in_the_loop_on_the_bridge_on_the_drooping_bus(tmp_path):
    """The reference C driver (gcc) in the loop with the hottest coil at the nominal 13.5 V:
    the device flies the hold on the main bus and releases into it with the converter's
    draw out of the source (bench/firmware_device.py), and ``check`` passes (lean: one
    corner; plumbing, the device shares the model)."""
    from driver_harness import hot_nominal_loop_passes

    (tmp_path / "d").mkdir()
    hot_nominal_loop_passes(tmp_path, _bridged(tmp_path / "d"))
