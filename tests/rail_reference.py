"""The rail's current bound written afresh from docs/design-method.md ("Several channels")
for the system tests: a branch's tail after its peak, and the dense sweep of the
staggered total at every supply where the readable branches change."""

from __future__ import annotations

import numpy as np


def linear_tail(t, b):
    """A branch's tail (A) ``t`` s after switch-on: the hold's top plus each part's excess
    decaying from the end of the first PWM period at its slowest rate."""
    age = np.maximum(np.asarray(t, float) - b["peak_s"] - b["pwm_period_s"], 0)
    return b["hold_top_a"] + np.max([e * np.exp(-age * b["slow_resistance_ohm"] / l)
                                     for e, l in zip(b["excess_a"], b["tail_inductance_h"])], axis=0)


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
