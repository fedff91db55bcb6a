"""Armature model speed and accuracy, measured side by side in one run (not a timed test).

1,000 operating points of the locker-latch example (supply, coil temperature and coil
tolerances drawn at random, mechanics varied +/-20 %) go through

* the batched model (:func:`coildrive.model.armature_runs.pull_in` and ``release``: one
  vectorised Dormand-Prince integration over all points), and
* a plain per-point loop of scipy ``solve_ivp`` with stop events
  (:func:`coildrive.model.armature_sim.pull_in_reference` / ``release_reference``),
  once with DOP853 at rtol 1e-9 (the reference) and once with RK45 at the batch's own
  tolerance (a like-for-like speed comparison).

Targets: batched >= 10x faster than the per-point loop; largest seat-time difference
<= 1 %.

A second case is one actuation with a drop-out: the locker latch at 12 V, 25 degC, peak
0.0288 s, then a hold at duty 0.45, 25 kHz for 0.037 s, too weak to keep the armature
seated -- so the armature is integrated through every PWM edge, one short flight per half
period (what ``coildrive emulate`` and live tuning compute on every drop-out). It runs
through the numpy batch of one point (``armature_flight.SINGLE_POINT_SCALAR = False``, the old
path) and through the float-by-float ``fly_point`` (the new default), alternately, best
of three each. Targets: new >= 10x faster; largest difference of current, gap, velocity
and event times <= 1e-9 relative.

The same drop-out actuation again with the saturating latch's open and seated flux-linkage
curves (:func:`latch_curves_text`, as ``bench_design.py armflux``): the numpy batch of one
point with the curves' numpy law (``flux.ONE_POINT_FLOATS = False``, the old path) against
``fly_point`` with the curves' one-point law in floats (``FluxCurve._current_of_one``,
``GapCurves._state_one``); the same targets.

Run: ``python benchmarks/bench_armature.py [points]`` (``dropout`` as the argument runs
only the drop-out cases).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from coildrive.config import load_drive  # noqa: E402
from coildrive.model import armature_flight as armature  # noqa: E402
from coildrive.model import flux  # noqa: E402
from coildrive.model.armature import ArmatureParams, params_from_loop  # noqa: E402
from coildrive.model.armature_runs import pull_in, release  # noqa: E402
from coildrive.model.armature_sim import pull_in_reference, release_reference  # noqa: E402
from coildrive.model.circuit import loop  # noqa: E402
from coildrive.model.waveform import armature_actuation  # noqa: E402


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


def latch_curves_text() -> str:
    """The locker-latch example with a saturating coil's open and seated curves in place of
    its inductances (invented: the iron ``i = psi / 90 mH + 6.43e5 psi^5`` seated, plus
    the 4 mm gap's linear part open), its derived hold and drop-out currents written out."""
    latch = ROOT / "examples" / "locker-latch-12v.toml"
    psi = np.linspace(0.0, 0.1, 11)
    seated = psi / 0.090 + 6.43e5 * psi**5
    opened = seated + psi * (1 / 0.025 - 1 / 0.090)

    def row(values):
        return ", ".join(f"{x:.9g}" for x in values)

    lines = [ln for ln in latch.read_text().splitlines()
             if not ln.startswith(("inductance =", "inductance_open", "inductance_closed"))]
    text = "\n".join(lines).replace("[coil]", f"[coil]\nflux_current = [{row(opened)}]\n"
                                     f"flux_linkage = [{row(psi)}]\nseated_current = [{row(seated)}]\n"
                                     f"seated_linkage = [{row(psi)}]", 1)
    text = text.replace("\n[hold]", '\n[hold]\ncurrent = "0.3 A"', 1).replace(
        "\n[armature]", '\n[release]\ncurrent = "0.15 A"\n\n[armature]', 1)
    return text + "\n"


def dropout(repeat: int = 3) -> bool:
    """The drop-out actuation through the old and the new one-point path, with the linear
    L(x) and with the two curves; True if the targets are met."""
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        curves = Path(tmp) / "latch-curves.toml"
        curves.write_text(latch_curves_text())
        ok = True
        for what, path in (("linear L(x)", ROOT / "examples" / "locker-latch-12v.toml"),
                           ("two flux-linkage curves", curves)):
            print(f"with the {what}:")
            ok = _dropout(load_drive(path), repeat) and ok
    return ok


def _dropout(drive, repeat: int) -> bool:
    args = (drive, 12.0, 25.0, 0.0288, 0.45, 25e3, 0.037)
    best = {False: float("inf"), True: float("inf")}
    waves = {}
    try:
        for _ in range(repeat):
            for scalar in (False, True):  # alternate, so both see the same machine load
                armature.SINGLE_POINT_SCALAR = scalar
                flux.ONE_POINT_FLOATS = scalar
                t0 = time.perf_counter()
                waves[scalar] = armature_actuation(*args)
                best[scalar] = min(best[scalar], time.perf_counter() - t0)
    finally:
        armature.SINGLE_POINT_SCALAR = True
        flux.ONE_POINT_FLOATS = True
    old, new = waves[False], waves[True]
    lifted = float(new.position[(new.time > 0.0288) & (new.time < new.events["off"])].max())
    print(f"drop-out actuation (duty 0.45, 25 kHz, hold 0.037 s; lifts {lifted * 1e3:.2f} mm "
          f"during the hold, {new.time.size} samples)")
    print(f"  numpy batch of one point (old): {best[False]:.3f} s")
    print(f"  float-by-float fly_point (new): {best[True]:.3f} s")
    ratio = best[False] / best[True]
    same = old.time.size == new.time.size and old.events.keys() == new.events.keys()
    diff = np.inf
    if same:
        diff = max(float(np.max(np.abs(getattr(new, k) - getattr(old, k))) / np.max(np.abs(getattr(old, k))))
                   for k in ("time", "current", "position", "velocity"))
        diff = max([diff] + [abs(new.events[k] - old.events[k]) / abs(old.events[k])
                             for k in old.events if old.events[k]])
    print(f"  speed ratio: {ratio:.1f}x (target >= 10x)")
    print(f"  largest difference (relative to each signal's largest value; events relative): "
          f"{diff:.1e} (target <= 1e-9){'' if same else ' -- different samples or events'}")
    return ratio >= 10 and diff <= 1e-9


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
    passed = dropout() and passed
    print("targets met" if passed else "TARGETS MISSED")


if __name__ == "__main__":
    if sys.argv[1:] == ["dropout"]:
        print("targets met" if dropout() else "TARGETS MISSED")
    else:
        main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
