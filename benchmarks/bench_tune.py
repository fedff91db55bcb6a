"""Hold-tuning speed target, measured (not a timed test).

Target: 10^5 sweep settings x every corner (24 for the demo valve) in under 1 s, for
the whole offline sweep of :func:`coildrive.tune.sweep.tune` -- realisable frequencies, duty
search at the corners with self-heating, evaluation of every setting at every corner,
constraints and ranking (best of three runs, one process).

Also: the duty-for-mean inversion (safeguarded secant) against the 44-step bisection it
replaced, on the same 10^6 operating points: speed ratio and largest duty difference.

A third case, ``curve``: the offline tune of a saturating coil (the flux-linkage curve of
examples/saturating-valve-24v.toml, and the same file on the full-bridge board with mixed
decay, ``hold.fast_fraction = 0.3``), whose supply table is kept monotone by
:func:`coildrive.design.regulation._monotone`: the batched search (every entry at once,
then the next ``LOOK_AHEAD`` counts at once) against the serial one-count-at-a-time
bisection it replaced (``LOOK_AHEAD = 0``), alternately, best of three each, CPU time;
the two sweeps' JSON must be equal (the run's own ``seconds`` aside).

Run: ``python benchmarks/bench_tune.py`` (``curve`` as the argument runs only the third
case).
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from coildrive.config import load_drive  # noqa: E402
from coildrive.model.pwm import duty_for_mean, duty_for_mean_bisect, pwm_steady_state  # noqa: E402
from coildrive.tune.sweep import TuneOptions, tune  # noqa: E402

TARGET_S = 1.0


def bench_sweep() -> None:
    drive = load_drive(ROOT / "examples" / "demo-valve.toml")
    # 1..100 kHz on the 84 MHz, 16-bit timer: the 102 whole-Hz frequencies (divisors of
    # 84 MHz) x 1000 levels 0.1 % apart = 102 000 settings.
    options = TuneOptions(min_frequency=1e3, levels=1000, level_step=0.001)
    tune(drive, options)  # warm-up (imports, caches)
    runs = []
    for _ in range(3):
        t0 = time.perf_counter()
        r = tune(drive, options)
        runs.append(time.perf_counter() - t0)
    evaluated = r.frequencies * r.levels
    best = min(runs)
    print(f"tune sweep: {r.frequencies} frequencies x {r.levels} levels = {evaluated:,} settings "
          f"({r.points:,} after merging equal compare values) x {len(r.grid)} corners = "
          f"{evaluated * len(r.grid):,} points")
    print(f"  best {best:.3f} s of {[round(t, 3) for t in runs]} (target < {TARGET_S:g} s; "
          f"ratio to target {best / TARGET_S:.2f}); {evaluated / best:,.0f} settings/s")
    rec = r.recommendation
    print(f"  recommendation: {rec.frequency_hz:.0f} Hz, compare {rec.compare_ticks}/{rec.period_ticks}, "
          f"drawn from the supply {rec.total_power_w:.4g} W at the worst corner")


def bench_inversion(n: int = 1_000_000) -> None:
    rng = np.random.default_rng(7)
    f = rng.uniform(2e4, 1e5, n)
    r = rng.uniform(18, 30, n)
    v = rng.uniform(20, 28, n)
    voff = rng.choice([0.9, 33.9], n)
    ind = rng.uniform(0.04, 0.08, n)
    full = pwm_steady_state(1.0, f, v, r + 0.135, r + 0.1, voff, ind).mean
    target = full * rng.uniform(0.05, 0.95, n)
    args = (target, f, v, r + 0.135, r + 0.1, voff, ind)
    t0 = time.perf_counter()
    new = duty_for_mean(*args)
    t_new = time.perf_counter() - t0
    t0 = time.perf_counter()
    old = duty_for_mean_bisect(*args)
    t_old = time.perf_counter() - t0
    print(f"duty inversion, {n:,} points: secant {t_new:.3f} s, bisection {t_old:.3f} s "
          f"(x{t_old / t_new:.1f}); largest duty difference {np.nanmax(np.abs(new - old)):.2e} "
          "(target <= 1e-9)")


def bench_curve(runs: int = 3) -> None:
    import json
    import tempfile

    from coildrive.design import regulation
    from coildrive.tune.report import tune_dict

    valve = ROOT / "examples" / "saturating-valve-24v.toml"
    with tempfile.TemporaryDirectory() as tmp:
        mixed = Path(tmp) / "saturating-valve-mixed.toml"
        mixed.write_text(valve.read_text().replace('board = "fast-32bit-clamp"',
                                                   'board = "bridge-m32-fast"', 1)
                         .replace("[hold]\n", "[hold]\nfast_fraction = 0.3\n", 1))
        for name, path in (("saturating valve", valve), ("mixed decay on the bridge", mixed)):
            drive = load_drive(path)
            best = {16: float("inf"), 0: float("inf")}
            out = {}
            try:
                for _ in range(runs):
                    for ahead in (16, 0):   # alternate: both see the same machine load
                        regulation.LOOK_AHEAD = ahead
                        t0 = time.process_time()
                        r = tune(drive, TuneOptions())
                        best[ahead] = min(best[ahead], time.process_time() - t0)
                        doc = json.loads(json.dumps(tune_dict(r)))
                        doc["sweep"].pop("seconds", None)
                        out[ahead] = doc
            finally:
                regulation.LOOK_AHEAD = 16
            print(f"tune of the {name}: batched {best[16]:.2f} s CPU, serial {best[0]:.2f} s "
                  f"(x{best[0] / best[16]:.1f}); JSON {'equal' if out[16] == out[0] else 'DIFFERENT'}")


def main() -> None:
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    if sys.argv[1:] == ["curve"]:
        bench_curve()
        return
    bench_sweep()
    bench_inversion()
    bench_curve()


if __name__ == "__main__":
    main()
