"""``design`` and ``simulate`` of a system file (several channels on one board)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Optional

import typer

from ..errors import InputError
from ..fileio import write_atomic
from .common import status


def _load(path: Path, board: Optional[str]):
    from ..system_file import load_system

    if board is not None:
        raise InputError("--board", "", "not used with a system file: its board key names the board")
    return load_system(path)


def run_system_design(path: Path, board: Optional[str], as_json: bool, header: Optional[Path],
                      plot: Optional[Path], prefix: str, samples: int) -> None:
    """Design every channel of the system file together; the header only when all pass."""
    from ..design.system import design_system

    if samples:
        raise InputError("--samples", "", "the Monte Carlo runs on one drive file, expected it "
                         "left out with a system file")
    if plot is not None:
        raise InputError("--plot", "", "not drawn for a system file yet: plot a channel's drive file")
    system = _load(path, board)
    prefix = "BOARD" if prefix == "COIL" else prefix
    if header is not None:
        from ..codegen.header import check_prefix
        check_prefix(prefix)
    result = design_system(system)
    if as_json:
        typer.echo(json.dumps(result.to_dict(), indent=2, allow_nan=False))
    else:
        from ..design.system_report import print_system
        print_system(result)
    if not result.ok:
        if header is not None:
            status(f"header {header} not written: the system fails " + ", ".join(result.failed))
        raise typer.Exit(1)
    if header is not None:
        from ..codegen.system_header import generate_system_header
        write_atomic(header, generate_system_header(result, prefix))
        status(f"wrote header {header}")
