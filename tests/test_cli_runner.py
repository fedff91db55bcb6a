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
