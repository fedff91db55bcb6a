"""``coildrive emulate``: a virtual bench device on a pseudo-terminal.

stdout: the device path, first line, flushed at once (nothing else). stderr: one line per
switch change (``state on`` / ``state off``; with ``--firmware``, each state of the C
driver: ``state peak``, ``state hold``, ``state fault (fault 1)``, ...) and per command
(``command <OPCODE> <argument> -> <status>``); at the end, with line damage
(``--drop-bytes``, ``--corrupt-bytes``), ``line: N frames sent, D damaged on the line
(B bytes dropped, C changed)``; then ``stopped``. ``--line-log FILE`` then lists those
damaged frames (written when the emulator stops): what a host's lost-frame count can be
checked against frame by frame.
"""

from __future__ import annotations

import signal
from pathlib import Path
from typing import Optional

import typer

from ..config import load_drive
from ..errors import InputError
from ..units import parse_quantity
from .common import status, user_errors

_FAULTS = {"open": "open", "shorted-turns": "shorted_turns", "stuck": "stuck"}
_OPTION = {"supply": "--supply", "coil_temp": "--coil-temp", "period": "--period",
           "hold_time": "--hold-time", "resistance_scale": "--resistance-scale",
           "inductance_scale": "--inductance-scale", "fault": "--fault", "noise_codes": "--noise",
           "drop_bytes": "--drop-bytes", "corrupt_bytes": "--corrupt-bytes", "baud": "--baud",
           "seed": "--seed"}


def _quantity(text: Optional[str], dimension: str, option: str) -> float | None:
    return None if text is None else parse_quantity(text, dimension, option)


@user_errors
def emulate_command(
    drive: Path = typer.Argument(..., help="Drive file, or a system file with --channel (TOML)."),
    channel: Optional[str] = typer.Option(None, "--channel", help="With a system file: the channel (its name) the device runs, on the system's shared timer."),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file; overrides the drive file's board."),
    supply: Optional[str] = typer.Option(None, "--supply", help='Bus voltage of the virtual bench, e.g. 20 or "20 V" (default: the nominal supply).'),
    coil_temp: Optional[str] = typer.Option(None, "--coil-temp", help='Coil temperature, e.g. 85 or "85 degC" (default: reference temperature within the ambient range).'),
    period: Optional[str] = typer.Option(None, "--period", help='Time between automatic actuations, e.g. "0.5 s" (default: long enough to stream one, at least 0.2 s).'),
    hold_time: str = typer.Option("20 ms", "--hold-time", help="Hold of the automatic actuations."),
    resistance_scale: float = typer.Option(1.0, "--resistance-scale", help="Real coil resistance / the drive file's (1.4 = +40 %)."),
    inductance_scale: float = typer.Option(1.0, "--inductance-scale", help="Real coil inductance / the drive file's."),
    fault: Optional[str] = typer.Option(None, "--fault", help="Put in a fault: open, shorted-turns or stuck."),
    noise: float = typer.Option(0.0, "--noise", help="ADC noise, codes (one sigma)."),
    drop_bytes: float = typer.Option(0.0, "--drop-bytes", help="Probability that a byte on the line is lost."),
    corrupt_bytes: float = typer.Option(0.0, "--corrupt-bytes", help="Probability that a byte on the line is changed."),
    seed: int = typer.Option(0, "--seed", help="Seed of the noise and the line damage."),
    duration: Optional[str] = typer.Option(None, "--duration", help='Stop after this long, e.g. "10 s" (default: until SIGINT/SIGTERM).'),
    baud: Optional[int] = typer.Option(None, "--baud", help="Line rate in baud (default: the board file's link baud)."),
    line_log: Optional[Path] = typer.Option(None, "--line-log", help="When it stops, write the frames the line damaged (--drop-bytes, --corrupt-bytes) to this CSV: frame number, sequence number, kind, delimiter damaged."),
    threshold_switch: bool = typer.Option(False, "--threshold-switch", help="A drive without [armature]: report a position switch that closes when the current reaches pull_in.current and opens when its mean over a PWM period falls below release.current (a relay's pick-up and drop-out); a latching coil's closes when a set pulse reaches pull_in.current and opens when a reset pulse reaches reset.current."),
    firmware: Optional[Path] = typer.Option(None, "--firmware", help="Run the generated C driver of this folder (firmware-driver --out) in the device, compiled for this computer."),
) -> None:
    """Serve a virtual bench device for DRIVE on a pseudo-terminal; print its path first."""
    from ..bench.device import DeviceOptions, OptionError, VirtualDevice
    from ..bench.emulator import Emulator
    from ..design import design

    if fault is not None and fault not in _FAULTS:
        raise InputError("--fault", "", f"{fault!r} is not one of {', '.join(_FAULTS)}")
    for option, value in (("--noise", noise), ("--resistance-scale", resistance_scale),
                          ("--inductance-scale", inductance_scale)):
        if value != value:   # NaN
            raise InputError(option, "", "is not a number")
    stop_after = _quantity(duration, "time", "--duration")
    if stop_after is not None and not stop_after > 0:
        raise InputError("--duration", "", f"{duration!r} must be greater than zero")
    try:
        options = DeviceOptions(
            supply=_quantity(supply, "voltage", "--supply"),
            coil_temp=_quantity(coil_temp, "temperature", "--coil-temp"),
            period=_quantity(period, "time", "--period"),
            hold_time=parse_quantity(hold_time, "time", "--hold-time"),
            resistance_scale=resistance_scale, inductance_scale=inductance_scale,
            fault=_FAULTS.get(fault) if fault else None, noise_codes=noise, drop_bytes=drop_bytes,
            corrupt_bytes=corrupt_bytes, seed=seed, baud=baud, threshold_switch=threshold_switch)
    except OptionError as err:
        raise InputError(_OPTION.get(err.name, err.name), "", err.message) from None
    if line_log is not None:
        folder = line_log.parent if str(line_log.parent) else Path(".")
        if not folder.is_dir() or line_log.is_dir():
            raise InputError("--line-log", "", f"{str(line_log)!r} cannot be written: expected a "
                             "file name in an existing folder")
    from ..system_file import is_system_file
    if is_system_file(drive):
        from .system_cmd import channel_drive
        drv = channel_drive(drive, board, channel)
        d = None if drv.latch is not None else design(drv)   # a latching channel: its pulses
        if d is not None and d.drive.shared_timer is not None:
            status(f"channel {channel}: hold PWM on the board's shared timer, prescaler "
                   f"{d.timer.prescaler}, period {d.timer.period_ticks} counts, "
                   f"{d.timer.frequency_hz:.6g} Hz (a hold-frequency command gets it back, unchanged)")
    else:
        if channel is not None:
            raise InputError("--channel", "", f"{drive} is a drive file, not a system file: leave --channel out")
        drv = load_drive(drive, board)
        d = None if drv.latch is not None else design(drv)
    if threshold_switch and firmware is not None:
        raise InputError("--threshold-switch", "", "the threshold switch runs in the built-in "
                         "firmware: leave it out with --firmware")
    try:
        if d is None:   # a latching coil: its set and reset pulses
            device = _latch_device(Path(drv.source) if channel is not None else drive, drv, options, firmware,
                                   fault)
        elif firmware is not None:
            from ..bench.firmware_device import FirmwareDevice
            from ..codegen.host_build import build_firmware
            device = FirmwareDevice(d, build_firmware(firmware, d), options)
        else:
            device = VirtualDevice(d.drive, options, design=d)
    except ValueError as err:
        # the two designs the virtual device cannot run; anything else is not the file's
        key = ("hold.mode" if "voltage-mode" in str(err) or "current-mode hold" in str(err) else
               "pull_in.current" if "peak phase" in str(err) else
               "armature" if "[armature]" in str(err) else None)
        if "threshold switch" in str(err):
            raise InputError("--threshold-switch", "", str(err)) from None
        if key is None:
            raise
        raise InputError(str(drive), key, str(err)) from None

    with Emulator(device) as emulator:
        def request_stop(signum, frame):
            emulator.stop_requested.set()
        old = {sig: signal.signal(sig, request_stop) for sig in (signal.SIGINT, signal.SIGTERM)}
        try:
            typer.echo(emulator.path)   # click.echo flushes: the host may open it now
            emulator.serve(stop_after, lambda entry: status(entry.text))
        finally:
            for sig, handler in old.items():
                signal.signal(sig, handler)
        if emulator.unread_dropped:
            status(f"note: {emulator.unread_dropped} bytes dropped while nobody read the device")
        st = device.stats
        if options.drop_bytes or options.corrupt_bytes:
            # what a host's lost-frame count is checked against (benchmarks/bench_soak.py)
            status(f"line: {st.frames_sent} frames sent, {st.frames_damaged} damaged on the line "
                   f"({st.bytes_dropped} bytes dropped, {st.bytes_corrupted} changed)")
    if line_log is not None:
        write_line_log(line_log, device)
    status("stopped")


def _latch_device(path: Path, drv, options, firmware: Optional[Path], fault: Optional[str]):
    """The virtual device of a latching coil (:class:`~coildrive.bench.latch_device.LatchDevice`)."""
    from ..bench.device import OptionError
    from ..bench.latch_device import LatchDevice
    from ..design.latch import design_latch
    from ..model.latch_waveform import NotSeated

    if fault is not None:
        raise InputError("--fault", "", "a latching coil's virtual device has no fault to put in: leave it out")
    d = design_latch(drv)
    try:
        if firmware is not None:   # the generated latch driver times and switches the pulses
            from ..bench.latch_firmware_device import LatchFirmwareDevice
            from ..codegen.host_build import build_latch_firmware
            from ..codegen.latch_driver import pulse_switches
            device = LatchFirmwareDevice(d, build_latch_firmware(firmware, d), pulse_switches(d), options)
        else:
            device = LatchDevice(d, options)
    except OptionError as err:
        raise InputError(_OPTION.get(err.name, err.name), "", err.message) from None
    except NotSeated as err:   # a moving armature not on the seat at the device's point
        raise InputError("--supply", "", str(err)) from None
    except ValueError as err:
        if "threshold switch" in str(err):
            raise InputError("--threshold-switch", "", str(err)) from None
        raise InputError(str(path), "thermal.max_coil_temp" if "interval" in str(err) else "reset.current" if "reset" in str(err) else "pull_in.current", str(err)) \
            from None
    status(f"latching coil: set pulse {device.pulse_time('set') * 1e3:.4g} ms, reset pulse "
           f"{device.pulse_time('reset') * 1e3:.4g} ms, one every {device.period:.4g} s (the design's "
           f"shortest safe interval {device.interval:.4g} s)"
           + (f"; the driver in {firmware} times them" if firmware is not None else ""))
    return device


def write_line_log(path: Path, device) -> None:
    """``--line-log``: the frames the line damaged, as CSV (written atomically)."""
    from ..fileio import write_atomic

    rows = ["frame,seq,kind,delimiter_damaged"]
    rows += [f"{f.frame},{f.seq},{f.kind},{int(f.delimiter_damaged)}" for f in device.damaged]
    write_atomic(path, "\n".join(rows) + "\n")
