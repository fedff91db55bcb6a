"""The ``coildrive`` command line: a thin layer over the library.

Exit codes: 0 success, 1 a check failed, 2 bad input (one line on stderr).
"""

from __future__ import annotations

import json
import sys

import typer

from .. import __version__
from . import bench_cmd, capture_cmd, design_cmd, driver_cmd, emulate_cmd, stream_cmd, tune_cmd
from .common import state

app = typer.Typer(
    name="coildrive", no_args_is_help=True, add_completion=False,
    pretty_exceptions_enable=False,
    help="Design, generate firmware constants for, bench-check and tune peak-and-hold coil drivers.",
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"coildrive {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    debug: bool = typer.Option(False, "--debug", help="Show tracebacks instead of one-line errors."),
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
) -> None:
    state["debug"] = debug


app.command("demo")(design_cmd.demo_command)
app.command("design")(design_cmd.design_command)
app.command("simulate")(design_cmd.simulate_command)
app.command("boards")(design_cmd.boards_command)
app.command("tune")(tune_cmd.tune_command)
app.command("firmware-stream")(stream_cmd.firmware_stream)
app.command("firmware-driver")(driver_cmd.firmware_driver)
app.command("check")(bench_cmd.check_command)
app.command("fit")(bench_cmd.fit_command)
app.command("emulate")(emulate_cmd.emulate_command)
app.command("capture")(capture_cmd.capture_command)


def _files_checked_by_the_commands(typer_app: typer.Typer) -> None:
    """Switch off typer's own readable-path check on every command's path parameters:
    the commands read their files themselves and say what is wrong in one line
    (``file: cannot be read (Permission denied)``), where typer's check prints a usage box."""
    import inspect

    for info in typer_app.registered_commands:
        for param in inspect.signature(info.callback).parameters.values():
            if hasattr(param.default, "readable"):
                param.default.readable = False


_files_checked_by_the_commands(app)


def main() -> None:
    """Console-script entry point.

    With ``--json``, a usage error (an unknown option, a missing argument) also prints
    the one error document on stdout, like every other failure (see
    :func:`coildrive.cli.common.user_errors`).
    """
    if "--json" not in sys.argv[1:]:
        app()
        return
    try:
        code = app(standalone_mode=False)
    except typer.TyperException as err:   # click's usage errors
        typer.echo(json.dumps({"error": err.format_message(), "exit_code": err.exit_code}))
        if hasattr(err, "show"):
            err.show()
        else:
            typer.echo(f"coildrive: {err.format_message()}", err=True)
        code = err.exit_code
    except typer.Abort:   # Ctrl-C at a prompt
        code = 130
    sys.exit(code if isinstance(code, int) else 0)
