"""Pieces of the terminal reports that every command shares (rich)."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape


def print_cautions(console: Console, cautions, highlight: bool | None = None) -> None:
    """The ``Cautions`` block of a terminal report: a heading, then ``  ! caution`` per
    line (as text: rich markup in a caution is escaped). ``highlight`` as for
    :meth:`rich.console.Console.print`."""
    console.print("[bold]Cautions[/bold]")
    for c in cautions:
        console.print(f"  ! {escape(c)}", highlight=highlight)


def print_verdict(console: Console, ok: bool, passed: str, failed: str, names) -> None:
    """The last line of a report: ``passed`` in green, or ``failed: name, name`` in red."""
    if ok:
        console.print(f"[green]{passed}[/green]")
    else:
        console.print(f"[bold red]{failed}[/bold red]: " + ", ".join(names))
