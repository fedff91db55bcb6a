"""Outputs of the live tune of a latch: the pulse log, the bench / model / recommendation
table and the JSON document (docs/tuning.md). Reads a
:class:`~coildrive.tune.latch_live.LatchLiveResult`; computes no physics."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from .. import __version__
from ..console import print_cautions
from ..jsondoc import document_head, json_ready
from .latch_report import print_recommended


def _ms(seconds: float | None) -> str:
    return "-" if seconds is None else f"{seconds * 1e3:.4g} ms"


def latch_live_dict(res, port: str, capture: str, log: str) -> dict:
    """The ``tune --port --json`` document of a latching coil (and its ``.tune.json`` log)."""
    rec = res.recommended
    recommendation = None
    if rec is not None:
        recommendation = {p.pulse: p.to_dict() for p in res.pulses}
        recommendation.update(interval_s=rec.latch.interval_s, interval_ticks=rec.latch.interval_ticks,
                              hottest_coil_c=rec.latch.hottest_coil_c, design_ok=rec.ok,
                              failed_checks=[c.name for c in rec.failed])
    p = res.point
    return json_ready({
        **document_head(res.drive, __version__, res.drive.input_hash()),
        "mode": "latch",
        "ok": res.ok,
        "port": port,
        "capture": capture,
        "log": log,
        "device": res.device,
        "procedure": {"detection": res.detection, "repeats": res.options.repeats,
                      "resolution": res.options.resolution, "resolution_s": res.resolution_s,
                      "over_current_a": res.over_current_a, "tick_rate_hz": res.drive.board.tick.rate,
                      "design_ticks": {q.name: q.ticks for q in res.design.latch.pulses}},
        "bench_point": None if p is None else {"supply_v": p.supply_v, "supply_from": p.supply_from,
                                               "coil_temp_c": p.coil_temp_c, "coil_temp_from": p.coil_temp_from},
        "searches": [s.to_dict() for s in res.searches],
        "actuations": [a.to_dict() for a in res.actuations],
        "recommendation": recommendation,
        "failure": None if res.failure is None else {"code": res.failure[0], "message": res.failure[1]},
        "stopped": res.stopped,
        "stop_detail": res.stop_detail,
        "commands": res.commands,
        "link": res.link,
        "notes": list(res.notes),
        "cautions": list(rec.cautions if rec is not None else res.design.cautions),
        "seconds": res.seconds,
    })


def print_latch_live(res, console: Console | None = None) -> None:
    """The pulses fired, the comparison per pulse, the recommendation, notes and cautions."""
    from rich import box

    con = console or Console()
    t = Table(title=f"pulses ({res.detection or 'no'} detection)", box=box.SIMPLE_HEAD, pad_edge=False,
              show_edge=False)
    for name, just in (("#", "right"), ("pulse", "left"), ("repeat", "right"), ("step", "left"),
                       ("length", "right"), ("peak", "right"), ("switch", "left"), ("verdict", "left")):
        t.add_column(name, justify=just)
    for a in res.actuations:
        sw = f"{'-' if a.switch_before is None else a.switch_before} -> {'-' if a.switch_after is None else a.switch_after}"
        verdict = ("[green]latched[/green]" if a.pulse == "set" else "[green]let go[/green]") if a.worked else \
            ("[red]did not latch[/red]" if a.pulse == "set" else "[red]did not let go[/red]")
        t.add_row(str(a.number), a.pulse, str(a.repeat) if a.repeat else "-", a.step, _ms(a.length_s),
                  f"{a.peak_current_a:.4g} A", sw, verdict)
    con.print(t)
    if res.pulses:
        c = Table(title=f"coildrive tune --port: {res.drive.name} on {res.drive.board.name} (latching coil)")
        for col in ("pulse", "bench shortest", "model at bench", "x worst corner", "x margin", "bench ticks",
                    "model ticks", "recommended", "by"):
            c.add_column(col, justify="left" if col in ("pulse", "by") else "right")
        for p in res.pulses:
            spread = f" (spread {_ms(p.bench_spread_s)})" if p.bench_spread_s > 0 else ""
            c.add_row(p.pulse, _ms(p.bench_s) + spread, _ms(p.model_bench_s), f"{p.corner_factor:.4g}",
                      f"{p.margin:g}", str(p.bench_ticks), str(p.model_ticks),
                      f"[bold]{p.ticks} ticks[/bold] ({_ms(p.time_s)})", "bench" if p.governed_by == "bench" else "model")
        pt = res.point
        c.caption = escape(f"bench point {pt.supply_v:.4g} V ({pt.supply_from}), coil {pt.coil_temp_c:.4g} degC "
                           f"({pt.coil_temp_from}); worst corner "
                           + "; ".join(f"{p.pulse}: {p.worst_corner}" for p in res.pulses)
                           + "; margin from " + ", ".join(sorted({p.margin_source for p in res.pulses}))
                           + "; model: the design's length at that margin (the bench never shortens it)")
        con.print(c)
    rec = res.recommended
    if res.failure is not None:
        con.print(f"[red]failed[/red]: {escape(res.failure[1])}")
    elif rec is not None:
        print_recommended(con, rec)
    for n in res.notes:
        con.print(f"note: {escape(n)}")
    from ..bench.check import BENCH_CAUTIONS

    print_cautions(con, [*BENCH_CAUTIONS, *(rec.cautions if rec is not None else res.design.cautions)],
                   highlight=False)
