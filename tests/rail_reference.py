"""The rail's current bound written afresh from docs/design-method.md ("Several channels")
for the system tests: a branch's tail after its peak, and the dense sweep of the
staggered total at every supply where the readable branches change."""

from __future__ import annotations

import numpy as np


def linear_tail(t, b):
    """A branch's tail (A) ``t`` s after switch-on: the hold's top plus each part's excess
    decaying from the end of the first PWM period at its slowest rate; a closed loop's never
    above ``tail_cap_a`` (its clamp's orbit top, or two periods' rise from the peak's end)."""
    age = np.maximum(np.asarray(t, float) - b["peak_s"] - b["pwm_period_s"], 0)
    tail = b["hold_top_a"] + np.max([e * np.exp(-age * b["slow_resistance_ohm"] / l)
                                     for e, l in zip(b["excess_a"], b["tail_inductance_h"])], axis=0)
    return np.minimum(tail, b.get("tail_cap_a", np.inf))


def rail_worst(chans, branch, points: int = 100_000) -> float:
    """The highest rail total (A) over ``points`` instants up to 20 ms past the last peak:
    at each supply where the readable branches change (each range's ends and the midpoints
    between them), the sum over the channels (``design --json``'s, started at their
    ``offset_s``) of their largest readable ``branch(t, b)``."""
    t = np.linspace(0, max(c["offset_s"] + c["bound"]["peak_s"] for c in chans) + 0.02, points)
    rows = [np.array([branch(t - c["offset_s"], b) for b in c["bound"]["branches"]]) for c in chans]
    edges = sorted({x for c in chans for b in c["bound"]["branches"] for x in (b["supply_low_v"], b["supply_v"])})
    worst = 0.0
    for v in edges + [0.5 * (a + b) for a, b in zip(edges[:-1], edges[1:])]:
        total = sum(r[[b["supply_low_v"] <= v <= b["supply_v"] for b in c["bound"]["branches"]]].max(axis=0)
                    for r, c in zip(rows, chans))
        worst = max(worst, float(np.max(total)))
    return worst


def manifold_copy(folder, old: str = "", new: str = "", extra: str = ""):
    """The manifold example copied into ``folder`` with its purge valve's drive file changed
    (``old`` replaced by ``new``, ``extra`` appended); returns the system file's path."""
    import shutil

    from conftest import EXAMPLES

    for f in (EXAMPLES / "manifold").glob("*.toml"):
        shutil.copy(f, folder / f.name)
    purge = folder / "purge-valve-24v.toml"
    text = purge.read_text()
    purge.write_text((text.replace(old, new) if old else text) + extra)
    return folder / "manifold-system.toml"


def peaks_droop_ngspice(tmp_path, system, board, name: str) -> float:
    """ngspice's lowest bus (V) with every channel of ``system`` (``design --json``)
    switched on together behind its rail's ``R_s`` and ``C`` at the lowest supply, up to
    the first peak's end: each coil cold (ambient.min), R and L at their low tolerance
    ends, its switch loop (two switches on a full bridge) and sense resistor in series,
    its inductance shunted by ``coil.eddy_resistance`` when it has one."""
    from ngspice_run import OPTIONS, run

    from coildrive.config import load_drive

    rail = system["rails"][0]
    v_s = rail["supply_v"]
    lines = [f"* {name}: the channels on one bus", f"VS src 0 DC {v_s!r}",
             f"RS src bus {rail['source_resistance_ohm']!r}", f"C1 bus 0 {rail['capacitance_f']!r} IC={v_s!r}"]
    ends = []
    for k, ch in enumerate(system["channels"]):
        drv = load_drive(ch["drive_file"], board)
        c = drv.coil
        switches = 2 if drv.switch.topology == "full_bridge" else 1
        r = c.resistance * (1 + 0.00393 * (drv.ambient.min - c.reference_temp)) * (1 - c.resistance_tolerance) \
            + switches * drv.switch.on_resistance + drv.board.sense.resistance     # copper: IEC 60028
        lines += [f"R{k} bus a{k} {r!r}", f"L{k} a{k} 0 {c.inductance * (1 - c.inductance_tolerance)!r} IC=0"]
        if c.eddy_resistance:
            lines.append(f"RE{k} a{k} 0 {c.eddy_resistance!r}")
        ends.append(ch["design"]["pull_in"]["peak_ticks"] / drv.board.tick.rate)
    t_end = min(ends)
    step = t_end / 20000
    lines += [OPTIONS, f".tran {step!r} {t_end!r} 0 {step!r} UIC", ".meas tran vlow MIN v(bus)", ".end", ""]
    return run(tmp_path, name, "\n".join(lines))["vlow"]


def assert_staggered_within_limit(system, branch) -> float:
    """The dense sweep (:func:`rail_worst`) of ``system``'s rail with ``branch``: never
    above the limit, never above the design's own bound, with a stagger; the worst (A)."""
    worst = rail_worst(system["channels"], branch)
    assert worst <= system["current_limit_a"], worst
    assert system["rails"][0]["peak_current_staggered_a"] >= worst - 1e-12
    assert system["stagger_ticks"] > 0
    return worst


def firmware_lookup(d, drv, v: float) -> tuple[float, float]:
    """``(peak s, duty)`` the firmware looks up in a channel's design JSON ``d`` at supply
    ``v`` V (the nominal reading, truncated to an ADC code)."""
    b = drv.board
    code = np.floor(v / b.supply_sense.divider / (b.adc.reference / 2**b.adc.bits))
    pk = d.get("peak_table") or {"adc_codes": [0], "peak_ticks": [d["pull_in"]["peak_ticks"]]}
    dt = d["duty_table"]
    k = max(0, int(np.searchsorted(pk["adc_codes"], code, side="right")) - 1)
    j = max(0, int(np.searchsorted(dt["adc_codes"], code, side="right")) - 1)
    return pk["peak_ticks"][k] / b.tick.rate, dt["compare_ticks"][j] / d["timer"]["period_ticks"]


def readable(ch, v: float) -> list[dict]:
    """A channel's branches whose supply range holds ``v`` V."""
    return [b for b in ch["bound"]["branches"] if b["supply_low_v"] <= v <= b["supply_v"]]


def supply_corners(ch, drv):
    """``(supply V, peak s, duty, readable branches)`` of a channel (``design --json``'s,
    its drive ``drv``) at the lowest supply, just below a middle peak-table step and the
    highest: what the firmware looks up there (:func:`firmware_lookup`)."""
    d = ch["design"]
    lsb = drv.board.adc.reference / 2**drv.board.adc.bits * drv.board.supply_sense.divider
    codes = d["peak_table"]["adc_codes"]
    for v in (drv.supply.min, codes[len(codes) // 2] * lsb - 1e-6, drv.supply.max):
        yield (v, *firmware_lookup(d, drv, v), readable(ch, v))


def simulate_csv(system_file, folder, hold_time: float, supply: float = 28.0) -> np.ndarray:
    """``simulate SYSTEM.toml`` at ``supply`` V, the coils at 0 degC, ``hold_time`` s of
    hold (typer's CliRunner, the CSV into ``folder``): the CSV's rows (A, s, 0/1)."""
    from typer.testing import CliRunner

    from coildrive.cli import app

    out = folder / "sim.csv"
    r = CliRunner().invoke(app, ["simulate", str(system_file), "--supply", f"{supply:g}", "--coil-temp", "0",
                                 "--hold-time", f"{hold_time:g}", "--csv", str(out)])
    assert r.exit_code == 0, r.output
    return np.loadtxt(out, delimiter=",", skiprows=1)


def comparator_run(rhs, sensed, cm, reading, peak, cycles, y0=0.0, n=40):
    """One channel written afresh under its comparator, by scipy's ``solve_ivp`` (LSODA,
    events at the thresholds): on for ``peak`` s from ``y0``, then ``cycles`` hold cycles
    -- on until the reading (``reading`` x ``sensed(on, y)``, the true current times the
    sense chain's factor) reaches the upper (peak) threshold and the design's
    ``sense_delay`` past it; hysteretic, off until it falls to the lower and the delay past
    it, else off for the fixed off time (``cm``: the design's ``current_mode``). ``rhs(t, y,
    on)`` is the state's rate. Returns ``(t, state, on, (t_end, y_end, run))``: ``n`` samples
    a segment, and ``run(t0, y, on, t_max, level=None, stop=None)`` to go on from the end
    (returns the end time and state; ``run.samples()`` every segment's samples so far)."""
    from scipy.integrate import solve_ivp

    ts, ys, ons = [], [], []

    def run(t0, y, on, t_max, level=None, stop=None):
        """From ``t0`` with state ``y`` for at most ``t_max`` s, or until the reading crosses
        ``level`` (up while on, down while off), or ``stop(y)`` reaches zero; returns the
        end time and state."""
        def ev(_t, s, _on):
            return reading * sensed(on, s[0]) - level if stop is None else stop(s[0])
        ev.terminal, ev.direction = True, (1 if on and stop is None else -1)
        if level is not None and ev(t0, [y], on) * ev.direction >= 0:
            return t0, y                                   # already past: trips at once
        sol = solve_ivp(rhs, (t0, t0 + t_max), [y], method="LSODA", rtol=1e-10, atol=1e-13, args=(on,),
                        events=None if level is None and stop is None else ev, dense_output=True)
        tt = np.linspace(t0, sol.t[-1], n)
        ts.append(tt)
        ys.append(sol.sol(tt)[0])
        ons.append(np.full(n, on))
        return sol.t[-1], float(sol.y[0, -1])

    t, y = run(0.0, y0, True, peak) if peak > 0 else (0.0, y0)
    lo, hi, delay = (cm["lower_a"], cm["upper_a"], cm["sense_delay_s"]) if cycles else (0, 0, 0)
    for _ in range(cycles):
        t, y = run(t, y, True, 1.0, hi)             # on to the upper threshold (read)
        t, y = run(t, y, True, delay)               # and the delay past it
        if cm["control"] == "hysteretic":
            t, y = run(t, y, False, 1.0, lo)        # off to the lower
            t, y = run(t, y, False, delay)
        else:
            t, y = run(t, y, False, cm["off_time_s"])
    run.samples = lambda: (np.concatenate(ts), np.concatenate(ys), np.concatenate(ons))
    return (*run.samples(), (t, y, run))


def simulated_last_channel(system, folder, tmp_path, branch, hold_time: float, settle: float,
                           coil: bool = False) -> np.ndarray:
    """``simulate SYSTEM.toml`` (:func:`simulate_csv`, 28 V, cold, nominal coil) of the
    system file ``folder``/sys.toml (``design --json``'s ``system``): its last channel's draw
    (its current while its switch is on; with ``coil`` its coil current) never above its one
    branch ``branch(t, b)`` on the CSV's grid and above 0.55 A at its top, its hold switching
    on and off from ``settle`` s after the peak on; returns the CSV."""
    csv = simulate_csv(folder / "sys.toml", tmp_path, hold_time)
    ch = system["channels"][-1]
    (b,) = ch["bound"]["branches"]
    t = csv[:, 0] - ch["offset_s"]
    draw = csv[:, 7] if coil else csv[:, 7] * csv[:, 13]
    assert draw.max() > 0.55 and np.all(draw <= branch(t, b) + 1e-9), float(np.max(draw - branch(t, b)))
    late = t > b["peak_s"] + settle
    assert np.any(csv[late, 13] == 0) and np.any(csv[late, 13] == 1)
    return csv


def header_holds(tmp_path, text: str, condition: str) -> None:
    """The board header ``text`` compiled by gcc (-std=c99 -Wall -Wextra -Werror
    -pedantic) into a program returning 0 where the C ``condition`` on its constants holds,
    run: it must return 0."""
    import subprocess

    from conftest import require_tool

    gcc = require_tool("gcc")
    (tmp_path / "board.h").write_text(text)
    (tmp_path / "m.c").write_text(f'#include "board.h"\nint main(void) {{ return {condition} ? 0 : 1; }}\n')
    p = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-I", str(tmp_path),
                        str(tmp_path / "m.c"), "-o", str(tmp_path / "m")], capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    assert subprocess.run([str(tmp_path / "m")]).returncode == 0
