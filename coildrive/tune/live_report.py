"""Outputs of a live hold tuning: the actuation log, the bench / model / recommendation
table and the JSON document. Reads a :class:`~coildrive.tune.live.LiveResult`; computes
no physics."""

from __future__ import annotations

import dataclasses
import math

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from .. import __version__
from ..console import print_cautions
from ..jsondoc import document_head, json_ready


def _a(amps: float | None) -> str:
    return "-" if amps is None or not math.isfinite(amps) else f"{amps:.4g} A"


def actuation_table(res) -> Table:
    """Every actuation: repeat, step, duty in force and the verdict with its evidence."""
    from rich import box

    t = Table(title=f"actuations ({res.detection} detection, hold {res.hold_time_s * 1e3:.4g} ms)",
              box=box.SIMPLE_HEAD, pad_edge=False, show_edge=False)
    for name, just in (("#", "right"), ("repeat", "right"), ("step", "left"), ("duty", "right"),
                       ("verdict", "left"), ("evidence", "left")):
        t.add_column(name, justify=just)
    for a in res.actuations:
        j = a.judgement
        verdict = "no seat" if not j.seated else ("[red]dropped out[/red]" if j.dropped else "[green]held[/green]")
        t.add_row(str(a.number), str(a.repeat) if a.repeat else "-", a.step, f"{a.duty:.4f}", verdict,
                  escape(j.evidence))
    return t


def comparison_table(res) -> Table:
    """Bench, model and recommendation side by side."""
    t = Table(title=f"coildrive tune --port: {res.drive.name} on {res.drive.board.name}")
    t.add_column("figure")
    t.add_column("bench", justify="right")
    t.add_column("model", justify="right")
    t.add_column("recommendation", justify="right")
    rec = res.recommendation
    des = res.design
    d = res.duties()
    if d.size:
        spread = f" ({d.min():.4f}..{d.max():.4f}, {d.size} repeats)" if d.size > 1 else ""
        bench_duty = f"{res.dropout_duty:.4f}{spread}"
    else:
        bench_duty = "-"
    t.add_row("drop-out duty", bench_duty, f"{res.model_dropout_duty:.4f}", "-")
    c = res.currents()
    bench_i = "-"
    if c.size:
        bench_i = f"{c.max():.4g} A" + (f" (mean {c.mean():.4g})" if c.size > 1 else "")
    t.add_row("drop-out current at the bench point", bench_i, _a(res.model_dropout_current_a), "-")
    if rec is not None:
        worst_model = res.model_dropout_current_a * rec.corner_factor
        t.add_row(f"drop-out current at the worst corner (x {rec.corner_factor:.4g})",
                  _a(rec.bench_dropout_a * rec.corner_factor), _a(worst_model), "-")
        t.add_row(f"hold current, every corner (x {rec.margin:.4g} margin)", _a(rec.bench_need_a),
                  _a(rec.model_minimum_a), f"[bold]{rec.hold_current_a:.4g} A[/bold] ({escape(rec.governed_by)})")
        t.add_row("hold duty (design)", "-",
                  f"{des.hold.duty:.4f} ({des.timer.compare_ticks}/{des.timer.period_ticks})",
                  f"{rec.duty:.4f} ({rec.compare_ticks}/{rec.period_ticks})")
        t.add_row("lowest hold mean over the corners", "-", _a(des.hold.min_mean_current_a),
                  _a(rec.min_mean_current_a))
    p = res.point
    if p is not None:
        t.caption = escape(f"bench point {p.supply_v:.4g} V ({p.supply_from}), coil {p.coil_temp_c:.4g} degC "
                           f"({p.coil_temp_from})")
    return t


def print_live(res, console: Console | None = None) -> None:
    """The actuations, the comparison, the [hold] to paste, notes and cautions."""
    from ..bench.check import BENCH_CAUTIONS

    console = console or Console()
    if res.actuations:
        console.print(actuation_table(res))
    console.print(comparison_table(res))
    rec = res.recommendation
    if rec is not None:
        console.print(f"  worst corner for holding: {rec.worst_corner}; margin x {rec.margin:.4g} from "
                      f"{rec.margin_source}; model minimum: {rec.model_minimum_basis}",
                      highlight=False, markup=False)
    for r in res.repeats:
        console.print(f"  repeat {r.number}: held {r.held_duty:.4f}, dropped {r.dropped_duty:.4f} -> "
                      f"drop-out {r.dropout_duty:.4f}, {r.dropout_current_a:.4g} A ({r.current_basis})",
                      highlight=False, markup=False)
    for note in res.notes:
        console.print(f"  note: {note}", highlight=False, markup=False)
    if rec is not None:
        console.print("[bold]Paste into the drive file:[/bold]")
        console.print(rec.hold_toml, markup=False, highlight=False, end="", soft_wrap=True)
        if not rec.design_ok:
            console.print(f"[bold red]the design with this hold fails: {escape(', '.join(rec.design_failed))}"
                          "[/bold red]", highlight=False)
    if res.failure is not None:
        console.print(f"[bold red]{escape(res.failure[1])}[/bold red]", highlight=False)
    console.print(("" if res.stopped else "[bold red]") + escape(res.stop_detail)
                  + ("" if res.stopped else "[/bold red]"), highlight=False)
    print_cautions(console, [*BENCH_CAUTIONS, *(rec.cautions if rec is not None else [])], highlight=False)


def live_dict(res, port: str | None = None, capture: str | None = None, log: str | None = None) -> dict:
    """The ``tune --port --json`` document (see docs/tuning.md)."""
    from ..bench.check import BENCH_CAUTIONS

    d, c = res.duties(), res.currents()
    o = res.options
    rec = res.recommendation
    des = res.design
    out = {
        **document_head(res.drive, __version__, res.drive.input_hash()),
        "mode": "live",
        "ok": res.ok,
        "failure": None if res.failure is None else {"code": res.failure[0], "message": res.failure[1]},
        "stopped": res.stopped,
        "stop_detail": res.stop_detail,
        "port": port,
        "capture": capture,
        "log": log,
        "device": dict(res.device),
        "operating_point": None if res.point is None else dataclasses.asdict(res.point),
        "procedure": {
            "repeats": o.repeats, "hold_time_s": res.hold_time_s, "coarse_step": o.coarse_step,
            "resolution": o.resolution, "resolution_duty": res.resolution_duty, "floor": o.floor,
            "floor_duty": res.floor_duty, "design_duty": des.hold.duty,
            "design_peak_time_s": des.pull_in.peak_time_s, "design_frequency_hz": des.hold.frequency_hz,
            "detection": res.detection, "over_current_a": res.over_current_a,
            "open_load_a": res.open_load_a, "seconds": res.seconds,
        },
        "bench": {
            "dropout_duty": [float(x) for x in d],
            "dropout_duty_mean": res.dropout_duty if d.size else None,
            "dropout_duty_spread": res.dropout_duty_spread if d.size else None,
            "dropout_current_a": [float(x) for x in c],
            "dropout_current_mean_a": float(c.mean()) if c.size else None,
            "dropout_current_max_a": float(c.max()) if c.size else None,
            "equivalent_current_a": [r.equivalent_current_a for r in res.repeats],
        },
        "model": {
            "dropout_duty": res.model_dropout_duty,
            "dropout_current_a": res.model_dropout_current_a,
            "design_duty": des.hold.duty,
            "design_hold_current_a": des.hold.current_a,
        },
        "recommendation": None if rec is None else rec.to_dict(),
        "repeats": [r.to_dict() for r in res.repeats],
        "actuations": [a.to_dict() for a in res.actuations],
        "commands": list(res.commands),
        "link": dict(res.link),
        "notes": list(res.notes),
        "cautions": [*BENCH_CAUTIONS, *(rec.cautions if rec is not None else [])],
    }
    return json_ready(out)
