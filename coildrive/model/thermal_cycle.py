"""Thermal transients of a coil switched on and off: a first-order thermal model.

The coil is one heat capacity ``C`` (J/K) tied to the ambient ``T_a`` by the thermal
resistance ``R_th`` (K/W)::

    C dT/dt = P(T) - (T - T_a) / R_th          tau = R_th C

While the coil is on, ``P(T)`` is the copper loss; it depends on the temperature through
the copper resistance. Over the range a transient spans, ``P`` is taken as the straight
line (the chord) through its values at the two ends of that range,
``P(T) = q + s (T - T_a)`` (``q`` the line's value at the ambient, W; ``s`` its slope,
W/K). The equation is then linear with the rate ``lam = (1/R_th - s) / C`` and every
segment is an exponential, solved in closed form -- no time stepping::

    theta(t) = theta0 e^(-lam t) + (q / C) (1 - e^(-lam t)) / lam,   theta = T - T_a

The chord is exact where the power is linear in the temperature (a coil fed a constant
current: ``P = I^2 R(T)``), and lies above the power -- so the temperatures are on the
safe side -- where the power is convex in it (a voltage-driven coil whose resistance is
more than twice the rest of its loop, ``P ~ R/(R + R_x)^2``); the tests measure the
difference against scipy's ODE solver with the true ``P(T)``. ``s > 1/R_th`` (a coil
whose loss grows faster with temperature than its cooling does) makes ``lam`` negative:
the formulas still hold, and where no finite orbit exists the result is ``inf``.

While off, ``P = 0``: ``theta -> theta e^(-t_off / tau)``. The periodic steady state of
an on/off cycle is the fixed point of the two segments, found exactly as for the PWM
hold (:mod:`coildrive.model.pwm`)::

    theta_max = (q / C) g(lam, t_on) / (1 - e^(-lam t_on) e^(-t_off / tau)),
    theta_min = theta_max e^(-t_off / tau),        g(lam, t) = (1 - e^(-lam t)) / lam

With ``s = 0`` this is the textbook peak rise of a rectangular power pulse train on a
first-order RC network, ``P R_th (1 - e^(-t_on/tau)) / (1 - e^(-T/tau))`` (the transient
thermal impedance of power-semiconductor datasheets). Units: s, W, W/K, J/K, K/W, degC.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Hottest coil temperature an orbit may reach (degC); above it, a runaway (``inf``).
CEILING_C = 1000.0


def _rate(slope, r_th, capacity):
    """``lam = (1/R_th - s) / C`` in 1/s."""
    return (1.0 / np.asarray(r_th, float) - slope) / capacity


def _gain(lam, t):
    """``(1 - e^(-lam t)) / lam`` (s), ``t`` where ``lam`` is 0."""
    lam = np.asarray(lam, float)
    t = np.asarray(t, float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        g = -np.expm1(-lam * t) / lam
    return np.where(np.abs(lam * t) < 1e-12, t, g)


def heating(theta0, t, heat, slope, r_th, capacity):
    """Rise above the ambient (K) after ``t`` s on from a rise ``theta0`` K, with the heat
    ``heat + slope * theta`` W (``slope`` W/K), ``R_th`` K/W and ``C`` J/K."""
    lam = _rate(slope, r_th, capacity)
    with np.errstate(over="ignore", invalid="ignore"):
        return theta0 * np.exp(-lam * np.asarray(t, float)) + heat / capacity * _gain(lam, t)


def time_to_rise(theta0, theta_limit, heat, slope, r_th, capacity):
    """Time (s) for the rise above ambient to climb from ``theta0`` to ``theta_limit`` K
    under ``heat + slope * theta`` W: with the net heat ``n(theta) = heat - C lam theta``
    (W, linear in ``theta``), ``t = ln(n0 / n_lim) / lam``, written as
    ``C (theta_lim - theta0) / n_lim * ln(1 + x) / x``, ``x = n0 / n_lim - 1``, which stays
    exact as ``lam`` goes to 0. 0 where it starts at or above the limit; ``inf`` where it
    never gets there (the net heat is not positive all the way: it settles below)."""
    theta0, theta_limit, heat, slope, r_th, capacity = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (theta0, theta_limit, heat, slope, r_th, capacity)))
    lam = _rate(slope, r_th, capacity)
    n0 = heat - capacity * lam * theta0
    n_lim = heat - capacity * lam * theta_limit
    reaches = (n0 > 0) & (n_lim > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = n0 / n_lim - 1.0
        h = np.where(np.abs(x) < 1e-12, 1.0 - 0.5 * x, np.log1p(x) / x)
        t = capacity * (theta_limit - theta0) / n_lim * h
    t = np.where(reaches & np.isfinite(t), t, np.inf)
    return np.where(theta0 >= theta_limit, 0.0, t)


def orbit(heat, slope, t_on, t_off, r_th, capacity):
    """``(theta_max, theta_min)`` K above ambient of the periodic steady state: on for
    ``t_on`` s under ``heat + slope * theta`` W, off for ``t_off`` s (see the module
    docstring); ``inf`` where no finite orbit exists."""
    lam = _rate(slope, r_th, capacity)
    tau = np.asarray(r_th, float) * capacity
    with np.errstate(over="ignore", invalid="ignore"):
        e_on = np.exp(-lam * t_on)
        e_off = np.exp(-np.asarray(t_off, float) / tau)
        den = 1.0 - e_on * e_off
        top = heat / capacity * _gain(lam, t_on) / den
    ok = (den > 0) & np.isfinite(top)
    top = np.where(ok, top, np.inf)
    return top, np.where(ok, top * e_off, np.inf)


def chord(power_at, t_lo, t_hi, ambient, width: float = 1.0):
    """``(heat W, slope W/K)``: the straight line through ``power_at`` at ``t_lo`` and
    ``t_hi`` degC (at least ``width`` K apart), as ``heat + slope * (T - ambient)``."""
    t_lo = np.asarray(t_lo, float)
    t_hi = np.maximum(np.asarray(t_hi, float), t_lo + width)
    p_lo, p_hi = power_at(t_lo), power_at(t_hi)
    slope = (p_hi - p_lo) / (t_hi - t_lo)
    return p_lo - slope * (t_lo - ambient), slope


@dataclass(frozen=True)
class CycleState:
    """The periodic steady state of an on/off cycle at each point (arrays): the hottest
    (end of an on-time) and coolest (start of one) coil temperatures in degC (``inf`` on a
    runaway), and the on-time heat line ``heat + slope * (T - T_a)`` W it was solved with."""

    hottest: np.ndarray
    coolest: np.ndarray
    heat: np.ndarray
    slope: np.ndarray


def cycle_steady_state(ambient, power_at, t_on, t_off, r_th, capacity, tol: float = 1e-4,
                       max_iter: int = 100, ceiling: float = CEILING_C) -> CycleState:
    """The periodic steady state of a coil on for ``t_on`` s and off for ``t_off`` s.

    ``power_at`` maps coil temperatures (degC, an array over the points) to the mean coil
    power over an on-time at that temperature (W). The heat line is the chord of
    ``power_at`` over the orbit's own range ``[coolest, hottest]`` (at least 1 K wide), so
    the orbit and its chord are solved together: start from the ambient, solve the orbit
    of the chord, take the chord over the new range, until no point moves more than
    ``tol`` K. Points above ``ceiling`` degC, without a finite orbit or not settled after
    ``max_iter`` rounds are ``inf``.
    """
    ambient = np.asarray(ambient, float)
    lo = ambient.copy()
    hi = ambient.copy()
    heat = slope = np.zeros_like(ambient)
    bad = np.zeros(ambient.shape, bool)
    for _ in range(max_iter):
        heat, slope = chord(power_at, np.where(bad, ambient, lo), np.where(bad, ambient, hi), ambient)
        top, bottom = orbit(heat, slope, t_on, t_off, r_th, capacity)
        new_hi, new_lo = ambient + top, ambient + bottom
        bad = bad | ~np.isfinite(new_hi) | (new_hi > ceiling)
        moved = np.maximum(np.abs(new_hi - hi), np.abs(new_lo - lo))
        lo, hi = np.where(bad, ambient, new_lo), np.where(bad, ambient, new_hi)
        if np.all(bad | (moved < tol)):
            return CycleState(np.where(bad, np.inf, hi), np.where(bad, np.inf, lo), heat, slope)
    done = moved < tol * 10
    return CycleState(np.where(bad | ~done, np.inf, hi), np.where(bad | ~done, np.inf, lo), heat, slope)


def closed_form_cycle_temperature(drive, ambient, r_factor, rms):
    """Hottest coil (degC) over the on/off cycle of ``drive.duty`` for a coil carrying
    ``rms`` A while on, heat capacity ``drive.thermal.capacity``: with the copper law
    the loss ``rms^2 rho (1 + a (T - 20))`` is linear in T, so the orbit is exact (no
    iteration) -- the cycle's counterpart of
    :func:`coildrive.model.thermal.closed_form_temperature`; ``inf`` on a runaway."""
    from .circuit import COPPER_ALPHA
    from .thermal import coil_r20

    th, cyc = drive.thermal, drive.duty
    p20 = np.asarray(rms, float) ** 2 * coil_r20(drive, r_factor)
    ambient = np.asarray(ambient, float)
    top, _ = orbit(p20 * (1.0 + COPPER_ALPHA * (ambient - 20.0)), p20 * COPPER_ALPHA,
                   cyc.on_time, cyc.off_time, th.resistance, th.capacity)
    t = ambient + top
    return np.where(np.isfinite(t) & (t <= CEILING_C), t, np.inf)
