"""A current-mode hold (``[hold] mode = "current"``) with a moving ``[armature]``.

The peak is the moving armature's run, the hold the thresholds' segments on the seated
coil (``inductance_closed``), the release the run until the armature is back on its open
stop (coildrive/design/hold_current.py, model/waveform.armature_actuation). Outside
reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the equations written afresh
below (tests/armature_equations.py) -- flux linkage ``lam``, gap ``x``, velocity ``v``::

    i = lam (1 + beta x) / L_c                      (L(x) = L_c / (1 + beta x))
    dlam/dt = V - R_on i  (switch on),  -(R_off i + V_off) while i > 0 (off; then 0)
    m dv/dt = preload + rate (stroke - x) + load - lam^2 beta / (2 L_c) - c v

resting on the open stop until the magnetic force beats spring + load, free to the seat
(an inelastic stop), seated while the force beats spring + load there; the hold switched
by events at the hysteretic thresholds (off at the upper current, on at the lower one),
until the first turn-off at or after the hold's end; the release seated until the force
falls to spring + load (the armature lets go), then free to the open stop. Checked: the
seat, the hold's mean current and duty (one period of the settled orbit), the release
time from the top of the band, at the design's worst pull-in corner; and the simulate
CSV's seat, turn-off, open moments and switching edges at a bench point.

The device (``emulate``) and the compiled driver in the loop share the design's model:
their passing `check` proves the plumbing, not the numbers. The scenario
(examples/locker-latch-12v.toml held in current mode) is invented.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from armature_equations import equations, flux_pieces, switched_on_peak, values
from conftest import EXAMPLES, require_tool, run_cli

from coildrive.config import load_drive
from coildrive.design import design as make_design
from coildrive.design.corners import corner_grid
from coildrive.model.armature import params_from_loop
from coildrive.model.circuit import loop

LATCH = EXAMPLES / "locker-latch-12v.toml"
TOL = dict(method="DOP853", rtol=1e-11, atol=1e-14)


def _drive_file(tmp_path: Path, control: str = "hysteretic", extra: str = "", board: str | None = None) -> Path:
    text = LATCH.read_text().replace('frequency = "25 kHz"',
                                     f'frequency = "25 kHz"\nmode = "current"\ncontrol = "{control}"')
    text = text.replace('board = "relay-12bit-resistor"',
                        f'board = "{EXAMPLES.parent / "boards" / (board or "relay-12bit-resistor")}.toml"')
    path = tmp_path / f"latch-cm-{control}.toml"
    path.write_text(text + extra)
    return path


@pytest.fixture(scope="module")
def hyst(tmp_path_factory):
    path = _drive_file(tmp_path_factory.mktemp("armcm"))
    return path, make_design(load_drive(path))


def reference(g: dict, lower: float, upper: float, t_peak: float, hold_time: float,
              off_time: float = 0.0, release: tuple[float, float] | None = None,
              fast: tuple[float, float, float] | None = None) -> dict:
    """solve_ivp of the equations of the module docstring, piece by piece (``g``: one
    point's parameters, SI). ``off_time`` > 0: the fixed off-time control (off for that
    long, on to ``upper``, the peak threshold); ``release``: the final release's
    ``(R_off, V_off)`` when it takes another path than the hold's off-times (split
    decay's fast path, the bypass open from the final turn-off); ``fast``: a full bridge's
    mixed decay ``(R_f, V_f, t_f)``, each off-time first ``t_f`` s on that path (all four
    open: ``dlam/dt = -(R_f i + V_f)`` while ``i > 0``; hysteretic, to the lower threshold
    if it comes first), then the rest on the hold's own."""
    from scipy.integrate import solve_ivp

    lc, beta, stroke = g["l_closed"], g["beta"], g["stroke"]
    cur, opening, pull = equations(g)
    path = [(g["r_off"], g["v_off"])]

    def dlam(lam, x, on):
        if on:
            return g["v_on"] - g["r_on"] * cur(lam, x)
        r_off, v_off = path[0]
        return -(r_off * cur(lam, x) + v_off) if lam > 1e-15 else 0.0

    resting, free, event = flux_pieces(g, dlam)
    # the peak: resting open, free, seated
    t_move, t_seat, lam_end = switched_on_peak(g, dlam, t_peak, TOL)
    i_peak = cur(lam_end, 0.0)
    # the hold, seated: off to the lower threshold, on to the upper, until the end
    t, lam = t_peak, lam_end
    segs = []               # (start s, end s, switch on, dense solution)
    seated = event(lambda t, y: pull(y[0]) - opening(0.0), -1)
    while True:
        t0, low = t, False
        if fast is not None:   # the fast part (the body diodes block at zero: none here)
            path[0] = fast[:2]
            span = fast[2] if off_time <= 0 else min(fast[2], off_time)
            s = solve_ivp(resting(0.0, False), (t, t + span), [lam], dense_output=True,
                          events=[seated] + ([event(lambda t, y: cur(y[0], 0.0) - lower, -1)]
                                             if off_time <= 0 else []), **TOL)
            assert len(s.t_events[0]) == 0, "the armature lets go in the hold"
            low = off_time <= 0 and len(s.t_events[1]) > 0
            segs.append((t, s.t[-1], False, s.sol))
            t, lam = s.t[-1], s.y[0, -1]
            path[0] = (g["r_off"], g["v_off"])
        if low:   # hysteretic: the lower threshold in the fast part
            pass
        elif off_time > 0:   # off for the fixed time (the diode blocks at zero: none here)
            s = solve_ivp(resting(0.0, False), (t, t0 + off_time), [lam], dense_output=True,
                          events=seated, **TOL)
            assert len(s.t_events[0]) == 0, "the armature lets go in the hold"
            segs.append((t, t0 + off_time, False, s.sol))
            t, lam = t0 + off_time, s.y[0, -1]
        else:
            s = solve_ivp(resting(0.0, False), (t, t + 1.0), [lam], dense_output=True,
                          events=[event(lambda t, y: cur(y[0], 0.0) - lower, -1), seated], **TOL)
            assert len(s.t_events[1]) == 0, "the armature lets go in the hold"
            segs.append((t, s.t_events[0][0], False, s.sol))
            t, lam = s.t_events[0][0], s.y_events[0][0][0]
        if cur(lam, 0.0) >= upper:   # still above the peak threshold after the peak: off again
            continue
        s = solve_ivp(resting(0.0, True), (t, t + 1.0), [lam], dense_output=True,
                      events=event(lambda t, y: cur(y[0], 0.0) - upper, 1), **TOL)
        segs.append((t, s.t_events[0][0], True, s.sol))
        t, lam = s.t_events[0][0], s.y_events[0][0][0]
        if t >= t_peak + hold_time:
            break
    t_off = t
    ons = [k for k, seg in enumerate(segs) if seg[2]]
    assert len(ons) >= 2, "the hold must run a whole period after the first off-time"
    # one settled period: the last on-time and the off-time (its parts) before it
    period = segs[ons[-2] + 1:]
    a, b, c = period[0][0], period[-1][0], period[-1][1]
    charge = square = 0.0
    for lo, hi, _, sol in period:
        x = np.linspace(lo, hi, 100001)
        charge += np.trapezoid(cur(sol(x)[0], 0.0), x)
        square += np.trapezoid(cur(sol(x)[0], 0.0) ** 2, x)
    # the release: seated until the force falls to spring + load, free to the open stop
    if release is not None:
        path[0] = release
    s = solve_ivp(resting(0.0, False), (t_off, t_off + 1.0), [lam], events=seated, **TOL)
    t_let, y = s.t_events[0][0], [s.y_events[0][0][0], 0.0, 0.0]
    s = solve_ivp(free(False), (t_let, t_let + 1.0), y,
                  events=[event(lambda t, y: y[1] - stroke, 1), event(lambda t, y: y[0], -1)], **TOL)
    if len(s.t_events[1]):   # the current reaches zero in the flight: the diode blocks
        t_zero, y = s.t_events[1][0], s.y_events[1][0]
        s = solve_ivp(free(False), (t_zero, t_zero + 1.0), [0.0, y[1], y[2]],
                      events=event(lambda t, y: y[1] - stroke, 1), **TOL)
    return dict(move=t_move, seat=t_seat, i_peak=i_peak, off=t_off, mean=charge / (c - a),
                rms=float(np.sqrt(square / (c - a))),
                stay=float(np.sqrt(2 * opening(0.0) * lc / beta)) / lc,   # pull = spring + load seated
                duty=(c - b) / (c - a), period=c - a, let_go=t_let, open=s.t_events[0][0],
                edges=np.array([seg[0] for k, seg in enumerate(segs) if k == 0 or seg[2] != segs[k - 1][2]]
                               + [t_off]), segments=segs)



def _point(drive, supply, temp, r_factor=1.0, l_factor=1.0) -> dict:
    """One point's parameters for :func:`reference`: the loop and L(x) fit of the model
    (model.circuit.loop, model.armature.params_from_loop), in plain floats."""
    lp = loop(drive, np.array([supply]), np.array([temp]), np.array([r_factor]), np.array([l_factor]))
    p = params_from_loop(drive.armature, lp, np.array([l_factor]))
    return values(p)


def test_design_against_solve_ivp_at_the_worst_corner(hyst):
    """The seat, the hold's mean, RMS and duty on the seated coil, its force margin at the
    seat and the release from the top of the band at the worst pull-in corner (low supply,
    hot coil), against solve_ivp of the fresh equations (scipy; events at the thresholds
    and the stops). Measured: seat 1.2e-7, mean 2e-15, duty 1e-12, release 3e-8."""
    path, d = hyst
    drive = d.drive
    grid = corner_grid(drive)
    k = d.worst_corner_index
    c = d.corners[k]
    th = d.hold.thresholds
    g = _point(drive, c.supply_v, c.coil_temp_c, float(grid.r_factor[k]), float(grid.l_factor[k]))
    ref = reference(g, th.lower_a, th.upper_a, d.pull_in.peak_time_s, 4e-3)
    row = d.to_dict()["corners"][k]
    assert row["armature_status"] == "seated" and row["release_status"] == "opens"
    assert row["seat_time_s"] == pytest.approx(ref["seat"], rel=1e-5)
    assert row["hold_mean_current_a"] == pytest.approx(ref["mean"], rel=1e-7)
    assert row["hold_rms_current_a"] == pytest.approx(ref["rms"], rel=1e-7)
    assert row["hold_duty"] == pytest.approx(ref["duty"], rel=1e-7)
    assert row["release_time_s"] == pytest.approx(ref["open"] - ref["off"], rel=1e-5)
    # the force at the seat: the RMS current over the current where the magnetic pull
    # equals spring + load seated (the lower threshold sits above it: no lift, RMS counts)
    assert row["stay_current_a"] == pytest.approx(ref["stay"], rel=1e-9)
    assert row["hold_force_margin"] == pytest.approx(ref["rms"] / ref["stay"], rel=1e-7)
    assert th.lower_a > ref["stay"] and row["hold_lift_m"] == 0.0
    doc = d.to_dict()
    assert doc["hold"]["regulation"] == "current" and doc["armature"]["hold_force_margin"] >= 1.0
    names = {ch["name"]: ch["ok"] for ch in doc["checks"]}
    assert all(names[n] for n in ("armature_seats", "armature_hold", "armature_releases",
                                  "current_mode_regulated", "current_mode_frequency")), names


def _simulated(path: Path, tmp_path: Path, hold: str, *columns: str):
    """``simulate --csv`` of ``path`` at 12 V with a 40 degC coil, holding ``hold``: the
    named columns."""
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", "12", "--coil-temp", "40", "--hold-time", hold,
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    head = csv.read_text().split("\n", 1)[0].split(",")
    a = np.loadtxt(csv, delimiter=",", skiprows=1)
    return tuple(a[:, head.index(n)] for n in columns)


def test_simulate_csv_against_solve_ivp(hyst, tmp_path):
    """simulate --csv at 12 V with a 40 degC coil (nominal parts): the seat (gap 0), every
    switching edge of the hold, the final turn-off and the open stop against solve_ivp of
    the fresh equations. Measured: seat 8e-9 relative, edges within 1.2e-11 s, open 4e-9."""
    path, d = hyst
    t, i, on, x = _simulated(path, tmp_path, "4 ms", "time_s", "current_a", "switch_on", "position_m")
    assert np.all(np.diff(t) > 0)
    th = d.hold.thresholds
    ref = reference(_point(d.drive, 12.0, 40.0), th.lower_a, th.upper_a, d.pull_in.peak_time_s, 4e-3)
    stroke = d.drive.armature.stroke
    assert t[np.argmax(x <= 0.0)] == pytest.approx(ref["seat"], rel=1e-5)
    edges = t[np.flatnonzero(np.diff(on) != 0)]
    assert edges.size == ref["edges"].size, (edges.size, ref["edges"].size)
    assert np.max(np.abs(edges - ref["edges"])) < 1e-9
    off = edges[-1]
    back = t[np.flatnonzero((t > off) & (x >= stroke))[0]]
    assert back == pytest.approx(ref["open"], rel=1e-5)
    hold = (t > ref["edges"][1]) & (t < off)
    assert th.lower_a * (1 - 1e-9) <= i[hold].min() and i[hold].max() <= th.upper_a * (1 + 1e-9)


def test_off_time_design_against_solve_ivp(tmp_path):
    """The fixed off-time control: the seat, the hold's mean and duty (off for the timer's
    off time, on to the peak threshold, on the seated coil) and the release from the peak
    threshold at the worst pull-in corner, against solve_ivp of the fresh equations.
    Measured: seat 1.1e-7, mean 1.2e-14, duty 4e-12, release 3e-8 relative."""
    d = make_design(load_drive(_drive_file(tmp_path, "off_time")))
    th = d.hold.thresholds
    assert th.control == "off_time" and th.off_time_s > 0
    grid = corner_grid(d.drive)
    k = d.worst_corner_index
    c = d.corners[k]
    g = _point(d.drive, c.supply_v, c.coil_temp_c, float(grid.r_factor[k]), float(grid.l_factor[k]))
    ref = reference(g, 0.0, th.upper_a, d.pull_in.peak_time_s, 4e-3, off_time=th.off_time_s)
    row = d.to_dict()["corners"][k]
    assert row["seat_time_s"] == pytest.approx(ref["seat"], rel=1e-5)
    assert row["hold_mean_current_a"] == pytest.approx(ref["mean"], rel=1e-7)
    assert row["hold_duty"] == pytest.approx(ref["duty"], rel=1e-7)
    assert row["release_time_s"] == pytest.approx(ref["open"] - ref["off"], rel=1e-5)
    assert row["hold_force_margin"] == pytest.approx(ref["rms"] / ref["stay"], rel=1e-7)


def test_split_decay_simulate_against_solve_ivp(tmp_path):
    """Split decay (a Zener board): the hold's off-times through the slow diode path, the
    release through the fast Zener path once the bypass has opened inside the last
    on-time; simulate's edges and the open stop against solve_ivp of the fresh equations
    with each path's R_off and V_off (model.circuit.loop's, per path). Measured: edges
    within 1.7e-10 s, open 6e-8 relative."""
    path = _drive_file(tmp_path, extra="\n[freewheel]\nsplit_decay = true\n", board="lab-m32-zener")
    d = make_design(load_drive(path))
    assert d.split_decay is not None and d.drive.freewheel.bypass_lead >= 0
    t, on, x, bypass = _simulated(path, tmp_path, "12 ms", "time_s", "switch_on", "position_m", "bypass_on")
    fast = loop(d.drive, np.array([12.0]), np.array([40.0]), path="release")
    th = d.hold.thresholds
    ref = reference(_point(d.drive, 12.0, 40.0), th.lower_a, th.upper_a, d.pull_in.peak_time_s, 12e-3,
                    release=(float(fast.r_off[0]), float(fast.v_off[0])))
    edges = t[np.flatnonzero(np.diff(on) != 0)]
    assert edges.size == ref["edges"].size and np.max(np.abs(edges - ref["edges"])) < 1e-8
    assert np.all(bypass[t > edges[-1]] == 0) and np.all(bypass[t < edges[-2]] == 1)
    back = t[np.flatnonzero((t > edges[-1]) & (x >= d.drive.armature.stroke))[0]]
    assert back == pytest.approx(ref["open"], rel=1e-5)
    slow = reference(_point(d.drive, 12.0, 40.0), th.lower_a, th.upper_a, d.pull_in.peak_time_s, 12e-3)
    assert ref["open"] < slow["open"], "the fast path lets go sooner"


def test_emulate_capture_check_passes(tmp_path):
    """emulate -> capture -> check over a real pseudo-terminal at the low supply with a hot
    coil: the virtual device's hysteretic hold after the moving pull-in passes `check`,
    the seat included (plumbing: the device shares the design's model)."""
    from test_bench_e2e import emulate_capture_check

    path = _drive_file(tmp_path)
    r, rows = emulate_capture_check(path, tmp_path / "c.cdcap", "--noise", "1", "--supply", "10.8",
                                    "--coil-temp", "70")
    assert r.returncode == 0, (r.stderr, rows)
    assert all(rows[n] == "pass" for n in ("pull_in_time", "seated_time", "hold_mean", "release_time")), rows


def test_off_time_device_passes_check_at_two_corners(tmp_path):
    """The fixed off-time control in the virtual device (in process): `check` passes at the
    low supply with a hot coil and at the high supply cold; a coil 20 % over its
    resistance (the seat comes late) fails it (the check can fail)."""
    d = make_design(load_drive(_drive_file(tmp_path, "off_time")))
    assert d.hold.thresholds.control == "off_time"
    device_check(d, tmp_path)


def device_check(d, tmp_path: Path, corners=((10.8, 70.0), (13.2, -20.0)), can_fail: bool = True) -> None:
    """The model's virtual device (in process) of design ``d``: `check` passes at each of
    ``corners`` (V, degC; by default the low supply with a hot coil and the high supply
    cold), the seat included; ``can_fail``: a coil 20 % over its resistance (the seat comes
    late) fails it at the first (the check can fail)."""
    from test_emulator_device import capture_of, run as run_device

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions, VirtualDevice

    def checked(supply, temp, **scales):
        dev = VirtualDevice(d.drive, DeviceOptions(noise_codes=1.0, seed=3, supply=supply, coil_temp=temp,
                                                   **scales), design=d)
        msgs, _ = run_device(dev, 0.05 + 2 * dev.period, step=0.05)
        return check_capture(capture_of(msgs, tmp_path / "c.cdcap"), d, coil_temp=temp)

    for supply, temp in corners:
        rep = checked(supply, temp)
        assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items if i.status == "FAIL"]
        assert {i.name: i.status for i in rep.items}["seated_time"] == "pass"
    assert not can_fail or not checked(*corners[0], resistance_scale=1.2).ok


def test_firmware_in_the_loop_passes_check(hyst, tmp_path):
    """The compiled reference driver in the loop: the peak is the armature model's pull-in
    (its dip seen by the driver's seat detector), the threshold handlers then hold the
    seated coil; `check` passes at the low supply with a hot coil and at the high supply
    cold, the hold mean within 0.1 % of the prediction (plumbing: the device shares the
    design's model)."""
    require_tool("gcc")
    firmware_check(*hyst, tmp_path, 1e-3)


def firmware_check(path: Path, d, tmp_path: Path, mean_rel: float) -> None:
    """The compiled driver of ``path`` (design ``d``) in the loop at the low supply with a
    hot coil and at the high supply cold: `check` passes, the seat included, each hold
    mean within ``mean_rel`` of the prediction."""
    from test_current_mode_bench import capture_of

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.protocol import FrameDecoder
    from coildrive.codegen.host_build import build_firmware

    fw = tmp_path / "fw"
    assert run_cli("firmware-driver", str(path), "--out", str(fw)).returncode == 0
    lib = build_firmware(fw, d, cache=tmp_path / "cache")
    for supply, temp in ((10.8, 70.0), (13.2, -20.0)):
        dev = FirmwareDevice(d, lib, DeviceOptions(supply=supply, coil_temp=temp, first_actuation=0.002,
                                                   noise_codes=1, seed=3, hold_time=0.01, period=0.1))
        dec, msgs, t = FrameDecoder(), [], 0.0
        while t < 2 * dev.period + 0.03:   # the line paces the device: one whole actuation
            t += 0.01
            msgs += dec.feed(dev.read(t))
        rep = check_capture(capture_of(msgs, tmp_path / "f.cdcap"), d, coil_temp=temp)
        rows = {i.name: i for i in rep.items}
        assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items if i.status == "FAIL"]
        assert rows["hold_mean"].values and rows["seated_time"].status == "pass"
        for v in rows["hold_mean"].values:
            assert v == pytest.approx(rep.prediction["hold_mean_a"], rel=mean_rel)


def test_a_stop_in_the_peak_and_a_hold_in_flight(hyst):
    """A STOP in the peak (no hold: the device's cut actuation) opens the switch at the
    peak's end with the armature in flight, and it returns to the open stop; a hold after
    a peak too short to seat it would switch by thresholds with the armature in flight:
    refused in one line naming hold.mode."""
    from coildrive.design.hold_current import current_mode_actuation
    from coildrive.errors import InputError

    _, d = hyst
    th = d.hold.thresholds
    w = current_mode_actuation(d.drive, th, 12.0, 40.0, 5e-3, 0.0)
    assert w.events["off"] == pytest.approx(5e-3) and "seat" not in w.events
    assert w.position[-1] == pytest.approx(d.drive.armature.stroke) and w.current[-1] == 0.0
    with pytest.raises(InputError, match="armature is not seated at the end of the peak") as err:
        current_mode_actuation(d.drive, th, 12.0, 40.0, 5e-3, 2e-3)
    assert err.value.key == "hold.mode" and "\n" not in str(err.value)


def test_two_straight_curves_are_the_linear_design(tmp_path):
    """The coil's two flux-linkage curves (open and seated) under the current-mode hold:
    straight curves at the two inductances give the linear coil's design (checked against
    solve_ivp above) -- pull-in, thresholds, hold, release, the armature's figures -- to
    1e-9, and simulate's hold stays inside the band."""
    from test_armature_curves import L_OPEN, L_SEATED, curve_drive

    lin = make_design(load_drive(_drive_file(tmp_path))).to_dict()
    amps = np.array([0.0, 1.0, 4.0])
    base = curve_drive(tmp_path, (amps, L_OPEN * amps), (amps, L_SEATED * amps),
                       hold=f"{lin['hold']['current_a']!r} A",
                       release=f"{lin['release']['dropout_current_a']!r} A")
    path = _drive_file(tmp_path)
    path.write_text(base.read_text().replace('frequency = "25 kHz"',
                                             'frequency = "25 kHz"\nmode = "current"\ncontrol = "hysteretic"'))
    cur = make_design(load_drive(path)).to_dict()
    assert cur["current_mode"]["lower_code"] == lin["current_mode"]["lower_code"]
    assert cur["current_mode"]["upper_code"] == lin["current_mode"]["upper_code"]
    for sec, key in (("pull_in", "time_s"), ("pull_in", "peak_time_s"), ("hold", "frequency_hz"),
                     ("hold", "min_mean_current_a"), ("hold", "max_mean_current_a"),
                     ("release", "time_s"), ("release", "energy_j"), ("armature", "seat_time_s"),
                     ("armature", "stay_current_a"), ("armature", "hold_force_margin"),
                     ("armature", "release_open_time_s")):
        assert cur[sec][key] == pytest.approx(lin[sec][key], rel=1e-9, abs=1e-15), (sec, key)
    t, i = _simulated(path, tmp_path, "4 ms", "time_s", "current_a")
    th = cur["current_mode"]
    hold = (t > cur["pull_in"]["peak_time_s"] + 3e-3) & (t < cur["pull_in"]["peak_time_s"] + 4e-3)
    assert th["lower_a"] * (1 - 1e-9) <= i[hold].min() and i[hold].max() <= th["upper_a"] * (1 + 1e-6)


def test_header_compiles(hyst, tmp_path):
    """design --header of the current-mode armature drive: the thresholds and the seat
    window's constants, compiled with gcc -Wall -Wextra -Werror -pedantic."""
    import subprocess

    gcc = require_tool("gcc")
    path, _ = hyst
    out = tmp_path / "drive.h"
    r = run_cli("design", str(path), "--header", str(out))
    assert r.returncode == 0, r.stderr
    text = out.read_text()
    assert all(m in text for m in ("SEAT_LATEST_TICKS", "HOLD_LOWER_CODE", "HOLD_UPPER_CODE")), text[:2000]
    src = tmp_path / "main.c"
    src.write_text(f'#include "{out.name}"\nint main(void) {{ return 0; }}\n')
    cc = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-c", str(src),
                         "-o", str(tmp_path / "main.o")], capture_output=True, text=True, cwd=tmp_path)
    assert cc.returncode == 0, cc.stderr


def _bridge_file(tmp_path: Path, droop: bool = False) -> Path:
    """The bridge example with tests/test_bridge_armature.py's invented plunger, held in
    current mode (hysteretic); ``droop``: on a 1.5 ohm cable (its 100 uF)."""
    from test_bridge_armature import _drive

    _drive(tmp_path)
    path = tmp_path / "arm.toml"
    text = path.read_text().replace('frequency = "20 kHz"\n', 'frequency = "20 kHz"\nmode = "current"\n', 1)
    if droop:
        text = text.replace('capacitance = "220 uF"', 'capacitance = "100 uF"\nsource_resistance = "1.5 ohm"')
        assert "source_resistance" in text
    path.write_text(text)
    return path


def test_bridge_simulate_csv_against_solve_ivp(tmp_path):
    """simulate --csv of the armature on a full bridge held in current mode (was refused):
    the thresholds switch Q1 + Q4 (on) and Q2 + Q4 (off, the slow decay, V_off = 0), the
    release opens all four (the fast decay, V_bus + 2 V_d, into the stiff supply). At 24 V
    with a 20 degC coil, 8 ms of hold: the seat, every switching edge of the hold (the
    slow decay takes milliseconds from the peak down to the band), the final turn-off and
    the open stop against solve_ivp of the fresh equations, the release through the fast
    path. Measured: 197 edges within 7e-11 s, seat 3e-8, open 2e-8 relative."""
    path = _bridge_file(tmp_path)
    d = make_design(load_drive(path))
    assert _point(d.drive, 24.0, 20.0)["v_off"] == 0.0, "precondition: the hold's off-times are the slow decay"
    states = bridge_csv_against_solve_ivp(path, d, tmp_path)
    assert states == {(1, 1, 0, 0, 1), (0, 0, 1, 0, 1)}, states


def bridge_csv_against_solve_ivp(path: Path, d, tmp_path: Path, fast: float = 0.0) -> set:
    """`simulate --csv` of the bridge drive ``path`` (design ``d``) at 24 V with a 20 degC
    coil, 8 ms of hold, against :func:`reference` (scipy solve_ivp, DOP853): the seat, every
    switching edge within 1e-9 s, the open stop; the release opens all four. ``fast``: a
    mixed decay's fast part, s (each off-time's first, on the release's path). Returns the
    hold's switch states ``{(switch_on, Q1, Q2, Q3, Q4)}``."""
    th = d.hold.thresholds
    assert th.delay_s == 0.0, "precondition: the reference's comparator"
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--hold-time", "8 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    head = csv.read_text().split("\n", 1)[0].split(",")
    a = np.loadtxt(csv, delimiter=",", skiprows=1)
    t, on, x, ha, la, hb, lb = (a[:, head.index(n)] for n in (
        "time_s", "switch_on", "position_m", "high_a_on", "low_a_on", "high_b_on", "low_b_on"))
    g = _point(d.drive, 24.0, 20.0)
    rel = loop(d.drive, np.array([24.0]), np.array([20.0]), path="release")
    rel = (float(rel.r_off[0]), float(rel.v_off[0]))
    hyst = th.control == "hysteretic"
    ref = reference(g, th.lower_a if hyst else 0.0, th.upper_a, d.pull_in.peak_time_s, 8e-3,
                    0.0 if hyst else th.off_time_s, release=rel,
                    fast=(*rel, fast) if fast > 0 else None)   # scipy solve_ivp (DOP853)
    assert t[np.argmax(x <= 0.0)] == pytest.approx(ref["seat"], rel=1e-6)
    edges = t[np.flatnonzero(np.diff(on) != 0)]
    assert edges.size == ref["edges"].size > 100, (edges.size, ref["edges"].size)
    print(f"{th.control}: {edges.size} edges, largest difference {np.max(np.abs(edges - ref['edges'])):.2e} s")
    assert np.max(np.abs(edges - ref["edges"])) < 1e-9
    off = edges[-1]
    assert t[np.flatnonzero((t > off) & (x >= d.drive.armature.stroke))[0]] == pytest.approx(ref["open"], rel=1e-6)
    assert not np.any((ha + la + hb + lb)[t > off + 1e-9]), "the release opens all four"
    hold = (t > d.pull_in.peak_time_s) & (t < off)
    return set(zip(on[hold], ha[hold], la[hold], hb[hold], lb[hold]))


def test_bridge_on_the_drooping_bus_simulates(tmp_path):
    """The same on a 1.5 ohm cable: simulate runs it (was refused), the hold on the stiff
    supply as the design takes it, the release riding the bus (the armature's run into it:
    checked against solve_ivp in tests/test_bridge_armature_droop.py): bus_v rises above
    the supply after the final turn-off, and the band holds between the thresholds; the
    model's virtual device's capture passes `check` at 28 V with a cold coil."""
    path = _bridge_file(tmp_path, droop=True)
    d = make_design(load_drive(path))
    th = d.hold.thresholds
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", "28", "--coil-temp", "-10", "--hold-time", "8 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    assert "the release back into the bus: highest" in r.stderr, r.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    t, on = data["time_s"], data["switch_on"]
    edges = t[np.flatnonzero(np.diff(on) != 0)]
    off = edges[-1]
    assert float(data["bus_v"][t > off].max()) > 28.0 + 0.1
    band = (t > edges[edges > d.pull_in.peak_time_s][1]) & (t < off)   # from the hold's first on-time
    assert band.sum() > 100
    assert th.lower_a * (1 - 1e-9) <= data["current_a"][band].min()
    assert data["current_a"][band].max() <= th.upper_a * (1 + 1e-9)
    # the model's virtual device runs it too: `check` passes (plumbing: the design's model)
    from test_emulator_device import capture_of, run as run_device

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions, VirtualDevice

    dev = VirtualDevice(d.drive, DeviceOptions(noise_codes=1.0, seed=3, supply=28.0, coil_temp=-10.0), design=d)
    msgs, _ = run_device(dev, 0.05 + 2 * dev.period, step=0.05)
    rep = check_capture(capture_of(msgs, tmp_path / "c.cdcap"), d, coil_temp=-10.0)
    assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items if i.status == "FAIL"]


def test_bridge_on_the_drooping_bus_firmware_in_the_loop(tmp_path):
    """The compiled reference driver in the loop with the current-mode hold on the bridge on
    the cable: the threshold handlers switch the masks on the seated coil, and from the tick
    that opens all four the device plays the armature's run into the drooping bus (as the
    design's release); `check` passes at 28 V with a cold coil and at 24 V with a hot one,
    two actuations each (the second starts from the bus the first left: it must read back
    at the supply, not SUPPLY_HIGH). Plumbing: the device's physics is the design's."""
    d = make_design(load_drive(_bridge_file(tmp_path, droop=True)))
    for dev, _ in bridge_firmware_checks(d, tmp_path, ((28.0, -10.0), (24.0, 60.0))):
        assert sum("release into the bus" in e.text for e in dev._log) == 2, dev._log


def bridge_firmware_checks(d, tmp_path: Path, corners) -> list:
    """gcc: the compiled reference driver of design ``d`` in the loop at each ``(supply V,
    coil degC)`` of ``corners``, 30 ms holds, two actuations each: `check` passes. Returns
    ``[(device, check report)]``."""
    require_tool("gcc")
    from test_current_mode_bench import capture_of

    from coildrive.bench.check import check_capture
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.protocol import FrameDecoder
    from coildrive.codegen.driver import render_driver
    from coildrive.codegen.host_build import build_firmware

    fw = tmp_path / "fw"
    fw.mkdir()
    for name, text in render_driver(d, "coil").items():
        (fw / name).write_text(text)
    lib = build_firmware(fw, d, cache=tmp_path / "cache")
    out = []
    for supply, temp in corners:
        dev = FirmwareDevice(d, lib, DeviceOptions(supply=supply, coil_temp=temp, noise_codes=1, seed=3,
                                                   hold_time=0.03))
        dec, msgs, now = FrameDecoder(), [], 0.0
        while dev._t < 0.05 + 2 * dev.period:
            now += 0.01
            msgs += dec.feed(dev.read(now))
        rep = check_capture(capture_of(msgs, tmp_path / f"{supply:g}.cdcap"), d, coil_temp=temp)
        assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items if i.status == "FAIL"]
        out.append((dev, rep))
    return out
