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

*On a full bridge* (one coil, both polarities) the boost switch feeds the bridge's
high-side rail and the main supply reaches it through a blocking diode: after each pulse
the current returns up two body diodes and the boost switch's into the boost capacitor
(:func:`return_decay`, :func:`coildrive.model.flux_bus_decay.boost_return`), never into the main
bus. The pulse's energy balance gains ``returned_j`` (the capacitor's rise), the decay's
``int i^2 dt`` comes from its own balance, ``R_b`` is in the decay too, and the freewheel is
the three diodes; the switches see one diode and ``R_b i`` more than the boosted peak's
(the rail rides on the capacitor), and the boost recharges only what it net gives
(:func:`bridge_figures`). A linear coil's return is the series RLC's closed form; a
flux-linkage curve's or an eddy term's the stepped or closed-form runs of
:func:`coildrive.model.flux_bus_decay.boost_return` (the capacitor with no source behind
it), whose ``int i^2 dt`` comes from the same balance with the field's ``int i dpsi`` and
the eddy resistance's share of the return (in ``eddy_j``).

Energy per pulse (the corner and side where the boost gives the most): from zero current
back to zero the capacitor's ``1/2 C (V_b^2 - v_C^2)`` is exactly what the loop takes::

    E_boost = R_coil (S_on + S_d) + R_switch S_on + R_sense (S_on [+ S_d]) + R_b S_on + E_freewheel
              [+ E_eddy]

(``S``: ``int i^2 dt`` over the on-time, in closed form by
:func:`coildrive.model.boost.square_integral`, and over the decay; ``R_b`` the boost
path's own resistance, ``boost_j``). The boost's recharge of the larger pulse's energy at
``boost_power`` enters the shortest interval between pulses.

On a drooping main supply (``supply.source_resistance`` with ``capacitance``) the pulses
still run from the boost alone (the main supply's diode blocks: ``*_boost_droop``) and
each winding's freewheel path -- on a full bridge the fast decay, into the boost capacitor
-- returns nothing to the main bus; what loads it is the boost converter, drawing
``boost_power / boost_efficiency`` in one run a pulse while it recharges (on a bridge only
the energy net of what the decay returned), the runs at least the interval less the
longest pulse apart (:class:`MainBus`, :func:`main_bus`, physics
:mod:`coildrive.model.converter_bus`).

A flux-linkage curve (the set winding's) or an eddy-current term (either winding's) takes
each pulse on the monostable boosted peak's runs (:mod:`coildrive.model.flux_boost`,
``model.of``): the threshold on the terminal current the sense reads, raised by the eddy
share's bound ``V_b,max / R_e`` (:func:`coildrive.design.boost.threshold`), the pulse's
current on the magnetising current; ``S_on`` the terminal current's, ``E_eddy`` the
on-time's by the boost's balance (:func:`coildrive.model.boost.eddy_loss`) plus the
release's (:func:`coildrive.model.eddy.release_eddy_energy`: the conduction, then the
flux's tail through ``R_e``); the field's ``int i dpsi`` at the turn-off.

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
damping's heat and the seat's impact), its remainder. With an eddy term on the set winding
the run is the branch's (the force on the magnetising current, the threshold and ``int i^2
dt`` on the terminal current, the switch turning that off); from a boost capacitor it
carries the eddy resistance's loss as a state of its own
(:func:`coildrive.model.armature_runs.pull_in`'s ``eddy_loss``), from an ideal boost the
loss follows from the run's own integrals (the branch sees ``V_b - R i_t``:
:func:`coildrive.model.armature_boost.run_eddy_loss`), so ``E_eddy`` is computed, that plus
the release's, and the remainder stays the mechanical work. Over the set winding's open and
seated flux-linkage curves (from a boost capacitor or an ideal boost, an eddy term too) the
run is the curves' (``pull_in`` with the trip, its resting stretches flown from the capacitor,
the curves' closed-form rise from an ideal boost; with an eddy term the loss carried as a
state from the capacitor, as above from an ideal boost), the tick after the threshold the
seated curve held on the seat and flown (:func:`coildrive.model.armature_boost.seated_on`),
the decay and ``int i dpsi`` the seated curve's (the winding's loop takes it). On a drooping main
supply the converter's draw after the set pulse is the run's energy (:func:`main_bus`).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from ..config import Drive
from ..errors import InputError
from ..model import boost as model
from ..model import converter_bus
from ..model.bridge import RETURN_DROPS
from ..model.circuit import freewheel_element_energy, full_bridge, loop, open_inductance
from ..model.eddy import EddyCoil, release_eddy_energy, stored_energy
from ..model.flux_boost import FluxBoost
from ..model.flux_bus_decay import boost_return
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
                               pulse_threshold(wd, current, current_margin), late(wd), margin, runs,
                               return_drop=return_drop(wd, rel) if full_bridge(wd) else None)


def return_drop(wd: Drive, rel):
    """On a full bridge, what the switches see above the boosted peak's turn-off voltage at
    ``i`` A (a function of it): the rail rides on the boost capacitor up the boost switch's
    body diode and ``R_b`` (module docstring), one drop and ``R_b i``."""
    v_d, r_b = rel.diode(wd), wd.supply.boost_resistance
    return lambda i: v_d + r_b * np.asarray(i, float)


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
    highest) ``(magnetising current A, terminal current A, int i^2 dt A^2*s, energy from
    the boost J, eddy loss J)`` at the end of the pulse that ends at the highest trip current
    one tick late (0 where never; without an eddy term both currents the coil's, the loss 0;
    with one ``int i^2 dt`` the terminal current's and the loss the run's
    ``R_e int (i_m - i_t)^2 dt``)."""

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
    from ..model.armature_boost import boost_energy, run_eddy_loss, seated_on
    from ..model.armature_runs import pull_in
    from .boost_armature import BoostRuns, boosted_params

    i_th, _, i_trip = thr
    p = params_from_loop(wd.armature, lp, l_factor, wd.coil.eddy_resistance)
    eddy = p.eddy is not None
    dt = late(wd)
    first, ends, out = {}, {}, {}
    for high in (False, True):
        pb = boosted_params(wd, p, high)
        carry = eddy and pb.droops   # (an ideal boost's loss follows from q and sq: run_eddy_loss)
        pin = pull_in(pb, trip=i_th, eddy_loss=carry)
        open_ = np.flatnonzero(pin.status == TRIPPED)
        if open_.size:
            _refuse(wd, pb, pin, int(open_[np.argmin(pin.trip_time[open_])]), label, high, i_th)
        first[high] = pin
        end = pull_in(pb, trip=i_trip, eddy_loss=carry) if i_trip > i_th else pin
        hit = np.isfinite(end.trip_time)
        t_end = np.where(hit, end.trip_time + dt, np.inf)
        y = seated_on(pb, np.where(hit, end.trip_state, 0.0), dt)
        u = y[5] if pb.droops else pb.v_on
        i_top = np.where(hit, pb.current(y[0], 0.0), 0.0)
        i_end = np.where(hit, pb.terminal(i_top, True, bus=u), 0.0)   # (what the switch turns off)
        drawn = np.where(hit, boost_energy(pb, y), 0.0)
        loss = np.where(hit, run_eddy_loss(pb, np.where(hit, t_end, 0.0), y), 0.0) if eddy else 0.0 * drawn
        ends[high] = (i_top, i_end, np.where(hit, y[4], 0.0), drawn, loss)
        out[high] = (t_end, i_end, np.where(hit, u, np.nan), drawn)
    seat = {h: np.where(first[h].status == SEATED, first[h].seat_time, np.inf) for h in (False, True)}
    seat_high = seat[True] > seat[False]
    low, high_ = out[False], out[True]
    more = low[1] > high_[1]   # the side with the most current at the turn-off, and its capacitor
    runs = BoostRuns(slow=first[False], long_time=low[0], low_boost=low[2],
                     fast_time=first[True].trip_time, end_current=np.where(more, low[1], high_[1]),
                     end_boost=np.where(more, low[2], high_[2]), energy=np.fmax(low[3], high_[3]),
                     duty=np.zeros(len(p)), window=0.0,
                     reachable=_reachable(boosted_params(wd, p, False), first[False], _open_top(wd, lp, l_factor)))
    return ArmaturePulse(np.where(seat_high, seat[True], seat[False]), seat_high, first[False], runs, ends)


def _reachable(pb, pin, open_top=None) -> np.ndarray:
    """A per point: the most current the armature's run from the boost ``pb`` drives where it
    never reaches its trip (``pin``): seated, the larger of its hump before the seat (the
    largest at the integrator's accepted steps: the crest between two of them a little
    higher) and the seated coil's highest from the seat's state on
    (:func:`coildrive.model.supply.top_from`;
    an ideal boost's RL rise, ``V_b / R``); at rest on the open stop for ever (or stalled in
    flight, an estimate there) the open coil's (:func:`coildrive.model.supply.top_current`).
    With an eddy term (the threshold on the terminal current ``(u + R_e i_m)/(R + R_e)``)
    those are the magnetising current's, taken with the capacitor at its seat (or full) as
    an upper bound of the terminal current's (the capacitor only falls while the current
    flows); the hump is the terminal current's already. Over the open and seated curves
    (``pb.curves``) from the boost capacitor the seated coil is flown on from the seat
    (``pin.seated_top``, the run's own flight to the trip that never comes), and ``open_top``
    (A per point) is the open curve's highest from the capacitor (:func:`_open_top`); from
    an ideal boost, as a linear coil's (a curve's rise on a stiff source climbs to ``V_b /
    R`` without overshoot)."""
    from ..model import supply as bus_model
    from ..model.armature import SEATED

    seated = pin.status == SEATED
    if pb.curves is not None and pb.droops:   # no closed form: the seated coil flown on from the seat
        return np.where(seated, np.fmax(pin.hump_current, pin.seated_top), open_top)
    if pb.droops:
        open_top = bus_model.top_current(pb.bus(True))
        u_seat = np.where(seated, pin.seat_bus, pb.v_on)
        seat_top = bus_model.top_from(pb.bus(False), np.where(seated, pin.seat_current, 0.0), u_seat)
        if pb.eddy is not None:
            open_top = pb.terminal(open_top, True)
            seat_top = pb.terminal(seat_top, True, bus=u_seat)
    else:
        open_top = pb.v_on / pb.r_on
        seat_top = np.maximum(np.where(seated, pin.seat_current, 0.0), open_top)
    return np.where(seated, np.fmax(pin.hump_current, seat_top), open_top)


def _open_top(wd: Drive, lp, l_factor):
    """Over the open and seated curves: the most current the boost at its lowest drives
    through the open curve with the armature at rest on the open stop (its first maximum,
    :mod:`coildrive.model.flux_boost`); ``None`` for a linear ``L(x)``."""
    if not wd.coil.seated_current:
        return None
    b = boost.boost_side(wd, lp, open_inductance(wd, l_factor), False)
    return model.of(b).highest_current(b, sensed=True)


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
    ``returned_j`` (a full bridge's back into the boost capacitor; 0 otherwise),
    ``eddy_j`` (an eddy term's resistance: on, freewheeling and the flux's tail; 0 without
    one), ``stored_j`` (the field's ``int i dpsi`` at the turn-off: ``1/2 L I^2`` for a
    linear coil, the magnetising branch's with an eddy term), ``armature_j`` (a moving
    armature's, the remainder; 0 without ``ends``), ``main_supply_j`` what the main supply gives in a clamp's decay (``V_main Q_d``; 0
    for the other paths), and ``k`` the point, ``high`` the side;
    ``decay_time_s`` the longest time to zero (of the terminal current) after a pulse,
    ``end_current_a`` the highest (terminal) current it turns off, ``net_j`` the most
    the boost net gives (drawn less returned), ``heat_j`` the most copper heat (over both
    sides) and ``decay_charge_c`` with a clamp across the switch the most charge a decay
    draws from the main supply (``int i dt``; 0 otherwise). ``ends``: a moving
    armature's pulse ends (:attr:`ArmaturePulse.ends`; a linear coil on one switch), else
    the still coil's closed form."""
    trip = b.trip_max_a
    bridge = full_bridge(wd)
    r_b = wd.supply.boost_resistance
    best, t_zero_max, i_max, net_max, heat_max, q_max = None, 0.0, 0.0, 0.0, 0.0, 0.0
    for high in (False, True):
        if ends is None:
            bb = boost.boost_side(wd, lp, lp.inductance, high)
            m = model.of(bb)
            t = m.threshold_time(trip, bb, sensed=True) + late(wd)
            t = np.where(np.isfinite(t), t, 0.0)   # never reached: no pulse there (the check fails)
            i_top, v_top = m.state(t, bb)   # (with an eddy term the magnetising current)
            s_on = m.square_integral(t, bb)
            drawn = m.energy_drawn(t, bb)
            i_end = m.terminal(i_top, v_top, bb)
        else:   # a moving armature on one switch: a linear coil (an eddy term too) or its two curves
            i_top, i_end, s_on, drawn, loss_on = ends[high]
        ind = lp.inductance
        sense = wd.board.sense
        r_sense = sense.resistance * sense_factor
        eddy = isinstance(ind, EddyCoil)
        if bridge:   # back into the boost capacitor (module docstring, *On a full bridge*)
            back = return_decay(wd, rel, i_top, v_top, bb.c)
            t_zero, q_d = back.zero_time, back.charge
            returned = 0.5 * bb.c * (back.bus_at_zero**2 - v_top**2)
            fw = RETURN_DROPS * rel.diode(wd) * q_d
            loss_d = back.eddy_energy if eddy else 0.0
            # int i^2 dt of the decay by its energy balance: the field's int i dpsi (1/2 L i^2
            # on a line; the magnetising branch's with an eddy term) into the loop's
            # resistance, the diodes, the capacitor and the eddy resistance
            s_d = (stored_energy(ind.magnetising if eddy else ind, i_top) - fw - returned - loss_d) / (rel.r_off + r_b)
        else:
            t_zero = decay_time(0.0, i_top, rel.r_off, rel.v_off, ind)
            q_d, s_d = decay_integrals(t_zero, i_top, rel.r_off, rel.v_off, ind)
            fw, returned = freewheel_element_energy(wd, rel, q_d, s_d), 0.0 * drawn
        # a clamp across the switch: the decay's current flows from the main bus (the top back
        # on it through its diode) through the winding and the clamp, L di/dt = -(R_off i +
        # V_clamp - V_main): the main supply gives V_main int i dt
        main = rel.supply * q_d if wd.freewheel.type == "clamp" and not bridge else 0.0 * drawn
        parts = {"supply_j": drawn, "copper_j": lp.r_coil * (s_on + s_d),
                 "switch_sense_j": (2.0 if bridge else 1.0) * wd.switch.on_resistance * s_on
                 + r_sense * (s_on + (s_d if bridge or sense.position == "coil" else 0.0)),
                 "boost_j": r_b * (s_on + (s_d if bridge else 0.0)),
                 "freewheel_j": fw, "returned_j": returned,
                 # the on-time's share by the boost's balance, then the release's (the
                 # conduction, then the flux's tail through R_e alone)
                 "eddy_j": ((m.eddy_loss(t, bb) if ends is None else loss_on)
                            + (loss_d if bridge else release_eddy_energy(i_top, rel.r_off, rel.v_off, ind))
                            if eddy else 0.0 * drawn),
                 "stored_j": stored_energy(ind.magnetising if eddy else ind, i_top), "main_supply_j": main}
        # the armature's share: what the boost gave that no element took (zero current at both ends)
        parts["armature_j"] = (drawn + main - sum(parts[n] for n in ("copper_j", "switch_sense_j", "boost_j", "freewheel_j",
                                                              "returned_j", "eddy_j"))
                               if ends is not None else 0.0 * drawn)
        k = int(np.argmax(drawn))
        if best is None or float(drawn[k]) > best["supply_j"]:
            best = {name: float(np.broadcast_to(v, np.shape(drawn))[k]) for name, v in parts.items()}
            best.update(k=k, high=high)
        t_zero_max = max(t_zero_max, float(np.max(t_zero)))
        i_max = max(i_max, float(np.max(i_end)))
        net_max = max(net_max, float(np.max(drawn - returned)))
        heat_max = max(heat_max, float(np.max(parts["copper_j"])))
        if wd.freewheel.type == "clamp" and not bridge:
            q_max = max(q_max, float(np.max(q_d)))
    return {**best, "decay_time_s": t_zero_max, "end_current_a": i_max, "net_j": net_max, "heat_j": heat_max,
            "decay_charge_c": q_max}


def return_decay(wd: Drive, rel, i0, v_c, c):
    """A full bridge's fast decay of ``i0`` A (with an eddy term the magnetising current)
    after a pulse from the boost, back into the boost capacitor of ``c`` F at ``v_c`` V at
    the points of the release loop ``rel``
    (:func:`coildrive.model.flux_bus_decay.boost_return`: a linear coil, a curve or an eddy
    term; a :class:`~coildrive.model.bus_decay.FastDecay`)."""
    return boost_return(rel.inductance, i0, v_c, c, rel.r_off, wd.supply.boost_resistance, rel.diode(wd))


def bridge_figures(wd: Drive, b: BoostResult, e: dict) -> BoostResult:
    """A full bridge's pulse figures (``b``) with the boost's recharge of what it net gives
    (``e["net_j"]``: drawn less returned into the capacitor, the most over the points and
    both sides) at ``boost_power``, and the interval it sets."""
    if b.recharge_time_s is None:
        return b
    recharge = float(model.recharge_time(e["net_j"], wd.supply.boost_power))
    return dataclasses.replace(b, recharge_time_s=recharge,
                               min_interval_s=None if b.min_interval_s is None else
                               b.min_interval_s - b.recharge_time_s + recharge)


def checks(name: str, b: BoostResult, wd: Drive) -> list[Check]:
    """The pulse's threshold (reached at every corner, its code within the ADC: the
    ``{name}_pulse`` check) and the boost capacitor above the main supply until it
    (``{name}_boost_droop``), worded as the boosted peak's
    (:func:`coildrive.design.boost.boost_checks`)."""
    rename = {"boost_threshold": f"{name}_pulse", "boost_droop": f"{name}_boost_droop",
              "boost_clamp": f"{name}_boost_clamp"}
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
        return min(t, top if np.isfinite(top) else 5.0 * _time_constant(bb))
    return min(t, b.timeout_s)


def _time_constant(bb) -> float:
    """``L/R`` (s) of one point's boost loop: a flux-linkage curve's at zero current (its
    largest incremental inductance on a saturating curve)."""
    if isinstance(bb, FluxBoost):
        return float(np.ravel(bb.coil.scale)[0] * bb.coil.curve.incremental(0.0) / np.ravel(bb.r)[0])
    return float(np.ravel(bb.l / bb.r)[0])


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
    end = np.where(out, m.current(np.minimum(t_trip, timeout), bb, sensed=True), trip)
    t_long = np.minimum(t_trip + late(wd), timeout)
    i_top, v_c = m.state(t_long, bb)
    t_zero = (return_decay(wd, rel, i_top, v_c, bb.c).zero_time if full_bridge(wd) else
              decay_time(0.0, i_top, rel.r_off, rel.v_off, lp.inductance))
    return m.threshold_time(current, bb), end, m.energy_drawn(t_long, bb), t_zero, out


@dataclass(frozen=True)
class MainBus:
    """The drooping main bus behind the pulses from the boost (``design --json``
    ``latch.main_bus``; ``None`` on a stiff main supply). The boost converter draws
    ``converter_draw_w`` W (``boost_power / boost_efficiency``) from it in one run of
    ``draw_time_s`` s a pulse (the larger pulse's energy net from the boost at
    ``boost_power``: what it drew, less on a full bridge what its fast decay returned into
    the boost capacitor), the pulses coming at most every ``period_s`` s (the shortest
    interval: the fastest the firmware may fire them). A run starts anywhere from its
    pulse's start (a converter that recharges as the capacitor falls) to its end (one held
    off during the pulse), and no pulse runs past its time-out (``longest_pulse_s``, the
    longer pulse's), so the runs are at least ``spacing_s`` = ``period_s -
    longest_pulse_s`` apart (start to start). The pulses run from the boost and their
    freewheel paths (a bridge's fast decay: into the boost capacitor) return nothing to the
    main bus. ``lowest_bus_v``: the lowest bus, the periodic orbit's of runs every
    ``spacing_s`` at the end of a run (from a full bus it only falls to it; a bound under
    every schedule the firmware may run; runs that may touch, ``spacing_s <=
    draw_time_s``: the floor itself), at ``lowest_bus_corner`` (the source there,
    ``source_v``), ``droop_v`` below that source; ``floor_v`` the bus a steady draw settles
    at there (V_1 of :mod:`coildrive.model.converter_bus`). ``None`` where the source behind
    ``R_s`` cannot carry the draw at all: it delivers at most ``source_limit_w`` = ``V_s^2 /
    (4 R_s)`` at the lowest source. Units V, ohm, F, W, s (``period_s`` and ``spacing_s``
    null in the JSON where no interval is safe: then one run from a full bus).

    With a clamp across each winding's switch each pulse's decay draws from the main bus
    too (its current flows from it through the winding into the clamp): at most
    ``decay_charge_c`` C (the pulses' :attr:`~coildrive.design.latch.PulseResult.decay_charge_c`)
    within ``longest_decay_s`` s of the pulse's end. A run may then start as late as the
    decay's end (a converter held off until the current's zero), so ``spacing_s`` is
    ``period_s`` less the longest pulse and the longest decay; ``clamp_drop_v`` bounds how
    much further the decays pull the bus below the runs' orbit
    (:func:`coildrive.model.converter_bus.clamp_drop`), and ``lowest_bus_v`` and ``droop_v``
    include it (a bound under every schedule, the decays overlapping the runs or not; ``None``
    where that bound finds no floor)."""

    source_resistance_ohm: float
    capacitance_f: float
    converter_draw_w: float
    draw_time_s: float
    period_s: float
    source_v: float
    lowest_bus_v: float | None
    lowest_bus_corner: str
    droop_v: float | None
    floor_v: float | None
    source_limit_w: float
    longest_pulse_s: float = 0.0
    spacing_s: float = math.inf
    decay_charge_c: float = 0.0
    longest_decay_s: float = 0.0
    clamp_drop_v: float = 0.0


def main_bus(drive: Drive, pulses: list, interval: float) -> tuple[MainBus | None, list[Check]]:
    """The drooping main bus under the boost converter's recharges (:class:`MainBus`) at both
    ends of the source (``supply.min``, ``supply.max``), pulses at least ``interval`` s apart
    (their runs ``interval`` less the longest pulse; with a clamp across the switch less its
    longest decay too, whose draw :class:`MainBus` bounds), and its check ``boost_main_bus``
    (the source carries the converter's draw); ``(None, [])`` on a stiff main supply. One
    function for both topologies: a reset winding's pulses and a full bridge's (whose
    recharge is of the net energy, :func:`bridge_figures`)."""
    s = drive.supply
    if not (s.boosted and s.droops):
        return None, []
    p_in = s.converter_draw
    boosted = [p for p in pulses if p.boost is not None]
    t_draw = max((p.boost.recharge_time_s or 0.0 for p in boosted), default=0.0)
    longest = max((p.time_s for p in boosted), default=0.0)
    clamped = drive.freewheel.type == "clamp" and not full_bridge(drive)   # each decay draws on it
    q = max((p.decay_charge_c for p in boosted), default=0.0) if clamped else 0.0
    t_q = max((p.decay_time_s for p in boosted), default=0.0) if clamped else 0.0
    period = interval   # (inf where no interval is safe: one run from a full bus)
    spacing = max(period - longest - t_q, t_draw)   # (runs that may touch: one long run, the floor)
    v_s = np.array([s.min, s.max])
    low = converter_bus.orbit_low(v_s, s.source_resistance, s.capacitance, p_in, t_draw, spacing)
    floor = converter_bus.roots(v_s, s.source_resistance, p_in)[0]
    drop = (converter_bus.clamp_drop(low, q, t_q, period, s.source_resistance, s.capacitance, p_in) if clamped
            else np.zeros_like(low))
    carried_runs = bool(np.all(np.isfinite(low)))
    low = low - drop
    carried = bool(np.all(np.isfinite(low)))
    k = int(np.argmin(low)) if carried else 0
    limit = s.min**2 / (4.0 * s.source_resistance)
    bus = MainBus(
        source_resistance_ohm=s.source_resistance, capacitance_f=s.capacitance, converter_draw_w=p_in,
        draw_time_s=t_draw, period_s=period, source_v=float(v_s[k]),
        lowest_bus_v=float(low[k]) if carried else None, lowest_bus_corner=f"source {v_s[k]:.4g} V",
        droop_v=float(v_s[k] - low[k]) if carried else None, floor_v=float(floor[k]) if carried else None,
        source_limit_w=limit, longest_pulse_s=longest, spacing_s=spacing, decay_charge_c=q, longest_decay_s=t_q,
        clamp_drop_v=float(drop[k]) if carried else 0.0)
    if carried_runs and not carried:
        return bus, [Check("boost_main_bus", False,
                           f"each pulse's decay through the clamp draws up to {q * 1e3:.4g} mC from the main bus "
                           f"besides the boost converter's {p_in:.4g} W: no floor under the bus is found (it may "
                           "collapse) -- a lower supply.source_resistance, a larger supply.capacitance or a "
                           "smaller supply.boost_power")]
    if not carried:
        return bus, [Check("boost_main_bus", False,
                           f"the source at {s.min:.4g} V behind {s.source_resistance:.4g} ohm delivers at most "
                           f"{limit:.4g} W, less than the boost converter's {p_in:.4g} W: the main bus collapses "
                           "while the boost recharges -- a lower supply.source_resistance or a smaller "
                           "supply.boost_power")]
    every = (f"pulses every {period * 1e3:.4g} ms, its runs at least {spacing * 1e3:.4g} ms apart"
             if math.isfinite(period) else "once")
    back = ("; each pulse's fast decay returns into the boost capacitor, so it recharges the net"
            if full_bridge(drive) else "")
    if clamped:
        back = (f"; each pulse's decay through the clamp draws up to {q * 1e3:.4g} mC from it in "
                f"{t_q * 1e3:.4g} ms, at most {bus.clamp_drop_v:.4g} V more")
    return bus, [Check("boost_main_bus", True,
                       f"the boost converter draws {p_in:.4g} W from the main bus for {t_draw * 1e3:.4g} ms a "
                       f"pulse ({every}): the bus falls {bus.droop_v:.4g} V to "
                       f"{bus.lowest_bus_v:.4g} V at its {bus.lowest_bus_corner} (a steady draw settles at "
                       f"{bus.floor_v:.4g} V); the pulses run from the boost"
                       + (back if clamped else f" and their freewheel paths return nothing to it{back}"))]


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
    pb = boost_params(params_from_loop(wd.armature, lp, l_factor, wd.coil.eddy_resistance),
                      s.boost * np.asarray(v_factor, float),
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

