"""The driver circuit around the coil: loop resistances and voltages at operating points.

The coil's loop is the same for a low-side and a high-side switch (the circuits are
drawn in :mod:`coildrive.model.low_side` and :mod:`coildrive.model.high_side`; where
the switch node sits against ground is :mod:`coildrive.model.topology`'s business).
Switch on: ``V_bus = (R_coil + R_switch + R_sense) i + L di/dt``.
Switch off: ``L di/dt = -(R_off i + V_off)`` where, by freewheel type,

============  =======================================  ==============================
type          ``R_off`` (beyond ``R_coil``)             ``V_off``
============  =======================================  ==============================
diode         ``R_sense`` if in the coil path           ``V_diode``
zener         ``R_sense`` if in the coil path           ``V_diode + V_zener``
resistor      ``R_sense`` if in the coil path + ``R_fw``  ``V_diode``
clamp         ``R_sense`` if in the coil path           ``V_clamp - V_bus``
============  =======================================  ==============================

The switch sees ``V_bus + V_diode + V_zener + R_fw i`` while freewheeling through a path
across the coil, and ``V_clamp`` with a clamp across it.

Split decay (``freewheel.split_decay``): during the hold a bypass switch (on-resistance
``R_bp``) shorts the fast element, so the PWM off-times take the slow path

============  =======================================  ==============================
type          ``R_off`` of the hold (beyond ``R_coil``)  ``V_off`` of the hold
============  =======================================  ==============================
zener         ``R_sense`` if in the coil path + ``R_bp``  ``V_diode`` (Zener bypassed)
resistor      ``R_sense`` if in the coil path + ``R_bp``  ``V_diode`` (resistor bypassed)
clamp         ``R_sense`` if in the coil path + ``R_bp``  ``V_diode`` (a diode + bypass
                                                        switch across the coil)
============  =======================================  ==============================

and the switch sees ``V_bus + V_diode + R_bp i``; the release (bypass open) takes the
fast path of the table above. :func:`loop` gives either with ``path``.

A full bridge (``switch.topology = "full_bridge"``, :mod:`coildrive.model.bridge`) drives
through two switches (``R_on = R_coil + 2 R_switch + R_sense``); its hold path is the slow
decay through the two low-side switches (``R_off = R_coil + 2 R_switch`` + ``R_sense``
inline, ``V_off = 0``), its release path the fast decay through two body diodes into the
bus (``R_off = R_coil + R_sense``, ``V_off = V_bus + 2 V_diode``); the switches see
``V_bus + R_switch i`` in the slow decay and ``V_bus + V_diode`` (+ ``R_sense i`` from a common-return
resistor) in the fast one. With ``hold.fast_fraction > 0`` (mixed decay) the hold's loop
carries the fast path too (``Loop.mixed``, :class:`~coildrive.model.pwm.MixedDecay`): each
off-time starts fast and ends slow.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..config import Drive
from .bridge import fast_switch_voltage
from ..copper import COPPER_ALPHA, copper_resistance  # noqa: F401  (re-exported)
from . import eddy, flux
from .pwm import MixedDecay


@dataclass(frozen=True)
class Loop:
    """Loop parameters at a set of operating points (arrays broadcast together).

    Units: V, ohm, H. ``r_coil`` is the copper alone (it is what heats the coil).
    ``bypassed`` is True for the slow path of a split-decay hold (the bypass switch
    shorts the fast element; see the module docstring). ``v_diode`` and ``v_fast`` are
    the freewheel diode's drop and the fast element's voltage (Zener or clamp) at each
    point -- their tolerance corners; ``None``: the drive's values. ``bridge`` is ``"slow"``
    or ``"fast"`` for a full bridge's decay paths, ``""`` otherwise.
    """

    v_on: np.ndarray
    r_on: np.ndarray
    r_off: np.ndarray
    v_off: np.ndarray
    inductance: np.ndarray   # or a flux.FluxCoil (a saturating coil) or an eddy.EddyCoil
    r_coil: np.ndarray
    supply: np.ndarray
    bypassed: bool = False
    v_diode: np.ndarray | None = None
    v_fast: np.ndarray | None = None
    bridge: str = ""
    mixed: MixedDecay | None = None

    def diode(self, drive: Drive):
        """The freewheel diode's drop at each point (V)."""
        return drive.freewheel.diode_drop if self.v_diode is None else self.v_diode

    def fast(self, drive: Drive):
        """The fast element's voltage at each point: the Zener's, or the clamp's (V)."""
        fw = drive.freewheel
        if self.v_fast is None:
            return fw.clamp_voltage if fw.type == "clamp" else fw.zener_voltage
        return self.v_fast

    def switch_voltage(self, drive: Drive, current):
        """Switch (drain) voltage in V right after turning off ``current`` A."""
        fw = drive.freewheel
        if self.bridge == "slow":  # Q1 holds off the bus above leg A (at -R_switch i)
            return self.supply + drive.switch.on_resistance * np.asarray(current, float)
        if self.bridge == "fast":
            return fast_switch_voltage(self.supply, self.diode(drive), drive.board.sense.resistance,
                                       drive.board.sense.position == "coil", current)
        if self.bypassed:
            return self.supply + self.diode(drive) + fw.bypass_resistance * np.asarray(current)
        if fw.type == "clamp":
            return np.broadcast_to(np.asarray(self.fast(drive), float), np.shape(current)) + 0.0
        return self.supply + self.diode(drive) + self.fast(drive) + fw.resistance * np.asarray(current)


def split_decay(drive: Drive) -> bool:
    """True when the hold and the release take different freewheel paths (split decay
    with a fast element to bypass)."""
    return drive.freewheel.split_decay and drive.freewheel.type != "diode"


def full_bridge(drive: Drive) -> bool:
    """True for a full bridge: slow decay in the hold, fast decay at the release."""
    return drive.switch.topology == "full_bridge"


def two_paths(drive: Drive) -> bool:
    """True when the hold's off-times and the release take different paths (split decay
    or a full bridge): the design evaluates the release on :func:`loop`'s release path."""
    return split_decay(drive) or full_bridge(drive)


def loop(drive: Drive, supply, coil_temp, r_factor=1.0, l_factor=1.0, path: str = "hold",
         diode_factor=1.0, fast_factor=1.0, sense_factor=1.0) -> Loop:
    """Loop parameters for supply V, coil temperature degC and tolerance factors.

    ``r_factor``/``l_factor`` multiply the nominal coil resistance/inductance
    (1.07 = +7 % tolerance corner); ``diode_factor``, ``fast_factor`` and
    ``sense_factor`` the diode drop, the Zener or clamp voltage and the sense resistance
    (their tolerance corners). ``path`` picks the freewheel path: ``"hold"`` the
    one the PWM off-times take, ``"release"`` the one of the final turn-off; they differ
    only with split decay (:func:`split_decay`). ``inductance`` is ``coil.inductance``, or with an
    ``[armature]`` its seated value ``inductance_closed`` (the armature model itself
    uses the inductance at every gap, see :mod:`coildrive.model.armature`).
    """
    coil = drive.coil
    sense = drive.board.sense
    fw = drive.freewheel
    supply = np.asarray(supply, float)
    r_coil = copper_resistance(coil.resistance, coil.reference_temp, coil_temp) * r_factor
    r_sense = sense.resistance * np.asarray(sense_factor, float)
    v_diode = fw.diode_drop * np.asarray(diode_factor, float)
    v_fast = (fw.clamp_voltage if fw.type == "clamp" else fw.zener_voltage) * np.asarray(fast_factor, float)
    bridge = full_bridge(drive)
    r_switch = drive.switch.on_resistance * (2.0 if bridge else 1.0)  # a bridge drives through two
    r_on = r_coil + r_switch + r_sense
    if path not in ("hold", "release"):
        raise ValueError(f"path {path!r}: expected 'hold' or 'release'")
    bypassed = path == "hold" and split_decay(drive)
    r_sense_off = r_sense if sense.position == "coil" else 0.0
    kind = ("slow" if path == "hold" else "fast") if bridge else ""
    if kind == "slow":  # recirculating through the two low-side switches
        r_off = r_coil + r_sense_off + r_switch
        v_off = 0.0 * supply
    elif kind == "fast":  # two body diodes into the bus, through the sense resistor either way
        r_off = r_coil + r_sense
        v_off = supply + 2.0 * v_diode
    elif bypassed:
        r_off = r_coil + r_sense_off + fw.bypass_resistance
        v_off = v_diode + 0.0 * supply
    else:
        r_off = r_coil + r_sense_off + fw.resistance
        if fw.type == "clamp":
            v_off = v_fast - supply
        else:
            v_off = v_diode + v_fast + 0.0 * supply
    # With a moving armature the switched segments that use Loop.inductance (the PWM hold,
    # the release until the armature lets go) all have it seated: the closed inductance.
    # With the coil's two curves ([armature] + coil.seated_current) that is the seated curve.
    base = coil.inductance if drive.armature is None else drive.armature.inductance_closed
    if coil.seated_current and drive.armature is not None:
        curve = flux.curve(coil.seated_current, coil.seated_linkage)
    else:
        curve = coil.flux_current and flux.curve(coil.flux_current, coil.flux_linkage)
    inductance = (1.0 if curve else base) * np.asarray(l_factor, float)
    arrays = np.broadcast_arrays(supply, r_on, r_off, v_off, inductance, r_coil, v_diode, v_fast)
    # read-only broadcast views: no copies of scalars spread over many points
    supply, r_on, r_off, v_off, inductance, r_coil, v_diode, v_fast = arrays
    if curve:   # a saturating coil: its curve, scaled by the tolerance (model.flux)
        inductance = flux.FluxCoil(curve, inductance)
    if coil.eddy_resistance:   # an eddy resistance across the magnetising branch (model.eddy)
        inductance = eddy.EddyCoil(inductance, np.broadcast_to(coil.eddy_resistance, supply.shape))
    mixed = None
    if kind == "slow" and drive.hold.fast_fraction > 0:
        mixed = MixedDecay(drive.hold.fast_fraction, r_coil + r_sense + 0.0 * supply,
                           supply + 2.0 * v_diode)
    return Loop(v_on=supply, r_on=r_on, r_off=r_off, v_off=v_off, inductance=inductance,
                r_coil=r_coil, supply=supply, bypassed=bypassed, v_diode=v_diode, v_fast=v_fast,
                bridge=kind, mixed=mixed)


def open_inductance(drive: Drive, l_factor):
    """The coil before the armature moves, per point: ``armature.inductance_open`` H times
    the tolerance factor, or with the coil's two curves the open one's
    :class:`~coildrive.model.flux.FluxCoil` (without ``[armature]``: ``None``)."""
    arm = drive.armature
    if arm is None:
        return None
    factor = np.asarray(l_factor, float)
    if drive.coil.seated_current:
        return flux.FluxCoil(flux.curve(drive.coil.flux_current, drive.coil.flux_linkage), factor)
    return arm.inductance_open * factor


def freewheel_element_energy(drive: Drive, lp: Loop, charge, square):
    """Energy in J taken by the freewheel element(s) over a freewheel segment.

    ``charge`` and ``square`` are ``int i dt`` and ``int i^2 dt`` over the segment.
    Diode, Zener and resistor for paths across the coil; the clamp's ``V_clamp * Q``
    (part of which the supply delivers during the decay) for a clamp across the switch;
    diode and bypass switch for the slow path of split decay (``lp.bypassed``).
    """
    fw = drive.freewheel
    if lp.bridge == "slow":  # the low-side switches' conduction: the switch's, not a freewheel element's
        return 0.0 * np.asarray(charge, float)
    if lp.bridge == "fast":  # the two body diodes; the bus takes V_bus x charge back
        return 2.0 * lp.diode(drive) * np.asarray(charge)
    if lp.bypassed:
        return lp.diode(drive) * np.asarray(charge) + fw.bypass_resistance * np.asarray(square)
    if fw.type == "clamp":
        return lp.fast(drive) * np.asarray(charge)
    return (lp.diode(drive) + lp.fast(drive)) * np.asarray(charge) + fw.resistance * np.asarray(square)
