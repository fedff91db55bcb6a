"""Split decay with an eddy-current term: the hold through the slow path (diode + bypass
switch), the release through the fast one (diode + Zener), the bypass opening before
the final turn-off or after it (a late bypass, ``bypass_lead < 0``: the release starts
through the slow path, which blocks at its own ``V_d / R_e``; the flux decays through
``R_e`` alone wherever a path has stopped conducting).

Reference: ngspice (batch transient) of tests/test_split_decay.py's circuit (a real
bypass switch across the Zener on its own gate) with tests/test_eddy_ngspice.py's eddy
resistor across the inductor and the 0 V ammeter ``VLM`` in its magnetising branch: the
hold's mean terminal current, its magnetising orbit and the diode's and bypass switch's
powers, and the flux's release to the drop-out current through the fast path; with a
late bypass also the moment the terminal current stops and the energies of the Zener
and the eddy resistor over the release. A saturating branch's late release (no ngspice
netlist here) against scipy's ``solve_ivp`` (Radau) on the two paths written afresh.
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
from coildrive.model import eddy
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


def test_a_late_bypass_with_an_armature_designs(tmp_path):
    """No longer refused: the moments are checked against scipy in
    tests/test_eddy_armature_paths.py; here the file runs through design."""
    path = _split_eddy(tmp_path, "-5 us")
    path.write_text(path.read_text() + "\n[armature]\ninductance_open = \"69 mH\"\ninductance_closed = "
                    "\"90 mH\"\nstroke = \"0.5 mm\"\nmass = \"5 g\"\nspring_preload = \"2 N\"\n"
                    "spring_rate = \"1 N/mm\"\n")
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1) and not r.stderr, r.stderr   # 1: the toy plunger fails checks
    doc = json.loads(r.stdout)
    assert doc["release"]["time_s"] > 0 and doc["armature"]["opened_corners"] > 0
    assert any(c["name"] == "bypass_timing" and not c["ok"] for c in doc["checks"]), "the late bypass"


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


#: Late bypasses: opening on a flux above the fast path's block current (the terminal
#: current steps down and flows on through the Zener), and on one below it (the terminal
#: current steps to zero at the opening; the flux dies through R_e).
LAGS = {"fast-conducts": 50e-6, "fast-blocked": 2e-3}


def _late(tmp_path, lag):
    path = _split_eddy(tmp_path, f"{-lag * 1e6:g} us")
    drive = load_drive(path)
    supply, temp = 24.0, 70.0
    d = design(drive)
    lp, fast = loop(drive, supply, temp), loop(drive, supply, temp, path="release")
    ss = pwm_steady_state(d.hold.duty, d.hold.frequency_hz, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    return drive, d, lp, fast, ss


@pytest.mark.ngspice
@pytest.mark.parametrize("case", list(LAGS))
def test_late_bypass_with_eddy_matches_ngspice(tmp_path, case):
    """The split-decay circuit with the bypass opening ``lag`` s after the final turn-off:
    the flux's drop-out, the moment the terminal current stops, and the energies the
    Zener and the eddy resistor take over the release, 1 % (times also a step)."""
    from ngspice_run import run as _run
    from test_eddy_ngspice import I_LOW
    from test_split_decay import split_netlist

    lag = LAGS[case]
    drive, d, lp, fast, ss = _late(tmp_path, lag)
    t_drop, t_zero, energy, i_open = (float(x) for x in release_figures(drive, lp, fast, ss.i_max))
    late = eddy.late_release(ss.i_max, lag, (lp.r_off, lp.v_off), (fast.r_off, fast.v_off),
                             drive.release.current, lp.inductance)
    above = i_open > float(fast.v_off) / R_EDDY
    assert above == (case == "fast-conducts") and t_drop > t_zero, "precondition"
    # the run ends shortly after the drop-out (once everything has blocked, ngspice's
    # step control stalls on the floating coil node some 0.7 ms later)
    end = max(t_drop, lag)
    text, (t_cut, step) = split_netlist(drive, 24.0, 70.0, d.hold.duty, d.hold.frequency_hz, 0.6 * end + 1e-4)
    t_w = t_cut + 1.1 * end + 1e-4   # the energies to here, the field left then added
    text = text.replace("meas tran tdrop WHEN i(VM)=", "meas tran tdrop WHEN i(VLM)=")
    extra = [f"let pe = v(n1,n2) * v(n1,n2) / {R_EDDY!r}",
             f"meas tran tzero WHEN i(VM)={I_LOW!r} FALL=1 TD={t_cut!r}",
             f"meas tran ezener INTEG pz from={t_cut!r} to={t_w!r}",
             f"meas tran eeddy INTEG pe from={t_cut!r} to={t_w!r}", f"meas tran mend FIND i(VLM) AT={t_w!r}",
             f"meas tran moff FIND i(VLM) AT={t_cut!r}"]
    text = text.replace("quit 0", "\n".join(extra + ["quit 0"]))
    res = _run(tmp_path, "split-eddy-late", _eddy_netlist(text, None, False))
    # the model's energies from the flux ngspice turned off at (its hold settles to ~1e-3)
    i_off = res["moff"]
    late = eddy.late_release(i_off, lag, (lp.r_off, lp.v_off), (fast.r_off, fast.v_off),
                             drive.release.current, lp.inductance)
    w_zener = float(fast.fast(drive)) * float(late.fast[0])
    # after the terminal current has stopped the whole field left goes into R_e
    w_eddy = res["eeddy"] + float(eddy.stored_energy(lp.inductance.magnetising, res["mend"]))
    print(f"late bypass ({case}) + eddy vs ngspice: drop {float(late.drop_time):.6e}/{res['tdrop'] - t_cut:.6e} s, "
          f"zero {float(late.zero_time):.6e}/{res['tzero'] - t_cut:.6e} s, Zener {w_zener:.6e}/{res['ezener']:.6e} J, "
          f"eddy {float(late.eddy_energy):.6e}/{w_eddy:.6e} J")
    assert i_off == pytest.approx(float(ss.i_max), rel=0.01)
    for got, want in ((res["tdrop"] - t_cut, float(late.drop_time)), (res["tzero"] - t_cut, float(late.zero_time))):
        assert abs(got - want) <= 0.01 * want + step, (got, want)
    if case == "fast-conducts":
        assert res["ezener"] == pytest.approx(w_zener, rel=0.01)
    else:   # the Zener never conducts: the flux is below its block current when the bypass opens
        assert abs(res["ezener"]) < 1e-3 * float(late.eddy_energy) and w_zener == 0.0
    assert w_eddy == pytest.approx(float(late.eddy_energy), rel=0.01)


@pytest.mark.parametrize("case", list(LAGS))
def test_late_release_of_a_saturating_branch_matches_scipy(case):
    """A curve as the magnetising branch: scipy's Radau on ``L_d(i_m) di_m/dt = R_e (i -
    i_m)`` with ``i = max(0, (R_e i_m - V_off) / (R + R_e))`` through the slow path for
    the lag, then the fast path: the flux's drop-out, the terminal current's stop, its
    charge through each path and the eddy energy, 1e-6; and the energy balance of the
    release (the first law: the field at the turn-off, ``int i dpsi``, is what the two
    paths and ``R_e`` take), 1e-9."""
    from scipy.integrate import solve_ivp

    from coildrive.model import flux

    i_tab = np.linspace(0.0, 1.5, 16)
    curve = flux.curve(tuple(i_tab), tuple(0.04 * np.tanh(i_tab / 0.35) + 0.005 * i_tab))
    e = EddyCoil(flux.FluxCoil(curve, np.array(1.0)), np.array(R_EDDY))
    slow, fast, i_off, drop = (33.0, 0.8), (33.0, 34.0), 0.6, 0.05
    lag = {"fast-conducts": 30e-6, "fast-blocked": 6e-3}[case]
    late = eddy.late_release(i_off, lag, slow, fast, drop, e)
    assert (float(late.open_current) > fast[1] / R_EDDY) == (case == "fast-conducts"), "precondition"
    events = {}

    def rhs(t, y, path):
        r, v = path
        i = max(R_EDDY * y[0] - v, 0.0) / (r + R_EDDY)
        return [R_EDDY * (i - y[0]) / float(curve.incremental(max(y[0], 0.0))), i,
                R_EDDY * (i - y[0]) ** 2]

    def drop_ev(t, y, path):
        return y[0] - drop
    t_end = 0.02
    y, t0 = [i_off, 0.0, 0.0], 0.0
    charges = []
    for path, t1 in ((slow, lag), (fast, t_end)):
        zero = (lambda t, y, p=path: R_EDDY * y[0] - p[1])
        zero.direction = -1
        sol = solve_ivp(rhs, (t0, t1), y, args=(path,), method="Radau", rtol=1e-11, atol=1e-14,
                        events=[drop_ev, zero], max_step=(t1 - t0) / 20)
        for name, ev in zip(("drop", "zero"), sol.t_events):
            if ev.size and name not in events:
                events[name] = float(ev[0])
        charges.append(float(sol.y[1, -1]) - y[1])
        y, t0 = list(sol.y[:, -1]), t1
    t_zero = events.get("zero", lag)
    assert float(late.drop_time) == pytest.approx(events["drop"], rel=1e-6)
    assert float(late.zero_time) == pytest.approx(min(t_zero, lag) if case == "fast-blocked" else t_zero, rel=1e-6)
    assert float(late.slow[0]) == pytest.approx(charges[0], rel=1e-6)
    assert float(late.fast[0]) == pytest.approx(charges[1], rel=1e-6, abs=1e-12)
    assert float(late.eddy_energy) == pytest.approx(y[2], rel=1e-6)
    # the first law: the field at the turn-off ends in the two paths' elements and R_e
    (q1, s1), (q2, s2) = late.slow, late.fast
    spent = slow[1] * q1 + slow[0] * s1 + fast[1] * q2 + fast[0] * s2 + late.eddy_energy
    assert float(spent) == pytest.approx(float(eddy.stored_energy(e.magnetising, i_off)), rel=1e-9)


def test_design_simulate_and_check_a_late_bypass(tmp_path):
    """design --json: the release follows the late bypass (later than a bypass open at the
    turn-off); simulate opens the bypass -lead s after the final turn-off, the terminal
    current steps down there at the same magnetising current, and its zero event is the
    design's at that point; a synthetic capture checks against its own design (plumbing)."""
    lag = LAGS["fast-conducts"]
    path = _split_eddy(tmp_path, f"{-lag * 1e6:g} us")
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    assert doc["split_decay"]["lag_counts"] > 0 and doc["eddy"]["release_eddy_energy_j"] > 0
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "70", "--hold-time", "1 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    a = np.genfromtxt(csv, delimiter=",", names=True)
    t, i, im = a["time_s"], a["current_a"], a["magnetising_current_a"]
    t_off = t[np.flatnonzero(a["switch_on"] == 1)[-1]]
    k = int(np.flatnonzero(np.diff(a["bypass_on"]) != 0)[0]) + 1
    assert t[k] == pytest.approx(t_off + lag, abs=2e-9) and np.all(a["bypass_on"][k:] == 0)
    # the rows at the opening and an edge after it: the same flux, the terminal current down
    assert t[k + 1] - t[k] < 2e-9 and im[k + 1] == pytest.approx(im[k], rel=1e-9) and i[k + 1] < i[k]
    drive = load_drive(path)
    lp, fast = loop(drive, 24.0, 70.0), loop(drive, 24.0, 70.0, path="release")
    _, t_zero, _, _ = release_figures(drive, lp, fast, np.array(im[np.flatnonzero(a["switch_on"] == 1)[-1]]))
    stop = t[np.flatnonzero(i > 0)[-1] + 1] - t_off
    assert stop == pytest.approx(float(t_zero), rel=1e-3)
    check_synthetic(tmp_path, path)
