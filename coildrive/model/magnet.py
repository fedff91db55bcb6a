"""The moving armature's magnetic circuit and its static force balance (closed form).

Magnetic equivalent circuit: the coil's reluctance is an air gap ``x`` (the armature's
travel left, ``stroke`` when open, 0 when seated) in series with a fixed remainder that
acts like an extra gap ``g0`` (iron, residual gap, fringing), so that::

    L(x) = K / (x + g0) = L_c / (1 + beta x),   L_c = K / g0 (seated),  beta = 1 / g0

Two measured inductances fix the two constants: ``L_open = L(stroke)`` and
``L_closed = L(0)`` give ``beta = (L_closed - L_open) / (stroke * L_open)``.
Equal inductances give ``beta = 0``: no magnetic force, nothing moves.

Force (co-energy, ``W' = L i^2 / 2``): ``F_x = (i^2 / 2) dL/dx``, negative, so it pulls
the gap shut. With the flux linkage ``lambda = L(x) i`` it does not depend on the gap::

    F_close = i^2 |dL/dx| / 2 = lambda^2 beta / (2 L_c)

Mechanics (signs: positive opens): the spring pushes open with ``preload`` at the open
position plus ``rate`` per metre of closure, ``preload + rate (stroke - x)``; the load
force is constant and pushes open.

Everything here broadcasts over numpy arrays; SI units (H, m, N, N/m, A, H/m).
"""

from __future__ import annotations

import numpy as np


def fit_gap(inductance_open, inductance_closed, stroke):
    """``(L_c, beta)`` of ``L(x) = L_c / (1 + beta x)`` through both measured inductances.

    Parameters
    ----------
    inductance_open : H at ``x = stroke``; inductance_closed : H at ``x = 0`` (>= open)
    stroke : m (> 0)

    Returns
    -------
    l_closed : H; beta : 1/m (``1/g0``; 0 when the inductances are equal)

    >>> fit_gap(0.25, 0.75, 0.5)  # H, H, m: L(x) = 0.75 / (1 + 4 x), g0 = 0.25 m
    (0.75, 4.0)
    """
    lo = np.asarray(inductance_open, float)
    lc = np.asarray(inductance_closed, float)
    beta = (lc - lo) / (np.asarray(stroke, float) * lo)
    if beta.ndim == 0:
        return float(lc), float(beta)
    return lc, beta


def equivalent_gap(beta):
    """``g0 = 1 / beta`` in m (``inf`` for ``beta = 0``)."""
    beta = np.asarray(beta, float)
    with np.errstate(divide="ignore"):
        return 1.0 / beta


def inductance(x, l_closed, beta):
    """``L(x) = L_c / (1 + beta x)`` in H at gap ``x`` m."""
    return np.asarray(l_closed, float) / (1.0 + np.asarray(beta, float) * np.asarray(x, float))


def inductance_slope(x, l_closed, beta):
    """``dL/dx = -L_c beta / (1 + beta x)^2`` in H/m (negative: L grows as the gap shuts)."""
    b = np.asarray(beta, float)
    return -np.asarray(l_closed, float) * b / (1.0 + b * np.asarray(x, float)) ** 2


def closing_force(current, x, l_closed, beta):
    """Magnetic force in N pulling the gap shut at ``current`` A and gap ``x`` m."""
    return 0.5 * np.asarray(current, float) ** 2 * -inductance_slope(x, l_closed, beta)


def opening_force(x, stroke, spring_preload, spring_rate, load_force):
    """Spring + load force in N pushing open at gap ``x`` m."""
    return (np.asarray(spring_preload, float) + np.asarray(spring_rate, float)
            * (np.asarray(stroke, float) - np.asarray(x, float)) + np.asarray(load_force, float))


def balance_current(x, l_closed, beta, stroke, spring_preload, spring_rate, load_force):
    """Current in A whose magnetic force equals spring + load at gap ``x``.

    ``0`` where spring + load do not push open there; ``inf`` where there is no magnetic
    force (``beta = 0``) but something to overcome.
    """
    need = opening_force(x, stroke, spring_preload, spring_rate, load_force)
    slope = -inductance_slope(x, l_closed, beta)
    with np.errstate(divide="ignore", invalid="ignore"):
        cur = np.sqrt(2.0 * np.maximum(need, 0.0) / slope)
    cur = np.where(need <= 0, 0.0, np.where(slope > 0, cur, np.inf))
    return cur if cur.ndim else float(cur)


def start_current(l_closed, beta, stroke, spring_preload, spring_rate, load_force):
    """Least current in A that starts the armature moving from the open stop:
    ``(I^2 / 2) |dL/dx|(stroke) = spring_preload + load_force``."""
    return balance_current(stroke, l_closed, beta, stroke, spring_preload, spring_rate, load_force)


def stay_current(l_closed, beta, stroke, spring_preload, spring_rate, load_force):
    """Least current in A that keeps the armature seated:
    ``(I^2 / 2) |dL/dx|(0) = spring_preload + spring_rate * stroke + load_force``.
    It is also the current at which a seated armature lets go (its drop-out current)."""
    return balance_current(0.0, l_closed, beta, stroke, spring_preload, spring_rate, load_force)


def stroke_current(l_closed, beta, stroke, spring_preload, spring_rate, load_force):
    """Least steady current in A whose force beats spring + load over the whole stroke.

    It is the largest :func:`balance_current` over ``0 <= x <= stroke``. With
    ``f(x) = (A - k x)(1 + beta x)^2`` (``A`` the opening force when seated) the only
    interior maximum is at ``x* = (2 beta A - k) / (3 beta k)``, so the answer is the
    largest of the values at 0, ``stroke`` and ``x*`` (clipped into the stroke). Usually
    it is the :func:`start_current`; a stiff spring can move it inside the stroke.

    Returns
    -------
    current : A; gap : m where that current is needed
    """
    args = np.broadcast_arrays(*(np.asarray(a, float) for a in
                                 (l_closed, beta, stroke, spring_preload, spring_rate, load_force)))
    lc, b, s, p, k, fl = args
    a = p + k * s + fl
    with np.errstate(divide="ignore", invalid="ignore"):
        xs = (2.0 * b * a - k) / (3.0 * b * k)
    xs = np.where(np.isfinite(xs), np.clip(xs, 0.0, s), s)
    cands = np.stack([np.zeros_like(s), s, xs])
    cur = balance_current(cands, lc, b, s, p, k, fl)
    cur = np.asarray(cur, float)
    j = np.argmax(np.where(np.isnan(cur), np.inf, cur), axis=0)
    best = np.take_along_axis(cur, j[None], 0)[0]
    gap = np.take_along_axis(cands, j[None], 0)[0]
    if best.ndim == 0:
        return float(best), float(gap)
    return best, gap
