"""The saturating coil (a flux-linkage curve in ``[coil]``): its interpolant, its segment
times and PWM orbit, the design, simulate and the virtual bench device on it, and the
file errors. The physics against ngspice is in tests/test_flux_ngspice.py.

Sources beside each check: scipy's ``PchipInterpolator`` (the interpolant), scipy's
``solve_ivp`` (the rise as an ODE in the flux), the closed-form RL step (a straight
curve is the linear coil: Kirchhoff's voltage law, ``i = V/R + (i0 - V/R) e^(-tR/L)``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from conftest import EXAMPLES, run_cli
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model import flux
from coildrive.model.circuit import loop
from coildrive.model.pwm import duty_for_mean, pwm_steady_state
from coildrive.model.rl import decay_current, decay_time, rise_current, rise_time

EXAMPLE = EXAMPLES / "saturating-valve-24v.toml"


def _coil(current, psi, scale=1.0) -> flux.FluxCoil:
    return flux.FluxCoil(flux.curve(tuple(map(float, current)), tuple(map(float, psi))),
                         np.asarray(scale, float))


def test_interpolant_is_scipys_pchip():
    from scipy.interpolate import PchipInterpolator

    rng = np.random.default_rng(7)
    for _ in range(50):
        n = int(rng.integers(3, 20))
        x = np.concatenate([[0.0], np.cumsum(rng.uniform(0.01, 1.0, n - 1))])
        y = np.concatenate([[0.0], np.cumsum(rng.uniform(1e-4, 0.1, n - 1))])
        ref = PchipInterpolator(x, y)
        c = flux.curve(tuple(x), tuple(y))
        probe = np.linspace(0.0, x[-1], 301)
        # scipy's PchipInterpolator: the same values and slopes to rounding
        assert np.allclose(c.psi(probe), ref(probe), rtol=1e-12, atol=1e-15)
        assert np.allclose(c.incremental(probe), ref.derivative()(probe), rtol=1e-10, atol=1e-12)
        assert np.all(np.diff(c.psi(probe)) >= 0), "monotone"


def test_straight_curve_is_the_linear_coil():
    """psi = L i through the flux path gives the closed forms of the linear coil."""
    ell = 0.06
    coil = _coil([0.0, 0.5, 1.0, 2.0], [0.0, 0.5 * ell, ell, 2 * ell])
    v, r, r_off, v_off = 24.0, 26.0, 24.0, 0.8
    for i1 in (0.1, 0.55, 0.9):
        assert rise_time(i1, 0.0, v, r, coil) == pytest.approx(rise_time(i1, 0.0, v, r, ell), rel=1e-11)
    t = np.array([1e-4, 1e-3, 5e-3])
    assert np.allclose(rise_current(t, 0.0, v, r, coil), rise_current(t, 0.0, v, r, ell), rtol=1e-11)
    assert decay_time(0.0, 0.6, r_off, v_off, coil) == pytest.approx(
        decay_time(0.0, 0.6, r_off, v_off, ell), rel=1e-11)
    assert np.allclose(decay_current(t, 0.6, r_off, v_off, coil), decay_current(t, 0.6, r_off, v_off, ell),
                       rtol=1e-10, atol=1e-13)
    for duty, f in ((0.3, 25e3), (0.05, 200.0)):   # continuous, discontinuous
        a = pwm_steady_state(duty, f, v, r, r_off, v_off, coil)
        b = pwm_steady_state(duty, f, v, r, r_off, v_off, ell)
        assert bool(a.dcm) == bool(b.dcm)
        for name in ("i_min", "i_max", "mean", "rms", "conduction_off"):
            assert float(getattr(a, name)) == pytest.approx(float(getattr(b, name)), rel=1e-9, abs=1e-12), name


CURVE_I = [0.0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.8, 1.0, 1.5, 2.0]
CURVE_PSI = list(0.040 * np.tanh(np.array(CURVE_I) / 0.35) + 0.005 * np.array(CURVE_I))


def test_rise_against_scipy_ode():
    """scipy's solve_ivp (Radau, rtol 1e-10) on dpsi/dt = V - R i(psi), i(psi) the
    inverse of the same interpolant: the time to 0.55 A."""
    from scipy.integrate import solve_ivp
    from scipy.optimize import brentq

    coil = _coil(CURVE_I, CURVE_PSI, 1.15)
    v, r, target = 20.0, 28.3, 0.55
    c = coil.curve

    def current_of(psi):
        return brentq(lambda i: 1.15 * float(c.psi(i)) - psi, 0.0, 3.0, xtol=1e-15, rtol=1e-14)

    event = lambda t, y: current_of(y[0]) - target   # noqa: E731
    event.terminal = True
    sol = solve_ivp(lambda t, y: [v - r * current_of(y[0])], (0.0, 1.0), [0.0], method="Radau",
                    events=event, rtol=1e-10, atol=1e-14)
    t_ref = float(sol.t_events[0][0])
    assert float(rise_time(target, 0.0, v, r, coil)) == pytest.approx(t_ref, rel=1e-6)


def test_orbit_is_a_period_exactly():
    coil = _coil(CURVE_I, CURVE_PSI, np.linspace(0.85, 1.15, 7))
    v = np.linspace(20.0, 28.0, 7)
    for duty, f in ((0.35, 25e3), (0.7, 25e3), (0.1, 300.0)):
        ss = pwm_steady_state(duty, f, v, 26.0, 24.0, 0.8, coil)
        top = rise_current(duty / f, ss.i_min, v, 26.0, coil)
        back = decay_current((1 - duty) / f, top, 24.0, 0.8, coil)
        assert np.allclose(top, ss.i_max, rtol=1e-9), "the on-time ends at i_max"
        assert np.allclose(back, ss.i_min, rtol=1e-9, atol=1e-12), "the off-time returns to i_min"
    tgt = duty_for_mean(0.3, 25e3, v, 26.0, 24.0, 0.8, coil)
    assert np.allclose(pwm_steady_state(tgt, 25e3, v, 26.0, 24.0, 0.8, coil).mean, 0.3, rtol=1e-9)


@st.composite
def _curve_pair(draw):
    """A saturating curve and one with a lower (or equal) incremental inductance at every
    current: a scaled copy, or the curve with its slopes lowered interval by interval
    (kept only where PCHIP's slope is then lower everywhere)."""
    n = draw(st.integers(3, 9))
    slopes = np.array(draw(st.lists(st.floats(1e-3, 0.5), min_size=n - 1, max_size=n - 1)))
    steps = np.array(draw(st.lists(st.floats(0.02, 0.5), min_size=n - 1, max_size=n - 1)))
    x = np.concatenate([[0.0], np.cumsum(steps)])
    y = np.concatenate([[0.0], np.cumsum(slopes * steps)])
    if draw(st.booleans()):
        y2 = y * draw(st.floats(0.2, 1.0))
    else:
        f = np.array(draw(st.lists(st.floats(0.2, 1.0), min_size=n - 1, max_size=n - 1)))
        y2 = np.concatenate([[0.0], np.cumsum(slopes * f * steps)])
    a, b = _coil(x, y), _coil(x, y2)
    probe = np.linspace(0.0, 1.5 * x[-1], 2001)
    assume(np.all(b.incremental(probe) <= a.incremental(probe) * (1 + 1e-12)))
    return a, b, x[-1]


@settings(max_examples=60, deadline=None, derandomize=True)
@given(pair=_curve_pair(), v=st.floats(5.0, 48.0), r=st.floats(1.0, 100.0), frac=st.floats(0.05, 0.98))
def test_lower_incremental_inductance_never_lengthens_pull_in(pair, v, r, frac):
    a, b, _ = pair
    target = frac * v / r
    t_a = float(rise_time(target, 0.0, v, r, a))
    t_b = float(rise_time(target, 0.0, v, r, b))
    assert t_b <= t_a * (1 + 1e-9), (t_a, t_b)


def test_design_uses_the_curve():
    d = load_drive(EXAMPLE)
    des = design(d)
    assert des.ok, [c.name for c in des.failed]
    # the worst corner's pull-in time is the curve's exact rise time at that corner
    worst = max(des.corners, key=lambda c: c.pull_in_time_s)
    l0 = float(flux.curve(d.coil.flux_current, d.coil.flux_linkage).incremental(0.0))
    lp = loop(d, worst.supply_v, worst.coil_temp_c,
              worst.resistance_ohm / float(loop(d, worst.supply_v, worst.coil_temp_c).r_coil),
              worst.inductance_h / l0)
    t = float(rise_time(d.pull_in.current, 0.0, lp.v_on, lp.r_on, lp.inductance))
    assert des.pull_in.time_s == pytest.approx(t, rel=1e-12)
    # the linear coil of the meter's small-signal inductance predicts a slower pull-in
    t_lin = float(rise_time(d.pull_in.current, 0.0, lp.v_on, lp.r_on, lp.inductance.small_signal()))
    assert t_lin > 1.2 * t
    # the hold's lowest mean is the exact orbit's at its corner (one PWM count of slack)
    assert des.hold.min_mean_current_a >= d.hold.current


def test_simulate_and_json_end_to_end(tmp_path):
    csv = tmp_path / "sat.csv"
    r = run_cli("simulate", str(EXAMPLE), "--supply", "20", "--coil-temp", "100", "--hold-time",
                "0.06", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    t, i, on = data[:, 0], data[:, 1], data[:, 2]
    d = load_drive(EXAMPLE)
    lp = loop(d, 20.0, 100.0)
    des = design(d)
    peak = des.pull_in.peak_time_s
    k = np.searchsorted(t, peak)
    assert i[k] == pytest.approx(float(rise_current(peak, 0.0, lp.v_on, lp.r_on, lp.inductance)), rel=1e-6)
    # after 60 ms of hold the ripple sits on the exact orbit of the duty the firmware runs
    edges = np.flatnonzero(np.diff(on) != 0)
    last_on = edges[-2] + 1   # the last period's switch-on sample
    duty = float(r.stderr.split("hold duty ")[1].split()[0])
    ss = pwm_steady_state(duty, d.hold.frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    assert i[last_on] == pytest.approx(float(ss.i_min), rel=2e-3)
    assert i[edges[-1]] == pytest.approx(float(ss.i_max), rel=2e-3)
    j = run_cli("design", str(EXAMPLE), "--json")
    doc = json.loads(j.stdout)
    assert doc["ok"] and doc["pull_in"]["time_s"] == pytest.approx(des.pull_in.time_s)


def test_emulated_device_runs_the_curve():
    """A synthetic capture of the curve (the emulator's physics) holds at the exact orbit's
    mean; the virtual device streams those codes (plumbing: it shares the model)."""
    from coildrive.bench.analysis import analyse
    from coildrive.bench.synth import synth_capture

    d = load_drive(EXAMPLE)
    des = design(d)
    cap = synth_capture(d, des.pull_in.peak_time_s, des.hold.duty, des.timer.frequency_hz,
                        supply=24.0, coil_temp=60.0, hold_time=0.06)
    res = analyse(cap, pull_in_current=d.pull_in.current).actuations[0]
    lp = loop(d, 24.0, 60.0)
    ss = pwm_steady_state(des.hold.duty, des.timer.frequency_hz, lp.v_on, lp.r_on, lp.r_off,
                          lp.v_off, lp.inductance)
    # the capture's hold mean (16-bit ADC) on the exact orbit's, within 1 %
    assert res.hold_mean_a == pytest.approx(float(ss.mean), rel=0.01)
    # the virtual bench device (coildrive emulate) streams the same actuation
    from coildrive.bench.device import DeviceOptions, VirtualDevice
    from test_emulator_device import assert_same_codes, recordings, run, synth_like

    # (switch-on 0.4 us into a sample period: with 0.3 us the design's off-edges, 30.7 us
    # into each period, would fall exactly on samples, where device and capture may round
    # the switch state apart -- plumbing of both, whatever the coil)
    on = 0.0500124
    opts = DeviceOptions(first_actuation=on, noise_codes=0.0)
    dev = VirtualDevice(d, opts, design=des)
    msgs, _ = run(dev, dev.period + on - 0.001)
    rec = recordings(msgs)
    assert len(rec) == 1
    assert_same_codes(rec[0], synth_like(des, dev, rec[0], on, opts.hold_time))


@pytest.mark.parametrize("edit, key", [
    ('reference_temp = "20 degC"', 'reference_temp = "20 degC"\ninductance = "120 mH"'),
    ('"5.93 mWb"', '"50 mWb"'),
    ('flux_current = [0, 0.05,', 'flux_current = [0, 0.07, 0.05,'),
    ('"52.0 mWb"]', '"52.0 mWb", "53 mWb"]'),
])
def test_bad_curves_are_one_line_exit_2(tmp_path, edit, key):
    path = tmp_path / "bad.toml"
    old, new = edit, key
    text = EXAMPLE.read_text()
    assert old in text
    path.write_text(text.replace(old, new, 1).replace('board = "fast-32bit-clamp"',
                                                      'board = "fast-32bit-clamp"'))
    r = run_cli("design", str(path))
    assert r.returncode == 2, (r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in r.stderr, r.stderr
    assert "coil." in lines[0], lines[0]


def test_armature_inductances_with_a_curve_are_refused(tmp_path):
    """With a curve the armature's inductances are the curves' slopes: giving both is
    one line naming both keys (the open and seated curves: tests/test_armature_curves.py)."""
    latch = (EXAMPLES / "locker-latch-12v.toml").read_text()
    assert "[coil]" in latch
    text = latch.replace("[coil]", "[coil]\nflux_current = [0, 0.1, 0.2]\n"
                         'flux_linkage = ["0 mWb", "5 mWb", "8 mWb"]', 1)
    text = "\n".join(line for line in text.splitlines() if not line.startswith("inductance ="))
    path = tmp_path / "latch.toml"
    path.write_text(text.replace('board = "', 'board = "', 1))
    r = run_cli("design", str(path), cwd=EXAMPLES)
    lines = r.stderr.strip().splitlines()
    assert r.returncode == 2 and len(lines) == 1, r.stderr
    assert "armature.inductance_open and coil.flux_current" in lines[0], lines[0]


def test_live_tune_takes_a_curve(tmp_path):
    """Live tuning takes a curve (tests/test_tune_live_coils.py): past the drive's checks,
    a port that is not there is the one line."""
    r = run_cli("tune", str(EXAMPLE), "--port", str(tmp_path / "no-port"), "--capture", str(tmp_path / "c.cdcap"))
    assert r.returncode == 2, (r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert lines[-1].startswith("coildrive: --port") and "coil.flux_current" not in r.stderr, r.stderr
    assert "Traceback" not in r.stderr


def test_split_decay_actuation_follows_both_paths(tmp_path):
    """A saturating coil with split decay through simulate: the hold's last period is the
    slow loop's exact orbit (its mean within 0.5 %: the samples' trapezoid), the bypass
    opens before the final turn-off, and the release reaches zero when the fast loop's
    exact decay says (to 1e-9). Against ngspice: tests/test_flux_ngspice.py."""
    from coildrive.model.waveform import actuation

    text = (EXAMPLES / "wash-valve-split-24v.toml").read_text()
    cur = EXAMPLE.read_text().split("flux_current = ")[1].split("\n")[0]
    link = "[" + EXAMPLE.read_text().split("flux_linkage = [")[1].split("]")[0] + "]"
    path = tmp_path / "split-curve.toml"
    path.write_text(text.replace('inductance = "70 mH"', f"flux_current = {cur}\nflux_linkage = {link}", 1))
    drive = load_drive(path)
    d = design(drive)
    duty, f = d.hold.duty, d.hold.frequency_hz
    w = actuation(drive, 24.0, 70.0, d.pull_in.peak_time_s, duty, f, 0.02, points=40)
    lp = loop(drive, 24.0, 70.0)
    fast = loop(drive, 24.0, 70.0, path="release")
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    t_off = w.events["off"]
    last = (w.time >= t_off - duty / f - (1 - duty) / f) & (w.time <= t_off - duty / f)
    mean = np.trapezoid(w.current[last], w.time[last]) / (w.time[last][-1] - w.time[last][0])
    assert mean == pytest.approx(float(ss.mean), rel=5e-3)
    assert w.events["bypass_open"] < t_off and w.bypass_on[-1] == 0
    i_cut = float(np.interp(t_off, w.time, w.current))
    t_zero = float(decay_time(0.0, i_cut, fast.r_off, fast.v_off, fast.inductance))
    assert w.events["zero"] == pytest.approx(t_off + t_zero, rel=1e-9)


def test_one_point_inversion_and_gap_state_are_the_batchs_bits():
    """``current_of`` of one flux linkage runs in Python floats (an armature's flight asks
    for tens of thousands); ``GapCurves.state`` of one point too. Both are step for step
    the vectorised arithmetic, so they equal point 0 of a two-point batch bit for bit --
    in every piece, on the table's points, at zero and on the extension above it."""
    from test_armature_curves import open_table, seated_table

    from coildrive.model.gap_curves import GapCurves

    o, c = flux.FluxCurve(*open_table()), flux.FluxCurve(*seated_table())
    probes = np.concatenate([np.linspace(0.0, 0.13, 157), c.flux, [1e-300, 0.1 + 1e-12]])
    for curve in (o, c):
        for psi in probes:
            assert curve.current_of(psi) == curve.current_of(np.array([psi, psi]))[0], psi
    gap = GapCurves(o, c, np.array([1.03]), np.array([0.004]))
    gap2 = GapCurves(o, c, np.array([1.03, 1.03]), np.array([0.004, 0.004]))
    for lam in (-0.02, 0.0, 0.031, 0.0999, 0.12):
        for x in (0.0, 0.0017, 0.004):
            one = gap.state(np.array([lam]), np.array([x]))
            two = gap2.state(np.array([lam, lam]), np.array([x, x]))
            assert all(a[0] == b[0] for a, b in zip(one, two)), (lam, x)
