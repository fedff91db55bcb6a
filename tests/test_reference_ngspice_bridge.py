"""The full bridge's decay paths (coildrive.model.bridge) against ngspice transients.

Reference: ngspice (batch mode, ``ngspice -b``). The netlist is the bridge at element
level, written here from invented element values (a 24 V valve-like coil):

    VSUP -- feed -- bus --+-- Q1 --+-- A -- VM -- RCOIL -- LCOIL -- B --+-- Q3 --+
                          |        +-- Q2 --+                          +-- Q4 --+
                        CBULK               rail -- RSENSE (common return) -- ground

* Each switch is ngspice's voltage-controlled switch (an ``S`` element with a ``SW``
  model; ngspice manual, "Circuit Elements and Models", "Elementary Devices": "Switches"
  and "Switch Model (SW/CSW)"): ``RON`` the switch's on-resistance, ``VT = 0.5`` V on a
  0..1 V gate, ``ROFF = 1e9`` ohm (see tests/test_reference_ngspice_high_side.py).
* Each switch's body diode is the constant-drop one-way device of the other references
  (:func:`ngspice_run.knee`: knee at the diode drop, 1 mohm beyond), the model's law.
* The supply feed: a 0 V source (an ammeter) when the supply takes current back; a
  one-way device with its knee at 0 V (an ideal diode, 1 mohm) when it cannot, so that
  the returned charge lands on ``CBULK`` alone.

Checks (1 %, times plus one step): the rise (two switches and the sense resistor in the
loop), the fast decay (release time, time to zero, the switches' voltage, the energy
returned to the supply), the slow decay (release time, nothing returned), and the bus
pump-up into the bulk capacitance (the bus voltage when the current stops, and when);
and `coildrive simulate`'s switch columns played into the netlist's gates (the phases the
header and the driver switch) against the CSV's current and coil voltage.

The decays, the pump-up and the simulated phases run twice: with the linear inductor and with a
saturating coil, the flux-controlled inductor of tests/test_flux_ngspice.py (a G source
integrating the coil voltage into a 1 F capacitor, ngspice manual ch. 4 "Voltage and
Current Sources"; a B source ``I = pwl(V(phi), ...)`` as the inverse of the curve, ch. 5
"Non-linear Dependent Sources (Behavioral Sources)", section 5.1 "B source (ASRC)";
section numbers from memory) in place of ``LCOIL``: the model's exact quadrature
(:mod:`coildrive.model.flux`) against ngspice's own time stepping, the energy returned
to the supply ``int V_bus i dt`` over the fast decay included.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from ngspice_run import OPTIONS, knee, run
from coildrive.model import flux
from coildrive.model.bridge import fast_decay, fast_switch_voltage, pump_up, release, slow_decay
from coildrive.model.rl import rise_current, rise_time
from test_flux_ngspice import CURVE_I, _flux_netlist, _psi

pytestmark = pytest.mark.ngspice

EDGE = 1e-9  # s, gate edges
R_OFF_SWITCH = 1e9  # ohm, the switches' ROFF

#: Invented element values: a 24 V valve coil, hot, on a bridge of 35 mohm switches.
V_SUP, R_COIL, L_COIL = 24.0, 26.0, 0.069
R_SW, R_SENSE, V_D = 0.035, 0.1, 0.8
I_DROP = 0.1


#: The two coils the decays run with: the linear inductor, and the saturating curve of
#: tests/test_flux_ngspice.py (40 mWb tanh(i / 0.35 A) + 5 mH i, 119 mH small-signal).
COILS = {"linear": L_COIL,
         "curve": flux.FluxCoil(flux.curve(tuple(CURVE_I), tuple(_psi(CURVE_I))), np.array(1.0))}


def _coil_netlist(text, coil):
    """``text`` with ``LCOIL`` replaced by the flux-controlled inductor for a curve."""
    return _flux_netlist(text, SimpleNamespace(inductance=coil)) if isinstance(coil, flux.FluxCoil) else text


def _stored(coil, i):
    """Energy stored at ``i`` A (J): ``1/2 L i^2``, or ``W = int i dpsi`` of a curve."""
    return float(np.ravel(flux.energy(coil, i))[0]) if isinstance(coil, flux.FluxCoil) else 0.5 * coil * i * i


def _netlist(title, gates, tstop, tmax, measures, *, sink=True, capacitance=100e-6, inline=False):
    """The bridge with gate sources ``gates`` (Q1..Q4 -> a PULSE or DC spec)."""
    feed = "VFEED sup bus DC 0" if sink else knee("BFEED", "sup", "bus", 0.0)
    coil = (["VM a n1 DC 0", f"RSENSE n1 n2 {R_SENSE!r}", f"RCOIL n2 n3 {R_COIL!r}",
             f"LCOIL n3 b {L_COIL!r} IC=0", "VRAIL rail 0 DC 0"] if inline else
            ["VM a n1 DC 0", f"RCOIL n1 n2 {R_COIL!r}", f"LCOIL n2 b {L_COIL!r} IC=0",
             f"RSENSE rail 0 {R_SENSE!r}"])
    switches = []
    for k, (d, s) in enumerate((("bus", "a"), ("a", "rail"), ("bus", "b"), ("b", "rail")), start=1):
        switches += [f"S{k} {d} {s} g{k} 0 SWITCH", knee(f"BD{k}", s, d, V_D), f"VG{k} g{k} 0 {gates[k]}"]
    lines = [f"* {title}", f"VSUP sup 0 DC {V_SUP!r}", feed,
             f"CBULK bus 0 {capacitance!r} IC={V_SUP!r}", *coil, *switches,
             f".model SWITCH SW(VT=0.5 VH=0 RON={R_SW!r} ROFF={R_OFF_SWITCH!r})", OPTIONS,
             ".control", f"tran {tmax!r} {tstop!r} 0 {tmax!r} uic", *measures, "quit 0", ".endc", ".end"]
    return "\n".join(lines) + "\n"


def _pulse(start, width):
    """A gate on from ``start`` for ``width`` s (switch closed between the edges' midpoints)."""
    return f"PULSE(0 1 {start!r} {EDGE} {EDGE} {width - EDGE!r} 1e3)"


def _on_until(end):
    """A gate on from the start (no edge at t = 0) until ``end`` s (its edge's midpoint)."""
    return f"PULSE(1 0 {end - EDGE / 2!r} {EDGE} {EDGE} 1 1e3)"


#: s, Q4 opens this long after Q1: two switches changing state at the same instant stop
#: ngspice ("timestep too small ... trouble with switch-instance"); in between the current
#: flows on through Q4 and Q2's body diode, losing ``V_d / L x 10 ns`` (1e-7 A).
STAGGER = 10e-9


def _on_time(coil=L_COIL):
    r_on = R_COIL + 2 * R_SW + R_SENSE
    return r_on, 1.5 * float(rise_time(0.55, 0.0, V_SUP, r_on, coil))


def test_bridge_rise_matches_ngspice(tmp_path):
    r_on, t_on = _on_time()
    t_pull = float(rise_time(0.55, 0.0, V_SUP, r_on, L_COIL))
    step = t_pull / 2000
    gates = {1: _pulse(0.0, 1.0), 2: "DC 0", 3: "DC 0", 4: "DC 1"}
    res = run(tmp_path, "bridge-rise", _netlist(
        "bridge-rise", gates, 1.2 * t_on, step,
        ["meas tran tpull WHEN i(VM)=0.55 RISE=1", f"meas tran ion FIND i(VM) AT={t_on!r}"]))
    # ngspice: the rise through two switches and the sense resistor within 1 % (+ a step)
    assert abs(res["tpull"] - t_pull) <= 0.01 * t_pull + step, (res["tpull"], t_pull)
    i_on = float(rise_current(t_on, 0.0, V_SUP, r_on, L_COIL))
    assert res["ion"] == pytest.approx(i_on, rel=0.01)


@pytest.mark.parametrize("inline, kind", [(False, "linear"), (True, "linear"), (False, "curve")],
                         ids=["sense-common-return", "sense-inline", "curve"])
def test_fast_decay_returns_energy_to_the_supply_as_ngspice_does(tmp_path, inline, kind):
    coil = COILS[kind]
    r_on, t_on = _on_time(coil)
    i0 = float(rise_current(t_on, 0.0, V_SUP, r_on, coil))
    path = fast_decay(R_COIL, R_SENSE, V_SUP, V_D)
    rel = release(path, i0, I_DROP, coil)
    t_zero = float(rel.zero_time)
    step = t_zero / 4000
    t_off = t_on + EDGE / 2 + STAGGER
    tend = t_off + 1.3 * t_zero
    after = f"from={t_off!r} to={tend!r}"
    gates = {1: _pulse(0.0, t_on), 2: "DC 0", 3: "DC 0", 4: _on_until(t_off)}
    measures = ["let back = -v(bus) * i(VFEED)", "let vq1 = v(bus) - v(a)", "let vq4 = v(b) - v(rail)",
                f"meas tran ioff FIND i(VM) AT={t_off!r}",
                f"meas tran tdrop WHEN i(VM)={I_DROP!r} FALL=1",
                "meas tran tzero WHEN i(VM)=1e-6 FALL=1",
                f"meas tran eback INTEG back {after}",
                f"meas tran vq1max MAX vq1 {after}", f"meas tran vq4max MAX vq4 {after}"]
    res = run(tmp_path, "bridge-fast", _coil_netlist(
        _netlist("bridge-fast", gates, tend, step, measures, inline=inline), coil))
    print(f"fast decay ({kind}) vs ngspice: i0 {i0:.6e}/{res['ioff']:.6e} A, zero "
          f"{t_zero:.6e}/{res['tzero'] - t_off:.6e} s, returned {float(rel.returned):.6e}/{res['eback']:.6e} J")
    assert res["ioff"] == pytest.approx(i0, rel=0.01)
    # ngspice transient: time to drop-out and to zero within 1 % plus one step
    for name, t_model in (("tdrop", float(rel.drop_time)), ("tzero", t_zero)):
        assert abs(res[name] - t_off - t_model) <= 0.01 * t_model + step, (name, res[name] - t_off, t_model)
    # ngspice: the energy the supply takes back (V_bus x charge) within 1 %
    assert res["eback"] == pytest.approx(float(rel.returned), rel=0.01), (res["eback"], float(rel.returned))
    # ... a share of the stored energy (1/2 L i0^2, or the curve's int i dpsi): the rest
    # heats the coil and the body diodes
    assert 0.0 < float(rel.returned) < _stored(coil, i0)
    # ngspice: Q1 and Q4 see V_bus + V_d (+ R_sense i from a common-return resistor), within 1 %
    v_sw = float(fast_switch_voltage(V_SUP, V_D, R_SENSE, inline, i0))
    for name in ("vq1max", "vq4max"):
        assert res[name] == pytest.approx(v_sw, rel=0.01), (name, res[name], v_sw)


@pytest.mark.parametrize("kind", list(COILS))
def test_slow_decay_recirculates_and_returns_nothing_as_ngspice_does(tmp_path, kind):
    coil = COILS[kind]
    r_on, t_on = _on_time(coil)
    i0 = float(rise_current(t_on, 0.0, V_SUP, r_on, coil))
    path = slow_decay(R_COIL, R_SW, R_SENSE, sense_inline=False)
    rel = release(path, i0, I_DROP, coil)
    t_drop = float(rel.drop_time)
    step = t_drop / 4000
    t_off = t_on + EDGE / 2
    tend = t_off + 1.2 * t_drop
    # Q1 opens at t_on, Q2 closes 2 ns later (a dead time: Q2's body diode carries the
    # current for those 2 ns); Q4 stays on
    gates = {1: _pulse(0.0, t_on), 2: _pulse(t_on + 2 * EDGE, 1.0), 3: "DC 0", 4: "DC 1"}
    measures = ["let back = -v(bus) * i(VFEED)", f"meas tran ioff FIND i(VM) AT={t_off!r}",
                f"meas tran tdrop WHEN i(VM)={I_DROP!r} FALL=1",
                f"meas tran eback INTEG back from={t_off + 10 * EDGE!r} to={tend!r}"]
    res = run(tmp_path, "bridge-slow", _coil_netlist(_netlist("bridge-slow", gates, tend, step, measures), coil))
    assert res["ioff"] == pytest.approx(i0, rel=0.01)
    # ngspice transient: the slow decay's time to drop-out within 1 % plus one step
    assert abs(res["tdrop"] - t_off - t_drop) <= 0.01 * t_drop + step, (res["tdrop"] - t_off, t_drop)
    # ngspice: nothing goes back to the supply (leakage only, far below the stored energy)
    assert abs(res["eback"]) < 1e-4 * _stored(coil, i0), res["eback"]
    assert float(rel.returned) == 0.0
    # the whole tail heats the loop: r int i^2 dt is the stored energy (1/2 L i0^2, or the
    # curve's int i dpsi, scipy quad of i L_d(i) in tests/test_flux_cycle.py)
    assert float(rel.resistive) == pytest.approx(_stored(coil, i0), rel=1e-9)


@pytest.mark.parametrize("capacitance, kind", [(22e-6, "linear"), (470e-6, "linear"), (22e-6, "curve")],
                         ids=["22uF", "470uF", "curve-22uF"])
def test_pump_up_into_the_bulk_capacitance_matches_ngspice(tmp_path, capacitance, kind):
    coil = COILS[kind]
    r_on, t_on = _on_time(coil)
    t_off = t_on + EDGE / 2 + STAGGER
    gates = {1: _pulse(0.0, t_on), 2: "DC 0", 3: "DC 0", 4: _on_until(t_off)}
    # the model's own decay time at a fixed bus bounds the pump-up run from above
    i_est = float(rise_current(t_on, 0.0, V_SUP, r_on, coil))
    t_fixed = float(release(fast_decay(R_COIL, R_SENSE, V_SUP, V_D), i_est, I_DROP, coil).zero_time)
    step = t_fixed / 4000
    tend = t_off + 1.3 * t_fixed
    measures = [f"meas tran ioff FIND i(VM) AT={t_off!r}", f"meas tran v1 FIND v(bus) AT={t_off!r}",
                "meas tran tzero WHEN i(VM)=1e-6 FALL=1",
                f"meas tran v2 MAX v(bus) from={t_off!r} to={tend!r}"]
    res = run(tmp_path, "bridge-pump", _coil_netlist(_netlist("bridge-pump", gates, tend, step, measures,
                                                              sink=False, capacitance=capacitance), coil))
    pu = pump_up(res["ioff"], res["v1"], capacitance, R_COIL + R_SENSE, coil, V_D)
    print(f"pump-up ({kind}, {capacitance * 1e6:g} uF) vs ngspice: dV {float(pu.delta_v):.6e}/"
          f"{res['v2'] - res['v1']:.6e} V, zero {float(pu.zero_time):.6e}/{res['tzero'] - t_off:.6e} s")
    # ngspice: the rise of the bus (V2 - V1) within 1 %, and when the current stops (1 % + a step)
    assert res["v2"] - res["v1"] == pytest.approx(float(pu.delta_v), rel=0.01), (res["v2"] - res["v1"], float(pu.delta_v))
    assert abs(res["tzero"] - t_off - float(pu.zero_time)) <= 0.01 * float(pu.zero_time) + step
    # the bus rising against the coil stops it sooner than a fixed bus would
    assert float(pu.zero_time) < t_fixed


def column_gate(col, change, edges, late: bool) -> str:
    """A switch's gate as a ``PWL`` source from its ``simulate`` column ``col`` (0/1 per
    sample): at each edge (sample index ``change``, time ``edges``) off at once (one
    STAGGER later if ``late``: Q4 at the release), on one STAGGER later."""
    level = int(col[0])
    points = [(0.0, level)]
    for k, edge in zip(change, edges):
        new = int(col[k + 1])
        if new != level:
            at = edge + (STAGGER if new == 1 or late else 0.0)
            points += [(at, level), (at + EDGE, new)]
            level = new
    return "PWL(" + " ".join(f"{a!r} {b}" for a, b in points) + ")"


@pytest.mark.parametrize("kind, fraction", [("linear", 0.0), ("linear", 0.3), ("curve", 0.0)],
                         ids=["slow-hold", "mixed-hold", "curve-slow-hold"])
def test_simulated_switch_columns_drive_the_element_level_bridge(tmp_path, kind, fraction):
    """`coildrive simulate`'s per-switch columns of a bridge, played into the gates of the
    element-level netlist (each switch's edges; a switch that turns on waits STAGGER after
    the one that turns off, a dead time in which a body diode carries the current; Q4
    opens STAGGER after Q1): the current at the end of the peak and at the final
    turn-off, the time to zero, and the coil voltage in a slow and in a fast decay (with
    mixed decay also in a fast part of the hold), against the CSV (ngspice, 1 %)."""
    from conftest import BOARDS, EXAMPLES, run_cli
    board = tmp_path / "bridge.toml"
    board.write_text((BOARDS / "bridge-m32-fast.toml").read_text().replace(
        'on_resistance = "40 mohm"', f'on_resistance = "{R_SW * 1e3:g} mohm"'))
    drive = tmp_path / "drive.toml"
    text = (EXAMPLES / "dosing-valve-bridge-24v.toml").read_text()
    table = ", ".join(f'"{x * 1e3:.9f} mWb"' for x in _psi(CURVE_I))
    coil = (f'inductance = "{L_COIL * 1e3:g} mH"' if kind == "linear" else
            f"flux_current = {CURVE_I}\nflux_linkage = [{table}]")
    for old, new in (('board = "bridge-m32-fast"', f'board = "{board}"'),
                     ('resistance = "24 ohm"', f'resistance = "{R_COIL:g} ohm"'),
                     ('inductance = "70 mH"', coil)):
        assert old in text
        text = text.replace(old, new)
    if fraction:
        text = text.replace('frequency = "20 kHz"\n', f'frequency = "20 kHz"\nfast_fraction = {fraction}\n')
    drive.write_text(text)
    csv = tmp_path / "act.csv"
    r = run_cli("simulate", str(drive), "--supply", f"{V_SUP:g}", "--coil-temp", "20", "--hold-time", "1 ms",
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    t, on = w["time_s"], w["switch_on"]
    names = ("high_a", "low_a", "high_b", "low_b")
    change = np.nonzero(np.any([np.diff(w[f"{n}_on"]) for n in names], axis=0))[0]
    # an edge sits on the last sample of the part it ends, but on the first of an on-time
    edges = [float(t[k + 1] if on[k + 1] == 1 else t[k]) for k in change]
    gates = {q: column_gate(w[f"{name}_on"], change, edges, name == "low_b")
             for q, name in enumerate(names, start=1)}
    t_peak, t_off = edges[0], edges[-1]
    t_zero = float(t[-1]) - t_off
    k_slow = change[-3]          # the middle of the last off-time of the hold
    t_slow = 0.5 * (edges[-3] + edges[-2])
    t_fast = t_off + 0.5 * t_zero
    step = 2e-7
    measures = ["let vcoil = v(n2) - v(b)", "let vq1 = v(bus) - v(a)",
                f"meas tran ipeak FIND i(VM) AT={t_peak!r}", f"meas tran ioff FIND i(VM) AT={t_off!r}",
                "meas tran tzero WHEN i(VM)=1e-6 FALL=1",
                f"meas tran vslow FIND vcoil AT={t_slow!r}", f"meas tran vfast FIND vcoil AT={t_fast!r}",
                f"meas tran vq1fast FIND vq1 AT={t_fast!r}"]
    t_hold_fast = 0.5 * (edges[-4] + edges[-3])   # with mixed decay: the last fast part of the hold
    if fraction:
        measures.append(f"meas tran vhfast FIND vcoil AT={t_hold_fast!r}")
    res = run(tmp_path, "bridge-phases", _coil_netlist(_netlist(
        "bridge-phases", gates, t_off + 1.2 * t_zero, step, measures, inline=True), COILS[kind]))

    def model(col, at):
        return float(np.interp(at, t, w[col]))
    assert on[k_slow + 1] == 0
    # ngspice: the currents within 1 %, the time to zero within 1 % plus a step
    assert res["ipeak"] == pytest.approx(model("current_a", t_peak), rel=0.01)
    assert res["ioff"] == pytest.approx(model("current_a", t_off), rel=0.01)
    assert abs(res["tzero"] - t_off - t_zero) <= 0.01 * t_zero + step, (res["tzero"] - t_off, t_zero)
    # ngspice: the coil voltage in the slow decay (-(2 R_sw + R_sense) i) and in the fast one
    # (-(V_bus + 2 V_d + R_sense i)), and Q1's voltage in the fast one, within 1 %
    assert res["vslow"] == pytest.approx(model("coil_voltage_v", t_slow), rel=0.01)
    assert res["vfast"] == pytest.approx(model("coil_voltage_v", t_fast), rel=0.01)
    assert res["vq1fast"] == pytest.approx(model("switch_voltage_v", t_fast), rel=0.01)
    if fraction:
        assert w["low_a_on"][change[-4] + 1] == 0 and w["low_a_on"][change[-3] + 1] == 1
        assert res["vhfast"] == pytest.approx(model("coil_voltage_v", t_hold_fast), rel=0.01)
def _mixed_gates(t_on, t_fast, period):
    """Gates of a mixed-decay hold from t = 0: Q1 + Q4 on for ``t_on``, all off for ``t_fast``
    (Q4 opens ``STAGGER`` after Q1), then Q2 + Q4 on (Q4 closes ``STAGGER`` after Q2) until
    Q2 opens two edges before the next period's on-time (its body diode carries the dead
    time)."""
    def pulse(start, width):
        return f"PULSE(0 1 {start!r} {EDGE} {EDGE} {width - EDGE!r} {period!r})"
    slow = period - t_on - t_fast - 2 * EDGE
    # with no slow part Q4 closes STAGGER before the next on-time instead (Q1 alone drives
    # nothing): the current has died in the fast part by then (the DCM case below)
    q4_open = t_fast - EDGE if slow > EDGE else t_fast - 2 * STAGGER - EDGE
    return {1: pulse(0.0, t_on), 2: pulse(t_on + t_fast, slow) if slow > EDGE else "DC 0",
            3: "DC 0",
            4: f"PULSE(1 0 {t_on + STAGGER!r} {EDGE} {EDGE} {q4_open!r} {period!r})"}


def mixed_orbit_netlist(title, t_on, t_fast, period, i_min, inline) -> str:
    """The bridge driven with a mixed-decay orbit's gates (:func:`_mixed_gates`) for four
    periods from ``i_min`` A, measuring the last one: ``imax``, ``imin``, ``iavg`` (A) and
    ``eback``, the energy the supply takes back in its fast part (J)."""
    n = 4
    step = period / 4000
    t0 = (n - 1) * period
    a, b = f"from={t0!r} to={n * period!r}", f"from={t0!r} to={n * period - step!r}"
    # the supply takes current back only in the fast part (Q1 open .. Q4 closed again)
    fast = f"from={t0 + t_on + EDGE!r} to={t0 + t_on + t_fast + 2 * STAGGER!r}"
    measures = ["let back = -v(bus) * i(VFEED)",
                f"meas tran imax MAX i(VM) {a}", f"meas tran imin MIN i(VM) {b}",
                f"meas tran iavg AVG i(VM) {a}", f"meas tran eback INTEG back {fast}"]
    text = _netlist(title, _mixed_gates(t_on, t_fast, period), n * period, step, measures, inline=inline)
    return text.replace("IC=0\n", f"IC={i_min!r}\n")


@pytest.mark.parametrize("duty,fraction,inline,kind", [
    (0.3, 0.2, False, "linear"), (0.3, 0.2, True, "linear"), (0.05, 1.0, True, "linear"),
    (0.45, 0.3, False, "curve"), (0.05, 0.5, False, "curve")],
    ids=["ccm-common-return", "ccm-inline", "dcm-all-fast", "curve-ccm", "curve-dcm"])
def test_mixed_decay_orbit_matches_ngspice(tmp_path, duty, fraction, inline, kind):
    """The hold's exact orbit with a fraction of each off-time fast (model.pwm's
    mixed_steady_state; with the saturating curve, model.flux_mixed's three-segment orbit)
    against the bridge driven with that gate pattern, started on the model's orbit (the
    flux node at ``psi(i_min)`` for the curve): the period's lowest and highest current,
    its mean, and the energy the supply takes back in one period, within 1 %; and the
    period's energy balance (conservation: the supply's on-time energy less what the fast
    part returns is the heat of the copper, the switches and the diodes)."""
    from coildrive.model.pwm import MixedDecay, pwm_steady_state

    coil = COILS[kind]
    freq = 20e3
    period = 1.0 / freq
    r_on = R_COIL + 2 * R_SW + R_SENSE
    r_slow = R_COIL + 2 * R_SW + (R_SENSE if inline else 0.0)
    mixed = MixedDecay(fraction, R_COIL + R_SENSE, V_SUP + 2 * V_D)
    ss = pwm_steady_state(duty, freq, V_SUP, r_on, r_slow, 0.0, coil, mixed=mixed)
    t_on = duty * period
    t_fast = fraction * (period - t_on)
    text = mixed_orbit_netlist("bridge-mixed", t_on, t_fast, period, float(ss.i_min), inline)
    if kind == "curve":
        psi0 = float(np.ravel(flux.linkage(coil, float(ss.i_min)))[0])
        text = _coil_netlist(text, coil).replace("CPHI phi 0 1 IC=0", f"CPHI phi 0 1 IC={psi0!r}")
    res = run(tmp_path, "bridge-mixed", text)
    print(f"mixed orbit ({kind}, D {duty}, m {fraction}) vs ngspice: top {float(ss.i_max):.6e}/{res['imax']:.6e}, "
          f"bottom {float(ss.i_min):.6e}/{res['imin']:.6e}, mean {float(ss.mean):.6e}/{res['iavg']:.6e} A, "
          f"back {V_SUP * float(ss.charge_fast):.6e}/{res['eback']:.6e} J")
    # ngspice: the orbit's top, bottom and mean within 1 % (the bottom of a DCM orbit is 0)
    assert res["imax"] == pytest.approx(float(ss.i_max), rel=0.01), (res["imax"], float(ss.i_max))
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01), (res["iavg"], float(ss.mean))
    assert abs(res["imin"] - float(ss.i_min)) <= 0.01 * float(ss.i_max), (res["imin"], float(ss.i_min))
    # ngspice: the energy back into the supply per hold period, V_bus x the fast part's charge
    back = V_SUP * float(ss.charge_fast)
    assert res["eback"] == pytest.approx(back, rel=0.01), (res["eback"], back)
    assert bool(ss.dcm) == (duty == 0.05)
    r_fast = R_COIL + R_SENSE
    heat = (r_on * float(ss.square_on) + r_fast * float(ss.square_fast)
            + r_slow * (float(ss.square_off) - float(ss.square_fast)) + 2 * V_D * float(ss.charge_fast))
    assert V_SUP * float(ss.charge_on) - back == pytest.approx(heat, rel=1e-9)


def test_slow_decay_hold_orbit_of_a_curve_matches_ngspice(tmp_path):
    """The hold of a saturating coil on a bridge (on through Q1 + Q4, off recirculating
    through Q2 + Q4, no opposing voltage): the exact periodic orbit of
    :func:`coildrive.model.flux.orbit` for ``v_off = 0``, started in ngspice at its lowest
    current (the flux node's initial condition ``psi(i_min)``) and run five time
    constants at the incremental inductance of the mean: an orbit off by d drifts by
    (1 - e^-5) d toward the true one. ngspice, the last period: the start and end of its
    on-time and the mean within 1 %."""
    from coildrive.model.pwm import pwm_steady_state

    coil = COILS["curve"]
    r_on = R_COIL + 2 * R_SW + R_SENSE
    r_off = R_COIL + 2 * R_SW   # the sense resistor in the common return: out of the loop
    f, duty = 20e3, 0.30
    period = 1.0 / f
    ss = pwm_steady_state(duty, f, V_SUP, r_on, r_off, 0.0, coil)
    i_min, i_max = float(ss.i_min), float(ss.i_max)
    assert 0.1 < i_min < i_max, "precondition: continuous conduction"
    tau = float(coil.incremental(float(ss.mean))) / r_off
    n = max(4, round(5.0 * tau * f))
    tstop = n * period
    t0 = tstop - period
    t_on = duty * period

    def pulse(start, width):
        return f"PULSE(0 1 {start!r} {EDGE} {EDGE} {width - EDGE!r} {period!r})"
    gates = {1: pulse(0.0, t_on), 2: pulse(t_on + 2 * EDGE, period - t_on - 4 * EDGE), 3: "DC 0",
             4: "DC 1"}
    window = f"from={t0!r} to={tstop!r}"
    measures = [f"meas tran istart FIND i(VM) AT={t0!r}",
                f"meas tran iopen FIND i(VM) AT={t0 + t_on - EDGE!r}", f"meas tran iavg AVG i(VM) {window}"]
    text = _coil_netlist(_netlist("bridge-orbit", gates, tstop, period / 100, measures), coil)
    psi0 = float(np.ravel(flux.linkage(coil, i_min))[0])
    text = text.replace("CPHI phi 0 1 IC=0", f"CPHI phi 0 1 IC={psi0!r}")
    res = run(tmp_path, "bridge-orbit", text)
    print(f"slow-decay orbit (curve) vs ngspice after {n} periods: i_min {i_min:.6e}/{res['istart']:.6e}, "
          f"i_max {i_max:.6e}/{res['iopen']:.6e}, mean {float(ss.mean):.6e}/{res['iavg']:.6e} A")
    assert res["istart"] == pytest.approx(i_min, rel=0.01)
    assert res["iopen"] == pytest.approx(i_max, rel=0.01)
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01)
