"""The eddy-current term (``[coil] eddy_resistance`` / ``eddy_time_constant``): its file
keys, its physics against scipy, the energy balance of an actuation, the design and
simulate on it. The circuit against ngspice is in tests/test_eddy_ngspice.py.

Sources beside each check: scipy's ``solve_ivp`` (Radau) on the circuit's equations
written afresh in the flux linkage (Kirchhoff's laws at the branch node, the freewheel
diode blocking below zero terminal current), scipy's ``PchipInterpolator`` for the curve
there; the energy balance is the first law (what the supply gives goes into the copper,
the eddy resistance, the freewheel elements and the field).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.model import eddy
from coildrive.model.circuit import freewheel_element_energy, loop
from coildrive.model.pwm import duty_for_mean, pwm_steady_state
from coildrive.model.rl import decay_time, rise_current, rise_time

EXAMPLE = EXAMPLES / "saturating-valve-24v.toml"
POINT = {"supply": 22.0, "coil_temp": 60.0, "r_factor": 1.05, "l_factor": 1.1}


def _example_drive(tmp_path, extra, source=EXAMPLE):
    path = tmp_path / "eddy.toml"
    text = source.read_text()
    assert "inductance_tolerance = " in text
    lines = text.splitlines()
    k = next(n for n, l in enumerate(lines) if l.startswith("inductance_tolerance"))
    lines.insert(k + 1, extra)
    board = next(l for l in lines if l.startswith("board = "))
    name = board.split('"')[1]
    lines[lines.index(board)] = f'board = "{EXAMPLES.parent / "boards" / name}.toml"'
    path.write_text("\n".join(lines) + "\n")
    return path


# ------------------------------------------------------------------------ the file keys
def test_time_constant_converts_with_the_small_signal_inductance(tmp_path):
    d = load_drive(_example_drive(tmp_path, 'eddy_time_constant = "0.4 ms"'))
    # the curve's first slope is the small-signal inductance: R_e = L / tau
    assert d.coil.eddy_resistance == pytest.approx(d.coil.inductance / 0.4e-3, rel=1e-12)
    assert d.coil.eddy_time_constant == 0.4e-3


@pytest.mark.parametrize("extra, key, words", [
    ('eddy_resistance = "300 ohm"\neddy_time_constant = "1 ms"',
     "coil.eddy_resistance and coil.eddy_time_constant", "keep one of them"),
    ('eddy_resistance = "1e-6 ohm"', "coil.eddy_resistance", "outside"),
    ('eddy_resistance = "3 mH"', "coil.eddy_resistance", ""),
])
def test_file_errors_name_the_key(tmp_path, extra, key, words):
    path = _example_drive(tmp_path, extra)
    r = run_cli("design", str(path))
    assert r.returncode == 2, r.output
    line = r.stderr.strip()
    assert "\n" not in line and key in line and words in line, line


# --------------------------------------------------------------- the physics vs scipy
def _reference(drive, lp, t_on: float, t_end: float):
    """scipy's solve_ivp (Radau) on the circuit in the flux linkage, written afresh:
    switch on for ``t_on`` s, then the freewheel; returns the solution with the states
    ``psi, E_supply, E_copper_on, E_eddy, E_freewheel_path, E_field`` and the terminal and
    magnetising currents as functions of the state."""
    from scipy.integrate import solve_ivp
    from scipy.interpolate import PchipInterpolator

    coil = drive.coil
    e = lp.inductance
    scale = float(np.ravel(e.magnetising.scale)[0]) if coil.flux_current else None
    if coil.flux_current:
        curve = PchipInterpolator(coil.flux_current, np.asarray(coil.flux_linkage) * scale)
        grid = np.linspace(0.0, 6.0, 600_001)
        psi_grid = np.where(grid <= coil.flux_current[-1], curve(np.minimum(grid, coil.flux_current[-1])),
                            curve(coil.flux_current[-1]) + (grid - coil.flux_current[-1])
                            * curve.derivative()(coil.flux_current[-1]))

        def i_m(psi):
            return np.interp(psi, psi_grid, grid)
    else:
        ell = float(np.ravel(e.magnetising)[0])

        def i_m(psi):
            return psi / ell
    r_e = coil.eddy_resistance
    v, r_on, r_off, v_off = (float(np.ravel(x)[0]) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off))

    def terminal(t, psi):
        im = i_m(psi)
        if t < t_on:   # V = R_on i + R_e (i - i_m)
            return (v + r_e * im) / (r_on + r_e), im
        # -V_off = R_off i + R_e (i - i_m) while the diode conducts (i > 0), else i = 0
        return max((r_e * im - v_off) / (r_off + r_e), 0.0), im

    def rhs(t, y):
        i, im = terminal(t, y[0])
        v_branch = r_e * (i - im)          # Kirchhoff's current law at the branch node
        on = t < t_on
        return [v_branch, v * i if on else 0.0, r_on * i * i if on else r_off * i * i,
                r_e * (i - im) ** 2, 0.0 if on else v_off * i, im * v_branch]

    opts = dict(method="Radau", rtol=1e-10, atol=[1e-13, 1e-13, 1e-13, 1e-13, 1e-13, 1e-13], dense_output=True)
    first = solve_ivp(rhs, (0.0, t_on), [0.0] * 6, max_step=t_on / 400, **opts)
    second = solve_ivp(rhs, (t_on, t_end), first.y[:, -1], max_step=(t_end - t_on) / 2000, **opts)
    return first, second, terminal


@pytest.mark.parametrize("curve", [True, False], ids=["curve", "linear"])
def test_actuation_matches_scipy_and_balances_energy(tmp_path, curve):
    src = EXAMPLE if curve else EXAMPLES / "reagent-valve-zener-24v.toml"
    drive = load_drive(_example_drive(tmp_path, 'eddy_resistance = "250 ohm"', src))
    lp = loop(drive, **POINT)
    e = lp.inductance
    v, r_on, r_off, v_off = (float(np.ravel(x)[0]) for x in (lp.v_on, lp.r_on, lp.r_off, lp.v_off))
    i_pull, drop = drive.pull_in.current, drive.release.current
    t_pull = float(rise_time(i_pull, 0.0, v, r_on, e))
    t_on = 1.4 * t_pull
    i_off = float(rise_current(t_on, 0.0, v, r_on, e))
    t_zero = float(decay_time(0.0, i_off, r_off, v_off, e))
    t_drop = float(decay_time(drop, i_off, r_off, v_off, e))
    # the release past zero terminal current: until the flux is nearly gone
    t_end = t_on + float(decay_time(1e-7 * i_off, i_off, r_off, v_off, e))
    first, second, terminal = _reference(drive, lp, t_on, t_end)

    def im_at(sol, t):
        return terminal(t, float(sol.sol(t)[0]))

    # scipy solve_ivp: the magnetising current at the model's pull-in time, end of peak
    assert im_at(first, t_pull)[1] == pytest.approx(i_pull, rel=1e-5)
    assert im_at(first, t_on - 1e-12)[1] == pytest.approx(i_off, rel=1e-5)
    # ... the terminal current's step at switch-on and along the rise
    for t in (1e-9, 0.3 * t_pull, 0.8 * t_pull):
        i_t = float(eddy.terminal(rise_current(t, 0.0, v, r_on, e), v, r_on, drive.coil.eddy_resistance))
        assert im_at(first, t)[0] == pytest.approx(i_t, rel=1e-5), t
    assert im_at(first, 1e-9)[0] == pytest.approx(v / (r_on + drive.coil.eddy_resistance), rel=1e-4)
    # ... the release: the terminal current's zero, then the flux down to drop-out
    assert t_drop > t_zero, "precondition: the flux outlasts the terminal current"
    assert im_at(second, t_on + t_zero * (1 - 1e-4))[0] > 0
    assert im_at(second, t_on + t_zero * (1 + 1e-4))[0] == 0.0
    assert im_at(second, t_on + t_drop)[1] == pytest.approx(drop, rel=1e-5)
    # energies: the model's segment integrals against scipy's
    y1, y2 = first.y[:, -1], second.y[:, -1]
    q_on, s_on, w_on = eddy.rise_integrals(t_on, 0.0, v, r_on, e)
    q_off, s_off, _ = eddy.decay_integrals(t_zero, i_off, r_off, v_off, e)
    w_rel = float(eddy.release_eddy_energy(i_off, r_off, v_off, e))
    # the off-loop's voltage V_off takes V_off * int i dt (a clamp across the switch takes
    # V_clamp * int i dt, of which the bus gives V_bus * int i dt back in)
    fw = v_off * float(q_off)
    clamp = float(freewheel_element_energy(drive, lp, q_off, s_off))
    if drive.freewheel.type == "clamp":
        assert clamp == pytest.approx(fw + v * float(q_off), rel=1e-12)
    assert v * float(q_on) == pytest.approx(y1[1], rel=1e-6), "supply energy"
    assert r_on * float(s_on) == pytest.approx(y1[2], rel=1e-6), "copper + switch + sense, on"
    assert float(w_on) == pytest.approx(y1[3], rel=1e-6), "eddy, on"
    assert w_rel == pytest.approx(y2[3] - y1[3], rel=1e-5), "eddy, release"
    assert fw == pytest.approx(y2[4], rel=1e-6), "freewheel path"
    assert float(eddy.stored_energy(e.magnetising, i_off)) == pytest.approx(y1[5], rel=1e-6), "field"
    # the first law over the whole actuation: supply = copper + eddy + freewheel (+ field 0)
    copper = r_on * float(s_on) + r_off * float(s_off)
    total = copper + float(w_on) + w_rel + fw
    assert total == pytest.approx(v * float(q_on), rel=1e-9)
    # scipy's own books: supply = copper + eddy + freewheel + what is left in the field (~0)
    assert abs(y2[5]) < 1e-9 * y2[1]
    assert y2[1] == pytest.approx(y2[2] + y2[3] + y2[4] + y2[5], rel=1e-6), "scipy's own balance"
    assert total == pytest.approx(y2[1], rel=1e-6), "the model's books against scipy's"


@pytest.mark.parametrize("curve, target", [(True, 0.22), (True, 0.5), (False, 0.22), (False, 0.5),
                                           (True, 0.1), (False, 0.1)])   # 0.1 A: the freewheel blocks
def test_hold_orbit_is_periodic_under_scipy(tmp_path, curve, target):
    """One period from the model's lowest magnetising current, integrated by scipy,
    returns there; its mean, terminal ripple and magnetising RMS are the model's."""
    from scipy.integrate import solve_ivp

    src = EXAMPLE if curve else EXAMPLES / "reagent-valve-zener-24v.toml"
    drive = load_drive(_example_drive(tmp_path, 'eddy_resistance = "250 ohm"', src))
    lp = loop(drive, **POINT)
    e = lp.inductance
    f = drive.hold.frequency
    duty = float(duty_for_mean(target, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, e))
    ss = pwm_steady_state(duty, f, lp.v_on, lp.r_on, lp.r_off, lp.v_off, e)
    period = 1.0 / f
    t_on = duty * period
    _, _, terminal = _reference(drive, lp, t_on, 2 * t_on)   # its equations, reused below
    psi0 = float(eddy.stored_energy(e.magnetising, 0.0))      # 0: a check of the helper
    assert psi0 == 0.0
    if curve:
        psi_a = float(np.ravel(e.magnetising.scale)[0]) * float(e.magnetising.curve.psi(float(ss.i_min)))
    else:
        psi_a = float(np.ravel(e.magnetising)[0]) * float(ss.i_min)

    def rhs(t, y):
        i, im = terminal(t, y[0])
        return [drive.coil.eddy_resistance * (i - im), i, im * im]

    sol = solve_ivp(rhs, (0.0, period), [psi_a, 0.0, 0.0], method="Radau", rtol=1e-11, atol=1e-14,
                    max_step=period / 400, dense_output=True)
    t = np.linspace(0.0, period, 4001)
    i_t = np.array([terminal(x, float(sol.sol(x)[0]))[0] for x in t])
    end_im = terminal(period, float(sol.y[0, -1]))[1]
    # scipy solve_ivp (Radau): a period from i_min returns to it; mean and ripple 1e-4
    assert end_im == pytest.approx(float(ss.i_min), rel=1e-6), "periodic"
    assert sol.y[1, -1] / period == pytest.approx(float(ss.mean), rel=1e-6)
    assert i_t.max() - i_t.min() == pytest.approx(float(ss.ripple), rel=1e-3)
    # the magnetising current's RMS (a moving armature's hold force goes with it)
    assert bool(ss.dcm) == (target < 0.2)
    assert np.sqrt(sol.y[2, -1] / period) == pytest.approx(float(ss.magnetising_rms), rel=1e-6)
    assert float(ss.magnetising_rms) < float(ss.rms)


# ------------------------------------------------------------ design, simulate, emulate
def test_design_and_simulate_with_an_eddy_term(tmp_path):
    path = _example_drive(tmp_path, 'eddy_time_constant = "0.2 ms"', EXAMPLES / "reagent-valve-zener-24v.toml")
    r = run_cli("design", str(path), "--json")
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads(r.stdout)
    ed = doc["eddy"]
    assert ed["given"] == "coil.eddy_time_constant" and ed["time_constant_s"] == pytest.approx(0.2e-3)
    assert ed["switch_on_step_a"] > 0 and ed["release_eddy_energy_j"] > 0
    # the over-current trip sits above what the channel reads: the terminal current, which
    # ends the peak above the magnetising current by (V - R i_m) / (R + R_e)
    assert doc["adc"]["healthy_max_current_a"] > doc["pull_in"]["peak_end_current_max_a"]
    csv = tmp_path / "a.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    head = csv.read_text().splitlines()[0]
    assert head.endswith(",magnetising_current_a"), head
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    t, i, m = data[:, 0], data[:, 1], data[:, -1]
    assert np.all(np.diff(t) > 0), "time rises strictly (each edge's second row 1 ns on)"
    d = load_drive(path)
    lp = loop(d, 24.0, 20.0)
    # the switch-on step V / (R_on + R_e), the magnetising current from zero
    assert i[0] == pytest.approx(float(lp.v_on / (lp.r_on + d.coil.eddy_resistance)), rel=1e-9)
    assert m[0] == 0.0
    assert np.all(i[t > t[-1] * 0.999] == 0.0) and m[-1] > 0, "the flux outlasts the terminal current"


def test_no_eddy_term_no_new_outputs(tmp_path):
    """Without the term nothing is added (every example x board's design JSON, header,
    plot, simulate CSV and tune output were compared byte for byte with
    benchmarks/compare_outputs.py before and after the term went in)."""
    src = EXAMPLES / "reagent-valve-zener-24v.toml"
    assert "eddy" not in design(load_drive(src)).to_dict()
    csv = tmp_path / "b.csv"
    run_cli("simulate", str(src), "--supply", "24", "--coil-temp", "20", "--csv", str(csv))
    assert "magnetising" not in csv.read_text().splitlines()[0]


def check_synthetic(tmp_path, path, supply: float = 24.0) -> dict:
    """``coildrive check`` of a synthetic capture of the drive at ``path`` (the virtual
    device's samples, ``supply`` V, 20 degC) against its own design: asserts it passes,
    with the pull-in, release and hold-mean rows; returns the rows by name."""
    from coildrive.bench.capture_file import write_capture
    from coildrive.bench.synth import synth_capture
    from coildrive.design import firmware_setting

    d = load_drive(path)
    des = design(d)
    duty, peak = firmware_setting(des, supply)
    cap = tmp_path / "eddy.cdcap"
    write_capture(cap, synth_capture(d, peak, duty, des.hold.frequency_hz, supply=supply, coil_temp=20.0,
                                     hold_time=0.02, actuations=2))
    r = run_cli("check", str(cap), str(path), "--supply", f"{supply:g}", "--coil-temp", "20", "--json")
    doc = json.loads(r.stdout)
    assert r.returncode == 0 and doc["ok"], r.stdout
    rows = {x["name"]: x for x in doc["items"]}
    for name in ("pull_in_time", "release_time", "hold_mean"):
        assert rows[name]["status"] == "pass", rows[name]
    return rows


def test_check_passes_a_capture_of_the_eddy_coil(tmp_path):
    """A synthetic capture of the coil (the virtual device's samples) checks against its
    own design: the times the sensed current takes are the terminal current's."""
    path = _example_drive(tmp_path, 'eddy_resistance = "400 ohm"', EXAMPLES / "reagent-valve-zener-24v.toml")
    d = load_drive(path)
    rows = check_synthetic(tmp_path, path)
    # the terminal current reaches the pull-in current before the flux does
    lp = loop(d, 24.0, 20.0)
    t_flux = float(rise_time(d.pull_in.current, 0.0, lp.v_on, lp.r_on, lp.inductance))
    assert rows["pull_in_time"]["predicted"] < t_flux


def firmware_actuation(tmp_path, path, supply: float, until: float = 0.3):
    """The reference C driver of the drive at ``path`` in the loop (compiled with gcc):
    one actuation at ``supply`` V, 20 degC, a 5 ms hold; ``(design, messages)``."""
    from coildrive.bench import FrameDecoder
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.messages import Event, EventKind
    from coildrive.codegen.host_build import build_firmware

    out = tmp_path / "fw"
    r = run_cli("firmware-driver", str(path), "--out", str(out))
    assert r.returncode == 0, r.stderr
    d = design(load_drive(path))
    dev = FirmwareDevice(d, build_firmware(out, d, cache=tmp_path / "cache"),
                         DeviceOptions(supply=supply, coil_temp=20.0, first_actuation=0.002, seed=3,
                                       hold_time=0.005))
    dec, msgs, t = FrameDecoder(), [], 0.0
    while t < until and EventKind.OFF not in [m.kind for m in msgs if isinstance(m, Event)]:
        t += 0.005
        msgs += dec.feed(dev.read(t))
    return d, msgs


def test_compiled_driver_streams_the_terminal_current(tmp_path):
    """The reference C driver in the loop (gcc) on the eddy coil: one actuation with no
    fault, and the codes just after the switch-on show the step V / (R_on + R_e)."""
    from conftest import require_tool

    require_tool("gcc")
    from coildrive.bench.messages import Event, EventKind, Samples

    path = _example_drive(tmp_path, 'eddy_resistance = "400 ohm"', EXAMPLES / "reagent-valve-zener-24v.toml")
    d, msgs = firmware_actuation(tmp_path, path, 24.0)
    events = [m for m in msgs if isinstance(m, Event)]
    kinds = [m.kind for m in events]
    assert EventKind.FAULT not in kinds and EventKind.PEAK_END in kinds, kinds
    on = next(m.index for m in events if m.kind == EventKind.ON)
    codes = {s.first_index + k: int(c) for s in msgs if isinstance(s, Samples) for k, c in enumerate(s.codes)}
    board = d.drive.board
    amps = board.adc.reference / 2 ** board.adc.bits / (board.sense.resistance * board.sense.gain)
    lp = loop(d.drive, 24.0, 20.0)
    step = float(lp.v_on / (lp.r_on + d.drive.coil.eddy_resistance))
    # the switch closes a few samples after the event (at the driver's next PWM period);
    # its first sample reads the whole step at once (a plain coil reads one sample's slope)
    k = next(k for k in range(on, on + 200) if codes.get(k, 0) > 0)
    assert codes[k - 1] == 0 and codes[k] * amps == pytest.approx(step, rel=0.03), (codes[k], step / amps)


@pytest.mark.parametrize("curve", [True, False], ids=["curve", "linear"])
def test_the_flux_rises_slower_by_one_plus_r_over_re(tmp_path, curve):
    """Kirchhoff's laws: dpsi/dt = (V - R i_m) R_e / (R + R_e), so every time along the
    switch-on is the plain coil's times (1 + R / R_e), with the same asymptote V / R
    (derived in coildrive/model/eddy.py; the ngspice and scipy tests check the circuit)."""
    src = EXAMPLE if curve else EXAMPLES / "reagent-valve-zener-24v.toml"
    plain = load_drive(_example_drive(tmp_path, "", src))
    for r_e in (50.0, 300.0, 5000.0):
        d = load_drive(_example_drive(tmp_path, f'eddy_resistance = "{r_e} ohm"', src))
        a, b = loop(plain, **POINT), loop(d, **POINT)
        r = float(a.r_on)
        for i1 in (0.2, 0.55, 0.9):
            t0 = float(rise_time(i1, 0.0, a.v_on, a.r_on, a.inductance))
            t1 = float(rise_time(i1, 0.0, b.v_on, b.r_on, b.inductance))
            assert t1 == pytest.approx(t0 * (1.0 + r / r_e), rel=1e-9), (r_e, i1)
