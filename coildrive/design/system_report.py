"""Terminal report of a SystemResult (rich tables). Reads the result only; computes nothing."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from ..console import print_verdict
from ..units import format_si
from .result import SystemResult


def print_system(r: SystemResult) -> None:
    """The channels, the shared timer, the rails and the heat, then the verdict."""
    con = Console()
    tick = 1.0 / r.channels[0].design.drive.board.tick.rate
    t = Table(title=f"coildrive system: {r.name} on {r.board}")
    for col in ("channel", "board", "peak ticks", "start ticks", "hold mean A", "compare", "ok"):
        t.add_column(col, no_wrap=col != "ok")
    for c in r.channels:
        d = c.design
        if getattr(d, "latch", None) is not None:   # a latching coil: its pulses, no hold
            ticks = "/".join(str(p.ticks) for p in d.latch.pulses)
            hold, compare = "latching", "set/reset pulse ticks"
        else:
            ticks = str(d.pull_in.peak_ticks)
            hold = f"{d.hold.min_mean_current_a:.3g}..{d.hold.max_mean_current_a:.3g}"
            compare = f"{d.timer.compare_ticks}/{d.timer.period_ticks}"
        t.add_row(*(escape(x) for x in (
            c.name, str(c.number), ticks, f"{c.offset_ticks}" + (" fixed" if c.offset_fixed else ""),
            hold, compare, "yes" if d.ok else "NO: " + ", ".join(x.name for x in d.failed))))
    con.print(t)
    s = Table(title="shared by the channels")
    s.add_column("figure")
    s.add_column("value", justify="right")
    s.add_column("where / how")
    for tm in r.timers:
        s.add_row("shared timer", format_si(tm["frequency_hz"], "Hz", 6),
                  escape(f"prescaler {tm['prescaler']}, period {tm['period_ticks']} counts for "
                         f"{', '.join(tm['channels'])}"))
    limit = f"limit {r.current_limit_a:.4g} A" if r.current_limit_a else "no limit given"
    s.add_row("peak stagger", f"{r.stagger_ticks} ticks", escape(
        f"{format_si(r.stagger_ticks * tick, 's')} between peaks; {limit}; {r.stagger_search}"))
    for rail in r.rails:
        names = ", ".join(rail["channels"])
        s.add_row("rail current, peaks together", f"<= {rail['peak_current_together_a']:.4g} A",
                  escape(f"bound over the supply range, coldest coils ({names})"))
        s.add_row("rail current, staggered", f"<= {rail['peak_current_staggered_a']:.4g} A",
                  escape(f"bound; highest {format_si(rail['peak_current_time_s'], 's')} after the first "
                         "switch-on"))
        s.add_row("rail hold current (average)", f"{rail['hold_average_current_a']:.4g} A",
                  "every channel holding, at its highest mean current")
        if "lowest_bus_together_v" in rail:
            s.add_row("lowest bus, peaks together", f"{rail['lowest_bus_together_v']:.4g} V",
                      escape(f"from {rail['supply_v']:g} V behind {rail['source_resistance_ohm']:g} ohm, "
                             f"{rail['capacitance_f'] * 1e6:.4g} uF, at "
                             f"{format_si(rail['lowest_bus_together_time_s'], 's')}"))
            s.add_row("lowest bus, staggered", f"{rail['lowest_bus_staggered_v']:.4g} V",
                      escape(f"at {format_si(rail['lowest_bus_staggered_time_s'], 's')}; {rail['droop_method']}; "
                             f"hold droop (average) {rail['hold_droop_v'] * 1e3:.4g} mV"))
    for g in r.heat["shared_freewheel"]:
        s.add_row("shared freewheel part", f"{g['power_w']:.3g} W", escape(", ".join(g["channels"])))
    s.add_row("board heat", f"{r.heat['board_w']:.3g} W",
              escape("every channel's freewheel path and switch (cycle average with [duty])"))
    con.print(s)
    for c in r.checks:
        mark = "ok  " if c.ok else ("warn" if c.severity == "warning" else "FAIL")
        con.print(escape(f"{mark} {c.name}: {c.detail}"))
    print_verdict(con, r.ok, "every channel and every shared check passes", "FAILED", r.failed)
