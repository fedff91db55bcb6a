"""Datasheet inputs of ``[coil]``: rated voltage and power, pick-up and drop-out voltages at
a stated coil temperature, response times (docs/coil-model.md).

The conversions are checked against numbers worked by hand below. Sources: copper's
temperature coefficient alpha = 0.00393 /K at 20 degC (IEC 60028); ``P = V^2 / R`` for a
coil's rated power at its rated voltage (Joule's law); a relay datasheet's pick-up
(must-operate) and drop-out (must-release) voltages hold for every part within the
resistance tolerance (common practice), so the pull-in current is taken at the lowest
resistance and the drop-out current at the highest.
"""

from __future__ import annotations

import json

import pytest

from coildrive.config import load_drive
from coildrive.design import design
from conftest import EXAMPLES, run_cli

EXAMPLE = EXAMPLES / "relay-datasheet-24v.toml"


def _edited(tmp_path, old: str, new: str, source=EXAMPLE):
    text = source.read_text()
    assert old in text, old
    path = tmp_path / "drive.toml"
    path.write_text(text.replace(old, new, 1))
    return path


def test_conversions_against_hand_worked_numbers():
    d = load_drive(EXAMPLE)
    c = d.coil
    # R = V^2 / P = (12 V)^2 / 1.2 W = 144 / 1.2 = 120 ohm at 20 degC
    assert c.resistance == pytest.approx(120.0, rel=1e-12), "rated_voltage^2 / rated_power"
    # R(23 degC) = 120 x (1 + 0.00393 x (23 - 20)) = 120 x 1.01179 = 121.4148 ohm (IEC 60028)
    # pull-in = 8.4 V / (121.4148 x (1 - 0.10)) = 8.4 / 109.27332 = 0.0768715 A
    assert d.pull_in.current == pytest.approx(0.0768715, rel=1e-6), "pick-up / lowest R"
    # drop-out = 1.2 V / (121.4148 x (1 + 0.10)) = 1.2 / 133.55628 = 0.00898497 A
    assert d.release.current == pytest.approx(0.00898497, rel=1e-6), "drop-out / highest R"
    assert c.derived == ("coil.resistance", "pull_in.current", "release.current")
    assert (c.operate_time, c.release_time) == (0.010, 0.005)


def test_stated_temperature_away_from_the_reference(tmp_path):
    path = _edited(tmp_path, 'stated_temp = "23 degC"', 'stated_temp = "70 degC"')
    d = load_drive(path)
    # R(70 degC) = 120 x (1 + 0.00393 x 50) = 120 x 1.1965 = 143.58 ohm (IEC 60028)
    # pull-in = 8.4 / (143.58 x 0.9) = 8.4 / 129.222 = 0.0650044 A
    assert d.pull_in.current == pytest.approx(0.0650044, rel=1e-6)
    # drop-out = 1.2 / (143.58 x 1.1) = 1.2 / 157.938 = 0.00759792 A
    assert d.release.current == pytest.approx(0.00759792, rel=1e-6)


def test_resistance_given_plainly_with_pick_up(tmp_path):
    """A resistance key with the pick-up voltage (no rated values); stated_temp defaults
    to reference_temp; no tolerance: I = V / R exactly."""
    path = _edited(tmp_path, 'rated_voltage = "12 V"', 'resistance = "100 ohm"')
    text = path.read_text().replace('rated_power = "1.2 W"', "").replace(
        'stated_temp = "23 degC"', "").replace("resistance_tolerance = 0.10", "")
    path.write_text(text)
    d = load_drive(path)
    # 8.4 V / 100 ohm = 0.084 A; 1.2 V / 100 ohm = 0.012 A
    assert d.pull_in.current == pytest.approx(0.084, rel=1e-12)
    assert d.release.current == pytest.approx(0.012, rel=1e-12)
    assert d.coil.derived == ("pull_in.current", "release.current")
    assert d.coil.stated_temp == d.coil.reference_temp


@pytest.mark.parametrize("old, new, keys", [
    ('rated_voltage = "12 V"', 'rated_voltage = "12 V"\nresistance = "120 ohm"',
     ("coil.resistance", "coil.rated_voltage")),
    ("[pull_in]", '[pull_in]\ncurrent = "80 mA"', ("pull_in.current", "coil.pick_up_voltage")),
    ('[hold]', '[release]\ncurrent = "9 mA"\n\n[hold]', ("release.current", "coil.drop_out_voltage")),
])
def test_two_forms_of_one_quantity_name_both_keys(tmp_path, old, new, keys):
    r = run_cli("design", str(_edited(tmp_path, old, new)))
    assert r.returncode == 2, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in r.stderr, r.stderr
    assert all(k in lines[0] for k in keys), lines[0]


@pytest.mark.parametrize("old, new, key", [
    ('rated_power = "1.2 W"', 'rated_current = 1', "coil.rated_voltage: needs coil.rated_power"),
    ('pick_up_voltage = "8.4 V"', 'pick_up_voltage = "13 V"', "coil.pick_up_voltage"),
    ('drop_out_voltage = "1.2 V"', 'drop_out_voltage = "9 V"', "coil.drop_out_voltage"),
    # (12 V)^2 / 0.1 mW = 1.44 Mohm, above the 100 kohm coil.resistance accepts
    ('rated_power = "1.2 W"', 'rated_power = "0.1 mW"', "coil.rated_power: gives a resistance"),
])
def test_bad_datasheet_values(tmp_path, old, new, key):
    path = _edited(tmp_path, old, new)
    path.write_text(path.read_text().replace("rated_current = 1", ""))
    with pytest.raises(Exception) as err:
        load_drive(path)
    assert key in str(err.value)


def test_stated_temp_needs_a_voltage(tmp_path):
    path = _edited(tmp_path, 'pick_up_voltage = "8.4 V"', "")
    path.write_text(path.read_text().replace('drop_out_voltage = "1.2 V"',
                                             "").replace("[pull_in]", '[release]\ncurrent = "9 mA"\n\n[pull_in]\ncurrent = "80 mA"'))
    with pytest.raises(Exception, match="coil.stated_temp"):
        load_drive(path)


def test_cli_shows_derived_values_and_where_they_came_from():
    r = run_cli("design", str(EXAMPLE), "--json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    sheet = doc["datasheet"]
    derived = {v["key"]: v for v in sheet["derived"]}
    assert derived["coil.resistance"]["value"] == pytest.approx(120.0)
    assert "(12 V)^2 / 1.2 W" in derived["coil.resistance"]["source"]
    assert "8.4 V / (121.41 ohm at 23 degC" in derived["pull_in.current"]["source"]
    assert doc["pull_in"]["current_a"] == pytest.approx(0.0768715, rel=1e-6)
    assert doc["release"]["dropout_current_a"] == pytest.approx(0.00898497, rel=1e-6)
    # the estimate is the worst corner's current decay to drop-out + the datasheet's 5 ms
    assert sheet["release_estimate_s"] == pytest.approx(doc["release"]["time_s"] + 0.005)
    checks = {c["name"]: c for c in doc["checks"]}
    assert checks["operate_time"]["ok"], checks["operate_time"]
    # the firmware's lockout (ticks of the 5 kHz scheduler) against that estimate: a warning
    lockout = doc["release"]["lockout_ticks"] / 5000.0
    lock = checks["release_lockout"]
    assert lock["severity"] == "warning" and lock["ok"] == (lockout >= sheet["release_estimate_s"])
    table = run_cli("design", str(EXAMPLE))
    assert table.returncode == 0, table.stderr
    assert "pull_in.current" in table.stdout and "(datasheet)" in table.stdout


def test_peak_shorter_than_the_operate_time_fails(tmp_path):
    path = _edited(tmp_path, 'operate_time = "10 ms"', 'operate_time = "40 ms"')
    d = design(load_drive(path))
    check = next(c for c in d.checks if c.name == "operate_time")
    assert not check.ok and "40 ms" in check.detail, check
    assert d.pull_in.peak_time_s < 0.040
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 1, r.stderr


def test_files_without_datasheet_keys_keep_their_hash_and_json():
    d = load_drive(EXAMPLES / "relay-12v.toml")
    assert d.input_hash() == "0e5ec8788da37ba9"   # recorded before the datasheet keys
    assert "datasheet" not in design(d).to_dict()
