"""A moving armature over a saturating coil: the open and the seated flux-linkage curve
(coil.flux_current/flux_linkage and coil.seated_current/seated_linkage) against outside
references.

Sources named beside each check:

* the series magnetic circuit: ampere-turns = iron's (saturating) + the air gap's, whose
  reluctance ``x / (mu0 A)`` is linear in the gap -- A. E. Fitzgerald, C. Kingsley,
  S. D. Umans, *Electric Machinery*, ch. 1 (from memory); so at a fixed flux the current
  is affine in the gap, and our invented curves below are built that way;
* the co-energy force ``f = dW'(i, x)/dx`` at constant current, ``W' = int_0^i psi di'``
  -- the same book, ch. 3 (from memory);
* scipy: ``PchipInterpolator`` (Fritsch & Carlson 1980, the interpolant the model writes
  out) and its ``antiderivative``, ``brentq``, ``quad`` and ``solve_ivp`` (DOP853): the
  equations of motion written afresh here from the two points above, not the model's;
* energy conservation (first law; the energy method of ch. 3, from memory);
* with two straight curves the model must be today's linear ``L(x) = K / (x + g0)``
  armature (tests/test_armature_model.py checks that one against the same references).
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest

from conftest import EXAMPLES, first_switch_events, run_cli
from coildrive.model import magnet
from coildrive.model.armature import SEATED, OPENED
from coildrive.model.armature_runs import pull_in, release
from coildrive.model.armature_sim import simulate
from coildrive.model.flux import FluxCurve
from coildrive.model.gap_curves import GapCurves

from test_armature_model import latch

L_OPEN, L_SEATED, STROKE = 0.025, 0.090, 0.004
#: the iron's saturation term of the invented latch, A per Wb^5 (our choice: it doubles
#: the seated current at 0.06 Wb)
SAT = 6.43e5
PSI = np.linspace(0.0, 0.1, 11)                            # Wb


def seated_table():
    """Seated: the iron alone, ``i = psi / L_c + SAT psi^5`` (A)."""
    return PSI / L_SEATED + SAT * PSI**5, PSI


def open_table():
    """Open: the iron plus the full air gap, linear in psi (the series circuit)."""
    i_c, _ = seated_table()
    return i_c + PSI * (1.0 / L_OPEN - 1.0 / L_SEATED), PSI


def with_curves(p, open_=None, seated=None):
    """``p`` with the two curves (default: the saturating latch's), its ``l_closed``
    and ``beta`` the curves' small-signal fit; each point's scale from ``p.l_closed``."""
    open_ = open_ or open_table()
    seated = seated or seated_table()
    o, c = FluxCurve(*open_), FluxCurve(*seated)
    lc, beta = magnet.fit_gap(o.incremental(0.0), c.incremental(0.0), STROKE)
    scale = p.l_closed / (latch().l_closed[0])
    q = dataclasses.replace(p, l_closed=lc * scale, beta=np.full_like(p.beta, beta))
    return dataclasses.replace(q, curves=GapCurves(o, c, scale, q.stroke))


# --------------------------------------------------------------------------- linear
@pytest.mark.parametrize("damping", [0.4, 30.0], ids=["explicit", "stiff"])
def test_two_straight_curves_are_the_linear_armature(damping):
    """Straight curves at L_o and L_c give today's L(x) = L_c / (1 + beta x) model: the
    same pull-in, dip, release and energies to 1e-9 (the blend is the gap's reluctance),
    through the Dormand-Prince steps and, heavily damped, the Rosenbrock ones."""
    from coildrive.model.armature_flight import is_stiff

    lin = latch(v_on=np.array([10.8, 12.0, 13.2]), damping=damping,
                l_closed=latch().l_closed[0] * np.array([0.9, 1.0, 1.1]))
    assert bool(is_stiff(lin, 0.5)[0]) == (damping > 1), "precondition: the stepper of the case"
    amps = np.array([0.0, 1.0, 3.0])
    cur = with_curves(lin, (amps, L_OPEN * amps), (amps, L_SEATED * amps))
    a, b = pull_in(lin, peak_time=0.05), pull_in(cur, peak_time=0.05)
    assert list(a.status) == list(b.status) == [SEATED] * 3
    for f in ("start_current", "start_time", "seat_time", "dip_current", "impact_speed",
              "peak_end_current"):
        np.testing.assert_allclose(getattr(b, f), getattr(a, f), rtol=1e-9, err_msg=f)
    ra, rb = release(lin, 0.8), release(cur, 0.8)
    for f in ("unlatch_time", "open_time", "zero_time", "charge", "square"):
        np.testing.assert_allclose(getattr(rb, f), getattr(ra, f), rtol=1e-9, err_msg=f)
    np.testing.assert_allclose(cur.stay_current, lin.stay_current, rtol=1e-12)
    # the blend, pointwise: i(psi, x) = psi / L(x) and the force psi^2 beta / (2 L_c)
    x = np.array([0.0, 0.0013, STROKE])
    lam = np.array([0.01, 0.03, 0.05])
    l_x = magnet.inductance(x, lin.l_closed, lin.beta)
    np.testing.assert_allclose(cur.current(lam, x), lam / l_x, rtol=1e-13)
    np.testing.assert_allclose(cur.closing_force(lam),
                               magnet.closing_force(lam / l_x, x, lin.l_closed, lin.beta), rtol=1e-12)


# --------------------------------------------------------------------------- fresh equations
class Fresh:
    """The saturating latch written afresh with scipy: ``i(psi, x)`` by ``brentq`` on
    each curve's PCHIP, blended in the gap; the co-energy from the PCHIP's
    antiderivative; the force ``-dW/dx`` at constant flux."""

    def __init__(self, open_=None, seated=None, stroke=STROKE):
        """``open_``/``seated``: ``(currents A, fluxes Wb)`` tables (default the latch's);
        ``stroke`` m. Past a table's end each curve goes straight at its end slope (the
        model's extension)."""
        from scipy.interpolate import PchipInterpolator

        tables = {"o": open_table() if open_ is None else open_, "c": seated_table() if seated is None else seated}
        self.curves = {k: PchipInterpolator(*t) for k, t in tables.items()}
        self.coenergy = {k: c.antiderivative() for k, c in self.curves.items()}
        self.top = {k: float(t[0][-1]) for k, t in tables.items()}
        self.stroke = stroke

    def psi_of(self, k, i):
        """Curve ``k``'s flux (Wb) at ``i`` A >= 0, straight past its table at its end slope."""
        c, top = self.curves[k], self.top[k]
        return float(c(min(i, top))) + max(i - top, 0.0) * float(c.derivative()(top))

    def i_of(self, k, psi):
        from scipy.optimize import brentq

        a = abs(psi)
        if a == 0.0:
            return 0.0
        hi = 1.01 * self.top[k]
        while self.psi_of(k, hi) < a:
            hi *= 2.0
        i = brentq(lambda i: self.psi_of(k, i) - a, 0.0, hi, xtol=1e-16, rtol=1e-15)
        return math.copysign(i, psi)

    def current(self, psi, x):
        i_o, i_c = self.i_of("o", psi), self.i_of("c", psi)
        return i_c + x / self.stroke * (i_o - i_c)

    def energy(self, k, psi):
        """``W_k(psi) = psi i - W'_k(i)`` J (the field energy of curve k at flux psi)."""
        i = abs(self.i_of(k, psi))
        top = self.top[k]
        coenergy = float(self.coenergy[k](min(i, top)))
        if i > top:     # the straight extension: psi(top) + slope (i - top), integrated
            coenergy += (i - top) * (self.psi_of(k, top) + 0.5 * (i - top) * float(self.curves[k].derivative()(top)))
        return abs(psi) * i - coenergy

    def closing_force(self, psi):
        return (self.energy("o", psi) - self.energy("c", psi)) / self.stroke


@pytest.fixture(scope="module")
def fresh():
    return Fresh()


def test_the_force_is_the_coenergy_derivative_at_constant_current(fresh):
    """Fitzgerald & Kingsley ch. 3 (from memory): ``f = dW'(i, x)/dx`` at constant ``i``,
    ``W'(i, x) = int_0^i psi(i', x) di' = i psi - int_0^psi i(psi', x) dpsi'`` (by
    parts) -- by scipy's quad over the fresh blended current and a central difference in
    x; the model's closing force at the flux of (i, x) is minus that, to 1e-6."""
    from scipy.integrate import quad
    from scipy.optimize import brentq

    p = with_curves(latch())

    def psi_at(i, x):
        return brentq(lambda s: fresh.current(s, x) - i, 0.0, 0.1, xtol=1e-16, rtol=1e-15)

    def coenergy(i, x):   # int_0^i psi di' = i psi - int_0^psi i dpsi' (by parts)
        psi = psi_at(i, x)
        inside = [k for k in PSI if 0 < k < psi]
        return i * psi - quad(lambda s: fresh.current(s, x), 0.0, psi, epsabs=1e-15,
                              epsrel=1e-13, limit=200, points=inside or None)[0]

    for i, x in ((0.3, 0.003), (1.2, 0.002), (2.5, 0.0005)):
        h = 2e-6
        f_x = (coenergy(i, x + h) - coenergy(i, x - h)) / (2 * h)
        model = float(p.closing_force(psi_at(i, x))[0])
        assert model == pytest.approx(-f_x, rel=1e-6), (i, x)
        assert model > 0, "the force pulls the gap shut"


def _flight(fresh, p, on: bool, psi0: float, x0: float, t0: float, t_max: float):
    """solve_ivp (DOP853, rtol 1e-11) of the fresh equations from the moment the armature
    leaves its stop: ``dpsi/dt = V - R i`` (or ``-(R_off i + V_off)``),
    ``m dv/dt = spring + load - F_close - c v``; ends at a stop or zero flux."""
    from scipy.integrate import solve_ivp

    v_on, r_on, r_off, v_off = (float(a[0]) for a in (p.v_on, p.r_on, p.r_off, p.v_off))
    m, pre, rate, load, c = (float(a[0]) for a in (p.mass, p.preload, p.rate, p.load, p.damping))

    def rhs(_t, y):
        psi, x, v = y
        i = fresh.current(psi, x)
        dpsi = v_on - r_on * i if on else (-(r_off * i + v_off) if psi > 0 else 0.0)
        return [dpsi, v, (pre + rate * (STROKE - x) + load - fresh.closing_force(psi) - c * v) / m]

    def seat(_t, y):
        return y[1]
    seat.terminal, seat.direction = True, -1

    def opened(_t, y):
        return STROKE - y[1]
    opened.terminal, opened.direction = True, -1

    def zero(_t, y):
        return y[0]
    zero.terminal, zero.direction = True, -1

    return solve_ivp(rhs, (t0, t_max), [psi0, x0, 0.0], method="DOP853", rtol=1e-11,
                     atol=[1e-14, 1e-13, 1e-11], events=[seat, opened, zero])


def test_saturating_pull_in_and_release_match_scipy_on_fresh_equations(fresh):
    """Pull-in at 10.8 and 13.2 V (the move moment, the seat, the dip current, the
    impact speed) and the release from 0.9 A (unlatch, zero current) against
    solve_ivp on the fresh equations: within 1e-5 (the batched model runs at rtol 1e-7,
    as tests/test_armature_model.py checks the linear one)."""
    from scipy.integrate import solve_ivp
    from scipy.optimize import brentq

    p = with_curves(latch(v_on=np.array([10.8, 13.2])))
    b = pull_in(p)
    assert list(b.status) == [SEATED, SEATED]
    for k in range(2):
        pk = p.take(k)
        v, r = float(pk.v_on[0]), float(pk.r_on[0])
        need = float(pk.preload[0] + pk.load[0])
        # at rest on the open stop until the force beats spring preload + load
        psi_move = brentq(lambda s: fresh.closing_force(s) - need, 1e-6, 0.1, xtol=1e-16)

        def moved(_t, y):
            return y[0] - psi_move
        moved.terminal = True
        rise = solve_ivp(lambda _t, y: [v - r * fresh.i_of("o", y[0])], (0.0, 1.0), [0.0],
                         method="DOP853", rtol=1e-12, atol=1e-15, events=[moved])
        t_move = float(rise.t_events[0][0])
        assert b.start_time[k] == pytest.approx(t_move, rel=1e-5), k
        fl = _flight(fresh, pk, True, psi_move, STROKE, t_move, 1.0)
        t_seat, (psi_s, _, v_s) = float(fl.t_events[0][0]), fl.y_events[0][0]
        assert b.seat_time[k] == pytest.approx(t_seat, rel=1e-5), k
        assert b.dip_current[k] == pytest.approx(fresh.i_of("c", psi_s), rel=1e-5), k
        assert b.impact_speed[k] == pytest.approx(-v_s, rel=1e-5), k
    rel = release(p.take(0), 0.9)
    pk = p.take(0)
    stay = float(pk.opening_force(0.0)[0])
    psi_un = brentq(lambda s: fresh.closing_force(s) - stay, 1e-6, 0.1, xtol=1e-16)
    i_un = fresh.i_of("c", psi_un)
    assert rel.status[0] == OPENED
    assert float(pk.stay_current[0]) == pytest.approx(i_un, rel=1e-9)

    def unlatched(_t, y):
        return y[0] - psi_un
    unlatched.terminal = True
    r_off, v_off = float(pk.r_off[0]), float(pk.v_off[0])
    psi0 = float(fresh.curves["c"](0.9))
    decay = solve_ivp(lambda _t, y: [-(r_off * fresh.i_of("c", y[0]) + v_off)], (0.0, 1.0), [psi0],
                      method="DOP853", rtol=1e-12, atol=1e-15, events=[unlatched])
    t_un = float(decay.t_events[0][0])
    assert rel.unlatch_time[0] == pytest.approx(t_un, rel=1e-5)
    fl = _flight(fresh, pk, False, psi_un, 0.0, t_un, 1.0)
    assert len(fl.t_events[2]), "the current reaches zero in flight"
    assert rel.zero_time[0] == pytest.approx(float(fl.t_events[2][0]), rel=1e-5)


# --------------------------------------------------------------------------- energy
def test_energy_balance_of_a_full_actuation_with_a_saturating_coil(fresh):
    """First law (energy method, ch. 3, from memory): over on, seat, off and release to
    the open stop the supply's energy is copper + freewheel + spring/load work + damping
    + impact losses + the field's change (0 here: no flux at both ends), within 0.5 %;
    and up to just after the seat, where the field holds energy (its W(psi, 0) by quad
    over the fresh seated current), too."""
    from scipy.integrate import quad

    p = with_curves(latch())
    t_on = 0.03
    tr = simulate(p, [(t_on, True, 4000), (t_on + 1.0, False, 4000)], points=4000,
                  stop=lambda r: r.t >= t_on and r.state == "open" and not r.live)
    assert tr.stopped and tr.flux[-1] == 0.0
    seat = float(pull_in(p).seat_time[0])
    head = simulate(p, [(seat * 1.01, True, 4000)], points=4000)
    v_on, r_on, r_off, v_off = (float(a[0]) for a in (p.v_on, p.r_on, p.r_off, p.v_off))
    m, pre, rate, load, c = (float(a[0]) for a in (p.mass, p.preload, p.rate, p.load, p.damping))

    def balance(tr, field_end):
        t, i, x, v = tr.time, tr.current, tr.position, tr.velocity
        on = tr.switch_on == 1
        off = ~on | (t >= t_on)
        f = lambda y, mask: np.trapezoid(np.where(mask, y, 0.0), t)  # noqa: E731
        supply = v_on * f(i, on & (t <= t_on))
        copper = r_on * f(i * i, on & (t <= t_on)) + r_off * f(i * i, off & (t >= t_on))
        freewheel = v_off * f(i, off & (t >= t_on))
        potential = -(pre * x + rate * (STROKE * x - x * x / 2)) - load * x
        kinetic = 0.5 * m * v * v
        stops = sum(0.5 * m * (a**2 - b**2) for _, _, a, b in tr.impacts)
        terms = [copper, freewheel, field_end, potential[-1] - potential[0],
                 kinetic[-1] - kinetic[0], c * np.trapezoid(v * v, t), stops]
        return supply, terms

    supply, terms = balance(tr, 0.0)
    assert sum(terms) == pytest.approx(supply, rel=5e-3), (supply, terms)
    psi_end = float(head.flux[-1])
    w_end = quad(lambda s: fresh.i_of("c", s), 0.0, psi_end, epsabs=1e-15, epsrel=1e-13,
                 limit=200, points=[k for k in PSI if 0 < k < psi_end])[0]
    assert float(p.field_energy(psi_end, 0.0)[0]) == pytest.approx(w_end, rel=1e-9)
    supply, terms = balance(head, w_end)
    assert min(terms[0], terms[2], terms[6]) > 0, terms
    assert sum(terms) == pytest.approx(supply, rel=5e-3), (supply, terms)


# --------------------------------------------------------------------------- drive files
def _fmt(values) -> str:
    return ", ".join(f"{x:.9g}" for x in values)


def curve_drive(tmp_path, open_=None, seated=None, hold="0.3 A", release="0.15 A",
                armature=True):
    """The locker-latch example (invented) with the two curves in place of its
    inductances (``seated=False``: no seated curve), the hold and drop-out currents
    written out (``None``: left out)."""
    open_ = open_ or open_table()
    seated = seated_table() if seated is None else seated
    text = (EXAMPLES / "locker-latch-12v.toml").read_text()
    lines = [ln for ln in text.splitlines()
             if not ln.startswith(("inductance =", "inductance_open", "inductance_closed"))]
    coil = f"[coil]\nflux_current = [{_fmt(open_[0])}]\nflux_linkage = [{_fmt(open_[1])}]"
    if seated is not False:
        coil += f"\nseated_current = [{_fmt(seated[0])}]\nseated_linkage = [{_fmt(seated[1])}]"
    text = "\n".join(lines).replace("[coil]", coil, 1)
    if hold:
        text = text.replace("\n[hold]", f'\n[hold]\ncurrent = "{hold}"', 1)
    if release:
        text = text.replace("\n[armature]", f'\n[release]\ncurrent = "{release}"\n\n[armature]', 1)
    if not armature:
        text = text[:text.index("\n[armature]")]
    path = tmp_path / "latch-curves.toml"
    path.write_text(text + "\n")
    return path


def test_design_with_two_straight_curves_is_the_linear_design(tmp_path):
    """design --json of the locker-latch example and of the same file with straight
    curves at its two inductances (its derived hold and drop-out currents written out):
    the same pull-in, peak, hold and release figures to 1e-9."""
    lin = run_cli("design", str(EXAMPLES / "locker-latch-12v.toml"), "--json", cwd=EXAMPLES)
    a = json.loads(lin.stdout)
    amps = np.array([0.0, 1.0, 4.0])
    path = curve_drive(tmp_path, (amps, L_OPEN * amps), (amps, L_SEATED * amps),
                       hold=f"{a['hold']['current_a']!r} A",
                       release=f"{a['release']['dropout_current_a']!r} A")
    r = run_cli("design", str(path), "--json", cwd=EXAMPLES)
    assert r.returncode == lin.returncode, r.stderr
    b = json.loads(r.stdout)
    for sec, key in (("pull_in", "time_s"), ("pull_in", "peak_time_s"),
                     ("pull_in", "peak_end_current_max_a"), ("hold", "duty"),
                     ("hold", "min_mean_current_a"), ("hold", "max_mean_current_a"),
                     ("hold", "ripple_a"), ("release", "time_s"), ("release", "energy_j"),
                     ("armature", "seat_time_s"), ("armature", "dip_current_a"),
                     ("armature", "stroke_current_a"), ("armature", "stay_current_a"),
                     ("armature", "release_open_time_s")):
        assert b[sec][key] == pytest.approx(a[sec][key], rel=1e-9, abs=1e-15), (sec, key)
    assert [(c["name"], c["ok"]) for c in b["checks"] if c["name"].startswith("armature")] == \
        [(c["name"], c["ok"]) for c in a["checks"] if c["name"].startswith("armature")]


def test_design_simulate_and_emulate_a_saturating_latch(tmp_path):
    """The saturating latch end to end: design seats it at every corner and holds it,
    simulate shows the seat and the return to the open stop, the virtual bench device
    streams the actuation with the position switch closing then opening, and check
    passes a synthetic capture of it (the emulator and the synthetic captures share the
    model: plumbing, not numbers)."""
    from coildrive.config import load_drive
    from coildrive.design import design

    path = curve_drive(tmp_path)
    drive = load_drive(path)
    des = design(drive)
    checks = {c.name: c for c in des.checks}
    assert checks["armature_seats"].ok and checks["armature_hold"].ok, checks
    assert checks["armature_releases"].ok and des.ok, [c for c in des.checks if not c.ok]
    csv = tmp_path / "sim.csv"
    r = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "40", "--csv", str(csv),
                "--hold-time", "0.004", cwd=EXAMPLES)
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    assert "seated at" in r.stderr, r.stderr
    assert np.min(data["position_m"]) == 0.0 and data["position_m"][-1] == pytest.approx(STROKE)
    switch = first_switch_events(drive, des)
    assert switch[:2] == [1, 0], "seats during the peak, opens after the release"
    # check: a synthetic capture of the design passes; a stuck armature (the open curve
    # alone) fails on the missing dip
    from coildrive.bench.check import FAIL, check_capture
    from coildrive.bench.synth import synth_design_capture

    cap = synth_design_capture(des, actuations=2, hold_time=0.01, noise_codes=1.0, seed=11)
    report = check_capture(cap, des)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items]
    stuck = synth_design_capture(des, actuations=1, hold_time=0.01, noise_codes=1.0, seed=2,
                                 fault="stuck")
    assert {i.name: i.status for i in check_capture(stuck, des).items}["seated_time"] == FAIL


@pytest.mark.parametrize("kwargs, key", [
    ({"seated": False}, "coil.flux_current"),                   # [armature] needs the seated curve
    ({"armature": False}, "coil.seated_current"),               # seated curve without [armature]
    ({"seated": open_table()}, "coil.seated_linkage"),          # not above the open curve
    ({"hold": None}, "hold.current"),                           # not filled in from the curves
])
def test_curve_refusals_name_the_key(tmp_path, kwargs, key):
    path = curve_drive(tmp_path, **kwargs)
    r = run_cli("design", str(path), cwd=EXAMPLES)
    lines = r.stderr.strip().splitlines()
    assert r.returncode == 2 and len(lines) == 1 and key in lines[0], r.stderr


def test_fit_outputs_paste_into_a_drive_with_an_armature(tmp_path):
    """What ``fit --flux-curve --seated`` prints (the open curve's [coil] section, then
    the seated keys) pastes unchanged into a drive file with [armature]: the design
    reads the two tables as printed."""
    from coildrive.bench.flux_fit import FluxFit
    from coildrive.bench.release_fit import SeatedFit
    from coildrive.config import load_drive

    (io, po), (ic, pc) = open_table(), seated_table()
    open_fit = FluxFit(current_a=tuple(io), flux_wb=tuple(po), resistance_ohm=12.0,
                       loop_resistance_ohm=12.3, resistance_from="settled peak", supply_v=12.0,
                       coil_temp_c=20.0, residual=0.001, actuations=2)
    seat_fit = SeatedFit(current_a=tuple(ic), flux_wb=tuple(pc), resistance_ohm=12.0,
                         resistance_from="settled peak", freewheel="diode + resistor",
                         freewheel_voltage_v=0.8, freewheel_resistance_ohm=45.0, supply_v=12.0,
                         coil_temp_c=20.0, residual=0.002, actuations=2, seated_above_a=0.0)
    printed = open_fit.coil_section() + seat_fit.text()
    base = curve_drive(tmp_path).read_text()
    head, rest = base.split("[coil]", 1)
    rest = rest[rest.index("\n[supply]"):]
    path = tmp_path / "pasted.toml"
    path.write_text(head + printed + rest)
    d = load_drive(path)
    assert d.coil.flux_current == pytest.approx(tuple(io), rel=1e-4)
    assert d.coil.seated_linkage == pytest.approx(tuple(pc), rel=1e-4)
    assert d.armature.inductance_closed == pytest.approx(pc[1] / ic[1], rel=1e-4)


def test_cycle_with_two_curves_designs(tmp_path):
    """An on/off cycle ([duty], a heat capacity) with a moving armature on its open and
    seated curves used to crash ``design`` and ``simulate`` (a traceback) in the cycle's
    peak heat, which scaled the open inductance as a number; both now design (the CLI run,
    ~3 s, is left out here). The peak's heat runs through the open curve (the
    locker-latch's curves, at the loop's tolerance scale), which bounds the closing
    armature's rise from above (``L(x) di/dt <= V - R i``, common practice) and so heats
    at least as much as the seated curve's slower rise (checked at the cold, highest bus)."""
    from coildrive.config import load_drive
    from coildrive.design.thermal_cycle import peak_heat, peak_inductance
    from coildrive.model.circuit import loop
    from coildrive.model.flux import FluxCoil

    path = curve_drive(tmp_path)
    text = path.read_text().replace("\n[thermal]", '\n[duty]\non_time = "0.5 s"\n'
                                    'actuation_rate = "0.5 Hz"\n\n[thermal]\ncapacity = "10 J/K"', 1)
    path.write_text(text)
    drive = load_drive(path)
    lp = loop(drive, np.array([drive.supply.max]), np.array([20.0]), np.array([1.0]), np.array([1.0]))
    opened = peak_inductance(drive, lp)
    assert isinstance(opened, FluxCoil) and isinstance(lp.inductance, FluxCoil)
    assert opened.curve.psi(0.3) < lp.inductance.curve.psi(0.3)   # the open curve: less flux
    t = np.array([2e-3])
    seated_heat = peak_heat(dataclasses.replace(drive, armature=None), lp, t)
    assert np.all(peak_heat(drive, lp, t) >= seated_heat * (1 - 1e-9))
