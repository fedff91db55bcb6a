"""Coil self-heating: the coil temperature as a fixed point of ``T = T_amb + R_th P(T)``.

``P(T)`` is the copper loss ``I_rms(T)^2 R_coil(T)`` during the hold. In voltage-mode
hold the current falls as the copper warms, so the iteration contracts; where it does
not settle (a thermal runaway, or a result beyond any sane coil) the temperature is
returned as ``inf`` and the design's temperature check fails.
"""

from __future__ import annotations

import numpy as np


def settle_temperature(ambient, thermal_resistance, power_at, tol: float = 1e-6,
                       max_iter: int = 200, ceiling: float = 1000.0):
    """Solve ``T = ambient + R_th * power_at(T)`` for every point (degC, K/W, W).

    ``power_at`` maps an array of coil temperatures to coil power in W. Iterates from the
    ambient; stops when every point moved less than ``tol`` K. Points above ``ceiling``
    degC or not settled after ``max_iter`` iterations are returned as ``inf``.
    """
    ambient = np.asarray(ambient, float)
    temp = ambient.copy()
    if np.all(np.asarray(thermal_resistance) == 0):
        return temp
    settled = False
    for _ in range(max_iter):
        new = ambient + thermal_resistance * power_at(temp)
        new = np.where(np.isfinite(new) & (new < ceiling), new, np.inf)
        step = np.abs(new - temp)
        temp = new
        if np.all((step < tol) | ~np.isfinite(temp)):
            settled = True
            break
    if not settled:
        temp = np.where(step < 1e-3, temp, np.inf)
    return temp
