"""The firmware header: a Design rendered as C constants through a Jinja2 template.

:class:`HeaderView` wraps a :class:`~coildrive.design.Design` and adds only C concerns
(names, integer types, literal suffixes); the template is
``codegen_templates/drive_header.h.j2``. :func:`generate_header` is pure: Design in,
text out.
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass

from ..design.peak import allowance_words
from ..design.result import Design
from ..errors import InputError
from ..resources import data_dir

_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class Constant:
    """One ``#define``: C name, integer value, what it is."""

    name: str
    value: int
    comment: str

    @property
    def literal(self) -> str:
        """Integer literal with a suffix: ``U`` when it fits 16 bits, else ``UL``."""
        if self.value < 0:
            raise ValueError(f"{self.name} is negative")
        return f"{self.value}U" if self.value <= 0xFFFF else f"{self.value}UL"


def c_uint_type(max_value: int) -> str:
    """Smallest of uint8_t/uint16_t/uint32_t that holds ``max_value``."""
    if max_value <= 0xFF:
        return "uint8_t"
    if max_value <= 0xFFFF:
        return "uint16_t"
    return "uint32_t"


def check_prefix(prefix: str) -> str:
    """A C identifier prefix, or :class:`InputError` naming ``--prefix``."""
    if not _IDENT.match(prefix):
        raise InputError("--prefix", "", f"{prefix!r} is not a C identifier, expected e.g. VALVE1")
    return prefix


class HeaderView:
    """C-facing view of a design: macro prefix, constants, table types and entries."""

    def __init__(self, design: Design, prefix: str = "COIL"):
        self.design = design
        self.macro = check_prefix(prefix).upper()
        self.lower = prefix.lower()
        d = design
        t = d.timer
        a = d.adc
        board = d.drive.board
        self.guard = f"{self.macro}_DRIVE_H"
        self.compare_type = c_uint_type(t.period_ticks)
        self.adc_type = c_uint_type(2**board.adc.bits - 1)
        m = self.macro
        self.constants = [
            Constant(f"{m}_TIMER_CLOCK_HZ", round(t.clock_hz), "timer input clock"),
            Constant(f"{m}_TIMER_PRESCALER", t.prescaler, "clock divide ratio"),
            Constant(f"{m}_TIMER_PRESCALER_REG", t.prescaler - 1, "divide ratio - 1, for timers that take it so"),
            Constant(f"{m}_TIMER_PRESCALER_MAX", board.timer.prescaler_max, "largest divide ratio of this timer"),
            Constant(f"{m}_TIMER_COUNTER_MAX", 2**board.timer.bits - 1, f"{board.timer.bits}-bit counter"),
            Constant(f"{m}_TIMER_PERIOD_COUNTS", t.period_ticks, "timer counts per PWM period"),
            Constant(f"{m}_TIMER_RELOAD", t.period_ticks - 1, "period - 1, for auto-reload registers"),
            Constant(f"{m}_HOLD_COMPARE_COUNTS", t.compare_ticks,
                     f"on-time counts of the hold (duty {d.hold.duty:.4f})"
                     + (": the table's first entry, safe at every supply" if d.hold.regulation == "supply_table" else "")),
            Constant(f"{m}_REGULATION_FIXED", 0, "hold regulation: one compare value"),
            Constant(f"{m}_REGULATION_SUPPLY_TABLE", 1, "hold regulation: compare looked up against the supply"),
            Constant(f"{m}_REGULATION_CURRENT", 2, "hold regulation: current mode (thresholds below)"),
            Constant(f"{m}_PEAK_COMPENSATED", int(d.peak_table is not None),
                     "1: peak ticks looked up against the supply (peak table below)"),
            Constant(f"{m}_HOLD_FREQUENCY_HZ", round(t.frequency_hz),
                     f"hold PWM frequency as the timer makes it ({t.frequency_hz:.6g} Hz)"),
            Constant(f"{m}_TICK_RATE_HZ", round(board.tick.rate), "scheduler tick rate"),
            Constant(f"{m}_PEAK_TICKS", d.pull_in.peak_ticks or 0, _peak_comment(d)),
            Constant(f"{m}_RELEASE_LOCKOUT_TICKS", d.release.lockout_ticks,
                     f"wait after turn-off before re-actuating: current is zero after "
                     f"{d.release.zero_time_s * 1e3:.4g} ms"
                     + ("" if d.armature is None else
                        f", armature open after {d.release.time_s * 1e3:.4g} ms")),
            Constant(f"{m}_ADC_BITS", board.adc.bits, "ADC resolution"),
            Constant(f"{m}_ADC_MAX_CODE", 2**board.adc.bits - 1, "ADC full-scale code"),
            Constant(f"{m}_ADC_PULL_IN_CODE", a.pull_in_code, f"pull-in current {d.pull_in.current_a:.4g} A"),
            Constant(f"{m}_ADC_HOLD_CODE", a.hold_code, f"hold current {d.hold.current_a:.4g} A"),
            Constant(f"{m}_ADC_OVER_CURRENT_CODE", a.over_current_code,
                     f"over-current {a.over_current_a:.4g} A: turn off"),
            Constant(f"{m}_ADC_OPEN_LOAD_CODE", a.open_load_code,
                     f"open load below {a.open_load_a:.4g} A (with the switch on)"),
            Constant(f"{m}_SUPPLY_MIN_CODE", a.supply_min_code, f"supply sense at {d.drive.supply.min:.4g} V"),
            Constant(f"{m}_SUPPLY_MAX_CODE", a.supply_max_code, f"supply sense at {d.drive.supply.max:.4g} V"),
        ]
        if d.duty_table.adc_codes:
            self.constants.append(Constant(f"{m}_DUTY_TABLE_LEN", len(d.duty_table.adc_codes),
                                           "entries in the duty table"))
        if d.peak_table is not None:
            self.constants.append(Constant(f"{m}_PEAK_TABLE_LEN", len(d.peak_table.adc_codes),
                                           "entries in the peak table"))
        if d.hold.regulation == "closed_loop":
            at = next(i for i, c in enumerate(self.constants) if c.name == f"{m}_REGULATION_CURRENT")
            self.constants.insert(at + 1, Constant(f"{m}_REGULATION_CLOSED_LOOP", 3,
                                                   "hold regulation: PI loop on the sampled current"))
        self.regulation = {"fixed": "FIXED", "supply_table": "SUPPLY_TABLE",
                           "current": "CURRENT", "closed_loop": "CLOSED_LOOP"}[d.hold.regulation]
        self.peak_table = ([] if d.peak_table is None else
                           list(zip(d.peak_table.adc_codes, d.peak_table.peak_ticks, d.peak_table.supply_v)))
        self.peak_type = c_uint_type(max([p[1] for p in self.peak_table], default=1))
        self.regulation_words = {
            "fixed": f"fixed duty {d.hold.duty:.4f}",
            "supply_table": f"duty table against the supply (first entry {d.hold.duty:.4f})",
            "current": "current mode (fixed-duty fallback below)",
            "closed_loop": "closed-loop PI on the sampled current"}[d.hold.regulation]
        if d.armature is not None:
            self.constants += _armature_constants(d, m)
        self.bypass_constants = _bypass_constants(d, m)
        self.boost_constants = _boost_constants(d, m)
        self.topology_constants, self.topology = _topology_constants(d, m)
        self.bridge_bits, self.bridge_phases = _bridge_constants(d, m)
        self.table = list(zip(d.duty_table.adc_codes, d.duty_table.compare_ticks, d.duty_table.supply_v))
        self.constants = _current_relabel_fallback(d, m, self.constants)
        self.current_constants = _current_header_constants(d, m)
        self.current_checks = (_current_header_checks(d, m) + _loop_header_checks(d, m)
                               + _boost_header_checks(d, m)
                               + _mixed_header_checks(d, m))
        self.current_summary = _current_header_summary(d) + _loop_header_summary(d)
        self.loop_constants = _loop_header_constants(d, m)

    def value(self, suffix: str) -> int:
        return next(c.value for c in self.constants if c.name == f"{self.macro}_{suffix}")


def _peak_comment(d: Design) -> str:
    p = d.pull_in
    if p.peak_ticks is None:
        return "no peak: " + (p.not_reached or "the pull-in current is not reached")
    if d.boost is not None:
        return (f"boosted peak time-out: {p.peak_time_s * 1e3:.4g} ms (longest peak to the threshold "
                f"{d.boost.time_to_threshold_s * 1e3:.4g} ms x {p.margin:g}, +1 tick)")
    how = (f"worst pull-in {p.time_s * 1e3:.4g} ms x {p.margin:g}" if p.governed_by == "time margin" else
           f"{p.current_margin:g} x pull-in current by the shortest peak")
    text = f"peak phase: {p.peak_time_s * 1e3:.4g} ms ({how}, {allowance_words(p, d.drive.board.tick.rate)})"
    return text + ("; the longest entry of the peak table" if p.compensated else "")


def _armature_constants(d: Design, m: str) -> list[Constant]:
    """With an ``[armature]``: the window in which the firmware should see the current dip
    (the seat moment) and the time until the armature is back open, in scheduler ticks."""
    a = d.armature
    rate = d.drive.board.tick.rate
    if not (math.isfinite(a.seat_time_min_s) and math.isfinite(a.seat_time_s)
            and math.isfinite(a.release_open_time_s)):
        return []
    return [
        Constant(f"{m}_SEAT_EARLIEST_TICKS", math.floor(a.seat_time_min_s * rate + 1e-9),
                 f"earliest armature seat (current dip) {a.seat_time_min_s * 1e3:.4g} ms after on"),
        Constant(f"{m}_SEAT_LATEST_TICKS", math.ceil(a.seat_time_s * rate - 1e-9),
                 f"latest armature seat {a.seat_time_s * 1e3:.4g} ms (worst corner)"),
        Constant(f"{m}_RELEASE_OPEN_TICKS", math.ceil(a.release_open_time_s * rate - 1e-9),
                 f"armature back open {a.release_open_time_s * 1e3:.4g} ms after off (worst corner)"),
    ]


#: ``[switch] topology`` -> its number in the header (``PREFIX_TOPOLOGY_...``).
TOPOLOGY_NUMBERS = {"low_side": 0, "high_side": 1, "full_bridge": 2}


def _topology_constants(d: Design, m: str) -> tuple[list[Constant], str]:
    """For a switch that is not low-side: the topology numbers and the macro naming this
    design's (``PREFIX_SWITCH_TOPOLOGY``); a low-side header has neither (its bytes stay
    as they were: no topology macro means a low-side switch)."""
    t = d.topology
    if t is None:
        return [], ""
    out = [Constant(f"{m}_TOPOLOGY_{name.upper()}", number, f"switch topology: {name.replace('_', ' ')}")
           for name, number in TOPOLOGY_NUMBERS.items()]
    if t.bridge is not None and t.bridge.hold_decay == "mixed":
        cm = d.hold.current_mode
        how = ("the current-mode one-shot times HOLD_OFF_FAST_TICKS, then HOLD_OFF_SLOW_TICKS"
               if cm is not None and cm.control != "hysteretic" else
               "the hysteretic one-shot's HOLD_OFF_FAST_TICKS are this of the nominal slow-decay off-time"
               if cm is not None else
               "fast counts of each off-time = ((PERIOD - compare) x this + 32768) >> 16")
        out.append(Constant(f"{m}_HOLD_FAST_Q16", round(t.bridge.hold_fast_fraction * 65536),
                            f"mixed decay: {how} ({t.bridge.hold_fast_fraction:.4g} of it)"))
    return out, f"{m}_TOPOLOGY_{t.name.upper()}"


def _mixed_header_checks(d: Design, m: str) -> list[tuple[str, str]]:
    """With mixed decay: its fraction within the off-time."""
    t = d.topology
    if t is None or t.bridge is None or t.bridge.hold_decay != "mixed":
        return []
    return [(f"{m}_HOLD_FAST_Q16 > 65536", "mixed decay: the fast part is longer than the off-time")]


#: The bridge's switches: header name and what each is.
BRIDGE_SWITCHES = {"high_a": ("HIGH_A", "Q1: leg A to the bus"), "low_a": ("LOW_A", "Q2: leg A to the rail"),
                   "high_b": ("HIGH_B", "Q3: leg B to the bus"), "low_b": ("LOW_B", "Q4: leg B to the rail")}
#: The bridge's phases: header name and what the phase does.
BRIDGE_PHASES = {"peak": ("PEAK", "peak (PEAK_TICKS): the coil across the bus, A to B"),
                 "hold_on": ("HOLD_ON", "hold on-time (HOLD_COMPARE_COUNTS of each period): as the peak"),
                 "hold_decay": ("HOLD_DECAY", "hold off-time (the rest of the period): slow decay, "
                                              "recirculating"),
                 "release": ("RELEASE", "release and fault: all open, fast decay into the bus "
                                        "(RELEASE_LOCKOUT_TICKS)")}


def _bridge_constants(d: Design, m: str) -> tuple[list[Constant], list[Constant]]:
    """A full bridge's switch bits and, per phase, the mask of the switches on (the
    Design's ``topology.bridge.switches_on``); empty for one switch."""
    b = None if d.topology is None else d.topology.bridge
    if b is None:
        return [], []
    from ..model.bridge import SWITCHES, switch_mask  # the bit order
    bits = [Constant(f"{m}_BRIDGE_{BRIDGE_SWITCHES[n][0]}", 1 << k, BRIDGE_SWITCHES[n][1])
            for k, n in enumerate(SWITCHES)]
    phases = []
    for phase, names in b.switches_on.items():
        mask = switch_mask(names)
        on = " + ".join(BRIDGE_SWITCHES[n][1].split(":")[0] for n in names) or "none"
        what = BRIDGE_PHASES[phase][1]
        if phase == "peak" and d.boost is not None:   # the boost switch feeds Q1's rail
            what = what.replace("across the bus", "across the boost (with the boost switch)")
        phases.append(Constant(f"{m}_BRIDGE_{BRIDGE_PHASES[phase][0]}_SWITCHES", mask, f"{on} on -- {what}"))
    return bits, phases


def boost_min_interval_ticks(d: Design) -> int:
    """BOOST_MIN_INTERVAL_TICKS: the shortest switch-on to switch-on of a boosted peak in
    whole ticks, rounded up (0 without a boost's recharge time)."""
    if d.boost is None or d.boost.min_interval_s is None:
        return 0
    return math.ceil(d.boost.min_interval_s * d.drive.board.tick.rate - 1e-9)


def _boost_constants(d: Design, m: str) -> list[Constant]:
    """With a boosted peak: its threshold code, time-out and the boost's recharge, in ticks."""
    b = d.boost
    if b is None or b.timeout_ticks is None:
        return []
    rate = d.drive.board.tick.rate
    out = [
        Constant(f"{m}_BOOST_PEAK", 1, f"the peak runs from the {b.boost_v:.4g} V boost"),
        Constant(f"{m}_BOOST_THRESHOLD_CODE", b.threshold_code,
                 f"end the peak at or above {b.threshold_a:.4g} A (current-sense code)"),
        Constant(f"{m}_BOOST_TIMEOUT_TICKS", b.timeout_ticks,
                 f"no threshold by then: a fault (longest peak {b.time_to_threshold_s * 1e3:.4g} ms x "
                 f"{d.pull_in.margin:g}, +1 tick)"),
    ]
    if b.recharge_time_s is not None:
        out += [
            Constant(f"{m}_BOOST_RECHARGE_TICKS", math.ceil(b.recharge_time_s * rate - 1e-9),
                     f"the boost takes {b.recharge_time_s * 1e3:.4g} ms to put back "
                     f"{b.energy_j * 1e3:.4g} mJ at {b.power_w:.4g} W"),
            Constant(f"{m}_BOOST_MIN_INTERVAL_TICKS", boost_min_interval_ticks(d),
                     f"shortest switch-on to switch-on ({b.min_interval_s * 1e3:.4g} ms)"),
        ]
    return out


def _boost_header_checks(d: Design, m: str) -> list[tuple[str, str]]:
    if not _boost_constants(d, m):
        return []
    return [(f"{m}_BOOST_THRESHOLD_CODE >= {m}_ADC_OVER_CURRENT_CODE || {m}_BOOST_THRESHOLD_CODE < {m}_ADC_PULL_IN_CODE",
             "boost threshold outside pull-in .. over-current"),
            (f"{m}_BOOST_TIMEOUT_TICKS != {m}_PEAK_TICKS", "boost time-out differs from the peak ticks")]


def _bypass_constants(d: Design, m: str) -> list[Constant]:
    """With split decay: the bypass pin's timing in PWM-timer counts (at the timer's count
    rate, clock / prescaler) relative to the main switch's final turn-off."""
    s = d.split_decay
    if s is None:
        return []
    return [
        Constant(f"{m}_SPLIT_DECAY", 1, f"hold via {s.hold_path}; release via {s.release_path}"),
        Constant(f"{m}_BYPASS_LEAD_COUNTS", s.lead_counts,
                 f"open the bypass this many timer counts before the final turn-off "
                 f"({s.lead_counts / s.count_rate_hz * 1e6:.4g} us, inside the last on-time)"),
        Constant(f"{m}_BYPASS_LAG_COUNTS", s.lag_counts,
                 f"or this many counts after it ({s.lag_counts / s.count_rate_hz * 1e6:.4g} us; "
                 "0 = not late)"),
    ]


# --------------------------------------------------------------------------- current mode
def _current_header_constants(design: Design, macro: str) -> list[Constant]:
    """Extra header macros of a current-mode design (empty for voltage mode)."""
    r = design.hold.current_mode
    if r is None:
        return []
    m = macro
    if r.control == "hysteretic":
        out = [
            Constant(f"{m}_HOLD_HYSTERETIC", 1, "current-mode hold: hysteretic band"),
            Constant(f"{m}_HOLD_LOWER_CODE", r.lower_code, f"switch on below {r.lower_a:.4g} A"),
            Constant(f"{m}_HOLD_UPPER_CODE", r.upper_code, f"switch off at or above {r.upper_a:.4g} A"),
        ]
        if r.off_fast_ticks is not None:   # a full bridge's mixed decay: a one-shot for the fast part
            out += [Constant(f"{m}_HOLD_OFF_PRESCALER", r.off_prescaler, "fast-part one-shot's timer divide ratio"),
                    Constant(f"{m}_HOLD_OFF_FAST_TICKS", r.off_fast_ticks,
                             f"mixed decay: each off-time all four open for {r.fast_time_s * 1e6:.5g} us "
                             "(or to the lower threshold), then Q2 + Q4")]
        return out
    out = [
        Constant(f"{m}_HOLD_OFF_TIME", 1, "current-mode hold: peak threshold + fixed off time"),
        Constant(f"{m}_HOLD_PEAK_CODE", r.upper_code, f"switch off at or above {r.upper_a:.4g} A"),
        Constant(f"{m}_HOLD_OFF_PRESCALER", r.off_prescaler, "off-time timer divide ratio"),
        Constant(f"{m}_HOLD_OFF_TICKS", r.off_ticks, f"off time {r.off_time_s * 1e6:.5g} us"),
    ]
    if r.off_fast_ticks is not None:   # a full bridge's mixed decay: the one-shot twice
        tick = r.off_time_s / r.off_ticks
        slow = r.off_ticks - r.off_fast_ticks
        out += [Constant(f"{m}_HOLD_OFF_FAST_TICKS", r.off_fast_ticks,
                         f"mixed decay: each off-time's fast part, all four open ({r.off_fast_ticks * tick * 1e6:.5g} us)"),
                Constant(f"{m}_HOLD_OFF_SLOW_TICKS", slow,
                         f"then its slow rest, Q2 + Q4 ({slow * tick * 1e6:.5g} us; 0: none)")]
    return out


def _current_relabel_fallback(design: Design, macro: str, constants: list) -> list:
    """In a current-mode header, say that the PWM compare and frequency are the fixed-duty
    fallback (voltage-mode headers are returned unchanged)."""
    if design.hold.current_mode is None:
        return constants
    fallback = design.timer.compare_ticks / design.timer.period_ticks
    notes = {f"{macro}_HOLD_COMPARE_COUNTS": f"fixed-duty fallback: on-time counts (duty {fallback:.4f})",
             f"{macro}_HOLD_FREQUENCY_HZ": f"fixed-duty fallback PWM frequency ({design.timer.frequency_hz:.6g} Hz)"}
    return [dataclasses.replace(c, comment=notes[c.name]) if c.name in notes else c for c in constants]


def _current_header_summary(design: Design) -> list[str]:
    """Summary lines of the current-mode hold for the header comment (empty for voltage)."""
    r = design.hold.current_mode
    if r is None:
        return []
    what = (f"hysteretic {r.lower_a:.4g}..{r.upper_a:.4g} A" if r.control == "hysteretic" else
            f"peak {r.upper_a:.4g} A, off {r.off_time_s * 1e6:.5g} us")
    return [f"current   mode hold, {what}: switching {r.min_frequency_hz:.5g}..{r.max_frequency_hz:.5g} Hz "
            f"over the corners, the coil cold to settled (nominal {r.nominal_frequency_hz:.5g} Hz); the PWM "
            "compare below is the fixed-duty fallback"]


def _current_header_checks(design: Design, macro: str) -> list[tuple[str, str]]:
    """``(condition, message)`` pairs for ``#if ... #error`` in a current-mode header."""
    r = design.hold.current_mode
    if r is None:
        return []
    m = macro
    if r.control == "hysteretic":
        return [(f"{m}_HOLD_LOWER_CODE >= {m}_HOLD_UPPER_CODE || {m}_HOLD_LOWER_CODE < 1",
                 "hysteretic thresholds out of order"),
                (f"{m}_HOLD_UPPER_CODE >= {m}_ADC_OVER_CURRENT_CODE",
                 "upper hold threshold at or above the over-current threshold")] + (
            [] if r.off_fast_ticks is None else [
                (f"{m}_HOLD_OFF_FAST_TICKS < 2 || {m}_HOLD_OFF_FAST_TICKS - 1U > {m}_TIMER_COUNTER_MAX",
                 "mixed decay: the fast part does not fit the timer counter"),
                (f"{m}_HOLD_OFF_PRESCALER < 1 || {m}_HOLD_OFF_PRESCALER > {m}_TIMER_PRESCALER_MAX",
                 "fast-part one-shot's prescaler outside the timer's range")])
    return [(f"{m}_HOLD_PEAK_CODE >= {m}_ADC_OVER_CURRENT_CODE",
             "peak hold threshold at or above the over-current threshold"),
            (f"{m}_HOLD_OFF_TICKS < 2 || {m}_HOLD_OFF_TICKS - 1U > {m}_TIMER_COUNTER_MAX",
             "off time does not fit the timer counter"),
            (f"{m}_HOLD_OFF_PRESCALER < 1 || {m}_HOLD_OFF_PRESCALER > {m}_TIMER_PRESCALER_MAX",
             "off-time prescaler outside the timer's range")] + ([] if r.off_fast_ticks is None else [
            (f"{m}_HOLD_OFF_FAST_TICKS < 2 || {m}_HOLD_OFF_FAST_TICKS + {m}_HOLD_OFF_SLOW_TICKS != "
             f"{m}_HOLD_OFF_TICKS || ({m}_HOLD_OFF_SLOW_TICKS > 0 && {m}_HOLD_OFF_SLOW_TICKS < 2)",
             "mixed decay: the off-time's fast and slow parts do not fit the one-shot")])


# --------------------------------------------------------------------------- closed loop
def _loop_header_constants(design: Design, macro: str) -> list[Constant]:
    """The closed-loop hold's set-point, fixed-point gains and limits (empty otherwise)."""
    r = design.hold.closed_loop
    if r is None:
        return []
    m = macro
    return [
        Constant(f"{m}_LOOP_SETPOINT_CODE", r.setpoint_code,
                 f"current-sense code the loop holds ({r.setpoint_a:.4g} A as read)"),
        Constant(f"{m}_LOOP_SAMPLE_MID_ON", int(r.sample_point == "middle of the on-time"),
                 f"1: convert in the middle of the on-time; 0: of the period ({r.sample_point})"),
        Constant(f"{m}_LOOP_KP", r.kp_q, f"proportional gain x 2^SHIFT ({r.kp:.5g} counts per code)"),
        Constant(f"{m}_LOOP_KI", r.ki_q, f"integral gain x 2^SHIFT ({r.ki:.5g} counts per code per period)"),
        Constant(f"{m}_LOOP_SHIFT", r.gain_shift, "fixed-point shift of the gains and the integrator"),
        Constant(f"{m}_LOOP_MIN_COMPARE", r.min_compare,
                 "least on-time counts" + (" (the mid-on-time sample needs an on-time)"
                                           if r.min_compare else "")),
        Constant(f"{m}_LOOP_MAX_COMPARE", r.max_compare,
                 f"most on-time counts ({r.max_duty_limit:.0%} duty: headroom for the loop)"),
        Constant(f"{m}_LOOP_INTEGRATOR_MIN", r.integrator_min, "integrator floor (MIN_COMPARE x 2^SHIFT)"),
        Constant(f"{m}_LOOP_INTEGRATOR_MAX", r.integrator_max, "integrator ceiling (MAX_COMPARE x 2^SHIFT)"),
        Constant(f"{m}_LOOP_PRELOAD_COMPARE", r.preload_compare,
                 "the integrator starts each hold here: the most duty any corner settles at"),
    ]


def _loop_header_summary(design: Design) -> list[str]:
    r = design.hold.closed_loop
    if r is None:
        return []
    return [f"loop      set-point {r.setpoint_code} codes, sampled in the {r.sample_point}; crossover "
            f"{r.crossover_min_hz:.4g}..{r.crossover_max_hz:.4g} Hz, phase margin >= "
            f"{r.phase_margin_deg:.1f} deg, gain margin >= {r.gain_margin_db:.1f} dB, settles in "
            f"{r.settling_time_s * 1e3:.3g} ms; duty {r.min_duty:.4f}..{r.max_duty:.4f} over the corners"]


def _loop_header_checks(design: Design, macro: str) -> list[tuple[str, str]]:
    if design.hold.closed_loop is None:
        return []
    m = macro
    return [(f"{m}_LOOP_SETPOINT_CODE >= {m}_ADC_OVER_CURRENT_CODE || {m}_LOOP_SETPOINT_CODE < 1",
             "loop set-point outside 1 .. over-current"),
            (f"{m}_LOOP_MIN_COMPARE > {m}_LOOP_MAX_COMPARE || {m}_LOOP_MAX_COMPARE > {m}_TIMER_PERIOD_COUNTS",
             "loop compare limits out of order"),
            (f"{m}_LOOP_PRELOAD_COMPARE < {m}_LOOP_MIN_COMPARE || {m}_LOOP_PRELOAD_COMPARE > {m}_LOOP_MAX_COMPARE",
             "loop preload outside its limits"),
            (f"{m}_LOOP_INTEGRATOR_MAX + {m}_LOOP_KP * ({m}_ADC_MAX_CODE + 1UL) > 2147483647UL || "
             f"{m}_LOOP_INTEGRATOR_MAX + {m}_LOOP_KI * ({m}_ADC_MAX_CODE + 1UL) > 2147483647UL",
             "loop arithmetic would overflow 32 bits")]


def generate_header(design: Design, prefix: str = "COIL") -> str:
    """Render the C header for ``design``; ``prefix`` names the macros (``PREFIX_...``)."""
    import jinja2  # only the header path pays for it

    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(data_dir("codegen_templates"))),
        undefined=jinja2.StrictUndefined, keep_trailing_newline=True,
        trim_blocks=True, lstrip_blocks=True,
    )
    view = HeaderView(design, prefix)
    return env.get_template("drive_header.h.j2").render(v=view, d=design)
