"""The series RLC circuit in closed form: ``L x'' + R x' + x / C = 0``.

``x`` is a charge-like state (C) whose rate ``x'`` is the loop current (A); ``x(0) = a``,
``x'(0) = i0``. With ``alpha = R / 2L`` and ``omega0 = 1 / sqrt(LC)`` (the series RLC
circuit of any circuits textbook):

* underdamped (``omega0 > alpha``, ``omega_d = sqrt(omega0^2 - alpha^2)``):
  ``x = e^(-alpha t) (a cos omega_d t + b sin omega_d t)``, ``b = (i0 + alpha a) / omega_d``,
  ``x' = e^(-alpha t) (i0 cos omega_d t - (alpha b + omega_d a) sin omega_d t)``;
* overdamped (``s1,2 = -alpha +/- beta``): ``x = c1 e^(s1 t) + c2 e^(s2 t)``,
  ``c1 = (i0 - s2 a) / (s1 - s2)``, ``c2 = a - c1``;
* critically damped: ``x = (a + k t) e^(-alpha t)``, ``k = i0 + alpha a``.

Two circuits use it: a full bridge's fast decay into the bulk capacitance
(:func:`coildrive.model.bridge.pump_up`, ``x = q + C (V_1 + 2 V_d)``) and a boost
capacitor discharging into the coil (:mod:`coildrive.model.boost`, ``x = -C v_C``).

Physics only; SI units; every function broadcasts over arrays.
"""

from __future__ import annotations

import numpy as np

#: Relative width of the band around ``omega0^2 = alpha^2`` taken as critically damped.
CRITICAL_BAND = 1e-12


def _params(a, i0, r, l, c):
    a, i0, r, l, c = np.broadcast_arrays(*(np.asarray(x, float) for x in (a, i0, r, l, c)))
    alpha = r / (2.0 * l)
    w0sq = 1.0 / (l * c)
    disc = w0sq - alpha**2
    scale = np.maximum(w0sq, alpha**2)
    under = disc > CRITICAL_BAND * scale
    over = disc < -CRITICAL_BAND * scale
    wd = np.sqrt(np.where(under, disc, 1.0))
    beta = np.sqrt(np.where(over, -disc, 1.0))
    return a, i0, alpha, under, over, wd, beta


def state(t, a, i0, r, l, c) -> tuple[np.ndarray, np.ndarray]:
    """``(x, x')`` at ``t`` s (C, A) from ``x(0) = a``, ``x'(0) = i0`` (module docstring)."""
    a, i0, alpha, under, over, wd, beta = _params(a, i0, r, l, c)
    t = np.asarray(t, float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        decay = np.exp(-alpha * t)
        b = (i0 + alpha * a) / wd
        cos, sin = np.cos(wd * t), np.sin(wd * t)
        x_u = decay * (a * cos + b * sin)
        d_u = decay * (i0 * cos - (alpha * b + wd * a) * sin)
        s1, s2 = -alpha + beta, -alpha - beta
        c1 = (i0 - s2 * a) / (s1 - s2)
        c2 = a - c1
        e1, e2 = np.exp(s1 * t), np.exp(s2 * t)
        x_o = c1 * e1 + c2 * e2
        d_o = s1 * c1 * e1 + s2 * c2 * e2
        k = i0 + alpha * a
        x_c = (a + k * t) * decay
        d_c = (i0 - alpha * k * t) * decay
    x = np.where(under, x_u, np.where(over, x_o, x_c))
    d = np.where(under, d_u, np.where(over, d_o, d_c))
    return x, d


def first_zero(a, i0, r, l, c) -> np.ndarray:
    """The first time (s) the rate ``x'`` is zero, for ``i0 > 0``: underdamped
    ``atan2(i0, alpha b + omega_d a) / omega_d``; overdamped where ``e^(2 beta t) =
    -s2 c2 / (s1 c1)``; critically damped ``i0 / (alpha k)``."""
    a, i0, alpha, under, over, wd, beta = _params(a, i0, r, l, c)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        b = (i0 + alpha * a) / wd
        t_u = np.arctan2(i0, alpha * b + wd * a) / wd
        s1, s2 = -alpha + beta, -alpha - beta
        c1 = (i0 - s2 * a) / (s1 - s2)
        c2 = a - c1
        t_o = np.log(-s2 * c2 / (s1 * c1)) / (s1 - s2)
        t_c = i0 / (alpha * (i0 + alpha * a))
    return np.where(under, t_u, np.where(over, t_o, t_c))


def first_peak(a, i0, r, l, c) -> np.ndarray:
    """The first time (s) the current ``x'`` has a maximum, for a rising start (``x''(0) =
    -(R i0 + a / C) / L > 0``): the current obeys the same equation, so this is
    :func:`first_zero` of the solution ``(i0, x''(0))``."""
    r, l, c = (np.asarray(x, float) for x in (r, l, c))
    slope = -(r * np.asarray(i0, float) + np.asarray(a, float) / c) / l
    return first_zero(i0, slope, r, l, c)
