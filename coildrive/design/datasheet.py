"""What the coil's datasheet gave the design: derived values with their arithmetic, and
the checks of its response times (docs/coil-model.md).

The file reader (:mod:`coildrive.config`) has already turned the datasheet keys into the
resistance and the currents; here each derived value is written down with where it came
from, for the table and the JSON, and the peak and the release lockout are checked
against the datasheet's operate and release times.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..config import Drive
from ..copper import copper_resistance
from ..units import format_si
from .result import Check, PullInResult, ReleaseResult


@dataclass(frozen=True)
class DerivedValue:
    """One value the design took from the datasheet: the file key it stands for, the
    value in SI (``unit``), and the arithmetic that gave it."""

    key: str
    value: float
    unit: str
    source: str


@dataclass(frozen=True)
class DatasheetResult:
    """The ``datasheet`` object of the design JSON. Times in s (``None``: not given).

    ``release_estimate_s`` is the worst corner's time for the current to fall to the
    drop-out current plus the datasheet's release time (the armature's own part, which
    the datasheet measures with the coil switched off fast): an estimate of when the
    armature is open.
    """

    derived: list[DerivedValue] = field(default_factory=list)
    operate_time_s: float | None = None
    release_time_s: float | None = None
    release_estimate_s: float | None = None


def uses_datasheet(drive: Drive) -> bool:
    """True when the drive file states its coil by any datasheet key."""
    c = drive.coil
    return bool(c.derived or c.operate_time or c.release_time)


def _temp(t: float) -> str:
    return f"{t:g} degC"


def datasheet_result(drive: Drive, release: ReleaseResult) -> DatasheetResult:
    """The derived values with their sources, and the release estimate."""
    c = drive.coil
    out = derived_values(drive)
    estimate = release.time_s + c.release_time if c.release_time else None
    return DatasheetResult(derived=out, operate_time_s=c.operate_time or None,
                           release_time_s=c.release_time or None, release_estimate_s=estimate)


def derived_values(drive: Drive) -> list[DerivedValue]:
    """The values the design took from the datasheet keys, each with its arithmetic."""
    c = drive.coil
    out: list[DerivedValue] = []
    if "coil.resistance" in c.derived:
        out.append(DerivedValue("coil.resistance", c.resistance, "ohm",
                                f"rated_voltage^2 / rated_power = ({c.rated_voltage:g} V)^2 / "
                                f"{c.rated_power:g} W, at {_temp(c.reference_temp)}"))
    if c.stated_temp is not None:
        r_st = float(copper_resistance(c.resistance, c.reference_temp, c.stated_temp))
        at = (f"{r_st:.5g} ohm at {_temp(c.stated_temp)} (copper, IEC 60028)"
              if c.stated_temp != c.reference_temp else f"{r_st:.5g} ohm at {_temp(c.stated_temp)}")
        tol = c.resistance_tolerance
        if "pull_in.current" in c.derived:
            out.append(DerivedValue("pull_in.current", drive.pull_in.current, "A",
                                    f"pick_up_voltage / lowest R = {c.pick_up_voltage:g} V / "
                                    f"({at} x (1 - {tol:g}))"))
        if "release.current" in c.derived:
            out.append(DerivedValue("release.current", drive.release.current, "A",
                                    f"drop_out_voltage / highest R = {c.drop_out_voltage:g} V / "
                                    f"({at} x (1 + {tol:g}))"))
    return out


def datasheet_checks(drive: Drive, pull_in: PullInResult, release: ReleaseResult,
                     sheet: DatasheetResult) -> list[Check]:
    """``operate_time``: the peak lasts at least the datasheet's operate time (error);
    ``release_lockout``: the firmware's lockout after a turn-off covers the release
    estimate (a warning: a new actuation may start while the armature still moves)."""
    c = drive.coil
    out: list[Check] = []
    if c.operate_time:
        test = (f"at rated_voltage {c.rated_voltage:g} V" if c.rated_voltage
                else "at the datasheet's test voltage")
        slower = (f"; {test}: below it (supply.min {drive.supply.min:g} V) the armature is "
                  "slower than the datasheet says, measure it there (docs/coil-model.md)"
                  if not c.rated_voltage or drive.supply.min < c.rated_voltage else f" ({test})")
        if pull_in.peak_time_s is None:
            out.append(Check("operate_time", False, f"no peak: {pull_in.not_reached}"))
        else:
            ok = pull_in.peak_time_s >= c.operate_time
            out.append(Check("operate_time", ok,
                             f"peak {format_si(pull_in.peak_time_s, 's')} vs the datasheet's operate "
                             f"time {format_si(c.operate_time, 's')}{slower}"
                             + ("" if ok else " — raise pull_in.margin or give pull_in.settle_time")))
    if sheet.release_estimate_s is not None:
        lockout = release.lockout_ticks / drive.board.tick.rate
        ok = lockout >= sheet.release_estimate_s
        out.append(Check("release_lockout", ok,
                         f"lockout {format_si(lockout, 's')} vs current to drop-out "
                         f"{format_si(release.time_s, 's')} ({release.worst_corner}) + the datasheet's "
                         f"release time {format_si(c.release_time, 's')} = "
                         f"{format_si(sheet.release_estimate_s, 's')}"
                         + ("" if ok else ": a new actuation may start before the armature is open"),
                         severity="warning"))
    return out
