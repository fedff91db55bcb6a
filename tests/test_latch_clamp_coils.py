"""A latching coil with a clamp across each winding's switch on the drooping bus, with a
flux-linkage curve or an eddy-current term (the linear coil's: tests/test_latch_clamp.py):
after a pulse the current flows on from the bulk capacitor through the winding into the
clamp, drawing the bus down further, and the clamp blocks where the (terminal) current
stops. The two-winding relay (examples/latching/bistable-relay-reset-winding-24v.toml, its
own 47 ohm and 4700 uF) with an invented 36 V clamp: its set winding on the saturating
curve of tests/test_latch_flux.py (``psi = 45 mWb tanh(i / 30 mA) + 0.5 H i``), or both
windings with an invented 3 kohm eddy resistance across the inductance.

Reference: scipy's ``solve_ivp`` (Radau, rtol 1e-10) of the pulse from a full capacitor
and the clamped decay, written afresh from the file's numbers (Kirchhoff's laws at the
coil's node; the curve's ``L_d`` the derivative of scipy's own ``PchipInterpolator``
through the table)::

    on:    L_d(i_m) di_m/dt = e,   e = v - R_on i_t           C dv/dt = (V_s - v)/R_s - i_t
    clamp: L_d(i_m) di_m/dt = e,   e = v - V_clamp - R_off i_t   (while i_t > 0)

with ``i_t = i_m`` without the eddy term, ``i_t = i_m + e/R_e`` with it (solved for ``e``):
at every corner of the design's envelope the lowest bus over the pulse and its decay (the
design's ``droop_v``) and the time to the current's zero (``decay_time_s``), the worst of
them, within 1e-6 (measured 3e-10 and 3e-9 with the curve, 2e-11 and 1e-14 with the eddy
term); simulate's clamped decay at 24 V against the same reference within 1e-6 (measured
2e-8 and 5e-11).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.interpolate import PchipInterpolator

from conftest import EXAMPLES, run_cli
from test_latch_clamp import ALPHA, V_CLAMP, check_envelope, envelope_runs
from test_latch_flux import CURVE_I, RELAY, _psi, curve_drive, device_reports

from coildrive.config import load_drive
from coildrive.design.latch import design_latch

CLAMP = f'\n[switch]\nmax_voltage = "60 V"\n\n[freewheel]\ntype = "clamp"\nclamp_voltage = "{V_CLAMP:g} V"\n'
CURVE = dict(flux=0.045, knee=0.03, air=0.5)
R_E = 3000.0


def _drive(tmp_path, kind: str):
    if kind == "curve":
        return curve_drive(tmp_path, RELAY, 'inductance = "0.9 H"\n', extra=CLAMP, **CURVE)
    text = RELAY.read_text().replace('board = "tiny-8bit-diode"',
                                     f'board = "{EXAMPLES.parent / "boards" / "tiny-8bit-diode"}.toml"')
    assert text.count('inductance_tolerance = 0.2\n') == 2
    text = text.replace('inductance_tolerance = 0.2\n', f'inductance_tolerance = 0.2\neddy_resistance = "{R_E:g} ohm"\n')
    path = tmp_path / "eddy-relay.toml"
    path.write_text(text + CLAMP)
    return path


def reference(drive, coil, kind, v, temp, rf, lf, t_pulse):
    """The set winding's pulse of ``t_pulse`` s from a full capacitor at ``v`` V and its
    clamped decay (module docstring): ``(lowest bus V, time to zero s, the decay's solution,
    its terminal current of the state)``."""
    b, s = drive.board, drive.supply
    r_coil = coil.resistance * (1 + ALPHA * (temp - coil.reference_temp)) * rf
    r_on = r_coil + drive.switch.on_resistance + b.sense.resistance
    r_off = r_coil + (b.sense.resistance if b.sense.position == "coil" else 0.0)
    r_s, c = s.source_resistance, s.capacitance
    if kind == "curve":
        ld_ = PchipInterpolator(CURVE_I, _psi(CURVE_I, **CURVE)).derivative()

        def ld(i):
            return lf * float(ld_(max(i, 0.0)))
    else:
        def ld(i):
            return coil.inductance * lf

    def node(i_m, drive_v, r):
        """``(e, i_t)``: the branch voltage and the terminal current through ``r`` from
        ``drive_v`` (Kirchhoff; with R_e across the branch, ``i_t = i_m + e/R_e``)."""
        if kind == "curve":
            return drive_v - r * i_m, i_m
        i_t = (drive_v + R_E * i_m) / (r + R_E)
        return drive_v - r * i_t, i_t

    def on(t, y):
        e, i_t = node(y[0], y[1], r_on)
        return [e / ld(y[0]), ((v - y[1]) / r_s - i_t) / c]

    def clamp(t, y):
        e, i_t = node(y[0], y[1] - V_CLAMP, r_off)
        return [e / ld(y[0]), ((v - y[1]) / r_s - i_t) / c]

    def zero(t, y):
        return node(y[0], y[1] - V_CLAMP, r_off)[1]
    zero.terminal, zero.direction = True, -1
    opts = dict(method="Radau", rtol=1e-10, atol=1e-13, dense_output=True)
    a = solve_ivp(on, (0, t_pulse), [0.0, v], **opts)
    d = solve_ivp(clamp, (0, 10.0), a.y[:, -1], events=zero, **opts)
    t_zero = float(d.t_events[0][0])
    low = min(a.sol(np.linspace(0, t_pulse, 4001))[1].min(), d.sol(np.linspace(0, t_zero, 4001))[1].min())
    return low, t_zero, d, (lambda y: node(y[0], y[1] - V_CLAMP, r_off)[1])


@pytest.mark.parametrize("kind", ["curve", "eddy"])
def test_the_clamped_decay_on_the_drooping_bus_against_solve_ivp(tmp_path, kind):
    """Designed (was refused): the set pulse's droop and time to zero at the envelope's worst
    against solve_ivp over its 16 corners within 1e-6; simulate's decay at 24 V (its
    terminal current) within 1e-6 of the reference's; the model's virtual device passes
    ``check``, and with the curve a coil 40 % over its resistance fails it (plumbing)."""
    path = _drive(tmp_path, kind)
    drive = load_drive(path)
    d = design_latch(drive)
    assert d.ok, [(c.name, c.detail) for c in d.checks if not c.ok]
    coil = drive.coil
    p = d.latch.pulses[0]
    assert p.name == "set"
    # scipy solve_ivp at the 16 corners, the worst against the design's, within 1e-6
    check_envelope(p, envelope_runs(drive, coil, lambda v, t, r, l_: reference(drive, coil, kind, v, t, r, l_,
                                                                                p.time_s)))
    # simulate's trace of the set pulse's clamped decay against the same reference
    csv = tmp_path / "s.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "20", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(csv, delimiter=",", names=True)
    _, t_zero, off, terminal = reference(drive, coil, kind, 24.0, 20.0, 1.0, 1.0, p.time_s)
    kk = (data["time_s"] > p.time_s) & (data["time_s"] < p.time_s + 0.9 * t_zero)
    assert kk.sum() > 50
    want = np.array([terminal(y) for y in off.sol(data["time_s"][kk] - p.time_s).T])
    assert np.allclose(data["current_a"][kk], want, rtol=1e-6, atol=1e-9)
    assert np.allclose(data["switch_voltage_v"][kk], V_CLAMP), "the clamp holds the switch"
    (_, good), (_, weak) = device_reports(d, tmp_path, 24.0, 20.0, given=True)
    assert good.ok, [(i.name, i.detail) for i in good.items]
    if kind == "curve":   # (with the eddy term the weak coil's end current is 19 % low, inside
        # the band the 8-bit board's step widens it to: check cannot tell there)
        assert not weak.ok, [(i.name, i.detail) for i in weak.items]
