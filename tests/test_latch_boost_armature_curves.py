"""A latching coil with a moving armature over its set winding's open and seated flux-linkage
curves, pulsed from the boost capacitor ([hold] mode = "latch", [supply] boost, [armature],
``coil.flux_current/flux_linkage`` and ``coil.seated_current/seated_linkage``): the set pulse
is the plunger's run over the two curves from the boost capacitor until the current reaches
its threshold, the plunger at rest on the seat by then (coildrive/model/armature_runs.py
``pull_in`` with a trip, coildrive/design/latch_boost.py ``armature_pulse``), the tick after
it the seated curve held on the seat (coildrive/model/armature_boost.py ``seated_on``).

The drive (invented): the plunger valve of examples/latching/plunger-valve-boost-reset-
winding-12v.toml with its set winding's 12 / 20 mH replaced by two saturating curves
(``psi = F tanh(i / 0.8 A) + L_air i``: open 5 mWb and 5.75 mH, seated 10 mWb and 7.5 mH;
12 and 20 mH at zero current).

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the equations written
afresh here in the flux linkage ``psi`` (nothing of coildrive.model), each curve scipy's own
``PchipInterpolator`` through the file's table (Fritsch & Carlson 1980), inverted by
``brentq``, blended in the gap at constant flux ``i = i_c(psi) + (x / stroke) (i_o(psi) -
i_c(psi))`` (the series magnetic circuit, Fitzgerald, Kingsley & Umans, *Electric
Machinery*, ch. 1, from memory), the force the co-energy's ``(W_o(psi) - W_c(psi)) /
stroke`` (ch. 3, from memory; tests/test_latch_armature_curves.py's ``Curve``)::

    dpsi/dt = u - (R_coil + R_switch + R_sense + R_b) i      C_b du/dt = -i
    m dv/dt = preload + rate (stroke - x) + load - F(psi) - c v

at rest on the open stop until the force beats spring + load (an event), in flight to the
seat (an event; inelastic), at rest there until the current reaches the threshold (an event),
on for the tick until the driver sees it, then the freewheel ``dpsi/dt = -((R_coil +
R_sense) i + V_d)`` down the seated curve to zero (an event). Checked within 1e-5 relative
(the armature's share against the force's work ``int F (-v) dt`` 1e-4): the latest seat,
the fastest and the longest pulse, the capacitor at its end, the highest end current, the
energy from the boost ``C_b (V_b^2 - u^2) / 2``, the copper's and the freewheel diode's;
simulate's set pulse at 9 V, 20 degC; the compiled driver in the loop -> check (plumbing).
The same from an ideal boost (``u`` held at ``V_b``), and with 800 ohm across the set
winding's magnetising branch from either (the reference's ``R_e``: :func:`curve_reference`);
a threshold the terminal current crests over inside one integrator step trips the run when
solve_ivp's event does.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from conftest import EXAMPLES, run_cli
from test_latch_armature_curves import Curve, _table
from test_latch_boost_armature import (VALVE, boost_corner, device_checks, driver_in_the_loop,
                                      set_pulse_against_reference, simulated_set_pulse)
from test_reference_ngspice_latch import _corner

from coildrive.config import load_drive
from coildrive.design.latch import design_latch

OPEN = dict(flux=0.005, knee=0.8, air=0.00575)
SEATED = dict(flux=0.010, knee=0.8, air=0.0075)


def valve_on_curves(tmp_path):
    """The plunger valve with its set winding's open and seated curves."""
    text = VALVE.read_text().replace('board = "lab-m32-zener"',
                                     f'board = "{EXAMPLES.parent / "boards" / "lab-m32-zener"}.toml"')
    for old, new in (('inductance = "20 mH"         # plunger seated (= inductance_closed)\n',
                      _table("flux", **OPEN)),
                     ('inductance_open = "12 mH"    # plunger out (0.3 mm gap)\n', ""),
                     ('inductance_closed = "20 mH"  # plunger seated\n', ""),
                     ("inductance_tolerance = 0.15\n", "inductance_tolerance = 0.15\n" + _table("seated", **SEATED))):
        assert text.count(old) >= 1, old
        text = text.replace(old, new, 1)
    path = tmp_path / "plunger-valve-curves.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def valve(tmp_path_factory):
    path = valve_on_curves(tmp_path_factory.mktemp("plunger-curves"))
    drive = load_drive(path)
    assert drive.coil.seated_current and drive.armature.open_current
    return path, drive, design_latch(drive)


def curve_reference(drive, corner: str, high: bool | None, trip: float, late: float) -> dict:
    """solve_ivp of the module docstring's equations at the corner's label (the coil's
    temperature, the R and L factors: L scales both curves' flux) from the boost at its
    highest (``high``), lowest, or nominal (``None``), until the current reaches ``trip`` A
    and ``late`` s on, then the decay to zero; the keys of
    test_latch_boost_armature.reference. An ideal boost (no ``boost_capacitance``) holds
    ``u`` at ``V_b`` and gives ``V_b int i dt``. With the drive's eddy resistance ``R_e``
    across the magnetising branch (Kirchhoff, the flux ``psi`` its state): the terminal
    current ``i_t = (u + R_e i_m)/(R + R_e)`` on (``(R_e i_m - V_d)/(R_off + R_e)``
    freewheeling, then 0: the flux's tail through ``R_e`` alone takes the seated curve's
    field energy ``W_c(psi)`` then, hand-worked), the branch sees ``v_m = u - R i_t``
    (``-(R_off i_t + V_d)``), the threshold, ``int i^2 dt`` and the energies take ``i_t``,
    ``R_e`` takes ``v_m^2 / R_e``."""
    v_main, temp, rf, lf, r_coil, r, r_e, v_b, c_b = boost_corner(drive, corner, high)
    c, a, s, b = drive.coil, drive.armature, drive.supply, drive.board
    ideal = not c_b > 0   # a stiff boost: u stays at V_b
    op, st = Curve(lf, **OPEN), Curve(lf, **SEATED)
    stroke = a.stroke

    def cur(psi, x):
        i_c = st.i_of(psi)
        return i_c if x <= 0.0 else i_c + x / stroke * (op.i_of(psi) - i_c)

    def terminal(y):
        i_m = cur(y[0], y[1])
        return (y[3] + r_e * i_m) / (r + r_e) if math.isfinite(r_e) else i_m

    def force(psi):
        return (op.energy(psi) - st.energy(psi)) / stroke

    def opening(x):
        return a.spring_preload + a.spring_rate * (stroke - x) + a.load_force

    def rhs(free):   # rows: psi, x, v, u, int i_t^2 dt, the force's work, int i_t dt, R_e's loss
        def f(_t, y):
            psi, x, v, u = y[:4]
            i_t = terminal(y)
            v_m = u - r * i_t
            du = 0.0 if ideal else -i_t / c_b
            loss = v_m * v_m / r_e
            if not free:
                return [v_m, 0.0, 0.0, du, i_t * i_t, 0.0, i_t, loss]
            f_m = force(psi)
            return [v_m, v, (opening(x) - f_m - a.damping * v) / a.mass, du, i_t * i_t, -f_m * v, i_t, loss]
        return f

    def event(fn, direction):
        fn.terminal, fn.direction = True, direction
        return fn

    opts = dict(method="DOP853", rtol=1e-11, atol=[1e-14, 1e-13, 1e-11, 1e-11, 1e-14, 1e-14, 1e-14, 1e-14],
                dense_output=True)
    start = event(lambda _t, y: force(y[0]) - opening(stroke), 1)
    at_trip = event(lambda _t, y: terminal(y) - trip, 1)
    seat = event(lambda _t, y: y[1], -1)
    t_end = 1.0 if math.isfinite(trip) else 0.02   # (never there: 20 ms of the capacitor's ringing)
    y0 = [0.0, stroke, 0.0, v_b, 0.0, 0.0, 0.0, 0.0]
    runs = [solve_ivp(rhs(False), (0.0, t_end), y0, events=[start, at_trip], **opts)]
    assert runs[-1].t_events[0].size and not runs[-1].t_events[1].size, "precondition: the plunger starts first"
    runs.append(solve_ivp(rhs(True), (runs[-1].t[-1], t_end), runs[-1].y[:, -1], events=[seat, at_trip], **opts))
    if runs[-1].t_events[1].size:   # the threshold in flight: when, and the gap then
        return {"in_flight": float(runs[-1].t[-1]), "gap": float(runs[-1].y[1, -1])}
    assert runs[-1].t_events[0].size, "precondition: seated before the threshold"
    out = {"seat": float(runs[-1].t[-1])}
    y = runs[-1].y[:, -1].copy()
    y[1] = y[2] = 0.0   # (the force's work paid the impact's kinetic energy already)
    runs.append(solve_ivp(rhs(False), (out["seat"], t_end), y, events=[at_trip], **opts))
    sol = runs[-1]
    out["trip"] = float(sol.t[-1])
    if not math.isfinite(trip):   # the most current: each piece's dense output, finely sampled
        out["top"] = max(terminal(r.sol(t)) for r in runs for t in np.linspace(r.t[0], r.t[-1], 2001))
        return out
    sol = solve_ivp(rhs(False), (out["trip"], out["trip"] + late), sol.y[:, -1], **opts)
    psi, _, _, u, sq, work, q, eddy_on = sol.y[:, -1]
    out.update(i=terminal(sol.y[:, -1]), i_m=cur(psi, 0.0), u=u, work=work,
               supply_j=v_b * q if ideal else 0.5 * c_b * (v_b**2 - u**2))
    r_off, v_d = r_coil + b.sense.resistance, drive.freewheel.diode_drop   # the sense in the coil path
    clamp = drive.freewheel.type == "clamp"   # across the switch: from the main supply through it
    if clamp:
        v_d = drive.freewheel.clamp_voltage - v_main

    def off_current(psi):
        i_m = st.i_of(psi)
        return (r_e * i_m - v_d) / (r_off + r_e) if math.isfinite(r_e) else i_m

    def off(_t, y):   # rows: psi, int i_t^2 dt, int i_t dt, R_e's loss
        i_t = off_current(y[0])
        v_m = -(r_off * i_t + v_d)
        return [v_m, i_t * i_t, i_t, v_m * v_m / r_e]

    zero = event(lambda _t, y: off_current(y[0]) - (0.0 if math.isfinite(r_e) else 1e-15), -1)
    dec = solve_ivp(off, (0, 1.0), [psi, 0.0, 0.0, 0.0], events=[zero], method="DOP853", rtol=1e-11, atol=1e-14)
    q_d = dec.y[2, -1]
    tail = st.energy(float(dec.y[0, -1])) if math.isfinite(r_e) else 0.0   # the flux's tail through R_e
    out.update(copper_j=r_coil * (sq + dec.y[1, -1]), freewheel_j=(v_d + v_main if clamp else v_d) * q_d,
               main_j=v_main * q_d if clamp else 0.0, eddy_j=eddy_on + dec.y[3, -1] + tail, zero=float(dec.t[-1]))
    return out


def test_set_pulse_over_the_curves_against_solve_ivp(valve):
    _, drive, d = valve
    p, _ = set_pulse_against_reference(drive, d, curve_reference)
    assert p.armature_j > 0.02 * p.supply_j and p.eddy_j == 0.0


def test_with_a_clamp_across_the_switch_against_solve_ivp(valve, tmp_path):
    """A 60 V clamp across each switch on the stiff main supply: the decay down the seated
    curve runs from the main supply through the winding and the clamp (``V_clamp - V_main``
    in ``V_d``'s place; the clamp takes ``V_clamp int i dt``, the main supply gives
    ``V_main int i dt``), the run to it as above: the energies at the energy corner against
    solve_ivp within 1e-5 (the armature's share against the force's work 1e-4)."""
    path = tmp_path / "clamped.toml"
    text = valve[0].read_text()
    assert text.count('type = "diode"') == 1
    path.write_text(text.replace('type = "diode"', 'type = "clamp"\nclamp_voltage = "60 V"'))
    drive = load_drive(path)
    d = design_latch(drive)
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    p = d.latch.pulses[0]
    ref = curve_reference(drive, p.energy_corner, p.energy_corner.endswith("the boost at its highest"),
                          p.boost.trip_max_a, 1.0 / drive.board.tick.rate)
    for key, name in (("supply_j", "supply_j"), ("copper_j", "copper_j"), ("freewheel_j", "freewheel_j"),
                      ("main_supply_j", "main_j")):
        assert getattr(p, key) == pytest.approx(ref[name], rel=1e-5), key   # scipy solve_ivp
    assert p.armature_j == pytest.approx(ref["work"], rel=1e-4)
    assert p.main_supply_j > 0 and p.peak_switch_voltage_v == pytest.approx(60.0)   # held at the clamp


def test_monte_carlo_simulate_and_the_driver_in_the_loop(valve, tmp_path, monkeypatch):
    from coildrive.design.latch_montecarlo import latch_monte_carlo

    path, drive, d = valve
    # Monte Carlo: each sample's plunger run over the curves from its own boost to its own
    # threshold reading, inside the corners' box
    mc = latch_monte_carlo(d, 32, seed=3)
    assert mc["failures"]["set_not_seated"] == 0 and mc["failures"]["set_timed_out"] == 0
    assert mc["pulses"]["set"]["time_to_current_s"]["max"] <= d.latch.pulses[0].seat_time_s
    simulated_set_pulse(path, drive, d, d.latch.pulses[0].boost.threshold_code, tmp_path, ref=curve_reference)
    driver_in_the_loop(path, d, tmp_path, monkeypatch)


def test_the_most_current_a_run_that_never_trips_drives(valve):
    """A threshold of 2.4 A (3 x 0.8 A) at 9 V, the hot coil, R+7 %, L-15 %, the boost at its
    lowest: never reached, the plunger seats; the most current the run drives -- the hump
    before the seat, then the seated curve held on the seat and flown to the run's bound
    (``pull_in``'s ``seated_top``, here the larger: what the design's ``not reached`` line and
    ``reachable_current_a`` give) -- against solve_ivp's finely sampled run (the model's at
    its integrator's accepted steps: a little under the crest between them)."""
    from coildrive.design.boost_armature import boosted_params
    from coildrive.model.armature import SEATED, params_from_loop
    from coildrive.model.armature_runs import pull_in
    from coildrive.model.circuit import loop

    _, drive, _ = valve
    corner = "9 V, coil 120 degC, R+7%, L-15%"
    _, temp, rf, lf = _corner(corner)
    pb = boosted_params(drive, params_from_loop(drive.armature, loop(drive, 9.0, temp, rf, lf), lf), False)
    pin = pull_in(pb, trip=2.4)
    assert pin.status[0] == SEATED and not math.isfinite(pin.trip_time[0])
    assert pin.seated_top[0] > pin.hump_current[0], "precondition: the seated crest is the most"
    ref = curve_reference(drive, corner, False, math.inf, 0.0)
    assert pin.seated_top[0] == pytest.approx(ref["top"], rel=2e-3) and ref["top"] < 2.4   # scipy solve_ivp


@pytest.fixture(scope="module")
def ideal(valve, tmp_path_factory):
    """The same from an ideal boost (no boost capacitance: a stiff ``V_b``)."""
    path = tmp_path_factory.mktemp("ideal") / "ideal.toml"
    text = valve[0].read_text()
    assert text.count('boost_capacitance = "220 uF"') == 1
    path.write_text(text.replace('boost_capacitance = "220 uF"', "boost_capacitance = 0"))
    drive = load_drive(path)
    return path, drive, design_latch(drive)


def test_from_an_ideal_boost_against_solve_ivp(ideal, tmp_path):
    """The run over the curves from a stiff ``V_b`` (the boost capacitor's state left out):
    the set pulse against solve_ivp with ``u`` held at ``V_b`` within 1e-5 (the armature's
    share 1e-4); simulate's set pulse at 9 V, 20 degC against it."""
    path, drive, d = ideal
    p, _ = set_pulse_against_reference(drive, d, curve_reference)
    assert p.armature_j > 0.02 * p.supply_j and p.eddy_j == 0.0
    assert p.boost.lowest_boost_v == pytest.approx(drive.supply.boost * (1 - drive.supply.boost_tolerance))
    simulated_set_pulse(path, drive, d, p.boost.threshold_code, tmp_path, ref=curve_reference)
    device_checks(d, tmp_path)   # emulate -> check (plumbing)


def eddy_valve(valve_path, tmp_path, ideal: bool, margin: float = 1.95):
    """The valve on curves with 800 ohm across its set winding (``ideal``: no boost
    capacitance), its set threshold ``margin`` x 0.8 A (+ 42 V / 800 ohm)."""
    text = valve_path.read_text()
    for old, new in (("reference_temp = \"20 degC\"\n", 'reference_temp = "20 degC"\neddy_resistance = "800 ohm"\n'),
                     ("current_margin = 2           # its threshold", f"current_margin = {margin:g}  # its threshold"),
                     ('boost_capacitance = "220 uF"', 'boost_capacitance = "220 uF"' if not ideal else
                      "boost_capacitance = 0")):
        assert old in text, old
        text = text.replace(old, new, 1)
    path = tmp_path / f"eddy-{'ideal' if ideal else 'capacitor'}-{margin:g}.toml"
    path.write_text(text)
    drive = load_drive(path)
    assert drive.coil.eddy_resistance == 800.0 and not drive.latch.reset_coil.eddy_resistance
    return path, drive


@pytest.mark.parametrize("ideal", [False, True], ids=["capacitor", "ideal"])
def test_with_an_eddy_term_against_solve_ivp(valve, tmp_path, monkeypatch, ideal):
    """800 ohm across the set winding's magnetising branch, the threshold on the terminal
    current: the set pulse against solve_ivp with the branch written afresh (the module's
    reference, ``R_e``) within 1e-5 (the armature's share 1e-4), the eddy resistance's
    energy computed on its own (on, freewheeling, the flux's tail); from the capacitor
    ``simulate``'s set pulse, from an ideal boost the compiled driver in the loop -> check
    (plumbing: emulate with the driver's pulses)."""
    path, drive = eddy_valve(valve[0], tmp_path, ideal)
    d = design_latch(drive)
    p, _ = set_pulse_against_reference(drive, d, curve_reference)
    assert p.eddy_j > 0.02 * p.supply_j and p.armature_j > 0.02 * p.supply_j
    if ideal:
        driver_in_the_loop(path, d, tmp_path, monkeypatch)
    else:
        simulated_set_pulse(path, drive, d, p.boost.threshold_code, tmp_path, ref=curve_reference)


def test_a_crest_over_the_threshold_inside_a_step_trips(valve, tmp_path):
    """At 1.9 x 0.8 A from an ideal boost, the fastest corner (9 V, -30 degC, R-7%, L-15%,
    the boost at its highest), the terminal current's hump in flight rises 0.15 % over the
    threshold and falls back inside one of the integrator's steps: the run trips there (the
    step's cubic's crest), when solve_ivp's event does, within 1e-5, and the design is
    refused in one line (the plunger in flight when the pulse would end)."""
    from coildrive.design.boost_armature import boosted_params
    from coildrive.model.armature import TRIPPED, params_from_loop
    from coildrive.model.armature_runs import pull_in
    from coildrive.model.circuit import loop

    path, drive = eddy_valve(valve[0], tmp_path, True, margin=1.9)
    trip = 1.9 * 0.8 + drive.supply.boost * (1 + drive.supply.boost_tolerance) / 800.0
    corner = "9 V, coil -30 degC, R-7%, L-15%"
    ref = curve_reference(drive, corner, True, trip, 0.0)   # scipy solve_ivp
    assert "in_flight" in ref and ref["gap"] > 0.0
    _, temp, rf, lf = _corner(corner)
    pb = boosted_params(drive, params_from_loop(drive.armature, loop(drive, 9.0, temp, rf, lf), lf, 800.0), True)
    pin = pull_in(pb, trip=trip)
    assert pin.status[0] == TRIPPED and pin.trip_time[0] == pytest.approx(ref["in_flight"], rel=1e-5)
    assert pin.trip_state[1, 0] == pytest.approx(ref["gap"], rel=1e-4)
    r = run_cli("design", str(path))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "pull_in.current_margin" in r.stderr and "in flight" in r.stderr and "Traceback" not in r.stderr
