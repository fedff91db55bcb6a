"""Hold losses in the design, power ratings, and split decay end to end.

References named beside each check:
- scipy.integrate.solve_ivp (LSODA) integrating the switched circuit written out from
  Kirchhoff's voltage law (tests/circuit_reference.py, plus the bypassed slow path by
  hand here), with the charge and the square of the current as extra states for the
  per-period element energies;
- ngspice (batch transient) of the split-decay circuit with a real bypass switch;
- conservation of energy over one steady-state period (the inductor's energy repeats):
  energy from the supply = copper + sense + switch + freewheel elements;
- the closed-form RL decay ``i(t) = (i0 + V/R) exp(-t R/L) - V/R`` of a first-order
  circuit (any circuits textbook, e.g. Hayt & Kemmerly, "Engineering Circuit Analysis",
  the source-free RL circuit with a constant source), written out here;
- gcc -std=c99 -Wall -Wextra -Werror -pedantic for the generated header.
"""

from __future__ import annotations

import json
import math
import subprocess
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from typer.testing import CliRunner

from circuit_reference import iec60028_resistance, parts
from coildrive.config import load_drive
from coildrive.design import firmware_setting
from coildrive.design.corners import corner_grid
from coildrive.design import design
from coildrive.model.circuit import loop
from coildrive.model.losses import hold_losses
from coildrive.model.pwm import pwm_steady_state
from coildrive.cli import app
from conftest import EXAMPLES, drive_path, json_error, require_tool, run_cli

SPLIT = EXAMPLES / "wash-valve-split-24v.toml"
runner = CliRunner()


def _drive_file(tmp_path: Path, base: str, extra: str, name: str = "drive") -> Path:
    """``base`` example with ``extra`` TOML appended (sections it does not have yet)."""
    text = drive_path(base).read_text()
    path = tmp_path / f"{name}.toml"
    path.write_text(text + "\n" + extra)
    return path


def _json(*args: str) -> tuple[int, dict]:
    """``coildrive design ARGS --json`` in-process (typer's CliRunner): exit code, document."""
    r = runner.invoke(app, ["design", *args, "--json"])
    assert r.exit_code in (0, 1), r.output
    return r.exit_code, json.loads(r.stdout)


def _periodic_integrals(v_on, r_on, r_off, v_off, ind, duty, f):
    """Steady-state ``int i``, ``int i^2`` over one period's on and off segments, by
    scipy's LSODA alone: the fixed point of the period map (see :func:`_scipy_period`),
    then one period integrated with the charge and the square as extra states."""
    i0, _ = _scipy_period(v_on, r_on, v_off, r_off, ind, duty, f)
    period = 1.0 / f

    def seg(v, r, t, y0):
        def rhs(_t, y):
            return [(v - r * y[0]) / ind, y[0], y[0] ** 2]
        out = solve_ivp(rhs, (0, t), [y0, 0.0, 0.0], method="LSODA", rtol=1e-12, atol=1e-15)
        return out.y[:, -1]
    on = seg(v_on, r_on, duty * period, i0)
    off = seg(-v_off, r_off, (1 - duty) * period, on[0])
    return on[1], on[2], off[1], off[2]


def _check(doc: dict, name: str) -> dict:
    found = [c for c in doc["checks"] if c["name"] == name]
    assert len(found) == 1, f"check {name}: {[c['name'] for c in doc['checks']]}"
    return found[0]


def _corner_points(drive, doc):
    """Supply, coil temperature and the coil tolerance factors of every corner of the JSON
    (the factors from the corner's resistance and inductance: IEC 60028 at its temperature)."""
    c = drive.coil
    supply = np.array([k["supply_v"] for k in doc["corners"]])
    temps = np.array([k["coil_temp_c"] for k in doc["corners"]])
    r_nom = np.array([iec60028_resistance(c.resistance, c.reference_temp, t) for t in temps])
    rf = np.array([k["resistance_ohm"] for k in doc["corners"]]) / r_nom
    base = c.inductance if drive.armature is None else drive.armature.inductance_closed
    lf = np.array([k["inductance_h"] for k in doc["corners"]]) / base
    return supply, temps, rf, lf


def _corner_losses(drive, doc):
    """hold_losses at every corner of the design JSON: the corner grid's tolerance factors
    with the coil temperatures and the duty the design reports."""
    supply, temps, rf, lf = _corner_points(drive, doc)
    lp = loop(drive, supply, temps, rf, lf)
    f = doc["hold"]["frequency_hz"]
    duty = np.array([c["hold_duty"] for c in doc["corners"]])
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    return hold_losses(drive, lp, ss, f, drive.switch.rise_time, drive.switch.fall_time), lp, ss


# --------------------------------------------------------------------------- JSON keys
@pytest.mark.parametrize("example", ["zener-valve", "pinch-valve-48v", "door-latch-24v",
                                     "relay-12v", "wash-valve-split-24v"])
def test_design_json_hold_powers_equal_hold_losses(example):
    drive = load_drive(drive_path(example))
    _, doc = _json(str(drive_path(example)))
    loss, _, _ = _corner_losses(drive, doc)
    hold = doc["hold"]
    assert hold["freewheel_power_w"] == pytest.approx(float(np.max(loss.freewheel)), rel=1e-9)
    assert hold["switch_power_w"] == pytest.approx(float(np.max(loss.switch)), rel=1e-9)
    for name, watts in hold["freewheel_elements_w"].items():
        assert watts == pytest.approx(float(np.max(getattr(loss, name))), rel=1e-9), name
    assert set(hold["freewheel_elements_w"]) == {n for n, p in loss.elements().items() if np.any(p > 0)}
    np.testing.assert_allclose([c["freewheel_power_w"] for c in doc["corners"]], loss.freewheel, rtol=1e-9)
    np.testing.assert_allclose([c["switch_power_w"] for c in doc["corners"]],
                               np.broadcast_to(loss.switch, loss.freewheel.shape), rtol=1e-9)
    # conservation of energy per period at every corner: supply = every ideal loss
    np.testing.assert_allclose(loss.balance_error(), 0.0, atol=1e-9 * float(np.max(loss.supply)))


def test_report_shows_hold_powers_and_saving(demo_drive):
    r = runner.invoke(app, ["design", str(demo_drive)])  # the demo has split decay fitted
    assert r.exit_code == 0, r.output
    for text in ("hold freewheel power", "hold switch power", "split decay"):
        assert text in r.stdout, text
    r = runner.invoke(app, ["design", str(EXAMPLES / "reagent-valve-zener-24v.toml")])
    assert r.exit_code == 0, r.output  # the same valve without it: what it would save
    assert "split decay would save" in r.stdout


# --------------------------------------------------------------------------- issue scenarios
def _worst_freewheel_corner(path: Path):
    """Design JSON of ``path``, its worst freewheel-power corner's element values, and
    scipy's steady-state integrals there (``int i``, ``int i^2`` on and off, one period)."""
    drive = load_drive(path)
    _, doc = _json(str(path))
    k = int(np.argmax([c["freewheel_power_w"] for c in doc["corners"]]))
    c = doc["corners"][k]
    _, _, rf, lf = _corner_points(drive, doc)
    p = parts(drive, c["supply_v"], c["coil_temp_c"], rf[k], lf[k])
    v_on, r_on = p.on()
    v_fw, r_off = p.off()           # L di/dt = v_fw - r_off i while freewheeling
    f = doc["hold"]["frequency_hz"]
    # scipy (LSODA) periodic steady state of the element-level circuit
    return doc, p, f, _periodic_integrals(v_on, r_on, r_off, -v_fw, p.inductance, c["hold_duty"], f)


def test_zener_36v_valve_at_25khz_takes_several_watts(tmp_path):
    """The issue's invented scenario: a 24 V valve on a 36 V Zener holding at 25 kHz."""
    path = _drive_file(tmp_path, "zener-valve", '[freewheel]\nzener_voltage = "36 V"\n')
    doc, p, f, (q_on, s_on, q_off, s_off) = _worst_freewheel_corner(path)
    zener = doc["hold"]["freewheel_elements_w"]["zener"]
    assert zener > 3.0, f"only {zener} W in the Zener"
    assert zener == pytest.approx(p.v_zener * q_off * f, rel=1e-5), "Zener power vs scipy"
    assert doc["hold"]["freewheel_elements_w"]["diode"] == pytest.approx(p.v_diode * q_off * f, rel=1e-5)
    # conservation of energy over one period (scipy's integrals): supply = copper + sense +
    # switch + Zener + diode
    supply = p.v_bus * q_on * f
    losses = ((p.r_coil + p.r_sense) * (s_on + s_off) * f + p.r_switch * s_on * f
              + (p.v_diode + p.v_zener) * q_off * f)
    assert supply == pytest.approx(losses, rel=1e-5), "energy balance per period (scipy)"


def test_48v_bus_75v_clamp_takes_over_ten_watts():
    """The issue's second invented scenario: a 48 V bus with a 75 V clamp across the switch."""
    doc, p, f, (q_on, s_on, q_off, s_off) = _worst_freewheel_corner(EXAMPLES / "pinch-valve-48v.toml")
    clamp = doc["hold"]["freewheel_elements_w"]["clamp"]
    assert clamp > 10.0, f"only {clamp} W in the clamp"
    assert clamp == pytest.approx(p.v_clamp * q_off * f, rel=1e-5), "clamp power vs scipy"
    # energy balance: the supply also drives the decay through the clamp
    supply = p.v_bus * (q_on + q_off) * f
    r_sense_off = p.r_sense if p.sense_in_coil_path else 0.0
    losses = (p.r_coil * (s_on + s_off) + p.r_sense * s_on + r_sense_off * s_off
              + p.r_switch * s_on + p.v_clamp * q_off) * f
    assert supply == pytest.approx(losses, rel=1e-5), "energy balance per period (scipy)"
    assert doc["hold"]["split_decay_saving"]["freewheel_power_w"] > 10.0


# --------------------------------------------------------------------------- ratings
def test_rating_fails_warns_and_passes(tmp_path):
    _, doc = _json(str(drive_path("reagent-valve-zener-24v")))
    warn = _check(doc, "zener_power")
    assert warn["severity"] == "warning" and not warn["ok"] and "zener_power_rating" in warn["detail"]
    zener = doc["hold"]["freewheel_elements_w"]["zener"]      # about 4.1 W
    low = _drive_file(tmp_path, "reagent-valve-zener-24v", '[freewheel]\nzener_power_rating = "5 W"\n', "low")
    rc, doc = _json(str(low))
    c = _check(doc, "zener_power")
    assert rc == 1 and not doc["ok"] and c["severity"] == "error" and not c["ok"], c
    assert "50% of the 5 W rating" in c["detail"] and "common practice" in c["detail"]
    assert f"{zener:.3g} W" in c["detail"]
    high = _drive_file(tmp_path, "reagent-valve-zener-24v",
                       '[freewheel]\nzener_power_rating = "10 W"\ndiode_power_rating = "1 W"\n'
                       '[switch]\npower_rating = "2 W"\n', "high")
    rc, doc = _json(str(high))
    assert rc == 0 and _check(doc, "zener_power")["ok"] and _check(doc, "diode_power")["ok"]
    assert _check(doc, "switch_power")["ok"] and _check(doc, "switch_power")["severity"] == "error"
    # a derating of 0.9 makes 5 W enough for 4.1 W
    derated = _drive_file(tmp_path, "reagent-valve-zener-24v",
                          '[freewheel]\nzener_power_rating = "5 W"\npower_derating = 0.9\n', "derated")
    rc, doc = _json(str(derated))
    assert _check(doc, "zener_power")["ok"] and "90% of the 5 W rating" in _check(doc, "zener_power")["detail"]


@pytest.mark.parametrize("extra, key", [
    ('[freewheel]\nzener_power_rating = "3 V"\n', "freewheel.zener_power_rating"),
    ('[freewheel]\nzener_power = "3 W"\n', "freewheel.zener_power"),
    ('[freewheel]\npower_derating = 1.5\n', "freewheel.power_derating"),
    ('[switch]\npower_rating = "-1 W"\n', "switch.power_rating"),
    ('[freewheel]\nbypass_lead = "2 us"\n', "freewheel.bypass_lead"),
    ('[freewheel]\nsplit_decay = "yes"\n', "freewheel.split_decay"),
])
def test_bad_rating_and_split_keys_exit_2(tmp_path, extra, key):
    path = _drive_file(tmp_path, "zener-valve", extra)
    r = runner.invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 2, r.output
    json_error(r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and key in lines[0] and "Traceback" not in r.stderr, r.stderr


def test_bad_rating_exit_2_as_a_process(tmp_path):
    path = _drive_file(tmp_path, "zener-valve", '[freewheel]\nzener_power_rating = "3 V"\n')
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 2 and "Traceback" not in r.stderr
    json_error(r.stdout, r.stderr)
    assert r.stderr.strip() == (f"coildrive: {path}: freewheel.zener_power_rating: '3 V' is a voltage, "
                                "expected a power in W, e.g. \"2 W\""), r.stderr


# Split decay with an [armature] or a current-mode hold: tests/test_split_decay_more.py


def test_split_clamp_needs_a_diode_drop(tmp_path):
    path = _drive_file(tmp_path, "pinch-valve-48v", '[freewheel]\nsplit_decay = true\n')
    r = runner.invoke(app, ["design", str(path)])
    assert r.exit_code == 2 and "freewheel.diode_drop" in r.stderr, r.output


# --------------------------------------------------------------------------- split decay
def test_saving_equals_a_split_design(tmp_path):
    """The saving the design reports is what a design with split decay gets."""
    _, plain = _json(str(drive_path("zener-valve")))
    sv = plain["hold"]["split_decay_saving"]
    path = _drive_file(tmp_path, "zener-valve", '[freewheel]\nsplit_decay = true\nbypass_lead = "1 us"\n')
    _, split = _json(str(path))
    assert split["hold"]["split_decay_saving"] is None
    assert split["hold"]["duty"] == pytest.approx(sv["duty_split"], abs=1e-12)
    assert split["hold"]["freewheel_power_w"] == pytest.approx(sv["freewheel_power_split_w"], rel=1e-9)
    assert split["hold"]["ripple_a"] == pytest.approx(sv["ripple_split_a"], rel=1e-9)
    assert sv["freewheel_power_w"] == pytest.approx(
        plain["hold"]["freewheel_power_w"] - split["hold"]["freewheel_power_w"], rel=1e-9)
    assert sv["duty_change"] < 0 and sv["ripple_change_a"] < 0, "slow decay: lower duty, less ripple"
    assert "zener" not in split["hold"]["freewheel_elements_w"]
    # the release still goes through the Zener: the same switch voltage and time as before
    # (same supply range and hold top? no: the duty changed, so compare the switch voltage
    # law instead: V_bus + V_d + V_z at the highest supply for the release)
    fw = load_drive(drive_path("zener-valve")).freewheel
    assert split["release"]["peak_switch_voltage_v"] == pytest.approx(28.0 + fw.diode_drop + fw.zener_voltage)


def _slow_fast_parts(drive, supply, temp, r_factor=1.0, l_factor=1.0):
    """(V_on, R_on), slow (V_off, R_off) and fast (V_off, R_off) of the split circuit at a
    point, from the element values: the bypass shorts the Zener (KVL by hand)."""
    p = parts(drive, supply, temp, r_factor, l_factor)
    fw = drive.freewheel
    v_on, r_on = p.on()
    r_loop = p.r_coil + (p.r_sense if p.sense_in_coil_path else 0.0)
    slow = (p.v_diode, r_loop + fw.bypass_resistance)
    fast = (p.v_diode + p.v_zener, r_loop + p.r_fw)
    return p, (v_on, r_on), slow, fast


def test_split_simulation_end_to_end(tmp_path):
    """simulate --csv of the split example: the hold decays through the slow loop, the
    release through the fast one; against scipy and the closed-form RL decay."""
    drive = load_drive(SPLIT)
    _, doc = _json(str(SPLIT))
    assert doc["split_decay"]["lead_counts"] > 0 and doc["hold"]["decay_path"].startswith("diode + bypass")
    csv = tmp_path / "w.csv"
    supply, temp = 24.0, 70.0
    r = run_cli("simulate", str(SPLIT), "--supply", str(supply), "--coil-temp", str(temp),
                "--hold-time", "40 ms", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    assert "split decay" in r.stderr
    head = csv.read_text().splitlines()[0]
    assert head == "time_s,current_a,switch_on,switch_voltage_v,sense_current_a,bypass_on"
    a = np.loadtxt(csv, delimiter=",", skiprows=1)
    t, i, on, vsw, byp = a[:, 0], a[:, 1], a[:, 2], a[:, 3], a[:, 5]
    assert np.all(np.diff(t) > 0)
    p, (v_on, r_on), (vs, rs), (vf, rf) = _slow_fast_parts(drive, supply, temp)
    ind = p.inductance
    duty, _ = firmware_setting(design(drive), supply)  # the compare the firmware runs there
    f = doc["hold"]["frequency_hz"]
    off_edges = np.flatnonzero((on[:-1] == 1) & (on[1:] == 0))
    t_off = t[off_edges[-1]]                 # the final turn-off
    # The bypass opens bypass_lead before the final turn-off, and stays open.
    k_open = int(np.flatnonzero(byp == 0)[0])
    assert t[k_open] == pytest.approx(t_off - drive.freewheel.bypass_lead, abs=1e-12)
    assert np.all(byp[k_open:] == 0) and np.all(byp[:k_open] == 1)

    # Hold: the last full off-segment follows the slow loop's closed-form decay
    # (textbook first-order RL: i = (i0 + V/R) e^(-tR/L) - V/R).
    seg = slice(off_edges[-2], off_edges[-2] + int(np.flatnonzero(on[off_edges[-2] + 1:] == 1)[0]) + 1)
    ts, is_ = t[seg] - t[seg][0], i[seg]
    expect = (is_[0] + vs / rs) * np.exp(-ts * rs / ind) - vs / rs
    # (the CSV keeps 10 significant digits of time and current: rtol 2e-8)
    np.testing.assert_allclose(is_, expect, rtol=2e-8, err_msg="hold off-time vs the slow loop")
    # ... and the drain sees V_bus + V_diode + R_bypass i there (KVL around the slow path)
    np.testing.assert_allclose(vsw[seg][1:], supply + p.v_diode + drive.freewheel.bypass_resistance * is_[1:],
                               rtol=1e-6)
    # The last period's bottom and top (and so the ripple) equal the slow loop's periodic
    # steady state integrated by scipy.
    on_starts = np.flatnonzero((on[:-1] == 0) & (on[1:] == 1)) + 1
    lo, top = _scipy_period(v_on, r_on, vs, rs, ind, duty, f)
    assert i[on_starts[-1]] == pytest.approx(lo, rel=1e-6), "hold ripple bottom vs scipy"
    assert i[off_edges[-1]] == pytest.approx(top, rel=1e-6), "hold ripple top vs scipy"

    # Release: from the top of the ripple through the fast loop to the drop-out and zero
    # (closed form of the fast RL decay).
    i0 = i[off_edges[-1]]
    drop = drive.release.current
    t_drop = ind / rf * math.log((i0 + vf / rf) / (drop + vf / rf))
    t_zero = ind / rf * math.log((i0 + vf / rf) / (vf / rf))
    after = slice(off_edges[-1], None)
    t_rel = np.interp(-drop, -i[after], t[after]) - t_off
    assert t_rel == pytest.approx(t_drop, rel=1e-4), "release time vs the fast loop"
    assert t[-1] - t_off == pytest.approx(t_zero, rel=5e-8)  # (two CSV times of 10 digits, ~0.03 s)
    assert vsw[off_edges[-1] + 1] == pytest.approx(supply + p.v_diode + p.v_zener, rel=1e-6), \
        "the Zener sets the drain voltage at the release"
    # the fast path is really faster than the slow one would have been
    t_slow = ind / rs * math.log((i0 + vs / rs) / (drop + vs / rs))
    assert t_slow > 5 * t_drop

    # The design's release time at its worst corner: the top of that corner's slow-loop
    # steady state (scipy) decaying through the fast loop (closed form).
    k = int(np.argmax([c["release_time_s"] for c in doc["corners"]]))
    c = doc["corners"][k]
    _, _, rf_k, lf_k = _corner_points(drive, doc)
    pk, on_k, slow_k, fast_k = _slow_fast_parts(drive, c["supply_v"], c["coil_temp_c"], rf_k[k], lf_k[k])
    _, top_k = _scipy_period(*on_k, *slow_k, pk.inductance, c["hold_duty"], f)
    vfk, rfk = fast_k
    t_rel_k = pk.inductance / rfk * math.log((top_k + vfk / rfk) / (drop + vfk / rfk))
    assert doc["release"]["time_s"] == pytest.approx(t_rel_k, rel=1e-6)
    assert c["release_time_s"] == doc["release"]["time_s"]


def _scipy_period(v_on, r_on, v_off, r_off, ind, duty, f):
    """(i_min, i_max) of the periodic steady state in continuous conduction, by scipy's
    LSODA: one period is an affine map of the starting current (linear ODE segments), so
    two integrated periods give its fixed point, and a third confirms it."""
    period = 1.0 / f
    t_on, t_off = duty * period, (1 - duty) * period

    def one(i0):
        a = solve_ivp(lambda t, y: [(v_on - r_on * y[0]) / ind], (0, t_on), [i0], method="LSODA",
                      rtol=1e-12, atol=1e-14)
        top = float(a.y[0, -1])
        b = solve_ivp(lambda t, y: [-(r_off * y[0] + v_off) / ind], (0, t_off), [top],
                      method="LSODA", rtol=1e-12, atol=1e-14)
        return float(b.y[0, -1]), top

    m0, _ = one(0.0)
    m1, _ = one(1.0)
    slope = m1 - m0
    fixed = m0 / (1.0 - slope)
    end, top = one(fixed)
    assert fixed > 0 and end > 0, "not continuous conduction"
    assert end == pytest.approx(fixed, rel=1e-8), "scipy period map is not at its fixed point"
    return fixed, top


def test_late_bypass_slows_the_release(tmp_path):
    """bypass_lead < 0: slow decay for the lag, then fast (closed-form RL, both loops)."""
    path = _drive_file(tmp_path, "wash-valve-split-24v", "")
    text = path.read_text().replace('bypass_lead = "2 us"', 'bypass_lead = "-50 us"')
    path.write_text(text)
    drive = load_drive(path)
    _, doc = _json(str(path))
    c = _check(doc, "bypass_timing")
    assert c["severity"] == "warning" and not c["ok"] and "after the final turn-off" in c["detail"]
    assert doc["split_decay"]["lag_counts"] == math.floor(50e-6 * doc["split_decay"]["count_rate_hz"] + 1e-9)
    k = int(np.argmax([c["release_time_s"] for c in doc["corners"]]))
    corner = doc["corners"][k]
    _, _, rf_k, lf_k = _corner_points(drive, doc)
    p = parts(drive, corner["supply_v"], corner["coil_temp_c"], rf_k[k], lf_k[k])
    r_loop = p.r_coil + p.r_sense
    vs, rs = p.v_diode, r_loop + drive.freewheel.bypass_resistance
    vf, rf = p.v_diode + p.v_zener, r_loop
    _, top = _scipy_period(*p.on(), vs, rs, p.inductance, corner["hold_duty"], doc["hold"]["frequency_hz"])
    lag = 50e-6
    i_lag = (top + vs / rs) * math.exp(-lag * rs / p.inductance) - vs / rs
    drop = drive.release.current
    expect = lag + p.inductance / rf * math.log((i_lag + vf / rf) / (drop + vf / rf))
    assert corner["release_time_s"] == pytest.approx(expect, rel=1e-6)
    # simulate: the bypass opens 50 us after the turn-off
    csv = tmp_path / "late.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "60", "--hold-time", "5 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    a = np.loadtxt(csv, delimiter=",", skiprows=1)
    t, on, byp = a[:, 0], a[:, 2], a[:, 5]
    t_off = t[np.flatnonzero((on[:-1] == 1) & (on[1:] == 0))[-1]]
    t_open = t[np.flatnonzero(byp == 0)[0]]
    assert t_open - t_off == pytest.approx(lag, rel=1e-9)


def test_too_long_bypass_lead_fails_the_design(tmp_path):
    path = _drive_file(tmp_path, "wash-valve-split-24v", "")
    path.write_text(path.read_text().replace('bypass_lead = "2 us"', 'bypass_lead = "30 us"'))
    rc, doc = _json(str(path))
    c = _check(doc, "bypass_timing")
    assert rc == 1 and not c["ok"] and c["severity"] == "error"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "60", "--csv", str(tmp_path / "x.csv"))
    assert r.returncode == 2 and "freewheel.bypass_lead" in r.stderr and not (tmp_path / "x.csv").exists()


@pytest.mark.compiler
def test_split_header_compiles_and_bypass_counts_read_back(tmp_path):
    """gcc -std=c99 -Wall -Wextra -Werror -pedantic compiles the header; a C program
    prints the bypass timing back for comparison with the JSON."""
    gcc = require_tool("gcc")
    header = tmp_path / "drive.h"
    r = run_cli("design", str(SPLIT), "--json", "--header", str(header), "--prefix", "W")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    (tmp_path / "m.c").write_text(
        '#include <stdio.h>\n#include "drive.h"\nint main(void)\n{\n'
        '    printf("%lu %lu %lu\\n", (unsigned long)W_SPLIT_DECAY, (unsigned long)W_BYPASS_LEAD_COUNTS,\n'
        '           (unsigned long)W_BYPASS_LAG_COUNTS);\n    return 0;\n}\n')
    exe = tmp_path / "m"
    c = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(tmp_path / "m.c"),
                        "-o", str(exe)], capture_output=True, text=True)
    assert c.returncode == 0, c.stderr
    flag, lead, lag = map(int, subprocess.run([str(exe)], capture_output=True, text=True,
                                              check=True).stdout.split())
    s = doc["split_decay"]
    assert (flag, lead, lag) == (1, s["lead_counts"], s["lag_counts"])
    # 2 us at the timer's count rate (84 MHz / prescaler), rounded up
    assert lead == math.ceil(2e-6 * s["count_rate_hz"] - 1e-9)
    assert lead <= doc["timer"]["compare_ticks"]
    # the header's own range check stops a lead beyond the on-time
    text = header.read_text()
    import re
    broken = re.sub(r"#define W_BYPASS_LEAD_COUNTS\s+\d+U", "#define W_BYPASS_LEAD_COUNTS 65000UL", text)
    assert broken != text
    header.write_text(broken)
    c = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(tmp_path / "m.c"),
                        "-o", str(exe)], capture_output=True, text=True)
    assert c.returncode != 0 and "within the last on-time" in c.stderr


def test_split_plot_is_written(tmp_path):
    png = tmp_path / "split.png"
    r = run_cli("design", str(SPLIT), "--plot", str(png))
    assert r.returncode == 0, r.stderr
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_hold_and_release_loops_coincide_without_split_decay():
    for example in ("zener-valve", "pinch-valve-48v", "relay-12v", "door-latch-24v"):
        drive = load_drive(drive_path(example))
        hold, rel = loop(drive, 24.0, 20.0), loop(drive, 24.0, 20.0, path="release")
        assert (float(hold.r_off), float(hold.v_off)) == (float(rel.r_off), float(rel.v_off))
        assert not hold.bypassed and design(drive).split_decay is None


# --------------------------------------------------------------------------- ngspice
def split_netlist(drive, supply: float, temp: float, duty: float, f: float, t_drop: float,
                  cycles: float = 14.0):
    """The split-decay circuit for ngspice (batch transient): a real bypass switch across
    the Zener on its own gate, the coil as ``LCOIL n1 n2`` (tests/test_flux_ngspice.py
    swaps in a flux-controlled one). ``cycles`` time constants of start-up before the
    measured last hold period. Returns the netlist and ``(t_cut, step)``."""
    from ngspice_run import G_OFF, OPTIONS
    from ngspice_run import knee as _knee
    from test_reference_ngspice import EDGE, G_OFF_SWITCH, R_BLEED

    fw = drive.freewheel
    p = parts(drive, supply, temp)
    assert p.sense_in_coil_path, "the netlist below puts the sense resistor in the coil path"
    period = 1.0 / f
    tau = p.inductance / (p.r_coil + p.r_sense)
    n = math.ceil(cycles * tau * f)                # periods: start-up transient down to e^-cycles
    t_last = n * period                            # the last on-time starts here
    t_cut = t_last + duty * period - EDGE          # the final falling edge starts
    t_byp = t_cut - fw.bypass_lead                 # the bypass opens
    tstop = t_cut + 2.0 * float(t_drop)
    step = period / 100
    t0 = t_last - period                           # the last full hold period
    window = f"from={t0!r} to={t_last!r}"
    gate = f"(V(gate) * V(run) * {1.0 / p.r_switch!r} + (1 - V(gate) * V(run)) * {G_OFF_SWITCH!r})"
    byp = f"(V(byp) / {fw.bypass_resistance!r} + (1 - V(byp)) * {G_OFF!r})"
    text = "\n".join([
        "* split decay: bypass switch across the Zener",
        f"VBUS vbus 0 DC {supply!r}",
        f"RCOIL vbus n1 {p.r_coil!r}",
        f"LCOIL n1 n2 {p.inductance!r} IC=0",
        f"RSENSE n2 n3 {p.r_sense!r}", "VM n3 drain DC 0",
        f"BSWITCH drain 0 I = V(drain) * {gate}",
        f"VGATE gate 0 PULSE(0 1 0 {EDGE} {EDGE} {duty * period - 2 * EDGE!r} {period!r})",
        f"VRUN run 0 PWL(0 1 {t_cut!r} 1 {t_cut + EDGE!r} 0)",
        f"VBYP byp 0 PWL(0 1 {t_byp!r} 1 {t_byp + EDGE!r} 0)",
        "VFW drain a DC 0",
        _knee("BDIODE", "a", "b", p.v_diode),
        "VZ b z DC 0", _knee("BZENER", "z", "vbus", p.v_zener),
        "VBP b c DC 0", f"BBYPASS c vbus I = V(c,vbus) * {byp}",
        f"RBLEED drain vbus {R_BLEED!r}",
        OPTIONS,
        ".control",
        f"tran {step!r} {tstop!r} 0 {step!r} uic",
        "let pd = v(a,b) * i(VFW)", "let pz = v(z,vbus) * i(VZ)", "let pb = v(c,vbus) * i(VBP)",
        f"meas tran iavg AVG i(VM) {window}",
        f"meas tran istart FIND i(VM) AT={t0!r}",
        f"meas tran iopen FIND i(VM) AT={t0 + duty * period - EDGE!r}",
        f"meas tran pdiode AVG pd {window}", f"meas tran pzener AVG pz {window}",
        f"meas tran pbypass AVG pb {window}",
        f"meas tran tdrop WHEN i(VM)={drive.release.current!r} FALL=1 TD={t_cut!r}",
        f"meas tran vrel FIND v(drain) AT={t_cut + 20 * step!r}",
        f"meas tran irel FIND i(VM) AT={t_cut + 20 * step!r}",
        "quit 0", ".endc", ".end"]) + "\n"
    return text, (t_cut, step)


def check_split_against_ngspice(res: dict, drive, supply: float, temp: float, ss, loss, t_drop,
                                t_cut: float, step: float) -> None:
    """The ngspice measures of :func:`split_netlist` against the model's hold ``ss``
    (steady state of the slow loop), its losses and the release's drop-out time."""
    p = parts(drive, supply, temp)
    # ngspice, last hold period: mean within 1 %, ripple within 3 % of the slow loop
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01), (res["iavg"], float(ss.mean))
    assert res["iopen"] - res["istart"] == pytest.approx(float(ss.ripple), rel=0.03)
    # ngspice: the diode and the bypass switch take the hold's off-time power, the Zener none
    assert res["pdiode"] == pytest.approx(float(loss.diode), rel=0.02), (res["pdiode"], float(loss.diode))
    assert res["pbypass"] == pytest.approx(float(loss.bypass), rel=0.03), (res["pbypass"], float(loss.bypass))
    assert abs(res["pzener"]) < 1e-3 * float(loss.diode), res["pzener"]
    # ngspice: the release after the bypass opened decays through the Zener (fast loop):
    # time to the drop-out within 1 % plus one time step, drain at V_bus + V_d + V_z
    t_spice = res["tdrop"] - t_cut
    assert abs(t_spice - float(t_drop)) <= 0.01 * float(t_drop) + step, (t_spice, float(t_drop))
    assert res["vrel"] == pytest.approx(supply + p.v_diode + p.v_zener, rel=0.002), res["vrel"]


@pytest.mark.ngspice
def test_split_decay_hold_and_release_match_ngspice(tmp_path):
    """ngspice transient (batch mode) of the split-decay circuit with a real bypass switch
    across the Zener on its own gate: the hold's steady state and element powers follow
    the slow loop, the release after the bypass opens the fast one."""
    from ngspice_run import run as _run

    from coildrive.design.evaluate import release_figures

    drive = load_drive(SPLIT)
    supply, temp = 24.0, 70.0
    d = design(drive)
    duty, f = d.hold.duty, d.hold.frequency_hz
    lp = loop(drive, supply, temp)
    fast = loop(drive, supply, temp, path="release")
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    loss = hold_losses(drive, lp, ss, f)
    t_drop, _, _, _ = release_figures(drive, lp, fast, ss.i_max)
    text, (t_cut, step) = split_netlist(drive, supply, temp, duty, f, t_drop)
    res = _run(tmp_path, "split", text)
    check_split_against_ngspice(res, drive, supply, temp, ss, loss, t_drop, t_cut, step)
