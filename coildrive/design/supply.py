"""The drooping bus in the design: the peak's rise behind ``supply.source_resistance``, and
the supply's figures and check (:class:`~coildrive.design.result.SupplyResult`).

Without a source resistance the rise is today's stiff-bus RL rise, to the bit; with one,
the circuit of :mod:`coildrive.model.supply` (source, ``R_s``, bulk ``C``, coil) gives the
time to the pull-in current and the current at the end of the peak at every point, so the
worst corner (the hot coil at the lowest supply) includes the droop.
"""

from __future__ import annotations

import numpy as np

from ..config import Drive
from ..model import rl
from ..model import flux_bus
from ..model.eddy import EddyCoil
from ..model.eddy import terminal as eddy_terminal
from ..model.flux import FluxCoil
from ..model.circuit import split_decay
from ..model import supply as bus_model
from . import boost
from .result import Check, SupplyResult

#: How the hold's capacitor ripple current is approximated (shown in the JSON and docs).
RIPPLE_METHOD = ("coil current flat at its hold mean while on; the source gives the average, "
                 "the capacitor the rest: mean x sqrt(D (1 - D))")
#: ... and with a full bridge's mixed decay, whose fast parts return the coil current.
MIXED_RIPPLE_METHOD = ("coil current flat at its hold mean, drawn while on and returned in each "
                       "off-time's fast part; the source gives the average, the capacitor the rest: "
                       "mean x sqrt(D + F - (F - D)^2), F = fast_fraction x (1 - D)")
#: ... and under a current-mode hold's mixed decay, whose fast part is timed per period.
MIXED_CURRENT_RIPPLE_METHOD = ("coil current flat at its hold mean, drawn while on and returned in each "
                               "off-time's fast part; the source gives the average, the capacitor the "
                               "rest: mean x sqrt(D + F - (F - D)^2), F = the fast part's time / the "
                               "period at the point")
#: ... and with a clamp across the switch, whose off-times draw from the bus too.
CLAMP_RIPPLE_METHOD = ("the bus draws the coil current on and off (switch, then clamp); the source "
                       "gives the average, the capacitor the coil's ripple: ripple / (2 sqrt 3)")


def mixed_share(lp, hold, on_share) -> np.ndarray:
    """The share of each hold period a full bridge's mixed decay spends all four open: a
    PWM hold's ``fast_fraction x (1 - D)``; a current-mode hold's own fast time over its
    period (``hold.fast_time``: the off-time's fraction, or the hysteretic one-shot cut
    short where the lower threshold comes in it)."""
    if hold.fast_time is None:
        return lp.mixed.fraction * (1.0 - np.asarray(on_share, float))
    return np.asarray(hold.fast_time, float) / np.asarray(hold.period, float)


def through_clamp(drive: Drive) -> bool:
    """True when the coil decays through a clamp across the switch, drawing from the bus:
    at the release always, in the hold's off-times unless split decay bypasses it."""
    return drive.freewheel.type == "clamp"


def bus_at(drive: Drive, lp, inductance):
    """The drooping bus of the peak at the points of the loop ``lp`` (:func:`coildrive.model.supply.bus`);
    with an eddy term (an :class:`~coildrive.model.eddy.EddyCoil`) its magnetising branch
    and eddy resistance; a saturating coil's (a :class:`~coildrive.model.flux.FluxCoil`,
    or an eddy term's magnetising branch that is one) is :func:`coildrive.model.flux_bus.bus`."""
    s = drive.supply
    r_e = None
    if isinstance(inductance, EddyCoil):
        inductance, r_e = inductance.magnetising, inductance.resistance
    if isinstance(inductance, FluxCoil):
        return flux_bus.bus(lp.v_on, s.source_resistance, s.capacitance, lp.r_on, inductance, r_e)
    return bus_model.bus(lp.v_on, s.source_resistance, s.capacitance, lp.r_on, inductance, r_e)


def model_of(b):
    """The module that answers for the bus ``b``: :mod:`coildrive.model.flux_bus` for a
    saturating coil's, else :mod:`coildrive.model.supply`."""
    return flux_bus if isinstance(b, flux_bus.FluxBus) else bus_model


def rise_time(drive: Drive, lp, i_target, inductance) -> np.ndarray:
    """Time (s) from switch-on to ``i_target`` A at the points of the loop ``lp`` (from the
    boost at its lowest with a boosted peak, :mod:`coildrive.design.boost`)."""
    if drive.supply.boosted:
        return boost.rise_time(drive, lp, i_target, inductance)
    if not drive.supply.droops:
        return rl.rise_time(i_target, 0.0, lp.v_on, lp.r_on, inductance)
    b = bus_at(drive, lp, inductance)
    return model_of(b).rise_time(i_target, b)


def rise_current(drive: Drive, lp, t, inductance) -> np.ndarray:
    """Current (A) ``t`` s after switch-on at the points of the loop ``lp``."""
    if drive.supply.boosted:
        return boost.rise_current(drive, lp, t, inductance)
    if not drive.supply.droops:
        return rl.rise_current(t, 0.0, lp.v_on, lp.r_on, inductance)
    b = bus_at(drive, lp, inductance)
    return model_of(b).current(t, b)


def steady_current(drive: Drive, lp) -> np.ndarray:
    """The current (A) a peak that never ends settles at: ``V/(R + R_s)`` (with a boost
    capacitor, the most it drives)."""
    if drive.supply.boosted:
        return boost.steady_current(drive, lp)
    return lp.v_on / (lp.r_on + drive.supply.source_resistance)


#: How the lowest bus after a boosted peak's hand-over is found (shown in the JSON and docs).
HANDOVER_PWM = ("the hold's PWM from the hand-over on the drooping bus, exact period by period "
                "until its orbit repeats (each on-time the bus and coil circuit in closed form; "
                "where it has not within 5000 periods, the floor below)")
#: ... with a moving armature: its runs on the bus (design/boost_armature.py).
HANDOVER_ARMATURE = ("the armature's runs from the hand-over on the drooping bus, its capacitor a state "
                     "of the flight until the seat, then the seated coil's PWM exact period by period "
                     "until its orbit repeats; the lower of the pull-in's (the earliest hand-over) and "
                     "the most current's (where an orbit has not repeated within 5000 periods, the "
                     "floor below)")
#: ... with a moving armature and a clamp across the switch, whose off-times draw from the bus.
HANDOVER_ARMATURE_CLAMP = ("the armature's runs from the hand-over on the drooping bus, its capacitor a "
                           "state of the flight (the clamp's off-times drawing from it) until the seat, "
                           "the lower of the pull-in's and the most current's; from the seat on a floor: "
                           "the source through R_s carries every draw (the coil at most the largest of "
                           "the hand-over current, the hold's top and its first on-time on a stiff bus "
                           "from the larger of the hand-over and the seat's current; the boost converter)")
#: ... with a moving armature over its open and seated flux-linkage curves (the seated
#: coil's PWM on the bus has no closed form).
HANDOVER_ARMATURE_CURVES = ("the armature's runs from the hand-over on the drooping bus, its capacitor a "
                            "state of the flight over the curves until the seat, the lower of the "
                            "pull-in's and the most current's; from the seat on a floor: the source "
                            "through R_s carries every draw (the coil at most the largest of the "
                            "hand-over current, the hold's top and its first on-time on a stiff bus "
                            "over the seated curve from the larger of the hand-over and the seat's "
                            "current; the boost converter)")
#: ... and split decay: the hold's off-times bypass the clamp, only the release draws through it.
HANDOVER_ARMATURE_SPLIT = HANDOVER_ARMATURE_CLAMP.replace(
    "(the clamp's off-times drawing from it)", "(the off-times through the bypass: the clamp draws only at "
    "the release, under the floor)")
#: ... where the hold's switching is not a fixed PWM, or a clamp draws in its off-times.
HANDOVER_FLOOR = ("a floor: the source through R_s carries every draw from the hand-over on "
                  "(the coil at most the largest of the hand-over current, its first on-time "
                  "from there on a stiff bus and the hold's top; the boost converter)")
#: ... where the coil saturates (a flux-linkage curve: no closed form for an on-time on the
#: bus) under a fixed-duty hold that draws in its on-times only.
HANDOVER_PULSES = ("a floor: the bus driven from the hand-over on by the coil's most current in "
                   "every on-time (the largest of the hand-over current, its first on-time from "
                   "there on a stiff bus and the hold's top) and the boost converter's, through "
                   "R_s and C in closed form (the periodic response of an RC to a rectangular train)")


def converter_current(drive: Drive, v_s, i_top) -> np.ndarray:
    """The most current (A) the boost converter draws from the main bus while it recharges,
    drawing ``supply.converter_draw`` W as the coil draws at most ``i_top`` A
    (:func:`coildrive.model.supply.converter_current`)."""
    s = drive.supply
    return bus_model.converter_current(v_s, s.source_resistance, s.converter_draw, i_top)


def armature_bus(runs) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(lowest main bus V, when s from switch-on, settled)`` per point after a moving
    armature's boosted peak (its runs, :class:`~coildrive.design.boost_armature.BoostRuns`,
    on a drooping main supply under a voltage-mode PWM hold): the lower of the pull-in
    run's and the most-current run's (each through its flight on the bus, then the seated
    coil's PWM until its orbit repeats, :func:`coildrive.model.armature_boost.with_orbit`;
    ``settled`` False where a run's had not). Where it had not, :func:`handover_bus` takes
    the floor of the hand-over current and the hold's top under it: a bound of the bus after
    the run (:func:`~coildrive.model.supply.bus_floor` holds from any moment on, the bus then
    at or above the run's lowest), where the seated coil's on-time tops lie under the stiff
    bus's from the same start, moving monotonically onto the orbit -- what is left over the
    hold's top is at most its ripple, which the floor's slack (the top drawn without a
    break, from ``V_s``) has covered in every drive measured -- an argument and a measurement,
    not a proof; the first on-time from the seat current lies inside the run (checked against
    solve_ivp: tests/test_boost_armature_droop_floor.py)."""
    from ..model.armature_boost import with_orbit

    a, b = (with_orbit(runs.hold_params, r, runs.duty, runs.period) for r in (runs.slow, runs.most))
    lower = b.lowest_bus < a.lowest_bus
    return (np.where(lower, b.lowest_bus, a.lowest_bus), np.where(lower, b.lowest_bus_time, a.lowest_bus_time),
            a.bus_settled & b.bus_settled)


def armature_clamp_bus(drive: Drive, lp, runs, top, duty, period) -> tuple[np.ndarray, np.ndarray]:
    """``(lowest main bus V, when s from switch-on)`` per point after a moving armature's
    boosted peak (its runs, :class:`~coildrive.design.boost_armature.BoostRuns`) on a
    drooping main supply under a fixed-duty PWM hold whose off-times draw from the bus
    through a clamp across the switch, or over the coil's open and seated flux-linkage
    curves (``lp.inductance`` the seated curve: its PWM on the bus has no closed form): the
    lower of the pull-in run's and the most-current run's flights from the hand-over to the
    seat (the bus a state of the flight, a clamp's draw in it: exact), and from the seat on
    a floor (:func:`coildrive.model.supply.bus_floor`:
    the source through ``R_s`` carrying every draw, the coil at most the largest of ``top``
    A -- the hand-over current and the hold's top -- and the seated coil's first on-time on a
    stiff bus from the larger of the hand-over current and the seat's,
    :func:`_first_on_top`, whose argument holds from a seat inside a period too: the rest of
    that period's on-time lies under a whole one, and the next period starts no higher than
    the period map of the seat's current; plus the boost converter at that top). A bus below
    the floor at the seat only recovers towards it, so the lower of the two bounds the bus
    from the seat on. ``lp``: the loop at the points; ``duty``, ``period`` s: the hold's."""
    shape = np.shape(lp.v_on)
    slow, most = runs.slow, runs.most
    i_seat = np.fmax(slow.seat_current, most.seat_current).reshape(shape)
    i_hand = runs.end_current.reshape(shape)
    top = np.maximum(top, _first_on_top(drive, lp, np.fmax(i_hand, i_seat), duty, period))
    i_conv = converter_current(drive, lp.v_on, top)
    floor = bus_model.bus_floor(lp.v_on, drive.supply.source_resistance, top + i_conv)
    lower = most.lowest_bus < slow.lowest_bus
    v_fl = np.where(lower, most.lowest_bus, slow.lowest_bus).reshape(shape)
    t_fl = np.where(lower, most.lowest_bus_time, slow.lowest_bus_time).reshape(shape)
    seat = slow.seat_time.reshape(shape)   # (the floor's moment: the seat, or the hand-over)
    t_floor = np.where(np.isfinite(seat), np.maximum(seat, slow.trip_time.reshape(shape)), t_fl)
    below = floor < v_fl
    return np.where(below, floor, v_fl), np.where(below, t_floor, t_fl)


def _pwm_hold(drive: Drive) -> bool:
    """True when the hold switches at a fixed duty (voltage mode, fixed or a supply table)."""
    return drive.hold.mode == "voltage" and drive.hold.regulation != "closed_loop"


def first_on_current(lp, i_m, duty, period) -> np.ndarray:
    """The most (with an eddy term: magnetising) current (A) in a hold's first on-time of
    ``duty`` x ``period`` s from ``i_m`` A on a stiff bus at the loop's ``V_s``, per point:
    the larger of ``i_m`` and the on-time's end (:func:`coildrive.model.rl.rise_current`:
    a linear coil, a curve, an eddy term's branch). An unknown (NaN) duty is taken as all
    on: the bound stays a bound. Why it bounds the hold's later on-times on a bus at or
    below ``V_s``: :func:`_first_on_top`."""
    return _rise_top(lp.v_on, lp.r_on, lp.inductance, i_m, duty, period)


def _rise_top(v_on, r_on, ind, i_m, duty, period) -> np.ndarray:
    """:func:`first_on_current` at ``v_on`` V, ``r_on`` ohm and the coil ``ind``."""
    t_on = np.clip(np.nan_to_num(np.asarray(duty, float), nan=1.0), 0.0, 1.0) * np.asarray(period, float)
    return np.maximum(rl.rise_current(t_on, i_m, v_on, r_on, ind), i_m)


def first_on_top(v_on, r_on, ind, i_m, duty, period) -> np.ndarray:
    """The most current (A) the bus gives the coil ``ind`` (H, a curve, an
    :class:`~coildrive.model.eddy.EddyCoil`) in an on-time of ``duty`` x ``period`` s from
    the magnetising current ``i_m`` A on a stiff bus at ``v_on`` V through ``r_on`` ohm
    (:func:`_rise_top`; with an eddy term the larger of the terminal current ``(V_s + R_e
    i_m)/(R + R_e)`` at either end and the magnetising current, which bounds what a
    clamp's off-times draw, ``R_e i_m/(R_off + R_e)``). With a moving armature at rest on
    the open stop or closing, ``ind`` its open coil
    (:attr:`~coildrive.model.armature.ArmatureParams.coil_open`) bounds the on-time: ``L(x)
    di/dt = v - R i - i L'(x) x'`` with ``L(x) >= L_open`` and the motional term ``-i L'
    x' <= 0`` while the gap closes (``L' < 0``, ``x' <= 0``; a rebound off the seat is not
    covered)."""
    top = _rise_top(v_on, r_on, ind, i_m, duty, period)
    if isinstance(ind, EddyCoil):     # (a clamp's off-times draw at most the magnetising current)
        return np.maximum(eddy_terminal(top, v_on, r_on, ind.resistance), top)
    return top


def _first_on_top(drive: Drive, lp, i_m, duty, period) -> np.ndarray:
    """The most current (A) the main bus gives the coil in a fixed-duty hold's first
    on-time from the magnetising current ``i_m`` A at the hand-over, taken on a stiff bus
    at ``V_s`` with the loop's coil (:func:`first_on_top`). Why it bounds every later draw
    too: the flux obeys ``dpsi/dt = v_th - R_th i_m`` with the bus at or below ``V_s`` (the
    main diode blocks it from rising above), so the current on the drooping bus never
    exceeds the stiff bus's under the same switching (a one-state flow keeps its order; the
    off-times are the same flow on both); on the stiff bus the period map is increasing, so
    the period-start currents move monotonically onto the orbit and each on-time's top (an
    increasing function of its start) lies below the first one's or the orbit's
    (:func:`handover_bus` takes the hold's top too)."""
    return first_on_top(lp.v_on, lp.r_on, lp.inductance, i_m, duty, period)


def _shaped(coil, shape):
    """``coil`` (H per point, or an :class:`~coildrive.model.eddy.EddyCoil` of them) reshaped to ``shape``."""
    if isinstance(coil, EddyCoil):
        return EddyCoil(np.reshape(coil.magnetising, shape), np.reshape(coil.resistance, shape))
    return np.reshape(coil, shape)


def handover_bus(drive: Drive, res, duty, first_duty=None) -> tuple[np.ndarray, np.ndarray, np.ndarray, str]:
    """``(lowest bus V, when s after switch-on, hand-over current A, method)`` of a boosted
    peak on a drooping main supply at the points of ``res`` (the most current): the peak
    runs from the boost while the main supply's diode blocks, so the main bus sits at the
    source's ``V_s`` until the hand-over (:func:`coildrive.design.boost.handover`: the
    boost at its highest, the most current); then it feeds the hold, starting with an
    on-time at the hand-over current, and the boost converter, fed from the main bus,
    draws ``supply.converter_draw`` W from the hand-over on (:func:`converter_current`,
    taken as a constant current at its highest all along: the bus and coil stay a linear
    circuit with the source ``V_s - R_s I_conv``).

    A voltage-mode hold at a fixed duty (fixed or a supply table: ``duty`` at each point,
    the hold's period) on a linear coil (an eddy term too: the circuit's magnetising
    branch and ``R_e``, from the magnetising current at the hand-over,
    :func:`coildrive.design.boost.handover_magnetising`) is run exactly period by period
    (:func:`coildrive.model.supply.hold_from`; where its orbit has not repeated within
    :data:`~coildrive.model.supply.HOLD_PERIODS_MAX` periods, the floor below). A
    current-mode or a closed-loop hold (its switching follows the current, not a fixed
    duty), a clamp across the switch (its off-times, or with split decay its release,
    draw from the bus too) and a full bridge's mixed decay (its fast parts return current:
    the bus only higher) take the floor of the bus instead
    (:func:`coildrive.model.supply.bus_floor` with the coil at most the largest of the
    hand-over current, the hold's top and -- under a fixed duty -- the first on-time from
    the hand-over, :func:`_first_on_top`, a closed loop's at ``first_duty``, the duty its
    hold starts from, as :func:`_after_peak_top` says; plus the converter): a bound, lower
    than the bus goes. A flux-linkage curve under a fixed duty (an on-time on the bus has no closed
    form: stepping the thousands of them to the orbit is the cost this avoids) takes the
    tighter floor of that most current drawn in the on-times only
    (:func:`coildrive.model.supply.pulse_floor`, the converter's constant draw lowering its
    source).

    With a moving armature (its runs, :mod:`coildrive.design.boost_armature`) the
    hand-over current is the runs' most current at the end of the peak (a closed loop's
    first on-time from it the open coil's, :func:`first_on_top`: the armature may be on its
    open stop or in flight then), and under a voltage-mode PWM hold the lowest bus is the runs' on the bus
    (:func:`armature_bus`: the armature in flight through
    the hold, then seated), the floor where an orbit had not repeated; with a clamp across
    the switch, or over the coil's open and seated curves, the runs' up to the seat and a
    floor from there (:func:`armature_clamp_bus`)."""
    s = drive.supply
    lp = res.loop
    runs = None if res.armature is None else res.armature.boost
    if runs is None:
        t_hand, i_hand = boost.handover(drive, lp)
        i_m, known = boost.handover_magnetising(drive, lp, t_hand)
    else:
        shape = np.shape(lp.v_on)
        i_hand = runs.end_current.reshape(shape)
        t_hand = np.where(np.isfinite(runs.end_time), runs.end_time, 0.0).reshape(shape)
    top = getattr(res.hold, "terminal_max", None)
    # (with an eddy term both tops: the on-times draw the terminal current, a clamp's
    # off-times at most the magnetising current, R_e i_m/(R_off + R_e))
    top = np.maximum(i_hand, res.hold.i_max if top is None else np.maximum(top, res.hold.i_max))
    top = np.where(np.isfinite(top), top, i_hand)
    if runs is not None and drive.hold.mode == "current":
        # where the comparator carries an armature in flight (no bounce): each on-time ends
        # the sense delay after the upper threshold (or after its start where the current is
        # above it, at most the hand-over's), the current rising over that delay at most as
        # the open coil's from the bus's V_s (L(x) >= L_open; a closing armature's motional
        # term only holds it back)
        from ..model.armature_boost import seated_in_peak

        shape = np.shape(lp.v_on)
        flies = ~seated_in_peak(runs.slow).reshape(shape)
        l_open = _shaped(res.armature.params.l_open, shape)
        top = top + np.where(flies, lp.v_on * drive.hold.sense_delay / l_open, 0.0)
    pwm = _pwm_hold(drive)
    if runs is None and (pwm or first_duty is not None):
        top = np.maximum(top, _first_on_top(drive, lp, np.where(known, i_m, i_hand),
                                            duty if first_duty is None else first_duty, res.hold.period))
    elif first_duty is not None:   # (a closed loop carries an armature still in flight, or at
        # rest on the open stop, at the hand-over: the open coil's first on-time bounds it)
        top = np.maximum(top, first_on_top(lp.v_on, lp.r_on, _shaped(res.armature.params.coil_open, np.shape(lp.v_on)),
                                           i_hand, first_duty, res.hold.period))
    i_conv = converter_current(drive, lp.v_on, top)
    floor = bus_model.bus_floor(lp.v_on, s.source_resistance, top + i_conv)
    ind, r_e = lp.inductance, None
    if isinstance(ind, EddyCoil):
        ind, r_e = ind.magnetising, ind.resistance
    if runs is not None and pwm and (through_clamp(drive) or isinstance(ind, FluxCoil)):
        v_low, when = armature_clamp_bus(drive, lp, runs, top, duty, res.hold.period)
        method = (HANDOVER_ARMATURE_CURVES if not through_clamp(drive) else
                  HANDOVER_ARMATURE_SPLIT if split_decay(drive) else HANDOVER_ARMATURE_CLAMP)
        return v_low, when, i_hand, method
    if not pwm or through_clamp(drive) or lp.mixed is not None:
        return np.minimum(floor, lp.v_on), t_hand, i_hand, HANDOVER_FLOOR
    if isinstance(ind, FluxCoil):
        v_low = bus_model.pulse_floor(lp.v_on - s.source_resistance * i_conv, s.source_resistance,
                                      s.capacitance, top, duty, res.hold.period)
        return np.minimum(v_low, lp.v_on), t_hand, i_hand, HANDOVER_PULSES
    if runs is not None:
        v_low, when, settled = (x.reshape(np.shape(lp.v_on)) for x in armature_bus(runs))
        tail = ~settled & (floor < v_low)
        return np.where(tail, floor, v_low), np.where(tail, t_hand, when), i_hand, HANDOVER_ARMATURE
    b = bus_model.bus(lp.v_on - s.source_resistance * i_conv, s.source_resistance, s.capacitance,
                      lp.r_on, ind, r_e)
    v_low, when, settled = bus_model.hold_from(b, np.where(known, i_m, 0.0), lp.v_on, duty, res.hold.period,
                                               lp.r_off, lp.v_off)
    # where the orbit has not repeated within the run (or the hand-over's state is not
    # known), the floor bounds the rest
    tail = ~known | (~settled & (floor < v_low))
    return np.where(tail, floor, v_low), t_hand + np.where(tail, 0.0, when), i_hand, HANDOVER_PWM


def _after_peak_top(drive: Drive, res, i_end, i_m_end, duty, first_duty=None) -> np.ndarray:
    """The most current (A) the coil draws from the drooping bus after the peak when a
    clamp across the switch carries its off-times (the floor of :func:`supply_result`):
    the largest of the terminal current ``i_end`` A at the end of the peak, the
    magnetising current ``i_m_end`` A there (with an eddy term a clamp's off-times draw
    ``(V_bus - V_clamp + R_e i_m)/(R_off + R_e)``, less than it), the hold's top (terminal
    and magnetising) and -- under a fixed duty -- the first on-time of the hold from
    ``i_m_end`` on a stiff bus at ``V_s`` (:func:`_first_on_top`: the bus recovers in the
    off-times, so an on-time's terminal current ``(v + R_e i_m)/(R + R_e)``, and a peak that
    ended still rising, go past the peak's own end; every later period's top lies below the
    first one's or the orbit's, the argument given there). A closed loop (``first_duty``:
    the duty its hold starts from, the most it settles at anywhere) runs its first period
    at that duty and lowers it while its sample stays above the set-point (the PI's
    proportional and integral terms both fall with a negative error), so its on-times
    till then lie under the first one at that duty and after it at the hold's top. A
    current-mode hold stays off until the current falls into its band: its draw is taken
    at the peak's end and the hold's top."""
    top = getattr(res.hold, "terminal_max", None)
    top = res.hold.i_max if top is None else np.maximum(top, res.hold.i_max)
    top = np.maximum(np.maximum(i_end, i_m_end), top)
    if _pwm_hold(drive) or first_duty is not None:
        top = np.maximum(top, _first_on_top(drive, res.loop, i_m_end, duty if first_duty is None else first_duty,
                                            res.hold.period))
    return top


def supply_result(drive: Drive, grid, res, peak_time, duty, read, supply_min_code: int,
                  bridge_bus: dict | None = None, first_duty=None) -> SupplyResult | None:
    """The supply's figures over the points of ``res`` (the longest peak ``peak_time`` s and
    the hold duty ``duty`` at each point): the lowest bus during the peak and its corner,
    the energy the capacitor gives up down to it, the capacitor's RMS ripple current in the
    hold, and the firmware's reading of the lowest bus (``read(volts)`` -> code, the way its
    supply-min code was made) against that code. ``None`` without a source resistance.

    With a clamp across the switch (:func:`through_clamp`) the coil keeps drawing from the
    bus after the peak: the lowest bus is also taken at the floor
    :func:`~coildrive.model.supply.bus_floor` of the most current after the peak
    (:func:`_after_peak_top`: the peak's end, the hold's first on-time, the hold's top), and without split decay the hold's off-times draw
    from the bus too (the hold's bus sits ``R_s`` x the mean low; the capacitor carries the
    coil's ripple). ``bridge_bus``: a full bridge's highest bus
    (:func:`coildrive.design.bridge_bus.bridge_release`); ``first_duty``: a closed loop's
    duty at the start of its hold (:func:`_after_peak_top`).

    With a moving armature the lowest bus is the pull-in run's
    (:func:`coildrive.model.armature_runs.pull_in` on the drooping bus, to the end of the
    same longest peak) and the current at the end of the peak the run's too."""
    s = drive.supply
    if not s.droops:
        return None
    lp = res.loop
    peak = np.broadcast_to(peak_time, lp.v_on.shape)
    handover = method = None
    if s.boosted:
        v_low, when, handover, method = handover_bus(drive, res, duty, first_duty)
    elif res.armature is not None:
        pin = res.armature.pull_in
        v_low = np.asarray(pin.lowest_bus, float).reshape(lp.v_on.shape)
        when = np.asarray(pin.lowest_bus_time, float).reshape(lp.v_on.shape)
        i_end = np.asarray(res.peak_end_current, float)
    else:
        b = bus_at(drive, lp, lp.inductance)
        model = model_of(b)
        v_low, when = model.lowest_bus(peak, b)
    clamp = through_clamp(drive)
    if clamp and not s.boosted:     # (after a boost, handover_bus takes the floor itself)
        if res.armature is None:
            i_m_end, v_end = model.state(peak, b)
            i_end = bus_model.terminal(i_m_end, v_end, b)
        else:
            i_m_end = i_end
        i_top = _after_peak_top(drive, res, i_end, i_m_end, duty, first_duty)
        floor = bus_model.bus_floor(lp.v_on, s.source_resistance, i_top)
        later = floor < v_low
        v_low, when = np.where(later, floor, v_low), np.where(later, peak, when)
    k = int(np.argmin(v_low))
    energy = bus_model.capacitor_energy(s.capacitance, lp.v_on, v_low)
    k_e = int(np.argmax(energy))
    on_share = np.broadcast_to(duty, lp.v_on.shape)
    off_draws = clamp and not split_decay(drive)   # the hold's off-times through the clamp
    fast_share = 0.0 if lp.mixed is None else mixed_share(lp, res.hold, on_share)
    how = RIPPLE_METHOD if lp.mixed is None else \
        MIXED_RIPPLE_METHOD if res.hold.fast_time is None else MIXED_CURRENT_RIPPLE_METHOD
    if off_draws:
        ripple = bus_model.clamp_hold_ripple_current(res.hold.ripple)
        on_share = np.ones_like(on_share)
        how = CLAMP_RIPPLE_METHOD
    else:
        ripple = bus_model.hold_ripple_current(res.hold.mean, on_share, fast_share)
    k_r = int(np.argmax(ripple))
    # (a mixed decay's fast parts give back what they return: the source's average is less)
    hold_droop = s.source_resistance * np.asarray(res.hold.mean, float) * (on_share - fast_share)
    code = read(float(v_low[k])) if drive.board.supply_sense else None
    return SupplyResult(
        source_resistance_ohm=s.source_resistance, capacitance_f=s.capacitance,
        lowest_bus_v=float(v_low[k]), lowest_bus_corner=grid.label(k), lowest_bus_time_s=float(when[k]),
        droop_v=float(lp.v_on[k] - v_low[k]), lowest_bus_code=code,
        supply_min_code=supply_min_code if drive.board.supply_sense else None,
        capacitor_energy_j=float(energy[k_e]), capacitor_energy_corner=grid.label(k_e),
        ripple_current_a=float(ripple[k_r]), ripple_corner=grid.label(k_r), ripple_method=how,
        hold_droop_v=float(np.max(hold_droop)), **(bridge_bus or {}),
        **({} if handover is None else dict(
            handover_current_a=float(handover[k]), lowest_bus_method=method,
            converter_draw_w=s.converter_draw)))


def supply_checks(sup: SupplyResult | None) -> list[Check]:
    """``supply_droop``: the firmware's lowest reading of the drooping bus stays at or above
    its supply-min code (it faults on a reading below it during the peak; after a boosted
    peak the lowest bus is the hold's, from the hand-over)."""
    if sup is None:
        return []
    phase = ("the peak" if sup.handover_current_a is None else
             f"the actuation, in the hold after the boost's hand-over at {sup.handover_current_a:.4g} A")
    where = (f"the bus droops {sup.droop_v:.4g} V to {sup.lowest_bus_v:.4g} V at "
             f"{sup.lowest_bus_corner}, {sup.lowest_bus_time_s * 1e3:.4g} ms into {phase}")
    if sup.lowest_bus_code is None:
        return [Check("supply_droop", True, where + "; the board does not measure its supply")]
    ok = sup.lowest_bus_code >= sup.supply_min_code
    return [Check("supply_droop", ok,
                  f"{where}: the supply sense reads {sup.lowest_bus_code}, its supply-min code is "
                  f"{sup.supply_min_code}" + ("" if ok else
                  " -- the firmware would fault on its own supply check"
                  + (" during the peak" if sup.handover_current_a is None else "") + ": more bulk "
                  "capacitance (supply.capacitance), a lower source resistance "
                  "(supply.source_resistance)"))]
