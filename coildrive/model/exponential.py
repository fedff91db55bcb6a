"""The integrals of one exponential segment ``i = a + b e^(-t/tau)`` (every segment of a
linear coil, see :mod:`coildrive.model.rl`). Units: A, s."""

from __future__ import annotations

import numpy as np


def segment_integrals(a, b, tau, t):
    """Integrals over ``0..t`` of ``i = a + b e^(-s/tau)``.

    Returns
    -------
    charge : ``int i ds`` in A*s (coulomb)
    square : ``int i^2 ds`` in A^2*s (times a resistance gives joule)
    """
    e1 = -np.expm1(-np.asarray(t, float) / tau)  # 1 - e^(-t/tau), accurate for small t
    e2 = e1 * (2.0 - e1)  # 1 - e^(-2t/tau) = (1 - e^(-t/tau)) (1 + e^(-t/tau))
    charge = a * t + b * tau * e1
    square = a * a * t + 2.0 * a * b * tau * e1 + b * b * tau * 0.5 * e2
    return charge, square
