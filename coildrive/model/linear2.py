"""``e^{A t} y`` for a constant 2x2 matrix ``A``, closed form: the linear circuits of two
states (coil current and bus voltage) on a drooping bus.

Putzer's formula ``e^{At} = e^{l1 t} I + f[l1, l2] (A - l1 I)`` with the eigenvalues
``l1``, ``l2`` of ``A`` (real or a complex pair, ``Re l1 >= Re l2``) and the divided
difference ``f = (e^{l1 t} - e^{l2 t})/(l1 - l2)``, written with ``expm1`` so a double
eigenvalue and a stiff one stay exact. No time stepping. Every function broadcasts over
numpy arrays.
"""

from __future__ import annotations

import numpy as np


def eigenvalues(a11, a12, a21, a22) -> tuple[np.ndarray, np.ndarray]:
    """The eigenvalues ``(l1, l2)`` of ``[[a11, a12], [a21, a22]]`` as complex arrays,
    ``Re l1 >= Re l2``."""
    half = 0.5 * (a11 + a22)
    disc = np.sqrt((0.5 * (a11 - a22)).astype(complex) ** 2 + a12 * a21)   # (tr/2)^2 - det
    l1, l2 = half + disc, half - disc
    swap = l2.real > l1.real
    return np.where(swap, l2, l1), np.where(swap, l1, l2)


def apply(t, a, l1, l2, y) -> tuple[np.ndarray, np.ndarray]:
    """``e^{A t} y`` (real), ``a = (a11, a12, a21, a22)``, ``y = (y1, y2)``."""
    t = np.asarray(t, float)
    a11, a12, a21, a22 = a
    y1, y2 = y
    e1 = np.exp(l1 * t)
    x = (l1 - l2) * t
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(np.abs(x) > 1e-12, -np.expm1(-x) / np.where(x == 0, 1.0, x), 1.0 - 0.5 * x)
    f = e1 * t * ratio                           # (e^{l1 t} - e^{l2 t}) / (l1 - l2)
    return ((e1 * y1 + f * ((a11 - l1) * y1 + a12 * y2)).real,
            (e1 * y2 + f * (a21 * y1 + (a22 - l1) * y2)).real)


def times(a, y) -> tuple[np.ndarray, np.ndarray]:
    """``A y``."""
    a11, a12, a21, a22 = a
    return a11 * y[0] + a12 * y[1], a21 * y[0] + a22 * y[1]


def first_zero(g0, g1, l1, l2) -> np.ndarray:
    """The first ``t > 0`` (s) where ``g(t) = 0``, ``g`` one component of ``e^{At} z`` with
    ``g(0) = g0`` and ``g'(0) = g1`` (``inf`` where it has none): ``g = c1 e^{l1 t} + c2
    e^{l2 t}`` for real eigenvalues (at most one zero, where ``e^{(l1 - l2) t} = -c2/c1``),
    ``(g0 + (g1 - l g0) t) e^{l t}`` for a double one, ``e^{alpha t} (g0 cos(omega t) + q
    sin(omega t))``, ``q = (g1 - alpha g0)/omega``, for a complex pair (zeros ``pi/omega``
    apart)."""
    g0, g1 = np.broadcast_arrays(np.asarray(g0, float), np.asarray(g1, float))
    w = np.abs(l1.imag)
    alpha = l1.real
    d = (l1 - l2).real
    with np.errstate(divide="ignore", invalid="ignore"):
        # complex pair: g0 cos + q sin = 0 at theta = atan2(-g0, q) (mod pi)
        q = (g1 - alpha * g0) / np.where(w > 0, w, 1.0)
        theta = np.mod(np.arctan2(-g0, q), np.pi)
        theta = np.where(theta > 0, theta, np.pi)
        t_c = theta / np.where(w > 0, w, 1.0)
        # real, distinct: c1 = (g1 - l2 g0)/(l1 - l2), c2 = g0 - c1
        c1 = (g1 - l2.real * g0) / np.where(d > 0, d, 1.0)
        c2 = g0 - c1
        r = -c2 / c1
        t_r = np.where((r > 1.0) & np.isfinite(r), np.log(np.where(r > 1.0, r, 2.0)) / np.where(d > 0, d, 1.0), np.inf)
        # double: g0 + (g1 - l g0) t = 0
        s = g1 - alpha * g0
        t_d = np.where(-g0 / s > 0, -g0 / s, np.inf)
    return np.where(w > 0, t_c, np.where(d > 1e-9 * np.abs(alpha), t_r, t_d))
