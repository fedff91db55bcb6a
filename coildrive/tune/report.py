"""Outputs of a hold tuning: the ranked rich table, the recommendation and the JSON
document. Reads a :class:`~coildrive.tune.TuneResult` (and the recommended Design);
computes no physics."""

from __future__ import annotations

from rich.console import Console
from rich.table import Table

from .. import __version__
from ..console import print_cautions
from ..design.result import ELEMENT_NAMES
from ..jsondoc import document_head, json_ready
from ..model.losses import HoldLosses
from ..units import format_si
from .sweep import Candidate, TuneResult


def _ma(amps: float) -> str:
    return f"{amps * 1e3:.4g}"


def _watts(w: float) -> str:
    """A power with an SI prefix and its sign (``-2.59 mW``)."""
    return ("-" if w < 0 else "") + format_si(abs(w), "W", 3)


def margin_line(r: TuneResult) -> str:
    """How far apart the first two settings are in objective (empty with fewer than two)."""
    m = r.first_two_margin
    if m is None:
        return ""
    w, frac = m
    return f"#2 - #1 = {_watts(w)} ({frac * 100:+.3g} %)"


def ranking_lines(r: TuneResult) -> list[str]:
    """How the table is ranked, in words, and the margin between the first two."""
    o = r.options
    lines = [f"ranked by total: all hold power drawn from the supply at the setting's worst corner "
             f"(coil + sense + switch + every freewheel element); the {r.band} settings (*) within "
             f"{o.tie_band * 100:g} % of the least total are ranked by switching loss, then closeness to "
             f"hold.frequency ({r.drive.hold.frequency:.6g} Hz)"]
    m = r.first_two_margin
    if m is not None:
        w, frac = m
        lines.append(f"#2 draws {_watts(abs(w))} ({abs(frac) * 100:.3g} %) {'more' if w >= 0 else 'less'} "
                     "than #1 from the supply")
    return lines


def ranked_table(r: TuneResult) -> Table:
    """The best feasible settings, best first (worst case over the corners)."""
    from rich import box

    t = Table(title=f"best {min(r.options.top, r.order.size)} of {r.order.size} feasible settings "
              f"({r.drive.name} on {r.drive.board.name})", box=box.SIMPLE_HEAD, pad_edge=False,
              padding=0, show_edge=False)
    for name in ("#", "f\nHz", "pre-\nscaler", "compare\n/period", "level\nmA", "max\nmA",
                 "ripple\nmA", "coil\nW", "fw\nW", "switch\nmW", "total\nW", "coil\ndegC"):
        t.add_column(name, justify="right", no_wrap=True)
    for c in r.ranked():
        t.add_row(f"{c.rank}{'*' if c.in_tie_band else ''}", f"{c.frequency_hz:.0f}", str(c.prescaler),
                  f"{c.compare_ticks}/{c.period_ticks}",
                  f"{c.hold_current_a * 1e3:.4g}", f"{c.max_mean_current_a * 1e3:.4g}",
                  f"{c.ripple_a * 1e3:.3g}", f"{c.coil_power_w:.3g}", f"{c.freewheel_power_w:.3g}",
                  f"{c.switch_power_w * 1e3:.3g}", f"{c.total_power_w:.6g}", f"{c.coil_temp_c:.1f}")
    t.caption = (f"worst case over the corners (max: highest mean current; fw: freewheel path); "
                 f"* within {r.options.tie_band * 100:g} % of the least total")
    margin = margin_line(r)
    if margin:
        t.caption += f"; {margin}"
    return t


def sweep_lines(r: TuneResult) -> list[str]:
    """What was swept and against what."""
    o = r.options
    sw = ("switching loss from switch.rise_time/fall_time" if r.switching_estimated else
          "no switching loss (the board gives no switch.rise_time/fall_time): switch power is conduction only")
    return [
        f"swept {r.frequencies} timer frequencies {format_si(r.min_frequency, 'Hz', 5)}.."
        f"{format_si(r.max_frequency, 'Hz', 5)} (upper end: {r.max_frequency_source}) x {r.levels} hold "
        f"levels from {r.target_current:.4g} A ({o.margin:g} x {r.minimum_current:.4g} A, "
        f"{r.minimum_basis}) in steps of {o.level_step:.3g} = {r.points} settings x {len(r.grid)} corners "
        f"(each coil at its own settled temperature) in {format_si(r.seconds, 's', 2)}; the best "
        f"{len(r.exact_labels)} again as the design evaluates them (the envelope: a coil cold and at "
        f"its hottest at every supply; hold regulation {r.drive.hold.regulation!r}), ranked first",
        f"constraints: hold at every corner, ripple <= {_ma(r.max_ripple)} mA, >= {o.min_duty_steps} "
        f"compare steps, coil <= {r.drive.thermal.max_coil_temp:g} degC; {sw}",
    ]


def recommendation_lines(c: Candidate) -> list[str]:
    parts = c.worst_corner_powers_w
    elements = ", ".join(f"{ELEMENT_NAMES[name]} {_watts(parts[name])}"
                         for name in HoldLosses.ELEMENTS if parts[name] > 0)
    return [
        f"recommended: {c.frequency_hz:.0f} Hz (prescaler {c.prescaler}, period {c.period_ticks}), "
        f"compare {c.compare_ticks} = duty {c.duty:.4f}, for a hold level of {c.hold_current_a:.4g} A",
        f"  mean current {c.min_mean_current_a:.4g}..{c.max_mean_current_a:.4g} A over the corners, "
        f"ripple <= {_ma(c.ripple_a)} mA",
        f"  drawn from the supply: {c.total_power_w:.5g} W at {c.worst_corner} = coil "
        f"{_watts(parts['coil'])} + sense {_watts(parts['sense'])} + switch "
        f"{_watts(parts['switch_conduction'] + parts['switch_switching'])} (switching "
        f"{_watts(parts['switch_switching'])}) + freewheel "
        f"{_watts(sum(parts[name] for name in HoldLosses.ELEMENTS))}" + (f" ({elements})" if elements else ""),
        f"  largest at any corner: coil {c.coil_power_w:.4g} W, freewheel {c.freewheel_power_w:.4g} W, "
        f"switch {c.switch_power_w:.3g} W (conduction {c.conduction_power_w:.3g} W, switching "
        f"{c.switching_power_w:.3g} W)",
        f"  coil settles at up to {c.coil_temp_c:.1f} degC ({c.hottest_corner})",
    ]


def print_tune(r: TuneResult, design=None, console: Console | None = None) -> None:
    """Print the sweep, the ranked table, the recommendation, its [hold] and the cautions."""
    console = console or Console()
    for line in sweep_lines(r):
        console.print(line, highlight=False)
    if r.recommendation is None:
        console.print(f"[bold red]{r.explanation}[/bold red]", highlight=False)
        return
    console.print(ranked_table(r))
    for line in ranking_lines(r):
        console.print(line, highlight=False)
    for line in recommendation_lines(r.recommendation):
        console.print(line, highlight=False)
    for note in r.notes:
        console.print(f"  note: {note}", highlight=False)
    console.print("[bold]Paste into the drive file:[/bold]")
    console.print(r.hold_section(), markup=False, highlight=False, end="", soft_wrap=True)
    if design is not None:
        if not design.ok:
            names = ", ".join(c.name for c in design.failed)
            console.print(f"[bold red]the design of this setting fails: {names}[/bold red] "
                          "(run coildrive design on the drive file with this [hold])", highlight=False)
        print_cautions(console, design.cautions, highlight=False)


def tune_dict(r: TuneResult, design=None) -> dict:
    """The ``tune --json`` document (see docs/tuning.md)."""
    rec = r.recommendation
    recommendation = None
    if rec is not None:
        recommendation = rec.to_dict()
        recommendation.pop("rank")
        recommendation.pop("feasible")
        recommendation.pop("failed")
        recommendation["hold_toml"] = r.hold_section()
    o = r.options
    out = {
        **document_head(r.drive, __version__, r.drive.input_hash()),
        "ok": rec is not None and (design is None or design.ok),
        "sweep": {
            "min_frequency_hz": r.min_frequency, "max_frequency_hz": r.max_frequency,
            "max_frequency_source": r.max_frequency_source, "frequencies": r.frequencies,
            "levels": r.levels, "level_step": o.level_step, "settings": r.points,
            "corners": len(r.grid), "feasible": int(r.order.size),
            "minimum_hold_current_a": r.minimum_current, "minimum_basis": r.minimum_basis,
            "margin": o.margin, "target_current_a": r.target_current, "max_ripple_a": r.max_ripple,
            "min_duty_steps": o.min_duty_steps, "max_coil_temp_c": r.drive.thermal.max_coil_temp,
            "switching_loss_estimated": r.switching_estimated, "seconds": r.seconds,
        },
        "ranking": {
            "objective": "all hold power drawn from the supply at the worst corner: coil + sense + "
                         "switch (conduction + switching) + every freewheel element",
            "tie_band": o.tie_band, "settings_in_band": r.band,
            "tie_order": ["switching_power_w", "distance to hold.frequency"],
            "file_frequency_hz": r.drive.hold.frequency,
            "first_two_margin_w": None if r.first_two_margin is None else r.first_two_margin[0],
            "first_two_margin_percent": None if r.first_two_margin is None else r.first_two_margin[1] * 100,
        },
        "recommendation": recommendation,
        "candidates": [c.to_dict() for c in r.ranked()],
        "explanation": r.explanation or None,
        "notes": list(r.notes),
    }
    if design is not None:
        out["design_ok"] = design.ok
        out["design_failed"] = [c.name for c in design.failed]
        out["cautions"] = list(design.cautions)
    return json_ready(out)
