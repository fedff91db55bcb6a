"""A full bridge's current-mode hold with mixed decay on the drooping bus (``hold.mode =
"current"``, ``hold.fast_fraction`` > 0, ``[supply] source_resistance``): the hold is
regulated by its thresholds (the design takes its orbit on the stiff bus, as every hold on
the drooping bus), while each off-time's fast part returns the coil's current through two
body diodes into the bulk capacitor behind the source resistance. On a supply that sinks
the bus may sit above the source in the hold by up to
:func:`coildrive.model.bus_decay.mixed_hold_rise`, taken with each period's longest fast
part and shortest period whatever the bus does
(:func:`coildrive.design.hold_current.fast_pulses`: a current-mode period moves with the
bus); on one that cannot sink the energy bound
:func:`coildrive.model.bus_decay.no_sink_energy_top` holds as for any bridge. The
capacitor's ripple current takes the fast part's own share of each period.

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-10) of the circuit written
afresh -- ``C dv/dt = (V_s - v) / R_s - i_bridge`` (a supply that cannot sink: the feed's
current never negative), the coil ``L di/dt = v - R_on i`` (on: Q1 + Q4, ``i_bridge = i``),
``L di/dt = -(v + 2 V_d) - R_f i`` (fast: all four open, ``i_bridge = -i``, the body diodes
blocking at zero), ``L di/dt = -R_s i`` (slow: Q2 + Q4, nothing from the bus; a curve or
an eddy term: tests/test_bridge_current_mixed_droop_coils.py) -- switched
by the thresholds (events on the current) and the one-shot / off-timer, over the hold from
its first turn-off and then the release (all four open) to zero. Checked: the highest bus
over the hold at or below the bound (and on a bus fast against the period at least half of
it: not vacuous); on a supply that cannot sink the highest bus over the hold and the
release at or below the design's highest bus; with ``R_s C`` long against the period the
capacitor's RMS current against ``mean x sqrt(D + F - (F - D)^2)`` within 3 %.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import run_cli
from test_bridge_current import bridge_variant
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.hold_current import fast_pulses, steady_state
from coildrive.model import bus_decay
from coildrive.model import supply as bus_model
from coildrive.model.circuit import loop

OPTS = dict(rtol=1e-10, atol=1e-13, method="DOP853")
HOLDS = {"off_time": 'control = "off_time"\nfast_fraction = 0.3\n', "hysteretic": "fast_fraction = 0.3\n"}


def _drive(tmp_path, control, r_s="2 ohm", cap="1 uF", sink="true", name=None):
    hold = 'frequency = "20 kHz"\nmode = "current"\nmin_frequency = "5 kHz"\n' + HOLDS[control]
    return bridge_variant(tmp_path, ('frequency = "20 kHz"\n', hold),
                          ('sink = false                 # a diode in the feed: the returned energy stays on the bus\n',
                           f'sink = {sink}\nsource_resistance = "{r_s}"\n'),
                          ('capacitance = "220 uF"', f'capacitance = "{cap}"'),
                          name=name or f"droop-{control}-{sink}.toml")


def reference(drive, th, v_s, r, scale, periods, release=True, i0=None):
    """The hold from its first turn-off at the upper threshold (the bus at the source,
    drawing that current) for ``periods`` periods, then the release: ``(t, terminal i, v,
    i_cap, on-time s, fast s of the last period, period s)`` sampled densely, by
    ``solve_ivp`` (module docstring; the coil linear, a curve or an eddy term as the drive
    gives it: tests/test_bridge_current_mixed_droop_coils.py); ``r`` the coil's ohm,
    ``scale`` the inductance tolerance factor; ``i0``: from a turn-off at that current
    instead (a peak's end: while the current is above the upper threshold the switch turns
    straight off again)."""
    from scipy.integrate import solve_ivp
    from scipy.interpolate import PchipInterpolator

    s, c_, sw, rs_ = drive.supply, drive.coil, drive.switch.on_resistance, drive.board.sense.resistance
    vd, r_s, cap = drive.freewheel.diode_drop, s.source_resistance, s.capacitance
    res = {"on": r + 2 * sw + rs_, "fast": r + rs_, "slow": r + 2 * sw + rs_}
    r_e, ell = c_.eddy_resistance or None, scale * c_.inductance
    ld = PchipInterpolator(np.array(c_.flux_current), scale * np.array(c_.flux_linkage)).derivative() \
        if c_.flux_current else (lambda _: ell)

    def coil(kind, i_m, v):
        """(d i_m / dt, terminal current) on the path ``kind`` (on, fast, slow, blocked)."""
        if kind == "blocked":   # the body diodes block: no terminal current, the flux through R_e
            return (0.0 * i_m if r_e is None else -r_e * i_m / ld(i_m)), 0.0 * i_m
        vl, rr = {"on": v, "fast": -(v + 2 * vd), "slow": 0.0 * v}[kind], res[kind]
        if r_e is None:
            return (vl - rr * i_m) / ld(i_m), i_m
        vm = (vl - rr * i_m) / (1.0 + rr / r_e)
        return vm / ld(i_m), i_m + vm / r_e

    def feed(v):
        x = (v_s - v) / r_s
        return x if s.sink else np.maximum(x, 0.0)

    def into_bridge(kind, i):
        return {"on": i, "fast": -i}.get(kind, 0.0 * i)

    def rhs(kind):
        def f(_, y):
            di, i = coil(kind, *y)
            return [di, (feed(y[1]) - into_bridge(kind, i)) / cap]
        return f

    def level(kind, x, direction):
        def e(_, y):
            return coil(kind, *y)[1] - x
        e.terminal, e.direction = True, direction
        return e

    def sensed(kind):
        return float(coil(kind, *y)[1])

    hyst = th.control == "hysteretic"
    t_fast = th.off_time_s if hyst else drive.hold.fast_fraction * th.off_time_s
    i0 = th.upper_a if i0 is None else i0
    v0 = v_s - r_s * i0
    m0 = i0 if r_e is None else ((res["on"] + r_e) * i0 - v0) / r_e
    pieces, t, y = [], 0.0, np.array([m0, v0])

    def go(kind, span, events=()):
        nonlocal t, y
        sol = solve_ivp(rhs(kind), (t, t + span), y, events=list(events) or None,
                        max_step=span / 50 if span < 1.0 else 1e-6, **OPTS)
        i = coil(kind, *sol.y)[1]
        pieces.append(np.vstack([sol.t, i, sol.y[1], feed(sol.y[1]) - into_bridge(kind, i)]))
        t, y = sol.t[-1], sol.y[:, -1].copy()
        return sol.status == 1 and any(len(e) for e in sol.t_events)

    last = None
    for _ in range(periods):
        t0, done, fast = t, False, 0.0
        if sensed("fast") <= 0.0:   # (an eddy term: the terminal current steps to zero at once)
            go("blocked", t_fast)
        else:
            events = [level("fast", 0.0, -1)] + ([level("fast", th.lower_a, -1)] if hyst else [])
            hit = go("fast", t_fast, events)
            fast = t - t0
            done = hyst and hit and sensed("fast") > 1e-12   # the lower threshold in the fast part
            if hit and not done:
                go("blocked", t0 + t_fast - t)
        if not done and not (hyst and sensed("slow") <= th.lower_a):
            go("slow", 1.0 if hyst else t0 + th.off_time_s - t, [level("slow", th.lower_a, -1)] if hyst else ())
        t1 = t
        if sensed("on") < th.upper_a:
            go("on", 1.0, [level("on", th.upper_a, 1)])
        last = (t - t1, fast, t - t0)
    if release and sensed("fast") > 0.0:
        go("fast", 1.0, [level("fast", 0.0, -1)])
    return (*np.hstack(pieces), *last)


def _point(d, drive, which="nominal"):
    """``(supply V, coil ohm, inductance factor)`` at the nominal point (20 degC: R_ref, L), or at the
    highest supply with the coil cold at the lowest ambient, its resistance low and its
    inductance high (copper's R(T), IEC 60028): the corner the design names for its
    highest bus here."""
    c = drive.coil
    if which == "nominal":
        return drive.supply.nominal, c.resistance, 1.0
    cold = drive.ambient.min
    assert d["supply"]["highest_bus_corner"].startswith(f"{drive.supply.max:g} V, {cold:g} degC")
    r = c.resistance * (1 - c.resistance_tolerance) * (1 + 0.00393 * (cold - c.reference_temp))
    return drive.supply.max, r, 1 + c.inductance_tolerance


@pytest.mark.parametrize("control", list(HOLDS))
def test_hold_rise_bound_against_solve_ivp(tmp_path, control):
    """A supply that sinks, 2 ohm and 1 uF (``R_s C`` = 2 us, fast against the period):
    the highest bus over 40 periods of the hold at the nominal point at or below ``V_s`` +
    the bound, and at least half of it (solve_ivp, module docstring)."""
    drive = load_drive(_drive(tmp_path, control, cap="1 uF"))
    des = design(drive)
    th = des.hold.thresholds
    v_s, r, scale = _point(None, drive)
    lp = loop(drive, v_s, 20.0)
    cm = steady_state(drive, lp, th.lower_a if control == "hysteretic" else 0.0, th.upper_a, th.off_time_s,
                      th.delay_s)
    t_fast, period = fast_pulses(drive, th, lp, cm)
    bound = float(bus_decay.mixed_hold_rise(drive.supply.source_resistance, drive.supply.capacitance,
                                            float(cm.i_max), t_fast, period))
    t, i, v, i_cap, *_ = reference(drive, th, v_s, r, scale, 40, release=False)
    rise = float(v.max()) - v_s
    print(f"{control}: highest bus {rise:.5g} V over the source, bound {bound:.5g} V")
    assert 0.5 * bound <= rise <= bound


def test_hold_rise_bound_from_the_peaks_end_against_solve_ivp(tmp_path):
    """The fixed off-time coming down from the peak's end (``V_s / R_on``, the most a peak
    from the main supply reaches) on 2 ohm and 22 uF (``R_s C`` = 44 us, about a period):
    the switch turns straight off again while the current is above the threshold, so the
    fast parts come every ``t_off``; the highest bus over the descent and 40 periods at or
    below ``V_s`` + the bound with ``T = t_off`` and the peak's end as ``i_top`` (solve_ivp,
    module docstring)."""
    drive = load_drive(_drive(tmp_path, "off_time", cap="22 uF"))
    th = design(drive).hold.thresholds
    v_s, r, scale = _point(None, drive)
    lp = loop(drive, v_s, 20.0)
    cm = steady_state(drive, lp, 0.0, th.upper_a, th.off_time_s, th.delay_s)
    t_fast, period = fast_pulses(drive, th, lp, cm)
    i_end = float(lp.v_on / lp.r_on)
    bound = float(bus_decay.mixed_hold_rise(drive.supply.source_resistance, drive.supply.capacitance, i_end,
                                            t_fast, period))
    v = reference(drive, th, v_s, r, scale, 120, release=False, i0=i_end)[2]
    rise = float(v.max()) - v_s
    print(f"from the peak's end: highest bus {rise:.5g} V over the source, bound {bound:.5g} V")
    assert 0.5 * bound <= rise <= bound


@pytest.mark.parametrize("control", list(HOLDS))
def test_ripple_current_against_solve_ivp(tmp_path, control):
    """2 ohm and 1 mF (``R_s C`` = 2 ms, long against the period): the capacitor's RMS
    current over the last 20 periods of 160 against the design's formula at the nominal
    point with the orbit's own duty and fast share, within 3 % (solve_ivp, module
    docstring)."""
    drive = load_drive(_drive(tmp_path, control, cap="1 mF"))
    th = design(drive).hold.thresholds
    v_s, r, scale = _point(None, drive)
    lp = loop(drive, v_s, 20.0)
    cm = steady_state(drive, lp, th.lower_a if control == "hysteretic" else 0.0, th.upper_a, th.off_time_s,
                      th.delay_s)
    t, i, v, i_cap, t_on, fast, period = reference(drive, th, v_s, r, scale, 160, release=False)
    k = t >= t[-1] - 20 * period
    tk, ck, ik = t[k], i_cap[k], i[k]
    rms = np.sqrt(np.trapezoid(ck ** 2, tk) / (tk[-1] - tk[0]))
    mean = np.trapezoid(ik, tk) / (tk[-1] - tk[0])
    f_share = float(cm.fast_time / cm.period)
    want = float(bus_model.hold_ripple_current(mean, float(cm.duty), f_share))
    # the stiff bus's orbit (the design's) against the drooping bus's: a hysteretic fast part
    # ended by the lower threshold moves with the bus (V_f = v + 2 V_d), by 0.3 % here
    assert float(cm.fast_time) == pytest.approx(fast, rel=1e-2)
    print(f"{control}: capacitor RMS {rms:.5g} A vs {want:.5g} A (F = {f_share:.4g})")
    assert rms == pytest.approx(want, rel=0.03)


@pytest.mark.parametrize("control", list(HOLDS))
def test_no_sink_highest_bus_against_solve_ivp(tmp_path, control):
    """A supply that cannot sink, 0.5 ohm and 47 uF: at the design's highest-bus corner,
    40 periods of hold then the release, the highest bus at or below the design's
    (``no_sink_energy_top`` at the coil's top; solve_ivp, module docstring); `design
    --json` (a subprocess) names the fast part's share in its ripple method."""
    path = _drive(tmp_path, control, r_s="0.5 ohm", cap="47 uF", sink="false")
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    d = json.loads(r.stdout)
    drive = load_drive(path)
    th = design(drive).hold.thresholds
    assert "the fast part's time / the period" in d["supply"]["ripple_method"]
    v_s, res, scale = _point(d, drive, "highest")
    _, _, v, *_ = reference(drive, th, v_s, res, scale, 40)
    assert float(v.max()) > v_s + 0.5 and float(v.max()) <= d["supply"]["highest_bus_v"]


def simulates_and_emulates(tmp_path, path):
    """Plumbing (the emulator shares the design's physics): the drive at ``path`` designs
    and passes; simulate writes the four switches' columns, and the virtual device's
    capture passes check."""
    from test_boost_high_side import emulated_check_passes

    d = design(load_drive(path))
    assert d.ok, [c.name for c in d.checks if c.ok is False]
    csv = tmp_path / "sim.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "60", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    assert "high_a_on,low_a_on,high_b_on,low_b_on" in csv.read_text().splitlines()[0]
    emulated_check_passes(tmp_path, path)


def test_a_passing_drive_simulates_and_runs_in_the_virtual_device(tmp_path):
    """Behind 2 mohm and 220 uF with a supply that sinks the off-time design passes; it
    simulates and runs in the virtual device (plumbing)."""
    simulates_and_emulates(tmp_path, _drive(tmp_path, "off_time", r_s="2 mohm", cap="220 uF", name="stiffer.toml"))
