"""Command ``capture``: stream a board's samples from a serial link into a capture file.

Thin: options are checked here, :class:`coildrive.bench.link.DeviceLink` (or
:func:`coildrive.bench.link.replay`) does the work. Exit codes: 0 the capture ended as
asked (duration, actuations, Ctrl-C), 1 the device vanished (the data so far is kept),
2 bad input (one line).
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Optional

import typer

from ..errors import CoildriveError, InputError, OutputError
from ..fileio import atomic_path
from ..units import parse_quantity
from .common import status, user_errors

_POLL_S = 0.1   # s between looks at the link (stop conditions, progress)


def _positive_int(text: Optional[str], option: str, what: str) -> int | None:
    if text is None:
        return None
    try:
        value = int(text.strip().replace("_", ""))
    except ValueError:
        raise InputError(option, "", f"{text!r} is not {what}") from None
    if value < 1:
        raise InputError(option, "", f"{text!r} is not {what}")
    return value


def _seconds(text: Optional[str], option: str) -> float | None:
    if text is None:
        return None
    value = parse_quantity(text, "time", option)
    if not value > 0:
        raise InputError(option, "", f"{text!r} must be a time above zero, e.g. 30 or \"30 s\"")
    return value


def _board_and_drive(board: Optional[str], drive: Optional[Path]):
    from ..config import load_board, load_drive, resolve_board

    if drive is not None:
        loaded = load_drive(drive, board)
        return loaded.board, loaded
    if board is None:
        raise InputError("--board", "", "missing: give the bundled board name or board file the "
                         "device runs (its sample rate, scaling and baud rate), or --drive")
    try:
        path = resolve_board(board, Path.cwd())
    except InputError as err:
        raise InputError("--board", "", err.message) from None
    return load_board(path), None


def _header_meta(brd, drv, drive_path: Optional[Path], port: Optional[str], baud: int | None,
                 supply_v: float | None, coil_temp_c: float | None) -> dict:
    """Header fields known before the device speaks (its INFO frame overrides them)."""
    from ..bench.check import board_amps_per_code

    extra: dict = {}
    if port is not None:
        extra["port"] = port
    if baud is not None:
        extra["baud"] = baud
    if drive_path is not None:
        extra["drive_file"] = str(drive_path)
    meta = {"board": brd.name, "sample_rate_hz": float(brd.adc.sample_rate), "adc_bits": brd.adc.bits,
            "amps_per_code": board_amps_per_code(brd),
            "sense_position": brd.sense.position, "extra": extra}
    if drv is not None:
        meta["drive"] = drv.name
    if supply_v is not None:
        meta["supply_v"] = supply_v
    if coil_temp_c is not None:
        meta["coil_temp_c"] = coil_temp_c
    return meta


def _check_out(out: Optional[Path], option: str = "--out", overwrite: bool = False) -> Path:
    from ..fileio import exists_error

    if out is None:
        raise InputError(option, "", "missing: give the capture file to write, e.g. --out run.cdcap")
    folder = out.parent if str(out.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(option, "", f"folder {str(folder)!r} does not exist")
    if out.is_dir():
        raise InputError(option, "", f"{str(out)!r} is a folder, expected a file name")
    if out.exists() and not overwrite:
        raise exists_error(out, option)
    return out


def _hint(link, port: str, board_baud: int, baud: int, text: bool, waited: float) -> str:
    from ..bench.link import guess_mode

    st = link.stats()
    if st.bytes == 0:
        return (f"hint: nothing from {port} in {waited:g} s: is the firmware streaming and is "
                f"this its port? (the board says {board_baud} Bd); still waiting")
    guess = guess_mode(link.first_bytes)
    if not text and guess == "text":
        advice = "the bytes look like text lines: use --text for printf firmware"
    elif text and guess == "frames":
        advice = "the bytes look like binary frames: use --binary"
    elif text:
        advice = (f"check the baud rate (the board says {board_baud} Bd, this capture uses {baud} Bd), "
                  "or use --binary if the firmware sends binary frames")
    else:
        advice = (f"check the baud rate (the board says {board_baud} Bd, this capture uses {baud} Bd), "
                  "or use --text for printf firmware")
    what = "text line" if text else "frame"
    return f"hint: {st.bytes} bytes from {port} in {waited:g} s but no valid {what}: {advice}; still waiting"


def _progress_text(st, target: str):
    from rich.text import Text

    return Text(f"{target} {st.elapsed_s:6.1f} s  {st.samples:,} samples  {st.frames:,} frames  "
                f"{st.bytes_per_s / 1e3:.1f} kB/s  CRC {st.crc_errors}  lost {st.lost_frames}  "
                f"actuations {st.complete_actuations}")


def _export_csv(out: Path, csv: Optional[Path], overwrite: bool) -> str:
    """Write the capture ``out`` as CSV; the text to add to the summary line. Raises a
    one-line error (after the capture's own line was printed, so that it hides nothing)."""
    if csv is None:
        return ""
    from ..bench.capture_file import read_capture

    with atomic_path(csv, overwrite=overwrite, option="--csv") as tmp:
        try:
            with open(tmp, "w", encoding="utf-8") as handle:
                handle.write(read_capture(out).to_csv())
        except OSError as err:
            raise OutputError(str(csv), f"cannot be written ({err.strerror or err})") from None
    return f"CSV {csv}"


@user_errors
def capture_command(
    port: Optional[str] = typer.Argument(None, help="Serial device (/dev/ttyUSB0, a pty) or pyserial URL (socket://host:port, rfc2217://..., loop://). Not needed with --replay."),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file the device runs (baud rate, sample rate, scaling); default: the --drive file's board."),
    out: Optional[Path] = typer.Option(None, "--out", "-o", help="Capture file to write as the data arrives (docs/capture-format.md)."),
    replay: Optional[Path] = typer.Option(None, "--replay", help="Decode a file of raw link bytes instead of reading a port."),
    duration: Optional[str] = typer.Option(None, "--duration", help='Stop after this long, e.g. 30 or "2 min" (default: until Ctrl-C).'),
    actuations: Optional[str] = typer.Option(None, "--actuations", help="Stop after N complete actuations (ON then OFF) and the rest of the last release."),
    csv: Optional[Path] = typer.Option(None, "--csv", help="Also write the capture as CSV (index,time_s,adc_code,current_a,event)."),
    text: bool = typer.Option(False, "--text/--binary", help="The firmware prints text lines (index,adc) instead of binary frames."),
    baud: Optional[str] = typer.Option(None, "--baud", help="Line rate in baud (default: the board file's link baud)."),
    drive: Optional[Path] = typer.Option(None, "--drive", help="Drive file the firmware runs: recorded in the capture header (and gives the board)."),
    supply: Optional[str] = typer.Option(None, "--supply", help='Bus voltage during the capture, e.g. 24 or "24 V", for the header (default: the device\'s SUPPLY readings through the board\'s divider).'),
    coil_temp: Optional[str] = typer.Option(None, "--coil-temp", help='Coil temperature during the capture, e.g. 25 or "25 degC", for the header (default: the device\'s TEMPERATURE events).'),
    hint_after: Optional[str] = typer.Option(None, "--hint-after", help="s without a valid frame before the baud-rate / mode hint (default 3)."),
    raw: Optional[Path] = typer.Option(None, "--raw", help="Also keep the link's raw bytes as they arrived, in this file (capture --replay decodes it again)."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace an existing --out (and --csv) file; without it an existing file is never touched."),
) -> None:
    """Capture coil current from a board over the bench link into a capture file."""
    import signal      # here, not at the top: CLI start-up time
    import threading
    import time

    from ..bench.link import NO_FRAME_HINT_S, DeviceLink, replay as replay_raw

    n_act = _positive_int(actuations, "--actuations", "a whole number of actuations >= 1")
    seconds = _seconds(duration, "--duration")
    rate = _positive_int(baud, "--baud", "a baud rate (a whole number >= 1)")
    wait_hint = _seconds(hint_after, "--hint-after") or NO_FRAME_HINT_S
    target = _check_out(out, overwrite=overwrite)
    if replay is not None and port is not None:
        raise InputError("--replay", "", f"reads a file; give no PORT ({port!r}) with it")
    if replay is None and port is None:
        raise InputError("PORT", "", "missing: give the serial device or URL to read, or --replay RAW")
    if replay is not None and seconds is not None:
        raise InputError("--duration", "", "applies to a live capture, not to --replay (use --actuations)")
    if csv is not None:
        _check_out(csv, "--csv", overwrite)
    if raw is not None:
        if replay is not None:
            raise InputError("--raw", "", "keeps a live link's bytes; --replay already reads such a file")
        _check_out(raw, "--raw", overwrite)
        if raw.resolve() in {target.resolve(), *([csv.resolve()] if csv is not None else [])}:
            raise InputError("--raw", "", f"{str(raw)!r} is also the capture or CSV file: give another name")
    v = parse_quantity(supply, "voltage", "--supply") if supply is not None else None
    if v is not None and not v > 0:
        raise InputError("--supply", "", f"{supply!r} must be a voltage above zero")
    temp = parse_quantity(coil_temp, "temperature", "--coil-temp") if coil_temp is not None else None
    brd, drv = _board_and_drive(board, drive)
    # the operating point: given here, else read from the device's events as they come
    point = {"supply_volts_per_code": None if v is not None else
             brd.adc.reference / 2**brd.adc.bits * brd.supply_sense.divider,
             "temperature_events": temp is None}

    if replay is not None:
        _replay(replay, target, csv, text, overwrite, _header_meta(brd, drv, drive, None, None, v, temp),
                n_act, point)
        return

    line_rate = rate if rate is not None else brd.link.baud
    meta = _header_meta(brd, drv, drive, port, line_rate, v, temp)
    stop = threading.Event()
    caught: list[str] = []

    def on_signal(signum, frame):  # noqa: ARG001 - signal handler signature
        caught.append(signal.Signals(signum).name)
        stop.set()

    old = {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        link = DeviceLink(port, baud=line_rate, capture=target, meta=meta, text=text,
                          stop_after_actuations=n_act, overwrite=overwrite, raw=raw, **point)
    except BaseException:
        for s, handler in old.items():
            signal.signal(s, handler)
        raise
    live = None
    try:
        status(f"capturing {port} at {line_rate} Bd into {target} "
               f"({'text lines' if text else 'binary frames'}; Ctrl-C stops)")
        if sys.stderr.isatty():
            from rich.console import Console
            from rich.live import Live

            live = Live(_progress_text(link.stats(), str(port)), console=Console(stderr=True),
                        refresh_per_second=8, transient=True)
            live.start()
        t0 = time.monotonic()
        hinted = False
        while not stop.is_set():
            if link.wait(_POLL_S):
                break
            elapsed = time.monotonic() - t0
            if seconds is not None and elapsed >= seconds:
                break
            if not hinted and elapsed >= wait_hint and not link.wait_first_frame(0):
                hinted = True
                message = _hint(link, str(port), brd.link.baud, line_rate, text, wait_hint)
                if live is not None:
                    live.console.print(message, markup=False, highlight=False)
                else:
                    status(message)
            if live is not None:
                live.update(_progress_text(link.stats(), str(port)))
    finally:
        if live is not None:
            live.stop()
        link.close()
        for s, handler in old.items():
            signal.signal(s, handler)
    st = link.stats()
    on_disk = _samples_on_disk(target)
    csv_note, csv_error = _csv_after(target, csv, overwrite)
    if st.error is not None:
        status(f"coildrive: capture: {port}: {st.error} after {st.elapsed_s:.1f} s; kept "
               f"{on_disk}, {st.complete_actuations} actuation(s) in {target}{csv_note}"
               f"{f', raw bytes {raw}' if raw is not None else ''}")
        _report_csv_error(csv_error)
        raise typer.Exit(1)
    why = (f"stopped by {caught[0]}" if caught else
           f"stopped after {st.complete_actuations} actuation(s)" if st.done else "duration reached")
    raw_note = f", raw bytes {raw}" if raw is not None else ""
    status(f"captured {st.summary()} ({why}) -> {target}: {on_disk} on disk{csv_note}{raw_note}")
    _report_csv_error(csv_error, exit_now=True)


def _samples_on_disk(target: Path) -> str:
    """What the capture file holds, counted from the file (not from what was decoded: a
    full disk or a failed flush keeps less)."""
    from ..bench.capture_file import count_records

    try:
        samples, events = count_records(target)
    except OSError as err:
        return f"nothing readable ({err.strerror or err})"
    return f"{samples:,} samples, {events:,} events"


def _csv_after(target: Path, csv: Optional[Path], overwrite: bool) -> tuple[str, str | None]:
    """The --csv export: ``(", CSV path"`` for the summary line, ``None)``, or ``("",
    the one error line)``, printed after the capture's own line so that it hides nothing."""
    if csv is None:
        return "", None
    try:
        return f", {_export_csv(target, csv, overwrite)}", None
    except CoildriveError as err:
        return "", f"coildrive: {err}"


def _report_csv_error(line: str | None, exit_now: bool = False) -> None:
    if line is not None:
        status(line)
        if exit_now:
            raise typer.Exit(2)


def _replay(replay: Path, target: Path, csv: Optional[Path], text: bool, overwrite: bool,
            meta: dict, n_act: int | None, point: dict) -> None:
    """``capture --replay``: decode a file of raw link bytes into ``target``.

    SIGTERM and SIGHUP end it like Ctrl-C: the temporary file is removed and ``target``
    is as it was. A stream with no valid frame writes nothing (an existing file is kept)
    and exits 2 with a hint at the mode."""
    from ..bench.link import NoFrames, guess_mode, replay as replay_raw
    from ..fileio import exit_on_signals

    try:
        with exit_on_signals():
            st = replay_raw(replay, target, text=text, meta=meta, stop_after_actuations=n_act,
                            overwrite=overwrite, require_frames=True, **point)
    except NoFrames as err:
        try:
            with open(replay, "rb") as handle:
                head = handle.read(4096)
        except OSError:
            head = b""
        guess = guess_mode(head)
        advice = ("they look like text lines: use --text" if guess == "text" and not text else
                  "they look like binary frames: use --binary" if guess == "frames" and text else
                  "is it raw link bytes of this mode?")
        raise InputError(str(replay), "", f"{err.message}: {advice}") from None
    note, error = _csv_after(target, csv, overwrite)
    partial = st.actuations - st.complete_actuations
    acts = f"{st.complete_actuations} actuation(s)" + (f" (+{partial} partial)" if partial > 0 else "")
    status(f"replayed {replay}: {st.bytes:,} bytes, {st.samples:,} samples in {st.frames:,} frames, "
           f"{acts}, {st.crc_errors} CRC error(s), {st.malformed} malformed, "
           f"{st.lost_frames} lost frame(s) -> {target}{note}")
    _report_csv_error(error, exit_now=True)
