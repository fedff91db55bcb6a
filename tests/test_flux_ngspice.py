"""The saturating coil (a flux-linkage curve) against ngspice transients.

Reference: ngspice (batch mode), the same netlists as tests/test_reference_ngspice.py
(real topology, piecewise-linear one-way devices, switch as a gated conductance) with
the linear inductor replaced by a flux-controlled one built from behavioural parts:

* the coil voltage is integrated into a flux node: a voltage-controlled current source
  (G source, ngspice manual ch. 4 "Voltage and Current Sources", linear dependent
  sources) drives ``V(n1, n2)`` amps into a 1 F capacitor, so ``V(phi) = int v dt =
  psi``;
* the coil current is a behavioural current source (B source, ngspice manual ch. 5
  "Non-linear Dependent Sources (Behavioral Sources)", section 5.1 "B source (ASRC)",
  and its ``pwl()`` function) from n1 to n2, ``I = pwl(V(phi), psi_k, i_k)``: the
  inverse of the curve, tabulated at 2,001 currents from the model's interpolant.
  (Chapter and section numbers from memory, ngspice-39's manual.)

So ngspice solves ``v = R i + dpsi/dt`` by its own time stepping, with no knowledge of
the model's quadrature. The piecewise-linear table stands for the interpolant to
within 1e-6 of the flux. Tolerances as the linear references: times, mean and end
currents 1 %, ripple 3 %, plus one time step for times.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from circuit_reference import POINT, parts, reference_drive
from coildrive.model.circuit import loop
from coildrive.model.flux import FluxCoil
from coildrive.model.pwm import duty_for_mean, pwm_steady_state
from coildrive.model.rl import decay_time, rise_current, rise_time
from test_reference_ngspice import I_ZERO, _netlist, _run

pytestmark = pytest.mark.ngspice

#: An invented saturating valve coil: psi = 40 mWb tanh(i / 0.35 A) + 5 mH i, tabulated.
#: Points of the piecewise-linear table ngspice gets (the interpolant, 1.5 mA apart).
TABLE = 2001
CURVE_I = [0.0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.8, 1.0, 1.5, 2.0]


def _psi(i):
    return 0.040 * np.tanh(np.asarray(i) / 0.35) + 0.005 * np.asarray(i)


def _flux_drive(tmp_path, freewheel="diode", position="coil", **kw):
    flux = ", ".join(f'"{x * 1e3:.6f} mWb"' for x in _psi(CURVE_I))
    drive = reference_drive(tmp_path, freewheel, position, **kw)
    path = tmp_path / "ref-drive.toml"
    text = path.read_text().replace(f'inductance = "{kw.get("inductance", "60 mH")}"',
                                    f"flux_current = {CURVE_I}\nflux_linkage = [{flux}]")
    path.write_text(text)
    from coildrive.config import load_drive

    drive = load_drive(path)
    assert drive.coil.flux_current, "precondition: the drive has the curve"
    return drive


def _flux_netlist(text: str, lp, top: float = 3.0) -> str:
    """Replace the linear inductor of ``text`` by the flux-controlled one of ``lp``'s curve
    (its tolerance scale included), tabulated up to ``top`` A."""
    coil: FluxCoil = lp.inductance
    scale = float(np.ravel(coil.scale)[0])
    i = np.linspace(0.0, top, TABLE)
    psi = scale * coil.curve.psi(i)
    pairs = [f"{float(p):.12e}, {float(c):.12e}" for p, c in zip(psi, i)]
    rows = [", ".join(pairs[k:k + 6]) for k in range(0, len(pairs), 6)]
    lines = text.splitlines()
    k = next(n for n, l in enumerate(lines) if l.startswith("LCOIL "))
    a, b = lines[k].split()[1:3]   # the inductor's nodes: the flux-controlled one takes them
    lines[k:k + 1] = [f"GINT 0 phi {a} {b} 1", "CPHI phi 0 1 IC=0", "RPHI phi 0 1e12",
                      f"BCOIL {a} {b} I = pwl(V(phi),", *(f"+ {r}," for r in rows[:-1]),
                      f"+ {rows[-1]})"]
    return "\n".join(lines) + "\n"


def test_curve_is_saturating():
    i = np.linspace(0.0, 1.0, 11)
    assert np.all(np.diff(np.gradient(_psi(i), i)) < 0), "precondition: L_d falls with current"


def test_rise_and_decay_match_ngspice(tmp_path):
    drive = _flux_drive(tmp_path)
    lp = loop(drive, **POINT)
    p = parts(drive, **POINT)
    i_pull = drive.pull_in.current
    t_model = float(rise_time(i_pull, 0.0, lp.v_on, lp.r_on, lp.inductance))
    assert math.isfinite(t_model)
    # the linear coil at the small-signal inductance (what an LCR meter reads) is slower
    t_linear = float(rise_time(i_pull, 0.0, lp.v_on, lp.r_on, lp.inductance.small_signal()))
    assert t_linear > 1.3 * t_model, "precondition: saturation matters here"
    t_on = 1.5 * t_model
    i_off = float(rise_current(t_on, 0.0, lp.v_on, lp.r_on, lp.inductance))
    t_drop = float(decay_time(drive.release.current, i_off, lp.r_off, lp.v_off, lp.inductance))
    t_zero = float(decay_time(0.0, i_off, lp.r_off, lp.v_off, lp.inductance))
    step = t_model / 2000
    probes = [0.25 * t_model, 0.5 * t_model]
    measures = [f"meas tran tpull WHEN i(VM)={i_pull!r} RISE=1",
                f"meas tran ioff FIND i(VM) AT={t_on!r}",
                f"meas tran tdrop WHEN i(VM)={drive.release.current!r} FALL=1",
                f"meas tran tzero WHEN i(VM)={I_ZERO!r} FALL=1"]
    measures += [f"meas tran i{k} FIND i(VM) AT={t!r}" for k, t in enumerate(probes)]
    tstop = t_on + 1.3 * t_zero
    text = _flux_netlist(_netlist(p, "flux rise", t_on, 10 * tstop, tstop, step, measures), lp)
    res = _run(tmp_path, "flux-rise", text)
    print(f"flux rise vs ngspice: pull-in {t_model:.6e}/{res['tpull']:.6e} s (linear at the "
          f"small-signal L {t_linear:.6e} s), drop-out {t_drop:.6e}/{res['tdrop'] - t_on:.6e} s, "
          f"zero {t_zero:.6e}/{res['tzero'] - t_on:.6e} s")
    # ngspice transient: time to the pull-in current within 1 % plus one step
    assert abs(res["tpull"] - t_model) <= 0.01 * t_model + step, (t_model, res["tpull"])
    for k, t in enumerate(probes):
        i_model = float(rise_current(t, 0.0, lp.v_on, lp.r_on, lp.inductance))
        assert res[f"i{k}"] == pytest.approx(i_model, rel=0.01), (t, i_model, res[f"i{k}"])
    assert res["ioff"] == pytest.approx(i_off, rel=0.01)
    # ngspice: the freewheel decay to drop-out and to zero, 1 % plus one step
    assert abs(res["tdrop"] - t_on - t_drop) <= 0.01 * t_drop + step, (t_drop, res["tdrop"] - t_on)
    assert abs(res["tzero"] - t_on - t_zero) <= 0.01 * t_zero + step, (t_zero, res["tzero"] - t_on)


@pytest.mark.parametrize("target, frequency, points", [(0.30, "25 kHz", 100), (0.05, "50 Hz", 400)],
                         ids=["continuous", "discontinuous"])
def test_pwm_orbit_matches_ngspice(tmp_path, target, frequency, points):
    drive = _flux_drive(tmp_path, frequency=frequency)
    lp = loop(drive, **POINT)
    p = parts(drive, **POINT)
    f = drive.hold.frequency
    period = 1.0 / f
    duty = float(duty_for_mean(target, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance))
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    assert bool(ss.dcm) == (target < 0.1), "precondition: the conduction mode of the case"
    # settle: twelve time constants at the largest incremental inductance
    tau = float(lp.inductance.small_signal() / min(lp.r_on, lp.r_off))
    tstop = max(4, math.ceil(12.0 * tau * f)) * period
    t0 = tstop - period
    t_open = t0 + duty * period - 1e-9
    window = f"from={t0!r} to={tstop!r}"
    measures = [f"meas tran iavg AVG i(VM) {window}", f"meas tran istart FIND i(VM) AT={t0!r}",
                f"meas tran iopen FIND i(VM) AT={t_open!r}"]
    step = period / points
    text = _flux_netlist(_netlist(p, "flux pwm", duty * period, period, tstop, step, measures), lp)
    res = _run(tmp_path, "flux-pwm", text)
    # ngspice transient, last period after settling: mean and i_max within 1 %, ripple 3 %
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01), (float(ss.mean), res["iavg"])
    assert res["iopen"] == pytest.approx(float(ss.i_max), rel=0.01), (float(ss.i_max), res["iopen"])
    ripple = res["iopen"] - res["istart"]
    assert ripple == pytest.approx(float(ss.ripple), rel=0.03), (float(ss.ripple), ripple)
    # and not the linear coil's orbit at the small-signal inductance: the ripple differs
    lin = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance.small_signal())
    print(f"flux orbit vs ngspice: mean {float(ss.mean):.6e}/{res['iavg']:.6e} A, ripple "
          f"{float(ss.ripple):.6e}/{ripple:.6e} A; linear ripple {float(lin.ripple):.6e} A")


def test_split_decay_with_a_curve_matches_ngspice(tmp_path):
    """Split decay (freewheel.split_decay) with the saturating curve: the split-decay
    circuit of tests/test_split_decay.py (a real bypass switch across the Zener) with the
    flux-controlled coil above; the hold follows the curve's exact orbit through the slow
    loop (mean 1 %, ripple 3 %, diode and bypass powers 2 and 3 %, no Zener power), the
    release after the bypass opens the fast one (drop-out time 1 % plus one step)."""
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.design.evaluate import release_figures
    from coildrive.model.losses import hold_losses
    from conftest import EXAMPLES
    from test_split_decay import check_split_against_ngspice, split_netlist

    flux = ", ".join(f'"{x * 1e3:.6f} mWb"' for x in _psi(CURVE_I))
    text = (EXAMPLES / "wash-valve-split-24v.toml").read_text().replace(
        'inductance = "70 mH"', f"flux_current = {CURVE_I}\nflux_linkage = [{flux}]", 1)
    path = tmp_path / "split-curve.toml"
    path.write_text(text)
    drive = load_drive(path)
    assert drive.coil.flux_current and drive.freewheel.split_decay, "precondition"
    supply, temp = 24.0, 70.0
    d = design(drive)
    duty, f = d.hold.duty, d.hold.frequency_hz
    lp = loop(drive, supply, temp)
    fast = loop(drive, supply, temp, path="release")
    assert isinstance(lp.inductance, FluxCoil)
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    l_hold = float(lp.inductance.incremental(float(ss.mean)))
    assert l_hold < 0.75 * float(lp.inductance.small_signal()), "precondition: the hold is on the knee"
    loss = hold_losses(drive, lp, ss, f)
    t_drop, _, _, _ = release_figures(drive, lp, fast, ss.i_max)
    netlist, (t_cut, step) = split_netlist(drive, supply, temp, duty, f, t_drop, cycles=10.0)
    res = _run(tmp_path, "split-flux", _flux_netlist(netlist, lp))
    check_split_against_ngspice(res, drive, supply, temp, ss, loss, t_drop, t_cut, step)


def test_tune_with_a_curve_matches_ngspice_at_its_worst_corner(tmp_path):
    """The offline sweep (coildrive tune) with the example's saturating curve: its
    recommendation's figures at the worst corner -- the coil's copper power and the
    clamp's -- against an ngspice transient of that corner (the flux-controlled coil
    above, the recommended duty and frequency, settled), within 2 %; and the hold mean
    there reaches the level the setting was chosen for."""
    import json

    from conftest import EXAMPLES, run_cli
    from coildrive.config import load_drive
    from test_reference_ngspice import EDGE

    text = (EXAMPLES / "saturating-valve-24v.toml").read_text()
    assert "[hold]" in text
    path = tmp_path / "valve-fixed.toml"
    # one duty at every corner (fixed), with a class H winding's limit (the fixed duty
    # heats the coil past the example's class F at the highest supply)
    text = text.replace("[hold]", '[hold]\nregulation = "fixed"', 1)
    path.write_text(text.replace('max_coil_temp = "155 degC"', 'max_coil_temp = "180 degC"', 1))
    r = run_cli("tune", str(path), "--json", "--min-frequency", "24 kHz", "--max-frequency",
                "26 kHz", "--max-ripple", "30 %", cwd=EXAMPLES)
    assert r.returncode in (0, 1), r.stderr
    best = json.loads(r.stdout)["candidates"][0]
    assert best["rank"] == 1 and best["feasible"]
    drive = load_drive(path)
    label = best["worst_corner"]            # e.g. "27.9994 V, -10 degC, coil -10 degC (cold), R-7%, L+15%"
    supply = float(label.split(" V,")[0])
    temp = float(label.split("coil ")[1].split(" degC")[0])
    r_factor = 1 + float(label.split("R")[1].split("%")[0]) / 100
    l_factor = 1 + float(label.split("L")[1].split("%")[0]) / 100
    lp = loop(drive, supply, temp, r_factor, l_factor)
    p = parts(drive, supply, temp, r_factor, l_factor)
    f, duty = best["frequency_hz"], best["duty"]
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance)
    period = 1.0 / f
    tau = float(lp.inductance.small_signal() / min(lp.r_on, lp.r_off))
    tstop = max(4, math.ceil(12.0 * tau * f)) * period
    t0 = tstop - period
    window = f"from={t0!r} to={tstop!r}"
    measures = ["let isq = i(VM) * i(VM)", f"meas tran iavg AVG i(VM) {window}",
                f"meas tran isq AVG isq {window}", f"meas tran pclamp AVG pfw {window}"]
    step = period / 100
    netlist = _netlist(p, "tuned flux pwm", duty * period, period, tstop, step, measures)
    res = _run(tmp_path, "tune-flux", _flux_netlist(netlist, lp))
    powers = best["worst_corner_powers_w"]
    print(f"tuned flux hold vs ngspice at {label}: coil {powers['coil']:.6e}/"
          f"{p.r_coil * res['isq']:.6e} W, clamp {powers['clamp']:.6e}/{res['pclamp']:.6e} W, "
          f"mean {float(ss.mean):.6e}/{res['iavg']:.6e} A")
    # ngspice transient, last period: copper R_coil <i^2> and the clamp's power, 2 %
    assert p.r_coil * res["isq"] == pytest.approx(powers["coil"], rel=0.02), (p.r_coil * res["isq"], powers)
    assert res["pclamp"] == pytest.approx(powers["clamp"], rel=0.02), (res["pclamp"], powers)
    assert res["iavg"] == pytest.approx(float(ss.mean), rel=0.01)
    assert best["min_mean_current_a"] >= best["hold_current_a"] * (1 - 1e-9)
    assert EDGE < step
