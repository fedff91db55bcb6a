"""Where the power goes during the hold: supply, copper, sense, switch, freewheel.

Every PWM off-time is a small turn-off: the coil current flows on through the freewheel
path, and whatever voltage that path holds against it takes power. From the exact
periodic steady state (:mod:`coildrive.model.pwm`) the per-period integrals of ``i``
and ``i^2`` over the on and off segments give each average power exactly:

=====================  ==========================================================
element                average power over one period ``T``
=====================  ==========================================================
supply                 ``V_bus Q_on / T`` (+ ``V_bus Q_off / T`` with a clamp to
                       ground: the supply drives the current through it)
coil copper            ``R_coil (S_on + S_off) / T``
sense resistor         ``R_sense S_on / T`` (+ ``S_off`` when in the coil path)
switch conduction      ``R_switch S_on / T``
freewheel diode        ``V_diode Q_off / T``
Zener                  ``V_zener Q_off / T``
freewheel resistor     ``R_fw S_off / T``
clamp                  ``V_clamp Q_off / T``
bypass switch          ``R_bp S_off / T`` (split decay: the hold's slow path is the
                       diode and the bypass switch, the fast element takes nothing)
=====================  ==========================================================

A full bridge (``lp.bridge == "slow"``) drives through two switches and recirculates
through the two low-side ones: switch conduction ``2 R_switch (S_on + S_off) / T``, no
freewheel element. With mixed decay (``lp.mixed``) the fast part of each off-time
(``Q_fast``, ``S_fast``) runs through the two body diodes into the bus: diodes ``2 V_diode
Q_fast / T``, the sense resistor carries it in either position, the switches conduct only
in the slow part, and the supply's figure is net of what the bus takes back, ``V_bus (Q_on
- Q_fast) / T``.

(``Q`` = integral of ``i``, ``S`` = integral of ``i^2``.) In steady state the inductor's
energy is the same at the start and end of every period, so the supply power equals the
sum of the others exactly (the tests check this). Switching loss is not part of that
ideal balance; it is estimated separately from the board's rise and fall times with the
usual linear-transition approximation ``E = 1/2 V I t`` per edge (common practice).

A current-mode hold (hysteretic band or fixed off time,
:mod:`coildrive.model.current_mode`) switches the same two exponential segments, only
ended by current thresholds instead of a timer: its steady state has the same
per-period integrals, so :func:`element_powers` gives its element powers by the same
formulas (with ``1 / T`` of the switching period).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..config import Drive
from .circuit import Loop
from .pwm import PwmSteadyState


@dataclass(frozen=True)
class HoldLosses:
    """Average powers in W during the hold, arrays over operating points.

    ``freewheel`` is the sum of the freewheel elements (diode + Zener + resistor, or the
    clamp; diode + bypass switch for the slow path of split decay); ``switch`` is
    conduction plus the switching estimate.
    """

    supply: np.ndarray
    coil: np.ndarray
    sense: np.ndarray
    switch_conduction: np.ndarray
    switch_switching: np.ndarray
    diode: np.ndarray
    zener: np.ndarray
    resistor: np.ndarray
    clamp: np.ndarray
    bypass: np.ndarray | float = 0.0

    #: The freewheel elements, in the order reports list them.
    ELEMENTS = ("diode", "zener", "resistor", "clamp", "bypass")

    @property
    def freewheel(self) -> np.ndarray:
        return self.diode + self.zener + self.resistor + self.clamp + self.bypass

    def elements(self) -> dict[str, np.ndarray]:
        """The freewheel elements' powers by name (see :attr:`ELEMENTS`)."""
        return {name: np.asarray(getattr(self, name)) for name in self.ELEMENTS}

    @property
    def switch(self) -> np.ndarray:
        return self.switch_conduction + self.switch_switching

    def balance_error(self) -> np.ndarray:
        """Supply power minus every ideal loss (W); zero in exact steady state."""
        return self.supply - (self.coil + self.sense + self.switch_conduction + self.freewheel)


def hold_losses(drive: Drive, lp: Loop, ss: PwmSteadyState, frequency,
                rise_time: float = 0.0, fall_time: float = 0.0,
                diode_drop: float | None = None, zener_voltage: float | None = None,
                resistance: float | None = None) -> HoldLosses:
    """Average powers of every element during the PWM hold steady state ``ss`` (W).

    ``lp`` must be the loop the steady state was computed with; with ``lp.bypassed``
    (the slow hold path of split decay) the off-times go through the diode and the
    bypass switch. ``diode_drop``, ``zener_voltage`` and ``resistance`` override the
    freewheel path's element values. ``rise_time``/``fall_time`` (s) are the switch's
    voltage transition times for the switching estimate. See :func:`element_powers`.
    """
    return element_powers(drive, lp, ss.charge_on, ss.square_on, ss.charge_off, ss.square_off,
                          frequency, ss.i_min, ss.i_max, ss.dcm, frequency, rise_time, fall_time,
                          diode_drop, zener_voltage, resistance, ss.charge_fast, ss.square_fast)


def element_powers(drive: Drive, lp: Loop, charge_on, square_on, charge_off, square_off,
                   rate, i_min, i_max, dcm, switching_rate, rise_time: float = 0.0,
                   fall_time: float = 0.0, diode_drop: float | None = None,
                   zener_voltage: float | None = None,
                   resistance: float | None = None, charge_fast=0.0, square_fast=0.0) -> HoldLosses:
    """Average powers (W) of every element over a periodic hold of two segments.

    ``charge_*`` (A*s) and ``square_*`` (A^2*s) are ``int i dt`` and ``int i^2 dt``
    over one period's switch-on and freewheel segments, ``rate`` the number of periods
    per second (``1 / T``, Hz), so ``Q * rate`` is the segment's share of the mean
    current. ``i_min``/``i_max`` (A) are the currents the switch takes over at turn-on
    and interrupts at turn-off, ``dcm`` marks a current that dies out in the off time
    (the switch then turns on against the bus voltage alone), ``switching_rate`` the
    edge pairs per second (Hz; 0 where nothing switches). Any two-segment hold fits:
    the PWM hold (:func:`hold_losses`) and the current-mode holds of
    :mod:`coildrive.model.current_mode`. ``charge_fast``/``square_fast``: the part of the
    off-segment integrals in a full bridge's fast path (mixed decay).
    """
    fw = drive.freewheel
    sense = drive.board.sense
    f = np.asarray(rate, float)
    q_on, s_on = charge_on * f, square_on * f      # A, A^2 averaged over a period
    q_off, s_off = charge_off * f, square_off * f
    zero = np.zeros_like(q_on)
    bypassed = bool(getattr(lp, "bypassed", False))
    clamp = fw.type == "clamp" and diode_drop is None and not bypassed
    supply = lp.supply * (q_on + (q_off if clamp else 0.0))
    coil = lp.r_coil * (s_on + s_off)
    r_sense = sense.resistance
    sense_p = r_sense * (s_on + (s_off if sense.position == "coil" else 0.0))
    cond = drive.switch.on_resistance * s_on
    vd = lp.diode(drive) if diode_drop is None and hasattr(lp, "diode") else (
        fw.diode_drop if diode_drop is None else diode_drop)
    vz = lp.fast(drive) if zener_voltage is None and hasattr(lp, "fast") and fw.type == "zener" else (
        fw.zener_voltage if zener_voltage is None else zener_voltage)
    rf = fw.resistance if resistance is None else resistance
    bypass_p = zero
    if getattr(lp, "bridge", "") == "slow":
        q_f, s_f = charge_fast * f, square_fast * f
        cond = 2.0 * drive.switch.on_resistance * (s_on + s_off - s_f)
        diode_p, zener_p, res_p, clamp_p = 2.0 * vd * q_f + zero, zero, zero, zero
        v_turn_off = lp.supply + 0.0 * q_on
        if getattr(lp, "mixed", None) is not None:  # each off-time starts in the fast path
            supply = lp.supply * (q_on - q_f)
            if sense.position != "coil":
                sense_p = sense_p + r_sense * s_f
                v_turn_off = lp.supply + vd + r_sense * i_max
            else:
                v_turn_off = lp.supply + vd + 0.0 * i_max
    elif bypassed:
        r_bp = fw.bypass_resistance
        diode_p, zener_p, res_p, clamp_p = vd * q_off, zero, zero, zero
        bypass_p = r_bp * s_off
        v_turn_off = lp.supply + vd + r_bp * i_max
    elif clamp:
        diode_p, zener_p, res_p = zero, zero, zero
        v_clamp = lp.fast(drive) if hasattr(lp, "fast") else fw.clamp_voltage
        clamp_p = v_clamp * q_off
        v_turn_off = v_clamp + 0.0 * q_on
    else:
        diode_p, zener_p, res_p = vd * q_off, vz * q_off, rf * s_off
        clamp_p = zero
        v_turn_off = lp.supply + vd + vz + rf * i_max
    # Linear voltage/current transitions (common practice): 1/2 V I t per edge. At
    # turn-on the switch takes over i_min from the freewheel path (zero in DCM, when
    # it sees only the bus voltage); at turn-off it interrupts i_max.
    v_turn_on = np.where(dcm, lp.supply, v_turn_off)
    e_edges = 0.5 * v_turn_on * i_min * rise_time + 0.5 * v_turn_off * i_max * fall_time
    switching = e_edges * np.asarray(switching_rate, float)
    return HoldLosses(supply=supply, coil=coil, sense=sense_p, switch_conduction=cond,
                      switch_switching=switching, diode=diode_p, zener=zener_p,
                      resistor=res_p, clamp=clamp_p, bypass=bypass_p)
