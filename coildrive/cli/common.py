"""What every command shares: one-line errors with exit 2, the --debug switch, and the
error document that ``--json`` prints when a run fails."""

from __future__ import annotations

import contextlib
import functools
import io
import json
import sys
import warnings
from typing import Callable

import typer

from ..errors import CoildriveError

state = {"debug": False}


def _fail(message: str, code: int, as_json: bool) -> typer.Exit:
    """Print the one error line on stderr (and with ``--json`` the error document on
    stdout) and return the :class:`typer.Exit` to raise."""
    if as_json:
        typer.echo(json.dumps({"error": message, "exit_code": code}, allow_nan=False))
    typer.echo(f"coildrive: {message}", err=True)
    return typer.Exit(code)


def user_errors(fn: Callable) -> Callable:
    """Turn a :class:`CoildriveError` into one line on stderr and exit 2 (``--debug``: traceback).

    A file that cannot be read or written for a reason of the system (a full disk, a
    vanished folder) is one line too. With ``--json`` (a command's ``as_json``) stdout
    gets one JSON document even then: ``{"error": "<the line>", "exit_code": 2}``.
    numpy's RuntimeWarnings (overflow, 0/0 on a corner that the design then reports as not
    reached) are not printed unless ``--debug``: they would come before, and bury, the
    line that says what is wrong.
    """
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        as_json = bool(kwargs.get("as_json"))
        # with --json, stdout is held until the run ends, so that a failure after the
        # document was made (a plot that cannot be written) prints the error document
        # instead of a second one
        held = io.StringIO() if as_json else None
        failed = False
        try:
            with warnings.catch_warnings(), (contextlib.redirect_stdout(held) if held is not None
                                             else contextlib.nullcontext()):
                if not state["debug"]:
                    warnings.simplefilter("ignore", RuntimeWarning)
                return fn(*args, **kwargs)
        except CoildriveError as err:
            if state["debug"]:
                raise
            failed = True
            raise _fail(str(err), 2, as_json) from None
        except OSError as err:   # not one of ours: a file the system would not let us use
            if state["debug"]:
                raise
            failed = True
            where = f"{err.filename}: " if err.filename else ""
            raise _fail(f"{where}{err.strerror or err}", 2, as_json) from None
        finally:
            if held is not None and not failed:
                sys.stdout.write(held.getvalue())
                sys.stdout.flush()
    return wrapper


def status(message: str) -> None:
    """A status line: stderr, so stdout stays data (tables or JSON)."""
    typer.echo(message, err=True)
