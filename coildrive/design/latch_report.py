"""The terminal report of a latching coil's design (reads a LatchDesign, computes nothing)."""

from __future__ import annotations

import math

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from ..console import print_cautions, print_verdict
from ..units import format_si
from .latch import LatchDesign
from .report import checks_table


def latch_table(d: LatchDesign) -> Table:
    """rich table of both pulses and the interval."""
    r = d.latch
    boosted = r.pulses[0].boost is not None
    circuit = ("full bridge: set Q1 + Q4, reset Q3 + Q2 (the other polarity), fast decay after each"
               + (" (the boost switch feeds the high-side rail; the decay returns into the boost capacitor)"
                  if boosted else "")
               if r.topology == "full_bridge" else
               f"two windings, each on its own {r.topology.replace('_', '-')} switch and freewheel path")
    t = Table(title=f"coildrive design: {d.drive.name} on {d.drive.board.name} (latching coil)")
    t.add_column("figure")
    t.add_column("value", justify="right")
    t.add_column("where / how")
    t.add_row("circuit", "latch", escape(circuit))
    for v in r.derived:
        t.add_row(v.key, format_si(v.value, v.unit), escape(f"from the datasheet: {v.source}"))
    for p in r.pulses:
        if p.ticks is None:
            t.add_row(f"{p.name} pulse", "none", escape(p.not_reached or ""))
            continue
        worst = f"worst time to {p.current_a:.4g} A" if p.seat_time_s is None else "the armature's latest seat"
        t.add_row(f"{p.name} pulse", f"{p.time_s * 1e3:.4g} ms",
                  escape(f"{p.ticks} ticks ({p.governed_by}); {p.switches}; {worst} "
                         f"{p.worst_time_s * 1e3:.4g} ms ({p.worst_corner}); the shortest pulse carries "
                         f"{p.end_current_a:.4g} A there"))
        if p.table is not None:
            tb, rate = p.table, r.tick_rate_hz
            t.add_row("  against the supply", f"{tb.ticks[-1] / rate * 1e3:.4g}..{tb.ticks[0] / rate * 1e3:.4g} ms",
                      escape(f"{len(tb.ticks)} entries looked up against the supply reading (pull_in.compensate): "
                             f"{tb.ticks[0]} ticks at {tb.supply_v[0]:.4g} V .. {tb.ticks[-1]} ticks at "
                             f"{tb.supply_v[-1]:.4g} V, each sized at the lowest bus that reads its code"))
        if p.open_time_s is not None:
            t.add_row("  armature open", f"{p.open_time_s * 1e3:.4g} ms",
                      escape("latest, from the reset pulse's start: the catch trips at "
                             f"{p.current_a:.4g} A, spring and load carry the armature to the open stop"))
        if p.boost is not None:
            b = p.boost
            t.add_row("  from the boost", f"{b.threshold_a:.4g} A",
                      escape(f"threshold code {b.threshold_code} (trips by {b.trip_max_a:.4g} A), seen within a tick; "
                             f"fastest {b.fastest_time_s * 1e3:.4g} ms ({b.fastest_corner}), time-out "
                             f"{b.timeout_ticks} ticks; the capacitor falls to {b.lowest_boost_v:.4g} V "
                             f"({b.lowest_boost_corner}); up to {b.end_current_max_a:.4g} A at the turn-off"
                             + (f"; recharged in {b.recharge_time_s * 1e3:.4g} ms at {b.power_w:g} W"
                                + (" (what the return leaves)" if p.returned_j else "")
                                if b.recharge_time_s is not None else "")) if b.timeout_ticks else
                      escape(f"threshold code {b.threshold_code}"))
        source = "the boost" if p.boost is not None else "the supply"
        t.add_row(f"  energy per {p.name} pulse", f"{p.supply_j * 1e3:.4g} mJ",
                  escape(f"from {source} ({p.energy_corner}): copper {p.copper_j * 1e3:.4g} mJ, switches + "
                         f"sense {p.switch_sense_j * 1e3:.4g} mJ, freewheel path {p.freewheel_j * 1e3:.4g} mJ, "
                         + (f"boost path {p.boost_j * 1e3:.4g} mJ" if p.boost is not None else
                            f"back to the bus {p.returned_j * 1e3:.4g} mJ")
                         + (f", back into the boost capacitor {p.returned_j * 1e3:.4g} mJ"
                            if p.boost is not None and p.returned_j else "")
                         + (f", the armature {p.armature_j * 1e3:.4g} mJ" if p.armature_j else "")
                         + (f", the eddy currents {p.eddy_j * 1e3:.4g} mJ" if p.eddy_j else "")
                         + (f"; the main supply gives {p.main_supply_j * 1e3:.4g} mJ more in the clamp's decay"
                            if p.main_supply_j else "")
                         + f"; in the field at its end {p.stored_j * 1e3:.4g} mJ"))
        t.add_row(f"  after the {p.name} pulse", f"{p.decay_time_s * 1e3:.4g} ms",
                  escape(f"to zero current; switches up to {p.peak_switch_voltage_v:.4g} V "
                         f"({p.switch_voltage_corner})"
                         + (f"; the bus droops {p.droop_v:.4g} V and recharges in "
                            f"{p.recharge_time_s * 1e3:.4g} ms" if p.droop_v > 0 else "")))
    t.add_row("shortest interval", f"{r.interval_s * 1e3:.4g} ms" if r.interval_ticks else "none",
              escape(f"{r.interval_ticks} ticks, start to start ({r.governed_by}); decay "
                     f"{r.decay_interval_s * 1e3:.4g} ms, coil temperature {r.thermal_interval_s * 1e3:.4g} ms, "
                     f"recharge {r.recharge_interval_s * 1e3:.4g} ms"
                     + (f", armature {r.armature_interval_s * 1e3:.4g} ms" if r.armature_interval_s else "")
                     + (f", boost recharge {r.boost_interval_s * 1e3:.4g} ms" if r.boost_interval_s else "")))
    if r.main_bus is not None:
        m = r.main_bus
        t.add_row("lowest main bus", "none" if m.lowest_bus_v is None else f"{m.lowest_bus_v:.4g} V",
                  escape(f"the boost converter draws {m.converter_draw_w:.4g} W for {m.draw_time_s * 1e3:.4g} ms "
                         f"a pulse, behind {m.source_resistance_ohm:.4g} ohm and "
                         f"{m.capacitance_f * 1e6:.4g} uF; " + (
                             (f"its runs at least {m.spacing_s * 1e3:.4g} ms apart (the interval less the "
                              "longest pulse; runs that may touch: one run), " if math.isfinite(m.spacing_s) else
                              "one run from a full bus (no safe interval), ")
                             + f"from the {m.lowest_bus_corner} (floor {m.floor_v:.4g} V)"
                             if m.lowest_bus_v is not None else
                             f"more than the source's most, {m.source_limit_w:.4g} W: the bus collapses")))
    if r.cycle is not None:
        c = r.cycle
        t.add_row("on/off cycle", f"{c.actuation_rate_hz:.4g} /s",
                  escape(f"set, reset {c.on_time_s * 1e3:.4g} ms later, the next set {c.off_time_s * 1e3:.4g} ms "
                         f"after that; the coil at most {c.hottest_coil_c:.4g} degC just after a pulse "
                         f"(set +{c.set_rise_k:.3g} K, reset +{c.reset_rise_k:.3g} K)"))
    t.add_row("coil temperature", f"{r.hottest_coil_c:.4g} degC",
              escape(f"just after a pulse when pulsing at the interval: {r.pulse_heat_j * 1e3:.4g} mJ "
                     f"(+{r.coil_rise_per_pulse_k:.3g} K) a pulse, limit {r.coil_limit_c:g} degC"))
    return t


def latch_monte_carlo_table(mc: dict) -> Table:
    """rich table of the pulses' Monte Carlo (percentiles and max; min for the current)."""
    levels = mc["percentiles"]
    t = Table(title=f"Monte Carlo: {mc['samples']} samples ({mc['distribution']} tolerances, seed {mc['seed']})")
    t.add_column("figure")
    t.add_column("min", justify="right")
    for q in levels:
        t.add_column(f"p{q:g}", justify="right")
    t.add_column("max", justify="right")
    rows = {"time_to_current_s": ("time to its current", "s"),
            "end_current_a": ("current, shortest pulse", "A"),
            "supply_j": ("energy, longest pulse", "J"), "decay_time_s": ("then to zero", "s")}
    for name, figs in mc["pulses"].items():
        for key, (label, unit) in rows.items():
            f = figs[key]
            cells = ["-" if v is None else format_si(v, unit) for v in [f["min"], *f["values"], f["max"]]]
            t.add_row(f"{name}: {label}", *cells)
    t.caption = ", ".join(f"{k.replace('_', ' ')}: {v}" for k, v in mc["failures"].items())
    return t


def print_latch(d: LatchDesign, console: Console | None = None) -> None:
    """Print the pulses, the checks and the cautions."""
    console = console or Console()
    console.print(latch_table(d))
    console.print(checks_table(d))
    if d.monte_carlo is not None:
        console.print(latch_monte_carlo_table(d.monte_carlo))
    print_cautions(console, d.cautions)
    print_verdict(console, d.ok, "design ok", "design FAILED", [c.name for c in d.failed])
