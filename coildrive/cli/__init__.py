"""The ``coildrive`` command line: a thin layer over the library.

Exit codes: 0 success, 1 a check failed, 2 bad input (one line on stderr).
"""

from __future__ import annotations

import typer

from .. import __version__
from . import bench_cmd, capture_cmd, design_cmd, emulate_cmd, stream_cmd, tune_cmd
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
app.command("check")(bench_cmd.check_command)
app.command("fit")(bench_cmd.fit_command)
app.command("emulate")(emulate_cmd.emulate_command)
app.command("capture")(capture_cmd.capture_command)


def main() -> None:
    """Console-script entry point."""
    app()
