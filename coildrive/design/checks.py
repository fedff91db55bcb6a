"""The design's checks and cautions that every hold strategy shares: pull-in reach, hold
current, coil temperature, switch voltage, timer, ADC ranges, and the hold's heat in the
freewheel elements and the switch against the board's ratings.

Each check is a :class:`~coildrive.design.result.Check`: a name, pass or fail, a detail
that names the corner it came from and, on a fail, what to change.
"""

from __future__ import annotations

import math

import numpy as np

from ..config import Drive
from ..model.losses import HoldLosses
from .corners import CornerGrid
from .evaluate import PointResults
from .figures import OVER_CURRENT_FACTOR, worst
from .result import (ELEMENT_NAMES, AdcThresholds, Check, HoldResult, PullInResult, ReleaseResult,
                     SplitDecayResult, TimerResult)
from .peak import lag_governs
from .supply import steady_current
from .timer import TimerSetting

#: Below this the PWM whine is audible (common practice: the upper limit of hearing).
AUDIBLE_LIMIT_HZ = 20_000.0
#: Fewest compare steps per PWM period before the duty is called coarse (common practice).
MIN_DUTY_STEPS = 64
#: Fewest ADC codes for the hold current before the reading is called coarse (common practice).
MIN_HOLD_CODES = 10
UINT32_MAX = 2**32 - 1
#: How the over-current margin reads in a check (figures.OVER_CURRENT_FACTOR).
OVER_CURRENT_MARGIN_WORDS = f"{OVER_CURRENT_FACTOR:g} x"


def base_checks(drive: Drive, grid: CornerGrid, res: PointResults, pull_in: PullInResult,
                hold: HoldResult, release: ReleaseResult, timer: TimerResult, adc: AdcThresholds,
                setting: TimerSetting, plan_reachable: bool = True,
                high: PointResults | None = None) -> list[Check]:
    """The checks every strategy shares. ``res``: the envelope with the weakest hold and the
    shortest peak; ``high``: with the most current (default ``res``)."""
    high = res if high is None else high
    checks: list[Check] = []
    add = checks.append
    i_inf = steady_current(drive, res.loop)   # V/(R + R_s): the source resistance's share too
    k = worst(i_inf, largest=False)
    reach = bool(np.all(i_inf > drive.pull_in.current))
    add(Check("pull_in_reachable", reach,
              (f"lowest steady current at full supply {i_inf[k]:.4g} A ({grid.label(k)}) vs "
               f"pull-in {drive.pull_in.current:.4g} A" if reach else
               f"{pull_in.not_reached or 'not reached'}: steady current {i_inf[k]:.4g} A < pull-in "
               f"{drive.pull_in.current:.4g} A at {grid.label(k)}")
              + ("" if reach else
                 " — lower the coil resistance, raise the minimum supply or lower the pull-in current")))
    add(_force_check(drive, pull_in))
    met = hold.min_mean_current_a >= drive.hold.current and plan_reachable
    add(Check("hold_current_met", bool(met and np.all(np.isfinite(res.hold.mean))),
              f"lowest hold mean {hold.min_mean_current_a:.4g} A ({hold.min_corner}) vs "
              f"{drive.hold.current:.4g} A, {_regulation_words(hold)}"
              + ("" if met else " — not reached: even full duty cannot hold there; raise the supply "
                 "or lower the hold current")))
    add(Check("hold_below_pull_in", drive.hold.current < drive.pull_in.current,
              f"hold {drive.hold.current:.4g} A vs pull-in {drive.pull_in.current:.4g} A"))
    add(Check("hold_max_current", hold.max_mean_current_a < drive.pull_in.current,
              f"highest hold mean {hold.max_mean_current_a:.4g} A ({hold.max_corner}) vs pull-in "
              f"{drive.pull_in.current:.4g} A"
              + ("" if hold.max_mean_current_a < drive.pull_in.current else
                 (" — regulation = \"supply_table\" (a board that measures its supply) holds the "
                  "same current at every supply" if hold.regulation == "fixed" else
                  " — the hold current is high at the cold, high-supply corners")),
              severity="warning"))
    settles = math.isfinite(hold.coil_temp_c)
    hot_ok = settles and hold.coil_temp_c <= drive.thermal.max_coil_temp
    add(Check("coil_temperature", hot_ok,
              (f"hottest coil {hold.coil_temp_c:.1f} degC at {hold.coil_power_w:.3g} W "
               f"({hold.hottest_corner}) vs limit {drive.thermal.max_coil_temp:.1f} degC" if settles else
               "not reached: the coil temperature does not settle below 1000 degC (thermal runaway) "
               f"at {hold.hottest_corner}")
              + ("" if hot_ok else " — lower the hold current or improve the coil's cooling")))
    v_ok = release.peak_switch_voltage_v <= release.switch_limit_v
    add(Check("switch_voltage", v_ok,
              f"peak switch voltage {release.peak_switch_voltage_v:.4g} V (every turn-off: end of hold, "
              f"end of peak, over-current trip) vs {release.switch_limit_v:.4g} V "
              f"({drive.switch.derating:.0%} of the {release.switch_rating_v:.4g} V rating, derating: common practice)"
              + ("" if v_ok else " — use a lower Zener/clamp voltage or a switch with a higher rating")))
    f_ok = abs(timer.frequency_error) <= drive.hold.frequency_tolerance
    add(Check("timer_frequency", f_ok,
              f"{timer.frequency_hz:.6g} Hz for {timer.target_hz:.6g} Hz (error {timer.frequency_error:+.3%}, "
              f"allowed {drive.hold.frequency_tolerance:.2%}); prescaler {timer.prescaler}, "
              f"period {timer.period_ticks} counts"
              + ("" if f_ok else " — the timer cannot make this frequency: change hold.frequency")))
    d_ok = 0 < timer.compare_ticks < timer.period_ticks
    add(Check("duty_range", d_ok,
              f"compare {timer.compare_ticks} of {timer.period_ticks} counts"
              + ("" if d_ok else " — the hold needs full duty somewhere: it cannot regulate there")))
    add(Check("duty_resolution", timer.period_ticks >= MIN_DUTY_STEPS,
              f"{timer.period_ticks} steps per period, one step = {hold.current_step_a * 1e3:.3g} mA of hold "
              f"current (fewer than {MIN_DUTY_STEPS} steps is coarse: common practice)",
              severity="warning"))
    add(Check("audible_frequency", timer.frequency_hz >= AUDIBLE_LIMIT_HZ,
              f"{timer.frequency_hz:.6g} Hz" + ("" if timer.frequency_hz >= AUDIBLE_LIMIT_HZ else
                                               " is below 20 kHz: the coil may whine (common practice)"),
              severity="warning"))
    if pull_in.peak_ticks is None:
        add(Check("peak_ticks", False, f"no peak: {pull_in.not_reached}"))
    else:
        peak_ok = 0 < pull_in.peak_ticks <= UINT32_MAX
        add(Check("peak_ticks", peak_ok,
                  f"{pull_in.peak_ticks} ticks at {drive.board.tick.rate:.6g} Hz = "
                  f"{pull_in.peak_time_s * 1e3:.4g} ms" + ("" if peak_ok else " — does not fit 32 bits")))
    checks += adc_checks(drive, adc, hold)
    if drive.board.supply_sense is not None:
        sup_pin = drive.supply.max / drive.board.supply_sense.divider
        add(Check("supply_sense_range", sup_pin < drive.board.adc.reference,
                  f"{sup_pin:.4g} V at the supply-sense pin at {drive.supply.max:.4g} V vs ADC reference "
                  f"{drive.board.adc.reference:.4g} V"))
    add(Check("adc_hold_resolution", adc.hold_code >= MIN_HOLD_CODES,
              f"hold current reads {adc.hold_code} codes (fewer than {MIN_HOLD_CODES} is coarse: common practice)",
              severity="warning"))
    return checks


def _regulation_words(hold: HoldResult) -> str:
    if hold.regulation == "supply_table":
        return f"supply table (fixed fallback compare {hold.compare_ticks}, duty {hold.duty:.4f})"
    if hold.regulation == "current":
        return "current-mode hold"
    if hold.regulation == "closed_loop":
        return f"closed-loop hold at set-point code {hold.closed_loop.setpoint_code}"
    return f"fixed duty {hold.duty:.4f}"


def _force_check(drive: Drive, pull_in: PullInResult) -> Check:
    """The shortest real peak carries ``current_margin`` x the pull-in current at the worst
    corner (a margin on force, not only on time)."""
    p = pull_in
    need = p.force_current_a
    if p.peak_ticks is None:
        return Check("pull_in_force", False, f"no peak: {p.not_reached}")
    if p.force_time_s is None:
        return Check("pull_in_force", False,
                     f"not reached: {p.current_margin:g} x pull-in = {need:.4g} A is above the steady "
                     f"current at {p.force_corner} — lower pull_in.current_margin, raise the minimum "
                     "supply or use a coil that draws more current")
    got = p.shortest_peak_current_a
    ok = got is not None and got >= need * (1 - 1e-9)
    # one tick short (a phase may start anywhere in a tick), or the driver's switch lag
    # below its ticks where that is longer (design/peak.py's switch_lag)
    words = (f"{p.peak_ticks} ticks less the driver's switch lag" if lag_governs(p, drive.board.tick.rate)
             else f"{p.peak_ticks - 1} ticks")
    return Check("pull_in_force", bool(ok),
                 f"the shortest real peak ({words}, {p.shortest_peak_s * 1e3:.4g} ms) "
                 f"carries {got:.4g} A vs {need:.4g} A = {p.current_margin:g} x pull-in "
                 f"({p.current_margin ** 2:.3g} x the force) at {p.force_corner}; peak set by the "
                 f"{p.governed_by}")


def adc_checks(drive: Drive, adc: AdcThresholds, hold: HoldResult) -> list[Check]:
    """The current thresholds fit the converter and stay in order across the reading's
    tolerances; where they collapse, say which and what to change."""
    out = []
    max_code = 2**drive.board.adc.bits - 1
    pull_ok = drive.pull_in.current < adc.full_scale_current_a
    out.append(Check("adc_range", pull_ok,
                     f"current-sense full scale {adc.full_scale_current_a:.4g} A vs pull-in "
                     f"{drive.pull_in.current:.4g} A" + ("" if pull_ok else
                                                         " — lower the sense resistance or amplifier gain")))
    oc_ok = adc.over_current_a < adc.full_scale_current_a and adc.over_current_code <= max_code
    out.append(Check("adc_over_current", oc_ok,
                     f"over-current threshold {adc.over_current_a:.4g} A (code {adc.over_current_code} of "
                     f"{max_code}) = {OVER_CURRENT_MARGIN_WORDS} the highest healthy current "
                     f"{adc.healthy_max_current_a:.4g} A ({adc.healthy_max_corner})"
                     + (f" read high by x{adc.reading_high:.4g} (sense tolerances)" if adc.reading_high > 1 else "")
                     + f"; full scale {adc.full_scale_current_a:.4g} A"
                     + ("" if oc_ok else " — no code fits: lower the sense resistance or amplifier gain "
                        "(more full scale), or shorten the peak at high supply (pull_in.compensate = true)")))
    order = [("open load", adc.open_load_code), ("hold", adc.hold_code), ("pull-in", adc.pull_in_code),
             ("over-current", adc.over_current_code)]
    ok = all(a[1] < b[1] for a, b in zip(order, order[1:])) and adc.open_load_code >= 1
    text = " < ".join(f"{name} {code}" for name, code in order)
    out.append(Check("adc_thresholds", bool(ok),
                     f"codes {text} (of {max_code})"
                     + ("" if ok else " — the thresholds collapse: one code is "
                        f"{adc.full_scale_current_a / 2**drive.board.adc.bits * 1e3:.3g} mA; raise the sense "
                        "resistance or amplifier gain so that the hold current spans more codes")))
    return out


def energy_checks(drive: Drive, release: ReleaseResult) -> list[Check]:
    """The worst turn-off's energy into each freewheel element against its single-pulse
    rating x ``energy_derating`` (common practice); a warning where no rating is given."""
    fw = drive.freewheel
    out = []
    worst_e: dict[str, tuple[float, str]] = {}
    for off in release.turn_offs:
        for name, e in off["elements_j"].items():
            if e > worst_e.get(name, (-1.0, ""))[0]:
                worst_e[name] = (e, off["event"])
    for name, (e, event) in worst_e.items():
        if name == "bypass" or e <= 0:
            continue
        what = f"the {event} puts up to {e * 1e3:.3g} mJ into the {ELEMENT_NAMES[name]} in one pulse"
        rating = getattr(fw, f"{name}_energy_rating")
        if rating > 0:
            limit = rating * fw.energy_derating
            ok = e <= limit
            out.append(Check(f"{name}_energy", ok, f"{what} vs {limit * 1e3:.3g} mJ ({fw.energy_derating:.0%} "
                             f"of the {rating * 1e3:.3g} mJ single-pulse rating, energy derating: common "
                             "practice)" + ("" if ok else " — a part rated for more energy, or a lower "
                                           "over-current threshold")))
        else:
            out.append(Check(f"{name}_energy", False, f"{what}; the board gives no freewheel.{name}_energy_rating "
                             "to check it against", severity="warning"))
    return out


def cautions(drive: Drive, hold: HoldResult, release: ReleaseResult) -> list[str]:
    out = [
        f"Turning the coil off makes the switch see up to {release.peak_switch_voltage_v:.3g} V: keep the "
        f"freewheel path ({release.freewheel}) fitted and rated; never open the coil circuit while current flows.",
        f"A turn-off dumps up to {release.energy_j * 1e3:.3g} mJ into the freewheel path (worst: "
        f"{release.worst_turn_off or 'the release'}); check its single-pulse energy and average-power "
        "rating at the highest actuation rate.",
        f"The coil settles at up to {hold.coil_temp_c:.0f} degC during a long hold; hot coils burn and "
        "insulation ages fast above its class rating.",
        SAFETY_CAUTION,
    ]
    return out


#: The caution every design ends with.
SAFETY_CAUTION = ("These figures are a design aid, not a safety approval: for mains-connected or "
                  "safety-relevant equipment follow local codes and licensed practice.")


def loss_checks(drive: Drive, hold: HoldResult, loss: HoldLosses, grid: CornerGrid,
                 split: SplitDecayResult | None) -> list[Check]:
    """The hold's average power in each freewheel element and in the switch against the
    board's ratings x derating (common practice); a warning where no rating is given.
    With split decay, the bypass timing."""
    fw, sw = drive.freewheel, drive.switch
    out: list[Check] = []
    fix = (" — fit split decay (a bypass switch across the fast element during the hold), lower "
           "the hold current, or use a part rated for more" if hold.split_decay_saving else
           " — lower the hold current or use a part rated for more")
    for name, p in loss.elements().items():
        if not np.any(p > 0):
            continue
        k = worst(p)
        worst_w = float(p[k])
        what = f"the hold puts {worst_w:.3g} W into the {ELEMENT_NAMES[name]} ({grid.label(k)})"
        rating = getattr(fw, f"{name}_power_rating")
        check = f"{name}_power"
        if rating > 0:
            limit = rating * fw.power_derating
            ok = worst_w <= limit
            out.append(Check(check, ok, f"{what} vs {limit:.3g} W ({fw.power_derating:.0%} of the "
                             f"{rating:.3g} W rating, power derating: common practice)"
                             + ("" if ok else fix)))
        else:
            out.append(Check(check, False, f"{what}; the board gives no freewheel.{name}_power_rating "
                             "to check it against", severity="warning"))
    sw_p = np.broadcast_to(loss.switch, loss.freewheel.shape)
    k = worst(sw_p)
    how = (f"conduction {float(loss.switch_conduction[k]):.3g} W + switching "
           f"{float(np.broadcast_to(loss.switch_switching, sw_p.shape)[k]):.3g} W"
           if sw.rise_time > 0 or sw.fall_time > 0 else
           "conduction only (no switch.rise_time/fall_time: switching loss not estimated)")
    what = f"the hold puts {float(sw_p[k]):.3g} W into the switch ({how}, {grid.label(k)})"
    if sw.power_rating > 0:
        limit = sw.power_rating * sw.power_derating
        ok = float(sw_p[k]) <= limit
        out.append(Check("switch_power", ok, f"{what} vs {limit:.3g} W ({sw.power_derating:.0%} of "
                         f"the {sw.power_rating:.3g} W rating, power derating: common practice)"
                         + ("" if ok else " — a switch with a lower on-resistance or faster edges, or more cooling")))
    else:
        out.append(Check("switch_power", False, f"{what}; the board gives no switch.power_rating to "
                         "check it against", severity="warning"))
    if fw.split_decay and fw.type == "diode":
        out.append(Check("split_decay", False, "split_decay has nothing to bypass on a plain diode "
                         "path (the hold and the release both decay slowly)", severity="warning"))
    elif split is not None:
        rate = split.count_rate_hz
        if split.lead_counts > 0:
            ok = split.lead_counts <= split.on_time_counts
            out.append(Check("bypass_timing", ok,
                             f"the bypass opens {fw.bypass_lead * 1e6:.4g} us ({split.lead_counts} counts) "
                             f"before the final turn-off, within the last on-time of "
                             f"{split.on_time_counts / rate * 1e6:.4g} us ({split.on_time_counts} counts)"
                             + ("" if ok else " — shorten freewheel.bypass_lead to at most the hold "
                                "on-time: it would open during an off-time")))
        elif split.lag_counts > 0 or fw.bypass_lead < 0:
            out.append(Check("bypass_timing", False,
                             f"the bypass opens {-fw.bypass_lead * 1e6:.4g} us ({split.lag_counts} counts) "
                             "after the final turn-off: the release decays slowly until then (the "
                             "release time includes it) — open it before the turn-off",
                             severity="warning"))
        else:
            out.append(Check("bypass_timing", False,
                             "the bypass opens with the final turn-off (bypass_lead = 0): the bypass "
                             "switch's own turn-off delay slows the start of the release — give "
                             "freewheel.bypass_lead of at least that delay", severity="warning"))
    return out


def loss_cautions(drive: Drive, hold: HoldResult, release: ReleaseResult,
                   split: SplitDecayResult | None) -> list[str]:
    parts = ", ".join(f"{ELEMENT_NAMES[n]} {w:.3g} W" for n, w in hold.freewheel_elements_w.items())
    out = [
        f"During a long hold the switches take up to {hold.switch_power_w:.3g} W (the current "
        "recirculates through them; no freewheel element takes power): size them and their cooling "
        "from the datasheets' derating curves at the highest ambient."] if not parts else [
        f"During a long hold the freewheel path takes up to {hold.freewheel_power_w:.3g} W ({parts}) "
        f"and the switch {hold.switch_power_w:.3g} W: parts taking watts get hot enough to burn; size "
        "them and their cooling from the datasheets' derating curves at the highest ambient."]
    if split is not None:
        out.append(
            "Split decay relies on the bypass switch: if it stays on at the release the current "
            f"decays slowly through the diode (the load lets go late); if it fails open the "
            f"{drive.freewheel.type} path takes the hold power. Keep the {drive.freewheel.type} "
            f"rated for the release energy ({release.energy_j * 1e3:.3g} mJ) and verify both "
            "paths on the bench.")
    return out
