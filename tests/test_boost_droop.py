"""The boosted peak on a drooping main supply (``[supply] boost`` with
``source_resistance`` and ``capacitance``): the peak runs from the boost capacitor while
the main supply's diode blocks, so the main bus sags only when the hold takes over at the
hand-over current, and the boost converter, fed from the main bus, draws its recharge
from it meanwhile (``supply.boost_power / boost_efficiency``). References:

* ngspice (batch mode, ``ngspice -b``): the circuit of tests/test_boost_holds.py with the
  main supply a source behind ``R_s`` onto the bulk capacitor (``IC=``, ``tran ... uic``),
  the converter's draw a constant current sink, the hold switch's gate a ``PWL`` PWM
  starting with an on-time at the hand-over. Checked within 1 % of the droop: the lowest
  bus over the hold's first periods, and the bus at the moment the model puts its lowest
  (``coildrive.model.supply.hold_from``, the on-times in closed form);
* scipy's ``solve_ivp`` (Radau) on the hold's equations written afresh, segment by
  segment (a complex pair, real eigenvalues, a current reaching zero in the off-times):
  the lowest bus within 1e-6 of the droop and its moment;
* hand-worked numbers: the converter's current at the bus's floor (the quadratic's
  larger root) and the floor a current-mode hold and a clamp take instead;
* gcc (strict) builds the reference driver of a passing drooping drive, which runs to the
  threshold in the loop; its emulated capture passes check (plumbing).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from conftest import run_cli
from ngspice_run import run
from test_boost import _variant
from test_boost_holds import COIL_TEMP, CLAMP, CURRENT, SUPPLY, _elements, _netlist

R_S, C_BUS = 0.05, 1e-3            # ohm, F: the main bus of the variants
DROOP = ('max = "16 V"', f'max = "16 V"\nsource_resistance = "{R_S} ohm"\ncapacitance = "1 mF"\n'
                         'boost_efficiency = 1')


def _droop(tmp_path, name="droop", *more):
    """The boosted fuel valve on a drooping main bus, with ``more`` ``(old, new)`` edits."""
    path = Path(_variant(tmp_path, name, *DROOP))
    for old, new in more:
        text = path.read_text()
        assert old in text
        path.write_text(text.replace(old, new, 1))
    return path


def test_hand_over_onto_the_drooping_bus_against_ngspice(tmp_path):
    from coildrive.config import load_drive
    from coildrive.design.boost import nominal_trip
    from coildrive.design.supply import converter_current
    from coildrive.model import boost as boost_model
    from coildrive.model import supply as bus_model
    from coildrive.model.circuit import loop
    from coildrive.model.waveform import nominal_boost

    drive = load_drive(_droop(tmp_path))
    lp = loop(drive, SUPPLY, COIL_TEMP)
    b = nominal_boost(drive, float(lp.r_on), float(lp.inductance))
    t_hand = float(boost_model.threshold_time(nominal_trip(drive), b))
    i_hand = float(boost_model.state(t_hand, b)[0])
    duty, period = 0.4, 1.0 / 20e3
    i_conv = float(converter_current(drive, SUPPLY, i_hand))
    bus = bus_model.bus(SUPPLY - R_S * i_conv, R_S, C_BUS, float(lp.r_on), float(lp.inductance))
    low, when, settled = (float(x) for x in bus_model.hold_from(bus, i_hand, SUPPLY, duty, period,
                                                                float(lp.r_off), float(lp.v_off)))
    assert settled and SUPPLY - low > 0.02      # a droop worth checking
    periods = 24
    assert when < (periods - 2) * period        # the lowest inside the window ngspice runs
    pts = ["0 0"]
    for m in range(periods):
        t0 = t_hand + m * period
        pts += [f"{t0 - 0.5e-9!r} 0", f"{t0 + 0.5e-9!r} 1", f"{t0 + duty * period - 0.5e-9!r} 1",
                f"{t0 + duty * period + 0.5e-9!r} 0"]
    gate = ["SH drain 0 gh 0 SW1", f"VGH gh 0 PWL({' '.join(pts)})"]
    main = [f"VS src 0 DC {SUPPLY!r}", f"RS src main {R_S!r}", f"CBUS main 0 {C_BUS!r} IC={SUPPLY!r}",
            # the converter's draw out of the bus, from the hand-over on
            f"ICONV main 0 PULSE(0 {i_conv!r} {t_hand - 0.5e-9!r} 1e-9 1e-9 1 2)",
            "CTOP top 0 1e-9"]                     # the rail's own 1 nF: the diodes' hand-offs converge
    end = t_hand + periods * period
    step = period / 500
    meas = [f"meas tran ihand FIND i(VM) AT={t_hand - 2e-9!r}",
            f"meas tran vlow MIN v(main) from={t_hand!r} to={end!r}",
            f"meas tran vat FIND v(main) AT={t_hand + when!r}"]
    res = run(tmp_path, "boost-droop", _netlist(_elements(drive), t_hand, gate, meas, step, end, main=main))
    # ngspice: the current the hold takes over (the boosted peak, checked in test_boost.py)
    assert res["ihand"] == pytest.approx(i_hand, rel=0.01), (res["ihand"], i_hand)
    # ngspice: the droop from the hand-over to the lowest bus within 1 %, and the bus at the
    # model's moment of the lowest within 1 % of the droop
    assert SUPPLY - res["vlow"] == pytest.approx(SUPPLY - low, rel=0.01), (res["vlow"], low)
    assert SUPPLY - res["vat"] == pytest.approx(SUPPLY - low, rel=0.01), (res["vat"], low)


def test_converter_current_hand_worked(tmp_path):
    """The converter's 5 W at the bus's floor with the coil at 1.2 A, 9 V behind 0.05 ohm:
    ``v_f^2 - (9 - 0.06) v_f + 0.05 x 5 = 0``, ``v_f = (8.94 + sqrt(8.94^2 - 1))/2 =
    8.911948`` V, so at most 5 / 8.911948 = 0.561045 A; at half the efficiency twice the power."""
    from coildrive.config import load_drive
    from coildrive.design.supply import converter_current

    drive = load_drive(_droop(tmp_path))
    assert drive.supply.converter_draw == 5.0
    assert float(converter_current(drive, 9.0, 1.2)) == pytest.approx(0.561045, rel=1e-6)
    half = load_drive(_droop(tmp_path, "half", ("boost_efficiency = 1", "boost_efficiency = 0.5")))
    assert half.supply.converter_draw == 10.0
    # v_f = (8.94 + sqrt(8.94^2 - 4 x 0.05 x 10))/2 = 8.827207 V: 10 / 8.827207 = 1.132861 A
    assert float(converter_current(half, 9.0, 1.2)) == pytest.approx(10 / ((8.94 + (8.94**2 - 2.0) ** 0.5) / 2), rel=1e-9)


def test_design_takes_the_hand_over(tmp_path):
    """End to end: the supply's figures come from the hand-over (the lowest bus after the
    peak, its current, the method), the converter's draw lowers it, and a current-mode
    hold and a clamp take the floor ``V_s - R_s (top + I_conv)``, hand-worked from the
    JSON's own hand-over current and hold top."""
    from coildrive.config import load_drive
    from coildrive.design import design

    def supply_of(d):
        return d, d["supply"], {c["name"]: c for c in d["checks"]}

    out = run_cli("design", str(_droop(tmp_path)), "--json")
    assert out.returncode in (0, 1), out.stderr
    d, s, checks = supply_of(json.loads(out.stdout))
    assert s["lowest_bus_method"].startswith("the hold's PWM") and s["converter_draw_w"] == 5.0
    assert s["lowest_bus_time_s"] > d["boost"]["fastest_time_s"]      # after the peak
    assert "hand-over" in checks["supply_droop"]["detail"]

    def designed(name, *change):
        return supply_of(design(load_drive(_droop(tmp_path, name, *change))).to_dict())
    _, s0, _ = designed("lossy", ("boost_efficiency = 1", "boost_efficiency = 0.5"))
    assert s0["lowest_bus_v"] < s["lowest_bus_v"]          # the converter's draw deepens the droop
    for name, change in (("current", CURRENT), ("clamp", CLAMP)):
        d, s, _ = designed(name, change)
        assert s["lowest_bus_method"].startswith("a floor")
        top = max(s["handover_current_a"], d["hold"]["max_mean_current_a"])
        # the floor at 9 V: at least the hand-over current and the converter's current there
        i_conv = 5.0 / (0.5 * ((9.0 - R_S * top) + np.sqrt((9.0 - R_S * top) ** 2 - 4 * R_S * 5.0)))
        assert s["lowest_bus_v"] <= 9.0 - R_S * (top + i_conv) + 1e-9


def _curve_eddy():
    """The fuel valve's 6 mH as tests/test_boost_flux.py's saturating curve with a 200 ohm
    eddy term (the edit for :func:`_droop`)."""
    from test_boost_flux import CURVE_I, CURVE_PSI

    curve = (f"flux_current = {[float(x) for x in CURVE_I]}\n"
             f"flux_linkage = {[f'{1e3 * x:.6g} mWb' for x in CURVE_PSI]}\n").replace("'", '"')
    return ('inductance = "6 mH"\n', curve + 'eddy_resistance = "200 ohm"\n')


@pytest.mark.parametrize("name,board,word", [
    # (an eddy term or a curve on one switch: tests/test_boost_droop_coils.py; a linear coil
    # on a full bridge: tests/test_boost_bridge_droop.py; a curve or an eddy term on a full
    # bridge on a supply that sinks: tests/test_boost_bridge_droop_coils.py; an eddy term on
    # a linear coil on one that cannot: tests/test_boost_bridge_no_sink_eddy.py)
    ("bridge-curve-eddy", "bridge-m32-fast", "flux-linkage curve"),
])
def test_still_refused(tmp_path, name, board, word):
    """A drooping main supply that cannot sink with a boost on a full bridge with an eddy
    term on a flux-linkage curve is refused in one line naming ``supply.sink``."""
    path = _droop(tmp_path, name, _curve_eddy())
    if board:
        path.write_text(path.read_text().replace("lab-m32-zener", board).replace("[supply]\n", "[supply]\nsink = false\n", 1))
    out = run_cli("design", str(path))
    assert out.returncode == 2 and "supply.sink" in out.stderr and word in out.stderr, out.stderr
    assert len(out.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize("r_s,c,duty,i0,v_off,r_e", [
    (10.0, 100e-6, 0.5, 1.2, 0.8, None),     # a complex pair: the bus rings as the coil draws
    (0.05, 1e-3, 0.4, 1.2, 0.8, None),       # real eigenvalues: the fixture's bus
    (2.0, 47e-6, 0.15, 1.5, 24.8, None),     # a Zener path: the current reaches zero in the off-times
    (10.0, 100e-6, 0.5, 1.2, 0.8, 200.0),    # an eddy term: the terminal current steps at each edge
    (2.0, 47e-6, 0.15, 1.5, 24.8, 150.0),    # ... and the flux dies through R_e once the diode blocks
])
def test_hold_from_against_scipy(r_s, c, duty, i0, v_off, r_e):
    """:func:`coildrive.model.supply.hold_from` against scipy's ``solve_ivp`` (Radau) on the
    equations written afresh, with the state the (magnetising) current ``i_m`` and the bus:
    the branch voltage ``v_m = L di_m/dt``, the terminal current ``i = i_m + v_m/R_e``
    (``R_e`` inf: no eddy term); on, ``v = R i + v_m`` and ``C dv/dt = (V_s - v)/R_s - i``;
    off, ``0 = R_off i + V_off + v_m`` while ``i > 0``, else ``i = 0`` (the diode blocks,
    ``v_m = -R_e i_m``), and ``C dv/dt = (V_s - v)/R_s``;
    the lowest bus over the run from a dense sampling refined by ``minimize_scalar``,
    within 1e-6 of the droop; the run long enough for the orbit to repeat."""
    from scipy.integrate import solve_ivp
    from scipy.optimize import minimize_scalar

    from coildrive.model import supply as bus_model

    v_s, r, ell, r_off, period = 9.0, 8.0, 6e-3, 7.0, 1.0 / 20e3
    g = 0.0 if r_e is None else 1.0 / r_e
    b = bus_model.bus(v_s, r_s, c, r, ell, r_e)
    low, when, settled = (float(x) for x in bus_model.hold_from(b, i0, v_s, duty, period, r_off, v_off))
    assert settled

    def on(t, y):       # v = R (i_m + g v_m) + v_m
        v_m = (y[1] - r * y[0]) / (1.0 + r * g)
        return [v_m / ell, ((v_s - y[1]) / r_s - (y[0] + g * v_m)) / c]

    def off(t, y, blocked):
        if blocked:     # the diode blocks: i = 0, the flux through R_e alone (or, without one, none)
            v_m = -y[0] / g if g > 0 else 0.0
        else:           # 0 = R_off (i_m + g v_m) + V_off + v_m
            v_m = -(r_off * y[0] + v_off) / (1.0 + r_off * g)
        return [v_m / ell, (v_s - y[1]) / r_s / c]

    def zero(t, y, blocked):    # the terminal current (i_m - g V_off)/(1 + R_off g) reaches zero
        return y[0] - g * v_off
    zero.terminal, zero.direction = True, -1
    y, best = np.array([i0, v_s]), (v_s, 0.0)
    n_periods = int(6 * max(ell / r, r_s * c) / period) + 20
    for n in range(n_periods):
        t0 = n * period
        s = solve_ivp(on, (t0, t0 + duty * period), y, method="Radau", rtol=1e-11, atol=1e-12,
                      dense_output=True)
        ts = np.linspace(s.t[0], s.t[-1], 201)
        vs = s.sol(ts)[1]
        j = int(np.argmin(vs))
        if vs[j] < best[0] + 1e-9:
            m = minimize_scalar(lambda t: s.sol(t)[1], bounds=(ts[max(j - 1, 0)], ts[min(j + 1, 200)]),
                                method="bounded", options={"xatol": 1e-13})
            best = min(best, (float(m.fun), float(m.x)), (float(vs[j]), float(ts[j])))
        y, t1 = s.y[:, -1], t0 + duty * period
        if y[0] > g * v_off:
            s = solve_ivp(off, (t1, t0 + period), y, method="Radau", rtol=1e-11, atol=1e-12,
                          events=zero, args=(False,))
            y, t1 = s.y[:, -1], s.t[-1]
            if s.status == 1 and g == 0:
                y = np.array([0.0, y[1]])
        if t1 < t0 + period:    # the rest of the off-time blocked
            s = solve_ivp(off, (t1, t0 + period), y, method="Radau", rtol=1e-11, atol=1e-12, args=(True,))
            y = s.y[:, -1]
        y = np.array([max(y[0], 0.0), y[1]])
    # scipy: the lowest bus within 1e-6 of the droop, and when (within a thousandth of a period)
    assert v_s - best[0] == pytest.approx(v_s - low, rel=1e-6), (best, low)
    assert best[1] == pytest.approx(when, abs=1e-3 * period), (best, when)


def test_a_run_that_has_not_settled_takes_the_floor(tmp_path, monkeypatch):
    """A hold whose orbit has not repeated within the run's periods (here cut to 2) takes
    the floor ``V_s - R_s (top + I_conv)`` where that is lower: the bound, not a figure
    from a run cut short."""
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model import supply as bus_model

    drive = load_drive(_droop(tmp_path))
    full = design(drive).supply
    monkeypatch.setattr(bus_model, "HOLD_PERIODS_MAX", 2)
    cut = design(drive).supply
    assert cut.lowest_bus_v < full.lowest_bus_v
    # the floor at the lowest supply lies below the hand-over current's drop alone
    assert cut.lowest_bus_corner.startswith("9 V") and cut.lowest_bus_v <= 9.0 - R_S * cut.handover_current_a


@pytest.mark.compiler
@pytest.mark.parametrize("eddy", [False, True], ids=["plain", "eddy"])
def test_a_passing_drooping_drive_runs_in_the_loop(tmp_path, eddy):
    """Plumbing (the emulator and the driver share the design's physics): with a 2 mohm
    source the lowest bus after the hand-over still reads the supply-min code, so the
    design passes; its emulated capture passes check, and the reference driver that
    ``firmware-driver`` writes builds (gcc, strict) and ends the peak at the threshold.
    With an eddy term too (an invented 1 kohm: the example's over-current code still
    reaches the terminal current's step)."""
    from test_boost_high_side import driver_runs_to_threshold, emulated_check_passes

    from coildrive.config import load_drive
    from coildrive.design import design

    more = [('inductance = "6 mH"', 'inductance = "6 mH"\neddy_resistance = "1 kohm"')] if eddy else []
    path = _droop(tmp_path, "stiffer", ('source_resistance = "0.05 ohm"', 'source_resistance = "2 mohm"'), *more)
    d = design(load_drive(path))
    assert d.ok and {c.name: c for c in d.checks}["supply_droop"].ok
    emulated_check_passes(tmp_path, path)
    assert "coil_port_boost" in driver_runs_to_threshold(tmp_path, path)


def test_closed_loop_first_on_time_against_scipy(tmp_path):
    """A closed loop starts its hold at its preload duty (the most it settles at anywhere)
    and lowers it while above its set-point: its first on-time from the hand-over rises
    past the hand-over current where that lies below ``V_s/R``. scipy's ``solve_ivp``
    (Radau) of that on-time written afresh at the lowest-bus corner (``L di/dt = v - R_on
    i``, ``C dv/dt = (V_s - v)/R_s - i - I_conv``, from the hand-over current and the bus at
    ``V_s``): the coil draws more than the hand-over current, and the design's floor lies
    under ``V_s - R_s (i + I_conv)`` at that most current (I_conv hand-worked: the
    quadratic's larger root)."""
    from scipy.integrate import solve_ivp

    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model.circuit import loop

    d = design(load_drive(_droop(tmp_path, "cl", ('frequency = ', 'regulation = "closed_loop"\nfrequency = '))))
    s = d.supply
    assert s.lowest_bus_corner == "9 V, -40 degC, coil -40 degC (cold), R-5%, L-10%"
    lp = loop(d.drive, 9.0, -40.0, 0.95, 0.9)
    r_on, ell = float(lp.r_on), float(lp.inductance)
    i0 = s.handover_current_a
    t_on = d.hold.closed_loop.preload_compare / d.timer.period_ticks / d.hold.frequency_hz
    head = 9.0 - R_S * i0
    i_conv = 5.0 / (0.5 * (head + np.sqrt(head**2 - 4 * R_S * 5.0)))
    sol = solve_ivp(lambda t, y: [(y[1] - r_on * y[0]) / ell, ((9.0 - y[1]) / R_S - y[0] - i_conv) / C_BUS],
                    (0.0, t_on), [i0, 9.0], method="Radau", rtol=1e-10, atol=1e-13)
    most = float(sol.y[0].max())
    head = 9.0 - R_S * most
    i_conv = 5.0 / (0.5 * (head + np.sqrt(head**2 - 4 * R_S * 5.0)))
    # scipy: the first on-time draws past the hand-over current; the floor covers it
    assert most > i0 + 1e-3, (most, i0)
    assert s.lowest_bus_v <= 9.0 - R_S * (most + i_conv) + 1e-9, (s.lowest_bus_v, most)
