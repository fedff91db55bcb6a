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
    if plot is not None:
        _write_plot(result, plot)
    if not result.ok:
        if header is not None:
            status(f"header {header} not written: the system fails " + ", ".join(result.failed))
        raise typer.Exit(1)
    if header is not None:
        from ..codegen.system_header import generate_system_header
        write_atomic(header, generate_system_header(result, prefix))
        status(f"wrote header {header}")


def _write_plot(result, plot: Path) -> None:
    from ..design.system import rail_curves
    from ..design.system_plot import plot_system

    write_atomic(plot, plot_system(result.name, rail_curves(result)))
    status(f"wrote plot {plot}")


def channel_drive(path: Path, board: Optional[str], name: Optional[str]):
    """The drive of the channel ``name`` of a system file, with the system's shared timer
    fixed in it (for ``emulate --channel``)."""
    from ..design.system import system_drives

    system = _load(path, board)
    names = [c.name for c in system.channels]
    if name is None:
        raise InputError("--channel", "", f"missing: {path} is a system file, expected one of its "
                         f"channels: {', '.join(names)}")
    if name not in names:
        raise InputError("--channel", "", f"{name!r} is not a channel of {path}, expected one of: "
                         f"{', '.join(names)}")
    return system_drives(system)[names.index(name)]


def run_system_simulate(path: Path, board: Optional[str], supply: float, coil_temp: float,
                        hold_time: float, points: int, csv: Path) -> None:
    """Every channel's actuation at one operating point, each started at its offset: the
    CSV has ``time_s``, ``current_a`` (the rail's current: each switch's current summed)
    and a ``<name>_current_a`` coil current column per channel."""
    import numpy as np

    from ..design import actuation
    from ..design.system import design_system

    result = design_system(_load(path, board))
    waves = []
    for c in result.channels:
        w = actuation(c.design, supply, coil_temp, hold_time, points=points)
        waves.append((c, w.time + c.offset_s, w.current, w.switch_on))
    t = np.unique(np.concatenate([w[1] for w in waves]))
    cols, total = [], np.zeros_like(t)
    for c, tw, i, on in waves:
        cur = np.interp(t, tw, i, left=0.0, right=0.0)
        k = np.searchsorted(tw, t, side="right") - 1
        sw = np.where(k >= 0, on[np.clip(k, 0, None)], 0)
        total += cur * sw
        cols.append(cur)
    names = ",".join(f"{c.name}_current_a" for c in result.channels)
    rows = np.column_stack([t, total, *cols])
    text = f"time_s,current_a,{names}\n" + "\n".join(",".join(f"{x:.9g}" for x in r) for r in rows) + "\n"
    write_atomic(csv, text)
    status(f"wrote {csv}: {len(t)} samples, {len(waves)} channels {result.stagger_ticks} ticks apart; "
           f"rail current up to {total.max():.4g} A at {t[int(np.argmax(total))] * 1e3:.4g} ms")
