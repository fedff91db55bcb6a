"""An eddy-current term with a moving armature: the batched runs and the one-point
simulation against scipy, the energy balance of a full actuation, and the drive file
through design, simulate and check.

Sources beside each check: scipy's ``solve_ivp`` (Radau, with terminal events) on the
circuit and armature equations written afresh below (Kirchhoff's laws at the branch
node, the freewheel diode blocking below zero terminal current, the co-energy force
``F = i_m^2 |dL/dx| / 2`` of Fitzgerald & Kingsley, *Electric Machinery*, ch. 3 --
chapter from memory); the energy balance is the first law (supply = copper + freewheel
element + eddy resistance + spring/load work + damping + impact loss + change of field
energy).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from test_eddy_coil import check_synthetic, firmware_actuation
from coildrive.model import magnet
from coildrive.model.armature import OPENED, SEATED, ArmatureParams
from coildrive.model.armature_runs import pull_in, release
from coildrive.model.armature_sim import simulate

# invented: the locker latch of examples/ at 12 V with a warm coil, a 12 V Zener-like
# freewheel drop and an eddy resistance that blocks the freewheel while the plunger flies
V, R_ON, R_OFF, V_OFF, R_E = 12.0, 12.3, 45.0, 12.0, 150.0
STROKE, MASS, PRE, RATE, LOAD, DAMP = 0.004, 0.018, 0.35, 100.0, 0.15, 0.4
LC, BETA = magnet.fit_gap(0.025, 0.090, STROKE)
PEAK = 0.03
I_OFF = 0.9


def params(**over) -> ArmatureParams:
    values = dict(v_on=V, r_on=R_ON, r_off=R_OFF, v_off=V_OFF, l_closed=LC, beta=BETA,
                  stroke=STROKE, mass=MASS, preload=PRE, rate=RATE, load=LOAD, damping=DAMP,
                  restitution=0.0, eddy=R_E)
    values.update(over)
    return ArmatureParams.make(**values)


# ------------------------------------------------------------- the reference, afresh
class Linear:
    """``L(x) = L_c / (1 + beta x)``: ``i_m = psi / L(x)``, the co-energy force
    ``i_m^2 |dL/dx| / 2``, the seated flux ``L_c i``."""

    def current(self, psi, x):
        return psi * (1.0 + BETA * x) / LC

    def closing_force(self, psi):
        return 0.5 * psi * psi * BETA / LC

    def seated_flux(self, i):
        return LC * i


class Saturating:
    """The saturating latch of tests/test_armature_curves.py written afresh there with
    scipy (PCHIP curves, brentq, the co-energy from the antiderivative)."""

    def __init__(self):
        from test_armature_curves import Fresh
        self.f = Fresh()

    def current(self, psi, x):
        return self.f.current(psi, x)

    def closing_force(self, psi):
        return self.f.closing_force(psi)

    def seated_flux(self, i):
        return float(self.f.curves["c"](i))


def _terminal(coil, psi, x, on):
    """Terminal current: the loop (V, R) with R_E across the branch; off, the diode
    blocks where the current would go negative."""
    im = coil.current(psi, x)
    if on:
        return (V + R_E * im) / (R_ON + R_E)
    return max((R_E * im - V_OFF) / (R_OFF + R_E), 0.0)


def _dpsi(coil, psi, x, on):
    i = _terminal(coil, psi, x, on)
    if on:
        return V - R_ON * i
    return -V_OFF - R_OFF * i if i > 0 else -R_E * coil.current(psi, x)   # blocked: via R_E


def _open_force(x):
    return PRE + RATE * (STROKE - x) + LOAD


def _solve(fun, t0, y0, t1, events, method):
    from scipy.integrate import solve_ivp

    for e in events:
        e.terminal = True
    sol = solve_ivp(fun, (t0, t1), y0, method=method, rtol=1e-11, atol=1e-14, events=events)
    assert sol.status in (0, 1), sol.message
    for k, ev in enumerate(sol.t_events):
        if len(ev):
            return k, float(ev[0]), sol.y_events[k][0]
    return None, float(sol.t[-1]), sol.y[:, -1]


def _fly(coil, on):
    def fun(_t, y):
        psi, x, v = y
        return [_dpsi(coil, psi, x, on), v, (_open_force(x) - coil.closing_force(psi) - DAMP * v) / MASS]
    return fun


def reference_pull_in(coil, method):
    """(move, seat, terminal current at PEAK, magnetising current at PEAK, terminal
    current at the seat: the dip), s and A."""
    def starts(_t, y):
        return coil.closing_force(y[0]) - _open_force(STROKE)
    _, t_move, y = _solve(lambda _t, y: [_dpsi(coil, y[0], STROKE, True)], 0.0, [0.0], 1.0,
                          [starts], method)

    def seat(_t, y):
        return y[1]
    seat.direction = -1
    _, t_seat, y = _solve(_fly(coil, True), t_move, [y[0], STROKE, 0.0], 1.0, [seat], method)
    i_dip = _terminal(coil, y[0], 0.0, True)
    _, _, y = _solve(lambda _t, y: [_dpsi(coil, y[0], 0.0, True)], t_seat, [y[0]], PEAK, [], method)
    return t_move, t_seat, _terminal(coil, y[0], 0.0, True), coil.current(y[0], 0.0), i_dip


def reference_release(coil, method):
    """(unlatch, freewheel blocks, at rest open) in s from the turn-off at I_OFF A of
    magnetising current, seated."""
    def unlatch(_t, y):
        return coil.closing_force(y[0]) - _open_force(0.0)
    unlatch.direction = -1

    def blocks(_t, y):
        return coil.current(y[0], 0.0) - V_OFF / R_E
    blocks.direction = -1
    k, t_un, y = _solve(lambda _t, y: [_dpsi(coil, y[0], 0.0, False)], 0.0,
                        [coil.seated_flux(I_OFF)], 1.0, [unlatch, blocks], method)
    assert k == 0, "the plunger unlatches while the freewheel still conducts"

    def blocked(_t, y):
        return R_E * coil.current(y[0], y[1]) - V_OFF
    blocked.direction = -1

    def opened(_t, y):
        return STROKE - y[1]
    opened.direction = -1
    k, t_zero, y = _solve(_fly(coil, False), t_un, [y[0], 0.0, 0.0], 1.0, [blocked, opened], method)
    assert k == 0 and 0.0 < y[1] < STROKE, "the freewheel blocks in flight (the kink)"
    k, t_open, _ = _solve(_fly(coil, False), t_zero, y, 1.0, [opened], method)
    assert k == 0
    return t_un, t_zero, t_open


# ------------------------------------------------------------------------ the model
@pytest.mark.parametrize("curve", [False, True], ids=["linear", "saturating"])
def test_pull_in_and_release_match_scipy(curve):
    """The batched runs (Dormand-Prince, the freewheel's block as an event) against
    scipy (Radau; DOP853 for the saturating coil's brentq-based currents) on the
    equations written afresh above: the moment the plunger moves and seats, the terminal
    and magnetising current at the end of the peak, the unlatch, the freewheel's block
    (zero terminal current) and the open moment, within 1e-5."""
    p, coil, method = params(), Linear(), "Radau"
    if curve:
        from test_armature_curves import with_curves
        p, coil, method = with_curves(params()), Saturating(), "DOP853"
        assert p.eddy is not None and p.curves is not None
    t_move, t_seat, i_term, i_mag, i_dip = reference_pull_in(coil, method)
    b = pull_in(p, peak_time=PEAK)
    assert b.status[0] == SEATED
    assert b.start_time[0] == pytest.approx(t_move, rel=1e-5)
    assert b.seat_time[0] == pytest.approx(t_seat, rel=1e-5)
    assert b.peak_end_current[0] == pytest.approx(i_mag, rel=1e-5)
    assert p.terminal(b.peak_end_current, True)[0] == pytest.approx(i_term, rel=1e-5)
    assert b.dip_current[0] == pytest.approx(i_dip, rel=1e-5), "the dip the sense resistor sees"
    t_un, t_zero, t_open = reference_release(coil, method)
    r = release(p, I_OFF)
    assert r.status[0] == OPENED
    assert r.unlatch_time[0] == pytest.approx(t_un, rel=1e-5)
    assert r.zero_time[0] == pytest.approx(t_zero, rel=1e-5)
    assert r.open_time[0] == pytest.approx(t_open, rel=1e-5)
    # the one-point simulation (and its scipy path) through on and off agree with the
    # batch released from the current at the end of the peak
    r = release(p, b.peak_end_current)
    t_zero, t_open = r.zero_time[0], r.open_time[0]
    for method in ("numpy", "Radau"):
        tr = simulate(p, [(PEAK, True), (PEAK + 1.0, False)], method=method,
                      stop=lambda r: r.t >= PEAK and r.state == "open" and not r.live)
        ev = {name: t for t, name in tr.log}
        assert ev["seat"] == pytest.approx(t_seat, rel=1e-5), method
        assert ev["zero"] - PEAK == pytest.approx(t_zero, rel=1e-5), method
        assert ev["open"] - PEAK == pytest.approx(t_open, rel=1e-5), method


def test_without_the_term_the_flux_dies_with_the_current():
    """The eddy term slows the rise (the branch sees V R_e / (R + R_e) behind R || R_e)
    and holds the flux up after the freewheel blocks: a later seat, a later open."""
    a, b = params(), params(eddy=None)
    assert pull_in(a).seat_time[0] > pull_in(b).seat_time[0]
    assert release(a, I_OFF).open_time[0] > release(b, I_OFF).open_time[0]
    assert b.eddy is None and b.same_points(params(eddy=0.0))


@pytest.mark.parametrize("curve", [False, True], ids=["linear", "saturating"])
def test_energy_balance_of_a_full_actuation(curve):
    """First law over on, seat, off, release to the open stop: what the supply gives
    goes into the copper, the freewheel element, the eddy resistance, the spring and
    load, the damping, the impact and the field left at the end, within 0.1 % (the field
    energy of the curves: their W(psi, x), checked by quad in test_armature_curves.py)."""
    p = params()
    if curve:
        from test_armature_curves import with_curves
        p = with_curves(p)
    tr = simulate(p, [(PEAK, True, 4000), (PEAK + 1.0, False, 4000)], points=4000,
                  stop=lambda r: r.t >= PEAK and r.state == "open" and not r.live)
    assert tr.stopped and tr.magnetising_current is not None
    t, i, im, x, v = tr.time, tr.current, tr.magnetising_current, tr.position, tr.velocity
    k = int(np.searchsorted(t, PEAK, side="right")) - 1      # the last on sample
    q, s = tr.charge, tr.square                              # exact integrals of i, i^2
    supply = V * q[k]
    copper = R_ON * s[k] + R_OFF * (s[-1] - s[k])
    freewheel = V_OFF * (q[-1] - q[k])
    ie = i - im                   # the eddy branch's current (each switch edge: two rows)
    eddy = R_E * np.trapezoid(ie**2, t)
    field = p.field_energy(tr.flux, x) if curve else 0.5 * tr.flux * im   # linear: psi i_m / 2
    potential = -(PRE * x + RATE * (STROKE * x - x * x / 2)) - LOAD * x
    kinetic = 0.5 * MASS * v * v
    stops = sum(0.5 * MASS * (a**2 - b**2) for _, _, a, b in tr.impacts)
    terms = [copper, freewheel, eddy, field[-1] - field[0], potential[-1] - potential[0],
             kinetic[-1] - kinetic[0], DAMP * np.trapezoid(v * v, t), stops]
    assert eddy > 0.01 * supply and field[-1] > 0, terms
    assert sum(terms) == pytest.approx(supply, rel=1e-3), (supply, terms)   # measured 3e-6


# ------------------------------------------------------------------- the drive file
def _latch_with_eddy(tmp_path, extra='eddy_time_constant = "0.4 ms"'):
    text = (EXAMPLES / "locker-latch-12v.toml").read_text()
    text = text.replace("inductance_tolerance = 0.10", f"inductance_tolerance = 0.10\n{extra}")
    board = next(line for line in text.splitlines() if line.startswith("board = "))
    name = board.split('"')[1]
    text = text.replace(board, f'board = "{EXAMPLES.parent / "boards" / name}.toml"')
    path = tmp_path / "latch-eddy.toml"
    path.write_text(text)
    return path


def test_design_simulate_and_check_with_an_armature(tmp_path):
    """design --json, simulate --csv and check of a synthetic capture on the example
    latch with an eddy term: the pull-in (the plunger seats) comes later than without
    it, the CSV carries the magnetising current, and the capture passes its design."""
    path = _latch_with_eddy(tmp_path)
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    plain = json.loads(run_cli("design", str(EXAMPLES / "locker-latch-12v.toml"), "--json").stdout)
    assert doc["pull_in"]["time_s"] > plain["pull_in"]["time_s"]
    assert doc["eddy"]["block_current_a"] > 0
    csv = tmp_path / "a.csv"
    r = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    head = csv.read_text().splitlines()[0].split(",")
    assert "position_m" in head and head[-1] == "magnetising_current_a", head
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    i, m = data[:, 1], data[:, -1]
    assert i[0] > 0 and m[0] == 0.0, "the switch-on step of the terminal current"
    assert i[-1] == 0.0 and m[-1] > 0, "the flux outlasts the terminal current"
    assert np.all(np.diff(data[:, 0]) > 0), "time rises strictly (each edge's second row 1 ns on)"
    check_synthetic(tmp_path, path, 12.0)


def test_compiled_driver_pulls_in_without_a_fault(tmp_path):
    """The reference C driver in the loop (gcc) on the example latch with an eddy term:
    the armature model's pull-in (its magnetising current, the terminal current sensed)
    ends the peak and turns off with no fault -- the shorted-turns check is timed on the
    open coil's branch, not the seated one's."""
    from conftest import require_tool

    require_tool("gcc")
    from coildrive.bench.messages import Event, EventKind

    path = _latch_with_eddy(tmp_path)
    d, msgs = firmware_actuation(tmp_path, path, 12.0)
    assert d.to_dict()["rise_check"]["inductance_h"] == pytest.approx(0.025)
    kinds = [m.kind for m in msgs if isinstance(m, Event)]
    assert EventKind.FAULT not in kinds and EventKind.PEAK_END in kinds and EventKind.OFF in kinds, kinds


def test_the_cycles_peak_heat_bounds_the_moving_armatures(tmp_path):
    """With an on/off cycle the peak's heat is a bound (design/thermal_cycle.py): at
    least the copper + eddy loss of the armature model's own peak (first law, as above),
    and not far above it."""
    from coildrive.config import load_drive
    from coildrive.design.thermal_cycle import peak_heat
    from coildrive.model.armature import params_from_loop
    from coildrive.model.circuit import loop

    drive = load_drive(_latch_with_eddy(tmp_path))
    r_e = drive.coil.eddy_resistance
    for supply, temp, peak in ((10.8, 80.0, 0.03), (13.2, -20.0, 0.004)):
        lp = loop(drive, supply, temp)
        p = params_from_loop(drive.armature, lp, 1.0, r_e)
        tr = simulate(p, [(peak, True, 4000)], points=4000)
        heat = float(lp.r_coil) * tr.square[-1] + r_e * np.trapezoid(
            (tr.current - tr.magnetising_current) ** 2, tr.time)
        bound = float(peak_heat(drive, lp, peak))
        assert heat <= bound <= 1.5 * heat, (supply, heat, bound)


def test_live_tuning_holds_on_the_magnetising_current(tmp_path):
    """Live tuning's model of the latch with an eddy term: the hold's force current is the
    magnetising current's RMS (the terminal RMS, higher by the eddy branch's share, would
    overstate the force), and a bench dropping out at the model's stay current recommends
    what the offline sweep at the file's frequency recommends."""
    from coildrive.config import load_drive
    from coildrive.tune.live_model import bench_point, hold_figures, model_stay_current, recommend
    from coildrive.tune.sweep import TuneOptions, tune

    d = load_drive(_latch_with_eddy(tmp_path))
    point = bench_point(d)
    f = d.hold.frequency
    hf = hold_figures(d, point, [0.4], f)
    assert float(hf.force_a[0]) < float(hf.mean_a[0]) * 1.2
    from coildrive.model.circuit import loop
    from coildrive.model.pwm import pwm_steady_state
    lp = loop(d, point.supply_v, point.coil_temp_c, 1.0, 1.0)
    ss = pwm_steady_state(np.array([0.4]), f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    assert float(ss.magnetising_rms[0]) < float(ss.rms[0])
    assert float(hf.force_a[0]) == pytest.approx(float(ss.magnetising_rms[0]), rel=1e-3)
    live = recommend(d, point, model_stay_current(d, point))
    # the sensed ripple carries the eddy branch's step at each edge ((V + V_off) / (R + R_e),
    # ~85 mA here), above the sweep's default ripple limit: allow it
    off = tune(d, TuneOptions(min_frequency=f, max_frequency=f, levels=1, top=1, max_ripple=0.2)).recommendation
    assert live.hold_current_a == pytest.approx(off.hold_current_a, rel=1e-9)
    assert (live.period_ticks, live.compare_ticks) == (off.period_ticks, off.compare_ticks)
