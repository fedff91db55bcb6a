"""What every command shares: one-line errors with exit 2, and the --debug switch."""

from __future__ import annotations

import functools
from typing import Callable

import typer

from ..errors import CoildriveError

state = {"debug": False}


def user_errors(fn: Callable) -> Callable:
    """Turn a :class:`CoildriveError` into one line on stderr and exit 2 (``--debug``: traceback)."""
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except CoildriveError as err:
            if state["debug"]:
                raise
            typer.echo(f"coildrive: {err}", err=True)
            raise typer.Exit(2) from None
    return wrapper


def status(message: str) -> None:
    """A status line: stderr, so stdout stays data (tables or JSON)."""
    typer.echo(message, err=True)
