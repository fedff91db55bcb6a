"""A saturating coil (a flux-linkage curve) on the drooping bus (``[supply]
source_resistance`` + ``capacitance``) against the outside world.

The circuit (coildrive/model/flux_bus.py): source ``V_s``, its resistance ``R_s``, the bulk
capacitor ``C``, the coil loop ``R`` and the curve ``psi(i)``, switched on at ``t = 0``;
the model steps it by ETDRK4 with events at the table's points. References:

* ngspice (batch mode, ``ngspice -b``): the drooping bus's netlist of
  tests/test_supply_droop.py with the flux-controlled inductor of
  tests/test_flux_ngspice.py in place of ``L1`` (a G source integrating the coil voltage
  into a 1 F capacitor, ``V(phi) = psi``; a B source ``I = pwl(V(phi), ...)``, the curve's
  inverse at 2,001 currents; ngspice manual ch. 4 and 5.1, from memory). ngspice knows
  nothing of the model's stepping;
* scipy's ``solve_ivp`` (Radau, rtol 1e-12) of the two equations written afresh here,
  restarted at each table point (its events), so that no step of the reference crosses
  a kink of the interpolant;
* a straight-line curve is the linear coil: coildrive/model/supply.py's closed form.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from test_supply_droop import simulated_peak, spice_droop

from coildrive.model import flux, flux_bus
from coildrive.model import supply as bus_model

#: The saturating valve of examples/saturating-valve-24v.toml (A, Wb).
CURVE_I = (0.0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.8, 1.0, 1.5, 2.0)
CURVE_PSI = (0.0, 5.93e-3, 11.6e-3, 21.9e-3, 29.9e-3, 35.7e-3, 39.7e-3, 42.5e-3, 45.9e-3, 47.6e-3,
             50.0e-3, 52.0e-3)
#: (name, V_s V, R_s ohm, C F, R ohm, scale, pull-in A, peak s): the valve on a long cable
#: (overdamped), and a low-resistance winding on a battery whose bus rings (underdamped).
CASES = [
    ("cable", 20.0, 1.0, 220e-6, 22.0, 1.0, 0.55, 8e-3),
    ("ringing", 12.0, 0.3, 4.7e-3, 3.0, 1.15, 1.5, 20e-3),
]


def _coil(scale=1.0):
    return flux.FluxCoil(flux.curve(CURVE_I, CURVE_PSI), np.asarray(scale, float))


def _model(vs, rs, c, r, scale, i_pull, t_end):
    b = flux_bus.bus(vs, rs, c, r, _coil(scale))
    v_low, _ = flux_bus.lowest_bus(t_end, b)
    return float(flux_bus.rise_time(i_pull, b)), float(v_low), float(flux_bus.current(t_end, b))


def _reference(vs, rs, c, r, scale, i_pull, t_end, r_e=None):
    """scipy's solve_ivp, piece by piece of the table: ``(pull-in s, lowest bus V, end A,
    end bus V)``. With an eddy resistance ``r_e`` ohm across the curve (Kirchhoff: the loop
    ``v = R i + R_e (i - i_m)`` solved for the terminal current ``i`` at every step, the
    branch ``dpsi/dt = R_e (i - i_m)``), the current is the magnetising one."""
    from scipy.integrate import solve_ivp

    cv = flux.curve(CURVE_I, CURVE_PSI)
    knots = np.asarray(CURVE_I)

    def ld(i, k):   # the incremental inductance on piece k, continued past its ends
        d = i - cv.base[k]
        cc = cv.coef[:, k]
        return scale * ((3 * cc[0] * d + 2 * cc[1]) * d + cc[2])

    t, y, k = 0.0, np.array([0.0, vs]), 0
    t_pull, v_low = None, vs
    while t < t_end:
        def f(_, x):
            if r_e is None:
                return [(x[1] - r * x[0]) / ld(x[0], k), ((vs - x[1]) / rs - x[0]) / c]
            i = (x[1] + r_e * x[0]) / (r + r_e)
            return [r_e * (i - x[0]) / ld(x[0], k), ((vs - x[1]) / rs - i) / c]

        def up(_, x):        # the next table point above
            return x[0] - (knots[k + 1] if k + 1 < knots.size else np.inf)

        def down(_, x):      # the piece's own start, from above (k > 0)
            return x[0] - (knots[k] if k > 0 else -np.inf)

        def hit(_, x):
            return x[0] - i_pull
        up.terminal, up.direction, down.terminal, down.direction = True, 1, True, -1
        sol = solve_ivp(f, (t, t_end), y, method="Radau", rtol=1e-12, atol=1e-14,
                        events=[up, down, hit], dense_output=True)
        if t_pull is None and sol.t_events[2].size:
            t_pull = float(sol.t_events[2][0])
        v_low = min(v_low, float(np.min(sol.sol(np.linspace(t, sol.t[-1], 4001))[1])))
        t, y = float(sol.t[-1]), sol.y[:, -1]
        if sol.status == 1:   # a table point: on with the next piece
            k = k + 1 if sol.t_events[0].size else k - 1
    return t_pull, v_low, float(y[0]), float(y[1])


def _spice(tmp_path, name, vs, rs, c, r, scale, i_pull, t_end, r_e=None) -> dict:
    """ngspice's figures (:func:`test_supply_droop.spice_droop`) with the flux-controlled
    inductor of the curve x ``scale`` between the netlist's nodes ``a`` and ``m`` (and
    ``r_e`` ohm across it, the magnetising current's ammeter in series)."""
    cv = flux.curve(CURVE_I, CURVE_PSI)
    i = np.linspace(0.0, 2.0 * vs / r, 2001)
    pairs = [f"{float(p):.12e}, {float(q):.12e}" for p, q in zip(scale * cv.psi(i), i)]
    rows = [", ".join(pairs[k:k + 6]) for k in range(0, len(pairs), 6)]
    lines = ["GINT 0 phi a m 1", "CPHI phi 0 1 IC=0", "RPHI phi 0 1e12", "BCOIL a m I = pwl(V(phi),",
             *(f"+ {row}," for row in rows[:-1]), f"+ {rows[-1]})"]
    return spice_droop(tmp_path, name, vs, rs, c, r, None, i_pull, t_end, r_e, coil="\n".join(lines))


def against_ngspice(tmp_path, name, vs, rs, c, r, scale, i_pull, t_end, r_e=None):
    """The model's pull-in time, lowest bus and current at the end of the peak against
    ngspice's (:func:`_spice`); with an eddy resistance ``r_e`` ohm the pull-in is the
    magnetising current's, and both currents at the end are compared."""
    got = _spice(tmp_path, name, vs, rs, c, r, scale, i_pull, t_end, r_e)
    b = flux_bus.bus(vs, rs, c, r, _coil(scale), r_e)
    t_pull, v_low = float(flux_bus.rise_time(i_pull, b)), float(flux_bus.lowest_bus(t_end, b)[0])
    i_m, v = flux_bus.state(t_end, b)
    i_end, i_m = float(flux_bus.terminal(i_m, v, b)), float(i_m)
    print(f"{name}: pull-in {t_pull / got['tpull'] - 1:+.2e}, lowest bus {v_low - got['vlow']:+.2e} V, "
          f"end current {i_end / got['iend'] - 1:+.2e}"
          + ("" if r_e is None else f", magnetising {i_m / got['imend'] - 1:+.2e}") + " (relative to ngspice)")
    # ngspice transient (t_end/20000 steps; its pwl table stands for the interpolant to
    # about 1e-6): 1e-4 + one step on the time, 1 mV on the bus, 1e-4 on the currents
    step = t_end / 20000
    assert abs(t_pull - got["tpull"]) <= 1e-4 * t_pull + step, (t_pull, got)
    assert abs(v_low - got["vlow"]) <= 1e-3, (v_low, got)
    assert abs(i_end - got["iend"]) <= 1e-4 * i_end, (i_end, got)
    if r_e is not None:
        assert abs(i_m - got["imend"]) <= 1e-4 * i_m, (i_m, got)


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_flux_droop_against_ngspice(tmp_path, case):
    against_ngspice(tmp_path, *case)


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_flux_droop_against_solve_ivp(case):
    name, vs, rs, c, r, scale, i_pull, t_end = case
    got = _model(vs, rs, c, r, scale, i_pull, t_end)
    ref = _reference(vs, rs, c, r, scale, i_pull, t_end)
    print(f"{name}: pull-in {got[0] / ref[0] - 1:+.2e}, lowest bus {got[1] - ref[1]:+.2e} V, "
          f"end current {got[2] / ref[2] - 1:+.2e} (relative to solve_ivp)")
    # scipy solve_ivp (Radau, rtol 1e-12, restarted at the table's points)
    assert got[0] == pytest.approx(ref[0], rel=1e-6)
    assert got[1] == pytest.approx(ref[1], abs=1e-5)
    assert got[2] == pytest.approx(ref[2], rel=1e-6)


def test_fourth_order_across_the_table_points():
    # the steps split at the table's points: halving the step divides the error by about
    # 2^4, the order of ETDRK4 (Cox & Matthews 2002); the reference is the run at 1/32 of
    # the step
    name, vs, rs, c, r, scale, i_pull, t_end = CASES[0]
    b = flux_bus.bus(vs, rs, c, r, _coil(scale))
    ends = [flux_bus.run(b, [(n, t_end / n)]) for n in (50, 100, 200, 1600)]
    err = [abs(e.i[-1] - ends[-1].i[-1]) + abs(e.v[-1] - ends[-1].v[-1]) for e in ends[:-1]]
    assert err[0] / err[1] > 12 and err[1] / err[2] > 12, err
    assert int(ends[-1].k) >= 6, "precondition: the run crosses the table's points"


def test_straight_line_curve_is_the_linear_closed_form():
    # psi = L i is the linear coil: coildrive/model/supply.py's closed form (hand-checked
    # against ngspice and solve_ivp in tests/test_supply_droop.py)
    l = 0.05
    line = flux.FluxCoil(flux.curve((0.0, 1.0, 2.0), (0.0, l, 2 * l)), np.asarray(1.0))
    for vs, rs, c, r in ((20.0, 1.0, 220e-6, 22.0), (12.0, 0.3, 4.7e-3, 3.0)):
        fb, lin = flux_bus.bus(vs, rs, c, r, line), bus_model.bus(vs, rs, c, r, l)
        i_pull = 0.6 * vs / (r + rs)
        assert float(flux_bus.rise_time(i_pull, fb)) == pytest.approx(float(bus_model.rise_time(i_pull, lin)),
                                                                     rel=1e-8)
        t = np.array([1e-3, 4e-3, 9e-3])
        np.testing.assert_allclose(flux_bus.current(t, fb), bus_model.current(t, lin), rtol=1e-8)
        assert float(flux_bus.lowest_bus(9e-3, fb)[0]) == pytest.approx(float(bus_model.lowest_bus(9e-3, lin)[0]),
                                                                       abs=1e-8)


def _drive(tmp_path, extra: str = "", rs: str | None = "1 ohm") -> str:
    text = (EXAMPLES / "saturating-valve-24v.toml").read_text()
    if rs is not None:
        text = text.replace('max = "28 V"', f'max = "28 V"\nsource_resistance = "{rs}"\ncapacitance = "220 uF"', 1)
    text = text.replace('board = "fast-32bit-clamp"', f'board = "{EXAMPLES.parent / "boards" / "fast-32bit-clamp.toml"}"')
    path = tmp_path / f"flux-droop-{rs and rs.split()[0]}.toml"
    path.write_text(text + extra)
    return str(path)


def test_design_and_simulate_end_to_end(tmp_path):
    from coildrive.config import load_drive
    from coildrive.model.circuit import loop

    from coildrive.design import design

    stiff = design(load_drive(_drive(tmp_path, rs=None)))
    path = _drive(tmp_path)
    r = run_cli("design", path, "--json")
    assert r.returncode in (0, 1), r.stderr
    d = json.loads(r.stdout)
    s = d["supply"]
    # the pull-in corner includes the droop: slower than on the stiff bus, at the low supply
    assert d["pull_in"]["time_s"] > stiff.pull_in.time_s
    assert s["lowest_bus_corner"].startswith("20 V") and s["lowest_bus_v"] < 20.0
    assert s["capacitor_energy_j"] > 0 and "supply_droop" in {c["name"] for c in d["checks"]}
    # simulate: the peak is the drooping bus's run at that point
    rows, lp = simulated_peak(tmp_path, path, 20.0, 100.0, 200)
    fb = flux_bus.bus(20.0, 1.0, 220e-6, float(lp.r_on), lp.inductance.with_scale(1.0))
    np.testing.assert_allclose(rows[:, 1], flux_bus.current(rows[:, 0], fb), rtol=1e-8, atol=1e-10)


def test_capacitor_less_limit():
    # C -> 0 (R_s C = 10 ns, far below a step): the bus is V_s - R_s i, so the coil rises as
    # on a stiff source through R + R_s (hand-worked: Thevenin), whose time is the curve's
    # exact quadrature (coildrive/model/flux.py, checked against ngspice in
    # tests/test_flux_ngspice.py); the capacitor delays it by about R_s C
    coil = _coil()
    fb = flux_bus.bus(24.0, 10.0, 1e-9, 22.0, coil)
    t = float(flux_bus.rise_time(0.55, fb))
    assert t == pytest.approx(float(flux.time(coil, 0.0, 0.55, 24.0, 32.0)), rel=1e-5)
    # ... and a step 3,500 times R_s C is as good as one 16 times shorter (to 1e-9 A)
    coarse, fine = (flux_bus.run(fb, [(n, 4e-3 / n)]) for n in (500, 8000))
    assert abs(coarse.i[-1] - fine.i[-1]) < 1e-9
