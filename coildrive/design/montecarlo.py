"""Tolerance Monte Carlo of a chosen setting: how often, and by how much, parts vary.

Supply and ambient are drawn uniformly over their ranges; coil resistance and
inductance uniformly within their tolerance, or normally with the tolerance read as
3 sigma (clipped at the tolerance) when the drive file says ``tolerance_distribution =
"normal"``. Each sample is evaluated with the same closed-form model as the corners.
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from .evaluate import evaluate

PERCENTILES = (1.0, 50.0, 99.0)


def _factors(rng: np.random.Generator, tol: float, n: int, kind: str) -> np.ndarray:
    if tol == 0:
        return np.ones(n)
    if kind == "normal":
        return 1.0 + np.clip(rng.normal(0.0, tol / 3.0, n), -tol, tol)
    return 1.0 + rng.uniform(-tol, tol, n)


def monte_carlo(drive: Drive, duty: float, frequency: float, peak_time: float, samples: int,
                seed: int = 1) -> dict:
    """Evaluate ``samples`` random operating points; return percentiles and failure counts.

    Returns a JSON-ready dict: ``samples``, ``seed``, ``percentiles`` (the levels), and for
    each figure its values at those levels plus ``max``/``min``; ``failures`` counts the
    samples whose pull-in time exceeds the peak time or whose hold current falls short.
    """
    rng = np.random.default_rng(seed)
    c = drive.coil
    supply = rng.uniform(drive.supply.min, drive.supply.max, samples)
    ambient = rng.uniform(drive.ambient.min, drive.ambient.max, samples)
    rf = _factors(rng, c.resistance_tolerance, samples, c.tolerance_distribution)
    lf = _factors(rng, c.inductance_tolerance, samples, c.tolerance_distribution)
    res = evaluate(drive, supply, ambient, rf, lf, duty, frequency, peak_time)
    figures = {
        "pull_in_time_s": res.pull_in_time,
        "hold_mean_current_a": res.hold.mean,
        "hold_ripple_a": res.hold.ripple,
        "coil_temp_c": res.coil_temp,
        "release_time_s": res.release_time,
    }
    out: dict = {"samples": samples, "seed": seed, "percentiles": list(PERCENTILES),
                 "distribution": c.tolerance_distribution}
    for name, values in figures.items():
        finite = values[np.isfinite(values)]
        if finite.size == 0:
            out[name] = {"values": [None] * len(PERCENTILES), "min": None, "max": None}
            continue
        out[name] = {"values": [float(v) for v in np.percentile(finite, PERCENTILES)],
                     "min": float(finite.min()), "max": float(finite.max())}
    out["failures"] = {
        "pull_in_late": int(np.sum(~(res.pull_in_time <= peak_time))),
        "hold_short": int(np.sum(~(res.hold.mean >= drive.hold.current))),
        "coil_too_hot": int(np.sum(~(res.coil_temp <= drive.thermal.max_coil_temp))),
    }
    return out
