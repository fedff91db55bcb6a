"""The main bus behind a boost converter: the source ``V_s`` behind ``R_s`` with the bulk
capacitor ``C``, the converter drawing a constant power ``P`` (its output power over its
efficiency) from the bus while it recharges the boost capacitor, nothing otherwise.

While it draws, ``C dv/dt = (V_s - v)/R_s - P/v``, i.e. (``tau = R_s C``)::

    tau dv/dt = -(v - v_1)(v - v_2) / v,    v_1,2 = (V_s +- sqrt(V_s^2 - 4 R_s P)) / 2

``v_1`` is the bus the draw settles at (the source behind ``R_s`` gives exactly ``P/v``
there) and a floor: above it the bus falls towards it, below it the source gives more
than the converter takes. The equation separates (partial fractions of ``v / ((v -
v_1)(v - v_2))``), so the time from ``v_0`` to ``v`` is closed::

    t = tau [v_1 ln((v_0 - v_1)/(v - v_1)) - v_2 ln((v_0 - v_2)/(v - v_2))] / (v_1 - v_2)

and the bus at a time is that relation's root (bisection: it is monotone). Without a
real root (``V_s^2 < 4 R_s P``, more than the ``V_s^2 / (4 R_s)`` the source can deliver
at all) the bus collapses: no floor. Resting, the bus recovers as an RC circuit, ``v =
V_s - (V_s - v_0) e^{-t/tau}``.

Pulses every ``T`` s with the converter drawing for ``t_r`` s after each (then resting)
drive the bus to a periodic orbit, reached monotonically from a full bus (the cycle's map
rises with a slope below one): its lowest point, at the end of each draw, is the lowest
the bus ever is (:func:`orbit_low`; the bisection of the map's fixed point).

Physics only; SI units (V, ohm, F, W, s); every function broadcasts over points.
"""

from __future__ import annotations

import numpy as np

#: Bisection steps: the bracket shrinks 2^-80.
STEPS = 80


def roots(v_s, r_s, p) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(v_1, v_2, carried)``: the module docstring's roots (V; NaN where there is no real
    root) and whether the source carries the draw (a real root, ``V_s^2 >= 4 R_s P``)."""
    v_s, r_s, p = (np.asarray(x, float) for x in (v_s, r_s, p))
    disc = v_s * v_s - 4.0 * r_s * p
    carried = disc >= 0.0
    sq = np.sqrt(np.where(carried, disc, np.nan))
    return 0.5 * (v_s + sq), 0.5 * (v_s - sq), carried


def draw_time(v0, v, v_s, r_s, c, p) -> np.ndarray:
    """s the bus takes to fall from ``v0`` to ``v`` V under the draw (``v_1 < v <= v0``;
    ``inf`` at or below ``v_1``, NaN without a floor): the module docstring's closed form."""
    v1, v2, _ = roots(v_s, r_s, p)
    tau = np.asarray(r_s, float) * np.asarray(c, float)
    v0, v = np.asarray(v0, float), np.asarray(v, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = tau * (v1 * np.log((v0 - v1) / (v - v1)) - v2 * np.log((v0 - v2) / (v - v2))) / (v1 - v2)
        t = np.where(v2 == v1, np.inf, t)   # (the double root: the floor is never reached either)
    return np.where(v <= v1, np.inf, np.where(v >= v0, 0.0, t))


def under_draw(v0, t, v_s, r_s, c, p) -> np.ndarray:
    """The bus (V) ``t`` s into the draw from ``v0`` V (at or above ``v_1``): the root of
    :func:`draw_time` by bisection on ``(v_1, v0]``; NaN where the source does not carry
    the draw."""
    v1, _, carried = roots(v_s, r_s, p)
    v0 = np.asarray(v0, float)
    t = np.asarray(t, float)
    lo = np.where(carried, v1, np.nan) + 0.0 * v0 + 0.0 * t
    hi = np.broadcast_to(v0, lo.shape) + 0.0
    for _ in range(STEPS):
        mid = 0.5 * (lo + hi)
        later = draw_time(v0, mid, v_s, r_s, c, p) > t   # mid is reached after t: the bus is above it
        lo, hi = np.where(later, mid, lo), np.where(later, hi, mid)
    return np.where(carried, np.where(t > 0, 0.5 * (lo + hi), v0), np.nan)


def resting(v0, t, v_s, r_s, c) -> np.ndarray:
    """The bus (V) ``t`` s into a rest from ``v0`` V: ``V_s - (V_s - v0) e^{-t/tau}``."""
    v_s = np.asarray(v_s, float)
    return v_s - (v_s - np.asarray(v0, float)) * np.exp(-np.asarray(t, float) / (np.asarray(r_s, float) * c))


def orbit_low(v_s, r_s, c, p, t_draw, period) -> np.ndarray:
    """The lowest bus (V) of the periodic orbit of a draw of ``t_draw`` s every ``period`` s
    (``t_draw <= period``; the rest of each period the bus recovers): at the end of the
    draw, from the orbit's start ``v_a``, the root of ``rest(draw(v_a)) - v_a`` on
    ``[v_1, V_s]`` (bisection: the map rises with a slope below one, so the difference
    falls through one root). NaN where the source does not carry the draw."""
    v1, _, carried = roots(v_s, r_s, p)
    rest = np.asarray(period, float) - np.asarray(t_draw, float)
    v_s = np.asarray(v_s, float)
    shape = np.broadcast(v1, rest).shape     # (rest may be inf: a single draw from a full bus)
    lo = np.broadcast_to(np.where(carried, v1, np.nan), shape) + 0.0
    hi = np.broadcast_to(v_s, shape) + 0.0
    for _ in range(STEPS):
        mid = 0.5 * (lo + hi)
        up = resting(under_draw(mid, t_draw, v_s, r_s, c, p), rest, v_s, r_s, c) > mid
        lo, hi = np.where(up, mid, lo), np.where(up, hi, mid)
    return under_draw(0.5 * (lo + hi), t_draw, v_s, r_s, c, p)


def trace(t, starts, lengths, v_s, r_s, c, p) -> np.ndarray:
    """The bus (V) at times ``t`` s (ascending) of one point from a full bus (``V_s``): the
    converter draws for ``lengths[k]`` s from ``starts[k]`` s (ascending, not overlapping),
    the bus rests between."""
    t = np.asarray(t, float)
    out = np.empty(t.shape)
    v, now = float(v_s), 0.0
    for start, length in list(zip(starts, lengths)) + [(np.inf, 0.0)]:
        rest = (t >= now) & (t < start)
        out[rest] = resting(v, t[rest] - now, v_s, r_s, c)
        if not np.isfinite(start):
            break
        v = float(resting(v, start - now, v_s, r_s, c))
        on = (t >= start) & (t < start + length)
        out[on] = under_draw(v, t[on] - start, v_s, r_s, c, p)
        v, now = float(under_draw(v, length, v_s, r_s, c, p)), start + length
    return out


#: Fixed-point steps of :func:`clamp_drop` (each one lowers the floor it assumes).
DROP_STEPS = 200


def clamp_drop(low, q, t_q, period, r_s, c, p) -> np.ndarray:
    """A bound (V) on how much further the bus falls below ``low`` V (its lowest under the
    converter's draws alone, :func:`orbit_low`) when, besides, a load takes a charge of at
    most ``q`` C in at most ``t_q`` s once every ``period`` s (a latching coil's clamped
    decay after each pulse from the boost: the current flows from the bus through the
    winding into the clamp). With ``w`` the bus without that load less the bus with it (the
    same draws), ``C dw/dt = -w/R_s + P_on w/(v v') + i_q``: while both buses stay above a
    floor ``v_f`` with ``kappa = 1/R_s - P/v_f^2 > 0`` (the draw's own slope below the
    source's), ``C dw/dt <= -kappa w + i_q``, ``w >= 0``, so each charge adds at most
    ``q/C`` and then decays at ``kappa/C`` at least; the charge ``n`` periods back (its load
    over within ``t_q``) adds at most ``q/C e^(-kappa (n period - t_q)/C)``, and summed::

        w <= q/C (1 + e^(kappa t_q/C) a / (1 - a)),    a = e^(-kappa period/C)

    ``v_f = low - w`` itself, so the bound is the fixed point of that map from ``w = q/C``
    (it only rises: a lower floor, a smaller ``kappa``); NaN where it has none (``kappa``
    reaches 0, or the floor 0: the bus may collapse). ``period`` ``inf``: one charge,
    ``q/C``. Broadcasts over points; V, C, s, ohm, F, W."""
    low, q, t_q, period, r_s, c, p = (np.asarray(x, float) for x in (low, q, t_q, period, r_s, c, p))
    w = q / c
    bad = ~np.isfinite(low)
    for _ in range(DROP_STEPS):
        v_f = low - w
        with np.errstate(divide="ignore", invalid="ignore"):
            kappa = 1.0 / r_s - p / (v_f * v_f)
        bad = bad | ~(v_f > 0.0) | ~(kappa > 0.0)
        k = np.where(bad, 1.0, kappa)
        a = np.where(np.isfinite(period), np.exp(-k * np.where(np.isfinite(period), period, 0.0) / c), 0.0)
        nxt = q / c * (1.0 + np.exp(k * t_q / c) * a / (1.0 - a))
        done = np.abs(nxt - w) <= 1e-12 * np.abs(low)
        w = nxt
        if np.all(done | bad):
            break
    else:
        bad = bad | ~done
    return np.where(bad, np.nan, w)
