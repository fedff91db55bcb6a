"""Bench commands on a capture file: ``check`` (against the design) and ``fit`` (the coil)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Optional

import typer

from ..errors import InputError
from ..fileio import write_atomic
from ..units import format_si, parse_quantity
from .common import status, user_errors


def _quantity(text: Optional[str], dimension: str, option: str) -> float | None:
    if text is None:
        return None
    return parse_quantity(text, dimension, option)


def _fraction(text: Optional[str], option: str) -> float | None:
    if text is None:
        return None
    value = parse_quantity(text, "dimensionless", option)
    if not 0 <= value < 10:
        raise InputError(option, "", f"{text!r} is not a tolerance, expected a fraction such as 0.15 or \"15 %\"")
    return value


def _read(capture: Path, columns: Optional[str], current_scale: Optional[str],
          sample_interval: Optional[str]):
    """The capture, whatever wrote it: a capture file, text-mode lines or a scope CSV."""
    from ..bench.scope import ScopeOptions, parse_columns, parse_current_scale, read_any_capture

    interval = _quantity(sample_interval, "time", "--sample-interval")
    if interval is not None and not interval > 0:
        raise InputError("--sample-interval", "", f"{sample_interval!r} must be a time above zero")
    options = ScopeOptions(parse_columns(columns), parse_current_scale(current_scale), interval)
    return read_any_capture(capture, options)


_CAPTURE_HELP = ("Capture file (coildrive capture format), text-mode index,adc lines, or an "
                 "oscilloscope CSV of time and coil current.")
_COLUMNS_HELP = ('Scope CSV: which column is which, ROLE=NAME or ROLE=NUMBER (from 1), roles time, '
                 'current, switch (gate/switch state, high = on: gives the phases), node (switch-node '
                 'voltage), supply; e.g. "time=1,current=CH1,switch=CH2".')
_SCALE_HELP = 'Scope CSV: the current probe\'s scale, A per V ("10 A/V", "100 mV/A" or 10).'
_INTERVAL_HELP = 'Scope CSV: time between rows, when the file counts samples and does not say it (e.g. "1 us").'


def _board_for(capture, board: Optional[str]):
    """The board from ``--board``, else the bundled board the capture names."""
    from ..config import load_board, resolve_board

    spec = board or capture.meta.board
    if spec is None:
        raise InputError("--board", "", "the capture does not name its board: give --board NAME or a board file")
    try:
        path = resolve_board(str(spec))
    except InputError as err:
        raise InputError("--board" if board else capture.source, "" if board else "board", err.message) from None
    return load_board(path)


def _cell(value, unit: str) -> str:
    if value is None:
        return "-"
    if unit == "samples" or unit == "":
        return f"{value:g}"
    return format_si(float(value), unit)


def _margin(value) -> str:
    return "-" if value is None else f"{value:+.0f} %"


def _print_check(report, console=None) -> None:
    from rich.console import Console
    from rich.markup import escape
    from rich.table import Table

    from ..console import print_cautions, print_verdict

    console = console or Console()
    p = report.point
    t = Table(title=f"coildrive check: {report.capture_source} against {report.drive_name} on {report.board_name}")
    for col, just in (("figure", "left"), ("measured", "right"), ("predicted", "right"),
                      ("accepted", "right"), ("to edge", "right"), ("result", "left"), ("detail", "left")):
        t.add_column(col, justify=just)
    marks = {"pass": "[green]pass[/green]", "FAIL": "[bold red]FAIL[/bold red]",
             "n/a": "[yellow]n/a[/yellow]", "info": "[cyan]info[/cyan]"}
    for i in report.items:
        band = "-" if i.low is None else f"{_cell(i.low, i.unit)} .. {_cell(i.high, i.unit)}"
        t.add_row(i.name, _cell(i.measured, i.unit), _cell(i.predicted, i.unit), band,
                  _margin(i.margin_pct), marks.get(i.status, i.status), escape(i.detail))
    t.caption = escape(f"at {p.supply_v:.4g} V ({p.supply_from}), coil {p.coil_temp_c:.4g} degC ({p.coil_temp_from}); "
                 "measured = the actuation farthest from the prediction; to edge = its distance to the "
                 "nearer band edge in % of the band (50 % = on the prediction, below 0 = outside)")
    console.print(t)
    for note in report.notes:
        console.print(f"  note: {escape(note)}")
    print_cautions(console, report.cautions)
    print_verdict(console, report.ok, "check passed", "check FAILED", [i.name for i in report.failed])


def _drive_or_channel(path: Path, board: Optional[str], channel: Optional[str]):
    """The drive ``check`` compares with: the drive file's, or with a system file the
    channel ``channel``'s with the system's shared timer fixed in it (the design the
    board's firmware runs; the channel's drive file alone may pick another timer)."""
    from ..config import load_drive
    from ..system_file import is_system_file

    if is_system_file(path):
        from .system_cmd import channel_drive
        return channel_drive(path, board, channel)
    if channel is not None:
        raise InputError("--channel", "", f"{path} is a drive file, not a system file: leave --channel out")
    return load_drive(path, board)


@user_errors
def check_command(
    capture: Path = typer.Argument(..., help=_CAPTURE_HELP),
    drive: Path = typer.Argument(..., help="Drive file (TOML) whose design the firmware runs, or a system file with --channel."),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file; overrides the drive file's board."),
    channel: Optional[str] = typer.Option(None, "--channel", help="With a system file: the channel (its name) the capture is of, checked against its design on the system's shared timer."),
    supply: Optional[str] = typer.Option(None, "--supply", help='Bus voltage during the capture, e.g. 24 or "24 V" (default: the capture\'s, else the nominal supply).'),
    coil_temp: Optional[str] = typer.Option(None, "--coil-temp", help='Coil temperature during the capture, e.g. 25 or "25 degC" (default: the capture\'s, else the coil\'s reference temperature).'),
    tol_pull_in: Optional[str] = typer.Option(None, "--tol-pull-in", help="Tolerance on the pull-in time (default 0.15 = 15 %)."),
    tol_seated: Optional[str] = typer.Option(None, "--tol-seated", help="Tolerance on the seat time, with \\[armature] (default 0.20)."),
    tol_peak: Optional[str] = typer.Option(None, "--tol-peak", help="Tolerance on the peak duration (default 0.05)."),
    tol_hold_mean: Optional[str] = typer.Option(None, "--tol-hold-mean", help="Tolerance on the hold mean current (default 0.10)."),
    tol_ripple: Optional[str] = typer.Option(None, "--tol-ripple", help="Tolerance on the hold ripple (default 0.30)."),
    tol_release: Optional[str] = typer.Option(None, "--tol-release", help="Tolerance on the release time, and a latching coil's time to zero after each pulse (default 0.20)."),
    tol_pulse: Optional[str] = typer.Option(None, "--tol-pulse", help="Tolerance on a latching coil's current at the end of each pulse (default 0.10)."),
    no_events: bool = typer.Option(False, "--no-events", help="Find the phases from the waveform even when the capture has events (or, in a scope CSV, a switch column)."),
    columns: Optional[str] = typer.Option(None, "--columns", help=_COLUMNS_HELP),
    current_scale: Optional[str] = typer.Option(None, "--current-scale", help=_SCALE_HELP),
    sample_interval: Optional[str] = typer.Option(None, "--sample-interval", help=_INTERVAL_HELP),
    as_json: bool = typer.Option(False, "--json", help="Print the report as one JSON document on stdout."),
    plot: Optional[Path] = typer.Option(None, "--plot", help="Write a PNG of the measured actuations over the predicted one, with the acceptance bands."),
) -> None:
    """Check a capture against the design of DRIVE: a pass/fail table; exit 1 on any fail."""
    from ..bench.check import Tolerances, check_capture
    from ..design import design

    overrides = {"pull_in_time": _fraction(tol_pull_in, "--tol-pull-in"),
                 "seated_time": _fraction(tol_seated, "--tol-seated"),
                 "peak_duration": _fraction(tol_peak, "--tol-peak"),
                 "hold_mean": _fraction(tol_hold_mean, "--tol-hold-mean"),
                 "hold_ripple": _fraction(tol_ripple, "--tol-ripple"),
                 "release_time": _fraction(tol_release, "--tol-release"),
                 "pulse_current": _fraction(tol_pulse, "--tol-pulse")}
    tolerances = Tolerances(**{k: v for k, v in overrides.items() if v is not None})
    v = _quantity(supply, "voltage", "--supply")
    t = _quantity(coil_temp, "temperature", "--coil-temp")
    cap = _read(capture, columns, current_scale, sample_interval)
    drv = _drive_or_channel(drive, board, channel)
    if drv.latch is not None:
        from ..bench.latch_check import check_latch_capture
        from ..design.latch import design_latch

        for option, given in (("--plot", plot is not None), ("--no-events", no_events)):
            if given:
                raise InputError(option, "", "a latching coil's check takes its pulses from the ON/OFF "
                                 "events and has no plot yet: leave it out")
        report = check_latch_capture(cap, design_latch(drv), tolerances, supply=v, coil_temp=t)
    else:
        report = check_capture(cap, design(drv), tolerances, supply=v, coil_temp=t,
                               use_events=not no_events)
    if as_json:
        typer.echo(json.dumps(report.to_dict(), indent=2))
    else:
        _print_check(report)
    if plot is not None:
        from ..bench.plot import plot_check
        write_atomic(plot, plot_check(report, cap))
        status(f"wrote plot {plot}")
    if not report.ok:
        raise typer.Exit(1)


@user_errors
def fit_command(
    capture: Path = typer.Argument(..., help=_CAPTURE_HELP),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file (default: the board the capture names)."),
    supply: Optional[str] = typer.Option(None, "--supply", help='Bus voltage during the capture, e.g. 24 or "24 V" (default: the capture\'s).'),
    coil_temp: Optional[str] = typer.Option(None, "--coil-temp", help='Coil temperature during the capture (default: the capture\'s, else 20 degC, flagged).'),
    columns: Optional[str] = typer.Option(None, "--columns", help=_COLUMNS_HELP),
    current_scale: Optional[str] = typer.Option(None, "--current-scale", help=_SCALE_HELP),
    sample_interval: Optional[str] = typer.Option(None, "--sample-interval", help=_INTERVAL_HELP),
    as_json: bool = typer.Option(False, "--json", help="Print the fit as one JSON document on stdout."),
    flux_curve: bool = typer.Option(False, "--flux-curve", help="Fit the coil's flux-linkage curve (a saturating coil) instead of one inductance; the rise must settle, or give --resistance (docs/coil-model.md)."),
    resistance: Optional[str] = typer.Option(None, "--resistance", help='With --flux-curve: the coil\'s resistance at the capture\'s temperature, e.g. "22 ohm" (default: from the settled current).'),
    plot: Optional[Path] = typer.Option(None, "--plot", help="With --flux-curve: write a PNG of the fitted flux linkage and incremental inductance against current, with the measured points and range."),
    drive: Optional[Path] = typer.Option(None, "--drive", help="With --plot: a drive file whose coil (its inductance, or its curve) the plot shows beside the fit."),
    seated: bool = typer.Option(False, "--seated", help="With --flux-curve: also fit the seated coil's curve from each release (the sense must be in the coil path); printed for information and in the JSON (docs/coil-model.md)."),
) -> None:
    """Fit the coil's R and L (with --flux-curve: its flux-linkage curve) from the rise before the armature moves; print a \\[coil] section."""
    from ..bench.analysis import analyse
    from ..bench.check import prepare_capture
    from ..bench.fit import fit_capture

    cap = _read(capture, columns, current_scale, sample_interval)
    brd = _board_for(cap, board)
    cap = prepare_capture(cap, brd)
    v = _quantity(supply, "voltage", "--supply")
    if v is None:
        v = cap.meta.supply_v
    if v is None:
        raise InputError("--supply", "", "the capture does not say its bus voltage: give --supply V")
    t = _quantity(coil_temp, "temperature", "--coil-temp")
    if t is None:
        t = cap.meta.coil_temp_c
    r = _quantity(resistance, "resistance", "--resistance")
    if r is not None and not flux_curve:
        raise InputError("--resistance", "", "is for --flux-curve (the plain fit finds R itself)")
    if plot is not None and not flux_curve:
        raise InputError("--plot", "", "is for --flux-curve (it draws the flux-linkage curve)")
    if drive is not None and plot is None:
        raise InputError("--drive", "", "is for --plot (the plot shows the drive file's coil beside the fit)")
    if seated and not flux_curve:
        raise InputError("--seated", "", "is for --flux-curve (it fits the seated coil's curve)")
    if flux_curve:
        _fit_flux(cap, brd, v, t, r, as_json, plot, drive, seated)
        return
    result = fit_capture(cap, brd, v, t, analyse(cap))
    if as_json:
        typer.echo(json.dumps(result.to_dict(), indent=2))
        return
    for note in result.notes:
        status(f"note: {note}")
    status(f"fitted {len(result.fits)} actuation(s) at {v:.4g} V: loop {result.loop_resistance_ohm:.4g} ohm "
           f"(switch {result.switch_resistance_ohm:.3g} + sense {result.sense_resistance_ohm:.3g} ohm)")
    typer.echo(result.coil_section(), nl=False)


def _fit_flux(cap, brd, v: float, t, r, as_json: bool, plot: Optional[Path], drive: Optional[Path],
              seated: bool) -> None:
    """``fit --flux-curve``: the open curve (and with ``seated`` the seated one), printed,
    as JSON, and plotted. With ``seated`` a capture whose rise gives no open curve (the
    armature moves in it) still gives the seated curve."""
    from ..bench.analysis import analyse
    from ..bench.flux_fit import fit_flux, flux_text

    reference = None
    if drive is not None:
        from ..config import load_drive

        reference = load_drive(drive).coil
    analysis = analyse(cap)
    curve = seat = None
    missing = None
    try:
        curve = fit_flux(cap, brd, v, t, r, analysis)
    except InputError as err:
        if not seated:
            raise
        missing = err
    if seated:
        from ..bench.release_fit import fit_seated

        seat = fit_seated(cap, brd, v, t, r, analysis)
    if plot is not None:
        if curve is None:
            raise missing
        from ..bench.flux_plot import flux_plot_data, plot_flux

        write_atomic(plot, plot_flux(flux_plot_data(curve, reference, str(drive) if drive else "", seat)))
        status(f"wrote plot {plot}")
    why = None if missing is None else f"no open curve in this capture: {missing.message}"
    if as_json:
        doc = curve.to_dict() if not seated else {
            "open": None if curve is None else curve.to_dict(), "seated": seat.to_dict(),
            "notes": [] if why is None else [why]}
        typer.echo(json.dumps(doc, indent=2))
        return
    if curve is not None:
        for note in curve.notes:
            status(f"note: {note}")
        status(flux_text(curve))
        typer.echo(curve.coil_section(), nl=False)
    else:
        status(f"note: {why}")
    if seat is not None:
        from ..bench.release_fit import seated_text

        for note in seat.notes:
            status(f"note: {note}")
        status(seated_text(seat))
        typer.echo(seat.text(), nl=False)
