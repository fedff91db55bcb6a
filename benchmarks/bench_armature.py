"""Armature model speed and accuracy, measured side by side in one run (not a timed test).

1,000 operating points of the locker-latch example (supply, coil temperature and coil
tolerances drawn at random, mechanics varied +/-20 %) go through

* the batched model (:func:`coildrive.model.armature.pull_in` and ``release``: one
  vectorised Dormand-Prince integration over all points), and
* a plain per-point loop of scipy ``solve_ivp`` with stop events
  (:func:`coildrive.model.armature_sim.pull_in_reference` / ``release_reference``),
  once with DOP853 at rtol 1e-9 (the reference) and once with RK45 at the batch's own
  tolerance (a like-for-like speed comparison).

Targets: batched >= 10x faster than the per-point loop; largest seat-time difference
<= 1 %. Run: ``python benchmarks/bench_armature.py [points]``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from coildrive.config import load_drive  # noqa: E402
from coildrive.model.armature import ArmatureParams, params_from_loop, pull_in, release  # noqa: E402
from coildrive.model.armature_sim import pull_in_reference, release_reference  # noqa: E402
from coildrive.model.circuit import loop  # noqa: E402


def points(n: int, seed: int = 7) -> tuple[ArmatureParams, np.ndarray]:
    """``n`` operating points and the current each release starts from (A)."""
    drive = load_drive(ROOT / "examples" / "locker-latch-12v.toml")
    rng = np.random.default_rng(seed)
    s, c = drive.supply, drive.coil
    lp = loop(drive, rng.uniform(s.min, s.max, n), rng.uniform(-20, 100, n),
              1 + rng.uniform(-c.resistance_tolerance, c.resistance_tolerance, n),
              1 + rng.uniform(-c.inductance_tolerance, c.inductance_tolerance, n))
    p = params_from_loop(drive.armature, lp, lp.inductance / drive.armature.inductance_closed)
    vary = {k: getattr(p, k) * rng.uniform(0.8, 1.2, n) for k in ("mass", "preload", "rate", "load", "damping")}
    p = ArmatureParams.make(**{**{f: getattr(p, f) for f in p.__dataclass_fields__}, **vary})
    i_off = np.minimum(p.v_on / p.r_on, 1.3 * p.stay_current)
    return p, i_off


def main(n: int = 1000) -> None:
    p, i_off = points(n)
    pull_in(p.take(slice(0, 8)))  # warm-up
    t0 = time.perf_counter()
    bp = pull_in(p)
    br = release(p, i_off)
    t_batch = time.perf_counter() - t0
    print(f"batched model: {n} points (pull-in + release) in {t_batch:.3f} s")

    results = {}
    for method, rtol in (("DOP853", 1e-9), ("RK45", 1e-7)):
        seat = np.empty(n)
        opened = np.empty(n)
        t0 = time.perf_counter()
        for k in range(n):
            q = p.take(k)
            seat[k] = pull_in_reference(q, method, rtol=rtol, points=2).seat_time
            opened[k] = release_reference(q, float(i_off[k]), method, rtol=rtol, points=2).open_time
        results[method] = (time.perf_counter() - t0, seat, opened)
        print(f"per-point solve_ivp loop ({method}, rtol {rtol:g}): {results[method][0]:.3f} s")

    t_ref, seat, opened = results["DOP853"]
    ok = np.isfinite(seat)
    d_seat = np.max(np.abs(bp.seat_time[ok] / seat[ok] - 1))
    d_open = np.max(np.abs(br.open_time / opened - 1))
    same = np.array_equal(np.isfinite(bp.seat_time), ok)
    print(f"points seated: {ok.sum()} of {n} (batched and reference agree on which: {same})")
    for method, (t_loop, _, _) in results.items():
        print(f"speed ratio vs {method} loop: {t_loop / t_batch:.1f}x (target >= 10x)")
    print(f"largest seat-time difference vs DOP853: {d_seat:.2e} (target <= 1e-2)")
    print(f"largest release-open-time difference vs DOP853: {d_open:.2e}")
    passed = (min(r[0] for r in results.values()) / t_batch >= 10) and d_seat <= 1e-2 and same
    print("targets met" if passed else "TARGETS MISSED")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
