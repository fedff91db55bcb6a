"""Design speed targets, measured side by side in one run (not a timed test).

1. The closed-form corner evaluation against a per-point scipy ``solve_ivp`` loop of the
   same circuit (rise to pull-in with an event; PWM hold integrated period by period to
   steady state): target >= 100x faster at <= 0.1 % difference in pull-in time and hold
   mean current.
2. 10^6 Monte Carlo points: target < 2 s on one core (best of three runs).
3. ``coildrive design`` on an example: target < 3x the wall time of
   ``python -c "import numpy, typer"`` (median of five runs each).

Run: ``python benchmarks/bench_design.py``.
"""

from __future__ import annotations

import os
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
    # the ivp loop is given the settled temperatures; the closed form finds them as well
    d_pull = np.max(np.abs(ref[:, 0] / res.pull_in_time - 1))
    d_hold = np.max(np.abs(ref[:, 1] / res.hold.mean - 1))
    print(f"corners: {len(grid)} points; closed form {t_closed * 1e3:.2f} ms (incl. self-heating), "
          f"solve_ivp loop {t_ivp:.2f} s")
    print(f"  speed ratio {t_ivp / t_closed:,.0f}x (target >= 100x); largest difference: pull-in "
          f"{d_pull:.2e}, hold mean {d_hold:.2e} (target <= 1e-3)")


def bench_monte_carlo(drive) -> None:
    d = design(drive)
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        monte_carlo(drive, d.hold.duty, d.hold.frequency_hz, d.pull_in.peak_time_s, 1_000_000)
        times.append(time.perf_counter() - t0)
    print(f"monte carlo: 10^6 points best {min(times):.2f} s of {[round(t, 2) for t in times]} "
          f"(target < 2 s on one core; ratio to target {min(times) / 2:.2f})")


def bench_startup() -> None:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    example = str(ROOT / "examples" / "demo-valve.toml")

    def wall(cmd):
        runs = []
        for _ in range(5):
            t0 = time.perf_counter()
            subprocess.run(cmd, env=env, capture_output=True, check=False)
            runs.append(time.perf_counter() - t0)
        return statistics.median(runs)
    base = wall([sys.executable, "-c", "import numpy, typer"])
    full = wall([sys.executable, "-m", "coildrive", "design", example])
    print(f"start-up: coildrive design {full:.3f} s vs import numpy, typer {base:.3f} s: "
          f"ratio {full / base:.2f} (target < 3)")


def main() -> None:
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    drive = load_drive(ROOT / "examples" / "demo-valve.toml")
    bench_corners(drive)
    bench_monte_carlo(drive)
    bench_startup()


if __name__ == "__main__":
    main()
