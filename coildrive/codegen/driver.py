"""The reference peak-and-hold driver in C: a Design rendered through Jinja2 templates.

:func:`render_driver` is pure (Design in, ``{filename: text}`` out): the design header
(as ``design --header`` writes it) plus ``<prefix>_driver.h`` / ``.c`` from
``codegen_templates/driver/``. :class:`DriverView` adds only C concerns (names, integer
types) and the few diagnostic figures the driver needs that the Design does not state;
each comes from Design fields by a rule written beside it (and in docs/firmware.md).

:func:`budget_notes` says what the driver's handlers take of their periods at the
board's clock: cycle counts measured on a simulated 8-bit target (simavr), or for a board
whose ``core`` is a Cortex-M, cycle bounds from the instructions QEMU executed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..bench.messages import EventKind, FaultCode
from ..design.result import Design
from ..errors import InputError
from ..resources import data_dir
from .header import Constant, boost_min_interval_ticks, c_uint_type, check_prefix, generate_header

#: Conversions after each switch-on whose current is not tested for over-current: the
#: first one can carry the switching edge (diode reverse recovery, the sense filter
#: settling), later ones are taken half an on-time or more from an edge (common practice).
OC_BLANK_SAMPLES = 1
#: Supply conversions out of range in a row before the supply fault: a single spike is
#: filtered, a real brown-out is seen within a few PWM periods (common practice).
SUPPLY_SAMPLES = 4
#: Event kinds the driver reports through its event hook.
DRIVER_EVENTS = (EventKind.ON, EventKind.PEAK_END, EventKind.OFF, EventKind.FAULT)


def regulation_of(design: Design) -> str:
    """How the hold regulates: the Design's ``hold.regulation`` where it has one, else
    ``"current"`` for a current-mode hold and ``"supply_table"`` for a voltage-mode one
    (every design header carries the table)."""
    declared = getattr(design.hold, "regulation", None)
    if declared:
        return str(declared)
    return "current" if design.hold.current_mode is not None else "supply_table"


def open_load_ticks(design: Design) -> int:
    """Ticks without a sample at or above the open-load code before the open-load fault.

    Rule: the worst-corner pull-in time (``pull_in.time_s``) bounds the time the current
    needs to reach the open-load current, which is below the pull-in current (the header
    checks it), at every corner; one tick more covers the tick's phase. In the hold every
    sample is above the open-load code, so the same count also catches a wire that breaks
    while held.
    """
    return math.ceil(design.pull_in.time_s * design.drive.board.tick.rate - 1e-9) + 1


def dip_codes(design: Design) -> int:
    """The fall and the climb in ADC codes that mark the armature's seat in the current dip:
    the design's (:func:`coildrive.design.diagnostics.dip_codes`, a quarter of the
    shallowest dip over the corners, at least four codes)."""
    if design.seat_check is not None:
        return design.seat_check.dip_codes
    from ..design.diagnostics import dip_codes as rule
    return rule(design.drive, [c.armature.get("dip_depth_a", math.nan) for c in design.corners if c.armature])


def seat_grace_ticks(design: Design) -> int:
    """Ticks past SEAT_LATEST_TICKS that a seat is still taken and the stuck check waits.

    Rule: the seat is seen when the current has climbed DIP_CODES above the bottom of the
    dip; the design's longest climb after the seat (``seat_check.climb_s``) in ticks,
    rounded up, + 1 for the tick's phase (as the open-load ticks)."""
    sc = design.seat_check
    climb = sc.climb_s if sc is not None and math.isfinite(sc.climb_s) else 0.0
    return math.ceil(climb * design.drive.board.tick.rate - 1e-9) + 1


def file_names(view, prefix: str) -> None:
    """Set a driver view's C names from ``prefix`` (checked): ``lower``, ``macro``, the
    three file names and the header guard."""
    check_prefix(prefix)
    view.lower = prefix.lower()
    view.macro = prefix.upper()
    view.drive_header = f"{view.lower}_drive.h"
    view.header_name = f"{view.lower}_driver.h"
    view.source_name = f"{view.lower}_driver.c"
    view.guard = f"{view.macro}_DRIVER_H"


class DriverView:
    """C-facing view of a design for the driver templates."""

    def __init__(self, design: Design, prefix: str = "coil"):
        self.design = d = design
        file_names(self, prefix)
        board = d.drive.board
        self.compare_type = c_uint_type(d.timer.period_ticks)
        self.adc_type = c_uint_type(2**board.adc.bits - 1)
        self.regulation = regulation_of(d)
        #: a full bridge: the phase masks of the header drive its four switches
        #: (port_bridge), the enable (port_switch) opens all four at once
        self.bridge = d.topology is not None and d.topology.bridge is not None
        #: a bridge's mixed-decay hold: each off-time fast (all four open) until the count
        #: port_fast_end gives (compare + HOLD_FAST_Q16 of the off-time), then slow
        self.mixed = self.bridge and d.topology.bridge.hold_decay == "mixed"
        #: a boosted peak: the boost switch (port_boost) on in the peak until the ADC
        #: handler reads BOOST_THRESHOLD_CODE; BOOST_TIMEOUT_TICKS without it is a fault;
        #: the next switch-on waits BOOST_MIN_INTERVAL_TICKS (when the design gives it); the
        #: hold (any of the four) runs from that conversion on: a current-mode hold's threshold
        #: handlers and a closed loop's PI step (preloaded there) while the state is still PEAK
        self.boost = d.boost is not None
        self.boost_interval = self.boost and d.boost.recharge_time_s is not None
        if self.boost and d.boost.timeout_ticks is None:
            raise InputError(d.drive.source or d.drive.name, "supply.boost",
                             "the boost never reaches the threshold at the worst corner (see the "
                             "boost_threshold check), expected a boost that does for firmware-driver")
        if self.regulation not in ("fixed", "supply_table", "current", "closed_loop"):
            raise InputError(d.drive.source or d.drive.name, "hold.regulation",
                             f"{self.regulation!r}: this driver runs the fixed, supply-table, "
                             "closed-loop and current-mode holds")
        #: the closed loop runs in the ADC handler; the fixed and table holds' compare is
        #: worked out in the tick
        self.closed_loop = self.regulation == "closed_loop"
        self.tick_compare = self.regulation in ("fixed", "supply_table")
        cm = d.hold.current_mode
        self.off_time = cm is not None and cm.control != "hysteretic"
        self.threshold_source = ("comparator" if self.off_time else "ADC window watchdog")
        m = self.macro
        if cm is None:
            self.threshold_low = self.threshold_high = ""
        elif self.off_time:
            self.threshold_low, self.threshold_high = "0U", f"{m}_HOLD_PEAK_CODE"
        else:
            self.threshold_low, self.threshold_high = f"{m}_HOLD_LOWER_CODE", f"{m}_HOLD_UPPER_CODE"
        fast_cm = cm is not None and cm.off_fast_ticks is not None
        self.off_type = c_uint_type(max(cm.off_ticks or cm.off_fast_ticks, 0x100)) if (
            self.off_time or fast_cm) else "uint16_t"
        #: mixed decay in a PWM hold (the fast part's end with each compare: port_fast_end),
        #: or under the current mode's fixed off-time (the one-shot times the fast part with
        #: all four open, then the slow rest: the threshold and off-timer handlers)
        self.mixed_pwm = self.mixed and cm is None
        self.mixed_off = self.mixed and self.off_time
        #: hysteretic with mixed decay: the one-shot (port_off_timer) times each fast part
        self.mixed_hyst = self.mixed and cm is not None and not self.off_time
        self.one_shot = self.off_time or self.mixed_hyst
        self.split = d.split_decay is not None
        self.armature = d.armature is not None and all(
            math.isfinite(x) for x in (d.armature.seat_time_min_s, d.armature.seat_time_s))
        a = d.adc
        high = (a.pull_in_code + a.over_current_code) // 2
        low = (a.pull_in_code + high) // 2
        self.constants = [
            Constant(f"{m}_DRIVER_OPEN_LOAD_TICKS", open_load_ticks(d),
                     f"open load: no current above the open-load code for this long (worst pull-in "
                     f"{d.pull_in.time_s * 1e3:.4g} ms, +1 tick)"),
            Constant(f"{m}_DRIVER_OC_BLANK_SAMPLES", OC_BLANK_SAMPLES,
                     "conversions after switch-on not tested for over-current"),
            Constant(f"{m}_DRIVER_SUPPLY_SAMPLES", SUPPLY_SAMPLES,
                     "supply out of range on this many conversions in a row: fault"),
            Constant(f"{m}_DRIVER_PEAK_LIMIT_HIGH_CODE", high,
                     "peak current limit: off at or above (midway pull-in to over-current)"),
            Constant(f"{m}_DRIVER_PEAK_LIMIT_LOW_CODE", low, "peak current limit: back on at or below"),
            Constant(f"{m}_DRIVER_SENSE_IN_SWITCH_LEG", int(board.sense.position == "switch"),
                     f"sense resistor {'under the switch' if board.sense.position == 'switch' else 'in the coil path'}"),
            Constant(f"{m}_DRIVER_THRESHOLD_COMPARATOR", int(self.off_time),
                     "current-mode hold takes its threshold from a comparator (off-time control)"),
            Constant(f"{m}_DRIVER_THRESHOLD_WINDOW_WATCHDOG", int(cm is not None and not self.off_time),
                     "current-mode hold takes its thresholds from an ADC window watchdog (hysteretic)"),
        ]
        rc = d.rise_check
        on = rc is not None and rc.limit > 0
        self.constants += [
            Constant(f"{m}_DRIVER_RISE_CODE", rc.code if on else 0,
                     f"shorted turns: the rise is timed to this code ({rc.current_a:.4g} A)" if on
                     else "shorted turns: no rise check (" + (rc.why_off if rc is not None else
                                                               "the design gives none") + ")"),
            Constant(f"{m}_DRIVER_RISE_LIMIT", rc.limit if on else 0,
                     "fault when conversions to RISE_CODE x supply code is below (0: off)"
                     if on and rc.by_supply else "fault when conversions to RISE_CODE is below (0: off)"),
            Constant(f"{m}_DRIVER_RISE_BY_SUPPLY", int(on and rc.by_supply),
                     "1: the rise limit scales with the supply reading"),
        ]
        if self.armature:
            self.constants.append(Constant(f"{m}_DRIVER_DIP_CODES", dip_codes(d),
                                           "seat: fall and climb of the current dip, codes"))
            sc = d.seat_check
            self.constants.append(Constant(
                f"{m}_DRIVER_SEAT_GRACE_TICKS", seat_grace_ticks(d),
                "seat: taken, and STUCK waited for, this long past SEAT_LATEST_TICKS (the climb "
                + (f"{sc.climb_s * 1e3:.3g} ms" if sc is not None and math.isfinite(sc.climb_s) else "not designed")
                + ", +1 tick)"))
        longest = max(d.pull_in.peak_ticks, d.release.lockout_ticks, open_load_ticks(d), 255,
                      boost_min_interval_ticks(d))
        self.tick_type = c_uint_type(max(longest, 0x100))
        self.event_kinds = [(k.name, int(k)) for k in DRIVER_EVENTS]
        self.fault_codes = [(f.name, int(f)) for f in FaultCode]


def template_env():
    """The Jinja2 environment of ``codegen_templates/driver/`` (jinja2 imported here: only
    the code generators pay for it)."""
    import jinja2

    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(data_dir("codegen_templates") / "driver")),
        undefined=jinja2.StrictUndefined, keep_trailing_newline=True,
        trim_blocks=True, lstrip_blocks=True, autoescape=False,
    )


def render_driver(design: Design, prefix: str = "coil") -> dict[str, str]:
    """Render the design header and the reference driver for ``design``.

    Returns ``{"<prefix>_drive.h": ..., "<prefix>_driver.h": ..., "<prefix>_driver.c": ...}``.

    Raises
    ------
    InputError
        naming ``--prefix`` when it is not a C identifier, or the drive file when its hold
        is one this driver does not run.
    """
    view = DriverView(design, prefix)
    env = template_env()
    return {
        view.drive_header: generate_header(design, view.macro),
        view.header_name: env.get_template("driver.h.j2").render(v=view, d=design),
        view.source_name: env.get_template("driver.c.j2").render(v=view, d=design),
    }


# --------------------------------------------------------------------------- budget
#: Worst cycles of each handler on an ATmega328P (avr-gcc 5.4 -Os, simavr, Timer1 at
#: clk/1), over the drive shapes of tests/test_driver_simavr.py (every bundled example
#: and both current-mode controls, the bridge example's regulated holds too) running a
#: script through every path (the top of the duty table, each fault, the seat), with hooks
#: that store a byte. An 8-bit core is the
#: slow case: a 32-bit core runs the same C in fewer cycles (common practice), so the
#: shares printed are an upper bound there. The test measures again and fails if a
#: figure exceeds its bound or falls 10 % below it. ``adc_isr_closed_loop`` is the ADC
#: handler of a closed-loop hold (the PI step's 32-bit multiplies through the libgcc
#: routines of an 8-bit core), over the closed-loop example's script; ``adc_isr_bridge`` is
#: a full bridge's (the phase masks set at each switch-on), over the bridge example's and
#: the same with a moving armature (its dip detector: the worst);
#: ``adc_isr_boost`` a boosted peak's (the threshold, the boost switch and the ON and
#: PEAK_END events sent from the handler), over the boost example's with its time-out;
#: ``adc_isr_mixed`` a mixed-decay bridge's (the fast part's end, a 32-bit multiply, with
#: each new compare), over the bridge example with ``fast_fraction = 0.3``;
#: ``adc_isr_boost_closed_loop`` a closed loop's after a boosted peak (the threshold's
#: conversion: the boost off, PEAK_END, the preload and the first PI step), over the boost
#: example with ``regulation = "closed_loop"``. A current-mode hold after the boost stays
#: within ``adc_isr_boost`` (402: the comparator armed in the threshold's conversion).
#: ``adc_isr_closed_loop_mixed`` a closed loop with a bridge's mixed decay (the PI step, then
#: the fast part's end of its new compare), over the bridge example with a closed loop and
#: ``fast_fraction = 0.3``.
HANDLER_CYCLES = {"adc_isr": 340, "pwm_isr": 11, "tick": 692, "threshold_isr": 145,
                  "adc_isr_closed_loop": 602, "adc_isr_bridge": 371, "adc_isr_boost": 404, "adc_isr_mixed": 452,
                  "adc_isr_boost_closed_loop": 649, "adc_isr_closed_loop_mixed": 710}
#: Worst-case cycle bounds of each handler on Cortex-M cores, over the same drive shapes
#: and script (tests/test_driver_qemu.py): arm-none-eabi-gcc 12.2 -Os builds run under
#: QEMU 7.2 (mps2-an385: Cortex-M3, and the ARMv6-M code of the M0+; mps2-an386:
#: Cortex-M4) with an execution trace, every instruction executed charged its worst
#: cycles in the core's instruction timing table (Arm's Technical Reference Manuals, from
#: memory), zero flash wait states; ``threshold_isr`` is the worse of the threshold and the
#: off-timer handlers. QEMU counts instructions, not cycles: CORTEX_INSTRUCTIONS are the
#: instructions executed on those worst paths. The test measures again and fails if a
#: figure exceeds its bound or all fall 10 % below it.
CORTEX_CYCLES = {
    "cortex-m0plus": {"adc_isr": 324, "pwm_isr": 13, "tick": 525, "threshold_isr": 124,
                      "adc_isr_closed_loop": 312, "adc_isr_bridge": 349, "adc_isr_boost": 362,
                      "adc_isr_mixed": 368, "adc_isr_boost_closed_loop": 356, "adc_isr_closed_loop_mixed": 362},
    "cortex-m3": {"adc_isr": 305, "pwm_isr": 8, "tick": 509, "threshold_isr": 103,
                  "adc_isr_closed_loop": 309, "adc_isr_bridge": 328, "adc_isr_boost": 327,
                  "adc_isr_mixed": 346, "adc_isr_boost_closed_loop": 333, "adc_isr_closed_loop_mixed": 348},
    "cortex-m4": {"adc_isr": 305, "pwm_isr": 8, "tick": 509, "threshold_isr": 103,
                  "adc_isr_closed_loop": 309, "adc_isr_bridge": 327, "adc_isr_boost": 327,
                  "adc_isr_mixed": 346, "adc_isr_boost_closed_loop": 333, "adc_isr_closed_loop_mixed": 348},
}
CORTEX_INSTRUCTIONS = {
    "cortex-m0plus": {"adc_isr": 176, "pwm_isr": 4, "tick": 373, "threshold_isr": 67,
                      "adc_isr_closed_loop": 167, "adc_isr_bridge": 195, "adc_isr_boost": 195,
                      "adc_isr_mixed": 203, "adc_isr_boost_closed_loop": 188, "adc_isr_closed_loop_mixed": 196},
    "cortex-m3": {"adc_isr": 147, "pwm_isr": 2, "tick": 305, "threshold_isr": 54,
                  "adc_isr_closed_loop": 149, "adc_isr_bridge": 160, "adc_isr_boost": 159,
                  "adc_isr_mixed": 170, "adc_isr_boost_closed_loop": 159, "adc_isr_closed_loop_mixed": 171},
    "cortex-m4": {"adc_isr": 147, "pwm_isr": 2, "tick": 305, "threshold_isr": 54,
                  "adc_isr_closed_loop": 149, "adc_isr_bridge": 159, "adc_isr_boost": 159,
                  "adc_isr_mixed": 170, "adc_isr_boost_closed_loop": 159, "adc_isr_closed_loop_mixed": 171},
}
#: How each core's figures were had, for the printed timing line.
_CYCLE_SOURCES = {
    "": "worst cycles measured on an 8-bit AVR, an upper bound for a 32-bit core",
    "avr": "worst cycles measured on an 8-bit AVR (simavr)",
    **{core: f"worst-case cycles of a {core.replace('plus', '+').replace('cortex-m', 'Cortex-M')} from the "
             "instructions QEMU executed, zero flash wait states" for core in CORTEX_CYCLES},
}
#: The driver's static state (bytes): the largest .bss over those shapes, from
#: avr-gcc 5.4 (ATmega328P) and arm-none-eabi-gcc 12.2 (Cortex-M0+ and M4 alike).
_STATE_BYTES = {"avr": 42, "arm": 47}
#: Code bytes at -Os: the largest .text over those shapes (the AVR's: the bridge with a moving
#: armature, 1,654 B), rounded up to 50 bytes
#: (Cortex-M0+, larger than the M4 build).
_CODE_BYTES = {"avr": 1700, "arm": 1300}
#: The same for a closed-loop hold's driver (the PI step in place of the table lookup;
#: its own bound so that the other holds' figures stay as measured; the largest: after a
#: boosted peak, 1,842 B on the AVR and 1,292 B on a Cortex-M0+; on a bridge with mixed
#: decay 1,706 B on the AVR).
_CLOSED_LOOP_CODE_BYTES = {"avr": 1850, "arm": 1300}
WARN_SHARE = 0.5


def budget_key(design: Design, handler: str) -> str:
    """The :data:`HANDLER_CYCLES` entry of ``handler`` for ``design``: a closed-loop hold's
    ADC handler runs the PI step (32-bit multiplies: slow on an 8-bit core) and has its own
    (after a boosted peak another: the threshold's conversion runs the first PI step),
    as have a full bridge's (a mixed-decay hold's: the fast part's end worked out with each
    new compare; under the current mode's off-time the one-shot times the fast part: the
    plain bridge's) and a boosted peak's."""
    mixed = design.topology is not None and design.topology.bridge is not None and \
        design.topology.bridge.hold_decay == "mixed" and design.hold.current_mode is None
    if handler == "adc_isr" and regulation_of(design) == "closed_loop":
        if design.boost is not None:
            return "adc_isr_boost_closed_loop"
        return "adc_isr_closed_loop_mixed" if mixed else "adc_isr_closed_loop"
    if handler == "adc_isr" and design.topology is not None and design.topology.bridge is not None:
        return "adc_isr_mixed" if mixed else "adc_isr_bridge"
    if handler == "adc_isr" and design.boost is not None:
        return "adc_isr_boost"
    return handler


@dataclass(frozen=True)
class HandlerShare:
    """One handler's worst cycles against the cycles of its period at the board's clock."""

    name: str
    cycles: int
    period_cycles: float
    period: str

    @property
    def share(self) -> float:
        return self.cycles / self.period_cycles


def handler_cycles(core: str) -> dict[str, int]:
    """Worst cycles of each handler on a board's ``core``: the Cortex-M bounds where the
    board names a Cortex-M core, else the AVR measurement (an upper bound for a 32-bit
    core when the board names none)."""
    return CORTEX_CYCLES.get(core, HANDLER_CYCLES)


def handler_shares(design: Design) -> list[HandlerShare]:
    """The PWM/ADC handlers (both run once a PWM period) against the PWM period, and the
    tick against the tick period, at the board's timer clock taken as the CPU clock; in
    current mode also the threshold (or off-timer) handler, which runs at each switching
    edge, against half a switching cycle at the design's highest switching frequency.
    Cycles per the board's ``core`` (:func:`handler_cycles`)."""
    clock = design.drive.board.timer.clock
    cycles = handler_cycles(design.drive.board.core)
    pwm = cycles[budget_key(design, "adc_isr")] + cycles["pwm_isr"]
    shares = [HandlerShare("pwm_isr + adc_isr", pwm, clock / design.timer.frequency_hz, "PWM period"),
              HandlerShare("tick", cycles["tick"], clock / design.drive.board.tick.rate, "tick")]
    cm = design.hold.current_mode
    if cm is not None and cm.max_frequency_hz > 0:
        shares.append(HandlerShare("threshold_isr", cycles["threshold_isr"],
                                   clock / (2.0 * cm.max_frequency_hz), "switching edge"))
    return shares


@dataclass(frozen=True)
class DriverMemory:
    """RAM and flash bytes of the driver on one family of parts (the duty table is
    ``static const`` in the design header: RAM as well as flash on an 8-bit AVR)."""

    family: str
    ram: int
    flash: int


def memory_use(design: Design) -> list[DriverMemory]:
    view = DriverView(design)
    table = 0
    if view.tick_compare:
        size = {"uint8_t": 1, "uint16_t": 2, "uint32_t": 4}
        table = len(design.duty_table.adc_codes) * (size[view.adc_type] + size[view.compare_type])
    code = _CLOSED_LOOP_CODE_BYTES if view.closed_loop else _CODE_BYTES
    return [DriverMemory("8-bit AVR", _STATE_BYTES["avr"] + table, code["avr"] + table),
            DriverMemory("Cortex-M", _STATE_BYTES["arm"], code["arm"] + table)]


def budget_notes(design: Design, prefix: str = "coil") -> list[str]:
    """Lines to show: memory, each handler's share of its period, and warnings.

    Raises
    ------
    InputError
        naming the board file when a handler needs more than its period, or the driver
        more RAM or flash than the board's ``ram`` / ``flash``.
    """
    board = design.drive.board
    source = board.source or board.name
    uses = memory_use(design)
    notes = ["memory: " + "; ".join(f"{u.family} RAM {u.ram:,} B, flash {u.flash:,} B" for u in uses)
             + f" (the {prefix.lower()}_driver.c state and -Os code"
             + (", the duty table included" if DriverView(design).tick_compare else "")
             + "; stack not counted)"]
    for key in ("ram", "flash"):
        have = getattr(board, key, 0)
        worst = max(uses, key=lambda u: getattr(u, key))
        need = getattr(worst, key)
        if not have:
            continue
        share = f"{need:,} B of the board's {have:,} B {key} ({100 * need / have:.1f} %, {worst.family})"
        if need > have:
            raise InputError(source, key, f"the driver needs {share}")
        if need > 0.75 * have:
            notes.append(f"warning: the driver takes {share}, above 75 %")
    shares = handler_shares(design)
    mhz = board.timer.clock / 1e6
    notes.append("timing at " + f"{mhz:.4g} MHz: " + "; ".join(
        f"{h.name} {h.cycles:,} of {h.period_cycles:,.0f} cycles a {h.period} ({100 * h.share:.1f} %)"
        for h in shares) + f" ({_CYCLE_SOURCES[board.core]})")
    for h in shares:
        text = (f"{h.name} takes {100 * h.share:.1f} % of the {h.period} ({h.cycles:,} of "
                f"{h.period_cycles:,.0f} cycles at {mhz:.4g} MHz)")
        if h.share > 1.0:
            raise InputError(source, "timer.clock", f"{text}: the driver cannot keep up; lower the "
                             "PWM frequency or the tick rate, or use a faster part")
        if h.share > WARN_SHARE:
            notes.append(f"warning: {text}, above 50 %: little time is left for the rest of the firmware")
    return notes
