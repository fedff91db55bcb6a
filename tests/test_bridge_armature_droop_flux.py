"""A moving armature on a full bridge on the drooping bus with an eddy-current term or with
the open and seated flux-linkage curves: the release is the fast decay back into the bus
behind ``R_s`` and ``C`` while the armature lets go (coildrive/model/armature_bus_release.py,
the capacitor a state of the run; with an eddy term the magnetising branch sees the loop's
Thevenin pair). Outside references, named beside each check:

* scipy's ``solve_ivp`` of the circuit + armature + source equations written afresh here
  (Kirchhoff's laws solved by hand, not through the model's Thevenin pair) -- branch flux
  linkage ``lam``, gap ``x``, velocity ``v``, bus ``u``; the coil's voltage ``e = dlam/dt``
  drives the branch current ``i_m = i(lam, x)`` and ``R_e`` in parallel, the terminal
  current ``i_t = i_m + e/R_e`` runs through ``R`` and the two body diodes into the bus::

      e + R i_t + u + 2 V_d = 0   ->   e = -R_e (R i_m + u + 2 V_d) / (R + R_e)
      C du/dt = (V_s - u)/R_s + i_t    (a supply that cannot sink: max(V_s - u, 0)/R_s)
      m dv/dt = preload + rate (stroke - x) + load - pull(lam) - c v

  while ``i_t > 0``; the diodes then block (an event): ``i_t = 0``, ``e = -R_e i_m`` (the
  flux dies through ``R_e``). Without an eddy term ``i_t = i_m``, the flux gone at the
  block. The linear armature's ``i(lam, x)`` and pull are tests/armature_equations.py's; the
  curves' are tests/test_armature_curves.py's ``Fresh`` (scipy PCHIP + brentq; the series
  magnetic circuit and the co-energy force, Fitzgerald & Kingsley ch. 1 and 3, from
  memory). Seated until the pull falls to spring + load, then free to the open stop: the
  unlatch, open-stop and zero-current times, ``int i_t dt``, the highest bus and the bus
  when the current stops, within 1e-5 (``int i_t^2 dt`` 2e-4: no error control of its own);
* conservation of energy (first law) at the coil's port to the terminal current's zero:
  the energy returned into the bus (``int u i_t dt``, the reference's quadrature) = the
  seated field's store - the field's store left at the zero + the work the spring and load
  do against the pull (``int pull v dt``) - the eddy resistance's ``int e^2/R_e dt`` (the
  reference's) - the copper ``R int i_t^2 dt`` and the body diodes' ``2 V_d int i_t dt``
  (the model's integrals), within 1e-4.

The scenarios (the bridge dosing valve of tests/test_bridge_armature.py on a cable with an
invented eddy term; the saturating latch of tests/test_armature_curves.py on a bridge) are
invented.
"""

from __future__ import annotations

import dataclasses
import json
import re
from pathlib import Path

import numpy as np
import pytest

from armature_equations import equations, values
from conftest import run_cli
from test_armature_curves import Fresh, with_curves
from test_armature_model import latch
from test_bridge_armature_droop import _params

from coildrive.config import load_drive
from coildrive.model.armature import OPENED
from coildrive.model.armature_bus_release import release

#: (name, R_e ohm, R_s ohm, C F, i0 A, v0 V, spring preload, sink, damping N*s/m): the
#: terminal current stops in flight; behind a feed diode (the bus pumps up); the terminal
#: current stops while the armature is still seated (R_e i_stay below the bus: the flux
#: then dies through R_e alone before the armature lets go); a heavily damped armature
#: (the Rosenbrock steps, their Jacobian of the eddy term's return into the bus).
EDDY = [("flight", 400.0, 1.5, 100e-6, 0.3, 20.0, "0.6 N", True, None),
        ("no-sink", 400.0, 1.5, 100e-6, 0.6, 22.0, "2 N", False, None),
        ("seated-block", 100.0, 1.5, 100e-6, 0.3, 20.0, "0.6 N", True, None),
        ("stiff", 400.0, 1.5, 100e-6, 0.6, 22.0, "2 N", True, 300.0)]
#: the saturating latch on a bridge: (name, R_e ohm or None, R_s, C, i0, v0, sink)
CURVES = [("curves", None, 2.0, 220e-6, 0.6, 10.0, True), ("curves-eddy", 60.0, 2.0, 220e-6, 0.6, 10.0, True)]
V_D = 0.7   # V, each body diode (the latch's bridge)


def reference(g: dict, cur, pull, field, r_e, v_d, rs, c, lam0, v0, sink=True) -> dict:
    """solve_ivp of the module docstring's equations (``g``: the point's plain floats;
    ``cur(lam, x)``, ``pull(lam)``, ``field(lam, x)`` the coil's current, pull and stored
    energy; ``r_e`` ohm or None): seated, free, (held open), each piece to an event."""
    from scipy.integrate import solve_ivp

    r, vs, stroke = g["r_off"], g["v_on"], g["stroke"]

    def opening(x):
        return g["preload"] + g["rate"] * (stroke - x) + g["load"]

    def port(lam, x, u, flows):   # (e V, i_t A, the eddy resistance's current A)
        i_m = cur(lam, x)
        if not flows:
            return (0.0, 0.0, 0.0) if r_e is None else (-r_e * i_m, 0.0, -i_m)
        if r_e is None:
            return -(r * i_m + u + 2 * v_d), i_m, 0.0
        e = -r_e * (r * i_m + u + 2 * v_d) / (r + r_e)
        return e, i_m + e / r_e, e / r_e

    def f(t, y, held, flows):
        lam, x, v, u = y[:4]
        e, i_t, i_e = port(lam, x, u, flows)
        acc = 0.0 if held else (opening(x) - pull(lam) - g["damping"] * v) / g["mass"]
        fed = vs - u if sink else max(vs - u, 0.0)
        return [e, 0.0 if held else v, acc, (fed / rs + i_t) / c, i_t, i_t * i_t, u * i_t,
                0.0 if held else pull(lam) * v, (e * i_e if r_e is not None else 0.0)]

    def unlatch(t, y, held, flows):
        return pull(y[0]) - opening(0.0)

    def zero(t, y, held, flows):
        return port(y[0], y[1], y[3], True)[1]

    def opened(t, y, held, flows):
        return y[1] - stroke

    for e, d in ((unlatch, -1), (zero, -1), (opened, 1)):
        e.terminal, e.direction = True, d
    tol = dict(method="Radau", rtol=1e-11, atol=1e-13) if r_e is not None or cur.__name__ == "cur" else \
        dict(method="DOP853", rtol=1e-11, atol=1e-13, max_step=2e-5)
    t, y = 0.0, np.array([lam0, 0, 0, v0, 0, 0, 0, 0, 0], float)
    out, held, flows, high = {}, True, port(lam0, 0.0, v0, True)[1] > 0, v0
    if not flows:
        out.update(zero=0.0, bus0=v0, q=0.0, sq=0.0, e_bus=0.0, w_spring=0.0, e_eddy=0.0, field_z=field(lam0, 0.0))
    while "open" not in out or flows:
        events = ([unlatch] if held and "unlatch" not in out else []) + ([zero] if flows else []) + \
                 ([opened] if not held else [])
        s = solve_ivp(f, (t, t + 1), y, args=(held, flows), events=events, **tol)
        t, y = s.t[-1], s.y[:, -1].copy()
        high = max(high, float(s.y[3].max()))
        hit = [ev for ev, te in zip(events, s.t_events) if te.size]
        assert hit, "every piece ends at an event"
        if hit[0] is zero:
            flows = False
            out.update(zero=t, bus0=y[3], q=y[4], sq=y[5], e_bus=y[6], w_spring=y[7], e_eddy=y[8],
                       field_z=field(y[0], y[1]))
            if r_e is None:
                y[0] = 0.0
        elif hit[0] is unlatch:
            out["unlatch"], held = t, False
        else:
            out["open"], held = t, True
            y[2] = 0.0
    out["high"] = max(high, vs)
    # the whole release: the flux left at the end (the armature at rest, the diodes blocked)
    # dies through R_e
    out.update(e_eddy_all=y[8] + field(y[0], y[1]), w_spring_all=y[7])
    return out


def _check(p, r, ref, field0, v_d, zero_rel=1e-5):
    b = r.run
    assert b.status[0] == OPENED
    for got, want, what in ((b.unlatch_time, ref["unlatch"], "unlatch"), (b.open_time, ref["open"], "open stop"),
                            (b.charge, ref["q"], "int i dt"), (r.highest_bus, ref["high"], "highest bus"),
                            (r.bus_at_zero, ref["bus0"], "bus at zero")):
        assert got[0] == pytest.approx(want, rel=1e-5), what
    assert b.zero_time[0] == pytest.approx(ref["zero"], rel=zero_rel), "zero current"
    assert b.square[0] == pytest.approx(ref["sq"], rel=2e-4)
    # the first law at the coil's port to the terminal current's zero (module docstring)
    returned = (field0 - ref["field_z"] + ref["w_spring"] - ref["e_eddy"] - float(p.r_off[0]) * b.square[0]
                - 2 * v_d * b.charge[0])
    assert returned == pytest.approx(ref["e_bus"], rel=1e-4)
    if r.eddy_energy is None:
        return
    # the eddy resistance's loss over the whole release (the run's seventh state and the
    # flux's tail), and where the diodes block
    assert r.eddy_energy[0] == pytest.approx(ref["e_eddy_all"], rel=1e-4), "eddy loss, solve_ivp"
    assert r.block_current[0] == pytest.approx((ref["bus0"] + 2 * v_d) / float(p.eddy[0]), rel=1e-5)
    # the first law over the whole release: the seated store + the spring's work = the bus's
    # energy + copper + diodes + the eddy loss (the bus's energy the reference's quadrature)
    spent = ref["e_bus"] + float(p.r_off[0]) * b.square[0] + 2 * v_d * b.charge[0] + r.eddy_energy[0]
    print(f"eddy loss {r.eddy_energy[0] / ref['e_eddy_all'] - 1:+.1e}, "
          f"first law {spent / (field0 + ref['w_spring_all']) - 1:+.1e} (vs solve_ivp)")
    assert spent == pytest.approx(field0 + ref["w_spring_all"], rel=1e-4), "first law"


@pytest.mark.parametrize("name, r_e, rs, c, i0, v0, preload, sink, damping", EDDY, ids=[e[0] for e in EDDY])
def test_eddy_release_against_solve_ivp_and_the_first_law(tmp_path, name, r_e, rs, c, i0, v0, preload, sink,
                                                          damping):
    from coildrive.model.armature_flight import is_stiff

    d, p = _params(tmp_path, rs, c, preload)
    p = dataclasses.replace(p, eddy=np.array([r_e]), damping=p.damping if damping is None else np.array([damping]))
    assert bool(is_stiff(p, p.opening_force(p.stroke))[0]) == (damping is not None), "precondition: the stepper"
    v_d = d.freewheel.diode_drop
    r = release(p, np.array([i0]), np.array([v0]), 2 * v_d, sink=sink)
    g = values(p)
    cur, _, pull = equations(g)

    def field(lam, x):
        return 0.5 * lam * cur(lam, x)

    lam0 = i0 * g["l_closed"]
    ref = reference(g, cur, pull, field, r_e, v_d, rs, c, lam0, v0, sink)   # scipy solve_ivp (Radau)
    if name == "seated-block":
        assert ref["zero"] < ref["unlatch"], "precondition: the diodes block before the armature lets go"
    else:
        assert ref["unlatch"] < ref["zero"] < ref["open"], "precondition: the current stops in flight"
    assert ref["e_eddy"] > 1e-3 * ref["e_bus"], "the eddy term's loss counts"
    _check(p, r, ref, field(lam0, 0.0), v_d)


@pytest.fixture(scope="module")
def fresh():
    return Fresh()


@pytest.mark.parametrize("name, r_e, rs, c, i0, v0, sink", CURVES, ids=[e[0] for e in CURVES])
def test_curves_release_against_solve_ivp_and_the_first_law(fresh, name, r_e, rs, c, i0, v0, sink):
    p = with_curves(latch(v_on=12.0, r_on=13.5, r_off=12.5, v_off=12.0 + 2 * V_D))
    p = dataclasses.replace(p, source_resistance=np.array([rs]), capacitance=np.array([c]),
                            eddy=None if r_e is None else np.array([r_e]))
    r = release(p, np.array([i0]), np.array([v0]), 2 * V_D, sink=sink)
    g = values(p)
    stroke = g["stroke"]

    def field(psi, x):   # the blend of the two curves' stores (the gap's reluctance, linear in x)
        w_c = fresh.energy("c", psi)
        return w_c + x / stroke * (fresh.energy("o", psi) - w_c)

    lam0 = float(p.flux_closed(np.array([i0]))[0])
    assert fresh.current(lam0, 0.0) == pytest.approx(i0, rel=1e-9), "the seated curve, PCHIP written afresh"
    ref = reference(g, fresh.current, fresh.closing_force, field, r_e, V_D, rs, c, lam0, v0, sink)
    assert ref["unlatch"] < ref["open"]
    # with an eddy term the diodes block where R_e i_m - (u + 2 V_d), a difference of near
    # numbers, falls slowly through zero: a small error in the flux moves that moment more
    # (measured 6e-5 at the design's rtol 1e-7, 9e-6 at 1e-9, 2e-6 at 1e-10: it converges on the
    # reference)
    _check(p, r, ref, field(lam0, 0.0), V_D, zero_rel=1e-5 if r_e is None else 1e-4)


# --------------------------------------------------------------------------- end to end
def _curve_lines() -> str:
    """The [coil] keys of an invented saturating valve: seated ``i = psi/0.08 + 2e6 psi^5``,
    open the same plus the gap's ``psi (1/0.03 - 1/0.08)`` (the series magnetic circuit)."""
    psi = np.linspace(0.0, 0.08, 11)
    seated = psi / 0.08 + 2e6 * psi ** 5
    opened = seated + psi * (1 / 0.03 - 1 / 0.08)

    def fmt(a):
        return ", ".join(f"{x:.9g}" for x in a)
    return (f"flux_current = [{fmt(opened)}]\nflux_linkage = [{fmt(psi)}]\n"
            f"seated_current = [{fmt(seated)}]\nseated_linkage = [{fmt(psi)}]")


def _drive_text(tmp_path, curves: bool, r_e: float | None) -> str:
    from test_bridge_armature_droop import _text

    path = tmp_path / "arm.toml"
    text = Path(_text(tmp_path)).read_text()
    if curves:
        text = "\n".join(ln for ln in text.splitlines()
                         if not ln.startswith(("inductance =", "inductance_open", "inductance_closed")))
        text = text.replace("[coil]", "[coil]\n" + _curve_lines(), 1) + "\n"
    if r_e is not None:
        text = text.replace("inductance_tolerance = 0.15", f'inductance_tolerance = 0.15\neddy_resistance = "{r_e:g} ohm"')
    path.write_text(text)
    return str(path)


def test_design_on_the_drooping_bus(tmp_path):
    """design --json of the valve with its two curves and an eddy term (the eddy term alone
    is simulated below) designs it (no refusal); the release is the moving armature's into
    the bus: the bus rises above the highest supply, the release time the armature's on the
    open stop, the switches see at least the highest bus."""
    path = _drive_text(tmp_path, True, 400.0)
    out = run_cli("design", path, "--json")
    assert out.returncode in (0, 1), out.stderr
    doc = json.loads(out.stdout)
    sup, rel = doc["supply"], doc["release"]
    assert sup["highest_bus_v"] > 28.0
    # the eddy section's release is the bus run's: the diodes block with the bus above the
    # highest supply (the stiff bus's block current (V_max + 2 V_d)/R_e is below it), and
    # the body diodes' energy is the run's charge
    d = load_drive(path)
    stiff = (d.supply.max + 2 * d.freewheel.diode_drop) / 400.0
    assert doc["eddy"]["block_current_a"] > stiff
    assert doc["eddy"]["release_eddy_energy_j"] > 0 and doc["eddy"]["release_freewheel_energy_j"] > 0
    assert rel["time_s"] == pytest.approx(doc["armature"]["release_open_time_s"], rel=1e-3)
    assert rel["peak_switch_voltage_v"] >= sup["highest_bus_v"]


def test_simulate_rides_the_drooping_bus(tmp_path):
    """simulate's release after the final turn-off returns into the drooping bus (column
    bus_v rises above the supply), against solve_ivp (Radau) of the module docstring's
    equations from the CSV's turn-off row (the armature seated, the magnetising current
    there, the bus at the supply the hold ran on): the highest bus within 1e-4 (the CSV's
    samples under the peak), the current's zero within a sample step, the open stop's
    moment within the stderr line's 4 digits."""
    from coildrive.model.armature import params_from_loop
    from coildrive.model.circuit import loop

    path = _drive_text(tmp_path, False, 400.0)
    csv = tmp_path / "sim.csv"
    out = run_cli("simulate", path, "--supply", "28", "--coil-temp", "-10", "--hold-time", "0.01", "--csv", str(csv))
    assert out.returncode == 0, out.stderr
    assert "the release back into the bus: highest" in out.stderr, out.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    t, on = data["time_s"], data["switch_on"]
    k = int(np.flatnonzero(on == 1)[-1])   # the final turn-off's on-row
    assert data["position_m"][k] == 0.0, "precondition: seated at the turn-off"
    d = load_drive(path)
    lp = loop(d, np.array([28.0]), np.array([-10.0]), path="release")
    p = params_from_loop(d.armature, lp, np.array([1.0]), 400.0, bus=(1.5, 100e-6))
    g = values(p)
    cur, _, pull = equations(g)
    v_d = d.freewheel.diode_drop
    lam0 = g["l_closed"] * data["magnetising_current_a"][k]
    ref = reference(g, cur, pull, lambda lam, x: 0.5 * lam * cur(lam, x), 400.0, v_d, 1.5, 100e-6, lam0,
                    28.0)   # scipy solve_ivp (Radau), the equations written afresh
    after = t > t[k]
    assert float(data["bus_v"][after].max()) == pytest.approx(ref["high"], rel=1e-4)
    assert ref["high"] > 28.0 + 0.1
    t_zero = t[after][np.argmax(data["current_a"][after] <= 0.0)] - t[k]
    step = float(np.max(np.diff(t[after][:200])))
    assert abs(t_zero - ref["zero"]) <= step
    opened = float(re.search(r"open at ([0-9.]+) ms", out.stderr).group(1)) * 1e-3
    assert opened == pytest.approx(t[k] + ref["open"], rel=1e-3)
    assert data["position_m"][-1] == pytest.approx(g["stroke"])


def test_the_model_device_capture_passes_check(tmp_path):
    """The model's virtual device (the emulator's physics: the design's own, so plumbing,
    not numbers) gives a capture of the eddy-term valve whose release returned into the bus
    that check passes against the design."""
    from coildrive.bench.check import check_capture
    from coildrive.bench.synth import synth_design_capture
    from coildrive.design import design

    des = design(load_drive(_drive_text(tmp_path, False, 400.0)))
    cap = synth_design_capture(des, actuations=1, hold_time=0.02, noise_codes=1.0, seed=5)
    report = check_capture(cap, des)
    assert report.ok, [(i.name, i.status, i.detail) for i in report.items]


def test_firmware_in_the_loop_rides_the_drooping_bus(tmp_path):
    """The compiled reference driver (gcc) in the loop with the eddy-term valve on the
    cable (was refused): the device's release, from the conversion at which the driver
    opens all four, is the armature's run into the bus (as the design's); `check` passes at
    the highest supply with a cold coil (the bus rises highest there) and at the nominal
    with the hottest coil (pull-in, seat, hold, the release's drop-out; at the lowest supply
    the design's own supply_droop check fails: the driver faults on its supply reading in
    the peak). Plumbing: the device's physics is the design's; but the release it plays
    (noise off) against scipy's solve_ivp (Radau) of the equations written afresh from the
    state at the driver's turn-off (the device's log gives the magnetising current and the
    bus there): the sensed current's first zero sample within a sample of the reference's
    zero, the open stop within 1e-4 (the stiff bus's run opens 4e-4 later here)."""
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.messages import EventKind
    from coildrive.bench.protocol import FrameDecoder
    from coildrive.codegen.host_build import build_firmware
    from coildrive.design import design
    from coildrive.model.armature import params_from_loop
    from coildrive.model.circuit import loop
    from driver_harness import checked_rows, loop_captures
    from test_emulator_device import capture_of

    path = _drive_text(tmp_path, False, 400.0)
    drive = load_drive(path)
    des = design(drive)
    hot = max(c.coil_temp_c for c in des.corners)
    runs = [(drive.supply.max, -10.0, None), (drive.supply.nominal, hot, None)]
    for (supply, temp, _), (cap_path, cap) in zip(runs, loop_captures(tmp_path, des, runs)):
        rows = checked_rows(cap_path, path, temp)
        assert rows["release_time"]["status"] == "pass", rows["release_time"]
    # the release the device plays, against solve_ivp
    lib = build_firmware(tmp_path / "fw", des, cache=tmp_path / "cache")
    dev = FirmwareDevice(des, lib, DeviceOptions(supply=28.0, coil_temp=-10.0, noise_codes=0, hold_time=0.03))
    dec, msgs, now = FrameDecoder(), [], 0.0
    while dev._t < 0.1:   # past the first actuation's release (the line paces the device's clock)
        now += 0.01
        msgs += dec.feed(dev.read(now))
    cap = capture_of(msgs, tmp_path / "quiet.cdcap")
    line = [e.text for e in dev._log if e.text.startswith("release into the bus")][0]
    i_m, v0 = (float(x) for x in re.search(r"from ([0-9.e-]+) A at ([0-9.e-]+) V", line).groups())
    k_off = [e.index for e in cap.events if e.kind == EventKind.OFF][0]
    fs = cap.meta.sample_rate_hz
    after = cap.code[cap.index > k_off]
    last = int(np.flatnonzero(after > 0)[-1]) + 1     # samples after the turn-off's, the last nonzero
    p = params_from_loop(drive.armature, loop(drive, np.array([28.0]), np.array([-10.0]), path="release"),
                         np.array([1.0]), 400.0, bus=(1.5, 100e-6))
    g = values(p)
    cur, _, pull = equations(g)
    ref = reference(g, cur, pull, lambda lam, x: 0.5 * lam * cur(lam, x), 400.0, drive.freewheel.diode_drop,
                    1.5, 100e-6, g["l_closed"] * i_m, v0)   # scipy solve_ivp (Radau), written afresh
    # the first sample reading zero within a sample of the reference's zero (the ADC floors:
    # under one code it reads zero)
    assert abs((last + 1) / fs - ref["zero"]) <= 1.0 / fs, (last / fs, ref["zero"])
    opened = float(re.search(r"open after ([0-9.e-]+) ms", line).group(1)) * 1e-3
    assert opened == pytest.approx(ref["open"], rel=1e-4)
