"""A latching coil with a moving armature and an eddy-current term pulsed from the boost
([hold] mode = "latch", [supply] boost, [armature], [coil] eddy_resistance): the set pulse
is the plunger's run from the boost capacitor with 800 ohm across the set winding's
inductance, its threshold on the terminal current the sense reads (raised by V_b,max /
R_e), the eddy resistance's loss carried through the run as a state of its own
(coildrive/model/armature_runs.py pull_in ``eddy_loss``; coildrive/design/latch_boost.py).

The drive (invented): the plunger valve of examples/latching/plunger-valve-boost-reset-
winding-12v.toml with ``eddy_resistance = "800 ohm"`` on the set winding and its threshold
at 1.9 x 0.8 A (+ 42 V / 800 ohm).

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the winding's branch with
R_e across it, the plunger and the boost capacitor written afresh
(test_latch_boost_armature.reference, nothing of coildrive.model): ``i_t = (u + R_e i)/(R +
R_e)``, ``L(x) di/dt = u - R i_t - i L'(x) v``, ``C_b du/dt = -i_t``, the force ``i^2 L'(x)
/ 2`` on the branch's current, R_e's loss ``(u - R i_t)^2 / R_e``; after the turn-off the
freewheel conducts ``i_t = (R_e i - V_d)/(R_off + R_e)`` until it blocks, then the flux's
tail (its field, ``L_c i^2 / 2``) goes into R_e alone. Checked within 1e-5 relative (the
armature's share against the mechanical work 1e-4): the seat time, the fastest and longest
pulse, the capacitor at the longest pulse's end, the highest terminal current at a
turn-off, the energy from the boost, the copper's, the freewheel diode's and the eddy
resistance's (computed on its own: the balance's remainder is the armature's, which is then
checked against the mechanics), and simulate's set pulse at 9 V, 20 degC. The same from an
ideal boost (``u`` held at ``V_b``), and with 500 ohm across the reset winding too
(test_latch_boost_curves' reference of the reset winding, test_latch_armature's of the
armature's travel to the open stop).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import run_cli
from test_latch_boost import header_holds
from test_latch_boost_armature import (device_checks, driver_in_the_loop, plunger_valve, set_pulse_against_reference,
                                       simulated_set_pulse)

from coildrive.config import load_drive
from coildrive.design.latch import design_latch


def eddy_valve(tmp_path, ideal: bool = False, reset: float = 0.0):
    """The plunger valve with 800 ohm across its set winding (``ideal``: from an ideal
    boost, no boost capacitance; ``reset`` ohm across the reset winding, 0 none):
    ``(path, drive, design)``."""
    path = plunger_valve(tmp_path, margin=1.9)
    text = path.read_text()
    old = 'inductance_tolerance = 0.15\n'
    assert text.count(old) == 2, "precondition: the two windings' tolerances"
    text = text.replace(old, old + 'eddy_resistance = "800 ohm"\n', 1)
    if reset:   # [reset_coil]'s tolerance line
        head, tail = text.split("[reset_coil]")
        text = head + "[reset_coil]" + tail.replace(old, old + f'eddy_resistance = "{reset:g} ohm"\n', 1)
    if ideal:
        assert text.count('boost_capacitance = "220 uF"') == 1
        text = text.replace('boost_capacitance = "220 uF"', "boost_capacitance = 0")
    path.write_text(text)
    drive = load_drive(path)
    assert drive.coil.eddy_resistance == 800.0 and drive.latch.reset_coil.eddy_resistance == reset
    assert (drive.supply.boost_capacitance == 0) is ideal
    return path, drive, design_latch(drive)


@pytest.fixture(scope="module")
def eddy(tmp_path_factory):
    return eddy_valve(tmp_path_factory.mktemp("plunger-eddy"))


def test_set_pulse_with_its_eddy_term_against_solve_ivp(eddy):
    _, drive, d = eddy
    # scipy solve_ivp: the seat, the pulses, the capacitor, the highest terminal current, the
    # energies -- the eddy resistance's computed (on, freewheeling, the tail), the balance's
    # remainder the armature's against the reference's mechanical work
    p, tops = set_pulse_against_reference(drive, d)
    # hand-worked: the threshold 1.9 x 0.8 A raised by the eddy share's bound 42 V / 800 ohm
    assert p.boost.threshold_a == pytest.approx(1.9 * 0.8 + 42.0 / 800.0, rel=1e-12)
    # the switch turns off the terminal current, above the branch's there
    assert all(x["i"] > x["i_m"] for x in tops)
    assert p.eddy_j > 0.01 * p.supply_j


def test_cli_simulate_header_emulate_check(eddy, tmp_path):
    path, drive, d = eddy
    r = run_cli("design", str(path), "--json", "--header", str(tmp_path / "e.h"), "--prefix", "PLE",
                "--samples", "32")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    s = doc["latch"]["pulses"][0]
    assert s["eddy_j"] == pytest.approx(d.latch.pulses[0].eddy_j) and s["armature_j"] > 0
    assert doc["monte_carlo"]["failures"]["set_not_seated"] == 0
    header_holds(tmp_path, "e.h", f'PLE_SET_THRESHOLD_CODE == {s["boost"]["threshold_code"]}U')
    # simulate at 9 V, coil 20 degC: the set pulse's length, its terminal current and the
    # capacitor at its end against scipy solve_ivp; emulate -> check (plumbing)
    simulated_set_pulse(path, drive, d, s["boost"]["threshold_code"], tmp_path)
    device_checks(d, tmp_path)


def test_the_compiled_driver_in_the_loop_passes_check(eddy, tmp_path, monkeypatch):
    """The compiled latch driver (gcc) in the model's device, the set pulse's terminal current
    with its eddy step read against the code (plumbing) -> check passes; 40 % more resistance
    fails."""
    driver_in_the_loop(eddy[0], eddy[2], tmp_path, monkeypatch)


def test_from_an_ideal_boost_against_solve_ivp_simulate_and_the_driver_in_the_loop(tmp_path, monkeypatch):
    """The same valve from an ideal boost (no boost capacitance: ``V_b`` stiff, the eddy
    loss ``int (V_b - R i_t)^2 dt / R_e`` from the run's own integrals,
    coildrive/model/armature_boost.py ``run_eddy_loss``): the set pulse's seat, pulses,
    terminal currents and energies against scipy solve_ivp (the reference with ``u`` held
    at ``V_b``) within 1e-5, the balance's remainder the mechanical work within 1e-4;
    simulate at 9 V, 20 degC against it; the compiled driver in the loop -> check."""
    path, drive, d = eddy_valve(tmp_path, ideal=True)
    p, tops = set_pulse_against_reference(drive, d)
    assert p.eddy_j > 0.01 * p.supply_j and all(x["i"] > x["i_m"] for x in tops)
    # hand-worked: an ideal boost gives V_b int i dt, so it never falls
    assert p.boost.lowest_boost_v == pytest.approx(drive.supply.boost * (1 - drive.supply.boost_tolerance))
    simulated_set_pulse(path, drive, d, p.boost.threshold_code, tmp_path)
    driver_in_the_loop(path, d, tmp_path, monkeypatch)


def test_an_eddy_term_on_the_reset_winding_against_solve_ivp_and_the_driver_in_the_loop(tmp_path, monkeypatch):
    """500 ohm across the reset winding too: the reset pulse from the boost capacitor with its
    eddy term against scipy solve_ivp of Kirchhoff's laws written afresh
    (test_latch_boost_curves._reference: the branch behind the loop, the terminal current
    the sense reads) -- the catch's trip where the magnetising current (the field) reaches
    reset.current at the worst corner, the longest pulse, the boost's lowest, the energies
    (the eddy resistance's computed on its own) -- within 1e-5; the armature's travel to the
    open stop after the trip against solve_ivp (test_latch_armature.open_flight) within
    1e-5; simulate; the compiled driver in the loop -> check."""
    from test_latch_armature import open_flight
    from test_latch_boost_curves import _reference

    path, drive, d = eddy_valve(tmp_path, reset=500.0)
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = next(x for x in d.latch.pulses if x.name == "reset")
    b = p.boost
    # hand-worked: the threshold 1.2 x 0.5 A raised by the eddy share's bound 42 V / 500 ohm
    assert b.threshold_a == pytest.approx(1.2 * 0.5 + 42.0 / 500.0, rel=1e-12)
    ref = _reference(drive, "reset", p.worst_corner, False, b.trip_max_a, p.current_a)
    assert p.worst_time_s == pytest.approx(ref["time_to_current"], rel=1e-5)
    assert p.open_time_s == pytest.approx(ref["time_to_current"] + open_flight(drive), rel=1e-5)
    ref = _reference(drive, "reset", b.time_to_threshold_corner, False, b.trip_max_a, p.current_a)
    assert b.time_to_threshold_s == pytest.approx(ref["seen"], rel=1e-5)
    assert b.lowest_boost_v == pytest.approx(ref["v_c"], rel=1e-5)
    ref = _reference(drive, "reset", p.energy_corner, p.energy_corner.endswith("the boost at its highest"),
                     b.trip_max_a, p.current_a)
    for key in ("supply_j", "copper_j", "freewheel_j", "eddy_j"):
        assert getattr(p, key) == pytest.approx(ref[key], rel=1e-5), key
    assert p.eddy_j > 0.05 * p.supply_j
    r = run_cli("simulate", str(path), "--supply", "9", "--coil-temp", "20", "--csv", str(tmp_path / "r.csv"))
    assert r.returncode == 0, r.stderr
    assert np.max(np.genfromtxt(tmp_path / "r.csv", delimiter=",", names=True)["reset_current_a"]) > b.threshold_a
    driver_in_the_loop(path, d, tmp_path, monkeypatch)
