"""The boosted peak: a second, higher voltage drives the coil until a current threshold.

The circuit (low-side switch; the boost switch and the main supply's diode feed the top
of the coil)::

    boost ──┬── C_b ── 0 V          (boost converter charging C_b between actuations)
            │
           Q_b  boost switch (on in the peak; R_b = its on-resistance + C_b's ESR)
            │
            ├─────────────┬──── D_m ──── V_main   (the hold runs from the main supply)
            │            coil  R_coil(T), L
          freewheel       │
          path  ──────────┤ drain
                         Q1  low-side switch ── R_sense ── 0 V

A high-side switch sits between the same rail (the top node above) and the coil, whose
other end goes to ground; the freewheel path runs from ground to the switch node. The
peak's loop is the same (:mod:`coildrive.model.high_side`).

In the peak Q_b and Q1 are on; ``D_m`` blocks while the boost capacitor stays above the
main supply. The loop: ``L di/dt = v_C - (R_on + R_b) i``, ``C_b dv_C/dt = -i``,
``i(0) = 0``, ``v_C(0) = V_b`` -- with ``x = -C_b v_C`` the series RLC circuit of
:mod:`coildrive.model.rlc` (``x(0) = -C_b V_b``, ``x'(0) = 0``). The current rises
monotonically to its first maximum (:func:`coildrive.model.rlc.first_peak`), where the
capacitor can no longer push it higher; the time to a threshold is a bisection of the
closed form on that monotone stretch. With no capacitance given the boost is an ideal
source: the plain RL rise towards ``V_b / R``.

Energy: the capacitor gives up ``1/2 C_b (V_b^2 - v_C^2)``, which is the field's
``1/2 L i^2`` plus the loop's ``int R i^2 dt``; an ideal source gives ``V_b int i dt``.
Recharging ``E`` at a constant power ``P`` takes ``E / P`` (a boost converter that
delivers constant power: ``t = 1/2 C (V_b^2 - v_end^2) / P``).

Physics only; SI units (A, V, ohm, H, F, s, J, W); every function broadcasts over arrays.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import rlc
from .rl import rise_current, rise_time

#: Bisection steps for the threshold time: the bracket shrinks 2^-60, far below a tick.
BISECTION_STEPS = 60


@dataclass(frozen=True)
class Boost:
    """The boost at each point (arrays broadcast together): ``v_b`` V at switch-on,
    ``c`` F (0: an ideal source), the peak's loop ``r`` ohm (with the boost path's own
    resistance) and ``l`` H."""

    v_b: np.ndarray
    c: np.ndarray
    r: np.ndarray
    l: np.ndarray

    @property
    def ideal(self) -> np.ndarray:
        return ~(self.c > 0)

    def _c(self) -> np.ndarray:
        return np.where(self.c > 0, self.c, 1.0)


def boost(v_b, c, r, l) -> Boost:
    """The boost of the module docstring at each point."""
    return Boost(*np.broadcast_arrays(*(np.asarray(x, float) for x in (v_b, c, r, l))))


def state(t, b: Boost, i0=0.0) -> tuple[np.ndarray, np.ndarray]:
    """``(coil current A, boost voltage V)`` ``t`` s after switch-on, from the current ``i0``
    A then (0: from rest) and the boost at ``b.v_b`` (``x'(0) = i0`` in the closed form)."""
    c = b._c()
    x, i = rlc.state(t, -c * b.v_b, i0, b.r, b.l, c)
    ideal = b.ideal
    i = np.where(ideal, rise_current(t, i0, b.v_b, b.r, b.l), i)
    v = np.where(ideal, b.v_b, -x / c)
    return i, v


def peak_time(b: Boost) -> np.ndarray:
    """When the current has its first maximum (s; ``inf`` for an ideal source)."""
    c = b._c()
    with np.errstate(invalid="ignore", divide="ignore"):
        t = rlc.first_peak(-c * b.v_b, 0.0, b.r, b.l, c)
    return np.where(b.ideal, np.inf, t)


def highest_current(b: Boost) -> np.ndarray:
    """The most current the boost can drive (A): the first maximum, or ``V_b / R``."""
    t = peak_time(b)
    return np.where(b.ideal, b.v_b / b.r, state(np.where(b.ideal, 0.0, t), b)[0])


def threshold_time(i_target, b: Boost) -> np.ndarray:
    """Time (s) from switch-on to ``i_target`` A (``inf`` where the boost never drives it
    there): closed form for an ideal source, else a bisection on ``[0, first peak]``."""
    target = np.broadcast_to(np.asarray(i_target, float), b.v_b.shape)
    ideal_t = rise_time(target, 0.0, b.v_b, b.r, b.l)
    hi = np.where(b.ideal, 0.0, peak_time(b))
    reached = state(hi, b)[0] >= target
    lo = np.zeros_like(hi)
    for _ in range(BISECTION_STEPS):
        mid = 0.5 * (lo + hi)
        up = state(mid, b)[0] >= target
        lo, hi = np.where(up, lo, mid), np.where(up, mid, hi)
    cap_t = np.where(reached, hi, np.inf)
    return np.where(b.ideal, ideal_t, np.where(target <= 0, 0.0, cap_t))


def energy_drawn(t, b: Boost) -> np.ndarray:
    """Energy (J) the boost gives in the first ``t`` s: ``1/2 C (V_b^2 - v_C^2)``, or for an
    ideal source ``V_b int i dt`` with ``int i dt = (V_b/R) t - (L/R) i(t)``."""
    i, v = state(t, b)
    charge = b.v_b / b.r * np.asarray(t, float) - b.l / b.r * i
    return np.where(b.ideal, b.v_b * charge, 0.5 * b.c * (b.v_b**2 - v**2))


def square_integral(t, b: Boost) -> np.ndarray:
    """``int_0^t i^2 dt`` (A^2 s) of the rise from rest: by the energy balance of the module
    docstring, ``(E_drawn(t) - 1/2 L i(t)^2) / R`` -- closed form, no quadrature."""
    i = state(t, b)[0]
    return (energy_drawn(t, b) - 0.5 * b.l * i**2) / b.r


def recharge_time(energy, power) -> np.ndarray:
    """Time (s) to put ``energy`` J back at a constant charging ``power`` W: ``E / P``."""
    return np.asarray(energy, float) / np.asarray(power, float)


def voltage_trace(t, peak_end: float, b: Boost, power: float) -> np.ndarray:
    """The boost voltage (V) over an actuation at times ``t`` s (one point ``b``): the
    capacitor's discharge until the peak ends at ``peak_end`` s, then its recharge at a
    constant ``power`` W, ``v = sqrt(v_end^2 + 2 P (t - t_end) / C)`` up to ``V_b`` (held at
    ``v_end`` without a power); an ideal source stays at ``V_b``."""
    t = np.asarray(t, float)
    if bool(np.all(b.ideal)):
        return np.full(t.shape, float(b.v_b))
    v_during = state(np.minimum(t, peak_end), b)[1]
    v_end = float(state(peak_end, b)[1])
    after = recharge_voltage(v_end, np.maximum(t - peak_end, 0.0), float(b.c), power, float(b.v_b))
    return np.where(t <= peak_end, v_during, after)


def recharge_voltage(v_end, dt, c, power, v_full) -> np.ndarray:
    """The capacitor's voltage (V) ``dt`` s into its recharge from ``v_end`` V at a constant
    ``power`` W into ``c`` F: ``sqrt(v_end^2 + 2 P dt / C)``, up to ``v_full`` V (the
    converter's regulation); ``v_end`` while ``power`` is 0."""
    return np.minimum(np.sqrt(np.asarray(v_end, float)**2 + 2.0 * power * np.asarray(dt, float) / c), v_full)
