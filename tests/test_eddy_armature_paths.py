"""An eddy-current term with a moving armature on two switched paths: a full bridge's
mixed-decay hold (``hold.fast_fraction``: each off-time fast into the bus, then slow
through the low-side switches; the release fast) and split decay with a bypass that
opens after the final turn-off (``freewheel.bypass_lead < 0``: the release slow for the
lag, then fast).

Outside source: scipy's ``solve_ivp`` (Radau, terminal events) on the equations written
afresh below from the raw numbers: Kirchhoff's laws at the branch node (the eddy
resistance ``R_e`` across the magnetising branch, ``d psi/dt = R_e (i - i_m)``), the
freewheel path blocking where its terminal current would reverse (``R_e i_m < V_off``),
the co-energy pull ``i_m^2 |dL/dx| / 2`` of ``L(x) = L_c / (1 + beta x)`` (Fitzgerald &
Kingsley, *Electric Machinery*, ch. 3 -- chapter from memory), the spring, the load,
viscous damping and dead stops. The drop-out (unlatch), zero and open times within 1e-5.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from coildrive.model.armature import OPENED
from coildrive.model.armature_runs import late_release, release
from coildrive.model.waveform import armature_actuation
from test_bridge_armature import TEMP, V_BUS
from test_bridge_armature_mixed import FRACTION, FREQ, MixedReference, _mixed
from test_eddy_armature import BETA, DAMP, LC, MASS, R_E, STROKE, params, _open_force

RTOL = 1e-5


class Fresh:
    """One point: ``psi`` of the magnetising branch, gap ``x`` (0 seated), speed ``v``;
    ``open_force(x)`` N, ``lc`` H, ``beta`` 1/m, ``re`` ohm."""

    def __init__(self, lc, beta, stroke, mass, damping, open_force, re):
        self.lc, self.beta, self.s, self.m, self.c = lc, beta, stroke, mass, damping
        self.f_open, self.re = open_force, re

    def i_m(self, psi, x):
        return psi * (1.0 + self.beta * x) / self.lc

    def pull(self, psi):
        return 0.5 * psi * psi * self.beta / self.lc

    def terminal(self, psi, x, path):
        """``path = (on, v, r)``: on, the loop ``v`` V through ``r``; off, against ``v``."""
        on, v, r = path
        im = self.i_m(psi, x)
        if on:
            return (v + self.re * im) / (r + self.re)
        return max((self.re * im - v) / (r + self.re), 0.0)

    def run(self, segments, psi, mode, t=0.0):
        """Follow ``segments`` ``[(t_end, (on, v, r)), ...]`` from ``mode`` ("open",
        "seated" or "flying" from rest at the matching stop); return the state at the end
        and the log ``[(t, name), ...]`` (move, seat, unlatch, zero, open); the state's
        fourth entry is the terminal charge ``int i dt`` A*s from the start."""
        from scipy.integrate import solve_ivp

        y = [psi, self.s if mode == "open" else 0.0, 0.0, 0.0]   # + the charge int i dt
        log = []
        flows = False
        for t_end, path in segments:
            now = self.terminal(y[0], y[1], path) > 0
            if flows and not now:   # the new path blocks at once: the current steps to zero
                log.append((t, "zero"))
            blocked = False
            while t < t_end:
                flying = mode == "flying"

                def fun(_t, y, path=path, flying=flying):
                    i = self.terminal(y[0], y[1], path)
                    dv = (self.f_open(y[1]) - self.pull(y[0]) - self.c * y[2]) / self.m
                    return [self.re * (i - self.i_m(y[0], y[1])), y[2] if flying else 0.0,
                            dv if flying else 0.0, i]
                events, names = [], []
                if mode == "open":
                    events.append(lambda _t, y: self.pull(y[0]) - self.f_open(self.s))
                    names.append("move")
                    ups = [1]
                elif mode == "seated":
                    events.append(lambda _t, y: self.pull(y[0]) - self.f_open(0.0))
                    names.append("unlatch")
                    ups = [-1]
                else:
                    events += [lambda _t, y: y[1], lambda _t, y: self.s - y[1]]
                    names += ["seat", "open"]
                    ups = [-1, -1]
                if not path[0] and not blocked and self.terminal(y[0], y[1], path) > 0:
                    events.append(lambda _t, y, v=path[1]: self.re * self.i_m(y[0], y[1]) - v)
                    names.append("zero")
                    ups.append(-1)
                for e, up in zip(events, ups):
                    e.terminal, e.direction = True, up
                sol = solve_ivp(fun, (t, t_end), y, method="Radau", rtol=1e-11, atol=[1e-14, 1e-13, 1e-10, 1e-14],
                                events=events)
                assert sol.status in (0, 1), sol.message
                hits = [(float(ev[0]), k) for k, ev in enumerate(sol.t_events) if len(ev)]
                if not hits:
                    t, y = t_end, sol.y[:, -1]
                    break
                t, k = min(hits)
                y = list(sol.y_events[k][0])
                log.append((t, names[k]))
                blocked = blocked or names[k] == "zero"
                if names[k] in ("move", "unlatch"):
                    mode = "flying"
                elif names[k] in ("seat", "open"):
                    mode = "seated" if names[k] == "seat" else "open"
                    y[1], y[2] = (0.0 if mode == "seated" else self.s), 0.0   # dead stops
            flows = not blocked and self.terminal(y[0], y[1], path) > 0
        return y, mode, log


def _last(log, name):
    return max(t for t, n in log if n == name)


# ------------------------------------------------- split decay, the bypass late
V_SLOW, R_SLOW = 0.7, 12.6   # invented: the diode and the closed bypass


@pytest.mark.parametrize("lag", [0.2e-3, 16e-3], ids=["seated-at-lag", "lifting-in-lag"])
def test_late_bypass_release_against_radau(lag):
    """From a seated coil at 0.9 A of magnetising current, slow (0.7 V through 12.6 ohm)
    for ``lag``, then fast (the 12 V Zener-like drop through 45 ohm): unlatch, open and
    zero times of :func:`late_release` against the reference."""
    fast = params()
    slow = params(r_off=R_SLOW, v_off=V_SLOW)
    i_off = 0.9
    rb = late_release(slow, fast, i_off, lag)
    ref = Fresh(LC, BETA, STROKE, MASS, DAMP, _open_force, R_E)
    end, mode, log = ref.run([(lag, (False, V_SLOW, R_SLOW)), (1.0, (False, 12.0, 45.0))], LC * i_off, "seated")
    t_un = _last(log, "unlatch")
    assert (t_un > lag) == (lag < 1e-3), "precondition: the two branches of late_release"
    assert mode == "open" and rb.status[0] == OPENED
    assert rb.unlatch_time[0] == pytest.approx(t_un, rel=RTOL)
    assert rb.open_time[0] == pytest.approx(_last(log, "open"), rel=RTOL)
    assert rb.zero_time[0] == pytest.approx(_last(log, "zero"), rel=RTOL)
    y, _, _ = ref.run([(lag, (False, V_SLOW, R_SLOW))], LC * i_off, "seated")
    assert rb.slow_charge[0] == pytest.approx(y[3], rel=RTOL), "through the slow path"
    assert rb.charge[0] == pytest.approx(end[3], rel=RTOL), "the whole release"
    assert rb.open_time[0] > release(fast, i_off).open_time[0], "a late bypass releases later"


# ------------------------------------------- a full bridge's mixed-decay hold
def _mixed_eddy(tmp_path):
    from coildrive.config import load_drive

    _mixed(tmp_path)
    path = tmp_path / "arm.toml"
    lines = path.read_text().splitlines()
    k = next(n for n, ln in enumerate(lines) if ln.startswith("inductance_tolerance"))
    lines.insert(k + 1, f'eddy_resistance = "{R_E_BRIDGE} ohm"')
    path.write_text("\n".join(lines) + "\n")
    return path, load_drive(path)


R_E_BRIDGE = 300.0


def test_mixed_hold_and_release_against_radau(tmp_path):
    """Pull-in, 40 periods of the mixed hold (on; fast into the bus for 30 % of the
    off-time; slow through the low-side switches) and the fast release: the one-point
    run against the reference's seat, magnetising current at the final turn-off, and the
    release's unlatch (drop-out), zero and open times."""
    _, drive = _mixed_eddy(tmp_path)
    assert drive.coil.eddy_resistance == R_E_BRIDGE and drive.hold.fast_fraction == FRACTION
    raw = MixedReference(drive)   # the loop resistances and the bus from the raw numbers
    ref = Fresh(raw.lc, raw.beta, raw.s, raw.m, raw.c, raw.f_open, R_E_BRIDGE)
    peak, duty, n = 0.008, 0.45, 40
    w = armature_actuation(drive, V_BUS, TEMP, peak, duty, FREQ, n / FREQ)
    on, fast, slow = (True, V_BUS, raw.r_on), (False, raw.v_fast, raw.r_fast), (False, 0.0, raw.r_slow)
    period, t_on = 1.0 / FREQ, duty / FREQ
    t_fast = FRACTION * (period - t_on)
    hold = [(peak, on)]
    for k in range(n):
        t0 = peak + k * period
        hold.append((t0 + t_on, on))
        if k < n - 1:
            hold += [(t0 + t_on + t_fast, fast), (t0 + period, slow)]
    t_off = hold[-1][0]
    y, mode, log = ref.run(hold, 0.0, "open")
    assert mode == "seated" and _last(log, "seat") < peak, "precondition: seated in the peak"
    assert w.events["off"] == pytest.approx(t_off, rel=1e-12)
    assert w.events["seat"] == pytest.approx(_last(log, "seat"), rel=RTOL)
    k = int(np.searchsorted(w.time, t_off))
    assert w.magnetising_current[k] == pytest.approx(ref.i_m(y[0], 0.0), rel=RTOL)
    _, mode, log = ref.run([(1.0, fast)], y[0], "seated", t=t_off)
    assert mode == "open"
    for name in ("unlatch", "zero", "open"):
        assert w.events[name] == pytest.approx(_last(log, name), rel=RTOL), name


def test_design_runs_both_paths(tmp_path):
    """The drive files the checks above model run through design (exit 0, finite JSON):
    the bridge's mixed hold, and split decay with a late bypass on the locker latch."""
    path, _ = _mixed_eddy(tmp_path)
    late = tmp_path / "late.toml"
    text = (EXAMPLES / "locker-latch-12v.toml").read_text()
    assert "inductance_tolerance" in text and "[freewheel]" not in text
    late.write_text(text.replace("inductance_tolerance", 'eddy_resistance = "150 ohm"\ninductance_tolerance', 1)
                    + '\n[freewheel]\nsplit_decay = true\nbypass_lead = "-300 us"\n')
    for drive in (path, late):
        r = run_cli("design", str(drive), "--json")
        assert r.returncode == 0, r.stderr
        doc = json.loads(r.stdout)
        assert doc["armature"]["opened_corners"] > 0 and doc["release"]["time_s"] > 0
