"""Command ``firmware-stream``: write the firmware-side bench-link encoder (C)."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from .common import status, user_errors
from .driver_cmd import write_folder


@user_errors
def firmware_stream(
    out_dir: Path = typer.Argument(..., help="Folder to write <prefix>_stream.h and .c into (made if missing)."),
    prefix: str = typer.Option("coil", "--prefix", help="C name prefix: coil gives coil_stream_push(), COIL_EVENT_ON."),
    samples_per_frame: int = typer.Option(64, "--samples-per-frame", help="ADC codes per SAMPLES frame (1..510)."),
    blocks: int = typer.Option(8, "--blocks", help="Sample blocks buffered for the main loop (power of two, 2..128)."),
    event_slots: int = typer.Option(16, "--event-slots", help="Events buffered (power of two, 2..128)."),
    crc_table: bool = typer.Option(False, "--crc-table/--crc-bitwise", help="CRC by a 512-byte table or by a bitwise loop."),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file: adds its sampling macros."),
) -> None:
    """Write the C encoder that streams ADC samples and events over the bench link.

    Prints the RAM and flash it takes; with a board file that gives ``ram`` / ``flash`` it
    warns above 75 % and refuses above 100 %, and it warns when the board's sample rate
    needs more than the link carries.
    """
    from ..codegen.stream import StreamView, budget_notes, render_stream_encoder

    loaded = None
    if board is not None:
        from ..config import load_board, resolve_board
        loaded = load_board(resolve_board(board))
    files = render_stream_encoder(prefix, samples_per_frame=samples_per_frame, blocks=blocks,
                                  event_slots=event_slots, crc_table=crc_table, board=loaded)
    notes = budget_notes(StreamView(prefix, samples_per_frame, blocks, event_slots, crc_table, loaded),
                         loaded)
    write_folder(out_dir, files)
    for note in notes:
        status(note)
