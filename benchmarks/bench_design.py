"""Design speed and memory targets, measured side by side in one run (not a timed test).

1. The closed-form corner evaluation against two scipy references of the same circuit,
   at the 24 corners with their settled coil temperatures:
   a. what a careful engineer would write: LSODA for the rise to the pull-in current
      (an event), and a shooting method for the PWM periodic steady state -- Brent's
      root of ``P(i0) - i0`` on the one-period map ``P`` (LSODA through the on-time and
      the off-time, the diode's stop at zero current an event), rtol 1e-9 -- then the
      mean current from one more period with ``q = int i dt`` as a second state;
   b. the first reference we had: ``solve_ivp`` (RK45) period by period until the start
      current repeats.
   Target: >= 100x faster than (a) at <= 1e-6 difference in pull-in time and hold mean.
2. Monte Carlo: 10^6 points evaluated in chunks against the same points in one pass
   (the path before chunking, ``chunk=None``): >= 1.8x faster, results bit-identical;
   10^7 points (``design --samples 10000000``): peak memory (max RSS of a child process)
   under 1 GB, beside the one-pass path's.
3. Start-up: ``coildrive design examples/demo-valve.toml --json`` against
   ``python -c "import numpy, typer"``, paired: the two alternate, 15 runs each, median
   of the CPU time (user + system of the child) and of the wall time; target <= 2.5x.

Run: ``python benchmarks/bench_design.py`` (``--quick`` skips the 10^7-point runs).
"""

from __future__ import annotations

import json
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from coildrive.config import load_drive  # noqa: E402
from coildrive.design.corners import corner_grid  # noqa: E402
from coildrive.design import design  # noqa: E402
from coildrive.design.evaluate import evaluate  # noqa: E402
from coildrive.model.circuit import loop  # noqa: E402
from coildrive.design.montecarlo import monte_carlo  # noqa: E402


def ivp_point(v, r_on, r_off, v_off, ind, i_pull, duty, freq, rel=1e-10):
    """Pull-in time and steady hold mean current of one point, by solve_ivp alone."""
    from scipy.integrate import solve_ivp

    def on(t, i):
        return [(v - r_on * i[0]) / ind]

    def off(t, i):
        return [-(r_off * i[0] + v_off) / ind] if i[0] > 0 else [0.0]

    def reach(t, i):
        return i[0] - i_pull
    reach.terminal = True
    sol = solve_ivp(on, (0, 10 * ind / r_on), [0.0], events=reach, rtol=rel, atol=1e-12)
    t_pull = float(sol.t_events[0][0]) if sol.t_events[0].size else float("inf")

    def zero(t, i):
        return i[0]
    zero.terminal = True
    period = 1.0 / freq
    t_on, t_off = duty * period, (1 - duty) * period
    i0, mean, last = 0.0, 0.0, None
    for _ in range(20000):
        a = solve_ivp(on, (0, t_on), [i0], rtol=rel, atol=1e-12, dense_output=True)
        top = float(a.y[0, -1])
        b = solve_ivp(off, (0, t_off), [top], rtol=rel, atol=1e-12, events=zero, dense_output=True)
        end = 0.0 if b.t_events[0].size else float(b.y[0, -1])
        if last is not None and abs(end - last) < 1e-9 * max(top, 1e-12):
            ta = np.linspace(0, t_on, 401)
            tb = np.linspace(0, b.t[-1], 401)
            q = np.trapezoid(a.sol(ta)[0], ta) + np.trapezoid(np.maximum(b.sol(tb)[0], 0), tb)
            mean = q / period
            break
        last, i0 = end, end
    return t_pull, mean


def shooting_point(v, r_on, r_off, v_off, ind, i_pull, duty, freq, rtol=1e-9, method="LSODA"):
    """Pull-in time and steady hold mean current of one point: ``method`` (LSODA or Radau)
    for the rise with an event, and the periodic steady state by shooting (Brent's root
    of ``P(i0) - i0``, ``P`` the one-period map), the mean from ``q = int i dt``."""
    from scipy.integrate import solve_ivp
    from scipy.optimize import brentq

    atol = 1e-12

    def on(t, y):
        return [(v - r_on * y[0]) / ind, y[0]]

    def off(t, y):
        return [-(r_off * y[0] + v_off) / ind if y[0] > 0 else 0.0, max(y[0], 0.0)]

    def reach(t, y):
        return y[0] - i_pull
    reach.terminal = True

    def zero(t, y):
        return y[0]
    zero.terminal = True
    zero.direction = -1

    sol = solve_ivp(on, (0, 10 * ind / r_on), [0.0, 0.0], method=method, events=reach, rtol=rtol, atol=atol)
    t_pull = float(sol.t_events[0][0]) if sol.t_events[0].size else float("inf")
    period = 1.0 / freq
    t_on, t_off = duty * period, (1 - duty) * period

    def one_period(i0):
        a = solve_ivp(on, (0, t_on), [i0, 0.0], method=method, rtol=rtol, atol=atol)
        b = solve_ivp(off, (0, t_off), a.y[:, -1], method=method, events=zero, rtol=rtol, atol=atol)
        end = b.y[:, -1]
        return (0.0 if b.t_events[0].size else float(end[0])), float(end[1])

    top = v / r_on
    i0 = brentq(lambda x: one_period(x)[0] - x, 0.0, top, xtol=1e-12 * top, rtol=4 * sys.float_info.epsilon)
    return t_pull, one_period(i0)[1] / period


def bench_corners(drive) -> None:
    d = design(drive)
    grid = corner_grid(drive)
    args = (drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor, d.hold.duty,
            d.hold.frequency_hz, d.pull_in.peak_time_s)
    reps = 50
    t0 = time.perf_counter()
    for _ in range(reps):
        res = evaluate(*args)
    t_closed = (time.perf_counter() - t0) / reps
    lp = loop(drive, grid.supply, res.coil_temp, grid.r_factor, grid.l_factor)
    t0 = time.perf_counter()
    ref = [ivp_point(float(lp.v_on[k]), float(lp.r_on[k]), float(lp.r_off[k]), float(lp.v_off[k]),
                     float(lp.inductance[k]), drive.pull_in.current, d.hold.duty, d.hold.frequency_hz)
           for k in range(len(grid))]
    t_ivp = time.perf_counter() - t0
    ref = np.array(ref)
    t0 = time.perf_counter()
    shoot = np.array([
        shooting_point(float(lp.v_on[k]), float(lp.r_on[k]), float(lp.r_off[k]), float(lp.v_off[k]),
                       float(lp.inductance[k]), drive.pull_in.current, d.hold.duty, d.hold.frequency_hz)
        for k in range(len(grid))])
    t_shoot = time.perf_counter() - t0
    # the references are given the settled temperatures; the closed form finds them as well
    print(f"corners: {len(grid)} points; closed form {t_closed * 1e3:.2f} ms (incl. self-heating)")
    for name, r, t in (("LSODA + shooting, rtol 1e-9 (target >= 100x, <= 1e-6)", shoot, t_shoot),
                       ("RK45 period by period (the first reference)", ref, t_ivp)):
        d_pull = np.max(np.abs(r[:, 0] / res.pull_in_time - 1))
        d_hold = np.max(np.abs(r[:, 1] / res.hold.mean - 1))
        print(f"  vs {name}: {t:.2f} s, ratio {t / t_closed:,.0f}x; largest difference: pull-in "
              f"{d_pull:.2e}, hold mean {d_hold:.2e}")


def bench_monte_carlo(drive) -> None:
    d = design(drive)
    args = (drive, d.hold.duty, d.hold.frequency_hz, d.pull_in.peak_time_s, 1_000_000)
    one, chunked = [], []
    for _ in range(3):  # alternating, best of three each
        t0 = time.perf_counter()
        a = monte_carlo(*args, chunk=None)
        one.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        b = monte_carlo(*args)
        chunked.append(time.perf_counter() - t0)
    same = json.dumps(a) == json.dumps(b)
    print(f"monte carlo 10^6 points: chunked best {min(chunked):.2f} s, one pass {min(one):.2f} s: "
          f"{min(one) / min(chunked):.2f}x faster (target >= 1.8x); results bit-identical: {same}")


_MC_CHILD = """
import json, resource, sys
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.montecarlo import monte_carlo
drive = load_drive(sys.argv[1])
d = design(drive)
chunk = None if sys.argv[2] == "none" else int(sys.argv[2])
r = monte_carlo(drive, d.hold.duty, d.hold.frequency_hz, d.pull_in.peak_time_s, 10_000_000, chunk=chunk)
print(json.dumps({"rss_kib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, "result": r}))
"""


def bench_monte_carlo_memory() -> None:
    """Peak memory of 10^7 samples, chunked and in one pass, each in a child process."""
    from coildrive.design.montecarlo import CHUNK

    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    example = str(ROOT / "examples" / "demo-valve.toml")
    got = {}
    for chunk in (str(CHUNK), "none"):
        t0 = time.perf_counter()
        out = subprocess.run([sys.executable, "-c", _MC_CHILD, example, chunk], env=env,
                             capture_output=True, text=True, check=True)
        got[chunk] = (json.loads(out.stdout), time.perf_counter() - t0)
    a, b = got[str(CHUNK)][0], got["none"][0]
    print(f"monte carlo 10^7 points: peak memory chunked {a['rss_kib'] / 2**20:.2f} GiB "
          f"({got[str(CHUNK)][1]:.1f} s), one pass {b['rss_kib'] / 2**20:.2f} GiB ({got['none'][1]:.1f} s) "
          f"(target < 1 GB chunked); results bit-identical: {a['result'] == b['result']}")


def _paired(cmds: dict, runs: int, env: dict) -> tuple[dict, dict]:
    """Run the commands in turn ``runs`` times: per command, CPU (user + system of the
    child) and wall times in s."""
    cpu = {k: [] for k in cmds}
    wall = {k: [] for k in cmds}
    for _ in range(runs):
        for key, cmd in cmds.items():
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            t0 = time.perf_counter()
            subprocess.run(cmd, env=env, capture_output=True, check=False)
            wall[key].append(time.perf_counter() - t0)
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu[key].append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    return cpu, wall


def bench_startup(runs: int = 15) -> None:
    """Paired start-up: the two commands alternate; median CPU (user + system) and wall."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    example = str(ROOT / "examples" / "demo-valve.toml")
    cmds = {"base": [sys.executable, "-c", "import numpy, typer"],
            "design": [sys.executable, "-m", "coildrive", "design", example, "--json"]}
    cpu, wall = _paired(cmds, runs, env)
    for name, data in (("CPU", cpu), ("wall", wall)):
        b, f = statistics.median(data["base"]), statistics.median(data["design"])
        print(f"start-up ({name}, median of {runs} paired): coildrive design --json {f:.3f} s vs "
              f"import numpy, typer {b:.3f} s: ratio {f / b:.2f} (target <= 2.5)")


def bench_flux_design(runs: int = 5) -> None:
    """``coildrive design`` of the saturating-coil example against the same file with the
    linear coil of its small-signal inductance -- with its fixed hold, a current-mode hold
    and the closed loop -- paired: median CPU (user + system) and
    wall, against the 2 s target (CPU is the figure that a busy machine does not move)."""
    import tempfile

    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    sat = ROOT / "examples" / "saturating-valve-24v.toml"
    text = "\n".join(line for line in sat.read_text().splitlines()
                     if not line.startswith(("flux_current", "flux_linkage", '                "')))
    text = text.replace('reference_temp = "20 degC"', 'reference_temp = "20 degC"\ninductance = "121.2 mH"')
    # the fixed hold, the current-mode hold (off-time control: the board senses under the
    # switch) and the closed loop, each with the curve against the linear coil
    holds = {"": "", "a current-mode hold": 'mode = "current"\ncontrol = "off_time"\n',
             "a closed-loop hold": 'regulation = "closed_loop"\n'}
    with tempfile.TemporaryDirectory() as tmp:
        for k, (what, keys) in enumerate(holds.items()):
            linear, curve = Path(tmp) / f"linear{k}.toml", Path(tmp) / f"curve{k}.toml"
            linear.write_text(text.replace("[hold]\n", "[hold]\n" + keys, 1))
            curve.write_text(sat.read_text().replace("[hold]\n", "[hold]\n" + keys, 1))
            _design_pair("a flux-linkage curve" + (f" and {what}" if what else ""), linear, curve,
                         "the linear coil", runs, env)


def _design_pair(what: str, linear: Path, curve: Path, base: str, runs: int, env: dict) -> None:
    """``coildrive design --json`` of ``linear`` and ``curve``, paired: median CPU and wall
    of each, printed against the 2 s target."""
    cmds = {"linear": [sys.executable, "-m", "coildrive", "design", str(linear), "--json"],
            "curve": [sys.executable, "-m", "coildrive", "design", str(curve), "--json"]}
    cpu, wall = _paired(cmds, runs, env)
    for name, data in (("CPU", cpu), ("wall", wall)):
        lin, cur = statistics.median(data["linear"]), statistics.median(data["curve"])
        print(f"design with {what} ({name}, median of {runs} paired): {cur:.3f} s "
              f"(target < 2 s) vs {base} {lin:.3f} s: ratio {cur / lin:.2f}")


def bench_armature_curves_design(runs: int = 5) -> None:
    """``coildrive design`` of the locker-latch example (linear ``L(x)``) against the same
    file with a saturating coil's open and seated curves (invented: the iron
    ``i = psi / 90 mH + 6.43e5 psi^5`` seated, plus the 4 mm gap's linear part open, and
    the example's derived hold and drop-out currents written out), paired: median CPU and
    wall against the 2 s target."""
    import tempfile

    from bench_armature import latch_curves_text

    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    latch = ROOT / "examples" / "locker-latch-12v.toml"
    text = latch_curves_text()
    with tempfile.TemporaryDirectory() as tmp:
        curves = Path(tmp) / "latch-curves.toml"
        curves.write_text(text)
        _design_pair("[armature] and two flux-linkage curves", latch, curves, "the linear L(x)",
                     runs, env)


def bench_eddy_design(runs: int = 5) -> None:
    """``coildrive design`` with an eddy-current term (``eddy_resistance = 300 ohm``) against
    the same file without it, paired, for the saturating example (the orbit's Newton
    solves) and a linear one (closed forms): median CPU and wall against the 2 s target."""
    import tempfile

    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    with tempfile.TemporaryDirectory() as tmp:
        for name in ("saturating-valve-24v", "reagent-valve-zener-24v"):
            src = ROOT / "examples" / f"{name}.toml"
            text = src.read_text()
            board = text.split('board = "')[1].split('"')[0]
            text = text.replace(f'board = "{board}"', f'board = "{ROOT / "boards" / board}.toml"')
            plain, eddy = Path(tmp) / f"{name}.toml", Path(tmp) / f"{name}-eddy.toml"
            plain.write_text(text)
            eddy.write_text(text.replace("inductance_tolerance = 0.15",
                                         'inductance_tolerance = 0.15\neddy_resistance = "300 ohm"'))
            cmds = {"plain": [sys.executable, "-m", "coildrive", "design", str(plain), "--json"],
                    "eddy": [sys.executable, "-m", "coildrive", "design", str(eddy), "--json"]}
            cpu, wall = _paired(cmds, runs, env)
            for what, data in (("CPU", cpu), ("wall", wall)):
                a, b = statistics.median(data["plain"]), statistics.median(data["eddy"])
                print(f"design of {name} with an eddy term ({what}, median of {runs} paired): "
                      f"{b:.3f} s (target < 2 s) vs without {a:.3f} s: ratio {b / a:.2f}")


def bench_droop_design(runs: int = 5) -> None:
    """``coildrive design`` of the saturating example on a drooping bus (``source_resistance
    = 1 ohm``, ``capacitance = 220 uF``: the peak stepped by coildrive/model/flux_bus.py)
    against the same file on a stiff bus, paired: median CPU and wall against the 2 s
    target."""
    import tempfile

    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    src = ROOT / "examples" / "saturating-valve-24v.toml"
    text = src.read_text().replace('board = "fast-32bit-clamp"',
                                   f'board = "{ROOT / "boards" / "fast-32bit-clamp.toml"}"')
    with tempfile.TemporaryDirectory() as tmp:
        stiff, droop = Path(tmp) / "stiff.toml", Path(tmp) / "droop.toml"
        stiff.write_text(text)
        droop.write_text(text.replace('max = "28 V"', 'max = "28 V"\nsource_resistance = "1 ohm"\n'
                                      'capacitance = "220 uF"', 1))
        _design_pair("a flux-linkage curve on a drooping bus", stiff, droop, "the stiff bus", runs, env)


def bench_examples(runs: int = 3) -> None:
    """``coildrive design --json`` of every bundled example (each with its own board; a
    system file through ``design`` too), paired with ``import numpy, typer`` (the floor
    every run pays): median CPU and wall of each, against the 2 s target and as a ratio
    to the floor."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    examples = sorted((ROOT / "examples").rglob("*.toml"))
    cmds = {"base": [sys.executable, "-c", "import numpy, typer"]}
    cmds.update({str(p.relative_to(ROOT / "examples")): [sys.executable, "-m", "coildrive", "design",
                                                         str(p), "--json"] for p in examples})
    cpu, wall = _paired(cmds, runs, env)
    b_cpu, b_wall = statistics.median(cpu["base"]), statistics.median(wall["base"])
    print(f"design --json of every example (median of {runs} paired; import numpy, typer: "
          f"{b_cpu:.3f} s CPU, {b_wall:.3f} s wall):")
    worst = 0.0
    for name in cmds:
        if name == "base":
            continue
        c, w = statistics.median(cpu[name]), statistics.median(wall[name])
        worst = max(worst, c)
        print(f"  {name:45s} {c:.3f} s CPU ({c / b_cpu:.1f}x the floor), {w:.3f} s wall")
    print(f"  slowest {worst:.3f} s CPU (target < 2 s: {'ok' if worst < 2.0 else 'MISSED'})")


def main() -> None:
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    if "examples" in sys.argv:
        bench_examples()
        return
    if "droop" in sys.argv:
        bench_droop_design()
        return
    if "flux" in sys.argv:
        bench_flux_design()
        return
    if "eddy" in sys.argv:
        bench_eddy_design()
    if "armflux" in sys.argv:
        bench_armature_curves_design()
        return
    drive = load_drive(ROOT / "examples" / "demo-valve.toml")
    bench_corners(drive)
    bench_monte_carlo(drive)
    if "--quick" not in sys.argv:
        bench_monte_carlo_memory()
    bench_startup()
    bench_flux_design()
    bench_examples()


if __name__ == "__main__":
    main()
