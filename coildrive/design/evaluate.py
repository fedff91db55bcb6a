"""Evaluate a drive setting (peak time, hold duty and frequency) at many operating points.

This is where the model pieces meet: circuit loop -> self-heating fixed point -> rise,
PWM steady state, release. Everything is vectorised over the points, which may be the
design corners, Monte Carlo samples or a tuning sweep.

Assumption (conservative, stated in the docs): at every point the coil is at the
temperature it settles at after a long hold at that point, and pull-in starts from that
hot coil (a valve re-actuated right after a long hold).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..model import eddy
from ..model.eddy import EddyCoil
from ..model.circuit import Loop, freewheel_element_energy, full_bridge, loop, two_paths
from ..model.pwm import PwmSteadyState, duty_for_mean, coil_heat, pwm_steady_state
from ..model.rl import decay_current, decay_integrals, decay_time
from ..model.thermal import settle_temperature
from .supply import first_on_current
from .supply import rise_current as bus_rise_current
from .supply import rise_time as bus_rise_time


def hold_power(drive: Drive, supply, r_factor, l_factor, duty, frequency, factors: dict | None = None):
    """A function of the coil temperature (degC, array over the points) giving the coil's
    copper loss (W) in the hold's periodic steady state at ``duty``/``frequency``
    (``factors``: the loop's other tolerance factors, see :func:`coildrive.model.circuit.loop`)."""
    factors = factors or {}

    def power_at(temp):
        lp = loop(drive, supply, temp, r_factor, l_factor, **factors)
        ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                              mixed=lp.mixed)
        return coil_heat(ss, lp.r_coil)
    return power_at


def hold_temperature(drive: Drive, supply, ambient, r_factor, l_factor, duty, frequency,
                     factors: dict | None = None):
    """Coil temperature in degC after a long hold at ``duty``/``frequency`` at each point
    (``factors``: the loop's other tolerance factors, see :func:`coildrive.model.circuit.loop`)."""
    return settle_temperature(ambient, drive.thermal.resistance,
                              hold_power(drive, supply, r_factor, l_factor, duty, frequency, factors))


def required_duty(drive: Drive, supply, ambient, r_factor, l_factor, frequency,
                  target: float | None = None, max_iter: int = 30, tol: float = 1e-9):
    """Smallest single duty that meets ``target`` A (default: hold current) at every point,
    with the self-heating that duty causes.

    Iterates duty -> temperature -> duty from the cold coil; each step can only raise the
    duty, so it converges to the smallest self-consistent duty (from below: a looser
    ``tol`` stops at or below it). Returns ``(duty, temperatures)``; duty is ``nan``
    where 100 % cannot reach the target.
    """
    target = drive.hold.current if target is None else target
    temp = np.asarray(ambient, float) + np.zeros(np.shape(supply))
    duty = 0.0
    for _ in range(max_iter):
        lp = loop(drive, supply, np.where(np.isfinite(temp), temp, drive.thermal.max_coil_temp),
                  r_factor, l_factor)
        need = duty_for_mean(target, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                             mixed=lp.mixed)
        if np.any(np.isnan(need)):
            return float("nan"), temp
        new = float(np.max(need))
        temp = hold_temperature(drive, supply, ambient, r_factor, l_factor, new, frequency)
        if abs(new - duty) < tol:
            return new, temp
        duty = new
    return duty, temp


@dataclass(frozen=True)
class PointResults:
    """Every figure at every point (arrays). SI units, temperatures in degC.

    ``interrupt_current`` is the largest current the switch turns off (end of the peak or
    the top of the hold ripple); ``peak_switch_voltage`` is the switch voltage it causes.
    ``release_*`` are for a turn-off from the top of the hold ripple. ``loop`` is the
    hold's loop; ``release_loop`` the release's (another freewheel path with split decay,
    else the same object). ``first_duty``: the duty (0..1, per point or one for all) of
    the hold's first period after the peak -- a fixed-duty hold's own, a closed loop's
    preload (it lowers the duty from there) -- whose on-time may lift the current past the
    peak's end (:func:`coildrive.design.supply.first_on_current`); ``None`` for a hold
    that waits for its band (current mode: off until the current falls into it).
    """

    supply: np.ndarray
    ambient: np.ndarray
    coil_temp: np.ndarray
    r_factor: np.ndarray
    l_factor: np.ndarray
    loop: Loop
    pull_in_time: np.ndarray
    peak_end_current: np.ndarray
    hold: PwmSteadyState
    coil_power: np.ndarray
    release_time: np.ndarray
    release_zero_time: np.ndarray
    release_energy: np.ndarray
    interrupt_current: np.ndarray
    peak_switch_voltage: np.ndarray
    armature: "ArmatureFigures | None" = None
    release_loop: Loop | None = None
    first_duty: np.ndarray | float | None = None


@dataclass(frozen=True)
class ArmatureFigures:
    """Moving-armature figures at every point (arrays; A, m, s).

    ``pull_in``/``release``: the integrated runs (see
    :class:`~coildrive.model.armature.PullInBatch` and
    :class:`~coildrive.model.armature.ReleaseBatch`). Static force balance:
    ``start_current`` starts the armature off the open stop, ``stay_current`` keeps it
    seated (and is where it lets go), ``stroke_current`` beats spring + load over the
    whole stroke (needed at gap ``stroke_gap``). ``hold_current`` is the hold current
    that counts for the force (RMS or ripple bottom, see
    :func:`~coildrive.model.armature.hold_force_current`), ``hold_lift`` the bound on
    the lift within one PWM period; ``release_from`` the turn-off currents (A) of the
    release runs.
    """

    params: object
    pull_in: object
    release: object
    start_current: np.ndarray
    stay_current: np.ndarray
    stroke_current: np.ndarray
    stroke_gap: np.ndarray
    hold_current: np.ndarray
    hold_lift: np.ndarray
    release_from: np.ndarray
    #: A boosted peak's runs (:class:`~coildrive.design.boost_armature.BoostRuns`; their
    #: ``slow`` is ``pull_in``), else ``None``.
    boost: object = None
    #: A full bridge on the drooping bus: the release's worst over the starting buses
    #: (:func:`coildrive.model.armature_bus_release.release_over`; its ``run`` is
    #: ``release``: the highest bus, the bus at zero current), else ``None``.
    bus_release: object = None


def _armature_figures(drive: Drive, lp: Loop, l_factor, ss: PwmSteadyState, peak_time,
                      reuse: "ArmatureFigures | None" = None,
                      lp_rel: Loop | None = None, duty=None, first_duty=None) -> ArmatureFigures:
    """The armature runs at the points: pull-in and hold on the hold's loop ``lp``, the
    release on ``lp_rel`` (the fast path of split decay; ``None`` or ``lp``: the same
    path), with a late bypass decaying through ``lp`` first (:func:`late_release`).

    On a drooping bus (``supply.source_resistance``) the pull-in runs on it (the bulk
    capacitor a state of the run); the hold and the release on the stiff bus, as for the
    still coil (the hold's droop is reported apart; the freewheel path draws nothing from
    the bus, a clamp's release on the undrooped bus is the safe side) -- but on a full
    bridge the release returns into the bus, the capacitor a state of its run too
    (:func:`_release_on_bus`; a linear coil or its curves, an eddy term too). A boosted peak
    (``supply.boost``): the pull-in is the boost's, then the hold's at ``duty``
    (:mod:`coildrive.design.boost_armature`), whatever ``peak_time``. ``first_duty``: the
    hold's first period's duty (:attr:`PointResults.first_duty`), for the top current a
    bridge's release on the drooping bus starts under."""
    import dataclasses

    from ..model.armature import hold_force_current, params_from_loop
    from ..model.armature_runs import late_release, peak_current_closed_form, pull_in, release

    shape = np.shape(lp.v_on)
    fields = ("v_on", "r_on", "r_off", "v_off", "inductance", "r_coil", "supply")
    flat = Loop(*(np.ravel(getattr(lp, f)) for f in fields))
    s = drive.supply
    bus = (s.source_resistance, s.capacitance) if s.droops else (0.0, 0.0)
    p_pull = params_from_loop(drive.armature, flat, np.ravel(np.broadcast_to(l_factor, shape)),
                              drive.coil.eddy_resistance, bus=bus)
    p = p_pull.stiff_bus() if s.droops else p_pull
    p_rel = p
    if lp_rel is not None and lp_rel is not lp:
        flat_rel = Loop(*(np.ravel(np.broadcast_to(getattr(lp_rel, f), shape)) for f in fields))
        p_rel = params_from_loop(drive.armature, flat_rel, np.ravel(np.broadcast_to(l_factor, shape)), drive.coil.eddy_resistance)
    lag = max(-drive.freewheel.bypass_lead, 0.0) if p_rel is not p else 0.0
    want = np.ravel(np.broadcast_to(peak_time, shape))
    pin = rel = boosted = None
    if s.boosted:
        duty_pts = np.ravel(np.broadcast_to(np.asarray(duty, float), shape))
        first_pts = duty_pts if first_duty is None else np.ravel(np.broadcast_to(np.asarray(first_duty, float), shape))
        if (reuse is not None and reuse.boost is not None and p_pull.same_points(reuse.params)
                and np.array_equal(duty_pts, reuse.boost.duty) and np.array_equal(first_pts, reuse.boost.first_duty)
                and np.array_equal(np.ravel(ss.i_max), reuse.release_from)):
            boosted, rel = reuse.boost, reuse.release
        else:
            from .boost import threshold
            from .boost_armature import runs
            i_th, _, i_trip = threshold(drive)
            boosted = runs(drive, p_pull, duty_pts, np.ravel(np.broadcast_to(ss.period, shape)),
                           np.ravel(ss.i_max), (i_th, i_trip),
                           None if ss.terminal_max is None else np.ravel(np.maximum(ss.terminal_max, ss.i_max)),
                           mixed=None if lp.mixed is None else lp.mixed.flat(shape), first_duty=first_pts)
        pin = boosted.slow
    elif reuse is not None and p_pull.same_points(reuse.params):
        # Same points and coil temperatures: the runs do not depend on the peak length.
        i_peak = peak_current_closed_form(p_pull, reuse.pull_in, want)
        if i_peak is not None and np.array_equal(np.ravel(ss.i_max), reuse.release_from):
            pin = dataclasses.replace(reuse.pull_in, peak_end_current=i_peak)
            rel = reuse.release
    if pin is None:
        pin = pull_in(p_pull, peak_time=want)
    on_bus = None
    if s.droops and full_bridge(drive):
        # the fast decay returns the current into the drooping bus while the armature lets
        # go: the capacitor a state of the release run, from the range of starting buses
        end = np.reshape(np.where(np.isfinite(pin.peak_end_current), pin.peak_end_current, 0.0), shape)
        first = None if first_duty is None else np.ravel(first_on_current(lp, end, first_duty, ss.period))
        on_bus = _release_on_bus(drive, flat_rel if lp_rel is not None and lp_rel is not lp else flat,
                                 l_factor, shape, pin, np.ravel(ss.i_max),
                                 None if lp.mixed is None else _fast_pulse(lp, ss, shape), first)
        rel = on_bus.run
    if rel is None:
        rel = (late_release(p, p_rel, np.ravel(ss.i_max), lag) if lag > 0 else
               release(p_rel, np.ravel(ss.i_max)))
    through, gap = p.stroke_current()
    # the force goes with the magnetising current (an eddy term's terminal RMS is higher)
    rms = ss.rms if ss.magnetising_rms is None else ss.magnetising_rms
    held, lift = hold_force_current(p, np.ravel(ss.i_min), np.ravel(rms), np.ravel(ss.period))
    return ArmatureFigures(params=p_pull, pull_in=pin, release=rel, start_current=p.start_current,
                           stay_current=p.stay_current, stroke_current=np.atleast_1d(through),
                           stroke_gap=np.atleast_1d(gap), hold_current=held, hold_lift=lift,
                           release_from=np.ravel(ss.i_max).copy(), boost=boosted, bus_release=on_bus)


def _fast_pulse(lp: Loop, ss: PwmSteadyState, shape) -> tuple:
    """A mixed-decay hold's ``(longest fast part s, shortest period s)`` per point, flat: a
    PWM hold's ``fast_fraction x`` its fixed period and that period; a current-mode hold's
    on a drooping bus as its steady state says (``ss.fast_pulse``:
    :func:`coildrive.design.hold_current.fast_pulses`, its period moving with the bus)."""
    t_fast, period = ((lp.mixed.fraction * np.asarray(ss.period, float), ss.period)
                      if ss.fast_pulse is None else ss.fast_pulse)
    return tuple(np.ravel(np.broadcast_to(x, shape)) for x in (t_fast, period))


def _release_on_bus(drive: Drive, flat_rel: Loop, l_factor, shape, pin, i_max, mixed=None, first=None):
    """A moving armature's release on a full bridge on the drooping bus (a linear coil or
    its curves, an eddy term too; ``supply.sink`` either way): :func:`coildrive.model.armature_bus_release.release_over` from
    :data:`coildrive.model.bus_decay.STARTS` starting buses between the lowest
    the bus can be at the turn-off and the source ``V_s``: the pull-in's lowest bus or,
    once the coil draws no more than the largest of the end of the peak, the hold's first
    on-time from there (``first`` A per point, ``None``: a hold that waits for its band) and
    the hold's top ``i_max`` A (with an eddy term the terminal current they bound),
    :func:`~coildrive.model.supply.bus_floor` under it (as
    :func:`coildrive.design.bridge_bus.bus_range`), never below ``-2 V_d``; ``i_max`` and
    the release's currents are magnetising currents with an eddy term. ``mixed``: a
    mixed-decay hold's ``(longest fast part s, shortest period s per point)``; on a supply that sinks its
    fast parts return current into the bus, so the starts reach above the source by
    :func:`coildrive.model.bus_decay.mixed_hold_rise` (the current returned at most the
    larger of the terminal top and the magnetising one, as
    :func:`coildrive.design.bridge_bus.bus_range`; on one that cannot the starts stop at
    the source and the highest bus is bounded by energy,
    :func:`coildrive.design.bridge_bus.no_sink_top`). After a boosted peak
    (its pull-in the boost's runs, the lowest bus theirs on the main bus) the boost
    converter recharges from the main bus from the hand-over on: it may be idle or drawing
    its most at the turn-off (:func:`coildrive.design.supply.converter_current` with the coil
    at most that top, as :func:`coildrive.design.bridge_bus.converter_draw` takes it), so
    the floor takes its draw too and the release runs with it idle and drawing (``drains``;
    config refuses a mixed-decay hold with it)."""
    from ..model.armature import params_from_loop
    from ..model.armature_bus_release import release_over
    from ..model.bus_decay import STARTS, mixed_hold_rise
    from ..model.supply import bus_floor

    s = drive.supply
    p_bus = params_from_loop(drive.armature, flat_rel, np.ravel(np.broadcast_to(l_factor, shape)),
                             drive.coil.eddy_resistance, bus=(s.source_resistance, s.capacitance))
    v_s = p_bus.v_on
    v_d2 = flat_rel.v_off - flat_rel.v_on     # the two body diodes (V_s + 2 V_d into the bus)
    end = np.where(np.isfinite(pin.peak_end_current), pin.peak_end_current, 0.0)
    top_m = top = np.maximum(end if first is None else np.maximum(end, first),
                             np.where(np.isfinite(i_max), i_max, 0.0))
    if p_bus.eddy is not None:   # the bus feeds the terminal current: at most (V_s + R_e i_m)/(R + R_e)
        from ..model.eddy import terminal
        top = terminal(top, v_s, p_bus.r_on, p_bus.eddy)
    drains = ()
    if s.boosted and s.converter_draw > 0:
        from .supply import converter_current

        drains = (converter_current(drive, v_s, top),)
    low = np.where(np.isfinite(pin.lowest_bus), pin.lowest_bus, v_s)
    lowest = np.maximum(np.minimum(low, bus_floor(v_s, s.source_resistance, top + sum(drains))), -v_d2)
    highest = v_s
    if mixed is not None and s.sink:
        t_fast, period = mixed
        highest = v_s + mixed_hold_rise(s.source_resistance, s.capacitance, np.maximum(top, top_m),
                                        t_fast, period)
    return release_over(p_bus, np.where(np.isfinite(i_max), i_max, 0.0), lowest, highest, v_d2, STARTS,
                        sink=s.sink, drains=drains)


def evaluate(drive: Drive, supply, ambient, r_factor, l_factor, duty, frequency,
             peak_time, mechanics: bool = True,
             reuse: "PointResults | None" = None, coil_temp=None,
             factors: dict | None = None, first_duty=None) -> PointResults:
    """All figures for a setting at the points (see :class:`PointResults`).

    Parameters
    ----------
    supply : V; ambient : degC; r_factor, l_factor : tolerance factors (1 = nominal)
    duty : hold duty 0..1; frequency : hold PWM Hz; peak_time : peak phase length in s
    mechanics : with an ``[armature]``, run the moving-armature model (``False``: only
        the hold figures are meaningful; for searches over the hold duty)
    reuse : results of an earlier call at the same points and setting but another peak
        time; its armature runs are reused where the new peak current is closed form
    coil_temp : degC at each point (the envelope's coil-temperature axis); ``None``: the
        temperature a long hold at the point settles at
    factors : the loop's other tolerance factors (diode, fast element, sense resistor)
    first_duty : the duty of the hold's first period (``None``: ``duty``; a closed loop's
        preload), :attr:`PointResults.first_duty`
    duty and peak_time may be arrays over the points (a supply table, a compensated peak).

    With an ``[armature]`` the pull-in time is the time until the armature rests on the
    seat, the current at the end of the peak follows the moving armature, and the
    release time is the time until it rests on the open stop again (the zero-current
    time and the freewheel energy follow it too). With split decay the hold (and the
    pull-in) use the hold's slow loop and the release the fast one, the armature's
    release included. Points are 1-D arrays.
    """
    supply, ambient, r_factor, l_factor = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (supply, ambient, r_factor, l_factor)))
    factors = factors or {}
    first_duty = duty if first_duty is None else first_duty
    if coil_temp is None:
        temp = hold_temperature(drive, supply, ambient, r_factor, l_factor, duty, frequency, factors)
    else:
        temp = np.broadcast_to(np.asarray(coil_temp, float), supply.shape).copy()
    finite = np.where(np.isfinite(temp), temp, drive.thermal.max_coil_temp)
    lp = loop(drive, supply, finite, r_factor, l_factor, **factors)
    t_pull = bus_rise_time(drive, lp, drive.pull_in.current, lp.inductance)
    i_peak = bus_rise_current(drive, lp, peak_time, lp.inductance)
    ss = pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off, lp.inductance,
                          mixed=lp.mixed)
    power = coil_heat(ss, lp.r_coil)
    i_off = ss.i_max
    lp_rel = (loop(drive, supply, finite, r_factor, l_factor, path="release", **factors)
              if two_paths(drive) else lp)
    t_drop, t_zero, energy, i_fast = release_figures(drive, lp, lp_rel, i_off)
    arm = None
    if drive.armature is not None and mechanics:
        arm, t_pull, i_peak, t_drop, t_zero, energy, i_fast = moving_armature(
            drive, lp, lp_rel, l_factor, ss, peak_time, None if reuse is None else reuse.armature,
            np.shape(supply), i_fast, duty, first_duty)
    interrupt, v_sw = switch_voltage_peak(drive, lp, lp_rel, i_peak, ss.i_max, i_fast)
    return PointResults(supply=supply, ambient=ambient, coil_temp=temp, r_factor=r_factor,
                        l_factor=l_factor, loop=lp, pull_in_time=t_pull, peak_end_current=i_peak,
                        hold=ss, coil_power=power, release_time=t_drop, release_zero_time=t_zero,
                        release_energy=energy, interrupt_current=interrupt,
                        peak_switch_voltage=v_sw, armature=arm, release_loop=lp_rel,
                        first_duty=first_duty)


def moving_armature(drive: Drive, lp: Loop, lp_rel: Loop, l_factor, ss: PwmSteadyState, peak_time,
                    reuse: "ArmatureFigures | None", shape: tuple, i_fast, duty=None, first_duty=None):
    """The figures an ``[armature]`` decides at the points (arrays of ``shape``), for any
    hold whose steady state ``ss`` is a two-segment cycle on the seated coil (the PWM
    hold, a current-mode hold's switching cycle): ``(ArmatureFigures, pull-in time s
    (the seat), current at the end of the peak A, release time s (back on the open stop),
    time to zero current s, freewheel energy J, current when the release path takes over
    A: ``i_fast``, the still coil's, unless a late bypass's run says)``. The release starts
    from the top of the ripple ``ss.i_max``; ``duty``: the PWM hold's, for a boosted peak's
    hold carrying the armature on (:func:`_armature_figures`); ``first_duty``: the hold's
    first period's (:attr:`PointResults.first_duty`, ``None``: current mode)."""
    arm = _armature_figures(drive, lp, l_factor, ss, peak_time, reuse, lp_rel, duty, first_duty)
    t_pull = arm.pull_in.seat_time.reshape(shape)
    i_inf = lp.v_on / lp.r_on
    i_peak = arm.pull_in.peak_end_current.reshape(shape)
    i_peak = np.where(np.isfinite(i_peak), i_peak, i_inf)  # not settled: the worst case
    t_drop = arm.release.open_time.reshape(shape)
    t_zero = arm.release.zero_time.reshape(shape)
    rb = arm.release
    q, s = rb.charge.reshape(shape), rb.square.reshape(shape)
    if rb.slow_charge is None:
        # the whole release through the release path (the hold's without split decay)
        energy = freewheel_element_energy(drive, lp_rel, q, s)
    else:
        # a late bypass: through the slow path until it opens, then the fast one
        q1, s1 = rb.slow_charge.reshape(shape), rb.slow_square.reshape(shape)
        energy = (freewheel_element_energy(drive, lp, q1, s1)
                  + freewheel_element_energy(drive, lp_rel, q - q1, s - s1))
        i_fast = rb.fast_current.reshape(shape)
    return arm, t_pull, i_peak, t_drop, t_zero, energy, i_fast


def switch_voltage_peak(drive: Drive, lp: Loop, lp_rel: Loop, i_peak, i_max, i_fast):
    """``(current interrupted A, peak switch voltage V)``: the end of the peak (``i_peak``
    A) and every hold off-time (up to ``i_max`` A) turn off into the hold's path ``lp``;
    the release into the release path ``lp_rel`` (the same one without split decay),
    which takes over at ``i_fast`` A (see :func:`release_figures`)."""
    interrupt = np.maximum(i_peak, i_max)
    v_sw = lp.switch_voltage(drive, interrupt)
    if lp.mixed is not None:  # mixed decay: every off-time (the peak's end too) starts fast
        v_sw = np.maximum(v_sw, lp_rel.switch_voltage(drive, interrupt))
    if lp_rel is not lp:
        v_sw = np.maximum(v_sw, lp_rel.switch_voltage(drive, i_fast))
    return interrupt, v_sw


def release_figures(drive: Drive, lp: Loop, lp_rel: Loop, i_off):
    """Release from ``i_off`` A: ``(time to drop-out s, time to zero s, energy into the
    freewheel elements J, current when the release path takes over A)``.

    Without split decay the whole decay takes ``lp_rel`` (= ``lp``). With split decay and
    a bypass that opens ``lag = -bypass_lead`` s after the final turn-off (a late bypass),
    the current first decays through the hold's slow path ``lp`` for ``lag`` s, then
    through the fast path; with ``bypass_lead >= 0`` the bypass is already open and the
    whole release is fast. With an eddy term the times and the takeover current are the
    flux's (:func:`coildrive.model.eddy.late_release`).
    """
    drop = drive.release.current
    ind = lp.inductance
    lag = max(-drive.freewheel.bypass_lead, 0.0) if lp_rel is not lp else 0.0
    if lag == 0.0:
        t_drop = decay_time(drop, i_off, lp_rel.r_off, lp_rel.v_off, ind)
        t_zero = decay_time(0.0, i_off, lp_rel.r_off, lp_rel.v_off, ind)
        q, s = decay_integrals(t_zero, i_off, lp_rel.r_off, lp_rel.v_off, ind)
        return t_drop, t_zero, freewheel_element_energy(drive, lp_rel, q, s), np.asarray(i_off, float)
    if isinstance(ind, EddyCoil):   # the flux decays on through R_e where a path blocks
        late = eddy.late_release(i_off, lag, (lp.r_off, lp.v_off), (lp_rel.r_off, lp_rel.v_off), drop, ind)
        energy = (freewheel_element_energy(drive, lp, *late.slow)
                  + freewheel_element_energy(drive, lp_rel, *late.fast))
        return late.drop_time, late.zero_time, energy, late.open_current
    slow_zero = decay_time(0.0, i_off, lp.r_off, lp.v_off, ind)
    t_slow = np.minimum(lag, slow_zero)
    i_lag = decay_current(t_slow, i_off, lp.r_off, lp.v_off, ind)
    q1, s1 = decay_integrals(t_slow, i_off, lp.r_off, lp.v_off, ind)
    fast_zero = decay_time(0.0, i_lag, lp_rel.r_off, lp_rel.v_off, ind)
    q2, s2 = decay_integrals(fast_zero, i_lag, lp_rel.r_off, lp_rel.v_off, ind)
    t_drop = np.where(i_lag <= drop, decay_time(drop, i_off, lp.r_off, lp.v_off, ind),
                      lag + decay_time(drop, i_lag, lp_rel.r_off, lp_rel.v_off, ind))
    t_zero = np.where(i_lag <= 0.0, slow_zero, lag + fast_zero)
    energy = (freewheel_element_energy(drive, lp, q1, s1)
              + freewheel_element_energy(drive, lp_rel, q2, s2))
    return t_drop, t_zero, energy, i_lag
