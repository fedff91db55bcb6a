"""Commands of the design job: design, demo, simulate, boards."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Optional

import typer

from ..config import load_board, load_drive
from ..errors import InputError
from ..fileio import write_atomic
from ..resources import bundled_boards, example
from ..units import parse_quantity
from .common import status, user_errors

DEMO = "demo-valve"


def _run_design(drive_path: Path, board: Optional[str], as_json: bool, header: Optional[Path],
                plot: Optional[Path], prefix: str, samples: int, seed: int) -> None:
    from ..design import design

    if samples < 0:
        raise InputError("--samples", "", f"{samples} is negative, expected a count >= 0")
    from ..system_file import is_system_file
    if is_system_file(drive_path):
        from .system_cmd import run_system_design
        return run_system_design(drive_path, board, as_json, header, plot, prefix, samples)
    drive = load_drive(drive_path, board)
    if header is not None:
        from ..codegen.header import check_prefix
        check_prefix(prefix)
    if drive.latch is not None:
        _run_latch(drive, as_json, header, plot, prefix, samples, seed)
        return
    result = design(drive, samples=samples, seed=seed)
    if as_json:
        typer.echo(json.dumps(result.to_dict(), indent=2))
    else:
        from ..design.report import print_design
        print_design(result)
    if plot is not None:
        from ..design import design_thermal_curves, design_waveforms
        from ..design.plot import plot_design
        write_atomic(plot, plot_design(result, design_waveforms(result), design_thermal_curves(result)))
        status(f"wrote plot {plot}")
    from ..codegen.header import generate_header
    _header_or_exit(result, header, lambda: generate_header(result, prefix))


def _run_latch(drive, as_json: bool, header: Optional[Path], plot: Optional[Path], prefix: str,
               samples: int, seed: int) -> None:
    """``design`` of a latching coil: its table or JSON (with ``--samples``, its Monte
    Carlo), and its header."""
    from ..design.latch import design_latch

    result = design_latch(drive)
    if samples:
        from ..design.latch_montecarlo import with_monte_carlo
        result = with_monte_carlo(result, samples, seed)
    waves = None
    if plot is not None:   # before any output: an armature that does not seat is one line
        from ..design.latch import latch_waveforms
        from ..model.latch_waveform import NotSeated
        try:
            waves = latch_waveforms(result)
        except NotSeated as err:
            raise InputError("--plot", "", str(err)) from None
    if as_json:
        typer.echo(json.dumps(result.to_dict(), indent=2))
    else:
        from ..design.latch_report import print_latch
        print_latch(result)
    if plot is not None:
        from ..design.latch_plot import plot_latch
        write_atomic(plot, plot_latch(result, waves))
        status(f"wrote plot {plot}")
    from ..codegen.latch_header import generate_latch_header
    _header_or_exit(result, header, lambda: generate_latch_header(result, prefix))


def _header_or_exit(result, header: Optional[Path], render) -> None:
    """Write the header ``render()`` gives when the design passes; exit 1 when it fails
    (saying the header was not written)."""
    if not result.ok:
        if header is not None:
            status(f"header {header} not written: the design fails "
                   + ", ".join(c.name for c in result.failed))
        raise typer.Exit(1)
    if header is not None:
        write_atomic(header, render())
        status(f"wrote header {header}")


@user_errors
def design_command(
    drive: Path = typer.Argument(..., help="Drive file, or a system file of several channels (TOML)."),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file; overrides the drive file's board."),
    as_json: bool = typer.Option(False, "--json", help="Print the design as one JSON document on stdout."),
    header: Optional[Path] = typer.Option(None, "--header", help="Write the C header here (only when every check passes)."),
    plot: Optional[Path] = typer.Option(None, "--plot", help="Write a PNG of the nominal and worst-corner actuation (a system file: each channel's current bound and the rail's total against the limit, staggered and together)."),
    prefix: str = typer.Option("COIL", "--prefix", help="Name prefix of the header's macros (a system file's shared block: BOARD unless given)."),
    samples: int = typer.Option(0, "--samples", help="Add a tolerance Monte Carlo of N samples."),
    seed: int = typer.Option(1, "--seed", help="Random seed of the Monte Carlo."),
) -> None:
    """Design the peak-and-hold drive for DRIVE; exit 1 if a check fails."""
    _run_design(drive, board, as_json, header, plot, prefix, samples, seed)


@user_errors
def demo_command(
    header: Path = typer.Option(Path("demo_valve.h"), "--header", help="Where to write the demo's C header."),
    as_json: bool = typer.Option(False, "--json", help="Print the design as JSON instead of tables."),
) -> None:
    """Design the bundled demo (a 24 V valve on a lab analyser) and write its C header."""
    path = example(DEMO)
    if not as_json:
        status(f"demo: {path}")
    _run_design(path, None, as_json, header, None, "VALVE", 0, 1)


def _simulate_latch(drive, v: float, t: float, csv: Path, r_factor: float, l_factor: float,
                    points: int, plot: Optional[Path]) -> None:
    """``simulate`` of a latching coil: the set pulse, then the reset pulse one shortest
    interval later (``--hold-time`` does not apply)."""
    from ..design.latch import design_latch, firmware_pulse, winding_drive
    from ..model.latch_waveform import NotSeated, latch_actuation

    d = design_latch(drive)
    by = {p.name: p for p in d.latch.pulses}
    for p in by.values():
        if p.ticks is None:
            raise InputError(str(drive.source), "pull_in.current" if p.name == "set" else "reset.current",
                             f"the {p.name} pulse's current is {p.not_reached}, so there is no pulse to simulate")
    if d.latch.interval_ticks is None:
        raise InputError(str(drive.source), "thermal.capacity", "one pulse heats the coil past "
                         "thermal.max_coil_temp (the coil_temperature check), so there is no interval "
                         "between pulses to simulate")
    # the lengths the firmware runs at this supply (a compensated pulse's table entry)
    length = {name: firmware_pulse(d, name, v, t, r_factor, l_factor) for name in by}
    try:
        w = latch_actuation(drive, winding_drive(drive, True), v, t, length["set"], length["reset"],
                            d.latch.interval_s, r_factor, l_factor, 40 * points)
    except NotSeated as err:   # a moving armature that does not seat at this point
        raise InputError("--supply", "", str(err)) from None
    write_atomic(csv, w.to_csv())
    status(f"wrote {csv}: {len(w.time)} samples, set pulse {length['set'] * 1e3:.4g} ms (zero at "
           f"{w.events['set_zero'] * 1e3:.4g} ms), reset pulse at {w.events['reset'] * 1e3:.4g} ms for "
           f"{length['reset'] * 1e3:.4g} ms (zero at {w.events['reset_zero'] * 1e3:.4g} ms)")
    if plot is not None:
        from ..design.latch_plot import plot_latch_actuation
        write_atomic(plot, plot_latch_actuation(d, w, f"{drive.name} on {drive.board.name}: simulated at "
                                                f"{v:g} V, coil {t:g} degC, R x{r_factor:g}, L x{l_factor:g}",
                                                length))
        status(f"wrote plot {plot}")


@user_errors
def simulate_command(
    drive: Path = typer.Argument(..., help="Drive file, or a system file of several channels (TOML)."),
    supply: str = typer.Option(..., "--supply", help='Bus voltage, e.g. 20 or "20 V".'),
    coil_temp: str = typer.Option(..., "--coil-temp", help='Coil temperature, e.g. 85 or "85 degC".'),
    csv: Path = typer.Option(..., "--csv", help="Write the waveform here (CSV)."),
    board: Optional[str] = typer.Option(None, "--board", "-b", help="Bundled board name or board file."),
    hold_time: str = typer.Option("20 ms", "--hold-time", help='Length of the hold, e.g. 0.05 or "50 ms".'),
    r_factor: float = typer.Option(1.0, "--r-factor", help="Coil resistance factor (1.07 = +7 %)."),
    l_factor: float = typer.Option(1.0, "--l-factor", help="Coil inductance factor."),
    points: int = typer.Option(8, "--points", help="Samples per PWM segment (the peak and the decay get 40x)."),
    plot: Optional[Path] = typer.Option(None, "--plot", help="Also write a PNG of the actuation (current; gap and velocity with [armature]; phases marked; a latching coil: both pulses, each pulse's switches, the gap with [armature])."),
) -> None:
    """Simulate one actuation with the design's peak and hold: on, peak, hold, off, decay."""
    from ..design import actuation, design

    v = parse_quantity(supply, "voltage", "--supply")
    t = parse_quantity(coil_temp, "temperature", "--coil-temp")
    h = parse_quantity(hold_time, "time", "--hold-time")
    if not v > 0:
        raise InputError("--supply", "", f"{supply!r} must be greater than zero")
    if not h > 0:
        raise InputError("--hold-time", "", f"{hold_time!r} must be greater than zero")
    for name, f in (("--r-factor", r_factor), ("--l-factor", l_factor)):
        if not f > 0:
            raise InputError(name, "", f"{f:g} must be greater than zero")
    if points < 2:
        raise InputError("--points", "", f"{points} is below 2, expected at least 2 samples per segment")
    from ..system_file import is_system_file
    if is_system_file(drive):
        if plot is not None:
            raise InputError("--plot", "", "not used with a system file (the CSV has every "
                             "channel and the rail)")
        from .system_cmd import run_system_simulate
        return run_system_simulate(drive, board, v, t, h, points, csv, r_factor, l_factor)
    drv = load_drive(drive, board)
    if drv.latch is not None:
        _simulate_latch(drv, v, t, csv, r_factor, l_factor, points, plot)
        return
    d = design(drv)
    if d.pull_in.peak_ticks is None:
        raise InputError(str(drive), "pull_in.current", f"{d.pull_in.not_reached}, so the design "
                         "has no peak time to simulate")
    w = actuation(d, v, t, h, r_factor, l_factor, points,
                  label=f"{v:g} V, coil {t:g} degC, R x{r_factor:g}, L x{l_factor:g}")
    write_atomic(csv, w.to_csv())
    from ..design import firmware_setting
    duty, peak = firmware_setting(d, v, t, r_factor, l_factor)
    status(f"wrote {csv}: {len(w.time)} samples, peak {peak * 1e3:.4g} ms, "
           f"hold duty {duty:.4f} ({d.hold.regulation}) at {d.hold.frequency_hz:.6g} Hz, off at "
           f"{w.events['off'] * 1e3:.4g} ms, zero at {w.events['zero'] * 1e3:.4g} ms")
    if w.bypass_on is not None:
        s = d.split_decay
        lead = d.drive.freewheel.bypass_lead
        status(f"split decay: hold via {s.hold_path}, release via {s.release_path}; bypass opens at "
               f"{w.events['bypass_open'] * 1e3:.6g} ms ({abs(lead) * 1e6:.4g} us "
               f"{'before' if lead >= 0 else 'after'} the final turn-off; column bypass_on)")
    if w.position is not None:
        ev = w.events

        def when(name: str) -> str:
            return f"{ev[name] * 1e3:.4g} ms" if name in ev else "never"
        dip = f", current dip {ev['dip_current']:.4g} A" if "dip_current" in ev else ""
        status(f"armature: moves at {when('move')}, seated at {when('seat')}{dip}, lets go at "
               f"{when('unlatch')}, open at {when('open')} (columns position_m, velocity_m_s)")
        if "seat" not in ev:
            status("armature: not seated by the end of the peak at this point")
        if w.bus_voltage is not None:
            k = int(w.bus_voltage.argmin())
            where = "the hold and release on the stiff supply"
            if d.boost is not None:
                where = ("after the boost's hand-over (the drooping main bus through the hold and release; "
                         "column bus_v)")
            elif d.drive.switch.topology == "full_bridge":   # the release returns into the bus
                import numpy as np

                after = w.time > w.events["off"]
                j = int(np.flatnonzero(after)[np.argmax(w.bus_voltage[after])])
                where = (f"the hold on the stiff supply, the release back into the bus: highest "
                         f"{float(w.bus_voltage[j]):.4g} V at {float(w.time[j]) * 1e3:.4g} ms")
            if d.boost is None:
                where = f"in the peak (the drooping bus; {where}; column bus_v)"
            status(f"bus: lowest {float(w.bus_voltage[k]):.4g} V at {float(w.time[k]) * 1e3:.4g} ms {where}")
    if plot is not None:
        from ..design.plot import plot_actuation
        write_atomic(plot, plot_actuation(d, w, f"{d.drive.name} on {d.drive.board.name}: simulated at "
                                          f"{v:g} V, coil {t:g} degC\npeak "
                                          f"{(peak if d.boost is not None else d.pull_in.peak_time_s) * 1e3:.3g} ms"
                                          f"{' (boost, to its threshold)' if d.boost is not None else ''}, "
                                          f"hold duty {d.hold.duty:.3f} at {d.hold.frequency_hz / 1e3:.4g} kHz"))
        status(f"wrote plot {plot}")


@user_errors
def boards_command(
    as_json: bool = typer.Option(False, "--json", help="Print the boards as JSON."),
) -> None:
    """List the bundled board profiles."""
    boards = [load_board(p) for p in bundled_boards().values()]
    if as_json:
        typer.echo(json.dumps([{"name": b.name, "description": b.description, "timer_clock_hz": b.timer.clock,
                                "timer_bits": b.timer.bits, "adc_bits": b.adc.bits,
                                "sense_position": b.sense.position, "freewheel": b.freewheel.type,
                                "switch_max_voltage_v": b.switch.max_voltage,
                                "switch_topology": b.switch.topology, "baud": b.link.baud}
                               for b in boards], indent=2))
        return
    from rich.console import Console
    from rich.table import Table

    table = Table(title="bundled boards")
    table.add_column("name", no_wrap=True)
    for col in ("timer", "ADC", "sense", "freewheel", "switch", "link"):
        table.add_column(col)
    for b in boards:
        fw = b.freewheel
        detail = {"zener": f" {fw.zener_voltage:g} V", "clamp": f" {fw.clamp_voltage:g} V",
                  "resistor": f" {fw.resistance:g} ohm"}.get(fw.type, "")
        table.add_row(b.name, f"{b.timer.clock / 1e6:g} MHz {b.timer.bits}-bit",
                      f"{b.adc.bits}-bit {b.adc.reference:g} V",
                      f"{b.sense.position} {b.sense.resistance:g} ohm x{b.sense.gain:g}",
                      fw.type + detail,
                      f"{b.switch.max_voltage:g} V" + ("" if b.switch.topology == "low_side" else
                                                       f" {b.switch.topology.replace('_', ' ')}"),
                      f"{b.link.baud} Bd")
    Console().print(table)
