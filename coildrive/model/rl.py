"""Closed-form first-order RL segments.

Every segment of a switched coil has the form ``i(t) = a + b * exp(-t / tau)``:

* switch on (rise):  ``L di/dt = V - R i``        -> ``a = V/R``,  ``b = i0 - V/R``, ``tau = L/R``
* freewheel (decay): ``L di/dt = -(R i + V_off)`` -> ``a = -V_off/R``, ``b = i0 + V_off/R``;
  the freewheel diode blocks reverse current, so a decay ends when ``i`` reaches zero.

All functions broadcast over numpy arrays; units are A, V, ohm, H, s. Where ``l`` is a
:class:`~coildrive.model.flux.FluxCoil` (a saturating coil) the segment functions hand
over to :mod:`coildrive.model.flux`, which solves the same segments by exact quadrature;
an :class:`~coildrive.model.eddy.EddyCoil` (an eddy resistance across the magnetising
branch) to :mod:`coildrive.model.eddy`, whose currents are the magnetising current and
whose integrals are the terminal current's (see there).
"""

from __future__ import annotations

import numpy as np

from . import eddy, flux
from .eddy import EddyCoil
from .exponential import segment_integrals
from .flux import FluxCoil

ArrayLike = "float | np.ndarray"


def rise_current(t, i0, v, r, l):
    """Current in A after ``t`` s of switch-on from ``i0`` A: ``V/R + (i0 - V/R) e^(-t/tau)``."""
    if isinstance(l, EddyCoil):
        return eddy.rise_current(t, i0, v, r, l)
    if isinstance(l, FluxCoil):
        return flux.current(l, t, i0, v, r)
    a = np.asarray(v, float) / r
    return a + (i0 - a) * np.exp(-np.asarray(t, float) * r / l)


def rise_time(i1, i0, v, r, l):
    """Time in s for a rise from ``i0`` to ``i1`` A; ``inf`` where ``i1 >= V/R`` (unreachable)."""
    if isinstance(l, EddyCoil):
        return eddy.rise_time(i1, i0, v, r, l)
    if isinstance(l, FluxCoil):
        i0, i1 = np.asarray(i0, float), np.asarray(i1, float)
        return np.where(i1 <= i0, 0.0, flux.time(l, i0, np.maximum(i1, i0), v, r))
    a = np.asarray(v, float) / np.asarray(r, float)
    i1 = np.asarray(i1, float)
    i0 = np.asarray(i0, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (np.asarray(l, float) / r) * np.log((a - i0) / (a - i1))
    t = np.where(i1 <= i0, 0.0, t)
    return np.where((i1 > i0) & (i1 >= a), np.inf, t)


def decay_current(t, i0, r, v_off, l):
    """Current in A after ``t`` s of freewheeling from ``i0`` A, held at zero once it gets there."""
    if isinstance(l, EddyCoil):
        return eddy.decay_current(t, i0, r, v_off, l)
    if isinstance(l, FluxCoil):
        return np.maximum(flux.current(l, t, i0, -np.asarray(v_off, float), r), 0.0)
    b = np.asarray(v_off, float) / r
    i = (i0 + b) * np.exp(-np.asarray(t, float) * r / l) - b
    return np.maximum(i, 0.0)


def decay_time(i1, i0, r, v_off, l):
    """Time in s for a freewheel decay from ``i0`` down to ``i1`` A (``0 <= i1 <= i0``).

    ``V_off`` must be positive when ``i1`` is zero (a diode drop always is).
    """
    if isinstance(l, EddyCoil):
        return eddy.decay_time(i1, i0, r, v_off, l)
    if isinstance(l, FluxCoil):
        i0 = np.asarray(i0, float)
        return flux.time(l, i0, np.minimum(np.asarray(i1, float), i0), -np.asarray(v_off, float), r)
    b = np.asarray(v_off, float) / np.asarray(r, float)
    i0 = np.asarray(i0, float)
    i1 = np.minimum(np.asarray(i1, float), i0)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (np.asarray(l, float) / r) * np.log((i0 + b) / (i1 + b))
    return np.where(i1 >= i0, 0.0, t)


def rise_integrals(t, i0, v, r, l):
    """``(int i dt, int i^2 dt)`` over a switch-on segment of length ``t``."""
    if isinstance(l, EddyCoil):
        return eddy.rise_integrals(t, i0, v, r, l)[:2]
    if isinstance(l, FluxCoil):   # (well conditioned up against v/r: a long pulse's flat top)
        return flux.rise_integrals(l, t, i0, v, r)[1:]
    a = np.asarray(v, float) / r
    return segment_integrals(a, i0 - a, np.asarray(l, float) / r, t)


def decay_integrals(t, i0, r, v_off, l):
    """``(int i dt, int i^2 dt)`` over a freewheel segment of length ``t`` (must end at i >= 0)."""
    if isinstance(l, EddyCoil):
        return eddy.decay_integrals(t, i0, r, v_off, l)[:2]
    if isinstance(l, FluxCoil):
        v = -np.asarray(v_off, float)
        end = np.maximum(flux.current(l, t, i0, v, r), 0.0)
        return flux.integral(l, i0, end, v, r, 1), flux.integral(l, i0, end, v, r, 2)
    b = np.asarray(v_off, float) / r
    return segment_integrals(-b, i0 + b, np.asarray(l, float) / r, t)
