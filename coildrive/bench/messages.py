"""What travels on the bench link, as frozen dataclasses (the wire layout is in protocol.py).

Device to host: :class:`Samples`, :class:`Event`, :class:`Info`, :class:`Reply`.
Host to device: :class:`Command`. Every message has an optional ``seq``: the 16-bit
sequence number of the frame it arrived in (``None`` for messages built by hand or read
from the text line mode). ``seq`` takes no part in equality, so a decoded message
equals the message that was encoded.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import IntEnum

import numpy as np


class EventKind(IntEnum):
    """What an :class:`Event` reports. Receivers keep unknown kinds as plain ints."""

    ON = 1
    """The switch turned on: the peak phase starts."""
    PEAK_END = 2
    """The peak phase ended: the hold phase (PWM) starts."""
    OFF = 3
    """The switch turned off for good: the release starts."""
    SWITCH = 4
    """A position-switch input changed; ``value`` is the new level (1 = armature seated)."""
    OVERRUN = 5
    """The device dropped samples (its buffer was full); ``index`` is the first dropped
    sample, ``value`` how many were dropped (their indices are skipped, not reused)."""
    SUPPLY = 6
    """Bus voltage reading; ``value`` is the raw ADC code of the supply-sense pin."""
    TEMPERATURE = 7
    """Temperature at the coil (or board) as measured by the device; ``value`` in milli-degC."""
    EVENTS_LOST = 8
    """The device dropped events (its event queue was full); ``value`` how many."""
    PAUSE = 9
    """The device sends no samples from ``index`` for ``value`` samples: nothing happened,
    they were skipped on purpose (idle between recorded actuations), not lost. Receivers
    do not count them as missing."""
    FAULT = 10
    """The firmware's diagnostics found a fault and turned the coil off; ``value`` is a
    :class:`FaultCode`."""


class FaultCode(IntEnum):
    """The ``value`` of a FAULT event: what the reference driver's diagnostics found."""

    OPEN_LOAD = 1
    """No current rise: the current stayed below the open-load threshold too long."""
    OVER_CURRENT = 2
    """The current reached the over-current threshold (a short)."""
    STUCK = 3
    """No armature seat (current dip) inside the designed window."""
    SUPPLY_LOW = 4
    """The supply reading stayed below the design's lowest supply."""
    SUPPLY_HIGH = 5
    """The supply reading stayed above the design's highest supply."""
    SHORTED_TURNS = 6
    """The current rose faster after switch-on than any healthy coil of the design's
    envelope allows at that supply (shorted turns: too little inductance)."""
    BOOST_TIMEOUT = 7
    """A boosted peak did not reach its current threshold within its time-out (the boost
    capacitor not charged, a coil of too much resistance or inductance)."""


class Opcode(IntEnum):
    """What a :class:`Command` asks of the device."""

    START = 1
    """Start one actuation now. ``argument``: hold duration in microseconds before the
    device switches off by itself (0 = hold until STOP)."""
    STOP = 2
    """Switch off now (release). ``argument``: 0."""
    SET_PEAK_TIME = 3
    """Peak-phase duration for the next actuations. ``argument``: microseconds."""
    SET_HOLD_DUTY = 4
    """Hold PWM duty. ``argument``: duty x 65535 (0 = 0 %, 65535 = 100 %)."""
    SET_HOLD_FREQUENCY = 5
    """Hold PWM frequency. ``argument``: Hz."""
    QUERY_INFO = 6
    """Send an :class:`Info` frame now. ``argument``: 0."""
    SET_PULSE_TIME = 7
    """A latching coil's pulse length for the following pulses of one kind. ``argument``:
    microseconds in bits 0..30; bit 31 clear for the set pulse, set for the reset pulse
    (:data:`PULSE_RESET_BIT`). The reply's value: the length now in force, microseconds
    (whole ticks of the device's scheduler)."""


#: Bit 31 of a SET_PULSE_TIME argument: the reset pulse (clear: the set pulse).
PULSE_RESET_BIT = 1 << 31


class ReplyStatus(IntEnum):
    """Outcome of a command, in a :class:`Reply`."""

    OK = 0
    UNKNOWN_OPCODE = 1
    OUT_OF_RANGE = 2
    BUSY = 3


@dataclass(frozen=True, eq=False)
class Samples:
    """Consecutive ADC codes, the first taken at sample index ``first_index``.

    Parameters
    ----------
    first_index : sample index of ``codes[0]`` (counts samples since the device started,
        modulo 2**32; one index per sample period).
    codes : ADC codes, ``uint16``, read-only when decoded.
    seq : frame sequence number, or ``None``.
    """

    first_index: int
    codes: np.ndarray
    seq: int | None = field(default=None, compare=False)

    def __len__(self) -> int:
        return len(self.codes)

    @property
    def next_index(self) -> int:
        """Sample index right after the last code (modulo 2**32)."""
        return (self.first_index + len(self.codes)) & 0xFFFFFFFF

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Samples):
            return NotImplemented
        return (self.first_index == other.first_index
                and np.array_equal(self.codes, other.codes))

    __hash__ = None  # type: ignore[assignment]  # holds an array: not hashable


@dataclass(frozen=True)
class Event:
    """Something the device did or saw, stamped with a sample index.

    Parameters
    ----------
    kind : an :class:`EventKind` (a plain int for kinds this version does not know).
    index : sample index of the first sample taken at or after the event.
    value : signed 32-bit value; its meaning depends on ``kind`` (0 when unused).
    seq : frame sequence number, or ``None``.
    """

    kind: int
    index: int
    value: int = 0
    seq: int | None = field(default=None, compare=False)


@dataclass(frozen=True)
class Info:
    """What the device says about itself and its sampling.

    Parameters
    ----------
    rate_numerator, rate_denominator : sample rate in Hz as the exact ratio
        ``rate_numerator / rate_denominator`` (both 1..2**32-1).
    adc_bits : ADC resolution, 1..16.
    amps_per_code : coil current in A per ADC code above ``zero_code`` if the firmware
        knows its sense scaling, else ``None`` (then the host uses the board file).
        Carried as IEEE 754 binary32.
    zero_code : ADC code that reads zero current.
    firmware_id : free text (UTF-8, at most 64 bytes).
    has_position_switch : the board reads a position switch (SWITCH events may come).
    protocol_version : version of this protocol the device speaks.
    seq : frame sequence number, or ``None``.
    """

    rate_numerator: int
    rate_denominator: int
    adc_bits: int
    amps_per_code: float | None = None
    zero_code: int = 0
    firmware_id: str = ""
    has_position_switch: bool = False
    protocol_version: int = 1
    seq: int | None = field(default=None, compare=False)

    @property
    def sample_rate_hz(self) -> float:
        """Sample rate in Hz."""
        return self.rate_numerator / self.rate_denominator

    @property
    def sample_period_s(self) -> float:
        """Sample period in s."""
        return self.rate_denominator / self.rate_numerator


@dataclass(frozen=True)
class Command:
    """A host request to the device.

    Parameters
    ----------
    opcode : an :class:`Opcode` (a plain int for opcodes this version does not know).
    argument : unsigned 32-bit argument; units per :class:`Opcode`.
    seq : frame sequence number, or ``None``.
    """

    opcode: int
    argument: int = 0
    seq: int | None = field(default=None, compare=False)


@dataclass(frozen=True)
class Reply:
    """The device's answer to one :class:`Command`.

    Parameters
    ----------
    command_seq : sequence number of the command frame answered.
    opcode : the command's opcode.
    status : a :class:`ReplyStatus`.
    value : the value now in force (e.g. the duty after the timer's rounding, in the
        command's units), 0 when there is none.
    seq : frame sequence number, or ``None``.
    """

    command_seq: int
    opcode: int
    status: int = ReplyStatus.OK
    value: int = 0
    seq: int | None = field(default=None, compare=False)


Message = Samples | Event | Info | Command | Reply
"""Any message of the bench link."""
