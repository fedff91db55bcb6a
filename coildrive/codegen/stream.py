"""The firmware side of the bench link: a C encoder rendered from Jinja2 templates.

:func:`render_stream_encoder` is pure (options in, ``{filename: text}`` out); the
templates are ``codegen_templates/stream/coil_stream.h.j2`` and ``.c.j2``.
:class:`StreamView` holds only C concerns (names, buffer sizes, the CRC table); the
frame layout it renders is the one of :mod:`coildrive.bench.protocol`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from fractions import Fraction

from .. import __version__
from ..bench import protocol
from ..bench.framing import CRC_POLY, cobs_encoded_size
from ..bench.messages import EventKind, Opcode, ReplyStatus
from ..config import Board
from ..errors import InputError
from ..resources import data_dir

_PREFIX = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,31}$")
_TEMPLATES = ("coil_stream.h.j2", "coil_stream.c.j2")
_RX_MAX = 16          # a COMMAND frame is 11 bytes after COBS; anything longer is an error
_EVENT_PAYLOAD = 9
_REPLY_PAYLOAD = 8


def crc16_table(poly: int = CRC_POLY) -> list[int]:
    """The 256-entry table of a non-reflected 16-bit CRC: entry ``n`` is ``n << 8`` shifted
    through ``poly`` eight times (the register after one byte from a zero start)."""
    table = []
    for n in range(256):
        crc = n << 8
        for _ in range(8):
            crc = ((crc << 1) ^ poly) if crc & 0x8000 else crc << 1
            crc &= 0xFFFF
        table.append(crc)
    return table


@dataclass(frozen=True)
class BoardSampling:
    """What a board file says about sampling, as INFO-frame fields."""

    name: str
    rate_numerator: int
    rate_denominator: int
    adc_bits: int
    amps_per_code: float

    @property
    def amps_per_code_literal(self) -> str:
        """The scaling as a C float literal (9 significant digits round-trip binary32)."""
        return _float_literal(self.amps_per_code)


def board_sampling(board: Board) -> BoardSampling:
    """INFO-frame fields from a board: exact sample-rate ratio, ADC bits, A per code.

    ``amps_per_code = reference / 2**bits / (sense.resistance * sense.gain)``: one ADC
    step in volts at the pin, divided by the sense transresistance in V/A.
    """
    source = board.source or board.name
    if board.adc.bits > 16:
        raise InputError(source, "adc.bits", f"{board.adc.bits} bits: the bench link carries 16-bit "
                         "codes; shift the readings to 16 bits in firmware and use a board "
                         "file that says 16")
    rate = Fraction(board.adc.sample_rate).limit_denominator(0xFFFF)
    if not 1 <= rate.numerator <= 0xFFFFFFFF:
        raise InputError(source, "adc.sample_rate", f"{board.adc.sample_rate:g} Hz does not fit "
                         "the INFO frame (1 Hz .. 4.29 GHz as a ratio of 32-bit integers)")
    amps = board.adc.reference / 2**board.adc.bits / (board.sense.resistance * board.sense.gain)
    return BoardSampling(board.name, rate.numerator, rate.denominator, board.adc.bits, amps)


class StreamView:
    """C-facing view of the encoder options: names, sizes, tables.

    Parameters
    ----------
    prefix : C name prefix; functions and types use it in lower case
        (``coil_stream_push``), macros in upper case (``COIL_STREAM_BLOCKS``).
    samples_per_frame : ADC codes per SAMPLES frame, 1..510.
    blocks : sample blocks in the ring, a power of two 2..128.
    event_slots : queued events, a power of two 2..128.
    crc_table : use a 512-byte CRC table instead of the bitwise loop.
    board : board whose sampling fills the ``*_RATE_*``, ``*_ADC_BITS`` and
        ``*_AMPS_PER_CODE`` macros; ``None`` leaves them out.
    """

    def __init__(self, prefix: str = "coil", samples_per_frame: int = 64, blocks: int = 8,
                 event_slots: int = 16, crc_table: bool = False, board: Board | None = None):
        if not isinstance(prefix, str) or not _PREFIX.match(prefix):
            raise InputError("--prefix", "", f"{prefix!r} is not a usable C name prefix, expected a "
                             "letter then up to 31 letters, digits or underscores (e.g. valve1)")
        _check_int("--samples-per-frame", samples_per_frame, 1, protocol.MAX_SAMPLES_PER_FRAME)
        _check_power_of_two("--blocks", blocks)
        _check_power_of_two("--event-slots", event_slots)
        self.lower = prefix.lower()
        self.macro = prefix.upper()
        self.header_name = f"{self.lower}_stream.h"
        self.source_name = f"{self.lower}_stream.c"
        self.guard = f"{self.macro}_STREAM_H"
        self.version = __version__
        self.protocol_version = protocol.PROTOCOL_VERSION
        self.samples_per_frame = samples_per_frame
        self.blocks = blocks
        self.event_slots = event_slots
        self.firmware_id_max = protocol.MAX_FIRMWARE_ID
        payload = max(protocol.SAMPLES_HEADER + 2 * samples_per_frame,
                      protocol.INFO_FIXED + protocol.MAX_FIRMWARE_ID, _EVENT_PAYLOAD, _REPLY_PAYLOAD)
        self.max_raw = protocol.HEADER_SIZE + payload + protocol.CRC_SIZE
        self.max_wire = cobs_encoded_size(self.max_raw) + 2   # leading and trailing delimiter
        self.rx_max = _RX_MAX
        self.crc_table = crc_table
        self.crc_rows = _rows(crc16_table()) if crc_table else []
        self.board = board_sampling(board) if board is not None else None
        self.frame_types = [(t.name, int(t)) for t in protocol.FrameType]
        self.event_kinds = [(k.name, int(k)) for k in EventKind]
        self.opcodes = [(o.name, int(o)) for o in Opcode]
        self.statuses = [(s.name, int(s)) for s in ReplyStatus]


# --------------------------------------------------------------------------- memory
#: (size, alignment) of the C types the encoder's state uses, per ABI: avr-gcc packs
#: everything on byte boundaries with 2-byte pointers; the Arm EABI aligns each type to its
#: size with 4-byte pointers (AAPCS, "Fundamental Data Types").
_ABI = {
    "avr": {"u8": (1, 1), "u16": (2, 1), "u32": (4, 1), "ptr": (2, 1)},
    "arm": {"u8": (1, 1), "u16": (2, 2), "u32": (4, 4), "ptr": (4, 4)},
}
#: Code bytes of the encoder without the CRC table, at -Os: the largest .text of the
#: shapes tests/test_cross_compile.py builds (1, 2, 64 and 510 codes per frame, 2..128
#: blocks and event slots, bitwise and table CRC), rounded up to 50 bytes.
#: Measured with avr-gcc 5.4.0 (-mmcu=atmega328p) and arm-none-eabi-gcc 12.2
#: (-mcpu=cortex-m0plus -mthumb, the larger of the two Cortex-M builds);
#: tests/test_cross_compile.py compiles again and checks these bounds.
_CODE_BYTES = {"avr": 2750, "arm": 1750}
_CRC_TABLE_BYTES = 512
UART_BITS_PER_BYTE = 10        # 8N1: start bit, 8 data bits, stop bit


def _layout(abi: dict, fields: list[tuple[tuple[int, int], int]]) -> tuple[int, int]:
    """(size, alignment) of a C struct of ``(type, count)`` fields, padded as C pads it."""
    offset, align = 0, 1
    for (size, field_align), count in fields:
        offset = -(-offset // field_align) * field_align + size * count
        align = max(align, field_align)
    return -(-offset // align) * align, align


@dataclass(frozen=True)
class MemoryUse:
    """RAM and flash bytes the encoder takes on one family of parts.

    ``ram`` is the ``<prefix>_stream_t`` object (computed from the buffer sizes with the
    ABI's alignment rules) plus, on 8-bit Harvard parts, the CRC table, which the default
    plain ``const`` puts in RAM; stack is not counted (see docs/firmware.md).
    ``flash`` is the measured code bound plus the CRC table.
    """

    family: str
    ram: int
    flash: int
    state: int


def memory_use(view: "StreamView") -> list[MemoryUse]:
    """What the encoder of ``view`` takes on an 8-bit AVR and on a 32-bit Cortex-M."""
    result = []
    for family, abi in (("8-bit AVR", _ABI["avr"]), ("Cortex-M", _ABI["arm"])):
        u8, u16, u32, ptr = abi["u8"], abi["u16"], abi["u32"], abi["ptr"]
        block = _layout(abi, [(u32, 1), (u16, 1), (u16, view.samples_per_frame)])
        event = _layout(abi, [(u8, 1), (u32, 1), (u32, 1)])
        state, _ = _layout(abi, [
            (block, view.blocks), (u8, 2), (u16, 1), (u32, 3), (event, view.event_slots), (u8, 2),
            (u32, 1), (ptr, 2), (u16, 1), (u8, 1), (u8, view.max_raw), (u8, view.max_wire),
            (u8, view.rx_max), (u8, 2), (u32, 1)])
        harvard = family == "8-bit AVR"
        table = _CRC_TABLE_BYTES if view.crc_table else 0
        code = _CODE_BYTES["avr" if harvard else "arm"]
        result.append(MemoryUse(family, state + (table if harvard else 0), code + table, state))
    return result


def wire_bytes_per_sample(samples_per_frame: int) -> float:
    """Bytes on the wire per sample in full SAMPLES frames (COBS worst case, delimiter)."""
    raw = protocol.HEADER_SIZE + protocol.SAMPLES_HEADER + 2 * samples_per_frame + protocol.CRC_SIZE
    return (cobs_encoded_size(raw) + 1) / samples_per_frame


def budget_notes(view: "StreamView", board: Board | None) -> list[str]:
    """Lines to show: the memory taken, then warnings about the board's RAM, flash and link.

    Raises
    ------
    InputError
        naming the board file and ``ram`` or ``flash`` when the encoder does not fit.
    """
    uses = memory_use(view)
    table = (f"; the CRC table is in RAM on AVR unless {view.macro}_STREAM_FLASH puts it in flash"
             if view.crc_table else "")
    notes = ["memory: " + "; ".join(f"{u.family} RAM {u.ram:,} B, flash {u.flash:,} B" for u in uses)
             + f" (the {view.lower}_stream_t object and -Os code; stack not counted{table})"]
    if board is None:
        return notes
    source = board.source or board.name
    for key, have in (("ram", board.ram), ("flash", board.flash)):
        worst = max(uses, key=lambda u: getattr(u, key))
        need = getattr(worst, key)
        if not have:
            continue
        share = f"{need:,} B of the board's {have:,} B {key} ({100 * need / have:.1f} %, {worst.family})"
        if need > have:
            raise InputError(source, key, f"the stream encoder needs {share}: use --crc-bitwise, fewer "
                             "--blocks or a smaller --samples-per-frame")
        if need > 0.75 * have:
            notes.append(f"warning: the stream encoder takes {share}, above 75 %")
    need = board.adc.sample_rate * wire_bytes_per_sample(view.samples_per_frame)
    have = board.link.baud / UART_BITS_PER_BYTE
    if need > have:
        notes.append(f"warning: streaming every sample needs {need:,.0f} B/s ({board.adc.sample_rate:,.0f} "
                     f"samples/s x {wire_bytes_per_sample(view.samples_per_frame):.2f} B), the link "
                     f"carries {have:,.0f} B/s at {board.link.baud} baud (8N1): the ring overflows "
                     "unless you stream bursts shorter than the buffer")
    return notes


def _rows(values: list[int], per_row: int = 8) -> list[str]:
    cells = [f"0x{v:04X}u" for v in values]
    rows = []
    for start in range(0, len(cells), per_row):
        last = start + per_row >= len(cells)
        rows.append(", ".join(cells[start:start + per_row]) + ("" if last else ","))
    return rows


def _check_int(option: str, value: int, low: int, high: int) -> None:
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise InputError(option, "", f"{value!r} is outside {low}..{high}")


def _check_power_of_two(option: str, value: int) -> None:
    _check_int(option, value, 2, 128)
    if value & (value - 1):
        raise InputError(option, "", f"{value} is not a power of two (2, 4, 8, ... 128)")


def render_stream_encoder(prefix: str = "coil", *, samples_per_frame: int = 64, blocks: int = 8,
                          event_slots: int = 16, crc_table: bool = False,
                          board: Board | None = None) -> dict[str, str]:
    """Render the firmware-side bench-link encoder.

    Parameters
    ----------
    prefix : C name prefix (``coil`` gives ``coil_stream.h``, ``coil_stream_push()``,
        ``COIL_EVENT_ON``).
    samples_per_frame : ADC codes per SAMPLES frame (1..510). Each frame costs 9 bytes of
        header, CRC and framing on top of 2 bytes per code (64: 93 % payload).
    blocks : sample blocks buffered between the ADC interrupt and the main loop (power of
        two, 2..128); RAM is about ``blocks * (2 * samples_per_frame + 8)`` bytes.
    event_slots : events buffered (power of two, 2..128), 12 bytes each.
    crc_table : a 512-byte lookup table instead of the bitwise CRC loop.
    board : fill the sampling macros from this board.

    Returns
    -------
    ``{"<prefix>_stream.h": text, "<prefix>_stream.c": text}``

    Raises
    ------
    InputError
        naming the option that is out of range.

    Examples
    --------
    >>> files = render_stream_encoder("valve1", samples_per_frame=32)
    >>> sorted(files)
    ['valve1_stream.c', 'valve1_stream.h']
    >>> "#define VALVE1_STREAM_SAMPLES_PER_FRAME  32u" in files["valve1_stream.h"]
    True
    """
    import jinja2  # only the code generators pay for it

    view = StreamView(prefix, samples_per_frame, blocks, event_slots, crc_table, board)
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(data_dir("codegen_templates") / "stream")),
        undefined=jinja2.StrictUndefined, keep_trailing_newline=True,
        trim_blocks=True, lstrip_blocks=True, autoescape=False,
    )
    header, source = (env.get_template(name).render(v=view) for name in _TEMPLATES)
    return {view.header_name: header, view.source_name: source}


def _float_literal(value: float) -> str:
    """A C float literal; 9 significant digits identify a binary32 value."""
    if not math.isfinite(value):
        raise ValueError(f"{value} has no C literal")
    text = f"{value:.9g}"
    if "." not in text and "e" not in text:
        text += ".0"
    return text + "f"
