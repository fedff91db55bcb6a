"""A capture that ends (or starts) in the middle of an actuation must never fail a good
device: the actuation the capture cut short is reported and left out of the verdict.

Captures end mid-actuation whenever they are stopped by hand (Ctrl-C, SIGTERM), killed,
limited by ``--duration`` or replayed from a recording that ends where it ends; a scope
record ends where its memory ends. The captures here are synthetic (coildrive.bench.synth,
the model actuation as the board's ADC streams it), cut at many points through the last
actuation, and checked through the command line as a test station would run it.
Reference: the same coil passes the check whole (test_check_fit.py); a coil with 40 %
more resistance fails it, cut short or not (its pull-in and hold move far outside the
tolerances).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import drive_path, run_cli
from coildrive.bench.capture_file import Capture, write_capture
from coildrive.bench.messages import EventKind
from coildrive.bench.synth import synth_design_capture
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design import design
from scope_layouts import scope_record, write_plain_seconds

runner = CliRunner()
CUTS = np.linspace(0.0, 1.0, 13)   # from just after the last switch-on to the end of its idle


def _drive(name):
    return str(drive_path(name))


def _cut(cap: Capture, stop: int) -> Capture:
    """The capture as if it had stopped before sample position ``stop``."""
    last = int(cap.index[stop - 1])
    return Capture(cap.index[:stop], cap.code[:stop], tuple(e for e in cap.events if e.index <= last),
                   (), cap.meta, source="cut")


def _stops(cap: Capture, actuation: int) -> list[int]:
    """Sample positions from one sample after switch-on ``actuation`` (1-based) to the end."""
    on = [e.index for e in cap.events if e.kind == EventKind.ON][actuation - 1]
    first = int(np.searchsorted(cap.index, on)) + 1
    return sorted({int(first + f * (len(cap) - first)) for f in CUTS} - {len(cap)})


@pytest.fixture(scope="module")
def captures(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cut")
    out = {}
    for name in ("bench-valve", "pinch-valve-48v", "locker-latch-12v"):
        d = design(load_drive(drive_path(name)))
        cap = synth_design_capture(d, actuations=3, hold_time=0.03, noise_codes=1.0, seed=4)
        wrong = synth_design_capture(d, actuations=3, hold_time=0.03, noise_codes=1.0, seed=4,
                                     resistance_scale=1.4)
        paths = []
        for stop in _stops(cap, 3):
            p = folder / f"{name}-{stop}.cdcap"
            write_capture(p, _cut(cap, stop))
            paths.append(p)
        w = folder / f"{name}-wrong.cdcap"
        write_capture(w, _cut(wrong, _stops(wrong, 3)[4]))
        out[name] = (paths, w, cap, d)
    return out


@pytest.mark.parametrize("name", ["bench-valve", "pinch-valve-48v", "locker-latch-12v"])
@pytest.mark.parametrize("phases", ["events", "waveform"])
def test_a_capture_stopped_anywhere_in_an_actuation_passes_a_good_device(captures, name, phases):
    paths, _, _, _ = captures[name]
    extra = ["--no-events"] if phases == "waveform" else []
    for path in paths:
        r = runner.invoke(app, ["check", str(path), _drive(name), "--json", *extra])
        assert r.exit_code == 0, (path.name, r.output[-2000:])
        doc = json.loads(r.stdout)
        acts = doc["analysis"]["actuations"]
        rows = {i["name"]: i for i in doc["items"]}
        assert rows["actuations"]["measured"] in (2, 3), path.name
        if rows["actuations"]["measured"] == 2 and len(acts) == 3:
            # the third was cut short: reported, and not part of any row (cut a sample
            # after its switch-on, the waveform shows no actuation yet: then there are 2)
            assert acts[-1]["partial"] == "end" and not acts[-1]["complete"], path.name
            assert "left out: the capture ended during actuation 3" in rows["actuations"]["detail"]
            assert all(3 not in i["actuations"] for i in doc["items"] if i["actuations"])


def test_a_wrong_coil_still_fails_when_cut_short(captures):
    _, wrong, _, _ = captures["bench-valve"]
    r = runner.invoke(app, ["check", str(wrong), _drive("bench-valve")])
    assert r.exit_code == 1, r.output
    assert "pull_in_time" in r.stdout.split("check FAILED")[1]


def test_only_a_cut_actuation_is_nothing_to_check(captures, tmp_path):
    _, _, cap, _ = captures["bench-valve"]
    stop = _stops(cap, 1)[3]
    path = tmp_path / "first.cdcap"
    write_capture(path, _cut(cap, stop))
    r = runner.invoke(app, ["check", str(path), _drive("bench-valve")])
    assert r.exit_code == 2, r.output
    assert "holds no complete actuation: the capture ended during actuation 1" in r.stderr


def test_a_capture_that_starts_mid_actuation_passes(captures, tmp_path):
    _, _, cap, _ = captures["bench-valve"]
    on = [e.index for e in cap.events if e.kind == EventKind.ON]
    start = int(np.searchsorted(cap.index, on[0])) + 2000          # inside the first hold
    late = Capture(cap.index[start:], cap.code[start:], tuple(e for e in cap.events if e.index >= cap.index[start]),
                   (), cap.meta, source="late")
    path = tmp_path / "late.cdcap"
    write_capture(path, late)
    r = runner.invoke(app, ["check", str(path), _drive("bench-valve"), "--no-events", "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["analysis"]["actuations"][0]["partial"] == "start"
    assert "left out: the capture began during actuation 1" in doc["items"][0]["detail"]


def test_scope_records_ending_mid_actuation_pass(tmp_path):
    d = design(load_drive(drive_path("bench-valve")))
    full = scope_record(d, actuations=2, seed=6)
    length = full.on_times[1] - full.on_times[0]
    for k, frac in enumerate(np.linspace(0.02, 0.98, 7)):
        rec = scope_record(d, actuations=3, seed=6, duration=full.on_times[1] + length + frac * length)
        path = tmp_path / f"rec{k}.csv"
        write_plain_seconds(rec, path)
        r = runner.invoke(app, ["check", str(path), _drive("bench-valve")])
        assert r.exit_code == 0, (frac, r.output[-1500:])


@pytest.mark.slow
def test_cli_subprocess_reports_the_cut_actuation(captures):
    paths, _, _, _ = captures["bench-valve"]
    r = run_cli("check", str(paths[len(paths) // 2]), _drive("bench-valve"))
    assert r.returncode == 0, r.stdout + r.stderr
    text = " ".join(r.stdout.split())      # the table and notes wrap at the terminal's width
    assert "the capture ended during actuation 3: it is reported but left out of the check" in text
    assert "check passed" in r.stdout
