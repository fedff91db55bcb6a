"""Hold losses of current-mode holds; split decay with a current-mode hold and with an
``[armature]``.

References named beside each check:
- scipy.integrate.solve_ivp (LSODA) integrating the hysteretic and off-time holds
  switched by terminal events at the thresholds, written out here from Kirchhoff's
  voltage law (``L di/dt = V - R_on i`` on, ``L di/dt = -(R_off i + V_off)`` off), with
  the charge and the square of the current as extra states for the element energies;
- conservation of energy over one switching cycle (the inductor's energy repeats):
  energy from the supply = copper + sense + switch + freewheel elements;
- the hysteretic switching times between the thresholds from the RL step response
  (``tau_on ln((A - I_lo)/(A - I_hi))`` charge, ``tau_off ln((I_hi + B)/(I_lo + B))``
  discharge, from memory; derived again in coildrive/model/current_mode.py) and the
  closed-form RL decay ``i(t) = (i0 + V/R) exp(-t R/L) - V/R`` of a first-order circuit
  (Hayt & Kemmerly, "Engineering Circuit Analysis", the RL circuit with a constant
  source), written out here with the element values of the board;
- the PWM periodic steady state of two exponential segments,
  ``i_min = ((A(1 - e_on) + B) e_off - B) / (1 - e_on e_off)`` (the fixed point of one
  period, written out here);
- scipy's solve_ivp (DOP853) through the moving-armature ODE
  (:func:`coildrive.model.armature_sim.release_reference` and ``simulate(method=...)``),
  the per-point reference the batched armature integrator is checked against;
- gcc -std=c99 -Wall -Wextra -Werror -pedantic for the generated header.
"""

from __future__ import annotations

import csv
import json
import math
import subprocess
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from typer.testing import CliRunner

from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design.corners import corner_grid
from coildrive.design.hold_current import current_losses, evaluate_current
from coildrive.design import design
from coildrive.design.evaluate import evaluate
from coildrive.model.armature import params_from_loop
from coildrive.model.armature_runs import late_release, release
from coildrive.model.armature_sim import release_reference, simulate
from coildrive.model.circuit import loop
from coil_span import cold_and_settled
from conftest import EXAMPLES, drive_path, require_tool, run_cli
from test_split_decay import _json

runner = CliRunner()
ALPHA = 0.00393  # annealed copper, IEC 60028


def _drive_file(tmp_path: Path, base: str, extra: str = "", *, current: str | None = None,
                board: str | None = None, name: str = "drive") -> Path:
    """``base`` example, optionally as a current-mode hold (``current`` = the control)
    on another board, with ``extra`` TOML appended."""
    text = drive_path(base).read_text()
    if current:
        text = text.replace('frequency = "25 kHz"',
                            f'frequency = "25 kHz"\nmode = "current"\ncontrol = "{current}"')
        # up to 27 V: at 28 V the fixture's cold coil ends its fixed peak too close to the
        # ADC's full scale for the over-current trip's headroom (adc_over_current fails)
        text = text.replace('max = "28 V"', 'max = "27 V"')
    if board:
        first = text.split("board = ", 1)[1].split("\n", 1)[0]
        text = text.replace(f"board = {first}", f'board = "{board}"')
    path = tmp_path / f"{name}.toml"
    path.write_text(text + "\n" + extra)
    return path


def _compile_header(drive_file: Path, tmp_path: Path, *macros: str) -> None:
    """``design --header`` of ``drive_file`` has ``macros`` and compiles with gcc."""
    gcc = require_tool("gcc")
    out = tmp_path / "drive.h"
    r = runner.invoke(app, ["design", str(drive_file), "--header", str(out)])
    assert r.exit_code == 0, r.output
    text = out.read_text()
    assert all(m in text for m in macros), [m for m in macros if m not in text]
    src = tmp_path / "main.c"
    src.write_text(f'#include "{out.name}"\nint main(void) {{ return 0; }}\n')
    cc = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-c", str(src),
                         "-o", str(tmp_path / "main.o")], capture_output=True, text=True, cwd=tmp_path)
    assert cc.returncode == 0, cc.stderr


def _check(doc: dict, name: str) -> dict:
    found = [c for c in doc["checks"] if c["name"] == name]
    assert len(found) == 1, (name, [c["name"] for c in doc["checks"]])
    return found[0]


# --------------------------------------------------------------------------- references
def _circuit_by_hand(drive, corner: dict, bypassed: bool = False):
    """(V, R_on, R_off, V_off, L, R_coil) at a JSON corner from the element values:
    the corner's copper resistance, the switch, the sense resistor in the coil path, the
    diode + Zener (or the diode + bypass switch) -- Kirchhoff's voltage law by hand."""
    b = drive.board
    fw = drive.freewheel
    r_coil = corner["resistance_ohm"]
    assert b.sense.position == "coil" and fw.type == "zener"
    r_on = r_coil + drive.switch.on_resistance + b.sense.resistance
    if bypassed:
        r_off, v_off = r_coil + b.sense.resistance + fw.bypass_resistance, fw.diode_drop
    else:
        r_off, v_off = r_coil + b.sense.resistance, fw.diode_drop + fw.zener_voltage
    return corner["supply_v"], r_on, r_off, v_off, corner["inductance_h"], r_coil


def _ivp_cycle(v, r_on, r_off, v_off, ind, *, lo=None, hi=None, t_off=None, cycles=60):
    """One steady-state switching cycle by scipy's LSODA with terminal events at the
    thresholds: hysteretic (``lo``/``hi``) or peak ``hi`` + fixed ``t_off``. Returns
    ``(Q_on, S_on, Q_off, S_off, T)`` of the last cycle (A*s, A^2*s, s)."""
    tau = ind / min(r_on, r_off)
    i = lo if lo is not None else 0.5 * hi
    out = None
    for _ in range(cycles):
        def on(_t, y):
            return [(v - r_on * y[0]) / ind, y[0], y[0] ** 2]

        def top(_t, y):
            return y[0] - hi
        top.terminal, top.direction = True, 1
        s1 = solve_ivp(on, (0, 50 * tau), [i, 0, 0], method="LSODA", events=top,
                       rtol=1e-11, atol=[1e-13, 1e-16, 1e-17])
        t1 = s1.t_events[0][0]
        y1 = s1.y_events[0][0]

        def off(_t, y):
            return [-(r_off * max(y[0], 0.0) + v_off * (y[0] > 0)) / ind, max(y[0], 0.0), max(y[0], 0.0) ** 2]
        if lo is not None:
            def bottom(_t, y):
                return y[0] - lo
            bottom.terminal, bottom.direction = True, -1
            s2 = solve_ivp(off, (0, 50 * tau), [hi, 0, 0], method="LSODA", events=bottom,
                           rtol=1e-11, atol=[1e-13, 1e-16, 1e-17])
            t2, y2 = s2.t_events[0][0], s2.y_events[0][0]
        else:
            s2 = solve_ivp(off, (0, t_off), [y1[0], 0, 0], method="LSODA", rtol=1e-11,
                           atol=[1e-13, 1e-16, 1e-17])
            t2, y2 = t_off, s2.y[:, -1]
        new = max(float(y2[0]), 0.0)
        out = (y1[1], y1[2], y2[1], y2[2], t1 + t2)
        if lo is not None or abs(new - i) < 1e-13:
            break
        i = new
    return out


# --------------------------------------------------------------------------- current mode
@pytest.fixture(scope="module")
def cm_designs(tmp_path_factory):
    """Demo valve as hysteretic and off-time current-mode holds (lab-m32-zener)."""
    tmp = tmp_path_factory.mktemp("cm")
    out = {}
    for control in ("hysteretic", "off_time"):
        path = _drive_file(tmp, "zener-valve", current=control, name=control)
        out[control] = (load_drive(path), _json(str(path))[1])
    return out


@pytest.mark.parametrize("control", ["hysteretic", "off_time"])
def test_current_mode_element_powers_against_scipy(cm_designs, control):
    """Every corner's element powers against LSODA through the thresholds (events), the
    element powers written out here (V_d Q_off/T, V_z Q_off/T, R i^2 ...)."""
    drive, doc = cm_designs[control]
    cm = doc["current_mode"]
    fw, b = drive.freewheel, drive.board
    hold = doc["hold"]
    assert hold["decay_path"] == "diode + Zener (fast decay)"
    zener = []
    for k, corner in enumerate(doc["corners"][::3]):
        v, r_on, r_off, v_off, ind, r_coil = _circuit_by_hand(drive, corner)
        if control == "hysteretic":
            q_on, s_on, q_off, s_off, period = _ivp_cycle(v, r_on, r_off, v_off, ind,
                                                          lo=cm["lower_a"], hi=cm["upper_a"])
        else:
            q_on, s_on, q_off, s_off, period = _ivp_cycle(v, r_on, r_off, v_off, ind,
                                                          hi=cm["upper_a"], t_off=cm["off_time_s"])
        p_zener = fw.zener_voltage * q_off / period
        p_diode = fw.diode_drop * q_off / period
        p_switch = drive.switch.on_resistance * s_on / period
        assert corner["freewheel_power_w"] == pytest.approx(p_zener + p_diode, rel=1e-6), k
        assert corner["switch_power_w"] == pytest.approx(p_switch, rel=1e-6), k
        assert corner["hold_mean_current_a"] == pytest.approx((q_on + q_off) / period, rel=1e-6), k
        # energy per cycle (the inductor's energy repeats): supply = every loss
        supply = v * q_on
        losses = (r_coil * (s_on + s_off) + b.sense.resistance * (s_on + s_off)
                  + drive.switch.on_resistance * s_on + (fw.diode_drop + fw.zener_voltage) * q_off)
        assert supply == pytest.approx(losses, rel=1e-7), k
        zener.append(p_zener)
    assert hold["freewheel_elements_w"]["zener"] >= max(zener) * (1 - 1e-9)
    assert hold["freewheel_power_w"] == pytest.approx(max(c["freewheel_power_w"] for c in doc["corners"]), rel=1e-12)


def test_current_mode_losses_balance_at_every_corner(cm_designs):
    """Supply power = the sum of the ideal losses at every corner (energy conservation
    over a cycle), from the library's own figures."""
    drive, _ = cm_designs["hysteretic"]
    d = design(drive)
    th = d.hold.thresholds
    grid = corner_grid(drive)
    res, cm = evaluate_current(drive, th, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                               d.pull_in.peak_time_s)
    loss = current_losses(drive, res, cm)
    np.testing.assert_allclose(loss.balance_error(), 0.0, atol=1e-12 * float(np.max(loss.supply)))
    assert np.all(loss.zener > 0) and np.all(loss.switch_switching == 0)


def test_current_mode_rows_checks_and_cautions(cm_designs):
    _, doc = cm_designs["hysteretic"]
    assert _check(doc, "zener_power")["severity"] == "warning"  # no rating on the board
    assert _check(doc, "switch_power")
    assert any("During a long hold the freewheel path takes" in c for c in doc["cautions"])
    sv = doc["hold"]["split_decay_saving"]
    assert sv["fast_element"] == "zener" and sv["freewheel_power_w"] > 1.0, sv
    assert sv["min_frequency_split_hz"] > 0 and sv["upper_code_split"] > 0


def test_current_mode_table_shows_losses_and_saving(tmp_path):
    path = _drive_file(tmp_path, "zener-valve", current="hysteretic")
    r = runner.invoke(app, ["design", str(path)], env={"COLUMNS": "200"})
    assert r.exit_code == 0, r.output
    for row in ("hold freewheel power", "hold switch power", "split decay would save"):
        assert row in r.stdout, row


# --------------------------------------------------------------------------- current mode + split
def _split_and_plain(tmp: Path, base: str, lead: str, **kw):
    """``base`` with split decay (bypass ``lead``) and without: (file, Drive, (exit
    code, JSON) with split decay, JSON without)."""
    extra = f'[freewheel]\nsplit_decay = true\nbypass_lead = "{lead}"\n'
    path = _drive_file(tmp, base, extra, name="split", **kw)
    plain = _drive_file(tmp, base, name="plain", **kw)
    return path, load_drive(path), _json(str(path)), _json(str(plain))[1]


@pytest.fixture(scope="module")
def cm_split(tmp_path_factory):
    return _split_and_plain(tmp_path_factory.mktemp("cms"), "zener-valve", "1 us", current="hysteretic")


def test_current_mode_split_decay_design(cm_split):
    path, drive, (code, doc), plain = cm_split
    assert code == 0, [c for c in doc["checks"] if not c["ok"]]
    hold, cm = doc["hold"], doc["current_mode"]
    assert hold["decay_path"] == "diode + bypass switch (slow decay)"
    assert "zener" not in hold["freewheel_elements_w"]
    assert doc["split_decay"]["release_path"] == "diode + Zener (fast decay)"
    assert _check(doc, "bypass_timing")["ok"]
    # the switching frequency is that of the slow path (hand formula at every corner, the
    # coil from switched on cold to settled)
    freqs = []
    for corner in cold_and_settled(doc):
        v, r_on, r_off, v_off, ind, _ = _circuit_by_hand(drive, corner, bypassed=True)
        a, b = v / r_on, v_off / r_off
        lo, hi = cm["lower_a"], cm["upper_a"]
        t_on = ind / r_on * math.log((a - lo) / (a - hi))
        t_off = ind / r_off * math.log((hi + b) / (lo + b))
        freqs.append(1.0 / (t_on + t_off))
    assert cm["min_frequency_hz"] == pytest.approx(min(freqs), rel=1e-9)
    assert cm["max_frequency_hz"] == pytest.approx(max(freqs), rel=1e-9)
    assert _check(doc, "current_mode_frequency")["ok"], "still checked against the allowed range"
    assert cm["min_frequency_hz"] != plain["current_mode"]["min_frequency_hz"], "the slow path switches differently"
    # what the plain design said split decay would save is what this design gets
    sv = plain["hold"]["split_decay_saving"]
    assert hold["freewheel_power_w"] == pytest.approx(sv["freewheel_power_split_w"], rel=1e-9)
    assert hold["duty"] == pytest.approx(sv["duty_split"], rel=1e-12)
    assert cm["min_frequency_hz"] == pytest.approx(sv["min_frequency_split_hz"], rel=1e-12)
    assert cm["lower_code"] == sv["lower_code_split"] and cm["upper_code"] == sv["upper_code_split"]


def test_current_mode_split_release_is_fast(cm_split):
    """Release time, zero time and switch voltage of the fast path (hand formulas) from
    the top of the slow-path ripple."""
    _, drive, (_, doc), _ = cm_split
    fw = drive.freewheel
    d = design(drive)
    grid = corner_grid(drive)
    res, cm = evaluate_current(drive, d.hold.thresholds, grid.supply, grid.ambient,
                               grid.r_factor, grid.l_factor, d.pull_in.peak_time_s)
    drop = drive.release.current
    for k, corner in enumerate(doc["corners"]):
        _, _, r_fast, v_fast, ind, _ = _circuit_by_hand(drive, corner)
        i_top = float(cm.i_max[k])
        b = v_fast / r_fast
        assert corner["release_time_s"] == pytest.approx(ind / r_fast * math.log((i_top + b) / (drop + b)), rel=1e-9)
        assert corner["release_zero_time_s"] == pytest.approx(ind / r_fast * math.log((i_top + b) / b), rel=1e-9)
    assert doc["release"]["peak_switch_voltage_v"] == pytest.approx(
        drive.supply.max + fw.diode_drop + fw.zener_voltage)


def test_current_mode_split_header_compiles(cm_split, tmp_path):
    _compile_header(cm_split[0], tmp_path, "_SPLIT_DECAY", "_HOLD_HYSTERETIC", "_BYPASS_LEAD_COUNTS")


def _read_csv(path: Path) -> dict[str, np.ndarray]:
    with open(path) as f:
        rows = list(csv.reader(f))
    return {name: np.array([float(r[j]) for r in rows[1:]]) for j, name in enumerate(rows[0])}


def test_current_mode_split_simulate_csv(cm_split, tmp_path):
    """simulate --csv: hold off segments decay through the slow path, the release through
    the fast one (closed-form decay by hand), the bypass column flips 1 us before the
    final turn-off."""
    path, drive, _, _ = cm_split
    out = tmp_path / "w.csv"
    temp = 40.0
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", str(temp), "--hold-time",
                "2 ms", "--csv", str(out))
    assert r.returncode == 0, r.stderr
    w = _read_csv(out)
    t, i, on, bp = w["time_s"], w["current_a"], w["switch_on"], w["bypass_on"]
    c, fw, b = drive.coil, drive.freewheel, drive.board
    r_coil = c.resistance * (1 + ALPHA * (temp - c.reference_temp))
    ind = c.inductance
    r_slow, v_slow = r_coil + b.sense.resistance + fw.bypass_resistance, fw.diode_drop
    r_fast, v_fast = r_coil + b.sense.resistance, fw.diode_drop + fw.zener_voltage
    last_on = int(np.flatnonzero(on == 1)[-1])
    t_cut, i_cut = t[last_on], i[last_on]
    # a hold off segment: the one before the last on-time
    edges = np.flatnonzero((on[:-1] == 1) & (on[1:] == 0))
    k0 = int(edges[-2])
    seg = slice(k0, int(np.flatnonzero(on[k0 + 1:] == 1)[0]) + k0 + 1)
    dt = t[seg] - t[k0]
    slow = (i[k0] + v_slow / r_slow) * np.exp(-dt * r_slow / ind) - v_slow / r_slow
    # (the CSV keeps 10 significant digits, and the start current is read from it too)
    np.testing.assert_allclose(i[seg], slow, rtol=2e-9, err_msg="hold off-time: slow path")
    assert np.all(bp[seg] == 1)
    # the release
    tail = slice(last_on, None)
    dt = t[tail] - t_cut
    fast = np.maximum((i_cut + v_fast / r_fast) * np.exp(-dt * r_fast / ind) - v_fast / r_fast, 0.0)
    # CSV times carry 10 significant digits: ~1e-12 s at a few ms, ~1e-9 A at this slope
    np.testing.assert_allclose(i[tail], fast, rtol=1e-6, atol=1e-8, err_msg="release: fast path")
    assert np.all(bp[last_on + 1:] == 0)
    t_open = t[int(np.flatnonzero(bp == 0)[0])]
    assert t_open == pytest.approx(t_cut - 1e-6, abs=1e-12)
    assert float(np.max(w["switch_voltage_v"][last_on + 1:])) == pytest.approx(
        24 + fw.diode_drop + fw.zener_voltage + 0.0, rel=1e-9)


# --------------------------------------------------------------------------- armature + split
@pytest.fixture(scope="module")
def latch_split(tmp_path_factory):
    """The locker latch on the Zener board, with and without split decay."""
    return _split_and_plain(tmp_path_factory.mktemp("latch"), "locker-latch-12v", "2 us",
                            board="lab-m32-zener")


def test_armature_split_design_ok(latch_split):
    _, drive, (code, doc), plain = latch_split
    assert code == 0, [c for c in doc["checks"] if not c["ok"] and c["severity"] == "error"]
    assert _check(doc, "armature_releases")["ok"] and _check(doc, "armature_hold")["ok"]
    assert doc["hold"]["decay_path"] == "diode + bypass switch (slow decay)"
    assert doc["split_decay"]["release_path"] == "diode + Zener (fast decay)"
    # the hold duty is the slow path's: what the plain design said split decay would give
    assert doc["hold"]["duty"] == pytest.approx(plain["hold"]["split_decay_saving"]["duty_split"], rel=1e-12)
    assert doc["hold"]["duty"] < plain["hold"]["duty"]


def test_armature_split_header_compiles(latch_split, tmp_path):
    _compile_header(latch_split[0], tmp_path, "_SPLIT_DECAY", "_RELEASE_OPEN_TICKS")


def test_armature_split_hold_ripple_is_the_slow_paths(latch_split):
    """Each corner's ripple from the PWM fixed point written out here with the slow
    path's R_off and V_off (seated armature: the closed inductance)."""
    _, drive, (_, doc), _ = latch_split
    f = doc["hold"]["frequency_hz"]
    for corner in doc["corners"]:
        duty = corner["hold_duty"]  # the compare the firmware runs at this corner
        v, r_on, r_off, v_off, ind, _ = _circuit_by_hand(drive, corner, bypassed=True)
        a, b = v / r_on, v_off / r_off
        e_on, e_off = math.exp(-duty / f * r_on / ind), math.exp(-(1 - duty) / f * r_off / ind)
        i_min = ((a * (1 - e_on) + b) * e_off - b) / (1 - e_on * e_off)
        i_max = a + (i_min - a) * e_on
        assert corner["hold_ripple_a"] == pytest.approx(i_max - i_min, rel=1e-9)


def test_armature_split_release_is_the_fast_paths(latch_split):
    """Release moments at every fifth corner against solve_ivp (DOP853) through the
    armature ODE with the fast path's R_off and V_off; the slow path would be slower."""
    _, drive, (_, doc), _ = latch_split
    d = design(drive)
    c = drive.coil
    supply = np.array([k["supply_v"] for k in doc["corners"]])
    temps = np.array([k["coil_temp_c"] for k in doc["corners"]])
    rf = np.array([k["resistance_ohm"] for k in doc["corners"]]) / (
        c.resistance * (1 + ALPHA * (temps - 20.0)) / (1 + ALPHA * (c.reference_temp - 20.0)))
    lf = np.array([k["inductance_h"] for k in doc["corners"]]) / drive.armature.inductance_closed
    duty = np.array([k["hold_duty"] for k in doc["corners"]])
    res = evaluate(drive, supply, 0.0 * supply, rf, lf, duty, d.hold.frequency_hz,
                   d.pull_in.peak_time_s, coil_temp=temps)
    fast = loop(drive, supply, temps, rf, lf, path="release")
    slow = loop(drive, supply, temps, rf, lf)
    # the loops from the element values (KVL by hand): fast = diode + Zener, slow = diode + bypass
    fw = drive.freewheel
    np.testing.assert_allclose(fast.v_off, fw.diode_drop + fw.zener_voltage)
    np.testing.assert_allclose(slow.v_off, fw.diode_drop)
    p_fast = params_from_loop(drive.armature, fast, lf)
    p_slow = params_from_loop(drive.armature, slow, lf)
    for k in range(0, len(supply), 5):
        i_off = float(res.hold.i_max[k])
        ref = release_reference(p_fast.take(k), i_off, "DOP853")
        corner = doc["corners"][k]
        assert corner["release_open_time_s"] == pytest.approx(ref.open_time, rel=1e-5), k
        assert corner["release_time_s"] == pytest.approx(ref.open_time, rel=1e-5), k
        energy = (fw.diode_drop + fw.zener_voltage) * ref.charge
        # the design integrates at rtol 1e-7: its charge is within ~1.5e-5 of the
        # reference (and converges to it at a tighter rtol)
        assert corner["release_energy_j"] == pytest.approx(energy, rel=3e-5), k
        slow_ref = release_reference(p_slow.take(k), i_off, "DOP853")
        assert slow_ref.open_time > 1.05 * ref.open_time, "the bypass would slow the release"
    assert doc["release"]["time_s"] == max(c["release_time_s"] for c in doc["corners"])


@pytest.mark.parametrize("lag", [200e-6, 8e-3])
def test_late_bypass_release_against_dop853(latch_split, lag):
    """A bypass that opens ``lag`` after the turn-off (still seated then, or already
    lifting): the batched release against solve_ivp (DOP853) through the slow path for
    ``lag``, then the fast one (a schedule whose segments name their path)."""
    _, drive, _, _ = latch_split
    grid = corner_grid(drive)
    k = [0, 7]
    temps = np.full(len(grid), 60.0)
    slow = params_from_loop(drive.armature, loop(drive, grid.supply, temps, grid.r_factor, grid.l_factor),
                            grid.l_factor).take(k)
    fast = params_from_loop(drive.armature, loop(drive, grid.supply, temps, grid.r_factor, grid.l_factor,
                                                 path="release"), grid.l_factor).take(k)
    i_off = np.array([0.5, 0.45])
    rb = late_release(slow, fast, i_off, lag)
    plain = release(fast, i_off)
    for j in range(2):
        bound = float(rb.bound[j]) + 1.0
        tr = simulate(slow.take(j), [(lag, False, None, "hold"), (bound, False, None, "release")],
                      state="seated", flux=float(slow.l_closed[j] * i_off[j]), method="DOP853",
                      release_params=fast.take(j), stop=lambda r: r.state == "open" and not r.live)
        opens = [t for t, name in tr.log if name == "open"]
        assert rb.status[j] == 0 and tr.state == "open"
        assert rb.open_time[j] == pytest.approx(opens[-1], rel=1e-5), (j, lag)
        assert rb.zero_time[j] == pytest.approx(tr.events["zero"], rel=1e-5), (j, lag)
        assert rb.charge[j] == pytest.approx(tr.charge[-1], rel=1e-5), (j, lag)
        m = int(np.searchsorted(tr.time, lag, side="right")) - 1
        assert tr.time[m] == pytest.approx(lag, rel=1e-12)
        assert rb.slow_charge[j] == pytest.approx(tr.charge[m], rel=1e-5), (j, lag)
        assert rb.open_time[j] > plain.open_time[j], "a late bypass releases later"


def test_armature_split_simulate_csv(latch_split, tmp_path):
    """simulate --csv end to end: the seated hold's off-times decay through the slow path
    (closed form by hand, closed inductance), the bypass opens 2 us before the final
    turn-off, and the armature is back open when the DOP853 reference says (fast path)."""
    path, drive, _, _ = latch_split
    out = tmp_path / "latch.csv"
    temp, supply = 40.0, 12.0
    r = run_cli("simulate", str(path), "--supply", str(supply), "--coil-temp", str(temp),
                "--hold-time", "5 ms", "--csv", str(out))
    assert r.returncode == 0, r.stderr
    w = _read_csv(out)
    t, i, on, bp, x = w["time_s"], w["current_a"], w["switch_on"], w["bypass_on"], w["position_m"]
    c, fw, b, arm = drive.coil, drive.freewheel, drive.board, drive.armature
    r_coil = c.resistance * (1 + ALPHA * (temp - c.reference_temp))
    ind = arm.inductance_closed
    r_slow, v_slow = r_coil + b.sense.resistance + fw.bypass_resistance, fw.diode_drop
    last_on = int(np.flatnonzero(on == 1)[-1])
    t_cut, i_cut = t[last_on], i[last_on]
    edges = np.flatnonzero((on[:-1] == 1) & (on[1:] == 0))
    k0 = int(edges[-2])
    seg = slice(k0, int(np.flatnonzero(on[k0 + 1:] == 1)[0]) + k0 + 1)
    assert np.all(x[seg] == 0.0), "seated through the hold"
    dt = t[seg] - t[k0]
    slow = (i[k0] + v_slow / r_slow) * np.exp(-dt * r_slow / ind) - v_slow / r_slow
    # (the CSV keeps 10 significant digits, and the start current is read from it too)
    np.testing.assert_allclose(i[seg], slow, rtol=2e-9, err_msg="hold off-time: slow path")
    t_open = t[int(np.flatnonzero(bp == 0)[0])]
    assert t_open == pytest.approx(t_cut - 2e-6, abs=1e-12)
    assert np.all(bp[seg] == 1) and np.all(bp[last_on + 1:] == 0)
    # the release from (t_cut, i_cut) through the fast path, by the scipy reference
    fast = params_from_loop(arm, loop(drive, supply, temp, path="release"), 1.0)
    ref = release_reference(fast, float(i_cut), "DOP853")
    back = t[int(np.flatnonzero((t > t_cut) & (x >= arm.stroke))[0])]
    assert back - t_cut == pytest.approx(ref.open_time, rel=1e-5)
    assert float(np.max(w["switch_voltage_v"][last_on + 1:])) == pytest.approx(
        supply + fw.diode_drop + fw.zener_voltage, rel=1e-9)


def test_split_decay_with_armature_and_current_mode_are_accepted(tmp_path):
    """All three used to be refused: split decay with an armature, and together with a
    current-mode hold (its hold on the slow path, the armature's release on the fast one:
    tests/test_armature_current_mode.py checks the hold and release against solve_ivp)."""
    path = _drive_file(tmp_path, "locker-latch-12v", '[freewheel]\nsplit_decay = true\n',
                       board="lab-m32-zener")
    assert run_cli("design", str(path), "--json").returncode == 0
    both = _drive_file(tmp_path, "locker-latch-12v", '[freewheel]\nsplit_decay = true\n',
                       current="hysteretic", board="lab-m32-zener", name="both")
    r = run_cli("design", str(both), "--json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["hold"]["regulation"] == "current" and doc["split_decay"] is not None
    assert _check(doc, "armature_releases")["ok"] and _check(doc, "armature_hold")["ok"]
