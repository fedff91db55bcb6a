"""A latching coil's pulses: the energy of one pulse, and how soon the next may follow.

A pulse switches the coil on from zero for ``t`` s (the RL rise of
:mod:`coildrive.model.rl`) and then lets its current decay to zero through the release
path (a bridge's fast decay into the bus, or the winding's freewheel path). Over the
whole pulse, from zero current back to zero, the coil's stored energy cancels and the
supply's energy is exactly what the elements take::

    V_bus Q_on = R_coil (S_on + S_d) + R_sw,n S_on + R_sense (S_on [+ S_d]) + E_freewheel + V_bus Q_d

(``Q``, ``S``: ``int i dt`` and ``int i^2 dt`` over the on-time and the decay; ``V_bus Q_d``
is what a bridge's fast decay returns to the bus, 0 through a freewheel path across the
coil).

The coil's temperature under a train of pulses every ``T`` s is the first-order model
of :mod:`coildrive.model.thermal_cycle` (heat capacity ``C``, time constant ``tau = R_th
C``). Taking each pulse's copper heat ``E`` as deposited at once (an upper bound: it
really spreads over the pulse, while the coil already cools), the periodic steady state
just after a pulse is ``theta = (E / C) / (1 - e^(-T / tau))`` above the ambient -- the
``t_on -> 0`` limit of the cycle orbit there -- so the shortest interval that keeps it
at or below ``theta_max`` is ``T = -tau ln(1 - E / (C theta_max))`` (none when ``E / C >=
theta_max``: one pulse is already too hot).

An on/off cycle (``[duty]``) is a set pulse every ``P = on + off`` s and a reset pulse
``on`` s after each: copper heats ``E_s`` and ``E_r``. Just after each pulse in the
periodic steady state (the same impulses)::

    theta_s = (E_s / C + e^(-off / tau) E_r / C) / (1 - e^(-P / tau))
    theta_r = (E_r / C + e^(-on / tau) E_s / C) / (1 - e^(-P / tau))

(with ``E_s = E_r`` and ``on = off = T`` both are ``(E / C) / (1 - e^(-T / tau))``, the
train above).

A pulse from a capacitor behind a source resistance ``R_s`` leaves it ``dV`` below the
supply; with the coil off the bus it recharges as ``V_s - (V_s - V_c) e^(-t / R_s C)``.
Pulses designed from a bus ``k V_s`` (``k = 1 - recharge_tolerance``) may start once it is
back there: from at worst ``k V_s - dV`` (``dV`` the droop of a pulse from a full
capacitor; starting lower the source helps more, so that bounds it), the time is
``R_s C ln(1 + dV / ((1 - k) V_s))``.

SI units (J, J/K, s, K, V, ohm, F); every function broadcasts over arrays.
"""

from __future__ import annotations

import numpy as np


def peak_rise(energy, interval, capacity, time_constant):
    """Coil temperature rise (K) just after each pulse in the periodic steady state of
    pulses of ``energy`` J every ``interval`` s (module docstring)."""
    e, t, c, tau = (np.asarray(x, float) for x in (energy, interval, capacity, time_constant))
    with np.errstate(divide="ignore"):
        return (e / c) / -np.expm1(-t / tau)


def shortest_interval(energy, capacity, time_constant, rise_limit):
    """Shortest interval (s) between pulses of ``energy`` J whose periodic rise stays at or
    below ``rise_limit`` K; ``inf`` where one pulse alone passes it."""
    e, c, tau, lim = (np.asarray(x, float) for x in (energy, capacity, time_constant, rise_limit))
    ratio = e / (c * lim)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = -tau * np.log1p(-ratio)
    return np.where(ratio >= 1.0, np.inf, np.where(ratio <= 0.0, 0.0, t))


def cycle_rises(set_energy, reset_energy, on_time, off_time, capacity, time_constant):
    """Coil temperature rises (K) just after the set and just after the reset pulse in
    the periodic steady state of an on/off cycle (module docstring)."""
    es, er, on, off, c, tau = (np.asarray(x, float) for x in (set_energy, reset_energy, on_time,
                                                               off_time, capacity, time_constant))
    denom = -np.expm1(-(on + off) / tau)
    return ((es + np.exp(-off / tau) * er) / c / denom, (er + np.exp(-on / tau) * es) / c / denom)


def recharge_time(droop, supply, tolerance, source_resistance, capacitance):
    """Time (s) for a capacitor left ``droop`` V low by a pulse to be back within
    ``tolerance`` (a fraction) of ``supply`` V through ``source_resistance`` ohm, having
    started the pulse as low as that (module docstring)."""
    d, v, k = (np.asarray(x, float) for x in (droop, supply, tolerance))
    tau = np.asarray(source_resistance, float) * np.asarray(capacitance, float)
    return tau * np.log1p(np.maximum(d, 0.0) / (k * v))
