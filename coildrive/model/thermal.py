"""Coil self-heating: the coil temperature as a fixed point of ``T = T_amb + R_th P(T)``.

``P(T)`` is the copper loss ``I_rms(T)^2 R_coil(T)`` during the hold. In voltage-mode
hold the current falls as the copper warms, so the plain iteration contracts; it is
accelerated with Wegstein's secant step (Wegstein 1958, "Accelerating convergence of
iterative processes", Comm. ACM 1(6)), which needs one evaluation of ``P`` per step.
Where the iteration does not settle (a thermal runaway, or a result beyond any sane
coil) the temperature is returned as ``inf`` and the design's temperature check fails.
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from .circuit import COPPER_ALPHA, copper_resistance

#: Hottest coil temperature a settled point may have (degC); above it, a runaway.
CEILING_C = 1000.0


def settle_temperature(ambient, thermal_resistance, power_at, tol: float = 1e-4,
                       max_iter: int = 100, ceiling: float = 1000.0):
    """Solve ``T = ambient + R_th * power_at(T)`` for every point (degC, K/W, W).

    ``power_at`` maps an array of coil temperatures to coil power in W. Starts from the
    ambient; stops when every point moved less than ``tol`` K. Points above ``ceiling``
    degC or not settled after ``max_iter`` steps are returned as ``inf``.
    """
    ambient = np.asarray(ambient, float)
    if np.all(np.asarray(thermal_resistance) == 0):
        return ambient.copy()

    def g(temp):
        out = ambient + thermal_resistance * power_at(temp)
        return np.where(np.isfinite(out), out, np.inf)

    x0 = ambient.copy()
    g0 = g(x0)
    x1 = g0.copy()
    for _ in range(max_iter):
        bad = ~np.isfinite(x1) | (x1 > ceiling)
        x1 = np.where(bad, ceiling, x1)
        g1 = g(x1)
        step = np.abs(g1 - x1)
        done = (step < tol) & ~bad
        if np.all(done | bad):
            return np.where(bad, np.inf, g1)
        # Wegstein: x2 = q x1 + (1 - q) g1, q = s / (s - 1), s the secant slope of g.
        with np.errstate(divide="ignore", invalid="ignore"):
            s = (g1 - g0) / (x1 - x0)
            q = np.where(np.isfinite(s) & (s < 1.0), s / (s - 1.0), 0.0)
        q = np.clip(q, -5.0, 0.9)  # bounded: never a wild step from a poor secant
        x2 = q * x1 + (1.0 - q) * g1
        x0, g0, x1 = x1, g1, np.where(done | bad, x1, x2)
    return np.where(np.abs(g(x1) - x1) < tol * 10, x1, np.inf)


def coil_r20(drive: Drive, r_factor):
    """Coil resistance (ohm) at 20 degC, times the corner's ``r_factor``: ``rho`` below."""
    return r_factor * copper_resistance(drive.coil.resistance, drive.coil.reference_temp, 20.0)


def closed_form_temperature(drive: Drive, ambient, r_factor, rms):
    """Coil temperature (degC) for a coil carrying ``rms`` A that does not depend on T.

    With the copper law linear in T, ``T = T_a + R_th rms^2 R(T)`` solves exactly:
    ``T = (T_a + k (1 - 20 a)) / (1 - k a)``, ``k = R_th rms^2 rho``,
    ``rho = r_factor R_ref / (1 + a (T_ref - 20))``; ``inf`` where ``k a >= 1`` (runaway).
    """
    a = COPPER_ALPHA
    rho = coil_r20(drive, r_factor)
    k = drive.thermal.resistance * rms * rms * rho
    den = 1.0 - k * a
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (ambient + k * (1.0 - 20.0 * a)) / den
    return np.where((den > 0) & np.isfinite(t) & (t <= CEILING_C), t, np.inf)
