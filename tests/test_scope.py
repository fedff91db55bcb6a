"""Oscilloscope CSVs into `check` and `fit`: five common layouts, each with a gap or a
glitch, and the reader's refusals.

The records are the project's own synthetic waveforms (coildrive.bench.synth, the model
actuation) sampled at a scope's rate, with noise and a 12-bit vertical step, written as
CSV the ways scopes commonly export them (tests/scope_layouts.py; invented data). The
references: the coil the record was made from -- its resistance at 35 degC from IEC 60028
copper (alpha = 0.00393 /K) and its inductance -- recovered by the least-squares fit of
the textbook RL step response within the 3 % the capture fit tests use
(test_check_fit.py); a coil with 40 % more resistance must fail the check (its pull-in
time and hold current move by far more than the tolerances).
"""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pytest
from typer.testing import CliRunner

from conftest import BOARDS, EXAMPLES, drive_path, run_cli
from coildrive.bench.analysis import analyse
from coildrive.bench.check import check_capture
from coildrive.bench.messages import EventKind
from coildrive.bench.scope import (ScopeOptions, looks_like_scope_csv, parse_columns,
                                   parse_current_scale, read_any_capture, read_scope_csv)
from coildrive.cli import app
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.errors import InputError
from coildrive.units import parse_quantity
from scope_layouts import LAYOUTS, scope_record, write_plain_seconds, write_preamble_units_row

ALPHA = 0.00393  # IEC 60028
TEMP = 35.0
DEMO = str(drive_path("bench-valve"))  # one fixed compare and peak at every supply
runner = CliRunner()


@pytest.fixture(scope="module")
def demo():
    return design(load_drive(DEMO))


@pytest.fixture(scope="module")
def files(tmp_path_factory, demo):
    """Each layout written from a healthy coil and from one with 40 % more resistance."""
    folder = tmp_path_factory.mktemp("scope")
    healthy = scope_record(demo, coil_temp=TEMP, seed=2)
    wrong = scope_record(demo, coil_temp=TEMP, seed=2, resistance_scale=1.4)
    for name, (writer, _) in LAYOUTS.items():
        writer(healthy, folder / f"{name}.csv")
        writer(wrong, folder / f"{name}-wrong.csv")
    return folder, healthy


def _invoke(*args):
    r = runner.invoke(app, [str(a) for a in args])
    return r


@pytest.mark.parametrize("layout", list(LAYOUTS))
def test_check_passes_a_healthy_coil_and_fails_a_wrong_one(files, layout):
    folder, _ = files
    opts = LAYOUTS[layout][1]
    ok = _invoke("check", folder / f"{layout}.csv", DEMO, "--coil-temp", TEMP, "--json", *opts)
    assert ok.exit_code == 0, ok.output
    doc = json.loads(ok.stdout)
    assert doc["ok"] and doc["analysis"]["sample_rate_hz"] == pytest.approx(500e3, rel=1e-6)
    rows = {i["name"]: i for i in doc["items"]}
    assert rows["actuations"]["measured"] == 2
    for name in ("pull_in_time", "hold_mean", "release_time", "hold_ripple", "peak_duration"):
        assert rows[name]["status"] == "pass", (name, rows[name])
    bad = _invoke("check", folder / f"{layout}-wrong.csv", DEMO, "--coil-temp", TEMP, *opts)
    assert bad.exit_code == 1, bad.output
    assert "check FAILED" in bad.stdout and "hold_mean" in bad.stdout.split("check FAILED")[1]


@pytest.mark.parametrize("layout", list(LAYOUTS))
def test_fit_recovers_r_and_l_within_3_percent(files, demo, layout):
    folder, _ = files
    opts = LAYOUTS[layout][1]
    r = _invoke("fit", folder / f"{layout}.csv", "--board", "lab-m32-zener", "--supply", "24",
                "--coil-temp", TEMP, *opts)
    assert r.exit_code == 0, r.output
    coil = tomllib.loads(r.stdout)["coil"]
    c = demo.drive.coil
    r_true = c.resistance * (1 + ALPHA * (TEMP - 20)) / (1 + ALPHA * (c.reference_temp - 20))
    assert parse_quantity(coil["resistance"], "resistance") == pytest.approx(r_true, rel=0.03), \
        "R: IEC 60028 copper at 35 degC"
    assert parse_quantity(coil["inductance"], "inductance") == pytest.approx(c.inductance, rel=0.03), \
        "L: the coil the record was made with"


def test_gaps_are_counted_not_bridged(files):
    folder, rec = files
    cap = read_any_capture(folder / "plain-seconds.csv")
    assert cap.meta.link == "scope" and cap.meta.sample_rate_hz == pytest.approx(1 / rec.dt)
    assert len(cap) == rec.t.size - 40
    assert cap.samples_missing == 40, "the 40 rows cut from the record are missing indices"
    step = np.diff(cap.index)
    assert sorted(set(step.tolist())) == [1, 41], "one jump over the gap, no invented samples"


def test_glitches_are_dropped_and_said(files):
    folder, rec = files
    opts = ScopeOptions(parse_columns("time=TIME,current=CH1,switch=CH2,node=CH3,supply=CH4"),
                        parse_current_scale("100 mV/A"))
    cap = read_scope_csv(folder / "preamble-units-row.csv", opts)
    extra = cap.meta.extra
    assert extra["repeated_rows_dropped"] == 1 and extra["values_missing"] == 1
    assert len(cap) == rec.t.size - 1 and cap.samples_missing == 1
    assert cap.meta.supply_v == pytest.approx(24.0, abs=0.05), "median of the supply channel"
    assert any("over range" in n for n in extra["notes"])


def test_switch_column_gives_the_phases(files, demo):
    folder, rec = files
    cap = read_any_capture(folder / "index-increment.csv",
                           ScopeOptions(parse_columns("time=X,current=CH1,switch=CH2"), 1.0))
    kinds = [e.kind for e in cap.events]
    assert kinds == [EventKind.ON, EventKind.PEAK_END, EventKind.OFF] * 2
    ons = [e.index for e in cap.events if e.kind == EventKind.ON]
    # the first sample at or after each switch-on (the bench link's convention)
    expected = [int(np.ceil(t / rec.dt)) for t in rec.on_times]
    assert ons == expected
    peak = [e.index - o for e, o in zip([e for e in cap.events if e.kind == EventKind.PEAK_END], ons)]
    assert np.allclose(np.array(peak) * rec.dt, demo.pull_in.peak_time_s, atol=2 * rec.dt)
    a = analyse(cap)
    assert [x.phases_from for x in a.actuations] == ["events", "events"]


def test_switch_voltage_over_the_rating_fails(files, tmp_path):
    folder, _ = files
    text = (BOARDS / "lab-m32-zener.toml").read_text()
    low = text.replace('max_voltage = "100 V"', 'max_voltage = "50 V"')
    assert low != text
    board = tmp_path / "lab-50v.toml"
    board.write_text(low.replace('name = "lab-m32-zener"', 'name = "lab-50v"'))
    opts = LAYOUTS["preamble-units-row"][1]
    ok = _invoke("check", folder / "preamble-units-row.csv", DEMO, "--coil-temp", TEMP, "--json", *opts)
    row = [i for i in json.loads(ok.stdout)["items"] if i["name"] == "switch_voltage"][0]
    # a low-side switch freewheeling through a diode and a Zener sees the bus plus the
    # diode drop and the Zener voltage at turn-off (textbook clamp relation): 24 + 0.9 + 33 V
    assert row["status"] == "pass" and row["measured"] == pytest.approx(24 + 0.9 + 33, rel=0.03)
    assert row["predicted"] == pytest.approx(24 + 0.9 + 33, rel=0.01)
    r = _invoke("check", folder / "preamble-units-row.csv", DEMO, "--board", board, "--coil-temp", TEMP,
                "--json", *opts)
    assert r.exit_code == 1
    row = [i for i in json.loads(r.stdout)["items"] if i["name"] == "switch_voltage"][0]
    assert row["status"] == "FAIL" and row["margin_pct"] < 0 and "rating" in row["detail"]


def test_text_mode_and_capture_files_are_not_taken_for_scope_csv():
    assert not looks_like_scope_csv(b"0,12\n1,14\non,2\n2,40\n")
    assert looks_like_scope_csv(b"Time (s),Current (A)\n0.0,0.01\n1e-6,0.02\n")
    assert looks_like_scope_csv(b"0.000000,0.010\n0.000001,0.012\n")


@pytest.mark.parametrize("text, value", [("10", 10.0), ("10 A/V", 10.0), ("100 mV/A", 10.0),
                                         ("0.1 V/A", 10.0), ("-10 A/V", -10.0), ("1 A/mV", 1000.0)])
def test_current_scale(text, value):
    assert parse_current_scale(text) == pytest.approx(value)


@pytest.mark.parametrize("text", ["abc", "10 A", "0", "10 V/V"])
def test_bad_current_scale(text):
    with pytest.raises(InputError) as err:
        parse_current_scale(text)
    assert "--current-scale" in str(err.value)


def _table(rows, head="Time (s),Current (A)"):
    return head + "\n" + "\n".join(rows) + "\n"


def _ok_rows(n=40, dt=1e-5):
    return [f"{k * dt:.6e},{0.5 if 10 <= k < 30 else 0.0:.3f}" for k in range(n)]


@pytest.mark.parametrize("mutate, options, message", [
    (lambda r: r.__setitem__(20, "2.000000e-04,abc"), [], "line 22, column 2 (Current): 'abc' is not a number"),
    (lambda r: r.__setitem__(20, "2.040000e-04,0.5"), [], "line 22: time 0.000204 s is 0.40 sample intervals off"),
    (lambda r: r.__setitem__(20, "1.000000e-04,0.5"), [], "line 22: time 0.0001 s goes back"),
    (lambda r: r.__setitem__(20, "1.900000e-04,0.7"), [], "line 22: repeats the time 0.00019 s of line 21 with other values"),
    (lambda r: r.__setitem__(20, ",0.5"), [], "line 22, column 1: '' holds no value (a time expected"),
    (lambda r: r.__setitem__(39, "5.000000e+03,0.0"), [], "line 41: time jumps from 0.00038 s to 5000 s, a gap longer than the whole record"),
    (lambda r: r.__setitem__(20, "2.000000e-04"), [], "line 22: has 1 column(s), the data needs 2"),
    (lambda r: None, ["--columns", "time=1,current=7"], "current=7: column 7 holds no data"),
    (lambda r: None, ["--columns", "time=1,curent=2"], "'curent' is not a role"),
    (lambda r: None, ["--sample-interval", "-1 us"], "--sample-interval"),
])
def test_reader_errors_name_file_line_and_column(tmp_path, mutate, options, message):
    rows = _ok_rows()
    mutate(rows)
    path = tmp_path / "bad.csv"
    path.write_text(_table(rows))
    r = _invoke("check", path, DEMO, *options)
    assert r.exit_code == 2, r.output
    assert len(r.stderr.strip().splitlines()) == 1 and message in r.stderr, r.stderr
    if "line" in message:
        assert str(path) in r.stderr


def test_blank_lines_and_a_cut_last_line_are_read(tmp_path):
    rows = _ok_rows()
    path = tmp_path / "tail.csv"
    path.write_text(_table(rows[:20] + [""] + rows[20:]) + "\n\n" + "4.0000")
    cap = read_scope_csv(path)
    assert len(cap) == 40 and cap.samples_missing == 0, "a blank line is not a sample"
    assert any("line 45 is cut short" in n for n in cap.meta.extra["notes"])


def test_probe_volts_need_a_scale_and_reversed_probes_are_caught(tmp_path):
    path = tmp_path / "v.csv"
    path.write_text(_table(_ok_rows(), head="TIME,CH1\ns,V"))
    r = _invoke("fit", path, "--board", "lab-m32-zener", "--supply", "24")
    assert r.exit_code == 2 and "column 2 (CH1): is in V" in r.stderr and "--current-scale" in r.stderr
    neg = tmp_path / "neg.csv"
    neg.write_text(_table([row.replace(",0.5", ",-0.5") for row in _ok_rows()]))
    with pytest.raises(InputError, match="negative --current-scale"):
        read_scope_csv(neg)
    flipped = read_scope_csv(neg, ScopeOptions(current_scale=-1.0))
    assert flipped.current.max() == pytest.approx(0.5, rel=1e-4)


def test_several_channels_need_columns(tmp_path):
    path = tmp_path / "multi.csv"
    path.write_text(_table([f"{k},{0.1 * k},{0.2 * k}" for k in range(40)], head="TIME (s),CH1 (V),CH2 (V)"))
    with pytest.raises(InputError, match="none named as the coil current: say which with --columns"):
        read_scope_csv(path)
    index = tmp_path / "index.csv"
    index.write_text(_table([f"{k},{0.01 * k}" for k in range(40)], head="X,CH1 (A)"))
    with pytest.raises(InputError, match="--sample-interval"):
        read_scope_csv(index)
    cap = read_scope_csv(index, ScopeOptions(sample_interval=2e-6))
    assert cap.meta.sample_rate_hz == pytest.approx(5e5)


@pytest.mark.slow
def test_cli_subprocess_on_a_scope_csv(files, tmp_path):
    folder, _ = files
    opts = LAYOUTS["preamble-units-row"][1]
    r = run_cli("check", str(folder / "preamble-units-row.csv"), DEMO, "--coil-temp", str(TEMP),
                "--plot", str(tmp_path / "p.png"), *opts)
    assert r.returncode == 0, r.stdout + r.stderr
    assert "to edge" in r.stdout and "scope supply column" in r.stdout
    assert (tmp_path / "p.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_plain_layout_written_like_a_scope(files, tmp_path, demo):
    """The writers' own sanity: the plain layout's first lines are what a scope writes."""
    rec = scope_record(demo, actuations=2, seed=3)
    write_plain_seconds(rec, tmp_path / "a.csv")
    write_preamble_units_row(rec, tmp_path / "b.csv")
    assert (tmp_path / "a.csv").read_text().splitlines()[0] == "Time (s),Current (A)"
    assert (tmp_path / "b.csv").read_bytes().count(b"\r\n") > rec.t.size
    report = check_capture(read_any_capture(tmp_path / "a.csv"), demo)
    assert report.ok


def test_a_gap_inside_an_actuation_fails_the_link_row(files, tmp_path):
    """Rows missing inside an actuation are not bridged: the figures there cannot be
    trusted, and the `link` row says how many samples are missing."""
    folder, rec = files
    lines = (folder / "plain-seconds.csv").read_text().splitlines()
    hold = int((rec.on_times[0] + 0.015) / rec.dt)           # inside the first hold
    path = tmp_path / "hole.csv"
    path.write_text("\n".join(lines[:hold] + lines[hold + 25:]) + "\n")
    r = _invoke("check", path, DEMO, "--coil-temp", TEMP, "--json")
    assert r.exit_code == 1, r.output
    link = [i for i in json.loads(r.stdout)["items"] if i["name"] == "link"][0]
    assert link["status"] == "FAIL" and link["measured"] == 25
