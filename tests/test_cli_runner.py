"""The CLI in-process through typer's CliRunner (fast checks of wiring and exit codes)."""

import json

from typer.testing import CliRunner

from coildrive.cli import app
from conftest import EXAMPLES

runner = CliRunner()


def test_design_json_in_process():
    r = runner.invoke(app, ["design", str(EXAMPLES / "relay-12v.toml"), "--json"])
    assert r.exit_code == 0, r.output
    d = json.loads(r.stdout)
    assert d["board"] == "tiny-8bit-diode"
    assert d["timer"]["prescaler"] in (1, 8, 64, 256, 1024), "only the timer's own ratios"


def test_bad_input_exit_2_in_process(tmp_path):
    bad = tmp_path / "v.toml"
    bad.write_text((EXAMPLES / "demo-valve.toml").read_text().replace('"60 mH"', '"60 mV"'))
    r = runner.invoke(app, ["design", str(bad)])
    assert r.exit_code == 2
    assert "coil.inductance: '60 mV' is a voltage, expected an inductance" in r.stderr


def test_help_lists_commands():
    r = runner.invoke(app, ["--help"])
    assert r.exit_code == 0
    for name in ("demo", "design", "simulate", "boards"):
        assert name in r.stdout


def test_help_shows_flags_as_flags():
    """``--json`` is a flag: the help gives it no value placeholder (a ``<bool>`` there made
    users type ``--json true``, which the parser rightly refuses)."""
    for command in ("design", "tune", "check", "boards"):
        res = runner.invoke(app, [command, "--help"], terminal_width=100)
        assert res.exit_code == 0, res.output
        assert "<bool>" not in res.output, f"{command} --help: {res.output}"
        assert "--json" in res.output


def test_simulate_plot_writes_a_png_beside_the_csv(tmp_path):
    """``simulate --plot`` (documented in the README): a PNG of the actuation, for a plain
    coil and for one with an [armature] (gap and velocity panel)."""
    for name in ("demo-valve", "locker-latch-12v"):
        csv, png = tmp_path / f"{name}.csv", tmp_path / f"{name}.png"
        res = runner.invoke(app, ["simulate", str(EXAMPLES / f"{name}.toml"), "--supply", "12" if "12v" in name else "24",
                                  "--coil-temp", "60", "--hold-time", "10 ms", "--csv", str(csv),
                                  "--plot", str(png)])
        assert res.exit_code == 0, res.output
        assert csv.read_text().startswith("time_s,current_a")
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n", name
        assert f"wrote plot {png}" in res.output
