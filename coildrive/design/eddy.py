"""The eddy-current term's figures in the design (``design --json`` key ``eddy``).

The physics is :mod:`coildrive.model.eddy`; every figure of the design already follows
it (the pull-in time is the magnetising current's, the hold's mean and ripple the
terminal current's, the release time the flux's). This module adds what only the eddy
term has: the switch-on step, where the release path stops conducting, and how the
energies split between the freewheel elements and the eddy resistance. On a full bridge
on the drooping bus the release figures are the bus runs' (the fast decay into ``R_s``
and ``C`` from the range of starting buses, each the worst over the starts; a moving
armature's the design's run, :mod:`coildrive.model.armature_bus_release`; the still
coil's :func:`coildrive.design.bridge_bus.decays`). Units: ohm, s, A, J, W.
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from ..model import eddy
from ..model.circuit import freewheel_element_energy, split_decay
from .bridge_bus import decays, drooped
from .corners import CornerGrid
from .evaluate import PointResults
from .figures import worst
from .result import EddyResult
from .turnoff import release_loop


def eddy_result(drive: Drive, grid: CornerGrid, res: PointResults, peak_time=None,
                peak_end=None) -> EddyResult | None:
    """The eddy term's figures over the corners of ``res`` (``None`` without one);
    ``peak_time`` s and ``peak_end`` A: the peak's (a full bridge on the drooping bus: the
    range of buses the release may start from, :func:`coildrive.design.bridge_bus.bus_range`)."""
    coil = drive.coil
    if not coil.eddy_resistance:
        return None
    lp = res.loop
    rel = res.release_loop if res.release_loop is not None else lp
    e = lp.inductance
    r_e = coil.eddy_resistance
    step = np.asarray(lp.v_on / (lp.r_on + r_e), float)
    block = np.asarray(eddy.block_current(rel.v_off, r_e) + 0.0 * step, float)
    i_off = np.asarray(res.hold.i_max, float)
    lag = max(-drive.freewheel.bypass_lead, 0.0) if split_decay(drive) else 0.0
    if lag > 0:   # a late bypass: the slow path for lag s, then the fast one
        late = eddy.late_release(i_off, lag, (lp.r_off, lp.v_off), (rel.r_off, rel.v_off), drive.release.current, e)
        w_eddy = np.asarray(late.eddy_energy, float) + 0.0 * step
        w_fw = np.asarray(freewheel_element_energy(drive, lp, *late.slow)
                          + freewheel_element_energy(drive, rel, *late.fast), float) + 0.0 * step
    else:
        t_zero = eddy.conduction_time(i_off, rel.r_off, rel.v_off, e)
        q, s, _ = eddy.decay_integrals(t_zero, i_off, rel.r_off, rel.v_off, e)
        w_eddy = np.asarray(eddy.release_eddy_energy(i_off, rel.r_off, rel.v_off, e), float) + 0.0 * step
        w_fw = np.asarray(freewheel_element_energy(drive, rel, q, s), float) + 0.0 * step
    outlasts = np.maximum(np.asarray(res.release_time, float) - np.asarray(res.release_zero_time, float), 0.0)
    if drooped(drive):
        block, w_eddy, w_fw, outlasts = _on_bus(drive, res, i_off, peak_time, peak_end, outlasts, step)
    power = np.asarray(res.hold.eddy_energy / res.hold.period, float)
    k_s, k_r, k_h = worst(step), worst(w_eddy), worst(power)
    tau = float(coil.inductance / r_e)
    return EddyResult(
        resistance_ohm=r_e, time_constant_s=tau,
        given="coil.eddy_time_constant" if coil.eddy_time_constant else "coil.eddy_resistance",
        switch_on_step_a=float(step[k_s]), step_corner=grid.label(k_s),
        block_current_a=float(np.max(block)),
        release_eddy_energy_j=float(w_eddy[k_r]), release_freewheel_energy_j=float(w_fw[k_r]),
        release_corner=grid.label(k_r), flux_outlasts_s=float(np.max(outlasts)),
        hold_eddy_power_w=float(power[k_h]), hold_corner=grid.label(k_h))


def _on_bus(drive: Drive, res: PointResults, i_off, peak_time, peak_end, outlasts, step):
    """A full bridge's release on the drooping bus: ``(block current A, eddy loss J,
    body diodes' energy J, how much longer the flux takes s)`` per point, each the worst
    over the starting buses. A moving armature: the design's run (``outlasts`` the open
    stop's lead over the zero, as given); the still coil: the fast decays of
    :func:`coildrive.design.bridge_bus.decays` (the drop-out's lead over the zero)."""
    rel = release_loop(res)
    arm = res.armature
    if arm is not None and arm.bus_release is not None:
        b = arm.bus_release
        shape = np.shape(step)
        return (np.reshape(b.block_current, shape), np.reshape(b.eddy_energy, shape),
                np.asarray(freewheel_element_energy(drive, rel, np.reshape(b.run.charge, shape),
                                                    np.reshape(b.run.square, shape)), float), outlasts)
    runs = decays(drive, res, np.where(np.isfinite(i_off), i_off, 0.0), peak_time, peak_end)
    v_d2 = 2.0 * np.asarray(rel.diode(drive), float)
    block = np.max([(d.bus_at_zero + v_d2) / drive.coil.eddy_resistance for d in runs], axis=0)
    w_eddy = np.max([d.eddy_energy for d in runs], axis=0)
    w_fw = np.asarray(freewheel_element_energy(drive, rel, np.max([d.charge for d in runs], axis=0), 0.0), float)
    lead = np.max([np.maximum(d.drop_time - d.zero_time, 0.0) for d in runs], axis=0)
    return block + 0.0 * step, w_eddy + 0.0 * step, w_fw + 0.0 * step, lead + 0.0 * step
