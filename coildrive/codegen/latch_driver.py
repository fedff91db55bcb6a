"""The reference driver of a latching coil in C: a set pulse and a reset pulse, no hold.

:func:`render_latch_driver` is pure (a :class:`~coildrive.design.latch.LatchDesign` in,
``{filename: text}`` out): the latch header (as ``design --header`` writes it) plus
``<prefix>_driver.h`` / ``.c`` from ``codegen_templates/driver/latch_driver.*.j2``. The
driver runs each pulse for the header's SET_PULSE_TICKS / RESET_PULSE_TICKS scheduler
ticks and starts no pulse sooner than MIN_INTERVAL_TICKS after the last one's start (a
request waits, it is not dropped); docs/firmware.md, *A latching coil*. Pulses from the
boost: the boost switch on with the winding's (on a full bridge with the pulse's two,
bit 4), each pulse ending at the tick whose
current-sense reading (``<prefix>_current(code)``) reaches its threshold code, its ticks the
time-out (then a FAULT event).

:func:`latch_budget_notes` says what its tick handler takes of the tick at the board's
clock, as :func:`coildrive.codegen.driver.budget_notes` does for the peak-and-hold driver.
"""

from __future__ import annotations

from ..bench.messages import EventKind, FaultCode
from ..design.latch import LatchDesign
from ..errors import InputError
from ..model.bridge import switch_mask
from .driver import file_names, template_env
from .header import Constant, c_uint_type
from .latch_header import generate_latch_header

#: The switches on in each pulse. A full bridge: set = Q1 + Q4 (A to B), reset = Q3 + Q2
#: (B to A), the bits of :data:`coildrive.model.bridge.SWITCHES` (the design header's
#: BRIDGE_ bits); a reset winding: bit 0 the set winding's switch, bit 1 the reset's.
BRIDGE_PULSE_SWITCHES = {"set": ("high_a", "low_b"), "reset": ("high_b", "low_a")}
WINDING_PULSE_SWITCHES = {"set": 0x1, "reset": 0x2}
#: Pulses from the boost: the boost switch's bit, on with either pulse's switches -- bit 2
#: with two windings, bit 4 on a full bridge (its bits 0..3 are the four switches; the boost
#: switch feeds the bridge's high-side rail, both polarities).
BOOST_SWITCH = 0x4
BRIDGE_BOOST_SWITCH = 0x10
#: The ON event's value of each pulse (docs/protocol.md, the model device's).
PULSE_VALUE = {"set": 0, "reset": 1}
#: Worst cycles of the latch driver's tick (every path: a request waiting for the
#: interval, a pulse's start and end, STOP) on an ATmega328P (avr-gcc -Os, simavr, Timer1
#: at clk/1, both latching examples), and the Cortex-M cycle bounds and instructions from
#: QEMU's execution trace (arm-none-eabi-gcc -Os, the bridge example; the instruction
#: costs of tests/cortex_trace.py). tests/test_latch_driver.py measures again and fails
#: if a figure exceeds its bound or falls 10 % below it.
LATCH_TICK_CYCLES = {"avr": 173, "cortex-m0plus": 131, "cortex-m3": 119, "cortex-m4": 119}
LATCH_TICK_INSTRUCTIONS = {"cortex-m0plus": 70, "cortex-m3": 63, "cortex-m4": 63}
#: The same with supply-compensated pulses (``pull_in.compensate``): a pulse's start looks
#: its ticks up in the latch header's 16-entry table (the worst: a reading at full scale,
#: every entry passed). ATmega328P: the bridge example compensated (443; the relay's 441),
#: Cortex-M: the bridge's; tests/test_latch_compensate.py measures the bridge's again and
#: fails as above.
LATCH_COMPENSATED_TICK_CYCLES = {"avr": 443, "cortex-m0plus": 296, "cortex-m3": 303, "cortex-m4": 303}
LATCH_COMPENSATED_TICK_INSTRUCTIONS = {"cortex-m0plus": 204, "cortex-m3": 183, "cortex-m4": 183}
#: The same with pulses from the boost: each tick of a pulse reads the current (twice, no
#: torn value) and compares it with the threshold code; the worst path is a time-out (the
#: OFF and the FAULT events). The boosted example's program on the same parts;
#: tests/test_latch_boost_driver.py measures again and fails as above.
LATCH_BOOSTED_TICK_CYCLES = {"avr": 249, "cortex-m0plus": 175, "cortex-m3": 158, "cortex-m4": 158}
LATCH_BOOSTED_TICK_INSTRUCTIONS = {"cortex-m0plus": 94, "cortex-m3": 86, "cortex-m4": 86}


def pulse_switches(design: LatchDesign) -> dict[str, int]:
    """The switch mask of each pulse (``set``, ``reset``) for the design's topology."""
    boost = boost_switch(design)
    if design.latch.topology == "full_bridge":
        return {k: switch_mask(v) | boost for k, v in BRIDGE_PULSE_SWITCHES.items()}
    return {k: v | boost for k, v in WINDING_PULSE_SWITCHES.items()}


def boost_switch(design: LatchDesign) -> int:
    """The boost switch's bit in the switch mask (0 without a boost)."""
    if not design.drive.supply.boosted:
        return 0
    return BRIDGE_BOOST_SWITCH if design.latch.topology == "full_bridge" else BOOST_SWITCH


class LatchDriverView:
    """C-facing view of a latching design for the driver templates."""

    def __init__(self, design: LatchDesign, prefix: str = "coil"):
        self.design = d = design
        file_names(self, prefix)
        lt = d.latch
        missing = [p.name for p in lt.pulses if p.ticks is None]
        source = d.drive.source or d.drive.name
        if missing:
            raise InputError(source, f"{'reset' if missing[0] == 'reset' else 'pull_in'}.current",
                             f"the {missing[0]} pulse's current is never reached at the worst corner, "
                             "expected a design that reaches it for firmware-driver")
        if lt.interval_ticks is None:
            raise InputError(source, "thermal.max_coil_temp", "no interval between pulses keeps the coil "
                             "below its limit (the coil_temperature check), expected one for firmware-driver")
        self.bridge = lt.topology == "full_bridge"
        masks = (WINDING_PULSE_SWITCHES if not self.bridge else
                 {k: switch_mask(v) for k, v in BRIDGE_PULSE_SWITCHES.items()})
        m = self.macro
        #: pulses from the boost: the boost switch on with the winding's, each pulse ending
        #: at its threshold code (``<prefix>_current(code)``), its ticks the time-out
        self.boosted = d.drive.supply.boosted
        if self.bridge:
            what = {"set": "Q1 + Q4, A to B", "reset": "Q3 + Q2, B to A (the other polarity)"}
        else:
            what = {"set": "bit 0: the set winding's switch", "reset": "bit 1: the reset winding's switch"}
        self.constants = [
            Constant(f"{m}_DRIVER_SET_SWITCHES", masks["set"], f"set pulse: {what['set']}"),
            Constant(f"{m}_DRIVER_RESET_SWITCHES", masks["reset"], f"reset pulse: {what['reset']}"),
            Constant(f"{m}_DRIVER_OFF_SWITCHES", 0,
                     "between pulses: all open (" + ("the coil's current returns to the bus through "
                                                     "the body diodes)" if self.bridge else
                                                     "each winding decays through its freewheel path)")),
            Constant(f"{m}_DRIVER_SET_VALUE", PULSE_VALUE["set"], "ON event value of the set pulse"),
            Constant(f"{m}_DRIVER_RESET_VALUE", PULSE_VALUE["reset"], "ON event value of the reset pulse"),
        ]
        if self.boosted:
            self.constants += [
                Constant(f"{m}_DRIVER_BOOST_SWITCH", boost_switch(d),
                         "bit 4: the boost switch, feeding the bridge's high-side rail in either pulse"
                         if self.bridge else "bit 2: the boost switch, on with either pulse's winding"),
                Constant(f"{m}_DRIVER_FAULT_BOOST_TIMEOUT", int(FaultCode.BOOST_TIMEOUT),
                         "FAULT event value: a pulse reached its time-out before its threshold")]
        self.tick_type = c_uint_type(max(lt.interval_ticks, max(p.ticks for p in lt.pulses), 0x100))
        #: supply-compensated pulses: the driver takes each pulse's ticks from the latest
        #: supply reading (``<prefix>_supply(code)``) through the latch header's lookups
        self.compensated = any(p.table is not None for p in lt.pulses)
        self.adc_type = c_uint_type(2**d.drive.board.adc.bits - 1)
        self.event_kinds = [(k.name, int(k)) for k in (EventKind.ON, EventKind.OFF)
                            + ((EventKind.FAULT,) if self.boosted else ())]


def render_latch_driver(design: LatchDesign, prefix: str = "coil") -> dict[str, str]:
    """Render the latch header and the latching coil's reference driver.

    Returns ``{"<prefix>_drive.h": ..., "<prefix>_driver.h": ..., "<prefix>_driver.c": ...}``.

    Raises
    ------
    InputError
        naming ``--prefix`` when it is not a C identifier, or the drive file when a pulse
        or the interval has no design.
    """
    view = LatchDriverView(design, prefix)
    env = template_env()
    return {
        view.drive_header: generate_latch_header(design, view.macro),
        view.header_name: env.get_template("latch_driver.h.j2").render(v=view, d=design),
        view.source_name: env.get_template("latch_driver.c.j2").render(v=view, d=design),
    }


def latch_budget_notes(design: LatchDesign) -> list[str]:
    """The tick handler's worst cycles against the tick period at the board's timer clock
    (taken as the CPU clock), per the board's ``core``.

    Raises
    ------
    InputError
        naming the board file when the tick needs more than its period.
    """
    board = design.drive.board
    core = board.core if board.core in LATCH_TICK_CYCLES else "avr"
    compensated = any(p.table is not None for p in design.latch.pulses)
    table = (LATCH_BOOSTED_TICK_CYCLES if design.drive.supply.boosted else
             LATCH_COMPENSATED_TICK_CYCLES if compensated else LATCH_TICK_CYCLES)
    cycles = table[core]
    period = board.timer.clock / board.tick.rate
    share = cycles / period
    mhz = board.timer.clock / 1e6
    where = ("an 8-bit AVR (simavr)" if core == "avr" else
             f"a {core.replace('plus', '+').replace('cortex-m', 'Cortex-M')} (QEMU's instructions)")
    text = f"tick {cycles:,} of {period:,.0f} cycles a tick ({100 * share:.1f} %)"
    if share > 1.0:
        raise InputError(board.source or board.name, "tick.rate", f"the latch driver's {text}: it cannot "
                         "keep up; lower the tick rate or use a faster part")
    notes = [f"timing at {mhz:.4g} MHz: {text} (worst cycles measured on {where})"]
    if share > 0.5:
        notes.append(f"warning: the tick takes {100 * share:.1f} % of its period, above 50 %")
    return notes
