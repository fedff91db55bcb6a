"""The boosted peak on a drooping main supply with an eddy-current term or a flux-linkage
curve: the hold takes the coil over from the boost at the threshold and feeds from the
main bus behind ``R_s`` and the bulk capacitor, the boost converter drawing its recharge
from it too (coildrive/design/supply.py ``handover_bus``). References:

* ngspice (batch mode, ``ngspice -b``): the hold from the hand-over on a deck of its own
  (the source behind ``R_s`` onto the bulk capacitor, ``IC=``, ``tran ... uic``; the
  converter a constant current sink; the coil's magnetising branch starting at the
  hand-over's current, ``IC=``; the hold switch a ``SW`` with a ``PWL`` gate, on first;
  the freewheel diode the constant-drop one-way device of the other references,
  :func:`ngspice_run.knee`). With an eddy term the coil is the inductor with ``R_e``
  across it: the lowest bus within 1 % of the droop, and the bus at the model's moment of
  it. With a curve, the flux-controlled inductor of tests/test_flux_ngspice.py (ngspice
  integrates the coil voltage into the flux, a ``pwl`` table gives the current back),
  over the transient onto the hold's orbit: the bus never below the design's floor and
  the coil current never above the top it is built on.
* scipy's ``solve_ivp`` (Radau) on a curve with an eddy term written afresh, the curve by
  scipy's own ``PchipInterpolator``: the same bound and top over the transient.
* The boosted peak itself with either coil is checked against ngspice in
  tests/test_boost_eddy.py and tests/test_boost_flux.py; the eddy term's period-by-period
  hold against scipy's ``solve_ivp`` in tests/test_boost_droop.py.
* End to end: the design's JSON names the method, and a curve's floor is the hand-worked
  ``V_s - R_s (top + I_conv)`` of its own figures.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from conftest import run_cli
from ngspice_run import OPTIONS, knee, run
from test_boost_droop import C_BUS, DROOP, R_S, _droop
from test_boost_holds import COIL_TEMP, SUPPLY

EDDY = ('inductance = "6 mH"', 'inductance = "6 mH"\neddy_resistance = "200 ohm"')


def _curve_drive(tmp_path, *more) -> Path:
    """The boosted saturating fuel valve of tests/test_boost_flux.py on the drooping bus."""
    from test_boost_flux import _drive

    path = _drive(tmp_path, DROOP)
    for old, new in more:
        text = path.read_text()
        assert old in text
        path.write_text(text.replace(old, new, 1))
    return path


def _hold_deck(lp, i_m: float, i_conv: float, duty: float, period: float, periods: int,
               measures: list[str], coil: list[str]) -> str:
    """The hold from the hand-over: ``SUPPLY`` V behind ``R_S`` onto ``C_BUS`` (charged), the
    converter's ``i_conv`` A out of the bus, the loop of ``lp`` (sense, coil copper, the
    ``coil`` elements from ``n3`` to ``drain``, the switch's on-resistance), the hold switch
    on for ``duty`` of each ``period`` s from t = 0, the freewheel diode back to the bus."""
    r_sense, r_sw = 0.1, 0.035                        # lab-m32-zener's sense and switch
    pts = []
    for m in range(periods):
        t0 = m * period
        pts += ([] if m == 0 else [f"{t0 - 0.5e-9!r} 0", f"{t0 + 0.5e-9!r} 1"]) + [
            f"{t0 + duty * period - 0.5e-9!r} 1", f"{t0 + duty * period + 0.5e-9!r} 0"]
    return "\n".join([
        "* a hold from a boosted peak's hand-over on the drooping main bus",
        f"VS src 0 DC {SUPPLY!r}", f"RS src main {R_S!r}", f"CBUS main 0 {C_BUS!r} IC={SUPPLY!r}",
        f"ICONV main 0 DC {i_conv!r}", "VM main n1 DC 0", f"RSENSE n1 n2 {r_sense!r}",
        f"RCOIL n2 n3 {float(lp.r_on) - r_sense - r_sw!r}", *coil,
        "SH drain 0 gh 0 SW1", f"VGH gh 0 PWL(0 1 {' '.join(pts)})", knee("BFW", "drain", "main", float(lp.v_off)),
        f".model SW1 SW(VT=0.5 VH=0 RON={r_sw!r} ROFF=1e9)", OPTIONS, ".control",
        f"tran {period / 250!r} {periods * period!r} 0 {period / 250!r} uic", *measures,
        "quit 0", ".endc", ".end"]) + "\n"


def _hand_over(drive, lp):
    """``(magnetising A, terminal A)`` where the nominal boost reaches the nominal chain's
    threshold (the sensed, terminal current trips it)."""
    from coildrive.design.boost import nominal_trip
    from coildrive.model import boost as boost_model
    from coildrive.model.waveform import nominal_boost

    b = nominal_boost(drive, float(lp.r_on), lp.inductance)
    m = boost_model.of(b)
    t = float(m.threshold_time(nominal_trip(drive), b, sensed=True))
    i, v = m.state(t, b)
    return float(np.ravel(i)[0]), float(np.ravel(m.terminal(i, v, b))[0])


def test_eddy_hand_over_against_ngspice(tmp_path):
    from coildrive.config import load_drive
    from coildrive.design.supply import converter_current
    from coildrive.model import supply as bus_model
    from coildrive.model.circuit import loop

    drive = load_drive(_droop(tmp_path, "eddy", EDDY))
    lp = loop(drive, SUPPLY, COIL_TEMP)
    ell, r_e = float(lp.inductance.magnetising), 200.0
    i_m, i_hand = _hand_over(drive, lp)
    assert i_hand > i_m + 0.05                      # the sense leads the flux: the eddy term matters
    duty, period = 0.4, 1.0 / 20e3
    i_conv = float(converter_current(drive, SUPPLY, i_hand))
    bus = bus_model.bus(SUPPLY - R_S * i_conv, R_S, C_BUS, float(lp.r_on), ell, r_e)
    low, when, settled = (float(x) for x in bus_model.hold_from(bus, i_m, SUPPLY, duty, period,
                                                                float(lp.r_off), float(lp.v_off)))
    assert settled and SUPPLY - low > 0.02
    periods = 24
    assert when < (periods - 2) * period
    deck = _hold_deck(lp, i_m, i_conv, duty, period, periods,
                      [f"meas tran vlow MIN v(main) from=0 to={periods * period!r}",
                       f"meas tran vat FIND v(main) AT={when!r}"],
                      [f"LCOIL n3 drain {ell!r} IC={i_m!r}", f"REDDY n3 drain {r_e!r}"])
    res = run(tmp_path, "eddy-hold", deck)
    # ngspice: the droop to the lowest bus within 1 %, and the bus at the model's moment of it
    assert SUPPLY - res["vlow"] == pytest.approx(SUPPLY - low, rel=0.01), (res["vlow"], low)
    assert SUPPLY - res["vat"] == pytest.approx(SUPPLY - low, rel=0.01), (res["vat"], low)


def test_curve_floor_against_ngspice(tmp_path):
    """The curve's floor is a bound: over the hold's whole transient from the hand-over
    (six small-signal time constants) ngspice's bus stays above the bus driven by ``top``
    in every on-time and the converter's current all along
    (:func:`coildrive.model.supply.pulse_floor`) and its coil current below ``top`` -- the
    largest of the hand-over current, the first on-time from it on a stiff bus
    (:func:`coildrive.model.rl.rise_current` of the curve) and the stiff bus's orbit
    (:func:`coildrive.model.flux.orbit`)."""
    from test_flux_ngspice import _flux_netlist

    from coildrive.config import load_drive
    from coildrive.design.supply import converter_current
    from coildrive.model import flux, rl
    from coildrive.model import supply as bus_model
    from coildrive.model.circuit import loop

    drive = load_drive(_curve_drive(tmp_path))
    lp = loop(drive, SUPPLY, COIL_TEMP)
    coil = lp.inductance.with_scale(float(np.ravel(lp.inductance.scale)[0]))
    i_hand = _hand_over(drive, lp)[0]
    duty, period = 0.45, 1.0 / 100e3
    t_on, t_off = duty * period, (1.0 - duty) * period
    orb = flux.orbit(coil, t_on, t_off, SUPPLY, float(lp.r_on), float(lp.r_off), float(lp.v_off))
    first = float(rl.rise_current(t_on, i_hand, SUPPLY, float(lp.r_on), coil))
    top = max(i_hand, first, float(orb.i_max))
    i_conv = float(converter_current(drive, SUPPLY, top))
    floor = float(bus_model.pulse_floor(SUPPLY - R_S * i_conv, R_S, C_BUS, top, duty, period))
    tau = float(flux.small_signal(coil)) / float(lp.r_on)
    periods = int(6 * tau / period)
    end = periods * period
    deck = _hold_deck(lp, i_hand, i_conv, duty, period, periods,
                      [f"meas tran vlow MIN v(main) from=0 to={end!r}", f"meas tran imax MAX i(VM) from=0 to={end!r}",
                       f"meas tran iend FIND i(VM) AT={end - (1.0 - duty) * period - 1e-9!r}"],
                      [f"LCOIL n3 drain {float(flux.small_signal(coil))!r} IC=0"])
    deck = _flux_netlist(deck, lp, top=4.0)
    # the flux-controlled inductor starts at the hand-over's flux
    deck = deck.replace("CPHI phi 0 1 IC=0", f"CPHI phi 0 1 IC={float(coil.curve.psi(i_hand) * coil.scale)!r}")
    res = run(tmp_path, "curve-hold", deck)
    # ngspice: the run reached the stiff orbit's top (within 1 %: the bus sits lower)
    assert res["iend"] == pytest.approx(float(orb.i_max), rel=0.01), (res["iend"], orb.i_max)
    # ngspice: the coil never above the top (its table's step aside), the bus never below the floor
    assert res["imax"] <= top * (1 + 1e-4), (res["imax"], top)
    assert res["vlow"] >= floor - 1e-4, (res["vlow"], floor)
    # ... and it is close: its droop within 1.2x ngspice's (the converter's draw taken at
    # the plain floor, the coil at its top in every on-time)
    assert SUPPLY - floor <= 1.2 * (SUPPLY - res["vlow"]), (res["vlow"], floor)


def test_pulse_floor_hand_worked():
    """1 A in 45 % of each 10 us from 9 V behind 0.05 ohm and 1 mF (tau 50 us): the
    shortfall's periodic top ``0.05 (1 - e^-0.09)/(1 - e^-0.2)`` = 23.7406 mV (0.086069 /
    0.181269 x 50 mV); all on, the plain ``R_s i``; never on, none."""
    from coildrive.model.supply import pulse_floor

    assert float(pulse_floor(9.0, 0.05, 1e-3, 1.0, 0.45, 1e-5)) == pytest.approx(9.0 - 0.0237406, abs=1e-7)
    assert float(pulse_floor(9.0, 0.05, 1e-3, 1.0, 1.0, 1e-5)) == pytest.approx(8.95, abs=1e-12)
    assert float(pulse_floor(9.0, 0.05, 1e-3, 1.0, 0.0, 1e-5)) == 9.0


@pytest.mark.parametrize("coil,method", [("eddy", "the hold's PWM"), ("curve-eddy", "a floor: the bus driven")])
def test_design_takes_the_hand_over(tmp_path, coil, method):
    """End to end (the command line, and the library for the slower curve): the refusal is
    gone; an eddy term's hold runs exactly, a curve's (an eddy term too) takes the floor of
    its on-times' most current, hand-worked against the JSON's own figures (the
    converter's current at the floor: the quadratic's larger root)."""
    from coildrive.config import load_drive
    from coildrive.design import design

    extra = ("[coil]", '[coil]\neddy_resistance = "200 ohm"')
    if coil == "eddy":
        out = run_cli("design", str(_droop(tmp_path, "eddy", EDDY)), "--json")
        assert out.returncode in (0, 1), out.stderr
        d = json.loads(out.stdout)
    else:
        d = design(load_drive(_curve_drive(tmp_path, extra))).to_dict()
    s = d["supply"]
    assert s["lowest_bus_method"].startswith(method), s["lowest_bus_method"]
    assert s["lowest_bus_time_s"] >= d["boost"]["fastest_time_s"]
    assert s["lowest_bus_corner"].startswith("9 V")
    top = s["handover_current_a"]
    head = 9.0 - R_S * top
    i_conv = 5.0 / (0.5 * (head + np.sqrt(head**2 - 4 * R_S * 5.0)))
    if method.startswith("a floor"):
        # the on-times' floor: below the converter's drop alone, above the plain floor at
        # twice the hand-over current (the top is a hair above it at most)
        assert 9.0 - R_S * (2 * top + i_conv) <= s["lowest_bus_v"] < 9.0 - R_S * i_conv


def test_curve_with_eddy_term_floor_against_scipy():
    """A curve with an eddy term (no ngspice deck of that pair here): scipy's ``solve_ivp``
    (Radau) on the equations written afresh, period by period over six small-signal time
    constants from a hand-over below ``V/R`` (so the first on-time rises past it) --
    ``L_d(i_m) di_m/dt = v_m`` with the curve by scipy's own ``PchipInterpolator``; on,
    ``v = R (i_m + v_m/R_e) + v_m``; off, ``0 = R_off i + V_off + v_m`` while the terminal
    current ``i = i_m + v_m/R_e`` flows, else ``v_m = -R_e i_m``; the bus ``C dv/dt = (V_s -
    v)/R_s - i - I_conv`` (``i`` 0 while off). The bus never below the floor
    (:func:`coildrive.model.supply.pulse_floor` at the most current: the first on-time's and
    the orbit's, :func:`coildrive.model.eddy.orbit`, terminal and magnetising) and the
    terminal current never above that top."""
    from scipy.integrate import solve_ivp
    from scipy.interpolate import PchipInterpolator
    from test_boost_flux import CURVE_I, CURVE_PSI

    from coildrive.model import eddy, rl
    from coildrive.model.flux import FluxCoil, FluxCurve
    from coildrive.model.supply import pulse_floor

    v_s, r, r_off, v_off, r_e, i_conv, r_s, c = 9.0, 4.0, 3.9, 0.8, 150.0, 0.5, 0.05, 470e-6
    duty, period, i0 = 0.5, 1.0 / 20e3, 2.0
    t_on, t_off = duty * period, (1.0 - duty) * period
    e = eddy.EddyCoil(FluxCoil(FluxCurve(CURVE_I, CURVE_PSI), np.asarray(1.0)), np.asarray(r_e))
    first = max(i0, float(rl.rise_current(t_on, i0, v_s, r, e)))
    orb = eddy.orbit(e, t_on, t_off, v_s, r, r_off, v_off)
    top = max(first, float(eddy.terminal(first, v_s, r, r_e)), float(orb.i_max), float(orb.terminal_max))
    floor = float(pulse_floor(v_s - r_s * i_conv, r_s, c, top, duty, period))
    assert float(rl.rise_current(t_on, i0, v_s, r, e)) > i0        # the first on-time rises

    ld = PchipInterpolator(CURVE_I, CURVE_PSI).derivative()

    def on(t, y):            # y = (i_m, v)
        v_m = (y[1] - r * y[0]) * r_e / (r + r_e)
        return [v_m / float(ld(y[0])), ((v_s - y[1]) / r_s - (y[0] + v_m / r_e) - i_conv) / c]

    def off(t, y, blocked):
        v_m = -r_e * y[0] if blocked else -(r_off * y[0] + v_off) * r_e / (r_off + r_e)
        return [v_m / float(ld(y[0])), ((v_s - y[1]) / r_s - i_conv) / c]

    def zero(t, y, blocked):  # the terminal current (R_e i_m - V_off)/(R_off + R_e) reaches zero
        return y[0] - v_off / r_e
    zero.terminal, zero.direction = True, -1
    y, low, most = np.array([i0, v_s]), v_s, 0.0
    periods = int(6 * float(ld(0.0)) / r / period)
    for n in range(periods):
        t0 = n * period
        s = solve_ivp(on, (t0, t0 + t_on), y, method="Radau", rtol=1e-9, atol=1e-12, dense_output=True)
        ts = np.linspace(t0, t0 + t_on, 41)
        i_m, v = s.sol(ts)
        v_m = (v - r * i_m) * r_e / (r + r_e)
        low, most = min(low, float(v.min())), max(most, float((i_m + v_m / r_e).max()))
        y, t1 = s.y[:, -1], t0 + t_on
        i_top = y[0]
        if y[0] > v_off / r_e:
            s = solve_ivp(off, (t1, t0 + period), y, method="Radau", rtol=1e-9, atol=1e-12, events=zero,
                          args=(False,))
            y, t1 = s.y[:, -1], s.t[-1]
        if t1 < t0 + period:
            y = solve_ivp(off, (t1, t0 + period), y, method="Radau", rtol=1e-9, atol=1e-12, args=(True,)).y[:, -1]
    # scipy: onto the orbit (its top within 1 %), never above the top, never below the floor
    assert most <= top * (1 + 1e-6), (most, top)
    assert low >= floor - 1e-9, (low, floor)
    assert i_top == pytest.approx(float(orb.i_max), rel=0.01)
    # ... and close: the floor's droop within 1.1x scipy's
    assert v_s - floor <= 1.1 * (v_s - low), (low, floor)
