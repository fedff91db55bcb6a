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

With an eddy-current term (a resistance ``R_e`` across the magnetising branch,
:mod:`coildrive.model.eddy`) the peak is still a linear circuit of two states, the
magnetising current ``i_m`` and the capacitor ``v_C``: the branch sees the loop's
Thevenin pair (``k = R_e/(R + R_e)``) and the capacitor feeds the terminal current
``i = k (i_m + v_C/R_e)``::

    L di_m/dt = k (v_C - R i_m)
    C dv_C/dt = -k (i_m + v_C/R_e)          i_m(0) = i0, v_C(0) = V_b

``e^{A t}`` of ``A = [[-k R/L, k/L], [-k/C, -k/(R_e C)]]`` in closed form
(:mod:`coildrive.model.linear2`; no input, so no steady state but zero). The threshold
is on the terminal current (what the sense resistor sees, :func:`terminal`), the pull-in
on the magnetising current (the flux); each rises monotonically to the first zero of its
slope (:func:`coildrive.model.linear2.first_zero`), the terminal current from its
switch-on step ``V_b/(R + R_e)``. The copper's ``int i^2 dt`` of the terminal current is
``c^T G(t) c``, ``c = k (1, 1/R_e)``, with the Gramian ``G(t) = P - e^{At} P e^{A^T t}``
and ``A P + P A^T = -x(0) x(0)^T`` (a 2x2 Lyapunov equation, solved exactly). An ideal
boost with an eddy term is the eddy coil's RL rise (:func:`coildrive.model.eddy.thevenin`).

A saturating coil (a flux-linkage curve) in place of ``L`` is
:mod:`coildrive.model.flux_boost`'s, with the same functions; :func:`of` names the module
that answers for a boost.

Physics only; SI units (A, V, ohm, H, F, s, J, W); every function broadcasts over arrays.
"""

from __future__ import annotations

import dataclasses
import sys
from dataclasses import dataclass

import numpy as np

from . import flux_boost, linear2, rlc
from .eddy import EddyCoil
from .flux import FluxCoil
from .rl import rise_current, rise_time

#: Bisection steps for the threshold time: the bracket shrinks 2^-60, far below a tick.
BISECTION_STEPS = 60


@dataclass(frozen=True)
class Boost:
    """The boost at each point (arrays broadcast together): ``v_b`` V at switch-on,
    ``c`` F (0: an ideal source), the peak's loop ``r`` ohm (with the boost path's own
    resistance), ``l`` H (the magnetising branch's with an eddy term) and ``g_e`` S the
    eddy conductance ``1/R_e`` (0: none)."""

    v_b: np.ndarray
    c: np.ndarray
    r: np.ndarray
    l: np.ndarray
    g_e: np.ndarray | float = 0.0

    @property
    def eddy(self) -> bool:
        """True with an eddy-current term (the module docstring's two-state circuit)."""
        return bool(np.any(np.asarray(self.g_e) > 0))

    @property
    def k(self) -> np.ndarray:
        """``R_e/(R + R_e)`` (1 without an eddy term)."""
        return 1.0 / (1.0 + self.r * np.asarray(self.g_e, float))

    @property
    def matrix(self) -> tuple:
        """``(a11, a12, a21, a22)`` of the module docstring's ``A`` (eddy term)."""
        k, c = self.k, self._c()
        return -k * self.r / self.l, k / self.l, -k / c, -k * np.asarray(self.g_e, float) / c

    @property
    def ideal(self) -> np.ndarray:
        return ~(self.c > 0)

    def _c(self) -> np.ndarray:
        return np.where(self.c > 0, self.c, 1.0)


def boost(v_b, c, r, l, r_e=None):
    """The boost of the module docstring at each point, with an eddy resistance ``r_e``
    ohm across the magnetising branch ``l`` H (``None``: none); ``l`` a
    :class:`~coildrive.model.flux.FluxCoil` gives :mod:`coildrive.model.flux_boost`'s
    (an eddy term too)."""
    if isinstance(l, FluxCoil):
        return flux_boost.boost(v_b, c, r, l, r_e)
    g_e = 0.0 if r_e is None else 1.0 / np.asarray(r_e, float)
    return Boost(*np.broadcast_arrays(*(np.asarray(x, float) for x in (v_b, c, r, l, g_e))))


def one_point(ind) -> tuple:
    """``(magnetising branch, eddy resistance ohm or None)`` of one operating point's coil
    as :func:`boost` takes them: ``ind`` H, a :class:`~coildrive.model.flux.FluxCoil` or an
    :class:`~coildrive.model.eddy.EddyCoil` (either branch) of one point."""
    r_e = None
    if isinstance(ind, EddyCoil):
        ind, r_e = ind.magnetising, float(np.ravel(ind.resistance)[0])
    if isinstance(ind, FluxCoil):
        return ind.with_scale(float(np.ravel(ind.scale)[0])), r_e
    return float(np.ravel(ind)[0]), r_e


def with_voltage(b, v_b):
    """The boost ``b`` (this module's or :mod:`coildrive.model.flux_boost`'s) charged to
    ``v_b`` V at its switch-on instead."""
    return dataclasses.replace(b, v_b=np.broadcast_to(np.asarray(v_b, float), np.shape(b.v_b)) + 0.0)


def of(b):
    """The module that answers for the boost ``b``: :mod:`coildrive.model.flux_boost` for a
    saturating coil's, else this one."""
    return flux_boost if isinstance(b, flux_boost.FluxBoost) else sys.modules[__name__]


def state(t, b: Boost, i0=0.0) -> tuple[np.ndarray, np.ndarray]:
    """``(coil current A, boost voltage V)`` ``t`` s after switch-on, from the current ``i0``
    A then (0: from rest) and the boost at ``b.v_b`` (``x'(0) = i0`` in the closed form).
    With an eddy term the current is the magnetising current (:func:`terminal` the
    sensed one)."""
    if b.eddy:
        return _eddy_state(t, b, i0)
    c = b._c()
    x, i = rlc.state(t, -c * b.v_b, i0, b.r, b.l, c)
    ideal = b.ideal
    i = np.where(ideal, rise_current(t, i0, b.v_b, b.r, b.l), i)
    v = np.where(ideal, b.v_b, -x / c)
    return i, v


def _eddy_state(t, b: Boost, i0=0.0) -> tuple[np.ndarray, np.ndarray]:
    """:func:`state` with an eddy term (module docstring)."""
    a = b.matrix
    l1, l2 = linear2.eigenvalues(*a)
    i0 = np.broadcast_to(np.asarray(i0, float), b.v_b.shape)
    i, v = linear2.apply(t, a, l1, l2, (i0, b.v_b))
    ideal = b.ideal
    i = np.where(ideal, rise_current(t, i0, b.k * b.v_b, b.k * b.r, b.l), i)
    return i, np.where(ideal, b.v_b, v)


def terminal(i, v, b: Boost) -> np.ndarray:
    """The coil's terminal current (A) at magnetising current ``i`` A and boost ``v`` V:
    ``k (i + v/R_e)`` (``i`` itself without an eddy term)."""
    if not b.eddy:
        return np.asarray(i, float)
    return b.k * (np.asarray(i, float) + np.asarray(b.g_e, float) * np.asarray(v, float))


def current(t, b: Boost, sensed: bool = False) -> np.ndarray:
    """The magnetising current (A) ``t`` s after switch-on from rest, or with ``sensed``
    the terminal current (the same without an eddy term)."""
    i, v = state(t, b)
    return terminal(i, v, b) if sensed else i


def _eddy_peak_time(b: Boost, sensed: bool) -> np.ndarray:
    """The first maximum (s) of the magnetising or (``sensed``) terminal current from
    rest with an eddy term: the first zero of its slope (0 where it starts falling)."""
    a = b.matrix
    l1, l2 = linear2.eigenvalues(*a)
    z = linear2.times(a, (np.zeros_like(b.v_b), b.v_b))
    zz = linear2.times(a, z)
    w = (b.k, b.k * b.g_e) if sensed else (1.0, 0.0)
    g0 = w[0] * z[0] + w[1] * z[1]
    g1 = w[0] * zz[0] + w[1] * zz[1]
    return np.where(g0 > 0, linear2.first_zero(g0, g1, l1, l2), 0.0)


def peak_time(b: Boost, sensed: bool = False) -> np.ndarray:
    """When the current (with ``sensed`` the terminal one) has its first maximum (s;
    ``inf`` for an ideal source)."""
    if b.eddy:
        return np.where(b.ideal, np.inf, _eddy_peak_time(b, sensed))
    c = b._c()
    with np.errstate(invalid="ignore", divide="ignore"):
        t = rlc.first_peak(-c * b.v_b, 0.0, b.r, b.l, c)
    return np.where(b.ideal, np.inf, t)


def highest_current(b: Boost, sensed: bool = False) -> np.ndarray:
    """The most current the boost can drive (A): the first maximum, or ``V_b / R`` (with
    ``sensed`` of the terminal current)."""
    t = peak_time(b, sensed)
    return np.where(b.ideal, b.v_b / b.r, current(np.where(b.ideal, 0.0, t), b, sensed))


def threshold_time(i_target, b: Boost, sensed: bool = False) -> np.ndarray:
    """Time (s) from switch-on to ``i_target`` A (``inf`` where the boost never drives it
    there) of the magnetising current, or with ``sensed`` the terminal current: closed
    form for an ideal source, else a bisection on ``[0, first peak]``."""
    target = np.broadcast_to(np.asarray(i_target, float), b.v_b.shape)
    if b.eddy:
        # the ideal source: the terminal current (V/R)(1 - k e^{-t/tau}) rises like an RL
        # current from V/(R + R_e); the magnetising one is the Thevenin pair's RL rise
        k = b.k
        start = b.v_b * k * np.asarray(b.g_e, float) if sensed else 0.0
        ideal_t = rise_time(target, start, b.v_b, b.r, b.l / k) if sensed else \
            rise_time(target, 0.0, k * b.v_b, k * b.r, b.l)
        ideal_t = np.where(target <= start, 0.0, ideal_t)
    else:
        ideal_t = rise_time(target, 0.0, b.v_b, b.r, b.l)
    hi = np.where(b.ideal, 0.0, peak_time(b, sensed))
    reached = current(hi, b, sensed) >= target
    lo = np.zeros_like(hi)
    for _ in range(BISECTION_STEPS):
        mid = 0.5 * (lo + hi)
        up = current(mid, b, sensed) >= target
        lo, hi = np.where(up, lo, mid), np.where(up, mid, hi)
    cap_t = np.where(reached, hi, np.inf)
    return np.where(b.ideal, ideal_t, np.where(target <= 0, 0.0, cap_t))


def energy_drawn(t, b: Boost) -> np.ndarray:
    """Energy (J) the boost gives in the first ``t`` s: ``1/2 C (V_b^2 - v_C^2)``, or for an
    ideal source ``V_b int i dt`` with ``int i dt = (V_b/R) t - (L/R) i(t)`` (with an eddy
    term the same with ``i`` the magnetising current: the terminal current is ``(V_b/R)(1
    - k e^{-t/tau})``, ``tau = L/(k R)``, and ``i_m = (V_b/R)(1 - e^{-t/tau})``)."""
    i, v = state(t, b)
    charge = b.v_b / b.r * np.asarray(t, float) - b.l / b.r * i
    return np.where(b.ideal, b.v_b * charge, 0.5 * b.c * (b.v_b**2 - v**2))


def square_integral(t, b: Boost) -> np.ndarray:
    """``int_0^t i^2 dt`` (A^2 s) of the rise from rest: by the energy balance of the module
    docstring, ``(E_drawn(t) - 1/2 L i(t)^2) / R`` -- closed form, no quadrature."""
    if b.eddy:
        return _eddy_square_integral(t, b)
    i = state(t, b)[0]
    return (energy_drawn(t, b) - 0.5 * b.l * i**2) / b.r


def eddy_loss(t, b: Boost) -> np.ndarray:
    """J the eddy resistance takes in the first ``t`` s from rest (0 without an eddy
    term), by the energy balance: the boost's energy less the field's ``1/2 L i_m^2`` and
    the loop's ``R int i^2 dt`` (the terminal current through the loop's copper)."""
    if not b.eddy:
        return np.zeros(np.broadcast(np.asarray(t, float), b.v_b).shape)
    i_m = state(t, b)[0]
    return energy_drawn(t, b) - 0.5 * b.l * i_m**2 - b.r * square_integral(t, b)


def _eddy_square_integral(t, b: Boost) -> np.ndarray:
    """``int_0^t i^2 dt`` of the terminal current with an eddy term: the capacitor's by
    the Gramian of the module docstring; the ideal source's from ``i = (V/R)(1 - k
    e^{-t/tau})``, ``tau = L/(k R)``: ``(V/R)^2 (t - 2 k tau (1 - e^{-t/tau}) + k^2 tau/2
    (1 - e^{-2t/tau}))``."""
    t = np.asarray(t, float)
    k = b.k
    tau = b.l / (k * b.r)
    ideal = (b.v_b / b.r)**2 * (t + 2.0 * k * tau * np.expm1(-t / tau) - 0.5 * k**2 * tau * np.expm1(-2.0 * t / tau))
    a11, a12, a21, a22 = b.matrix
    y1, y2 = np.zeros_like(b.v_b), b.v_b
    # A P + P A^T = -y y^T for P = [[p, q], [q, s]]: three linear equations in (p, q, s)
    m = np.stack([np.stack([2 * a11, 2 * a12, 0 * a11], -1),
                  np.stack([a21, a11 + a22, a12], -1),
                  np.stack([0 * a11, 2 * a21, 2 * a22], -1)], -2)
    rhs = -np.stack([y1 * y1, y1 * y2, y2 * y2], -1)[..., None]
    p, q, s = np.moveaxis(np.linalg.solve(m, rhs)[..., 0], -1, 0)
    l1, l2 = linear2.eigenvalues(a11, a12, a21, a22)
    # e^{At} P e^{A^T t} = F P F^T with F's columns e^{At} e_1, e^{At} e_2
    f11, f21 = linear2.apply(t, (a11, a12, a21, a22), l1, l2, (np.ones_like(y2), np.zeros_like(y2)))
    f12, f22 = linear2.apply(t, (a11, a12, a21, a22), l1, l2, (np.zeros_like(y2), np.ones_like(y2)))
    c1, c2 = k, k * np.asarray(b.g_e, float)
    u1, u2 = c1 * f11 + c2 * f21, c1 * f12 + c2 * f22      # c^T F
    gram = (c1 * c1 * p + 2 * c1 * c2 * q + c2 * c2 * s) - (u1 * u1 * p + 2 * u1 * u2 * q + u2 * u2 * s)
    return np.where(b.ideal, ideal, gram)


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
    m = of(b)
    v_during = m.state(np.minimum(t, peak_end), b)[1]
    v_end = float(m.state(peak_end, b)[1])
    after = recharge_voltage(v_end, np.maximum(t - peak_end, 0.0), float(b.c), power, float(b.v_b))
    return np.where(t <= peak_end, v_during, after)


def recharge_voltage(v_end, dt, c, power, v_full) -> np.ndarray:
    """The capacitor's voltage (V) ``dt`` s into its recharge from ``v_end`` V at a constant
    ``power`` W into ``c`` F: ``sqrt(v_end^2 + 2 P dt / C)``, up to ``v_full`` V (the
    converter's regulation); ``v_end`` while ``power`` is 0."""
    return np.minimum(np.sqrt(np.asarray(v_end, float)**2 + 2.0 * power * np.asarray(dt, float) / c), v_full)
