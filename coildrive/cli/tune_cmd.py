"""``coildrive tune``: offline hold tuning, and live on the bench with ``--port``."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Optional

import typer

from ..config import load_drive
from ..errors import InputError
from ..fileio import write_atomic
from ..units import parse_quantity
from .common import status, user_errors


def _frequency(text: Optional[str], option: str) -> float:
    if text is None:
        return 0.0
    value = parse_quantity(text, "frequency", option)
    if not value > 0:
        raise InputError(option, "", f"{text!r} must be greater than zero")
    return value


def _ripple(text: Optional[str]) -> tuple[float, float | None]:
    """``--max-ripple``: a current (``"30 mA"``) or a fraction of the target (``"20 %"``)."""
    if text is None:
        return 0.0, None
    if text.strip().endswith("%"):
        frac = parse_quantity(text, "dimensionless", "--max-ripple")
        if not frac > 0:
            raise InputError("--max-ripple", "", f"{text!r} must be greater than zero")
        return 0.0, frac
    amps = parse_quantity(text, "current", "--max-ripple")
    if not amps > 0:
        raise InputError("--max-ripple", "", f"{text!r} must be greater than zero, e.g. \"30 mA\" or \"20 %\"")
    return amps, None


@user_errors
def tune_command(
    drive: Path = typer.Argument(..., help="Drive file (TOML)."),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file; overrides the drive file's board."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as one JSON document on stdout."),
    plot: Optional[Path] = typer.Option(None, "--plot", help="Write a PNG of the frequency / ripple / loss trade-off."),
    header: Optional[Path] = typer.Option(None, "--header", help="Write the C header of the recommended setting (only when its design passes)."),
    prefix: str = typer.Option("COIL", "--prefix", help="Name prefix of the header's macros."),
    min_frequency: str = typer.Option("20 kHz", "--min-frequency", help="Lowest PWM frequency swept (default: the audible limit)."),
    max_frequency: Optional[str] = typer.Option(None, "--max-frequency", help="Highest PWM frequency swept (default: board timer.max_pwm_frequency, else 100 kHz)."),
    margin: Optional[float] = typer.Option(None, "--margin", help="Factor >= 1 on the minimum hold current (hold.current; default 1). With --port: on the bench drop-out current (default: armature.current_margin). A latching coil: on the worst pulse times (a supply-compensated table: on every entry's own; default: pull_in.margin and reset.margin); its pulses from the boost: the least current_margin kept (default: each pulse's)."),
    levels: int = typer.Option(8, "--levels", help="Hold-current levels swept upward from the target."),
    level_step: str = typer.Option("5 %", "--level-step", help='Step between levels, e.g. "5 %" or 0.05.'),
    max_ripple: Optional[str] = typer.Option(None, "--max-ripple", help='Ripple limit, peak-to-peak: "30 mA" or "20 %" of the target (default 20 %).'),
    min_steps: int = typer.Option(64, "--min-steps", help="Fewest compare steps per PWM period."),
    top: int = typer.Option(20, "--top", help="Candidates shown and listed in the JSON."),
    port: Optional[str] = typer.Option(None, "--port", help="Tune live on the bench: the device's serial port (a path or a pyserial URL)."),
    baud: Optional[int] = typer.Option(None, "--baud", help="With --port: line rate (default: the board's \\[link] baud)."),
    capture: Optional[Path] = typer.Option(None, "--capture", help="With --port: capture file (default: tune-DRIVE-UTCTIME.cdcap here; the log beside it, .tune.json)."),
    repeats: Optional[int] = typer.Option(None, "--repeats", help="With --port: searches for the spread (default 3)."),
    supply: Optional[str] = typer.Option(None, "--supply", help='With --port: bench bus voltage (default: the device\'s SUPPLY events, else the nominal supply).'),
    coil_temp: Optional[str] = typer.Option(None, "--coil-temp", help="With --port: coil temperature (default: the device's TEMPERATURE events, else the reference temperature)."),
    hold_time: Optional[str] = typer.Option(None, "--hold-time", help="With --port: hold of each actuation (default: 10 time constants of the hold)."),
    resolution: Optional[str] = typer.Option(None, "--resolution", help='With --port: search resolution, a fraction of the design duty (a latching coil: of each pulse\'s design length; default "1 %").'),
    detect: Optional[str] = typer.Option(None, "--detect", help="With --port: drop-out from the position switch or the current's signature: auto (default), switch, signature (a latching coil: the switch only)."),
) -> None:
    """Sweep PWM frequency and hold current over every corner; recommend the least-power
    hold that stays seated. Exit 1 when nothing is feasible or the design of the
    recommendation fails a check.

    With --port: find the drop-out duty on the bench (a coildrive bench-link device) and
    recommend the hold from it; exit 1 on a stuck armature, an open coil, an
    over-current, no drop-out, or a recommendation whose design fails; 130 on Ctrl-C.
    A latching coil with --port: the shortest set and reset pulses that latch and let go
    on the bench (its position switch), scaled to the worst corner; exit 1 on a latch that
    does not latch or let go at its design lengths, an open coil, an over-current, or a
    recommendation whose design fails; 130 on Ctrl-C. The device is sent STOP on every exit."""
    live = {"--baud": baud, "--capture": capture, "--repeats": repeats, "--supply": supply,
            "--coil-temp": coil_temp, "--hold-time": hold_time, "--resolution": resolution,
            "--detect": detect}
    # the options of the offline sweep of a hold's PWM that differ from their defaults
    offline = [option for option, given in (
        ("--plot", plot is not None), ("--min-frequency", min_frequency != "20 kHz"),
        ("--max-frequency", max_frequency is not None), ("--levels", levels != 8),
        ("--level-step", level_step != "5 %"), ("--max-ripple", max_ripple is not None),
        ("--min-steps", min_steps != 64), ("--top", top != 20)) if given]
    if port is not None:
        if offline:
            raise InputError(offline[0], "", "belongs to the offline sweep; not with --port")
        d = load_drive(drive, board)
        if d.latch is not None:
            if hold_time is not None:
                raise InputError("--hold-time", "", "a latching coil has no hold: the live tune steps its "
                                 "pulse lengths")
            _latch_live(d, port, as_json, header, prefix, margin, baud, capture, repeats, supply, coil_temp,
                        resolution, detect)
            return
        _live(drive, board, port, as_json, header, prefix, margin, **{k[2:].replace("-", "_"): v for k, v in live.items()})
        return
    for option, value in live.items():
        if value is not None:
            raise InputError(option, "", "is for the live bench tuning: give --port too")
    d = load_drive(drive, board)
    if d.latch is not None:
        if offline:
            raise InputError(offline[0], "", "belongs to the sweep of a hold's PWM; a latching coil's "
                             "sweep steps its pulse lengths")
        _latch(d, as_json, header, prefix, margin)
        return
    if margin is None:
        margin = 1.0
    from ..tune.sweep import TuneOptions, recommended_design, tune

    amps, frac = _ripple(max_ripple)
    step = parse_quantity(level_step, "dimensionless", "--level-step")
    options = TuneOptions(
        min_frequency=_frequency(min_frequency, "--min-frequency"),
        max_frequency=_frequency(max_frequency, "--max-frequency"), margin=margin, levels=levels,
        level_step=step, max_ripple=amps, min_duty_steps=min_steps, top=top,
        **({"max_ripple_fraction": frac} if frac is not None else {}))
    options.check()
    if header is not None:
        from ..codegen.header import check_prefix
        check_prefix(prefix)
    result = tune(d, options)
    des = recommended_design(result)
    if des is not None and des.timer.compare_ticks != result.recommendation.compare_ticks:
        result.notes.append(f"the design rounds this setting to compare {des.timer.compare_ticks} "
                            "(thermal tolerance); the header uses the design's value")
    if as_json:
        from ..tune.report import tune_dict
        typer.echo(json.dumps(tune_dict(result, des), indent=2))
    else:
        from ..tune.report import print_tune
        print_tune(result, des)
    if plot is not None:
        from ..tune.plot import plot_tune
        write_atomic(plot, plot_tune(result))
        status(f"wrote plot {plot}")
    if des is None:
        status(f"coildrive tune: {result.explanation}")
        if header is not None:
            status(f"header {header} not written: no feasible setting")
        raise typer.Exit(1)
    if not des.ok:
        names = ", ".join(c.name for c in des.failed)
        status(f"coildrive tune: the design of the recommended setting fails {names}"
               + (f"; header {header} not written" if header is not None else ""))
        raise typer.Exit(1)
    if header is not None:
        from ..codegen.header import generate_header
        write_atomic(header, generate_header(des, prefix))
        status(f"wrote header {header}")


def _latch(d, as_json: bool, header: Optional[Path], prefix: str, margin: Optional[float]) -> None:
    """``tune`` of a latching coil: the offline pulse sweep (:mod:`coildrive.tune.latch`),
    its table or JSON, and with ``--header`` the header of the recommended pulses (only when
    their design passes). Exit 1 without a recommendation or when its design fails."""
    from ..tune.latch import tune_latch
    from ..tune.latch_report import latch_tune_dict, latch_tune_ok, print_latch_tune

    if margin is not None and not margin >= 1:
        raise InputError("--margin", "", f"{margin:g} must be at least 1 (the factor on the worst pulse "
                         "time; from the boost the least current_margin)")
    if header is not None:
        from ..codegen.header import check_prefix
        check_prefix(prefix)
    result = tune_latch(d, margin)
    if as_json:
        typer.echo(json.dumps(latch_tune_dict(result), indent=2))
    else:
        print_latch_tune(result)
    if not latch_tune_ok(result):
        why = ("its design fails " + ", ".join(c.name for c in result.recommended.failed)
               if result.recommended is not None else "no recommendation")
        status(f"coildrive tune: {why}" + (f"; header {header} not written" if header is not None else ""))
        raise typer.Exit(1)
    if header is not None:
        from ..codegen.latch_header import generate_latch_header
        write_atomic(header, generate_latch_header(result.recommended, prefix))
        status(f"wrote header {header}")


def _live(drive: Path, board: Optional[str], port: str, as_json: bool, header: Optional[Path], prefix: str,
          margin: Optional[float], baud: Optional[int], capture: Optional[Path], repeats: Optional[int],
          supply: Optional[str], coil_temp: Optional[str], hold_time: Optional[str],
          resolution: Optional[str], detect: Optional[str]) -> None:
    """``tune --port``: the live procedure of :mod:`coildrive.tune.live` over a DeviceLink."""
    from ..design import design
    from ..tune.live import LiveOptions, LiveTuner
    from ..tune.live_report import live_dict, print_live
    from ..tune.sweep import check_tunable

    options = LiveOptions(
        hold_time=0.0 if hold_time is None else parse_quantity(hold_time, "time", "--hold-time"),
        **_shared_options(repeats, supply, coil_temp, resolution, margin, detect))
    options.check()
    if options.hold_time == 0 and hold_time is not None:
        raise InputError("--hold-time", "", f"{hold_time!r} must be greater than zero")
    _check_link_options(baud, header, prefix)
    d = load_drive(drive, board)
    check_tunable(d, "live tuning steps")
    des = design(d)
    _refuse_failing(des, str(drive))
    meta = {"peak_time_s": des.pull_in.peak_time_s, "hold_duty": des.hold.duty,
            "hold_frequency_hz": des.hold.frequency_hz, "extra": {"procedure": "coildrive tune --port (live hold tuning)"}}
    result = _bench_session(d, port, as_json, baud, capture, options, meta, "seat check at the design duty",
                            lambda link, report: LiveTuner(link, des, options, progress=report).run(),
                            live_dict, print_live)
    rec = result.recommendation

    def render() -> str:
        from ..codegen.header import generate_header
        return generate_header(rec.design, prefix)
    _recommended_header(rec.design_ok, rec.design_failed, "hold", header, render)


def _latch_live(d, port: str, as_json: bool, header: Optional[Path], prefix: str, margin: Optional[float],
                baud: Optional[int], capture: Optional[Path], repeats: Optional[int], supply: Optional[str],
                coil_temp: Optional[str], resolution: Optional[str], detect: Optional[str]) -> None:
    """``tune --port`` of a latching coil: :mod:`coildrive.tune.latch_live` over a DeviceLink,
    its table or JSON and log, and with ``--header`` the header of the recommended pulses
    (only when their design passes)."""
    from ..design.latch import design_latch
    from ..tune.latch_live import LatchLiveOptions, LatchLiveTuner, check_latch_live
    from ..tune.latch_live_report import latch_live_dict, print_latch_live

    options = LatchLiveOptions(**_shared_options(repeats, supply, coil_temp, resolution, margin, detect))
    options.check()
    _check_link_options(baud, header, prefix)
    check_latch_live(d)
    des = design_latch(d)
    _refuse_failing(des, d.source)
    meta = {"extra": {"procedure": "coildrive tune --port (live tune of a latch's pulses)"}}
    result = _bench_session(d, port, as_json, baud, capture, options, meta, "check at the design lengths",
                            lambda link, report: LatchLiveTuner(link, des, options, progress=report).run(),
                            latch_live_dict, print_latch_live)
    rec = result.recommended

    def render() -> str:
        from ..codegen.latch_header import generate_latch_header
        return generate_latch_header(rec, prefix)
    _recommended_header(rec.ok, [c.name for c in rec.failed], "pulses", header, render)


def _recommended_header(ok: bool, failed: list[str], what: str, header: Optional[Path], render) -> None:
    """A live tune's end: exit 1 when the design of the recommended ``what`` fails (no
    header), else ``--header`` written from ``render()``."""
    if not ok:
        status(f"coildrive tune: the design with the recommended {what} fails {', '.join(failed)}"
               + (f"; header {header} not written" if header is not None else ""))
        raise typer.Exit(1)
    if header is not None:
        write_atomic(header, render())
        status(f"wrote header {header}")


def _shared_options(repeats: Optional[int], supply: Optional[str], coil_temp: Optional[str],
                    resolution: Optional[str], margin: Optional[float], detect: Optional[str]) -> dict:
    """The options every live tune takes, parsed (their defaults filled in)."""
    return dict(
        repeats=3 if repeats is None else repeats,
        supply=None if supply is None else parse_quantity(supply, "voltage", "--supply"),
        coil_temp=None if coil_temp is None else parse_quantity(coil_temp, "temperature", "--coil-temp"),
        resolution=0.01 if resolution is None else parse_quantity(resolution, "dimensionless", "--resolution"),
        margin=margin, detect=detect or "auto")


def _check_link_options(baud: Optional[int], header: Optional[Path], prefix: str) -> None:
    if baud is not None and not baud > 0:
        raise InputError("--baud", "", f"{baud} must be greater than zero")
    if header is not None:
        from ..codegen.header import check_prefix
        check_prefix(prefix)


def _refuse_failing(des, source: str) -> None:
    """A failing design (switch voltage, coil temperature, ...) must not drive hardware: exit 1."""
    if not des.ok:
        status(f"coildrive tune: the design of {source} fails {', '.join(c.name for c in des.failed)}: fix "
               "it (coildrive design) before tuning it on the bench; nothing was sent to the device")
        raise typer.Exit(1)


def _bench_session(d, port: str, as_json: bool, baud: Optional[int], capture: Optional[Path], options,
                   meta: dict, first_step: str, run, to_dict, show):
    """What every live tune does around its procedure: the capture file (default
    tune-DRIVE-UTCTIME.cdcap) and its ``.tune.json`` log beside it, the DeviceLink, a
    progress bar on stderr, ``run(link, report)``, the result's JSON (``to_dict``) or table
    (``show``). Exit 1 on a failure or an unacknowledged STOP (130 on Ctrl-C); else the
    result."""
    from datetime import datetime, timezone

    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from ..bench.link import DeviceLink, LinkError
    from ..bench.synth import adc_scaling

    if capture is None:
        stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
        capture = Path(f"tune-{d.name}-{stamp}.cdcap")
    log = capture.with_name(capture.stem + ".tune.json")
    meta = {"drive": d.name, "board": d.board.name, "sense_position": d.board.sense.position,
            "amps_per_code": adc_scaling(d)[1], **meta}
    if options.supply is not None:
        meta["supply_v"] = options.supply
    if options.coil_temp is not None:
        meta["coil_temp_c"] = options.coil_temp
    line_rate = baud or d.board.link.baud
    progress = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                        TimeElapsedColumn(), console=Console(stderr=True), transient=False)
    task = progress.add_task(first_step, total=None)

    def report(done: int, total: int, message: str) -> None:
        progress.update(task, completed=done, total=max(total, done), description=message)

    try:
        link = DeviceLink(port, baud=line_rate, capture=capture, meta=meta)
    except LinkError as err:
        raise InputError("--port", "", str(err)) from None
    with link:
        status(f"coildrive tune: live on {port} at {line_rate} baud; capture {capture}, log {log}")
        with progress:
            result = run(link, report)
    doc = to_dict(result, port=port, capture=str(capture), log=str(log))
    write_atomic(log, json.dumps(doc, indent=2) + "\n")
    if as_json:
        typer.echo(json.dumps(doc, indent=2))
    else:
        show(result, Console())
    if result.failure is not None:
        code, message = result.failure
        if as_json:  # the table above already shows the failure; with --json stdout is data
            status(f"coildrive tune: {message}")
        status(f"coildrive tune: {result.stop_detail}")
        raise typer.Exit(130 if code == "interrupted" else 1)
    if not result.stopped:
        status(f"coildrive tune: {result.stop_detail}")
        raise typer.Exit(1)
    return result
