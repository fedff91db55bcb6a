"""The docs say what the code does: README commands, CI script and file-format keys."""

import re

from conftest import ROOT


def _readme_commands():
    text = (ROOT / "README.md").read_text()
    setup = text.split("## Set up", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```sh\n(.+?)\n```", setup)


def test_readme_has_exactly_two_setup_commands():
    commands = _readme_commands()
    assert len(commands) == 2, commands
    assert commands[0].endswith("coildrive demo")
    assert "pytest" in commands[1]


def test_ci_runs_the_readme_test_command():
    ci = (ROOT / ".ci" / "run").read_text()
    assert _readme_commands()[1] in ci.splitlines(), "CI must run the README's test command verbatim"
    assert "CI=true" in ci and "ngspice" in ci


def test_every_drive_key_is_documented():
    from coildrive.config import Coil, Hold, PullIn, Supply, Thermal
    doc = (ROOT / "docs" / "file-formats.md").read_text()
    import dataclasses
    for cls in (Coil, Supply, Thermal, PullIn, Hold):
        for f in dataclasses.fields(cls):
            assert re.search(rf"^{f.name} = ", doc, re.M), f"{cls.__name__}.{f.name} not in docs/file-formats.md"
