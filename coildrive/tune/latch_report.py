"""The terminal table and ``--json`` document of a latching coil's pulse sweep
(:mod:`coildrive.tune.latch`; docs/tuning.md). They read a :class:`LatchTune` and
compute nothing."""

from __future__ import annotations

import dataclasses

from .. import __version__
from ..jsondoc import document_head, json_ready
from .latch import LatchTune
from .latch_boost import ThresholdSweep
from .latch_table import TableSweep


#: The table's word for what governs the interval (the design's own phrase in the JSON).
SHORT = {"the pulse and its decay to zero": "decay", "the coil's temperature": "heat",
         "the capacitor's recharge": "recharge", "the armature's travel to the open stop": "travel",
         "the boost's recharge": "boost"}


def latch_tune_ok(r: LatchTune) -> bool:
    """A recommendation whose design passes every check."""
    return r.recommended is not None and r.recommended.ok


def swept(r: LatchTune) -> str:
    """What the sweep steps: ``"current_margin"`` (pulses from the boost), ``"margin"`` (a
    supply-compensated table's time margin) or ``"length"`` (timed pulses)."""
    drive = r.design.drive
    return "current_margin" if drive.supply.boosted else "margin" if drive.pull_in.compensate else "length"


def latch_tune_dict(r: LatchTune) -> dict:
    """The ``tune --json`` document of a latching coil."""
    rec = r.recommended
    recommendation = None
    if rec is not None:
        recommendation = {p.name: {"ticks": p.ticks, "time_s": p.time_s,
                                   **({} if p.boost is None else {"current_margin": p.current_margin,
                                                                  "threshold_code": p.boost.threshold_code}),
                                   **({} if p.table is None else {"margin": p.margin, "table": {
                                       "supply_v": p.table.supply_v, "adc_codes": p.table.adc_codes,
                                       "ticks": p.table.ticks}})}
                          for p in rec.latch.pulses}
        recommendation.update(interval_s=rec.latch.interval_s, interval_ticks=rec.latch.interval_ticks,
                              hottest_coil_c=rec.latch.hottest_coil_c,
                              failed_checks=[c.name for c in rec.failed])
    return json_ready({
        **document_head(r.design.drive, __version__, r.design.drive.input_hash()),
        "mode": "latch",
        "ok": latch_tune_ok(r),
        "margin": r.margin,
        "swept": swept(r),
        "tick_rate_hz": r.design.latch.tick_rate_hz,
        "pulses": [{**{k: v for k, v in dataclasses.asdict(s).items() if k != "steps"},
                    "steps": [dataclasses.asdict(x) for x in s.steps]} for s in r.sweeps],
        "recommendation": recommendation,
        "notes": list(r.notes),
        "cautions": list(rec.cautions if rec is not None else r.design.cautions),
    })


def print_latch_tune(r: LatchTune) -> None:
    """The sweep of each pulse as a table on stdout, then the recommendation and cautions."""
    from rich.console import Console

    con = Console()
    {"current_margin": _print_thresholds, "margin": _print_tables, "length": _print_lengths}[swept(r)](con, r)
    rec = r.recommended
    if rec is None:
        con.print("no recommendation: " + "; ".join(r.notes or ["no swept step keeps the margins"]))
        return
    print_recommended(con, rec)
    for n in r.notes:
        con.print(f"note: {n}")
    for c in rec.cautions:
        con.print(f"[yellow]caution[/yellow]: {c}")


def print_recommended(con, rec) -> None:
    """The recommended pulses (a :class:`~coildrive.design.latch.LatchDesign`), their
    interval and hottest coil in one line, and the checks their design fails (the offline
    and the live tune's)."""
    parts = ", ".join(f"{p.name} at {p.current_margin:g} x {p.current_a:.4g} A (code {p.boost.threshold_code}, "
                      f"time-out {p.ticks} ticks)" if p.boost is not None else
                      f"{p.name} at margin {p.margin:g} ({p.table.ticks[0]}..{p.table.ticks[-1]} ticks, "
                      f"{len(p.table.ticks)} entries)" if p.table is not None else
                      f"{p.name} {p.ticks} ticks ({p.time_s * 1e3:.4g} ms)" for p in rec.latch.pulses)
    con.print(f"recommended: {parts}; pulse no faster than every {rec.latch.interval_s * 1e3:.4g} ms "
              f"({rec.latch.governed_by}); coil at most {rec.latch.hottest_coil_c:.4g} degC")
    if rec.failed:
        con.print("its design fails: " + ", ".join(c.name for c in rec.failed))


def _print_lengths(con, r: LatchTune) -> None:
    """The timed pulses' sweeps of their lengths (t margin: the shortest real pulse over
    the worst time to the pulse's current; i margin: its current there over the pulse's
    current; by: what governs the interval)."""
    from rich.table import Table

    con.print(f"[bold]{r.design.drive.name}[/bold]: latching coil, pulse lengths swept at the worst corner "
              f"(tick {1e3 / r.design.latch.tick_rate_hz:.4g} ms)")
    for s in r.sweeps:
        t = Table(title=f"{s.name} pulse: margin {s.margin:g} on {s.worst_time_s * 1e3:.4g} ms "
                        f"({s.worst_corner}), {s.current_margin:g} x current for {s.settle_time_s * 1e3:.4g} ms; "
                        f"designed {s.design_ticks} ticks",
                  caption=f"supply and copper mJ at the energy corner ({_energy_corner(r, s.name)})")
        for col in ("ticks", "ms", "t margin", "i margin", "keeps", "supply mJ", "copper mJ",
                    "interval ms", "coil degC", "by"):
            t.add_column(col, justify="left" if col in ("keeps", "by") else "right")
        for x in s.steps:
            mark = " <" if x.ticks == s.recommended_ticks else ""
            t.add_row(f"{x.ticks}{mark}", f"{x.time_s * 1e3:.4g}", f"{x.time_margin:.3g}",
                      f"{x.current_margin:.3g}", "yes" if x.keeps else "no", f"{x.supply_j * 1e3:.4g}",
                      f"{x.copper_j * 1e3:.4g}", f"{x.interval_s * 1e3:.4g}", f"{x.hottest_coil_c:.4g}",
                      SHORT.get(x.interval_governed_by, x.interval_governed_by))
        con.print(t)


def _energy_corner(r: LatchTune, name: str) -> str:
    """The corner (and boost side) the design takes pulse ``name``'s energy at: the energy
    columns' corner, not the title's worst corner for the time."""
    return next(p.energy_corner for p in r.design.latch.pulses if p.name == name)


def _ms(v: float | None) -> str:
    return "-" if v is None else f"{v * 1e3:.4g}"


def _print_thresholds(con, r: LatchTune) -> None:
    """The boosted pulses' sweeps of their thresholds (i margin: ``current_margin``; code:
    the threshold's ADC code; the time-out in ticks; the shortest and longest pulse; seat:
    the armature's latest seat; boost mJ: the energy the boost gives per pulse; by / fails:
    what governs the interval, or the design's failing checks)."""
    from rich.table import Table

    con.print(f"[bold]{r.design.drive.name}[/bold]: latching coil, pulses from the boost: thresholds swept "
              f"(tick {1e3 / r.design.latch.tick_rate_hz:.4g} ms)")
    for s in r.sweeps:
        assert isinstance(s, ThresholdSweep)
        t = Table(title=f"{s.name} pulse: threshold = i margin x {s.current_a:.4g} A, at least "
                        f"{s.margin:g} kept; designed at {s.design_current_margin:g}",
                  caption=f"boost mJ at the energy corner ({_energy_corner(r, s.name)})")
        for col in ("i margin", "code", "time-out", "shortest ms", "longest ms", "seat ms", "boost mJ",
                    "recharge ms", "interval ms", "coil degC", "keeps", "by / fails"):
            t.add_column(col, justify="left" if col in ("keeps", "by / fails") else "right")
        for x in s.steps:
            mark = " <" if x.current_margin == s.recommended_current_margin else ""
            if x.refused is not None:
                t.add_row(f"{x.current_margin:.4g}{mark}", *["-"] * 9, "no", "refused (below)")
                continue
            why = ", ".join(x.failed) if x.failed else SHORT.get(x.interval_governed_by, x.interval_governed_by)
            t.add_row(f"{x.current_margin:.4g}{mark}", str(x.threshold_code),
                      "-" if x.timeout_ticks is None else str(x.timeout_ticks), _ms(x.shortest_s),
                      _ms(x.longest_s), _ms(x.seated_s), _ms(x.boost_energy_j), _ms(x.recharge_s),
                      _ms(x.interval_s), f"{x.hottest_coil_c:.4g}", "yes" if x.keeps else "no", why)
        con.print(t)
        for why in sorted({x.refused for x in s.steps if x.refused}):
            con.print(f"refused at a lower margin: {why}")


def _print_tables(con, r: LatchTune) -> None:
    """The supply-compensated pulses' sweeps of their time margin (ticks: the table's first
    and last entry, lowest supply first; t / i margin: the least over the entries,
    each at its own worst corner; by / fails: what governs the interval, or the design's
    failing checks), then each recommended table entry by entry."""
    from rich.table import Table

    rate = r.design.latch.tick_rate_hz
    con.print(f"[bold]{r.design.drive.name}[/bold]: latching coil, supply-compensated pulse tables: the time "
              f"margin on every entry swept (tick {1e3 / rate:.4g} ms)")
    for s in r.sweeps:
        assert isinstance(s, TableSweep)
        corners = sorted({x.energy_corner for x in s.steps})   # the longest entry's corner may move
        where = (f"the energy corner ({corners[0]})" if len(corners) == 1 else
                 "each step's energy corner (--json energy_corner: " + "; ".join(corners) + ")")
        t = Table(title=f"{s.name} pulse: {len(s.supply_v)} entries, each keeping {s.margin:g} x its own worst "
                        f"time and {s.current_margin:g} x current for {s.settle_time_s * 1e3:.4g} ms; file "
                        f"margin {s.design_margin:g}",
                  caption=f"ticks: the first..last entry; t and i margin: the least over the entries, each at its "
                          f"own worst corner; supply and copper mJ at {where}")
        for col in ("margin", "ticks", "t margin", "i margin", "keeps", "supply mJ", "copper mJ", "interval ms",
                    "coil degC", "by / fails"):
            t.add_column(col, justify="left" if col in ("keeps", "by / fails") else "right")
        for x in s.steps:
            mark = " <" if x.margin == s.recommended_margin else ""
            why = ", ".join(x.failed) if x.failed else SHORT.get(x.interval_governed_by, x.interval_governed_by)
            t.add_row(f"{x.margin:.6g}{mark}", f"{x.ticks[0]}..{x.ticks[-1]}", f"{x.least_time_margin:.4g}",
                      f"{x.least_current_margin:.4g}", "yes" if x.keeps else "no", f"{x.supply_j * 1e3:.4g}",
                      f"{x.copper_j * 1e3:.4g}", f"{x.interval_s * 1e3:.4g}", f"{x.hottest_coil_c:.4g}", why)
        con.print(t)
        rec = next((x for x in s.steps if x.margin == s.recommended_margin), None)
        if rec is None:
            continue
        e = Table(title=f"{s.name} pulse at margin {rec.margin:g}: the table the firmware looks up",
                  caption="t / i margin at each entry's own worst corner: its sized-at bus, the coil at its limit")
        for col in ("entry", "bus V", "code", "sized at V", "ticks", "ms", "t margin", "i margin"):
            e.add_column(col, justify="right")
        for k, (v, code, vd, n, tm, cm) in enumerate(zip(s.supply_v, s.adc_codes, s.design_supply_v, rec.ticks,
                                                          rec.time_margins, rec.current_margins)):
            e.add_row(str(k), f"{v:.4g}", str(code), f"{vd:.4g}", str(n), f"{n / rate * 1e3:.4g}", f"{tm:.4g}",
                      f"{cm:.4g}")
        con.print(e)
