"""The reference driver's state machine, compiled with gcc and run under a script.

Outside source: gcc compiles the generated driver (C99, every warning an error) with
tests/data/driver_target.c; the figures the run must show come from the Design (its
peak ticks, lockout, thresholds and duty table), the rules are docs/firmware.md's.
"""

from __future__ import annotations

import pytest

from coildrive.design.regulation import table_lookup

from coildrive.bench.messages import EventKind, FaultCode
from coildrive.codegen.header import HeaderView
from coildrive.codegen.driver import OC_BLANK_SAMPLES, SUPPLY_SAMPLES, dip_codes, open_load_ticks, seat_grace_ticks
from coildrive.config import load_drive
from coildrive.design import design
from conftest import BOARDS, EXAMPLES
from driver_harness import conversions_per_tick, example_design, run_host

pytestmark = pytest.mark.compiler

ON, PEAK_END, OFF, FAULT = (int(k) for k in (EventKind.ON, EventKind.PEAK_END, EventKind.OFF, EventKind.FAULT))
OFF_STATE, PEAK, HOLD, RELEASE, FAULT_STATE = range(5)


def nominal_supply_code(d) -> int:
    return (d.adc.supply_min_code + d.adc.supply_max_code) // 2


def switch_offs(run, after_tick: int) -> list[tuple[int, int]]:
    return [(t, c) for t, c, on in run.calls("s") if on == 0 and t >= after_tick]


def _peak_at(d, code: int) -> int:
    """The peak ticks the header gives for a supply-sense reading (its peak table with
    PEAK_COMPENSATED, else PEAK_TICKS)."""
    if d.peak_table is None:
        return d.pull_in.peak_ticks
    return d.peak_table.peak_ticks[table_lookup(d.peak_table, code)]


def test_phase_timing_and_lockout(tmp_path):
    d = example_design("demo-valve")
    peak, lockout = _peak_at(d, nominal_supply_code(d)), d.release.lockout_ticks
    run = run_host(tmp_path, d, [("supply", nominal_supply_code(d)), ("full", 2 * d.adc.pull_in_code),
                                 ("run", 3), ("on", 0), ("run", peak + 20), ("off", 0), ("run", 1),
                                 ("on", 0), ("run", lockout + 5)])
    ev = run.events()
    t_on = 3
    assert ev[0] == (t_on, ON, 0)
    assert ev[1] == (t_on + peak, PEAK_END, 0), "the peak lasts the header's ticks for the supply"
    t_off = t_on + peak + 20
    assert ev[2] == (t_off, OFF, 0)
    # the switch goes on / off at the first conversion after the tick that decided it
    assert (t_on + 1, 0, 1) in run.calls("s")
    assert switch_offs(run, t_on + 1)[0] == (t_off + 1, 0)
    # ON during the release waits for the lockout: RELEASE_LOCKOUT_TICKS after the OFF
    assert ev[3] == (t_off + lockout, ON, 0), f"lockout {lockout} ticks"
    assert run.states()[-1] == (PEAK, 0)


@pytest.mark.parametrize("example", ["demo-valve", "relay-12v"])
def test_hold_compare_follows_the_duty_table(tmp_path, example):
    d = example_design(example)
    table = d.duty_table
    codes = [c for c in sorted(set(table.adc_codes) | {c + 1 for c in table.adc_codes} | {c - 1 for c in table.adc_codes})
             if d.adc.supply_min_code <= c <= d.adc.supply_max_code][:12]
    script = [("supply", codes[0]), ("full", 2 * d.adc.pull_in_code), ("run", 2), ("on", 0),
              ("run", d.pull_in.peak_ticks + 2)]
    for c in codes:
        script += [("supply", c), ("run", 1)]
    run = run_host(tmp_path, d, script)
    got = run.calls("p")
    for c in codes:
        # the last entry whose code is <= the reading (the design header's rule)
        k = max([i for i, code in enumerate(table.adc_codes) if code <= c] or [0])
        expected = table.compare_ticks[k]
        assert expected in [counts for _, _, counts in got], f"supply code {c}: compare {expected}"
    assert run.states()[-1] == (HOLD, 0)


def test_fixed_regulation_holds_the_designed_compare(tmp_path):
    d = example_design("demo-valve", ('regulation = "supply_table"', 'regulation = "fixed"'))
    assert d.hold.regulation == "fixed"
    run = run_host(tmp_path, d, [("supply", d.adc.supply_max_code), ("full", 2 * d.adc.pull_in_code),
                                 ("run", 1), ("on", 0), ("run", d.pull_in.peak_ticks + 3)])
    compares = [c for _, _, c in run.calls("p")]
    assert compares[-1] == d.timer.compare_ticks


def test_open_load(tmp_path):
    d = example_design("demo-valve")
    run = run_host(tmp_path, d, [("supply", nominal_supply_code(d)), ("mode", "open"), ("on", 0),
                                 ("run", open_load_ticks(d) + 5)])
    ev = run.events()
    assert ev[0] == (0, ON, 0)
    assert ev[1] == (open_load_ticks(d), FAULT, int(FaultCode.OPEN_LOAD)), ev
    assert ev[2] == (open_load_ticks(d), OFF, 0)
    assert switch_offs(run, 1)[0] == (open_load_ticks(d) + 1, 0)
    assert run.states()[-1] == (FAULT_STATE, int(FaultCode.OPEN_LOAD))


def test_over_current_turns_off_in_the_conversion_that_sees_it(tmp_path):
    d = example_design("demo-valve")
    run = run_host(tmp_path, d, [("supply", nominal_supply_code(d)), ("mode", "short"), ("on", 0), ("run", 5)])
    n = conversions_per_tick(d)
    fault = [(t, c) for t, c, k, v in run.calls("e") if k == FAULT]
    # switch on at tick 1 conversion 0; that conversion and OC_BLANK_SAMPLES - 1 more are
    # blanked, the next one sees the short
    seen = 1 * n + OC_BLANK_SAMPLES
    assert fault == [divmod(seen, n)], run.lines
    assert switch_offs(run, 1)[0] == divmod(seen, n), "off within one PWM period"
    assert run.states()[-1] == (FAULT_STATE, int(FaultCode.OVER_CURRENT))


@pytest.mark.parametrize("which", ["low", "high"])
def test_supply_out_of_range_in_the_hold(tmp_path, which):
    d = example_design("demo-valve")
    bad = d.adc.supply_min_code - 1 if which == "low" else d.adc.supply_max_code + 1
    code = FaultCode.SUPPLY_LOW if which == "low" else FaultCode.SUPPLY_HIGH
    n = conversions_per_tick(d)
    t_bad = d.pull_in.peak_ticks + 5
    run = run_host(tmp_path, d, [("supply", nominal_supply_code(d)), ("full", 2 * d.adc.pull_in_code),
                                 ("on", 0), ("run", t_bad), ("supply", bad), ("run", 5)])
    fault = [(t, c) for t, c, k, v in run.calls("e") if k == FAULT]
    assert fault == [divmod(t_bad * n + SUPPLY_SAMPLES - 1, n)], "after SUPPLY_SAMPLES conversions in a row"
    assert run.states()[-1] == (FAULT_STATE, int(code))


def test_supply_out_of_range_refuses_to_start(tmp_path):
    d = example_design("demo-valve")
    run = run_host(tmp_path, d, [("supply", d.adc.supply_min_code - 1), ("on", 0), ("run", 3)])
    assert run.events() == [(0, FAULT, int(FaultCode.SUPPLY_LOW)), (0, OFF, 0)]
    assert not [c for c in run.calls("s") if c[2] == 1], "the switch never turns on"


def test_fault_clears_through_the_lockout(tmp_path):
    d = example_design("demo-valve")
    lockout = d.release.lockout_ticks
    run = run_host(tmp_path, d, [("supply", nominal_supply_code(d)), ("mode", "open"), ("on", 0),
                                 ("run", open_load_ticks(d) + 2), ("mode", "coil"), ("on", 0), ("run", 2),
                                 ("clear", 0), ("run", 1), ("on", 0), ("run", lockout + 2)])
    states = run.states()
    assert states[6] == (FAULT_STATE, int(FaultCode.OPEN_LOAD)), "ON is ignored in FAULT"
    assert states[8][0] == RELEASE
    t_clear = open_load_ticks(d) + 4
    ons = [t for t, k, _ in run.events() if k == ON]
    assert ons == [0, t_clear + lockout], "after clear_fault() the lockout runs, then the pending ON"


def test_armature_seat_ends_the_peak_and_no_seat_is_stuck(tmp_path):
    d = example_design("locker-latch-12v")
    hv = HeaderView(d)
    # the stuck check waits SEAT_GRACE_TICKS past the latest seat (the climb that shows it)
    early, late = hv.value("SEAT_EARLIEST_TICKS"), hv.value("SEAT_LATEST_TICKS") + seat_grace_ticks(d)
    assert dip_codes(d) >= 2
    common = [("supply", nominal_supply_code(d)), ("full", d.adc.pull_in_code + 200)]
    seat_at = early + 3
    run = run_host(tmp_path, d, common + [("on", 0), ("run", 1), ("dip", seat_at - 1), ("run", late + 20)])
    ev = run.events()
    assert ev[1][1] == PEAK_END and seat_at <= ev[1][0] <= seat_at + 3, ev
    assert ev[1][0] < d.pull_in.peak_ticks, "the seat ends the peak before PEAK_TICKS"
    (tmp_path / "stuck").mkdir()
    run = run_host(tmp_path / "stuck", d, common + [("on", 0), ("run", late + 5)])
    assert run.events()[1] == (late + 1, FAULT, int(FaultCode.STUCK))
    # a dip before the window is not the seat
    (tmp_path / "early").mkdir()
    run = run_host(tmp_path / "early", d, common + [("on", 0), ("dip", early - 6), ("run", late + 5)])
    assert run.events()[1] == (late + 1, FAULT, int(FaultCode.STUCK))


def test_peak_limit_chops_between_its_codes(tmp_path):
    d = example_design("demo-valve")
    from coildrive.codegen.driver import DriverView
    consts = {c.name: c.value for c in DriverView(d).constants}
    high, low = consts["COIL_DRIVER_PEAK_LIMIT_HIGH_CODE"], consts["COIL_DRIVER_PEAK_LIMIT_LOW_CODE"]
    assert d.adc.pull_in_code < low < high < d.adc.over_current_code
    # the model's current heads for the over-current code: the limit must chop it first
    run = run_host(tmp_path, d, [("supply", nominal_supply_code(d)), ("full", d.adc.over_current_code + 50),
                                 ("on", 0), ("run", d.pull_in.peak_ticks - 5)], flags=("-DCOIL_DRIVER_PEAK_LIMIT=1",))
    switch = [on for _, _, on in run.calls("s")]
    assert switch.count(0) >= 3 and switch.count(1) >= 3, "chopped on and off in the peak"
    assert not [e for e in run.events() if e[1] == FAULT], "no over-current: the limit holds it below"


@pytest.mark.parametrize("control", ["hysteretic", "off_time"])
def test_current_mode_hold_arms_the_threshold_and_switches(tmp_path, control):
    d = example_design("demo-valve", ('frequency = "25 kHz"',
                                      f'frequency = "25 kHz"\nmode = "current"\ncontrol = "{control}"'))
    cm = d.hold.current_mode
    run = run_host(tmp_path, d, [("supply", nominal_supply_code(d)), ("full", 2 * d.adc.pull_in_code),
                                 ("on", 0), ("run", d.pull_in.peak_ticks + 40), ("off", 0), ("run", 3)])
    armed = [v for _, _, v in run.calls("w")]
    low = cm.lower_code if control == "hysteretic" else 0
    assert armed == [low * 65536 + cm.upper_code], "armed once at the start of the hold with the design's codes"
    assert len(run.calls("u")) >= 2, "disarmed at init and at the end of the hold"
    t_hold = d.pull_in.peak_ticks
    in_hold = [on for t, _, on in run.calls("s") if t > t_hold]
    assert in_hold.count(1) >= 2 and in_hold.count(0) >= 2, "the threshold switches the coil in the hold"
    if control == "off_time":
        assert {v for _, _, v in run.calls("o")} == {cm.off_ticks}, "the one-shot gets HOLD_OFF_TICKS"
    # the tick that reports OFF opens the switch itself (same tick and conversion count), not
    # the next conversion: the threshold handlers no longer switch outside HOLD
    (off,) = [(t, c) for t, c, k, _ in run.calls("e") if k == EventKind.OFF]
    assert off in [(t, c) for t, c, on in run.calls("s") if on == 0]


def test_supply_compensated_peak_takes_its_length_from_the_header(tmp_path):
    """With PEAK_COMPENSATED 1 the peak lasts prefix_peak_ticks_for_supply(code) ticks:
    the demo's header, at a low and a high supply reading."""
    d = example_design("demo-valve")
    assert d.peak_table is not None, "precondition: the demo's peak is compensated"
    for supply in (d.adc.supply_min_code, d.adc.supply_max_code):
        peak = _peak_at(d, supply)
        run = run_host(tmp_path, d, [("supply", supply), ("full", 2 * d.adc.pull_in_code), ("run", 1), ("on", 0),
                                     ("run", d.pull_in.peak_ticks + 5)])
        assert run.events()[:2] == [(1, ON, 0), (1 + peak, PEAK_END, 0)], f"supply code {supply}"
    assert _peak_at(d, d.adc.supply_max_code) < _peak_at(d, d.adc.supply_min_code)


def test_shorted_turns_trip_below_the_rise_limit(tmp_path):
    """The rise check (docs/firmware.md): the first conversion at or above RISE_CODE after
    n conversions from the switch-on, at supply code s, is SHORTED_TURNS when n x s is
    below RISE_LIMIT, the switch off in that conversion; one conversion later passes. The
    model's current climbs SLEW codes a conversion, so it first reads the code at
    conversion ceil(code / slew)."""
    d = example_design("demo-valve")
    rc = d.rise_check
    assert rc.limit > 0 and rc.by_supply
    s = nominal_supply_code(d)
    n_ok = -(-rc.limit // s)                  # the fewest conversions that pass at s
    per_tick = conversions_per_tick(d)
    for n, trips in ((n_ok - 1, True), (n_ok, False)):
        slew = next(k for k in range(1, rc.code + 1) if -(-rc.code // k) == n)
        folder = tmp_path / str(n)
        folder.mkdir()
        run = run_host(folder, d, [("supply", s), ("full", 2 * d.adc.pull_in_code), ("slew", slew), ("on", 0),
                                   ("run", n // per_tick + 3)])
        faults = [(t, c, v) for t, c, k, v in run.calls("e") if k == FAULT]
        # the switch goes on at tick 1, conversion 0 (n = 0); conversion n sees the code
        seen = divmod(per_tick + n, per_tick)
        if trips:
            assert faults == [(*seen, int(FaultCode.SHORTED_TURNS))], (n, s, rc.limit)
            assert switch_offs(run, 1)[0] == seen, "off in the conversion that sees it"
            assert run.states()[-1] == (FAULT_STATE, int(FaultCode.SHORTED_TURNS))
        else:
            assert faults == [], (n, s, rc.limit)
            assert run.states()[-1] == (PEAK, 0)


def test_rise_check_off_where_the_design_says_so(tmp_path):
    """The relay's 8-bit sense gives a rise code under 8 codes: RISE_LIMIT is 0 and the
    fastest rise passes (the harness climbs at the ADC's full scale in one conversion;
    the over-current code is above it and the design's pull-in code is reached)."""
    d = example_design("relay-12v")
    assert d.rise_check.limit == 0 and "codes of zero" in d.rise_check.why_off
    run = run_host(tmp_path, d, [("supply", nominal_supply_code(d)), ("full", d.adc.pull_in_code), ("slew", 0xFFFF),
                                 ("on", 0), ("run", 4)])
    assert not [e for e in run.events() if e[1] == FAULT]


def test_rise_check_without_supply_sense_counts_conversions_alone(tmp_path):
    """A board that does not read its supply (no [supply_sense]): the limit is in
    conversions alone (RISE_BY_SUPPLY 0, designed at the highest supply), so n below
    RISE_LIMIT trips and n = RISE_LIMIT passes (the demo valve on its board with the
    supply divider taken out, a fixed hold and peak)."""
    import re
    board = tmp_path / "nosense.toml"
    board.write_text(re.sub(r"\n\[supply_sense\][^\[]*", "\n", (BOARDS / "lab-m32-zener.toml").read_text()))
    text = (EXAMPLES / "demo-valve.toml").read_text().replace('board = "lab-m32-zener"', f'board = "{board}"')
    text = text.replace('regulation = "supply_table"', 'regulation = "fixed"').replace("compensate = true", "compensate = false")
    drive = tmp_path / "demo.toml"
    drive.write_text(text)
    d = design(load_drive(drive))
    rc = d.rise_check
    assert not rc.by_supply and rc.limit > 0
    per_tick = conversions_per_tick(d)
    for n, trips in ((rc.limit - 1, True), (rc.limit, False)):
        slew = next(k for k in range(1, rc.code + 1) if -(-rc.code // k) == n)
        folder = tmp_path / str(n)
        folder.mkdir()
        run = run_host(folder, d, [("supply", 0), ("full", 2 * d.adc.pull_in_code), ("slew", slew), ("on", 0),
                                   ("run", n // per_tick + 3)])
        faults = [(t, c, v) for t, c, k, v in run.calls("e") if k == FAULT]
        expected = [(*divmod(per_tick + n, per_tick), int(FaultCode.SHORTED_TURNS))] if trips else []
        assert faults == expected, (n, rc.limit)
