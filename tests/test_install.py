"""A plain (non-editable) install works from any folder: boards, templates and examples
ship inside the wheel."""

from __future__ import annotations

import os
import subprocess
import sys
import zipfile

import pytest

from conftest import ROOT


@pytest.mark.slow
def test_wheel_runs_demo_outside_checkout(tmp_path):
    wheels = tmp_path / "wheels"
    r = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                        "-q", "-w", str(wheels), str(ROOT)], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    (wheel,) = wheels.glob("coildrive-*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    for needed in ("coildrive/_data/boards/lab-m32-zener.toml",
                   "coildrive/_data/codegen_templates/drive_header.h.j2",
                   "coildrive/_data/examples/demo-valve.toml"):
        assert needed in names, needed
    site = tmp_path / "site"
    r = subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target",
                        str(site), str(wheel)], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    work = tmp_path / "elsewhere"
    work.mkdir()
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    env["PYTHONPATH"] = str(site)
    r = subprocess.run([sys.executable, "-c", "import coildrive.cli as c, sys; "
                        "assert 'site' in c.__file__, c.__file__; sys.argv=['coildrive','demo']; c.main()"],
                       cwd=work, env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert (work / "demo_valve.h").is_file()
    assert "design ok" in r.stdout
