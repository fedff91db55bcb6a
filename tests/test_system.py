"""Several channels on one board (a system file): the shared timer, the staggered peaks
within the rail's current limit, the shared rail's droop, the header, the CLI.

Outside references, named beside each check:

* the channels designed alone (``coildrive design`` of each drive file): the shared timer
  must give the same hold currents within one compare count;
* the rail's current written afresh here (``i(t) = V/R (1 - exp(-t R/L))`` per channel
  during its peak, then the hold's bound), swept at 1e5 points with numpy;
* ngspice (batch mode, ``ngspice -b``): several coils switched onto one bus behind the
  source resistance and the bulk capacitor, ``.meas tran MIN v(bus)``;
* the timer's own definition for ``simulate SYSTEM.toml``: a PWM output on from every
  period start ``m / f`` to ``m / f + compare / (period counts x f)``, with ``f``, the
  period and the compare taken from the design's JSON; and the rail bound written afresh
  (above) on the simulated CSV's time grid;
* the C compilers (gcc, arm-none-eabi-gcc, avr-gcc) on the board's header with
  ``-Wall -Wextra -Werror -pedantic``.
"""

from __future__ import annotations

import json
import re
import subprocess

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import EXAMPLES, require_tool, run_cli
from ngspice_run import OPTIONS, knee, run
from rail_reference import linear_tail

from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model import shared_bus
from coildrive.model import supply as bus_model

SYSTEM = EXAMPLES / "manifold" / "manifold-system.toml"


@pytest.fixture(scope="module")
def doc():
    r = CliRunner().invoke(app, ["design", str(SYSTEM), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"]


def test_shared_timer_against_each_channel_alone(doc):
    """Reference: each channel's drive file designed alone. One prescaler and period
    serve every channel, inside each one's window; the hold currents agree within one
    compare count."""
    (timer,) = doc["timers"]
    for ch in doc["channels"]:
        shared = ch["design"]
        assert (shared["timer"]["prescaler"], shared["timer"]["period_ticks"]) == \
            (timer["prescaler"], timer["period_ticks"])
        alone = design(load_drive(ch["drive_file"]))
        f, tol = shared["timer"]["frequency_hz"], alone.drive.hold.frequency_tolerance
        assert abs(f / alone.drive.hold.frequency - 1) <= tol + 1e-12, (ch["name"], f)
        # the hold current (the least mean over the corners): within one compare count
        step = max(shared["hold"]["current_step_a"], alone.hold.current_step_a)
        assert abs(shared["hold"]["min_mean_current_a"] - alone.hold.min_mean_current_a) <= step, \
            (ch["name"], shared["hold"]["min_mean_current_a"], alone.hold.min_mean_current_a, step)
        # the most (a supply-table entry's top supply, cold coil): each design rounds each
        # entry up at its own period, so two counts of the current there
        count = alone.drive.supply.max / min(c.resistance_ohm for c in alone.corners) / \
            shared["timer"]["period_ticks"]
        assert abs(shared["hold"]["max_mean_current_a"] - alone.hold.max_mean_current_a) <= 2 * count, \
            (ch["name"], shared["hold"]["max_mean_current_a"], alone.hold.max_mean_current_a, count)
        assert shared["hold"]["min_mean_current_a"] >= alone.drive.hold.current


def _branch(t, b):
    """One branch of a channel's rail-current bound, written afresh from
    docs/design-method.md: the RL rise during the peak, then the hold's top plus the
    peak's excess decaying at the slowest rate of each part of the inductance range
    (:func:`rail_reference.linear_tail`; a closed loop's capped)."""
    t = np.asarray(t, float)
    rise = b["supply_v"] / b["resistance_ohm"] * (1 - np.exp(-np.maximum(t, 0) * b["resistance_ohm"] / b["inductance_h"]))
    return np.where(t < 0, 0, np.where(t <= b["peak_s"], rise, linear_tail(t, b)))


def _rail(t, chans, supply, rows=None):
    """The rail's bound at source voltage ``supply``: each channel's largest branch among
    those whose supply range holds it, summed (written afresh). ``rows``: the branches
    already evaluated at ``t``, per channel."""
    total = 0
    for n, c in enumerate(chans):
        br = [k for k, b in enumerate(c["bound"]["branches"]) if b["supply_low_v"] <= supply <= b["supply_v"]]
        got = [rows[n][k] if rows else _branch(t - c["offset_s"], c["bound"]["branches"][k]) for k in br]
        total = total + np.max(got, axis=0)
    return total


def test_staggered_total_never_above_the_limit(doc):
    """A dense sweep (1e5 points, numpy) of the sum written afresh at every supply where
    the readable branches change (each range's ends and the midpoints between them):
    never above the limit with the stagger; the peaks together are well above it."""
    limit = doc["current_limit_a"]
    chans = doc["channels"]
    end = max(c["offset_s"] + c["bound"]["peak_s"] for c in chans) + 0.02
    t = np.linspace(0, end, 100_000)
    edges = sorted({x for c in chans for b in c["bound"]["branches"] for x in (b["supply_low_v"], b["supply_v"])})
    supplies = edges + [0.5 * (a + b) for a, b in zip(edges[:-1], edges[1:])]
    rows = [[_branch(t - c["offset_s"], b) for b in c["bound"]["branches"]] for c in chans]
    worst = max(_rail(t, chans, v, rows).max() for v in supplies)
    assert worst <= limit, worst
    # the search's own bound is never below the sampled sum
    assert doc["rails"][0]["peak_current_staggered_a"] >= worst - 1e-12
    together = [dict(c, offset_s=0.0) for c in chans]
    assert max(_rail(t, together, v).max() for v in (edges[0], edges[-1])) > limit
    tick = 1 / doc["tick_rate_hz"]
    assert [c["offset_ticks"] for c in chans] == [k * doc["stagger_ticks"] for k in range(len(chans))]
    assert all(abs(c["offset_s"] - c["offset_ticks"] * tick) < 1e-12 for c in chans)


def _coil_tops(t, ch, supply, temp, r_f, l_f, duty=None):
    """A channel's coil current at the top of each PWM period (A) at time ``t`` s after its
    switch-on, written afresh: the firmware's peak and duty looked up in the design's
    tables at the truncated supply reading, the RL rise, then each PWM period's exact
    on and off exponentials (the off path the bypassed freewheel: diode drop, bypass
    resistor; stops at zero). Copper R(T): IEC 60028, alpha = 0.00393 /K."""
    d = ch["design"]
    drv = load_drive(ch["drive_file"], EXAMPLES.parent / "boards" / "manifold-m32-6ch.toml")
    b, c, fw = drv.board, drv.coil, drv.freewheel
    code = np.floor(supply / b.supply_sense.divider / (b.adc.reference / 2**b.adc.bits))
    pk = d.get("peak_table") or {"adc_codes": [0], "peak_ticks": [d["pull_in"]["peak_ticks"]]}
    k = max(0, int(np.searchsorted(pk["adc_codes"], code, side="right")) - 1)
    t_peak = pk["peak_ticks"][k] / b.tick.rate
    if duty is None:
        dt = d["duty_table"]
        j = max(0, int(np.searchsorted(dt["adc_codes"], code, side="right")) - 1)
        duty = dt["compare_ticks"][j] / d["timer"]["period_ticks"]
    period = 1 / d["hold"]["frequency_hz"]
    r_coil = c.resistance * (1 + 0.00393 * (temp - c.reference_temp)) * r_f
    r_on = r_coil + drv.switch.on_resistance + b.sense.resistance
    r_off = r_coil + b.sense.resistance + fw.bypass_resistance
    ind = c.inductance * l_f
    i = supply / r_on * (1 - np.exp(-t_peak * r_on / ind))
    n = int(np.ceil((t.max() - t_peak) / period)) + 2
    tops = np.empty(n)
    for m in range(n):
        tops[m] = supply / r_on + (i - supply / r_on) * np.exp(-duty * period * r_on / ind)
        i = max(0.0, -fw.diode_drop / r_off + (tops[m] + fw.diode_drop / r_off)
                * np.exp(-(1 - duty) * period * r_off / ind))
    rise = supply / r_on * (1 - np.exp(-np.maximum(t, 0) * r_on / ind))
    m = np.clip(np.floor((t - t_peak) / period).astype(int), 0, n - 1)
    return np.where(t < 0, 0.0, np.where(t <= t_peak, rise, tops[m]))


def test_bound_is_close_to_the_simulated_worst(doc):
    """The rail's bound against the channels simulated afresh (:func:`_coil_tops`, each
    coil at the top of its PWM period, all staggered as designed) over a grid of corners:
    every supply just below a step of the firmware's tables (its longest peak and highest
    duty meet the highest supply there) and the ends, the cold coil (ambient.min), R and L
    at both tolerance ends. The bound is never below any corner's total and no more than
    15 % above the worst (the reading's droop on a stiff-bus simulation included)."""
    chans = doc["channels"]
    pk = chans[0]["design"]["peak_table"]
    lsb = 3.3 / 4096 * 11
    supplies = sorted({20.0, 28.0, *(c * lsb - 1e-6 for c in pk["adc_codes"][1:])})
    end = max(c["offset_s"] + c["bound"]["peak_s"] for c in chans) + 0.005
    t = np.arange(0, end, 5e-6)
    worst = 0.0
    for v in supplies:
        for r_f in (0.93, 1.07):
            for l_f in (0.85, 1.15):
                total = sum(_coil_tops(t - c["offset_s"], c, v, 0.0, r_f, l_f) for c in chans)
                worst = max(worst, float(total.max()))
    bound = doc["rails"][0]["peak_current_staggered_a"]
    assert worst <= bound, (worst, bound)
    print(f"bound {bound:.4f} A, simulated worst {worst:.4f} A, ratio {bound / worst:.4f}")
    assert bound <= 1.15 * worst, (bound, worst)


def test_bound_covers_the_simulated_actuation(doc):
    """The bound against the design's own simulated actuation (the current the switch
    draws, coil current x switch on) at the corner of the most current: plumbing of the
    same physics, so it shows the bound is applied to the right figures."""
    from coildrive.design import actuation

    for ch in (doc["channels"][0], doc["channels"][-1]):
        d = design(load_drive(ch["drive_file"], EXAMPLES.parent / "boards" / "manifold-m32-6ch.toml"))
        tol_r, tol_l = d.drive.coil.resistance_tolerance, d.drive.coil.inductance_tolerance
        for v in (d.drive.supply.min, d.drive.supply.max):
            w = actuation(d, v, d.drive.ambient.min, 0.03, 1 - tol_r, 1 - tol_l)
            draw = w.current * w.switch_on
            on = w.time < w.events["off"]
            shifted = dict(ch, offset_s=0.0)
            assert np.all(draw[on] <= _rail(w.time[on], [shifted], v) + 1e-9)


#: (name, V_s V, R_s ohm, C F, [(R ohm, L H, on s)]): three coils together and staggered.
DROOP = [
    ("together", 20.0, 0.25, 1e-3, [(31.0, 0.038, 0.0), (31.0, 0.038, 0.0), (20.6, 0.06, 0.0)]),
    ("staggered", 20.0, 0.5, 470e-6, [(31.0, 0.038, 0.0), (20.6, 0.06, 1.5e-3), (8.0, 0.01, 3e-3)]),
]


@pytest.mark.parametrize("case", DROOP, ids=[c[0] for c in DROOP])
def test_shared_droop_against_ngspice(tmp_path, case):
    """Reference: ngspice, the source, R_s, the bulk C and each coil switched on at its
    time by a gated conductance (the pattern of tests/test_supply_droop.py)."""
    name, vs, rs, c, coils = case
    t_end = 8e-3
    step = t_end / 20000
    lines = [f"* {name}: {len(coils)} coils on one bus", f"VS src 0 DC {vs!r}", f"RS src bus {rs!r}",
             f"C1 bus 0 {c!r} IC={vs!r}"]
    for k, (r, l, on) in enumerate(coils):
        lines += [f"RC{k} bus a{k} {r - 0.01!r}", f"L{k} a{k} s{k} {l!r} IC=0",
                  f"VG{k} g{k} 0 PULSE(0 1 {on!r} 1n 1n 1 2)",
                  f"B{k} s{k} 0 I = V(s{k}) * (V(g{k}) / 0.01 + (1 - V(g{k})) * 1e-9)"]
    lines += [OPTIONS, f".tran {step!r} {t_end!r} 0 {step!r} UIC", ".meas tran vlow MIN v(bus)", ".end", ""]
    got = run(tmp_path, name, "\n".join(lines))
    r, l, on = zip(*coils)
    v_low, _ = shared_bus.lowest_bus(vs, rs, c, r, l, on, [t_end] * len(coils))
    # ngspice transient: 1 mV on the bus
    assert abs(v_low - got["vlow"]) <= 1e-3, (v_low, got)


#: (name, C F, [(R ohm, L H, on s, peak end s, duty)]): peaks and PWM holds on one bus.
DROOP_PWM = [
    ("staggered", 470e-6, [(31.0, 0.038, 0.0, 2.4e-3, 0.37), (31.0, 0.038, 1e-3, 3.4e-3, 0.37),
                           (20.6, 0.06, 2e-3, 6e-3, 0.36)]),
    ("holds-heavy", 220e-6, [(12.0, 0.02, 0.0, 1e-3, 0.8), (12.0, 0.02, 0.0, 1e-3, 0.8),
                             (8.0, 0.01, 3e-3, 4e-3, 0.6)]),
]


@pytest.mark.parametrize("case", DROOP_PWM, ids=[c[0] for c in DROOP_PWM])
def test_shared_droop_with_pwm_holds_against_ngspice(tmp_path, case):
    """Reference: ngspice, each coil's switch a gated conductance on during its peak and,
    after it, from each period start for its duty (PULSE sources on a shared period), a
    knee diode and the bypass resistor freewheeling the coil back onto the bus node."""
    name, c, coils = case
    vs, rs, period, t_end, vd, rfw, step = 20.0, 0.25, 5e-5, 7e-3, 0.9, 0.2, 2e-7
    lines = [f"* {name}: peaks and PWM holds on one bus", f"VS src 0 DC {vs!r}", f"RS src bus {rs!r}",
             f"C1 bus 0 {c!r} IC={vs!r}"]
    for k, (r, l, on, end, d) in enumerate(coils):
        lines += [f"RC{k} bus a{k} {r - 0.01!r}", f"L{k} a{k} s{k} {l!r} IC=0",
                  f"VP{k} p{k} 0 PULSE(0 1 {on!r} 1n 1n {end - on!r} 1)",
                  f"VH{k} h{k} 0 PULSE(0 1 0 1n 1n {d * period - 1e-9!r} {period!r})",
                  f"B{k} s{k} 0 I = V(s{k}) * ((V(p{k}) > 0.5 || (time > {end!r} && V(h{k}) > 0.5)) ? 100 : 1e-9)",
                  knee(f"BD{k}", f"s{k}", f"f{k}", vd), f"RF{k} f{k} bus {rfw!r}"]
    lines += [OPTIONS, f".tran {step!r} {t_end!r} 0 {step!r} UIC", ".meas tran vlow MIN v(bus)", ".end", ""]
    got = run(tmp_path, name, "\n".join(lines))
    r, l, on, end, d = (np.array(x) for x in zip(*coils))
    v_low, _ = shared_bus.lowest_bus_pwm(vs, rs, c, r, r - 0.01 + 0.001 + rfw, [vd] * len(r), l, on, end, d,
                                         period, t_end)
    # ngspice transient (0.2 us steps, 1 ns edges): 1 mV on the bus
    assert abs(v_low - got["vlow"]) <= 1e-3, (v_low, got)
    # the holds draw: the peaks alone droop less
    v_peaks, _ = shared_bus.lowest_bus(vs, rs, c, r, l, on, end)
    assert v_low < v_peaks


def test_simulated_droop_against_solve_ivp(tmp_path):
    """``simulate SYSTEM.toml`` on the manifold's drooping rail (0.25 ohm, 1000 uF; the CLI
    end to end at 20 V, the cold coil at 0 degC, R x0.93, L x0.85): the coils fed from the
    drooping bus. Reference: scipy's solve_ivp (DOP853, rtol 1e-10) on the circuit's
    equations written afresh -- ``C dv/dt = (V_s - v)/R_s - sum of the switched coils'
    currents``, each coil ``L di/dt = v - R_on i`` while its switch conducts and ``-(R_off i +
    V_d)`` freewheeling (held at zero there), copper R(T) by IEC 60028 (alpha = 0.00393 /K),
    the sense resistor in the coil's path -- each switch played from the CSV's own switch
    columns, integrated piece by piece between their edges, after a coil's final turn-off its
    release through the diode and the Zener. Up to the last final turn-off: the bus within
    1e-6 V, each coil's current within 1e-6 A, and the rail's current the switched coils'
    sum."""
    bus = droop_against_solve_ivp(SYSTEM, tmp_path)
    # the design's lowest bus (the longest peak and the highest duty the firmware may pick
    # at 20 V) is never above the simulated one
    rail = json.loads(CliRunner().invoke(app, ["design", str(SYSTEM), "--json"]).stdout)["system"]["rails"][0]
    assert rail["lowest_bus_staggered_v"] <= bus.min()
    print(f"lowest bus {bus.min():.6f} V (design {rail['lowest_bus_staggered_v']:.6f} V), 20 V stiff")


def droop_against_solve_ivp(system, tmp_path) -> np.ndarray:
    """:func:`test_simulated_droop_against_solve_ivp`'s check of the manifold ``system``
    (its folder's drive files): the simulated bus (V). A coil with ``coil.eddy_resistance``
    ``R_e`` across it has its magnetising current ``i_m`` as the state (Kirchhoff's laws):
    the terminal current ``i`` is ``(v + R_e i_m)/(R_on + R_e)`` while its switch conducts,
    ``max(0, (R_e i_m - V_fw)/(R_fw + R_e))`` freewheeling (the diode blocking at zero), and
    ``L di_m/dt = R_e (i - i_m)``; the CSV's current is the terminal one. A full bridge's
    coil is driven through two switches, decays slowly through the two low-side ones
    (``-R_off i``, off the bus) and after its final turn-off returns its current into the bus
    through two body diodes (``L di/dt = -(v + 2 V_d) - (R_coil + R_sense) i``, the
    capacitor taking ``+i``) until the diodes block at zero: the rail's current is negative
    there. With ``hold.fast_fraction`` f (mixed decay) each hold off-time's first
    ``f (T - t_on)`` s is that same fast decay (all four open; ``T`` the spacing of the
    CSV's hold switch-ons, ``t_on`` its last on-time), the rest the slow one. A current
    reaching zero through a diode is an event of the integration (the diodes block there).
    Compared up to the CSV's end."""
    from scipy.integrate import solve_ivp

    csv = tmp_path / "rail.csv"
    r = CliRunner().invoke(app, ["simulate", str(system), "--supply", "20", "--coil-temp", "0",
                                 "--hold-time", "0.003", "--r-factor", "0.93", "--l-factor", "0.85",
                                 "--csv", str(csv)])
    assert r.exit_code == 0, r.output
    assert "bus_v: the bus droops" in r.stderr
    head = csv.read_text().splitlines()[0].split(",")
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    t, bus = data[:, 0], data[:, head.index("bus_v")]
    names = [h[:-3] for h in head if h.endswith("_on")]
    r_on, r_off, v_d, ind, ups, downs, r_rel, v_rel, r_e, bridge = [], [], [], [], [], [], [], [], [], []
    fast = []       # per channel: (starts, ends) of its hold's fast parts
    for name in names:
        drv = load_drive(system.parent / ("purge-valve-24v.toml" if name.startswith("purge") else
                                          "dispense-valve-24v.toml"))
        b, c, fw = drv.board, drv.coil, drv.freewheel
        r_coil = c.resistance * (1 + 0.00393 * (0.0 - c.reference_temp)) * 0.93
        bridge.append(drv.switch.topology == "full_bridge")
        r_sw = drv.switch.on_resistance * (2 if bridge[-1] else 1)      # a bridge drives through two
        r_on.append(r_coil + b.sense.resistance + r_sw)
        r_rel.append(r_coil + b.sense.resistance)
        if bridge[-1]:    # slow decay through the low-side pair; the fast decay through two diodes
            r_off.append(r_coil + (b.sense.resistance if b.sense.position == "coil" else 0.0) + r_sw)
            v_d.append(0.0)
            v_rel.append(2 * fw.diode_drop)
        else:             # the hold's bypassed diode; the release through the diode and the Zener
            r_off.append(r_coil + b.sense.resistance + fw.bypass_resistance)
            v_d.append(fw.diode_drop)
            v_rel.append(fw.diode_drop + fw.zener_voltage)
        ind.append(c.inductance * 0.85)
        r_e.append(c.eddy_resistance or np.inf)
        on = data[:, head.index(f"{name}_on")].astype(int)
        # the switch turns on at the first on-sample and off at the last (closed on-segments);
        # an eddy channel's step sits between two rows 1 ns apart (the model's EDGE), the
        # switch-on at the row before the step
        up = np.flatnonzero(np.diff(on) > 0) + 1
        up = np.where(t[up] - t[up - 1] <= 1.5e-9, up - 1, up)
        ups.append(np.concatenate([[t[0]] if on[0] else [], t[up]]))
        downs.append(t[:-1][np.diff(on) < 0])
        f = drv.hold.fast_fraction if bridge[-1] else 0.0
        if f:
            period, t_on = float(np.median(np.diff(ups[-1][1:]))), downs[-1][-1] - ups[-1][-1]
            fast.append((downs[-1][:-1], downs[-1][:-1] + f * (period - t_on)))
        else:
            fast.append((np.zeros(0), np.zeros(0)))
    r_on, r_off, v_d, ind, r_rel, v_rel, r_e = (np.array(x) for x in (r_on, r_off, v_d, ind, r_rel, v_rel, r_e))
    bridge = np.array(bridge)
    eddy = np.isfinite(r_e)
    r_e_ = np.where(eddy, r_e, 1.0)

    def terminal(i, v, sw, r_fw, v_fw):     # the coils' terminal currents from their states
        e, re, ro = (x.reshape(x.shape + (1,) * (np.ndim(i) - 1)) for x in (eddy, r_e_, r_on))
        through = np.where(sw, (v + re * i) / (ro + re), np.maximum((re * i - v_fw) / (r_fw + re), 0.0))
        return np.where(e, through, np.where(sw, i, np.maximum(i, 0.0)))
    t_end = float(t[-1])
    edges = np.unique(np.concatenate([*ups, *downs, *(e for _, e in fast), [t_end]]))
    edges = edges[edges <= t_end]

    def switched(x):       # each switch's state in the piece starting at x, and released
        sw = np.array([np.searchsorted(u, x, side="right") > np.searchsorted(d, x, side="right")
                       for u, d in zip(ups, downs)])
        return sw, np.array([x >= d[-1] or bool(np.any((s <= x) & (x < e))) for d, (s, e) in zip(downs, fast)])

    x = np.append(np.zeros(len(names)), 20.0)
    keep = t < t_end
    want = np.zeros((len(names) + 1, int(keep.sum())))
    tk = t[keep]
    for a, b_ in zip(edges[:-1], edges[1:]):
        sw, gone = switched(a)
        r_fw, v_fw = np.where(gone, r_rel, r_off), np.where(gone, v_rel, v_d)

        back = gone & bridge       # returning into the bus

        def rhs(_, y, sw=sw, r_fw=r_fw, v_fw=v_fw, back=back):
            i, v = y[:-1], y[-1]
            term = terminal(i, v, sw, r_fw, v_fw)
            di = np.where(sw, (v - r_on * i) / ind, np.where(i > 0, -(r_fw * i + v_fw + back * v) / ind, 0.0))
            di = np.where(eddy, r_e_ * (term - i) / ind, di)
            fed = np.sum(term * sw) - np.sum(np.where(back & (i > 0), i, 0.0))
            return np.append(di, ((20.0 - v) / 0.25 - fed) / 1e-3)
        inside = (tk >= a) & (tk < b_)
        y = np.zeros((len(x), int(inside.sum())))
        a0 = a
        while a0 < b_:
            # a current through a diode (no eddy term) reaching zero: the diodes block there
            falls = [k for k in range(len(names)) if not sw[k] and not eddy[k] and x[k] > 0
                     and (v_fw[k] > 0 or back[k])]
            events = [(lambda _, y_, k=k: y_[k]) for k in falls]
            for ev in events:
                ev.terminal, ev.direction = True, -1
            sol = solve_ivp(rhs, (a0, b_), x, method="DOP853", rtol=1e-10, atol=1e-12, dense_output=True,
                            events=events or None)
            stop = float(sol.t[-1])
            part = (tk[inside] >= a0) & (tk[inside] < stop if stop < b_ else True)
            # (the CSV's 9 digits may print two samples alike: its dense output at each)
            if part.any():
                y[:, part] = sol.sol(tk[inside][part])
            x = sol.y[:, -1].copy()
            if stop < b_:
                for p, k in enumerate(falls):
                    if len(sol.t_events[p]):
                        x[k] = 0.0
            a0 = stop
        for k in range(len(names)):      # held at zero once blocked
            if not eddy[k]:
                y[k] = np.where(sw[k], y[k], np.maximum(y[k], 0.0))
        # the terminal current from the state by the CSV's own switch column: at an edge's
        # sample (a step with an eddy term) the CSV has the switch's state there
        sw_csv = np.array([data[keep, head.index(f"{n}_on")][inside] for n in names]) > 0
        want[:-1, inside] = terminal(y[:-1], y[-1], sw_csv, r_fw[:, None], v_fw[:, None])
        want[-1, inside] = y[-1]
    # scipy DOP853 (rtol 1e-10): 1e-6 V on the bus, 1e-6 A on a coil
    assert np.abs(bus[keep] - want[-1]).max() <= 1e-6
    for k, name in enumerate(names):
        got = data[keep, head.index(f"{name}_current_a")]
        assert np.abs(got - want[k]).max() <= 1e-6, name
    sure = np.ones(len(t), bool)    # rows the CSV's 9 digits place on one side of a fast part's end

    def returning(k, n, d, s, e):   # a bridge's fast decay: after the final turn-off, in a fast part
        off = data[:, head.index(f"{n}_on")] == 0
        hold = np.any((t[:, None] >= s[None, :]) & (t[:, None] <= e[None, :]), axis=1) & off if len(s) else False
        if len(e):
            sure[np.any(np.abs(t[:, None] - e[None, :]) < 1e-9, axis=1)] = False
        return bridge[k] & ((t > d[-1]) | hold)
    draw = sum(data[:, head.index(f"{n}_current_a")] * (data[:, head.index(f"{n}_on")] - returning(k, n, d, *fast[k]))
               for k, (n, d) in enumerate(zip(names, downs)))
    assert np.allclose(data[sure, 1], draw[sure], rtol=0, atol=2e-8)
    print(f"lowest bus {bus.min():.6f} V (solve_ivp {want[-1].min():.6f} V), bus within "
          f"{np.abs(bus[keep] - want[-1]).max():.2e} V")
    return bus


def test_clamp_channels_draw_from_the_rail_while_off(tmp_path):
    """A clamp across each low-side switch (no split decay): while a coil decays through its
    clamp its current still comes from the rail (bus -> coil -> clamp -> 0 V), so the
    simulated rail's current is every coil's current summed, switched or not (the circuit
    law, common practice); the drooping rail runs stiff with a one-line reason."""
    board = (EXAMPLES.parent / "boards" / "manifold-m32-6ch.toml").read_text()
    old = 'type = "zener"\ndiode_drop = "0.9 V"\nzener_voltage = "36 V"'
    assert old in board
    (tmp_path / "board.toml").write_text(board.replace(old, 'type = "clamp"\nclamp_voltage = "40 V"\n'
                                                                 'diode_drop = "0.9 V"'))
    for name in ("dispense-valve-24v.toml", "purge-valve-24v.toml", SYSTEM.name):
        text = (SYSTEM.parent / name).read_text().replace('board = "manifold-m32-6ch"', 'board = "board.toml"')
        text = re.sub(r"split_decay = true\n(bypass_\w+ = .*\n)+", "", text)
        (tmp_path / name).write_text(text)
    csv = tmp_path / "rail.csv"
    r = CliRunner().invoke(app, ["simulate", str(tmp_path / SYSTEM.name), "--supply", "24", "--coil-temp", "20",
                                 "--hold-time", "0.004", "--csv", str(csv)])
    assert r.exit_code == 0, r.output
    assert "clamp across its switch" in r.stderr and "bus_v" not in r.stderr
    head = csv.read_text().splitlines()[0].split(",")
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    names = [h[:-3] for h in head if h.endswith("_on")]
    cur = np.array([data[:, head.index(f"{n}_current_a")] for n in names])
    on = np.array([data[:, head.index(f"{n}_on")] for n in names])
    assert np.count_nonzero((on == 0) & (cur > 0.05)) > 1000      # coils decaying through their clamps
    assert np.allclose(data[:, 1], cur.sum(axis=0), rtol=0, atol=1e-8)


def test_one_coil_is_the_two_by_two_bus():
    """One coil on the shared bus is the closed form of coildrive/model/supply.py."""
    b = bus_model.bus(12.0, 1.0, 1e-3, 1.0, 1e-3)
    v_ref, _ = bus_model.lowest_bus(10e-3, b)
    v_low, _ = shared_bus.lowest_bus(12.0, 1.0, 1e-3, [1.0], [1e-3], [0.0], [10e-3])
    assert abs(v_low - float(v_ref)) < 1e-9


@pytest.mark.compiler
def test_cli_header_compiles_for_every_target(tmp_path):
    """A real subprocess writes the header; gcc, arm-none-eabi-gcc and avr-gcc compile it
    (-Wall -Wextra -Werror -pedantic) and gcc's program prints the JSON's numbers."""
    h = tmp_path / "manifold.h"
    p = run_cli("design", str(SYSTEM), "--header", str(h), "--json")
    assert p.returncode == 0, p.stderr
    doc = json.loads(p.stdout)["system"]
    flags = ["-Wall", "-Wextra", "-Werror", "-pedantic", "-Wconversion"]
    src = tmp_path / "m.c"
    src.write_text('#include <stdio.h>\n#include "manifold.h"\nint main(void) {\n'
                   '  printf("%lu %lu %lu %lu\\n", (unsigned long)BOARD_STAGGER_TICKS, '
                   '(unsigned long)PURGE2_START_OFFSET_TICKS, (unsigned long)DISP1_TIMER_PERIOD_COUNTS, '
                   '(unsigned long)PURGE1_HOLD_COMPARE_COUNTS);\n  return 0;\n}\n')
    subprocess.run([require_tool("gcc"), "-std=c99", *flags, str(src), "-o", str(tmp_path / "m")], check=True)
    out = subprocess.run([str(tmp_path / "m")], capture_output=True, text=True, check=True).stdout.split()
    purge = doc["channels"][5]
    assert [int(x) for x in out] == [doc["stagger_ticks"], purge["offset_ticks"],
                                     doc["timers"][0]["period_ticks"],
                                     doc["channels"][4]["design"]["timer"]["compare_ticks"]]
    for cc, target in (("arm-none-eabi-gcc", ["-mcpu=cortex-m4", "-mthumb"]), ("avr-gcc", ["-mmcu=atmega328p"])):
        r = subprocess.run([require_tool(cc), *target, "-std=c99", *flags, "-c", str(src), "-o",
                            str(tmp_path / f"{cc}.o")], capture_output=True, text=True)
        assert r.returncode == 0, r.stderr


def _system(tmp_path, text: str):
    for name in ("dispense-valve-24v.toml", "purge-valve-24v.toml"):
        (tmp_path / name).write_text((EXAMPLES / "manifold" / name).read_text())
    p = tmp_path / "sys.toml"
    p.write_text(text)
    return p


BASE = SYSTEM.read_text()


@pytest.mark.parametrize("change, where", [
    (('drive = "purge-valve-24v.toml"', 'drive = "missing.toml"'), "channel[4].drive"),
    (('number = 6\n', 'number = 6\ncolour = "red"\n'), "channel[5].colour"),
    (('current_limit = "3 A"', 'current_limit = "3 V"'), "supply.current_limit"),
    (('number = 6\n', 'number = 5\n'), "channel[5].number"),
])
def test_bad_system_file_one_line_exit_2(tmp_path, change, where):
    path = _system(tmp_path, BASE.replace(*change))
    h = tmp_path / "out.h"
    r = CliRunner().invoke(app, ["design", str(path), "--header", str(h)])
    assert r.exit_code == 2, r.output
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and str(path) in lines[0] and where in lines[0], lines
    assert not h.exists()


def test_windows_that_do_not_overlap_name_the_channel(tmp_path):
    path = _system(tmp_path, BASE)
    purge = tmp_path / "purge-valve-24v.toml"
    purge.write_text(purge.read_text().replace('frequency = "21 kHz"', 'frequency = "30 kHz"'))
    p = run_cli("design", str(path))
    assert p.returncode == 2
    line = p.stderr.strip()
    assert "\n" not in line and "'purge1'" in line and "do not overlap" in line, line


@pytest.mark.parametrize("extra, key", [
    ('boost = "48 V"\nboost_capacitance = "100 uF"\nboost_power = "5 W"\n', "supply.boost")])
def test_a_channel_the_bound_does_not_model_is_refused(tmp_path, extra, key):
    # the rail's bound has no boosted peak (the converter's recharge draw) yet
    path = _system(tmp_path, BASE)
    purge = tmp_path / "purge-valve-24v.toml"
    text = purge.read_text()
    assert 'max = "28 V"\n' in text
    text = re.sub(r"compensate = true.*\n", "", text.split("[freewheel]")[0])   # (a boost refuses them)
    purge.write_text(text.replace('max = "28 V"\n', 'max = "28 V"\n' + extra, 1))
    p = run_cli("design", str(path))
    line = p.stderr.strip()
    assert p.returncode == 2 and "\n" not in line and key in line and "'purge1'" in line, line


def test_a_limit_no_stagger_meets_fails_without_header(tmp_path):
    path = _system(tmp_path, BASE.replace('current_limit = "3 A"', 'current_limit = "2 A"'))
    h = tmp_path / "out.h"
    r = CliRunner().invoke(app, ["design", str(path), "--header", str(h), "--json"])
    assert r.exit_code == 1
    d = json.loads(r.stdout)
    assert not d["ok"] and d["system"]["checks"][0]["name"] == "supply_current_limit"
    assert not h.exists()
    # beyond the limit the readings may droop more: each figure's droop is consistent with it
    rail = d["system"]["rails"][0]
    for view in ("together", "staggered"):
        got = rail[f"peak_current_{view}_a"]
        assert rail["source_resistance_ohm"] * got <= rail[f"{view}_reading_droop_v"], (view, rail)


def _sim_csv(tmp_path, system, *extra):
    """simulate SYSTEM.toml at 28 V, the cold coil (ambient.min, 0 degC) and the low
    tolerance corner (R x0.93, L x0.85): the corner of the most current."""
    csv = tmp_path / "rail.csv"
    r = CliRunner().invoke(app, ["simulate", str(system), "--supply", "28", "--coil-temp", "0",
                                 "--hold-time", "0.01", "--r-factor", "0.93", "--l-factor", "0.85",
                                 "--csv", str(csv), *extra])
    assert r.exit_code == 0, r.output
    head = csv.read_text().splitlines()[0].split(",")
    return head, np.loadtxt(csv, delimiter=",", skiprows=1)


def _branch_at(chans, supply, t):
    """The rail's bound (A) at ``supply`` V, written afresh (:func:`_rail`)."""
    return _rail(t, chans, supply)


def test_simulate_system_follows_the_shared_timer(tmp_path, doc):
    """simulate SYSTEM.toml: every hold edge on the shared timer (on at a period start of
    the shared timer, off at the compare the channel's duty table gives at 28 V, from the
    design's JSON), the rail the sum of the switches' currents, and -- on the CSV's
    grid (16 points a PWM segment, every switching moment sampled) -- never above the
    design's rail bound written afresh at 28 V (:func:`_rail`), nor above the limit."""
    head, data = _sim_csv(tmp_path, SYSTEM, "--points", "16")
    names = [c["name"] for c in doc["channels"]]
    assert head == ["time_s", "current_a", *(f"{n}_current_a" for n in names), *(f"{n}_on" for n in names),
                    "bus_v"]
    t, rail = data[:, 0], data[:, 1]
    cur, on = data[:, 2:2 + len(names)], data[:, 2 + len(names):2 + 2 * len(names)]
    assert np.allclose(rail, (cur * on).sum(axis=1), rtol=1e-8, atol=1e-8)
    (timer,) = doc["timers"]
    period = 1 / timer["frequency_hz"]
    code = np.floor(28 / 11 / (3.3 / 4096))
    for k, c in enumerate(doc["channels"]):
        dt = c["design"]["duty_table"]
        j = max(0, int(np.searchsorted(dt["adc_codes"], code, side="right")) - 1)
        duty = dt["compare_ticks"][j] / timer["period_ticks"]
        step = np.diff(np.concatenate([[0], on[:, k], [0]]))
        rise = np.flatnonzero(step > 0)               # first sample on: an on-edge
        fall = np.flatnonzero(step < 0) - 1           # last sample on: an off-edge
        assert len(rise) > 100 and len(fall) == len(rise)
        assert abs(t[rise[0]] - c["offset_s"]) < 1e-9, c["name"]      # the peak at its offset
        peak = c["bound"]["branches"][-1]["peak_s"]
        assert -1e-9 <= t[fall[0]] - c["offset_s"] - peak < period    # then on until its compare (or off)
        phase_on = t[rise[1:]] / period
        assert np.abs(phase_on - np.round(phase_on)).max() < 1e-5, c["name"]
        phase_off = t[fall[1:]] / period - duty
        assert np.abs(phase_off - np.round(phase_off)).max() < 1e-5, c["name"]
    bound = _branch_at(doc["channels"], 28.0, t)
    assert np.all(rail <= bound * (1 + 1e-8)), (rail - bound).max()
    assert 0 < rail.max() <= doc["current_limit_a"]
    print(f"staggered: simulated rail up to {rail.max():.4f} A, bound {bound.max():.4f} A at 28 V")


def test_peaks_together_agree_with_the_bound(tmp_path):
    """The manifold with no limit and no source (the peaks together, no stagger), at the
    bound's own corner (28 V: the top peak-table entry's top supply; cold coil; lowest R
    and L): while every switch is on in the peaks the simulated rail is the bound's rise
    (each channel ``V/R (1 - exp(-t R/L))``) within the CSV's 9 digits; the simulated
    worst is at most 12 % below the bound's worst (measured 9.8 %: after a peak the bound
    adds the hold orbit's top less its lowest bottom to the peak's end current), never
    above it."""
    import shutil

    folder = tmp_path / "manifold"
    shutil.copytree(SYSTEM.parent, folder)
    system = folder / SYSTEM.name
    text = system.read_text()
    for line in ('current_limit = "3 A"', 'source_resistance = "0.25 ohm"', 'capacitance = "1000 uF"'):
        assert line in text
        text = text.replace(line, "")
    system.write_text(text)
    r = CliRunner().invoke(app, ["design", str(system), "--json"])
    doc = json.loads(r.stdout)["system"]
    assert doc["stagger_ticks"] == 0 and all(c["offset_s"] == 0 for c in doc["channels"])
    _, data = _sim_csv(tmp_path, system, "--points", "16")
    t, rail = data[:, 0], data[:, 1]
    bound = _branch_at(doc["channels"], 28.0, t)
    peaks = min(c["bound"]["branches"][-1]["peak_s"] for c in doc["channels"])
    during = (t > 0) & (t <= peaks)
    assert np.allclose(rail[during], bound[during], rtol=1e-7, atol=0)
    assert np.all(rail <= bound * (1 + 1e-8))
    print(f"together: simulated {rail.max():.4f} A, bound {bound.max():.4f} A, ratio {bound.max() / rail.max():.4f}")
    assert bound.max() <= 1.12 * rail.max()


def test_emulate_system_needs_a_channel():
    r = CliRunner().invoke(app, ["emulate", str(SYSTEM), "--duration", "0.1"])
    assert r.exit_code == 2 and "--channel" in r.stderr and "purge2" in r.stderr


def test_plot_arrays_follow_the_result(tmp_path):
    """design SYSTEM.toml --plot: the PNG is written, and the arrays it draws
    (:func:`rail_curves`) are the result's -- each channel zero before its start, the
    rail's total their sum, never above the result's bound and within 2 % of it (the
    bound is of the pieces, the curve samples them), staggered and together."""
    from coildrive.design.system import design_system, rail_curves
    from coildrive.system_file import load_system

    png = tmp_path / "rail.png"
    r = CliRunner().invoke(app, ["design", str(SYSTEM), "--plot", str(png)])
    assert r.exit_code == 0, r.output
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    result = design_system(load_system(SYSTEM))
    (rail,) = rail_curves(result)
    assert rail["limit_a"] == result.current_limit_a and rail["channels"] == [c.name for c in result.channels]
    for view, key in (("staggered", "peak_current_staggered_a"), ("together", "peak_current_together_a")):
        c = rail[view]
        bound = result.rails[0][key]
        assert c["bound_a"] == bound
        assert np.allclose(c["total_a"], np.sum(c["channel_a"], axis=0), rtol=0, atol=1e-12)
        assert c["total_a"].max() <= bound + 1e-12 and c["total_a"].max() >= 0.98 * bound, (view, c["total_a"].max(), bound)
        want = [ch.offset_s for ch in result.channels] if view == "staggered" else [0.0] * len(result.channels)
        assert c["offsets_s"] == want
        for o, cur in zip(want, c["channel_a"]):
            assert np.all(cur[c["time_s"] < o] == 0) and cur[c["time_s"] > o + 1e-4].min() > 0
    assert rail["staggered"]["total_a"].max() <= result.current_limit_a < rail["together"]["total_a"].max()


def test_emulated_channel_runs_the_shared_timer(doc):
    """emulate SYSTEM.toml --channel: the device's hold PWM frequency is the shared timer's
    (``clock / (prescaler x period)`` from the system's JSON, the board's 72 MHz clock),
    and a hold-frequency command cannot move one channel off it (the other channels share
    the timer): another frequency is out of range, the shared one in force is the answer."""
    from coildrive.bench.device import VirtualDevice
    from coildrive.bench.messages import Command, Opcode, ReplyStatus
    from coildrive.cli.system_cmd import channel_drive

    (timer,) = doc["timers"]
    shared = 72e6 / (timer["prescaler"] * timer["period_ticks"])
    assert shared == pytest.approx(timer["frequency_hz"], rel=1e-12)
    for name in ("disp1", "purge2"):
        dev = VirtualDevice(channel_drive(SYSTEM, None, name))
        assert (dev.settings.prescaler, dev.settings.period_ticks) == (timer["prescaler"], timer["period_ticks"])
        assert dev.frequency == pytest.approx(shared, rel=1e-12)
        assert dev._execute(Command(Opcode.SET_HOLD_FREQUENCY, 20000), 0.0) == (ReplyStatus.OUT_OF_RANGE, round(shared))
        assert dev._execute(Command(Opcode.SET_HOLD_FREQUENCY, round(shared)), 0.0) == (ReplyStatus.OK, round(shared))
        assert dev.frequency == pytest.approx(shared, rel=1e-12)
    # a drive file alone still follows the command
    alone = VirtualDevice(load_drive(EXAMPLES / "manifold" / "purge-valve-24v.toml"))
    assert alone._execute(Command(Opcode.SET_HOLD_FREQUENCY, 20000), 0.0) == (ReplyStatus.OK, 20000)


def test_simulate_system_too_long_is_refused(tmp_path):
    csv = tmp_path / "rail.csv"
    r = CliRunner().invoke(app, ["simulate", str(SYSTEM), "--supply", "24", "--coil-temp", "20",
                                 "--hold-time", "10", "--csv", str(csv)])
    assert r.exit_code == 2 and "--hold-time" in r.stderr and len(r.stderr.strip().splitlines()) == 1
    assert not csv.exists()


def test_simulated_rail_under_the_bound_at_every_step(doc):
    """The staggered manifold simulated (the library behind ``simulate SYSTEM.toml``, 16
    points a PWM segment and every switching moment) at the supplies where the firmware's
    tables are at their most -- just below every peak-table step, and 20 and 28 V -- with
    the cold coil at both tolerance corners: never above the design's rail bound written
    afresh at that supply (:func:`_rail`), nor above the limit."""
    from coildrive.design.system import design_system
    from coildrive.design.system_sim import simulate_system
    from coildrive.system_file import load_system

    result = design_system(load_system(SYSTEM))
    lsb = 3.3 / 4096 * 11
    codes = doc["channels"][0]["design"]["peak_table"]["adc_codes"][1:]
    worst = 0.0
    for v in sorted({20.0, 28.0, *(c * lsb - 1e-6 for c in codes[::3])}):
        for r_f, l_f in ((0.93, 0.85), (1.07, 1.15)):
            run = simulate_system(result, v, 0.0, 0.012, 16, r_f, l_f)   # all held at the last peak
            bound = _rail(run.time, doc["channels"], v)
            assert np.all(run.rail <= bound * (1 + 1e-12)), (v, r_f, (run.rail - bound).max())
            worst = max(worst, float(run.rail.max()))
    assert worst <= doc["current_limit_a"]
    print(f"simulated rail worst {worst:.4f} A, limit {doc['current_limit_a']:.4g} A")


# --------------------------------------------------------------------------- a current-mode channel
def _current_mode_system(folder, control="hysteretic", hold=None, limit="3 A", gain=20):
    """The manifold with its two purge valves on a hysteretic current-mode hold (a 3 us
    comparator delay), on a copy of the board with 1 % sense-resistor and 1 % gain
    tolerances (and the sense amplifier's ``gain``): the system file's path."""
    folder.mkdir(exist_ok=True)
    board = (EXAMPLES.parent / "boards" / "manifold-m32-6ch.toml").read_text()
    board = board.replace('position = "coil"', 'position = "coil"\nresistance_tolerance = 0.01\n'
                          'gain_tolerance = 0.01').replace("gain = 20\n", f"gain = {gain}\n")
    (folder / "board.toml").write_text(board)
    here = 'board = "board.toml"'
    for name in ("dispense-valve-24v.toml", "purge-valve-24v.toml"):
        text = (EXAMPLES / "manifold" / name).read_text().replace('board = "manifold-m32-6ch"', here)
        if name.startswith("purge"):
            text = text.replace("compensate = true", "").replace("[hold]\n", "[hold]\n" + (
                hold or f'mode = "current"\ncontrol = "{control}"\nsense_delay = "3 us"\n'))
        (folder / name).write_text(text)
    path = folder / "sys.toml"
    path.write_text(BASE.replace('board = "manifold-m32-6ch"', here).replace('"3 A"', f'"{limit}"'))
    return path


@pytest.fixture(scope="module")
def doc_cm(tmp_path_factory):
    path = _current_mode_system(tmp_path_factory.mktemp("cm") / "manifold")
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"], path.parent


def _hysteretic_tops(t, ch, folder, supply, temp, r_f, l_f, reading):
    """A hysteretic current-mode channel's coil current (A) ``t`` s after its switch-on,
    each on-time held at its top, written afresh: the peak's RL rise, then
    on until the current reaches the upper threshold (the code's current over the sense
    reading factor ``reading``) and ``sense_delay`` on past it, off (diode drop and bypass
    resistor) down to the lower threshold and the delay past it; exact exponentials,
    copper R(T) by IEC 60028 (alpha = 0.00393 /K)."""
    d = ch["design"]
    drv = load_drive(folder / "purge-valve-24v.toml")
    b, c, fw, cm = drv.board, drv.coil, drv.freewheel, d["current_mode"]
    lo, hi, dl = cm["lower_a"] / reading, cm["upper_a"] / reading, cm["sense_delay_s"]
    r_coil = c.resistance * (1 + 0.00393 * (temp - c.reference_temp)) * r_f
    r_on = r_coil + drv.switch.on_resistance + b.sense.resistance
    r_off = r_coil + b.sense.resistance + fw.bypass_resistance
    ind, a, bb = c.inductance * l_f, supply / r_on, fw.diode_drop / r_off
    t_peak = d["pull_in"]["peak_ticks"] / b.tick.rate
    i = a * (1 - np.exp(-t_peak * r_on / ind))
    starts, tops, ons, now = [t_peak], [], [], t_peak
    while now < t.max() and len(tops) < 200_000:
        if a <= hi:                                   # never reaches the threshold: on for good
            tops.append(a)
            ons.append(np.inf)
            break
        t_up = ind / r_on * np.log((a - i) / (a - hi)) if i < hi else 0.0
        top = a + (max(i, hi) - a) * np.exp(-dl * r_on / ind)
        t_down = ind / r_off * np.log((top + bb) / (lo + bb))
        i = (lo + bb) * np.exp(-dl * r_off / ind) - bb
        tops.append(top)
        ons.append(t_up + dl)
        now += t_up + dl + t_down + dl
        starts.append(now)
    rise = a * (1 - np.exp(-np.maximum(t, 0) * r_on / ind))
    m = np.clip(np.searchsorted(starts, t, side="right") - 1, 0, len(tops) - 1)
    top, off = np.asarray(tops)[m], t - np.asarray(starts)[m] - np.asarray(ons)[m]
    # the on part held at its top; the off part the exact decay from it
    held = np.where(off <= 0, top, np.maximum((top + bb) * np.exp(-np.maximum(off, 0) * r_off / ind) - bb, 0))
    return np.where(t < 0, 0.0, np.where(t <= t_peak, rise, held))


def test_current_mode_staggered_total_never_above_the_limit(doc_cm):
    """The dense sweep (1e5 points, :func:`_rail` written afresh) with two hysteretic
    current-mode channels: never above the limit; the design's bound never below it."""
    doc, _ = doc_cm
    chans = doc["channels"]
    assert [c["design"]["hold"]["mode"] for c in chans] == ["voltage"] * 4 + ["current"] * 2
    end = max(c["offset_s"] + c["bound"]["peak_s"] for c in chans) + 0.02
    t = np.linspace(0, end, 100_000)
    edges = sorted({x for c in chans for b in c["bound"]["branches"] for x in (b["supply_low_v"], b["supply_v"])})
    supplies = edges + [0.5 * (a + b) for a, b in zip(edges[:-1], edges[1:])]
    worst = max(_rail(t, chans, v).max() for v in supplies)
    assert worst <= doc["current_limit_a"] and doc["rails"][0]["peak_current_staggered_a"] >= worst - 1e-12
    # the hold's top: the upper threshold read low by 1 % and 1 %, plus 3 us of rise at 28 V
    cm = chans[4]["design"]["current_mode"]
    b = chans[4]["bound"]["branches"][0]
    i_hi = cm["upper_a"] / 0.99**2
    a = b["supply_v"] / b["resistance_ohm"]
    assert b["hold_top_a"] == pytest.approx(a - (a - i_hi) * np.exp(-3e-6 * b["resistance_ohm"] / b["inductance_h"]),
                                            rel=1e-9)


def _simulated_worst(chans, totals) -> float:
    """The highest of ``totals(t, V, R factor, L factor)`` (a list of rail currents on the
    time grid ``t``, 5 us) over the cold coil's corners: 20 V, 28 V and just below every
    peak-table step of the first channel, R and L at both tolerance ends."""
    pk = chans[0]["design"]["peak_table"]
    supplies = sorted({20.0, 28.0, *(c * 3.3 / 4096 * 11 - 1e-6 for c in pk["adc_codes"][1:])})
    t = np.arange(0, max(c["offset_s"] + c["bound"]["peak_s"] for c in chans) + 0.005, 5e-6)
    return max(float(x.max()) for v in supplies for r_f in (0.93, 1.07) for l_f in (0.85, 1.15)
               for x in totals(t, v, r_f, l_f))


def test_current_mode_bound_never_below_the_simulated_worst(doc_cm):
    """The rail's bound against the channels simulated afresh (:func:`_coil_tops` for the
    voltage-mode channels, :func:`_hysteretic_tops` for the current-mode ones, staggered
    as designed) at the cold coil, R and L at both tolerance ends, the sense reading at
    both ends, 20 V, 28 V and just below every peak-table step: never below the worst
    total, and no more than 20 % above it."""
    doc, folder = doc_cm
    chans = doc["channels"]

    def totals(t, v, r_f, l_f):
        volt = sum(_coil_tops(t - c["offset_s"], c, v, 0.0, r_f, l_f) for c in chans[:4])
        return [volt + sum(_hysteretic_tops(t - c["offset_s"], c, folder, v, 0.0, r_f, l_f, reading)
                           for c in chans[4:]) for reading in (0.99**2, 1.01**2)]
    worst = _simulated_worst(chans, totals)
    bound = doc["rails"][0]["peak_current_staggered_a"]
    print(f"bound {bound:.4f} A, simulated worst {worst:.4f} A, ratio {bound / worst:.4f}")
    assert worst <= bound <= 1.2 * worst, (bound, worst)


def test_simulate_runs_current_mode_channels(doc_cm, tmp_path):
    """``simulate SYSTEM.toml`` with two hysteretic current-mode channels (the CLI end to
    end, 28 V, cold coil at the low R and L corner): each current-mode channel's hold tops
    equal the closed form written afresh -- on past the upper threshold for the 3 us
    comparator delay from ``I_hi``, ``A - (A - I_hi) exp(-delay R_on / L)`` (``A = V/R_on``;
    copper R(T) by IEC 60028, alpha = 0.00393 /K) -- within 1e-6, its bottoms the lower
    threshold less the decay over the delay, its switching count the hold's span over the
    period of those exact exponentials within one, and the rail never above the design's
    bound (:func:`_rail`, written afresh) on the drooping rail. The tops, bottoms and count on
    the rail without its source resistance (a stiff bus: the closed form's); on the drooping
    rail against solve_ivp: tests/test_system_current_bus.py."""
    doc, folder = doc_cm
    text = (folder / "sys.toml").read_text()
    stiff = re.sub(r"(source_resistance|capacitance) = .*\n", "", text)
    assert stiff != text
    (folder / "sys-stiff.toml").write_text(stiff)
    chans = doc["channels"]
    head, data = _sim_csv(tmp_path, folder / "sys.toml", "--hold-time", "0.03")
    assert np.all(data[:, 1] <= _rail(data[:, 0], chans, 28.0) * (1 + 1e-9))
    head, data = _sim_csv(tmp_path, folder / "sys-stiff.toml", "--hold-time", "0.03")
    t = data[:, 0]
    drv = load_drive(folder / "purge-valve-24v.toml")
    b, c, fw = drv.board, drv.coil, drv.freewheel
    r_coil = c.resistance * (1 + 0.00393 * (0.0 - c.reference_temp)) * 0.93
    r_on = r_coil + drv.switch.on_resistance + b.sense.resistance
    r_off = r_coil + b.sense.resistance + fw.bypass_resistance
    ind, a, bb = c.inductance * 0.85, 28.0 / r_on, fw.diode_drop / r_off
    for ch in chans[4:]:
        cm = ch["design"]["current_mode"]
        dl = cm["sense_delay_s"]
        top = a - (a - cm["upper_a"]) * np.exp(-dl * r_on / ind)
        bottom = (cm["lower_a"] + bb) * np.exp(-dl * r_off / ind) - bb
        i = data[:, head.index(f"{ch['name']}_current_a")]
        on = data[:, head.index(f"{ch['name']}_on")]
        start = ch["offset_s"] + ch["bound"]["peak_s"]       # the peak's excess gone 12 ms on
        hold = (t > start + 12e-3) & (t < start + 0.029)
        # the grid's samples between a channel's own are linear between them: its extremes
        # are its own samples, the tops at each switch-off and the bottoms at each switch-on
        assert i[hold].max() == pytest.approx(top, rel=1e-6) and i[hold].min() == pytest.approx(bottom, rel=1e-6)
        period = (ind / r_on * np.log((a - bottom) / (a - cm["upper_a"])) + dl
                  + ind / r_off * np.log((top + bb) / (cm["lower_a"] + bb)) + dl)
        ons = np.count_nonzero((np.diff(on) > 0) & hold[:-1])
        span = t[hold][-1] - t[hold][0]
        assert abs(ons - span / period) <= 1.0, (ons, span / period)


def test_off_time_on_a_shared_timer_is_refused(tmp_path):
    """A fixed off-time is its timer's own period: on a timer shared by six channels it
    cannot be made, one line naming the channel and the key, exit 2."""
    path = _current_mode_system(tmp_path / "m", control="off_time")
    p = run_cli("design", str(path))
    line = p.stderr.strip()
    assert p.returncode == 2 and "\n" not in line and "hold.control" in line and "'purge1'" in line, line


@pytest.fixture(scope="module")
def doc_cl(tmp_path_factory):
    path = _current_mode_system(tmp_path_factory.mktemp("cl") / "manifold",
                                hold='regulation = "closed_loop"\n', limit="4.5 A")
    r = CliRunner().invoke(app, ["design", str(path), "--json"])
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)["system"]


def _clamp_duty(ch):
    cl = ch["design"]["closed_loop"]
    return cl["max_compare"] / ch["design"]["timer"]["period_ticks"]


def test_closed_loop_channels_on_the_shared_timer(doc_cl):
    """Two closed-loop purge valves designed on the shared timer: their gains' checks
    (phase and gain margin, fixed point, duty range) pass at its frequency; the hold's top
    in the bound is the PWM orbit's top at the loop's output clamp (``max_compare``), the
    closed form written afresh (``i_max = (A (1 - a) - B a (1 - b)) / (1 - a b)``, ``a =
    exp(-D T R_on/L)``, ``b = exp(-(1 - D) T R_off/L)``, ``A = V/R_on``, ``B = V_d/R_off``),
    cold coil (0 degC, IEC 60028 copper), R and the sense resistor at their low ends, L at
    both; and the dense sweep of
    :func:`_rail` never above the limit."""
    chans = doc_cl["channels"]
    (timer,) = doc_cl["timers"]
    for ch in chans[4:]:
        d = ch["design"]
        assert d["hold"]["regulation"] == "closed_loop" and d["timer"]["period_ticks"] == timer["period_ticks"]
        got = {c["name"]: c["ok"] for c in d["checks"]}
        assert all(got[k] for k in ("loop_duty", "loop_phase_margin", "loop_gain_margin", "loop_fixed_point"))
        b = ch["bound"]["branches"][0]
        r_coil = 24 * (1 + 0.00393 * (0 - 20)) * 0.93
        r_on, r_off = r_coil + 0.04 + 0.099, r_coil + 0.099 + 0.2     # the sense resistor 1 % low
        big_d, period = _clamp_duty(ch), 1 / timer["frequency_hz"]
        aa, bb = 28 / r_on, 0.9 / r_off
        top = []
        for ind in (0.07 * 0.85, 0.07 * 1.15):
            a, e = np.exp(-big_d * period * r_on / ind), np.exp(-(1 - big_d) * period * r_off / ind)
            top.append((aa * (1 - a) - bb * a * (1 - e)) / (1 - a * e))
        assert b["hold_top_a"] == pytest.approx(max(top), rel=1e-9)
    end = max(c["offset_s"] + c["bound"]["peak_s"] for c in chans) + 0.02
    t = np.linspace(0, end, 100_000)
    edges = sorted({x for c in chans for b in c["bound"]["branches"] for x in (b["supply_low_v"], b["supply_v"])})
    worst = max(_rail(t, chans, v).max() for v in edges + [0.5 * (a + b) for a, b in zip(edges[:-1], edges[1:])])
    assert worst <= doc_cl["current_limit_a"] and doc_cl["rails"][0]["peak_current_staggered_a"] >= worst - 1e-12


def test_closed_loop_bound_never_below_the_simulated_worst(doc_cl):
    """The rail's bound against the channels simulated afresh (:func:`_coil_tops`), the
    closed-loop ones at the most duty their loop can command (its output clamp), over the
    corners of :func:`test_bound_is_close_to_the_simulated_worst`: never below the worst
    total and no more than 25 % above it (measured 21.5 %: at the clamp the hold's orbit
    tops the peak's end; the tail is capped at the larger of the clamp orbit's top and two
    periods' rise from the peak's end, ``tail_cap_a``)."""
    chans = doc_cl["channels"]
    worst = _simulated_worst(chans, lambda t, v, r_f, l_f: [sum(
        _coil_tops(t - c["offset_s"], c, v, 0.0, r_f, l_f, _clamp_duty(c) if k >= 4 else None)
        for k, c in enumerate(chans))])
    bound = doc_cl["rails"][0]["peak_current_staggered_a"]
    print(f"bound {bound:.4f} A, simulated worst {worst:.4f} A, ratio {bound / worst:.4f}")
    assert worst <= bound <= 1.25 * worst, (bound, worst)
