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
                        hold_time: float, points: int, csv: Path, r_factor: float = 1.0,
                        l_factor: float = 1.0) -> None:
    """Every channel's actuation at one operating point as the firmware runs it on the
    shared timer (:mod:`coildrive.design.system_sim`): the CSV has ``time_s``,
    ``current_a`` (the rail's current: each switch's current summed), a
    ``<name>_current_a`` coil current column and a ``<name>_on`` switch column per channel,
    and a drooping rail's ``bus_v``."""
    from ..design.system import design_system
    from ..design.system_sim import simulate_system

    result = design_system(_load(path, board))
    run = simulate_system(result, supply, coil_temp, hold_time, points, r_factor, l_factor)
    write_atomic(csv, run.to_csv())
    k = int(run.rail.argmax())
    timers = ", ".join(f"{t['frequency_hz']:.6g} Hz" for t in result.timers) or "each channel's own"
    status(f"wrote {csv}: {len(run.time)} samples, {len(run.names)} channels {result.stagger_ticks} "
           f"ticks apart, holds on the timers' period starts ({timers}); rail current up to "
           f"{run.rail[k]:.4g} A at {run.time[k] * 1e3:.4g} ms")
    for name, bus in run.bus.items():
        j = int(bus.argmin())
        status(f"{name}: the bus droops behind the source resistance, fed back into the coils: "
               f"lowest {bus[j]:.4f} V at {run.time[j] * 1e3:.4g} ms")
    for why in run.stiff:
        status(why)
