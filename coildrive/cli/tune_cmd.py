"""``coildrive tune``: offline hold tuning (the live bench mode comes with the bench link)."""

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
    margin: float = typer.Option(1.0, "--margin", help="Factor >= 1 on the minimum hold current (hold.current)."),
    levels: int = typer.Option(8, "--levels", help="Hold-current levels swept upward from the target."),
    level_step: str = typer.Option("5 %", "--level-step", help='Step between levels, e.g. "5 %" or 0.05.'),
    max_ripple: Optional[str] = typer.Option(None, "--max-ripple", help='Ripple limit, peak-to-peak: "30 mA" or "20 %" of the target (default 20 %).'),
    min_steps: int = typer.Option(64, "--min-steps", help="Fewest compare steps per PWM period."),
    top: int = typer.Option(20, "--top", help="Candidates shown and listed in the JSON."),
) -> None:
    """Sweep PWM frequency and hold current over every corner; recommend the least-power
    hold that stays seated. Exit 1 when nothing is feasible or the design of the
    recommendation fails a check."""
    from ..tune import TuneOptions, recommended_design, tune

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
    d = load_drive(drive, board)
    result = tune(d, options)
    des = recommended_design(result)
    if des is not None and des.timer.compare_ticks != result.recommendation.compare_ticks:
        result.notes.append(f"the design rounds this setting to compare {des.timer.compare_ticks} "
                            "(thermal tolerance); the header uses the design's value")
    if as_json:
        from ..tune_report import tune_dict
        typer.echo(json.dumps(tune_dict(result, des), indent=2))
    else:
        from ..tune_report import print_tune
        print_tune(result, des)
    if plot is not None:
        from ..tune_plot import plot_tune
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
