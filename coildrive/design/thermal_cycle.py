"""The coil over its on/off cycle: ``[duty]`` and ``[thermal] capacity`` (or ``time_constant``).

With both given, each actuation heats the coil for ``duty.on_time`` -- its peak (full
on from zero current, the design's peak length), its hold (the hold the firmware runs,
in its periodic steady state) and the copper's share of its release; with an eddy-current
term each also the core's eddy loss, the release's to the end of the flux -- and lets it cool
for ``duty.off_time``; the hottest coil over that cycle's periodic steady state
(:mod:`coildrive.model.thermal_cycle`) replaces the continuous-hold temperature in the
envelope. The peak and release last milliseconds, far below the thermal time constant:
their heat is spread over the on-time (putting the release's heat before the turn-off can
only raise the computed peak temperature). With a heat capacity the design also gives the
longest continuous on-time before the coil reaches ``thermal.max_coil_temp`` from a cold
coil (the ambient) and from a warm one (the cycle's coolest point, the start of an
on-time); with a ``[duty]`` the freewheel elements' average power from the release energy
x the actuation rate. Units: s, W, J, J/K, degC.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..config import Drive
from ..model import eddy, flux
from ..model.circuit import full_bridge, loop
from ..model.eddy import EddyCoil
from ..model.flux import FluxCoil
from ..model.pwm import pwm_steady_state
from ..model.rl import decay_integrals, decay_time, rise_integrals
from ..model.thermal_cycle import chord, cycle_steady_state, heating, time_to_rise
from ..units import format_si
from ..model.thermal import settle_temperature
from .boost import peak_heat as boosted_peak_heat
from .boost import shortest_peak
from .result import ELEMENT_NAMES, Check, ThermalCycleResult


def cycling(drive: Drive) -> bool:
    """True when the file gives an on/off cycle and a heat capacity: the envelope then
    takes the hottest coil over the cycle."""
    return drive.duty is not None and drive.thermal.capacity > 0 and drive.thermal.resistance > 0


def peak_inductance(drive: Drive, lp):
    """Inductance (H) of the peak's heat: the loop's, or with an ``[armature]`` the open
    one (same tolerance factor). While the gap closes ``L(x) di/dt <= V - R i``, so the rise
    through the open inductance bounds the moving armature's current -- and its heat --
    from above. With the open and seated curves the open curve (a
    :class:`~coildrive.model.flux.FluxCoil`, :func:`_opened`). With an eddy term its
    magnetising branch opens so (an :class:`~coildrive.model.eddy.EddyCoil` of the open
    branch, the same eddy resistance)."""
    if drive.armature is None:
        return lp.inductance
    if isinstance(lp.inductance, EddyCoil):
        return EddyCoil(_opened(drive, lp.inductance.magnetising), lp.inductance.resistance)
    return _opened(drive, lp.inductance)


def _opened(drive: Drive, seated):
    """The open coil of a moving armature from its seated one ``seated``: H scaled by
    ``inductance_open / inductance_closed``, or with two curves (``seated`` the seated
    curve's :class:`~coildrive.model.flux.FluxCoil`) the open curve ``coil.flux_current``/
    ``flux_linkage`` at the same tolerance scale."""
    if isinstance(seated, FluxCoil):
        coil = drive.coil
        return FluxCoil(flux.curve(coil.flux_current, coil.flux_linkage), seated.scale)
    return seated * drive.armature.inductance_open / drive.armature.inductance_closed


def pwm_state(duty, frequency):
    """The voltage-mode hold's steady state at a loop: the PWM orbit at ``duty`` (a
    function of the loop, for :func:`on_energies`)."""
    def state(lp):
        return pwm_steady_state(duty, frequency, lp.v_on, lp.r_on, lp.r_off, lp.v_off,
                                lp.inductance, mixed=lp.mixed)
    return state


def on_energies(drive: Drive, supply, r_factor, l_factor, duty, frequency, factors: dict,
                peak_time, state=None):
    """A function of the coil temperature (degC, array) giving the coil's copper heat of
    one actuation, ``(peak J, hold J, release J)``: the peak full on from zero for
    ``min(peak_time, on_time)`` s (through :func:`peak_inductance`; ``peak_time`` may be
    an array over the points), the hold's periodic steady state for the rest of the
    on-time (after a boosted peak, which ends at its threshold, the rest of the on-time
    after its shortest length there), the release from the top of the hold ripple to zero through the hold's
    freewheel path (with split decay the slow one: the longer decay, the more heat; a full
    bridge's release path, as its hold path never reaches zero). ``state``: the hold's
    steady state as a function of the loop (anything with ``rms`` and ``i_max`` A; the
    current-mode and closed-loop holds give their own regulated orbit), by default the
    PWM orbit at ``duty``/``frequency``."""
    state = state or pwm_state(duty, frequency)
    t_on = drive.duty.on_time
    t_pk = np.minimum(peak_time, t_on)
    t_hold = t_on - t_pk

    def at(temp):
        lp = loop(drive, supply, temp, r_factor, l_factor, **factors)
        ss = state(lp)
        # a full bridge's hold path (slow decay, no opposing voltage) never brings the
        # current to zero: its release is the fast decay into the bus
        rel = loop(drive, supply, temp, r_factor, l_factor, path="release", **factors) \
            if full_bridge(drive) else lp
        # a boosted peak ends at its threshold: the hold heats for the rest of the on-time
        # (with a moving armature no shorter than the open coil's rise: L(x) >= L_open and
        # the motion's back-EMF only holds the current back)
        held = t_on - shortest_peak(drive, lp, t_pk, peak_inductance(drive, lp)) if drive.supply.boosted else t_hold
        peak, hold = peak_heat(drive, lp, t_pk), hold_heat(ss, lp.r_coil) * held
        if isinstance(lp.inductance, EddyCoil):
            # the core's eddy loss heats the coil with the copper, the release's to the end
            # of the flux (its tail through R_e after the freewheel path blocks)
            _, s_rel, w_rel = eddy.decay_integrals(np.inf, ss.i_max, rel.r_off, rel.v_off, rel.inductance)
            return peak, hold, lp.r_coil * s_rel + w_rel
        t0 = decay_time(0.0, ss.i_max, rel.r_off, rel.v_off, rel.inductance)
        _, s_rel = decay_integrals(t0, ss.i_max, rel.r_off, rel.v_off, rel.inductance)
        return peak, hold, lp.r_coil * s_rel
    return at


def hold_heat(ss, r_coil):
    """W that heats the coil in a hold's steady state ``ss`` (anything with ``rms`` A):
    the copper's ``I_rms^2 R_coil``, plus an eddy term's core loss (``eddy_energy`` J per
    ``period`` s) where the orbit has one."""
    heat = ss.rms**2 * r_coil
    w = getattr(ss, "eddy_energy", None)
    return heat if w is None else heat + w / ss.period


def peak_heat(drive: Drive, lp, peak_time):
    """J that heats the coil in a peak full on from zero for ``peak_time`` s at the loop
    ``lp``: the copper's and an eddy term's core loss; a boosted peak's from the boost to
    its threshold (:func:`coildrive.design.boost.peak_heat`; with a moving armature its
    run's, :func:`coildrive.design.boost_armature.peak_heat`)."""
    if drive.supply.boosted and drive.armature is not None:
        from .boost_armature import peak_heat as armature_peak_heat
        return armature_peak_heat(drive, lp, peak_time)
    if drive.supply.boosted:
        return boosted_peak_heat(drive, lp, peak_time)
    if isinstance(lp.inductance, EddyCoil):
        e = lp.inductance
        if drive.armature is None:
            _, s_pk, w_pk = eddy.rise_integrals(peak_time, 0.0, lp.v_on, lp.r_on, e)
            return lp.r_coil * s_pk + w_pk
        return _moving_eddy_peak_heat(drive, lp, peak_time)
    _, s_pk = rise_integrals(peak_time, 0.0, lp.v_on, lp.r_on, peak_inductance(drive, lp))
    return lp.r_coil * s_pk


def _moving_eddy_peak_heat(drive: Drive, lp, peak_time):
    """:func:`peak_heat` with an eddy term and a moving armature, bounded from above.

    Copper: the magnetising current rises no faster than through the open coil's branch
    (:func:`peak_inductance`'s argument, with the loop's Thevenin pair), and the terminal
    current ``(V + R_e i_m) / (R + R_e)`` rises with it, so the open branch's rise bounds
    the copper's heat. Eddy loss: the branch voltage ``v_m = dpsi/dt = V_th - R_th i_m``
    stays within ``[0, V_th]`` in the rise, so ``int v_m^2 / R_e dt <= V_th psi(T) / R_e``,
    with the flux ``psi(T)`` at most ``V_th T`` and at most the seated coil's at ``V / R``.
    """
    e = lp.inductance
    mag = e.magnetising
    v, r = np.asarray(lp.v_on, float), np.asarray(lp.r_on, float)
    opened = _opened(drive, mag)
    if isinstance(mag, FluxCoil):   # the seated curve; the open one is coil.flux_current's
        psi_top = np.asarray(mag.scale, float) * mag.curve.psi(v / r)
    else:
        psi_top = mag * v / r
    _, s_pk, _ = eddy.rise_integrals(peak_time, 0.0, v, r, EddyCoil(opened, e.resistance))
    v_th, _ = eddy.thevenin(v, r, e.resistance)
    w_pk = v_th * np.minimum(v_th * np.asarray(peak_time, float), psi_top) / e.resistance
    return lp.r_coil * s_pk + w_pk


def cycle_states(drive: Drive, supply, ambient, r_factor, l_factor, duty, frequency,
                 factors: dict | None = None, peak_time=0.0, state=None):
    """The cycle's periodic steady state at each point
    (:class:`~coildrive.model.thermal_cycle.CycleState`): the on-time's mean power is the
    actuation's copper heat (:func:`on_energies`) over ``duty.on_time``."""
    energies = on_energies(drive, supply, r_factor, l_factor, duty, frequency, factors or {},
                           peak_time, state)
    t_on = drive.duty.on_time

    def power_at(temp):
        return sum(energies(temp)) / t_on
    th = drive.thermal
    return cycle_steady_state(ambient, power_at, t_on, drive.duty.off_time, th.resistance, th.capacity)


def _start(drive: Drive, power_at, peak_at, start, ambient, label):
    """Held on from ``start`` degC at each point: the time to the limit (the chord of the
    hold's power over ``start .. max_coil_temp``; the peak's heat added to the start), the
    shortest over the points, as the JSON's ``cold_start`` / ``warm_start``."""
    th = drive.thermal
    limit = th.max_coil_temp
    start = np.where(np.isfinite(start), start, limit)
    heat, slope = chord(power_at, start, np.maximum(start, limit), ambient)
    theta0 = start - ambient + peak_at(start) / th.capacity
    t = time_to_rise(theta0, limit - ambient, heat, slope, th.resistance, th.capacity)
    if np.all(np.isinf(t)):   # never: name the point that comes closest
        lam = (1.0 / th.resistance - slope) / th.capacity
        with np.errstate(divide="ignore", invalid="ignore"):
            settle = np.where(lam > 0, heat / (th.capacity * lam), np.inf)
        k = int(np.argmax(settle))
    else:
        k = int(np.argmin(t))
    return {"start_c": float(start[k]), "ambient_c": float(ambient[k]),
            "start_rise_k": float(theta0[k]), "heat_w": float(heat[k]),
            "heat_slope_w_k": float(slope[k]),
            "time_to_limit_s": float(t[k]) if math.isfinite(t[k]) else None,
            "corner": label(k)}


@dataclass(frozen=True)
class HeatPoints:
    """Where the coil heats and the hold it runs there: parallel arrays (V, degC,
    tolerance factors), the loop's other tolerance factors, a label per point, and the
    hold's steady state as a function of the loop (``rms``, ``i_max`` A)."""

    supply: np.ndarray
    ambient: np.ndarray
    r_factor: np.ndarray
    l_factor: np.ndarray
    factors: dict
    label: Callable[[int], str]
    state: Callable

    def power(self, drive: Drive):
        """The hold's coil loss (W) as a function of the coil temperature (degC)."""
        def power_at(temp):
            lp = loop(drive, self.supply, temp, self.r_factor, self.l_factor, **self.factors)
            return hold_heat(self.state(lp), lp.r_coil)
        return power_at

    def cycle(self, drive: Drive, peak_time):
        """The on/off cycle's periodic steady state here (:func:`cycle_states`)."""
        return cycle_states(drive, self.supply, self.ambient, self.r_factor, self.l_factor, None,
                            None, self.factors, peak_time, self.state)

    def temperature(self, drive: Drive, peak_time=0.0):
        """The coil temperature (degC, ``inf`` on a runaway) the envelope takes here: the
        hottest over the on/off cycle when :func:`cycling`, else after a long hold."""
        if cycling(drive):
            return self.cycle(drive, peak_time).hottest
        return settle_temperature(self.ambient, drive.thermal.resistance, self.power(drive))


def thermal_result(drive: Drive, plan, frequency: float, period: int, peak_time: float,
                   offs: list[dict], hold_freewheel_w: float,
                   hold_elements_w: dict) -> ThermalCycleResult | None:
    """The ``thermal_cycle`` result of a voltage-mode design: ``plan`` is the solved hold
    (:class:`~coildrive.design.regulation.HoldPlan`, its heating points); the rest as
    :func:`cycle_result`."""
    heat = plan.heat
    factors = {"diode_factor": heat.tol.diode_factor, "fast_factor": heat.tol.fast_factor,
               "sense_factor": heat.tol.sense_factor}
    pts = HeatPoints(heat.supply, heat.ambient, heat.tol.r_factor, heat.tol.l_factor, factors,
                     heat.label, pwm_state(plan.heat_compare / period, frequency))
    return cycle_result(drive, pts, peak_time, offs, hold_freewheel_w, hold_elements_w)


def cycle_result(drive: Drive, pts: HeatPoints, peak_time: float, offs: list[dict],
                 hold_freewheel_w: float, hold_elements_w: dict) -> ThermalCycleResult | None:
    """The ``thermal_cycle`` result of a design (``None`` without ``[duty]`` and
    ``thermal.capacity``): ``pts`` the heating points and the hold the firmware runs there
    (:class:`HeatPoints`), ``peak_time`` (s) the peak phase, ``offs`` the turn-offs
    (:func:`coildrive.design.turnoff.turn_offs`), ``hold_freewheel_w`` the freewheel
    path's hold power at its worst corner and ``hold_elements_w`` each element's (W)."""
    th, cyc = drive.thermal, drive.duty
    if cyc is None and th.capacity <= 0:
        return None
    power_at = pts.power(drive)
    continuous = settle_temperature(pts.ambient, th.resistance, power_at)
    k_cont = int(np.argmax(np.where(np.isfinite(continuous), continuous, np.inf)))
    out = dict(max_coil_temp_c=th.max_coil_temp, continuous_hold_c=float(continuous[k_cont]),
               continuous_hold_corner=pts.label(k_cont), capacity_j_k=None, time_constant_s=None,
               on_time_s=None, off_time_s=None, actuation_rate_hz=None, cycle=None,
               freewheel=None, cold_start=None, warm_start=None)
    if cyc is not None:
        out.update(on_time_s=cyc.on_time, off_time_s=cyc.off_time, actuation_rate_hz=cyc.actuation_rate)
        # a boosted peak may end well before its time-out: its hold takes the whole on-time
        # (the upper bound)
        hold_share = max(cyc.on_time - (0.0 if drive.supply.boosted else peak_time), 0.0) / cyc.period
        end_of_hold = offs[0]
        release_w = {n: e * cyc.actuation_rate for n, e in end_of_hold["elements_j"].items()}
        names = list(release_w) + [n for n in hold_elements_w if n not in release_w]
        out["freewheel"] = {
            "release_energy_j": end_of_hold["energy_j"],
            "release_power_w": end_of_hold["energy_j"] * cyc.actuation_rate,
            "release_elements_w": release_w,
            "release_corner": end_of_hold["energy_corner"],
            "hold_power_w": hold_freewheel_w * hold_share,
            "average_power_w": end_of_hold["energy_j"] * cyc.actuation_rate + hold_freewheel_w * hold_share,
            "elements_average_w": {n: release_w.get(n, 0.0) + hold_elements_w.get(n, 0.0) * hold_share
                                   for n in names},
        }
    if th.capacity <= 0 or th.resistance <= 0:
        return ThermalCycleResult(**out)
    out.update(capacity_j_k=th.capacity, time_constant_s=th.time_constant)
    peak = on_energies(drive, pts.supply, pts.r_factor, pts.l_factor, None, None, pts.factors,
                       peak_time, pts.state) if cyc is not None else None

    def peak_at(temp):   # the peak's heat (J), full on from zero for the peak time
        return peak_heat(drive, loop(drive, pts.supply, temp, pts.r_factor, pts.l_factor, **pts.factors),
                         peak_time)
    out["cold_start"] = _start(drive, power_at, peak_at, pts.ambient.copy(), pts.ambient,
                               pts.label)
    if cyc is not None:
        st = pts.cycle(drive, peak_time)
        k = int(np.argmax(np.where(np.isfinite(st.hottest), st.hottest, np.inf)))
        e_pk, e_hold, e_rel = (float(np.asarray(e)[k]) for e in peak(
            np.where(np.isfinite(st.hottest), st.hottest, th.max_coil_temp)))
        out["cycle"] = {
            "hottest_c": float(st.hottest[k]), "coolest_c": float(st.coolest[k]),
            "corner": pts.label(k), "on_power_w": float(st.heat[k] + st.slope[k] * (
                (st.hottest[k] if math.isfinite(st.hottest[k]) else th.max_coil_temp) - pts.ambient[k])),
            "peak_energy_j": e_pk, "hold_energy_j": e_hold, "release_energy_j": e_rel,
        }
        out["warm_start"] = _start(drive, power_at, peak_at, st.coolest, pts.ambient, pts.label)
    return ThermalCycleResult(**out)


def thermal_curves(result: ThermalCycleResult, points: int = 200) -> dict:
    """The coil temperature held on from a cold start and from a warm restart (the cycle's
    coolest point), by name: ``(time s, temperature degC, time to the limit s or None)``,
    each to a little past its time to the limit (or five time constants where it never
    gets there). For ``design --plot``."""
    out = {}
    for name, s in (("cold start", result.cold_start), ("hot restart", result.warm_start)):
        if s is None:
            continue
        lam = 1.0 / result.time_constant_s - s["heat_slope_w_k"] / result.capacity_j_k
        span = 5.0 / lam if lam > 0 else 5.0 * result.time_constant_s
        if s["time_to_limit_s"] is not None:
            span = min(span, 1.5 * s["time_to_limit_s"]) if s["time_to_limit_s"] > 0 else span
        t = np.linspace(0.0, span, points)
        rise = heating(s["start_rise_k"], t, s["heat_w"], s["heat_slope_w_k"],
                       result.time_constant_s / result.capacity_j_k, result.capacity_j_k)
        out[name] = (t, s["ambient_c"] + rise, s["time_to_limit_s"])
    return out


def duration_text(seconds: float | None) -> str:
    """``"10.1 min"`` from two minutes up, ``"4.4 ms"`` below, ``"never"`` for ``None``."""
    if seconds is None:
        return "never"
    if seconds >= 120.0:
        return f"{seconds / 60.0:.3g} min"
    return format_si(seconds, "s")


def thermal_checks(drive: Drive, peak_time: float | None,
                   result: ThermalCycleResult | None) -> list[Check]:
    """With a ``[duty]``: the on-time holds the whole peak phase (``peak_time`` s, ``None``
    when the pull-in is not reached), and each freewheel element with a power rating takes
    no more than its rating x ``power_derating`` on average over the cycle (the hold's
    own check takes a continuous hold)."""
    if drive.duty is None or result is None:
        return []
    out = []
    on = drive.duty.on_time
    if peak_time is not None:
        ok = on > peak_time
        out.append(Check("duty_on_time", ok,
                         f"duty.on_time {duration_text(on)} vs the peak phase {peak_time * 1e3:.4g} ms"
                         + ("" if ok else " — the actuation ends before the peak does: lengthen "
                            "duty.on_time")))
    fw = drive.freewheel
    for name, w in result.freewheel["elements_average_w"].items():
        rating = getattr(fw, f"{name}_power_rating", 0.0)
        if rating <= 0:
            continue
        limit = rating * fw.power_derating
        ok = w <= limit
        out.append(Check(f"{name}_average_power", ok,
                         f"over the on/off cycle the {ELEMENT_NAMES[name]} takes {w:.3g} W on average "
                         f"(releases x {result.actuation_rate_hz:.4g}/s + the hold's share) vs {limit:.3g} W "
                         f"({fw.power_derating:.0%} of the {rating:.3g} W rating, power derating: common "
                         "practice)" + ("" if ok else " — fewer actuations a second, a lower hold "
                                        "current or a part rated for more")))
    return out


def thermal_cautions(result: ThermalCycleResult | None) -> list[str]:
    """The on-time limits, where the coil can reach its limit when held on."""
    if result is None:
        return []
    parts = [f"{duration_text(s['time_to_limit_s'])} from {what}"
             for what, s in (("a cold start", result.cold_start), ("the warm coil of the on/off "
                                                                   "cycle", result.warm_start))
             if s is not None and s["time_to_limit_s"] is not None]
    if not parts:
        return []
    return [f"Held on continuously (a jam, a stuck command), the coil reaches its "
            f"{result.max_coil_temp_c:.0f} degC limit after {' and '.join(parts)}: make the "
            "firmware end an actuation well before that, and do not rely on it alone where an "
            "overheated coil is a hazard."]


def cycle_caution(result: ThermalCycleResult) -> str:
    """The coil-temperature caution when the envelope takes the on/off cycle's hottest coil."""
    c = result.cycle
    return (f"Over its on/off cycle ({duration_text(result.on_time_s)} on, {duration_text(result.off_time_s)} off) "
            f"the coil reaches up to {c['hottest_c']:.0f} degC; held on for good it would settle at "
            f"{result.continuous_hold_c:.0f} degC. Hot coils burn and insulation ages fast above its "
            "class rating.")
