"""A moving armature with an eddy-current term on the drooping bus.

The pull-in runs with the bulk capacitor as a sixth state and the magnetising branch
behind the loop's Thevenin pair (coildrive/model/armature_flight.py, armature_runs.py,
supply.py). Outside references:

* scipy's ``solve_ivp`` (Radau, rtol 1e-11) of the circuit + armature + source equations
  written afresh below -- branch flux linkage ``lam``, gap ``x``, velocity ``v``, bus
  ``u``; the coil's node ``e = u - R i_t`` drives the branch and ``R_e`` in parallel::

      i_m = lam (1 + beta x) / L_c,   e = R_e (u - R i_m) / (R + R_e),   i_t = i_m + e / R_e
      dlam/dt = e
      m dv/dt = preload + rate (stroke - x) + load - lam^2 beta / (2 L_c) - c v
      C du/dt = (V_s - u)/R_s - i_t

  (Kirchhoff's laws, solved for ``e`` here by hand rather than through the Thevenin pair
  the model uses): the start and seat moments, the current at the end of the peak, the
  terminal current at impact and the lowest bus, within 1e-5;
* ``R_s -> 0``: the stiff-bus eddy run (tests/test_armature_eddy.py checks it);
* conservation of energy over the peak (first law, terms written afresh here from the
  simulated samples): source out = R_s loss + the capacitor's change + copper + the eddy
  resistance + the field's store + spring, load, damping and the seat's impact, within 1 %.

The scenario (examples/locker-latch-12v.toml on a cable, an invented eddy term) is invented.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from conftest import run_cli
from test_armature_droop import BUSES, CORNER, LATCH, PEAK, _drive_file, energy_terms

from coildrive.config import load_drive
from coildrive.model.armature import params_from_loop
from coildrive.model.armature_runs import SEATED, pull_in
from coildrive.model.armature_sim import simulate
from coildrive.model.circuit import loop

#: The eddy resistance, ohm (invented): 30 ohm against the worst corner's 18.6 ohm loop
#: makes the terminal current's switch-on step a third of the final current.
R_E = 30.0


def _params(rs: float, c: float, r_e: float = R_E, corner=CORNER):
    d = load_drive(LATCH)
    lp = loop(d, np.array([corner["supply"]]), np.array([corner["temp"]]), np.array([corner["r"]]),
              np.array([corner["l"]]))
    return params_from_loop(d.armature, lp, np.array([corner["l"]]), r_e, bus=(rs, c))


def reference(p, rs: float, c: float, r_e: float, t_peak: float) -> dict:
    """solve_ivp (Radau) of the equations of the module docstring, three pieces."""
    from scipy.integrate import solve_ivp

    g = {n: float(getattr(p, n)[0]) for n in p.arrays}
    vs, r, lc, beta, stroke = g["v_on"], g["r_on"], g["l_closed"], g["beta"], g["stroke"]

    def node(lam, x, u):
        i_m = lam * (1 + beta * x) / lc
        e = r_e * (u - r * i_m) / (r + r_e)
        return i_m, e, i_m + e / r_e

    def opening(x):
        return g["preload"] + g["rate"] * (stroke - x) + g["load"]

    def pull(lam):
        return lam * lam * beta / (2 * lc)

    def rest(x):
        def f(t, y):
            _, e, i_t = node(y[0], x, y[1])
            return [e, ((vs - y[1]) / rs - i_t) / c]
        return f

    tol = dict(rtol=1e-11, atol=1e-13, method="Radau", dense_output=True)

    def start(t, y):
        return pull(y[0]) - opening(stroke)
    start.terminal, start.direction = True, 1
    s1 = solve_ivp(rest(stroke), (0, t_peak), [0.0, vs], events=start, **tol)
    t_move, (lam0, u0) = s1.t_events[0][0], s1.y_events[0][0]

    def flight(t, y):
        lam, x, v, u = y
        _, e, i_t = node(lam, x, u)
        return [e, v, (opening(x) - pull(lam) - g["damping"] * v) / g["mass"], ((vs - u) / rs - i_t) / c]

    def seat(t, y):
        return y[1]
    seat.terminal, seat.direction = True, -1
    s2 = solve_ivp(flight, (t_move, t_peak), [lam0, stroke, 0.0, u0], events=seat, **tol)
    t_seat, ys = s2.t_events[0][0], s2.y_events[0][0]
    s3 = solve_ivp(rest(0.0), (t_seat, t_peak), [ys[0], ys[3]], **tol)
    low = min(float(np.min(s.sol(np.linspace(a, b, 20001))[row]))
              for s, a, b, row in ((s1, 0, t_move, 1), (s2, t_move, t_seat, 3), (s3, t_seat, t_peak, 1)))
    return dict(move=t_move, seat=t_seat, i_end=node(s3.y[0, -1], 0.0, s3.y[1, -1])[0],
                dip=node(ys[0], 0.0, ys[3])[2], low=low)


@pytest.mark.parametrize("bus", BUSES, ids=[b[0] for b in BUSES])
def test_pull_in_against_solve_ivp(bus):
    _, rs, c = bus
    p = _params(rs, c)
    pin = pull_in(p, peak_time=PEAK)
    ref = reference(p, rs, c, R_E, PEAK)   # scipy solve_ivp (Radau), written afresh
    assert pin.status[0] == SEATED
    assert pin.start_time[0] == pytest.approx(ref["move"], rel=1e-6)
    assert pin.seat_time[0] == pytest.approx(ref["seat"], rel=1e-5), "pull-in moment"
    assert pin.peak_end_current[0] == pytest.approx(ref["i_end"], rel=1e-5), "magnetising current at the peak's end"
    assert pin.dip_current[0] == pytest.approx(ref["dip"], rel=1e-5), "terminal current at impact"
    assert pin.lowest_bus[0] == pytest.approx(ref["low"], abs=1e-5 * p.v_on[0]), "lowest bus"
    plain = pull_in(_params(rs, c, 0.0), peak_time=PEAK)
    assert pin.seat_time[0] > plain.seat_time[0], "the eddy term slows the pull-in"


def test_stiff_source_gives_the_stiff_bus_eddy_run():
    """R_s -> 0 (1 micro-ohm on 1 mF): the stiff-bus run with the same eddy term."""
    stiff = pull_in(_params(0.0, 0.0), peak_time=PEAK)
    tiny = pull_in(_params(1e-6, 1e-3), peak_time=PEAK)
    for name in ("start_time", "seat_time", "peak_end_current", "dip_current"):
        assert getattr(tiny, name)[0] == pytest.approx(getattr(stiff, name)[0], rel=1e-5), name


def test_energy_balance_of_the_pull_in():
    """First law over the peak from the simulated samples (trapezoids on a dense run), the
    eddy resistance's ``int e^2/R_e dt`` among the terms (``e = u - R i_t``, the coil's node)."""
    rs, c = BUSES[0][1:]
    p = _params(rs, c)
    tr = simulate(p, [(PEAK, True, 4000)], points=400)
    e = energy_terms(p, tr, rs, c)
    eddy = np.trapezoid((tr.bus - float(p.r_on[0]) * tr.current) ** 2 / R_E, tr.time)
    parts = e["r_s"] + e["cap"] + e["copper"] + eddy + e["field"] + e["mech"]
    assert parts == pytest.approx(e["source"], rel=1e-2), dict(e, eddy=eddy)
    assert eddy > 1e-3 * e["source"] and abs(e["cap"]) > 1e-3 * e["source"], "the eddy and bus terms count"
    np.testing.assert_allclose(tr.charge[-1], np.trapezoid(tr.current, tr.time), rtol=1e-3)


def test_design_on_the_drooping_bus(tmp_path):
    """design --json with an eddy term and an armature on the drooping bus: the lowest
    bus's corner against solve_ivp over the longest peak the firmware runs; simulate's
    bus_v the same; the virtual device's capture passes check."""
    drive = Path(_drive_file(tmp_path))
    drive.write_text(drive.read_text().replace(
        "inductance_tolerance = 0.10\n", f'inductance_tolerance = 0.10\neddy_resistance = "{R_E:g} ohm"\n', 1))
    drive = str(drive)
    out = run_cli("design", drive, "--json")
    assert out.returncode in (0, 1), out.stderr
    doc = json.loads(out.stdout)
    sup = doc["supply"]
    assert sup["lowest_bus_corner"].startswith("10.8 V, -20 degC, coil -20 degC (cold), R-7%, L-10%"), sup
    cold = dict(supply=10.8, temp=-20.0, r=0.93, l=0.9)
    ref = reference(_params(2.0, 220e-6, corner=cold), 2.0, 220e-6, R_E,
                    doc["pull_in"]["peak_time_s"])   # scipy solve_ivp (Radau)
    assert sup["lowest_bus_v"] == pytest.approx(ref["low"], abs=1e-4), (sup, ref)
    csv = tmp_path / "sim.csv"
    sim = run_cli("simulate", drive, "--supply", "10.8", "--coil-temp", "130", "--csv", str(csv))
    assert sim.returncode == 0 and "column bus_v" in sim.stderr, sim.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    nominal = dict(supply=10.8, temp=130.0, r=1.0, l=1.0)
    ref = reference(_params(2.0, 220e-6, corner=nominal), 2.0, 220e-6, R_E,
                    doc["pull_in"]["peak_time_s"])   # scipy solve_ivp (Radau)
    assert float(np.min(data["bus_v"])) == pytest.approx(ref["low"], abs=1e-4)
    assert np.all(np.diff(data["time_s"]) > 0)
    # the model's virtual device: a capture that check passes (plumbing, not numbers)
    from coildrive.bench.check import check_capture
    from coildrive.bench.synth import synth_design_capture
    from coildrive.design import design

    des = design(load_drive(drive))
    report = check_capture(synth_design_capture(des, actuations=1, hold_time=0.05, noise_codes=1.0, seed=5), des)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items]


def test_firmware_in_the_loop(tmp_path):
    """The compiled reference driver (gcc) in the loop with the eddy term and the armature
    on the drooping bus (0.6 ohm, 470 uF; was refused): its supply conversions read the
    pull-in run's bus, the sensed current is the terminal current of the run's magnetising
    current; `check` passes at the highest supply (pull-in, seat, hold, release; the design
    fails at the lowest supply, the driver rendered through the library). Plumbing: the
    device's physics is the design's (checked against solve_ivp above). A 300 ohm eddy
    term: with 30 ohm the terminal current's steps at each edge (about 0.26 A) alias in the
    capture's hold mean at under 10 samples per PWM period (12 % high, on a stiff bus
    too: the hold mean's reading, not the droop)."""
    from conftest import require_tool
    from test_current_mode_bench import capture_of

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.protocol import FrameDecoder
    from coildrive.codegen.driver import render_driver
    from coildrive.codegen.host_build import build_firmware
    from coildrive.design import design

    require_tool("gcc")
    drive = Path(_drive_file(tmp_path, "0.6 ohm", "470 uF"))
    drive.write_text(drive.read_text().replace(
        "inductance_tolerance = 0.10\n", 'inductance_tolerance = 0.10\neddy_resistance = "300 ohm"\n', 1))
    d = design(load_drive(drive))
    fw = tmp_path / "fw"
    fw.mkdir()
    for name, text in render_driver(d, "coil").items():
        (fw / name).write_text(text)
    lib = build_firmware(fw, d, cache=tmp_path / "cache")
    dev = FirmwareDevice(d, lib, DeviceOptions(supply=13.2, coil_temp=20.0, first_actuation=0.002, noise_codes=1,
                                               seed=3, hold_time=0.03, period=0.1))
    dec, msgs, t = FrameDecoder(), [], 0.0
    while t < 0.4:
        t += 0.01
        msgs += dec.feed(dev.read(t))
    rep = check_capture(capture_of(msgs, tmp_path / "f.cdcap"), d, coil_temp=20.0)
    assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items if i.status == "FAIL"]
    rows = {i.name: i for i in rep.items}
    assert rows["seated_time"].status == "pass" and rows["release_time"].status == "pass"


@pytest.mark.parametrize("on", [True, False])
def test_jacobian_matches_central_differences(on):
    """The Rosenbrock pair's Jacobian (bus row and column with the eddy term's bus share)
    against central differences of the right-hand side (numerical analysis' standard
    check, step 1e-6 of each state's scale)."""
    from coildrive.model.armature_flight import _Rhs

    p = _params(*BUSES[1][1:])
    rhs = _Rhs(p, np.array([on]), np.array([True]))
    y = np.array([[0.02], [0.001], [-0.3], [1e-3], [2e-4], [9.5]])
    jacobian_matches_differences(rhs, y, [0.02, 0.001, 0.3, 1e-3, 2e-4, 9.5])


def jacobian_matches_differences(rhs, y, scale) -> None:
    """``rhs``'s Jacobian at the one point ``y`` (states x 1) against central differences of
    ``rhs`` itself, each state stepped 1e-6 of its ``scale`` (numerical analysis' standard
    check)."""
    jac = rhs.jacobian(y)[0]
    for col, sc in enumerate(scale):
        d = np.zeros_like(y)
        d[col] = 1e-6 * sc
        fd = (rhs(y + d) - rhs(y - d))[:, 0] / (2 * d[col, 0])
        np.testing.assert_allclose(jac[:, col], fd, rtol=1e-6, atol=1e-9 * np.max(np.abs(fd)) + 1e-12,
                                   err_msg=f"column {col}")


@pytest.mark.parametrize("live", [True, False], ids=["conducting", "blocked"])
def test_jacobian_of_the_release_with_the_eddy_loss(live):
    """The release into the bus (a full bridge's body diodes, ``returns``) with the eddy
    loss as a seventh row: the Rosenbrock pair's Jacobian against central differences of the
    right-hand side (numerical analysis' standard check, step 1e-6 of each state's scale)."""
    from coildrive.model.armature_flight import _Rhs

    p = _params(*BUSES[1][1:])
    assert p.eddy is not None, "precondition: the eddy term"
    rhs = _Rhs(p, np.array([False]), np.array([live]), returns=np.array([1.4]))
    y = np.array([[0.02], [0.001], [-0.3], [1e-3], [2e-4], [9.5], [1e-3]])
    assert rhs.jacobian(y)[0].shape == (7, 7)
    jacobian_matches_differences(rhs, y, [0.02, 0.001, 0.3, 1e-3, 2e-4, 9.5, 1e-3])
    assert rhs(y)[6, 0] > 0, "the eddy loss flows"
