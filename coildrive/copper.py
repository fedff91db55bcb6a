"""Copper's resistance against temperature (IEC 60028), shared by the files and the model.

The drive file may state a coil by its datasheet (rated voltage and power, pick-up and
drop-out voltages at a stated coil temperature); turning those into currents needs the
resistance at that temperature before any model runs, so the formula lives here, below
both :mod:`coildrive.config` and :mod:`coildrive.model`.
"""

from __future__ import annotations

import numpy as np

#: Temperature coefficient of resistance of annealed copper at 20 degC, 1/K (IEC 60028).
COPPER_ALPHA = 0.00393


def copper_resistance(r_ref, t_ref, temp, alpha: float = COPPER_ALPHA):
    """Resistance in ohm at ``temp`` of copper measuring ``r_ref`` at ``t_ref`` (degC).

    IEC 60028 makes the resistance linear in temperature about 20 degC,
    ``R(T) = R_20 (1 + alpha_20 (T - 20))``, so with ``alpha`` the 20 degC coefficient
    ``R(T) = R_ref (1 + alpha (T - 20)) / (1 + alpha (T_ref - 20))``; for ``T_ref = 20``
    this is ``R_ref (1 + alpha (T - T_ref))``.
    """
    temp = np.asarray(temp, float)
    return np.asarray(r_ref, float) * (1.0 + alpha * (temp - 20.0)) / (1.0 + alpha * (t_ref - 20.0))
