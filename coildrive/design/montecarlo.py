"""Tolerance Monte Carlo of a chosen setting: how often, and by how much, parts vary.

Supply and ambient are drawn uniformly over their ranges; coil resistance and
inductance uniformly within their tolerance, or normally with the tolerance read as
3 sigma (clipped at the tolerance) when the drive file says ``tolerance_distribution =
"normal"``; a boosted peak's boost voltage and capacitance likewise within their
tolerances (each sample's pull-in from its own boost; its peak is the time-out, which
ends it only if the threshold -- above the pull-in current -- comes later; with a moving
armature its run from that boost into the hold, to the seat within the time-out). Each sample is evaluated with the same closed-form model as the corners (the
coil at the temperature a long hold settles at there, or with an on/off cycle and a heat
capacity the hottest over the cycle).

The samples are evaluated :data:`CHUNK` at a time into preallocated arrays of the five
figures: the model's temporaries (dozens of arrays per point) then stay the size of one
chunk, which fits the processor's caches, instead of the size of the whole sample. Every
figure is element-wise in the points, so the result is bit-identical to one pass over
all samples (``chunk=None``; ``benchmarks/bench_design.py`` compares the two).
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from .boost import sampled_pull_in
from .bridge_bus import release_time
from .evaluate import evaluate
from .thermal_cycle import cycle_states, cycling

PERCENTILES = (1.0, 50.0, 99.0)
#: Samples evaluated together (a few MB of temporaries; measured best on 2 cores with
#: benchmarks/bench_design.py, between 4,096 and 65,536 the time barely changes).
CHUNK = 16_384
#: The figures kept per sample (for the percentiles and the failure counts).
FIGURES = ("pull_in_time_s", "hold_mean_current_a", "hold_ripple_a", "coil_temp_c", "release_time_s")


def factors(rng: np.random.Generator, tol: float, n: int, kind: str) -> np.ndarray:
    """Tolerance factors around 1 (uniform, or normal with the tolerance as 3 sigma)."""
    if tol == 0:
        return np.ones(n)
    if kind == "normal":
        return 1.0 + np.clip(rng.normal(0.0, tol / 3.0, n), -tol, tol)
    return 1.0 + rng.uniform(-tol, tol, n)


def summary(values: np.ndarray) -> dict:
    """A figure's :data:`PERCENTILES` over its finite samples, and its min and max
    (``None`` where no sample is finite)."""
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return {"values": [None] * len(PERCENTILES), "min": None, "max": None}
    return {"values": [float(v) for v in np.percentile(finite, PERCENTILES)],
            "min": float(finite.min()), "max": float(finite.max())}


def _figures(drive: Drive, res, peak_time) -> tuple:
    """The :data:`FIGURES` of evaluated points, in that order (a full bridge's release on
    the drooping bus: :func:`coildrive.design.bridge_bus.release_time`)."""
    return (res.pull_in_time, res.hold.mean, res.hold.ripple, res.coil_temp,
            release_time(drive, res, peak_time))


def monte_carlo(drive: Drive, duty: float, frequency: float, peak_time: float, samples: int,
                seed: int = 1, chunk: int | None = CHUNK) -> dict:
    """Evaluate ``samples`` random operating points; return percentiles and failure counts.

    Returns a JSON-ready dict: ``samples``, ``seed``, ``percentiles`` (the levels), and for
    each figure its values at those levels plus ``max``/``min``; ``failures`` counts the
    samples whose pull-in time exceeds the peak time or whose hold current falls short.
    ``chunk`` samples are evaluated together (``None``: all at once). ``duty`` and
    ``peak_time`` may be functions of the samples' supply (V, an array) giving each
    sample's value: the hold and peak the firmware runs at that supply (a supply table).
    """
    rng = np.random.default_rng(seed)
    c = drive.coil
    supply = rng.uniform(drive.supply.min, drive.supply.max, samples)
    ambient = rng.uniform(drive.ambient.min, drive.ambient.max, samples)
    rf = factors(rng, c.resistance_tolerance, samples, c.tolerance_distribution)
    lf = factors(rng, c.inductance_tolerance, samples, c.tolerance_distribution)
    s_ = drive.supply
    if s_.boosted:   # each sample's own boost (drawn after the rest: other drives' streams stay)
        bf = factors(rng, s_.boost_tolerance, samples, c.tolerance_distribution)
        cf = factors(rng, s_.boost_capacitance_tolerance, samples, c.tolerance_distribution)

    duty_of = duty if callable(duty) else (lambda s: duty)
    peak_of = peak_time if callable(peak_time) else (lambda s: peak_time)

    def boosted(res, sl=slice(None)):
        """``res`` with each sample's pull-in from its own boost (unchanged without one; a
        moving armature's run from it into the hold, to the seat within the time-out)."""
        if not s_.boosted:
            return res
        if drive.armature is not None:
            from .boost_armature import sampled_pull_in as armature_pull_in
            return armature_pull_in(drive, res, bf[sl], cf[sl], duty_of(res.supply), peak_of(res.supply))
        return sampled_pull_in(drive, res, bf[sl], cf[sl])
    def coil_temp(s, amb, r, l):
        """With an on/off cycle and a heat capacity, each sample's hottest coil over the
        cycle; else ``None``: evaluate's continuous hold."""
        if not cycling(drive):
            return None
        return cycle_states(drive, s, amb, r, l, duty_of(s), frequency, None, peak_of(s)).hottest

    if chunk is None:
        values = _figures(drive, boosted(evaluate(drive, supply, ambient, rf, lf, duty_of(supply), frequency,
                                                  peak_of(supply), coil_temp=coil_temp(supply, ambient, rf, lf))),
                          peak_of(supply))
    else:
        values = tuple(np.empty(samples) for _ in FIGURES)
        for start in range(0, samples, chunk):
            sl = slice(start, min(start + chunk, samples))
            s = supply[sl]
            res = boosted(evaluate(drive, s, ambient[sl], rf[sl], lf[sl], duty_of(s), frequency, peak_of(s),
                                   coil_temp=coil_temp(s, ambient[sl], rf[sl], lf[sl])), sl)
            for out, got in zip(values, _figures(drive, res, peak_of(s))):
                out[sl] = got
    supply_all = supply
    del ambient, rf, lf  # the inputs' memory is free before the percentiles' copies
    figures = dict(zip(FIGURES, values))
    out: dict = {"samples": samples, "seed": seed, "percentiles": list(PERCENTILES),
                 "distribution": c.tolerance_distribution}
    for name, values in figures.items():
        out[name] = summary(values)
    out["failures"] = {
        "pull_in_late": int(np.sum(~(figures["pull_in_time_s"] <= peak_of(supply_all)))),
        "hold_short": int(np.sum(~(figures["hold_mean_current_a"] >= drive.hold.current))),
        "coil_too_hot": int(np.sum(~(figures["coil_temp_c"] <= drive.thermal.max_coil_temp))),
    }
    return out
