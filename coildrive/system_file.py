"""System files: several drive channels on one board (TOML in, a frozen System out).

A *system file* names a board that has ``[channels]`` and, per ``[[channel]]``, a drive
file (a path relative to the system file), a name (the channel's prefix in the header)
and the board's channel number; optionally a fixed start ``offset`` of its peak. Its
``[supply]`` gives the shared rail's ``current_limit`` and optionally its
``source_resistance`` and ``capacitance``. It is told from a drive file by its content:
a ``[[channel]]`` array (:func:`is_system_file`). Every error names the file and key.
See docs/file-formats.md ("System file").
"""

from __future__ import annotations

import dataclasses
import re
from dataclasses import dataclass
from pathlib import Path

from .config import (MAX_CHANNELS, Drive, _read_toml, _root_sections, _section, _Section,
                     load_board, load_drive, resolve_board)
from .errors import InputError

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]{0,23}$")


@dataclass(frozen=True)
class Channel:
    """One channel: its ``name`` (a C identifier, the header prefix in capitals), the
    board's channel ``number``, its drive (resolved against the system's board, the shared
    timer not yet fixed) and ``offset`` (s, ``None``: placed by the stagger search)."""

    name: str
    number: int
    drive: Drive
    offset: float | None = None


@dataclass(frozen=True)
class SystemSupply:
    """The shared rail: ``current_limit`` A (0 = not given), and the source behind it,
    ``source_resistance`` ohm and bulk ``capacitance`` F (both 0 = not given)."""

    current_limit: float = 0.0
    source_resistance: float = 0.0
    capacitance: float = 0.0


@dataclass(frozen=True)
class System:
    """A system file resolved: the board's name and path, the channels in file order,
    the shared rail and the file's path (``source``)."""

    name: str
    board_path: str
    channels: tuple[Channel, ...]
    supply: SystemSupply
    source: str


def is_system_file(path: str | Path) -> bool:
    """True when ``path`` is a TOML file with a ``[[channel]]`` array (a system file);
    False for anything else (a drive file, or a file that cannot be read: the drive
    reader then says why)."""
    try:
        data = _read_toml(Path(path))
    except InputError:
        return False
    return isinstance(data.get("channel"), list)


def load_system(path: str | Path) -> System:
    """Read a system file and every channel's drive file (see the module docstring)."""
    path = Path(path)
    source = str(path)
    data = _read_toml(path)
    _root_sections(source, data, ("supply",), ("board", "channel"))
    spec = data.get("board")
    if not isinstance(spec, str):
        raise InputError(source, "board", "missing, expected a bundled board name or a board "
                         "file path" if spec is None else f"{spec!r} is not a string")
    try:
        board_path = resolve_board(spec, path.parent)
    except InputError as err:
        raise InputError(source, "board", err.message) from None
    board = load_board(board_path)
    if board.channels is None:
        raise InputError(source, "board", f"board {board.name!r} ({board_path}) has no [channels] "
                         "section, expected a board with several channels (channels.count, timers, "
                         "supplies)")
    s = _section(source, data, "supply", required=False)
    supply = SystemSupply(s.quantity("current_limit", "current", 0.0, nonnegative=True),
                          s.quantity("source_resistance", "resistance", 0.0, nonnegative=True),
                          s.quantity("capacitance", "capacitance", 0.0, nonnegative=True))
    if (supply.source_resistance > 0) != (supply.capacitance > 0):
        key = "capacitance" if supply.source_resistance > 0 else "source_resistance"
        raise s.fail(key, "missing: the shared rail's source resistance and bulk capacitance "
                     "go together, expected both or neither")
    s.finish()
    raw = data["channel"]
    if not raw or len(raw) > MAX_CHANNELS or not all(isinstance(c, dict) for c in raw):
        raise InputError(source, "channel", f"expected 1..{MAX_CHANNELS} [[channel]] tables")
    channels: list[Channel] = []
    for k, table in enumerate(raw):
        c = _Section(source, table, f"channel[{k}]")
        name = c.text("name")
        if not _NAME.match(name):
            raise c.fail("name", f"{name!r} is not a C identifier of up to 24 characters, "
                         "expected e.g. \"ch1\" (the channel's header prefix)")
        if name.upper() in (ch.name.upper() for ch in channels):
            raise c.fail("name", f"{name!r} is used by another channel, expected a name of its own")
        number = c.integer("number", low=1, high=board.channels.count)
        if number in (ch.number for ch in channels):
            raise c.fail("number", f"board channel {number} is given to another channel")
        file = c.text("drive")
        drive_path = Path(file) if Path(file).is_absolute() else path.parent / file
        offset = c.quantity("offset", "time", None, nonnegative=True) if "offset" in table else None
        if offset is not None and offset > 10.0:
            raise c.fail("offset", f"{offset:g} s is above 10 s, expected a start offset of a peak")
        c.finish()
        if not drive_path.is_file():
            raise c.fail("drive", f"{file!r}: no such drive file (relative to the system file's folder)")
        drive = load_drive(drive_path, board_path)
        channels.append(Channel(name, number, drive, offset))
    _check_rails(source, board, channels)
    return System(path.stem, str(board_path), tuple(channels), supply, source)


def _check_rails(source: str, board, channels: list[Channel]) -> None:
    """Channels on one supply rail have one supply range: each drive file's ``[supply]``
    min, nominal and max must be the first's of its rail."""
    first: dict[tuple[int, ...], Channel] = {}
    for ch in channels:
        rail = board.channels.group("supplies", ch.number)
        ref = first.setdefault(rail, ch)
        a, b = ref.drive.supply, ch.drive.supply
        for key in ("min", "nominal", "max"):
            if getattr(a, key) != getattr(b, key):
                raise InputError(ch.drive.source, f"supply.{key}",
                                 f"{getattr(b, key):g} V, but channel {ref.name!r} on the same rail "
                                 f"(board channels {list(rail)}) has {getattr(a, key):g} V: expected "
                                 f"one supply range per rail ({source})")


def with_timer(channel: Channel, prescaler: int, period: int) -> Channel:
    """``channel`` with the shared timer's prescaler and period fixed in its drive."""
    return dataclasses.replace(channel, drive=dataclasses.replace(channel.drive,
                                                                  shared_timer=(prescaler, period)))
