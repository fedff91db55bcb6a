"""A latching coil's pulses from the boost (``[hold] mode = "latch"`` with ``[supply] boost``).

Each pulse -- the set pulse through the set winding, the reset pulse through the reset
winding -- runs from the boost capacitor (the boost switch and the winding's own switch
on) until the current-sense ADC reads its threshold code, with a time-out, exactly as a
boosted peak does (:mod:`coildrive.design.boost`, physics :mod:`coildrive.model.boost`):

* the threshold is ``current_margin`` x the pulse's current (``[pull_in]`` for the set
  pulse, ``[reset]`` for the reset pulse), its code the smallest one every sense chain
  reaches only at or above it (:func:`coildrive.design.boost.threshold`);
* the driver compares the sense reading with the code once a scheduler tick, so it sees
  the crossing up to one tick (:func:`late`) late: the highest end current, the energy
  and the decay take it;
* the slow side (the longest pulse, the time-out = the worst x ``margin`` in ticks + 1,
  the capacitor's droop against the main supply) is the boost less its tolerances, the
  fast side (the highest end current, the energy, the switch voltage) at its highest, at
  every corner of the pulses (:func:`coildrive.design.latch._points`);
* the winding's freewheel path takes the current to zero after the turn-off, whichever
  rail fed it; the switch sees the boost at full charge plus the freewheel voltage.

Energy per pulse (the corner and side where the boost gives the most): from zero current
back to zero the capacitor's ``1/2 C (V_b^2 - v_C^2)`` is exactly what the loop takes::

    E_boost = R_coil (S_on + S_d) + R_switch S_on + R_sense (S_on [+ S_d]) + R_b S_on + E_freewheel

(``S``: ``int i^2 dt`` over the on-time, in closed form by
:func:`coildrive.model.boost.square_integral`, and over the decay; ``R_b`` the boost
path's own resistance, ``boost_j``). The boost's recharge of the larger pulse's energy at
``boost_power`` enters the shortest interval between pulses.

With a moving armature (``[armature]``: the set winding pulls it onto the seat, the catch
holds it there; :func:`armature_pulse`) the set pulse is the armature's run from the boost
capacitor (:func:`coildrive.model.armature_runs.pull_in` with the boost as its source,
:func:`coildrive.model.armature_boost.boost_params`: the capacitor a state with no source
behind it) until the current first reaches the threshold. The catch engages only on an
armature at rest on the seat, so the design asks it there by the time the current reaches
the threshold itself (the earliest any sense chain trips: the shortest real pulse), from
the boost at its lowest and at its highest (a higher charge reaches the current sooner, a
shorter push), at every corner; where it is not (open or still in flight: its flight after
the turn-off, with the current decaying and the catch to engage, is not modelled) the
design is refused in one line naming ``pull_in.current_margin``. Seated there, it is
seated at the highest trip current too, and the tick until the driver sees it is the
seated coil's closed form from the boost capacitor
(:func:`coildrive.model.armature_boost.seated_on`): the end current, the capacitor, the
energy ``1/2 C (V_b^2 - u^2)`` and ``int i^2 dt`` are the run's. The balance above then has
one more term, the armature's (``armature_j``: the spring's and the load's work, the
damping's heat and the seat's impact), its remainder.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..errors import InputError
from ..model import boost as model
from ..model.circuit import freewheel_element_energy, loop
from ..model.rl import decay_integrals, decay_time
from . import boost
from .result import BoostResult, Check


def late(drive: Drive) -> float:
    """How late (s) the latch driver may see a pulse's threshold: one scheduler tick (it
    compares the sense reading with the code once a tick)."""
    return 1.0 / drive.board.tick.rate


def pulse_threshold(wd: Drive, current: float, current_margin: float) -> tuple[float, int, float]:
    """The pulse's threshold (:func:`coildrive.design.boost.threshold`) at ``current_margin``
    x ``current`` A."""
    return boost.threshold(wd, current_margin * current)


def pulse_figures(wd: Drive, lp, rel, supply, label, current: float, current_margin: float,
                  margin: float, runs=None) -> BoostResult:
    """The pulse's boost figures (:func:`coildrive.design.boost.boost_figures`) at the
    points of ``lp`` (the winding ``wd``'s loop), ending at ``current_margin`` x
    ``current`` A, the time-out the slowest x ``margin``; ``runs``: a moving armature's
    (:attr:`ArmaturePulse.runs`)."""
    return boost.boost_figures(wd, lp, rel, supply, label, wd.board.tick.rate,
                               pulse_threshold(wd, current, current_margin), late(wd), margin, runs)


@dataclass(frozen=True)
class ArmaturePulse:
    """The set pulse from the boost with the moving armature (module docstring), arrays over
    the points. ``seat_time``: s from switch-on to the armature at rest on the seat, the
    later of the boost's two sides (``inf`` where it does not seat); ``seat_high``: where
    that is the boost at its highest. ``seated``: the run from the boost at its lowest to
    the threshold itself (its ``status`` SEATED where it rests on the seat). ``runs``: what
    :func:`coildrive.design.boost.boost_figures` takes of a moving armature (a
    :class:`~coildrive.design.boost_armature.BoostRuns` without a hold: ``slow`` is
    ``seated``, ``duty`` 0, ``window`` 0). ``ends``: per side (``False`` lowest, ``True``
    highest) ``(current A, int i^2 dt A^2*s, energy from the boost J)`` at the end of the
    pulse that ends at the highest trip current one tick late (0 where never)."""

    seat_time: np.ndarray
    seat_high: np.ndarray
    seated: object
    runs: object
    ends: dict


def armature_pulse(wd: Drive, lp, l_factor, label, thr: tuple[float, int, float]) -> ArmaturePulse:
    """The set pulse from the boost with the moving armature at the points of ``lp`` (the
    set winding's loop, the inductance tolerance ``l_factor``; ``label(k)`` names point
    ``k``), its threshold ``thr``
    (:func:`pulse_threshold`): the module docstring's runs, refused in one line where the
    armature is not at rest on the seat when the current reaches the threshold itself."""
    from ..model.armature import SEATED, TRIPPED, params_from_loop
    from ..model.armature_boost import boost_energy, seated_on
    from ..model.armature_runs import pull_in
    from .boost_armature import BoostRuns, boosted_params

    i_th, _, i_trip = thr
    p = params_from_loop(wd.armature, lp, l_factor)
    dt = late(wd)
    first, ends, out = {}, {}, {}
    for high in (False, True):
        pb = boosted_params(wd, p, high)
        pin = pull_in(pb, trip=i_th)
        open_ = np.flatnonzero(pin.status == TRIPPED)
        if open_.size:
            _refuse(wd, pb, pin, int(open_[np.argmin(pin.trip_time[open_])]), label, high, i_th)
        first[high] = pin
        end = pull_in(pb, trip=i_trip) if i_trip > i_th else pin
        hit = np.isfinite(end.trip_time)
        y = seated_on(pb, np.where(hit, end.trip_state, 0.0), dt)
        i_top = np.where(hit, pb.current(y[0], 0.0), 0.0)
        drawn = np.where(hit, boost_energy(pb, y), 0.0)
        ends[high] = (i_top, np.where(hit, y[4], 0.0), drawn)
        u = y[5] if pb.droops else pb.v_on
        out[high] = (np.where(hit, end.trip_time + dt, np.inf), i_top, np.where(hit, u, np.nan), drawn)
    seat = {h: np.where(first[h].status == SEATED, first[h].seat_time, np.inf) for h in (False, True)}
    seat_high = seat[True] > seat[False]
    low, high_ = out[False], out[True]
    more = low[1] > high_[1]   # the side with the most current at the turn-off, and its capacitor
    runs = BoostRuns(slow=first[False], long_time=low[0], low_boost=low[2],
                     fast_time=first[True].trip_time, end_current=np.where(more, low[1], high_[1]),
                     end_boost=np.where(more, low[2], high_[2]), energy=np.fmax(low[3], high_[3]),
                     duty=np.zeros(len(p)), window=0.0,
                     reachable=_reachable(boosted_params(wd, p, False), first[False]))
    return ArmaturePulse(np.where(seat_high, seat[True], seat[False]), seat_high, first[False], runs, ends)


def _reachable(pb, pin) -> np.ndarray:
    """A per point: the most current the armature's run from the boost ``pb`` drives where it
    never reaches its trip (``pin``): seated, the larger of its hump before the seat (the
    largest at the integrator's accepted steps: the crest between two of them a little
    higher) and the seated coil's highest from the seat's state on
    (:func:`coildrive.model.supply.top_from`;
    an ideal boost's RL rise, ``V_b / R``); at rest on the open stop for ever (or stalled in
    flight, an estimate there) the open coil's (:func:`coildrive.model.supply.top_current`)."""
    from ..model import supply as bus_model
    from ..model.armature import SEATED

    seated = pin.status == SEATED
    if pb.droops:
        open_top = bus_model.top_current(pb.bus(True))
        seat_top = bus_model.top_from(pb.bus(False), np.where(seated, pin.seat_current, 0.0),
                                      np.where(seated, pin.seat_bus, pb.v_on))
    else:
        open_top = pb.v_on / pb.r_on
        seat_top = np.maximum(np.where(seated, pin.seat_current, 0.0), open_top)
    return np.where(seated, np.fmax(pin.hump_current, seat_top), open_top)


def seats_check(arm: ArmaturePulse, r, label) -> Check:
    """``set_armature_seats`` of a set pulse from the boost (``r`` its
    :class:`~coildrive.design.latch.PulseResult`): the armature rests on the seat before the
    current reaches the threshold wherever it does (:func:`armature_pulse` refuses the
    rest); it fails where the boost never gets the current there and the armature does not
    seat either (``label(k)`` names point ``k``)."""
    bad = np.flatnonzero(~np.isfinite(arm.seat_time))
    if bad.size:
        return Check("set_armature_seats", False,
                     f"the armature does not seat at {bad.size} of {arm.seat_time.size} corners, e.g. "
                     f"{label(int(bad[0]))}: the boost drives neither the threshold nor the armature onto the "
                     "seat -- a larger boost capacitance (supply.boost_capacitance), a higher boost voltage or "
                     "less spring and load")
    seat = (f"the armature rests on the seat {r.seat_time_s * 1e3:.4g} ms after switch-on at the latest "
            f"({r.seat_corner})")
    if r.ticks is None:
        return Check("set_armature_seats", False, f"{seat}, but the set pulse has no length (see the set_pulse check)")
    return Check("set_armature_seats", True, f"{seat}, before the current reaches the threshold at every corner "
                 "(the shortest set pulse: the catch then holds it)")


def _refuse(wd: Drive, pb, pin, k: int, label, high: bool, i_th: float) -> None:
    """The one line of :func:`armature_pulse` where the armature is not on the seat at point
    ``k`` when the current reaches the threshold ``i_th`` A."""
    y = pin.trip_state[:, k]
    gap = float(y[1])
    where = ("still at rest on the open stop" if gap >= float(pb.stroke[k]) * (1 - 1e-12) and y[2] == 0.0
             else f"in flight, {gap * 1e3:.4g} mm from the seat")
    side = "highest" if high else "lowest"
    raise InputError(wd.source, "pull_in.current_margin",
                     "a latching coil's set pulse from the boost (supply.boost) is modelled with a moving armature "
                     f"only where it rests on the seat when the pulse ends, and at {label(k)}, the boost at its "
                     f"{side}, the current reaches the threshold {i_th:.4g} A "
                     f"{float(pin.trip_time[k]) * 1e3:.4g} ms after switch-on with the armature {where} (its "
                     "flight after the turn-off, the catch to engage, is not modelled): expected a higher threshold "
                     "(pull_in.current_margin or pull_in.current), a slower rise (a lower boost voltage) or less "
                     "spring and load")


def energies(wd: Drive, lp, rel, sense_factor, b: BoostResult, ends: dict | None = None) -> dict:
    """One pulse's energies at the corner and side where the boost gives the most (the
    module docstring's balance; J): ``supply_j`` (from the boost), ``copper_j``,
    ``switch_sense_j``, ``boost_j`` (the boost path's ``R_b``), ``freewheel_j``,
    ``stored_j`` (``1/2 L I^2`` at the turn-off), ``armature_j`` (a moving armature's, the
    remainder; 0 without ``ends``), and ``k`` the point, ``high`` the side;
    ``decay_time_s`` the longest time to zero after a pulse and ``end_current_a`` the
    highest current it turns off (over both sides). ``ends``: a moving armature's pulse
    ends (:attr:`ArmaturePulse.ends`), else the still coil's closed form."""
    trip = b.trip_max_a
    best, t_zero_max, i_max = None, 0.0, 0.0
    for high in (False, True):
        if ends is None:
            bb = boost.boost_side(wd, lp, lp.inductance, high)
            m = model.of(bb)
            t = m.threshold_time(trip, bb, sensed=True) + late(wd)
            t = np.where(np.isfinite(t), t, 0.0)   # never reached: no pulse there (the check fails)
            i_top, s_on, drawn = m.state(t, bb)[0], m.square_integral(t, bb), m.energy_drawn(t, bb)
        else:
            i_top, s_on, drawn = ends[high]
        t_zero = decay_time(0.0, i_top, rel.r_off, rel.v_off, lp.inductance)
        q_d, s_d = decay_integrals(t_zero, i_top, rel.r_off, rel.v_off, lp.inductance)
        sense = wd.board.sense
        r_sense = sense.resistance * sense_factor
        parts = {"supply_j": drawn, "copper_j": lp.r_coil * (s_on + s_d),
                 "switch_sense_j": wd.switch.on_resistance * s_on
                 + r_sense * (s_on + (s_d if sense.position == "coil" else 0.0)),
                 "boost_j": wd.supply.boost_resistance * s_on,
                 "freewheel_j": freewheel_element_energy(wd, rel, q_d, s_d),
                 "stored_j": 0.5 * lp.inductance * i_top**2}
        # the armature's share: what the boost gave that no element took (zero current at both ends)
        parts["armature_j"] = (drawn - sum(parts[n] for n in ("copper_j", "switch_sense_j", "boost_j", "freewheel_j"))
                               if ends is not None else 0.0 * drawn)
        k = int(np.argmax(drawn))
        if best is None or float(drawn[k]) > best["supply_j"]:
            best = {name: float(np.broadcast_to(v, np.shape(drawn))[k]) for name, v in parts.items()}
            best.update(k=k, high=high)
        t_zero_max = max(t_zero_max, float(np.max(t_zero)))
        i_max = max(i_max, float(np.max(i_top)))
    return {**best, "decay_time_s": t_zero_max, "end_current_a": i_max}


def checks(name: str, b: BoostResult, wd: Drive) -> list[Check]:
    """The pulse's threshold (reached at every corner, its code within the ADC: the
    ``{name}_pulse`` check) and the boost capacitor above the main supply until it
    (``{name}_boost_droop``), worded as the boosted peak's
    (:func:`coildrive.design.boost.boost_checks`)."""
    rename = {"boost_threshold": f"{name}_pulse", "boost_droop": f"{name}_boost_droop"}
    return [Check(rename[c.name], c.ok, f"the {name} pulse from the boost: "
                  + c.detail.replace("the end of the peak", "the end of the pulse"))
            for c in boost.boost_checks(wd, b) if c.name in rename]


def firmware_time(wd: Drive, b: BoostResult, supply: float, coil_temp: float, r_factor: float = 1.0,
                  l_factor: float = 1.0) -> float:
    """The pulse the firmware runs at one point (s): from the boost at its nominal voltage
    and capacitance until a nominal sense chain reads the threshold code at a tick (the
    driver compares once a tick, from the tick after the pulse's start), or the time-out
    if sooner (as :func:`coildrive.design.boost.firmware_peak` for the peak). A design
    whose threshold is never reached has no time-out: then until the current's first
    maximum (an ideal boost's: five time constants), to show how far short it falls."""
    t, m, bb = _threshold_tick(wd, b, supply, coil_temp, r_factor, l_factor)
    if b.timeout_s is None:
        top = float(m.peak_time(bb))
        return min(t, top if np.isfinite(top) else 5.0 * float(bb.l / bb.r))
    return min(t, b.timeout_s)


def firmware_times_out(wd: Drive, b: BoostResult, supply: float, coil_temp: float, r_factor: float = 1.0,
                       l_factor: float = 1.0) -> bool:
    """Whether the firmware's pulse at one point (:func:`firmware_time`) ends at its
    time-out, with the driver's FAULT ``BOOST_TIMEOUT``: the reading reaches the code at
    no tick up to the time-out's (at that tick the code still ends it, without a fault)."""
    if b.timeout_s is None:
        return False
    t = _threshold_tick(wd, b, supply, coil_temp, r_factor, l_factor)[0]
    rate = wd.board.tick.rate
    return not math.isfinite(t) or round(t * rate) > round(b.timeout_s * rate)


def _threshold_tick(wd: Drive, b: BoostResult, supply: float, coil_temp: float, r_factor: float,
                    l_factor: float) -> tuple:
    """The tick (s) at which the driver first reads the threshold code at one point (``inf``
    never), the boost model and its parameters there (the still coil's; with a moving
    armature the crossing is its run's from the boost, as :func:`armature_pulse`'s)."""
    s = wd.supply
    lp = loop(wd, supply, coil_temp, r_factor, l_factor)
    bb = boost.at_boost(wd, s.boost, s.boost_capacitance, lp.r_on, lp.inductance)
    m = model.of(bb)
    trip = boost.nominal_trip(wd, b.threshold_code)
    t = (float(m.threshold_time(trip, bb, sensed=True)) if wd.armature is None
         else boost.armature_trip_time(wd, lp, l_factor, trip))
    rate = wd.board.tick.rate
    # the driver compares at each tick after the pulse's first: at the first at or after the crossing
    t = max(math.ceil(t * rate - 1e-9), 1) / rate if math.isfinite(t) else t
    return t, m, bb


def sample_figures(wd: Drive, lp, rel, sense_factor, b: BoostResult, current: float, v_factor, c_factor,
                   l_factor=1.0) -> tuple:
    """A Monte Carlo's figures of one pulse from the boost at the points of ``lp`` (the
    winding ``wd``'s loop; :mod:`coildrive.design.latch_montecarlo`): the boost's charge x
    ``v_factor`` and capacitance x ``c_factor``, the sense resistor x ``sense_factor``, the
    amplifier nominal. ``(time to current s, end current A, energy from the boost J, time
    to zero s, timed out)``: the shortest pulse ends where the sample's chain reads the
    threshold code (its end current that code's true current; the current at the time-out
    where that comes first), the longest one tick later (its energy and decay)."""
    s, board = wd.supply, wd.board
    bb = boost.at_boost(wd, s.boost * np.asarray(v_factor, float), s.boost_capacitance * np.asarray(c_factor, float),
                        lp.r_on, lp.inductance)
    m = model.of(bb)
    lsb = board.adc.reference / 2**board.adc.bits
    trip = b.threshold_code * lsb / (board.sense.resistance * np.asarray(sense_factor, float) * board.sense.gain)
    if wd.armature is not None:
        return _sample_armature(wd, lp, rel, l_factor, b, trip, v_factor, c_factor)
    t_trip = m.threshold_time(trip, bb, sensed=True)
    timeout = b.timeout_s or 0.0
    out = t_trip > timeout
    end = np.where(out, m.state(np.minimum(t_trip, timeout), bb)[0], trip)
    t_long = np.minimum(t_trip + late(wd), timeout)
    i_top = m.state(t_long, bb)[0]
    return (m.threshold_time(current, bb), end, m.energy_drawn(t_long, bb),
            decay_time(0.0, i_top, rel.r_off, rel.v_off, lp.inductance), out)


def _sample_armature(wd: Drive, lp, rel, l_factor, b: BoostResult, trip, v_factor, c_factor) -> tuple:
    """:func:`sample_figures` of the set pulse with the moving armature (the inductance
    tolerance ``l_factor`` per point): its run from the sample's boost until the sample's
    chain reads the threshold code (``trip`` A per point), as :func:`armature_pulse`'s.
    The time is the seat's, ``inf`` where the armature is not at rest on the seat by then
    (the catch would not hold it: ``set_not_seated``); the end current as without it; the
    energy and the decay of the longest pulse on the seated coil's closed form
    (:func:`~coildrive.model.armature_boost.seated_on`) where it is seated (NaN elsewhere,
    and where the pulse times out: not modelled)."""
    from ..model.armature import SEATED, params_from_loop
    from ..model.armature_boost import boost_energy, boost_params, seated_on
    from ..model.armature_runs import pull_in

    s = wd.supply
    pb = boost_params(params_from_loop(wd.armature, lp, l_factor), s.boost * np.asarray(v_factor, float),
                      s.boost_capacitance * np.asarray(c_factor, float), s.boost_resistance)
    pin = pull_in(pb, trip=trip)
    seated = (pin.status == SEATED) & np.isfinite(pin.trip_time)
    timeout = b.timeout_s or 0.0
    hit = np.isfinite(pin.trip_time) & (pin.trip_time <= timeout)
    on = hit & seated   # the longest pulse on the seat: its tick (or what is left to the time-out)
    y = seated_on(pb, np.where(on, pin.trip_state, 0.0), np.where(on, np.minimum(late(wd), timeout - pin.trip_time),
                                                                  0.0))
    i_top = np.where(on, pb.current(y[0], 0.0), np.nan)
    return (np.where(seated, pin.seat_time, np.inf), np.where(hit, trip, np.nan),
            np.where(on, boost_energy(pb, y), np.nan), decay_time(0.0, i_top, rel.r_off, rel.v_off, lp.inductance),
            ~hit)

