"""The boosted peak with a moving armature (``[supply] boost`` and ``[armature]``): the runs
over the points and the figures :mod:`coildrive.design.boost` takes from them in place of
the still coil's closed form. Physics in :mod:`coildrive.model.armature_boost`.

Four batched runs of the armature switched on from the boost, each ending where the coil's
current first reaches a threshold (the motion's back-EMF, its dip at the seat, all in it;
with an eddy term the terminal current, what the sense sees):

* the pull-in (``slow``): the boost at its lowest until the threshold itself (the earliest
  any sense chain trips: the shortest push from the boost), then the hold from the main
  supply, the armature followed until it seats or ``pull_in.margin`` x the longest peak over
  the points has passed (the envelope's: the time-out before its rounding up to whole
  ticks) -- the window the design asks it to seat in;
* the longest peak (``long_time``): the boost at its lowest until the highest trip current,
  seen one conversion late -- its worst x ``pull_in.margin`` is the time-out; the boost
  capacitor at its end is the droop check's;
* the fastest peak: the boost at its highest until the threshold;
* the most current: the boost at its highest until the highest trip current; over the one
  conversion after it the current rises at most as the open coil's would from there on a
  stiff boost at full charge (while the armature stands or closes its motional term only
  holds the current back, and ``L(x) >= L_open``), so that bounds the end current and, with
  the capacitor's state at the trip, the energy drawn.

On a drooping main supply (``source_resistance``, a linear coil on one switch, an eddy term
too) the hold runs
on the main bus from the hand-over, its capacitor a state of the flight
(:func:`~coildrive.model.armature_boost.boosted_pull_in` with ``bus0``: the source's voltage,
nothing drew from it during the peak), with the boost converter's draw from the hand-over
on taken as the still coil's (:func:`coildrive.design.supply.converter_current` at the
larger of the hold's first on-time from the most current at the hand-over, the open coil's
(:func:`hand_over_draw`), and the hold's top: the source ``V_s - R_s I_conv``). So the pull-in run's seat includes the droop, and with a voltage-mode PWM hold
the lowest bus is the lower of two runs' (:func:`coildrive.design.supply.armature_bus`): the pull-in's (the
earliest hand-over) and a fifth, the most current (the boost at its highest until the
current reaches the most the peak can end with, ``end_current`` -- where that run never
gets there, the highest trip current -- then the hold on the bus).

Under a closed-loop hold the pull-in run is redone where the armature is still in flight
when the peak ends, each hold period's duty the driver's integer PI on the period's
conversion (:class:`LoopControl`, :func:`loop_pull_in`; with an eddy term the conversion
reads the terminal current); under a current-mode hold the hold's comparator carries it
(:func:`threshold_pull_in`: a linear coil, an eddy term too; with an eddy term or a bouncing
seat on a drooping main supply it needs it seated within the peak,
:func:`require_seated_in_peak`).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..config import Drive
from ..errors import InputError
from ..model.armature import ArmatureParams, params_from_loop
from ..model.armature_boost import (boost_energy, boost_params, boosted_pull_in, curve_window, seated_in_peak,
                                    window_flight)
from ..model.armature_runs import PullInBatch, pull_in
from ..model.circuit import Loop, split_decay
from ..model.rl import rise_current
from .timer import conversion_period


@dataclass(frozen=True)
class BoostRuns:
    """The runs of the module docstring, arrays over the points (s, A, V, J).

    ``slow``: the pull-in (:func:`~coildrive.model.armature_boost.boosted_pull_in`; its
    ``trip_time`` the end of the shortest peak, ``bound`` the window's end (s from
    switch-on), ``peak_end_current`` ``end_current``). ``long_time``: the longest peak (``inf`` where the boost at its lowest
    never drives the highest trip current); ``low_boost``: the boost capacitor at its end
    (NaN where never; the boost itself for an ideal one). ``fast_time``: the shortest time to
    the threshold. ``end_current``: the most current at the end of the peak (a bound),
    ``end_boost`` the boost at full charge then (V);
    ``energy``: the most the boost gives in one peak (J). ``duty``: the hold's duty the
    pull-in ran with (its reuse key). ``window``: the seat's window (s from switch-on).
    ``end_time``: the end of the peak with the most current (s from switch-on; ``inf``
    where never). ``most``: on a drooping main supply under a voltage-mode PWM hold, the
    run handed over at the most current (:func:`coildrive.design.supply.armature_bus`), else ``None``.
    On a drooping main supply ``slow`` and ``most`` carry the lowest bus up to the seat
    only (their orbits: :func:`coildrive.design.supply.armature_bus`); ``hold_params`` and ``period`` are the hold's
    points and period (s) they ran with."""

    slow: PullInBatch
    long_time: np.ndarray
    low_boost: np.ndarray
    fast_time: np.ndarray
    end_current: np.ndarray
    end_boost: np.ndarray
    energy: np.ndarray
    duty: np.ndarray
    window: float
    end_time: np.ndarray | None = None
    most: PullInBatch | None = None
    hold_params: ArmatureParams | None = None
    period: np.ndarray | None = None
    #: the most current the boost at its lowest drives where it never reaches the trip
    #: (A per point; ``None``: the still coil's, :func:`coildrive.model.boost` ``highest_current``)
    reachable: np.ndarray | None = None
    #: the hold's first period's duty per point the main bus's draw was taken at (:func:`hand_over_draw`)
    first_duty: np.ndarray | None = None


def boosted_params(drive: Drive, p: ArmatureParams, high: bool) -> ArmatureParams:
    """``p`` with the boost as its source (:func:`~coildrive.model.armature_boost.boost_params`)
    at its lowest (voltage and capacitance less their tolerances) or, with ``high``, its
    highest."""
    s = drive.supply
    sign = 1.0 if high else -1.0
    return boost_params(p, s.boost * (1.0 + sign * s.boost_tolerance),
                        s.boost_capacitance * (1.0 + sign * s.boost_capacitance_tolerance), s.boost_resistance)


def _end(drive: Drive, pb: ArmatureParams, pin: PullInBatch, i_trip: float):
    """``(end of the peak s, the most current then A, the boost then V, energy J)`` one
    conversion (a PWM period, :func:`coildrive.design.timer.conversion_period`) after
    ``pin``'s trip at ``i_trip`` A: the open coil's stiff rise at the
    boost's voltage bounds the current over it (with an eddy term the magnetising current's
    rise through the loop's Thevenin pair, and the terminal current ``(V_b + R_e i_m)/(R +
    R_e)`` from it); the capacitor gives at most that current.
    With a bouncing seat (``restitution``) a rebound's motional term drives the
    current up past that rise: where the armature is in flight at the trip the window is
    flown, bounces and all (:func:`~coildrive.model.armature_boost.window_flight`; with an
    eddy term the branch's flight, its highest the terminal current's), to its
    end or until the armature rests at a stop, and the open coil's rise bounds only the rest
    of it, from the current (the magnetising current) and the capacitor there; the most
    current is the larger of the flight's highest and that rise's end.
    With the two flux-linkage curves (``pb.curves``) the conversion is flown exactly
    at every point that trips (:func:`~coildrive.model.armature_boost.curve_window`: a
    saturating coil's rise has no such bound); the most current is its highest, the boost
    then the capacitor's (an ideal boost's own voltage).
    Where the trip never comes: ``inf``, ``i_trip``, the boost's full voltage, NaN."""
    dt = conversion_period(drive)
    n = len(pb)
    hit = np.isfinite(pin.trip_time)
    if pb.curves is not None:
        high, _, y = curve_window(pb, pin, dt)
        nan = np.full(n, np.nan)
        return (np.where(hit, pin.trip_time + dt, np.inf), np.where(hit, high, i_trip),
                np.where(hit, y[5], pb.v_on) if pb.droops else pb.v_on.copy(), np.where(hit, boost_energy(pb, np.where(hit, y, 0.0)), nan))
    y = np.where(hit, pin.trip_state, 0.0)
    rest, i_from, top = np.full(n, dt), np.full(n, float(i_trip)), np.zeros(n)
    flown = np.zeros(n, bool)
    if np.any(pb.restitution > 0):
        flown, high, t_f, y_f = window_flight(pb, pin, dt)
        y = np.where(flown, y_f, y)
        rest = np.where(flown, np.maximum(np.where(hit, pin.trip_time, 0.0) + dt - t_f, 0.0), rest)
        top = np.where(flown, high, top)
    if pb.eddy is None:
        i_from = np.where(flown, pb.current(y[0], y[1]), i_from)
        i_rise = rise_current(rest, i_from, pb.v_on, pb.r_on, pb.l_open)
    else:   # the magnetising current's bound (its Thevenin rise), then the terminal current's
        i_m = rise_current(rest, pb.current(y[0], y[1]), pb.v_on, pb.r_on, pb.coil_open)
        i_rise = np.maximum((pb.v_on + pb.eddy * i_m) / (pb.r_on + pb.eddy), i_trip)
    i_end = np.maximum(i_rise, top)
    if pb.droops:
        u = y[5] - i_rise * rest / pb.capacitance
        y = np.concatenate([y[:5], u[None]])
    else:
        u = pb.v_on.copy()
        y = np.concatenate([y[:3], (y[3] + i_rise * rest)[None], y[4:5]])
    nan = np.full(len(pb), np.nan)
    # (where the trip never comes the current stays below it; the boost no higher than full)
    return (np.where(hit, pin.trip_time + dt, np.inf), np.where(hit, i_end, i_trip),
            np.where(hit, u, pb.v_on), np.where(hit, boost_energy(pb, y), nan))


def runs(drive: Drive, p: ArmatureParams, duty, period, i_top, thresholds: tuple[float, float],
         bus_top=None, mixed=None, first_duty=None) -> BoostRuns:
    """The runs of the module docstring at the points of ``p`` (the hold's loop on the main
    supply), the hold's ``duty`` and ``period`` s (per point) and its steady ripple top
    ``i_top`` A (the magnetising current's with an eddy term); ``thresholds``: the threshold
    and the highest trip current, A (:func:`coildrive.design.boost.threshold`). ``bus_top``:
    the most current the hold draws from the bus (A per point; with an eddy term the
    terminal current's top, which steps above ``i_top`` at each switch-on), default ``i_top``.
    ``mixed``: a full bridge's mixed-decay hold (:class:`~coildrive.model.pwm.MixedDecay`,
    its arrays per point): the hold after the threshold decays fast for that fraction of
    each off-time first (:func:`~coildrive.model.armature_boost.boosted_pull_in`).
    ``first_duty``: the duty of the hold's first period (a closed loop's preload; ``None``:
    ``duty``), for the most the coil draws from the main bus (:func:`hand_over_draw`)."""
    i_th, i_trip = thresholds
    low, high = boosted_params(drive, p, False), boosted_params(drive, p, True)
    long_time, _, low_boost, energy_low = _end(drive, low, pull_in(low, trip=i_trip), i_trip)
    finite = long_time[np.isfinite(long_time)]
    until = drive.pull_in.margin * (float(np.max(finite)) if finite.size else 0.0)
    end_time, end_current, end_boost, energy_high = _end(drive, high, pull_in(high, trip=i_trip), i_trip)
    p_hold, bus0 = main_bus(drive, p, np.maximum(hand_over_draw(drive, p, end_current, duty if first_duty is None
                                                                else first_duty, period),
                                                 i_top if bus_top is None else bus_top))
    slow = boosted_pull_in(low, p_hold, i_th, duty, period, until, i_top, bus0=bus0, orbit=False, mixed=mixed)
    fast_time = pull_in(high, trip=i_th).trip_time
    most = None
    if p.droops and pwm_on_bus(drive):   # the hand-over at the most current, onto the bus
        most = boosted_pull_in(high, p_hold, np.where(np.isfinite(end_time), end_current, i_trip), duty, period,
                               until, i_top, bus0=bus0, orbit=False)
    slow = replace(slow, peak_end_current=end_current)
    return BoostRuns(slow=slow, long_time=long_time, low_boost=low_boost, fast_time=fast_time,
                     end_current=end_current, end_boost=end_boost, energy=np.fmax(energy_low, energy_high),
                     duty=np.broadcast_to(np.asarray(duty, float), (len(p),)).copy(), window=until,
                     end_time=end_time, most=most, hold_params=p_hold,
                     period=np.broadcast_to(np.asarray(period, float), (len(p),)).copy(),
                     first_duty=np.broadcast_to(np.asarray(duty if first_duty is None else first_duty, float),
                                                (len(p),)).copy())


def hand_over_draw(drive: Drive, p: ArmatureParams, end_current, first_duty, period) -> np.ndarray:
    """The most current (A per point) the coil draws from the main bus in the hold's first
    on-time after the hand-over at ``end_current`` A (the most the peak ends with): on a
    stiff bus at ``V_s`` with the open coil, at rest or closing at the hand-over
    (:func:`coildrive.design.supply.first_on_top`), at the first period's duty
    ``first_duty`` and ``period`` s; ``end_current`` itself under a current-mode hold, which
    stays off until the current falls into its band. Once seated, every later on-time lies
    under it or the hold's top (the still coil's argument,
    :func:`coildrive.design.supply.handover_bus`); while the armature is in flight that is
    taken, not proven (the runs carry the bus itself then; only the converter's constant
    draw rests on it; checked against solve_ivp in tests/test_boost_armature_droop_floor.py:
    the first on-time after the hand-over is the flight's highest, later ones fall as the
    gap closes)."""
    if drive.hold.mode != "voltage":
        return np.asarray(end_current, float)
    from .supply import first_on_top

    return first_on_top(p.v_on, p.r_on, p.coil_open, np.where(np.isfinite(end_current), end_current, 0.0),
                        first_duty, period)


def pwm_on_bus(drive: Drive) -> bool:
    """Whether the hold after the hand-over is a fixed-duty PWM (voltage mode, fixed or a
    supply table): then the drooping bus is run exactly through the armature's flights, and
    after the seat the seated coil's PWM exactly (:func:`coildrive.design.supply.armature_bus`)
    or, with a clamp across the switch drawing in its off-times, under its floor
    (:func:`coildrive.design.supply.armature_clamp_bus`); else
    :func:`coildrive.design.supply.handover_bus` takes the floor from the hand-over on."""
    return drive.hold.mode == "voltage" and drive.hold.regulation != "closed_loop"


def clamp_draws(drive: Drive, p: ArmatureParams) -> ArmatureParams:
    """``p`` (points on the drooping main bus, ``v_on`` the source's voltage) with the hold's
    off-times through a clamp across the switch drawing from the bus
    (:meth:`~coildrive.model.armature.ArmatureParams.clamped`) where the drive has one and
    no split decay bypasses it in the hold (then only the release draws through it: after
    the seat, under :func:`coildrive.design.supply.armature_clamp_bus`'s floor); else ``p``."""
    return p.clamped() if p.droops and drive.freewheel.type == "clamp" and not split_decay(drive) else p


def main_bus(drive: Drive, p: ArmatureParams, i_top) -> tuple[ArmatureParams, np.ndarray]:
    """``(the hold's points, the bus at the hand-over V)``: on a drooping main supply the
    source behind ``R_s`` less the boost converter's draw from the hand-over on (a constant
    current, :func:`coildrive.design.supply.converter_current` with the coil at most
    ``i_top`` A: ``V_s - R_s I_conv``), the bus starting at ``V_s``, a clamp across the switch
    drawing from it in the off-times (:func:`clamp_draws`); on a stiff one ``p`` itself."""
    if not p.droops:
        return p, p.v_on
    from .supply import converter_current

    i_conv = converter_current(drive, p.v_on, np.where(np.isfinite(i_top), i_top, 0.0))
    return (replace(clamp_draws(drive, p), v_on=p.v_on - drive.supply.source_resistance * i_conv),
            p.v_on.copy())


def peak_heat(drive: Drive, lp, peak_time) -> np.ndarray:
    """J that heats the coil in one boosted peak with the moving armature at the points
    of ``lp`` (an on/off cycle's peak, :func:`coildrive.design.thermal_cycle.peak_heat`):
    ``R_coil int i^2 dt`` of the armature's run from the boost (the run's own ``sq``,
    :func:`~coildrive.model.armature_runs.pull_in` with the highest trip current) to the
    threshold, plus the one conversion after it at the most current over it
    (:func:`_end`'s stiff open-coil bound), from the boost at its lowest (the longest peak)
    and at its highest (the most current), the larger. Where the run never reaches the
    highest trip current the current stays below it for the whole time-out ``peak_time``
    s: ``R_coil i_trip^2 peak_time`` bounds it. With the open and seated flux-linkage
    curves the conversion after the threshold is flown, not bounded
    (:func:`~coildrive.model.armature_boost.curve_window`: its ``int i^2 dt`` row). The
    runs do not depend on the main supply: each distinct point is run once.

    With an eddy term (``i`` the terminal current the winding carries) the core's loss
    ``int v_m^2 / R_e dt`` is added, bounded from above by the first law at the trip: what
    the boost gave (``1/2 C_b (V_b^2 - u^2)``, an ideal boost ``V_b int i dt``) less the
    loop's copper ``(R_on + R_b) int i^2 dt``, the field's ``lambda i_m / 2`` (linear
    ``L(x)``), the armature's kinetic energy and the spring's and load's work -- the
    damping's heat, not known without integrating it, is left in, so the bound is exact
    with no damping and above the loss by that heat otherwise. Over the conversion after
    the trip (and over the time-out where the trip never comes) the branch's voltage
    ``v_m = R_e (u - R i_m) / (R + R_e)`` is at most ``R_e max(V_b, R i_m) / (R + R_e)`` in
    size, ``i_m`` at most the open branch's stiff rise from the trip (where never, at most
    ``(R + R_e) i_trip / R_e``, the terminal current being below ``i_trip``)."""
    from ..model.eddy import EddyCoil
    from ..model.flux import FluxCoil
    from .boost import threshold

    eddy = isinstance(lp.inductance, EddyCoil)
    fields = ("v_on", "r_on", "r_off", "v_off", "r_coil", "supply")
    ind = lp.inductance.magnetising if eddy else lp.inductance
    curves = isinstance(ind, FluxCoil)
    shape = np.broadcast_shapes(*(np.shape(getattr(lp, f)) for f in fields), np.shape(ind))
    flat = {f: np.ravel(np.broadcast_to(getattr(lp, f), shape)).astype(float) for f in fields}
    # (the loop's inductance, the magnetising branch's with an eddy term, is the seated one
    # x the tolerance factor: circuit.loop; with the two curves the seated curve at that scale)
    factor = np.ravel(np.broadcast_to(np.asarray(ind.scale if curves else ind / drive.armature.inductance_closed,
                                                 float), shape))
    r_e = float(drive.coil.eddy_resistance) if eddy else 0.0
    ind = ind.with_scale(factor) if curves else np.ravel(np.broadcast_to(np.asarray(ind, float), shape))
    flat = Loop(flat["v_on"], flat["r_on"], flat["r_off"], flat["v_off"], ind, flat["r_coil"], flat["supply"])
    p = params_from_loop(drive.armature, flat, factor, r_e)
    t_out = np.ravel(np.broadcast_to(np.asarray(peak_time, float), shape))
    # the runs depend on the point's loop, tolerances and time-out, not on the main supply
    # (the boost drives the peak, boosted_params replaces v_on): each distinct point runs once
    rows = np.stack([getattr(p, n) for n in p.arrays if n != "v_on"] + [factor, flat.r_coil, t_out], axis=1)
    _, first, back = np.unique(rows, axis=0, return_index=True, return_inverse=True)
    p, r_coil, t_out = p.take(first), flat.r_coil[first], t_out[first]
    i_trip = threshold(drive)[2]
    dt = conversion_period(drive)
    heat = np.zeros(len(p))
    for high in (False, True):
        pb = boosted_params(drive, p, high)
        pin = pull_in(pb, trip=i_trip)
        hit = np.isfinite(pin.trip_time)
        y = np.where(hit, pin.trip_state, 0.0)
        if curves:   # the conversion flown exactly (no closed-form rise bounds a saturating coil's)
            sq = np.where(hit, curve_window(pb, pin, dt)[2][4], i_trip**2 * t_out)
        else:
            _, i_end, _, _ = _end(drive, pb, pin, i_trip)
            sq = np.where(hit, y[4] + i_end**2 * dt, i_trip**2 * t_out)
        total = r_coil * sq
        if eddy:
            total = total + np.where(hit, _core_loss(pb, y) + _branch_bound(pb, r_e, rise_current(
                dt, pb.current(y[0], y[1]), pb.v_on, pb.r_on, pb.coil_open)) ** 2 * dt / r_e,
                _branch_bound(pb, r_e, (pb.r_on + r_e) * i_trip / r_e) ** 2 * t_out / r_e)
        heat = np.maximum(heat, total)
    return heat[np.ravel(back)].reshape(shape)


def _core_loss(pb: ArmatureParams, y) -> np.ndarray:
    """J: the eddy resistance's heat in the run to the state ``y`` (rows of the run),
    bounded from above by the first law (:func:`peak_heat`): the boost's energy less the
    loop's copper, the field's, the kinetic energy and the spring's and load's work."""
    lam, x, v, _, sq = y[:5]
    travel = pb.stroke - x
    work = (pb.preload + pb.load) * travel + 0.5 * pb.rate * travel**2
    field = 0.5 * lam * pb.current(lam, x)
    return np.maximum(boost_energy(pb, y) - pb.r_on * sq - field - 0.5 * pb.mass * v**2 - work, 0.0)


def _branch_bound(pb: ArmatureParams, r_e: float, i_m) -> np.ndarray:
    """V: the largest size of the magnetising branch's voltage ``R_e (u - R i_m)/(R + R_e)``
    with the boost at most at its full ``V_b`` and the branch's current at most ``i_m`` A."""
    return r_e * np.maximum(pb.v_on, pb.r_on * np.asarray(i_m, float)) / (pb.r_on + r_e)


def sampled_pull_in(drive: Drive, res, v_factor, c_factor, duty, timeout):
    """``res`` (evaluated points, with their armature runs) with each point's pull-in time
    from its own boost: the boost voltage x ``v_factor`` and its capacitance x ``c_factor``
    (arrays over the points: the tolerance Monte Carlo's draws), the armature's run from it
    until the threshold itself (the earliest trip, as the envelope's pull-in run), then the
    hold at ``duty`` (per point) from the main supply until it seats or the time-out
    ``timeout`` s (per point) has passed -- the seat time, ``inf`` where not seated by then."""
    from .boost import threshold

    s = drive.supply
    p = res.armature.params
    n = len(p)
    pb = boost_params(p, s.boost * np.asarray(v_factor, float), s.boost_capacitance * np.asarray(c_factor, float),
                      s.boost_resistance)
    per_point = (lambda x: np.ravel(np.broadcast_to(np.asarray(x, float), (n,))))
    top = per_point(res.hold.i_max)
    t_max = getattr(res.hold, "terminal_max", None)   # (an eddy term: what the bus feeds)
    draw = top if t_max is None else np.maximum(top, per_point(t_max))
    first = per_point(duty if res.first_duty is None else res.first_duty)
    p_hold, bus0 = main_bus(drive, p, np.maximum(hand_over_draw(drive, p, res.armature.boost.end_current, first,
                                                                per_point(res.hold.period)), draw))
    pin = boosted_pull_in(pb, p_hold, threshold(drive)[0], per_point(duty), per_point(res.hold.period),
                          per_point(timeout), top, bus0=bus0, orbit=False, mixed=_mixed(res.loop))
    return replace(res, pull_in_time=pin.seat_time.reshape(np.shape(res.pull_in_time)))


def _mixed(lp):
    """The mixed-decay hold of the loop ``lp`` with its arrays flat over the points (a
    :class:`~coildrive.model.pwm.MixedDecay`), or ``None`` without one."""
    return None if lp.mixed is None else lp.mixed.flat(np.shape(lp.v_on))


def require_seated_in_peak(drive: Drive, label, pin: PullInBatch, key: str, hold: str, why: str,
                           instead: str = "a voltage-mode hold") -> None:
    """Refuse in one line (``key``) a ``hold`` that is not modelled with the armature moving
    (``why``, in words), where the pull-in run ``pin`` (the envelope's: the boost at its
    lowest until the threshold itself, the shortest push any real peak gives) has the
    armature not yet on the seat when the peak ends; ``label(k)`` names point ``k``;
    ``instead``: the holds that do carry it, in words."""
    late = np.flatnonzero(~seated_in_peak(pin))
    if late.size:
        k = int(late[np.argmax(pin.seat_time[late])])
        raise InputError(drive.source, key, f"{hold} after the boosted peak is modelled with a moving "
                         "armature only where it seats within the peak, and at "
                         f"{label(k)} it is not yet seated when the peak ends ({why}): expected a higher threshold "
                         f"(pull_in.current_margin) or {instead}")


class LoopControl:
    """The closed loop's duty after a boosted peak, period by period, as the reference
    driver computes it (the header's integer PI, docs/firmware.md): a ``control`` of
    :func:`~coildrive.model.armature_boost.boosted_pull_in`.

    The conversion that reads the threshold preloads the integrator (``preload_compare``)
    and runs the first PI step on the threshold's code (:meth:`first`); every period's
    conversion -- the middle of the on-time with the sense under the switch, of the period
    in the coil path -- gives the next period's compare. ``loop``: the design's
    :class:`~coildrive.design.result.ClosedLoopResult`; ``counts``: the timer's period
    (counts); ``codes_per_amp``: the reading's codes per true ampere at each point (the
    chain reading high: the lowest current the loop settles at, the weakest push)."""

    def __init__(self, loop, counts: int, codes_per_amp, switch_leg: bool, full: int):
        self.loop, self.counts, self.switch_leg, self.full = loop, counts, switch_leg, full
        self.cpa = np.asarray(codes_per_amp, float)
        self.integ = np.full(self.cpa.shape, loop.preload_compare << loop.gain_shift, dtype=np.int64)

    def sample(self, duty) -> np.ndarray:
        """The conversion's moment, a fraction of the period, at each point's ``duty``."""
        return 0.5 * np.asarray(duty, float) if self.switch_leg else np.full(np.shape(duty), 0.5)

    def _pi(self, k, code) -> np.ndarray:
        r = self.loop
        lo, hi = r.integrator_min, r.integrator_max
        e = r.setpoint_code - np.asarray(code, np.int64)
        integ = self.integ[k]
        p = r.kp_q * e
        s = p + integ
        wound = ((s >= hi) & (e > 0)) | ((s <= lo) & (e < 0))
        integ = np.where(wound, integ, np.clip(integ + r.ki_q * e, lo, hi))
        self.integ[k] = integ
        s = np.clip(p + integ, lo, hi)
        return (s >> r.gain_shift) / self.counts

    def first(self, code: int) -> np.ndarray:
        """The first hold period's duty at every point, from the threshold's ``code``."""
        k = np.arange(self.cpa.size)
        return self._pi(k, np.full(k.size, code))

    def step(self, k, i) -> np.ndarray:
        """The next period's duty at points ``k`` from the current ``i`` A converted."""
        code = np.clip(np.floor(np.asarray(i, float) * self.cpa[k]), 0, self.full)
        return self._pi(k, code)


def loop_pull_in(drive: Drive, res, loop, counts: int, reading, switch_leg: bool):
    """``res`` (evaluated points with their boosted runs, the closed loop's settled duty in
    the hold) with the pull-in run redone under the loop's own duties where the armature is
    not yet seated when the peak ends: from the threshold the integer PI of
    :class:`LoopControl` (preloaded, cutting the duty while the reading is above the
    set-point) carries it, period by period, as the firmware does (``reading``: the sense
    chain's reading over the true current per point, its high end; with an eddy term the
    conversions read the terminal current, :func:`~coildrive.model.armature_boost.boosted_pull_in`).
    On a drooping main supply the flight runs on the bus as the runs' pull-in does (their
    ``hold_params``: the converter's draw out of the source, the bus from the source's
    voltage). The seat times, the pull-in time and the runs' ``slow`` follow (its lowest bus
    stays the runs': a closed loop's bus is the hand-over's floor); points seated within the
    peak keep theirs."""
    from .boost import threshold

    arm = res.armature
    runs_ = arm.boost
    late = _late(arm)
    if late.size == 0:
        return res
    b = drive.board
    cpa = b.sense.resistance * b.sense.gain / b.adc.reference * 2**b.adc.bits
    p = arm.params.take(late)
    control = LoopControl(loop, counts, cpa * np.ravel(np.broadcast_to(reading, (len(arm.params),)))[late],
                          switch_leg, 2**b.adc.bits - 1)
    i_th, code, _ = threshold(drive)
    period = np.ravel(np.broadcast_to(np.asarray(res.hold.period, float), (len(arm.params),)))[late]
    mixed = _mixed(res.loop)
    # on a drooping main supply the hold's points with the converter's draw out of the source
    # (the runs' own, a clamp's draw in the off-times too), the bus from the source's voltage
    # at the hand-over
    p_hold = clamp_draws(drive, p) if runs_.hold_params is None else runs_.hold_params.take(late)
    got = boosted_pull_in(boosted_params(drive, p, False), p_hold, i_th, control.first(code), period,
                          runs_.window, rtol=1e-7, bus0=p.v_on if p.droops else None, orbit=False,
                          control=control, mixed=None if mixed is None else mixed.at(late))
    return _merged(res, late, got)


def threshold_pull_in(drive: Drive, res, comparator):
    """``res`` (evaluated points with their boosted runs under a current-mode hold) with the
    pull-in run redone where the armature is not yet seated when the peak ends: from the
    threshold the hold's ``comparator`` switches it
    (:class:`~coildrive.model.armature_boost.Comparator`: off first, as the seated coil's
    hold, then on to the upper threshold and off to the lower one or for the off-time, each
    edge the comparator's delay after its crossing) until it seats or the runs' window ends
    (an armature fallen back to the open stop is taken as not seated). On a drooping main
    supply the flight runs on the bus as the runs' pull-in does (their ``hold_params``: the
    converter's draw out of the source, the bus from the source's voltage; the lowest bus
    stays the runs': a current-mode hold's bus is the hand-over's floor). A linear coil, an
    eddy term's too (its terminal current compared;
    :func:`coildrive.design.hold_current.in_flight_refused` names the rest). The seat times, the pull-in time and the runs' ``slow`` follow; points seated
    within the peak keep theirs."""
    from .boost import threshold

    arm = res.armature
    late = _late(arm)
    if late.size == 0:
        return res
    p = arm.params.take(late)
    top = np.ravel(np.broadcast_to(np.asarray(res.hold.i_max, float), (len(arm.params),)))[late]
    p_hold = p if arm.boost.hold_params is None else arm.boost.hold_params.take(late)
    got = boosted_pull_in(boosted_params(drive, p, False), p_hold, threshold(drive)[0], 0.0, 1.0, arm.boost.window,
                          top, rtol=1e-7, bus0=p.v_on if p.droops else None, orbit=False, comparator=comparator)
    return _merged(res, late, got)


def _late(arm) -> np.ndarray:
    """The points whose boosted pull-in run (``arm.boost.slow``) reached the threshold with
    the armature not yet seated."""
    pin = arm.boost.slow
    return np.flatnonzero(~seated_in_peak(pin) & np.isfinite(pin.trip_time))


def _merged(res, late, got):
    """``res`` with its runs' pull-in (``slow``) taken from ``got`` at the points ``late``
    (a run redone under the hold's own switching), the armature's pull-in and the pull-in
    time with it."""
    arm = res.armature
    pin = arm.boost.slow
    fields = ("status", "seat_time", "seat_current", "impact_time", "impact_speed", "dip_current",
              "dip_time", "stall_gap", "bound", "bounces", "steps")
    merged = {}
    for name in fields:
        value = np.array(getattr(pin, name), copy=True)
        value[late] = getattr(got, name)
        merged[name] = value
    slow = replace(pin, **merged)
    arm = replace(arm, boost=replace(arm.boost, slow=slow), pull_in=slow)
    return replace(res, armature=arm, pull_in_time=slow.seat_time.reshape(np.shape(res.pull_in_time)))
