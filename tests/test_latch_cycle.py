"""A latching coil's on/off cycle ([duty]): the coil's temperature just after each pulse
worked by hand and against a pulse-by-pulse march, and both spacings against the
design's shortest interval; its coil given by datasheet voltages, and what is refused."""

from __future__ import annotations

import math

import pytest

from conftest import EXAMPLES
from coildrive.config import load_drive
from coildrive.design.latch import design_latch
from coildrive.model import latch as latch_model

BOLT = EXAMPLES / "latching" / "bolt-catch-reset-winding-12v.toml"


def test_cycle_rises_by_hand_and_by_marching():
    # 0.3 J and 0.1 J into 10 J/K, tau 100 s, on 20 s, off 80 s (hand arithmetic):
    # 1 - e^-1 = 0.6321206; e^-0.8 = 0.4493290; e^-0.2 = 0.8187308
    # set:   (0.03 + 0.4493290 x 0.01) / 0.6321206 = 0.0344933 / 0.6321206 = 0.0545677 K
    # reset: (0.01 + 0.8187308 x 0.03) / 0.6321206 = 0.0345619 / 0.6321206 = 0.0546763 K
    rs, rr = latch_model.cycle_rises(0.3, 0.1, 20.0, 80.0, 10.0, 100.0)
    assert float(rs) == pytest.approx(0.0545677, rel=1e-5)
    assert float(rr) == pytest.approx(0.0546763, rel=1e-5)
    # march the same impulses pulse by pulse (first-order cooling between them) to steady state
    theta = 0.0
    for _ in range(200):
        theta = theta * math.exp(-80.0 / 100.0) + 0.03      # just after a set pulse
        after_set = theta
        theta = theta * math.exp(-20.0 / 100.0) + 0.01      # just after the reset pulse
    assert after_set == pytest.approx(float(rs), rel=1e-12) and theta == pytest.approx(float(rr), rel=1e-12)
    # equal pulses at equal spacing: the plain train of the shortest interval
    rs, rr = latch_model.cycle_rises(0.2, 0.2, 5.0, 5.0, 3.0, 50.0)
    assert float(rs) == float(rr) == pytest.approx(float(latch_model.peak_rise(0.2, 5.0, 3.0, 50.0)), rel=1e-12)


def test_cycle_in_the_design_and_its_checks(tmp_path):
    d = design_latch(load_drive(BOLT))
    c = d.latch.cycle
    assert (c.on_time_s, c.off_time_s, c.actuation_rate_hz) == (2.0, 8.0, pytest.approx(0.1))
    by = {p.name: p for p in d.latch.pulses}
    rs, rr = latch_model.cycle_rises(by["set"].copper_j, by["reset"].copper_j, 2.0, 8.0, 15.0, 300.0)
    assert c.hottest_coil_c == pytest.approx(50.0 + max(float(rs), float(rr)), rel=1e-12)
    checks = {x.name: x for x in d.checks}
    assert checks["duty_interval"].ok and checks["duty_coil_temperature"].ok
    # a reset sooner after the set than the shortest interval fails duty_interval
    fast = tmp_path / "fast.toml"
    fast.write_text(BOLT.read_text().replace('on_time = "2 s"', 'on_time = "20 ms"'))
    d = design_latch(load_drive(fast))
    check = next(x for x in d.checks if x.name == "duty_interval")
    assert not check.ok and "20 ms" in check.detail and not d.ok


RELAY = EXAMPLES / "latching" / "bistable-relay-reset-winding-24v.toml"


def test_datasheet_voltages_give_the_set_coil(tmp_path):
    from typer.testing import CliRunner

    from coildrive.cli import app

    text = RELAY.read_text().replace('resistance = "360 ohm"       # at reference_temp',
                                     'rated_voltage = "24 V"\nrated_power = "1.6 W"\n'
                                     'pick_up_voltage = "14 V"\nstated_temp = "20 degC"', 1)
    sheet = tmp_path / "sheet.toml"
    text = text.replace('current = "25 mA"\n', "", 1)
    sheet.write_text(text)
    d = design_latch(load_drive(sheet))
    got = {v.key: v.value for v in d.latch.derived}
    # (24 V)^2 / 1.6 W = 360 ohm; 14 V / (360 ohm x (1 - 0.1)) = 14 / 324 = 0.0432099 A (hand)
    assert got == {"coil.resistance": pytest.approx(360.0), "pull_in.current": pytest.approx(0.0432099, rel=1e-5)}
    assert next(p for p in d.latch.pulses if p.name == "set").current_a == got["pull_in.current"]
    # a latching coil has no drop-out, and the datasheet's operate time times a peak it does not have
    for key, line in (("coil.drop_out_voltage", 'drop_out_voltage = "2 V"\n'), ("coil.operate_time", 'operate_time = "10 ms"\n')):
        bad = tmp_path / "bad.toml"
        bad.write_text(text.replace('stated_temp = "20 degC"', 'stated_temp = "20 degC"\n' + line, 1))
        res = CliRunner().invoke(app, ["design", str(bad)])
        assert res.exit_code == 2 and key in res.output and len(res.output.strip().splitlines()) == 1, res.output
