"""Command ``firmware-driver``: write the design header and the reference C driver."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from ..config import load_drive
from ..errors import InputError
from ..fileio import write_atomic
from .common import status, user_errors


def write_folder(out_dir: Path, files: dict[str, str]) -> None:
    """Write ``{name: text}`` into ``out_dir`` (made if missing), one status line per file."""
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(str(out_dir), "", "exists and is not a folder")
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise InputError(str(out_dir), "", f"cannot make the folder: {err.strerror}") from None
    for name, text in files.items():
        path = out_dir / name
        try:
            write_atomic(path, text)
        except OSError as err:
            raise InputError(str(path), "", f"cannot write: {err.strerror}") from None
        status(f"wrote {path}")


@user_errors
def firmware_driver(
    drive: Path = typer.Argument(..., help="Drive file (TOML)."),
    out_dir: Path = typer.Option(..., "--out", help="Folder to write <prefix>_drive.h, _driver.h and _driver.c into (made if missing)."),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file; overrides the drive file's board."),
    prefix: str = typer.Option("coil", "--prefix", help="C name prefix: coil gives coil_tick(), COIL_PEAK_TICKS."),
) -> None:
    """Write the reference peak-and-hold driver in C for DRIVE, with its design header
    (for a latching coil, ``[hold] mode = "latch"``, its set-and-reset pulse driver).

    Prints the RAM and flash it takes and each handler's share of its period at the
    board's clock; warns above 50 % and refuses (exit 2, nothing written) above 100 %.
    Exit 1 (nothing written) when the design fails a check.
    """
    from ..codegen.driver import budget_notes, render_driver
    from ..codegen.header import check_prefix
    from ..design import design

    check_prefix(prefix)
    loaded = load_drive(drive, board)
    if loaded.latch is not None:      # a latching coil: its set and reset pulses
        from ..codegen.latch_driver import latch_budget_notes, render_latch_driver
        from ..design.latch import design_latch
        result = design_latch(loaded)
    else:
        result = design(loaded)
    if not result.ok:
        status(f"driver not written: the design fails {', '.join(c.name for c in result.failed)}")
        raise typer.Exit(1)
    if loaded.latch is not None:
        files, notes = render_latch_driver(result, prefix), latch_budget_notes(result)
    else:
        files, notes = render_driver(result, prefix), budget_notes(result, prefix)
    write_folder(out_dir, files)
    for note in notes:
        status(note)
