"""The eddy-current term (a resistance across the magnetising branch) against ngspice.

Reference: ngspice (batch mode), the netlists of tests/test_reference_ngspice.py (real
topology, piecewise-linear one-way devices, the switch as a gated conductance) with a
resistor ``REDDY`` across the coil's magnetising branch and a 0 V source ``VLM`` in series
with that branch (an ammeter: ``i(VLM)`` is the magnetising current, ``i(VM)`` the
terminal current the sense resistor carries). The magnetising branch is the linear
inductor, or the flux-controlled one of tests/test_flux_ngspice.py (a G source
integrating the branch voltage into a 1 F capacitor, a B source ``I = pwl(V(phi), ...)``;
ngspice manual ch. 4 and 5.1, from memory). ngspice knows nothing of the model's
Thevenin reduction or quadrature: it solves the circuit by its own time stepping.

Tolerances: 1 % (times also one time step), measured agreement printed (-s).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from circuit_reference import POINT, parts, reference_drive
from coildrive.config import load_drive
from coildrive.model import eddy
from coildrive.model.circuit import loop
from coildrive.model.pwm import duty_for_mean, pwm_steady_state
from coildrive.model.rl import decay_time, rise_current, rise_time
from test_flux_ngspice import _flux_drive, _flux_netlist
from test_reference_ngspice import _netlist, _run

pytestmark = pytest.mark.ngspice

#: The eddy resistance of the tests: the switch-on step V/(R + R_e) is about a tenth of
#: V/R, and with the Zener path the flux outlasts the terminal current.
R_EDDY = 300.0
#: Where the terminal current counts as stopped (ngspice's blocked path leaks ~20 uA).
I_LOW = 1e-3


def _with_eddy(drive_path, r_e=R_EDDY):
    text = drive_path.read_text().replace("inductance_tolerance = 0.15",
                                          f'inductance_tolerance = 0.15\neddy_resistance = "{r_e} ohm"')
    drive_path.write_text(text)
    return load_drive(drive_path)


def _drive(tmp_path, curve: bool, **kw):
    if curve:
        _flux_drive(tmp_path, "zener", "coil", **kw)
    else:
        reference_drive(tmp_path, "zener", "coil", **kw)
    drive = _with_eddy(tmp_path / "ref-drive.toml")
    assert drive.coil.eddy_resistance == R_EDDY, "precondition: the drive has the eddy term"
    return drive


def _eddy_netlist(text: str, lp, curve: bool) -> str:
    """Add the eddy resistor and the magnetising ammeter to ``text`` (the flux-controlled
    branch already swapped in for a curve)."""
    if curve:
        text = _flux_netlist(text, _as_plain(lp))
    lines = text.splitlines()
    k = next(n for n, l in enumerate(lines) if l.startswith("RCOIL "))
    out = lines[:k + 1] + [f"REDDY n1 n2 {R_EDDY!r}", "VLM n1 nm DC 0"]
    for l in lines[k + 1:]:
        if l.startswith("LCOIL ") or l.startswith("BCOIL "):
            l = l.replace("n1 n2", "nm n2", 1)
        out.append(l)
    return "\n".join(out) + "\n"


class _as_plain:
    """The loop's magnetising branch as ``_flux_netlist`` reads it."""

    def __init__(self, lp):
        self.inductance = lp.inductance.magnetising


@pytest.mark.parametrize("curve", [False, True], ids=["linear", "curve"])
def test_rise_and_release_match_ngspice(tmp_path, curve):
    drive = _drive(tmp_path, curve)
    lp = loop(drive, **POINT)
    p = parts(drive, **POINT)
    e = lp.inductance
    v, r = float(lp.v_on), float(lp.r_on)
    i_pull = drive.pull_in.current
    t_model = float(rise_time(i_pull, 0.0, v, r, e))
    assert math.isfinite(t_model)
    t_on = 1.5 * t_model
    i_off = float(rise_current(t_on, 0.0, v, r, e))
    drop = drive.release.current
    t_drop = float(decay_time(drop, i_off, lp.r_off, lp.v_off, e))
    t_zero = float(decay_time(0.0, i_off, lp.r_off, lp.v_off, e))
    # ngspice's blocked freewheel leaks (its bleed resistor and the knees' 1 nS): the
    # terminal current's end is read where it falls through I_LOW, the model's there too
    i_low_m = (I_LOW * (float(lp.r_off) + R_EDDY) + float(lp.v_off)) / R_EDDY
    t_low = float(decay_time(i_low_m, i_off, lp.r_off, lp.v_off, e))
    assert t_low <= t_zero
    ib = float(eddy.block_current(lp.v_off, R_EDDY))
    assert drop < ib and t_drop > t_zero, "precondition: the flux outlasts the terminal current"
    step = t_model / 2000
    probes = [0.02 * t_model, 0.25 * t_model, 0.5 * t_model]
    measures = [f"meas tran tpull WHEN i(VLM)={i_pull!r} RISE=1",
                f"meas tran tdrop WHEN i(VLM)={drop!r} FALL=1",
                f"meas tran tzero WHEN i(VM)={I_LOW!r} FALL=1"]
    measures += [f"meas tran i{k} FIND i(VM) AT={t!r}" for k, t in enumerate(probes)]
    tstop = t_on + 1.3 * t_drop
    text = _eddy_netlist(_netlist(p, "eddy rise", t_on, 10 * tstop, tstop, step, measures), lp, curve)
    res = _run(tmp_path, "eddy-rise", text)
    print(f"eddy ({'curve' if curve else 'linear'}) vs ngspice: pull-in {t_model:.6e}/{res['tpull']:.6e} s, "
          f"terminal below {I_LOW} A {t_low:.6e}/{res['tzero'] - t_on:.6e} s, drop-out (flux) "
          f"{t_drop:.6e}/{res['tdrop'] - t_on:.6e} s")
    # ngspice: the magnetising current reaches the pull-in current, 1 % plus one step
    assert abs(res["tpull"] - t_model) <= 0.01 * t_model + step, (t_model, res["tpull"])
    # ngspice: the terminal current (the step V/(R + R_e), then the rise), 1 %
    for k, t in enumerate(probes):
        i_m = rise_current(t, 0.0, v, r, e)
        i_t = float(eddy.terminal(i_m, v, r, R_EDDY))
        assert res[f"i{k}"] == pytest.approx(i_t, rel=0.01), (t, i_t, res[f"i{k}"])
    # ngspice: the terminal current stops first, the flux reaches drop-out later; 1 % + a step
    assert abs(res["tzero"] - t_on - t_low) <= 0.01 * t_low + step, (t_low, res["tzero"] - t_on)
    assert abs(res["tdrop"] - t_on - t_drop) <= 0.01 * t_drop + step, (t_drop, res["tdrop"] - t_on)


@pytest.mark.parametrize("curve, target, points", [(False, 0.30, 100), (True, 0.30, 100),
                                                   (False, 0.10, 100), (True, 0.10, 100)],
                         ids=["linear", "curve", "linear-blocked", "curve-blocked"])
def test_pwm_orbit_matches_ngspice(tmp_path, curve, target, points):
    drive = _drive(tmp_path, curve)
    lp = loop(drive, **POINT)
    p = parts(drive, **POINT)
    f = drive.hold.frequency
    period = 1.0 / f
    e = lp.inductance
    duty = float(duty_for_mean(target, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, e))
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, e)
    ib = float(eddy.block_current(lp.v_off, R_EDDY))
    assert bool(ss.dcm) == (float(ss.i_min) < ib), "precondition: blocked exactly below V_off / R_e"
    tau = float(e.small_signal() / min(float(lp.r_on), float(lp.r_off)))
    tstop = max(4, math.ceil(12.0 * tau * f)) * period
    t0 = tstop - period
    t_open = t0 + duty * period - 1e-9
    window = f"from={t0!r} to={tstop!r}"
    measures = [f"meas tran iavg AVG i(VM) {window}", f"meas tran imax MAX i(VM) {window}",
                f"meas tran imin MIN i(VM) {window}", f"meas tran mopen FIND i(VLM) AT={t_open!r}",
                f"meas tran mstart FIND i(VLM) AT={t0!r}"]
    step = period / points
    text = _eddy_netlist(_netlist(p, "eddy pwm", duty * period, period, tstop, step, measures), lp, curve)
    res = _run(tmp_path, "eddy-pwm", text)
    ripple = res["imax"] - res["imin"]
    print(f"eddy orbit ({'curve' if curve else 'linear'}, blocked {bool(ss.dcm)}) vs ngspice: mean "
          f"{float(ss.mean):.6e}/{res['iavg']:.6e} A, terminal ripple {float(ss.ripple):.6e}/"
          f"{ripple:.6e} A, magnetising {float(ss.i_min):.6e}/{res['mstart']:.6e} .. "
          f"{float(ss.i_max):.6e}/{res['mopen']:.6e} A")
    # ngspice transient, last period after settling: 1 % each
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01), (float(ss.mean), res["iavg"])
    assert ripple == pytest.approx(float(ss.ripple), rel=0.01), (float(ss.ripple), ripple)
    assert res["mopen"] == pytest.approx(float(ss.i_max), rel=0.01), (float(ss.i_max), res["mopen"])
    assert res["mstart"] == pytest.approx(float(ss.i_min), rel=0.01), (float(ss.i_min), res["mstart"])
