"""Split decay with an eddy-current term: the hold through the slow path (diode + bypass
switch), the release through the fast one (diode + Zener), the bypass opening at or
before the final turn-off (a later bypass stays refused in one line).

Reference: ngspice (batch transient) of tests/test_split_decay.py's circuit (a real
bypass switch across the Zener on its own gate) with tests/test_eddy_ngspice.py's eddy
resistor across the inductor and the 0 V ammeter ``VLM`` in its magnetising branch: the
hold's mean terminal current, its magnetising orbit and the diode's and bypass switch's
powers, and the flux's release to the drop-out current through the fast path.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.evaluate import release_figures
from coildrive.model.circuit import loop
from coildrive.model.eddy import EddyCoil
from coildrive.model.losses import hold_losses
from coildrive.model.pwm import pwm_steady_state
from test_eddy_coil import _example_drive, check_synthetic
from test_eddy_ngspice import R_EDDY, _eddy_netlist

SPLIT = EXAMPLES / "wash-valve-split-24v.toml"


def _split_eddy(tmp_path, lead=None):
    path = _example_drive(tmp_path, f'eddy_resistance = "{R_EDDY} ohm"', SPLIT)
    if lead is not None:
        path.write_text(path.read_text().replace('bypass_lead = "2 us"', f'bypass_lead = "{lead}"'))
    return path


def test_a_late_bypass_is_refused_in_one_line(tmp_path):
    r = run_cli("design", str(_split_eddy(tmp_path, "-5 us")))
    line = r.stderr.strip()
    assert r.returncode == 2 and "\n" not in line and "freewheel.bypass_lead" in line, line
    assert "eddy" in line and "not supported" in line, line


def test_design_and_simulate_take_both_paths(tmp_path):
    """design --json names both paths and the eddy figures of the fast release; simulate
    writes the bypass column (open from the reported time on) beside the magnetising
    current, and the switch sits at the fast path's voltage after the final turn-off."""
    path = _split_eddy(tmp_path)
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    assert doc["split_decay"] is not None and doc["eddy"] is not None
    fw = load_drive(path).freewheel
    # the release's block current is the fast path's V_off / R_e (the slow path's is ~40x less)
    assert doc["eddy"]["block_current_a"] >= 0.95 * (fw.diode_drop + fw.zener_voltage) / R_EDDY
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "60", "--hold-time", "1 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    a = np.genfromtxt(csv, delimiter=",", names=True)
    assert {"bypass_on", "magnetising_current_a"} <= set(a.dtype.names)
    k = int(np.flatnonzero(np.diff(a["bypass_on"]) != 0)[0]) + 1
    assert np.all(a["bypass_on"][:k] == 1) and np.all(a["bypass_on"][k:] == 0)
    assert a["switch_on"][k] == 1, "the bypass opens inside the last on-time (lead 2 us)"
    t_off = a["time_s"][np.flatnonzero(a["switch_on"] == 1)[-1]]
    assert a["time_s"][k] == pytest.approx(t_off - 2e-6, abs=2e-9)
    # after the turn-off, while the fast path conducts: V_bus + V_diode + V_Zener + ...
    after = (a["time_s"] > t_off + 1e-6) & (a["current_a"] > 1e-3)
    assert np.all(a["switch_voltage_v"][after] > 24.0 + fw.diode_drop + 0.99 * fw.zener_voltage)


@pytest.mark.ngspice
def test_split_decay_with_eddy_matches_ngspice(tmp_path):
    from ngspice_run import run as _run
    from test_split_decay import split_netlist

    drive = load_drive(_split_eddy(tmp_path))
    supply, temp = 24.0, 70.0
    d = design(drive)
    duty, f = d.hold.duty, d.hold.frequency_hz
    lp = loop(drive, supply, temp)
    fast = loop(drive, supply, temp, path="release")
    assert isinstance(lp.inductance, EddyCoil) and lp.bypassed
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    loss = hold_losses(drive, lp, ss, f)
    t_drop, t_zero, _, _ = release_figures(drive, lp, fast, ss.i_max)
    assert float(t_drop) > float(t_zero), "precondition: the flux outlasts the terminal current"
    text, (t_cut, step) = split_netlist(drive, supply, temp, duty, f, t_drop)
    period = 1.0 / f
    t0 = float(text.split("meas tran istart FIND i(VM) AT=")[1].split("\n")[0])
    extra = [f"meas tran mstart FIND i(VLM) AT={t0!r}",
             f"meas tran mopen FIND i(VLM) AT={t0 + duty * period - 1e-9!r}"]
    # the drop-out is the flux's: the magnetising current, not the terminal one
    text = text.replace("meas tran tdrop WHEN i(VM)=", "meas tran tdrop WHEN i(VLM)=")
    text = text.replace("quit 0", "\n".join(extra + ["quit 0"]))
    res = _run(tmp_path, "split-eddy", _eddy_netlist(text, None, False))
    t_spice = res["tdrop"] - t_cut
    print(f"split decay + eddy vs ngspice: mean {float(ss.mean):.6e}/{res['iavg']:.6e} A, magnetising "
          f"{float(ss.i_min):.6e}/{res['mstart']:.6e} .. {float(ss.i_max):.6e}/{res['mopen']:.6e} A, "
          f"diode {float(loss.diode):.5e}/{res['pdiode']:.5e} W, bypass {float(loss.bypass):.5e}/"
          f"{res['pbypass']:.5e} W, drop-out {float(t_drop):.6e}/{t_spice:.6e} s")
    # ngspice, last hold period (the slow path): 1 % each, the powers 2 % / 3 % as
    # tests/test_split_decay.py allows for the plain coil; the Zener takes nothing
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01)
    assert res["mstart"] == pytest.approx(float(ss.i_min), rel=0.01)
    assert res["mopen"] == pytest.approx(float(ss.i_max), rel=0.01)
    assert res["pdiode"] == pytest.approx(float(loss.diode), rel=0.02)
    assert res["pbypass"] == pytest.approx(float(loss.bypass), rel=0.03)
    assert abs(res["pzener"]) < 1e-3 * float(loss.diode)
    # the release through the fast path, then R_e alone: the flux's drop-out time 1 % + a step
    assert abs(t_spice - float(t_drop)) <= 0.01 * float(t_drop) + step, (t_spice, float(t_drop))


def test_check_passes_a_capture_of_the_split_eddy_coil(tmp_path):
    """A synthetic capture (the virtual device's samples) of the split-decay eddy coil
    checks against its own design (plumbing: the device shares the model)."""
    check_synthetic(tmp_path, _split_eddy(tmp_path))
