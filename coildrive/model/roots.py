"""A bracketed root of a falling function, vectorised over points.

The fixed points of the hold's period maps (``P(a) - a``, which falls through one root:
``P`` rises with a slope below one) are found by regula falsi with the Illinois halving
(Dowell & Jarratt 1971): a secant between the bracket's ends, halving the value kept at
an end that stays twice, so the bracket closes from both sides.
"""

from __future__ import annotations

import numpy as np


def falling_root(g, hi, iterations: int = 100, rel: float = 1e-13, g_top=None, small: float = 0.0):
    """The root of ``g`` (falling, ``g(0) > 0 > g(hi)``) on ``[0, hi]`` per point, to
    ``rel`` of ``hi`` (or where ``|g| <= small``). ``g_top``: ``g(hi)`` when known (or a
    stand-in of the right sign), else evaluated. Returns ``(x, lo, hi, g_lo, g_hi)``: the
    last point tried and the final bracket with ``g`` at its ends (``g_hi == 0``: ``hi`` is
    the root itself)."""
    lo, hi = np.zeros_like(hi), hi.copy()
    width = rel * np.maximum(hi, 1e-300)
    g_lo = g(lo)
    g_hi = g(hi) if g_top is None else np.full_like(hi, g_top)
    side = np.zeros(hi.size, int)
    x = hi.copy()
    for _ in range(iterations):
        with np.errstate(divide="ignore", invalid="ignore"):
            x = hi - g_hi * (hi - lo) / (g_hi - g_lo)
        x = np.where(np.isfinite(x) & (x > lo) & (x < hi), x, 0.5 * (lo + hi))
        gx = g(x)
        above = gx > 0   # the root lies above x
        g_hi = np.where(above & (side == 1), 0.5 * g_hi, g_hi)
        g_lo = np.where(~above & (side == -1), 0.5 * g_lo, g_lo)
        lo, g_lo = np.where(above, x, lo), np.where(above, gx, g_lo)
        hi, g_hi = np.where(above, hi, x), np.where(above, g_hi, gx)
        side = np.where(above, 1, -1)
        if np.all((hi - lo <= width) | (np.abs(gx) <= small)):
            break
    return x, lo, hi, g_lo, g_hi
