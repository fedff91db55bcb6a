"""The full bridge's two decay paths, the energy they return to the supply, and the bus
pump-up when the supply cannot take it back.

Four switches (on-resistance ``R_sw`` each, body-diode drop ``V_d``) put the coil between
the bridge's two legs, A and B::

    V_bus ──┬──────────────┬──────────── (bulk capacitance C across the bus)
           Q1             Q3            high-side switches, body diodes to the bus
            A ── coil ──── B            coil: R_coil(T), L; [R_sense inline: position "coil"]
           Q2             Q4            low-side switches, body diodes from the rail
            └──────┬───────┘
                [R_sense: position "switch", the common return] ── ground

* drive (Q1 + Q4 on): ``V_bus = (R_coil + 2 R_sw + R_sense) i + L di/dt``;
* slow decay (Q2 + Q4 on, the current recirculating through the two low-side switches,
  past a common-return sense resistor): ``0 = (R_coil + 2 R_sw [+ R_sense inline]) i +
  L di/dt``; nothing goes back to the supply;
* fast decay (all off): the current flows on from ground through Q2's body diode, the
  coil, and Q3's body diode into the bus -- through the sense resistor in either
  position -- so the coil sees ``-(V_bus + 2 V_d)``: ``L di/dt = -((R_coil + R_sense) i +
  V_bus + 2 V_d)``. Node B rises to ``V_bus + V_d``, node A falls to ``-V_d``: the
  switches see ``V_bus + V_d``. The supply takes back ``V_bus * int i dt``; the diodes
  take ``2 V_d int i dt``, the copper and the sense resistor the rest of ``1/2 L i0^2``.

When the supply cannot sink current (a diode in its feed, a source that only sources),
the returned charge lands on the bulk capacitance alone, and the bus rises as the coil
empties. The coil then decays against ``V_c(t) + 2 V_d`` -- a series RLC circuit,
``L di/dt = -(R i + V_c + 2 V_d)``, ``C dV_c/dt = i`` -- whose current is closed form
(under-, critically or overdamped) and stops at its first zero (the body diodes
block). :func:`pump_up` gives the bus voltage then, ``V_2``, with ``1/2 C (V_2^2 - V_1^2)``
the energy returned.

Physics only; SI units (A, V, ohm, H, F, s, J); every function broadcasts over arrays.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import flux
from .eddy import EddyCoil
from .flux import FluxCoil
from . import rlc
from .flux_bus import hermite
from .rl import decay_integrals, decay_time


@dataclass(frozen=True)
class DecayPath:
    """A decay path ``L di/dt = -(r_off i + v_off)`` (ohm, V) and the voltage the supply
    pushes back against (``v_return``, V: the bus for the fast path, 0 for the slow)."""

    r_off: np.ndarray
    v_off: np.ndarray
    v_return: np.ndarray


def slow_decay(r_coil, r_switch, r_sense, sense_inline: bool) -> DecayPath:
    """The slow path: both low-side switches on, the current recirculating through them
    (and through the sense resistor only when it sits inline with the coil)."""
    r = np.asarray(r_coil, float) + 2.0 * np.asarray(r_switch, float) + (
        np.asarray(r_sense, float) if sense_inline else 0.0)
    zero = np.zeros(np.shape(r))
    return DecayPath(r, zero, zero)


def fast_decay(r_coil, r_sense, supply, v_diode) -> DecayPath:
    """The fast path: all switches off, the current through two body diodes back into
    the bus (and through the sense resistor in either position)."""
    r = np.asarray(r_coil, float) + np.asarray(r_sense, float)
    supply = np.asarray(supply, float)
    return DecayPath(r + 0.0 * supply, supply + 2.0 * np.asarray(v_diode, float) + 0.0 * r, supply + 0.0 * r)


def fast_switch_voltage(supply, v_diode, r_sense, sense_inline: bool, current):
    """The highest switch voltage (V) while ``current`` A decays fast: node B at ``V_bus +
    V_d``, node A at ``-V_d``, and with the sense resistor in the common return the rail
    below the low-side switches at ``-R_sense i`` -- so Q1 and Q4 see ``V_bus + V_d`` (+
    ``R_sense i`` from a common-return resistor)."""
    drop = 0.0 if sense_inline else np.asarray(r_sense, float) * np.asarray(current, float)
    return np.asarray(supply, float) + np.asarray(v_diode, float) + drop


@dataclass(frozen=True)
class Release:
    """A decay from ``i0`` A to zero through one path at a fixed bus: the time to the
    drop-out current and to zero (s), the charge through the coil (C), and where the
    coil's stored energy ``1/2 L i0^2`` goes (J): ``returned`` to the supply,
    ``resistive`` in the loop's resistances, ``diodes`` in the body diodes (the rest of
    the path's constant voltage, ``v_off - v_return``)."""

    drop_time: np.ndarray
    zero_time: np.ndarray
    charge: np.ndarray
    returned: np.ndarray
    resistive: np.ndarray
    diodes: np.ndarray


def release(path: DecayPath, i0, i_drop, inductance) -> Release:
    """The decay of ``i0`` A through ``path`` (closed form, :mod:`coildrive.model.rl`; a
    :class:`~coildrive.model.flux.FluxCoil` ``inductance`` by its exact quadrature).

    A path with no opposing voltage (the slow one) never reaches zero in finite time:
    its ``zero_time`` is infinite, and its integrals are those of the whole exponential
    tail (``charge = L i0 / r``, ``square = L i0^2 / (2 r)``; with a flux-linkage curve
    ``psi(i0) / r`` and ``W(i0) / r``, ``W = int i dpsi`` the stored energy)."""
    i0 = np.asarray(i0, float)
    t_drop = decay_time(i_drop, i0, path.r_off, path.v_off, inductance)
    with np.errstate(divide="ignore", invalid="ignore"):
        t_zero = np.where(path.v_off > 0, decay_time(0.0, i0, path.r_off, path.v_off, inductance), np.inf)
    finite = np.where(np.isfinite(t_zero), t_zero, 0.0)
    q, s = decay_integrals(finite, i0, path.r_off, path.v_off, inductance)
    if isinstance(inductance, FluxCoil):   # int i dt = psi(i0) / r, int i^2 dt = W(i0) / r
        tail_q = flux.linkage(inductance, i0) / path.r_off
        tail_s = flux.energy(inductance, i0) / path.r_off
    else:
        tail_q = np.asarray(inductance, float) * i0 / path.r_off
        tail_s = np.asarray(inductance, float) * i0**2 / (2.0 * path.r_off)
    q = np.where(np.isfinite(t_zero), q, tail_q)
    s = np.where(np.isfinite(t_zero), s, tail_s)
    return Release(t_drop, t_zero, q, path.v_return * q, path.r_off * s,
                   (path.v_off - path.v_return) * q)


@dataclass(frozen=True)
class PumpUp:
    """The bus after a fast decay into the bulk capacitance alone: ``v2`` (V) when the
    current has stopped, ``delta_v = v2 - v1``, ``returned`` = ``1/2 C (v2^2 - v1^2)``
    (J), the time the current takes to stop (s) and the charge it moved (C)."""

    v2: np.ndarray
    delta_v: np.ndarray
    returned: np.ndarray
    zero_time: np.ndarray
    charge: np.ndarray


def pump_up(i0, v1, capacitance, r_off, inductance, v_diode, drops: int = 2) -> PumpUp:
    """The bus voltage after the fast decay of ``i0`` A into a capacitance of
    ``capacitance`` F charged to ``v1`` V, through the loop resistance ``r_off`` ohm and
    ``drops`` body-diode drops ``v_diode`` V (the supply cannot take current back): two
    into the bulk capacitance; three into a boost capacitor behind the boost switch's body
    diode (a latching coil on a full bridge from the boost, :mod:`coildrive.design.latch_boost`;
    a linear coil only).

    With ``q`` the charge into the capacitor and ``x = q + C (v1 + n V_d)`` (``n`` the
    drops), the loop gives ``L x'' + R x' + x / C = 0``, ``x(0) = C (v1 + n V_d)``, ``x'(0) = i0``: the
    series RLC circuit of any circuits textbook (:mod:`coildrive.model.rlc`), with
    ``alpha = R / 2L`` and ``omega0 = 1 / sqrt(LC)``. The current ``i = x'`` stops at its
    first zero:

    * underdamped (``omega0 > alpha``, ``omega_d = sqrt(omega0^2 - alpha^2)``): ``i =
      e^(-alpha t) (i0 cos omega_d t - (alpha b + omega_d a) sin omega_d t)`` with ``a =
      x(0)``, ``b = (i0 + alpha a) / omega_d``: zero at ``atan2(i0, alpha b + omega_d a) /
      omega_d``;
    * overdamped (``s1,2 = -alpha +/- beta``): ``x = c1 e^(s1 t) + c2 e^(s2 t)``: zero where
      ``e^(2 beta t) = -s2 c2 / (s1 c1)``;
    * critically damped: ``i = e^(-alpha t) (i0 - alpha (i0 + alpha a) t)``.

    A :class:`~coildrive.model.flux.FluxCoil` ``inductance`` (a saturating coil) has no
    closed form: :func:`flux_pump_up`; nor has an
    :class:`~coildrive.model.eddy.EddyCoil` (an eddy resistance across the branch):
    :func:`_eddy_pump_up`, where ``i0`` is the magnetising current at the turn-off.
    """
    if isinstance(inductance, (EddyCoil, FluxCoil)) and drops != 2:
        raise ValueError("a saturating coil's or an eddy term's pump-up takes two body-diode drops")
    if isinstance(inductance, EddyCoil):
        return _eddy_pump_up(i0, v1, capacitance, r_off, inductance, v_diode)
    if isinstance(inductance, FluxCoil):
        return flux_pump_up(i0, v1, capacitance, r_off, inductance, v_diode)
    i0, v1, c = (np.asarray(x, float) for x in (i0, v1, capacitance))
    r, ind = np.asarray(r_off, float), np.asarray(inductance, float)
    i0, v1, c, r, ind, vd = np.broadcast_arrays(i0, v1, c, r, ind, np.asarray(v_diode, float))
    a = c * (v1 + drops * vd)
    t_zero = rlc.first_zero(a, i0, r, ind, c)
    x, _ = rlc.state(t_zero, a, i0, r, ind, c)
    q = x - a
    v2 = v1 + q / c
    return PumpUp(v2, v2 - v1, 0.5 * c * (v2**2 - v1**2), t_zero, q)



def pump_up_trace(t, i0, v1, capacitance, r_off, inductance, v_diode, drops: int = 2):
    """:func:`pump_up`'s current (A) and capacitor (V) ``t`` s into the decay (a linear coil;
    one point, ``t`` up to its ``zero_time``): ``i = x'``, ``v = x / C - n V_d``."""
    a = capacitance * (v1 + drops * v_diode)
    x, i = rlc.state(t, a, i0, r_off, inductance, capacitance)
    return i, x / capacitance - drops * v_diode


#: Body-diode drops of a full bridge's fast decay back into a boost capacitor: the bridge's
#: two (the pulse's low-side leg's, the other leg's high side's) and the boost switch's.
RETURN_DROPS = 3


def boost_return(i0, v_c, c, r_off, r_b, inductance, v_diode) -> PumpUp:
    """A full bridge whose high-side rail the boost switch feeds (a latching coil's pulses
    from the boost, :mod:`coildrive.design.latch_boost`): the fast decay of ``i0`` A after a
    pulse goes up the boost switch's body diode back into the boost capacitor of ``c`` F at
    ``v_c`` V (the main supply's blocking diode keeps it off the main bus), through the
    release loop's ``r_off`` ohm, the boost path's ``r_b`` and :data:`RETURN_DROPS` drops
    of ``v_diode`` V: :func:`pump_up`'s series RLC onto ``c`` (a linear coil; any coil's,
    the one the design runs: :func:`coildrive.model.flux_bus_decay.boost_return`)."""
    return pump_up(i0, v_c, c, np.asarray(r_off, float) + r_b, inductance, v_diode, drops=RETURN_DROPS)


def boost_return_trace(t, i0, v_c, c, r_off, r_b, inductance, v_diode):
    """:func:`boost_return`'s current (A) and boost capacitor (V) ``t`` s into the decay."""
    return pump_up_trace(t, i0, v_c, c, r_off + r_b, inductance, v_diode, drops=RETURN_DROPS)


#: Runge-Kutta steps of a saturating coil's pump-up, over the current from ``i0`` to 0.
PUMP_STEPS = 400


def flux_pump_up(i0, v1, capacitance, r_off, coil: FluxCoil, v_diode, steps: int = PUMP_STEPS,
                  i_end=0.0) -> PumpUp:
    """:func:`pump_up` of a saturating coil: ``dpsi/dt = -(v + 2 V_d + R i)`` and
    ``C dv/dt = i``. The current falls monotonically (the loop's voltage always opposes
    it), so the current itself is the independent variable over the same interval
    ``i0 -> 0`` at every point (``i0 -> i_end`` A, at or below ``i0``, when given: the
    state when the current has fallen that far):

        dv/di = -i L_d(i) / (C (v + 2 V_d + R i)),    dt/di = -L_d(i) / (v + 2 V_d + R i)

    a smooth, non-stiff equation in one unknown, integrated by the classical fourth-order
    Runge-Kutta method in ``steps`` equal steps of the current, vectorised over the
    points (the time rides along as a quadrature of the same stages). Hand-written, not
    scipy's ``solve_ivp``: one fixed grid serves every corner in one pass (no per-point
    calls, no scipy import on the design's path). The interpolant's second derivative
    jumps at the table's points, so the error falls as the square of the step there: at
    400 steps within 1e-6 of 8,000 (tests/test_flux_bridge.py); a straight-line curve
    gives the series RLC's closed form above to 1e-12. ngspice with a flux-controlled
    inductor checks it in tests/test_reference_ngspice_bridge.py."""
    v1 = np.asarray(v1, float)
    for i, v, t in _flux_pump_steps(i0, v1, capacitance, r_off, coil, v_diode, steps, i_end):
        pass
    c = np.asarray(capacitance, float)
    q = c * (v - v1)
    return PumpUp(v, v - v1, 0.5 * c * (v**2 - v1**2), t, q)


def _flux_pump_steps(i0, v1, capacitance, r_off, coil: FluxCoil, v_diode, steps, i_end=0.0):
    """:func:`flux_pump_up`'s Runge-Kutta steps: ``(i A, v V, t s)`` at the start and after
    each step (``steps + 1`` knots)."""
    i0, v1, c, r, vd, s, i_end = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                                       (i0, v1, capacitance, r_off, v_diode, coil.scale, i_end)))
    curve = coil.curve
    h = (i0 - i_end) / steps   # the current falls by h a step

    def slopes(i, v):   # (dv, dt) per unit of falling current
        ld = s * curve.incremental(i)
        den = v + 2.0 * vd + r * i
        return i * ld / (c * den), ld / den

    v = v1.copy()
    t = np.zeros_like(v)
    yield i0, v, t
    for k in range(steps):
        i = i0 - k * h
        a_v, a_t = slopes(i, v)
        b_v, b_t = slopes(i - 0.5 * h, v + 0.5 * h * a_v)
        c_v, c_t = slopes(i - 0.5 * h, v + 0.5 * h * b_v)
        d_v, d_t = slopes(np.maximum(i - h, i_end), v + h * c_v)
        v = v + h / 6.0 * (a_v + 2.0 * b_v + 2.0 * c_v + d_v)
        t = t + h / 6.0 * (a_t + 2.0 * b_t + 2.0 * c_t + d_t)
        yield np.maximum(i0 - (k + 1) * h, i_end), v, t


def flux_pump_trace(t, i0, v1, capacitance, r_off, coil: FluxCoil, v_diode, steps: int = PUMP_STEPS):
    """The current (A) and the bus (V) ``t`` s (an array) into :func:`flux_pump_up`'s run of
    one point (scalars): its knots, stepped in the falling current, carry the time as well
    (``dt/di``'s quadrature), so between two knots the state is the cubic Hermite
    interpolant in time with the circuit's own rates at both ends, ``di/dt = -(v + 2 V_d +
    R i)/L_d(i)`` and ``dv/dt = i/C``. The run's zero time (:attr:`PumpUp.zero_time`) is
    the last knot's, so the trace ends where the design's figure does; past it the current
    is 0 and the bus stays at ``v2``."""
    knots = list(_flux_pump_steps(i0, v1, capacitance, r_off, coil, v_diode, steps))
    ik, vk, tk = (np.array([float(np.ravel(x)[0]) for x in col]) for col in zip(*knots))
    c, r, vd = (float(np.ravel(x)[0]) for x in (capacitance, r_off, v_diode))
    di = -(vk + 2.0 * vd + r * ik) / (float(np.ravel(coil.scale)[0]) * coil.curve.incremental(ik))
    dv = ik / c
    t = np.asarray(t, float)
    k = np.clip(np.searchsorted(tk, t, side="right") - 1, 0, tk.size - 2)
    h = tk[k + 1] - tk[k]
    s = np.clip((t - tk[k]) / np.where(h > 0, h, 1.0), 0.0, 1.0)
    i = hermite(ik[k], ik[k + 1], di[k] * h, di[k + 1] * h, s)
    v = hermite(vk[k], vk[k + 1], dv[k] * h, dv[k + 1] * h, s)
    past = t >= tk[-1]
    return np.where(past, 0.0, np.maximum(i, 0.0)), np.where(past, vk[-1], v)


def _eddy_pump_up(i0, v1, capacitance, r_off, coil: EddyCoil, v_diode, steps: int = PUMP_STEPS) -> PumpUp:
    """:func:`pump_up` with an eddy resistance ``R_e`` across the magnetising branch (a
    line or a curve, :mod:`coildrive.model.eddy`). With ``u = v + 2 V_d`` the terminal
    current is ``i = max(0, (R_e i_m - u) / (R + R_e))`` (the body diodes block once it
    reaches zero), the branch ``dpsi/dt = R_e (i - i_m)`` and the capacitor ``C du/dt = i``.
    The magnetising current falls monotonically (``dpsi/dt < 0`` for ``i_m > 0``), so it is
    the independent variable from ``i0`` to 0, as in :func:`flux_pump_up`:

        du/di_m = i L_d(i_m) / (C R_e (i - i_m)),    dt/di_m = L_d(i_m) / (R_e (i - i_m))

    by the classical fourth-order Runge-Kutta method in ``steps`` equal steps. Once the
    diodes block ``du/di_m = 0``: the bus stays where the conduction left it and the flux
    decays through ``R_e`` alone (its energy is heat in the core, none returns). The
    right-hand side is continuous there (``i`` falls through zero), only its slope jumps,
    so the step holding the block costs ``O(h^2)`` of it, not an order of the method;
    ``dt/di_m`` is the conducting loop's throughout (only its part before the block is
    kept).
    ``zero_time`` is the time to the block (the zero of ``R_e i_m - u``, interpolated
    linearly within its step). ngspice (a resistor across the inductor, body diodes and the
    bulk capacitor) checks it in tests/test_bridge_eddy.py."""
    mag = coil.magnetising
    arrays = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                   (i0, v1, capacitance, r_off, v_diode, coil.resistance)))
    i0, v1, c, r, vd, re_ = arrays
    if isinstance(mag, FluxCoil):
        s = np.broadcast_to(np.asarray(mag.scale, float), i0.shape)

        def ind(i):
            return s * mag.curve.incremental(i)
    else:
        ell = np.broadcast_to(np.asarray(mag, float), i0.shape)

        def ind(i):
            return ell
    h = i0 / steps   # the magnetising current falls by h a step

    def slopes(i_m, u):   # (du, dt) per unit of falling magnetising current
        i = np.maximum(re_ * i_m - u, 0.0) / (r + re_)
        # the conducting loop's dt/di_m (R_e (i_m - i) = (R_e / (R + R_e)) (R i_m + u) > 0);
        # after the block only the bus matters, and it stays
        dt = ind(i_m) * (r + re_) / (re_ * (r * i_m + u))
        return i * dt / c, dt, i

    u = v1 + 2.0 * vd
    t = np.zeros_like(u)
    t_block = np.full(u.shape, np.nan)
    g_prev = re_ * i0 - u
    for k in range(steps):
        i_m = i0 - k * h
        a_u, a_t, _ = slopes(i_m, u)
        b_u, b_t, _ = slopes(i_m - 0.5 * h, u + 0.5 * h * a_u)
        c_u, c_t, _ = slopes(i_m - 0.5 * h, u + 0.5 * h * b_u)
        d_u, d_t, _ = slopes(np.maximum(i_m - h, 0.0), u + h * c_u)
        u_next = u + h / 6.0 * (a_u + 2.0 * b_u + 2.0 * c_u + d_u)
        g = re_ * np.maximum(i_m - h, 0.0) - u_next
        dt = h / 6.0 * (a_t + 2.0 * b_t + 2.0 * c_t + d_t) if k < steps - 1 else 0.0 * t
        cross = np.isnan(t_block) & (g <= 0.0) & (g_prev > 0.0)
        frac = np.where(cross, g_prev / np.where(cross, g_prev - g, 1.0), 0.0)
        t_block = np.where(cross, t + frac * dt, t_block)
        u, t, g_prev = u_next, t + dt, g
    t_block = np.where(np.isnan(t_block), 0.0, t_block)   # a step that blocks at once
    v = u - 2.0 * vd
    return PumpUp(v, v - v1, 0.5 * c * (v**2 - v1**2), t_block, c * (v - v1))


#: The bridge's four switches, in the order of the header's switch bits (bit 0 first):
#: Q1 leg A to the bus, Q2 leg A to the rail, Q3 leg B to the bus, Q4 leg B to the rail.
SWITCHES = ("high_a", "low_a", "high_b", "low_b")
#: The switches on in each phase of an actuation: the peak and the hold's on-times drive
#: the coil from A to B (Q1 + Q4); the hold's off-times recirculate through the two
#: low-side switches (Q2 + Q4, slow decay); the release opens all four (fast decay
#: through Q2's and Q3's body diodes into the bus). Both switches of one leg are never on
#: together (that would short the bus).
PHASES = {"peak": ("high_a", "low_b"), "hold_on": ("high_a", "low_b"),
          "hold_decay": ("low_a", "low_b"), "release": ()}


def switch_mask(names) -> int:
    """The switches ``names`` as a bit mask (bit k: ``SWITCHES[k]`` on)."""
    return sum(1 << SWITCHES.index(n) for n in names)


def switch_states(phase) -> dict[str, np.ndarray]:
    """Each switch's state (0/1) per sample from ``phase`` (1: an on-time of the peak or
    the hold, 0: a hold off-time, -1: released, all open), by :data:`PHASES`."""
    phase = np.asarray(phase)
    return {name: np.where(phase == 1, name in PHASES["hold_on"],
                           np.where(phase == 0, name in PHASES["hold_decay"],
                                    name in PHASES["release"])).astype(np.int8)
            for name in SWITCHES}


def coil_voltage(supply, current, phase, r_switch, r_sense, sense_inline: bool, v_diode):
    """Voltage across the coil's terminals (V, ``R_coil i + L di/dt``) per sample, from the
    bus V, the coil current A and ``phase`` (1: Q1 + Q4 drive, 0: Q2 + Q4 slow decay, -1:
    all off): driving ``V_bus - (2 R_sw + R_sense) i``; slow decay ``-(2 R_sw [+ R_sense
    inline]) i``; fast decay ``-(V_bus + 2 V_d + R_sense i)`` while current flows, 0 once
    it has stopped."""
    i = np.asarray(current, float)
    supply = np.asarray(supply, float)
    inline = r_sense if sense_inline else 0.0
    drive = supply - (2.0 * r_switch + r_sense) * i
    slow = -(2.0 * r_switch + inline) * i
    fast = np.where(i > 0, -(supply + 2.0 * v_diode + r_sense * i), 0.0)
    phase = np.asarray(phase)
    return np.where(phase == 1, drive, np.where(phase == 0, slow, fast))


@dataclass(frozen=True)
class FullBridge:
    """:class:`~coildrive.model.topology.Topology` of a full bridge. Its two legs swing
    in turn; ``simulate`` gives the highest of the four switches' voltages
    (``switch_voltage_v``) and the design the energy the fast decay returns."""

    name: str = "full_bridge"
    node: str = "leg A (the coil's end the high-side switch drives)"
    sense_places: dict = field(default_factory=lambda: {
        "coil": "inline with the coil (reads the current always)",
        "switch": "in the common return below the low-side switches (reads only while driving)"})
    shows_node: bool = False
    drive_switches: int = 2

    def node_voltage(self, supply, switch_voltage, sense_drop):
        """Leg A to ground, V: the bus less its high-side switch's voltage."""
        return np.asarray(supply, float) - np.asarray(switch_voltage, float) - np.asarray(sense_drop, float)

    def switch_peak_from_node(self, supply: float, node_peak: float, node_lowest: float) -> tuple[float, str]:
        """A probe on leg B reads the low-side switch's voltage directly."""
        return node_peak, "highest sampled leg voltage"


TOPOLOGY = FullBridge()
