"""A moving armature's boosted peak on a full bridge with a mixed-decay hold
(``[supply] boost`` + ``[armature]`` + ``hold.fast_fraction``): where the threshold comes
before the seat, the hold from the main supply carries the armature on, each off-time
first fast -- all four switches open, the coil's current into the bus through two body
diodes, ``-(R_fast i + V_bus + 2 V_d)`` until it stops -- then slow through the two
low-side switches (coildrive/model/armature_boost.py).

Outside source: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the circuit and armature
written afresh in the current (tests/test_boost_armature.py's ``reference``, with the
off-time's fast part): the seat moment within 1e-6 at the model's rtol 1e-9; the design's
latest seat at its corner within 1e-5 (rtol 1e-7). The scenario
(examples/fast-valve-boost-armature-12v.toml on the bundled bridge) is invented.
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest

from conftest import run_cli
from test_boost_armature import BOOST, DUTY, PERIOD, POINT, LC, BETA, _on_bridge, reference

from coildrive.model.armature import SEATED, ArmatureParams
from coildrive.model.armature_boost import boost_params, boosted_pull_in, seated_in_peak
from coildrive.model.pwm import MixedDecay

#: The bridge's slow decay (two low-side switches: no diode drop) and its fast path (the
#: coil and sense resistor into the 9 V bus through two 0.8 V body diodes).
SLOW = dict(r_off=8.58, v_off=0.0)
FAST = (0.5, 8.5, 9.0 + 1.6)


def _with_fast(tmp_path, fraction=0.5):
    path = tmp_path / "bridge.toml"
    _on_bridge(tmp_path)
    text = path.read_text()
    assert 'frequency = "60 kHz"' in text
    path.write_text(text.replace('frequency = "60 kHz"', f'frequency = "60 kHz"\nfast_fraction = {fraction}'))
    return path


def test_the_hold_s_fast_parts_carry_the_armature_onto_the_seat_against_scipy():
    """The threshold in flight, then the mixed hold: the seat against solve_ivp (DOP853)
    within 1e-6; the fast parts matter (the slow-decay hold seats measurably earlier)."""
    p = ArmatureParams.make(**{**POINT, **SLOW})
    pb = boost_params(p, *BOOST)
    mixed = MixedDecay(FAST[0], np.array([FAST[1]]), np.array([FAST[2]]))
    pin = boosted_pull_in(pb, p, 1.0, DUTY, PERIOD, 0.02, rtol=1e-9, mixed=mixed)
    slow = boosted_pull_in(pb, p, 1.0, DUTY, PERIOD, 0.02, rtol=1e-9)
    ref = reference({**POINT, **SLOW}, *BOOST, 1.0, DUTY, PERIOD, 0.02, fast=FAST)   # scipy solve_ivp
    assert pin.status[0] == SEATED and not seated_in_peak(pin)[0]
    assert pin.seat_time[0] == pytest.approx(ref["seat"], rel=1e-6)
    assert pin.seat_time[0] > slow.seat_time[0] * (1 + 1e-3)


def test_design_and_simulate(tmp_path):
    """design --json of the example on the bridge with fast_fraction = 0.5 designs it (was
    refused): the latest seat, in the hold after the threshold at its corner, against solve_ivp
    with the corner's loop (two switches on, the slow decay with no diode, the fast path into
    the bus) within 1e-5; simulate draws the actuation with the armature onto the seat."""
    from coildrive.config import load_drive
    from coildrive.model.circuit import loop

    path = _with_fast(tmp_path)
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    d = json.loads(r.stdout)
    assert d["topology"]["bridge"]["hold_decay"] == "mixed"
    a = d["armature"]
    assert a["seated_corners"] == a["corners"] and a["seated_in_peak_corners"] < a["corners"]
    corner = next(c for c in d["corners"] if c["label"] == a["seat_corner"])
    drive = load_drive(path)
    r_pct, l_pct = re.search(r"R([+-]\d+)%, L([+-]\d+)%", corner["label"]).groups()
    r_factor, l_factor = 1 + float(r_pct) / 100, 1 + float(l_pct) / 100
    args = (np.array([corner["supply_v"]]), np.array([corner["coil_temp_c"]]), np.array([r_factor]),
            np.array([l_factor]))
    lp, fast = loop(drive, *args), loop(drive, *args, path="release")
    g = {"v_on": corner["supply_v"], "r_on": float(lp.r_on[0]), "r_off": float(lp.r_off[0]),
         "v_off": float(lp.v_off[0]), "l_closed": LC * l_factor, "beta": BETA,
         **{k: POINT[k] for k in ("stroke", "mass", "preload", "rate", "load", "damping")}}
    s = drive.supply
    boost = (s.boost * (1 - s.boost_tolerance), s.boost_capacitance * (1 - s.boost_capacitance_tolerance),
             s.boost_resistance)
    ref = reference(g, *boost, d["boost"]["threshold_a"], corner["hold_duty"], 1 / d["hold"]["frequency_hz"],
                    0.01, fast=(0.5, float(fast.r_off[0]), float(fast.v_off[0])))   # scipy solve_ivp
    assert ref["trip"] < ref["seat"]
    assert a["seat_time_s"] == pytest.approx(ref["seat"], rel=1e-5)
    out = tmp_path / "a.csv"
    sim = run_cli("simulate", str(path), "--supply", "9", "--coil-temp", "100", "--hold-time", "0.002",
                  "--csv", str(out))
    assert sim.returncode == 0, sim.stderr
    data = np.genfromtxt(out, delimiter=",", names=True)
    assert {"boost_v", "position_m"} <= set(data.dtype.names) and data["position_m"].min() == 0.0


def replay(g: dict, fast: tuple, boost: tuple, stretches) -> float:
    """solve_ivp (DOP853) of tests/armature_equations.py's ``boosted_rhs`` (the circuit and
    armature written afresh in the current) over the stretches a device flew (``(from s, to
    s, what)``: ``"boost"``, ``"on"`` from the main supply, ``"hold"`` the slow decay,
    ``"release"`` the fast part: ``fast = (R_fast, V_fast)``), from rest with the boost
    capacitor at ``boost[0]``; an inelastic seat, held there. The current at the end, A."""
    from scipy.integrate import solve_ivp

    from armature_equations import boosted_events, boosted_rhs

    start, _ = boosted_events(g, math.inf)

    def seat(_t, y):
        return y[1]
    seat.terminal, seat.direction = True, -1
    slow, quick = boosted_rhs(g, boost), boosted_rhs({**g, "r_off": fast[0], "v_off": fast[1]}, boost)
    opts = dict(method="DOP853", rtol=1e-11, atol=1e-14)
    y, state = [0.0, g["stroke"], 0.0, boost[0]], "open"
    for t, stop, what in stretches:
        rhs = quick if what == "release" else slow
        mode = "boost" if what == "boost" else "on" if what == "on" else "off"
        while t < stop * (1 - 1e-15):
            ev = [start] if state == "open" else [seat] if state == "free" else []
            sol = solve_ivp(rhs(mode, state == "free"), (t, stop), y, events=ev or None, **opts)
            t, y = float(sol.t[-1]), list(sol.y[:, -1])
            y[0] = max(y[0], 0.0)
            if ev and sol.t_events[0].size:
                if state == "free":
                    y[1] = y[2] = 0.0
                state = "seated" if state == "free" else "free"
    assert state == "seated"
    return y[0]


@pytest.mark.compiler
def test_firmware_in_the_loop_flies_the_fast_parts(tmp_path):
    """The reference C driver (gcc) in the loop at the hottest coil at 9 V (the threshold in
    flight, the hold carrying the armature on): the device flies the armature as the driver
    switches, each off-time fast up to the count it gives (``port_fast_end``), then slow
    (bench/boost_flight.py); ``check`` passes. Against scipy's ``solve_ivp`` (DOP853) of the
    equations written afresh over the stretches the device flew (noise off): the current at
    the flight's end (the armature seated in it) within 1e-5 (the flight's rtol is 1e-7)."""
    from driver_harness import checked_rows, loop_captures

    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.messages import EventKind
    from coildrive.codegen.host_build import build_firmware
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model.circuit import loop

    path = _with_fast(tmp_path)
    d = design(load_drive(path))
    hot = max(c.coil_temp_c for c in d.corners)
    v = d.drive.supply.min
    (cap_path, cap), = loop_captures(tmp_path, d, [(v, hot, None)], hold_time=0.01)
    kinds = [int(e.kind) for e in cap.events]
    assert int(EventKind.FAULT) not in kinds and int(EventKind.PEAK_END) in kinds, kinds
    rows = checked_rows(cap_path, path, hot)
    assert {n for n, i in rows.items() if i["status"] == "pass"} >= {
        "pull_in_time", "peak_duration", "hold_mean", "release_time"}
    assert rows["seated_time"]["status"] == "n/a" and "in the hold" in rows["seated_time"]["detail"]
    # the flight the device flew, against solve_ivp
    lib = build_firmware(tmp_path / "fw", d, cache=tmp_path / "cache")
    dev = FirmwareDevice(d, lib, DeviceOptions(supply=v, coil_temp=hot, noise_codes=0, hold_time=0.01))
    now = 0.0
    while dev._t < 0.1:   # past the first actuation's flight (the line paces the device's clock)
        now += 0.01
        dev.read(now)
    seen, i_end = dev._arm.flown, dev._arm.current
    assert not dev._arm.active and any(w == "release" for _, _, w in seen) and any(w == "hold" for _, _, w in seen)
    lp, fast = loop(d.drive, v, hot), loop(d.drive, v, hot, path="release")
    g = {**POINT, "v_on": v, "r_on": float(lp.r_on), "r_off": float(lp.r_off), "v_off": float(lp.v_off)}
    s = d.drive.supply
    want = replay(g, (float(fast.r_off), float(fast.v_off)), (s.boost, s.boost_capacitance, s.boost_resistance),
                  [(a - seen[0][0], b - seen[0][0], w) for a, b, w in seen])
    assert i_end == pytest.approx(want, rel=1e-5)
