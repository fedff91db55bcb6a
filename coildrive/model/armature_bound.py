"""Upper bounds, in closed form, of a moving-armature coil's current during the peak
(switch on from rest at the open stop, zero current), for the rail-current bound of a
system (:mod:`coildrive.design.system`). Linear ``L(x) = L_c / (1 + beta x)``
(:mod:`coildrive.model.magnet`); SI units throughout (V, A, ohm, H, m, kg, N, s).

**Closing only: the open coil's rise is a bound.** With the flux linkage ``lambda =
L(x) i``, ``V = R i + L(x) di/dt + i (dL/dx) dx/dt``. ``dL/dx < 0``; while the armature
stands or closes (``dx/dt <= 0``) the motional term ``i (dL/dx) dx/dt`` is ``>= 0`` and
``L(x) >= L_open``, so wherever ``V - R i >= 0``::

    di/dt = (V - R i - i (dL/dx) dx/dt) / L(x) <= (V - R i) / L_open

and by the comparison theorem for first-order ODEs ``i(t) <= V/R (1 - exp(-t R/L_open))``
(the linear coil at the open gap, the lowest inductance). The motional back-EMF and the
rising inductance only *lower* the current while the armature closes; it is an armature
moving *open* (a rebound, or a turn-back in flight) that can lift the current above that
rise: ``L`` falls under a flux that cannot jump.

**When the armature only closes** (:func:`closing_window`). The closing force
``lambda^2 beta / (2 L_c)`` depends on the flux linkage alone, and ``dlambda/dt = V - R
i > 0`` while ``i <= V/R`` (true under the rise above), so the net closing force ``g(t) =
lambda^2 beta/(2 L_c) - (preload + load)`` is non-decreasing from 0 at the start of
motion. The travel ``y = stroke - x`` then obeys the linear ``m y'' + c y' + k y =
g(t)`` (``k`` the spring rate), so ``y(t) = int S(t - s) dg(s)`` and ``y'(t) = int
h(t - s) dg(s)`` with ``S`` the unit-step response and ``h = S'`` the impulse response.
``h >= 0`` on ``[0, pi/omega_d]`` (for all times when ``c^2 >= 4 k m`` or ``k = 0``),
and ``S <= 1/k`` up to ``tau_1``, the first time the step response reaches its final
value (``(pi - atan2(omega_d, zeta omega_0)) / omega_d``, under damped; never passed
otherwise). So for ``tau_1`` after the start the armature only closes, and if it reaches
the seat there ``k stroke = k y <= g``: the force holds it on an inelastic seat
(``restitution = 0``; a rebound opens it). The start is no sooner than the moment the
open coil's fastest rise reaches the least start current (:func:`earliest_start`).

**Any motion** (:func:`any_motion_rise`): ``L_open <= L(x) <= L_c`` gives ``i <=
lambda / L_open`` and ``dlambda/dt = V - R i <= V - R lambda / L_c``, so ``lambda <= V
L_c/R (1 - exp(-t R/L_c))`` and ``i <= (L_c/L_open) V/R (1 - exp(-t R/L_c))``: the
current a closed coil's flux gives with the gap opened at once (the worst motion reaches
it), used after the window.
"""

from __future__ import annotations

import math

import numpy as np


def closing_window(mass: float, damping: float, rate: float, restitution: float) -> float:
    """Time in s after the armature starts moving within which it is proved to only close
    (and, if it gets there, to stay on the seat) while the switch is on (module docstring):
    ``tau_1`` for an under-damped spring-mass (``c^2 < 4 k m``), ``inf`` otherwise; 0 with
    a bouncing seat (``restitution > 0``), where nothing after the first impact is proved.

    >>> round(closing_window(0.018, 0.0, 100.0, 0.0) * 1e3, 4)   # pi/(2 omega_0), ms
    21.0744
    """
    if restitution > 0:
        return 0.0
    if rate <= 0 or damping * damping >= 4.0 * rate * mass:
        return math.inf
    w0 = math.sqrt(rate / mass)
    zeta = damping / (2.0 * math.sqrt(rate * mass))
    wd = w0 * math.sqrt(1.0 - zeta * zeta)
    return (math.pi - math.atan2(wd, zeta * w0)) / wd


def earliest_start(supply: float, resistance: float, l_open_low: float, l_closed_high: float,
                   ratio: float, beta: float, opening_force: float) -> float:
    """Time in s before which the armature cannot leave the open stop: the open coil's rise
    with ``supply`` V, ``resistance`` ohm and the lowest open inductance ``l_open_low`` H
    (the fastest) reaching the least start current, that of the highest seated inductance
    ``l_closed_high`` H: ``i_s = sqrt(2 L_c F / beta) ratio / L_c`` (``ratio = L_c/L_open``)
    falls as ``L_c`` grows; ``F = opening_force`` N (spring preload + load at the open
    stop), ``beta`` 1/m. 0 when nothing holds it open; ``inf`` when the rise never gets
    there.

    >>> round(earliest_start(12.0, 20.0, 0.025, 0.09, 3.6, 650.0, 0.5) * 1e3, 4)
    1.9183
    """
    if opening_force <= 0 or beta <= 0:
        return 0.0
    i_start = math.sqrt(2.0 * l_closed_high * opening_force / beta) * ratio / l_closed_high
    frac = i_start * resistance / supply
    if frac >= 1.0:
        return math.inf
    return -l_open_low / resistance * math.log1p(-frac)


def any_motion_rise(t, supply: float, resistance: float, l_closed_low: float, ratio: float):
    """Upper bound (A) of the current ``t`` s after switch-on whatever the armature does
    (module docstring): ``(L_c/L_open) V/R (1 - exp(-t R/L_c))`` with the lowest seated
    inductance ``l_closed_low`` H and ``ratio = L_c/L_open`` (the tolerance scales both)."""
    t = np.clip(np.asarray(t, float), 0.0, None)
    return ratio * supply / resistance * -np.expm1(-t * resistance / l_closed_low)


def peak_rise(t, supply: float, resistance: float, l_open_low: float, l_closed_low: float,
              ratio: float, closing_s: float):
    """Upper bound (A) of the current ``t`` s after switch-on during the peak: the open
    coil's rise up to ``closing_s`` (the armature proved to only close until then), the
    any-motion bound after it. Non-decreasing in ``t``."""
    t = np.clip(np.asarray(t, float), 0.0, None)
    rise = supply / resistance * -np.expm1(-t * resistance / l_open_low)
    return np.where(t <= closing_s, rise, any_motion_rise(t, supply, resistance, l_closed_low, ratio))
