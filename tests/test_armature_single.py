"""The one-point integrator (``armature_flight.fly_point``) against the numpy batch.

A batch of one point is integrated on Python floats (numpy's per-call overhead on
1-element arrays made a drop-out actuation take seconds); it is the same algorithm, so it
must give the batch's numbers. Two ways to get the batch's numbers for one point:

* put the point into a batch of two: every numpy operation of ``fly`` is element-wise
  and every point has its own step control, so point 0 of the pair is what a numpy batch
  of one gives;
* ``armature_flight.SINGLE_POINT_SCALAR = False`` (monkeypatched) forces the numpy batch even
  for one point -- the only way through ``simulate`` and ``armature_actuation``.

Tolerances: 1e-9 relative on every figure (the explicit Dormand-Prince path is in fact
bit-for-bit equal here; the Rosenbrock path solves its 3 x 3 system by its own
elimination rather than LAPACK, so it differs by rounding, ~1e-11).

Outside reference: scipy's ``solve_ivp`` DOP853 (a general-purpose ODE solver) through
the same state machine, on a drop-out actuation with bounces.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from coildrive.config import load_drive
from coildrive.model import armature, armature_flight, flux
from coildrive.model.armature import SEATED, ArmatureParams
from coildrive.model.armature_flight import OnePoint, fly, fly_point
from coildrive.model.armature_runs import pull_in, release
from coildrive.model.waveform import armature_actuation

from test_armature_model import latch

ROOT = Path(__file__).resolve().parent.parent
RTOL = 1e-9


def pair(p: ArmatureParams, other: ArmatureParams) -> ArmatureParams:
    """``p`` as point 0 of a two-point batch (point 1: ``other``)."""
    return ArmatureParams.make(**{f: np.concatenate([getattr(p, f), getattr(other, f)])
                                  for f in p.arrays})


def assert_same(single, batch, what: str) -> None:
    """Every field of a PullInBatch/ReleaseBatch of one point equals point 0 of ``batch``."""
    for f in single.__dataclass_fields__:
        a = np.atleast_1d(np.asarray(getattr(single, f), float))
        b = np.atleast_1d(np.asarray(getattr(batch, f), float))[:a.size]
        np.testing.assert_array_equal(np.isfinite(a), np.isfinite(b), err_msg=f"{what}: {f}")
        fin = np.isfinite(a)
        np.testing.assert_allclose(a[fin], b[fin], rtol=RTOL, atol=0, err_msg=f"{what}: {f}")


CASES = {
    "latch": dict(),                                       # seats dead
    "bouncing": dict(restitution=0.6),                      # bounces on the seat
    "weak supply": dict(v_on=7.0),                         # slow pull-in
    "stiff": dict(damping=400.0),                          # Rosenbrock pair
    "stiff bouncing": dict(damping=400.0, restitution=0.5),
}


@pytest.mark.parametrize("case", CASES)
def test_one_point_pull_in_and_release_equal_the_batch(case):
    p = latch(**CASES[case])
    # the partner shares the stiffness class so that fly_mixed runs the pair in one batch
    other = latch(**{**CASES[case], "mass": 0.03})
    both = pair(p, other)
    # peak_time inside the motion: exercises the query (state at a time) and the
    # running-peak tracking of the current
    single_pin, batch_pin = pull_in(p, peak_time=0.008), pull_in(both, peak_time=0.008)
    assert single_pin.status[0] == SEATED
    assert_same(single_pin, batch_pin, f"{case} pull-in")
    assert np.isfinite(single_pin.peak_end_current[0])
    if CASES[case].get("restitution"):
        assert single_pin.bounces[0] > 0, "the bouncing case bounces"
    single_rel, batch_rel = release(p, 0.4), release(both, 0.4)
    assert_same(single_rel, batch_rel, f"{case} release")


@pytest.mark.parametrize("stiff", [False, True])
def test_fly_of_one_point_returns_what_the_batch_returns(stiff):
    """``fly`` itself: end time, state, end code, step count, the recorded accepted steps,
    the queried state and the tracked peak."""
    q = latch()
    t0 = float(pull_in(q).start_time[0])
    y0 = np.array([q.l_open[0] * q.start_current[0] * (1 + 1e-12), q.stroke[0], 0.0, 0.0, 0.0])
    both = pair(q, latch(mass=0.03))
    runs = []
    for p, n in ((q, 1), (both, 2)):
        ones = np.ones(n, bool)
        query_y = np.full((5, n), np.nan)
        peak = np.zeros((2, n))
        fl = fly(p, np.full(n, t0), np.repeat(y0[:, None], n, axis=1), np.full(n, 1.0), ones,
                 ones, ones, 1e-7, record=True, query=np.full(n, t0 + 0.004), query_y=query_y,
                 track=ones, peak=peak, stiff=stiff)
        path_t = np.array([a[0] for a in fl.path_t])
        path_y = np.array([a[:, 0] for a in fl.path_y]).T
        keep = np.isfinite(path_t)  # the batch marks a rejected step NaN
        runs.append((fl, path_t[keep], path_y[:, keep], query_y[:, 0], peak[:, 0]))
    (a, at, ay, aq, ap), (b, bt, by, bq, bp) = runs
    assert a.end[0] == b.end[0] == armature.SEAT
    assert a.steps[0] == b.steps[0]
    np.testing.assert_allclose(a.t, b.t[:1], rtol=RTOL, atol=0)
    np.testing.assert_allclose(a.y[:, 0], b.y[:, 0], rtol=RTOL, atol=RTOL * q.stroke[0])
    assert at.size == bt.size
    np.testing.assert_allclose(at, bt, rtol=RTOL, atol=0)
    # each state row to 1e-9 of its own scale (the gap passes through ~0 near the seat)
    row_scale = RTOL * np.max(np.abs(by), axis=1, keepdims=True)
    assert np.all(np.abs(ay - by) <= row_scale), "recorded states"
    np.testing.assert_allclose(aq, bq, rtol=RTOL, atol=1e-15)
    np.testing.assert_allclose(ap, bp, rtol=RTOL, atol=0)


def test_fly_of_one_point_edge_cases():
    """Not active, already at ``t_end``, and the ``max_steps`` cap end as the batch does."""
    q = latch()
    y0 = np.array([[q.l_open[0] * q.start_current[0] * 1.001], [q.stroke[0]], [0.0], [0.0], [0.0]])
    yes, no = np.array([True]), np.array([False])
    idle = fly(q, np.array([0.01]), y0, np.array([1.0]), no, yes, yes)
    assert idle.end[0] == armature.BOUND and idle.steps[0] == 0 and idle.t[0] == 0.01
    late = fly(q, np.array([1.0]), y0, np.array([1.0]), yes, yes, yes)
    assert late.end[0] == armature.BOUND and late.steps[0] == 0
    capped = fly(q, np.array([0.01]), y0, np.array([1.0]), yes, yes, yes, max_steps=3)
    both = pair(q, latch(mass=0.03))
    ref = fly(both, np.array([0.01, 0.01]), np.repeat(y0, 2, axis=1), np.array([1.0, 1.0]),
              np.array([True, True]), np.array([True, True]), np.array([True, True]), max_steps=3)
    assert capped.end[0] == ref.end[0] == armature.BOUND and capped.steps[0] == 3
    np.testing.assert_allclose(capped.y[:, 0], ref.y[:, 0], rtol=RTOL, atol=1e-15)
    with pytest.raises(ValueError, match="exactly one point"):
        OnePoint(both)


def test_fly_point_is_stepped_without_numpy_arrays():
    """fly_point works on plain floats and returns plain floats (no numpy per step)."""
    q = latch()
    c = OnePoint(q)
    lam = float(q.l_open[0] * q.start_current[0]) * 1.001  # just past the start current
    t1, y1, end, steps, _, path = fly_point(c, 0.0015, [lam, 0.004, 0.0, 0.0, 0.0], 0.05,
                                            True, True, record=True)
    assert isinstance(t1, float) and all(isinstance(v, float) for v in y1)
    assert end == armature.SEAT and steps > 0 and len(path[0]) == len(path[1]) == len(path[2])


# ------------------------------------------------------------------ drop-out actuations
def drive_with(restitution: float):
    """The locker-latch example (invented), with a bounce factor at the seat."""
    drive = load_drive(ROOT / "examples" / "locker-latch-12v.toml")
    return dataclasses.replace(drive, armature=dataclasses.replace(drive.armature,
                                                                   restitution=restitution))


# (duty, PWM frequency Hz, hold s, restitution): holds too weak to keep the armature seated.
# A low PWM frequency keeps the number of flights (one per half period) small, so the
# numpy batch of one point, which this is compared with, stays fast enough for a test.
DROPOUTS = {
    "falls open": (0.30, 2e3, 0.03, 0.0),      # the armature drops all the way to the open stop
    "lifts and bounces": (0.45, 2e3, 0.03, 0.5),  # lifts ~1 mm, falls back, bounces
    "chatters": (0.50, 1e3, 0.03, 0.0),         # lifts a little in many periods
}
PEAK = 0.0288  # s, the example's designed peak time at 12 V (from `coildrive design`)


def actuation(case: str, method: str = "numpy"):
    duty, freq, hold, e = DROPOUTS[case]
    return armature_actuation(drive_with(e), 12.0, 25.0, PEAK, duty, freq, hold, method=method)


@pytest.mark.parametrize("case", DROPOUTS)
def test_dropout_actuation_equals_the_numpy_batch(case, monkeypatch):
    new = actuation(case)
    monkeypatch.setattr(armature_flight, "SINGLE_POINT_SCALAR", False)
    old = actuation(case)
    hold = (new.time > PEAK) & (new.time < new.events["off"])
    assert np.max(new.position[hold]) > 0, "the armature lifts during the hold (a drop-out case)"
    assert new.time.size == old.time.size, "the same samples"
    for name in ("time", "current", "position", "velocity"):
        a, b = getattr(new, name), getattr(old, name)
        np.testing.assert_allclose(a, b, rtol=RTOL, atol=RTOL * np.max(np.abs(b)), err_msg=name)
    np.testing.assert_array_equal(new.switch_on, old.switch_on)
    assert new.events.keys() == old.events.keys()
    for k in new.events:
        assert new.events[k] == pytest.approx(old.events[k], rel=RTOL), k


def test_dropout_actuation_agrees_with_scipy_dop853():
    """scipy solve_ivp DOP853 (rtol 1e-10) through the same state machine: the moments of a
    drop-out actuation with bounces agree within 1e-5 relative (the batch-vs-scipy
    tolerance of tests/test_armature_model.py); at every PWM edge (a sample time both
    runs share exactly) the gap agrees within 1e-6 of the stroke and the current within
    1e-6 of its largest value (measured: 6e-8 and 1e-7)."""
    new = actuation("lifts and bounces")
    ref = actuation("lifts and bounces", method="DOP853")
    for k in ("impact", "dip_current", "seat", "zero", "open"):
        assert new.events[k] == pytest.approx(ref.events[k], rel=1e-5), k
    common, a, b = np.intersect1d(new.time, ref.time, return_indices=True)
    hold = (common > PEAK) & (common < new.events["off"])
    assert hold.sum() >= 100, "the PWM edges of the hold are shared samples"
    stroke = drive_with(0.5).armature.stroke
    lift = np.max(new.position[a][hold])
    assert 0.1 * stroke < lift < stroke, "the armature lifts and falls back during the hold"
    assert np.max(np.abs(new.position[a] - ref.position[b])) < 1e-6 * stroke, "gap vs DOP853"
    i_max = np.max(ref.current)
    assert np.max(np.abs(new.current[a] - ref.current[b])) < 1e-6 * i_max, "current vs DOP853"


def test_a_second_freewheel_path_uses_its_own_constants(monkeypatch):
    """simulate's per-segment freewheel path (``release_params``, split decay): the
    one-point path uses that path's r_off/v_off, as the batch does -- and it matters."""
    from coildrive.model.armature_sim import simulate

    p = latch()
    fast = latch(r_off=45.0, v_off=30.0)  # a Zener in the release path (invented values)
    schedule = [(0.03, True, 40), (0.10, False, 40, "release")]

    def run():
        return simulate(p, schedule, release_params=fast,
                        stop=lambda r: r.state == "open" and not r.live)

    new = run()
    monkeypatch.setattr(armature_flight, "SINGLE_POINT_SCALAR", False)
    old = run()
    assert new.time.size == old.time.size
    for name in ("time", "current", "position"):
        a, b = getattr(new, name), getattr(old, name)
        np.testing.assert_allclose(a, b, rtol=RTOL, atol=RTOL * np.max(np.abs(b)), err_msg=name)
    slow = simulate(p, [(0.03, True, 40), (0.10, False, 40)],
                    stop=lambda r: r.state == "open" and not r.live)
    assert new.events["zero"] < 0.5 * (slow.events["zero"] - 0.03) + 0.03, \
        "the fast path's higher clamp voltage ends the current sooner"


def test_one_point_with_curves_equals_the_batch():
    """With an open and a seated flux-linkage curve the one-point flight takes the curves'
    law in Python floats (``FluxCurve._current_of_one``, ``GapCurves._state_one``): the
    same operations in the same order as numpy's, so point 0 of a two-point batch gives
    the same pull-in, release and drop-out actuation to 1e-9 (in fact to rounding)."""
    from test_armature_curves import with_curves

    p, other = latch(), latch(mass=0.03)
    single, both = with_curves(p), with_curves(pair(p, other))
    assert_same(pull_in(single, peak_time=0.008), pull_in(both, peak_time=0.008), "curves pull-in")
    assert_same(release(single, 0.4), release(both, 0.4), "curves release")


def test_dropout_with_curves_equals_the_numpy_batch(monkeypatch, tmp_path):
    """A hold too weak to keep the armature seated, on the saturating latch's curves: the
    armature flies every PWM period through the one-point path, and the whole actuation
    equals the numpy batch of one point's (the curves' law in numpy too) to 1e-9 of each
    signal's largest value."""
    from test_armature_curves import curve_drive

    drive = load_drive(curve_drive(tmp_path))
    args = (drive, 12.0, 25.0, 0.0288, 0.45, 25e3, 0.012)
    new = armature_actuation(*args)
    monkeypatch.setattr(armature_flight, "SINGLE_POINT_SCALAR", False)
    monkeypatch.setattr(flux, "ONE_POINT_FLOATS", False)   # the curves' law in numpy too
    old = armature_actuation(*args)
    assert new.time.size == old.time.size and new.events.keys() == old.events.keys()
    in_hold = (new.time > 0.0288) & (new.time < new.events["off"])
    assert float(new.position[in_hold].max()) > 0.0, "the armature lifts in the hold"
    for k in ("time", "current", "position", "velocity"):
        a, b = getattr(new, k), getattr(old, k)
        assert np.max(np.abs(a - b)) <= RTOL * np.max(np.abs(b)), k
    for k, v in old.events.items():
        assert new.events[k] == pytest.approx(v, rel=RTOL, abs=0), k
