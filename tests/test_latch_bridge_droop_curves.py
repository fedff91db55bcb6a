"""A latching coil on a full bridge on the drooping bus with a flux-linkage curve or an
eddy-current term: the irrigation valve of tests/test_latch_bridge_droop.py (0.8 ohm onto
1000 uF) with its 15 mH replaced by the invented
saturating curve of tests/test_latch_flux.py, with an invented 50 ohm eddy resistance
across its 15 mH, or both, on a supply that takes current back; each also on one that cannot (a diode in its
feed; the curve alone's run into the capacitor is stepped in the falling current and read
in time, :func:`coildrive.model.bridge.flux_pump_trace`).

References, written afresh here with scipy's ``solve_ivp`` (DOP853, rtol 1e-11), each
curve scipy's own ``PchipInterpolator`` through the file's table (Fritsch & Carlson 1980)
and stepped in the current with its derivative as the incremental inductance (no
inversion); an eddy resistance ``R_e`` across the magnetising branch by Kirchhoff (the
terminal current ``i`` through the loop, ``L di_m/dt = R_e (i - i_m)``):

* the pulse through two switches from a stiff bus ``V`` (``V = R i + R_e (i - i_m)``) or
  from a full capacitor (``C du/dt = (V_s - u)/R_s - i``);
* after it the fast decay through two body diodes back into the bus, the coil seeing
  ``-(u + 2 V_d) = R i + L_d di_m/dt``, ``C du/dt = i + (V_s - u)/R_s``, to the terminal
  current's zero (without a sink the feed term only while ``u < V_s``, an event where the
  bus reaches it), from the lowest and the highest starting bus of docs/design-method.md;
  the highest bus + ``V_d`` is the switches' voltage (the sense resistor inline).

Tolerances: 1e-6 for the eddy term's closed forms, 1e-5 for the curve's stepped run.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.interpolate import PchipInterpolator

from coildrive.bench.latch_check import predict_pulse
from coildrive.model import flux_bus_decay
from coildrive.model.circuit import loop
from test_latch_armature_curves import designed
from test_latch_bridge_droop import C, R_S, _loop, droop_bridge, simulated
from test_latch_flux import CURVE_I, _psi, _table, device_reports

OPTS = dict(method="DOP853", rtol=1e-11, atol=1e-13)
R_E = 50.0   # ohm, invented
#: the coil's lines, its eddy resistance, the tolerance, the branch ("curve" or linear)
VARIANTS = {"curve": (_table(), None, 1e-5, "curve", True),
            "eddy": (f'inductance = "15 mH"\neddy_resistance = "{R_E:g} ohm"\n', R_E, 1e-6, "linear", True),
            "curve-eddy": (_table() + f'eddy_resistance = "{R_E:g} ohm"\n', R_E, 1e-5, "curve", True),
            "eddy-no-sink": (f'inductance = "15 mH"\neddy_resistance = "{R_E:g} ohm"\n', R_E, 1e-6, "linear",
                             False),
            "curve-eddy-no-sink": (_table() + f'eddy_resistance = "{R_E:g} ohm"\n', R_E, 1e-5, "curve", False),
            "curve-no-sink": (_table(), None, 1e-5, "curve", False)}


@pytest.fixture(scope="module", params=list(VARIANTS))
def bridge(request, tmp_path_factory):
    coil, r_e, tol, kind, sink = VARIANTS[request.param]
    path = droop_bridge(tmp_path_factory.mktemp(f"latch-bridge-{request.param}"), sink)
    path.write_text(path.read_text().replace('inductance = "15 mH"\n', coil))
    return (*designed(path), kind, r_e, tol)


class Coil:
    """The magnetising branch at an L factor: ``psi(i)`` and ``L_d(i)`` (the curve's PCHIP,
    or the linear 15 mH)."""

    def __init__(self, kind: str, l_nom: float, lf: float):
        self.lf, self.l = lf, l_nom * lf
        self.p = PchipInterpolator(CURVE_I, _psi(CURVE_I)) if kind == "curve" else None

    def ld(self, i: float) -> float:
        return self.l if self.p is None else self.lf * float(self.p(max(i, 0.0), 1))


def _pulse(coil: Coil, r_e, v_s, r, t, bus: bool, r_s=R_S):
    """The magnetising current at ``t`` s and the bus then, switched on from a full capacitor
    (``bus``; behind ``r_s`` ohm) or a stiff bus at ``v_s`` V."""
    def rhs(_t, y):
        u, i_m = y
        i = i_m if r_e is None else (u + r_e * i_m) / (r + r_e)
        v_m = u - r * i                         # the branch's voltage
        return [((v_s - u) / r_s - i) / C if bus else 0.0, v_m / coil.ld(i_m)]
    sol = solve_ivp(rhs, (0.0, t), [v_s, 0.0], **OPTS)
    return float(sol.y[1, -1]), float(sol.y[0, -1])


def _decay(coil: Coil, r_e, v_s, r, v_d, i0, u0, sink: bool, t_eval=None, r_s=R_S):
    """The fast decay into the bus to the terminal current's zero: ``(zero time s, highest
    bus over it V)``; the bus at the zero as ``_decay.bus_zero``, the terminal current at
    ``t_eval`` as ``_decay.at``. Without a ``sink`` the feed is an ideal one-way diode: its
    term only while ``u < V_s`` (an event where the bus reaches ``V_s``)."""
    def flow(y):
        i_m, u = y
        return i_m if r_e is None else (r_e * i_m - u - 2 * v_d) / (r + r_e)

    def feed(u):
        return (v_s - u) / r_s if sink or u < v_s else 0.0

    def rhs(_t, y):
        i_m, u = y
        i = flow(y)
        return [(-(u + 2 * v_d) - r * i) / coil.ld(i_m), (i + feed(u)) / C]

    zero = lambda t, y: flow(y)   # noqa: E731
    zero.terminal, zero.direction = True, -1
    reach = lambda t, y: y[1] - v_s   # noqa: E731  (the one-way feed blocks here)
    reach.terminal, reach.direction = (not sink), 1
    t0, y0, top, pieces = 0.0, [i0, u0], u0, []
    while True:
        sol = solve_ivp(rhs, (t0, 1.0), y0, events=[zero, reach], dense_output=True, **OPTS)
        pieces.append(sol)
        top = max(top, float(np.max(sol.sol(np.linspace(t0, sol.t[-1], 4001))[1])))
        if sol.t_events[0].size:
            break
        t0, y0 = float(sol.t[-1]), [float(sol.y[0, -1]), v_s * (1 + 1e-15)]
    _decay.bus_zero = float(sol.y_events[0][0][1])
    if t_eval is not None:
        _decay.at = np.array([flow(next(p for p in pieces if p.t[0] <= t <= p.t[-1]).sol(t)) for t in t_eval])
    return float(sol.t_events[0][0]), top


def test_fast_decays_into_the_bus_against_solve_ivp(bridge):
    _, drive, d, kind, r_e, tol = bridge
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    rt, lt, tol_v = drive.coil.resistance_tolerance, drive.coil.inductance_tolerance, drive.latch.recharge_tolerance
    for p in d.latch.pulses:
        zeros, v_sw = [], []
        for v_s in (drive.supply.min * (1 - tol_v), drive.supply.max):
            for temp in (drive.ambient.min, drive.thermal.max_coil_temp):
                for rf in (1 - rt, 1 + rt):
                    for lf in (1 - lt, 1 + lt):
                        r_on, r_off, _, v_d = _loop(drive, temp, rf, lf)
                        coil = Coil(kind, 0.015, lf)
                        i0 = _pulse(coil, r_e, v_s, r_on, p.time_s, bus=False)[0]   # the energies' stiff pulse
                        draw = i0 if r_e is None else (v_s + r_e * i0) / (r_on + r_e)
                        low = max(min((1 - tol_v) * v_s, v_s - R_S * draw), -2 * v_d)
                        for u0 in (low, v_s):
                            t_zero, top = _decay(coil, r_e, v_s, r_off, v_d, i0, u0, drive.supply.sink)
                            zeros.append(t_zero)
                            v_sw.append(max(top, v_s) + v_d)   # (a bus below v_s recovers to it)
        assert p.decay_time_s == pytest.approx(max(zeros), rel=tol), "time to zero vs solve_ivp"
        assert p.peak_switch_voltage_v == pytest.approx(max(v_sw), rel=tol), "switch voltage vs solve_ivp"
        assert max(v_sw) > drive.supply.max + drive.freewheel.diode_drop + 0.2, "precondition: the bus rises"
    assert {c.name for c in d.checks} >= {"set_bus", "reset_bus"}


def test_simulate_check_and_the_device(bridge, tmp_path):
    path, drive, d, kind, r_e, tol = bridge
    data = simulated(path, tmp_path)
    p = d.latch.pulses[0]
    r_on, r_off, _, v_d = _loop(drive, 20.0, 1.0, 1.0)
    coil = Coil(kind, 0.015, 1.0)
    i0, u0 = _pulse(coil, r_e, 12.0, r_on, p.time_s, bus=True)
    t_zero, top = _decay(coil, r_e, 12.0, r_off, v_d, i0, u0, drive.supply.sink)
    k = (data["time_s"] > p.time_s) & (data["time_s"] < p.time_s + 0.9 * t_zero)
    _decay(coil, r_e, 12.0, r_off, v_d, i0, u0, drive.supply.sink, t_eval=data["time_s"][k] - p.time_s)
    assert np.allclose(data["current_a"][k], _decay.at, rtol=10 * tol, atol=1e-7), "the decay vs solve_ivp"
    # Q1 sees the bus + V_d while the diodes conduct (at most the highest), the bus once they block
    w = (data["time_s"] > p.time_s) & (data["time_s"] <= p.time_s + t_zero * (1 + 1e-6))
    assert float(np.max(data["q1_v"][w])) <= (top + v_d) * (1 + 1e-6), "the highest bus + V_d"
    assert float(np.max(data["q1_v"][w])) >= (top + v_d) * (1 - 2e-4), "the highest bus + V_d, sampled"
    end = int(np.flatnonzero(w)[-1])
    assert data["current_a"][end] == 0.0
    assert data["q1_v"][end] == pytest.approx(_decay.bus_zero, rel=10 * tol), "the bus at the zero vs solve_ivp"
    got = predict_pulse(d, "set", 12.0, 20.0, 0.0, 0.001)["time_to_zero_s"]
    assert got == pytest.approx(t_zero, rel=tol), "the check's time to zero vs solve_ivp"
    for ok, rep in device_reports(d, tmp_path, 12.0, 20.0):
        assert rep.ok == ok, [(i.name, i.detail) for i in rep.items]
    if not drive.supply.sink:   # the trace from a full bus: the feed blocks at once, the capacitor alone
        rel = loop(drive, 12.0, 20.0, 1.0, 1.0, path="release")
        t_zero, top = _decay(coil, r_e, 12.0, r_off, v_d, i0, 12.0, False)
        t = np.linspace(0.0, 0.9 * t_zero, 50)
        _decay(coil, r_e, 12.0, r_off, v_d, i0, 12.0, False, t_eval=t)
        i, bus = flux_bus_decay.trace(t, rel.inductance, i0, 12.0, 12.0, R_S, C, r_off, v_d, sink=False)
        assert np.allclose(i, _decay.at, rtol=10 * tol, atol=1e-7), "the capacitor alone vs solve_ivp"
        assert float(np.max(bus)) <= top * (1 + 1e-9) and float(bus[-1]) > 12.0 + 0.1
        # the trace ends where the design's figures do (plumbing: the same run)
        fd = flux_bus_decay.fast_decays(rel.inductance, i0, [12.0], 0.0, 12.0, R_S, C, r_off, v_d, sink=False)[0]
        i_end, bus_end = flux_bus_decay.trace(np.array([float(fd.zero_time)]), rel.inductance, i0, 12.0, 12.0,
                                              R_S, C, r_off, v_d, sink=False)
        assert i_end[0] <= 1e-6 * i0 and bus_end[0] == pytest.approx(float(fd.bus_at_zero), rel=1e-9)


def test_simulate_runs_the_curve_into_the_capacitor_alone(tmp_path):
    """The curve without an eddy term on a supply that cannot sink, fed through 0.2 ohm (the
    bus at the pulse's end close enough to ``V_s`` that the returned current lifts it past:
    the feed blocks and the rest runs into the capacitor alone,
    :func:`coildrive.model.bridge.flux_pump_trace`): ``coildrive simulate``'s decay current
    and the bus at the zero against solve_ivp (the one-way feed an event)."""
    r_s = 0.2
    path = droop_bridge(tmp_path, False)
    path.write_text(path.read_text().replace('inductance = "15 mH"\n', _table())
                    .replace(f'source_resistance = "{R_S} ohm"', f'source_resistance = "{r_s} ohm"'))
    _, drive, d = designed(path)
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    data = simulated(path, tmp_path)
    p = d.latch.pulses[0]
    r_on, r_off, _, v_d = _loop(drive, 20.0, 1.0, 1.0)
    coil = Coil("curve", 0.015, 1.0)
    i0, u0 = _pulse(coil, None, 12.0, r_on, p.time_s, bus=True, r_s=r_s)
    t_zero, top = _decay(coil, None, 12.0, r_off, v_d, i0, u0, False, r_s=r_s)
    assert top > 12.0 + 0.1, "precondition: the feed blocks and the capacitor alone takes the rest"
    k = (data["time_s"] > p.time_s) & (data["time_s"] < p.time_s + 0.9 * t_zero)
    _decay(coil, None, 12.0, r_off, v_d, i0, u0, False, t_eval=data["time_s"][k] - p.time_s, r_s=r_s)
    assert np.allclose(data["current_a"][k], _decay.at, rtol=1e-4, atol=1e-7), "the decay vs solve_ivp"
    end = int(np.flatnonzero(data["time_s"] <= p.time_s + t_zero * (1 + 1e-6))[-1])
    assert data["current_a"][end] == 0.0
    assert data["q1_v"][end] == pytest.approx(_decay.bus_zero, rel=1e-4), "the bus at the zero vs solve_ivp"
