"""A latching (bistable) coil (``[hold] mode = "latch"``): a set pulse and a reset pulse,
no hold.

Each pulse is sized like the peak (:mod:`coildrive.design.peak`): the longest of the
worst time to its current x its margin and the time the shortest real pulse needs to
carry ``current_margin`` x that current (plus its settle time), in whole scheduler ticks
plus one. The set pulse takes ``[pull_in]``, the reset pulse ``[reset]``; on a full bridge
both drive the one coil (the reset with the other polarity: Q3 + Q2 instead of Q1 + Q4),
with a reset winding (``[reset_coil]``) each winding has its own switch. The worst
corner of a pulse's length is the lowest supply (less ``hold.recharge_tolerance`` when
the pulses come from a capacitor behind ``supply.source_resistance``, whose droop the
rise includes) with the coil at ``thermal.max_coil_temp`` (the interval below keeps it
there or cooler), highest resistance and inductance (and sense resistance, with its
``resistance_tolerance``).

Per pulse: its energy from the supply, into the coil's copper, the switches and sense
resistor, the freewheel path, and back to the bus (a bridge's fast decay) at the corner
where the supply gives the most (the longest pulse, the highest supply, the cold coil,
the lowest resistance; on a stiff bus -- a drooping one gives less); the time its
current takes to reach zero after it; the switch voltage at its end. The shortest
interval between pulses (start to start) is the longest of: the pulse and its decay to
zero, the coil's temperature (:mod:`coildrive.model.latch`: the larger pulse's copper
heat every interval, from the hottest ambient, up to ``thermal.max_coil_temp``), and the
capacitor's recharge to the bus the pulses were designed from.

From the boost (``[supply] boost``; two windings, the set winding linear or on a curve,
an eddy term on either, or one coil on a full bridge whose high-side rail the boost switch
feeds, linear, on a curve or with an eddy term; a stiff or a drooping main supply): each pulse ends at its own current
threshold with a time-out, its energy is drawn from the boost (on a bridge its fast decay
returns into the boost capacitor), and the boost's recharge enters the interval
(:mod:`coildrive.design.latch_boost`); on a drooping main supply the pulses do not draw on
it, the boost converter's recharges do (``latch.main_bus``).

A flux-linkage curve (the set winding's, or the bridge's one coil's) takes every segment
on the curve (:mod:`coildrive.model.flux`; on a drooping bus :mod:`coildrive.model.flux_bus`),
the on-time's integrals by :func:`coildrive.model.flux.rise_integrals` (exact over a flat
top), and ``stored_j`` is ``int i dpsi`` (docs/design-method.md, *A saturating coil*). With
``[armature]`` the set winding's open and seated curves: the seat run
(:func:`seat_run`, :mod:`coildrive.model.gap_curves`) and after the seat the seated
curve's exact segment (:func:`after_seat`); the decay down the seated curve. With an
eddy-current term too (the set winding's) the seat run's flux is the magnetising branch's
behind the loop's Thevenin pair and the eddy resistance's energy is its own
(:func:`on_eddy_energy`, the release's by :func:`coildrive.model.eddy.release_eddy_energy`);
the armature's share stays the balance's remainder.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from dataclasses import asdict, dataclass

import numpy as np

from .. import __version__
from ..config import Drive
from ..jsondoc import document_head, json_ready
from ..model import latch as latch_model
from ..model import bus_decay
from ..model.bridge import fast_switch_voltage, pump_up
from ..model.circuit import freewheel_element_energy, full_bridge, loop, open_inductance
from ..model.eddy import EddyCoil, release_eddy_energy, stored_energy
from ..model.eddy import terminal as eddy_terminal
from ..model.flux import FluxCoil
from ..model.flux import rise_integrals as flux_rise_integrals
from ..model.flux_bus_decay import clamp_decay, fast_decays
from ..model.rl import decay_integrals, decay_time, rise_current, rise_integrals
from ..model.topology import topology_of
from .checks import SAFETY_CAUTION
from .corners import tolerance_label
from . import latch_boost
from .boost import boost_cautions
from .boost import rise_time as boost_rise_time
from .datasheet import derived_values
from .envelope import supply_codes, table_index
from .figures import adc_code, worst
from .peak import requirement
from .regulation import table_supplies
from .result import BoostResult, Check, Verdict
from .supply import bus_at, model_of, rise_time, steady_current


@dataclass(frozen=True)
class PulseTable:
    """A supply-compensated pulse (``pull_in.compensate``; ``design --json``
    ``latch.pulses[].table``): scheduler ticks for each supply-sense ADC code (ascending),
    looked up like the peak's table (the last entry whose code is at or below the reading,
    the first below them all). ``design_supply_v``: where each entry is sized -- the lowest
    bus that can read its code (the divider at its tolerance end), the first entry at the
    lowest supply the pulses are designed from; ``supply_v`` the entries' nominal buses.

    Each entry's own worst corner (its design bus, the coil at its limit, the worst
    tolerance end): ``worst_time_s`` the time to the pulse's current there (the armature's
    seat with one), ``worst_corner`` that corner; ``force_time_s`` the longest time to
    ``current_margin`` x the current; ``end_current_a`` the least current the entry's
    shortest real pulse (one tick less) carries at the entry's corners."""

    supply_v: list[float]
    adc_codes: list[int]
    ticks: list[int]
    design_supply_v: list[float]
    worst_time_s: list[float] = dataclasses.field(default_factory=list)
    worst_corner: list[str] = dataclasses.field(default_factory=list)
    force_time_s: list[float] = dataclasses.field(default_factory=list)
    end_current_a: list[float] = dataclasses.field(default_factory=list)


@dataclass(frozen=True)
class PulseResult:
    """One pulse (``design --json`` ``latch.pulses[]``). Currents A, times s, energies J,
    voltages V; ``*_corner`` names where a figure comes from.

    ``ticks``: its length in scheduler ticks (``None`` when its current is never reached:
    ``not_reached`` says where and why); ``time_s`` the longest real pulse (``ticks`` /
    rate), ``shortest_s`` the shortest (one tick less). ``worst_time_s``: the worst time to
    ``current_a``; ``force_time_s`` to ``force_current_a`` (``current_margin`` x it);
    ``governed_by`` which of the two set the length. ``end_current_a``: the current at
    the end of the shortest pulse at the worst corner. Energies of one pulse at
    ``energy_corner``: ``supply_j`` (from the supply while on; with a clamp across the
    switch during the decay too, whose current the bus drives through the coil and the
    clamp), ``copper_j`` (the coil's
    copper, pulse and decay), ``switch_sense_j`` (the switches and the sense resistor),
    ``freewheel_j`` (the freewheel path: a bridge's two body diodes; from the boost three),
    ``returned_j`` (back to the bus: a bridge's fast decay; from the boost back into the
    boost capacitor; 0 otherwise), ``eddy_j`` (an eddy-current term's
    resistance, on, freewheeling and while the flux dies through it alone; 0 without one);
    ``supply_j`` is the sum of the other five. From the boost (``[supply] boost``,
    :mod:`coildrive.design.latch_boost`): ``supply_j`` is the boost's, ``boost_j`` the boost
    path's ``R_b`` (``supply_j`` the sum of copper, switch and sense, boost path,
    freewheel and eddy, and on a bridge ``returned_j``; with a clamp across the switch
    ``main_supply_j`` is what the main supply gives in the decay, ``V_main int i dt``, its
    current flowing from the main bus through the winding and the clamp: the sum is then
    ``supply_j + main_supply_j``), ``boost`` the pulse's threshold, time-out, droop, energy and recharge (the
    boosted peak's :class:`~coildrive.design.result.BoostResult`), ``ticks`` the time-out
    and ``shortest_s`` the fastest time to the threshold. ``stored_j``: the energy in the coil's field when the pulse ends (there), which
    its decay takes out again: ``int_0^I i dpsi`` on a flux-linkage curve (``I psi(I) -
    W'(I)``), ``1/2 L I^2`` for a linear coil (the magnetising branch's with an eddy
    term). ``decay_time_s``: after the pulse, the longest time to zero current.
    ``peak_switch_voltage_v``: the switch's highest voltage at the pulse's end (a bus
    pumped by a bridge's fast decay with ``supply.sink = false`` included).
    ``droop_v``: how far a pulse from the capacitor pulls the bus down (0 on a stiff bus;
    with a clamp across the switch its decay's draw too, and ``decay_time_s`` on that bus:
    :func:`clamp_decays_from_full`); ``recharge_time_s`` how long it then needs to be back
    within the recharge tolerance (with a clamp: from the pulse's end, its decay included)
    (the longest, at ``recharge_corner``; its supply is the source's). ``lowest_node_v``:
    a high-side switch's node at the pulse's end, below ground (``None`` for the others).

    With ``[armature]`` (module docstring): the set pulse's ``armature_j`` is the energy the
    moving armature takes (spring, load, damping and the seat impact; ``supply_j`` is then
    the sum of the others, ``eddy_j`` included), ``seat_time_s`` the latest time from switch-on to the
    armature at rest on the seat (at ``seat_corner``); the reset pulse's ``open_time_s`` the
    latest time from its start to the armature at rest on the open stop (the catch trips
    at ``current_a``, then spring and load open it). ``None`` / 0 without an armature.

    ``heat_j``: the most copper heat one pulse leaves in the coil over every corner (pulse
    and decay) -- what the coil-temperature interval and the on/off cycle take; ``copper_j``
    is the energy corner's, which with a supply-compensated table (a longer pulse at a
    lower bus) or a moving armature need not be the most.
    ``decay_charge_c``: from the boost with a clamp across the switch, the most charge (C,
    ``int i dt``) a decay draws from the main supply over the corners (0 otherwise).
    """

    name: str
    winding: str
    switches: str
    current_a: float
    margin: float
    current_margin: float
    settle_time_s: float
    ticks: int | None
    time_s: float
    shortest_s: float
    worst_time_s: float
    worst_corner: str
    force_current_a: float
    force_time_s: float
    governed_by: str
    end_current_a: float
    not_reached: str | None
    supply_j: float
    copper_j: float
    switch_sense_j: float
    freewheel_j: float
    returned_j: float
    energy_corner: str
    decay_time_s: float
    peak_switch_voltage_v: float
    switch_voltage_corner: str
    droop_v: float
    recharge_time_s: float
    recharge_corner: str
    lowest_node_v: float | None = None
    stored_j: float = 0.0
    table: PulseTable | None = None
    armature_j: float = 0.0
    seat_time_s: float | None = None
    seat_corner: str = ""
    open_time_s: float | None = None
    eddy_j: float = 0.0
    boost_j: float = 0.0
    boost: BoostResult | None = None
    main_supply_j: float = 0.0
    heat_j: float = 0.0
    decay_charge_c: float = 0.0


@dataclass(frozen=True)
class LatchCycle:
    """An on/off cycle of a latching coil (``[duty]``, ``design --json`` ``latch.cycle``): a
    set pulse every ``period_s`` (``actuation_rate_hz``), the reset pulse ``on_time_s``
    after it, the next set ``off_time_s`` after that. ``set_rise_k``/``reset_rise_k``: the
    coil's rise above ``ambient.max`` just after each in the periodic steady state of the
    pulses' copper heat (both windings one thermal body, as the interval's), and
    ``hottest_coil_c`` the larger + ``ambient.max``."""

    on_time_s: float
    off_time_s: float
    period_s: float
    actuation_rate_hz: float
    set_rise_k: float
    reset_rise_k: float
    hottest_coil_c: float


@dataclass(frozen=True)
class LatchResult:
    """The latching coil's design (``design --json`` key ``latch``). ``interval_s``: the
    shortest safe time from the start of one pulse to the start of the next (either
    pulse), ``interval_ticks`` in scheduler ticks, ``governed_by`` what sets it; its parts:
    ``decay_interval_s`` (the pulse and its decay to zero), ``thermal_interval_s`` (the
    coil's temperature; 0 without self-heating) and ``recharge_interval_s`` (the
    capacitor; 0 on a stiff bus) and ``armature_interval_s`` (a reset pulse's start to the
    armature at rest on the open stop; 0 without ``[armature]``) and ``boost_interval_s``
    (the longest pulse from the boost + its recharge; 0 without a boost). ``pulse_heat_j``: the copper heat per pulse the
    thermal interval is for (the larger pulse's), ``coil_rise_per_pulse_k`` = that / the
    heat capacity, ``hottest_coil_c`` the coil just after a pulse when pulsing at the
    interval (from ``ambient.max``), ``coil_limit_c`` the limit."""

    topology: str
    pulses: list[PulseResult]
    interval_s: float
    interval_ticks: int | None
    governed_by: str
    decay_interval_s: float
    thermal_interval_s: float
    recharge_interval_s: float
    pulse_heat_j: float
    coil_rise_per_pulse_k: float
    hottest_coil_c: float
    coil_limit_c: float
    recharge_tolerance: float
    tick_rate_hz: float
    armature_interval_s: float = 0.0
    cycle: LatchCycle | None = None
    #: the pulses from the boost: the longest pulse + the boost's recharge of the larger
    #: pulse's energy at ``boost_power`` (0 without a boost, or without a power)
    boost_interval_s: float = 0.0
    #: what the set coil's datasheet keys gave (:func:`coildrive.design.datasheet.derived_values`)
    derived: list = dataclasses.field(default_factory=list)
    #: pulses from the boost on a drooping main supply: the main bus under the boost
    #: converter's recharges (:class:`coildrive.design.latch_boost.MainBus`; else ``None``)
    main_bus: latch_boost.MainBus | None = None


@dataclass(frozen=True)
class LatchDesign(Verdict):
    """A latching coil's design: every output (table, JSON, header, simulate) reads it."""

    drive: Drive
    latch: LatchResult
    checks: list[Check]
    cautions: list[str]
    version: str = __version__
    input_hash: str = ""
    #: ``design --samples N``: :func:`coildrive.design.latch_montecarlo.with_monte_carlo`
    monte_carlo: dict | None = None

    def to_dict(self) -> dict:
        """The ``design --json`` document of a latching coil."""
        extra = {} if self.monte_carlo is None else {"monte_carlo": self.monte_carlo}
        return json_ready({**document_head(self.drive, self.version, self.input_hash), "ok": self.ok,
                           "latch": asdict(self.latch), "checks": [asdict(c) for c in self.checks],
                           "cautions": list(self.cautions), **extra})


@dataclass(frozen=True)
class Points:
    """The pulse corners: supply x coil temperature x resistance x inductance factors."""

    supply: np.ndarray
    temp: np.ndarray
    r_factor: np.ndarray
    l_factor: np.ndarray
    sense_factor: np.ndarray | float = 1.0

    def label(self, k: int) -> str:
        sense = np.broadcast_to(self.sense_factor, self.supply.shape)[k]
        return (f"{self.supply[k]:.4g} V, coil {self.temp[k]:g} degC, "
                f"{tolerance_label('R', self.r_factor[k])}, {tolerance_label('L', self.l_factor[k])}"
                + ("" if sense == 1.0 else f", {tolerance_label('R_sense', sense)}"))


def _points(drive: Drive, coil, scale: float) -> Points:
    """Every corner of the pulses: the supply's ends (the lower one times ``scale``), the
    coil cold (``ambient.min``) and at its limit, and both ends of each tolerance (the
    coil's resistance and inductance, the sense resistor's)."""
    grid = list(itertools.product((drive.supply.min * scale, drive.supply.max),
                                  (drive.ambient.min, drive.thermal.max_coil_temp), *_tolerances(drive, coil)))
    return Points(*(np.array(a, float) for a in zip(*grid)))


def _tolerances(drive: Drive, coil) -> tuple[list, list, list]:
    """Both ends of the coil's resistance and inductance tolerances and the sense
    resistor's (factors)."""
    rt, lt = coil.resistance_tolerance, coil.inductance_tolerance
    st = drive.board.sense.resistance_tolerance
    return sorted({1 - rt, 1 + rt}), sorted({1 - lt, 1 + lt}), sorted({1 - st, 1 + st})


def winding_drive(drive: Drive, reset: bool) -> Drive:
    """The drive as the model sees one winding: the set coil, or the reset winding in its
    place (the same coil on a bridge)."""
    if reset and drive.latch.reset_coil is not None:
        # the reset winding trips the catch on its own magnet: the armature is not its load
        return dataclasses.replace(drive, coil=drive.latch.reset_coil, armature=None)
    return drive


def _pulse(drive: Drive, reset: bool, fixed: int | None = None) -> tuple[PulseResult, list[Check]]:
    """Size one pulse and give its figures (module docstring). ``fixed``: run the pulse
    ``fixed`` ticks instead of the sized length (a timed pulse without a supply table; the
    offline tuning's steps, :mod:`coildrive.tune.latch`); its ``_pulse`` check then says
    whether that length keeps the pulse's margins."""
    lt = drive.latch
    wd = winding_drive(drive, reset)
    coil = wd.coil
    if reset:
        name, current, margin, cm, settle = "reset", lt.reset_current, lt.reset_margin, \
            lt.reset_current_margin, lt.reset_settle_time
    else:
        p = drive.pull_in
        name, current, margin, cm, settle = "set", p.current, p.margin, p.current_margin, p.settle_time
    bridge = full_bridge(drive)
    winding = "coil" if bridge or not reset else "reset_coil"
    switches = (("Q3 + Q2 (the other polarity)" if reset else "Q1 + Q4") if bridge else
                ("the reset winding's switch" if reset else "the set winding's switch"))
    droops = drive.supply.droops
    # (pulses from the boost do not draw on the main bus: they start from its source's range)
    scale = 1.0 - lt.recharge_tolerance if droops and not drive.supply.boosted else 1.0
    pts = _points(drive, coil, scale)
    if drive.supply.boosted:
        return _boosted(drive, wd, pts, name, winding, switches, current, margin, cm)
    lp, t_req, t_force, pin, p_arm = _requirements(wd, pts, current, cm)
    ticks, by_time, by_force = requirement(drive, t_req, t_force, margin, settle)
    if pin is not None and ticks is not None:   # the force margin on the moving run's current
        ticks = by_force = int(seated_force_ticks(drive, wd, lp, pts, pin, p_arm, cm * current, settle,
                                                  np.array([ticks]), np.zeros(pts.supply.shape, int))[0]) or None
    rate = drive.board.tick.rate
    k_req = worst(t_req)
    checks = []
    not_reached = None
    if ticks is None or by_force is None:
        i_inf = steady_current(wd, lp)
        k = int(np.argmin(i_inf))
        need = current if ticks is None else cm * current
        not_reached = (f"not reached: steady current {float(i_inf[k]):.4g} A < {need:.4g} A at "
                       f"{pts.label(k)}")
        if pin is not None and ticks is None and float(i_inf[k]) > current:
            not_reached = (f"not reached: the armature does not seat at {pts.label(k_req)} (see the "
                           "set_armature_seats check)")
        ticks = None
    governed = "" if ticks is None else ("force margin" if (by_force or 0) > (by_time or 0) else "time margin")
    sized = ticks
    if fixed is not None and ticks is not None:
        ticks, governed = fixed, "a set length"
    table = None
    if ticks is not None and drive.pull_in.compensate:
        table, v_first = _table(drive, wd, coil, scale, current, cm, margin, settle)
        if table is None:   # the first entry's bus is a few mV under the lowest supply
            ticks, governed = None, ""
            not_reached = (f"not reached at {v_first:.4g} V, the lowest bus that reads the supply table's "
                           "first code (the divider at its tolerance end)")
        else:
            ticks = max(table.ticks)
    t_long = ticks / rate if ticks else 0.0
    t_short = (ticks - 1) / rate if ticks else 0.0
    # each point's shortest and longest real pulse: the entries its readings select
    short, long_ = (t_short, t_long) if table is None else table_lengths(drive, table, pts.supply)
    # energies of the longest pulse on a stiff bus (module docstring)
    v, r_on, ind = lp.v_on, lp.r_on, lp.inductance
    # the end current on the bus the pulse runs from, the energies on the stiff bus
    i_end = end_current(wd, lp, pts, pin if ticks else None, p_arm, short)
    if pin is not None and ticks:   # the pulse outlasts every seat time (margin >= 1)
        stiff = stiff_run(wd, lp, pts, pin, p_arm)
        i_top, q_on, s_on = after_seat(*stiff, long_, v, r_on)
    else:
        i_top, q_on, s_on = plain_pulse(lp, long_)
    rel = release_loop(wd, pts)
    t_zero = decay_time(0.0, i_top, rel.r_off, rel.v_off, ind)
    q_d, s_d = decay_integrals(t_zero, i_top, rel.r_off, rel.v_off, ind)
    fast = bus_decays(wd, lp, rel, i_top)   # a bridge's fast decay into the drooping bus
    sense = drive.board.sense
    n_sw = 2.0 if bridge else 1.0
    sense_decay = bridge or sense.position == "coil"
    # a clamp across the switch: the decay's current flows from the bus through the coil and
    # the clamp (L di/dt = -(R_off i + V_clamp - V)), so the bus gives V int i dt then too
    supply_e = v * q_on + (v * q_d if drive.freewheel.type == "clamp" else 0.0 * q_d)
    copper = lp.r_coil * (s_on + s_d)
    r_sense = sense.resistance * pts.sense_factor
    sw_sense = n_sw * drive.switch.on_resistance * s_on + r_sense * (s_on + (s_d if sense_decay else 0.0))
    fw = freewheel_element_energy(wd, rel, q_d, s_d)
    returned = v * q_d if bridge else 0.0 * q_d
    stored = stored_energy(ind.magnetising if isinstance(ind, EddyCoil) else ind, i_top)
    # an eddy term's share. Without an armature by the balance (the pulse starts and ends at
    # zero flux: what the supply gave that the loop's elements did not take went into R_e);
    # with one, the seat run's and the seated coil's on-time share (on_eddy_energy) and the
    # release's (the conduction, then the flux's tail through R_e)
    if isinstance(ind, EddyCoil) and pin is not None and ticks:
        eddy_e = (on_eddy_energy(*stiff, long_, v, r_on)
                  + release_eddy_energy(i_top, rel.r_off, rel.v_off, ind))
    elif isinstance(ind, EddyCoil) and pin is None:
        eddy_e = supply_e - copper - sw_sense - fw - returned
    else:
        eddy_e = 0.0 * supply_e
    # the armature's share: what the supply gave that no element took (zero current at both ends)
    moved = (supply_e - copper - sw_sense - fw - returned - eddy_e if pin is not None and ticks
             else 0.0 * supply_e)
    k_e = worst(supply_e)
    # the switch voltage at the end of the longest pulse, and a pumped bus
    v_sw = rel.switch_voltage(wd, i_top)
    if fast is not None:   # the bus rises above the source while the current returns into it
        bus_top = np.max([f.bus_max for f in fast], axis=0)
        v_sw = np.maximum(v_sw, fast_switch_voltage(bus_top, rel.diode(wd), r_sense, sense.position == "coil",
                                                    i_top))
    topo = topology_of(drive)
    node = (float(np.min(topo.node_voltage(pts.supply, v_sw, 0.0 * v_sw))) if topo.shows_node else None)
    k_v = worst(v_sw)
    v_sw_top = float(v_sw[k_v])
    if fast is not None:
        checks.append(_bus_check(drive, name, bus_top, pts))
    elif bridge and not drive.supply.sink:
        pu = pump_up(i_top, v, drive.supply.capacitance, rel.r_off, ind, rel.diode(wd))
        k_p = worst(pu.v2)
        drop = 0.0 if sense.position == "coil" else float(np.max(r_sense * i_top))
        pumped = float(pu.v2[k_p]) + float(np.max(rel.diode(wd))) + drop
        if pumped > v_sw_top:
            v_sw_top, k_v = pumped, k_p
        checks.append(Check(f"{name}_pump_up", pumped <= drive.switch.max_voltage * drive.switch.derating,
                            f"the fast decay after the {name} pulse pumps the bus to {float(pu.v2[k_p]):.4g} V "
                            f"({pts.label(k_p)}) on {drive.supply.capacitance * 1e6:.4g} uF"))
    # the capacitor: droop of the longest pulse from a full capacitor, and its recharge
    droop = recharge = 0.0
    recharge_corner = ""
    t_zero_bus = None
    if droops:
        s = drive.supply
        full = loop(wd, np.where(pts.supply < drive.supply.max, drive.supply.min, pts.supply), pts.temp,
                    pts.r_factor, pts.l_factor, sense_factor=pts.sense_factor)
        if pin is None:
            b = bus_at(wd, full, full.inductance)   # a curve's: model.flux_bus
            low, _ = model_of(b).lowest_bus(np.full(full.v_on.shape, t_long), b)
        else:   # the armature's run carries the capacitor (its lowest over the pulse)
            run = seat_run(wd, full, Points(full.v_on, pts.temp, pts.r_factor, pts.l_factor, pts.sense_factor),
                           peak_time=np.full(full.v_on.shape, t_long))[0]
            low = run.lowest_bus
        after = 0.0
        if drive.freewheel.type == "clamp":   # the clamped decay draws on the capacitor
            # (with an armature from its run's end: the catch holds it seated, the seated coil decays)
            clamped = clamp_decays_from_full(wd, full, rel, t_long,
                                             None if pin is None else (run.peak_end_current, run.peak_end_bus))
            low, after = np.minimum(low, clamped.bus_max), clamped.zero_time
            t_zero_bus = clamped.zero_time
            dv_end = full.v_on - clamped.bus_at_zero
        else:
            dv_end = full.v_on - low
        dv = full.v_on - low
        t_rc = after + latch_model.recharge_time(dv_end, full.v_on, lt.recharge_tolerance, s.source_resistance,
                                                 s.capacitance)
        k_r = worst(t_rc)
        droop, recharge = float(np.max(dv)), float(t_rc[k_r])
        recharge_corner = Points(full.v_on, pts.temp, pts.r_factor, pts.l_factor, pts.sense_factor).label(k_r)
    result = PulseResult(
        name=name, winding=winding, switches=switches, current_a=current, margin=margin,
        current_margin=cm, settle_time_s=settle, ticks=ticks, time_s=t_long, shortest_s=t_short,
        worst_time_s=float(t_req[k_req]), worst_corner=pts.label(k_req), force_current_a=cm * current,
        force_time_s=float(np.max(t_force)), governed_by=governed,
        end_current_a=float(np.min(i_end)) if ticks else 0.0, not_reached=not_reached,
        supply_j=float(supply_e[k_e]), copper_j=float(copper[k_e]), heat_j=float(np.max(copper)),
        switch_sense_j=float(sw_sense[k_e]),
        stored_j=float(np.broadcast_to(stored, supply_e.shape)[k_e]), table=table,
        freewheel_j=float(fw[k_e]), returned_j=float(returned[k_e]), energy_corner=pts.label(k_e),
        decay_time_s=float(np.max(time_to_zero(wd, lp, rel, i_top, fast) if t_zero_bus is None else t_zero_bus)),
        peak_switch_voltage_v=v_sw_top,
        switch_voltage_corner=pts.label(k_v), droop_v=droop, recharge_time_s=recharge,
        recharge_corner=recharge_corner, lowest_node_v=node, armature_j=float(moved[k_e]),
        eddy_j=float(eddy_e[k_e]),
        seat_time_s=None if pin is None else float(t_req[k_req]),
        seat_corner="" if pin is None else pts.label(k_req))
    limit = drive.switch.max_voltage * drive.switch.derating
    if pin is not None:
        checks.append(_seats_check(drive, pin, p_arm, pts, result, short))
    elif reset and drive.armature is not None:
        result, check = _opens(drive, pts, t_req, result)
        checks.append(check)
    if table is None and fixed is not None and ticks is not None:
        ok = ticks >= sized
        detail = (f"{name} pulse {ticks} ticks ({t_long * 1e3:.4g} ms, {governed}) vs the {sized} its margins "
                  f"need: the shortest ({t_short * 1e3:.4g} ms) carries {result.end_current_a:.4g} A at the "
                  "worst corner")
    elif table is None:
        ok = ticks is not None and result.end_current_a >= cm * current * (1 - 1e-9)
        detail = (f"{name} pulse {ticks} ticks ({t_long * 1e3:.4g} ms, {governed}): the shortest "
                  f"({t_short * 1e3:.4g} ms) carries {result.end_current_a:.4g} A >= "
                  f"{cm:g} x {current:.4g} A at the worst corner")
    else:   # the entries' lengths at every corner (the readings it may take there)
        ok = result.end_current_a >= cm * current * (1 - 1e-9)
        detail = (f"{name} pulse {min(table.ticks)}..{ticks} ticks against the supply reading "
                  f"({len(table.ticks)} entries, at most {t_long * 1e3:.4g} ms, {governed}): the shortest "
                  f"real pulse of the entry each corner may read carries {result.end_current_a:.4g} A >= "
                  f"{cm:g} x {current:.4g} A at every corner")
    checks.insert(0, Check(f"{name}_pulse", ok, detail if ticks else f"the {name} pulse's current is {not_reached}"))
    checks.append(Check(f"{name}_switch_voltage", v_sw_top <= limit,
                        f"the switches see up to {v_sw_top:.4g} V at the end of the {name} pulse "
                        f"({result.switch_voltage_corner}) vs {limit:.4g} V ({drive.switch.derating:.0%} "
                        f"of the {drive.switch.max_voltage:.4g} V rating)"))
    return result, checks


def bus_decays(drive: Drive, lp, rel, i0) -> list | None:
    """A full bridge's fast decay of ``i0`` A after a pulse on the drooping bus (else
    ``None``): the current returns through two body diodes into the bus behind ``R_s`` and
    ``C`` (:func:`coildrive.model.flux_bus_decay.fast_decays`: a linear coil's closed form
    of :mod:`coildrive.model.bus_decay`, with an eddy term ``eddy_decay``, a flux-linkage
    curve's stepped run, either way; a supply that cannot sink: the ``*_no_sink`` forms;
    with an eddy term ``i0`` is the magnetising current), from each of
    :data:`~coildrive.model.bus_decay.STARTS` starting buses
    evenly between the source ``V_s`` (``lp.v_on``) and the lowest the bus can be at the
    pulse's end: a pulse starts from at least ``(1 - recharge_tolerance) V_s`` (the interval
    waits for that) and, its current rising to ``i0``, cannot pull the bus below the floor
    ``V_s - R_s i0`` under it (:func:`~coildrive.model.supply.bus_floor`; with an eddy term
    the terminal current ``(V_s + R_e i0)/(R + R_e)`` in place of ``i0``), nor below ``-2
    V_d`` (the body diodes). :class:`~coildrive.model.bus_decay.FastDecay` per start."""
    from ..model.supply import bus_floor

    s = drive.supply
    if not (s.droops and full_bridge(drive)):
        return None
    v_s = np.asarray(lp.v_on, float)
    v_d = np.asarray(rel.diode(drive), float)
    ind = rel.inductance
    # the bus under the pulse's end: the terminal current draws it (with an eddy term above
    # the magnetising i0 while the flux still rises: its value at the source, the most)
    draw = eddy_terminal(i0, v_s, lp.r_on, ind.resistance) if isinstance(ind, EddyCoil) else i0
    lo = np.maximum(np.minimum((1.0 - drive.latch.recharge_tolerance) * v_s, bus_floor(v_s, s.source_resistance, draw)),
                    -2.0 * v_d)
    starts = [lo + (v_s - lo) * k / (bus_decay.STARTS - 1) for k in range(bus_decay.STARTS)]
    return fast_decays(ind, i0, starts, 0.0, v_s, s.source_resistance, s.capacitance, rel.r_off, v_d, s.sink)


def time_to_zero(drive: Drive, lp, rel, i0, fast=None):
    """The longest time (s) from a pulse's end at ``i0`` A to zero current at the points: a
    bridge's fast decay into the drooping bus over its starting buses (:func:`bus_decays`,
    or ``fast`` when already run), else the decay of the release path ``rel``."""
    fast = bus_decays(drive, lp, rel, i0) if fast is None else fast
    if fast is None:
        return decay_time(0.0, i0, rel.r_off, rel.v_off, rel.inductance)
    return np.max([f.zero_time for f in fast], axis=0)


def clamp_decays_from_full(drive: Drive, full, rel, t_pulse: float, end=None):
    """A clamp across the switch on the drooping bus: the decay after a pulse of
    ``t_pulse`` s from a full capacitor (the loop ``full``: the source at each point; a
    linear coil, a flux-linkage curve or an eddy term), the current flowing on from the bus
    through the coil into the clamp (:func:`coildrive.model.flux_bus_decay.clamp_decay`,
    from the pulse's end state on the drooping bus, :func:`~coildrive.design.supply.bus_at`:
    with an eddy term the magnetising current; ``rel`` the release loop at the same points:
    its resistance, and ``V_clamp`` = ``v_off + supply``). ``end``: that state given
    ``(A, V)`` -- a moving armature's seat run's at the pulse's end
    (:attr:`~coildrive.model.armature_runs.PullInBatch.peak_end_bus`), the seated coil
    decaying from it (the catch holds the armature)."""
    s = drive.supply
    if end is None:
        b = bus_at(drive, full, full.inductance)
        i_e, v_e = model_of(b).state(np.full(np.shape(full.v_on), t_pulse), b)
    else:
        i_e, v_e = end
    return clamp_decay(full.inductance, i_e, v_e, full.v_on, s.source_resistance, s.capacitance, rel.r_off,
                       rel.v_off + rel.supply)


def _bus_check(drive: Drive, name: str, bus_top, pts: Points) -> Check:
    """``{name}_bus``: the highest bus after pulse ``name``'s fast decay on the drooping bus
    against the bulk capacitor's rating (``supply.capacitor_voltage``; a warning without
    one). The switches' own check takes the same bus."""
    k = worst(bus_top)
    rating = drive.supply.capacitor_voltage
    where = (f"the fast decay after the {name} pulse lifts the bus to {float(bus_top[k]):.4g} V "
             f"({pts.label(k)}) on {drive.supply.capacitance * 1e6:.4g} uF behind "
             f"{drive.supply.source_resistance:.4g} ohm" + ("" if drive.supply.sink else
                                                             " (the feed blocks: the supply cannot sink)"))
    if not rating > 0:
        return Check(f"{name}_bus", False, f"{where}; the drive gives no supply.capacitor_voltage to check it "
                     "against", severity="warning")
    ok = float(bus_top[k]) <= rating
    return Check(f"{name}_bus", ok, f"{where} vs the bulk capacitor's {rating:.4g} V rating"
                 + ("" if ok else " -- a higher-rated or larger capacitor, a lower source resistance"))


def _boosted(drive: Drive, wd: Drive, pts: Points, name: str, winding: str, switches: str, current: float,
             margin: float, cm: float) -> tuple[PulseResult, list[Check]]:
    """A pulse from the boost through the winding ``wd`` (of ``drive``), ending at its
    threshold (:mod:`coildrive.design.latch_boost`): ``ticks`` is its time-out,
    ``shortest_s`` the fastest time to the threshold, ``end_current_a`` the threshold (the
    least any pulse ends at), the energies from the boost, and the switch voltage from the
    boost at full charge. With a moving armature the set pulse's ``worst_time_s`` is its
    latest seat (:func:`coildrive.design.latch_boost.armature_pulse`), and the reset
    pulse's catch trips at its current (:func:`_opens`)."""
    lp, rel = pulse_loop(wd, pts), release_loop(wd, pts)
    arm = (latch_boost.armature_pulse(wd, lp, pts.l_factor, pts.label, latch_boost.pulse_threshold(wd, current, cm))
           if wd.armature is not None else None)   # the set pulse seats the armature
    b = latch_boost.pulse_figures(wd, lp, rel, pts.supply, pts.label, current, cm, margin,
                                  None if arm is None else arm.runs)
    e = latch_boost.energies(wd, lp, rel, pts.sense_factor, b, None if arm is None else arm.ends)
    if full_bridge(wd):   # the release back into the boost capacitor
        b = latch_boost.bridge_figures(wd, b, e)
    t_req = boost_rise_time(wd, lp, current, lp.inductance) if arm is None else arm.seat_time
    k_req = worst(t_req)
    seat_at = None if arm is None else pts.label(k_req) + (", the boost at its highest" if arm.seat_high[k_req]
                                                           else ", the boost at its lowest")
    force_coil = lp.inductance if arm is None else open_inductance(wd, pts.l_factor)
    reached = b.time_to_threshold_s is not None
    not_reached = None if reached else (
        f"not reached: the boost at its lowest drives at most {b.reachable_current_a:.4g} A < "
        f"{b.threshold_a:.4g} A at {b.time_to_threshold_corner}")
    topo = topology_of(wd)
    v_main = rel.switch_voltage(wd, np.full(np.shape(pts.supply), e["end_current_a"]))
    node = float(np.min(topo.node_voltage(pts.supply, v_main, 0.0 * v_main))) if topo.shows_node else None
    result = PulseResult(
        name=name, winding=winding, switches=switches + " and the boost switch", current_a=current,
        margin=margin, current_margin=cm, settle_time_s=0.0, ticks=b.timeout_ticks,
        time_s=b.timeout_s or 0.0, shortest_s=b.fastest_time_s if reached else 0.0,
        worst_time_s=float(t_req[k_req]), worst_corner=pts.label(k_req), force_current_a=cm * current,
        force_time_s=float(np.max(boost_rise_time(wd, lp, cm * current, force_coil))),
        governed_by="current threshold" if reached else "", end_current_a=b.threshold_a if reached else 0.0,
        not_reached=not_reached, supply_j=e["supply_j"], copper_j=e["copper_j"], heat_j=e["heat_j"],
        switch_sense_j=e["switch_sense_j"], freewheel_j=e["freewheel_j"], returned_j=e["returned_j"],
        boost_j=e["boost_j"], eddy_j=e["eddy_j"], main_supply_j=e["main_supply_j"],
        decay_charge_c=e["decay_charge_c"],
        stored_j=e["stored_j"], energy_corner=pts.label(e["k"]) + (", the boost at its highest" if e["high"]
                                                                   else ", the boost at its lowest"),
        decay_time_s=e["decay_time_s"], peak_switch_voltage_v=b.switch_voltage_v,
        switch_voltage_corner=b.switch_voltage_corner + ", from the boost at full charge", droop_v=0.0,
        recharge_time_s=0.0, recharge_corner="", lowest_node_v=node, boost=b, armature_j=e["armature_j"],
        seat_time_s=None if arm is None else float(t_req[k_req]), seat_corner=seat_at or "")
    limit = wd.switch.max_voltage * wd.switch.derating
    out = latch_boost.checks(name, b, wd)
    if arm is not None:
        out.append(latch_boost.seats_check(arm, result, pts.label))
    elif name == "reset" and drive.armature is not None:   # the catch trips: spring and load open it
        result, check = _opens(drive, pts, t_req, result)
        out.append(check)
    out.append(Check(f"{name}_switch_voltage", b.switch_voltage_v <= limit,
                     f"turning off up to {b.end_current_max_a:.4g} A from the boost at full charge, the "
                     f"switch sees up to {b.switch_voltage_v:.4g} V at the end of the {name} pulse "
                     f"({b.switch_voltage_corner}) vs {limit:.4g} V ({wd.switch.derating:.0%} of the "
                     f"{wd.switch.max_voltage:.4g} V rating)"))
    return result, out


def _requirements(wd: Drive, pts: Points, current: float, cm: float):
    """``(loop, time to current s, time to cm x current s, seat run, its params)`` at the
    points; with a moving armature the time to current is its seat time (module docstring)."""
    lp = pulse_loop(wd, pts)
    if wd.armature is None:
        return (lp, rise_time(wd, lp, current, lp.inductance), rise_time(wd, lp, cm * current, lp.inductance),
                None, None)
    pin, p_arm = seat_run(wd, lp, pts)   # the set pulse seats the armature
    return (lp, np.where(pin.status == 0, pin.seat_time, np.inf),
            rise_time(wd, lp, cm * current, open_inductance(wd, pts.l_factor)), pin, p_arm)


def _table(drive: Drive, wd: Drive, coil, scale: float, current: float, cm: float, margin: float,
           settle: float) -> tuple[PulseTable | None, float]:
    """The supply-compensated pulse (:class:`PulseTable`) and the first entry's bus (V):
    each entry sized as the pulse is, at the lowest bus that can read its code (the first
    at the lowest the pulses are designed from, or lower), the coil at its limit, every
    tolerance corner. ``None`` when the first entry's current is never reached there."""
    volts, codes, design_v = table_supplies(drive)
    design_v = np.array(design_v, float)
    design_v[0] = min(design_v[0], drive.supply.min * scale)
    grid = list(itertools.product(design_v, (drive.thermal.max_coil_temp,), *_tolerances(drive, coil)))
    pts = Points(*(np.array(a, float) for a in zip(*grid)))
    lp, t_req, t_force, pin, p_arm = _requirements(wd, pts, current, cm)
    m = len(codes)
    t_req, t_force = t_req.reshape(m, -1), t_force.reshape(m, -1)
    ticks = [requirement(drive, t_req[e], t_force[e], margin, settle)[0] for e in range(m)]
    if ticks[0] is None:
        return None, float(design_v[0])
    # a higher entry never needs more than a lower one (the rise only quickens with the bus);
    # an entry whose current is never reached (none, above the lowest's) keeps the lowest's
    ticks = [t if t is not None else ticks[0] for t in ticks]
    n = t_req.shape[1]
    if pin is not None:   # each entry's force margin on the moving run's current
        ticks = [int(t) for t in seated_force_ticks(drive, wd, lp, pts, pin, p_arm, cm * current, settle,
                                                    np.array(ticks), np.repeat(np.arange(m), n))]
        if not ticks[0]:
            return None, float(design_v[0])
        ticks = [t or ticks[0] for t in ticks]
    # each entry's margins at its own corners: its shortest real pulse (one tick less)
    short = np.repeat((np.array(ticks, float) - 1.0) / drive.board.tick.rate, n)
    i_end = end_current(wd, lp, pts, pin, p_arm, short).reshape(m, -1)
    k = [worst(t_req[e]) for e in range(m)]
    return PulseTable([float(v) for v in volts], [int(c) for c in codes], [int(t) for t in ticks],
                      [float(v) for v in design_v], worst_time_s=[float(t_req[e, k[e]]) for e in range(m)],
                      worst_corner=[pts.label(e * n + k[e]) for e in range(m)],
                      force_time_s=[float(np.max(t_force[e])) for e in range(m)],
                      end_current_a=[float(np.min(i_end[e])) for e in range(m)]), float(design_v[0])


def table_lengths(drive: Drive, table: PulseTable, supply) -> tuple[np.ndarray, np.ndarray]:
    """``(shortest, longest)`` real pulse (s) at bus voltages ``supply``: the entries its
    lowest and highest readings select (:func:`coildrive.design.envelope.supply_codes`; the
    shortest one tick less)."""
    rate = drive.board.tick.rate
    low, high = supply_codes(drive, supply)
    ent = np.asarray(table.ticks, float)
    return (ent[table_index(table.adc_codes, high)] - 1) / rate, ent[table_index(table.adc_codes, low)] / rate


def firmware_pulse(d: LatchDesign, name: str, supply: float, coil_temp: float | None = None,
                   r_factor: float = 1.0, l_factor: float = 1.0) -> float:
    """The length (s) of pulse ``name`` the firmware runs at bus voltage ``supply`` (its
    reading at the nominal divider, looked up as the header's function does; without a
    table the fixed pulse). A pulse from the boost ends at its threshold, so its length
    depends on the coil too: at ``coil_temp`` degC (needed then) and the factors
    (:func:`coildrive.design.latch_boost.firmware_time`)."""
    p = next(x for x in d.latch.pulses if x.name == name)
    if p.boost is not None:
        if coil_temp is None:
            raise ValueError("a pulse from the boost needs the coil's temperature for its length")
        return latch_boost.firmware_time(winding_drive(d.drive, name == "reset"), p.boost, supply, coil_temp,
                                         r_factor, l_factor)
    if p.table is None:
        return p.time_s
    b = d.drive.board
    code = adc_code(supply / b.supply_sense.divider, b.adc.reference, b.adc.bits)
    return p.table.ticks[int(table_index(p.table.adc_codes, code))] / b.tick.rate


def plain_pulse(lp, t):
    """A pulse of ``t`` s from zero current on a stiff bus at the points of ``lp`` (the RL
    rise; a flux-linkage curve's by :func:`coildrive.model.flux.rise_integrals`, which keeps
    a pulse long past its rise exact): its current at the end A, ``int i dt`` A*s and
    ``int i^2 dt`` A^2*s."""
    if isinstance(lp.inductance, FluxCoil):
        return flux_rise_integrals(lp.inductance, t, 0.0, lp.v_on, lp.r_on)
    q, sq = rise_integrals(t, 0.0, lp.v_on, lp.r_on, lp.inductance)
    return rise_current(t, 0.0, lp.v_on, lp.r_on, lp.inductance), q, sq


def pulse_loop(drive: Drive, pts: Points):
    """The winding's loop with its switch(es) on at the points."""
    return loop(drive, pts.supply, pts.temp, pts.r_factor, pts.l_factor, sense_factor=pts.sense_factor)


def release_loop(drive: Drive, pts: Points):
    """The winding's decay path after a pulse at the points."""
    return loop(drive, pts.supply, pts.temp, pts.r_factor, pts.l_factor, path="release",
                sense_factor=pts.sense_factor)


def seat_run(drive: Drive, lp, pts: Points, peak_time=None, stiff: bool = False):
    """The set pulse held on from rest at the open stop until the armature rests on the seat,
    at the points (:func:`coildrive.model.armature_runs.pull_in`; ``peak_time`` s asks for
    the current then), and its params. With an eddy term (``coil.eddy_resistance``) the
    flux is the magnetising branch's behind the loop's Thevenin pair (the run's currents
    the magnetising current's, its integrals the terminal current's). On a drooping bus (``supply.source_resistance``,
    unless ``stiff``) the bulk capacitor is a state of the run, full (at the source's
    voltage, ``lp.v_on``) at switch-on: the seat time, the current at ``peak_time`` and
    the lowest bus up to it are the drooping bus's."""
    from ..model.armature import params_from_loop
    from ..model.armature_runs import pull_in

    s = drive.supply
    bus = (s.source_resistance, s.capacitance) if s.droops and not stiff else (0.0, 0.0)
    p = params_from_loop(drive.armature, lp, pts.l_factor, drive.coil.eddy_resistance, bus=bus)
    return pull_in(p, peak_time=peak_time), p


def seated_pulse(drive: Drive, lp, pts: Points, pin, p, t):
    """:func:`after_seat` of a pulse ``t`` s long on the stiff bus at ``lp.v_on`` (the
    energies' bus: a drooping one gives less), from the seat run ``pin`` (params ``p``) when
    that is on the stiff bus already, else from a stiff run of its own."""
    return after_seat(*stiff_run(drive, lp, pts, pin, p), t, lp.v_on, lp.r_on)


def stiff_run(drive: Drive, lp, pts: Points, pin, p):
    """The seat run and its params on the stiff bus at ``lp.v_on``: ``(pin, p)`` as given
    when the bus is stiff already, else a stiff run of its own."""
    return seat_run(drive, lp, pts, stiff=True) if drive.supply.droops else (pin, p)


def after_seat(pin, p, t, v, r_on):
    """Current A, ``int i dt`` A*s and ``int i^2 dt`` A^2*s ``t`` s after switch-on, ``t``
    past every seat time: the run up to the seat, then the seated coil's rise (the RL
    segment, or the seated curve's exact quadrature: ``p.coil_closed``). With an eddy term
    the current is the magnetising current, the integrals the terminal current's
    (:mod:`coildrive.model.eddy`); :func:`on_eddy_energy` gives the eddy resistance's share."""
    dt = np.maximum(t - pin.seat_time, 0.0)
    seated = p.coil_closed
    q, sq = rise_integrals(dt, pin.seat_current, v, r_on, seated)
    return (rise_current(dt, pin.seat_current, v, r_on, seated), pin.seat_charge + q,
            pin.seat_square + sq)


def on_eddy_energy(pin, p, t, v, r_on):
    """J the eddy resistance ``R_e`` takes over a set pulse ``t`` s long on the stiff bus at
    ``v`` V through ``r_on`` ohm, ``t`` past every seat time (0 without an eddy term). The
    branch's voltage is ``R_e (i - i_m) = v - r_on i`` (``i`` the terminal current), so up
    to the seat it follows from the seat run's integrals
    (:func:`coildrive.model.eddy.stiff_loss`); after the seat the seated branch's closed form
    (:func:`coildrive.model.eddy.rise_integrals`)."""
    if p.eddy is None:
        return 0.0 * np.asarray(v, float)
    from ..model import eddy

    run = eddy.stiff_loss(pin.seat_time, pin.seat_charge, pin.seat_square, v, r_on, p.eddy)
    dt = np.maximum(t - pin.seat_time, 0.0)
    return np.maximum(run, 0.0) + eddy.rise_integrals(dt, pin.seat_current, v, r_on, p.coil_closed)[2]


def _seats_check(drive: Drive, pin, p, pts: Points, r: PulseResult, short=None) -> Check:
    """``set_armature_seats``: the armature rests on the seat at every corner before the
    shortest set pulse ends (the catch then holds it); ``short`` (s, per corner): that
    pulse where it differs (a compensated pulse's entries)."""
    bad = np.flatnonzero(pin.status != 0)
    late = np.flatnonzero((pin.status == 0) & (pin.seat_time > (r.shortest_s if short is None else short)))
    if bad.size == 0 and late.size and r.ticks is not None:
        k = int(late[0])
        return Check("set_armature_seats", False,
                     f"the armature rests on the seat {float(pin.seat_time[k]) * 1e3:.4g} ms after switch-on at "
                     f"{pts.label(k)}, after the shortest set pulse there ends ({late.size} of "
                     f"{len(pin.status)} corners)")
    if bad.size == 0:
        seat = (f"the armature rests on the seat {r.seat_time_s * 1e3:.4g} ms after switch-on at the "
                f"latest ({r.seat_corner})")
        return Check("set_armature_seats", r.ticks is not None,
                     (f"{seat}, within the shortest set pulse ({r.shortest_s * 1e3:.4g} ms)" if r.table is None else
                      f"{seat}, within the shortest set pulse of the entry each corner may read") if r.ticks else
                     f"{seat}, but the set pulse has no length (see the set_pulse check)")
    k = int(bad[0])
    why = ("the coil never reaches the current that starts it off the open stop"
           if pin.status[k] == 1 else f"it stalls {float(pin.stall_gap[k]) * 1e3:.3g} mm from the seat")
    return Check("set_armature_seats", False,
                 f"the armature does not seat at {bad.size} of {len(pin.status)} corners, e.g. "
                 f"{pts.label(k)}: {why} -- a stronger coil, a higher supply or less spring and load")


def _opens(drive: Drive, pts: Points, t_trip, r: PulseResult) -> tuple[PulseResult, Check]:
    """The reset pulse trips the catch when its current reaches ``reset.current`` (at
    ``t_trip`` s per corner); spring and load then carry the armature, the set coil
    carrying no current, to the open stop (:func:`coildrive.model.armature_runs.release`
    from zero current; config makes spring_preload + load_force > 0 and spring_rate >= 0,
    so they push it open over the whole stroke). ``reset_armature_opens`` fails where it
    does not arrive within the run's bound."""
    from ..model.armature import params_from_loop
    from ..model.armature_runs import release

    p = params_from_loop(drive.armature, pulse_loop(drive, pts), pts.l_factor, drive.coil.eddy_resistance)
    rb = release(p, 0.0)
    t_open = np.where(rb.status == 0, t_trip + rb.open_time, np.inf)
    k = worst(t_open)
    r = dataclasses.replace(r, open_time_s=float(t_open[k]))
    ok = bool(np.all(np.isfinite(t_open)))
    return r, Check("reset_armature_opens", ok,
                    f"the catch trips at {r.current_a:.4g} A and the armature rests on the open stop "
                    f"{r.open_time_s * 1e3:.4g} ms after the reset pulse starts ({pts.label(k)})" if ok else
                    "the armature does not reach the open stop after the catch trips")


def end_current(wd: Drive, lp, pts: Points, pin, p_arm, short) -> np.ndarray:
    """Current (A) at the end of a pulse ``short`` s long (per point) through the winding
    ``wd`` at the points: the rise (a drooping bus included), or with a seat run ``pin``
    (params ``p_arm``; the pulse outlasting every seat time) the seated coil's on from it
    -- on a drooping bus the seat run again, to that end."""
    if pin is None:
        return rise_current_at(wd, lp, short)
    if wd.supply.droops:
        return seat_run(wd, lp, pts, peak_time=short)[0].peak_end_current
    return after_seat(pin, p_arm, short, lp.v_on, lp.r_on)[0]


def seated_force_ticks(drive: Drive, wd: Drive, lp, pts: Points, pin, p_arm, need: float, settle: float,
                       ticks: np.ndarray, group: np.ndarray) -> np.ndarray:
    """Per group of points (``group``: each point's index into ``ticks``), the fewest
    ticks, at least ``ticks``, whose shortest real pulse (one tick less) less ``settle`` s
    carries ``need`` A at every point of the group on the moving armature's run and the
    seated coil after it (:func:`end_current`); 0 where the seated coil's steady current
    stays below it. ``ticks`` are sized from the time margin on the seat and the force
    margin on the open-armature rise, which runs ahead of the moving run's current (the
    closing gap's back-EMF and the larger seated inductance hold it back), so they are
    where the search starts: up by doubling steps, then bisection -- one run over every
    point per step."""
    rate = drive.board.tick.rate
    groups = len(ticks)
    never = np.bincount(group, steady_current(wd, lp) < need, minlength=groups) > 0

    seat = np.asarray(pin.seat_time, float)

    def carries(n: np.ndarray) -> np.ndarray:
        t = (n[group] - 1.0) / rate - settle
        # (before the seat the run is read at the seat: the pulse outlasts every seat time)
        i = end_current(wd, lp, pts, pin, p_arm, np.where(np.isfinite(seat), np.maximum(t, seat), t))
        return np.bincount(group, i < need * (1.0 - 1e-12), minlength=groups) == 0

    lo = np.asarray(ticks, int)
    ok = carries(lo) | never
    hi, step = lo.copy(), np.ones(groups, int)
    while not ok.all():   # double past the first length that carries it
        lo = np.where(ok, lo, hi)
        hi = np.where(ok, hi, hi + step)
        step *= 2
        ok = ok | carries(hi)
    lo = np.where(hi > np.asarray(ticks, int), lo, hi - 1)
    while np.any(hi - lo > 1):   # the least length that carries it: lo fails, hi carries
        mid = np.where(hi - lo > 1, (lo + hi) // 2, hi)
        good = carries(mid)
        hi, lo = np.where(good, mid, hi), np.where(good, lo, mid)
    return np.where(never, 0, hi)


def rise_current_at(drive: Drive, lp, t) -> np.ndarray:
    """Current (A) ``t`` s into a pulse at the points of ``lp`` (a drooping bus included)."""
    from .supply import rise_current as bus_rise
    return bus_rise(drive, lp, np.full(np.shape(lp.v_on), t), lp.inductance)


def design_latch(drive: Drive, fixed: dict[str, int] | None = None) -> LatchDesign:
    """Design the set and reset pulses of a latching coil and the shortest interval
    between them (module docstring). ``fixed``: pulse name -> ticks it runs instead of its
    sized length (timed pulses without a supply table; :mod:`coildrive.tune.latch`)."""
    pulses, checks = [], []
    fixed = fixed or {}
    for reset in (False, True):
        p, c = _pulse(drive, reset, fixed.get("reset" if reset else "set"))
        pulses.append(p)
        checks += c
    th = drive.thermal
    heat = max(p.heat_j for p in pulses)
    limit = th.max_coil_temp - drive.ambient.max
    rise = heat / th.capacity if th.capacity > 0 else 0.0
    if th.resistance > 0:
        t_th = float(latch_model.shortest_interval(heat, th.capacity, th.time_constant, limit))
    else:
        t_th = 0.0
    t_decay = max(p.time_s + p.decay_time_s for p in pulses)
    # (pulses from the boost leave the main bus's capacitor to the converter: main_bus)
    t_rc = 0.0 if drive.supply.boosted else max(p.time_s + p.recharge_time_s for p in pulses)
    t_open = max(p.open_time_s or 0.0 for p in pulses)
    t_boost = max((p.boost.min_interval_s or 0.0) if p.boost is not None else 0.0 for p in pulses)
    parts = {"the pulse and its decay to zero": t_decay, "the coil's temperature": t_th,
             "the capacitor's recharge": t_rc, "the armature's travel to the open stop": t_open,
             "the boost's recharge": t_boost}
    governed = max(parts, key=parts.get)
    interval = parts[governed]
    rate = drive.board.tick.rate
    ticks = math.ceil(interval * rate - 1e-9) if math.isfinite(interval) else None
    if th.resistance > 0 and math.isfinite(t_th):
        hottest = drive.ambient.max + float(latch_model.peak_rise(heat, interval, th.capacity, th.time_constant))
    else:
        hottest = drive.ambient.max + (math.inf if th.resistance > 0 else 0.0)
    ok = math.isfinite(t_th)
    checks.append(Check("coil_temperature", ok,
                        f"pulses of {heat:.4g} J copper heat (+{rise:.3g} K each) every {interval * 1e3:.4g} ms "
                        f"keep the coil at or below {hottest:.4g} degC from a {drive.ambient.max:g} degC "
                        f"ambient (limit {th.max_coil_temp:g} degC)" if ok else
                        f"one pulse's copper heat {heat:.4g} J raises the coil {rise:.3g} K, past the "
                        f"{limit:.4g} K between the hottest ambient and thermal.max_coil_temp -- a shorter "
                        "pulse, a higher supply or a coil with more heat capacity"))
    cycle = None
    if drive.duty is not None:
        cycle, more = _cycle(drive, pulses, interval)
        checks += more
    bus, more = latch_boost.main_bus(drive, pulses, interval)
    checks += more
    result = LatchResult(
        topology=drive.switch.topology, pulses=pulses, interval_s=interval, interval_ticks=ticks, cycle=cycle,
        governed_by=governed, decay_interval_s=t_decay, thermal_interval_s=t_th,
        recharge_interval_s=t_rc if drive.supply.droops else 0.0, armature_interval_s=t_open,
        boost_interval_s=t_boost, main_bus=bus,
        derived=derived_values(drive),
        pulse_heat_j=heat,
        coil_rise_per_pulse_k=rise, hottest_coil_c=hottest, coil_limit_c=th.max_coil_temp,
        recharge_tolerance=drive.latch.recharge_tolerance, tick_rate_hz=rate)
    return LatchDesign(drive, result, checks, _cautions(drive, result), input_hash=drive.input_hash())


def _cycle(drive: Drive, pulses: list[PulseResult], interval: float) -> tuple[LatchCycle, list[Check]]:
    """The on/off cycle (``[duty]``): set at its start, reset ``on_time`` later; the coil's
    temperature just after each pulse (:func:`coildrive.model.latch.cycle_rises`, from
    ``ambient.max``; none without self-heating) and both spacings against the shortest
    interval."""
    du, th = drive.duty, drive.thermal
    by = {p.name: p for p in pulses}
    if th.resistance > 0:
        rs, rr = (float(x) for x in latch_model.cycle_rises(by["set"].heat_j, by["reset"].heat_j,
                                                            du.on_time, du.off_time, th.capacity,
                                                            th.time_constant))
    else:
        rs = rr = 0.0
    hottest = drive.ambient.max + max(rs, rr)
    cycle = LatchCycle(du.on_time, du.off_time, du.period, du.actuation_rate, rs, rr, hottest)
    short = min(du.on_time, du.off_time)
    checks = [Check("duty_interval", short >= interval,
                    f"set to reset {du.on_time * 1e3:.4g} ms, reset to the next set {du.off_time * 1e3:.4g} ms "
                    f"vs the shortest safe interval {interval * 1e3:.4g} ms" if math.isfinite(interval) else
                    "no interval between pulses is safe (see the coil_temperature check)"),
              Check("duty_coil_temperature", hottest <= th.max_coil_temp,
                    f"at {du.actuation_rate:.4g} cycles/s the coil is at most {hottest:.4g} degC just after a "
                    f"pulse (set +{rs:.3g} K, reset +{rr:.3g} K over a {drive.ambient.max:g} degC ambient; "
                    f"limit {th.max_coil_temp:g} degC)" if th.resistance > 0 else
                    "no self-heating (thermal.resistance = 0): the coil stays at the ambient")]
    return cycle, checks


def _cautions(drive: Drive, r: LatchResult) -> list[str]:
    pace = (f"Never pulse faster than every {r.interval_s * 1e3:.4g} ms ({r.governed_by})"
            if math.isfinite(r.interval_s) else "No interval keeps the coil below its limit (see the "
            "coil_temperature check)")
    out = [f"{pace}: the coil is "
           "rated for pulses, not for continuous current, and a stuck-on switch burns it quickly -- "
           "limit the pulse length in hardware too (a timer or a one-shot) where that can hurt.",
           f"Turning a pulse off makes the switches see up to {max(p.peak_switch_voltage_v for p in r.pulses):.3g} V: "
           "keep the freewheel path (or the bridge's body diodes) fitted and rated."]
    nodes = [p.lowest_node_v for p in r.pulses if p.lowest_node_v is not None]
    if nodes:
        out.append(f"At the end of a pulse the high-side switch's node swings to {min(nodes):.3g} V: the "
                   "gate driver's source pin, a diagnostics divider and the cable to the coil must take "
                   "that negative voltage.")
    boosted = [p.boost for p in r.pulses if p.boost is not None]
    if boosted:
        out += boost_cautions(boosted[0])
    if boosted and full_bridge(drive):
        out.append("The boost switch feeds the bridge's high-side rail and the main supply reaches it through "
                   "its blocking diode: after each pulse the coil's current returns up the boost switch's body "
                   "diode into the boost capacitor. Keep that path (a MOSFET's body diode, or a diode across a "
                   "switch without one): without it the turn-off has nowhere to go.")
    if full_bridge(drive):
        out.append("Never turn on both switches of one leg (Q1 with Q2, or Q3 with Q4): give the gate "
                   "drivers a dead time (common practice).")
    out.append(SAFETY_CAUTION)
    return out


def latch_waveforms(d: LatchDesign) -> dict:
    """The set and reset pulses the plot draws, by label: at the nominal supply with the
    coil at the hottest ambient, and at the pulses' worst corner (the lowest supply the
    design takes, the coil at its limit, R and L high), each pulse as long as the firmware
    runs it there (:func:`firmware_pulse`); the reset pulse one interval after the set
    pulse (:func:`coildrive.model.latch_waveform.latch_actuation`)."""
    from ..model.latch_waveform import latch_actuation

    drive = d.drive
    scale = 1.0 - drive.latch.recharge_tolerance if drive.supply.droops and not drive.supply.boosted else 1.0
    rt, lt = drive.coil.resistance_tolerance, drive.coil.inductance_tolerance
    points = {f"nominal: {drive.supply.nominal:g} V, coil {drive.ambient.max:g} degC":
              (drive.supply.nominal, drive.ambient.max, 1.0, 1.0),
              f"worst: {drive.supply.min * scale:.4g} V, coil {drive.thermal.max_coil_temp:g} degC, "
              f"R{rt * 100:+.3g}%, L{lt * 100:+.3g}%":
              (drive.supply.min * scale, drive.thermal.max_coil_temp, 1 + rt, 1 + lt)}
    # no safe interval (a failing coil_temperature check): the reset right after the set decays
    gap = d.latch.interval_s if math.isfinite(d.latch.interval_s) else 0.0
    return {label: latch_actuation(drive, winding_drive(drive, True), v, t, firmware_pulse(d, "set", v, t, rf, lf),
                                   firmware_pulse(d, "reset", v, t, rf, lf), gap, rf, lf, 400)
            for label, (v, t, rf, lf) in points.items()}


def bench_pulse(drive: Drive, name: str, supply: float, coil_temp: float, t: float | None = None):
    """Pulse ``name`` at one bench point (``supply`` V, coil ``coil_temp`` degC, nominal
    parts; the live tune of a latch, :mod:`coildrive.tune.latch_live`): ``(time s to its
    current -- with a moving armature its seat time, as the design sizes it --, current A
    at ``t`` s into the pulse or ``nan``)``. The same requirement function as the design's
    worst corner (``_requirements``), so the two scale alike."""
    wd = winding_drive(drive, name == "reset")
    lt = drive.latch
    current, cm = ((lt.reset_current, lt.reset_current_margin) if name == "reset" else
                   (drive.pull_in.current, drive.pull_in.current_margin))
    one = np.ones(1)
    pts = Points(np.array([float(supply)]), np.array([float(coil_temp)]), one, one)
    lp, t_req, _, _, _ = _requirements(wd, pts, current, cm)
    i_t = math.nan if t is None else float(np.ravel(rise_current_at(wd, lp, t))[0])
    return float(np.ravel(t_req)[0]), i_t


def highest_pulse_current(drive: Drive) -> float:
    """The highest current any pulse can reach, A: the steady current of either winding's
    loop at the highest supply, the coldest ambient and the lowest resistance (each rise
    only approaches it)."""
    top = 0.0
    for reset in (False, True):
        wd = winding_drive(drive, reset)
        lp = loop(wd, drive.supply.max, drive.ambient.min, 1.0 - wd.coil.resistance_tolerance, 1.0,
                  sense_factor=1.0 - drive.board.sense.resistance_tolerance)
        top = max(top, float(np.max(np.asarray(lp.v_on, float) / np.asarray(lp.r_on, float))))
    return top
